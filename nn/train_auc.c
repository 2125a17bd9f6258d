/* train_auc.c — the validation figure of training: exact ROC AUC by ranks, and the
 * random numbers of training.
 *
 * nn/ sits below vessel/ and may not call rete_roc_auc there, so training carries its own
 * small AUC: the Mann–Whitney form, AUC = (R+ - n+ (n+ + 1) / 2) / (n+ n-), where R+ is the
 * sum of the ranks of the positive scores and tied scores share their mean rank
 * (J. A. Hanley, B. J. McNeil, Radiology 143:29–36, 1982, eq. 2). That equals the
 * trapezoidal area under the ROC curve with ties, as sklearn.metrics.roc_auc_score gives.
 * Sorting is an LSD radix sort on the float's bits turned into an order-preserving key,
 * O(n) for the few million pixels of a validation set.
 *
 * Random numbers: SplitMix64 (G. L. Steele, D. Lea, C. H. Flood, "Fast splittable
 * pseudorandom number generators", OOPSLA 2014). Each training step and each patch derive
 * their own stream from (seed, step, index), so that a resumed run draws the same patches
 * as an unbroken one and the threads that cut patches need not share a generator.
 */
#include "rete_train.h"

#include <math.h>
#include <string.h>

guint64
rete_rng_next (guint64 *state)
{
  guint64 z = (*state += G_GUINT64_CONSTANT (0x9E3779B97F4A7C15));
  z = (z ^ (z >> 30)) * G_GUINT64_CONSTANT (0xBF58476D1CE4E5B9);
  z = (z ^ (z >> 27)) * G_GUINT64_CONSTANT (0x94D049BB133111EB);
  return z ^ (z >> 31);
}

double
rete_rng_uniform (guint64 *state)
{
  return (double) (rete_rng_next (state) >> 11) * (1.0 / 9007199254740992.0);
}

guint64
rete_rng_derive (guint64 seed, guint64 a, guint64 b)
{
  guint64 s = seed ^ G_GUINT64_CONSTANT (0x5851F42D4C957F2D);
  guint64 x = rete_rng_next (&s);
  s = x ^ (a * G_GUINT64_CONSTANT (0xD1B54A32D192ED03));
  x = rete_rng_next (&s);
  s = x ^ (b * G_GUINT64_CONSTANT (0x8CB92BA72F3D8DD7));
  return rete_rng_next (&s);
}

/* float bits -> unsigned key with the same order (negative floats flipped) */
static inline guint32
float_key (float f)
{
  guint32 u;
  memcpy (&u, &f, sizeof u);
  return (u & 0x80000000u) ? ~u : (u | 0x80000000u);
}

double
rete_train_auc (const float *scores, const guint8 *labels, const guint8 *mask, gsize n,
                GError **error)
{
  gsize count = 0;
  for (gsize i = 0; i < n; i++)
    if (mask == NULL || mask[i])
      {
        if (!isfinite (scores[i]))
          {
            g_set_error (error, RETE_NN_ERROR, RETE_ERROR_NOT_FINITE,
                         "validation AUC: score %" G_GSIZE_FORMAT " is not a finite number; "
                         "the network has diverged (lower the learning rate)", i);
            return NAN;
          }
        count++;
      }
  if (count == 0)
    {
      g_set_error (error, RETE_NN_ERROR, RETE_ERROR_EMPTY,
                   "validation AUC: no pixel inside the field of view");
      return NAN;
    }
  guint32 *key = g_try_new (guint32, count), *key2 = g_try_new (guint32, count);
  guint8 *lab = g_try_new (guint8, count), *lab2 = g_try_new (guint8, count);
  if (key == NULL || key2 == NULL || lab == NULL || lab2 == NULL)
    {
      g_free (key); g_free (key2); g_free (lab); g_free (lab2);
      g_set_error (error, RETE_NN_ERROR, RETE_ERROR_NO_MEMORY,
                   "validation AUC: not enough memory for %" G_GSIZE_FORMAT " scores", count);
      return NAN;
    }
  gsize k = 0, n_pos = 0;
  for (gsize i = 0; i < n; i++)
    if (mask == NULL || mask[i])
      {
        key[k] = float_key (scores[i] == 0.0f ? 0.0f : scores[i]); /* -0 ties with +0 */
        lab[k] = labels[i] ? 1 : 0;
        n_pos += lab[k];
        k++;
      }
  gsize n_neg = count - n_pos;
  if (n_pos == 0 || n_neg == 0)
    {
      g_free (key); g_free (key2); g_free (lab); g_free (lab2);
      g_set_error (error, RETE_NN_ERROR, RETE_ERROR_UNDEFINED,
                   "validation AUC is undefined: the validation annotations hold %s only "
                   "inside the field of view", n_pos == 0 ? "background" : "vessel");
      return NAN;
    }
  for (int shift = 0; shift < 32; shift += 8)
    {
      gsize histogram[257] = { 0 };
      for (gsize i = 0; i < count; i++)
        histogram[((key[i] >> shift) & 0xFF) + 1]++;
      for (int b = 0; b < 256; b++)
        histogram[b + 1] += histogram[b];
      for (gsize i = 0; i < count; i++)
        {
          gsize to = histogram[(key[i] >> shift) & 0xFF]++;
          key2[to] = key[i];
          lab2[to] = lab[i];
        }
      guint32 *tk = key; key = key2; key2 = tk;
      guint8 *tl = lab; lab = lab2; lab2 = tl;
    }
  /* sum of mid-ranks of the positives (ranks from 1) */
  double rank_sum = 0.0;
  for (gsize i = 0; i < count;)
    {
      gsize j = i, pos = 0;
      while (j < count && key[j] == key[i])
        pos += lab[j++];
      double mid_rank = 0.5 * ((double) (i + 1) + (double) j);
      rank_sum += mid_rank * (double) pos;
      i = j;
    }
  g_free (key); g_free (key2); g_free (lab); g_free (lab2);
  double np = (double) n_pos, nn = (double) n_neg;
  return (rank_sum - np * (np + 1.0) / 2.0) / (np * nn);
}
