/* conv.c — 3×3 ("same", zero padding 1) and 1×1 convolutions, forward and backward.
 *
 * The 3×3 convolution is lowered to matrix products (im2col, Chellapilla, Puri and Simard,
 * "High performance convolutional neural networks for document processing", 2006), with one
 * saving: only the three horizontal shifts are copied, for a band of output rows plus one row
 * above and below, as a (3·C_in, (rows+2)·W) matrix; the three vertical shifts are pointer
 * offsets of W columns into it, so out_band (C_out, rows·W) = bias + Σ_ky weight_ky (C_out,
 * 3·C_in) × columns[:, ky·W ...] by three cblas_sgemm calls. Bands keep the matrix within a few
 * megabytes. Backward: dweight_ky += dout_band × shifted columnsᵀ; shifted dcolumns +=
 * weight_kyᵀ × dout_band, folded back into dinp (col2im). Where the processor has AVX-512 the
 * direct kernels of conv_direct.c replace all of this but the bias gradient. The naive loops
 * stay beside each kernel; tests hold the two together.
 */
#include "layers.h"

#include <cblas.h>
#include <string.h>

/* Output pixels per band: about 3·C_in·BAND_PIXELS floats of columns (1.6 MB at C_in = 32). */
#define BAND_PIXELS 4096

static int
band_rows (int W, int H)
{
  int rows = MAX (1, BAND_PIXELS / MAX (W, 1));
  return MIN (rows, H);
}

/* Column matrix of the three horizontal shifts for output rows [y0, y0 + rows): row
 * (ci·3 + kx), column r·W + x holds inp[ci, y0 - 1 + r, x + kx - 1] for r in [0, rows + 2), or 0
 * outside the image. The vertical shift ky is then a pointer offset of ky·W columns: the taps
 * of row ky are columns [ky·W, ky·W + rows·W). One third of the copying of a full im2col. */
static void
im2col3 (float *columns, const float *inp /* (C_in, H, W) */, int C_in, int H, int W, int y0,
         int rows)
{
  gsize ld = (gsize) (rows + 2) * W;
  for (int ci = 0; ci < C_in; ci++)
    for (int kx = 0; kx < 3; kx++)
      {
        float *col = columns + ((gsize) ci * 3 + kx) * ld;
        int dx = kx - 1;
        for (int r = 0; r < rows + 2; r++)
          {
            int y = y0 - 1 + r;
            float *dst = col + (gsize) r * W;
            if (y < 0 || y >= H)
              {
                memset (dst, 0, sizeof (float) * W);
                continue;
              }
            const float *src = inp + ((gsize) ci * H + y) * W;
            if (dx == 0)
              memcpy (dst, src, sizeof (float) * W);
            else if (dx < 0)
              {
                dst[0] = 0.0f;
                memcpy (dst + 1, src, sizeof (float) * (W - 1));
              }
            else
              {
                memcpy (dst, src + 1, sizeof (float) * (W - 1));
                dst[W - 1] = 0.0f;
              }
          }
      }
}

/* The adjoint of im2col3: dinp += the columns folded back (rows outside the image dropped). */
static void
col2im3 (float *dinp /* (C_in, H, W) */, const float *columns, int C_in, int H, int W, int y0,
         int rows)
{
  gsize ld = (gsize) (rows + 2) * W;
  for (int ci = 0; ci < C_in; ci++)
    for (int kx = 0; kx < 3; kx++)
      {
        const float *col = columns + ((gsize) ci * 3 + kx) * ld;
        int dx = kx - 1;
        int x_first = dx < 0 ? 1 : 0, x_last = dx > 0 ? W - 1 : W;
        for (int r = 0; r < rows + 2; r++)
          {
            int y = y0 - 1 + r;
            if (y < 0 || y >= H)
              continue;
            const float *src = col + (gsize) r * W;
            float *dst = dinp + ((gsize) ci * H + y) * W;
            for (int x = x_first; x < x_last; x++)
              dst[x + dx] += src[x];
          }
      }
}

/* weight (C_out, C_in, 3, 3) -> per_row (3, C_out, C_in·3): the taps of kernel row ky as a
 * (C_out, 3·C_in) matrix matching the rows of im2col3. */
static float *
weights_by_row (const float *weight, int C_in, int C_out)
{
  float *w = g_new (float, 9 * C_in * C_out);
  for (int ky = 0; ky < 3; ky++)
    for (int co = 0; co < C_out; co++)
      for (int ci = 0; ci < C_in; ci++)
        for (int kx = 0; kx < 3; kx++)
          w[((gsize) ky * C_out + co) * 3 * C_in + ci * 3 + kx]
            = weight[((co * C_in + ci) * 3 + ky) * 3 + kx];
  return w;
}

/* bias gradient: dbias[c] += Σ_i d[c, i] over a (C, plane) block, in 16 float lanes (which
 * the compiler turns into vector adds) summed in double at the end; each lane sums plane/16
 * terms. (A plain sum in double stays scalar: the conversion of every term keeps the compiler
 * from vectorising it.) */
static void
add_channel_sums (float *dbias, const float *d /* (C, plane) */, int C, gsize plane)
{
  enum { LANES = 16 };
  for (int c = 0; c < C; c++)
    {
      const float *p = d + (gsize) c * plane;
      float lanes[LANES] = { 0 };
      gsize i = 0;
      for (; i + LANES <= plane; i += LANES)
        for (int k = 0; k < LANES; k++)
          lanes[k] += p[i + k];
      double sum = 0.0;
      for (; i < plane; i++)
        sum += p[i];
      for (int k = 0; k < LANES; k++)
        sum += lanes[k];
      dbias[c] += (float) sum;
    }
}

/* The direct kernel (conv_direct.c) where the processor has AVX-512, unless the environment
 * sets RETE_NN_GEMM (for tests and comparisons); decided once. */
static gboolean
use_direct_kernel (void)
{
  static gsize choice = 0; /* 1 + (direct kernel?) once decided */
  if (g_once_init_enter (&choice))
    g_once_init_leave (&choice, 1 + (conv3x3_direct_available () && g_getenv ("RETE_NN_GEMM") == NULL));
  return choice == 2;
}

/* The forward pass by im2col + GEMM, with the activation applied band by band while the band
 * is in cache. */
void
conv3x3_forward_gemm (float *out, const float *inp, const float *weight, const float *bias,
                     int N, int C_in, int C_out, int H, int W, gboolean relu)
{
  int rows = band_rows (W, H);
  int K = 3 * C_in;
  gsize plane = (gsize) H * W;
  float *columns = g_malloc (sizeof (float) * K * (rows + 2) * W);
  float *w_rows = weights_by_row (weight, C_in, C_out);
  for (int n = 0; n < N; n++)
    {
      const float *inp_n = inp + (gsize) n * C_in * plane;
      float *out_n = out + (gsize) n * C_out * plane;
      for (int y0 = 0; y0 < H; y0 += rows)
        {
          int r = MIN (rows, H - y0);
          gsize nb = (gsize) r * W;
          im2col3 (columns, inp_n, C_in, H, W, y0, r);
          /* out_band (C_out, r·W) = Σ_ky w_row[ky] (C_out, 3·C_in) × columns shifted by ky rows */
          for (int ky = 0; ky < 3; ky++)
            cblas_sgemm (CblasRowMajor, CblasNoTrans, CblasNoTrans, C_out, r * W, K, 1.0f,
                         w_rows + (gsize) ky * C_out * K, K, columns + (gsize) ky * W,
                         (r + 2) * W, ky == 0 ? 0.0f : 1.0f, out_n + (gsize) y0 * W, plane);
          for (int co = 0; co < C_out; co++)
            {
              float *o = out_n + co * plane + (gsize) y0 * W, b = bias[co];
              if (relu)
                for (gsize i = 0; i < nb; i++)
                  o[i] = o[i] + b > 0.0f ? o[i] + b : 0.0f;
              else
                for (gsize i = 0; i < nb; i++)
                  o[i] += b;
            }
        }
    }
  g_free (w_rows);
  g_free (columns);
}

void
conv3x3_forward_act (float *out, const float *inp, const float *weight, const float *bias,
                     int N, int C_in, int C_out, int H, int W, gboolean relu)
{
  if (use_direct_kernel ())
    conv3x3_forward_direct (out, inp, weight, bias, N, C_in, C_out, H, W, relu);
  else
    conv3x3_forward_gemm (out, inp, weight, bias, N, C_in, C_out, H, W, relu);
}

void
conv3x3_forward (float *out, const float *inp, const float *weight, const float *bias,
                 int N, int C_in, int C_out, int H, int W)
{
  conv3x3_forward_act (out, inp, weight, bias, N, C_in, C_out, H, W, FALSE);
}

void
conv3x3_backward (float *dinp, float *dweight, float *dbias, const float *dout,
                  const float *inp, const float *weight, int N, int C_in, int C_out, int H, int W)
{
  gsize plane = (gsize) H * W;
  for (int n = 0; n < N; n++)
    add_channel_sums (dbias, dout + (gsize) n * C_out * plane, C_out, plane);
  if (use_direct_kernel ())
    {
      if (dinp != NULL)
        conv3x3_backward_input_direct (dinp, dout, weight, N, C_in, C_out, H, W);
      conv3x3_backward_weight_direct (dweight, dout, inp, N, C_in, C_out, H, W);
      return;
    }
  int rows = band_rows (W, H);
  int K = 3 * C_in;
  gsize band = (gsize) K * (rows + 2) * W;
  float *columns = g_malloc (sizeof (float) * band);
  float *dcolumns = dinp != NULL ? g_malloc (sizeof (float) * band) : NULL;
  float *w_rows = weights_by_row (weight, C_in, C_out);
  float *dw_rows = g_new0 (float, 9 * C_in * C_out);
  for (int n = 0; n < N; n++)
    {
      const float *inp_n = inp + (gsize) n * C_in * plane;
      const float *dout_n = dout + (gsize) n * C_out * plane;
      for (int y0 = 0; y0 < H; y0 += rows)
        {
          int r = MIN (rows, H - y0);
          gsize ld = (gsize) (r + 2) * W;
          const float *dout_band = dout_n + (gsize) y0 * W;
          im2col3 (columns, inp_n, C_in, H, W, y0, r);
          if (dinp != NULL)
            memset (dcolumns, 0, sizeof (float) * K * ld);
          for (int ky = 0; ky < 3; ky++)
            {
              /* dw_row[ky] (C_out, 3·C_in) += dout_band (C_out, r·W) × shifted columnsᵀ */
              cblas_sgemm (CblasRowMajor, CblasNoTrans, CblasTrans, C_out, K, r * W, 1.0f,
                           dout_band, plane, columns + (gsize) ky * W, ld, 1.0f,
                           dw_rows + (gsize) ky * C_out * K, K);
              /* shifted dcolumns (3·C_in, r·W) += w_row[ky]ᵀ × dout_band */
              if (dinp != NULL)
                cblas_sgemm (CblasRowMajor, CblasTrans, CblasNoTrans, K, r * W, C_out, 1.0f,
                             w_rows + (gsize) ky * C_out * K, K, dout_band, plane, 1.0f,
                             dcolumns + (gsize) ky * W, ld);
            }
          if (dinp != NULL)
            col2im3 (dinp + (gsize) n * C_in * plane, dcolumns, C_in, H, W, y0, r);
        }
    }
  for (int ky = 0; ky < 3; ky++)
    for (int co = 0; co < C_out; co++)
      for (int ci = 0; ci < C_in; ci++)
        for (int kx = 0; kx < 3; kx++)
          dweight[((co * C_in + ci) * 3 + ky) * 3 + kx]
            += dw_rows[((gsize) ky * C_out + co) * K + ci * 3 + kx];
  g_free (dw_rows);
  g_free (w_rows);
  g_free (dcolumns);
  g_free (columns);
}

void
conv3x3_forward_naive (float *out, const float *inp, const float *weight, const float *bias,
                       int N, int C_in, int C_out, int H, int W)
{
  for (int n = 0; n < N; n++)
    for (int co = 0; co < C_out; co++)
      for (int y = 0; y < H; y++)
        for (int x = 0; x < W; x++)
          {
            double sum = bias[co];
            for (int ci = 0; ci < C_in; ci++)
              for (int ky = 0; ky < 3; ky++)
                for (int kx = 0; kx < 3; kx++)
                  {
                    int yy = y + ky - 1, xx = x + kx - 1;
                    if (yy < 0 || yy >= H || xx < 0 || xx >= W)
                      continue;
                    sum += (double) weight[((co * C_in + ci) * 3 + ky) * 3 + kx]
                           * inp[(((gsize) n * C_in + ci) * H + yy) * W + xx];
                  }
            out[(((gsize) n * C_out + co) * H + y) * W + x] = (float) sum;
          }
}

void
conv3x3_backward_naive (float *dinp, float *dweight, float *dbias, const float *dout,
                        const float *inp, const float *weight,
                        int N, int C_in, int C_out, int H, int W)
{
  for (int n = 0; n < N; n++)
    for (int co = 0; co < C_out; co++)
      for (int y = 0; y < H; y++)
        for (int x = 0; x < W; x++)
          {
            float d = dout[(((gsize) n * C_out + co) * H + y) * W + x];
            dbias[co] += d;
            for (int ci = 0; ci < C_in; ci++)
              for (int ky = 0; ky < 3; ky++)
                for (int kx = 0; kx < 3; kx++)
                  {
                    int yy = y + ky - 1, xx = x + kx - 1;
                    if (yy < 0 || yy >= H || xx < 0 || xx >= W)
                      continue;
                    gsize i = (((gsize) n * C_in + ci) * H + yy) * W + xx;
                    gsize w = ((co * C_in + ci) * 3 + ky) * 3 + kx;
                    dweight[w] += d * inp[i];
                    if (dinp != NULL)
                      dinp[i] += d * weight[w];
                  }
          }
}

/* 1×1: out_n (C_out, H·W) = weight (C_out, C_in) × inp_n (C_in, H·W) + bias. */
void
conv1x1_forward (float *out, const float *inp, const float *weight, const float *bias,
                 int N, int C_in, int C_out, int H, int W)
{
  gsize plane = (gsize) H * W;
  for (int n = 0; n < N; n++)
    {
      float *out_n = out + (gsize) n * C_out * plane;
      for (int co = 0; co < C_out; co++)
        for (gsize i = 0; i < plane; i++)
          out_n[co * plane + i] = bias[co];
      cblas_sgemm (CblasRowMajor, CblasNoTrans, CblasNoTrans, C_out, plane, C_in, 1.0f, weight,
                   C_in, inp + (gsize) n * C_in * plane, plane, 1.0f, out_n, plane);
    }
}

void
conv1x1_backward (float *dinp, float *dweight, float *dbias, const float *dout,
                  const float *inp, const float *weight, int N, int C_in, int C_out, int H, int W)
{
  gsize plane = (gsize) H * W;
  for (int n = 0; n < N; n++)
    {
      const float *dout_n = dout + (gsize) n * C_out * plane;
      add_channel_sums (dbias, dout_n, C_out, plane);
      cblas_sgemm (CblasRowMajor, CblasNoTrans, CblasTrans, C_out, C_in, plane, 1.0f, dout_n,
                   plane, inp + (gsize) n * C_in * plane, plane, 1.0f, dweight, C_in);
      if (dinp != NULL)
        cblas_sgemm (CblasRowMajor, CblasTrans, CblasNoTrans, C_in, plane, C_out, 1.0f, weight,
                     C_in, dout_n, plane, 1.0f, dinp + (gsize) n * C_in * plane, plane);
    }
}

void
conv1x1_forward_naive (float *out, const float *inp, const float *weight, const float *bias,
                       int N, int C_in, int C_out, int H, int W)
{
  gsize plane = (gsize) H * W;
  for (int n = 0; n < N; n++)
    for (int co = 0; co < C_out; co++)
      for (gsize i = 0; i < plane; i++)
        {
          double sum = bias[co];
          for (int ci = 0; ci < C_in; ci++)
            sum += (double) weight[co * C_in + ci] * inp[((gsize) n * C_in + ci) * plane + i];
          out[((gsize) n * C_out + co) * plane + i] = (float) sum;
        }
}

void
conv1x1_backward_naive (float *dinp, float *dweight, float *dbias, const float *dout,
                        const float *inp, const float *weight,
                        int N, int C_in, int C_out, int H, int W)
{
  gsize plane = (gsize) H * W;
  for (int n = 0; n < N; n++)
    for (int co = 0; co < C_out; co++)
      for (gsize i = 0; i < plane; i++)
        {
          float d = dout[((gsize) n * C_out + co) * plane + i];
          dbias[co] += d;
          for (int ci = 0; ci < C_in; ci++)
            {
              gsize j = ((gsize) n * C_in + ci) * plane + i;
              dweight[co * C_in + ci] += d * inp[j];
              if (dinp != NULL)
                dinp[j] += d * weight[co * C_in + ci];
            }
        }
}
