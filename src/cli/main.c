/* main.c - `sluice COMMAND ...`: MPI set-up, dispatch, exit codes. */
#include <errno.h>
#include <math.h>
#include <stdarg.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "cli/cli.h"
#include "sluice/generator.h"

static const char usage_text[] =
    "usage: sluice COMMAND [options]\n"
    "\n"
    "commands:\n"
    "  build GEN.c|GEN.so [--param NAME=VALUE]... -o MODEL.h5   compile a generator into a model file\n"
    "  import TRIPLETS.csv|- --discount G -o MODEL.h5           model from state,action,next_state,probability,reward rows\n"
    "  estimate EXPERIENCE.csv --discount G -o MODEL.h5         model estimated from state,action,reward,next_state rows\n"
    "  info FILE.h5 [--json] [--partition N]                    describe a model, solution or checkpoint file\n"
    "  solve MODEL.h5 -o SOLUTION.h5 [--method gs|jacobi|mpi|pi] [--tolerance EPS] ...\n"
    "  evaluate MODEL.h5 --policy SOLUTION.h5|RULE.csv -o VALUES.h5  value of a fixed policy (or of a rule)\n"
    "  verify MODEL.h5 SOLUTION.h5 [--tolerance EPS]            recompute and check a solution's certificate\n"
    "  export SOLUTION.h5 --model MODEL.h5 -o FILE.csv          policy and values as CSV\n"
    "  simulate MODEL.h5 SOLUTION.h5|--policy RULE.csv --start S --episodes N --seed K [-o STAGES.csv]\n"
    "  table SOLUTION.h5 --model MODEL.h5 --rows F --cols F [--fix NAME=VALUE]... [--show WHAT]\n"
    "                                                           release rule, water values, quantities\n"
    "  outlook MODEL.h5 SOLUTION.h5|--policy RULE.csv --start S --stages N [--json]\n"
    "                                                           exact forward distribution under the policy\n"
    "  report MODEL.h5 SOLUTION.h5 -o REPORT.html [--figures DIR]   one HTML page for a reviewer\n"
    "  help COMMAND                                             the options of one command\n"
    "\n"
    "Run 'sluice help COMMAND' (or 'sluice COMMAND --help') for the options of one command. Under 'mpirun -np N'\n"
    "every command that reads or writes a model uses all N ranks.\n"
    "Exit codes: 0 done, 64 usage, 65 bad data, 66 missing input, 70 internal error,\n"
    "73 cannot create output, 74 I/O error, 75 stopped early with a valid checkpoint.\n";

int cli_opt(cli_args *a, const char *name)
{
    if (a->i >= a->argc) return 0;
    char *arg = a->argv[a->i];
    size_t n = strlen(name);
    if (strcmp(arg, name) == 0) {
        a->i++;
        return 1;
    }
    if (strncmp(arg, name, n) == 0 && arg[n] == '=' && name[0] == '-' && name[1] == '-') {
        /* split --name=value in place: value becomes the next argument */
        a->argv[a->i] = arg + n + 1;
        return 1;
    }
    return 0;
}

int cli_common_opt(cli_args *a, const char *help)
{
    if (cli_opt(a, "--quiet") || cli_opt(a, "-q") || cli_opt(a, "--debug")) return 1;
    if (cli_opt(a, "--help") || cli_opt(a, "-h")) {
        if (sl_ctx_rank(a->ctx) == 0) fputs(help, stdout);
        return -1;
    }
    return 0;
}

const char *cli_value(cli_args *a)
{
    if (a->i >= a->argc) {
        cli_usage_error(a, "option %s needs a value", a->argv[a->i - 1]);
        return NULL;
    }
    return a->argv[a->i++];
}

int cli_usage_error(cli_args *a, const char *fmt, ...)
{
    if (sl_ctx_rank(a->ctx) == 0) {
        va_list ap;
        va_start(ap, fmt);
        fprintf(stderr, "sluice %s: ", a->cmd);
        vfprintf(stderr, fmt, ap);
        fprintf(stderr, "\n(run 'sluice %s --help' for usage)\n", a->cmd);
        va_end(ap);
    }
    return SL_EUSAGE;
}

int cli_positional(cli_args *a, const char **slots[], int n)
{
    const char *arg = a->argv[a->i];
    if (arg[0] == '-' && arg[1] != '\0') return cli_usage_error(a, "unknown option '%s'", arg);
    for (int k = 0; k < n; k++)
        if (*slots[k] == NULL) {
            *slots[k] = arg;
            a->i++;
            return 0;
        }
    return cli_usage_error(a, "unexpected argument '%s'", arg);
}

int cli_policy_opt(cli_args *a, const char **slot)
{
    const char *v = cli_value(a);
    if (v == NULL) return SL_EUSAGE;
    if (*slot != NULL) return cli_usage_error(a, "the policy is given twice ('%s' and --policy '%s')", *slot, v);
    *slot = v;
    return 0;
}

int cli_fail(cli_args *a, sl_status st)
{
    if (st != SL_OK && st != SL_ESTOPPED && sl_ctx_rank(a->ctx) == 0) {
        const char *m = sl_ctx_message(a->ctx);
        fprintf(stderr, "sluice %s: %s\n", a->cmd, m[0] ? m : sl_strerror(st));
    }
    return (int)st;
}

int cli_double(cli_args *a, const char *opt, const char *s, double *out)
{
    if (cli_finite(s, out)) return 1;
    cli_usage_error(a, "%s: '%s' is not a finite number", opt, s);
    return 0;
}

int cli_int64(cli_args *a, const char *opt, const char *s, int64_t *out)
{
    char *end = NULL;
    errno = 0;
    long long v = strtoll(s, &end, 10);
    if (s[0] == '\0' || *end != '\0' || errno == ERANGE) {
        cli_usage_error(a, "%s: '%s' is not an integer", opt, s);
        return 0;
    }
    *out = (int64_t)v;
    return 1;
}

int main(int argc, char **argv)
{
    double start_clock = sl_clock();
    /* `solve` stops cleanly on TERM, INT and USR2 and checkpoints on USR1:
     * caught from here on, before MPI_Init and the model load (a signal in
     * the dynamic loader's time before main() still ends the process with
     * the default action). The other commands keep the default actions. */
    int is_solve = argc >= 2 && strcmp(argv[1], "solve") == 0;
    if (is_solve && !cli_signals_install()) fprintf(stderr, "sluice: warning: cannot install signal handlers\n");
    int provided = 0;
    if (MPI_Init_thread(&argc, &argv, MPI_THREAD_SINGLE, &provided) != MPI_SUCCESS) {
        fprintf(stderr, "sluice: MPI initialisation failed\n");
        return SL_EINTERNAL;
    }
    /* MPI_Init may install handlers of its own: ours must stay in place */
    if (is_solve && !cli_signals_intact() && !cli_signals_install())
        fprintf(stderr, "sluice: warning: cannot install signal handlers\n");
    int rank = 0;
    MPI_Comm_rank(MPI_COMM_WORLD, &rank);
    int rc = 0;
    /* `sluice help COMMAND` is `sluice COMMAND --help` */
    char *help_argv[4] = {argv[0], NULL, "--help", NULL};
    if (argc >= 3 && strcmp(argv[1], "help") == 0) {
        help_argv[1] = argv[2];
        argc = 3;
        argv = help_argv;
    }
    if (argc < 2 || strcmp(argv[1], "--help") == 0 || strcmp(argv[1], "-h") == 0 ||
        strcmp(argv[1], "help") == 0) {
        if (rank == 0) fputs(usage_text, argc < 2 ? stderr : stdout);
        rc = argc < 2 ? SL_EUSAGE : 0;
        MPI_Finalize();
        return rc;
    }
    if (strcmp(argv[1], "--version") == 0) {
        if (rank == 0) printf("sluice %s (model formats 1-2, generator ABIs 1-%d)\n", SLUICE_VERSION,
                              SLUICE_GENERATOR_ABI);
        MPI_Finalize();
        return 0;
    }
    static const struct {
        const char *name;
        int (*fn)(cli_args *);
    } cmds[] = {{"build", cmd_build},       {"import", cmd_import}, {"estimate", cmd_estimate},
                {"info", cmd_info},         {"solve", cmd_solve},   {"evaluate", cmd_evaluate},
                {"verify", cmd_verify},     {"export", cmd_export}, {"simulate", cmd_simulate},
                {"table", cmd_table},       {"outlook", cmd_outlook},
                {"report", cmd_report}};
    int (*fn)(cli_args *) = NULL;
    for (size_t k = 0; k < sizeof(cmds) / sizeof(cmds[0]); k++)
        if (strcmp(argv[1], cmds[k].name) == 0) fn = cmds[k].fn;
    if (fn == NULL) {
        if (rank == 0) fprintf(stderr, "sluice: unknown command '%s'\n\n%s", argv[1], usage_text);
        MPI_Finalize();
        return SL_EUSAGE;
    }
    int verbosity = 1;
    const char *v = getenv("SLUICE_VERBOSE");
    if (v && *v) verbosity = atoi(v);
    for (int i = 2; i < argc; i++) {
        if (strcmp(argv[i], "--quiet") == 0 || strcmp(argv[i], "-q") == 0) verbosity = 0;
        if (strcmp(argv[i], "--debug") == 0) verbosity = 2;
    }
    sl_ctx *ctx = NULL;
    if (sl_ctx_new(MPI_COMM_WORLD, verbosity, &ctx) != SL_OK) {
        fprintf(stderr, "sluice: cannot create context\n");
        MPI_Finalize();
        return SL_EINTERNAL;
    }
    sl_ctx_set_log(ctx, stderr);
    if (is_solve) cli_signals_attach(ctx);
    cli_args a = {argc, argv, 2, argv[1], ctx, start_clock, isatty(STDERR_FILENO)};
    rc = fn(&a);
    sl_ctx_free(&ctx);
    MPI_Finalize();
    return rc;
}
