/* base.c — version, thread count and a parallel loop over row bands or tiles. */
#include "rete_base.h"

#include <stdlib.h>

#ifndef RETE_VERSION_STRING
#define RETE_VERSION_STRING "unknown"
#endif

static int thread_count_override = 0;

const char *
rete_version (void)
{
  return RETE_VERSION_STRING;
}

int
rete_thread_count (void)
{
  if (thread_count_override > 0)
    return thread_count_override;
  const char *env = g_getenv ("RETE_THREADS");
  if (env != NULL)
    {
      int n = atoi (env);
      if (n >= 1 && n <= 64)
        return n;
    }
  int n = (int) g_get_num_processors ();
  return CLAMP (n, 1, 64);
}

void
rete_set_thread_count (int n)
{
  thread_count_override = CLAMP (n, 0, 64);
}

typedef struct {
  ReteRangeFunc fn;
  gpointer user_data;
  int first;
  int last;
} Chunk;

static gpointer
run_chunk (gpointer data)
{
  Chunk *c = data;
  c->fn (c->first, c->last, c->user_data);
  return NULL;
}

void
rete_parallel_for (int n_items, ReteRangeFunc fn, gpointer user_data)
{
  if (n_items <= 0)
    return;
  int n_threads = MIN (rete_thread_count (), n_items);
  if (n_threads <= 1)
    {
      fn (0, n_items, user_data);
      return;
    }
  Chunk chunks[64];
  GThread *threads[64] = { NULL };
  for (int t = 0; t < n_threads; t++)
    {
      chunks[t].fn = fn;
      chunks[t].user_data = user_data;
      chunks[t].first = (int) ((gint64) n_items * t / n_threads);
      chunks[t].last = (int) ((gint64) n_items * (t + 1) / n_threads);
    }
  for (int t = 1; t < n_threads; t++)
    {
      threads[t] = g_thread_try_new ("rete-worker", run_chunk, &chunks[t], NULL);
      if (threads[t] == NULL) /* no thread to be had: do the chunk here */
        run_chunk (&chunks[t]);
    }
  run_chunk (&chunks[0]);
  for (int t = 1; t < n_threads; t++)
    if (threads[t] != NULL)
      g_thread_join (threads[t]);
}
