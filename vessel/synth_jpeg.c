/* synth_jpeg.c — the blocky artefacts JPEG compression leaves in fundus photographs, made
 * without a codec: the photograph goes to YCbCr (JFIF, ITU-T T.871), each channel's 8x8
 * blocks through the 2-D DCT-II, each coefficient is rounded to a multiple of its step in the
 * example quantisation tables of ITU-T T.81 Annex K (Tables K.1 luminance, K.2 chrominance),
 * scaled for a quality in 1..100 the way the Independent JPEG Group's library does
 * (from memory: scale = 5000/q below 50, 200 - 2q above), then back. Chroma is not
 * subsampled and nothing is entropy-coded: only the quantisation, which is where the
 * artefacts come from. Blocks at the right and bottom edges are padded by repeating the last
 * row or column, as encoders do. */
#include "synth_private.h"

static const int luminance_table[64] = {
  16, 11, 10, 16, 24, 40, 51, 61,
  12, 12, 14, 19, 26, 58, 60, 55,
  14, 13, 16, 24, 40, 57, 69, 56,
  14, 17, 22, 29, 51, 87, 80, 62,
  18, 22, 37, 56, 68, 109, 103, 77,
  24, 35, 55, 64, 81, 104, 113, 92,
  49, 64, 78, 87, 103, 121, 120, 101,
  72, 92, 95, 98, 112, 100, 103, 99,
};

static const int chrominance_table[64] = {
  17, 18, 24, 47, 99, 99, 99, 99,
  18, 21, 26, 66, 99, 99, 99, 99,
  24, 26, 56, 99, 99, 99, 99, 99,
  47, 66, 99, 99, 99, 99, 99, 99,
  99, 99, 99, 99, 99, 99, 99, 99,
  99, 99, 99, 99, 99, 99, 99, 99,
  99, 99, 99, 99, 99, 99, 99, 99,
  99, 99, 99, 99, 99, 99, 99, 99,
};

typedef struct {
  float *planes[3];   /* Y, Cb, Cr in 0..255 */
  int width, height;
  double steps[2][64];
  double basis[8][8]; /* basis[u][x] = c(u)/2 cos((2x+1) u pi / 16) */
} JpegJob;

static void
quantise_block_rows (int first, int last, gpointer user_data)
{
  JpegJob *job = user_data;
  const int width = job->width, height = job->height;
  double block[8][8], coefficients[8][8], temp[8][8];

  for (int by = first; by < last; by++)
    for (int bx = 0; bx * 8 < width; bx++)
      for (int c = 0; c < 3; c++)
        {
          float *plane = job->planes[c];
          const double *steps = job->steps[c == 0 ? 0 : 1];
          for (int y = 0; y < 8; y++)
            for (int x = 0; x < 8; x++)
              {
                int sy = MIN (by * 8 + y, height - 1), sx = MIN (bx * 8 + x, width - 1);
                block[y][x] = plane[(gsize) sy * width + sx] - 128.0;
              }
          /* F = B X B^T (separable DCT-II, orthonormal). */
          for (int u = 0; u < 8; u++)
            for (int x = 0; x < 8; x++)
              {
                double sum = 0.0;
                for (int y = 0; y < 8; y++)
                  sum += job->basis[u][y] * block[y][x];
                temp[u][x] = sum;
              }
          for (int u = 0; u < 8; u++)
            for (int v = 0; v < 8; v++)
              {
                double sum = 0.0;
                for (int x = 0; x < 8; x++)
                  sum += temp[u][x] * job->basis[v][x];
                double step = steps[u * 8 + v];
                coefficients[u][v] = step * rint (sum / step);
              }
          /* X = B^T F B. */
          for (int y = 0; y < 8; y++)
            for (int v = 0; v < 8; v++)
              {
                double sum = 0.0;
                for (int u = 0; u < 8; u++)
                  sum += job->basis[u][y] * coefficients[u][v];
                temp[y][v] = sum;
              }
          for (int y = 0; y < 8 && by * 8 + y < height; y++)
            for (int x = 0; x < 8 && bx * 8 + x < width; x++)
              {
                double sum = 0.0;
                for (int v = 0; v < 8; v++)
                  sum += temp[y][v] * job->basis[v][x];
                plane[(gsize) (by * 8 + y) * width + bx * 8 + x] = (float) (sum + 128.0);
              }
        }
}

void
synth_jpeg_quantise (ReteImage *photo, int quality)
{
  const gsize n = rete_image_n_pixels (photo);
  float *r = rete_image_plane (photo, 0), *g = rete_image_plane (photo, 1),
        *b = rete_image_plane (photo, 2);
  JpegJob job;
  job.width = photo->width;
  job.height = photo->height;
  quality = CLAMP (quality, 1, 100);
  double scale = quality < 50 ? 5000.0 / quality : 200.0 - 2.0 * quality;
  for (int i = 0; i < 64; i++)
    {
      job.steps[0][i] = CLAMP (floor ((luminance_table[i] * scale + 50.0) / 100.0), 1.0, 255.0);
      job.steps[1][i] = CLAMP (floor ((chrominance_table[i] * scale + 50.0) / 100.0), 1.0, 255.0);
    }
  for (int u = 0; u < 8; u++)
    for (int x = 0; x < 8; x++)
      job.basis[u][x] = (u == 0 ? sqrt (0.125) : 0.5) * cos ((2 * x + 1) * u * G_PI / 16.0);

  /* RGB -> YCbCr in place (T.871). */
  for (gsize i = 0; i < n; i++)
    {
      double R = 255.0 * r[i], G = 255.0 * g[i], B = 255.0 * b[i];
      r[i] = (float) (0.299 * R + 0.587 * G + 0.114 * B);
      g[i] = (float) (128.0 - 0.168736 * R - 0.331264 * G + 0.5 * B);
      b[i] = (float) (128.0 + 0.5 * R - 0.418688 * G - 0.081312 * B);
    }
  job.planes[0] = r;
  job.planes[1] = g;
  job.planes[2] = b;
  rete_parallel_for ((photo->height + 7) / 8, quantise_block_rows, &job);
  for (gsize i = 0; i < n; i++)
    {
      double Y = r[i], Cb = g[i] - 128.0, Cr = b[i] - 128.0;
      r[i] = (float) CLAMP ((Y + 1.402 * Cr) / 255.0, 0.0, 1.0);
      g[i] = (float) CLAMP ((Y - 0.344136 * Cb - 0.714136 * Cr) / 255.0, 0.0, 1.0);
      b[i] = (float) CLAMP ((Y + 1.772 * Cb) / 255.0, 0.0, 1.0);
    }
}

gboolean
rete_synth_jpeg_artefacts (ReteImage *photo, int quality, GError **error)
{
  if (photo == NULL || !rete_image_check_channels (photo, "photograph", 3, error))
    {
      if (photo == NULL)
        g_set_error_literal (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                             "JPEG artefacts: no photograph given");
      return FALSE;
    }
  if (quality < 1 || quality > 100)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "JPEG artefacts: quality is %d; it must lie between 1 and 100", quality);
      return FALSE;
    }
  synth_jpeg_quantise (photo, quality);
  return TRUE;
}
