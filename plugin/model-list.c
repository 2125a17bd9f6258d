/* model-list.c — "plug-in-rete-models": the models the learned method can use, for scripts
 * (the dialog's chooser lists the same). No image is needed, so only run-mode is taken. */
#include "config.h"

#include "rete-plugin.h"

#define PLUG_IN_PROC "plug-in-rete-models"

void
models_query (void)
{
  static const GimpParamDef args[] = {
    { GIMP_PDB_INT32, "run-mode", "The run mode { RUN-INTERACTIVE (0), RUN-NONINTERACTIVE (1) }" },
  };
  static const GimpParamDef return_vals[] = {
    { GIMP_PDB_INT32,       "num-models", "Number of models" },
    { GIMP_PDB_STRINGARRAY, "names",      "Model names, for the vessel map's model argument (shipped first, then the user's own)" },
    { GIMP_PDB_INT32,       "num-paths",  "Number of paths (= num-models)" },
    { GIMP_PDB_STRINGARRAY, "paths",      "The model files" },
  };

  gimp_install_procedure (PLUG_IN_PROC,
                          N_("List the vessel models the learned method can use"),
                          "Lists the vessel models shipped with Rete and the user's own, trained "
                          "in GIMP and kept in the GIMP profile folder (rete/models).",
                          PLUG_IN_AUTHOR, PLUG_IN_AUTHOR, PLUG_IN_YEAR,
                          NULL, NULL, GIMP_PLUGIN,
                          G_N_ELEMENTS (args), G_N_ELEMENTS (return_vals),
                          args, return_vals);
}

void
models_run (const gchar *name, gint nparams, const GimpParam *param,
            gint *nreturn_vals, GimpParam **return_vals)
{
  static GimpParam values[5];
  GPtrArray *models = plugin_models_list ();
  gchar **names = g_new0 (gchar *, models->len + 1);
  gchar **paths = g_new0 (gchar *, models->len + 1);

  /* Kept until the process ends: GIMP reads the values after run() returns. */
  for (guint i = 0; i < models->len; i++)
    {
      PluginModelInfo *info = models->pdata[i];

      names[i] = g_strdup (info->name);
      paths[i] = g_strdup (info->path);
    }
  values[0].type = GIMP_PDB_STATUS;
  values[0].data.d_status = GIMP_PDB_SUCCESS;
  values[1].type = GIMP_PDB_INT32;
  values[1].data.d_int32 = models->len;
  values[2].type = GIMP_PDB_STRINGARRAY;
  values[2].data.d_stringarray = names;
  values[3].type = GIMP_PDB_INT32;
  values[3].data.d_int32 = models->len;
  values[4].type = GIMP_PDB_STRINGARRAY;
  values[4].data.d_stringarray = paths;
  *nreturn_vals = 5;
  *return_vals = values;
  plugin_models_free (models);
}
