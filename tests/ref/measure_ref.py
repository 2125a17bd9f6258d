"""Reference skeleton and distance transform for tests/test_measure.c and test_hrf_measure.c.

usage:
  measure_ref.py skeleton IN.npy OUT.npy
      skimage.morphology.skeletonize (skimage 0.19: its 2-D method 'zhang', a look-up table
      after Zhang & Suen, Commun. ACM 1984) of IN >= 0.5; OUT float32 0/1.
  measure_ref.py edt IN.npy OUT.npy
      scipy.ndimage.distance_transform_edt of IN >= 0.5 (distance of every pixel to the
      nearest zero pixel; outside the array is not background); OUT float32.
Prints one line: the number of nonzero output pixels, or the largest distance.
"""
import sys

import numpy as np


def main(argv):
    if len(argv) != 4 or argv[1] not in ("skeleton", "edt"):
        sys.stderr.write(__doc__)
        return 2
    mode, src, dst = argv[1], argv[2], argv[3]
    a = np.load(src) >= 0.5
    if mode == "skeleton":
        from skimage.morphology import skeletonize
        out = skeletonize(a).astype(np.float32)
        print("skeleton_pixels", int(out.sum()))
    else:
        from scipy.ndimage import distance_transform_edt
        out = distance_transform_edt(a).astype(np.float32)
        print("max_distance", float(out.max()))
    np.save(dst, out)
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
