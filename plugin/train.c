/* train.c — "Train Vessel Model": trains the U-Net (librete's rete_train) on photographs with
 * manual annotations — from folders (photographs, annotations and optional field-of-view masks
 * matched by file name, read through GIMP's own file loaders) and from the open images in
 * which a reference layer is marked — starting from scratch or from a shipped or own model.
 * The best model so far is written to the user's GIMP profile folder (rete/models) at every
 * improvement of the validation AUC, so that stopping keeps it; the model then appears in the
 * vessel map's chooser. */
#include "config.h"

#include <math.h>
#include <string.h>

#include "train.h"
#include "rete_learned.h"
#include "rete_nn.h"
#include "rete_train.h"

#define N_ARGS 11

void
train_config_init (TrainConfig *c)
{
  memset (c, 0, sizeof *c);
  c->use_open_images = TRUE;
  c->size_preset = TRAIN_SIZE_STANDARD;
  c->steps = 2000;
}

static const char *image_suffixes[] = { ".png", ".jpg", ".jpeg", ".tif", ".tiff", ".ppm", ".pgm",
                                        ".gif", ".bmp", NULL };

static gboolean
is_image_name (const char *name)
{
  g_autofree char *lower = g_ascii_strdown (name, -1);

  for (int i = 0; image_suffixes[i]; i++)
    if (g_str_has_suffix (lower, image_suffixes[i]))
      return TRUE;
  return FALSE;
}

static char *
stem_of (const char *name)
{
  const char *dot = strrchr (name, '.');

  return dot ? g_strndup (name, dot - name) : g_strdup (name);
}

/* The file in `folder` whose stem equals `stem` or starts with it followed by '_' or '-'
 * (Image_01L.jpg ↔ Image_01L.png, Image_01L_1stHO.png, Image_01L-mask.png). */
static char *
find_companion (const char *folder, const char *stem)
{
  GDir *dir = g_dir_open (folder, 0, NULL);
  const char *entry;
  char *found = NULL;
  gsize n = strlen (stem);

  if (!dir)
    return NULL;
  while (!found && (entry = g_dir_read_name (dir)))
    {
      g_autofree char *other = stem_of (entry);

      if (is_image_name (entry)
          && (strcmp (other, stem) == 0
              || (strncmp (other, stem, n) == 0 && (other[n] == '_' || other[n] == '-'))))
        found = g_build_filename (folder, entry, NULL);
    }
  g_dir_close (dir);
  return found;
}

/* An image file through GIMP's loaders, as one ReteImage (photograph or grey map). */
static ReteImage *
load_through_gimp (const char *path, gboolean photograph, GError **error)
{
  gint32 image = gimp_file_load (GIMP_RUN_NONINTERACTIVE, path, path);
  ReteImage *result;

  if (image < 0)
    {
      g_set_error (error, PLUGIN_ERROR, 0, _("GIMP could not open “%s”: %s"), path,
                   gimp_get_pdb_error ());
      return NULL;
    }
  if (gimp_image_base_type (image) == GIMP_INDEXED)
    gimp_image_convert_rgb (image);
  {
    gint32 drawable = gimp_image_merge_visible_layers (image, GIMP_CLIP_TO_IMAGE);

    result = photograph ? plugin_read_photograph (drawable, error) : plugin_read_map (drawable, error);
  }
  gimp_image_delete (image);
  if (!result)
    g_prefix_error (error, "%s: ", path);
  return result;
}

void
train_pair_free (TrainPair *pair)
{
  g_free (pair->name);
  rete_image_free (pair->photo);
  rete_image_free (pair->target);
  rete_image_free (pair->fov);
  g_free (pair->input);
  g_free (pair);
}

static gboolean
finish_pair (TrainPair *pair, const char *where, GError **error)
{
  if (!rete_image_check_same_size (pair->target, "annotation", pair->photo, "photograph", error)
      || (pair->fov && !rete_image_check_same_size (pair->fov, "field-of-view mask", pair->photo,
                                                    "photograph", error)))
    {
      g_prefix_error (error, "%s: ", where);
      return FALSE;
    }
  rete_image_binarise (pair->target, 0.5f);
  if (!pair->fov)
    {
      ReteFovParams fov_params;

      rete_fov_params_init (&fov_params);
      if (!(pair->fov = rete_fov_detect (pair->photo, &fov_params, error)))
        {
          g_prefix_error (error, "%s: ", where);
          return FALSE;
        }
    }
  rete_image_binarise (pair->fov, 0.5f);
  return TRUE;
}

gboolean
train_pairs_from_folders (const TrainConfig *c, GPtrArray *pairs, GError **error)
{
  GDir *dir;
  const char *entry;
  g_autoptr (GPtrArray) names = g_ptr_array_new_with_free_func (g_free);

  if (!*c->photos)
    return TRUE;
  if (!*c->annotations)
    {
      g_set_error (error, PLUGIN_ERROR, 0,
                   _("A folder of photographs was given but no folder of annotations: choose the "
                     "folder holding the manual vessel maps."));
      return FALSE;
    }
  if (!(dir = g_dir_open (c->photos, 0, NULL)))
    {
      g_set_error (error, PLUGIN_ERROR, 0, _("The folder of photographs “%s” cannot be read."),
                   c->photos);
      return FALSE;
    }
  while ((entry = g_dir_read_name (dir)))
    if (is_image_name (entry))
      g_ptr_array_add (names, g_strdup (entry));
  g_dir_close (dir);
  g_ptr_array_sort (names, (GCompareFunc) (void (*) (void)) g_strcmp0);
  if (names->len == 0)
    {
      g_set_error (error, PLUGIN_ERROR, 0, _("The folder “%s” holds no photographs."), c->photos);
      return FALSE;
    }
  for (guint i = 0; i < names->len; i++)
    {
      const char *name = names->pdata[i];
      g_autofree char *stem = stem_of (name);
      g_autofree char *photo_path = g_build_filename (c->photos, name, NULL);
      g_autofree char *annotation = find_companion (c->annotations, stem);
      g_autofree char *mask = *c->masks ? find_companion (c->masks, stem) : NULL;
      TrainPair *pair;

      if (!annotation)
        {
          g_set_error (error, PLUGIN_ERROR, 0,
                       _("No annotation for the photograph “%s” in “%s” (looked for a file "
                         "named %s.* or %s_*)."), name, c->annotations, stem, stem);
          return FALSE;
        }
      if (*c->masks && !mask)
        {
          g_set_error (error, PLUGIN_ERROR, 0, _("No field-of-view mask for “%s” in “%s”."),
                       name, c->masks);
          return FALSE;
        }
      gimp_progress_set_text_printf (_("Reading %s"), name);
      pair = g_new0 (TrainPair, 1);
      pair->name = g_strdup (stem);
      g_ptr_array_add (pairs, pair);
      if (!(pair->photo = load_through_gimp (photo_path, TRUE, error))
          || !(pair->target = load_through_gimp (annotation, FALSE, error))
          || (mask && !(pair->fov = load_through_gimp (mask, FALSE, error)))
          || !finish_pair (pair, photo_path, error))
        return FALSE;
    }
  return TRUE;
}

/* A layer that marks the reference of an open image: named "Reference…" (any case, or the
 * translated word), or the binary vessel layer this plug-in made (corrected by hand). */
gint32
train_reference_layer (gint32 image)
{
  gint n;
  g_autofree gint *layers = gimp_image_get_layers (image, &n);
  gint32 found = -1;

  for (int i = 0; i < n && found < 0; i++)
    {
      g_autofree char *name = gimp_item_get_name (layers[i]);
      g_autofree char *lower = g_utf8_strdown (name, -1);
      g_autofree char *word = g_utf8_strdown (_("Reference"), -1);

      if (g_str_has_prefix (lower, "reference") || g_str_has_prefix (lower, word))
        found = layers[i];
      else if (gimp_item_is_group (layers[i]))
        {
          gint m;
          g_autofree gint *children = gimp_item_get_children (layers[i], &m);
          g_autofree char *binary = g_utf8_strdown (_("Binary vessel map"), -1);

          for (int j = 0; j < m && found < 0; j++)
            {
              g_autofree char *child = gimp_item_get_name (children[j]);
              g_autofree char *child_lower = g_utf8_strdown (child, -1);

              if (g_str_has_prefix (child_lower, binary))
                found = children[j];
            }
        }
    }
  return found;
}

/* The photograph of an open image: its bottom layer. */
static gint32
photograph_layer (gint32 image)
{
  gint n;
  g_autofree gint *layers = gimp_image_get_layers (image, &n);

  return n > 0 && !gimp_item_is_group (layers[n - 1]) ? layers[n - 1] : -1;
}

gboolean
train_pair_from_image (gint32 image, gint32 reference, GPtrArray *pairs, GError **error)
{
  gint32 photo = photograph_layer (image);
  g_autofree char *name = gimp_image_get_name (image);
  TrainPair *pair;

  if (photo < 0 || photo == reference)
    {
      g_set_error (error, PLUGIN_ERROR, 0,
                   _("The image “%s” has no photograph layer at the bottom of its layer stack."),
                   name);
      return FALSE;
    }
  pair = g_new0 (TrainPair, 1);
  pair->name = stem_of (name);
  g_ptr_array_add (pairs, pair);
  return (pair->photo = plugin_read_photograph (photo, error))
         && (pair->target = plugin_read_map (reference, error))
         && finish_pair (pair, name, error);
}

gboolean
train_pairs_from_open_images (GPtrArray *pairs, GError **error)
{
  gint n;
  g_autofree gint *images = gimp_image_list (&n);

  for (int i = 0; i < n; i++)
    {
      gint32 reference = train_reference_layer (images[i]);

      if (reference > 0 && !train_pair_from_image (images[i], reference, pairs, error))
        return FALSE;
    }
  return TRUE;
}

/* ---- training ---- */

/* A model that only carries the preprocessing (for the inputs and the new model's metadata):
 * the start model's, or the defaults for a model trained from scratch. */
static ReteModel *
preprocessing_model (const ReteModel *start, GError **error)
{
  ReteLearnedPreprocess pre;
  ReteUnetConfig arch;
  ReteUnet *net;
  ReteModel *model;

  if (start && !rete_learned_preprocess_from_model (start, &pre, error))
    return NULL;
  if (!start)
    rete_learned_preprocess_init (&pre);
  rete_unet_config_init (&arch);
  arch.levels = 1;
  arch.base_filters = 1;
  arch.convs_per_block = 1;
  if (start)
    arch.in_channels = rete_unet_config (rete_model_net (start))->in_channels;
  if (!(net = rete_unet_new (&arch, 1, error)))
    return NULL;
  model = rete_model_new (net);
  rete_learned_preprocess_to_model (&pre, model);
  return model;
}

char *
train_model_path (const char *name)
{
  g_autofree char *dir = plugin_models_user_dir ();
  g_autofree char *file = g_strconcat (name, ".safetensors", NULL);

  return g_build_filename (dir, file, NULL);
}

static gboolean
check_name (const char *name, GError **error)
{
  if (!*name || strchr (name, G_DIR_SEPARATOR) || name[0] == '.' || strlen (name) > 100)
    {
      g_set_error (error, PLUGIN_ERROR, 0,
                   _("“%s” cannot name a model: use letters, digits, '-' or '_', no '/'."), name);
      return FALSE;
    }
  return TRUE;
}

gboolean
train_core (const TrainConfig *c, GPtrArray *pairs, ReteProgressFunc progress, gpointer data,
            TrainOutcome *outcome, GError **error)
{
  static const char *const keys[] = { "channel", "clahe", "clahe_kernel_width",
                                      "clahe_kernel_height", "clahe_clip_limit", "clahe_bins",
                                      "normalisation" };
  g_autoptr (ReteModel) start = NULL;
  g_autoptr (ReteModel) prep = NULL;
  g_autoptr (ReteModel) model = NULL;
  g_autoptr (GArray) training = g_array_new (FALSE, FALSE, sizeof (ReteTrainSample));
  g_autoptr (GArray) validation = g_array_new (FALSE, FALSE, sizeof (ReteTrainSample));
  g_autoptr (GPtrArray) meta = g_ptr_array_new ();
  g_autofree char *dir = plugin_models_user_dir ();
  g_autofree char *checkpoint = NULL, *log = NULL, *data_note = NULL;
  ReteTrainConfig config;
  ReteTrainReport report = { 0 };
  int channels, n_validation;

  memset (outcome, 0, sizeof *outcome);
  outcome->validation_auc = NAN;
  if (!check_name (c->model_name, error))
    return FALSE;
  if (pairs->len == 0)
    {
      g_set_error (error, PLUGIN_ERROR, 0,
                   _("There is nothing to train on: choose folders of photographs and "
                     "annotations, or mark a reference layer (a layer named “Reference”) in "
                     "open photographs."));
      return FALSE;
    }
  if (c->steps < 1 || c->steps > 1000000)
    {
      g_set_error (error, PLUGIN_ERROR, 0, _("Train: steps must lie in [1, 1000000]."));
      return FALSE;
    }
  if (*c->start_model && !(start = plugin_model_load (c->start_model, error)))
    return FALSE;
  if (!(prep = preprocessing_model (start, error)))
    return FALSE;
  channels = rete_unet_config (rete_model_net (prep))->in_channels;
  for (guint i = 0; i < pairs->len; i++)
    {
      TrainPair *p = pairs->pdata[i];

      if (!p->input && !rete_learned_prepare_input (p->photo, p->fov, prep, &p->input, error))
        {
          g_prefix_error (error, "%s: ", p->name);
          return FALSE;
        }
    }
  /* Validation: a fixed share of the pairs (every fifth, at least one) when there are three or
   * more; the rest train. */
  n_validation = pairs->len >= 3 ? MAX (1, (int) pairs->len / 5) : 0;
  for (guint i = 0; i < pairs->len; i++)
    {
      TrainPair *p = pairs->pdata[i];
      ReteTrainSample s = { p->name, channels, p->photo->height, p->photo->width, p->input,
                            p->target->data, p->fov->data };
      gboolean held_out = n_validation > 0 && i % 5 == 4;

      g_array_append_val (held_out ? validation : training, s);
    }
  if (n_validation > 0 && validation->len == 0)
    {
      /* Fewer than five pairs: the last one validates. */
      g_array_append_val (validation, g_array_index (training, ReteTrainSample, training->len - 1));
      g_array_remove_index (training, training->len - 1);
    }

  g_mkdir_with_parents (dir, 0700);
  outcome->model_path = train_model_path (c->model_name);
  checkpoint = g_strdup_printf ("%s/.%s.checkpoint", dir, c->model_name);
  log = g_strdup_printf ("%s/%s.log.csv", dir, c->model_name);
  rete_train_config_init (&config);
  if (c->size_preset == TRAIN_SIZE_TINY)
    config.unet.base_filters = 2;
  config.unet.in_channels = channels;
  config.steps = c->steps;
  config.validate_every = MIN (config.validate_every, MAX (1, c->steps / 5));
  config.checkpoint_path = checkpoint;
  config.best_model_path = outcome->model_path;
  config.log_path = log;
  config.start_model = start;
  data_note = g_strdup_printf ("%u pairs from %s%s%s (GIMP plug-in)", pairs->len,
                               *c->photos ? c->photos : "", *c->photos && c->use_open_images ? " and " : "",
                               c->use_open_images ? "open images" : "");
  for (gsize i = 0; i < G_N_ELEMENTS (keys); i++)
    {
      const char *value = rete_model_get_meta (prep, keys[i]);

      if (value)
        {
          g_ptr_array_add (meta, (gpointer) keys[i]);
          g_ptr_array_add (meta, (gpointer) value);
        }
    }
  g_ptr_array_add (meta, "name");
  g_ptr_array_add (meta, (gpointer) c->model_name);
  g_ptr_array_add (meta, "data");
  g_ptr_array_add (meta, data_note);
  g_ptr_array_add (meta, NULL);
  config.metadata = (const char *const *) meta->pdata;
  if (!rete_train_config_check (&config, error))
    return FALSE;

  model = rete_train (&config, (ReteTrainSample *) training->data, training->len,
                      (ReteTrainSample *) validation->data, validation->len,
                      progress, data, &report, error);
  outcome->steps_done = report.step;
  outcome->validation_auc = report.best_validation_auc;
  if (!model)
    {
      /* Stopped: the best model so far stays where training wrote it. */
      outcome->stopped = g_error_matches (*error, RETE_NN_ERROR, RETE_ERROR_CANCELLED)
                         || g_error_matches (*error, RETE_VESSEL_ERROR, RETE_ERROR_CANCELLED);
      outcome->kept = g_file_test (outcome->model_path, G_FILE_TEST_IS_REGULAR);
      return FALSE;
    }
  rete_model_set_meta (model, "name", c->model_name);
  return rete_model_save (model, outcome->model_path, error);
}

/* ---- registration and run ---- */

void
train_query (void)
{
  static const GimpParamDef args[] = {
    { GIMP_PDB_INT32,    "run-mode",          "The run mode { RUN-INTERACTIVE (0), RUN-NONINTERACTIVE (1), RUN-WITH-LAST-VALS (2) }" },
    { GIMP_PDB_IMAGE,    "image",             "Current image (not needed; may be -1)" },
    { GIMP_PDB_DRAWABLE, "drawable",          "Current drawable (not needed; may be -1)" },
    { GIMP_PDB_STRING,   "photos-folder",     "Folder of photographs (\"\" = none)" },
    { GIMP_PDB_STRING,   "annotations-folder", "Folder of manual vessel annotations, matched to the photographs by file name" },
    { GIMP_PDB_STRING,   "masks-folder",      "Folder of field-of-view masks, matched by file name (\"\" = detect the field of view)" },
    { GIMP_PDB_INT32,    "use-open-images",   "Also train on open images with a reference layer (a layer named \"Reference...\", or the plug-in's binary vessel layer) { FALSE (0), TRUE (1) }" },
    { GIMP_PDB_INT32,    "size-preset",       "Network size { TINY (0), STANDARD (1) }" },
    { GIMP_PDB_INT32,    "steps",             "Optimiser steps (1..1000000; 2000 is a usual run)" },
    { GIMP_PDB_STRING,   "start-model",       "Start from this model (a name from plug-in-rete-models, or a file); \"\" = from scratch" },
    { GIMP_PDB_STRING,   "model-name",        "Name of the new model (letters, digits, '-', '_'); saved in the GIMP profile's rete/models" },
  };
  static const GimpParamDef return_vals[] = {
    { GIMP_PDB_STRING, "model-path",     "The new model file" },
    { GIMP_PDB_FLOAT,  "validation-auc", "Best validation ROC AUC (NaN without validation photographs)" },
    { GIMP_PDB_INT32,  "steps-done",     "Steps trained" },
  };
  G_STATIC_ASSERT (G_N_ELEMENTS (args) == N_ARGS);

  gimp_install_procedure (TRAIN_PROC,
                          N_("Train a vessel model on your own annotated photographs"),
                          "Trains the small U-Net of the learned vessel map on photographs with "
                          "manual vessel annotations: from folders (photographs, annotations "
                          "and optional field-of-view masks, matched by file name) and from open "
                          "images with a reference layer. Starts from scratch or from a model; "
                          "shows the loss and the validation AUC; stopping keeps the best model "
                          "so far. Models are kept in the GIMP profile folder (rete/models) and "
                          "appear in the vessel map's model chooser. A research and grading aid, "
                          "not a diagnostic device: results must be checked by a qualified person "
                          "under local regulations and licensed practice.",
                          PLUG_IN_AUTHOR, PLUG_IN_AUTHOR, PLUG_IN_YEAR,
                          N_("_Train Vessel Model..."),
                          "",
                          GIMP_PLUGIN,
                          G_N_ELEMENTS (args), G_N_ELEMENTS (return_vals),
                          args, return_vals);
  gimp_plugin_menu_register (TRAIN_PROC, PLUG_IN_MENU);
}

void
train_run (const gchar *name, gint nparams, const GimpParam *param,
           gint *nreturn_vals, GimpParam **return_vals)
{
  static GimpParam values[4];
  static char *path;
  GimpRunMode run_mode = param[0].data.d_int32;
  TrainConfig config;
  TrainOutcome outcome = { 0 };
  g_autoptr (GPtrArray) pairs = g_ptr_array_new_with_free_func ((GDestroyNotify) train_pair_free);
  GError *error = NULL;

  *return_vals = values;
  train_config_init (&config);
  {
    GDateTime *now = g_date_time_new_now_local ();
    g_autofree char *stamp = g_date_time_format (now, "my-model-%Y%m%d-%H%M");

    g_strlcpy (config.model_name, stamp, sizeof config.model_name);
    g_date_time_unref (now);
  }
  switch (run_mode)
    {
    case GIMP_RUN_INTERACTIVE:
      gimp_get_data (TRAIN_PROC, &config);
      if (!train_dialog (&config, &outcome, &error))
        {
          if (!error)
            {
              values[0].type = GIMP_PDB_STATUS;
              values[0].data.d_status = GIMP_PDB_CANCEL;
              *nreturn_vals = 1;
              return;
            }
          goto fail;
        }
      gimp_set_data (TRAIN_PROC, &config, sizeof config);
      break;
    case GIMP_RUN_NONINTERACTIVE:
    case GIMP_RUN_WITH_LAST_VALS:
      if (run_mode == GIMP_RUN_NONINTERACTIVE)
        {
          if (nparams != N_ARGS)
            {
              g_autofree char *message =
                g_strdup_printf (_("%s takes %d arguments, %d were given."), TRAIN_PROC, N_ARGS,
                                 nparams);
              plugin_return_error (values, nreturn_vals, GIMP_PDB_CALLING_ERROR, message);
              return;
            }
          g_strlcpy (config.photos, param[3].data.d_string ? param[3].data.d_string : "", sizeof config.photos);
          g_strlcpy (config.annotations, param[4].data.d_string ? param[4].data.d_string : "", sizeof config.annotations);
          g_strlcpy (config.masks, param[5].data.d_string ? param[5].data.d_string : "", sizeof config.masks);
          config.use_open_images = param[6].data.d_int32 != 0;
          config.size_preset = param[7].data.d_int32;
          config.steps = param[8].data.d_int32;
          g_strlcpy (config.start_model, param[9].data.d_string ? param[9].data.d_string : "", sizeof config.start_model);
          if (param[10].data.d_string && *param[10].data.d_string)
            g_strlcpy (config.model_name, param[10].data.d_string, sizeof config.model_name);
          if (config.size_preset != TRAIN_SIZE_TINY && config.size_preset != TRAIN_SIZE_STANDARD)
            {
              plugin_return_error (values, nreturn_vals, GIMP_PDB_CALLING_ERROR,
                                   _("Train: size-preset must be 0 (tiny) or 1 (standard)."));
              return;
            }
        }
      else
        gimp_get_data (TRAIN_PROC, &config);
      gimp_progress_init (_("Training the vessel model"));
      if (!train_pairs_from_folders (&config, pairs, &error)
          || (config.use_open_images && !train_pairs_from_open_images (pairs, &error))
          || !train_core (&config, pairs, plugin_progress, NULL, &outcome, &error))
        goto fail;
      gimp_progress_end ();
      break;
    }

  g_free (path);
  path = g_steal_pointer (&outcome.model_path);
  values[0].type = GIMP_PDB_STATUS;
  values[0].data.d_status = GIMP_PDB_SUCCESS;
  values[1].type = GIMP_PDB_STRING;
  values[1].data.d_string = path;
  values[2].type = GIMP_PDB_FLOAT;
  values[2].data.d_float = outcome.validation_auc;
  values[3].type = GIMP_PDB_INT32;
  values[3].data.d_int32 = outcome.steps_done;
  *nreturn_vals = 4;
  return;

fail:
  if (run_mode != GIMP_RUN_INTERACTIVE)
    gimp_progress_end ();
  if (outcome.kept)
    g_prefix_error (&error, _("Training stopped; the best model so far is kept in %s. "),
                    outcome.model_path);
  g_free (outcome.model_path);
  plugin_show_error (run_mode, error->message);
  plugin_return_gerror (values, nreturn_vals, GIMP_PDB_EXECUTION_ERROR, error);
}
