/* agreement-dialog.c — the agreement dialog: layers to compare, the threshold (slider, best
 * Dice or best Youden's J), the table of figures, the ROC curve (cairo), copy and CSV, and the
 * agreement layer's colours with their legend. Figures are recomputed by agreement_core. */
#include "config.h"

#include <math.h>

#include "agreement.h"
#include "dialogs.h"

#define N_FIGURE_ROWS 14

typedef struct {
  gint32 map_drawable;       /* the one the procedure was called on: sets the size */
  AgreementInputs *inputs;
  AgreementConfig *config;
  AgreementResult *result;
  gboolean have_result;
  gint use_fov;
  GtkWidget *dialog, *map_combo, *reference_combo, *fov_combo, *mode_combo;
  GtkObject *threshold_adj;
  GtkWidget *values[N_FIGURE_ROWS];
  GtkWidget *message, *roc;
  gboolean updating;
} AgreementDialog;

static const char *row_labels[N_FIGURE_ROWS] = {
  N_("ROC AUC"), N_("Average precision"), N_("Threshold"), N_("Accuracy"),
  N_("Sensitivity"), N_("Specificity"), N_("Precision"), N_("Dice (F1)"), N_("Jaccard"),
  N_("Matthews correlation"), N_("True positives"), N_("False positives"),
  N_("True negatives"), N_("False negatives"),
};

static gboolean
same_size (gint32 image, gint32 item, gpointer data)
{
  gint32 like = GPOINTER_TO_INT (data);

  return gimp_item_is_drawable (item) && !gimp_drawable_is_indexed (item)
         && gimp_drawable_width (item) == gimp_drawable_width (like)
         && gimp_drawable_height (item) == gimp_drawable_height (like);
}

static void
show_figures (AgreementDialog *d)
{
  const AgreementResult *r = d->result;
  double v[N_FIGURE_ROWS];

  if (!d->have_result)
    {
      for (int i = 0; i < N_FIGURE_ROWS; i++)
        gtk_label_set_text (GTK_LABEL (d->values[i]), "—");
      gtk_widget_queue_draw (d->roc);
      return;
    }
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
  for (int i = 0; i < N_FIGURE_ROWS; i++)
    {
      g_autofree char *text = isnan (v[i]) ? g_strdup (_("undefined"))
                              : i >= 10 ? g_strdup_printf ("%.0f", v[i])
                                        : g_strdup_printf ("%.4f", v[i]);

      gtk_label_set_text (GTK_LABEL (d->values[i]), text);
    }
  gtk_widget_queue_draw (d->roc);
}

static void
set_message (AgreementDialog *d, const char *text)
{
  gtk_label_set_text (GTK_LABEL (d->message), text ? text : "");
  gtk_dialog_set_response_sensitive (GTK_DIALOG (d->dialog), GTK_RESPONSE_OK, text == NULL);
}

/* Layers changed: read and compute again. */
static void
recompute (AgreementDialog *d)
{
  GError *error = NULL;

  if (d->updating)
    return;
  gimp_int_combo_box_get_active (GIMP_INT_COMBO_BOX (d->map_combo), &d->inputs->map);
  gimp_int_combo_box_get_active (GIMP_INT_COMBO_BOX (d->reference_combo), &d->inputs->reference);
  d->inputs->fov = -1;
  if (d->use_fov)
    gimp_int_combo_box_get_active (GIMP_INT_COMBO_BOX (d->fov_combo), &d->inputs->fov);
  gtk_widget_set_sensitive (d->fov_combo, d->use_fov);
  agreement_result_clear (d->result);
  d->have_result = FALSE;
  if (d->inputs->map == d->inputs->reference)
    set_message (d, _("Choose a reference other than the map itself."));
  else if (agreement_core (d->inputs, d->config, d->result, &error))
    {
      d->have_result = TRUE;
      set_message (d, NULL);
    }
  else
    {
      set_message (d, error->message);
      g_error_free (error);
    }
  show_figures (d);
}

/* The threshold changed: the figures only, from the pixels already read. */
static void
threshold_changed (AgreementDialog *d)
{
  GError *error = NULL;

  if (d->updating || !d->have_result)
    return;
  d->config->threshold = gtk_adjustment_get_value (GTK_ADJUSTMENT (d->threshold_adj));
  if (!agreement_set_threshold (d->result, d->config, &error))
    {
      set_message (d, error->message);
      g_error_free (error);
    }
  show_figures (d);
}

static void
mode_changed (GtkWidget *combo, AgreementDialog *d)
{
  gimp_int_combo_box_get_active (GIMP_INT_COMBO_BOX (combo), &d->config->threshold_mode);
  if (!d->threshold_adj)
    return;
  gtk_widget_set_sensitive (GIMP_SCALE_ENTRY_SCALE (d->threshold_adj),
                            d->config->threshold_mode == AGREEMENT_THRESHOLD_FIXED);
  threshold_changed (d);
  if (d->have_result && d->config->threshold_mode != AGREEMENT_THRESHOLD_FIXED)
    {
      d->updating = TRUE;
      gtk_adjustment_set_value (GTK_ADJUSTMENT (d->threshold_adj), d->result->threshold);
      d->updating = FALSE;
    }
}

static void
copy_table (GtkWidget *button, AgreementDialog *d)
{
  GtkClipboard *clipboard = gtk_clipboard_get (GDK_SELECTION_CLIPBOARD);
  g_autofree char *text = NULL;

  if (!d->have_result)
    return;
  text = agreement_table_text (d->result);
  gtk_clipboard_set_text (clipboard, text, -1);
  /* The plug-in's process ends soon: hand the text to the clipboard manager. */
  gtk_clipboard_store (clipboard);
}

static void
save_table (GtkWidget *button, AgreementDialog *d)
{
  GtkWidget *chooser;

  if (!d->have_result)
    return;
  chooser = gtk_file_chooser_dialog_new (_("Save the Agreement Table"), GTK_WINDOW (d->dialog),
                                         GTK_FILE_CHOOSER_ACTION_SAVE,
                                         _("_Cancel"), GTK_RESPONSE_CANCEL,
                                         _("_Save"), GTK_RESPONSE_ACCEPT, NULL);
  gtk_file_chooser_set_do_overwrite_confirmation (GTK_FILE_CHOOSER (chooser), TRUE);
  gtk_file_chooser_set_current_name (GTK_FILE_CHOOSER (chooser), "agreement.csv");
  if (gtk_dialog_run (GTK_DIALOG (chooser)) == GTK_RESPONSE_ACCEPT)
    {
      g_autofree char *path = gtk_file_chooser_get_filename (GTK_FILE_CHOOSER (chooser));
      GError *error = NULL;

      if (!agreement_save_csv (path, d->inputs, d->result, d->config, &error))
        {
          set_message (d, error->message);
          g_error_free (error);
        }
    }
  gtk_widget_destroy (chooser);
}

/* The ROC curve: false-positive rate across, sensitivity up, the chance diagonal, and the
 * operating point of the current threshold. */
static gboolean
roc_expose (GtkWidget *widget, GdkEventExpose *event, AgreementDialog *d)
{
  GtkAllocation a;
  cairo_t *cr = gdk_cairo_create (gtk_widget_get_window (widget));
  double left = 44, bottom = 34, top = 10, right = 10, w, h;

  gtk_widget_get_allocation (widget, &a);
  w = a.width - left - right;
  h = a.height - top - bottom;
  cairo_set_source_rgb (cr, 1, 1, 1);
  cairo_paint (cr);
  cairo_set_line_width (cr, 1.0);
  cairo_set_source_rgb (cr, 0.6, 0.6, 0.6);
  cairo_rectangle (cr, left + 0.5, top + 0.5, w, h);
  cairo_stroke (cr);
  cairo_set_dash (cr, (double[]) { 4, 4 }, 2, 0);
  cairo_move_to (cr, left, top + h);
  cairo_line_to (cr, left + w, top);
  cairo_stroke (cr);
  cairo_set_dash (cr, NULL, 0, 0);

  cairo_set_source_rgb (cr, 0, 0, 0);
  cairo_select_font_face (cr, "Sans", CAIRO_FONT_SLANT_NORMAL, CAIRO_FONT_WEIGHT_NORMAL);
  cairo_set_font_size (cr, 10);
  for (int i = 0; i <= 4; i++)
    {
      g_autofree char *tick = g_strdup_printf ("%.2g", i / 4.0);

      cairo_move_to (cr, left + w * i / 4.0 - 6, top + h + 12);
      cairo_show_text (cr, tick);
      cairo_move_to (cr, left - 24, top + h - h * i / 4.0 + 4);
      cairo_show_text (cr, tick);
    }
  cairo_move_to (cr, left, top + h + 28);
  cairo_show_text (cr, _("False-positive rate (1 − specificity)"));
  cairo_save (cr);
  cairo_move_to (cr, 12, top + h);
  cairo_rotate (cr, -G_PI / 2);
  cairo_show_text (cr, _("Sensitivity"));
  cairo_restore (cr);

  if (d->have_result && d->result->agreement->n_roc_points > 1)
    {
      const ReteAgreement *ag = d->result->agreement;

      cairo_set_source_rgb (cr, 0.1, 0.3, 0.8);
      cairo_set_line_width (cr, 2.0);
      for (int i = 0; i < ag->n_roc_points; i++)
        {
          double x = left + w * ag->roc_false_positive_rate[i];
          double y = top + h - h * ag->roc_true_positive_rate[i];

          if (i == 0)
            cairo_move_to (cr, x, y);
          else
            cairo_line_to (cr, x, y);
        }
      cairo_stroke (cr);
      if (!isnan (d->result->rates.specificity) && !isnan (d->result->rates.sensitivity))
        {
          cairo_set_source_rgb (cr, 0.85, 0.1, 0.1);
          cairo_arc (cr, left + w * (1.0 - d->result->rates.specificity),
                     top + h - h * d->result->rates.sensitivity, 4.0, 0, 2 * G_PI);
          cairo_fill (cr);
        }
    }
  cairo_destroy (cr);
  return TRUE;
}

static GtkWidget *
drawable_combo (gint32 like, gint32 active, GCallback callback, AgreementDialog *d)
{
  GtkWidget *combo = gimp_drawable_combo_box_new (same_size, GINT_TO_POINTER (like));

  gimp_int_combo_box_connect (GIMP_INT_COMBO_BOX (combo), active, callback, d);
  gtk_widget_show (combo);
  return combo;
}

/* A layer of the same size, other than the map, in any open image: the reference offered
 * first (the newest other layer). */
static gint32
guess_other (gint32 map)
{
  gint n_images, n_layers;
  g_autofree gint *images = gimp_image_list (&n_images);

  for (int i = 0; i < n_images; i++)
    {
      g_autofree gint *layers = gimp_image_get_layers (images[i], &n_layers);

      for (int j = 0; j < n_layers; j++)
        if (layers[j] != map && same_size (images[i], layers[j], GINT_TO_POINTER (map)))
          return layers[j];
    }
  return map;
}

static void
layers_changed (GtkWidget *combo, AgreementDialog *d)
{
  recompute (d);
}

static void
toggled_fov (GtkWidget *button, AgreementDialog *d)
{
  d->use_fov = gtk_toggle_button_get_active (GTK_TOGGLE_BUTTON (button));
  recompute (d);
}

static void
colour_changed (GimpColorButton *button, GimpRGB *colour)
{
  gimp_color_button_get_color (button, colour);
}

static void
add_colour_row (GtkWidget *table, int row, const char *label, const char *title, GimpRGB *colour)
{
  GtkWidget *button = gimp_color_button_new (title, 32, 16, colour, GIMP_COLOR_AREA_FLAT);

  g_signal_connect (button, "color-changed", G_CALLBACK (colour_changed), colour);
  gtk_widget_show (button);
  gimp_table_attach_aligned (GTK_TABLE (table), 0, row, label, 0.0, 0.5, button, 1, TRUE);
}

gboolean
agreement_dialog (gint32 image, gint32 drawable, AgreementInputs *inputs,
                  AgreementConfig *config, AgreementResult *result)
{
  AgreementDialog d = { 0 };
  GtkWidget *vbox, *table, *hbox, *figures, *button, *frame, *colours, *combo;
  gboolean ok;
  gint32 fov_guess;

  gimp_ui_init (PLUG_IN_BINARY, FALSE);
  d.map_drawable = drawable;
  d.inputs = inputs;
  d.config = config;
  d.result = result;
  d.updating = TRUE;
  if (!(inputs->reference > 0 && gimp_item_is_valid (inputs->reference)
        && same_size (0, inputs->reference, GINT_TO_POINTER (drawable))))
    inputs->reference = guess_other (drawable);
  fov_guess = inputs->reference;
  if (inputs->fov > 0 && gimp_item_is_valid (inputs->fov)
      && same_size (0, inputs->fov, GINT_TO_POINTER (drawable)))
    {
      fov_guess = inputs->fov;
      d.use_fov = TRUE;
    }
  inputs->map = drawable;

  d.dialog = plugin_dialog_new (_("Agreement with Reference"), AGREEMENT_ROLE, AGREEMENT_PROC,
                                _("Compares a vessel map (a method's scores or a grader's "
                                  "tracing) with a reference, pixel by pixel, inside the field "
                                  "of view. Layers may come from any open image of the same "
                                  "size. Use it for grader vs grader, method vs reference, or "
                                  "before vs after correction."),
                                _("_Done"), &vbox);

  table = plugin_table_new (4);
  gtk_box_pack_start (GTK_BOX (vbox), table, FALSE, FALSE, 0);
  d.map_combo = drawable_combo (drawable, drawable, G_CALLBACK (layers_changed), &d);
  gimp_table_attach_aligned (GTK_TABLE (table), 0, 0, _("Vessel _map:"), 0.0, 0.5,
                             d.map_combo, 2, FALSE);
  d.reference_combo = drawable_combo (drawable, inputs->reference, G_CALLBACK (layers_changed), &d);
  gimp_table_attach_aligned (GTK_TABLE (table), 0, 1, _("_Reference:"), 0.0, 0.5,
                             d.reference_combo, 2, FALSE);
  button = gtk_check_button_new_with_mnemonic (_("Inside the _field of view:"));
  gtk_toggle_button_set_active (GTK_TOGGLE_BUTTON (button), d.use_fov);
  gtk_widget_show (button);
  gtk_table_attach (GTK_TABLE (table), button, 0, 1, 2, 3, GTK_FILL, GTK_FILL, 0, 0);
  g_signal_connect (button, "toggled", G_CALLBACK (toggled_fov), &d);
  d.fov_combo = drawable_combo (drawable, fov_guess, G_CALLBACK (layers_changed), &d);
  gtk_table_attach (GTK_TABLE (table), d.fov_combo, 1, 3, 2, 3, GTK_FILL | GTK_EXPAND, GTK_FILL, 0, 0);

  combo = gimp_int_combo_box_new (_("Set with the slider"), AGREEMENT_THRESHOLD_FIXED,
                                  _("Best Dice (F1)"), AGREEMENT_THRESHOLD_BEST_DICE,
                                  _("Best Youden's J"), AGREEMENT_THRESHOLD_BEST_YOUDEN, NULL);
  d.mode_combo = combo;
  gimp_int_combo_box_connect (GIMP_INT_COMBO_BOX (combo), config->threshold_mode,
                              G_CALLBACK (mode_changed), &d);
  gimp_table_attach_aligned (GTK_TABLE (table), 0, 3, _("_Threshold:"), 0.0, 0.5, combo, 2, FALSE);

  table = plugin_table_new (1);
  gtk_box_pack_start (GTK_BOX (vbox), table, FALSE, FALSE, 0);
  d.threshold_adj = gimp_scale_entry_new (GTK_TABLE (table), 0, 0, _("_Level:"), 200, 6,
                                          config->threshold, 0.0, 1.0, 0.01, 0.1, 3, TRUE, 0, 0,
                                          _("A map pixel at or above this level counts as vessel"),
                                          NULL);
  g_signal_connect_swapped (d.threshold_adj, "value-changed", G_CALLBACK (threshold_changed), &d);

  hbox = gtk_hbox_new (FALSE, 12);
  gtk_box_pack_start (GTK_BOX (vbox), hbox, TRUE, TRUE, 0);
  gtk_widget_show (hbox);
  figures = gtk_table_new (N_FIGURE_ROWS, 2, FALSE);
  gtk_table_set_col_spacings (GTK_TABLE (figures), 12);
  gtk_box_pack_start (GTK_BOX (hbox), figures, FALSE, FALSE, 0);
  gtk_widget_show (figures);
  for (int i = 0; i < N_FIGURE_ROWS; i++)
    {
      GtkWidget *label = gtk_label_new (_(row_labels[i]));

      gtk_misc_set_alignment (GTK_MISC (label), 0.0, 0.5);
      gtk_table_attach (GTK_TABLE (figures), label, 0, 1, i, i + 1, GTK_FILL, 0, 0, 1);
      gtk_widget_show (label);
      d.values[i] = gtk_label_new ("—");
      gtk_misc_set_alignment (GTK_MISC (d.values[i]), 1.0, 0.5);
      gtk_label_set_selectable (GTK_LABEL (d.values[i]), TRUE);
      gtk_table_attach (GTK_TABLE (figures), d.values[i], 1, 2, i, i + 1, GTK_FILL, 0, 0, 1);
      gtk_widget_show (d.values[i]);
    }
  frame = gimp_frame_new (_("ROC curve"));
  gtk_box_pack_start (GTK_BOX (hbox), frame, TRUE, TRUE, 0);
  gtk_widget_show (frame);
  d.roc = gtk_drawing_area_new ();
  gtk_widget_set_size_request (d.roc, 280, 260);
  g_signal_connect (d.roc, "expose-event", G_CALLBACK (roc_expose), &d);
  gtk_container_add (GTK_CONTAINER (frame), d.roc);
  gtk_widget_show (d.roc);

  hbox = gtk_hbox_new (FALSE, 6);
  gtk_box_pack_start (GTK_BOX (vbox), hbox, FALSE, FALSE, 0);
  gtk_widget_show (hbox);
  button = gtk_button_new_with_mnemonic (_("_Copy Table"));
  g_signal_connect (button, "clicked", G_CALLBACK (copy_table), &d);
  gtk_box_pack_start (GTK_BOX (hbox), button, FALSE, FALSE, 0);
  gtk_widget_show (button);
  button = gtk_button_new_with_mnemonic (_("_Save CSV..."));
  g_signal_connect (button, "clicked", G_CALLBACK (save_table), &d);
  gtk_box_pack_start (GTK_BOX (hbox), button, FALSE, FALSE, 0);
  gtk_widget_show (button);

  frame = gimp_frame_new (_("Agreement layer"));
  gtk_box_pack_start (GTK_BOX (vbox), frame, FALSE, FALSE, 0);
  gtk_widget_show (frame);
  colours = plugin_table_new (4);
  gtk_container_add (GTK_CONTAINER (frame), colours);
  combo = gimp_int_combo_box_new (_("None"), AGREEMENT_LAYER_NONE,
                                  _("Agreement layer"), AGREEMENT_LAYER_PLAIN,
                                  _("Agreement layer with a legend"), AGREEMENT_LAYER_WITH_LEGEND,
                                  NULL);
  gimp_int_combo_box_connect (GIMP_INT_COMBO_BOX (combo), config->layer_mode,
                              G_CALLBACK (gimp_int_combo_box_get_active), &config->layer_mode);
  gimp_table_attach_aligned (GTK_TABLE (colours), 0, 0, _("_Add:"), 0.0, 0.5, combo, 1, FALSE);
  add_colour_row (colours, 1, _("Vessel in both (true positive):"),
                  _("True-Positive Colour"), &config->true_positive_colour);
  add_colour_row (colours, 2, _("Vessel in the map only (false positive):"),
                  _("False-Positive Colour"), &config->false_positive_colour);
  add_colour_row (colours, 3, _("Vessel in the reference only (false negative):"),
                  _("False-Negative Colour"), &config->false_negative_colour);

  d.message = gtk_label_new (NULL);
  gtk_label_set_line_wrap (GTK_LABEL (d.message), TRUE);
  gtk_misc_set_alignment (GTK_MISC (d.message), 0.0, 0.5);
  gtk_box_pack_start (GTK_BOX (vbox), d.message, FALSE, FALSE, 0);
  gtk_widget_show (d.message);

  gtk_widget_show (d.dialog);
  d.updating = FALSE;
  recompute (&d);
  mode_changed (d.mode_combo, &d);

  ok = gimp_dialog_run (GIMP_DIALOG (d.dialog)) == GTK_RESPONSE_OK && d.have_result;
  gtk_widget_destroy (d.dialog);
  if (!ok)
    agreement_result_clear (result);
  return ok;
}
