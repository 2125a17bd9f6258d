/* matched.c — the Gaussian matched filter of Chaudhuri et al., "Detection of blood vessels
 * in retinal images using two-dimensional matched filters", IEEE TMI 8(3), 1989, and the
 * first-derivative-of-Gaussian variant (MF-FDOG) of Zhang et al., "Retinal vessel extraction
 * by matched filter with first-order derivative of Gaussian", Pattern Recognition 43, 2010.
 *
 * Kernels K_k (Chaudhuri 1989, eq. 3-6) and F_k (Zhang 2010, eq. 3): matched_kernel.c.
 *
 * Responses: H = max_k (K_k (*) I); for MF-FDOG also D = |F_k* (*) I| at the orientation k*
 * that gave H, its local mean Dbar over a W x W window normalised to [0,1] (Dhat = Dbar / max),
 * and Zhang's rule "vessel where H >= (1 + Dhat) T, T = c mean(H)" (eq. 6-8). The vessel map
 * of MF-FDOG is the score H / (1 + Dhat), which crosses T exactly where Zhang's rule does: near
 * the step edge of a bright lesion D is high and the score drops by up to half.
 *
 * Halo: floor (hypot (3 sigma, L / 2)) pixels (the kernels' half size), plus (W - 1) / 2 for
 * the mean window of MF-FDOG; borders read as scipy.ndimage's 'reflect'.
 * Speed: direct correlation over the kernel's non-zero taps, paired by the point symmetry
 * K(-p) = K(p) (F(-p) = -F(p)), with a contiguous inner loop along x that the compiler
 * vectorises; rows are spread over the cores with rete_parallel_for.
 */
#include "filters_private.h"

#include <math.h>
#include <string.h>

/* The non-zero taps of one kernel with offset (dy, dx) > (0, 0) in raster order, paired
 * with their mirror (-dy, -dx); the centre tap apart. */
typedef struct {
  int n;
  int *offset;   /* (n) dy * stride + dx in the padded image */
  float *weight; /* (n) */
  float centre;
} Taps;

typedef struct {
  int width, height, half, stride;
  const float *padded;          /* (height + 2 half, stride) reflect-padded input */
  int n_orientations;
  Taps *mf, *fdog;              /* (n_orientations) each; fdog may be NULL */
  float *h_out, *d_out;         /* (height, width) H, and |FDOG| at the best orientation */
} Matched;

static void
taps_from_kernel (const float *kernel, int half, int stride, Taps *t)
{
  int side = 2 * half + 1;
  t->offset = g_new (int, side * side / 2 + 1);
  t->weight = g_new (float, side * side / 2 + 1);
  t->n = 0;
  t->centre = kernel[half * side + half];
  for (int i = half * side + half + 1; i < side * side; i++)
    if (kernel[i] != 0)
      {
        int dy = i / side - half, dx = i % side - half;
        t->offset[t->n] = dy * stride + dx;
        t->weight[t->n++] = kernel[i];
      }
}

/* acc[x] = sum over taps of w p[x + o] + (+-) w p[x - o] for x in [0, width). The row is
 * taken in blocks of 32 values held in four 8-float vector registers while all taps are
 * added (GCC vector extensions; split into SSE halves where AVX is absent). */
RETE_VECTOR_CLONES static void
correlate_row (const Taps *t, const float *p, int width, gboolean antisymmetric, float *acc)
{
  int x0 = 0;
  for (; x0 + 32 <= width; x0 += 32)
    {
      const float *q = p + x0;
      ReteV8 s0 = t->centre * rete_load8 (q), s1 = t->centre * rete_load8 (q + 8);
      ReteV8 s2 = t->centre * rete_load8 (q + 16), s3 = t->centre * rete_load8 (q + 24);
      for (int j = 0; j < t->n; j++)
        {
          const float *a = q + t->offset[j], *b = q - t->offset[j];
          float w = t->weight[j];
          if (antisymmetric)
            {
              s0 += w * (rete_load8 (a) - rete_load8 (b));
              s1 += w * (rete_load8 (a + 8) - rete_load8 (b + 8));
              s2 += w * (rete_load8 (a + 16) - rete_load8 (b + 16));
              s3 += w * (rete_load8 (a + 24) - rete_load8 (b + 24));
            }
          else
            {
              s0 += w * (rete_load8 (a) + rete_load8 (b));
              s1 += w * (rete_load8 (a + 8) + rete_load8 (b + 8));
              s2 += w * (rete_load8 (a + 16) + rete_load8 (b + 16));
              s3 += w * (rete_load8 (a + 24) + rete_load8 (b + 24));
            }
        }
      rete_store8 (acc + x0, s0);
      rete_store8 (acc + x0 + 8, s1);
      rete_store8 (acc + x0 + 16, s2);
      rete_store8 (acc + x0 + 24, s3);
    }
  float sign = antisymmetric ? -1.0f : 1.0f;
  for (int x = x0; x < width; x++)
    {
      float sum = t->centre * p[x];
      for (int j = 0; j < t->n; j++)
        sum += t->weight[j] * (p[x + t->offset[j]] + sign * p[x - t->offset[j]]);
      acc[x] = sum;
    }
}

/* Width of the column strips a row is taken in: the kernel's rows over a strip stay in the
 * first-level cache while all orientations pass over it. */
#define STRIP 256

static void
matched_rows (int first, int last, gpointer data)
{
  Matched *m = data;
  int w = m->width;
  float acc[STRIP], dacc[STRIP];
  for (int y = first; y < last; y++)
    for (int x0 = 0; x0 < w; x0 += STRIP)
      {
        int n = MIN (STRIP, w - x0);
        const float *p = m->padded + (gsize) (y + m->half) * m->stride + m->half + x0;
        float *h = m->h_out + (gsize) y * w + x0;
        float *d = m->d_out ? m->d_out + (gsize) y * w + x0 : NULL;
        for (int k = 0; k < m->n_orientations; k++)
          {
            correlate_row (&m->mf[k], p, n, FALSE, acc);
            if (d != NULL)
              correlate_row (&m->fdog[k], p, n, TRUE, dacc);
            if (k == 0)
              {
                memcpy (h, acc, n * sizeof (float));
                if (d != NULL)
                  for (int x = 0; x < n; x++)
                    d[x] = fabsf (dacc[x]);
                continue;
              }
            if (d == NULL)
              for (int x = 0; x < n; x++)
                h[x] = MAX (h[x], acc[x]);
            else
              for (int x = 0; x < n; x++)
                if (acc[x] > h[x])
                  {
                    h[x] = acc[x];
                    d[x] = fabsf (dacc[x]);
                  }
          }
      }
}

/* H (and D when d_out != NULL) of grey. */
static gboolean
matched_responses (const ReteImage *grey, const ReteMatchedParams *params, float *h_out,
                   float *d_out, GError **error)
{
  int w = grey->width, h = grey->height, half = rete_matched_half (params);
  int stride = w + 2 * half, n_k = params->n_orientations;
  float *padded = g_try_malloc ((gsize) stride * (h + 2 * half) * sizeof (float));
  if (padded == NULL)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_NO_MEMORY,
                   "matched filter: not enough memory for a %d×%d working image", w, h);
      return FALSE;
    }
  for (int y = 0; y < h + 2 * half; y++)
    {
      const float *src = grey->data + (gsize) rete_reflect_index (y - half, h) * w;
      float *dst = padded + (gsize) y * stride;
      for (int x = 0; x < stride; x++)
        dst[x] = src[rete_reflect_index (x - half, w)];
    }
  int side = 2 * half + 1;
  float *kernel = g_new (float, side * side);
  Taps *mf = g_new0 (Taps, n_k), *fdog = d_out ? g_new0 (Taps, n_k) : NULL;
  for (int k = 0; k < n_k; k++)
    {
      rete_matched_build_kernel (params, k, FALSE, half, kernel);
      taps_from_kernel (kernel, half, stride, &mf[k]);
      if (fdog != NULL)
        {
          rete_matched_build_kernel (params, k, TRUE, half, kernel);
          taps_from_kernel (kernel, half, stride, &fdog[k]);
        }
    }
  Matched m = { w, h, half, stride, padded, n_k, mf, fdog, h_out, d_out };
  rete_parallel_for (h, matched_rows, &m);
  for (int k = 0; k < n_k; k++)
    {
      g_free (mf[k].offset);
      g_free (mf[k].weight);
      if (fdog != NULL)
        {
          g_free (fdog[k].offset);
          g_free (fdog[k].weight);
        }
    }
  g_free (mf);
  g_free (fdog);
  g_free (kernel);
  g_free (padded);
  return TRUE;
}

ReteImage *
rete_matched_raw (const ReteImage *grey, const ReteMatchedParams *params, GError **error)
{
  ReteMatchedParams defaults;
  if (params == NULL)
    {
      rete_matched_params_init (&defaults);
      params = &defaults;
    }
  if (!rete_filters_check_input (grey, NULL, "matched filter", error) || !rete_matched_check (params, error))
    return NULL;
  ReteImage *out = rete_image_new_like (grey, 1, error);
  if (out != NULL && !matched_responses (grey, params, out->data, NULL, error))
    g_clear_pointer (&out, rete_image_free);
  return out;
}

ReteImage *
rete_vessel_matched (const ReteImage *grey, const ReteImage *fov, const ReteMatchedParams *params,
                     GError **error)
{
  return rete_vessel_matched_threshold (grey, fov, params, NULL, error);
}

ReteImage *
rete_vessel_matched_threshold (const ReteImage *grey, const ReteImage *fov,
                               const ReteMatchedParams *params, double *threshold, GError **error)
{
  ReteMatchedParams defaults;
  if (params == NULL)
    {
      rete_matched_params_init (&defaults);
      params = &defaults;
    }
  if (!rete_filters_check_input (grey, fov, "matched filter", error) || !rete_matched_check (params, error))
    return NULL;
  int half = rete_matched_half (params);
  ReteImage *filled = rete_filters_fill_outside_fov (grey, fov, MAX (10.0, 2.0 * half), error);
  if (filled == NULL)
    return NULL;
  ReteImage *map = rete_image_new_like (grey, 1, error), *d = NULL, *dbar = NULL;
  if (map != NULL && params->use_fdog)
    d = rete_image_new_like (grey, 1, error);
  if (map == NULL || (params->use_fdog && d == NULL)
      || !matched_responses (filled, params, map->data, d ? d->data : NULL, error)
      || (d != NULL && (dbar = rete_box_mean (d, params->fdog_window, error)) == NULL))
    {
      rete_image_free (filled);
      rete_image_free (map);
      rete_image_free (d);
      return NULL;
    }
  rete_image_free (filled);
  rete_image_free (d);
  /* T = c mean (H) inside the FOV (Zhang 2010, eq. 8) */
  gsize n = rete_image_n_pixels (map), n_in = 0;
  double sum_h = 0;
  float max_d = 0, max_score = 0;
  for (gsize i = 0; i < n; i++)
    if (fov == NULL || fov->data[i] >= 0.5f)
      {
        sum_h += map->data[i];
        if (dbar != NULL)
          max_d = MAX (max_d, dbar->data[i]);
        n_in++;
      }
  double t = params->fdog_c * sum_h / MAX (n_in, 1);
  if (dbar != NULL)
    {
      /* Zhang 2010, eq. 6-7: Dhat = Dbar / max Dbar; score H / (1 + Dhat) */
      float inv_max = max_d > 0 ? 1 / max_d : 0;
      for (gsize i = 0; i < n; i++)
        map->data[i] /= 1 + dbar->data[i] * inv_max;
      rete_image_free (dbar);
    }
  for (gsize i = 0; i < n; i++)
    if (fov == NULL || fov->data[i] >= 0.5f)
      max_score = MAX (max_score, map->data[i]);
  rete_filters_finish_map (map, fov, 0.0);
  if (threshold != NULL)
    *threshold = max_score > 0 ? t / max_score : 1.0;
  return map;
}
