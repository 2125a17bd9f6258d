/* cmd_agreement.c — `rete agreement`: agreement of vessel maps with references
 * (vessel/rete_agreement.h) inside an optional mask: ROC AUC, average precision, and at a
 * threshold sensitivity, specificity, accuracy, precision, Dice, Jaccard, MCC. A table on
 * stdout, optionally CSV and JSON files, and ROC curves as PNG (cli/roc_plot.c). */
#include "rete_cli.h"

#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <string.h>
#include <glib/gstdio.h>
#include <unistd.h>

#include "agreement_report.h"
#include "rete_roc_plot.h"

static const char *const reference_suffixes[] = { "-vessels", NULL };
static const char *const mask_suffixes[] = { "-fov", "_mask", "_fov", "-mask", NULL };

static char *
roc_path (const AgreementRun *run, const ReteCliInput *map)
{
  if (run->maps->len == 1 && !g_file_test (run->roc, G_FILE_TEST_IS_DIR))
    return g_strdup (run->roc);
  return rete_cli_output_path (run->roc, map->stem, "-roc", "png");
}

static gboolean
write_roc (const AgreementRun *run, const ReteAgreement *a, const ReteCliInput *map,
           GError **error)
{
  g_autofree char *path = roc_path (run, map);
  if (!rete_cli_guard_check (run->guard, path, error))
    return FALSE;
  g_autofree char *dir = g_path_get_dirname (path);
  g_mkdir_with_parents (dir, 0777);
  /* Drawn to a temporary file beside it, then renamed: a reader never sees half a plot. */
  g_autofree char *temporary = g_strdup_printf ("%s.part-%d.png", path, (int) getpid ());
  g_autofree char *title = run->title ? g_strdup (run->title)
                                      : g_strdup_printf ("ROC: %s", map->stem);
  if (!rete_roc_plot_png (a, temporary, title, error))
    {
      g_unlink (temporary);
      return FALSE;
    }
  if (g_rename (temporary, path) != 0)
    {
      int saved = errno;
      g_unlink (temporary);
      g_set_error (error, RETE_CLI_ERROR, RETE_CLI_ERROR_OUTPUT, "cannot write %s: %s", path,
                   g_strerror (saved));
      return FALSE;
    }
  return TRUE;
}

static gboolean
agreement_work (AgreementRun *run, const ReteCliInput *map, AgreementRow *row, GError **error)
{
  g_autofree char *stem = rete_cli_photograph_stem (map->stem);
  row->reference = rete_cli_find_companion (run->reference_source, stem, reference_suffixes,
                                            "reference", error);
  if (row->reference == NULL)
    return FALSE;
  if (rete_cli_same_file (row->reference, map->path))
    {
      g_set_error (error, RETE_CLI_ERROR, RETE_CLI_ERROR_INPUT,
                   "the reference found for %s is the map itself; give the folder of "
                   "references to --reference", map->path);
      return FALSE;
    }
  if (run->mask_source != NULL)
    {
      row->mask = rete_cli_find_companion (run->mask_source, stem, mask_suffixes, "mask", error);
      if (row->mask == NULL)
        return FALSE;
    }
  g_autoptr (ReteImage) scores = rete_cli_load_grey (map->path, "vessel map", error);
  if (scores == NULL)
    return FALSE;
  g_autoptr (ReteImage) reference = rete_cli_load_grey (row->reference, "reference", error);
  if (reference == NULL)
    return FALSE;
  g_autoptr (ReteImage) mask = NULL;
  if (row->mask && (mask = rete_cli_load_grey (row->mask, "mask", error)) == NULL)
    return FALSE;
  if (!rete_image_check_same_size (reference, "reference", scores, "vessel map", error)
      || (mask && !rete_image_check_same_size (mask, "mask", scores, "vessel map", error)))
    return FALSE;
  row->agreement = rete_agreement_compute (scores, reference, mask, run->threshold,
                                           run->roc_points, error);
  if (row->agreement == NULL)
    return FALSE;
  if (run->roc != NULL && !write_roc (run, row->agreement, map, error))
    return FALSE;
  return TRUE;
}

static gboolean
agreement_one (int index, const ReteCliItem *item, gpointer user_data, GError **error)
{
  AgreementRun *run = user_data;
  AgreementRow *row = &run->rows[index];
  GError *local = NULL;
  if (agreement_work (run, run->maps->pdata[index], row, &local))
    return TRUE;
  row->error = g_strdup (local ? local->message : "failed");
  g_propagate_error (error, local);
  return FALSE;
}

static const char description[] =
  "Compares each vessel map with its reference (a manual vessel map, vessel >= 0.5) inside\n"
  "the mask (the FOV; every pixel without --mask). With folders, a map NAME-vessel-\n"
  "probability.png (or NAME-vessels.png, NAME.png) is matched to NAME.png, or NAME_*.png,\n"
  "in the reference and mask folders. In a folder of maps from 'rete vessels' the\n"
  "probability maps are used (AUC needs scores); --binary uses the binary maps.\n"
  "Rates are at --threshold (vessel when value >= it). AUC is undefined (printed 'undef.',\n"
  "empty in CSV, null in JSON, exit status 1) when the reference has no vessel, or only\n"
  "vessel, inside the mask.\n"
  "\n"
  "Examples:\n"
  "  rete agreement Image_01L-vessel-probability.png --reference Image_01L_1stHO.png\n"
  "  rete agreement maps/ --reference manual1/ --mask mask/ --csv agreement.csv\n"
  "  rete agreement map.png --reference ref.png --roc roc.png --json -\n";

int
rete_cmd_agreement (int argc, char **argv)
{
  const char *command = argv[0];
  char *reference = NULL, *mask = NULL, *threshold = NULL, *csv = NULL, *json = NULL;
  char *roc = NULL, *title = NULL;
  int roc_points = 512, jobs = 0;
  gboolean binary = FALSE, recursive = FALSE, quiet = FALSE;
  GOptionEntry entries[] = {
    { "reference", 0, 0, G_OPTION_ARG_FILENAME, &reference,
      "Reference vessel map: a file, or a folder of NAME.png / NAME_*.png", "FILE|DIR" },
    { "mask", 0, 0, G_OPTION_ARG_FILENAME, &mask,
      "Count only inside this mask (the FOV): a file or a folder", "FILE|DIR" },
    { "threshold", 't', 0, G_OPTION_ARG_STRING, &threshold,
      "Level for the rates: vessel when value >= LEVEL (default 0.5)", "LEVEL" },
    { "csv", 0, 0, G_OPTION_ARG_FILENAME, &csv, "Also write a CSV table (- for stdout)", "FILE" },
    { "json", 0, 0, G_OPTION_ARG_FILENAME, &json,
      "Also write JSON with the ROC curves (- for stdout)", "FILE" },
    { "roc", 0, 0, G_OPTION_ARG_FILENAME, &roc,
      "ROC curve plot: a PNG file for one map, a folder (NAME-roc.png) for several", "FILE|DIR" },
    { "roc-points", 0, 0, G_OPTION_ARG_INT, &roc_points,
      "Points of the ROC curve kept, 2–100000 (default 512)", "N" },
    { "title", 0, 0, G_OPTION_ARG_STRING, &title, "Title of the ROC plot", "TEXT" },
    { "binary", 0, 0, G_OPTION_ARG_NONE, &binary,
      "In folders, use the binary maps NAME-vessels.png", NULL },
    { "recursive", 'r', 0, G_OPTION_ARG_NONE, &recursive, "Also read subfolders of folders", NULL },
    { "jobs", 'j', 0, G_OPTION_ARG_INT, &jobs, "Maps at once (default 0: one per core)", "N" },
    { "quiet", 'q', 0, G_OPTION_ARG_NONE, &quiet, "Report failures only", NULL },
    { NULL }
  };
  GOptionContext *context = rete_cli_context_new (command, "MAP|FOLDER… --reference FILE|DIR",
    "Agreement of vessel maps with reference vessel maps.", description);
  g_option_context_add_main_entries (context, entries, NULL);
  int status = RETE_EXIT_USAGE;
  AgreementRun run = { 0 };
  GError *error = NULL;
  if (!rete_cli_parse (context, command, &argc, &argv))
    goto out;
  /* "rete agreement MAP REFERENCE" works as well. */
  if (reference == NULL && argc == 3 && !g_file_test (argv[1], G_FILE_TEST_IS_DIR))
    {
      reference = g_strdup (argv[2]);
      argc = 2;
      argv[2] = NULL;
    }
  if (argc < 2 || reference == NULL)
    {
      rete_cli_usage_error (command, "give the vessel maps and --reference FILE|FOLDER");
      goto out;
    }
  run.threshold = 0.5;
  if (threshold != NULL)
    {
      ReteBinaryParams parsed;
      rete_binary_params_init (&parsed);
      if (!rete_cli_parse_threshold (threshold, &parsed, &error)
          || parsed.method != RETE_THRESHOLD_FIXED)
        {
          rete_cli_usage_error (command, "--threshold %s: give a level in [0,1] such as 0.5%s%s",
                                threshold, error ? "; " : "", error ? error->message : "");
          goto out;
        }
      run.threshold = parsed.level;
    }
  if (roc_points < 2 || roc_points > 100000 || jobs < 0)
    {
      rete_cli_usage_error (command, "--roc-points must be 2 to 100000 and --jobs at least 0");
      goto out;
    }
  static const char *const skip[] = { "-fov", "-roc", NULL };
  run.maps = rete_cli_expand_inputs (argv + 1, recursive, skip, &error);
  if (run.maps == NULL)
    {
      fprintf (stderr, "%s: %s\n", command, error->message);
      status = RETE_EXIT_FAILED;
      goto out;
    }
  /* A folder of 'rete vessels' output holds both maps of each photograph: keep one kind. */
  gboolean any_probability = FALSE;
  for (guint i = 0; i < run.maps->len; i++)
    any_probability |= g_str_has_suffix (((ReteCliInput *) run.maps->pdata[i])->stem,
                                         "-vessel-probability");
  for (guint i = 0; i < run.maps->len;)
    {
      const char *stem = ((ReteCliInput *) run.maps->pdata[i])->stem;
      gboolean drop = binary ? g_str_has_suffix (stem, "-vessel-probability")
                             : any_probability && g_str_has_suffix (stem, "-vessels");
      if (drop && run.maps->len > 1)
        g_ptr_array_remove_index (run.maps, i);
      else
        i++;
    }
  run.reference_source = reference;
  run.mask_source = mask;
  run.roc_points = roc_points;
  run.roc = roc;
  run.title = title;
  run.guard = rete_cli_guard_new ();
  run.rows = g_new0 (AgreementRow, run.maps->len);
  const char **names = g_new0 (const char *, run.maps->len + 1);
  for (guint i = 0; i < run.maps->len; i++)
    {
      const ReteCliInput *map = run.maps->pdata[i];
      rete_cli_guard_add (run.guard, map->path);
      names[i] = map->path;
    }
  /* References and masks are inputs too: never written. */
  const char *sources[] = { reference, mask };
  for (int s = 0; s < 2; s++)
    {
      if (sources[s] == NULL)
        continue;
      if (!g_file_test (sources[s], G_FILE_TEST_IS_DIR))
        rete_cli_guard_add (run.guard, sources[s]);
      else
        {
          char *folder_args[] = { (char *) sources[s], NULL };
          GPtrArray *files = rete_cli_expand_inputs (folder_args, TRUE, NULL, NULL);
          for (guint i = 0; files && i < files->len; i++)
            rete_cli_guard_add (run.guard, ((ReteCliInput *) files->pdata[i])->path);
          if (files)
            g_ptr_array_free (files, TRUE);
        }
    }

  ReteCliProgress *progress = rete_cli_progress_new ("agreement", run.maps->len, TRUE);
  rete_cli_run_batch (run.maps->len, names, jobs, agreement_one, &run, progress);
  int failed = rete_cli_progress_finish (progress);
  rete_cli_progress_free (progress);
  g_free (names);
  status = failed > 0 ? RETE_EXIT_FAILED : RETE_EXIT_OK;
  for (guint i = 0; i < run.maps->len; i++)
    if (run.rows[i].agreement && run.rows[i].agreement->auc_undefined_reason)
      {
        fprintf (stderr, "%s: %s: AUC is undefined: %s\n", command,
                 ((ReteCliInput *) run.maps->pdata[i])->path,
                 run.rows[i].agreement->auc_undefined_reason);
        status = RETE_EXIT_FAILED;
      }
  gboolean table_to_stdout = g_strcmp0 (csv, "-") != 0 && g_strcmp0 (json, "-") != 0;
  if (table_to_stdout && !(quiet && (csv || json)))
    agreement_print_table (&run);
  if (csv != NULL)
    {
      g_autofree char *text = agreement_csv (&run);
      if (!rete_cli_write_text (run.guard, csv, text, &error))
        {
          fprintf (stderr, "%s: %s\n", command, error->message);
          g_clear_error (&error);
          status = RETE_EXIT_FAILED;
        }
    }
  if (json != NULL)
    {
      g_autofree char *text = agreement_json (&run);
      if (!rete_cli_write_text (run.guard, json, text, &error))
        {
          fprintf (stderr, "%s: %s\n", command, error->message);
          g_clear_error (&error);
          status = RETE_EXIT_FAILED;
        }
    }

out:
  g_clear_error (&error);
  g_option_context_free (context);
  for (guint i = 0; run.rows && i < run.maps->len; i++)
    {
      g_free (run.rows[i].reference);
      g_free (run.rows[i].mask);
      g_free (run.rows[i].error);
      if (run.rows[i].agreement)
        rete_agreement_free (run.rows[i].agreement);
    }
  g_free (run.rows);
  if (run.maps)
    g_ptr_array_free (run.maps, TRUE);
  rete_cli_guard_free (run.guard);
  g_free (reference);
  g_free (mask);
  g_free (threshold);
  g_free (csv);
  g_free (json);
  g_free (roc);
  g_free (title);
  return status;
}
