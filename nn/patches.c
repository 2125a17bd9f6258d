/* patches.c — random training patches cut from (input, annotation, field of view) triples,
 * with the geometric augmentations applied while cutting.
 *
 * Patch-based training of a U-Net on fundus photographs (patches centred inside the field of
 * view, flips and rotations) is common practice since Ronneberger et al. (MICCAI 2015, §3.1:
 * "shift and rotation invariance ... elastic deformations"). A patch is read through one
 * affine map from patch to image coordinates, source = centre + A (u - (P-1)/2), with
 * A = R(theta) R90^k F (optional horizontal flip F, k quarter turns, a small angle theta).
 * Without the small angle the map hits pixel centres exactly and the copy is exact; with it
 * the input is read bilinearly and the annotation and field of view bilinearly then cut at
 * half, so they stay 0/1. Outside the photograph everything reads 0 and lies outside the
 * field of view, which is also how photographs smaller than a patch are padded: the loss
 * ignores those pixels.
 */
#include "rete_train.h"

#include <math.h>
#include <string.h>

struct _RetePatchSampler {
  int n_samples;
  int channels;
  ReteTrainSample *samples;   /* (n_samples) copies of the caller's descriptors */
  guint32 **vessel_index;     /* per sample: indices of vessel pixels inside the FOV */
  gsize *n_vessel;
  guint32 **background_index; /* per sample: indices of background pixels inside the FOV */
  gsize *n_background;
};

void
rete_patch_options_init (RetePatchOptions *options)
{
  options->patch_size = 64;
  options->balance = -1.0;
  options->augment = RETE_AUGMENT_FLIP | RETE_AUGMENT_ROTATE90 | RETE_AUGMENT_ROTATE
                     | RETE_AUGMENT_BRIGHTNESS | RETE_AUGMENT_CONTRAST | RETE_AUGMENT_GAMMA;
  options->max_rotation_degrees = 15.0;
  options->brightness = 0.2;
  options->contrast = 0.2;
  options->gamma = 0.25;
}

gboolean
rete_train_sample_check (const ReteTrainSample *s, int index, int channels, GError **error)
{
  const char *name = s->name != NULL ? s->name : "(unnamed)";
  if (s->input == NULL || s->target == NULL)
    {
      g_set_error (error, RETE_NN_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "training pair %d (%s) has no %s", index + 1, name,
                   s->input == NULL ? "photograph" : "annotation");
      return FALSE;
    }
  if (s->width <= 0 || s->height <= 0 || s->width > RETE_MAX_SIDE || s->height > RETE_MAX_SIDE
      || (gsize) s->width * s->height > RETE_MAX_PIXELS)
    {
      g_set_error (error, RETE_NN_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "training pair %d (%s) is %d×%d pixels: not a size Rete can train on",
                   index + 1, name, s->width, s->height);
      return FALSE;
    }
  if (s->channels != channels)
    {
      g_set_error (error, RETE_NN_ERROR, RETE_ERROR_SIZE_MISMATCH,
                   "training pair %d (%s) has %d input channels but the network takes %d; "
                   "prepare every photograph with the same preprocessing",
                   index + 1, name, s->channels, channels);
      return FALSE;
    }
  gsize n = (gsize) s->width * s->height * s->channels;
  for (gsize i = 0; i < n; i++)
    if (!isfinite (s->input[i]))
      {
        g_set_error (error, RETE_NN_ERROR, RETE_ERROR_NOT_FINITE,
                     "training pair %d (%s): the prepared input holds a value that is not "
                     "finite at position %" G_GSIZE_FORMAT, index + 1, name, i);
        return FALSE;
      }
  return TRUE;
}

void
rete_patch_sampler_free (RetePatchSampler *sampler)
{
  if (sampler == NULL)
    return;
  for (int i = 0; i < sampler->n_samples; i++)
    {
      g_free (sampler->vessel_index[i]);
      g_free (sampler->background_index[i]);
    }
  g_free (sampler->vessel_index);
  g_free (sampler->background_index);
  g_free (sampler->n_vessel);
  g_free (sampler->n_background);
  g_free (sampler->samples);
  g_free (sampler);
}

RetePatchSampler *
rete_patch_sampler_new (const ReteTrainSample *samples, int n_samples, int channels,
                        GError **error)
{
  if (samples == NULL || n_samples <= 0)
    {
      g_set_error (error, RETE_NN_ERROR, RETE_ERROR_EMPTY,
                   "the training set is empty: give at least one photograph with its "
                   "annotation");
      return NULL;
    }
  for (int i = 0; i < n_samples; i++)
    if (!rete_train_sample_check (&samples[i], i, channels, error))
      return NULL;
  RetePatchSampler *sampler = g_new0 (RetePatchSampler, 1);
  sampler->n_samples = n_samples;
  sampler->channels = channels;
  sampler->samples = g_memdup2 (samples, sizeof (ReteTrainSample) * n_samples);
  sampler->vessel_index = g_new0 (guint32 *, n_samples);
  sampler->background_index = g_new0 (guint32 *, n_samples);
  sampler->n_vessel = g_new0 (gsize, n_samples);
  sampler->n_background = g_new0 (gsize, n_samples);
  for (int i = 0; i < n_samples; i++)
    {
      const ReteTrainSample *s = &samples[i];
      gsize n = (gsize) s->width * s->height, nv = 0, nb = 0;
      for (gsize p = 0; p < n; p++)
        if (s->mask == NULL || s->mask[p] >= 0.5f)
          {
            if (s->target[p] >= 0.5f)
              nv++;
            else
              nb++;
          }
      if (nv + nb == 0)
        {
          g_set_error (error, RETE_NN_ERROR, RETE_ERROR_EMPTY,
                       "training pair %d (%s): the field-of-view mask is empty; give the "
                       "right mask or none", i + 1, s->name != NULL ? s->name : "(unnamed)");
          rete_patch_sampler_free (sampler);
          return NULL;
        }
      sampler->vessel_index[i] = g_try_new (guint32, MAX (nv, 1));
      sampler->background_index[i] = g_try_new (guint32, MAX (nb, 1));
      if (sampler->vessel_index[i] == NULL || sampler->background_index[i] == NULL)
        {
          g_set_error (error, RETE_NN_ERROR, RETE_ERROR_NO_MEMORY,
                       "not enough memory to index the training pixels");
          rete_patch_sampler_free (sampler);
          return NULL;
        }
      for (gsize p = 0; p < n; p++)
        if (s->mask == NULL || s->mask[p] >= 0.5f)
          {
            if (s->target[p] >= 0.5f)
              sampler->vessel_index[i][sampler->n_vessel[i]++] = (guint32) p;
            else
              sampler->background_index[i][sampler->n_background[i]++] = (guint32) p;
          }
    }
  return sampler;
}

int
rete_patch_sampler_n_samples (const RetePatchSampler *sampler)
{
  return sampler->n_samples;
}

/* bilinear read of one plane; outside reads 0 */
static inline float
bilinear (const float *plane, int width, int height, double x, double y)
{
  int x0 = (int) floor (x), y0 = (int) floor (y);
  float fx = (float) (x - x0), fy = (float) (y - y0);
  float v[4] = { 0, 0, 0, 0 };
  for (int j = 0; j < 2; j++)
    for (int i = 0; i < 2; i++)
      {
        int xx = x0 + i, yy = y0 + j;
        if (xx >= 0 && yy >= 0 && xx < width && yy < height)
          v[j * 2 + i] = plane[(gsize) yy * width + xx];
      }
  return (1 - fy) * ((1 - fx) * v[0] + fx * v[1]) + fy * ((1 - fx) * v[2] + fx * v[3]);
}

void
rete_patch_draw (const RetePatchSampler *sampler, const RetePatchOptions *options, guint64 seed,
                 float *input, float *target, float *mask)
{
  guint64 rng = seed;
  int P = options->patch_size;
  int index = (int) (rete_rng_uniform (&rng) * sampler->n_samples);
  index = MIN (index, sampler->n_samples - 1);
  const ReteTrainSample *s = &sampler->samples[index];
  gsize nv = sampler->n_vessel[index], nb = sampler->n_background[index];

  /* the patch centre: on a vessel pixel with probability `balance`, else on background;
   * balance < 0 draws uniformly inside the field of view */
  guint32 centre;
  double u = rete_rng_uniform (&rng);
  if (options->balance < 0)
    {
      gsize k = (gsize) (rete_rng_uniform (&rng) * (nv + nb));
      k = MIN (k, nv + nb - 1);
      centre = k < nv ? sampler->vessel_index[index][k] : sampler->background_index[index][k - nv];
    }
  else
    {
      gboolean on_vessel = (u < options->balance && nv > 0) || nb == 0;
      gsize count = on_vessel ? nv : nb;
      gsize k = MIN ((gsize) (rete_rng_uniform (&rng) * count), count - 1);
      centre = on_vessel ? sampler->vessel_index[index][k] : sampler->background_index[index][k];
    }
  int cx = (int) (centre % (guint32) s->width), cy = (int) (centre / (guint32) s->width);
  double half = (P - 1) / 2.0;
  /* continuous centre so that the identity map reads pixels x0 .. x0 + P - 1 exactly */
  double ccx = (cx - P / 2) + half, ccy = (cy - P / 2) + half;

  double a00 = 1, a01 = 0, a10 = 0, a11 = 1;
  double flip_draw = rete_rng_uniform (&rng), turn_draw = rete_rng_uniform (&rng);
  double angle_draw = rete_rng_uniform (&rng);
  if ((options->augment & RETE_AUGMENT_FLIP) && flip_draw < 0.5)
    a00 = -1;
  if (options->augment & RETE_AUGMENT_ROTATE90)
    {
      int k = MIN ((int) (turn_draw * 4), 3);
      for (int t = 0; t < k; t++) /* R90 = [[0,-1],[1,0]] applied on the left */
        {
          double b00 = -a10, b01 = -a11, b10 = a00, b11 = a01;
          a00 = b00; a01 = b01; a10 = b10; a11 = b11;
        }
    }
  gboolean exact = TRUE;
  if ((options->augment & RETE_AUGMENT_ROTATE) && options->max_rotation_degrees > 0)
    {
      double theta = (2 * angle_draw - 1) * options->max_rotation_degrees * G_PI / 180.0;
      double c = cos (theta), sn = sin (theta);
      double b00 = c * a00 - sn * a10, b01 = c * a01 - sn * a11;
      double b10 = sn * a00 + c * a10, b11 = sn * a01 + c * a11;
      a00 = b00; a01 = b01; a10 = b10; a11 = b11;
      exact = FALSE;
    }

  int W = s->width, H = s->height, C = sampler->channels;
  gsize plane = (gsize) W * H;
  for (int v = 0; v < P; v++)
    for (int x = 0; x < P; x++)
      {
        double dx = x - half, dy = v - half;
        double sx = ccx + a00 * dx + a01 * dy, sy = ccy + a10 * dx + a11 * dy;
        gsize o = (gsize) v * P + x;
        if (exact)
          {
            int ix = (int) lround (sx), iy = (int) lround (sy);
            gboolean inside = ix >= 0 && iy >= 0 && ix < W && iy < H;
            gsize p = inside ? (gsize) iy * W + ix : 0;
            for (int c = 0; c < C; c++)
              input[(gsize) c * P * P + o] = inside ? s->input[c * plane + p] : 0.0f;
            target[o] = inside && s->target[p] >= 0.5f ? 1.0f : 0.0f;
            mask[o] = inside && (s->mask == NULL || s->mask[p] >= 0.5f) ? 1.0f : 0.0f;
          }
        else
          {
            for (int c = 0; c < C; c++)
              input[(gsize) c * P * P + o] = bilinear (s->input + c * plane, W, H, sx, sy);
            target[o] = bilinear (s->target, W, H, sx, sy) >= 0.5f ? 1.0f : 0.0f;
            float m;
            if (s->mask != NULL)
              m = bilinear (s->mask, W, H, sx, sy);
            else
              m = (sx > -0.5 && sy > -0.5 && sx < W - 0.5 && sy < H - 0.5) ? 1.0f : 0.0f;
            mask[o] = m >= 0.5f ? 1.0f : 0.0f;
          }
      }
  rete_patch_photometric (input, C, P, mask, options, rete_rng_next (&rng));
}
