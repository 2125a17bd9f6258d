/* agreement_radix.c — the agreement engine's path for arbitrary float scores: a
 * most-significant-digit radix sort (Knuth TAOCP vol. 3, 5.2.5) of the scores' order-keeping
 * integer keys.
 *
 * Pass 1 counts samples per top-16-bit bucket (and per reference class) in each thread's
 * slice; pass 2 scatters the low 16 bits of each key into its bucket, positives and
 * negatives apart; pass 3 sorts each bucket in cache (two 8-bit counting passes) and walks
 * its distinct scores from the highest down, in parallel over runs of buckets; pass 4, only
 * when an ROC curve is asked for, walks again the buckets that hold the points kept. Every
 * pass is O(n), and counts are integers, so the figures are exact.
 */
#include "agreement_count.h"

#define N_BUCKETS 65536

typedef struct {
  guint32 *offset; /* (2, N_BUCKETS): samples per [vessel][bucket], then write positions */
  ReteScanStats stats;
} RadixSlice;

typedef struct {
  const ReteCountInput *in;
  RadixSlice *slices;
  int n_slices;
  guint64 total[2];             /* negatives, positives */
  guint64 *start[2];            /* (N_BUCKETS + 1) first index of each bucket in low[v] */
  guint16 *low[2];              /* (total[v]) low 16 bits of the keys, bucket after bucket */
  guint16 *scratch[2];          /* (total[v]) for the in-bucket sorts */
  int n_units;
  int *unit_bucket;             /* (n_units + 1) unit u is buckets [unit_bucket[u], [u+1]) */
  ReteSweep *unit_sweep;        /* (n_units) */
  guint32 *n_distinct;          /* (N_BUCKETS) */
  guint64 *distinct_above;      /* (N_BUCKETS) distinct scores in higher buckets */
  const guint64 *points;        /* ROC point indices kept */
  int n_points;
  ReteCountResult *result;
} RadixJob;

static void
count_buckets (int first, int last, gpointer data)
{
  RadixJob *job = data;
  const ReteCountInput *in = job->in;
  for (int sl = first; sl < last; sl++)
    {
      RadixSlice *q = &job->slices[sl];
      gsize begin, end;
      rete_count_slice (in, sl, job->n_slices, &begin, &end);
      for (gsize i = begin; i < end; i++)
        {
          if (!rete_count_inside (in, i))
            continue;
          float s = in->scores[i];
          if (G_UNLIKELY (!isfinite (s)))
            {
              if (q->stats.first_bad_score == RETE_COUNT_NONE)
                q->stats.first_bad_score = i;
              continue;
            }
          int vessel = rete_count_label (in, i, &q->stats);
          q->offset[vessel * N_BUCKETS + (rete_float_key (s + 0.0f) >> 16)]++;
          q->stats.confusion[vessel][s >= in->threshold]++;
        }
    }
}

static void
scatter_keys (int first, int last, gpointer data)
{
  RadixJob *job = data;
  const ReteCountInput *in = job->in;
  for (int sl = first; sl < last; sl++)
    {
      guint32 *offset = job->slices[sl].offset;
      ReteScanStats ignored;
      rete_scan_stats_init (&ignored);
      gsize begin, end;
      rete_count_slice (in, sl, job->n_slices, &begin, &end);
      for (gsize i = begin; i < end; i++)
        {
          if (!rete_count_inside (in, i))
            continue;
          int vessel = rete_count_label (in, i, &ignored);
          guint32 key = rete_float_key (in->scores[i] + 0.0f);
          job->low[vessel][offset[vessel * N_BUCKETS + (key >> 16)]++] = (guint16) key;
        }
    }
}

/* Ascending sort of m 16-bit values: insertion sort when short, else two 8-bit counting
 * passes through `tmp` (LSD radix sort). */
static void
sort_u16 (guint16 *a, guint16 *tmp, gsize m)
{
  if (m < 48)
    {
      for (gsize i = 1; i < m; i++)
        {
          guint16 v = a[i];
          gsize j = i;
          for (; j > 0 && a[j - 1] > v; j--)
            a[j] = a[j - 1];
          a[j] = v;
        }
      return;
    }
  gsize c0[257] = { 0 }, c1[257] = { 0 };
  for (gsize i = 0; i < m; i++)
    {
      c0[(a[i] & 0xff) + 1]++;
      c1[(a[i] >> 8) + 1]++;
    }
  for (int d = 0; d < 256; d++)
    {
      c0[d + 1] += c0[d];
      c1[d + 1] += c1[d];
    }
  for (gsize i = 0; i < m; i++)
    tmp[c0[a[i] & 0xff]++] = a[i];
  for (gsize i = 0; i < m; i++)
    a[c1[tmp[i] >> 8]++] = tmp[i];
}

/* The distinct scores of bucket b from the highest down: into `sweep` (pass 3) or, with
 * sweep NULL, into the ROC points kept (pass 4). */
static void
walk_bucket (const RadixJob *job, int b, ReteSweep *sweep)
{
  const guint16 *pos = job->low[1] + job->start[1][b];
  const guint16 *neg = job->low[0] + job->start[0][b];
  gsize ip = job->start[1][b + 1] - job->start[1][b];
  gsize in = job->start[0][b + 1] - job->start[0][b];
  guint64 tp = job->total[1] - job->start[1][b + 1]; /* samples in higher buckets */
  guint64 fp = job->total[0] - job->start[0][b + 1];
  guint64 group = sweep ? 0 : job->distinct_above[b];
  int next = 0;
  if (sweep == NULL)
    {
      /* first kept point after this bucket's first group (point p follows group p - 1) */
      int lo = 0, hi = job->n_points;
      while (lo < hi)
        {
          int mid = (lo + hi) / 2;
          if (job->points[mid] < group + 1)
            lo = mid + 1;
          else
            hi = mid;
        }
      next = lo;
      if (next >= job->n_points || job->points[next] > group + job->n_distinct[b])
        return;
    }
  while (ip > 0 || in > 0)
    {
      guint32 v = ip == 0 ? neg[in - 1] : in == 0 ? pos[ip - 1] : MAX (pos[ip - 1], neg[in - 1]);
      guint64 cp = 0, cn = 0;
      while (ip > 0 && pos[ip - 1] == v)
        ip--, cp++;
      while (in > 0 && neg[in - 1] == v)
        in--, cn++;
      float score = rete_key_float (((guint32) b << 16) | v);
      if (sweep != NULL)
        rete_sweep_group (sweep, score, cp, cn, tp, fp);
      tp += cp;
      fp += cn;
      if (sweep == NULL)
        {
          group++;
          if (job->points[next] == group)
            {
              rete_roc_set (job->result, next++, score, tp, fp);
              if (next >= job->n_points)
                return;
            }
        }
    }
}

static void
sweep_units (int first, int last, gpointer data)
{
  RadixJob *job = data;
  for (int u = first; u < last; u++)
    {
      ReteSweep *sweep = &job->unit_sweep[u];
      rete_sweep_init (sweep, job->total[1], job->total[0]);
      for (int b = job->unit_bucket[u + 1] - 1; b >= job->unit_bucket[u]; b--)
        {
          guint64 before = sweep->n_distinct;
          for (int v = 0; v < 2; v++)
            sort_u16 (job->low[v] + job->start[v][b], job->scratch[v] + job->start[v][b],
                      job->start[v][b + 1] - job->start[v][b]);
          walk_bucket (job, b, sweep);
          job->n_distinct[b] = (guint32) (sweep->n_distinct - before);
        }
    }
}

static void
roc_units (int first, int last, gpointer data)
{
  RadixJob *job = data;
  for (int u = first; u < last; u++)
    for (int b = job->unit_bucket[u + 1] - 1; b >= job->unit_bucket[u]; b--)
      if (job->n_distinct[b] > 0)
        walk_bucket (job, b, NULL);
}

gboolean
rete_count_radix (const ReteCountInput *in, ReteCountResult *result, GError **error)
{
  gboolean ok = FALSE;
  int n_slices = MAX (1, MIN (rete_thread_count (), (int) MAX (in->n / 65536, 1)));
  RadixJob job = { .in = in, .n_slices = n_slices };
  ReteCountResult r = { 0 };
  guint64 *points = NULL;
  job.slices = g_new0 (RadixSlice, n_slices);
  for (int s = 0; s < n_slices; s++)
    {
      rete_scan_stats_init (&job.slices[s].stats);
      if ((job.slices[s].offset = g_try_new0 (guint32, 2 * N_BUCKETS)) == NULL)
        goto no_memory;
    }
  rete_parallel_for (n_slices, count_buckets, &job);

  ReteScanStats stats;
  rete_scan_stats_init (&stats);
  for (int s = 0; s < n_slices; s++)
    rete_scan_stats_add (&stats, &job.slices[s].stats);
  if (!rete_scan_stats_check (in, &stats, error))
    goto out;
  job.total[0] = stats.confusion[0][0] + stats.confusion[0][1];
  job.total[1] = stats.confusion[1][0] + stats.confusion[1][1];

  job.n_distinct = g_try_new (guint32, N_BUCKETS);
  job.distinct_above = g_try_new (guint64, N_BUCKETS);
  if (job.n_distinct == NULL || job.distinct_above == NULL)
    goto no_memory;
  for (int v = 0; v < 2; v++)
    {
      job.start[v] = g_try_new (guint64, N_BUCKETS + 1);
      job.low[v] = g_try_new (guint16, MAX (job.total[v], 1));
      job.scratch[v] = g_try_new (guint16, MAX (job.total[v], 1));
      if (job.start[v] == NULL || job.low[v] == NULL || job.scratch[v] == NULL)
        goto no_memory;
      /* bucket starts, and each slice's first write position inside each bucket */
      guint64 run = 0;
      for (int b = 0; b < N_BUCKETS; b++)
        {
          job.start[v][b] = run;
          for (int s = 0; s < n_slices; s++)
            {
              guint32 here = job.slices[s].offset[v * N_BUCKETS + b];
              job.slices[s].offset[v * N_BUCKETS + b] = (guint32) run;
              run += here;
            }
        }
      job.start[v][N_BUCKETS] = run;
    }
  rete_parallel_for (n_slices, scatter_keys, &job);

  /* runs of buckets holding about equal numbers of samples, a few per thread */
  guint64 n_inside = job.total[0] + job.total[1];
  job.n_units = MAX (1, MIN (4 * rete_thread_count (), (int) MAX (n_inside / 4096, 1)));
  job.unit_bucket = g_new (int, job.n_units + 1);
  job.unit_sweep = g_new (ReteSweep, job.n_units);
  job.unit_bucket[0] = 0;
  for (int u = 1, b = 0; u < job.n_units; u++)
    {
      guint64 target = n_inside * (guint64) u / (guint64) job.n_units;
      while (b < N_BUCKETS && job.start[0][b] + job.start[1][b] < target)
        b++;
      job.unit_bucket[u] = MAX (b, job.unit_bucket[u - 1]);
    }
  job.unit_bucket[job.n_units] = N_BUCKETS;
  rete_parallel_for (job.n_units, sweep_units, &job);

  ReteSweep sweep;
  rete_sweep_init (&sweep, job.total[1], job.total[0]);
  for (int u = job.n_units - 1; u >= 0; u--)
    rete_sweep_merge (&sweep, &job.unit_sweep[u]);

  r.n_positive = job.total[1];
  r.n_negative = job.total[0];
  r.n_reference_not_binary = stats.not_binary;
  r.confusion.true_positive = stats.confusion[1][1];
  r.confusion.false_negative = stats.confusion[1][0];
  r.confusion.false_positive = stats.confusion[0][1];
  r.confusion.true_negative = stats.confusion[0][0];
  rete_sweep_finish (&sweep, &r);

  if (in->max_roc_points >= 2)
    {
      points = g_try_new (guint64, MIN ((guint64) in->max_roc_points, sweep.n_distinct + 1));
      if (points == NULL)
        goto no_memory;
      job.n_points = rete_roc_plan (sweep.n_distinct, in->max_roc_points, points);
      job.points = points;
      if (!rete_roc_alloc (&r, job.n_points, r.max_score, error))
        goto out;
      guint64 above = 0;
      for (int b = N_BUCKETS - 1; b >= 0; b--)
        {
          job.distinct_above[b] = above;
          above += job.n_distinct[b];
        }
      job.result = &r;
      if (job.n_points > 1)
        rete_parallel_for (job.n_units, roc_units, &job);
    }
  *result = r;
  ok = TRUE;
  goto out;

no_memory:
  g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_NO_MEMORY,
               "not enough memory to sort %" G_GSIZE_FORMAT " scores for the ROC curve", in->n);
out:
  for (int s = 0; s < n_slices; s++)
    g_free (job.slices[s].offset);
  g_free (job.slices);
  for (int v = 0; v < 2; v++)
    {
      g_free (job.start[v]);
      g_free (job.low[v]);
      g_free (job.scratch[v]);
    }
  g_free (job.unit_bucket);
  g_free (job.unit_sweep);
  g_free (job.n_distinct);
  g_free (job.distinct_above);
  g_free (points);
  return ok;
}
