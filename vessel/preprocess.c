/* preprocess.c — from a colour photograph to the grey image the vessel methods read:
 * channel choice, background normalisation, standardisation inside the field of view, and
 * the usual chain (channel, then CLAHE in the FOV; CLAHE itself is in clahe.c).
 *
 * The green channel carries the best vessel contrast of a fundus photograph (common
 * practice); luminance is Rec. 709 luma (ITU-R BT.709-6, item 3.2) of the non-linear values.
 * Background normalisation subtracts a large Gaussian blur computed by normalised
 * convolution (Knutsson & Westin, CVPR 1993): blur(grey × fov) / blur(fov), so that the
 * dark surround does not pull the background down along the rim.
 */
#include "rete_preprocess.h"
#include "rete_fov.h"
#include "rete_filters.h"

#include <math.h>
#include <string.h>

static const char *const channel_names[] = { "green", "luminance", "red", "blue" };

const char *
rete_channel_name (ReteChannel channel)
{
  if ((unsigned) channel < G_N_ELEMENTS (channel_names))
    return channel_names[channel];
  return "unknown";
}

gboolean
rete_channel_from_name (const char *name, ReteChannel *channel, GError **error)
{
  for (guint i = 0; name != NULL && i < G_N_ELEMENTS (channel_names); i++)
    if (g_ascii_strcasecmp (name, channel_names[i]) == 0)
      {
        if (channel != NULL)
          *channel = (ReteChannel) i;
        return TRUE;
      }
  g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
               "unknown channel “%s”; choose green, luminance, red or blue",
               name ? name : "(none)");
  return FALSE;
}

ReteImage *
rete_preprocess_channel (const ReteImage *photo, ReteChannel channel, GError **error)
{
  g_return_val_if_fail (error == NULL || *error == NULL, NULL);
  if (photo == NULL)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "no photograph was given to take a channel from");
      return NULL;
    }
  if (photo->channels == 2)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "the photograph has 2 channels (grey and alpha?); give a grey (1), RGB (3) "
                   "or RGBA (4) photograph");
      return NULL;
    }
  if ((unsigned) channel >= G_N_ELEMENTS (channel_names))
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "unknown channel number %d; choose green, luminance, red or blue",
                   (int) channel);
      return NULL;
    }
  ReteImage *grey;
  if (photo->channels == 1)
    grey = rete_image_copy (photo, error);
  else if (channel == RETE_CHANNEL_LUMINANCE)
    {
      grey = rete_image_new_like (photo, 1, error);
      if (grey != NULL)
        {
          const float *r = rete_image_plane (photo, 0), *g = rete_image_plane (photo, 1),
                      *b = rete_image_plane (photo, 2);
          gsize n = rete_image_n_pixels (photo);
          for (gsize i = 0; i < n; i++)
            grey->data[i] = 0.2126f * r[i] + 0.7152f * g[i] + 0.0722f * b[i];
        }
    }
  else
    {
      int index = channel == RETE_CHANNEL_RED ? 0 : channel == RETE_CHANNEL_GREEN ? 1 : 2;
      grey = rete_image_extract_channel (photo, index, error);
    }
  if (grey != NULL && !rete_image_check_finite (grey, "the photograph", error))
    g_clear_pointer (&grey, rete_image_free);
  return grey;
}

/* Checks a one-channel image and an optional FOV of its size with at least one pixel. */
static gboolean
check_grey_and_fov (const ReteImage *grey, const ReteImage *fov, const char *what,
                    GError **error)
{
  if (grey == NULL)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "%s needs a grey image, got none", what);
      return FALSE;
    }
  if (!rete_image_check_channels (grey, "the grey image", 1, error)
      || !rete_image_check_finite (grey, "the grey image", error))
    return FALSE;
  if (fov == NULL)
    return TRUE;
  if (!rete_image_check_channels (fov, "the field of view", 1, error)
      || !rete_image_check_same_size (grey, "the grey image", fov, "the field of view", error)
      || !rete_image_check_finite (fov, "the field of view", error))
    return FALSE;
  if (rete_mask_count (fov) == 0)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_EMPTY,
                   "the field of view is empty (no pixel above 0.5), so %s has nothing to "
                   "work on; detect the field of view again or give none", what);
      return FALSE;
    }
  return TRUE;
}

ReteImage *
rete_background_normalise (const ReteImage *grey, const ReteImage *fov, double sigma,
                           GError **error)
{
  g_return_val_if_fail (error == NULL || *error == NULL, NULL);
  if (!check_grey_and_fov (grey, fov, "background normalisation", error))
    return NULL;
  if (!(sigma > 0.0 && sigma <= RETE_MAX_SIDE))
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "background width %g pixels is not usable; give a Gaussian sigma above 0, "
                   "several times the widest vessel (say 1/30 of the photograph's width)", sigma);
      return NULL;
    }
  gsize n = rete_image_n_pixels (grey);
  g_autoptr (ReteImage) weighted = rete_image_new_like (grey, 2, error);
  if (weighted == NULL)
    return NULL;
  float *value = rete_image_plane (weighted, 0), *weight = rete_image_plane (weighted, 1);
  for (gsize i = 0; i < n; i++)
    {
      float w = fov == NULL || fov->data[i] > 0.5f ? 1.0f : 0.0f;
      value[i] = grey->data[i] * w;
      weight[i] = w;
    }
  g_autoptr (ReteImage) blurred = rete_gaussian_blur (weighted, sigma, error);
  if (blurred == NULL)
    return NULL;
  ReteImage *out = rete_image_new_like (grey, 1, error);
  if (out == NULL)
    return NULL;
  const float *sum = rete_image_plane (blurred, 0), *norm = rete_image_plane (blurred, 1);
  float lo = G_MAXFLOAT, hi = -G_MAXFLOAT;
  for (gsize i = 0; i < n; i++)
    if (weight[i] > 0)
      {
        /* norm >= a tiny fraction wherever the pixel itself is inside */
        float background = norm[i] > 1e-6f ? sum[i] / norm[i] : grey->data[i];
        out->data[i] = grey->data[i] - background;
        lo = MIN (lo, out->data[i]);
        hi = MAX (hi, out->data[i]);
      }
  float scale = hi > lo ? 1.0f / (hi - lo) : 0.0f;
  for (gsize i = 0; i < n; i++)
    out->data[i] = weight[i] > 0 ? (out->data[i] - lo) * scale : 0.0f;
  return out;
}

gboolean
rete_standardise (ReteImage *grey, const ReteImage *fov, GError **error)
{
  g_return_val_if_fail (error == NULL || *error == NULL, FALSE);
  if (!check_grey_and_fov (grey, fov, "standardisation", error))
    return FALSE;
  gsize n = rete_image_n_pixels (grey), n_in = 0;
  double sum = 0, sum_sq = 0;
  for (gsize i = 0; i < n; i++)
    if (fov == NULL || fov->data[i] > 0.5f)
      {
        sum += grey->data[i];
        n_in++;
      }
  double mean = sum / n_in;
  for (gsize i = 0; i < n; i++)
    if (fov == NULL || fov->data[i] > 0.5f)
      {
        double d = grey->data[i] - mean;
        sum_sq += d * d;
      }
  double sd = sqrt (sum_sq / n_in); /* population standard deviation, as numpy's std */
  if (!(sd > 0))
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_UNDEFINED,
                   "the image is flat inside the field of view (every value %g), so it cannot "
                   "be standardised; check the channel and the field of view", mean);
      return FALSE;
    }
  for (gsize i = 0; i < n; i++)
    grey->data[i] = fov == NULL || fov->data[i] > 0.5f ? (float) ((grey->data[i] - mean) / sd)
                                                        : 0.0f;
  return TRUE;
}

ReteImage *
rete_preprocess (const ReteImage *photo, const ReteImage *fov, ReteChannel channel,
                 const ReteClaheParams *clahe, GError **error)
{
  g_return_val_if_fail (error == NULL || *error == NULL, NULL);
  if (photo != NULL && fov != NULL
      && !rete_image_check_same_size (photo, "the photograph", fov, "the field of view", error))
    return NULL;
  g_autoptr (ReteImage) grey = rete_preprocess_channel (photo, channel, error);
  if (grey == NULL)
    return NULL;
  if (clahe != NULL)
    return rete_clahe (grey, fov, clahe, error);
  if (fov != NULL)
    {
      if (!check_grey_and_fov (grey, fov, "preprocessing", error))
        return NULL;
      gsize n = rete_image_n_pixels (grey);
      for (gsize i = 0; i < n; i++)
        if (!(fov->data[i] > 0.5f))
          grey->data[i] = 0.0f;
    }
  return g_steal_pointer (&grey);
}
