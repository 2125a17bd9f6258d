/* vessel-map.c — "Vessel Map": a vessel probability layer, a binary vessel layer ready to be
 * corrected by hand, and optionally a coloured overlay and a field-of-view layer, made by one
 * of librete's methods (rete_vessel_run). Each run adds its own layer group, named after the
 * method and its settings, so that two methods can be compared side by side in one image. */
#include "config.h"

#include <string.h>

#include "vessel-map.h"
#include "rete_nn.h"

#define PLUG_IN_PROC VESSEL_MAP_PROC
#define PLUG_IN_ROLE VESSEL_MAP_ROLE
#define N_ARGS 20

void
vessel_map_config_init (VesselMapConfig *config)
{
  ReteVesselParams p;

  rete_vessel_params_init (&p);
  memset (config, 0, sizeof *config);
  /* The learned method first when its standard model is installed, else Frangi. */
  {
    g_autofree char *standard = plugin_model_resolve ("standard", NULL);

    config->method = standard ? RETE_METHOD_LEARNED : RETE_METHOD_FRANGI;
  }
  g_strlcpy (config->model, "standard", sizeof config->model);
  config->channel = p.channel;
  config->use_clahe = p.use_clahe;
  config->frangi_sigma_min = p.frangi.sigma_min;
  config->frangi_sigma_max = p.frangi.sigma_max;
  config->frangi_beta = p.frangi.beta;
  config->matched_sigma = p.matched.sigma;
  config->matched_length = p.matched.length;
  config->line_window = p.line.window;
  config->threshold_method = p.binary.method;
  config->threshold = p.binary.method == RETE_THRESHOLD_FRACTION ? p.binary.fraction
                                                                 : p.binary.level;
  config->min_component = (gint) p.binary.min_component;
  config->add_overlay = TRUE;
  config->add_fov_layer = TRUE;
  gimp_rgba_set (&config->overlay_colour, 0.0, 0.85, 1.0, 1.0);
  config->overlay_opacity = 70.0;
}

gboolean
vessel_map_config_check (const VesselMapConfig *c, GError **error)
{
  const char *bad = NULL;

  if (c->method < 0 || c->method >= RETE_N_METHODS)
    bad = _("method must be 0 (learned), 1 (Frangi), 2 (matched filter), "
            "3 (matched filter with FDOG) or 4 (line detector)");
  else if (c->channel < RETE_CHANNEL_GREEN || c->channel > RETE_CHANNEL_BLUE)
    bad = _("channel must be 0 (green), 1 (luminance), 2 (red) or 3 (blue)");
  else if (!(c->frangi_sigma_min > 0.0) || !(c->frangi_sigma_max >= c->frangi_sigma_min)
           || c->frangi_sigma_max > 32.0)
    bad = _("frangi-sigma-min must be above 0 and at most frangi-sigma-max, which must be at most 32");
  else if (!(c->frangi_beta > 0.0) || c->frangi_beta > 10.0)
    bad = _("frangi-beta must lie in (0, 10]");
  else if (!(c->matched_sigma > 0.0) || c->matched_sigma > 16.0)
    bad = _("matched-sigma must lie in (0, 16]");
  else if (!(c->matched_length >= 1.0) || c->matched_length > 64.0)
    bad = _("matched-length must lie in [1, 64]");
  else if (c->line_window < 3 || c->line_window > 61 || c->line_window % 2 == 0)
    bad = _("line-window must be odd, from 3 to 61");
  else if (c->threshold_method < RETE_THRESHOLD_OTSU || c->threshold_method > RETE_THRESHOLD_FRACTION)
    bad = _("threshold-method must be 0 (Otsu), 1 (fixed level) or 2 (vessel fraction)");
  else if (c->threshold_method == RETE_THRESHOLD_FIXED && !(c->threshold >= 0.0 && c->threshold <= 1.0))
    bad = _("threshold must lie in [0, 1] for a fixed level");
  else if (c->threshold_method == RETE_THRESHOLD_FRACTION && !(c->threshold > 0.0 && c->threshold < 1.0))
    bad = _("threshold must lie in (0, 1) for a vessel fraction");
  else if (c->min_component < 0 || c->min_component > 1000000)
    bad = _("min-component must lie in [0, 1000000]");
  else if (!(c->overlay_opacity >= 0.0 && c->overlay_opacity <= 100.0))
    bad = _("overlay-opacity must lie in [0, 100]");
  if (bad)
    {
      g_set_error (error, PLUGIN_ERROR, 0, _("Vessel map: %s."), bad);
      return FALSE;
    }
  return TRUE;
}

void
vessel_map_config_to_params (const VesselMapConfig *c, const ReteModel *model,
                             ReteVesselParams *p)
{
  rete_vessel_params_init (p);
  p->method = c->method;
  p->channel = c->channel;
  p->use_clahe = c->use_clahe;
  p->frangi.sigma_min = c->frangi_sigma_min;
  p->frangi.sigma_max = c->frangi_sigma_max;
  p->frangi.beta = c->frangi_beta;
  p->matched.sigma = c->matched_sigma;
  p->matched.length = c->matched_length;
  p->line.window = c->line_window;
  p->binary.method = c->threshold_method;
  if (c->threshold_method == RETE_THRESHOLD_FRACTION)
    p->binary.fraction = c->threshold;
  else if (c->threshold_method == RETE_THRESHOLD_FIXED)
    p->binary.level = c->threshold;
  p->binary.min_component = (gsize) c->min_component;
  p->model = model;
}

void
vessel_map_output_clear (VesselMapOutput *output)
{
  rete_vessel_result_clear (&output->result);
  g_clear_pointer (&output->description, g_free);
}

/* The field of view of the whole photograph, cut to `rect` and limited to the selection:
 * a method then works on the selected part only, and the aperture is still found from the
 * whole photograph (a crop may hold no dark surround). */
static ReteImage *
fov_for_rect (gint32 image, gint32 drawable, const ReteImage *photo, const ReteVesselParams *p,
              const ReteRect *rect, gboolean use_selection, GError **error)
{
  g_autoptr (ReteImage) whole = rete_fov_detect (photo, &p->fov, error);
  g_autoptr (ReteImage) fov = NULL;
  g_autoptr (ReteImage) selection = NULL;

  if (!whole || !(fov = rete_image_crop (whole, rect, error)))
    return NULL;
  if (use_selection)
    {
      float *f;
      const float *s;

      if (!(selection = plugin_read_selection (image, drawable, rect, error)))
        return NULL;
      /* A pixel is inside when inside the aperture and at least half selected. */
      f = fov->data;
      s = selection->data;
      for (gsize i = 0; i < rete_image_n_pixels (fov); i++)
        f[i] = f[i] >= 0.5f && s[i] >= 0.5f ? 1.0f : 0.0f;
      if (rete_mask_count (fov) == 0)
        {
          g_set_error (error, PLUGIN_ERROR, 0,
                       _("The selection holds no part of the photograph's field of view. "
                         "Select part of the fundus, or select nothing to map the whole "
                         "photograph."));
          return NULL;
        }
    }
  return g_steal_pointer (&fov);
}

gboolean
vessel_map_core (gint32 image, gint32 drawable, const VesselMapConfig *config,
                 const ReteModel *model, const ReteRect *area, VesselMapOutput *output,
                 ReteProgressFunc progress, gpointer progress_data, GError **error)
{
  ReteVesselParams params;
  g_autoptr (ReteImage) photo = NULL;
  g_autoptr (ReteImage) crop = NULL;
  g_autoptr (ReteImage) fov = NULL;
  gboolean use_selection = !gimp_selection_is_empty (image);
  ReteRect rect;
  int x, y, w, h;

  memset (output, 0, sizeof *output);
  vessel_map_config_to_params (config, model, &params);
  if (!vessel_map_config_check (config, error))
    return FALSE;
  if (!gimp_drawable_mask_intersect (drawable, &x, &y, &w, &h))
    {
      g_set_error (error, PLUGIN_ERROR, 0,
                   _("The selection does not touch the layer. Select part of the photograph, "
                     "or select nothing to map the whole photograph."));
      return FALSE;
    }
  rect = (ReteRect) { x, y, w, h };
  if (area)
    {
      int x1 = MAX (rect.x, area->x), y1 = MAX (rect.y, area->y);
      int x2 = MIN (rect.x + rect.width, area->x + area->width);
      int y2 = MIN (rect.y + rect.height, area->y + area->height);

      if (x2 <= x1 || y2 <= y1)
        {
          g_set_error (error, PLUGIN_ERROR, 0, _("Nothing selected in the preview."));
          return FALSE;
        }
      rect = (ReteRect) { x1, y1, x2 - x1, y2 - y1 };
    }

  if (!(photo = plugin_read_photograph (drawable, error)))
    return FALSE;
  if (!use_selection && !area)
    {
      /* The whole photograph: exactly what the `rete` command computes. */
      if (!rete_vessel_run (photo, NULL, &params, &output->result, progress, progress_data,
                            error))
        return FALSE;
    }
  else
    {
      if (!(fov = fov_for_rect (image, drawable, photo, &params, &rect, use_selection, error))
          || !(crop = rete_image_crop (photo, &rect, error))
          || !rete_vessel_run (crop, fov, &params, &output->result, progress, progress_data,
                               error))
        return FALSE;
    }
  output->rect = rect;
  output->description = rete_vessel_params_describe (&params);
  if (config->method == RETE_METHOD_LEARNED && !strstr (output->description, config->model)
      && !strchr (config->model, G_DIR_SEPARATOR))
    {
      char *longer = g_strdup_printf ("%s (%s)", output->description, config->model);

      g_free (output->description);
      output->description = longer;
    }
  return TRUE;
}

/* A map of the drawable's size holding `part` at the processed rectangle (0 elsewhere). */
static ReteImage *
full_size (gint32 drawable, const ReteImage *part, const ReteRect *rect, GError **error)
{
  g_autoptr (ReteImage) full = NULL;

  if (part->width == gimp_drawable_width (drawable)
      && part->height == gimp_drawable_height (drawable))
    return rete_image_copy (part, error);
  full = rete_image_new (gimp_drawable_width (drawable), gimp_drawable_height (drawable), 1, error);
  if (!full || !rete_image_paste (full, part, rect->x, rect->y, error))
    return NULL;
  return g_steal_pointer (&full);
}

typedef struct {
  gint32 group, probability, binary, overlay, fov;
} VesselMapLayers;

/* Adds the layers, all at once at the end of the run, in one undo group. */
static gboolean
add_layers (gint32 image, gint32 drawable, const VesselMapConfig *config,
            const VesselMapOutput *output, VesselMapLayers *layers, GError **error)
{
  const ReteVesselResult *r = &output->result;
  g_autoptr (ReteImage) probability = full_size (drawable, r->probability, &output->rect, error);
  g_autoptr (ReteImage) binary = probability ? full_size (drawable, r->binary, &output->rect, error) : NULL;
  g_autoptr (ReteImage) fov = binary ? full_size (drawable, r->fov, &output->rect, error) : NULL;
  g_autofree char *name = NULL;
  gint32 parent = gimp_item_get_parent (drawable);
  gint position = gimp_image_get_item_position (image, drawable);

  layers->group = layers->probability = layers->binary = layers->overlay = layers->fov = -1;
  if (!fov)
    return FALSE;

  gimp_image_undo_group_start (image);
  layers->group = gimp_layer_group_new (image);
  name = g_strdup_printf (_("Vessels — %s"), output->description);
  gimp_item_set_name (layers->group, name);
  gimp_image_insert_layer (image, layers->group, parent > 0 ? parent : 0, MAX (position, 0));

  if (config->add_fov_layer)
    {
      layers->fov = plugin_add_grey_layer (image, drawable, layers->group, 0,
                                           _("Field of view"), fov);
      gimp_item_set_visible (layers->fov, FALSE);
    }
  g_free (name);
  name = g_strdup_printf (_("Vessel probability — %s"), output->description);
  layers->probability = plugin_add_grey_layer (image, drawable, layers->group, 0, name,
                                               probability);
  g_free (name);
  name = g_strdup_printf (_("Binary vessel map (threshold %.3g) — %s"), r->threshold,
                          output->description);
  layers->binary = plugin_add_grey_layer (image, drawable, layers->group, 0, name, binary);
  gimp_item_set_visible (layers->probability, FALSE);
  if (config->add_overlay)
    {
      g_free (name);
      name = g_strdup_printf (_("Vessel overlay — %s"), output->description);
      layers->overlay = plugin_add_colour_layer (image, drawable, layers->group, 0, name,
                                                 &config->overlay_colour, binary,
                                                 config->overlay_opacity);
      /* With an overlay the photograph shows through; the binary layer waits, hidden. */
      gimp_item_set_visible (layers->binary, FALSE);
    }

  if (layers->group < 0 || layers->probability < 0 || layers->binary < 0
      || (config->add_fov_layer && layers->fov < 0)
      || (config->add_overlay && layers->overlay < 0))
    {
      /* Never a half-made result: the group goes, with whatever it holds. */
      g_set_error (error, PLUGIN_ERROR, 0, _("GIMP could not add the new layers: %s"),
                   gimp_get_pdb_error ());
      if (layers->group > 0)
        gimp_image_remove_layer (image, layers->group);
      gimp_image_undo_group_end (image);
      return FALSE;
    }
  gimp_image_undo_group_end (image);
  return TRUE;
}

void
vessel_map_query (void)
{
  static const GimpParamDef args[] = {
    { GIMP_PDB_INT32,    "run-mode",         "The run mode { RUN-INTERACTIVE (0), RUN-NONINTERACTIVE (1), RUN-WITH-LAST-VALS (2) }" },
    { GIMP_PDB_IMAGE,    "image",            "Input image" },
    { GIMP_PDB_DRAWABLE, "drawable",         "The photograph (RGB or grey, with or without alpha; the selection only when there is one)" },
    { GIMP_PDB_INT32,    "method",           "Vessel method { LEARNED (0), FRANGI (1), MATCHED-FILTER (2), MATCHED-FILTER-FDOG (3), LINE-DETECTOR (4) }" },
    { GIMP_PDB_STRING,   "model",            "Learned method: a model name as listed by plug-in-rete-models (\"standard\", ...) or a model file path" },
    { GIMP_PDB_INT32,    "channel",          "Classical methods: channel read { GREEN (0), LUMINANCE (1), RED (2), BLUE (3) }" },
    { GIMP_PDB_INT32,    "use-clahe",        "Classical methods: CLAHE inside the field of view first { FALSE (0), TRUE (1) }" },
    { GIMP_PDB_FLOAT,    "frangi-sigma-min", "Frangi: smallest scale, pixels (0 < s <= 32; 0 = default)" },
    { GIMP_PDB_FLOAT,    "frangi-sigma-max", "Frangi: largest scale, pixels (>= frangi-sigma-min; 0 = default)" },
    { GIMP_PDB_FLOAT,    "frangi-beta",      "Frangi: blob-versus-line sensitivity beta (0 < b <= 10; 0 = default)" },
    { GIMP_PDB_FLOAT,    "matched-sigma",    "Matched filter: vessel cross-section scale, pixels (0 < s <= 16; 0 = default)" },
    { GIMP_PDB_FLOAT,    "matched-length",   "Matched filter: length of the vessel piece matched, pixels (1 <= L <= 64; 0 = default)" },
    { GIMP_PDB_INT32,    "line-window",      "Line detector: window W, odd, pixels (3 <= W <= 61; 0 = default)" },
    { GIMP_PDB_INT32,    "threshold-method", "Binary map threshold { OTSU (0), FIXED (1), FRACTION (2) }" },
    { GIMP_PDB_FLOAT,    "threshold",        "FIXED: level in [0, 1]; FRACTION: vessel fraction of the field of view in (0, 1); OTSU: ignored" },
    { GIMP_PDB_INT32,    "min-component",    "Vessel pieces smaller than this many pixels are removed (0 keeps all, default 30)" },
    { GIMP_PDB_INT32,    "add-overlay",      "Add a coloured vessel overlay { FALSE (0), TRUE (1) }" },
    { GIMP_PDB_INT32,    "add-fov-layer",    "Add a field-of-view layer { FALSE (0), TRUE (1) }" },
    { GIMP_PDB_COLOR,    "overlay-color",    "Colour of the overlay" },
    { GIMP_PDB_FLOAT,    "overlay-opacity",  "Opacity of the overlay, percent (0..100)" },
  };
  static const GimpParamDef return_vals[] = {
    { GIMP_PDB_LAYER, "layer-group",       "The new layer group holding the layers below" },
    { GIMP_PDB_LAYER, "probability-layer", "Vessel probability (grey, 0..1)" },
    { GIMP_PDB_LAYER, "binary-layer",      "Binary vessel map (white vessels on black)" },
    { GIMP_PDB_LAYER, "overlay-layer",     "Coloured overlay, or -1" },
    { GIMP_PDB_LAYER, "fov-layer",         "Field of view (white inside), or -1" },
    { GIMP_PDB_FLOAT, "threshold-used",    "Level that made the binary map" },
  };
  G_STATIC_ASSERT (G_N_ELEMENTS (args) == N_ARGS);

  gimp_install_procedure (PLUG_IN_PROC,
                          N_("Map the blood vessels of a retinal photograph"),
                          "Finds the blood vessels of a colour (or grey) fundus photograph with "
                          "a small learned network (U-Net) or a classical filter (Frangi "
                          "vesselness, Gaussian matched filter, multiscale line detector) and "
                          "adds, in a new layer group named after the method and its settings: "
                          "a vessel probability layer, a binary vessel layer to correct by hand, "
                          "and optionally a coloured overlay and a field-of-view layer. Works on "
                          "the selection only when there is one. A research and grading aid, "
                          "not a diagnostic device: results must be checked by a qualified "
                          "person under local regulations and licensed practice.",
                          PLUG_IN_AUTHOR, PLUG_IN_AUTHOR, PLUG_IN_YEAR,
                          N_("_Vessel Map..."),
                          "RGB*, GRAY*",
                          GIMP_PLUGIN,
                          G_N_ELEMENTS (args), G_N_ELEMENTS (return_vals),
                          args, return_vals);
  gimp_plugin_menu_register (PLUG_IN_PROC, PLUG_IN_MENU);
}

/* Script-Fu convenience: 0 for a scale, a length or the window means librete's default. */
static void
zero_means_default (VesselMapConfig *c)
{
  VesselMapConfig d;

  vessel_map_config_init (&d);
  if (c->frangi_sigma_min == 0.0)
    c->frangi_sigma_min = d.frangi_sigma_min;
  if (c->frangi_sigma_max == 0.0)
    c->frangi_sigma_max = MAX (d.frangi_sigma_max, c->frangi_sigma_min);
  if (c->frangi_beta == 0.0)
    c->frangi_beta = d.frangi_beta;
  if (c->matched_sigma == 0.0)
    c->matched_sigma = d.matched_sigma;
  if (c->matched_length == 0.0)
    c->matched_length = d.matched_length;
  if (c->line_window == 0)
    c->line_window = d.line_window;
}

static void
config_from_args (VesselMapConfig *c, const GimpParam *param)
{
  c->method = param[3].data.d_int32;
  g_strlcpy (c->model, param[4].data.d_string ? param[4].data.d_string : "", sizeof c->model);
  c->channel = param[5].data.d_int32;
  c->use_clahe = param[6].data.d_int32 != 0;
  c->frangi_sigma_min = param[7].data.d_float;
  c->frangi_sigma_max = param[8].data.d_float;
  c->frangi_beta = param[9].data.d_float;
  c->matched_sigma = param[10].data.d_float;
  c->matched_length = param[11].data.d_float;
  c->line_window = param[12].data.d_int32;
  c->threshold_method = param[13].data.d_int32;
  c->threshold = param[14].data.d_float;
  c->min_component = param[15].data.d_int32;
  c->add_overlay = param[16].data.d_int32 != 0;
  c->add_fov_layer = param[17].data.d_int32 != 0;
  c->overlay_colour = param[18].data.d_color;
  c->overlay_opacity = param[19].data.d_float;
  zero_means_default (c);
}

void
vessel_map_run (const gchar *name, gint nparams, const GimpParam *param,
                gint *nreturn_vals, GimpParam **return_vals)
{
  static GimpParam values[7];
  GimpRunMode run_mode = param[0].data.d_int32;
  gint32 image = param[1].data.d_image;
  gint32 drawable = param[2].data.d_drawable;
  VesselMapConfig config;
  VesselMapOutput output = { 0 };
  VesselMapLayers layers;
  g_autoptr (ReteModel) model = NULL;
  GError *error = NULL;

  *return_vals = values;
  vessel_map_config_init (&config);

  switch (run_mode)
    {
    case GIMP_RUN_INTERACTIVE:
      gimp_get_data (PLUG_IN_PROC, &config);
      if (!plugin_check_drawable (drawable, _("photograph"), &error))
        {
          plugin_show_error (run_mode, error->message);
          plugin_return_gerror (values, nreturn_vals, GIMP_PDB_EXECUTION_ERROR, error);
          return;
        }
      if (!vessel_map_dialog (image, drawable, &config))
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
      config_from_args (&config, param);
      if (!vessel_map_config_check (&config, &error))
        {
          plugin_return_gerror (values, nreturn_vals, GIMP_PDB_CALLING_ERROR, error);
          return;
        }
      break;
    case GIMP_RUN_WITH_LAST_VALS:
      gimp_get_data (PLUG_IN_PROC, &config);
      break;
    }

  gimp_progress_init (_("Finding the vessels"));
  if (config.method == RETE_METHOD_LEARNED && !(model = plugin_model_load (config.model, &error)))
    goto fail;
  if (!vessel_map_core (image, drawable, &config, model, NULL, &output, plugin_progress, NULL,
                        &error)
      || !add_layers (image, drawable, &config, &output, &layers, &error))
    goto fail;
  gimp_progress_update (1.0);
  gimp_progress_end ();

  if (run_mode != GIMP_RUN_NONINTERACTIVE)
    gimp_displays_flush ();
  if (run_mode == GIMP_RUN_INTERACTIVE)
    gimp_set_data (PLUG_IN_PROC, &config, sizeof config);
  values[6].type = GIMP_PDB_FLOAT;
  values[6].data.d_float = output.result.threshold;
  vessel_map_output_clear (&output);

  values[0].type = GIMP_PDB_STATUS;
  values[0].data.d_status = GIMP_PDB_SUCCESS;
  values[1].type = GIMP_PDB_LAYER;
  values[1].data.d_layer = layers.group;
  values[2].type = GIMP_PDB_LAYER;
  values[2].data.d_layer = layers.probability;
  values[3].type = GIMP_PDB_LAYER;
  values[3].data.d_layer = layers.binary;
  values[4].type = GIMP_PDB_LAYER;
  values[4].data.d_layer = layers.overlay;
  values[5].type = GIMP_PDB_LAYER;
  values[5].data.d_layer = layers.fov;
  *nreturn_vals = 7;
  return;

fail:
  gimp_progress_end ();
  vessel_map_output_clear (&output);
  plugin_show_error (run_mode, error->message);
  plugin_return_gerror (values, nreturn_vals, GIMP_PDB_EXECUTION_ERROR, error);
}
