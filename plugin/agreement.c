/* agreement.c — "Agreement with Reference": a vessel map (or a grader's tracing) against a
 * reference layer, inside an optional field-of-view layer, from any open images of the same
 * size: ROC AUC, average precision and, at a threshold (set, or the best Dice or Youden's J),
 * accuracy, sensitivity, specificity, precision, Dice, Jaccard and MCC. Interactively a dialog
 * with the table and the ROC curve; in scripts the figures come back as return values.
 * All figures are librete's (rete_agreement_compute, rete_agreement_at_threshold). */
#include "config.h"

#include <math.h>
#include <string.h>

#include "agreement.h"

#define PLUG_IN_PROC AGREEMENT_PROC
#define N_ARGS 12
#define N_RETURN 16 /* status + 14 figures + layer */
#define MAX_ROC_POINTS 512

void
agreement_config_init (AgreementConfig *config)
{
  memset (config, 0, sizeof *config);
  config->threshold_mode = AGREEMENT_THRESHOLD_FIXED;
  config->threshold = 0.5;
  config->layer_mode = AGREEMENT_LAYER_WITH_LEGEND;
  /* Our own colours: green agreement, magenta for extra vessel, yellow for missed vessel. */
  gimp_rgba_set (&config->true_positive_colour, 0.10, 0.80, 0.25, 1.0);
  gimp_rgba_set (&config->false_positive_colour, 0.95, 0.20, 0.85, 1.0);
  gimp_rgba_set (&config->false_negative_colour, 1.00, 0.85, 0.10, 1.0);
}

void
agreement_result_clear (AgreementResult *result)
{
  g_clear_pointer (&result->agreement, rete_agreement_free);
  g_clear_pointer (&result->map, rete_image_free);
  g_clear_pointer (&result->reference, rete_image_free);
  g_clear_pointer (&result->fov, rete_image_free);
}

gboolean
agreement_set_threshold (AgreementResult *result, const AgreementConfig *config, GError **error)
{
  const ReteAgreement *a = result->agreement;
  double t = config->threshold;

  if (config->threshold_mode == AGREEMENT_THRESHOLD_BEST_DICE)
    t = a->best_dice_threshold;
  else if (config->threshold_mode == AGREEMENT_THRESHOLD_BEST_YOUDEN)
    t = a->best_youden_threshold;
  result->threshold = t;
  if (t == a->threshold)
    {
      result->confusion = a->confusion;
      result->rates = a->rates;
      return TRUE;
    }
  return rete_agreement_at_threshold (result->map, result->reference, result->fov, t,
                                      &result->confusion, &result->rates, error);
}

static gboolean
config_check (const AgreementConfig *c, GError **error)
{
  if (c->threshold_mode < AGREEMENT_THRESHOLD_FIXED || c->threshold_mode > AGREEMENT_THRESHOLD_BEST_YOUDEN)
    g_set_error (error, PLUGIN_ERROR, 0,
                 _("Agreement: threshold-mode must be 0 (fixed), 1 (best Dice) or 2 (best Youden's J)."));
  else if (!(c->threshold >= 0.0 && c->threshold <= 1.0))
    g_set_error (error, PLUGIN_ERROR, 0, _("Agreement: threshold must lie in [0, 1]."));
  else if (c->layer_mode < AGREEMENT_LAYER_NONE || c->layer_mode > AGREEMENT_LAYER_WITH_LEGEND)
    g_set_error (error, PLUGIN_ERROR, 0,
                 _("Agreement: add-layer must be 0 (none), 1 (layer) or 2 (layer with legend)."));
  else
    return TRUE;
  return FALSE;
}

gboolean
agreement_core (const AgreementInputs *inputs, const AgreementConfig *config,
                AgreementResult *result, GError **error)
{
  AgreementResult r = { 0 };

  memset (result, 0, sizeof *result);
  if (!config_check (config, error))
    return FALSE;
  if (!(r.map = plugin_read_map (inputs->map, error))
      || !(r.reference = plugin_read_map (inputs->reference, error))
      || (inputs->fov > 0 && !(r.fov = plugin_read_map (inputs->fov, error))))
    goto fail;
  r.agreement = rete_agreement_compute (r.map, r.reference, r.fov, config->threshold,
                                        MAX_ROC_POINTS, error);
  if (!r.agreement || !agreement_set_threshold (&r, config, error))
    goto fail;
  *result = r;
  return TRUE;

fail:
  agreement_result_clear (&r);
  return FALSE;
}

/* ---- the table ---- */

typedef struct {
  const char *csv;     /* column name */
  const char *label;   /* shown (translated) */
} Figure;

static const Figure figures[] = {
  { "auc", N_("ROC AUC") },
  { "average_precision", N_("Average precision") },
  { "threshold", N_("Threshold") },
  { "accuracy", N_("Accuracy") },
  { "sensitivity", N_("Sensitivity") },
  { "specificity", N_("Specificity") },
  { "precision", N_("Precision") },
  { "dice", N_("Dice (F1)") },
  { "jaccard", N_("Jaccard") },
  { "mcc", N_("Matthews correlation") },
  { "true_positive", N_("True positives (pixels)") },
  { "false_positive", N_("False positives (pixels)") },
  { "true_negative", N_("True negatives (pixels)") },
  { "false_negative", N_("False negatives (pixels)") },
};

static void
figure_values (const AgreementResult *r, double v[G_N_ELEMENTS (figures)])
{
  v[0] = r->agreement->auc;
  v[1] = r->agreement->average_precision;
  v[2] = r->threshold;
  v[3] = r->rates.accuracy;
  v[4] = r->rates.sensitivity;
  v[5] = r->rates.specificity;
  v[6] = r->rates.precision;
  v[7] = r->rates.dice;
  v[8] = r->rates.jaccard;
  v[9] = r->rates.mcc;
  v[10] = r->confusion.true_positive;
  v[11] = r->confusion.false_positive;
  v[12] = r->confusion.true_negative;
  v[13] = r->confusion.false_negative;
}

static void
append_number (GString *s, double v, gboolean count)
{
  char buffer[G_ASCII_DTOSTR_BUF_SIZE];

  if (isnan (v))
    g_string_append (s, "NaN");
  else
    g_string_append (s, g_ascii_formatd (buffer, sizeof buffer, count ? "%.0f" : "%.6f", v));
}

static void
append_csv_field (GString *s, const char *text)
{
  g_string_append_c (s, '"');
  for (const char *p = text; *p; p++)
    {
      if (*p == '"')
        g_string_append_c (s, '"');
      g_string_append_c (s, *p);
    }
  g_string_append_c (s, '"');
}

static char *
item_label (gint32 item)
{
  g_autofree char *layer = item > 0 ? gimp_item_get_name (item) : g_strdup ("");
  g_autofree char *image = item > 0 ? gimp_image_get_name (gimp_item_get_image (item)) : NULL;

  return image ? g_strdup_printf ("%s: %s", image, layer) : g_strdup (layer);
}

char *
agreement_table_csv (const AgreementInputs *inputs, const AgreementResult *result,
                     const AgreementConfig *config)
{
  static const char *modes[] = { "fixed", "best-dice", "best-youden" };
  GString *s = g_string_new ("map,reference,field_of_view,threshold_mode");
  double v[G_N_ELEMENTS (figures)];
  g_autofree char *map = item_label (inputs->map);
  g_autofree char *reference = item_label (inputs->reference);
  g_autofree char *fov = item_label (inputs->fov);

  for (gsize i = 0; i < G_N_ELEMENTS (figures); i++)
    g_string_append_printf (s, ",%s", figures[i].csv);
  g_string_append (s, "\n");
  append_csv_field (s, map);
  g_string_append_c (s, ',');
  append_csv_field (s, reference);
  g_string_append_c (s, ',');
  append_csv_field (s, fov);
  g_string_append_printf (s, ",%s", modes[CLAMP (config->threshold_mode, 0, 2)]);
  figure_values (result, v);
  for (gsize i = 0; i < G_N_ELEMENTS (figures); i++)
    {
      g_string_append_c (s, ',');
      append_number (s, v[i], i >= 10);
    }
  g_string_append (s, "\n");
  return g_string_free (s, FALSE);
}

char *
agreement_table_text (const AgreementResult *result)
{
  GString *s = g_string_new (NULL);
  double v[G_N_ELEMENTS (figures)];

  figure_values (result, v);
  for (gsize i = 0; i < G_N_ELEMENTS (figures); i++)
    {
      g_string_append_printf (s, "%s\t", _(figures[i].label));
      append_number (s, v[i], i >= 10);
      g_string_append_c (s, '\n');
    }
  return g_string_free (s, FALSE);
}

gboolean
agreement_save_csv (const char *path, const AgreementInputs *inputs,
                    const AgreementResult *result, const AgreementConfig *config, GError **error)
{
  g_autofree char *csv = agreement_table_csv (inputs, result, config);
  GError *file_error = NULL;

  if (g_file_set_contents (path, csv, -1, &file_error))
    return TRUE;
  g_set_error (error, PLUGIN_ERROR, 0, _("The table could not be saved: %s"), file_error->message);
  g_error_free (file_error);
  return FALSE;
}

/* ---- the agreement layer ---- */

static gint32
legend_line (gint32 image, gint32 group, const char *text, const GimpRGB *colour, int y,
             double size)
{
  gint32 layer = gimp_text_layer_new (image, text, "Sans-serif Bold", size, GIMP_UNIT_PIXEL);

  if (layer < 0)
    return -1;
  if (!gimp_image_insert_layer (image, layer, group, 0))
    return -1;
  gimp_text_layer_set_color (layer, colour);
  gimp_layer_set_offsets (layer, (int) size, y);
  return layer;
}

gint32
agreement_add_layer (const AgreementInputs *inputs, const AgreementResult *result,
                     const AgreementConfig *config, gint32 *new_image, GError **error)
{
  g_autoptr (ReteImage) codes = NULL;
  g_autofree float *rgba = NULL;
  g_autofree char *name = NULL;
  const GimpRGB *colours[5] = { NULL, &config->true_positive_colour,
                                &config->false_positive_colour, &config->false_negative_colour,
                                NULL };
  gint32 image = gimp_item_get_image (inputs->map);
  gint32 group, layer;
  GeglBuffer *buffer;
  gsize n;

  codes = rete_agreement_map (result->map, result->reference, result->fov, result->threshold,
                              error);
  if (!codes)
    return -1;
  /* The layer is coloured: it goes into the map's image when that is RGB, else the
   * reference's, else a new RGB image (shown when a user is present). */
  if (gimp_image_base_type (image) != GIMP_RGB)
    {
      gint32 reference_image = gimp_item_get_image (inputs->reference);

      if (gimp_image_base_type (reference_image) == GIMP_RGB
          && gimp_image_width (reference_image) == codes->width
          && gimp_image_height (reference_image) == codes->height)
        image = reference_image;
      else
        {
          image = gimp_image_new (codes->width, codes->height, GIMP_RGB);
          if (image < 0)
            {
              g_set_error (error, PLUGIN_ERROR, 0, _("GIMP could not make an image: %s"),
                           gimp_get_pdb_error ());
              return -1;
            }
          *new_image = image;
        }
    }
  /* Colours by agreement class (librete's codes): a lookup, no computing. */
  n = rete_image_n_pixels (codes);
  rgba = g_new0 (float, n * 4);
  for (gsize i = 0; i < n; i++)
    {
      int code = (int) codes->data[i];
      const GimpRGB *c = code >= 0 && code < 5 ? colours[code] : NULL;

      if (c)
        {
          rgba[4 * i] = c->r;
          rgba[4 * i + 1] = c->g;
          rgba[4 * i + 2] = c->b;
          rgba[4 * i + 3] = 1.0f;
        }
    }

  gimp_image_undo_group_start (image);
  group = gimp_layer_group_new (image);
  name = g_strdup_printf (_("Agreement at threshold %.3g"), result->threshold);
  gimp_item_set_name (group, name);
  gimp_image_insert_layer (image, group, 0, 0);
  g_free (name);
  name = g_strdup_printf (_("Agreement: true positive, false positive, false negative "
                            "(threshold %.3g)"), result->threshold);
  layer = gimp_layer_new (image, name, codes->width, codes->height, GIMP_RGBA_IMAGE, 100.0,
                          GIMP_LAYER_MODE_NORMAL);
  if (layer < 0 || !gimp_image_insert_layer (image, layer, group, 0))
    goto fail;
  {
    int off_x, off_y;

    gimp_drawable_offsets (inputs->map, &off_x, &off_y);
    gimp_layer_set_offsets (layer, off_x, off_y);
  }
  buffer = gimp_drawable_get_buffer (layer);
  gegl_buffer_set (buffer, GEGL_RECTANGLE (0, 0, codes->width, codes->height), 0,
                   babl_format ("R'G'B'A float"), rgba, GEGL_AUTO_ROWSTRIDE);
  g_object_unref (buffer);

  if (config->layer_mode == AGREEMENT_LAYER_WITH_LEGEND)
    {
      double size = MAX (12.0, codes->height / 40.0);
      gint32 legend = gimp_layer_group_new (image);

      gimp_item_set_name (legend, _("Legend"));
      gimp_image_insert_layer (image, legend, group, 0);
      if (legend_line (image, legend, _("■ true positive: vessel in both"),
                       &config->true_positive_colour, (int) size, size) < 0
          || legend_line (image, legend, _("■ false positive: vessel in the map only"),
                          &config->false_positive_colour, (int) (2.5 * size), size) < 0
          || legend_line (image, legend, _("■ false negative: vessel in the reference only"),
                          &config->false_negative_colour, (int) (4 * size), size) < 0)
        goto fail;
    }
  gimp_image_undo_group_end (image);
  return layer;

fail:
  if (*new_image > 0)
    {
      gimp_image_delete (*new_image);
      *new_image = -1;
      g_set_error (error, PLUGIN_ERROR, 0, _("GIMP could not add the agreement layer: %s"),
                   gimp_get_pdb_error ());
      return -1;
    }
  g_set_error (error, PLUGIN_ERROR, 0, _("GIMP could not add the agreement layer: %s"),
               gimp_get_pdb_error ());
  gimp_image_remove_layer (image, group);
  gimp_image_undo_group_end (image);
  return -1;
}

/* ---- registration and run ---- */

void
agreement_query (void)
{
  static const GimpParamDef args[] = {
    { GIMP_PDB_INT32,    "run-mode",           "The run mode { RUN-INTERACTIVE (0), RUN-NONINTERACTIVE (1), RUN-WITH-LAST-VALS (2) }" },
    { GIMP_PDB_IMAGE,    "image",              "Image of the vessel map" },
    { GIMP_PDB_DRAWABLE, "drawable",           "Vessel map: scores in [0, 1] or a binary map (white vessels)" },
    { GIMP_PDB_DRAWABLE, "reference-drawable", "Reference vessel map (white vessels; >= 0.5 is vessel), of the same size, from any open image" },
    { GIMP_PDB_DRAWABLE, "fov-drawable",       "Field of view (white inside) of the same size, or -1 to count every pixel" },
    { GIMP_PDB_INT32,    "threshold-mode",     "Threshold of the figures { FIXED (0), BEST-DICE (1), BEST-YOUDEN (2) }" },
    { GIMP_PDB_FLOAT,    "threshold",          "FIXED: a map pixel >= threshold is vessel, in [0, 1]" },
    { GIMP_PDB_INT32,    "add-layer",          "Agreement layer { NONE (0), LAYER (1), LAYER-WITH-LEGEND (2) }" },
    { GIMP_PDB_COLOR,    "true-positive-color",  "Colour of vessel in both" },
    { GIMP_PDB_COLOR,    "false-positive-color", "Colour of vessel in the map only" },
    { GIMP_PDB_COLOR,    "false-negative-color", "Colour of vessel in the reference only" },
    { GIMP_PDB_STRING,   "csv-file",           "Save the table as CSV to this file (\"\" = do not save)" },
  };
  static const GimpParamDef return_vals[] = {
    { GIMP_PDB_FLOAT, "auc",               "ROC AUC (NaN when the reference has one class inside the field of view)" },
    { GIMP_PDB_FLOAT, "average-precision", "Average precision" },
    { GIMP_PDB_FLOAT, "threshold-used",    "Threshold of the figures below" },
    { GIMP_PDB_FLOAT, "accuracy",          "Accuracy" },
    { GIMP_PDB_FLOAT, "sensitivity",       "Sensitivity (true-positive rate)" },
    { GIMP_PDB_FLOAT, "specificity",       "Specificity" },
    { GIMP_PDB_FLOAT, "precision",         "Precision (positive predictive value)" },
    { GIMP_PDB_FLOAT, "dice",              "Dice coefficient (F1)" },
    { GIMP_PDB_FLOAT, "jaccard",           "Jaccard index" },
    { GIMP_PDB_FLOAT, "mcc",               "Matthews correlation coefficient" },
    { GIMP_PDB_INT32, "true-positive",     "True-positive pixels" },
    { GIMP_PDB_INT32, "false-positive",    "False-positive pixels" },
    { GIMP_PDB_INT32, "true-negative",     "True-negative pixels" },
    { GIMP_PDB_INT32, "false-negative",    "False-negative pixels" },
    { GIMP_PDB_LAYER, "agreement-layer",   "The agreement layer, or -1" },
  };
  G_STATIC_ASSERT (G_N_ELEMENTS (args) == N_ARGS);
  G_STATIC_ASSERT (G_N_ELEMENTS (return_vals) + 1 == N_RETURN);

  gimp_install_procedure (PLUG_IN_PROC,
                          N_("Agreement of a vessel map with a reference"),
                          "Compares a vessel map (a method's scores, or a grader's binary "
                          "tracing) with a reference vessel map, inside an optional "
                          "field-of-view layer; the layers may come from any open images of the "
                          "same size. Gives ROC AUC, average precision and, at a threshold, "
                          "accuracy, sensitivity, specificity, precision, Dice, Jaccard and "
                          "Matthews correlation; optionally an agreement layer colouring true "
                          "positives, false positives and false negatives. For grader vs "
                          "grader, method vs reference, before vs after correction. A research "
                          "and grading aid, not a diagnostic device: results must be checked by "
                          "a qualified person under local regulations and licensed practice.",
                          PLUG_IN_AUTHOR, PLUG_IN_AUTHOR, PLUG_IN_YEAR,
                          N_("_Agreement with Reference..."),
                          "RGB*, GRAY*",
                          GIMP_PLUGIN,
                          G_N_ELEMENTS (args), G_N_ELEMENTS (return_vals),
                          args, return_vals);
  gimp_plugin_menu_register (PLUG_IN_PROC, PLUG_IN_MENU);
}

void
agreement_run (const gchar *name, gint nparams, const GimpParam *param,
               gint *nreturn_vals, GimpParam **return_vals)
{
  static GimpParam values[N_RETURN];
  GimpRunMode run_mode = param[0].data.d_int32;
  gint32 image = param[1].data.d_image;
  AgreementInputs inputs = { param[2].data.d_drawable, -1, -1 };
  AgreementConfig config;
  AgreementResult result = { 0 };
  const char *csv = NULL;
  gint32 layer = -1, new_image = -1;
  double v[G_N_ELEMENTS (figures)];
  GError *error = NULL;

  *return_vals = values;
  agreement_config_init (&config);
  switch (run_mode)
    {
    case GIMP_RUN_INTERACTIVE:
      gimp_get_data (PLUG_IN_PROC, &config);
      /* Layers given by a script are offered first. */
      if (nparams == N_ARGS)
        {
          inputs.reference = param[3].data.d_drawable;
          inputs.fov = param[4].data.d_drawable;
        }
      if (!agreement_dialog (image, inputs.map, &inputs, &config, &result))
        {
          values[0].type = GIMP_PDB_STATUS;
          values[0].data.d_status = GIMP_PDB_CANCEL;
          *nreturn_vals = 1;
          return;
        }
      break;
    case GIMP_RUN_NONINTERACTIVE:
    case GIMP_RUN_WITH_LAST_VALS:
      /* The layers are always needed: with last values only the settings are reused. */
      if (nparams != N_ARGS)
        {
          g_autofree char *message =
            g_strdup_printf (_("%s takes %d arguments, %d were given."), PLUG_IN_PROC, N_ARGS,
                             nparams);
          plugin_return_error (values, nreturn_vals, GIMP_PDB_CALLING_ERROR, message);
          return;
        }
      inputs.reference = param[3].data.d_drawable;
      inputs.fov = param[4].data.d_drawable;
      if (run_mode == GIMP_RUN_WITH_LAST_VALS)
        gimp_get_data (PLUG_IN_PROC, &config);
      else
        {
          config.threshold_mode = param[5].data.d_int32;
          config.threshold = param[6].data.d_float;
          config.layer_mode = param[7].data.d_int32;
          config.true_positive_colour = param[8].data.d_color;
          config.false_positive_colour = param[9].data.d_color;
          config.false_negative_colour = param[10].data.d_color;
          csv = param[11].data.d_string;
        }
      if (!config_check (&config, &error))
        {
          plugin_return_gerror (values, nreturn_vals, GIMP_PDB_CALLING_ERROR, error);
          return;
        }
      if (!plugin_check_drawable (inputs.reference, _("reference"), &error)
          || (inputs.fov != -1 && !plugin_check_drawable (inputs.fov, _("field of view"), &error)))
        {
          plugin_return_gerror (values, nreturn_vals, GIMP_PDB_CALLING_ERROR, error);
          return;
        }
      gimp_progress_init (_("Comparing with the reference"));
      if (!agreement_core (&inputs, &config, &result, &error))
        goto fail;
      break;
    }

  if (csv && *csv && !agreement_save_csv (csv, &inputs, &result, &config, &error))
    goto fail;
  if (config.layer_mode != AGREEMENT_LAYER_NONE
      && (layer = agreement_add_layer (&inputs, &result, &config, &new_image, &error)) < 0)
    goto fail;
  if (new_image > 0 && run_mode == GIMP_RUN_INTERACTIVE)
    gimp_display_new (new_image);
  gimp_progress_update (1.0);
  gimp_progress_end ();
  if (run_mode != GIMP_RUN_NONINTERACTIVE)
    gimp_displays_flush ();
  if (run_mode == GIMP_RUN_INTERACTIVE)
    gimp_set_data (PLUG_IN_PROC, &config, sizeof config);

  figure_values (&result, v);
  values[0].type = GIMP_PDB_STATUS;
  values[0].data.d_status = GIMP_PDB_SUCCESS;
  for (int i = 0; i < 10; i++)
    {
      values[1 + i].type = GIMP_PDB_FLOAT;
      values[1 + i].data.d_float = v[i];
    }
  for (int i = 10; i < 14; i++)
    {
      values[1 + i].type = GIMP_PDB_INT32;
      values[1 + i].data.d_int32 = (gint32) v[i];
    }
  values[15].type = GIMP_PDB_LAYER;
  values[15].data.d_layer = layer;
  *nreturn_vals = N_RETURN;
  agreement_result_clear (&result);
  return;

fail:
  gimp_progress_end ();
  agreement_result_clear (&result);
  plugin_show_error (run_mode, error->message);
  plugin_return_gerror (values, nreturn_vals, GIMP_PDB_EXECUTION_ERROR, error);
}
