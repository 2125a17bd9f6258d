/* rete_image.h — the image type of librete: planar float, width × height × channels.
 *
 * Photographs hold non-linear sRGB values in [0,1] (as stored in the file); vessel maps
 * hold scores in [0,1]; masks (field of view, binary vessel maps, references) hold 0 or 1.
 * Pixels are stored plane after plane, each plane row after row:
 *   data[(c * height + y) * width + x]
 * Regions (ReteRect) select a rectangle for cropping and pasting back, which is how
 * tiled and selection-only processing work.
 */
#ifndef RETE_IMAGE_H
#define RETE_IMAGE_H

#include "rete_base.h"

G_BEGIN_DECLS

#define RETE_VESSEL_ERROR (rete_vessel_error_quark ())
RETE_API GQuark rete_vessel_error_quark (void);

typedef struct {
  int width;    /* pixels */
  int height;   /* pixels */
  int channels; /* 1 (grey, map or mask), 3 (RGB) or 4 (RGBA) */
  float *data;  /* (channels, height, width), planar, row-major; owned */
} ReteImage;

typedef struct {
  int x, y;          /* top-left corner, pixels */
  int width, height; /* pixels */
} ReteRect;

/* A new image filled with zeros; fails on sizes <= 0, above RETE_MAX_SIDE/RETE_MAX_PIXELS,
 * channels outside 1..4, or when memory cannot be had. */
RETE_API ReteImage *rete_image_new (int width, int height, int channels, GError **error);
/* A new zero image of the same width and height as `like`, with `channels` channels. */
RETE_API ReteImage *rete_image_new_like (const ReteImage *like, int channels, GError **error);
RETE_API ReteImage *rete_image_copy (const ReteImage *image, GError **error);
RETE_API void rete_image_free (ReteImage *image);
G_DEFINE_AUTOPTR_CLEANUP_FUNC (ReteImage, rete_image_free)

static inline float *
rete_image_plane (const ReteImage *image, int channel)
{
  return image->data + (gsize) channel * image->width * image->height;
}

static inline float
rete_image_get (const ReteImage *image, int channel, int x, int y)
{
  return image->data[((gsize) channel * image->height + y) * image->width + x];
}

static inline gsize
rete_image_n_pixels (const ReteImage *image)
{
  return (gsize) image->width * image->height;
}

/* From / to interleaved float pixels (as GEGL and GIMP hand them over):
 * pixels[(y * width + x) * channels + c]. */
RETE_API ReteImage *rete_image_from_interleaved (const float *pixels, int width, int height,
                                                 int channels, GError **error);
RETE_API void rete_image_to_interleaved (const ReteImage *image, float *pixels);

/* One channel as a new one-channel image. */
RETE_API ReteImage *rete_image_extract_channel (const ReteImage *image, int channel,
                                                GError **error);

/* The rectangle `rect` (must lie inside the image) as a new image. */
RETE_API ReteImage *rete_image_crop (const ReteImage *image, const ReteRect *rect,
                                     GError **error);
/* Copies `source` into `target` with its top-left corner at (x, y); the part that
 * falls outside `target` is dropped. Channel counts must match. */
RETE_API gboolean rete_image_paste (ReteImage *target, const ReteImage *source, int x, int y,
                                    GError **error);

/* TRUE when a and b have the same width and height; otherwise a RETE_ERROR_SIZE_MISMATCH
 * such as "reference is 999×960 but vessel map is 565×584". */
RETE_API gboolean rete_image_check_same_size (const ReteImage *a, const char *name_a,
                                              const ReteImage *b, const char *name_b,
                                              GError **error);
/* TRUE when the image has exactly `channels` channels; otherwise RETE_ERROR_INVALID_ARGUMENT
 * naming `name`. */
RETE_API gboolean rete_image_check_channels (const ReteImage *image, const char *name,
                                             int channels, GError **error);
/* TRUE when every value is finite; otherwise RETE_ERROR_NOT_FINITE with the first position. */
RETE_API gboolean rete_image_check_finite (const ReteImage *image, const char *name,
                                           GError **error);

/* Binarises a one-channel image in place at `level` (value >= level -> 1, else 0).
 * Returns the number of values that were neither 0 nor 1 before (so callers can say
 * "the reference was not binary; thresholded at half"). */
RETE_API gsize rete_image_binarise (ReteImage *image, float level);

G_END_DECLS

#endif /* RETE_IMAGE_H */
