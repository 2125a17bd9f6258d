/* test_nn_torch.c — the network engine against PyTorch 1.13 (tests/ref/nn_torch_check.py, the
 * same U-Net built from torch.nn in tests/ref/nn_unet.py, float32, autograd):
 *  - parameter counts of the same configurations;
 *  - forward logits, loss and every parameter gradient of whole U-Nets on the same weights and
 *    inputs: largest |Rete - torch| / largest |torch| per tensor ≤ 1e-4 (float32 sums in
 *    different orders differ by ~1e-6; 1e-4 leaves room and still catches any wrong index);
 *  - one deliberately wrong case (a weight changed on Rete's side) that the checker must reject;
 *  - a model made and exported to safetensors by PyTorch, loaded by Rete, tiled inference
 *    against PyTorch's untiled inference: largest absolute difference ≤ 1e-4.
 */
#include <math.h>
#include <string.h>

#include "rete_test.h"
#include "rete_nn.h"

static guint64 rng_state = 777;

static double
rng_uniform (void)
{
  guint64 z = (rng_state += 0x9E3779B97F4A7C15ull);
  z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9ull;
  z = (z ^ (z >> 27)) * 0x94D049BB133111EBull;
  z ^= z >> 31;
  return (z >> 11) * (1.0 / 9007199254740992.0);
}

static double
relative_diff (const float *a, const float *b, gsize n)
{
  double diff = 0.0, scale = 1e-30;
  for (gsize i = 0; i < n; i++)
    {
      diff = fmax (diff, fabs ((double) a[i] - b[i]));
      scale = fmax (scale, fabs ((double) b[i]));
    }
  return diff / scale;
}

typedef struct {
  const char *path;
  int levels, filters, convs;
  gboolean relu;
  int in_channels, n, height, width;
  double dice_weight;
  gboolean deliberately_wrong; /* change one weight on Rete's side: the check must fail */
} TorchCase;

static char *
config_text (int levels, int filters, int convs, gboolean relu, int in_channels)
{
  return g_strdup_printf ("%d,%d,%d,%d,%d", levels, filters, convs, relu ? 1 : 0, in_channels);
}

static void
test_parameter_counts (void)
{
  static const int configs[][5] = {
    { 3, 16, 2, 1, 1 }, { 1, 1, 1, 1, 1 }, { 2, 8, 1, 1, 1 }, { 4, 32, 2, 0, 3 }, { 5, 64, 2, 1, 3 },
  };
  GPtrArray *texts = g_ptr_array_new_with_free_func (g_free);
  for (gsize i = 0; i < G_N_ELEMENTS (configs); i++)
    g_ptr_array_add (texts, config_text (configs[i][0], configs[i][1], configs[i][2], configs[i][3],
                                         configs[i][4]));
  gboolean skipped = FALSE;
  GError *error = NULL;
  g_autofree char *out = rete_test_python ("nn_torch_check.py", &skipped, &error, "counts",
                                           texts->pdata[0], texts->pdata[1], texts->pdata[2],
                                           texts->pdata[3], texts->pdata[4], NULL);
  if (skipped)
    return;
  g_assert_no_error (error);
  g_auto (GStrv) lines = g_strsplit (g_strstrip (out), "\n", -1);
  g_assert_cmpint (g_strv_length (lines), ==, G_N_ELEMENTS (configs));
  for (gsize i = 0; i < G_N_ELEMENTS (configs); i++)
    {
      ReteUnetConfig cf = { configs[i][0], configs[i][1], configs[i][2], configs[i][3], configs[i][4] };
      ReteUnet *net = rete_unet_new (&cf, 1, NULL);
      g_autofree char *want = g_strdup_printf ("%s %zu", (char *) texts->pdata[i], rete_unet_n_params (net));
      g_test_message ("parameters of %s: Rete %zu, torch line \"%s\"", (char *) texts->pdata[i],
                      rete_unet_n_params (net), lines[i]);
      g_assert_cmpstr (lines[i], ==, want);
      rete_unet_free (net);
    }
  g_ptr_array_unref (texts);
}

/* Largest relative difference over the tensors of two nets with the same architecture:
 * `got` from Rete's gradients, `want` from torch's (a model file holding gradients). */
static double
compare_gradients (ReteUnet *net, ReteUnet *torch_grads, const char *path)
{
  double worst = 0.0;
  for (int t = 0; t < rete_unet_n_tensors (net); t++)
    {
      gsize off, off_t;
      int shape[4], nd;
      const char *name = rete_unet_tensor_name (net, t, &off, shape, &nd);
      int ti = rete_unet_find_tensor (torch_grads, name);
      g_assert_cmpint (ti, >=, 0);
      rete_unet_tensor_name (torch_grads, ti, &off_t, NULL, NULL);
      gsize size = 1;
      for (int d = 0; d < nd; d++)
        size *= shape[d];
      double r = relative_diff (rete_unet_grads (net) + off, rete_unet_params (torch_grads) + off_t, size);
      g_test_message ("%s: d%-18s largest relative difference %.2e", path, name, r);
      worst = fmax (worst, r);
    }
  return worst;
}

static void
test_against_autograd (gconstpointer data)
{
  const TorchCase *c = data;
  ReteUnetConfig cf = { c->levels, c->filters, c->convs, c->relu, c->in_channels };
  ReteUnet *net = rete_unet_new (&cf, 99, NULL);
  /* non-zero biases so that every bias gradient path is exercised */
  float *p = rete_unet_params (net);
  for (int t = 0; t < rete_unet_n_tensors (net); t++)
    {
      gsize off;
      int shape[4], nd;
      rete_unet_tensor_name (net, t, &off, shape, &nd);
      if (nd == 1)
        for (int k = 0; k < shape[0]; k++)
          p[off + k] = (float) (0.2 * (rng_uniform () - 0.5));
    }
  ReteModel *model = rete_model_new (net);
  g_autofree char *model_path = rete_test_tmp_path ("autograd.safetensors");
  g_assert_true (rete_model_save (model, model_path, NULL));

  gsize n_px = (gsize) c->n * c->height * c->width;
  float *x = g_new (float, n_px * c->in_channels), *t = g_new (float, n_px), *m = g_new (float, n_px);
  for (gsize i = 0; i < n_px * c->in_channels; i++)
    x[i] = (float) (2 * rng_uniform () - 1);
  for (gsize i = 0; i < n_px; i++)
    {
      t[i] = rng_uniform () < 0.25;
      m[i] = rng_uniform () < 0.85;
    }
  gsize x_shape[4] = { c->n, c->in_channels, c->height, c->width };
  gsize y_shape[4] = { c->n, 1, c->height, c->width };
  g_autofree char *x_path = rete_test_tmp_path ("x.npy"), *t_path = rete_test_tmp_path ("t.npy");
  g_autofree char *m_path = rete_test_tmp_path ("m.npy"), *out = rete_test_tmp_path ("torch");
  g_assert_true (rete_test_write_npy_f32 (x_path, x, x_shape, 4, NULL));
  g_assert_true (rete_test_write_npy_f32 (t_path, t, y_shape, 4, NULL));
  g_assert_true (rete_test_write_npy_f32 (m_path, m, y_shape, 4, NULL));
  char dice[32];
  g_ascii_dtostr (dice, sizeof dice, c->dice_weight);
  gboolean skipped = FALSE;
  GError *error = NULL;
  g_autofree char *stdout_text = rete_test_python ("nn_torch_check.py", &skipped, &error, "grad",
                                                   model_path, x_path, t_path, m_path, dice, out, NULL);
  if (skipped)
    {
      rete_model_free (model);
      g_free (x), g_free (t), g_free (m);
      return;
    }
  g_assert_no_error (error);
  double torch_loss = g_ascii_strtod (stdout_text, NULL);

  if (c->deliberately_wrong)
    {
      int w = rete_unet_find_tensor (net, "head.weight");
      gsize off;
      rete_unet_tensor_name (net, w, &off, NULL, NULL);
      p[off] *= 1.01f; /* a 1% change in one weight of the head */
    }
  float *logits = g_new (float, n_px), *dlogits = g_new (float, n_px);
  g_assert_true (rete_unet_forward (net, x, c->n, c->height, c->width, logits, &error));
  g_assert_no_error (error);
  double loss = rete_loss_bce_dice (logits, t, m, n_px, c->dice_weight, dlogits);
  rete_unet_zero_grad (net);
  g_assert_true (rete_unet_backward (net, dlogits, &error));

  g_autofree char *logits_path = g_strconcat (out, ".logits.npy", NULL);
  g_autofree char *grads_path = g_strconcat (out, ".grads.safetensors", NULL);
  gsize shape[4];
  int nd = 0;
  float *torch_logits = rete_test_read_npy_f32 (logits_path, shape, &nd, &error);
  g_assert_no_error (error);
  ReteModel *torch_grads = rete_model_load (grads_path, &error);
  g_assert_no_error (error);

  double worst_logits = relative_diff (logits, torch_logits, n_px);
  double worst_loss = fabs (loss - torch_loss) / fabs (torch_loss);
  double worst_grads = compare_gradients (net, rete_model_net (torch_grads), c->path);
  g_test_message ("%s: logits %.2e, loss %.2e (Rete %.7f, torch %.7f), gradients %.2e: largest "
                  "relative differences (tolerance 1e-4)", c->path, worst_logits, worst_loss, loss,
                  torch_loss, worst_grads);
  double worst = fmax (worst_logits, fmax (worst_loss, worst_grads));
  if (c->deliberately_wrong)
    g_assert_cmpfloat (worst, >, 1e-4); /* the checker must see a 1% change in one weight */
  else
    g_assert_cmpfloat (worst, <=, 1e-4);

  g_free (torch_logits);
  rete_model_free (torch_grads);
  rete_model_free (model);
  g_free (x), g_free (t), g_free (m), g_free (logits), g_free (dlogits);
}

static const TorchCase torch_cases[] = {
  { "/nn/torch/autograd/standard", 3, 16, 2, TRUE, 1, 2, 48, 40, 0.5, FALSE },
  { "/nn/torch/autograd/standard-deliberately-wrong", 3, 16, 2, TRUE, 1, 2, 48, 40, 0.5, TRUE },
  { "/nn/torch/autograd/2-levels-1-conv-rgb-identity", 2, 4, 1, FALSE, 3, 3, 20, 14, 1.0, FALSE },
  { "/nn/torch/autograd/4-levels-bce-only", 4, 6, 2, TRUE, 1, 1, 32, 24, 0.0, FALSE },
  { "/nn/torch/autograd/1-level", 1, 5, 2, TRUE, 1, 2, 9, 11, 0.5, FALSE },
};

typedef struct {
  const char *path;
  int levels, filters, convs;
  gboolean relu;
  int in_channels, height, width, tile;
} ExportCase;

static void
test_torch_export (gconstpointer data)
{
  const ExportCase *c = data;
  g_autofree char *config = config_text (c->levels, c->filters, c->convs, c->relu, c->in_channels);
  gsize n_px = (gsize) c->height * c->width;
  float *x = g_new (float, n_px * c->in_channels);
  for (gsize i = 0; i < n_px * c->in_channels; i++)
    x[i] = (float) (3 * rng_uniform () - 1.5);
  gsize shape[3] = { c->in_channels, c->height, c->width };
  g_autofree char *x_path = rete_test_tmp_path ("export-x.npy");
  g_autofree char *p_path = rete_test_tmp_path ("export-p.npy");
  g_autofree char *model_path = rete_test_tmp_path ("export.safetensors");
  g_assert_true (rete_test_write_npy_f32 (x_path, x, shape, 3, NULL));
  gboolean skipped = FALSE;
  GError *error = NULL;
  g_autofree char *out = rete_test_python ("nn_torch_check.py", &skipped, &error, "export", config,
                                           "5", model_path, x_path, p_path, NULL);
  if (skipped)
    {
      g_free (x);
      return;
    }
  g_assert_no_error (error);
  ReteModel *model = rete_model_load (model_path, &error);
  g_assert_no_error (error);
  g_assert_nonnull (rete_model_get_meta (model, "provenance"));
  gsize p_shape[3];
  int nd;
  float *want = rete_test_read_npy_f32 (p_path, p_shape, &nd, &error);
  g_assert_no_error (error);
  g_assert_cmpint (nd, ==, 2);
  float *got = g_new (float, n_px);
  rete_model_set_tile_size (model, c->tile);
  g_assert_true (rete_model_infer (model, x, c->in_channels, c->height, c->width, got, NULL, NULL, &error));
  g_assert_no_error (error);
  gsize where = 0;
  double diff = rete_test_max_abs_diff (got, want, n_px, &where);
  g_test_message ("%s: PyTorch-made model, Rete tiled (tile %d) vs torch untiled: largest absolute "
                  "difference %.2e at x %zu y %zu (tolerance 1e-4)", c->path, c->tile, diff,
                  where % c->width, where / c->width);
  g_assert_cmpfloat (diff, <=, 1e-4);
  g_free (x), g_free (got), g_free (want);
  rete_model_free (model);
}

static const ExportCase export_cases[] = {
  { "/nn/torch/export/standard", 3, 16, 2, TRUE, 1, 203, 157, 64 },
  { "/nn/torch/export/3-levels-rgb-default-tile", 3, 8, 2, TRUE, 3, 333, 290, 0 },
  { "/nn/torch/export/tiny", 2, 8, 1, TRUE, 1, 99, 130, 32 },
};

int
main (int argc, char **argv)
{
  g_test_init (&argc, &argv, NULL);
  g_test_add_func ("/nn/torch/parameter-counts", test_parameter_counts);
  for (gsize i = 0; i < G_N_ELEMENTS (torch_cases); i++)
    g_test_add_data_func (torch_cases[i].path, &torch_cases[i], test_against_autograd);
  for (gsize i = 0; i < G_N_ELEMENTS (export_cases); i++)
    g_test_add_data_func (export_cases[i].path, &export_cases[i], test_torch_export);
  return g_test_run ();
}
