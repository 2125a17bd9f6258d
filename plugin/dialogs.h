/* dialogs.h — shared dialog helpers (GTK 2, libgimpui). */
#ifndef RETE_PLUGIN_DIALOGS_H
#define RETE_PLUGIN_DIALOGS_H

#include "rete-plugin.h"

#include <libgimp/gimpui.h>

G_BEGIN_DECLS

/* A dialog with Cancel and OK (labelled `ok_label`), the help text and the caution at the
 * bottom; *content is the box to fill. */
GtkWidget *plugin_dialog_new (const char *title, const char *role, const char *help_id,
                              const char *help_text, const char *ok_label, GtkWidget **content);
GtkWidget *plugin_check_button (const char *label, gint *value);
GtkWidget *plugin_table_new (int rows);
GtkObject *plugin_scale (GtkWidget *table, int row, const char *label, double *value,
                         double lower, double upper, double step, int digits,
                         const char *tooltip);
GtkObject *plugin_int_scale (GtkWidget *table, int row, const char *label, int *value,
                             int lower, int upper, int step, const char *tooltip);

G_END_DECLS

#endif /* RETE_PLUGIN_DIALOGS_H */
