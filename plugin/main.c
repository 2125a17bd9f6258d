/* main.c — the Rete plug-in binary: registers every procedure with GIMP 2.10 and hands each
 * call to the procedure's own run(). The procedures themselves live one per file. */
#include "config.h"

#include <locale.h>
#include <string.h>

#include "rete-plugin.h"

static void query (void);
static void run (const gchar *name, gint nparams, const GimpParam *param,
                 gint *nreturn_vals, GimpParam **return_vals);

const GimpPlugInInfo PLUG_IN_INFO = { NULL, NULL, query, run };

typedef struct {
  const char *procedure;
  void (*query) (void);
  void (*run) (const gchar *, gint, const GimpParam *, gint *, GimpParam **);
} PluginProcedure;

static const PluginProcedure procedures[] = {
  { "plug-in-rete-vessel-map",    vessel_map_query,    vessel_map_run },
  { "plug-in-rete-field-of-view", field_of_view_query, field_of_view_run },
  { "plug-in-rete-agreement",     agreement_query,     agreement_run },
  { "plug-in-rete-models",        models_query,        models_run },
  { "plug-in-rete-train",         train_query,         train_run },
  { "plug-in-rete-measure",       measure_query,       measure_run },
};

static char *locale_dir;
static char *binary_dir;

G_DEFINE_QUARK (rete-plugin-error-quark, plugin_error)

const char *
plugin_binary_dir (void)
{
  return binary_dir ? binary_dir : ".";
}

const char *
plugin_locale_dir (void)
{
  return locale_dir;
}

/* The translations are installed beside the binary (<plug-in folder>/locale), so that a
 * per-user install needs no system folder; fall back to the configured locale dir. */
static void
find_locale_dir (const char *argv0)
{
  g_autofree char *exe = g_file_read_link ("/proc/self/exe", NULL);
  g_autofree char *dir = NULL;

  if (!exe && argv0 && g_path_is_absolute (argv0))
    exe = g_strdup (argv0);
  if (exe)
    {
      dir = g_path_get_dirname (exe);
      binary_dir = g_strdup (dir);
      locale_dir = g_build_filename (dir, "locale", NULL);
      if (g_file_test (locale_dir, G_FILE_TEST_IS_DIR))
        return;
      g_free (locale_dir);
    }
  locale_dir = g_strdup (RETE_PLUGIN_LOCALEDIR);
}

static void
init_i18n (void)
{
  setlocale (LC_ALL, "");
  bindtextdomain (GETTEXT_PACKAGE, plugin_locale_dir ());
  bind_textdomain_codeset (GETTEXT_PACKAGE, "UTF-8");
  textdomain (GETTEXT_PACKAGE);
}

static void
query (void)
{
  gimp_plugin_domain_register (GETTEXT_PACKAGE, plugin_locale_dir ());
  /* Our own submenu of Filters, translated in our text domain. */
  gimp_plugin_menu_branch_register ("<Image>/Filters", N_("_Retina"));
  for (gsize i = 0; i < G_N_ELEMENTS (procedures); i++)
    procedures[i].query ();
}

static void
run (const gchar *name, gint nparams, const GimpParam *param,
     gint *nreturn_vals, GimpParam **return_vals)
{
  static GimpParam values[2];

  init_i18n ();
  gegl_init (NULL, NULL);

  for (gsize i = 0; i < G_N_ELEMENTS (procedures); i++)
    if (strcmp (name, procedures[i].procedure) == 0)
      {
        procedures[i].run (name, nparams, param, nreturn_vals, return_vals);
        return;
      }

  plugin_return_error (values, nreturn_vals, GIMP_PDB_CALLING_ERROR,
                       _("This plug-in does not know the procedure it was called for."));
  *return_vals = values;
}

int
main (int argc, char *argv[])
{
  find_locale_dir (argc > 0 ? argv[0] : NULL);
  return gimp_main (&PLUG_IN_INFO, argc, argv);
}
