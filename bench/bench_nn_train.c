/* bench_nn_train.c — one training step of the standard U-Net (3 levels, 16 base filters,
 * 2 convolutions per block): zero the gradients, forward, BCE + 0.5 soft Dice loss,
 * backward, AdamW step, on a batch of 32 patches of 64×64 with one input channel. Median
 * wall-clock milliseconds over the timed steps (after 3 untimed ones). The reference is
 * bench/ref_nn_train.py (PyTorch 1.13, the same step). Run: bench-nn-train [repeats]
 * prints: RESULT train-step-standard 32x64x64 <ms>, then a comment with the GFLOP/s of the
 * step (what is counted: bench_unet_forward_macs_per_pixel); compare with bench-gemm's sgemm peak. */
#include <stdio.h>
#include <stdlib.h>

#include "rete_train.h"
#include "bench_common.h"

int
main (int argc, char **argv)
{
  int repeats = argc > 1 ? atoi (argv[1]) : 10;
  repeats = CLAMP (repeats, 1, 1000);
  enum { N = 32, P = 64 };
  ReteUnetConfig arch;
  rete_unet_config_init (&arch);
  GError *error = NULL;
  ReteUnet *net = rete_unet_new (&arch, 1, &error);
  if (net == NULL)
    {
      fprintf (stderr, "bench-nn-train: %s\n", error->message);
      return 1;
    }
  gsize n_params = rete_unet_n_params (net), n = (gsize) N * P * P;
  float *input = g_new (float, n), *target = g_new (float, n), *logits = g_new (float, n);
  float *dlogits = g_new (float, n);
  guint64 rng = 1;
  for (gsize i = 0; i < n; i++)
    {
      /* roughly standard normal input (sum of 4 uniforms), 10% vessel targets */
      double s = 0;
      for (int k = 0; k < 4; k++)
        s += rete_rng_uniform (&rng);
      input[i] = (float) ((s - 2.0) * 1.732);
      target[i] = rete_rng_uniform (&rng) < 0.1 ? 1.0f : 0.0f;
    }
  ReteAdamState *adam = rete_adam_new (n_params, &error);
  ReteAdamParams ap;
  rete_adam_params_init (&ap);
  double *ms = g_new (double, repeats);
  for (int r = -3; r < repeats; r++)
    {
      gint64 t0 = g_get_monotonic_time ();
      rete_unet_zero_grad (net);
      if (!rete_unet_forward (net, input, N, P, P, logits, &error))
        {
          fprintf (stderr, "bench-nn-train: %s\n", error->message);
          return 1;
        }
      rete_loss_bce_dice (logits, target, NULL, n, 0.5, dlogits);
      if (!rete_unet_backward (net, dlogits, &error))
        {
          fprintf (stderr, "bench-nn-train: %s\n", error->message);
          return 1;
        }
      rete_adam_step (adam, &ap, 1e-3, rete_unet_params (net), rete_unet_grads (net), NULL);
      if (r >= 0)
        ms[r] = (g_get_monotonic_time () - t0) / 1000.0;
    }
  double median = bench_median (ms, repeats);
  printf ("RESULT train-step-standard 32x64x64 %.1f\n", median);
  /* FLOP of the step, 2 per multiply-add: the forward, and backward the weight gradient of every
   * layer and the input gradient of every layer but the first convolution (3 passes less one) */
  double first, fwd = bench_unet_forward_macs_per_pixel (&arch, &first);
  double gflop = 2.0 * N * P * P * (3.0 * fwd - first) / 1e9;
  printf ("# train-step-standard: %.2f GFLOP per step (convolutions and up-convolutions, forward "
          "and backward), %.1f GFLOP/s at the median, %d threads\n", gflop, gflop / (median / 1e3),
          rete_thread_count ());
  rete_adam_free (adam);
  rete_unet_free (net);
  g_free (input); g_free (target); g_free (logits); g_free (dlogits); g_free (ms);
  return 0;
}
