/* agreement.h — the agreement procedure: settings, core (shared by the dialog and the run),
 * the agreement layer, the table as text, and the dialog. */
#ifndef RETE_PLUGIN_AGREEMENT_H
#define RETE_PLUGIN_AGREEMENT_H

#include "rete-plugin.h"
#include "rete_agreement.h"

G_BEGIN_DECLS

#define AGREEMENT_PROC "plug-in-rete-agreement"
#define AGREEMENT_ROLE "rete-agreement"

typedef enum {
  AGREEMENT_THRESHOLD_FIXED,       /* the slider's level */
  AGREEMENT_THRESHOLD_BEST_DICE,   /* the level of the best Dice (F1) */
  AGREEMENT_THRESHOLD_BEST_YOUDEN, /* the level of the best Youden's J */
} AgreementThresholdMode;

typedef enum {
  AGREEMENT_LAYER_NONE,
  AGREEMENT_LAYER_PLAIN,
  AGREEMENT_LAYER_WITH_LEGEND,
} AgreementLayerMode;

/* Settings kept between runs (plain data). Drawable IDs are not kept: they change between
 * sessions; the dialog offers the open layers. */
typedef struct {
  gint threshold_mode;  /* AgreementThresholdMode */
  gdouble threshold;    /* in [0, 1] */
  gint layer_mode;      /* AgreementLayerMode */
  GimpRGB true_positive_colour;
  GimpRGB false_positive_colour;
  GimpRGB false_negative_colour;
} AgreementConfig;

/* What the agreement is computed on. */
typedef struct {
  gint32 map;        /* vessel map (scores or 0/1) */
  gint32 reference;  /* reference vessel map (0/1; >= 0.5 is vessel) */
  gint32 fov;        /* field of view, or -1 for every pixel */
} AgreementInputs;

/* The figures at the chosen threshold, with the curve. */
typedef struct {
  ReteAgreement *agreement;  /* AUC, AP, ROC curve, best thresholds */
  double threshold;          /* level used for the figures below */
  ReteConfusion confusion;
  ReteRates rates;
  ReteImage *map, *reference, *fov; /* the pixels read (fov may be NULL) */
} AgreementResult;

void agreement_config_init (AgreementConfig *config);
void agreement_result_clear (AgreementResult *result);

/* The core: reads the three layers, checks them, computes the figures (librete). */
gboolean agreement_core (const AgreementInputs *inputs, const AgreementConfig *config,
                         AgreementResult *result, GError **error);
/* Figures at another threshold (a slider), without reading or sorting again. */
gboolean agreement_set_threshold (AgreementResult *result, const AgreementConfig *config,
                                  GError **error);

/* The table: CSV (header and one row, '.' decimals whatever the locale), or tab-separated
 * for the clipboard (label, value per line). Newly allocated. */
char *agreement_table_csv (const AgreementInputs *inputs, const AgreementResult *result,
                           const AgreementConfig *config);
char *agreement_table_text (const AgreementResult *result);
gboolean agreement_save_csv (const char *path, const AgreementInputs *inputs,
                             const AgreementResult *result, const AgreementConfig *config,
                             GError **error);

/* Adds the agreement layer (and legend) to the map's image when it is RGB, else to the
 * reference's, else to a new RGB image (then *new_image is set; else -1). Returns the layer
 * or -1. */
gint32 agreement_add_layer (const AgreementInputs *inputs, const AgreementResult *result,
                            const AgreementConfig *config, gint32 *new_image, GError **error);

/* The dialog; TRUE on OK with inputs and config filled and the result computed. */
gboolean agreement_dialog (gint32 image, gint32 drawable, AgreementInputs *inputs,
                           AgreementConfig *config, AgreementResult *result);

G_END_DECLS

#endif /* RETE_PLUGIN_AGREEMENT_H */
