/* cmd_vessels.c — `rete vessels`: the vessel map of one or many photographs with a chosen
 * method (vessel/rete_vessel.h, the same call the GIMP plug-in makes), written as a
 * probability map (16-bit PNG) and a binary map (0/255), optionally with the FOV, and a
 * CSV report of each photograph's threshold and vessel fraction. */
#include "rete_cli.h"

#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "rete_nn.h"
#include "vessels_support.h"

static const char *const fov_suffixes[] = { "-fov", "_mask", "_fov", "-mask", NULL };

static gboolean
vessels_work (VesselRun *run, const ReteCliInput *input, VesselRow *row, const ReteCliItem *item,
              GError **error)
{
  gint64 start = g_get_monotonic_time ();
  g_autofree char *binary_path = rete_cli_output_path (run->output_dir, input->stem,
                                                       "-vessels", "png");
  g_autofree char *probability_path = rete_cli_output_path (run->output_dir, input->stem,
                                                            "-vessel-probability", "png");
  g_autofree char *fov_path = rete_cli_output_path (run->output_dir, input->stem, "-fov", "png");
  if (run->skip_existing && g_file_test (binary_path, G_FILE_TEST_EXISTS)
      && (!run->write_probability || g_file_test (probability_path, G_FILE_TEST_EXISTS))
      && (!run->write_fov || g_file_test (fov_path, G_FILE_TEST_EXISTS)))
    {
      row->threshold = NAN;
      row->vessel_fraction = NAN;
      row->error = g_strdup ("skipped: outputs exist");
      return TRUE;
    }
  /* Every output is checked before any work, so a refused one costs nothing. */
  if (!rete_cli_guard_check (run->guard, binary_path, error)
      || (run->write_probability && !rete_cli_guard_check (run->guard, probability_path, error))
      || (run->write_fov && !rete_cli_guard_check (run->guard, fov_path, error)))
    return FALSE;

  g_autoptr (ReteImage) photo = rete_io_load (input->path, error);
  if (photo == NULL)
    return FALSE;
  g_autoptr (ReteImage) given_fov = NULL;
  if (run->fov_source != NULL)
    {
      g_autofree char *stem = rete_cli_photograph_stem (input->stem);
      g_autofree char *mask_path = rete_cli_find_companion (run->fov_source, stem, fov_suffixes,
                                                            "FOV mask", error);
      if (mask_path == NULL)
        return FALSE;
      if (rete_cli_same_file (mask_path, input->path))
        {
          g_set_error (error, RETE_CLI_ERROR, RETE_CLI_ERROR_INPUT,
                       "the FOV mask found for %s in %s is the photograph itself; give the "
                       "folder of masks to --fov", input->path, run->fov_source);
          return FALSE;
        }
      given_fov = rete_cli_load_grey (mask_path, "FOV mask", error);
      if (given_fov == NULL)
        return FALSE;
      if (!rete_image_check_same_size (given_fov, "FOV mask", photo, "photograph", error))
        {
          g_prefix_error (error, "%s: ", mask_path);
          return FALSE;
        }
      rete_image_binarise (given_fov, 0.5f);
    }
  ReteVesselResult result = { 0 };
  if (!rete_vessel_run (photo, given_fov, &run->params, &result, rete_cli_item_progress,
                        (gpointer) item, error))
    return FALSE;
  gsize n_fov = 0, n_vessel = 0;
  for (gsize i = 0; i < rete_image_n_pixels (result.binary); i++)
    {
      gboolean inside = result.fov->data[i] > 0.5f;
      n_fov += inside;
      n_vessel += inside && result.binary->data[i] > 0.5f;
    }
  gboolean ok = rete_cli_write_image (run->guard, result.binary, binary_path, 8, error)
                && (!run->write_probability
                    || rete_cli_write_image (run->guard, result.probability, probability_path,
                                             run->bit_depth, error))
                && (!run->write_fov
                    || rete_cli_write_image (run->guard, result.fov, fov_path, 8, error));
  row->threshold = result.threshold;
  row->fov_pixels = n_fov;
  row->vessel_fraction = n_fov ? (double) n_vessel / n_fov : NAN;
  rete_vessel_result_clear (&result);
  row->seconds = (g_get_monotonic_time () - start) / 1e6;
  if (ok)
    rete_cli_item_set_message (item, "threshold %.3g, vessel %.1f %% of the FOV", row->threshold,
                               100.0 * row->vessel_fraction);
  return ok;
}

static gboolean
vessels_one (int index, const ReteCliItem *item, gpointer user_data, GError **error)
{
  VesselRun *run = user_data;
  VesselRow *row = &run->rows[index];
  GError *local = NULL;
  if (vessels_work (run, run->inputs->pdata[index], row, item, &local))
    return TRUE;
  row->error = g_strdup (local ? local->message : "failed");
  g_propagate_error (error, local);
  return FALSE;
}

/* An option description holding a library default (kept alive in `keep`). */
static const char *
D (GPtrArray *keep, const char *format, ...)
{
  va_list args;
  va_start (args, format);
  char *text = g_strdup_vprintf (format, args);
  va_end (args);
  g_ptr_array_add (keep, text);
  return text;
}

static const char description[] =
  "For each photograph NAME given, or found in a folder given, writes in --output-dir:\n"
  "  NAME-vessels.png              binary vessel map (0/255)\n"
  "  NAME-vessel-probability.png   vessel map in [0,1] (16-bit unless --bits 8)\n"
  "  NAME-fov.png                  the field of view used (with --write-fov)\n"
  "Methods: learned (U-Net, the default; --model NAME|FILE), frangi (Frangi 1998),\n"
  "matched (Gaussian matched filter, Chaudhuri 1989), matched-fdog (Zhang 2010), line\n"
  "(multiscale line detector, Nguyen 2013). Threshold rules: otsu (Otsu 1979),\n"
  "fixed:LEVEL, fraction:F (marks the fraction F of the FOV as vessel).\n"
  "Model names are looked up in $RETE_MODEL_DIR, then in the installed models folder.\n"
  "\n"
  "Examples:\n"
  "  rete vessels Image_01L.jpg\n"
  "  rete vessels --method frangi --scales 1:4:1 --output-dir maps photos/\n"
  "  rete vessels --model standard --threshold fraction:0.12 --fov masks/ photos/\n"
  "  rete vessels --method matched-fdog --jobs 2 --report maps/report.csv photos/\n";

int
rete_cmd_vessels (int argc, char **argv)
{
  const char *command = argv[0];
  char *method = NULL, *model_name = NULL, *threshold = NULL, *fov = NULL, *output_dir = NULL;
  char *channel = NULL, *scales = NULL, *report = NULL;
  double beta = NAN, frangi_c = NAN, clahe_clip = NAN, fov_rim = NAN, matched_sigma = NAN;
  double matched_length = NAN, fdog_c = NAN;
  int min_component = -1, fill_holes = -1, clahe_region = -1, orientations = -1;
  int fdog_window = -1, line_window = -1, line_step = -1, bits = 16, jobs = 0;
  gboolean no_clahe = FALSE, write_fov = FALSE, no_probability = FALSE, recursive = FALSE;
  gboolean skip_existing = FALSE, quiet = FALSE;
  /* Defaults in --help come from the library, so they cannot drift from it. */
  ReteVesselParams d;
  rete_vessel_params_init (&d);
  g_autoptr (GPtrArray) keep = g_ptr_array_new_with_free_func (g_free);
  GOptionEntry entries[] = {
    { "method", 'm', 0, G_OPTION_ARG_STRING, &method,
      "learned, frangi, matched, matched-fdog or line (default learned)", "METHOD" },
    { "model", 0, 0, G_OPTION_ARG_FILENAME, &model_name,
      "Model for the learned method: a shipped name or a .safetensors file (default standard)",
      "NAME|FILE" },
    { "threshold", 't', 0, G_OPTION_ARG_STRING, &threshold,
      D (keep, "otsu, fixed:LEVEL or fraction:F (default otsu for learned, fraction:%g for the classical filters)", RETE_CLASSICAL_VESSEL_FRACTION), "RULE" },
    { "min-component", 0, 0, G_OPTION_ARG_INT, &min_component,
      D (keep, "Remove vessel pieces smaller than this many pixels (default %" G_GSIZE_FORMAT "; 0 keeps all)", d.binary.min_component), "PX" },
    { "fill-holes", 0, 0, G_OPTION_ARG_INT, &fill_holes,
      D (keep, "Fill holes in vessels smaller than this many pixels (default %" G_GSIZE_FORMAT "; 0 none)", d.binary.max_hole), "PX" },
    { "fov", 0, 0, G_OPTION_ARG_FILENAME, &fov,
      "Given FOV mask: one file for all, or a folder with NAME.png / NAME_mask.png per "
      "photograph (default: detected)", "FILE|DIR" },
    { "fov-rim", 0, 0, G_OPTION_ARG_DOUBLE, &fov_rim,
      D (keep, "Pixels taken off the rim of a detected FOV (default %g)", d.fov.erode_rim), "PX" },
    { "channel", 0, 0, G_OPTION_ARG_STRING, &channel,
      D (keep, "Classical methods: green, luminance, red or blue (default %s)", rete_channel_name (d.channel)), "CHANNEL" },
    { "no-clahe", 0, 0, G_OPTION_ARG_NONE, &no_clahe,
      "Classical methods: no CLAHE before the filter", NULL },
    { "clahe-clip", 0, 0, G_OPTION_ARG_DOUBLE, &clahe_clip,
      D (keep, "CLAHE clip limit in (0,1] (default %g)", d.clahe.clip_limit), "C" },
    { "clahe-region", 0, 0, G_OPTION_ARG_INT, &clahe_region,
      "CLAHE contextual region side in pixels (default 1/8 of the image)", "PX" },
    { "scales", 0, 0, G_OPTION_ARG_STRING, &scales,
      D (keep, "Frangi: scales sigma MIN:MAX:STEP in pixels (default %g:%g:%g)", d.frangi.sigma_min, d.frangi.sigma_max, d.frangi.sigma_step), "MIN:MAX:STEP" },
    { "beta", 0, 0, G_OPTION_ARG_DOUBLE, &beta, D (keep, "Frangi: blob-versus-line beta (default %g)", d.frangi.beta), "B" },
    { "structure-c", 0, 0, G_OPTION_ARG_DOUBLE, &frangi_c,
      D (keep, "Frangi: structure sensitivity c (default %g; 0 = half the largest Hessian norm)", d.frangi.c), "C" },
    { "matched-sigma", 0, 0, G_OPTION_ARG_DOUBLE, &matched_sigma,
      D (keep, "Matched filter: vessel cross-section sigma in pixels (default %g)", d.matched.sigma), "S" },
    { "matched-length", 0, 0, G_OPTION_ARG_DOUBLE, &matched_length,
      D (keep, "Matched filter: vessel piece length L in pixels (default %g)", d.matched.length), "L" },
    { "orientations", 0, 0, G_OPTION_ARG_INT, &orientations,
      D (keep, "Matched filter and line detector: angles in [0, 180°) (default %d)", d.matched.n_orientations), "N" },
    { "fdog-window", 0, 0, G_OPTION_ARG_INT, &fdog_window,
      D (keep, "Matched FDOG: side of the local-mean window (default %d)", d.matched.fdog_window), "PX" },
    { "fdog-c", 0, 0, G_OPTION_ARG_DOUBLE, &fdog_c, D (keep, "Matched FDOG: weight c (default %g)", d.matched.fdog_c), "C" },
    { "line-window", 0, 0, G_OPTION_ARG_INT, &line_window,
      D (keep, "Line detector: window W, odd (default %d)", d.line.window), "PX" },
    { "line-step", 0, 0, G_OPTION_ARG_INT, &line_step,
      D (keep, "Line detector: step between line lengths (default %d)", d.line.step), "PX" },
    { "output-dir", 'o', 0, G_OPTION_ARG_FILENAME, &output_dir,
      "Folder for the maps (default: the current folder)", "DIR" },
    { "write-fov", 0, 0, G_OPTION_ARG_NONE, &write_fov, "Also write NAME-fov.png", NULL },
    { "no-probability", 0, 0, G_OPTION_ARG_NONE, &no_probability,
      "Write only the binary map", NULL },
    { "bits", 0, 0, G_OPTION_ARG_INT, &bits, "Bits of the probability map: 8 or 16 (default 16)", "8|16" },
    { "report", 0, 0, G_OPTION_ARG_FILENAME, &report,
      "Write a CSV line per photograph: threshold, vessel fraction, time, status (- for "
      "stdout)", "FILE" },
    { "recursive", 'r', 0, G_OPTION_ARG_NONE, &recursive, "Also read subfolders of folders", NULL },
    { "skip-existing", 0, 0, G_OPTION_ARG_NONE, &skip_existing,
      "Leave photographs whose maps exist already (to resume a run)", NULL },
    { "jobs", 'j', 0, G_OPTION_ARG_INT, &jobs,
      "Photographs at once (default 0: one per core)", "N" },
    { "quiet", 'q', 0, G_OPTION_ARG_NONE, &quiet, "Report failures only", NULL },
    { NULL }
  };
  GOptionContext *context = rete_cli_context_new (command, "PHOTOGRAPH|FOLDER…",
    "Makes the vessel map of fundus photographs.", description);
  g_option_context_add_main_entries (context, entries, NULL);
  int status = RETE_EXIT_USAGE;
  VesselRun run = { 0 };
  ReteModel *model = NULL;
  GError *error = NULL;
  g_autofree char *settings = NULL;
  if (!rete_cli_parse (context, command, &argc, &argv))
    goto out;
  if (argc < 2)
    {
      rete_cli_usage_error (command, "give at least one photograph or folder");
      goto out;
    }
  ReteVesselParams *p = &run.params;
  rete_vessel_params_init (p);
  ReteMethod chosen = RETE_METHOD_LEARNED;
  if (method && !rete_method_from_name (method, &chosen, &error))
    {
      rete_cli_usage_error (command, "%s", error->message);
      goto out;
    }
  /* the method's own default threshold rule, unless --threshold says otherwise */
  rete_vessel_params_set_method (p, chosen);
  if ((threshold && !rete_cli_parse_threshold (threshold, &p->binary, &error))
      || (channel && !rete_channel_from_name (channel, &p->channel, &error))
      || (scales && !rete_cli_parse_range (scales, "--scales", &p->frangi.sigma_min,
                                           &p->frangi.sigma_max, &p->frangi.sigma_step, &error)))
    {
      rete_cli_usage_error (command, "%s", error->message);
      goto out;
    }
  if ((bits != 8 && bits != 16) || jobs < 0
      || (!isnan (fov_rim) && !(fov_rim >= 0 && fov_rim <= 1000))
      || (!isnan (clahe_clip) && !(clahe_clip > 0 && clahe_clip <= 1))
      || (!isnan (beta) && !(beta > 0)) || (!isnan (frangi_c) && !(frangi_c >= 0))
      || (!isnan (matched_sigma) && !(matched_sigma > 0))
      || (!isnan (matched_length) && !(matched_length > 0))
      || (!isnan (fdog_c) && !(fdog_c >= 0)) || (orientations != -1 && (orientations < 1 || orientations > 180))
      || (line_window != -1 && (line_window < 3 || line_window % 2 == 0))
      || (line_step != -1 && line_step < 1) || (fdog_window != -1 && fdog_window < 3)
      || (clahe_region != -1 && clahe_region < 8) || min_component < -1 || fill_holes < -1)
    {
      rete_cli_usage_error (command,
                            "a value is out of range: --bits 8 or 16; --fov-rim 0–1000; "
                            "--clahe-clip in (0,1]; --clahe-region at least 8; --beta above 0; "
                            "--structure-c, --fdog-c at least 0; --matched-sigma and "
                            "--matched-length above 0; --orientations 1–180; --line-window odd, "
                            "at least 3; --line-step, --min-component, --fill-holes at least "
                            "0 (1 for the step); --jobs at least 0");
      goto out;
    }
  if (!isnan (fov_rim)) p->fov.erode_rim = fov_rim;
  if (!isnan (clahe_clip)) p->clahe.clip_limit = clahe_clip;
  if (clahe_region != -1) p->clahe.kernel_width = p->clahe.kernel_height = clahe_region;
  if (no_clahe) p->use_clahe = FALSE;
  if (!isnan (beta)) p->frangi.beta = beta;
  if (!isnan (frangi_c)) p->frangi.c = frangi_c;
  if (!isnan (matched_sigma)) p->matched.sigma = matched_sigma;
  if (!isnan (matched_length)) p->matched.length = matched_length;
  if (orientations != -1) p->matched.n_orientations = p->line.n_orientations = orientations;
  if (fdog_window != -1) p->matched.fdog_window = fdog_window;
  if (!isnan (fdog_c)) p->matched.fdog_c = fdog_c;
  if (line_window != -1) p->line.window = line_window;
  if (line_step != -1) p->line.step = line_step;
  if (min_component != -1) p->binary.min_component = (gsize) min_component;
  if (fill_holes != -1) p->binary.max_hole = (gsize) fill_holes;
  if (p->method == RETE_METHOD_LEARNED)
    {
      g_autofree char *model_path = rete_cli_find_model (model_name ? model_name : "standard",
                                                         &error);
      if (model_path == NULL)
        {
          rete_cli_usage_error (command, "%s", error->message);
          goto out;
        }
      model = rete_model_load (model_path, &error);
      if (model == NULL)
        {
          fprintf (stderr, "%s: cannot use the model %s: %s\n", command, model_path,
                   error->message);
          status = RETE_EXIT_FAILED;
          goto out;
        }
      p->model = model;
    }
  else if (model_name != NULL)
    {
      rete_cli_usage_error (command, "--model is for --method learned, not %s", method);
      goto out;
    }

  if (!vessels_check_settings (p, &error))
    {
      rete_cli_usage_error (command, "%s", error->message);
      goto out;
    }

  run.inputs = rete_cli_expand_inputs (argv + 1, recursive, rete_cli_output_suffixes, &error);
  if (run.inputs == NULL)
    {
      fprintf (stderr, "%s: %s\n", command, error->message);
      status = RETE_EXIT_FAILED;
      goto out;
    }
  run.fov_source = fov;
  run.output_dir = output_dir ? g_strdup (output_dir) : g_strdup (".");
  run.write_probability = !no_probability;
  run.write_fov = write_fov;
  run.skip_existing = skip_existing;
  run.bit_depth = bits;
  run.guard = rete_cli_guard_new ();
  run.rows = g_new0 (VesselRow, run.inputs->len);
  const char **names = g_new0 (const char *, run.inputs->len + 1);
  for (guint i = 0; i < run.inputs->len; i++)
    {
      const ReteCliInput *input = run.inputs->pdata[i];
      rete_cli_guard_add (run.guard, input->path);
      names[i] = input->path;
    }
  /* Given FOV masks are inputs too, a folder of them included. */
  if (fov != NULL && !g_file_test (fov, G_FILE_TEST_IS_DIR))
    rete_cli_guard_add (run.guard, fov);
  else if (fov != NULL)
    {
      char *folder_args[] = { fov, NULL };
      GPtrArray *masks = rete_cli_expand_inputs (folder_args, TRUE, NULL, NULL);
      for (guint i = 0; masks && i < masks->len; i++)
        rete_cli_guard_add (run.guard, ((ReteCliInput *) masks->pdata[i])->path);
      if (masks)
        g_ptr_array_free (masks, TRUE);
    }
  settings = rete_vessel_params_describe (p);
  if (!quiet)
    fprintf (stderr, "%s: %s, threshold %s, %u photograph%s\n", command, settings,
             threshold ? threshold : (p->binary.method == RETE_THRESHOLD_OTSU ? "otsu" : "fraction:" G_STRINGIFY (RETE_CLASSICAL_VESSEL_FRACTION)), run.inputs->len, run.inputs->len == 1 ? "" : "s");
  ReteCliProgress *progress = rete_cli_progress_new ("vessel maps", run.inputs->len, quiet);
  rete_cli_run_batch (run.inputs->len, names, jobs, vessels_one, &run, progress);
  int failed = rete_cli_progress_finish (progress);
  rete_cli_progress_free (progress);
  g_free (names);
  status = failed > 0 ? RETE_EXIT_FAILED : RETE_EXIT_OK;
  if (report != NULL)
    {
      g_autofree char *csv = vessels_report_csv (&run, settings);
      if (!rete_cli_write_text (run.guard, report, csv, &error))
        {
          fprintf (stderr, "%s: %s\n", command, error->message);
          status = RETE_EXIT_FAILED;
        }
    }

out:
  g_clear_error (&error);
  g_option_context_free (context);
  if (run.rows)
    for (guint i = 0; run.inputs && i < run.inputs->len; i++)
      g_free (run.rows[i].error);
  g_free (run.rows);
  if (run.inputs)
    g_ptr_array_free (run.inputs, TRUE);
  rete_cli_guard_free (run.guard);
  g_free (run.output_dir);
  if (model)
    rete_model_free (model);
  g_free (method);
  g_free (model_name);
  g_free (threshold);
  g_free (fov);
  g_free (output_dir);
  g_free (channel);
  g_free (scales);
  g_free (report);
  return status;
}
