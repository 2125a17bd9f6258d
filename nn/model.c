/* model.c — the model file: a U-Net and its metadata in safetensors.
 *
 * safetensors (Hugging Face's open tensor container, format described in its README):
 *   8 bytes   N, the header length, unsigned little-endian;
 *   N bytes   a JSON object: "__metadata__": {string: string}, and per tensor
 *             "name": {"dtype": "F32", "shape": [...], "data_offsets": [begin, end]},
 *             offsets in bytes from the start of the data; the header is padded with spaces;
 *   the data  raw little-endian tensors, C order.
 * The architecture lives in the metadata (levels, base_filters, convs_per_block, activation,
 * in_channels, format_version); the loader (model_load.c) rebuilds the network from it and
 * checks every tensor against that network. This file: the model, its metadata, saving.
 */
#include "unet_private.h"

#include <json-glib/json-glib.h>
#include <math.h>
#include <string.h>


static void
write_architecture (GHashTable *meta, const ReteUnet *net)
{
  const ReteUnetConfig *cf = &net->config;
  char text[16];
#define PUT(key, value) (g_snprintf (text, sizeof text, "%d", (value)), \
                         g_hash_table_insert (meta, g_strdup (key), g_strdup (text)))
  PUT ("levels", cf->levels);
  PUT ("base_filters", cf->base_filters);
  PUT ("convs_per_block", cf->convs_per_block);
  PUT ("in_channels", cf->in_channels);
#undef PUT
  g_hash_table_insert (meta, g_strdup ("activation"),
                       g_strdup (cf->activation ? "relu" : "identity"));
  g_hash_table_insert (meta, g_strdup ("format_version"), g_strdup (RETE_MODEL_FORMAT_VERSION));
}

ReteModel *
rete_model_new (ReteUnet *net)
{
  g_return_val_if_fail (net != NULL, NULL);
  ReteModel *model = g_new0 (ReteModel, 1);
  model->net = net;
  model->meta = g_hash_table_new_full (g_str_hash, g_str_equal, g_free, g_free);
  write_architecture (model->meta, net);
  return model;
}

void
rete_model_free (ReteModel *model)
{
  if (model == NULL)
    return;
  rete_unet_free (model->net);
  g_hash_table_unref (model->meta);
  g_free (model);
}

ReteUnet *
rete_model_net (const ReteModel *model)
{
  return model->net;
}

const char *
rete_model_get_meta (const ReteModel *model, const char *key)
{
  return g_hash_table_lookup (model->meta, key);
}

void
rete_model_set_meta (ReteModel *model, const char *key, const char *value)
{
  if (value == NULL)
    g_hash_table_remove (model->meta, key);
  else
    g_hash_table_insert (model->meta, g_strdup (key), g_strdup (value));
}

const char **
rete_model_meta_keys (const ReteModel *model, guint *n_keys)
{
  const char **keys = (const char **) g_hash_table_get_keys_as_array (model->meta, n_keys);
  qsort (keys, *n_keys, sizeof (char *), (GCompareFunc) g_strcmp0);
  return keys;
}

void
rete_model_set_tile_size (ReteModel *model, int tile)
{
  model->tile = MAX (0, tile);
}

gboolean
rete_model_infer (const ReteModel *model, const float *input, int channels, int height,
                  int width, float *probability, ReteProgressFunc progress,
                  gpointer progress_data, GError **error)
{
  return unet_infer_tiled (model->net, model->tile, input, channels, height, width, probability,
                           progress, progress_data, error);
}

gboolean
rete_model_infer_untiled (const ReteModel *model, const float *input, int channels, int height,
                          int width, float *probability, GError **error)
{
  int m = rete_unet_config_multiple (&model->net->config);
  int side = (MAX (height, width) + m - 1) / m * m;
  return unet_infer_tiled (model->net, side, input, channels, height, width, probability, NULL,
                           NULL, error);
}

/* ---- saving ---- */

static int
compare_strings (gconstpointer a, gconstpointer b)
{
  return strcmp (*(const char *const *) a, *(const char *const *) b);
}

gboolean
rete_model_save (const ReteModel *model, const char *path, GError **error)
{
  const ReteUnet *net = model->net;
  /* a copy of the metadata whose architecture keys describe the net as it is */
  g_autoptr (GHashTable) meta = g_hash_table_new_full (g_str_hash, g_str_equal, g_free, g_free);
  GHashTableIter iter;
  gpointer key, value;
  g_hash_table_iter_init (&iter, model->meta);
  while (g_hash_table_iter_next (&iter, &key, &value))
    g_hash_table_insert (meta, g_strdup (key), g_strdup (value));
  write_architecture (meta, net);
  g_autoptr (JsonBuilder) b = json_builder_new ();
  json_builder_begin_object (b);
  json_builder_set_member_name (b, "__metadata__");
  json_builder_begin_object (b);
  guint n_keys = 0;
  const char **keys = (const char **) g_hash_table_get_keys_as_array (meta, &n_keys);
  qsort (keys, n_keys, sizeof (char *), compare_strings);
  for (guint i = 0; i < n_keys; i++)
    {
      json_builder_set_member_name (b, keys[i]);
      json_builder_add_string_value (b, g_hash_table_lookup (meta, keys[i]));
    }
  g_free (keys);
  json_builder_end_object (b);
  for (int i = 0; i < net->n_tensors; i++)
    {
      const UnetTensor *t = &net->tensors[i];
      json_builder_set_member_name (b, t->name);
      json_builder_begin_object (b);
      json_builder_set_member_name (b, "dtype");
      json_builder_add_string_value (b, "F32");
      json_builder_set_member_name (b, "shape");
      json_builder_begin_array (b);
      for (int d = 0; d < t->n_dims; d++)
        json_builder_add_int_value (b, t->shape[d]);
      json_builder_end_array (b);
      json_builder_set_member_name (b, "data_offsets");
      json_builder_begin_array (b);
      json_builder_add_int_value (b, (gint64) (t->offset * 4));
      json_builder_add_int_value (b, (gint64) ((t->offset + t->size) * 4));
      json_builder_end_array (b);
      json_builder_end_object (b);
    }
  json_builder_end_object (b);
  g_autoptr (JsonGenerator) gen = json_generator_new ();
  g_autoptr (JsonNode) root = json_builder_get_root (b);
  json_generator_set_root (gen, root);
  gsize json_length = 0;
  g_autofree char *json = json_generator_to_data (gen, &json_length);
  gsize header_length = (json_length + 7) / 8 * 8; /* padded with spaces, as the format allows */
  GByteArray *bytes = g_byte_array_sized_new (8 + header_length + net->n_params * 4);
  guint64 n_le = GUINT64_TO_LE ((guint64) header_length);
  g_byte_array_append (bytes, (const guint8 *) &n_le, 8);
  g_byte_array_append (bytes, (const guint8 *) json, json_length);
  for (gsize i = json_length; i < header_length; i++)
    g_byte_array_append (bytes, (const guint8 *) " ", 1);
  for (gsize i = 0; i < net->n_params; i++)
    {
      guint32 v;
      memcpy (&v, &net->params[i], 4);
      v = GUINT32_TO_LE (v);
      g_byte_array_append (bytes, (const guint8 *) &v, 4);
    }
  GError *local = NULL;
  /* g_file_set_contents writes a temporary file in the same folder and renames it. */
  gboolean ok = g_file_set_contents (path, (const char *) bytes->data, bytes->len, &local);
  g_byte_array_unref (bytes);
  if (!ok)
    {
      g_set_error (error, RETE_NN_ERROR, RETE_ERROR_IO, "could not save the model: %s",
                   local->message);
      g_error_free (local);
    }
  return ok;
}
