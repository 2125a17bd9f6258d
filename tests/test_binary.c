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

/* Runs ref_otsu_clean.py once on all the requests (tab-separated lines: a mode and its
 * arguments; skimage is slow to import); the answers, one object per line, or NULL (and
 * g_test_skip) when the reference cannot run here. */
static JsonArray *
run_requests (GPtrArray *lines, const char *tag, JsonParser *parser)
{
  g_autofree char *name = g_strconcat (tag, "-requests.txt", NULL);
  g_autofree char *path = rete_test_tmp_path (name);
  GString *text = g_string_new (NULL);
  for (guint k = 0; k < lines->len; k++)
    g_string_append_printf (text, "%s\n", (const char *) g_ptr_array_index (lines, k));
  g_assert_true (g_file_set_contents (path, text->str, text->len, NULL));
  g_string_free (text, TRUE);
  GError *error = NULL;
  gboolean skipped = FALSE;
  g_autofree char *out = rete_test_python ("ref_otsu_clean.py", &skipped, &error, "--batch",
                                           path, NULL);
  if (skipped)
    {
      g_test_skip (error->message);
      g_error_free (error);
      return NULL;
    }
  g_assert_no_error (error);
  g_assert_true (json_parser_load_from_data (parser, out, -1, &error));
  g_assert_no_error (error);
  JsonArray *answers = json_node_get_array (json_parser_get_root (parser));
  g_assert_cmpuint (json_array_get_length (answers), ==, lines->len);
  return answers;
}

static char *
tmp_name (const char *what, gsize index)
{
  g_autofree char *name = g_strdup_printf ("%s%" G_GSIZE_FORMAT ".npy", what, index);
  return rete_test_tmp_path (name);
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

static ReteImage *
otsu_case_map (const OtsuCase *c)
{
  return make_map (c->kind, c->width, c->height, 77 + c->kind * 13 + c->width);
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

static ReteImage *
clean_case_binary (const CleanCase *c)
{
  GRand *rand = g_rand_new_with_seed (5 + c->width);
  ReteImage *binary = rete_image_new (c->width, c->height, 1, NULL);
  for (gsize i = 0; i < rete_image_n_pixels (binary); i++)
    binary->data[i] = g_rand_double (rand) < c->density;
  g_rand_free (rand);
  return binary;
}

/* The reference for every Otsu and clean-up case of the tables, run once. */
static struct {
  gboolean done;
  JsonParser *parser;
  JsonArray *answers; /* otsu cases, then clean cases */
} tables;

static JsonObject *
table_answer (gsize index)
{
  if (!tables.done)
    {
      tables.done = TRUE;
      GPtrArray *lines = g_ptr_array_new_with_free_func (g_free);
      for (gsize i = 0; i < G_N_ELEMENTS (otsu_cases); i++)
        {
          const OtsuCase *c = &otsu_cases[i];
          g_autoptr (ReteImage) map = otsu_case_map (c);
          g_autofree char *map_path = tmp_name ("otsu-map", i);
          g_autofree char *mask_path = tmp_name ("otsu-mask", i);
          g_assert_true (rete_test_write_image_npy (map_path, map, NULL));
          if (c->with_mask)
            {
              g_autoptr (ReteImage) mask = make_disc_mask (c->width, c->height);
              g_assert_true (rete_test_write_image_npy (mask_path, mask, NULL));
            }
          g_ptr_array_add (lines, g_strjoin ("\t", "otsu", map_path,
                                             c->with_mask ? mask_path : "-", NULL));
        }
      for (gsize i = 0; i < G_N_ELEMENTS (clean_cases); i++)
        {
          const CleanCase *c = &clean_cases[i];
          g_autoptr (ReteImage) binary = clean_case_binary (c);
          g_autofree char *in_path = tmp_name ("clean-in", i);
          g_autofree char *out_path = tmp_name ("clean-out", i);
          g_assert_true (rete_test_write_image_npy (in_path, binary, NULL));
          g_ptr_array_add (lines, g_strdup_printf ("clean\t%s\t%" G_GSIZE_FORMAT "\t%"
                                                   G_GSIZE_FORMAT "\t%s\t%d", in_path,
                                                   c->min_component, c->max_hole, out_path,
                                                   c->object_connectivity));
        }
      tables.parser = json_parser_new ();
      tables.answers = run_requests (lines, "tables", tables.parser);
      g_ptr_array_free (lines, TRUE);
    }
  if (tables.answers == NULL)
    {
      g_test_skip ("the Python reference (skimage) could not run here");
      return NULL;
    }
  return json_array_get_object_element (tables.answers, index);
}

static void
test_otsu (gconstpointer data)
{
  const OtsuCase *c = data;
  gsize index = (gsize) (c - otsu_cases);
  g_autoptr (ReteImage) map = otsu_case_map (c);
  g_autoptr (ReteImage) mask = c->with_mask ? make_disc_mask (c->width, c->height) : NULL;
  GError *error = NULL;
  double ours = rete_threshold_otsu (map, mask, &error);
  g_assert_no_error (error);
  JsonObject *ref = table_answer (index);
  if (ref == NULL)
    return;
  double theirs = json_object_get_double_member (ref, "threshold");
  g_test_message ("%dx%d: Otsu level ours %.9g, skimage %.9g, difference %.3g (tolerance 0)",
                  c->width, c->height, ours, theirs, fabs (ours - theirs));
  g_assert_cmpfloat (ours, ==, theirs);
}

static void
test_clean (gconstpointer data)
{
  const CleanCase *c = data;
  gsize index = (gsize) (c - clean_cases);
  if (table_answer (G_N_ELEMENTS (otsu_cases) + index) == NULL)
    return;
  g_autoptr (ReteImage) binary = clean_case_binary (c);
  g_autofree char *out_path = tmp_name ("clean-out", index);
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
  double levels[G_N_ELEMENTS (kinds)];
  GPtrArray *lines = g_ptr_array_new_with_free_func (g_free);
  g_autoptr (ReteImage) mask = make_disc_mask (211, 157);
  g_autofree char *mask_path = tmp_name ("fraction-mask", 0);
  g_assert_true (rete_test_write_image_npy (mask_path, mask, NULL));
  for (gsize k = 0; k < G_N_ELEMENTS (kinds); k++)
    {
      g_autoptr (ReteImage) map = make_map (kinds[k], 211, 157, 9 + k);
      GError *error = NULL;
      levels[k] = rete_threshold_for_fraction (map, mask, fractions[k], &error);
      g_assert_no_error (error);
      /* the whole step marks that share too (no clean-up) */
      ReteBinaryParams params;
      rete_binary_params_init (&params);
      params.method = RETE_THRESHOLD_FRACTION;
      params.fraction = fractions[k];
      params.min_component = params.max_hole = 0;
      double used = NAN;
      g_autoptr (ReteImage) binary = rete_binary_map (map, mask, &params, &used, &error);
      g_assert_no_error (error);
      g_assert_cmpfloat (used, ==, levels[k]);
      g_autofree char *map_path = tmp_name ("fraction-map", k);
      g_assert_true (rete_test_write_image_npy (map_path, map, NULL));
      char level_text[G_ASCII_DTOSTR_BUF_SIZE], fraction_text[G_ASCII_DTOSTR_BUF_SIZE];
      g_ascii_dtostr (level_text, sizeof level_text, levels[k]);
      g_ascii_dtostr (fraction_text, sizeof fraction_text, fractions[k]);
      g_ptr_array_add (lines, g_strjoin ("\t", "fraction", map_path, mask_path, level_text,
                                         fraction_text, NULL));
    }
  g_autoptr (JsonParser) parser = json_parser_new ();
  JsonArray *answers = run_requests (lines, "fraction", parser);
  g_ptr_array_free (lines, TRUE);
  if (answers == NULL)
    return;
  for (gsize k = 0; k < G_N_ELEMENTS (kinds); k++)
    {
      JsonObject *ref = json_array_get_object_element (answers, k);
      double at = json_object_get_double_member (ref, "at");
      double below = json_object_get_null_member (ref, "below") ? INFINITY
                     : json_object_get_double_member (ref, "below");
      g_test_message ("fraction %.2f: level %.9g marks %.6f (numpy); the next lower value "
                      "would mark %.6f", fractions[k], levels[k], at, below);
      g_assert_cmpfloat (at, <=, fractions[k]);
      g_assert_cmpfloat (below, >, fractions[k]);
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
  g_autofree char *in_path = tmp_name ("hrf-in", 0);
  g_autofree char *out_path = tmp_name ("hrf-out", 0);
  g_autofree char *soft_path = tmp_name ("hrf-soft", 0);
  g_assert_true (rete_test_write_image_npy (in_path, binary, NULL));
  g_assert_true (rete_test_write_image_npy (soft_path, soft, NULL));
  GPtrArray *lines = g_ptr_array_new_with_free_func (g_free);
  g_ptr_array_add (lines, g_strjoin ("\t", "clean", in_path, "30", "10", out_path, NULL));
  g_ptr_array_add (lines, g_strjoin ("\t", "otsu", soft_path, "-", NULL));
  g_autoptr (JsonParser) parser = json_parser_new ();
  JsonArray *answers = run_requests (lines, "hrf", parser);
  g_ptr_array_free (lines, TRUE);
  if (answers == NULL)
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

  double ours = rete_threshold_otsu (soft, NULL, &error);
  g_assert_no_error (error);
  double want = json_object_get_double_member (json_array_get_object_element (answers, 1),
                                               "threshold");
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
