/* rete_fov.h — the field of view (FOV): the lit, circular (or cropped circular)
 * aperture of a fundus photograph, as a 0/1 mask. */
#ifndef RETE_FOV_H
#define RETE_FOV_H

#include "rete_image.h"

G_BEGIN_DECLS

typedef struct {
  double erode_rim;   /* pixels removed from the rim after detection (0 = none); the rim of the
                         aperture is often a bright or dark ring that filters take for a vessel */
  double threshold;   /* 0 = automatic (from the histogram); otherwise a level in (0,1) on the
                         photograph's brightness (the largest of R, G, B, smoothed over about
                         1/200 of the shorter side) above which a pixel is inside */
} ReteFovParams;

RETE_API void rete_fov_params_init (ReteFovParams *params);

/* Detects the FOV of a photograph (RGB or grey, values in [0,1]): dark surround, full or
 * cropped circular aperture, vignetting, dark or over-exposed photographs. Returns a
 * one-channel 0/1 mask of the photograph's size: one connected region without holes
 * (the convex hull of the largest lit region; see fov.c for the method). A photograph lit
 * to its corners (no dark surround) gives the whole frame. params may be NULL (defaults).
 * Fails with RETE_ERROR_EMPTY when no aperture can be found (say a black frame),
 * RETE_ERROR_NOT_FINITE on NaN, RETE_ERROR_INVALID_ARGUMENT on 2 channels or bad params.
 * Measured: Dice 0.9978..0.9994 against the 20 CHASE_DB1 training masks (tests/test_fov.c). */
RETE_API ReteImage *rete_fov_detect (const ReteImage *photo, const ReteFovParams *params,
                                     GError **error);

/* The mask eroded by a disc of `radius` pixels (exact Euclidean disc: a pixel stays when no
 * outside pixel lies within distance <= radius). Beyond the frame counts as inside, so a
 * frame that cuts the aperture is not eroded (scipy.ndimage.binary_erosion with
 * border_value=1 gives the same mask). */
RETE_API ReteImage *rete_fov_erode (const ReteImage *fov, double radius, GError **error);

/* Number of pixels > 0.5 in a mask. */
RETE_API gsize rete_mask_count (const ReteImage *mask);

/* Dice coefficient 2|A∩B|/(|A|+|B|) of two masks of the same size; -1 with an error on
 * mismatched sizes, 1 when both are empty. */
RETE_API double rete_mask_dice (const ReteImage *a, const ReteImage *b, GError **error);

G_END_DECLS

#endif /* RETE_FOV_H */
