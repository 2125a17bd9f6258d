/* train.h — the training procedure: settings, training pairs (from folders and open images),
 * the core and the dialog. */
#ifndef RETE_PLUGIN_TRAIN_H
#define RETE_PLUGIN_TRAIN_H

#include "rete-plugin.h"

G_BEGIN_DECLS

#define TRAIN_PROC "plug-in-rete-train"
#define TRAIN_ROLE "rete-train"

typedef enum {
  TRAIN_SIZE_TINY,      /* 3 levels, 2 base filters: trains in minutes, rougher maps */
  TRAIN_SIZE_STANDARD,  /* 3 levels, 16 base filters: the shipped standard model's size */
} TrainSize;

/* Settings kept between runs (plain data). */
typedef struct {
  gchar photos[1024];       /* folder of photographs, "" = none */
  gchar annotations[1024];  /* folder of annotations */
  gchar masks[1024];        /* folder of FOV masks, "" = detect */
  gint use_open_images;     /* also open images with a reference layer */
  gint size_preset;         /* TrainSize */
  gint steps;
  gchar start_model[256];   /* "" = from scratch */
  gchar model_name[128];
} TrainConfig;

typedef struct {
  char *name;
  ReteImage *photo, *target, *fov;
  float *input;             /* (C, H, W) prepared network input */
} TrainPair;

typedef struct {
  char *model_path;
  double validation_auc;
  int steps_done;
  gboolean stopped;         /* the user stopped it */
  gboolean kept;            /* a best model so far was written */
} TrainOutcome;

void train_config_init (TrainConfig *config);
void train_pair_free (TrainPair *pair);
char *train_model_path (const char *name);
gboolean train_pairs_from_folders (const TrainConfig *config, GPtrArray *pairs, GError **error);
gboolean train_pairs_from_open_images (GPtrArray *pairs, GError **error);
gboolean train_pair_from_image (gint32 image, gint32 reference, GPtrArray *pairs, GError **error);
/* The layer marking the reference of an open image, or -1. */
gint32 train_reference_layer (gint32 image);
/* Trains on the pairs and saves the model; on failure outcome says whether it was stopped
 * and whether a best model so far was kept. */
gboolean train_core (const TrainConfig *config, GPtrArray *pairs, ReteProgressFunc progress,
                     gpointer progress_data, TrainOutcome *outcome, GError **error);

/* The dialog and the training with its own progress window (loss, validation AUC, Stop).
 * FALSE with no error when cancelled before training. */
gboolean train_dialog (TrainConfig *config, TrainOutcome *outcome, GError **error);

G_END_DECLS

#endif /* RETE_PLUGIN_TRAIN_H */
