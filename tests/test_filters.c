/* test_filters.c — the classical vessel filters (vessel/rete_filters.h) against the reference
 * libraries and against their defining properties.
 *
 * References (through /usr/bin/python3, tests/ref/frangi_ref.py and matched_ref.py):
 *  - Gaussian blur: scipy.ndimage.gaussian_filter (mode='reflect', truncate 4); tolerance
 *    2e-6 absolute on values in [0,1] (float32 against float64 arithmetic).
 *  - Frangi vesselness (Frangi et al., MICCAI 1998) with skimage 0.19's Hessian (blur, then
 *    numpy.gradient twice): skimage.filters.frangi with gamma = our c. Agreement measured as
 *    the largest |ours - skimage| relative to skimage's maximum (tolerance 2e-3: V jumps from
 *    a small value to 0 where a near-zero l2 changes sign under float rounding, a few pixels),
 *    the 99.9th percentile of that difference (tolerance 1e-4) and Pearson's r (>= 0.9999).
 *  - Frangi with Gaussian derivatives (our default): the same formula on
 *    scipy.ndimage.gaussian_filter(order=...) in float64; tolerance 1e-4 relative, r >= 0.99999.
 *    Against skimage itself (a different Hessian) only r >= 0.99 is asked.
 *  - Matched filters (Chaudhuri et al., IEEE TMI 1989; Zhang et al., Pattern Recognition 2010):
 *    max over our 12 kernels of scipy.ndimage.correlate (mode='reflect'); tolerance 1e-5 of the
 *    largest response (float32 sums of up to ~500 products against float64).
 * Properties: kernels zero-mean, unit energy, point symmetric, rotated by 90 degrees six
 * orientations later; response peaks on a synthetic vessel's centre line; the best sigma grows
 * with the vessel's width; MF-FDOG answers less than MF at a bright lesion's step edge.
 * The line detector (Nguyen et al., Pattern Recognition 2013) is held to a naive version
 * written here from the paper's equations. Tiles with the declared halo reproduce the whole
 * image. Bad input gives a GError. One deliberately wrong case proves the checker can fail.
 */
#include <math.h>
#include <string.h>

#include "rete_test.h"
#include "rete_filters.h"

/* ---- helpers ---- */

static ReteImage *
noise_image (int w, int h, int channels, guint32 seed)
{
  ReteImage *im = rete_image_new (w, h, channels, NULL);
  GRand *rand = g_rand_new_with_seed (seed);
  for (gsize i = 0; i < rete_image_n_pixels (im) * channels; i++)
    im->data[i] = (float) g_rand_double (rand);
  g_rand_free (rand);
  return im;
}

/* A grey fundus-like test image: background 0.6 with gentle shading and noise, dark vessels
 * of Gaussian cross-section (depth 0.25) of several widths and angles. */
static ReteImage *
vessel_image (int w, int h, guint32 seed)
{
  ReteImage *im = rete_image_new (w, h, 1, NULL);
  GRand *rand = g_rand_new_with_seed (seed);
  static const double lines[][3] = { /* x at y = 0, slope dx/dy, sigma */
    { 0.2, 0.1, 1.0 }, { 0.45, -0.3, 2.0 }, { 0.7, 0.6, 3.0 }, { 0.9, -1.5, 1.5 } };
  for (int y = 0; y < h; y++)
    for (int x = 0; x < w; x++)
      {
        double v = 0.6 + 0.1 * sin (x * 0.01) * cos (y * 0.013) + 0.01 * g_rand_double (rand);
        for (gsize i = 0; i < G_N_ELEMENTS (lines); i++)
          {
            double dx = x - (lines[i][0] * w + lines[i][1] * y);
            double d = dx / sqrt (1 + lines[i][1] * lines[i][1]);
            v -= 0.25 * exp (-d * d / (2 * lines[i][2] * lines[i][2]));
          }
        im->data[(gsize) y * w + x] = (float) v;
      }
  g_rand_free (rand);
  return im;
}

static char *
save_npy (const ReteImage *im, const char *name)
{
  char *path = rete_test_tmp_path (name);
  GError *error = NULL;
  if (im->channels == 1)
    g_assert_true (rete_test_write_image_npy (path, im, &error));
  else
    {
      gsize shape[3] = { im->channels, im->height, im->width };
      g_assert_true (rete_test_write_npy_f32 (path, im->data, shape, 3, &error));
    }
  g_assert_no_error (error);
  return path;
}

static float *
load_npy (const char *path, gsize n)
{
  gsize shape[4];
  int n_dims = 0;
  GError *error = NULL;
  float *data = rete_test_read_npy_f32 (path, shape, &n_dims, &error);
  g_assert_no_error (error);
  gsize total = 1;
  for (int i = 0; i < n_dims; i++)
    total *= shape[i];
  g_assert_cmpuint (total, ==, n);
  return data;
}

/* Runs a reference script; FALSE (and the test skipped) when it asks to skip. */
static gboolean
run_reference (const char *script, char **output, ...)
{
  const char *args[12] = { NULL };
  va_list ap;
  va_start (ap, output);
  for (int i = 0; i < 11; i++)
    if ((args[i] = va_arg (ap, const char *)) == NULL)
      break;
  va_end (ap);
  gboolean skipped = FALSE;
  GError *error = NULL;
  char *out = rete_test_python (script, &skipped, &error, args[0], args[1], args[2], args[3],
                                args[4], args[5], args[6], args[7], args[8], args[9], NULL);
  if (skipped)
    {
      g_test_skip (error->message);
      g_error_free (error);
      return FALSE;
    }
  g_assert_no_error (error);
  if (output != NULL)
    *output = out;
  else
    g_free (out);
  return TRUE;
}

typedef struct {
  double max_rel;   /* largest |a - b| / max |b| */
  double p999_rel;  /* 99.9th percentile of |a - b| / max |b| */
  double pearson;
} Agreement;

static int
compare_double (const void *a, const void *b)
{
  double x = *(const double *) a, y = *(const double *) b;
  return (x > y) - (x < y);
}

static Agreement
agreement (const float *a, const float *b, gsize n)
{
  Agreement ag = { 0, 0, 0 };
  double scale = 0, sa = 0, sb = 0, saa = 0, sbb = 0, sab = 0;
  double *d = g_new (double, n);
  for (gsize i = 0; i < n; i++)
    scale = MAX (scale, fabs (b[i]));
  for (gsize i = 0; i < n; i++)
    {
      d[i] = fabs ((double) a[i] - b[i]) / (scale > 0 ? scale : 1);
      ag.max_rel = MAX (ag.max_rel, d[i]);
      if (isnan (d[i]))
        ag.max_rel = INFINITY;
      sa += a[i], sb += b[i], saa += (double) a[i] * a[i], sbb += (double) b[i] * b[i];
      sab += (double) a[i] * b[i];
    }
  qsort (d, n, sizeof (double), compare_double);
  ag.p999_rel = d[(gsize) (0.999 * (n - 1))];
  double cov = sab - sa * sb / n, va = saa - sa * sa / n, vb = sbb - sb * sb / n;
  ag.pearson = va > 0 && vb > 0 ? cov / sqrt (va * vb) : (va == vb ? 1 : 0);
  g_free (d);
  return ag;
}

static char *
scales_text (const ReteFrangiParams *p)
{
  GString *s = g_string_new (NULL);
  for (double v = p->sigma_min; v <= p->sigma_max + 1e-9; v += p->sigma_step)
    g_string_append_printf (s, "%s%g", s->len ? "," : "", v);
  return g_string_free (s, FALSE);
}

/* ---- Gaussian blur against scipy.ndimage.gaussian_filter ---- */

typedef struct {
  int width, height, channels;
  double sigma;
} BlurCase;

static const BlurCase blur_cases[] = {
  { 64, 48, 1, 1.0 }, { 999, 960, 1, 2.5 }, { 31, 17, 3, 3.0 },
  { 7, 5, 1, 4.0 },   /* radius 16 > both sides: 'reflect' folds more than once */
  { 40, 30, 1, 0.3 }, /* radius 1 */
};

static void
test_blur_matches_scipy (gconstpointer data)
{
  const BlurCase *c = data;
  g_autoptr (ReteImage) im = noise_image (c->width, c->height, c->channels, 7);
  GError *error = NULL;
  g_autoptr (ReteImage) ours = rete_gaussian_blur (im, c->sigma, &error);
  g_assert_no_error (error);
  g_autofree char *in = save_npy (im, "blur-in.npy"), *out = rete_test_tmp_path ("blur-out.npy");
  char sigma[32];
  g_ascii_dtostr (sigma, sizeof sigma, c->sigma);
  if (!run_reference ("frangi_ref.py", NULL, "gauss", in, sigma, out, NULL))
    return;
  gsize n = rete_image_n_pixels (im) * c->channels, where = 0;
  g_autofree float *ref = load_npy (out, n);
  double diff = rete_test_max_abs_diff (ours->data, ref, n, &where);
  g_test_message ("blur %d×%d×%d sigma %g: largest difference from scipy %.3g (tolerance 2e-6)",
                  c->width, c->height, c->channels, c->sigma, diff);
  g_assert_cmpfloat (diff, <=, 2e-6);
}

static void
test_blur_edge_cases (void)
{
  g_autoptr (ReteImage) im = noise_image (20, 10, 1, 3);
  GError *error = NULL;
  g_autoptr (ReteImage) copy = rete_gaussian_blur (im, 0, &error);
  g_assert_no_error (error);
  g_assert_cmpmem (copy->data, 200 * sizeof (float), im->data, 200 * sizeof (float));
  g_assert_null (rete_gaussian_blur (im, NAN, &error));
  g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT);
  g_test_message ("%s", error->message);
  g_clear_error (&error);
  im->data[13] = NAN;
  g_assert_null (rete_gaussian_blur (im, 1, &error));
  g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_NOT_FINITE);
  g_clear_error (&error);
  g_assert_null (rete_gaussian_blur (NULL, 1, &error));
  g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT);
  g_clear_error (&error);
}

/* ---- Frangi against skimage.filters.frangi and a Gaussian-derivative reference ---- */

typedef struct {
  const char *name;
  ReteHessianMethod hessian;
  const char *reference; /* "skimage" or "gaussian-derivatives" */
  double sigma_min, sigma_max, sigma_step, beta, c;
  gboolean dark;
  double reference_beta;   /* beta given to the reference (differs in the wrong case) */
  double max_rel, p999_rel, min_r;
  gboolean expect_failure; /* the deliberately wrong case */
} FrangiCase;

static const FrangiCase frangi_cases[] = {
  { "skimage-dark", RETE_HESSIAN_BLUR_THEN_DIFFERENCES, "skimage", 1, 4, 1, 0.5, 0.05, TRUE, 0.5,
    2e-3, 5e-4, 0.9999, FALSE },
  { "skimage-bright", RETE_HESSIAN_BLUR_THEN_DIFFERENCES, "skimage", 1, 4, 1, 0.5, 0.05, FALSE, 0.5,
    2e-3, 5e-4, 0.9999, FALSE },
  { "skimage-scales-1.5-6", RETE_HESSIAN_BLUR_THEN_DIFFERENCES, "skimage", 1.5, 6, 1.5, 0.8, 0.02,
    TRUE, 0.8, 2e-3, 5e-4, 0.9999, FALSE },
  { "derivatives-dark", RETE_HESSIAN_GAUSSIAN_DERIVATIVES, "gaussian-derivatives", 1, 4, 1, 0.5,
    0.05, TRUE, 0.5, 1e-4, 1e-5, 0.99999, FALSE },
  { "derivatives-bright-auto-c", RETE_HESSIAN_GAUSSIAN_DERIVATIVES, "gaussian-derivatives", 1, 4, 1,
    0.5, 0, FALSE, 0.5, 1e-4, 1e-5, 0.99999, FALSE },
  { "derivatives-against-skimage", RETE_HESSIAN_GAUSSIAN_DERIVATIVES, "skimage", 1, 4, 1, 0.5, 0.05,
    TRUE, 0.5, 1, 1, 0.99, FALSE },
  /* deliberately wrong: the reference runs with beta 1.0 instead of 0.5 */
  { "wrong-beta-must-fail", RETE_HESSIAN_BLUR_THEN_DIFFERENCES, "skimage", 1, 4, 1, 0.5, 0.05, TRUE,
    1.0, 2e-3, 5e-4, 0.9999, TRUE },
};

static void
test_frangi_matches_reference (gconstpointer data)
{
  const FrangiCase *c = data;
  g_autoptr (ReteImage) im = vessel_image (300, 240, 11);
  ReteFrangiParams p;
  rete_frangi_params_init (&p);
  p.sigma_min = c->sigma_min, p.sigma_max = c->sigma_max, p.sigma_step = c->sigma_step;
  p.beta = c->beta, p.c = c->c, p.dark_vessels = c->dark, p.hessian = c->hessian;
  GError *error = NULL;
  g_autoptr (ReteImage) ours = rete_frangi_raw (im, &p, &error);
  g_assert_no_error (error);
  g_autofree char *in = save_npy (im, "frangi-in.npy"), *out = rete_test_tmp_path ("frangi-out.npy");
  g_autofree char *scales = scales_text (&p);
  char beta[32], cc[32];
  g_ascii_dtostr (beta, sizeof beta, c->reference_beta);
  g_ascii_dtostr (cc, sizeof cc, c->c);
  if (!run_reference ("frangi_ref.py", NULL, c->reference, in, out, scales, beta, cc,
                      c->dark ? "1" : "0", NULL))
    return;
  gsize n = rete_image_n_pixels (im);
  g_autofree float *ref = load_npy (out, n);
  Agreement ag = agreement (ours->data, ref, n);
  gboolean within = ag.max_rel <= c->max_rel && ag.p999_rel <= c->p999_rel && ag.pearson >= c->min_r;
  g_test_message ("%s (scales %s, beta %g, c %g, %s): largest |difference| / max %.3g "
                  "(tolerance %g), 99.9th percentile %.3g (tolerance %g), Pearson r %.7f "
                  "(at least %g)%s", c->name, scales, c->beta, c->c, c->reference, ag.max_rel,
                  c->max_rel, ag.p999_rel, c->p999_rel, ag.pearson, c->min_r,
                  c->expect_failure ? " — this case must fail the check" : "");
  if (c->expect_failure)
    g_assert_false (within);
  else
    g_assert_true (within);
}

static void
test_frangi_vessel_map (void)
{
  g_autoptr (ReteImage) im = vessel_image (200, 160, 5);
  g_autoptr (ReteImage) fov = rete_image_new (200, 160, 1, NULL);
  for (int y = 0; y < 160; y++)
    for (int x = 0; x < 200; x++)
      if (hypot (x - 100, y - 80) < 75)
        fov->data[y * 200 + x] = 1;
      else
        im->data[y * 200 + x] = 0; /* the black surround of a photograph */
  GError *error = NULL;
  g_autoptr (ReteImage) map = rete_vessel_frangi (im, fov, NULL, &error);
  g_assert_no_error (error);
  float hi = 0;
  double rim = 0, centre = 0;
  int n_rim = 0, n_centre = 0;
  for (int y = 0; y < 160; y++)
    for (int x = 0; x < 200; x++)
      {
        float v = map->data[y * 200 + x];
        g_assert_cmpfloat (v, >=, 0);
        g_assert_cmpfloat (v, <=, 1);
        if (fov->data[y * 200 + x] < 0.5f)
          g_assert_cmpfloat (v, ==, 0);
        hi = MAX (hi, v);
        double r = hypot (x - 100, y - 80);
        if (r > 70 && r < 75)
          rim += v, n_rim++;
        else if (r < 65)
          centre += v, n_centre++;
      }
  g_assert_cmpfloat (hi, ==, 1.0f);
  /* the fill outside the FOV keeps the rim from answering as a vessel */
  g_test_message ("mean map value: rim of the FOV %.3f, inside %.3f", rim / n_rim, centre / n_centre);
  g_assert_cmpfloat (rim / n_rim, <, 2 * centre / n_centre);
}

typedef struct {
  const char *what;
  double sigma_min, sigma_max, sigma_step, beta, c;
  int hessian;
} BadFrangi;

static const BadFrangi bad_frangi[] = {
  { "sigma_min 0", 0, 4, 1, 0.5, 0, 0 },     { "sigma_min < 0", -1, 4, 1, 0.5, 0, 0 },
  { "sigma_max < sigma_min", 3, 2, 1, 0.5, 0, 0 }, { "step 0", 1, 4, 0, 0.5, 0, 0 },
  { "beta 0", 1, 4, 1, 0, 0, 0 },            { "beta NaN", 1, 4, 1, NAN, 0, 0 },
  { "c < 0", 1, 4, 1, 0.5, -1, 0 },          { "too many scales", 1, 100, 0.01, 0.5, 0, 0 },
  { "unknown Hessian", 1, 4, 1, 0.5, 0, 7 },
};

static void
test_frangi_bad_parameters (void)
{
  g_autoptr (ReteImage) im = noise_image (32, 32, 1, 1);
  for (gsize i = 0; i < G_N_ELEMENTS (bad_frangi); i++)
    {
      const BadFrangi *b = &bad_frangi[i];
      ReteFrangiParams p;
      rete_frangi_params_init (&p);
      p.sigma_min = b->sigma_min, p.sigma_max = b->sigma_max, p.sigma_step = b->sigma_step;
      p.beta = b->beta, p.c = b->c, p.hessian = (ReteHessianMethod) b->hessian;
      GError *error = NULL;
      g_assert_null (rete_frangi_raw (im, &p, &error));
      g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT);
      g_test_message ("%s: %s", b->what, error->message);
      g_clear_error (&error);
      g_assert_null (rete_vessel_frangi (im, NULL, &p, &error));
      g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT);
      g_clear_error (&error);
    }
}

/* Wrong images: channels, NaN, FOV of another size, empty FOV — for every vessel map. */
static void
test_bad_images (void)
{
  g_autoptr (ReteImage) rgb = noise_image (32, 32, 3, 1);
  g_autoptr (ReteImage) nan_grey = noise_image (32, 32, 1, 1);
  nan_grey->data[40] = NAN;
  g_autoptr (ReteImage) grey = noise_image (32, 32, 1, 2);
  g_autoptr (ReteImage) small_fov = rete_image_new (16, 32, 1, NULL);
  g_autoptr (ReteImage) empty_fov = rete_image_new (32, 32, 1, NULL);
  struct { const ReteImage *grey, *fov; int code; const char *what; } cases[] = {
    { rgb, NULL, RETE_ERROR_INVALID_ARGUMENT, "three channels" },
    { nan_grey, NULL, RETE_ERROR_NOT_FINITE, "NaN pixel" },
    { grey, small_fov, RETE_ERROR_SIZE_MISMATCH, "FOV of another size" },
    { grey, empty_fov, RETE_ERROR_EMPTY, "empty FOV" },
    { NULL, NULL, RETE_ERROR_INVALID_ARGUMENT, "no image" },
  };
  for (gsize i = 0; i < G_N_ELEMENTS (cases); i++)
    for (int method = 0; method < 3; method++)
      {
        GError *error = NULL;
        ReteImage *map = method == 0 ? rete_vessel_frangi (cases[i].grey, cases[i].fov, NULL, &error)
                       : method == 1 ? rete_vessel_matched (cases[i].grey, cases[i].fov, NULL, &error)
                                     : rete_vessel_line (cases[i].grey, cases[i].fov, NULL, &error);
        g_assert_null (map);
        g_assert_error (error, RETE_VESSEL_ERROR, cases[i].code);
        if (method == 0)
          g_test_message ("%s: %s", cases[i].what, error->message);
        g_clear_error (&error);
      }
  GError *error = NULL;
  g_assert_null (rete_frangi_raw (rgb, NULL, &error));
  g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT);
  g_clear_error (&error);
  g_assert_null (rete_matched_raw (nan_grey, NULL, &error));
  g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_NOT_FINITE);
  g_clear_error (&error);
}

/* ---- matched filter: kernels ---- */

static void
test_matched_kernel_properties (void)
{
  for (int fdog = 0; fdog <= 1; fdog++)
    {
      ReteMatchedParams p;
      rete_matched_params_init (&p);
      int size = 0, size90 = 0;
      double worst_mean = 0, worst_symmetry = 0, worst_rotation = 0, worst_energy = 0;
      for (int k = 0; k < p.n_orientations; k++)
        {
          GError *error = NULL;
          g_autofree float *kernel = rete_matched_kernel (&p, k, fdog, &size, &error);
          g_assert_no_error (error);
          g_autofree float *k90 = rete_matched_kernel (&p, (k + p.n_orientations / 2) % p.n_orientations,
                                                       fdog, &size90, &error);
          g_assert_cmpint (size % 2, ==, 1);
          g_assert_cmpint (size, ==, size90);
          double sum = 0, energy = 0;
          int half = size / 2;
          for (int y = -half; y <= half; y++)
            for (int x = -half; x <= half; x++)
              {
                float v = kernel[(y + half) * size + x + half];
                float mirror = kernel[(-y + half) * size - x + half];
                sum += v;
                energy += (double) v * v;
                /* point symmetry: K(-p) = K(p) for MF, -F(p) for FDOG */
                worst_symmetry = MAX (worst_symmetry, fabs (v - (fdog ? -mirror : mirror)));
                /* 90 degrees on: K_{k+n/2}(x, y) = K_k(y, -x) (exact on the pixel grid); for
                 * FDOG the sign follows u's direction, which turns by pi after k + n/2 wraps */
                float turned = k90[(x + half) * size + (-y) + half];
                double sign = (fdog && k + p.n_orientations / 2 >= p.n_orientations) ? -1 : 1;
                worst_rotation = MAX (worst_rotation, fabs (sign * turned - v));
              }
          worst_mean = MAX (worst_mean, fabs (sum) / (size * size));
          worst_energy = MAX (worst_energy, fabs (energy - 1));
        }
      g_test_message ("%s kernels %d×%d: largest |mean| %.2g (tolerance 1e-7), |energy - 1| %.2g "
                      "(1e-5), point-symmetry error %.2g (1e-7), 90-degree rotation error %.2g "
                      "(1e-6)", fdog ? "FDOG" : "MF", size, size, worst_mean, worst_energy,
                      worst_symmetry, worst_rotation);
      g_assert_cmpfloat (worst_mean, <=, 1e-7);
      g_assert_cmpfloat (worst_energy, <=, 1e-5);
      g_assert_cmpfloat (worst_symmetry, <=, 1e-7);
      g_assert_cmpfloat (worst_rotation, <=, 1e-6);
    }
  /* orientation 0 matches a vertical vessel: a Gaussian across x, flat along y */
  ReteMatchedParams p;
  rete_matched_params_init (&p);
  int size;
  g_autofree float *k0 = rete_matched_kernel (&p, 0, FALSE, &size, NULL);
  int half = size / 2;
  g_assert_cmpfloat (k0[half * size + half], <, k0[half * size + half + 2]);
  g_assert_cmpfloat (fabsf (k0[(half - 3) * size + half] - k0[half * size + half]), <, 1e-7);
}

static void
test_matched_bad_parameters (void)
{
  struct { const char *what; double sigma, length; int n, fdog, window; double c; } cases[] = {
    { "sigma 0", 0, 9, 12, 0, 31, 2.3 },  { "sigma NaN", NAN, 9, 12, 0, 31, 2.3 },
    { "length 0", 1.5, 0, 12, 0, 31, 2.3 }, { "no orientations", 1.5, 9, 0, 0, 31, 2.3 },
    { "even FDOG window", 1.5, 9, 12, 1, 30, 2.3 }, { "FDOG c < 0", 1.5, 9, 12, 1, 31, -1 },
  };
  g_autoptr (ReteImage) im = noise_image (32, 32, 1, 1);
  for (gsize i = 0; i < G_N_ELEMENTS (cases); i++)
    {
      ReteMatchedParams p;
      rete_matched_params_init (&p);
      p.sigma = cases[i].sigma, p.length = cases[i].length, p.n_orientations = cases[i].n;
      p.use_fdog = cases[i].fdog, p.fdog_window = cases[i].window, p.fdog_c = cases[i].c;
      GError *error = NULL;
      g_assert_null (rete_vessel_matched (im, NULL, &p, &error));
      g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT);
      g_test_message ("%s: %s", cases[i].what, error->message);
      g_clear_error (&error);
      int size = -1;
      if (!cases[i].fdog)
        {
          g_assert_null (rete_matched_kernel (&p, 0, FALSE, &size, &error));
          g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT);
          g_clear_error (&error);
        }
    }
  ReteMatchedParams p;
  rete_matched_params_init (&p);
  int size;
  GError *error = NULL;
  g_assert_null (rete_matched_kernel (&p, 12, FALSE, &size, &error));
  g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT);
  g_clear_error (&error);
}

/* ---- matched filter: response against scipy.ndimage.correlate ---- */

static void
test_matched_matches_reference (gconstpointer data)
{
  const double *sigma_length = data; /* sigma, L, image width */
  g_autoptr (ReteImage) im = vessel_image ((int) sigma_length[2], 120, 3);
  ReteMatchedParams p;
  rete_matched_params_init (&p);
  p.sigma = sigma_length[0], p.length = sigma_length[1];
  GError *error = NULL;
  g_autoptr (ReteImage) ours = rete_matched_raw (im, &p, &error);
  g_assert_no_error (error);
  int size = 0;
  GArray *all = g_array_new (FALSE, FALSE, sizeof (float));
  for (int k = 0; k < p.n_orientations; k++)
    {
      g_autofree float *kernel = rete_matched_kernel (&p, k, FALSE, &size, &error);
      g_array_append_vals (all, kernel, size * size);
    }
  g_autofree char *in = save_npy (im, "mf-in.npy"), *kpath = rete_test_tmp_path ("mf-k.npy");
  g_autofree char *out = rete_test_tmp_path ("mf-out.npy");
  gsize shape[3] = { p.n_orientations, size, size };
  g_assert_true (rete_test_write_npy_f32 (kpath, (float *) all->data, shape, 3, NULL));
  g_array_free (all, TRUE);
  char *text = NULL;
  if (!run_reference ("matched_ref.py", &text, "correlate", in, kpath, out, NULL))
    return;
  gsize n = rete_image_n_pixels (im), where;
  g_autofree float *ref = load_npy (out, n);
  double diff = rete_test_max_abs_diff (ours->data, ref, n, &where), scale = 0;
  for (gsize i = 0; i < n; i++)
    scale = MAX (scale, fabs (ref[i]));
  /* float32 sums of up to ~500 products against float64: tolerance 1e-5 of the largest
   * response */
  g_test_message ("matched filter sigma %g L %g (%d×%d kernels): largest difference from "
                  "scipy.ndimage.correlate %.3g = %.2g of the largest response %.3g (tolerance "
                  "1e-5 of it); %s", p.sigma, p.length, size, size, diff, diff / scale, scale,
                  g_strstrip (text));
  g_free (text);
  g_assert_cmpfloat (diff, <=, 1e-5 * scale);
}

/* A straight dark vessel of Gaussian cross-section sigma_v at angle `angle` (radians from
 * vertical) through the image centre, on a flat background 0.6 with depth 0.2. */
static ReteImage *
straight_vessel (int side, double sigma_v, double angle)
{
  ReteImage *im = rete_image_new (side, side, 1, NULL);
  double c = cos (angle), s = sin (angle), mid = (side - 1) / 2.0;
  for (int y = 0; y < side; y++)
    for (int x = 0; x < side; x++)
      {
        double u = (x - mid) * c + (y - mid) * s;
        im->data[y * side + x] = (float) (0.6 - 0.2 * exp (-u * u / (2 * sigma_v * sigma_v)));
      }
  return im;
}

static void
test_matched_peak_on_centre_line (void)
{
  static const double angles[] = { 0, G_PI / 12, G_PI / 4, G_PI / 3 };
  for (gsize a = 0; a < G_N_ELEMENTS (angles); a++)
    {
      int side = 81, mid = 40;
      g_autoptr (ReteImage) im = straight_vessel (side, 2.0, angles[a]);
      ReteMatchedParams p;
      rete_matched_params_init (&p);
      p.sigma = 2.0;
      g_autoptr (ReteImage) r = rete_matched_raw (im, &p, NULL);
      /* along the horizontal line through the centre, the largest response is where the
       * vessel's centre line crosses it: x = mid */
      int best = 0;
      for (int x = 10; x < side - 10; x++)
        if (r->data[mid * side + x] > r->data[mid * side + best])
          best = x;
      g_test_message ("vessel at %.0f degrees: response peaks at x = %d (centre %d)",
                      angles[a] * 180 / G_PI, best, mid);
      g_assert_cmpint (best, ==, mid);
    }
}

/* The sigma with the largest response grows with the vessel's width. With unit-energy
 * kernels this is the matched-filter criterion (Chaudhuri 1989, section II); the optimum of the
 * zero-mean kernel truncated at 3 sigma lies near 1.7 sigma_v (measured here), not at sigma_v,
 * because the zero-mean kernel also weighs the background beside the vessel. Asked: the best
 * sigma rises strictly with the width and stays within 1.25..2.25 sigma_v. */
static void
test_matched_sigma_tracks_width (void)
{
  static const double widths[] = { 1.0, 1.5, 2.0, 3.0, 4.0 };
  double previous = 0;
  for (gsize w = 0; w < G_N_ELEMENTS (widths); w++)
    {
      g_autoptr (ReteImage) im = straight_vessel (121, widths[w], 0.3);
      double best_sigma = 0, best = -INFINITY;
      for (double sigma = 0.5; sigma <= 9.0 + 1e-9; sigma += 0.25)
        {
          ReteMatchedParams p;
          rete_matched_params_init (&p);
          p.sigma = sigma;
          p.length = 15;
          g_autoptr (ReteImage) r = rete_matched_raw (im, &p, NULL);
          double v = r->data[60 * 121 + 60];
          if (v > best)
            best = v, best_sigma = sigma;
        }
      g_test_message ("vessel of cross-section sigma %.1f px: best filter sigma %.2f = %.2f "
                      "sigma_v (asked: 1.25..2.25, rising)", widths[w], best_sigma,
                      best_sigma / widths[w]);
      g_assert_cmpfloat (best_sigma / widths[w], >=, 1.25);
      g_assert_cmpfloat (best_sigma / widths[w], <=, 2.25);
      g_assert_cmpfloat (best_sigma, >, previous);
      previous = best_sigma;
    }
}

/* Zhang 2010, fig. 1 and section 2: MF answers to the step edge of a bright lesion (the dark
 * side next to the step looks like half a vessel), FDOG's local mean damps it. The measure:
 * largest map value in a ring around the lesion's edge divided by the map value on a vessel's
 * centre line, for each filter. */
static void
test_fdog_suppresses_lesion_edge (void)
{
  int w = 240, h = 160;
  g_autoptr (ReteImage) im = rete_image_new (w, h, 1, NULL);
  for (int y = 0; y < h; y++)
    for (int x = 0; x < w; x++)
      {
        double d = x - 60, v = 0.5 - 0.15 * exp (-d * d / (2 * 2.0 * 2.0));
        if (hypot (x - 170, y - 80) < 35)
          v = 0.95; /* a bright lesion, as an exudate */
        im->data[y * w + x] = (float) v;
      }
  double ratio[2];
  for (int fdog = 0; fdog <= 1; fdog++)
    {
      ReteMatchedParams p;
      rete_matched_params_init (&p);
      p.sigma = 2.0;
      p.use_fdog = fdog;
      GError *error = NULL;
      g_autoptr (ReteImage) map = rete_vessel_matched (im, NULL, &p, &error);
      g_assert_no_error (error);
      double vessel = map->data[80 * w + 60], edge = 0;
      for (int y = 0; y < h; y++)
        for (int x = 120; x < w; x++)
          {
            double r = hypot (x - 170, y - 80);
            if (r > 30 && r < 45)
              edge = MAX (edge, map->data[y * w + x]);
          }
      ratio[fdog] = edge / vessel;
    }
  g_test_message ("lesion edge / vessel centre: MF %.3f, MF-FDOG %.3f (FDOG must be at most "
                  "0.8 × MF)", ratio[0], ratio[1]);
  g_assert_cmpfloat (ratio[1], <=, 0.8 * ratio[0]);
}

/* ---- line detector against a naive version of Nguyen 2013, eq. 1-5 ---- */

/* scipy.ndimage's 'reflect' border, written again here (d c b a | a b c d). */
static int
reflect (int i, int n)
{
  while (i < 0 || i >= n)
    i = i < 0 ? -i - 1 : 2 * n - i - 1;
  return i;
}

static ReteImage *
naive_line (const ReteImage *grey, const ReteLineParams *p)
{
  int w = grey->width, h = grey->height, half = p->window / 2, n_len = 0;
  gsize n = rete_image_n_pixels (grey);
  double *r = g_new0 (double, n * (p->window + 1));
  for (int len = 1; len <= p->window; len += p->step, n_len++)
    for (int y = 0; y < h; y++)
      for (int x = 0; x < w; x++)
        {
#define AT(xx, yy) (1.0 - grey->data[(gsize) reflect ((yy), h) * w + reflect ((xx), w)])
          double window = 0;
          for (int dy = -half; dy <= half; dy++)
            for (int dx = -half; dx <= half; dx++)
              window += AT (x + dx, y + dy);
          window /= p->window * p->window;
          double best = -INFINITY;
          for (int k = 0; k < p->n_orientations; k++)
            {
              double th = G_PI * k / p->n_orientations, co = cos (th), si = sin (th), sum = 0;
              for (int t = -(len / 2); t <= len / 2; t++)
                {
                  int dx, dy;
                  if (fabs (co) >= fabs (si))
                    dx = co > 0 ? t : -t, dy = (int) lround (dx * si / co);
                  else
                    dy = t, dx = (int) lround (t * co / si);
                  sum += AT (x + dx, y + dy);
                }
              best = MAX (best, sum / len);
            }
          r[(gsize) n_len * n + (gsize) y * w + x] = best - window;
        }
  /* the inverted grey level as the last response */
  for (gsize i = 0; i < n; i++)
    r[(gsize) n_len * n + i] = 1.0 - grey->data[i];
  ReteImage *out = rete_image_new (w, h, 1, NULL);
  double *combined = g_new0 (double, n);
  for (int l = 0; l <= n_len; l++)
    {
      double s = 0, s2 = 0;
      for (gsize i = 0; i < n; i++)
        s += r[(gsize) l * n + i], s2 += r[(gsize) l * n + i] * r[(gsize) l * n + i];
      double mean = s / n, sd = sqrt (MAX (s2 / n - mean * mean, 0));
      for (gsize i = 0; i < n; i++)
        combined[i] += sd > 0 ? (r[(gsize) l * n + i] - mean) / sd / (n_len + 1) : 0;
    }
  double lo = INFINITY, hi = -INFINITY;
  for (gsize i = 0; i < n; i++)
    lo = MIN (lo, combined[i]), hi = MAX (hi, combined[i]);
  for (gsize i = 0; i < n; i++)
    out->data[i] = (float) ((combined[i] - lo) / (hi - lo));
  g_free (combined);
  g_free (r);
  return out;
}

static void
test_line_matches_naive (void)
{
  g_autoptr (ReteImage) im = vessel_image (90, 70, 9);
  ReteLineParams p;
  rete_line_params_init (&p);
  p.window = 11;
  GError *error = NULL;
  g_autoptr (ReteImage) ours = rete_vessel_line (im, NULL, &p, &error);
  g_assert_no_error (error);
  g_autoptr (ReteImage) ref = naive_line (im, &p);
  gsize where;
  double diff = rete_test_max_abs_diff (ours->data, ref->data, rete_image_n_pixels (im), &where);
  g_test_message ("line detector W 11 against the naive version: largest difference %.3g "
                  "(tolerance 1e-4 on a [0,1] map)", diff);
  g_assert_cmpfloat (diff, <=, 1e-4);
}

static void
test_line_responds_on_vessels (void)
{
  g_autoptr (ReteImage) im = straight_vessel (81, 1.5, 0.4);
  g_autoptr (ReteImage) fov = rete_image_new (81, 81, 1, NULL);
  for (int i = 0; i < 81 * 81; i++)
    fov->data[i] = hypot (i % 81 - 40, i / 81 - 40) < 38;
  GError *error = NULL;
  g_autoptr (ReteImage) map = rete_vessel_line (im, fov, NULL, &error);
  g_assert_no_error (error);
  float centre = map->data[40 * 81 + 40], off = map->data[40 * 81 + 40 + 12];
  g_test_message ("line map on the vessel %.3f, 12 px beside it %.3f", centre, off);
  g_assert_cmpfloat (centre, >, 0.8f);
  g_assert_cmpfloat (off, <, 0.5f * centre);
  for (int i = 0; i < 81 * 81; i++)
    {
      g_assert_cmpfloat (map->data[i], >=, 0);
      g_assert_cmpfloat (map->data[i], <=, 1);
      if (fov->data[i] < 0.5f)
        g_assert_cmpfloat (map->data[i], ==, 0);
    }
  struct { int window, step, n; } bad[] = { { 14, 2, 12 }, { 1, 2, 12 }, { 15, 3, 12 },
                                           { 15, 0, 12 }, { 15, 2, 0 } };
  for (gsize i = 0; i < G_N_ELEMENTS (bad); i++)
    {
      ReteLineParams p = { bad[i].window, bad[i].step, bad[i].n };
      g_assert_null (rete_vessel_line (im, fov, &p, &error));
      g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT);
      g_test_message ("W %d step %d n %d: %s", p.window, p.step, p.n_orientations, error->message);
      g_clear_error (&error);
    }
}

/* ---- halos: a tile with the declared border reproduces the whole image's result ---- */

static void
test_tiles_with_halo_are_exact (void)
{
  g_autoptr (ReteImage) im = vessel_image (200, 150, 21);
  ReteFrangiParams fp;
  rete_frangi_params_init (&fp);
  ReteMatchedParams mp;
  rete_matched_params_init (&mp);
  fp.c = 0.05; /* a fixed c: the automatic c depends on the whole image */
  int frangi_halo = (int) (4 * fp.sigma_max + 0.5);
  int matched_halo = (int) floor (hypot (3 * mp.sigma, mp.length / 2));
  for (int method = 0; method < 2; method++)
    {
      int halo = method == 0 ? frangi_halo : matched_halo;
      ReteRect tile = { 60, 40, 70, 50 };
      ReteRect padded = { tile.x - halo, tile.y - halo, tile.width + 2 * halo, tile.height + 2 * halo };
      g_autoptr (ReteImage) part = rete_image_crop (im, &padded, NULL);
      g_autoptr (ReteImage) whole = method == 0 ? rete_frangi_raw (im, &fp, NULL) : rete_matched_raw (im, &mp, NULL);
      g_autoptr (ReteImage) piece = method == 0 ? rete_frangi_raw (part, &fp, NULL) : rete_matched_raw (part, &mp, NULL);
      double worst = 0;
      for (int y = 0; y < tile.height; y++)
        for (int x = 0; x < tile.width; x++)
          worst = MAX (worst, fabs (piece->data[(y + halo) * padded.width + x + halo]
                                    - whole->data[(y + tile.y) * im->width + x + tile.x]));
      g_test_message ("%s: tile with a %d px halo differs from the whole image by %.3g "
                      "(tolerance 1e-6)", method == 0 ? "Frangi" : "matched filter", halo, worst);
      g_assert_cmpfloat (worst, <=, 1e-6);
    }
}

int
main (int argc, char **argv)
{
  g_test_init (&argc, &argv, NULL);
  for (gsize i = 0; i < G_N_ELEMENTS (blur_cases); i++)
    {
      char *path = g_strdup_printf ("/vessel/gauss/matches-scipy/%dx%dx%d-sigma-%g",
                                    blur_cases[i].width, blur_cases[i].height,
                                    blur_cases[i].channels, blur_cases[i].sigma);
      g_test_add_data_func (path, &blur_cases[i], test_blur_matches_scipy);
      g_free (path);
    }
  g_test_add_func ("/vessel/gauss/edge-cases", test_blur_edge_cases);
  for (gsize i = 0; i < G_N_ELEMENTS (frangi_cases); i++)
    {
      char *path = g_strdup_printf ("/vessel/frangi/matches-reference/%s", frangi_cases[i].name);
      g_test_add_data_func (path, &frangi_cases[i], test_frangi_matches_reference);
      g_free (path);
    }
  g_test_add_func ("/vessel/frangi/vessel-map", test_frangi_vessel_map);
  g_test_add_func ("/vessel/frangi/bad-parameters", test_frangi_bad_parameters);
  g_test_add_func ("/vessel/filters/bad-images", test_bad_images);
  g_test_add_func ("/vessel/matched/kernel-properties", test_matched_kernel_properties);
  g_test_add_func ("/vessel/matched/bad-parameters", test_matched_bad_parameters);
  /* sigma, L, width: the defaults (4, 21) on a width that is not a multiple of the column
   * strips of matched.c (256) nor of the 32-value blocks */
  static const double mf_cases[][3] = { { 1.5, 9, 160 }, { 2.5, 13, 160 }, { 1.0, 5, 160 },
                                        { 4, 21, 557 } };
  for (gsize i = 0; i < G_N_ELEMENTS (mf_cases); i++)
    {
      char *path = g_strdup_printf ("/vessel/matched/matches-reference/sigma-%g-L-%g-width-%g",
                                    mf_cases[i][0], mf_cases[i][1], mf_cases[i][2]);
      g_test_add_data_func (path, mf_cases[i], test_matched_matches_reference);
      g_free (path);
    }
  g_test_add_func ("/vessel/matched/peak-on-centre-line", test_matched_peak_on_centre_line);
  g_test_add_func ("/vessel/matched/sigma-tracks-width", test_matched_sigma_tracks_width);
  g_test_add_func ("/vessel/matched/fdog-suppresses-lesion-edge", test_fdog_suppresses_lesion_edge);
  g_test_add_func ("/vessel/line/matches-naive", test_line_matches_naive);
  g_test_add_func ("/vessel/line/responds-on-vessels", test_line_responds_on_vessels);
  g_test_add_func ("/vessel/filters/tiles-with-halo-are-exact", test_tiles_with_halo_are_exact);
  return g_test_run ();
}
