/* line.c — the multiscale line detector of Nguyen et al., "An effective retinal blood vessel
 * segmentation method using multi-scale line detection", Pattern Recognition 46(3), 2013.
 *
 * On the inverted grey image I (vessels bright), for each pixel (Nguyen 2013, eq. 1-5):
 *   R_l = max over n orientations of (mean of I along a line of l pixels through the pixel)
 *         - (mean of I over the W x W window), for l = 1, 1 + step, ..., <= W;
 *   each R_l is standardised to zero mean and unit deviation inside the FOV, as is I itself;
 *   R = (sum_l R_l + I) / (n_l + 1).
 * A line of length l at angle theta holds the l pixels of the digital line through the centre
 * of an l x l square (offset t = -(l-1)/2..(l-1)/2 along the dominant axis, the other
 * coordinate round (t tan theta)), so that lines of every angle have l pixels and the line of
 * length l + 2 is the line of length l plus its two end pixels; the line sums are therefore
 * running sums, O(W) per pixel and orientation for all lengths at once.
 *
 * Halo: (W - 1) / 2 pixels; borders read as scipy.ndimage's 'reflect'.
 * Two passes over the rows (rete_parallel_for): the first gathers each R_l's mean and
 * deviation inside the FOV, the second recomputes R_l and combines, which keeps the memory
 * at a few rows per thread instead of n_l full images.
 */
#include "filters_private.h"

#include <math.h>
#include <string.h>

#define MAX_LENGTHS 64

void
rete_line_params_init (ReteLineParams *params)
{
  params->window = 41; /* tuned on CHASE_DB1 (999x960): tests/CHASE-CLASSICAL.md; Nguyen 2013
                          used 15 at DRIVE's 565 px */
  params->step = 4;
  params->n_orientations = 12;
}

static gboolean
line_check (const ReteLineParams *p, GError **error)
{
  const char *what = NULL;
  if (p == NULL)
    what = "no parameters were given; start from rete_line_params_init ()";
  else if (p->window < 3 || p->window % 2 == 0 || p->window > 127)
    what = "the window W must be odd, between 3 and 127 pixels (41 suits 1000-pixel "
           "photographs; Nguyen 2013 used 15 at 565 pixels)";
  else if (p->step < 2 || p->step % 2 != 0 || p->step >= p->window)
    what = "the step between line lengths must be even, at least 2 and below W (2 as in "
           "Nguyen 2013) so that every line has a centre pixel";
  else if (p->n_orientations < 1 || p->n_orientations > 180)
    what = "the number of orientations must be between 1 and 180 (12 as in Nguyen 2013)";
  if (what == NULL)
    return TRUE;
  if (p == NULL)
    g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT, "line detector: %s", what);
  else
    g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                 "line detector: %s (W %d, step %d, %d orientations)", what, p->window,
                 p->step, p->n_orientations);
  return FALSE;
}

typedef struct {
  int width, height, half, stride, n_k, n_lengths;
  int length[MAX_LENGTHS];
  const float *padded;   /* (height + 2 half, stride), inverted grey, reflect-padded */
  const float *window;   /* (height, width) W x W mean of the inverted grey */
  const float *fov;      /* (height, width) or NULL */
  int *offset;           /* (n_k, half) offset in the padded image of the line pixel t = 1..half */
  double *row_stats;     /* pass 1: (height, n_lengths, 2) sum and sum of squares in the FOV */
  const double *mean, *inv_sd; /* pass 2: (n_lengths + 1) standardisation; the last is I */
  float *out;            /* pass 2: (height, width) R */
} Line;

/* R_l of row y into r (n_lengths rows of width floats). */
RETE_VECTOR_CLONES static void
line_responses (const Line *l, int y, float *sum, float *r)
{
  int w = l->width;
  const float *p = l->padded + (gsize) (y + l->half) * l->stride + l->half;
  const float *window = l->window + (gsize) y * w;
  for (int i = 0; i < l->n_lengths; i++)
    for (int x = 0; x < w; x++)
      r[(gsize) i * w + x] = -INFINITY;
  for (int k = 0; k < l->n_k; k++)
    {
      const int *offset = l->offset + (gsize) k * l->half;
      memcpy (sum, p, w * sizeof (float));
      int next = 0; /* index of the next length to record */
      for (int t = 0; t <= l->half && next < l->n_lengths; t++)
        {
          if (t > 0)
            {
              const float *a = p + offset[t - 1], *b = p - offset[t - 1];
              for (int x = 0; x < w; x++)
                sum[x] += a[x] + b[x];
            }
          if (2 * t + 1 == l->length[next])
            {
              float inv = 1.0f / l->length[next];
              float *ri = r + (gsize) next * w;
              for (int x = 0; x < w; x++)
                ri[x] = MAX (ri[x], sum[x] * inv);
              next++;
            }
        }
    }
  for (int i = 0; i < l->n_lengths; i++)
    for (int x = 0; x < w; x++)
      r[(gsize) i * w + x] -= window[x];
}

static void
stats_rows (int first, int last, gpointer data)
{
  Line *l = data;
  int w = l->width;
  float *sum = g_new (float, (gsize) w * (l->n_lengths + 1)), *r = sum + w;
  for (int y = first; y < last; y++)
    {
      line_responses (l, y, sum, r);
      const float *fov = l->fov ? l->fov + (gsize) y * w : NULL;
      for (int i = 0; i < l->n_lengths; i++)
        {
          double s = 0, s2 = 0;
          for (int x = 0; x < w; x++)
            if (fov == NULL || fov[x] >= 0.5f)
              {
                double v = r[(gsize) i * w + x];
                s += v;
                s2 += v * v;
              }
          l->row_stats[((gsize) y * l->n_lengths + i) * 2] = s;
          l->row_stats[((gsize) y * l->n_lengths + i) * 2 + 1] = s2;
        }
    }
  g_free (sum);
}

static void
combine_rows (int first, int last, gpointer data)
{
  Line *l = data;
  int w = l->width, n = l->n_lengths;
  float *sum = g_new (float, (gsize) w * (n + 1)), *r = sum + w;
  float scale = 1.0f / (n + 1);
  for (int y = first; y < last; y++)
    {
      line_responses (l, y, sum, r);
      const float *p = l->padded + (gsize) (y + l->half) * l->stride + l->half;
      float *out = l->out + (gsize) y * w;
      for (int x = 0; x < w; x++)
        out[x] = (float) ((p[x] - l->mean[n]) * l->inv_sd[n]);
      for (int i = 0; i < n; i++)
        {
          float m = (float) l->mean[i], s = (float) l->inv_sd[i];
          for (int x = 0; x < w; x++)
            out[x] += (r[(gsize) i * w + x] - m) * s;
        }
      for (int x = 0; x < w; x++)
        out[x] *= scale;
    }
  g_free (sum);
}

ReteImage *
rete_vessel_line (const ReteImage *grey, const ReteImage *fov, const ReteLineParams *params,
                  GError **error)
{
  ReteLineParams defaults;
  if (params == NULL)
    {
      rete_line_params_init (&defaults);
      params = &defaults;
    }
  if (!rete_filters_check_input (grey, fov, "line detector", error) || !line_check (params, error))
    return NULL;
  int w = grey->width, h = grey->height, half = params->window / 2;
  ReteImage *inverted = rete_filters_fill_outside_fov (grey, fov, MAX (10.0, 2.0 * half), error);
  if (inverted == NULL)
    return NULL;
  gsize n = rete_image_n_pixels (grey);
  for (gsize i = 0; i < n; i++)
    inverted->data[i] = 1 - inverted->data[i];
  ReteImage *window = rete_box_mean (inverted, params->window, error);
  ReteImage *out = window ? rete_image_new_like (grey, 1, error) : NULL;
  int stride = w + 2 * half;
  float *padded = out ? g_try_malloc ((gsize) stride * (h + 2 * half) * sizeof (float)) : NULL;
  if (padded == NULL)
    {
      if (out != NULL)
        g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_NO_MEMORY,
                     "line detector: not enough memory for a %d×%d working image", w, h);
      rete_image_free (inverted);
      rete_image_free (window);
      rete_image_free (out);
      return NULL;
    }
  for (int y = 0; y < h + 2 * half; y++)
    {
      const float *src = inverted->data + (gsize) rete_reflect_index (y - half, h) * w;
      for (int x = 0; x < stride; x++)
        padded[(gsize) y * stride + x] = src[rete_reflect_index (x - half, w)];
    }

  Line l = { .width = w, .height = h, .half = half, .stride = stride,
             .n_k = params->n_orientations, .padded = padded, .window = window->data,
             .fov = fov ? fov->data : NULL, .out = out->data };
  for (int len = 1; len <= params->window && l.n_lengths < MAX_LENGTHS; len += params->step)
    l.length[l.n_lengths++] = len;
  l.offset = g_new (int, (gsize) l.n_k * MAX (half, 1));
  for (int k = 0; k < l.n_k; k++)
    {
      double theta = G_PI * k / l.n_k, co = cos (theta), si = sin (theta);
      for (int t = 1; t <= half; t++)
        {
          int dx, dy;
          if (fabs (co) >= fabs (si))
            dx = co > 0 ? t : -t, dy = (int) lround (dx * si / co);
          else
            dy = t, dx = (int) lround (t * co / si);
          l.offset[(gsize) k * half + t - 1] = dy * stride + dx;
        }
    }

  /* pass 1: mean and deviation of each R_l, and of I, inside the FOV */
  l.row_stats = g_new0 (double, (gsize) h * l.n_lengths * 2);
  rete_parallel_for (h, stats_rows, &l);
  double mean[MAX_LENGTHS + 1], inv_sd[MAX_LENGTHS + 1], count = 0, s = 0, s2 = 0;
  for (gsize i = 0; i < n; i++)
    if (fov == NULL || fov->data[i] >= 0.5f)
      {
        double v = inverted->data[i];
        s += v;
        s2 += v * v;
        count++;
      }
  mean[l.n_lengths] = s / count;
  double var = s2 / count - mean[l.n_lengths] * mean[l.n_lengths];
  inv_sd[l.n_lengths] = var > 1e-20 ? 1 / sqrt (var) : 0;
  for (int i = 0; i < l.n_lengths; i++)
    {
      s = s2 = 0;
      for (int y = 0; y < h; y++)
        {
          s += l.row_stats[((gsize) y * l.n_lengths + i) * 2];
          s2 += l.row_stats[((gsize) y * l.n_lengths + i) * 2 + 1];
        }
      mean[i] = s / count;
      var = s2 / count - mean[i] * mean[i];
      inv_sd[i] = var > 1e-20 ? 1 / sqrt (var) : 0;
    }
  l.mean = mean;
  l.inv_sd = inv_sd;
  /* pass 2: the combined response */
  rete_parallel_for (h, combine_rows, &l);

  g_free (l.row_stats);
  g_free (l.offset);
  g_free (padded);
  rete_image_free (window);
  rete_image_free (inverted);
  rete_filters_finish_map (out, fov, NAN);
  return out;
}
