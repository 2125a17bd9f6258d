/* main.c — the `rete` command: vessel maps, fields of view, agreement figures, measurements,
 * training and synthetic photographs for whole folders of fundus photographs. One entry per
 * subcommand in the table below; each lives in its own cmd_*.c file. */
#include "rete_cli.h"

#include <locale.h>
#include <stdio.h>
#include <string.h>


typedef struct {
  const char *name;
  int (*run) (int argc, char **argv);
  const char *summary;
} ReteCommand;

static const ReteCommand commands[] = {
  { "vessels", rete_cmd_vessels,
    "vessel maps (probability and binary) of photographs: files and folders" },
  { "fov", rete_cmd_fov, "field-of-view masks of photographs" },
  { "agreement", rete_cmd_agreement,
    "agreement of vessel maps with references: AUC, sensitivity, specificity, Dice, ROC plot" },
  { "measure", rete_cmd_measure,
    "measurements of binary vessel maps: density, length, branching, calibre, tortuosity,\n"
    "             fractal dimension" },
  { "train", rete_cmd_train, "train a U-Net model on photographs and their vessel maps" },
  { "sweep", rete_cmd_sweep, "train a grid of U-Net sizes on your photographs and compare them" },
  { "synth", rete_cmd_synth,
    "synthetic fundus photographs with exact vessel and FOV truth (invented data)" },
};

static void
print_help (FILE *out)
{
  fprintf (out,
           "Usage: rete COMMAND [OPTION…] [FILE|FOLDER…]\n\n"
           "Finds the blood vessels in colour photographs of the retina, on the CPU.\n\n"
           "Commands:\n");
  for (gsize i = 0; i < G_N_ELEMENTS (commands); i++)
    fprintf (out, "  %-10s %s\n", commands[i].name, commands[i].summary);
  fprintf (out,
           "\nOptions:\n"
           "  -h, --help     this help; 'rete COMMAND --help' for a command's options and examples\n"
           "  --version      the version of rete and of librete\n"
           "\nExamples:\n"
           "  rete vessels --method frangi --output-dir maps photos/\n"
           "  rete vessels --model standard --threshold fraction:0.12 Image_01L.jpg\n"
           "  rete agreement --reference manual1/ --mask mask/ --csv figures.csv maps/\n"
           "  rete synth --seed 7 --size 999x960 --output-dir synthetic\n"
           "\nMany photographs use every core (--jobs N); across several machines see\n"
           "docs/PARALLEL.md (GNU parallel). Outputs are written atomically and inputs are\n"
           "never overwritten.\n\n"
           RETE_CLI_EXIT_HELP);
}

static const ReteCommand *
find_command (const char *name)
{
  for (gsize i = 0; i < G_N_ELEMENTS (commands); i++)
    if (strcmp (commands[i].name, name) == 0)
      return &commands[i];
  return NULL;
}

int
main (int argc, char **argv)
{
  setlocale (LC_ALL, "");
  /* Numbers in files and on the command line are read and written the C way (0.5, not 0,5). */
  setlocale (LC_NUMERIC, "C");
  rete_cli_cores ();

  if (argc < 2)
    {
      print_help (stderr);
      return RETE_EXIT_USAGE;
    }
  const char *name = argv[1];
  if (strcmp (name, "--help") == 0 || strcmp (name, "-h") == 0 || strcmp (name, "help") == 0)
    {
      if (strcmp (name, "help") == 0 && argc > 2)
        {
          const ReteCommand *c = find_command (argv[2]);
          if (c == NULL)
            return rete_cli_usage_error ("rete", "no command named '%s'", argv[2]);
          char *help_argv[] = { g_strdup_printf ("rete %s", c->name), (char *) "--help", NULL };
          g_set_prgname (help_argv[0]);
          return c->run (2, help_argv);
        }
      print_help (stdout);
      return RETE_EXIT_OK;
    }
  if (strcmp (name, "--version") == 0 || strcmp (name, "-V") == 0)
    {
      printf ("rete %s (librete %s)\n", RETE_VERSION_STRING, rete_version ());
      return RETE_EXIT_OK;
    }
  const ReteCommand *command = find_command (name);
  if (command == NULL)
    {
      if (name[0] == '-')
        return rete_cli_usage_error ("rete", "unknown option %s; a command comes first "
                                     "(rete COMMAND [OPTION…])", name);
    {
      GString *names = g_string_new (NULL);
      for (gsize i = 0; i < G_N_ELEMENTS (commands); i++)
        g_string_append_printf (names, "%s%s", i ? ", " : "", commands[i].name);
      rete_cli_usage_error ("rete", "no command named '%s' (commands: %s)", name, names->str);
      g_string_free (names, TRUE);
      return RETE_EXIT_USAGE;
    }
    }
  /* The command sees argv[0] = "rete <name>", so that its --help and errors say so. */
  char **sub_argv = g_new0 (char *, argc);
  sub_argv[0] = g_strdup_printf ("rete %s", command->name);
  g_set_prgname (sub_argv[0]);
  for (int i = 2; i < argc; i++)
    sub_argv[i - 1] = argv[i];
  int status = command->run (argc - 1, sub_argv);
  g_free (sub_argv[0]);
  g_free (sub_argv);
  return status;
}
