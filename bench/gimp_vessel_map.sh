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

seconds () { local s e; s=$(date +%s.%N); "$@"; e=$(date +%s.%N); echo "$e - $s" | bc; }
median () { printf '%s\n' "$@" | sort -g | sed -n 2p; }
a=(); b=(); c=()
for _ in 1 2 3; do
  a+=("$(seconds gimp_run "$alone")")
  b+=("$(seconds gimp_run "$call")")
  grep -q "RETE-DONE" "$tmp/log" || { cat "$tmp/log" >&2; echo "the vessel map call failed" >&2; exit 1; }
  if [ "$method" = learned ]; then cli=(vessels --method learned --model standard); else cli=(vessels --method frangi); fi
  cli+=(--threshold "$rule")
  c+=("$(seconds "$build/cli/rete" "${cli[@]}" --output-dir "$tmp/cli" "$photo" >/dev/null 2>&1)")
done
size=$(identify -format '%wx%h' "$photo" 2>/dev/null || echo "?")
ma=$(median "${a[@]}"); mb=$(median "${b[@]}"); mc=$(median "${c[@]}")
call_ms=$(echo "($mb - $ma) * 1000" | bc)
cli_ms=$(echo "$mc * 1000" | bc)
echo "RESULT gimp-vessel-map-$method $size $call_ms"
echo "RESULT gimp-vessel-map-$method-cli $size $cli_ms"
printf '%-34s %10s %10s\n' "measure ($method, $(basename "$photo"), $size)" "ms" "runs (s)"
printf '%-34s %10.0f %10s\n' "GIMP start + load + quit" "$(echo "$ma*1000" | bc)" "${a[*]}"
printf '%-34s %10.0f %10s\n' "... + vessel map call" "$(echo "$mb*1000" | bc)" "${b[*]}"
printf '%-34s %10.0f\n' "call to layers (difference)" "$call_ms"
printf '%-34s %10.0f %10s\n' "rete vessels (same job, no GIMP)" "$cli_ms" "${c[*]}"
printf '%-34s %10.2f\n' "ratio rete vessels / GIMP call" "$(echo "$cli_ms / $call_ms" | bc -l)"
