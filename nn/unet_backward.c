/* unet_backward.c — back-propagation (Rumelhart, Hinton and Williams, Nature 1986) through the
 * U-Net of unet.c, from d loss / d logits to the parameter gradients, which it ACCUMULATES.
 *
 * The batch is split over threads as in the forward; each thread sums its images' parameter
 * gradients into a private buffer, and the buffers are added to net->grads in thread order after
 * the join, so the result does not depend on timing (only on the thread count, through the
 * order of float additions).
 */
#include "unet_private.h"
#include "layers.h"

#include <string.h>

typedef struct {
  ReteUnet *net;
  const float *dlogits;
  int n, n_chunks;
  float **partial; /* (n_chunks) × (n_params) */
} BackwardJob;

typedef struct {
  float *a[UNET_MAX_LEVELS];    /* (C_l, H_l, W_l) */
  float *b[UNET_MAX_LEVELS];    /* (C_l, H_l, W_l) */
  float *dcat[UNET_MAX_LEVELS]; /* (2 C_l, H_l, W_l), l < L-1 */
} GradientScratch;

static inline const float *
weight_of (const ReteUnet *net, int tensor)
{
  return net->params + net->tensors[tensor].offset;
}

static inline float *
grad_of (float *grads, const ReteUnet *net, int tensor)
{
  return grads + net->tensors[tensor].offset;
}

static float *
zeroed (float *buffer, gsize n)
{
  memset (buffer, 0, sizeof (float) * n);
  return buffer;
}

static void
backward_one (const ReteUnet *net, const UnetActivations *act, const float *dlogits,
              const GradientScratch *s, float *grads)
{
  const ReteUnetConfig *cf = &net->config;
  int L = cf->levels, F = cf->base_filters, k = cf->convs_per_block;
  int H = net->act_height, W = net->act_width;
  for (int l = 0; l < L - 1; l++)
    zeroed (s->dcat[l], (gsize) 2 * (F << l) * (H >> l) * (W >> l));

  /* head: 1×1 convolution */
  const float *x_last = L > 1 ? act->dec[0][k - 1] : act->enc[0][k - 1];
  float *cur = zeroed (s->a[0], (gsize) F * H * W);
  conv1x1_backward (cur, grad_of (grads, net, net->head_w), grad_of (grads, net, net->head_w + 1),
                    dlogits, x_last, weight_of (net, net->head_w), 1, F, 1, H, W);

  /* decoder, from the top level down */
  for (int l = 0; l < L - 1; l++)
    {
      int Hl = H >> l, Wl = W >> l, C = F << l;
      gsize S = (gsize) Hl * Wl;
      for (int j = k - 1; j >= 0; j--)
        {
          int w = net->dec_w[l][j];
          if (cf->activation)
            relu_backward_inplace (cur, act->dec[l][j], C * S);
          const float *inp = j == 0 ? act->cat[l] : act->dec[l][j - 1];
          float *gin = j == 0 ? s->dcat[l] : zeroed (cur == s->a[l] ? s->b[l] : s->a[l], C * S);
          conv3x3_backward (gin, grad_of (grads, net, w), grad_of (grads, net, w + 1), cur, inp,
                            weight_of (net, w), 1, j == 0 ? 2 * C : C, C, Hl, Wl);
          cur = gin;
        }
      /* the second half of the concatenation came from the up-convolution of level l+1 */
      int w = net->up_w[l + 1];
      const float *x_below = l + 1 < L - 1 ? act->dec[l + 1][k - 1] : act->enc[L - 1][k - 1];
      float *next = zeroed (s->a[l + 1], (gsize) 2 * C * S / 4);
      upconv2x2_backward (next, grad_of (grads, net, w), grad_of (grads, net, w + 1),
                          s->dcat[l] + C * S, x_below, weight_of (net, w), 1, 2 * C, C,
                          Hl / 2, Wl / 2);
      cur = next;
    }

  /* encoder, from the bottom up; the skip gradient waits in the first half of dcat[l] and the
   * max-pool of level l+1 adds its part there before level l is reached */
  for (int l = L - 1; l >= 0; l--)
    {
      int Hl = H >> l, Wl = W >> l, C = F << l;
      gsize S = (gsize) Hl * Wl;
      if (l < L - 1)
        cur = s->dcat[l];
      for (int j = k - 1; j >= 0; j--)
        {
          int w = net->enc_w[l][j];
          if (cf->activation)
            relu_backward_inplace (cur, act->enc[l][j], C * S);
          int c_in = j > 0 ? C : (l == 0 ? cf->in_channels : C / 2);
          const float *inp = j > 0 ? act->enc[l][j - 1] : (l == 0 ? act->input : act->pool[l]);
          float *gin = NULL;
          if (l > 0 || j > 0)
            gin = zeroed (cur == s->a[l] ? s->b[l] : s->a[l], (gsize) c_in * S);
          conv3x3_backward (gin, grad_of (grads, net, w), grad_of (grads, net, w + 1), cur, inp,
                            weight_of (net, w), 1, c_in, C, Hl, Wl);
          cur = gin;
        }
      if (l > 0)
        maxpool2x2_backward (s->dcat[l - 1], cur, act->enc[l - 1][k - 1], 1, C / 2, 2 * Hl,
                             2 * Wl);
    }
}

static void
backward_chunk (int first, int last, gpointer data)
{
  BackwardJob *job = data;
  const ReteUnet *net = job->net;
  int L = net->config.levels, F = net->config.base_filters;
  int H = net->act_height, W = net->act_width;
  gsize total = 0;
  for (int l = 0; l < L; l++)
    total += (gsize) (l < L - 1 ? 4 : 2) * (F << l) * (H >> l) * (W >> l);
  float *memory = g_new (float, total);
  GradientScratch s;
  memset (&s, 0, sizeof s);
  float *p = memory;
  for (int l = 0; l < L; l++)
    {
      gsize cs = (gsize) (F << l) * (H >> l) * (W >> l);
      s.a[l] = p, p += cs;
      s.b[l] = p, p += cs;
      if (l < L - 1)
        s.dcat[l] = p, p += 2 * cs;
    }
  gsize out_size = (gsize) H * W;
  for (int c = first; c < last; c++)
    {
      job->partial[c] = g_new0 (float, net->n_params);
      for (int i = job->n * c / job->n_chunks; i < job->n * (c + 1) / job->n_chunks; i++)
        backward_one (net, &net->acts[i], job->dlogits + i * out_size, &s, job->partial[c]);
    }
  g_free (memory);
}

gboolean
rete_unet_backward (ReteUnet *net, const float *dlogits, GError **error)
{
  if (net->acts == NULL || dlogits == NULL)
    {
      g_set_error (error, RETE_NN_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "%s", dlogits == NULL ? "no logit gradients given to the backward pass"
                                         : "backward pass without a forward pass before it");
      return FALSE;
    }
  int n_chunks = MIN (net->act_n, rete_thread_count ());
  float *partial[64] = { NULL };
  BackwardJob job = { net, dlogits, net->act_n, n_chunks, partial };
  rete_parallel_for (n_chunks, backward_chunk, &job);
  for (int c = 0; c < n_chunks; c++)
    {
      for (gsize i = 0; i < net->n_params; i++)
        net->grads[i] += partial[c][i];
      g_free (partial[c]);
    }
  return TRUE;
}
