/* cmd_measure.c — `rete measure`: vessel measurements of binary vessel maps
 * (vessel/rete_measure.h), one CSV row per map, written atomically; optionally one row per
 * segment and a skeleton picture per map. */
#include "rete_cli.h"

#include <math.h>
#include <stdio.h>
#include <string.h>

#include "rete_measure.h"

/* Stems skipped when a folder is read: masks and Rete's own non-map outputs (a folder of
 * NAME-vessels.png maps is exactly what this command reads, so "-vessels" is not here). */
static const char *const skip_suffixes[] = { "-fov", "_fov", "_mask", "-mask", "-skeleton",
                                             "-vessel-probability", "-roc", NULL };
static const char *const fov_suffixes[] = { "-fov", "_fov", "_mask", "-mask", NULL };

typedef struct {
  GPtrArray *inputs;
  ReteMeasureParams params;
  char *fov;           /* mask file or folder, or NULL */
  char *skeleton_dir;  /* or NULL */
  gboolean want_segments;
  ReteCliGuard *guard;
  char **headers;      /* per input, NULL when it failed */
  char **rows;
  char **segments;
  guint n;             /* entries in the three arrays above */
} MeasureRun;

/* Frees strings first..n-1 of a table with holes, then the table. */
static void
free_table (char **table, guint first, guint n)
{
  if (table == NULL)
    return;
  for (guint i = first; i < n; i++)
    g_free (table[i]);
  g_free (table);
}

/* Skeleton picture: black background, skeleton white, junctions orange, end points cyan;
 * each point drawn as a 3×3 mark so that it shows at full-photograph zoom. */
static ReteImage *
skeleton_picture (const ReteMeasurements *m, GError **error)
{
  ReteImage *pic = rete_image_new (m->width, m->height, 3, error);
  if (pic == NULL)
    return NULL;
  int w = m->width, h = m->height;
  gsize n = (gsize) w * h;
  for (gsize i = 0; i < n; i++)
    if (m->skeleton->data[i] > 0.5f)
      pic->data[i] = pic->data[n + i] = pic->data[2 * n + i] = 1.0f;
  for (int y = 0; y < h; y++)
    for (int x = 0; x < w; x++)
      {
        float t = m->point_type->data[(gsize) y * w + x];
        if (t == RETE_POINT_NONE)
          continue;
        float rgb[3] = { 1.0f, 0.55f, 0.0f };
        if (t == RETE_POINT_END)
          rgb[0] = 0.0f, rgb[1] = 0.85f, rgb[2] = 1.0f;
        for (int dy = -1; dy <= 1; dy++)
          for (int dx = -1; dx <= 1; dx++)
            {
              int xx = x + dx, yy = y + dy;
              if (xx < 0 || yy < 0 || xx >= w || yy >= h)
                continue;
              for (int c = 0; c < 3; c++)
                pic->data[c * n + (gsize) yy * w + xx] = rgb[c];
            }
      }
  return pic;
}

static gboolean
measure_one (int index, const ReteCliItem *item, gpointer user_data, GError **error)
{
  MeasureRun *run = user_data;
  const ReteCliInput *input = run->inputs->pdata[index];
  g_autoptr (ReteImage) map = rete_cli_load_grey (input->path, "vessel map", error);
  if (map == NULL)
    return FALSE;
  g_autoptr (ReteImage) fov = NULL;
  if (run->fov != NULL)
    {
      g_autofree char *dir = g_path_get_dirname (input->stem);
      g_autofree char *base = g_path_get_basename (input->stem);
      g_autofree char *folder = g_file_test (run->fov, G_FILE_TEST_IS_DIR) && strcmp (dir, ".")
                                ? g_build_filename (run->fov, dir, NULL) : g_strdup (run->fov);
      /* maps named NAME-vessels.png find the FOV of NAME */
      g_autofree char *stem = g_str_has_suffix (base, "-vessels")
                              ? g_strndup (base, strlen (base) - strlen ("-vessels"))
                              : g_strdup (base);
      g_autofree char *path = rete_cli_find_companion (folder, stem, fov_suffixes,
                                                       "field-of-view mask", error);
      if (path == NULL)
        return FALSE;
      fov = rete_cli_load_grey (path, "field-of-view mask", error);
      if (fov == NULL)
        return FALSE;
    }
  ReteMeasureParams params = run->params;
  params.want_images = run->skeleton_dir != NULL;
  params.progress = rete_cli_item_progress;
  params.progress_data = (gpointer) item;
  g_autoptr (ReteMeasurements) m = rete_measure (map, fov, &params, error);
  if (m == NULL)
    return FALSE;
  if (run->skeleton_dir != NULL)
    {
      g_autoptr (ReteImage) pic = skeleton_picture (m, error);
      g_autofree char *out = rete_cli_output_path (run->skeleton_dir, input->stem, "-skeleton",
                                                   "png");
      if (pic == NULL || !rete_cli_write_image (run->guard, pic, out, 8, error))
        return FALSE;
    }
  g_autofree char *name = g_path_get_basename (input->path);
  run->headers[index] = rete_measurements_csv_header (m);
  run->rows[index] = rete_measurements_csv_row (m, name);
  if (run->want_segments)
    run->segments[index] = rete_measurements_segments_csv (m, name);
  return TRUE;
}

/* All rows of the maps that worked, under one header; segments tables without their repeated
 * header lines. */
static char *
join_tables (char **headers, char **tables, guint n, gboolean tables_have_header)
{
  GString *s = g_string_new (NULL);
  gboolean first = TRUE;
  for (guint i = 0; i < n; i++)
    {
      if (tables[i] == NULL)
        continue;
      const char *body = tables[i];
      if (tables_have_header)
        {
          const char *nl = strchr (body, '\n');
          if (first)
            g_string_append_len (s, body, nl ? nl - body + 1 : (gssize) strlen (body));
          body = nl ? nl + 1 : "";
        }
      else if (first)
        g_string_append (s, headers[i]);
      first = FALSE;
      g_string_append (s, body);
    }
  return g_string_free (s, FALSE);
}

static const char description[] =
  "Measures each binary vessel map (PNG, TIFF ...; 0 background, 255 or 1 vessel; other\n"
  "values are thresholded at half and counted in the notes) inside its field of view, and\n"
  "writes one CSV row per map: vessel area density (% of the FOV), skeleton length and\n"
  "length density, junctions, end points, segments, mean segment length, mean calibre,\n"
  "arc/chord tortuosity, a curvature index and the box-counting fractal dimension of the map\n"
  "and of its skeleton. Every column name carries its unit: pixels by default, millimetres\n"
  "with --pixel-size or with --fov-diameter-px and --fov-diameter-mm.\n"
  "Methods: Zhang–Suen thinning (1984) with the Lü–Wang correction (1986) and staircase\n"
  "removal; exact Euclidean distance transform (Felzenszwalb–Huttenlocher 2012) for calibre;\n"
  "arc/chord and total squared curvature per length (Hart et al. 1999); box counting on\n"
  "2^k-pixel boxes. Without --fov the whole frame is the field of view (said in the notes).\n"
  "\n"
  "Examples:\n"
  "  rete measure -o figures.csv maps/\n"
  "  rete measure --fov masks/ --pixel-size 0.0045 --segments segments.csv maps/\n"
  "  rete measure --fov-diameter-px 3300 --fov-diameter-mm 12.4 --skeleton-dir skel 01_h.png\n";

int
rete_cmd_measure (int argc, char **argv)
{
  const char *command = argv[0];
  double pixel_size = NAN, fov_px = NAN, fov_mm = NAN, min_length = 10, sigma = 6;
  int jobs = 0;
  char *output = NULL, *segments = NULL, *fov = NULL, *skeleton_dir = NULL;
  gboolean quiet = FALSE, recursive = FALSE;
  GOptionEntry entries[] = {
    { "output", 'o', 0, G_OPTION_ARG_FILENAME, &output,
      "CSV file, one row per map (default measurements.csv; - for standard output)", "FILE" },
    { "segments", 0, 0, G_OPTION_ARG_FILENAME, &segments,
      "Also a CSV file with one row per vessel segment of every map", "FILE" },
    { "fov", 0, 0, G_OPTION_ARG_FILENAME, &fov,
      "Field-of-view mask: a file (one map) or a folder with NAME.png, NAME-fov.png or "
      "NAME_mask.png for each map NAME (default: the whole frame)", "FILE|DIR" },
    { "pixel-size", 0, 0, G_OPTION_ARG_DOUBLE, &pixel_size,
      "Side of one pixel in millimetres: figures in mm", "MM" },
    { "fov-diameter-px", 0, 0, G_OPTION_ARG_DOUBLE, &fov_px,
      "Diameter of the field of view in pixels (with --fov-diameter-mm): figures in mm", "PX" },
    { "fov-diameter-mm", 0, 0, G_OPTION_ARG_DOUBLE, &fov_mm,
      "Diameter of the field of view in millimetres (about 12–13 for a 45° camera)", "MM" },
    { "min-segment-length", 0, 0, G_OPTION_ARG_DOUBLE, &min_length,
      "Spurs and isolated pieces shorter than this are pruned (default 10; 0 keeps all)", "PX" },
    { "curvature-sigma", 0, 0, G_OPTION_ARG_DOUBLE, &sigma,
      "Smoothing of the centre line before length and curvature (default 6)", "PX" },
    { "skeleton-dir", 0, 0, G_OPTION_ARG_FILENAME, &skeleton_dir,
      "Also write NAME-skeleton.png there (skeleton white, junctions orange, end points cyan)",
      "DIR" },
    { "recursive", 'r', 0, G_OPTION_ARG_NONE, &recursive, "Also read subfolders of folders", NULL },
    { "jobs", 'j', 0, G_OPTION_ARG_INT, &jobs, "Maps at once (default 0: one per core)", "N" },
    { "quiet", 'q', 0, G_OPTION_ARG_NONE, &quiet, "Report failures only", NULL },
    { NULL }
  };
  GOptionContext *context = rete_cli_context_new (command, "MAP|FOLDER…",
    "Measures binary vessel maps: density, length, branching, calibre, tortuosity, fractal "
    "dimension.", description);
  g_option_context_add_main_entries (context, entries, NULL);
  int status = RETE_EXIT_USAGE;
  MeasureRun run = { 0 };
  GError *error = NULL;
  const char **names = NULL;
  if (!rete_cli_parse (context, command, &argc, &argv))
    goto out;
  if (argc < 2)
    {
      rete_cli_usage_error (command, "give at least one vessel map or folder");
      goto out;
    }
  rete_measure_params_init (&run.params);
  gboolean by_size = !isnan (pixel_size), by_fov = !isnan (fov_px) || !isnan (fov_mm);
  if (by_size && by_fov)
    {
      rete_cli_usage_error (command, "give either --pixel-size or the FOV diameter "
                            "(--fov-diameter-px and --fov-diameter-mm), not both");
      goto out;
    }
  if (by_fov && (isnan (fov_px) || isnan (fov_mm)))
    {
      rete_cli_usage_error (command, "the FOV diameter needs both --fov-diameter-px and "
                            "--fov-diameter-mm");
      goto out;
    }
  if (jobs < 0)
    {
      rete_cli_usage_error (command, "--jobs must be at least 0");
      goto out;
    }
  run.params.calibration = by_size ? RETE_CALIBRATION_PIXEL_SIZE
                           : by_fov ? RETE_CALIBRATION_FOV_DIAMETER : RETE_CALIBRATION_NONE;
  run.params.pixel_size_mm = by_size ? pixel_size : 0;
  run.params.fov_diameter_px = by_fov ? fov_px : 0;
  run.params.fov_diameter_mm = by_fov ? fov_mm : 0;
  run.params.min_segment_length = min_length;
  run.params.curvature_sigma = sigma;
  if (!rete_measure_params_check (&run.params, 0, 0, NULL, &error))
    {
      rete_cli_usage_error (command, "%s", error->message);
      goto out;
    }
  run.inputs = rete_cli_expand_inputs (argv + 1, recursive, skip_suffixes, &error);
  if (run.inputs == NULL)
    {
      fprintf (stderr, "%s: %s\n", command, error->message);
      status = RETE_EXIT_FAILED;
      goto out;
    }
  run.fov = fov;
  run.skeleton_dir = skeleton_dir;
  run.want_segments = segments != NULL;
  run.guard = rete_cli_guard_new ();
  guint n = run.n = run.inputs->len;
  run.headers = g_new0 (char *, n + 1);
  run.rows = g_new0 (char *, n + 1);
  run.segments = g_new0 (char *, n + 1);
  names = g_new0 (const char *, n + 1);
  for (guint i = 0; i < n; i++)
    {
      const ReteCliInput *input = run.inputs->pdata[i];
      rete_cli_guard_add (run.guard, input->path);
      names[i] = input->path;
    }
  if (fov != NULL && !g_file_test (fov, G_FILE_TEST_IS_DIR))
    rete_cli_guard_add (run.guard, fov);
  ReteCliProgress *progress = rete_cli_progress_new ("measured", n, quiet);
  rete_cli_run_batch (n, names, jobs, measure_one, &run, progress);
  int failed = rete_cli_progress_finish (progress);
  rete_cli_progress_free (progress);
  status = failed > 0 ? RETE_EXIT_FAILED : RETE_EXIT_OK;
  if ((guint) failed < n)
    {
      g_autofree char *table = join_tables (run.headers, run.rows, n, FALSE);
      const char *path = output ? output : "measurements.csv";
      if (!rete_cli_write_text (run.guard, path, table, &error))
        {
          fprintf (stderr, "%s: %s\n", command, error->message);
          status = RETE_EXIT_FAILED;
          g_clear_error (&error);
        }
      else if (!quiet && strcmp (path, "-") != 0)
        fprintf (stderr, "%s: %u rows written to %s\n", command, n - failed, path);
      if (segments != NULL)
        {
          g_autofree char *seg_table = join_tables (run.headers, run.segments, n, TRUE);
          if (!rete_cli_write_text (run.guard, segments, seg_table, &error))
            {
              fprintf (stderr, "%s: %s\n", command, error->message);
              status = RETE_EXIT_FAILED;
            }
        }
    }

out:
  g_clear_error (&error);
  g_option_context_free (context);
  rete_cli_guard_free (run.guard);
  free_table (run.headers, 0, run.n);
  free_table (run.rows, 0, run.n);
  free_table (run.segments, 0, run.n);
  g_free (names);
  if (run.inputs)
    g_ptr_array_free (run.inputs, TRUE);
  g_free (output);
  g_free (segments);
  g_free (fov);
  g_free (skeleton_dir);
  return status;
}
