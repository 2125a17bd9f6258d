"""Reference oriented correlation for the matched filters, and ROC AUC, for tests/test_filters.c
and tests/test_chase_classical.c.

usage:
  matched_ref.py correlate IN.npy KERNELS.npy OUT.npy
      max over the kernels KERNELS (K, S, S) of scipy.ndimage.correlate(IN, kernel,
      mode='reflect') in float64, written to OUT.npy (float32). Also runs cv2.filter2D with
      borderType=cv2.BORDER_REFLECT (the same border) and prints
      "scipy-vs-opencv <largest difference>" so that the bench's OpenCV reference is known
      to compute the same thing.
  matched_ref.py auc SCORES.npy LABELS.npy MASK.npy
      sklearn.metrics.roc_auc_score of SCORES against LABELS >= 0.5 over MASK >= 0.5;
      prints "auc <value>".
"""
import sys

import numpy as np


def correlate(args):
    import cv2
    import scipy.ndimage as ndi
    src, kernels, dst = args
    img = np.load(src).astype(np.float64)
    ks = np.load(kernels).astype(np.float64)
    out = np.max([ndi.correlate(img, k, mode="reflect") for k in ks], axis=0)
    img32 = img.astype(np.float32)
    cv = np.max([cv2.filter2D(img32, -1, k.astype(np.float32), borderType=cv2.BORDER_REFLECT)
                 for k in ks], axis=0)
    np.save(dst, out.astype(np.float32))
    print("scipy-vs-opencv", float(np.abs(cv - out).max()))


def auc(args):
    from sklearn.metrics import roc_auc_score
    scores, labels, mask = (np.load(p).reshape(-1) for p in args)
    inside = mask >= 0.5
    print("auc", roc_auc_score(labels[inside] >= 0.5, scores[inside].astype(np.float64)))


if __name__ == "__main__":
    {"correlate": correlate, "auc": auc}[sys.argv[1]](sys.argv[2:])
