"""Reference for nn/train_auc.c: sklearn.metrics.roc_auc_score (scikit-learn) on scores and
0/1 labels, restricted to mask != 0.

usage: train_auc.py scores.npy labels.npy mask.npy  -> prints the AUC with 17 digits
"""
import sys
import numpy as np
from sklearn.metrics import roc_auc_score

scores = np.load(sys.argv[1]).astype(np.float64)
labels = np.load(sys.argv[2]).astype(np.uint8)
mask = np.load(sys.argv[3]).astype(bool)
print("%.17g" % roc_auc_score(labels[mask], scores[mask]))
