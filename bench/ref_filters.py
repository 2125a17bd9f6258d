"""ref_filters.py — reference timings for bench/bench_filters.c, on the same picture:
  RESULT frangi-skimage <w>x<h> <ms>   skimage.filters.frangi (skimage 0.19) with the sigmas of
                                        rete_frangi_params_init (SIGMAS below), beta 0.5,
                                        gamma = c (explicit), black_ridges, mode='reflect' — the
                                        same output as rete_frangi_raw with skimage's Hessian
                                        (tests/test_filters.c holds the two together)
  RESULT matched-opencv <w>x<h> <ms>   cv2.filter2D (OpenCV 4.6, BORDER_REFLECT, its own threads)
                                        with the same 12 zero-mean, unit-energy matched kernels
                                        as rete_matched_kernel (built below by the same rule),
                                        then the maximum over orientations
  RESULT cpu-frangi-skimage / cpu-matched-opencv   the same in CPU time of the process
                                        (time.process_time), OpenCV on one thread
skimage runs on one core (numpy); OpenCV on both (cv2.setNumThreads(1) for the CPU-time line).
    /usr/bin/python3 bench/ref_filters.py [runs]      (default 5; median after one warm-up)
"""
import math
import sys
import time

import cv2
import numpy as np
from skimage.filters import frangi

# Keep in step with rete_frangi_params_init and rete_matched_params_init (vessel/frangi.c,
# vessel/matched.c).
SIGMAS = [2.0, 4.0, 6.0, 8.0]
FRANGI_C = 0.05
MF_SIGMA, MF_LENGTH, MF_ORIENTATIONS = 4.0, 21.0, 12


def make_picture(width, height):
    y, x = np.mgrid[0:height, 0:width].astype(np.float64)
    u, v = x / width, y / height
    value = 0.45 + 0.2 * u * (1 - v) + 0.1 * np.sin(6 * u + 3 * v)
    for k in range(4):
        d = np.abs(v - 0.2 - 0.2 * k - 0.08 * np.sin((4 + k) * u)) * height
        s = 1.0 + k
        value -= 0.15 * np.exp(-d * d / (2 * s * s))
    r2 = (u - 0.7) ** 2 + (v - 0.3) ** 2
    value += 0.3 * np.exp(-r2 / 0.004)
    value += 0.02 * np.sin(x * 1.7 + y * 0.3) * np.cos(y * 2.3 - x * 0.1)
    return (np.round(np.clip(value, 0, 1) * 255) / 255).astype(np.float32)


def matched_kernel(sigma, length, n, k):
    """Chaudhuri et al. 1989: -exp(-u^2 / 2 sigma^2) on |u| <= 3 sigma, |v| <= L/2, zero mean,
    scaled to unit energy (as vessel/matched.c)."""
    half = int(math.floor(math.hypot(3 * sigma, length / 2) + 1e-9))
    th = math.pi * k / n
    y, x = np.mgrid[-half:half + 1, -half:half + 1].astype(np.float64)
    u = x * math.cos(th) + y * math.sin(th)
    v = -x * math.sin(th) + y * math.cos(th)
    inside = (np.abs(u) <= 3 * sigma + 1e-9) & (np.abs(v) <= length / 2 + 1e-9)
    kern = np.where(inside, -np.exp(-u * u / (2 * sigma * sigma)), 0.0)
    kern[inside] -= kern[inside].mean()
    kern /= math.sqrt((kern ** 2).sum())
    return kern.astype(np.float32)


def median_ms(fn, runs, clock=time.perf_counter):
    fn()  # warm-up
    times = []
    for _ in range(runs):
        t = clock()
        fn()
        times.append((clock() - t) * 1000.0)
    return float(np.median(times))


def main():
    runs = int(sys.argv[1]) if len(sys.argv) > 1 else 5
    kernels = [matched_kernel(MF_SIGMA, MF_LENGTH, MF_ORIENTATIONS, k) for k in range(MF_ORIENTATIONS)]
    for w, h in ((999, 960), (3504, 2336)):
        grey = make_picture(w, h)
        ms = median_ms(lambda: frangi(grey, sigmas=SIGMAS, beta=0.5, gamma=FRANGI_C,
                                      black_ridges=True, mode="reflect"), max(1, runs // 2))
        print("RESULT frangi-skimage %dx%d %.2f" % (w, h, ms), flush=True)

        def matched():
            out = None
            for kern in kernels:
                r = cv2.filter2D(grey, -1, kern, borderType=cv2.BORDER_REFLECT)
                out = r if out is None else np.maximum(out, r)
            return out
        print("RESULT matched-opencv %dx%d %.2f" % (w, h, median_ms(matched, runs)), flush=True)
        ms = median_ms(lambda: frangi(grey, sigmas=SIGMAS, beta=0.5, gamma=FRANGI_C,
                                      black_ridges=True, mode="reflect"), max(1, runs // 2),
                       time.process_time)
        print("RESULT cpu-frangi-skimage %dx%d %.2f" % (w, h, ms), flush=True)
        threads = cv2.getNumThreads()
        cv2.setNumThreads(1)
        print("RESULT cpu-matched-opencv %dx%d %.2f"
              % (w, h, median_ms(matched, runs, time.process_time)), flush=True)
        cv2.setNumThreads(threads)


if __name__ == "__main__":
    main()
