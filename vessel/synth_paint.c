/* synth_paint.c — painting the synthetic photograph: the orange-red fundus with a mottled
 * choroidal texture (three octaves of smooth value noise), the darker macula and fovea, the
 * bright optic disc and its cup, bright lesions, the vessels' absorption (from
 * synth_render.c), uneven illumination and vignetting, the soft rim of the aperture and sensor
 * noise. Colours are near the means measured in CHASE_DB1 (see synth.c). Each row is painted
 * independently with its own random stream, so the result does not depend on the threads. */
#include "synth_private.h"

/* Smooth value noise: random values on a coarse grid, interpolated with smoothstep weights.
 * Three octaves make the mottled choroidal background. */
typedef struct {
  int cols, rows;
  double cell;  /* pixels per grid cell */
  float *values; /* in [-1, 1] */
} NoiseGrid;

static void
noise_grid_init (NoiseGrid *grid, const ReteSynthParams *params, double cell, int octave)
{
  SynthRng rng = synth_rng_stream (params->seed, SYNTH_STREAM_TEXTURE, octave);
  grid->cell = MAX (cell, 2.0);
  grid->cols = (int) ceil (params->width / grid->cell) + 2;
  grid->rows = (int) ceil (params->height / grid->cell) + 2;
  grid->values = g_new (float, (gsize) grid->cols * grid->rows);
  for (gsize i = 0; i < (gsize) grid->cols * grid->rows; i++)
    grid->values[i] = (float) synth_rng_range (&rng, -1.0, 1.0);
}

static double
noise_at (const NoiseGrid *grid, double x, double y)
{
  double gx = x / grid->cell, gy = y / grid->cell;
  int i = (int) gx, j = (int) gy;
  double fx = gx - i, fy = gy - j;
  fx = fx * fx * (3.0 - 2.0 * fx);
  fy = fy * fy * (3.0 - 2.0 * fy);
  const float *v = grid->values + (gsize) j * grid->cols + i;
  double top = v[0] + fx * (v[1] - v[0]);
  double bottom = v[grid->cols] + fx * (v[grid->cols + 1] - v[grid->cols]);
  return top + fy * (bottom - top);
}

/* Bright lesions: small clusters of round spots, exudate-like, half of them around the
 * macula. Soft weights for the photograph in `weight`, exact truth in `truth`. */
void
synth_draw_lesions (const ReteSynthParams *params, const SynthLayout *layout, float *weight,
              float *truth)
{
  SynthRng rng = synth_rng_stream (params->seed, SYNTH_STREAM_LESION, 0);
  const double s = layout->radius;
  for (int l = 0; l < params->n_lesions; l++)
    {
      double x, y;
      for (int attempt = 0;; attempt++)
        {
          double cx = l % 2 == 0 ? layout->macula_x : layout->centre_x;
          double reach = l % 2 == 0 ? 0.4 * s : 0.85 * s;
          double angle = synth_rng_range (&rng, 0.0, 2.0 * G_PI);
          double radius = reach * sqrt (synth_rng_uniform (&rng));
          x = cx + radius * cos (angle);
          y = (l % 2 == 0 ? layout->macula_y : layout->centre_y) + radius * sin (angle);
          double ax = x - layout->centre_x, ay = y - layout->centre_y;
          double dx = x - layout->disc_x, dy = y - layout->disc_y;
          if ((sqrt (ax * ax + ay * ay) < 0.85 * s
               && sqrt (dx * dx + dy * dy) > 1.6 * layout->disc_radius)
              || attempt > 20)
            break;
        }
      int n_spots = 1 + (int) (synth_rng_uniform (&rng) * 4.0);
      for (int k = 0; k < n_spots; k++)
        {
          double r = s * synth_rng_range (&rng, 0.004, 0.016);
          double sx = x + synth_rng_range (&rng, -3.0, 3.0) * r;
          double sy = y + synth_rng_range (&rng, -3.0, 3.0) * r;
          int x0 = MAX (0, (int) floor (sx - r - 2)), x1 = MIN (params->width - 1, (int) ceil (sx + r + 2));
          int y0 = MAX (0, (int) floor (sy - r - 2)), y1 = MIN (params->height - 1, (int) ceil (sy + r + 2));
          for (int py = y0; py <= y1; py++)
            for (int px = x0; px <= x1; px++)
              {
                double d = hypot (px + 0.5 - sx, py + 0.5 - sy);
                gsize i = (gsize) py * params->width + px;
                float w = (float) CLAMP (r + 0.75 - d, 0.0, 1.0);
                weight[i] = MAX (weight[i], w);
                if (d <= r)
                  truth[i] = 1.0f;
              }
        }
    }
}

typedef struct {
  const ReteSynthParams *params;
  const SynthLayout *layout;
  NoiseGrid grids[3];
  const float *opacity;
  const guint8 *artery;
  const float *lesion;
  ReteImage *photo;
} ComposeJob;

static void
compose_rows (int first, int last, gpointer user_data)
{
  ComposeJob *job = user_data;
  const SynthLayout *L = job->layout;
  const ReteSynthParams *params = job->params;
  const double s = L->radius, rd = L->disc_radius;
  const int width = params->width;
  float *planes[3] = { rete_image_plane (job->photo, 0), rete_image_plane (job->photo, 1),
                       rete_image_plane (job->photo, 2) };
  static const double fundus[3] = { 0.80, 0.30, 0.07 };
  static const double disc[3] = { 0.99, 0.80, 0.45 };
  static const double cup[3] = { 1.00, 0.93, 0.72 };
  static const double lesion[3] = { 0.97, 0.86, 0.40 };
  static const double vein_depth[3] = { 0.32, 0.60, 0.55 };
  static const double artery_depth[3] = { 0.16, 0.40, 0.35 };
  /* The cup sits a little towards the fovea inside the disc. */
  double cup_x = L->disc_x + 0.2 * rd * (L->macula_x > L->disc_x ? 1.0 : -1.0);
  double cup_y = L->disc_y;

  for (int y = first; y < last; y++)
    {
      SynthRng rng = synth_rng_stream (params->seed, SYNTH_STREAM_NOISE, (guint64) y);
      for (int x = 0; x < width; x++)
        {
          gsize k = (gsize) y * width + x;
          double px = x + 0.5, py = y + 0.5;
          double ax = px - L->centre_x, ay = py - L->centre_y;
          double r = sqrt (ax * ax + ay * ay);
          double rim = CLAMP (s - r + 0.5, 0.0, 1.0);
          double c[3] = { 0.0, 0.0, 0.0 };
          if (rim > 0.0)
            {
              double t1 = noise_at (&job->grids[0], px, py);
              double t2 = noise_at (&job->grids[1], px, py);
              double t3 = noise_at (&job->grids[2], px, py);
              double texture = 0.07 * t1 + 0.04 * t2 + 0.02 * t3;
              c[0] = fundus[0] * (1.0 + texture);
              c[1] = fundus[1] * (1.0 + 1.6 * texture);
              c[2] = fundus[2] * (1.0 + 1.6 * texture);

              double mx = px - L->macula_x, my = py - L->macula_y;
              double dm2 = (mx * mx + my * my) / (s * s);
              double macula = exp (-dm2 / (2.0 * 0.14 * 0.14));
              double fovea = exp (-dm2 / (2.0 * 0.035 * 0.035));
              c[0] *= (1.0 - 0.22 * macula) * (1.0 - 0.15 * fovea);
              c[1] *= (1.0 - 0.38 * macula) * (1.0 - 0.25 * fovea);
              c[2] *= (1.0 - 0.38 * macula) * (1.0 - 0.25 * fovea);

              double dx = (px - L->disc_x) / rd, dy = (py - L->disc_y) / (1.08 * rd);
              double dd = sqrt (dx * dx + dy * dy);
              double halo = 1.0 + 0.12 * exp (-dd * dd / (2.0 * 1.6 * 1.6));
              double wdisc = CLAMP ((1.1 - dd) / 0.2, 0.0, 1.0);
              wdisc = 0.92 * wdisc * wdisc * (3.0 - 2.0 * wdisc);
              double cx = (px - cup_x) / (0.45 * rd), cy = (py - cup_y) / (0.5 * rd);
              double wcup = CLAMP ((1.1 - sqrt (cx * cx + cy * cy)) / 0.5, 0.0, 1.0);
              wcup *= wcup;
              double wl = 0.9 * job->lesion[k];
              double a = job->opacity[k];
              const double *depth = job->artery[k] ? artery_depth : vein_depth;
              double illumination = (1.0 - params->illumination * 0.6 * pow (r / s, 3.0))
                                    * (1.0 + params->illumination * 0.35
                                       * (ax * L->light_x + ay * L->light_y) / s);
              for (int ch = 0; ch < 3; ch++)
                {
                  double v = c[ch] * halo;
                  v = v * (1.0 - wdisc) + disc[ch] * wdisc;
                  v = v * (1.0 - wcup) + cup[ch] * wcup;
                  v = v * (1.0 - wl) + lesion[ch] * wl;
                  /* On the pale disc vessels keep their dark red (stronger absorption
                   * relative to the bright background). */
                  v *= 1.0 - a * MIN (0.95, depth[ch] * (1.0 + 0.5 * wdisc));
                  c[ch] = v * illumination * rim;
                }
            }
          for (int ch = 0; ch < 3; ch++)
            {
              /* The black surround of a camera is not exactly 0. */
              double v = c[ch] + 0.012 * (1.0 - rim) + params->noise * synth_rng_normal (&rng);
              planes[ch][k] = (float) CLAMP (v, 0.0, 1.0);
            }
        }
    }
}

void
synth_paint_photo (const ReteSynthParams *params, const SynthLayout *layout,
                   const float *opacity, const guint8 *artery, const float *lesion_weight,
                   ReteImage *photo)
{
  ComposeJob job = { params, layout, { { 0 } }, opacity, artery, lesion_weight, photo };
  noise_grid_init (&job.grids[0], params, 0.25 * layout->radius, 0);
  noise_grid_init (&job.grids[1], params, 0.08 * layout->radius, 1);
  noise_grid_init (&job.grids[2], params, 0.025 * layout->radius, 2);
  rete_parallel_for (params->height, compose_rows, &job);
  for (int g = 0; g < 3; g++)
    g_free (job.grids[g].values);
}
