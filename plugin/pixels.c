/* pixels.c — pixels between GIMP drawables and librete's ReteImage, new layers, progress and
 * error returns. Every read and write names its babl float format, so that the values librete
 * sees are the stored non-linear values scaled to [0,1], exactly as the `rete` command reads
 * them from a file. */
#include "config.h"

#include <string.h>

#include "rete-plugin.h"

void
plugin_return_error (GimpParam *values, gint *n, GimpPDBStatusType status, const char *message)
{
  static char *kept;  /* the message must outlive run(); one per process is enough */

  g_free (kept);
  kept = g_strdup (message);
  values[0].type = GIMP_PDB_STATUS;
  values[0].data.d_status = status;
  values[1].type = GIMP_PDB_STRING;
  values[1].data.d_string = kept;
  *n = 2;
}

void
plugin_return_gerror (GimpParam *values, gint *n, GimpPDBStatusType status, GError *error)
{
  plugin_return_error (values, n, status, error ? error->message : _("Unknown error."));
  g_clear_error (&error);
}

void
plugin_show_error (GimpRunMode run_mode, const char *message)
{
  if (run_mode == GIMP_RUN_INTERACTIVE)
    g_message ("%s", message);
}

gboolean
plugin_progress (double fraction, const char *message, gpointer user_data)
{
  if (message && *message)
    gimp_progress_set_text (message);
  gimp_progress_update (CLAMP (fraction, 0.0, 1.0));
  return TRUE;
}

gboolean
plugin_check_drawable (gint32 drawable, const char *role, GError **error)
{
  if (!gimp_item_is_valid (drawable) || !gimp_item_is_drawable (drawable))
    {
      g_set_error (error, PLUGIN_ERROR, 0,
                   _("The %s is not a layer or channel of an open image."), role);
      return FALSE;
    }
  if (gimp_drawable_is_indexed (drawable))
    {
      g_set_error (error, PLUGIN_ERROR, 0,
                   _("The %s is an indexed (palette) image. Convert the image with "
                     "Image ▸ Mode ▸ RGB (or Grayscale) and try again."), role);
      return FALSE;
    }
  return TRUE;
}

/* Reads the whole drawable in `format` (n float channels, interleaved). */
static float *
read_floats (gint32 drawable, const char *format, int n_channels, int *width, int *height)
{
  GeglBuffer *buffer = gimp_drawable_get_buffer (drawable);
  float *pixels;

  *width = gegl_buffer_get_width (buffer);
  *height = gegl_buffer_get_height (buffer);
  pixels = g_try_new (float, (gsize) *width * *height * n_channels);
  if (pixels)
    gegl_buffer_get (buffer, GEGL_RECTANGLE (0, 0, *width, *height), 1.0,
                     babl_format (format), pixels, GEGL_AUTO_ROWSTRIDE, GEGL_ABYSS_NONE);
  g_object_unref (buffer);
  return pixels;
}

ReteImage *
plugin_read_photograph (gint32 drawable, GError **error)
{
  gboolean rgb;
  int width, height;
  g_autofree float *pixels = NULL;

  if (!plugin_check_drawable (drawable, _("photograph"), error))
    return NULL;
  rgb = gimp_drawable_is_rgb (drawable);
  pixels = read_floats (drawable, rgb ? "R'G'B' float" : "Y' float", rgb ? 3 : 1,
                        &width, &height);
  if (!pixels)
    {
      g_set_error (error, PLUGIN_ERROR, 0, _("Not enough memory for a %d × %d photograph."),
                   width, height);
      return NULL;
    }
  return rete_image_from_interleaved (pixels, width, height, rgb ? 3 : 1, error);
}

ReteImage *
plugin_read_map (gint32 drawable, GError **error)
{
  int width, height;
  g_autofree float *pixels = NULL;
  g_autoptr (ReteImage) rgb = NULL;
  gboolean grey_values = TRUE;

  if (!plugin_check_drawable (drawable, _("map"), error))
    return NULL;
  /* Grey drawables too are read as premultiplied RGBA (R = G = B): a transparent pixel counts
   * as black (no vessel). One format for every drawable; babl 0.1.98 here crashed on a path
   * to "Y'aA float" after other conversions in the same process. */
  pixels = read_floats (drawable, "R'aG'aB'aA float", 4, &width, &height);
  if (!pixels)
    goto no_memory;
  rgb = rete_image_from_interleaved (pixels, width, height, 4, error);
  if (!rgb)
    return NULL;
  /* Maps made by this plug-in, and references drawn in white on black, are grey: take R as
   * stored. Other colour layers go through librete's Rec. 709 luma. */
  {
    const float *r = rete_image_plane (rgb, 0), *g = rete_image_plane (rgb, 1),
                *b = rete_image_plane (rgb, 2);
    gsize n = rete_image_n_pixels (rgb);

    for (gsize i = 0; i < n && grey_values; i++)
      grey_values = r[i] == g[i] && g[i] == b[i];
  }
  if (grey_values)
    return rete_image_extract_channel (rgb, 0, error);
  return rete_preprocess_channel (rgb, RETE_CHANNEL_LUMINANCE, error);

no_memory:
  g_set_error (error, PLUGIN_ERROR, 0, _("Not enough memory for a %d × %d map."), width, height);
  return NULL;
}

ReteImage *
plugin_read_selection (gint32 image, gint32 drawable, const ReteRect *rect, GError **error)
{
  gint32 selection = gimp_image_get_selection (image);
  GeglBuffer *buffer = gimp_drawable_get_buffer (selection);
  g_autofree float *pixels = g_try_new (float, (gsize) rect->width * rect->height);
  int off_x, off_y;

  gimp_drawable_offsets (drawable, &off_x, &off_y);
  if (pixels)
    gegl_buffer_get (buffer, GEGL_RECTANGLE (rect->x + off_x, rect->y + off_y,
                                             rect->width, rect->height),
                     1.0, babl_format ("Y float"), pixels, GEGL_AUTO_ROWSTRIDE, GEGL_ABYSS_NONE);
  g_object_unref (buffer);
  if (!pixels)
    {
      g_set_error (error, PLUGIN_ERROR, 0, _("Not enough memory for the selection."));
      return NULL;
    }
  return rete_image_from_interleaved (pixels, rect->width, rect->height, 1, error);
}

void
plugin_write_grey (gint32 drawable, const ReteImage *grey)
{
  GeglBuffer *buffer = gimp_drawable_get_buffer (drawable);

  /* One channel in "Y' float": babl writes R = G = B into an RGB drawable. */
  gegl_buffer_set (buffer, GEGL_RECTANGLE (0, 0, grey->width, grey->height), 0,
                   babl_format ("Y' float"), grey->data, GEGL_AUTO_ROWSTRIDE);
  gegl_buffer_flush (buffer);
  g_object_unref (buffer);
}

static gint32
new_layer (gint32 image, gint32 like_drawable, gint32 parent, gint position, const char *name,
           int width, int height, gboolean alpha, double opacity)
{
  gboolean rgb = gimp_image_base_type (image) == GIMP_RGB;
  GimpImageType type = rgb ? (alpha ? GIMP_RGBA_IMAGE : GIMP_RGB_IMAGE)
                           : (alpha ? GIMP_GRAYA_IMAGE : GIMP_GRAY_IMAGE);
  gint32 layer = gimp_layer_new (image, name, width, height, type, opacity,
                                 GIMP_LAYER_MODE_NORMAL);
  int off_x = 0, off_y = 0;

  if (layer < 0)
    return -1;
  if (like_drawable > 0)
    gimp_drawable_offsets (like_drawable, &off_x, &off_y);
  if (!gimp_image_insert_layer (image, layer, parent, position))
    return -1;
  gimp_layer_set_offsets (layer, off_x, off_y);
  return layer;
}

gint32
plugin_add_grey_layer (gint32 image, gint32 like_drawable, gint32 parent, gint position,
                       const char *name, const ReteImage *grey)
{
  gint32 layer = new_layer (image, like_drawable, parent, position, name,
                            grey->width, grey->height, FALSE, 100.0);

  if (layer > 0)
    plugin_write_grey (layer, grey);
  return layer;
}

gint32
plugin_add_colour_layer (gint32 image, gint32 like_drawable, gint32 parent, gint position,
                         const char *name, const GimpRGB *colour, const ReteImage *mask,
                         double opacity)
{
  gint32 layer = new_layer (image, like_drawable, parent, position, name,
                            mask->width, mask->height, TRUE, opacity);
  GeglBuffer *buffer;
  GeglColor *fill;
  gint32 layer_mask;

  if (layer < 0)
    return -1;
  /* The colour everywhere, then the mask as alpha: a layer mask, applied. */
  buffer = gimp_drawable_get_buffer (layer);
  fill = gegl_color_new (NULL);
  {
    /* GimpRGB holds non-linear (perceptual) values, as the colour button shows them. */
    double rgba[4] = { colour->r, colour->g, colour->b, 1.0 };
    gegl_color_set_pixel (fill, babl_format ("R'G'B'A double"), rgba);
  }
  gegl_buffer_set_color (buffer, NULL, fill);
  g_object_unref (fill);
  g_object_unref (buffer);

  layer_mask = gimp_layer_create_mask (layer, GIMP_ADD_MASK_WHITE);
  gimp_layer_add_mask (layer, layer_mask);
  plugin_write_grey (layer_mask, mask);
  gimp_layer_remove_mask (layer, GIMP_MASK_APPLY);
  return layer;
}

gint32
plugin_rgb_image_for (gint32 drawable, gint32 *new_image, GError **error)
{
  gint32 image = gimp_item_get_image (drawable);

  *new_image = -1;
  if (gimp_image_base_type (image) == GIMP_RGB)
    return image;
  image = gimp_image_new (gimp_drawable_width (drawable), gimp_drawable_height (drawable),
                          GIMP_RGB);
  if (image < 0)
    {
      g_set_error (error, PLUGIN_ERROR, 0, _("GIMP could not make an image: %s"),
                   gimp_get_pdb_error ());
      return -1;
    }
  *new_image = image;
  return image;
}
