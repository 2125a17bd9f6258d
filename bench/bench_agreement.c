/* bench_agreement.c — time of rete_agreement_compute (ROC AUC, average precision, rates,
 * best thresholds and a 1000-point ROC curve in one call) on an 8-megapixel map (3504x2336,
 * the size of an HRF photograph) and a CHASE_DB1-sized one (999x960), with float scores and
 * with 8-bit-quantised scores, inside a round field of view. Median of the runs.
 *
 *   bench-agreement [runs]     (default 9)
 * prints `RESULT auc <w>x<h> <ms>` and `RESULT auc-quantised <w>x<h> <ms>`.
 * bench/ref_agreement.py builds the same data (same generator, bit for bit) and times
 * sklearn.metrics.roc_auc_score on it.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <time.h>

#include "rete_agreement.h"
#include "bench_common.h"

/* splitmix64's finaliser (Steele, Lea & Flood, OOPSLA 2014): the same in ref_agreement.py */
static guint64
mix (guint64 z)
{
  z += 0x9E3779B97F4A7C15ull;
  z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9ull;
  z = (z ^ (z >> 27)) * 0x94D049BB133111EBull;
  return z ^ (z >> 31);
}

static double
uniform (guint64 i)
{
  return (double) (mix (i) >> 40) / 16777216.0;
}

/* ~12% vessel; scores 0.62 +- 0.3 on vessel, 0.38 +- 0.3 elsewhere; the FOV a disc. */
static void
make_data (int width, int height, gboolean quantised, ReteImage **scores, ReteImage **reference,
           ReteImage **mask)
{
  *scores = rete_image_new (width, height, 1, NULL);
  *reference = rete_image_new (width, height, 1, NULL);
  *mask = rete_image_new (width, height, 1, NULL);
  double cx = (width - 1) / 2.0, cy = (height - 1) / 2.0, r = 0.48 * MIN (width, height);
  for (int y = 0; y < height; y++)
    for (int x = 0; x < width; x++)
      {
        guint64 i = (guint64) y * width + x;
        gboolean vessel = uniform (2 * i) < 0.12;
        double s = (vessel ? 0.62 : 0.38) + 0.6 * (uniform (2 * i + 1) - 0.5);
        s = CLAMP (s, 0.0, 1.0);
        if (quantised)
          s = rint (s * 255.0) / 255.0;
        (*scores)->data[i] = (float) s;
        (*reference)->data[i] = vessel;
        (*mask)->data[i] = (x - cx) * (x - cx) + (y - cy) * (y - cy) <= r * r;
      }
}

/* CPU time of the whole process (all threads), ms: on a shared, busy machine the wall time
 * includes waiting for a core; this does not. */
static double
cpu_ms (void)
{
  struct timespec t;
  clock_gettime (CLOCK_PROCESS_CPUTIME_ID, &t);
  return t.tv_sec * 1e3 + t.tv_nsec / 1e6;
}

static void
bench (int width, int height, gboolean quantised, int runs)
{
  ReteImage *scores, *reference, *mask;
  make_data (width, height, quantised, &scores, &reference, &mask);
  double *ms = g_new (double, runs), *cpu = g_new (double, runs);
  double auc = NAN;
  for (int k = 0; k < runs; k++)
    {
      GError *error = NULL;
      double c0 = cpu_ms ();
      gint64 t0 = g_get_monotonic_time ();
      ReteAgreement *a = rete_agreement_compute (scores, reference, mask, 0.5, 1000, &error);
      ms[k] = (g_get_monotonic_time () - t0) / 1000.0;
      cpu[k] = cpu_ms () - c0;
      if (a == NULL)
        {
          fprintf (stderr, "bench-agreement: %s\n", error->message);
          exit (1);
        }
      auc = a->auc;
      rete_agreement_free (a);
    }
  double median = bench_median (ms, runs), median_cpu = bench_median (cpu, runs);
  printf ("# %dx%d %s: AUC %.12f, runs %d, fastest %.2f ms, slowest %.2f ms, median CPU time "
          "%.2f ms (all threads)\n", width, height, quantised ? "8-bit scores" : "float scores",
          auc, runs, ms[0], ms[runs - 1], median_cpu);
  printf ("RESULT %s %dx%d %.2f\n", quantised ? "auc-quantised" : "auc", width, height,
          median);
  fflush (stdout);
  g_free (ms);
  g_free (cpu);
  rete_image_free (scores);
  rete_image_free (reference);
  rete_image_free (mask);
}

int
main (int argc, char **argv)
{
  int runs = argc > 1 ? atoi (argv[1]) : 9;
  runs = MAX (runs, 1);
  printf ("# rete_agreement_compute, %d threads, median of %d runs\n", rete_thread_count (), runs);
  static const int sizes[][2] = { { 3504, 2336 }, { 999, 960 } };
  for (gsize s = 0; s < G_N_ELEMENTS (sizes); s++)
    for (int q = 0; q < 2; q++)
      bench (sizes[s][0], sizes[s][1], q, runs);
  return 0;
}
