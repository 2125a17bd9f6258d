/* image_private.h — image helpers shared inside librete. Not installed. */
#ifndef RETE_IMAGE_PRIVATE_H
#define RETE_IMAGE_PRIVATE_H

#include "rete_image.h"

G_BEGIN_DECLS

/* As rete_image_new, but the pixels are not zeroed: for a caller that writes every one. */
G_GNUC_INTERNAL ReteImage *rete_image_new_unset (int width, int height, int channels,
                                                 GError **error);

G_END_DECLS

#endif /* RETE_IMAGE_PRIVATE_H */
