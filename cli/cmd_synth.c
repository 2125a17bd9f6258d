/* cmd_synth.c — `rete synth`: synthetic fundus photographs from our own generator
 * (vessel/rete_synth.h) with their exact vessel and FOV truth. Invented data: for demos,
 * trying the command and tests; never figures of agreement on real photographs. */
#include "rete_cli.h"

#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "rete_synth.h"

typedef struct {
  ReteSynthParams params;
  guint64 first_seed;
  int count;
  char *name;
  char *output_dir;
  char *format;
  gboolean all_truth;
  ReteCliGuard *guard;
  char **names; /* per item */
} SynthRun;

static char *
item_name (const SynthRun *run, int index)
{
  guint64 seed = run->first_seed + (guint64) index;
  if (run->name != NULL && run->count == 1)
    return g_strdup (run->name);
  return g_strdup_printf ("%s-%04" G_GUINT64_FORMAT, run->name ? run->name : "synth", seed);
}

static gboolean
synth_one (int index, const ReteCliItem *item, gpointer user_data, GError **error)
{
  SynthRun *run = user_data;
  ReteSynthParams params = run->params;
  params.seed = run->first_seed + (guint64) index;
  ReteSynthTruth truth;
  if (!rete_synth_fundus_truth (&params, &truth, error))
    return FALSE;
  const char *stem = run->names[index];
  g_autofree char *photo = rete_cli_output_path (run->output_dir, stem, "-fundus", run->format);
  g_autofree char *vessels = rete_cli_output_path (run->output_dir, stem, "-vessels", "png");
  g_autofree char *fov = rete_cli_output_path (run->output_dir, stem, "-fov", "png");
  gboolean ok = rete_cli_write_image (run->guard, truth.photo, photo, 8, error)
                && rete_cli_write_image (run->guard, truth.vessels, vessels, 8, error)
                && rete_cli_write_image (run->guard, truth.fov, fov, 8, error);
  if (ok && run->all_truth)
    {
      /* Widths as 16-bit values: pixel value x 64 = vessel width in pixels. */
      for (gsize i = 0; i < rete_image_n_pixels (truth.widths); i++)
        truth.widths->data[i] /= 64.0f;
      g_autofree char *widths = rete_cli_output_path (run->output_dir, stem, "-widths", "png");
      g_autofree char *arteries = rete_cli_output_path (run->output_dir, stem, "-arteries", "png");
      g_autofree char *lesions = rete_cli_output_path (run->output_dir, stem, "-lesions", "png");
      ok = rete_cli_write_image (run->guard, truth.widths, widths, 16, error)
           && rete_cli_write_image (run->guard, truth.arteries, arteries, 8, error)
           && rete_cli_write_image (run->guard, truth.lesions, lesions, 8, error);
    }
  rete_synth_truth_clear (&truth);
  return ok;
}

static const char description[] =
  "Writes NAME-fundus.png (the photograph), NAME-vessels.png (exact vessel map, 0/255) and\n"
  "NAME-fov.png (exact field of view, 0/255). NAME is --name, or synth-SEED; with --count N\n"
  "the seeds SEED … SEED+N-1 give N photographs NAME-SEED-…. The same seed and options give\n"
  "the same pixels on every run (and machines with the same C maths library). These\n"
  "photographs are INVENTED by Rete's own generator:\n"
  "use them to try the command and for tests, never as figures for real photographs.\n"
  "\n"
  "Examples:\n"
  "  rete synth --seed 2026 --size 999x960 --name demo --output-dir data/demo\n"
  "  rete synth --seed 1 --count 20 --lesions 10 --jpeg-quality 60 --output-dir synthetic\n"
  "  rete synth --trees 0 --name no-vessels      (a fundus without vessels)\n";

int
rete_cmd_synth (int argc, char **argv)
{
  const char *command = argv[0];
  gint64 seed = 1;
  int count = 1, trees = 4, lesions = 0, jpeg_quality = 0, jobs = 0;
  double aperture = 0.95, widest = 0.0, narrowest = 1.0, illumination = 0.4, noise = 0.01;
  char *size = NULL, *name = NULL, *output_dir = NULL, *format = NULL;
  gboolean all_truth = FALSE, quiet = FALSE;
  GOptionEntry entries[] = {
    { "seed", 's', 0, G_OPTION_ARG_INT64, &seed, "Seed of the first photograph (default 1)", "N" },
    { "count", 'n', 0, G_OPTION_ARG_INT, &count, "How many photographs (default 1)", "N" },
    { "size", 0, 0, G_OPTION_ARG_STRING, &size, "Frame size (default 565x584)", "WxH" },
    { "aperture", 0, 0, G_OPTION_ARG_DOUBLE, &aperture,
      "Aperture radius as a fraction of half the shorter side, 0.2–1.5; above 1 the frame "
      "crops the circle (default 0.95)", "F" },
    { "trees", 0, 0, G_OPTION_ARG_INT, &trees,
      "Vessel trees leaving the optic disc, 0–32 (default 4: arcades up and down, arteries "
      "and veins)", "N" },
    { "widest", 0, 0, G_OPTION_ARG_DOUBLE, &widest,
      "Widest vessel at the disc, pixels (default 0: scales with the aperture, 12 px at "
      "999x960)", "PX" },
    { "narrowest", 0, 0, G_OPTION_ARG_DOUBLE, &narrowest,
      "Narrowest vessel drawn, pixels (default 1)", "PX" },
    { "illumination", 0, 0, G_OPTION_ARG_DOUBLE, &illumination,
      "Uneven illumination and vignetting, 0–1 (default 0.4)", "F" },
    { "noise", 0, 0, G_OPTION_ARG_DOUBLE, &noise,
      "Sensor noise, standard deviation in [0,1] units (default 0.01)", "SD" },
    { "jpeg-quality", 0, 0, G_OPTION_ARG_INT, &jpeg_quality,
      "Add the 8x8 block artefacts of JPEG compression at this quality, 1–100 (default 0: "
      "none)", "Q" },
    { "lesions", 0, 0, G_OPTION_ARG_INT, &lesions,
      "Bright lesions (exudate-like spots), 0–1000 (default 0)", "N" },
    { "name", 0, 0, G_OPTION_ARG_STRING, &name, "Name of the files (default synth-SEED)", "NAME" },
    { "output-dir", 'o', 0, G_OPTION_ARG_FILENAME, &output_dir,
      "Folder for the files (default: the current folder)", "DIR" },
    { "format", 0, 0, G_OPTION_ARG_STRING, &format,
      "File type of the photograph: png, tif or jpg (default png; the truth is always PNG)",
      "TYPE" },
    { "all-truth", 0, 0, G_OPTION_ARG_NONE, &all_truth,
      "Also write NAME-widths.png (16-bit, value x 64 = width in pixels), NAME-arteries.png "
      "and NAME-lesions.png", NULL },
    { "jobs", 'j', 0, G_OPTION_ARG_INT, &jobs,
      "Photographs made at once (default 0: one per core)", "N" },
    { "quiet", 'q', 0, G_OPTION_ARG_NONE, &quiet, "Report failures only", NULL },
    { NULL }
  };
  GOptionContext *context = rete_cli_context_new (command, "",
    "Makes synthetic colour fundus photographs with their exact vessel map and field of view.",
    description);
  g_option_context_add_main_entries (context, entries, NULL);
  int status = RETE_EXIT_USAGE;
  SynthRun run = { 0 };
  GError *error = NULL;
  if (!rete_cli_parse (context, command, &argc, &argv))
    goto out;
  if (argc > 1)
    {
      rete_cli_usage_error (command, "unexpected argument '%s' (synth reads no files)", argv[1]);
      goto out;
    }
  rete_synth_params_init (&run.params);
  if (size != NULL && !rete_cli_parse_size (size, &run.params.width, &run.params.height, &error))
    {
      rete_cli_usage_error (command, "%s", error->message);
      goto out;
    }
  if (count < 1 || count > 100000 || seed < 0 || jobs < 0)
    {
      rete_cli_usage_error (command, "--count must be 1 to 100000, --seed and --jobs at least 0");
      goto out;
    }
  if (jpeg_quality < 0 || jpeg_quality > 100)
    {
      rete_cli_usage_error (command, "--jpeg-quality %d: give 1 to 100, or 0 for none",
                            jpeg_quality);
      goto out;
    }
  run.format = g_strdup (format ? format : "png");
  if (strcmp (run.format, "png") != 0 && strcmp (run.format, "tif") != 0
      && strcmp (run.format, "jpg") != 0)
    {
      rete_cli_usage_error (command, "--format %s: give png, tif or jpg", run.format);
      goto out;
    }
  if (name != NULL && (name[0] == '\0' || strchr (name, G_DIR_SEPARATOR) != NULL))
    {
      rete_cli_usage_error (command, "--name '%s': give a plain file name without folders "
                            "(folders go in --output-dir)", name);
      goto out;
    }
  run.params.aperture_radius = aperture;
  run.params.n_trees = trees;
  run.params.max_vessel_width = widest;
  run.params.min_vessel_width = narrowest;
  run.params.illumination = illumination;
  run.params.noise = noise;
  run.params.n_lesions = lesions;
  run.params.jpeg_artefacts = jpeg_quality > 0;
  run.params.jpeg_quality = jpeg_quality > 0 ? jpeg_quality : 60;
  if (!rete_synth_params_check (&run.params, &error))
    {
      /* The library names its parameters; say which option sets them. */
      rete_cli_usage_error (command, "%s (options --size --aperture --trees --widest "
                            "--narrowest --illumination --noise --lesions)", error->message);
      goto out;
    }
  run.first_seed = (guint64) seed;
  run.count = count;
  run.name = name;
  run.output_dir = output_dir ? output_dir : g_strdup (".");
  output_dir = NULL;
  run.all_truth = all_truth;
  run.guard = rete_cli_guard_new ();
  run.names = g_new0 (char *, count + 1);
  for (int i = 0; i < count; i++)
    run.names[i] = item_name (&run, i);

  ReteCliProgress *progress = rete_cli_progress_new ("synthetic photographs", count, quiet);
  rete_cli_run_batch (count, (const char *const *) run.names, jobs, synth_one, &run, progress);
  status = rete_cli_progress_finish (progress) > 0 ? RETE_EXIT_FAILED : RETE_EXIT_OK;
  rete_cli_progress_free (progress);

out:
  g_clear_error (&error);
  g_option_context_free (context);
  g_strfreev (run.names);
  rete_cli_guard_free (run.guard);
  g_free (run.format);
  g_free (run.output_dir);
  g_free (size);
  g_free (name);
  g_free (output_dir);
  g_free (format);
  return status;
}
