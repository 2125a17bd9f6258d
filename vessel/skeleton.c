/* skeleton.c — the skeleton of a binary vessel map.
 *
 * Thinning: T. Y. Zhang and C. Y. Suen, "A fast parallel algorithm for thinning digital
 * patterns", Commun. ACM 27(3):236–239, 1984. With the neighbours of P1 named
 *   P9 P2 P3
 *   P8 P1 P4
 *   P7 P6 P5
 * B(P1) = number of foreground neighbours, A(P1) = number of 0→1 transitions in the cyclic
 * sequence P2, P3, ..., P9, P2. A foreground pixel is deleted in the first subiteration when
 *   (a) 2 <= B <= 6, (b) A = 1, (c) P2·P4·P6 = 0, (d) P4·P6·P8 = 0,
 * and in the second when (a), (b), (c') P2·P4·P8 = 0, (d') P2·P6·P8 = 0. Deletions within a
 * subiteration are decided on the map as it was at its start (the algorithm is parallel);
 * subiterations alternate until neither deletes a pixel. The tables below are computed from
 * these conditions, not typed in.
 *
 * As published, the algorithm deletes diagonal strokes two pixels thick altogether (each of
 * their pixels has B = 2 and A = 1), and a vessel at 45° thins down to such a stroke: on a
 * digital band 7 px wide at 45° it leaves 2 pixels of a 99-pixel centre line. H. E. Lü and
 * P. S. P. Wang, "A comment on 'A fast parallel algorithm for thinning digital patterns'",
 * Commun. ACM 29(3):239–242, 1986, mend this by asking 3 <= B <= 6 in (a); Rete measures with
 * that correction (RETE_THINNING_LU_WANG) and keeps the published rule for comparison.
 *
 * Thinning leaves "staircase" pixels: the corner pixel of an L of three pixels, where the two
 * ends of the L already touch diagonally, so the skeleton is 8-connected but not one pixel
 * thin, and junctions would be found where there are none. rete_thin_remove_redundant() then
 * deletes, one at a time, every skeleton pixel that has two perpendicular 4-neighbours (N and
 * E, E and S, S and W, or W and N) and is simple (its deletion changes neither the 8-connected
 * skeleton nor the 4-connected background around it: the usual digital-topology test). This is
 * the staircase removal of Holt, Stewart, Clint and Perrott, "An improved parallel thinning
 * algorithm", Commun. ACM 30(2):156–160, 1987, in spirit (from memory; our rule is the plain
 * test above). Only corners go: a pixel with no perpendicular pair (a line end, a diagonal
 * run) is never touched, so lines cannot be eaten from their ends.
 *
 * Speed: only foreground pixels are visited, from a list that shrinks as pixels go, so the
 * work is (foreground pixels) × (iterations ≈ half the widest vessel), not the frame size;
 * the decisions of a subiteration are taken in parallel (rete_parallel_for), the deletions
 * applied after.
 */
#include "measure_private.h"

#include <string.h>

const int rete_neighbour_dx[8] = { -1, 0, 1, 1, 1, 0, -1, -1 };
const int rete_neighbour_dy[8] = { -1, -1, -1, 0, 1, 1, 1, 0 };

/* Bit of each Zhang–Suen neighbour P2..P9 in rete_neighbour_code(). */
enum { P2 = 1, P3 = 2, P4 = 3, P5 = 4, P6 = 5, P7 = 6, P8 = 7, P9 = 0 };

static guint8 zhang_suen_table[2][2][256]; /* [variant][subiteration][code]: 1 = delete */
#define ACTIVE 2u /* in the thinning's list of border pixels */

static guint8 simple_table[256]; /* 1 = simple corner of an L: deleted by the staircase pass */

static int
bit (unsigned code, int b)
{
  return (code >> b) & 1;
}

/* Components of the ring of neighbours under an adjacency: foreground in 8-adjacency, or
 * background in 4-adjacency counting only components that hold a 4-neighbour of the centre. */
static int
ring_components (unsigned code, int want, gboolean eight)
{
  int label[8], n = 0;
  for (int i = 0; i < 8; i++)
    label[i] = -1;
  for (int i = 0; i < 8; i++)
    {
      if (bit (code, i) != want || label[i] >= 0)
        continue;
      int stack[8], top = 0;
      stack[top++] = i;
      label[i] = n;
      while (top > 0)
        {
          int a = stack[--top];
          for (int b = 0; b < 8; b++)
            {
              if (bit (code, b) != want || label[b] >= 0)
                continue;
              int dx = abs (rete_neighbour_dx[a] - rete_neighbour_dx[b]);
              int dy = abs (rete_neighbour_dy[a] - rete_neighbour_dy[b]);
              if (eight ? (dx <= 1 && dy <= 1) : (dx + dy == 1))
                {
                  label[b] = n;
                  stack[top++] = b;
                }
            }
        }
      n++;
    }
  if (eight)
    return n;
  /* background: only components touching N, E, S or W count */
  int count = 0;
  for (int c = 0; c < n; c++)
    for (int i = 1; i < 8; i += 2)
      if (label[i] == c)
        {
          count++;
          break;
        }
  return count;
}

static gpointer
build_tables (gpointer unused)
{
  for (unsigned code = 0; code < 256; code++)
    {
      int seq[9] = { bit (code, P2), bit (code, P3), bit (code, P4), bit (code, P5),
                     bit (code, P6), bit (code, P7), bit (code, P8), bit (code, P9),
                     bit (code, P2) };
      int b = 0, a = 0;
      for (int i = 0; i < 8; i++)
        {
          b += seq[i];
          a += seq[i] == 0 && seq[i + 1] == 1;
        }
      int p2 = seq[0], p4 = seq[2], p6 = seq[4], p8 = seq[6];
      for (int variant = 0; variant < 2; variant++)
        {
          int b_min = variant == RETE_THINNING_LU_WANG ? 3 : 2;
          gboolean common = b >= b_min && b <= 6 && a == 1;
          zhang_suen_table[variant][0][code] = common && p2 * p4 * p6 == 0 && p4 * p6 * p8 == 0;
          zhang_suen_table[variant][1][code] = common && p2 * p4 * p8 == 0 && p2 * p6 * p8 == 0;
        }
      int n = bit (code, 1), e = bit (code, 3), so = bit (code, 5), we = bit (code, 7);
      gboolean corner = (n && e) || (e && so) || (so && we) || (we && n);
      simple_table[code] = corner && ring_components (code, 1, TRUE) == 1
                           && ring_components (code, 0, FALSE) == 1;
    }
  return NULL;
}

static void
ensure_tables (void)
{
  static GOnce once = G_ONCE_INIT;
  g_once (&once, build_tables, NULL);
}

/* Foreground pixel indices in raster order. */
static guint32 *
foreground_list (const ReteByteMap *map, gsize *n_out)
{
  gsize n = 0, s = map->stride;
  int w = map->width;
  for (int y = 0; y < map->height; y++)
    {
      const guint8 *row = map->pixels + (y + 1) * s + 1;
      for (int x = rete_next_set (row, 0, w); x < w; x = rete_next_set (row, x + 1, w))
        n += row[x] & 1;
    }
  guint32 *list = g_try_new (guint32, MAX (n, 1));
  if (list == NULL)
    return NULL;
  gsize k = 0;
  for (int y = 0; y < map->height; y++)
    {
      guint32 base = rete_byte_map_index (map, 0, y);
      const guint8 *row = map->pixels + base;
      for (int x = rete_next_set (row, 0, w); x < w; x = rete_next_set (row, x + 1, w))
        if (row[x] & 1)
          list[k++] = base + x;
    }
  *n_out = n;
  return list;
}

/* One subiteration's decisions over list[first..last), read-only on the map: each thread
 * writes only its own part of `doomed`. */
typedef struct {
  const guint8 *pixels;
  gsize stride;
  const guint32 *list;
  guint8 *doomed;
  const guint8 *table;
} Marking;

static void
mark_range (int first, int last, gpointer data)
{
  const Marking *job = data;
  for (int k = first; k < last; k++)
    job->doomed[k] = job->table[rete_neighbour_code (job->pixels, job->list[k], job->stride)];
}

/* Sorts a[0..n) ascending: least-significant-digit radix sort on two 16-bit digits, through
 * tmp (n entries) and counts (65536). */
static void
radix_sort (guint32 *a, guint32 *tmp, gsize n, gsize *counts)
{
  if (n < 2)
    return;
  for (int shift = 0; shift < 32; shift += 16)
    {
      guint32 *from = shift == 0 ? a : tmp, *to = shift == 0 ? tmp : a;
      memset (counts, 0, sizeof (gsize) << 16);
      for (gsize k = 0; k < n; k++)
        counts[(from[k] >> shift) & 0xffffu]++;
      gsize sum = 0;
      for (int d = 0; d < 1 << 16; d++)
        {
          gsize c = counts[d];
          counts[d] = sum;
          sum += c;
        }
      for (gsize k = 0; k < n; k++)
        to[counts[(from[k] >> shift) & 0xffffu]++] = from[k];
    }
}

gboolean
rete_thin_zhang_suen (ReteByteMap *map, ReteThinning variant, ReteProgressFunc progress,
                      gpointer progress_data, double from, double to, GError **error)
{
  ensure_tables ();
  gsize n, s = map->stride;
  guint32 *list = foreground_list (map, &n);
  guint8 *doomed = list && n <= G_MAXINT ? g_try_malloc (MAX (n, 1)) : NULL;
  guint32 *gone = doomed ? g_try_new (guint32, MAX (n, 1)) : NULL;
  guint32 *woken = gone ? g_try_new (guint32, MAX (n, 1)) : NULL;
  guint32 *merged = woken ? g_try_new (guint32, MAX (n, 1)) : NULL;
  gsize *counts = merged ? g_try_new (gsize, 1 << 16) : NULL;
  if (counts == NULL)
    {
      g_free (list);
      g_free (doomed);
      g_free (gone);
      g_free (woken);
      g_free (merged);
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_NO_MEMORY,
                   "not enough memory to thin a %d×%d map (%" G_GSIZE_FORMAT " vessel pixels): "
                   "free memory or give a smaller map",
                   map->width, map->height, n);
      return FALSE;
    }
  guint8 *p = map->pixels;
  gsize start = MAX (n, 1), remaining = n;
  /* Only pixels on the border can go (a pixel with 8 neighbours has B = 8): the list holds
   * the border pixels (marked ACTIVE), and a pixel joins it when a neighbour is deleted. Each
   * pixel joins at most once, so the list never outgrows the foreground. */
  gsize active = 0;
  for (gsize k = 0; k < n; k++)
    if (rete_neighbour_code (p, list[k], s) != 0xffu)
      {
        p[list[k]] |= ACTIVE;
        list[active++] = list[k];
      }
  n = active;
  gboolean removed = TRUE, ok = TRUE;
  Marking job = { p, s, list, doomed, NULL };
  while (removed && ok)
    {
      removed = FALSE;
      for (int sub = 0; sub < 2; sub++)
        {
          job.table = zhang_suen_table[variant == RETE_THINNING_LU_WANG][sub];
          rete_parallel_for ((int) n, mark_range, &job);
          /* delete and compact the list in one pass, then wake the neighbours of the deleted;
           * the woken are sorted and merged in, so that the list stays in raster order and
           * the next marking reads the map in order */
          gsize kept = 0, n_gone = 0, n_woken = 0;
          for (gsize k = 0; k < n; k++)
            if (doomed[k])
              {
                p[list[k]] = 0;
                gone[n_gone++] = list[k];
              }
            else
              list[kept++] = list[k];
          for (gsize k = 0; k < n_gone; k++)
            for (int d = 0; d < 8; d++)
              {
                guint32 j = gone[k] + rete_neighbour_dy[d] * (gssize) s + rete_neighbour_dx[d];
                if (p[j] == 1u)
                  {
                    p[j] |= ACTIVE;
                    woken[n_woken++] = j;
                  }
              }
          radix_sort (woken, gone, n_woken, counts);
          gsize a = 0, b = 0, out = 0;
          while (a < kept && b < n_woken)
            merged[out++] = list[a] < woken[b] ? list[a++] : woken[b++];
          while (a < kept)
            merged[out++] = list[a++];
          while (b < n_woken)
            merged[out++] = woken[b++];
          guint32 *swap = list;
          list = merged;
          merged = swap;
          job.list = list;
          removed |= n_gone > 0;
          remaining -= n_gone;
          n = out;
        }
      if (progress != NULL
          && !progress (from + (to - from) * (1.0 - (double) remaining / start), "thinning",
                        progress_data))
        {
          g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_CANCELLED, "thinning was cancelled");
          ok = FALSE;
        }
    }
  for (gsize k = 0; k < n; k++)
    p[list[k]] &= 1u;
  g_free (list);
  g_free (doomed);
  g_free (gone);
  g_free (woken);
  g_free (merged);
  g_free (counts);
  return ok;
}

gsize
rete_thin_remove_redundant (ReteByteMap *map)
{
  ensure_tables ();
  gsize n, s = map->stride, total = 0, removed;
  guint32 *list = foreground_list (map, &n);
  guint8 *p = map->pixels;
  int w = map->width;
  do
    {
      removed = 0;
      if (list != NULL)
        for (gsize k = 0; k < n; k++)
          {
            guint32 i = list[k];
            if ((p[i] & 1) && simple_table[rete_neighbour_code (p, i, s)])
              {
                p[i] &= ~1u;
                removed++;
              }
          }
      else /* no memory for the list: the same pass in raster order, straight on the map */
        for (int y = 0; y < map->height; y++)
          {
            guint32 base = rete_byte_map_index (map, 0, y);
            for (int x = rete_next_set (p + base, 0, w); x < w;
                 x = rete_next_set (p + base, x + 1, w))
              if ((p[base + x] & 1) && simple_table[rete_neighbour_code (p, base + x, s)])
                {
                  p[base + x] &= ~1u;
                  removed++;
                }
          }
      total += removed;
    }
  while (removed > 0);
  g_free (list);
  return total;
}

ReteByteMap *
rete_byte_map_new (int width, int height, GError **error)
{
  gsize size = (gsize) (width + 2) * (height + 2);
  guint8 *pixels = g_try_malloc0 (size);
  if (pixels == NULL)
    {
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_NO_MEMORY,
                   "not enough memory for a %d×%d working map (%" G_GSIZE_FORMAT " MB): free "
                   "memory or give a smaller map",
                   width, height, size >> 20);
      return NULL;
    }
  ReteByteMap *map = g_new (ReteByteMap, 1);
  map->width = width;
  map->height = height;
  map->stride = width + 2;
  map->pixels = pixels;
  return map;
}

void
rete_byte_map_free (ReteByteMap *map)
{
  if (map == NULL)
    return;
  g_free (map->pixels);
  g_free (map);
}

static ReteByteMap *
framed_copy (const guint8 *pixels, int width, int height)
{
  ReteByteMap *map = rete_byte_map_new (width, height, NULL);
  if (map == NULL)
    return NULL;
  for (int y = 0; y < height; y++)
    for (int x = 0; x < width; x++)
      map->pixels[rete_byte_map_index (map, x, y)] = pixels[(gsize) y * width + x] != 0;
  return map;
}

gboolean
rete_skeleton_thin (guint8 *pixels, int width, int height, ReteThinning variant,
                    ReteProgressFunc progress, gpointer progress_data)
{
  g_return_val_if_fail (pixels != NULL && width > 0 && height > 0, FALSE);
  ReteByteMap *map = framed_copy (pixels, width, height);
  if (map == NULL)
    return FALSE;
  gboolean ok = rete_thin_zhang_suen (map, variant, progress, progress_data, 0, 1, NULL);
  if (ok)
    for (int y = 0; y < height; y++)
      for (int x = 0; x < width; x++)
        pixels[(gsize) y * width + x] = map->pixels[rete_byte_map_index (map, x, y)] & 1;
  rete_byte_map_free (map);
  return ok;
}

ReteImage *
rete_skeletonize (const ReteImage *binary, GError **error)
{
  g_return_val_if_fail (binary != NULL, NULL);
  if (!rete_image_check_channels (binary, "vessel map", 1, error)
      || !rete_image_check_finite (binary, "vessel map", error))
    return NULL;
  int w = binary->width, h = binary->height;
  g_autoptr (ReteByteMap) map = rete_byte_map_new (w, h, error);
  if (map == NULL)
    return NULL;
  for (int y = 0; y < h; y++)
    for (int x = 0; x < w; x++)
      map->pixels[rete_byte_map_index (map, x, y)] = rete_image_get (binary, 0, x, y) >= 0.5f;
  if (!rete_thin_zhang_suen (map, RETE_THINNING_LU_WANG, NULL, NULL, 0, 1, error))
    return NULL;
  rete_thin_remove_redundant (map);
  ReteImage *skeleton = rete_image_new (w, h, 1, error);
  if (skeleton == NULL)
    return NULL;
  for (int y = 0; y < h; y++)
    for (int x = 0; x < w; x++)
      skeleton->data[(gsize) y * w + x] = map->pixels[rete_byte_map_index (map, x, y)] & 1;
  return skeleton;
}
