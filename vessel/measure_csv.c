/* measure_csv.c — measurements as CSV tables (RFC 4180 quoting, '\n' line ends, numbers in
 * the C locale, NaN as "NaN" as pandas and R read it). Every column name ends with its unit:
 * _px, _mm, _px2, _mm2, _percent, _per_mm2 ..., or names a count or a ratio. */
#include "rete_measure.h"

#include <math.h>
#include <string.h>

static void
add_number (GString *s, double v)
{
  char buffer[G_ASCII_DTOSTR_BUF_SIZE];
  g_string_append_c (s, ',');
  if (isnan (v))
    g_string_append (s, "NaN");
  else if (isinf (v))
    g_string_append (s, v > 0 ? "Inf" : "-Inf");
  else
    g_string_append (s, g_ascii_formatd (buffer, sizeof buffer, "%.6g", v));
}

static void
add_count (GString *s, guint64 v)
{
  g_string_append_printf (s, ",%" G_GUINT64_FORMAT, v);
}

static void
add_text (GString *s, const char *text, gboolean comma)
{
  if (comma)
    g_string_append_c (s, ',');
  if (text == NULL)
    return;
  if (strpbrk (text, ",\"\r\n") == NULL)
    {
      g_string_append (s, text);
      return;
    }
  g_string_append_c (s, '"');
  for (const char *c = text; *c; c++)
    {
      if (*c == '"')
        g_string_append_c (s, '"');
      g_string_append_c (s, *c);
    }
  g_string_append_c (s, '"');
}

char *
rete_measurements_csv_header (const ReteMeasurements *m)
{
  g_return_val_if_fail (m != NULL, NULL);
  const char *u = m->unit;
  return g_strdup_printf (
    "name,width_px,height_px,pixel_size_mm,fov,non_binary_pixels,"
    "fov_area_%s2,vessel_area_%s2,vessel_area_density_percent,"
    "skeleton_pixels,skeleton_length_%s,length_density_%s_per_%s2,"
    "junctions,end_points,segments,pruned_pieces,mean_segment_length_%s,mean_calibre_%s,"
    "tortuosity_arc_chord_ratio,curvature_index_per_%s2,"
    "fractal_dimension_map,fractal_dimension_skeleton,fractal_r2_map,fractal_r2_skeleton,"
    "notes\n", u, u, u, u, u, u, u, u);
}

char *
rete_measurements_csv_row (const ReteMeasurements *m, const char *name)
{
  g_return_val_if_fail (m != NULL, NULL);
  GString *s = g_string_new (NULL);
  add_text (s, name, FALSE);
  add_count (s, m->width);
  add_count (s, m->height);
  if (strcmp (m->unit, "mm") == 0)
    add_number (s, m->pixel_size);
  else
    add_text (s, "", TRUE);
  add_text (s, m->fov_given ? "mask" : "whole frame", TRUE);
  add_count (s, m->non_binary_pixels);
  add_number (s, m->fov_area);
  add_number (s, m->vessel_area);
  add_number (s, m->vessel_area_density);
  add_count (s, m->skeleton_pixels);
  add_number (s, m->skeleton_length);
  add_number (s, m->length_density);
  add_count (s, m->n_junctions);
  add_count (s, m->n_end_points);
  add_count (s, m->n_segments);
  add_count (s, m->n_pruned);
  add_number (s, m->mean_segment_length);
  add_number (s, m->mean_calibre);
  add_number (s, m->tortuosity);
  add_number (s, m->curvature_index);
  add_number (s, m->fractal_dimension_map);
  add_number (s, m->fractal_dimension_skeleton);
  add_number (s, m->fractal_r2_map);
  add_number (s, m->fractal_r2_skeleton);
  add_text (s, m->notes, TRUE);
  g_string_append_c (s, '\n');
  return g_string_free (s, FALSE);
}

char *
rete_measurements_segments_csv (const ReteMeasurements *m, const char *name)
{
  g_return_val_if_fail (m != NULL, NULL);
  const char *u = m->unit;
  GString *s = g_string_new (NULL);
  g_string_append_printf (s,
    "name,segment,x0_px,y0_px,x1_px,y1_px,start,end,closed,pixels,length_%s,chord_%s,"
    "calibre_mean_%s,calibre_sd_%s,tortuosity_arc_chord_ratio,curvature_index_per_%s2\n",
    u, u, u, u, u);
  for (int k = 0; k < m->n_segments; k++)
    {
      const ReteSegment *seg = &m->segments[k];
      add_text (s, name, FALSE);
      add_count (s, k + 1);
      g_string_append_printf (s, ",%d,%d,%d,%d", seg->x0, seg->y0, seg->x1, seg->y1);
      add_text (s, seg->closed ? "" : seg->start_is_junction ? "junction" : "end point", TRUE);
      add_text (s, seg->closed ? "" : seg->end_is_junction ? "junction" : "end point", TRUE);
      add_text (s, seg->closed ? "yes" : "no", TRUE);
      add_count (s, seg->n_pixels);
      add_number (s, seg->length);
      add_number (s, seg->chord);
      add_number (s, seg->calibre_mean);
      add_number (s, seg->calibre_sd);
      add_number (s, seg->tortuosity);
      add_number (s, seg->curvature_index);
      g_string_append_c (s, '\n');
    }
  return g_string_free (s, FALSE);
}
