/* bench_measure.c — time of rete_measure (all measures: distance transform, box counting of
 * map and skeleton, thinning, pruning, graph, calibre, tortuosity, curvature, and the skeleton
 * and point-type images) on an HRF manual vessel map (Budai et al. 2013; 3504×2336, 8.2
 * megapixels, thresholded at 0.5), on its central quarter and on the map tiled 2×2 (33
 * megapixels), to show that the time grows linearly with the pixels at a given vessel width
 * (thinning also grows with the width of the widest vessel: its iterations peel one pixel a
 * side each); plus the two pieces that have a Python reference,
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
#include <time.h>

#include "rete_io.h"
#include "rete_measure.h"
#include "bench_common.h"

typedef enum { ALL, SKELETON, DISTANCE } What;

static double
cpu_ms (void)
{
  struct timespec t;
  clock_gettime (CLOCK_PROCESS_CPUTIME_ID, &t);
  return t.tv_sec * 1e3 + t.tv_nsec / 1e6;
}

/* Median wall time of the runs; *cpu (may be NULL) gets the median CPU time of the process
 * (all threads), which a busy machine disturbs less. */
static double
median_ms (const ReteImage *map, What what, int runs, double *cpu)
{
  double *times = g_new (double, runs), *cpus = g_new (double, runs);
  ReteMeasureParams params;
  rete_measure_params_init (&params);
  for (int r = 0; r < runs; r++)
    {
      GError *error = NULL;
      gint64 start = g_get_monotonic_time ();
      double cpu_start = cpu_ms ();
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
      cpus[r] = cpu_ms () - cpu_start;
    }
  double median = bench_median (times, runs);
  if (cpu != NULL)
    *cpu = bench_median (cpus, runs);
  g_free (times);
  g_free (cpus);
  return median;
}

/* The central quarter (half the width and height, where the vessels are as dense as on the
 * whole map), or the map tiled 2×2: a quarter and four times the pixels with vessels of the
 * same widths, so that only the pixel count changes. */
static ReteImage *
quarter (const ReteImage *map)
{
  ReteRect rect = { map->width / 4, map->height / 4, map->width / 2, map->height / 2 };
  return rete_image_crop (map, &rect, NULL);
}

static ReteImage *
tiled (const ReteImage *map)
{
  ReteImage *out = rete_image_new (2 * map->width, 2 * map->height, 1, NULL);
  if (out == NULL)
    return NULL;
  for (int ty = 0; ty < 2; ty++)
    for (int tx = 0; tx < 2; tx++)
      rete_image_paste (out, map, tx * map->width, ty * map->height, NULL);
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
  ReteImage *half = quarter (map), *twice = tiled (map);
  const ReteImage *sizes[] = { half, map, twice };
  double ms[3], cpu[3];
  for (int i = 0; i < 3; i++)
    {
      if (sizes[i] == NULL)
        continue;
      median_ms (sizes[i], ALL, 1, NULL); /* warm the caches and the allocator */
      ms[i] = median_ms (sizes[i], ALL, runs, &cpu[i]);
      printf ("RESULT measure-all %dx%d %.1f\n", sizes[i]->width, sizes[i]->height, ms[i]);
      printf ("# measure-all %dx%d: CPU time %.1f ms (all threads)\n", sizes[i]->width,
              sizes[i]->height, cpu[i]);
      fflush (stdout);
    }
  double c;
  printf ("RESULT skeleton %dx%d %.1f\n", map->width, map->height,
          median_ms (map, SKELETON, runs, &c));
  printf ("# skeleton: CPU time %.1f ms\n", c);
  printf ("RESULT distance %dx%d %.1f\n", map->width, map->height,
          median_ms (map, DISTANCE, runs, &c));
  printf ("# distance: CPU time %.1f ms\n", c);
  /* time per pixel relative to the full map: 1 for linear growth */
  for (int i = 0; i < 3; i++)
    if (sizes[i] != NULL)
      printf ("# %dx%d: %.1f ns per pixel wall, %.1f CPU (full map %.1f, %.1f)\n",
              sizes[i]->width, sizes[i]->height, 1e6 * ms[i] / rete_image_n_pixels (sizes[i]),
              1e6 * cpu[i] / rete_image_n_pixels (sizes[i]),
              1e6 * ms[1] / rete_image_n_pixels (map), 1e6 * cpu[1] / rete_image_n_pixels (map));
  struct rusage usage;
  getrusage (RUSAGE_SELF, &usage);
  printf ("# peak memory of the process %.0f MB (the tiled map alone is %.0f MB of floats)\n",
          usage.ru_maxrss / 1024.0, twice ? rete_image_n_pixels (twice) * 4.0 / (1 << 20) : 0.0);
  rete_image_free (half);
  rete_image_free (twice);
  rete_image_free (map);
  return 0;
}
