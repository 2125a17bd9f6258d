/* matched_kernel.c — the oriented kernels of the Gaussian matched filter (Chaudhuri et al.,
 * IEEE TMI 8(3), 1989, eq. 3-6) and of its first-derivative-of-Gaussian companion (Zhang et al.,
 * Pattern Recognition 43, 2010, eq. 3), and the checks of their parameters. The filtering
 * itself is in matched.c.
 *
 * In coordinates rotated by theta_k = k pi / n,
 *   u = x cos theta + y sin theta (across the vessel), v = -x sin theta + y cos theta (along),
 * the neighbourhood N = { |u| <= 3 sigma, |v| <= L / 2 } of integer offsets, and
 *   K_k(x, y) = -exp (-u^2 / (2 sigma^2)) on N, minus its mean over N, 0 elsewhere;
 *   F_k(x, y) = -u / (sqrt (2 pi) sigma^3) exp (-u^2 / (2 sigma^2)) on N, minus its mean (0).
 * Both are scaled to unit energy (sum of squares 1), so that responses at different sigma and
 * orientations compare fairly (the matched-filter criterion).
 */
#include "filters_private.h"

#include <math.h>

void
rete_matched_params_init (ReteMatchedParams *params)
{
  params->sigma = 4;   /* tuned on CHASE_DB1 (999x960): tests/CHASE-CLASSICAL.md */
  params->length = 21;
  params->n_orientations = 12;
  params->use_fdog = FALSE;
  params->fdog_window = 31;
  params->fdog_c = 2.3;
}

gboolean
rete_matched_check (const ReteMatchedParams *p, GError **error)
{
  const char *what = NULL;
  if (p == NULL)
    what = "no parameters were given; start from rete_matched_params_init ()";
  else if (!(isfinite (p->sigma) && p->sigma > 0 && p->sigma <= 20))
    what = "sigma must be above 0 and at most 20 pixels (4 suits 1000-pixel photographs)";
  else if (!(isfinite (p->length) && p->length >= 1 && p->length <= 100))
    what = "the length L must be between 1 and 100 pixels (9 as in Chaudhuri 1989)";
  else if (p->n_orientations < 1 || p->n_orientations > 180)
    what = "the number of orientations must be between 1 and 180 (12 as in Chaudhuri 1989)";
  else if (p->use_fdog && (p->fdog_window < 3 || p->fdog_window % 2 == 0 || p->fdog_window > 1001))
    what = "the FDOG mean window must be odd, between 3 and 1001 pixels (31 is usual)";
  else if (p->use_fdog && !(isfinite (p->fdog_c) && p->fdog_c >= 0))
    what = "c of the threshold c mean(H) must be 0 or above (2 to 3 in Zhang 2010)";
  if (what == NULL)
    return TRUE;
  if (p == NULL)
    g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT, "matched filter: %s", what);
  else
    g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                 "matched filter: %s (sigma %g, L %g, %d orientations, window %d, c %g)", what,
                 p->sigma, p->length, p->n_orientations, p->fdog_window, p->fdog_c);
  return FALSE;
}

int
rete_matched_half (const ReteMatchedParams *p)
{
  return (int) floor (hypot (3 * p->sigma, p->length / 2) + 1e-9);
}

void
rete_matched_build_kernel (const ReteMatchedParams *p, int k, gboolean fdog, int half, float *k_out)
{
  int side = 2 * half + 1;
  double theta = G_PI * k / p->n_orientations, co = cos (theta), si = sin (theta);
  double s = p->sigma, sum = 0;
  int count = 0;
  double *value = g_new0 (double, side * side);
  gboolean *inside = g_new0 (gboolean, side * side);
  for (int y = -half; y <= half; y++)
    for (int x = -half; x <= half; x++)
      {
        double u = x * co + y * si, v = -x * si + y * co;
        if (fabs (u) > 3 * s + 1e-9 || fabs (v) > p->length / 2 + 1e-9)
          continue;
        int i = (y + half) * side + x + half;
        double g = exp (-u * u / (2 * s * s));
        value[i] = fdog ? -u / (sqrt (2 * G_PI) * s * s * s) * g : -g;
        inside[i] = TRUE;
        sum += value[i];
        count++;
      }
  double mean = sum / MAX (count, 1), energy = 0;
  for (int i = 0; i < side * side; i++)
    if (inside[i])
      {
        value[i] -= mean;
        energy += value[i] * value[i];
      }
  double scale = energy > 0 ? 1 / sqrt (energy) : 0;
  for (int i = 0; i < side * side; i++)
    k_out[i] = (float) (value[i] * scale);
  g_free (value);
  g_free (inside);
}

float *
rete_matched_kernel (const ReteMatchedParams *params, int k, gboolean fdog, int *size,
                     GError **error)
{
  if (!rete_matched_check (params, error))
    return NULL;
  if (k < 0 || k >= params->n_orientations)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "matched filter: orientation %d does not exist; give 0 to %d", k,
                   params->n_orientations - 1);
      return NULL;
    }
  int half = rete_matched_half (params);
  float *kernel = g_new (float, (2 * half + 1) * (2 * half + 1));
  rete_matched_build_kernel (params, k, fdog, half, kernel);
  *size = 2 * half + 1;
  return kernel;
}
