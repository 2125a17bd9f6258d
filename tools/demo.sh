#!/usr/bin/env bash
# The README's first command: installs what is missing (Debian packages), builds Rete, and runs
# the main job on the bundled demo photograph (invented data from Rete's own generator) through
# real GIMP 2.10 in batch mode (an .xcf with the photograph, vessel and field-of-view layers,
# plus PNGs) and through the `rete` command. Prints where the results are.
set -euo pipefail
here=$(cd "$(dirname "$0")/.." && pwd)
bash "$here/tools/deps.sh" build
bash "$here/tools/build.sh"
build=${RETE_BUILD_DIR:-$here/build}
out=${RETE_DEMO_DIR:-$here/demo-output}
photo="$here/data/demo/demo-fundus.png"
mkdir -p "$out/gimp" "$out/rete"

echo "rete: the demo photograph through GIMP 2.10 in batch mode" >&2
RETE_BUILD_DIR=$build bash "$here/tools/demo-gimp.sh" "$photo" "$out/gimp"

echo "rete: the same photograph with the rete command (U-Net when shipped, and Frangi)" >&2
method=(--method frangi)
[ -f "$here/models/standard.safetensors" ] && method=(--method learned --model standard)
"$build/cli/rete" vessels "${method[@]}" --write-fov --output-dir "$out/rete" "$photo"
"$build/cli/rete" agreement --reference "$here/data/demo/demo-vessels.png" \
  --mask "$here/data/demo/demo-fov.png" "$out/rete/demo-fundus-vessel-probability.png" || true

echo "rete: results are in $out:" >&2
find "$out" -type f | sort
