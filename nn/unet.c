/* unet.c — the U-Net builder (Ronneberger, Fischer and Brox, MICCAI 2015): the parameter size
 * table, He initialisation, and the batch forward that keeps activations for backward.
 * The backward pass is in unet_backward.c. Architecture: see rete_nn.h.
 *
 * Threading: the images of a batch are split over rete_thread_count() threads with
 * rete_parallel_for; each image runs on one thread with OpenBLAS held to one thread.
 */
#include "unet_private.h"
#include "layers.h"

#include <math.h>
#include <string.h>

G_DEFINE_QUARK (rete-nn-error-quark, rete_nn_error)

void
rete_unet_config_init (ReteUnetConfig *config)
{
  config->levels = 3;
  config->base_filters = 16;
  config->convs_per_block = 2;
  config->activation = TRUE;
  config->in_channels = 1;
}

gboolean
rete_unet_config_check (const ReteUnetConfig *config, GError **error)
{
  const char *what = NULL;
  int value = 0;
  if (config == NULL)
    {
      g_set_error (error, RETE_NN_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "no network configuration given");
      return FALSE;
    }
  if (config->levels < 1 || config->levels > UNET_MAX_LEVELS)
    what = "levels (1 to 5)", value = config->levels;
  else if (config->base_filters < 1 || config->base_filters > 64)
    what = "base filters (1 to 64)", value = config->base_filters;
  else if (config->convs_per_block < 1 || config->convs_per_block > 2)
    what = "convolutions per block (1 or 2)", value = config->convs_per_block;
  else if (config->in_channels != 1 && config->in_channels != 3)
    what = "input channels (1 or 3)", value = config->in_channels;
  else if (config->activation != TRUE && config->activation != FALSE)
    what = "activation (TRUE for ReLU or FALSE for identity)", value = config->activation;
  if (what != NULL)
    {
      g_set_error (error, RETE_NN_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "U-Net %s is %d, which is out of range", what, value);
      return FALSE;
    }
  return TRUE;
}

int
rete_unet_config_multiple (const ReteUnetConfig *config)
{
  return 1 << (config->levels - 1);
}

static int
add_tensor (ReteUnet *net, const char *name, int d0, int d1, int d2, int d3, int n_dims)
{
  int i = net->n_tensors++;
  UnetTensor *t = &net->tensors[i];
  g_strlcpy (t->name, name, sizeof t->name);
  int shape[4] = { d0, d1, d2, d3 };
  t->size = 1;
  for (int k = 0; k < 4; k++)
    {
      t->shape[k] = k < n_dims ? shape[k] : 0;
      if (k < n_dims)
        t->size *= shape[k];
    }
  t->n_dims = n_dims;
  t->offset = net->n_params;
  net->n_params += t->size;
  return i;
}

/* A weight (C_out, C_in, kh, kw) or, for the transposed convolution, (C_in, C_out, 2, 2),
 * then its bias (C_out). Returns the weight's index. */
static int
add_layer (ReteUnet *net, const char *prefix, int d0, int d1, int kernel, int c_out)
{
  char name[32];
  g_snprintf (name, sizeof name, "%s.weight", prefix);
  int w = add_tensor (net, name, d0, d1, kernel, kernel, 4);
  g_snprintf (name, sizeof name, "%s.bias", prefix);
  add_tensor (net, name, c_out, 0, 0, 0, 1);
  return w;
}

/* splitmix64 (Steele, Lea and Flood, OOPSLA 2014): a small, portable, seedable generator. */
static guint64
splitmix64 (guint64 *state)
{
  guint64 z = (*state += 0x9E3779B97F4A7C15ull);
  z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9ull;
  z = (z ^ (z >> 27)) * 0x94D049BB133111EBull;
  return z ^ (z >> 31);
}

static double
uniform_open (guint64 *state)
{
  return ((splitmix64 (state) >> 11) + 0.5) * (1.0 / 9007199254740992.0);
}

/* He normal: weights ~ N(0, 2 / fan_in) (He et al., "Delving deep into rectifiers", ICCV 2015),
 * by the Box–Muller transform. fan_in is the number of inputs summed into one output: C_in·9 for
 * 3×3, C_in for 1×1 and for the 2×2 stride-2 transposed convolution (its windows do not overlap,
 * so each output sees one tap per input channel). Biases start at zero. */
static void
he_init (ReteUnet *net, guint64 seed)
{
  guint64 state = seed;
  memset (net->params, 0, sizeof (float) * net->n_params);
  for (int i = 0; i < net->n_tensors; i++)
    {
      UnetTensor *t = &net->tensors[i];
      if (t->n_dims != 4)
        continue;
      gboolean transposed = g_str_has_prefix (t->name, "up");
      int fan_in = transposed ? t->shape[0] : t->shape[1] * t->shape[2] * t->shape[3];
      double std = sqrt (2.0 / fan_in);
      float *w = net->params + t->offset;
      for (gsize k = 0; k < t->size; k++)
        {
          double u1 = uniform_open (&state), u2 = uniform_open (&state);
          w[k] = (float) (std * sqrt (-2.0 * log (u1)) * cos (2.0 * G_PI * u2));
        }
    }
}

ReteUnet *
rete_unet_new (const ReteUnetConfig *config, guint64 seed, GError **error)
{
  if (!rete_unet_config_check (config, error))
    return NULL;
  nn_blas_single_thread ();
  ReteUnet *net = g_new0 (ReteUnet, 1);
  net->config = *config;
  int L = config->levels, F = config->base_filters, k = config->convs_per_block;
  char prefix[16];
  /* The size table, in the order of the forward pass (and of the file). */
  for (int l = 0; l < L; l++)
    {
      int c = F << l, c_in = l == 0 ? config->in_channels : c / 2;
      for (int j = 0; j < k; j++)
        {
          g_snprintf (prefix, sizeof prefix, "enc%d.conv%d", l, j);
          net->enc_w[l][j] = add_layer (net, prefix, c, j == 0 ? c_in : c, 3, c);
        }
    }
  for (int l = L - 2; l >= 0; l--)
    {
      int c = F << l;
      g_snprintf (prefix, sizeof prefix, "up%d", l + 1);
      net->up_w[l + 1] = add_layer (net, prefix, 2 * c, c, 2, c);
      for (int j = 0; j < k; j++)
        {
          g_snprintf (prefix, sizeof prefix, "dec%d.conv%d", l, j);
          net->dec_w[l][j] = add_layer (net, prefix, c, j == 0 ? 2 * c : c, 3, c);
        }
    }
  net->head_w = add_layer (net, "head", 1, F, 1, 1);
  net->params = g_new (float, net->n_params);
  net->grads = g_new0 (float, net->n_params);
  he_init (net, seed);
  return net;
}

void
rete_unet_release_activations (ReteUnet *net)
{
  g_clear_pointer (&net->act_memory, g_free);
  g_clear_pointer (&net->acts, g_free);
  net->act_n = net->act_height = net->act_width = 0;
}

void
rete_unet_free (ReteUnet *net)
{
  if (net == NULL)
    return;
  rete_unet_release_activations (net);
  g_free (net->params);
  g_free (net->grads);
  g_free (net);
}

const ReteUnetConfig *
rete_unet_config (const ReteUnet *net)
{
  return &net->config;
}

gsize
rete_unet_n_params (const ReteUnet *net)
{
  return net->n_params;
}

float *
rete_unet_params (ReteUnet *net)
{
  return net->params;
}

float *
rete_unet_grads (ReteUnet *net)
{
  return net->grads;
}

void
rete_unet_zero_grad (ReteUnet *net)
{
  memset (net->grads, 0, sizeof (float) * net->n_params);
}

int
rete_unet_n_tensors (const ReteUnet *net)
{
  return net->n_tensors;
}

const char *
rete_unet_tensor_name (const ReteUnet *net, int i, gsize *offset, int shape[4], int *n_dims)
{
  if (net == NULL || i < 0 || i >= net->n_tensors)
    return NULL;
  const UnetTensor *t = &net->tensors[i];
  if (offset != NULL)
    *offset = t->offset;
  if (shape != NULL)
    memcpy (shape, t->shape, sizeof t->shape);
  if (n_dims != NULL)
    *n_dims = t->n_dims;
  return t->name;
}

int
rete_unet_find_tensor (const ReteUnet *net, const char *name)
{
  for (int i = 0; i < net->n_tensors; i++)
    if (strcmp (net->tensors[i].name, name) == 0)
      return i;
  return -1;
}

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
