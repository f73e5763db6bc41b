/* sluice/report.h - the report-data document behind `sluice report`.
 *
 * sl_report_data() gathers, from a model file and a solution file, what a
 * reviewer's report shows: the certificate in plain numbers and relative to
 * the values, an independent verification run, the residual history, model
 * facts (factors, actions and where they are available, parameters) and a
 * map of the chosen action over two factors. It writes one JSON document
 * whose layout docs/report.md defines (`sluice_report_data: 1`); report/
 * render.mjs turns it into the HTML page and figures.
 */
#ifndef SLUICE_REPORT_H
#define SLUICE_REPORT_H

#include "sluice/sluice.h"

typedef struct sl_report_data_opts {
    const char *model;
    const char *solution;
    FILE *out;              /* rank 0 writes the document here */
    int skip_verify;        /* non-zero: leave the verification section out */
    int64_t map_max_x;      /* most values of a map axis / panels shown; */
    int64_t map_max_y;      /* 0 -> 60, 24, 12 (evenly spaced values of */
    int64_t map_max_panels; /* larger factors, first and last included) */
    const char *outlook_start;  /* a state number or NAME=VALUE/NAME@INDEX,...;
                                 * NULL: the middle of every factor, stage 0 */
    int64_t outlook_stages;     /* stages of the outlook; 0 -> 24 */
    int64_t thin_below;         /* models with visit counts: threshold of a thin
                                 * pair; 0 -> SLUICE_THIN_BELOW */
} sl_report_data_opts;

/* Write the report-data document for (model, solution) to opts->out on
 * rank 0. Fails with SL_EDATA naming the file (and state) when the solution
 * belongs to another model or chooses an action the model does not offer,
 * SL_ENOINPUT when a file is missing. A solution whose certificate does not
 * hold is not an error: the document says so. Collective. */
SLUICE_API sl_status sl_report_data(sl_ctx *ctx, const sl_report_data_opts *opts);

#endif /* SLUICE_REPORT_H */
