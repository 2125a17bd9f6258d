/* test_image.c — the planar float image type: sizes, regions, checks. */
#include <string.h>
#include <math.h>
#include "rete_test.h"

static void
test_new_rejects_bad_sizes (void)
{
  static const int cases[][3] = { { 0, 10, 1 }, { 10, -1, 1 }, { 10, 10, 0 }, { 10, 10, 5 },
                                  { RETE_MAX_SIDE + 1, 1, 1 }, { 60000, 60000, 1 } };
  for (gsize i = 0; i < G_N_ELEMENTS (cases); i++)
    {
      GError *error = NULL;
      ReteImage *image = rete_image_new (cases[i][0], cases[i][1], cases[i][2], &error);
      g_assert_null (image);
      g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT);
      g_test_message ("%d×%d×%d: %s", cases[i][0], cases[i][1], cases[i][2], error->message);
      g_error_free (error);
    }
}

static void
test_interleaved_round_trip (void)
{
  float pixels[4 * 3 * 3];
  for (int i = 0; i < 36; i++)
    pixels[i] = (float) i / 36.0f;
  g_autoptr (ReteImage) image = rete_image_from_interleaved (pixels, 4, 3, 3, NULL);
  g_assert_nonnull (image);
  /* planar layout: channel 1 of pixel (2, 1) is interleaved index (1*4+2)*3+1 */
  g_assert_cmpfloat (rete_image_get (image, 1, 2, 1), ==, pixels[(1 * 4 + 2) * 3 + 1]);
  float back[36];
  rete_image_to_interleaved (image, back);
  g_assert_cmpmem (back, sizeof back, pixels, sizeof pixels);
}

static void
test_crop_and_paste (void)
{
  g_autoptr (ReteImage) image = rete_image_new (8, 6, 1, NULL);
  for (gsize i = 0; i < rete_image_n_pixels (image); i++)
    image->data[i] = (float) i;
  ReteRect rect = { 2, 1, 3, 4 };
  g_autoptr (ReteImage) crop = rete_image_crop (image, &rect, NULL);
  g_assert_cmpint (crop->width, ==, 3);
  g_assert_cmpfloat (rete_image_get (crop, 0, 0, 0), ==, 1 * 8 + 2);
  g_autoptr (ReteImage) target = rete_image_new (8, 6, 1, NULL);
  g_assert_true (rete_image_paste (target, crop, 2, 1, NULL));
  g_assert_cmpfloat (rete_image_get (target, 0, 4, 4), ==, rete_image_get (image, 0, 4, 4));
  g_assert_cmpfloat (rete_image_get (target, 0, 5, 4), ==, 0.0f);

  GError *error = NULL;
  ReteRect outside = { 6, 0, 3, 2 };
  g_assert_null (rete_image_crop (image, &outside, &error));
  g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT);
  g_clear_error (&error);
}

static void
test_checks_name_the_problem (void)
{
  g_autoptr (ReteImage) a = rete_image_new (999, 960, 1, NULL);
  g_autoptr (ReteImage) b = rete_image_new (565, 584, 1, NULL);
  GError *error = NULL;
  g_assert_false (rete_image_check_same_size (a, "reference", b, "vessel map", &error));
  g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_SIZE_MISMATCH);
  g_assert_nonnull (strstr (error->message, "reference is 999×960 but vessel map is 565×584"));
  g_clear_error (&error);
  b->data[7 * 565 + 3] = NAN;
  g_assert_false (rete_image_check_finite (b, "vessel map", &error));
  g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_NOT_FINITE);
  g_assert_nonnull (strstr (error->message, "(3, 7)"));
  g_clear_error (&error);
}

static void
test_binarise_counts_grey (void)
{
  g_autoptr (ReteImage) image = rete_image_new (4, 1, 1, NULL);
  float v[4] = { 0.0f, 1.0f, 0.4f, 0.6f };
  memcpy (image->data, v, sizeof v);
  g_assert_cmpuint (rete_image_binarise (image, 0.5f), ==, 2);
  g_assert_cmpfloat (image->data[2], ==, 0.0f);
  g_assert_cmpfloat (image->data[3], ==, 1.0f);
}

static void
add_one (int first, int last, gpointer data)
{
  gint *counts = data;
  for (int i = first; i < last; i++)
    g_atomic_int_inc (&counts[i]);
}

static void
test_parallel_for_covers_once (void)
{
  gint counts[1001] = { 0 };
  rete_set_thread_count (3);
  rete_parallel_for (1001, add_one, counts);
  rete_set_thread_count (0);
  for (int i = 0; i < 1001; i++)
    g_assert_cmpint (counts[i], ==, 1);
}

int
main (int argc, char **argv)
{
  g_test_init (&argc, &argv, NULL);
  g_test_add_func ("/vessel/image/new-rejects-bad-sizes", test_new_rejects_bad_sizes);
  g_test_add_func ("/vessel/image/interleaved-round-trip", test_interleaved_round_trip);
  g_test_add_func ("/vessel/image/crop-and-paste", test_crop_and_paste);
  g_test_add_func ("/vessel/image/checks-name-the-problem", test_checks_name_the_problem);
  g_test_add_func ("/vessel/image/binarise-counts-grey", test_binarise_counts_grey);
  g_test_add_func ("/nn/base/parallel-for-covers-once", test_parallel_for_covers_once);
  return g_test_run ();
}
