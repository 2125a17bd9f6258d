/* rete_synth.h — synthetic colour fundus photographs with exact ground truth, from our own
 * procedural generator, deterministic by seed. For the demo photograph (invented data,
 * labelled as such) and for test inputs; never a stand-in for real photographs in figures
 * of agreement. */
#ifndef RETE_SYNTH_H
#define RETE_SYNTH_H

#include "rete_image.h"

G_BEGIN_DECLS

typedef struct {
  guint64 seed;            /* same seed and parameters -> same pixels */
  int width, height;       /* pixels (default 565 x 584) */
  double aperture_radius;  /* aperture radius as a fraction of min(width, height)/2 (default 0.95);
                              above 1 the circle is cropped by the frame */
  int n_trees;             /* vessel trees leaving the optic disc (default 4: arcades up and down, arteries and veins) */
  double max_vessel_width; /* widest vessel at the disc, pixels (default scales with size: 12 at 999 px) */
  double min_vessel_width; /* narrowest branch drawn (default 1) */
  double illumination;     /* strength of uneven illumination and vignetting, 0..1 (default 0.4) */
  double noise;            /* standard deviation of sensor noise in [0,1] units (default 0.01) */
  gboolean jpeg_artefacts; /* blocky 8x8 quantisation as left by JPEG compression (default FALSE) */
  int n_lesions;           /* bright lesions (exudate-like spots), default 0 */
} ReteSynthParams;

RETE_API void rete_synth_params_init (ReteSynthParams *params);

/* Makes a photograph (3 channels, sRGB values in [0,1]), its exact vessel map (0/1) and its
 * FOV (0/1). Each output pointer may be NULL when not wanted. */
RETE_API gboolean rete_synth_fundus (const ReteSynthParams *params, ReteImage **photo,
                                     ReteImage **vessels, ReteImage **fov, GError **error);

G_END_DECLS

#endif /* RETE_SYNTH_H */
