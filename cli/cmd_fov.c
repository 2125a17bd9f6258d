/* cmd_fov.c — `rete fov`: the field-of-view mask of each photograph (vessel/rete_fov.h),
 * written as NAME-fov.png (0/255). */
#include "rete_cli.h"

#include <stdio.h>

#include "rete_fov.h"

typedef struct {
  GPtrArray *inputs;
  ReteFovParams params;
  char *output_dir;
  gboolean skip_existing;
  ReteCliGuard *guard;
} FovRun;

static gboolean
fov_one (int index, const ReteCliItem *item, gpointer user_data, GError **error)
{
  FovRun *run = user_data;
  const ReteCliInput *input = run->inputs->pdata[index];
  g_autofree char *out = rete_cli_output_path (run->output_dir, input->stem, "-fov", "png");
  if (run->skip_existing && g_file_test (out, G_FILE_TEST_EXISTS))
    return TRUE;
  g_autoptr (ReteImage) photo = rete_io_load (input->path, error);
  if (photo == NULL)
    return FALSE;
  g_autoptr (ReteImage) fov = rete_fov_detect (photo, &run->params, error);
  if (fov == NULL)
    return FALSE;
  if (!rete_cli_write_image (run->guard, fov, out, 8, error))
    return FALSE;
  rete_cli_item_set_message (item, "FOV %.1f %% of the frame",
                             100.0 * rete_mask_count (fov) / rete_image_n_pixels (fov));
  return TRUE;
}

static const char description[] =
  "Writes NAME-fov.png (0/255) for each photograph NAME.jpg (or .png, .tif ...) given, or\n"
  "found in a folder given. Files named like Rete's own outputs (NAME-fov, NAME-vessels,\n"
  "...) are skipped in folders.\n"
  "\n"
  "Examples:\n"
  "  rete fov --output-dir masks photos/\n"
  "  rete fov --rim 4 Image_01L.jpg           (4 pixels off the rim of the aperture)\n";

int
rete_cmd_fov (int argc, char **argv)
{
  const char *command = argv[0];
  double rim = 0.0, level = 0.0;
  int jobs = 0;
  char *output_dir = NULL;
  gboolean quiet = FALSE, recursive = FALSE, skip_existing = FALSE;
  GOptionEntry entries[] = {
    { "rim", 0, 0, G_OPTION_ARG_DOUBLE, &rim,
      "Pixels taken off the rim of the aperture after detection (default 0)", "PX" },
    { "level", 0, 0, G_OPTION_ARG_DOUBLE, &level,
      "Brightness in (0,1) above which a pixel is inside (default 0: from the histogram)", "L" },
    { "output-dir", 'o', 0, G_OPTION_ARG_FILENAME, &output_dir,
      "Folder for the masks (default: the current folder)", "DIR" },
    { "recursive", 'r', 0, G_OPTION_ARG_NONE, &recursive, "Also read subfolders of folders", NULL },
    { "skip-existing", 0, 0, G_OPTION_ARG_NONE, &skip_existing,
      "Leave photographs whose mask exists already (to resume a run)", NULL },
    { "jobs", 'j', 0, G_OPTION_ARG_INT, &jobs, "Photographs at once (default 0: one per core)", "N" },
    { "quiet", 'q', 0, G_OPTION_ARG_NONE, &quiet, "Report failures only", NULL },
    { NULL }
  };
  GOptionContext *context = rete_cli_context_new (command, "PHOTOGRAPH|FOLDER…",
    "Finds the field of view (the lit aperture) of fundus photographs.", description);
  g_option_context_add_main_entries (context, entries, NULL);
  int status = RETE_EXIT_USAGE;
  FovRun run = { 0 };
  GError *error = NULL;
  if (!rete_cli_parse (context, command, &argc, &argv))
    goto out;
  if (argc < 2)
    {
      rete_cli_usage_error (command, "give at least one photograph or folder");
      goto out;
    }
  if (!(rim >= 0.0 && rim <= 1000.0) || !(level >= 0.0 && level < 1.0) || jobs < 0)
    {
      rete_cli_usage_error (command, "--rim must be 0 to 1000 pixels, --level in [0,1) (0 = "
                            "automatic), --jobs at least 0");
      goto out;
    }
  rete_fov_params_init (&run.params);
  run.params.erode_rim = rim;
  run.params.threshold = level;
  run.inputs = rete_cli_expand_inputs (argv + 1, recursive, rete_cli_output_suffixes, &error);
  if (run.inputs == NULL)
    {
      fprintf (stderr, "%s: %s\n", command, error->message);
      status = RETE_EXIT_FAILED;
      goto out;
    }
  run.output_dir = output_dir ? output_dir : g_strdup (".");
  output_dir = NULL;
  run.skip_existing = skip_existing;
  run.guard = rete_cli_guard_new ();
  const char **names = g_new0 (const char *, run.inputs->len + 1);
  for (guint i = 0; i < run.inputs->len; i++)
    {
      const ReteCliInput *input = run.inputs->pdata[i];
      rete_cli_guard_add (run.guard, input->path);
      names[i] = input->path;
    }
  ReteCliProgress *progress = rete_cli_progress_new ("field of view", run.inputs->len, quiet);
  rete_cli_run_batch (run.inputs->len, names, jobs, fov_one, &run, progress);
  status = rete_cli_progress_finish (progress) > 0 ? RETE_EXIT_FAILED : RETE_EXIT_OK;
  rete_cli_progress_free (progress);
  g_free (names);

out:
  g_clear_error (&error);
  g_option_context_free (context);
  if (run.inputs)
    g_ptr_array_free (run.inputs, TRUE);
  rete_cli_guard_free (run.guard);
  g_free (run.output_dir);
  g_free (output_dir);
  return status;
}
