/* cli_options.c — option parsing shared by the subcommands: GOptionContext set-up, one way
 * of reporting usage errors, values in the trade's words (thresholds, scale ranges, sizes)
 * and where shipped models are found. */
#include "rete_cli.h"

#include <errno.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

G_DEFINE_QUARK (rete-cli-error-quark, rete_cli_error)

GOptionContext *
rete_cli_context_new (const char *command, const char *parameters, const char *summary,
                      const char *description)
{
  GOptionContext *context = g_option_context_new (parameters);
  g_option_context_set_summary (context, summary);
  g_autofree char *full = g_strconcat (description ? description : "", description ? "\n" : "",
                                       RETE_CLI_EXIT_HELP, NULL);
  g_option_context_set_description (context, full);
  g_option_context_set_help_enabled (context, TRUE);
  return context;
}

int
rete_cli_usage_error (const char *command, const char *format, ...)
{
  va_list args;
  va_start (args, format);
  g_autofree char *message = g_strdup_vprintf (format, args);
  va_end (args);
  fprintf (stderr, "%s: %s\nTry '%s --help' for the options and examples.\n", command, message,
           command);
  return RETE_EXIT_USAGE;
}

gboolean
rete_cli_parse (GOptionContext *context, const char *command, int *argc, char ***argv)
{
  GError *error = NULL;
  if (!g_option_context_parse (context, argc, argv, &error))
    {
      rete_cli_usage_error (command, "%s", error->message);
      g_error_free (error);
      return FALSE;
    }
  return TRUE;
}

static gboolean
parse_number (const char *text, const char *what, double *value, GError **error)
{
  char *end = NULL;
  errno = 0;
  double v = g_ascii_strtod (text, &end);
  if (text[0] == '\0' || end == NULL || *end != '\0' || errno != 0 || !isfinite (v))
    {
      g_set_error (error, RETE_CLI_ERROR, RETE_CLI_ERROR_USAGE,
                   "%s: '%s' is not a number", what, text);
      return FALSE;
    }
  *value = v;
  return TRUE;
}

gboolean
rete_cli_parse_threshold (const char *text, ReteBinaryParams *binary, GError **error)
{
  double v;
  if (g_ascii_strcasecmp (text, "otsu") == 0)
    {
      binary->method = RETE_THRESHOLD_OTSU;
      return TRUE;
    }
  const char *value = text;
  gboolean fraction = FALSE;
  if (g_str_has_prefix (text, "fixed:"))
    value = text + 6;
  else if (g_str_has_prefix (text, "fraction:"))
    value = text + 9, fraction = TRUE;
  else if (strchr (text, ':') != NULL || (!g_ascii_isdigit (text[0]) && text[0] != '.'))
    {
      g_set_error (error, RETE_CLI_ERROR, RETE_CLI_ERROR_USAGE,
                   "--threshold '%s' is not a rule Rete knows; use otsu, fixed:LEVEL (say "
                   "fixed:0.5) or fraction:F (say fraction:0.12 to mark 12 %% of the FOV)", text);
      return FALSE;
    }
  if (!parse_number (value, "--threshold", &v, error))
    return FALSE;
  if (fraction)
    {
      if (!(v > 0.0 && v < 1.0))
        {
          g_set_error (error, RETE_CLI_ERROR, RETE_CLI_ERROR_USAGE,
                       "--threshold fraction:%s: the vessel fraction must lie strictly between "
                       "0 and 1 (0.12 marks 12 %% of the FOV as vessel)", value);
          return FALSE;
        }
      binary->method = RETE_THRESHOLD_FRACTION;
      binary->fraction = v;
      return TRUE;
    }
  if (!(v >= 0.0 && v <= 1.0))
    {
      g_set_error (error, RETE_CLI_ERROR, RETE_CLI_ERROR_USAGE,
                   "--threshold fixed:%s: a vessel map holds values in [0,1], so the level "
                   "must lie between 0 and 1", value);
      return FALSE;
    }
  binary->method = RETE_THRESHOLD_FIXED;
  binary->level = v;
  return TRUE;
}

gboolean
rete_cli_parse_range (const char *text, const char *what, double *low, double *high,
                      double *step, GError **error)
{
  g_auto (GStrv) parts = g_strsplit (text, ":", -1);
  guint n = g_strv_length (parts);
  if (n < 1 || n > 3)
    {
      g_set_error (error, RETE_CLI_ERROR, RETE_CLI_ERROR_USAGE,
                   "%s '%s': give MIN:MAX:STEP, MIN:MAX or one value", what, text);
      return FALSE;
    }
  double v[3] = { 0, 0, 1 };
  for (guint i = 0; i < n; i++)
    if (!parse_number (parts[i], what, &v[i], error))
      return FALSE;
  if (n == 1)
    v[1] = v[0];
  if (!(v[0] > 0 && v[1] >= v[0] && v[2] > 0))
    {
      g_set_error (error, RETE_CLI_ERROR, RETE_CLI_ERROR_USAGE,
                   "%s '%s': scales must be positive, MAX at least MIN and STEP positive", what,
                   text);
      return FALSE;
    }
  *low = v[0];
  *high = v[1];
  *step = v[2];
  return TRUE;
}

gboolean
rete_cli_parse_size (const char *text, int *width, int *height, GError **error)
{
  char *end = NULL;
  long w = strtol (text, &end, 10);
  long h = -1;
  if (end && (*end == 'x' || *end == 'X'))
    {
      char *rest = end + 1;
      h = strtol (rest, &end, 10);
      if (end == rest)
        h = -1;
    }
  if (end == NULL || *end != '\0' || w < 32 || h < 32 || w > RETE_MAX_SIDE || h > RETE_MAX_SIDE)
    {
      g_set_error (error, RETE_CLI_ERROR, RETE_CLI_ERROR_USAGE,
                   "--size '%s': give WIDTHxHEIGHT in pixels, each 32 to %d (say 999x960)", text,
                   RETE_MAX_SIDE);
      return FALSE;
    }
  *width = (int) w;
  *height = (int) h;
  return TRUE;
}

char **
rete_cli_model_dirs (void)
{
  GPtrArray *dirs = g_ptr_array_new ();
  const char *env = g_getenv ("RETE_MODEL_DIR");
  if (env != NULL && env[0] != '\0')
    g_ptr_array_add (dirs, g_strdup (env));
#ifdef RETE_MODEL_INSTALL_DIR
  g_ptr_array_add (dirs, g_strdup (RETE_MODEL_INSTALL_DIR));
#endif
#ifdef RETE_MODEL_SOURCE_DIR
  g_ptr_array_add (dirs, g_strdup (RETE_MODEL_SOURCE_DIR));
#endif
  g_ptr_array_add (dirs, NULL);
  return (char **) g_ptr_array_free (dirs, FALSE);
}

static gint
compare_names (gconstpointer a, gconstpointer b)
{
  return g_strcmp0 (*(const char *const *) a, *(const char *const *) b);
}

char *
rete_cli_find_model (const char *name_or_file, GError **error)
{
  if (g_file_test (name_or_file, G_FILE_TEST_IS_REGULAR))
    return g_strdup (name_or_file);
  if (strchr (name_or_file, G_DIR_SEPARATOR) != NULL)
    {
      g_set_error (error, RETE_CLI_ERROR, RETE_CLI_ERROR_USAGE,
                   "--model %s: no such file", name_or_file);
      return NULL;
    }
  g_auto (GStrv) dirs = rete_cli_model_dirs ();
  g_autofree char *with_ext = g_str_has_suffix (name_or_file, ".safetensors")
                                ? g_strdup (name_or_file)
                                : g_strconcat (name_or_file, ".safetensors", NULL);
  for (int i = 0; dirs[i] != NULL; i++)
    {
      g_autofree char *path = g_build_filename (dirs[i], with_ext, NULL);
      if (g_file_test (path, G_FILE_TEST_IS_REGULAR))
        return g_steal_pointer (&path);
    }
  /* Say where we looked and what is there. */
  GPtrArray *names = g_ptr_array_new_with_free_func (g_free);
  GString *looked = g_string_new (NULL);
  for (int i = 0; dirs[i] != NULL; i++)
    {
      g_string_append_printf (looked, "%s%s", i ? ", " : "", dirs[i]);
      GDir *dir = g_dir_open (dirs[i], 0, NULL);
      const char *name;
      while (dir && (name = g_dir_read_name (dir)) != NULL)
        if (g_str_has_suffix (name, ".safetensors"))
          g_ptr_array_add (names, g_strndup (name, strlen (name) - strlen (".safetensors")));
      if (dir)
        g_dir_close (dir);
    }
  g_ptr_array_sort (names, compare_names);
  GString *found = g_string_new (NULL);
  /* a name found in two folders (installed and source tree) is listed once */
  for (guint i = 0; i < names->len; i++)
    if (i == 0 || g_strcmp0 (names->pdata[i], names->pdata[i - 1]) != 0)
      g_string_append_printf (found, "%s%s", found->len ? ", " : "", (const char *) names->pdata[i]);
  g_ptr_array_free (names, TRUE);
  g_set_error (error, RETE_CLI_ERROR, RETE_CLI_ERROR_USAGE,
               "--model %s: no such model file, and no model of that name in %s (models found: "
               "%s). Give a model file, set RETE_MODEL_DIR, or choose a classical --method "
               "(frangi, matched, matched-fdog, line)",
               name_or_file, looked->str, found->len ? found->str : "none");
  g_string_free (found, TRUE);
  g_string_free (looked, TRUE);
  return NULL;
}
