/* checkpoint.c — the resumable state of a training run in one file.
 *
 * Same container as the model file (safetensors: 8-byte little-endian header length, JSON
 * header naming each tensor's dtype, shape and byte range, then the raw little-endian
 * tensors), so any safetensors reader can open it. It holds what rete_model_save does not:
 * the Adam moments, the best weights so far and the counters of the run. Written to a
 * temporary file in the same folder and renamed over the old one, so a run killed at any
 * moment leaves either the previous checkpoint or the new one, never half of one.
 */
#include "train_private.h"

#include <errno.h>
#include <unistd.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <glib/gstdio.h>
#include <json-glib/json-glib.h>

#if G_BYTE_ORDER != G_LITTLE_ENDIAN
#error "checkpoint.c writes the host's floats as little-endian"
#endif

static const char *const tensor_names[4] = { "adam_m", "adam_v", "best_params", "params" };

static float **
tensor_slot (ReteTrainCheckpoint *c, int i)
{
  switch (i)
    {
    case 0: return &c->adam_m;
    case 1: return &c->adam_v;
    case 2: return &c->best_params;
    default: return &c->params;
    }
}

gboolean
rete_train_checkpoint_save (const ReteTrainCheckpoint *c, const char *path, GError **error)
{
  ReteTrainCheckpoint *cc = (ReteTrainCheckpoint *) c;
  GString *h = g_string_new ("{\"__metadata__\":{");
  char num[G_ASCII_DTOSTR_BUF_SIZE];
#define META_INT(key, value) g_string_append_printf (h, "\"" key "\":\"%" G_GINT64_FORMAT "\",", (gint64) (value))
#define META_U64(key, value) g_string_append_printf (h, "\"" key "\":\"%" G_GUINT64_FORMAT "\",", (guint64) (value))
#define META_DBL(key, value) g_string_append_printf (h, "\"" key "\":\"%s\",", \
          isfinite (value) ? g_ascii_dtostr (num, sizeof num, value) : "nan")
  META_INT ("levels", c->unet.levels);
  META_INT ("base_filters", c->unet.base_filters);
  META_INT ("convs_per_block", c->unet.convs_per_block);
  META_INT ("activation", c->unet.activation ? 1 : 0);
  META_INT ("in_channels", c->unet.in_channels);
  META_INT ("adam_step", c->adam_step);
  META_INT ("step", c->step);
  META_INT ("restarts", c->restarts);
  META_INT ("best_step", c->best_step);
  META_INT ("validations_since_best", c->validations_since_best);
  META_INT ("total_steps", c->total_steps);
  META_U64 ("seed", c->seed);
  META_U64 ("init_seed", c->init_seed);
  META_DBL ("best_auc", c->best_auc);
  META_DBL ("last_auc", c->last_auc);
  META_DBL ("seconds", c->seconds);
  g_string_append (h, "\"kind\":\"rete-training-checkpoint\"}");
  gsize bytes = c->n_params * sizeof (float);
  for (int i = 0; i < 4; i++)
    g_string_append_printf (h, ",\"%s\":{\"dtype\":\"F32\",\"shape\":[%" G_GSIZE_FORMAT "],"
                            "\"data_offsets\":[%" G_GSIZE_FORMAT ",%" G_GSIZE_FORMAT "]}",
                            tensor_names[i], c->n_params, i * bytes, (i + 1) * bytes);
  g_string_append_c (h, '}');
  while (h->len % 8 != 0) /* the header is padded with spaces to keep tensors aligned */
    g_string_append_c (h, ' ');
#undef META_INT
#undef META_U64
#undef META_DBL

  char *tmp = g_strdup_printf ("%s.tmp-%d", path, (int) getpid ());
  FILE *f = g_fopen (tmp, "wb");
  gboolean ok = f != NULL;
  if (ok)
    {
      guint64 len = GUINT64_TO_LE ((guint64) h->len);
      ok = fwrite (&len, 8, 1, f) == 1 && fwrite (h->str, 1, h->len, f) == h->len;
      for (int i = 0; ok && i < 4; i++)
        ok = fwrite (*tensor_slot (cc, i), sizeof (float), c->n_params, f) == c->n_params;
      ok = (fflush (f) == 0) && ok;
      ok = (fsync (fileno (f)) == 0) && ok;
      ok = (fclose (f) == 0) && ok;
    }
  int saved_errno = errno;
  if (ok && g_rename (tmp, path) != 0)
    {
      ok = FALSE;
      saved_errno = errno;
    }
  if (!ok)
    {
      g_unlink (tmp);
      g_set_error (error, RETE_NN_ERROR, RETE_ERROR_IO,
                   "could not write the training checkpoint %s: %s (check the folder exists "
                   "and has room)", path, g_strerror (saved_errno));
    }
  g_free (tmp);
  g_string_free (h, TRUE);
  return ok;
}

void
rete_train_checkpoint_clear (ReteTrainCheckpoint *c)
{
  for (int i = 0; i < 4; i++)
    {
      g_free (*tensor_slot (c, i));
      *tensor_slot (c, i) = NULL;
    }
}

static gboolean
meta_number (JsonObject *meta, const char *key, double *value, const char *path, GError **error)
{
  const char *s = json_object_has_member (meta, key)
                  ? json_object_get_string_member_with_default (meta, key, NULL) : NULL;
  if (s == NULL)
    {
      g_set_error (error, RETE_NN_ERROR, RETE_ERROR_FORMAT,
                   "training checkpoint %s lacks \"%s\"; it is not a Rete checkpoint or is "
                   "damaged: start without --resume", path, key);
      return FALSE;
    }
  *value = g_ascii_strcasecmp (s, "nan") == 0 ? NAN : g_ascii_strtod (s, NULL);
  return TRUE;
}

gboolean
rete_train_checkpoint_load (ReteTrainCheckpoint *c, const char *path, GError **error)
{
  char *contents = NULL;
  gsize size = 0;
  GError *local = NULL;
  memset (c, 0, sizeof *c);
  if (!g_file_get_contents (path, &contents, &size, &local))
    {
      g_set_error (error, RETE_NN_ERROR, RETE_ERROR_IO, "could not read the training "
                   "checkpoint %s: %s", path, local->message);
      g_error_free (local);
      return FALSE;
    }
  gboolean ok = FALSE;
  JsonParser *parser = NULL;
  guint64 len = 0;
  if (size >= 8)
    memcpy (&len, contents, 8);
  len = GUINT64_FROM_LE (len);
  if (size < 8 || len > size - 8)
    {
      g_set_error (error, RETE_NN_ERROR, RETE_ERROR_FORMAT, "training checkpoint %s is "
                   "truncated or not a safetensors file: start without --resume", path);
      goto out;
    }
  parser = json_parser_new ();
  if (!json_parser_load_from_data (parser, contents + 8, (gssize) len, &local))
    {
      g_set_error (error, RETE_NN_ERROR, RETE_ERROR_FORMAT, "training checkpoint %s has a "
                   "damaged header (%s): start without --resume", path, local->message);
      g_clear_error (&local);
      goto out;
    }
  JsonNode *root_node = json_parser_get_root (parser);
  JsonObject *root = JSON_NODE_HOLDS_OBJECT (root_node) ? json_node_get_object (root_node) : NULL;
  JsonObject *meta = root && json_object_has_member (root, "__metadata__")
                     ? json_object_get_object_member (root, "__metadata__") : NULL;
  if (meta == NULL || g_strcmp0 (json_object_get_string_member_with_default (meta, "kind", ""),
                                 "rete-training-checkpoint") != 0)
    {
      g_set_error (error, RETE_NN_ERROR, RETE_ERROR_FORMAT, "%s is not a Rete training "
                   "checkpoint (a model file cannot be resumed; use it as the start model)", path);
      goto out;
    }
  static const char *const keys[] = { "levels", "base_filters", "convs_per_block", "activation",
    "in_channels", "adam_step", "step", "restarts", "best_step", "validations_since_best",
    "total_steps", "seed", "init_seed", "best_auc", "last_auc", "seconds" };
  double v[G_N_ELEMENTS (keys)];
  for (guint i = 0; i < G_N_ELEMENTS (keys); i++)
    if (!meta_number (meta, keys[i], &v[i], path, error))
      goto out;
  c->unet.levels = (int) v[0];
  c->unet.base_filters = (int) v[1];
  c->unet.convs_per_block = (int) v[2];
  c->unet.activation = v[3] != 0;
  c->unet.in_channels = (int) v[4];
  c->adam_step = (gint64) v[5];
  c->step = (int) v[6];
  c->restarts = (int) v[7];
  c->best_step = (int) v[8];
  c->validations_since_best = (int) v[9];
  c->total_steps = (int) v[10];
  /* 64-bit seeds are re-read exactly from their strings */
  c->seed = g_ascii_strtoull (json_object_get_string_member (meta, "seed"), NULL, 10);
  c->init_seed = g_ascii_strtoull (json_object_get_string_member (meta, "init_seed"), NULL, 10);
  c->best_auc = v[13];
  c->last_auc = v[14];
  c->seconds = v[15];
  gsize n = 0;
  for (int i = 0; i < 4; i++)
    {
      JsonObject *t = json_object_has_member (root, tensor_names[i])
                      ? json_object_get_object_member (root, tensor_names[i]) : NULL;
      JsonArray *shape = t ? json_object_get_array_member (t, "shape") : NULL;
      JsonArray *offs = t ? json_object_get_array_member (t, "data_offsets") : NULL;
      if (shape == NULL || offs == NULL || json_array_get_length (shape) != 1
          || json_array_get_length (offs) != 2)
        {
          g_set_error (error, RETE_NN_ERROR, RETE_ERROR_FORMAT, "training checkpoint %s lacks "
                       "tensor %s: start without --resume", path, tensor_names[i]);
          goto out;
        }
      gsize count = (gsize) json_array_get_int_element (shape, 0);
      gsize begin = (gsize) json_array_get_int_element (offs, 0);
      gsize end = (gsize) json_array_get_int_element (offs, 1);
      if ((i > 0 && count != n) || count == 0 || end < begin || end - begin != count * sizeof (float)
          || end > size - 8 - len)
        {
          g_set_error (error, RETE_NN_ERROR, RETE_ERROR_FORMAT, "training checkpoint %s: "
                       "tensor %s is damaged or truncated: start without --resume", path,
                       tensor_names[i]);
          goto out;
        }
      n = count;
      float *data = g_new (float, count);
      memcpy (data, contents + 8 + len + begin, count * sizeof (float));
      *tensor_slot (c, i) = data;
    }
  c->n_params = n;
  ok = TRUE;
out:
  if (!ok)
    rete_train_checkpoint_clear (c);
  if (parser)
    g_object_unref (parser);
  g_free (contents);
  return ok;
}
