/* bench_measure.c — time of rete_measure (all measures: distance transform, box counting of
 * map and skeleton, thinning, pruning, graph, calibre, tortuosity, curvature, and the skeleton
 * and point-type images) on an HRF manual vessel map (Budai et al. 2013; 3504×2336, 8.2
 * megapixels, thresholded at 0.5), on the same map at half size (every other pixel: a quarter
 * of the pixels) and at double size (each pixel 2×2: four times the pixels), to show that the
 * time grows linearly with the pixels; plus the two pieces that have a Python reference,
 * thinning and the exact distance transform, on the full map. Median of the runs.
 *
 *   bench-measure [map.png] [runs]    (default: $RETE_DATA_DIR/hrf_manual/01_h.png, 5 runs)
 * prints `RESULT measure-all <w>x<h> <ms>`, `RESULT skeleton <w>x<h> <ms>`,
 * `RESULT distance <w>x<h> <ms>` and the peak memory of the process. bench/ref_measure.py
 * times skimage.morphology.skeletonize and scipy.ndimage.distance_transform_edt on the same
 * map (RESULT skeleton-skimage / distance-scipy).
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <sys/resource.h>

#include "rete_io.h"
#include "rete_measure.h"

static int
compare_doubles (const void *a, const void *b)
{
  double x = *(const double *) a, y = *(const double *) b;
  return (x > y) - (x < y);
}

typedef enum { ALL, SKELETON, DISTANCE } What;

static double
median_ms (const ReteImage *map, What what, int runs)
{
  double *times = g_new (double, runs);
  ReteMeasureParams params;
  rete_measure_params_init (&params);
  for (int r = 0; r < runs; r++)
    {
      GError *error = NULL;
      gint64 start = g_get_monotonic_time ();
      if (what == ALL)
        {
          ReteMeasurements *m = rete_measure (map, NULL, &params, &error);
          if (m == NULL)
            {
              fprintf (stderr, "bench-measure: %s\n", error->message);
              exit (1);
            }
          rete_measurements_free (m);
        }
      else
        {
          ReteImage *out = what == SKELETON ? rete_skeletonize (map, &error)
                                            : rete_distance_transform_image (map, &error);
          if (out == NULL)
            {
              fprintf (stderr, "bench-measure: %s\n", error->message);
              exit (1);
            }
          rete_image_free (out);
        }
      times[r] = (g_get_monotonic_time () - start) / 1000.0;
    }
  qsort (times, runs, sizeof (double), compare_doubles);
  double median = times[runs / 2];
  g_free (times);
  return median;
}

static ReteImage *
rescale (const ReteImage *map, int factor_up, int factor_down)
{
  int w = map->width * factor_up / factor_down, h = map->height * factor_up / factor_down;
  ReteImage *out = rete_image_new (w, h, 1, NULL);
  if (out == NULL)
    return NULL;
  for (int y = 0; y < h; y++)
    for (int x = 0; x < w; x++)
      out->data[(gsize) y * w + x] =
        map->data[(gsize) (y * factor_down / factor_up) * map->width + x * factor_down / factor_up];
  return out;
}

int
main (int argc, char **argv)
{
  const char *data = g_getenv ("RETE_DATA_DIR");
  g_autofree char *fallback = g_build_filename (data ? data : "../shared/data", "hrf_manual",
                                                "01_h.png", NULL);
  const char *path = argc > 1 ? argv[1] : fallback;
  int runs = argc > 2 ? atoi (argv[2]) : 5;
  if (runs < 1)
    runs = 1;
  rete_io_init ();
  GError *error = NULL;
  ReteImage *map = rete_io_load_grey (path, &error);
  if (map == NULL)
    {
      fprintf (stderr, "bench-measure: %s (give an HRF manual map, or set RETE_DATA_DIR)\n",
               error->message);
      return 1;
    }
  rete_image_binarise (map, 0.5f);
  ReteImage *half = rescale (map, 1, 2), *twice = rescale (map, 2, 1);
  const ReteImage *sizes[] = { half, map, twice };
  double ms[3];
  for (int i = 0; i < 3; i++)
    {
      if (sizes[i] == NULL)
        continue;
      median_ms (sizes[i], ALL, 1); /* warm the caches and the allocator */
      ms[i] = median_ms (sizes[i], ALL, runs);
      printf ("RESULT measure-all %dx%d %.1f\n", sizes[i]->width, sizes[i]->height, ms[i]);
      fflush (stdout);
    }
  printf ("RESULT skeleton %dx%d %.1f\n", map->width, map->height, median_ms (map, SKELETON, runs));
  printf ("RESULT distance %dx%d %.1f\n", map->width, map->height, median_ms (map, DISTANCE, runs));
  /* time per pixel relative to the full map: 1 for linear growth */
  for (int i = 0; i < 3; i++)
    if (sizes[i] != NULL)
      printf ("# %dx%d: %.1f ns per pixel (full map %.1f)\n", sizes[i]->width, sizes[i]->height,
              1e6 * ms[i] / rete_image_n_pixels (sizes[i]), 1e6 * ms[1] / rete_image_n_pixels (map));
  struct rusage usage;
  getrusage (RUSAGE_SELF, &usage);
  printf ("# peak memory of the process %.0f MB (the double-size map alone is %.0f MB of floats)\n",
          usage.ru_maxrss / 1024.0, twice ? rete_image_n_pixels (twice) * 4.0 / (1 << 20) : 0.0);
  rete_image_free (half);
  rete_image_free (twice);
  rete_image_free (map);
  return 0;
}
