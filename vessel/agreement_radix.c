/* agreement_radix.c — the agreement engine's path for arbitrary float scores: a
 * most-significant-digit radix sort (Knuth TAOCP vol. 3, 5.2.5) of the scores' order-keeping
 * integer keys.
 *
 * Pass 1 counts samples per bucket (the top 17 bits of the key) and reference class in each
 * thread's slice. Pass 2 scatters one 16-bit entry per sample into its bucket: the key's low
 * 15 bits and the class. Pass 3, in parallel over runs of buckets, sorts each bucket in
 * cache (two 8-bit counting passes) and walks its distinct scores from the highest down,
 * knowing from pass 1 how many positives and negatives lie above it. Pass 4 runs only when
 * every distinct score must give an ROC point. Each pass is O(n) and the counts are
 * integers, so the figures are exact.
 */
#include "agreement_count.h"

#define BUCKET_SHIFT 15
#define N_BUCKETS (1 << (32 - BUCKET_SHIFT))
#define LOW_MASK ((1u << BUCKET_SHIFT) - 1)

typedef struct {
  guint32 *count; /* (2, N_BUCKETS) samples per [vessel][bucket]; then write positions */
  ReteScanStats stats;
} RadixSlice;

typedef struct {
  ReteSweep sweep;
  RetePoint *points;  /* thinned ROC points met in this run of buckets */
  gsize n_points;
  guint64 next_j;     /* next target index */
  guint64 next_target;
} RadixUnit;

typedef struct {
  const ReteCountInput *in;
  RadixSlice *slices;
  int n_slices;
  guint64 P, N, n_inside;
  guint64 *start;      /* (N_BUCKETS + 1) first entry of each bucket */
  guint64 *pos_before; /* (N_BUCKETS + 1) positives in the buckets below each bucket */
  guint16 *entry;      /* (n_inside) (low 15 bits of the key) << 1 | vessel, by bucket */
  guint16 *scratch;    /* (n_inside) */
  int n_units;
  int *unit_bucket;    /* (n_units + 1) unit u holds buckets [unit_bucket[u], [u + 1]) */
  RadixUnit *units;    /* (n_units) */
  int max_points;
  guint32 *n_distinct; /* (N_BUCKETS) */
  guint64 *distinct_above; /* (N_BUCKETS) pass 4: distinct scores in higher buckets */
  RetePoint *all_points;   /* pass 4 */
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
          q->count[vessel * N_BUCKETS + (rete_float_key (s + 0.0f) >> BUCKET_SHIFT)]++;
        }
    }
}

static void
scatter_entries (int first, int last, gpointer data)
{
  RadixJob *job = data;
  const ReteCountInput *in = job->in;
  for (int sl = first; sl < last; sl++)
    {
      guint32 *offset = job->slices[sl].count;
      ReteScanStats ignored;
      rete_scan_stats_init (&ignored);
      gsize begin, end;
      rete_count_slice (in, sl, job->n_slices, &begin, &end);
      for (gsize i = begin; i < end; i++)
        {
          if (!rete_count_inside (in, i))
            continue;
          guint32 vessel = (guint32) rete_count_label (in, i, &ignored);
          guint32 key = rete_float_key (in->scores[i] + 0.0f);
          job->entry[offset[key >> BUCKET_SHIFT]++] = (guint16) (((key & LOW_MASK) << 1) | vessel);
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
  guint32 c0[257] = { 0 }, c1[257] = { 0 };
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

/* Calls EMIT (score, positives, negatives) for each distinct score of sorted bucket b, from
 * the highest down, with tp / fp the samples marked above it (updated after each EMIT). */
#define WALK_BUCKET(job, b, EMIT)                                                          \
  do {                                                                                     \
    const guint16 *e_ = (job)->entry + (job)->start[b];                                    \
    gsize m_ = (job)->start[(b) + 1] - (job)->start[b];                                    \
    guint32 base_ = (guint32) (b) << BUCKET_SHIFT, cur_ = e_[m_ - 1] >> 1;                 \
    guint64 cp_ = 0, cn_ = 0;                                                              \
    for (gsize i_ = m_; i_-- > 0;)                                                         \
      {                                                                                    \
        guint32 v_ = e_[i_] >> 1, vessel_ = e_[i_] & 1u;                                   \
        if (v_ != cur_)                                                                    \
          {                                                                                \
            EMIT (rete_key_float (base_ | cur_), cp_, cn_);                                \
            cur_ = v_;                                                                     \
            cp_ = cn_ = 0;                                                                 \
          }                                                                                \
        cp_ += vessel_;                                                                    \
        cn_ += vessel_ ^ 1u;                                                               \
      }                                                                                    \
    EMIT (rete_key_float (base_ | cur_), cp_, cn_);                                        \
  } while (0)

static void
sweep_units (int first, int last, gpointer data)
{
  RadixJob *job = data;
  for (int u = first; u < last; u++)
    {
      RadixUnit *unit = &job->units[u];
      ReteSweep *sweep = &unit->sweep;
      for (int b = job->unit_bucket[u + 1] - 1; b >= job->unit_bucket[u]; b--)
        {
          gsize m = job->start[b + 1] - job->start[b];
          job->n_distinct[b] = 0;
          if (m == 0)
            continue;
          sort_u16 (job->entry + job->start[b], job->scratch + job->start[b], m);
          guint64 tp = job->P - job->pos_before[b + 1];
          guint64 fp = job->N - (job->start[b + 1] - job->pos_before[b + 1]);
          guint64 before = sweep->n_distinct;
#define SWEEP_EMIT(score, cp, cn)                                                          \
  do {                                                                                     \
    float s_ = (score);                                                                    \
    rete_sweep_group (sweep, s_, cp, cn, tp, fp);                                          \
    tp += cp;                                                                              \
    fp += cn;                                                                              \
    if (tp + fp >= unit->next_target)                                                      \
      {                                                                                    \
        unit->points[unit->n_points++] = (RetePoint) { s_, tp, fp };                       \
        while (unit->next_j < (guint64) job->max_points                                    \
               && rete_roc_target (job->n_inside, job->max_points, unit->next_j) <= tp + fp) \
          unit->next_j++;                                                                  \
        unit->next_target = unit->next_j < (guint64) job->max_points                       \
          ? rete_roc_target (job->n_inside, job->max_points, unit->next_j) : G_MAXUINT64;  \
      }                                                                                    \
  } while (0)
          WALK_BUCKET (job, b, SWEEP_EMIT);
#undef SWEEP_EMIT
          job->n_distinct[b] = (guint32) (sweep->n_distinct - before);
        }
    }
}

/* pass 4: a point for every distinct score */
static void
point_units (int first, int last, gpointer data)
{
  RadixJob *job = data;
  for (int u = first; u < last; u++)
    for (int b = job->unit_bucket[u + 1] - 1; b >= job->unit_bucket[u]; b--)
      {
        if (job->n_distinct[b] == 0)
          continue;
        guint64 tp = job->P - job->pos_before[b + 1];
        guint64 fp = job->N - (job->start[b + 1] - job->pos_before[b + 1]);
        RetePoint *p = job->all_points + job->distinct_above[b];
#define POINT_EMIT(score, cp, cn)                                                          \
  do {                                                                                     \
    tp += cp;                                                                              \
    fp += cn;                                                                              \
    *p++ = (RetePoint) { (score), tp, fp };                                                \
  } while (0)
        WALK_BUCKET (job, b, POINT_EMIT);
#undef POINT_EMIT
      }
}

/* The confusion table at the threshold, from the sorted buckets: score >= t exactly when
 * score >= tf, the smallest float not below t. */
static void
confusion_at (const RadixJob *job, double threshold, ReteConfusion *c)
{
  float tf = (float) threshold;
  if ((double) tf < threshold)
    tf = nextafterf (tf, INFINITY);
  guint32 kt = rete_float_key (tf + 0.0f);
  guint32 bt = kt >> BUCKET_SHIFT;
  guint64 tp = job->P - job->pos_before[bt + 1];
  guint64 fp = job->N - (job->start[bt + 1] - job->pos_before[bt + 1]);
  for (guint64 i = job->start[bt]; i < job->start[bt + 1]; i++)
    if ((guint32) (job->entry[i] >> 1) >= (kt & LOW_MASK))
      {
        tp += job->entry[i] & 1u;
        fp += (job->entry[i] & 1u) ^ 1u;
      }
  c->true_positive = tp;
  c->false_positive = fp;
  c->false_negative = job->P - tp;
  c->true_negative = job->N - fp;
}

/* Runs of buckets holding about equal numbers of samples, a few per thread, each with room
 * for the thinned ROC points whose targets fall in its samples. */
static gboolean
plan_units (RadixJob *job)
{
  job->n_units = MAX (1, MIN (4 * rete_thread_count (), (int) MAX (job->n_inside / 4096, 1)));
  job->unit_bucket = g_new (int, job->n_units + 1);
  job->units = g_new0 (RadixUnit, job->n_units);
  job->unit_bucket[0] = 0;
  for (int u = 1, b = 0; u < job->n_units; u++)
    {
      guint64 target = job->n_inside * (guint64) u / (guint64) job->n_units;
      while (b < N_BUCKETS && job->start[b] < target)
        b++;
      job->unit_bucket[u] = MAX (b, job->unit_bucket[u - 1]);
    }
  job->unit_bucket[job->n_units] = N_BUCKETS;
  guint64 M = (guint64) job->max_points;
  for (int u = 0; u < job->n_units; u++)
    {
      RadixUnit *unit = &job->units[u];
      rete_sweep_init (&unit->sweep, job->P, job->N);
      unit->next_target = G_MAXUINT64;
      if (M < 2)
        continue;
      /* samples above the unit and in it; targets j with above < target(j) <= above + size */
      guint64 above = job->n_inside - job->start[job->unit_bucket[u + 1]];
      guint64 size = job->start[job->unit_bucket[u + 1]] - job->start[job->unit_bucket[u]];
      guint64 j_first = above * (M - 1) / job->n_inside + 1;
      guint64 j_last = MIN ((above + size) * (M - 1) / job->n_inside, M - 1);
      unit->next_j = j_first;
      if (j_first < M)
        unit->next_target = rete_roc_target (job->n_inside, job->max_points, j_first);
      gsize room = j_last >= j_first ? (gsize) (j_last - j_first + 1) : 0;
      unit->points = g_try_new (RetePoint, room + 1);
      if (unit->points == NULL)
        return FALSE;
    }
  return TRUE;
}

static gboolean
store_points (RadixJob *job, ReteCountResult *r, const ReteSweep *sweep, GError **error)
{
  gsize n = 0;
  RetePoint *points;
  if (sweep->n_distinct + 1 <= (guint64) job->max_points)
    {
      n = sweep->n_distinct;
      points = job->all_points = g_try_new (RetePoint, MAX (n, 1));
      job->distinct_above = g_try_new (guint64, N_BUCKETS);
      if (points == NULL || job->distinct_above == NULL)
        goto no_memory;
      guint64 above = 0;
      for (int b = N_BUCKETS - 1; b >= 0; b--)
        {
          job->distinct_above[b] = above;
          above += job->n_distinct[b];
        }
      rete_parallel_for (job->n_units, point_units, job);
    }
  else
    {
      for (int u = 0; u < job->n_units; u++)
        n += job->units[u].n_points;
      points = job->all_points = g_try_new (RetePoint, MAX (n, 1));
      if (points == NULL)
        goto no_memory;
      gsize k = 0;
      for (int u = job->n_units - 1; u >= 0; u--)
        for (gsize i = 0; i < job->units[u].n_points; i++)
          points[k++] = job->units[u].points[i];
    }
  return rete_roc_store (r, points, n, r->max_score, error);
no_memory:
  g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_NO_MEMORY,
               "not enough memory for the ROC curve's points");
  return FALSE;
}

gboolean
rete_count_radix (const ReteCountInput *in, ReteCountResult *result, GError **error)
{
  gboolean ok = FALSE;
  int n_slices = MAX (1, MIN (rete_thread_count (), (int) MAX (in->n / 65536, 1)));
  RadixJob job = { .in = in, .n_slices = n_slices, .max_points = in->max_roc_points };
  ReteCountResult r = { 0 };
  job.slices = g_new0 (RadixSlice, n_slices);
  for (int s = 0; s < n_slices; s++)
    {
      rete_scan_stats_init (&job.slices[s].stats);
      if ((job.slices[s].count = g_try_new0 (guint32, 2 * N_BUCKETS)) == NULL)
        goto no_memory;
    }
  rete_parallel_for (n_slices, count_buckets, &job);

  ReteScanStats stats;
  rete_scan_stats_init (&stats);
  for (int s = 0; s < n_slices; s++)
    rete_scan_stats_add (&stats, &job.slices[s].stats);
  job.start = g_try_new (guint64, N_BUCKETS + 1);
  job.pos_before = g_try_new (guint64, N_BUCKETS + 1);
  job.n_distinct = g_try_new (guint32, N_BUCKETS);
  if (job.start == NULL || job.pos_before == NULL || job.n_distinct == NULL)
    goto no_memory;
  /* bucket starts, and each slice's first write position inside each bucket */
  guint64 run = 0, pos = 0;
  for (int b = 0; b < N_BUCKETS; b++)
    {
      job.start[b] = run;
      job.pos_before[b] = pos;
      for (int s = 0; s < n_slices; s++)
        {
          guint32 *count = job.slices[s].count;
          guint32 here = count[b] + count[N_BUCKETS + b];
          pos += count[N_BUCKETS + b];
          count[b] = (guint32) run;
          run += here;
        }
    }
  job.start[N_BUCKETS] = run;
  job.pos_before[N_BUCKETS] = pos;
  job.n_inside = run;
  job.P = pos;
  job.N = run - pos;
  /* the scan's confusion counts are not kept on this path: only the total matters here */
  stats.confusion[0][0] = job.N;
  stats.confusion[1][0] = job.P;
  if (!rete_scan_stats_check (in, &stats, error))
    goto out;

  job.entry = g_try_new (guint16, job.n_inside);
  job.scratch = g_try_new (guint16, job.n_inside);
  if (job.entry == NULL || job.scratch == NULL)
    goto no_memory;
  rete_parallel_for (n_slices, scatter_entries, &job);

  if (!plan_units (&job))
    goto no_memory;
  rete_parallel_for (job.n_units, sweep_units, &job);
  ReteSweep sweep;
  rete_sweep_init (&sweep, job.P, job.N);
  for (int u = job.n_units - 1; u >= 0; u--)
    rete_sweep_merge (&sweep, &job.units[u].sweep);

  r.n_positive = job.P;
  r.n_negative = job.N;
  r.n_reference_not_binary = stats.not_binary;
  confusion_at (&job, in->threshold, &r.confusion);
  rete_sweep_finish (&sweep, &r);
  if (in->max_roc_points >= 2 && !store_points (&job, &r, &sweep, error))
    goto out;
  *result = r;
  ok = TRUE;
  goto out;

no_memory:
  g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_NO_MEMORY,
               "not enough memory to sort %" G_GSIZE_FORMAT " scores for the ROC curve", in->n);
out:
  for (int s = 0; s < n_slices; s++)
    g_free (job.slices[s].count);
  g_free (job.slices);
  g_free (job.start);
  g_free (job.pos_before);
  g_free (job.entry);
  g_free (job.scratch);
  g_free (job.unit_bucket);
  if (job.units != NULL)
    for (int u = 0; u < job.n_units; u++)
      g_free (job.units[u].points);
  g_free (job.units);
  g_free (job.n_distinct);
  g_free (job.distinct_above);
  g_free (job.all_points);
  return ok;
}
