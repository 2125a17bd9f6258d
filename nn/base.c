/* base.c — version, thread count and a parallel loop over row bands or tiles (kept worker
 * threads). */
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
  /* g_get_num_processors () reads files (cgroup quotas) each time: once is enough */
  static gsize n_cores = 0;
  if (g_once_init_enter (&n_cores))
    g_once_init_leave (&n_cores, CLAMP (g_get_num_processors (), 1, 64));
  return (int) n_cores;
}

void
rete_set_thread_count (int n)
{
  thread_count_override = CLAMP (n, 0, 64);
}

/* ---- the parallel loop ----
 * Worker threads are started once (as many as rete_thread_count () has asked for, less the
 * caller) and kept: starting and joining threads on every call cost 70-130 µs, more than some
 * short passes take in all. A call publishes a job on a list of open jobs; idle workers, and
 * the calling thread itself, claim its chunks one by one until none is left. The caller never
 * waits for a worker to turn up, only for chunks a worker has already claimed (and so is
 * running), so nested calls (a chunk that itself calls rete_parallel_for) and calls from
 * several threads at once cannot deadlock however few workers there are; a worker that comes
 * late or never only costs speed. The chunk boundaries depend on n_items and the thread count
 * alone, never on which thread runs a chunk or when. Idle workers poll for new jobs for a
 * short while (passes often follow one another closely) before sleeping. */
#define POOL_SPIN_US 100 /* polls for this long before sleeping */

typedef struct Job Job;
struct Job {
  ReteRangeFunc fn;
  gpointer user_data;
  int n_items;
  int n_chunks;
  int chunk;             /* items per chunk, or 0: n_items split evenly into n_chunks */
  gint next;             /* atomic: first chunk not claimed yet */
  gint users;            /* atomic, changed under pool.lock: workers holding the job */
  gboolean listed;       /* under pool.lock: on pool.open */
  Job *link;             /* under pool.lock: next open job */
};

static struct {
  GMutex lock;
  GCond work;            /* a job was published */
  GCond done;            /* a worker left a job */
  Job *open;             /* jobs with chunks perhaps still to claim */
  int n_workers;
  int n_sleeping;        /* workers waiting on `work` */
  int n_waiting;         /* callers waiting on `done` */
  gint epoch;            /* atomic: bumped at every job published */
} pool;

/* One poll of a wait: a pause, and now and then the processor handed to another thread
 * (on a busy machine the thread waited for may be queued behind this one). */
static inline void
cpu_relax (int k)
{
#if defined(__x86_64__) || defined(__i386__)
  __builtin_ia32_pause ();
#endif
  if (k % 64 == 63)
    g_thread_yield ();
}

/* Claims and runs chunks of job until none is left. */
static void
job_work (Job *job)
{
  int c;
  while ((c = g_atomic_int_add (&job->next, 1)) < job->n_chunks)
    {
      int first, last;
      if (job->chunk > 0)
        {
          first = c * job->chunk;
          last = MIN (first + job->chunk, job->n_items);
        }
      else
        {
          first = (int) ((gint64) job->n_items * c / job->n_chunks);
          last = (int) ((gint64) job->n_items * (c + 1) / job->n_chunks);
        }
      job->fn (first, last, job->user_data);
    }
}

/* Under pool.lock. */
static void
job_unlist (Job *job)
{
  if (!job->listed)
    return;
  for (Job **p = &pool.open; *p != NULL; p = &(*p)->link)
    if (*p == job)
      {
        *p = job->link;
        break;
      }
  job->listed = FALSE;
}

/* Under pool.lock: an open job with chunks left, now held by the worker, or NULL. */
static Job *
pool_take (void)
{
  Job *job;
  while ((job = pool.open) != NULL)
    {
      if (g_atomic_int_get (&job->next) < job->n_chunks)
        {
          g_atomic_int_inc (&job->users);
          return job;
        }
      job_unlist (job);
    }
  return NULL;
}

static gpointer
pool_worker (gpointer unused)
{
  (void) unused;
  g_mutex_lock (&pool.lock);
  for (;;)
    {
      Job *job = pool_take ();
      if (job == NULL)
        {
          /* poll a while for the next job, then sleep */
          int epoch = g_atomic_int_get (&pool.epoch);
          g_mutex_unlock (&pool.lock);
          gint64 until = g_get_monotonic_time () + POOL_SPIN_US;
          gboolean seen = FALSE;
          for (int k = 0; !seen; k++)
            {
              cpu_relax (k);
              seen = g_atomic_int_get (&pool.epoch) != epoch;
              if (k % 64 == 63 && g_get_monotonic_time () > until)
                break;
            }
          g_mutex_lock (&pool.lock);
          if (!seen && pool.open == NULL)
            {
              pool.n_sleeping++;
              while (pool.open == NULL)
                g_cond_wait (&pool.work, &pool.lock);
              pool.n_sleeping--;
            }
          continue;
        }
      g_mutex_unlock (&pool.lock);
      job_work (job);
      g_mutex_lock (&pool.lock);
      job_unlist (job);
      /* the last touch of job: its caller may return as soon as users is 0 */
      if (g_atomic_int_dec_and_test (&job->users) && pool.n_waiting > 0)
        g_cond_broadcast (&pool.done);
    }
  return NULL;
}

/* Under pool.lock: workers up to n_threads - 1 (those that cannot be started are done
 * without). */
static void
pool_grow (int n_threads)
{
  while (pool.n_workers < n_threads - 1)
    {
      GThread *thread = g_thread_try_new ("rete-worker", pool_worker, NULL, NULL);
      if (thread == NULL)
        break;
      g_thread_unref (thread);
      pool.n_workers++;
    }
}

static void
run_job (Job *job, int n_threads)
{
  job->next = 0;
  job->users = 0;
  g_mutex_lock (&pool.lock);
  pool_grow (n_threads);
  job->link = pool.open;
  pool.open = job;
  job->listed = TRUE;
  g_atomic_int_inc (&pool.epoch);
  if (pool.n_sleeping > 0)
    g_cond_broadcast (&pool.work);
  g_mutex_unlock (&pool.lock);

  job_work (job);

  /* every chunk is claimed; wait for the workers still running theirs */
  g_mutex_lock (&pool.lock);
  job_unlist (job);
  g_mutex_unlock (&pool.lock);
  gint64 until = 0;
  for (int k = 0; g_atomic_int_get (&job->users) > 0; k++)
    {
      cpu_relax (k);
      if (k % 64 == 63)
        {
          gint64 now = g_get_monotonic_time ();
          if (until == 0)
            until = now + POOL_SPIN_US;
          else if (now > until)
            break;
        }
    }
  g_mutex_lock (&pool.lock);
  pool.n_waiting++;
  while (g_atomic_int_get (&job->users) > 0)
    g_cond_wait (&pool.done, &pool.lock);
  pool.n_waiting--;
  g_mutex_unlock (&pool.lock);
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
  Job job = { .fn = fn, .user_data = user_data, .n_items = n_items, .n_chunks = n_threads };
  run_job (&job, n_threads);
}

void
rete_parallel_for_chunks (int n_items, int chunk, ReteRangeFunc fn, gpointer user_data)
{
  if (n_items <= 0)
    return;
  chunk = MAX (chunk, 1);
  int n_threads = rete_thread_count ();
  if (n_threads <= 1 || n_items <= chunk)
    {
      fn (0, n_items, user_data);
      return;
    }
  Job job = { .fn = fn, .user_data = user_data, .n_items = n_items, .chunk = chunk,
              .n_chunks = (int) (((gint64) n_items + chunk - 1) / chunk) };
  run_job (&job, n_threads);
}
