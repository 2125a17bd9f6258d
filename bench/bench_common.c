/* bench_common.c — see bench_common.h. */
#include "bench_common.h"

#include <stdlib.h>

static int
compare_doubles (const void *a, const void *b)
{
  double x = *(const double *) a, y = *(const double *) b;
  return (x > y) - (x < y);
}

double
bench_median (double *values, int n)
{
  qsort (values, n, sizeof (double), compare_doubles);
  return n % 2 ? values[n / 2] : 0.5 * (values[n / 2 - 1] + values[n / 2]);
}

double
bench_unet_forward_macs_per_pixel (const ReteUnetConfig *config, double *first_conv)
{
  int L = config->levels, F = config->base_filters, k = config->convs_per_block;
  double macs = 0.0;
  for (int l = 0; l < L; l++)
    {
      double C = F << l, px = 1.0 / (1 << (2 * l));
      double c_in = l == 0 ? config->in_channels : C / 2;
      for (int j = 0; j < k; j++)
        macs += 9.0 * (j == 0 ? c_in : C) * C * px;
    }
  for (int l = L - 2; l >= 0; l--)
    {
      double C = F << l, px = 1.0 / (1 << (2 * l));
      macs += 4.0 * (2 * C) * C * px / 4; /* input at a quarter of the level's pixels */
      for (int j = 0; j < k; j++)
        macs += 9.0 * (j == 0 ? 2 * C : C) * C * px;
    }
  macs += F; /* head */
  if (first_conv != NULL)
    *first_conv = 9.0 * config->in_channels * F;
  return macs;
}
