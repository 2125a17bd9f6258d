/* agreement.c — agreement between a vessel map and a reference (rete_agreement.h): the
 * public entry points over the counting engine (agreement_count.c).
 *
 * Rates are the usual ones of a 2×2 confusion table (Fawcett, Pattern Recognition Letters
 * 27, 2006, fig. 1); Dice (1945) = F1; Jaccard (1912) = intersection over union; Matthews
 * correlation coefficient (Matthews, Biochim. Biophys. Acta 405, 1975); Youden's J = sens +
 * spec − 1 (Youden, Cancer 3, 1950).
 */
#include "agreement_count.h"

static double
ratio (double num, double den)
{
  return den == 0.0 ? NAN : num / den;
}

void
rete_rates_from_confusion (const ReteConfusion *c, ReteRates *r)
{
  double tp = (double) c->true_positive, fp = (double) c->false_positive;
  double tn = (double) c->true_negative, fn = (double) c->false_negative;
  r->accuracy = ratio (tp + tn, tp + tn + fp + fn);
  r->sensitivity = ratio (tp, tp + fn);
  r->specificity = ratio (tn, tn + fp);
  r->precision = ratio (tp, tp + fp);
  r->dice = ratio (2.0 * tp, 2.0 * tp + fp + fn);
  r->jaccard = ratio (tp, tp + fp + fn);
  /* MCC = (TP TN − FP FN) / sqrt((TP+FP)(TP+FN)(TN+FP)(TN+FN)); NaN when a margin is 0
   * (sklearn reports 0 there instead) */
  double den = sqrt ((tp + fp) * (tp + fn)) * sqrt ((tn + fp) * (tn + fn));
  r->mcc = ratio (tp * tn - fp * fn, den);
}

static void
rates_undefined (ReteRates *r)
{
  r->accuracy = r->sensitivity = r->specificity = r->precision = NAN;
  r->dice = r->jaccard = r->mcc = NAN;
}

/* Checks the images and fills the engine's input. */
static gboolean
prepare_input (const ReteImage *scores, const ReteImage *reference, const ReteImage *mask,
               double threshold, int max_roc_points, ReteCountInput *in, GError **error)
{
  if (!rete_image_check_channels (scores, "vessel map", 1, error)
      || !rete_image_check_channels (reference, "reference", 1, error)
      || !rete_image_check_same_size (reference, "reference", scores, "vessel map", error))
    return FALSE;
  if (mask != NULL
      && (!rete_image_check_channels (mask, "field-of-view mask", 1, error)
          || !rete_image_check_same_size (mask, "field-of-view mask", scores, "vessel map", error)))
    return FALSE;
  if (scores->width <= 0 || scores->height <= 0 || scores->data == NULL || reference->data == NULL
      || (mask != NULL && mask->data == NULL))
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_EMPTY,
                   "the vessel map is empty (%d×%d pixels); nothing to compare",
                   scores->width, scores->height);
      return FALSE;
    }
  if (!isfinite (threshold))
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "the threshold must be a finite number (a level such as 0.5)");
      return FALSE;
    }
  *in = (ReteCountInput) {
    .scores = scores->data,
    .reference = reference->data,
    .mask = mask != NULL ? mask->data : NULL,
    .n = rete_image_n_pixels (scores),
    .width = scores->width,
    .scores_name = "vessel map",
    .threshold = threshold,
    .max_roc_points = max_roc_points,
  };
  return TRUE;
}

static char *
undefined_reason (guint64 P, guint64 N, const char *where)
{
  if (P == 0)
    return g_strdup_printf ("ROC AUC is undefined: the reference has no vessel pixel %s "
                            "(it needs both vessel and background)", where);
  if (N == 0)
    return g_strdup_printf ("ROC AUC is undefined: the reference is vessel everywhere %s "
                            "(it needs both vessel and background)", where);
  return NULL;
}

ReteAgreement *
rete_agreement_compute (const ReteImage *scores, const ReteImage *reference,
                        const ReteImage *mask, double threshold, int max_roc_points,
                        GError **error)
{
  ReteCountInput in;
  ReteCountResult r;
  if (!prepare_input (scores, reference, mask, threshold, max_roc_points, &in, error)
      || !rete_count_scores (&in, &r, error))
    return NULL;

  ReteAgreement *a = g_new0 (ReteAgreement, 1);
  guint64 P = r.n_positive, N = r.n_negative;
  a->n_positive = P;
  a->n_negative = N;
  a->n_reference_not_binary = r.n_reference_not_binary;
  a->n_distinct_scores = r.n_distinct;
  a->max_score = r.max_score;
  a->auc_undefined_reason = undefined_reason (P, N, mask != NULL ? "inside the field of view"
                                                                 : "in the image");
  a->auc = a->auc_undefined_reason != NULL
           ? NAN : (double) r.auc_twice_numerator / (2.0 * (double) P * (double) N);
  a->average_precision = P == 0 ? NAN : r.ap_sum / (double) P;
  a->threshold = threshold;
  a->confusion = r.confusion;
  rete_rates_from_confusion (&a->confusion, &a->rates);
  a->best_dice_threshold = r.has_best_dice ? r.best_dice_score : NAN;
  if (r.has_best_dice)
    rete_rates_from_confusion (&r.best_dice, &a->best_dice_rates);
  else
    rates_undefined (&a->best_dice_rates);
  a->best_youden_threshold = r.has_best_youden ? r.best_youden_score : NAN;
  if (r.has_best_youden)
    rete_rates_from_confusion (&r.best_youden, &a->best_youden_rates);
  else
    rates_undefined (&a->best_youden_rates);
  a->n_roc_points = r.n_roc_points;
  a->roc_false_positive_rate = r.roc_false_positive_rate;
  a->roc_true_positive_rate = r.roc_true_positive_rate;
  a->roc_threshold = r.roc_threshold;
  return a;
}

void
rete_agreement_free (ReteAgreement *agreement)
{
  if (agreement == NULL)
    return;
  g_free (agreement->roc_false_positive_rate);
  g_free (agreement->roc_true_positive_rate);
  g_free (agreement->roc_threshold);
  g_free (agreement->auc_undefined_reason);
  g_free (agreement);
}

gboolean
rete_agreement_at_threshold (const ReteImage *scores, const ReteImage *reference,
                             const ReteImage *mask, double threshold, ReteConfusion *confusion,
                             ReteRates *rates, GError **error)
{
  ReteCountInput in;
  ReteConfusion c;
  if (!prepare_input (scores, reference, mask, threshold, 0, &in, error)
      || !rete_count_confusion (&in, &c, NULL, error))
    return FALSE;
  if (confusion != NULL)
    *confusion = c;
  if (rates != NULL)
    rete_rates_from_confusion (&c, rates);
  return TRUE;
}

static gboolean
count_arrays (const float *scores, const guint8 *labels, gsize n, ReteCountResult *r,
              GError **error)
{
  if (scores == NULL || labels == NULL)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "scores and labels are both needed");
      return FALSE;
    }
  ReteCountInput in = { .scores = scores, .labels = labels, .n = n, .scores_name = "scores",
                        .threshold = 0.5 };
  if (!rete_count_scores (&in, r, error))
    return FALSE;
  g_autofree char *reason = undefined_reason (r->n_positive, r->n_negative, "among the labels");
  if (reason != NULL && r->n_positive == 0)
    {
      g_set_error_literal (error, RETE_VESSEL_ERROR, RETE_ERROR_UNDEFINED, reason);
      return FALSE;
    }
  return TRUE;
}

double
rete_roc_auc (const float *scores, const guint8 *labels, gsize n, GError **error)
{
  ReteCountResult r;
  if (!count_arrays (scores, labels, n, &r, error))
    return NAN;
  if (r.n_negative == 0)
    {
      g_autofree char *reason = undefined_reason (r.n_positive, r.n_negative, "among the labels");
      g_set_error_literal (error, RETE_VESSEL_ERROR, RETE_ERROR_UNDEFINED, reason);
      return NAN;
    }
  return (double) r.auc_twice_numerator / (2.0 * (double) r.n_positive * (double) r.n_negative);
}

double
rete_average_precision (const float *scores, const guint8 *labels, gsize n, GError **error)
{
  ReteCountResult r;
  if (!count_arrays (scores, labels, n, &r, error))
    return NAN;
  return r.ap_sum / (double) r.n_positive; /* defined with positives only, negatives or not */
}

typedef struct {
  const ReteCountInput *in;
  float *codes;
} MapJob;

static void
fill_map (int first, int last, gpointer data)
{
  const MapJob *job = data;
  const ReteCountInput *in = job->in;
  gsize begin = (gsize) first * in->width, end = (gsize) last * in->width;
  for (gsize i = begin; i < end; i++)
    {
      float code = 4.0f; /* outside the mask */
      if (rete_count_inside (in, i))
        {
          gboolean vessel = in->reference[i] >= 0.5f, marked = in->scores[i] >= in->threshold;
          code = vessel ? (marked ? 1.0f : 3.0f) : (marked ? 2.0f : 0.0f);
        }
      job->codes[i] = code;
    }
}

ReteImage *
rete_agreement_map (const ReteImage *scores, const ReteImage *reference, const ReteImage *mask,
                    double threshold, GError **error)
{
  ReteCountInput in;
  ReteConfusion c;
  /* the counting pass checks the values (finite, a mask that marks something) */
  if (!prepare_input (scores, reference, mask, threshold, 0, &in, error)
      || !rete_count_confusion (&in, &c, NULL, error))
    return NULL;
  ReteImage *map = rete_image_new_like (scores, 1, error);
  if (map == NULL)
    return NULL;
  MapJob job = { .in = &in, .codes = map->data };
  rete_parallel_for (scores->height, fill_map, &job);
  return map;
}
