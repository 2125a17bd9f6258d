/* test_hrf_measure.c — vessel measurements on the HRF manual vessel maps (Budai et al., Int. J.
 * Biomed. Imaging 2013; ../shared/data/hrf_manual, 3504×2336 PNG, thresholded at 128 — that
 * is, at 0.5 — since 11_h, 12_h and 13_h carry stray grey pixels). There are no HRF FOV masks
 * here: the whole frame is measured, as the notes say.
 *   skeleton   against skimage.morphology.skeletonize (skimage 0.19) on full maps
 *   distance   against scipy.ndimage.distance_transform_edt on a full map
 *   figures    in the ranges known for retinal vessel maps: box-counting dimension 1.4–1.7
 *              (published values for retinal vessel maps, from memory: they depend on the
 *              method and the image), vessel fraction of the frame 5–15% (this data set's
 *              README and our own count: about 10%)
 * Four maps (one per group and 11_h with its grey pixels) keep the test under a minute.
 * Also the FOV path on real masks: two CHASE_DB1 manual maps (Fraz et al., IEEE TBME 2012;
 * manual1/) with their mask/ FOV masks.
 */
#include <math.h>
#include <string.h>

#include "rete_test.h"
#include "rete_io.h"
#include "rete_measure.h"

static const char *const maps[] = { "01_h", "11_h", "05_dr", "07_g" };

static ReteImage *
load_map (const char *name)
{
  g_autofree char *relative = g_strdup_printf ("hrf_manual/%s.png", name);
  g_autofree char *path = rete_test_data_file (relative);
  if (path == NULL)
    return NULL; /* skipped with the reason */
  GError *error = NULL;
  ReteImage *map = rete_io_load_grey (path, &error);
  g_assert_no_error (error);
  return map;
}

static void
test_figures (gconstpointer data)
{
  const char *name = data;
  g_autoptr (ReteImage) map = load_map (name);
  if (map == NULL)
    return;
  g_assert_cmpint (map->width, ==, 3504);
  g_assert_cmpint (map->height, ==, 2336);
  ReteMeasureParams params;
  rete_measure_params_init (&params);
  params.want_images = TRUE;
  GError *error = NULL;
  gint64 start = g_get_monotonic_time ();
  g_autoptr (ReteMeasurements) m = rete_measure (map, NULL, &params, &error);
  double ms = (g_get_monotonic_time () - start) / 1000.0;
  g_assert_no_error (error);
  g_test_message ("%s: %.0f ms; density %.2f%%, skeleton %.0f px, %d junctions, %d end points, "
                  "%d segments, calibre %.2f px, arc/chord %.4f, curvature %.3g /px², fractal "
                  "dimension map %.4f (R² %.4f), skeleton %.4f (R² %.4f); notes: %s",
                  name, ms, m->vessel_area_density, m->skeleton_length, m->n_junctions,
                  m->n_end_points, m->n_segments, m->mean_calibre, m->tortuosity,
                  m->curvature_index, m->fractal_dimension_map, m->fractal_r2_map,
                  m->fractal_dimension_skeleton, m->fractal_r2_skeleton, m->notes);
  g_assert_cmpfloat (m->vessel_area_density, >=, 5);
  g_assert_cmpfloat (m->vessel_area_density, <=, 15);
  g_assert_cmpfloat (m->fractal_dimension_map, >=, 1.4);
  g_assert_cmpfloat (m->fractal_dimension_map, <=, 1.7);
  g_assert_cmpfloat (m->fractal_dimension_skeleton, <, m->fractal_dimension_map);
  g_assert_cmpfloat (m->fractal_r2_map, >, 0.99);
  g_assert_cmpint (m->n_segments, >, 100);
  g_assert_cmpint (m->n_junctions, >, 50);
  g_assert_nonnull (strstr (m->notes, "whole frame"));
  if (strcmp (name, "11_h") == 0)
    {
      g_assert_cmpuint (m->non_binary_pixels, >, 0);
      g_assert_nonnull (strstr (m->notes, "not binary"));
    }
  /* the point-type image agrees with the counts */
  int ends = 0;
  for (gsize i = 0; i < rete_image_n_pixels (map); i++)
    ends += m->point_type->data[i] == RETE_POINT_END;
  g_assert_cmpint (ends, ==, m->n_end_points);
}

/* Floors as in test_measure.c, measured on these maps (see the messages). */
#define OURS_NEAR_SKIMAGE 0.995
#define SKIMAGE_NEAR_OURS 0.95

static void
test_skeleton (gconstpointer data)
{
  const char *name = data;
  g_autoptr (ReteImage) map = load_map (name);
  if (map == NULL)
    return;
  rete_image_binarise (map, 0.5f);
  g_autofree char *in = rete_test_tmp_path ("hrf-in.npy");
  g_autofree char *out = rete_test_tmp_path ("hrf-skeleton.npy");
  g_assert_true (rete_test_write_image_npy (in, map, NULL));
  gboolean skipped;
  GError *error = NULL;
  g_autofree char *text = rete_test_python ("measure_ref.py", &skipped, &error, "skeleton", in,
                                            out, NULL);
  if (skipped)
    {
      g_test_skip ("the Python reference libraries are missing");
      return;
    }
  g_assert_no_error (error);
  g_autoptr (ReteImage) reference = rete_test_read_image_npy (out, &error);
  g_assert_no_error (error);
  g_autoptr (ReteImage) ours = rete_skeletonize (map, &error);
  g_assert_no_error (error);
  int w = map->width, h = map->height;
  gsize n_ours, n_ref, same = 0, either = 0;
  for (gsize i = 0; i < rete_image_n_pixels (map); i++)
    {
      gboolean a = ours->data[i] > 0.5f, b = reference->data[i] > 0.5f;
      same += a && b;
      either += a || b;
    }
  double ours_near = rete_test_fraction_near (ours->data, reference->data, w, h, &n_ours);
  double ref_near = rete_test_fraction_near (reference->data, ours->data, w, h, &n_ref);
  g_test_message ("%s: ours %" G_GSIZE_FORMAT " px, skimage %" G_GSIZE_FORMAT " px, identical "
                  "%.1f%% of either; ours within 1 px of skimage %.2f%%, skimage within 1 px "
                  "of ours %.2f%%", name, n_ours, n_ref, 100.0 * same / MAX (either, 1),
                  100 * ours_near, 100 * ref_near);
  g_assert_cmpfloat (ours_near, >=, OURS_NEAR_SKIMAGE);
  g_assert_cmpfloat (ref_near, >=, SKIMAGE_NEAR_OURS);
}

static void
test_distance (void)
{
  g_autoptr (ReteImage) map = load_map ("01_h");
  if (map == NULL)
    return;
  g_autofree char *in = rete_test_tmp_path ("hrf-in.npy");
  g_autofree char *out = rete_test_tmp_path ("hrf-edt.npy");
  g_assert_true (rete_test_write_image_npy (in, map, NULL));
  gboolean skipped;
  GError *error = NULL;
  g_autofree char *text = rete_test_python ("measure_ref.py", &skipped, &error, "edt", in, out,
                                            NULL);
  if (skipped)
    {
      g_test_skip ("the Python reference libraries are missing");
      return;
    }
  g_assert_no_error (error);
  g_autoptr (ReteImage) reference = rete_test_read_image_npy (out, &error);
  g_assert_no_error (error);
  g_autoptr (ReteImage) ours = rete_distance_transform_image (map, &error);
  g_assert_no_error (error);
  gsize where;
  double diff = rete_test_max_abs_diff (ours->data, reference->data, rete_image_n_pixels (map),
                                        &where);
  g_test_message ("01_h: largest difference from scipy %.3g px (tolerance 1e-4)", diff);
  g_assert_cmpfloat (diff, <=, 1e-4);
}

static void
test_chase_with_fov (void)
{
  static const char *const names[] = { "Image_01L", "Image_05R" };
  for (guint k = 0; k < G_N_ELEMENTS (names); k++)
    {
      g_autofree char *map_rel = g_strdup_printf ("chase_db1/manual1/%s.png", names[k]);
      g_autofree char *fov_rel = g_strdup_printf ("chase_db1/mask/%s.png", names[k]);
      g_autofree char *map_path = rete_test_data_file (map_rel);
      g_autofree char *fov_path = map_path ? rete_test_data_file (fov_rel) : NULL;
      if (fov_path == NULL)
        return;
      GError *error = NULL;
      g_autoptr (ReteImage) map = rete_io_load_grey (map_path, &error);
      g_assert_no_error (error);
      g_autoptr (ReteImage) fov = rete_io_load_grey (fov_path, &error);
      g_assert_no_error (error);
      g_autoptr (ReteMeasurements) m = rete_measure (map, fov, NULL, &error);
      g_assert_no_error (error);
      g_test_message ("%s with its FOV mask: FOV %.1f%% of the frame, density %.2f%% of the FOV, "
                      "%" G_GSIZE_FORMAT " vessel pixels outside the FOV left out, fractal "
                      "dimension %.4f; notes: %s", names[k],
                      100.0 * m->fov_pixels / rete_image_n_pixels (map), m->vessel_area_density,
                      m->vessel_pixels_outside_fov, m->fractal_dimension_map, m->notes);
      g_assert_true (m->fov_given);
      g_assert_cmpfloat (m->vessel_area_density, >=, 5);
      g_assert_cmpfloat (m->vessel_area_density, <=, 15);
      /* the data's README: the masks leave "a few" manual vessel pixels outside */
      g_assert_cmpuint (m->vessel_pixels_outside_fov, <, m->vessel_pixels / 100);
      g_assert_null (strstr (m->notes, "whole frame"));
    }
}

int
main (int argc, char **argv)
{
  g_test_init (&argc, &argv, NULL);
  rete_io_init ();
  for (guint i = 0; i < G_N_ELEMENTS (maps); i++)
    {
      g_autofree char *path = g_strdup_printf ("/hrf/measure/figures/%s", maps[i]);
      g_test_add_data_func (path, maps[i], test_figures);
    }
  for (guint i = 0; i < 2; i++)
    {
      g_autofree char *path = g_strdup_printf ("/hrf/measure/skeleton-near-skimage/%s", maps[i]);
      g_test_add_data_func (path, maps[i], test_skeleton);
    }
  g_test_add_func ("/hrf/measure/distance-matches-scipy", test_distance);
  g_test_add_func ("/chase/measure/with-fov-mask", test_chase_with_fov);
  return g_test_run ();
}
