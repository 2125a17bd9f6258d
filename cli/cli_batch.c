/* cli_batch.c — progress on stderr and a batch runner for the `rete` command.
 *
 * Photographs of a batch are independent, so the runner hands them to a pool of workers that
 * take the next index from a shared counter; each item's result does not depend on which
 * worker took it or when. librete's own threads (rete_parallel_for) are set so that
 * workers x threads stays about the number of cores. Image files are read and written
 * through GEGL under io.c's lock. */
#include "rete_cli.h"

#include <stdarg.h>
#include <stdio.h>
#include <string.h>
#include <unistd.h>

struct _ReteCliProgress {
  GMutex lock;
  char *verb;
  int n_items, n_done, n_failed;
  gboolean quiet, live;
  GPtrArray *failures;   /* "name: reason" */
  GHashTable *running;   /* name -> fraction (double *) of items in hand */
  gint64 last_draw;
  gboolean line_drawn;
};

int
rete_cli_cores (void)
{
  static int cores = 0;
  if (g_atomic_int_get (&cores) == 0)
    g_atomic_int_set (&cores, rete_thread_count ());
  return g_atomic_int_get (&cores);
}

ReteCliProgress *
rete_cli_progress_new (const char *verb, int n_items, gboolean quiet)
{
  ReteCliProgress *p = g_new0 (ReteCliProgress, 1);
  g_mutex_init (&p->lock);
  p->verb = g_strdup (verb);
  p->n_items = n_items;
  p->quiet = quiet;
  p->live = !quiet && isatty (fileno (stderr)) && g_getenv ("RETE_NO_LIVE_PROGRESS") == NULL;
  p->failures = g_ptr_array_new_with_free_func (g_free);
  p->running = g_hash_table_new_full (g_str_hash, g_str_equal, g_free, g_free);
  return p;
}

void
rete_cli_progress_free (ReteCliProgress *p)
{
  if (p == NULL)
    return;
  g_ptr_array_free (p->failures, TRUE);
  g_hash_table_destroy (p->running);
  g_free (p->verb);
  g_mutex_clear (&p->lock);
  g_free (p);
}

static void
clear_line (ReteCliProgress *p)
{
  if (p->line_drawn)
    fputs ("\r\033[K", stderr);
  p->line_drawn = FALSE;
}

/* The live line: "vessel maps 3/20 | Image_04L 45% | Image_05L 10%" (terminals only). */
static void
draw_line (ReteCliProgress *p)
{
  if (!p->live)
    return;
  GString *line = g_string_new (NULL);
  g_string_printf (line, "%s %d/%d", p->verb, p->n_done + p->n_failed, p->n_items);
  GHashTableIter iter;
  gpointer key, value;
  g_hash_table_iter_init (&iter, p->running);
  while (g_hash_table_iter_next (&iter, &key, &value))
    g_string_append_printf (line, " | %.30s %3.0f%%", (const char *) key,
                            100.0 * *(double *) value);
  clear_line (p);
  fputs (line->str, stderr);
  fflush (stderr);
  p->line_drawn = TRUE;
  g_string_free (line, TRUE);
  p->last_draw = g_get_monotonic_time ();
}

static void
item_started (ReteCliProgress *p, const char *name)
{
  g_mutex_lock (&p->lock);
  g_hash_table_replace (p->running, g_strdup (name), g_new0 (double, 1));
  draw_line (p);
  g_mutex_unlock (&p->lock);
}

gboolean
rete_cli_item_progress (double fraction, const char *message, gpointer data)
{
  const ReteCliItem *item = data;
  ReteCliProgress *p = item ? item->progress : NULL;
  if (p == NULL || !p->live)
    return TRUE;
  g_mutex_lock (&p->lock);
  double *slot = g_hash_table_lookup (p->running, item->name);
  if (slot)
    *slot = CLAMP (fraction, 0.0, 1.0);
  if (g_get_monotonic_time () - p->last_draw > 200000)
    draw_line (p);
  g_mutex_unlock (&p->lock);
  return TRUE;
}

void
rete_cli_progress_done (ReteCliProgress *p, const char *name, gboolean ok, const char *message,
                        double seconds)
{
  g_mutex_lock (&p->lock);
  g_hash_table_remove (p->running, name);
  if (ok)
    p->n_done++;
  else
    {
      p->n_failed++;
      /* Messages from the I/O layer start with the file name already. */
      if (g_str_has_prefix (message, name))
        g_ptr_array_add (p->failures, g_strdup (message));
      else
        g_ptr_array_add (p->failures, g_strdup_printf ("%s: %s", name, message));
    }
  clear_line (p);
  int k = p->n_done + p->n_failed;
  if (!ok)
    {
      if (g_str_has_prefix (message, name))
        fprintf (stderr, "[%d/%d] FAILED: %s\n", k, p->n_items, message);
      else
        fprintf (stderr, "[%d/%d] FAILED: %s: %s\n", k, p->n_items, name, message);
    }
  else if (!p->quiet)
    fprintf (stderr, "[%d/%d] %s: ok%s%s (%.1f s)\n", k, p->n_items, name, message ? ", " : "",
             message ? message : "", seconds);
  draw_line (p);
  fflush (stderr);
  g_mutex_unlock (&p->lock);
}

int
rete_cli_progress_finish (ReteCliProgress *p)
{
  g_mutex_lock (&p->lock);
  clear_line (p);
  if (p->n_failed == 0)
    {
      if (!p->quiet)
        fprintf (stderr, "%s: %d of %d done\n", p->verb, p->n_done, p->n_items);
    }
  else
    {
      fprintf (stderr, "%s: %d of %d done, %d FAILED:\n", p->verb, p->n_done, p->n_items,
               p->n_failed);
      for (guint i = 0; i < p->failures->len; i++)
        fprintf (stderr, "  %s\n", (const char *) p->failures->pdata[i]);
    }
  fflush (stderr);
  int failed = p->n_failed;
  g_mutex_unlock (&p->lock);
  return failed;
}

typedef struct {
  int n_items;
  const char *const *names;
  ReteCliItemFunc fn;
  gpointer user_data;
  ReteCliProgress *progress;
  gint next;
  gint failed;
  gint slot_counter;
} Batch;

static gpointer
batch_worker (gpointer data)
{
  Batch *batch = data;
  char *message = NULL;
  ReteCliItem item = { batch->progress, g_atomic_int_add (&batch->slot_counter, 1), NULL,
                       &message };
  for (;;)
    {
      int index = g_atomic_int_add (&batch->next, 1);
      if (index >= batch->n_items)
        break;
      item.name = batch->names[index];
      if (batch->progress)
        item_started (batch->progress, item.name);
      GError *error = NULL;
      gint64 start = g_get_monotonic_time ();
      gboolean ok = batch->fn (index, &item, batch->user_data, &error);
      double seconds = (g_get_monotonic_time () - start) / 1e6;
      if (!ok)
        {
          g_atomic_int_inc (&batch->failed);
          if (batch->progress)
            rete_cli_progress_done (batch->progress, item.name, FALSE,
                                    error ? error->message : "failed (no reason given)", seconds);
        }
      else if (batch->progress)
        rete_cli_progress_done (batch->progress, item.name, TRUE, message, seconds);
      g_clear_error (&error);
      g_clear_pointer (&message, g_free);
    }
  return NULL;
}

void
rete_cli_item_set_message (const ReteCliItem *item, const char *format, ...)
{
  if (item == NULL || item->message == NULL)
    return;
  va_list args;
  va_start (args, format);
  g_free (*item->message);
  *item->message = g_strdup_vprintf (format, args);
  va_end (args);
}

int
rete_cli_run_batch (int n_items, const char *const *names, int n_jobs, ReteCliItemFunc fn,
                    gpointer user_data, ReteCliProgress *progress)
{
  if (n_items <= 0)
    return 0;
  int cores = rete_cli_cores ();
  int jobs = n_jobs > 0 ? n_jobs : cores;
  jobs = CLAMP (jobs, 1, MIN (n_items, 64));
  rete_set_thread_count (MAX (1, cores / jobs));

  Batch batch = { n_items, names, fn, user_data, progress, 0, 0, 0 };
  GThread *threads[64] = { NULL };
  for (int t = 1; t < jobs; t++)
    threads[t] = g_thread_try_new ("rete-batch", batch_worker, &batch, NULL);
  batch_worker (&batch);
  for (int t = 1; t < jobs; t++)
    if (threads[t])
      g_thread_join (threads[t]);
  rete_set_thread_count (cores);
  return g_atomic_int_get (&batch.failed);
}
