/* test_fov.c — field-of-view detection against the CHASE_DB1 masks (Fraz et al., IEEE TBME
 * 2012; the masks came with the data's mirror) and synthetic photographs built here; erosion
 * by a Euclidean disc against a brute-force erosion and scipy.ndimage.binary_erosion; Dice;
 * bad input.
 */
#include <math.h>
#include <string.h>
#include "rete_test.h"
#include "rete_fov.h"
#include "rete_io.h"

/* Floor of the Dice coefficient against the CHASE_DB1 masks, per image: measured 0.9978 at
 * worst over the 20 training images (see the messages); the floor leaves a small margin. */
#define CHASE_DICE_FLOOR 0.995
/* Floor for the synthetic photographs, whose aperture is known exactly (ours; measured
 * 0.9999 at worst). */
#define SYNTHETIC_DICE_FLOOR 0.995

/* ---- synthetic photographs ---- */

typedef struct {
  const char *name;
  int width, height;
  double cx, cy, radius;   /* aperture, as fractions of the width (cx, radius) and height (cy) */
  double vignetting;       /* brightness falls by this fraction at the rim (quadratically) */
  double gain;             /* 1 normal; < 1 dark photograph; > 1 over-exposed (clipped) */
  double surround;         /* largest noise value in the surround */
  gboolean rim_lesion;     /* a dark patch touching the rim and one in the middle */
} Synthetic;

static const Synthetic synthetic_cases[] = {
  { "bright-disc-on-black", 400, 380, 0.5, 0.5, 0.42, 0.0, 1.0, 0.0, FALSE },
  { "cropped-circle", 420, 320, 0.5, 0.5, 0.47, 0.2, 1.0, 0.02, FALSE },
  { "off-centre", 500, 400, 0.45, 0.52, 0.35, 0.1, 1.0, 0.02, FALSE },
  { "vignetted", 400, 400, 0.5, 0.5, 0.44, 0.85, 1.0, 0.02, FALSE },
  { "very-dark", 400, 360, 0.5, 0.5, 0.43, 0.4, 0.08, 0.004, FALSE },
  { "over-exposed", 400, 360, 0.5, 0.5, 0.43, 0.1, 3.0, 0.03, FALSE },
  { "dark-lesions", 400, 400, 0.5, 0.5, 0.44, 0.3, 1.0, 0.02, TRUE },
};

/* An RGB fundus-like photograph (reddish, textured, with dark vessel-like lines) inside the
 * aperture, dim noise outside; *truth gets the aperture (pixel centres inside the circle and
 * the frame). */
static ReteImage *
make_photo (const Synthetic *s, ReteImage **truth)
{
  ReteImage *photo = rete_image_new (s->width, s->height, 3, NULL);
  *truth = rete_image_new (s->width, s->height, 1, NULL);
  GRand *rand = g_rand_new_with_seed (s->width * 7 + s->height);
  double cx = s->cx * s->width, cy = s->cy * s->height, r = s->radius * s->width;
  static const double colour[3] = { 0.78, 0.38, 0.16 };
  for (int y = 0; y < s->height; y++)
    for (int x = 0; x < s->width; x++)
      {
        gsize i = (gsize) y * s->width + x;
        double d = hypot (x - cx, y - cy) / r;
        gboolean in = d <= 1.0;
        (*truth)->data[i] = in;
        double texture = 1.0 + 0.08 * sin (x * 0.05) * cos (y * 0.07);
        double vessel = fabs (sin ((x - cx) * 0.03 + 0.5 * sin (y * 0.02)));
        texture *= 1.0 - 0.35 * exp (-vessel * vessel * 400.0);
        double light = 1.0 - s->vignetting * d * d;
        if (s->rim_lesion)
          {
            double lx = cx + 0.92 * r, ly = cy, mx = cx - 0.2 * r, my = cy + 0.1 * r;
            if (hypot (x - lx, y - ly) < 0.12 * r || hypot (x - mx, y - my) < 0.1 * r)
              light *= 0.12;
          }
        for (int c = 0; c < 3; c++)
          {
            double v = in ? s->gain * colour[c] * light * texture
                              + g_rand_double_range (rand, -0.01, 0.01) * s->gain
                          : s->surround * g_rand_double (rand);
            rete_image_plane (photo, c)[i] = (float) CLAMP (round (v * 255) / 255, 0.0, 1.0);
          }
      }
  g_rand_free (rand);
  return photo;
}

/* Number of 4-connected regions of value `value` in a mask; `touching` counts those that
 * touch the frame. */
static int
count_regions (const ReteImage *mask, gboolean value, int *touching)
{
  int w = mask->width, h = mask->height, regions = 0;
  gsize n = rete_image_n_pixels (mask);
  guint8 *seen = g_new0 (guint8, n);
  gsize *stack = g_new (gsize, n);
  *touching = 0;
  for (gsize seed = 0; seed < n; seed++)
    {
      if (seen[seed] || (mask->data[seed] > 0.5f) != value)
        continue;
      regions++;
      gboolean edge = FALSE;
      gsize top = 0;
      stack[top++] = seed;
      seen[seed] = 1;
      while (top > 0)
        {
          gsize i = stack[--top];
          int x = i % w, y = i / w;
          edge |= x == 0 || y == 0 || x == w - 1 || y == h - 1;
          int nx[4] = { x - 1, x + 1, x, x }, ny[4] = { y, y, y - 1, y + 1 };
          for (int k = 0; k < 4; k++)
            {
              if (nx[k] < 0 || ny[k] < 0 || nx[k] >= w || ny[k] >= h)
                continue;
              gsize j = (gsize) ny[k] * w + nx[k];
              if (!seen[j] && (mask->data[j] > 0.5f) == value)
                {
                  seen[j] = 1;
                  stack[top++] = j;
                }
            }
        }
      *touching += edge;
    }
  g_free (seen);
  g_free (stack);
  return regions;
}

/* One region, and every region of the outside reaches the frame (no holes). */
static void
assert_one_region_without_holes (const ReteImage *fov)
{
  int touching;
  g_assert_cmpint (count_regions (fov, TRUE, &touching), ==, 1);
  int outside = count_regions (fov, FALSE, &touching);
  g_assert_cmpint (outside, ==, touching);
}

static void
test_synthetic (gconstpointer data)
{
  const Synthetic *s = data;
  g_autoptr (ReteImage) truth = NULL;
  g_autoptr (ReteImage) photo = make_photo (s, &truth);
  GError *error = NULL;
  g_autoptr (ReteImage) fov = rete_fov_detect (photo, NULL, &error);
  g_assert_no_error (error);
  g_assert_cmpint (fov->channels, ==, 1);
  double dice = rete_mask_dice (fov, truth, NULL);
  g_test_message ("%s: Dice %.4f against the drawn aperture (floor %.2f)", s->name, dice,
                  SYNTHETIC_DICE_FLOOR);
  g_assert_cmpfloat (dice, >=, SYNTHETIC_DICE_FLOOR);
  assert_one_region_without_holes (fov);
}

/* A grey photograph (its red channel) and an RGBA one (alpha 0: ignored) give the same
 * aperture as the RGB one. */
static void
test_grey_and_rgba (void)
{
  const Synthetic *s = &synthetic_cases[1];
  g_autoptr (ReteImage) truth = NULL;
  g_autoptr (ReteImage) photo = make_photo (s, &truth);
  g_autoptr (ReteImage) red = rete_image_extract_channel (photo, 0, NULL);
  g_autoptr (ReteImage) rgba = rete_image_new (photo->width, photo->height, 4, NULL);
  memcpy (rgba->data, photo->data, sizeof (float) * 3 * rete_image_n_pixels (photo));
  g_autoptr (ReteImage) from_rgb = rete_fov_detect (photo, NULL, NULL);
  g_autoptr (ReteImage) from_grey = rete_fov_detect (red, NULL, NULL);
  g_autoptr (ReteImage) from_rgba = rete_fov_detect (rgba, NULL, NULL);
  gsize size = sizeof (float) * rete_image_n_pixels (photo);
  g_assert_cmpmem (from_rgb->data, size, from_rgba->data, size);
  double dice = rete_mask_dice (from_grey, truth, NULL);
  g_test_message ("grey photograph: Dice %.4f", dice);
  g_assert_cmpfloat (dice, >=, SYNTHETIC_DICE_FLOOR);
}

static void
test_black_frame (void)
{
  g_autoptr (ReteImage) black = rete_image_new (200, 150, 3, NULL);
  GError *error = NULL;
  g_assert_null (rete_fov_detect (black, NULL, &error));
  g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_EMPTY);
  g_assert_nonnull (strstr (error->message, "black"));
  g_test_message ("%s", error->message);
  g_clear_error (&error);
}

static void
test_lit_frame (void)
{
  /* A photograph lit to the corners has no surround: all of it is the FOV. */
  Synthetic s = { "lit", 200, 150, 0.5, 0.5, 2.0, 0.2, 1.0, 0.0, FALSE };
  g_autoptr (ReteImage) truth = NULL;
  g_autoptr (ReteImage) photo = make_photo (&s, &truth);
  g_autoptr (ReteImage) fov = rete_fov_detect (photo, NULL, NULL);
  g_assert_cmpuint (rete_mask_count (fov), ==, 200 * 150);
}

static void
test_given_level_and_rim (void)
{
  const Synthetic *s = &synthetic_cases[0];
  g_autoptr (ReteImage) truth = NULL;
  g_autoptr (ReteImage) photo = make_photo (s, &truth);
  ReteFovParams params;
  rete_fov_params_init (&params);
  params.threshold = 0.05;
  g_autoptr (ReteImage) fov = rete_fov_detect (photo, &params, NULL);
  g_assert_cmpfloat (rete_mask_dice (fov, truth, NULL), >=, SYNTHETIC_DICE_FLOOR);
  params.erode_rim = 6.0;
  g_autoptr (ReteImage) eroded = rete_fov_detect (photo, &params, NULL);
  g_autoptr (ReteImage) by_hand = rete_fov_erode (fov, 6.0, NULL);
  g_assert_cmpmem (eroded->data, sizeof (float) * rete_image_n_pixels (fov), by_hand->data,
                   sizeof (float) * rete_image_n_pixels (fov));
  g_assert_cmpuint (rete_mask_count (eroded), <, rete_mask_count (fov));
}

static void
test_detect_bad_input (void)
{
  g_autoptr (ReteImage) two = rete_image_new (50, 40, 2, NULL);
  g_autoptr (ReteImage) photo = rete_image_new (50, 40, 3, NULL);
  g_autoptr (ReteImage) nan_photo = rete_image_new (50, 40, 3, NULL);
  nan_photo->data[77] = NAN;
  ReteFovParams ok, level_high, level_negative, rim_negative, rim_nan;
  rete_fov_params_init (&ok);
  level_high = level_negative = rim_negative = rim_nan = ok;
  level_high.threshold = 1.0;
  level_negative.threshold = -0.1;
  rim_negative.erode_rim = -2;
  rim_nan.erode_rim = NAN;
  struct {
    const char *what;
    const ReteImage *photo;
    const ReteFovParams *params;
    int code;
  } cases[] = {
    { "no photograph", NULL, &ok, RETE_ERROR_INVALID_ARGUMENT },
    { "two channels", two, &ok, RETE_ERROR_INVALID_ARGUMENT },
    { "NaN", nan_photo, &ok, RETE_ERROR_NOT_FINITE },
    { "level 1", photo, &level_high, RETE_ERROR_INVALID_ARGUMENT },
    { "level -0.1", photo, &level_negative, RETE_ERROR_INVALID_ARGUMENT },
    { "rim -2", photo, &rim_negative, RETE_ERROR_INVALID_ARGUMENT },
    { "rim NaN", photo, &rim_nan, RETE_ERROR_INVALID_ARGUMENT },
  };
  for (gsize i = 0; i < G_N_ELEMENTS (cases); i++)
    {
      GError *error = NULL;
      g_assert_null (rete_fov_detect (cases[i].photo, cases[i].params, &error));
      g_assert_error (error, RETE_VESSEL_ERROR, cases[i].code);
      g_test_message ("%s: %s", cases[i].what, error->message);
      g_error_free (error);
    }
}

/* ---- CHASE_DB1 ---- */

static void
test_chase_db1 (void)
{
  g_autofree char *dir = rete_test_data_file ("chase_db1/images");
  if (dir == NULL)
    return;
  double worst = 1.0, sum = 0;
  int n = 0;
  for (int k = 1; k <= 10; k++)
    for (int side = 0; side < 2; side++)
      {
        g_autofree char *name = g_strdup_printf ("Image_%02d%c", k, side ? 'R' : 'L');
        g_autofree char *photo_path = g_strdup_printf ("%s/%s.jpg", dir, name);
        g_autofree char *mask_path = g_strdup_printf ("%s/../mask/%s.png", dir, name);
        if (!g_file_test (photo_path, G_FILE_TEST_EXISTS))
          continue;
        GError *error = NULL;
        g_autoptr (ReteImage) photo = rete_io_load (photo_path, &error);
        g_assert_no_error (error);
        g_autoptr (ReteImage) reference = rete_io_load_grey (mask_path, &error);
        g_assert_no_error (error);
        g_autoptr (ReteImage) fov = rete_fov_detect (photo, NULL, &error);
        g_assert_no_error (error);
        double dice = rete_mask_dice (fov, reference, &error);
        g_assert_no_error (error);
        g_test_message ("CHASE_DB1 %s: Dice %.4f (FOV %" G_GSIZE_FORMAT " pixels, mask %"
                        G_GSIZE_FORMAT ")", name, dice, rete_mask_count (fov),
                        rete_mask_count (reference));
        assert_one_region_without_holes (fov);
        worst = MIN (worst, dice);
        sum += dice;
        n++;
      }
  if (n == 0)
    {
      g_test_skip ("no CHASE_DB1 photographs in ../shared/data/chase_db1/images");
      return;
    }
  g_test_message ("CHASE_DB1: %d photographs, Dice mean %.4f, lowest %.4f (floor %.3f)", n,
                  sum / n, worst, CHASE_DICE_FLOOR);
  g_assert_cmpfloat (worst, >=, CHASE_DICE_FLOOR);
}

/* ---- erosion ---- */

/* Brute force: a pixel stays when no outside pixel of the frame lies within the disc. */
static ReteImage *
erode_naive (const ReteImage *mask, double radius)
{
  ReteImage *out = rete_image_new_like (mask, 1, NULL);
  int w = mask->width, h = mask->height, r = (int) floor (radius);
  for (int y = 0; y < h; y++)
    for (int x = 0; x < w; x++)
      {
        gboolean keep = mask->data[(gsize) y * w + x] > 0.5f;
        for (int dy = -r; dy <= r && keep; dy++)
          for (int dx = -r; dx <= r && keep; dx++)
            {
              int sx = x + dx, sy = y + dy;
              if (dx * dx + dy * dy > radius * radius || sx < 0 || sy < 0 || sx >= w || sy >= h)
                continue;
              keep = mask->data[(gsize) sy * w + sx] > 0.5f;
            }
        out->data[(gsize) y * w + x] = keep;
      }
  return out;
}

static ReteImage *
blobby_mask (int w, int h)
{
  ReteImage *mask = rete_image_new (w, h, 1, NULL);
  for (int y = 0; y < h; y++)
    for (int x = 0; x < w; x++)
      {
        double d = hypot (x - 0.45 * w, y - 0.55 * h) / (0.42 * w);
        gboolean in = d < 1.0 + 0.1 * sin (atan2 (y - 0.55 * h, x - 0.45 * w) * 5);
        in &= !(hypot (x - 0.5 * w, y - 0.5 * h) < 6); /* a hole */
        in |= x > w - 12 && y < 20; /* a corner patch at the frame */
        mask->data[(gsize) y * w + x] = in;
      }
  mask->data[(gsize) 5 * w + 5] = 1.0f; /* a lone pixel */
  return mask;
}

static const double erode_radii[] = { 0.0, 1.0, 1.5, 2.0, 3.7, 5.0, 8.2 };

static void
test_erode_matches_brute_force (void)
{
  g_autoptr (ReteImage) mask = blobby_mask (97, 83);
  for (gsize k = 0; k < G_N_ELEMENTS (erode_radii); k++)
    {
      g_autoptr (ReteImage) fast = rete_fov_erode (mask, erode_radii[k], NULL);
      g_autoptr (ReteImage) slow = erode_naive (mask, erode_radii[k]);
      gsize where;
      double diff = rete_test_max_abs_diff (fast->data, slow->data, rete_image_n_pixels (mask),
                                            &where);
      g_test_message ("radius %.1f: %" G_GSIZE_FORMAT " pixels kept, largest difference %g",
                      erode_radii[k], rete_mask_count (fast), diff);
      g_assert_cmpfloat (diff, ==, 0.0);
    }
}

static void
test_erode_matches_scipy (void)
{
  g_autoptr (ReteImage) mask = blobby_mask (160, 140);
  g_autofree char *in = rete_test_tmp_path ("erode-in.npy");
  g_autofree char *out = rete_test_tmp_path ("erode-out.npy");
  g_assert_true (rete_test_write_image_npy (in, mask, NULL));
  for (gsize k = 0; k < G_N_ELEMENTS (erode_radii); k++)
    {
      g_autofree char *radius = g_strdup_printf ("%.17g", erode_radii[k]);
      GError *error = NULL;
      gboolean skipped = FALSE;
      g_autofree char *said = rete_test_python ("ref_fov_erode.py", &skipped, &error, in, out,
                                                radius, NULL);
      if (skipped)
        {
          g_test_skip (error->message);
          g_error_free (error);
          return;
        }
      g_assert_no_error (error);
      g_autoptr (ReteImage) reference = rete_test_read_image_npy (out, &error);
      g_assert_no_error (error);
      g_autoptr (ReteImage) ours = rete_fov_erode (mask, erode_radii[k], NULL);
      gsize where;
      double diff = rete_test_max_abs_diff (ours->data, reference->data,
                                            rete_image_n_pixels (mask), &where);
      g_test_message ("radius %.1f against scipy.ndimage.binary_erosion: largest difference %g "
                      "(tolerance 0: exact)", erode_radii[k], diff);
      g_assert_cmpfloat (diff, ==, 0.0);
    }
}

static void
test_erode_thread_count (void)
{
  g_autoptr (ReteImage) mask = blobby_mask (211, 150);
  int saved = rete_thread_count ();
  rete_set_thread_count (1);
  g_autoptr (ReteImage) one = rete_fov_erode (mask, 6.5, NULL);
  rete_set_thread_count (3);
  g_autoptr (ReteImage) three = rete_fov_erode (mask, 6.5, NULL);
  rete_set_thread_count (saved);
  gsize size = rete_image_n_pixels (mask) * sizeof (float);
  g_assert_cmpmem (one->data, size, three->data, size);
}

static void
test_erode_bad_input (void)
{
  g_autoptr (ReteImage) colour = rete_image_new (10, 10, 3, NULL);
  g_autoptr (ReteImage) mask = rete_image_new (10, 10, 1, NULL);
  GError *error = NULL;
  g_assert_null (rete_fov_erode (colour, 2.0, &error));
  g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT);
  g_test_message ("%s", error->message);
  g_clear_error (&error);
  g_assert_null (rete_fov_erode (mask, -1.0, &error));
  g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT);
  g_test_message ("%s", error->message);
  g_clear_error (&error);
  g_assert_null (rete_fov_erode (NULL, 1.0, &error));
  g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT);
  g_clear_error (&error);
}

/* ---- counts and Dice ---- */

static void
test_dice (void)
{
  g_autoptr (ReteImage) a = rete_image_new (10, 10, 1, NULL);
  g_autoptr (ReteImage) b = rete_image_new (10, 10, 1, NULL);
  g_assert_cmpfloat (rete_mask_dice (a, b, NULL), ==, 1.0); /* both empty */
  for (int i = 0; i < 40; i++)
    a->data[i] = 1.0f;
  for (int i = 20; i < 80; i++)
    b->data[i] = 1.0f;
  g_assert_cmpuint (rete_mask_count (a), ==, 40);
  /* 2 |A∩B| / (|A| + |B|) = 2 × 20 / (40 + 60) */
  g_assert_cmpfloat_with_epsilon (rete_mask_dice (a, b, NULL), 0.4, 1e-12);
  g_autoptr (ReteImage) c = rete_image_new (10, 11, 1, NULL);
  GError *error = NULL;
  g_assert_cmpfloat (rete_mask_dice (a, c, &error), ==, -1.0);
  g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_SIZE_MISMATCH);
  g_test_message ("%s", error->message);
  g_clear_error (&error);
}

int
main (int argc, char **argv)
{
  rete_io_init (); /* before g_test_init, which makes GEGL's start-up warnings fatal */
  g_test_init (&argc, &argv, NULL);
  for (gsize i = 0; i < G_N_ELEMENTS (synthetic_cases); i++)
    {
      g_autofree char *path = g_strdup_printf ("/fov/detect/synthetic/%s",
                                               synthetic_cases[i].name);
      g_test_add_data_func (path, &synthetic_cases[i], test_synthetic);
    }
  g_test_add_func ("/fov/detect/grey-and-rgba", test_grey_and_rgba);
  g_test_add_func ("/fov/detect/black-frame", test_black_frame);
  g_test_add_func ("/fov/detect/lit-frame", test_lit_frame);
  g_test_add_func ("/fov/detect/given-level-and-rim", test_given_level_and_rim);
  g_test_add_func ("/fov/detect/bad-input", test_detect_bad_input);
  g_test_add_func ("/fov/detect/chase-db1", test_chase_db1);
  g_test_add_func ("/fov/erode/matches-brute-force", test_erode_matches_brute_force);
  g_test_add_func ("/fov/erode/matches-scipy", test_erode_matches_scipy);
  g_test_add_func ("/fov/erode/same-for-any-thread-count", test_erode_thread_count);
  g_test_add_func ("/fov/erode/bad-input", test_erode_bad_input);
  g_test_add_func ("/fov/dice", test_dice);
  return g_test_run ();
}
