/* train_private.h — what train.c and checkpoint.c share (not installed). */
#ifndef RETE_TRAIN_PRIVATE_H
#define RETE_TRAIN_PRIVATE_H

#include "rete_train.h"

#include <stdio.h>

/* Everything a run needs to continue where it stopped. */
typedef struct {
  ReteUnetConfig unet;
  gsize n_params;
  float *params;       /* (n_params) current weights */
  float *best_params;  /* (n_params) weights of the best validation so far */
  float *adam_m;       /* (n_params) */
  float *adam_v;       /* (n_params) */
  gint64 adam_step;
  int step;            /* steps done */
  int restarts;
  int best_step;
  int validations_since_best;
  double best_auc;     /* NaN before the first validation */
  double last_auc;
  guint64 seed;        /* the run's seed */
  guint64 init_seed;   /* the seed of the current initialisation (changes on restart) */
  int total_steps;     /* the run's planned steps (a check on resume) */
  double seconds;      /* training time spent before this checkpoint */
} ReteTrainCheckpoint;

/* Written as a safetensors file (tensors params, best_params, adam_m, adam_v; the counters
 * as strings in __metadata__), atomically: temporary file beside it, then rename. */
gboolean rete_train_checkpoint_save (const ReteTrainCheckpoint *checkpoint, const char *path,
                                     GError **error);
/* Reads one back; every array newly allocated. */
gboolean rete_train_checkpoint_load (ReteTrainCheckpoint *checkpoint, const char *path,
                                     GError **error);
void rete_train_checkpoint_clear (ReteTrainCheckpoint *checkpoint);

/* train_support.c */
typedef struct {
  const RetePatchSampler *sampler;
  const RetePatchOptions *options;
  guint64 seed;
  int step, channels, patch;
  float *input, *target, *mask;  /* (batch, C, P, P), (batch, P, P), (batch, P, P) */
} ReteBatchJob;
/* rete_parallel_for body: cuts patches first .. last-1 of the job's step */
void rete_train_draw_range (int first, int last, gpointer job);
ReteModel *rete_train_model_from_params (const ReteUnetConfig *arch, const float *params,
                                         const ReteTrainConfig *config,
                                         const ReteTrainCheckpoint *state, GError **error);
void rete_train_log_line (FILE *log, int step, double loss, double learning_rate, double auc,
                          double seconds, const char *event);
gboolean rete_train_initialise (ReteUnet *net, const ReteTrainConfig *config, guint64 seed,
                                GError **error);

#endif /* RETE_TRAIN_PRIVATE_H */
