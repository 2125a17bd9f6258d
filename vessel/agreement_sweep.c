/* agreement_sweep.c — the pieces of the agreement engine that both counting paths share:
 * per-slice scan figures and their messages, merging sweeps over score ranges, and the
 * choice of ROC points to keep.
 *
 * The sweep itself (rete_sweep_group in agreement_count.h) walks distinct scores from the
 * highest down, as in Fawcett, "An introduction to ROC analysis", Pattern Recognition
 * Letters 27 (2006), algorithm 2; its integer sums make the area exact with ties.
 */
#include "agreement_count.h"

void
rete_scan_stats_init (ReteScanStats *stats)
{
  memset (stats, 0, sizeof *stats);
  stats->first_bad_score = RETE_COUNT_NONE;
  stats->first_bad_reference = RETE_COUNT_NONE;
}

void
rete_scan_stats_add (ReteScanStats *total, const ReteScanStats *part)
{
  for (int v = 0; v < 2; v++)
    for (int p = 0; p < 2; p++)
      total->confusion[v][p] += part->confusion[v][p];
  total->not_binary += part->not_binary;
  total->first_bad_score = MIN (total->first_bad_score, part->first_bad_score);
  total->first_bad_reference = MIN (total->first_bad_reference, part->first_bad_reference);
}

static void
set_bad_value_error (const ReteCountInput *in, const char *name, float value, gsize i,
                     GError **error)
{
  const char *fix = strcmp (name, "reference") == 0 ? "check the reference file"
                                                     : "recompute the map";
  const char *what = isnan (value) ? "NaN (not a number)" : value > 0 ? "+infinity" : "-infinity";
  if (in->width > 0)
    g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_NOT_FINITE,
                 "%s holds %s at pixel (%d, %d); every value inside the field of view must "
                 "be a finite number (%s, or leave that pixel out of the mask)",
                 name, what, (int) (i % (gsize) in->width), (int) (i / (gsize) in->width), fix);
  else
    g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_NOT_FINITE,
                 "%s holds %s at index %" G_GSIZE_FORMAT "; every value must be a finite "
                 "number", name, what, i);
}

gboolean
rete_scan_stats_check (const ReteCountInput *in, const ReteScanStats *stats, GError **error)
{
  if (stats->first_bad_score != RETE_COUNT_NONE)
    {
      set_bad_value_error (in, in->scores_name, in->scores[stats->first_bad_score],
                           stats->first_bad_score, error);
      return FALSE;
    }
  if (stats->first_bad_reference != RETE_COUNT_NONE)
    {
      set_bad_value_error (in, "reference", in->reference[stats->first_bad_reference],
                           stats->first_bad_reference, error);
      return FALSE;
    }
  guint64 inside = stats->confusion[0][0] + stats->confusion[0][1] + stats->confusion[1][0]
                   + stats->confusion[1][1];
  if (inside == 0)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_EMPTY,
                   in->mask != NULL
                   ? "the field-of-view mask marks no pixel (no value is 0.5 or more), so "
                     "there is nothing to compare; give a mask that covers the field of view, "
                     "or none to count every pixel"
                   : "there are no samples to compare");
      return FALSE;
    }
  return TRUE;
}

void
rete_sweep_init (ReteSweep *sweep, guint64 P, guint64 N)
{
  memset (sweep, 0, sizeof *sweep);
  sweep->P = P;
  sweep->N = N;
}

void
rete_sweep_merge (ReteSweep *upper, const ReteSweep *lower)
{
  upper->auc_twice_numerator += lower->auc_twice_numerator;
  upper->ap_sum += lower->ap_sum;
  upper->n_distinct += lower->n_distinct;
  if (!upper->has_first && lower->has_first)
    {
      upper->has_first = TRUE;
      upper->first_score = lower->first_score;
    }
  guint64 P = upper->P;
  /* strictly better only: among equals the higher threshold (in `upper`) stays */
  if (lower->has_dice
      && (!upper->has_dice
          || lower->dice_tp * (upper->dice_tp + upper->dice_fp + P)
             > upper->dice_tp * (lower->dice_tp + lower->dice_fp + P)))
    {
      upper->has_dice = TRUE;
      upper->dice_score = lower->dice_score;
      upper->dice_tp = lower->dice_tp;
      upper->dice_fp = lower->dice_fp;
    }
  if (lower->has_youden && (!upper->has_youden || lower->youden_j > upper->youden_j))
    {
      upper->has_youden = TRUE;
      upper->youden_score = lower->youden_score;
      upper->youden_j = lower->youden_j;
      upper->youden_tp = lower->youden_tp;
      upper->youden_fp = lower->youden_fp;
    }
}

static void
confusion_at (ReteConfusion *c, guint64 tp, guint64 fp, guint64 P, guint64 N)
{
  c->true_positive = tp;
  c->false_positive = fp;
  c->false_negative = P - tp;
  c->true_negative = N - fp;
}

void
rete_sweep_finish (const ReteSweep *sweep, ReteCountResult *result)
{
  result->auc_twice_numerator = sweep->auc_twice_numerator;
  result->ap_sum = sweep->ap_sum;
  result->n_distinct = sweep->n_distinct;
  result->max_score = sweep->first_score;
  result->has_best_dice = sweep->has_dice;
  result->best_dice_score = sweep->dice_score;
  confusion_at (&result->best_dice, sweep->dice_tp, sweep->dice_fp, sweep->P, sweep->N);
  result->has_best_youden = sweep->has_youden;
  result->best_youden_score = sweep->youden_score;
  confusion_at (&result->best_youden, sweep->youden_tp, sweep->youden_fp, sweep->P, sweep->N);
}

gboolean
rete_roc_store (ReteCountResult *result, const RetePoint *points, gsize n_points,
                double max_score, GError **error)
{
  gsize n = n_points + 1;
  result->roc_false_positive_rate = g_try_new (double, n);
  result->roc_true_positive_rate = g_try_new (double, n);
  result->roc_threshold = g_try_new (double, n);
  if (result->roc_false_positive_rate == NULL || result->roc_true_positive_rate == NULL
      || result->roc_threshold == NULL)
    {
      g_clear_pointer (&result->roc_false_positive_rate, g_free);
      g_clear_pointer (&result->roc_true_positive_rate, g_free);
      g_clear_pointer (&result->roc_threshold, g_free);
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_NO_MEMORY,
                   "not enough memory for an ROC curve of %" G_GSIZE_FORMAT " points", n);
      return FALSE;
    }
  result->n_roc_points = (int) n;
  /* nothing is vessel above every score; a rate whose class is absent is 0/0 = NaN */
  double P = (double) result->n_positive, N = (double) result->n_negative;
  result->roc_false_positive_rate[0] = 0.0 / N;
  result->roc_true_positive_rate[0] = 0.0 / P;
  result->roc_threshold[0] = max_score + 1.0;
  for (gsize k = 0; k < n_points; k++)
    {
      result->roc_false_positive_rate[k + 1] = (double) points[k].fp / N;
      result->roc_true_positive_rate[k + 1] = (double) points[k].tp / P;
      result->roc_threshold[k + 1] = points[k].score;
    }
  return TRUE;
}
