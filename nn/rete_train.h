/* rete_train.h — training of the U-Net of rete_nn.h on (prepared photograph, manual
 * annotation, field of view) triples: random patches inside the field of view, augmentation,
 * Adam with decoupled weight decay, validation AUC, early stopping, the best model kept,
 * resumable checkpoints written atomically, a CSV log, progress and cancel, fine-tuning.
 *
 * Same seed, data, configuration and thread count -> the same weights, bit for bit; a run
 * resumed from its checkpoint gives the same weights as an unbroken one (each step draws its
 * patches from its own random stream derived from (seed, step)).
 *
 * The inputs are prepared by the caller (vessel/rete_learned.h: channel, CLAHE,
 * standardisation inside the field of view); nn/ knows nothing of photographs.
 */
#ifndef RETE_TRAIN_H
#define RETE_TRAIN_H

#include "rete_nn.h"

G_BEGIN_DECLS

/* ---- training data ---------------------------------------------------------------------- */

/* One training (or validation) pair. The arrays are borrowed for the length of the call. */
typedef struct {
  const char *name;     /* for messages and the log (a file name); may be NULL */
  int channels;         /* input channels: the network's in_channels */
  int height, width;    /* pixels */
  const float *input;   /* (channels, height, width) prepared network input */
  const float *target;  /* (height, width) manual annotation, >= 0.5 is vessel */
  const float *mask;    /* (height, width) field of view, >= 0.5 is inside; NULL = all */
} ReteTrainSample;

/* Checks one pair (sizes, channels, finite input); `index` counts from 0 for the message. */
RETE_API gboolean rete_train_sample_check (const ReteTrainSample *sample, int index,
                                           int channels, GError **error);

/* ---- patches and augmentation (patches.c, augment.c) ------------------------------------- */

typedef enum {
  RETE_AUGMENT_FLIP = 1 << 0,       /* horizontal flip, probability 1/2 */
  RETE_AUGMENT_ROTATE90 = 1 << 1,   /* 0, 1, 2 or 3 quarter turns */
  RETE_AUGMENT_ROTATE = 1 << 2,     /* small rotation, uniform in ±max_rotation_degrees */
  RETE_AUGMENT_BRIGHTNESS = 1 << 3, /* x + U(±brightness) inside the field of view */
  RETE_AUGMENT_CONTRAST = 1 << 4,   /* x × (1 + U(±contrast)) */
  RETE_AUGMENT_GAMMA = 1 << 5,      /* gamma exp(U(±gamma)) on the patch's range */
  RETE_AUGMENT_ALL = 0x3F,
} ReteAugmentFlags;

typedef struct {
  int patch_size;              /* side of a square patch, pixels; a multiple of
                                  2^(levels-1); default 64 */
  double balance;              /* fraction of patch centres drawn on vessel pixels (the rest on
                                  background inside the FOV), 0..1; negative = uniform inside
                                  the FOV (default -1) */
  guint augment;               /* ReteAugmentFlags; default all */
  double max_rotation_degrees; /* default 15 */
  double brightness;           /* half-range, in standard deviations of the input; default 0.2 */
  double contrast;             /* half-range of the relative change; default 0.2 */
  double gamma;                /* half-range of log(gamma); default 0.25 */
} RetePatchOptions;

RETE_API void rete_patch_options_init (RetePatchOptions *options);

typedef struct _RetePatchSampler RetePatchSampler;

/* Indexes the vessel and background pixels inside each pair's field of view. Fails on an
 * empty set, a bad pair or an empty field of view. The arrays stay borrowed. */
RETE_API RetePatchSampler *rete_patch_sampler_new (const ReteTrainSample *samples, int n_samples,
                                                   int channels, GError **error);
RETE_API void rete_patch_sampler_free (RetePatchSampler *sampler);
RETE_API int rete_patch_sampler_n_samples (const RetePatchSampler *sampler);
/* Cuts one augmented patch, a pure function of `seed`: input (C, P, P), target (P, P),
 * mask (P, P). Pixels beyond the photograph read 0 and lie outside the mask (padding). */
RETE_API void rete_patch_draw (const RetePatchSampler *sampler, const RetePatchOptions *options,
                               guint64 seed, float *input, float *target, float *mask);
/* Gamma, contrast, brightness of one patch in place, inside mask; a function of `seed`. */
RETE_API void rete_patch_photometric (float *input, int channels, int patch_size,
                                      const float *mask, const RetePatchOptions *options,
                                      guint64 seed);

/* ---- random numbers and the validation AUC (train_auc.c) --------------------------------- */

RETE_API guint64 rete_rng_next (guint64 *state);      /* SplitMix64 */
RETE_API double rete_rng_uniform (guint64 *state);    /* [0, 1), 53 bits */
RETE_API guint64 rete_rng_derive (guint64 seed, guint64 a, guint64 b);

/* Exact ROC AUC (mid-ranks for ties) of scores against 0/1 labels over the pixels where mask
 * is non-zero (mask NULL = all). NaN with an error when one class is absent, the mask is empty
 * or a score is not finite. */
RETE_API double rete_train_auc (const float *scores, const guint8 *labels, const guint8 *mask,
                                gsize n, GError **error);

/* ---- the optimiser (adam.c) -------------------------------------------------------------- */

typedef struct {
  double learning_rate; /* default 1e-3 */
  double beta1;         /* default 0.9 */
  double beta2;         /* default 0.999 */
  double epsilon;       /* default 1e-8 */
  double weight_decay;  /* decoupled (AdamW), default 1e-4 */
} ReteAdamParams;

typedef struct {
  gsize n;
  float *m;   /* (n) first moment */
  float *v;   /* (n) second moment */
  gint64 step;
} ReteAdamState;

RETE_API void rete_adam_params_init (ReteAdamParams *params);
RETE_API ReteAdamState *rete_adam_new (gsize n, GError **error);
RETE_API void rete_adam_free (ReteAdamState *state);
RETE_API void rete_adam_reset (ReteAdamState *state);
/* One AdamW step at `learning_rate` (params->learning_rate is not read here, so a schedule
 * can vary it). decay: (n) 1 where weight decay applies, 0 where not; NULL = everywhere. */
RETE_API void rete_adam_step (ReteAdamState *state, const ReteAdamParams *params,
                              double learning_rate, float *weights, const float *grads,
                              const guint8 *decay);

/* ---- training (train.c) ------------------------------------------------------------------ */

typedef struct {
  ReteUnetConfig unet;        /* architecture of a new network (ignored with start_model) */
  int steps;                  /* optimiser steps; default 2000 */
  int batch_size;             /* patches per step; default 16 */
  RetePatchOptions patches;   /* patch size, balance, augmentation */
  double learning_rate;       /* base rate of Adam; default 1e-3 */
  double weight_decay;        /* AdamW decay on convolution weights (not biases); default 1e-4 */
  int warmup_steps;           /* linear warm-up; default 50 */
  gboolean cosine_decay;      /* cosine decay to min_learning_rate_fraction; default TRUE */
  double min_learning_rate_fraction; /* default 0.05 */
  double dice_weight;         /* weight of the soft Dice term of the loss; default 0.5 */
  int validate_every;         /* steps between validations (one "epoch"); default 200 */
  int patience;               /* validations without improvement before stopping early;
                                 0 = never stop early; default 0 */
  guint64 seed;               /* initialisation and patches; default 1 */
  int max_restarts;           /* new initialisations allowed when the output goes constant
                                 (a dead network); default 4 */
  const char *checkpoint_path; /* resumable state, rewritten atomically every
                                  checkpoint_every steps; NULL = none */
  int checkpoint_every;       /* default = validate_every */
  const char *best_model_path; /* best model so far, rewritten atomically on improvement;
                                  NULL = none */
  const char *log_path;       /* CSV log: step,loss,learning_rate,validation_auc,seconds,event */
  gboolean resume;            /* continue from checkpoint_path when it exists */
  const ReteModel *start_model; /* fine-tune from its weights (architecture taken from it) */
  const char *const *metadata; /* key, value, key, value, ..., NULL: written into every model
                                  saved (preprocessing, data, command) */
} ReteTrainConfig;

RETE_API void rete_train_config_init (ReteTrainConfig *config);
RETE_API gboolean rete_train_config_check (const ReteTrainConfig *config, GError **error);
/* The learning rate at a step (warm-up, then constant or cosine). */
RETE_API double rete_train_learning_rate (const ReteTrainConfig *config, int step);

/* What training reports along the way and at the end. */
typedef struct {
  int step;                 /* steps done */
  int restarts;             /* new initialisations after a dead (constant) output */
  double loss;              /* mean training loss over the last logging interval */
  double validation_auc;    /* last validation AUC (NaN before the first) */
  double best_validation_auc; /* NaN without a validation set */
  int best_step;
  gboolean stopped_early;
  double seconds;           /* wall-clock training time of this run (without a resumed part) */
} ReteTrainReport;

/* Trains and returns the best model (by validation AUC; the last one without a validation
 * set) with metadata: the config's, the architecture, "training_steps", "training_seed",
 * "validation_auc", "best_step". validation may be NULL / n_validation 0. progress may be NULL;
 * returning FALSE cancels (RETE_ERROR_CANCELLED; the checkpoint written so far stays, so the
 * run can be resumed). report may be NULL. */
RETE_API ReteModel *rete_train (const ReteTrainConfig *config,
                                const ReteTrainSample *training, int n_training,
                                const ReteTrainSample *validation, int n_validation,
                                ReteProgressFunc progress, gpointer progress_data,
                                ReteTrainReport *report, GError **error);

/* Validation AUC of a model over pairs (pooled pixels inside their fields of view). */
RETE_API double rete_train_validate (const ReteModel *model, const ReteTrainSample *validation,
                                     int n_validation, GError **error);

G_END_DECLS

#endif /* RETE_TRAIN_H */
