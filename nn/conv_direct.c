/* conv_direct.c — the 3×3 convolution as a direct kernel for processors with AVX-512: the
 * forward (conv3x3_forward_act), and the input and weight gradients of backward
 * (conv3x3_backward), where the processor has it; the im2col + cblas_sgemm path in conv.c
 * serves everywhere else.
 *
 * Why: with few channels (16–64) most of the time of im2col + GEMM goes to copying — our
 * column matrix, then OpenBLAS packing it again (perf: packing 26 %, copies 14 %, kernel 40 %).
 * A direct kernel reads the input rows in place: out[co, y, x..x+31] accumulates
 * Σ_ci Σ_ky Σ_kx w[co, ci, ky, kx] · in[ci, y+ky-1, x+kx-1 .. +31] in registers, 8 output
 * channels × 32 pixels at a time (16 vector accumulators), each input vector loaded once for
 * the 8 channels. The input is copied once per band of rows into a zero-bordered buffer (one
 * column each side, one row above and below) so the loop has no edge tests; rows are padded to
 * whole blocks so that the last block of a row reads only the buffer (its extra lanes are
 * dropped). Bias and ReLU are applied when storing. The naive version is conv3x3_forward_naive
 * (conv.c); tests compare all three.
 */
#include "layers.h"

#include <string.h>

#if defined(__GNUC__) && (defined(__x86_64__) || defined(__i386__))
#define HAVE_DIRECT 1

#include <immintrin.h>

#define VL 16       /* floats per vector */
#define XB (2 * VL) /* pixels per block */
#define CB 8        /* output channels per block */

typedef float v16 __attribute__ ((vector_size (VL * sizeof (float))));
typedef int vi16 __attribute__ ((vector_size (VL * sizeof (int))));

__attribute__ ((target ("avx512f,fma"))) static inline v16
load16 (const float *p)
{
  v16 v;
  memcpy (&v, p, sizeof v);
  return v;
}

/* dst[0 .. n) = [dst +] s (n ≤ VL; nothing when n ≤ 0). */
__attribute__ ((target ("avx512f,fma"))) static inline void
store_lanes (float *dst, v16 s, int n, gboolean accumulate)
{
  float lanes[VL];
  if (n <= 0)
    return;
  if (n == VL)
    {
      if (accumulate)
        s += load16 (dst);
      memcpy (dst, &s, sizeof s);
      return;
    }
  if (accumulate)
    {
      memset (lanes, 0, sizeof lanes);
      memcpy (lanes, dst, sizeof (float) * n);
      s += load16 (lanes);
    }
  memcpy (lanes, &s, sizeof s);
  memcpy (dst, lanes, sizeof (float) * n);
}

/* Output rows [y0, y0 + rows) of output channels [cb, cb + nc), nc ≤ CB. pad holds input rows
 * y0-1 .. y0+rows (zero outside the image), each `stride` floats with a zero first column, and
 * one readable row after the last channel's; wt (C_in, 9, CB) holds the weights of this channel
 * block, zero for channels past nc. A block of 2 vectors is 32 pixels of one row, or, when a
 * row fits one vector (W ≤ 16, the lowest level of the U-Net), the same pixels of two rows, so
 * that no half of the accumulators works on padding (a last odd row reads the next row of the
 * buffer and drops it). */
__attribute__ ((target ("avx512f,fma"))) static void
direct_band (float *out_n, const float *pad, const float *wt, const float *bias, int C_in,
             int rows, int stride, int H, int W, int y0, int cb, int nc, gboolean relu,
             gboolean accumulate)
{
  gsize plane = (gsize) H * W;
  gsize pad_plane = (gsize) (rows + 2) * stride;
  gboolean two_rows = W <= VL;
  int second = two_rows ? stride : VL; /* the second vector's reads, after the first's */
  for (int r = 0; r < rows; r += two_rows ? 2 : 1)
    for (int x = 0; x < W; x += XB)
      {
        v16 acc[CB][2];
        for (int j = 0; j < CB; j++)
          acc[j][0] = acc[j][1] = (v16) { 0 };
        for (int ci = 0; ci < C_in; ci++)
          for (int ky = 0; ky < 3; ky++)
            {
              const float *row = pad + ci * pad_plane + (gsize) (r + ky) * stride + x;
              const float *w9 = wt + ((gsize) ci * 9 + ky * 3) * CB;
              for (int kx = 0; kx < 3; kx++)
                {
                  v16 a = load16 (row + kx), b = load16 (row + kx + second);
                  const float *w8 = w9 + kx * CB;
                  for (int j = 0; j < CB; j++)
                    {
                      acc[j][0] += w8[j] * a;
                      acc[j][1] += w8[j] * b;
                    }
                }
            }
        int n0 = MIN (VL, W - x);
        int n1 = two_rows ? (r + 1 < rows ? W : 0) : MIN (VL, W - x - VL);
        for (int j = 0; j < nc; j++)
          {
            float *dst = out_n + (cb + j) * plane + (gsize) (y0 + r) * W + x;
            v16 b = (v16) { 0 } + (bias != NULL ? bias[cb + j] : 0.0f);
            v16 s0 = acc[j][0] + b, s1 = acc[j][1] + b;
            if (relu)
              {
                s0 = (v16) ((vi16) s0 & (s0 > 0)); /* lanes > 0 keep their bits, others 0 */
                s1 = (v16) ((vi16) s1 & (s1 > 0));
              }
            store_lanes (dst, s0, n0, accumulate);
            store_lanes (dst + (two_rows ? W : VL), s1, n1, accumulate);
          }
      }
}

gboolean
conv3x3_direct_available (void)
{
  __builtin_cpu_init (); /* idempotent; the answer is fixed once libgcc has probed the CPU */
  return __builtin_cpu_supports ("avx512f") && __builtin_cpu_supports ("fma");
}

/* The zero-bordered copy of input rows y0-1 .. y0+rows of the C channels of inp_n: channel c
 * at pad + c·(rows+2)·stride, each row `stride` floats, pad[.., 0] = 0 and image column x at
 * x + 1, zeros after the row and for rows outside the image. */
static void
fill_band (float *pad, const float *inp_n, int C, int H, int W, int y0, int rows, int stride)
{
  gsize pad_plane = (gsize) (rows + 2) * stride;
  for (int c = 0; c < C; c++)
    for (int k = 0; k < rows + 2; k++)
      {
        int y = y0 - 1 + k;
        float *dst = pad + c * pad_plane + (gsize) k * stride;
        if (y < 0 || y >= H)
          memset (dst, 0, sizeof (float) * stride);
        else
          {
            dst[0] = 0.0f;
            memcpy (dst + 1, inp_n + ((gsize) c * H + y) * W, sizeof (float) * W);
            memset (dst + 1 + W, 0, sizeof (float) * (stride - 1 - W));
          }
      }
}

/* out (N, C_out, H, W) = [out +] conv(inp (N, C_in, H, W)) with wt laid out by channel block
 * (n_cb, C_in, 9, CB), then bias and ReLU when given. */
static void
direct_conv (float *out, const float *inp, const float *wt, const float *bias, int N, int C_in,
             int C_out, int H, int W, gboolean relu, gboolean accumulate)
{
  int n_blocks = (W + XB - 1) / XB;
  int stride = n_blocks * XB + VL + 2; /* room for the last block's reads past the row */
  /* bands of rows whose bordered copy stays near 256 KB (in the core's L2 cache) */
  int rows = CLAMP ((int) (65536 / ((gsize) C_in * stride)) - 2, 1, H);
  gsize pad_plane_max = (gsize) (rows + 2) * stride;
  /* fill_band writes every row before it is read; the one after the last channel's (read by
   * the two-row blocks of an odd band, and dropped) is cleared below */
  float *pad = g_malloc (sizeof (float) * (C_in * pad_plane_max + stride));
  int n_cb = (C_out + CB - 1) / CB;
  gsize plane = (gsize) H * W;
  for (int n = 0; n < N; n++)
    {
      const float *inp_n = inp + (gsize) n * C_in * plane;
      float *out_n = out + (gsize) n * C_out * plane;
      for (int y0 = 0; y0 < H; y0 += rows)
        {
          int r = MIN (rows, H - y0);
          fill_band (pad, inp_n, C_in, H, W, y0, r, stride);
          memset (pad + (gsize) C_in * (r + 2) * stride, 0, sizeof (float) * stride);
          for (int b = 0; b < n_cb; b++)
            direct_band (out_n, pad, wt + (gsize) b * C_in * 9 * CB, bias, C_in, r, stride, H, W,
                         y0, b * CB, MIN (CB, C_out - b * CB), relu, accumulate);
        }
    }
  g_free (pad);
}

void
conv3x3_forward_direct (float *out, const float *inp, const float *weight, const float *bias,
                        int N, int C_in, int C_out, int H, int W, gboolean relu)
{
  int n_cb = (C_out + CB - 1) / CB;
  float *wt = g_new0 (float, (gsize) n_cb * C_in * 9 * CB);
  for (int co = 0; co < C_out; co++)
    for (int ci = 0; ci < C_in; ci++)
      for (int k = 0; k < 9; k++)
        wt[(((gsize) (co / CB) * C_in + ci) * 9 + k) * CB + co % CB] = weight[(co * C_in + ci) * 9 + k];
  direct_conv (out, inp, wt, bias, N, C_in, C_out, H, W, relu, FALSE);
  g_free (wt);
}

/* The gradient of a "same" 3×3 convolution with respect to its input is the same-padded 3×3
 * convolution of dout with the kernel turned by 180° and the channels swapped:
 * dinp[ci, y, x] = Σ_co Σ_ky,kx w[co, ci, ky, kx] · dout[co, y + 1 - ky, x + 1 - kx]. */
void
conv3x3_backward_input_direct (float *dinp, const float *dout, const float *weight, int N,
                               int C_in, int C_out, int H, int W)
{
  int n_cb = (C_in + CB - 1) / CB;
  float *wt = g_new0 (float, (gsize) n_cb * C_out * 9 * CB);
  for (int ci = 0; ci < C_in; ci++)
    for (int co = 0; co < C_out; co++)
      for (int k = 0; k < 9; k++)
        wt[(((gsize) (ci / CB) * C_out + co) * 9 + k) * CB + ci % CB] = weight[(co * C_in + ci) * 9 + 8 - k];
  direct_conv (dinp, dout, wt, NULL, N, C_out, C_in, H, W, FALSE, TRUE);
  g_free (wt);
}

/* The weight gradient, dweight[co, ci, ky, kx] += Σ_y,x dout[co, y, x] · in[ci, y+ky-1, x+kx-1]
 * (zero outside the image), one band of rows at a time. Where the forward kernel keeps output
 * pixels in registers, this one keeps taps: 8 output channels × the 3 taps kx of one kernel row
 * ky (24 vector accumulators, each lane a partial sum over the pixels x ≡ lane mod 16), so that
 * each input vector is loaded once for the 8 channels and each dout vector once for 3 taps.
 * dout is read in place when its rows are whole vectors and C_out whole blocks of 8, else
 * copied per band into that shape (zero lanes past W, zero channels past C_out), so the loop
 * has neither edge tests nor masks; the input is the same zero-bordered band
 * as the forward's. Summation: per lane over a sub-band of rows (≤ WG_SUB_PIXELS pixels, its
 * dout rows stay in the L1 cache across the three ky), the lanes saved to memory between
 * sub-bands, reduced at the end of the band and added to a per-call gradient: every float sum
 * has at most a few hundred terms, like the GEMM's blocked sums. */
#define WG_SUB_PIXELS 512

__attribute__ ((target ("avx512f,fma"))) static float
sum_lanes (v16 v)
{
  return _mm512_reduce_add_ps ((__m512) v);
}

__attribute__ ((target ("avx512f,fma"))) static void
weight_band (float *dw /* (C_out, C_in, 9) */,
             const float *dband /* (n_cb·CB channels dplane apart, rows, wpad) */, gsize dplane,
             const float *pad, int C_in, int C_out, int rows, int stride, int wpad)
{
  gsize pad_plane = (gsize) (rows + 2) * stride;
  int sub = MAX (1, WG_SUB_PIXELS / wpad);
  for (int cb = 0; cb < C_out; cb += CB)
    {
      int nc = MIN (CB, C_out - cb);
      const float *d0 = dband + (gsize) cb * dplane;
      for (int ci = 0; ci < C_in; ci++)
        {
          v16 lanes[CB][9];
          for (int j = 0; j < CB; j++)
            for (int k = 0; k < 9; k++)
              lanes[j][k] = (v16) { 0 };
          for (int s0 = 0; s0 < rows; s0 += sub)
            {
              int s1 = MIN (rows, s0 + sub);
              for (int ky = 0; ky < 3; ky++)
                {
                  v16 acc[CB][3];
                  for (int j = 0; j < CB; j++)
                    for (int kx = 0; kx < 3; kx++)
                      acc[j][kx] = lanes[j][ky * 3 + kx];
                  for (int r = s0; r < s1; r++)
                    {
                      const float *row = pad + ci * pad_plane + (gsize) (r + ky) * stride;
                      const float *drow = d0 + (gsize) r * wpad;
                      for (int x = 0; x < wpad; x += VL)
                        {
                          v16 i0 = load16 (row + x), i1 = load16 (row + x + 1);
                          v16 i2 = load16 (row + x + 2);
                          for (int j = 0; j < CB; j++)
                            {
                              v16 d = load16 (drow + j * dplane + x);
                              /* one load for the 3 taps: without this GCC folds it into each
                               * of the 3 FMAs (27 loads for 24 FMAs, load-bound) */
                              __asm__ ("" : "+v" (d));
                              acc[j][0] += d * i0;
                              acc[j][1] += d * i1;
                              acc[j][2] += d * i2;
                            }
                        }
                    }
                  for (int j = 0; j < CB; j++)
                    for (int kx = 0; kx < 3; kx++)
                      lanes[j][ky * 3 + kx] = acc[j][kx];
                }
            }
          for (int j = 0; j < nc; j++)
            for (int k = 0; k < 9; k++)
              dw[((gsize) (cb + j) * C_in + ci) * 9 + k] += sum_lanes (lanes[j][k]);
        }
    }
}

void
conv3x3_backward_weight_direct (float *dweight, const float *dout, const float *inp, int N,
                                int C_in, int C_out, int H, int W)
{
  int wpad = (W + VL - 1) / VL * VL;
  int stride = wpad + VL; /* the taps kx = 1, 2 of the last vector read 2 floats past wpad */
  /* bands whose bordered input stays near 256 KB (in the core's L2 cache), as the forward's */
  int rows = CLAMP ((int) (65536 / ((gsize) C_in * stride)) - 2, 1, H);
  int n_cb = (C_out + CB - 1) / CB;
  gsize plane = (gsize) H * W;
  float *pad = g_aligned_alloc ((gsize) C_in * (rows + 2) * stride, sizeof (float), 64);
  float *dband = g_aligned_alloc ((gsize) n_cb * CB * rows * wpad, sizeof (float), 64);
  float *dw = g_new0 (float, (gsize) C_out * C_in * 9);
  for (int n = 0; n < N; n++)
    {
      const float *inp_n = inp + (gsize) n * C_in * plane;
      const float *dout_n = dout + (gsize) n * C_out * plane;
      for (int y0 = 0; y0 < H; y0 += rows)
        {
          int r = MIN (rows, H - y0);
          fill_band (pad, inp_n, C_in, H, W, y0, r, stride);
          if (W == wpad && C_out % CB == 0)
            {
              /* rows of whole vectors and whole channel blocks (every level of the U-Net): the
               * kernel reads dout in place */
              weight_band (dw, dout_n + (gsize) y0 * W, plane, pad, C_in, C_out, r, stride, wpad);
              continue;
            }
          for (int co = 0; co < C_out; co++)
            for (int k = 0; k < r; k++)
              {
                float *dst = dband + ((gsize) co * r + k) * wpad;
                memcpy (dst, dout_n + co * plane + (gsize) (y0 + k) * W, sizeof (float) * W);
                memset (dst + W, 0, sizeof (float) * (wpad - W));
              }
          /* channels past C_out: zero rows (the band's plane changes with r, so clear them) */
          memset (dband + (gsize) C_out * r * wpad, 0,
                  sizeof (float) * (n_cb * CB - C_out) * r * wpad);
          weight_band (dw, dband, (gsize) r * wpad, pad, C_in, C_out, r, stride, wpad);
        }
    }
  for (gsize i = 0; i < (gsize) C_out * C_in * 9; i++)
    dweight[i] += dw[i];
  g_free (dw);
  g_aligned_free (dband);
  g_aligned_free (pad);
}

#else /* no x86 vector extensions: the GEMM path serves */

gboolean
conv3x3_direct_available (void)
{
  return FALSE;
}

void
conv3x3_forward_direct (float *out, const float *inp, const float *weight, const float *bias,
                        int N, int C_in, int C_out, int H, int W, gboolean relu)
{
  g_assert_not_reached ();
}

void
conv3x3_backward_input_direct (float *dinp, const float *dout, const float *weight, int N,
                               int C_in, int C_out, int H, int W)
{
  g_assert_not_reached ();
}

void
conv3x3_backward_weight_direct (float *dweight, const float *dout, const float *inp, int N,
                                int C_in, int C_out, int H, int W)
{
  g_assert_not_reached ();
}

#endif
