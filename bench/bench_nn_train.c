/* bench_nn_train.c — one training step of the standard U-Net (3 levels, 16 base filters,
 * 2 convolutions per block): zero the gradients, forward, BCE + 0.5 soft Dice loss,
 * backward, AdamW step, on a batch of 32 patches of 64×64 with one input channel. Median
 * wall-clock milliseconds over the timed steps (after 3 untimed ones). The reference is
 * bench/ref_nn_train.py (PyTorch 1.13, the same step). Run: bench-nn-train [repeats]
 * prints: RESULT train-step-standard 32x64x64 <ms> */
#include <stdio.h>
#include <stdlib.h>

#include "rete_train.h"

static int
compare_doubles (const void *a, const void *b)
{
  double x = *(const double *) a, y = *(const double *) b;
  return (x > y) - (x < y);
}

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
  qsort (ms, repeats, sizeof (double), compare_doubles);
  double median = repeats % 2 ? ms[repeats / 2] : 0.5 * (ms[repeats / 2 - 1] + ms[repeats / 2]);
  printf ("RESULT train-step-standard 32x64x64 %.1f\n", median);
  rete_adam_free (adam);
  rete_unet_free (net);
  g_free (input); g_free (target); g_free (logits); g_free (dlogits); g_free (ms);
  return 0;
}
