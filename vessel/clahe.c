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
 * This file holds the checks and the order of the passes (each spread over the cores by
 * rete_parallel_for_chunks, whose kept worker threads cost little per pass); clahe_passes.c
 * the pixel passes (by rows); clahe_tiles.c the histograms and mappings (by rows of
 * tiles).
 */
#include "clahe_private.h"
#include "image_private.h"

#include <math.h>
#include <string.h>

#define GREY_LEVELS RETE_CLAHE_GREY_LEVELS

void
rete_clahe_params_init (ReteClaheParams *params)
{
  g_return_if_fail (params != NULL);
  params->kernel_width = 0;
  params->kernel_height = 0;
  params->clip_limit = 0.01;
  params->n_bins = 256;
}

/* Rows per chunk of a pass over the rows: a few chunks per thread, so that a thread slowed
 * by other work on the machine is made up for by the others. */
static int
row_chunk (int height)
{
  return MAX (8, height / (8 * rete_thread_count ()));
}

/* Bin of the 16-bit value u when the values seen span u_min..u_max (see rete_clahe). */
static int
lut_entry (int u, int u_min, int u_max, int n_bins)
{
  double span = u_max - u_min, q;
  if (span > 0)
    q = rint ((CLAMP (u, u_min, u_max) - u_min) / span * (GREY_LEVELS - 1.0));
  else
    q = MIN (u, GREY_LEVELS - 1);
  return (int) q / (1 + GREY_LEVELS / n_bins);
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
          || !rete_image_check_same_size (grey, "the image", fov, "the field of view", error)))
    return NULL;

  ReteClahe c;
  memset (&c, 0, sizeof c);
  ReteClaheTiles *t = &c.tiles;
  t->grey = grey->data;
  t->fov = fov ? fov->data : NULL;
  t->width = grey->width;
  t->height = grey->height;
  c.g_min = c.v_min = G_MAXFLOAT;
  c.g_max = c.v_max = -G_MAXFLOAT;
  g_mutex_init (&c.lock);
  ReteImage *result = NULL;
  t->kw = params->kernel_width > 0 ? params->kernel_width : MAX (grey->width / 8, 1);
  t->kh = params->kernel_height > 0 ? params->kernel_height : MAX (grey->height / 8, 1);
  t->nx = (t->width + t->kw - 1) / t->kw;
  t->ny = (t->height + t->kh - 1) / t->kh;
  t->n_bins = params->n_bins;
  t->clip_limit = params->clip_limit;
  if ((gsize) t->nx * t->ny * t->n_bins > ((gsize) 1 << 25))
    {
      /* the mappings (and their pairs) would take more than about 400 MB */
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "CLAHE with %d×%d contextual regions of %d bins would need too much memory; "
                   "use larger regions (0 for 1/8 of the image) or fewer bins (256 is usual)",
                   t->nx, t->ny, t->n_bins);
      goto fail;
    }

  t->wide_bins = t->n_bins > 256; /* bins run up to n_bins - 1 */
  t->levels = g_try_new (guint16, rete_image_n_pixels (grey));
  if (fov != NULL)
    t->inside = g_try_new (guint8, rete_image_n_pixels (grey));
  if (t->levels == NULL || (fov != NULL && t->inside == NULL))
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_NO_MEMORY,
                   "not enough memory for CLAHE of a %d×%d image", grey->width, grey->height);
      goto fail;
    }
  rete_parallel_for_chunks (t->height, row_chunk (t->height), rete_clahe_range_rows, &c);
  if (c.any_not_finite)
    {
      if (rete_image_check_finite (grey, "the image for CLAHE", error))
        rete_image_check_finite (fov, "the field of view", error);
      goto fail;
    }
  if (!c.any_inside)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_EMPTY,
                   "the field of view is empty (no pixel above 0.5), so CLAHE has nothing to "
                   "equalise; detect the field of view again or give none");
      goto fail;
    }
  if (c.g_min < 0.0f || c.g_max > 1.0f)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "the image for CLAHE has values from %g to %g%s, outside [0, 1]; rescale it "
                   "to [0, 1] first", c.g_min, c.g_max, fov ? " inside the field of view" : "");
      goto fail;
    }
  result = rete_image_new_unset (grey->width, grey->height, 1, error); /* all written */
  if (result == NULL)
    goto fail;
  c.out = result->data;
  /* 16-bit value -> 14-bit stretched over the range seen -> bin: skimage's
   * rescale_intensity (float64), np.round, and lut //= 1 + 16384 // nbins. The table is a
   * staircase (every step is monotone), so each step's first value is found by bisection
   * rather than by evaluating all 65536 entries. */
  int u_min = (int) rint (c.g_min * 65535.0f), u_max = (int) rint (c.g_max * 65535.0f);
  void *lut = g_malloc ((t->wide_bins ? sizeof (guint16) : sizeof (guint8)) * 65536);
  int u = 0;
  while (u < 65536)
    {
      int bin = lut_entry (u, u_min, u_max, t->n_bins);
      int lo = u, hi = 65535; /* last u with this bin: lo has it; find the largest */
      while (lo < hi)
        {
          int mid = lo + (hi - lo + 1) / 2;
          if (lut_entry (mid, u_min, u_max, t->n_bins) == bin)
            lo = mid;
          else
            hi = mid - 1;
        }
      for (; u <= lo; u++)
        if (t->wide_bins)
          ((guint16 *) lut)[u] = (guint16) bin;
        else
          ((guint8 *) lut)[u] = (guint8) bin;
    }
  t->lut = lut;

  int *mirror_x = g_new (int, (gsize) t->nx * t->kw);
  int *mirror_y = g_new (int, (gsize) t->ny * t->kh);
  for (int p = 0; p < t->nx * t->kw; p++)
    mirror_x[p] = mirror (p, t->width);
  for (int p = 0; p < t->ny * t->kh; p++)
    mirror_y[p] = mirror (p, t->height);
  t->mirror_x = mirror_x;
  t->mirror_y = mirror_y;
  gsize n_maps = (gsize) t->nx * t->ny * t->n_bins;
  t->hist = g_new (guint32, n_maps);
  t->count = g_new (gint64, (gsize) t->nx * t->ny);
  t->maps = g_new0 (float, n_maps);
  rete_parallel_for_chunks (t->ny, 1, rete_clahe_tile_rows, t);
  if (t->fov != NULL)
    rete_clahe_fill_missing_maps (t);

  float *weight_x = g_new (float, t->kw);
  for (int k = 0; k < t->kw; k++)
    weight_x[k] = (float) ((double) k / t->kw); /* np.arange (k) / k */
  c.weight_x = weight_x;
  gsize tile_row = (gsize) t->nx * t->n_bins;
  float *pairs = g_new (float, (t->ny + 1) * tile_row * 2);
  for (int j = 0; j <= t->ny; j++)
    {
      const float *above = t->maps + CLAMP (j - 1, 0, t->ny - 1) * tile_row;
      const float *below = t->maps + CLAMP (j, 0, t->ny - 1) * tile_row;
      float *pair = pairs + j * tile_row * 2;
      for (gsize k = 0; k < tile_row; k++)
        {
          pair[2 * k] = above[k];
          pair[2 * k + 1] = below[k];
        }
    }
  c.pairs = pairs;
  rete_parallel_for_chunks (t->height, row_chunk (t->height), rete_clahe_interpolate_rows, &c);
  rete_parallel_for_chunks (t->height, row_chunk (t->height), rete_clahe_stretch_rows, &c);

  g_free (weight_x);
  g_free (pairs);
  g_free (t->hist);
  g_free (t->count);
  g_free (t->maps);
  g_free (mirror_x);
  g_free (mirror_y);
  g_free (lut);
  g_free (t->inside);
  g_free (t->levels);
  g_mutex_clear (&c.lock);
  return result;

fail:
  rete_image_free (result);
  g_free (t->inside);
  g_free (t->levels);
  g_mutex_clear (&c.lock);
  return NULL;
}
