/* train_data.c — what `rete train` and `rete sweep` share (cmd_train.h): training pairs read
 * from folders of photographs, manual annotations and optional field-of-view masks matched by
 * file name, prepared with the preprocessing a model declares; the split into training and
 * validation by a list of names; the validation figures of a model; the size presets. */
#include "cmd_train.h"

#include <math.h>
#include <stdio.h>
#include <string.h>

#include "rete_agreement.h"
#include "rete_fov.h"
#include "rete_preprocess.h"
#include "rete_learned.h"

/* ---- data ---------------------------------------------------------------------------------- */

static const char *const annotation_suffixes[] = { "_1stHO", "_manual1", "-vessels", "_vessels",
                                                   NULL };
static const char *const mask_suffixes[] = { "_mask", "-mask", "-fov", "_fov", NULL };
/* Rete's own outputs and the second observer's annotations are never photographs. */
static const char *const skip_suffixes[] = { "-fov", "-vessels", "-vessel-probability", "-roc",
                                             "_1stHO", "_2ndHO", "_mask", NULL };

void
rete_train_pair_free (ReteTrainPair *pair)
{
  if (pair == NULL)
    return;
  g_free (pair->name);
  rete_image_free (pair->input);
  rete_image_free (pair->target);
  rete_image_free (pair->fov);
  g_free (pair);
}

ReteModel *
rete_train_preprocessing_model (const ReteTrainDataOptions *options, GError **error)
{
  ReteLearnedPreprocess pre;
  rete_learned_preprocess_init (&pre);
  if (options->channel != NULL && !rete_channel_from_name (options->channel, &pre.channel, error))
    return NULL;
  pre.use_clahe = !options->no_clahe;
  /* the smallest network: it only carries the metadata until the real one is trained */
  ReteUnetConfig arch;
  rete_unet_config_init (&arch);
  arch.levels = 1;
  arch.base_filters = 1;
  arch.convs_per_block = 1;
  ReteUnet *net = rete_unet_new (&arch, 1, error);
  if (net == NULL)
    return NULL;
  ReteModel *model = rete_model_new (net);
  rete_learned_preprocess_to_model (&pre, model);
  return model;
}

char **
rete_train_preprocessing_metadata (const ReteModel *model)
{
  static const char *const keys[] = { "channel", "clahe", "clahe_kernel_width",
                                      "clahe_kernel_height", "clahe_clip_limit", "clahe_bins",
                                      "normalisation" };
  GPtrArray *out = g_ptr_array_new ();
  for (gsize i = 0; i < G_N_ELEMENTS (keys); i++)
    {
      const char *value = rete_model_get_meta (model, keys[i]);
      if (value != NULL)
        {
          g_ptr_array_add (out, g_strdup (keys[i]));
          g_ptr_array_add (out, g_strdup (value));
        }
    }
  g_ptr_array_add (out, NULL);
  return (char **) g_ptr_array_free (out, FALSE);
}

static ReteImage *
load_binary (const char *path, const char *what, const ReteImage *photo, const char *photo_path,
             GError **error)
{
  ReteImage *image = rete_cli_load_grey (path, what, error);
  if (image == NULL)
    return NULL;
  if (image->width != photo->width || image->height != photo->height)
    {
      g_set_error (error, RETE_CLI_ERROR, RETE_CLI_ERROR_INPUT,
                   "%s %s is %d×%d but photograph %s is %d×%d; give the %s made for this "
                   "photograph", what, path, image->width, image->height, photo_path,
                   photo->width, photo->height, what);
      rete_image_free (image);
      return NULL;
    }
  gsize grey = rete_image_binarise (image, 0.5f);
  if (grey > 0)
    fprintf (stderr, "rete train: warning: %s %s is not binary (%" G_GSIZE_FORMAT " pixels "
             "neither black nor white); thresholded at half\n", what, path, grey);
  return image;
}

static ReteTrainPair *
load_pair (const ReteCliInput *input, const ReteTrainDataOptions *options,
           const ReteModel *model, GError **error)
{
  g_autoptr (ReteImage) photo = rete_io_load (input->path, error);
  if (photo == NULL)
    return NULL;
  g_autofree char *annotation_path = rete_cli_find_companion (options->annotations, input->stem,
                                                              annotation_suffixes, "annotation",
                                                              error);
  if (annotation_path == NULL)
    return NULL;
  g_autoptr (ReteImage) target = load_binary (annotation_path, "annotation", photo, input->path,
                                              error);
  if (target == NULL)
    return NULL;
  g_autoptr (ReteImage) fov = NULL;
  if (options->masks != NULL)
    {
      g_autofree char *mask_path = rete_cli_find_companion (options->masks, input->stem,
                                                            mask_suffixes, "FOV mask", error);
      if (mask_path == NULL)
        return NULL;
      fov = load_binary (mask_path, "FOV mask", photo, input->path, error);
    }
  else
    {
      ReteFovParams fp;
      rete_fov_params_init (&fp);
      fov = rete_fov_detect (photo, &fp, error);
    }
  if (fov == NULL)
    return NULL;
  float *data = NULL;
  if (!rete_learned_prepare_input (photo, fov, model, &data, error))
    return NULL;
  int channels = rete_unet_config (rete_model_net (model))->in_channels;
  ReteImage *prepared = rete_image_new (photo->width, photo->height, channels, error);
  if (prepared != NULL)
    memcpy (prepared->data, data, sizeof (float) * rete_image_n_pixels (photo) * channels);
  g_free (data);
  if (prepared == NULL)
    return NULL;
  ReteTrainPair *pair = g_new0 (ReteTrainPair, 1);
  pair->name = g_strdup (input->stem);
  pair->input = prepared;
  pair->target = g_steal_pointer (&target);
  pair->fov = g_steal_pointer (&fov);
  return pair;
}

GPtrArray *
rete_train_pairs_load (char **arguments, const ReteTrainDataOptions *options,
                       const ReteModel *model, GError **error)
{
  if (options->annotations == NULL)
    {
      g_set_error (error, RETE_CLI_ERROR, RETE_CLI_ERROR_USAGE,
                   "--annotations FOLDER is needed: the manual vessel maps to learn from");
      return NULL;
    }
  GPtrArray *inputs = rete_cli_expand_inputs (arguments, FALSE, skip_suffixes, error);
  if (inputs == NULL)
    return NULL;
  if (inputs->len == 0)
    {
      g_set_error (error, RETE_CLI_ERROR, RETE_CLI_ERROR_INPUT,
                   "no photographs given: the training set is empty");
      g_ptr_array_unref (inputs);
      return NULL;
    }
  GPtrArray *pairs = g_ptr_array_new_with_free_func ((GDestroyNotify) rete_train_pair_free);
  for (guint i = 0; i < inputs->len; i++)
    {
      const ReteCliInput *input = inputs->pdata[i];
      ReteTrainPair *pair = load_pair (input, options, model, error);
      if (pair == NULL)
        {
          g_prefix_error (error, "%s: ", input->path);
          g_ptr_array_unref (pairs);
          pairs = NULL;
          break;
        }
      g_ptr_array_add (pairs, pair);
    }
  g_ptr_array_unref (inputs);
  return pairs;
}

static ReteTrainSample
sample_of (const ReteTrainPair *p)
{
  return (ReteTrainSample) { p->name, p->input->channels, p->input->height, p->input->width,
                             p->input->data, p->target->data, p->fov->data };
}

gboolean
rete_train_pairs_split (GPtrArray *pairs, const char *validation_names, GArray **training,
                        GArray **validation, GError **error)
{
  g_auto (GStrv) names = validation_names ? g_strsplit (validation_names, ",", -1) : NULL;
  *training = g_array_new (FALSE, FALSE, sizeof (ReteTrainSample));
  *validation = g_array_new (FALSE, FALSE, sizeof (ReteTrainSample));
  for (int k = 0; names != NULL && names[k] != NULL; k++)
    {
      g_strstrip (names[k]);
      gboolean found = FALSE;
      for (guint i = 0; i < pairs->len && !found; i++)
        found = g_strcmp0 (((ReteTrainPair *) pairs->pdata[i])->name, names[k]) == 0;
      if (!found && names[k][0] != '\0')
        {
          g_set_error (error, RETE_CLI_ERROR, RETE_CLI_ERROR_USAGE, "validation photograph "
                       "'%s' is not among the photographs given (use their names without "
                       "extension, e.g. Image_09L)", names[k]);
          g_array_unref (*training);
          g_array_unref (*validation);
          *training = *validation = NULL;
          return FALSE;
        }
    }
  for (guint i = 0; i < pairs->len; i++)
    {
      const ReteTrainPair *p = pairs->pdata[i];
      ReteTrainSample s = sample_of (p);
      gboolean held_out = names != NULL && g_strv_contains ((const char *const *) names, p->name);
      g_array_append_val (held_out ? *validation : *training, s);
    }
  if ((*training)->len == 0)
    {
      g_set_error (error, RETE_CLI_ERROR, RETE_CLI_ERROR_INPUT, "every photograph is in the "
                   "validation list: the training set is empty");
      g_array_unref (*training);
      g_array_unref (*validation);
      *training = *validation = NULL;
      return FALSE;
    }
  return TRUE;
}

gboolean
rete_train_figures (const ReteModel *model, GArray *validation, ReteTrainFigures *f,
                    GError **error)
{
  /* pooled over the validation photographs: one image of all their FOV pixels side by side */
  memset (f, 0, sizeof *f);
  gsize total = 0;
  for (guint i = 0; i < validation->len; i++)
    {
      const ReteTrainSample *s = &g_array_index (validation, ReteTrainSample, i);
      total += (gsize) s->width * s->height;
    }
  if (total == 0 || total > RETE_MAX_PIXELS)
    {
      g_set_error (error, RETE_CLI_ERROR, RETE_CLI_ERROR_INPUT, "no validation photographs");
      return FALSE;
    }
  /* rows of 1024 pixels; the tail of the last row lies outside the mask */
  int rows = (int) ((total + 1023) / 1024);
  g_autoptr (ReteImage) scores = rete_image_new (1024, rows, 1, error);
  g_autoptr (ReteImage) reference = scores ? rete_image_new (1024, rows, 1, error) : NULL;
  g_autoptr (ReteImage) mask = reference ? rete_image_new (1024, rows, 1, error) : NULL;
  if (mask == NULL)
    return FALSE;
  gsize at = 0;
  gint64 start = g_get_monotonic_time ();
  for (guint i = 0; i < validation->len; i++)
    {
      const ReteTrainSample *s = &g_array_index (validation, ReteTrainSample, i);
      gsize n = (gsize) s->width * s->height;
      if (!rete_model_infer (model, s->input, s->channels, s->height, s->width,
                             scores->data + at, NULL, NULL, error))
        return FALSE;
      memcpy (reference->data + at, s->target, n * sizeof (float));
      memcpy (mask->data + at, s->mask, n * sizeof (float));
      at += n;
    }
  f->seconds_per_image = (g_get_monotonic_time () - start) / 1e6 / validation->len;
  g_autoptr (ReteAgreement) a = rete_agreement_compute (scores, reference, mask, 0.5, 2, error);
  if (a == NULL)
    return FALSE;
  f->auc = a->auc;
  f->accuracy = a->rates.accuracy;
  f->sensitivity = a->rates.sensitivity;
  f->specificity = a->rates.specificity;
  return TRUE;
}

gboolean
rete_train_size_preset (const char *name, ReteUnetConfig *config, GError **error)
{
  rete_unet_config_init (config);
  if (name == NULL || g_ascii_strcasecmp (name, "standard") == 0)
    return TRUE; /* 3 levels, 16 base filters, 2 convolutions per block: about 1e5 weights */
  if (g_ascii_strcasecmp (name, "tiny") == 0)
    {
      config->base_filters = 2; /* 3 levels, 2 base filters, 2 convolutions: 1,883 weights */
      return TRUE;
    }
  g_set_error (error, RETE_CLI_ERROR, RETE_CLI_ERROR_USAGE, "--size '%s': use standard or tiny "
               "(or --levels, --filters, --convs)", name);
  return FALSE;
}
