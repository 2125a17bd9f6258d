/* rete_agreement.h — agreement between a vessel map (scores or 0/1) and a reference
 * (0/1), counted inside an optional mask (the FOV): ROC AUC, average precision, and at a
 * threshold the confusion counts and the rates graders report. */
#ifndef RETE_AGREEMENT_H
#define RETE_AGREEMENT_H

#include "rete_image.h"

G_BEGIN_DECLS

typedef struct {
  guint64 true_positive, false_positive, true_negative, false_negative;
} ReteConfusion;

/* Rates from a confusion table. A rate whose denominator is zero is NaN. */
typedef struct {
  double accuracy;     /* (TP + TN) / all */
  double sensitivity;  /* TP / (TP + FN), recall, true-positive rate */
  double specificity;  /* TN / (TN + FP) */
  double precision;    /* TP / (TP + FP), positive predictive value */
  double dice;         /* 2 TP / (2 TP + FP + FN) = F1 */
  double jaccard;      /* TP / (TP + FP + FN), intersection over union */
  double mcc;          /* Matthews correlation coefficient */
} ReteRates;

RETE_API void rete_rates_from_confusion (const ReteConfusion *confusion, ReteRates *rates);

typedef struct {
  gsize n_positive;          /* reference vessel pixels inside the mask */
  gsize n_negative;          /* reference background pixels inside the mask */
  double auc;                /* ROC AUC, exact with ties (trapezoidal over distinct scores);
                                NaN when the reference has only one class inside the mask */
  double average_precision;  /* as sklearn.metrics.average_precision_score (step-wise, no
                                interpolation); NaN when there are no positives */
  double threshold;          /* the threshold used for the figures below: pixel is vessel
                                when score >= threshold */
  ReteConfusion confusion;
  ReteRates rates;
  double best_dice_threshold;   /* threshold that maximises Dice (F1) */
  ReteRates best_dice_rates;
  double best_youden_threshold; /* threshold that maximises Youden's J = sens + spec - 1 */
  ReteRates best_youden_rates;
  /* ROC curve: one point per distinct score (at most `max_roc_points`, evenly thinned),
   * from (0,0) to (1,1). Arrays of n_roc_points values, owned. Point k is the rates when
   * pixels with score >= roc_threshold[k] are vessel. Thinning (more distinct scores than
   * max_roc_points - 1): point j goes to the first score, from the highest down, at which
   * j/(max_roc_points - 1) of the pixels inside the mask are marked; a score that meets
   * several such targets gives one point, so the curve may hold fewer points. */
  int n_roc_points;
  double *roc_false_positive_rate;
  double *roc_true_positive_rate;
  double *roc_threshold;
  /* Added fields. */
  char *auc_undefined_reason;   /* NULL when AUC is defined; else why not (owned) */
  gsize n_reference_not_binary; /* reference values inside the mask that were neither 0 nor
                                   1 (thresholded at 0.5: a caller may warn) */
  gsize n_distinct_scores;      /* distinct scores inside the mask */
  double max_score;             /* highest score inside the mask */
} ReteAgreement;

/* Figures of `scores` (one channel, finite, any range) against `reference` (one channel;
 * values >= 0.5 are vessel) inside `mask` (NULL = every pixel; values >= 0.5 are inside).
 * Fails with a message on mismatched sizes, an empty mask or non-finite scores. When the
 * reference has one class only inside the mask, AUC is NaN and auc_undefined_reason says
 * why; the other figures are still computed. O(n) in the pixel count.
 *
 * Details: a reference that is not 0/1 is thresholded at 0.5 (n_reference_not_binary counts
 * such values); NaN or infinity in the scores or the reference inside the mask is an error
 * naming the first pixel (outside the mask such values are ignored). max_roc_points: 0 = no
 * curve (arrays NULL), >= 2 = at most that many points (thinned as said above), first (0,0)
 * and last (1,1) always kept; 1 or negative is an error. The first
 * point's threshold is max_score + 1 (as sklearn 1.2's roc_curve). A rate of the curve whose
 * class is absent is NaN. Best thresholds are among the distinct scores; among equal values
 * the higher threshold wins; they are NaN (rates NaN) when undefined: Dice without reference
 * vessel, Youden's J without both classes. */
RETE_API ReteAgreement *rete_agreement_compute (const ReteImage *scores, const ReteImage *reference,
                                                const ReteImage *mask, double threshold,
                                                int max_roc_points, GError **error);
RETE_API void rete_agreement_free (ReteAgreement *agreement);
G_DEFINE_AUTOPTR_CLEANUP_FUNC (ReteAgreement, rete_agreement_free)

/* Rates at another threshold without recomputing the curve (for a dialog's slider). */
RETE_API gboolean rete_agreement_at_threshold (const ReteImage *scores, const ReteImage *reference,
                                               const ReteImage *mask, double threshold,
                                               ReteConfusion *confusion, ReteRates *rates,
                                               GError **error);

/* Plain arrays, for tests and for callers that hold their own samples: exact ROC AUC with
 * ties and average precision of n scores against 0/1 labels. NaN (with an error set) when
 * labels hold one class only. */
RETE_API double rete_roc_auc (const float *scores, const guint8 *labels, gsize n, GError **error);
RETE_API double rete_average_precision (const float *scores, const guint8 *labels, gsize n,
                                        GError **error);

/* A per-pixel agreement map: 0 = true negative, 1 = true positive, 2 = false positive,
 * 3 = false negative, 4 = outside the mask; for colouring an agreement layer. */
RETE_API ReteImage *rete_agreement_map (const ReteImage *scores, const ReteImage *reference,
                                        const ReteImage *mask, double threshold, GError **error);

G_END_DECLS

#endif /* RETE_AGREEMENT_H */
