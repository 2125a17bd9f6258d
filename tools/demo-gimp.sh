#!/usr/bin/env bash
# The main job through real GIMP 2.10 in batch mode: the Rete plug-in maps the vessels of a
# photograph and finds its field of view, and GIMP writes an .xcf holding the photograph, the
# vessel layers and the field-of-view layer, plus PNGs of each layer; the paths are printed.
#
#   tools/demo-gimp.sh [PHOTOGRAPH] [OUTPUT-DIR]
#
# PHOTOGRAPH defaults to data/demo/demo-fundus.png (invented by Rete's own generator; when it is
# absent a synthetic one is made with `rete synth`), OUTPUT-DIR to ./demo-output/gimp.
# The build dir is $RETE_BUILD_DIR or ./build. GIMP runs with an isolated profile and HOME in
# a temporary folder (your own GIMP settings are not touched); the plug-in is installed into
# that profile from the build dir, exactly as `meson install` lays it out. The learned method
# (U-Net, model "standard") is used when the model is shipped, else the Frangi filter.
set -euo pipefail
here=$(cd "$(dirname "$0")/.." && pwd)
build=${RETE_BUILD_DIR:-$here/build}
photo=${1:-$here/data/demo/demo-fundus.png}
out=${2:-$PWD/demo-output/gimp}
plugin="$build/plugin/rete-gimp"

command -v gimp-console-2.10 >/dev/null || { echo "demo-gimp: gimp-console-2.10 is not installed (apt-get install gimp)" >&2; exit 1; }
[ -x "$plugin" ] || { echo "demo-gimp: the plug-in is not built: $plugin (build with -Dplugin=true)" >&2; exit 1; }
mkdir -p "$out"
out=$(cd "$out" && pwd)

if [ ! -f "$photo" ]; then
  echo "demo-gimp: $photo is absent; making a synthetic photograph with rete synth" >&2
  "$build/cli/rete" synth --seed 2026 --size 999x960 --name demo --output-dir "$out"
  photo="$out/demo-fundus.png"
  [ -f "$photo" ] || photo=$(ls "$out"/demo*.png | head -n 1)
fi
photo=$(cd "$(dirname "$photo")" && pwd)/$(basename "$photo")

tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT
export HOME="$tmp/home" GIMP2_DIRECTORY="$tmp/profile" RETE_MODEL_DIR="$here/models"
export LD_LIBRARY_PATH="$build${LD_LIBRARY_PATH:+:$LD_LIBRARY_PATH}"
mkdir -p "$HOME"
run_gimp () {
  timeout "${RETE_GIMP_TIMEOUT:-600}" gimp-console-2.10 -i -d -f -b "$1" -b '(gimp-quit 0)' 2>&1 \
    | grep -v -e 'Two different plugins tried to register' -e '^$' || true
}
# GIMP makes its profile on a first run; the plug-in goes in afterwards.
run_gimp '(gimp-message "profile ready")' >/dev/null
mkdir -p "$GIMP2_DIRECTORY/plug-ins/rete-gimp"
install -m 755 "$plugin" "$GIMP2_DIRECTORY/plug-ins/rete-gimp/rete-gimp"

if [ -f "$here/models/standard.safetensors" ]; then method=0; label="U-Net (model standard)"; else method=1; label="Frangi vesselness"; fi
name=$(basename "${photo%.*}")
xcf="$out/$name-rete.xcf"
cat > "$tmp/demo.scm" <<EOF
(let* ((image (car (gimp-file-load RUN-NONINTERACTIVE "$photo" "$photo")))
       (photo (car (gimp-image-get-active-drawable image)))
       (out (plug-in-rete-vessel-map RUN-NONINTERACTIVE image photo $method "standard" 0 1
              0 0 0 0 0 0 0 0.5 30 1 1 '(0 217 255) 70.0)))
  (gimp-item-set-name photo "Photograph")
  (file-png-save2 RUN-NONINTERACTIVE image (list-ref out 1) "$out/$name-vessel-probability.png" "" 0 9 0 0 0 0 0 0 0)
  (file-png-save2 RUN-NONINTERACTIVE image (list-ref out 2) "$out/$name-vessels-binary.png" "" 0 9 0 0 0 0 0 0 0)
  (file-png-save2 RUN-NONINTERACTIVE image (list-ref out 3) "$out/$name-vessel-overlay.png" "" 0 9 0 0 0 0 0 0 1)
  (file-png-save2 RUN-NONINTERACTIVE image (list-ref out 4) "$out/$name-field-of-view.png" "" 0 9 0 0 0 0 0 0 0)
  (let ((flat (car (gimp-image-duplicate image))))
    (file-png-save2 RUN-NONINTERACTIVE flat (car (gimp-image-merge-visible-layers flat CLIP-TO-IMAGE))
                    "$out/$name-photograph-with-overlay.png" "" 0 9 0 0 0 0 0 0 0)
    (gimp-image-delete flat))
  (gimp-xcf-save 0 image photo "$xcf" "$xcf")
  (gimp-message (string-append "RETE-DONE threshold " (number->string (list-ref out 5))))
  (gimp-image-delete image))
EOF
echo "demo-gimp: mapping the vessels of $photo with $label in GIMP (batch mode)" >&2
start=$(date +%s.%N)
log=$(run_gimp "(load \"$tmp/demo.scm\")")
end=$(date +%s.%N)
if ! grep -q "RETE-DONE" <<<"$log"; then
  echo "$log" >&2
  echo "demo-gimp: GIMP did not finish the job (see the messages above)" >&2
  exit 1
fi
printf 'demo-gimp: done in %.1f s (GIMP start included)\n' "$(echo "$end - $start" | bc)" >&2
echo "GIMP image (photograph, vessel and field-of-view layers): $xcf"
for f in "$out/$name"-vessel-probability.png "$out/$name"-vessels-binary.png "$out/$name"-vessel-overlay.png \
         "$out/$name"-field-of-view.png "$out/$name"-photograph-with-overlay.png; do
  echo "PNG: $f"
done
