/* fractal.c — box-counting (Minkowski–Bouligand) dimension of a binary map.
 *
 * The box-counting dimension D = lim_{s→0} log N(s) / log(1/s), N(s) = number of boxes of
 * side s that hold part of the set (e.g. K. Falconer, "Fractal Geometry: Mathematical
 * Foundations and Applications", Wiley 1990, ch. 3). On a raster it is estimated, as is common
 * practice, by the least-squares slope of log N(s) against log(1/s) over a range of box
 * sizes. Here s = 2^k pixels on a grid anchored at the top-left corner, for s = 2 up to the
 * largest power of two not above a quarter of the shorter side: 1-pixel boxes only repeat the
 * pixel count, and boxes of more than a quarter of the frame are too few to count.
 *
 * N(2^k) comes from a pyramid of 2×2 OR reductions (boxes at the right and bottom edges are
 * partial), so all scales together cost about 4/3 of one pass over the map.
 *
 * Known values the tests check: a straight line 1, a filled square 2, the Sierpiński triangle
 * log 3 / log 2 ≈ 1.585, the Koch curve log 4 / log 3 ≈ 1.262.
 */
#include "measure_private.h"

#include <math.h>

#define MIN_SCALES 3

double
rete_box_counting_framed (const ReteByteMap *map, double *r2)
{
  int w = map->width, h = map->height;
  if (r2 != NULL)
    *r2 = NAN;
  int shorter = MIN (w, h), k_max = 0;
  while ((2 << k_max) <= shorter / 4)
    k_max++;
  /* k_max: largest k with 2^k <= shorter / 4 */
  if (k_max < MIN_SCALES)
    return NAN;

  /* level 1 (2×2 boxes) straight from the framed map */
  int lw = (w + 1) / 2, lh = (h + 1) / 2;
  guint8 *level = g_try_malloc ((gsize) lw * lh);
  if (level == NULL)
    return NAN;
  for (int y = 0; y < lh; y++)
    {
      const guint8 *r0 = map->pixels + rete_byte_map_index (map, 0, 2 * y);
      /* the frame row below the map is zero, so reading row 2y + 1 is safe when 2y + 1 == h */
      const guint8 *r1 = r0 + map->stride;
      guint8 *out = level + (gsize) y * lw;
      for (int x = 0; x < lw; x++)
        out[x] = ((r0[2 * x] | r0[2 * x + 1] | r1[2 * x] | r1[2 * x + 1]) & 1);
    }

  double sx = 0, sy = 0, sxx = 0, sxy = 0, syy = 0;
  int n_scales = 0;
  for (int k = 1; k <= k_max; k++)
    {
      if (k > 1)
        {
          /* reduce in place: box (x, y) of the next level from 2×2 boxes of this one */
          int nw = (lw + 1) / 2, nh = (lh + 1) / 2;
          for (int y = 0; y < nh; y++)
            for (int x = 0; x < nw; x++)
              {
                int x0 = 2 * x, y0 = 2 * y, x1 = MIN (x0 + 1, lw - 1), y1 = MIN (y0 + 1, lh - 1);
                guint8 v = level[(gsize) y0 * lw + x0] | level[(gsize) y0 * lw + x1]
                           | level[(gsize) y1 * lw + x0] | level[(gsize) y1 * lw + x1];
                level[(gsize) y * nw + x] = v; /* y * nw + x <= y0 * lw + x0: safe in place */
              }
          lw = nw;
          lh = nh;
        }
      gsize count = 0;
      for (gsize i = 0; i < (gsize) lw * lh; i++)
        count += level[i];
      if (count == 0)
        {
          g_free (level);
          return NAN;
        }
      double lx = -k * G_LN2, ly = log ((double) count); /* log(1/s), log N(s) */
      sx += lx;
      sy += ly;
      sxx += lx * lx;
      sxy += lx * ly;
      syy += ly * ly;
      n_scales++;
    }
  g_free (level);
  double n = n_scales;
  double cov = sxy - sx * sy / n, vx = sxx - sx * sx / n, vy = syy - sy * sy / n;
  double slope = cov / vx;
  if (r2 != NULL)
    *r2 = vy > 0 ? cov * cov / (vx * vy) : 1.0;
  return slope;
}

double
rete_box_counting_dimension (const guint8 *pixels, int width, int height, double *r2)
{
  if (r2 != NULL)
    *r2 = NAN;
  g_return_val_if_fail (pixels != NULL && width > 0 && height > 0, NAN);
  ReteByteMap *map = rete_byte_map_new (width, height, NULL);
  if (map == NULL)
    return NAN;
  for (int y = 0; y < height; y++)
    for (int x = 0; x < width; x++)
      map->pixels[rete_byte_map_index (map, x, y)] = pixels[(gsize) y * width + x] != 0;
  double d = rete_box_counting_framed (map, r2);
  rete_byte_map_free (map);
  return d;
}
