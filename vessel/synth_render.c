/* synth_render.c — drawing the vessel pieces of a synthetic photograph.
 *
 * Two renderings of the same tapered capsules: the truth, with no anti-aliasing (a pixel is
 * vessel exactly when its centre lies inside a capsule, so the truth is exact), and a smooth
 * absorption profile for the photograph: full strength at the centreline falling to half at
 * the wall like the path length through a cylinder, sqrt(1 - (d/r)^2), with a one-pixel soft
 * edge; arteries keep a narrow central light reflex. Row bands are drawn in parallel; each
 * pixel is written by one thread only, pieces in their fixed order, so the result does not
 * depend on the number of threads. */
#include "synth_private.h"

typedef struct {
  const GArray *pieces;
  int width, height;
  float *truth, *width_map, *opacity;
  guint8 *artery;
} RenderJob;

/* Opacity of the photograph's vessel at distance d from the centreline of a vessel of
 * half-width r. */
static float
vessel_profile (double d, double r, gboolean artery)
{
  double edge = CLAMP (r + 0.5 - d, 0.0, 1.0);
  if (edge <= 0.0)
    return 0.0f;
  double q = d / (r + 0.5);
  double path = sqrt (MAX (0.0, 1.0 - q * q));
  double a = edge * (0.5 + 0.5 * path);
  if (artery && r > 2.0)
    a -= 0.3 * exp (-(d * d) / (0.09 * r * r)); /* central light reflex */
  /* Thin vessels show less contrast in a photograph than their width suggests (blur). */
  a *= MIN (1.0, 0.5 + 0.5 * r / 1.5);
  return (float) CLAMP (a, 0.0, 1.0);
}

static void
render_rows (int first, int last, gpointer user_data)
{
  RenderJob *job = user_data;
  const int width = job->width;

  for (guint i = 0; i < job->pieces->len; i++)
    {
      const SynthPiece *p = &g_array_index (job->pieces, SynthPiece, i);
      double reach = MAX (p->r0, p->r1) + 1.5;
      int x_low = MAX (0, (int) floor (MIN (p->x0, p->x1) - reach));
      int x_high = MIN (width - 1, (int) ceil (MAX (p->x0, p->x1) + reach));
      int y_low = MAX (first, (int) floor (MIN (p->y0, p->y1) - reach));
      int y_high = MIN (last - 1, (int) ceil (MAX (p->y0, p->y1) + reach));
      double dx = p->x1 - p->x0, dy = p->y1 - p->y0;
      double length2 = dx * dx + dy * dy;

      for (int y = y_low; y <= y_high; y++)
        for (int x = x_low; x <= x_high; x++)
          {
            double px = x + 0.5 - p->x0, py = y + 0.5 - p->y0;
            double t = length2 > 0.0 ? CLAMP ((px * dx + py * dy) / length2, 0.0, 1.0) : 0.0;
            double ex = px - t * dx, ey = py - t * dy;
            double d = sqrt (ex * ex + ey * ey);
            double r = p->r0 + t * (p->r1 - p->r0);
            gsize k = (gsize) y * width + x;
            if (d <= r)
              {
                if (job->truth)
                  job->truth[k] = 1.0f;
                if (job->width_map && job->width_map[k] < 2.0 * r)
                  job->width_map[k] = (float) (2.0 * r);
              }
            if (job->opacity)
              {
                float a = vessel_profile (d, r, p->artery);
                if (a > job->opacity[k])
                  {
                    job->opacity[k] = a;
                    if (job->artery)
                      job->artery[k] = p->artery;
                  }
              }
          }
    }
}

void
synth_render_vessels (const GArray *pieces, int width, int height, float *truth,
                      float *width_map, float *opacity, guint8 *artery)
{
  RenderJob job = { pieces, width, height, truth, width_map, opacity, artery };
  rete_parallel_for (height, render_rows, &job);
}
