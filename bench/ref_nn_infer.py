"""ref_nn_infer.py — PyTorch 1.13 reference for bench/bench_nn_infer.c: the same U-Nets
(tests/ref/nn_unet.py, ReLU, one input channel), inference (no_grad, sigmoid) on one whole
W x H image in one piece (zero-padded to a multiple of 2^(levels-1)), torch.set_num_threads(2).
Prints `RESULT infer-<name>-torch <w>x<h> <ms>` (median of the repeats).
  ref_nn_infer.py                          standard and tiny on 999 x 960 and 3504 x 2336, 3 repeats
  ref_nn_infer.py NAME WIDTH HEIGHT [REPEATS]"""
import os
import statistics
import sys
import time

import torch

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "tests", "ref"))
from nn_unet import UNet  # noqa: E402

CONFIGS = {"standard": (3, 16, 2), "tiny": (3, 2, 2)}  # models/: the shipped sizes


def run(name, width, height, repeats):
    levels, base, k = CONFIGS[name]
    torch.manual_seed(1)
    net = UNet(levels, base, k, True, 1).eval()
    m = 1 << (levels - 1)
    ph, pw = (height + m - 1) // m * m, (width + m - 1) // m * m
    x = torch.zeros(1, 1, ph, pw)
    x[0, 0, :height, :width] = torch.rand(height, width) * 2 - 1
    times = []
    with torch.no_grad():
        for _ in range(repeats):
            t = time.perf_counter()
            p = torch.sigmoid(net(x))[0, 0, :height, :width].contiguous()
            times.append((time.perf_counter() - t) * 1000.0)
            del p
    print("RESULT infer-%s-torch %dx%d %.1f" % (name, width, height, statistics.median(times)),
          flush=True)


def main():
    torch.set_num_threads(2)
    if len(sys.argv) > 1:
        run(sys.argv[1], int(sys.argv[2]), int(sys.argv[3]),
            int(sys.argv[4]) if len(sys.argv) > 4 else 3)
    else:
        for width, height in ((999, 960), (3504, 2336)):
            for name in ("standard", "tiny"):
                run(name, width, height, 3)


if __name__ == "__main__":
    main()
