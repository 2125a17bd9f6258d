"""ref_background_fov.py — background normalisation inside a field of view with
scipy.ndimage.gaussian_filter (mode 'reflect', truncate 4), for tests/test_preprocess.c:
background = G*(grey x fov) / G*(fov) (normalised convolution, Knutsson & Westin 1993),
result = grey - background rescaled to [0, 1] inside the FOV, 0 outside.

usage: ref_background_fov.py GREY.npy FOV.npy OUT.npy SIGMA
"""
import sys

try:
    import numpy as np
    from scipy import ndimage
except ImportError as error:
    print(f"SKIP: scipy is not available ({error})")
    sys.exit(77)

grey = np.load(sys.argv[1]).astype(np.float64)
fov = (np.load(sys.argv[2]) > 0.5).astype(np.float64)
sigma = float(sys.argv[4])
blur = lambda a: ndimage.gaussian_filter(a, sigma, mode='reflect', truncate=4.0)
background = blur(grey * fov) / np.maximum(blur(fov), 1e-12)
diff = grey - background
inside = fov > 0
lo, hi = diff[inside].min(), diff[inside].max()
out = np.where(inside, (diff - lo) / (hi - lo), 0.0)
np.save(sys.argv[3], out.astype(np.float32))
