/* synth_tree.c — growing the vessel trees of a synthetic fundus photograph.
 *
 * Each tree starts at the optic disc and is grown as a centreline that advances in steps of
 * SYNTH_STEP pixels. Its heading turns with a curvature that follows an Ornstein–Uhlenbeck
 * walk (so paths are smooth curves, not jagged random walks), is steered gently away from the
 * disc (vessels spread over the fundus) and away from the fovea (the avascular zone), and for
 * the four arcade trunks along a circle around the fovea (the temporal arcades). The width
 * tapers slowly along a vessel. At bifurcations the widths follow Murray's law
 * w0^3 = w1^3 + w2^3 and the angles Murray's optimum
 *   cos θ1 = (w0^4 + w1^4 - w2^4) / (2 w0^2 w1^2),  cos θ2 likewise
 * (C. D. Murray, "The physiological principle of minimum work applied to the angle of
 * branching of arteries", J. Gen. Physiol. 9:835, 1926), so a thin side branch leaves at
 * nearly a right angle and an even split at about 37° on each side.
 * Lengths are in units of the aperture radius `s` so that every size looks alike. */
#include "synth_private.h"

#define SYNTH_STEP 1.25 /* pixels per centreline piece */

typedef struct {
  double x, y;
  double heading;      /* radians, image coordinates (y down) */
  double curvature;    /* radians per pixel */
  double width;        /* pixels */
  double path_length;  /* pixels grown since the root */
  double to_branch;    /* pixels left until the next bifurcation */
  double end_length;   /* pixels left once the vessel has reached the narrowest width (<0: not yet) */
  int arcade;          /* +1/-1: an arcade trunk turning around the fovea in this sense; 0: free */
  double arcade_start; /* angle around the fovea where the arcade began */
  gboolean artery;
  gboolean first_split; /* an arcade trunk's first split sends its branch to the nasal side */
} Tip;

static double
wrap_angle (double a)
{
  while (a > G_PI)
    a -= 2.0 * G_PI;
  while (a < -G_PI)
    a += 2.0 * G_PI;
  return a;
}

static double
branch_interval (SynthRng *rng, double width, double max_width, double s)
{
  return s * synth_rng_range (rng, 0.07, 0.18) * (0.5 + 0.5 * MIN (1.0, width / max_width));
}

/* Grows one vessel from `tip` to its end, pushing side branches onto `stack`. */
static void
grow_vessel (Tip tip, const ReteSynthParams *params, const SynthLayout *layout, SynthRng *rng,
             GArray *stack, GArray *pieces)
{
  const double s = layout->radius;
  const double min_width = params->min_vessel_width;
  const double max_width = params->max_vessel_width;
  const double curvature_memory = 0.05 * s;  /* correlation length of the curvature */
  const double max_path = 2.6 * s;

  for (;;)
    {
      /* Smooth turning: curvature relaxes to 0 and is kicked by noise; thin vessels are more
       * tortuous than the trunks. Stationary spread of the curvature: 1 / (0.5 s) rad/px
       * for the trunks. */
      double spread = (1.0 + 0.6 / MAX (tip.width, 1.0)) / (0.5 * s);
      double kick = spread * sqrt (2.0 * SYNTH_STEP / curvature_memory);
      tip.curvature += -tip.curvature * SYNTH_STEP / curvature_memory
                       + kick * synth_rng_normal (rng);
      double turn = tip.curvature * SYNTH_STEP;

      double fx = tip.x - layout->macula_x, fy = tip.y - layout->macula_y;
      double fovea_distance = sqrt (fx * fx + fy * fy);
      double around = atan2 (fy, fx);
      if (tip.arcade != 0)
        {
          /* Follow a slightly outward spiral around the fovea. */
          double target = around + tip.arcade * (G_PI / 2.0 - 0.12);
          turn += wrap_angle (target - tip.heading) * SYNTH_STEP / (0.06 * s);
          if (fabs (wrap_angle (around - tip.arcade_start)) > 2.3)
            tip.arcade = 0; /* past the fovea: the arcade's end wanders freely */
        }
      else
        {
          /* Spread away from the disc. */
          double target = atan2 (tip.y - layout->disc_y, tip.x - layout->disc_x);
          turn += wrap_angle (target - tip.heading) * SYNTH_STEP / (0.5 * s);
        }
      if (fovea_distance < 0.22 * s)
        {
          double push = 1.0 - fovea_distance / (0.22 * s);
          turn += wrap_angle (around - tip.heading) * push * SYNTH_STEP / (0.04 * s);
        }
      tip.heading = wrap_angle (tip.heading + turn);

      double width_before = tip.width;
      double taper = tip.arcade != 0 ? 1.5 * s : 0.4 * s;
      tip.width = MAX (min_width, tip.width * exp (-SYNTH_STEP / taper));
      if (tip.width <= min_width && tip.end_length < 0)
        tip.end_length = s * synth_rng_range (rng, 0.01, 0.05);

      SynthPiece piece;
      piece.x0 = tip.x;
      piece.y0 = tip.y;
      piece.r0 = width_before / 2.0;
      tip.x += SYNTH_STEP * cos (tip.heading);
      tip.y += SYNTH_STEP * sin (tip.heading);
      piece.x1 = tip.x;
      piece.y1 = tip.y;
      piece.r1 = tip.width / 2.0;
      piece.artery = tip.artery ? 1 : 0;
      g_array_append_val (pieces, piece);

      tip.path_length += SYNTH_STEP;
      tip.to_branch -= SYNTH_STEP;
      if (tip.end_length >= 0)
        tip.end_length -= SYNTH_STEP;

      double cx = tip.x - layout->centre_x, cy = tip.y - layout->centre_y;
      if (sqrt (cx * cx + cy * cy) > layout->radius + tip.width
          || tip.path_length > max_path
          || fovea_distance < 0.07 * s
          || (tip.end_length >= 0 && tip.end_length <= 0.0))
        return;

      if (tip.to_branch > 0 || tip.width < 1.5 * min_width)
        continue;

      /* Bifurcation: Murray's law for the widths, Murray's optimum for the angles. */
      /* Most bifurcations send off a thin side branch; a few split evenly. */
      double ratio = tip.first_split ? synth_rng_range (rng, 0.6, 0.9)
                     : synth_rng_uniform (rng) < 0.75 ? synth_rng_range (rng, 0.25, 0.6)
                                                      : synth_rng_range (rng, 0.6, 0.95);
      double w0 = tip.width;
      double w1 = w0 / cbrt (1.0 + ratio * ratio * ratio);
      double w2 = ratio * w1;
      double a0 = w0 * w0, a1 = w1 * w1, a2 = w2 * w2;
      double cos1 = CLAMP ((a0 * a0 + a1 * a1 - a2 * a2) / (2.0 * a0 * a1), -1.0, 1.0);
      double cos2 = CLAMP ((a0 * a0 + a2 * a2 - a1 * a1) / (2.0 * a0 * a2), -1.0, 1.0);
      double angle1 = acos (cos1) + 0.08 * synth_rng_normal (rng);
      double angle2 = acos (cos2) + 0.08 * synth_rng_normal (rng);
      double side = synth_rng_uniform (rng) < 0.5 ? 1.0 : -1.0;
      if (tip.first_split)
        {
          /* Send the branch to the nasal side: the side facing away from the fovea. */
          double away = atan2 (tip.y - layout->macula_y, tip.x - layout->macula_x);
          side = wrap_angle (away - tip.heading) > 0 ? 1.0 : -1.0;
          tip.first_split = FALSE;
        }

      Tip branch = tip;
      branch.width = w2;
      branch.heading = wrap_angle (tip.heading + side * angle2);
      branch.curvature = 0.0;
      branch.arcade = 0;
      branch.first_split = FALSE;
      branch.to_branch = branch_interval (rng, w2, max_width, s);
      branch.end_length = -1.0;
      if (w2 < min_width)
        {
          if (w2 >= 0.6 * min_width)
            branch.width = min_width;
          else
            branch.width = 0.0; /* too thin to draw */
        }
      if (branch.width > 0.0)
        g_array_append_val (stack, branch);

      tip.width = w1;
      tip.heading = wrap_angle (tip.heading - side * angle1);
      tip.to_branch = branch_interval (rng, w1, max_width, s);
    }
}

void
synth_grow_trees (const ReteSynthParams *params, const SynthLayout *layout, GArray *pieces)
{
  SynthRng rng = synth_rng_stream (params->seed, SYNTH_STREAM_TREE, 0);
  const double s = layout->radius;
  /* Sense of the arcades: the superior arcade leaves the disc upwards and turns towards the
   * fovea. */
  int disc_side = layout->disc_x > layout->macula_x ? 1 : -1;
  GArray *stack = g_array_new (FALSE, FALSE, sizeof (Tip));

  for (int t = 0; t < params->n_trees; t++)
    {
      Tip root = { 0 };
      double ox = synth_rng_range (&rng, -0.25, 0.25) * layout->disc_radius;
      double oy = synth_rng_range (&rng, -0.25, 0.25) * layout->disc_radius;
      root.x = layout->disc_x + ox;
      root.y = layout->disc_y + oy;
      root.artery = (t % 2) == 1;
      root.end_length = -1.0;
      if (t < 4)
        {
          /* Trees 0, 1: superior vein and artery; 2, 3: inferior vein and artery. */
          root.arcade = t < 2 ? -disc_side : disc_side;
          root.arcade_start = atan2 (root.y - layout->macula_y, root.x - layout->macula_x);
          root.heading = root.arcade_start + root.arcade * (G_PI / 2.0)
                         + root.arcade * (root.artery ? 0.15 : 0.0)
                         + 0.08 * synth_rng_normal (&rng);
          root.width = params->max_vessel_width * (root.artery ? 0.78 : 1.0);
          root.first_split = TRUE;
          root.to_branch = s * synth_rng_range (&rng, 0.04, 0.10);
        }
      else
        {
          /* Further trees: nasal and radial vessels straight from the disc. */
          double away = atan2 (layout->disc_y - layout->macula_y,
                               layout->disc_x - layout->macula_x);
          root.heading = away + synth_rng_range (&rng, -1.3, 1.3);
          root.width = params->max_vessel_width * synth_rng_range (&rng, 0.45, 0.7)
                       * (root.artery ? 0.8 : 1.0);
          root.to_branch = branch_interval (&rng, root.width, params->max_vessel_width, s);
        }
      root.width = MAX (root.width, params->min_vessel_width);
      /* Start a little behind the disc centre, so that the trunks meet in the cup instead of
       * leaving a gap between their rounded ends. */
      root.x -= 0.3 * layout->disc_radius * cos (root.heading);
      root.y -= 0.3 * layout->disc_radius * sin (root.heading);
      g_array_append_val (stack, root);
      while (stack->len > 0)
        {
          Tip tip = g_array_index (stack, Tip, stack->len - 1);
          g_array_set_size (stack, stack->len - 1);
          grow_vessel (tip, params, layout, &rng, stack, pieces);
        }
    }
  g_array_free (stack, TRUE);
}
