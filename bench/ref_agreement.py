"""ref_agreement.py — scikit-learn reference for bench/bench_agreement.c: the same data (the
same splitmix64 generator, bit for bit), sklearn.metrics.roc_auc_score on the samples inside
the field of view (the masking itself is not timed, in sklearn's favour).

  ref_agreement.py [runs]      (default 3)
prints `RESULT auc-sklearn <w>x<h> <ms>` and `RESULT auc-quantised-sklearn <w>x<h> <ms>`
(median of the runs), and the AUC so it can be compared with the bench's."""
import sys
import time

import numpy as np
from sklearn.metrics import roc_auc_score


def mix(z):
    z = z + np.uint64(0x9E3779B97F4A7C15)
    z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
    z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
    return z ^ (z >> np.uint64(31))


def uniform(i):
    return (mix(i) >> np.uint64(40)).astype(np.float64) / 16777216.0


def make_data(width, height, quantised):
    i = np.arange(width * height, dtype=np.uint64)
    vessel = uniform(np.uint64(2) * i) < 0.12
    s = np.where(vessel, 0.62, 0.38) + 0.6 * (uniform(np.uint64(2) * i + np.uint64(1)) - 0.5)
    s = np.clip(s, 0.0, 1.0)
    if quantised:
        s = np.rint(s * 255.0) / 255.0
    y, x = np.divmod(np.arange(width * height), width)
    cx, cy, r = (width - 1) / 2.0, (height - 1) / 2.0, 0.48 * min(width, height)
    inside = (x - cx) * (x - cx) + (y - cy) * (y - cy) <= r * r
    return s.astype(np.float32)[inside], vessel[inside]


def main():
    runs = int(sys.argv[1]) if len(sys.argv) > 1 else 3
    np.seterr(over="ignore")
    for width, height in ((3504, 2336), (999, 960)):
        for quantised in (False, True):
            s, y = make_data(width, height, quantised)
            ms, cpu = [], []
            for _ in range(runs):
                t, c = time.perf_counter(), time.process_time()
                auc = roc_auc_score(y, s)
                ms.append((time.perf_counter() - t) * 1000.0)
                cpu.append((time.process_time() - c) * 1000.0)
            ms.sort()
            cpu.sort()
            name = "auc-quantised-sklearn" if quantised else "auc-sklearn"
            print(f"# {width}x{height} {'8-bit' if quantised else 'float'} scores: AUC {auc:.12f}, "
                  f"runs {runs}, fastest {ms[0]:.1f} ms, median CPU time {cpu[len(cpu) // 2]:.1f} ms")
            print(f"RESULT {name} {width}x{height} {ms[len(ms) // 2]:.2f}", flush=True)


if __name__ == "__main__":
    main()
