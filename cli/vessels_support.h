/* vessels_support.h — `rete vessels`'s run and rows (private to cli/). */
#ifndef RETE_VESSELS_SUPPORT_H
#define RETE_VESSELS_SUPPORT_H

#include "rete_cli.h"
#include "rete_vessel.h"

G_BEGIN_DECLS

typedef struct {
  double threshold, vessel_fraction, seconds;
  gsize fov_pixels;
  char *error;
} VesselRow;

typedef struct {
  GPtrArray *inputs;
  ReteVesselParams params;
  char *fov_source;         /* file or folder of given FOV masks, or NULL */
  char *output_dir;
  gboolean write_probability, write_fov, skip_existing;
  int bit_depth;
  ReteCliGuard *guard;
  VesselRow *rows;
} VesselRun;

/* FALSE (with the library's message) when the library refuses the settings. */
gboolean vessels_check_settings (const ReteVesselParams *params, GError **error);
/* One CSV line per photograph: threshold, vessel fraction in the FOV, time, status. */
char *vessels_report_csv (const VesselRun *run, const char *settings);

G_END_DECLS

#endif /* RETE_VESSELS_SUPPORT_H */
