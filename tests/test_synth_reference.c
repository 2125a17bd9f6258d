/* test_synth_reference.c — the synthetic-photograph generator against outside references
 * (tests/ref/synth_ref.py through /usr/bin/python3):
 * - its JPEG-like artefacts against the same quantisation rebuilt on scipy.fft.dctn, and
 *   against a real JPEG at the same quality from Pillow (libjpeg, 4:4:4, decoded again);
 * - its width map against the vessel mask's own geometry (skimage.morphology.medial_axis). */
#include "rete_synth.h"

#include <json-glib/json-glib.h>
#include <math.h>
#include <string.h>

#include "rete_test.h"

static ReteImage *
eight_bit_photo (int size, guint64 seed)
{
  ReteSynthParams params;
  rete_synth_params_init (&params);
  params.width = params.height = size;
  params.seed = seed;
  params.n_lesions = 6;
  ReteImage *photo = NULL;
  GError *error = NULL;
  g_assert_true (rete_synth_fundus (&params, &photo, NULL, NULL, &error));
  g_assert_no_error (error);
  /* Both sides start from the same 8-bit values, as a JPEG encoder would. */
  for (gsize i = 0; i < rete_image_n_pixels (photo) * 3; i++)
    photo->data[i] = rintf (photo->data[i] * 255.0f) / 255.0f;
  return photo;
}

static gboolean
write_planar (const char *path, const ReteImage *image)
{
  gsize shape[3] = { (gsize) image->channels, (gsize) image->height, (gsize) image->width };
  GError *error = NULL;
  gboolean ok = rete_test_write_npy_f32 (path, image->data, shape, 3, &error);
  g_assert_no_error (error);
  return ok;
}

static float *
read_planar (const char *path, const ReteImage *like)
{
  gsize shape[3];
  int n_dims = 0;
  GError *error = NULL;
  float *data = rete_test_read_npy_f32 (path, shape, &n_dims, &error);
  g_assert_no_error (error);
  g_assert_cmpint (n_dims, ==, 3);
  g_assert_cmpuint (shape[0], ==, 3);
  g_assert_cmpuint (shape[1], ==, (gsize) like->height);
  g_assert_cmpuint (shape[2], ==, (gsize) like->width);
  return data;
}

static void
test_jpeg (gconstpointer data)
{
  int quality = GPOINTER_TO_INT (data);
  g_autoptr (ReteImage) photo = eight_bit_photo (256, 17);
  g_autofree char *in = rete_test_tmp_path ("jpeg-in.npy");
  g_autofree char *out_scipy = rete_test_tmp_path ("jpeg-scipy.npy");
  g_autofree char *out_pil = rete_test_tmp_path ("jpeg-pil.npy");
  write_planar (in, photo);
  g_autofree char *q = g_strdup_printf ("%d", quality);
  gboolean skipped = FALSE;
  GError *error = NULL;
  g_autofree char *out = rete_test_python ("synth_ref.py", &skipped, &error, "jpeg", in, q,
                                           out_scipy, out_pil, NULL);
  if (skipped)
    {
      g_test_skip (error->message);
      g_clear_error (&error);
      return;
    }
  g_assert_no_error (error);

  g_autoptr (ReteImage) ours = rete_image_copy (photo, NULL);
  g_assert_true (rete_synth_jpeg_artefacts (ours, quality, &error));
  g_assert_no_error (error);
  g_autofree float *scipy = read_planar (out_scipy, photo);
  g_autofree float *pil = read_planar (out_pil, photo);
  gsize n = rete_image_n_pixels (photo) * 3, where = 0, n_off = 0;
  double worst_scipy = rete_test_max_abs_diff (ours->data, scipy, n, &where);
  for (gsize i = 0; i < n; i++)
    n_off += fabs (ours->data[i] - scipy[i]) > 1e-4;
  double sum_pil = 0.0, sum_change = 0.0;
  for (gsize i = 0; i < n; i++)
    {
      sum_pil += fabs (ours->data[i] - pil[i]);
      sum_change += fabs (pil[i] - photo->data[i]);
    }
  double worst_pil = rete_test_max_abs_diff (ours->data, pil, n, NULL);
  g_test_message ("quality %d: against scipy max |diff| %.2e at %" G_GSIZE_FORMAT
                  ", %" G_GSIZE_FORMAT " of %" G_GSIZE_FORMAT " values off by more than 1e-4; "
                  "against Pillow/libjpeg mean |diff| %.2f levels (max %.0f), while libjpeg "
                  "itself changes the photograph by %.2f levels on average",
                  quality, worst_scipy, where, n_off, n, 255.0 * sum_pil / n, 255.0 * worst_pil,
                  255.0 * sum_change / n);
  /* The same arithmetic: float32 rounding only, but a coefficient right at half a step may
   * round the other way, so a few values may differ by more; tolerance 1e-4 for 99.9 %. */
  g_assert_cmpfloat ((double) n_off / n, <, 1e-3);
  /* libjpeg: integer DCT and 8-bit YCbCr, so not equal; but its artefacts and ours must
   * agree far better than either agrees with the photograph it started from. */
  g_assert_cmpfloat (sum_pil, <, 0.5 * sum_change);
}

static void
test_widths_match_medial_axis (void)
{
  ReteSynthParams params;
  rete_synth_params_init (&params);
  params.width = 999;
  params.height = 960;
  params.seed = 3;
  ReteSynthTruth truth;
  GError *error = NULL;
  g_assert_true (rete_synth_fundus_truth (&params, &truth, &error));
  g_assert_no_error (error);
  g_autofree char *vessels = rete_test_tmp_path ("vessels.npy");
  g_autofree char *widths = rete_test_tmp_path ("widths.npy");
  g_assert_true (rete_test_write_image_npy (vessels, truth.vessels, &error));
  g_assert_true (rete_test_write_image_npy (widths, truth.widths, &error));
  g_assert_no_error (error);
  rete_synth_truth_clear (&truth);
  gboolean skipped = FALSE;
  g_autofree char *out = rete_test_python ("synth_ref.py", &skipped, &error, "widths", vessels,
                                           widths, NULL);
  if (skipped)
    {
      g_test_skip (error->message);
      g_clear_error (&error);
      return;
    }
  g_assert_no_error (error);
  g_autoptr (JsonParser) parser = json_parser_new ();
  g_assert_true (json_parser_load_from_data (parser, out, -1, &error));
  JsonObject *r = json_node_get_object (json_parser_get_root (parser));
  double median = json_object_get_double_member (r, "median_difference");
  double within = json_object_get_double_member (r, "within_2px");
  g_test_message ("medial axis of the vessel map (skimage) against the drawn widths, %" G_GINT64_FORMAT
                  " skeleton pixels of vessels 3 px or wider: median (2 x distance - width) %.2f "
                  "px, %.1f %% within 2 px; widest drawn %.2f, widest measured %.2f",
                  json_object_get_int_member (r, "n"), median, 100.0 * within,
                  json_object_get_double_member (r, "max_drawn"),
                  json_object_get_double_member (r, "max_measured"));
  /* A vessel of width w covers the pixel centres within w/2 of its centreline, so twice the
   * distance from the medial axis to the nearest background centre lies in [w, w + 2]
   * away from crossings and branch points: median in [0, 2], most within 2 px. */
  g_assert_cmpfloat (median, >=, 0.0);
  g_assert_cmpfloat (median, <=, 2.0);
  g_assert_cmpfloat (within, >, 0.8);
}

int
main (int argc, char **argv)
{
  g_test_init (&argc, &argv, NULL);
  static const int qualities[] = { 30, 60, 90 };
  for (gsize i = 0; i < G_N_ELEMENTS (qualities); i++)
    {
      g_autofree char *path = g_strdup_printf ("/vessel/synth/jpeg/matches-scipy-and-libjpeg/q%d",
                                               qualities[i]);
      g_test_add_data_func (path, GINT_TO_POINTER (qualities[i]), test_jpeg);
    }
  g_test_add_func ("/vessel/synth/widths/match-medial-axis", test_widths_match_medial_axis);
  return g_test_run ();
}
