"""ref_nn_train.py — one training step of the standard U-Net in PyTorch 1.13, the reference for
bench/bench_nn_train.c: forward + BCE/soft-Dice loss + backward + AdamW step on a batch of 32
patches of 64x64, one input channel; median wall-clock milliseconds over the timed steps.

Run (two threads, Debian's OpenBLAS ahead, as bench/README.md records):
  LD_LIBRARY_PATH=/usr/lib/x86_64-linux-gnu/openblas-pthread /usr/bin/python3 bench/ref_nn_train.py [repeats]
prints: RESULT train-step-standard-torch 32x64x64 <ms>
"""
import os
import sys
import time

import numpy as np
import torch

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "tests", "ref"))
from nn_unet import UNet  # noqa: E402  (same architecture as nn/unet.c)

torch.set_num_threads(2)
torch.manual_seed(1)
repeats = int(sys.argv[1]) if len(sys.argv) > 1 else 10
net = UNet(3, 16, 2, True, 1)
opt = torch.optim.AdamW(net.parameters(), lr=1e-3, weight_decay=1e-4)
rng = np.random.default_rng(1)
x = torch.from_numpy(rng.standard_normal((32, 1, 64, 64)).astype(np.float32))
t = torch.from_numpy((rng.random((32, 1, 64, 64)) < 0.1).astype(np.float32))


def step():
    opt.zero_grad(set_to_none=False)
    logits = net(x)
    bce = torch.nn.functional.binary_cross_entropy_with_logits(logits, t)
    p = torch.sigmoid(logits)
    dice = 1 - (2 * (p * t).sum() + 1) / (p.sum() + t.sum() + 1)
    loss = bce + 0.5 * dice
    loss.backward()
    opt.step()


for _ in range(3):
    step()
times = []
for _ in range(repeats):
    t0 = time.perf_counter()
    step()
    times.append((time.perf_counter() - t0) * 1000)
print("RESULT train-step-standard-torch 32x64x64 %.1f" % float(np.median(times)))
