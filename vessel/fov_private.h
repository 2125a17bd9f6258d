/* fov_private.h — what fov.c and fov_shape.c share. Not installed. */
#ifndef RETE_FOV_PRIVATE_H
#define RETE_FOV_PRIVATE_H

#include "rete_fov.h"

G_BEGIN_DECLS

/* Keeps the largest 4-connected region of mask (width × height bytes, 0/1) in place;
 * returns its size in pixels. */
G_GNUC_INTERNAL gsize rete_fov_keep_largest_region (guint8 *mask, int width, int height);

/* Writes into out (width × height floats) 1 inside the convex hull of the region of mask
 * (pixel centres on the hull count as inside), 0 elsewhere. */
G_GNUC_INTERNAL void rete_fov_fill_convex_hull (const guint8 *mask, int width, int height,
                                                float *out);

G_END_DECLS

#endif /* RETE_FOV_PRIVATE_H */
