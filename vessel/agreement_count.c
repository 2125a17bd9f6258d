/* agreement_count.c — entry of the agreement engine, and its fast path for quantised
 * scores: maps read from 8- or 16-bit files hold only the levels k/255 or k/65535, so one
 * counting pass over 65536 levels per thread gives the positives and negatives per distinct
 * score exactly (a counting sort, Knuth TAOCP vol. 3, 5.2). Scores off those levels go to
 * the radix path (agreement_radix.c); either way the work is O(n).
 *
 * A level holds one score only: the first score seen at level round(s * 65535) is kept, and
 * any other score at the same level sends the whole count to the radix path, so merging
 * two different scores can never happen.
 */
#include "agreement_count.h"

#define N_LEVELS 65536
#define BLOCK 65536 /* samples between looks at the shared "give up" flag */

typedef struct {
  float *value;    /* (N_LEVELS) the score at each level; -1 = none yet */
  guint32 *count;  /* (N_LEVELS, 2) samples per [level][reference vessel] */
  ReteScanStats stats;
} LevelSlice;

typedef struct {
  const ReteCountInput *in;
  LevelSlice *slices;
  int n_slices;
  gint off_levels; /* set by any thread that meets a score off the levels */
} LevelJob;

static inline int
score_level (float s)
{
  return (int) (s * 65535.0f + 0.5f); /* non-decreasing in s, 0..65535 for s in [0, 1] */
}

/* One block of samples into a slice's tables; FALSE on a score off the levels. Locals and
 * `restrict` let the compiler keep the pointers in registers. */
static gboolean
count_level_block (const ReteCountInput *in, LevelSlice *q, gsize begin, gsize end)
{
  const float *restrict scores = in->scores;
  const float *restrict mask = in->mask;
  float *restrict value = q->value;
  guint32 *restrict count = q->count;
  for (gsize i = begin; i < end; i++)
    {
      if (mask != NULL && !(mask[i] >= 0.5f))
        continue;
      float s = scores[i];
      if (!(s >= 0.0f && s <= 1.0f)) /* also NaN: the radix path names it */
        return FALSE;
      int k = score_level (s);
      if (value[k] != s)
        {
          if (value[k] >= 0.0f)
            return FALSE;
          value[k] = s + 0.0f; /* -0 kept as +0 */
        }
      int vessel = rete_count_label (in, i, &q->stats);
      count[2 * k + vessel]++;
    }
  return TRUE;
}

static void
count_levels (int first, int last, gpointer data)
{
  LevelJob *job = data;
  for (int sl = first; sl < last; sl++)
    {
      gsize begin, end;
      rete_count_slice (job->in, sl, job->n_slices, &begin, &end);
      for (gsize block = begin; block < end; block += BLOCK)
        {
          if (g_atomic_int_get (&job->off_levels))
            return;
          if (!count_level_block (job->in, &job->slices[sl], block, MIN (end, block + BLOCK)))
            {
              g_atomic_int_set (&job->off_levels, 1);
              return;
            }
        }
    }
}

/* A cheap look at up to 256 samples: are they all within 0.02 of a level? Uniform floats
 * fail this at once, so they go straight to the radix path. */
static gboolean
looks_quantised (const ReteCountInput *in)
{
  gsize step = MAX (in->n / 256, 1);
  for (gsize i = 0; i < in->n; i += step)
    {
      if (!rete_count_inside (in, i))
        continue;
      double s = in->scores[i];
      if (!(s >= 0.0 && s <= 1.0) || fabs (s * 65535.0 - rint (s * 65535.0)) > 0.02)
        return FALSE;
    }
  return TRUE;
}

/* Runs the level count; FALSE (no error) when the scores are not on levels. */
static gboolean
count_quantised (const ReteCountInput *in, ReteCountResult *result, gboolean *done,
                 GError **error)
{
  *done = FALSE;
  int n_slices = MAX (1, MIN (rete_thread_count (), (int) MAX (in->n / BLOCK, 1)));
  LevelJob job = { .in = in, .n_slices = n_slices, .off_levels = 0 };
  job.slices = g_new0 (LevelSlice, n_slices);
  gboolean ok = TRUE;
  for (int s = 0; s < n_slices && ok; s++)
    {
      job.slices[s].value = g_try_new (float, N_LEVELS);
      job.slices[s].count = g_try_new0 (guint32, 2 * N_LEVELS);
      ok = job.slices[s].value != NULL && job.slices[s].count != NULL;
      if (ok)
        for (int k = 0; k < N_LEVELS; k++)
          job.slices[s].value[k] = -1.0f;
      rete_scan_stats_init (&job.slices[s].stats);
    }
  /* merged levels, highest first: score, positives, negatives */
  float *level_score = g_try_new (float, N_LEVELS);
  guint64 *level_count = g_try_new (guint64, 2 * N_LEVELS);
  if (!ok || level_score == NULL || level_count == NULL)
    goto out; /* no memory for the fast path: the radix path will say if it has none */

  rete_parallel_for (n_slices, count_levels, &job);
  if (job.off_levels)
    goto out;

  ReteScanStats stats;
  rete_scan_stats_init (&stats);
  for (int s = 0; s < n_slices; s++)
    rete_scan_stats_add (&stats, &job.slices[s].stats);
  int n_levels = 0;
  guint64 n_inside = 0;
  for (int k = N_LEVELS - 1; k >= 0; k--)
    {
      float score = -1.0f;
      guint64 pos = 0, neg = 0;
      for (int s = 0; s < n_slices; s++)
        {
          const LevelSlice *q = &job.slices[s];
          guint64 slice_neg = q->count[2 * k], slice_pos = q->count[2 * k + 1];
          if (slice_neg + slice_pos == 0)
            continue;
          if (score >= 0.0f && q->value[k] != score)
            goto out; /* two threads met different scores at one level */
          score = q->value[k];
          neg += slice_neg;
          pos += slice_pos;
        }
      if (pos + neg == 0)
        continue;
      n_inside += pos + neg;
      level_score[n_levels] = score;
      level_count[2 * n_levels] = neg;
      level_count[2 * n_levels + 1] = pos;
      n_levels++;
    }

  stats.confusion[0][0] = n_inside; /* for the check of an empty mask */
  if (!rete_scan_stats_check (in, &stats, error))
    {
      *done = TRUE;
      ok = FALSE;
      goto out;
    }

  ReteCountResult r = { 0 };
  r.n_reference_not_binary = stats.not_binary;
  r.quantised = TRUE;
  for (int g = 0; g < n_levels; g++)
    {
      /* the confusion table: levels at or above the threshold are marked vessel */
      gboolean marked = level_score[g] >= in->threshold;
      guint64 neg = level_count[2 * g], pos = level_count[2 * g + 1];
      r.n_negative += neg;
      r.n_positive += pos;
      (marked ? &r.confusion.true_positive : &r.confusion.false_negative)[0] += pos;
      (marked ? &r.confusion.false_positive : &r.confusion.true_negative)[0] += neg;
    }
  ReteSweep sweep;
  rete_sweep_init (&sweep, r.n_positive, r.n_negative);
  guint64 tp = 0, fp = 0;
  for (int g = 0; g < n_levels; g++)
    {
      rete_sweep_group (&sweep, level_score[g], level_count[2 * g + 1], level_count[2 * g],
                        tp, fp);
      tp += level_count[2 * g + 1];
      fp += level_count[2 * g];
    }
  rete_sweep_finish (&sweep, &r);

  if (in->max_roc_points >= 2)
    {
      int M = in->max_roc_points;
      guint64 j = 1;
      RetePoint *points = g_new (RetePoint, MAX (n_levels, 1));
      gsize n_points = 0;
      tp = fp = 0;
      for (int g = 0; g < n_levels; g++)
        {
          tp += level_count[2 * g + 1];
          fp += level_count[2 * g];
          /* every level, or the thinned choice (agreement_count.h) */
          if (n_levels + 1 <= M || (j < (guint64) M && tp + fp >= rete_roc_target (n_inside, M, j)))
            {
              points[n_points++] = (RetePoint) { level_score[g], tp, fp };
              while (j < (guint64) M && rete_roc_target (n_inside, M, j) <= tp + fp)
                j++;
            }
        }
      ok = rete_roc_store (&r, points, n_points, r.max_score, error);
      g_free (points);
      if (!ok)
        {
          *done = TRUE;
          goto out;
        }
    }
  *result = r;
  *done = TRUE;

out:
  for (int s = 0; s < n_slices; s++)
    {
      g_free (job.slices[s].value);
      g_free (job.slices[s].count);
    }
  g_free (job.slices);
  g_free (level_score);
  g_free (level_count);
  return ok;
}

static gboolean
check_input (const ReteCountInput *in, GError **error)
{
  if (in->max_roc_points < 0 || in->max_roc_points == 1)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "an ROC curve needs at least 2 points (or 0 for no curve), not %d",
                   in->max_roc_points);
      return FALSE;
    }
  if (in->n > RETE_MAX_PIXELS)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "%" G_GSIZE_FORMAT " samples are more than Rete counts at once (at most %"
                   G_GSIZE_FORMAT ")", in->n, (gsize) RETE_MAX_PIXELS);
      return FALSE;
    }
  if (in->n == 0)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_EMPTY, "there are no samples to compare");
      return FALSE;
    }
  return TRUE;
}

gboolean
rete_count_scores (const ReteCountInput *in, ReteCountResult *result, GError **error)
{
  if (!check_input (in, error))
    return FALSE;
  if (looks_quantised (in))
    {
      gboolean done;
      gboolean ok = count_quantised (in, result, &done, error);
      if (done)
        return ok;
      g_debug ("agreement: scores are not all on the 16-bit levels; sorting them instead");
    }
  else
    g_debug ("agreement: scores do not look quantised; sorting them");
  return rete_count_radix (in, result, error);
}

/* ---- the confusion table alone ---- */

typedef struct {
  const ReteCountInput *in;
  ReteScanStats *stats; /* (n_slices) */
  int n_slices;
} ConfusionJob;

static void
count_confusion (int first, int last, gpointer data)
{
  ConfusionJob *job = data;
  const ReteCountInput *in = job->in;
  for (int sl = first; sl < last; sl++)
    {
      ReteScanStats *st = &job->stats[sl];
      gsize begin, end;
      rete_count_slice (in, sl, job->n_slices, &begin, &end);
      for (gsize i = begin; i < end; i++)
        {
          if (!rete_count_inside (in, i))
            continue;
          float s = in->scores[i];
          if (G_UNLIKELY (!isfinite (s)) && st->first_bad_score == RETE_COUNT_NONE)
            st->first_bad_score = i;
          st->confusion[rete_count_label (in, i, st)][s >= in->threshold]++;
        }
    }
}

gboolean
rete_count_confusion (const ReteCountInput *in, ReteConfusion *confusion,
                      guint64 *n_reference_not_binary, GError **error)
{
  if (!check_input (in, error))
    return FALSE;
  int n_slices = MAX (1, MIN (rete_thread_count (), (int) MAX (in->n / BLOCK, 1)));
  ConfusionJob job = { .in = in, .n_slices = n_slices };
  job.stats = g_new (ReteScanStats, n_slices);
  for (int s = 0; s < n_slices; s++)
    rete_scan_stats_init (&job.stats[s]);
  rete_parallel_for (n_slices, count_confusion, &job);
  ReteScanStats stats;
  rete_scan_stats_init (&stats);
  for (int s = 0; s < n_slices; s++)
    rete_scan_stats_add (&stats, &job.stats[s]);
  g_free (job.stats);
  if (!rete_scan_stats_check (in, &stats, error))
    return FALSE;
  confusion->true_positive = stats.confusion[1][1];
  confusion->false_negative = stats.confusion[1][0];
  confusion->false_positive = stats.confusion[0][1];
  confusion->true_negative = stats.confusion[0][0];
  if (n_reference_not_binary != NULL)
    *n_reference_not_binary = stats.not_binary;
  return TRUE;
}
