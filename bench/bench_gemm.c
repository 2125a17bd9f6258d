/* bench_gemm.c — the machine's single-precision matrix-product peak as OpenBLAS reaches it: C
 * (n×n) = A (n×n) × B (n×n) by cblas_sgemm on 2 threads (the cores of the machine the benches
 * were written on), median wall-clock milliseconds over the timed runs (after one untimed).
 * 2·n³ FLOP per product; the GFLOP/s of bench-nn-train and bench-nn-infer are fractions of this.
 *   bench-gemm [n [repeats [threads]]]       (default 2048 7 2)
 * prints: RESULT sgemm-peak <n> <ms>   and   # sgemm-peak: <GFLOP/s> GFLOP/s on <threads> threads */
#include <stdio.h>
#include <stdlib.h>

#include <cblas.h>
#include <glib.h>
#include "bench_common.h"

/* OpenBLAS's own call (its cblas.h declares it; named here so that another CBLAS still builds) */
void openblas_set_num_threads (int num_threads);

int
main (int argc, char **argv)
{
  int n = argc > 1 ? atoi (argv[1]) : 2048;
  int repeats = argc > 2 ? atoi (argv[2]) : 7;
  int threads = argc > 3 ? atoi (argv[3]) : 2;
  n = CLAMP (n, 16, 8192);
  repeats = CLAMP (repeats, 1, 100);
  threads = CLAMP (threads, 1, 64);
  openblas_set_num_threads (threads);
  gsize nn = (gsize) n * n;
  float *a = g_new (float, nn), *b = g_new (float, nn), *c = g_new0 (float, nn);
  for (gsize i = 0; i < nn; i++)
    {
      a[i] = (float) ((i * 7919) % 1000) / 1000.0f - 0.5f;
      b[i] = (float) ((i * 104729) % 1000) / 1000.0f - 0.5f;
    }
  double *ms = g_new (double, repeats);
  for (int r = -1; r < repeats; r++)
    {
      gint64 t0 = g_get_monotonic_time ();
      cblas_sgemm (CblasRowMajor, CblasNoTrans, CblasNoTrans, n, n, n, 1.0f, a, n, b, n, 0.0f, c,
                   n);
      if (r >= 0)
        ms[r] = (g_get_monotonic_time () - t0) / 1000.0;
    }
  double median = bench_median (ms, repeats);
  printf ("RESULT sgemm-peak %d %.1f\n", n, median);
  printf ("# sgemm-peak: %.1f GFLOP/s on %d threads (2·n³ FLOP, median of %d; c[0] = %g)\n",
          2.0 * n * n * (double) n / (median * 1e6), threads, repeats, c[0]);
  g_free (a); g_free (b); g_free (c); g_free (ms);
  return 0;
}
