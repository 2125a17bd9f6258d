/* image.c — the planar float image type: allocation, copies, regions, checks. */
#include "image_private.h"

#include <math.h>
#include <string.h>

G_DEFINE_QUARK (rete-vessel-error-quark, rete_vessel_error)

/* rete_image_new, with the pixels zeroed or (for a caller that writes every pixel) left as
 * they come: a zero-fill of a large image is a pass over memory of its own. */
static ReteImage *
image_new (int width, int height, int channels, gboolean zeroed, GError **error)
{
  if (width <= 0 || height <= 0)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "image size %d×%d is empty; width and height must be at least 1 pixel",
                   width, height);
      return NULL;
    }
  if (width > RETE_MAX_SIDE || height > RETE_MAX_SIDE
      || (gsize) width * (gsize) height > RETE_MAX_PIXELS)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "image size %d×%d is larger than Rete accepts (at most %d pixels a side "
                   "and %" G_GSIZE_FORMAT " pixels in all)",
                   width, height, RETE_MAX_SIDE, (gsize) RETE_MAX_PIXELS);
      return NULL;
    }
  if (channels < 1 || channels > 4)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "an image has 1 to 4 channels, not %d", channels);
      return NULL;
    }
  gsize n = (gsize) width * height * channels;
  float *data = zeroed ? g_try_malloc0 (n * sizeof (float)) : g_try_malloc (n * sizeof (float));
  if (data == NULL)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_NO_MEMORY,
                   "not enough memory for a %d×%d image with %d channels (%" G_GSIZE_FORMAT
                   " MB)", width, height, channels, n * sizeof (float) >> 20);
      return NULL;
    }
  ReteImage *image = g_new0 (ReteImage, 1);
  image->width = width;
  image->height = height;
  image->channels = channels;
  image->data = data;
  return image;
}

ReteImage *
rete_image_new (int width, int height, int channels, GError **error)
{
  return image_new (width, height, channels, TRUE, error);
}

ReteImage *
rete_image_new_unset (int width, int height, int channels, GError **error)
{
  return image_new (width, height, channels, FALSE, error);
}

ReteImage *
rete_image_new_like (const ReteImage *like, int channels, GError **error)
{
  g_return_val_if_fail (like != NULL, NULL);
  return rete_image_new (like->width, like->height, channels, error);
}

ReteImage *
rete_image_copy (const ReteImage *image, GError **error)
{
  g_return_val_if_fail (image != NULL, NULL);
  ReteImage *copy = rete_image_new (image->width, image->height, image->channels, error);
  if (copy != NULL)
    memcpy (copy->data, image->data, rete_image_n_pixels (image) * image->channels * sizeof (float));
  return copy;
}

void
rete_image_free (ReteImage *image)
{
  if (image == NULL)
    return;
  g_free (image->data);
  g_free (image);
}

ReteImage *
rete_image_from_interleaved (const float *pixels, int width, int height, int channels,
                             GError **error)
{
  ReteImage *image = rete_image_new (width, height, channels, error);
  if (image == NULL)
    return NULL;
  gsize n = rete_image_n_pixels (image);
  for (int c = 0; c < channels; c++)
    {
      float *plane = rete_image_plane (image, c);
      for (gsize i = 0; i < n; i++)
        plane[i] = pixels[i * channels + c];
    }
  return image;
}

void
rete_image_to_interleaved (const ReteImage *image, float *pixels)
{
  gsize n = rete_image_n_pixels (image);
  for (int c = 0; c < image->channels; c++)
    {
      const float *plane = rete_image_plane (image, c);
      for (gsize i = 0; i < n; i++)
        pixels[i * image->channels + c] = plane[i];
    }
}

ReteImage *
rete_image_extract_channel (const ReteImage *image, int channel, GError **error)
{
  g_return_val_if_fail (image != NULL, NULL);
  if (channel < 0 || channel >= image->channels)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "channel %d asked for, but the image has channels 0 to %d only",
                   channel, image->channels - 1);
      return NULL;
    }
  ReteImage *out = rete_image_new_like (image, 1, error);
  if (out != NULL)
    memcpy (out->data, rete_image_plane (image, channel),
            rete_image_n_pixels (image) * sizeof (float));
  return out;
}

ReteImage *
rete_image_crop (const ReteImage *image, const ReteRect *rect, GError **error)
{
  g_return_val_if_fail (image != NULL && rect != NULL, NULL);
  if (rect->width <= 0 || rect->height <= 0 || rect->x < 0 || rect->y < 0
      || rect->x + rect->width > image->width || rect->y + rect->height > image->height)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "region %d×%d at (%d, %d) does not lie inside the %d×%d image",
                   rect->width, rect->height, rect->x, rect->y, image->width, image->height);
      return NULL;
    }
  ReteImage *out = rete_image_new (rect->width, rect->height, image->channels, error);
  if (out == NULL)
    return NULL;
  for (int c = 0; c < image->channels; c++)
    for (int y = 0; y < rect->height; y++)
      memcpy (rete_image_plane (out, c) + (gsize) y * rect->width,
              rete_image_plane (image, c) + (gsize) (rect->y + y) * image->width + rect->x,
              rect->width * sizeof (float));
  return out;
}

gboolean
rete_image_paste (ReteImage *target, const ReteImage *source, int x, int y, GError **error)
{
  g_return_val_if_fail (target != NULL && source != NULL, FALSE);
  if (target->channels != source->channels)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "cannot paste a %d-channel image into a %d-channel one",
                   source->channels, target->channels);
      return FALSE;
    }
  int x0 = MAX (x, 0), y0 = MAX (y, 0);
  int x1 = MIN (x + source->width, target->width), y1 = MIN (y + source->height, target->height);
  if (x1 <= x0 || y1 <= y0)
    return TRUE;
  for (int c = 0; c < target->channels; c++)
    for (int ty = y0; ty < y1; ty++)
      memcpy (rete_image_plane (target, c) + (gsize) ty * target->width + x0,
              rete_image_plane (source, c) + (gsize) (ty - y) * source->width + (x0 - x),
              (x1 - x0) * sizeof (float));
  return TRUE;
}

gboolean
rete_image_check_same_size (const ReteImage *a, const char *name_a, const ReteImage *b,
                            const char *name_b, GError **error)
{
  if (a == NULL || b == NULL)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT, "%s is missing",
                   a == NULL ? name_a : name_b);
      return FALSE;
    }
  if (a->width != b->width || a->height != b->height)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_SIZE_MISMATCH,
                   "%s is %d×%d but %s is %d×%d; they must be the same size",
                   name_a, a->width, a->height, name_b, b->width, b->height);
      return FALSE;
    }
  return TRUE;
}

gboolean
rete_image_check_channels (const ReteImage *image, const char *name, int channels,
                           GError **error)
{
  if (image == NULL)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT, "%s is missing", name);
      return FALSE;
    }
  if (image->channels != channels)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "%s has %d channels; %d expected", name, image->channels, channels);
      return FALSE;
    }
  return TRUE;
}

gboolean
rete_image_check_finite (const ReteImage *image, const char *name, GError **error)
{
  gsize n = rete_image_n_pixels (image);
  for (int c = 0; c < image->channels; c++)
    {
      const float *plane = rete_image_plane (image, c);
      for (gsize i = 0; i < n; i++)
        if (!isfinite (plane[i]))
          {
            g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_NOT_FINITE,
                         "%s holds a value that is not a number (NaN or infinity) at pixel "
                         "(%d, %d), channel %d", name, (int) (i % image->width),
                         (int) (i / image->width), c);
            return FALSE;
          }
    }
  return TRUE;
}

gsize
rete_image_binarise (ReteImage *image, float level)
{
  gsize n = rete_image_n_pixels (image) * image->channels, not_binary = 0;
  for (gsize i = 0; i < n; i++)
    {
      float v = image->data[i];
      if (v != 0.0f && v != 1.0f)
        not_binary++;
      image->data[i] = v >= level ? 1.0f : 0.0f;
    }
  return not_binary;
}
