/* measure_private.h — what the measurement files share inside librete (not installed).
 *
 * Binary maps are held as bytes with a one-pixel frame of zeros around them, so that every
 * 3×3 neighbourhood read needs no border test. Bit 0 of a byte is the pixel (0/1); the other
 * bits are free for the pass that owns the map (graph.c marks visited pixels in them).
 */
#ifndef RETE_MEASURE_PRIVATE_H
#define RETE_MEASURE_PRIVATE_H

#include "rete_measure.h"

#include <string.h>

G_BEGIN_DECLS

typedef struct {
  int width, height; /* of the map, pixels */
  int stride;        /* width + 2 */
  guint8 *pixels;    /* (height + 2, stride), frame of zeros; owned */
} ReteByteMap;

/* Index of pixel (x, y) in pixels[]. Indices fit 32 bits: RETE_MAX_PIXELS is 2^28. */
static inline guint32
rete_byte_map_index (const ReteByteMap *map, int x, int y)
{
  return (guint32) ((y + 1) * (gsize) map->stride + x + 1);
}

/* The first x in [x, width) with row[x] != 0 (any bit), or width. Vessel maps and skeletons
 * are mostly zeros, so the scan skips 8 bytes at a time. */
static inline int
rete_next_set (const guint8 *row, int x, int width)
{
  while (x + 8 <= width)
    {
      guint64 word;
      memcpy (&word, row + x, 8);
      if (word != 0)
        break;
      x += 8;
    }
  while (x < width && row[x] == 0)
    x++;
  return x;
}

G_GNUC_INTERNAL ReteByteMap *rete_byte_map_new (int width, int height, GError **error);
G_GNUC_INTERNAL void rete_byte_map_free (ReteByteMap *map);
G_DEFINE_AUTOPTR_CLEANUP_FUNC (ReteByteMap, rete_byte_map_free)

/* The 8 neighbours as a byte: bit 0 NW, 1 N, 2 NE, 3 E, 4 SE, 5 S, 6 SW, 7 W (bit 0 of each
 * neighbour's byte only). */
static inline unsigned
rete_neighbour_code (const guint8 *p, gsize i, gsize s)
{
  return (p[i - s - 1] & 1u) | (p[i - s] & 1u) << 1 | (p[i - s + 1] & 1u) << 2
         | (p[i + 1] & 1u) << 3 | (p[i + s + 1] & 1u) << 4 | (p[i + s] & 1u) << 5
         | (p[i + s - 1] & 1u) << 6 | (p[i - 1] & 1u) << 7;
}

/* Offsets (dx, dy) of the neighbour bits above, in that order. */
extern const int rete_neighbour_dx[8];
extern const int rete_neighbour_dy[8];

/* skeleton.c. Zhang–Suen on a framed map, in place; FALSE (and the error) when cancelled or
 * out of memory. */
G_GNUC_INTERNAL gboolean rete_thin_zhang_suen (ReteByteMap *map, ReteThinning variant,
                                               ReteProgressFunc progress,
                                               gpointer progress_data, double from, double to,
                                               GError **error);
/* Removes staircase corners (simple pixels with two perpendicular 4-neighbours) until none is
 * left: the one-pixel-thin skeleton the graph needs. Returns the number removed. */
G_GNUC_INTERNAL gsize rete_thin_remove_redundant (ReteByteMap *map);

/* distance.c. Exact Euclidean distance on a framed map (frame pixels are not background),
 * into distance[(y * width + x)]. */
G_GNUC_INTERNAL void rete_distance_framed (const ReteByteMap *map, float *distance);

/* fractal.c. Box counting on a framed map. */
G_GNUC_INTERNAL double rete_box_counting_framed (const ReteByteMap *map, double *r2);

/* graph.c. The vessel graph of a one-pixel-thin skeleton (map bit 0); distance (width × height)
 * is the distance transform of the vessel map, for calibre. Pixel units throughout. */
typedef struct {
  GArray *segments;   /* ReteSegment, pixel units */
  int n_junctions;
  int n_end_points;
  int n_isolated;     /* skeleton pixels without neighbours */
  double length;      /* sum of segment lengths, px */
} ReteGraph;

G_GNUC_INTERNAL ReteGraph *rete_graph_build (ReteByteMap *skeleton, const float *distance,
                                             double curvature_sigma, gboolean with_figures);
G_GNUC_INTERNAL void rete_graph_free (ReteGraph *graph);
/* Removes terminal segments and isolated pieces shorter than min_length (px) from the
 * skeleton, then makes it one pixel thin again. Returns the number of pieces removed. */
G_GNUC_INTERNAL int rete_graph_prune (ReteByteMap *skeleton, double min_length);
/* Writes RetePointType values of the skeleton into point_type (width × height floats). */
G_GNUC_INTERNAL void rete_graph_point_types (const ReteByteMap *skeleton, float *point_type);

/* segment.c. Calibre, tortuosity and curvature of one traced path (xs, ys of n pixels). */
G_GNUC_INTERNAL void rete_segment_figures (ReteSegment *segment, const int *xs, const int *ys,
                                           int n, const float *distance, int width, int height,
                                           double curvature_sigma);

G_END_DECLS

#endif /* RETE_MEASURE_PRIVATE_H */
