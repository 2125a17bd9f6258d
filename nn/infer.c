/* infer.c — inference on a whole photograph in overlapping tiles.
 *
 * Exactness contract (the halo habit of GEGL operations): an output pixel of the U-Net depends
 * only on input pixels within its receptive field, so a tile whose window reaches `halo` pixels
 * past its core on every side gives exactly the untiled result in the core, provided
 *  - the window is aligned to 2^(L-1), so that the max-pool and up-convolution grids coincide
 *    with those of the whole image, and
 *  - at the border of the (zero-padded) image the window stops there, so the network's own zero
 *    padding falls where it falls for the whole image.
 * The halo is found by propagating the dependency interval of one output pixel through the
 * layers (rete_unet_halo), for every alignment of the pixel on the 2^(L-1) grid.
 *
 * Memory: each worker thread holds one lean activation set (tensors with disjoint lifetimes
 * share memory, see unet_activations_layout) for a tile window; the tile side is the largest
 * multiple of 2^(L-1) up to 512 whose set fits in TILE_BUDGET_BYTES (less with more than 4
 * threads: ALL_TILES_BUDGET_BYTES for all). With the standard model on 2 threads that is a tile
 * of 332 in a window of 380 (halo 24): 1.31× the pixels, and a peak of 329 MB for the learned
 * map of a 3504×2336 photograph (bench-nn-infer --memory). Threads: one tile per
 * worker thread at a time, in rounds; progress and cancellation are checked on the calling
 * thread between rounds.
 */
#include "unet_private.h"
#include "layers.h"

#include <math.h>
#include <string.h>

#define TILE_BUDGET_BYTES ((gsize) 48 << 20)
/* ... and all threads together at most this (machines with many cores get smaller tiles). */
#define ALL_TILES_BUDGET_BYTES ((gsize) 192 << 20)
#define TILE_MAX 512

static int
floor_div2 (int v)
{
  return v >= 0 ? v / 2 : -((-v + 1) / 2);
}

/* Input interval [*lo, *hi] (level-0 pixels) on which the encoder output of level l over
 * [lo, hi] (level-l pixels) depends. */
static void
encoder_interval (const ReteUnetConfig *cf, int l, int *lo, int *hi)
{
  *lo -= cf->convs_per_block;
  *hi += cf->convs_per_block;
  if (l == 0)
    return;
  *lo = 2 * *lo; /* max-pool: level-l pixel p covers level-(l-1) pixels 2p, 2p+1 */
  *hi = 2 * *hi + 1;
  encoder_interval (cf, l - 1, lo, hi);
}

static void
decoder_interval (const ReteUnetConfig *cf, int l, int *lo, int *hi)
{
  if (l == cf->levels - 1)
    {
      encoder_interval (cf, l, lo, hi);
      return;
    }
  int a = *lo - cf->convs_per_block, b = *hi + cf->convs_per_block;
  int skip_lo = a, skip_hi = b;
  encoder_interval (cf, l, &skip_lo, &skip_hi);
  int up_lo = floor_div2 (a), up_hi = floor_div2 (b); /* up-convolution: q reads q/2 */
  decoder_interval (cf, l + 1, &up_lo, &up_hi);
  *lo = MIN (skip_lo, up_lo);
  *hi = MAX (skip_hi, up_hi);
}

int
rete_unet_halo (const ReteUnetConfig *config)
{
  int m = rete_unet_config_multiple (config), reach = 0;
  for (int x = 0; x < m; x++)
    {
      int lo = x, hi = x;
      decoder_interval (config, 0, &lo, &hi);
      reach = MAX (reach, MAX (x - lo, hi - x));
    }
  return (reach + m - 1) / m * m;
}

typedef struct {
  const ReteUnet *net;
  const float *input; /* (C, H, W) the caller's image, unpadded */
  int channels, height, width;  /* the caller's image */
  int padded_h, padded_w;       /* multiples of 2^(L-1) */
  int tile, halo, tiles_x;
  float **workspace;            /* (threads) lean activation sets */
  UnetActivations *acts;        /* (threads) */
  float *result;                /* (H, W) */
  int round_first;
} InferJob;

static void
infer_tile (int first, int last, gpointer data)
{
  InferJob *job = data;
  for (int t = first; t < last; t++)
    {
      int index = job->round_first + t;
      int tx = index % job->tiles_x, ty = index / job->tiles_x;
      int x0 = tx * job->tile, y0 = ty * job->tile;
      int x1 = MIN (x0 + job->tile, job->padded_w), y1 = MIN (y0 + job->tile, job->padded_h);
      int wx0 = MAX (0, x0 - job->halo), wy0 = MAX (0, y0 - job->halo);
      int wx1 = MIN (job->padded_w, x1 + job->halo), wy1 = MIN (job->padded_h, y1 + job->halo);
      int ww = wx1 - wx0, wh = wy1 - wy0;
      UnetActivations a;
      unet_activations_layout (job->net, wh, ww, TRUE, job->workspace[t], &a);
      /* the window of the input, zero past the image */
      for (int c = 0; c < job->channels; c++)
        for (int y = 0; y < wh; y++)
          {
            float *dst = a.input + ((gsize) c * wh + y) * ww;
            int sy = wy0 + y;
            int n_in = sy < job->height ? CLAMP (job->width - wx0, 0, ww) : 0;
            if (n_in > 0)
              memcpy (dst, job->input + ((gsize) c * job->height + sy) * job->width + wx0,
                      sizeof (float) * n_in);
            memset (dst + n_in, 0, sizeof (float) * (ww - n_in));
          }
      unet_forward_one (job->net, &a, wh, ww);
      int cx1 = MIN (x1, job->width), cy1 = MIN (y1, job->height);
      for (int y = y0; y < cy1; y++)
        for (int x = x0; x < cx1; x++)
          job->result[(gsize) y * job->width + x]
            = nn_sigmoid (a.logits[(gsize) (y - wy0) * ww + (x - wx0)]);
    }
}

static gboolean
check_input (const ReteUnet *net, const float *input, int channels, int height, int width,
             const float *probability, GError **error)
{
  if (input == NULL || probability == NULL)
    {
      g_set_error (error, RETE_NN_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "no image or no output given to the network");
      return FALSE;
    }
  if (channels != net->config.in_channels)
    {
      g_set_error (error, RETE_NN_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "the model reads %d channel(s) but the preprocessed image has %d; "
                   "preprocess the photograph as the model's metadata says",
                   net->config.in_channels, channels);
      return FALSE;
    }
  if (height < 1 || width < 1 || height > RETE_MAX_SIDE || width > RETE_MAX_SIDE
      || (gsize) height * width > RETE_MAX_PIXELS)
    {
      g_set_error (error, RETE_NN_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "image of %d×%d cannot be processed (sides 1 to %d, at most %zu pixels)",
                   width, height, RETE_MAX_SIDE, (gsize) RETE_MAX_PIXELS);
      return FALSE;
    }
  gsize n = (gsize) channels * height * width;
  for (gsize i = 0; i < n; i++)
    if (!isfinite (input[i]))
      {
        g_set_error (error, RETE_NN_ERROR, RETE_ERROR_NOT_FINITE,
                     "the preprocessed image holds a non-finite value at x %d, y %d; "
                     "check the photograph and the preprocessing",
                     (int) (i % width), (int) (i / width % height));
        return FALSE;
      }
  return TRUE;
}

gboolean
unet_infer_tiled (const ReteUnet *net, int tile, const float *input, int channels, int height,
                  int width, float *probability, ReteProgressFunc progress,
                  gpointer progress_data, GError **error)
{
  if (!check_input (net, input, channels, height, width, probability, error))
    return FALSE;
  nn_blas_single_thread ();
  int m = rete_unet_config_multiple (&net->config);
  InferJob job = { 0 };
  job.net = net;
  job.input = input;
  job.channels = channels;
  job.height = height;
  job.width = width;
  job.padded_h = (height + m - 1) / m * m;
  job.padded_w = (width + m - 1) / m * m;
  job.halo = rete_unet_halo (&net->config);
  if (tile <= 0)
    {
      gsize budget = MIN (TILE_BUDGET_BYTES, ALL_TILES_BUDGET_BYTES / rete_thread_count ());
      tile = TILE_MAX;
      while (tile > m && unet_activations_layout (net, tile + 2 * job.halo, tile + 2 * job.halo,
                                                  TRUE, NULL, NULL) * sizeof (float) > budget)
        tile -= m;
    }
  tile = MAX (m, tile / m * m);
  job.tile = tile;
  job.tiles_x = (job.padded_w + tile - 1) / tile;
  int tiles_y = (job.padded_h + tile - 1) / tile, n_tiles = job.tiles_x * tiles_y;
  int n_threads = MIN (rete_thread_count (), n_tiles);
  int side_h = MIN (job.padded_h, tile + 2 * job.halo), side_w = MIN (job.padded_w, tile + 2 * job.halo);
  gsize ws_floats = unet_activations_layout (net, side_h, side_w, TRUE, NULL, NULL);
  job.workspace = g_new0 (float *, n_threads);
  job.result = g_try_malloc (sizeof (float) * height * width);
  gboolean ok = job.result != NULL;
  for (int t = 0; ok && t < n_threads; t++)
    ok = (job.workspace[t] = g_try_malloc (sizeof (float) * ws_floats)) != NULL;
  if (!ok)
    g_set_error (error, RETE_NN_ERROR, RETE_ERROR_NO_MEMORY,
                 "not enough memory for inference on %d×%d (%d tiles of %d pixels); "
                 "close other programs or use fewer threads (RETE_THREADS)",
                 width, height, n_tiles, tile);
  for (job.round_first = 0; ok && job.round_first < n_tiles; job.round_first += n_threads)
    {
      int in_round = MIN (n_threads, n_tiles - job.round_first);
      rete_parallel_for (in_round, infer_tile, &job);
      double fraction = (double) (job.round_first + in_round) / n_tiles;
      if (progress != NULL && !progress (fraction, "vessel map (U-Net)", progress_data))
        {
          g_set_error (error, RETE_NN_ERROR, RETE_ERROR_CANCELLED, "vessel map cancelled");
          ok = FALSE;
        }
    }
  if (ok)
    memcpy (probability, job.result, sizeof (float) * height * width);
  for (int t = 0; t < n_threads; t++)
    g_free (job.workspace[t]);
  g_free (job.workspace);
  g_free (job.result);
  return ok;
}
