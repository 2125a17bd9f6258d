/* binary.c — from a vessel map to a binary vessel map (rete_binary.h): parameters, the
 * binarisation itself and the whole step (threshold, binarise, clean, keep inside the FOV).
 * The levels come from threshold.c (Otsu 1979; target fraction), the clean-up from
 * binary_clean.c.
 */
#include "rete_binary.h"

#include <math.h>

static const char *const method_names[] = {
  [RETE_THRESHOLD_OTSU] = "otsu",
  [RETE_THRESHOLD_FIXED] = "fixed",
  [RETE_THRESHOLD_FRACTION] = "fraction",
};

void
rete_binary_params_init (ReteBinaryParams *params)
{
  params->method = RETE_THRESHOLD_OTSU;
  params->level = 0.5;
  params->fraction = 0.12;
  params->min_component = 30;
  params->max_hole = 10;
}

const char *
rete_threshold_method_name (ReteThresholdMethod method)
{
  if ((int) method < 0 || (gsize) method >= G_N_ELEMENTS (method_names))
    return "unknown";
  return method_names[method];
}

gboolean
rete_threshold_method_from_name (const char *name, ReteThresholdMethod *method, GError **error)
{
  for (gsize m = 0; name != NULL && m < G_N_ELEMENTS (method_names); m++)
    if (g_ascii_strcasecmp (name, method_names[m]) == 0)
      {
        *method = (ReteThresholdMethod) m;
        return TRUE;
      }
  g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
               "unknown threshold method \"%s\"; use otsu (Otsu's threshold), fixed (a given "
               "level) or fraction (a given vessel fraction of the field of view)",
               name != NULL ? name : "");
  return FALSE;
}

ReteImage *
rete_binarise (const ReteImage *map, const ReteImage *mask, double threshold, GError **error)
{
  if (!rete_image_check_channels (map, "vessel map", 1, error))
    return NULL;
  if (mask != NULL
      && (!rete_image_check_channels (mask, "field-of-view mask", 1, error)
          || !rete_image_check_same_size (mask, "field-of-view mask", map, "vessel map", error)))
    return NULL;
  if (isnan (threshold))
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "the threshold is not a number; give a level such as 0.5");
      return NULL;
    }
  ReteImage *out = rete_image_new_like (map, 1, error);
  if (out == NULL)
    return NULL;
  gsize n = rete_image_n_pixels (map);
  for (gsize i = 0; i < n; i++)
    out->data[i] = (mask == NULL || mask->data[i] >= 0.5f) && map->data[i] >= threshold;
  return out;
}

ReteImage *
rete_binary_map (const ReteImage *map, const ReteImage *mask, const ReteBinaryParams *params,
                 double *threshold, GError **error)
{
  ReteBinaryParams defaults;
  if (params == NULL)
    {
      rete_binary_params_init (&defaults);
      params = &defaults;
    }
  double level;
  switch (params->method)
    {
    case RETE_THRESHOLD_OTSU:
      level = rete_threshold_otsu (map, mask, error);
      break;
    case RETE_THRESHOLD_FIXED:
      if (!isfinite (params->level))
        {
          g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                       "the fixed threshold must be a finite number, such as 0.5");
          return NULL;
        }
      level = params->level;
      break;
    case RETE_THRESHOLD_FRACTION:
      level = rete_threshold_for_fraction (map, mask, params->fraction, error);
      break;
    default:
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "unknown threshold method %d; use otsu, fixed or fraction", params->method);
      return NULL;
    }
  if (isnan (level))
    return NULL; /* the error is set */
  ReteImage *binary = rete_binarise (map, mask, level, error);
  if (binary == NULL)
    return NULL;
  if (!rete_binary_clean (binary, params->min_component, params->max_hole, error))
    {
      rete_image_free (binary);
      return NULL;
    }
  /* filling holes may reach pixels outside the field of view (a gap in the mask): keep
   * the map inside it */
  if (mask != NULL)
    {
      gsize n = rete_image_n_pixels (binary);
      for (gsize i = 0; i < n; i++)
        if (!(mask->data[i] >= 0.5f))
          binary->data[i] = 0.0f;
    }
  if (threshold != NULL)
    *threshold = level;
  return binary;
}
