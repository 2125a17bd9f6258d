/* gimp_harness.h — running real GIMP 2.10 in batch mode from a GLib test: an isolated
 * profile and HOME in a temporary folder, the plug-in installed into that profile as
 * `meson install` lays it out, Script-Fu scripts run with a timeout, and the results read
 * back from what the script prints.
 *
 * GIMP exits 0 even when a procedure fails or a plug-in crashes (GIMP-NOTES.md), so a run is
 * judged by its output: a script ends with (gimp-message "RETE-DONE"), values are printed
 * as "RETE-VALUE name number", and stderr is searched for "execution error",
 * "Plug-in crashed", "GIMP-Error" and "fatal error". */
#ifndef RETE_GIMP_HARNESS_H
#define RETE_GIMP_HARNESS_H

#include <glib.h>
#include "rete_image.h"

typedef struct {
  char *output;        /* stdout and stderr together */
  gboolean done;       /* the script reached its end marker */
  gboolean failed;     /* a procedure returned an error (execution error) */
  gboolean crashed;    /* a plug-in crashed or GIMP reported a fatal error */
  GHashTable *values;  /* name -> (double *) from "RETE-VALUE name number" lines */
} GimpRun;

/* NULL (after g_test_skip) when gimp-console-2.10 or the plug-in binary is missing. Sets up
 * the profile once per process. */
const char *gimp_harness_setup (void);
/* Runs a Script-Fu script (one expression, or several in a (begin ...)) in a fresh GIMP
 * process with a timeout of `timeout` seconds. */
GimpRun *gimp_harness_run (const char *script, int timeout);
void gimp_run_free (GimpRun *run);
G_DEFINE_AUTOPTR_CLEANUP_FUNC (GimpRun, gimp_run_free)
/* The value printed as "RETE-VALUE name x"; fails the test when absent. */
double gimp_run_value (const GimpRun *run, const char *name);
/* Asserts the run succeeded (marker reached, no error, no crash), printing GIMP's output
 * when it did not. */
void gimp_run_assert_ok (const GimpRun *run);

/* Levels (0..255) of an 8-bit PNG written by GIMP against a float map quantised to 8 bits
 * (round half up of v*255, clamped): returns the number of differing pixels, the largest
 * difference in levels in *max_diff, and in *ties the pixels one level off whose value lies
 * within 0.001 level of a half level (rounded either way by babl; not counted as differing). */
gsize gimp_compare_png (const char *png, const ReteImage *map, int *max_diff, gsize *ties);

/* Script-Fu string literal of a path (quotes escaped). Newly allocated. */
char *gimp_scheme_string (const char *text);

#endif /* RETE_GIMP_HARNESS_H */
