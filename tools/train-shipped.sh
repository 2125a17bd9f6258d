#!/usr/bin/env bash
# train-shipped.sh — retrains the shipped models (models/tiny.safetensors, models/standard.safetensors)
# with `rete train` on CHASE_DB1 (../shared/data/chase_db1, never committed), exactly as their
# model cards in models/README.md say. Long: run it in the background, e.g.
#   nohup bash tools/train-shipped.sh > train-shipped.log 2>&1 &
# Each run writes MODEL.csv (loss and validation AUC) and MODEL.safetensors.checkpoint; when a
# run is killed, running this script again resumes it (--resume) from its last checkpoint.
#   bash tools/train-shipped.sh [tiny|standard]...   (default: tiny then standard)
set -euo pipefail
here=$(cd "$(dirname "$0")/.." && pwd)
data=${RETE_DATA_DIR:-$here/../shared/data}/chase_db1
build=${RETE_BUILD_DIR:-$here/build}
out=${RETE_MODEL_OUT:-$here/models}
rete=$build/cli/rete
[ -x "$rete" ] || { echo "build rete first (meson setup $build && ninja -C $build)" >&2; exit 1; }
[ -d "$data/images" ] || { echo "CHASE_DB1 not found at $data" >&2; exit 1; }
validate=Image_09L,Image_09R,Image_10L,Image_10R
common=(--annotations "$data/manual1" --masks "$data/mask" --validate "$validate" --resume)
sizes=("$@")
[ ${#sizes[@]} -gt 0 ] || sizes=(tiny standard)
for size in "${sizes[@]}"; do
  case $size in
    tiny)     args=(--size tiny --steps 6000 --validate-every 500 --batch 32 --learning-rate 1e-2 --dice-weight 0 --seed 1) ;;
    standard) args=(--size standard --steps 4000 --validate-every 500 --batch 16 --learning-rate 2e-3 --dice-weight 0 --seed 1) ;;
    *) echo "unknown size $size (tiny or standard)" >&2; exit 2 ;;
  esac
  mkdir -p "$out"
  "$rete" train "${common[@]}" "${args[@]}" --print-every 100 \
    --output "$out/$size.safetensors" "$data/images"
done
