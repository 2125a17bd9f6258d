"""ref_nn_infer.py — PyTorch 1.13 reference for bench/bench_nn_infer.c: the same U-Net
(tests/ref/nn_unet.py), inference (no_grad, sigmoid) on one whole W x H image, 2 threads.
Prints `RESULT infer-<name>-torch <w>x<h> <ms>` (best of the repeats)."""
import os
import sys
import time

import torch

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "tests", "ref"))
from nn_unet import UNet  # noqa: E402

CONFIGS = {"standard": (3, 16, 2), "tiny": (2, 8, 1)}


def main():
    torch.set_num_threads(2)
    name, width, height = sys.argv[1], int(sys.argv[2]), int(sys.argv[3])
    repeats = int(sys.argv[4]) if len(sys.argv) > 4 else 3
    levels, base, k = CONFIGS[name]
    torch.manual_seed(1)
    net = UNet(levels, base, k, True, 1).eval()
    m = 1 << (levels - 1)
    ph, pw = (height + m - 1) // m * m, (width + m - 1) // m * m
    x = torch.zeros(1, 1, ph, pw)
    x[0, 0, :height, :width] = torch.randn(height, width)
    best = None
    with torch.no_grad():
        for _ in range(repeats):
            t = time.perf_counter()
            p = torch.sigmoid(net(x))[0, 0, :height, :width].contiguous()
            dt = (time.perf_counter() - t) * 1000.0
            best = dt if best is None else min(best, dt)
    del p
    print("RESULT infer-%s-torch %dx%d %.1f" % (name, width, height, best))


if __name__ == "__main__":
    main()
