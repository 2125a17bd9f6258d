/* distance.c — exact Euclidean distance transform of a binary map.
 *
 * P. F. Felzenszwalb and D. P. Huttenlocher, "Distance transforms of sampled functions",
 * Theory of Computing 8:415–428, 2012. The squared distance separates into 1-D transforms:
 *   D(x, y) = min_x' [ (x - x')² + G(x', y)² ],  G(x', y) = distance along column x' to the
 * nearest background pixel,
 * and each 1-D transform is the lower envelope of the parabolas (x - q)² + f(q), built in one
 * left-to-right sweep (their Algorithm 1: v[] parabola vertices, z[] boundaries, intersection
 *   s = ((f(q) + q²) - (f(v_k) + v_k²)) / (2q - 2v_k)   — their equation (4)),
 * then read off in a second sweep. Every step is O(n), so the transform is linear in pixels.
 *
 * For a binary map the column transform G is the plain two-scan count of steps to the nearest
 * background pixel in the column (infinite where the column has none), run along rows so that
 * memory is read in order. Pixels outside the frame are not background, as in
 * scipy.ndimage.distance_transform_edt, which the reference test compares against.
 * Rows (second pass) and column bands (first pass) are independent jobs for rete_parallel_for.
 */
#include "measure_private.h"

#include <math.h>

typedef struct {
  const ReteByteMap *map;
  float *distance;
} Job;

/* First pass, columns first..last-1: G along each column, run row by row. */
static void
columns_range (int first, int last, gpointer data)
{
  const Job *job = data;
  const ReteByteMap *map = job->map;
  int w = map->width, h = map->height;
  float *d = job->distance;
  for (int y = 0; y < h; y++)
    {
      const guint8 *row = map->pixels + rete_byte_map_index (map, 0, y);
      float *out = d + (gsize) y * w;
      const float *above = y > 0 ? out - w : out;
      for (int x = first; x < last; x++)
        out[x] = !(row[x] & 1) ? 0.0f : y == 0 ? INFINITY : above[x] + 1.0f;
    }
  for (int y = h - 2; y >= 0; y--)
    {
      float *out = d + (gsize) y * w;
      const float *below = out + w;
      for (int x = first; x < last; x++)
        out[x] = MIN (out[x], below[x] + 1.0f);
    }
}

/* Second pass, rows first..last-1: the lower envelope of parabolas along each row. */
static void
rows_range (int first, int last, gpointer data)
{
  const Job *job = data;
  int w = job->map->width;
  int *v = g_new (int, w);
  double *z = g_new (double, w + 1);
  double *f = g_new (double, w);
  for (int y = first; y < last; y++)
    {
      float *row = job->distance + (gsize) y * w;
      int first_set = 0;
      while (first_set < w && row[first_set] == 0.0f)
        first_set++;
      if (first_set == w)
        continue; /* all background: distances 0 already */
      int k = -1;
      for (int q = 0; q < w; q++)
        {
          if (isinf (row[q]))
            {
              f[q] = INFINITY;
              continue;
            }
          f[q] = (double) row[q] * row[q];
          if (k < 0)
            {
              k = 0;
              v[0] = q;
              z[0] = -INFINITY;
              z[1] = INFINITY;
              continue;
            }
          /* z[0] = -inf, so the loop stops at k = 0 at the latest */
          int p = v[k];
          double s = ((f[q] + (double) q * q) - (f[p] + (double) p * p)) / (2.0 * q - 2.0 * p);
          while (s <= z[k])
            {
              k--;
              p = v[k];
              s = ((f[q] + (double) q * q) - (f[p] + (double) p * p)) / (2.0 * q - 2.0 * p);
            }
          k++;
          v[k] = q;
          z[k] = s;
          z[k + 1] = INFINITY;
        }
      if (k < 0)
        continue; /* no background in any column crossing this row: all infinite */
      k = 0;
      for (int q = first_set; q < w; q++)
        {
          if (f[q] == 0.0)
            continue; /* background: 0 */
          while (z[k + 1] < q)
            k++;
          double dq = q - v[k];
          row[q] = (float) sqrt (dq * dq + f[v[k]]);
        }
    }
  g_free (v);
  g_free (z);
  g_free (f);
}

void
rete_distance_framed (const ReteByteMap *map, float *distance)
{
  Job job = { map, distance };
  rete_parallel_for (map->width, columns_range, &job);
  rete_parallel_for (map->height, rows_range, &job);
}

void
rete_distance_transform (const guint8 *pixels, int width, int height, float *distance)
{
  g_return_if_fail (pixels != NULL && distance != NULL && width > 0 && height > 0);
  ReteByteMap *map = rete_byte_map_new (width, height, NULL);
  if (map == NULL)
    return;
  for (int y = 0; y < height; y++)
    for (int x = 0; x < width; x++)
      map->pixels[rete_byte_map_index (map, x, y)] = pixels[(gsize) y * width + x] != 0;
  rete_distance_framed (map, distance);
  rete_byte_map_free (map);
}

ReteImage *
rete_distance_transform_image (const ReteImage *binary, GError **error)
{
  g_return_val_if_fail (binary != NULL, NULL);
  if (!rete_image_check_channels (binary, "map", 1, error)
      || !rete_image_check_finite (binary, "map", error))
    return NULL;
  int w = binary->width, h = binary->height;
  g_autoptr (ReteByteMap) map = rete_byte_map_new (w, h, error);
  if (map == NULL)
    return NULL;
  ReteImage *out = rete_image_new (w, h, 1, error);
  if (out == NULL)
    return NULL;
  for (int y = 0; y < h; y++)
    for (int x = 0; x < w; x++)
      map->pixels[rete_byte_map_index (map, x, y)] = rete_image_get (binary, 0, x, y) >= 0.5f;
  rete_distance_framed (map, out->data);
  return out;
}
