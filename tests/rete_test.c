/* rete_test.c — shared support for the test binaries (see rete_test.h). */
#include "rete_test.h"

#include <glib/gstdio.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <string.h>
#include <stdlib.h>
#include <sys/wait.h>

const char *
rete_test_data_dir (void)
{
  static char *dir = NULL;
  static gboolean looked = FALSE;
  if (!looked)
    {
      looked = TRUE;
      const char *env = g_getenv ("RETE_DATA_DIR");
      if (env != NULL && g_file_test (env, G_FILE_TEST_IS_DIR))
        dir = g_strdup (env);
      else
        {
          g_autofree char *guess = g_build_filename (rete_test_source_dir (), "..", "shared",
                                                     "data", NULL);
          if (g_file_test (guess, G_FILE_TEST_IS_DIR))
            dir = g_steal_pointer (&guess);
        }
    }
  return dir;
}

char *
rete_test_data_file (const char *relative)
{
  const char *dir = rete_test_data_dir ();
  if (dir == NULL)
    {
      g_test_skip ("../shared/data is absent (set RETE_DATA_DIR): open-data check skipped");
      return NULL;
    }
  char *path = g_build_filename (dir, relative, NULL);
  if (!g_file_test (path, G_FILE_TEST_EXISTS))
    {
      g_autofree char *msg = g_strdup_printf ("%s is absent: open-data check skipped", path);
      g_test_skip (msg);
      g_free (path);
      return NULL;
    }
  return path;
}

const char *
rete_test_source_dir (void)
{
  const char *env = g_getenv ("RETE_SOURCE_DIR");
  return env != NULL ? env : ".";
}

static char *tmp_dir = NULL;

static void
remove_tree (const char *path)
{
  if (g_file_test (path, G_FILE_TEST_IS_DIR) && !g_file_test (path, G_FILE_TEST_IS_SYMLINK))
    {
      GDir *dir = g_dir_open (path, 0, NULL);
      if (dir != NULL)
        {
          const char *name;
          while ((name = g_dir_read_name (dir)) != NULL)
            {
              g_autofree char *child = g_build_filename (path, name, NULL);
              remove_tree (child);
            }
          g_dir_close (dir);
        }
      g_rmdir (path);
    }
  else
    g_unlink (path);
}

static void
remove_tmp_dir (void)
{
  if (tmp_dir != NULL && g_getenv ("RETE_KEEP_TMP") == NULL)
    remove_tree (tmp_dir);
}

const char *
rete_test_tmp_dir (void)
{
  if (tmp_dir == NULL)
    {
      tmp_dir = g_dir_make_tmp ("rete-test-XXXXXX", NULL);
      g_assert_nonnull (tmp_dir);
      atexit (remove_tmp_dir);
    }
  return tmp_dir;
}

char *
rete_test_tmp_path (const char *name)
{
  return g_build_filename (rete_test_tmp_dir (), name, NULL);
}

static gboolean
write_npy (const char *path, const void *data, gsize item, const char *descr, const gsize *shape,
           int n_dims, GError **error)
{
  GString *header = g_string_new ("{'descr': '");
  g_string_append_printf (header, "%s', 'fortran_order': False, 'shape': (", descr);
  gsize count = 1;
  for (int i = 0; i < n_dims; i++)
    {
      g_string_append_printf (header, "%" G_GSIZE_FORMAT "%s", shape[i],
                              n_dims == 1 || i < n_dims - 1 ? ", " : "");
      count *= shape[i];
    }
  g_string_append (header, "), }");
  /* magic(6) + version(2) + header length(2) + header, padded with spaces to 64 bytes, '\n' */
  while ((10 + header->len + 1) % 64 != 0)
    g_string_append_c (header, ' ');
  g_string_append_c (header, '\n');
  FILE *f = g_fopen (path, "wb");
  if (f == NULL)
    {
      g_set_error (error, G_FILE_ERROR, G_FILE_ERROR_FAILED, "cannot write %s", path);
      g_string_free (header, TRUE);
      return FALSE;
    }
  guint16 hlen = GUINT16_TO_LE ((guint16) header->len);
  fwrite ("\x93NUMPY\x01\x00", 1, 8, f);
  fwrite (&hlen, 2, 1, f);
  fwrite (header->str, 1, header->len, f);
  gsize written = fwrite (data, item, count, f);
  gboolean ok = fclose (f) == 0 && written == count;
  g_string_free (header, TRUE);
  if (!ok)
    g_set_error (error, G_FILE_ERROR, G_FILE_ERROR_FAILED, "short write to %s", path);
  return ok;
}

gboolean
rete_test_write_npy_f32 (const char *path, const float *data, const gsize *shape, int n_dims,
                         GError **error)
{
  return write_npy (path, data, sizeof (float), "<f4", shape, n_dims, error);
}

gboolean
rete_test_write_npy_u8 (const char *path, const guint8 *data, const gsize *shape, int n_dims,
                        GError **error)
{
  return write_npy (path, data, 1, "|u1", shape, n_dims, error);
}

float *
rete_test_read_npy_f32 (const char *path, gsize *shape, int *n_dims, GError **error)
{
  gchar *contents = NULL;
  gsize length = 0;
  if (!g_file_get_contents (path, &contents, &length, error))
    return NULL;
  if (length < 10 || memcmp (contents, "\x93NUMPY", 6) != 0)
    {
      g_set_error (error, G_FILE_ERROR, G_FILE_ERROR_INVAL, "%s is not a .npy file", path);
      g_free (contents);
      return NULL;
    }
  int major = (guint8) contents[6];
  gsize hlen, offset;
  if (major == 1)
    hlen = (guint8) contents[8] | ((gsize) (guint8) contents[9] << 8), offset = 10;
  else
    hlen = (guint8) contents[8] | ((gsize) (guint8) contents[9] << 8)
           | ((gsize) (guint8) contents[10] << 16) | ((gsize) (guint8) contents[11] << 24),
    offset = 12;
  g_autofree char *header = g_strndup (contents + offset, hlen);
  gboolean f64 = strstr (header, "<f8") != NULL;
  if (!f64 && strstr (header, "<f4") == NULL)
    {
      g_set_error (error, G_FILE_ERROR, G_FILE_ERROR_INVAL, "%s: only <f4/<f8 read", path);
      g_free (contents);
      return NULL;
    }
  const char *s = strstr (header, "'shape': (");
  int nd = 0;
  gsize count = 1;
  if (s != NULL)
    {
      s += strlen ("'shape': (");
      while (*s && *s != ')')
        {
          while (*s == ' ' || *s == ',')
            s++;
          if (*s == ')')
            break;
          char *end;
          guint64 v = g_ascii_strtoull (s, &end, 10);
          if (end == s)
            break;
          if (nd < 8)
            shape[nd] = v;
          nd++;
          count *= v;
          s = end;
        }
    }
  *n_dims = nd;
  gsize item = f64 ? 8 : 4;
  if (offset + hlen + count * item > length)
    {
      g_set_error (error, G_FILE_ERROR, G_FILE_ERROR_INVAL, "%s is truncated", path);
      g_free (contents);
      return NULL;
    }
  float *out = g_new (float, MAX (count, 1));
  const char *raw = contents + offset + hlen;
  for (gsize i = 0; i < count; i++)
    {
      if (f64)
        {
          double v;
          memcpy (&v, raw + i * 8, 8);
          out[i] = (float) v;
        }
      else
        memcpy (&out[i], raw + i * 4, 4);
    }
  g_free (contents);
  return out;
}

gboolean
rete_test_write_image_npy (const char *path, const ReteImage *image, GError **error)
{
  gsize shape[3] = { (gsize) image->channels, (gsize) image->height, (gsize) image->width };
  if (image->channels == 1)
    return rete_test_write_npy_f32 (path, image->data, shape + 1, 2, error);
  return rete_test_write_npy_f32 (path, image->data, shape, 3, error);
}

ReteImage *
rete_test_read_image_npy (const char *path, GError **error)
{
  gsize shape[8];
  int nd = 0;
  float *data = rete_test_read_npy_f32 (path, shape, &nd, error);
  if (data == NULL)
    return NULL;
  ReteImage *image = NULL;
  if (nd == 2)
    image = rete_image_new ((int) shape[1], (int) shape[0], 1, error);
  else if (nd == 3)
    image = rete_image_new ((int) shape[2], (int) shape[1], (int) shape[0], error);
  else
    g_set_error (error, G_FILE_ERROR, G_FILE_ERROR_INVAL, "%s: 2 or 3 dimensions expected", path);
  if (image != NULL)
    memcpy (image->data, data, rete_image_n_pixels (image) * image->channels * sizeof (float));
  g_free (data);
  return image;
}

char *
rete_test_python (const char *script, gboolean *skipped, GError **error, ...)
{
  const char *python = g_getenv ("RETE_PYTHON");
  if (python == NULL)
    python = "/usr/bin/python3";
  g_autofree char *script_path = g_build_filename (rete_test_source_dir (), "tests", "ref",
                                                   script, NULL);
  GPtrArray *argv = g_ptr_array_new ();
  g_ptr_array_add (argv, (gpointer) python);
  g_ptr_array_add (argv, script_path);
  va_list ap;
  va_start (ap, error);
  const char *arg;
  while ((arg = va_arg (ap, const char *)) != NULL)
    g_ptr_array_add (argv, (gpointer) arg);
  va_end (ap);
  g_ptr_array_add (argv, NULL);

  char *out = NULL, *err = NULL;
  int status = 0;
  if (skipped != NULL)
    *skipped = FALSE;
  /* The reference libraries must see Debian's own modules, not another interpreter's. */
  g_auto (GStrv) envp = g_get_environ ();
  envp = g_environ_unsetenv (envp, "PYTHONPATH");
  envp = g_environ_unsetenv (envp, "PYTHONHOME");
  gboolean ok = g_spawn_sync (NULL, (char **) argv->pdata, envp, G_SPAWN_DEFAULT, NULL, NULL,
                              &out, &err, &status, error);
  g_ptr_array_free (argv, TRUE);
  if (!ok)
    return NULL;
  if (g_spawn_check_wait_status (status, NULL))
    {
      if (err != NULL && *err != '\0')
        g_printerr ("%s", err);
      g_free (err);
      return out;
    }
  if (WIFEXITED (status) && WEXITSTATUS (status) == 77)
    {
      if (skipped != NULL)
        *skipped = TRUE;
      g_set_error (error, G_SPAWN_EXIT_ERROR, 77, "%s", out != NULL ? g_strstrip (out) : "skipped");
    }
  else
    g_set_error (error, G_SPAWN_EXIT_ERROR, 1, "%s failed:\n%s%s", script, out ? out : "",
                 err ? err : "");
  g_free (out);
  g_free (err);
  return NULL;
}

double
rete_test_max_abs_diff (const float *a, const float *b, gsize n, gsize *where)
{
  double worst = 0.0;
  gsize at = 0;
  for (gsize i = 0; i < n; i++)
    {
      double d = fabs ((double) a[i] - (double) b[i]);
      if (d > worst || isnan (d))
        {
          worst = isnan (d) ? INFINITY : d;
          at = i;
        }
    }
  if (where != NULL)
    *where = at;
  return worst;
}

double
rete_test_fraction_near (const float *a, const float *b, int w, int h, gsize *count)
{
  gsize n = 0, near = 0;
  for (int y = 0; y < h; y++)
    for (int x = 0; x < w; x++)
      {
        if (a[(gsize) y * w + x] < 0.5f)
          continue;
        n++;
        gboolean found = FALSE;
        for (int dy = -1; dy <= 1 && !found; dy++)
          for (int dx = -1; dx <= 1 && !found; dx++)
            {
              int xx = x + dx, yy = y + dy;
              found = xx >= 0 && yy >= 0 && xx < w && yy < h && b[(gsize) yy * w + xx] >= 0.5f;
            }
        near += found;
      }
  *count = n;
  return n > 0 ? (double) near / n : 1.0;
}
