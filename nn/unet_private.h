/* unet_private.h — the inside of ReteUnet and ReteModel, shared by unet.c (build),
 * unet_forward.c, unet_backward.c, infer.c (tiled inference), model.c and model_load.c (the
 * model file). Not installed. */
#ifndef RETE_NN_UNET_PRIVATE_H
#define RETE_NN_UNET_PRIVATE_H

#include "rete_nn.h"

G_BEGIN_DECLS

#define UNET_MAX_LEVELS 5
#define UNET_MAX_TENSORS (UNET_MAX_LEVELS * 4 + (UNET_MAX_LEVELS - 1) * 6 + 2)

typedef struct {
  char name[32];
  gsize offset; /* into the flat parameter buffer, floats */
  gsize size;   /* floats */
  int shape[4];
  int n_dims;
} UnetTensor;

/* Where one image's activations live (pointers into one block). In training every tensor has
 * its own memory; in lean (inference) mode tensors whose lifetimes do not overlap share it. */
typedef struct {
  float *input;                          /* (C_in, H, W) */
  float *enc[UNET_MAX_LEVELS][2];        /* (C_l, H_l, W_l): encoder conv outputs (after activation) */
  float *pool[UNET_MAX_LEVELS];          /* (C_{l-1}, H_l, W_l), l >= 1: max-pool of the level above */
  float *cat[UNET_MAX_LEVELS];           /* (2 C_l, H_l, W_l), l < L-1: skip, then up-convolution */
  float *dec[UNET_MAX_LEVELS][2];        /* (C_l, H_l, W_l), l < L-1: decoder conv outputs */
  float *logits;                         /* (1, H, W) */
} UnetActivations;

struct _ReteUnet {
  ReteUnetConfig config;
  int n_tensors;
  UnetTensor tensors[UNET_MAX_TENSORS];
  /* tensor indices of each layer's weight; its bias is the next tensor */
  int enc_w[UNET_MAX_LEVELS][2];
  int up_w[UNET_MAX_LEVELS];  /* up_w[l]: from level l to l-1, l >= 1 */
  int dec_w[UNET_MAX_LEVELS][2];
  int head_w;
  gsize n_params;
  float *params; /* (n_params) */
  float *grads;  /* (n_params) */
  /* the last forward, for backward */
  int act_n, act_height, act_width;
  float *act_memory;
  UnetActivations *acts; /* (act_n) */
};

struct _ReteModel {
  ReteUnet *net;
  GHashTable *meta; /* string -> string */
  int tile;         /* inference core tile side, 0 = chosen for memory */
};

/* Floats needed for one image's activations of height × width (multiples of 2^(L-1)); when
 * memory != NULL, also sets the pointers of acts into it. */
gsize unet_activations_layout (const ReteUnet *net, int height, int width, gboolean lean,
                               float *memory, UnetActivations *acts);
/* Forward of one image whose input is already in acts->input; single-threaded. */
void unet_forward_one (const ReteUnet *net, const UnetActivations *acts, int height, int width);

/* Tiled inference with a core tile side (multiple of 2^(L-1); 0 = chosen for memory);
 * a tile as large as the image gives untiled inference. infer.c. */
gboolean unet_infer_tiled (const ReteUnet *net, int tile, const float *input, int channels,
                           int height, int width, float *probability, ReteProgressFunc progress,
                           gpointer progress_data, GError **error);

G_END_DECLS

#endif /* RETE_NN_UNET_PRIVATE_H */
