/* rete_base.h — the foundation every librete module shares (lowest layer).
 *
 * Error codes, progress/cancel callbacks and the export macro. Each module reports
 * failures through GError in its own domain (RETE_NN_ERROR, RETE_VESSEL_ERROR, ...)
 * with one of the codes below, and a message a user can act on. Nothing in librete
 * aborts on user input.
 */
#ifndef RETE_BASE_H
#define RETE_BASE_H

#include <glib.h>

G_BEGIN_DECLS

#if defined(RETE_COMPILATION)
#define RETE_API __attribute__((visibility("default")))
#else
#define RETE_API
#endif

/* Error codes shared by all librete domains. */
typedef enum {
  RETE_ERROR_INVALID_ARGUMENT, /* a parameter out of range, NULL where data is needed */
  RETE_ERROR_SIZE_MISMATCH,    /* two images that must match do not */
  RETE_ERROR_EMPTY,            /* empty field of view, empty training set, empty map */
  RETE_ERROR_UNDEFINED,        /* a figure that is undefined for this input (AUC with one class) */
  RETE_ERROR_NOT_FINITE,       /* NaN or infinity in the input */
  RETE_ERROR_CANCELLED,        /* the progress callback asked to stop */
  RETE_ERROR_FORMAT,           /* a file whose content is wrong (model file, header) */
  RETE_ERROR_IO,               /* reading or writing a file failed */
  RETE_ERROR_NO_MEMORY,        /* an allocation that is too large or failed */
} ReteErrorCode;

/* Progress and cancellation: called with a fraction in [0,1] and a short message
 * (may be NULL). Return FALSE to ask the computation to stop; it then fails with
 * RETE_ERROR_CANCELLED and leaves its outputs untouched. */
typedef gboolean (*ReteProgressFunc) (double fraction, const char *message, gpointer user_data);

/* Largest image side librete accepts (a guard against absurd sizes from bad files). */
#define RETE_MAX_SIDE 65536
/* Largest pixel count librete accepts (about 268 megapixels). */
#define RETE_MAX_PIXELS ((gsize) 1 << 28)

RETE_API const char *rete_version (void);

/* Number of worker threads librete uses (default: the number of cores, at most 64;
 * the environment variable RETE_THREADS overrides it). */
RETE_API int rete_thread_count (void);
RETE_API void rete_set_thread_count (int n);

/* Runs fn(first, last, user_data) over [0, n_items) split into MIN (rete_thread_count(),
 * n_items) contiguous chunks of nearly equal size (chunk t is [n_items * t / n, n_items *
 * (t + 1) / n)). The chunks are run by the calling thread and by librete's worker threads
 * (started once, kept for later calls), whoever is free first; which thread runs a chunk
 * varies, the boundaries do not. Returns when all chunks are done, their writes visible to
 * the caller. May be called from several threads at once and from within fn (the caller
 * always works through chunks itself, so it never waits on a worker that is not there).
 * Used by the filters and the network for row bands and tiles. */
typedef void (*ReteRangeFunc) (int first, int last, gpointer user_data);
RETE_API void rete_parallel_for (int n_items, ReteRangeFunc fn, gpointer user_data);
/* The same with chunks of `chunk` items ([k * chunk, MIN ((k + 1) * chunk, n_items))), as
 * many as that makes: for short passes where a thread held up by other work on the machine
 * should be made up for by the others. One call of fn over everything when n_items <= chunk
 * or rete_thread_count() is 1. */
RETE_API void rete_parallel_for_chunks (int n_items, int chunk, ReteRangeFunc fn,
                                        gpointer user_data);

G_END_DECLS

#endif /* RETE_BASE_H */
