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
  double max_vessel_width; /* widest vessel at the disc, pixels; 0 (the default) scales with the
                              aperture: 12 px for an aperture of radius 456 px (999 x 960 frame) */
  double min_vessel_width; /* narrowest branch drawn (default 1) */
  double illumination;     /* strength of uneven illumination and vignetting, 0..1 (default 0.4) */
  double noise;            /* standard deviation of sensor noise in [0,1] units (default 0.01) */
  gboolean jpeg_artefacts; /* blocky 8x8 quantisation as left by JPEG compression (default FALSE) */
  int n_lesions;           /* bright lesions (exudate-like spots), default 0 */
  int jpeg_quality;        /* 1..100, the quality of the quantisation when jpeg_artefacts (default 60) */
} ReteSynthParams;

RETE_API void rete_synth_params_init (ReteSynthParams *params);

/* Makes a photograph (3 channels, sRGB values in [0,1]), its exact vessel map (0/1) and its
 * FOV (0/1). Each output pointer may be NULL when not wanted. */
RETE_API gboolean rete_synth_fundus (const ReteSynthParams *params, ReteImage **photo,
                                     ReteImage **vessels, ReteImage **fov, GError **error);

/* Everything the generator knows about one photograph, for tests that need more than the
 * vessel map: local vessel widths (for calibre measurements), arteries versus veins,
 * lesions, and where the disc and the fovea are. */
typedef struct {
  ReteImage *photo;     /* 3 channels, [0,1] */
  ReteImage *vessels;   /* 0/1: pixel centre inside a drawn vessel and inside the FOV */
  ReteImage *fov;       /* 0/1: pixel centre inside the aperture circle */
  ReteImage *widths;    /* on vessel pixels the width (pixels) of the widest vessel covering
                           the pixel, 0 elsewhere */
  ReteImage *arteries;  /* 0/1: vessel pixels whose vessel is an artery */
  ReteImage *lesions;   /* 0/1: pixels inside a bright lesion */
  double aperture_x, aperture_y, aperture_radius; /* pixels */
  double disc_x, disc_y, disc_radius;             /* optic disc, pixels */
  double fovea_x, fovea_y;                        /* centre of the macula, pixels */
  int n_pieces;         /* straight centreline pieces the tree was drawn from */
} ReteSynthTruth;

/* As rete_synth_fundus with all of the truth; on failure `truth` is left empty. */
RETE_API gboolean rete_synth_fundus_truth (const ReteSynthParams *params, ReteSynthTruth *truth,
                                           GError **error);
RETE_API void rete_synth_truth_clear (ReteSynthTruth *truth);

/* TRUE when every parameter is usable; otherwise RETE_ERROR_INVALID_ARGUMENT naming the
 * parameter, its value and the accepted range. */
RETE_API gboolean rete_synth_params_check (const ReteSynthParams *params, GError **error);

/* The blocky artefacts of JPEG compression without a codec, in place on a 3-channel image
 * with values in [0,1] (what jpeg_artefacts does to the synthetic photograph; for tests of
 * robustness on any image): YCbCr (ITU-T T.871), 8x8 DCT, quantisation with the tables of
 * ITU-T T.81 Annex K scaled for `quality` (1..100) as the IJG library does, back to RGB.
 * No chroma subsampling. Fails (image untouched) on another channel count or quality. */
RETE_API gboolean rete_synth_jpeg_artefacts (ReteImage *photo, int quality, GError **error);

G_END_DECLS

#endif /* RETE_SYNTH_H */
