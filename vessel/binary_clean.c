/* binary_clean.c — clean-up of a binary vessel map (rete_binary.h): vessel pieces smaller
 * than N pixels go, background holes smaller than M pixels are filled.
 *
 * Connected components by breadth-first flood fill (one visit per pixel, O(n)). Vessel is
 * 8-connected and background 4-connected, the pairing that keeps digital topology
 * consistent (Rosenfeld, "Connectivity in digital pictures", J. ACM 17, 1970). The rules
 * follow skimage.morphology (0.19): remove_small_objects(min_size=N, connectivity=2) removes
 * components with fewer than N pixels, then remove_small_holes(area_threshold=M,
 * connectivity=1) fills background components with fewer than M pixels, including ones that
 * touch the image edge.
 */
#include "rete_binary.h"

#include <string.h>

/* Clears (sets to `into`) every component of pixels equal to `value` in `map` that has fewer
 * than `min_size` pixels. `queue` and `seen` hold n entries. */
static void
remove_small (guint8 *map, int width, int height, guint8 value, guint8 into, gboolean eight,
              gsize min_size, guint32 *queue, guint8 *seen)
{
  static const int dx[8] = { 1, -1, 0, 0, 1, 1, -1, -1 };
  static const int dy[8] = { 0, 0, 1, -1, 1, -1, 1, -1 };
  int n_neighbours = eight ? 8 : 4;
  gsize n = (gsize) width * height;
  memset (seen, 0, n);
  for (gsize start = 0; start < n; start++)
    {
      if (seen[start] || map[start] != value)
        continue;
      /* the queue keeps every pixel of the component, so it can be cleared afterwards */
      gsize head = 0, tail = 0;
      queue[tail++] = (guint32) start;
      seen[start] = 1;
      while (head < tail)
        {
          guint32 p = queue[head++];
          int x = (int) (p % (guint32) width), y = (int) (p / (guint32) width);
          for (int k = 0; k < n_neighbours; k++)
            {
              int nx = x + dx[k], ny = y + dy[k];
              if (nx < 0 || ny < 0 || nx >= width || ny >= height)
                continue;
              guint32 q = (guint32) ny * (guint32) width + (guint32) nx;
              if (!seen[q] && map[q] == value)
                {
                  seen[q] = 1;
                  queue[tail++] = q;
                }
            }
        }
      if (tail < min_size)
        for (gsize i = 0; i < tail; i++)
          map[queue[i]] = into;
    }
}

gboolean
rete_binary_clean (ReteImage *binary, gsize min_component, gsize max_hole, GError **error)
{
  if (!rete_image_check_channels (binary, "binary vessel map", 1, error))
    return FALSE;
  if (min_component == 0 && max_hole == 0)
    return TRUE;
  gsize n = rete_image_n_pixels (binary);
  guint8 *map = g_try_malloc (n);
  guint8 *seen = g_try_malloc (n);
  guint32 *queue = g_try_new (guint32, n);
  if (map == NULL || seen == NULL || queue == NULL)
    {
      g_free (map);
      g_free (seen);
      g_free (queue);
      g_set_error (error, RETE_VESSEL_ERROR, RETE_ERROR_NO_MEMORY,
                   "not enough memory to clean a %d×%d binary map", binary->width,
                   binary->height);
      return FALSE;
    }
  for (gsize i = 0; i < n; i++)
    map[i] = binary->data[i] >= 0.5f;
  if (min_component > 0)
    remove_small (map, binary->width, binary->height, 1, 0, TRUE, min_component, queue, seen);
  if (max_hole > 0)
    remove_small (map, binary->width, binary->height, 0, 1, FALSE, max_hole, queue, seen);
  for (gsize i = 0; i < n; i++)
    binary->data[i] = map[i];
  g_free (map);
  g_free (seen);
  g_free (queue);
  return TRUE;
}
