/* rete_nn.h — the network engine of librete: a small U-Net (Ronneberger, Fischer and Brox,
 * "U-Net: Convolutional Networks for Biomedical Image Segmentation", MICCAI 2015) with
 * forward and backward passes, its losses, the model file (safetensors) and tiled inference
 * on whole photographs.
 *
 * Architecture (levels L, base filters F, convolutions per block k, in_channels C):
 *   level l (0 .. L-1) works at 1/2^l of the input size with F·2^l channels.
 *   encoder:  block_l = k × [3×3 convolution (same padding, zero border) + activation];
 *             between levels a 2×2 max-pool (stride 2).
 *   decoder:  for l = L-2 .. 0: 2×2 stride-2 transposed convolution F·2^(l+1) -> F·2^l
 *             (no activation, as in the paper), concatenated after the encoder output of the
 *             same level (skip first, then the up-sampled map: 2F·2^l channels), then block_l.
 *   head:     1×1 convolution F -> 1, giving logits (sigmoid gives the vessel probability).
 * Tensors are float32, NCHW, row-major, as in PyTorch (weights (C_out, C_in, kh, kw); the
 * transposed convolution (C_in, C_out, 2, 2) as torch.nn.ConvTranspose2d stores it).
 *
 * Threading: each image of a batch (and each tile in inference) runs on one thread, through
 * rete_parallel_for over images/tiles; OpenBLAS is held to one thread inside, so the two never
 * oversubscribe the cores. A net is not safe to use from two threads at once.
 */
#ifndef RETE_NN_H
#define RETE_NN_H

#include "rete_base.h"

G_BEGIN_DECLS

#define RETE_NN_ERROR (rete_nn_error_quark ())
RETE_API GQuark rete_nn_error_quark (void);

/* The model file format version this library writes and reads (metadata "format_version"). */
#define RETE_MODEL_FORMAT_VERSION "1"

typedef struct {
  int levels;          /* 1..5, 1 = no down-sampling */
  int base_filters;    /* 1..64, doubling per level */
  int convs_per_block; /* 1 or 2 */
  gboolean activation; /* ReLU on, or identity (FALSE: a linear network, for tests) */
  int in_channels;     /* 1 or 3 */
} ReteUnetConfig;

/* The standard model: 3 levels, 16 filters, 2 convolutions per block, ReLU, 1 channel. */
RETE_API void rete_unet_config_init (ReteUnetConfig *config);
/* TRUE when every field is in range; otherwise RETE_ERROR_INVALID_ARGUMENT naming the field. */
RETE_API gboolean rete_unet_config_check (const ReteUnetConfig *config, GError **error);
/* Input sides must be multiples of this (2^(levels-1)). */
RETE_API int rete_unet_config_multiple (const ReteUnetConfig *config);

typedef struct _ReteUnet ReteUnet;

/* A new network with He (Kaiming) normal initialisation of the weights (He et al., ICCV
 * 2015: std = sqrt(2 / fan_in)), zero biases; deterministic for a seed. */
RETE_API ReteUnet *rete_unet_new (const ReteUnetConfig *config, guint64 seed, GError **error);
RETE_API void rete_unet_free (ReteUnet *net);
G_DEFINE_AUTOPTR_CLEANUP_FUNC (ReteUnet, rete_unet_free)
RETE_API const ReteUnetConfig *rete_unet_config (const ReteUnet *net);

/* Parameters: one flat buffer laid out from one size table (tensor i at offset_i, in the order
 * rete_unet_tensor_name gives); gradients mirror it, so an optimiser is one loop. */
RETE_API gsize rete_unet_n_params (const ReteUnet *net);
RETE_API float *rete_unet_params (ReteUnet *net);
RETE_API float *rete_unet_grads (ReteUnet *net);
RETE_API int rete_unet_n_tensors (const ReteUnet *net);
/* Name (PyTorch-style: "enc0.conv0.weight", "up1.weight", "dec0.conv1.bias", "head.weight"),
 * offset into the flat buffer, shape and number of dimensions of tensor i; NULL when i is out
 * of range. Any of offset/shape/n_dims may be NULL. */
RETE_API const char *rete_unet_tensor_name (const ReteUnet *net, int i, gsize *offset,
                                            int shape[4], int *n_dims);
/* Index of the tensor called `name`, or -1. */
RETE_API int rete_unet_find_tensor (const ReteUnet *net, const char *name);

/* Batch forward: input (N, C, H, W) with H and W multiples of 2^(levels-1); logits (N, 1, H, W).
 * Keeps the activations for rete_unet_backward. */
RETE_API gboolean rete_unet_forward (ReteUnet *net, const float *input, int n, int height,
                                     int width, float *logits, GError **error);
/* Backward from dlogits (N, 1, H, W) of the last forward; ACCUMULATES into the gradients.
 * Fails when no forward came before. */
RETE_API gboolean rete_unet_backward (ReteUnet *net, const float *dlogits, GError **error);
RETE_API void rete_unet_zero_grad (ReteUnet *net);
/* Releases the activations kept by the last forward (they are large for big batches). */
RETE_API void rete_unet_release_activations (ReteUnet *net);

/* Sigmoid + binary cross-entropy (mean over the mask) + dice_weight × soft Dice loss
 * (1 - (2 Σ p t + 1) / (Σ p + Σ t + 1), sums over the mask; Milletari et al., V-Net, 3DV 2016,
 * with the usual smoothing of 1), masked by `mask` (0/1, NULL = all). Writes dlogits = d loss /
 * d logits (0 outside the mask); returns the loss (0 when the mask is empty). n values each. */
RETE_API double rete_loss_bce_dice (const float *logits, const float *target, const float *mask,
                                    gsize n, double dice_weight, float *dlogits);

/* Model = network + metadata (string key/values), saved as one safetensors file. Keys written
 * by the library: "format_version", "levels", "base_filters", "convs_per_block", "activation"
 * ("relu" or "identity"), "in_channels". Keys read by the vessel-map glue
 * (vessel/rete_learned.h, which documents them): "channel", "clahe" ("true"/"false"),
 * "clahe_kernel_width", "clahe_kernel_height", "clahe_clip_limit", "clahe_bins",
 * "normalisation" ("standardise" or "none"). Others are free: "name", "data", "licence",
 * "split", "seed", "command", "validation_*", "test_*". */
typedef struct _ReteModel ReteModel;

RETE_API ReteModel *rete_model_new (ReteUnet *net /* takes ownership */);
/* Reads and checks a model file: header length, JSON, dtype, shapes against the architecture
 * in its metadata, data offsets, truncation, NaN/Inf, format version. RETE_ERROR_IO when the file
 * cannot be read, RETE_ERROR_FORMAT (with what is wrong) otherwise. */
RETE_API ReteModel *rete_model_load (const char *path, GError **error);
/* The same from bytes in memory (`name` is used in messages). */
RETE_API ReteModel *rete_model_load_from_data (const guint8 *data, gsize size, const char *name,
                                               GError **error);
/* Writes atomically (temporary file in the same folder, then rename). */
RETE_API gboolean rete_model_save (const ReteModel *model, const char *path, GError **error);
RETE_API void rete_model_free (ReteModel *model);
G_DEFINE_AUTOPTR_CLEANUP_FUNC (ReteModel, rete_model_free)
RETE_API ReteUnet *rete_model_net (const ReteModel *model);
/* NULL when absent. */
RETE_API const char *rete_model_get_meta (const ReteModel *model, const char *key);
/* value NULL removes the key. Architecture keys are rewritten from the net on save. */
RETE_API void rete_model_set_meta (ReteModel *model, const char *key, const char *value);
/* All metadata keys, sorted (free the array with g_free, not the strings). */
RETE_API const char **rete_model_meta_keys (const ReteModel *model, guint *n_keys);

/* Tiled inference on a whole preprocessed image input (C, H, W) -> probability (H, W) in [0,1].
 * Any size: the image is padded with zeros to a multiple of 2^(levels-1); tiles overlap by the
 * network's receptive field so the result equals untiled inference (to float rounding). Tiles
 * run on all cores. progress may be NULL; returning FALSE from it cancels (RETE_ERROR_CANCELLED,
 * probability untouched). The model is not modified (safe from several threads). */
RETE_API gboolean rete_model_infer (const ReteModel *model, const float *input, int channels,
                                    int height, int width, float *probability,
                                    ReteProgressFunc progress, gpointer progress_data,
                                    GError **error);

/* Tiling used by rete_model_infer: the core tile side (default chosen for memory, see
 * infer.c; 0 = default) and the halo (border) added on each side, in pixels. */
RETE_API void rete_model_set_tile_size (ReteModel *model, int tile);
RETE_API int rete_unet_halo (const ReteUnetConfig *config);

/* Untiled inference on an input (C, H, W) of any size (padded as above), in one piece: the
 * reference that tiled inference is tested against. probability (H, W). */
RETE_API gboolean rete_model_infer_untiled (const ReteModel *model, const float *input,
                                            int channels, int height, int width,
                                            float *probability, GError **error);

G_END_DECLS

#endif /* RETE_NN_H */
