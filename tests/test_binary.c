/* test_binary.c — binary vessel maps (rete_binary.h) against scikit-image 0.19 and numpy
 * through /usr/bin/python3 (tests/ref/ref_otsu_clean.py), and on bad input.
 *
 * Expected values: skimage.filters.threshold_otsu (Otsu, IEEE SMC 1979) — we bin exactly as
 * it does, so the level must be the same float32 bin centre (tolerance 0, the difference is
 * printed); skimage.morphology.remove_small_objects (connectivity=2) then remove_small_holes
 * (connectivity=1) — the same pixels (tolerance 0 pixels); the target-fraction level checked
 * with numpy shares (it is the smallest level whose share is <= the fraction).
 */
#include <json-glib/json-glib.h>
#include <math.h>
#include <string.h>

#include "rete_binary.h"
#include "rete_io.h"
#include "rete_test.h"

typedef enum {
  MAP_BIMODAL,   /* vessel-like: 15% near 0.7, the rest near 0.25 */
  MAP_UNIFORM,
  MAP_8BIT,      /* k/255 */
  MAP_NARROW,    /* values in [0.3, 0.3001]: bins a few float32 steps wide */
  MAP_SIGNED,    /* a filter response in [-2, 3] */
} MapKind;

static ReteImage *
make_map (MapKind kind, int width, int height, guint32 seed)
{
  GRand *rand = g_rand_new_with_seed (seed);
  ReteImage *map = rete_image_new (width, height, 1, NULL);
  for (gsize i = 0; i < rete_image_n_pixels (map); i++)
    {
      double u = g_rand_double (rand), v;
      switch (kind)
        {
        case MAP_BIMODAL:
          v = CLAMP ((u < 0.15 ? 0.7 : 0.25) + 0.12 * (g_rand_double (rand) + g_rand_double (rand) - 1.0), 0, 1);
          break;
        case MAP_UNIFORM: v = u; break;
        case MAP_8BIT: v = rint (u * u * 255.0) / 255.0; break;
        case MAP_NARROW: v = 0.3 + 1e-4 * u * u; break;
        default: v = -2.0 + 5.0 * u * u * u; break;
        }
      map->data[i] = (float) v;
    }
  g_rand_free (rand);
  return map;
}

static ReteImage *
make_disc_mask (int width, int height)
{
  ReteImage *mask = rete_image_new (width, height, 1, NULL);
  for (int y = 0; y < height; y++)
    for (int x = 0; x < width; x++)
      {
        double dx = (x - width / 2.0) / (width / 2.0), dy = (y - height / 2.0) / (height / 2.0);
        mask->data[(gsize) y * width + x] = dx * dx + dy * dy <= 0.85;
      }
  return mask;
}

static JsonObject *
python_json (JsonParser *parser, const char *mode, ...)
{
  /* at most 6 arguments after the mode */
  const char *args[7] = { NULL };
  va_list ap;
  va_start (ap, mode);
  for (int k = 0; k < 6; k++)
    if ((args[k] = va_arg (ap, const char *)) == NULL)
      break;
  va_end (ap);
  GError *error = NULL;
  gboolean skipped = FALSE;
  g_autofree char *out = rete_test_python ("ref_otsu_clean.py", &skipped, &error, mode, args[0],
                                           args[1], args[2], args[3], args[4], args[5], NULL);
  if (skipped)
    {
      g_test_skip (error->message);
      g_error_free (error);
      return NULL;
    }
  g_assert_no_error (error);
  g_assert_true (json_parser_load_from_data (parser, out, -1, &error));
  g_assert_no_error (error);
  return json_node_get_object (json_parser_get_root (parser));
}

typedef struct {
  const char *path;
  MapKind kind;
  int width, height;
  gboolean with_mask;
} OtsuCase;

static const OtsuCase otsu_cases[] = {
  { "/vessel/binary/otsu/matches-skimage/bimodal", MAP_BIMODAL, 320, 240, FALSE },
  { "/vessel/binary/otsu/matches-skimage/bimodal-masked", MAP_BIMODAL, 999, 960, TRUE },
  { "/vessel/binary/otsu/matches-skimage/uniform", MAP_UNIFORM, 200, 150, FALSE },
  { "/vessel/binary/otsu/matches-skimage/8-bit", MAP_8BIT, 256, 256, TRUE },
  { "/vessel/binary/otsu/matches-skimage/narrow-range", MAP_NARROW, 300, 200, FALSE },
  { "/vessel/binary/otsu/matches-skimage/signed", MAP_SIGNED, 300, 200, TRUE },
  { "/vessel/binary/otsu/matches-skimage/tiny", MAP_UNIFORM, 3, 2, FALSE },
};

static void
test_otsu (gconstpointer data)
{
  const OtsuCase *c = data;
  g_autoptr (ReteImage) map = make_map (c->kind, c->width, c->height, 77 + c->kind * 13 + c->width);
  g_autoptr (ReteImage) mask = c->with_mask ? make_disc_mask (c->width, c->height) : NULL;
  GError *error = NULL;
  double ours = rete_threshold_otsu (map, mask, &error);
  g_assert_no_error (error);
  g_autofree char *map_path = rete_test_tmp_path ("otsu-map.npy");
  g_autofree char *mask_path = rete_test_tmp_path ("otsu-mask.npy");
  g_assert_true (rete_test_write_image_npy (map_path, map, NULL));
  if (mask != NULL)
    g_assert_true (rete_test_write_image_npy (mask_path, mask, NULL));
  g_autoptr (JsonParser) parser = json_parser_new ();
  JsonObject *ref = python_json (parser, "otsu", map_path, mask != NULL ? mask_path : "-", NULL);
  if (ref == NULL)
    return;
  double theirs = json_object_get_double_member (ref, "threshold");
  g_test_message ("%dx%d: Otsu level ours %.9g, skimage %.9g, difference %.3g (tolerance 0)",
                  c->width, c->height, ours, theirs, fabs (ours - theirs));
  g_assert_cmpfloat (ours, ==, theirs);
}

typedef struct {
  const char *path;
  int width, height;
  double density;
  gsize min_component, max_hole;
  int object_connectivity; /* what the reference is asked for; 1 is the deliberately wrong case */
} CleanCase;

static const CleanCase clean_cases[] = {
  { "/vessel/binary/clean/matches-skimage/sparse", 200, 150, 0.30, 30, 10, 2 },
  { "/vessel/binary/clean/matches-skimage/half", 180, 120, 0.50, 12, 12, 2 },
  { "/vessel/binary/clean/matches-skimage/dense", 150, 150, 0.68, 5, 40, 2 },
  { "/vessel/binary/clean/matches-skimage/objects-only", 160, 90, 0.45, 8, 0, 2 },
  { "/vessel/binary/clean/matches-skimage/holes-only", 160, 90, 0.55, 0, 8, 2 },
  { "/vessel/binary/clean/matches-skimage/thin-strip", 400, 1, 0.5, 3, 3, 2 },
  { "/vessel/binary/clean/checker-fails-on-wrong-connectivity", 200, 150, 0.30, 30, 10, 1 },
};

static void
test_clean (gconstpointer data)
{
  const CleanCase *c = data;
  GRand *rand = g_rand_new_with_seed (5 + c->width);
  g_autoptr (ReteImage) binary = rete_image_new (c->width, c->height, 1, NULL);
  for (gsize i = 0; i < rete_image_n_pixels (binary); i++)
    binary->data[i] = g_rand_double (rand) < c->density;
  g_rand_free (rand);
  g_autofree char *in_path = rete_test_tmp_path ("clean-in.npy");
  g_autofree char *out_path = rete_test_tmp_path ("clean-out.npy");
  g_assert_true (rete_test_write_image_npy (in_path, binary, NULL));
  char min_component[32], max_hole[32], connectivity[8];
  g_snprintf (min_component, sizeof min_component, "%" G_GSIZE_FORMAT, c->min_component);
  g_snprintf (max_hole, sizeof max_hole, "%" G_GSIZE_FORMAT, c->max_hole);
  g_snprintf (connectivity, sizeof connectivity, "%d", c->object_connectivity);
  g_autoptr (JsonParser) parser = json_parser_new ();
  JsonObject *ref = python_json (parser, "clean", in_path, min_component, max_hole, out_path,
                                 connectivity, NULL);
  if (ref == NULL)
    return;
  GError *error = NULL;
  g_autoptr (ReteImage) theirs = rete_test_read_image_npy (out_path, &error);
  g_assert_no_error (error);
  g_assert_true (rete_binary_clean (binary, c->min_component, c->max_hole, &error));
  g_assert_no_error (error);
  gsize differ = 0, n = rete_image_n_pixels (binary);
  for (gsize i = 0; i < n; i++)
    differ += binary->data[i] != theirs->data[i];
  g_test_message ("%dx%d, density %.2f, min component %" G_GSIZE_FORMAT ", max hole %"
                  G_GSIZE_FORMAT ": %" G_GSIZE_FORMAT " of %" G_GSIZE_FORMAT
                  " pixels differ from skimage (object connectivity %d; tolerance 0)",
                  c->width, c->height, c->density, c->min_component, c->max_hole, differ, n,
                  c->object_connectivity);
  if (c->object_connectivity == 2)
    g_assert_cmpuint (differ, ==, 0);
  else
    g_assert_cmpuint (differ, >, 0); /* the check sees 4- against 8-connected pieces */
}

static void
test_fraction (void)
{
  static const MapKind kinds[] = { MAP_BIMODAL, MAP_8BIT, MAP_SIGNED };
  static const double fractions[] = { 0.12, 0.5, 0.03 };
  for (gsize k = 0; k < G_N_ELEMENTS (kinds); k++)
    {
      g_autoptr (ReteImage) map = make_map (kinds[k], 211, 157, 9 + k);
      g_autoptr (ReteImage) mask = make_disc_mask (211, 157);
      GError *error = NULL;
      double level = rete_threshold_for_fraction (map, mask, fractions[k], &error);
      g_assert_no_error (error);
      g_autofree char *map_path = rete_test_tmp_path ("fraction-map.npy");
      g_autofree char *mask_path = rete_test_tmp_path ("fraction-mask.npy");
      g_assert_true (rete_test_write_image_npy (map_path, map, NULL));
      g_assert_true (rete_test_write_image_npy (mask_path, mask, NULL));
      char level_text[G_ASCII_DTOSTR_BUF_SIZE], fraction_text[G_ASCII_DTOSTR_BUF_SIZE];
      g_ascii_dtostr (level_text, sizeof level_text, level);
      g_ascii_dtostr (fraction_text, sizeof fraction_text, fractions[k]);
      g_autoptr (JsonParser) parser = json_parser_new ();
      JsonObject *ref = python_json (parser, "fraction", map_path, mask_path, level_text,
                                     fraction_text, NULL);
      if (ref == NULL)
        return;
      double at = json_object_get_double_member (ref, "at");
      double below = json_object_get_null_member (ref, "below") ? INFINITY
                     : json_object_get_double_member (ref, "below");
      g_test_message ("fraction %.2f: level %.9g marks %.6f (numpy); the next lower value "
                      "would mark %.6f", fractions[k], level, at, below);
      g_assert_cmpfloat (at, <=, fractions[k]);
      g_assert_cmpfloat (below, >, fractions[k]);
      /* the whole step marks that share too (no clean-up) */
      ReteBinaryParams params;
      rete_binary_params_init (&params);
      params.method = RETE_THRESHOLD_FRACTION;
      params.fraction = fractions[k];
      params.min_component = params.max_hole = 0;
      double used = NAN;
      g_autoptr (ReteImage) binary = rete_binary_map (map, mask, &params, &used, &error);
      g_assert_no_error (error);
      g_assert_cmpfloat (used, ==, level);
    }
}

/* The whole step keeps the map inside the field of view, and cleans as rete_binary_clean. */
static void
test_binary_map (void)
{
  g_autoptr (ReteImage) map = make_map (MAP_BIMODAL, 240, 180, 3);
  g_autoptr (ReteImage) mask = make_disc_mask (240, 180);
  ReteBinaryParams params;
  rete_binary_params_init (&params);
  g_assert_cmpint (params.method, ==, RETE_THRESHOLD_OTSU);
  GError *error = NULL;
  double level = NAN;
  g_autoptr (ReteImage) binary = rete_binary_map (map, mask, &params, &level, &error);
  g_assert_no_error (error);
  g_assert_cmpfloat (level, ==, rete_threshold_otsu (map, mask, NULL));
  g_autoptr (ReteImage) expected = rete_binarise (map, mask, level, &error);
  g_assert_true (rete_binary_clean (expected, params.min_component, params.max_hole, &error));
  gsize outside_marked = 0, differ = 0;
  for (gsize i = 0; i < rete_image_n_pixels (binary); i++)
    {
      float want = mask->data[i] >= 0.5f ? expected->data[i] : 0.0f;
      differ += binary->data[i] != want;
      outside_marked += mask->data[i] < 0.5f && binary->data[i] != 0.0f;
    }
  g_test_message ("Otsu level %.6f; %" G_GSIZE_FORMAT " pixels differ from binarise + clean, %"
                  G_GSIZE_FORMAT " marked outside the FOV", level, differ, outside_marked);
  g_assert_cmpuint (differ, ==, 0);
  g_assert_cmpuint (outside_marked, ==, 0);

  ReteThresholdMethod method;
  for (int m = RETE_THRESHOLD_OTSU; m <= RETE_THRESHOLD_FRACTION; m++)
    {
      g_assert_true (rete_threshold_method_from_name (rete_threshold_method_name (m), &method, &error));
      g_assert_cmpint (method, ==, m);
    }
}

typedef enum {
  BAD_EMPTY_MASK, BAD_CONSTANT, BAD_FRACTION_LOW, BAD_FRACTION_HIGH, BAD_NAN_MAP, BAD_MASK_SIZE,
  BAD_CHANNELS, BAD_METHOD_NAME, BAD_FIXED_NAN,
} BadKind;

typedef struct {
  const char *path;
  BadKind kind;
  int code;
  const char *message_part;
} BadCase;

static const BadCase bad_cases[] = {
  { "/vessel/binary/bad-input/empty-mask", BAD_EMPTY_MASK, RETE_ERROR_EMPTY, "marks no pixel" },
  { "/vessel/binary/bad-input/constant-map", BAD_CONSTANT, RETE_ERROR_UNDEFINED, "fixed threshold" },
  { "/vessel/binary/bad-input/fraction-zero", BAD_FRACTION_LOW, RETE_ERROR_INVALID_ARGUMENT, "between 0 and 1" },
  { "/vessel/binary/bad-input/fraction-one", BAD_FRACTION_HIGH, RETE_ERROR_INVALID_ARGUMENT, "between 0 and 1" },
  { "/vessel/binary/bad-input/nan-in-map", BAD_NAN_MAP, RETE_ERROR_NOT_FINITE, "pixel (4, 1)" },
  { "/vessel/binary/bad-input/mask-size", BAD_MASK_SIZE, RETE_ERROR_SIZE_MISMATCH, "field-of-view mask is 9×8" },
  { "/vessel/binary/bad-input/colour-map", BAD_CHANNELS, RETE_ERROR_INVALID_ARGUMENT, "3 channels" },
  { "/vessel/binary/bad-input/method-name", BAD_METHOD_NAME, RETE_ERROR_INVALID_ARGUMENT, "use otsu" },
  { "/vessel/binary/bad-input/fixed-nan", BAD_FIXED_NAN, RETE_ERROR_INVALID_ARGUMENT, "finite number" },
};

static void
test_bad_input (gconstpointer data)
{
  const BadCase *b = data;
  g_autoptr (ReteImage) map = make_map (MAP_UNIFORM, 8, 8, 1);
  g_autoptr (ReteImage) mask = rete_image_new (8, 8, 1, NULL);
  for (int i = 0; i < 64; i++)
    mask->data[i] = 1.0f;
  g_autoptr (ReteImage) other = NULL;
  const ReteImage *m = map, *k = mask;
  ReteBinaryParams params;
  rete_binary_params_init (&params);
  GError *error = NULL;
  switch (b->kind)
    {
    case BAD_EMPTY_MASK: memset (mask->data, 0, 64 * sizeof (float)); break;
    case BAD_CONSTANT: for (int i = 0; i < 64; i++) map->data[i] = 0.25f; break;
    case BAD_FRACTION_LOW: params.method = RETE_THRESHOLD_FRACTION; params.fraction = 0.0; break;
    case BAD_FRACTION_HIGH: params.method = RETE_THRESHOLD_FRACTION; params.fraction = 1.0; break;
    case BAD_NAN_MAP: map->data[1 * 8 + 4] = NAN; break;
    case BAD_MASK_SIZE: k = other = rete_image_new (9, 8, 1, NULL); break;
    case BAD_CHANNELS: m = other = rete_image_new (8, 8, 3, NULL); break;
    case BAD_FIXED_NAN: params.method = RETE_THRESHOLD_FIXED; params.level = NAN; break;
    case BAD_METHOD_NAME:
      {
        ReteThresholdMethod method = RETE_THRESHOLD_FIXED;
        g_assert_false (rete_threshold_method_from_name ("isodata", &method, &error));
        g_assert_cmpint (method, ==, RETE_THRESHOLD_FIXED); /* untouched */
        goto check;
      }
    }
  double level = 12345.0;
  g_assert_null (rete_binary_map (m, k, &params, &level, &error));
  g_assert_cmpfloat (level, ==, 12345.0); /* untouched */
check:
  g_assert_error (error, RETE_VESSEL_ERROR, b->code);
  g_test_message ("%s", error->message);
  g_assert_nonnull (strstr (error->message, b->message_part));
  g_clear_error (&error);
}

/* ---- open data: a real 8-megapixel vessel tree, HRF 01_h (Budai et al., Int. J. Biomed.
 * Imaging 2013), its manual map thresholded at 128 as the data README says. Clean-up and
 * Otsu (of a 5x5-mean blurred copy) against skimage on the full 3504x2336. */
static void
test_hrf_clean_and_otsu (void)
{
  g_autofree char *path = rete_test_data_file ("hrf_manual/01_h.png");
  if (path == NULL)
    return;
  rete_io_init ();
  GError *error = NULL;
  g_autoptr (ReteImage) manual = rete_io_load_grey (path, &error);
  g_assert_no_error (error);
  g_autoptr (ReteImage) binary = rete_binarise (manual, NULL, 0.5, &error);
  g_assert_no_error (error);
  g_autofree char *in_path = rete_test_tmp_path ("hrf-in.npy");
  g_autofree char *out_path = rete_test_tmp_path ("hrf-out.npy");
  g_assert_true (rete_test_write_image_npy (in_path, binary, NULL));
  g_autoptr (JsonParser) parser = json_parser_new ();
  JsonObject *ref = python_json (parser, "clean", in_path, "30", "10", out_path, NULL);
  if (ref == NULL)
    return;
  g_autoptr (ReteImage) theirs = rete_test_read_image_npy (out_path, &error);
  g_assert_no_error (error);
  gint64 t0 = g_get_monotonic_time ();
  g_assert_true (rete_binary_clean (binary, 30, 10, &error));
  gint64 t1 = g_get_monotonic_time ();
  gsize differ = 0, n = rete_image_n_pixels (binary);
  for (gsize i = 0; i < n; i++)
    differ += binary->data[i] != theirs->data[i];
  g_test_message ("HRF 01_h %dx%d: clean-up (30, 10) in %.0f ms; %" G_GSIZE_FORMAT
                  " pixels differ from skimage (tolerance 0)", binary->width, binary->height,
                  (t1 - t0) / 1000.0, differ);
  g_assert_cmpuint (differ, ==, 0);

  /* a soft map: mean over 5x5 (running sums along rows, then columns) */
  g_autoptr (ReteImage) soft = rete_image_new_like (manual, 1, NULL);
  int w = manual->width, h = manual->height;
  g_autofree double *rows = g_new (double, (gsize) w * h);
  for (int y = 0; y < h; y++)
    for (int x = 0; x < w; x++)
      {
        double sum = 0;
        for (int d = -2; d <= 2; d++)
          sum += binary->data[(gsize) y * w + CLAMP (x + d, 0, w - 1)];
        rows[(gsize) y * w + x] = sum;
      }
  for (int y = 0; y < h; y++)
    for (int x = 0; x < w; x++)
      {
        double sum = 0;
        for (int d = -2; d <= 2; d++)
          sum += rows[(gsize) CLAMP (y + d, 0, h - 1) * w + x];
        soft->data[(gsize) y * w + x] = (float) (sum / 25.0);
      }
  g_autofree char *soft_path = rete_test_tmp_path ("hrf-soft.npy");
  g_assert_true (rete_test_write_image_npy (soft_path, soft, NULL));
  g_autoptr (JsonParser) parser2 = json_parser_new ();
  JsonObject *otsu = python_json (parser2, "otsu", soft_path, "-", NULL);
  if (otsu == NULL)
    return;
  double ours = rete_threshold_otsu (soft, NULL, &error);
  g_assert_no_error (error);
  double want = json_object_get_double_member (otsu, "threshold");
  g_test_message ("HRF 01_h blurred: Otsu level ours %.9g, skimage %.9g, difference %.3g "
                  "(tolerance 0)", ours, want, fabs (ours - want));
  g_assert_cmpfloat (ours, ==, want);
}

int
main (int argc, char **argv)
{
  g_test_init (&argc, &argv, NULL);
  for (gsize i = 0; i < G_N_ELEMENTS (otsu_cases); i++)
    g_test_add_data_func (otsu_cases[i].path, &otsu_cases[i], test_otsu);
  for (gsize i = 0; i < G_N_ELEMENTS (clean_cases); i++)
    g_test_add_data_func (clean_cases[i].path, &clean_cases[i], test_clean);
  g_test_add_func ("/vessel/binary/fraction/matches-numpy", test_fraction);
  g_test_add_func ("/vessel/binary/map/whole-step", test_binary_map);
  g_test_add_func ("/vessel/binary/hrf/clean-and-otsu-match-skimage", test_hrf_clean_and_otsu);
  for (gsize i = 0; i < G_N_ELEMENTS (bad_cases); i++)
    g_test_add_data_func (bad_cases[i].path, &bad_cases[i], test_bad_input);
  return g_test_run ();
}
