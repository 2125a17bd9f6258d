#!/usr/bin/env bash
# Opens each dialog of the Rete plug-in in real GIMP 2.10 on a virtual screen (Xvfb, openbox
# for title bars) and saves a screenshot of it:
#
#   tests/gimp/dialogs.sh OUTPUT-DIR
#
# Run by `meson test --suite gimp gimp-dialogs` (screenshots into the build dir); the README's
# pictures in docs/screenshots/ are made with OUTPUT-DIR=docs/screenshots. Exits 77 (skipped)
# when Xvfb, openbox, ImageMagick or GIMP is missing. A dialog that does not appear within the
# timeout, or a screenshot that is blank, fails the test.
# Needs RETE_GIMP_PLUGIN (the built plug-in); RETE_GIMP_PO_BUILD_DIR for the translations.
set -uo pipefail
out=${1:?usage: dialogs.sh OUTPUT-DIR}
here=$(cd "$(dirname "$0")/../.." && pwd)
source_dir=${RETE_SOURCE_DIR:-$here}
plugin=${RETE_GIMP_PLUGIN:-}
for tool in xvfb-run openbox import xwininfo dbus-run-session gimp gimp-console-2.10; do
  command -v "$tool" >/dev/null || { echo "SKIP: $tool is not installed"; exit 77; }
done
[ -x "$plugin" ] || { echo "SKIP: the plug-in is not built (RETE_GIMP_PLUGIN)"; exit 77; }
mkdir -p "$out"
out=$(cd "$out" && pwd)
photo="$source_dir/data/demo/demo-fundus.png"
reference="$source_dir/data/demo/demo-vessels.png"
fov="$source_dir/data/demo/demo-fov.png"
[ -f "$photo" ] || { echo "SKIP: $photo is absent"; exit 77; }

tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT
export HOME="$tmp/home" GIMP2_DIRECTORY="$tmp/profile" RETE_MODEL_DIR="$source_dir/models"
mkdir -p "$HOME"
timeout 120 gimp-console-2.10 -i -d -f -b '(gimp-quit 0)' >/dev/null 2>&1
dest="$GIMP2_DIRECTORY/plug-ins/rete-gimp"
mkdir -p "$dest"
install -m 755 "$plugin" "$dest/rete-gimp"
if [ -n "${RETE_GIMP_PO_BUILD_DIR:-}" ] && [ -d "$RETE_GIMP_PO_BUILD_DIR" ]; then
  for mo in "$RETE_GIMP_PO_BUILD_DIR"/*/LC_MESSAGES/rete-gimp.mo; do
    [ -f "$mo" ] || continue
    lang=$(basename "$(dirname "$(dirname "$mo")")")
    mkdir -p "$dest/locale/$lang/LC_MESSAGES"
    cp "$mo" "$dest/locale/$lang/LC_MESSAGES/"
  done
fi

# One dialog: NAME, window title, language, Script-Fu that opens it. Runs inside the X session.
cat > "$tmp/one.sh" <<'EOF'
#!/usr/bin/env bash
name=$1 title=$2 lang=$3 script=$4 out=$5
rm -f "$GIMP2_DIRECTORY"/backups/backup-*.xcf
GIMP_LANG=$lang LANGUAGE=$lang gimp -s -d -f -b "$script" >"$out/$name.log" 2>&1 &
pid=$!
found=""
for _ in $(seq 1 240); do
  found=$(xwininfo -root -tree 2>/dev/null | grep -F "\"$title\"" | awk '{print $1}' | head -n 1)
  [ -n "$found" ] && break
  sleep 0.5
done
status=0
if [ -z "$found" ]; then
  echo "dialog '$title' did not appear" >&2
  xwininfo -root -tree | grep '"' | head -n 20 >&2
  status=1
else
  sleep "${RETE_SCREENSHOT_WAIT:-6}"   # the live preview is computed after the dialog shows
  [ -x "${RETE_WARP_POINTER:-}" ] && "$RETE_WARP_POINTER"   # no widget lit by the pointer
  import -frame -window "$found" "$out/$name.png" || { echo "import failed for '$title'" >&2; status=1; }
fi
kill "$pid" 2>/dev/null
wait "$pid" 2>/dev/null
rm -f "$GIMP2_DIRECTORY"/backups/backup-*.xcf
exit $status
EOF
chmod +x "$tmp/one.sh"

open_photo="(car (file-png-load RUN-NONINTERACTIVE \"$photo\" \"\"))"
vessel="(let* ((i $open_photo) (d (car (gimp-image-get-active-drawable i)))) (gimp-display-new i)
  (plug-in-rete-vessel-map RUN-INTERACTIVE i d 1 \"standard\" 0 1 0 0 0 0 0 0 0 0.5 30 1 1 '(0 217 255) 70.0))"
fovscript="(let* ((i $open_photo) (d (car (gimp-image-get-active-drawable i)))) (gimp-display-new i)
  (plug-in-rete-field-of-view RUN-INTERACTIVE i d 0 0 1 0 0))"
agree="(let* ((i $open_photo) (d (car (gimp-image-get-active-drawable i)))
         (m (plug-in-rete-vessel-map RUN-NONINTERACTIVE i d 1 \"\" 0 1 0 0 0 0 0 0 0 0.5 30 0 0 '(0 217 255) 70.0))
         (r (car (file-png-load RUN-NONINTERACTIVE \"$reference\" \"\")))
         (f (car (file-png-load RUN-NONINTERACTIVE \"$fov\" \"\"))))
  (gimp-display-new i)
  (plug-in-rete-agreement RUN-INTERACTIVE i (list-ref m 1) (car (gimp-image-get-active-drawable r))
    (car (gimp-image-get-active-drawable f)) 0 0.5 2 '(0 200 0) '(255 0 0) '(0 80 255) \"\"))"
train="(plug-in-rete-train RUN-INTERACTIVE -1 -1 \"\" \"\" \"\" 1 1 2000 \"\" \"\")"
measure="(let* ((i (car (file-png-load RUN-NONINTERACTIVE \"$reference\" \"\"))) (d (car (gimp-image-get-active-drawable i)))
         (f (car (file-png-load RUN-NONINTERACTIVE \"$fov\" \"\")))) (gimp-display-new i)
  (plug-in-rete-measure RUN-INTERACTIVE i d (car (gimp-image-get-active-drawable f)) 0 10 1 \"\"))"

cat > "$tmp/session.sh" <<EOF
#!/usr/bin/env bash
openbox >/dev/null 2>&1 &
sleep 1
failed=0
# RETE_SCREENSHOT_ONLY=name limits the run to one dialog.
want () { [ -z "\${RETE_SCREENSHOT_ONLY:-}" ] || [ "\$RETE_SCREENSHOT_ONLY" = "\$1" ]; }
want vessel-map && { "$tmp/one.sh" vessel-map "Vessel Map" en "\$1" "$out" || failed=1; }
want field-of-view && { "$tmp/one.sh" field-of-view "Field of View" en "\$2" "$out" || failed=1; }
want agreement && { "$tmp/one.sh" agreement "Agreement with Reference" en "\$3" "$out" || failed=1; }
want train && { "$tmp/one.sh" train "Train Vessel Model" en "\$4" "$out" || failed=1; }
want measure && { "$tmp/one.sh" measure "Vessel Measurements" en "\$5" "$out" || failed=1; }
if [ -f "$dest/locale/de/LC_MESSAGES/rete-gimp.mo" ]; then
  want vessel-map-de && { "$tmp/one.sh" vessel-map-de "Gefäßkarte" de "\$1" "$out" || failed=1; }
  want agreement-de && { "$tmp/one.sh" agreement-de "Übereinstimmung mit der Referenz" de "\$3" "$out" || failed=1; }
fi
if [ -f "$dest/locale/es/LC_MESSAGES/rete-gimp.mo" ]; then
  want vessel-map-es && { "$tmp/one.sh" vessel-map-es "Mapa de vasos" es "\$1" "$out" || failed=1; }
fi
exit \$failed
EOF
chmod +x "$tmp/session.sh"
xvfb-run -a -s "-screen 0 1280x900x24" dbus-run-session -- "$tmp/session.sh" "$vessel" "$fovscript" "$agree" "$train" "$measure"
status=$?

# A blank picture (one colour) is a failure too.
for png in "$out"/*.png; do
  [ -f "$png" ] || continue
  colours=$(convert "$png" -format '%k' info:)
  echo "$(basename "$png"): $(identify -format '%wx%h' "$png"), $colours colours"
  [ "$colours" -gt 16 ] || { echo "$png looks blank" >&2; status=1; }
done
exit $status
