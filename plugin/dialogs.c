/* dialogs.c — what every dialog of the plug-in shares: the frame with its help text and the
 * caution, and small widget helpers. */
#include "config.h"

#include "dialogs.h"

GtkWidget *
plugin_dialog_new (const char *title, const char *role, const char *help_id,
                   const char *help_text, const char *ok_label, GtkWidget **content)
{
  GtkWidget *dialog, *vbox, *label;
  g_autofree char *markup = NULL;

  dialog = gimp_dialog_new (title, role, NULL, 0, gimp_standard_help_func, help_id,
                            _("_Cancel"), GTK_RESPONSE_CANCEL,
                            ok_label ? ok_label : _("_OK"), GTK_RESPONSE_OK,
                            NULL);
  gtk_dialog_set_alternative_button_order (GTK_DIALOG (dialog), GTK_RESPONSE_OK,
                                           GTK_RESPONSE_CANCEL, -1);
  gimp_window_set_transient (GTK_WINDOW (dialog));

  vbox = gtk_vbox_new (FALSE, 12);
  gtk_container_set_border_width (GTK_CONTAINER (vbox), 12);
  gtk_box_pack_start (GTK_BOX (gtk_dialog_get_content_area (GTK_DIALOG (dialog))), vbox,
                      TRUE, TRUE, 0);
  gtk_widget_show (vbox);

  markup = g_markup_printf_escaped ("%s\n<i>%s</i>", help_text, _(PLUGIN_CAUTION));
  label = gtk_label_new (NULL);
  gtk_label_set_markup (GTK_LABEL (label), markup);
  gtk_label_set_line_wrap (GTK_LABEL (label), TRUE);
  gtk_label_set_width_chars (GTK_LABEL (label), 60);
  gtk_misc_set_alignment (GTK_MISC (label), 0.0, 0.5);
  gtk_box_pack_end (GTK_BOX (vbox), label, FALSE, FALSE, 0);
  gtk_widget_show (label);

  *content = vbox;
  return dialog;
}

GtkWidget *
plugin_check_button (const char *label, gint *value)
{
  GtkWidget *button = gtk_check_button_new_with_mnemonic (label);

  gtk_toggle_button_set_active (GTK_TOGGLE_BUTTON (button), *value);
  g_signal_connect (button, "toggled", G_CALLBACK (gimp_toggle_button_update), value);
  gtk_widget_show (button);
  return button;
}

GtkObject *
plugin_scale (GtkWidget *table, int row, const char *label, double *value, double lower,
              double upper, double step, int digits, const char *tooltip)
{
  GtkObject *adj = gimp_scale_entry_new (GTK_TABLE (table), 0, row, label, 160, 6, *value,
                                         lower, upper, step, step * 10, digits, TRUE, 0, 0,
                                         tooltip, NULL);

  g_signal_connect (adj, "value-changed", G_CALLBACK (gimp_double_adjustment_update), value);
  return adj;
}

GtkObject *
plugin_int_scale (GtkWidget *table, int row, const char *label, int *value, int lower,
                  int upper, int step, const char *tooltip)
{
  GtkObject *adj = gimp_scale_entry_new (GTK_TABLE (table), 0, row, label, 160, 6, *value,
                                         lower, upper, step, step * 10, 0, TRUE, 0, 0,
                                         tooltip, NULL);

  g_signal_connect (adj, "value-changed", G_CALLBACK (gimp_int_adjustment_update), value);
  return adj;
}

GtkWidget *
plugin_table_new (int rows)
{
  GtkWidget *table = gtk_table_new (rows, 3, FALSE);

  gtk_table_set_col_spacings (GTK_TABLE (table), 6);
  gtk_table_set_row_spacings (GTK_TABLE (table), 4);
  gtk_widget_show (table);
  return table;
}
