"""Reference binary-map figures for tests/test_binary.c, from scikit-image 0.19 and numpy.

usage:
  ref_otsu_clean.py otsu MAP.npy MASK.npy|-
      {"threshold": skimage.filters.threshold_otsu(map[mask])}
  ref_otsu_clean.py fraction MAP.npy MASK.npy|- LEVEL FRACTION
      {"at": share of map[mask] >= LEVEL, "below": share >= the largest value below LEVEL
       (null when none)}; LEVEL is the smallest level for FRACTION when at <= FRACTION < below
  ref_otsu_clean.py clean BINARY.npy MIN_COMPONENT MAX_HOLE OUT.npy [OBJECT_CONNECTIVITY]
      writes remove_small_holes(remove_small_objects(b, MIN_COMPONENT, connectivity=2),
      MAX_HOLE, connectivity=1) as float32 0/1 (a 0 skips that step); OBJECT_CONNECTIVITY (default
      2) exists so that a test can ask for the wrong one and see the check fail
  ref_otsu_clean.py --batch REQUESTS.txt
      one request a line (a mode and its arguments, separated by tabs); prints a JSON list
      of the answers (skimage is imported once)
"""
import json
import sys
import warnings

import numpy as np
from skimage import filters, morphology

warnings.simplefilter("ignore")


def inside(map_path, mask_path):
    v = np.load(map_path).astype(np.float32)
    if mask_path != "-":
        v = v[np.load(mask_path).astype(np.float64) >= 0.5]
    return v.reshape(-1)


def answer(argv):
    mode = argv[0]
    if mode == "otsu":
        v = inside(argv[1], argv[2])
        return {"threshold": float(filters.threshold_otsu(v))}
    if mode == "fraction":
        v = inside(argv[1], argv[2]).astype(np.float64)
        level = float(argv[3])
        lower = v[v < level]
        return {"at": float(np.mean(v >= level)),
                "below": float(np.mean(v >= lower.max())) if lower.size else None}
    if mode == "clean":
        b = np.load(argv[1]) >= 0.5
        min_component, max_hole = int(argv[2]), int(argv[3])
        connectivity = int(argv[5]) if len(argv) > 5 else 2
        if min_component > 0:
            b = morphology.remove_small_objects(b, min_size=min_component, connectivity=connectivity)
        if max_hole > 0:
            b = morphology.remove_small_holes(b, area_threshold=max_hole, connectivity=1)
        np.save(argv[4], b.astype(np.float32))
        return {"vessel": int(b.sum())}
    sys.exit("unknown mode " + mode)


def main():
    if sys.argv[1] == "--batch":
        with open(sys.argv[2]) as f:
            requests = [line.rstrip("\n").split("\t") for line in f if line.strip()]
        print(json.dumps([answer(r) for r in requests]))
    else:
        print(json.dumps(answer(sys.argv[1:])))


if __name__ == "__main__":
    main()
