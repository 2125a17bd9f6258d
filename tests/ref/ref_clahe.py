"""ref_clahe.py — skimage.exposure.equalize_adapthist (skimage 0.19) on a .npy image, for
tests/test_preprocess.c.

usage: ref_clahe.py IN.npy OUT.npy KERNEL_HEIGHT KERNEL_WIDTH CLIP_LIMIT N_BINS
  KERNEL_* = 0 leaves kernel_size to skimage's default (1/8 of each side).
Writes the float32 result; prints the skimage version.
"""
import sys

try:
    import numpy as np
    import skimage
    from skimage import exposure
except ImportError as error:
    print(f"SKIP: skimage is not available ({error})")
    sys.exit(77)

src, dst, kh, kw, clip, nbins = sys.argv[1:7]
image = np.load(src).astype(np.float32)
kh, kw = int(kh), int(kw)
kernel = None if kh == 0 and kw == 0 else (kh, kw)
out = exposure.equalize_adapthist(image, kernel_size=kernel, clip_limit=float(clip),
                                  nbins=int(nbins))
np.save(dst, out.astype(np.float32))
print(f"skimage {skimage.__version__}")
