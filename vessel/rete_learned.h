/* rete_learned.h — the learned vessel map: a photograph, preprocessed as the model's metadata
 * says, through the U-Net of nn/ (tiled, both cores), 0 outside the field of view.
 *
 * Preprocessing metadata (strings in the model file; defaults when a key is absent):
 *   "channel"             green | luminance | red | blue (in_channels 1; default green);
 *                         in_channels 3 reads R, G and B, each preprocessed alike
 *   "clahe"               true | false: CLAHE inside the FOV (default true)
 *   "clahe_kernel_width"  "clahe_kernel_height"  pixels, 0 = 1/8 of the image (default 0)
 *   "clahe_clip_limit"    (0, 1] (default 0.01)    "clahe_bins"  2..65536 (default 256)
 *   "normalisation"       standardise | none: zero mean, unit deviation inside the FOV
 *                         (default standardise)
 * The trainer (nn/train*.c) calls rete_learned_prepare_input too, so that training and
 * inference see the same input.
 */
#ifndef RETE_LEARNED_H
#define RETE_LEARNED_H

#include "rete_image.h"
#include "rete_preprocess.h"

G_BEGIN_DECLS

typedef struct _ReteModel ReteModel; /* nn/rete_nn.h */

typedef struct {
  ReteChannel channel;    /* in_channels 1 */
  gboolean use_clahe;
  ReteClaheParams clahe;
  gboolean standardise;
} ReteLearnedPreprocess;

/* The defaults above. */
RETE_API void rete_learned_preprocess_init (ReteLearnedPreprocess *pre);
/* Reads the preprocessing from the model's metadata (defaults for absent keys); fails with
 * RETE_ERROR_FORMAT naming the key when a value cannot be understood. */
RETE_API gboolean rete_learned_preprocess_from_model (const ReteModel *model,
                                                      ReteLearnedPreprocess *pre, GError **error);
/* Writes the preprocessing into the model's metadata (for the trainer). */
RETE_API void rete_learned_preprocess_to_model (const ReteLearnedPreprocess *pre, ReteModel *model);

/* The network input for a photograph: (in_channels, H, W), newly allocated (g_free), 0 outside
 * the FOV. fov: one channel, same size, 0/1; NULL = the whole image. photo: 1, 3 or 4 channels
 * (alpha ignored; a grey photograph serves every channel). */
RETE_API gboolean rete_learned_prepare_input (const ReteImage *photo, const ReteImage *fov,
                                              const ReteModel *model, float **input,
                                              GError **error);

/* The vessel map in [0,1] (one channel, size of the photograph), 0 outside the FOV. Progress in
 * [0,1] over the tiles; returning FALSE cancels (RETE_ERROR_CANCELLED). */
RETE_API ReteImage *rete_vessel_learned (const ReteImage *photo, const ReteImage *fov,
                                         const ReteModel *model, ReteProgressFunc progress,
                                         gpointer progress_data, GError **error);

G_END_DECLS

#endif /* RETE_LEARNED_H */
