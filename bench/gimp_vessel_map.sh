#!/usr/bin/env bash
# Time from call to layers of the vessel map procedure in real GIMP 2.10 (batch mode) on a
# 999×960 photograph, against the `rete vessels` command on the same photograph in the same
# run (the same librete job without GIMP: the ratio shows what the GIMP glue costs).
#
#   bash bench/gimp_vessel_map.sh [PHOTOGRAPH] [METHOD]
#
# PHOTOGRAPH: default ../shared/data/chase_db1/images/Image_01L.jpg (999×960), else the demo
# photograph. METHOD: learned (model "standard", the default when it is shipped) or frangi.
# Call to layers = wall time of GIMP loading the photograph and running the procedure, minus
# that of GIMP loading it alone (same script without the call); each the median of 3 runs.
# It includes the plug-in's process start, model loading, reading the drawable, the job and
# writing the layers. Prints RESULT lines as bench/run.sh does and a small table.
set -uo pipefail
here=$(cd "$(dirname "$0")/.." && pwd)
build=${RETE_BUILD_DIR:-$here/build}
photo=${1:-$here/../shared/data/chase_db1/images/Image_01L.jpg}
[ -f "$photo" ] || photo="$here/data/demo/demo-fundus.png"
photo=$(cd "$(dirname "$photo")" && pwd)/$(basename "$photo")
method=${2:-}
if [ -z "$method" ]; then
  if [ -f "$here/models/standard.safetensors" ]; then method=learned; else method=frangi; fi
fi
# The same settings both ways: learned with Otsu's threshold, Frangi with 12 % vessel fraction.
case $method in
  learned) code=0; threshold="0 0.5"; rule=otsu ;;
  frangi) code=1; threshold="2 0.12"; rule=fraction:0.12 ;;
  *) echo "method: learned or frangi" >&2; exit 2 ;;
esac
plugin="$build/plugin/rete-gimp"
[ -x "$plugin" ] || { echo "the plug-in is not built: $plugin" >&2; exit 1; }

tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT
export HOME="$tmp/home" GIMP2_DIRECTORY="$tmp/profile" RETE_MODEL_DIR="$here/models"
export LD_LIBRARY_PATH="$build${LD_LIBRARY_PATH:+:$LD_LIBRARY_PATH}"
mkdir -p "$HOME"
gimp_run () { timeout 900 gimp-console-2.10 -i -d -f -b "$1" -b '(gimp-quit 0)' >"$tmp/log" 2>&1; }
gimp_run '(gimp-message "profile")'
mkdir -p "$GIMP2_DIRECTORY/plug-ins/rete-gimp"
install -m 755 "$plugin" "$GIMP2_DIRECTORY/plug-ins/rete-gimp/rete-gimp"
gimp_run '(gimp-message "query")'   # GIMP queries the new plug-in once

load="(car (gimp-file-load RUN-NONINTERACTIVE \"$photo\" \"$photo\"))"
alone="(let ((i $load)) (gimp-image-delete i) (gimp-message \"RETE-DONE\"))"
call="(let* ((i $load) (d (car (gimp-image-get-active-drawable i))))
  (plug-in-rete-vessel-map RUN-NONINTERACTIVE i d $code \"standard\" 0 1 0 0 0 0 0 0 $threshold 30 1 1 '(0 217 255) 70.0)
  (gimp-image-delete i) (gimp-message \"RETE-DONE\"))"

# One timed run: wall seconds and CPU seconds (user + system, children included: GIMP,
# Script-Fu and the plug-in) into $wall and $cpu.
timed () {
  /usr/bin/time -f "%e %U %S" -o "$tmp/time" "$@" >"$tmp/log" 2>&1
  wall=$(awk '{ print $1 }' "$tmp/time"); cpu=$(awk '{ print $2 + $3 }' "$tmp/time")
}
gimp_timed () { timed timeout 900 gimp-console-2.10 -i -d -f -b "$1" -b '(gimp-quit 0)'; }
median () { printf '%s\n' "$@" | sort -g | sed -n 2p; }
if [ "$method" = learned ]; then cli=(vessels --method learned --model standard); else cli=(vessels --method frangi); fi
cli+=(--threshold "$rule" --output-dir "$tmp/cli")
a=(); b=(); c=(); d=(); ca=(); cb=(); cc=()
for _ in 1 2 3; do
  gimp_timed "$alone"; a+=("$wall"); ca+=("$cpu"); ta=$wall
  gimp_timed "$call"; b+=("$wall"); cb+=("$cpu")
  grep -q "RETE-DONE" "$tmp/log" || { cat "$tmp/log" >&2; echo "the vessel map call failed" >&2; exit 1; }
  d+=("$(echo "$wall - $ta" | bc)")
  timed "$build/cli/rete" "${cli[@]}" "$photo"; c+=("$wall"); cc+=("$cpu")
done
size=$(identify -format '%wx%h' "$photo" 2>/dev/null || echo "?")
call_ms=$(echo "$(median "${d[@]}") * 1000" | bc)
cli_ms=$(echo "$(median "${c[@]}") * 1000" | bc)
cpu_call=$(echo "$(median "${cb[@]}") - $(median "${ca[@]}")" | bc)
echo "RESULT gimp-vessel-map-$method $size $call_ms"
echo "RESULT gimp-vessel-map-$method-cli $size $cli_ms"
echo "measure ($method, $(basename "$photo"), $size; median of 3; load average $(cut -d' ' -f1 /proc/loadavg))"
printf '  %-44s %8.0f ms   runs %s\n' "GIMP start + load + quit" "$(echo "$(median "${a[@]}")*1000" | bc)" "${a[*]}"
printf '  %-44s %8.0f ms   runs %s\n' "... + vessel map call" "$(echo "$(median "${b[@]}")*1000" | bc)" "${b[*]}"
printf '  %-44s %8.0f ms   pairs %s\n' "call to layers (paired difference)" "$call_ms" "${d[*]}"
printf '  %-44s %8.2f s\n' "CPU of the call (user+system, difference)" "$cpu_call"
printf '  %-44s %8.0f ms   runs %s\n' "rete vessels (same job, no GIMP)" "$cli_ms" "${c[*]}"
printf '  %-44s %8.2f s\n' "CPU of rete vessels (user+system)" "$(median "${cc[@]}")"
printf '  %-44s %8.2f\n' "ratio rete vessels / GIMP call (wall)" "$(echo "$cli_ms / $call_ms" | bc -l)"
