/* model_load.c — reading a model file (safetensors, see model.c) and checking everything a
 * damaged, foreign or hand-edited file can get wrong: the header length against the file size,
 * the JSON, the metadata (strings only, a known format version, an architecture in range), and
 * every tensor against the network that architecture builds — name, dtype, shape, data offsets
 * inside the file, finite values. Each failure names what is wrong and what to do.
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
    if (rete_model_get_meta (model, m->data) == NULL)
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
