"""ref_clahe.py — reference timings for bench/bench_clahe.c: OpenCV's CLAHE (cv2 4.6,
createCLAHE, 8x8 tiles; clip limit in its own units, clip x tile area / 256 = 0.01 x 256 = 2.56,
the same limit as skimage's normalised 0.01 with 256 bins) and skimage 0.19's
equalize_adapthist (defaults: kernel 1/8 of each side, clip 0.01, 256 bins), on the picture of
bench_clahe.c. OpenCV runs on its native 8-bit (and 16-bit) input with its own threads (2 cores
here); skimage on float32 in [0, 1], one thread (numpy).
Prints `RESULT clahe-opencv <w>x<h> <median ms>`, `RESULT clahe-u16-opencv ...` and
`RESULT clahe-skimage ...`.
    /usr/bin/python3 bench/ref_clahe.py [runs]
By default OpenCV runs as many times as bench_clahe.c: 31 at 999x960, 9 at 3504x2336.
"""
import sys
import time

import cv2
import numpy as np
from skimage import exposure


def make_picture(width, height):
    y, x = np.mgrid[0:height, 0:width].astype(np.float64)
    u, v = x / width, y / height
    value = 0.25 + 0.35 * u * (1 - v) + 0.15 * np.sin(6 * u + 3 * v)
    d = np.abs(v - 0.5 - 0.25 * np.sin(5 * u))
    value -= 0.2 * np.exp(-d * d * 4e4)
    r2 = (u - 0.7) ** 2 + (v - 0.3) ** 2
    value += 0.3 * np.exp(-r2 / 0.004)
    value += 0.03 * np.sin(x * 1.7 + y * 0.3) * np.cos(y * 2.3 - x * 0.1)
    return np.round(np.clip(value, 0, 1) * 255).astype(np.uint8)


def median_ms(fn, runs):
    fn()  # warm-up
    times = []
    for _ in range(runs):
        t = time.perf_counter()
        fn()
        times.append((time.perf_counter() - t) * 1000.0)
    return float(np.median(times))


def main():
    asked = int(sys.argv[1]) if len(sys.argv) > 1 else 0
    for w, h in ((999, 960), (3504, 2336)):
        runs = asked if asked > 0 else (31 if w < 2000 else 9)
        u8 = make_picture(w, h)
        u16 = u8.astype(np.uint16) * 257
        grey = (u8 / 255.0).astype(np.float32)
        clahe = cv2.createCLAHE(clipLimit=0.01 * 256, tileGridSize=(8, 8))
        print("RESULT clahe-opencv %dx%d %.2f" % (w, h, median_ms(lambda: clahe.apply(u8), runs)),
              flush=True)
        print("RESULT clahe-u16-opencv %dx%d %.2f"
              % (w, h, median_ms(lambda: clahe.apply(u16), runs)), flush=True)
        sk_runs = max(1, min(runs, 3 if w < 2000 else 1))
        print("RESULT clahe-skimage %dx%d %.2f"
              % (w, h, median_ms(lambda: exposure.equalize_adapthist(grey), sk_runs)), flush=True)


if __name__ == "__main__":
    main()
