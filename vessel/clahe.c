/* clahe.c — contrast limited adaptive histogram equalisation (CLAHE; Zuiderveld, "Contrast
 * Limited Adaptive Histogram Equalization", Graphics Gems IV, 1994), optionally limited to
 * the field of view.
 *
 * The layout follows skimage.exposure.equalize_adapthist (0.19) step for step, so that the
 * two can be held together by tests/test_preprocess.c:
 *   1. values to 16-bit (rint(v * 65535)), then stretched from their minimum..maximum to the
 *      14-bit range 0..16383 (rounded half to even), then binned as q / (1 + 16384 / n_bins);
 *   2. the image is cut into tiles ("contextual regions") of kernel_height × kernel_width
 *      starting at the top-left corner; the last row and column of tiles reach past the
 *      image and read it mirrored ('reflect': d c b | a b c d | c b a);
 *   3. each tile's histogram is clipped at max(1, clip_limit × pixels in the tile) and the
 *      excess redistributed (Zuiderveld's ClipHistogram, with skimage's stride rule for the
 *      remainder); its cumulative sum times 16383 / pixels, truncated, is the tile's mapping;
 *   4. each pixel's value is the bilinear interpolation of the mappings of the four tiles
 *      around it; a pixel at row y sits at y + kernel_height / 2 on a grid of blocks of
 *      kernel_height rows, block j blends tiles j - 1 and j with weight (offset in block) /
 *      kernel_height, tile indices clamped at the edges (and the same for columns);
 *   5. the result is stretched from its minimum..maximum to [0, 1].
 * skimage truncates step 4 to integers; we keep the interpolated value as a float (at most
 * 1/16383 apart).
 *
 * Inside a field of view (our addition): only pixels inside the FOV enter the histograms,
 * the minimum..maximum of steps 1 and 5 are taken inside it, each tile's clip limit and
 * mapping use the number of FOV pixels in it, tiles with fewer than 1/16 of their area inside
 * take the mean mapping of their neighbours (repeated outwards), and pixels outside are 0.
 * The surround then has no influence at all on the result inside.
 * This file holds the pixel passes (threaded by rows); clahe_tiles.c the histograms.
 */
#include "clahe_private.h"

#include <math.h>
#include <string.h>
#ifdef __SSE2__
#include <emmintrin.h>
#endif

#define GREY_LEVELS RETE_CLAHE_GREY_LEVELS

void
rete_clahe_params_init (ReteClaheParams *params)
{
  g_return_if_fail (params != NULL);
  params->kernel_width = 0;
  params->kernel_height = 0;
  params->clip_limit = 0.01;
  params->n_bins = 256;
}

typedef struct {
  ReteClaheTiles tiles;
  const float *weight_x;  /* (kw) weight of the right tile at each offset in a block */
  float *out;             /* (height, width) */
  GMutex lock;            /* guards the results of the chunks below */
  float g_min, g_max;     /* input range inside the FOV */
  gboolean any_inside, any_not_finite;
  float v_min, v_max;     /* interpolated range inside the FOV */
} Clahe;

/* Pass 1: range of the input inside the FOV, whether the FOV has a pixel, values that are
 * not numbers (x - x is 0 for every finite x, NaN for NaN and infinities); and the 16-bit
 * value of each pixel, rint (v × 65535) as skimage's img_as_uint on float32 (the
 * conversion rounds to nearest, ties to even, as np.rint), clamped to [0, 1] first since
 * outside the FOV anything goes. */
static void
range_rows (int first, int last, gpointer data)
{
  Clahe *c = data;
  const ReteClaheTiles *t = &c->tiles;
  float lo = G_MAXFLOAT, hi = -G_MAXFLOAT;
  gboolean any_in = FALSE, any_bad = FALSE;
  for (int y = first; y < last; y++)
    {
      const float *g = t->grey + (gsize) y * t->width;
      const float *f = t->fov ? t->fov + (gsize) y * t->width : NULL;
      guint16 *u = t->bins + (gsize) y * t->width;
      int x = 0;
#ifdef __SSE2__
      __m128 lo4 = _mm_set1_ps (lo), hi4 = _mm_set1_ps (hi), bad4 = _mm_setzero_ps ();
      __m128 in4 = _mm_setzero_ps (), zero = _mm_setzero_ps (), half = _mm_set1_ps (0.5f);
      __m128 big = _mm_set1_ps (G_MAXFLOAT), small = _mm_set1_ps (-G_MAXFLOAT);
      __m128 one = _mm_set1_ps (1.0f), scale = _mm_set1_ps (65535.0f);
      __m128i bias = _mm_set1_epi32 (32768), flip = _mm_set1_epi16 ((short) 0x8000);
      for (; x + 4 <= t->width; x += 4)
        {
          __m128 v = _mm_loadu_ps (g + x);
          /* to 16 bits: SSE2 packs signed, so shift by 32768 around the packing */
          __m128i q = _mm_cvtps_epi32 (_mm_mul_ps (_mm_min_ps (_mm_max_ps (v, zero), one), scale));
          q = _mm_packs_epi32 (_mm_sub_epi32 (q, bias), _mm_sub_epi32 (q, bias));
          _mm_storel_epi64 ((__m128i *) (u + x), _mm_xor_si128 (q, flip));
          bad4 = _mm_or_ps (bad4, _mm_cmpneq_ps (_mm_sub_ps (v, v), zero));
          if (f != NULL)
            {
              __m128 m = _mm_loadu_ps (f + x);
              bad4 = _mm_or_ps (bad4, _mm_cmpneq_ps (_mm_sub_ps (m, m), zero));
              __m128 in = _mm_cmpgt_ps (m, half);
              in4 = _mm_or_ps (in4, in);
              lo4 = _mm_min_ps (lo4, _mm_or_ps (_mm_and_ps (in, v), _mm_andnot_ps (in, big)));
              hi4 = _mm_max_ps (hi4, _mm_or_ps (_mm_and_ps (in, v), _mm_andnot_ps (in, small)));
            }
          else
            {
              lo4 = _mm_min_ps (lo4, v);
              hi4 = _mm_max_ps (hi4, v);
            }
        }
      float l[4], h[4];
      _mm_storeu_ps (l, lo4);
      _mm_storeu_ps (h, hi4);
      for (int k = 0; k < 4; k++)
        {
          lo = MIN (lo, l[k]);
          hi = MAX (hi, h[k]);
        }
      any_bad |= _mm_movemask_ps (bad4) != 0;
      any_in |= _mm_movemask_ps (in4) != 0 || (f == NULL && x > 0);
#endif
      for (; x < t->width; x++)
        {
          float v = g[x];
          gboolean in = f == NULL || f[x] > 0.5f;
          u[x] = (guint16) lrintf (v > 0.0f ? (v < 1.0f ? v : 1.0f) * 65535.0f : 0.0f);
          any_in |= in;
          any_bad |= !(v - v == 0.0f) || (f != NULL && !(f[x] - f[x] == 0.0f));
          if (in)
            {
              lo = MIN (lo, v);
              hi = MAX (hi, v);
            }
        }
    }
  g_mutex_lock (&c->lock);
  c->g_min = MIN (c->g_min, lo);
  c->g_max = MAX (c->g_max, hi);
  c->any_inside |= any_in;
  c->any_not_finite |= any_bad;
  g_mutex_unlock (&c->lock);
}

/* Smallest and largest of v[0..n) where f > 0.5 (everywhere when f is NULL), folded into
 * *lo and *hi. */
static void
row_range (const float *v, const float *f, int n, float *lo, float *hi)
{
  int x = 0;
  float l = *lo, h = *hi;
#ifdef __SSE2__
  __m128 lo4 = _mm_set1_ps (l), hi4 = _mm_set1_ps (h), half = _mm_set1_ps (0.5f);
  for (; x + 4 <= n; x += 4)
    {
      __m128 a = _mm_loadu_ps (v + x);
      if (f != NULL)
        {
          __m128 in = _mm_cmpgt_ps (_mm_loadu_ps (f + x), half);
          lo4 = _mm_min_ps (lo4, _mm_or_ps (_mm_and_ps (in, a), _mm_andnot_ps (in, lo4)));
          hi4 = _mm_max_ps (hi4, _mm_or_ps (_mm_and_ps (in, a), _mm_andnot_ps (in, hi4)));
        }
      else
        {
          lo4 = _mm_min_ps (lo4, a);
          hi4 = _mm_max_ps (hi4, a);
        }
    }
  float ls[4], hs[4];
  _mm_storeu_ps (ls, lo4);
  _mm_storeu_ps (hs, hi4);
  for (int k = 0; k < 4; k++)
    {
      l = MIN (l, ls[k]);
      h = MAX (h, hs[k]);
    }
#endif
  for (; x < n; x++)
    if (f == NULL || f[x] > 0.5f)
      {
        l = MIN (l, v[x]);
        h = MAX (h, v[x]);
      }
  *lo = l;
  *hi = h;
}

/* Pass 2 (clahe_tiles.c): bins, histograms, mappings.
 * Pass 3: bilinear interpolation between the mappings of the four tiles around each pixel.
 * A row blends its two tile rows once (into `row_maps`); each block of columns then reads two
 * blended mappings. */
static void
interpolate_rows (int first, int last, gpointer data)
{
  Clahe *c = data;
  const ReteClaheTiles *t = &c->tiles;
  int nb = t->n_bins, kw = t->kw;
  float *row_maps = g_new (float, (gsize) t->nx * nb);
  float lo = G_MAXFLOAT, hi = -G_MAXFLOAT;
  for (int y = first; y < last; y++)
    {
      int p = y + t->kh / 2, j = p / t->kh;
      float wy = (float) ((double) (p % t->kh) / t->kh);
      const float *m0 = t->maps + (gsize) CLAMP (j - 1, 0, t->ny - 1) * t->nx * nb;
      const float *m1 = t->maps + (gsize) CLAMP (j, 0, t->ny - 1) * t->nx * nb;
      for (int k = 0; k < t->nx * nb; k++)
        row_maps[k] = m0[k] + wy * (m1[k] - m0[k]);
      gsize row = (gsize) y * t->width;
      const guint16 *b = t->bins + row;
      float *out = c->out + row;
      /* column x sits at x + kw/2 on the grid of blocks; block jx blends tiles jx-1 and jx */
      for (int jx = 0, x = 0; x < t->width; jx++)
        {
          int start = jx * kw - kw / 2, stop = MIN (start + kw, t->width);
          const float *left = row_maps + (gsize) CLAMP (jx - 1, 0, t->nx - 1) * nb;
          const float *right = row_maps + (gsize) CLAMP (jx, 0, t->nx - 1) * nb;
          const float *w = c->weight_x - start;
#ifdef __SSE2__
          for (; x + 4 <= stop; x += 4)
            {
              __m128 l = _mm_setr_ps (left[b[x]], left[b[x + 1]], left[b[x + 2]], left[b[x + 3]]);
              __m128 r = _mm_setr_ps (right[b[x]], right[b[x + 1]], right[b[x + 2]],
                                      right[b[x + 3]]);
              __m128 o = _mm_add_ps (l, _mm_mul_ps (_mm_loadu_ps (w + x), _mm_sub_ps (r, l)));
              _mm_storeu_ps (out + x, o);
            }
#endif
          for (; x < stop; x++)
            {
              float l = left[b[x]], r = right[b[x]];
              out[x] = l + w[x] * (r - l);
            }
        }
      row_range (out, t->fov ? t->fov + row : NULL, t->width, &lo, &hi);
    }
  g_free (row_maps);
  g_mutex_lock (&c->lock);
  c->v_min = MIN (c->v_min, lo);
  c->v_max = MAX (c->v_max, hi);
  g_mutex_unlock (&c->lock);
}

/* Pass 4: the result stretched to [0, 1] inside the FOV (skimage's final
 * rescale_intensity), 0 outside; a flat result is 1 (skimage clips it into [0, 1]). */
static void
stretch_rows (int first, int last, gpointer data)
{
  Clahe *c = data;
  const float *fov = c->tiles.fov;
  float lo = c->v_min, range = c->v_max - c->v_min;
  float scale = range > 0 ? 1.0f / range : 0.0f, offset = range > 0 ? 0.0f : 1.0f;
  gsize i0 = (gsize) first * c->tiles.width, i1 = (gsize) last * c->tiles.width;
  float *out = c->out;
  gsize i = i0;
#ifdef __SSE2__
  __m128 lo4 = _mm_set1_ps (lo), scale4 = _mm_set1_ps (scale), offset4 = _mm_set1_ps (offset);
  __m128 half = _mm_set1_ps (0.5f);
  for (; i + 4 <= i1; i += 4)
    {
      __m128 o = _mm_add_ps (_mm_mul_ps (_mm_sub_ps (_mm_loadu_ps (out + i), lo4), scale4),
                             offset4);
      if (fov != NULL)
        o = _mm_and_ps (o, _mm_cmpgt_ps (_mm_loadu_ps (fov + i), half));
      _mm_storeu_ps (out + i, o);
    }
#endif
  for (; i < i1; i++)
    out[i] = fov == NULL || fov[i] > 0.5f ? (out[i] - lo) * scale + offset : 0.0f;
}

/* Mirror ('reflect', edge not repeated) index of p in [0, n). */
static int
mirror (int p, int n)
{
  if (n == 1)
    return 0;
  int period = 2 * (n - 1);
  p %= period;
  if (p < 0)
    p += period;
  return p < n ? p : period - p;
}

static gboolean
check_params (const ReteImage *grey, const ReteClaheParams *params, GError **error)
{
  if (params->kernel_width < 0 || params->kernel_height < 0
      || params->kernel_width > grey->width || params->kernel_height > grey->height)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "CLAHE contextual region %d×%d does not fit the %d×%d image; give a region "
                   "of 1 pixel up to the image size, or 0 for 1/8 of the image",
                   params->kernel_width, params->kernel_height, grey->width, grey->height);
      return FALSE;
    }
  if (!(params->clip_limit > 0.0 && params->clip_limit <= 1.0))
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "CLAHE clip limit %g is outside (0, 1]; 0.01 is the usual value, "
                   "1 means no limit (plain adaptive equalisation)", params->clip_limit);
      return FALSE;
    }
  if (params->n_bins < 2 || params->n_bins > 65536)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "CLAHE histogram bins %d is outside 2..65536; 256 is the usual value",
                   params->n_bins);
      return FALSE;
    }
  return TRUE;
}

ReteImage *
rete_clahe (const ReteImage *grey, const ReteImage *fov, const ReteClaheParams *params,
            GError **error)
{
  g_return_val_if_fail (error == NULL || *error == NULL, NULL);
  ReteClaheParams defaults;
  if (params == NULL)
    {
      rete_clahe_params_init (&defaults);
      params = &defaults;
    }
  if (grey == NULL)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "CLAHE needs a grey image, got none");
      return NULL;
    }
  if (!rete_image_check_channels (grey, "the image for CLAHE", 1, error)
      || !check_params (grey, params, error))
    return NULL;
  if (fov != NULL
      && (!rete_image_check_channels (fov, "the field of view", 1, error)
          || !rete_image_check_same_size (grey, "the image", fov, "the field of view", error)))
    return NULL;

  Clahe c;
  memset (&c, 0, sizeof c);
  ReteClaheTiles *t = &c.tiles;
  t->grey = grey->data;
  t->fov = fov ? fov->data : NULL;
  t->width = grey->width;
  t->height = grey->height;
  c.g_min = c.v_min = G_MAXFLOAT;
  c.g_max = c.v_max = -G_MAXFLOAT;
  g_mutex_init (&c.lock);
  ReteImage *result = NULL;
  t->bins = g_try_new (guint16, rete_image_n_pixels (grey));
  if (t->bins == NULL)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_NO_MEMORY,
                   "not enough memory for CLAHE of a %d×%d image", grey->width, grey->height);
      goto fail;
    }
  rete_parallel_for (t->height, range_rows, &c);
  if (c.any_not_finite)
    {
      if (rete_image_check_finite (grey, "the image for CLAHE", error))
        rete_image_check_finite (fov, "the field of view", error);
      goto fail;
    }
  if (!c.any_inside)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_EMPTY,
                   "the field of view is empty (no pixel above 0.5), so CLAHE has nothing to "
                   "equalise; detect the field of view again or give none");
      goto fail;
    }
  if (c.g_min < 0.0f || c.g_max > 1.0f)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "the image for CLAHE has values from %g to %g%s, outside [0, 1]; rescale it "
                   "to [0, 1] first", c.g_min, c.g_max, fov ? " inside the field of view" : "");
      goto fail;
    }
  result = rete_image_new_like (grey, 1, error);
  if (result == NULL)
    goto fail;
  c.out = result->data;
  t->kw = params->kernel_width > 0 ? params->kernel_width : MAX (grey->width / 8, 1);
  t->kh = params->kernel_height > 0 ? params->kernel_height : MAX (grey->height / 8, 1);
  t->nx = (t->width + t->kw - 1) / t->kw;
  t->ny = (t->height + t->kh - 1) / t->kh;
  t->n_bins = params->n_bins;
  t->clip_limit = params->clip_limit;

  /* 16-bit value -> 14-bit stretched over the range seen -> bin: skimage's
   * rescale_intensity (float64), np.round, and lut //= 1 + 16384 // nbins. */
  int u_min = (int) rint (c.g_min * 65535.0f), u_max = (int) rint (c.g_max * 65535.0f);
  int bin_size = 1 + GREY_LEVELS / t->n_bins;
  guint16 *lut = g_new0 (guint16, 65536);
  double span = u_max - u_min;
  for (int u = 0; u < 65536; u++)
    {
      double q;
      if (span > 0)
        q = rint ((CLAMP (u, u_min, u_max) - u_min) / span * (GREY_LEVELS - 1.0));
      else
        q = MIN (u, GREY_LEVELS - 1);
      lut[u] = (guint16) ((int) q / bin_size);
    }
  t->lut = lut;

  int *mirror_x = g_new (int, (gsize) t->nx * t->kw);
  int *mirror_y = g_new (int, (gsize) t->ny * t->kh);
  for (int p = 0; p < t->nx * t->kw; p++)
    mirror_x[p] = mirror (p, t->width);
  for (int p = 0; p < t->ny * t->kh; p++)
    mirror_y[p] = mirror (p, t->height);
  t->mirror_x = mirror_x;
  t->mirror_y = mirror_y;
  gsize n_maps = (gsize) t->nx * t->ny * t->n_bins;
  t->hist = g_new (guint32, n_maps);
  t->count = g_new (gint64, (gsize) t->nx * t->ny);
  t->maps = g_new0 (float, n_maps);
  rete_clahe_tile_maps (t);

  float *weight_x = g_new (float, t->kw);
  for (int k = 0; k < t->kw; k++)
    weight_x[k] = (float) ((double) k / t->kw); /* np.arange (k) / k */
  c.weight_x = weight_x;
  rete_parallel_for (t->height, interpolate_rows, &c);
  rete_parallel_for (t->height, stretch_rows, &c);

  g_free (weight_x);
  g_free (t->hist);
  g_free (t->count);
  g_free (t->maps);
  g_free (mirror_x);
  g_free (mirror_y);
  g_free (lut);
  g_free (t->bins);
  g_mutex_clear (&c.lock);
  return result;

fail:
  g_free (t->bins);
  g_mutex_clear (&c.lock);
  return NULL;
}
