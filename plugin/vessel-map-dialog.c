/* vessel-map-dialog.c — the vessel map dialog: method and its settings, model chooser (shipped
 * and own models), binary map and layer options, and a live preview that runs the same core
 * as the real run (vessel_map_core) on the part of the photograph the preview shows. */
#include "config.h"

#include <string.h>

#include "vessel-map.h"
#include "dialogs.h"
#include "rete_nn.h"

enum { PREVIEW_OVERLAY, PREVIEW_PROBABILITY, PREVIEW_BINARY };

typedef struct {
  gint32 image, drawable;
  VesselMapConfig *config;
  GtkWidget *preview, *notebook, *model_combo, *model_note, *classical_box, *threshold_scale_box;
  GtkWidget *message;
  GPtrArray *models;
  ReteModel *model;          /* loaded for the preview */
  char *model_loaded;        /* its name */
  gint preview_mode;
  gint model_index;
} VesselMapDialog;

static void
invalidate (VesselMapDialog *d)
{
  gimp_preview_invalidate (GIMP_PREVIEW (d->preview));
}

static const ReteModel *
preview_model (VesselMapDialog *d, GError **error)
{
  if (d->config->method != RETE_METHOD_LEARNED)
    return NULL;
  if (d->model && g_strcmp0 (d->model_loaded, d->config->model) == 0)
    return d->model;
  g_clear_pointer (&d->model, plugin_model_free);
  g_clear_pointer (&d->model_loaded, g_free);
  d->model = plugin_model_load (d->config->model, error);
  if (d->model)
    d->model_loaded = g_strdup (d->config->model);
  return d->model;
}

/* The preview: the core on what the preview shows, drawn as the chosen view. */
static void
update_preview (GimpPreview *preview, VesselMapDialog *d)
{
  VesselMapOutput out = { 0 };
  ReteRect area;
  const ReteModel *model;
  GError *error = NULL;
  int px, py;

  gimp_preview_get_position (preview, &px, &py);
  gimp_preview_get_size (preview, &area.width, &area.height);
  area.x = px;
  area.y = py;
  model = preview_model (d, &error);
  if ((d->config->method == RETE_METHOD_LEARNED && !model)
      || !vessel_map_core (d->image, d->drawable, d->config, model, &area, &out, NULL, NULL,
                           &error))
    {
      gtk_label_set_text (GTK_LABEL (d->message), error->message);
      g_error_free (error);
      return;
    }
  gtk_label_set_text (GTK_LABEL (d->message), "");
  {
    /* Display only: grey maps as they are, or the photograph under the coloured binary map. */
    const ReteImage *prob = out.result.probability, *binary = out.result.binary;
    int w = prob->width, h = prob->height;
    g_autofree guchar *rgb = g_new (guchar, (gsize) w * h * 3);
    g_autofree guchar *photo = NULL;
    double alpha = d->config->overlay_opacity / 100.0;
    const GimpRGB *c = &d->config->overlay_colour;

    if (d->preview_mode == PREVIEW_OVERLAY)
      {
        GeglBuffer *buffer = gimp_drawable_get_buffer (d->drawable);

        photo = g_new (guchar, (gsize) w * h * 3);
        gegl_buffer_get (buffer, GEGL_RECTANGLE (out.rect.x, out.rect.y, w, h), 1.0,
                         babl_format ("R'G'B' u8"), photo, GEGL_AUTO_ROWSTRIDE, GEGL_ABYSS_NONE);
        g_object_unref (buffer);
      }
    for (gsize i = 0; i < (gsize) w * h; i++)
      for (int k = 0; k < 3; k++)
        {
          double v;

          if (d->preview_mode == PREVIEW_PROBABILITY)
            v = prob->data[i];
          else if (d->preview_mode == PREVIEW_BINARY)
            v = binary->data[i];
          else
            {
              double colour = k == 0 ? c->r : k == 1 ? c->g : c->b;
              double a = binary->data[i] >= 0.5f ? alpha : 0.0;

              v = (1.0 - a) * photo[3 * i + k] / 255.0 + a * colour;
            }
          rgb[3 * i + k] = (guchar) CLAMP (v * 255.0 + 0.5, 0, 255);
        }
    gimp_preview_area_draw (GIMP_PREVIEW_AREA (gimp_preview_get_area (preview)),
                            out.rect.x - px, out.rect.y - py, w, h, GIMP_RGB_IMAGE, rgb, w * 3);
  }
  vessel_map_output_clear (&out);
}

static void
method_changed (GtkWidget *combo, VesselMapDialog *d)
{
  gimp_int_combo_box_get_active (GIMP_INT_COMBO_BOX (combo), &d->config->method);
  /* Notebook pages: 0 learned, 1 Frangi, 2 matched filter (both variants), 3 line detector. */
  gtk_notebook_set_current_page (GTK_NOTEBOOK (d->notebook),
                                 d->config->method == RETE_METHOD_LEARNED ? 0
                                 : d->config->method == RETE_METHOD_FRANGI ? 1
                                 : d->config->method == RETE_METHOD_LINE ? 3 : 2);
  gtk_widget_set_sensitive (d->classical_box, d->config->method != RETE_METHOD_LEARNED);
  invalidate (d);
}

static void
model_changed (GtkWidget *combo, VesselMapDialog *d)
{
  const PluginModelInfo *info;

  gimp_int_combo_box_get_active (GIMP_INT_COMBO_BOX (combo), &d->model_index);
  if (d->model_index < 0 || (guint) d->model_index >= d->models->len)
    return;
  info = d->models->pdata[d->model_index];
  g_strlcpy (d->config->model, info->name, sizeof d->config->model);
  {
    g_autofree char *note = g_strdup_printf (info->own ? _("Your own model, in %s")
                                                       : _("Shipped with Rete: %s"), info->path);
    gtk_label_set_text (GTK_LABEL (d->model_note), note);
  }
  invalidate (d);
}

static void
threshold_method_changed (GtkWidget *combo, VesselMapDialog *d)
{
  gimp_int_combo_box_get_active (GIMP_INT_COMBO_BOX (combo), &d->config->threshold_method);
  gtk_widget_set_sensitive (d->threshold_scale_box,
                            d->config->threshold_method != RETE_THRESHOLD_OTSU);
  invalidate (d);
}

static void
int_changed (GtkWidget *combo, gint *value)
{
  gimp_int_combo_box_get_active (GIMP_INT_COMBO_BOX (combo), value);
}

static void
connect_scale (GtkObject *adj, VesselMapDialog *d)
{
  g_signal_connect_swapped (adj, "value-changed", G_CALLBACK (invalidate), d);
}

static GtkWidget *
method_page (GtkWidget *notebook)
{
  GtkWidget *table = plugin_table_new (3);

  gtk_container_set_border_width (GTK_CONTAINER (table), 6);
  gtk_notebook_append_page (GTK_NOTEBOOK (notebook), table, NULL);
  return table;
}

static GtkWidget *
models_combo (VesselMapDialog *d)
{
  GtkWidget *combo = g_object_new (GIMP_TYPE_INT_COMBO_BOX, NULL);
  int active = -1;

  for (guint i = 0; i < d->models->len; i++)
    {
      const PluginModelInfo *info = d->models->pdata[i];
      g_autofree char *label = g_strdup_printf (info->own ? _("%s (your own)") : "%s", info->name);

      gimp_int_combo_box_append (GIMP_INT_COMBO_BOX (combo), GIMP_INT_STORE_VALUE, (gint) i,
                                 GIMP_INT_STORE_LABEL, label, -1);
      if (strcmp (info->name, d->config->model) == 0)
        active = (int) i;
    }
  if (d->models->len == 0)
    gtk_widget_set_sensitive (combo, FALSE);
  gimp_int_combo_box_connect (GIMP_INT_COMBO_BOX (combo), active >= 0 ? active : 0,
                              G_CALLBACK (model_changed), d);
  gtk_widget_show (combo);
  return combo;
}

gboolean
vessel_map_dialog (gint32 image, gint32 drawable, VesselMapConfig *config)
{
  VesselMapDialog d = { .image = image, .drawable = drawable, .config = config };
  GtkWidget *dialog, *vbox, *hbox, *left, *table, *combo, *frame, *button, *method_combo;
  GtkObject *adj;
  gboolean ok;

  gimp_ui_init (PLUG_IN_BINARY, FALSE);
  d.models = plugin_models_list ();
  d.preview_mode = PREVIEW_OVERLAY;
  dialog = plugin_dialog_new (_("Vessel Map"), VESSEL_MAP_ROLE, VESSEL_MAP_PROC,
                              _("Finds the blood vessels of the photograph and adds a layer group "
                                "named after the method: vessel probability, a binary vessel "
                                "layer to correct by hand (paint white to add vessel, black to "
                                "remove it), and optionally a coloured overlay and the field of "
                                "view. Run again with another method to compare side by side. "
                                "With a selection only the selected part is mapped."),
                              NULL, &vbox);

  hbox = gtk_hbox_new (FALSE, 12);
  gtk_box_pack_start (GTK_BOX (vbox), hbox, TRUE, TRUE, 0);
  gtk_widget_show (hbox);
  d.preview = gimp_drawable_preview_new_from_drawable_id (drawable);
  gtk_widget_set_size_request (gimp_preview_get_area (GIMP_PREVIEW (d.preview)), 360, 360);
  /* Start at the middle of the photograph (the corners are black surround). */
  gimp_scrolled_preview_set_position (GIMP_SCROLLED_PREVIEW (d.preview),
                                      MAX (0, gimp_drawable_width (drawable) / 2 - 180),
                                      MAX (0, gimp_drawable_height (drawable) / 2 - 180));
  gtk_box_pack_start (GTK_BOX (hbox), d.preview, TRUE, TRUE, 0);
  gtk_widget_show (d.preview);
  g_signal_connect (d.preview, "invalidated", G_CALLBACK (update_preview), &d);

  left = gtk_vbox_new (FALSE, 8);
  gtk_box_pack_start (GTK_BOX (hbox), left, FALSE, FALSE, 0);
  gtk_widget_show (left);

  /* Method */
  table = plugin_table_new (1);
  gtk_box_pack_start (GTK_BOX (left), table, FALSE, FALSE, 0);
  method_combo = gimp_int_combo_box_new (_("U-Net (learned)"), RETE_METHOD_LEARNED,
                                  _("Frangi vesselness"), RETE_METHOD_FRANGI,
                                  _("Matched filter (Gaussian)"), RETE_METHOD_MATCHED,
                                  _("Matched filter with FDOG"), RETE_METHOD_MATCHED_FDOG,
                                  _("Multiscale line detector"), RETE_METHOD_LINE, NULL);
  gimp_table_attach_aligned (GTK_TABLE (table), 0, 0, _("_Method:"), 0.0, 0.5, method_combo, 2,
                             FALSE);

  d.notebook = gtk_notebook_new ();
  gtk_notebook_set_show_tabs (GTK_NOTEBOOK (d.notebook), FALSE);
  gtk_box_pack_start (GTK_BOX (left), d.notebook, FALSE, FALSE, 0);
  gtk_widget_show (d.notebook);

  table = method_page (d.notebook);
  d.model_combo = models_combo (&d);
  gimp_table_attach_aligned (GTK_TABLE (table), 0, 0, _("M_odel:"), 0.0, 0.5, d.model_combo, 2, FALSE);
  d.model_note = gtk_label_new (d.models->len ? NULL
                                : _("No model is installed. Train one (Filters ▸ Retina ▸ "
                                    "Train Vessel Model) or choose a classical method."));
  gtk_label_set_line_wrap (GTK_LABEL (d.model_note), TRUE);
  gtk_label_set_width_chars (GTK_LABEL (d.model_note), 36);
  gtk_table_attach (GTK_TABLE (table), d.model_note, 0, 3, 1, 2, GTK_FILL, 0, 0, 0);
  gtk_widget_show (d.model_note);
  if (d.models->len)
    model_changed (d.model_combo, &d);

  table = method_page (d.notebook);
  connect_scale (plugin_scale (table, 0, _("Smallest _scale σ:"), &config->frangi_sigma_min,
                               0.5, 8, 0.25, 2, _("Narrowest vessel sought, in pixels")), &d);
  connect_scale (plugin_scale (table, 1, _("_Largest scale σ:"), &config->frangi_sigma_max,
                               0.5, 16, 0.25, 2, _("Widest vessel sought, in pixels")), &d);
  connect_scale (plugin_scale (table, 2, _("_β (blob vs line):"), &config->frangi_beta,
                               0.05, 2, 0.05, 2, _("Lower values suppress round blobs more")), &d);

  table = method_page (d.notebook);
  connect_scale (plugin_scale (table, 0, _("Vessel _width σ:"), &config->matched_sigma,
                               0.5, 6, 0.1, 2, _("Cross-section of the vessels matched, in pixels")), &d);
  connect_scale (plugin_scale (table, 1, _("Piece _length:"), &config->matched_length,
                               3, 31, 1, 0, _("Length of the straight vessel piece matched, in pixels")), &d);

  table = method_page (d.notebook);
  connect_scale (plugin_int_scale (table, 0, _("_Window:"), &config->line_window, 3, 61, 2,
                                   _("Largest line length and window side, odd, in pixels")), &d);

  /* Classical methods: channel and CLAHE */
  d.classical_box = plugin_table_new (2);
  gtk_box_pack_start (GTK_BOX (left), d.classical_box, FALSE, FALSE, 0);
  combo = gimp_int_combo_box_new (_("Green"), RETE_CHANNEL_GREEN, _("Luminance"), RETE_CHANNEL_LUMINANCE,
                                  _("Red"), RETE_CHANNEL_RED, _("Blue"), RETE_CHANNEL_BLUE, NULL);
  gimp_int_combo_box_connect (GIMP_INT_COMBO_BOX (combo), config->channel, G_CALLBACK (int_changed),
                              &config->channel);
  g_signal_connect_swapped (combo, "changed", G_CALLBACK (invalidate), &d);
  gimp_table_attach_aligned (GTK_TABLE (d.classical_box), 0, 0, _("C_hannel:"), 0.0, 0.5, combo, 2, FALSE);
  button = plugin_check_button (_("_CLAHE inside the field of view first"), &config->use_clahe);
  g_signal_connect_swapped (button, "toggled", G_CALLBACK (invalidate), &d);
  gtk_table_attach (GTK_TABLE (d.classical_box), button, 0, 3, 1, 2, GTK_FILL, 0, 0, 0);

  /* Binary map */
  frame = gimp_frame_new (_("Binary vessel map"));
  gtk_box_pack_start (GTK_BOX (left), frame, FALSE, FALSE, 0);
  gtk_widget_show (frame);
  table = plugin_table_new (3);
  gtk_container_add (GTK_CONTAINER (frame), table);
  combo = gimp_int_combo_box_new (_("Otsu (automatic)"), RETE_THRESHOLD_OTSU,
                                  _("Fixed level"), RETE_THRESHOLD_FIXED,
                                  _("Vessel fraction of the field of view"), RETE_THRESHOLD_FRACTION,
                                  NULL);
  gimp_table_attach_aligned (GTK_TABLE (table), 0, 0, _("_Threshold:"), 0.0, 0.5, combo, 2, FALSE);
  d.threshold_scale_box = plugin_table_new (2);
  gtk_table_attach (GTK_TABLE (table), d.threshold_scale_box, 0, 3, 1, 2, GTK_FILL, 0, 0, 0);
  connect_scale (plugin_scale (d.threshold_scale_box, 0, _("Level or _fraction:"), &config->threshold,
                               0.01, 0.99, 0.01, 2, _("Fixed level of the vessel map, or the fraction "
                                                      "of the field of view marked as vessel")), &d);
  connect_scale (plugin_int_scale (d.threshold_scale_box, 1, _("Remove pieces _under (pixels):"),
                                   &config->min_component, 0, 500, 5,
                                   _("Vessel pieces smaller than this are removed")), &d);
  gimp_int_combo_box_connect (GIMP_INT_COMBO_BOX (combo), config->threshold_method,
                              G_CALLBACK (threshold_method_changed), &d);

  /* Layers */
  frame = gimp_frame_new (_("Layers"));
  gtk_box_pack_start (GTK_BOX (left), frame, FALSE, FALSE, 0);
  gtk_widget_show (frame);
  table = plugin_table_new (3);
  gtk_container_add (GTK_CONTAINER (frame), table);
  {
    GtkWidget *row = gtk_hbox_new (FALSE, 6);

    gtk_box_pack_start (GTK_BOX (row), plugin_check_button (_("Coloured _overlay"),
                                                            &config->add_overlay), FALSE, FALSE, 0);
    button = gimp_color_button_new (_("Overlay Colour"), 32, 16, &config->overlay_colour,
                                    GIMP_COLOR_AREA_FLAT);
    g_signal_connect (button, "color-changed", G_CALLBACK (gimp_color_button_get_color),
                      &config->overlay_colour);
    g_signal_connect_swapped (button, "color-changed", G_CALLBACK (invalidate), &d);
    gtk_box_pack_start (GTK_BOX (row), button, FALSE, FALSE, 0);
    gtk_widget_show (button);
    gtk_table_attach (GTK_TABLE (table), row, 0, 3, 0, 1, GTK_FILL, 0, 0, 0);
    gtk_widget_show (row);
  }
  adj = plugin_scale (table, 1, _("O_pacity:"), &config->overlay_opacity, 0, 100, 1, 0, NULL);
  connect_scale (adj, &d);
  gtk_table_attach (GTK_TABLE (table), plugin_check_button (_("_Field-of-view layer"), &config->add_fov_layer),
                    0, 3, 2, 3, GTK_FILL, 0, 0, 0);

  table = plugin_table_new (1);
  gtk_box_pack_start (GTK_BOX (left), table, FALSE, FALSE, 0);
  combo = gimp_int_combo_box_new (_("Overlay on the photograph"), PREVIEW_OVERLAY,
                                  _("Vessel probability"), PREVIEW_PROBABILITY,
                                  _("Binary vessel map"), PREVIEW_BINARY, NULL);
  gimp_int_combo_box_connect (GIMP_INT_COMBO_BOX (combo), d.preview_mode, G_CALLBACK (int_changed),
                              &d.preview_mode);
  g_signal_connect_swapped (combo, "changed", G_CALLBACK (invalidate), &d);
  gimp_table_attach_aligned (GTK_TABLE (table), 0, 0, _("Pre_view shows:"), 0.0, 0.5, combo, 2, FALSE);

  d.message = gtk_label_new (NULL);
  gtk_label_set_line_wrap (GTK_LABEL (d.message), TRUE);
  gtk_label_set_width_chars (GTK_LABEL (d.message), 36);
  gtk_box_pack_start (GTK_BOX (left), d.message, FALSE, FALSE, 0);
  gtk_widget_show (d.message);

  /* The method combo last: its first signal shows the right page and draws the preview. */
  gtk_widget_show (dialog);
  gimp_int_combo_box_connect (GIMP_INT_COMBO_BOX (method_combo), config->method,
                              G_CALLBACK (method_changed), &d);
  ok = gimp_dialog_run (GIMP_DIALOG (dialog)) == GTK_RESPONSE_OK;
  gtk_widget_destroy (dialog);
  g_clear_pointer (&d.model, plugin_model_free);
  g_free (d.model_loaded);
  plugin_models_free (d.models);
  return ok;
}
