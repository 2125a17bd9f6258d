"""Reference for nn/adam.c: torch.optim.AdamW (PyTorch 1.13) over a sequence of gradients.

usage: train_adam.py params.npy grads.npy decay.npy lrs.npy weight_decay out.npy
  params (n) float32, grads (steps, n) float32, decay (n) uint8 (1 = weight decay applies),
  lrs (steps) float32 learning rate of each step. Writes the final parameters to out.npy.
Weight decay only where decay == 1: two parameter groups, as one gives biases no decay.
"""
import sys
import numpy as np
import torch

torch.set_num_threads(1)
params = np.load(sys.argv[1]).astype(np.float32)
grads = np.load(sys.argv[2]).astype(np.float32)
decay = np.load(sys.argv[3]).astype(bool)
lrs = np.load(sys.argv[4]).astype(np.float64)
wd = float(sys.argv[5])

p_decay = torch.nn.Parameter(torch.from_numpy(params[decay].copy()))
p_plain = torch.nn.Parameter(torch.from_numpy(params[~decay].copy()))
opt = torch.optim.AdamW([{"params": [p_decay], "weight_decay": wd},
                         {"params": [p_plain], "weight_decay": 0.0}],
                        lr=1e-3, betas=(0.9, 0.999), eps=1e-8, foreach=False)
for t in range(grads.shape[0]):
    for g in opt.param_groups:
        g["lr"] = float(lrs[t])
    p_decay.grad = torch.from_numpy(grads[t][decay].copy())
    p_plain.grad = torch.from_numpy(grads[t][~decay].copy())
    opt.step()
out = params.copy()
out[decay] = p_decay.detach().numpy()
out[~decay] = p_plain.detach().numpy()
np.save(sys.argv[6], out.astype(np.float32))
print("ok", grads.shape[0], "steps of", params.size)
