/* unet_forward.c — the forward pass of the U-Net (Ronneberger et al., MICCAI 2015; architecture
 * in rete_nn.h): where one image's activations live (training and lean inference layouts), the
 * forward of one image, and the batch forward over threads that keeps activations for
 * unet_backward.c.
 *
 * Threading: the images of a batch are split over rete_thread_count() threads with
 * rete_parallel_for; each image runs on one thread with OpenBLAS held to one thread.
 */
#include "unet_private.h"
#include "layers.h"

#include <string.h>

/* Training layout: every tensor its own memory, except that the last encoder output of a level
 * is the first half of that level's concatenation buffer (the skip costs no copy).
 * Lean layout, per level l with S = H_l·W_l: cat (2C·S), A (C·S), B (C·S at the bottom, else
 * C/2·S, the pooled input); enc: B -> A -> cat, dec: cat -> A -> cat (the concatenation is dead
 * once the first decoder convolution has read it); bottom: B -> A -> B. */
gsize
unet_activations_layout (const ReteUnet *net, int height, int width, gboolean lean,
                         float *memory, UnetActivations *acts)
{
  const ReteUnetConfig *cf = &net->config;
  int L = cf->levels, F = cf->base_filters, k = cf->convs_per_block;
  gsize used = 0;
#define TAKE(floats) (used += (floats), memory != NULL ? memory + used - (floats) : NULL)
  UnetActivations a;
  memset (&a, 0, sizeof a);
  a.input = TAKE ((gsize) cf->in_channels * height * width);
  a.logits = TAKE ((gsize) height * width);
  for (int l = 0; l < L; l++)
    {
      gsize S = (gsize) (height >> l) * (width >> l), C = (gsize) F << l;
      gboolean bottom = l == L - 1;
      if (!lean)
        {
          if (l > 0)
            a.pool[l] = TAKE (C / 2 * S);
          if (!bottom)
            a.cat[l] = TAKE (2 * C * S);
          for (int j = 0; j < k; j++)
            a.enc[l][j] = (j == k - 1 && !bottom) ? a.cat[l] : TAKE (C * S);
          if (!bottom)
            for (int j = 0; j < k; j++)
              a.dec[l][j] = TAKE (C * S);
          continue;
        }
      float *cat = bottom ? NULL : TAKE (2 * C * S);
      float *A = TAKE (C * S);
      float *B = (bottom || l > 0) ? TAKE ((bottom ? C : C / 2) * S) : NULL;
      a.cat[l] = cat;
      a.pool[l] = l > 0 ? B : NULL;
      if (!bottom)
        {
          a.enc[l][0] = k == 2 ? A : cat;
          a.enc[l][1] = k == 2 ? cat : NULL;
          a.dec[l][0] = A;
          a.dec[l][1] = k == 2 ? cat : NULL;
        }
      else
        {
          a.enc[l][0] = A;
          a.enc[l][1] = k == 2 ? B : NULL;
        }
    }
#undef TAKE
  if (acts != NULL)
    *acts = a;
  return used;
}

static inline const float *
param (const ReteUnet *net, int tensor)
{
  return net->params + net->tensors[tensor].offset;
}

void
unet_forward_one (const ReteUnet *net, const UnetActivations *a, int H, int W)
{
  const ReteUnetConfig *cf = &net->config;
  int L = cf->levels, F = cf->base_filters, k = cf->convs_per_block;
  const float *x = a->input;
  for (int l = 0; l < L; l++)
    {
      int Hl = H >> l, Wl = W >> l, C = F << l;
      int c_in = l == 0 ? cf->in_channels : C / 2;
      if (l > 0)
        {
          maxpool2x2_forward (a->pool[l], x, 1, C / 2, 2 * Hl, 2 * Wl);
          x = a->pool[l];
        }
      for (int j = 0; j < k; j++)
        {
          int w = net->enc_w[l][j];
          conv3x3_forward_act (a->enc[l][j], x, param (net, w), param (net, w + 1), 1,
                               j == 0 ? c_in : C, C, Hl, Wl, cf->activation);
          x = a->enc[l][j];
        }
    }
  for (int l = L - 2; l >= 0; l--)
    {
      int Hl = H >> l, Wl = W >> l, C = F << l;
      gsize S = (gsize) Hl * Wl;
      int w = net->up_w[l + 1];
      upconv2x2_forward (a->cat[l] + C * S, x, param (net, w), param (net, w + 1), 1, 2 * C, C,
                         Hl / 2, Wl / 2);
      x = a->cat[l];
      for (int j = 0; j < k; j++)
        {
          w = net->dec_w[l][j];
          conv3x3_forward_act (a->dec[l][j], x, param (net, w), param (net, w + 1), 1,
                               j == 0 ? 2 * C : C, C, Hl, Wl, cf->activation);
          x = a->dec[l][j];
        }
    }
  conv1x1_forward (a->logits, x, param (net, net->head_w), param (net, net->head_w + 1), 1, F, 1,
                   H, W);
}

typedef struct {
  ReteUnet *net;
  const float *input;
  float *logits;
  int n, n_chunks, height, width;
} ForwardJob;

static void
forward_chunk (int first, int last, gpointer data)
{
  ForwardJob *job = data;
  gsize in_size = (gsize) job->net->config.in_channels * job->height * job->width;
  gsize out_size = (gsize) job->height * job->width;
  for (int c = first; c < last; c++)
    for (int i = job->n * c / job->n_chunks; i < job->n * (c + 1) / job->n_chunks; i++)
      {
        const UnetActivations *a = &job->net->acts[i];
        memcpy (a->input, job->input + i * in_size, sizeof (float) * in_size);
        unet_forward_one (job->net, a, job->height, job->width);
        memcpy (job->logits + i * out_size, a->logits, sizeof (float) * out_size);
      }
}

gboolean
rete_unet_forward (ReteUnet *net, const float *input, int n, int height, int width,
                   float *logits, GError **error)
{
  int m = rete_unet_config_multiple (&net->config);
  if (input == NULL || logits == NULL || n < 1 || height < m || width < m || height % m != 0
      || width % m != 0 || height > RETE_MAX_SIDE || width > RETE_MAX_SIDE)
    {
      g_set_error (error, RETE_NN_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "network input of %d image(s) of %d×%d cannot be used: sides must be positive "
                   "multiples of %d for a %d-level U-Net (pad or crop the patches)",
                   n, width, height, m, net->config.levels);
      return FALSE;
    }
  if (n != net->act_n || height != net->act_height || width != net->act_width)
    {
      rete_unet_release_activations (net);
      gsize per_image = unet_activations_layout (net, height, width, FALSE, NULL, NULL);
      float *memory = g_try_malloc (sizeof (float) * per_image * n);
      if (memory == NULL || per_image * n > G_MAXSIZE / 8)
        {
          g_free (memory);
          g_set_error (error, RETE_NN_ERROR, RETE_ERROR_NO_MEMORY,
                       "not enough memory for the activations of %d patch(es) of %d×%d "
                       "(%.0f MB); use smaller or fewer patches", n, width, height,
                       per_image * n * 4.0 / 1e6);
          return FALSE;
        }
      net->act_memory = memory;
      net->acts = g_new (UnetActivations, n);
      for (int i = 0; i < n; i++)
        unet_activations_layout (net, height, width, FALSE, memory + per_image * i,
                                 &net->acts[i]);
      net->act_n = n;
      net->act_height = height;
      net->act_width = width;
    }
  ForwardJob job = { net, input, logits, n, MIN (n, rete_thread_count ()), height, width };
  rete_parallel_for (job.n_chunks, forward_chunk, &job);
  return TRUE;
}
