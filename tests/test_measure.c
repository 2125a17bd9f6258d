/* test_measure.c — vessel measurements (vessel/rete_measure.h) against outside references:
 *   skeleton      skimage.morphology.skeletonize (skimage 0.19, Zhang–Suen table) on synthetic
 *                 vessel maps from our generator (vessel/rete_synth.h)
 *   distance      scipy.ndimage.distance_transform_edt (exact), same maps and random ones
 *   calibre       digital bands of known width (width = pixels per unit length, counted)
 *   fractal       shapes of known box-counting dimension (Falconer 1990): line 1, filled
 *                 square 2, Sierpiński triangle log 3/log 2, Koch curve log 4/log 3
 *   tortuosity    geometry: a semicircle has arc/chord π/2, a circle of radius R has
 *                 curvature 1/R, so ∫κ² ds / L = 1/R²
 *   graph         shapes with a known number of junctions, end points and segments
 *   units, CSV, bad input.
 * Every check prints its largest difference; one deliberately wrong expectation proves that
 * the checker fails.
 */
#include <math.h>
#include <string.h>
#include <stdio.h>
#include <sys/resource.h>
#include <unistd.h>
#include <sys/wait.h>
#include <glib/gstdio.h>

#include "rete_test.h"
#include "rete_io.h"
#include "rete_measure.h"
#include "rete_synth.h"

/* ---- the checker ---- */

static gboolean
close_enough (const char *what, double value, double expected, double tolerance)
{
  double diff = fabs (value - expected);
  gboolean ok = diff <= tolerance;
  g_test_message ("%s: %.6g, expected %.6g ± %.3g, difference %.3g%s", what, value, expected,
                  tolerance, diff, ok ? "" : "  <-- MISMATCH");
  return ok;
}

#define CHECK_CLOSE(what, value, expected, tolerance) \
  g_assert_true (close_enough (what, value, expected, tolerance))

static void
test_checker_fails (void)
{
  /* a line's dimension is 1: expecting 2 must be reported as a mismatch */
  guint8 *line = g_new0 (guint8, 256 * 256);
  memset (line + 100 * 256, 1, 256);
  double d = rete_box_counting_dimension (line, 256, 256, NULL);
  g_assert_false (close_enough ("deliberately wrong: line against 2", d, 2.0, 0.05));
  g_free (line);
}

/* ---- drawing ---- */

/* Pixels whose centre lies within width/2 of the segment (x0,y0)-(x1,y1). */
static void
draw_band (ReteImage *im, double x0, double y0, double x1, double y1, double width)
{
  double dx = x1 - x0, dy = y1 - y0, len2 = dx * dx + dy * dy;
  for (int y = 0; y < im->height; y++)
    for (int x = 0; x < im->width; x++)
      {
        double t = len2 > 0 ? ((x - x0) * dx + (y - y0) * dy) / len2 : 0;
        t = CLAMP (t, 0, 1);
        double px = x0 + t * dx - x, py = y0 + t * dy - y;
        if (px * px + py * py <= width * width / 4)
          im->data[(gsize) y * im->width + x] = 1;
      }
}

static ReteMeasurements *
measure (const ReteImage *map, double min_segment)
{
  ReteMeasureParams params;
  rete_measure_params_init (&params);
  params.min_segment_length = min_segment;
  GError *error = NULL;
  ReteMeasurements *m = rete_measure (map, NULL, &params, &error);
  g_assert_no_error (error);
  return m;
}

static const ReteSegment *
longest (const ReteMeasurements *m)
{
  const ReteSegment *best = NULL;
  for (int k = 0; k < m->n_segments; k++)
    if (best == NULL || m->segments[k].length > best->length)
      best = &m->segments[k];
  g_assert_nonnull (best);
  return best;
}

static guint8 *
to_bytes (const ReteImage *im)
{
  gsize n = rete_image_n_pixels (im);
  guint8 *b = g_new (guint8, n);
  for (gsize i = 0; i < n; i++)
    b[i] = im->data[i] >= 0.5f;
  return b;
}

static ReteImage *
synthetic_map (guint64 seed, int width, int height, ReteImage **fov)
{
  ReteSynthParams params;
  rete_synth_params_init (&params);
  params.seed = seed;
  params.width = width;
  params.height = height;
  ReteImage *vessels = NULL;
  GError *error = NULL;
  g_assert_true (rete_synth_fundus (&params, NULL, &vessels, fov, &error));
  g_assert_no_error (error);
  return vessels;
}

/* ---- skeleton against skimage ---- */

/* Our skeleton (Lü–Wang thinning + staircase removal) against skimage's on synthetic maps.
 * skimage's table differs from the published Zhang–Suen conditions in 25 of 256
 * neighbourhoods, so pixels do not all coincide: the check is positional. Floors (measured on
 * these maps while writing the test, then lowered a little): at least 99.5% of our pixels lie
 * within one pixel (8-neighbourhood) of a skimage skeleton pixel, at least 95% of skimage's
 * within one pixel of ours; what skimage has beyond that lies on the tips of branches. */
#define OURS_NEAR_SKIMAGE 0.995
#define SKIMAGE_NEAR_OURS 0.95

static void
test_skeleton_skimage (void)
{
  for (guint64 seed = 1; seed <= 3; seed++)
    {
      g_autoptr (ReteImage) map = synthetic_map (seed, 565, 584, NULL);
      g_autofree char *in = rete_test_tmp_path ("skel-in.npy");
      g_autofree char *out = rete_test_tmp_path ("skel-out.npy");
      g_assert_true (rete_test_write_image_npy (in, map, NULL));
      gboolean skipped;
      GError *error = NULL;
      g_autofree char *stdout_text = rete_test_python ("measure_ref.py", &skipped, &error,
                                                       "skeleton", in, out, NULL);
      if (skipped)
        {
          g_test_skip ("the Python reference libraries are missing");
          return;
        }
      g_assert_no_error (error);
      g_autoptr (ReteImage) reference = rete_test_read_image_npy (out, &error);
      g_assert_no_error (error);
      g_autoptr (ReteImage) ours = rete_skeletonize (map, &error);
      g_assert_no_error (error);
      int w = map->width, h = map->height;
      gsize n_ours, n_ref, same = 0, either = 0;
      for (gsize i = 0; i < rete_image_n_pixels (map); i++)
        {
          gboolean a = ours->data[i] > 0.5f, b = reference->data[i] > 0.5f;
          same += a && b;
          either += a || b;
        }
      double ours_near = rete_test_fraction_near (ours->data, reference->data, w, h, &n_ours);
      double ref_near = rete_test_fraction_near (reference->data, ours->data, w, h, &n_ref);
      g_test_message ("seed %" G_GUINT64_FORMAT ": ours %" G_GSIZE_FORMAT " px, skimage %"
                      G_GSIZE_FORMAT " px, identical %.1f%% of either; ours within 1 px of "
                      "skimage %.2f%% (floor %.1f%%), skimage within 1 px of ours %.2f%% (floor "
                      "%.1f%%)", seed, n_ours, n_ref, 100.0 * same / MAX (either, 1),
                      100 * ours_near, 100 * OURS_NEAR_SKIMAGE, 100 * ref_near,
                      100 * SKIMAGE_NEAR_OURS);
      g_assert_cmpfloat (ours_near, >=, OURS_NEAR_SKIMAGE);
      g_assert_cmpfloat (ref_near, >=, SKIMAGE_NEAR_OURS);
    }
}

/* Zhang–Suen as published erases a band at 45°; the Lü–Wang correction keeps its centre line.
 * The band (width 7, 140 px long at 45°) has a centre line of about 99 pixels. */
static void
test_skeleton_diagonal (void)
{
  g_autoptr (ReteImage) band = rete_image_new (200, 200, 1, NULL);
  draw_band (band, 50.5, 50.3, 149.5, 149.3, 7);
  gsize n = rete_image_n_pixels (band);
  g_autofree guint8 *published = to_bytes (band);
  g_autofree guint8 *corrected = to_bytes (band);
  g_assert_true (rete_skeleton_thin (published, 200, 200, RETE_THINNING_ZHANG_SUEN, NULL, NULL));
  g_assert_true (rete_skeleton_thin (corrected, 200, 200, RETE_THINNING_LU_WANG, NULL, NULL));
  gsize a = 0, b = 0;
  for (gsize i = 0; i < n; i++)
    {
      a += published[i];
      b += corrected[i];
    }
  g_autoptr (ReteImage) skeleton = rete_skeletonize (band, NULL);
  gsize c = 0;
  for (gsize i = 0; i < n; i++)
    c += skeleton->data[i] > 0.5f;
  g_test_message ("45° band: Zhang–Suen leaves %" G_GSIZE_FORMAT " px, Lü–Wang %" G_GSIZE_FORMAT
                  " px, after staircase removal %" G_GSIZE_FORMAT " px (centre line ≈ 99)",
                  a, b, c);
  g_assert_cmpuint (a, <, 20);
  g_assert_cmpuint (c, >=, 90);
  g_assert_cmpuint (c, <=, 110);
}

/* ---- distance transform against scipy ---- */

/* Exact transform: equal up to float rounding of the square root (tolerance 1e-4 px). */
#define DISTANCE_TOLERANCE 1e-4

static void
check_distance (const ReteImage *map, const char *label)
{
  g_autofree char *in = rete_test_tmp_path ("edt-in.npy");
  g_autofree char *out = rete_test_tmp_path ("edt-out.npy");
  g_assert_true (rete_test_write_image_npy (in, map, NULL));
  gboolean skipped;
  GError *error = NULL;
  g_autofree char *text = rete_test_python ("measure_ref.py", &skipped, &error, "edt", in, out,
                                            NULL);
  if (skipped)
    {
      g_test_skip ("the Python reference libraries are missing");
      return;
    }
  g_assert_no_error (error);
  g_autoptr (ReteImage) reference = rete_test_read_image_npy (out, &error);
  g_assert_no_error (error);
  g_autoptr (ReteImage) ours = rete_distance_transform_image (map, &error);
  g_assert_no_error (error);
  gsize where;
  double diff = rete_test_max_abs_diff (ours->data, reference->data, rete_image_n_pixels (map),
                                        &where);
  g_test_message ("%s: largest difference from scipy %.3g px at pixel %" G_GSIZE_FORMAT
                  " (tolerance %.0e)", label, diff, where, DISTANCE_TOLERANCE);
  g_assert_cmpfloat (diff, <=, DISTANCE_TOLERANCE);
}

static void
test_distance_scipy (void)
{
  g_autoptr (ReteImage) synthetic = synthetic_map (7, 565, 584, NULL);
  check_distance (synthetic, "synthetic vessel map 565×584");
  /* random dots (dense: 70% foreground) with a column and a row without any background, so
   * that infinite column distances and the frame edges are exercised */
  g_autoptr (ReteImage) dots = rete_image_new (301, 157, 1, NULL);
  GRand *rand = g_rand_new_with_seed (11);
  for (gsize i = 0; i < rete_image_n_pixels (dots); i++)
    dots->data[i] = g_rand_double (rand) < 0.7;
  for (int y = 0; y < dots->height; y++)
    dots->data[(gsize) y * dots->width + 17] = 1;
  for (int x = 0; x < dots->width; x++)
    dots->data[(gsize) 40 * dots->width + x] = 1;
  g_rand_free (rand);
  check_distance (dots, "random 70% foreground 301×157");
  /* one background pixel in a large field: distances up to the far corner */
  g_autoptr (ReteImage) single = rete_image_new (400, 300, 1, NULL);
  for (gsize i = 0; i < rete_image_n_pixels (single); i++)
    single->data[i] = 1;
  single->data[123 * 400 + 37] = 0;
  check_distance (single, "one background pixel 400×300");
}

/* ---- calibre on bands of known width ---- */

/* Width of a digital band = its pixel count per unit length in the middle part (where the
 * ends do not reach). The issue asks for ±0.5 px. */
#define CALIBRE_TOLERANCE 0.5

static void
test_calibre_known_width (void)
{
  static const double widths[] = { 2, 3, 4, 5, 6, 7, 8, 10, 13, 16, 20 };
  GRand *rand = g_rand_new_with_seed (5);
  double worst = 0;
  for (guint i = 0; i < G_N_ELEMENTS (widths); i++)
    for (int angle = 0; angle < 90; angle += 5)
      {
        double w = widths[i], t = angle * G_PI / 180;
        double cx = 100 + g_rand_double (rand), cy = 100 + g_rand_double (rand);
        double ux = cos (t), uy = sin (t);
        g_autoptr (ReteImage) band = rete_image_new (200, 200, 1, NULL);
        gsize middle = 0;
        for (int y = 0; y < 200; y++)
          for (int x = 0; x < 200; x++)
            {
              double along = (x - cx) * ux + (y - cy) * uy;
              double across = -(x - cx) * uy + (y - cy) * ux;
              gboolean in = fabs (across) <= w / 2 && fabs (along) <= 70;
              band->data[y * 200 + x] = in;
              middle += in && fabs (along) < 50;
            }
        double effective = middle / 100.0;
        g_autoptr (ReteMeasurements) m = measure (band, 10);
        const ReteSegment *seg = longest (m);
        double diff = seg->calibre_mean - effective;
        if (fabs (diff) > fabs (worst))
          worst = diff;
        if (fabs (diff) > CALIBRE_TOLERANCE)
          g_test_message ("width %.0f at %d°: calibre %.3f, band %.3f", w, angle,
                          seg->calibre_mean, effective);
        g_assert_cmpfloat (fabs (diff), <=, CALIBRE_TOLERANCE);
      }
  g_rand_free (rand);
  g_test_message ("bands 2–20 px wide at 0–85°: largest calibre error %.3f px (tolerance ±%.1f)",
                  worst, CALIBRE_TOLERANCE);
}

/* The synthetic fundus generator knows the width of the vessel at every vessel pixel. Mean
 * calibre (length-weighted over segments, ends left out) against the mean true width under the
 * skeleton (junction pixels left out, where the widest vessel decides): within 0.5 px, the
 * issue's tolerance (measured: see the message). */
static void
test_calibre_synthetic_fundus (void)
{
  for (guint64 seed = 1; seed <= 3; seed++)
    {
      ReteSynthParams params;
      rete_synth_params_init (&params);
      params.seed = seed;
      params.width = 999;
      params.height = 960;
      ReteSynthTruth truth = { 0 };
      GError *error = NULL;
      g_assert_true (rete_synth_fundus_truth (&params, &truth, &error));
      g_assert_no_error (error);
      g_autoptr (ReteMeasurements) m = measure (truth.vessels, 10);
      double sum = 0;
      gsize n = 0;
      for (gsize i = 0; i < rete_image_n_pixels (truth.vessels); i++)
        if (m->skeleton->data[i] > 0.5f && m->point_type->data[i] != RETE_POINT_JUNCTION
            && truth.widths->data[i] > 0)
          {
            sum += truth.widths->data[i];
            n++;
          }
      double true_mean = sum / MAX (n, 1);
      g_test_message ("synthetic fundus seed %" G_GUINT64_FORMAT ": mean calibre %.3f px, true "
                      "width under the skeleton %.3f px (%d segments)", seed, m->mean_calibre,
                      true_mean, m->n_segments);
      CHECK_CLOSE ("synthetic fundus mean calibre (px)", m->mean_calibre, true_mean, 0.5);
      rete_synth_truth_clear (&truth);
    }
}

/* ---- fractal dimension of known shapes ---- */

static guint8 *
koch_curve (int size, int level, int *height)
{
  /* the Koch curve of `level` over [0, size) in x: a list of vertices refined `level` times,
   * then drawn densely */
  GArray *xs = g_array_new (FALSE, FALSE, sizeof (double)), *ys = g_array_new (FALSE, FALSE, sizeof (double));
  double x0 = 0, y0 = 0, x1 = size - 1, y1 = 0;
  g_array_append_val (xs, x0);
  g_array_append_val (ys, y0);
  g_array_append_val (xs, x1);
  g_array_append_val (ys, y1);
  for (int l = 0; l < level; l++)
    {
      GArray *nx = g_array_new (FALSE, FALSE, sizeof (double)), *ny = g_array_new (FALSE, FALSE, sizeof (double));
      for (guint i = 0; i + 1 < xs->len; i++)
        {
          double ax = g_array_index (xs, double, i), ay = g_array_index (ys, double, i);
          double bx = g_array_index (xs, double, i + 1), by = g_array_index (ys, double, i + 1);
          double dx = (bx - ax) / 3, dy = (by - ay) / 3;
          double p1x = ax + dx, p1y = ay + dy, p3x = ax + 2 * dx, p3y = ay + 2 * dy;
          /* apex: the middle third turned by 60° (upwards in image terms: +y) */
          double p2x = p1x + dx * 0.5 - dy * sqrt (3) / 2, p2y = p1y + dy * 0.5 + dx * sqrt (3) / 2;
          double pts[4][2] = { { ax, ay }, { p1x, p1y }, { p2x, p2y }, { p3x, p3y } };
          for (int j = 0; j < 4; j++)
            {
              g_array_append_val (nx, pts[j][0]);
              g_array_append_val (ny, pts[j][1]);
            }
        }
      g_array_append_val (nx, g_array_index (xs, double, xs->len - 1));
      g_array_append_val (ny, g_array_index (ys, double, ys->len - 1));
      g_array_free (xs, TRUE);
      g_array_free (ys, TRUE);
      xs = nx;
      ys = ny;
    }
  int h = (int) ceil (size * sqrt (3) / 6) + 2;
  guint8 *map = g_new0 (guint8, (gsize) size * h);
  for (guint i = 0; i + 1 < xs->len; i++)
    {
      double ax = g_array_index (xs, double, i), ay = g_array_index (ys, double, i);
      double bx = g_array_index (xs, double, i + 1), by = g_array_index (ys, double, i + 1);
      int steps = (int) ceil (4 * hypot (bx - ax, by - ay)) + 1;
      for (int s = 0; s <= steps; s++)
        {
          int x = (int) lround (ax + (bx - ax) * s / steps);
          int y = (int) lround (ay + (by - ay) * s / steps);
          if (x >= 0 && x < size && y >= 0 && y < h)
            map[(gsize) y * size + x] = 1;
        }
    }
  g_array_free (xs, TRUE);
  g_array_free (ys, TRUE);
  *height = h;
  return map;
}

typedef struct {
  const char *name;
  double expected, tolerance;
} Shape;

/* Tolerances: the line, square and Sierpiński triangle (x & y == 0 on a 1024 grid) are exact
 * at every 2^k box size, so only rounding remains (0.001). The Koch curve is drawn at level 7
 * on a raster, which is self-similar only down to ~1 pixel, and its 2^k boxes do not follow its
 * 3^k self-similarity: 0.03 (the estimate is the slope over 2..1024 px). */
static const Shape shapes[] = {
  { "line", 1.0, 0.001 },
  { "square", 2.0, 0.001 },
  { "sierpinski", 1.5849625007, 0.001 },
  { "koch", 1.2618595071, 0.03 },
};

static void
test_fractal_shape (gconstpointer data)
{
  const Shape *shape = data;
  int w = 1024, h = 1024;
  guint8 *map = NULL;
  if (strcmp (shape->name, "koch") == 0)
    {
      w = 4096;
      map = koch_curve (w, 7, &h);
    }
  else
    {
      map = g_new0 (guint8, (gsize) w * h);
      for (int y = 0; y < h; y++)
        for (int x = 0; x < w; x++)
          map[(gsize) y * w + x] = strcmp (shape->name, "line") == 0 ? y == 511
                                   : strcmp (shape->name, "square") == 0 ? 1
                                   : (x & y) == 0;
    }
  double r2;
  double d = rete_box_counting_dimension (map, w, h, &r2);
  g_test_message ("%s %d×%d: R² of the fit %.5f", shape->name, w, h, r2);
  CHECK_CLOSE (shape->name, d, shape->expected, shape->tolerance);
  g_free (map);
}

/* ---- tortuosity ---- */

/* Points within width/2 of a circle of radius r around (cx, cy), for angles in [a0, a1]. */
static void
draw_arc (ReteImage *im, double cx, double cy, double r, double width, double a0, double a1)
{
  for (int y = 0; y < im->height; y++)
    for (int x = 0; x < im->width; x++)
      {
        double dx = x - cx, dy = y - cy, a = atan2 (dy, dx);
        if (fabs (hypot (dx, dy) - r) <= width / 2 && a >= a0 && a <= a1)
          im->data[(gsize) y * im->width + x] = 1;
      }
}

static void
test_tortuosity_geometry (void)
{
  /* semicircle of radius 150: arc/chord = π/2 (the skeleton's ends sit a little inside the
   * band's ends, so the tolerance is 2%); curvature index 1/R² (tolerance 15%: the pixel path
   * keeps some staircase curvature after the default σ = 6 px smoothing: +2% here, +37% at
   * σ = 4, 13 times at σ = 2) */
  g_autoptr (ReteImage) arc = rete_image_new (400, 240, 1, NULL);
  draw_arc (arc, 200.3, 30.2, 150, 5, 0.0, G_PI);
  g_autoptr (ReteMeasurements) m = measure (arc, 10);
  const ReteSegment *seg = longest (m);
  CHECK_CLOSE ("semicircle arc/chord", seg->tortuosity, G_PI / 2, 0.02 * G_PI / 2);
  CHECK_CLOSE ("semicircle curvature index (1/px²)", seg->curvature_index, 1.0 / (150 * 150),
               0.15 / (150 * 150));
  /* a full ring of radius 90: one closed segment, no junction or end point */
  g_autoptr (ReteImage) ring = rete_image_new (220, 220, 1, NULL);
  draw_arc (ring, 110.4, 109.7, 90, 6, -G_PI - 1, G_PI + 1);
  g_autoptr (ReteMeasurements) r = measure (ring, 10);
  g_assert_cmpint (r->n_segments, ==, 1);
  g_assert_true (r->segments[0].closed);
  g_assert_cmpint (r->n_junctions, ==, 0);
  g_assert_cmpint (r->n_end_points, ==, 0);
  CHECK_CLOSE ("ring length (2πR)", r->segments[0].length, 2 * G_PI * 90, 0.03 * 2 * G_PI * 90);
  CHECK_CLOSE ("ring curvature index (1/px²)", r->segments[0].curvature_index, 1.0 / (90 * 90),
               0.15 / (90 * 90));
  /* a straight band at 17°: arc/chord 1, curvature index near 0 (below a fifth of that of a
   * circle of radius 150; measured: a tenth) */
  g_autoptr (ReteImage) line = rete_image_new (300, 200, 1, NULL);
  draw_band (line, 20.2, 40.7, 280.1, 40.7 + 260 * tan (17 * G_PI / 180), 5);
  g_autoptr (ReteMeasurements) s = measure (line, 10);
  const ReteSegment *straight = longest (s);
  CHECK_CLOSE ("straight arc/chord", straight->tortuosity, 1.0, 0.01);
  CHECK_CLOSE ("straight curvature index (1/px²)", straight->curvature_index, 0,
               0.2 / (150 * 150));
}

/* ---- graph ---- */

typedef struct {
  const char *name;
  double bands[4][4]; /* up to 4 bands (x0, y0, x1, y1), width 5 */
  int n_bands;
  int junctions, end_points, segments;
} GraphCase;

static const GraphCase graph_cases[] = {
  { "line", { { 20, 50, 280, 50 } }, 1, 0, 2, 1 },
  { "T", { { 20, 50, 280, 50 }, { 150, 50, 150, 250 } }, 2, 1, 3, 3 },
  { "Y", { { 150, 150, 150, 280 }, { 150, 150, 40, 30 }, { 150, 150, 260, 30 } }, 3, 1, 3, 3 },
  { "H", { { 50, 30, 50, 270 }, { 250, 30, 250, 270 }, { 50, 150, 250, 150 } }, 3, 2, 4, 5 },
  { "comb", { { 20, 50, 280, 50 }, { 80, 50, 80, 200 }, { 160, 50, 160, 200 },
              { 240, 50, 240, 200 } }, 4, 3, 5, 7 },
};

static void
test_graph_case (gconstpointer data)
{
  const GraphCase *c = data;
  g_autoptr (ReteImage) map = rete_image_new (300, 300, 1, NULL);
  for (int i = 0; i < c->n_bands; i++)
    draw_band (map, c->bands[i][0] + 0.3, c->bands[i][1] + 0.2, c->bands[i][2] + 0.3,
               c->bands[i][3] + 0.2, 5);
  g_autoptr (ReteMeasurements) m = measure (map, 10);
  g_test_message ("%s: %d junctions, %d end points, %d segments (expected %d, %d, %d), %d "
                  "pruned", c->name, m->n_junctions, m->n_end_points, m->n_segments,
                  c->junctions, c->end_points, c->segments, m->n_pruned);
  g_assert_cmpint (m->n_junctions, ==, c->junctions);
  g_assert_cmpint (m->n_end_points, ==, c->end_points);
  g_assert_cmpint (m->n_segments, ==, c->segments);
  /* the point-type image carries the same counts of end points */
  int ends = 0;
  for (gsize i = 0; i < rete_image_n_pixels (map); i++)
    ends += m->point_type->data[i] == RETE_POINT_END;
  g_assert_cmpint (ends, ==, c->end_points);
}

/* ---- units ---- */

static void
test_units (void)
{
  g_autoptr (ReteImage) fov = NULL;
  g_autoptr (ReteImage) map = synthetic_map (3, 565, 584, &fov);
  ReteMeasureParams params;
  rete_measure_params_init (&params);
  GError *error = NULL;
  g_autoptr (ReteMeasurements) px = rete_measure (map, fov, &params, &error);
  g_assert_no_error (error);
  params.calibration = RETE_CALIBRATION_PIXEL_SIZE;
  params.pixel_size_mm = 0.02;
  g_autoptr (ReteMeasurements) mm = rete_measure (map, fov, &params, &error);
  g_assert_no_error (error);
  params.calibration = RETE_CALIBRATION_FOV_DIAMETER;
  params.fov_diameter_px = 500;
  params.fov_diameter_mm = 10;
  g_autoptr (ReteMeasurements) fd = rete_measure (map, fov, &params, &error);
  g_assert_no_error (error);
  g_assert_cmpstr (px->unit, ==, "px");
  g_assert_cmpstr (mm->unit, ==, "mm");
  double k = 0.02;
  CHECK_CLOSE ("length mm/px", mm->skeleton_length / px->skeleton_length, k, 1e-12);
  CHECK_CLOSE ("area mm²/px²", mm->vessel_area / px->vessel_area, k * k, 1e-12);
  CHECK_CLOSE ("length density", mm->length_density * k / px->length_density, 1, 1e-9);
  CHECK_CLOSE ("calibre", mm->mean_calibre / px->mean_calibre, k, 1e-9);
  CHECK_CLOSE ("curvature index", mm->curvature_index * k * k / px->curvature_index, 1, 1e-9);
  CHECK_CLOSE ("density % unchanged", mm->vessel_area_density, px->vessel_area_density, 0);
  CHECK_CLOSE ("tortuosity unchanged", mm->tortuosity, px->tortuosity, 0);
  CHECK_CLOSE ("FOV diameter 10 mm / 500 px = 0.02 mm", fd->pixel_size, 0.02, 1e-15);
  CHECK_CLOSE ("same lengths either way", fd->skeleton_length, mm->skeleton_length, 1e-9);
  /* every CSV column is labelled with the unit asked for */
  g_autofree char *header = rete_measurements_csv_header (mm);
  g_assert_nonnull (strstr (header, "skeleton_length_mm,"));
  g_assert_nonnull (strstr (header, "vessel_area_mm2,"));
  g_assert_nonnull (strstr (header, "mean_calibre_mm,"));
  g_assert_null (strstr (header, "_px2,"));
  g_autofree ReteMeasureField *fields = NULL;
  int n_fields = rete_measurements_fields (mm, &fields);
  gboolean found = FALSE;
  for (int i = 0; i < n_fields; i++)
    if (strcmp (fields[i].column, "skeleton_length_mm") == 0)
      {
        found = TRUE;
        g_assert_cmpstr (fields[i].unit, ==, "mm");
        g_assert_cmpfloat (fields[i].value, ==, mm->skeleton_length);
      }
  g_assert_true (found);
}

/* ---- CSV ---- */

static int
count_fields (const char *line)
{
  int n = 1;
  gboolean quoted = FALSE;
  for (const char *c = line; *c && *c != '\n'; c++)
    {
      if (*c == '"')
        quoted = !quoted;
      else if (*c == ',' && !quoted)
        n++;
    }
  return n;
}

static void
test_csv (void)
{
  g_autoptr (ReteImage) map = synthetic_map (4, 300, 300, NULL);
  map->data[5] = 0.7f; /* not binary: a note with a comma-free sentence and quotes below */
  g_autoptr (ReteMeasurements) m = measure (map, 10);
  g_autofree char *header = rete_measurements_csv_header (m);
  g_autofree char *row = rete_measurements_csv_row (m, "left, \"odd\" name.png");
  g_assert_cmpint (count_fields (header), ==, count_fields (row));
  g_assert_true (g_str_has_prefix (row, "\"left, \"\"odd\"\" name.png\","));
  g_assert_true (g_str_has_suffix (row, "\n"));
  g_assert_nonnull (strstr (m->notes, "not binary"));
  g_assert_cmpuint (m->non_binary_pixels, ==, 1);
  /* the dialog's table holds the same figures as the CSV, in its order */
  g_autofree ReteMeasureField *fields = NULL;
  int n_fields = rete_measurements_fields (m, &fields);
  g_assert_cmpint (n_fields + 4, ==, count_fields (header)); /* + name, pixel size, fov, notes */
  g_auto (GStrv) columns = g_strsplit (header, ",", -1);
  for (int i = 0; i < n_fields; i++)
    {
      g_assert_cmpstr (fields[i].column, ==, columns[i + 3]);
      g_assert_true (fields[i].label != NULL && fields[i].label[0] != '\0');
    }
  g_autofree char *segments = rete_measurements_segments_csv (m, "x");
  g_auto (GStrv) lines = g_strsplit (segments, "\n", -1);
  g_assert_cmpint (g_strv_length (lines), ==, m->n_segments + 2); /* header + rows + "" */
  for (int i = 1; i <= m->n_segments; i++)
    g_assert_cmpint (count_fields (lines[i]), ==, count_fields (lines[0]));
}

/* ---- bad input ---- */

typedef struct {
  const char *name;
  int code;
} BadCase;

static gboolean
cancel_at_once (double fraction, const char *message, gpointer data)
{
  return fraction < 0.3;
}

static void
test_bad_input (gconstpointer data)
{
  const BadCase *c = data;
  g_autoptr (ReteImage) map = rete_image_new (64, 64, 1, NULL);
  draw_band (map, 5, 30, 60, 30, 5);
  g_autoptr (ReteImage) fov = rete_image_new (64, 64, 1, NULL);
  for (gsize i = 0; i < rete_image_n_pixels (fov); i++)
    fov->data[i] = 1;
  g_autoptr (ReteImage) rgb = rete_image_new (64, 64, 3, NULL);
  g_autoptr (ReteImage) small = rete_image_new (32, 64, 1, NULL);
  ReteMeasureParams params;
  rete_measure_params_init (&params);
  const ReteImage *use_map = map, *use_fov = NULL;
  const char *n = c->name;
  if (!strcmp (n, "no-map"))
    use_map = NULL;
  else if (!strcmp (n, "colour-map"))
    use_map = rgb;
  else if (!strcmp (n, "not-finite"))
    map->data[100] = NAN;
  else if (!strcmp (n, "fov-not-finite"))
    {
      fov->data[200] = INFINITY;
      use_fov = fov;
    }
  else if (!strcmp (n, "fov-size"))
    use_fov = small;
  else if (!strcmp (n, "fov-empty"))
    {
      memset (fov->data, 0, rete_image_n_pixels (fov) * sizeof (float));
      use_fov = fov;
    }
  else if (!strcmp (n, "pixel-size-zero"))
    params.calibration = RETE_CALIBRATION_PIXEL_SIZE, params.pixel_size_mm = 0;
  else if (!strcmp (n, "pixel-size-negative"))
    params.calibration = RETE_CALIBRATION_PIXEL_SIZE, params.pixel_size_mm = -0.01;
  else if (!strcmp (n, "pixel-size-nan"))
    params.calibration = RETE_CALIBRATION_PIXEL_SIZE, params.pixel_size_mm = NAN;
  else if (!strcmp (n, "pixel-size-absurd"))
    params.calibration = RETE_CALIBRATION_PIXEL_SIZE, params.pixel_size_mm = 5;
  else if (!strcmp (n, "fov-diameter-zero"))
    params.calibration = RETE_CALIBRATION_FOV_DIAMETER, params.fov_diameter_px = 0,
    params.fov_diameter_mm = 12;
  else if (!strcmp (n, "fov-diameter-absurd-mm"))
    params.calibration = RETE_CALIBRATION_FOV_DIAMETER, params.fov_diameter_px = 60,
    params.fov_diameter_mm = 1200;
  else if (!strcmp (n, "fov-diameter-larger-than-frame"))
    params.calibration = RETE_CALIBRATION_FOV_DIAMETER, params.fov_diameter_px = 1e6,
    params.fov_diameter_mm = 12;
  else if (!strcmp (n, "min-segment-negative"))
    params.min_segment_length = -1;
  else if (!strcmp (n, "cancelled"))
    params.progress = cancel_at_once;
  GError *error = NULL;
  ReteMeasurements *m = rete_measure (use_map, use_fov, &params, &error);
  g_assert_null (m);
  g_assert_error (error, RETE_VESSEL_ERROR, c->code);
  g_test_message ("%s: %s", n, error->message);
  g_error_free (error);
}

static const BadCase bad_cases[] = {
  { "no-map", RETE_ERROR_INVALID_ARGUMENT },
  { "colour-map", RETE_ERROR_INVALID_ARGUMENT },
  { "not-finite", RETE_ERROR_NOT_FINITE },
  { "fov-not-finite", RETE_ERROR_NOT_FINITE },
  { "fov-size", RETE_ERROR_SIZE_MISMATCH },
  { "fov-empty", RETE_ERROR_EMPTY },
  { "pixel-size-zero", RETE_ERROR_INVALID_ARGUMENT },
  { "pixel-size-negative", RETE_ERROR_INVALID_ARGUMENT },
  { "pixel-size-nan", RETE_ERROR_INVALID_ARGUMENT },
  { "pixel-size-absurd", RETE_ERROR_INVALID_ARGUMENT },
  { "fov-diameter-zero", RETE_ERROR_INVALID_ARGUMENT },
  { "fov-diameter-absurd-mm", RETE_ERROR_INVALID_ARGUMENT },
  { "fov-diameter-larger-than-frame", RETE_ERROR_INVALID_ARGUMENT },
  { "min-segment-negative", RETE_ERROR_INVALID_ARGUMENT },
  { "cancelled", RETE_ERROR_CANCELLED },
};

/* Inputs that are odd but measurable: an empty map, a full frame, a tiny map, a map with
 * vessel outside its FOV. */
static void
test_odd_input (void)
{
  GError *error = NULL;
  g_autoptr (ReteImage) empty = rete_image_new (100, 80, 1, NULL);
  g_autoptr (ReteMeasurements) e = rete_measure (empty, NULL, NULL, &error);
  g_assert_no_error (error);
  g_assert_cmpuint (e->vessel_pixels, ==, 0);
  g_assert_cmpint (e->n_segments, ==, 0);
  g_assert_cmpfloat (e->skeleton_length, ==, 0);
  g_assert_true (isnan (e->fractal_dimension_map));
  g_assert_true (isnan (e->mean_calibre));
  g_assert_nonnull (strstr (e->notes, "no vessel pixel"));
  g_assert_nonnull (strstr (e->notes, "whole frame"));
  g_autofree char *row = rete_measurements_csv_row (e, "empty");
  g_assert_nonnull (strstr (row, "NaN"));

  g_autoptr (ReteImage) full = rete_image_new (50, 40, 1, NULL);
  for (gsize i = 0; i < rete_image_n_pixels (full); i++)
    full->data[i] = 1;
  g_autoptr (ReteMeasurements) f = rete_measure (full, NULL, NULL, &error);
  g_assert_no_error (error);
  CHECK_CLOSE ("full frame density %", f->vessel_area_density, 100, 0);
  g_assert_nonnull (strstr (f->notes, "no background"));

  g_autoptr (ReteImage) tiny = rete_image_new (1, 1, 1, NULL);
  tiny->data[0] = 1;
  g_autoptr (ReteMeasurements) t = rete_measure (tiny, NULL, NULL, &error);
  g_assert_no_error (error);
  g_assert_cmpuint (t->vessel_pixels, ==, 1);

  g_autoptr (ReteImage) map = rete_image_new (64, 64, 1, NULL);
  draw_band (map, 2, 30, 62, 30, 5);
  g_autoptr (ReteImage) fov = rete_image_new (64, 64, 1, NULL);
  for (int y = 0; y < 64; y++)
    for (int x = 0; x < 32; x++)
      fov->data[y * 64 + x] = 1;
  g_autoptr (ReteMeasurements) o = rete_measure (map, fov, NULL, &error);
  g_assert_no_error (error);
  g_assert_cmpuint (o->fov_pixels, ==, 64 * 32);
  g_assert_cmpuint (o->vessel_pixels_outside_fov, >, 0);
  g_assert_nonnull (strstr (o->notes, "outside the field of view"));
}

/* A map too large for the memory at hand fails with RETE_ERROR_NO_MEMORY instead of aborting:
 * in a child process whose address space is capped 150 MB above what it holds once a 64-megapixel
 * map (256 MB of floats) is loaded, so that the 256 MB distance transform cannot be had. */
static void
test_huge_map (void)
{
  if (g_test_subprocess ())
    {
      ReteImage *map = rete_image_new (8000, 8000, 1, NULL);
      g_assert_nonnull (map);
      draw_band (map, 10, 10, 200, 10, 5);
      long pages = 0, size = 0;
      FILE *statm = fopen ("/proc/self/statm", "r");
      g_assert_nonnull (statm);
      g_assert_cmpint (fscanf (statm, "%ld", &size), ==, 1);
      fclose (statm);
      pages = size;
      struct rlimit limit;
      limit.rlim_cur = limit.rlim_max = (rlim_t) pages * sysconf (_SC_PAGESIZE) + (150u << 20);
      g_assert_cmpint (setrlimit (RLIMIT_AS, &limit), ==, 0);
      GError *error = NULL;
      ReteMeasurements *m = rete_measure (map, NULL, NULL, &error);
      g_assert_null (m);
      g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_NO_MEMORY);
      g_printerr ("%s\n", error->message);
      g_error_free (error);
      rete_image_free (map);
      return;
    }
  g_test_trap_subprocess (NULL, 120 * G_USEC_PER_SEC, G_TEST_SUBPROCESS_DEFAULT);
  g_test_trap_assert_passed ();
  g_test_trap_assert_stderr ("*not enough memory*");
}

/* ---- the `rete measure` command ---- */

static int
run_rete (const char *const *args, char **out, char **err)
{
  const char *build = g_getenv ("RETE_BUILD_DIR");
  g_autofree char *exe = g_build_filename (build ? build : ".", "cli", "rete", NULL);
  if (!g_file_test (exe, G_FILE_TEST_IS_EXECUTABLE))
    return -1;
  GPtrArray *argv = g_ptr_array_new ();
  g_ptr_array_add (argv, exe);
  for (int i = 0; args[i]; i++)
    g_ptr_array_add (argv, (gpointer) args[i]);
  g_ptr_array_add (argv, NULL);
  int status = -1;
  GError *error = NULL;
  g_assert_true (g_spawn_sync (NULL, (char **) argv->pdata, NULL, G_SPAWN_DEFAULT, NULL, NULL,
                               out, err, &status, &error));
  g_assert_no_error (error);
  g_ptr_array_free (argv, TRUE);
  return WIFEXITED (status) ? WEXITSTATUS (status) : -1;
}

static void
test_command (void)
{
  rete_io_init ();
  g_autofree char *folder = rete_test_tmp_path ("maps");
  g_mkdir_with_parents (folder, 0755);
  for (guint64 seed = 1; seed <= 2; seed++)
    {
      g_autoptr (ReteImage) map = synthetic_map (seed, 300, 280, NULL);
      g_autofree char *name = g_strdup_printf ("map%" G_GUINT64_FORMAT ".png", seed);
      g_autofree char *path = g_build_filename (folder, name, NULL);
      g_assert_true (rete_io_save (map, path, NULL, NULL));
    }
  g_autofree char *broken = g_build_filename (folder, "map3.png", NULL);
  g_assert_true (g_file_set_contents (broken, "not a PNG", -1, NULL));
  g_autofree char *csv = rete_test_tmp_path ("measurements.csv");
  g_autofree char *segments = rete_test_tmp_path ("segments.csv");
  const char *args[] = { "measure", "-q", "--pixel-size", "0.01", "-o", csv, "--segments",
                         segments, folder, NULL };
  g_autofree char *out = NULL, *err = NULL;
  int status = run_rete (args, &out, &err);
  if (status == -1)
    {
      g_test_skip ("the rete command is not built");
      return;
    }
  g_test_message ("rete measure on 2 maps and a broken file: exit %d; stderr: %s", status, err);
  g_assert_cmpint (status, ==, 1); /* one failure, the others measured */
  g_autofree char *table = NULL;
  g_assert_true (g_file_get_contents (csv, &table, NULL, NULL));
  g_auto (GStrv) lines = g_strsplit (table, "\n", -1);
  g_assert_cmpint (g_strv_length (lines), ==, 4); /* header, 2 rows, "" */
  g_assert_nonnull (strstr (lines[0], "skeleton_length_mm"));
  g_assert_true (g_str_has_prefix (lines[1], "map1.png,0.01,"));
  g_assert_nonnull (strstr (err, "map3.png"));
  g_autofree char *seg_table = NULL;
  g_assert_true (g_file_get_contents (segments, &seg_table, NULL, NULL));
  g_assert_true (g_str_has_prefix (seg_table, "name,segment,"));

  /* calibration values that are zero, negative, absurd or conflicting: usage errors (2),
   * nothing written */
  static const char *const bad[][5] = {
    { "--pixel-size", "0", NULL },
    { "--pixel-size", "-0.004", NULL },
    { "--pixel-size", "7", NULL },
    { "--fov-diameter-px", "3000", NULL },
    { "--fov-diameter-px", "3000", "--fov-diameter-mm", "0", NULL },
    { "--pixel-size", "0.005", "--fov-diameter-px", "3000", NULL },
  };
  for (guint i = 0; i < G_N_ELEMENTS (bad); i++)
    {
      g_autofree char *other = rete_test_tmp_path ("never.csv");
      const char *a[10] = { "measure", "-q", "-o", other };
      int k = 4;
      for (int j = 0; bad[i][j]; j++)
        a[k++] = bad[i][j];
      a[k++] = folder;
      a[k] = NULL;
      g_autofree char *o = NULL, *e = NULL;
      int st = run_rete (a, &o, &e);
      g_test_message ("%s %s: exit %d: %s", bad[i][0], bad[i][1], st, e);
      g_assert_cmpint (st, ==, 2);
      g_assert_false (g_file_test (other, G_FILE_TEST_EXISTS));
    }
}

int
main (int argc, char **argv)
{
  g_test_init (&argc, &argv, NULL);
  g_test_add_func ("/measure/checker/fails-on-wrong-expectation", test_checker_fails);
  g_test_add_func ("/measure/skeleton/near-skimage", test_skeleton_skimage);
  g_test_add_func ("/measure/skeleton/keeps-diagonal-vessels", test_skeleton_diagonal);
  g_test_add_func ("/measure/distance/matches-scipy", test_distance_scipy);
  g_test_add_func ("/measure/calibre/known-width", test_calibre_known_width);
  g_test_add_func ("/measure/calibre/synthetic-fundus", test_calibre_synthetic_fundus);
  for (guint i = 0; i < G_N_ELEMENTS (shapes); i++)
    {
      g_autofree char *path = g_strdup_printf ("/measure/fractal/%s", shapes[i].name);
      g_test_add_data_func (path, &shapes[i], test_fractal_shape);
    }
  g_test_add_func ("/measure/tortuosity/geometry", test_tortuosity_geometry);
  for (guint i = 0; i < G_N_ELEMENTS (graph_cases); i++)
    {
      g_autofree char *path = g_strdup_printf ("/measure/graph/%s", graph_cases[i].name);
      g_test_add_data_func (path, &graph_cases[i], test_graph_case);
    }
  g_test_add_func ("/measure/units/millimetres", test_units);
  g_test_add_func ("/measure/csv/columns-and-quoting", test_csv);
  for (guint i = 0; i < G_N_ELEMENTS (bad_cases); i++)
    {
      g_autofree char *path = g_strdup_printf ("/measure/bad-input/%s", bad_cases[i].name);
      g_test_add_data_func (path, &bad_cases[i], test_bad_input);
    }
  g_test_add_func ("/measure/odd-input/measurable", test_odd_input);
  g_test_add_func ("/measure/bad-input/too-large-for-memory", test_huge_map);
  g_test_add_func ("/measure/command/folder-with-a-broken-file", test_command);
  return g_test_run ();
}
