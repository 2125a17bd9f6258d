/* vessel-map-dialog.c — placeholder, replaced by the dialog with its preview. */
#include "config.h"

#include "vessel-map.h"

gboolean
vessel_map_dialog (gint32 image, gint32 drawable, VesselMapConfig *config)
{
  return FALSE;
}
