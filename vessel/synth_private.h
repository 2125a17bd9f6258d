/* synth_private.h — what the files of the synthetic-photograph generator share (not
 * installed): a seeded random-number generator, the layout of the eye in the frame and the
 * vessel tree as a list of tapered straight pieces. */
#ifndef RETE_SYNTH_PRIVATE_H
#define RETE_SYNTH_PRIVATE_H

#include "rete_synth.h"

#include <math.h>

G_BEGIN_DECLS

/* SplitMix64 (Steele, Lea and Flood, "Fast splittable pseudorandom number generators",
 * OOPSLA 2014): 64-bit state, one multiply-xorshift mix per draw. Our own so that a seed
 * gives the same photograph on every platform and GLib version. */
typedef struct {
  guint64 state;
} SynthRng;

static inline guint64
synth_rng_next (SynthRng *rng)
{
  guint64 z = (rng->state += G_GUINT64_CONSTANT (0x9E3779B97F4A7C15));
  z = (z ^ (z >> 30)) * G_GUINT64_CONSTANT (0xBF58476D1CE4E5B9);
  z = (z ^ (z >> 27)) * G_GUINT64_CONSTANT (0x94D049BB133111EB);
  return z ^ (z >> 31);
}

/* An independent stream for each (seed, purpose, index): rows of noise, lesions, trees. */
static inline SynthRng
synth_rng_stream (guint64 seed, guint64 purpose, guint64 index)
{
  SynthRng rng = { seed ^ (purpose * G_GUINT64_CONSTANT (0xD6E8FEB86659FD93)) };
  rng.state ^= index * G_GUINT64_CONSTANT (0xA0761D6478BD642F);
  synth_rng_next (&rng);
  return rng;
}

/* Uniform in [0, 1). */
static inline double
synth_rng_uniform (SynthRng *rng)
{
  return (double) (synth_rng_next (rng) >> 11) * (1.0 / 9007199254740992.0);
}

static inline double
synth_rng_range (SynthRng *rng, double low, double high)
{
  return low + (high - low) * synth_rng_uniform (rng);
}

/* Standard normal by the Box–Muller transform (one of the pair is used). */
static inline double
synth_rng_normal (SynthRng *rng)
{
  double u = 1.0 - synth_rng_uniform (rng); /* (0, 1] */
  double v = synth_rng_uniform (rng);
  return sqrt (-2.0 * log (u)) * cos (2.0 * G_PI * v);
}

/* Purposes of the random streams. */
enum {
  SYNTH_STREAM_LAYOUT = 1,
  SYNTH_STREAM_TREE,
  SYNTH_STREAM_TEXTURE,
  SYNTH_STREAM_LESION,
  SYNTH_STREAM_NOISE,
};

/* Where things are, in pixel coordinates (x right, y down; pixel (i, j) has its centre at
 * (i + 0.5, j + 0.5)). */
typedef struct {
  int width, height;
  double centre_x, centre_y;   /* aperture centre */
  double radius;               /* aperture radius, pixels */
  double disc_x, disc_y;       /* optic disc centre */
  double disc_radius;
  double macula_x, macula_y;   /* fovea */
  double light_x, light_y;     /* unit direction of the illumination gradient */
} SynthLayout;

/* One piece of a vessel's centreline: from (x0, y0) with half-width r0 to (x1, y1) with
 * half-width r1; the vessel covers every point whose distance to the piece is at most the
 * half-width interpolated at its projection onto the piece (a tapered capsule). */
typedef struct {
  float x0, y0, r0;
  float x1, y1, r1;
  guint8 artery;               /* 1 = artery, 0 = vein */
} SynthPiece;

/* Grows the vessel trees of params->n_trees roots at the disc; appends SynthPiece to
 * `pieces`. Deterministic by params->seed. */
void synth_grow_trees (const ReteSynthParams *params, const SynthLayout *layout,
                       GArray *pieces);

/* Rasterises the pieces. `truth` (0/1: pixel centre inside a capsule, no anti-aliasing),
 * `width_map` (widest vessel width covering the pixel, 0 elsewhere), `opacity` (smooth
 * absorption profile in [0,1] for the photograph) and `artery` (type of the piece that gives
 * the largest opacity) are width*height arrays, zero on entry; any may be NULL. */
void synth_render_vessels (const GArray *pieces, int width, int height, float *truth,
                           float *width_map, float *opacity, guint8 *artery);

/* Bright lesions: soft weights for the photograph in `weight`, exact truth in `truth`
 * (width*height arrays, zero on entry). */
void synth_draw_lesions (const ReteSynthParams *params, const SynthLayout *layout, float *weight,
                         float *truth);

/* Paints the photograph (3 channels) from the layout, the vessels' opacity and type, and the
 * lesions' weights. */
void synth_paint_photo (const ReteSynthParams *params, const SynthLayout *layout,
                        const float *opacity, const guint8 *artery, const float *lesion_weight,
                        ReteImage *photo);

/* Replaces each 8x8 block of the photograph (3 channels, [0,1]) by its JPEG-like
 * reconstruction at `quality` (1..100). */
void synth_jpeg_quantise (ReteImage *photo, int quality);

G_END_DECLS

#endif /* RETE_SYNTH_PRIVATE_H */
