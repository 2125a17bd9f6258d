/* synth.c — synthetic colour fundus photographs with exact ground truth: parameters, the
 * layout of the eye, the fundus colour and its illumination, and putting it all together.
 * The vessel tree is grown in synth_tree.c, drawn in synth_render.c; JPEG-like blocks come
 * from synth_jpeg.c.
 *
 * The look follows what any fundus photograph shows (common practice, no particular source):
 * an orange-red fundus in a circular aperture on black; the optic disc, bright and
 * yellowish, a little taller than wide, about 2.5 disc diameters nasal of the fovea and
 * slightly above it; a darker macula; vessels darkest in the green channel, veins darker and
 * wider than arteries; light falling off towards the rim. Colours are set near the means
 * measured in CHASE_DB1 inside its masks (R 0.57–0.91, G 0.23–0.30, B 0.03–0.05; measured
 * with /usr/bin/python3 and cv2 on Image_01L, 05R, 09L). The photograph is smooth; the truth
 * (vessels, FOV) is rendered without anti-aliasing so that it is exact. */
#include "synth_private.h"

#include <string.h>

void
rete_synth_params_init (ReteSynthParams *params)
{
  memset (params, 0, sizeof *params);
  params->seed = 1;
  params->width = 565;
  params->height = 584;
  params->aperture_radius = 0.95;
  params->n_trees = 4;
  params->max_vessel_width = 0.0;
  params->min_vessel_width = 1.0;
  params->illumination = 0.4;
  params->noise = 0.01;
  params->jpeg_artefacts = FALSE;
  params->n_lesions = 0;
  params->jpeg_quality = 60;
}

static gboolean
check_range (const char *name, double value, double low, double high, GError **error)
{
  if (value >= low && value <= high) /* also FALSE for NaN */
    return TRUE;
  g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
               "synthetic photograph: %s is %g; it must lie between %g and %g", name, value, low,
               high);
  return FALSE;
}

gboolean
rete_synth_params_check (const ReteSynthParams *params, GError **error)
{
  if (params == NULL)
    {
      g_set_error_literal (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                           "synthetic photograph: no parameters given");
      return FALSE;
    }
  if (!check_range ("width", params->width, 32, RETE_MAX_SIDE, error)
      || !check_range ("height", params->height, 32, RETE_MAX_SIDE, error))
    return FALSE;
  if ((gsize) params->width * params->height > RETE_MAX_PIXELS)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "synthetic photograph: %d×%d is larger than Rete accepts (%" G_GSIZE_FORMAT
                   " pixels at most)", params->width, params->height, (gsize) RETE_MAX_PIXELS);
      return FALSE;
    }
  if (!check_range ("aperture radius (fraction of half the shorter side)",
                    params->aperture_radius, 0.2, 1.5, error)
      || !check_range ("number of vessel trees", params->n_trees, 0, 32, error)
      || !check_range ("narrowest vessel width (pixels)", params->min_vessel_width, 0.5, 20.0,
                       error)
      || !check_range ("sensor noise", params->noise, 0.0, 0.5, error)
      || !check_range ("illumination", params->illumination, 0.0, 1.0, error)
      || !check_range ("number of lesions", params->n_lesions, 0, 1000, error)
      || !check_range ("JPEG quality", params->jpeg_quality, 1, 100, error))
    return FALSE;
  if (params->max_vessel_width != 0.0
      && !check_range ("widest vessel width (pixels; 0 = automatic)", params->max_vessel_width,
                       params->min_vessel_width, 100.0, error))
    return FALSE;
  return TRUE;
}

static void
make_layout (const ReteSynthParams *params, SynthLayout *layout)
{
  SynthRng rng = synth_rng_stream (params->seed, SYNTH_STREAM_LAYOUT, 0);
  layout->width = params->width;
  layout->height = params->height;
  layout->centre_x = params->width / 2.0;
  layout->centre_y = params->height / 2.0;
  layout->radius = params->aperture_radius * MIN (params->width, params->height) / 2.0;
  double s = layout->radius;
  double side = synth_rng_uniform (&rng) < 0.5 ? 1.0 : -1.0; /* right or left eye */
  layout->disc_x = layout->centre_x + side * s * synth_rng_range (&rng, 0.32, 0.40);
  layout->disc_y = layout->centre_y + s * synth_rng_range (&rng, -0.06, 0.04);
  layout->disc_radius = s * synth_rng_range (&rng, 0.11, 0.13);
  layout->macula_x = layout->disc_x - side * s * synth_rng_range (&rng, 0.58, 0.66);
  layout->macula_y = layout->disc_y + s * synth_rng_range (&rng, 0.02, 0.08);
  double light = synth_rng_range (&rng, 0.0, 2.0 * G_PI);
  layout->light_x = cos (light);
  layout->light_y = sin (light);
}

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
static void
draw_lesions (const ReteSynthParams *params, const SynthLayout *layout, float *weight,
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
rete_synth_truth_clear (ReteSynthTruth *truth)
{
  g_clear_pointer (&truth->photo, rete_image_free);
  g_clear_pointer (&truth->vessels, rete_image_free);
  g_clear_pointer (&truth->fov, rete_image_free);
  g_clear_pointer (&truth->widths, rete_image_free);
  g_clear_pointer (&truth->arteries, rete_image_free);
  g_clear_pointer (&truth->lesions, rete_image_free);
  memset (truth, 0, sizeof *truth);
}

gboolean
rete_synth_fundus_truth (const ReteSynthParams *params_in, ReteSynthTruth *truth, GError **error)
{
  memset (truth, 0, sizeof *truth);
  if (!rete_synth_params_check (params_in, error))
    return FALSE;
  ReteSynthParams params = *params_in;
  SynthLayout layout;
  make_layout (&params, &layout);
  if (params.max_vessel_width == 0.0)
    params.max_vessel_width = MAX (12.0 * layout.radius / 456.0, 2.0 * params.min_vessel_width);

  const int w = params.width, h = params.height;
  if (!(truth->photo = rete_image_new (w, h, 3, error))
      || !(truth->vessels = rete_image_new (w, h, 1, error))
      || !(truth->fov = rete_image_new (w, h, 1, error))
      || !(truth->widths = rete_image_new (w, h, 1, error))
      || !(truth->arteries = rete_image_new (w, h, 1, error))
      || !(truth->lesions = rete_image_new (w, h, 1, error)))
    {
      rete_synth_truth_clear (truth);
      return FALSE;
    }
  const gsize n = (gsize) w * h;
  float *opacity = g_try_new0 (float, n);
  guint8 *artery = g_try_new0 (guint8, n);
  float *lesion_weight = g_try_new0 (float, n);
  if (!opacity || !artery || !lesion_weight)
    {
      g_free (opacity);
      g_free (artery);
      g_free (lesion_weight);
      rete_synth_truth_clear (truth);
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_NO_MEMORY,
                   "not enough memory for a %d×%d synthetic photograph", w, h);
      return FALSE;
    }

  GArray *pieces = g_array_new (FALSE, FALSE, sizeof (SynthPiece));
  synth_grow_trees (&params, &layout, pieces);
  synth_render_vessels (pieces, w, h, truth->vessels->data, truth->widths->data, opacity,
                        artery);
  draw_lesions (&params, &layout, lesion_weight, truth->lesions->data);

  ComposeJob job = { &params, &layout, { { 0 } }, opacity, artery, lesion_weight, truth->photo };
  noise_grid_init (&job.grids[0], &params, 0.25 * layout.radius, 0);
  noise_grid_init (&job.grids[1], &params, 0.08 * layout.radius, 1);
  noise_grid_init (&job.grids[2], &params, 0.025 * layout.radius, 2);
  rete_parallel_for (h, compose_rows, &job);
  for (int g = 0; g < 3; g++)
    g_free (job.grids[g].values);
  if (params.jpeg_artefacts)
    synth_jpeg_quantise (truth->photo, params.jpeg_quality);

  /* Exact truth: the FOV is every pixel whose centre lies in the aperture circle; vessels,
   * widths and arteries only inside it. */
  for (int y = 0; y < h; y++)
    for (int x = 0; x < w; x++)
      {
        gsize k = (gsize) y * w + x;
        double ax = x + 0.5 - layout.centre_x, ay = y + 0.5 - layout.centre_y;
        gboolean inside = ax * ax + ay * ay <= layout.radius * layout.radius;
        truth->fov->data[k] = inside ? 1.0f : 0.0f;
        if (!inside)
          {
            truth->vessels->data[k] = 0.0f;
            truth->lesions->data[k] = 0.0f;
          }
        if (truth->vessels->data[k] == 0.0f)
          truth->widths->data[k] = 0.0f;
        truth->arteries->data[k] = truth->vessels->data[k] > 0.0f && artery[k] ? 1.0f : 0.0f;
      }

  truth->aperture_x = layout.centre_x;
  truth->aperture_y = layout.centre_y;
  truth->aperture_radius = layout.radius;
  truth->disc_x = layout.disc_x;
  truth->disc_y = layout.disc_y;
  truth->disc_radius = layout.disc_radius;
  truth->fovea_x = layout.macula_x;
  truth->fovea_y = layout.macula_y;
  truth->n_pieces = (int) pieces->len;
  g_array_free (pieces, TRUE);
  g_free (opacity);
  g_free (artery);
  g_free (lesion_weight);
  return TRUE;
}

gboolean
rete_synth_fundus (const ReteSynthParams *params, ReteImage **photo, ReteImage **vessels,
                   ReteImage **fov, GError **error)
{
  ReteSynthTruth truth;
  if (!rete_synth_fundus_truth (params, &truth, error))
    return FALSE;
  if (photo)
    *photo = g_steal_pointer (&truth.photo);
  if (vessels)
    *vessels = g_steal_pointer (&truth.vessels);
  if (fov)
    *fov = g_steal_pointer (&truth.fov);
  rete_synth_truth_clear (&truth);
  return TRUE;
}
