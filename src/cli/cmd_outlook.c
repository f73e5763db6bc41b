/* cmd_outlook.c - `sluice outlook`: print the exact forward distribution
 * under a policy (computed by sl_outlook_compute) as text, CSV or JSON. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "cli/cli.h"
#include "cli/cli_out.h"

static const char outlook_help[] =
    "usage: sluice outlook MODEL.h5 SOLUTION.h5|--policy RULE.csv --start STATE|NAME=VALUE,... --stages N\n"
    "                      [--start-distribution FILE.csv] [--json] [-o FILE]\n"
    "  what the policy will do: the state distribution propagated exactly (no sampling)\n"
    "  for N stages; per stage, each numeric factor's mean and 5/25/50/75/95% quantiles,\n"
    "  each outcome quantity's expected value and probability of being positive, and the\n"
    "  expected discounted reward so far.\n"
    "  --start S                 a state number, or every factor as NAME=VALUE / NAME@INDEX,\n"
    "                            comma-separated (storage=600,inflow@2,month=Jan)\n"
    "  --start-distribution F    CSV 'state,probability' or '<factor names>,probability'\n"
    "  --policy P                the policy: a solution file, or a rule operated today as a CSV\n"
    "                            of actions by state (as evaluate --compare reads)\n"
    "  --json                    one JSON document (to stdout, or to -o FILE)\n"
    "  -o FILE                   write CSV (or JSON with --json) atomically; '-' for stdout\n"
    "Results support, never replace, licensed engineering judgement and local regulations.\n";

static const char *stat_name[SL_OUTLOOK_NQ] = {"mean", "p5", "p25", "p50", "p75", "p95"};

static void write_json(FILE *f, const void *arg)
{
    const sl_outlook *r = arg;
    fprintf(f, "{\n  \"caution\": \"Results support, never replace, licensed engineering judgement and local "
               "regulations.\",\n");
    fprintf(f, "  \"discount\": %.17g,\n", r->discount);
    if (isnan(r->start_value)) fprintf(f, "  \"start_value\": null,\n"); /* a rule CSV has no values */
    else fprintf(f, "  \"start_value\": %.17g,\n", r->start_value);
    fprintf(f, "  \"seconds\": %.6g,\n", r->seconds);
    fprintf(f, "  \"units\": {\"reward\": \"%s\", \"period\": \"%s\", \"factors\": {", r->reward_unit, r->period_unit);
    for (int k = 0; k < r->n_factors; k++)
        fprintf(f, "%s\"%s\": \"%s\"", k ? ", " : "", r->factor_name[k], r->factor_unit[k]);
    fprintf(f, "}, \"quantities\": {");
    for (int q = 0; q < r->n_quantities; q++)
        fprintf(f, "%s\"%s\": \"%s\"", q ? ", " : "", r->quantity_name[q], r->quantity_unit[q]);
    fprintf(f, "}},\n  \"stages\": [\n");
    for (int64_t t = 0; t <= r->n_stages; t++) {
        fprintf(f, "    {\"stage\": %lld, \"mass\": %.17g, \"factors\": {", (long long)t, r->mass[t]);
        for (int k = 0; k < r->n_factors; k++) {
            const double *s = r->factor_stats + (t * r->n_factors + k) * SL_OUTLOOK_NQ;
            fprintf(f, "%s\"%s\": {", k ? ", " : "", r->factor_name[k]);
            for (int i = 0; i < SL_OUTLOOK_NQ; i++) fprintf(f, "%s\"%s\": %.17g", i ? ", " : "", stat_name[i], s[i]);
            fprintf(f, "}");
        }
        fprintf(f, "}, \"quantities\": {");
        for (int q = 0; q < r->n_quantities; q++) {
            const double *s = r->quantity_stats + (t * r->n_quantities + q) * 2;
            fprintf(f, "%s\"%s\": {\"mean\": %.17g, \"p_positive\": %.17g}", q ? ", " : "", r->quantity_name[q], s[0],
                    s[1]);
        }
        fprintf(f, "}, \"discounted_reward\": %.17g}%s\n", r->discounted_reward[t], t < r->n_stages ? "," : "");
    }
    fprintf(f, "  ]\n}\n");
}

/* One CSV column name, NAME_WHAT [unit] (no brackets without a unit): a
 * factor and a quantity of the same name (the reservoir's inflow) differ by
 * their unit, as in simulate's per-stage CSV. */
static void csv_column(FILE *f, const char *name, const char *what, const char *unit)
{
    fprintf(f, ",%s%s%s%s%s%s", name, what[0] ? "_" : "", what, unit[0] ? " [" : "", unit, unit[0] ? "]" : "");
}

static void write_csv(FILE *f, const void *arg)
{
    const sl_outlook *r = arg;
    fprintf(f, "stage");
    for (int k = 0; k < r->n_factors; k++)
        for (int i = 0; i < SL_OUTLOOK_NQ; i++) csv_column(f, r->factor_name[k], stat_name[i], r->factor_unit[k]);
    for (int q = 0; q < r->n_quantities; q++) {
        csv_column(f, r->quantity_name[q], "mean", r->quantity_unit[q]);
        csv_column(f, r->quantity_name[q], "p_positive", "");
    }
    csv_column(f, "discounted_reward", "", r->reward_unit);
    fprintf(f, ",mass\n");
    for (int64_t t = 0; t <= r->n_stages; t++) {
        fprintf(f, "%lld", (long long)t);
        for (int k = 0; k < r->n_factors; k++)
            for (int i = 0; i < SL_OUTLOOK_NQ; i++)
                fprintf(f, ",%.15g", r->factor_stats[(t * r->n_factors + k) * SL_OUTLOOK_NQ + i]);
        for (int q = 0; q < r->n_quantities; q++)
            fprintf(f, ",%.15g,%.15g", r->quantity_stats[(t * r->n_quantities + q) * 2],
                    r->quantity_stats[(t * r->n_quantities + q) * 2 + 1]);
        fprintf(f, ",%.15g,%.17g\n", r->discounted_reward[t], r->mass[t]);
    }
}

static void write_text(FILE *f, const sl_outlook *r, const sl_outlook_opts *o)
{
    fprintf(f, "outlook of %s under %s from %s, %lld stages (one stage = one %s); exact, no sampling\n", o->model,
            o->solution, o->start ? o->start : o->start_distribution, (long long)r->n_stages,
            r->period_unit[0] ? r->period_unit : "period");
    fprintf(f, "%6s", "stage");
    for (int k = 0; k < r->n_factors; k++) {
        char h[160];
        snprintf(h, sizeof(h), "%s [%s] mean (p5..p95)", r->factor_name[k], r->factor_unit[k]);
        fprintf(f, "  %-34s", h);
    }
    for (int q = 0; q < r->n_quantities; q++) {
        char h[160];
        snprintf(h, sizeof(h), "%s [%s] (P>0)", r->quantity_name[q], r->quantity_unit[q]);
        fprintf(f, "  %-22s", h);
    }
    fprintf(f, "  discounted reward so far [%s]\n", r->reward_unit);
    for (int64_t t = 0; t <= r->n_stages; t++) {
        fprintf(f, "%6lld", (long long)t);
        for (int k = 0; k < r->n_factors; k++) {
            const double *s = r->factor_stats + (t * r->n_factors + k) * SL_OUTLOOK_NQ;
            char c[160];
            snprintf(c, sizeof(c), "%.5g (%.4g..%.4g)", s[0], s[1], s[5]);
            fprintf(f, "  %-34s", c);
        }
        for (int q = 0; q < r->n_quantities; q++) {
            const double *s = r->quantity_stats + (t * r->n_quantities + q) * 2;
            char c[160];
            snprintf(c, sizeof(c), "%.5g (%.3f)", s[0], s[1]);
            fprintf(f, "  %-22s", c);
        }
        fprintf(f, "  %.8g\n", r->discounted_reward[t]);
    }
    if (isnan(r->start_value))
        fprintf(f, "value of the start: none (%s is a rule CSV, which has no values; the discounted reward so far "
                   "approaches the rule's value)\n", o->solution);
    else fprintf(f, "value of the start in the solution: %.8g %s\n", r->start_value, r->reward_unit);
    fprintf(f, "Results support, never replace, licensed engineering judgement and local regulations.\n");
}

int cmd_outlook(cli_args *a)
{
    sl_outlook_opts o;
    const char *out = NULL, *v;
    int json = 0, rc = 0, have_stages = 0;
    memset(&o, 0, sizeof(o));
    while (a->i < a->argc && rc == 0) {
        int c = cli_common_opt(a, outlook_help);
        if (c < 0) return 0;
        if (c > 0) continue;
        if (cli_opt(a, "--start")) {
            if ((o.start = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--start-distribution")) {
            if ((o.start_distribution = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--stages")) {
            if ((v = cli_value(a)) == NULL || !cli_int64(a, "--stages", v, &o.stages)) rc = SL_EUSAGE;
            have_stages = 1;
        } else if (cli_opt(a, "--policy")) {
            rc = cli_policy_opt(a, &o.solution);
        } else if (cli_opt(a, "--json")) {
            json = 1;
        } else if (cli_opt(a, "-o") || cli_opt(a, "--output")) {
            if ((out = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else {
            rc = cli_positional(a, (const char **[]){&o.model, &o.solution}, 2);
        }
    }
    if (rc) return rc;
    if (o.model == NULL || o.solution == NULL)
        return cli_usage_error(a, "need MODEL.h5 and a policy (SOLUTION.h5, or --policy RULE.csv)");
    if (!have_stages) return cli_usage_error(a, "--stages N is required");
    if (o.stages < 0) return cli_usage_error(a, "--stages must be at least 0");
    if ((o.start == NULL) == (o.start_distribution == NULL))
        return cli_usage_error(a, "give exactly one of --start and --start-distribution");
    sl_outlook r;
    sl_status st = sl_outlook_compute(a->ctx, &o, &r);
    if (st != SL_OK) return cli_fail(a, st);
    if (sl_ctx_rank(a->ctx) == 0) {
        void (*fn)(FILE *, const void *) = json ? write_json : write_csv;
        if (out == NULL && !json) write_text(stdout, &r, &o);
        else if (out == NULL || strcmp(out, "-") == 0) fn(stdout, &r);
        else rc = cli_write_atomic("outlook", out, fn, &r);
    }
    MPI_Bcast(&rc, 1, MPI_INT, 0, MPI_COMM_WORLD);
    sl_outlook_free(&r);
    return rc;
}
