/* train.c — the training loop of the U-Net: patches, loss, backward, AdamW, validation AUC,
 * early stopping, the best model, resumable checkpoints, the log, restarts of dead networks.
 *
 * The recipe (see train_support.c for the sources) is common practice for small U-Nets on
 * fundus photographs. Very small networks can die: every ReLU of a layer off, the output a
 * constant, the gradient zero from then on (validation AUC 0.5). The input arrives
 * standardised inside the field of view and the weights start He-normal, which makes that
 * rare; when it still happens — the same logits for every patch for DEAD_STEPS steps, or the
 * validation AUC still no better than CHANCE_AUC after CHANCE_STEP steps — the run starts again from a new
 * initialisation derived from the seed, at most max_restarts times, so that the same seed
 * still gives the same weights.
 */
#include "train_private.h"

#include <errno.h>
#include <math.h>
#include <string.h>
#include <stdio.h>
#include <glib/gstdio.h>

#define DEAD_STEPS 8    /* consecutive steps of constant output that mean a dead network */
#define CHANCE_AUC 0.55 /* validation no better than this by CHANCE_STEP restarts a new network */
#define CHANCE_STEP 100

typedef struct {
  const ReteTrainConfig *c;
  ReteUnetConfig arch;
  ReteModel *model;          /* owns the training net */
  ReteUnet *net;
  ReteAdamState *adam;
  ReteAdamParams adam_params;
  guint8 *decay;             /* (n_params) 1 on convolution weights */
  ReteTrainCheckpoint state; /* counters; its arrays point into net/adam/best while running */
  float *best;               /* (n_params) */
  FILE *log;
  gint64 started;            /* monotonic time of this run's start */
} Run;

static double
elapsed (const Run *r)
{
  return r->state.seconds + (g_get_monotonic_time () - r->started) / 1e6;
}

static gboolean
save_checkpoint (Run *r, GError **error)
{
  if (r->c->checkpoint_path == NULL)
    return TRUE;
  ReteTrainCheckpoint snap = r->state;
  snap.params = rete_unet_params (r->net);
  snap.best_params = r->best;
  snap.adam_m = r->adam->m;
  snap.adam_v = r->adam->v;
  snap.adam_step = r->adam->step;
  snap.seconds = elapsed (r);
  return rete_train_checkpoint_save (&snap, r->c->checkpoint_path, error);
}

static gboolean
restart (Run *r, const char *why, GError **error)
{
  if (r->c->start_model != NULL || r->state.restarts >= r->c->max_restarts)
    {
      g_set_error (error, RETE_NN_ERROR, RETE_ERROR_UNDEFINED,
                   "training failed: %s%s. Use more base filters, a lower learning rate, or "
                   "check that the annotations match the photographs", why,
                   r->c->start_model ? " (fine-tuning from the start model)"
                                     : " after every allowed restart");
      return FALSE;
    }
  r->state.restarts++;
  r->state.init_seed = rete_rng_derive (r->c->seed, 0xDEADull, (guint64) r->state.restarts);
  if (!rete_train_initialise (r->net, r->c, r->state.init_seed, error))
    return FALSE;
  rete_adam_reset (r->adam);
  r->state.step = 0;
  r->state.best_auc = r->state.last_auc = NAN;
  r->state.best_step = 0;
  r->state.validations_since_best = 0;
  memcpy (r->best, rete_unet_params (r->net), r->state.n_params * sizeof (float));
  char *event = g_strdup_printf ("restart %d: %s", r->state.restarts, why);
  rete_train_log_line (r->log, 0, NAN, NAN, NAN, elapsed (r), event);
  g_free (event);
  return TRUE;
}

static gboolean
setup (Run *r, GError **error)
{
  const ReteTrainConfig *c = r->c;
  r->arch = c->start_model ? *rete_unet_config (rete_model_net (c->start_model)) : c->unet;
  r->state.seed = c->seed;
  r->state.init_seed = c->seed;
  r->state.best_auc = r->state.last_auc = NAN;
  r->state.total_steps = c->steps;
  r->state.unet = r->arch;
  ReteUnet *net = rete_unet_new (&r->arch, c->seed, error);
  if (net == NULL)
    return FALSE;
  r->model = rete_model_new (net);
  r->net = rete_model_net (r->model);
  gsize n = rete_unet_n_params (r->net);
  r->state.n_params = n;
  if (!rete_train_initialise (r->net, c, c->seed, error))
    return FALSE;
  if ((r->adam = rete_adam_new (n, error)) == NULL)
    return FALSE;
  rete_adam_params_init (&r->adam_params);
  r->adam_params.learning_rate = c->learning_rate;
  r->adam_params.weight_decay = c->weight_decay;
  r->decay = g_new0 (guint8, n);
  for (int t = 0; t < rete_unet_n_tensors (r->net); t++)
    {
      gsize offset;
      int shape[4], dims;
      const char *name = rete_unet_tensor_name (r->net, t, &offset, shape, &dims);
      gsize count = 1;
      for (int d = 0; d < dims; d++)
        count *= (gsize) shape[d];
      if (dims > 1 && g_str_has_suffix (name, "weight")) /* no decay on biases (common practice) */
        memset (r->decay + offset, 1, count);
    }
  r->best = g_memdup2 (rete_unet_params (r->net), n * sizeof (float));

  gboolean resumed = FALSE;
  if (c->resume && g_file_test (c->checkpoint_path, G_FILE_TEST_EXISTS))
    {
      ReteTrainCheckpoint saved;
      if (!rete_train_checkpoint_load (&saved, c->checkpoint_path, error))
        return FALSE;
      if (saved.n_params != n || saved.unet.levels != r->arch.levels
          || saved.unet.base_filters != r->arch.base_filters
          || saved.unet.convs_per_block != r->arch.convs_per_block
          || saved.unet.in_channels != r->arch.in_channels || saved.seed != c->seed)
        {
          g_set_error (error, RETE_NN_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                       "checkpoint %s belongs to another run (a %d-level, %d-filter network, "
                       "seed %" G_GUINT64_FORMAT "): resume with the same size and seed, or "
                       "start without resuming", c->checkpoint_path, saved.unet.levels,
                       saved.unet.base_filters, saved.seed);
          rete_train_checkpoint_clear (&saved);
          return FALSE;
        }
      memcpy (rete_unet_params (r->net), saved.params, n * sizeof (float));
      memcpy (r->best, saved.best_params, n * sizeof (float));
      memcpy (r->adam->m, saved.adam_m, n * sizeof (float));
      memcpy (r->adam->v, saved.adam_v, n * sizeof (float));
      r->adam->step = saved.adam_step;
      rete_train_checkpoint_clear (&saved);
      saved.total_steps = c->steps;
      r->state = saved;
      resumed = TRUE;
    }
  if (c->log_path != NULL)
    {
      gboolean append = resumed && g_file_test (c->log_path, G_FILE_TEST_EXISTS);
      r->log = g_fopen (c->log_path, append ? "a" : "w");
      if (r->log == NULL)
        {
          g_set_error (error, RETE_NN_ERROR, RETE_ERROR_IO, "could not write the training "
                       "log %s: %s", c->log_path, g_strerror (errno));
          return FALSE;
        }
      if (!append)
        fprintf (r->log, "step,loss,learning_rate,validation_auc,seconds,event\n");
      if (resumed)
        {
          char *event = g_strdup_printf ("resumed at step %d", r->state.step);
          rete_train_log_line (r->log, r->state.step, NAN, NAN, NAN, r->state.seconds, event);
          g_free (event);
        }
    }
  return TRUE;
}

/* Validation after a step; may restart the run (returns FALSE only on failure). */
static gboolean
validate (Run *r, const ReteTrainSample *validation, int n_validation, gboolean *stop,
          gboolean *restarted, GError **error)
{
  double auc = rete_train_validate (r->model, validation, n_validation, error);
  if (isnan (auc))
    return FALSE;
  gboolean first = isnan (r->state.best_auc);
  r->state.last_auc = auc;
  if (r->state.step >= CHANCE_STEP && (first || r->state.best_auc <= CHANCE_AUC)
      && auc <= CHANCE_AUC && r->c->start_model == NULL)
    {
      char *why = g_strdup_printf ("validation AUC %.3f at step %d is no better than chance",
                                   auc, r->state.step);
      gboolean ok = restart (r, why, error);
      g_free (why);
      *restarted = TRUE;
      return ok;
    }
  if (first || auc > r->state.best_auc + 1e-5)
    {
      r->state.best_auc = auc;
      r->state.best_step = r->state.step;
      r->state.validations_since_best = 0;
      memcpy (r->best, rete_unet_params (r->net), r->state.n_params * sizeof (float));
      if (r->c->best_model_path != NULL)
        {
          ReteTrainCheckpoint snap = r->state;
          snap.seconds = elapsed (r);
          ReteModel *best = rete_train_model_from_params (&r->arch, r->best, r->c, &snap, error);
          gboolean ok = best != NULL && rete_model_save (best, r->c->best_model_path, error);
          rete_model_free (best);
          if (!ok)
            return FALSE;
        }
    }
  else
    r->state.validations_since_best++;
  if (r->c->patience > 0 && r->state.validations_since_best >= r->c->patience)
    *stop = TRUE;
  return TRUE;
}

static void
run_clear (Run *r)
{
  rete_model_free (r->model);
  rete_adam_free (r->adam);
  g_free (r->decay);
  g_free (r->best);
  if (r->log)
    fclose (r->log);
}

ReteModel *
rete_train (const ReteTrainConfig *c, const ReteTrainSample *training, int n_training,
            const ReteTrainSample *validation, int n_validation, ReteProgressFunc progress,
            gpointer progress_data, ReteTrainReport *report, GError **error)
{
  if (c == NULL || !rete_train_config_check (c, error))
    return NULL;
  const ReteUnetConfig *arch = c->start_model ? rete_unet_config (rete_model_net (c->start_model))
                                              : &c->unet;
  RetePatchSampler *sampler = rete_patch_sampler_new (training, n_training, arch->in_channels,
                                                      error);
  if (sampler == NULL)
    return NULL;
  if (n_validation < 0 || (n_validation > 0 && validation == NULL))
    {
      rete_patch_sampler_free (sampler);
      g_set_error (error, RETE_NN_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "the validation list is inconsistent (%d pairs, %s)", n_validation,
                   validation ? "given" : "none given");
      return NULL;
    }
  for (int i = 0; i < n_validation; i++)
    if (!rete_train_sample_check (&validation[i], i, arch->in_channels, error))
      {
        g_prefix_error (error, "validation: ");
        rete_patch_sampler_free (sampler);
        return NULL;
      }

  gsize n_vessel = 0, n_background = 0;
  for (int i = 0; i < n_validation; i++)
    {
      const ReteTrainSample *s = &validation[i];
      for (gsize p = 0; p < (gsize) s->width * s->height; p++)
        if (s->mask == NULL || s->mask[p] >= 0.5f)
          {
            n_vessel += s->target[p] >= 0.5f;
            n_background += s->target[p] < 0.5f;
          }
    }
  if (n_validation > 0 && (n_vessel == 0 || n_background == 0))
    {
      g_set_error (error, RETE_NN_ERROR, RETE_ERROR_UNDEFINED,
                   "validation AUC is undefined: the validation annotations hold %s only inside "
                   "the field of view; choose validation photographs with vessels",
                   n_vessel == 0 ? "background" : "vessel");
      rete_patch_sampler_free (sampler);
      return NULL;
    }

  Run run = { .c = c, .started = g_get_monotonic_time () };
  Run *r = &run;
  ReteModel *result = NULL;
  int B = c->batch_size, P = c->patches.patch_size, C = arch->in_channels;
  gsize pp = (gsize) P * P;
  float *input = g_try_new (float, (gsize) B * C * pp);
  float *target = g_try_new (float, (gsize) B * pp), *mask = g_try_new (float, (gsize) B * pp);
  float *logits = g_try_new (float, (gsize) B * pp), *dlogits = g_try_new (float, (gsize) B * pp);
  if (!input || !target || !mask || !logits || !dlogits)
    {
      g_set_error (error, RETE_NN_ERROR, RETE_ERROR_NO_MEMORY, "not enough memory for a batch "
                   "of %d patches of %d×%d: use a smaller batch or patch", B, P, P);
      goto out;
    }
  if (!setup (r, error))
    goto out;

  double loss_sum = 0.0;
  int loss_count = 0, dead_steps = 0;
  int log_every = MAX (1, c->validate_every / 10);
  gboolean stop = FALSE;
  while (r->state.step < c->steps && !stop)
    {
      int step = r->state.step;
      double lr = rete_train_learning_rate (c, step);
      ReteBatchJob job = { sampler, &c->patches, c->seed, step, C, P, input, target, mask };
      /* a restarted run draws other patches too, from the seed of its initialisation */
      if (r->state.restarts > 0)
        job.seed = r->state.init_seed;
      rete_parallel_for (B, rete_train_draw_range, &job);
      rete_unet_zero_grad (r->net);
      if (!rete_unet_forward (r->net, input, B, P, P, logits, error))
        goto out;
      double loss = rete_loss_bce_dice (logits, target, mask, (gsize) B * pp, c->dice_weight,
                                        dlogits);
      if (!isfinite (loss))
        {
          g_set_error (error, RETE_NN_ERROR, RETE_ERROR_NOT_FINITE, "training diverged at step "
                       "%d (the loss is not a number): lower the learning rate", step + 1);
          goto out;
        }
      if (!rete_unet_backward (r->net, dlogits, error))
        goto out;
      rete_adam_step (r->adam, &r->adam_params, lr, rete_unet_params (r->net),
                      rete_unet_grads (r->net), r->decay);
      r->state.step = ++step;

      /* a dead network: the output no longer depends on the input, so every patch of the
       * batch gets the same logits (up to the zero-padding effects at the patch border, the
       * same for all). A batch of one patch relies on the validation check alone. */
      float spread = 0.0f, scale = 1.0f;
      for (int b = 1; b < B; b++)
        {
          const float *now = logits + (gsize) b * pp, *first = logits;
          for (gsize i = 0; i < pp; i++)
            {
              spread = MAX (spread, fabsf (now[i] - first[i]));
              scale = MAX (scale, fabsf (now[i]));
            }
        }
      dead_steps = (B > 1 && spread <= 1e-6f * scale) ? dead_steps + 1 : 0;
      if (dead_steps >= DEAD_STEPS)
        {
          char *why = g_strdup_printf ("the network's output is constant (dead) at step %d", step);
          gboolean ok = restart (r, why, error);
          g_free (why);
          if (!ok)
            goto out;
          dead_steps = 0;
          loss_sum = 0;
          loss_count = 0;
          continue;
        }
      loss_sum += loss;
      loss_count++;
      gboolean validated = FALSE, restarted = FALSE;
      if (n_validation > 0 && (step % c->validate_every == 0 || step == c->steps))
        {
          if (!validate (r, validation, n_validation, &stop, &restarted, error))
            goto out;
          validated = TRUE;
          if (restarted)
            {
              loss_sum = 0;
              loss_count = 0;
              continue;
            }
        }
      if (step % log_every == 0 || validated || step == c->steps)
        {
          rete_train_log_line (r->log, step, loss_count ? loss_sum / loss_count : NAN, lr,
                               validated ? r->state.last_auc : NAN, elapsed (r),
                               stop ? "early stop" : (validated && r->state.best_step == step
                                                      ? "best" : NULL));
          if (report)
            report->loss = loss_count ? loss_sum / loss_count : NAN;
          loss_sum = 0;
          loss_count = 0;
        }
      gboolean checkpoint_due = step % (c->checkpoint_every > 0 ? c->checkpoint_every
                                                                : c->validate_every) == 0;
      if ((checkpoint_due || stop || step == c->steps) && !save_checkpoint (r, error))
        goto out;
      if (progress != NULL)
        {
          char *message = isfinite (r->state.last_auc)
            ? g_strdup_printf ("step %d of %d, loss %.4f, validation AUC %.4f", step, c->steps,
                               loss, r->state.last_auc)
            : g_strdup_printf ("step %d of %d, loss %.4f", step, c->steps, loss);
          gboolean go_on = progress ((double) step / c->steps, message, progress_data);
          g_free (message);
          if (!go_on)
            {
              if (!save_checkpoint (r, error))
                goto out;
              g_set_error (error, RETE_NN_ERROR, RETE_ERROR_CANCELLED, "training cancelled at "
                           "step %d; resume from the checkpoint to go on", step);
              goto out;
            }
        }
    }
  r->state.seconds = elapsed (r);
  const float *chosen = isfinite (r->state.best_auc) ? r->best : rete_unet_params (r->net);
  if (!isfinite (r->state.best_auc))
    r->state.best_step = r->state.step;
  result = rete_train_model_from_params (&r->arch, chosen, c, &r->state, error);
  if (report != NULL)
    {
      report->step = r->state.step;
      report->restarts = r->state.restarts;
      report->validation_auc = r->state.last_auc;
      report->best_validation_auc = r->state.best_auc;
      report->best_step = r->state.best_step;
      report->stopped_early = stop;
      report->seconds = (g_get_monotonic_time () - r->started) / 1e6;
    }
out:
  run_clear (r);
  g_free (input); g_free (target); g_free (mask); g_free (logits); g_free (dlogits);
  rete_patch_sampler_free (sampler);
  return result;
}
