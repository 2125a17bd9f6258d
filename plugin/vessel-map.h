/* vessel-map.h — the vessel map procedure: its settings, its core (shared by the dialog's
 * preview and the real run) and its dialog. */
#ifndef RETE_PLUGIN_VESSEL_MAP_H
#define RETE_PLUGIN_VESSEL_MAP_H

#include "rete-plugin.h"

G_BEGIN_DECLS

#define VESSEL_MAP_PROC "plug-in-rete-vessel-map"
#define VESSEL_MAP_ROLE "rete-vessel-map"

/* Settings, kept between runs with gimp_set_data: plain data only (no pointers). */
typedef struct {
  gint method;              /* ReteMethod */
  gchar model[256];         /* learned method: model name or path */
  gint channel;             /* ReteChannel (classical methods) */
  gint use_clahe;           /* classical methods */
  gdouble frangi_sigma_min;
  gdouble frangi_sigma_max;
  gdouble frangi_beta;
  gdouble matched_sigma;
  gdouble matched_length;
  gint line_window;
  gint threshold_method;    /* ReteThresholdMethod */
  gdouble threshold;        /* FIXED: level; FRACTION: vessel fraction of the FOV */
  gint min_component;       /* pixels */
  gint add_overlay;
  gint add_fov_layer;
  GimpRGB overlay_colour;
  gdouble overlay_opacity;  /* percent */
} VesselMapConfig;

void vessel_map_config_init (VesselMapConfig *config);
/* Range checks of settings that came through the PDB; a message names the argument. */
gboolean vessel_map_config_check (const VesselMapConfig *config, GError **error);
/* librete's parameters from the settings; `model` (may be NULL for classical methods). */
void vessel_map_config_to_params (const VesselMapConfig *config, const ReteModel *model,
                                  ReteVesselParams *params);

typedef struct {
  ReteRect rect;            /* the part of the drawable that was processed */
  ReteVesselResult result;  /* maps of rect's size */
  char *description;        /* method and settings, for layer names */
} VesselMapOutput;

void vessel_map_output_clear (VesselMapOutput *output);

/* The core: reads the photograph in `drawable`, and runs librete's main job on `area`
 * (NULL = the selection's bounds, or the whole drawable without a selection), inside the
 * field of view detected on the whole photograph and the selection. Used by the preview
 * (area = what the preview shows) and by the real run. On failure `output` stays empty. */
gboolean vessel_map_core (gint32 image, gint32 drawable, const VesselMapConfig *config,
                          const ReteModel *model, const ReteRect *area, VesselMapOutput *output,
                          ReteProgressFunc progress, gpointer progress_data, GError **error);

/* The dialog; TRUE when the user pressed OK (config then holds the choices). */
gboolean vessel_map_dialog (gint32 image, gint32 drawable, VesselMapConfig *config);

G_END_DECLS

#endif /* RETE_PLUGIN_VESSEL_MAP_H */
