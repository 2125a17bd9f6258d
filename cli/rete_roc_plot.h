/* rete_roc_plot.h — an ROC curve as a PNG picture (cairo), for `rete agreement --roc`.
 * Part of the `rete` command, not of librete (the library draws nothing). */
#ifndef RETE_ROC_PLOT_H
#define RETE_ROC_PLOT_H

#include "rete_agreement.h"

G_BEGIN_DECLS

/* Width and height of the picture, pixels. */
#define RETE_ROC_PLOT_WIDTH 720
#define RETE_ROC_PLOT_HEIGHT 680

/* Draws the ROC curve of `a` (false-positive rate across, true-positive rate up, both 0..1):
 * axes with ticks every 0.1 (labelled every 0.2), the axis labels, the diagonal of chance,
 * the curve, the operating point at a->threshold, and a legend with the AUC. `title` may be
 * NULL (then "ROC curve"). When AUC is undefined (one class in the reference) the picture
 * says so instead of drawing a curve. Written atomically: to a temporary file in the same
 * folder, then renamed to `path`. Fails (RETE_IO_ERROR) when `a` holds no curve (computed
 * with max_roc_points 0) or the file cannot be written; `path` is then left as it was. */
gboolean rete_roc_plot_png (const ReteAgreement *a, const char *path, const char *title,
                            GError **error);

G_END_DECLS

#endif /* RETE_ROC_PLOT_H */
