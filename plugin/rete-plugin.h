/* rete-plugin.h — what the procedures of the Rete GIMP 2.10 plug-in share.
 *
 * plugin/ is glue only: it moves pixels between GIMP drawables and librete's ReteImage,
 * builds layers, shows dialogs and reports progress and errors. Every computation is a
 * librete call (vessel/, nn/), so that the `rete` command, the tests and a later GIMP 3
 * front end get the same numbers from the same code.
 *
 * All procedures live in one binary (plug-ins/rete-gimp/rete-gimp): GIMP starts a new process
 * per call anyway, and one binary shares the pixel glue, the model chooser, the text domain
 * and one install folder (with its translations) instead of five copies of each.
 */
#ifndef RETE_PLUGIN_H
#define RETE_PLUGIN_H

#include <libgimp/gimp.h>
#include <gegl.h>
#include <glib/gi18n-lib.h>

#include "rete_vessel.h"

G_BEGIN_DECLS

#define PLUG_IN_BINARY "rete-gimp"
#define PLUG_IN_MENU   "<Image>/Filters/Retina"
#define PLUG_IN_AUTHOR "The Rete authors"
#define PLUG_IN_YEAR   "2026"

/* The caution every dialog shows (and every procedure's help repeats). */
#define PLUGIN_CAUTION \
  N_("A research and grading aid, not a diagnostic device: every result must be checked by a " \
     "qualified person under local regulations and licensed practice.")

/* Error domain of the plug-in's own checks (librete's errors keep their domains). */
#define PLUGIN_ERROR (plugin_error_quark ())
GQuark plugin_error_quark (void);

/* ---- procedures: registration and run, one pair per procedure file ---- */
void vessel_map_query (void);
void vessel_map_run (const gchar *name, gint nparams, const GimpParam *param,
                     gint *nreturn_vals, GimpParam **return_vals);
void field_of_view_query (void);
void field_of_view_run (const gchar *name, gint nparams, const GimpParam *param,
                        gint *nreturn_vals, GimpParam **return_vals);
void agreement_query (void);
void agreement_run (const gchar *name, gint nparams, const GimpParam *param,
                    gint *nreturn_vals, GimpParam **return_vals);
void models_query (void);
void models_run (const gchar *name, gint nparams, const GimpParam *param,
                 gint *nreturn_vals, GimpParam **return_vals);
void train_query (void);
void train_run (const gchar *name, gint nparams, const GimpParam *param,
                gint *nreturn_vals, GimpParam **return_vals);
void measure_query (void);
void measure_run (const gchar *name, gint nparams, const GimpParam *param,
                  gint *nreturn_vals, GimpParam **return_vals);

/* ---- return values (pixels.c) ---- */
/* Fills values[0] with `status` and values[1] with the message (as GIMP's own file plug-ins
 * report errors: the PDB then shows the message, Script-Fu prints it). Sets *n to 2. */
void plugin_return_error (GimpParam *values, gint *n, GimpPDBStatusType status,
                          const char *message);
/* The same for a GError, which is freed. */
void plugin_return_gerror (GimpParam *values, gint *n, GimpPDBStatusType status, GError *error);
/* Shows a message to the user when one is present (INTERACTIVE) and always logs it. */
void plugin_show_error (GimpRunMode run_mode, const char *message);

/* ---- pixels between GIMP and librete (pixels.c); always an explicit babl float format ---- */
/* The photograph in a drawable: R'G'B' (3 channels) or Y' (1 channel) float, non-linear
 * values as stored, alpha dropped. Indexed drawables are refused with a message. */
ReteImage *plugin_read_photograph (gint32 drawable, GError **error);
/* A map, mask or reference layer as one channel: grey as stored; colour layers with
 * R = G = B give R exactly, other colour layers Rec. 709 luma (librete's luminance
 * channel); transparent pixels count as black (values are premultiplied by alpha). */
ReteImage *plugin_read_map (gint32 drawable, GError **error);
/* The selection of the image under the drawable's rectangle `rect` (drawable coordinates),
 * 0..1, one channel. */
ReteImage *plugin_read_selection (gint32 image, gint32 drawable, const ReteRect *rect,
                                  GError **error);
/* Writes a one-channel image into a drawable (grey values; an RGB drawable gets R=G=B). */
void plugin_write_grey (gint32 drawable, const ReteImage *grey);

/* A new layer of the image's base type (RGB or GRAY, no alpha) holding a one-channel map,
 * inserted into `parent` (0 = top level) at `position`, with the drawable's offsets. */
gint32 plugin_add_grey_layer (gint32 image, gint32 like_drawable, gint32 parent, gint position,
                              const char *name, const ReteImage *grey);
/* A layer filled with `colour` whose alpha is `mask` (one channel, 0..1): a coloured overlay. */
gint32 plugin_add_colour_layer (gint32 image, gint32 like_drawable, gint32 parent, gint position,
                                const char *name, const GimpRGB *colour, const ReteImage *mask,
                                double opacity);
/* An RGB image for coloured layers made from `drawable`: its own image when RGB, else a new
 * RGB image of the drawable's size (then *new_image is set to it; else -1). */
gint32 plugin_rgb_image_for (gint32 drawable, gint32 *new_image, GError **error);
/* TRUE when `drawable` can be read as a photograph or map (not indexed); else a message. */
gboolean plugin_check_drawable (gint32 drawable, const char *role, GError **error);

/* ---- progress (pixels.c) ---- */
/* A ReteProgressFunc that drives GIMP's progress bar (user_data unused). GIMP 2.10 cancels a
 * plug-in by ending its process: every procedure therefore computes first and adds its layers
 * only at the end, inside one undo group, so a cancelled run leaves nothing half made. */
gboolean plugin_progress (double fraction, const char *message, gpointer user_data);

/* ---- models (models.c) ---- */
typedef struct {
  char *name;    /* shown in the chooser and used as the PDB `model` argument */
  char *path;    /* the .safetensors file */
  gboolean own;  /* TRUE: the user's own (in the GIMP profile), FALSE: shipped */
} PluginModelInfo;

/* Folder of the user's own models: <GIMP profile>/rete/models (created on demand). */
char *plugin_models_user_dir (void);
/* Shipped models first (name order), then the user's own. Free with plugin_models_free. */
GPtrArray *plugin_models_list (void);
void plugin_models_free (GPtrArray *models);
/* A model named in the chooser, or a path to a model file. NULL with a message that lists
 * the available names when it is neither. */
char *plugin_model_resolve (const char *name_or_path, GError **error);
/* Loads a model (a ReteModel from nn/); NULL and an error when unavailable. */
ReteModel *plugin_model_load (const char *name_or_path, GError **error);
void plugin_model_free (ReteModel *model);

/* ---- i18n and help (main.c) ---- */
const char *plugin_locale_dir (void);
/* The folder holding the plug-in binary. */
const char *plugin_binary_dir (void);

G_END_DECLS

#endif /* RETE_PLUGIN_H */
