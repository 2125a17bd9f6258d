/* adam.c — the optimiser of training: Adam with decoupled weight decay (AdamW).
 *
 * Adam: D. P. Kingma, J. Ba, "Adam: A Method for Stochastic Optimization", ICLR 2015,
 * Algorithm 1. Decoupled weight decay: I. Loshchilov, F. Hutter, "Decoupled Weight Decay
 * Regularization", ICLR 2019, Algorithm 2. The arithmetic follows the order of
 * torch.optim.AdamW (PyTorch 1.13, single-tensor path) so that tests can hold the two
 * together step by step:
 *   p <- p (1 - lr wd)                       (only where decay[i] != 0)
 *   m <- b1 m + (1 - b1) g
 *   v <- b2 v + (1 - b2) g^2
 *   p <- p - (lr / (1 - b1^t)) m / (sqrt(v) / sqrt(1 - b2^t) + eps)
 * Parameters and gradients are the network's flat buffers, so the update is one loop.
 */
#include "rete_train.h"

#include <math.h>
#include <string.h>

void
rete_adam_params_init (ReteAdamParams *params)
{
  params->learning_rate = 1e-3;
  params->beta1 = 0.9;
  params->beta2 = 0.999;
  params->epsilon = 1e-8;
  params->weight_decay = 1e-4;
}

ReteAdamState *
rete_adam_new (gsize n, GError **error)
{
  if (n == 0 || n > ((gsize) 1 << 30))
    {
      g_set_error (error, RETE_NN_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "optimiser: %" G_GSIZE_FORMAT " parameters is not a size Rete can train "
                   "(1 to 2^30)", n);
      return NULL;
    }
  ReteAdamState *state = g_new0 (ReteAdamState, 1);
  state->n = n;
  state->m = g_try_new0 (float, n);
  state->v = g_try_new0 (float, n);
  if (state->m == NULL || state->v == NULL)
    {
      rete_adam_free (state);
      g_set_error (error, RETE_NN_ERROR, RETE_ERROR_NO_MEMORY,
                   "optimiser: not enough memory for the moments of %" G_GSIZE_FORMAT
                   " parameters", n);
      return NULL;
    }
  return state;
}

void
rete_adam_free (ReteAdamState *state)
{
  if (state == NULL)
    return;
  g_free (state->m);
  g_free (state->v);
  g_free (state);
}

void
rete_adam_reset (ReteAdamState *state)
{
  memset (state->m, 0, state->n * sizeof (float));
  memset (state->v, 0, state->n * sizeof (float));
  state->step = 0;
}

typedef struct {
  const ReteAdamParams *params;
  double learning_rate;
  float *weights;
  const float *grads;
  const guint8 *decay;
  ReteAdamState *state;
  float step_size, inv_sqrt_bc2, eps, shrink, b1, b2;
} AdamJob;

static void
adam_range (int first, int last, gpointer data)
{
  AdamJob *job = data;
  /* chunks of 4096 parameters so the threads split the buffer without false sharing */
  gsize lo = (gsize) first * 4096, hi = MIN ((gsize) last * 4096, job->state->n);
  float *p = job->weights, *m = job->state->m, *v = job->state->v;
  const float *g = job->grads;
  for (gsize i = lo; i < hi; i++)
    {
      if (job->decay == NULL || job->decay[i])
        p[i] *= job->shrink;
      m[i] = job->b1 * m[i] + (1.0f - job->b1) * g[i];
      v[i] = job->b2 * v[i] + (1.0f - job->b2) * g[i] * g[i];
      float denom = sqrtf (v[i]) * job->inv_sqrt_bc2 + job->eps;
      p[i] -= job->step_size * m[i] / denom;
    }
}

void
rete_adam_step (ReteAdamState *state, const ReteAdamParams *params, double learning_rate,
                float *weights, const float *grads, const guint8 *decay)
{
  state->step++;
  double t = (double) state->step;
  double bc1 = 1.0 - pow (params->beta1, t);
  double bc2 = 1.0 - pow (params->beta2, t);
  AdamJob job = {
    .params = params, .learning_rate = learning_rate, .weights = weights, .grads = grads,
    .decay = decay, .state = state,
    .step_size = (float) (learning_rate / bc1),
    .inv_sqrt_bc2 = (float) (1.0 / sqrt (bc2)),
    .eps = (float) params->epsilon,
    .shrink = (float) (1.0 - learning_rate * params->weight_decay),
    .b1 = (float) params->beta1, .b2 = (float) params->beta2,
  };
  int n_chunks = (int) ((state->n + 4095) / 4096);
  if (state->n < 65536)
    adam_range (0, n_chunks, &job);
  else
    rete_parallel_for (n_chunks, adam_range, &job);
}

double
rete_train_learning_rate (const ReteTrainConfig *config, int step)
{
  /* Linear warm-up then cosine decay to min_learning_rate_fraction of the base rate
   * (I. Loshchilov, F. Hutter, "SGDR", ICLR 2017, eq. 5, one cycle without restart). */
  double base = config->learning_rate;
  int warm = MAX (config->warmup_steps, 0);
  if (step < warm)
    return base * (step + 1) / (double) warm;
  if (!config->cosine_decay || config->steps <= warm)
    return base;
  double progress = (double) (step - warm) / (double) MAX (config->steps - warm, 1);
  progress = CLAMP (progress, 0.0, 1.0);
  double floor_rate = base * config->min_learning_rate_fraction;
  return floor_rate + 0.5 * (base - floor_rate) * (1.0 + cos (G_PI * progress));
}
