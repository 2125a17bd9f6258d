/* bench_clahe.c — speed of rete_clahe (CLAHE, Zuiderveld 1994; skimage's defaults: contextual
 * regions of 1/8 of each side, clip limit 0.01, 256 bins) on a CHASE_DB1-sized (999×960) and an
 * HRF-sized (3504×2336) grey picture, whole image (no field of view) and inside a circular FOV.
 * Prints `RESULT clahe <w>x<h> <median ms>` (and `RESULT clahe-fov ...`); bench/ref_clahe.py
 * times OpenCV and skimage on the same picture (same formula, same 8-bit levels).
 *   build/bench/bench-clahe [runs]     (median of runs after one warm-up; by default 31 runs
 *                                      at 999×960, where one takes a few milliseconds and the
 *                                      machine's noise is largest, and 9 at 3504×2336)
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include "rete_preprocess.h"
#include "bench_common.h"

/* The picture of bench/ref_clahe.py: smooth light, two dark curved lines, a bright disc,
 * a fixed pseudo-random texture; 8-bit levels. */
static ReteImage *
make_picture (int width, int height)
{
  ReteImage *image = rete_image_new (width, height, 1, NULL);
  for (int y = 0; y < height; y++)
    for (int x = 0; x < width; x++)
      {
        double u = (double) x / width, v = (double) y / height;
        double value = 0.25 + 0.35 * u * (1 - v) + 0.15 * sin (6 * u + 3 * v);
        double d = fabs (v - 0.5 - 0.25 * sin (5 * u));
        value -= 0.2 * exp (-d * d * 4e4);
        double r2 = (u - 0.7) * (u - 0.7) + (v - 0.3) * (v - 0.3);
        value += 0.3 * exp (-r2 / 0.004);
        value += 0.03 * sin (x * 1.7 + y * 0.3) * cos (y * 2.3 - x * 0.1);
        value = CLAMP (value, 0.0, 1.0);
        image->data[(gsize) y * width + x] = (float) (round (value * 255) / 255);
      }
  return image;
}

static double
median_ms (const ReteImage *grey, const ReteImage *fov, int runs)
{
  ReteClaheParams params;
  rete_clahe_params_init (&params);
  double *ms = g_new (double, runs);
  for (int k = -1; k < runs; k++) /* k = -1: warm-up */
    {
      GError *error = NULL;
      gint64 start = g_get_monotonic_time ();
      ReteImage *out = rete_clahe (grey, fov, &params, &error);
      gint64 stop = g_get_monotonic_time ();
      if (out == NULL)
        {
          fprintf (stderr, "bench_clahe: %s\n", error->message);
          exit (1);
        }
      rete_image_free (out);
      if (k >= 0)
        ms[k] = (stop - start) / 1000.0;
    }
  double median = bench_median (ms, runs);
  g_free (ms);
  return median;
}

int
main (int argc, char **argv)
{
  int asked = argc > 1 ? atoi (argv[1]) : 0;
  static const int sizes[][2] = { { 999, 960 }, { 3504, 2336 } };
  for (gsize s = 0; s < G_N_ELEMENTS (sizes); s++)
    {
      int w = sizes[s][0], h = sizes[s][1];
      int runs = asked > 0 ? asked : w < 2000 ? 31 : 9;
      fprintf (stderr, "bench_clahe: %dx%d, %d threads, median of %d runs\n", w, h,
               rete_thread_count (), runs);
      ReteImage *grey = make_picture (w, h);
      printf ("RESULT clahe %dx%d %.2f\n", w, h, median_ms (grey, NULL, runs));
      fflush (stdout);
      ReteImage *fov = rete_image_new (w, h, 1, NULL);
      for (int y = 0; y < h; y++)
        for (int x = 0; x < w; x++)
          fov->data[(gsize) y * w + x] = hypot (x - w / 2.0, y - h / 2.0) < 0.46 * MAX (w, h);
      printf ("RESULT clahe-fov %dx%d %.2f\n", w, h, median_ms (grey, fov, runs));
      fflush (stdout);
      rete_image_free (fov);
      rete_image_free (grey);
    }
  return 0;
}
