/* agreement_report.h — `rete agreement`'s run and rows, and its outputs: the table on
 * stdout, CSV and JSON (agreement_report.c). Private to cli/. */
#ifndef RETE_AGREEMENT_REPORT_H
#define RETE_AGREEMENT_REPORT_H

#include "rete_cli.h"
#include "rete_agreement.h"

G_BEGIN_DECLS

typedef struct {
  char *reference, *mask;
  ReteAgreement *agreement;
  char *error;
} AgreementRow;

typedef struct {
  GPtrArray *maps;
  char *reference_source, *mask_source;
  double threshold;
  int roc_points;
  char *roc;            /* file (one map) or folder (several) */
  char *title;
  ReteCliGuard *guard;
  AgreementRow *rows;
} AgreementRun;

void agreement_print_table (const AgreementRun *run);
char *agreement_csv (const AgreementRun *run);
char *agreement_json (const AgreementRun *run);

G_END_DECLS

#endif /* RETE_AGREEMENT_REPORT_H */
