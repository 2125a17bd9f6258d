/* rete_preprocess.h — from a colour photograph to the grey image the vessel methods read:
 * channel choice, CLAHE inside the field of view, background normalisation, standardisation.
 */
#ifndef RETE_PREPROCESS_H
#define RETE_PREPROCESS_H

#include "rete_image.h"

G_BEGIN_DECLS

typedef enum {
  RETE_CHANNEL_GREEN,     /* the green channel: best vessel contrast in fundus photographs (common practice) */
  RETE_CHANNEL_LUMINANCE, /* Rec. 709 luma of the non-linear values: 0.2126 R + 0.7152 G + 0.0722 B */
  RETE_CHANNEL_RED,
  RETE_CHANNEL_BLUE,
} ReteChannel;

RETE_API const char *rete_channel_name (ReteChannel channel);           /* "green", "luminance", ... */
RETE_API gboolean rete_channel_from_name (const char *name, ReteChannel *channel, GError **error);

/* One grey channel of a photograph. A one-channel photograph is returned as a copy,
 * whatever `channel` says; RGBA ignores alpha. */
RETE_API ReteImage *rete_preprocess_channel (const ReteImage *photo, ReteChannel channel,
                                             GError **error);

/* CLAHE (Zuiderveld, Graphics Gems IV, 1994), following the parameterisation of
 * skimage.exposure.equalize_adapthist so that the two can be checked against each other. */
typedef struct {
  int kernel_width;   /* contextual region width in pixels; 0 = 1/8 of the image width (skimage default) */
  int kernel_height;  /* contextual region height; 0 = 1/8 of the image height */
  double clip_limit;  /* normalised clip limit in (0,1]; 0.01 is skimage's default */
  int n_bins;         /* histogram bins, 2..65536; 256 is skimage's default */
} ReteClaheParams;

RETE_API void rete_clahe_params_init (ReteClaheParams *params);

/* CLAHE of a one-channel image with values in [0,1]. When `fov` is given (one channel,
 * same size, 0/1), only pixels inside it enter the histograms and pixels outside are set
 * to 0, so that the black surround does not flatten the contrast of the fundus; tiles with
 * less than 1/16 of their area inside take their neighbours' mappings. The result is
 * stretched to [0,1] (inside the FOV), as skimage does. params may be NULL (defaults).
 * Without a FOV it matches skimage.exposure.equalize_adapthist 0.19 to 6.3e-5 at worst
 * (tests/test_preprocess.c). Errors: values outside [0,1] or NaN, sizes, an empty FOV,
 * parameters out of range. */
RETE_API ReteImage *rete_clahe (const ReteImage *grey, const ReteImage *fov,
                                const ReteClaheParams *params, GError **error);

/* Background normalisation: grey minus its large-scale background (a Gaussian blur of
 * width `sigma` pixels, computed inside the FOV only by normalised convolution), rescaled
 * to [0,1] inside the FOV; 0 outside. */
RETE_API ReteImage *rete_background_normalise (const ReteImage *grey, const ReteImage *fov,
                                               double sigma, GError **error);

/* Standardises in place to zero mean and unit standard deviation inside the FOV
 * (whole image when fov is NULL); pixels outside are set to 0. Fails on an empty FOV. */
RETE_API gboolean rete_standardise (ReteImage *grey, const ReteImage *fov, GError **error);

/* The usual chain of the main job: channel, then (when clahe != NULL) CLAHE in the FOV. */
RETE_API ReteImage *rete_preprocess (const ReteImage *photo, const ReteImage *fov,
                                     ReteChannel channel, const ReteClaheParams *clahe,
                                     GError **error);

G_END_DECLS

#endif /* RETE_PREPROCESS_H */
