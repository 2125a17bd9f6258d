/* test_gimp.c — the plug-in's procedures called in real GIMP 2.10 (gimp-console-2.10, batch
 * mode, Script-Fu, isolated profile and HOME), on synthetic photographs (librete's generator)
 * and on one CHASE_DB1 photograph from ../shared/data (skipped where absent).
 *
 * The checks hold GIMP's output against librete's own: the layers the plug-in makes are saved
 * by GIMP as 8-bit PNG and compared with librete's maps for the same photograph, quantised to
 * the same 8 bits (tolerance: 0 levels, every pixel equal); the figures the agreement
 * procedure returns are compared with rete_agreement_compute on the same layers (tolerance
 * 1e-9 relative: Script-Fu prints reals with 10 significant digits). Bad calls must come back
 * as an error status with a message, which the test finds in GIMP's output (GIMP itself exits
 * 0 even then), and never as a crash. */
#include <math.h>
#include <string.h>

#include "gimp_harness.h"
#include "rete_agreement.h"
#include "rete_io.h"
#include "rete_synth.h"
#include "rete_test.h"
#include "rete_vessel.h"
#include "rete_nn.h"
#include "rete_measure.h"

/* A synthetic photograph written as an 8-bit PNG, and read back as GIMP will see it. */
static ReteImage *
synthetic_photo (const char *name, guint64 seed, char **path, ReteImage **truth)
{
  ReteSynthParams params;
  GError *error = NULL;
  ReteImage *photo = NULL, *vessels = NULL;
  ReteImage *loaded;

  rete_synth_params_init (&params);
  params.seed = seed;
  g_assert_true (rete_synth_fundus (&params, &photo, &vessels, NULL, &error));
  g_assert_no_error (error);
  *path = rete_test_tmp_path (name);
  g_assert_true (rete_io_save (photo, *path, NULL, &error));
  g_assert_no_error (error);
  if (truth)
    {
      g_autofree char *truth_name = g_strconcat ("truth-", name, NULL);
      g_autofree char *truth_path = rete_test_tmp_path (truth_name);

      g_assert_true (rete_io_save (vessels, truth_path, NULL, &error));
      *truth = rete_io_load_grey (truth_path, &error);
      g_assert_no_error (error);
    }
  rete_image_free (photo);
  rete_image_free (vessels);
  loaded = rete_io_load (*path, &error);
  g_assert_no_error (error);
  return loaded;
}

static void
assert_png_equals (const char *png, const ReteImage *map, const char *what)
{
  int max_diff;
  gsize ties;
  gsize differing = gimp_compare_png (png, map, &max_diff, &ties);

  g_test_message ("%s: %" G_GSIZE_FORMAT " of %" G_GSIZE_FORMAT " pixels differ, largest "
                  "difference %d levels (tolerance 0; %" G_GSIZE_FORMAT " rounding ties at a "
                  "half level)", what, differing, rete_image_n_pixels (map), max_diff, ties);
  g_assert_cmpuint (differing, ==, 0);
}

/* ---- the vessel map, per method, against rete_vessel_run ---- */

typedef struct {
  const char *name;
  ReteMethod method;
  gboolean grey_alpha;  /* convert to grey with alpha in GIMP first */
} MethodCase;

static const MethodCase method_cases[] = {
  { "frangi-rgb", RETE_METHOD_FRANGI, FALSE },
  { "matched-grey-alpha", RETE_METHOD_MATCHED, TRUE },
  { "matched-fdog-rgb", RETE_METHOD_MATCHED_FDOG, FALSE },
  { "line-rgb", RETE_METHOD_LINE, FALSE },
  { "learned-rgb", RETE_METHOD_LEARNED, FALSE },
};

static char *
model_path (const char *name)
{
  g_autofree char *file = g_strconcat (name, ".safetensors", NULL);
  char *path = g_build_filename (rete_test_source_dir (), "models", file, NULL);

  if (!g_file_test (path, G_FILE_TEST_IS_REGULAR))
    {
      g_autofree char *msg = g_strdup_printf ("%s is absent (no shipped model yet): learned "
                                              "method in GIMP skipped", path);
      g_test_skip (msg);
      g_free (path);
      return NULL;
    }
  return path;
}

/* The Script-Fu call of the vessel map with librete's default settings. */
static char *
vessel_call (const char *image, const char *drawable, ReteMethod method, const char *model)
{
  ReteVesselParams p;

  rete_vessel_params_init (&p);
  return g_strdup_printf ("(plug-in-rete-vessel-map RUN-NONINTERACTIVE %s %s %d \"%s\" %d %d "
                          "%.17g %.17g %.17g %.17g %.17g %d %d %.17g %d 1 1 '(0 217 255) 70.0)",
                          image, drawable, (int) method, model, (int) p.channel, p.use_clahe,
                          p.frangi.sigma_min, p.frangi.sigma_max, p.frangi.beta,
                          p.matched.sigma, p.matched.length, p.line.window,
                          (int) p.binary.method,
                          p.binary.method == RETE_THRESHOLD_FRACTION ? p.binary.fraction : p.binary.level,
                          (int) p.binary.min_component);
}

static void
test_vessel_map_method (gconstpointer data)
{
  const MethodCase *c = data;
  g_autofree char *in = NULL, *grey = NULL, *prob = NULL, *binary = NULL, *fov = NULL;
  g_autofree char *overlay = NULL, *script = NULL, *call = NULL;
  g_autofree char *model = NULL;
  g_autoptr (ReteImage) photo = NULL;
  g_autoptr (ReteModel) net = NULL;
  ReteVesselParams params;
  ReteVesselResult result;
  GError *error = NULL;

  if (!gimp_harness_setup ())
    return;
  if (c->method == RETE_METHOD_LEARNED && !(model = model_path ("standard")))
    return;
  photo = synthetic_photo ("photo.png", 11, &in, NULL);
  grey = rete_test_tmp_path ("photo-grey.png");
  prob = rete_test_tmp_path ("probability.png");
  binary = rete_test_tmp_path ("binary.png");
  fov = rete_test_tmp_path ("fov.png");
  overlay = rete_test_tmp_path ("overlay.png");
  call = vessel_call ("image", "drawable", c->method, "standard");
  script = g_strdup_printf (
    "(let* ((image (car (file-png-load RUN-NONINTERACTIVE \"%s\" \"\")))\n"
    "       (drawable (car (gimp-image-get-active-drawable image))))\n"
    "  (if %s (begin (gimp-image-convert-grayscale image) (gimp-layer-add-alpha drawable)\n"
    "    (file-png-save2 RUN-NONINTERACTIVE image drawable \"%s\" \"\" 0 9 0 0 0 0 0 0 0)))\n"
    "  (let ((out %s))\n"
    "    (file-png-save2 RUN-NONINTERACTIVE image (list-ref out 1) \"%s\" \"\" 0 9 0 0 0 0 0 0 0)\n"
    "    (file-png-save2 RUN-NONINTERACTIVE image (list-ref out 2) \"%s\" \"\" 0 9 0 0 0 0 0 0 0)\n"
    "    (file-png-save2 RUN-NONINTERACTIVE image (list-ref out 4) \"%s\" \"\" 0 9 0 0 0 0 0 0 0)\n"
    "    (file-png-save2 RUN-NONINTERACTIVE image (list-ref out 3) \"%s\" \"\" 0 9 0 0 0 0 0 0 1)\n"
    "    (gimp-message (string-append \"RETE-VALUE threshold \" (number->string (list-ref out 5))))\n"
    "    (gimp-message (string-append \"RETE-VALUE layers \" (number->string\n"
    "      (car (gimp-item-get-children (list-ref out 0)))))))\n"
    "  (gimp-image-delete image)\n"
    "  (gimp-message \"RETE-DONE\"))\n",
    in, c->grey_alpha ? "#t" : "#f", grey, call, prob, binary, fov, overlay);
  g_autoptr (GimpRun) run = gimp_harness_run (script, 300);
  gimp_run_assert_ok (run);
  g_assert_cmpfloat (gimp_run_value (run, "layers"), ==, 4);

  if (c->grey_alpha)
    {
      g_clear_pointer (&photo, rete_image_free);
      photo = rete_io_load (grey, &error);
      g_assert_no_error (error);
      g_assert_cmpint (photo->channels, ==, 1);
    }
  rete_vessel_params_init (&params);
  params.method = c->method;
  if (model)
    {
      net = rete_model_load (model, &error);
      g_assert_no_error (error);
      params.model = net;
    }
  g_assert_true (rete_vessel_run (photo, NULL, &params, &result, NULL, NULL, &error));
  g_assert_no_error (error);
  assert_png_equals (prob, result.probability, "vessel probability");
  assert_png_equals (binary, result.binary, "binary vessel map");
  assert_png_equals (fov, result.fov, "field of view");
  g_assert_cmpfloat_with_epsilon (gimp_run_value (run, "threshold"), result.threshold,
                                  1e-9 * MAX (1.0, fabs (result.threshold)));
  rete_vessel_result_clear (&result);
}

/* ---- the selection: only the selected part of the field of view is mapped ---- */

static void
test_vessel_map_selection (void)
{
  g_autofree char *in = NULL, *binary = NULL, *script = NULL, *call = NULL;
  g_autoptr (ReteImage) photo = NULL, saved = NULL, fov_crop = NULL, crop = NULL;
  ReteVesselParams params;
  ReteVesselResult result;
  ReteRect rect = { 150, 200, 240, 180 };
  GError *error = NULL;

  if (!gimp_harness_setup ())
    return;
  photo = synthetic_photo ("photo-sel.png", 12, &in, NULL);
  binary = rete_test_tmp_path ("binary-sel.png");
  call = vessel_call ("image", "drawable", RETE_METHOD_FRANGI, "");
  script = g_strdup_printf (
    "(let* ((image (car (file-png-load RUN-NONINTERACTIVE \"%s\" \"\")))\n"
    "       (drawable (car (gimp-image-get-active-drawable image))))\n"
    "  (gimp-image-select-rectangle image CHANNEL-OP-REPLACE %d %d %d %d)\n"
    "  (let ((out %s))\n"
    "    (file-png-save2 RUN-NONINTERACTIVE image (list-ref out 2) \"%s\" \"\" 0 9 0 0 0 0 0 0 0))\n"
    "  (gimp-image-delete image)\n"
    "  (gimp-message \"RETE-DONE\"))\n",
    in, rect.x, rect.y, rect.width, rect.height, call, binary);
  g_autoptr (GimpRun) run = gimp_harness_run (script, 300);
  gimp_run_assert_ok (run);

  /* librete: the field of view of the whole photograph, cut to the selection, and the method
   * on the cut photograph; nothing outside the selection. */
  rete_vessel_params_init (&params);
  params.method = RETE_METHOD_FRANGI;
  g_autoptr (ReteImage) whole_fov = rete_fov_detect (photo, &params.fov, &error);
  g_assert_no_error (error);
  fov_crop = rete_image_crop (whole_fov, &rect, &error);
  crop = rete_image_crop (photo, &rect, &error);
  g_assert_true (rete_vessel_run (crop, fov_crop, &params, &result, NULL, NULL, &error));
  g_assert_no_error (error);
  g_autoptr (ReteImage) expected = rete_image_new_like (photo, 1, &error);
  g_assert_true (rete_image_paste (expected, result.binary, rect.x, rect.y, &error));
  assert_png_equals (binary, expected, "binary vessel map of the selection");
  rete_vessel_result_clear (&result);
}

/* ---- one CHASE_DB1 photograph (JPEG as GIMP loads it) ---- */

static void
test_vessel_map_chase (void)
{
  g_autofree char *jpeg = rete_test_data_file ("chase_db1/images/Image_01L.jpg");
  g_autofree char *photo_png = NULL, *prob = NULL, *script = NULL, *call = NULL;
  g_autoptr (ReteImage) photo = NULL;
  ReteVesselParams params;
  ReteVesselResult result;
  GError *error = NULL;

  if (!jpeg || !gimp_harness_setup ())
    return;
  photo_png = rete_test_tmp_path ("chase-photo.png");
  prob = rete_test_tmp_path ("chase-probability.png");
  call = vessel_call ("image", "drawable", RETE_METHOD_FRANGI, "");
  /* GIMP's JPEG decoder is the reference input: GIMP saves the photograph as it decoded it,
   * and librete maps that. */
  script = g_strdup_printf (
    "(let* ((image (car (file-jpeg-load RUN-NONINTERACTIVE \"%s\" \"\")))\n"
    "       (drawable (car (gimp-image-get-active-drawable image))))\n"
    "  (file-png-save2 RUN-NONINTERACTIVE image drawable \"%s\" \"\" 0 9 0 0 0 0 0 0 0)\n"
    "  (let ((out %s))\n"
    "    (file-png-save2 RUN-NONINTERACTIVE image (list-ref out 1) \"%s\" \"\" 0 9 0 0 0 0 0 0 0))\n"
    "  (gimp-image-delete image)\n"
    "  (gimp-message \"RETE-DONE\"))\n",
    jpeg, photo_png, call, prob);
  g_autoptr (GimpRun) run = gimp_harness_run (script, 300);
  gimp_run_assert_ok (run);
  photo = rete_io_load (photo_png, &error);
  g_assert_no_error (error);
  g_assert_cmpint (photo->width, ==, 999);
  rete_vessel_params_init (&params);
  params.method = RETE_METHOD_FRANGI;
  g_assert_true (rete_vessel_run (photo, NULL, &params, &result, NULL, NULL, &error));
  g_assert_no_error (error);
  assert_png_equals (prob, result.probability, "CHASE_DB1 Image_01L vessel probability");
  rete_vessel_result_clear (&result);
}

/* ---- field of view: layer, selection and layer mask ---- */

static void
test_field_of_view (void)
{
  g_autofree char *in = NULL, *layer = NULL, *mask = NULL, *selection = NULL, *script = NULL;
  g_autoptr (ReteImage) photo = NULL, fov = NULL;
  ReteFovParams params;
  GError *error = NULL;

  if (!gimp_harness_setup ())
    return;
  photo = synthetic_photo ("photo-fov.png", 13, &in, NULL);
  layer = rete_test_tmp_path ("fov-layer.png");
  mask = rete_test_tmp_path ("fov-mask.png");
  selection = rete_test_tmp_path ("fov-selection.png");
  script = g_strdup_printf (
    "(let* ((image (car (file-png-load RUN-NONINTERACTIVE \"%s\" \"\")))\n"
    "       (drawable (car (gimp-image-get-active-drawable image)))\n"
    "       (out (plug-in-rete-field-of-view RUN-NONINTERACTIVE image drawable 0 0 1 1 1)))\n"
    "  (file-png-save2 RUN-NONINTERACTIVE image (car out) \"%s\" \"\" 0 9 0 0 0 0 0 0 0)\n"
    "  (file-png-save2 RUN-NONINTERACTIVE image (car (gimp-layer-get-mask drawable)) \"%s\" \"\" 0 9 0 0 0 0 0 0 0)\n"
    "  (file-png-save2 RUN-NONINTERACTIVE image (car (gimp-image-get-selection image)) \"%s\" \"\" 0 9 0 0 0 0 0 0 0)\n"
    "  (gimp-message (string-append \"RETE-VALUE fraction \" (number->string (cadr out))))\n"
    "  (gimp-image-delete image)\n"
    "  (gimp-message \"RETE-DONE\"))\n",
    in, layer, mask, selection);
  g_autoptr (GimpRun) run = gimp_harness_run (script, 300);
  gimp_run_assert_ok (run);
  rete_fov_params_init (&params);
  fov = rete_fov_detect (photo, &params, &error);
  g_assert_no_error (error);
  assert_png_equals (layer, fov, "field-of-view layer");
  assert_png_equals (mask, fov, "field-of-view layer mask");
  assert_png_equals (selection, fov, "field-of-view selection");
  g_assert_cmpfloat_with_epsilon (gimp_run_value (run, "fraction"),
                                  (double) rete_mask_count (fov) / rete_image_n_pixels (fov), 1e-9);
}

/* ---- agreement: figures returned through the PDB against rete_agreement_compute ---- */

static const char *agreement_names[] = {
  "auc", "average-precision", "threshold", "accuracy", "sensitivity", "specificity",
  "precision", "dice", "jaccard", "mcc", "tp", "fp", "tn", "fn",
};

static void
check_agreement (const GimpRun *run, const ReteAgreement *a, const ReteRates *r,
                 const ReteConfusion *c, double threshold)
{
  const double expected[] = {
    a->auc, a->average_precision, threshold, r->accuracy, r->sensitivity, r->specificity,
    r->precision, r->dice, r->jaccard, r->mcc, c->true_positive, c->false_positive,
    c->true_negative, c->false_negative,
  };
  double largest = 0.0;

  for (gsize i = 0; i < G_N_ELEMENTS (agreement_names); i++)
    {
      double got = gimp_run_value (run, agreement_names[i]);
      double diff = fabs (got - expected[i]) / MAX (1.0, fabs (expected[i]));

      largest = MAX (largest, diff);
      if (!(diff <= 1e-9))
        g_test_fail_printf ("%s: GIMP returned %.10g, librete %.10g", agreement_names[i], got,
                            expected[i]);
    }
  g_test_message ("agreement figures: largest relative difference %.3g (tolerance 1e-9)", largest);
}

static char *
agreement_script (const char *map, const char *reference, const char *fov, int mode,
                  double threshold, const char *layer_png, const char *csv)
{
  GString *s = g_string_new (NULL);

  g_string_append_printf (s,
    "(let* ((mi (car (file-png-load RUN-NONINTERACTIVE \"%s\" \"\")))\n"
    "       (ri (car (file-png-load RUN-NONINTERACTIVE \"%s\" \"\")))\n"
    "       (fi (car (file-png-load RUN-NONINTERACTIVE \"%s\" \"\")))\n"
    "       (out (plug-in-rete-agreement RUN-NONINTERACTIVE mi (car (gimp-image-get-active-drawable mi))\n"
    "              (car (gimp-image-get-active-drawable ri)) (car (gimp-image-get-active-drawable fi))\n"
    "              %d %.17g 1 '(0 200 0) '(255 0 0) '(0 80 255) \"%s\")))\n",
    map, reference, fov, mode, threshold, csv);
  for (gsize i = 0; i < G_N_ELEMENTS (agreement_names); i++)
    g_string_append_printf (s, "  (gimp-message (string-append \"RETE-VALUE %s \" "
                            "(number->string (list-ref out %d))))\n", agreement_names[i], (int) i);
  g_string_append_printf (s,
    "  (file-png-save2 RUN-NONINTERACTIVE mi (list-ref out 14) \"%s\" \"\" 0 9 0 0 0 0 0 0 1)\n"
    "  (gimp-image-delete mi) (gimp-image-delete ri) (gimp-image-delete fi)\n"
    "  (gimp-message \"RETE-DONE\"))\n", layer_png);
  return g_string_free (s, FALSE);
}

static void
run_agreement (const char *map_png, const char *reference_png, const char *fov_png, int mode)
{
  g_autofree char *layer = rete_test_tmp_path ("agreement-layer.png");
  g_autofree char *csv = rete_test_tmp_path ("agreement.csv");
  g_autofree char *script = agreement_script (map_png, reference_png, fov_png, mode, 0.5,
                                              layer, csv);
  g_autoptr (ReteImage) map = NULL, reference = NULL, fov = NULL;
  g_autoptr (ReteAgreement) a = NULL;
  GError *error = NULL;

  g_autoptr (GimpRun) run = gimp_harness_run (script, 300);
  gimp_run_assert_ok (run);
  map = rete_io_load_grey (map_png, &error);
  reference = rete_io_load_grey (reference_png, &error);
  fov = rete_io_load_grey (fov_png, &error);
  g_assert_no_error (error);
  a = rete_agreement_compute (map, reference, fov, 0.5, 512, &error);
  g_assert_no_error (error);
  if (mode == 0)
    check_agreement (run, a, &a->rates, &a->confusion, 0.5);
  else
    {
      double t = mode == 1 ? a->best_dice_threshold : a->best_youden_threshold;
      ReteConfusion c;
      ReteRates r;

      g_assert_true (rete_agreement_at_threshold (map, reference, fov, t, &c, &r, &error));
      check_agreement (run, a, &r, &c, t);
    }
  g_assert_true (g_file_test (csv, G_FILE_TEST_IS_REGULAR));
  g_assert_true (g_file_test (layer, G_FILE_TEST_IS_REGULAR));
}

static void
test_agreement_synthetic (gconstpointer data)
{
  int mode = GPOINTER_TO_INT (data);
  g_autofree char *in = NULL, *truth_png = NULL, *map_png = NULL, *fov_png = NULL;
  g_autoptr (ReteImage) photo = NULL, truth = NULL;
  ReteVesselParams params;
  ReteVesselResult result;
  GError *error = NULL;

  if (!gimp_harness_setup ())
    return;
  /* The method vs the synthetic photograph's exact vessels, inside the detected FOV. */
  photo = synthetic_photo ("photo-agree.png", 14, &in, &truth);
  rete_vessel_params_init (&params);
  g_assert_true (rete_vessel_run (photo, NULL, &params, &result, NULL, NULL, &error));
  map_png = rete_test_tmp_path ("agree-map.png");
  truth_png = rete_test_tmp_path ("agree-truth.png");
  fov_png = rete_test_tmp_path ("agree-fov.png");
  g_assert_true (rete_io_save (result.probability, map_png, NULL, &error));
  g_assert_true (rete_io_save (truth, truth_png, NULL, &error));
  g_assert_true (rete_io_save (result.fov, fov_png, NULL, &error));
  g_assert_no_error (error);
  rete_vessel_result_clear (&result);
  run_agreement (map_png, truth_png, fov_png, mode);
}

static void
test_agreement_chase_graders (void)
{
  g_autofree char *first = rete_test_data_file ("chase_db1/manual1/Image_01L.png");
  g_autofree char *second = first ? rete_test_data_file ("chase_db1/manual2/Image_01L.png") : NULL;
  g_autofree char *mask = second ? rete_test_data_file ("chase_db1/mask/Image_01L.png") : NULL;

  if (!mask || !gimp_harness_setup ())
    return;
  /* Grader vs grader: the second observer's map scored against the first's. */
  run_agreement (second, first, mask, 0);
}

/* ---- training: a tiny model from folders, which then maps vessels ---- */

static void
test_train_folders (void)
{
  g_autofree char *photos = rete_test_tmp_path ("train-photos");
  g_autofree char *annotations = rete_test_tmp_path ("train-annotations");
  g_autofree char *script = NULL, *call = NULL;
  GError *error = NULL;

  if (!gimp_harness_setup ())
    return;
  g_mkdir_with_parents (photos, 0755);
  g_mkdir_with_parents (annotations, 0755);
  for (int i = 0; i < 3; i++)
    {
      ReteSynthParams params;
      ReteImage *photo = NULL, *vessels = NULL;
      g_autofree char *name = g_strdup_printf ("photo-%d.png", i);
      g_autofree char *photo_path = g_build_filename (photos, name, NULL);
      g_autofree char *annotation_path = g_build_filename (annotations, name, NULL);

      rete_synth_params_init (&params);
      params.seed = 100 + i;
      params.width = params.height = 128;
      g_assert_true (rete_synth_fundus (&params, &photo, &vessels, NULL, &error));
      g_assert_true (rete_io_save (photo, photo_path, NULL, &error));
      g_assert_true (rete_io_save (vessels, annotation_path, NULL, &error));
      g_assert_no_error (error);
      rete_image_free (photo);
      rete_image_free (vessels);
    }
  call = vessel_call ("image", "drawable", RETE_METHOD_LEARNED, "gimp-test-tiny");
  script = g_strdup_printf (
    "(let ((out (plug-in-rete-train RUN-NONINTERACTIVE -1 -1 \"%s\" \"%s\" \"\" 0 0 20 \"\" \"gimp-test-tiny\")))\n"
    "  (gimp-message (string-append \"RETE-VALUE steps \" (number->string (caddr out))))\n"
    "  (gimp-message (string-append \"RETE-VALUE model-exists \" (if (file-exists? (car out)) \"1\" \"0\"))))\n"
    "(let ((names (cadr (plug-in-rete-models RUN-NONINTERACTIVE))))\n"
    "  (gimp-message (string-append \"RETE-VALUE listed \" (if (member \"gimp-test-tiny\" names) \"1\" \"0\"))))\n"
    "(let* ((image (car (file-png-load RUN-NONINTERACTIVE \"%s/photo-0.png\" \"\")))\n"
    "       (drawable (car (gimp-image-get-active-drawable image))))\n"
    "  %s\n"
    "  (gimp-image-delete image)\n"
    "  (gimp-message \"RETE-DONE\"))\n", photos, annotations, photos, call);
  g_autoptr (GimpRun) run = gimp_harness_run (script, 600);
  gimp_run_assert_ok (run);
  g_assert_cmpfloat (gimp_run_value (run, "steps"), ==, 20);
  g_assert_cmpfloat (gimp_run_value (run, "listed"), >=, 1);
}

/* ---- measurements: figures and CSV against rete_measure ---- */

static void
test_measure (void)
{
  g_autofree char *in = NULL, *map_png = NULL, *fov_png = NULL, *csv = NULL, *script = NULL;
  g_autofree char *csv_text = NULL, *expected_csv = NULL, *header = NULL, *row = NULL;
  g_autoptr (ReteImage) photo = NULL, truth = NULL, map = NULL;
  g_autoptr (ReteMeasurements) m = NULL;
  g_autofree ReteMeasureField *fields = NULL;
  ReteMeasureParams params;
  GString *prints = g_string_new (NULL);
  GError *error = NULL;
  double largest = 0.0;
  int n;

  if (!gimp_harness_setup ())
    return;
  photo = synthetic_photo ("photo-measure.png", 16, &in, &truth);
  map_png = rete_test_tmp_path ("measure-map.png");
  fov_png = rete_test_tmp_path ("measure-fov.png");
  csv = rete_test_tmp_path ("measure.csv");
  g_assert_true (rete_io_save (truth, map_png, NULL, &error));
  map = rete_io_load_grey (map_png, &error);
  g_assert_no_error (error);
  rete_measure_params_init (&params);
  m = rete_measure (map, NULL, &params, &error);
  g_assert_no_error (error);
  n = rete_measurements_fields (m, &fields);
  for (int i = 0; i < n; i++)
    g_string_append_printf (prints, "  (gimp-message (string-append \"RETE-VALUE f%d \" "
                            "(number->string (vector-ref (list-ref out 2) %d))))\n", i, i);
  script = g_strdup_printf (
    "(let* ((image (car (file-png-load RUN-NONINTERACTIVE \"%s\" \"\")))\n"
    "       (drawable (car (gimp-image-get-active-drawable image)))\n"
    "       (out (plug-in-rete-measure RUN-NONINTERACTIVE image drawable -1 0 %.17g 1 \"%s\")))\n"
    "  (gimp-message (string-append \"RETE-VALUE n \" (number->string (list-ref out 1))))\n"
    "%s"
    "  (gimp-message (string-append \"RETE-VALUE layer \" (number->string (list-ref out 5))))\n"
    "  (gimp-image-delete image)\n"
    "  (gimp-message \"RETE-DONE\"))\n", map_png, params.min_segment_length, csv, prints->str);
  g_string_free (prints, TRUE);
  g_autoptr (GimpRun) run = gimp_harness_run (script, 300);
  gimp_run_assert_ok (run);
  g_assert_cmpfloat (gimp_run_value (run, "n"), ==, n);
  g_assert_cmpfloat (gimp_run_value (run, "layer"), >, 0);
  for (int i = 0; i < n; i++)
    {
      g_autofree char *key = g_strdup_printf ("f%d", i);
      double got = gimp_run_value (run, key), want = fields[i].value;
      double diff = isnan (want) ? (isnan (got) ? 0.0 : INFINITY)
                                 : fabs (got - want) / MAX (1.0, fabs (want));

      largest = MAX (largest, diff);
      if (!(diff <= 1e-9))
        g_test_fail_printf ("%s: GIMP returned %.10g, librete %.10g", fields[i].column, got, want);
    }
  g_test_message ("measurements: %d figures, largest relative difference %.3g (tolerance 1e-9)",
                  n, largest);
  /* The CSV is librete's own row for the layer's name (GIMP names a loaded layer after the
   * file). */
  g_assert_true (g_file_get_contents (csv, &csv_text, NULL, NULL));
  header = rete_measurements_csv_header (m);
  g_assert_true (g_str_has_prefix (csv_text, header));
  g_assert_cmpuint (strlen (csv_text), >, strlen (header) + 10);
}

/* ---- bad calls: an error status with a message, never a crash or a result ---- */

typedef struct {
  const char *name;
  const char *setup;    /* Script-Fu run with `image` and `drawable` bound */
  const char *message;  /* part of the expected message */
} BadCall;

#define VESSEL(rest) "(plug-in-rete-vessel-map RUN-NONINTERACTIVE image drawable " rest ")"
#define GOOD_TAIL "0 1 1.0 4.0 0.5 1.5 9.0 15 0 0.5 30 1 1 '(0 217 255) 70.0"

static const BadCall bad_calls[] = {
  { "missing-model", VESSEL ("0 \"no-such-model\" " GOOD_TAIL), "no-such-model" },
  { "method-out-of-range", VESSEL ("9 \"\" " GOOD_TAIL), "method must be" },
  { "sigma-out-of-range",
    VESSEL ("1 \"\" 0 1 -1.0 4.0 0.5 1.5 9.0 15 0 0.5 30 1 1 '(0 217 255) 70.0"), "frangi-sigma-min" },
  { "threshold-out-of-range",
    VESSEL ("1 \"\" 0 1 1.0 4.0 0.5 1.5 9.0 15 1 1.5 30 1 1 '(0 217 255) 70.0"), "threshold must" },
  { "wrong-parameter-count", "(plug-in-rete-vessel-map RUN-NONINTERACTIVE image drawable 1)",
    "number of arguments" },
  { "empty-selection",
    "(gimp-image-select-rectangle image CHANNEL-OP-REPLACE 0 0 12 12) " VESSEL ("1 \"\" " GOOD_TAIL),
    "field of view" },
  { "indexed-image",
    "(gimp-image-convert-indexed image CONVERT-DITHER-NONE CONVERT-PALETTE-GENERATE 16 FALSE FALSE \"\") "
    VESSEL ("1 \"\" " GOOD_TAIL), "indexed" },
  { "layers-of-different-sizes",
    "(let ((small (car (gimp-image-new 40 30 RGB)))) (let ((l (car (gimp-layer-new small 40 30 RGB-IMAGE \"x\" 100 LAYER-MODE-NORMAL))))"
    " (gimp-image-insert-layer small l 0 0)"
    " (plug-in-rete-agreement RUN-NONINTERACTIVE image drawable l -1 0 0.5 0 '(0 200 0) '(255 0 0) '(0 80 255) \"\")))",
    "but" },
  { "fov-layer-mask-twice",
    "(plug-in-rete-field-of-view RUN-NONINTERACTIVE image drawable 0 0 0 0 1)"
    " (plug-in-rete-field-of-view RUN-NONINTERACTIVE image drawable 0 0 0 0 1)", "already has a layer mask" },
  { "fov-out-of-range", "(plug-in-rete-field-of-view RUN-NONINTERACTIVE image drawable -3 0 1 0 0)",
    "erode-rim" },
  { "train-missing-folder",
    "(plug-in-rete-train RUN-NONINTERACTIVE -1 -1 \"/nonexistent/photos\" \"/nonexistent/ann\" \"\" 0 0 10 \"\" \"x\")",
    "cannot be read" },
  { "train-nothing-to-train-on",
    "(plug-in-rete-train RUN-NONINTERACTIVE -1 -1 \"\" \"\" \"\" 0 0 10 \"\" \"x\")", "nothing to train on" },
  { "train-missing-start-model",
    "(let ((r (car (gimp-layer-copy drawable FALSE)))) (gimp-image-insert-layer image r 0 0) (gimp-item-set-name r \"Reference\"))"
    " (plug-in-rete-train RUN-NONINTERACTIVE -1 -1 \"\" \"\" \"\" 1 0 10 \"no-such-model\" \"x\")",
    "no-such-model" },
  { "measure-fov-of-different-size",
    "(let ((small (car (gimp-image-new 40 30 RGB)))) (let ((l (car (gimp-layer-new small 40 30 RGB-IMAGE \"x\" 100 LAYER-MODE-NORMAL))))"
    " (gimp-image-insert-layer small l 0 0)"
    " (plug-in-rete-measure RUN-NONINTERACTIVE image drawable l 0 10 0 \"\")))", "but" },
  { "measure-absurd-pixel-size", "(plug-in-rete-measure RUN-NONINTERACTIVE image drawable -1 5.0 10 0 \"\")",
    "" },
};

static void
test_bad_call (gconstpointer data)
{
  const BadCall *c = data;
  static char *in;
  g_autofree char *script = NULL;

  if (!gimp_harness_setup ())
    return;
  if (!in)
    rete_image_free (synthetic_photo ("photo-bad.png", 15, &in, NULL));
  script = g_strdup_printf (
    "(let* ((image (car (file-png-load RUN-NONINTERACTIVE \"%s\" \"\")))\n"
    "       (drawable (car (gimp-image-get-active-drawable image))))\n"
    "  (gimp-message \"RETE-DONE\")\n"
    "  %s\n"
    "  (gimp-message \"RETE-REACHED\"))\n", in, c->setup);
  g_autoptr (GimpRun) run = gimp_harness_run (script, 120);
  if (!run->failed || run->crashed || strstr (run->output, "RETE-REACHED")
      || !strstr (run->output, c->message))
    {
      g_printerr ("# GIMP output:\n%s\n", run->output);
      g_test_fail_printf ("%s: expected an error status with “%s”", c->name, c->message);
    }
}

static void
test_models_list (void)
{
  g_autoptr (GimpRun) run = NULL;

  if (!gimp_harness_setup ())
    return;
  run = gimp_harness_run (
    "(let ((out (plug-in-rete-models RUN-NONINTERACTIVE)))\n"
    "  (gimp-message (string-append \"RETE-VALUE models \" (number->string (car out))))\n"
    "  (gimp-message \"RETE-DONE\"))\n", 120);
  gimp_run_assert_ok (run);
  g_assert_cmpfloat (gimp_run_value (run, "models"), >=, 0);
}

/* ---- the checker itself: a deliberately wrong map must be found different ---- */

static void
test_compare_detects_difference (void)
{
  g_autofree char *png = rete_test_tmp_path ("checker.png");
  g_autoptr (ReteImage) map = NULL, wrong = NULL;
  GError *error = NULL;
  int max_diff;
  gsize ties;

  map = rete_image_new (32, 16, 1, &error);
  for (gsize i = 0; i < rete_image_n_pixels (map); i++)
    map->data[i] = (float) (i % 256) / 255.0f;
  g_assert_true (rete_io_save (map, png, NULL, &error));
  g_assert_no_error (error);
  g_assert_cmpuint (gimp_compare_png (png, map, &max_diff, &ties), ==, 0);
  wrong = rete_image_copy (map, &error);
  wrong->data[5] += 1.0f / 255.0f;  /* one pixel one level off */
  g_assert_cmpuint (gimp_compare_png (png, wrong, &max_diff, &ties), ==, 1);
  g_assert_cmpint (max_diff, ==, 1);
}

int
main (int argc, char *argv[])
{
  /* GEGL first: this machine's GEGL registers one operation twice, with a warning that
   * g_test_init would make fatal. */
  rete_io_init ();
  g_test_init (&argc, &argv, NULL);

  g_test_add_func ("/gimp/checker/detects-one-level-difference", test_compare_detects_difference);
  for (gsize i = 0; i < G_N_ELEMENTS (method_cases); i++)
    {
      g_autofree char *path = g_strdup_printf ("/gimp/vessel-map/%s/equals-librete",
                                               method_cases[i].name);
      g_test_add_data_func (path, &method_cases[i], test_vessel_map_method);
    }
  g_test_add_func ("/gimp/vessel-map/selection-only/equals-librete", test_vessel_map_selection);
  g_test_add_func ("/gimp/vessel-map/chase-db1-jpeg/equals-librete", test_vessel_map_chase);
  g_test_add_func ("/gimp/field-of-view/layer-selection-mask/equals-librete", test_field_of_view);
  g_test_add_data_func ("/gimp/agreement/fixed-threshold/equals-librete", GINT_TO_POINTER (0),
                        test_agreement_synthetic);
  g_test_add_data_func ("/gimp/agreement/best-dice/equals-librete", GINT_TO_POINTER (1),
                        test_agreement_synthetic);
  g_test_add_func ("/gimp/agreement/chase-db1-grader-vs-grader/equals-librete",
                   test_agreement_chase_graders);
  for (gsize i = 0; i < G_N_ELEMENTS (bad_calls); i++)
    {
      g_autofree char *path = g_strdup_printf ("/gimp/bad-call/%s/returns-error", bad_calls[i].name);
      g_test_add_data_func (path, &bad_calls[i], test_bad_call);
    }
  g_test_add_func ("/gimp/models/list", test_models_list);
  g_test_add_func ("/gimp/train/tiny-from-folders/model-listed-and-usable", test_train_folders);
  g_test_add_func ("/gimp/measure/figures-and-csv/equals-librete", test_measure);
  return g_test_run ();
}
