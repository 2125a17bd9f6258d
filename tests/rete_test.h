/* rete_test.h — what every Rete test binary shares: where the open data and the sources are,
 * .npy files for handing arrays to the Python reference libraries, and running
 * /usr/bin/python3 on a reference script. */
#ifndef RETE_TEST_H
#define RETE_TEST_H

#include <glib.h>
#include "rete_image.h"

/* ../shared/data (RETE_DATA_DIR), or NULL when absent. Callers skip with a clear message:
 *   if (!dir) { g_test_skip ("../shared/data is absent: CHASE_DB1 checks skipped"); return; } */
const char *rete_test_data_dir (void);
/* A path below the data dir, or NULL (and a g_test_skip with the reason) when missing. */
char *rete_test_data_file (const char *relative);
/* The project's source root (RETE_SOURCE_DIR). */
const char *rete_test_source_dir (void);
/* A new temporary folder for this test binary, removed at exit. */
const char *rete_test_tmp_dir (void);
/* A path inside rete_test_tmp_dir() (newly allocated). */
char *rete_test_tmp_path (const char *name);

/* .npy (NumPy's format, version 1.0, little-endian float32 '<f4' or uint8 '|u1').
 * shape has n_dims entries, C order. */
gboolean rete_test_write_npy_f32 (const char *path, const float *data, const gsize *shape,
                                  int n_dims, GError **error);
gboolean rete_test_write_npy_u8 (const char *path, const guint8 *data, const gsize *shape,
                                 int n_dims, GError **error);
/* Reads a float32 or float64 .npy (converted to float32); returns data, sets shape/n_dims. */
float *rete_test_read_npy_f32 (const char *path, gsize *shape, int *n_dims, GError **error);
/* A one-channel image as a (height, width) float32 .npy and back. */
gboolean rete_test_write_image_npy (const char *path, const ReteImage *image, GError **error);
ReteImage *rete_test_read_image_npy (const char *path, GError **error);

/* Runs /usr/bin/python3 (RETE_PYTHON) with tests/ref/<script> and the given arguments
 * (NULL-terminated). Returns stdout on exit status 0; NULL with the error (holding stderr)
 * otherwise. A script that prints "SKIP: reason" and exits 77 makes *skipped TRUE. */
char *rete_test_python (const char *script, gboolean *skipped, GError **error, ...) G_GNUC_NULL_TERMINATED;

/* Largest absolute difference between two arrays, and its index. */
double rete_test_max_abs_diff (const float *a, const float *b, gsize n, gsize *where);

/* Of the pixels >= 0.5 in a (w × h), the fraction that have a pixel >= 0.5 of b within one
 * pixel (8-neighbourhood or the same place); their number in *count. 1 when there are none.
 * For comparing skeletons, which may sit one pixel apart and still be the same line. */
double rete_test_fraction_near (const float *a, const float *b, int w, int h, gsize *count);

#endif /* RETE_TEST_H */
