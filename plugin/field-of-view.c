/* field-of-view.c — "Field of View": the lit aperture of a fundus photograph as a layer
 * (white inside), and optionally as the selection or as a layer mask of the photograph.
 * Detection is librete's (rete_fov_detect). */
#include "config.h"

#include <string.h>

#include "rete-plugin.h"
#include "dialogs.h"

#define PLUG_IN_PROC "plug-in-rete-field-of-view"
#define PLUG_IN_ROLE "rete-field-of-view"
#define N_ARGS 8

typedef struct {
  gdouble erode_rim;   /* pixels */
  gdouble threshold;   /* 0 = automatic */
  gint add_layer;
  gint as_selection;
  gint as_layer_mask;
} FieldOfViewConfig;

static void
config_init (FieldOfViewConfig *config)
{
  ReteFovParams p;

  rete_fov_params_init (&p);
  config->erode_rim = p.erode_rim;
  config->threshold = p.threshold;
  config->add_layer = TRUE;
  config->as_selection = FALSE;
  config->as_layer_mask = FALSE;
}

static gboolean
config_check (const FieldOfViewConfig *c, gint32 drawable, GError **error)
{
  if (!(c->erode_rim >= 0.0 && c->erode_rim <= 200.0))
    g_set_error (error, PLUGIN_ERROR, 0, _("Field of view: erode-rim must lie in [0, 200] pixels."));
  else if (!(c->threshold >= 0.0 && c->threshold < 1.0))
    g_set_error (error, PLUGIN_ERROR, 0,
                 _("Field of view: threshold must be 0 (automatic) or a level in (0, 1)."));
  else if (!c->add_layer && !c->as_selection && !c->as_layer_mask)
    g_set_error (error, PLUGIN_ERROR, 0,
                 _("Field of view: nothing to make; ask for a layer, the selection or a layer mask."));
  else if (c->as_layer_mask && !gimp_item_is_layer (drawable))
    g_set_error (error, PLUGIN_ERROR, 0,
                 _("Field of view: a layer mask needs a layer, not a channel or mask."));
  else if (c->as_layer_mask && gimp_layer_get_mask (drawable) > 0)
    g_set_error (error, PLUGIN_ERROR, 0,
                 _("Field of view: the layer already has a layer mask; apply or delete it first."));
  else
    return TRUE;
  return FALSE;
}

/* The core, shared with any future preview: the photograph's field of view. */
static ReteImage *
field_of_view_core (gint32 image, gint32 drawable, const FieldOfViewConfig *config, GError **error)
{
  ReteFovParams params;
  g_autoptr (ReteImage) photo = plugin_read_photograph (drawable, error);

  if (!photo)
    return NULL;
  rete_fov_params_init (&params);
  params.erode_rim = config->erode_rim;
  params.threshold = config->threshold;
  gimp_progress_update (0.3);
  return rete_fov_detect (photo, &params, error);
}

/* Replaces the selection by the field of view (through a channel of the image's size). */
static gboolean
select_fov (gint32 image, gint32 drawable, const ReteImage *fov, GError **error)
{
  GimpRGB black = { 0, 0, 0, 1 };
  g_autoptr (ReteImage) full = rete_image_new (gimp_image_width (image),
                                               gimp_image_height (image), 1, error);
  gint32 channel;
  int off_x, off_y;

  if (!full)
    return FALSE;
  gimp_drawable_offsets (drawable, &off_x, &off_y);
  if (!rete_image_paste (full, fov, off_x, off_y, error))
    return FALSE;
  channel = gimp_channel_new (image, _("Field of view"), full->width, full->height, 50.0, &black);
  if (channel < 0 || !gimp_image_insert_channel (image, channel, 0, 0))
    {
      g_set_error (error, PLUGIN_ERROR, 0, _("GIMP could not make the selection: %s"),
                   gimp_get_pdb_error ());
      return FALSE;
    }
  plugin_write_grey (channel, full);
  gimp_image_select_item (image, GIMP_CHANNEL_OP_REPLACE, channel);
  gimp_image_remove_channel (image, channel);
  return TRUE;
}

static gboolean
field_of_view_dialog (FieldOfViewConfig *config)
{
  GtkWidget *dialog, *vbox, *table;
  gboolean ok;

  gimp_ui_init (PLUG_IN_BINARY, FALSE);
  dialog = plugin_dialog_new (_("Field of View"), PLUG_IN_ROLE, PLUG_IN_PROC,
                              _("Finds the lit, round aperture of the photograph (its field of "
                                "view) and makes it a layer, the selection or a layer mask. "
                                "Vessel maps and agreement figures are counted inside it."),
                              NULL, &vbox);
  table = plugin_table_new (2);
  gtk_box_pack_start (GTK_BOX (vbox), table, FALSE, FALSE, 0);
  plugin_scale (table, 0, _("_Erode the rim (pixels):"), &config->erode_rim, 0, 50, 1, 0,
                _("Pixels taken off the aperture's rim, whose bright or dark ring filters may "
                  "take for a vessel"));
  plugin_scale (table, 1, _("_Brightness threshold:"), &config->threshold, 0, 0.99, 0.01, 2,
                _("0 finds the level from the histogram; otherwise pixels brighter than this "
                  "are inside"));
  gtk_box_pack_start (GTK_BOX (vbox), plugin_check_button (_("Add a field-of-view _layer"),
                                                           &config->add_layer), FALSE, FALSE, 0);
  gtk_box_pack_start (GTK_BOX (vbox), plugin_check_button (_("Make it the _selection"),
                                                           &config->as_selection), FALSE, FALSE, 0);
  gtk_box_pack_start (GTK_BOX (vbox), plugin_check_button (_("Add it as the photograph's layer _mask"),
                                                           &config->as_layer_mask), FALSE, FALSE, 0);
  gtk_widget_show (dialog);
  ok = gimp_dialog_run (GIMP_DIALOG (dialog)) == GTK_RESPONSE_OK;
  gtk_widget_destroy (dialog);
  return ok;
}

void
field_of_view_query (void)
{
  static const GimpParamDef args[] = {
    { GIMP_PDB_INT32,    "run-mode",      "The run mode { RUN-INTERACTIVE (0), RUN-NONINTERACTIVE (1), RUN-WITH-LAST-VALS (2) }" },
    { GIMP_PDB_IMAGE,    "image",         "Input image" },
    { GIMP_PDB_DRAWABLE, "drawable",      "The photograph (RGB or grey)" },
    { GIMP_PDB_FLOAT,    "erode-rim",     "Pixels removed from the aperture's rim (0..200, default 0)" },
    { GIMP_PDB_FLOAT,    "threshold",     "Brightness level above which a pixel is inside: 0 = automatic (from the histogram), else in (0, 1)" },
    { GIMP_PDB_INT32,    "add-layer",     "Add a field-of-view layer (white inside) { FALSE (0), TRUE (1) }" },
    { GIMP_PDB_INT32,    "as-selection",  "Replace the selection by the field of view { FALSE (0), TRUE (1) }" },
    { GIMP_PDB_INT32,    "as-layer-mask", "Add the field of view as the drawable's layer mask { FALSE (0), TRUE (1) }" },
  };
  static const GimpParamDef return_vals[] = {
    { GIMP_PDB_LAYER, "fov-layer",       "The new field-of-view layer, or -1" },
    { GIMP_PDB_FLOAT, "inside-fraction", "Fraction of the frame inside the field of view" },
  };
  G_STATIC_ASSERT (G_N_ELEMENTS (args) == N_ARGS);

  gimp_install_procedure (PLUG_IN_PROC,
                          N_("Find the field of view of a retinal photograph"),
                          "Finds the lit, circular (or cropped circular) aperture of a fundus "
                          "photograph and adds it as a layer (white inside, black outside), "
                          "and optionally as the selection or the photograph's layer mask. "
                          "A research and grading aid, not a diagnostic device: results must be "
                          "checked by a qualified person under local regulations and licensed "
                          "practice.",
                          PLUG_IN_AUTHOR, PLUG_IN_AUTHOR, PLUG_IN_YEAR,
                          N_("_Field of View..."),
                          "RGB*, GRAY*",
                          GIMP_PLUGIN,
                          G_N_ELEMENTS (args), G_N_ELEMENTS (return_vals),
                          args, return_vals);
  gimp_plugin_menu_register (PLUG_IN_PROC, PLUG_IN_MENU);
}

void
field_of_view_run (const gchar *name, gint nparams, const GimpParam *param,
                   gint *nreturn_vals, GimpParam **return_vals)
{
  static GimpParam values[3];
  GimpRunMode run_mode = param[0].data.d_int32;
  gint32 image = param[1].data.d_image;
  gint32 drawable = param[2].data.d_drawable;
  FieldOfViewConfig config;
  g_autoptr (ReteImage) fov = NULL;
  gint32 layer = -1;
  GError *error = NULL;

  *return_vals = values;
  config_init (&config);
  switch (run_mode)
    {
    case GIMP_RUN_INTERACTIVE:
      gimp_get_data (PLUG_IN_PROC, &config);
      if (!field_of_view_dialog (&config))
        {
          values[0].type = GIMP_PDB_STATUS;
          values[0].data.d_status = GIMP_PDB_CANCEL;
          *nreturn_vals = 1;
          return;
        }
      break;
    case GIMP_RUN_NONINTERACTIVE:
      if (nparams != N_ARGS)
        {
          g_autofree char *message =
            g_strdup_printf (_("%s takes %d arguments, %d were given."), PLUG_IN_PROC, N_ARGS,
                             nparams);
          plugin_return_error (values, nreturn_vals, GIMP_PDB_CALLING_ERROR, message);
          return;
        }
      config.erode_rim = param[3].data.d_float;
      config.threshold = param[4].data.d_float;
      config.add_layer = param[5].data.d_int32 != 0;
      config.as_selection = param[6].data.d_int32 != 0;
      config.as_layer_mask = param[7].data.d_int32 != 0;
      break;
    case GIMP_RUN_WITH_LAST_VALS:
      gimp_get_data (PLUG_IN_PROC, &config);
      break;
    }
  if (!config_check (&config, drawable, &error))
    {
      plugin_show_error (run_mode, error->message);
      plugin_return_gerror (values, nreturn_vals, GIMP_PDB_CALLING_ERROR, error);
      return;
    }

  gimp_progress_init (_("Finding the field of view"));
  if (!(fov = field_of_view_core (image, drawable, &config, &error)))
    goto fail;

  gimp_image_undo_group_start (image);
  if (config.add_layer)
    {
      gint32 parent = gimp_item_get_parent (drawable);

      layer = plugin_add_grey_layer (image, drawable, parent > 0 ? parent : 0,
                                     MAX (gimp_image_get_item_position (image, drawable), 0),
                                     _("Field of view"), fov);
    }
  if ((config.add_layer && layer < 0)
      || (config.as_selection && !select_fov (image, drawable, fov, &error)))
    {
      if (layer > 0)
        gimp_image_remove_layer (image, layer);
      gimp_image_undo_group_end (image);
      if (!error)
        g_set_error (&error, PLUGIN_ERROR, 0, _("GIMP could not add the layer: %s"),
                     gimp_get_pdb_error ());
      goto fail;
    }
  if (config.as_layer_mask)
    {
      gint32 mask = gimp_layer_create_mask (drawable, GIMP_ADD_MASK_WHITE);

      gimp_layer_add_mask (drawable, mask);
      plugin_write_grey (mask, fov);
    }
  gimp_image_undo_group_end (image);
  gimp_progress_update (1.0);
  gimp_progress_end ();

  if (run_mode != GIMP_RUN_NONINTERACTIVE)
    gimp_displays_flush ();
  if (run_mode == GIMP_RUN_INTERACTIVE)
    gimp_set_data (PLUG_IN_PROC, &config, sizeof config);
  values[0].type = GIMP_PDB_STATUS;
  values[0].data.d_status = GIMP_PDB_SUCCESS;
  values[1].type = GIMP_PDB_LAYER;
  values[1].data.d_layer = layer;
  values[2].type = GIMP_PDB_FLOAT;
  values[2].data.d_float = (double) rete_mask_count (fov) / rete_image_n_pixels (fov);
  *nreturn_vals = 3;
  return;

fail:
  gimp_progress_end ();
  plugin_show_error (run_mode, error->message);
  plugin_return_gerror (values, nreturn_vals, GIMP_PDB_EXECUTION_ERROR, error);
}
