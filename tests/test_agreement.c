/* test_agreement.c — agreement figures (rete_agreement.h) against scikit-learn 1.2 through
 * /usr/bin/python3 (tests/ref/ref_auc_metrics.py), against a naive sort-based count kept
 * here, and on bad input.
 *
 * Sources of the expected values: sklearn.metrics roc_auc_score, average_precision_score,
 * roc_curve, accuracy/recall/precision/f1/jaccard scores and matthews_corrcoef; the worked
 * example of roc_auc_score in sklearn's documentation (AUC 0.75). Tolerance 1e-9 on every
 * figure (the figure for AUC; our counts are integers, so differences are rounding
 * only, about 1e-15). Every check prints its largest difference.
 */
#include <json-glib/json-glib.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "rete_agreement.h"
#include "rete_io.h"
#include "rete_test.h"

#define TOLERANCE 1e-9

typedef enum {
  SCORES_UNIFORM,     /* arbitrary floats in [0, 1]: the radix path */
  SCORES_TENTHS,      /* k/10: heavy ties off the 16-bit levels (radix path) */
  SCORES_8BIT,        /* k/255: the counting path */
  SCORES_16BIT,       /* k/65535: the counting path */
  SCORES_BINARY,      /* 0 or 1: a binary map compared with a reference */
  SCORES_SIGNED,      /* k/8 in [-4, 4]: negative scores, ties, radix path */
} ScoreKind;

typedef struct {
  const char *path;
  int width, height;
  ScoreKind kind;
  gboolean with_mask;
  double threshold;
  int max_roc_points;
  gboolean deliberately_wrong; /* ours from labels with 2% flipped: the checker must object */
} ReferenceCase;

static const ReferenceCase reference_cases[] = {
  { "/vessel/agreement/matches-sklearn/uniform", 400, 250, SCORES_UNIFORM, FALSE, 0.5, 500, FALSE },
  { "/vessel/agreement/matches-sklearn/uniform-masked", 300, 200, SCORES_UNIFORM, TRUE, 0.37, 1000000, FALSE },
  { "/vessel/agreement/matches-sklearn/heavy-ties", 300, 200, SCORES_TENTHS, TRUE, 0.3, 100, FALSE },
  /* 0.7 lies above the float 0.7f that the scores hold: those scores are not vessel */
  { "/vessel/agreement/matches-sklearn/threshold-between-floats", 300, 200, SCORES_TENTHS, FALSE, 0.7, 5, FALSE },
  { "/vessel/agreement/matches-sklearn/8-bit", 999, 960, SCORES_8BIT, TRUE, 0.5, 300, FALSE },
  { "/vessel/agreement/matches-sklearn/uniform-chase-size", 999, 960, SCORES_UNIFORM, TRUE, 0.45, 512, FALSE },
  { "/vessel/agreement/matches-sklearn/16-bit", 400, 300, SCORES_16BIT, FALSE, 0.61, 1000, FALSE },
  { "/vessel/agreement/matches-sklearn/binary-map", 300, 200, SCORES_BINARY, TRUE, 0.5, 10, FALSE },
  { "/vessel/agreement/matches-sklearn/signed-scores", 200, 150, SCORES_SIGNED, FALSE, -0.25, 40, FALSE },
  { "/vessel/agreement/matches-sklearn/tiny", 7, 3, SCORES_TENTHS, FALSE, 0.5, 2, FALSE },
  { "/vessel/agreement/checker-fails-on-wrong-reference", 300, 200, SCORES_UNIFORM, TRUE, 0.5, 200, TRUE },
};

/* A vessel-like sample: ~12% vessel, scores higher on vessel with overlap. */
static void
make_case (const ReferenceCase *c, ReteImage **scores, ReteImage **reference, ReteImage **mask)
{
  GRand *rand = g_rand_new_with_seed (1234 + c->width + 7 * c->kind);
  *scores = rete_image_new (c->width, c->height, 1, NULL);
  *reference = rete_image_new (c->width, c->height, 1, NULL);
  *mask = c->with_mask ? rete_image_new (c->width, c->height, 1, NULL) : NULL;
  gsize n = rete_image_n_pixels (*scores);
  for (gsize i = 0; i < n; i++)
    {
      int x = (int) (i % c->width), y = (int) (i / c->width);
      gboolean vessel = g_rand_double (rand) < 0.12;
      double u = CLAMP ((vessel ? 0.62 : 0.38) + 0.2 * (g_rand_double (rand) + g_rand_double (rand) - 1.0)
                        * 1.7, 0.0, 1.0);
      double s;
      switch (c->kind)
        {
        case SCORES_UNIFORM: s = u; break;
        case SCORES_TENTHS: s = floor (u * 10.0) / 10.0; break;
        case SCORES_8BIT: s = rint (u * 255.0) / 255.0; break;
        case SCORES_16BIT: s = rint (u * 65535.0) / 65535.0; break;
        case SCORES_BINARY: s = u >= 0.5; break;
        default: s = rint ((u - 0.5) * 64.0) / 8.0; break;
        }
      (*scores)->data[i] = (float) s;
      (*reference)->data[i] = vessel;
      if (*mask != NULL)
        {
          double dx = (x - c->width / 2.0) / (c->width / 2.0), dy = (y - c->height / 2.0) / (c->height / 2.0);
          (*mask)->data[i] = dx * dx + dy * dy <= 0.9;
        }
    }
  g_rand_free (rand);
}

typedef struct {
  double worst;
  char worst_what[64];
} Comparison;

static void
compare (Comparison *cmp, const char *what, double ours, JsonObject *object, const char *member)
{
  double diff;
  double ref = NAN;
  if (!json_object_get_null_member (object, member))
    ref = json_object_get_double_member (object, member);
  if (isnan (ref) && isnan (ours))
    diff = 0.0;
  else if (isnan (ref) || isnan (ours))
    diff = INFINITY;
  else
    diff = fabs (ours - ref);
  if (diff > cmp->worst || (cmp->worst_what[0] == '\0'))
    {
      cmp->worst = MAX (diff, cmp->worst);
      if (diff >= cmp->worst)
        g_strlcpy (cmp->worst_what, what, sizeof cmp->worst_what);
    }
  if (diff > TOLERANCE)
    g_test_message ("  %s: ours %.17g, sklearn %.17g (difference %.3g)", what, ours, ref, diff);
}

/* Writes the files of one request to ref_auc_metrics.py (names start with `tag`) and returns
 * its line: the 7 arguments separated by tabs. */
static char *
prepare_request (const char *tag, double case_threshold, const ReteImage *scores,
                 const ReteImage *reference, const ReteImage *mask, const ReteAgreement *a)
{
  g_autofree char *scores_name = g_strconcat (tag, "-scores.npy", NULL);
  g_autofree char *labels_name = g_strconcat (tag, "-labels.npy", NULL);
  g_autofree char *mask_name = g_strconcat (tag, "-mask.npy", NULL);
  g_autofree char *roc_name = g_strconcat (tag, "-roc.npy", NULL);
  g_autofree char *scores_path = rete_test_tmp_path (scores_name);
  g_autofree char *labels_path = rete_test_tmp_path (labels_name);
  g_autofree char *mask_path = rete_test_tmp_path (mask_name);
  g_autofree char *roc_path = rete_test_tmp_path (roc_name);
  g_assert_true (rete_test_write_image_npy (scores_path, scores, NULL));
  g_assert_true (rete_test_write_image_npy (labels_path, reference, NULL));
  if (mask != NULL)
    g_assert_true (rete_test_write_image_npy (mask_path, mask, NULL));
  g_autofree float *roc = g_new (float, MAX (a->n_roc_points, 1));
  for (int k = 0; k < a->n_roc_points; k++)
    roc[k] = (float) a->roc_threshold[k];
  gsize shape[1] = { a->n_roc_points };
  g_assert_true (rete_test_write_npy_f32 (roc_path, roc, shape, 1, NULL));
  char threshold[G_ASCII_DTOSTR_BUF_SIZE], best_dice[G_ASCII_DTOSTR_BUF_SIZE],
       best_youden[G_ASCII_DTOSTR_BUF_SIZE];
  g_ascii_dtostr (threshold, sizeof threshold, case_threshold);
  g_ascii_dtostr (best_dice, sizeof best_dice, a->best_dice_threshold);
  g_ascii_dtostr (best_youden, sizeof best_youden, a->best_youden_threshold);
  return g_strjoin ("\t", scores_path, labels_path, mask != NULL ? mask_path : "-", threshold,
                    a->n_roc_points > 0 ? roc_path : "-", best_dice, best_youden, NULL);
}

/* Runs ref_auc_metrics.py once on all the requests (scikit-learn is slow to import); the
 * answers, one object per request, or NULL with *skip_reason set. */
static JsonArray *
run_requests (GPtrArray *lines, const char *tag, JsonParser *parser, char **skip_reason)
{
  g_autofree char *name = g_strconcat (tag, "-requests.txt", NULL);
  g_autofree char *path = rete_test_tmp_path (name);
  GString *text = g_string_new (NULL);
  for (guint k = 0; k < lines->len; k++)
    g_string_append_printf (text, "%s\n", (const char *) g_ptr_array_index (lines, k));
  g_assert_true (g_file_set_contents (path, text->str, text->len, NULL));
  g_string_free (text, TRUE);
  GError *error = NULL;
  gboolean skipped = FALSE;
  g_autofree char *out = rete_test_python ("ref_auc_metrics.py", &skipped, &error, "--batch",
                                           path, NULL);
  if (skipped)
    {
      *skip_reason = g_strdup (error->message);
      g_error_free (error);
      return NULL;
    }
  g_assert_no_error (error);
  g_assert_true (json_parser_load_from_data (parser, out, -1, &error));
  g_assert_no_error (error);
  JsonArray *answers = json_node_get_array (json_parser_get_root (parser));
  g_assert_cmpuint (json_array_get_length (answers), ==, lines->len);
  return answers;
}

/* Every figure of `a` against sklearn's (ref_auc_metrics.py's JSON). */
static void
compare_all (Comparison *cmp_out, const ReteAgreement *a, JsonObject *ref, int max_roc_points)
{
  Comparison cmp = { 0 };
  compare (&cmp, "n_positive", (double) a->n_positive, ref, "n_positive");
  compare (&cmp, "n_negative", (double) a->n_negative, ref, "n_negative");
  compare (&cmp, "auc", a->auc, ref, "auc");
  compare (&cmp, "average precision", a->average_precision, ref, "ap");
  JsonObject *at = json_object_get_object_member (ref, "at_threshold");
  compare (&cmp, "accuracy", a->rates.accuracy, at, "accuracy");
  compare (&cmp, "sensitivity", a->rates.sensitivity, at, "sensitivity");
  compare (&cmp, "specificity", a->rates.specificity, at, "specificity");
  compare (&cmp, "precision", a->rates.precision, at, "precision");
  compare (&cmp, "dice", a->rates.dice, at, "dice");
  compare (&cmp, "jaccard", a->rates.jaccard, at, "jaccard");
  compare (&cmp, "mcc", a->rates.mcc, at, "mcc");
  JsonObject *bd = json_object_get_object_member (ref, "best_dice");
  compare (&cmp, "best dice (the maximum)", a->best_dice_rates.dice, bd, "max");
  compare (&cmp, "best dice (sklearn at our threshold)", a->best_dice_rates.dice, bd, "at_ours");
  JsonObject *by = json_object_get_object_member (ref, "best_youden");
  double j = a->best_youden_rates.sensitivity + a->best_youden_rates.specificity - 1.0;
  compare (&cmp, "best Youden J (the maximum)", j, by, "max");
  compare (&cmp, "best Youden J (sklearn at our threshold)", j, by, "at_ours");
  JsonArray *rf = json_object_get_array_member (ref, "roc_fpr");
  JsonArray *rt = json_object_get_array_member (ref, "roc_tpr");
  g_assert_cmpuint (json_array_get_length (rf), ==, a->n_roc_points);
  /* every distinct score while they fit, else at most max_roc_points */
  gint64 n_distinct = json_object_get_int_member (ref, "roc_n_distinct");
  if (n_distinct + 1 <= max_roc_points)
    g_assert_cmpint (a->n_roc_points, ==, n_distinct + 1);
  else
    g_assert_cmpint (a->n_roc_points, <=, max_roc_points);
  g_assert_cmpint (a->n_roc_points, >=, 2);
  for (int k = 0; k < a->n_roc_points; k++)
    {
      JsonNode *f = json_array_get_element (rf, k), *t = json_array_get_element (rt, k);
      double df = JSON_NODE_HOLDS_NULL (f) ? INFINITY : fabs (json_node_get_double (f) - a->roc_false_positive_rate[k]);
      double dt = JSON_NODE_HOLDS_NULL (t) ? INFINITY : fabs (json_node_get_double (t) - a->roc_true_positive_rate[k]);
      if (MAX (df, dt) > cmp.worst)
        {
          cmp.worst = MAX (df, dt);
          g_snprintf (cmp.worst_what, sizeof cmp.worst_what, "ROC point %d", k);
        }
    }
  g_assert_cmpfloat (a->roc_false_positive_rate[a->n_roc_points - 1], ==, 1.0);
  g_assert_cmpfloat (a->roc_true_positive_rate[a->n_roc_points - 1], ==, 1.0);
  *cmp_out = cmp;
}

/* Our figures for every case of the table, and sklearn's, computed once for all of them. */
static struct {
  gboolean done;
  char *skip_reason;
  JsonParser *parser;
  JsonArray *answers;
  ReteAgreement *ours[G_N_ELEMENTS (reference_cases)];
  double ms[G_N_ELEMENTS (reference_cases)];
} batch;

static void
ensure_reference_batch (void)
{
  if (batch.done)
    return;
  batch.done = TRUE;
  GPtrArray *lines = g_ptr_array_new_with_free_func (g_free);
  for (gsize i = 0; i < G_N_ELEMENTS (reference_cases); i++)
    {
      const ReferenceCase *c = &reference_cases[i];
      ReteImage *scores, *reference, *mask;
      make_case (c, &scores, &reference, &mask);
      /* the deliberately wrong case: ours sees a reference with 2% of its labels flipped */
      g_autoptr (ReteImage) ours_reference = rete_image_copy (reference, NULL);
      if (c->deliberately_wrong)
        for (gsize k = 0; k < rete_image_n_pixels (reference); k += 50)
          ours_reference->data[k] = 1.0f - ours_reference->data[k];
      GError *error = NULL;
      gint64 t0 = g_get_monotonic_time ();
      batch.ours[i] = rete_agreement_compute (scores, ours_reference, mask, c->threshold,
                                              c->max_roc_points, &error);
      batch.ms[i] = (g_get_monotonic_time () - t0) / 1000.0;
      g_assert_no_error (error);
      char tag[16];
      g_snprintf (tag, sizeof tag, "case%" G_GSIZE_FORMAT, i);
      g_ptr_array_add (lines, prepare_request (tag, c->threshold, scores, reference, mask,
                                               batch.ours[i]));
      rete_image_free (scores);
      rete_image_free (reference);
      rete_image_free (mask);
    }
  batch.parser = json_parser_new ();
  batch.answers = run_requests (lines, "cases", batch.parser, &batch.skip_reason);
  g_ptr_array_free (lines, TRUE);
}

static void
test_matches_sklearn (gconstpointer data)
{
  const ReferenceCase *c = data;
  gsize i = (gsize) (c - reference_cases);
  ensure_reference_batch ();
  if (batch.answers == NULL)
    {
      g_test_skip (batch.skip_reason);
      return;
    }
  const ReteAgreement *a = batch.ours[i];
  Comparison cmp = { 0 };
  compare_all (&cmp, a, json_array_get_object_element (batch.answers, i), c->max_roc_points);
  g_test_message ("%dx%d, %" G_GSIZE_FORMAT " distinct scores, %d ROC points, %.1f ms: largest "
                  "difference from sklearn %.3g (%s), tolerance %g", c->width, c->height,
                  a->n_distinct_scores, a->n_roc_points, batch.ms[i], cmp.worst,
                  cmp.worst_what, TOLERANCE);
  if (c->deliberately_wrong)
    g_assert_cmpfloat (cmp.worst, >, TOLERANCE); /* the checker saw the wrong reference */
  else
    g_assert_cmpfloat (cmp.worst, <=, TOLERANCE);
}

/* The sklearn documentation's example for roc_auc_score: y = [0, 0, 1, 1],
 * scores = [0.1, 0.4, 0.35, 0.8] give 0.75; average_precision_score's: 0.8333... */
static void
test_documented_example (void)
{
  const float scores[] = { 0.1f, 0.4f, 0.35f, 0.8f };
  const guint8 labels[] = { 0, 0, 1, 1 };
  GError *error = NULL;
  double auc = rete_roc_auc (scores, labels, 4, &error);
  g_assert_no_error (error);
  double ap = rete_average_precision (scores, labels, 4, &error);
  g_assert_no_error (error);
  g_test_message ("AUC %.17g (documented 0.75), AP %.17g (documented 0.8333...)", auc, ap);
  g_assert_cmpfloat_with_epsilon (auc, 0.75, 1e-15);
  g_assert_cmpfloat_with_epsilon (ap, 5.0 / 6.0, 1e-15);
}

/* ---- the naive count kept beside the engine: sort all pairs, group ties ---- */

typedef struct {
  float score;
  guint8 vessel;
} Pair;

static int
by_score_descending (const void *a, const void *b)
{
  float x = ((const Pair *) a)->score, y = ((const Pair *) b)->score;
  return (x < y) - (x > y);
}

typedef struct {
  double auc, ap;
  gsize n_distinct;
  ReteConfusion confusion;
  double best_dice_threshold, best_youden_threshold;
} Naive;

static void
naive_count (const ReteImage *scores, const ReteImage *reference, const ReteImage *mask,
             double threshold, Naive *out)
{
  gsize n = rete_image_n_pixels (scores), m = 0;
  Pair *pairs = g_new (Pair, n);
  memset (out, 0, sizeof *out);
  guint64 P = 0, N = 0;
  for (gsize i = 0; i < n; i++)
    if (mask == NULL || mask->data[i] >= 0.5f)
      {
        pairs[m].score = scores->data[i];
        pairs[m].vessel = reference->data[i] >= 0.5f;
        P += pairs[m].vessel;
        N += !pairs[m].vessel;
        gboolean marked = scores->data[i] >= threshold;
        if (pairs[m].vessel)
          marked ? out->confusion.true_positive++ : out->confusion.false_negative++;
        else
          marked ? out->confusion.false_positive++ : out->confusion.true_negative++;
        m++;
      }
  qsort (pairs, m, sizeof *pairs, by_score_descending);
  guint64 tp = 0, fp = 0, twice_area = 0;
  double best_dice = -1, best_j = -2;
  for (gsize i = 0; i < m;)
    {
      guint64 pos = 0, neg = 0;
      gsize k = i;
      for (; k < m && pairs[k].score == pairs[i].score; k++)
        pairs[k].vessel ? pos++ : neg++;
      twice_area += neg * (2 * tp + pos);
      tp += pos;
      fp += neg;
      if (pos > 0)
        out->ap += (double) pos / P * ((double) tp / (double) (tp + fp));
      double dice = 2.0 * tp / (double) (tp + fp + P), j = (double) tp / P - (double) fp / N;
      if (dice > best_dice)
        best_dice = dice, out->best_dice_threshold = pairs[i].score;
      if (j > best_j)
        best_j = j, out->best_youden_threshold = pairs[i].score;
      out->n_distinct++;
      i = k;
    }
  out->auc = (double) twice_area / (2.0 * (double) P * (double) N);
  g_free (pairs);
}

typedef struct {
  const char *path;
  ScoreKind kind;
  gboolean one_off_level; /* an 8-bit map with one score off the levels: the counting path
                             must notice and hand over to the radix path */
} EngineCase;

static const EngineCase engine_cases[] = {
  { "/vessel/agreement/engine/matches-naive/uniform", SCORES_UNIFORM, FALSE },
  { "/vessel/agreement/engine/matches-naive/heavy-ties", SCORES_TENTHS, FALSE },
  { "/vessel/agreement/engine/matches-naive/8-bit", SCORES_8BIT, FALSE },
  { "/vessel/agreement/engine/matches-naive/16-bit", SCORES_16BIT, FALSE },
  { "/vessel/agreement/engine/matches-naive/signed", SCORES_SIGNED, FALSE },
  { "/vessel/agreement/engine/matches-naive/8-bit-one-off-level", SCORES_8BIT, TRUE },
};

static void
test_engine_matches_naive (gconstpointer data)
{
  const EngineCase *e = data;
  ReferenceCase c = { NULL, 523, 311, e->kind, TRUE, 0.5, 0, FALSE };
  ReteImage *scores, *reference, *mask;
  make_case (&c, &scores, &reference, &mask);
  if (e->one_off_level)
    scores->data[(gsize) (c.height / 2) * c.width + c.width / 2] = 128.0f / 255.0f + 2e-6f; /* same level as 128/255 */
  Naive naive;
  naive_count (scores, reference, mask, 0.5, &naive);
  double worst_ap = 0;
  /* one to three threads: the engine splits the work differently, the figures must not move */
  for (int threads = 1; threads <= 3; threads++)
    {
      rete_set_thread_count (threads);
      GError *error = NULL;
      g_autoptr (ReteAgreement) a = rete_agreement_compute (scores, reference, mask, 0.5, 50, &error);
      g_assert_no_error (error);
      g_assert_cmpfloat (a->auc, ==, naive.auc); /* integer sums: bit for bit */
      g_assert_cmpuint (a->n_distinct_scores, ==, naive.n_distinct);
      g_assert_cmpmem (&a->confusion, sizeof a->confusion, &naive.confusion, sizeof naive.confusion);
      g_assert_cmpfloat (a->best_dice_threshold, ==, naive.best_dice_threshold);
      g_assert_cmpfloat (a->best_youden_threshold, ==, naive.best_youden_threshold);
      worst_ap = MAX (worst_ap, fabs (a->average_precision - naive.ap));
    }
  rete_set_thread_count (0);
  g_test_message ("%" G_GSIZE_FORMAT " distinct scores; AUC, counts and best thresholds equal "
                  "bit for bit with 1-3 threads; AP largest difference %.3g (tolerance 1e-12)",
                  naive.n_distinct, worst_ap);
  g_assert_cmpfloat (worst_ap, <=, 1e-12);
  rete_image_free (scores);
  rete_image_free (reference);
  rete_image_free (mask);
}

/* ---- bad input ---- */

typedef enum {
  BAD_SIZE_MISMATCH, BAD_MASK_SIZE, BAD_CHANNELS, BAD_EMPTY_MASK, BAD_NAN_SCORE, BAD_INF_SCORE,
  BAD_NAN_REFERENCE, BAD_ROC_POINTS, BAD_THRESHOLD, BAD_ZERO_SIZE,
} BadKind;

typedef struct {
  const char *path;
  BadKind kind;
  int code;
  const char *message_part; /* the message must say this */
} BadCase;

static const BadCase bad_cases[] = {
  { "/vessel/agreement/bad-input/size-mismatch", BAD_SIZE_MISMATCH, RETE_ERROR_SIZE_MISMATCH, "12×10" },
  { "/vessel/agreement/bad-input/mask-size", BAD_MASK_SIZE, RETE_ERROR_SIZE_MISMATCH, "field-of-view mask" },
  { "/vessel/agreement/bad-input/colour-map", BAD_CHANNELS, RETE_ERROR_INVALID_ARGUMENT, "3 channels" },
  { "/vessel/agreement/bad-input/empty-mask", BAD_EMPTY_MASK, RETE_ERROR_EMPTY, "marks no pixel" },
  { "/vessel/agreement/bad-input/nan-score", BAD_NAN_SCORE, RETE_ERROR_NOT_FINITE, "NaN (not a number) at pixel (3, 2)" },
  { "/vessel/agreement/bad-input/infinite-score", BAD_INF_SCORE, RETE_ERROR_NOT_FINITE, "+infinity at pixel (0, 0)" },
  { "/vessel/agreement/bad-input/nan-reference", BAD_NAN_REFERENCE, RETE_ERROR_NOT_FINITE, "reference holds NaN" },
  { "/vessel/agreement/bad-input/one-roc-point", BAD_ROC_POINTS, RETE_ERROR_INVALID_ARGUMENT, "at least 2 points" },
  { "/vessel/agreement/bad-input/nan-threshold", BAD_THRESHOLD, RETE_ERROR_INVALID_ARGUMENT, "threshold" },
  { "/vessel/agreement/bad-input/zero-size", BAD_ZERO_SIZE, RETE_ERROR_EMPTY, "empty" },
};

static void
test_bad_input (gconstpointer data)
{
  const BadCase *b = data;
  g_autoptr (ReteImage) scores = rete_image_new (10, 10, 1, NULL);
  g_autoptr (ReteImage) reference = rete_image_new (10, 10, 1, NULL);
  g_autoptr (ReteImage) mask = rete_image_new (10, 10, 1, NULL);
  for (int i = 0; i < 100; i++)
    {
      scores->data[i] = (float) (i % 7) / 7.0f;
      reference->data[i] = i % 3 == 0;
      mask->data[i] = 1.0f;
    }
  ReteImage zero = { 0, 0, 1, NULL };
  const ReteImage *s = scores, *r = reference, *m = mask;
  g_autoptr (ReteImage) other = NULL;
  double threshold = 0.5;
  int roc_points = 10;
  switch (b->kind)
    {
    case BAD_SIZE_MISMATCH: s = other = rete_image_new (12, 10, 1, NULL); break;
    case BAD_MASK_SIZE: m = other = rete_image_new (10, 9, 1, NULL); break;
    case BAD_CHANNELS: s = other = rete_image_new (10, 10, 3, NULL); break;
    case BAD_EMPTY_MASK: memset (mask->data, 0, 100 * sizeof (float)); break;
    case BAD_NAN_SCORE: scores->data[2 * 10 + 3] = NAN; break;
    case BAD_INF_SCORE: scores->data[0] = INFINITY; break;
    case BAD_NAN_REFERENCE: reference->data[55] = NAN; break;
    case BAD_ROC_POINTS: roc_points = 1; break;
    case BAD_THRESHOLD: threshold = NAN; break;
    case BAD_ZERO_SIZE: s = r = &zero; m = NULL; break;
    }
  GError *error = NULL;
  ReteAgreement *a = rete_agreement_compute (s, r, m, threshold, roc_points, &error);
  g_assert_null (a);
  g_assert_error (error, RETE_VESSEL_ERROR, b->code);
  g_test_message ("%s", error->message);
  g_assert_nonnull (strstr (error->message, b->message_part));
  g_clear_error (&error);
  if (b->kind == BAD_ROC_POINTS)
    return;
  /* the threshold-only entry points fail the same way and leave their outputs alone */
  ReteConfusion confusion, before;
  memset (&confusion, 0xab, sizeof confusion);
  before = confusion;
  g_assert_false (rete_agreement_at_threshold (s, r, m, threshold, &confusion, NULL, &error));
  g_assert_error (error, RETE_VESSEL_ERROR, b->code);
  g_assert_cmpmem (&confusion, sizeof confusion, &before, sizeof before);
  g_clear_error (&error);
  g_assert_null (rete_agreement_map (s, r, m, threshold, &error));
  g_assert_error (error, RETE_VESSEL_ERROR, b->code);
  g_clear_error (&error);
}

static void
test_arrays_bad_input (void)
{
  const float scores[] = { 0.2f, 0.4f, NAN };
  const guint8 none[] = { 0, 0, 0 }, all[] = { 1, 1, 1 }, some[] = { 0, 1, 0 };
  GError *error = NULL;
  g_assert_true (isnan (rete_roc_auc (scores, some, 0, &error)));
  g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_EMPTY);
  g_clear_error (&error);
  g_assert_true (isnan (rete_roc_auc (scores, none, 2, &error)));
  g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_UNDEFINED);
  g_test_message ("%s", error->message);
  g_clear_error (&error);
  g_assert_true (isnan (rete_roc_auc (scores, all, 2, &error)));
  g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_UNDEFINED);
  g_clear_error (&error);
  /* average precision needs positives only: all vessel gives 1 */
  g_assert_cmpfloat (rete_average_precision (scores, all, 2, &error), ==, 1.0);
  g_assert_no_error (error);
  g_assert_true (isnan (rete_average_precision (scores, none, 2, &error)));
  g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_UNDEFINED);
  g_clear_error (&error);
  g_assert_true (isnan (rete_roc_auc (scores, some, 3, &error)));
  g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_NOT_FINITE);
  g_test_message ("%s", error->message);
  g_assert_nonnull (strstr (error->message, "index 2"));
  g_clear_error (&error);
}

/* A reference with one class inside the mask: AUC is undefined (NaN and a reason); the
 * rates that are defined are still given. */
static void
test_one_class_reference (void)
{
  g_autoptr (ReteImage) scores = rete_image_new (8, 8, 1, NULL);
  g_autoptr (ReteImage) reference = rete_image_new (8, 8, 1, NULL);
  for (int i = 0; i < 64; i++)
    scores->data[i] = (float) i / 64.0f;
  GError *error = NULL;
  g_autoptr (ReteAgreement) none = rete_agreement_compute (scores, reference, NULL, 0.5, 10, &error);
  g_assert_no_error (error);
  g_assert_true (isnan (none->auc) && isnan (none->average_precision));
  g_assert_nonnull (strstr (none->auc_undefined_reason, "no vessel pixel"));
  g_test_message ("no vessel: %s; accuracy %.4f, specificity %.4f", none->auc_undefined_reason,
                  none->rates.accuracy, none->rates.specificity);
  g_assert_cmpfloat (none->rates.accuracy, ==, 0.5);
  g_assert_cmpfloat (none->rates.specificity, ==, 0.5);
  g_assert_true (isnan (none->rates.sensitivity) && isnan (none->best_youden_threshold));

  for (int i = 0; i < 64; i++)
    reference->data[i] = 1.0f;
  g_autoptr (ReteAgreement) all = rete_agreement_compute (scores, reference, NULL, 0.5, 10, &error);
  g_assert_no_error (error);
  g_assert_true (isnan (all->auc));
  g_assert_nonnull (strstr (all->auc_undefined_reason, "vessel everywhere"));
  g_test_message ("all vessel: %s; sensitivity %.4f, AP %.4f", all->auc_undefined_reason,
                  all->rates.sensitivity, all->average_precision);
  g_assert_cmpfloat (all->rates.sensitivity, ==, 0.5);
  g_assert_cmpfloat (all->average_precision, ==, 1.0);
  g_assert_cmpfloat (all->best_dice_rates.dice, ==, 1.0); /* mark everything: Dice 1 */
}

/* A reference that is not 0/1 (a blurred or resampled tracing) is thresholded at 0.5, and
 * the count of such values is reported; NaN outside the mask is not looked at. */
static void
test_non_binary_reference (void)
{
  ReferenceCase c = { NULL, 64, 48, SCORES_UNIFORM, TRUE, 0.5, 0, FALSE };
  ReteImage *scores, *reference, *mask;
  make_case (&c, &scores, &reference, &mask);
  g_autoptr (ReteImage) soft = rete_image_copy (reference, NULL);
  gsize changed = 0;
  for (gsize i = 0; i < rete_image_n_pixels (soft); i++)
    {
      if (mask->data[i] < 0.5f)
        {
          scores->data[i] = NAN;
          continue;
        }
      if (i % 3 == 0)
        {
          soft->data[i] = soft->data[i] >= 0.5f ? 0.75f : 0.25f;
          changed++;
        }
    }
  GError *error = NULL;
  g_autoptr (ReteAgreement) hard = rete_agreement_compute (scores, reference, mask, 0.5, 0, &error);
  g_assert_no_error (error);
  g_autoptr (ReteAgreement) a = rete_agreement_compute (scores, soft, mask, 0.5, 0, &error);
  g_assert_no_error (error);
  g_test_message ("%" G_GSIZE_FORMAT " reference values not 0/1 reported (%" G_GSIZE_FORMAT
                  " set); AUC %.6f both ways", a->n_reference_not_binary, changed, a->auc);
  g_assert_cmpuint (a->n_reference_not_binary, ==, changed);
  g_assert_cmpuint (hard->n_reference_not_binary, ==, 0);
  g_assert_cmpfloat (a->auc, ==, hard->auc);
  g_assert_cmpmem (&a->confusion, sizeof a->confusion, &hard->confusion, sizeof hard->confusion);
  g_assert_null (a->roc_threshold);
  rete_image_free (scores);
  rete_image_free (reference);
  rete_image_free (mask);
}

/* rete_agreement_at_threshold and rete_agreement_map agree with rete_agreement_compute. */
static void
test_threshold_and_map (void)
{
  ReferenceCase c = { NULL, 97, 61, SCORES_8BIT, TRUE, 0.5, 0, FALSE };
  ReteImage *scores, *reference, *mask;
  make_case (&c, &scores, &reference, &mask);
  GError *error = NULL;
  for (double t = 0.1; t < 1.0; t += 0.2)
    {
      g_autoptr (ReteAgreement) a = rete_agreement_compute (scores, reference, mask, t, 0, &error);
      g_assert_no_error (error);
      ReteConfusion confusion;
      ReteRates rates;
      g_assert_true (rete_agreement_at_threshold (scores, reference, mask, t, &confusion, &rates, &error));
      g_assert_cmpmem (&confusion, sizeof confusion, &a->confusion, sizeof a->confusion);
      g_assert_cmpfloat (rates.mcc, ==, a->rates.mcc);
      g_autoptr (ReteImage) map = rete_agreement_map (scores, reference, mask, t, &error);
      g_assert_no_error (error);
      guint64 count[5] = { 0 };
      for (gsize i = 0; i < rete_image_n_pixels (map); i++)
        {
          int code = (int) map->data[i];
          g_assert_cmpfloat (map->data[i], ==, code);
          g_assert_cmpint (code, >=, 0);
          g_assert_cmpint (code, <=, 4);
          count[code]++;
          g_assert_true ((code == 4) == (mask->data[i] < 0.5f));
        }
      g_assert_cmpuint (count[0], ==, a->confusion.true_negative);
      g_assert_cmpuint (count[1], ==, a->confusion.true_positive);
      g_assert_cmpuint (count[2], ==, a->confusion.false_positive);
      g_assert_cmpuint (count[3], ==, a->confusion.false_negative);
    }
  rete_image_free (scores);
  rete_image_free (reference);
  rete_image_free (mask);
}

/* ---- open data: CHASE_DB1 (Fraz et al., IEEE TBME 2012), second observer against the
 * first inside the FOV mask, as a binary map and as a blurred (soft) map; two photographs
 * of the training part (01L, 05R) keep the check short. */

/* Mean over a (2r+1)^2 window, clamped at the edges: a soft map with many distinct values. */
static ReteImage *
box_blur (const ReteImage *in, int r)
{
  ReteImage *out = rete_image_new_like (in, 1, NULL);
  for (int y = 0; y < in->height; y++)
    for (int x = 0; x < in->width; x++)
      {
        double sum = 0;
        for (int dy = -r; dy <= r; dy++)
          for (int dx = -r; dx <= r; dx++)
            sum += rete_image_get (in, 0, CLAMP (x + dx, 0, in->width - 1),
                                   CLAMP (y + dy, 0, in->height - 1));
        out->data[(gsize) y * in->width + x] = (float) (sum / ((2 * r + 1) * (2 * r + 1)));
      }
  return out;
}

static void
test_chase_second_observer (void)
{
  static const char *const names[] = { "Image_01L", "Image_05R" };
  rete_io_init ();
  GPtrArray *lines = g_ptr_array_new_with_free_func (g_free);
  GPtrArray *ours = g_ptr_array_new_with_free_func ((GDestroyNotify) rete_agreement_free);
  JsonParser *parser = NULL;
  char *skip_reason = NULL;
  for (gsize k = 0; k < G_N_ELEMENTS (names); k++)
    {
      g_autofree char *first = g_strdup_printf ("chase_db1/manual1/%s.png", names[k]);
      g_autofree char *second = g_strdup_printf ("chase_db1/manual2/%s.png", names[k]);
      g_autofree char *fov = g_strdup_printf ("chase_db1/mask/%s.png", names[k]);
      g_autofree char *first_path = rete_test_data_file (first);
      g_autofree char *second_path = first_path ? rete_test_data_file (second) : NULL;
      g_autofree char *fov_path = second_path ? rete_test_data_file (fov) : NULL;
      if (fov_path == NULL)
        goto out; /* skipped, with the reason */
      GError *error = NULL;
      g_autoptr (ReteImage) reference = rete_io_load_grey (first_path, &error);
      g_assert_no_error (error);
      g_autoptr (ReteImage) map = rete_io_load_grey (second_path, &error);
      g_assert_no_error (error);
      g_autoptr (ReteImage) mask = rete_io_load_grey (fov_path, &error);
      g_assert_no_error (error);
      g_autoptr (ReteImage) soft = box_blur (map, 2);
      const ReteImage *maps[] = { map, soft };
      for (int m = 0; m < 2; m++)
        {
          ReteAgreement *a = rete_agreement_compute (maps[m], reference, mask, 0.5, 400, &error);
          g_assert_no_error (error);
          g_ptr_array_add (ours, a);
          char tag[32];
          g_snprintf (tag, sizeof tag, "chase%" G_GSIZE_FORMAT "-%d", k, m);
          g_ptr_array_add (lines, prepare_request (tag, 0.5, maps[m], reference, mask, a));
        }
    }
  parser = json_parser_new ();
  JsonArray *answers = run_requests (lines, "chase", parser, &skip_reason);
  if (answers == NULL)
    {
      g_test_skip (skip_reason);
      goto out;
    }
  for (guint k = 0; k < ours->len; k++)
    {
      const ReteAgreement *a = g_ptr_array_index (ours, k);
      Comparison cmp = { 0 };
      compare_all (&cmp, a, json_array_get_object_element (answers, k), 400);
      g_test_message ("%s, second observer %s: AUC %.4f, accuracy %.4f, sensitivity %.4f, "
                      "specificity %.4f, Dice %.4f; largest difference from sklearn %.3g "
                      "(%s), tolerance %g", names[k / 2], k % 2 ? "blurred (5x5 mean)" : "binary",
                      a->auc, a->rates.accuracy, a->rates.sensitivity, a->rates.specificity,
                      a->rates.dice, cmp.worst, cmp.worst_what, TOLERANCE);
      g_assert_cmpfloat (cmp.worst, <=, TOLERANCE);
    }
out:
  g_ptr_array_free (lines, TRUE);
  g_ptr_array_free (ours, TRUE);
  g_clear_object (&parser);
  g_free (skip_reason);
}

int
main (int argc, char **argv)
{
  g_test_init (&argc, &argv, NULL);
  for (gsize i = 0; i < G_N_ELEMENTS (reference_cases); i++)
    g_test_add_data_func (reference_cases[i].path, &reference_cases[i], test_matches_sklearn);
  g_test_add_func ("/vessel/agreement/documented-example", test_documented_example);
  for (gsize i = 0; i < G_N_ELEMENTS (engine_cases); i++)
    g_test_add_data_func (engine_cases[i].path, &engine_cases[i], test_engine_matches_naive);
  for (gsize i = 0; i < G_N_ELEMENTS (bad_cases); i++)
    g_test_add_data_func (bad_cases[i].path, &bad_cases[i], test_bad_input);
  g_test_add_func ("/vessel/agreement/bad-input/arrays", test_arrays_bad_input);
  g_test_add_func ("/vessel/agreement/one-class-reference", test_one_class_reference);
  g_test_add_func ("/vessel/agreement/non-binary-reference", test_non_binary_reference);
  g_test_add_func ("/vessel/agreement/threshold-and-map", test_threshold_and_map);
  g_test_add_func ("/vessel/agreement/chase-db1/second-observer", test_chase_second_observer);
  return g_test_run ();
}
