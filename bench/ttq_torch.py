"""ttq_torch.py — the PyTorch side of the time-to-quality bench (bench/time_to_quality.sh):
trains the standard U-Net (3 levels, 16 base filters, 2 convolutions per block; the
architecture of tests/ref/nn_unet.py) on CHASE_DB1 photographs with the recipe of the shipped
standard model (models/README.md), validating every N steps on whole photographs, and writes
one CSV row per validation: step, wall seconds since the start of the process, pooled ROC AUC
inside the field of view (sklearn.metrics.roc_auc_score).

PyTorch 1.13 from Debian at its best here: torch.set_num_threads(2), Debian's OpenBLAS ahead
of the reference BLAS (the shell script sets LD_LIBRARY_PATH).

Recipe (the same as `rete train` gets in time_to_quality.sh):
  - input: green channel, CLAHE (skimage.exposure.equalize_adapthist, kernel 1/8 of the image,
    clip limit 0.01, 256 bins — Rete's defaults), standardised to zero mean and unit deviation
    inside the field of view, 0 outside;
  - 64x64 patches centred uniformly inside the field of view, the loss masked by the field of
    view; flips, quarter turns and rotations of up to 15 degrees (bilinear, the annotation and
    mask cut at half), gamma exp(+-0.25) on the patch's range, contrast +-20 %, brightness
    +-0.2;
  - batch 16, AdamW (weight decay 1e-4 on convolution weights only), learning rate 2e-3 with
    50 warm-up steps then cosine decay to 1e-4, binary cross-entropy.

Run: /usr/bin/python3 bench/ttq_torch.py DATA_DIR STEPS VALIDATE_EVERY SEED OUT.csv
"""
import math
import os
import sys
import time

start = time.monotonic()

import numpy as np  # noqa: E402
import torch  # noqa: E402
from PIL import Image  # noqa: E402
from scipy import ndimage  # noqa: E402
from skimage import exposure  # noqa: E402
from sklearn.metrics import roc_auc_score  # noqa: E402

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "tests", "ref"))
from nn_unet import UNet  # noqa: E402

VALIDATION = ("Image_09L", "Image_09R", "Image_10L", "Image_10R")


def find(folder, stem):
    for name in sorted(os.listdir(folder)):
        if os.path.splitext(name)[0] == stem:
            return os.path.join(folder, name)
    raise SystemExit("ttq_torch.py: no file for %s in %s" % (stem, folder))


def load(data, stem):
    rgb = np.asarray(Image.open(find(os.path.join(data, "images"), stem)).convert("RGB"))
    truth = np.asarray(Image.open(find(os.path.join(data, "manual1"), stem)).convert("L")) > 127
    fov = np.asarray(Image.open(find(os.path.join(data, "mask"), stem)).convert("L")) > 127
    green = rgb[:, :, 1].astype(np.float64) / 255.0
    h, w = green.shape
    eq = exposure.equalize_adapthist(green, kernel_size=(h // 8, w // 8), clip_limit=0.01, nbins=256)
    inside = eq[fov]
    x = np.where(fov, (eq - inside.mean()) / inside.std(), 0.0).astype(np.float32)
    return x, truth.astype(np.float32), fov.astype(np.float32)


def cut(rng, x, t, m, centres, P=64):
    """One augmented patch (input, target, mask) around a random FOV pixel."""
    cy, cx = centres[rng.integers(len(centres))]
    k = rng.integers(4)
    flip = rng.random() < 0.5
    theta = math.radians(rng.uniform(-15.0, 15.0))
    u = np.arange(P) - (P - 1) / 2.0
    uy, ux = np.meshgrid(u, u, indexing="ij")
    if flip:
        ux = -ux
    for _ in range(k):
        uy, ux = ux, -uy
    c, s = math.cos(theta), math.sin(theta)
    sy, sx = cy + s * ux + c * uy, cx + c * ux - s * uy
    coords = np.stack([sy, sx])
    xi = ndimage.map_coordinates(x, coords, order=1, mode="constant", cval=0.0)
    ti = ndimage.map_coordinates(t, coords, order=1, mode="constant", cval=0.0) > 0.5
    mi = ndimage.map_coordinates(m, coords, order=1, mode="constant", cval=0.0) > 0.5
    inside = xi[mi]
    if inside.size > 1 and inside.max() > inside.min():
        lo, hi = inside.min(), inside.max()
        g = math.exp(rng.uniform(-0.25, 0.25))
        xi = np.where(mi, lo + (hi - lo) * np.clip((xi - lo) / (hi - lo), 0, 1) ** g, xi)
    scale, shift = 1 + rng.uniform(-0.2, 0.2), rng.uniform(-0.2, 0.2)
    xi = np.where(mi, scale * xi + shift, xi)
    return xi.astype(np.float32), ti.astype(np.float32), mi.astype(np.float32)


def predict(net, x):
    h, w = x.shape
    H, W = (h + 3) // 4 * 4, (w + 3) // 4 * 4
    pad = np.zeros((H, W), np.float32)
    pad[:h, :w] = x
    with torch.no_grad():
        return net(torch.from_numpy(pad)[None, None])[0, 0, :h, :w].numpy()


def main():
    data, steps, every, seed, out = sys.argv[1], int(sys.argv[2]), int(sys.argv[3]), int(sys.argv[4]), sys.argv[5]
    torch.set_num_threads(2)
    torch.manual_seed(seed)
    rng = np.random.default_rng(seed)
    stems = sorted({os.path.splitext(n)[0] for n in os.listdir(os.path.join(data, "images"))})
    train = [load(data, s) for s in stems if s not in VALIDATION]
    valid = [load(data, s) for s in VALIDATION]
    centres = [np.argwhere(m > 0) for _, _, m in train]
    net = UNet(3, 16, 2, True, 1)
    decay = [p for n, p in net.named_parameters() if n.endswith("weight")]
    other = [p for n, p in net.named_parameters() if not n.endswith("weight")]
    lr0, lr_min, warm = 2e-3, 1e-4, 50
    opt = torch.optim.AdamW([{"params": decay, "weight_decay": 1e-4}, {"params": other, "weight_decay": 0.0}], lr=lr0)
    rows = ["step,seconds,validation_auc,loss"]
    print("ttq_torch: data loaded after %.1f s" % (time.monotonic() - start), file=sys.stderr)
    loss_sum = 0.0
    for step in range(1, steps + 1):
        if step <= warm:
            lr = lr0 * step / warm
        else:
            lr = lr_min + 0.5 * (lr0 - lr_min) * (1 + math.cos(math.pi * (step - warm) / (steps - warm)))
        for g in opt.param_groups:
            g["lr"] = lr
        batch = []
        for _ in range(16):
            i = rng.integers(len(train))
            batch.append(cut(rng, *train[i], centres[i]))
        x = torch.from_numpy(np.stack([b[0] for b in batch])[:, None])
        t = torch.from_numpy(np.stack([b[1] for b in batch])[:, None])
        m = torch.from_numpy(np.stack([b[2] for b in batch])[:, None])
        opt.zero_grad()
        logits = net(x)
        bce = torch.nn.functional.binary_cross_entropy_with_logits(logits, t, reduction="none")
        loss = (bce * m).sum() / m.sum().clamp(min=1)
        loss.backward()
        opt.step()
        loss_sum += float(loss)
        if step % every == 0 or step == steps:
            net.eval()
            scores, labels = [], []
            for x_v, t_v, m_v in valid:
                p = predict(net, x_v)
                scores.append(p[m_v > 0])
                labels.append(t_v[m_v > 0])
            net.train()
            auc = roc_auc_score(np.concatenate(labels), np.concatenate(scores))
            seconds = time.monotonic() - start
            rows.append("%d,%.1f,%.4f,%.4f" % (step, seconds, auc, loss_sum / every))
            print("ttq_torch: step %d  %.0f s  validation AUC %.4f" % (step, seconds, auc), file=sys.stderr)
            loss_sum = 0.0
            with open(out + ".tmp", "w") as f:
                f.write("\n".join(rows) + "\n")
            os.replace(out + ".tmp", out)


main()
