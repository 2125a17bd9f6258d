#!/usr/bin/env bash
# Runs every benchmark of Rete and its reference in the same command and prints one table of
# medians and ratios (reference time / Rete time: above 1 means Rete is faster). The machine
# is noisy, so only ratios measured within one run are compared.
#   bash bench/run.sh                 # all benches
#   bash bench/run.sh filters nn_infer  # only these (names of bench/bench_<name>.c)
# The Python references run on /usr/bin/python3 with Debian's OpenBLAS (pthread build) ahead
# of the reference BLAS, so that numpy, scipy and PyTorch run at their best here.
set -uo pipefail
here=$(cd "$(dirname "$0")/.." && pwd)
bash "$here/tools/build.sh" || exit 1
build=${RETE_BUILD_DIR:-$here/build}
names=("$@")
if [ ${#names[@]} -eq 0 ]; then
  for f in "$here"/bench/bench_*.c; do n=$(basename "$f" .c); names+=("${n#bench_}"); done
fi
results=$(mktemp)
trap 'rm -f "$results"' EXIT
export RETE_SOURCE_DIR=$here RETE_DATA_DIR=$here/../shared/data
# An environment may force OpenBLAS's kernel choice (OPENBLAS_CORETYPE=Haswell on an AVX-512
# machine was seen here) or its cache size: both sides run with OpenBLAS's own choice.
unset OPENBLAS_CORETYPE OPENBLAS_L2_SIZE
for n in "${names[@]}"; do
  exe="$build/bench/bench-${n//_/-}"
  [ -x "$exe" ] || exe="$build/bench/bench_$n"
  if [ -x "$exe" ]; then
    echo "== bench_$n" >&2
    "$exe" | tee -a "$results" >&2
  else
    echo "== bench_$n: not built ($exe)" >&2
  fi
  if [ -f "$here/bench/ref_$n.py" ]; then
    echo "== ref_$n.py" >&2
    LD_LIBRARY_PATH=/usr/lib/x86_64-linux-gnu/openblas-pthread${LD_LIBRARY_PATH:+:$LD_LIBRARY_PATH} \
      /usr/bin/python3 "$here/bench/ref_$n.py" | tee -a "$results" >&2
  fi
done
/usr/bin/python3 - "$results" <<'PY'
import sys, collections
rows = collections.OrderedDict()
for line in open(sys.argv[1]):
    p = line.split()
    if len(p) >= 4 and p[0] == "RESULT":
        rows[(p[1], p[2])] = float(p[3])
refs = ("-torch", "-sklearn", "-skimage", "-opencv", "-scipy", "-numpy")
print(f"{'measure':28} {'size':>12} {'Rete ms':>10} {'reference':>30} {'ref ms':>10} {'ratio':>7}")
for (name, size), ms in rows.items():
    if name.endswith(refs):
        continue
    paired = [(n, s, v) for (n, s), v in rows.items() if s == size and n.startswith(name + "-") and n.endswith(refs)]
    if not paired:
        print(f"{name:28} {size:>12} {ms:10.2f} {'-':>30} {'-':>10} {'-':>7}")
    for n, s, v in paired:
        print(f"{name:28} {size:>12} {ms:10.2f} {n:>30} {v:10.2f} {v / ms:7.2f}")
PY
