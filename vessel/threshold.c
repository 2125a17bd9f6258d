/* threshold.c — choosing the level that turns a vessel map into a binary map
 * (rete_binary.h): Otsu's threshold and the level for a target vessel fraction.
 *
 * Otsu, "A threshold selection method from gray-level histograms", IEEE Trans. SMC 9 (1979):
 * the level k that maximises the between-class variance
 *   sigma_B^2(k) = w1(k) w2(k) (mu1(k) - mu2(k))^2            (Otsu's eq. 18, unnormalised)
 * over a 256-bin histogram. We bin exactly as skimage.filters.threshold_otsu (skimage 0.19)
 * does through numpy.histogram: 256 equal bins over [min, max], float32 edges, the last bin
 * closed, and the threshold returned is the centre of bin k.
 */
#include "rete_binary.h"

#include <math.h>
#include <string.h>

#define N_BINS 256

static gboolean
check_map (const ReteImage *map, const ReteImage *mask, GError **error)
{
  if (!rete_image_check_channels (map, "vessel map", 1, error))
    return FALSE;
  if (mask != NULL
      && (!rete_image_check_channels (mask, "field-of-view mask", 1, error)
          || !rete_image_check_same_size (mask, "field-of-view mask", map, "vessel map", error)))
    return FALSE;
  return TRUE;
}

/* The values inside the mask, or NULL with an error (empty mask, non-finite value). */
static float *
values_inside (const ReteImage *map, const ReteImage *mask, gsize *n_out, GError **error)
{
  gsize n = rete_image_n_pixels (map), k = 0;
  float *v = g_try_new (float, MAX (n, 1));
  if (v == NULL)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_NO_MEMORY,
                   "not enough memory to threshold a %d×%d map", map->width, map->height);
      return NULL;
    }
  for (gsize i = 0; i < n; i++)
    {
      if (mask != NULL && !(mask->data[i] >= 0.5f))
        continue;
      if (!isfinite (map->data[i]))
        {
          g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_NOT_FINITE,
                       "vessel map holds a value that is not a finite number at pixel (%d, %d)"
                       "; recompute the map", (int) (i % map->width), (int) (i / map->width));
          g_free (v);
          return NULL;
        }
      v[k++] = map->data[i] + 0.0f;
    }
  if (k == 0)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_EMPTY,
                   "the field-of-view mask marks no pixel (no value is 0.5 or more); there is "
                   "nothing to threshold");
      g_free (v);
      return NULL;
    }
  *n_out = k;
  return v;
}

double
rete_threshold_otsu (const ReteImage *map, const ReteImage *mask, GError **error)
{
  gsize n;
  if (!check_map (map, mask, error))
    return NAN;
  g_autofree float *v = values_inside (map, mask, &n, error);
  if (v == NULL)
    return NAN;
  float lo = v[0], hi = v[0];
  for (gsize i = 1; i < n; i++)
    {
      lo = MIN (lo, v[i]);
      hi = MAX (hi, v[i]);
    }
  if (lo == hi)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_UNDEFINED,
                   "every value of the vessel map inside the field of view is %g, so Otsu's "
                   "threshold is undefined; use a fixed threshold instead", lo);
      return NAN;
    }
  /* edges as numpy.linspace(lo, hi, 257) computed in double, stored as float32 */
  float edge[N_BINS + 1];
  double step = ((double) hi - (double) lo) / N_BINS;
  for (int b = 0; b < N_BINS; b++)
    edge[b] = (float) ((double) b * step + (double) lo);
  edge[N_BINS] = hi;
  guint64 count[N_BINS] = { 0 };
  double scale = N_BINS / ((double) hi - (double) lo);
  for (gsize i = 0; i < n; i++)
    {
      int b = (int) (((double) v[i] - (double) lo) * scale);
      b = CLAMP (b, 0, N_BINS - 1);
      /* the bin is decided by the float32 edges: [edge[b], edge[b + 1]), last bin closed */
      while (b > 0 && v[i] < edge[b])
        b--;
      while (b < N_BINS - 1 && v[i] >= edge[b + 1])
        b++;
      count[b]++;
    }
  /* as skimage: cumulative sums from both ends, in this order, in double */
  double centre[N_BINS], weighted[N_BINS], mean1[N_BINS], mean2[N_BINS];
  guint64 w1[N_BINS], w2[N_BINS];
  for (int b = 0; b < N_BINS; b++)
    {
      centre[b] = (float) (edge[b] + edge[b + 1]) / 2.0f;
      weighted[b] = (double) count[b] * centre[b];
    }
  double sum = 0.0;
  guint64 w = 0;
  for (int b = 0; b < N_BINS; b++)
    {
      w += count[b];
      sum += weighted[b];
      w1[b] = w;
      mean1[b] = sum / (double) w;
    }
  sum = 0.0;
  w = 0;
  for (int b = N_BINS - 1; b >= 0; b--)
    {
      w += count[b];
      sum += weighted[b];
      w2[b] = w;
      mean2[b] = sum / (double) w;
    }
  int best = 0;
  double best_variance = -1.0;
  for (int b = 0; b < N_BINS - 1; b++)
    {
      double d = mean1[b] - mean2[b + 1];
      double variance = (double) (w1[b] * w2[b + 1]) * (d * d);
      if (variance > best_variance) /* first maximum, as numpy.argmax */
        {
          best_variance = variance;
          best = b;
        }
    }
  return centre[best];
}

/* k-th smallest (0-based) of v[0..n) by quickselect with a three-way partition, so long runs
 * of equal values (common in maps) cost O(n) (Hoare, CACM 4, 1961, "FIND"). */
static float
select_kth (float *v, gsize n, gsize k)
{
  gsize lo = 0, hi = n; /* [lo, hi) holds the answer */
  guint32 seed = 0x9e3779b9u;
  while (hi - lo > 1)
    {
      seed = seed * 1664525u + 1013904223u;
      float pivot = v[lo + seed % (hi - lo)];
      gsize lt = lo, i = lo, gt = hi;
      while (i < gt)
        {
          if (v[i] < pivot)
            {
              float t = v[i]; v[i] = v[lt]; v[lt] = t;
              lt++, i++;
            }
          else if (v[i] > pivot)
            {
              gt--;
              float t = v[i]; v[i] = v[gt]; v[gt] = t;
            }
          else
            i++;
        }
      if (k < lt)
        hi = lt;
      else if (k >= gt)
        lo = gt;
      else
        return pivot;
    }
  return v[lo];
}

double
rete_threshold_for_fraction (const ReteImage *map, const ReteImage *mask, double fraction,
                             GError **error)
{
  if (!(fraction > 0.0 && fraction < 1.0))
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "the vessel fraction must lie between 0 and 1 (such as 0.12 for 12%%), "
                   "not %g", fraction);
      return NAN;
    }
  gsize n;
  if (!check_map (map, mask, error))
    return NAN;
  g_autofree float *v = values_inside (map, mask, &n, error);
  if (v == NULL)
    return NAN;
  gsize m = (gsize) floor (fraction * (double) n); /* at most m values may be >= t */
  float top = v[0];
  for (gsize i = 1; i < n; i++)
    top = MAX (top, v[i]);
  if (m == 0)
    return nextafterf (top, INFINITY); /* nothing may be marked: just above the highest */
  /* the m-th largest value; if ties push the count of values >= it above m, the level is
   * the next larger distinct value (fewer than m values lie above the m-th largest) */
  float t = select_kth (v, n, n - m);
  gsize at_or_above = 0;
  float next = INFINITY;
  for (gsize i = 0; i < n; i++)
    {
      if (v[i] >= t)
        at_or_above++;
      if (v[i] > t && v[i] < next)
        next = v[i];
    }
  if (at_or_above <= m)
    return t;
  return isfinite (next) ? next : nextafterf (t, INFINITY);
}
