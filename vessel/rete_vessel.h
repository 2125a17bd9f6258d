/* rete_vessel.h — the main job in one call: photograph -> field of view -> preprocessing ->
 * vessel map (learned or classical) -> binary vessel map. The `rete` command and the GIMP
 * plug-in both call this, so that a map made in either is the same map. */
#ifndef RETE_VESSEL_H
#define RETE_VESSEL_H

#include "rete_image.h"
#include "rete_preprocess.h"
#include "rete_fov.h"
#include "rete_filters.h"
#include "rete_binary.h"

G_BEGIN_DECLS

typedef enum {
  RETE_METHOD_LEARNED,      /* U-Net from a model file (nn/) */
  RETE_METHOD_FRANGI,       /* Frangi vesselness */
  RETE_METHOD_MATCHED,      /* Gaussian matched filter (Chaudhuri 1989) */
  RETE_METHOD_MATCHED_FDOG, /* matched filter with FDOG (Zhang 2010) */
  RETE_METHOD_LINE,         /* multiscale line detector (Nguyen 2013) */
} ReteMethod;
#define RETE_N_METHODS 5

RETE_API const char *rete_method_name (ReteMethod method);  /* "learned", "frangi", "matched", "matched-fdog", "line" */
RETE_API const char *rete_method_label (ReteMethod method); /* "U-Net", "Frangi", "Matched filter", ... */
RETE_API gboolean rete_method_from_name (const char *name, ReteMethod *method, GError **error);

typedef struct _ReteModel ReteModel; /* nn/rete_nn.h */

typedef struct {
  ReteMethod method;
  ReteChannel channel;        /* classical methods: channel read (default green) */
  gboolean use_clahe;         /* classical methods: CLAHE inside the FOV first (default TRUE) */
  ReteClaheParams clahe;
  ReteFovParams fov;
  ReteFrangiParams frangi;
  ReteMatchedParams matched;  /* use_fdog is set from the method */
  ReteLineParams line;
  const ReteModel *model;     /* learned method: the network (not owned) */
  ReteBinaryParams binary;
} ReteVesselParams;

RETE_API void rete_vessel_params_init (ReteVesselParams *params);

/* Sets the method and that method's default rule for the binary map: Otsu for the learned
 * method (its probabilities are bimodal), and for the classical filters (whose scores are
 * heavy-tailed, where Otsu marks only the widest vessels) the level that marks
 * RETE_CLASSICAL_VESSEL_FRACTION of the FOV. Measured with `rete vessels -t RULE` and
 * `rete agreement` on CHASE_DB1 Image_01L and Image_05R, Frangi, observer 1: Dice 0.47 and
 * 0.53 with Otsu, 0.65 and 0.72 with fraction 0.13 (0.59/0.66 at 0.09, 0.65/0.72 at 0.16). */
#define RETE_CLASSICAL_VESSEL_FRACTION 0.13
RETE_API void rete_vessel_params_set_method (ReteVesselParams *params, ReteMethod method);

/* Short description of the method and its settings, for layer and file names:
 * "Frangi σ 1–4 β 0.5", "U-Net standard", ... (newly allocated). */
RETE_API char *rete_vessel_params_describe (const ReteVesselParams *params);

typedef struct {
  ReteImage *fov;          /* 0/1, the given one (copied) or the detected one */
  ReteImage *probability;  /* vessel map in [0,1], 0 outside the FOV */
  ReteImage *binary;       /* 0/1 binary vessel map */
  double threshold;        /* level that made the binary map */
} ReteVesselResult;

RETE_API void rete_vessel_result_clear (ReteVesselResult *result);

/* Runs the main job. `fov` may be NULL (then detected with params->fov). Progress in [0,1];
 * returning FALSE from it cancels (RETE_ERROR_CANCELLED). On failure `result` is left empty. */
RETE_API gboolean rete_vessel_run (const ReteImage *photo, const ReteImage *fov,
                                   const ReteVesselParams *params, ReteVesselResult *result,
                                   ReteProgressFunc progress, gpointer progress_data,
                                   GError **error);

G_END_DECLS

#endif /* RETE_VESSEL_H */
