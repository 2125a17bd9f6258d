/* rete_binary.h — from a vessel map to a binary vessel map: Otsu's threshold, a fixed
 * threshold or a target vessel fraction, then clean-up of small pieces and holes. */
#ifndef RETE_BINARY_H
#define RETE_BINARY_H

#include "rete_image.h"

G_BEGIN_DECLS

typedef enum {
  RETE_THRESHOLD_OTSU,     /* Otsu (IEEE SMC 1979) on the map's values inside the FOV */
  RETE_THRESHOLD_FIXED,    /* a given level */
  RETE_THRESHOLD_FRACTION, /* the level that marks a given fraction of the FOV as vessel */
} ReteThresholdMethod;

typedef struct {
  ReteThresholdMethod method;
  double level;            /* RETE_THRESHOLD_FIXED: level in [0,1] (default 0.5) */
  double fraction;         /* RETE_THRESHOLD_FRACTION: vessel fraction in (0,1) (default 0.12) */
  gsize min_component;     /* vessel components smaller than this many pixels are removed (default 30; 0 = keep all) */
  gsize max_hole;          /* holes (4-connected background components) smaller than this are
                              filled (default 10; 0 = none); in rete_binary_map the background
                              outside the FOV joins every hole that reaches the FOV border, so
                              those are never filled */
} ReteBinaryParams;

RETE_API void rete_binary_params_init (ReteBinaryParams *params);
RETE_API const char *rete_threshold_method_name (ReteThresholdMethod method); /* "otsu", "fixed", "fraction" */
RETE_API gboolean rete_threshold_method_from_name (const char *name, ReteThresholdMethod *method,
                                                   GError **error);

/* Otsu's threshold of the values inside the mask (all pixels when NULL), with 256 bins over
 * [min, max] of those values, returning the bin centre as skimage.filters.threshold_otsu
 * does. Fails when the mask is empty or all values are equal. */
RETE_API double rete_threshold_otsu (const ReteImage *map, const ReteImage *mask, GError **error);
/* The smallest level t such that the fraction of mask pixels with value >= t is at most
 * `fraction` (in (0,1)); t is one of the map's values inside the mask, or just above the
 * highest when even that one is too frequent. */
RETE_API double rete_threshold_for_fraction (const ReteImage *map, const ReteImage *mask,
                                             double fraction, GError **error);

/* 1 where map >= threshold and inside the mask, else 0. */
RETE_API ReteImage *rete_binarise (const ReteImage *map, const ReteImage *mask, double threshold,
                                   GError **error);

/* In place on a 0/1 map (values >= 0.5 are vessel; written back as 0/1): removes
 * 8-connected vessel components smaller than min_component pixels, then fills 4-connected
 * background components smaller than max_hole pixels — as skimage.morphology's
 * remove_small_objects (connectivity=2) then remove_small_holes (connectivity=1), which also
 * fill background pieces at the image edge. */
RETE_API gboolean rete_binary_clean (ReteImage *binary, gsize min_component, gsize max_hole,
                                     GError **error);

/* The whole step: threshold by params (NULL = defaults; the level is returned in *threshold
 * when not NULL), binarise, clean, and zero outside the mask. */
RETE_API ReteImage *rete_binary_map (const ReteImage *map, const ReteImage *mask,
                                     const ReteBinaryParams *params, double *threshold,
                                     GError **error);

G_END_DECLS

#endif /* RETE_BINARY_H */
