/* test_cli.c — the `rete` command as a user runs it: the built binary on synthetic
 * photographs (made by `rete synth`), each subcommand's happy path, bad inputs with their
 * messages and documented exit codes (0 ok, 1 some inputs failed, 2 usage error), inputs left
 * untouched, results independent of --jobs, and the GNU parallel recipes of docs/PARALLEL.md
 * giving the same files as a plain run.
 *
 * Outside references: the exact truth of the synthetic photographs (the generator's own
 * vessel and FOV maps, drawn without anti-aliasing) and GNU parallel (Debian package). The
 * figures of the methods themselves are checked against skimage/sklearn in their own tests;
 * here only that the command hands them through. */
#include <json-glib/json-glib.h>
#include <math.h>
#include <string.h>
#include <sys/wait.h>
#include <glib/gstdio.h>

#include "rete_io.h"
#include "rete_nn.h"
#include "rete_test.h"

static char *rete_binary;
static char *photos;   /* folder: 3 synthetic photographs with their truth (400x400) */
static char *maps;     /* frangi maps of photos, made once */
static char *model_dir; /* RETE_MODEL_DIR of the runs */

typedef struct {
  int status;
  char *out, *err;
} Run;

static void
run_free (Run *run)
{
  g_free (run->out);
  g_free (run->err);
  g_free (run);
}
G_DEFINE_AUTOPTR_CLEANUP_FUNC (Run, run_free)

static char **
test_environment (void)
{
  char **env = g_get_environ ();
  env = g_environ_setenv (env, "RETE_NO_LIVE_PROGRESS", "1", TRUE);
  env = g_environ_setenv (env, "LC_ALL", "C", TRUE);
  env = g_environ_setenv (env, "RETE_MODEL_DIR", model_dir, TRUE);
  return env;
}

static Run *
run_argv (char **argv)
{
  Run *run = g_new0 (Run, 1);
  g_auto (GStrv) env = test_environment ();
  GError *error = NULL;
  int wait_status = 0;
  gboolean ok = g_spawn_sync (NULL, argv, env, G_SPAWN_DEFAULT, NULL, NULL, &run->out, &run->err,
                              &wait_status, &error);
  g_assert_no_error (error);
  g_assert_true (ok);
  run->status = WIFEXITED (wait_status) ? WEXITSTATUS (wait_status) : 128;
  g_autofree char *line = g_strjoinv (" ", argv);
  g_test_message ("$ %s -> exit %d\n%s%s", line, run->status, run->out, run->err);
  return run;
}

/* Runs `rete ARG...` (NULL-terminated). */
static Run *
rete (const char *first, ...)
{
  GPtrArray *argv = g_ptr_array_new ();
  g_ptr_array_add (argv, rete_binary);
  va_list args;
  va_start (args, first);
  for (const char *a = first; a != NULL; a = va_arg (args, const char *))
    g_ptr_array_add (argv, (char *) a);
  va_end (args);
  g_ptr_array_add (argv, NULL);
  Run *run = run_argv ((char **) argv->pdata);
  g_ptr_array_free (argv, TRUE);
  return run;
}

/* Runs a shell command line (for the GNU parallel recipes). */
static Run *
shell (const char *command_line)
{
  char *argv[] = { (char *) "/bin/sh", (char *) "-c", (char *) command_line, NULL };
  return run_argv (argv);
}

static char *
tmp (const char *name)
{
  return rete_test_tmp_path (name);
}

static gint
compare_names (gconstpointer a, gconstpointer b)
{
  return g_strcmp0 (*(const char *const *) a, *(const char *const *) b);
}

/* "name sha256\n" for every file below `dir`, sorted: inputs must be unchanged. */
static void
checksum_tree (const char *dir, GString *out)
{
  GDir *d = g_dir_open (dir, 0, NULL);
  g_assert_nonnull (d);
  GPtrArray *names = g_ptr_array_new_with_free_func (g_free);
  const char *name;
  while ((name = g_dir_read_name (d)) != NULL)
    g_ptr_array_add (names, g_strdup (name));
  g_dir_close (d);
  g_ptr_array_sort (names, compare_names);
  for (guint i = 0; i < names->len; i++)
    {
      g_autofree char *path = g_build_filename (dir, names->pdata[i], NULL);
      if (g_file_test (path, G_FILE_TEST_IS_DIR))
        {
          checksum_tree (path, out);
          continue;
        }
      g_autofree char *data = NULL;
      gsize length = 0;
      g_assert_true (g_file_get_contents (path, &data, &length, NULL));
      g_autofree char *sum = g_compute_checksum_for_data (G_CHECKSUM_SHA256, (guchar *) data, length);
      g_string_append_printf (out, "%s %s\n", path, sum);
    }
  g_ptr_array_free (names, TRUE);
}

static char *
checksums (const char *dir)
{
  GString *s = g_string_new (NULL);
  checksum_tree (dir, s);
  return g_string_free (s, FALSE);
}

static ReteImage *
load (const char *path)
{
  GError *error = NULL;
  ReteImage *image = rete_io_load (path, &error);
  g_assert_no_error (error);
  return image;
}

static gboolean
same_pixels (const char *a, const char *b)
{
  g_autoptr (ReteImage) x = load (a);
  g_autoptr (ReteImage) y = load (b);
  return x->width == y->width && x->height == y->height && x->channels == y->channels
         && memcmp (x->data, y->data, rete_image_n_pixels (x) * x->channels * sizeof (float)) == 0;
}

static void
assert_contains (const char *text, const char *part)
{
  if (strstr (text, part) == NULL)
    g_error ("expected to find \"%s\" in:\n%s", part, text);
}

static const char *const stems[] = { "synth-0001", "synth-0002", "synth-0003" };

/* ---- help and version ---- */

static void
test_help (void)
{
  g_autoptr (Run) top = rete ("--help", NULL);
  g_assert_cmpint (top->status, ==, 0);
  assert_contains (top->out, "Exit status: 0");
  assert_contains (top->out, "2 usage error");
  assert_contains (top->out, "vessels");
  assert_contains (top->out, "agreement");
  static const char *const commands[] = { "vessels", "fov", "agreement", "synth" };
  for (gsize i = 0; i < G_N_ELEMENTS (commands); i++)
    {
      g_autoptr (Run) sub = rete (commands[i], "--help", NULL);
      g_assert_cmpint (sub->status, ==, 0);
      assert_contains (sub->out, "Examples:");
      assert_contains (sub->out, "Exit status");
      g_autofree char *usage = g_strdup_printf ("rete %s", commands[i]);
      assert_contains (sub->out, usage);
    }
  g_autoptr (Run) via_help = rete ("help", "vessels", NULL);
  g_assert_cmpint (via_help->status, ==, 0);
  assert_contains (via_help->out, "--method");
  g_autoptr (Run) version = rete ("--version", NULL);
  g_assert_cmpint (version->status, ==, 0);
  assert_contains (version->out, "rete ");
  g_autoptr (Run) nothing = rete (NULL, NULL);
  g_assert_cmpint (nothing->status, ==, 2);
  g_autoptr (Run) unknown = rete ("frobnicate", NULL);
  g_assert_cmpint (unknown->status, ==, 2);
  assert_contains (unknown->err, "no command named 'frobnicate'");
}

/* ---- synth ---- */

static void
test_synth_demo_reproducible (void)
{
  /* The command in data/demo/README.md gives the committed files. */
  g_autofree char *out = tmp ("demo");
  g_autoptr (Run) run = rete ("synth", "--seed", "2026", "--size", "999x960", "--name", "demo",
                              "--output-dir", out, NULL);
  g_assert_cmpint (run->status, ==, 0);
  static const char *const files[] = { "demo-fundus.png", "demo-vessels.png", "demo-fov.png" };
  for (gsize i = 0; i < G_N_ELEMENTS (files); i++)
    {
      g_autofree char *made = g_build_filename (out, files[i], NULL);
      g_autofree char *committed = g_build_filename (rete_test_source_dir (), "data", "demo",
                                                     files[i], NULL);
      g_assert_true (same_pixels (made, committed));
    }
}

static void
test_synth_truth_files (void)
{
  /* Every photograph has 0/1 truth of its size; vessels only inside the FOV. */
  for (gsize i = 0; i < G_N_ELEMENTS (stems); i++)
    {
      g_autofree char *p = g_strdup_printf ("%s/%s-fundus.png", photos, stems[i]);
      g_autofree char *v = g_strdup_printf ("%s/%s-vessels.png", photos, stems[i]);
      g_autofree char *f = g_strdup_printf ("%s/%s-fov.png", photos, stems[i]);
      g_autoptr (ReteImage) photo = load (p);
      g_autoptr (ReteImage) vessels = load (v);
      g_autoptr (ReteImage) fov = load (f);
      g_assert_cmpint (photo->channels, ==, 3);
      g_assert_cmpint (photo->width, ==, 400);
      g_assert_cmpint (vessels->width, ==, 400);
      gsize n_vessel = 0;
      for (gsize k = 0; k < rete_image_n_pixels (vessels); k++)
        {
          g_assert_true (vessels->data[k] == 0.0f || vessels->data[k] == 1.0f);
          g_assert_true (vessels->data[k] <= fov->data[k]);
          n_vessel += vessels->data[k] > 0;
        }
      g_assert_cmpuint (n_vessel, >, 0);
    }
}

typedef struct {
  const char *name;
  const char *args[8];
  const char *message; /* expected in stderr */
} UsageCase;

static const UsageCase usage_cases[] = {
  { "synth-size", { "synth", "--size", "10x10", NULL }, "--size" },
  { "synth-trees", { "synth", "--trees", "-1", NULL }, "trees" },
  { "synth-jpeg", { "synth", "--jpeg-quality", "101", NULL }, "--jpeg-quality" },
  { "synth-argument", { "synth", "photo.png", NULL }, "unexpected argument" },
  { "vessels-method", { "vessels", "--method", "magic", "x.png", NULL }, "magic" },
  { "vessels-threshold-level", { "vessels", "--method", "frangi", "--threshold", "fixed:2", "x.png", NULL }, "between 0 and 1" },
  { "vessels-threshold-rule", { "vessels", "--method", "frangi", "--threshold", "median", "x.png", NULL }, "otsu" },
  { "vessels-threshold-fraction", { "vessels", "--method", "frangi", "--threshold", "fraction:1.5", "x.png", NULL }, "fraction" },
  { "vessels-jobs", { "vessels", "--method", "frangi", "--jobs", "-1", "x.png", NULL }, "--jobs" },
  { "vessels-bits", { "vessels", "--method", "frangi", "--bits", "12", "x.png", NULL }, "--bits" },
  { "vessels-scales", { "vessels", "--method", "frangi", "--scales", "4:1", "x.png", NULL }, "--scales" },
  { "vessels-not-a-number", { "vessels", "--method", "frangi", "--beta", "half", "x.png", NULL }, "half" },
  { "vessels-unknown-option", { "vessels", "--colour", "x.png", NULL }, "--colour" },
  { "vessels-no-input", { "vessels", "--method", "frangi", NULL }, "at least one photograph" },
  { "vessels-missing-model", { "vessels", "--model", "no-such-model", "x.png", NULL }, "no-such-model" },
  { "fov-rim", { "fov", "--rim", "-1", "x.png", NULL }, "--rim" },
  { "agreement-no-reference", { "agreement", "map.png", NULL }, "--reference" },
  { "agreement-threshold", { "agreement", "--threshold", "2", "--reference", "r.png", "m.png", NULL }, "--threshold" },
};

static void
test_usage_error (gconstpointer data)
{
  const UsageCase *c = data;
  const char *const *a = c->args;
  g_autoptr (Run) run = rete (a[0], a[1], a[2], a[3], a[4], a[5], a[6], a[7]);
  g_assert_cmpint (run->status, ==, 2);
  assert_contains (run->err, c->message);
  assert_contains (run->err, "--help");
}

/* ---- fov ---- */

static double
dice (const ReteImage *a, const ReteImage *b)
{
  gsize both = 0, na = 0, nb = 0;
  for (gsize i = 0; i < rete_image_n_pixels (a); i++)
    {
      gboolean x = a->data[i] > 0.5f, y = b->data[i] > 0.5f;
      both += x && y, na += x, nb += y;
    }
  return 2.0 * both / (na + nb);
}

static void
test_fov (void)
{
  g_autofree char *before = checksums (photos);
  g_autofree char *out = tmp ("fov");
  g_autoptr (Run) run = rete ("fov", "--output-dir", out, photos, NULL);
  g_assert_cmpint (run->status, ==, 0);
  /* Only the photographs: the truth files (-vessels, -fov) in the folder are skipped. */
  assert_contains (run->err, "3 of 3 done");
  for (gsize i = 0; i < G_N_ELEMENTS (stems); i++)
    {
      g_autofree char *made = g_strdup_printf ("%s/%s-fundus-fov.png", out, stems[i]);
      g_autofree char *truth = g_strdup_printf ("%s/%s-fov.png", photos, stems[i]);
      g_autoptr (ReteImage) a = load (made);
      g_autoptr (ReteImage) b = load (truth);
      double d = dice (a, b);
      g_test_message ("%s: FOV Dice against the exact truth %.4f (accepted > 0.98)", stems[i], d);
      g_assert_cmpfloat (d, >, 0.98);
    }
  g_autofree char *after = checksums (photos);
  g_assert_cmpstr (before, ==, after);
}

/* ---- vessels ---- */

static const char *const methods[] = { "frangi", "matched", "matched-fdog", "line" };

static void
check_maps (const char *dir, const char *stem)
{
  g_autofree char *binary = g_strdup_printf ("%s/%s-fundus-vessels.png", dir, stem);
  g_autofree char *probability = g_strdup_printf ("%s/%s-fundus-vessel-probability.png", dir, stem);
  g_autoptr (ReteImage) b = load (binary);
  g_autoptr (ReteImage) p = load (probability);
  g_assert_cmpint (b->width, ==, 400);
  g_assert_cmpint (p->height, ==, 400);
  gsize n = 0;
  for (gsize i = 0; i < rete_image_n_pixels (b); i++)
    {
      g_assert_true (b->data[i] == 0.0f || b->data[i] == 1.0f);
      g_assert_true (p->data[i] >= 0.0f && p->data[i] <= 1.0f);
      n += b->data[i] > 0;
    }
  g_assert_cmpuint (n, >, 0);
}

static void
test_vessels_method (gconstpointer data)
{
  const char *method = data;
  g_autofree char *before = checksums (photos);
  g_autofree char *name = g_strdup_printf ("vessels-%s", method);
  g_autofree char *out = tmp (name);
  g_autofree char *report = g_build_filename (out, "report.csv", NULL);
  g_autoptr (Run) run = rete ("vessels", "--method", method, "--write-fov", "--report", report,
                              "--output-dir", out, photos, NULL);
  g_assert_cmpint (run->status, ==, 0);
  for (gsize i = 0; i < G_N_ELEMENTS (stems); i++)
    check_maps (out, stems[i]);
  g_autofree char *csv = NULL;
  g_assert_true (g_file_get_contents (report, &csv, NULL, NULL));
  g_auto (GStrv) lines = g_strsplit (g_strstrip (csv), "\n", -1);
  g_assert_cmpuint (g_strv_length (lines), ==, 4);
  for (int i = 1; i < 4; i++)
    assert_contains (lines[i], ",\"ok\"");
  g_autofree char *after = checksums (photos);
  g_assert_cmpstr (before, ==, after);
}

static void
test_vessels_learned (void)
{
  g_autofree char *model = g_build_filename (rete_test_source_dir (), "models",
                                             "standard.safetensors", NULL);
  if (!g_file_test (model, G_FILE_TEST_EXISTS))
    {
      g_test_skip ("models/standard.safetensors is not in the source tree yet: learned method skipped");
      return;
    }
  g_autofree char *out = tmp ("vessels-learned");
  g_autoptr (Run) run = rete ("vessels", "--model", "standard", "--output-dir", out, photos, NULL);
  g_assert_cmpint (run->status, ==, 0);
  for (gsize i = 0; i < G_N_ELEMENTS (stems); i++)
    check_maps (out, stems[i]);
}

/* The learned method's plumbing with a tiny untrained U-Net (the maps mean nothing): found
 * by name in RETE_MODEL_DIR and by file; a broken model file is refused with its reason. */
static void
test_vessels_tiny_model (void)
{
  g_autofree char *models = tmp ("models");
  g_mkdir_with_parents (models, 0777);
  ReteUnetConfig config;
  rete_unet_config_init (&config);
  config.levels = 2;
  config.base_filters = 2;
  config.convs_per_block = 1;
  GError *error = NULL;
  ReteUnet *net = rete_unet_new (&config, 7, &error);
  g_assert_no_error (error);
  g_autoptr (ReteModel) model = rete_model_new (net);
  rete_model_set_meta (model, "name", "tiny");
  g_autofree char *path = g_build_filename (models, "tiny.safetensors", NULL);
  g_assert_true (rete_model_save (model, path, &error));
  g_assert_no_error (error);
  g_autofree char *bad = g_build_filename (models, "broken.safetensors", NULL);
  g_assert_true (g_file_set_contents (bad, "not a model", -1, NULL));

  char *saved = model_dir;
  model_dir = models;
  g_autofree char *out = tmp ("vessels-tiny");
  g_autoptr (Run) by_name = rete ("vessels", "--model", "tiny", "-o", out, photos, NULL);
  g_autofree char *out2 = tmp ("vessels-tiny-file");
  g_autoptr (Run) by_file = rete ("vessels", "--method", "learned", "--model", path, "-o", out2,
                                  photos, NULL);
  g_autoptr (Run) broken = rete ("vessels", "--model", "broken", "-o", out, photos, NULL);
  g_autoptr (Run) unknown = rete ("vessels", "--model", "absent", "-o", out, photos, NULL);
  model_dir = saved;
  g_assert_cmpint (by_name->status, ==, 0);
  assert_contains (by_name->err, "U-Net tiny");
  g_assert_cmpint (by_file->status, ==, 0);
  for (gsize i = 0; i < G_N_ELEMENTS (stems); i++)
    {
      g_autofree char *a = g_strdup_printf ("%s/%s-fundus-vessel-probability.png", out, stems[i]);
      g_autofree char *b = g_strdup_printf ("%s/%s-fundus-vessel-probability.png", out2, stems[i]);
      g_assert_true (same_pixels (a, b));
    }
  g_assert_cmpint (broken->status, ==, 1);
  assert_contains (broken->err, "cannot use the model");
  g_assert_cmpint (unknown->status, ==, 2);
  assert_contains (unknown->err, "models found: broken, "); /* then the shipped ones, if any */
}

static void
test_vessels_jobs_give_same_maps (void)
{
  g_autofree char *one = tmp ("jobs-1");
  g_autofree char *two = tmp ("jobs-2");
  g_autoptr (Run) a = rete ("vessels", "--method", "frangi", "--jobs", "1", "-q", "-o", one, photos, NULL);
  g_autoptr (Run) b = rete ("vessels", "--method", "frangi", "--jobs", "2", "-q", "-o", two, photos, NULL);
  g_assert_cmpint (a->status, ==, 0);
  g_assert_cmpint (b->status, ==, 0);
  for (gsize i = 0; i < G_N_ELEMENTS (stems); i++)
    for (int k = 0; k < 2; k++)
      {
        const char *suffix = k ? "vessels" : "vessel-probability";
        g_autofree char *x = g_strdup_printf ("%s/%s-fundus-%s.png", one, stems[i], suffix);
        g_autofree char *y = g_strdup_printf ("%s/%s-fundus-%s.png", two, stems[i], suffix);
        g_assert_true (same_pixels (x, y));
      }
}

/* ---- agreement ---- */

static void
test_agreement (void)
{
  g_autofree char *before = checksums (photos);
  g_autofree char *maps_before = checksums (maps);
  g_autofree char *csv = tmp ("agreement.csv");
  g_autofree char *json = tmp ("agreement.json");
  g_autoptr (Run) run = rete ("agreement", "--reference", photos, "--mask", photos, "--csv", csv,
                              "--json", json, maps, NULL);
  g_assert_cmpint (run->status, ==, 0);
  assert_contains (run->out, "AUC");
  assert_contains (run->out, "mean of 3");

  g_autofree char *text = NULL;
  g_assert_true (g_file_get_contents (csv, &text, NULL, NULL));
  g_auto (GStrv) lines = g_strsplit (g_strstrip (text), "\n", -1);
  g_assert_cmpuint (g_strv_length (lines), ==, 4);
  assert_contains (lines[0], "auc,average_precision");

  g_autoptr (JsonParser) parser = json_parser_new ();
  GError *error = NULL;
  g_assert_true (json_parser_load_from_file (parser, json, &error));
  g_assert_no_error (error);
  JsonObject *root = json_node_get_object (json_parser_get_root (parser));
  JsonArray *results = json_object_get_array_member (root, "results");
  g_assert_cmpuint (json_array_get_length (results), ==, 3);
  for (guint i = 0; i < 3; i++)
    {
      JsonObject *r = json_array_get_object_element (results, i);
      double auc = json_object_get_double_member (r, "auc");
      const char *reference = json_object_get_string_member (r, "reference");
      g_test_message ("%s: AUC %.4f against %s", json_object_get_string_member (r, "map"), auc,
                      reference);
      /* Frangi on the smooth synthetic photographs: AUC 0.985–0.99 measured at 565x584. */
      g_assert_cmpfloat (auc, >, 0.9);
      g_assert_true (g_str_has_suffix (reference, "-vessels.png"));
      g_assert_true (g_str_has_suffix (json_object_get_string_member (r, "mask"), "-fov.png"));
      JsonObject *roc = json_object_get_object_member (r, "roc");
      g_assert_cmpuint (json_array_get_length (json_object_get_array_member (roc, "true_positive_rate")), >=, 2);
    }

  /* One pair, positional form, with an ROC plot when this build has them. */
  g_autofree char *map = g_strdup_printf ("%s/%s-fundus-vessel-probability.png", maps, stems[0]);
  g_autofree char *ref = g_strdup_printf ("%s/%s-vessels.png", photos, stems[0]);
  g_autofree char *roc = tmp ("roc.png");
  g_autoptr (Run) pair = rete ("agreement", map, ref, "--roc", roc, NULL);
  if (pair->status == 2)
    assert_contains (pair->err, "no ROC plots");
  else
    {
      g_assert_cmpint (pair->status, ==, 0);
      assert_contains (pair->out, "best Dice");
      g_autofree char *png = NULL;
      gsize length = 0;
      g_assert_true (g_file_get_contents (roc, &png, &length, NULL));
      g_assert_true (length > 8 && memcmp (png, "\x89PNG", 4) == 0);
    }
  g_autofree char *after = checksums (photos);
  g_autofree char *maps_after = checksums (maps);
  g_assert_cmpstr (before, ==, after);
  g_assert_cmpstr (maps_before, ==, maps_after);
}

static void
test_agreement_no_vessel_reference (void)
{
  /* A reference without vessels (synth --trees 0): AUC undefined, said so, exit 1. */
  g_autofree char *dir = tmp ("no-vessels");
  g_autoptr (Run) made = rete ("synth", "--trees", "0", "--size", "400x400", "--name", "empty",
                               "-q", "-o", dir, NULL);
  g_assert_cmpint (made->status, ==, 0);
  g_autofree char *map = g_strdup_printf ("%s/%s-fundus-vessel-probability.png", maps, stems[0]);
  g_autofree char *ref = g_build_filename (dir, "empty-vessels.png", NULL);
  g_autofree char *json = tmp ("undefined.json");
  g_autoptr (Run) run = rete ("agreement", map, "--reference", ref, "--json", json, NULL);
  g_assert_cmpint (run->status, ==, 1);
  assert_contains (run->err, "AUC is undefined");
  assert_contains (run->out, "undef.");
  g_autoptr (JsonParser) parser = json_parser_new ();
  g_assert_true (json_parser_load_from_file (parser, json, NULL));
  JsonObject *r = json_array_get_object_element (
    json_object_get_array_member (json_node_get_object (json_parser_get_root (parser)), "results"), 0);
  g_assert_true (json_object_get_null_member (r, "auc"));
  g_assert_nonnull (json_object_get_string_member (r, "auc_undefined_reason"));
}

static void
test_agreement_mismatched_sizes (void)
{
  g_autofree char *dir = tmp ("other-size");
  g_autoptr (Run) made = rete ("synth", "--size", "320x300", "--name", "other", "-q", "-o", dir, NULL);
  g_assert_cmpint (made->status, ==, 0);
  g_autofree char *map = g_strdup_printf ("%s/%s-fundus-vessel-probability.png", maps, stems[0]);
  g_autofree char *ref = g_build_filename (dir, "other-vessels.png", NULL);
  g_autoptr (Run) run = rete ("agreement", map, "--reference", ref, NULL);
  g_assert_cmpint (run->status, ==, 1);
  assert_contains (run->err, "320");
  assert_contains (run->err, "400");
  /* And a FOV mask of the wrong size for `vessels`. */
  g_autofree char *photo = g_strdup_printf ("%s/%s-fundus.png", photos, stems[0]);
  g_autofree char *fov = g_build_filename (dir, "other-fov.png", NULL);
  g_autofree char *out = tmp ("mismatch-out");
  g_autoptr (Run) v = rete ("vessels", "--method", "frangi", "--fov", fov, "-o", out, photo, NULL);
  g_assert_cmpint (v->status, ==, 1);
  assert_contains (v->err, "320");
  g_autofree char *binary = g_strdup_printf ("%s/%s-fundus-vessels.png", out, stems[0]);
  g_assert_false (g_file_test (binary, G_FILE_TEST_EXISTS));
}

/* ---- bad inputs ---- */

static void
test_missing_file (void)
{
  g_autofree char *out = tmp ("missing-out");
  g_autoptr (Run) run = rete ("vessels", "--method", "frangi", "-o", out, "/nonexistent/photo.png", NULL);
  g_assert_cmpint (run->status, ==, 1);
  assert_contains (run->err, "/nonexistent/photo.png");
  assert_contains (run->err, "no such file");
  g_autoptr (Run) fov = rete ("fov", "-o", out, "/nonexistent/photo.png", NULL);
  g_assert_cmpint (fov->status, ==, 1);
  g_autoptr (Run) agreement = rete ("agreement", "/nonexistent/map.png", "--reference",
                                    "/nonexistent/ref.png", NULL);
  g_assert_cmpint (agreement->status, ==, 1);
  assert_contains (agreement->err, "no such file");
}

/* A folder: good photograph, a text file named like a PNG, another good photograph. */
static char *
folder_with_bad_file (void)
{
  g_autofree char *dir = tmp ("with-bad-file");
  g_mkdir_with_parents (dir, 0777);
  for (int i = 0; i < 2; i++)
    {
      g_autofree char *from = g_strdup_printf ("%s/%s-fundus.png", photos, stems[i]);
      g_autofree char *to = g_strdup_printf ("%s/%c-photo.png", dir, i ? 'c' : 'a');
      g_autofree char *data = NULL;
      gsize length = 0;
      g_assert_true (g_file_get_contents (from, &data, &length, NULL));
      g_assert_true (g_file_set_contents (to, data, length, NULL));
    }
  g_autofree char *bad = g_build_filename (dir, "b-notes.png", NULL);
  g_assert_true (g_file_set_contents (bad, "these are notes, not a photograph\n", -1, NULL));
  return g_steal_pointer (&dir);
}

static void
test_folder_with_bad_file (void)
{
  g_autofree char *dir = folder_with_bad_file ();
  g_autofree char *before = checksums (dir);
  g_autofree char *out = tmp ("with-bad-file-out");
  g_autoptr (Run) run = rete ("vessels", "--method", "frangi", "-o", out, dir, NULL);
  g_assert_cmpint (run->status, ==, 1);
  assert_contains (run->err, "FAILED: ");
  assert_contains (run->err, "b-notes.png is not an image");
  assert_contains (run->err, "2 of 3 done, 1 FAILED");
  static const char *const good[] = { "a-photo", "c-photo" };
  for (int i = 0; i < 2; i++)
    {
      g_autofree char *binary = g_strdup_printf ("%s/%s-vessels.png", out, good[i]);
      g_assert_true (g_file_test (binary, G_FILE_TEST_EXISTS));
    }
  g_autofree char *bad_out = g_build_filename (out, "b-notes-vessels.png", NULL);
  g_assert_false (g_file_test (bad_out, G_FILE_TEST_EXISTS));
  /* No temporary files left behind. */
  GDir *d = g_dir_open (out, 0, NULL);
  const char *name;
  int n = 0;
  while ((name = g_dir_read_name (d)) != NULL)
    n++;
  g_dir_close (d);
  g_assert_cmpint (n, ==, 4);
  g_autofree char *after = checksums (dir);
  g_assert_cmpstr (before, ==, after);

  /* A file that is no image at all, given by name. */
  g_autofree char *text = tmp ("notes.txt");
  g_assert_true (g_file_set_contents (text, "hello\n", -1, NULL));
  g_autoptr (Run) fov = rete ("fov", "-o", out, text, NULL);
  g_assert_cmpint (fov->status, ==, 1);
  assert_contains (fov->err, "FAILED: ");
  assert_contains (fov->err, "notes.txt");
}

static void
test_never_overwrites_input (void)
{
  /* x.png's FOV would be written as x-fov.png, which is another input: refused. */
  g_autofree char *dir = tmp ("overwrite");
  g_mkdir_with_parents (dir, 0777);
  g_autofree char *photo = g_strdup_printf ("%s/%s-fundus.png", photos, stems[0]);
  g_autofree char *data = NULL;
  gsize length = 0;
  g_assert_true (g_file_get_contents (photo, &data, &length, NULL));
  g_autofree char *x = g_build_filename (dir, "x.png", NULL);
  g_autofree char *x_fov = g_build_filename (dir, "x-fov.png", NULL);
  g_assert_true (g_file_set_contents (x, data, length, NULL));
  g_assert_true (g_file_set_contents (x_fov, data, length, NULL));
  g_autofree char *before = checksums (dir);
  g_autoptr (Run) run = rete ("fov", "-o", dir, x, x_fov, NULL);
  g_assert_cmpint (run->status, ==, 1);
  assert_contains (run->err, "refusing to write");
  g_autofree char *after_fov = g_build_filename (dir, "x-fov-fov.png", NULL);
  g_assert_true (g_file_test (after_fov, G_FILE_TEST_EXISTS)); /* the other input was done */
  g_unlink (after_fov);
  g_autofree char *after = checksums (dir);
  g_assert_cmpstr (before, ==, after);

  /* Maps written beside the photographs: a second run does not take them for photographs. */
  g_autoptr (Run) first = rete ("vessels", "--method", "frangi", "-o", dir, x, NULL);
  g_assert_cmpint (first->status, ==, 0);
  g_autoptr (Run) second = rete ("fov", "-o", tmp ("overwrite-2"), dir, NULL);
  g_assert_cmpint (second->status, ==, 0);
  assert_contains (second->err, "1 of 1 done");
}

/* ---- GNU parallel (docs/PARALLEL.md) ---- */

static void
test_parallel_equals_plain_run (void)
{
  if (!g_file_test ("/usr/bin/parallel", G_FILE_TEST_IS_EXECUTABLE))
    {
      g_test_skip ("GNU parallel (/usr/bin/parallel) is not installed: recipe not checked");
      return;
    }
  g_autofree char *plain = tmp ("parallel-plain");
  g_autofree char *one = tmp ("parallel-one-machine");
  g_autofree char *shards = tmp ("parallel-shards");
  g_autofree char *before = checksums (photos);
  g_autoptr (Run) reference = rete ("vessels", "--method", "frangi", "-q", "-o", plain, photos, NULL);
  g_assert_cmpint (reference->status, ==, 0);

  /* Recipe 1 of docs/PARALLEL.md: one job per photograph. */
  g_autofree char *recipe1 = g_strdup_printf (
    "cd '%s' && find . -maxdepth 1 -name '*-fundus.png' | sort | "
    "parallel --will-cite --halt never -j 2 '%s' vessels --method frangi --jobs 1 -q "
    "--output-dir '%s' {}", photos, rete_binary, one);
  g_autoptr (Run) r1 = shell (recipe1);
  g_assert_cmpint (r1->status, ==, 0);

  /* Recipe 2: several machines on a shared folder, each takes every N-th photograph
   * (here N = 2 "machines" run one after the other), batches of photographs per call. */
  for (int k = 0; k < 2; k++)
    {
      g_autofree char *recipe2 = g_strdup_printf (
        "cd '%s' && find . -maxdepth 1 -name '*-fundus.png' | sort | awk -v n=2 -v k=%d "
        "'NR %% n == k' | parallel --will-cite -X -j 1 '%s' vessels --method frangi -q "
        "--skip-existing --output-dir '%s' {}", photos, k, rete_binary, shards);
      g_autoptr (Run) r2 = shell (recipe2);
      g_assert_cmpint (r2->status, ==, 0);
    }
  for (gsize i = 0; i < G_N_ELEMENTS (stems); i++)
    for (int k = 0; k < 2; k++)
      {
        const char *suffix = k ? "vessels" : "vessel-probability";
        g_autofree char *p = g_strdup_printf ("%s/%s-fundus-%s.png", plain, stems[i], suffix);
        g_autofree char *q = g_strdup_printf ("%s/%s-fundus-%s.png", one, stems[i], suffix);
        g_autofree char *s = g_strdup_printf ("%s/%s-fundus-%s.png", shards, stems[i], suffix);
        g_assert_true (same_pixels (p, q));
        g_assert_true (same_pixels (p, s));
      }
  /* A failing photograph makes parallel's exit status non-zero (it counts failed jobs). */
  g_autofree char *bad = folder_with_bad_file ();
  g_autofree char *recipe3 = g_strdup_printf (
    "ls '%s'/*.png | parallel --will-cite -j 2 '%s' vessels --method frangi -q --output-dir "
    "'%s' {}", bad, rete_binary, tmp ("parallel-bad"));
  g_autoptr (Run) r3 = shell (recipe3);
  g_assert_cmpint (r3->status, ==, 1);
  assert_contains (r3->err, "b-notes.png is not an image");
  g_autofree char *after = checksums (photos);
  g_assert_cmpstr (before, ==, after);
}

int
main (int argc, char **argv)
{
  g_test_init (&argc, &argv, NULL);
  rete_io_init ();
  const char *build = g_getenv ("RETE_BUILD_DIR");
  rete_binary = g_build_filename (build ? build : ".", "cli", "rete", NULL);
  if (!g_file_test (rete_binary, G_FILE_TEST_IS_EXECUTABLE))
    {
      g_printerr ("test_cli: %s is not built (set RETE_BUILD_DIR)\n", rete_binary);
      return 1;
    }
  model_dir = g_build_filename (rete_test_source_dir (), "models", NULL);
  /* The photographs every test reads, and their Frangi maps. */
  photos = tmp ("photos");
  maps = tmp ("maps");
  g_autoptr (Run) made = rete ("synth", "--count", "3", "--size", "400x400", "-q",
                               "--output-dir", photos, NULL);
  g_autoptr (Run) mapped = rete ("vessels", "--method", "frangi", "-q", "--output-dir", maps,
                                 photos, NULL);
  if (made->status != 0 || mapped->status != 0)
    {
      g_printerr ("test_cli: could not make the test photographs:\n%s%s", made->err, mapped->err);
      return 1;
    }

  g_test_add_func ("/cli/help", test_help);
  g_test_add_func ("/cli/synth/demo-reproducible", test_synth_demo_reproducible);
  g_test_add_func ("/cli/synth/truth-files", test_synth_truth_files);
  for (gsize i = 0; i < G_N_ELEMENTS (usage_cases); i++)
    {
      g_autofree char *path = g_strdup_printf ("/cli/usage-error/%s", usage_cases[i].name);
      g_test_add_data_func (path, &usage_cases[i], test_usage_error);
    }
  g_test_add_func ("/cli/fov/matches-truth", test_fov);
  for (gsize i = 0; i < G_N_ELEMENTS (methods); i++)
    {
      g_autofree char *path = g_strdup_printf ("/cli/vessels/%s", methods[i]);
      g_test_add_data_func (path, methods[i], test_vessels_method);
    }
  g_test_add_func ("/cli/vessels/learned", test_vessels_learned);
  g_test_add_func ("/cli/vessels/learned-tiny-model", test_vessels_tiny_model);
  g_test_add_func ("/cli/vessels/jobs-give-same-maps", test_vessels_jobs_give_same_maps);
  g_test_add_func ("/cli/agreement/table-csv-json-roc", test_agreement);
  g_test_add_func ("/cli/agreement/no-vessel-reference", test_agreement_no_vessel_reference);
  g_test_add_func ("/cli/agreement/mismatched-sizes", test_agreement_mismatched_sizes);
  g_test_add_func ("/cli/bad-input/missing-file", test_missing_file);
  g_test_add_func ("/cli/bad-input/folder-with-bad-file", test_folder_with_bad_file);
  g_test_add_func ("/cli/outputs/never-overwrite-input", test_never_overwrites_input);
  g_test_add_func ("/cli/parallel/equals-plain-run", test_parallel_equals_plain_run);
  return g_test_run ();
}
