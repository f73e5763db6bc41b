/* cli.h - shared helpers of the command-line front end (uses only the public API). */
#ifndef SL_CLI_H
#define SL_CLI_H

#include "sluice/sluice.h"

typedef struct cli_args {
    int argc;
    char **argv;
    int i;              /* next argument */
    const char *cmd;
    sl_ctx *ctx;
    double start_clock;     /* sl_clock() when the process started */
    int stderr_tty;         /* progress lines go to a terminal */
} cli_args;

/* Is argv[i] the option `name`? Consumes it. "--name=value" is split. */
int cli_opt(cli_args *a, const char *name);
/* Options every command accepts (--quiet, --debug, --help): 1 consumed,
 * -1 help printed (the command should return 0), 0 not one of them. */
int cli_common_opt(cli_args *a, const char *help);
/* Value of the option just matched; prints a usage error and returns NULL if missing. */
const char *cli_value(cli_args *a);
/* Strict number parsing; print "sluice CMD: OPTION: ..." on error. */
int cli_double(cli_args *a, const char *opt, const char *s, double *out);
/* src/cli/param.c: s is a finite number in C strtod's syntax, the whole of
 * it, neither overflowing nor underflowing (1 and *out, else 0). */
int cli_finite(const char *s, double *out);
/* `--param NAME=VALUE`: NAME is all before the first '=' (not empty), VALUE
 * all after it, a number as cli_finite takes it. 1, *name_len and *value; or
 * 0 and the message for the user in err. */
int cli_param_split(const char *text, size_t *name_len, double *value, char *err, size_t errlen);
int cli_int64(cli_args *a, const char *opt, const char *s, int64_t *out);
/* Print a usage error (rank 0) and return SL_EUSAGE. */
int cli_usage_error(cli_args *a, const char *fmt, ...) __attribute__((format(printf, 2, 3)));
/* argv[i] matched no option of the command: "-x" is an unknown option; a
 * file name (or a lone "-") fills the first of the n positional slots still
 * NULL (e.g. MODEL then SOLUTION) and is consumed; a usage error when every
 * slot is taken. Returns 0 or SL_EUSAGE. */
int cli_positional(cli_args *a, const char **slots[], int n);
/* --policy FILE (just matched): a solution file or a rule CSV, filling the
 * command's SOLUTION slot; a usage error if the slot is already filled.
 * Returns 0 or SL_EUSAGE. */
int cli_policy_opt(cli_args *a, const char **slot);
/* Report a library failure (rank 0) and return its exit code. */
int cli_fail(cli_args *a, sl_status st);

/* Stop and checkpoint signals of `sluice solve` (signals.c): USR1 asks for
 * a checkpoint, TERM, INT and USR2 for a stop. Install catches them (and
 * unblocks them) from the first line of main(); intact says whether the
 * handlers are still ours (after MPI_Init); attach hands the flag to the
 * library; stop_requested reports a stop request and its arrival
 * (CLOCK_MONOTONIC, the clock of sl_clock()). */
int cli_signals_install(void);
int cli_signals_intact(void);
void cli_signals_attach(sl_ctx *ctx);
int cli_signals_stop_requested(int *sig, double *arrived);

int cmd_build(cli_args *a);
int cmd_import(cli_args *a);
int cmd_estimate(cli_args *a);
int cmd_info(cli_args *a);
int cmd_solve(cli_args *a);
int cmd_evaluate(cli_args *a);
int cmd_verify(cli_args *a);
int cmd_export(cli_args *a);
int cmd_simulate(cli_args *a);
int cmd_table(cli_args *a);
int cmd_outlook(cli_args *a);
int cmd_report(cli_args *a);

#endif
