"""Reference agreement figures for tests/test_agreement.c, from scikit-learn.

usage: ref_auc_metrics.py SCORES.npy LABELS.npy MASK.npy|- THRESHOLD ROC_THRESHOLDS.npy|- \
           BEST_DICE_THRESHOLD BEST_YOUDEN_THRESHOLD
       ref_auc_metrics.py --batch REQUESTS.txt
         (one request a line, its 7 arguments separated by tabs; prints a JSON list, one
         object per request: scikit-learn is imported once)

SCORES: float32 (any shape); LABELS: uint8 or float32 reference (vessel where >= 0.5);
MASK: uint8 or float32 (inside where >= 0.5) or '-' for every sample.
Prints one JSON object:
  auc            sklearn.metrics.roc_auc_score
  ap             sklearn.metrics.average_precision_score
  at_threshold   accuracy_score, recall_score (sensitivity), recall_score(pos_label=0)
                 (specificity), precision_score, f1_score, jaccard_score, matthews_corrcoef
                 of (score >= THRESHOLD) against the reference
  best_dice      the largest F1 over all thresholds of roc_curve(drop_intermediate=False),
                 and f1_score at BEST_DICE_THRESHOLD
  best_youden    the largest tpr - fpr over the same thresholds, and tpr - fpr at
                 BEST_YOUDEN_THRESHOLD
  roc_fpr, roc_tpr   roc_curve(drop_intermediate=False) at each of ROC_THRESHOLDS (exact
                 float32 matches; the first, above every score, maps to (0, 0)); missing
                 thresholds give null
Comparisons with the threshold are done in float64, as librete does.
"""
import json
import sys
import warnings

import numpy as np
from sklearn import metrics

warnings.simplefilter("ignore")


def load(path):
    return np.load(path).reshape(-1)


def figures(scores_path, labels_path, mask_path, threshold, roc_path, best_dice, best_youden):
    threshold, best_dice, best_youden = float(threshold), float(best_dice), float(best_youden)
    s = load(scores_path).astype(np.float32)
    y = load(labels_path).astype(np.float64) >= 0.5
    if mask_path != "-":
        inside = load(mask_path).astype(np.float64) >= 0.5
        s, y = s[inside], y[inside]
    out = {"n_positive": int(y.sum()), "n_negative": int((~y).sum())}
    both = out["n_positive"] > 0 and out["n_negative"] > 0
    out["auc"] = float(metrics.roc_auc_score(y, s)) if both else None
    out["ap"] = float(metrics.average_precision_score(y, s)) if out["n_positive"] > 0 else None

    pred = s.astype(np.float64) >= threshold
    out["at_threshold"] = {
        "accuracy": metrics.accuracy_score(y, pred),
        "sensitivity": metrics.recall_score(y, pred) if out["n_positive"] else None,
        "specificity": metrics.recall_score(y, pred, pos_label=0) if out["n_negative"] else None,
        "precision": metrics.precision_score(y, pred) if pred.any() else None,
        "dice": metrics.f1_score(y, pred),
        "jaccard": metrics.jaccard_score(y, pred),
        "mcc": metrics.matthews_corrcoef(y, pred),
    }
    out["at_threshold"] = {k: (None if v is None else float(v)) for k, v in out["at_threshold"].items()}

    if both:
        fpr, tpr, thr = metrics.roc_curve(y, s, drop_intermediate=False)
        P, N = out["n_positive"], out["n_negative"]
        tps, fps = tpr[1:] * P, fpr[1:] * N
        f1 = 2 * tps / (tps + fps + P)
        out["best_dice"] = {"max": float(f1.max()),
                            "at_ours": float(metrics.f1_score(y, s.astype(np.float64) >= best_dice))}
        j = tpr - fpr
        pred_y = s.astype(np.float64) >= best_youden
        j_ours = metrics.recall_score(y, pred_y) + metrics.recall_score(y, pred_y, pos_label=0) - 1
        out["best_youden"] = {"max": float(j.max()), "at_ours": float(j_ours)}
        if roc_path != "-":
            want = load(roc_path).astype(np.float32)
            index = {float(t): i for i, t in enumerate(thr[1:].astype(np.float32), start=1)}
            rf, rt = [], []
            for k, t in enumerate(want):
                i = 0 if k == 0 else index.get(float(t))
                rf.append(None if i is None else float(fpr[i]))
                rt.append(None if i is None else float(tpr[i]))
            out["roc_fpr"], out["roc_tpr"] = rf, rt
            out["roc_n_distinct"] = int(len(thr) - 1)
    return out


def main():
    if sys.argv[1] == "--batch":
        with open(sys.argv[2]) as f:
            requests = [line.rstrip("\n").split("\t") for line in f if line.strip()]
        print(json.dumps([figures(*r) for r in requests]))
    else:
        print(json.dumps(figures(*sys.argv[1:8])))


if __name__ == "__main__":
    main()
