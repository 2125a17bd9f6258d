/* learned.c — the learned vessel map: preprocessing from the model's metadata (channel, CLAHE
 * (Zuiderveld, Graphics Gems IV, 1994) inside the field of view, standardisation inside it),
 * then the U-Net (Ronneberger et al., MICCAI 2015) by tiled inference (nn/infer.c). */
#include "rete_learned.h"
#include "rete_nn.h"

#include <stdlib.h>
#include <string.h>

void
rete_learned_preprocess_init (ReteLearnedPreprocess *pre)
{
  pre->channel = RETE_CHANNEL_GREEN;
  pre->use_clahe = TRUE;
  rete_clahe_params_init (&pre->clahe);
  pre->standardise = TRUE;
}

static gboolean
bad_value (const char *key, const char *value, const char *expected, GError **error)
{
  g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_FORMAT,
               "the model's preprocessing setting \"%s\" is \"%s\"; expected %s (fix the "
               "model's metadata or retrain the model)", key, value, expected);
  return FALSE;
}

static gboolean
read_int (const ReteModel *model, const char *key, gint64 min, gint64 max, int *value,
          GError **error)
{
  const char *text = rete_model_get_meta (model, key);
  gint64 v;
  if (text == NULL)
    return TRUE;
  if (!g_ascii_string_to_signed (text, 10, min, max, &v, NULL))
    {
      g_autofree char *range = g_strdup_printf ("a whole number from %" G_GINT64_FORMAT " to %"
                                                G_GINT64_FORMAT, min, max);
      return bad_value (key, text, range, error);
    }
  *value = (int) v;
  return TRUE;
}

static gboolean
read_bool (const ReteModel *model, const char *key, const char *yes, const char *no,
           gboolean *value, GError **error)
{
  const char *text = rete_model_get_meta (model, key);
  if (text == NULL)
    return TRUE;
  if (strcmp (text, yes) == 0)
    *value = TRUE;
  else if (strcmp (text, no) == 0)
    *value = FALSE;
  else
    {
      g_autofree char *expected = g_strdup_printf ("\"%s\" or \"%s\"", yes, no);
      return bad_value (key, text, expected, error);
    }
  return TRUE;
}

gboolean
rete_learned_preprocess_from_model (const ReteModel *model, ReteLearnedPreprocess *pre,
                                    GError **error)
{
  rete_learned_preprocess_init (pre);
  const char *channel = rete_model_get_meta (model, "channel");
  if (channel != NULL && strcmp (channel, "rgb") != 0
      && !rete_channel_from_name (channel, &pre->channel, NULL))
    return bad_value ("channel", channel, "green, luminance, red, blue or rgb", error);
  if (channel != NULL && strcmp (channel, "rgb") == 0
      && rete_unet_config (rete_model_net (model))->in_channels != 3)
    return bad_value ("channel", channel, "one of green, luminance, red, blue for a network "
                      "with one input channel", error);
  if (!read_bool (model, "clahe", "true", "false", &pre->use_clahe, error)
      || !read_bool (model, "normalisation", "standardise", "none", &pre->standardise, error)
      || !read_int (model, "clahe_kernel_width", 0, RETE_MAX_SIDE, &pre->clahe.kernel_width, error)
      || !read_int (model, "clahe_kernel_height", 0, RETE_MAX_SIDE, &pre->clahe.kernel_height, error)
      || !read_int (model, "clahe_bins", 2, 65536, &pre->clahe.n_bins, error))
    return FALSE;
  const char *clip = rete_model_get_meta (model, "clahe_clip_limit");
  if (clip != NULL)
    {
      char *end = NULL;
      double v = g_ascii_strtod (clip, &end);
      if (end == clip || *end != '\0' || !(v > 0.0 && v <= 1.0))
        return bad_value ("clahe_clip_limit", clip, "a number in (0, 1]", error);
      pre->clahe.clip_limit = v;
    }
  return TRUE;
}

void
rete_learned_preprocess_to_model (const ReteLearnedPreprocess *pre, ReteModel *model)
{
  char text[G_ASCII_DTOSTR_BUF_SIZE];
  int in_channels = rete_unet_config (rete_model_net (model))->in_channels;
  rete_model_set_meta (model, "channel", in_channels == 3 ? "rgb" : rete_channel_name (pre->channel));
  rete_model_set_meta (model, "clahe", pre->use_clahe ? "true" : "false");
  rete_model_set_meta (model, "normalisation", pre->standardise ? "standardise" : "none");
  g_snprintf (text, sizeof text, "%d", pre->clahe.kernel_width);
  rete_model_set_meta (model, "clahe_kernel_width", text);
  g_snprintf (text, sizeof text, "%d", pre->clahe.kernel_height);
  rete_model_set_meta (model, "clahe_kernel_height", text);
  g_snprintf (text, sizeof text, "%d", pre->clahe.n_bins);
  rete_model_set_meta (model, "clahe_bins", text);
  g_ascii_dtostr (text, sizeof text, pre->clahe.clip_limit);
  rete_model_set_meta (model, "clahe_clip_limit", text);
}

gboolean
rete_learned_prepare_input (const ReteImage *photo, const ReteImage *fov, const ReteModel *model,
                            float **input, GError **error)
{
  if (photo == NULL || model == NULL || input == NULL)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "the learned vessel map needs a photograph and a model");
      return FALSE;
    }
  if (fov != NULL && (!rete_image_check_channels (fov, "field of view", 1, error)
                      || !rete_image_check_same_size (photo, "photograph", fov, "field of view",
                                                      error)))
    return FALSE;
  ReteLearnedPreprocess pre;
  if (!rete_learned_preprocess_from_model (model, &pre, error))
    return FALSE;
  int in_channels = rete_unet_config (rete_model_net (model))->in_channels;
  gsize plane = rete_image_n_pixels (photo);
  float *data = g_try_malloc (sizeof (float) * plane * in_channels);
  if (data == NULL)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_NO_MEMORY,
                   "not enough memory for the network input of a %d×%d photograph",
                   photo->width, photo->height);
      return FALSE;
    }
  static const ReteChannel rgb[3] = { RETE_CHANNEL_RED, RETE_CHANNEL_GREEN, RETE_CHANNEL_BLUE };
  for (int c = 0; c < in_channels; c++)
    {
      g_autoptr (ReteImage) grey
        = rete_preprocess_channel (photo, in_channels == 3 ? rgb[c] : pre.channel, error);
      if (grey != NULL && pre.use_clahe)
        {
          ReteImage *equalised = rete_clahe (grey, fov, &pre.clahe, error);
          rete_image_free (grey);
          grey = equalised;
        }
      if (grey == NULL || (pre.standardise && !rete_standardise (grey, fov, error)))
        {
          g_free (data);
          return FALSE;
        }
      float *dst = data + plane * c;
      memcpy (dst, grey->data, sizeof (float) * plane);
      if (fov != NULL)
        for (gsize i = 0; i < plane; i++)
          if (fov->data[i] <= 0.5f)
            dst[i] = 0.0f;
    }
  *input = data;
  return TRUE;
}

ReteImage *
rete_vessel_learned (const ReteImage *photo, const ReteImage *fov, const ReteModel *model,
                     ReteProgressFunc progress, gpointer progress_data, GError **error)
{
  float *input = NULL;
  if (!rete_learned_prepare_input (photo, fov, model, &input, error))
    return NULL;
  int in_channels = rete_unet_config (rete_model_net (model))->in_channels;
  ReteImage *map = rete_image_new (photo->width, photo->height, 1, error);
  if (map != NULL
      && !rete_model_infer (model, input, in_channels, photo->height, photo->width, map->data,
                            progress, progress_data, error))
    g_clear_pointer (&map, rete_image_free);
  g_free (input);
  if (map != NULL && fov != NULL)
    {
      gsize n = rete_image_n_pixels (map);
      for (gsize i = 0; i < n; i++)
        if (fov->data[i] <= 0.5f)
          map->data[i] = 0.0f;
    }
  return map;
}
