/* cmd_sweep.c — `rete sweep`: trains a grid of U-Net sizes, each several times with other
 * seeds, on the same photographs and validation list, and prints for each size the weights,
 * the validation AUC as mean ± standard deviation over the repetitions, and the inference
 * time per photograph. Choosing the network size by such a grid is common practice; the
 * standard deviation shows how much of a difference between sizes is luck of the seed. */
#include "cmd_train.h"

#include <math.h>
#include <stdio.h>
#include <string.h>

/* One cell of the grid: SIZE[-linear][@N], SIZE being tiny, standard or
 * LEVELSxFILTERSxCONVS such as 3x8x2; "-linear" turns the activation off (identity instead
 * of ReLU); "@N" trains on N of the training photographs, another N for each repetition. */
typedef struct {
  ReteUnetConfig arch;
  int photographs; /* 0 = all */
} SweepCell;

static gboolean
parse_cell (const char *text, SweepCell *cell, GError **error)
{
  g_auto (GStrv) at = g_strsplit (text, "@", 2);
  cell->photographs = 0;
  if (at[1] != NULL)
    {
      char *end = NULL;
      gint64 n = g_ascii_strtoll (at[1], &end, 10);
      if (end == at[1] || *end != '\0' || n < 1 || n > 10000)
        {
          g_set_error (error, RETE_CLI_ERROR, RETE_CLI_ERROR_USAGE, "--sizes: '%s': after @ give "
                       "the number of training photographs, 1 or more (e.g. 3x16x2@4)", text);
          return FALSE;
        }
      cell->photographs = (int) n;
    }
  char *size = at[0];
  gboolean linear = g_str_has_suffix (size, "-linear");
  if (linear)
    size[strlen (size) - strlen ("-linear")] = '\0';
  ReteUnetConfig *config = &cell->arch;
  if (g_ascii_strcasecmp (size, "tiny") == 0 || g_ascii_strcasecmp (size, "standard") == 0)
    {
      if (!rete_train_size_preset (size, config, error))
        return FALSE;
    }
  else
    {
      rete_unet_config_init (config);
      int l, f, k;
      char tail;
      if (sscanf (size, "%dx%dx%d%c", &l, &f, &k, &tail) != 3)
        {
          g_set_error (error, RETE_CLI_ERROR, RETE_CLI_ERROR_USAGE, "--sizes: '%s' is not tiny, "
                       "standard or LEVELSxFILTERSxCONVS (e.g. 3x8x2), optionally followed by "
                       "-linear and @PHOTOGRAPHS", text);
          return FALSE;
        }
      config->levels = l;
      config->base_filters = f;
      config->convs_per_block = k;
    }
  config->activation = !linear;
  return rete_unet_config_check (config, error);
}

/* `n` of the training samples for repetition `seed`: a seeded Fisher–Yates shuffle of all of
 * them, cut to n (all, in order, when n is 0 or not smaller). */
static GArray *
choose_photographs (GArray *training, int n, guint64 seed)
{
  GArray *chosen = g_array_copy (training);
  if (n <= 0 || (guint) n >= chosen->len)
    return chosen;
  guint64 rng = rete_rng_derive (seed, 0x5EED, n);
  ReteTrainSample *s = (ReteTrainSample *) chosen->data;
  for (guint i = chosen->len - 1; i > 0; i--)
    {
      guint j = MIN ((guint) (rete_rng_uniform (&rng) * (i + 1)), i);
      ReteTrainSample t = s[i];
      s[i] = s[j];
      s[j] = t;
    }
  g_array_set_size (chosen, n);
  return chosen;
}

static const char description[] =
  "For each size, trains --repeats networks (seeds 1..N) with the settings of `rete train`\n"
  "and reports weights, validation AUC mean ± sd and inference seconds per photograph. Sizes\n"
  "are tiny, standard or LEVELSxFILTERSxCONVS; add -linear to turn the activation off and\n"
  "@N to train on N of the training photographs (other ones for each repetition). Keep runs\n"
  "short (--steps): a grid multiplies.\n"
  "\n"
  "Example:\n"
  "  rete sweep --annotations chase_db1/manual1 --masks chase_db1/mask \\\n"
  "      --validate Image_09L,Image_09R,Image_10L,Image_10R \\\n"
  "      --sizes 3x2x2,3x4x2,3x8x2,3x16x2 --repeats 3 --steps 300 chase_db1/images\n";

int
rete_cmd_sweep (int argc, char **argv)
{
  const char *command = argv[0];
  ReteTrainConfig base;
  rete_train_config_init (&base);
  ReteTrainDataOptions data = { 0 };
  char *sizes = NULL, *validate = NULL, *csv = NULL;
  int repeats = 3;
  gboolean quiet = FALSE;
  base.steps = 300;
  GOptionEntry entries[] = {
    { "annotations", 'a', 0, G_OPTION_ARG_FILENAME, &data.annotations,
      "Folder of the manual vessel annotations", "FOLDER" },
    { "masks", 'm', 0, G_OPTION_ARG_FILENAME, &data.masks,
      "Folder of field-of-view masks (default: detect)", "FOLDER" },
    { "validate", 'v', 0, G_OPTION_ARG_STRING, &validate,
      "Photographs held out for validation, by name (needed)", "NAMES" },
    { "sizes", 0, 0, G_OPTION_ARG_STRING, &sizes,
      "Sizes to try, comma-separated (default tiny,3x4x2,3x8x2,standard)", "LIST" },
    { "repeats", 0, 0, G_OPTION_ARG_INT, &repeats, "Trainings per size, seeds 1..N (default 3)", "N" },
    { "steps", 0, 0, G_OPTION_ARG_INT, &base.steps, "Steps per training (default 300)", "N" },
    { "batch", 0, 0, G_OPTION_ARG_INT, &base.batch_size, "Patches per step (default 16)", "N" },
    { "patch", 0, 0, G_OPTION_ARG_INT, &base.patches.patch_size, "Patch side (default 64)", "PX" },
    { "learning-rate", 0, 0, G_OPTION_ARG_DOUBLE, &base.learning_rate,
      "Adam's base rate (default 1e-3)", "RATE" },
    { "validate-every", 0, 0, G_OPTION_ARG_INT, &base.validate_every,
      "Steps between validations (default 200)", "N" },
    { "dice-weight", 0, 0, G_OPTION_ARG_DOUBLE, &base.dice_weight,
      "Weight of the soft Dice term beside binary cross-entropy (default 0.5; 0 = BCE only)",
      "W" },
    { "csv", 0, 0, G_OPTION_ARG_FILENAME, &csv, "Also write one row per training here", "FILE" },
    { "quiet", 'q', 0, G_OPTION_ARG_NONE, &quiet, "Only the table", NULL },
    { NULL },
  };
  GOptionContext *context = rete_cli_context_new (command, "PHOTO|FOLDER…",
                                                  "Train a grid of U-Net sizes and compare them.",
                                                  description);
  g_option_context_add_main_entries (context, entries, NULL);
  int status = RETE_EXIT_OK;
  GError *error = NULL;
  ReteModel *prep = NULL;
  GPtrArray *pairs = NULL;
  GArray *training = NULL, *validation = NULL;
  GString *rows = g_string_new ("size,levels,filters,convs,activation,photographs,weights,seed,"
                                "validation_auc,"
                                "best_step,restarts,train_seconds,infer_seconds_per_image\n");
  char **names = NULL, **meta = NULL;
  SweepCell *cells = NULL; /* one per name */
  if (!rete_cli_parse (context, command, &argc, &argv))
    {
      status = RETE_EXIT_USAGE;
      goto out;
    }
  if (argc < 2 || validate == NULL || repeats < 1 || repeats > 100)
    {
      status = rete_cli_usage_error (command, argc < 2 ? "no photographs given"
                                     : validate == NULL ? "--validate NAMES is needed"
                                                        : "--repeats must be 1..100");
      goto out;
    }
  names = g_strsplit (sizes ? sizes : "tiny,3x4x2,3x8x2,standard", ",", -1);
  cells = g_new0 (SweepCell, g_strv_length (names));
  for (int i = 0; names[i] != NULL; i++)
    {
      if (!parse_cell (g_strstrip (names[i]), &cells[i], &error))
        {
          status = rete_cli_usage_error (command, "%s", error->message);
          goto out;
        }
    }
  if ((prep = rete_train_preprocessing_model (&data, &error)) == NULL)
    goto failed;
  pairs = rete_train_pairs_load (argv + 1, &data, prep, &error);
  if (pairs == NULL || !rete_train_pairs_split (pairs, validate, &training, &validation, &error))
    goto failed;
  if (validation->len == 0)
    {
      status = rete_cli_usage_error (command, "the validation list is empty");
      goto out;
    }
  meta = rete_train_preprocessing_metadata (prep);
  printf ("| size | levels × filters × convs | activation | training photographs | weights | "
          "validation AUC (mean ± sd, n=%d) | inference s/photograph |\n"
          "|---|---|---|---|---|---|---|\n", repeats);
  for (int i = 0; names[i] != NULL; i++)
    {
      double sum = 0, sum2 = 0, infer = 0;
      gsize weights = 0;
      const SweepCell cell = cells[i];
      ReteUnetConfig arch = cell.arch;
      int photographs = cell.photographs > 0 ? MIN (cell.photographs, (int) training->len)
                                             : (int) training->len;
      arch.in_channels = ((ReteTrainPair *) pairs->pdata[0])->input->channels;
      for (int r = 1; r <= repeats; r++)
        {
          ReteTrainConfig c = base;
          c.unet = arch;
          c.seed = (guint64) r;
          c.metadata = (const char *const *) meta;
          ReteTrainReport report;
          GArray *chosen = choose_photographs (training, cell.photographs, (guint64) r);
          ReteModel *model = rete_train (&c, (ReteTrainSample *) chosen->data, (int) chosen->len,
                                         (ReteTrainSample *) validation->data,
                                         (int) validation->len, NULL, NULL, &report, &error);
          g_array_unref (chosen);
          ReteTrainFigures f;
          if (model == NULL || !rete_train_figures (model, validation, &f, &error))
            {
              rete_model_free (model);
              goto failed;
            }
          weights = rete_unet_n_params (rete_model_net (model));
          sum += f.auc;
          sum2 += f.auc * f.auc;
          infer += f.seconds_per_image;
          g_string_append_printf (rows, "%s,%d,%d,%d,%s,%d,%" G_GSIZE_FORMAT ",%d,%.4f,%d,%d,"
                                  "%.1f,%.3f\n", names[i], arch.levels, arch.base_filters,
                                  arch.convs_per_block, arch.activation ? "relu" : "identity",
                                  photographs, weights, r, f.auc, report.best_step, report.restarts,
                                  report.seconds, f.seconds_per_image);
          if (!quiet)
            fprintf (stderr, "rete sweep: %s seed %d: AUC %.4f (%.0f s)\n", names[i], r, f.auc,
                     report.seconds);
          rete_model_free (model);
        }
      double mean = sum / repeats;
      double sd = repeats > 1 ? sqrt (MAX (0.0, (sum2 - repeats * mean * mean) / (repeats - 1))) : 0;
      printf ("| %s | %d × %d × %d | %s | %d | %" G_GSIZE_FORMAT " | %.4f ± %.4f | %.2f |\n",
              names[i], arch.levels, arch.base_filters, arch.convs_per_block,
              arch.activation ? "ReLU" : "none", photographs, weights, mean, sd, infer / repeats);
      fflush (stdout);
    }
  if (csv != NULL && !rete_io_save_text (csv, rows->str, (gssize) rows->len, &error))
    goto failed;
  goto out;
failed:
  fprintf (stderr, "%s: %s\n", command, error ? error->message : "failed");
  status = RETE_EXIT_FAILED;
out:
  g_clear_error (&error);
  g_string_free (rows, TRUE);
  g_strfreev (names);
  g_free (cells);
  g_strfreev (meta);
  rete_model_free (prep);
  if (training) g_array_unref (training);
  if (validation) g_array_unref (validation);
  if (pairs) g_ptr_array_unref (pairs);
  g_option_context_free (context);
  g_free (data.annotations); g_free (data.masks); g_free (data.channel);
  g_free (sizes); g_free (validate); g_free (csv);
  return status;
}
