/* cmd_solve.c - solve, evaluate, verify, export and simulate commands. */
#include <signal.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "cli/cli.h"

/* The CLI's one piece of process state: what the last signal asked for, and
 * which signal it was and when it arrived (CLOCK_MONOTONIC s, us), written
 * before the flag so the solver can log both on its own clock. */
static volatile sig_atomic_t stop_flag;
static volatile sig_atomic_t stop_info[3];

static void on_signal(int sig)
{
    struct timespec ts;
    if (clock_gettime(CLOCK_MONOTONIC, &ts) == 0) { /* async-signal-safe (POSIX) */
        stop_info[1] = (sig_atomic_t)ts.tv_sec;
        stop_info[2] = (sig_atomic_t)(ts.tv_nsec / 1000);
        stop_info[0] = sig;
    }
    if (sig == SIGUSR1) {
        if (stop_flag < 1) stop_flag = 1;
    } else {
        stop_flag = 2;
    }
}

static void install_signals(sl_ctx *ctx)
{
    struct sigaction sa;
    memset(&sa, 0, sizeof(sa));
    sa.sa_handler = on_signal;
    sigemptyset(&sa.sa_mask);
    sa.sa_flags = SA_RESTART;
    sigaction(SIGUSR1, &sa, NULL);
    sigaction(SIGUSR2, &sa, NULL);
    sigaction(SIGTERM, &sa, NULL);
    sigaction(SIGINT, &sa, NULL);
    sl_ctx_set_signal_flag(ctx, &stop_flag);
    sl_ctx_set_signal_info(ctx, stop_info);
}


static int num_opt(cli_args *a, const char *name, double *out)
{
    const char *v = cli_value(a);
    return v != NULL && cli_double(a, name, v, out);
}

static int int_opt(cli_args *a, const char *name, int64_t *out)
{
    const char *v = cli_value(a);
    return v != NULL && cli_int64(a, name, v, out);
}

static const char solve_help[] =
    "usage: sluice solve MODEL.h5 -o SOLUTION.h5 [options]\n"
    "  compute an optimal policy and its value with a certified error bound.\n"
    "  --method M            gs (Gauss-Seidel value iteration, default), jacobi (value\n"
    "                        iteration), mpi (modified policy iteration), pi (policy\n"
    "                        iteration with exact UMFPACK evaluation)\n"
    "  --tolerance EPS       certify |value - v*| <= EPS and the policy within EPS of\n"
    "                        optimal in every state (default 1e-6)\n"
    "  --order O             sweep order: auto (stage-reverse when the model has a stage\n"
    "                        factor), natural, stage-reverse, reverse\n"
    "  --sweeps M            mpi: partial-evaluation sweeps per iteration (default adaptive)\n"
    "  --max-iterations N    stop after N iterations (exit 75 if not certified)\n"
    "  --memory-limit BYTES  pi: largest factorization to attempt (default half of RAM)\n"
    "  --strict-memory       pi: fail instead of evaluating iteratively when over the limit\n"
    "  --checkpoint DIR      write checkpoints to DIR (newest two kept)\n"
    "  --checkpoint-every S  seconds between checkpoints (default 600)\n"
    "  --resume              continue from the newest valid checkpoint in DIR (fresh if none)\n"
    "  --walltime S          stop cleanly before S seconds (exit 75); also read from\n"
    "                        $SLUICE_WALLTIME, or $SLURM_JOB_END_TIME when set\n"
    "  --report FILE.json    machine-readable report\n"
    "  --progress-every S    seconds between progress lines (default 1 on a terminal, 30 otherwise)\n"
    "signals: USR1 = checkpoint now and continue; TERM, INT, USR2 = checkpoint and exit 75.\n";

int cmd_solve(cli_args *a)
{
    sl_solve_opts o;
    memset(&o, 0, sizeof(o));
    int rc = 0;
    const char *v;
    int64_t iv;
    while (a->i < a->argc && rc == 0) {
        int c = cli_common_opt(a, solve_help);
        if (c < 0) return 0;
        if (c > 0) continue;
        if (cli_opt(a, "-o") || cli_opt(a, "--output")) {
            if ((o.output = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--method")) {
            if ((v = cli_value(a)) == NULL) rc = SL_EUSAGE;
            else if (!sl_method_parse(v, &o.method))
                rc = cli_usage_error(a, "--method: '%s' is not one of gs, jacobi, mpi, pi", v);
        } else if (cli_opt(a, "--order")) {
            if ((v = cli_value(a)) == NULL) rc = SL_EUSAGE;
            else if (!sl_order_parse(v, &o.order))
                rc = cli_usage_error(a, "--order: '%s' is not one of auto, natural, stage-reverse, reverse", v);
        } else if (cli_opt(a, "--tolerance")) {
            if (!num_opt(a, "--tolerance", &o.tolerance)) rc = SL_EUSAGE;
            else if (!(o.tolerance > 0)) rc = cli_usage_error(a, "--tolerance must be positive");
        } else if (cli_opt(a, "--max-iterations")) {
            if (!int_opt(a, "--max-iterations", &o.max_iterations)) rc = SL_EUSAGE;
            else if (o.max_iterations < 1) rc = cli_usage_error(a, "--max-iterations must be at least 1");
        } else if (cli_opt(a, "--sweeps")) {
            if (!int_opt(a, "--sweeps", &iv)) rc = SL_EUSAGE;
            else if (iv < 1 || iv > 100000) rc = cli_usage_error(a, "--sweeps must be in [1, 100000]");
            else o.sweeps = (int)iv;
        } else if (cli_opt(a, "--memory-limit")) {
            if (!num_opt(a, "--memory-limit", &o.memory_limit)) rc = SL_EUSAGE;
            else if (!(o.memory_limit > 0)) rc = cli_usage_error(a, "--memory-limit must be positive (bytes)");
        } else if (cli_opt(a, "--strict-memory")) {
            o.strict_memory = 1;
        } else if (cli_opt(a, "--checkpoint")) {
            if ((o.checkpoint_dir = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--checkpoint-every")) {
            if (!num_opt(a, "--checkpoint-every", &o.checkpoint_every)) rc = SL_EUSAGE;
            else if (!(o.checkpoint_every > 0)) rc = cli_usage_error(a, "--checkpoint-every must be positive");
        } else if (cli_opt(a, "--resume")) {
            o.resume = 1;
        } else if (cli_opt(a, "--walltime")) {
            if (!num_opt(a, "--walltime", &o.walltime)) rc = SL_EUSAGE;
            else if (!(o.walltime > 0)) rc = cli_usage_error(a, "--walltime must be positive (seconds)");
        } else if (cli_opt(a, "--report")) {
            if ((o.report = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--progress-every")) {
            if (!num_opt(a, "--progress-every", &o.progress_every)) rc = SL_EUSAGE;
        } else if (a->argv[a->i][0] == '-') {
            rc = cli_usage_error(a, "unknown option '%s'", a->argv[a->i]);
        } else if (o.model == NULL) {
            o.model = a->argv[a->i++];
        } else {
            rc = cli_usage_error(a, "unexpected argument '%s'", a->argv[a->i]);
        }
    }
    if (rc) return rc;
    if (o.model == NULL) return cli_usage_error(a, "no model file given");
    if (o.output == NULL) return cli_usage_error(a, "no output file given (-o SOLUTION.h5)");
    if (o.resume && o.checkpoint_dir == NULL) return cli_usage_error(a, "--resume needs --checkpoint DIR");
    if (o.walltime <= 0) {
        const char *w = getenv("SLUICE_WALLTIME"), *end = getenv("SLURM_JOB_END_TIME");
        if (w && *w) o.walltime = atof(w);
        else if (end && *end) {
            double left = atof(end) - (double)time(NULL);
            if (left > 0) o.walltime = left;
        }
    }
    install_signals(a->ctx);
    return cli_fail(a, sl_solve(a->ctx, &o));
}

static const char evaluate_help[] =
    "usage: sluice evaluate MODEL.h5 --policy SOLUTION.h5 -o VALUES.h5 [options]\n"
    "  value of the fixed policy stored in SOLUTION.h5.\n"
    "  --iterative           evaluate by sweeps instead of a direct UMFPACK solve\n"
    "  --tolerance EPS       iterative: certified error bound (default 1e-6)\n"
    "  --memory-limit BYTES  largest factorization to attempt (default half of RAM);\n"
    "                        above it the evaluation is iterative\n";

int cmd_evaluate(cli_args *a)
{
    sl_evaluate_opts o;
    memset(&o, 0, sizeof(o));
    int rc = 0;
    while (a->i < a->argc && rc == 0) {
        int c = cli_common_opt(a, evaluate_help);
        if (c < 0) return 0;
        if (c > 0) continue;
        if (cli_opt(a, "-o") || cli_opt(a, "--output")) {
            if ((o.output = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--policy")) {
            if ((o.policy = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--iterative")) {
            o.iterative = 1;
        } else if (cli_opt(a, "--tolerance")) {
            if (!num_opt(a, "--tolerance", &o.tolerance)) rc = SL_EUSAGE;
            else if (!(o.tolerance > 0)) rc = cli_usage_error(a, "--tolerance must be positive");
        } else if (cli_opt(a, "--memory-limit")) {
            if (!num_opt(a, "--memory-limit", &o.memory_limit)) rc = SL_EUSAGE;
        } else if (a->argv[a->i][0] == '-') {
            rc = cli_usage_error(a, "unknown option '%s'", a->argv[a->i]);
        } else if (o.model == NULL) {
            o.model = a->argv[a->i++];
        } else {
            rc = cli_usage_error(a, "unexpected argument '%s'", a->argv[a->i]);
        }
    }
    if (rc) return rc;
    if (o.model == NULL) return cli_usage_error(a, "no model file given");
    if (o.policy == NULL) return cli_usage_error(a, "no policy given (--policy SOLUTION.h5)");
    if (o.output == NULL) return cli_usage_error(a, "no output file given (-o VALUES.h5)");
    return cli_fail(a, sl_evaluate(a->ctx, &o));
}

static const char verify_help[] =
    "usage: sluice verify MODEL.h5 SOLUTION.h5 [--tolerance EPS] [--json]\n"
    "  recompute d = Tv - v from the model and the stored value and policy, and\n"
    "  certify the value and the policy independently of how they were computed.\n"
    "  Exit 0 if both bounds are within EPS (default: the solution's tolerance), 65 if not.\n";

int cmd_verify(cli_args *a)
{
    sl_verify_opts o;
    memset(&o, 0, sizeof(o));
    o.out = stdout;
    int rc = 0;
    while (a->i < a->argc && rc == 0) {
        int c = cli_common_opt(a, verify_help);
        if (c < 0) return 0;
        if (c > 0) continue;
        if (cli_opt(a, "--tolerance")) {
            if (!num_opt(a, "--tolerance", &o.tolerance)) rc = SL_EUSAGE;
            else if (!(o.tolerance > 0)) rc = cli_usage_error(a, "--tolerance must be positive");
        } else if (cli_opt(a, "--json")) {
            o.json = 1;
        } else if (a->argv[a->i][0] == '-') {
            rc = cli_usage_error(a, "unknown option '%s'", a->argv[a->i]);
        } else if (o.model == NULL) {
            o.model = a->argv[a->i++];
        } else if (o.solution == NULL) {
            o.solution = a->argv[a->i++];
        } else {
            rc = cli_usage_error(a, "unexpected argument '%s'", a->argv[a->i]);
        }
    }
    if (rc) return rc;
    if (o.model == NULL || o.solution == NULL) return cli_usage_error(a, "need MODEL.h5 and SOLUTION.h5");
    return cli_fail(a, sl_verify(a->ctx, &o));
}

static const char export_help[] =
    "usage: sluice export SOLUTION.h5 --model MODEL.h5 -o FILE.csv|-\n"
    "  one CSV row per state: state, factor values, action id, action name, value.\n";

int cmd_export(cli_args *a)
{
    sl_export_opts o = {NULL, NULL, NULL};
    int rc = 0;
    while (a->i < a->argc && rc == 0) {
        int c = cli_common_opt(a, export_help);
        if (c < 0) return 0;
        if (c > 0) continue;
        if (cli_opt(a, "-o") || cli_opt(a, "--output")) {
            if ((o.output = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--model")) {
            if ((o.model = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else if (a->argv[a->i][0] == '-') {
            rc = cli_usage_error(a, "unknown option '%s'", a->argv[a->i]);
        } else if (o.solution == NULL) {
            o.solution = a->argv[a->i++];
        } else {
            rc = cli_usage_error(a, "unexpected argument '%s'", a->argv[a->i]);
        }
    }
    if (rc) return rc;
    if (o.solution == NULL) return cli_usage_error(a, "no solution file given");
    if (o.model == NULL) return cli_usage_error(a, "no model given (--model MODEL.h5)");
    if (o.output == NULL) return cli_usage_error(a, "no output given (-o FILE.csv, or - for stdout)");
    return cli_fail(a, sl_export(a->ctx, &o));
}

static const char simulate_help[] =
    "usage: sluice simulate MODEL.h5 SOLUTION.h5 --start STATE --episodes N --seed S [options]\n"
    "  Monte Carlo rollouts of the solution's policy; prints the mean discounted\n"
    "  return with a 95% interval next to the solution's value.\n"
    "  --horizon T           steps per episode (default: until discount^T < 1e-6)\n"
    "  --json                machine-readable output\n";

int cmd_simulate(cli_args *a)
{
    sl_simulate_opts o;
    memset(&o, 0, sizeof(o));
    o.out = stdout;
    o.episodes = 1000;
    int have_start = 0, rc = 0;
    int64_t seed = 1;
    while (a->i < a->argc && rc == 0) {
        int c = cli_common_opt(a, simulate_help);
        if (c < 0) return 0;
        if (c > 0) continue;
        if (cli_opt(a, "--start")) {
            if (!int_opt(a, "--start", &o.start)) rc = SL_EUSAGE;
            have_start = 1;
        } else if (cli_opt(a, "--episodes")) {
            if (!int_opt(a, "--episodes", &o.episodes)) rc = SL_EUSAGE;
            else if (o.episodes < 1) rc = cli_usage_error(a, "--episodes must be at least 1");
        } else if (cli_opt(a, "--seed")) {
            if (!int_opt(a, "--seed", &seed)) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--horizon")) {
            if (!int_opt(a, "--horizon", &o.horizon)) rc = SL_EUSAGE;
            else if (o.horizon < 1) rc = cli_usage_error(a, "--horizon must be at least 1");
        } else if (cli_opt(a, "--json")) {
            o.json = 1;
        } else if (a->argv[a->i][0] == '-') {
            rc = cli_usage_error(a, "unknown option '%s'", a->argv[a->i]);
        } else if (o.model == NULL) {
            o.model = a->argv[a->i++];
        } else if (o.solution == NULL) {
            o.solution = a->argv[a->i++];
        } else {
            rc = cli_usage_error(a, "unexpected argument '%s'", a->argv[a->i]);
        }
    }
    if (rc) return rc;
    if (o.model == NULL || o.solution == NULL) return cli_usage_error(a, "need MODEL.h5 and SOLUTION.h5");
    if (!have_start) return cli_usage_error(a, "--start STATE is required");
    o.seed = (uint64_t)seed;
    return cli_fail(a, sl_simulate(a->ctx, &o));
}
