/* fov_erode.c — erosion of a field of view by an exact Euclidean disc.
 *
 * A pixel stays inside when every pixel within Euclidean distance `radius` of it is inside,
 * that is when its squared distance to the nearest outside pixel exceeds radius².
 * The squared distances come from the separable lower-envelope-of-parabolas transform of
 * Felzenszwalb & Huttenlocher, "Distance transforms of sampled functions", Theory of
 * Computing 8:415–428, 2012 (algorithm DT(f), §2.1), exact in integer arithmetic.
 * Beyond the frame counts as inside: the frame cutting a cropped aperture is not a rim
 * (as scipy.ndimage.binary_erosion with border_value=1).
 */
#include "rete_fov.h"

#include <math.h>

#define FAR ((gint64) 1 << 50) /* "no outside pixel on this line" */

typedef struct {
  const float *mask;
  int width, height;
  gint64 *dist; /* (height, width) squared distances */
  double radius_sq;
  float *out;
} Erode;

/* One line of the transform: d[i] = min_j (f[j] + (i - j)²), f = FAR or a squared distance. */
static void
distance_1d (const gint64 *f, gint64 *d, int n, int *v, double *z)
{
  int k = 0;
  v[0] = 0;
  z[0] = -G_MAXDOUBLE;
  z[1] = G_MAXDOUBLE;
  for (int q = 1; q < n; q++)
    {
      double s;
      for (;;) /* z[0] = -infinity stops the search at k = 0 */
        {
          int p = v[k];
          s = ((double) (f[q] + (gint64) q * q) - (double) (f[p] + (gint64) p * p))
              / (2.0 * (q - p));
          if (s > z[k])
            break;
          k--;
        }
      k++;
      v[k] = q;
      z[k] = s;
      z[k + 1] = G_MAXDOUBLE;
    }
  k = 0;
  for (int q = 0; q < n; q++)
    {
      while (z[k + 1] < q)
        k++;
      gint64 dq = q - v[k];
      d[q] = f[v[k]] + dq * dq;
    }
}

/* First dimension: on a column the transform of a 0/FAR function is just the squared
 * distance to the nearest outside pixel of the column, found by one pass down and one up
 * (Felzenszwalb & Huttenlocher 2012, §2.1 remark on binary images). The passes run along
 * rows, over the band of columns [first, last), so that memory is read in order. */
static void
column_pass (int first, int last, gpointer data)
{
  Erode *e = data;
  int w = e->width, h = e->height, n = last - first;
  const gint64 none = (gint64) h + 1; /* farther than any pixel of the column */
  gint64 *run = g_new (gint64, n);
  for (int x = 0; x < n; x++)
    run[x] = none;
  for (int y = 0; y < h; y++)
    {
      const float *m = e->mask + (gsize) y * w + first;
      gint64 *d = e->dist + (gsize) y * w + first;
      for (int x = 0; x < n; x++)
        {
          run[x] = m[x] > 0.5f ? MIN (run[x] + 1, none) : 0;
          d[x] = run[x];
        }
    }
  for (int x = 0; x < n; x++)
    run[x] = none;
  for (int y = h - 1; y >= 0; y--)
    {
      gint64 *d = e->dist + (gsize) y * w + first;
      for (int x = 0; x < n; x++)
        {
          run[x] = d[x] == 0 ? 0 : MIN (run[x] + 1, none);
          gint64 g = MIN (d[x], run[x]);
          d[x] = g >= none ? FAR : g * g;
        }
    }
  g_free (run);
}

static void
row_pass (int first, int last, gpointer data)
{
  Erode *e = data;
  int w = e->width;
  gint64 *d = g_new (gint64, w);
  int *v = g_new (int, w);
  double *z = g_new (double, w + 1);
  for (int y = first; y < last; y++)
    {
      gint64 *row = e->dist + (gsize) y * w;
      distance_1d (row, d, w, v, z);
      for (int x = 0; x < w; x++)
        e->out[(gsize) y * w + x] = (double) d[x] > e->radius_sq ? 1.0f : 0.0f;
    }
  g_free (d);
  g_free (v);
  g_free (z);
}

ReteImage *
rete_fov_erode (const ReteImage *fov, double radius, GError **error)
{
  g_return_val_if_fail (error == NULL || *error == NULL, NULL);
  if (fov == NULL)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "no field of view was given to erode");
      return NULL;
    }
  if (!rete_image_check_channels (fov, "the field of view", 1, error)
      || !rete_image_check_finite (fov, "the field of view", error))
    return NULL;
  if (!(radius >= 0.0 && radius <= RETE_MAX_SIDE))
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "rim radius %g pixels is not usable; give 0 (no erosion) or a radius in "
                   "pixels such as 5", radius);
      return NULL;
    }
  ReteImage *out = rete_image_new_like (fov, 1, error);
  if (out == NULL)
    return NULL;
  Erode e = { fov->data, fov->width, fov->height, NULL, radius * radius, out->data };
  e.dist = g_try_new (gint64, rete_image_n_pixels (fov));
  if (e.dist == NULL)
    {
      rete_image_free (out);
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_NO_MEMORY,
                   "not enough memory to erode a %d×%d field of view", fov->width, fov->height);
      return NULL;
    }
  rete_parallel_for (e.width, column_pass, &e);
  rete_parallel_for (e.height, row_pass, &e);
  g_free (e.dist);
  return out;
}
