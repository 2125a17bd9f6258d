/* bench_nn_infer.c — tiled U-Net inference on a whole photograph-sized image, both cores.
 * Prints `RESULT infer-standard <w>x<h> <ms>` and `RESULT infer-tiny <w>x<h> <ms>` (median of
 * the repeats), and the peak resident memory after the standard run. bench/ref_nn_infer.py
 * runs the same networks (tests/ref/nn_unet.py) in PyTorch 1.13 on 2 threads, untiled.
 *   bench-nn-infer [width height [repeats]]     (default 999×960 then 3504×2336, 3 repeats:
 *                                               a CHASE_DB1 and an HRF photograph)
 *   bench-nn-infer --memory [width height]      the whole learned vessel map (preprocessing,
 *                                               CLAHE, standardisation, inference) of a random
 *                                               RGB photograph with a round FOV, alone in the
 *                                               process: its time and peak resident memory
 * Each RESULT is followed by a comment with the GFLOP/s (what is counted: bench_unet_forward_macs_per_pixel).
 * Networks: the shipped sizes (models/README.md): standard = 3 levels, 16 filters, 2
 * convolutions per block; tiny = 3 levels, 2 filters, 2 convolutions per block; both ReLU, one
 * input channel, He initialisation (seed 1). */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "rete_nn.h"
#include "rete_learned.h"
#include "bench_common.h"

static long
peak_rss_kb (void)
{
  char *status = NULL;
  long kb = -1;
  if (g_file_get_contents ("/proc/self/status", &status, NULL, NULL))
    {
      char *line = strstr (status, "VmHWM:");
      if (line != NULL)
        kb = strtol (line + 6, NULL, 10);
    }
  g_free (status);
  return kb;
}

static void
run (const char *name, int levels, int filters, int convs, int width, int height, int repeats,
     const float *input, float *probability)
{
  ReteUnetConfig cf = { levels, filters, convs, TRUE, 1 };
  GError *error = NULL;
  ReteUnet *net = rete_unet_new (&cf, 1, &error);
  if (net == NULL)
    {
      fprintf (stderr, "%s\n", error->message);
      exit (1);
    }
  ReteModel *model = rete_model_new (net);
  double times[16];
  repeats = CLAMP (repeats, 1, 16);
  for (int r = 0; r < repeats; r++)
    {
      gint64 t0 = g_get_monotonic_time ();
      if (!rete_model_infer (model, input, 1, height, width, probability, NULL, NULL, &error))
        {
          fprintf (stderr, "%s\n", error->message);
          exit (1);
        }
      times[r] = (g_get_monotonic_time () - t0) / 1000.0;
    }
  double median = bench_median (times, repeats);
  printf ("RESULT infer-%s %dx%d %.1f\n", name, width, height, median);
  /* the forward's multiply-adds over the photograph's pixels (2 FLOP each); the tiles' overlap
   * (halo) and padding are work done but not counted, so this is the useful rate */
  double gflop = 2.0 * width * height * bench_unet_forward_macs_per_pixel (&cf, NULL) / 1e9;
  printf ("# infer-%s: %.1f GFLOP per photograph (convolutions and up-convolutions), %.1f GFLOP/s "
          "at the median\n", name, gflop, gflop / (median / 1e3));
  fflush (stdout);
  rete_model_free (model);
}

static int
memory_run (int width, int height)
{
  GError *error = NULL;
  ReteImage *photo = rete_image_new (width, height, 3, &error);
  ReteImage *fov = rete_image_new (width, height, 1, &error);
  if (photo == NULL || fov == NULL)
    {
      fprintf (stderr, "%s\n", error->message);
      return 1;
    }
  guint32 s = 7;
  for (int y = 0; y < height; y++)
    for (int x = 0; x < width; x++)
      {
        double dx = x - width / 2.0, dy = y - height / 2.0;
        gboolean inside = dx * dx + dy * dy < 0.2 * (double) width * width;
        fov->data[(gsize) y * width + x] = inside;
        for (int c = 0; c < 3; c++)
          {
            s = s * 1664525u + 1013904223u;
            photo->data[((gsize) c * height + y) * width + x] = inside ? (s >> 8) / 16777216.0f : 0.0f;
          }
      }
  ReteUnetConfig cf;
  rete_unet_config_init (&cf);
  ReteModel *model = rete_model_new (rete_unet_new (&cf, 1, NULL));
  long before = peak_rss_kb ();
  gint64 t0 = g_get_monotonic_time ();
  ReteImage *map = rete_vessel_learned (photo, fov, model, NULL, NULL, &error);
  if (map == NULL)
    {
      fprintf (stderr, "%s\n", error->message);
      return 1;
    }
  printf ("RESULT learned-map-standard %dx%d %.1f\n", width, height,
          (g_get_monotonic_time () - t0) / 1000.0);
  printf ("# peak resident memory of the learned vessel map %dx%d (standard model, photograph "
          "and FOV included): %.0f MB (%.0f MB before the call; limit 400 MB)\n", width, height,
          peak_rss_kb () / 1024.0, before / 1024.0);
  rete_image_free (map);
  rete_image_free (photo);
  rete_image_free (fov);
  rete_model_free (model);
  return 0;
}

int
main (int argc, char **argv)
{
  if (argc > 1 && strcmp (argv[1], "--memory") == 0)
    return memory_run (argc > 3 ? atoi (argv[2]) : 3504, argc > 3 ? atoi (argv[3]) : 2336);
  /* default: a CHASE_DB1-sized and an HRF-sized photograph; or the one size given */
  int sizes[2][2] = { { 999, 960 }, { 3504, 2336 } }, n_sizes = 2;
  if (argc > 2)
    sizes[0][0] = atoi (argv[1]), sizes[0][1] = atoi (argv[2]), n_sizes = 1;
  int repeats = argc > 3 ? atoi (argv[3]) : 3;
  for (int k = 0; k < n_sizes; k++)
    {
      int width = sizes[k][0], height = sizes[k][1];
      gsize n = (gsize) width * height;
      float *input = g_new (float, n), *probability = g_new (float, n);
      guint32 s = 1;
      for (gsize i = 0; i < n; i++)
        {
          s = s * 1664525u + 1013904223u;
          input[i] = (float) ((s >> 8) * (1.0 / 16777216.0) * 2.0 - 1.0);
        }
      memset (probability, 0, sizeof (float) * n);
      run ("standard", 3, 16, 2, width, height, repeats, input, probability);
      printf ("# peak resident memory after infer-standard %dx%d: %.0f MB (threads %d)\n", width,
              height, peak_rss_kb () / 1024.0, rete_thread_count ());
      run ("tiny", 3, 2, 2, width, height, repeats, input, probability);
      g_free (input);
      g_free (probability);
    }
  return 0;
}
