/* rete_cli.h — what the subcommands of the `rete` command share: the subcommand entry
 * points, exit codes, option parsing with one way of reporting usage errors, inputs from
 * files and folders, output names, writes that never touch an input, a progress printer on
 * stderr and a batch runner that spreads photographs over the cores. */
#ifndef RETE_CLI_H
#define RETE_CLI_H

#include <glib.h>

#include "rete_image.h"
#include "rete_binary.h"
#include "rete_io.h"

G_BEGIN_DECLS

/* Exit status of every subcommand (documented in `rete --help`). */
enum {
  RETE_EXIT_OK = 0,     /* everything asked for was done */
  RETE_EXIT_FAILED = 1, /* some inputs failed (each reported with its reason), or a figure
                           asked for was undefined; the others were still processed */
  RETE_EXIT_USAGE = 2,  /* bad command line: unknown option, bad value, nothing to do */
};

/* Subcommands: each takes argv with argv[0] = "rete <name>" and returns an exit status. */
int rete_cmd_vessels (int argc, char **argv);
int rete_cmd_fov (int argc, char **argv);
int rete_cmd_agreement (int argc, char **argv);
int rete_cmd_synth (int argc, char **argv);
int rete_cmd_measure (int argc, char **argv);
int rete_cmd_train (int argc, char **argv);
int rete_cmd_sweep (int argc, char **argv);

#define RETE_CLI_ERROR (rete_cli_error_quark ())
GQuark rete_cli_error_quark (void);
enum {
  RETE_CLI_ERROR_USAGE,  /* a bad option value */
  RETE_CLI_ERROR_INPUT,  /* an input that cannot be used */
  RETE_CLI_ERROR_OUTPUT, /* an output that would overwrite an input, or cannot be written */
};

/* The text every subcommand's --help ends with. */
#define RETE_CLI_EXIT_HELP \
  "Exit status: 0 all done; 1 some inputs failed (the others were processed, each failure\n" \
  "is reported on stderr with its reason); 2 usage error (bad option or value).\n"

/* ---- options ---- */

/* A context for `rete <command>`: summary above the options, description (examples, exit
 * status) below. */
GOptionContext *rete_cli_context_new (const char *command, const char *parameters,
                                      const char *summary, const char *description);
/* Parses; on a bad option prints "rete <command>: <message>" and the hint to --help on
 * stderr and returns FALSE (the caller returns RETE_EXIT_USAGE). */
gboolean rete_cli_parse (GOptionContext *context, const char *command, int *argc, char ***argv);
/* Prints a usage error for `command` and returns RETE_EXIT_USAGE. */
int rete_cli_usage_error (const char *command, const char *format, ...) G_GNUC_PRINTF (2, 3);

/* Parses --threshold: "otsu", "fixed:0.5" (or a bare number), "fraction:0.12", into the
 * binary-map parameters (method, level, fraction). */
gboolean rete_cli_parse_threshold (const char *text, ReteBinaryParams *binary, GError **error);
/* "1:4:1" (MIN:MAX:STEP) or "1:4" (step 1) or "2" (one scale). */
gboolean rete_cli_parse_range (const char *text, const char *what, double *low, double *high,
                               double *step, GError **error);
/* "999x960" */
gboolean rete_cli_parse_size (const char *text, int *width, int *height, GError **error);

/* The model file for --model NAME|FILE: an existing file path as given; otherwise NAME (or
 * NAME.safetensors) in $RETE_MODEL_DIR, then the installed models folder
 * ($datadir/rete/models), then the source tree's models/ (for running from a build dir).
 * The error lists where it looked and the names found there. */
char *rete_cli_find_model (const char *name_or_file, GError **error);
/* The folders searched, in order (newly allocated, NULL-terminated). */
char **rete_cli_model_dirs (void);

/* ---- inputs and outputs ---- */

typedef struct {
  char *path;  /* as found: the argument, or folder/relative */
  char *stem;  /* relative path without extension, for output names: "Image_01L" or
                  "left/Image_01L" when found in a subfolder */
} ReteCliInput;

void rete_cli_input_free (ReteCliInput *input);

/* Expands arguments (files and folders) into a list of ReteCliInput, in argument order and
 * sorted by name within a folder. Folders give the files named like images
 * (rete_io_is_image_name) whose stem does not end in one of `skip_suffixes` (the names of
 * Rete's own outputs, so a second run does not read the first run's maps); with `recursive`
 * their subfolders too. A file argument is kept whatever its name (reading it reports what is
 * wrong); a missing one too, so that it fails with its reason in the batch. An empty folder
 * is an error (RETE_CLI_ERROR_INPUT). */
GPtrArray *rete_cli_expand_inputs (char **arguments, gboolean recursive,
                                   const char *const *skip_suffixes, GError **error);

/* Stems of Rete's own outputs ("-vessels", "-fov", ...), skipped when folders are read. */
extern const char *const rete_cli_output_suffixes[];

/* The photograph a file belongs to, from its stem: "Image_01L-vessel-probability",
 * "Image_01L-vessels" and "Image_01L-fundus" (synth) all give "Image_01L". */
char *rete_cli_photograph_stem (const char *stem);

/* The file in `folder` (or `folder` itself when it is a file) that belongs to the photograph
 * with `stem`: same stem with any image extension, else stem + one of `extra_suffixes`
 * ("-fov", "_mask"...), else the only file whose stem starts with stem followed by '_' or
 * '-'. NULL with RETE_CLI_ERROR_INPUT naming what was tried. */
char *rete_cli_find_companion (const char *folder, const char *stem,
                               const char *const *extra_suffixes, const char *what,
                               GError **error);

/* TRUE when both paths name the same existing file (links followed). */
gboolean rete_cli_same_file (const char *a, const char *b);

/* output_dir/stem + suffix + "." + extension (folders made as needed at write time). */
char *rete_cli_output_path (const char *output_dir, const char *stem, const char *suffix,
                            const char *extension);

/* Files that must never be written: every input of the run. Thread-safe after filling. */
typedef struct _ReteCliGuard ReteCliGuard;
ReteCliGuard *rete_cli_guard_new (void);
void rete_cli_guard_free (ReteCliGuard *guard);
void rete_cli_guard_add (ReteCliGuard *guard, const char *path);
/* FALSE (RETE_CLI_ERROR_OUTPUT) when `path` is, or is a link to, a protected input. */
gboolean rete_cli_guard_check (ReteCliGuard *guard, const char *path, GError **error);

/* Writes an image (rete_io_save: temporary file, then rename) after checking the guard and
 * making the folder. */
gboolean rete_cli_write_image (ReteCliGuard *guard, const ReteImage *image, const char *path,
                               int bit_depth, GError **error);
/* The same for text (CSV, JSON); path "-" writes to stdout. */
gboolean rete_cli_write_text (ReteCliGuard *guard, const char *path, const char *text,
                              GError **error);

/* Loads a one-channel map or mask: grey files as they are, colour through luma
 * (rete_io_load_grey). `what` names it in messages ("reference", "FOV mask"). */
ReteImage *rete_cli_load_grey (const char *path, const char *what, GError **error);

/* ---- progress and batches ---- */

typedef struct _ReteCliProgress ReteCliProgress;
/* Progress of `n_items` items on stderr: a line per finished item ("[3/20] name: ok, 1.2 s"
 * or "[4/20] FAILED: name: reason"); on a terminal also a live line with the fraction of the
 * items in hand. quiet: only failures and the summary. */
ReteCliProgress *rete_cli_progress_new (const char *verb, int n_items, gboolean quiet);
void rete_cli_progress_free (ReteCliProgress *progress);
/* An item done; message may be NULL (ok) and is printed after the name. */
void rete_cli_progress_done (ReteCliProgress *progress, const char *name, gboolean ok,
                             const char *message, double seconds);
/* Prints "N done, M failed" and the failures again; returns the number of failures. */
int rete_cli_progress_finish (ReteCliProgress *progress);

/* What a batch item knows: its input, its slot for progress. */
typedef struct {
  ReteCliProgress *progress;
  int slot;         /* 0..n_jobs-1: which worker holds the item */
  const char *name; /* the item's name for messages */
  char **message;   /* set through rete_cli_item_set_message */
} ReteCliItem;

/* A short result for the item's "done" line ("threshold 0.21, vessel 9.4 % of the FOV"). */
void rete_cli_item_set_message (const ReteCliItem *item, const char *format, ...)
  G_GNUC_PRINTF (2, 3);

/* A ReteProgressFunc for librete calls inside an item (updates the live line). */
gboolean rete_cli_item_progress (double fraction, const char *message, gpointer item);

/* Runs fn(item_index, item, user_data, &error) for every index in [0, n_items) on n_jobs
 * workers (0 = as many as cores, at most n_items). While it runs, librete's own threads are
 * set so that jobs x threads is about the number of cores. A failing item is reported with
 * its reason and the others still run. `names[i]` names item i. Returns the number of items
 * that failed. */
typedef gboolean (*ReteCliItemFunc) (int index, const ReteCliItem *item, gpointer user_data,
                                     GError **error);
int rete_cli_run_batch (int n_items, const char *const *names, int n_jobs, ReteCliItemFunc fn,
                        gpointer user_data, ReteCliProgress *progress);

/* Number of cores (rete_thread_count at start-up, before any batch changes it). */
int rete_cli_cores (void);

G_END_DECLS

#endif /* RETE_CLI_H */
