/* test_io.c — image files through GEGL: round trips at 8 and 16 bits, atomic writes,
 * clear refusals of missing, empty, truncated and unsupported files. Pixel values are
 * checked against an independent decoder (OpenCV through /usr/bin/python3). */
#include <glib/gstdio.h>
#include <math.h>
#include <string.h>
#include "rete_test.h"
#include "rete_io.h"
#include <gegl.h>

static ReteImage *
gradient (int width, int height, int channels)
{
  ReteImage *image = rete_image_new (width, height, channels, NULL);
  for (int c = 0; c < channels; c++)
    for (int y = 0; y < height; y++)
      for (int x = 0; x < width; x++)
        rete_image_plane (image, c)[y * width + x] =
          (float) ((x * 7 + y * 13 + c * 50) % 256) / 255.0f;
  return image;
}

typedef struct { const char *name; int channels; int bit_depth; double tolerance; } RoundTrip;

static const RoundTrip round_trips[] = {
  { "grey8.png", 1, 8, 0.0 },   { "rgb8.png", 3, 8, 0.0 },  { "grey16.png", 1, 16, 1e-4 },
  { "rgb16.tif", 3, 16, 1e-4 }, { "rgb8.ppm", 3, 8, 0.0 }, { "grey16.tif", 1, 16, 1e-4 },
  { "rgb.jpg", 3, 8, 0.08 },
};

static void
test_round_trip (gconstpointer data)
{
  const RoundTrip *rt = data;
  g_autoptr (ReteImage) image = gradient (37, 23, rt->channels);
  g_autofree char *path = rete_test_tmp_path (rt->name);
  GError *error = NULL;
  ReteSaveOptions options = { rt->bit_depth, 95 };
  g_assert_true (rete_io_save (image, path, &options, &error));
  g_assert_no_error (error);
  g_autoptr (ReteImage) back = rete_io_load (path, &error);
  g_assert_no_error (error);
  g_assert_cmpint (back->width, ==, 37);
  g_assert_cmpint (back->height, ==, 23);
  g_assert_cmpint (back->channels, ==, rt->channels);
  double worst = rete_test_max_abs_diff (image->data, back->data,
                                         rete_image_n_pixels (image) * rt->channels, NULL);
  g_test_message ("%s: largest difference %.3g (tolerance %.3g)", rt->name, worst, rt->tolerance);
  g_assert_cmpfloat (worst, <=, rt->tolerance + 1e-6);
}

static void
test_matches_opencv (void)
{
  /* An independent decoder reads what we wrote: OpenCV (cv2.imread, IMREAD_UNCHANGED). */
  g_autoptr (ReteImage) image = gradient (31, 17, 3);
  g_autofree char *png = rete_test_tmp_path ("cv.png");
  g_autofree char *npy = rete_test_tmp_path ("cv.npy");
  g_assert_true (rete_io_save (image, png, NULL, NULL));
  g_assert_true (rete_test_write_image_npy (npy, image, NULL));
  gboolean skipped = FALSE;
  GError *error = NULL;
  g_autofree char *out = rete_test_python ("io_check.py", &skipped, &error, png, npy, NULL);
  if (skipped)
    {
      g_test_skip (error->message);
      g_clear_error (&error);
      return;
    }
  g_assert_no_error (error);
  g_test_message ("%s", out);
  g_assert_nonnull (strstr (out, "OK"));
}

static void
test_reads_pgm (void)
{
  /* A binary PGM (P5) as NumPy writes it: header, then rows of bytes. */
  g_autofree char *path = rete_test_tmp_path ("grey.pgm");
  GString *file = g_string_new ("P5\n12 7\n255\n");
  for (int i = 0; i < 12 * 7; i++)
    g_string_append_c (file, (char) (i * 3 % 256));
  g_assert_true (g_file_set_contents (path, file->str, file->len, NULL));
  g_string_free (file, TRUE);
  GError *error = NULL;
  g_autoptr (ReteImage) grey = rete_io_load (path, &error);
  g_assert_no_error (error);
  g_assert_cmpint (grey->channels, ==, 1);
  g_assert_cmpfloat_with_epsilon (rete_image_get (grey, 0, 5, 2), (float) ((2 * 12 + 5) * 3 % 256) / 255.0f, 1e-6);
  g_autofree char *pgm_out = rete_test_tmp_path ("out.pgm");
  g_assert_false (rete_io_save (grey, pgm_out, NULL, &error));
  g_assert_error (error, RETE_IO_ERROR, RETE_ERROR_FORMAT);
  g_clear_error (&error);
}

static void
test_load_grey_uses_luma (void)
{
  g_autoptr (ReteImage) image = gradient (5, 4, 3);
  g_autofree char *path = rete_test_tmp_path ("luma.png");
  g_assert_true (rete_io_save (image, path, NULL, NULL));
  g_autoptr (ReteImage) grey = rete_io_load_grey (path, NULL);
  g_assert_cmpint (grey->channels, ==, 1);
  float expect = 0.2126f * rete_image_get (image, 0, 1, 1) + 0.7152f * rete_image_get (image, 1, 1, 1)
                 + 0.0722f * rete_image_get (image, 2, 1, 1);
  g_assert_cmpfloat_with_epsilon (rete_image_get (grey, 0, 1, 1), expect, 1e-5);
}

typedef struct { const char *name; const char *content; gssize length; int code; } BadFile;

static const BadFile bad_files[] = {
  { "missing.png", NULL, -1, RETE_ERROR_IO },
  { "empty.png", "", 0, RETE_ERROR_FORMAT },
  { "text.png", "this is not an image\n", -1, RETE_ERROR_FORMAT },
  { "truncated.png", "\x89PNG\r\n\x1a\n\0\0\0\rIHDR", 16, RETE_ERROR_FORMAT },
};

static void
test_bad_file (gconstpointer data)
{
  const BadFile *bad = data;
  g_autofree char *path = rete_test_tmp_path (bad->name);
  if (bad->content != NULL)
    g_assert_true (g_file_set_contents (path, bad->content, bad->length, NULL));
  GError *error = NULL;
  g_assert_null (rete_io_load (path, &error));
  g_assert_error (error, RETE_IO_ERROR, bad->code);
  g_assert_nonnull (strstr (error->message, bad->name));
  g_test_message ("%s", error->message);
  g_error_free (error);
}

static void
test_cut_file (gconstpointer data)
{
  /* A real image cut short, as an interrupted copy leaves it. */
  const char *name = data;
  g_autoptr (ReteImage) image = gradient (64, 48, 3);
  g_autofree char *path = rete_test_tmp_path (name);
  g_assert_true (rete_io_save (image, path, NULL, NULL));
  gchar *contents = NULL;
  gsize length = 0;
  g_assert_true (g_file_get_contents (path, &contents, &length, NULL));
  g_assert_true (g_file_set_contents (path, contents, length / 3, NULL));
  g_free (contents);
  GError *error = NULL;
  ReteImage *back = rete_io_load (path, &error);
  /* Either refused with a message naming the file, or read in full size (decoders fill the
   * missing rows); never a crash or a smaller image. */
  if (back == NULL)
    {
      g_assert_nonnull (error);
      g_assert_nonnull (strstr (error->message, name));
      g_test_message ("%s", error->message);
      g_error_free (error);
    }
  else
    {
      g_assert_cmpint (back->width, ==, 64);
      g_assert_cmpint (back->height, ==, 48);
      rete_image_free (back);
    }
}

static void
test_save_refuses_and_leaves_nothing (void)
{
  g_autoptr (ReteImage) image = gradient (4, 4, 1);
  GError *error = NULL;
  g_autofree char *bmp = rete_test_tmp_path ("map.bmp");
  g_assert_false (rete_io_save (image, bmp, NULL, &error));
  g_assert_error (error, RETE_IO_ERROR, RETE_ERROR_FORMAT);
  g_clear_error (&error);
  g_autofree char *nodir = rete_test_tmp_path ("no/such/folder/map.png");
  g_assert_false (rete_io_save (image, nodir, NULL, &error));
  g_assert_error (error, RETE_IO_ERROR, RETE_ERROR_IO);
  g_clear_error (&error);
  /* nothing partial is left in the folder */
  GDir *dir = g_dir_open (rete_test_tmp_dir (), 0, NULL);
  const char *name;
  while ((name = g_dir_read_name (dir)) != NULL)
    g_assert_null (strstr (name, ".partial"));
  g_dir_close (dir);
}

int
main (int argc, char **argv)
{
  g_test_init (&argc, &argv, NULL);
  rete_io_init ();
  for (gsize i = 0; i < G_N_ELEMENTS (round_trips); i++)
    {
      g_autofree char *path = g_strdup_printf ("/io/round-trip/%s", round_trips[i].name);
      g_test_add_data_func (path, &round_trips[i], test_round_trip);
    }
  g_test_add_func ("/io/matches-opencv", test_matches_opencv);
  g_test_add_func ("/io/load-grey-uses-luma", test_load_grey_uses_luma);
  g_test_add_func ("/io/reads-pgm", test_reads_pgm);
  for (gsize i = 0; i < G_N_ELEMENTS (bad_files); i++)
    {
      g_autofree char *path = g_strdup_printf ("/io/bad-file/%s", bad_files[i].name);
      g_test_add_data_func (path, &bad_files[i], test_bad_file);
    }
  g_test_add_data_func ("/io/cut-file/png", "cut.png", test_cut_file);
  g_test_add_data_func ("/io/cut-file/jpeg", "cut.jpg", test_cut_file);
  g_test_add_func ("/io/save-refuses-and-leaves-nothing", test_save_refuses_and_leaves_nothing);
  int status = g_test_run ();
  gegl_exit ();
  return status;
}
