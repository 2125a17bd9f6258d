/* layers.h — the layers of the U-Net (internal to librete), forward and backward.
 *
 * Conventions (after llm.c): outputs first, then inputs, then weights, then sizes;
 * x_backward (dinp, dweight, dbias, dout, inp, weight, sizes) takes gradients prefixed d and
 * ACCUMULATES into every gradient it writes (callers zero them first). Tensors are float32,
 * NCHW, row-major. Each optimised kernel keeps its naive version beside it (suffix _naive); the
 * tests hold the two together and check the naive ones against finite differences and PyTorch.
 * All of these run on the calling thread (OpenBLAS is held to one thread, see unet.c).
 * Exported from librete (RETE_API) for tests/test_nn.c only; the header is not installed.
 */
#ifndef RETE_NN_LAYERS_H
#define RETE_NN_LAYERS_H

#include "rete_base.h"

G_BEGIN_DECLS

/* Holds OpenBLAS to one thread (once per process): the network parallelises over images and
 * tiles itself, and two layers of threads would oversubscribe the cores. */
RETE_API void nn_blas_single_thread (void);

/* 3×3 convolution, stride 1, zero padding 1 ("same"): PyTorch Conv2d(C_in, C_out, 3, padding=1).
 * im2col over bands of rows + cblas_sgemm. */
RETE_API void conv3x3_forward (float *out,          /* (N, C_out, H, W) */
                      const float *inp,    /* (N, C_in, H, W) */
                      const float *weight, /* (C_out, C_in, 3, 3) */
                      const float *bias,   /* (C_out) */
                      int N, int C_in, int C_out, int H, int W);
/* The same followed by ReLU when relu is TRUE (fused: applied to each band of rows while it is
 * in cache); relu FALSE is conv3x3_forward. */
RETE_API void conv3x3_forward_act (float *out, const float *inp, const float *weight,
                                   const float *bias, int N, int C_in, int C_out, int H, int W,
                                   gboolean relu);
/* The two implementations behind conv3x3_forward_act: im2col + cblas_sgemm (conv.c, any
 * processor) and a direct kernel (conv_direct.c, processors with AVX-512, used when
 * conv3x3_direct_available() unless the environment sets RETE_NN_GEMM). */
RETE_API void conv3x3_forward_gemm (float *out, const float *inp, const float *weight,
                                    const float *bias, int N, int C_in, int C_out, int H, int W,
                                    gboolean relu);
RETE_API void conv3x3_forward_direct (float *out, const float *inp, const float *weight,
                                      const float *bias, int N, int C_in, int C_out, int H,
                                      int W, gboolean relu);
RETE_API gboolean conv3x3_direct_available (void);
/* dinp += the input gradient of the 3×3 convolution, by the direct kernel (AVX-512 only). */
RETE_API void conv3x3_backward_input_direct (float *dinp,         /* (N, C_in, H, W) */
                                             const float *dout,   /* (N, C_out, H, W) */
                                             const float *weight, /* (C_out, C_in, 3, 3) */
                                             int N, int C_in, int C_out, int H, int W);
/* dweight += the weight gradient of the 3×3 convolution, by the direct kernel (AVX-512 only). */
RETE_API void conv3x3_backward_weight_direct (float *dweight,    /* (C_out, C_in, 3, 3) */
                                              const float *dout, /* (N, C_out, H, W) */
                                              const float *inp,  /* (N, C_in, H, W) */
                                              int N, int C_in, int C_out, int H, int W);
RETE_API void conv3x3_backward (float *dinp,         /* (N, C_in, H, W), may be NULL (first layer) */
                       float *dweight,      /* (C_out, C_in, 3, 3) */
                       float *dbias,        /* (C_out) */
                       const float *dout,   /* (N, C_out, H, W) */
                       const float *inp,    /* (N, C_in, H, W) */
                       const float *weight, /* (C_out, C_in, 3, 3) */
                       int N, int C_in, int C_out, int H, int W);
RETE_API void conv3x3_forward_naive (float *out, const float *inp, const float *weight, const float *bias,
                            int N, int C_in, int C_out, int H, int W);
RETE_API void conv3x3_backward_naive (float *dinp, float *dweight, float *dbias, const float *dout,
                             const float *inp, const float *weight,
                             int N, int C_in, int C_out, int H, int W);

/* 1×1 convolution: PyTorch Conv2d(C_in, C_out, 1). */
RETE_API void conv1x1_forward (float *out,          /* (N, C_out, H, W) */
                      const float *inp,    /* (N, C_in, H, W) */
                      const float *weight, /* (C_out, C_in, 1, 1) */
                      const float *bias,   /* (C_out) */
                      int N, int C_in, int C_out, int H, int W);
RETE_API void conv1x1_backward (float *dinp,         /* (N, C_in, H, W), may be NULL */
                       float *dweight,      /* (C_out, C_in, 1, 1) */
                       float *dbias,        /* (C_out) */
                       const float *dout,   /* (N, C_out, H, W) */
                       const float *inp,    /* (N, C_in, H, W) */
                       const float *weight, /* (C_out, C_in, 1, 1) */
                       int N, int C_in, int C_out, int H, int W);
RETE_API void conv1x1_forward_naive (float *out, const float *inp, const float *weight, const float *bias,
                            int N, int C_in, int C_out, int H, int W);
RETE_API void conv1x1_backward_naive (float *dinp, float *dweight, float *dbias, const float *dout,
                             const float *inp, const float *weight,
                             int N, int C_in, int C_out, int H, int W);

/* 2×2 transposed convolution, stride 2 (up-sampling by 2): PyTorch
 * ConvTranspose2d(C_in, C_out, 2, stride=2); out[co, 2y+a, 2x+b] = bias[co] +
 * Σ_ci inp[ci, y, x] · weight[ci, co, a, b]. H, W are the INPUT sides. */
RETE_API void upconv2x2_forward (float *out,          /* (N, C_out, 2H, 2W) */
                        const float *inp,    /* (N, C_in, H, W) */
                        const float *weight, /* (C_in, C_out, 2, 2) */
                        const float *bias,   /* (C_out) */
                        int N, int C_in, int C_out, int H, int W);
RETE_API void upconv2x2_backward (float *dinp,         /* (N, C_in, H, W) */
                         float *dweight,      /* (C_in, C_out, 2, 2) */
                         float *dbias,        /* (C_out) */
                         const float *dout,   /* (N, C_out, 2H, 2W) */
                         const float *inp,    /* (N, C_in, H, W) */
                         const float *weight, /* (C_in, C_out, 2, 2) */
                         int N, int C_in, int C_out, int H, int W);
RETE_API void upconv2x2_forward_naive (float *out, const float *inp, const float *weight,
                              const float *bias, int N, int C_in, int C_out, int H, int W);
RETE_API void upconv2x2_backward_naive (float *dinp, float *dweight, float *dbias, const float *dout,
                               const float *inp, const float *weight,
                               int N, int C_in, int C_out, int H, int W);

/* ReLU, out = max(inp, 0); out may be inp (in place). */
RETE_API void relu_forward (float *out,       /* (n) */
                   const float *inp, /* (n) */
                   gsize n);
/* dinp += dout where out > 0 (out: the forward's output). */
RETE_API void relu_backward (float *dinp,       /* (n) */
                    const float *dout, /* (n) */
                    const float *out,  /* (n) */
                    gsize n);
/* In place: dout = 0 where out <= 0 (the gradient through ReLU without a second buffer). */
RETE_API void relu_backward_inplace (float *dout,      /* (n) */
                            const float *out, /* (n) */
                            gsize n);
/* Identity activation: nothing to do forward or backward (kept for symmetry). */

/* 2×2 max-pool, stride 2 (H, W even): PyTorch max_pool2d(x, 2); ties go to the first maximum in
 * the order (0,0) (0,1) (1,0) (1,1), as PyTorch's CPU kernel does. H, W are the INPUT sides. */
RETE_API void maxpool2x2_forward (float *out,       /* (N, C, H/2, W/2) */
                         const float *inp, /* (N, C, H, W) */
                         int N, int C, int H, int W);
/* dinp at the arg-max of each window += dout (arg-max recomputed from inp). */
RETE_API void maxpool2x2_backward (float *dinp,       /* (N, C, H, W) */
                          const float *dout, /* (N, C, H/2, W/2) */
                          const float *inp,  /* (N, C, H, W) */
                          int N, int C, int H, int W);

/* Channel concatenation (the U-Net skip): out = [a; b] along channels, as torch.cat(dim=1).
 * The U-Net itself writes both halves in place (encoder output and up-convolution into the
 * two halves of one buffer), which is the same layout; these are its reference and test. */
RETE_API void concat_forward (float *out,     /* (N, C_a + C_b, H, W) */
                     const float *a, /* (N, C_a, H, W) */
                     const float *b, /* (N, C_b, H, W) */
                     int N, int C_a, int C_b, int H, int W);
RETE_API void concat_backward (float *da,         /* (N, C_a, H, W) */
                      float *db,         /* (N, C_b, H, W) */
                      const float *dout, /* (N, C_a + C_b, H, W) */
                      int N, int C_a, int C_b, int H, int W);

/* Sigmoid, numerically safe for large |x|. */
static inline float
nn_sigmoid (float x)
{
  if (x >= 0.0f)
    {
      float e = __builtin_expf (-x);
      return 1.0f / (1.0f + e);
    }
  float e = __builtin_expf (x);
  return e / (1.0f + e);
}

/* Masked BCE with logits and soft Dice: see rete_loss_bce_dice in rete_nn.h. The parts: */
RETE_API double loss_bce_forward (const float *logits, const float *target, const float *mask, gsize n,
                         double *mask_sum);
RETE_API double loss_dice_forward (const float *logits, const float *target, const float *mask, gsize n);

G_END_DECLS

#endif /* RETE_NN_LAYERS_H */
