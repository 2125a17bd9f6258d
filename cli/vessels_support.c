/* vessels_support.c — for `rete vessels`: a dry run of the settings before any photograph
 * is read, and the CSV report of a run. */
#include "vessels_support.h"

#include <math.h>
#include <stdlib.h>

/* A dry run on a small made-up photograph, so that settings the library refuses (a bad
 * combination the option checks above let through) are a usage error before any photograph
 * is read, not a failure of every photograph. */
gboolean
vessels_check_settings (const ReteVesselParams *params, GError **error)
{
  const int side = 256;
  g_autoptr (ReteImage) photo = rete_image_new (side, side, 3, NULL);
  g_autoptr (ReteImage) fov = rete_image_new (side, side, 1, NULL);
  if (photo == NULL || fov == NULL)
    return TRUE;
  static const float fundus[3] = { 0.8f, 0.3f, 0.07f };
  for (int y = 0; y < side; y++)
    for (int x = 0; x < side; x++)
      {
        gsize i = (gsize) y * side + x;
        gboolean vessel = abs (x - y) < 3 || abs (x + y - side) < 2;
        for (int c = 0; c < 3; c++)
          photo->data[(gsize) c * side * side + i] = fundus[c] * (vessel ? 0.5f : 1.0f);
        fov->data[i] = 1.0f;
      }
  ReteVesselResult result = { 0 };
  GError *local = NULL;
  gboolean ok = rete_vessel_run (photo, fov, params, &result, NULL, NULL, &local);
  rete_vessel_result_clear (&result);
  if (ok || local->code != RETE_ERROR_INVALID_ARGUMENT)
    {
      g_clear_error (&local);
      return TRUE;
    }
  g_propagate_error (error, local);
  return FALSE;
}

char *
vessels_report_csv (const VesselRun *run, const char *settings)
{
  GString *csv = g_string_new ("photograph,method,settings,threshold,vessel_fraction,"
                               "fov_pixels,seconds,status\n");
  for (guint i = 0; i < run->inputs->len; i++)
    {
      const ReteCliInput *input = run->inputs->pdata[i];
      const VesselRow *row = &run->rows[i];
      char threshold[G_ASCII_DTOSTR_BUF_SIZE] = "", fraction[G_ASCII_DTOSTR_BUF_SIZE] = "";
      if (isfinite (row->threshold))
        g_ascii_formatd (threshold, sizeof threshold, "%.6g", row->threshold);
      if (isfinite (row->vessel_fraction))
        g_ascii_formatd (fraction, sizeof fraction, "%.6f", row->vessel_fraction);
      g_autofree char *status = g_strdup (row->error ? row->error : "ok");
      g_strdelimit (status, "\"", '\'');
      g_string_append_printf (csv, "\"%s\",%s,\"%s\",%s,%s,%" G_GSIZE_FORMAT ",%.2f,\"%s\"\n",
                              input->path, rete_method_name (run->params.method), settings,
                              threshold, fraction, row->fov_pixels, row->seconds, status);
    }
  return g_string_free (csv, FALSE);
}

