/* test_synth.c — the synthetic fundus generator (vessel/rete_synth.h): determinism by seed,
 * consistency of the exact truth, realistic vessel fraction and widths, the look of the disc,
 * macula and vessels, JPEG-like blocks, lesions, and bad parameters.
 *
 * Outside references: CHASE_DB1's mean vessel fraction inside the FOV, 0.069 (observer 1)
 * and 0.066 (observer 2), measured on the 20 training images (../shared/data/README.md);
 * DRIVE's manual maps hold about 12–13 % vessel inside the FOV (from memory). The accepted
 * range 0.06–0.14 spans both with a margin. */
#include "rete_synth.h"

#include <math.h>
#include <string.h>

#include "rete_test.h"

static ReteSynthTruth *
make_truth (const ReteSynthParams *params)
{
  ReteSynthTruth *truth = g_new0 (ReteSynthTruth, 1);
  GError *error = NULL;
  gboolean ok = rete_synth_fundus_truth (params, truth, &error);
  g_assert_no_error (error);
  g_assert_true (ok);
  return truth;
}

static void
free_truth (ReteSynthTruth *truth)
{
  rete_synth_truth_clear (truth);
  g_free (truth);
}

static gsize
count_ones (const ReteImage *mask)
{
  gsize n = 0;
  for (gsize i = 0; i < rete_image_n_pixels (mask); i++)
    n += mask->data[i] > 0.5f;
  return n;
}

static gboolean
images_equal (const ReteImage *a, const ReteImage *b)
{
  return a->width == b->width && a->height == b->height && a->channels == b->channels
         && memcmp (a->data, b->data, rete_image_n_pixels (a) * a->channels * sizeof (float)) == 0;
}

static double
luma (const ReteImage *photo, gsize i)
{
  gsize n = rete_image_n_pixels (photo);
  return 0.2126 * photo->data[i] + 0.7152 * photo->data[n + i] + 0.0722 * photo->data[2 * n + i];
}

static void
test_deterministic (void)
{
  ReteSynthParams params;
  rete_synth_params_init (&params);
  params.seed = 42;
  params.n_lesions = 5;
  params.jpeg_artefacts = TRUE;
  ReteSynthTruth *a = make_truth (&params);
  ReteSynthTruth *b = make_truth (&params);
  g_assert_true (images_equal (a->photo, b->photo));
  g_assert_true (images_equal (a->vessels, b->vessels));
  g_assert_true (images_equal (a->fov, b->fov));
  g_assert_true (images_equal (a->widths, b->widths));

  /* The same with one thread: rows are drawn in parallel, the result must not depend on it. */
  rete_set_thread_count (1);
  ReteSynthTruth *c = make_truth (&params);
  rete_set_thread_count (0);
  g_assert_true (images_equal (a->photo, c->photo));
  g_assert_true (images_equal (a->vessels, c->vessels));

  /* Another seed, another eye. */
  params.seed = 43;
  ReteSynthTruth *d = make_truth (&params);
  g_assert_false (images_equal (a->vessels, d->vessels));
  g_assert_false (images_equal (a->photo, d->photo));
  free_truth (a);
  free_truth (b);
  free_truth (c);
  free_truth (d);
}

typedef struct {
  const char *name;
  int width, height;
  double aperture;
  guint64 seed;
  int n_lesions;
  gboolean jpeg;
} SizeCase;

static const SizeCase size_cases[] = {
  { "default-565x584", 565, 584, 0.95, 1, 0, FALSE },
  { "chase-999x960", 999, 960, 0.95, 7, 0, FALSE },
  { "chase-999x960-seed-999", 999, 960, 0.95, 999, 0, FALSE },
  { "cropped-aperture", 700, 600, 1.2, 3, 0, FALSE },
  { "lesions-jpeg", 640, 640, 0.9, 11, 20, TRUE },
  /* Below about 450 px the fraction nears 0.06 and falls under it (0.055–0.061 at 256×256,
   * 0.0605 at 400×400, measured):
   * the narrowest vessels stay 1 px wide while the widest shrink with the frame. */
  { "small-480", 480, 480, 0.95, 5, 0, FALSE },
};

static void
test_truth_consistent (gconstpointer data)
{
  const SizeCase *c = data;
  ReteSynthParams params;
  rete_synth_params_init (&params);
  params.width = c->width;
  params.height = c->height;
  params.aperture_radius = c->aperture;
  params.seed = c->seed;
  params.n_lesions = c->n_lesions;
  params.jpeg_artefacts = c->jpeg;
  ReteSynthTruth *t = make_truth (&params);
  g_assert_cmpint (t->photo->width, ==, c->width);
  g_assert_cmpint (t->photo->height, ==, c->height);
  g_assert_cmpint (t->photo->channels, ==, 3);

  const double R = c->aperture * MIN (c->width, c->height) / 2.0;
  gsize n = rete_image_n_pixels (t->fov), n_fov = 0, n_vessel = 0, n_outside_fov_wrong = 0;
  double outside_sum = 0.0;
  gsize n_outside = 0;
  for (int y = 0; y < c->height; y++)
    for (int x = 0; x < c->width; x++)
      {
        gsize i = (gsize) y * c->width + x;
        double dx = x + 0.5 - c->width / 2.0, dy = y + 0.5 - c->height / 2.0;
        gboolean inside = dx * dx + dy * dy <= R * R;
        float f = t->fov->data[i], v = t->vessels->data[i];
        g_assert_true (f == 0.0f || f == 1.0f);
        g_assert_true (v == 0.0f || v == 1.0f);
        if ((f == 1.0f) != inside)
          n_outside_fov_wrong++;
        n_fov += f == 1.0f;
        n_vessel += v == 1.0f;
        /* Vessels (and their widths, arteries, lesions) only inside the FOV. */
        if (f == 0.0f)
          {
            g_assert_cmpfloat (v, ==, 0.0f);
            g_assert_cmpfloat (t->lesions->data[i], ==, 0.0f);
            if (dx * dx + dy * dy > (R + 2) * (R + 2))
              {
                outside_sum += luma (t->photo, i);
                n_outside++;
              }
          }
        g_assert_true ((t->widths->data[i] > 0.0f) == (v == 1.0f));
        g_assert_true (t->arteries->data[i] == 0.0f || v == 1.0f);
        for (int ch = 0; ch < 3; ch++)
          {
            float p = t->photo->data[(gsize) ch * n + i];
            g_assert_true (p >= 0.0f && p <= 1.0f);
          }
      }
  /* The FOV is exactly the pixels whose centre lies in the aperture circle. */
  g_assert_cmpuint (n_outside_fov_wrong, ==, 0);
  double fraction = (double) n_vessel / n_fov;
  g_test_message ("%s: vessel fraction inside the FOV %.4f (accepted 0.06–0.14; CHASE_DB1 0.069)",
                  c->name, fraction);
  g_assert_cmpfloat (fraction, >=, 0.06);
  g_assert_cmpfloat (fraction, <=, 0.14);
  /* A camera's surround is black (the generator leaves ~0.012 plus noise). */
  if (n_outside > 0)
    {
      g_test_message ("%s: mean brightness outside the aperture %.4f (accepted < 0.05)",
                      c->name, outside_sum / n_outside);
      g_assert_cmpfloat (outside_sum / n_outside, <, 0.05);
    }
  if (c->n_lesions > 0)
    g_assert_cmpuint (count_ones (t->lesions), >, 0);
  free_truth (t);
}

static void
test_widths (void)
{
  ReteSynthParams params;
  rete_synth_params_init (&params);
  params.width = 999;
  params.height = 960;
  params.seed = 5;
  ReteSynthTruth *t = make_truth (&params);
  gsize n = rete_image_n_pixels (t->widths), n_vessel = 0, n_thin = 0, n_wide = 0;
  float low = G_MAXFLOAT, high = 0.0f;
  double artery_sum = 0, vein_sum = 0;
  gsize n_artery = 0, n_vein = 0;
  for (gsize i = 0; i < n; i++)
    {
      float w = t->widths->data[i];
      if (w <= 0.0f)
        continue;
      n_vessel++;
      low = MIN (low, w);
      high = MAX (high, w);
      n_thin += w < 2.0f;
      n_wide += w >= 8.0f;
      if (t->arteries->data[i] > 0.0f)
        artery_sum += w, n_artery++;
      else
        vein_sum += w, n_vein++;
    }
  g_test_message ("widths %.3f–%.3f px; %.1f %% of vessel pixels under 2 px, %.1f %% at 8 px "
                  "or more; mean width artery %.2f vein %.2f",
                  low, high, 100.0 * n_thin / n_vessel, 100.0 * n_wide / n_vessel,
                  artery_sum / n_artery, vein_sum / n_vein);
  /* The task: widths 1–12 px at 999×960 (12 at the disc, the default). */
  g_assert_cmpfloat (low, >=, 1.0f - 1e-5f);
  g_assert_cmpfloat (high, <=, 12.0f + 1e-4f);
  g_assert_cmpfloat (high, >=, 11.0f);
  g_assert_cmpfloat ((double) n_thin / n_vessel, >, 0.1);
  g_assert_cmpuint (n_wide, >, 0);
  /* Veins wider than arteries (common practice: arteriole-to-venule ratio about 2/3). */
  g_assert_cmpfloat (artery_sum / n_artery, <, vein_sum / n_vein);

  /* Stated widths are honoured. */
  params.max_vessel_width = 6.0;
  params.min_vessel_width = 2.0;
  ReteSynthTruth *u = make_truth (&params);
  low = G_MAXFLOAT, high = 0.0f;
  for (gsize i = 0; i < n; i++)
    if (u->widths->data[i] > 0.0f)
      {
        low = MIN (low, u->widths->data[i]);
        high = MAX (high, u->widths->data[i]);
      }
  g_test_message ("with widths 2–6 asked: %.3f–%.3f px", low, high);
  g_assert_cmpfloat (low, >=, 2.0f - 1e-5f);
  g_assert_cmpfloat (high, <=, 6.0f + 1e-4f);
  free_truth (t);
  free_truth (u);
}

/* Mean of luma (channel -1) or one channel over pixels selected by `pick`. */
typedef gboolean (*PickFunc) (const ReteSynthTruth *t, int x, int y, gsize i);

static double
mean_where (const ReteSynthTruth *t, int channel, PickFunc pick, gsize *count)
{
  double sum = 0.0;
  gsize n = 0, np = rete_image_n_pixels (t->photo);
  for (int y = 0; y < t->photo->height; y++)
    for (int x = 0; x < t->photo->width; x++)
      {
        gsize i = (gsize) y * t->photo->width + x;
        if (!pick (t, x, y, i))
          continue;
        sum += channel < 0 ? luma (t->photo, i) : t->photo->data[(gsize) channel * np + i];
        n++;
      }
  if (count)
    *count = n;
  return n ? sum / n : NAN;
}

static double
distance (double x0, double y0, int x, int y)
{
  return hypot (x + 0.5 - x0, y + 0.5 - y0);
}

static gboolean
pick_disc (const ReteSynthTruth *t, int x, int y, gsize i)
{
  return distance (t->disc_x, t->disc_y, x, y) < 0.8 * t->disc_radius && t->vessels->data[i] == 0;
}

static gboolean
pick_fundus (const ReteSynthTruth *t, int x, int y, gsize i)
{
  return t->fov->data[i] > 0 && t->vessels->data[i] == 0
         && distance (t->disc_x, t->disc_y, x, y) > 2.0 * t->disc_radius
         && distance (t->fovea_x, t->fovea_y, x, y) > 0.3 * t->aperture_radius
         && distance (t->aperture_x, t->aperture_y, x, y) < 0.8 * t->aperture_radius;
}

static gboolean
pick_macula (const ReteSynthTruth *t, int x, int y, gsize i)
{
  return distance (t->fovea_x, t->fovea_y, x, y) < 0.08 * t->aperture_radius
         && t->vessels->data[i] == 0;
}

static gboolean
pick_vein (const ReteSynthTruth *t, int x, int y, gsize i)
{
  return t->widths->data[i] >= 4.0f && t->arteries->data[i] == 0
         && distance (t->disc_x, t->disc_y, x, y) > 2.0 * t->disc_radius;
}

static gboolean
pick_artery (const ReteSynthTruth *t, int x, int y, gsize i)
{
  return t->widths->data[i] >= 4.0f && t->arteries->data[i] > 0
         && distance (t->disc_x, t->disc_y, x, y) > 2.0 * t->disc_radius;
}

static gboolean
pick_lesion (const ReteSynthTruth *t, int x, int y, gsize i)
{
  return t->lesions->data[i] > 0 && t->vessels->data[i] == 0;
}

static void
test_appearance (void)
{
  ReteSynthParams params;
  rete_synth_params_init (&params);
  params.width = 999;
  params.height = 960;
  params.n_lesions = 10;
  for (guint64 seed = 1; seed <= 3; seed++)
    {
      params.seed = seed;
      ReteSynthTruth *t = make_truth (&params);
      gsize n_lesion = 0;
      double disc = mean_where (t, -1, pick_disc, NULL);
      double fundus = mean_where (t, -1, pick_fundus, NULL);
      double macula = mean_where (t, -1, pick_macula, NULL);
      double fundus_green = mean_where (t, 1, pick_fundus, NULL);
      double vein_green = mean_where (t, 1, pick_vein, NULL);
      double artery_green = mean_where (t, 1, pick_artery, NULL);
      double fundus_red = mean_where (t, 0, pick_fundus, NULL);
      double lesion = mean_where (t, -1, pick_lesion, &n_lesion);
      g_test_message ("seed %" G_GUINT64_FORMAT ": luma disc %.3f fundus %.3f macula %.3f "
                      "lesions %.3f; green fundus %.3f artery %.3f vein %.3f; red fundus %.3f",
                      seed, disc, fundus, macula, lesion, fundus_green, artery_green, vein_green,
                      fundus_red);
      /* Common practice: the disc is the brightest part of a fundus photograph, the macula
       * darker than its surround, the fundus orange-red (red well above green), vessels
       * darker than the fundus in green, veins darker than arteries. */
      g_assert_cmpfloat (disc, >, 1.4 * fundus);
      g_assert_cmpfloat (macula, <, 0.9 * fundus);
      g_assert_cmpfloat (fundus_red, >, 2.0 * fundus_green);
      g_assert_cmpfloat (artery_green, <, 0.85 * fundus_green);
      g_assert_cmpfloat (vein_green, <, artery_green);
      g_assert_cmpuint (n_lesion, >, 0);
      g_assert_cmpfloat (lesion, >, 1.2 * fundus);
      free_truth (t);
    }
}

/* Horizontal jumps across 8-pixel block edges against those inside blocks, on green inside
 * the FOV, without sensor noise: quantised blocks show steps at their edges. */
static double
blockiness (const ReteSynthTruth *t)
{
  double edge = 0, inner = 0;
  gsize n_edge = 0, n_inner = 0;
  const float *g = rete_image_plane (t->photo, 1);
  for (int y = 0; y < t->photo->height; y++)
    for (int x = 1; x < t->photo->width; x++)
      {
        gsize i = (gsize) y * t->photo->width + x;
        if (t->fov->data[i] == 0 || t->fov->data[i - 1] == 0)
          continue;
        double d = fabs (g[i] - g[i - 1]);
        if (x % 8 == 0)
          edge += d, n_edge++;
        else
          inner += d, n_inner++;
      }
  return (edge / n_edge) / (inner / n_inner);
}

static void
test_jpeg_blocks (void)
{
  ReteSynthParams params;
  rete_synth_params_init (&params);
  params.noise = 0.0;
  ReteSynthTruth *smooth = make_truth (&params);
  params.jpeg_artefacts = TRUE;
  params.jpeg_quality = 30;
  ReteSynthTruth *blocky = make_truth (&params);
  double b0 = blockiness (smooth), b1 = blockiness (blocky);
  g_test_message ("block-edge / inner gradient ratio: %.3f without, %.3f with quality 30", b0, b1);
  g_assert_cmpfloat (b0, <, 1.1);
  g_assert_cmpfloat (b1, >, 1.3);
  /* The truth does not change with the artefacts. */
  g_assert_true (images_equal (smooth->vessels, blocky->vessels));
  g_assert_false (images_equal (smooth->photo, blocky->photo));
  free_truth (smooth);
  free_truth (blocky);
}

static void
test_no_trees (void)
{
  ReteSynthParams params;
  rete_synth_params_init (&params);
  params.n_trees = 0;
  ReteImage *photo = NULL, *vessels = NULL, *fov = NULL;
  GError *error = NULL;
  g_assert_true (rete_synth_fundus (&params, &photo, &vessels, &fov, &error));
  g_assert_no_error (error);
  g_assert_cmpuint (count_ones (vessels), ==, 0);
  g_assert_cmpuint (count_ones (fov), >, 0);
  rete_image_free (photo);
  rete_image_free (vessels);
  rete_image_free (fov);
  /* Only the photograph wanted. */
  params.n_trees = 4;
  photo = NULL;
  g_assert_true (rete_synth_fundus (&params, &photo, NULL, NULL, &error));
  g_assert_no_error (error);
  g_assert_nonnull (photo);
  rete_image_free (photo);
}

typedef struct {
  const char *name;
  const char *field; /* text the message must name */
  void (*spoil) (ReteSynthParams *p);
} BadCase;

static void spoil_width (ReteSynthParams *p) { p->width = 0; }
static void spoil_height (ReteSynthParams *p) { p->height = -5; }
static void spoil_huge (ReteSynthParams *p) { p->width = 70000; }
static void spoil_pixels (ReteSynthParams *p) { p->width = 60000; p->height = 60000; }
static void spoil_aperture (ReteSynthParams *p) { p->aperture_radius = 0.0; }
static void spoil_aperture_nan (ReteSynthParams *p) { p->aperture_radius = NAN; }
static void spoil_trees (ReteSynthParams *p) { p->n_trees = -1; }
static void spoil_many_trees (ReteSynthParams *p) { p->n_trees = 100; }
static void spoil_min_width (ReteSynthParams *p) { p->min_vessel_width = 0.0; }
static void spoil_max_width (ReteSynthParams *p) { p->max_vessel_width = 0.5; }
static void spoil_illumination (ReteSynthParams *p) { p->illumination = 2.0; }
static void spoil_noise (ReteSynthParams *p) { p->noise = -0.1; }
static void spoil_lesions (ReteSynthParams *p) { p->n_lesions = -3; }
static void spoil_quality (ReteSynthParams *p) { p->jpeg_quality = 0; }

static const BadCase bad_cases[] = {
  { "width-zero", "width", spoil_width },
  { "height-negative", "height", spoil_height },
  { "width-too-large", "width", spoil_huge },
  { "too-many-pixels", "larger than", spoil_pixels },
  { "aperture-zero", "aperture", spoil_aperture },
  { "aperture-nan", "aperture", spoil_aperture_nan },
  { "trees-negative", "trees", spoil_trees },
  { "trees-too-many", "trees", spoil_many_trees },
  { "min-width-zero", "narrowest", spoil_min_width },
  { "max-below-min", "widest", spoil_max_width },
  { "illumination", "illumination", spoil_illumination },
  { "noise-negative", "noise", spoil_noise },
  { "lesions-negative", "lesions", spoil_lesions },
  { "jpeg-quality-zero", "JPEG quality", spoil_quality },
};

static void
test_bad_parameters (gconstpointer data)
{
  const BadCase *c = data;
  ReteSynthParams params;
  rete_synth_params_init (&params);
  c->spoil (&params);
  ReteImage *photo = NULL, *vessels = NULL, *fov = NULL;
  GError *error = NULL;
  g_assert_false (rete_synth_fundus (&params, &photo, &vessels, &fov, &error));
  g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT);
  g_test_message ("%s: %s", c->name, error->message);
  g_assert_nonnull (strstr (error->message, c->field));
  g_assert_null (photo);
  g_assert_null (vessels);
  g_assert_null (fov);
  g_clear_error (&error);
  ReteSynthTruth truth;
  g_assert_false (rete_synth_fundus_truth (&params, &truth, &error));
  g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT);
  g_assert_null (truth.photo);
  g_clear_error (&error);
}

int
main (int argc, char **argv)
{
  g_test_init (&argc, &argv, NULL);
  g_test_add_func ("/vessel/synth/deterministic-by-seed", test_deterministic);
  for (gsize i = 0; i < G_N_ELEMENTS (size_cases); i++)
    {
      char *path = g_strdup_printf ("/vessel/synth/truth-consistent/%s", size_cases[i].name);
      g_test_add_data_func (path, &size_cases[i], test_truth_consistent);
      g_free (path);
    }
  g_test_add_func ("/vessel/synth/widths", test_widths);
  g_test_add_func ("/vessel/synth/disc-macula-vessels-look", test_appearance);
  g_test_add_func ("/vessel/synth/jpeg-blocks", test_jpeg_blocks);
  g_test_add_func ("/vessel/synth/no-trees", test_no_trees);
  for (gsize i = 0; i < G_N_ELEMENTS (bad_cases); i++)
    {
      char *path = g_strdup_printf ("/vessel/synth/bad-parameters/%s", bad_cases[i].name);
      g_test_add_data_func (path, &bad_cases[i], test_bad_parameters);
      g_free (path);
    }
  return g_test_run ();
}
