/* test_train.c — training of the U-Net (nn/rete_train.h): the validation AUC against
 * scikit-learn, AdamW against PyTorch, patches and augmentation, determinism, resuming,
 * fine-tuning, restarts of dead networks, the tiny preset over several seeds, bad input, and
 * `rete train` on files (sizes that do not match, grey annotations, resume, empty folders).
 *
 * Synthetic data: dark curved stripes ("vessels") on an unevenly lit disc with noise, drawn
 * here, so the checks need no photographs; standardised inside the disc as the prepared
 * input of a photograph is.
 */
#include "rete_io.h"
#include "rete_test.h"
#include "rete_train.h"

#include <math.h>
#include <string.h>
#include <sys/wait.h>
#include <glib/gstdio.h>

/* ---- synthetic pairs --------------------------------------------------------------------- */

typedef struct {
  ReteTrainSample sample;
  float *input, *target, *mask;
} Pair;

static double
segment_distance (double px, double py, double ax, double ay, double bx, double by)
{
  double vx = bx - ax, vy = by - ay, wx = px - ax, wy = py - ay;
  double t = CLAMP ((wx * vx + wy * vy) / (vx * vx + vy * vy + 1e-12), 0.0, 1.0);
  double dx = wx - t * vx, dy = wy - t * vy;
  return sqrt (dx * dx + dy * dy);
}

static void
pair_make (Pair *p, int width, int height, guint64 seed)
{
  guint64 rng = seed * 7919 + 13;
  gsize n = (gsize) width * height;
  p->input = g_new0 (float, n);
  p->target = g_new0 (float, n);
  p->mask = g_new0 (float, n);
  enum { N_VESSELS = 7, N_SEGMENTS = 10 };
  double pts[N_VESSELS][N_SEGMENTS + 1][2], widths[N_VESSELS];
  for (int v = 0; v < N_VESSELS; v++)
    {
      double x = rete_rng_uniform (&rng) * width, y = rete_rng_uniform (&rng) * height;
      double angle = rete_rng_uniform (&rng) * 2 * G_PI;
      widths[v] = 1.0 + 2.5 * rete_rng_uniform (&rng);
      for (int s = 0; s <= N_SEGMENTS; s++)
        {
          pts[v][s][0] = x;
          pts[v][s][1] = y;
          angle += (rete_rng_uniform (&rng) - 0.5) * 0.8;
          x += cos (angle) * width / 12.0;
          y += sin (angle) * height / 12.0;
        }
    }
  double cx = (width - 1) / 2.0, cy = (height - 1) / 2.0, radius = 0.47 * MIN (width, height);
  double sum = 0, sum2 = 0;
  gsize inside = 0;
  for (int y = 0; y < height; y++)
    for (int x = 0; x < width; x++)
      {
        gsize i = (gsize) y * width + x;
        double value = 0.55 + 0.15 * sin (x * 0.03) * cos (y * 0.02);
        gboolean vessel = FALSE;
        for (int v = 0; v < N_VESSELS && !vessel; v++)
          for (int s = 0; s < N_SEGMENTS; s++)
            if (segment_distance (x, y, pts[v][s][0], pts[v][s][1], pts[v][s + 1][0],
                                  pts[v][s + 1][1]) <= widths[v] / 2)
              {
                vessel = TRUE;
                break;
              }
        /* noise: sum of uniforms, standard deviation ~ 0.05 */
        double noise = (rete_rng_uniform (&rng) + rete_rng_uniform (&rng)
                        + rete_rng_uniform (&rng) - 1.5) * 0.1;
        value += (vessel ? -0.12 : 0.0) + noise;
        gboolean in_fov = hypot (x - cx, y - cy) <= radius;
        p->target[i] = vessel ? 1.0f : 0.0f;
        p->mask[i] = in_fov ? 1.0f : 0.0f;
        p->input[i] = (float) value;
        if (in_fov)
          {
            sum += value;
            sum2 += value * value;
            inside++;
          }
      }
  double mean = sum / inside, sd = sqrt (sum2 / inside - mean * mean);
  for (gsize i = 0; i < n; i++)
    p->input[i] = p->mask[i] > 0 ? (float) ((p->input[i] - mean) / sd) : 0.0f;
  p->sample = (ReteTrainSample) { "synthetic", 1, height, width, p->input, p->target, p->mask };
}

static void
pair_clear (Pair *p)
{
  g_free (p->input);
  g_free (p->target);
  g_free (p->mask);
}

/* A small data set shared by the training checks: 3 training, 1 validation pair. */
static Pair train_pairs[3], valid_pair;
static ReteTrainSample train_samples[3];

static void
data_init (void)
{
  for (int i = 0; i < 3; i++)
    {
      pair_make (&train_pairs[i], 96, 96, 100 + i);
      train_samples[i] = train_pairs[i].sample;
    }
  pair_make (&valid_pair, 96, 96, 200);
}

static void
config_small (ReteTrainConfig *c, int levels, int filters, int steps)
{
  rete_train_config_init (c);
  c->unet.levels = levels;
  c->unet.base_filters = filters;
  c->steps = steps;
  c->batch_size = 4;
  c->patches.patch_size = 32;
  c->validate_every = 10;
  c->warmup_steps = 5;
  c->learning_rate = 3e-3;
}

/* ---- AUC against scikit-learn ------------------------------------------------------------ */

static void
test_auc_matches_sklearn (void)
{
  /* sklearn.metrics.roc_auc_score is the reference (scikit-learn, through /usr/bin/python3).
   * Tolerance 1e-12: both are exact, the difference is double rounding. */
  enum { N = 20000 };
  float *scores = g_new (float, N);
  guint8 *labels = g_new (guint8, N), *mask = g_new (guint8, N);
  guint64 rng = 5;
  for (int i = 0; i < N; i++)
    {
      labels[i] = rete_rng_uniform (&rng) < 0.1;
      /* scores rounded to 1/50 so that many tie, across the classes too */
      scores[i] = roundf ((float) ((labels[i] ? 0.3 : 0.0) + rete_rng_uniform (&rng)) * 50) / 50;
      if (i % 7 == 0)
        scores[i] = -scores[i]; /* negative scores and -0 as well */
      mask[i] = rete_rng_uniform (&rng) < 0.8;
    }
  gsize shape[1] = { N };
  char *ps = rete_test_tmp_path ("auc_scores.npy"), *pl = rete_test_tmp_path ("auc_labels.npy");
  char *pm = rete_test_tmp_path ("auc_mask.npy");
  GError *error = NULL;
  g_assert_true (rete_test_write_npy_f32 (ps, scores, shape, 1, &error));
  g_assert_true (rete_test_write_npy_u8 (pl, labels, shape, 1, &error));
  g_assert_true (rete_test_write_npy_u8 (pm, mask, shape, 1, &error));
  gboolean skipped = FALSE;
  char *out = rete_test_python ("train_auc.py", &skipped, &error, ps, pl, pm, NULL);
  if (skipped)
    {
      g_test_skip ("scikit-learn is not available to /usr/bin/python3");
      return;
    }
  g_assert_no_error (error);
  double reference = g_ascii_strtod (out, NULL);
  double ours = rete_train_auc (scores, labels, mask, N, &error);
  g_assert_no_error (error);
  double diff = fabs (ours - reference);
  g_test_message ("AUC: ours %.15f, sklearn %.15f, difference %.3g (tolerance 1e-12)", ours,
                  reference, diff);
  g_assert_cmpfloat (diff, <=, 1e-12);
  /* the checker can fail: with the labels flipped our AUC is 1 - AUC, far from sklearn's */
  for (int i = 0; i < N; i++)
    labels[i] = !labels[i];
  double wrong = rete_train_auc (scores, labels, mask, N, &error);
  g_assert_no_error (error);
  g_assert_cmpfloat (fabs (wrong - reference), >, 1e-12);
  g_assert_cmpfloat (fabs (wrong - (1 - reference)), <=, 1e-12);
  /* one class only: undefined */
  memset (labels, 0, N);
  g_assert_true (isnan (rete_train_auc (scores, labels, mask, N, &error)));
  g_assert_error (error, RETE_NN_ERROR, RETE_ERROR_UNDEFINED);
  g_clear_error (&error);
  memset (mask, 0, N);
  g_assert_true (isnan (rete_train_auc (scores, labels, mask, N, &error)));
  g_assert_error (error, RETE_NN_ERROR, RETE_ERROR_EMPTY);
  g_clear_error (&error);
  g_free (out); g_free (ps); g_free (pl); g_free (pm);
  g_free (scores); g_free (labels); g_free (mask);
}

/* ---- AdamW against PyTorch --------------------------------------------------------------- */

static void
test_adam_matches_torch (void)
{
  /* torch.optim.AdamW (PyTorch 1.13) is the reference; decay only where decay[i] = 1 (two
   * parameter groups there). Tolerance: 2e-6 absolute on parameters of size ~1 after 6 steps
   * (float32 rounding of the same operations in a different order). */
  enum { N = 3000, STEPS = 6 };
  float *params = g_new (float, N), *grads = g_new (float, N * STEPS), *lrs = g_new (float, STEPS);
  guint8 *decay = g_new (guint8, N);
  guint64 rng = 11;
  for (int i = 0; i < N; i++)
    {
      params[i] = (float) (rete_rng_uniform (&rng) * 2 - 1);
      decay[i] = i % 3 != 0;
    }
  for (int i = 0; i < N * STEPS; i++)
    grads[i] = (float) ((rete_rng_uniform (&rng) - 0.5) * (i % 5 == 0 ? 1e-4 : 1.0));
  for (int t = 0; t < STEPS; t++)
    lrs[t] = (float) (1e-2 * (t + 1) / STEPS);
  double wd = 0.05;
  char *pp = rete_test_tmp_path ("adam_params.npy"), *pg = rete_test_tmp_path ("adam_grads.npy");
  char *pd = rete_test_tmp_path ("adam_decay.npy"), *pl = rete_test_tmp_path ("adam_lrs.npy");
  char *po = rete_test_tmp_path ("adam_out.npy");
  gsize s1[1] = { N }, s2[2] = { STEPS, N }, s3[1] = { STEPS };
  GError *error = NULL;
  g_assert_true (rete_test_write_npy_f32 (pp, params, s1, 1, &error));
  g_assert_true (rete_test_write_npy_f32 (pg, grads, s2, 2, &error));
  g_assert_true (rete_test_write_npy_u8 (pd, decay, s1, 1, &error));
  g_assert_true (rete_test_write_npy_f32 (pl, lrs, s3, 1, &error));
  gboolean skipped = FALSE;
  char wd_text[32];
  g_ascii_dtostr (wd_text, sizeof wd_text, wd);
  char *out = rete_test_python ("train_adam.py", &skipped, &error, pp, pg, pd, pl, wd_text, po,
                                NULL);
  if (skipped)
    {
      g_test_skip ("PyTorch is not available to /usr/bin/python3");
      return;
    }
  g_assert_no_error (error);
  gsize shape[4];
  int dims;
  float *reference = rete_test_read_npy_f32 (po, shape, &dims, &error);
  g_assert_no_error (error);

  ReteAdamParams ap;
  rete_adam_params_init (&ap);
  ap.weight_decay = wd;
  for (int pass = 0; pass < 2; pass++)
    {
      /* pass 1 is deliberately wrong (decay on every parameter) and must fail the check */
      float *ours = g_memdup2 (params, N * sizeof (float));
      ReteAdamState *state = rete_adam_new (N, &error);
      g_assert_no_error (error);
      for (int t = 0; t < STEPS; t++)
        rete_adam_step (state, &ap, lrs[t], ours, grads + (gsize) t * N, pass == 0 ? decay : NULL);
      gsize where;
      double diff = rete_test_max_abs_diff (ours, reference, N, &where);
      g_test_message ("AdamW %s: largest difference %.3g at %" G_GSIZE_FORMAT " (tolerance 2e-6)",
                      pass == 0 ? "against torch" : "with decay everywhere (must differ)", diff,
                      where);
      if (pass == 0)
        g_assert_cmpfloat (diff, <=, 2e-6);
      else
        g_assert_cmpfloat (diff, >, 2e-6);
      rete_adam_free (state);
      g_free (ours);
    }
  g_free (reference); g_free (out);
  g_free (pp); g_free (pg); g_free (pd); g_free (pl); g_free (po);
  g_free (params); g_free (grads); g_free (lrs); g_free (decay);
}

/* ---- patches and augmentation ------------------------------------------------------------ */

/* An image whose every pixel value is unique (y * W + x + 1), to locate where a patch came from. */
typedef struct {
  int width, height;
  float *input, *target, *mask;
  ReteTrainSample sample;
} IndexImage;

static void
index_image (IndexImage *im, int width, int height)
{
  gsize n = (gsize) width * height;
  im->width = width;
  im->height = height;
  im->input = g_new (float, n);
  im->target = g_new (float, n);
  im->mask = g_new (float, n);
  for (gsize i = 0; i < n; i++)
    {
      im->input[i] = (float) (i + 1);
      im->target[i] = (i % 5 == 0) ? 1.0f : 0.0f;
      im->mask[i] = 1.0f;
    }
  im->sample = (ReteTrainSample) { "index", 1, height, width, im->input, im->target, im->mask };
}

static void
index_image_clear (IndexImage *im)
{
  g_free (im->input);
  g_free (im->target);
  g_free (im->mask);
}

/* Without augmentation a patch is an exact crop: every pixel is its top-left neighbour + 1
 * along a row and + W down a column, inside the photograph; outside reads 0 and mask 0.
 * With flips and quarter turns it is one of the 8 symmetries of a crop: neighbours differ by
 * ±1 or ±W along both axes. */
static void
test_patch_exact (gconstpointer data)
{
  gboolean symmetries = GPOINTER_TO_INT (data);
  IndexImage im;
  index_image (&im, 50, 37);
  GError *error = NULL;
  RetePatchSampler *sampler = rete_patch_sampler_new (&im.sample, 1, 1, &error);
  g_assert_no_error (error);
  RetePatchOptions o;
  rete_patch_options_init (&o);
  o.patch_size = 16;
  o.augment = symmetries ? (RETE_AUGMENT_FLIP | RETE_AUGMENT_ROTATE90) : 0;
  float in[256], target[256], mask[256];
  int seen_orientations = 0;
  for (guint64 seed = 1; seed <= 200; seed++)
    {
      rete_patch_draw (sampler, &o, seed, in, target, mask);
      int step_x = 0, step_y = 0;
      for (int y = 0; y < 16; y++)
        for (int x = 0; x < 16; x++)
          {
            int i = y * 16 + x;
            if (mask[i] == 0)
              {
                g_assert_cmpfloat (in[i], ==, 0);
                g_assert_cmpfloat (target[i], ==, 0);
                continue;
              }
            int v = (int) in[i] - 1; /* source index */
            g_assert_cmpfloat (target[i], ==, (v % 5 == 0) ? 1.0f : 0.0f);
            if (x + 1 < 16 && mask[i + 1] > 0)
              {
                int d = (int) in[i + 1] - (int) in[i];
                g_assert_true (d == 1 || d == -1 || d == 50 || d == -50);
                if (!symmetries)
                  g_assert_cmpint (d, ==, 1);
                step_x = d;
              }
            if (y + 1 < 16 && mask[i + 16] > 0)
              {
                int d = (int) in[i + 16] - (int) in[i];
                if (!symmetries)
                  g_assert_cmpint (d, ==, 50);
                step_y = d;
              }
          }
      if (step_x != 0 && step_y != 0)
        {
          g_assert_cmpint (abs (step_x) + abs (step_y), ==, 51); /* one axis each */
          int ox = step_x == 1 ? 0 : step_x == -1 ? 1 : step_x == 50 ? 2 : 3;
          int oy = step_y == 1 ? 0 : step_y == -1 ? 1 : step_y == 50 ? 2 : 3;
          seen_orientations |= 1 << (ox * 4 + oy);
        }
    }
  /* the 8 symmetries of the square all appear in 200 draws (identity only without them) */
  g_assert_cmpint (__builtin_popcount (seen_orientations), ==, symmetries ? 8 : 1);
  rete_patch_sampler_free (sampler);
  index_image_clear (&im);
}

/* A photograph smaller than a patch is padded: the mask covers the photograph's pixels only. */
static void
test_patch_padding (void)
{
  IndexImage im;
  index_image (&im, 10, 7);
  GError *error = NULL;
  RetePatchSampler *sampler = rete_patch_sampler_new (&im.sample, 1, 1, &error);
  g_assert_no_error (error);
  RetePatchOptions o;
  rete_patch_options_init (&o);
  o.patch_size = 32;
  float in[32 * 32], target[32 * 32], mask[32 * 32];
  for (guint64 seed = 1; seed <= 20; seed++)
    {
      o.augment = seed % 2 ? 0 : RETE_AUGMENT_ALL;
      rete_patch_draw (sampler, &o, seed, in, target, mask);
      int inside = 0;
      for (int i = 0; i < 32 * 32; i++)
        {
          inside += mask[i] > 0;
          if (mask[i] == 0 && o.augment == 0)
            g_assert_cmpfloat (in[i], ==, 0);
        }
      if (o.augment == 0)
        g_assert_cmpint (inside, ==, 70);
      else
        g_assert_cmpint (abs (inside - 70), <=, 14); /* rotated and resampled: about the same */
    }
  rete_patch_sampler_free (sampler);
  index_image_clear (&im);
}

/* balance 1: every centre on a vessel; balance 0: every centre on background; negative:
 * uniform, about the vessel fraction (1/5 here; 400 draws, 4 standard deviations). */
static void
test_patch_balance (void)
{
  IndexImage im;
  index_image (&im, 40, 40);
  GError *error = NULL;
  RetePatchSampler *sampler = rete_patch_sampler_new (&im.sample, 1, 1, &error);
  g_assert_no_error (error);
  RetePatchOptions o;
  rete_patch_options_init (&o);
  o.patch_size = 8;
  o.augment = 0;
  float in[64], target[64], mask[64];
  double balances[3] = { 1.0, 0.0, -1.0 };
  for (int b = 0; b < 3; b++)
    {
      o.balance = balances[b];
      int on_vessel = 0;
      for (guint64 seed = 1; seed <= 400; seed++)
        {
          rete_patch_draw (sampler, &o, seed, in, target, mask);
          on_vessel += target[4 * 8 + 4] > 0; /* the centre pixel (P/2, P/2) */
        }
      g_test_message ("balance %.0f: %d of 400 centres on vessel", balances[b], on_vessel);
      if (b == 0)
        g_assert_cmpint (on_vessel, ==, 400);
      else if (b == 1)
        g_assert_cmpint (on_vessel, ==, 0);
      else
        g_assert_cmpint (abs (on_vessel - 80), <=, 32);
    }
  rete_patch_sampler_free (sampler);
  index_image_clear (&im);
}

/* Photometric changes act inside the mask only; brightness alone shifts every inside value
 * by one amount within ±brightness; the draw is a function of the seed. */
static void
test_patch_photometric (void)
{
  float x[64], y[64], mask[64];
  for (int i = 0; i < 64; i++)
    {
      x[i] = (float) (i - 32) / 16;
      mask[i] = i < 48;
    }
  RetePatchOptions o;
  rete_patch_options_init (&o);
  o.augment = RETE_AUGMENT_BRIGHTNESS;
  memcpy (y, x, sizeof x);
  rete_patch_photometric (y, 1, 8, mask, &o, 42);
  double shift = y[0] - x[0];
  g_assert_cmpfloat (fabs (shift), <=, o.brightness);
  for (int i = 0; i < 64; i++)
    g_assert_cmpfloat (fabs (y[i] - x[i] - (i < 48 ? shift : 0)), <=, 1e-6);
  o.augment = RETE_AUGMENT_ALL;
  float z[64];
  memcpy (y, x, sizeof x);
  memcpy (z, x, sizeof x);
  rete_patch_photometric (y, 1, 8, mask, &o, 7);
  rete_patch_photometric (z, 1, 8, mask, &o, 7);
  g_assert_cmpmem (y, sizeof y, z, sizeof z);
  for (int i = 48; i < 64; i++)
    g_assert_cmpfloat (y[i], ==, x[i]);
  for (int i = 1; i < 48; i++) /* monotone: order kept */
    g_assert_cmpfloat (y[i], >=, y[i - 1]);
}

static void
add_patch_tests (void)
{
  g_test_add_data_func ("/nn/train/patches/exact-crop", GINT_TO_POINTER (FALSE), test_patch_exact);
  g_test_add_data_func ("/nn/train/patches/flips-and-quarter-turns", GINT_TO_POINTER (TRUE),
                        test_patch_exact);
  g_test_add_func ("/nn/train/patches/padding-small-photograph", test_patch_padding);
  g_test_add_func ("/nn/train/patches/vessel-balance", test_patch_balance);
  g_test_add_func ("/nn/train/patches/photometric", test_patch_photometric);
}

/* ---- training runs ----------------------------------------------------------------------- */

static ReteModel *
train_quiet (const ReteTrainConfig *c, ReteTrainReport *report, ReteProgressFunc progress,
             gpointer data, GError **error)
{
  return rete_train (c, train_samples, 3, &valid_pair.sample, 1, progress, data, report, error);
}

static float *
model_params (const ReteModel *m)
{
  ReteUnet *net = rete_model_net (m);
  return g_memdup2 (rete_unet_params (net), rete_unet_n_params (net) * sizeof (float));
}

/* Same seed, data and configuration -> the same weights, bit for bit; another seed -> others. */
static void
test_deterministic (void)
{
  ReteTrainConfig c;
  config_small (&c, 2, 4, 30);
  GError *error = NULL;
  ReteModel *a = train_quiet (&c, NULL, NULL, NULL, &error);
  g_assert_no_error (error);
  ReteModel *b = train_quiet (&c, NULL, NULL, NULL, &error);
  g_assert_no_error (error);
  c.seed = 2;
  ReteModel *d = train_quiet (&c, NULL, NULL, NULL, &error);
  g_assert_no_error (error);
  gsize n = rete_unet_n_params (rete_model_net (a));
  float *pa = model_params (a), *pb = model_params (b), *pd = model_params (d);
  g_assert_cmpmem (pa, n * sizeof (float), pb, n * sizeof (float));
  g_assert_true (memcmp (pa, pd, n * sizeof (float)) != 0);
  g_assert_cmpstr (rete_model_get_meta (a, "training_seed"), ==, "1");
  g_free (pa); g_free (pb); g_free (pd);
  rete_model_free (a); rete_model_free (b); rete_model_free (d);
}

static gboolean
cancel_at (double fraction, const char *message, gpointer data)
{
  int *countdown = data;
  return --(*countdown) > 0;
}

/* A run cancelled (as if killed) after its checkpoint and then resumed ends with the same
 * weights as an unbroken run; the log continues; no temporary file is left behind. */
static void
test_resume_equals_unbroken (void)
{
  ReteTrainConfig c;
  config_small (&c, 2, 4, 40);
  GError *error = NULL;
  ReteModel *unbroken = train_quiet (&c, NULL, NULL, NULL, &error);
  g_assert_no_error (error);

  char *checkpoint = rete_test_tmp_path ("resume.ckpt"), *log = rete_test_tmp_path ("resume.csv");
  char *best = rete_test_tmp_path ("resume-best.safetensors");
  c.checkpoint_path = checkpoint;
  c.log_path = log;
  c.best_model_path = best;
  int countdown = 20;
  ReteModel *none = train_quiet (&c, NULL, cancel_at, &countdown, &error);
  g_assert_null (none);
  g_assert_error (error, RETE_NN_ERROR, RETE_ERROR_CANCELLED);
  g_clear_error (&error);
  g_assert_true (g_file_test (checkpoint, G_FILE_TEST_EXISTS));
  g_assert_true (g_file_test (best, G_FILE_TEST_EXISTS));

  c.resume = TRUE;
  ReteTrainReport report;
  ReteModel *resumed = train_quiet (&c, &report, NULL, NULL, &error);
  g_assert_no_error (error);
  g_assert_cmpint (report.step, ==, 40);
  gsize n = rete_unet_n_params (rete_model_net (unbroken));
  float *pu = model_params (unbroken), *pr = model_params (resumed);
  g_assert_cmpmem (pu, n * sizeof (float), pr, n * sizeof (float));
  g_assert_cmpstr (rete_model_get_meta (unbroken, "validation_auc"), ==,
                   rete_model_get_meta (resumed, "validation_auc"));

  /* the best model on disk is a model file: it loads and carries the validation AUC */
  ReteModel *loaded = rete_model_load (best, &error);
  g_assert_no_error (error);
  g_assert_nonnull (rete_model_get_meta (loaded, "validation_auc"));
  rete_model_free (loaded);

  char *text = NULL;
  g_assert_true (g_file_get_contents (log, &text, NULL, NULL));
  g_assert_true (g_str_has_prefix (text, "step,loss,learning_rate,validation_auc,seconds,event\n"));
  g_assert_nonnull (strstr (text, "resumed at step 20"));
  g_assert_nonnull (strstr (text, "\n40,"));
  g_free (text);

  GDir *dir = g_dir_open (rete_test_tmp_dir (), 0, NULL);
  const char *name;
  while ((name = g_dir_read_name (dir)) != NULL)
    g_assert_null (strstr (name, ".tmp"));
  g_dir_close (dir);

  /* a damaged checkpoint is refused with a message, not read */
  char *contents = NULL;
  gsize size = 0;
  g_assert_true (g_file_get_contents (checkpoint, &contents, &size, NULL));
  g_assert_true (g_file_set_contents (checkpoint, contents, size / 2, NULL));
  g_assert_null (train_quiet (&c, NULL, NULL, NULL, &error));
  g_assert_error (error, RETE_NN_ERROR, RETE_ERROR_FORMAT);
  g_test_message ("damaged checkpoint: %s", error->message);
  g_clear_error (&error);
  g_assert_true (g_file_set_contents (checkpoint, contents, size, NULL));
  /* and one of another run (another seed) too */
  c.seed = 9;
  g_assert_null (train_quiet (&c, NULL, NULL, NULL, &error));
  g_assert_error (error, RETE_NN_ERROR, RETE_ERROR_INVALID_ARGUMENT);
  g_test_message ("other run: %s", error->message);
  g_clear_error (&error);

  g_free (contents);
  g_free (pu); g_free (pr);
  rete_model_free (unbroken); rete_model_free (resumed);
  g_free (checkpoint); g_free (log); g_free (best);
}

/* Fine-tuning starts from the given weights: one step at a tiny rate barely moves them. */
static void
test_fine_tune (void)
{
  ReteTrainConfig c;
  config_small (&c, 2, 4, 20);
  GError *error = NULL;
  ReteModel *start = train_quiet (&c, NULL, NULL, NULL, &error);
  g_assert_no_error (error);
  ReteTrainConfig f;
  config_small (&f, 3, 8, 1); /* the architecture is taken from the start model */
  f.start_model = start;
  f.learning_rate = 1e-9;
  f.warmup_steps = 0;
  ReteModel *tuned = train_quiet (&f, NULL, NULL, NULL, &error);
  g_assert_no_error (error);
  gsize n = rete_unet_n_params (rete_model_net (start));
  g_assert_cmpuint (rete_unet_n_params (rete_model_net (tuned)), ==, n);
  gsize where;
  float *ps = model_params (start), *pt = model_params (tuned);
  double diff = rete_test_max_abs_diff (ps, pt, n, &where);
  g_test_message ("fine-tune, one step at 1e-9: largest weight change %.3g", diff);
  g_assert_cmpfloat (diff, <=, 1e-6);
  g_free (ps); g_free (pt);
  rete_model_free (start); rete_model_free (tuned);
}

/* The tiny preset (3 levels, 2 base filters) learns on every seed tried: validation AUC above
 * 0.85 on the synthetic stripes (a constant output would give 0.5; classical filters reach
 * about 0.9 on these). Restarts are allowed and reported. */
static void
test_tiny_trains_reliably (void)
{
  for (guint64 seed = 1; seed <= 5; seed++)
    {
      ReteTrainConfig c;
      config_small (&c, 3, 2, 300);
      c.seed = seed;
      c.validate_every = 50;
      c.batch_size = 8;
      c.learning_rate = 1e-2;
      ReteTrainReport report;
      GError *error = NULL;
      ReteModel *m = train_quiet (&c, &report, NULL, NULL, &error);
      g_assert_no_error (error);
      g_test_message ("tiny, seed %" G_GUINT64_FORMAT ": %" G_GSIZE_FORMAT " parameters, best "
                      "validation AUC %.4f at step %d, %d restart(s), %.1f s", seed,
                      rete_unet_n_params (rete_model_net (m)), report.best_validation_auc,
                      report.best_step, report.restarts, report.seconds);
      g_assert_cmpfloat (report.best_validation_auc, >=, 0.85);
      rete_model_free (m);
    }
}

/* A network whose output cannot vary (every ReLU off: a large negative bias) is detected and
 * restarted; with no restarts allowed training fails with a message instead. */
static void
test_dead_network_restarts (void)
{
  ReteTrainConfig c;
  config_small (&c, 2, 2, 30);
  GError *error = NULL;
  ReteModel *dead = train_quiet (&c, NULL, NULL, NULL, &error);
  g_assert_no_error (error);
  ReteUnet *net = rete_model_net (dead);
  for (int t = 0; t < rete_unet_n_tensors (net); t++)
    {
      gsize offset;
      int shape[4], dims;
      const char *name = rete_unet_tensor_name (net, t, &offset, shape, &dims);
      if (g_str_has_suffix (name, "bias") && g_str_has_prefix (name, "enc0"))
        for (int k = 0; k < shape[0]; k++)
          rete_unet_params (net)[offset + k] = -1e6f;
    }
  c.start_model = dead; /* fine-tuning a dead network cannot restart: an error */
  g_assert_null (train_quiet (&c, NULL, NULL, NULL, &error));
  g_assert_error (error, RETE_NN_ERROR, RETE_ERROR_UNDEFINED);
  g_test_message ("dead start model: %s", error->message);
  g_clear_error (&error);
  rete_model_free (dead);
}

static void
test_bad_input (void)
{
  ReteTrainConfig c;
  config_small (&c, 2, 4, 5);
  GError *error = NULL;
  /* an empty training set */
  g_assert_null (rete_train (&c, NULL, 0, NULL, 0, NULL, NULL, NULL, &error));
  g_assert_error (error, RETE_NN_ERROR, RETE_ERROR_EMPTY);
  g_test_message ("%s", error->message);
  g_clear_error (&error);
  /* three-channel input for a one-channel network */
  ReteTrainSample wrong = train_samples[0];
  wrong.channels = 3;
  g_assert_null (rete_train (&c, &wrong, 1, NULL, 0, NULL, NULL, NULL, &error));
  g_assert_error (error, RETE_NN_ERROR, RETE_ERROR_SIZE_MISMATCH);
  g_test_message ("%s", error->message);
  g_clear_error (&error);
  /* an empty field of view */
  float *empty = g_new0 (float, 96 * 96);
  wrong = train_samples[0];
  wrong.mask = empty;
  g_assert_null (rete_train (&c, &wrong, 1, NULL, 0, NULL, NULL, NULL, &error));
  g_assert_error (error, RETE_NN_ERROR, RETE_ERROR_EMPTY);
  g_test_message ("%s", error->message);
  g_clear_error (&error);
  /* a validation pair with an annotation of one class: the AUC is undefined */
  wrong = valid_pair.sample;
  wrong.target = empty;
  g_assert_null (rete_train (&c, train_samples, 3, &wrong, 1, NULL, NULL, NULL, &error));
  g_assert_error (error, RETE_NN_ERROR, RETE_ERROR_UNDEFINED);
  g_test_message ("%s", error->message);
  g_clear_error (&error);
  g_free (empty);
  /* a non-finite input */
  float *nan_input = g_memdup2 (train_pairs[0].input, 96 * 96 * sizeof (float));
  nan_input[500] = NAN;
  wrong = train_samples[0];
  wrong.input = nan_input;
  g_assert_null (rete_train (&c, &wrong, 1, NULL, 0, NULL, NULL, NULL, &error));
  g_assert_error (error, RETE_NN_ERROR, RETE_ERROR_NOT_FINITE);
  g_clear_error (&error);
  g_free (nan_input);
  /* settings out of range */
  ReteTrainConfig b = c;
  b.patches.patch_size = 31; /* not a multiple of 2 for 2 levels */
  g_assert_null (train_quiet (&b, NULL, NULL, NULL, &error));
  g_assert_error (error, RETE_NN_ERROR, RETE_ERROR_INVALID_ARGUMENT);
  g_test_message ("%s", error->message);
  g_clear_error (&error);
  b = c;
  b.learning_rate = 0;
  g_assert_null (train_quiet (&b, NULL, NULL, NULL, &error));
  g_assert_error (error, RETE_NN_ERROR, RETE_ERROR_INVALID_ARGUMENT);
  g_clear_error (&error);
  b = c;
  b.resume = TRUE;
  g_assert_null (train_quiet (&b, NULL, NULL, NULL, &error));
  g_assert_error (error, RETE_NN_ERROR, RETE_ERROR_INVALID_ARGUMENT);
  g_clear_error (&error);
  /* a photograph smaller than a patch trains (padded) */
  Pair small;
  pair_make (&small, 20, 14, 3);
  b = c;
  ReteModel *m = rete_train (&b, &small.sample, 1, NULL, 0, NULL, NULL, NULL, &error);
  g_assert_no_error (error);
  g_assert_nonnull (m);
  rete_model_free (m);
  pair_clear (&small);
}

/* ---- the command: rete train on files ----------------------------------------------------- */

typedef struct {
  int status;
  char *out, *err;
} CliRun;

static void
cli_run_free (CliRun *run)
{
  g_free (run->out);
  g_free (run->err);
  g_free (run);
}

/* Runs the built `rete` (RETE_BUILD_DIR/cli/rete) with NULL-terminated arguments. */
static CliRun *
rete_run (const char *first, ...)
{
  const char *build = g_getenv ("RETE_BUILD_DIR");
  g_autofree char *binary = g_build_filename (build ? build : ".", "cli", "rete", NULL);
  GPtrArray *argv = g_ptr_array_new ();
  g_ptr_array_add (argv, binary);
  va_list args;
  va_start (args, first);
  for (const char *a = first; a != NULL; a = va_arg (args, const char *))
    g_ptr_array_add (argv, (char *) a);
  va_end (args);
  g_ptr_array_add (argv, NULL);
  CliRun *run = g_new0 (CliRun, 1);
  int wait_status = 0;
  GError *error = NULL;
  gboolean ok = g_spawn_sync (NULL, (char **) argv->pdata, NULL, G_SPAWN_DEFAULT, NULL, NULL,
                              &run->out, &run->err, &wait_status, &error);
  g_assert_no_error (error);
  g_assert_true (ok);
  run->status = WIFEXITED (wait_status) ? WEXITSTATUS (wait_status) : 128;
  g_autofree char *line = g_strjoinv (" ", (char **) argv->pdata);
  g_test_message ("$ %s -> exit %d\n%s%s", line, run->status, run->out, run->err);
  g_ptr_array_free (argv, TRUE);
  return run;
}

/* A folder of photographs (grey synthetic discs saved as RGB PNG) and one of annotations. */
static void
write_pair_files (const char *photos, const char *annotations, const char *name, int size,
                  guint64 seed, gboolean grey_annotation, int annotation_size)
{
  Pair p;
  pair_make (&p, size, size, seed);
  GError *error = NULL;
  g_autoptr (ReteImage) photo = rete_image_new (size, size, 3, &error);
  for (gsize i = 0; i < (gsize) size * size; i++)
    for (int c = 0; c < 3; c++) /* back to [0,1]: the standardised values, rescaled */
      photo->data[c * (gsize) size * size + i] = CLAMP (0.5f + 0.15f * p.input[i], 0.0f, 1.0f);
  g_autoptr (ReteImage) ann = rete_image_new (annotation_size, annotation_size, 1, &error);
  for (int y = 0; y < annotation_size; y++)
    for (int x = 0; x < annotation_size; x++)
      {
        float t = (x < size && y < size) ? p.target[y * size + x] : 0.0f;
        ann->data[y * annotation_size + x] = grey_annotation && t > 0 ? 0.8f : t;
      }
  g_autofree char *pp = g_strdup_printf ("%s/%s.png", photos, name);
  g_autofree char *pa = g_strdup_printf ("%s/%s.png", annotations, name);
  g_assert_true (rete_io_save (photo, pp, NULL, &error));
  g_assert_true (rete_io_save (ann, pa, NULL, &error));
  g_assert_no_error (error);
  pair_clear (&p);
}

/* root/name, made as a folder */
static char *
folder_in (const char *root, const char *name)
{
  char *path = g_build_filename (root, name, NULL);
  g_mkdir_with_parents (path, 0755);
  return path;
}

static void
test_cli_train (void)
{
  rete_io_init ();
  g_autofree char *root = rete_test_tmp_path ("cli");
  g_autofree char *photos = folder_in (root, "photos");
  g_autofree char *annotations = folder_in (root, "annotations");
  g_autofree char *empty = folder_in (root, "empty");
  g_autofree char *model = g_build_filename (root, "m.safetensors", NULL);
  g_autofree char *log = g_build_filename (root, "m.csv", NULL);
  write_pair_files (photos, annotations, "a", 80, 1, FALSE, 80);
  write_pair_files (photos, annotations, "b", 80, 2, TRUE, 80);  /* grey annotation */
  write_pair_files (photos, annotations, "c", 80, 3, FALSE, 80);

  /* non-binary annotation: thresholded at half with a warning; the model is written with the
   * preprocessing and the validation figures in its metadata */
  CliRun *r = rete_run ("train", "--annotations", annotations, "--validate", "c", "--size", "tiny",
                        "--steps", "12", "--batch", "2", "--patch", "32", "--validate-every", "6",
                        "--output", model, "--quiet", photos, NULL);
  g_assert_cmpint (r->status, ==, 0);
  g_assert_nonnull (strstr (r->err, "is not binary"));
  g_assert_nonnull (strstr (r->out, "validation (1 photographs"));
  cli_run_free (r);
  GError *error = NULL;
  ReteModel *m = rete_model_load (model, &error);
  g_assert_no_error (error);
  g_assert_cmpstr (rete_model_get_meta (m, "channel"), ==, "green");
  g_assert_cmpstr (rete_model_get_meta (m, "normalisation"), ==, "standardise");
  g_assert_cmpstr (rete_model_get_meta (m, "validation_photographs"), ==, "c");
  g_assert_nonnull (rete_model_get_meta (m, "validation_sensitivity"));
  rete_model_free (m);

  /* resuming a finished run with more steps goes on from its checkpoint */
  r = rete_run ("train", "--annotations", annotations, "--validate", "c", "--size", "tiny",
                "--steps", "18", "--batch", "2", "--patch", "32", "--validate-every", "6",
                "--output", model, "--quiet", "--resume", photos, NULL);
  g_assert_cmpint (r->status, ==, 0);
  cli_run_free (r);
  char *text = NULL;
  g_assert_true (g_file_get_contents (log, &text, NULL, NULL));
  g_assert_nonnull (strstr (text, "resumed at step 12"));
  g_assert_nonnull (strstr (text, "\n18,"));
  g_free (text);

  /* an annotation of another size than its photograph: an error naming both sizes */
  write_pair_files (photos, annotations, "d", 80, 4, FALSE, 64);
  r = rete_run ("train", "--annotations", annotations, "--size", "tiny", "--steps", "2",
                "--output", model, photos, NULL);
  g_assert_cmpint (r->status, ==, 1);
  g_assert_nonnull (strstr (r->err, "is 64×64 but photograph"));
  cli_run_free (r);

  /* an empty folder of photographs; an unknown validation name; no --output */
  r = rete_run ("train", "--annotations", annotations, "--output", model, empty, NULL);
  g_assert_cmpint (r->status, !=, 0);
  cli_run_free (r);
  g_autofree char *one = g_build_filename (photos, "a.png", NULL);
  r = rete_run ("train", "--annotations", annotations, "--validate", "zzz", "--output", model,
                one, NULL);
  g_assert_cmpint (r->status, ==, 1);
  g_assert_nonnull (strstr (r->err, "'zzz' is not among the photographs"));
  cli_run_free (r);
  r = rete_run ("train", "--annotations", annotations, one, NULL);
  g_assert_cmpint (r->status, ==, 2);
  cli_run_free (r);
}

/* `rete sweep`: a grid cell per size, with the activation turned off (-linear) and with fewer
 * training photographs (@N); one CSV row per training; a malformed cell is a usage error. */
static void
test_cli_sweep (void)
{
  rete_io_init ();
  g_autofree char *root = rete_test_tmp_path ("sweep");
  g_autofree char *photos = folder_in (root, "photos");
  g_autofree char *annotations = folder_in (root, "annotations");
  g_autofree char *csv = g_build_filename (root, "grid.csv", NULL);
  write_pair_files (photos, annotations, "a", 64, 1, FALSE, 64);
  write_pair_files (photos, annotations, "b", 64, 2, FALSE, 64);
  write_pair_files (photos, annotations, "c", 64, 3, FALSE, 64);
  CliRun *r = rete_run ("sweep", "--annotations", annotations, "--validate", "c",
                        "--sizes", "2x2x1,2x2x1-linear@1", "--repeats", "2", "--steps", "4",
                        "--batch", "2", "--patch", "32", "--validate-every", "2", "--csv", csv,
                        "--quiet", photos, NULL);
  g_assert_cmpint (r->status, ==, 0);
  g_assert_nonnull (strstr (r->out, "| 2x2x1 | 2 × 2 × 1 | ReLU | 2 |"));
  g_assert_nonnull (strstr (r->out, "| 2x2x1-linear@1 | 2 × 2 × 1 | none | 1 |"));
  cli_run_free (r);
  char *text = NULL;
  g_assert_true (g_file_get_contents (csv, &text, NULL, NULL));
  g_auto (GStrv) lines = g_strsplit (g_strchomp (text), "\n", -1);
  g_free (text);
  g_assert_cmpuint (g_strv_length (lines), ==, 5); /* header + 2 sizes × 2 seeds */
  g_assert_true (g_str_has_prefix (lines[1], "2x2x1,2,2,1,relu,2,"));
  g_assert_true (g_str_has_prefix (lines[3], "2x2x1-linear@1,2,2,1,identity,1,"));

  const char *bad[] = { "2x2", "2x2x1@0", "2x2x1@many", "9x2x1" };
  for (gsize i = 0; i < G_N_ELEMENTS (bad); i++)
    {
      r = rete_run ("sweep", "--annotations", annotations, "--validate", "c", "--sizes", bad[i],
                    photos, NULL);
      g_assert_cmpint (r->status, ==, 2);
      g_assert_nonnull (strstr (r->err, "--help"));
      cli_run_free (r);
    }
}

static void
add_run_tests (void)
{
  g_test_add_func ("/nn/train/deterministic", test_deterministic);
  g_test_add_func ("/nn/train/resume-equals-unbroken", test_resume_equals_unbroken);
  g_test_add_func ("/nn/train/fine-tune", test_fine_tune);
  g_test_add_func ("/nn/train/tiny-trains-reliably", test_tiny_trains_reliably);
  g_test_add_func ("/nn/train/dead-network", test_dead_network_restarts);
  g_test_add_func ("/nn/train/bad-input", test_bad_input);
  g_test_add_func ("/nn/train/command", test_cli_train);
  g_test_add_func ("/nn/train/sweep-command", test_cli_sweep);
}


int
main (int argc, char **argv)
{
  g_test_init (&argc, &argv, NULL);
  data_init ();
  g_test_add_func ("/nn/train/auc/matches-sklearn", test_auc_matches_sklearn);
  g_test_add_func ("/nn/train/adam/matches-torch", test_adam_matches_torch);
  add_patch_tests ();
  add_run_tests ();
  int status = g_test_run ();
  for (int i = 0; i < 3; i++)
    pair_clear (&train_pairs[i]);
  pair_clear (&valid_pair);
  return status;
}
