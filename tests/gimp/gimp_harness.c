/* gimp_harness.c — see gimp_harness.h. */
#include "gimp_harness.h"

#include <glib/gstdio.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "rete_io.h"
#include "rete_test.h"

static char *gimp_console;
static char *profile_dir;
static char *home_dir;
static gboolean setup_done, setup_ok;

static char **
gimp_environment (void)
{
  char **env = g_get_environ ();
  g_autofree char *models = g_build_filename (rete_test_source_dir (), "models", NULL);

  env = g_environ_setenv (env, "HOME", home_dir, TRUE);
  env = g_environ_setenv (env, "GIMP2_DIRECTORY", profile_dir, TRUE);
  env = g_environ_setenv (env, "RETE_MODEL_DIR", models, TRUE);
  env = g_environ_setenv (env, "LANG", "C.UTF-8", TRUE);
  env = g_environ_setenv (env, "LANGUAGE", "C", TRUE);
  env = g_environ_unsetenv (env, "DISPLAY");
  return env;
}

static gboolean
copy_file (const char *from, const char *to, int mode)
{
  g_autofree char *data = NULL;
  gsize length;

  if (!g_file_get_contents (from, &data, &length, NULL)
      || !g_file_set_contents (to, data, length, NULL))
    return FALSE;
  return g_chmod (to, mode) == 0;
}

/* Installs the plug-in into the profile as meson install lays it out:
 * plug-ins/rete-gimp/rete-gimp and plug-ins/rete-gimp/locale/<lang>/LC_MESSAGES/rete-gimp.mo */
static gboolean
install_plugin (const char *binary)
{
  g_autofree char *folder = g_build_filename (profile_dir, "plug-ins", "rete-gimp", NULL);
  g_autofree char *target = g_build_filename (folder, "rete-gimp", NULL);
  const char *po = g_getenv ("RETE_GIMP_PO_BUILD_DIR");
  GDir *dir;
  const char *lang;

  g_mkdir_with_parents (folder, 0755);
  if (!copy_file (binary, target, 0755))
    return FALSE;
  if (po && (dir = g_dir_open (po, 0, NULL)))
    {
      while ((lang = g_dir_read_name (dir)))
        {
          g_autofree char *mo = g_build_filename (po, lang, "LC_MESSAGES", "rete-gimp.mo", NULL);
          g_autofree char *to_dir = g_build_filename (folder, "locale", lang, "LC_MESSAGES", NULL);
          g_autofree char *to = g_build_filename (to_dir, "rete-gimp.mo", NULL);

          if (!g_file_test (mo, G_FILE_TEST_IS_REGULAR))
            continue;
          g_mkdir_with_parents (to_dir, 0755);
          copy_file (mo, to, 0644);
        }
      g_dir_close (dir);
    }
  return TRUE;
}

const char *
gimp_harness_setup (void)
{
  const char *binary = g_getenv ("RETE_GIMP_PLUGIN");

  if (!setup_done)
    {
      setup_done = TRUE;
      gimp_console = g_find_program_in_path ("gimp-console-2.10");
      if (gimp_console && binary && g_file_test (binary, G_FILE_TEST_IS_EXECUTABLE))
        {
          home_dir = rete_test_tmp_path ("home");
          profile_dir = rete_test_tmp_path ("gimp-profile");
          g_mkdir_with_parents (home_dir, 0700);
          /* Let GIMP create its profile on a first run (a folder made by hand makes it skip
           * its user install), then install into it. */
          g_autoptr (GimpRun) first = gimp_harness_run ("(gimp-message \"RETE-DONE\")", 120);
          setup_ok = first->done && install_plugin (binary);
          if (!setup_ok)
            g_printerr ("# GIMP did not start:\n%s\n", first->output);
        }
    }
  if (!gimp_console)
    g_test_skip ("gimp-console-2.10 is not installed: GIMP batch tests skipped");
  else if (!binary || !g_file_test (binary, G_FILE_TEST_IS_EXECUTABLE))
    g_test_skip ("the plug-in was not built (RETE_GIMP_PLUGIN): GIMP batch tests skipped");
  else if (!setup_ok)
    g_test_fail_printf ("GIMP could not be started with an isolated profile");
  return setup_ok ? profile_dir : NULL;
}

static void
parse_values (GimpRun *run)
{
  g_auto (GStrv) lines = g_strsplit (run->output, "\n", -1);

  for (int i = 0; lines[i]; i++)
    {
      const char *at = strstr (lines[i], "RETE-VALUE ");
      g_auto (GStrv) words = NULL;

      if (!at)
        continue;
      words = g_strsplit (at + strlen ("RETE-VALUE "), " ", 3);
      if (words[0] && words[1])
        {
          double *value = g_new (double, 1);

          *value = g_ascii_strtod (words[1], NULL);
          g_hash_table_replace (run->values, g_strdup (words[0]), value);
        }
    }
}

GimpRun *
gimp_harness_run (const char *script, int timeout)
{
  GimpRun *run = g_new0 (GimpRun, 1);
  g_autofree char *script_path = rete_test_tmp_path ("script.scm");
  g_autofree char *load = NULL;
  g_autofree char *seconds = g_strdup_printf ("%d", timeout);
  g_autofree char *out = NULL, *err = NULL;
  g_auto (GStrv) env = gimp_environment ();
  g_autofree char *quoted = gimp_scheme_string (script_path);
  GError *error = NULL;
  int status = 0;

  run->values = g_hash_table_new_full (g_str_hash, g_str_equal, g_free, g_free);
  g_file_set_contents (script_path, script, -1, NULL);
  load = g_strdup_printf ("(load %s)", quoted);
  {
    const char *argv[] = { "timeout", seconds, gimp_console, "-i", "-d", "-f", "-b", load,
                           "-b", "(gimp-quit 0)", NULL };

    if (!g_spawn_sync (NULL, (char **) argv, env, G_SPAWN_SEARCH_PATH, NULL, NULL, &out, &err,
                       &status, &error))
      {
        run->output = g_strdup (error->message);
        g_error_free (error);
        return run;
      }
  }
  run->output = g_strconcat (out ? out : "", err ? err : "", NULL);
  run->done = strstr (run->output, "RETE-DONE") != NULL;
  run->failed = strstr (run->output, "execution error") != NULL
                || strstr (run->output, "Procedure execution of") != NULL;
  run->crashed = strstr (run->output, "Plug-in crashed") != NULL
                 || strstr (run->output, "fatal error") != NULL;
  /* "GIMP-Error: Calling error for procedure ..." is how an error status is reported; any
   * other GIMP-Error is not expected. */
  for (const char *at = strstr (run->output, "GIMP-Error"); at; at = strstr (at + 1, "GIMP-Error"))
    if (!g_str_has_prefix (at, "GIMP-Error: Calling error for procedure")
        && !g_str_has_prefix (at, "GIMP-Error: Execution error for procedure"))
      run->crashed = TRUE;
  parse_values (run);
  return run;
}

void
gimp_run_free (GimpRun *run)
{
  g_free (run->output);
  g_hash_table_unref (run->values);
  g_free (run);
}

double
gimp_run_value (const GimpRun *run, const char *name)
{
  const double *value = g_hash_table_lookup (run->values, name);

  if (!value)
    {
      g_test_message ("GIMP output:\n%s", run->output);
      g_test_fail_printf ("GIMP printed no value called %s", name);
      return NAN;
    }
  return *value;
}

void
gimp_run_assert_ok (const GimpRun *run)
{
  if (!run->done || run->failed || run->crashed)
    {
      g_printerr ("# GIMP output:\n%s\n", run->output);
      g_assert_false (run->crashed);
      g_assert_false (run->failed);
      g_assert_true (run->done);
    }
}

gsize
gimp_compare_png (const char *png, const ReteImage *map, int *max_diff, gsize *ties)
{
  GError *error = NULL;
  g_autoptr (ReteImage) saved = rete_io_load_grey (png, &error);
  gsize differing = 0;

  g_assert_no_error (error);
  g_assert_cmpint (saved->width, ==, map->width);
  g_assert_cmpint (saved->height, ==, map->height);
  *max_diff = 0;
  *ties = 0;
  for (gsize i = 0; i < rete_image_n_pixels (map); i++)
    {
      double level = CLAMP (map->data[i], 0.0f, 1.0f) * 255.0;
      int expected = (int) floor (level + 0.5);
      int got = (int) floor (saved->data[i] * 255.0 + 0.5);
      int diff = abs (expected - got);

      /* A value within 0.001 level of a half level may be rounded either way by babl's
       * float-to-8-bit conversion: one level off there is a tie, not a difference. */
      if (diff == 1 && fabs (level - floor (level) - 0.5) < 1e-3)
        {
          (*ties)++;
          continue;
        }
      if (diff)
        differing++;
      *max_diff = MAX (*max_diff, diff);
    }
  return differing;
}

char *
gimp_scheme_string (const char *text)
{
  GString *s = g_string_new ("\"");

  for (const char *p = text; *p; p++)
    {
      if (*p == '"' || *p == '\\')
        g_string_append_c (s, '\\');
      g_string_append_c (s, *p);
    }
  g_string_append_c (s, '"');
  return g_string_free (s, FALSE);
}
