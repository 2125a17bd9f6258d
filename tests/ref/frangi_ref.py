"""Reference Gaussian blur and Frangi vesselness for tests/test_filters.c.

usage:
  frangi_ref.py gauss IN.npy SIGMA OUT.npy
      scipy.ndimage.gaussian_filter (mode='reflect', truncate=4.0) of each plane of IN
      ((H, W) or (C, H, W)), in float64.
  frangi_ref.py skimage IN.npy OUT.npy SIGMAS BETA C BLACK
      skimage.filters.frangi (skimage 0.19) with sigmas=SIGMAS (comma list), beta=BETA,
      gamma=C (given explicitly: 0.19's default gamma=15 is meant for 0..255 images),
      black_ridges=BLACK (1/0), mode='reflect'. skimage 0.19 takes its Hessian as a Gaussian
      blur followed by numpy.gradient twice, scaled by sigma^2, eigenvalues sorted by |.|.
  frangi_ref.py gaussian-derivatives IN.npy OUT.npy SIGMAS BETA C BLACK
      The same vesselness formula as skimage 0.19 (Frangi et al., MICCAI 1998, eq. 13 in 2-D),
      with the Hessian from Gaussian derivative filters instead:
      scipy.ndimage.gaussian_filter(order=(0,2), (2,0), (1,1), mode='reflect') * sigma^2.
      C = 0 takes c = half the largest Hessian norm at each scale (Frangi 1998).
Writes OUT.npy (float32) and prints one line with the output's maximum.
"""
import sys

import numpy as np
import scipy.ndimage as ndi


def gauss(args):
    src, sigma, dst = args[0], float(args[1]), args[2]
    a = np.load(src).astype(np.float64)
    planes = a if a.ndim == 3 else a[None]
    out = np.stack([ndi.gaussian_filter(p, sigma, mode="reflect", truncate=4.0) for p in planes])
    out = out if a.ndim == 3 else out[0]
    np.save(dst, out.astype(np.float32))
    print("max", float(out.max()))


def frangi_skimage(args):
    from skimage.filters import frangi
    src, dst, sigmas, beta, c, black = args
    img = np.load(src).astype(np.float32)
    sig = [float(s) for s in sigmas.split(",")]
    out = frangi(img, sigmas=sig, beta=float(beta), gamma=float(c), black_ridges=black == "1",
                 mode="reflect")
    np.save(dst, out.astype(np.float32))
    print("max", float(out.max()))


def frangi_gaussian_derivatives(args):
    src, dst, sigmas, beta, c, black = args
    img = np.load(src).astype(np.float64)
    beta, c, dark = float(beta), float(c), black == "1"
    out = np.zeros_like(img)
    for s in [float(v) for v in sigmas.split(",")]:
        hxx = ndi.gaussian_filter(img, s, order=(0, 2), mode="reflect") * s * s
        hyy = ndi.gaussian_filter(img, s, order=(2, 0), mode="reflect") * s * s
        hxy = ndi.gaussian_filter(img, s, order=(1, 1), mode="reflect") * s * s
        half_trace = (hxx + hyy) / 2
        root = np.sqrt(4 * hxy ** 2 + (hxx - hyy) ** 2) / 2
        big, small = half_trace + root, half_trace - root
        l2 = np.where(half_trace > 0, big, small)   # larger |eigenvalue|
        l1 = np.where(half_trace > 0, small, big)
        s2 = l1 ** 2 + l2 ** 2
        cc = c if c > 0 else (np.sqrt(s2.max()) / 2 or 1.0)
        rb = l1 / np.where(l2 == 0, 1e-10, l2)
        v = np.exp(-rb ** 2 / (2 * beta ** 2)) * (1 - np.exp(-s2 / (2 * cc ** 2)))
        v[(l2 < 0) if dark else (l2 > 0)] = 0
        out = np.maximum(out, v)
    np.save(dst, out.astype(np.float32))
    print("max", float(out.max()))


if __name__ == "__main__":
    mode, rest = sys.argv[1], sys.argv[2:]
    {"gauss": gauss, "skimage": frangi_skimage,
     "gaussian-derivatives": frangi_gaussian_derivatives}[mode](rest)
