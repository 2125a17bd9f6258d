/* unet.c — the U-Net builder (Ronneberger, Fischer and Brox, MICCAI 2015): configuration
 * checks, the parameter size table (one flat buffer, gradients mirroring it), He
 * initialisation and the accessors. Forward: unet_forward.c; backward: unet_backward.c.
 * Architecture: see rete_nn.h.
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
