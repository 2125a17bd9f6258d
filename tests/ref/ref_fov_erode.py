"""ref_fov_erode.py — erosion of a mask by a Euclidean disc with scipy.ndimage.binary_erosion,
for tests/test_fov.c. The disc holds the offsets (dy, dx) with dy² + dx² <= radius²;
border_value=1: beyond the frame counts as inside (the frame cutting an aperture is no rim).

usage: ref_fov_erode.py MASK.npy OUT.npy RADIUS
"""
import sys

try:
    import numpy as np
    from scipy import ndimage
except ImportError as error:
    print(f"SKIP: scipy is not available ({error})")
    sys.exit(77)

mask = np.load(sys.argv[1]) > 0.5
radius = float(sys.argv[3])
r = int(np.floor(radius))
dy, dx = np.mgrid[-r:r + 1, -r:r + 1]
disc = dy * dy + dx * dx <= radius * radius
out = ndimage.binary_erosion(mask, structure=disc, border_value=1)
np.save(sys.argv[2], out.astype(np.float32))
