/* filters_private.h — pieces the classical vessel filters share (not part of the public API):
 * sampled Gaussian kernels and their derivatives, 1-D convolution passes over rows and
 * columns with scipy.ndimage's 'reflect' border, parameter checks and the final scaling
 * of a response into a vessel map.
 */
#ifndef RETE_FILTERS_PRIVATE_H
#define RETE_FILTERS_PRIVATE_H

#include "rete_filters.h"

#include <string.h>

G_BEGIN_DECLS

/* Hot loops are compiled twice, for AVX2 and for the baseline, and the loader picks
 * the one the processor runs (GCC function multi-versioning; AVX2 without FMA so that the
 * two clones round alike). */
#if defined(__GNUC__) && !defined(__clang__) && defined(__x86_64__) && defined(__linux__)
#define RETE_VECTOR_CLONES __attribute__ ((target_clones ("avx2", "default")))
#else
#define RETE_VECTOR_CLONES
#endif
/* Eight floats as one vector (GCC/Clang vector extensions); the unaligned type is read
 * and written through pointers: *(ReteV8u *) p. */
typedef float ReteV8 __attribute__ ((vector_size (32)));
typedef float ReteV8u __attribute__ ((vector_size (32), aligned (4)));
#define rete_load8(p) (*(const ReteV8u *) (p))
#define rete_store8(p, v) (*(ReteV8u *) (p) = (v))

/* Truncation of every Gaussian kernel, in standard deviations (scipy.ndimage's default). */
#define RETE_GAUSS_TRUNCATE 4.0

/* Radius of a Gaussian kernel of width sigma: int (4 sigma + 0.5), as scipy.ndimage. */
int rete_gauss_radius (double sigma);

/* Sampled Gaussian of width sigma (order 0), or its first or second derivative (order 1, 2),
 * exactly as scipy.ndimage._gaussian_kernel1d: the sampled Gaussian normalised to sum 1,
 * times the derivative polynomial (-x / s^2, x^2 / s^4 - 1 / s^2). Returns 2 r + 1 values
 * for x = -r..r (newly allocated; r = rete_gauss_radius (sigma)). */
float *rete_gauss_kernel (double sigma, int order, int *radius);

/* Index into [0, n) of position i under scipy.ndimage's 'reflect' border (d c b a | a b c d). */
static inline int
rete_reflect_index (int i, int n)
{
  if (i >= 0 && i < n)
    return i;
  int period = 2 * n;
  i %= period;
  if (i < 0)
    i += period;
  return i < n ? i : period - 1 - i;
}

/* One-dimensional convolution out = kernel (*) in along rows (horizontal) or along columns
 * (vertical) of `n_planes` planes of width x height floats, 'reflect' border. `kernel` has
 * 2 radius + 1 taps for x = -radius..radius and is either symmetric (parity +1) or
 * antisymmetric (parity -1). `in` and `out` must not overlap. Runs over rows with
 * rete_parallel_for. */
void rete_convolve_rows (const float *in, float *out, int width, int height, int n_planes,
                         const float *kernel, int radius, int parity);
void rete_convolve_columns (const float *in, float *out, int width, int height, int n_planes,
                            const float *kernel, int radius, int parity);

/* Checks shared by the vessel filters: grey is one channel and finite; fov (may be NULL) is
 * one channel, same size, finite and not empty. */
/* The three horizontal passes of a Hessian at once: out0, out1, out2 = rows of one plane
 * filtered by k0 (symmetric), k1 (antisymmetric), k2 (symmetric), all of the same radius. */
void rete_convolve_rows3 (const float *in, float *out0, float *out1, float *out2, int width,
                          int height, const float *k0, const float *k1, const float *k2,
                          int radius);

/* One output row y of the vertical pass over one plane (kernel as above, 2 radius + 1 taps). */
void rete_convolve_column_row (const float *plane, int width, int height, int y,
                               const float *kernel, int radius, int parity, float *dst);

gboolean rete_filters_check_input (const ReteImage *grey, const ReteImage *fov,
                                   const char *method, GError **error);

/* A copy of grey whose pixels outside the FOV are replaced by a smooth continuation of the
 * fundus (the normalised convolution of grey inside the FOV at width `sigma`, and the FOV's
 * mean where the FOV is far), so that the dark surround of a photograph does not answer as a
 * huge vessel along the FOV's rim. fov == NULL gives a plain copy. */
ReteImage *rete_filters_fill_outside_fov (const ReteImage *grey, const ReteImage *fov,
                                          double sigma, GError **error);

/* In place: response -> vessel map. Pixels outside the FOV become 0; inside, values are
 * mapped linearly so that `low` -> 0 and the maximum inside the FOV -> 1 (values below `low`
 * clamp to 0). `low` = NAN uses the minimum inside the FOV. A response that is constant
 * inside the FOV gives 0 everywhere. */
void rete_filters_finish_map (ReteImage *response, const ReteImage *fov, double low);

/* Mean over a size x size window (size odd) of a one-channel image, 'reflect' borders
 * (scipy.ndimage.uniform_filter). Halo: (size - 1) / 2. */
ReteImage *rete_box_mean (const ReteImage *image, int size, GError **error);

/* matched_kernel.c: parameter checks, the kernels' half size floor (hypot (3 sigma, L / 2)),
 * and kernel k (fdog: the FDOG kernel) into k_out, (2 half + 1)^2 floats. */
gboolean rete_matched_check (const ReteMatchedParams *params, GError **error);
int rete_matched_half (const ReteMatchedParams *params);
void rete_matched_build_kernel (const ReteMatchedParams *params, int k, gboolean fdog, int half,
                                float *k_out);

G_END_DECLS

#endif /* RETE_FILTERS_PRIVATE_H */
