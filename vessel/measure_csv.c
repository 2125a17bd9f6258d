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

/* The per-image figures, in CSV order: one table for the CSV and for a dialog. */
typedef struct {
  const char *column_px, *column_mm; /* CSV column names */
  const char *label;                 /* for people */
  const char *unit_px, *unit_mm;     /* for people; "" for counts and ratios */
  gboolean count;                    /* an integer */
} Field;

static const Field fields[] = {
  { "width_px", "width_px", "Width", "px", "px", TRUE },
  { "height_px", "height_px", "Height", "px", "px", TRUE },
  { "non_binary_pixels", "non_binary_pixels", "Values thresholded at 0.5", "", "", TRUE },
  { "fov_area_px2", "fov_area_mm2", "Field of view area", "px²", "mm²", FALSE },
  { "vessel_area_px2", "vessel_area_mm2", "Vessel area", "px²", "mm²", FALSE },
  { "vessel_area_density_percent", "vessel_area_density_percent", "Vessel area density",
    "% of FOV", "% of FOV", FALSE },
  { "skeleton_pixels", "skeleton_pixels", "Skeleton pixels", "", "", TRUE },
  { "skeleton_length_px", "skeleton_length_mm", "Skeleton length", "px", "mm", FALSE },
  { "length_density_px_per_px2", "length_density_mm_per_mm2", "Length density", "px/px²",
    "mm/mm²", FALSE },
  { "junctions", "junctions", "Junctions", "", "", TRUE },
  { "end_points", "end_points", "End points", "", "", TRUE },
  { "segments", "segments", "Segments", "", "", TRUE },
  { "pruned_pieces", "pruned_pieces", "Spurs pruned", "", "", TRUE },
  { "mean_segment_length_px", "mean_segment_length_mm", "Mean segment length", "px", "mm",
    FALSE },
  { "mean_calibre_px", "mean_calibre_mm", "Mean calibre (length-weighted)", "px", "mm", FALSE },
  { "tortuosity_arc_chord_ratio", "tortuosity_arc_chord_ratio", "Tortuosity (arc/chord)", "",
    "", FALSE },
  { "curvature_index_per_px2", "curvature_index_per_mm2", "Curvature index (∫κ² ds / L)",
    "1/px²", "1/mm²", FALSE },
  { "fractal_dimension_map", "fractal_dimension_map", "Fractal dimension, map", "", "", FALSE },
  { "fractal_dimension_skeleton", "fractal_dimension_skeleton", "Fractal dimension, skeleton",
    "", "", FALSE },
  { "fractal_r2_map", "fractal_r2_map", "R² of the map's box-counting fit", "", "", FALSE },
  { "fractal_r2_skeleton", "fractal_r2_skeleton", "R² of the skeleton's box-counting fit", "",
    "", FALSE },
};

static double
field_value (const ReteMeasurements *m, int i)
{
  switch (i)
    {
    case 0: return m->width;
    case 1: return m->height;
    case 2: return m->non_binary_pixels;
    case 3: return m->fov_area;
    case 4: return m->vessel_area;
    case 5: return m->vessel_area_density;
    case 6: return m->skeleton_pixels;
    case 7: return m->skeleton_length;
    case 8: return m->length_density;
    case 9: return m->n_junctions;
    case 10: return m->n_end_points;
    case 11: return m->n_segments;
    case 12: return m->n_pruned;
    case 13: return m->mean_segment_length;
    case 14: return m->mean_calibre;
    case 15: return m->tortuosity;
    case 16: return m->curvature_index;
    case 17: return m->fractal_dimension_map;
    case 18: return m->fractal_dimension_skeleton;
    case 19: return m->fractal_r2_map;
    case 20: return m->fractal_r2_skeleton;
    default: return NAN;
    }
}

static gboolean
in_mm (const ReteMeasurements *m)
{
  return strcmp (m->unit, "mm") == 0;
}

int
rete_measurements_fields (const ReteMeasurements *m, ReteMeasureField **out)
{
  g_return_val_if_fail (m != NULL && out != NULL, 0);
  int n = G_N_ELEMENTS (fields);
  gboolean mm = in_mm (m);
  *out = g_new (ReteMeasureField, n);
  for (int i = 0; i < n; i++)
    {
      (*out)[i].column = mm ? fields[i].column_mm : fields[i].column_px;
      (*out)[i].label = fields[i].label;
      (*out)[i].unit = mm ? fields[i].unit_mm : fields[i].unit_px;
      (*out)[i].value = field_value (m, i);
      (*out)[i].is_count = fields[i].count;
    }
  return n;
}

char *
rete_measurements_csv_header (const ReteMeasurements *m)
{
  g_return_val_if_fail (m != NULL, NULL);
  gboolean mm = in_mm (m);
  GString *s = g_string_new ("name,pixel_size_mm,fov");
  for (guint i = 0; i < G_N_ELEMENTS (fields); i++)
    {
      g_string_append_c (s, ',');
      g_string_append (s, mm ? fields[i].column_mm : fields[i].column_px);
    }
  g_string_append (s, ",notes\n");
  return g_string_free (s, FALSE);
}

char *
rete_measurements_csv_row (const ReteMeasurements *m, const char *name)
{
  g_return_val_if_fail (m != NULL, NULL);
  GString *s = g_string_new (NULL);
  add_text (s, name, FALSE);
  if (in_mm (m))
    add_number (s, m->pixel_size);
  else
    add_text (s, "", TRUE);
  add_text (s, m->fov_given ? "mask" : "whole frame", TRUE);
  for (guint i = 0; i < G_N_ELEMENTS (fields); i++)
    if (fields[i].count)
      add_count (s, (guint64) field_value (m, i));
    else
      add_number (s, field_value (m, i));
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
