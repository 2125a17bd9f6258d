/* rete_io.h — image files in and out, for the `rete` command, the tests and bench/
 * (not part of librete: the library has no codecs). Reading and writing go through GEGL,
 * the imaging library GIMP itself uses: PNG (8/16-bit), JPEG, TIFF, PPM/PGM, GIF (read). */
#ifndef RETE_IO_H
#define RETE_IO_H

#include "rete_image.h"

G_BEGIN_DECLS

#define RETE_IO_ERROR (rete_io_error_quark ())
GQuark rete_io_error_quark (void);

/* Starts GEGL once (safe to call again; thread-safe). */
void rete_io_init (void);

/* Reads an image file. Grey files give 1 channel, colour files 3 (alpha is dropped);
 * values are the file's non-linear values scaled to [0,1]. Fails with RETE_ERROR_IO
 * (missing or unreadable file) or RETE_ERROR_FORMAT (not an image GEGL can read). */
ReteImage *rete_io_load (const char *path, GError **error);
/* Reads and turns into one channel: grey as is, colour through Rec. 709 luma. For maps,
 * masks and references. */
ReteImage *rete_io_load_grey (const char *path, GError **error);

typedef struct {
  int bit_depth;   /* 8 or 16 (PNG, TIFF, PPM/PGM); JPEG is always 8 */
  int jpeg_quality; /* 1..100, default 95 */
} ReteSaveOptions;

/* Writes 1- or 3-channel images (values clamped to [0,1]) by the file name's extension
 * (.png .tif .tiff .jpg .jpeg; .ppm for RGB only — GEGL writes no PGM). The file appears atomically: written to a
 * temporary file in the same folder, then renamed. options may be NULL (8-bit, quality 95). */
gboolean rete_io_save (const ReteImage *image, const char *path, const ReteSaveOptions *options,
                       GError **error);

/* Writes text (CSV, JSON) atomically. */
gboolean rete_io_save_text (const char *path, const char *text, gssize length, GError **error);

/* TRUE for file names Rete reads as photographs or maps (by extension). */
gboolean rete_io_is_image_name (const char *path);

G_END_DECLS

#endif /* RETE_IO_H */
