/* synth.c — synthetic colour fundus photographs with exact ground truth: parameters, the
 * layout of the eye, and putting it all together. The vessel tree is grown in synth_tree.c
 * and drawn in synth_render.c; the fundus, disc, macula, lesions and illumination are painted
 * in synth_paint.c; JPEG-like blocks come from synth_jpeg.c.
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
  synth_draw_lesions (&params, &layout, lesion_weight, truth->lesions->data);

  synth_paint_photo (&params, &layout, opacity, artery, lesion_weight, truth->photo);
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
