/* models.c — the models the learned method can use: those shipped with Rete and the user's own
 * (trained in GIMP, kept in the GIMP profile folder, <profile>/rete/models/<name>.safetensors).
 * Shipped ones are looked for in $RETE_MODEL_DIR (tests, uninstalled runs), beside the plug-in
 * (<plug-in folder>/rete-gimp/models, where meson install puts them) and in librete's data
 * folder (<prefix>/share/rete/models). Loading and checking the file is librete's (rete_model_load). */
#include "config.h"

#include <string.h>

#include "rete-plugin.h"
#include "rete_nn.h"

#define MODEL_SUFFIX ".safetensors"

char *
plugin_models_user_dir (void)
{
  return g_build_filename (gimp_directory (), "rete", "models", NULL);
}

static void
model_info_free (gpointer data)
{
  PluginModelInfo *info = data;

  g_free (info->name);
  g_free (info->path);
  g_free (info);
}

void
plugin_models_free (GPtrArray *models)
{
  if (models)
    g_ptr_array_unref (models);
}

static gint
compare_names (gconstpointer a, gconstpointer b)
{
  const PluginModelInfo *x = *(PluginModelInfo *const *) a, *y = *(PluginModelInfo *const *) b;

  return g_utf8_collate (x->name, y->name);
}

static gboolean
has_name (GPtrArray *models, const char *name)
{
  for (guint i = 0; i < models->len; i++)
    if (strcmp (((PluginModelInfo *) models->pdata[i])->name, name) == 0)
      return TRUE;
  return FALSE;
}

/* Adds the *.safetensors files of `folder` (absent folders are fine). */
static void
scan_folder (GPtrArray *models, const char *folder, gboolean own)
{
  GDir *dir = folder ? g_dir_open (folder, 0, NULL) : NULL;
  const char *entry;
  guint first = models->len;

  if (!dir)
    return;
  while ((entry = g_dir_read_name (dir)))
    {
      PluginModelInfo *info;

      if (!g_str_has_suffix (entry, MODEL_SUFFIX) || g_str_has_prefix (entry, "."))
        continue;
      info = g_new0 (PluginModelInfo, 1);
      info->name = g_strndup (entry, strlen (entry) - strlen (MODEL_SUFFIX));
      info->path = g_build_filename (folder, entry, NULL);
      info->own = own;
      /* A name seen in an earlier folder wins (the user's cannot hide a shipped one). */
      if (has_name (models, info->name))
        model_info_free (info);
      else
        g_ptr_array_add (models, info);
    }
  g_dir_close (dir);
  /* Sort this folder's part only: shipped models stay before the user's own. */
  if (models->len > first + 1)
    {
      g_autoptr (GPtrArray) part = g_ptr_array_new ();

      for (guint i = first; i < models->len; i++)
        g_ptr_array_add (part, models->pdata[i]);
      g_ptr_array_sort (part, compare_names);
      for (guint i = 0; i < part->len; i++)
        models->pdata[first + i] = part->pdata[i];
    }
}

GPtrArray *
plugin_models_list (void)
{
  GPtrArray *models = g_ptr_array_new_with_free_func (model_info_free);
  g_autofree char *user = plugin_models_user_dir ();

  g_autofree char *beside = g_build_filename (plugin_binary_dir (), "models", NULL);

  scan_folder (models, g_getenv ("RETE_MODEL_DIR"), FALSE);
  scan_folder (models, beside, FALSE);
  scan_folder (models, RETE_PLUGIN_MODELDIR, FALSE);
  scan_folder (models, RETE_DATA_MODELDIR, FALSE);
  scan_folder (models, user, TRUE);
  return models;
}

char *
plugin_model_resolve (const char *name_or_path, GError **error)
{
  g_autoptr (GPtrArray) models = NULL;
  g_autoptr (GString) names = NULL;

  if (!name_or_path || !*name_or_path)
    {
      g_set_error (error, PLUGIN_ERROR, 0,
                   _("No model given: the learned method needs a model name or a model file."));
      return NULL;
    }
  if (strchr (name_or_path, G_DIR_SEPARATOR))
    {
      if (g_file_test (name_or_path, G_FILE_TEST_IS_REGULAR))
        return g_strdup (name_or_path);
      g_set_error (error, PLUGIN_ERROR, 0, _("The model file “%s” does not exist."),
                   name_or_path);
      return NULL;
    }

  models = plugin_models_list ();
  for (guint i = 0; i < models->len; i++)
    {
      PluginModelInfo *info = models->pdata[i];

      if (strcmp (info->name, name_or_path) == 0)
        return g_strdup (info->path);
    }
  names = g_string_new (NULL);
  for (guint i = 0; i < models->len; i++)
    g_string_append_printf (names, "%s%s", i ? ", " : "",
                            ((PluginModelInfo *) models->pdata[i])->name);
  g_set_error (error, PLUGIN_ERROR, 0,
               _("There is no model called “%s”. Available models: %s."), name_or_path,
               models->len ? names->str : _("none (train one, or reinstall Rete)"));
  return NULL;
}

ReteModel *
plugin_model_load (const char *name_or_path, GError **error)
{
  g_autofree char *path = plugin_model_resolve (name_or_path, error);

  return path ? rete_model_load (path, error) : NULL;
}

void
plugin_model_free (ReteModel *model)
{
  if (model)
    rete_model_free (model);
}
