/* pipeline.c — the main job in one call (rete_vessel.h): field of view, preprocessing,
 * vessel map by the chosen method, binary map. Both front ends (the `rete` command and the
 * GIMP plug-in) call this, so a map is the same whichever made it. */
#include "rete_vessel.h"
#include "rete_nn.h"

#include <string.h>

#if __has_include("rete_learned.h")
#include "rete_learned.h"
#define HAVE_LEARNED 1
#endif

static const struct {
  const char *name;
  const char *label;
} methods[RETE_N_METHODS] = {
  [RETE_METHOD_LEARNED] = { "learned", "U-Net" },
  [RETE_METHOD_FRANGI] = { "frangi", "Frangi" },
  [RETE_METHOD_MATCHED] = { "matched", "Matched filter" },
  [RETE_METHOD_MATCHED_FDOG] = { "matched-fdog", "Matched filter with FDOG" },
  [RETE_METHOD_LINE] = { "line", "Line detector" },
};

const char *
rete_method_name (ReteMethod method)
{
  return (unsigned) method < RETE_N_METHODS ? methods[method].name : "unknown";
}

const char *
rete_method_label (ReteMethod method)
{
  return (unsigned) method < RETE_N_METHODS ? methods[method].label : "unknown";
}

gboolean
rete_method_from_name (const char *name, ReteMethod *method, GError **error)
{
  for (int i = 0; i < RETE_N_METHODS; i++)
    if (name != NULL && g_ascii_strcasecmp (name, methods[i].name) == 0)
      {
        *method = (ReteMethod) i;
        return TRUE;
      }
  g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
               "unknown vessel method '%s'; choose one of learned, frangi, matched, matched-fdog, line",
               name != NULL ? name : "");
  return FALSE;
}

void
rete_vessel_params_init (ReteVesselParams *params)
{
  memset (params, 0, sizeof *params);
  params->method = RETE_METHOD_FRANGI;
  params->channel = RETE_CHANNEL_GREEN;
  params->use_clahe = TRUE;
  rete_clahe_params_init (&params->clahe);
  rete_fov_params_init (&params->fov);
  rete_frangi_params_init (&params->frangi);
  rete_matched_params_init (&params->matched);
  rete_line_params_init (&params->line);
  rete_binary_params_init (&params->binary);
  rete_vessel_params_set_method (params, RETE_METHOD_FRANGI);
}

void
rete_vessel_params_set_method (ReteVesselParams *params, ReteMethod method)
{
  params->method = method;
  if (method == RETE_METHOD_LEARNED)
    params->binary.method = RETE_THRESHOLD_OTSU;
  else
    {
      params->binary.method = RETE_THRESHOLD_FRACTION;
      params->binary.fraction = RETE_CLASSICAL_VESSEL_FRACTION;
    }
}

char *
rete_vessel_params_describe (const ReteVesselParams *p)
{
  switch (p->method)
    {
    case RETE_METHOD_LEARNED:
      {
        const char *name = p->model != NULL ? rete_model_get_meta (p->model, "name") : NULL;
        if (name != NULL)
          return g_strdup_printf ("U-Net %s", name);
        if (p->model != NULL)
          {
            const ReteUnetConfig *c = rete_unet_config (rete_model_net (p->model));
            return g_strdup_printf ("U-Net %d levels, %d filters", c->levels, c->base_filters);
          }
        return g_strdup ("U-Net");
      }
    case RETE_METHOD_FRANGI:
      return g_strdup_printf ("Frangi σ %g–%g β %g", p->frangi.sigma_min, p->frangi.sigma_max,
                              p->frangi.beta);
    case RETE_METHOD_MATCHED:
      return g_strdup_printf ("Matched filter σ %g L %g", p->matched.sigma, p->matched.length);
    case RETE_METHOD_MATCHED_FDOG:
      return g_strdup_printf ("Matched filter FDOG σ %g L %g", p->matched.sigma, p->matched.length);
    case RETE_METHOD_LINE:
      return g_strdup_printf ("Line detector W %d", p->line.window);
    }
  return g_strdup ("unknown method");
}

void
rete_vessel_result_clear (ReteVesselResult *result)
{
  g_clear_pointer (&result->fov, rete_image_free);
  g_clear_pointer (&result->probability, rete_image_free);
  g_clear_pointer (&result->binary, rete_image_free);
  result->threshold = 0.0;
}

static gboolean
report (ReteProgressFunc progress, gpointer data, double fraction, const char *message,
        GError **error)
{
  if (progress != NULL && !progress (fraction, message, data))
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_CANCELLED, "cancelled while %s", message);
      return FALSE;
    }
  return TRUE;
}

typedef struct {
  ReteProgressFunc progress;
  gpointer data;
} ScaledProgress;

/* The learned method reports its own progress over tiles; it fills 0.2..0.9 of ours. */
G_GNUC_UNUSED static gboolean
scaled_progress (double fraction, const char *message, gpointer data)
{
  ScaledProgress *sp = data;
  return sp->progress == NULL || sp->progress (0.2 + 0.7 * fraction, message, sp->data);
}

static ReteImage *
classical_map (const ReteImage *photo, const ReteImage *fov, const ReteVesselParams *p,
               GError **error)
{
  g_autoptr (ReteImage) grey = rete_preprocess (photo, fov, p->channel,
                                                p->use_clahe ? &p->clahe : NULL, error);
  if (grey == NULL)
    return NULL;
  switch (p->method)
    {
    case RETE_METHOD_FRANGI:
      return rete_vessel_frangi (grey, fov, &p->frangi, error);
    case RETE_METHOD_MATCHED:
    case RETE_METHOD_MATCHED_FDOG:
      {
        ReteMatchedParams matched = p->matched;
        matched.use_fdog = p->method == RETE_METHOD_MATCHED_FDOG;
        return rete_vessel_matched (grey, fov, &matched, error);
      }
    case RETE_METHOD_LINE:
      return rete_vessel_line (grey, fov, &p->line, error);
    default:
      break;
    }
  g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT, "unknown vessel method %d",
               (int) p->method);
  return NULL;
}

gboolean
rete_vessel_run (const ReteImage *photo, const ReteImage *fov, const ReteVesselParams *params,
                 ReteVesselResult *result, ReteProgressFunc progress, gpointer progress_data,
                 GError **error)
{
  g_return_val_if_fail (params != NULL && result != NULL, FALSE);
  memset (result, 0, sizeof *result);
  if (photo == NULL)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT, "no photograph given");
      return FALSE;
    }
  if (photo->channels != 1 && photo->channels != 3 && photo->channels != 4)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "the photograph has %d channels; grey (1), RGB (3) or RGBA (4) expected",
                   photo->channels);
      return FALSE;
    }
  if (!rete_image_check_finite (photo, "the photograph", error))
    return FALSE;
  if ((unsigned) params->method >= RETE_N_METHODS)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "unknown vessel method %d", (int) params->method);
      return FALSE;
    }
  if (params->method == RETE_METHOD_LEARNED && params->model == NULL)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "the learned method needs a model; choose a shipped model (standard, tiny) "
                   "or a model file");
      return FALSE;
    }

  ReteVesselResult out = { 0 };
  if (!report (progress, progress_data, 0.0, "finding the field of view", error))
    return FALSE;
  if (fov != NULL)
    {
      if (!rete_image_check_same_size (fov, "the field-of-view mask", photo, "the photograph",
                                       error)
          || !rete_image_check_channels (fov, "the field-of-view mask", 1, error))
        return FALSE;
      out.fov = rete_image_copy (fov, error);
      if (out.fov == NULL)
        return FALSE;
      rete_image_binarise (out.fov, 0.5f);
      if (rete_mask_count (out.fov) == 0)
        {
          g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_EMPTY,
                       "the field-of-view mask is empty (no pixel inside); give another mask or "
                       "let Rete detect the field of view");
          rete_vessel_result_clear (&out);
          return FALSE;
        }
    }
  else
    {
      out.fov = rete_fov_detect (photo, &params->fov, error);
      if (out.fov == NULL)
        return FALSE;
    }

  if (!report (progress, progress_data, 0.2, "computing the vessel map", error))
    goto fail;
  if (params->method == RETE_METHOD_LEARNED)
    {
#ifdef HAVE_LEARNED
      ScaledProgress sp = { progress, progress_data };
      out.probability = rete_vessel_learned (photo, out.fov, params->model, scaled_progress, &sp,
                                             error);
#else
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "this build of Rete has no learned method");
#endif
    }
  else
    out.probability = classical_map (photo, out.fov, params, error);
  if (out.probability == NULL)
    goto fail;

  if (!report (progress, progress_data, 0.9, "making the binary vessel map", error))
    goto fail;
  out.binary = rete_binary_map (out.probability, out.fov, &params->binary, &out.threshold, error);
  if (out.binary == NULL)
    goto fail;
  if (!report (progress, progress_data, 1.0, "done", error))
    goto fail;
  *result = out;
  return TRUE;

fail:
  rete_vessel_result_clear (&out);
  return FALSE;
}
