/* cli_files.c — inputs and outputs of the `rete` command: files and folders expanded into
 * photographs, companion files (masks, references) found by name, output names, and writes
 * that never touch an input (every write is a temporary file renamed into place, by
 * rete_io_save / rete_io_save_text). */
#include "rete_cli.h"

#include <errno.h>
#include <stdio.h>
#include <string.h>
#include <sys/stat.h>
#include <glib/gstdio.h>

/* Stems of Rete's own outputs, skipped when a folder is read. */
const char *const rete_cli_output_suffixes[] = { "-fov", "-vessels", "-vessel-probability",
                                                 "-widths", "-arteries", "-lesions",
                                                 "-roc", NULL };

void
rete_cli_input_free (ReteCliInput *input)
{
  if (input == NULL)
    return;
  g_free (input->path);
  g_free (input->stem);
  g_free (input);
}

/* "a/b.c.png" -> "a/b.c" */
static char *
strip_extension (const char *path)
{
  const char *base = strrchr (path, G_DIR_SEPARATOR);
  const char *dot = strrchr (base ? base + 1 : path, '.');
  if (dot == NULL || dot == (base ? base + 1 : path))
    return g_strdup (path);
  return g_strndup (path, dot - path);
}

static gboolean
has_skip_suffix (const char *stem, const char *const *skip_suffixes)
{
  for (int i = 0; skip_suffixes && skip_suffixes[i]; i++)
    if (g_str_has_suffix (stem, skip_suffixes[i]))
      return TRUE;
  return FALSE;
}

static gint
compare_strings (gconstpointer a, gconstpointer b)
{
  return g_strcmp0 (*(const char *const *) a, *(const char *const *) b);
}

/* Appends the image files below folder/relative (relative may be "") to `out`. */
static void
scan_folder (const char *folder, const char *relative, gboolean recursive,
             const char *const *skip_suffixes, GPtrArray *out)
{
  g_autofree char *here = g_build_filename (folder, relative, NULL);
  GDir *dir = g_dir_open (here, 0, NULL);
  if (dir == NULL)
    return;
  GPtrArray *names = g_ptr_array_new_with_free_func (g_free);
  const char *name;
  while ((name = g_dir_read_name (dir)) != NULL)
    if (name[0] != '.')
      g_ptr_array_add (names, g_strdup (name));
  g_dir_close (dir);
  g_ptr_array_sort (names, compare_strings);
  for (guint i = 0; i < names->len; i++)
    {
      const char *entry = names->pdata[i];
      g_autofree char *rel = relative[0] ? g_build_filename (relative, entry, NULL)
                                         : g_strdup (entry);
      g_autofree char *path = g_build_filename (folder, rel, NULL);
      if (g_file_test (path, G_FILE_TEST_IS_DIR))
        {
          if (recursive)
            scan_folder (folder, rel, recursive, skip_suffixes, out);
          continue;
        }
      if (!rete_io_is_image_name (entry))
        continue;
      g_autofree char *stem = strip_extension (rel);
      if (has_skip_suffix (stem, skip_suffixes))
        continue;
      ReteCliInput *input = g_new0 (ReteCliInput, 1);
      input->path = g_steal_pointer (&path);
      input->stem = g_steal_pointer (&stem);
      g_ptr_array_add (out, input);
    }
  g_ptr_array_free (names, TRUE);
}

GPtrArray *
rete_cli_expand_inputs (char **arguments, gboolean recursive, const char *const *skip_suffixes,
                        GError **error)
{
  GPtrArray *inputs = g_ptr_array_new_with_free_func ((GDestroyNotify) rete_cli_input_free);
  for (int a = 0; arguments && arguments[a]; a++)
    {
      const char *arg = arguments[a];
      if (g_file_test (arg, G_FILE_TEST_IS_DIR))
        {
          guint before = inputs->len;
          scan_folder (arg, "", recursive, skip_suffixes, inputs);
          if (inputs->len == before)
            {
              g_set_error (error, RETE_CLI_ERROR, RETE_CLI_ERROR_INPUT,
                           "folder %s holds no image files (.png .jpg .jpeg .tif .tiff .ppm "
                           ".pgm .gif)%s", arg,
                           recursive ? "" : "; add --recursive to look in its subfolders");
              g_ptr_array_free (inputs, TRUE);
              return NULL;
            }
          continue;
        }
      ReteCliInput *input = g_new0 (ReteCliInput, 1);
      input->path = g_strdup (arg);
      g_autofree char *base = g_path_get_basename (arg);
      input->stem = strip_extension (base);
      g_ptr_array_add (inputs, input);
    }
  /* The same file twice is done once; two files with one stem (a.jpg, a.png) keep apart
   * outputs by adding the extension to the second stem. */
  GHashTable *paths = g_hash_table_new_full (g_str_hash, g_str_equal, g_free, NULL);
  GHashTable *stems = g_hash_table_new (g_str_hash, g_str_equal);
  for (guint i = 0; i < inputs->len;)
    {
      ReteCliInput *input = inputs->pdata[i];
      g_autofree char *canonical = g_canonicalize_filename (input->path, NULL);
      if (g_hash_table_contains (paths, canonical))
        {
          g_ptr_array_remove_index (inputs, i);
          continue;
        }
      g_hash_table_add (paths, g_steal_pointer (&canonical));
      if (g_hash_table_contains (stems, input->stem))
        {
          const char *dot = strrchr (input->path, '.');
          char *stem = g_strdup_printf ("%s-%s", input->stem, dot ? dot + 1 : "other");
          g_free (input->stem);
          input->stem = stem;
        }
      g_hash_table_add (stems, input->stem);
      i++;
    }
  g_hash_table_destroy (paths);
  g_hash_table_destroy (stems);
  return inputs;
}

char *
rete_cli_photograph_stem (const char *stem)
{
  static const char *const suffixes[] = { "-vessel-probability", "-vessels", "-probability",
                                          "-fundus", NULL };
  char *out = g_strdup (stem);
  for (int i = 0; suffixes[i]; i++)
    if (g_str_has_suffix (out, suffixes[i]) && strlen (out) > strlen (suffixes[i]))
      out[strlen (out) - strlen (suffixes[i])] = '\0';
  return out;
}

static gboolean
is_image_file (const char *path)
{
  return g_file_test (path, G_FILE_TEST_IS_REGULAR) && rete_io_is_image_name (path);
}

char *
rete_cli_find_companion (const char *folder, const char *stem, const char *const *extra_suffixes,
                         const char *what, GError **error)
{
  if (!g_file_test (folder, G_FILE_TEST_IS_DIR))
    {
      if (g_file_test (folder, G_FILE_TEST_EXISTS))
        return g_strdup (folder);
      g_set_error (error, RETE_CLI_ERROR, RETE_CLI_ERROR_INPUT, "%s %s: no such file or folder",
                   what, folder);
      return NULL;
    }
  static const char *const extensions[] = { "png", "tif", "tiff", "jpg", "jpeg", "ppm", "pgm",
                                            "gif", "PNG", "TIF", "JPG", NULL };
  g_autofree char *base = g_build_filename (folder, stem, NULL);
  for (int e = 0; extensions[e]; e++)
    {
      g_autofree char *path = g_strdup_printf ("%s.%s", base, extensions[e]);
      if (is_image_file (path))
        return g_steal_pointer (&path);
    }
  for (int s = 0; extra_suffixes && extra_suffixes[s]; s++)
    for (int e = 0; extensions[e]; e++)
      {
        g_autofree char *path = g_strdup_printf ("%s%s.%s", base, extra_suffixes[s],
                                                 extensions[e]);
        if (is_image_file (path))
          return g_steal_pointer (&path);
      }
  /* Else the one file whose name starts with the stem and a separator
   * (Image_01L_1stHO.png for Image_01L). */
  g_autofree char *dir_name = g_path_get_dirname (base);
  g_autofree char *stem_base = g_path_get_basename (base);
  GDir *dir = g_dir_open (dir_name, 0, NULL);
  char *found = NULL;
  int n_found = 0;
  const char *name;
  while (dir && (name = g_dir_read_name (dir)) != NULL)
    {
      gsize n = strlen (stem_base);
      if (strncmp (name, stem_base, n) == 0 && (name[n] == '_' || name[n] == '-')
          && rete_io_is_image_name (name))
        {
          n_found++;
          if (found == NULL || g_strcmp0 (name, found) < 0)
            {
              g_free (found);
              found = g_strdup (name);
            }
        }
    }
  if (dir)
    g_dir_close (dir);
  if (n_found == 1)
    {
      char *path = g_build_filename (dir_name, found, NULL);
      g_free (found);
      return path;
    }
  g_free (found);
  if (n_found > 1)
    g_set_error (error, RETE_CLI_ERROR, RETE_CLI_ERROR_INPUT,
                 "no %s for %s in %s: %d files start with that name and none is exactly "
                 "%s.png (or .tif, .jpg); rename the one that belongs", what, stem, folder,
                 n_found, stem_base);
  else
    {
      GString *tried = g_string_new (NULL);
      g_string_printf (tried, "%s.png (.tif, .jpg ...)", stem_base);
      for (int s = 0; extra_suffixes && extra_suffixes[s]; s++)
        g_string_append_printf (tried, ", %s%s.png", stem_base, extra_suffixes[s]);
      g_string_append_printf (tried, ", %s_*.png", stem_base);
      g_set_error (error, RETE_CLI_ERROR, RETE_CLI_ERROR_INPUT, "no %s for %s in %s (looked for %s)",
                   what, stem, folder, tried->str);
      g_string_free (tried, TRUE);
    }
  return NULL;
}

char *
rete_cli_output_path (const char *output_dir, const char *stem, const char *suffix,
                      const char *extension)
{
  g_autofree char *name = g_strdup_printf ("%s%s.%s", stem, suffix ? suffix : "", extension);
  return g_build_filename (output_dir ? output_dir : ".", name, NULL);
}

/* ---- the guard: files of the run that must never be written ---- */

struct _ReteCliGuard {
  GMutex lock;
  GHashTable *files; /* "device:inode" */
};

static char *
file_key (const char *path)
{
  GStatBuf st;
  if (g_stat (path, &st) != 0)
    return NULL;
  return g_strdup_printf ("%" G_GUINT64_FORMAT ":%" G_GUINT64_FORMAT, (guint64) st.st_dev,
                          (guint64) st.st_ino);
}

gboolean
rete_cli_same_file (const char *a, const char *b)
{
  g_autofree char *ka = file_key (a);
  g_autofree char *kb = file_key (b);
  return ka != NULL && kb != NULL && strcmp (ka, kb) == 0;
}

ReteCliGuard *
rete_cli_guard_new (void)
{
  ReteCliGuard *guard = g_new0 (ReteCliGuard, 1);
  g_mutex_init (&guard->lock);
  guard->files = g_hash_table_new_full (g_str_hash, g_str_equal, g_free, g_free);
  return guard;
}

void
rete_cli_guard_free (ReteCliGuard *guard)
{
  if (guard == NULL)
    return;
  g_hash_table_destroy (guard->files);
  g_mutex_clear (&guard->lock);
  g_free (guard);
}

void
rete_cli_guard_add (ReteCliGuard *guard, const char *path)
{
  char *key = file_key (path);
  if (key == NULL)
    return; /* a missing input cannot be overwritten: it fails when read */
  g_mutex_lock (&guard->lock);
  g_hash_table_replace (guard->files, key, g_strdup (path));
  g_mutex_unlock (&guard->lock);
}

gboolean
rete_cli_guard_check (ReteCliGuard *guard, const char *path, GError **error)
{
  if (guard == NULL)
    return TRUE;
  g_autofree char *key = file_key (path);
  if (key == NULL)
    return TRUE;
  g_mutex_lock (&guard->lock);
  const char *input = g_hash_table_lookup (guard->files, key);
  g_autofree char *input_copy = g_strdup (input);
  g_mutex_unlock (&guard->lock);
  if (input_copy == NULL)
    return TRUE;
  g_set_error (error, RETE_CLI_ERROR, RETE_CLI_ERROR_OUTPUT,
               "refusing to write %s: it is the input %s. Choose another --output-dir (Rete "
               "never overwrites its inputs)", path, input_copy);
  return FALSE;
}

static gboolean
make_parent (const char *path, GError **error)
{
  g_autofree char *dir = g_path_get_dirname (path);
  if (g_mkdir_with_parents (dir, 0777) != 0)
    {
      int saved = errno;
      g_set_error (error, RETE_CLI_ERROR, RETE_CLI_ERROR_OUTPUT,
                   "cannot make the folder %s: %s", dir, g_strerror (saved));
      return FALSE;
    }
  return TRUE;
}

gboolean
rete_cli_write_image (ReteCliGuard *guard, const ReteImage *image, const char *path,
                      int bit_depth, GError **error)
{
  if (!rete_cli_guard_check (guard, path, error) || !make_parent (path, error))
    return FALSE;
  ReteSaveOptions options = { bit_depth > 0 ? bit_depth : 8, 95 };
  return rete_io_save (image, path, &options, error);
}

gboolean
rete_cli_write_text (ReteCliGuard *guard, const char *path, const char *text, GError **error)
{
  if (g_strcmp0 (path, "-") == 0)
    {
      fputs (text, stdout);
      fflush (stdout);
      return TRUE;
    }
  if (!rete_cli_guard_check (guard, path, error) || !make_parent (path, error))
    return FALSE;
  return rete_io_save_text (path, text, -1, error);
}

ReteImage *
rete_cli_load_grey (const char *path, const char *what, GError **error)
{
  ReteImage *image = rete_io_load_grey (path, error);
  if (image == NULL)
    g_prefix_error (error, "%s: ", what);
  return image;
}
