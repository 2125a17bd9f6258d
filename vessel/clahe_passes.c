/* clahe_passes.c — the pixel passes of CLAHE (Zuiderveld, Graphics Gems IV, 1994; the steps
 * are listed in clahe.c), each run over bands of rows by rete_parallel_for. SSE2 where the
 * compiler has it (every x86-64), with the plain loop beside it for the rest of a row and
 * for other processors; the tests run widths that are not multiples of 4, so both paths
 * are held against skimage.
 */
#include "clahe_private.h"

#include <math.h>
#include <string.h>
#ifdef __SSE2__
#include <emmintrin.h>
#endif

/* Pass 1: range of the input inside the FOV, whether the FOV has a pixel, values that are
 * not numbers (x - x is 0 for every finite x, NaN for NaN and infinities), the FOV as a
 * byte mask, and the 16-bit level of every pixel: rint (v × 65535) as skimage's img_as_uint
 * on float32 (SSE2's conversion rounds to nearest, ties to even, as np.rint), clamped to
 * [0, 1] first since outside the FOV anything goes. (The bins come in pass 2 from the
 * levels, once the range is known: reading half the bytes there, with no conversion, more
 * than pays for writing them here.) */
#ifdef __SSE2__
/* Four bytes of the FOV byte mask (0/1) as a lane mask of four floats. */
static inline __m128
mask4 (const guint8 *m)
{
  int bytes;
  memcpy (&bytes, m, 4);
  __m128i zero = _mm_setzero_si128 ();
  __m128i wide = _mm_unpacklo_epi16 (_mm_unpacklo_epi8 (_mm_cvtsi32_si128 (bytes), zero), zero);
  return _mm_castsi128_ps (_mm_cmpgt_epi32 (wide, zero));
}

/* Folds the four lanes of running minima and maxima into *lo and *hi. */
static inline void
fold_range4 (__m128 lo4, __m128 hi4, float *lo, float *hi)
{
  float l[4], h[4];
  _mm_storeu_ps (l, lo4);
  _mm_storeu_ps (h, hi4);
  for (int k = 0; k < 4; k++)
    {
      *lo = MIN (*lo, l[k]);
      *hi = MAX (*hi, h[k]);
    }
}
#endif

void
rete_clahe_range_rows (int first, int last, gpointer data)
{
  ReteClahe *c = data;
  const ReteClaheTiles *t = &c->tiles;
  float lo = G_MAXFLOAT, hi = -G_MAXFLOAT;
  gboolean any_in = FALSE, any_bad = FALSE;
  for (int y = first; y < last; y++)
    {
      const float *g = t->grey + (gsize) y * t->width;
      const float *f = t->fov ? t->fov + (gsize) y * t->width : NULL;
      guint8 *inside = t->inside ? t->inside + (gsize) y * t->width : NULL;
      guint16 *levels = t->levels + (gsize) y * t->width;
      int x = 0;
#ifdef __SSE2__
      __m128 lo4 = _mm_set1_ps (lo), hi4 = _mm_set1_ps (hi), bad4 = _mm_setzero_ps ();
      __m128 in4 = _mm_setzero_ps (), zero = _mm_setzero_ps (), half = _mm_set1_ps (0.5f);
      __m128 big = _mm_set1_ps (G_MAXFLOAT), small = _mm_set1_ps (-G_MAXFLOAT);
      __m128 one = _mm_set1_ps (1.0f), scale = _mm_set1_ps (65535.0f);
      __m128i half_range = _mm_set1_epi32 (32768), sign16 = _mm_set1_epi16 ((short) 0x8000);
      for (; x + 4 <= t->width; x += 4)
        {
          __m128 v = _mm_loadu_ps (g + x);
          /* 0..65535, shifted to the signed range for the 16-bit pack and back */
          __m128i level = _mm_cvtps_epi32 (_mm_mul_ps (_mm_min_ps (_mm_max_ps (v, zero), one),
                                                       scale));
          level = _mm_sub_epi32 (level, half_range);
          level = _mm_xor_si128 (_mm_packs_epi32 (level, level), sign16);
          _mm_storel_epi64 ((__m128i *) (levels + x), level);
          bad4 = _mm_or_ps (bad4, _mm_cmpneq_ps (_mm_sub_ps (v, v), zero));
          if (f != NULL)
            {
              __m128 m = _mm_loadu_ps (f + x);
              bad4 = _mm_or_ps (bad4, _mm_cmpneq_ps (_mm_sub_ps (m, m), zero));
              __m128 in = _mm_cmpgt_ps (m, half);
              in4 = _mm_or_ps (in4, in);
              __m128i in_i = _mm_packs_epi32 (_mm_castps_si128 (in), _mm_castps_si128 (in));
              in_i = _mm_and_si128 (_mm_packs_epi16 (in_i, in_i), _mm_set1_epi8 (1));
              int bytes = _mm_cvtsi128_si32 (in_i);
              memcpy (inside + x, &bytes, 4);
              lo4 = _mm_min_ps (lo4, _mm_or_ps (_mm_and_ps (in, v), _mm_andnot_ps (in, big)));
              hi4 = _mm_max_ps (hi4, _mm_or_ps (_mm_and_ps (in, v), _mm_andnot_ps (in, small)));
            }
          else
            {
              lo4 = _mm_min_ps (lo4, v);
              hi4 = _mm_max_ps (hi4, v);
            }
        }
      fold_range4 (lo4, hi4, &lo, &hi);
      any_bad |= _mm_movemask_ps (bad4) != 0;
      any_in |= _mm_movemask_ps (in4) != 0 || (f == NULL && x > 0);
#endif
      for (; x < t->width; x++)
        {
          float v = g[x];
          levels[x] = (guint16) lrintf ((v > 0.0f ? (v < 1.0f ? v : 1.0f) : 0.0f) * 65535.0f);
          gboolean in = f == NULL || f[x] > 0.5f;
          if (inside != NULL)
            inside[x] = (guint8) in;
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

/* Pass 2 (clahe_tiles.c): histograms, mappings.
 * Pass 3: bilinear interpolation between the mappings of the four tiles around each pixel
 * (at the bin of the pixel's 16-bit level, through the table of pass 2 again),
 * and the range of the result inside the FOV (taken on the way, so that the result is not
 * read again for it). `pairs` holds, for each row of blocks, the mappings of the tile above
 * and below side by side, so that one 8-byte load brings both; the vertical blend comes
 * first, then the horizontal one. */
static inline __attribute__ ((always_inline)) void
interpolate_rows (ReteClahe *c, int first, int last, gboolean wide)
{
  const ReteClaheTiles *t = &c->tiles;
  int nb = t->n_bins, kw = t->kw;
  const void *lut = t->lut;
  float lo = G_MAXFLOAT, hi = -G_MAXFLOAT;
#ifdef __SSE2__
  __m128 lo4 = _mm_set1_ps (lo), hi4 = _mm_set1_ps (hi);
#endif
  for (int y = first; y < last; y++)
    {
      int p = y + t->kh / 2, j = p / t->kh;
      float wy = (float) ((double) (p % t->kh) / t->kh);
      const float *block_row = c->pairs + (gsize) j * t->nx * nb * 2;
      gsize row = (gsize) y * t->width;
      const guint16 *q = t->levels + row;
#define BIN(x) rete_clahe_bin (lut, q[x], wide)
      const guint8 *f = t->inside ? t->inside + row : NULL;
      float *out = c->out + row;
      /* column x sits at x + kw/2 on the grid of blocks; block jx blends tiles jx-1 and jx */
      for (int jx = 0, x = 0; x < t->width; jx++)
        {
          int start = jx * kw - kw / 2, stop = MIN (start + kw, t->width);
          const float *left = block_row + (gsize) CLAMP (jx - 1, 0, t->nx - 1) * nb * 2;
          const float *right = block_row + (gsize) CLAMP (jx, 0, t->nx - 1) * nb * 2;
          const float *w = c->weight_x - start;
#ifdef __SSE2__
          __m128 wy4 = _mm_set1_ps (wy), zero = _mm_setzero_ps ();
          for (; x + 4 <= stop; x += 4)
            {
              /* (above, below) of the left and right tile for 4 pixels */
              int i0 = 2 * BIN (x), i1 = 2 * BIN (x + 1), i2 = 2 * BIN (x + 2),
                  i3 = 2 * BIN (x + 3);
#define PAIR(side, i) ((const __m64 *) (side + (i)))
              __m128 l01 = _mm_loadh_pi (_mm_loadl_pi (zero, PAIR (left, i0)), PAIR (left, i1));
              __m128 l23 = _mm_loadh_pi (_mm_loadl_pi (zero, PAIR (left, i2)), PAIR (left, i3));
              __m128 r01 = _mm_loadh_pi (_mm_loadl_pi (zero, PAIR (right, i0)), PAIR (right, i1));
              __m128 r23 = _mm_loadh_pi (_mm_loadl_pi (zero, PAIR (right, i2)), PAIR (right, i3));
#undef PAIR
              __m128 lt = _mm_shuffle_ps (l01, l23, _MM_SHUFFLE (2, 0, 2, 0));
              __m128 lb = _mm_shuffle_ps (l01, l23, _MM_SHUFFLE (3, 1, 3, 1));
              __m128 rt = _mm_shuffle_ps (r01, r23, _MM_SHUFFLE (2, 0, 2, 0));
              __m128 rb = _mm_shuffle_ps (r01, r23, _MM_SHUFFLE (3, 1, 3, 1));
              __m128 l = _mm_add_ps (lt, _mm_mul_ps (wy4, _mm_sub_ps (lb, lt)));
              __m128 r = _mm_add_ps (rt, _mm_mul_ps (wy4, _mm_sub_ps (rb, rt)));
              __m128 o = _mm_add_ps (l, _mm_mul_ps (_mm_loadu_ps (w + x), _mm_sub_ps (r, l)));
              _mm_storeu_ps (out + x, o);
              if (f != NULL)
                {
                  __m128 in = mask4 (f + x);
                  lo4 = _mm_min_ps (lo4, _mm_or_ps (_mm_and_ps (in, o), _mm_andnot_ps (in, lo4)));
                  hi4 = _mm_max_ps (hi4, _mm_or_ps (_mm_and_ps (in, o), _mm_andnot_ps (in, hi4)));
                }
              else
                {
                  lo4 = _mm_min_ps (lo4, o);
                  hi4 = _mm_max_ps (hi4, o);
                }
            }
#endif
          for (; x < stop; x++)
            {
              const float *lp = left + 2 * BIN (x), *rp = right + 2 * BIN (x);
              float l = lp[0] + wy * (lp[1] - lp[0]), r = rp[0] + wy * (rp[1] - rp[0]);
              float o = l + w[x] * (r - l);
              out[x] = o;
              if (f == NULL || f[x])
                {
                  lo = MIN (lo, o);
                  hi = MAX (hi, o);
                }
            }
        }
#undef BIN
    }
#ifdef __SSE2__
  fold_range4 (lo4, hi4, &lo, &hi);
#endif
  g_mutex_lock (&c->lock);
  c->v_min = MIN (c->v_min, lo);
  c->v_max = MAX (c->v_max, hi);
  g_mutex_unlock (&c->lock);
}

void
rete_clahe_interpolate_rows (int first, int last, gpointer data)
{
  ReteClahe *c = data;
  if (c->tiles.wide_bins)
    interpolate_rows (c, first, last, TRUE);
  else
    interpolate_rows (c, first, last, FALSE);
}

/* Pass 4: the result stretched to [0, 1] inside the FOV (skimage's final
 * rescale_intensity), 0 outside; a flat result is 1 (skimage clips it into [0, 1]). */
void
rete_clahe_stretch_rows (int first, int last, gpointer data)
{
  ReteClahe *c = data;
  const guint8 *fov = c->tiles.inside;
  float lo = c->v_min, range = c->v_max - c->v_min;
  float scale = range > 0 ? 1.0f / range : 0.0f, offset = range > 0 ? 0.0f : 1.0f;
  gsize i0 = (gsize) first * c->tiles.width, i1 = (gsize) last * c->tiles.width;
  float *out = c->out;
  gsize i = i0;
#ifdef __SSE2__
  __m128 lo4 = _mm_set1_ps (lo), scale4 = _mm_set1_ps (scale), offset4 = _mm_set1_ps (offset);
  for (; i + 4 <= i1; i += 4)
    {
      __m128 o = _mm_add_ps (_mm_mul_ps (_mm_sub_ps (_mm_loadu_ps (out + i), lo4), scale4),
                             offset4);
      if (fov != NULL)
        o = _mm_and_ps (o, mask4 (fov + i));
      _mm_storeu_ps (out + i, o);
    }
#endif
  for (; i < i1; i++)
    out[i] = fov == NULL || fov[i] ? (out[i] - lo) * scale + offset : 0.0f;
}
