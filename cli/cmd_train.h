/* cmd_train.h — what `rete train` and `rete sweep` share: training pairs read from folders
 * (photograph, annotation, optional field-of-view mask, matched by file name) and prepared
 * for the network, and the validation figures of a model. */
#ifndef RETE_CMD_TRAIN_H
#define RETE_CMD_TRAIN_H

#include "rete_cli.h"
#include "rete_train.h"

G_BEGIN_DECLS

typedef struct {
  char *name;         /* the photograph's stem */
  ReteImage *input;   /* prepared network input (C, H, W) */
  ReteImage *target;  /* annotation, 0/1 */
  ReteImage *fov;     /* field of view, 0/1 (given or detected) */
} ReteTrainPair;

typedef struct {
  char *annotations;  /* folder (or file) of manual annotations */
  char *masks;        /* folder of FOV masks, or NULL = detect */
  char *channel;      /* "green" (default), "luminance", "red", "blue" */
  gboolean no_clahe;
} ReteTrainDataOptions;

/* Reads every photograph of `arguments` with its annotation (and mask) and prepares it with
 * the preprocessing `model` declares. Annotation or mask of another size, a missing
 * annotation, an unreadable file: an error naming the file. Non-binary annotations are cut at
 * half with a warning. Returns a GPtrArray of ReteTrainPair. */
GPtrArray *rete_train_pairs_load (char **arguments, const ReteTrainDataOptions *options,
                                  const ReteModel *model, GError **error);
void rete_train_pair_free (ReteTrainPair *pair);

/* A model with no weights worth keeping that only carries the preprocessing metadata chosen
 * by the options (channel, CLAHE, standardisation), for rete_train_pairs_load and to be
 * copied into the trained model. */
ReteModel *rete_train_preprocessing_model (const ReteTrainDataOptions *options, GError **error);
/* The preprocessing metadata of `model` as key, value, ..., NULL (newly allocated strv). */
char **rete_train_preprocessing_metadata (const ReteModel *model);

/* Splits `pairs` into training and validation by a comma-separated list of stems; every
 * name must be found. Arrays of ReteTrainSample pointing into the pairs. */
gboolean rete_train_pairs_split (GPtrArray *pairs, const char *validation_names,
                                 GArray **training, GArray **validation, GError **error);

/* AUC and, at threshold 0.5, accuracy, sensitivity, specificity over the validation pairs
 * (pixels pooled inside their fields of view). */
typedef struct {
  double auc, accuracy, sensitivity, specificity;
  double seconds_per_image; /* inference time */
} ReteTrainFigures;
gboolean rete_train_figures (const ReteModel *model, GArray *validation,
                             ReteTrainFigures *figures, GError **error);

/* "standard", "tiny" -> architecture; FALSE with a message otherwise. */
gboolean rete_train_size_preset (const char *name, ReteUnetConfig *config, GError **error);

G_END_DECLS

#endif /* RETE_CMD_TRAIN_H */
