"""nn_torch_check.py — PyTorch 1.13 (autograd, float32, 1 thread) as the reference for
tests/test_nn_torch.c. The U-Net is tests/ref/nn_unet.py, files are tests/ref/nn_safetensors.py.

  counts L,F,k,relu,cin ...            print "L,F,k,relu,cin <parameter count>" per configuration
  grad MODEL X T M DICE OUT            load MODEL (Rete-written), forward X (N,C,H,W), loss
                                       BCE-with-logits (mean over mask M) + DICE * soft Dice, backward;
                                       write OUT.logits.npy and OUT.grads.safetensors; print the loss
  export L,F,k,relu,cin SEED MODEL X P build a torch U-Net (default PyTorch init, biases made
                                       non-zero), write MODEL, infer on X (C,H,W) padded with zeros to
                                       a multiple of 2^(L-1), write sigmoid probability P (H,W)
"""
import os
import sys

import numpy as np
import torch
import torch.nn.functional as F

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from nn_unet import UNet  # noqa: E402
import nn_safetensors  # noqa: E402


def parse_config(text):
    levels, base, k, relu, cin = (int(v) for v in text.split(","))
    return levels, base, k, bool(relu), cin


def load_net(path):
    tensors, meta = nn_safetensors.read(path)
    net = UNet(int(meta["levels"]), int(meta["base_filters"]), int(meta["convs_per_block"]),
               meta["activation"] == "relu", int(meta["in_channels"]))
    state = {name: torch.from_numpy(array) for name, array in tensors.items()}
    net.load_state_dict(state, strict=True)
    return net, meta


def cmd_counts(args):
    for text in args:
        net = UNet(*parse_config(text))
        print(text, sum(p.numel() for p in net.parameters()))


def cmd_grad(model, x_path, t_path, m_path, dice_weight, out):
    net, meta = load_net(model)
    x = torch.from_numpy(np.load(x_path).astype(np.float32))
    t = torch.from_numpy(np.load(t_path).astype(np.float32))
    m = torch.from_numpy(np.load(m_path).astype(np.float32))
    logits = net(x)
    bce = F.binary_cross_entropy_with_logits(logits, t, reduction="none")
    bce = (bce * m).sum() / m.sum()
    p = torch.sigmoid(logits)
    inter = (p * t * m).sum()
    total = (p * m).sum() + (t * m).sum()
    dice = 1.0 - (2.0 * inter + 1.0) / (total + 1.0)
    loss = bce + float(dice_weight) * dice
    loss.backward()
    np.save(out + ".logits.npy", logits.detach().numpy())
    grads = [(name, p.grad.numpy()) for name, p in net.named_parameters()]
    nn_safetensors.write(out + ".grads.safetensors", grads, meta)
    print("%.9g" % loss.item())


def cmd_export(config, seed, model, x_path, p_path):
    levels, base, k, relu, cin = parse_config(config)
    torch.manual_seed(int(seed))
    net = UNet(levels, base, k, relu, cin).eval()
    with torch.no_grad():
        for name, p in net.named_parameters():
            if name.endswith("bias"):
                p.uniform_(-0.1, 0.1)
    meta = {"format_version": "1", "levels": levels, "base_filters": base, "convs_per_block": k,
            "activation": "relu" if relu else "identity", "in_channels": cin,
            "provenance": "tests/ref/nn_torch_check.py export (PyTorch %s)" % torch.__version__}
    nn_safetensors.write(model, [(n, p.detach().numpy()) for n, p in net.named_parameters()], meta)
    x = np.load(x_path).astype(np.float32)
    c, h, w = x.shape
    mult = 1 << (levels - 1)
    ph, pw = (h + mult - 1) // mult * mult, (w + mult - 1) // mult * mult
    padded = np.zeros((1, c, ph, pw), np.float32)
    padded[0, :, :h, :w] = x
    with torch.no_grad():
        prob = torch.sigmoid(net(torch.from_numpy(padded)))[0, 0, :h, :w].numpy()
    np.save(p_path, prob.astype(np.float32))


def main():
    torch.set_num_threads(1)
    cmd, args = sys.argv[1], sys.argv[2:]
    {"counts": cmd_counts, "grad": cmd_grad, "export": cmd_export}[cmd](*args) if cmd != "counts" \
        else cmd_counts(args)


if __name__ == "__main__":
    main()
