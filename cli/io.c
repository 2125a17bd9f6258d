/* io.c — image files in and out through GEGL (the imaging library GIMP uses), for the
 * `rete` command, the tests and bench/. librete itself has no codecs.
 *
 * Loaders and savers are chosen by the file's first bytes (reading) or by its extension
 * (writing), so that a file with a wrong extension is still read and an unsupported one is
 * refused with a message rather than handed to a fallback loader. */
#include "rete_io.h"

#include <errno.h>
#include <math.h>
#include <gegl.h>
#include <glib/gstdio.h>
#include <string.h>

G_DEFINE_QUARK (rete-io-error-quark, rete_io_error)

static GMutex io_lock; /* GEGL graphs are built and processed one at a time */

/* Debian's GEGL 0.4.42 ships npy-save twice, and GObject warns when the second copy
 * registers; the warning is harmless, so it is dropped (and is never made fatal). */
static void
drop_duplicate_plugin_warning (const char *domain, GLogLevelFlags level, const char *message,
                               gpointer data)
{
  if (message != NULL && strstr (message, "Two different plugins tried to register") != NULL)
    return;
  g_log_default_handler (domain, level, message, data);
}

void
rete_io_init (void)
{
  static gsize done = 0;
  if (g_once_init_enter (&done))
    {
      /* No swap file and a modest cache: Rete holds its own copies of the pixels. */
      g_setenv ("GEGL_SWAP", "RAM", FALSE);
      guint handler = g_log_set_handler ("GLib-GObject", G_LOG_LEVEL_WARNING,
                                         drop_duplicate_plugin_warning, NULL);
      GLogLevelFlags fatal = g_log_set_always_fatal (G_LOG_FATAL_MASK);
      gegl_init (NULL, NULL);
      /* GEGL loads its operation modules on the first look-up: do it here, under the
       * handler above. */
      (void) gegl_has_operation ("gegl:png-load");
      g_log_set_always_fatal (fatal);
      g_log_remove_handler ("GLib-GObject", handler);
      g_once_init_leave (&done, 1);
    }
}

static const char *
loader_for_magic (const guint8 *b, gsize n)
{
  if (n >= 8 && memcmp (b, "\x89PNG\r\n\x1a\n", 8) == 0)
    return "gegl:png-load";
  if (n >= 3 && b[0] == 0xFF && b[1] == 0xD8 && b[2] == 0xFF)
    return "gegl:jpg-load";
  if (n >= 4 && (memcmp (b, "II*\0", 4) == 0 || memcmp (b, "MM\0*", 4) == 0))
    return "gegl:tiff-load";
  if (n >= 2 && b[0] == 'P' && (b[1] == '5' || b[1] == '6' || b[1] == '2' || b[1] == '3'))
    return "gegl:ppm-load";
  if (n >= 6 && (memcmp (b, "GIF87a", 6) == 0 || memcmp (b, "GIF89a", 6) == 0))
    return "gegl:gif-load";
  return NULL;
}

static void
capture_warning (const char *domain, GLogLevelFlags level, const char *message, gpointer data)
{
  char **first = data;
  if (*first == NULL && message != NULL)
    *first = g_strdup (message);
}

/* GEGL's JPEG loader leaves libjpeg's default error handler in place, which ends the whole
 * process on a fatal decoding error. So a JPEG is walked marker by marker first (ITU T.81,
 * annex B) and refused unless it reaches its end-of-image marker: this catches the common
 * damage, a file cut short. */
static gboolean
jpeg_is_complete (const char *path, GError **error)
{
  gchar *data = NULL;
  gsize n = 0;
  if (!g_file_get_contents (path, &data, &n, NULL))
    return TRUE; /* the loader reports unreadable files itself */
  const guint8 *b = (const guint8 *) data;
  gsize i = 2;
  gboolean complete = FALSE;
  while (i + 1 < n)
    {
      if (b[i] != 0xFF)
        break;
      guint8 marker = b[i + 1];
      if (marker == 0xD9)
        {
          complete = TRUE;
          break;
        }
      if (marker == 0xFF)
        {
          i++;
          continue;
        }
      if (marker == 0x01 || (marker >= 0xD0 && marker <= 0xD7))
        {
          i += 2;
          continue;
        }
      if (i + 3 >= n)
        break;
      gsize length = ((gsize) b[i + 2] << 8) | b[i + 3];
      i += 2 + length;
      if (marker == 0xDA) /* start of scan: entropy-coded data up to the next real marker */
        {
          while (i + 1 < n && !(b[i] == 0xFF && b[i + 1] != 0x00
                                && !(b[i + 1] >= 0xD0 && b[i + 1] <= 0xD7)))
            i++;
        }
    }
  g_free (data);
  if (!complete)
    g_set_error (error, RETE_IO_ERROR, RETE_ERROR_FORMAT,
                 "%s is a damaged or truncated JPEG file (it does not reach its end-of-image "
                 "marker); copy it again from its source", path);
  return complete;
}

static GeglBuffer *
load_buffer (const char *path, GError **error)
{
  if (!g_file_test (path, G_FILE_TEST_EXISTS))
    {
      g_set_error (error, RETE_IO_ERROR, RETE_ERROR_IO, "%s: no such file", path);
      return NULL;
    }
  if (g_file_test (path, G_FILE_TEST_IS_DIR))
    {
      g_set_error (error, RETE_IO_ERROR, RETE_ERROR_IO, "%s is a folder, not an image file", path);
      return NULL;
    }
  FILE *f = g_fopen (path, "rb");
  if (f == NULL)
    {
      int saved = errno;
      g_set_error (error, RETE_IO_ERROR, RETE_ERROR_IO, "%s cannot be read: %s", path,
                   g_strerror (saved));
      return NULL;
    }
  guint8 magic[16] = { 0 };
  gsize n = fread (magic, 1, sizeof magic, f);
  fclose (f);
  const char *op = loader_for_magic (magic, n);
  if (op == NULL)
    {
      g_set_error (error, RETE_IO_ERROR, RETE_ERROR_FORMAT,
                   "%s is not an image Rete can read (PNG, JPEG, TIFF, PPM/PGM or GIF expected)%s",
                   path, n == 0 ? ": the file is empty" : "");
      return NULL;
    }
  if (strcmp (op, "gegl:jpg-load") == 0 && !jpeg_is_complete (path, error))
    return NULL;
  rete_io_init ();
  if (!gegl_has_operation (op))
    {
      g_set_error (error, RETE_IO_ERROR, RETE_ERROR_FORMAT,
                   "%s: this GEGL has no %s operation; install GEGL's operations "
                   "(Debian package libgegl-0.4-0)", path, op);
      return NULL;
    }
  GeglBuffer *buffer = NULL;
  g_mutex_lock (&io_lock);
  /* Decoders report a damaged file through warnings only: catch them (and keep them from
   * being fatal in test binaries) so that the file is refused with the decoder's reason. */
  char *decoder_warning = NULL;
  GLogLevelFlags fatal = g_log_set_always_fatal (G_LOG_FATAL_MASK);
  guint handler_plain = g_log_set_handler (NULL, G_LOG_LEVEL_WARNING | G_LOG_LEVEL_CRITICAL,
                                           capture_warning, &decoder_warning);
  guint handler_gegl = g_log_set_handler ("GEGL", G_LOG_LEVEL_WARNING | G_LOG_LEVEL_CRITICAL,
                                          capture_warning, &decoder_warning);
  GeglNode *graph = gegl_node_new ();
  GeglNode *load = gegl_node_new_child (graph, "operation", op, "path", path, NULL);
  GeglNode *sink = gegl_node_new_child (graph, "operation", "gegl:buffer-sink",
                                        "buffer", &buffer, NULL);
  gegl_node_link (load, sink);
  /* A file the loader cannot decode has an empty bounding box: stop before processing. */
  GeglRectangle box = gegl_node_get_bounding_box (load);
  if (box.width > 0 && box.height > 0)
    gegl_node_process (sink);
  g_object_unref (graph);
  g_log_remove_handler (NULL, handler_plain);
  g_log_remove_handler ("GEGL", handler_gegl);
  g_log_set_always_fatal (fatal);
  g_mutex_unlock (&io_lock);
  if (buffer == NULL || gegl_buffer_get_width (buffer) <= 0 || gegl_buffer_get_height (buffer) <= 0
      || decoder_warning != NULL)
    {
      g_clear_object (&buffer);
      g_set_error (error, RETE_IO_ERROR, RETE_ERROR_FORMAT,
                   "%s could not be decoded: the file is truncated or damaged%s%s", path,
                   decoder_warning != NULL ? " — " : "", decoder_warning != NULL ? decoder_warning : "");
      g_free (decoder_warning);
      return NULL;
    }
  return buffer;
}

static ReteImage *
buffer_to_image (GeglBuffer *buffer, int channels, GError **error)
{
  const GeglRectangle *extent = gegl_buffer_get_extent (buffer);
  ReteImage *image = NULL;
  gsize n = (gsize) extent->width * extent->height * channels;
  float *pixels = g_try_malloc (n * sizeof (float));
  if (pixels == NULL)
    {
      g_set_error (error, RETE_IO_ERROR, RETE_ERROR_NO_MEMORY,
                   "not enough memory to read a %d×%d image", extent->width, extent->height);
      return NULL;
    }
  const Babl *format = babl_format (channels == 1 ? "Y' float" : "R'G'B' float");
  gegl_buffer_get (buffer, extent, 1.0, format, pixels, GEGL_AUTO_ROWSTRIDE, GEGL_ABYSS_NONE);
  image = rete_image_from_interleaved (pixels, extent->width, extent->height, channels, error);
  g_free (pixels);
  return image;
}

static gboolean
buffer_is_grey (GeglBuffer *buffer)
{
  const Babl *format = gegl_buffer_get_format (buffer);
  int components = babl_format_get_n_components (format);
  if (babl_format_has_alpha (format))
    components--;
  return components == 1;
}

ReteImage *
rete_io_load (const char *path, GError **error)
{
  GeglBuffer *buffer = load_buffer (path, error);
  if (buffer == NULL)
    return NULL;
  ReteImage *image = buffer_to_image (buffer, buffer_is_grey (buffer) ? 1 : 3, error);
  g_object_unref (buffer);
  if (image == NULL && error != NULL && *error != NULL)
    g_prefix_error (error, "%s: ", path);
  return image;
}

ReteImage *
rete_io_load_grey (const char *path, GError **error)
{
  GeglBuffer *buffer = load_buffer (path, error);
  if (buffer == NULL)
    return NULL;
  ReteImage *image = NULL;
  if (buffer_is_grey (buffer))
    image = buffer_to_image (buffer, 1, error);
  else
    {
      ReteImage *rgb = buffer_to_image (buffer, 3, error);
      if (rgb != NULL)
        {
          image = rete_image_new_like (rgb, 1, error);
          if (image != NULL)
            {
              const float *r = rete_image_plane (rgb, 0), *g = rete_image_plane (rgb, 1),
                          *b = rete_image_plane (rgb, 2);
              gsize np = rete_image_n_pixels (rgb);
              /* Rec. 709 luma of the non-linear values (a colour map saved as RGB with R=G=B
               * comes back unchanged). */
              for (gsize i = 0; i < np; i++)
                image->data[i] = 0.2126f * r[i] + 0.7152f * g[i] + 0.0722f * b[i];
            }
          rete_image_free (rgb);
        }
    }
  g_object_unref (buffer);
  return image;
}

gboolean
rete_io_is_image_name (const char *path)
{
  static const char *const extensions[] = { ".png", ".jpg", ".jpeg", ".tif", ".tiff", ".ppm",
                                            ".pgm", ".pnm", ".gif", NULL };
  g_autofree char *lower = g_ascii_strdown (path, -1);
  for (int i = 0; extensions[i] != NULL; i++)
    if (g_str_has_suffix (lower, extensions[i]))
      return TRUE;
  return FALSE;
}

/* A temporary name in the same folder as `path` (so that rename is atomic), keeping its
 * extension. */
static char *
temporary_name (const char *path)
{
  g_autofree char *dir = g_path_get_dirname (path);
  g_autofree char *base = g_path_get_basename (path);
  return g_strdup_printf ("%s%c.%s.%08x.partial", dir, G_DIR_SEPARATOR, base, g_random_int ());
}

static gboolean
finish_atomic (const char *temporary, const char *path, GError **error)
{
  if (g_rename (temporary, path) != 0)
    {
      int saved = errno;
      g_unlink (temporary);
      g_set_error (error, RETE_IO_ERROR, RETE_ERROR_IO, "%s cannot be written: %s", path,
                   g_strerror (saved));
      return FALSE;
    }
  return TRUE;
}

static gboolean
check_folder_writable (const char *path, GError **error)
{
  g_autofree char *dir = g_path_get_dirname (path);
  if (!g_file_test (dir, G_FILE_TEST_IS_DIR))
    {
      g_set_error (error, RETE_IO_ERROR, RETE_ERROR_IO,
                   "%s cannot be written: folder %s does not exist", path, dir);
      return FALSE;
    }
  return TRUE;
}

gboolean
rete_io_save (const ReteImage *image, const char *path, const ReteSaveOptions *options,
              GError **error)
{
  g_return_val_if_fail (image != NULL && path != NULL, FALSE);
  int bit_depth = options != NULL && options->bit_depth == 16 ? 16 : 8;
  int quality = options != NULL && options->jpeg_quality >= 1 && options->jpeg_quality <= 100
                  ? options->jpeg_quality : 95;
  if (image->channels != 1 && image->channels != 3)
    {
      g_set_error (error, RETE_IO_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "%s: only grey (1-channel) and RGB (3-channel) images are written, not %d channels",
                   path, image->channels);
      return FALSE;
    }
  g_autofree char *lower = g_ascii_strdown (path, -1);
  const char *op = NULL;
  if (g_str_has_suffix (lower, ".png"))
    op = "gegl:png-save";
  else if (g_str_has_suffix (lower, ".jpg") || g_str_has_suffix (lower, ".jpeg"))
    op = "gegl:jpg-save", bit_depth = 8;
  else if (g_str_has_suffix (lower, ".tif") || g_str_has_suffix (lower, ".tiff"))
    op = "gegl:tiff-save";
  else if (g_str_has_suffix (lower, ".ppm") && image->channels == 3)
    op = "gegl:ppm-save";
  else if (g_str_has_suffix (lower, ".ppm") || g_str_has_suffix (lower, ".pgm")
           || g_str_has_suffix (lower, ".pnm"))
    {
      /* GEGL's PPM saver writes colour (P6) only; a grey map written there would come
       * back as RGB. */
      g_set_error (error, RETE_IO_ERROR, RETE_ERROR_FORMAT,
                   "%s: grey maps are not written as PGM/PPM here; use .png or .tif", path);
      return FALSE;
    }
  if (op == NULL)
    {
      g_set_error (error, RETE_IO_ERROR, RETE_ERROR_FORMAT,
                   "%s: Rete writes .png, .tif, .jpg (and .ppm for colour) files; choose one of those extensions",
                   path);
      return FALSE;
    }
  if (!check_folder_writable (path, error))
    return FALSE;
  rete_io_init ();

  gsize n = rete_image_n_pixels (image) * image->channels;
  float *pixels = g_try_malloc (n * sizeof (float));
  if (pixels == NULL)
    {
      g_set_error (error, RETE_IO_ERROR, RETE_ERROR_NO_MEMORY, "%s: not enough memory to write", path);
      return FALSE;
    }
  rete_image_to_interleaved (image, pixels);
  for (gsize i = 0; i < n; i++)
    pixels[i] = isnan (pixels[i]) ? 0.0f : CLAMP (pixels[i], 0.0f, 1.0f);

  /* The buffer holds the integer format the file should have, so that TIFF and PPM savers
   * (which write the buffer's own format) write 8- or 16-bit integers. */
  const char *model = image->channels == 1 ? "Y'" : "R'G'B'";
  g_autofree char *stored = g_strdup_printf ("%s u%d", model, bit_depth);
  g_autofree char *given = g_strdup_printf ("%s float", model);
  GeglRectangle extent = { 0, 0, image->width, image->height };
  GeglBuffer *buffer = gegl_buffer_new (&extent, babl_format (stored));
  gegl_buffer_set (buffer, &extent, 0, babl_format (given), pixels, GEGL_AUTO_ROWSTRIDE);
  g_free (pixels);

  g_autofree char *temporary = temporary_name (path);
  g_mutex_lock (&io_lock);
  GeglNode *graph = gegl_node_new ();
  GeglNode *source = gegl_node_new_child (graph, "operation", "gegl:buffer-source",
                                          "buffer", buffer, NULL);
  GeglNode *save = NULL;
  if (strcmp (op, "gegl:png-save") == 0)
    save = gegl_node_new_child (graph, "operation", op, "path", temporary,
                                "bitdepth", bit_depth, "compression", 6, NULL);
  else if (strcmp (op, "gegl:jpg-save") == 0)
    save = gegl_node_new_child (graph, "operation", op, "path", temporary,
                                "quality", quality, NULL);
  else if (strcmp (op, "gegl:ppm-save") == 0)
    save = gegl_node_new_child (graph, "operation", op, "path", temporary,
                                "bitdepth", bit_depth, "rawformat", TRUE, NULL);
  else
    save = gegl_node_new_child (graph, "operation", op, "path", temporary, NULL);
  gegl_node_link (source, save);
  gegl_node_process (save);
  g_object_unref (graph);
  g_mutex_unlock (&io_lock);
  g_object_unref (buffer);

  GStatBuf st;
  if (g_stat (temporary, &st) != 0 || st.st_size == 0)
    {
      g_unlink (temporary);
      g_set_error (error, RETE_IO_ERROR, RETE_ERROR_IO,
                   "%s could not be written (is the folder writable and the disk not full?)", path);
      return FALSE;
    }
  return finish_atomic (temporary, path, error);
}

gboolean
rete_io_save_text (const char *path, const char *text, gssize length, GError **error)
{
  if (!check_folder_writable (path, error))
    return FALSE;
  /* g_file_set_contents writes a temporary file in the same folder and renames it. */
  GError *local = NULL;
  if (!g_file_set_contents (path, text, length, &local))
    {
      g_set_error (error, RETE_IO_ERROR, RETE_ERROR_IO, "%s", local->message);
      g_error_free (local);
      return FALSE;
    }
  return TRUE;
}
