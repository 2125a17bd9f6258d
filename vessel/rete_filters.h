/* rete_filters.h — classical vessel filters. Each reads a preprocessed one-channel
 * image (values in [0,1], vessels darker than the fundus, as in the green channel) and
 * an optional FOV mask, and returns a vessel map: float in [0,1], higher = more likely a
 * vessel, 0 outside the FOV. Borders are read as scipy.ndimage's 'reflect' mode
 * (d c b a | a b c d | d c b a), as skimage and OpenCV's BORDER_REFLECT do, so that results can
 * be checked against them; each filter's halo (how far it reads past a tile) is given so
 * that tiled processing is exact (tests/test_filters.c checks it). The halo holds for the raw
 * responses (rete_frangi_raw with c > 0, rete_matched_raw); the vessel maps are then scaled by
 * statistics of the whole FOV (maximum, means, deviations), which a tiled caller must gather
 * over all tiles first. Every function takes params == NULL as the defaults of its
 * *_params_init (). On failure a function returns NULL with a GError and changes nothing.
 */
#ifndef RETE_FILTERS_H
#define RETE_FILTERS_H

#include "rete_image.h"

G_BEGIN_DECLS

/* Gaussian blur, separable, kernel truncated at 4 sigma, border mode as scipy.ndimage's
 * 'reflect' (d c b a | a b c d | d c b a). sigma <= 0 returns a copy. Any channel count. */
RETE_API ReteImage *rete_gaussian_blur (const ReteImage *image, double sigma, GError **error);

/* ---- Frangi multiscale vesselness (Frangi et al., MICCAI 1998), 2-D form ----
 * Hessian from Gaussian derivatives at each scale, scale-normalised by sigma^2;
 * V = exp(-Rb^2 / (2 beta^2)) * (1 - exp(-S^2 / (2 c^2))) where |l1| <= |l2|,
 * Rb = l1 / l2, S = sqrt(l1^2 + l2^2); V = 0 where l2 < 0 for dark vessels (l2 > 0 for
 * bright); maximum over scales. */
/* How the Hessian is taken at scale sigma. */
typedef enum {
  RETE_HESSIAN_GAUSSIAN_DERIVATIVES, /* second derivatives of the Gaussian, sampled as
                                        scipy.ndimage.gaussian_filter (order=2 etc.) does
                                        (Frangi 1998's definition; the default) */
  RETE_HESSIAN_BLUR_THEN_DIFFERENCES /* Gaussian blur, then central differences taken twice
                                        (numpy.gradient), as skimage 0.19's hessian_matrix
                                        does; for exact checks against skimage.filters.frangi */
} ReteHessianMethod;

typedef struct {
  double sigma_min;    /* smallest scale, pixels (default 2) */
  double sigma_max;    /* largest scale, pixels (default 8) */
  double sigma_step;   /* step between scales (default 2); defaults tuned for ROC AUC on
                          CHASE_DB1's 999x960 photographs (tests/CHASE-CLASSICAL.md) */
  double beta;         /* blob-versus-line sensitivity (default 0.5, as Frangi 1998) */
  double c;            /* structure sensitivity; 0 = half the largest Hessian norm at each
                          scale (Frangi 1998's suggestion; default 0) */
  gboolean dark_vessels; /* TRUE for vessels darker than the background (default TRUE) */
  ReteHessianMethod hessian; /* default RETE_HESSIAN_GAUSSIAN_DERIVATIVES */
} ReteFrangiParams;

RETE_API void rete_frangi_params_init (ReteFrangiParams *params);
/* Vesselness as defined above, not rescaled (for checks against skimage.filters.frangi).
 * Halo: int (4 sigma_max + 0.5) pixels (+2 with RETE_HESSIAN_BLUR_THEN_DIFFERENCES); borders
 * read as scipy.ndimage's 'reflect'. */
RETE_API ReteImage *rete_frangi_raw (const ReteImage *grey, const ReteFrangiParams *params,
                                     GError **error);
/* The vessel map: raw vesselness, 0 outside the FOV, scaled to [0,1] by its maximum inside.
 * The surround outside the FOV is first replaced by a smooth continuation of the fundus. */
RETE_API ReteImage *rete_vessel_frangi (const ReteImage *grey, const ReteImage *fov,
                                        const ReteFrangiParams *params, GError **error);

/* ---- Gaussian matched filter (Chaudhuri et al., IEEE TMI 1989) and its
 * first-derivative-of-Gaussian variant (Zhang et al., Pattern Recognition 2010) ----
 * Kernel K(x, y) = -exp(-x^2 / (2 sigma^2)) for |x| <= 3 sigma, |y| <= L/2, rotated to
 * n_orientations angles in [0, pi), made zero-mean over its support and scaled to unit
 * energy (sum of squares 1, so that responses at different sigma compare fairly). Response
 * H = maximum over orientations. The FDOG variant weighs in the local mean of the derivative-
 * of-Gaussian response (Zhang 2010, eq. 6-8) so that the step edges of bright lesions are
 * suppressed: with D = |FDOG response| at H's orientation and Dhat = (W x W mean of D) / its
 * maximum, Zhang's rule marks a vessel where H >= (1 + Dhat) c mean(H) (means over the FOV).
 * The MF-FDOG map is H / (1 + Dhat), which crosses c mean(H) exactly where that rule does, and
 * halves the answer at the strongest edges.
 * Halo: floor (hypot (3 sigma, L/2)) pixels, plus (fdog_window - 1) / 2 for MF-FDOG; borders
 * read as scipy.ndimage's 'reflect'. Vessel maps: H (or the FDOG score) clamped at 0 and
 * scaled by its maximum inside the FOV; the surround outside the FOV is first replaced by a
 * smooth continuation of the fundus so that the rim of the FOV gives no response. */
typedef struct {
  double sigma;        /* vessel cross-section scale, pixels (default 4; Chaudhuri 1989 used 2
                          at 512 px; the best sigma is about 1.7x the vessel's Gaussian width) */
  double length;       /* length L of the vessel piece the kernel matches, pixels (default 21;
                          Chaudhuri: 9); defaults tuned for ROC AUC on CHASE_DB1's 999x960
                          photographs (tests/CHASE-CLASSICAL.md) */
  int n_orientations;  /* angles in [0, pi) (default 12: every 15 degrees, as Chaudhuri 1989) */
  gboolean use_fdog;   /* FALSE: Chaudhuri's filter; TRUE: Zhang's MF-FDOG */
  int fdog_window;     /* side of the mean filter applied to the FDOG response (default 31) */
  double fdog_c;       /* c of Zhang's threshold T = c mean(H) (default 2.3; 2..3 in Zhang 2010);
                          only rete_vessel_matched_threshold uses it */
} ReteMatchedParams;

RETE_API void rete_matched_params_init (ReteMatchedParams *params);
/* Kernel of orientation index `k` (0..n_orientations-1): a square (size x size) float
 * array, returned newly allocated, with *size set; zero-mean over its support; for
 * checks of the kernel's properties. `fdog` selects the derivative-of-Gaussian kernel. */
RETE_API float *rete_matched_kernel (const ReteMatchedParams *params, int k, gboolean fdog,
                                     int *size, GError **error);
/* The matched-filter response before any scaling (max over orientations). */
RETE_API ReteImage *rete_matched_raw (const ReteImage *grey, const ReteMatchedParams *params,
                                      GError **error);
RETE_API ReteImage *rete_vessel_matched (const ReteImage *grey, const ReteImage *fov,
                                         const ReteMatchedParams *params, GError **error);
/* The same map, and in *threshold the level of that map that corresponds to the published
 * threshold T = fdog_c mean(H) (Zhang 2010, eq. 8; for plain MF, Chaudhuri-style T = c mean(H)
 * with the same c): map >= *threshold reproduces the paper's binary vessel map. */
RETE_API ReteImage *rete_vessel_matched_threshold (const ReteImage *grey, const ReteImage *fov,
                                                   const ReteMatchedParams *params,
                                                   double *threshold, GError **error);

/* ---- Multiscale line detector (Nguyen et al., Pattern Recognition 2013) ----
 * For each line length l = 1, 1 + step, ..., W: R_l = max over 12 orientations of the mean
 * along a line of length l through the pixel, minus the mean of the W x W window,
 * standardised inside the FOV; the combined response is the mean of all R_l and the
 * (standardised) inverted green level (Nguyen 2013, eq. 4-5). A line of length l holds the
 * l pixels of the digital line through the centre of an l x l square.
 * Halo: (W - 1) / 2 pixels; borders read as scipy.ndimage's 'reflect'. The map is the
 * combined response scaled linearly from its minimum (0) to its maximum (1) inside the FOV. */
typedef struct {
  int window;          /* W, odd, pixels (default 41, tuned for ROC AUC on CHASE_DB1's 999x960
                          photographs; Nguyen 2013 used 15 at DRIVE's 565 px) */
  int step;            /* step between line lengths, even (default 4; Nguyen: 2) */
  int n_orientations;  /* default 12 */
} ReteLineParams;

RETE_API void rete_line_params_init (ReteLineParams *params);
RETE_API ReteImage *rete_vessel_line (const ReteImage *grey, const ReteImage *fov,
                                      const ReteLineParams *params, GError **error);

G_END_DECLS

#endif /* RETE_FILTERS_H */
