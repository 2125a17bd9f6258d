/* fov_shape.c — the shape part of field-of-view detection (fov.c): the largest 4-connected
 * lit region, found by scanline flood fill (Heckbert, "A seed fill algorithm", Graphics Gems I,
 * 1990), and the convex hull of a region (Andrew's monotone chain, Inf. Proc. Letters 9, 1979),
 * filled row by row.
 */
#include "fov_private.h"

#include <math.h>
#include <string.h>

/* Floods the 4-connected region of `seed` in mask (0/1 bytes), marking it in `seen`, a
 * span of a row at a time (scanline fill: one stack entry per span, not per pixel);
 * returns its size. `stack` holds up to width × height entries. */
static gsize
flood (const guint8 *mask, guint8 *seen, guint32 *stack, int width, int height, gsize seed)
{
  gsize top = 0, size = 0;
  stack[top++] = (guint32) seed;
  while (top > 0)
    {
      gsize i = stack[--top];
      if (seen[i])
        continue;
      int y = (int) (i / width), x = (int) (i % width), left = x, right = x;
      const guint8 *m = mask + (gsize) y * width;
      guint8 *s = seen + (gsize) y * width;
      while (left > 0 && m[left - 1] && !s[left - 1])
        left--;
      while (right < width - 1 && m[right + 1] && !s[right + 1])
        right++;
      memset (s + left, 1, right - left + 1);
      size += right - left + 1;
      for (int dy = -1; dy <= 1; dy += 2)
        {
          int ny = y + dy;
          if (ny < 0 || ny >= height)
            continue;
          const guint8 *nm = mask + (gsize) ny * width;
          const guint8 *ns = seen + (gsize) ny * width;
          for (int nx = left; nx <= right; nx++)
            if (nm[nx] && !ns[nx] && (nx == left || !nm[nx - 1] || ns[nx - 1]))
              stack[top++] = (guint32) ((gsize) ny * width + nx); /* first pixel of a run */
        }
    }
  return size;
}

/* Keeps the largest 4-connected region of mask (0/1 bytes); returns its size. */
gsize
rete_fov_keep_largest_region (guint8 *mask, int width, int height)
{
  gsize n = (gsize) width * height, best_size = 0, best_seed = 0;
  guint8 *seen = g_new0 (guint8, n);
  /* pushes: at most one per run start from the row above and one from below, and a row has
   * at most (width + 1) / 2 runs; indices fit 32 bits (RETE_MAX_PIXELS = 2^28) */
  guint32 *stack = g_new (guint32, n + height + 1);
  for (gsize seed = 0; seed < n; seed++)
    if (mask[seed] && !seen[seed])
      {
        gsize size = flood (mask, seen, stack, width, height, seed);
        if (size > best_size)
          {
            best_size = size;
            best_seed = seed;
          }
      }
  memset (seen, 0, n);
  if (best_size > 0)
    flood (mask, seen, stack, width, height, best_seed);
  memcpy (mask, seen, n);
  g_free (seen);
  g_free (stack);
  return best_size;
}

typedef struct {
  double x, y;
} Point;

static double
cross (Point o, Point a, Point b)
{
  return (a.x - o.x) * (b.y - o.y) - (a.y - o.y) * (b.x - o.x);
}

/* Fills `out` with the convex hull of the region in `mask`: the hull of the leftmost and
 * rightmost pixel centre of each row (Andrew's monotone chain), rasterised row by row. */
void
rete_fov_fill_convex_hull (const guint8 *mask, int width, int height, float *out)
{
  Point *points = g_new (Point, 2 * (gsize) height);
  int n_points = 0;
  for (int y = 0; y < height; y++)
    {
      const guint8 *row = mask + (gsize) y * width;
      int left = -1, right = -1;
      for (int x = 0; x < width; x++)
        if (row[x])
          {
            if (left < 0)
              left = x;
            right = x;
          }
      if (left < 0)
        continue;
      points[n_points++] = (Point) { left, y };
      points[n_points++] = (Point) { right, y };
    }
  /* Points come sorted by y then x: the monotone chain along y. */
  Point *hull = g_new (Point, 2 * (gsize) n_points + 1);
  int h = 0;
  for (int i = 0; i < n_points; i++)
    {
      while (h >= 2 && cross (hull[h - 2], hull[h - 1], points[i]) <= 0)
        h--;
      hull[h++] = points[i];
    }
  for (int i = n_points - 2, lower = h + 1; i >= 0; i--)
    {
      while (h >= lower && cross (hull[h - 2], hull[h - 1], points[i]) <= 0)
        h--;
      hull[h++] = points[i];
    }
  h = MAX (h - 1, 1); /* the last point repeats the first */
  memset (out, 0, sizeof (float) * width * height);
  for (int y = 0; y < height; y++)
    {
      double lo = G_MAXDOUBLE, hi = -G_MAXDOUBLE;
      for (int e = 0; e < h; e++)
        {
          Point a = hull[e], b = hull[(e + 1) % h];
          if ((a.y > y && b.y > y) || (a.y < y && b.y < y))
            continue;
          if (a.y == b.y)
            {
              lo = MIN (lo, MIN (a.x, b.x));
              hi = MAX (hi, MAX (a.x, b.x));
              continue;
            }
          double x = a.x + (y - a.y) * (b.x - a.x) / (b.y - a.y);
          lo = MIN (lo, x);
          hi = MAX (hi, x);
        }
      if (lo > hi)
        continue;
      int x0 = MAX (0, (int) ceil (lo - 1e-9)), x1 = MIN (width - 1, (int) floor (hi + 1e-9));
      for (int x = x0; x <= x1; x++)
        out[(gsize) y * width + x] = 1.0f;
    }
  g_free (points);
  g_free (hull);
}
