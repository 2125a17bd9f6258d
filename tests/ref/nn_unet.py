"""nn_unet.py — the U-Net of nn/rete_nn.h built in PyTorch 1.13, shared by the reference tests
(tests/test_nn_torch.c) and the speed bench (bench/ref_nn_infer.py).

Same architecture as nn/unet.c: level l has base*2^l channels; blocks of k x [3x3 conv (zero
padding 1) + ReLU or identity]; 2x2 max-pool; 2x2 stride-2 ConvTranspose2d (no activation);
concatenation skip-first; 1x1 head conv to one logit. Parameter names match Rete's tensor names.
"""
import torch
import torch.nn as tnn


class Block(tnn.Module):
    def __init__(self, c_in, c_out, k, activation):
        super().__init__()
        for j in range(k):
            setattr(self, "conv%d" % j, tnn.Conv2d(c_in if j == 0 else c_out, c_out, 3, padding=1))
        self.k = k
        self.activation = activation

    def forward(self, x):
        for j in range(self.k):
            x = getattr(self, "conv%d" % j)(x)
            if self.activation:
                x = torch.relu(x)
        return x


class UNet(tnn.Module):
    def __init__(self, levels, base, k, activation, in_channels):
        super().__init__()
        self.levels = levels
        for l in range(levels):
            c = base << l
            c_in = in_channels if l == 0 else c // 2
            setattr(self, "enc%d" % l, Block(c_in, c, k, activation))
        for l in range(levels - 2, -1, -1):
            c = base << l
            setattr(self, "up%d" % (l + 1), tnn.ConvTranspose2d(2 * c, c, 2, stride=2))
            setattr(self, "dec%d" % l, Block(2 * c, c, k, activation))
        self.head = tnn.Conv2d(base, 1, 1)

    def forward(self, x):
        skips = []
        for l in range(self.levels):
            if l > 0:
                x = torch.max_pool2d(x, 2)
            x = getattr(self, "enc%d" % l)(x)
            skips.append(x)
        for l in range(self.levels - 2, -1, -1):
            x = getattr(self, "up%d" % (l + 1))(x)
            x = torch.cat([skips[l], x], dim=1)
            x = getattr(self, "dec%d" % l)(x)
        return self.head(x)
