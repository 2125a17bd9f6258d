/* measure.c — rete_measure(): all vessel measurements of one binary map inside its FOV.
 *
 * Order of work (each step cites its method in its own file):
 *   map (>= 0.5 is vessel) ∩ FOV  ->  bytes with a frame      (here; counts non-binary values)
 *   exact Euclidean distance transform                        (distance.c, Felzenszwalb &
 *                                                              Huttenlocher 2012)
 *   box-counting dimension of the map                         (fractal.c)
 *   Zhang–Suen thinning with the Lü–Wang correction, then     (skeleton.c, Zhang & Suen 1984,
 *   one pixel thin                                             Lü & Wang 1986)
 *   spur pruning, graph of segments between junctions         (graph.c)
 *   calibre, arc/chord, squared curvature per segment         (segment.c, Hart et al. 1999)
 *   box-counting dimension of the skeleton                    (fractal.c)
 * Memory: the two byte maps (2 bytes/pixel) and the distance transform (4 bytes/pixel), plus
 * 8 bytes/pixel for the two output images when asked for; all taken with g_try_malloc so that a
 * huge map fails with RETE_ERROR_NO_MEMORY instead of aborting. Time: linear in the pixels
 * (thinning in vessel pixels × half the widest vessel).
 */
#include "measure_private.h"

#include <math.h>
#include <string.h>

void
rete_measure_params_init (ReteMeasureParams *params)
{
  g_return_if_fail (params != NULL);
  memset (params, 0, sizeof *params);
  params->calibration = RETE_CALIBRATION_NONE;
  params->min_segment_length = 10;
  params->curvature_sigma = 6;
  params->want_images = TRUE;
}

static gboolean
check_params (const ReteMeasureParams *pa, int w, int h, double *pixel_size, GError **error)
{
  gboolean sized = w > 0 && h > 0;
  double diagonal = sized ? hypot (w, h) : INFINITY;
  *pixel_size = 1;
  switch (pa->calibration)
    {
    case RETE_CALIBRATION_NONE:
      break;
    case RETE_CALIBRATION_PIXEL_SIZE:
      if (!isfinite (pa->pixel_size_mm) || pa->pixel_size_mm <= 0)
        {
          g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                       "the pixel size must be a positive number of millimetres, not %g "
                       "(a 45° photograph 3000 pixels across has about 0.004 mm per pixel)",
                       pa->pixel_size_mm);
          return FALSE;
        }
      *pixel_size = pa->pixel_size_mm;
      break;
    case RETE_CALIBRATION_FOV_DIAMETER:
      if (!isfinite (pa->fov_diameter_px) || pa->fov_diameter_px <= 0)
        {
          g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                       "the FOV diameter must be a positive number of pixels, not %g",
                       pa->fov_diameter_px);
          return FALSE;
        }
      if (pa->fov_diameter_px > 2 * diagonal)
        {
          g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                       "the FOV diameter must be a positive number of pixels at most twice the "
                       "image diagonal (%.0f pixels for this %d×%d map), not %g",
                       2 * diagonal, w, h, pa->fov_diameter_px);
          return FALSE;
        }
      if (!isfinite (pa->fov_diameter_mm) || pa->fov_diameter_mm < RETE_MEASURE_MIN_FOV_MM
          || pa->fov_diameter_mm > RETE_MEASURE_MAX_FOV_MM)
        {
          g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                       "the FOV diameter must be between %g and %g mm, not %g mm (a 45° fundus "
                       "photograph shows a field about 12 to 13 mm across)",
                       RETE_MEASURE_MIN_FOV_MM, RETE_MEASURE_MAX_FOV_MM, pa->fov_diameter_mm);
          return FALSE;
        }
      *pixel_size = pa->fov_diameter_mm / pa->fov_diameter_px;
      break;
    default:
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "unknown calibration %d", (int) pa->calibration);
      return FALSE;
    }
  if (pa->calibration != RETE_CALIBRATION_NONE
      && (*pixel_size < RETE_MEASURE_MIN_PIXEL_SIZE_MM
          || *pixel_size > RETE_MEASURE_MAX_PIXEL_SIZE_MM))
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "a pixel size of %g mm is not plausible for a fundus photograph (Rete "
                   "accepts %g to %g mm; a 45° photograph 3000 pixels across has about "
                   "0.004 mm): check the calibration values", *pixel_size,
                   RETE_MEASURE_MIN_PIXEL_SIZE_MM, RETE_MEASURE_MAX_PIXEL_SIZE_MM);
      return FALSE;
    }
  if (!isfinite (pa->min_segment_length) || pa->min_segment_length < 0
      || pa->min_segment_length > RETE_MAX_SIDE)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "the shortest segment kept must be between 0 and %d pixels, not %g",
                   RETE_MAX_SIDE, pa->min_segment_length);
      return FALSE;
    }
  if (!isfinite (pa->curvature_sigma) || pa->curvature_sigma < 0.5
      || pa->curvature_sigma > 100)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "the curvature smoothing must be between 0.5 and 100 pixels, not %g",
                   pa->curvature_sigma);
      return FALSE;
    }
  return TRUE;
}

gboolean
rete_measure_params_check (const ReteMeasureParams *params, int width, int height,
                           double *pixel_size_mm, GError **error)
{
  g_return_val_if_fail (params != NULL, FALSE);
  double ps;
  if (!check_params (params, width, height, &ps, error))
    return FALSE;
  if (pixel_size_mm != NULL)
    *pixel_size_mm = params->calibration == RETE_CALIBRATION_NONE ? 0 : ps;
  return TRUE;
}

static gboolean
report (const ReteMeasureParams *pa, double fraction, const char *what, GError **error)
{
  if (pa->progress == NULL || pa->progress (fraction, what, pa->progress_data))
    return TRUE;
  g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_CANCELLED, "the measurement was cancelled");
  return FALSE;
}

static void
add_note (GString *notes, const char *format, ...) G_GNUC_PRINTF (2, 3);

static void
add_note (GString *notes, const char *format, ...)
{
  va_list args;
  va_start (args, format);
  if (notes->len > 0)
    g_string_append (notes, "; ");
  g_string_append_vprintf (notes, format, args);
  va_end (args);
}

typedef struct {
  gsize fov, vessel, outside, non_binary;
  int bad_map, bad_fov; /* x of the first non-finite value in the row, or -1 */
} RowCounts;

typedef struct {
  const ReteImage *binary, *fov;
  ReteByteMap *vessels;
  RowCounts *rows; /* (height) */
} ConvertJob;

/* Rows first..last-1: vessel = value >= 0.5 inside the FOV, into the framed byte map. */
static void
convert_rows (int first, int last, gpointer data)
{
  ConvertJob *job = data;
  int w = job->binary->width;
  for (int y = first; y < last; y++)
    {
      const float *row = job->binary->data + (gsize) y * w;
      const float *frow = job->fov ? job->fov->data + (gsize) y * w : NULL;
      guint8 *out = job->vessels->pixels + rete_byte_map_index (job->vessels, 0, y);
      RowCounts c = { 0, 0, 0, 0, -1, -1 };
      for (int x = 0; x < w; x++)
        {
          float v = row[x];
          if (!isfinite (v) && c.bad_map < 0)
            c.bad_map = x;
          c.non_binary += v != 0.0f && v != 1.0f;
          gboolean inside = TRUE;
          if (frow != NULL)
            {
              if (!isfinite (frow[x]) && c.bad_fov < 0)
                c.bad_fov = x;
              inside = frow[x] >= 0.5f;
            }
          gboolean vessel = v >= 0.5f;
          c.fov += inside;
          c.outside += vessel && !inside;
          out[x] = vessel && inside;
          c.vessel += out[x];
        }
      job->rows[y] = c;
    }
}

ReteMeasurements *
rete_measure (const ReteImage *binary, const ReteImage *fov, const ReteMeasureParams *params,
              GError **error)
{
  ReteMeasureParams defaults;
  if (params == NULL)
    {
      rete_measure_params_init (&defaults);
      params = &defaults;
    }
  if (binary == NULL)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "no vessel map was given to measure");
      return NULL;
    }
  if (!rete_image_check_channels (binary, "vessel map", 1, error))
    return NULL;
  if (fov != NULL
      && (!rete_image_check_channels (fov, "field of view", 1, error)
          || !rete_image_check_same_size (binary, "vessel map", fov, "field of view", error)))
    return NULL;
  int w = binary->width, h = binary->height;
  double ps;
  if (!check_params (params, w, h, &ps, error))
    return NULL;
  if (!report (params, 0, "reading the map", error))
    return NULL;

  g_autoptr (ReteByteMap) vessels = rete_byte_map_new (w, h, error);
  if (vessels == NULL)
    return NULL;
  /* one pass, in row bands on every core: bytes, counts, and the finiteness checks */
  ConvertJob job = { binary, fov, vessels, g_new0 (RowCounts, h) };
  rete_parallel_for (h, convert_rows, &job);
  gsize fov_pixels = 0, vessel_pixels = 0, outside = 0, non_binary = 0;
  int bad_map = -1, bad_fov = -1;
  for (int y = 0; y < h; y++)
    {
      const RowCounts *c = &job.rows[y];
      fov_pixels += c->fov;
      vessel_pixels += c->vessel;
      outside += c->outside;
      non_binary += c->non_binary;
      if (bad_map < 0 && c->bad_map >= 0)
        bad_map = y;
      if (bad_fov < 0 && c->bad_fov >= 0)
        bad_fov = y;
    }
  if (bad_map >= 0 || bad_fov >= 0)
    {
      gboolean in_map = bad_map >= 0;
      int y = in_map ? bad_map : bad_fov;
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_NOT_FINITE,
                   "%s holds a value that is not a number (NaN or infinity) at pixel (%d, %d): "
                   "give a map of finite values", in_map ? "the vessel map" : "the field of view",
                   in_map ? job.rows[y].bad_map : job.rows[y].bad_fov, y);
      g_free (job.rows);
      return NULL;
    }
  g_free (job.rows);
  if (fov_pixels == 0)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_EMPTY,
                   "the field of view is empty (no mask value is 0.5 or more): give a mask "
                   "that covers the photograph's aperture, or none to measure the whole frame");
      return NULL;
    }

  gsize n = (gsize) w * h;
  g_autofree float *distance = g_try_malloc (n * sizeof (float));
  g_autoptr (ReteByteMap) skeleton = rete_byte_map_new (w, h, error);
  if (skeleton == NULL)
    return NULL;
  if (distance == NULL)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_NO_MEMORY,
                   "not enough memory for the distance transform of a %d×%d map (%"
                   G_GSIZE_FORMAT " MB): free memory or give a smaller map", w, h,
                   (n * sizeof (float)) >> 20);
      return NULL;
    }
  rete_distance_framed (vessels, distance);
  if (!report (params, 0.2, "box counting", error))
    return NULL;
  double r2_map, r2_skeleton;
  double fd_map = rete_box_counting_framed (vessels, &r2_map);

  memcpy (skeleton->pixels, vessels->pixels, (gsize) (h + 2) * skeleton->stride);
  if (!rete_thin_zhang_suen (skeleton, RETE_THINNING_LU_WANG, params->progress,
                             params->progress_data, 0.25, 0.7, error))
    return NULL;
  rete_thin_remove_redundant (skeleton);
  if (!report (params, 0.7, "vessel graph", error))
    return NULL;
  int n_pruned = rete_graph_prune (skeleton, params->min_segment_length);
  ReteGraph *graph = rete_graph_build (skeleton, distance, params->curvature_sigma, TRUE);
  double fd_skeleton = rete_box_counting_framed (skeleton, &r2_skeleton);
  if (!report (params, 0.9, "figures", error))
    {
      rete_graph_free (graph);
      return NULL;
    }

  ReteMeasurements *m = g_new0 (ReteMeasurements, 1);
  GString *notes = g_string_new (NULL);
  m->width = w;
  m->height = h;
  m->unit = params->calibration == RETE_CALIBRATION_NONE ? "px" : "mm";
  m->pixel_size = ps;
  m->fov_given = fov != NULL;
  m->non_binary_pixels = non_binary;
  m->vessel_pixels_outside_fov = outside;
  m->fov_pixels = fov_pixels;
  m->fov_area = fov_pixels * ps * ps;
  m->vessel_pixels = vessel_pixels;
  m->vessel_area = vessel_pixels * ps * ps;
  m->vessel_area_density = 100.0 * vessel_pixels / fov_pixels;
  m->n_junctions = graph->n_junctions;
  m->n_end_points = graph->n_end_points;
  m->n_pruned = n_pruned;
  m->skeleton_length = graph->length * ps;
  m->length_density = m->skeleton_length / m->fov_area;
  m->fractal_dimension_map = fd_map;
  m->fractal_r2_map = r2_map;
  m->fractal_dimension_skeleton = fd_skeleton;
  m->fractal_r2_skeleton = r2_skeleton;

  m->n_segments = m->n_segment_records = graph->segments->len;
  m->segments = (ReteSegment *) g_array_free (graph->segments, FALSE);
  graph->segments = NULL;
  double sum_length = 0, sum_calibre = 0, calibre_length = 0, sum_chord = 0, open_length = 0;
  double sum_curvature = 0, curvature_length = 0;
  for (int k = 0; k < m->n_segments; k++)
    {
      ReteSegment *seg = &m->segments[k];
      sum_length += seg->length;
      if (isfinite (seg->calibre_mean))
        {
          sum_calibre += seg->calibre_mean * seg->length;
          calibre_length += seg->length;
        }
      if (!seg->closed)
        {
          sum_chord += seg->chord;
          open_length += seg->length;
        }
      if (isfinite (seg->curvature_index) && !seg->closed)
        {
          sum_curvature += seg->curvature_index * seg->length;
          curvature_length += seg->length;
        }
      seg->length *= ps;
      seg->chord *= ps;
      seg->calibre_mean *= ps;
      seg->calibre_sd *= ps;
      seg->curvature_index /= ps * ps;
    }
  g_free (graph);
  m->mean_segment_length = m->n_segments > 0 ? sum_length / m->n_segments * ps : NAN;
  m->mean_calibre = calibre_length > 0 ? sum_calibre / calibre_length * ps : NAN;
  m->tortuosity = sum_chord > 0 ? open_length / sum_chord : NAN;
  m->curvature_index = curvature_length > 0 ? sum_curvature / curvature_length / (ps * ps) : NAN;

  gsize skeleton_pixels = 0;
  for (int y = 0; y < h; y++)
    {
      const guint8 *row = skeleton->pixels + rete_byte_map_index (skeleton, 0, y);
      for (int x = rete_next_set (row, 0, w); x < w; x = rete_next_set (row, x + 1, w))
        skeleton_pixels += row[x] & 1;
    }
  m->skeleton_pixels = skeleton_pixels;

  if (params->want_images)
    {
      GError *local = NULL;
      m->skeleton = rete_image_new (w, h, 1, &local);
      m->point_type = m->skeleton ? rete_image_new (w, h, 1, &local) : NULL;
      if (m->point_type == NULL)
        {
          g_propagate_error (error, local);
          g_string_free (notes, TRUE);
          rete_measurements_free (m);
          return NULL;
        }
      for (int y = 0; y < h; y++)
        {
          const guint8 *row = skeleton->pixels + rete_byte_map_index (skeleton, 0, y);
          float *out = m->skeleton->data + (gsize) y * w; /* zeros from rete_image_new */
          for (int x = rete_next_set (row, 0, w); x < w; x = rete_next_set (row, x + 1, w))
            out[x] = row[x] & 1;
        }
      rete_graph_point_types (skeleton, m->point_type->data);
    }

  if (non_binary > 0)
    add_note (notes, "the map was not binary: %" G_GSIZE_FORMAT " values other than 0 and 1 "
              "were thresholded at 0.5", non_binary);
  if (fov == NULL)
    add_note (notes, "no field of view was given: measured over the whole frame");
  if (outside > 0)
    add_note (notes, "%" G_GSIZE_FORMAT " vessel pixels outside the field of view were left out",
              outside);
  if (vessel_pixels == 0)
    add_note (notes, "the map holds no vessel pixel inside the field of view: lengths and "
              "counts are 0, calibre, tortuosity and fractal dimension are undefined");
  else if (vessel_pixels == n)
    add_note (notes, "every pixel of the frame is vessel: the distance transform has "
              "no background, so calibre is undefined");
  else if (isnan (fd_map))
    add_note (notes, "the map is under 32 pixels a side: fractal dimension undefined");
  m->notes = g_string_free (notes, FALSE);
  report (params, 1.0, NULL, NULL);
  return m;
}

void
rete_measurements_free (ReteMeasurements *m)
{
  if (m == NULL)
    return;
  g_free (m->segments);
  rete_image_free (m->skeleton);
  rete_image_free (m->point_type);
  g_free (m->notes);
  g_free (m);
}
