/* augment.c — photometric augmentation of a training patch: gamma, contrast, brightness.
 *
 * Random changes of brightness, contrast and gamma are common practice for fundus
 * photographs, whose exposure varies from camera to camera and eye to eye. The patch holds
 * the prepared (standardised) input, so the three act on that scale, inside the field of
 * view only (outside stays as cut, so the network keeps seeing the zero surround it sees
 * at inference):
 *   gamma:      each channel is rescaled to [0,1] between its minimum and maximum inside
 *               the field of view, raised to g = exp(U(-gamma, gamma)), and scaled back —
 *               a monotone curve, the usual gamma correction;
 *   contrast:   x <- (1 + U(-contrast, contrast)) x   (the standardised mean is 0);
 *   brightness: x <- x + U(-brightness, brightness)   (in standard deviations).
 * One draw per patch, the same for every channel, from the patch's own random stream.
 */
#include "rete_train.h"

#include <math.h>

void
rete_patch_photometric (float *input, int channels, int patch_size, const float *mask,
                        const RetePatchOptions *options, guint64 seed)
{
  guint64 rng = seed;
  double gamma_draw = rete_rng_uniform (&rng), contrast_draw = rete_rng_uniform (&rng);
  double brightness_draw = rete_rng_uniform (&rng);
  guint flags = options->augment;
  gsize n = (gsize) patch_size * patch_size;

  if ((flags & RETE_AUGMENT_GAMMA) && options->gamma > 0)
    {
      double g = exp ((2 * gamma_draw - 1) * options->gamma);
      for (int c = 0; c < channels; c++)
        {
          float *x = input + (gsize) c * n;
          float lo = INFINITY, hi = -INFINITY;
          for (gsize i = 0; i < n; i++)
            if (mask[i] > 0)
              {
                lo = MIN (lo, x[i]);
                hi = MAX (hi, x[i]);
              }
          if (!(hi > lo))
            continue;
          float range = hi - lo;
          for (gsize i = 0; i < n; i++)
            if (mask[i] > 0)
              {
                double t = (x[i] - lo) / range;
                x[i] = lo + range * (float) pow (CLAMP (t, 0.0, 1.0), g);
              }
        }
    }
  float scale = 1.0f, shift = 0.0f;
  if ((flags & RETE_AUGMENT_CONTRAST) && options->contrast > 0)
    scale = (float) (1.0 + (2 * contrast_draw - 1) * options->contrast);
  if ((flags & RETE_AUGMENT_BRIGHTNESS) && options->brightness > 0)
    shift = (float) ((2 * brightness_draw - 1) * options->brightness);
  if (scale == 1.0f && shift == 0.0f)
    return;
  for (int c = 0; c < channels; c++)
    {
      float *x = input + (gsize) c * n;
      for (gsize i = 0; i < n; i++)
        if (mask[i] > 0)
          x[i] = scale * x[i] + shift;
    }
}
