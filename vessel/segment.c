/* segment.c — figures of one vessel segment: calibre, arc/chord tortuosity, curvature.
 *
 * Calibre from the distance transform along the skeleton. The Euclidean distance D to the
 * nearest background pixel centre is, across a vessel, a tent: slope 1 on either side of the
 * centre line, apex A = w/2 + g for a vessel w pixels wide, where g is the gap between the
 * vessel's outline and the first background pixel centre: 1/2 pixel for a vessel along a
 * pixel axis, shrinking towards 0 at general angles. The skeleton pixel need not sit on the
 * apex (on a vessel of even width it is half a pixel off), so the apex is fitted from three
 * samples across the vessel, at the skeleton pixel (M) and one pixel either side along the
 * normal (L, R; bilinear in D): for a tent of slope 1 sampled at -1, 0, +1 around a point
 * within half a pixel of the apex, A = (L + R)/2 + 1, kept within [M, M + 1/2]. The width is
 * then 2 (A - g) with g = 3/8, between the two extremes: on digital bands 2 to 20 pixels wide
 * at angles 0–85° this stays within ±0.5 px of the band's area per unit length, where g = 1/2
 * falls up to 0.7 px short at oblique angles (measured while designing this: tests/
 * test_measure.c holds the check). Pixels near the ends of the segment are left out (as many
 * as the larger of the vessel's mean half width and D at that end, at most a quarter of the
 * path at each end), because at a junction D grows inside the knot and at an end point it
 * falls off the tip.
 *
 * Length: of the centre line after the smoothing below (the 8-connected chain of 1 and √2 steps
 * would overestimate curves by about 5%), with σ at most a sixth of the chain's length; the
 * chain's own length for paths under 3 px. The curvature index needs at least 3σ of path.
 *
 * Tortuosity: the arc/chord ratio (path length over the distance between its ends), and the
 * total squared curvature per unit length ∫κ² ds / L, both among the measures of Hart,
 * Goldbaum, Côté, Kube and Nelson, "Measurement and classification of retinal vascular
 * tortuosity", Int. J. Med. Inform. 53:239–252, 1999 (from memory: their τ_1 is arc/chord − 1
 * and the squared-curvature measures are normalised by arc length or chord). Curvature of the
 * pixel path is taken after resampling it at unit arc length and smoothing x(s), y(s) with a
 * Gaussian (σ pixels; odd reflection at open ends, so that straight ends stay straight),
 *   κ = (x' y'' - y' x'') / (x'² + y'²)^{3/2}  (central differences).
 */
#include "measure_private.h"

#include <math.h>

#define OUTLINE_GAP 0.375 /* pixels between the outline and the first background centre */

static double
bilinear (const float *d, int w, int h, double x, double y)
{
  x = CLAMP (x, 0, w - 1);
  y = CLAMP (y, 0, h - 1);
  int x0 = (int) floor (x), y0 = (int) floor (y);
  int x1 = MIN (x0 + 1, w - 1), y1 = MIN (y0 + 1, h - 1);
  double fx = x - x0, fy = y - y0;
  double a = d[(gsize) y0 * w + x0], b = d[(gsize) y0 * w + x1];
  double c = d[(gsize) y1 * w + x0], e = d[(gsize) y1 * w + x1];
  return (a * (1 - fx) + b * fx) * (1 - fy) + (c * (1 - fx) + e * fx) * fy;
}

static void
calibre (ReteSegment *seg, const int *xs, const int *ys, int n, const float *d, int w, int h)
{
  if (d == NULL)
    return;
  int lo = 0, hi = n;
  if (!seg->closed && n >= 3)
    {
      double half = 0; /* the vessel's mean half width along the path */
      int finite = 0;
      for (int i = 0; i < n; i++)
        {
          double v = d[(gsize) ys[i] * w + xs[i]];
          if (isfinite (v))
            {
              half += v;
              finite++;
            }
        }
      half = finite > 0 ? half / finite : 0;
      double d0 = d[(gsize) ys[0] * w + xs[0]], d1 = d[(gsize) ys[n - 1] * w + xs[n - 1]];
      int cut0 = isfinite (d0) ? (int) ceil (MAX (d0, half)) : n / 4;
      int cut1 = isfinite (d1) ? (int) ceil (MAX (d1, half)) : n / 4;
      lo = MIN (cut0, n / 4);
      hi = n - MIN (cut1, n / 4);
      if (hi <= lo)
        {
          lo = 0;
          hi = n;
        }
    }
  const int k = 3; /* tangent from the pixels k steps either way */
  double sum = 0, sum2 = 0;
  int used = 0;
  for (int i = lo; i < hi; i++)
    {
      int a = i - k, b = i + k;
      if (seg->closed)
        {
          a = (a + n) % n;
          b = b % n;
        }
      else
        {
          a = MAX (a, 0);
          b = MIN (b, n - 1);
        }
      double tx = xs[b] - xs[a], ty = ys[b] - ys[a], norm = hypot (tx, ty);
      double m = d[(gsize) ys[i] * w + xs[i]];
      if (!isfinite (m))
        continue;
      double apex = m;
      if (norm > 0)
        {
          double nx = -ty / norm, ny = tx / norm;
          double l = bilinear (d, w, h, xs[i] - nx, ys[i] - ny);
          double r = bilinear (d, w, h, xs[i] + nx, ys[i] + ny);
          apex = CLAMP ((l + r) / 2 + 1, m, m + 0.5);
        }
      double width = 2 * (apex - OUTLINE_GAP);
      sum += width;
      sum2 += width * width;
      used++;
    }
  if (used == 0)
    return;
  seg->calibre_mean = sum / used;
  seg->calibre_sd = used > 1 ? sqrt (MAX (0, (sum2 - sum * sum / used) / (used - 1))) : 0;
}

/* The path resampled evenly along its chain length, at a spacing of at most one pixel:
 * m points into rx, ry (allocated); *spacing gets the spacing. */
static int
resample (const int *xs, const int *ys, int n, gboolean closed, double **rx, double **ry,
          double *spacing)
{
  int steps = closed ? n : n - 1;
  double *along = g_new (double, steps + 1); /* chain length at path point j */
  along[0] = 0;
  for (int j = 0; j < steps; j++)
    {
      int next = (j + 1) % n;
      along[j + 1] = along[j] + hypot (xs[next] - xs[j], ys[next] - ys[j]);
    }
  double total = along[steps];
  /* a ring's last sample would repeat its first */
  int m = closed ? MAX ((int) ceil (total), 3) : (int) ceil (total) + 1;
  *spacing = closed ? total / m : total / (m - 1);
  *rx = g_new (double, m);
  *ry = g_new (double, m);
  int j = 0;
  for (int t = 0; t < m; t++)
    {
      double target = t * *spacing;
      while (j < steps - 1 && along[j + 1] < target)
        j++;
      int next = (j + 1) % n;
      double step = along[j + 1] - along[j];
      double f = step > 0 ? CLAMP ((target - along[j]) / step, 0, 1) : 0;
      (*rx)[t] = xs[j] + f * (xs[next] - xs[j]);
      (*ry)[t] = ys[j] + f * (ys[next] - ys[j]);
    }
  g_free (along);
  return m;
}

/* Sample i of v (m samples) past the ends: periodic when closed, odd reflection when open. */
static double
extended (const double *v, int m, int i, gboolean closed)
{
  if (closed)
    return v[((i % m) + m) % m];
  if (i < 0)
    return 2 * v[0] - extended (v, m, -i, closed);
  if (i >= m)
    return 2 * v[m - 1] - extended (v, m, 2 * (m - 1) - i, closed);
  return v[i];
}

static void
curvature (ReteSegment *seg, const int *xs, const int *ys, int n, double sigma)
{
  /* short paths are smoothed less (a ring of a few pixels would shrink to a point), and get no
   * curvature index: it needs a path of at least 3 σ */
  double chain = seg->length, sigma_used = MIN (sigma, chain / 6);
  if (n < 3 || sigma_used < 0.5)
    return;
  gboolean with_index = chain >= 3 * sigma;
  double *rx, *ry, spacing;
  int m = resample (xs, ys, n, seg->closed, &rx, &ry, &spacing);
  double sigma_samples = sigma_used / spacing;
  int r = (int) ceil (3 * sigma_samples);
  double *kernel = g_new (double, 2 * r + 1), total = 0;
  for (int t = -r; t <= r; t++)
    total += kernel[t + r] = exp (-0.5 * t * t / (sigma_samples * sigma_samples));
  double *sx = g_new (double, m + 2), *sy = g_new (double, m + 2);
  for (int i = -1; i <= m; i++)
    {
      double ax = 0, ay = 0;
      for (int t = -r; t <= r; t++)
        {
          ax += kernel[t + r] * extended (rx, m, i + t, seg->closed);
          ay += kernel[t + r] * extended (ry, m, i + t, seg->closed);
        }
      sx[i + 1] = ax / total;
      sy[i + 1] = ay / total;
    }
  /* length of the smoothed centre line: the chain of 1 and √2 steps overestimates the length
   * of a digital curve by up to 8% (about 5% on average over directions; Kulpa 1977, from
   * memory), the smoothed line does not, and keeps straight lines exact */
  double length = 0;
  for (int i = 1; i < m; i++)
    length += hypot (sx[i + 1] - sx[i], sy[i + 1] - sy[i]);
  if (seg->closed)
    length += hypot (sx[1] - sx[m], sy[1] - sy[m]);
  seg->length = length;
  double integral = 0;
  for (int i = 1; i <= m; i++)
    {
      if (!seg->closed && (i == 1 || i == m))
        continue; /* the end samples have one-sided neighbours only */
      double dx = (sx[i + 1] - sx[i - 1]) / 2, dy = (sy[i + 1] - sy[i - 1]) / 2;
      double ddx = sx[i + 1] - 2 * sx[i] + sx[i - 1], ddy = sy[i + 1] - 2 * sy[i] + sy[i - 1];
      double speed = hypot (dx, dy);
      if (speed < 1e-9)
        continue;
      double kappa = (dx * ddy - dy * ddx) / (speed * speed * speed);
      integral += kappa * kappa * speed;
    }
  if (with_index)
    seg->curvature_index = integral / seg->length;
  g_free (kernel);
  g_free (sx);
  g_free (sy);
  g_free (rx);
  g_free (ry);
}

void
rete_segment_figures (ReteSegment *seg, const int *xs, const int *ys, int n,
                      const float *distance, int width, int height, double curvature_sigma)
{
  seg->chord = seg->closed ? 0 : hypot (xs[n - 1] - xs[0], ys[n - 1] - ys[0]);
  curvature (seg, xs, ys, n, curvature_sigma); /* also the smoothed length */
  seg->tortuosity = (!seg->closed && seg->chord >= 1) ? seg->length / seg->chord : NAN;
  calibre (seg, xs, ys, n, distance, width, height);
}
