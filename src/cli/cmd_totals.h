/* cmd_totals.h - outcome-quantity totals printed by `sluice evaluate`. */
#ifndef SL_CMD_TOTALS_H
#define SL_CMD_TOTALS_H

#include "cli/cli.h"

/* Compute and print the expected discounted totals of each quantity under
 * `pol` (and `compare_path`'s policy if not NULL); write per-state CSV to
 * csv_path if not NULL. Returns an exit code. Collective. */
int cli_quantity_totals(cli_args *a, sl_solver *s, const sl_model *m, const sl_solution *pol, const char *model_path,
                        const char *policy_path, const char *compare_path, const char *csv_path);

#endif
