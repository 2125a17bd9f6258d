/* layers.c — 2×2 stride-2 transposed convolution (the U-Net's "up-convolution", Ronneberger
 * et al. 2015, §2), ReLU, 2×2 max-pool and channel concatenation, forward and backward.
 *
 * The transposed convolution has no overlap between windows (kernel = stride = 2), so it is one
 * matrix product: T (4·C_out, H·W) = weightᵀ (4·C_out, C_in) × inp (C_in, H·W), then each row
 * (co, a, b) of T is scattered to out[co, 2y+a, 2x+b]. Backward gathers dout into the same
 * layout and runs the two adjoint products.
 */
#include "layers.h"

#include <cblas.h>
#include <string.h>

void
nn_blas_single_thread (void)
{
  static gsize done = 0;
  if (g_once_init_enter (&done))
    {
      openblas_set_num_threads (1);
      g_once_init_leave (&done, 1);
    }
}

/* Input rows per band of the scratch matrix T. */
static int
up_band_rows (int W, int H)
{
  return MIN (H, MAX (1, 4096 / MAX (W, 1)));
}

void
upconv2x2_forward (float *out, const float *inp, const float *weight, const float *bias,
                   int N, int C_in, int C_out, int H, int W)
{
  int rows = up_band_rows (W, H);
  int M = 4 * C_out;
  gsize plane = (gsize) H * W, out_plane = 4 * plane;
  float *t = g_malloc (sizeof (float) * M * rows * W);
  for (int n = 0; n < N; n++)
    {
      const float *inp_n = inp + (gsize) n * C_in * plane;
      float *out_n = out + (gsize) n * C_out * out_plane;
      for (int y0 = 0; y0 < H; y0 += rows)
        {
          int r = MIN (rows, H - y0), nb = r * W;
          cblas_sgemm (CblasRowMajor, CblasTrans, CblasNoTrans, M, nb, C_in, 1.0f, weight, M,
                       inp_n + (gsize) y0 * W, plane, 0.0f, t, nb);
          for (int co = 0; co < C_out; co++)
            for (int a = 0; a < 2; a++)
              for (int yy = 0; yy < r; yy++)
                {
                  float *dst = out_n + co * out_plane + (gsize) (2 * (y0 + yy) + a) * 2 * W;
                  const float *t0 = t + (gsize) (co * 4 + a * 2) * nb + (gsize) yy * W;
                  const float *t1 = t0 + nb;
                  float b = bias[co];
                  for (int x = 0; x < W; x++)
                    {
                      dst[2 * x] = t0[x] + b;
                      dst[2 * x + 1] = t1[x] + b;
                    }
                }
        }
    }
  g_free (t);
}

void
upconv2x2_backward (float *dinp, float *dweight, float *dbias, const float *dout,
                    const float *inp, const float *weight, int N, int C_in, int C_out, int H, int W)
{
  int rows = up_band_rows (W, H);
  int M = 4 * C_out;
  gsize plane = (gsize) H * W, out_plane = 4 * plane;
  float *t = g_malloc (sizeof (float) * M * rows * W);
  for (int n = 0; n < N; n++)
    {
      const float *inp_n = inp + (gsize) n * C_in * plane;
      const float *dout_n = dout + (gsize) n * C_out * out_plane;
      for (int co = 0; co < C_out; co++)
        {
          double sum = 0.0;
          for (gsize i = 0; i < out_plane; i++)
            sum += dout_n[co * out_plane + i];
          dbias[co] += (float) sum;
        }
      for (int y0 = 0; y0 < H; y0 += rows)
        {
          int r = MIN (rows, H - y0), nb = r * W;
          for (int co = 0; co < C_out; co++)
            for (int a = 0; a < 2; a++)
              for (int yy = 0; yy < r; yy++)
                {
                  const float *src = dout_n + co * out_plane + (gsize) (2 * (y0 + yy) + a) * 2 * W;
                  float *t0 = t + (gsize) (co * 4 + a * 2) * nb + (gsize) yy * W;
                  float *t1 = t0 + nb;
                  for (int x = 0; x < W; x++)
                    {
                      t0[x] = src[2 * x];
                      t1[x] = src[2 * x + 1];
                    }
                }
          /* dweight (C_in, 4·C_out) += inp_band (C_in, nb) × dTᵀ (nb, 4·C_out) */
          cblas_sgemm (CblasRowMajor, CblasNoTrans, CblasTrans, C_in, M, nb, 1.0f,
                       inp_n + (gsize) y0 * W, plane, t, nb, 1.0f, dweight, M);
          /* dinp_band (C_in, nb) += weight (C_in, 4·C_out) × dT (4·C_out, nb) */
          cblas_sgemm (CblasRowMajor, CblasNoTrans, CblasNoTrans, C_in, nb, M, 1.0f, weight, M,
                       t, nb, 1.0f, dinp + (gsize) n * C_in * plane + (gsize) y0 * W, plane);
        }
    }
  g_free (t);
}

void
upconv2x2_forward_naive (float *out, const float *inp, const float *weight, const float *bias,
                         int N, int C_in, int C_out, int H, int W)
{
  int W2 = 2 * W, H2 = 2 * H;
  for (int n = 0; n < N; n++)
    for (int co = 0; co < C_out; co++)
      for (int y = 0; y < H2; y++)
        for (int x = 0; x < W2; x++)
          {
            double sum = bias[co];
            for (int ci = 0; ci < C_in; ci++)
              sum += (double) inp[(((gsize) n * C_in + ci) * H + y / 2) * W + x / 2]
                     * weight[((ci * C_out + co) * 2 + y % 2) * 2 + x % 2];
            out[(((gsize) n * C_out + co) * H2 + y) * W2 + x] = (float) sum;
          }
}

void
upconv2x2_backward_naive (float *dinp, float *dweight, float *dbias, const float *dout,
                          const float *inp, const float *weight,
                          int N, int C_in, int C_out, int H, int W)
{
  int W2 = 2 * W, H2 = 2 * H;
  for (int n = 0; n < N; n++)
    for (int co = 0; co < C_out; co++)
      for (int y = 0; y < H2; y++)
        for (int x = 0; x < W2; x++)
          {
            float d = dout[(((gsize) n * C_out + co) * H2 + y) * W2 + x];
            dbias[co] += d;
            for (int ci = 0; ci < C_in; ci++)
              {
                gsize i = (((gsize) n * C_in + ci) * H + y / 2) * W + x / 2;
                gsize w = ((ci * C_out + co) * 2 + y % 2) * 2 + x % 2;
                dweight[w] += d * inp[i];
                dinp[i] += d * weight[w];
              }
          }
}

void
relu_forward (float *out, const float *inp, gsize n)
{
  for (gsize i = 0; i < n; i++)
    out[i] = inp[i] > 0.0f ? inp[i] : 0.0f;
}

void
relu_backward (float *dinp, const float *dout, const float *out, gsize n)
{
  for (gsize i = 0; i < n; i++)
    dinp[i] += out[i] > 0.0f ? dout[i] : 0.0f;
}

void
relu_backward_inplace (float *dout, const float *out, gsize n)
{
  /* a select, not a branch: the compiler vectorises it, and the signs of `out` are close
   * to random, so a branch would be mispredicted about half the time */
  for (gsize i = 0; i < n; i++)
    dout[i] = out[i] > 0.0f ? dout[i] : 0.0f;
}

/* Index (0..3) of the first maximum of a 2×2 window in the order (0,0) (0,1) (1,0) (1,1). */
static inline int
window_argmax (const float *row0, const float *row1, int x)
{
  float v[4] = { row0[2 * x], row0[2 * x + 1], row1[2 * x], row1[2 * x + 1] };
  int best = 0;
  for (int k = 1; k < 4; k++)
    if (v[k] > v[best])
      best = k;
  return best;
}

void
maxpool2x2_forward (float *out, const float *inp, int N, int C, int H, int W)
{
  int Ho = H / 2, Wo = W / 2;
  for (gsize p = 0; p < (gsize) N * C; p++)
    for (int y = 0; y < Ho; y++)
      {
        const float *row0 = inp + (p * H + 2 * y) * W, *row1 = row0 + W;
        float *dst = out + (p * Ho + y) * Wo;
        for (int x = 0; x < Wo; x++)
          {
            float m = row0[2 * x];
            m = row0[2 * x + 1] > m ? row0[2 * x + 1] : m;
            m = row1[2 * x] > m ? row1[2 * x] : m;
            m = row1[2 * x + 1] > m ? row1[2 * x + 1] : m;
            dst[x] = m;
          }
      }
}

/* Backward in 4 windows at a time with masks instead of branches: which element of a window
 * wins is close to random in a network's activations, so the branches of window_argmax were
 * mispredicted about half the time (5 % of a training step). The same comparisons in the same
 * order (strictly greater, so ties go to the first), hence the same winners; the losers get
 * += 0. GCC's generic vectors: SSE2 on any x86-64, NEON on ARM. */
typedef float pool_v4 __attribute__ ((vector_size (16)));
typedef int pool_vi4 __attribute__ ((vector_size (16)));

static inline pool_v4
pool_select (pool_vi4 mask, pool_v4 yes, pool_v4 no)
{
  return (pool_v4) (((pool_vi4) yes & mask) | ((pool_vi4) no & ~mask));
}

static inline pool_v4
pool_load (const float *p)
{
  pool_v4 v;
  memcpy (&v, p, sizeof v);
  return v;
}

static inline void
pool_add (float *p, pool_v4 v)
{
  v += pool_load (p);
  memcpy (p, &v, sizeof v);
}

void
maxpool2x2_backward (float *dinp, const float *dout, const float *inp, int N, int C, int H, int W)
{
  int Ho = H / 2, Wo = W / 2;
  for (gsize p = 0; p < (gsize) N * C; p++)
    for (int y = 0; y < Ho; y++)
      {
        const float *row0 = inp + (p * H + 2 * y) * W, *row1 = row0 + W;
        float *d0 = dinp + (p * H + 2 * y) * W, *d1 = d0 + W;
        const float *g = dout + (p * Ho + y) * Wo;
        int x = 0;
        for (; x + 4 <= Wo; x += 4)
          {
            pool_v4 u0 = pool_load (row0 + 2 * x), u1 = pool_load (row0 + 2 * x + 4);
            pool_v4 l0 = pool_load (row1 + 2 * x), l1 = pool_load (row1 + 2 * x + 4);
            /* the 4 windows' elements (0,0) (0,1) (1,0) (1,1), one vector each */
            pool_v4 a = __builtin_shuffle (u0, u1, (pool_vi4) { 0, 2, 4, 6 });
            pool_v4 b = __builtin_shuffle (u0, u1, (pool_vi4) { 1, 3, 5, 7 });
            pool_v4 c = __builtin_shuffle (l0, l1, (pool_vi4) { 0, 2, 4, 6 });
            pool_v4 d = __builtin_shuffle (l0, l1, (pool_vi4) { 1, 3, 5, 7 });
            pool_vi4 over_b = b > a;
            pool_v4 m = pool_select (over_b, b, a);
            pool_vi4 over_c = c > m;
            m = pool_select (over_c, c, m);
            pool_vi4 win_d = d > m;
            pool_vi4 win_c = over_c & ~win_d;
            pool_vi4 win_b = over_b & ~over_c & ~win_d;
            pool_vi4 win_a = ~over_b & ~over_c & ~win_d;
            pool_vi4 grad = (pool_vi4) pool_load (g + x);
            pool_v4 ga = (pool_v4) (grad & win_a), gb = (pool_v4) (grad & win_b);
            pool_v4 gc = (pool_v4) (grad & win_c), gd = (pool_v4) (grad & win_d);
            pool_add (d0 + 2 * x, __builtin_shuffle (ga, gb, (pool_vi4) { 0, 4, 1, 5 }));
            pool_add (d0 + 2 * x + 4, __builtin_shuffle (ga, gb, (pool_vi4) { 2, 6, 3, 7 }));
            pool_add (d1 + 2 * x, __builtin_shuffle (gc, gd, (pool_vi4) { 0, 4, 1, 5 }));
            pool_add (d1 + 2 * x + 4, __builtin_shuffle (gc, gd, (pool_vi4) { 2, 6, 3, 7 }));
          }
        for (; x < Wo; x++)
          {
            int k = window_argmax (row0, row1, x);
            float *d = k < 2 ? d0 : d1;
            d[2 * x + (k & 1)] += g[x];
          }
      }
}

void
concat_forward (float *out, const float *a, const float *b, int N, int C_a, int C_b, int H, int W)
{
  gsize plane = (gsize) H * W;
  for (int n = 0; n < N; n++)
    {
      float *o = out + (gsize) n * (C_a + C_b) * plane;
      memcpy (o, a + (gsize) n * C_a * plane, sizeof (float) * C_a * plane);
      memcpy (o + C_a * plane, b + (gsize) n * C_b * plane, sizeof (float) * C_b * plane);
    }
}

void
concat_backward (float *da, float *db, const float *dout, int N, int C_a, int C_b, int H, int W)
{
  gsize plane = (gsize) H * W;
  for (int n = 0; n < N; n++)
    {
      const float *d = dout + (gsize) n * (C_a + C_b) * plane;
      float *pa = da + (gsize) n * C_a * plane, *pb = db + (gsize) n * C_b * plane;
      for (gsize i = 0; i < C_a * plane; i++)
        pa[i] += d[i];
      for (gsize i = 0; i < C_b * plane; i++)
        pb[i] += d[C_a * plane + i];
    }
}
