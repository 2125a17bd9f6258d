/* agreement_report.c — the outputs of `rete agreement`: a table on stdout (one line per
 * map, and the mean over maps where a figure is defined), CSV (one line per map, failures
 * with their reason) and JSON (every figure, best thresholds and the ROC curve; undefined
 * figures as null). */
#include "agreement_report.h"

#include <json-glib/json-glib.h>
#include <math.h>
#include <stdio.h>
#include <string.h>

static void
format_value (char *buffer, gsize size, double value, const char *format)
{
  if (isfinite (value))
    g_ascii_formatd (buffer, size, format, value);
  else
    g_strlcpy (buffer, "", size);
}

#define N_FIGURES 9
static const char *const figure_names[N_FIGURES] = { "auc", "average_precision", "accuracy",
  "sensitivity", "specificity", "precision", "dice", "jaccard", "mcc" };

static void
figures_of (const ReteAgreement *a, double *v)
{
  v[0] = a->auc;
  v[1] = a->average_precision;
  v[2] = a->rates.accuracy;
  v[3] = a->rates.sensitivity;
  v[4] = a->rates.specificity;
  v[5] = a->rates.precision;
  v[6] = a->rates.dice;
  v[7] = a->rates.jaccard;
  v[8] = a->rates.mcc;
}

/* Means over the maps where a figure is defined; counts[k] maps entered. */
static void
mean_figures (const AgreementRun *run, double *mean, int *counts)
{
  for (int k = 0; k < N_FIGURES; k++)
    mean[k] = 0.0, counts[k] = 0;
  for (guint i = 0; i < run->maps->len; i++)
    {
      if (run->rows[i].agreement == NULL)
        continue;
      double v[N_FIGURES];
      figures_of (run->rows[i].agreement, v);
      for (int k = 0; k < N_FIGURES; k++)
        if (isfinite (v[k]))
          mean[k] += v[k], counts[k]++;
    }
  for (int k = 0; k < N_FIGURES; k++)
    mean[k] = counts[k] ? mean[k] / counts[k] : NAN;
}

void
agreement_print_table (const AgreementRun *run)
{
  static const char *const heads[N_FIGURES] = { "AUC", "AP", "Acc", "Sens", "Spec", "Prec",
                                                "Dice", "Jacc", "MCC" };
  int width = 12;
  for (guint i = 0; i < run->maps->len; i++)
    width = MAX (width, (int) strlen (((ReteCliInput *) run->maps->pdata[i])->stem));
  width = MIN (width, 40);
  printf ("%-*s", width, "vessel map");
  for (int k = 0; k < N_FIGURES; k++)
    printf (" %7s", heads[k]);
  printf ("   (threshold %g)\n", run->threshold);
  for (guint i = 0; i < run->maps->len; i++)
    {
      const ReteCliInput *map = run->maps->pdata[i];
      const AgreementRow *row = &run->rows[i];
      printf ("%-*.*s", width, width, map->stem);
      if (row->agreement == NULL)
        {
          printf (" FAILED (see above)\n");
          continue;
        }
      double v[N_FIGURES];
      figures_of (row->agreement, v);
      for (int k = 0; k < N_FIGURES; k++)
        {
          if (isfinite (v[k]))
            printf (" %7.4f", v[k]);
          else
            printf (" %7s", "undef.");
        }
      printf ("\n");
    }
  double mean[N_FIGURES];
  int counts[N_FIGURES];
  mean_figures (run, mean, counts);
  if (run->maps->len > 1 && counts[2] > 0)
    {
      g_autofree char *label = g_strdup_printf ("mean of %d", counts[2]);
      printf ("%-*s", width, label);
      for (int k = 0; k < N_FIGURES; k++)
        {
          if (isfinite (mean[k]))
            printf (" %7.4f", mean[k]);
          else
            printf (" %7s", "undef.");
        }
      printf ("\n");
    }
  if (run->maps->len == 1 && run->rows[0].agreement)
    {
      const ReteAgreement *a = run->rows[0].agreement;
      printf ("reference vessel pixels %" G_GSIZE_FORMAT ", background %" G_GSIZE_FORMAT
              "; TP %" G_GUINT64_FORMAT " FP %" G_GUINT64_FORMAT " TN %" G_GUINT64_FORMAT
              " FN %" G_GUINT64_FORMAT "\n", a->n_positive, a->n_negative,
              a->confusion.true_positive, a->confusion.false_positive,
              a->confusion.true_negative, a->confusion.false_negative);
      if (isfinite (a->best_dice_threshold))
        printf ("best Dice %.4f at threshold %.4g; best Youden J %.4f at threshold %.4g\n",
                a->best_dice_rates.dice, a->best_dice_threshold,
                a->best_youden_rates.sensitivity + a->best_youden_rates.specificity - 1.0,
                a->best_youden_threshold);
    }
  fflush (stdout);
}

char *
agreement_csv (const AgreementRun *run)
{
  GString *csv = g_string_new ("map,reference,mask,reference_vessel_pixels,"
                               "reference_background_pixels,threshold,true_positive,"
                               "false_positive,true_negative,false_negative");
  for (int k = 0; k < N_FIGURES; k++)
    g_string_append_printf (csv, ",%s", figure_names[k]);
  g_string_append (csv, ",best_dice_threshold,best_dice,best_youden_threshold,status\n");
  for (guint i = 0; i < run->maps->len; i++)
    {
      const ReteCliInput *map = run->maps->pdata[i];
      const AgreementRow *row = &run->rows[i];
      const ReteAgreement *a = row->agreement;
      g_string_append_printf (csv, "\"%s\",\"%s\",\"%s\"", map->path,
                              row->reference ? row->reference : "", row->mask ? row->mask : "");
      if (a == NULL)
        {
          g_autofree char *reason = g_strdup (row->error ? row->error : "failed");
          g_strdelimit (reason, "\"", '\'');
          /* 19 empty figures, then the status. */
          g_string_append_printf (csv, "%s,\"FAILED: %s\"\n", ",,,,,,,,,,,,,,,,,,,", reason);
          continue;
        }
      char b[G_ASCII_DTOSTR_BUF_SIZE];
      format_value (b, sizeof b, a->threshold, "%.6g");
      g_string_append_printf (csv, ",%" G_GSIZE_FORMAT ",%" G_GSIZE_FORMAT ",%s,%" G_GUINT64_FORMAT
                              ",%" G_GUINT64_FORMAT ",%" G_GUINT64_FORMAT ",%" G_GUINT64_FORMAT,
                              a->n_positive, a->n_negative, b, a->confusion.true_positive,
                              a->confusion.false_positive, a->confusion.true_negative,
                              a->confusion.false_negative);
      double v[N_FIGURES];
      figures_of (a, v);
      for (int k = 0; k < N_FIGURES; k++)
        {
          format_value (b, sizeof b, v[k], "%.6f");
          g_string_append_printf (csv, ",%s", b);
        }
      format_value (b, sizeof b, a->best_dice_threshold, "%.6g");
      g_string_append_printf (csv, ",%s", b);
      format_value (b, sizeof b, a->best_dice_rates.dice, "%.6f");
      g_string_append_printf (csv, ",%s", b);
      format_value (b, sizeof b, a->best_youden_threshold, "%.6g");
      g_autofree char *status = a->auc_undefined_reason
                                  ? g_strdup_printf ("AUC undefined: %s", a->auc_undefined_reason)
                                  : g_strdup ("ok");
      g_strdelimit (status, "\"", '\'');
      g_string_append_printf (csv, ",%s,\"%s\"\n", b, status);
    }
  return g_string_free (csv, FALSE);
}

static void
add_number (JsonBuilder *b, const char *name, double value)
{
  json_builder_set_member_name (b, name);
  if (isfinite (value))
    json_builder_add_double_value (b, value);
  else
    json_builder_add_null_value (b);
}

static void
add_rates (JsonBuilder *b, const char *name, const ReteRates *r)
{
  json_builder_set_member_name (b, name);
  json_builder_begin_object (b);
  add_number (b, "accuracy", r->accuracy);
  add_number (b, "sensitivity", r->sensitivity);
  add_number (b, "specificity", r->specificity);
  add_number (b, "precision", r->precision);
  add_number (b, "dice", r->dice);
  add_number (b, "jaccard", r->jaccard);
  add_number (b, "mcc", r->mcc);
  json_builder_end_object (b);
}

static void
add_curve (JsonBuilder *b, const char *name, const double *values, int n)
{
  json_builder_set_member_name (b, name);
  json_builder_begin_array (b);
  for (int i = 0; i < n; i++)
    {
      if (isfinite (values[i]))
        json_builder_add_double_value (b, values[i]);
      else
        json_builder_add_null_value (b);
    }
  json_builder_end_array (b);
}

char *
agreement_json (const AgreementRun *run)
{
  JsonBuilder *b = json_builder_new ();
  json_builder_begin_object (b);
  add_number (b, "threshold", run->threshold);
  json_builder_set_member_name (b, "results");
  json_builder_begin_array (b);
  for (guint i = 0; i < run->maps->len; i++)
    {
      const ReteCliInput *map = run->maps->pdata[i];
      const AgreementRow *row = &run->rows[i];
      const ReteAgreement *a = row->agreement;
      json_builder_begin_object (b);
      json_builder_set_member_name (b, "map");
      json_builder_add_string_value (b, map->path);
      json_builder_set_member_name (b, "reference");
      json_builder_add_string_value (b, row->reference);
      json_builder_set_member_name (b, "mask");
      json_builder_add_string_value (b, row->mask);
      if (a == NULL)
        {
          json_builder_set_member_name (b, "error");
          json_builder_add_string_value (b, row->error);
          json_builder_end_object (b);
          continue;
        }
      json_builder_set_member_name (b, "reference_vessel_pixels");
      json_builder_add_int_value (b, (gint64) a->n_positive);
      json_builder_set_member_name (b, "reference_background_pixels");
      json_builder_add_int_value (b, (gint64) a->n_negative);
      add_number (b, "auc", a->auc);
      json_builder_set_member_name (b, "auc_undefined_reason");
      json_builder_add_string_value (b, a->auc_undefined_reason);
      add_number (b, "average_precision", a->average_precision);
      json_builder_set_member_name (b, "confusion");
      json_builder_begin_object (b);
      json_builder_set_member_name (b, "true_positive");
      json_builder_add_int_value (b, (gint64) a->confusion.true_positive);
      json_builder_set_member_name (b, "false_positive");
      json_builder_add_int_value (b, (gint64) a->confusion.false_positive);
      json_builder_set_member_name (b, "true_negative");
      json_builder_add_int_value (b, (gint64) a->confusion.true_negative);
      json_builder_set_member_name (b, "false_negative");
      json_builder_add_int_value (b, (gint64) a->confusion.false_negative);
      json_builder_end_object (b);
      add_rates (b, "rates", &a->rates);
      add_number (b, "best_dice_threshold", a->best_dice_threshold);
      add_rates (b, "best_dice_rates", &a->best_dice_rates);
      add_number (b, "best_youden_threshold", a->best_youden_threshold);
      add_rates (b, "best_youden_rates", &a->best_youden_rates);
      if (a->n_roc_points > 0)
        {
          json_builder_set_member_name (b, "roc");
          json_builder_begin_object (b);
          add_curve (b, "false_positive_rate", a->roc_false_positive_rate, a->n_roc_points);
          add_curve (b, "true_positive_rate", a->roc_true_positive_rate, a->n_roc_points);
          add_curve (b, "threshold", a->roc_threshold, a->n_roc_points);
          json_builder_end_object (b);
        }
      json_builder_end_object (b);
    }
  json_builder_end_array (b);
  double mean[N_FIGURES];
  int counts[N_FIGURES];
  mean_figures (run, mean, counts);
  json_builder_set_member_name (b, "mean");
  json_builder_begin_object (b);
  for (int k = 0; k < N_FIGURES; k++)
    add_number (b, figure_names[k], mean[k]);
  json_builder_set_member_name (b, "maps");
  json_builder_add_int_value (b, counts[2]);
  json_builder_end_object (b);
  json_builder_end_object (b);
  JsonGenerator *generator = json_generator_new ();
  JsonNode *root = json_builder_get_root (b);
  json_generator_set_root (generator, root);
  json_generator_set_pretty (generator, TRUE);
  char *text = json_generator_to_data (generator, NULL);
  json_node_unref (root);
  g_object_unref (generator);
  g_object_unref (b);
  char *with_newline = g_strconcat (text, "\n", NULL);
  g_free (text);
  return with_newline;
}

