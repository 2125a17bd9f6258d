/* cmd_train.c — `rete train`: trains a U-Net model (nn/rete_train.h) on folders of
 * photographs and their manual vessel annotations (optional field-of-view masks), matched
 * by file name, with a fixed validation list; writes the model file with its preprocessing,
 * provenance and validation figures in the metadata, a CSV log and a resumable checkpoint.
 * The loading it shares with `rete sweep` is in train_data.c (cmd_train.h). */
#include "cmd_train.h"

#include <math.h>
#include <signal.h>
#include <stdio.h>
#include <string.h>

#include "rete_agreement.h"
#include "rete_fov.h"
#include "rete_preprocess.h"
#include "rete_learned.h"

/* ---- the command ----------------------------------------------------------------------------- */

static volatile sig_atomic_t interrupted = 0;

static void
on_interrupt (int signal_number)
{
  interrupted = 1;
}

typedef struct {
  gint64 start;
  int every;      /* print every this many steps */
  int calls;
  gboolean quiet;
} Printer;

static gboolean
print_progress (double fraction, const char *message, gpointer data)
{
  Printer *p = data;
  p->calls++;
  if (!p->quiet && (p->calls % p->every == 0 || fraction >= 1.0))
    fprintf (stderr, "rete train: %s (%.0f s)\n", message,
             (g_get_monotonic_time () - p->start) / 1e6);
  if (interrupted)
    fprintf (stderr, "rete train: interrupted; checkpoint written, resume with --resume\n");
  return !interrupted;
}

static gboolean
parse_augment (const char *text, guint *flags, GError **error)
{
  static const struct { const char *name; guint flag; } names[] = {
    { "flip", RETE_AUGMENT_FLIP }, { "rotate90", RETE_AUGMENT_ROTATE90 },
    { "rotate", RETE_AUGMENT_ROTATE }, { "brightness", RETE_AUGMENT_BRIGHTNESS },
    { "contrast", RETE_AUGMENT_CONTRAST }, { "gamma", RETE_AUGMENT_GAMMA },
    { "all", RETE_AUGMENT_ALL }, { "none", 0 },
  };
  *flags = 0;
  g_auto (GStrv) parts = g_strsplit (text, ",", -1);
  for (int i = 0; parts[i] != NULL; i++)
    {
      gboolean found = FALSE;
      for (gsize k = 0; k < G_N_ELEMENTS (names) && !found; k++)
        if (g_ascii_strcasecmp (g_strstrip (parts[i]), names[k].name) == 0)
          {
            *flags |= names[k].flag;
            found = TRUE;
          }
      if (!found)
        {
          g_set_error (error, RETE_CLI_ERROR, RETE_CLI_ERROR_USAGE, "--augment: '%s' is not one "
                       "of flip, rotate90, rotate, brightness, contrast, gamma, all, none",
                       parts[i]);
          return FALSE;
        }
    }
  return TRUE;
}

static const char description[] =
  "Trains a U-Net on photographs (files or folders) and their manual vessel annotations,\n"
  "matched by name (NAME.jpg with NAME.png, NAME_1stHO.png, NAME_manual1.png ... in the\n"
  "annotations folder; masks NAME_mask.png, NAME-fov.png ... in the masks folder, else the\n"
  "field of view is detected). Patches are drawn inside the field of view. The photographs\n"
  "named by --validate are held out; the model kept is the one with the best validation AUC.\n"
  "A checkpoint (OUTPUT.checkpoint) is rewritten as training goes: after an interruption\n"
  "(Ctrl-C, a killed run) the same command with --resume continues where it stopped.\n"
  "\n"
  "Examples:\n"
  "  rete train --annotations chase_db1/manual1 --masks chase_db1/mask \\\n"
  "      --validate Image_09L,Image_09R,Image_10L,Image_10R --size tiny \\\n"
  "      --output tiny.safetensors chase_db1/images\n"
  "  rete train --start-model standard --annotations corrected/ --steps 500 \\\n"
  "      --output mine.safetensors photos/      (fine-tune the shipped model)\n";

int
rete_cmd_train (int argc, char **argv)
{
  const char *command = argv[0];
  ReteTrainConfig config;
  rete_train_config_init (&config);
  ReteTrainDataOptions data = { 0 };
  char *size = NULL, *output = NULL, *checkpoint = NULL, *log = NULL, *validate = NULL;
  char *start_name = NULL, *augment = NULL;
  int levels = 0, filters = 0, convs = 0, print_every = 0;
  gint64 seed = 1;
  gboolean resume = FALSE, quiet = FALSE, evaluate = FALSE;
  double balance = -1;
  GOptionEntry entries[] = {
    { "annotations", 'a', 0, G_OPTION_ARG_FILENAME, &data.annotations,
      "Folder of the manual vessel annotations (0/255 images)", "FOLDER" },
    { "masks", 'm', 0, G_OPTION_ARG_FILENAME, &data.masks,
      "Folder of field-of-view masks (default: detect the field of view)", "FOLDER" },
    { "validate", 'v', 0, G_OPTION_ARG_STRING, &validate,
      "Photographs held out for validation, by name: Image_09L,Image_09R,...", "NAMES" },
    { "output", 'o', 0, G_OPTION_ARG_FILENAME, &output, "The model file to write (.safetensors)",
      "FILE" },
    { "size", 0, 0, G_OPTION_ARG_STRING, &size,
      "Network size: standard (3 levels, 16 filters, ~1e5 weights) or tiny (3 levels, 2 filters, "
      "1,883 weights); default standard", "NAME" },
    { "levels", 0, 0, G_OPTION_ARG_INT, &levels, "Levels of the U-Net, 1..5 (overrides --size)", "N" },
    { "filters", 0, 0, G_OPTION_ARG_INT, &filters, "Filters of the first level, doubling per level", "N" },
    { "convs", 0, 0, G_OPTION_ARG_INT, &convs, "Convolutions per block, 1 or 2", "N" },
    { "steps", 0, 0, G_OPTION_ARG_INT, &config.steps, "Optimiser steps (default 2000)", "N" },
    { "batch", 0, 0, G_OPTION_ARG_INT, &config.batch_size, "Patches per step (default 16)", "N" },
    { "patch", 0, 0, G_OPTION_ARG_INT, &config.patches.patch_size,
      "Patch side in pixels, a multiple of 2^(levels-1) (default 64)", "PX" },
    { "learning-rate", 0, 0, G_OPTION_ARG_DOUBLE, &config.learning_rate,
      "Adam's base rate (default 1e-3), warm-up then cosine decay", "RATE" },
    { "weight-decay", 0, 0, G_OPTION_ARG_DOUBLE, &config.weight_decay,
      "Decoupled weight decay (default 1e-4)", "W" },
    { "dice-weight", 0, 0, G_OPTION_ARG_DOUBLE, &config.dice_weight,
      "Weight of the soft Dice loss beside cross-entropy (default 0.5)", "W" },
    { "balance", 0, 0, G_OPTION_ARG_DOUBLE, &balance,
      "Fraction of patches centred on a vessel pixel, 0..1 (default: uniform in the FOV)", "F" },
    { "augment", 0, 0, G_OPTION_ARG_STRING, &augment,
      "Augmentations: all (default), none, or flip,rotate90,rotate,brightness,contrast,gamma", "LIST" },
    { "rotation", 0, 0, G_OPTION_ARG_DOUBLE, &config.patches.max_rotation_degrees,
      "Largest small rotation in degrees (default 15)", "DEG" },
    { "validate-every", 0, 0, G_OPTION_ARG_INT, &config.validate_every,
      "Steps between validations (default 200)", "N" },
    { "patience", 0, 0, G_OPTION_ARG_INT, &config.patience,
      "Stop after this many validations without improvement (default 0: never)", "N" },
    { "seed", 0, 0, G_OPTION_ARG_INT64, &seed, "Seed of initialisation and patches (default 1)", "N" },
    { "start-model", 0, 0, G_OPTION_ARG_FILENAME, &start_name,
      "Fine-tune this model (name or file) instead of starting afresh", "MODEL" },
    { "checkpoint", 0, 0, G_OPTION_ARG_FILENAME, &checkpoint,
      "Checkpoint file (default OUTPUT.checkpoint)", "FILE" },
    { "resume", 0, 0, G_OPTION_ARG_NONE, &resume, "Continue from the checkpoint when it exists", NULL },
    { "log", 0, 0, G_OPTION_ARG_FILENAME, &log, "CSV log of loss and validation AUC (default "
      "OUTPUT without extension + .csv)", "FILE" },
    { "channel", 0, 0, G_OPTION_ARG_STRING, &data.channel,
      "Channel read from the photograph: green (default), luminance, red, blue", "NAME" },
    { "no-clahe", 0, 0, G_OPTION_ARG_NONE, &data.no_clahe, "No CLAHE before standardising", NULL },
    { "print-every", 0, 0, G_OPTION_ARG_INT, &print_every, "Progress line every N steps "
      "(default: each validation)", "N" },
    { "evaluate", 0, 0, G_OPTION_ARG_NONE, &evaluate, "Do not train: figures of the start "
      "model on the validation photographs, written into its metadata in OUTPUT", NULL },
    { "quiet", 'q', 0, G_OPTION_ARG_NONE, &quiet, "Only errors and the summary", NULL },
    { NULL },
  };
  GOptionContext *context = rete_cli_context_new (command, "PHOTO|FOLDER…",
                                                  "Train a U-Net vessel model.", description);
  g_option_context_add_main_entries (context, entries, NULL);
  int status = RETE_EXIT_OK;
  GError *error = NULL;
  ReteModel *prep = NULL, *start = NULL, *model = NULL;
  GPtrArray *pairs = NULL;
  GArray *training = NULL, *validation = NULL;
  char **meta = NULL;
  GPtrArray *metadata = NULL;
  char *base = NULL, *checkpoint_default = NULL, *log_default = NULL, *line = NULL;
  /* the command line as typed, for the model's provenance (before parsing consumes it) */
  GString *typed = g_string_new ("rete train");
  for (int i = 1; i < argc; i++)
    {
      char *quoted = strpbrk (argv[i], " \t'\"$") ? g_shell_quote (argv[i]) : g_strdup (argv[i]);
      g_string_append_printf (typed, " %s", quoted);
      g_free (quoted);
    }
  line = g_string_free (typed, FALSE);
  if (!rete_cli_parse (context, command, &argc, &argv))
    {
      status = RETE_EXIT_USAGE;
      goto out;
    }
  if (argc < 2 || output == NULL)
    {
      status = rete_cli_usage_error (command, argc < 2 ? "no photographs given"
                                              : "--output FILE is needed (the model to write)");
      goto out;
    }
  if (!rete_train_size_preset (size, &config.unet, &error)
      || (augment != NULL && !parse_augment (augment, &config.patches.augment, &error)))
    {
      status = rete_cli_usage_error (command, "%s", error->message);
      goto out;
    }
  if (levels > 0) config.unet.levels = levels;
  if (filters > 0) config.unet.base_filters = filters;
  if (convs > 0) config.unet.convs_per_block = convs;
  config.patches.balance = balance;
  config.seed = (guint64) seed;
  if (start_name != NULL)
    {
      char *path = rete_cli_find_model (start_name, &error);
      start = path ? rete_model_load (path, &error) : NULL;
      g_free (path);
      if (start == NULL)
        goto failed;
      config.start_model = start;
    }
  else if ((prep = rete_train_preprocessing_model (&data, &error)) == NULL)
    {
      status = rete_cli_usage_error (command, "%s", error->message);
      goto out;
    }
  if (!quiet)
    fprintf (stderr, "rete train: reading and preparing the photographs...\n");
  pairs = rete_train_pairs_load (argv + 1, &data, start ? start : prep, &error);
  if (pairs == NULL || !rete_train_pairs_split (pairs, validate, &training, &validation, &error))
    goto failed;
  config.unet.in_channels = ((ReteTrainPair *) pairs->pdata[0])->input->channels;

  base = g_str_has_suffix (output, ".safetensors")
                          ? g_strndup (output, strlen (output) - strlen (".safetensors"))
                          : g_strdup (output);
  checkpoint_default = g_strconcat (output, ".checkpoint", NULL);
  log_default = g_strconcat (base, ".csv", NULL);
  config.checkpoint_path = checkpoint ? checkpoint : checkpoint_default;
  config.log_path = log ? log : log_default;
  config.resume = resume;

  /* preprocessing, data and the command that made the model, in every file written */
  metadata = g_ptr_array_new_with_free_func (g_free);
  meta = rete_train_preprocessing_metadata (start ? start : prep);
  for (int i = 0; meta[i] != NULL; i++)
    g_ptr_array_add (metadata, g_strdup (meta[i]));
  const char *pairs_meta[] = {
    "command", line, "validation_photographs", validate ? validate : "",
    "size", levels || filters || convs ? "custom" : (size ? size : "standard"),
    "start_model", start_name,
  };
  for (gsize i = 0; i < G_N_ELEMENTS (pairs_meta); i += 2)
    if (pairs_meta[i + 1] != NULL)
      {
        g_ptr_array_add (metadata, g_strdup (pairs_meta[i]));
        g_ptr_array_add (metadata, g_strdup (pairs_meta[i + 1]));
      }
  g_ptr_array_add (metadata, NULL);
  config.metadata = (const char *const *) metadata->pdata;
  if (!rete_train_config_check (&config, &error))
    {
      status = rete_cli_usage_error (command, "%s", error->message);
      goto out;
    }
  if (evaluate)
    {
      if (start == NULL || validation->len == 0)
        {
          status = rete_cli_usage_error (command, "--evaluate needs --start-model and --validate");
          goto out;
        }
      model = g_steal_pointer (&start);
      config.start_model = NULL;
      goto figures;
    }
  config.best_model_path = output; /* the best model so far is always on disk */
  if (!quiet)
    fprintf (stderr, "rete train: %u training and %u validation photographs; log %s, "
             "checkpoint %s\n", training->len, validation->len, config.log_path,
             config.checkpoint_path);

  signal (SIGINT, on_interrupt);
  signal (SIGTERM, on_interrupt);
  Printer printer = { g_get_monotonic_time (), print_every > 0 ? print_every : config.validate_every,
                      0, quiet };
  ReteTrainReport report;
  model = rete_train (&config, (ReteTrainSample *) training->data, (int) training->len,
                      (ReteTrainSample *) validation->data, (int) validation->len,
                      print_progress, &printer, &report, &error);
  signal (SIGINT, SIG_DFL);
  signal (SIGTERM, SIG_DFL);
  if (model == NULL)
    goto failed;
  if (!quiet)
    printf ("model %s: %" G_GSIZE_FORMAT " weights, %d steps (best at %d), %d restart(s), "
            "%.0f s this run%s\n", output, rete_unet_n_params (rete_model_net (model)),
            report.step, report.best_step, report.restarts, report.seconds,
            report.stopped_early ? ", stopped early" : "");
figures:
  if (validation->len > 0)
    {
      ReteTrainFigures f;
      if (!rete_train_figures (model, validation, &f, &error))
        goto failed;
      char buf[32];
#define META(key, value) (g_snprintf (buf, sizeof buf, "%.4f", value), rete_model_set_meta (model, key, buf))
      META ("validation_auc", f.auc);
      META ("validation_accuracy", f.accuracy);
      META ("validation_sensitivity", f.sensitivity);
      META ("validation_specificity", f.specificity);
#undef META
      rete_model_set_meta (model, "validation_threshold", "0.5");
      rete_model_set_meta (model, "validation_reference", data.annotations);
      printf ("validation (%u photographs, inside the FOV, threshold 0.5): AUC %.4f accuracy "
              "%.4f sensitivity %.4f specificity %.4f; inference %.2f s per photograph\n",
              validation->len, f.auc, f.accuracy, f.sensitivity, f.specificity,
              f.seconds_per_image);
    }
  if (!rete_model_save (model, output, &error))
    goto failed;
  goto out;
failed:
  fprintf (stderr, "%s: %s\n", command, error ? error->message : "failed");
  status = RETE_EXIT_FAILED;
out:
  g_clear_error (&error);
  rete_model_free (model);
  rete_model_free (prep);
  rete_model_free (start);
  if (training) g_array_unref (training);
  if (validation) g_array_unref (validation);
  if (pairs) g_ptr_array_unref (pairs);
  if (metadata) g_ptr_array_unref (metadata);
  g_strfreev (meta);
  g_option_context_free (context);
  g_free (data.annotations); g_free (data.masks); g_free (data.channel);
  g_free (size); g_free (output); g_free (checkpoint); g_free (log); g_free (validate);
  g_free (start_name); g_free (augment);
  g_free (base); g_free (checkpoint_default); g_free (log_default); g_free (line);
  return status;
}
