/* train_support.c — what the training loop (train.c) stands on: the configuration and its
 * checks, batches of patches, the validation AUC of a model, models with the run's metadata,
 * the CSV log.
 *
 * The recipe is common practice for small U-Nets on fundus photographs (Ronneberger et al.,
 * MICCAI 2015, for the network and patch training): random patches inside the field of view,
 * binary cross-entropy plus soft Dice (Milletari et al., 3DV 2016), Adam (Kingma and Ba,
 * ICLR 2015) with decoupled weight decay (Loshchilov and Hutter, ICLR 2019), a short linear
 * warm-up and a cosine decay (Loshchilov and Hutter, ICLR 2017), model selection by the
 * validation ROC AUC.
 *
 * Very small networks can die: every ReLU of a layer off, the output a constant, the
 * gradient zero from then on (validation AUC 0.5). The input arrives standardised inside the
 * field of view and the weights start He-normal, which makes that rare; when it still
 * happens — the logits of a batch all equal for a few steps, or the first validation AUC no
 * better than chance — the run starts again from a new initialisation derived from the
 * seed, at most max_restarts times. That keeps "same seed -> same weights".
 */
#include "train_private.h"

#include <math.h>
#include <string.h>
#include <stdio.h>
#include <glib/gstdio.h>

void
rete_train_config_init (ReteTrainConfig *c)
{
  memset (c, 0, sizeof *c);
  rete_unet_config_init (&c->unet);
  c->steps = 2000;
  c->batch_size = 16;
  rete_patch_options_init (&c->patches);
  c->learning_rate = 1e-3;
  c->weight_decay = 1e-4;
  c->warmup_steps = 50;
  c->cosine_decay = TRUE;
  c->min_learning_rate_fraction = 0.05;
  c->dice_weight = 0.5;
  c->validate_every = 200;
  c->patience = 0;
  c->seed = 1;
  c->max_restarts = 4;
}

static gboolean
bad (GError **error, const char *message)
{
  g_set_error_literal (error, RETE_NN_ERROR, RETE_ERROR_INVALID_ARGUMENT, message);
  return FALSE;
}

gboolean
rete_train_config_check (const ReteTrainConfig *c, GError **error)
{
  const ReteUnetConfig *arch = c->start_model ? rete_unet_config (rete_model_net (c->start_model))
                                              : &c->unet;
  if (!rete_unet_config_check (arch, error))
    return FALSE;
  int multiple = rete_unet_config_multiple (arch);
  if (c->steps < 1 || c->steps > 10000000)
    return bad (error, "training steps must be between 1 and 10,000,000");
  if (c->batch_size < 1 || c->batch_size > 1024)
    return bad (error, "the batch must hold between 1 and 1024 patches");
  if (c->patches.patch_size < multiple || c->patches.patch_size > 1024
      || c->patches.patch_size % multiple != 0)
    {
      g_set_error (error, RETE_NN_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "patch size %d does not suit a %d-level network: use a multiple of %d "
                   "between %d and 1024", c->patches.patch_size, arch->levels, multiple, multiple);
      return FALSE;
    }
  if (!(c->learning_rate > 0 && c->learning_rate < 1))
    return bad (error, "the learning rate must lie in (0, 1); 1e-3 is usual for Adam");
  if (!(c->weight_decay >= 0 && c->weight_decay < 1))
    return bad (error, "weight decay must lie in [0, 1)");
  if (!(c->min_learning_rate_fraction >= 0 && c->min_learning_rate_fraction <= 1))
    return bad (error, "the final learning-rate fraction must lie in [0, 1]");
  if (!(c->dice_weight >= 0 && c->dice_weight <= 100))
    return bad (error, "the Dice weight must lie in [0, 100]");
  if (!(c->patches.balance <= 1) || isnan (c->patches.balance))
    return bad (error, "vessel balance must be a fraction in [0, 1] (or negative for none)");
  if (!(c->patches.max_rotation_degrees >= 0 && c->patches.max_rotation_degrees <= 180)
      || !(c->patches.brightness >= 0 && c->patches.brightness <= 10)
      || !(c->patches.contrast >= 0 && c->patches.contrast < 1)
      || !(c->patches.gamma >= 0 && c->patches.gamma <= 3))
    return bad (error, "augmentation ranges: rotation 0..180 degrees, brightness 0..10, "
                "contrast 0..<1, gamma 0..3");
  if (c->validate_every < 1 || c->patience < 0 || c->warmup_steps < 0 || c->max_restarts < 0
      || c->checkpoint_every < 0)
    return bad (error, "validation interval must be >= 1; patience, warm-up, restarts and "
                "checkpoint interval >= 0");
  if (c->resume && c->checkpoint_path == NULL)
    return bad (error, "resuming needs a checkpoint file");
  return TRUE;
}

void
rete_train_draw_range (int first, int last, gpointer data)
{
  ReteBatchJob *job = data;
  gsize pp = (gsize) job->patch * job->patch;
  for (int b = first; b < last; b++)
    rete_patch_draw (job->sampler, job->options,
                     rete_rng_derive (job->seed, (guint64) job->step, (guint64) b),
                     job->input + (gsize) b * job->channels * pp, job->target + (gsize) b * pp,
                     job->mask + (gsize) b * pp);
}

double
rete_train_validate (const ReteModel *model, const ReteTrainSample *validation,
                     int n_validation, GError **error)
{
  const ReteUnetConfig *arch = rete_unet_config (rete_model_net (model));
  gsize total = 0;
  for (int i = 0; i < n_validation; i++)
    {
      if (!rete_train_sample_check (&validation[i], i, arch->in_channels, error))
        {
          g_prefix_error (error, "validation: ");
          return NAN;
        }
      total += (gsize) validation[i].width * validation[i].height;
    }
  if (total == 0)
    {
      g_set_error (error, RETE_NN_ERROR, RETE_ERROR_EMPTY, "the validation set is empty");
      return NAN;
    }
  float *scores = g_try_new (float, total);
  guint8 *labels = g_try_new (guint8, total), *inside = g_try_new (guint8, total);
  if (scores == NULL || labels == NULL || inside == NULL)
    {
      g_free (scores); g_free (labels); g_free (inside);
      g_set_error (error, RETE_NN_ERROR, RETE_ERROR_NO_MEMORY,
                   "not enough memory to validate on %" G_GSIZE_FORMAT " pixels", total);
      return NAN;
    }
  gsize at = 0;
  double auc = NAN;
  for (int i = 0; i < n_validation; i++)
    {
      const ReteTrainSample *s = &validation[i];
      gsize n = (gsize) s->width * s->height;
      if (!rete_model_infer (model, s->input, s->channels, s->height, s->width, scores + at,
                             NULL, NULL, error))
        goto out;
      for (gsize p = 0; p < n; p++)
        {
          labels[at + p] = s->target[p] >= 0.5f;
          inside[at + p] = s->mask == NULL || s->mask[p] >= 0.5f;
        }
      at += n;
    }
  auc = rete_train_auc (scores, labels, inside, total, error);
out:
  g_free (scores); g_free (labels); g_free (inside);
  return auc;
}

/* A model holding a copy of `params` for the architecture, with the run's metadata. */
ReteModel *
rete_train_model_from_params (const ReteUnetConfig *arch, const float *params, const ReteTrainConfig *c,
                   const ReteTrainCheckpoint *state, GError **error)
{
  ReteUnet *net = rete_unet_new (arch, 0, error);
  if (net == NULL)
    return NULL;
  memcpy (rete_unet_params (net), params, rete_unet_n_params (net) * sizeof (float));
  ReteModel *model = rete_model_new (net);
  for (int i = 0; c->metadata != NULL && c->metadata[i] != NULL && c->metadata[i + 1] != NULL;
       i += 2)
    rete_model_set_meta (model, c->metadata[i], c->metadata[i + 1]);
  char buf[64];
#define SET(key, fmt, value) (g_snprintf (buf, sizeof buf, fmt, value), rete_model_set_meta (model, key, buf))
  SET ("training_seed", "%" G_GUINT64_FORMAT, c->seed);
  SET ("training_steps", "%d", state->step);
  SET ("training_batch", "%d", c->batch_size);
  SET ("training_patch", "%d", c->patches.patch_size);
  SET ("training_learning_rate", "%g", c->learning_rate);
  SET ("training_weight_decay", "%g", c->weight_decay);
  SET ("training_dice_weight", "%g", c->dice_weight);
  SET ("training_restarts", "%d", state->restarts);
  SET ("training_seconds", "%.0f", state->seconds);
  if (isfinite (state->best_auc))
    {
      SET ("validation_auc", "%.4f", state->best_auc);
      SET ("best_step", "%d", state->best_step);
    }
#undef SET
  return model;
}

void
rete_train_log_line (FILE *log, int step, double loss, double lr, double auc, double seconds,
          const char *event)
{
  if (log == NULL)
    return;
  fprintf (log, "%d,", step);
  if (isfinite (loss))
    fprintf (log, "%.6f", loss);
  fputc (',', log);
  if (isfinite (lr))
    fprintf (log, "%.6g", lr);
  fputc (',', log);
  if (isfinite (auc))
    fprintf (log, "%.6f", auc);
  fprintf (log, ",%.1f,%s\n", seconds, event ? event : "");
  fflush (log);
}

/* (Re)initialises the net's weights for `seed`, or copies the start model's. */
gboolean
rete_train_initialise (ReteUnet *net, const ReteTrainConfig *c, guint64 seed, GError **error)
{
  const float *from;
  ReteUnet *fresh = NULL;
  if (c->start_model != NULL)
    from = rete_unet_params (rete_model_net (c->start_model));
  else
    {
      fresh = rete_unet_new (rete_unet_config (net), seed, error);
      if (fresh == NULL)
        return FALSE;
      from = rete_unet_params (fresh);
    }
  memcpy (rete_unet_params (net), from, rete_unet_n_params (net) * sizeof (float));
  rete_unet_free (fresh);
  return TRUE;
}

