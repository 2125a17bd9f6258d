/* gauss.c — separable Gaussian blur and the 1-D convolution passes the filters share.
 *
 * The kernels are sampled Gaussians truncated at 4 sigma (radius int (4 sigma + 0.5)) and
 * their first and second derivatives, built exactly as scipy.ndimage.gaussian_filter builds
 * them, and borders are read as scipy.ndimage's 'reflect' mode (d c b a | a b c d | d c b a),
 * so that results match scipy/skimage to float rounding.
 * Halo: a blur of width sigma reads rete_gauss_radius (sigma) pixels past a tile.
 *
 * Speed: one horizontal pass, then one vertical pass; each output row is an independent job
 * for rete_parallel_for. Inner loops run along x over contiguous floats with the tap outside,
 * so the compiler vectorises them; symmetric kernels add the two mirrored taps first.
 */
#include "filters_private.h"

#include <math.h>
#include <string.h>

int
rete_gauss_radius (double sigma)
{
  return (int) (RETE_GAUSS_TRUNCATE * sigma + 0.5);
}

float *
rete_gauss_kernel (double sigma, int order, int *radius)
{
  int r = rete_gauss_radius (sigma);
  double *phi = g_new (double, 2 * r + 1);
  double sum = 0, s2 = sigma * sigma;
  for (int i = -r; i <= r; i++)
    sum += phi[i + r] = exp (-0.5 * i * i / s2);
  float *kernel = g_new (float, 2 * r + 1);
  for (int i = -r; i <= r; i++)
    {
      double p = phi[i + r] / sum, x = i;
      /* scipy's derivative polynomials q(x) of the normalised sampled Gaussian */
      double q = order == 0 ? 1.0 : order == 1 ? -x / s2 : x * x / (s2 * s2) - 1.0 / s2;
      kernel[i + r] = (float) (q * p);
    }
  g_free (phi);
  *radius = r;
  return kernel;
}

typedef struct {
  const float *in;
  float *out;
  int width, height;
  const float *kernel; /* centre tap: kernel[0] is x = 0 */
  int radius, parity;
} Pass;

/* out[x] = sum_t k[t] in[x - t], over the taps t = -r..r. */
RETE_VECTOR_CLONES static void
rows_range (int first, int last, gpointer data)
{
  const Pass *p = data;
  int w = p->width, r = p->radius;
  const float *k = p->kernel;
  float *buffer = g_new (float, w + 2 * r);
  const float *c = buffer + r;
  for (int row = first; row < last; row++)
    {
      const float *src = p->in + (gsize) row * w;
      float *dst = p->out + (gsize) row * w;
      memcpy (buffer + r, src, w * sizeof (float));
      for (int i = 0; i < r; i++)
        {
          buffer[i] = src[rete_reflect_index (i - r, w)];
          buffer[w + r + i] = src[rete_reflect_index (w + i, w)];
        }
      for (int x = 0; x < w; x++)
        dst[x] = k[0] * c[x];
      for (int t = 1; t <= r; t++)
        {
          float kt = k[t];
          if (p->parity > 0)
            for (int x = 0; x < w; x++)
              dst[x] += kt * (c[x - t] + c[x + t]);
          else
            for (int x = 0; x < w; x++)
              dst[x] += kt * (c[x - t] - c[x + t]);
        }
    }
  g_free (buffer);
}

typedef struct {
  const float *in;
  float *out[3];
  int width;
  const float *kernel[3]; /* centre taps; parities +1, -1, +1 */
  int radius;
} Pass3;

/* The rows filtered by G, G' and G'' of one width in one sweep: each padded row is read once. */
RETE_VECTOR_CLONES static void
rows3_range (int first, int last, gpointer data)
{
  const Pass3 *p = data;
  int w = p->width, r = p->radius;
  const float *k0 = p->kernel[0], *k1 = p->kernel[1], *k2 = p->kernel[2];
  float *buffer = g_new (float, w + 2 * r);
  const float *c = buffer + r;
  for (int row = first; row < last; row++)
    {
      const float *src = p->in + (gsize) row * w;
      float *d0 = p->out[0] + (gsize) row * w, *d1 = p->out[1] + (gsize) row * w;
      float *d2 = p->out[2] + (gsize) row * w;
      memcpy (buffer + r, src, w * sizeof (float));
      for (int i = 0; i < r; i++)
        {
          buffer[i] = src[rete_reflect_index (i - r, w)];
          buffer[w + r + i] = src[rete_reflect_index (w + i, w)];
        }
      for (int x = 0; x < w; x++)
        {
          d0[x] = k0[0] * c[x];
          d1[x] = k1[0] * c[x];
          d2[x] = k2[0] * c[x];
        }
      for (int t = 1; t <= r; t++)
        {
          float a = k0[t], b = k1[t], e = k2[t];
          for (int x = 0; x < w; x++)
            {
              float sum = c[x - t] + c[x + t], difference = c[x - t] - c[x + t];
              d0[x] += a * sum;
              d1[x] += b * difference;
              d2[x] += e * sum;
            }
        }
    }
  g_free (buffer);
}

void
rete_convolve_rows3 (const float *in, float *out0, float *out1, float *out2, int width,
                     int height, const float *k0, const float *k1, const float *k2, int radius)
{
  Pass3 p = { in, { out0, out1, out2 }, width, { k0 + radius, k1 + radius, k2 + radius }, radius };
  rete_parallel_for (height, rows3_range, &p);
}

RETE_VECTOR_CLONES void
rete_convolve_column_row (const float *plane, int width, int height, int y,
                          const float *kernel, int radius, int parity, float *dst)
{
  const float *k = kernel + radius;
  const float *centre = plane + (gsize) y * width;
  for (int x = 0; x < width; x++)
    dst[x] = k[0] * centre[x];
  for (int t = 1; t <= radius; t++)
    {
      const float *above = plane + (gsize) rete_reflect_index (y - t, height) * width;
      const float *below = plane + (gsize) rete_reflect_index (y + t, height) * width;
      float kt = k[t];
      if (parity > 0)
        for (int x = 0; x < width; x++)
          dst[x] += kt * (above[x] + below[x]);
      else
        for (int x = 0; x < width; x++)
          dst[x] += kt * (above[x] - below[x]);
    }
}

static void
columns_range (int first, int last, gpointer data)
{
  const Pass *p = data;
  int w = p->width, h = p->height;
  for (int job = first; job < last; job++)
    rete_convolve_column_row (p->in + (gsize) (job / h) * w * h, w, h, job % h,
                              p->kernel - p->radius, p->radius, p->parity,
                              p->out + (gsize) job * w);
}

void
rete_convolve_rows (const float *in, float *out, int width, int height, int n_planes,
                    const float *kernel, int radius, int parity)
{
  Pass p = { in, out, width, height, kernel + radius, radius, parity };
  rete_parallel_for (n_planes * height, rows_range, &p);
}

void
rete_convolve_columns (const float *in, float *out, int width, int height, int n_planes,
                       const float *kernel, int radius, int parity)
{
  Pass p = { in, out, width, height, kernel + radius, radius, parity };
  rete_parallel_for (n_planes * height, columns_range, &p);
}

ReteImage *
rete_gaussian_blur (const ReteImage *image, double sigma, GError **error)
{
  if (image == NULL || image->data == NULL)
    {
      g_set_error_literal (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                           "Gaussian blur: no image was given");
      return NULL;
    }
  if (!isfinite (sigma) || sigma > 1000)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "Gaussian blur: sigma %g is not usable; give a width between 0 and 1000 "
                   "pixels (0 or less means no blur)", sigma);
      return NULL;
    }
  if (!rete_image_check_finite (image, "the image to blur", error))
    return NULL;
  if (sigma <= 0 || rete_gauss_radius (sigma) == 0)
    return rete_image_copy (image, error);

  ReteImage *out = rete_image_new_like (image, image->channels, error);
  if (out == NULL)
    return NULL;
  gsize n = rete_image_n_pixels (image) * image->channels;
  float *tmp = g_try_malloc (n * sizeof (float));
  if (tmp == NULL)
    {
      rete_image_free (out);
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_NO_MEMORY,
                   "Gaussian blur: not enough memory for a %d×%d working image",
                   image->width, image->height);
      return NULL;
    }
  int r;
  float *kernel = rete_gauss_kernel (sigma, 0, &r);
  rete_convolve_rows (image->data, tmp, image->width, image->height, image->channels,
                      kernel, r, +1);
  rete_convolve_columns (tmp, out->data, image->width, image->height, image->channels,
                         kernel, r, +1);
  g_free (kernel);
  g_free (tmp);
  return out;
}
