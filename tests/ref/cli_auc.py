"""ROC AUC of a vessel map file against a reference inside a mask, with sklearn, reading the
files with OpenCV (16-bit maps kept as they are). For tests/test_cli_data.c.

usage: cli_auc.py MAP REFERENCE MASK   -> prints the AUC
"""
import sys

import cv2
import numpy as np
from sklearn.metrics import roc_auc_score


def grey(path):
    image = cv2.imread(path, cv2.IMREAD_UNCHANGED)
    if image is None:
        raise SystemExit('cannot read ' + path)
    if image.ndim == 3:
        image = image[:, :, 0]  # the maps and masks are grey; a colour copy has R = G = B
    scale = 65535.0 if image.dtype == np.uint16 else 255.0
    return image.astype(np.float64) / scale


def main():
    scores, reference, mask = (grey(p) for p in sys.argv[1:4])
    inside = mask >= 0.5
    print(repr(roc_auc_score(reference[inside] >= 0.5, scores[inside])))


if __name__ == '__main__':
    main()
