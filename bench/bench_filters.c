/* bench_filters.c — speed of the classical vessel filters on a CHASE_DB1-sized (999×960) and an
 * HRF-sized (3504×2336) grey picture (the same picture bench/ref_filters.py makes).
 *   RESULT frangi <w>x<h> <ms>           rete_frangi_raw, default scales, with skimage 0.19's
 *                                         Hessian (RETE_HESSIAN_BLUR_THEN_DIFFERENCES): the same
 *                                         output as skimage.filters.frangi (tests/test_filters.c)
 *   RESULT frangi-derivatives ...         rete_frangi_raw with the default Gaussian derivatives
 *   RESULT frangi-map ...                 rete_vessel_frangi (default, inside a circular FOV)
 *   RESULT matched ...                    rete_matched_raw, default sigma/L, 12 orientations
 *   RESULT matched-fdog-map ...           rete_vessel_matched with MF-FDOG
 *   RESULT line-map ...                   rete_vessel_line, defaults
 *   RESULT frangi-1-thread / matched-1-thread: frangi and matched again on one thread (skimage
 *   and numpy run on one core; OpenCV uses both).
 *   RESULT cpu-frangi / cpu-matched: the same one-thread runs in CPU time of the process
 *   (CLOCK_PROCESS_CPUTIME_ID), paired with ref_filters.py's cpu-frangi-skimage and
 *   cpu-matched-opencv (time.process_time, OpenCV on one thread): on a machine shared with
 *   other jobs, CPU time compares the work done where wall time mostly measures the queue.
 * Each figure is the median of [runs] runs after one warm-up.
 *   build/bench/bench-filters [runs]     (default 5)
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>
#include "rete_filters.h"
#include "bench_common.h"

/* c given to both sides of the skimage comparison (bench/ref_filters.py: FRANGI_C) */
#define FRANGI_C 0.05

/* The picture of bench/ref_filters.py: smooth shading, dark curved vessels of several widths,
 * a bright disc, a fixed texture; 8-bit levels. */
static ReteImage *
make_picture (int width, int height)
{
  ReteImage *image = rete_image_new (width, height, 1, NULL);
  for (int y = 0; y < height; y++)
    for (int x = 0; x < width; x++)
      {
        double u = (double) x / width, v = (double) y / height;
        double value = 0.45 + 0.2 * u * (1 - v) + 0.1 * sin (6 * u + 3 * v);
        for (int k = 0; k < 4; k++)
          {
            double d = fabs (v - 0.2 - 0.2 * k - 0.08 * sin ((4 + k) * u)) * height;
            double s = 1.0 + k;
            value -= 0.15 * exp (-d * d / (2 * s * s));
          }
        double r2 = (u - 0.7) * (u - 0.7) + (v - 0.3) * (v - 0.3);
        value += 0.3 * exp (-r2 / 0.004);
        value += 0.02 * sin (x * 1.7 + y * 0.3) * cos (y * 2.3 - x * 0.1);
        value = CLAMP (value, 0.0, 1.0);
        image->data[(gsize) y * width + x] = (float) (round (value * 255) / 255);
      }
  return image;
}

typedef enum { FRANGI_SKIMAGE, FRANGI_DERIVATIVES, FRANGI_MAP, MATCHED, FDOG_MAP, LINE_MAP } Job;

static ReteImage *
run_job (Job job, const ReteImage *grey, const ReteImage *fov, GError **error)
{
  ReteFrangiParams fp;
  ReteMatchedParams mp;
  rete_frangi_params_init (&fp);
  rete_matched_params_init (&mp);
  switch (job)
    {
    case FRANGI_SKIMAGE:
      fp.hessian = RETE_HESSIAN_BLUR_THEN_DIFFERENCES;
      fp.c = FRANGI_C; /* skimage needs an explicit gamma */
      return rete_frangi_raw (grey, &fp, error);
    case FRANGI_DERIVATIVES:
      return rete_frangi_raw (grey, &fp, error);
    case FRANGI_MAP:
      return rete_vessel_frangi (grey, fov, &fp, error);
    case MATCHED:
      return rete_matched_raw (grey, &mp, error);
    case FDOG_MAP:
      mp.use_fdog = TRUE;
      return rete_vessel_matched (grey, fov, &mp, error);
    case LINE_MAP:
    default:
      return rete_vessel_line (grey, fov, NULL, error);
    }
}

static double
now_ms (gboolean cpu)
{
  struct timespec t;
  clock_gettime (cpu ? CLOCK_PROCESS_CPUTIME_ID : CLOCK_MONOTONIC, &t);
  return t.tv_sec * 1e3 + t.tv_nsec / 1e6;
}

/* Median over runs of the wall time (cpu = FALSE) or of the process's CPU time. */
static double
median_ms (Job job, const ReteImage *grey, const ReteImage *fov, int runs, gboolean cpu)
{
  double *ms = g_new (double, runs);
  for (int k = -1; k < runs; k++) /* k = -1: warm-up */
    {
      GError *error = NULL;
      double start = now_ms (cpu);
      ReteImage *out = run_job (job, grey, fov, &error);
      double stop = now_ms (cpu);
      if (out == NULL)
        {
          fprintf (stderr, "bench_filters: %s\n", error->message);
          exit (1);
        }
      rete_image_free (out);
      if (k >= 0)
        ms[k] = stop - start;
    }
  double median = bench_median (ms, runs);
  g_free (ms);
  return median;
}

int
main (int argc, char **argv)
{
  int runs = argc > 1 ? atoi (argv[1]) : 5;
  if (runs < 1)
    runs = 5;
  ReteFrangiParams fp;
  ReteMatchedParams mp;
  rete_frangi_params_init (&fp);
  rete_matched_params_init (&mp);
  fprintf (stderr, "bench_filters: %d threads, median of %d runs; Frangi scales %g..%g step %g, "
           "matched sigma %g L %g\n", rete_thread_count (), runs, fp.sigma_min, fp.sigma_max,
           fp.sigma_step, mp.sigma, mp.length);
  static const int sizes[][2] = { { 999, 960 }, { 3504, 2336 } };
  static const struct { Job job; const char *name; } jobs[] = {
    { FRANGI_SKIMAGE, "frangi" }, { FRANGI_DERIVATIVES, "frangi-derivatives" },
    { FRANGI_MAP, "frangi-map" }, { MATCHED, "matched" }, { FDOG_MAP, "matched-fdog-map" },
    { LINE_MAP, "line-map" },
  };
  for (gsize s = 0; s < G_N_ELEMENTS (sizes); s++)
    {
      int w = sizes[s][0], h = sizes[s][1];
      ReteImage *grey = make_picture (w, h);
      ReteImage *fov = rete_image_new (w, h, 1, NULL);
      for (int y = 0; y < h; y++)
        for (int x = 0; x < w; x++)
          fov->data[(gsize) y * w + x] = hypot (x - w / 2.0, y - h / 2.0) < 0.48 * MIN (w, h);
      for (gsize j = 0; j < G_N_ELEMENTS (jobs); j++)
        {
          printf ("RESULT %s %dx%d %.2f\n", jobs[j].name, w, h, median_ms (jobs[j].job, grey, fov, runs, FALSE));
          fflush (stdout);
        }
      rete_set_thread_count (1);
      printf ("RESULT frangi-1-thread %dx%d %.2f\n", w, h,
              median_ms (FRANGI_SKIMAGE, grey, fov, runs, FALSE));
      printf ("RESULT matched-1-thread %dx%d %.2f\n", w, h, median_ms (MATCHED, grey, fov, runs, FALSE));
      printf ("RESULT cpu-frangi %dx%d %.2f\n", w, h, median_ms (FRANGI_SKIMAGE, grey, fov, runs, TRUE));
      printf ("RESULT cpu-matched %dx%d %.2f\n", w, h, median_ms (MATCHED, grey, fov, runs, TRUE));
      fflush (stdout);
      rete_set_thread_count (0); /* back to the default */
      rete_image_free (grey);
      rete_image_free (fov);
    }
  return 0;
}
