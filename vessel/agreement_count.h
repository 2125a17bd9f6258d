/* agreement_count.h — private to librete: the O(n) counting engine behind rete_agreement.h.
 *
 * It counts, for every distinct score inside the mask, how many reference vessel pixels
 * (positives) and background pixels (negatives) carry it, then sweeps the distinct scores
 * from the highest down. Everything the sweep adds up is an integer (exact) except average
 * precision, a sum of at most n positive doubles.
 */
#ifndef RETE_AGREEMENT_COUNT_H
#define RETE_AGREEMENT_COUNT_H

#include "rete_agreement.h"

#include <math.h>
#include <string.h>

G_BEGIN_DECLS

typedef struct {
  const float *scores;     /* (n) any finite value */
  const float *reference;  /* (n) vessel when >= 0.5; NULL when `labels` is given */
  const guint8 *labels;    /* (n) vessel when != 0; NULL when `reference` is given */
  const float *mask;       /* (n) inside when >= 0.5; NULL = every sample */
  gsize n;                 /* samples, at most RETE_MAX_PIXELS */
  int width;               /* > 0: messages name pixels (x, y); 0: they name indices */
  const char *scores_name; /* "vessel map", "scores" */
  double threshold;        /* the confusion table counts score >= threshold as vessel */
  int max_roc_points;      /* 0: no curve; >= 2: at most this many points */
} ReteCountInput;

typedef struct {
  guint64 n_positive;             /* vessel samples inside the mask */
  guint64 n_negative;             /* background samples inside the mask */
  guint64 n_reference_not_binary; /* reference values neither 0 nor 1 (thresholded at 0.5) */
  ReteConfusion confusion;        /* at input->threshold */
  guint64 auc_twice_numerator;    /* AUC = this / (2 P N): sum of neg_i (2 TP_above_i + pos_i) */
  double ap_sum;                  /* average precision = this / P */
  guint64 n_distinct;             /* distinct scores inside the mask */
  float max_score;
  gboolean has_best_dice;         /* FALSE when P = 0 */
  float best_dice_score;
  ReteConfusion best_dice;
  gboolean has_best_youden;       /* FALSE when P = 0 or N = 0 */
  float best_youden_score;
  ReteConfusion best_youden;
  int n_roc_points;               /* 0 when not asked for */
  double *roc_false_positive_rate; /* (n_roc_points), owned by the caller after return */
  double *roc_true_positive_rate;  /* (n_roc_points) */
  double *roc_threshold;           /* (n_roc_points) */
  gboolean quantised;              /* TRUE when the counting-over-levels path was taken */
} ReteCountResult;

/* Fails (result untouched) on an empty mask, a non-finite score or reference value inside
 * the mask (naming the first one), or memory. */
G_GNUC_INTERNAL gboolean rete_count_scores (const ReteCountInput *input, ReteCountResult *result,
                                            GError **error);

/* The confusion table only, in one parallel pass. Same failures. */
G_GNUC_INTERNAL gboolean rete_count_confusion (const ReteCountInput *input,
                                               ReteConfusion *confusion,
                                               guint64 *n_reference_not_binary, GError **error);

/* ---- Between the engine's files (agreement_count.c, agreement_radix.c, agreement_sweep.c) */

#define RETE_COUNT_NONE G_MAXSIZE

/* What one slice of samples adds to the figures that do not need the order of scores. */
typedef struct {
  guint64 confusion[2][2];    /* [reference vessel][score >= threshold] */
  guint64 not_binary;
  gsize first_bad_score;      /* first index inside the mask with a non-finite score, or NONE */
  gsize first_bad_reference;  /* same for the reference */
} ReteScanStats;

G_GNUC_INTERNAL void rete_scan_stats_init (ReteScanStats *stats);
G_GNUC_INTERNAL void rete_scan_stats_add (ReteScanStats *total, const ReteScanStats *part);
/* Sets the error for a bad value found by the scan (returns FALSE), or returns TRUE. */
G_GNUC_INTERNAL gboolean rete_scan_stats_check (const ReteCountInput *input,
                                                const ReteScanStats *stats, GError **error);

static inline gboolean
rete_count_inside (const ReteCountInput *in, gsize i)
{
  return in->mask == NULL || in->mask[i] >= 0.5f;
}

/* Reference label of sample i; notes values that are not 0/1 (and non-finite ones). */
static inline int
rete_count_label (const ReteCountInput *in, gsize i, ReteScanStats *stats)
{
  if (in->labels != NULL)
    return in->labels[i] != 0;
  float r = in->reference[i];
  /* 0, -0 or 1, tested on the bits: one rarely taken branch (float tests of 0 and 1 would
   * branch on every vessel pixel, at random) */
  union { float f; guint32 u; } bits = { .f = r };
  guint32 binary = ((bits.u << 1) == 0) | (bits.u == 0x3f800000u);
  if (G_UNLIKELY (!binary))
    {
      stats->not_binary++;
      if (!isfinite (r) && stats->first_bad_reference == RETE_COUNT_NONE)
        stats->first_bad_reference = i;
    }
  return r >= 0.5f;
}

/* Orders floats as unsigned integers: key(a) < key(b) exactly when a < b (for finite a, b;
 * -0 is folded into +0 by the caller adding 0.0f). */
static inline guint32
rete_float_key (float value)
{
  union { float f; guint32 u; } v = { .f = value };
  return (v.u & 0x80000000u) ? ~v.u : (v.u | 0x80000000u);
}

static inline float
rete_key_float (guint32 key)
{
  union { float f; guint32 u; } v;
  v.u = (key & 0x80000000u) ? (key & 0x7fffffffu) : ~key;
  return v.f;
}

/* The sweep over distinct scores from the highest down (Fawcett, Pattern Recognition
 * Letters 27, 2006, algorithm 2 for the trapezoids; ties are one group, so the area is exact
 * with ties). A sweep can be run in pieces over consecutive score ranges and merged in
 * descending order. */
typedef struct {
  guint64 P, N;               /* totals inside the mask, known before the sweep */
  guint64 auc_twice_numerator;
  double ap_sum;
  guint64 n_distinct;
  gboolean has_first;
  float first_score;          /* the highest score of the piece */
  gboolean has_dice;
  float dice_score;
  guint64 dice_tp, dice_fp;
  gboolean has_youden;
  float youden_score;
  gint64 youden_j;            /* TP N - FP P, = J P N */
  guint64 youden_tp, youden_fp;
} ReteSweep;

static inline void
rete_sweep_group (ReteSweep *s, float score, guint64 pos, guint64 neg, guint64 tp_above,
                  guint64 fp_above)
{
  guint64 tp = tp_above + pos, fp = fp_above + neg;
  /* Mann–Whitney with ties: each negative scores 1 against the positives above it and 1/2
   * against the positives tied with it (Hanley & McNeil, Radiology 143, 1982). */
  s->auc_twice_numerator += neg * (2 * tp_above + pos);
  /* average precision = sum over thresholds of (R_k - R_{k-1}) P_k (sklearn's definition) */
  if (pos > 0)
    s->ap_sum += (double) pos * ((double) tp / (double) (tp + fp));
  if (!s->has_first)
    {
      s->has_first = TRUE;
      s->first_score = score;
    }
  s->n_distinct++;
  /* Dice = 2 TP / (TP + FP + P); compared cross-multiplied (below 2^58, exact). Ties keep
   * the higher threshold. */
  if (s->P > 0 && (!s->has_dice || tp * (s->dice_tp + s->dice_fp + s->P) > s->dice_tp * (tp + fp + s->P)))
    {
      s->has_dice = TRUE;
      s->dice_score = score;
      s->dice_tp = tp;
      s->dice_fp = fp;
    }
  if (s->P > 0 && s->N > 0)
    {
      gint64 j = (gint64) (tp * s->N) - (gint64) (fp * s->P);
      if (!s->has_youden || j > s->youden_j)
        {
          s->has_youden = TRUE;
          s->youden_score = score;
          s->youden_j = j;
          s->youden_tp = tp;
          s->youden_fp = fp;
        }
    }
}

G_GNUC_INTERNAL void rete_sweep_init (ReteSweep *sweep, guint64 P, guint64 N);
/* Adds `lower` (the piece of lower scores) to `upper`. */
G_GNUC_INTERNAL void rete_sweep_merge (ReteSweep *upper, const ReteSweep *lower);
/* Copies the sweep's figures into the result. */
G_GNUC_INTERNAL void rete_sweep_finish (const ReteSweep *sweep, ReteCountResult *result);

/* ROC points. With no more distinct scores than max_points - 1, every one gives a point.
 * Otherwise the curve is thinned evenly in the number of samples marked: point j
 * (1 <= j < max_points) goes to the first distinct score, from the highest down, at which at
 * least rete_roc_target (j) samples are marked vessel; a score that meets several targets
 * gives one point, so there may be fewer points than max_points. The last, (1, 1), is
 * always kept. */
typedef struct {
  float score;
  guint64 tp, fp; /* marked vessel at score >= this one */
} RetePoint;

static inline guint64
rete_roc_target (guint64 n_inside, int max_points, guint64 j)
{
  return (j * n_inside + (guint64) (max_points - 2)) / (guint64) (max_points - 1); /* ceil */
}

/* Fills the result's curve: (0, 0) at threshold max_score + 1 (as sklearn 1.2's roc_curve
 * does), then the n points given, highest score first. */
G_GNUC_INTERNAL gboolean rete_roc_store (ReteCountResult *result, const RetePoint *points,
                                         gsize n_points, double max_score, GError **error);

/* The general path for arbitrary floats: a most-significant-digit radix pass on the top
 * 16 bits of the score keys, then in-cache sorts of the low 16 bits (agreement_radix.c). */
G_GNUC_INTERNAL gboolean rete_count_radix (const ReteCountInput *input, ReteCountResult *result,
                                           GError **error);
/* Slices the input for worker threads: slice s of n_slices covers [begin, end). */
static inline void
rete_count_slice (const ReteCountInput *in, int s, int n_slices, gsize *begin, gsize *end)
{
  *begin = (gsize) ((guint64) in->n * s / n_slices);
  *end = (gsize) ((guint64) in->n * (s + 1) / n_slices);
}

G_END_DECLS

#endif /* RETE_AGREEMENT_COUNT_H */
