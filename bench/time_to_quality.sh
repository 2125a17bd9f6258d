#!/usr/bin/env bash
# Time to quality: trains the standard U-Net (3 levels, 16 base filters, 2 convolutions per
# block) in Rete and in PyTorch 1.13 from the same CHASE_DB1 photographs, the same validation
# list (Image_09L, 09R, 10L, 10R) and the same recipe (that of models/standard.safetensors:
# batch 16 of 64x64, AdamW 2e-3 with cosine decay, BCE, all augmentations), 2 threads each,
# one after the other, and prints when each first reached each validation AUC, and whether
# Rete reached PyTorch's best validation AUC in at most half PyTorch's wall-clock time.
#   bash bench/time_to_quality.sh [STEPS [VALIDATE_EVERY [SEED]]]   (default 4000 250 1)
# Needs ../shared/data/chase_db1 (or RETE_DATA_DIR) and /usr/bin/python3 with python3-torch.
set -euo pipefail
here=$(cd "$(dirname "$0")/.." && pwd)
bash "$here/tools/build.sh"
build=${RETE_BUILD_DIR:-$here/build}
data=${RETE_DATA_DIR:-$here/../shared/data}/chase_db1
steps=${1:-4000} every=${2:-250} seed=${3:-1}
[ -d "$data/images" ] || { echo "time_to_quality: no CHASE_DB1 at $data (set RETE_DATA_DIR)" >&2; exit 2; }
out=${RETE_TTQ_DIR:-$(mktemp -d)}
mkdir -p "$out"
unset OPENBLAS_CORETYPE OPENBLAS_L2_SIZE  # both sides with OpenBLAS's own kernel choice
echo "time_to_quality: logs in $out; load before: $(cut -d' ' -f1-3 /proc/loadavg)" >&2

t0=$(date +%s.%N)
RETE_THREADS=2 "$build/cli/rete" train --annotations "$data/manual1" --masks "$data/mask" \
  --validate Image_09L,Image_09R,Image_10L,Image_10R --size standard --steps "$steps" \
  --validate-every "$every" --batch 16 --learning-rate 2e-3 --dice-weight 0 --seed "$seed" \
  --log "$out/rete.csv" --output "$out/rete.safetensors" "$data/images" >&2
t1=$(date +%s.%N)
echo "time_to_quality: rete train took $(echo "$t1 - $t0" | bc) s; load: $(cut -d' ' -f1-3 /proc/loadavg)" >&2

LD_LIBRARY_PATH=/usr/lib/x86_64-linux-gnu/openblas-pthread${LD_LIBRARY_PATH:+:$LD_LIBRARY_PATH} \
  /usr/bin/python3 "$here/bench/ttq_torch.py" "$data" "$steps" "$every" "$seed" "$out/torch.csv"
t2=$(date +%s.%N)
echo "time_to_quality: PyTorch took $(echo "$t2 - $t1" | bc) s; load: $(cut -d' ' -f1-3 /proc/loadavg)" >&2

/usr/bin/python3 - "$out/rete.csv" "$out/torch.csv" "$t0" "$t1" <<'PY'
import csv, sys
all_rows = list(csv.DictReader(open(sys.argv[1])))
rete_rows = [r for r in all_rows if r["validation_auc"] not in ("", "nan")]
# Rete's log counts seconds from the start of training, after loading the photographs; add
# everything else the process spent (loading, and the final evaluation and save) to every row,
# so that Rete's seconds, like PyTorch's, count from the start of the process (conservative)
total_rete = float(sys.argv[4]) - float(sys.argv[3])
last = max(float(r["seconds"]) for r in all_rows if r["seconds"] not in ("", "nan"))
startup = total_rete - last
rete = [(int(r["step"]), float(r["seconds"]) + startup, float(r["validation_auc"])) for r in rete_rows]
torch = [(int(r["step"]), float(r["seconds"]), float(r["validation_auc"])) for r in csv.DictReader(open(sys.argv[2]))]
print("%6s %10s %8s %10s %8s" % ("step", "Rete s", "AUC", "PyTorch s", "AUC"))
for i in range(max(len(rete), len(torch))):
    a = rete[i] if i < len(rete) else (0, float("nan"), float("nan"))
    b = torch[i] if i < len(torch) else (0, float("nan"), float("nan"))
    print("%6d %10.1f %8.4f %10.1f %8.4f" % (a[0] or b[0], a[1], a[2], b[1], b[2]))
best = max(torch, key=lambda r: r[2])
first = next((r for r in rete if r[2] >= best[2]), None)
print("PyTorch best validation AUC %.4f at step %d, %.1f s (run %.1f s)" % (best[2], best[0], best[1], torch[-1][1]))
if first is None:
    print("Rete never reached %.4f (best %.4f); Rete run %.1f s" % (best[2], max(r[2] for r in rete), total_rete))
else:
    print("Rete reached %.4f at step %d, %.1f s: %.2f x sooner (target >= 2)" % (first[2], first[0], first[1], best[1] / first[1]))
PY
