/* model.c — the model file: a U-Net and its metadata in safetensors.
 *
 * safetensors (Hugging Face's open tensor container, format described in its README):
 *   8 bytes   N, the header length, unsigned little-endian;
 *   N bytes   a JSON object: "__metadata__": {string: string}, and per tensor
 *             "name": {"dtype": "F32", "shape": [...], "data_offsets": [begin, end]},
 *             offsets in bytes from the start of the data; the header is padded with spaces;
 *   the data  raw little-endian tensors, C order.
 * The architecture lives in the metadata (levels, base_filters, convs_per_block, activation,
 * in_channels, format_version); the loader rebuilds the network from it and checks every tensor
 * against that network: names, dtype, shape, offsets inside the file, finite values.
 */
#include "unet_private.h"

#include <glib/gstdio.h>
#include <json-glib/json-glib.h>
#include <math.h>
#include <string.h>

/* A header longer than this is not a model of this library (ours are a few kilobytes). */
#define MAX_HEADER_BYTES ((guint64) 16 << 20)
/* The largest U-Net (5 levels, 64 filters, 2 convolutions, 3 channels) has 31 million
 * parameters, 124 MB; a file much larger than that is refused before it is read. */
#define MAX_FILE_BYTES ((guint64) 512 << 20)

struct _ReteModel {
  ReteUnet *net;
  GHashTable *meta; /* string -> string */
  int tile;         /* inference core tile side, 0 = chosen for memory */
};

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

/* ---- loading ---- */

static gboolean
format_error (GError **error, const char *name, const char *format, ...) G_GNUC_PRINTF (3, 4);

static gboolean
format_error (GError **error, const char *name, const char *format, ...)
{
  va_list args;
  va_start (args, format);
  g_autofree char *what = g_strdup_vprintf (format, args);
  va_end (args);
  g_set_error (error, RETE_NN_ERROR, RETE_ERROR_FORMAT, "model file %s: %s", name, what);
  return FALSE;
}

static gboolean
meta_int (JsonObject *meta, const char *key, int *value, const char *name, GError **error)
{
  const char *text = json_object_has_member (meta, key)
                       ? json_object_get_string_member (meta, key) : NULL;
  gint64 v;
  if (text == NULL)
    return format_error (error, name, "metadata has no \"%s\"; it was not written as a Rete "
                         "model (a U-Net's metadata names levels, base_filters, "
                         "convs_per_block, activation and in_channels)", key);
  if (!g_ascii_string_to_signed (text, 10, 0, 1 << 20, &v, NULL))
    return format_error (error, name, "metadata \"%s\" is \"%s\", not a whole number", key, text);
  *value = (int) v;
  return TRUE;
}

static gboolean
read_config (JsonObject *meta, ReteUnetConfig *cf, const char *name, GError **error)
{
  const char *version = json_object_has_member (meta, "format_version")
                          ? json_object_get_string_member (meta, "format_version") : NULL;
  if (version == NULL)
    return format_error (error, name, "metadata has no \"format_version\"; it was not written "
                         "as a Rete model");
  if (strcmp (version, RETE_MODEL_FORMAT_VERSION) != 0)
    return format_error (error, name, "format version \"%s\" is not one this Rete reads (%s); "
                         "use a newer Rete or re-export the model", version,
                         RETE_MODEL_FORMAT_VERSION);
  if (!meta_int (meta, "levels", &cf->levels, name, error)
      || !meta_int (meta, "base_filters", &cf->base_filters, name, error)
      || !meta_int (meta, "convs_per_block", &cf->convs_per_block, name, error)
      || !meta_int (meta, "in_channels", &cf->in_channels, name, error))
    return FALSE;
  const char *act = json_object_has_member (meta, "activation")
                      ? json_object_get_string_member (meta, "activation") : NULL;
  if (act == NULL || (strcmp (act, "relu") != 0 && strcmp (act, "identity") != 0))
    return format_error (error, name, "metadata \"activation\" is %s%s%s; expected \"relu\" or "
                         "\"identity\"", act ? "\"" : "", act ? act : "missing", act ? "\"" : "");
  cf->activation = strcmp (act, "relu") == 0;
  GError *local = NULL;
  if (!rete_unet_config_check (cf, &local))
    {
      format_error (error, name, "%s", local->message);
      g_error_free (local);
      return FALSE;
    }
  return TRUE;
}

/* Checks one tensor entry of the header against the network and copies its data. */
static gboolean
read_tensor (ReteUnet *net, const char *member, JsonNode *node, const guint8 *data,
             guint64 data_size, gboolean *seen, const char *name, GError **error)
{
  int i = rete_unet_find_tensor (net, member);
  if (i < 0)
    return format_error (error, name, "tensor \"%s\" is not part of the U-Net its metadata "
                         "describes; the file and its metadata disagree", member);
  if (seen[i])
    return format_error (error, name, "tensor \"%s\" appears twice", member);
  const UnetTensor *t = &net->tensors[i];
  JsonObject *o = JSON_NODE_HOLDS_OBJECT (node) ? json_node_get_object (node) : NULL;
  JsonNode *dtype = o ? json_object_get_member (o, "dtype") : NULL;
  JsonNode *shape = o ? json_object_get_member (o, "shape") : NULL;
  JsonNode *offsets = o ? json_object_get_member (o, "data_offsets") : NULL;
  if (dtype == NULL || shape == NULL || offsets == NULL || !JSON_NODE_HOLDS_ARRAY (shape)
      || !JSON_NODE_HOLDS_ARRAY (offsets) || json_node_get_value_type (dtype) != G_TYPE_STRING)
    return format_error (error, name, "tensor \"%s\" lacks dtype, shape or data_offsets", member);
  if (strcmp (json_node_get_string (dtype), "F32") != 0)
    return format_error (error, name, "tensor \"%s\" is %s; Rete reads F32 (float32) only — "
                         "convert the weights to float32 before export", member,
                         json_node_get_string (dtype));
  JsonArray *sa = json_node_get_array (shape), *oa = json_node_get_array (offsets);
  gboolean shape_ok = json_array_get_length (sa) == (guint) t->n_dims;
  for (int d = 0; shape_ok && d < t->n_dims; d++)
    {
      JsonNode *e = json_array_get_element (sa, d);
      shape_ok = json_node_get_value_type (e) == G_TYPE_INT64 && json_node_get_int (e) == t->shape[d];
    }
  if (!shape_ok)
    {
      g_autoptr (JsonGenerator) gen = json_generator_new ();
      json_generator_set_root (gen, shape);
      g_autofree char *got = json_generator_to_data (gen, NULL);
      char want[64];
      if (t->n_dims == 4)
        g_snprintf (want, sizeof want, "[%d,%d,%d,%d]", t->shape[0], t->shape[1], t->shape[2], t->shape[3]);
      else
        g_snprintf (want, sizeof want, "[%d]", t->shape[0]);
      return format_error (error, name, "tensor \"%s\" has shape %s but the architecture in the "
                           "metadata needs %s", member, got, want);
    }
  JsonNode *b0 = json_array_get_length (oa) == 2 ? json_array_get_element (oa, 0) : NULL;
  JsonNode *b1 = json_array_get_length (oa) == 2 ? json_array_get_element (oa, 1) : NULL;
  if (b0 == NULL || json_node_get_value_type (b0) != G_TYPE_INT64
      || json_node_get_value_type (b1) != G_TYPE_INT64)
    return format_error (error, name, "tensor \"%s\" has malformed data_offsets", member);
  gint64 begin = json_node_get_int (b0), end = json_node_get_int (b1);
  if (begin < 0 || end < begin || (guint64) (end - begin) != t->size * 4)
    return format_error (error, name, "tensor \"%s\" has data_offsets [%" G_GINT64_FORMAT ", %"
                         G_GINT64_FORMAT "], which do not hold its %zu values", member, begin,
                         end, t->size);
  if ((guint64) end > data_size)
    return format_error (error, name, "the file is truncated: tensor \"%s\" ends at byte %"
                         G_GINT64_FORMAT " of the data but the data has %" G_GUINT64_FORMAT
                         " bytes; copy the file again", member, end, data_size);
  float *dst = net->params + t->offset;
  for (gsize k = 0; k < t->size; k++)
    {
      guint32 v;
      memcpy (&v, data + begin + 4 * k, 4);
      v = GUINT32_FROM_LE (v);
      memcpy (&dst[k], &v, 4);
      if (!isfinite (dst[k]))
        return format_error (error, name, "tensor \"%s\" holds a non-finite value (NaN or "
                             "infinity) at index %zu; the model is broken (training diverged?)",
                             member, k);
    }
  seen[i] = TRUE;
  return TRUE;
}

ReteModel *
rete_model_load_from_data (const guint8 *data, gsize size, const char *name, GError **error)
{
  if (size < 8)
    {
      format_error (error, name, "%zu bytes is too short for a model file (not a safetensors "
                    "file, or truncated)", size);
      return NULL;
    }
  guint64 header_length;
  memcpy (&header_length, data, 8);
  header_length = GUINT64_FROM_LE (header_length);
  if (header_length == 0 || header_length > MAX_HEADER_BYTES || header_length > size - 8)
    {
      format_error (error, name, "header length %" G_GUINT64_FORMAT " is impossible for a file "
                    "of %zu bytes; the file is not a safetensors model or is truncated",
                    header_length, size);
      return NULL;
    }
  g_autoptr (JsonParser) parser = json_parser_new ();
  GError *local = NULL;
  if (!json_parser_load_from_data (parser, (const char *) data + 8, (gssize) header_length, &local))
    {
      format_error (error, name, "the header is not valid JSON (%s)", local->message);
      g_error_free (local);
      return NULL;
    }
  JsonNode *root = json_parser_get_root (parser);
  if (root == NULL || !JSON_NODE_HOLDS_OBJECT (root))
    {
      format_error (error, name, "the header is not a JSON object");
      return NULL;
    }
  JsonObject *header = json_node_get_object (root);
  JsonNode *meta_node = json_object_get_member (header, "__metadata__");
  if (meta_node == NULL || !JSON_NODE_HOLDS_OBJECT (meta_node))
    {
      format_error (error, name, "the header has no \"__metadata__\" object; a Rete model keeps "
                    "its architecture there");
      return NULL;
    }
  JsonObject *meta = json_node_get_object (meta_node);
  g_autoptr (GList) meta_members = json_object_get_members (meta);
  for (GList *m = meta_members; m != NULL; m = m->next)
    {
      JsonNode *v = json_object_get_member (meta, m->data);
      if (!JSON_NODE_HOLDS_VALUE (v) || json_node_get_value_type (v) != G_TYPE_STRING)
        {
          format_error (error, name, "metadata \"%s\" is not a string (safetensors metadata "
                        "holds strings only)", (const char *) m->data);
          return NULL;
        }
    }
  ReteUnetConfig cf;
  if (!read_config (meta, &cf, name, error))
    return NULL;
  ReteUnet *net = rete_unet_new (&cf, 0, error);
  if (net == NULL)
    return NULL;
  const guint8 *tensor_data = data + 8 + header_length;
  guint64 data_size = size - 8 - header_length;
  gboolean seen[UNET_MAX_TENSORS] = { FALSE };
  gboolean ok = TRUE;
  g_autoptr (GList) members = json_object_get_members (header);
  for (GList *m = members; ok && m != NULL; m = m->next)
    if (strcmp (m->data, "__metadata__") != 0)
      ok = read_tensor (net, m->data, json_object_get_member (header, m->data), tensor_data,
                        data_size, seen, name, error);
  for (int i = 0; ok && i < net->n_tensors; i++)
    if (!seen[i])
      ok = format_error (error, name, "tensor \"%s\" is missing; the file does not hold the "
                         "U-Net its metadata describes", net->tensors[i].name);
  if (!ok)
    {
      rete_unet_free (net);
      return NULL;
    }
  ReteModel *model = rete_model_new (net);
  for (GList *m = meta_members; m != NULL; m = m->next)
    if (g_hash_table_lookup (model->meta, m->data) == NULL)
      rete_model_set_meta (model, m->data, json_object_get_string_member (meta, m->data));
  return model;
}

ReteModel *
rete_model_load (const char *path, GError **error)
{
  g_autofree char *contents = NULL;
  gsize length = 0;
  GError *local = NULL;
  if (path == NULL)
    {
      g_set_error (error, RETE_NN_ERROR, RETE_ERROR_INVALID_ARGUMENT, "no model file given");
      return NULL;
    }
  GStatBuf st;
  if (g_stat (path, &st) == 0 && (guint64) st.st_size > MAX_FILE_BYTES)
    {
      g_set_error (error, RETE_NN_ERROR, RETE_ERROR_FORMAT,
                   "model file %s is %.1f GB, far more than any U-Net this library builds "
                   "(the largest is about 125 MB); it is not a Rete model", path,
                   st.st_size / 1e9);
      return NULL;
    }
  if (!g_file_get_contents (path, &contents, &length, &local))
    {
      g_set_error (error, RETE_NN_ERROR, RETE_ERROR_IO, "could not read the model file: %s",
                   local->message);
      g_error_free (local);
      return NULL;
    }
  g_autofree char *base = g_path_get_basename (path);
  return rete_model_load_from_data ((const guint8 *) contents, length, base, error);
}
