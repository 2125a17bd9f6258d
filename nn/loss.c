/* loss.c — the training loss of the vessel map: sigmoid + binary cross-entropy plus a soft Dice
 * term, both restricted to the field of view (pixels outside it carry no label).
 *
 * BCE with logits, in the numerically stable form (as torch.nn.BCEWithLogitsLoss computes it):
 *   l_i = max(x_i, 0) - x_i t_i + log(1 + exp(-|x_i|)),   BCE = Σ m_i l_i / Σ m_i,
 *   dBCE/dx_i = m_i (σ(x_i) - t_i) / Σ m_i.
 * Soft Dice (Milletari, Navab and Ahmadi, "V-Net", 3DV 2016, eq. 1, with the common smoothing
 * term 1 in numerator and denominator; sums, not squares, in the denominator):
 *   I = Σ m p t, S = Σ m p + Σ m t,  Dice loss = 1 - (2I + 1) / (S + 1),
 *   dDice/dp_i = m_i (-(2 t_i (S + 1) - (2I + 1)) / (S + 1)²),  dp/dx = p (1 - p).
 */
#include "rete_nn.h"
#include "layers.h"

#include <math.h>

double
loss_bce_forward (const float *logits, const float *target, const float *mask, gsize n,
                  double *mask_sum)
{
  double sum = 0.0, m_sum = 0.0;
  for (gsize i = 0; i < n; i++)
    {
      double m = mask != NULL ? mask[i] : 1.0;
      if (m == 0.0)
        continue;
      double x = logits[i], t = target[i];
      sum += m * (fmax (x, 0.0) - x * t + log1p (exp (-fabs (x))));
      m_sum += m;
    }
  if (mask_sum != NULL)
    *mask_sum = m_sum;
  return m_sum > 0.0 ? sum / m_sum : 0.0;
}

static void
dice_sums (const float *logits, const float *target, const float *mask, gsize n,
           double *intersection, double *total)
{
  double inter = 0.0, tot = 0.0;
  for (gsize i = 0; i < n; i++)
    {
      double m = mask != NULL ? mask[i] : 1.0;
      if (m == 0.0)
        continue;
      double p = nn_sigmoid (logits[i]), t = target[i];
      inter += m * p * t;
      tot += m * (p + t);
    }
  *intersection = inter;
  *total = tot;
}

double
loss_dice_forward (const float *logits, const float *target, const float *mask, gsize n)
{
  double inter, tot;
  dice_sums (logits, target, mask, n, &inter, &tot);
  return 1.0 - (2.0 * inter + 1.0) / (tot + 1.0);
}

double
rete_loss_bce_dice (const float *logits, const float *target, const float *mask, gsize n,
                    double dice_weight, float *dlogits)
{
  double m_sum = 0.0;
  double bce = loss_bce_forward (logits, target, mask, n, &m_sum);
  if (m_sum <= 0.0)
    {
      if (dlogits != NULL)
        for (gsize i = 0; i < n; i++)
          dlogits[i] = 0.0f;
      return 0.0;
    }
  double inter = 0.0, tot = 0.0, dice = 0.0;
  if (dice_weight != 0.0)
    {
      dice_sums (logits, target, mask, n, &inter, &tot);
      dice = 1.0 - (2.0 * inter + 1.0) / (tot + 1.0);
    }
  if (dlogits != NULL)
    {
      double den = tot + 1.0, num = 2.0 * inter + 1.0;
      for (gsize i = 0; i < n; i++)
        {
          double m = mask != NULL ? mask[i] : 1.0;
          if (m == 0.0)
            {
              dlogits[i] = 0.0f;
              continue;
            }
          double p = nn_sigmoid (logits[i]), t = target[i];
          double g = m * (p - t) / m_sum;
          if (dice_weight != 0.0)
            g += dice_weight * m * (-(2.0 * t * den - num) / (den * den)) * p * (1.0 - p);
          dlogits[i] = (float) g;
        }
    }
  return bce + dice_weight * dice;
}
