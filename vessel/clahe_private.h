/* clahe_private.h — what clahe.c (the pixel passes) and clahe_tiles.c (histograms, clipping,
 * mappings) share. Not installed. */
#ifndef RETE_CLAHE_PRIVATE_H
#define RETE_CLAHE_PRIVATE_H

#include "rete_preprocess.h"

G_BEGIN_DECLS

#define RETE_CLAHE_GREY_LEVELS 16384 /* skimage's NR_OF_GRAY: the 14-bit working range */

typedef struct {
  const float *grey;      /* (height, width) values in [0, 1] */
  const float *fov;       /* (height, width) 0/1, or NULL */
  guint8 *inside;         /* (height, width) 1 where fov > 0.5 (made by pass 1), or NULL */
  guint16 *levels;        /* (height, width) 16-bit level of each pixel (made by pass 1) */
  int width, height;
  int kw, kh;             /* tile (contextual region) size, pixels */
  int nx, ny;             /* tiles across and down: ceil(width / kw), ceil(height / kh) */
  int n_bins;             /* histogram length (as skimage's bincount minlength) */
  double clip_limit;      /* normalised, (0, 1] */
  const int *mirror_x;    /* (nx * kw) column read at each position of the tile grid */
  const int *mirror_y;    /* (ny * kh) */
  gboolean wide_bins;     /* n_bins > 256: the table holds guint16, else guint8 */
  const void *lut;        /* (65536) 16-bit level -> bin: guint8, or guint16 when wide_bins */
  guint32 *hist;          /* (ny, nx, n_bins) */
  gint64 *count;          /* (ny, nx) pixels that entered each histogram */
  float *maps;            /* (ny, nx, n_bins) mapping of each bin, 0..16383 */
} ReteClaheTiles;

/* The bin of a 16-bit level, through the table (ReteClaheTiles.lut) that stretches the levels over the range
 * seen and bins them (passes 2 and 3 both take the bins from it: they are not stored). */
static inline int
rete_clahe_bin (const void *lut, guint16 level, gboolean wide)
{
  return wide ? (int) ((const guint16 *) lut)[level] : (int) ((const guint8 *) lut)[level];
}

/* Everything the pixel passes (clahe_passes.c) share. */
typedef struct {
  ReteClaheTiles tiles;
  const float *weight_x;  /* (kw) weight of the right tile at each offset in a block */
  const float *pairs;     /* (ny + 1, nx, n_bins, 2) mappings of tile rows j - 1 and j
                             (clamped) side by side, for block row j */
  float *out;             /* (height, width) */
  GMutex lock;            /* guards the results of the chunks below */
  float g_min, g_max;     /* input range inside the FOV */
  gboolean any_inside, any_not_finite;
  float v_min, v_max;     /* interpolated range inside the FOV */
} ReteClahe;

/* Pass 1: input range inside the FOV, NaN/infinity, FOV not empty, the FOV byte mask, the
 * 16-bit levels. */
G_GNUC_INTERNAL void rete_clahe_range_rows (int first, int last, gpointer data);
/* Pass 3: bilinear interpolation of the tile mappings, and the range of the result. */
G_GNUC_INTERNAL void rete_clahe_interpolate_rows (int first, int last, gpointer data);
/* Pass 4: the result stretched to [0, 1] inside the FOV, 0 outside. */
G_GNUC_INTERNAL void rete_clahe_stretch_rows (int first, int last, gpointer data);

/* Pass 2, rows of tiles first .. last - 1: histograms of the tiles over the bins of the
 * 16-bit levels (read mirrored past the edges, FOV pixels only when fov != NULL), clipped,
 * turned into mappings. */
G_GNUC_INTERNAL void rete_clahe_tile_rows (int first, int last, gpointer tiles);
/* After pass 2, with a FOV: tiles that saw too few pixels take their neighbours' mappings. */
G_GNUC_INTERNAL void rete_clahe_fill_missing_maps (ReteClaheTiles *tiles);

/* Zuiderveld's ClipHistogram as skimage's clip_histogram (clahe_tiles.c). */
G_GNUC_INTERNAL void rete_clahe_clip_histogram (guint32 *hist, int n, gint64 clip);

G_END_DECLS

#endif /* RETE_CLAHE_PRIVATE_H */
