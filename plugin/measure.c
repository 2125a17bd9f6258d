/* measure.c — placeholder until the procedure lands. */
#include "config.h"

#include "rete-plugin.h"

void
measure_query (void)
{
}

void
measure_run (const gchar *name, gint nparams, const GimpParam *param,
          gint *nreturn_vals, GimpParam **return_vals)
{
  static GimpParam values[2];

  plugin_return_error (values, nreturn_vals, GIMP_PDB_CALLING_ERROR, "not yet");
  *return_vals = values;
}
