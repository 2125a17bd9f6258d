/* fov.c — the field of view (FOV) of a colour fundus photograph: the lit aperture.
 *
 * Method (ours, built from standard parts):
 *   1. brightness = the largest of R, G, B (the fundus is lit in red even where it is dark
 *      in green and blue), smoothed by a box mean of about 1/200 of the shorter side so that
 *      JPEG noise and ringing in the surround fall below the level;
 *   2. level: Otsu's threshold (Otsu, IEEE SMC 1979) on a 1024-bin histogram splits surround
 *      from fundus; with b = median of the dark class and f = median of the lit class, the
 *      level is b + 0.1 (f - b), low enough to keep the vignetted rim (the 10% is ours,
 *      checked on CHASE_DB1 and synthetic cases in tests/test_fov.c); a dark class that is
 *      not dark (b > f / 4) means there is no surround: the whole frame is the FOV;
 *   3. a pixel is lit when both its smoothed and its own brightness pass the level (the
 *      smoothing alone would widen the aperture by its radius);
 *   4. the largest 4-connected lit region, then its convex hull (the aperture is
 *      a circle, or a circle cut by the frame, both convex): one region, no holes, and dark
 *      lesions or a dark rim touching the border cannot bite into it.
 * Erosion by an exact Euclidean disc uses the squared Euclidean distance transform of
 * Felzenszwalb & Huttenlocher ("Distance transforms of sampled functions", Theory of
 * Computing 8, 2012), computed in fov_erode.c; the region and hull of step 4 are in
 * fov_shape.c.
 */
#include "rete_fov.h"
#include "fov_private.h"

#include <math.h>
#include <string.h>

#define N_LEVELS 1024
#define FOREGROUND_FRACTION 0.1 /* level = dark + 0.1 (lit - dark) */
#define NO_SURROUND_RATIO 0.25  /* dark class brighter than 1/4 of the lit class: no surround */
#define MIN_LIT 0.01            /* below this everywhere (2.5 of 255) the frame is black */
#define MIN_REGION_FRACTION 0.005 /* an aperture covers at least 0.5% of the frame */

void
rete_fov_params_init (ReteFovParams *params)
{
  g_return_if_fail (params != NULL);
  params->erode_rim = 0.0;
  params->threshold = 0.0;
}

gsize
rete_mask_count (const ReteImage *mask)
{
  g_return_val_if_fail (mask != NULL, 0);
  gsize n = rete_image_n_pixels (mask), count = 0;
  for (gsize i = 0; i < n; i++)
    count += mask->data[i] > 0.5f;
  return count;
}

double
rete_mask_dice (const ReteImage *a, const ReteImage *b, GError **error)
{
  g_return_val_if_fail (error == NULL || *error == NULL, -1);
  if (a == NULL || b == NULL)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "Dice needs two masks, got %s", a == NULL && b == NULL ? "none" : "one");
      return -1;
    }
  if (!rete_image_check_channels (a, "the first mask", 1, error)
      || !rete_image_check_channels (b, "the second mask", 1, error)
      || !rete_image_check_same_size (a, "the first mask", b, "the second mask", error))
    return -1;
  gsize n = rete_image_n_pixels (a), na = 0, nb = 0, both = 0;
  for (gsize i = 0; i < n; i++)
    {
      gboolean ia = a->data[i] > 0.5f, ib = b->data[i] > 0.5f;
      na += ia;
      nb += ib;
      both += ia && ib;
    }
  return na + nb == 0 ? 1.0 : 2.0 * both / (double) (na + nb);
}

/* Box mean of radius r (edges: the mean of the part inside), rows then columns; the column
 * pass slides a window of row sums down the image so that it reads rows, not columns. */
static void
box_mean (float *image, int width, int height, int r)
{
  double *line = g_new (double, width + 1);
  for (int y = 0; y < height; y++)
    {
      float *p = image + (gsize) y * width;
      line[0] = 0;
      for (int x = 0; x < width; x++)
        line[x + 1] = line[x] + p[x];
      for (int x = 0; x < width; x++)
        {
          int a = MAX (0, x - r), b = MIN (width, x + r + 1);
          p[x] = (float) ((line[b] - line[a]) / (b - a));
        }
    }
  g_free (line);
  double *sum = g_new0 (double, width);
  float *source = g_memdup2 (image, sizeof (float) * width * height);
  for (int y = 0; y < MIN (r, height); y++)
    for (int x = 0; x < width; x++)
      sum[x] += source[(gsize) y * width + x];
  for (int y = 0; y < height; y++)
    {
      if (y + r < height)
        for (int x = 0; x < width; x++)
          sum[x] += source[(gsize) (y + r) * width + x];
      if (y - r - 1 >= 0)
        for (int x = 0; x < width; x++)
          sum[x] -= source[(gsize) (y - r - 1) * width + x];
      int count = MIN (height, y + r + 1) - MAX (0, y - r);
      float *p = image + (gsize) y * width;
      for (int x = 0; x < width; x++)
        p[x] = (float) (sum[x] / count);
    }
  g_free (sum);
  g_free (source);
}

/* Otsu's threshold (between-class variance maximum) on a histogram: the first bin of the
 * lit class. */
static int
otsu (const gsize *hist, int n)
{
  double total = 0, sum_all = 0;
  for (int i = 0; i < n; i++)
    {
      total += hist[i];
      sum_all += (double) i * hist[i];
    }
  double w0 = 0, sum0 = 0, best = -1;
  int best_k = 1;
  for (int k = 1; k < n; k++)
    {
      w0 += hist[k - 1];
      sum0 += (double) (k - 1) * hist[k - 1];
      double w1 = total - w0;
      if (w0 == 0 || w1 == 0)
        continue;
      double m0 = sum0 / w0, m1 = (sum_all - sum0) / w1;
      double between = w0 * w1 * (m0 - m1) * (m0 - m1);
      if (between > best)
        {
          best = between;
          best_k = k;
        }
    }
  return best_k;
}

/* Bin of the median of hist[first..last). */
static int
median_bin (const gsize *hist, int first, int last)
{
  gsize total = 0, seen = 0;
  for (int i = first; i < last; i++)
    total += hist[i];
  for (int i = first; i < last; i++)
    {
      seen += hist[i];
      if (2 * seen >= total)
        return i;
    }
  return last - 1;
}

ReteImage *
rete_fov_detect (const ReteImage *photo, const ReteFovParams *params, GError **error)
{
  g_return_val_if_fail (error == NULL || *error == NULL, NULL);
  ReteFovParams defaults;
  if (params == NULL)
    {
      rete_fov_params_init (&defaults);
      params = &defaults;
    }
  if (photo == NULL)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "no photograph was given to find the field of view in");
      return NULL;
    }
  if (photo->channels == 2)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "the photograph has 2 channels; give a grey (1), RGB (3) or RGBA (4) "
                   "photograph to find its field of view");
      return NULL;
    }
  if (!(params->threshold == 0.0 || (params->threshold > 0.0 && params->threshold < 1.0)))
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "field of view level %g is outside (0, 1); give 0 to find it from the "
                   "photograph, or a brightness such as 0.05", params->threshold);
      return NULL;
    }
  if (!(params->erode_rim >= 0.0 && params->erode_rim <= RETE_MAX_SIDE))
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "field of view rim %g pixels is not usable; give 0 (no erosion) or a "
                   "radius in pixels such as 5", params->erode_rim);
      return NULL;
    }
  if (!rete_image_check_finite (photo, "the photograph", error))
    return NULL;

  int width = photo->width, height = photo->height;
  gsize n = rete_image_n_pixels (photo);
  int colour = MIN (photo->channels, 3);
  float *raw = g_new (float, n), *bright = g_new (float, n);
  memcpy (raw, photo->data, n * sizeof (float));
  for (int c = 1; c < colour; c++)
    {
      const float *plane = rete_image_plane (photo, c);
      for (gsize i = 0; i < n; i++)
        raw[i] = MAX (raw[i], plane[i]);
    }
  memcpy (bright, raw, n * sizeof (float));
  box_mean (bright, width, height, MAX (1, MIN (width, height) / 200));

  gsize hist[N_LEVELS] = { 0 };
  float top = 0.0f;
  for (gsize i = 0; i < n; i++)
    {
      float v = CLAMP (bright[i], 0.0f, 1.0f);
      top = MAX (top, v);
      hist[MIN ((int) (v * N_LEVELS), N_LEVELS - 1)]++;
    }
  if (top < MIN_LIT)
    {
      g_free (bright);
      g_free (raw);
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_EMPTY,
                   "no field of view found: the photograph is black (brightest value %.4f); "
                   "check that the right file or layer was given, or draw the field of view "
                   "by hand", top);
      return NULL;
    }

  double level = params->threshold;
  gboolean whole_frame = FALSE;
  if (level == 0.0)
    {
      int k = otsu (hist, N_LEVELS);
      double dark = (median_bin (hist, 0, k) + 0.5) / N_LEVELS;
      double lit = (median_bin (hist, k, N_LEVELS) + 0.5) / N_LEVELS;
      if (dark > NO_SURROUND_RATIO * lit)
        whole_frame = TRUE;
      level = dark + FOREGROUND_FRACTION * (lit - dark);
    }

  ReteImage *fov = rete_image_new (width, height, 1, error);
  if (fov == NULL)
    {
      g_free (bright);
      g_free (raw);
      return NULL;
    }
  if (whole_frame)
    {
      for (gsize i = 0; i < n; i++)
        fov->data[i] = 1.0f;
    }
  else
    {
      guint8 *mask = g_new (guint8, n);
      for (gsize i = 0; i < n; i++)
        mask[i] = bright[i] > level && raw[i] > level; /* the smoothing must not widen the rim */
      gsize size = rete_fov_keep_largest_region (mask, width, height);
      if (size < MIN_REGION_FRACTION * n)
        {
          g_free (mask);
          g_free (bright);
      g_free (raw);
          rete_image_free (fov);
          g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_EMPTY,
                       "no field of view found: the largest area brighter than %.3f covers "
                       "only %" G_GSIZE_FORMAT " pixels of %" G_GSIZE_FORMAT "; give a lower "
                       "level by hand, or draw the field of view", level, size, n);
          return NULL;
        }
      rete_fov_fill_convex_hull (mask, width, height, fov->data);
      g_free (mask);
    }
  g_free (bright);
  g_free (raw);

  if (params->erode_rim > 0.0)
    {
      ReteImage *eroded = rete_fov_erode (fov, params->erode_rim, error);
      rete_image_free (fov);
      return eroded;
    }
  return fov;
}
