/* bench_common.h — what the benches share: the median of timed runs, and the multiply-adds of
 * a U-Net forward pass (for GFLOP/s). */
#ifndef RETE_BENCH_COMMON_H
#define RETE_BENCH_COMMON_H

#include "rete_nn.h"

/* Sorts values[0..n) ascending in place and returns their median (the mean of the two middle
 * ones when n is even); n >= 1. */
double bench_median (double *values, int n);

/* Multiply-adds per input pixel of one forward pass of the U-Net `config`: every 3×3
 * convolution (9·C_in·C_out per pixel of its level), 2×2 up-convolution (4·C_in·C_out per
 * pixel of its input) and the 1×1 head; level l has 4^-l of the pixels. Max-pools, ReLUs,
 * the loss and the optimiser are not counted (no multiply-adds, a few percent of the time).
 * first_conv (may be NULL): the share of the first convolution, whose input gradient the
 * backward pass does not compute. */
double bench_unet_forward_macs_per_pixel (const ReteUnetConfig *config, double *first_conv);

#endif /* RETE_BENCH_COMMON_H */
