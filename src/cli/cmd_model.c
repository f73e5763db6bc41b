/* cmd_model.c - build, import, estimate and info commands. */
#include <stdlib.h>
#include <string.h>

#include "cli/cli.h"


static int parse_objective(cli_args *a, sl_objective *obj)
{
    const char *v = cli_value(a);
    if (v == NULL) return 0;
    if (!sl_objective_parse(v, obj)) {
        cli_usage_error(a, "--objective: '%s' is not one of discounted, total, average, finite", v);
        return 0;
    }
    return 1;
}

/* Say that a model file was written (rank 0, unless quiet). */
static void say_wrote(cli_args *a, const char *output, int64_t states, int64_t pairs, int64_t trans, double t0)
{
    if (sl_ctx_rank(a->ctx) == 0 && sl_ctx_verbosity(a->ctx) >= 1)
        fprintf(stderr, "%s: wrote %s: %lld states, %lld pairs, %lld transitions in %.1f s\n", a->cmd, output,
                (long long)states, (long long)pairs, (long long)trans, sl_clock() - t0);
}

/* Write a model and say so. */
static int save_model(cli_args *a, const sl_model *m, const char *output, double t0)
{
    int rc = cli_fail(a, sl_model_save(m, output));
    if (rc == 0)
        say_wrote(a, output, sl_model_n_states(m), sl_model_n_pairs(m), sl_model_n_transitions(m), t0);
    return rc;
}

static const char build_help[] =
    "usage: sluice build GENERATOR.c|GENERATOR.so -o MODEL.h5 [options]\n"
    "  compile a generator program (see sluice/generator.h), enumerate every state\n"
    "  and action, validate, and write the model file.\n"
    "  --param NAME=VALUE   set a generator parameter (repeatable)\n"
    "  --discount G         override the generator's discount factor\n"
    "  --objective NAME     discounted (default), total, average or finite\n"
    "  --prob-tolerance T   allowed |sum of probabilities - 1| per pair (default 1e-9)\n"
    "  --renormalize        rescale pairs whose sum drifts by at most 1e-6 (reports how many)\n"
    "  --cache DIR          compiled-generator cache (default $SLUICE_CACHE or ~/.cache/sluice)\n"
    "  --cc COMPILER        C compiler (default $CC or cc)\n"
    "  --block-transitions N  write the model a block of about N transitions at a time\n"
    "                       (default 2097152; the build holds about 30 bytes per\n"
    "                       transition of a block, whatever the model's size)\n"
    "  -q, --quiet          no progress lines\n";

int cmd_build(cli_args *a)
{
    sl_build_opts o;
    memset(&o, 0, sizeof(o));
    const char *output = NULL;
    const char *names[256];
    double values[256];
    char *owned[256];
    int n_owned = 0, rc = 0;
    o.param_names = names;
    o.param_values = values;
    while (a->i < a->argc && rc == 0) {
        int c = cli_common_opt(a, build_help);
        const char *v;
        if (c < 0) return 0;
        if (c > 0) continue;
        if (cli_opt(a, "-o") || cli_opt(a, "--output")) {
            if ((output = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--param")) {
            if ((v = cli_value(a)) == NULL) { rc = SL_EUSAGE; break; }
            size_t name_len = 0;
            char msg[600];
            if (o.n_params >= 256) { rc = cli_usage_error(a, "too many --param options"); break; }
            if (!cli_param_split(v, &name_len, &values[o.n_params], msg, sizeof(msg))) {
                rc = cli_usage_error(a, "%s", msg);
                break;
            }
            char *name = strndup(v, name_len);
            if (name == NULL) { rc = SL_ENOMEM; break; }
            owned[n_owned++] = name;
            names[o.n_params++] = name;
        } else if (cli_opt(a, "--discount")) {
            if ((v = cli_value(a)) == NULL || !cli_double(a, "--discount", v, &o.discount)) rc = SL_EUSAGE;
            o.have_discount = 1;
        } else if (cli_opt(a, "--objective")) {
            if (!parse_objective(a, &o.objective)) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--prob-tolerance")) {
            if ((v = cli_value(a)) == NULL || !cli_double(a, "--prob-tolerance", v, &o.prob_tolerance)) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--renormalize")) {
            o.renormalize = 1;
        } else if (cli_opt(a, "--cache")) {
            if ((o.cache_dir = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--cc")) {
            if ((o.cc = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--block-transitions")) {
            if ((v = cli_value(a)) == NULL || !cli_int64(a, "--block-transitions", v, &o.block_transitions))
                rc = SL_EUSAGE;
            else if (o.block_transitions < 1)
                rc = cli_usage_error(a, "--block-transitions: '%s' is not a positive number", v);
        } else {
            rc = cli_positional(a, (const char **[]){&o.generator}, 1);
        }
    }
    if (rc == 0 && o.generator == NULL) rc = cli_usage_error(a, "no generator given");
    if (rc == 0 && output == NULL) rc = cli_usage_error(a, "no output file given (-o MODEL.h5)");
    if (rc == 0) {
        int64_t n[3];
        double t0 = sl_clock();
        rc = cli_fail(a, sl_build_to_file(a->ctx, &o, output, n));
        if (rc == 0) say_wrote(a, output, n[0], n[1], n[2], t0);
    }
    for (int k = 0; k < n_owned; k++) free(owned[k]);
    return rc;
}

static const char import_help[] =
    "usage: sluice import TRIPLETS.csv|- --discount G -o MODEL.h5 [options]\n"
    "  read rows 'state,action,next_state,probability,reward' (header required,\n"
    "  any order, one row per transition) and write the model file.\n"
    "  --discount G         discount factor (required)\n"
    "  --objective NAME     discounted (default), total, average or finite\n"
    "  --states N           number of states (default: largest index + 1)\n"
    "  --prob-tolerance T   allowed |sum of probabilities - 1| per pair (default 1e-9)\n"
    "  --renormalize        rescale pairs whose sum drifts by at most 1e-6 (reports how many)\n"
    "  --terminal-values F  finite objective: CSV 'state,terminal_value' (every state once),\n"
    "                       stored as /terminal_value and covered by the fingerprint\n";

static const char estimate_help[] =
    "usage: sluice estimate EXPERIENCE.csv|- --discount G -o MODEL.h5 [options]\n"
    "  estimate a model from logged steps 'state,action,reward,next_state':\n"
    "  P(j|s,a) = count(s,a,j)/count(s,a), r(s,a) = mean observed reward.\n"
    "  --discount G         discount factor (required)\n"
    "  --objective NAME     discounted (default), total, average or finite\n"
    "  --states N           number of states (default: largest index + 1)\n"
    "  --min-visits K       drop pairs seen fewer than K times (default 1)\n"
    "  --unseen absorb      states with no data become absorbing with reward 0\n"
    "                       (default: such a state is an error)\n"
    "  --smoothing A        add A pseudo-visits to every successor the state was seen\n"
    "                       to reach (additive smoothing; default 0: none)\n"
    "  The visits of every (state, action) are stored (/pair/visits); `sluice info`\n"
    "  lists thin pairs and `solve --visit-bonus/--visit-penalty` tests sensitivity.\n";

/* import and estimate share their options */
static int csv_command(cli_args *a, int estimate)
{
    const char *help = estimate ? estimate_help : import_help;
    const char *input = NULL, *output = NULL, *v, *terminal = NULL;
    double discount = -1, tol = 0, smoothing = 0;
    int have_discount = 0, renorm = 0, absorb = 0, rc = 0;
    int64_t states = 0, min_visits = 1;
    sl_objective obj = SL_OBJ_DISCOUNTED;
    while (a->i < a->argc && rc == 0) {
        int c = cli_common_opt(a, help);
        if (c < 0) return 0;
        if (c > 0) continue;
        if (cli_opt(a, "-o") || cli_opt(a, "--output")) {
            if ((output = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--discount")) {
            if ((v = cli_value(a)) == NULL || !cli_double(a, "--discount", v, &discount)) rc = SL_EUSAGE;
            have_discount = 1;
        } else if (cli_opt(a, "--objective")) {
            if (!parse_objective(a, &obj)) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--states")) {
            if ((v = cli_value(a)) == NULL || !cli_int64(a, "--states", v, &states)) rc = SL_EUSAGE;
            else if (states < 1) rc = cli_usage_error(a, "--states must be at least 1");
        } else if (!estimate && cli_opt(a, "--prob-tolerance")) {
            if ((v = cli_value(a)) == NULL || !cli_double(a, "--prob-tolerance", v, &tol)) rc = SL_EUSAGE;
        } else if (!estimate && cli_opt(a, "--terminal-values")) {
            if ((terminal = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else if (!estimate && cli_opt(a, "--renormalize")) {
            renorm = 1;
        } else if (estimate && cli_opt(a, "--min-visits")) {
            if ((v = cli_value(a)) == NULL || !cli_int64(a, "--min-visits", v, &min_visits)) rc = SL_EUSAGE;
            else if (min_visits < 1) rc = cli_usage_error(a, "--min-visits must be at least 1");
        } else if (estimate && cli_opt(a, "--smoothing")) {
            if ((v = cli_value(a)) == NULL || !cli_double(a, "--smoothing", v, &smoothing)) rc = SL_EUSAGE;
            else if (!(smoothing >= 0 && smoothing <= 1e6)) rc = cli_usage_error(a, "--smoothing must be in [0, 1e6]");
        } else if (estimate && cli_opt(a, "--unseen")) {
            if ((v = cli_value(a)) == NULL) rc = SL_EUSAGE;
            else if (strcmp(v, "absorb") == 0) absorb = 1;
            else if (strcmp(v, "error") == 0) absorb = 0;
            else rc = cli_usage_error(a, "--unseen: expected 'absorb' or 'error', got '%s'", v);
        } else {
            rc = cli_positional(a, (const char **[]){&input}, 1);
        }
    }
    if (rc) return rc;
    if (input == NULL) return cli_usage_error(a, "no input CSV given");
    if (output == NULL) return cli_usage_error(a, "no output file given (-o MODEL.h5)");
    if (!have_discount) return cli_usage_error(a, "--discount G is required");
    sl_model *m = NULL;
    double t0 = sl_clock();
    if (estimate) {
        sl_estimate_opts o = {input, discount, obj, states, min_visits, absorb, smoothing};
        rc = cli_fail(a, sl_model_estimate_csv(a->ctx, &o, &m));
    } else {
        sl_import_opts o = {input, discount, obj, states, tol, renorm, terminal};
        rc = cli_fail(a, sl_model_import_csv(a->ctx, &o, &m));
    }
    if (rc == 0) rc = save_model(a, m, output, t0);
    sl_model_free(&m);
    return rc;
}

int cmd_import(cli_args *a) { return csv_command(a, 0); }
int cmd_estimate(cli_args *a) { return csv_command(a, 1); }

static const char info_help[] =
    "usage: sluice info FILE.h5 [--json] [--partition N] [--thin-below K]\n"
    "       sluice info GENERATOR.c|GENERATOR.so\n"
    "  describe a model, solution, values or checkpoint file; or, before building,\n"
    "  a generator: its parameters with defaults, units and help, its factors,\n"
    "  actions and outcome quantities with the defaults.\n"
    "  --json          machine-readable output\n"
    "  --partition N   for a model: predicted rows, transitions, halo entries and\n"
    "                  bytes exchanged per sweep for each of N ranks\n"
    "  --thin-below K  for a model from `estimate`: list the (state, action) pairs\n"
    "                  seen fewer than K times (default 10)\n";

int cmd_info(cli_args *a)
{
    sl_info_opts o = {NULL, 0, 0, stdout, 0};
    int rc = 0;
    const char *v;
    while (a->i < a->argc && rc == 0) {
        int c = cli_common_opt(a, info_help);
        if (c < 0) return 0;
        if (c > 0) continue;
        if (cli_opt(a, "--json")) {
            o.json = 1;
        } else if (cli_opt(a, "--thin-below")) {
            if ((v = cli_value(a)) == NULL || !cli_int64(a, "--thin-below", v, &o.thin_below)) rc = SL_EUSAGE;
            else if (o.thin_below < 1) rc = cli_usage_error(a, "--thin-below: K must be at least 1");
        } else if (cli_opt(a, "--partition")) {
            int64_t n = 0;
            if ((v = cli_value(a)) == NULL || !cli_int64(a, "--partition", v, &n)) rc = SL_EUSAGE;
            else if (n < 1 || n > 1000000) rc = cli_usage_error(a, "--partition: N must be in [1, 1000000]");
            else o.partition = (int)n;
        } else {
            rc = cli_positional(a, (const char **[]){&o.path}, 1);
        }
    }
    if (rc) return rc;
    if (o.path == NULL) return cli_usage_error(a, "no file given");
    size_t len = strlen(o.path);
    if ((len > 2 && strcmp(o.path + len - 2, ".c") == 0) || (len > 3 && strcmp(o.path + len - 3, ".so") == 0)) {
        if (o.json || o.partition) return cli_usage_error(a, "--json and --partition apply to .h5 files only");
        return cli_fail(a, sl_generator_describe(a->ctx, o.path, stdout));
    }
    return cli_fail(a, sl_info(a->ctx, &o));
}
