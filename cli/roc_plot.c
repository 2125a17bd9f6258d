/* roc_plot.c — an ROC curve as a PNG picture with cairo (rete_roc_plot.h).
 *
 * The plot is the usual one of ROC analysis (Fawcett, Pattern Recognition Letters 27, 2006,
 * fig. 2): false-positive rate (1 − specificity) across, true-positive rate (sensitivity)
 * up, the diagonal of a guessing classifier (AUC 0.5), the curve from (0, 0) to (1, 1).
 */
#include "rete_roc_plot.h"

#include <cairo.h>
#include <errno.h>
#include <math.h>
#include <string.h>
#include <unistd.h>
#include <glib/gstdio.h>

#include "rete_io.h"

/* The plotting square, in pixels from the picture's top-left corner. */
#define PLOT_LEFT 96.0
#define PLOT_TOP 64.0
#define PLOT_SIZE 560.0

static double
to_x (double false_positive_rate)
{
  return PLOT_LEFT + false_positive_rate * PLOT_SIZE;
}

static double
to_y (double true_positive_rate)
{
  return PLOT_TOP + (1.0 - true_positive_rate) * PLOT_SIZE;
}

/* Text with its anchor: ax, ay in 0..1 say which point of the text's box lands on (x, y). */
static void
draw_text (cairo_t *cr, const char *text, double x, double y, double ax, double ay)
{
  cairo_text_extents_t e;
  cairo_text_extents (cr, text, &e);
  cairo_move_to (cr, x - e.x_bearing - ax * e.width, y - e.y_bearing - ay * e.height);
  cairo_show_text (cr, text);
}

static void
draw_axes (cairo_t *cr)
{
  /* grid every 0.1, ticks and labels every 0.2 */
  cairo_set_line_width (cr, 1.0);
  for (int k = 0; k <= 10; k++)
    {
      double v = k / 10.0;
      cairo_set_source_rgb (cr, 0.90, 0.90, 0.90);
      cairo_move_to (cr, to_x (v), to_y (0.0));
      cairo_line_to (cr, to_x (v), to_y (1.0));
      cairo_move_to (cr, to_x (0.0), to_y (v));
      cairo_line_to (cr, to_x (1.0), to_y (v));
      cairo_stroke (cr);
      cairo_set_source_rgb (cr, 0.0, 0.0, 0.0);
      double tick = k % 2 == 0 ? 8.0 : 4.0;
      cairo_move_to (cr, to_x (v), to_y (0.0));
      cairo_line_to (cr, to_x (v), to_y (0.0) + tick);
      cairo_move_to (cr, to_x (0.0), to_y (v));
      cairo_line_to (cr, to_x (0.0) - tick, to_y (v));
      cairo_stroke (cr);
      if (k % 2 == 0)
        {
          char label[8];
          g_snprintf (label, sizeof label, "%.1f", v);
          cairo_set_font_size (cr, 14.0);
          draw_text (cr, label, to_x (v), to_y (0.0) + 12.0, 0.5, 0.0);
          draw_text (cr, label, to_x (0.0) - 12.0, to_y (v), 1.0, 0.5);
        }
    }
  cairo_set_source_rgb (cr, 0.0, 0.0, 0.0);
  cairo_set_line_width (cr, 1.5);
  cairo_rectangle (cr, PLOT_LEFT, PLOT_TOP, PLOT_SIZE, PLOT_SIZE);
  cairo_stroke (cr);

  cairo_set_font_size (cr, 16.0);
  draw_text (cr, "False-positive rate (1 − specificity)", to_x (0.5), to_y (0.0) + 40.0, 0.5, 0.0);
  cairo_save (cr);
  cairo_translate (cr, PLOT_LEFT - 58.0, to_y (0.5));
  cairo_rotate (cr, -G_PI / 2.0);
  draw_text (cr, "True-positive rate (sensitivity)", 0.0, 0.0, 0.5, 1.0);
  cairo_restore (cr);
}

static void
draw_curve (cairo_t *cr, const ReteAgreement *a)
{
  /* chance: the diagonal */
  double dash[] = { 6.0, 4.0 };
  cairo_set_source_rgb (cr, 0.45, 0.45, 0.45);
  cairo_set_line_width (cr, 1.5);
  cairo_set_dash (cr, dash, 2, 0.0);
  cairo_move_to (cr, to_x (0.0), to_y (0.0));
  cairo_line_to (cr, to_x (1.0), to_y (1.0));
  cairo_stroke (cr);
  cairo_set_dash (cr, NULL, 0, 0.0);
  if (isnan (a->auc))
    return;

  cairo_save (cr);
  cairo_rectangle (cr, PLOT_LEFT - 2.0, PLOT_TOP - 2.0, PLOT_SIZE + 4.0, PLOT_SIZE + 4.0);
  cairo_clip (cr);
  cairo_set_source_rgb (cr, 0.05, 0.25, 0.65);
  cairo_set_line_width (cr, 2.5);
  cairo_set_line_join (cr, CAIRO_LINE_JOIN_ROUND);
  for (int k = 0; k < a->n_roc_points; k++)
    {
      double x = to_x (a->roc_false_positive_rate[k]), y = to_y (a->roc_true_positive_rate[k]);
      if (k == 0)
        cairo_move_to (cr, x, y);
      else
        cairo_line_to (cr, x, y);
    }
  cairo_stroke (cr);
  /* the operating point at the threshold of the figures */
  double fpr = 1.0 - a->rates.specificity, tpr = a->rates.sensitivity;
  if (isfinite (fpr) && isfinite (tpr))
    {
      cairo_set_source_rgb (cr, 0.80, 0.20, 0.10);
      cairo_arc (cr, to_x (fpr), to_y (tpr), 5.5, 0.0, 2.0 * G_PI);
      cairo_fill (cr);
    }
  cairo_restore (cr);
}

/* A message in lines no wider than max_width, centred on x, from y down, on white. */
static void
draw_wrapped (cairo_t *cr, const char *text, double x, double y, double max_width)
{
  cairo_set_font_size (cr, 15.0);
  g_auto (GStrv) words = g_strsplit (text, " ", -1);
  GString *line = g_string_new (NULL);
  GPtrArray *lines = g_ptr_array_new_with_free_func (g_free);
  for (int k = 0; words[k] != NULL; k++)
    {
      g_autofree char *longer = line->len > 0 ? g_strconcat (line->str, " ", words[k], NULL)
                                              : g_strdup (words[k]);
      cairo_text_extents_t e;
      cairo_text_extents (cr, longer, &e);
      if (e.x_advance > max_width && line->len > 0)
        {
          g_ptr_array_add (lines, g_strdup (line->str));
          g_string_assign (line, words[k]);
        }
      else
        g_string_assign (line, longer);
    }
  if (line->len > 0)
    g_ptr_array_add (lines, g_strdup (line->str));
  g_string_free (line, TRUE);
  double height = 22.0 * lines->len + 12.0;
  cairo_set_source_rgb (cr, 1.0, 1.0, 1.0);
  cairo_rectangle (cr, x - max_width / 2.0 - 8.0, y - 6.0, max_width + 16.0, height);
  cairo_fill (cr);
  cairo_set_source_rgb (cr, 0.55, 0.10, 0.05);
  for (guint k = 0; k < lines->len; k++)
    draw_text (cr, g_ptr_array_index (lines, k), x, y + 6.0 + 22.0 * k, 0.5, 0.0);
  g_ptr_array_free (lines, TRUE);
}

static const char *
rate_text (char *buffer, gsize size, double rate)
{
  if (isnan (rate))
    return "undefined";
  g_snprintf (buffer, size, "%.3f", rate);
  return buffer;
}

static void
draw_legend (cairo_t *cr, const ReteAgreement *a)
{
  char curve[96], point[128], sensitivity[16], specificity[16];
  if (isnan (a->auc))
    g_snprintf (curve, sizeof curve, "no ROC curve: AUC undefined");
  else
    g_snprintf (curve, sizeof curve, "ROC curve (AUC = %.4f)", a->auc);
  g_snprintf (point, sizeof point, "threshold %.3g: sensitivity %s, specificity %s",
              a->threshold, rate_text (sensitivity, sizeof sensitivity, a->rates.sensitivity),
              rate_text (specificity, sizeof specificity, a->rates.specificity));
  const char *lines[] = { curve, "chance (AUC = 0.5)", point };
  cairo_set_font_size (cr, 14.0);
  double width = 0.0;
  for (int k = 0; k < 3; k++)
    {
      cairo_text_extents_t e;
      cairo_text_extents (cr, lines[k], &e);
      width = MAX (width, e.x_advance);
    }
  double box_w = width + 56.0, box_h = 3 * 22.0 + 12.0;
  double x0 = to_x (1.0) - box_w - 12.0, y0 = to_y (0.0) - box_h - 12.0;
  cairo_set_source_rgba (cr, 1.0, 1.0, 1.0, 0.92);
  cairo_rectangle (cr, x0, y0, box_w, box_h);
  cairo_fill_preserve (cr);
  cairo_set_source_rgb (cr, 0.6, 0.6, 0.6);
  cairo_set_line_width (cr, 1.0);
  cairo_stroke (cr);
  for (int k = 0; k < 3; k++)
    {
      double y = y0 + 17.0 + 22.0 * k;
      double dash[] = { 6.0, 4.0 };
      if (k == 0)
        {
          cairo_set_source_rgb (cr, 0.05, 0.25, 0.65);
          cairo_set_line_width (cr, 2.5);
        }
      else if (k == 1)
        {
          cairo_set_source_rgb (cr, 0.45, 0.45, 0.45);
          cairo_set_line_width (cr, 1.5);
          cairo_set_dash (cr, dash, 2, 0.0);
        }
      if (k < 2)
        {
          cairo_move_to (cr, x0 + 10.0, y);
          cairo_line_to (cr, x0 + 40.0, y);
          cairo_stroke (cr);
          cairo_set_dash (cr, NULL, 0, 0.0);
        }
      else
        {
          cairo_set_source_rgb (cr, 0.80, 0.20, 0.10);
          cairo_arc (cr, x0 + 25.0, y, 5.5, 0.0, 2.0 * G_PI);
          cairo_fill (cr);
        }
      cairo_set_source_rgb (cr, 0.0, 0.0, 0.0);
      draw_text (cr, lines[k], x0 + 48.0, y, 0.0, 0.5);
    }
  if (isnan (a->auc) && a->auc_undefined_reason != NULL)
    draw_wrapped (cr, a->auc_undefined_reason, to_x (0.5), to_y (0.62), PLOT_SIZE - 80.0);
}

gboolean
rete_roc_plot_png (const ReteAgreement *a, const char *path, const char *title, GError **error)
{
  if (a == NULL || path == NULL)
    {
      g_set_error (error, RETE_IO_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "an ROC plot needs agreement figures and a file name");
      return FALSE;
    }
  if (a->n_roc_points < 2 || a->roc_false_positive_rate == NULL || a->roc_true_positive_rate == NULL)
    {
      g_set_error (error, RETE_IO_ERROR, RETE_ERROR_INVALID_ARGUMENT,
                   "these agreement figures hold no ROC curve (they were computed without "
                   "ROC points); compute them with max_roc_points of 2 or more");
      return FALSE;
    }
  cairo_surface_t *surface = cairo_image_surface_create (CAIRO_FORMAT_RGB24, RETE_ROC_PLOT_WIDTH,
                                                         RETE_ROC_PLOT_HEIGHT);
  cairo_t *cr = cairo_create (surface);
  cairo_set_source_rgb (cr, 1.0, 1.0, 1.0);
  cairo_paint (cr);
  cairo_select_font_face (cr, "sans-serif", CAIRO_FONT_SLANT_NORMAL, CAIRO_FONT_WEIGHT_NORMAL);
  draw_axes (cr);
  draw_curve (cr, a);
  draw_legend (cr, a);
  cairo_set_source_rgb (cr, 0.0, 0.0, 0.0);
  cairo_select_font_face (cr, "sans-serif", CAIRO_FONT_SLANT_NORMAL, CAIRO_FONT_WEIGHT_BOLD);
  cairo_set_font_size (cr, 18.0);
  draw_text (cr, title != NULL ? title : "ROC curve", to_x (0.5), PLOT_TOP / 2.0, 0.5, 0.5);
  cairo_status_t status = cairo_status (cr);
  cairo_destroy (cr);

  /* atomically: a temporary file in the same folder, then a rename */
  g_autofree char *dir = g_path_get_dirname (path);
  g_autofree char *base = g_path_get_basename (path);
  g_autofree char *template = g_strdup_printf ("%s%s.%s.XXXXXX", dir, G_DIR_SEPARATOR_S, base);
  int fd = status == CAIRO_STATUS_SUCCESS ? g_mkstemp (template) : -1;
  int saved = errno;
  if (fd < 0)
    {
      cairo_surface_destroy (surface);
      if (status != CAIRO_STATUS_SUCCESS)
        g_set_error (error, RETE_IO_ERROR, RETE_ERROR_IO, "drawing the ROC curve failed: %s",
                     cairo_status_to_string (status));
      else
        g_set_error (error, RETE_IO_ERROR, RETE_ERROR_IO,
                     "cannot write the ROC plot into %s: %s", dir, g_strerror (saved));
      return FALSE;
    }
  close (fd);
  status = cairo_surface_write_to_png (surface, template);
  cairo_surface_destroy (surface);
  if (status != CAIRO_STATUS_SUCCESS)
    {
      g_unlink (template);
      g_set_error (error, RETE_IO_ERROR, RETE_ERROR_IO, "cannot write the ROC plot %s: %s",
                   path, cairo_status_to_string (status));
      return FALSE;
    }
  g_chmod (template, 0644);
  if (g_rename (template, path) != 0)
    {
      saved = errno;
      g_unlink (template);
      g_set_error (error, RETE_IO_ERROR, RETE_ERROR_IO, "cannot write the ROC plot %s: %s",
                   path, g_strerror (saved));
      return FALSE;
    }
  return TRUE;
}
