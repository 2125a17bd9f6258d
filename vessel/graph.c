/* graph.c — the vessel graph of a one-pixel-thin skeleton: nodes and segments.
 *
 * On the 8-connected skeleton (skeleton.c) a pixel with one skeleton neighbour is an end
 * point, with three or more a junction pixel, with two an ordinary path pixel (the usual
 * neighbour-count classification of skeleton pixels, common practice). Adjacent junction
 * pixels form one junction (a cluster, found by 8-connected flood fill), since a branching of
 * thick vessels thins to a small knot of pixels rather than one. A segment is the path of
 * ordinary pixels between two nodes (junction clusters or end points), both node pixels
 * included; a closed ring of ordinary pixels without nodes is a closed segment; two nodes
 * side by side make a segment of two pixels. Paths that leave a junction cluster and come
 * straight back to it within 3 pixels are part of the knot, not segments.
 *
 * Pruning removes, once, the terminal segments (end point to junction) and the isolated
 * pieces shorter than a length: the spurs that thinning grows on the bumps of a vessel
 * outline (common practice), then makes the skeleton thin again.
 *
 * Bits of the skeleton bytes used here: bit 0 skeleton, bit 1 traced, bit 2 junction pixel
 * (set by rete_graph_build, read by rete_graph_prune).
 */
#include "measure_private.h"

#include <math.h>

#define TRACED 2u
#define JUNCTION 4u

typedef struct {
  ReteGraph graph;
  GArray *path;        /* guint32 pixel indices of all segments, one after another */
  GArray *path_start;  /* int: first index in path of each segment, plus the total at the end */
} Builder;

static inline int
count_neighbours (const guint8 *p, gsize i, gsize s)
{
  return __builtin_popcount (rete_neighbour_code (p, i, s));
}

static inline gboolean
is_node (const guint8 *p, gsize i, gsize s)
{
  return count_neighbours (p, i, s) != 2;
}

static double
step_length (guint32 a, guint32 b, gsize s)
{
  gint64 d = (gint64) b - (gint64) a;
  return (d == 1 || d == -1 || d == (gint64) s || d == -(gint64) s) ? 1.0 : G_SQRT2;
}

/* Ends the segment whose pixels are path[first..]; records it unless it is part of a knot. */
static void
finish_segment (Builder *b, const ReteByteMap *map, GHashTable *cluster, int first,
                gboolean closed, const float *distance, double sigma, gboolean with_figures)
{
  const guint8 *p = map->pixels;
  gsize s = map->stride;
  guint32 *pix = &g_array_index (b->path, guint32, first);
  int n = b->path->len - first;
  guint32 a = pix[0], z = pix[n - 1];
  gboolean ja = (p[a] & JUNCTION) != 0, jz = (p[z] & JUNCTION) != 0;
  if (!closed && ja && jz && n <= 3
      && g_hash_table_lookup (cluster, GUINT_TO_POINTER (a))
         == g_hash_table_lookup (cluster, GUINT_TO_POINTER (z)))
    {
      g_array_set_size (b->path, first);
      return;
    }
  ReteSegment seg = { 0 };
  seg.x0 = a % s - 1;
  seg.y0 = a / s - 1;
  seg.x1 = z % s - 1;
  seg.y1 = z / s - 1;
  seg.n_pixels = n;
  seg.start_is_junction = ja;
  seg.end_is_junction = jz;
  seg.closed = closed;
  for (int k = 1; k < n; k++)
    seg.length += step_length (pix[k - 1], pix[k], s);
  if (closed)
    seg.length += step_length (pix[n - 1], pix[0], s);
  seg.calibre_mean = seg.calibre_sd = seg.tortuosity = seg.curvature_index = NAN;
  if (with_figures)
    {
      int *xs = g_new (int, n), *ys = g_new (int, n);
      for (int k = 0; k < n; k++)
        {
          xs[k] = pix[k] % s - 1;
          ys[k] = pix[k] / s - 1;
        }
      rete_segment_figures (&seg, xs, ys, n, distance, map->width, map->height, sigma);
      g_free (xs);
      g_free (ys);
    }
  b->graph.length += seg.length;
  g_array_append_val (b->graph.segments, seg);
  int end = b->path->len;
  g_array_append_val (b->path_start, end);
}

/* Follows ordinary pixels from node `from` through `next` until a node; appends the path. */
static void
trace_open (Builder *b, ReteByteMap *map, guint32 from, guint32 next)
{
  guint8 *p = map->pixels;
  gsize s = map->stride;
  g_array_append_val (b->path, from);
  guint32 prev = from, cur = next;
  for (;;)
    {
      g_array_append_val (b->path, cur);
      if (is_node (p, cur, s))
        return;
      p[cur] |= TRACED;
      unsigned code = rete_neighbour_code (p, cur, s);
      guint32 step = cur;
      for (int k = 0; k < 8; k++)
        if (code & (1u << k))
          {
            guint32 r = cur + rete_neighbour_dy[k] * (gssize) s + rete_neighbour_dx[k];
            if (r != prev)
              {
                step = r;
                break;
              }
          }
      if (step == cur || ((p[step] & TRACED) && !is_node (p, step, s)))
        return; /* cannot happen on a thin skeleton; stop rather than loop */
      prev = cur;
      cur = step;
    }
}

/* Clears the bits outside `keep` of every pixel. */
static void
keep_bits (ReteByteMap *map, guint8 keep)
{
  int w = map->width;
  for (int y = 0; y < map->height; y++)
    {
      guint8 *row = map->pixels + rete_byte_map_index (map, 0, y);
      for (int x = rete_next_set (row, 0, w); x < w; x = rete_next_set (row, x + 1, w))
        row[x] &= keep;
    }
}

static Builder *
build (ReteByteMap *map, const float *distance, double sigma, gboolean with_figures)
{
  guint8 *p = map->pixels;
  gsize s = map->stride;
  Builder *b = g_new0 (Builder, 1);
  b->graph.segments = g_array_new (FALSE, FALSE, sizeof (ReteSegment));
  b->path = g_array_new (FALSE, FALSE, sizeof (guint32));
  b->path_start = g_array_new (FALSE, FALSE, sizeof (int));
  int zero = 0;
  g_array_append_val (b->path_start, zero);

  GArray *nodes = g_array_new (FALSE, FALSE, sizeof (guint32));
  GHashTable *cluster = g_hash_table_new (NULL, NULL); /* junction pixel -> cluster id + 1 */
  int w = map->width;
  for (int y = 0; y < map->height; y++)
    {
      guint32 base = rete_byte_map_index (map, 0, y);
      for (int x = rete_next_set (p + base, 0, w); x < w; x = rete_next_set (p + base, x + 1, w))
        {
          guint32 i = base + x;
          p[i] &= 1u;
          if (!(p[i] & 1))
            continue;
          int c = count_neighbours (p, i, s);
          if (c == 2)
            continue;
          if (c == 0)
            b->graph.n_isolated++;
          else if (c == 1)
            b->graph.n_end_points++;
          else
            p[i] |= JUNCTION;
          if (c > 0)
            g_array_append_val (nodes, i);
        }
    }
  /* junction clusters */
  GArray *stack = g_array_new (FALSE, FALSE, sizeof (guint32));
  for (guint k = 0; k < nodes->len; k++)
    {
      guint32 i = g_array_index (nodes, guint32, k);
      if (!(p[i] & JUNCTION) || g_hash_table_contains (cluster, GUINT_TO_POINTER (i)))
        continue;
      guint id = ++b->graph.n_junctions;
      g_hash_table_insert (cluster, GUINT_TO_POINTER (i), GUINT_TO_POINTER (id));
      g_array_append_val (stack, i);
      while (stack->len > 0)
        {
          guint32 a = g_array_index (stack, guint32, stack->len - 1);
          g_array_set_size (stack, stack->len - 1);
          for (int d = 0; d < 8; d++)
            {
              guint32 r = a + rete_neighbour_dy[d] * (gssize) s + rete_neighbour_dx[d];
              if ((p[r] & JUNCTION) && !g_hash_table_contains (cluster, GUINT_TO_POINTER (r)))
                {
                  g_hash_table_insert (cluster, GUINT_TO_POINTER (r), GUINT_TO_POINTER (id));
                  g_array_append_val (stack, r);
                }
            }
        }
    }
  g_array_free (stack, TRUE);

  /* open segments, from every node along each of its skeleton neighbours */
  for (guint k = 0; k < nodes->len; k++)
    {
      guint32 i = g_array_index (nodes, guint32, k);
      for (int d = 0; d < 8; d++)
        {
          guint32 q = i + rete_neighbour_dy[d] * (gssize) s + rete_neighbour_dx[d];
          if (!(p[q] & 1))
            continue;
          if (is_node (p, q, s))
            {
              gboolean same = (p[i] & JUNCTION) && (p[q] & JUNCTION);
              if (same || q < i)
                continue; /* inside a knot, or recorded from the other side */
              int first = b->path->len;
              g_array_append_val (b->path, i);
              g_array_append_val (b->path, q);
              finish_segment (b, map, cluster, first, FALSE, distance, sigma, with_figures);
              continue;
            }
          if (p[q] & TRACED)
            continue;
          int first = b->path->len;
          trace_open (b, map, i, q);
          finish_segment (b, map, cluster, first, FALSE, distance, sigma, with_figures);
        }
    }
  /* closed rings: ordinary pixels no trace reached */
  for (int y = 0; y < map->height; y++)
    {
      guint32 base = rete_byte_map_index (map, 0, y);
      for (int x = rete_next_set (p + base, 0, w); x < w; x = rete_next_set (p + base, x + 1, w))
        {
          guint32 i = base + x;
          if ((p[i] & (1u | TRACED | JUNCTION)) != 1u || is_node (p, i, s))
            continue;
          int first = b->path->len;
          guint32 prev = i, cur = i;
          do
            {
              g_array_append_val (b->path, cur);
              p[cur] |= TRACED;
              unsigned code = rete_neighbour_code (p, cur, s);
              guint32 step = i;
              for (int d = 0; d < 8; d++)
                if (code & (1u << d))
                  {
                    guint32 r = cur + rete_neighbour_dy[d] * (gssize) s + rete_neighbour_dx[d];
                    if (r != prev && !(p[r] & TRACED))
                      {
                        step = r;
                        break;
                      }
                  }
              prev = cur;
              cur = step;
            }
          while (cur != i);
          finish_segment (b, map, cluster, first, TRUE, distance, sigma, with_figures);
        }
    }
  g_hash_table_destroy (cluster);
  g_array_free (nodes, TRUE);
  return b;
}

static void
builder_free (Builder *b, gboolean keep_graph)
{
  g_array_free (b->path, TRUE);
  g_array_free (b->path_start, TRUE);
  if (!keep_graph)
    g_array_free (b->graph.segments, TRUE);
  g_free (b);
}

ReteGraph *
rete_graph_build (ReteByteMap *skeleton, const float *distance, double curvature_sigma,
                  gboolean with_figures)
{
  Builder *b = build (skeleton, distance, curvature_sigma, with_figures);
  ReteGraph *graph = g_new (ReteGraph, 1);
  *graph = b->graph;
  builder_free (b, TRUE);
  keep_bits (skeleton, 1u | JUNCTION);
  return graph;
}

void
rete_graph_free (ReteGraph *graph)
{
  if (graph == NULL)
    return;
  g_array_free (graph->segments, TRUE);
  g_free (graph);
}

int
rete_graph_prune (ReteByteMap *map, double min_length)
{
  if (!(min_length > 0))
    return 0;
  guint8 *p = map->pixels;
  gsize s = map->stride;
  Builder *b = build (map, NULL, 0, FALSE);
  int removed = 0;
  for (guint k = 0; k < b->graph.segments->len; k++)
    {
      const ReteSegment *seg = &g_array_index (b->graph.segments, ReteSegment, k);
      gboolean terminal = seg->start_is_junction != seg->end_is_junction;
      gboolean isolated = !seg->start_is_junction && !seg->end_is_junction;
      if (!(terminal || isolated) || seg->length >= min_length)
        continue;
      int first = g_array_index (b->path_start, int, k);
      int last = g_array_index (b->path_start, int, k + 1);
      for (int j = first; j < last; j++)
        {
          guint32 i = g_array_index (b->path, guint32, j);
          if (!(p[i] & JUNCTION))
            p[i] &= ~1u;
        }
      removed++;
    }
  builder_free (b, FALSE);
  /* isolated pixels, and junction pixels left as stubs once their spur has gone */
  gboolean again = TRUE;
  int w = map->width;
  while (again)
    {
      again = FALSE;
      for (int y = 0; y < map->height; y++)
        {
          guint32 base = rete_byte_map_index (map, 0, y);
          for (int x = rete_next_set (p + base, 0, w); x < w;
               x = rete_next_set (p + base, x + 1, w))
            {
              guint32 i = base + x;
              if ((p[i] & 1) && count_neighbours (p, i, s) <= ((p[i] & JUNCTION) ? 1 : 0))
                {
                  p[i] &= ~1u;
                  again = TRUE;
                  if (!(p[i] & JUNCTION))
                    removed++;
                }
            }
        }
    }
  keep_bits (map, 1u);
  rete_thin_remove_redundant (map);
  return removed;
}

void
rete_graph_point_types (const ReteByteMap *map, float *point_type)
{
  const guint8 *p = map->pixels;
  gsize s = map->stride;
  for (int y = 0; y < map->height; y++)
    {
      guint32 base = rete_byte_map_index (map, 0, y);
      float *out = point_type + (gsize) y * map->width;
      memset (out, 0, map->width * sizeof (float)); /* RETE_POINT_NONE */
      for (int x = rete_next_set (p + base, 0, map->width); x < map->width;
           x = rete_next_set (p + base, x + 1, map->width))
        {
          guint32 i = base + x;
          if (!(p[i] & 1))
            continue;
          int c = count_neighbours (p, i, s);
          out[x] = c == 1 ? RETE_POINT_END : c >= 3 ? RETE_POINT_JUNCTION : RETE_POINT_NONE;
        }
    }
}
