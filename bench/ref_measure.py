"""ref_measure.py — Python references for bench/bench_measure.c on the same HRF manual map
(default $RETE_DATA_DIR/hrf_manual/01_h.png, thresholded at 128 as the bench does at 0.5):
skimage.morphology.skeletonize (skimage 0.19, 2-D Zhang table) and
scipy.ndimage.distance_transform_edt.

  ref_measure.py [map.png] [runs]      (default 3 runs)
prints `RESULT skeleton-skimage <w>x<h> <ms>` and `RESULT distance-scipy <w>x<h> <ms>`
(median of the runs; reading the file is not timed)."""
import os
import sys
import time

import numpy as np
from scipy.ndimage import distance_transform_edt
from skimage.io import imread
from skimage.morphology import skeletonize


def median_ms(fn, runs):
    times = []
    for _ in range(runs):
        t = time.perf_counter()
        fn()
        times.append((time.perf_counter() - t) * 1000)
    return sorted(times)[len(times) // 2]


def main(argv):
    data = os.environ.get("RETE_DATA_DIR", "../shared/data")
    path = argv[1] if len(argv) > 1 else os.path.join(data, "hrf_manual", "01_h.png")
    runs = int(argv[2]) if len(argv) > 2 else 3
    a = imread(path)
    if a.ndim == 3:
        a = a[..., 0]
    m = a >= 128
    h, w = m.shape
    print(f"RESULT skeleton-skimage {w}x{h} {median_ms(lambda: skeletonize(m), runs):.1f}")
    print(f"RESULT distance-scipy {w}x{h} {median_ms(lambda: distance_transform_edt(m), runs):.1f}")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
