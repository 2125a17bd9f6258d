/* measure.c — "Vessel Measurements": the figures of a binary vessel map inside an optional
 * field of view (vessel area and length density, junctions, end points, segments, calibre,
 * tortuosity, fractal dimension; librete's rete_measure), shown in a table, saved as CSV
 * (librete's own CSV row, the same as `rete measure` writes), returned to scripts, and a
 * skeleton layer with the junctions and end points marked. */
#include "config.h"

#include <math.h>
#include <string.h>

#include "rete-plugin.h"
#include "dialogs.h"
#include "rete_measure.h"

#define PLUG_IN_PROC "plug-in-rete-measure"
#define PLUG_IN_ROLE "rete-measure"
#define N_ARGS 8

typedef struct {
  gdouble pixel_size_mm;       /* 0 = figures in pixels */
  gdouble min_segment_length;  /* pixels */
  gint add_layer;
} MeasureConfig;

typedef struct {
  gint32 map, fov;             /* fov -1 = whole frame */
} MeasureInputs;

static void
config_init (MeasureConfig *c)
{
  ReteMeasureParams p;

  rete_measure_params_init (&p);
  c->pixel_size_mm = 0.0;
  c->min_segment_length = p.min_segment_length;
  c->add_layer = TRUE;
}

static void
config_to_params (const MeasureConfig *c, ReteMeasureParams *p)
{
  rete_measure_params_init (p);
  if (c->pixel_size_mm > 0.0)
    {
      p->calibration = RETE_CALIBRATION_PIXEL_SIZE;
      p->pixel_size_mm = c->pixel_size_mm;
    }
  p->min_segment_length = c->min_segment_length;
  p->want_images = TRUE;
  p->progress = plugin_progress;
}

/* The core, shared by the dialog and the run. */
static ReteMeasurements *
measure_core (const MeasureInputs *in, const MeasureConfig *config, GError **error)
{
  ReteMeasureParams params;
  g_autoptr (ReteImage) map = NULL;
  g_autoptr (ReteImage) fov = NULL;

  config_to_params (config, &params);
  if (!(map = plugin_read_map (in->map, error))
      || (in->fov > 0 && !(fov = plugin_read_map (in->fov, error))))
    return NULL;
  if (!rete_measure_params_check (&params, map->width, map->height, NULL, error))
    return NULL;
  return rete_measure (map, fov, &params, error);
}

static gboolean
save_csv (const char *path, const MeasureInputs *in, const ReteMeasurements *m, GError **error)
{
  g_autofree char *name = gimp_item_get_name (in->map);
  g_autofree char *header = rete_measurements_csv_header (m);
  g_autofree char *row = rete_measurements_csv_row (m, name);
  g_autofree char *text = g_strconcat (header, row, NULL);
  GError *file_error = NULL;

  if (g_file_set_contents (path, text, -1, &file_error))
    return TRUE;
  g_set_error (error, PLUGIN_ERROR, 0, _("The table could not be saved: %s"), file_error->message);
  g_error_free (file_error);
  return FALSE;
}

/* The skeleton (white) and its junctions (red) and end points (yellow), each point drawn as a
 * 5 × 5 square so that it can be seen; in the map's image when RGB, else in a new image. */
static gint32
add_skeleton_layers (const MeasureInputs *in, const ReteMeasurements *m, gint32 *new_image,
                     GError **error)
{
  int w = m->width, h = m->height;
  g_autofree float *skeleton = g_new0 (float, (gsize) w * h * 4);
  g_autofree float *points = g_new0 (float, (gsize) w * h * 4);
  gint32 image = plugin_rgb_image_for (in->map, new_image, error);
  gint32 group, skeleton_layer, points_layer;
  int off_x = 0, off_y = 0;

  if (image < 0)
    return -1;
  for (int y = 0; y < h; y++)
    for (int x = 0; x < w; x++)
      {
        gsize i = (gsize) y * w + x;
        int type = (int) m->point_type->data[i];

        if (m->skeleton->data[i] >= 0.5f)
          for (int k = 0; k < 4; k++)
            skeleton[4 * i + k] = 1.0f;
        if (type == RETE_POINT_JUNCTION || type == RETE_POINT_END)
          for (int dy = -2; dy <= 2; dy++)
            for (int dx = -2; dx <= 2; dx++)
              if (x + dx >= 0 && x + dx < w && y + dy >= 0 && y + dy < h)
                {
                  float *p = points + 4 * ((gsize) (y + dy) * w + x + dx);

                  p[0] = 1.0f;
                  p[1] = type == RETE_POINT_JUNCTION ? 0.1f : 0.9f;
                  p[2] = 0.1f;
                  p[3] = 1.0f;
                }
      }

  if (*new_image < 0)
    gimp_drawable_offsets (in->map, &off_x, &off_y);
  gimp_image_undo_group_start (image);
  group = gimp_layer_group_new (image);
  gimp_item_set_name (group, _("Vessel skeleton"));
  gimp_image_insert_layer (image, group, 0, 0);
  skeleton_layer = gimp_layer_new (image, _("Skeleton (centre lines)"), w, h, GIMP_RGBA_IMAGE,
                                   100.0, GIMP_LAYER_MODE_NORMAL);
  points_layer = gimp_layer_new (image, _("Junctions (red) and end points (yellow)"), w, h,
                                 GIMP_RGBA_IMAGE, 100.0, GIMP_LAYER_MODE_NORMAL);
  if (skeleton_layer < 0 || points_layer < 0
      || !gimp_image_insert_layer (image, skeleton_layer, group, 0)
      || !gimp_image_insert_layer (image, points_layer, group, 0))
    {
      g_set_error (error, PLUGIN_ERROR, 0, _("GIMP could not add the skeleton layer: %s"),
                   gimp_get_pdb_error ());
      gimp_image_remove_layer (image, group);
      gimp_image_undo_group_end (image);
      return -1;
    }
  for (int i = 0; i < 2; i++)
    {
      gint32 layer = i ? points_layer : skeleton_layer;
      GeglBuffer *buffer = gimp_drawable_get_buffer (layer);

      gegl_buffer_set (buffer, GEGL_RECTANGLE (0, 0, w, h), 0, babl_format ("R'G'B'A float"),
                       i ? points : skeleton, GEGL_AUTO_ROWSTRIDE);
      g_object_unref (buffer);
      gimp_layer_set_offsets (layer, off_x, off_y);
    }
  gimp_image_undo_group_end (image);
  return skeleton_layer;
}

/* ---- dialog ---- */

typedef struct {
  MeasureInputs *inputs;
  MeasureConfig *config;
  ReteMeasurements **result;
  GtkWidget *dialog, *fov_combo, *table, *message;
  gint use_fov;
} MeasureDialog;

static gboolean
same_size (gint32 image, gint32 item, gpointer data)
{
  gint32 like = GPOINTER_TO_INT (data);

  return gimp_item_is_drawable (item) && !gimp_drawable_is_indexed (item) && item != like
         && gimp_drawable_width (item) == gimp_drawable_width (like)
         && gimp_drawable_height (item) == gimp_drawable_height (like);
}

static void
destroy_child (GtkWidget *widget, gpointer data)
{
  gtk_widget_destroy (widget);
}

static void
show_table (MeasureDialog *d)
{
  g_autofree ReteMeasureField *fields = NULL;
  int n;

  gtk_container_foreach (GTK_CONTAINER (d->table), destroy_child, NULL);
  if (!*d->result)
    return;
  n = rete_measurements_fields (*d->result, &fields);
  gtk_table_resize (GTK_TABLE (d->table), MAX (n, 1), 3);
  for (int i = 0; i < n; i++)
    {
      g_autofree char *value = isnan (fields[i].value) ? g_strdup (_("undefined"))
                               : fields[i].is_count ? g_strdup_printf ("%.0f", fields[i].value)
                                                    : g_strdup_printf ("%.4g", fields[i].value);
      GtkWidget *labels[3] = { gtk_label_new (fields[i].label), gtk_label_new (value),
                               gtk_label_new (fields[i].unit) };

      for (int k = 0; k < 3; k++)
        {
          gtk_misc_set_alignment (GTK_MISC (labels[k]), k == 1 ? 1.0 : 0.0, 0.5);
          gtk_table_attach (GTK_TABLE (d->table), labels[k], k, k + 1, i, i + 1, GTK_FILL, 0, 4, 0);
          gtk_widget_show (labels[k]);
        }
    }
}

static void
remeasure (MeasureDialog *d)
{
  GError *error = NULL;

  d->inputs->fov = -1;
  if (d->use_fov)
    gimp_int_combo_box_get_active (GIMP_INT_COMBO_BOX (d->fov_combo), &d->inputs->fov);
  g_clear_pointer (d->result, rete_measurements_free);
  *d->result = measure_core (d->inputs, d->config, &error);
  gtk_label_set_text (GTK_LABEL (d->message), error ? error->message : (*d->result)->notes);
  gtk_dialog_set_response_sensitive (GTK_DIALOG (d->dialog), GTK_RESPONSE_OK, *d->result != NULL);
  g_clear_error (&error);
  show_table (d);
}

static void
fov_toggled (GtkWidget *button, MeasureDialog *d)
{
  d->use_fov = gtk_toggle_button_get_active (GTK_TOGGLE_BUTTON (button));
  gtk_widget_set_sensitive (d->fov_combo, d->use_fov);
  remeasure (d);
}

static void
fov_changed (GtkWidget *combo, MeasureDialog *d)
{
  if (d->use_fov)
    remeasure (d);
}

static void
save_clicked (GtkWidget *button, MeasureDialog *d)
{
  GtkWidget *chooser;

  if (!*d->result)
    return;
  chooser = gtk_file_chooser_dialog_new (_("Save the Measurements"), GTK_WINDOW (d->dialog),
                                         GTK_FILE_CHOOSER_ACTION_SAVE,
                                         _("_Cancel"), GTK_RESPONSE_CANCEL,
                                         _("_Save"), GTK_RESPONSE_ACCEPT, NULL);
  gtk_file_chooser_set_do_overwrite_confirmation (GTK_FILE_CHOOSER (chooser), TRUE);
  gtk_file_chooser_set_current_name (GTK_FILE_CHOOSER (chooser), "measurements.csv");
  if (gtk_dialog_run (GTK_DIALOG (chooser)) == GTK_RESPONSE_ACCEPT)
    {
      g_autofree char *path = gtk_file_chooser_get_filename (GTK_FILE_CHOOSER (chooser));
      GError *error = NULL;

      if (!save_csv (path, d->inputs, *d->result, &error))
        {
          gtk_label_set_text (GTK_LABEL (d->message), error->message);
          g_error_free (error);
        }
    }
  gtk_widget_destroy (chooser);
}

static gboolean
measure_dialog (MeasureInputs *inputs, MeasureConfig *config, ReteMeasurements **result)
{
  MeasureDialog d = { .inputs = inputs, .config = config, .result = result };
  GtkWidget *vbox, *table, *button, *scrolled;
  GtkObject *adj;
  gboolean ok;

  gimp_ui_init (PLUG_IN_BINARY, FALSE);
  d.dialog = plugin_dialog_new (_("Vessel Measurements"), PLUG_IN_ROLE, PLUG_IN_PROC,
                                _("Measures a binary vessel map (white vessels) inside the field "
                                  "of view: vessel area and length density, junctions, end "
                                  "points, segments, calibre, tortuosity and fractal dimension. "
                                  "Figures are in pixels unless a pixel size is given."),
                                _("_Add Skeleton Layer"), &vbox);
  table = plugin_table_new (3);
  gtk_box_pack_start (GTK_BOX (vbox), table, FALSE, FALSE, 0);
  button = gtk_check_button_new_with_mnemonic (_("Inside the _field of view:"));
  gtk_toggle_button_set_active (GTK_TOGGLE_BUTTON (button), inputs->fov > 0);
  d.use_fov = inputs->fov > 0;
  gtk_table_attach (GTK_TABLE (table), button, 0, 1, 0, 1, GTK_FILL, 0, 0, 0);
  gtk_widget_show (button);
  d.fov_combo = gimp_drawable_combo_box_new (same_size, GINT_TO_POINTER (inputs->map));
  gimp_int_combo_box_connect (GIMP_INT_COMBO_BOX (d.fov_combo), inputs->fov,
                              G_CALLBACK (fov_changed), &d);
  gtk_widget_set_sensitive (d.fov_combo, d.use_fov);
  gtk_table_attach (GTK_TABLE (table), d.fov_combo, 1, 3, 0, 1, GTK_FILL | GTK_EXPAND, 0, 0, 0);
  gtk_widget_show (d.fov_combo);
  g_signal_connect (button, "toggled", G_CALLBACK (fov_toggled), &d);
  adj = plugin_scale (table, 1, _("_Pixel size (mm, 0 = pixels):"), &config->pixel_size_mm,
                      0, 0.05, 0.0005, 4, _("Side of one pixel in millimetres, for figures in mm"));
  g_signal_connect_swapped (adj, "value-changed", G_CALLBACK (remeasure), &d);
  adj = plugin_scale (table, 2, _("Prune _spurs under (pixels):"), &config->min_segment_length,
                      0, 50, 1, 0, _("Skeleton branches shorter than this are removed first"));
  g_signal_connect_swapped (adj, "value-changed", G_CALLBACK (remeasure), &d);

  scrolled = gtk_scrolled_window_new (NULL, NULL);
  gtk_scrolled_window_set_policy (GTK_SCROLLED_WINDOW (scrolled), GTK_POLICY_NEVER,
                                  GTK_POLICY_AUTOMATIC);
  gtk_widget_set_size_request (scrolled, -1, 300);
  gtk_box_pack_start (GTK_BOX (vbox), scrolled, TRUE, TRUE, 0);
  gtk_widget_show (scrolled);
  d.table = gtk_table_new (1, 3, FALSE);
  gtk_scrolled_window_add_with_viewport (GTK_SCROLLED_WINDOW (scrolled), d.table);
  gtk_widget_show (d.table);

  button = gtk_button_new_with_mnemonic (_("_Save CSV..."));
  g_signal_connect (button, "clicked", G_CALLBACK (save_clicked), &d);
  gtk_box_pack_start (GTK_BOX (vbox), button, FALSE, FALSE, 0);
  gtk_widget_show (button);
  d.message = gtk_label_new (NULL);
  gtk_label_set_line_wrap (GTK_LABEL (d.message), TRUE);
  gtk_box_pack_start (GTK_BOX (vbox), d.message, FALSE, FALSE, 0);
  gtk_widget_show (d.message);

  gtk_widget_show (d.dialog);
  remeasure (&d);
  ok = gimp_dialog_run (GIMP_DIALOG (d.dialog)) == GTK_RESPONSE_OK && *result;
  gtk_widget_destroy (d.dialog);
  return ok;
}

/* ---- registration and run ---- */

void
measure_query (void)
{
  static const GimpParamDef args[] = {
    { GIMP_PDB_INT32,    "run-mode",           "The run mode { RUN-INTERACTIVE (0), RUN-NONINTERACTIVE (1), RUN-WITH-LAST-VALS (2) }" },
    { GIMP_PDB_IMAGE,    "image",              "Input image" },
    { GIMP_PDB_DRAWABLE, "drawable",           "Binary vessel map (white vessels; >= 0.5 is vessel)" },
    { GIMP_PDB_DRAWABLE, "fov-drawable",       "Field of view (white inside) of the same size, or -1 for the whole frame" },
    { GIMP_PDB_FLOAT,    "pixel-size-mm",      "Side of one pixel in mm for figures in mm; 0 = figures in pixels" },
    { GIMP_PDB_FLOAT,    "min-segment-length", "Skeleton spurs shorter than this many pixels are pruned (default 10)" },
    { GIMP_PDB_INT32,    "add-layer",          "Add the skeleton layer with junctions and end points { FALSE (0), TRUE (1) }" },
    { GIMP_PDB_STRING,   "csv-file",           "Save the figures as CSV to this file (\"\" = do not save)" },
  };
  /* The table comes first as a string: the error message of a failed call takes that place
   * (as GIMP's own plug-ins report errors), which must not be an array's length. */
  static const GimpParamDef return_vals[] = {
    { GIMP_PDB_STRING,      "csv-table",      "The figures as CSV: a header line and one row, as rete measure writes" },
    { GIMP_PDB_INT32,       "num-figures",    "Number of figures" },
    { GIMP_PDB_FLOATARRAY,  "figures",        "The figures, in the order of names (NaN when undefined)" },
    { GIMP_PDB_INT32,       "num-names",      "Number of names (= num-figures)" },
    { GIMP_PDB_STRINGARRAY, "names",          "Figure names with their units, as CSV column names" },
    { GIMP_PDB_LAYER,       "skeleton-layer", "The skeleton layer, or -1" },
  };
  G_STATIC_ASSERT (G_N_ELEMENTS (args) == N_ARGS);

  gimp_install_procedure (PLUG_IN_PROC,
                          N_("Measure the vessels of a binary vessel map"),
                          "Measures a binary vessel map inside an optional field of view: vessel "
                          "area and length density, junctions, end points, segments, calibre, "
                          "tortuosity and fractal dimension, in pixels or millimetres; adds a "
                          "skeleton layer with junctions and end points marked. A research and "
                          "grading aid, not a diagnostic device: results must be checked by a "
                          "qualified person under local regulations and licensed practice.",
                          PLUG_IN_AUTHOR, PLUG_IN_AUTHOR, PLUG_IN_YEAR,
                          N_("Vessel _Measurements..."),
                          "RGB*, GRAY*",
                          GIMP_PLUGIN,
                          G_N_ELEMENTS (args), G_N_ELEMENTS (return_vals),
                          args, return_vals);
  gimp_plugin_menu_register (PLUG_IN_PROC, PLUG_IN_MENU);
}

void
measure_run (const gchar *name, gint nparams, const GimpParam *param,
             gint *nreturn_vals, GimpParam **return_vals)
{
  static GimpParam values[7];
  static gdouble *figures;
  static gchar **names;
  static gchar *table;
  GimpRunMode run_mode = param[0].data.d_int32;
  MeasureInputs inputs = { param[2].data.d_drawable, -1 };
  MeasureConfig config;
  g_autoptr (ReteMeasurements) m = NULL;
  g_autofree ReteMeasureField *fields = NULL;
  const char *csv = NULL;
  gint32 layer = -1, new_image = -1;
  GError *error = NULL;
  int n;

  *return_vals = values;
  config_init (&config);
  if (run_mode != GIMP_RUN_INTERACTIVE && nparams != N_ARGS)
    {
      g_autofree char *message = g_strdup_printf (_("%s takes %d arguments, %d were given."),
                                                  PLUG_IN_PROC, N_ARGS, nparams);
      plugin_return_error (values, nreturn_vals, GIMP_PDB_CALLING_ERROR, message);
      return;
    }
  if (nparams == N_ARGS)
    inputs.fov = param[3].data.d_drawable;
  if (run_mode == GIMP_RUN_NONINTERACTIVE)
    {
      config.pixel_size_mm = param[4].data.d_float;
      config.min_segment_length = param[5].data.d_float;
      config.add_layer = param[6].data.d_int32 != 0;
      csv = param[7].data.d_string;
    }
  else
    gimp_get_data (PLUG_IN_PROC, &config);
  if (!plugin_check_drawable (inputs.map, _("vessel map"), &error)
      || (inputs.fov != -1 && !plugin_check_drawable (inputs.fov, _("field of view"), &error)))
    {
      plugin_show_error (run_mode, error->message);
      plugin_return_gerror (values, nreturn_vals, GIMP_PDB_CALLING_ERROR, error);
      return;
    }

  if (run_mode == GIMP_RUN_INTERACTIVE)
    {
      if (!measure_dialog (&inputs, &config, &m))
        {
          values[0].type = GIMP_PDB_STATUS;
          values[0].data.d_status = GIMP_PDB_CANCEL;
          *nreturn_vals = 1;
          return;
        }
    }
  else
    {
      gimp_progress_init (_("Measuring the vessels"));
      if (!(m = measure_core (&inputs, &config, &error)))
        goto fail;
    }
  if (csv && *csv && !save_csv (csv, &inputs, m, &error))
    goto fail;
  if (config.add_layer && (layer = add_skeleton_layers (&inputs, m, &new_image, &error)) < 0)
    goto fail;
  if (new_image > 0 && run_mode == GIMP_RUN_INTERACTIVE)
    gimp_display_new (new_image);
  gimp_progress_end ();
  if (run_mode != GIMP_RUN_NONINTERACTIVE)
    gimp_displays_flush ();
  if (run_mode == GIMP_RUN_INTERACTIVE)
    gimp_set_data (PLUG_IN_PROC, &config, sizeof config);

  n = rete_measurements_fields (m, &fields);
  figures = g_new (gdouble, n);
  names = g_new0 (gchar *, n + 1);
  for (int i = 0; i < n; i++)
    {
      figures[i] = fields[i].value;
      names[i] = g_strdup (fields[i].column);
    }
  {
    g_autofree char *layer_name = gimp_item_get_name (inputs.map);
    g_autofree char *header = rete_measurements_csv_header (m);
    g_autofree char *row = rete_measurements_csv_row (m, layer_name);

    table = g_strconcat (header, row, NULL);
  }
  values[0].type = GIMP_PDB_STATUS;
  values[0].data.d_status = GIMP_PDB_SUCCESS;
  values[1].type = GIMP_PDB_STRING;
  values[1].data.d_string = table;
  values[2].type = GIMP_PDB_INT32;
  values[2].data.d_int32 = n;
  values[3].type = GIMP_PDB_FLOATARRAY;
  values[3].data.d_floatarray = figures;
  values[4].type = GIMP_PDB_INT32;
  values[4].data.d_int32 = n;
  values[5].type = GIMP_PDB_STRINGARRAY;
  values[5].data.d_stringarray = names;
  values[6].type = GIMP_PDB_LAYER;
  values[6].data.d_layer = layer;
  *nreturn_vals = 7;
  return;

fail:
  gimp_progress_end ();
  plugin_show_error (run_mode, error->message);
  plugin_return_gerror (values, nreturn_vals, GIMP_PDB_EXECUTION_ERROR, error);
}
