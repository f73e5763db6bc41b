/* export.c - `sluice export`: policy and values as CSV, one row per state. */
#include <errno.h>
#include <stdlib.h>
#include <string.h>

#include "cli/cli.h"
#include "sluice/generator.h"

static const char export_help[] =
    "usage: sluice export SOLUTION.h5 --model MODEL.h5 -o FILE.csv|-\n"
    "  one CSV row per state: state; per factor its index (NAME@) and, when the model\n"
    "  gives them, its label or value (NAME [unit]); action id, action name, action\n"
    "  value [unit] when actions have values; value [reward unit].\n";

static int write_csv(cli_args *a, const char *output, const sl_model *m, const double *v, const int32_t *act)
{
    int to_stdout = strcmp(output, "-") == 0;
    char tmp[4200];
    snprintf(tmp, sizeof(tmp), "%s.partial", output);
    FILE *f = to_stdout ? stdout : fopen(tmp, "w");
    if (f == NULL) {
        fprintf(stderr, "sluice %s: %s: cannot create: %s\n", a->cmd, output, strerror(errno));
        return SL_ECANTCREAT;
    }
    /* header: each factor's index as NAME@ and, when it has values or
     * labels, NAME [unit] with them; the action's value with its unit; the
     * value with the reward unit (docs/results.md) */
    int nf = sl_model_n_factors(m);
    int has_av = sl_model_action_value(m, 0, NULL);
    const char *ru = sl_model_reward_unit(m), *au = sl_model_action_unit(m);
    fprintf(f, "state");
    for (int k = 0; k < nf; k++) {
        const char *u = sl_model_factor_unit(m, k);
        fprintf(f, ",%s@", sl_model_factor_name(m, k));
        if (sl_model_factor_value(m, k, 0, NULL) || sl_model_factor_label(m, k, 0)[0])
            fprintf(f, ",%s%s%s%s", sl_model_factor_name(m, k), u[0] ? " [" : "", u, u[0] ? "]" : "");
    }
    fprintf(f, ",action,action_name");
    if (has_av) fprintf(f, ",action_value%s%s%s", au[0] ? " [" : "", au, au[0] ? "]" : "");
    fprintf(f, ",value%s%s%s\n", ru[0] ? " [" : "", ru, ru[0] ? "]" : "");
    int64_t fv[SLUICE_MAX_FACTORS];
    for (int64_t s = 0; s < sl_model_n_states(m); s++) {
        sl_model_decode_state(m, s, fv);
        fprintf(f, "%lld", (long long)s);
        for (int k = 0; k < nf; k++) {
            double x;
            const char *lab = sl_model_factor_label(m, k, fv[k]);
            fprintf(f, ",%lld", (long long)fv[k]);
            if (lab[0]) fprintf(f, ",%s", lab);
            else if (sl_model_factor_value(m, k, fv[k], &x)) fprintf(f, ",%.15g", x);
        }
        fprintf(f, ",%d,%s", (int)act[s], sl_model_action_name(m, act[s]));
        double av;
        if (has_av) {
            if (sl_model_action_value(m, act[s], &av)) fprintf(f, ",%.15g", av);
            else fprintf(f, ",");
        }
        fprintf(f, ",%.17g\n", v[s]);
    }
    int bad = ferror(f) != 0;
    if (to_stdout) bad |= fflush(f) != 0;
    else bad |= fclose(f) != 0;
    int rc = 0;
    if (bad) {
        fprintf(stderr, "sluice %s: %s: write failed\n", a->cmd, output);
        rc = SL_EIO;
    }
    if (!to_stdout) {
        if (rc == 0 && rename(tmp, output) != 0) {
            fprintf(stderr, "sluice %s: %s: cannot rename into place: %s\n", a->cmd, output, strerror(errno));
            rc = SL_ECANTCREAT;
        }
        if (rc != 0) remove(tmp);
    }
    return rc;
}

int cmd_export(cli_args *a)
{
    const char *solution = NULL, *model = NULL, *output = NULL;
    int rc = 0;
    while (a->i < a->argc && rc == 0) {
        int c = cli_common_opt(a, export_help);
        if (c < 0) return 0;
        if (c > 0) continue;
        if (cli_opt(a, "-o") || cli_opt(a, "--output")) {
            if ((output = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--model")) {
            if ((model = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else {
            rc = cli_positional(a, (const char **[]){&solution}, 1);
        }
    }
    if (rc) return rc;
    if (solution == NULL) return cli_usage_error(a, "no solution file given");
    if (model == NULL) return cli_usage_error(a, "no model given (--model MODEL.h5)");
    if (output == NULL) return cli_usage_error(a, "no output given (-o FILE.csv, or - for stdout)");

    sl_ctx *ctx = a->ctx;
    sl_model *m = NULL;
    sl_solution *x = NULL;
    double *v = NULL;
    int32_t *act = NULL;
    rc = cli_fail(a, sl_model_load(ctx, model, &m));
    if (rc == 0) rc = cli_fail(a, sl_solution_load(ctx, solution, m, &x));
    if (rc == 0) rc = cli_fail(a, sl_solution_gather(x, 0, &v, &act));
    if (rc == 0 && sl_ctx_rank(ctx) == 0) rc = write_csv(a, output, m, v, act);
    /* every rank returns rank 0's outcome */
    MPI_Bcast(&rc, 1, MPI_INT, 0, MPI_COMM_WORLD);
    free(v);
    free(act);
    sl_solution_free(&x);
    sl_model_free(&m);
    return rc;
}
