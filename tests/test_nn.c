/* test_nn.c — the network engine without external references: each optimised layer against its
 * naive version, every layer's backward against central finite differences, the whole U-Net's
 * gradient against finite differences, tiled against untiled inference, the model file round
 * trip and every bad model file we could think of.
 *
 * Finite differences: for an objective J = Σ r_i out_i (r random), dJ/dθ ≈ (J(θ+ε) - J(θ-ε)) / 2ε
 * (central differences, error O(ε²); common practice). Outputs are float32, so the check
 * tolerates 1e-3 of the largest gradient (float rounding divided by 2ε, from the sizes used).
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <glib/gstdio.h>

#include "rete_test.h"
#include "rete_nn.h"
#include "layers.h"
#include "rete_learned.h"

static guint64 rng_state = 12345;

static double
rng_uniform (void)
{
  guint64 z = (rng_state += 0x9E3779B97F4A7C15ull);
  z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9ull;
  z = (z ^ (z >> 27)) * 0x94D049BB133111EBull;
  z ^= z >> 31;
  return (z >> 11) * (1.0 / 9007199254740992.0);
}

static float *
random_array (gsize n, double scale)
{
  float *a = g_new (float, n);
  for (gsize i = 0; i < n; i++)
    a[i] = (float) ((2.0 * rng_uniform () - 1.0) * scale);
  return a;
}

/* max |a - b| / max(max |b|, 1e-12) */
static double
relative_diff (const float *a, const float *b, gsize n)
{
  double diff = 0.0, scale = 1e-12;
  for (gsize i = 0; i < n; i++)
    {
      diff = fmax (diff, fabs ((double) a[i] - b[i]));
      scale = fmax (scale, fabs ((double) b[i]));
    }
  return diff / scale;
}

static double
dot (const float *a, const float *b, gsize n)
{
  double s = 0.0;
  for (gsize i = 0; i < n; i++)
    s += (double) a[i] * b[i];
  return s;
}

/* ---- layers: a generic description so that one checker serves all ---- */

typedef enum { LAYER_CONV3, LAYER_CONV1, LAYER_UPCONV, LAYER_MAXPOOL, LAYER_RELU, LAYER_CONCAT } LayerKind;

typedef struct {
  const char *path;
  LayerKind kind;
  int N, C_in, C_out, H, W;
  gboolean naive; /* check the naive backward (TRUE) or the optimised one */
} LayerCase;

typedef struct {
  gsize n_in, n_out, n_w, n_b;
} LayerSizes;

static LayerSizes
layer_sizes (const LayerCase *c)
{
  LayerSizes s = { 0 };
  gsize plane = (gsize) c->H * c->W;
  s.n_in = (gsize) c->N * c->C_in * plane;
  switch (c->kind)
    {
    case LAYER_CONV3:
      s.n_out = (gsize) c->N * c->C_out * plane, s.n_w = (gsize) c->C_out * c->C_in * 9, s.n_b = c->C_out;
      break;
    case LAYER_CONV1:
      s.n_out = (gsize) c->N * c->C_out * plane, s.n_w = (gsize) c->C_out * c->C_in, s.n_b = c->C_out;
      break;
    case LAYER_UPCONV:
      s.n_out = (gsize) c->N * c->C_out * plane * 4, s.n_w = (gsize) c->C_in * c->C_out * 4, s.n_b = c->C_out;
      break;
    case LAYER_MAXPOOL:
      s.n_out = s.n_in / 4;
      break;
    case LAYER_RELU:
      s.n_out = s.n_in;
      break;
    case LAYER_CONCAT: /* a = inp (C_in channels), b = the weight buffer used as a second input (C_out channels) */
      s.n_w = (gsize) c->N * c->C_out * plane;
      s.n_out = s.n_in + s.n_w;
      break;
    }
  return s;
}

static void
layer_forward (const LayerCase *c, gboolean naive, float *out, const float *inp, const float *w,
               const float *b)
{
  switch (c->kind)
    {
    case LAYER_CONV3:
      (naive ? conv3x3_forward_naive : conv3x3_forward) (out, inp, w, b, c->N, c->C_in, c->C_out, c->H, c->W);
      break;
    case LAYER_CONV1:
      (naive ? conv1x1_forward_naive : conv1x1_forward) (out, inp, w, b, c->N, c->C_in, c->C_out, c->H, c->W);
      break;
    case LAYER_UPCONV:
      (naive ? upconv2x2_forward_naive : upconv2x2_forward) (out, inp, w, b, c->N, c->C_in, c->C_out, c->H, c->W);
      break;
    case LAYER_MAXPOOL:
      maxpool2x2_forward (out, inp, c->N, c->C_in, c->H, c->W);
      break;
    case LAYER_RELU:
      relu_forward (out, inp, layer_sizes (c).n_in);
      break;
    case LAYER_CONCAT:
      concat_forward (out, inp, w, c->N, c->C_in, c->C_out, c->H, c->W);
      break;
    }
}

static void
layer_backward (const LayerCase *c, gboolean naive, float *dinp, float *dw, float *db,
                const float *dout, const float *inp, const float *w, const float *out)
{
  switch (c->kind)
    {
    case LAYER_CONV3:
      (naive ? conv3x3_backward_naive : conv3x3_backward) (dinp, dw, db, dout, inp, w, c->N, c->C_in, c->C_out, c->H, c->W);
      break;
    case LAYER_CONV1:
      (naive ? conv1x1_backward_naive : conv1x1_backward) (dinp, dw, db, dout, inp, w, c->N, c->C_in, c->C_out, c->H, c->W);
      break;
    case LAYER_UPCONV:
      (naive ? upconv2x2_backward_naive : upconv2x2_backward) (dinp, dw, db, dout, inp, w, c->N, c->C_in, c->C_out, c->H, c->W);
      break;
    case LAYER_MAXPOOL:
      maxpool2x2_backward (dinp, dout, inp, c->N, c->C_in, c->H, c->W);
      break;
    case LAYER_RELU:
      relu_backward (dinp, dout, out, layer_sizes (c).n_in);
      break;
    case LAYER_CONCAT:
      concat_backward (dinp, dw, dout, c->N, c->C_in, c->C_out, c->H, c->W);
      break;
    }
}

/* Inputs spread so that finite steps do not cross a kink: for max-pool distinct values 0.01
 * apart (a shuffled ramp), for ReLU values at least 0.05 away from 0. */
static float *
layer_input (const LayerCase *c, gsize n)
{
  float *inp = random_array (n, 1.0);
  if (c->kind == LAYER_MAXPOOL)
    {
      for (gsize i = 0; i < n; i++)
        inp[i] = (float) (0.01 * i);
      for (gsize i = n - 1; i > 0; i--)
        {
          gsize j = (gsize) (rng_uniform () * (i + 1));
          float t = inp[i];
          inp[i] = inp[j], inp[j] = t;
        }
    }
  if (c->kind == LAYER_RELU)
    for (gsize i = 0; i < n; i++)
      inp[i] = inp[i] >= 0 ? inp[i] + 0.05f : inp[i] - 0.05f;
  return inp;
}

/* Central differences of J = Σ r·out with respect to `values` (n of them, a few checked). */
static double
finite_difference_check (const LayerCase *c, float *values, gsize n, const float *analytic,
                         float *inp, float *w, float *b, const float *r, const char *what)
{
  LayerSizes s = layer_sizes (c);
  float *out = g_new (float, s.n_out);
  double eps = c->kind == LAYER_MAXPOOL || c->kind == LAYER_RELU ? 1e-3 : 1e-2;
  double worst = 0.0, scale = 1e-12;
  for (gsize i = 0; i < n; i++)
    scale = fmax (scale, fabs (analytic[i]));
  gsize step = MAX (1, n / 40); /* about 40 entries per tensor */
  for (gsize i = 0; i < n; i += step)
    {
      float saved = values[i];
      values[i] = (float) (saved + eps);
      layer_forward (c, TRUE, out, inp, w, b);
      double plus = dot (out, r, s.n_out);
      values[i] = (float) (saved - eps);
      layer_forward (c, TRUE, out, inp, w, b);
      double minus = dot (out, r, s.n_out);
      values[i] = saved;
      double numeric = (plus - minus) / (2.0 * eps);
      worst = fmax (worst, fabs (numeric - analytic[i]) / scale);
    }
  g_free (out);
  g_test_message ("%s: d%s largest difference to finite differences %.2e (of the largest gradient)",
                  c->path, what, worst);
  return worst;
}

static void
test_layer (gconstpointer data)
{
  const LayerCase *c = data;
  LayerSizes s = layer_sizes (c);
  float *inp = layer_input (c, s.n_in);
  float *w = s.n_w ? random_array (s.n_w, 0.5) : NULL;
  float *b = s.n_b ? random_array (s.n_b, 0.5) : NULL;
  float *r = random_array (s.n_out, 1.0);
  float *out = g_new (float, s.n_out), *out_naive = g_new (float, s.n_out);

  /* optimised forward against the naive one */
  layer_forward (c, FALSE, out, inp, w, b);
  layer_forward (c, TRUE, out_naive, inp, w, b);
  double fwd = relative_diff (out, out_naive, s.n_out);
  g_test_message ("%s: forward, optimised vs naive, largest relative difference %.2e (tolerance 1e-5)",
                  c->path, fwd);
  g_assert_cmpfloat (fwd, <=, 1e-5);

  if (c->kind == LAYER_CONV3) /* the fused convolution + ReLU against naive + ReLU */
    {
      float *fused = g_new (float, s.n_out);
      conv3x3_forward_act (fused, inp, w, b, c->N, c->C_in, c->C_out, c->H, c->W, TRUE);
      relu_forward (out, out_naive, s.n_out);
      double d = relative_diff (fused, out, s.n_out);
      g_test_message ("%s: fused convolution + ReLU vs naive, largest relative difference %.2e "
                      "(tolerance 1e-5)", c->path, d);
      g_assert_cmpfloat (d, <=, 1e-5);
      for (int path = 0; path < 2; path++) /* both implementations, with and without ReLU */
        for (int act = 0; act < 2; act++)
          {
            if (path == 1 && !conv3x3_direct_available ())
              {
                g_test_message ("%s: no AVX-512 here, direct kernel not checked", c->path);
                continue;
              }
            (path == 0 ? conv3x3_forward_gemm : conv3x3_forward_direct) (fused, inp, w, b, c->N,
                                                                         c->C_in, c->C_out, c->H,
                                                                         c->W, act);
            d = relative_diff (fused, act ? out : out_naive, s.n_out);
            g_test_message ("%s: %s%s vs naive, largest relative difference %.2e (tolerance 1e-5)",
                            c->path, path == 0 ? "im2col + GEMM" : "direct kernel",
                            act ? " + ReLU" : "", d);
            g_assert_cmpfloat (d, <=, 1e-5);
          }
      if (conv3x3_direct_available ())
        {
          float *dx = g_new0 (float, s.n_in), *dx_naive = g_new0 (float, s.n_in);
          float *dw_naive = g_new0 (float, s.n_w), *db_naive = g_new0 (float, s.n_b);
          for (int k = 0; k < 2; k++) /* twice: it accumulates */
            {
              conv3x3_backward_input_direct (dx, r, w, c->N, c->C_in, c->C_out, c->H, c->W);
              conv3x3_backward_naive (dx_naive, dw_naive, db_naive, r, inp, w, c->N, c->C_in,
                                      c->C_out, c->H, c->W);
            }
          d = relative_diff (dx, dx_naive, s.n_in);
          g_test_message ("%s: input gradient by the direct kernel vs naive, largest relative "
                          "difference %.2e (tolerance 1e-5)", c->path, d);
          g_assert_cmpfloat (d, <=, 1e-5);
          g_free (dx), g_free (dx_naive), g_free (dw_naive), g_free (db_naive);
        }
      g_free (fused);
    }

  /* backward: optimised against naive, naive against finite differences; and it accumulates */
  float *dinp[2], *dw[2], *db[2];
  for (int k = 0; k < 2; k++)
    {
      dinp[k] = g_new0 (float, s.n_in);
      dw[k] = s.n_w ? g_new0 (float, s.n_w) : NULL;
      db[k] = s.n_b ? g_new0 (float, s.n_b) : NULL;
      layer_backward (c, k == 0, dinp[k], dw[k], db[k], r, inp, w, out_naive);
    }
  double bwd = relative_diff (dinp[1], dinp[0], s.n_in);
  if (s.n_w)
    bwd = fmax (bwd, relative_diff (dw[1], dw[0], s.n_w));
  if (s.n_b)
    bwd = fmax (bwd, relative_diff (db[1], db[0], s.n_b));
  g_test_message ("%s: backward, optimised vs naive, largest relative difference %.2e (tolerance 1e-5)",
                  c->path, bwd);
  g_assert_cmpfloat (bwd, <=, 1e-5);

  float *again = g_memdup2 (dinp[1], sizeof (float) * s.n_in);
  layer_backward (c, FALSE, again, dw[1], db[1], r, inp, w, out_naive);
  for (gsize i = 0; i < s.n_in; i++)
    g_assert_cmpfloat (fabs (again[i] - 2.0f * dinp[1][i]), <=, 1e-5 * (1.0 + fabs (dinp[1][i])));
  g_free (again);

  g_assert_cmpfloat (finite_difference_check (c, inp, s.n_in, dinp[0], inp, w, b, r, "input"), <=, 1e-3);
  if (s.n_w)
    g_assert_cmpfloat (finite_difference_check (c, w, s.n_w, dw[0], inp, w, b, r, "weight"), <=, 1e-3);
  if (s.n_b)
    g_assert_cmpfloat (finite_difference_check (c, b, s.n_b, db[0], inp, w, b, r, "bias"), <=, 1e-3);

  for (int k = 0; k < 2; k++)
    g_free (dinp[k]), g_free (dw[k]), g_free (db[k]);
  g_free (inp), g_free (w), g_free (b), g_free (r), g_free (out), g_free (out_naive);
}

static const LayerCase layer_cases[] = {
  { "/nn/layers/conv3x3/small", LAYER_CONV3, 2, 3, 4, 5, 6, FALSE },
  { "/nn/layers/conv3x3/one-row", LAYER_CONV3, 1, 2, 3, 1, 7, FALSE },
  { "/nn/layers/conv3x3/wide-bands", LAYER_CONV3, 1, 4, 5, 9, 1100, FALSE }, /* several row bands */
  { "/nn/layers/conv3x3/channel-blocks", LAYER_CONV3, 2, 20, 17, 13, 45, FALSE }, /* 3 blocks of 8, a partial pixel block */
  { "/nn/layers/conv3x3/one-column", LAYER_CONV3, 1, 3, 9, 6, 1, FALSE },
  /* rows of whole 16-float vectors and channels in whole blocks of 8, as at every U-Net level
   * of a 64×64 patch: the direct kernels' in-place and two-rows-per-block paths */
  { "/nn/layers/conv3x3/whole-vectors-16", LAYER_CONV3, 2, 8, 16, 16, 16, FALSE },
  { "/nn/layers/conv3x3/whole-vectors-32", LAYER_CONV3, 1, 32, 8, 6, 32, FALSE },
  { "/nn/layers/conv3x3/whole-vectors-64", LAYER_CONV3, 2, 1, 16, 8, 64, FALSE },
  { "/nn/layers/conv1x1/small", LAYER_CONV1, 2, 5, 3, 4, 6, FALSE },
  { "/nn/layers/upconv2x2/small", LAYER_UPCONV, 2, 4, 3, 3, 5, FALSE },
  { "/nn/layers/upconv2x2/wide-bands", LAYER_UPCONV, 1, 3, 2, 5, 2000, FALSE },
  { "/nn/layers/maxpool2x2/small", LAYER_MAXPOOL, 2, 3, 0, 6, 8, FALSE },
  { "/nn/layers/maxpool2x2/whole-vectors", LAYER_MAXPOOL, 1, 4, 0, 8, 34, FALSE },
  { "/nn/layers/relu/small", LAYER_RELU, 1, 4, 0, 5, 5, FALSE },
  { "/nn/layers/concat/small", LAYER_CONCAT, 2, 3, 2, 4, 5, FALSE },
};

/* ---- loss ---- */

static void
test_loss_gradient (void)
{
  const gsize n = 200;
  float *logits = random_array (n, 3.0), *target = g_new (float, n), *mask = g_new (float, n);
  for (gsize i = 0; i < n; i++)
    {
      target[i] = rng_uniform () < 0.3 ? 1.0f : 0.0f;
      mask[i] = rng_uniform () < 0.8 ? 1.0f : 0.0f;
    }
  float *d = g_new (float, n), *scratch = g_new (float, n);
  double loss = rete_loss_bce_dice (logits, target, mask, n, 0.5, d);
  g_assert_true (isfinite (loss) && loss > 0.0);
  double worst = 0.0, scale = 1e-12, eps = 1e-3;
  for (gsize i = 0; i < n; i++)
    scale = fmax (scale, fabs (d[i]));
  for (gsize i = 0; i < n; i++)
    {
      float saved = logits[i];
      logits[i] = (float) (saved + eps);
      double plus = rete_loss_bce_dice (logits, target, mask, n, 0.5, scratch);
      logits[i] = (float) (saved - eps);
      double minus = rete_loss_bce_dice (logits, target, mask, n, 0.5, scratch);
      logits[i] = saved;
      worst = fmax (worst, fabs ((plus - minus) / (2 * eps) - d[i]) / scale);
      if (mask[i] == 0.0f)
        g_assert_cmpfloat (d[i], ==, 0.0f);
    }
  g_test_message ("loss: largest difference of d loss/d logit to finite differences %.2e "
                  "(tolerance 1e-3 of the largest)", worst);
  g_assert_cmpfloat (worst, <=, 1e-3);
  /* an empty mask gives 0 and no gradient */
  memset (mask, 0, sizeof (float) * n);
  g_assert_cmpfloat (rete_loss_bce_dice (logits, target, mask, n, 0.5, d), ==, 0.0);
  for (gsize i = 0; i < n; i++)
    g_assert_cmpfloat (d[i], ==, 0.0f);
  g_free (logits), g_free (target), g_free (mask), g_free (d), g_free (scratch);
}

/* ---- the whole U-Net ---- */

static ReteUnet *
make_net (int levels, int filters, int convs, gboolean relu, int in_channels, guint64 seed)
{
  ReteUnetConfig cf = { levels, filters, convs, relu, in_channels };
  GError *error = NULL;
  ReteUnet *net = rete_unet_new (&cf, seed, &error);
  g_assert_no_error (error);
  return net;
}

typedef struct {
  const char *path;
  int levels, filters, convs;
  gboolean relu;
  int in_channels, n, side;
} UnetCase;

static double
net_loss (ReteUnet *net, const float *x, const UnetCase *c, const float *target, float *logits,
          float *dlogits)
{
  g_assert_true (rete_unet_forward (net, x, c->n, c->side, c->side, logits, NULL));
  return rete_loss_bce_dice (logits, target, NULL, (gsize) c->n * c->side * c->side, 0.5, dlogits);
}

static void
test_unet_gradient (gconstpointer data)
{
  const UnetCase *c = data;
  ReteUnet *net = make_net (c->levels, c->filters, c->convs, c->relu, c->in_channels, 7);
  /* biases away from zero so that every path carries signal */
  float *p = rete_unet_params (net);
  for (int t = 0; t < rete_unet_n_tensors (net); t++)
    {
      gsize off;
      int shape[4], nd;
      rete_unet_tensor_name (net, t, &off, shape, &nd);
      if (nd == 1)
        for (int k = 0; k < shape[0]; k++)
          p[off + k] = (float) (0.1 * (rng_uniform () - 0.3));
    }
  gsize n_px = (gsize) c->n * c->side * c->side;
  float *x = random_array (n_px * c->in_channels, 1.0), *target = g_new (float, n_px);
  for (gsize i = 0; i < n_px; i++)
    target[i] = rng_uniform () < 0.3;
  float *logits = g_new (float, n_px), *dlogits = g_new (float, n_px);
  net_loss (net, x, c, target, logits, dlogits);
  rete_unet_zero_grad (net);
  g_assert_true (rete_unet_backward (net, dlogits, NULL));
  float *grads = g_memdup2 (rete_unet_grads (net), sizeof (float) * rete_unet_n_params (net));
  /* Max-pool and ReLU are not differentiable everywhere: a finite step can cross a kink (an
   * arg-max that changes). Each entry is checked with two steps and the closer estimate is
   * kept; a real error in the analytic gradient shows in both. */
  static const double steps[] = { 1e-3, 3e-4 };
  double worst = 0.0, global = 0.0;
  int n_checked = 0, n_off = 0;
  for (gsize i = 0; i < rete_unet_n_params (net); i++)
    global = fmax (global, fabs (grads[i]));
  for (int t = 0; t < rete_unet_n_tensors (net); t++)
    {
      gsize off;
      int shape[4], nd;
      const char *name = rete_unet_tensor_name (net, t, &off, shape, &nd);
      gsize size = 1;
      for (int d = 0; d < nd; d++)
        size *= shape[d];
      /* relative to the tensor's largest gradient, with a floor of 1% of the net's largest:
       * below that, float32 rounding of the loss dominates the finite differences */
      double scale = 1e-2 * global + 1e-12, tensor_worst = 0.0;
      for (gsize k = 0; k < size; k++)
        scale = fmax (scale, fabs (grads[off + k]));
      for (gsize k = 0; k < size; k += MAX (1, size / 6))
        {
          double best = G_MAXDOUBLE;
          for (gsize e = 0; e < G_N_ELEMENTS (steps); e++)
            {
              float saved = p[off + k];
              p[off + k] = (float) (saved + steps[e]);
              double plus = net_loss (net, x, c, target, logits, NULL);
              p[off + k] = (float) (saved - steps[e]);
              double minus = net_loss (net, x, c, target, logits, NULL);
              p[off + k] = saved;
              double numeric = (plus - minus) / ((double) (float) (saved + steps[e])
                                                 - (double) (float) (saved - steps[e]));
              best = fmin (best, fabs (numeric - grads[off + k]) / scale);
            }
          tensor_worst = fmax (tensor_worst, best);
          n_checked++;
          n_off += best > 5e-3;
        }
      g_test_message ("%s %-18s largest difference to finite differences %.2e", c->path, name,
                      tensor_worst);
      worst = fmax (worst, tensor_worst);
    }
  /* Tolerance 5e-3 (float32 forward, steps of 1e-3). In a ReLU net a bias moves many units
   * across their kink at once, so a few entries may disagree for that reason alone: up to 10 %
   * are allowed there (the exact check of ReLU nets is against PyTorch autograd, in
   * test_nn_torch.c); none in the identity net. */
  g_test_message ("%s: largest difference to finite differences %.2e of the tensor's largest "
                  "gradient; %d of %d entries beyond 5e-3", c->path, worst, n_off, n_checked);
  g_assert_cmpint (n_off, <=, c->relu ? n_checked / 10 : 0);
  /* backward accumulates */
  g_assert_true (rete_unet_backward (net, dlogits, NULL));
  float *g2 = rete_unet_grads (net);
  for (gsize i = 0; i < rete_unet_n_params (net); i++)
    g_assert_cmpfloat (fabs (g2[i] - 2 * grads[i]), <=, 1e-5 * (1 + fabs (grads[i])));
  g_free (x), g_free (target), g_free (logits), g_free (dlogits), g_free (grads);
  rete_unet_free (net);
}

static const UnetCase unet_cases[] = {
  { "/nn/unet/gradient/identity-3-levels", 3, 2, 2, FALSE, 1, 2, 8 },
  { "/nn/unet/gradient/relu-3-levels", 3, 3, 2, TRUE, 1, 2, 8 },
  { "/nn/unet/gradient/relu-2-levels-1-conv-rgb", 2, 2, 1, TRUE, 3, 3, 6 },
  { "/nn/unet/gradient/relu-1-level", 1, 3, 2, TRUE, 1, 1, 5 },
};

static void
test_unet_deterministic (void)
{
  ReteUnet *a = make_net (3, 16, 2, TRUE, 1, 42), *b = make_net (3, 16, 2, TRUE, 1, 42);
  ReteUnet *c = make_net (3, 16, 2, TRUE, 1, 43);
  gsize n = rete_unet_n_params (a);
  g_assert_cmpmem (rete_unet_params (a), n * 4, rete_unet_params (b), n * 4);
  g_assert_true (memcmp (rete_unet_params (a), rete_unet_params (c), n * 4) != 0);
  /* He initialisation: the first conv's weights have std sqrt(2 / 9) */
  gsize off;
  int shape[4];
  rete_unet_tensor_name (a, rete_unet_find_tensor (a, "enc1.conv1.weight"), &off, shape, NULL);
  gsize size = (gsize) shape[0] * shape[1] * 9;
  double s2 = 0;
  for (gsize i = 0; i < size; i++)
    s2 += rete_unet_params (a)[off + i] * (double) rete_unet_params (a)[off + i];
  double std = sqrt (s2 / size), want = sqrt (2.0 / (shape[1] * 9));
  g_test_message ("enc1.conv1 weight std %.4f, He %.4f (tolerance 5%%)", std, want);
  g_assert_cmpfloat (fabs (std / want - 1), <=, 0.05);
  rete_unet_free (a), rete_unet_free (b), rete_unet_free (c);
}

static void
test_unet_bad_arguments (void)
{
  static const ReteUnetConfig bad[] = {
    { 0, 16, 2, TRUE, 1 }, { 6, 16, 2, TRUE, 1 }, { 3, 0, 2, TRUE, 1 }, { 3, 65, 2, TRUE, 1 },
    { 3, 16, 3, TRUE, 1 }, { 3, 16, 2, TRUE, 2 },
  };
  for (gsize i = 0; i < G_N_ELEMENTS (bad); i++)
    {
      GError *error = NULL;
      g_assert_null (rete_unet_new (&bad[i], 1, &error));
      g_assert_error (error, RETE_NN_ERROR, RETE_ERROR_INVALID_ARGUMENT);
      g_test_message ("%s", error->message);
      g_clear_error (&error);
    }
  ReteUnet *net = make_net (3, 4, 2, TRUE, 1, 1);
  float x[6 * 6] = { 0 }, y[6 * 6];
  GError *error = NULL;
  g_assert_false (rete_unet_forward (net, x, 1, 6, 6, y, &error)); /* not a multiple of 4 */
  g_assert_error (error, RETE_NN_ERROR, RETE_ERROR_INVALID_ARGUMENT);
  g_test_message ("%s", error->message);
  g_clear_error (&error);
  g_assert_false (rete_unet_backward (net, y, &error)); /* no forward */
  g_assert_error (error, RETE_NN_ERROR, RETE_ERROR_INVALID_ARGUMENT);
  g_clear_error (&error);
  rete_unet_free (net);
}

/* ---- tiled inference ---- */

typedef struct {
  const char *path;
  int levels, filters, convs, in_channels, width, height, tile;
} TileCase;

static void
test_tiled_matches_untiled (gconstpointer data)
{
  const TileCase *c = data;
  ReteModel *model = rete_model_new (make_net (c->levels, c->filters, c->convs, TRUE, c->in_channels, 3));
  gsize n_px = (gsize) c->width * c->height;
  float *x = random_array (n_px * c->in_channels, 1.5);
  float *tiled = g_new (float, n_px), *whole = g_new (float, n_px);
  GError *error = NULL;
  rete_model_set_tile_size (model, c->tile);
  g_assert_true (rete_model_infer (model, x, c->in_channels, c->height, c->width, tiled, NULL, NULL, &error));
  g_assert_no_error (error);
  g_assert_true (rete_model_infer_untiled (model, x, c->in_channels, c->height, c->width, whole, &error));
  g_assert_no_error (error);
  gsize where = 0;
  double diff = rete_test_max_abs_diff (tiled, whole, n_px, &where);
  g_test_message ("%s: halo %d, tile %d: largest |tiled - untiled| %.2e at x %zu y %zu (tolerance 1e-5)",
                  c->path, rete_unet_halo (rete_unet_config (rete_model_net (model))), c->tile, diff,
                  where % c->width, where / c->width);
  g_assert_cmpfloat (diff, <=, 1e-5);
  for (gsize i = 0; i < n_px; i++)
    g_assert_true (tiled[i] >= 0.0f && tiled[i] <= 1.0f);
  g_free (x), g_free (tiled), g_free (whole);
  rete_model_free (model);
}

static const TileCase tile_cases[] = {
  { "/nn/infer/tiled-matches-untiled/standard", 3, 16, 2, 1, 301, 217, 64 },
  { "/nn/infer/tiled-matches-untiled/standard-default-tile", 3, 16, 2, 1, 700, 530, 0 },
  { "/nn/infer/tiled-matches-untiled/4-levels-1-conv-rgb", 4, 4, 1, 3, 150, 97, 40 },
  { "/nn/infer/tiled-matches-untiled/5-levels", 5, 2, 2, 1, 129, 260, 48 },
  { "/nn/infer/tiled-matches-untiled/1-level", 1, 4, 2, 1, 45, 33, 8 },
  { "/nn/infer/tiled-matches-untiled/one-pixel", 3, 4, 2, 1, 1, 1, 0 },
  { "/nn/infer/tiled-matches-untiled/one-row", 3, 4, 2, 1, 77, 1, 16 },
};

/* The checker can fail: a window with less border than the halo does not give the untiled
 * values in its core, one with the halo does. Windows are cut by hand here and run untiled. */
static void
test_halo_is_needed (void)
{
  ReteModel *model = rete_model_new (make_net (3, 16, 2, TRUE, 1, 3));
  const int W = 160, H = 160, core0 = 64, core1 = 96; /* core [64, 96)² */
  int halo = rete_unet_halo (rete_unet_config (rete_model_net (model)));
  float *x = random_array ((gsize) W * H, 1.5), *whole = g_new (float, (gsize) W * H);
  g_assert_true (rete_model_infer_untiled (model, x, 1, H, W, whole, NULL));
  for (int border = halo; border >= halo - 8; border -= 4)
    {
      int w0 = core0 - border, side = core1 - core0 + 2 * border;
      float *win = g_new (float, (gsize) side * side), *p = g_new (float, (gsize) side * side);
      for (int y = 0; y < side; y++)
        memcpy (win + (gsize) y * side, x + (gsize) (w0 + y) * W + w0, sizeof (float) * side);
      g_assert_true (rete_model_infer_untiled (model, win, 1, side, side, p, NULL));
      double diff = 0;
      for (int y = core0; y < core1; y++)
        for (int xx = core0; xx < core1; xx++)
          diff = fmax (diff, fabs (p[(gsize) (y - w0) * side + xx - w0] - whole[(gsize) y * W + xx]));
      g_test_message ("border %d (halo %d): largest difference in the core %.2e", border, halo, diff);
      if (border == halo)
        g_assert_cmpfloat (diff, <=, 1e-5);
      else
        g_assert_cmpfloat (diff, >, 1e-5);
      g_free (win), g_free (p);
    }
  g_free (x), g_free (whole);
  rete_model_free (model);
}

static gboolean
cancel_at_half (double fraction, const char *message, gpointer data)
{
  *(int *) data += 1;
  return fraction < 0.5;
}

static void
test_infer_bad_input (void)
{
  ReteModel *model = rete_model_new (make_net (2, 4, 1, TRUE, 1, 3));
  rete_model_set_tile_size (model, 16);
  float *x = random_array (50 * 40, 1.0), *y = g_new (float, 50 * 40);
  for (int i = 0; i < 50 * 40; i++)
    y[i] = -7.0f;
  GError *error = NULL;
  g_assert_false (rete_model_infer (model, x, 3, 40, 50, y, NULL, NULL, &error));
  g_assert_error (error, RETE_NN_ERROR, RETE_ERROR_INVALID_ARGUMENT);
  g_test_message ("%s", error->message);
  g_clear_error (&error);
  x[77] = NAN;
  g_assert_false (rete_model_infer (model, x, 1, 40, 50, y, NULL, NULL, &error));
  g_assert_error (error, RETE_NN_ERROR, RETE_ERROR_NOT_FINITE);
  g_test_message ("%s", error->message);
  g_clear_error (&error);
  x[77] = 0.0f;
  int calls = 0;
  g_assert_false (rete_model_infer (model, x, 1, 40, 50, y, cancel_at_half, &calls, &error));
  g_assert_error (error, RETE_NN_ERROR, RETE_ERROR_CANCELLED);
  g_clear_error (&error);
  g_assert_cmpint (calls, >=, 1);
  for (int i = 0; i < 50 * 40; i++)
    g_assert_cmpfloat (y[i], ==, -7.0f); /* untouched */
  g_free (x), g_free (y);
  rete_model_free (model);
}

/* ---- the model file ---- */

static void
test_model_round_trip (void)
{
  ReteModel *model = rete_model_new (make_net (3, 4, 2, TRUE, 3, 11));
  rete_model_set_meta (model, "channel", "green");
  rete_model_set_meta (model, "licence", "CC BY 4.0 \"quoted\" ünïcode");
  g_autofree char *path = rete_test_tmp_path ("round-trip.safetensors");
  GError *error = NULL;
  g_assert_true (rete_model_save (model, path, &error));
  g_assert_no_error (error);
  ReteModel *back = rete_model_load (path, &error);
  g_assert_no_error (error);
  ReteUnet *a = rete_model_net (model), *b = rete_model_net (back);
  g_assert_cmpint (rete_unet_n_params (a), ==, rete_unet_n_params (b));
  g_assert_cmpmem (rete_unet_params (a), rete_unet_n_params (a) * 4, rete_unet_params (b),
                   rete_unet_n_params (b) * 4);
  g_assert_cmpstr (rete_model_get_meta (back, "licence"), ==, "CC BY 4.0 \"quoted\" ünïcode");
  g_assert_cmpstr (rete_model_get_meta (back, "levels"), ==, "3");
  g_assert_cmpstr (rete_model_get_meta (back, "activation"), ==, "relu");
  g_assert_cmpstr (rete_model_get_meta (back, "format_version"), ==, RETE_MODEL_FORMAT_VERSION);
  g_assert_cmpint (rete_unet_config (b)->in_channels, ==, 3);
  rete_model_free (model);
  rete_model_free (back);
}

/* Bad files are made from a good one: the header is rewritten by a text substitution, or the
 * bytes are cut or patched. */
typedef struct {
  const char *path;
  const char *find;      /* in the JSON header, replaced by `replace` (NULL: no edit) */
  const char *replace;
  gssize truncate_to;    /* >= 0: keep this many bytes */
  gint64 header_length;  /* != 0: write this header length */
  gboolean poison_nan;   /* put a NaN in the last float */
  int code;
} BadFileCase;

static GBytes *
good_file (void)
{
  ReteModel *model = rete_model_new (make_net (2, 2, 1, TRUE, 1, 5));
  rete_model_set_meta (model, "note", "a");
  g_autofree char *path = rete_test_tmp_path ("good.safetensors");
  g_assert_true (rete_model_save (model, path, NULL));
  rete_model_free (model);
  char *contents;
  gsize length;
  g_assert_true (g_file_get_contents (path, &contents, &length, NULL));
  return g_bytes_new_take (contents, length);
}

static void
test_bad_file (gconstpointer data)
{
  const BadFileCase *c = data;
  g_autoptr (GBytes) good = good_file ();
  gsize size;
  const guint8 *bytes = g_bytes_get_data (good, &size);
  guint64 header_length;
  memcpy (&header_length, bytes, 8);
  header_length = GUINT64_FROM_LE (header_length);
  GByteArray *file = g_byte_array_new ();
  g_autofree char *header = g_strndup ((const char *) bytes + 8, header_length);
  if (c->find != NULL)
    {
      g_assert_nonnull (strstr (header, c->find));
      g_auto (GStrv) parts = g_strsplit (header, c->find, 2);
      g_autofree char *edited = g_strconcat (parts[0], c->replace, parts[1], NULL);
      g_free (header);
      header = g_steal_pointer (&edited);
    }
  guint64 n = GUINT64_TO_LE (c->header_length != 0 ? (guint64) c->header_length : strlen (header));
  g_byte_array_append (file, (const guint8 *) &n, 8);
  g_byte_array_append (file, (const guint8 *) header, strlen (header));
  g_byte_array_append (file, bytes + 8 + header_length, size - 8 - header_length);
  if (c->poison_nan)
    {
      float nan = NAN;
      memcpy (file->data + file->len - 4, &nan, 4);
    }
  if (c->truncate_to >= 0)
    g_byte_array_set_size (file, MIN ((guint) c->truncate_to, file->len));
  if (c->truncate_to == -2) /* cut the last tensor */
    g_byte_array_set_size (file, file->len - 2);
  GError *error = NULL;
  ReteModel *model = rete_model_load_from_data (file->data, file->len, "bad.safetensors", &error);
  g_assert_null (model);
  g_assert_error (error, RETE_NN_ERROR, c->code);
  g_test_message ("%s: %s", c->path, error->message);
  g_error_free (error);
  g_byte_array_unref (file);
}

#define NO_EDIT NULL, NULL
static const BadFileCase bad_files[] = {
  { "/nn/model/bad/empty", NO_EDIT, 0, 0, FALSE, RETE_ERROR_FORMAT },
  { "/nn/model/bad/seven-bytes", NO_EDIT, 7, 0, FALSE, RETE_ERROR_FORMAT },
  { "/nn/model/bad/header-only-half", NO_EDIT, 40, 0, FALSE, RETE_ERROR_FORMAT },
  { "/nn/model/bad/absurd-header-length", NO_EDIT, -1, G_GINT64_CONSTANT (1) << 62, FALSE, RETE_ERROR_FORMAT },
  { "/nn/model/bad/header-longer-than-file", NO_EDIT, -1, 1 << 20, FALSE, RETE_ERROR_FORMAT },
  { "/nn/model/bad/not-json", "{", "[", -1, 0, FALSE, RETE_ERROR_FORMAT },
  { "/nn/model/bad/no-metadata", "__metadata__", "__other__", -1, 0, FALSE, RETE_ERROR_FORMAT },
  { "/nn/model/bad/unknown-version", "\"format_version\":\"1\"", "\"format_version\":\"9\"", -1, 0, FALSE, RETE_ERROR_FORMAT },
  { "/nn/model/bad/no-version", "\"format_version\":\"1\"", "\"format_versio\":\"1\"", -1, 0, FALSE, RETE_ERROR_FORMAT },
  { "/nn/model/bad/levels-not-number", "\"levels\":\"2\"", "\"levels\":\"two\"", -1, 0, FALSE, RETE_ERROR_FORMAT },
  { "/nn/model/bad/levels-out-of-range", "\"levels\":\"2\"", "\"levels\":\"9\"", -1, 0, FALSE, RETE_ERROR_FORMAT },
  { "/nn/model/bad/architecture-disagrees", "\"base_filters\":\"2\"", "\"base_filters\":\"3\"", -1, 0, FALSE, RETE_ERROR_FORMAT },
  { "/nn/model/bad/unknown-activation", "\"activation\":\"relu\"", "\"activation\":\"tanh\"", -1, 0, FALSE, RETE_ERROR_FORMAT },
  { "/nn/model/bad/metadata-not-string", "\"note\":\"a\"", "\"note\":1", -1, 0, FALSE, RETE_ERROR_FORMAT },
  { "/nn/model/bad/dtype-f16", "\"dtype\":\"F32\"", "\"dtype\":\"F16\"", -1, 0, FALSE, RETE_ERROR_FORMAT },
  { "/nn/model/bad/wrong-shape", "\"shape\":[2,1,3,3]", "\"shape\":[2,1,3,2]", -1, 0, FALSE, RETE_ERROR_FORMAT },
  { "/nn/model/bad/unknown-tensor", "\"head.bias\"", "\"tail.bias\"", -1, 0, FALSE, RETE_ERROR_FORMAT },
  { "/nn/model/bad/missing-offsets", "\"data_offsets\"", "\"data_offset\"", -1, 0, FALSE, RETE_ERROR_FORMAT },
  { "/nn/model/bad/offsets-wrong-size", "\"data_offsets\":[0,72]", "\"data_offsets\":[0,68]", -1, 0, FALSE, RETE_ERROR_FORMAT },
  { "/nn/model/bad/offsets-past-end", "\"data_offsets\":[0,72]", "\"data_offsets\":[100000,100072]", -1, 0, FALSE, RETE_ERROR_FORMAT },
  { "/nn/model/bad/truncated-data", NO_EDIT, -2, 0, FALSE, RETE_ERROR_FORMAT },
  { "/nn/model/bad/nan-weight", NO_EDIT, -1, 0, TRUE, RETE_ERROR_FORMAT },
};

static void
test_bad_file_missing (void)
{
  GError *error = NULL;
  g_assert_null (rete_model_load ("/nonexistent/folder/model.safetensors", &error));
  g_assert_error (error, RETE_NN_ERROR, RETE_ERROR_IO);
  g_test_message ("%s", error->message);
  g_error_free (error);
}

static void
test_bad_file_huge (void)
{
  /* a sparse file of 600 MB: refused by its size before anything is read */
  g_autofree char *path = rete_test_tmp_path ("huge.safetensors");
  FILE *f = fopen (path, "wb");
  g_assert_nonnull (f);
  g_assert_cmpint (fseeko (f, (off_t) 600 << 20, SEEK_SET), ==, 0);
  fputc (0, f);
  fclose (f);
  GError *error = NULL;
  g_assert_null (rete_model_load (path, &error));
  g_assert_error (error, RETE_NN_ERROR, RETE_ERROR_FORMAT);
  g_test_message ("%s", error->message);
  g_error_free (error);
  g_unlink (path);
}

static void
test_save_unwritable (void)
{
  ReteModel *model = rete_model_new (make_net (1, 1, 1, TRUE, 1, 5));
  GError *error = NULL;
  g_assert_false (rete_model_save (model, "/nonexistent/folder/model.safetensors", &error));
  g_assert_error (error, RETE_NN_ERROR, RETE_ERROR_IO);
  g_test_message ("%s", error->message);
  g_error_free (error);
  rete_model_free (model);
}

/* ---- the learned vessel map (vessel/learned.c) ---- */

static ReteImage *
random_photo (int width, int height, ReteImage **fov)
{
  ReteImage *photo = rete_image_new (width, height, 3, NULL);
  *fov = rete_image_new (width, height, 1, NULL);
  for (int y = 0; y < height; y++)
    for (int x = 0; x < width; x++)
      {
        double dx = x - width / 2.0, dy = y - height / 2.0;
        gboolean inside = dx * dx + dy * dy < 0.2 * width * width;
        (*fov)->data[y * width + x] = inside;
        for (int c = 0; c < 3; c++)
          photo->data[((gsize) c * height + y) * width + x] = inside ? (float) (0.2 + 0.6 * rng_uniform ()) : 0.0f;
      }
  return photo;
}

static void
test_learned_map (void)
{
  ReteImage *fov = NULL;
  ReteImage *photo = random_photo (83, 61, &fov);
  ReteModel *model = rete_model_new (make_net (3, 4, 2, TRUE, 1, 21));
  ReteLearnedPreprocess pre;
  rete_learned_preprocess_init (&pre);
  pre.clahe.clip_limit = 0.02;
  rete_learned_preprocess_to_model (&pre, model);
  GError *error = NULL;
  ReteImage *map = rete_vessel_learned (photo, fov, model, NULL, NULL, &error);
  g_assert_no_error (error);
  /* the same as preparing the input and running the network by hand */
  float *input = NULL;
  g_assert_true (rete_learned_prepare_input (photo, fov, model, &input, &error));
  float *prob = g_new (float, 83 * 61);
  g_assert_true (rete_model_infer_untiled (model, input, 1, 61, 83, prob, &error));
  double mean = 0, var = 0, n_in = 0;
  for (int i = 0; i < 83 * 61; i++)
    {
      if (fov->data[i] == 0.0f)
        {
          g_assert_cmpfloat (map->data[i], ==, 0.0f);
          g_assert_cmpfloat (input[i], ==, 0.0f);
          continue;
        }
      g_assert_cmpfloat (fabs (map->data[i] - prob[i]), <=, 1e-6);
      mean += input[i], var += input[i] * (double) input[i], n_in += 1;
    }
  mean /= n_in;
  var = var / n_in - mean * mean;
  g_test_message ("network input inside the FOV: mean %.2e, variance %.4f (standardised: 0 and 1)", mean, var);
  g_assert_cmpfloat (fabs (mean), <=, 1e-4);
  g_assert_cmpfloat (fabs (var - 1), <=, 1e-3);
  g_free (input), g_free (prob);
  rete_image_free (map);

  /* metadata a user could have broken by hand */
  static const char *bad[][2] = { { "channel", "purple" }, { "clahe", "yes" },
                                  { "clahe_clip_limit", "2" }, { "clahe_bins", "1" },
                                  { "normalisation", "z" } };
  for (gsize i = 0; i < G_N_ELEMENTS (bad); i++)
    {
      const char *saved = NULL;
      g_autofree char *keep = g_strdup (rete_model_get_meta (model, bad[i][0]));
      saved = keep;
      rete_model_set_meta (model, bad[i][0], bad[i][1]);
      g_assert_null (rete_vessel_learned (photo, fov, model, NULL, NULL, &error));
      g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_FORMAT);
      g_test_message ("%s", error->message);
      g_clear_error (&error);
      rete_model_set_meta (model, bad[i][0], saved);
    }
  /* a field of view of another size */
  ReteImage *small = rete_image_new (40, 61, 1, NULL);
  g_assert_null (rete_vessel_learned (photo, small, model, NULL, NULL, &error));
  g_assert_error (error, RETE_VESSEL_ERROR, RETE_ERROR_SIZE_MISMATCH);
  g_test_message ("%s", error->message);
  g_clear_error (&error);
  rete_image_free (small);
  rete_image_free (photo), rete_image_free (fov);
  rete_model_free (model);
}

static void
test_learned_rgb_model (void)
{
  ReteImage *fov = NULL;
  ReteImage *photo = random_photo (50, 40, &fov);
  ReteModel *model = rete_model_new (make_net (2, 4, 1, TRUE, 3, 22));
  GError *error = NULL;
  float *input = NULL;
  g_assert_true (rete_learned_prepare_input (photo, NULL, model, &input, &error));
  g_assert_no_error (error);
  g_free (input);
  ReteImage *map = rete_vessel_learned (photo, fov, model, NULL, NULL, &error);
  g_assert_no_error (error);
  g_assert_nonnull (map);
  rete_image_free (map), rete_image_free (photo), rete_image_free (fov);
  rete_model_free (model);
}

int
main (int argc, char **argv)
{
  g_test_init (&argc, &argv, NULL);
  for (gsize i = 0; i < G_N_ELEMENTS (layer_cases); i++)
    g_test_add_data_func (layer_cases[i].path, &layer_cases[i], test_layer);
  g_test_add_func ("/nn/loss/bce-dice/gradient", test_loss_gradient);
  for (gsize i = 0; i < G_N_ELEMENTS (unet_cases); i++)
    g_test_add_data_func (unet_cases[i].path, &unet_cases[i], test_unet_gradient);
  g_test_add_func ("/nn/unet/deterministic-he-init", test_unet_deterministic);
  g_test_add_func ("/nn/unet/bad-arguments", test_unet_bad_arguments);
  for (gsize i = 0; i < G_N_ELEMENTS (tile_cases); i++)
    g_test_add_data_func (tile_cases[i].path, &tile_cases[i], test_tiled_matches_untiled);
  g_test_add_func ("/nn/infer/halo-is-needed", test_halo_is_needed);
  g_test_add_func ("/nn/infer/bad-input-and-cancel", test_infer_bad_input);
  g_test_add_func ("/nn/model/round-trip", test_model_round_trip);
  for (gsize i = 0; i < G_N_ELEMENTS (bad_files); i++)
    g_test_add_data_func (bad_files[i].path, &bad_files[i], test_bad_file);
  g_test_add_func ("/nn/model/bad/missing-file", test_bad_file_missing);
  g_test_add_func ("/nn/model/bad/huge-file", test_bad_file_huge);
  g_test_add_func ("/nn/model/bad/unwritable-folder", test_save_unwritable);
  g_test_add_func ("/nn/learned/map-matches-network-and-fov", test_learned_map);
  g_test_add_func ("/nn/learned/rgb-model", test_learned_rgb_model);
  return g_test_run ();
}
