/* rete_measure.h — vessel measurements of a binary vessel map inside the field of view (FOV):
 * skeleton, area and length density, junctions and end points, the vessel graph (segments
 * between junctions) with calibre and tortuosity per segment, and the box-counting fractal
 * dimension; with units in pixels or, when calibrated, millimetres.
 *
 * Methods (each cited again in the .c file that implements it):
 *   skeleton       Zhang & Suen, "A fast parallel algorithm for thinning digital patterns",
 *                  Commun. ACM 27(3):236–239, 1984, with the correction of Lü & Wang, Commun.
 *                  ACM 29(3):239–242, 1986 that keeps diagonal strokes, then staircase
 *                  corners removed so that it is one pixel thin (skeleton.c)
 *   distance       exact Euclidean distance transform, Felzenszwalb & Huttenlocher,
 *                  "Distance transforms of sampled functions", Theory of Computing 8:415–428,
 *                  2012 (distance.c)
 *   graph          segments between junction clusters on the 8-connected skeleton (graph.c)
 *   calibre        twice the distance to the background along the skeleton, with a sub-pixel
 *                  apex fitted across the vessel (segment.c)
 *   length         of the centre line smoothed with a Gaussian of curvature_sigma (segment.c)
 *   tortuosity     arc/chord ratio; total squared curvature per unit length (Hart, Goldbaum,
 *                  Côté, Kube, Nelson, "Measurement and classification of retinal vascular
 *                  tortuosity", Int. J. Med. Inform. 53:239–252, 1999) (segment.c)
 *   fractal        box-counting dimension, boxes of 2^k pixels, least-squares slope of
 *                  log N(s) against log(1/s) (fractal.c)
 *
 * Units: every length-like figure is in pixels, or in millimetres when the params carry a
 * calibration (pixel size, or the FOV diameter in pixels and in millimetres). The CSV header
 * names the unit of every column.
 */
#ifndef RETE_MEASURE_H
#define RETE_MEASURE_H

#include "rete_image.h"

G_BEGIN_DECLS

/* How pixels become millimetres. */
typedef enum {
  RETE_CALIBRATION_NONE,         /* figures in pixels (default) */
  RETE_CALIBRATION_PIXEL_SIZE,   /* pixel_size_mm is the side of one pixel in mm */
  RETE_CALIBRATION_FOV_DIAMETER, /* the FOV is fov_diameter_px pixels and fov_diameter_mm mm across */
} ReteCalibration;

/* Bounds on calibration values outside of which rete_measure refuses them as absurd for a
 * fundus photograph (typical: 0.003–0.03 mm per pixel; a 45° FOV is about 12–13 mm across). */
#define RETE_MEASURE_MIN_PIXEL_SIZE_MM 1e-4
#define RETE_MEASURE_MAX_PIXEL_SIZE_MM 1.0
#define RETE_MEASURE_MIN_FOV_MM 1.0
#define RETE_MEASURE_MAX_FOV_MM 60.0

typedef struct {
  ReteCalibration calibration; /* default RETE_CALIBRATION_NONE */
  double pixel_size_mm;        /* RETE_CALIBRATION_PIXEL_SIZE: mm per pixel, in
                                  [RETE_MEASURE_MIN_PIXEL_SIZE_MM, RETE_MEASURE_MAX_PIXEL_SIZE_MM] */
  double fov_diameter_px;      /* RETE_CALIBRATION_FOV_DIAMETER: FOV diameter in pixels, > 0 and at
                                  most twice the image diagonal */
  double fov_diameter_mm;      /* RETE_CALIBRATION_FOV_DIAMETER: the same in mm, in
                                  [RETE_MEASURE_MIN_FOV_MM, RETE_MEASURE_MAX_FOV_MM] */
  double min_segment_length;   /* pixels, whatever the calibration; terminal segments (end point to junction) and isolated
                                  pieces shorter than this are pruned from the skeleton once
                                  before the graph is measured (spurs of thinning). 0 = keep all.
                                  Default 10. */
  double curvature_sigma;      /* pixels; Gaussian smoothing of the skeleton path before its
                                  length and curvature are taken (default 6: the pixel staircase
                                  of a digital curve still adds curvature at 4; 0.5 to 100) */
  gboolean want_images;        /* TRUE (default): fill skeleton and point_type below */
  ReteProgressFunc progress;   /* may be NULL; FALSE from it cancels (RETE_ERROR_CANCELLED) */
  gpointer progress_data;
} ReteMeasureParams;

RETE_API void rete_measure_params_init (ReteMeasureParams *params);
/* Checks the params as rete_measure does (calibration values zero, negative, not finite or
 * absurd; segment length; smoothing), for a map of width × height (<= 0: size unknown, the
 * size-dependent bounds are not checked), so that a dialog or a command can refuse them before
 * any map is read. *pixel_size_mm (may be NULL) gets mm per pixel, or 0 when uncalibrated. */
RETE_API gboolean rete_measure_params_check (const ReteMeasureParams *params, int width,
                                             int height, double *pixel_size_mm, GError **error);

/* Values of the point_type image. */
typedef enum {
  RETE_POINT_NONE = 0,     /* not on the skeleton, or an ordinary skeleton pixel */
  RETE_POINT_JUNCTION = 1, /* skeleton pixel with 3 or more skeleton neighbours (8-connected) */
  RETE_POINT_END = 2,      /* skeleton pixel with exactly 1 skeleton neighbour */
} RetePointType;

/* One vessel segment: a path on the skeleton between two nodes (junctions or end points),
 * or a closed loop without any. Lengths in `unit`. */
typedef struct {
  int x0, y0, x1, y1;       /* pixel coordinates of its two ends (node pixels) */
  int n_pixels;             /* skeleton pixels on the path, both ends included */
  gboolean start_is_junction, end_is_junction;
  gboolean closed;          /* a loop with no junction or end point */
  double length;            /* arc length of the smoothed centre line (curvature_sigma) */
  double chord;             /* straight distance between its ends (0 for a loop) */
  double calibre_mean;      /* vessel width across the segment, mean over its pixels (within
                               ±0.5 px on bands 1.25–20 px wide at any angle; lines 1 px wide
                               read 1.25–1.7 px) */
  double calibre_sd;        /* standard deviation of the width along it */
  double tortuosity;        /* arc/chord ratio (>= 1; NaN for loops and chords < 1 px) */
  double curvature_index;   /* total squared curvature per unit length, ∫κ² ds / L, in 1/unit²
                               (Hart et al. 1999); NaN for paths shorter than 3 curvature_sigma */
} ReteSegment;

typedef struct {
  int width, height;           /* of the map, pixels */
  const char *unit;            /* "px" or "mm" (static string) */
  double pixel_size;           /* unit per pixel (1 for "px") */
  gboolean fov_given;          /* FALSE: the FOV is the whole frame */
  gsize non_binary_pixels;     /* values neither 0 nor 1, thresholded at 0.5 */
  gsize vessel_pixels_outside_fov; /* vessel pixels dropped because they lie outside the FOV */

  /* Whole image, inside the FOV */
  gsize fov_pixels;
  double fov_area;             /* unit² */
  gsize vessel_pixels;
  double vessel_area;          /* unit² */
  double vessel_area_density;  /* % of the FOV */
  gsize skeleton_pixels;       /* after pruning */
  double skeleton_length;      /* unit: sum of segment lengths */
  double length_density;       /* skeleton length / FOV area, 1/unit */
  int n_junctions;             /* junction clusters (adjacent junction pixels count once); a
                                  crossing of two vessels is junctions too (a map has no depth),
                                  usually two joined by a short segment */
  int n_end_points;
  int n_segments;
  int n_pruned;                /* spurs and short pieces removed by min_segment_length */
  double mean_segment_length;  /* unit; NaN without segments */
  double mean_calibre;         /* unit; length-weighted over segments; NaN without segments */
  double tortuosity;           /* image arc/chord: Σ length / Σ chord over open segments */
  double curvature_index;      /* 1/unit²: Σ ∫κ² ds / Σ length over open segments with an index */
  double fractal_dimension_map;      /* box counting on the vessel map; NaN when empty */
  double fractal_dimension_skeleton; /* box counting on the skeleton; NaN when empty */
  double fractal_r2_map, fractal_r2_skeleton; /* R² of the log–log fits */

  int n_segment_records;       /* == n_segments */
  ReteSegment *segments;       /* (n_segments), owned */

  ReteImage *skeleton;         /* one channel 0/1, map size (NULL unless want_images) */
  ReteImage *point_type;       /* one channel RetePointType values (NULL unless want_images) */

  char *notes;                 /* remarks for the user, "; "-separated, "" when none: "the map was
                                  not binary: 312 values thresholded at 0.5", ... owned */
} ReteMeasurements;

/* Measures `binary` (one channel; values >= 0.5 are vessel; other values than 0 and 1 are
 * thresholded at 0.5 and counted in non_binary_pixels) inside `fov` (one channel, >= 0.5 is
 * inside; NULL = the whole frame). Fails with a message on: wrong channel counts or sizes,
 * non-finite values, an empty FOV, calibration values that are zero, negative, not finite or
 * absurd, cancellation, lack of memory. An empty vessel map is not an error: counts are 0 and
 * undefined figures NaN, with a note. Working memory about 6 bytes per pixel (two byte maps and
 * the float distance transform; measured 14 bytes per pixel in all with want_images, whose two
 * float images take 8), every large block taken with g_try_malloc so that a map too large for
 * the memory fails with RETE_ERROR_NO_MEMORY. Time linear in the pixel count at a given vessel
 * width (thinning takes one iteration per pixel of half the widest vessel). */
RETE_API ReteMeasurements *rete_measure (const ReteImage *binary, const ReteImage *fov,
                                         const ReteMeasureParams *params, GError **error);
RETE_API void rete_measurements_free (ReteMeasurements *measurements);
G_DEFINE_AUTOPTR_CLEANUP_FUNC (ReteMeasurements, rete_measurements_free)

/* CSV (comma-separated, one header line, '\n' line ends, NaN written as "NaN"). Column names
 * carry their unit: "skeleton_length_mm", "vessel_area_density_percent", ... The header depends
 * only on the unit, so rows of maps measured with the same params share one header. Both end in
 * '\n'. `name` (the photograph or file name) is quoted as CSV requires. */
RETE_API char *rete_measurements_csv_header (const ReteMeasurements *measurements);
RETE_API char *rete_measurements_csv_row (const ReteMeasurements *measurements, const char *name);
/* One row per segment, with its own header line first. */
RETE_API char *rete_measurements_segments_csv (const ReteMeasurements *measurements,
                                               const char *name);

/* The per-image figures as rows for a dialog's table, in the CSV's column order (the CSV adds
 * name, pixel_size_mm, fov and notes around them). Strings are static. */
typedef struct {
  const char *column; /* CSV column name, unit included: "skeleton_length_mm" */
  const char *label;  /* for people: "Skeleton length" */
  const char *unit;   /* for people: "mm", "px²", "% of FOV", "1/mm²"; "" for counts and ratios */
  double value;       /* NaN when undefined */
  gboolean is_count;  /* an integer count */
} ReteMeasureField;

/* Fills *fields (newly allocated, g_free it) and returns how many there are. */
RETE_API int rete_measurements_fields (const ReteMeasurements *measurements,
                                       ReteMeasureField **fields);

/* ---- The building blocks, for tests and for callers that need one piece ---- */

typedef enum {
  RETE_THINNING_ZHANG_SUEN, /* as published in 1984 (erases diagonal strokes 2 pixels thick) */
  RETE_THINNING_LU_WANG,    /* with Lü & Wang's 3 <= B <= 6: what rete_measure uses */
} ReteThinning;

/* Zhang–Suen thinning in place on a 0/1 byte map (width × height, row-major). Pixels on the
 * outer frame count their outside neighbours as background. Returns FALSE on cancel or lack of
 * memory (the map is then untouched). */
RETE_API gboolean rete_skeleton_thin (guint8 *map, int width, int height, ReteThinning variant,
                                      ReteProgressFunc progress, gpointer progress_data);
/* The skeleton rete_measure uses (Lü–Wang thinning, then staircase corners removed: one pixel
 * thin, 8-connected) of a one-channel map (>= 0.5 is vessel), before
 * spur pruning, as a new 0/1 image. */
RETE_API ReteImage *rete_skeletonize (const ReteImage *binary, GError **error);

/* Exact Euclidean distance of every pixel to the nearest pixel with map[i] == 0 (0 on
 * background), as scipy.ndimage.distance_transform_edt gives; `distance` has width × height
 * floats. When the map has no background at all, every distance is +infinity. */
RETE_API void rete_distance_transform (const guint8 *map, int width, int height, float *distance);
/* The same for a one-channel image (>= 0.5 is foreground) as a new image. */
RETE_API ReteImage *rete_distance_transform_image (const ReteImage *binary, GError **error);

/* Box-counting dimension of the nonzero pixels of a 0/1 byte map: counts N(s) of boxes of side
 * s = 2^k pixels (grid anchored at the top-left corner) that hold any pixel, for s from 2 up to
 * the largest power of two not above a quarter of the shorter side (at least 3 scales; NaN
 * when the map is smaller than 16 pixels a side), and returns the least-squares slope of
 * log N(s) against log(1/s); *r2 gets the fit's R² (may be NULL). NaN for an empty map. */
RETE_API double rete_box_counting_dimension (const guint8 *map, int width, int height, double *r2);

G_END_DECLS

#endif /* RETE_MEASURE_H */
