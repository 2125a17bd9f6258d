/* frangi.c — multiscale vesselness of Frangi et al., "Multiscale vessel enhancement
 * filtering", MICCAI 1998, in its 2-D form.
 *
 * At each scale s the Hessian H is taken from Gaussian derivatives and scale-normalised by
 * s^2 (Frangi 1998, section 2, with gamma = 2 in Lindeberg's normalisation: s^2 d^2/dx^2).
 * Its eigenvalues are ordered |l1| <= |l2| and (Frangi 1998, eq. 13, 2-D)
 *   V = exp (-Rb^2 / (2 beta^2)) (1 - exp (-S^2 / (2 c^2))),  Rb = l1 / l2,
 *   S = sqrt (l1^2 + l2^2) (the Frobenius norm of H),
 * with V = 0 where l2 < 0 for dark vessels (their cross-section is a valley, l2 > 0), or
 * l2 > 0 for bright ones. The result is the maximum of V over the scales.
 * Conventions follow skimage.filters.frangi (0.19) so the two can be checked against each
 * other: eigenvalues from the closed form for symmetric 2x2 matrices, ties of |l1| = |l2|
 * take l2 = the smaller eigenvalue, and l2 = 0 is replaced by 1e-10 in Rb.
 *
 * Halo: rete_gauss_radius (sigma_max) = int (4 sigma_max + 0.5) pixels past a tile (one more
 * with RETE_HESSIAN_BLUR_THEN_DIFFERENCES, whose differences reach two pixels further);
 * borders are read as scipy.ndimage's 'reflect'.
 * Speed: per scale three horizontal passes (G, G', G''), then per output row three vertical
 * passes fused with the eigenvalues; rows are spread over the cores with rete_parallel_for.
 */
/* librete uses no floating-point traps; without -ftrapping-math GCC turns the float
 * comparisons of the exponential loop into blends and vectorises it. (The eigenvalue loop stays
 * scalar: sqrtf's errno path is a branch, and -fno-math-errno cannot be set per file here.) */
#if defined(__GNUC__) && !defined(__clang__)
#pragma GCC optimize ("-fno-trapping-math")
#endif

#include "filters_private.h"

#include <math.h>
#include <string.h>

#define MAX_SCALES 64

void
rete_frangi_params_init (ReteFrangiParams *params)
{
  params->sigma_min = 2;  /* tuned on CHASE_DB1 (999x960): tests/CHASE-CLASSICAL.md */
  params->sigma_max = 8;
  params->sigma_step = 2;
  params->beta = 0.5;
  params->c = 0;
  params->dark_vessels = TRUE;
  params->hessian = RETE_HESSIAN_GAUSSIAN_DERIVATIVES;
}

static int
frangi_scales (const ReteFrangiParams *p, double *scales, GError **error)
{
  const char *what = NULL;
  if (!(isfinite (p->sigma_min) && p->sigma_min > 0 && p->sigma_min <= 100))
    what = "the smallest scale sigma_min must be above 0 and at most 100 pixels (1 is usual)";
  else if (!(isfinite (p->sigma_max) && p->sigma_max >= p->sigma_min && p->sigma_max <= 100))
    what = "the largest scale sigma_max must be at least sigma_min and at most 100 pixels";
  else if (!(isfinite (p->sigma_step) && p->sigma_step > 0))
    what = "the step between scales sigma_step must be above 0 pixels (1 is usual)";
  else if ((p->sigma_max - p->sigma_min) / p->sigma_step >= MAX_SCALES)
    what = "there would be more than 64 scales; take a larger sigma_step";
  else if (!(isfinite (p->beta) && p->beta > 0))
    what = "beta must be above 0 (0.5 as in Frangi 1998)";
  else if (!(isfinite (p->c) && p->c >= 0))
    what = "c must be 0 (automatic: half the largest Hessian norm) or above";
  else if (p->hessian != RETE_HESSIAN_GAUSSIAN_DERIVATIVES
           && p->hessian != RETE_HESSIAN_BLUR_THEN_DIFFERENCES)
    what = "the Hessian method is unknown";
  if (what != NULL)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "Frangi vesselness: %s (scales %g..%g step %g, beta %g, c %g)", what,
                   p->sigma_min, p->sigma_max, p->sigma_step, p->beta, p->c);
      return 0;
    }
  int n = 0;
  for (double s = p->sigma_min; s <= p->sigma_max + 1e-9 * p->sigma_step && n < MAX_SCALES;
       s = p->sigma_min + n * p->sigma_step)
    scales[n++] = s;
  return n;
}

typedef struct {
  int width, height;
  float *t0, *t1, *t2;          /* per-scale working planes (see the two Hessian methods) */
  float *rb2, *s2;              /* per pixel: Rb^2, and S^2 (-1 where the sign rules out) */
  float *row_max_s2;            /* (height) largest S^2 of each row */
  double sigma, scale2;         /* scale and its normalisation sigma^2 */
  const float *k0, *k1, *k2;    /* Gaussian kernels of this scale */
  int radius;
  gboolean dark, differences;
  float *out;                   /* max over scales of V */
  double two_beta2, two_c2;
} Frangi;

/* Central differences of numpy.gradient along a row: one-sided at both ends. */
static void
gradient_row (const float *in, float *out, int n)
{
  if (n == 1)
    {
      out[0] = 0;
      return;
    }
  out[0] = in[1] - in[0];
  for (int x = 1; x < n - 1; x++)
    out[x] = 0.5f * (in[x + 1] - in[x - 1]);
  out[n - 1] = in[n - 1] - in[n - 2];
}

/* Row y of numpy.gradient along the columns of plane. */
static void
gradient_column_row (const float *plane, int w, int h, int y, float *out)
{
  if (h == 1)
    {
      memset (out, 0, w * sizeof (float));
      return;
    }
  const float *up = plane + (gsize) MAX (y - 1, 0) * w, *down = plane + (gsize) MIN (y + 1, h - 1) * w;
  float f = (y == 0 || y == h - 1) ? 1.0f : 0.5f;
  for (int x = 0; x < w; x++)
    out[x] = f * (down[x] - up[x]);
}

/* numpy.gradient of the blur t0 along x into t1 and along y into t2, rows first..last. */
static void
gradient_rows (int first, int last, gpointer data)
{
  Frangi *f = data;
  int w = f->width, h = f->height;
  for (int y = first; y < last; y++)
    {
      gradient_row (f->t0 + (gsize) y * w, f->t1 + (gsize) y * w, w);
      gradient_column_row (f->t0, w, h, y, f->t2 + (gsize) y * w);
    }
}

/* Pass 1 of a scale: the Hessian of rows first..last, its eigenvalues, Rb^2 and S^2. */
RETE_VECTOR_CLONES static void
hessian_rows (int first, int last, gpointer data)
{
  Frangi *f = data;
  int w = f->width, h = f->height;
  float *hxx = g_new (float, 3 * w), *hyy = hxx + w, *hxy = hyy + w;
  for (int y = first; y < last; y++)
    {
      if (f->differences)
        {
          /* t1 = d/dx of the blur, t2 = d/dy of the blur (numpy.gradient of each) */
          gradient_row (f->t1 + (gsize) y * w, hxx, w);
          gradient_column_row (f->t1, w, h, y, hxy);
          gradient_column_row (f->t2, w, h, y, hyy);
        }
      else
        {
          /* t0, t1, t2 = rows filtered by G, G', G''; the columns complete the pairs */
          rete_convolve_column_row (f->t2, w, h, y, f->k0, f->radius, +1, hxx);
          rete_convolve_column_row (f->t0, w, h, y, f->k2, f->radius, +1, hyy);
          rete_convolve_column_row (f->t1, w, h, y, f->k1, f->radius, -1, hxy);
        }
      float *rb2 = f->rb2 + (gsize) y * w, *s2 = f->s2 + (gsize) y * w;
      float scale2 = (float) f->scale2, row_max = 0;
      for (int x = 0; x < w; x++)
        {
          float a = scale2 * hxx[x], b = scale2 * hxy[x], c = scale2 * hyy[x];
          float half_trace = 0.5f * (a + c);
          float root = 0.5f * sqrtf (4 * b * b + (a - c) * (a - c));
          float big = half_trace + root, small = half_trace - root;
          float l1 = half_trace > 0 ? small : big, l2 = half_trace > 0 ? big : small;
          float norm2 = l1 * l1 + l2 * l2;
          float ratio = l1 / (l2 != 0 ? l2 : 1e-10f);
          rb2[x] = ratio * ratio;
          float signed_l2 = f->dark ? l2 : -l2;
          s2[x] = signed_l2 >= 0 ? norm2 : -1.0f; /* -1: ruled out by the sign of l2 */
          row_max = MAX (row_max, norm2);
        }
      f->row_max_s2[y] = row_max;
    }
  g_free (hxx);
}

/* exp (x) for x <= 0 (clamped to [-87, 0]), branch-free so that the loop below vectorises:
 * Cody-Waite reduction x = n ln 2 + r and a degree-6 polynomial for e^r (Cephes' expf
 * coefficients); largest relative error 8e-8 against exp in double (measured on [-87, 0]). */
static inline float
exp_nonpositive (float x)
{
  x = x < -87.0f ? -87.0f : x;
  x = x > 0.0f ? 0.0f : x;
  float n = floorf (x * 1.44269504088896341f + 0.5f);
  float r = x - n * 0.693359375f;
  r = r - n * -2.12194440e-4f;
  float p = 1.9875691500e-4f;
  p = p * r + 1.3981999507e-3f;
  p = p * r + 8.3334519073e-3f;
  p = p * r + 4.1665795894e-2f;
  p = p * r + 1.6666665459e-1f;
  p = p * r + 5.0000001201e-1f;
  p = p * r * r + r + 1.0f;
  gint32 bits = ((gint32) n + 127) << 23;
  float scale;
  memcpy (&scale, &bits, sizeof scale);
  return p * scale;
}

/* Pass 2 of a scale: V from Rb^2 and S^2, maximum over the scales so far. */
RETE_VECTOR_CLONES static void
vesselness_rows (int first, int last, gpointer data)
{
  Frangi *f = data;
  gsize begin = (gsize) first * f->width, end = (gsize) last * f->width;
  float inv_b = (float) (1.0 / f->two_beta2), inv_c = (float) (1.0 / f->two_c2);
  const float *rb2 = f->rb2, *s2 = f->s2;
  float *out = f->out;
  for (gsize i = begin; i < end; i++)
    {
      float v = exp_nonpositive (-rb2[i] * inv_b) * (1.0f - exp_nonpositive (-s2[i] * inv_c));
      v = s2[i] > 0 ? v : 0.0f;
      out[i] = out[i] > v ? out[i] : v;
    }
}

ReteImage *
rete_frangi_raw (const ReteImage *grey, const ReteFrangiParams *params, GError **error)
{
  double scales[MAX_SCALES];
  if (!rete_filters_check_input (grey, NULL, "Frangi vesselness", error))
    return NULL;
  ReteFrangiParams defaults;
  if (params == NULL)
    {
      rete_frangi_params_init (&defaults);
      params = &defaults;
    }
  int n_scales = frangi_scales (params, scales, error);
  if (n_scales == 0)
    return NULL;
  int w = grey->width, h = grey->height;
  gsize n = rete_image_n_pixels (grey);
  ReteImage *out = rete_image_new (w, h, 1, error);
  if (out == NULL)
    return NULL;
  float *work = g_try_malloc (5 * n * sizeof (float));
  if (work == NULL)
    {
      rete_image_free (out);
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_NO_MEMORY,
                   "Frangi vesselness: not enough memory for the working planes of a "
                   "%d×%d image (%" G_GSIZE_FORMAT " MB)", w, h, 5 * n * sizeof (float) >> 20);
      return NULL;
    }
  Frangi f = { .width = w, .height = h, .t0 = work, .t1 = work + n, .t2 = work + 2 * n,
               .rb2 = work + 3 * n, .s2 = work + 4 * n, .row_max_s2 = g_new (float, h),
               .dark = params->dark_vessels,
               .differences = params->hessian == RETE_HESSIAN_BLUR_THEN_DIFFERENCES,
               .out = out->data, .two_beta2 = 2 * params->beta * params->beta };
  float *t0 = work, *t1 = work + n, *t2 = work + 2 * n;
  for (int s = 0; s < n_scales; s++)
    {
      int r;
      float *k0 = rete_gauss_kernel (scales[s], 0, &r);
      float *k1 = rete_gauss_kernel (scales[s], 1, &r);
      float *k2 = rete_gauss_kernel (scales[s], 2, &r);
      f.sigma = scales[s];
      f.scale2 = scales[s] * scales[s];
      f.k0 = k0, f.k1 = k1, f.k2 = k2, f.radius = r;
      if (f.differences)
        {
          /* skimage 0.19: blur (t0), then numpy.gradient along x (t1) and y (t2) */
          rete_convolve_rows (grey->data, t2, w, h, 1, k0, r, +1);
          rete_convolve_columns (t2, t0, w, h, 1, k0, r, +1);
          rete_parallel_for (h, gradient_rows, &f);
        }
      else
        {
          rete_convolve_rows3 (grey->data, t0, t1, t2, w, h, k0, k1, k2, r);
        }
      rete_parallel_for (h, hessian_rows, &f);
      double c = params->c;
      if (c <= 0)
        {
          float max_s2 = 0;
          for (int y = 0; y < h; y++)
            max_s2 = MAX (max_s2, f.row_max_s2[y]);
          c = 0.5 * sqrt (max_s2);
          if (c <= 0)
            c = 1; /* a flat image: any c gives V = 0 */
        }
      f.two_c2 = 2 * c * c;
      rete_parallel_for (h, vesselness_rows, &f);
      g_free (k0);
      g_free (k1);
      g_free (k2);
    }
  g_free (f.row_max_s2);
  g_free (work);
  return out;
}

ReteImage *
rete_vessel_frangi (const ReteImage *grey, const ReteImage *fov, const ReteFrangiParams *params,
                    GError **error)
{
  ReteFrangiParams defaults;
  if (params == NULL)
    {
      rete_frangi_params_init (&defaults);
      params = &defaults;
    }
  double scales[MAX_SCALES];
  if (!rete_filters_check_input (grey, fov, "Frangi vesselness", error)
      || frangi_scales (params, scales, error) == 0)
    return NULL;
  ReteImage *filled = rete_filters_fill_outside_fov (grey, fov, MAX (10.0, 3 * params->sigma_max),
                                                     error);
  if (filled == NULL)
    return NULL;
  ReteImage *map = rete_frangi_raw (filled, params, error);
  rete_image_free (filled);
  if (map != NULL)
    rete_filters_finish_map (map, fov, 0.0);
  return map;
}
