/* train-dialog.c — the training dialog: where the pairs come from (folders and open images
 * with a reference layer), network size, steps, start model, the new model's name; then a
 * progress window with the loss and the validation AUC and a Stop button that keeps the best
 * model so far. */
#include "config.h"

#include <string.h>

#include "train.h"
#include "dialogs.h"

typedef struct {
  TrainConfig *config;
  GtkWidget *photos, *annotations, *masks, *name_entry, *open_note;
  GPtrArray *models;
} TrainDialog;

typedef struct {
  GtkWidget *window, *bar, *label;
  gboolean stop;
} TrainProgress;

static void
folder_changed (GtkFileChooser *chooser, gchar *target)
{
  g_autofree char *path = gtk_file_chooser_get_filename (chooser);

  g_strlcpy (target, path ? path : "", 1024);
}

static GtkWidget *
folder_button (const char *title, gchar *value)
{
  GtkWidget *button = gtk_file_chooser_button_new (title, GTK_FILE_CHOOSER_ACTION_SELECT_FOLDER);

  if (*value)
    gtk_file_chooser_set_filename (GTK_FILE_CHOOSER (button), value);
  g_signal_connect (button, "selection-changed", G_CALLBACK (folder_changed), value);
  gtk_widget_show (button);
  return button;
}

/* "3 open images have a reference layer: a, b, c" */
static char *
open_images_note (void)
{
  gint n;
  g_autofree gint *images = gimp_image_list (&n);
  GString *names = g_string_new (NULL);
  int found = 0;

  for (int i = 0; i < n; i++)
    if (train_reference_layer (images[i]) > 0)
      {
        g_autofree char *name = gimp_image_get_name (images[i]);

        g_string_append_printf (names, "%s%s", found++ ? ", " : "", name);
      }
  if (!found)
    {
      g_string_free (names, TRUE);
      return g_strdup (_("No open image has a reference layer yet. Name a layer “Reference” "
                         "(white vessels on black), or correct the binary vessel layer this "
                         "plug-in made, with the photograph as the bottom layer."));
    }
  {
    char *note = g_strdup_printf (g_dngettext (GETTEXT_PACKAGE,
                                               "%d open image has a reference layer: %s",
                                               "%d open images have a reference layer: %s", found),
                                  found, names->str);
    g_string_free (names, TRUE);
    return note;
  }
}

static void
start_changed (GtkWidget *combo, TrainDialog *d)
{
  gint index;

  gimp_int_combo_box_get_active (GIMP_INT_COMBO_BOX (combo), &index);
  if (index < 0 || (guint) index >= d->models->len)
    d->config->start_model[0] = '\0';
  else
    g_strlcpy (d->config->start_model, ((PluginModelInfo *) d->models->pdata[index])->name,
               sizeof d->config->start_model);
}

static void
int_changed (GtkWidget *combo, gint *value)
{
  gimp_int_combo_box_get_active (GIMP_INT_COMBO_BOX (combo), value);
}

static gboolean
settings_dialog (TrainConfig *config)
{
  TrainDialog d = { .config = config };
  GtkWidget *dialog, *vbox, *table, *combo, *button;
  int active = -1;
  gboolean ok;
  g_autofree char *note = NULL;

  d.models = plugin_models_list ();
  dialog = plugin_dialog_new (_("Train Vessel Model"), TRAIN_ROLE, TRAIN_PROC,
                              _("Trains the learned vessel map on your own annotated "
                                "photographs: from folders (photographs, annotations and "
                                "optional field-of-view masks, matched by file name), and from "
                                "open images with a reference layer. Every fifth photograph "
                                "checks the model (validation AUC). Stopping keeps the best "
                                "model so far; the model then appears in the vessel map's "
                                "chooser."),
                              _("_Train"), &vbox);
  table = plugin_table_new (8);
  gtk_box_pack_start (GTK_BOX (vbox), table, FALSE, FALSE, 0);
  d.photos = folder_button (_("Folder of Photographs"), config->photos);
  gimp_table_attach_aligned (GTK_TABLE (table), 0, 0, _("_Photographs:"), 0.0, 0.5, d.photos, 2, FALSE);
  d.annotations = folder_button (_("Folder of Annotations"), config->annotations);
  gimp_table_attach_aligned (GTK_TABLE (table), 0, 1, _("_Annotations:"), 0.0, 0.5, d.annotations, 2, FALSE);
  d.masks = folder_button (_("Folder of Field-of-View Masks"), config->masks);
  gimp_table_attach_aligned (GTK_TABLE (table), 0, 2, _("Field-of-view _masks (optional):"), 0.0, 0.5,
                             d.masks, 2, FALSE);

  button = plugin_check_button (_("Also the _open images with a reference layer"),
                                &config->use_open_images);
  gtk_table_attach (GTK_TABLE (table), button, 0, 3, 3, 4, GTK_FILL, 0, 0, 0);
  note = open_images_note ();
  d.open_note = gtk_label_new (note);
  gtk_label_set_line_wrap (GTK_LABEL (d.open_note), TRUE);
  gtk_label_set_width_chars (GTK_LABEL (d.open_note), 50);
  gtk_misc_set_alignment (GTK_MISC (d.open_note), 0.0, 0.5);
  gtk_table_attach (GTK_TABLE (table), d.open_note, 0, 3, 4, 5, GTK_FILL, 0, 0, 0);
  gtk_widget_show (d.open_note);

  combo = gimp_int_combo_box_new (_("Tiny (fast, rougher)"), TRAIN_SIZE_TINY,
                                  _("Standard"), TRAIN_SIZE_STANDARD, NULL);
  gimp_int_combo_box_connect (GIMP_INT_COMBO_BOX (combo), config->size_preset,
                              G_CALLBACK (int_changed), &config->size_preset);
  gimp_table_attach_aligned (GTK_TABLE (table), 0, 5, _("Network _size:"), 0.0, 0.5, combo, 2, FALSE);

  combo = g_object_new (GIMP_TYPE_INT_COMBO_BOX, NULL);
  gimp_int_combo_box_append (GIMP_INT_COMBO_BOX (combo), GIMP_INT_STORE_VALUE, -1,
                             GIMP_INT_STORE_LABEL, _("From scratch"), -1);
  for (guint i = 0; i < d.models->len; i++)
    {
      const PluginModelInfo *info = d.models->pdata[i];

      gimp_int_combo_box_append (GIMP_INT_COMBO_BOX (combo), GIMP_INT_STORE_VALUE, (gint) i,
                                 GIMP_INT_STORE_LABEL, info->name, -1);
      if (strcmp (info->name, config->start_model) == 0)
        active = (int) i;
    }
  gimp_int_combo_box_connect (GIMP_INT_COMBO_BOX (combo), active, G_CALLBACK (start_changed), &d);
  gtk_widget_show (combo);
  gimp_table_attach_aligned (GTK_TABLE (table), 0, 6, _("Start _from:"), 0.0, 0.5, combo, 2, FALSE);

  d.name_entry = gtk_entry_new ();
  gtk_entry_set_text (GTK_ENTRY (d.name_entry), config->model_name);
  gtk_widget_show (d.name_entry);
  gimp_table_attach_aligned (GTK_TABLE (table), 0, 7, _("New model's _name:"), 0.0, 0.5,
                             d.name_entry, 2, FALSE);

  table = plugin_table_new (1);
  gtk_box_pack_start (GTK_BOX (vbox), table, FALSE, FALSE, 0);
  plugin_int_scale (table, 0, _("St_eps:"), &config->steps, 50, 20000, 50,
                    _("Optimiser steps; 2000 take a few minutes for the tiny size on two cores"));

  gtk_widget_show (dialog);
  ok = gimp_dialog_run (GIMP_DIALOG (dialog)) == GTK_RESPONSE_OK;
  if (ok)
    g_strlcpy (config->model_name, gtk_entry_get_text (GTK_ENTRY (d.name_entry)),
               sizeof config->model_name);
  gtk_widget_destroy (dialog);
  plugin_models_free (d.models);
  return ok;
}

static gboolean
progress_update (double fraction, const char *message, gpointer data)
{
  TrainProgress *p = data;

  gtk_progress_bar_set_fraction (GTK_PROGRESS_BAR (p->bar), CLAMP (fraction, 0.0, 1.0));
  if (message)
    gtk_label_set_text (GTK_LABEL (p->label), message);
  while (gtk_events_pending ())
    gtk_main_iteration ();
  return !p->stop;
}

static void
stop_clicked (GtkWidget *button, TrainProgress *p)
{
  p->stop = TRUE;
  gtk_widget_set_sensitive (button, FALSE);
}

static gboolean
window_closed (GtkWidget *window, GdkEvent *event, TrainProgress *p)
{
  p->stop = TRUE;
  return TRUE; /* the window stays until training has stopped */
}

gboolean
train_dialog (TrainConfig *config, TrainOutcome *outcome, GError **error)
{
  TrainProgress p = { 0 };
  GtkWidget *vbox, *button;
  g_autoptr (GPtrArray) pairs = g_ptr_array_new_with_free_func ((GDestroyNotify) train_pair_free);
  gboolean ok;

  gimp_ui_init (PLUG_IN_BINARY, FALSE);
  if (!settings_dialog (config))
    return FALSE;

  p.window = gtk_window_new (GTK_WINDOW_TOPLEVEL);
  gtk_window_set_title (GTK_WINDOW (p.window), _("Training the Vessel Model"));
  gtk_window_set_role (GTK_WINDOW (p.window), TRAIN_ROLE);
  g_signal_connect (p.window, "delete-event", G_CALLBACK (window_closed), &p);
  vbox = gtk_vbox_new (FALSE, 8);
  gtk_container_set_border_width (GTK_CONTAINER (vbox), 12);
  gtk_container_add (GTK_CONTAINER (p.window), vbox);
  p.label = gtk_label_new (_("Reading the photographs..."));
  gtk_label_set_width_chars (GTK_LABEL (p.label), 50);
  gtk_box_pack_start (GTK_BOX (vbox), p.label, FALSE, FALSE, 0);
  p.bar = gtk_progress_bar_new ();
  gtk_box_pack_start (GTK_BOX (vbox), p.bar, FALSE, FALSE, 0);
  button = gtk_button_new_with_mnemonic (_("_Stop (keep the best model so far)"));
  g_signal_connect (button, "clicked", G_CALLBACK (stop_clicked), &p);
  gtk_box_pack_start (GTK_BOX (vbox), button, FALSE, FALSE, 0);
  gtk_widget_show_all (p.window);
  progress_update (0.0, NULL, &p);

  ok = train_pairs_from_folders (config, pairs, error)
       && (!config->use_open_images || train_pairs_from_open_images (pairs, error))
       && train_core (config, pairs, progress_update, &p, outcome, error);
  gtk_widget_destroy (p.window);
  if (ok)
    {
      g_autofree char *done = g_strdup_printf (_("The model “%s” is trained (%d steps, "
                                                 "validation AUC %.4f) and saved in %s. It is "
                                                 "now in the Vessel Map's model chooser."),
                                               config->model_name, outcome->steps_done,
                                               outcome->validation_auc, outcome->model_path);
      g_message ("%s", done);
    }
  return ok;
}
