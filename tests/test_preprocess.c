/* test_preprocess.c — channels, CLAHE (held against skimage.exposure.equalize_adapthist,
 * skimage 0.19, through /usr/bin/python3), CLAHE inside a field of view, background
 * normalisation (held against scipy.ndimage.gaussian_filter), standardisation, bad input.
 */
#include <math.h>
#include <string.h>
#include "rete_test.h"
#include "rete_preprocess.h"
#include "rete_fov.h"
#include "rete_io.h"

/* Our CLAHE follows skimage's steps exactly except that it keeps the interpolated value as a
 * float where skimage truncates it to an integer of 0..16383 before the final stretch: the
 * two may differ by 1/16383 of the pre-stretch range (about 6e-5, more where the result spans
 * less than the whole range). Tolerances (ours, from that argument: 2.5 and 0.8 such steps;
 * measured 6.3e-5 and 2.8e-5 at worst): */
#define CLAHE_MAX_TOLERANCE 1.5e-4
#define CLAHE_MEAN_TOLERANCE 5e-5

/* A deterministic test picture: a smooth illumination, dark curved "vessels", a bright disc,
 * noise; values in [0, 1]; `levels` > 0 rounds to that many grey levels (as a JPEG's). */
static ReteImage *
make_picture (int width, int height, guint32 seed, int levels)
{
  ReteImage *image = rete_image_new (width, height, 1, NULL);
  GRand *rand = g_rand_new_with_seed (seed);
  for (int y = 0; y < height; y++)
    for (int x = 0; x < width; x++)
      {
        double u = (double) x / width, v = (double) y / height;
        double value = 0.25 + 0.35 * u * (1 - v) + 0.15 * sin (6 * u + 3 * v);
        double d = fabs (v - 0.5 - 0.25 * sin (5 * u)); /* a vessel */
        value -= 0.2 * exp (-d * d * height * height / 18.0);
        double e = fabs (u - 0.3 - 0.1 * cos (7 * v));
        value -= 0.12 * exp (-e * e * width * width / 8.0);
        double r2 = (u - 0.7) * (u - 0.7) + (v - 0.3) * (v - 0.3);
        value += 0.3 * exp (-r2 / 0.004); /* a bright disc */
        value += g_rand_double_range (rand, -0.03, 0.03);
        value = CLAMP (value, 0.0, 1.0);
        if (levels > 0)
          value = round (value * (levels - 1)) / (levels - 1);
        image->data[(gsize) y * width + x] = (float) value;
      }
  g_rand_free (rand);
  return image;
}

/* ---- channels ---- */

static void
test_channel_values (void)
{
  g_autoptr (ReteImage) photo = rete_image_new (2, 1, 3, NULL);
  float rgb[2][3] = { { 0.8f, 0.4f, 0.1f }, { 0.0f, 1.0f, 0.5f } };
  for (int x = 0; x < 2; x++)
    for (int c = 0; c < 3; c++)
      rete_image_plane (photo, c)[x] = rgb[x][c];
  g_autoptr (ReteImage) green = rete_preprocess_channel (photo, RETE_CHANNEL_GREEN, NULL);
  g_assert_cmpfloat (green->data[0], ==, 0.4f);
  g_autoptr (ReteImage) red = rete_preprocess_channel (photo, RETE_CHANNEL_RED, NULL);
  g_assert_cmpfloat (red->data[0], ==, 0.8f);
  g_autoptr (ReteImage) blue = rete_preprocess_channel (photo, RETE_CHANNEL_BLUE, NULL);
  g_assert_cmpfloat (blue->data[1], ==, 0.5f);
  /* Rec. 709 luma (ITU-R BT.709-6 item 3.2): 0.2126 R + 0.7152 G + 0.0722 B */
  g_autoptr (ReteImage) luma = rete_preprocess_channel (photo, RETE_CHANNEL_LUMINANCE, NULL);
  g_assert_cmpfloat_with_epsilon (luma->data[0], 0.2126 * 0.8 + 0.7152 * 0.4 + 0.0722 * 0.1, 1e-6);
  g_assert_cmpfloat_with_epsilon (luma->data[1], 0.7152 + 0.0722 * 0.5, 1e-6);
  /* one channel: a copy whatever the choice */
  g_autoptr (ReteImage) copy = rete_preprocess_channel (green, RETE_CHANNEL_RED, NULL);
  g_assert_cmpfloat (copy->data[1], ==, 1.0f);
}

static void
test_channel_names (void)
{
  for (int c = RETE_CHANNEL_GREEN; c <= RETE_CHANNEL_BLUE; c++)
    {
      ReteChannel back;
      g_assert_true (rete_channel_from_name (rete_channel_name (c), &back, NULL));
      g_assert_cmpint (back, ==, c);
    }
  GError *error = NULL;
  ReteChannel channel;
  g_assert_false (rete_channel_from_name ("purple", &channel, &error));
  g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT);
  g_assert_nonnull (strstr (error->message, "green"));
  g_test_message ("%s", error->message);
  g_clear_error (&error);
}

static void
test_channel_bad_input (void)
{
  GError *error = NULL;
  g_autoptr (ReteImage) two = rete_image_new (4, 4, 2, NULL);
  g_assert_null (rete_preprocess_channel (two, RETE_CHANNEL_GREEN, &error));
  g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT);
  g_test_message ("%s", error->message);
  g_clear_error (&error);
  g_autoptr (ReteImage) photo = rete_image_new (4, 4, 3, NULL);
  rete_image_plane (photo, 1)[5] = NAN;
  g_assert_null (rete_preprocess_channel (photo, RETE_CHANNEL_GREEN, &error));
  g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_NOT_FINITE);
  g_test_message ("%s", error->message);
  g_clear_error (&error);
  g_assert_null (rete_preprocess_channel (NULL, RETE_CHANNEL_GREEN, &error));
  g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT);
  g_clear_error (&error);
}

/* ---- CLAHE against skimage ---- */

typedef struct {
  const char *name;
  int width, height;
  int levels;           /* 0: any float; 256: an 8-bit picture */
  ReteClaheParams params;
  double skimage_clip;  /* clip given to skimage: the same, except in the checker's own test */
  gboolean must_fail;   /* a deliberately wrong case: the checker must see the difference */
} ClaheCase;

static const ClaheCase clahe_cases[] = {
  { "default-8bit", 320, 240, 256, { 0, 0, 0.01, 256 }, 0.01, FALSE },
  { "default-float", 333, 251, 0, { 0, 0, 0.01, 256 }, 0.01, FALSE },
  { "odd-kernel", 301, 277, 0, { 37, 23, 0.02, 256 }, 0.02, FALSE },
  { "kernel-not-dividing", 250, 190, 256, { 60, 45, 0.03, 128 }, 0.03, FALSE },
  { "few-bins", 200, 160, 0, { 0, 0, 0.05, 32 }, 0.05, FALSE },
  { "no-limit", 180, 200, 256, { 0, 0, 1.0, 256 }, 1.0, FALSE },
  { "many-bins", 256, 256, 0, { 64, 64, 0.01, 1024 }, 0.01, FALSE },
  { "fundus-size", 999, 960, 256, { 0, 0, 0.01, 256 }, 0.01, FALSE },
  { "checker-can-fail", 320, 240, 256, { 0, 0, 0.01, 256 }, 0.03, TRUE },
};

/* Runs skimage on `image`; NULL (and the test skipped) when the reference is unavailable. */
static ReteImage *
skimage_clahe (const ReteImage *image, const ReteClaheParams *params, double clip)
{
  g_autofree char *in = rete_test_tmp_path ("clahe-in.npy");
  g_autofree char *out = rete_test_tmp_path ("clahe-out.npy");
  GError *error = NULL;
  g_assert_true (rete_test_write_image_npy (in, image, &error));
  g_autofree char *kh = g_strdup_printf ("%d", params->kernel_height);
  g_autofree char *kw = g_strdup_printf ("%d", params->kernel_width);
  g_autofree char *cl = g_strdup_printf ("%.17g", clip);
  g_autofree char *nb = g_strdup_printf ("%d", params->n_bins);
  gboolean skipped = FALSE;
  g_autofree char *said = rete_test_python ("ref_clahe.py", &skipped, &error, in, out, kh, kw,
                                            cl, nb, NULL);
  if (skipped)
    {
      g_test_skip (error->message);
      g_error_free (error);
      return NULL;
    }
  g_assert_no_error (error);
  ReteImage *reference = rete_test_read_image_npy (out, &error);
  g_assert_no_error (error);
  return reference;
}

static void
compare (const ReteImage *ours, const ReteImage *reference, double *max_diff, double *mean_diff,
         gsize *where)
{
  gsize n = rete_image_n_pixels (ours);
  *max_diff = rete_test_max_abs_diff (ours->data, reference->data, n, where);
  double sum = 0;
  for (gsize i = 0; i < n; i++)
    sum += fabs ((double) ours->data[i] - reference->data[i]);
  *mean_diff = sum / n;
}

static void
test_clahe_matches_skimage (gconstpointer data)
{
  const ClaheCase *tc = data;
  g_autoptr (ReteImage) image = make_picture (tc->width, tc->height, 7 + tc->width, tc->levels);
  GError *error = NULL;
  g_autoptr (ReteImage) ours = rete_clahe (image, NULL, &tc->params, &error);
  g_assert_no_error (error);
  g_autoptr (ReteImage) reference = skimage_clahe (image, &tc->params, tc->skimage_clip);
  if (reference == NULL)
    return;
  g_assert_cmpint (reference->width, ==, ours->width);
  g_assert_cmpint (reference->height, ==, ours->height);
  double max_diff, mean_diff;
  gsize where;
  compare (ours, reference, &max_diff, &mean_diff, &where);
  g_test_message ("%s %dx%d: largest difference %.3g at (%d, %d), mean %.3g "
                  "(tolerance %.2g and %.2g)", tc->name, tc->width, tc->height, max_diff,
                  (int) (where % tc->width), (int) (where / tc->width), mean_diff,
                  CLAHE_MAX_TOLERANCE, CLAHE_MEAN_TOLERANCE);
  if (tc->must_fail)
    g_assert_cmpfloat (max_diff, >, CLAHE_MAX_TOLERANCE);
  else
    {
      g_assert_cmpfloat (max_diff, <=, CLAHE_MAX_TOLERANCE);
      g_assert_cmpfloat (mean_diff, <=, CLAHE_MEAN_TOLERANCE);
    }
}

/* The green channel of a CHASE_DB1 photograph (Fraz et al., IEEE TBME 2012), surround and
 * all (skimage has no field of view). */
static void
test_clahe_matches_skimage_on_chase (void)
{
  g_autofree char *path = rete_test_data_file ("chase_db1/images/Image_01L.jpg");
  if (path == NULL)
    return;
  GError *error = NULL;
  g_autoptr (ReteImage) photo = rete_io_load (path, &error);
  g_assert_no_error (error);
  g_autoptr (ReteImage) green = rete_preprocess_channel (photo, RETE_CHANNEL_GREEN, &error);
  g_assert_no_error (error);
  ReteClaheParams params;
  rete_clahe_params_init (&params);
  g_autoptr (ReteImage) ours = rete_clahe (green, NULL, &params, &error);
  g_assert_no_error (error);
  g_autoptr (ReteImage) reference = skimage_clahe (green, &params, params.clip_limit);
  if (reference == NULL)
    return;
  double max_diff, mean_diff;
  gsize where;
  compare (ours, reference, &max_diff, &mean_diff, &where);
  g_test_message ("CHASE_DB1 Image_01L green: largest difference %.3g, mean %.3g "
                  "(tolerance %.2g and %.2g)", max_diff, mean_diff, CLAHE_MAX_TOLERANCE,
                  CLAHE_MEAN_TOLERANCE);
  g_assert_cmpfloat (max_diff, <=, CLAHE_MAX_TOLERANCE);
  g_assert_cmpfloat (mean_diff, <=, CLAHE_MEAN_TOLERANCE);
}

/* ---- CLAHE inside a field of view ---- */

/* A fundus-like picture: make_picture inside a disc, `surround` outside; the disc as mask. */
static ReteImage *
make_fundus (int size, double surround, guint32 seed, ReteImage **fov)
{
  ReteImage *image = make_picture (size, size, 11, 256);
  *fov = rete_image_new (size, size, 1, NULL);
  GRand *rand = g_rand_new_with_seed (seed);
  double c = (size - 1) / 2.0, r = 0.45 * size;
  for (int y = 0; y < size; y++)
    for (int x = 0; x < size; x++)
      {
        gsize i = (gsize) y * size + x;
        if ((x - c) * (x - c) + (y - c) * (y - c) <= r * r)
          (*fov)->data[i] = 1.0f;
        else
          image->data[i] = (float) (surround * g_rand_double (rand));
      }
  g_rand_free (rand);
  return image;
}

static void
test_clahe_inside_fov (void)
{
  g_autoptr (ReteImage) fov = NULL;
  g_autoptr (ReteImage) fov_again = NULL;
  g_autoptr (ReteImage) black = make_fundus (300, 0.0, 1, &fov);
  g_autoptr (ReteImage) noisy = make_fundus (300, 1.0, 2, &fov_again); /* bright noise around */
  ReteClaheParams params;
  rete_clahe_params_init (&params);
  GError *error = NULL;
  g_autoptr (ReteImage) a = rete_clahe (black, fov, &params, &error);
  g_assert_no_error (error);
  g_autoptr (ReteImage) b = rete_clahe (noisy, fov, &params, &error);
  g_assert_no_error (error);
  gsize n = rete_image_n_pixels (a), n_out = 0;
  double worst = 0, lo = 1, hi = 0;
  for (gsize i = 0; i < n; i++)
    if (fov->data[i] > 0.5f)
      {
        worst = MAX (worst, fabs (a->data[i] - b->data[i]));
        lo = MIN (lo, a->data[i]);
        hi = MAX (hi, a->data[i]);
      }
    else
      {
        g_assert_cmpfloat (a->data[i], ==, 0.0f);
        g_assert_cmpfloat (b->data[i], ==, 0.0f);
        n_out++;
      }
  g_assert_cmpuint (n_out, >, 0);
  /* The surround never enters the histograms: the result inside must not move (ours). */
  g_test_message ("black versus noisy surround: largest difference inside %.3g (tolerance 1e-6)",
                  worst);
  g_assert_cmpfloat (worst, <=, 1e-6);
  g_assert_cmpfloat (lo, ==, 0.0);
  g_assert_cmpfloat (hi, ==, 1.0);

  /* Without the FOV the bright surround changes the rim of the fundus: our limit makes a
   * difference there (which is its point). */
  g_autoptr (ReteImage) plain = rete_clahe (noisy, NULL, &params, &error);
  g_assert_no_error (error);
  double moved = 0;
  for (gsize i = 0; i < n; i++)
    if (fov->data[i] > 0.5f)
      moved = MAX (moved, fabs (plain->data[i] - b->data[i]));
  g_test_message ("with versus without the FOV, largest difference inside %.3g", moved);
  g_assert_cmpfloat (moved, >, 0.05);
}

/* A FOV that covers everything gives exactly the result without a FOV (the two paths of
 * the histogram pass agree). */
static void
test_clahe_whole_fov (void)
{
  g_autoptr (ReteImage) image = make_picture (301, 277, 12, 0);
  g_autoptr (ReteImage) all = rete_image_new (301, 277, 1, NULL);
  for (gsize i = 0; i < rete_image_n_pixels (all); i++)
    all->data[i] = 1.0f;
  ReteClaheParams params = { 37, 23, 0.02, 256 };
  g_autoptr (ReteImage) with = rete_clahe (image, all, &params, NULL);
  g_autoptr (ReteImage) without = rete_clahe (image, NULL, &params, NULL);
  gsize size = rete_image_n_pixels (image) * sizeof (float);
  g_assert_cmpmem (with->data, size, without->data, size);
}

/* A FOV much smaller than a tile, and one along the edge, still give a full mapping. */
static void
test_clahe_small_fov (void)
{
  g_autoptr (ReteImage) image = make_picture (200, 200, 3, 0);
  g_autoptr (ReteImage) fov = rete_image_new (200, 200, 1, NULL);
  for (int y = 0; y < 12; y++)
    for (int x = 0; x < 200; x++)
      fov->data[y * 200 + x] = 1.0f;
  fov->data[150 * 200 + 150] = 1.0f; /* a lone pixel far away */
  ReteClaheParams params;
  rete_clahe_params_init (&params);
  GError *error = NULL;
  g_autoptr (ReteImage) out = rete_clahe (image, fov, &params, &error);
  g_assert_no_error (error);
  for (gsize i = 0; i < rete_image_n_pixels (out); i++)
    {
      g_assert_true (out->data[i] >= 0.0f && out->data[i] <= 1.0f);
      if (fov->data[i] < 0.5f)
        g_assert_cmpfloat (out->data[i], ==, 0.0f);
    }
}

/* Rows and tiles are shared out between threads: the result must not depend on how many. */
static void
test_clahe_thread_count (void)
{
  g_autoptr (ReteImage) fov = NULL;
  g_autoptr (ReteImage) image = make_fundus (357, 0.2, 9, &fov);
  ReteClaheParams params;
  rete_clahe_params_init (&params);
  int saved = rete_thread_count ();
  rete_set_thread_count (1);
  g_autoptr (ReteImage) one = rete_clahe (image, fov, &params, NULL);
  g_autoptr (ReteImage) one_plain = rete_clahe (image, NULL, &params, NULL);
  rete_set_thread_count (3);
  g_autoptr (ReteImage) three = rete_clahe (image, fov, &params, NULL);
  g_autoptr (ReteImage) three_plain = rete_clahe (image, NULL, &params, NULL);
  rete_set_thread_count (saved);
  gsize size = rete_image_n_pixels (image) * sizeof (float);
  g_assert_cmpmem (one->data, size, three->data, size);
  g_assert_cmpmem (one_plain->data, size, three_plain->data, size);
}

static void
test_clahe_bad_input (void)
{
  g_autoptr (ReteImage) grey = make_picture (64, 48, 5, 0);
  g_autoptr (ReteImage) colour = rete_image_new (64, 48, 3, NULL);
  g_autoptr (ReteImage) small = rete_image_new (32, 48, 1, NULL);
  g_autoptr (ReteImage) empty = rete_image_new (64, 48, 1, NULL);
  g_autoptr (ReteImage) nan_image = rete_image_copy (grey, NULL);
  nan_image->data[100] = NAN;
  g_autoptr (ReteImage) bright = rete_image_copy (grey, NULL);
  bright->data[7] = 1.5f;
  ReteClaheParams ok, big_kernel, no_clip, clip_high, one_bin, negative, too_many;
  rete_clahe_params_init (&ok);
  big_kernel = no_clip = clip_high = one_bin = negative = too_many = ok;
  too_many.kernel_width = too_many.kernel_height = 1;
  too_many.n_bins = 65536;
  big_kernel.kernel_width = 65;
  no_clip.clip_limit = 0.0;
  clip_high.clip_limit = 1.5;
  one_bin.n_bins = 1;
  negative.kernel_height = -3;
  struct {
    const char *what;
    const ReteImage *grey, *fov;
    const ReteClaheParams *params;
    int code;
  } cases[] = {
    { "no image", NULL, NULL, &ok, RETE_ERROR_INVALID_ARGUMENT },
    { "three channels", colour, NULL, &ok, RETE_ERROR_INVALID_ARGUMENT },
    { "FOV of three channels", grey, colour, &ok, RETE_ERROR_INVALID_ARGUMENT },
    { "FOV of another size", grey, small, &ok, RETE_ERROR_SIZE_MISMATCH },
    { "empty FOV", grey, empty, &ok, RETE_ERROR_EMPTY },
    { "NaN", nan_image, NULL, &ok, RETE_ERROR_NOT_FINITE },
    { "value above 1", bright, NULL, &ok, RETE_ERROR_INVALID_ARGUMENT },
    { "region wider than the image", grey, NULL, &big_kernel, RETE_ERROR_INVALID_ARGUMENT },
    { "negative region", grey, NULL, &negative, RETE_ERROR_INVALID_ARGUMENT },
    { "clip limit 0", grey, NULL, &no_clip, RETE_ERROR_INVALID_ARGUMENT },
    { "clip limit 1.5", grey, NULL, &clip_high, RETE_ERROR_INVALID_ARGUMENT },
    { "one bin", grey, NULL, &one_bin, RETE_ERROR_INVALID_ARGUMENT },
    { "one-pixel regions of 65536 bins", grey, NULL, &too_many, RETE_ERROR_INVALID_ARGUMENT },
  };
  for (gsize i = 0; i < G_N_ELEMENTS (cases); i++)
    {
      GError *error = NULL;
      ReteImage *out = rete_clahe (cases[i].grey, cases[i].fov, cases[i].params, &error);
      g_assert_null (out);
      g_assert_error (error, RETE_VESSEL_ERROR, cases[i].code);
      g_test_message ("%s: %s", cases[i].what, error->message);
      g_error_free (error);
    }
}

/* ---- background normalisation, standardisation, the chain ---- */

static void
test_background_matches_scipy (void)
{
  g_autoptr (ReteImage) fov = NULL;
  g_autoptr (ReteImage) image = make_fundus (240, 0.0, 4, &fov);
  const double sigma = 12.0;
  GError *error = NULL;
  g_autoptr (ReteImage) ours = rete_background_normalise (image, fov, sigma, &error);
  g_assert_no_error (error);
  g_autofree char *in = rete_test_tmp_path ("bg-in.npy");
  g_autofree char *mask = rete_test_tmp_path ("bg-fov.npy");
  g_autofree char *out = rete_test_tmp_path ("bg-out.npy");
  g_assert_true (rete_test_write_image_npy (in, image, NULL));
  g_assert_true (rete_test_write_image_npy (mask, fov, NULL));
  gboolean skipped = FALSE;
  g_autofree char *said = rete_test_python ("ref_background_fov.py", &skipped, &error, in, mask,
                                            out, "12", NULL);
  if (skipped)
    {
      g_test_skip (error->message);
      g_clear_error (&error);
      return;
    }
  g_assert_no_error (error);
  g_autoptr (ReteImage) reference = rete_test_read_image_npy (out, &error);
  g_assert_no_error (error);
  gsize where;
  double worst = rete_test_max_abs_diff (ours->data, reference->data,
                                         rete_image_n_pixels (ours), &where);
  /* float32 blur against scipy's float64: 1e-4 on a [0, 1] result (ours) */
  g_test_message ("background normalisation against scipy: largest difference %.3g "
                  "(tolerance 1e-4)", worst);
  g_assert_cmpfloat (worst, <=, 1e-4);
}

static void
test_background_bad_input (void)
{
  g_autoptr (ReteImage) grey = make_picture (40, 30, 5, 0);
  g_autoptr (ReteImage) empty = rete_image_new (40, 30, 1, NULL);
  GError *error = NULL;
  g_assert_null (rete_background_normalise (grey, NULL, 0.0, &error));
  g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT);
  g_test_message ("%s", error->message);
  g_clear_error (&error);
  g_assert_null (rete_background_normalise (grey, NULL, NAN, &error));
  g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT);
  g_clear_error (&error);
  g_assert_null (rete_background_normalise (grey, empty, 5.0, &error));
  g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_EMPTY);
  g_test_message ("%s", error->message);
  g_clear_error (&error);
}

static void
test_standardise (void)
{
  g_autoptr (ReteImage) fov = NULL;
  g_autoptr (ReteImage) image = make_fundus (120, 0.5, 6, &fov);
  g_autoptr (ReteImage) before = rete_image_copy (image, NULL);
  GError *error = NULL;
  g_assert_true (rete_standardise (image, fov, &error));
  g_assert_no_error (error);
  double sum = 0, sum_sq = 0, before_sum = 0, before_sq = 0;
  gsize n_in = 0;
  for (gsize i = 0; i < rete_image_n_pixels (image); i++)
    if (fov->data[i] > 0.5f)
      {
        sum += image->data[i];
        sum_sq += (double) image->data[i] * image->data[i];
        before_sum += before->data[i];
        n_in++;
      }
    else
      g_assert_cmpfloat (image->data[i], ==, 0.0f);
  double mean = sum / n_in, sd = sqrt (sum_sq / n_in - mean * mean);
  g_assert_cmpfloat (fabs (mean), <, 1e-5);
  g_assert_cmpfloat (fabs (sd - 1.0), <, 1e-5);
  /* one pixel back: z = (x - mean) / sd with the population sd (numpy's default) */
  double m0 = before_sum / n_in;
  for (gsize i = 0; i < rete_image_n_pixels (image); i++)
    if (fov->data[i] > 0.5f)
      before_sq += (before->data[i] - m0) * (before->data[i] - m0);
  gsize centre = 60 * 120 + 60;
  g_assert_cmpfloat_with_epsilon (image->data[centre],
                                  (before->data[centre] - m0) / sqrt (before_sq / n_in), 1e-5);

  g_autoptr (ReteImage) flat = rete_image_new (10, 10, 1, NULL);
  g_assert_false (rete_standardise (flat, NULL, &error));
  g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_UNDEFINED);
  g_test_message ("%s", error->message);
  g_clear_error (&error);
  g_autoptr (ReteImage) empty = rete_image_new (10, 10, 1, NULL);
  g_autoptr (ReteImage) untouched = make_picture (10, 10, 1, 0);
  g_autoptr (ReteImage) copy = rete_image_copy (untouched, NULL);
  g_assert_false (rete_standardise (untouched, empty, &error));
  g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_EMPTY);
  g_clear_error (&error);
  g_assert_cmpmem (untouched->data, 100 * sizeof (float), copy->data, 100 * sizeof (float));
}

static void
test_chain (void)
{
  g_autoptr (ReteImage) fov = NULL;
  g_autoptr (ReteImage) green = make_fundus (160, 0.1, 8, &fov);
  g_autoptr (ReteImage) photo = rete_image_new (160, 160, 3, NULL);
  memcpy (rete_image_plane (photo, 1), green->data, sizeof (float) * 160 * 160);
  ReteClaheParams params;
  rete_clahe_params_init (&params);
  GError *error = NULL;
  g_autoptr (ReteImage) chained = rete_preprocess (photo, fov, RETE_CHANNEL_GREEN, &params, &error);
  g_assert_no_error (error);
  g_autoptr (ReteImage) direct = rete_clahe (green, fov, &params, &error);
  g_assert_cmpmem (chained->data, sizeof (float) * 160 * 160, direct->data,
                   sizeof (float) * 160 * 160);
  g_autoptr (ReteImage) bare = rete_preprocess (photo, fov, RETE_CHANNEL_GREEN, NULL, &error);
  g_assert_no_error (error);
  g_assert_cmpfloat (bare->data[0], ==, 0.0f); /* outside: 0 */
  g_assert_cmpfloat (bare->data[80 * 160 + 80], ==, green->data[80 * 160 + 80]);

  g_autoptr (ReteImage) other = rete_image_new (100, 160, 1, NULL);
  g_assert_null (rete_preprocess (photo, other, RETE_CHANNEL_GREEN, &params, &error));
  g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_SIZE_MISMATCH);
  g_test_message ("%s", error->message);
  g_clear_error (&error);
}

int
main (int argc, char **argv)
{
  rete_io_init (); /* before g_test_init, which makes GEGL's start-up warnings fatal */
  g_test_init (&argc, &argv, NULL);
  g_test_add_func ("/preprocess/channel/values", test_channel_values);
  g_test_add_func ("/preprocess/channel/names", test_channel_names);
  g_test_add_func ("/preprocess/channel/bad-input", test_channel_bad_input);
  for (gsize i = 0; i < G_N_ELEMENTS (clahe_cases); i++)
    {
      g_autofree char *path = g_strdup_printf ("/preprocess/clahe/matches-skimage/%s",
                                               clahe_cases[i].name);
      g_test_add_data_func (path, &clahe_cases[i], test_clahe_matches_skimage);
    }
  g_test_add_func ("/preprocess/clahe/matches-skimage-on-chase",
                   test_clahe_matches_skimage_on_chase);
  g_test_add_func ("/preprocess/clahe/inside-fov", test_clahe_inside_fov);
  g_test_add_func ("/preprocess/clahe/whole-fov", test_clahe_whole_fov);
  g_test_add_func ("/preprocess/clahe/small-fov", test_clahe_small_fov);
  g_test_add_func ("/preprocess/clahe/same-for-any-thread-count", test_clahe_thread_count);
  g_test_add_func ("/preprocess/clahe/bad-input", test_clahe_bad_input);
  g_test_add_func ("/preprocess/background/matches-scipy", test_background_matches_scipy);
  g_test_add_func ("/preprocess/background/bad-input", test_background_bad_input);
  g_test_add_func ("/preprocess/standardise", test_standardise);
  g_test_add_func ("/preprocess/chain", test_chain);
  return g_test_run ();
}
