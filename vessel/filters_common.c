/* filters_common.c — input checks, the fill outside the field of view, and the final
 * scaling of a filter response into a vessel map, shared by the classical vessel filters.
 *
 * The fill outside the FOV: a fundus photograph is black outside its circular field of view,
 * and every line or ridge detector answers strongly to the rim of that disc. Replacing the
 * surround with a smooth continuation of the fundus before filtering is common practice
 * (Soares et al., IEEE TMI 2006, grow the FOV iteratively; we use a normalised convolution,
 * Knutsson & Westin, CVPR 1993, which gives the local mean of the fundus near the rim; the
 * smoothing is two box means, a tent of the given standard deviation, O(1) per pixel).
 */
#include "filters_private.h"

#include <math.h>
#include <string.h>

gboolean
rete_filters_check_input (const ReteImage *grey, const ReteImage *fov, const char *method,
                          GError **error)
{
  if (grey == NULL || grey->data == NULL)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "%s: no image was given", method);
      return FALSE;
    }
  if (grey->channels != 1)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "%s reads one grey channel but the image has %d channels; take one "
                   "channel first (the green channel shows vessels best)", method,
                   grey->channels);
      return FALSE;
    }
  if (!rete_image_check_finite (grey, "the grey image", error))
    return FALSE;
  if (fov == NULL)
    return TRUE;
  if (!rete_image_check_channels (fov, "the field of view", 1, error)
      || !rete_image_check_same_size (fov, "the field of view", grey, "the grey image", error)
      || !rete_image_check_finite (fov, "the field of view", error))
    return FALSE;
  gsize n = rete_image_n_pixels (fov);
  for (gsize i = 0; i < n; i++)
    if (fov->data[i] >= 0.5f)
      return TRUE;
  g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_EMPTY,
               "%s: the field of view is empty (no pixel is at 0.5 or above); give a mask "
               "that is 1 inside the fundus, or none to use the whole image", method);
  return FALSE;
}

/* Two passes of a box mean of width `size`: a tent-shaped smoothing, O(1) per pixel. */
static ReteImage *
smooth_twice (const ReteImage *image, int size, GError **error)
{
  ReteImage *once = rete_box_mean (image, size, error);
  if (once == NULL)
    return NULL;
  ReteImage *twice = rete_box_mean (once, size, error);
  rete_image_free (once);
  return twice;
}

ReteImage *
rete_filters_fill_outside_fov (const ReteImage *grey, const ReteImage *fov, double sigma,
                               GError **error)
{
  ReteImage *out = rete_image_copy (grey, error);
  if (out == NULL || fov == NULL)
    return out;
  gsize n = rete_image_n_pixels (grey), n_inside = 0;
  double sum = 0;
  for (gsize i = 0; i < n; i++)
    if (fov->data[i] >= 0.5f)
      {
        sum += grey->data[i];
        n_inside++;
      }
  if (n_inside == n)
    return out;
  g_autoptr (ReteImage) value = rete_image_new_like (grey, 1, error);
  g_autoptr (ReteImage) weight = value ? rete_image_new_like (grey, 1, error) : NULL;
  if (weight == NULL)
    {
      rete_image_free (out);
      return NULL;
    }
  for (gsize i = 0; i < n; i++)
    if (fov->data[i] >= 0.5f)
      {
        value->data[i] = grey->data[i];
        weight->data[i] = 1;
      }
  /* two box passes of width s have variance (s^2 - 1) / 6: s = sqrt (6 sigma^2 + 1) */
  int size = 2 * (int) (0.5 * sqrt (6 * sigma * sigma + 1)) + 1;
  g_autoptr (ReteImage) bv = smooth_twice (value, size, error);
  g_autoptr (ReteImage) bw = bv ? smooth_twice (weight, size, error) : NULL;
  if (bw == NULL)
    {
      rete_image_free (out);
      return NULL;
    }
  float mean = (float) (sum / n_inside);
  for (gsize i = 0; i < n; i++)
    if (fov->data[i] < 0.5f)
      {
        /* Blend towards the FOV's mean where few fundus pixels are near, so that the
         * continuation stays smooth instead of amplifying the last few pixels of the rim. */
        float w = bw->data[i], local = w > 1e-6f ? bv->data[i] / w : mean;
        float a = MIN (w / 0.05f, 1.0f);
        out->data[i] = a * local + (1 - a) * mean;
      }
  return out;
}

void
rete_filters_finish_map (ReteImage *response, const ReteImage *fov, double low)
{
  gsize n = rete_image_n_pixels (response);
  float *v = response->data;
  float lo = INFINITY, hi = -INFINITY;
  for (gsize i = 0; i < n; i++)
    if (fov == NULL || fov->data[i] >= 0.5f)
      {
        lo = MIN (lo, v[i]);
        hi = MAX (hi, v[i]);
      }
  if (!isnan (low))
    lo = (float) low;
  float range = hi - lo;
  for (gsize i = 0; i < n; i++)
    if ((fov != NULL && fov->data[i] < 0.5f) || !(range > 0))
      v[i] = 0;
    else
      v[i] = CLAMP ((v[i] - lo) / range, 0.0f, 1.0f); /* division: the maximum maps to 1 exactly */
}

/* ---- W x W mean with 'reflect' borders, by running sums (O(1) per pixel per pass) ---- */

typedef struct {
  const float *in;
  float *out;
  int width, height, radius;
} Box;

static void
box_rows (int first, int last, gpointer data)
{
  const Box *b = data;
  int w = b->width, r = b->radius;
  double inv = 1.0 / (2 * r + 1);
  for (int y = first; y < last; y++)
    {
      const float *src = b->in + (gsize) y * w;
      float *dst = b->out + (gsize) y * w;
      double sum = 0;
      for (int t = -r; t <= r; t++)
        sum += src[rete_reflect_index (t, w)];
      for (int x = 0; x < w; x++)
        {
          dst[x] = (float) (sum * inv);
          sum += src[rete_reflect_index (x + r + 1, w)] - src[rete_reflect_index (x - r, w)];
        }
    }
}

#define BOX_BLOCK 256

static void
box_columns (int first, int last, gpointer data)
{
  const Box *b = data;
  int w = b->width, h = b->height, r = b->radius;
  double inv = 1.0 / (2 * r + 1), sum[BOX_BLOCK];
  for (int block = first; block < last; block++)
    {
      int x0 = block * BOX_BLOCK, n = MIN (BOX_BLOCK, w - x0);
      for (int x = 0; x < n; x++)
        sum[x] = 0;
      for (int t = -r; t <= r; t++)
        {
          const float *row = b->in + (gsize) rete_reflect_index (t, h) * w + x0;
          for (int x = 0; x < n; x++)
            sum[x] += row[x];
        }
      for (int y = 0; y < h; y++)
        {
          float *dst = b->out + (gsize) y * w + x0;
          const float *add = b->in + (gsize) rete_reflect_index (y + r + 1, h) * w + x0;
          const float *sub = b->in + (gsize) rete_reflect_index (y - r, h) * w + x0;
          for (int x = 0; x < n; x++)
            {
              dst[x] = (float) (sum[x] * inv);
              sum[x] += add[x] - sub[x];
            }
        }
    }
}

ReteImage *
rete_box_mean (const ReteImage *image, int size, GError **error)
{
  if (size < 1 || size % 2 == 0)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "mean filter: the window side must be odd and at least 1, not %d", size);
      return NULL;
    }
  ReteImage *tmp = rete_image_new_like (image, 1, error);
  ReteImage *out = tmp ? rete_image_new_like (image, 1, error) : NULL;
  if (out == NULL)
    {
      rete_image_free (tmp);
      return NULL;
    }
  Box b = { image->data, tmp->data, image->width, image->height, size / 2 };
  rete_parallel_for (image->height, box_rows, &b);
  Box c = { tmp->data, out->data, image->width, image->height, size / 2 };
  rete_parallel_for ((image->width + BOX_BLOCK - 1) / BOX_BLOCK, box_columns, &c);
  rete_image_free (tmp);
  return out;
}
