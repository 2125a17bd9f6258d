/* clahe.c — contrast limited adaptive histogram equalisation (CLAHE; Zuiderveld, "Contrast
 * Limited Adaptive Histogram Equalization", Graphics Gems IV, 1994), optionally limited to
 * the field of view.
 *
 * The layout follows skimage.exposure.equalize_adapthist (0.19) step for step, so that the
 * two can be held together by tests/test_preprocess.c:
 *   1. values to 16-bit (rint(v * 65535)), then stretched from their minimum..maximum to the
 *      14-bit range 0..16383 (rounded half to even), then binned as q / (1 + 16384 / n_bins);
 *   2. the image is cut into tiles ("contextual regions") of kernel_height × kernel_width
 *      starting at the top-left corner; the last row and column of tiles reach past the
 *      image and read it mirrored ('reflect': d c b | a b c d | c b a);
 *   3. each tile's histogram is clipped at max(1, clip_limit × pixels in the tile) and the
 *      excess redistributed (Zuiderveld's ClipHistogram, with skimage's stride rule for the
 *      remainder); its cumulative sum times 16383 / pixels, truncated, is the tile's mapping;
 *   4. each pixel's value is the bilinear interpolation of the mappings of the four tiles
 *      around it; a pixel at row y sits at y + kernel_height / 2 on a grid of blocks of
 *      kernel_height rows, block j blends tiles j - 1 and j with weight (offset in block) /
 *      kernel_height, tile indices clamped at the edges (and the same for columns);
 *   5. the result is stretched from its minimum..maximum to [0, 1].
 * skimage truncates step 4 to integers; we keep the interpolated value as a float (at most
 * 1/16383 apart).
 *
 * Inside a field of view (our addition): only pixels inside the FOV enter the histograms,
 * the minimum..maximum of steps 1 and 5 are taken inside it, each tile's clip limit and
 * mapping use the number of FOV pixels in it, tiles with fewer than 1/16 of their area inside
 * take the mean mapping of their neighbours (repeated outwards), and pixels outside are 0.
 * The surround then has no influence at all on the result inside.
 */
#include "rete_preprocess.h"
#include "rete_fov.h"

#include <math.h>
#include <string.h>

#define GREY_LEVELS 16384 /* skimage's NR_OF_GRAY: the 14-bit working range */
#define MIN_FOV_FRACTION 16 /* a tile needs 1/16 of its area inside the FOV for a mapping */

void
rete_clahe_params_init (ReteClaheParams *params)
{
  g_return_if_fail (params != NULL);
  params->kernel_width = 0;
  params->kernel_height = 0;
  params->clip_limit = 0.01;
  params->n_bins = 256;
}

typedef struct {
  const float *grey;      /* (height, width) */
  const float *fov;       /* (height, width) or NULL */
  int width, height;
  int kw, kh;             /* tile size, pixels */
  int nx, ny;             /* tiles across and down: ceil(width / kw), ceil(height / kh) */
  int n_bins;             /* histogram length (as skimage's bincount minlength) */
  int bin_size;           /* 1 + 16384 / n_bins */
  double clip_limit;
  const int *mirror_x;    /* (nx * kw) column read for each tile column position */
  const int *mirror_y;    /* (ny * kh) */
  guint16 *bins;          /* (height, width) 16-bit value, then bin */
  const guint16 *lut;     /* (65536) 16-bit value -> bin */
  guint32 *hist;          /* (ny, nx, n_bins) */
  gint64 *count;          /* (ny, nx) pixels that entered each histogram */
  float *maps;            /* (ny, nx, n_bins) mapping of each bin, 0..16383 */
  const int *col_left;    /* (width) left tile index * n_bins */
  const int *col_right;   /* (width) */
  const float *col_w;     /* (width) weight of the right tile */
  float *out;             /* (height, width) */
  /* per worker chunk results of the range passes */
  GMutex lock;
  int u_min, u_max;
  float v_min, v_max;
  gboolean out_of_range;
} Clahe;

static inline gboolean
inside (const Clahe *c, gsize i)
{
  return c->fov == NULL || c->fov[i] > 0.5f;
}

/* Pass 1: 16-bit values and their range (inside the FOV). */
static void
quantise_rows (int first, int last, gpointer data)
{
  Clahe *c = data;
  int lo = 65535, hi = 0;
  gboolean bad = FALSE;
  for (int y = first; y < last; y++)
    for (int x = 0; x < c->width; x++)
      {
        gsize i = (gsize) y * c->width + x;
        float v = c->grey[i];
        if (!(v >= 0.0f && v <= 1.0f)) /* also catches NaN */
          {
            bad = TRUE;
            v = isnan (v) ? 0.0f : CLAMP (v, 0.0f, 1.0f);
          }
        int u = (int) rintf (v * 65535.0f); /* float32 product, as img_as_uint on float32 */
        c->bins[i] = (guint16) u;
        if (inside (c, i))
          {
            lo = MIN (lo, u);
            hi = MAX (hi, u);
          }
      }
  g_mutex_lock (&c->lock);
  c->u_min = MIN (c->u_min, lo);
  c->u_max = MAX (c->u_max, hi);
  c->out_of_range |= bad;
  g_mutex_unlock (&c->lock);
}

static void
bin_rows (int first, int last, gpointer data)
{
  Clahe *c = data;
  for (gsize i = (gsize) first * c->width; i < (gsize) last * c->width; i++)
    c->bins[i] = c->lut[c->bins[i]];
}

/* Zuiderveld's ClipHistogram in skimage's formulation: clip, spread the excess evenly,
 * then hand out the remainder one by one along strides. */
static void
clip_histogram (guint32 *hist, int n, gint64 clip)
{
  gint64 n_excess = 0;
  for (int i = 0; i < n; i++)
    if (hist[i] > clip)
      {
        n_excess += hist[i] - clip;
        hist[i] = (guint32) clip;
      }
  gint64 increment = n_excess / n;
  gint64 upper = clip - increment;
  int n_under = 0;
  for (int i = 0; i < n; i++)
    {
      gint64 h = hist[i];
      if (h < upper)
        {
          h += increment;
          n_excess -= increment;
        }
      if (h >= upper && h < clip)
        {
          n_excess += h - clip;
          h = clip;
        }
      hist[i] = (guint32) h;
      n_under += h < clip;
    }
  while (n_excess > 0 && n_under > 0)
    {
      gint64 previous = n_excess;
      for (int index = 0; index < n && n_under > 0; index++)
        {
          int step = (int) MAX (1, n_under / n_excess);
          gint64 given = 0;
          for (int i = index; i < n; i += step)
            if (hist[i] < clip)
              {
                hist[i]++;
                given++;
                n_under -= hist[i] == clip;
              }
          n_excess -= given;
          if (n_excess <= 0)
            break;
        }
      if (previous == n_excess)
        break;
    }
}

/* Pass 2: one row of tiles: histograms, clipping, mappings. */
static void
tile_rows (int first, int last, gpointer data)
{
  Clahe *c = data;
  for (int ty = first; ty < last; ty++)
    {
      guint32 *row_hist = c->hist + (gsize) ty * c->nx * c->n_bins;
      memset (row_hist, 0, sizeof (guint32) * c->nx * c->n_bins);
      gint64 *row_count = c->count + (gsize) ty * c->nx;
      memset (row_count, 0, sizeof (gint64) * c->nx);
      for (int r = ty * c->kh; r < (ty + 1) * c->kh; r++)
        {
          gsize row = (gsize) c->mirror_y[r] * c->width;
          const guint16 *b = c->bins + row;
          const float *f = c->fov ? c->fov + row : NULL;
          for (int tx = 0; tx < c->nx; tx++)
            {
              guint32 *h = row_hist + (gsize) tx * c->n_bins;
              int x0 = tx * c->kw, x1 = x0 + c->kw;
              int n_in = 0;
              if (f == NULL && x1 <= c->width)
                {
                  for (int x = x0; x < x1; x++)
                    h[b[x]]++;
                  n_in = c->kw;
                }
              else
                for (int p = x0; p < x1; p++)
                  {
                    int x = c->mirror_x[p];
                    if (f == NULL || f[x] > 0.5f)
                      {
                        h[b[x]]++;
                        n_in++;
                      }
                  }
              row_count[tx] += n_in;
            }
        }
      for (int tx = 0; tx < c->nx; tx++)
        {
          guint32 *h = row_hist + (gsize) tx * c->n_bins;
          float *map = c->maps + ((gsize) ty * c->nx + tx) * c->n_bins;
          gint64 n_pixels = row_count[tx];
          if (n_pixels == 0)
            continue;
          gint64 clip = (gint64) MAX (c->clip_limit * (double) n_pixels, 1.0);
          clip_histogram (h, c->n_bins, clip);
          double factor = (GREY_LEVELS - 1.0) / (double) n_pixels;
          gint64 sum = 0;
          for (int k = 0; k < c->n_bins; k++)
            {
              sum += h[k];
              map[k] = (float) floor (MIN ((double) sum * factor, GREY_LEVELS - 1.0));
            }
        }
    }
}

/* Tiles with too few FOV pixels take the mean mapping of their neighbours that have one,
 * ring after ring, until every tile has a mapping. */
static void
fill_missing_maps (Clahe *c)
{
  int n_tiles = c->nx * c->ny;
  gint64 area = (gint64) c->kw * c->kh;
  gint64 need = MAX (1, area / MIN_FOV_FRACTION);
  gboolean any = FALSE;
  for (int t = 0; t < n_tiles; t++)
    any |= c->count[t] >= need;
  if (!any) /* a small FOV: every tile that saw a pixel keeps its mapping */
    need = 1;
  guint8 *valid = g_new0 (guint8, n_tiles);
  guint8 *next = g_new0 (guint8, n_tiles);
  int missing = 0;
  for (int t = 0; t < n_tiles; t++)
    {
      valid[t] = c->count[t] >= need;
      missing += !valid[t];
    }
  while (missing > 0)
    {
      memcpy (next, valid, n_tiles);
      for (int ty = 0; ty < c->ny; ty++)
        for (int tx = 0; tx < c->nx; tx++)
          {
            int t = ty * c->nx + tx;
            if (valid[t])
              continue;
            float *map = c->maps + (gsize) t * c->n_bins;
            int n = 0;
            for (int dy = -1; dy <= 1; dy++)
              for (int dx = -1; dx <= 1; dx++)
                {
                  int sy = ty + dy, sx = tx + dx;
                  if (sy < 0 || sy >= c->ny || sx < 0 || sx >= c->nx || !valid[sy * c->nx + sx])
                    continue;
                  const float *source = c->maps + ((gsize) sy * c->nx + sx) * c->n_bins;
                  if (n == 0)
                    memset (map, 0, sizeof (float) * c->n_bins);
                  for (int k = 0; k < c->n_bins; k++)
                    map[k] += source[k];
                  n++;
                }
            if (n > 0)
              {
                for (int k = 0; k < c->n_bins; k++)
                  map[k] /= n;
                next[t] = 1;
                missing--;
              }
          }
      memcpy (valid, next, n_tiles);
    }
  g_free (valid);
  g_free (next);
}

/* Pass 3: bilinear interpolation between the four surrounding mappings. */
static void
interpolate_rows (int first, int last, gpointer data)
{
  Clahe *c = data;
  float lo = G_MAXFLOAT, hi = -G_MAXFLOAT;
  for (int y = first; y < last; y++)
    {
      int p = y + c->kh / 2;
      int j = p / c->kh;
      float wy = (float) ((double) (p % c->kh) / c->kh);
      int top = CLAMP (j - 1, 0, c->ny - 1), bottom = CLAMP (j, 0, c->ny - 1);
      const float *m0 = c->maps + (gsize) top * c->nx * c->n_bins;
      const float *m1 = c->maps + (gsize) bottom * c->nx * c->n_bins;
      gsize row = (gsize) y * c->width;
      const guint16 *b = c->bins + row;
      float *out = c->out + row;
      for (int x = 0; x < c->width; x++)
        {
          int k = b[x], l = c->col_left[x] + k, r = c->col_right[x] + k;
          float wx = c->col_w[x];
          float t = m0[l] + wx * (m0[r] - m0[l]);
          float u = m1[l] + wx * (m1[r] - m1[l]);
          out[x] = t + wy * (u - t);
        }
      for (int x = 0; x < c->width; x++)
        if (inside (c, row + x))
          {
            lo = MIN (lo, out[x]);
            hi = MAX (hi, out[x]);
          }
    }
  g_mutex_lock (&c->lock);
  c->v_min = MIN (c->v_min, lo);
  c->v_max = MAX (c->v_max, hi);
  g_mutex_unlock (&c->lock);
}

/* Pass 4: the result stretched to [0, 1] inside the FOV, 0 outside. */
static void
stretch_rows (int first, int last, gpointer data)
{
  Clahe *c = data;
  float lo = c->v_min, range = c->v_max - c->v_min;
  float scale = range > 0 ? 1.0f / range : 0.0f;
  for (gsize i = (gsize) first * c->width; i < (gsize) last * c->width; i++)
    {
      if (!inside (c, i))
        c->out[i] = 0.0f;
      else if (range > 0)
        c->out[i] = (c->out[i] - lo) * scale;
      else /* a flat image: skimage clips the flat result into [0, 1], giving 1 */
        c->out[i] = 1.0f;
    }
}

/* Mirror ('reflect', edge not repeated) index of p in [0, n). */
static int
mirror (int p, int n)
{
  if (n == 1)
    return 0;
  int period = 2 * (n - 1);
  p %= period;
  if (p < 0)
    p += period;
  return p < n ? p : period - p;
}

static gboolean
check_params (const ReteImage *grey, const ReteClaheParams *params, GError **error)
{
  if (params->kernel_width < 0 || params->kernel_height < 0
      || params->kernel_width > grey->width || params->kernel_height > grey->height)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "CLAHE contextual region %d×%d does not fit the %d×%d image; give a region "
                   "of 1 pixel up to the image size, or 0 for 1/8 of the image",
                   params->kernel_width, params->kernel_height, grey->width, grey->height);
      return FALSE;
    }
  if (!(params->clip_limit > 0.0 && params->clip_limit <= 1.0))
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "CLAHE clip limit %g is outside (0, 1]; 0.01 is the usual value, "
                   "1 means no limit (plain adaptive equalisation)", params->clip_limit);
      return FALSE;
    }
  if (params->n_bins < 2 || params->n_bins > 65536)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "CLAHE histogram bins %d is outside 2..65536; 256 is the usual value",
                   params->n_bins);
      return FALSE;
    }
  return TRUE;
}

ReteImage *
rete_clahe (const ReteImage *grey, const ReteImage *fov, const ReteClaheParams *params,
            GError **error)
{
  g_return_val_if_fail (error == NULL || *error == NULL, NULL);
  ReteClaheParams defaults;
  if (params == NULL)
    {
      rete_clahe_params_init (&defaults);
      params = &defaults;
    }
  if (grey == NULL)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "CLAHE needs a grey image, got none");
      return NULL;
    }
  if (!rete_image_check_channels (grey, "the image for CLAHE", 1, error)
      || !check_params (grey, params, error))
    return NULL;
  if (fov != NULL
      && (!rete_image_check_channels (fov, "the field of view", 1, error)
          || !rete_image_check_same_size (grey, "the image", fov, "the field of view", error)
          || !rete_image_check_finite (fov, "the field of view", error)))
    return NULL;
  if (fov != NULL && rete_mask_count (fov) == 0)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_EMPTY,
                   "the field of view is empty (no pixel above 0.5), so CLAHE has nothing to "
                   "equalise; detect the field of view again or give none");
      return NULL;
    }
  if (!rete_image_check_finite (grey, "the image for CLAHE", error))
    return NULL;

  ReteImage *result = rete_image_new_like (grey, 1, error);
  if (result == NULL)
    return NULL;

  Clahe c = { 0 };
  c.grey = grey->data;
  c.fov = fov ? fov->data : NULL;
  c.width = grey->width;
  c.height = grey->height;
  c.kw = params->kernel_width > 0 ? params->kernel_width : MAX (grey->width / 8, 1);
  c.kh = params->kernel_height > 0 ? params->kernel_height : MAX (grey->height / 8, 1);
  c.nx = (c.width + c.kw - 1) / c.kw;
  c.ny = (c.height + c.kh - 1) / c.kh;
  c.n_bins = params->n_bins;
  c.bin_size = 1 + GREY_LEVELS / c.n_bins;
  c.clip_limit = params->clip_limit;
  c.out = result->data;
  c.u_min = 65535;
  c.u_max = 0;
  c.v_min = G_MAXFLOAT;
  c.v_max = -G_MAXFLOAT;
  g_mutex_init (&c.lock);

  gsize n_pixels = rete_image_n_pixels (grey);
  c.bins = g_new (guint16, n_pixels);
  rete_parallel_for (c.height, quantise_rows, &c);
  if (c.out_of_range)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "the image for CLAHE has values outside [0, 1]; rescale it to [0, 1] first");
      g_free (c.bins);
      g_mutex_clear (&c.lock);
      rete_image_free (result);
      return NULL;
    }

  /* 16-bit -> 14-bit stretched over the range seen -> bin (skimage's rescale_intensity,
   * np.round and lut //= bin_size). */
  guint16 *lut = g_new0 (guint16, 65536);
  double span = c.u_max - c.u_min;
  for (int u = 0; u < 65536; u++)
    {
      double q;
      if (span > 0)
        q = rint ((CLAMP (u, c.u_min, c.u_max) - c.u_min) / span * (GREY_LEVELS - 1.0));
      else
        q = MIN (u, GREY_LEVELS - 1);
      lut[u] = (guint16) ((int) q / c.bin_size);
    }
  c.lut = lut;
  rete_parallel_for (c.height, bin_rows, &c);

  int *mirror_x = g_new (int, (gsize) c.nx * c.kw);
  int *mirror_y = g_new (int, (gsize) c.ny * c.kh);
  for (int p = 0; p < c.nx * c.kw; p++)
    mirror_x[p] = mirror (p, c.width);
  for (int p = 0; p < c.ny * c.kh; p++)
    mirror_y[p] = mirror (p, c.height);
  c.mirror_x = mirror_x;
  c.mirror_y = mirror_y;
  gsize n_maps = (gsize) c.nx * c.ny * c.n_bins;
  c.hist = g_new (guint32, n_maps);
  c.count = g_new (gint64, (gsize) c.nx * c.ny);
  c.maps = g_new0 (float, n_maps);
  rete_parallel_for (c.ny, tile_rows, &c);
  if (c.fov != NULL)
    fill_missing_maps (&c);

  int *col_left = g_new (int, c.width);
  int *col_right = g_new (int, c.width);
  float *col_w = g_new (float, c.width);
  for (int x = 0; x < c.width; x++)
    {
      int p = x + c.kw / 2, j = p / c.kw;
      col_left[x] = CLAMP (j - 1, 0, c.nx - 1) * c.n_bins;
      col_right[x] = CLAMP (j, 0, c.nx - 1) * c.n_bins;
      col_w[x] = (float) ((double) (p % c.kw) / c.kw);
    }
  c.col_left = col_left;
  c.col_right = col_right;
  c.col_w = col_w;
  rete_parallel_for (c.height, interpolate_rows, &c);
  rete_parallel_for (c.height, stretch_rows, &c);

  g_free (col_left);
  g_free (col_right);
  g_free (col_w);
  g_free (c.hist);
  g_free (c.count);
  g_free (c.maps);
  g_free (mirror_x);
  g_free (mirror_y);
  g_free (lut);
  g_free (c.bins);
  g_mutex_clear (&c.lock);
  return result;
}
