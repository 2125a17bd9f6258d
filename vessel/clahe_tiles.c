/* clahe_tiles.c — the tile part of CLAHE (Zuiderveld, Graphics Gems IV, 1994): one histogram
 * per contextual region, clipped at the clip limit with the excess redistributed
 * (Zuiderveld's ClipHistogram as skimage.exposure 0.19 formulates it: even spread, then one
 * by one along strides), and the region's mapping, its cumulative sum times 16383 / pixels,
 * truncated (skimage's map_histogram). See clahe.c for the whole method.
 */
#include "clahe_private.h"

#include <math.h>
#include <string.h>

#define MIN_FOV_FRACTION 16 /* a tile needs 1/16 of its area inside the FOV for a mapping */

/* Zuiderveld's ClipHistogram in skimage's formulation: clip, spread the excess evenly,
 * then hand out the remainder one by one along strides. */
void
rete_clahe_clip_histogram (guint32 *hist, int n, gint64 clip)
{
  gint64 n_excess = 0;
  for (int i = 0; i < n; i++)
    if (hist[i] > clip)
      {
        n_excess += hist[i] - clip;
        hist[i] = (guint32) clip;
      }
  gint64 increment = n_excess / n;
  gint64 upper = clip - increment;
  int n_under = 0;
  for (int i = 0; i < n; i++)
    {
      gint64 h = hist[i];
      if (h < upper)
        {
          h += increment;
          n_excess -= increment;
        }
      if (h >= upper && h < clip)
        {
          n_excess += h - clip;
          h = clip;
        }
      hist[i] = (guint32) h;
      n_under += h < clip;
    }
  while (n_excess > 0 && n_under > 0)
    {
      gint64 previous = n_excess;
      for (int index = 0; index < n && n_under > 0; index++)
        {
          int step = (int) MAX (1, n_under / n_excess);
          gint64 given = 0;
          for (int i = index; i < n; i += step)
            if (hist[i] < clip)
              {
                hist[i]++;
                given++;
                n_under -= hist[i] == clip;
              }
          n_excess -= given;
          if (n_excess <= 0)
            break;
        }
      if (previous == n_excess)
        break;
    }
}

/* The bin of pixel x of the row. (The bins are not stored: the interpolation takes them
 * from the table again, which costs less than a store per pixel here; measured 10-17%
 * faster in all on the bench picture.) */
#define BIN(x) rete_clahe_bin (lut, q[x], wide)

/* One image row (its 16-bit levels q, FOV mask f or NULL) into the histograms of a row of
 * tiles, in one go over the row. */
static inline __attribute__ ((always_inline)) void
histogram_row (const ReteClaheTiles *c, const guint16 *q, const guint8 *f, guint32 *row_hist,
               guint32 *more, gsize row_size, gint64 *row_count, gboolean wide)
{
  const void *lut = c->lut;
  for (int tx = 0; tx < c->nx; tx++)
    {
      guint32 *h = row_hist + (gsize) tx * c->n_bins;
      guint32 *h1 = more + (gsize) tx * c->n_bins, *h2 = h1 + row_size, *h3 = h2 + row_size;
      int x0 = tx * c->kw, x1 = x0 + c->kw;
      int n_in = 0;
      if (f == NULL && x1 <= c->width)
        {
          int x = x0;
          for (; x + 4 <= x1; x += 4)
            {
              h[BIN (x)]++;
              h1[BIN (x + 1)]++;
              h2[BIN (x + 2)]++;
              h3[BIN (x + 3)]++;
            }
          for (; x < x1; x++)
            h[BIN (x)]++;
          n_in = c->kw;
        }
      else if (x1 <= c->width)
        {
          /* without a branch: the rim is unpredictable */
          int x = x0;
          for (; x + 4 <= x1; x += 4)
            {
              int i0 = f[x], i1 = f[x + 1], i2 = f[x + 2], i3 = f[x + 3];
              h[BIN (x)] += i0;
              h1[BIN (x + 1)] += i1;
              h2[BIN (x + 2)] += i2;
              h3[BIN (x + 3)] += i3;
              n_in += i0 + i1 + i2 + i3;
            }
          for (; x < x1; x++)
            {
              int in = f[x];
              h[BIN (x)] += in;
              n_in += in;
            }
        }
      else
        {
          /* the last tile reaches past the image: the rest of the row, then the tile read
           * mirrored past the edge (spread over the four counters too: the mirrored part
           * can be most of the tile) */
          guint32 *four[4] = { h, h1, h2, h3 };
          for (int x = x0; x < c->width; x++)
            {
              int in = f == NULL || f[x];
              four[x & 3][BIN (x)] += in;
              n_in += in;
            }
          for (int p = c->width; p < x1; p++)
            {
              int x = c->mirror_x[p], in = f == NULL || f[x];
              four[p & 3][BIN (x)] += in;
              n_in += in;
            }
        }
      row_count[tx] += n_in;
    }
}

#undef BIN

/* Rows of tiles: histograms, clipping, mappings. */
static inline __attribute__ ((always_inline)) void
tile_rows (ReteClaheTiles *c, int first, int last, gboolean wide)
{
  /* Three more histograms per tile: neighbouring pixels count into different ones, so that
   * runs of equal bins (smooth regions) do not wait on one counter (measured 20-35% faster
   * on the bench picture). */
  gsize row_size = (gsize) c->nx * c->n_bins;
  guint32 *more = g_new (guint32, 3 * row_size);
  for (int ty = first; ty < last; ty++)
    {
      guint32 *row_hist = c->hist + (gsize) ty * row_size;
      memset (row_hist, 0, sizeof (guint32) * row_size);
      memset (more, 0, sizeof (guint32) * 3 * row_size);
      gint64 *row_count = c->count + (gsize) ty * c->nx;
      memset (row_count, 0, sizeof (gint64) * c->nx);
      for (int r = ty * c->kh; r < (ty + 1) * c->kh; r++)
        {
          gsize row = (gsize) c->mirror_y[r] * c->width;
          const guint8 *f = c->inside ? c->inside + row : NULL;
          histogram_row (c, c->levels + row, f, row_hist, more, row_size, row_count, wide);
        }
      for (gsize k = 0; k < row_size; k++)
        row_hist[k] += more[k] + more[k + row_size] + more[k + 2 * row_size];
      for (int tx = 0; tx < c->nx; tx++)
        {
          guint32 *h = row_hist + (gsize) tx * c->n_bins;
          float *map = c->maps + ((gsize) ty * c->nx + tx) * c->n_bins;
          gint64 n_pixels = row_count[tx];
          if (n_pixels == 0)
            continue;
          gint64 clip = (gint64) MAX (c->clip_limit * (double) n_pixels, 1.0);
          rete_clahe_clip_histogram (h, c->n_bins, clip);
          double factor = (RETE_CLAHE_GREY_LEVELS - 1.0) / (double) n_pixels;
          gint64 sum = 0;
          for (int k = 0; k < c->n_bins; k++)
            {
              sum += h[k];
              map[k] = (float) floor (MIN ((double) sum * factor, RETE_CLAHE_GREY_LEVELS - 1.0));
            }
        }
    }
  g_free (more);
}

void
rete_clahe_tile_rows (int first, int last, gpointer data)
{
  ReteClaheTiles *c = data;
  if (c->wide_bins)
    tile_rows (c, first, last, TRUE);
  else
    tile_rows (c, first, last, FALSE);
}

/* Tiles with too few FOV pixels take the mean mapping of their neighbours that have one,
 * ring after ring, until every tile has a mapping. */
void
rete_clahe_fill_missing_maps (ReteClaheTiles *c)
{
  int n_tiles = c->nx * c->ny;
  gint64 area = (gint64) c->kw * c->kh;
  gint64 need = MAX (1, area / MIN_FOV_FRACTION);
  gboolean any = FALSE;
  for (int t = 0; t < n_tiles; t++)
    any |= c->count[t] >= need;
  if (!any) /* a small FOV: every tile that saw a pixel keeps its mapping */
    need = 1;
  guint8 *valid = g_new0 (guint8, n_tiles);
  guint8 *next = g_new0 (guint8, n_tiles);
  int missing = 0;
  for (int t = 0; t < n_tiles; t++)
    {
      valid[t] = c->count[t] >= need;
      missing += !valid[t];
    }
  while (missing > 0)
    {
      memcpy (next, valid, n_tiles);
      for (int ty = 0; ty < c->ny; ty++)
        for (int tx = 0; tx < c->nx; tx++)
          {
            int t = ty * c->nx + tx;
            if (valid[t])
              continue;
            float *map = c->maps + (gsize) t * c->n_bins;
            int n = 0;
            for (int dy = -1; dy <= 1; dy++)
              for (int dx = -1; dx <= 1; dx++)
                {
                  int sy = ty + dy, sx = tx + dx;
                  if (sy < 0 || sy >= c->ny || sx < 0 || sx >= c->nx || !valid[sy * c->nx + sx])
                    continue;
                  const float *source = c->maps + ((gsize) sy * c->nx + sx) * c->n_bins;
                  if (n == 0)
                    memset (map, 0, sizeof (float) * c->n_bins);
                  for (int k = 0; k < c->n_bins; k++)
                    map[k] += source[k];
                  n++;
                }
            if (n > 0)
              {
                for (int k = 0; k < c->n_bins; k++)
                  map[k] /= n;
                next[t] = 1;
                missing--;
              }
          }
      memcpy (valid, next, n_tiles);
    }
  g_free (valid);
  g_free (next);
}
