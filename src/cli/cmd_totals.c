/* cmd_totals.c - the outcome-quantity part of `sluice evaluate`: expected
 * discounted totals of each quantity under the policy (and, with
 * --compare, under a second policy), summarised on stdout and written per
 * state to --totals FILE.csv. */
#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

#include "cli/cli.h"
#include "cli/cli_out.h"
#include "cli/cmd_totals.h"

typedef struct totals_csv {
    int64_t n;
    int nq, two;
    const sl_totals *t;
    const double *a, *b; /* [nq * n] gathered, quantity-major */
} totals_csv;

static void csv_cb(FILE *f, const void *arg)
{
    const totals_csv *c = arg;
    fprintf(f, "state");
    for (int q = 0; q < c->nq; q++) {
        fprintf(f, ",%s [%s]", c->t->name[q], c->t->unit[q]);
        if (c->two) fprintf(f, ",%s compared [%s],%s difference [%s]", c->t->name[q], c->t->unit[q], c->t->name[q],
                            c->t->unit[q]);
    }
    fprintf(f, "\n");
    for (int64_t s = 0; s < c->n; s++) {
        fprintf(f, "%lld", (long long)s);
        for (int q = 0; q < c->nq; q++) {
            double x = c->a[q * c->n + s];
            fprintf(f, ",%.15g", x);
            if (c->two) fprintf(f, ",%.15g,%.15g", c->b[q * c->n + s], x - c->b[q * c->n + s]);
        }
        fprintf(f, "\n");
    }
}

/* Gather a quantity-major local array to rank 0 ([nq * n] there). */
static int gather(const sl_totals *t, double **out)
{
    int size = 1, rank = 0;
    MPI_Comm_size(MPI_COMM_WORLD, &size);
    MPI_Comm_rank(MPI_COMM_WORLD, &rank);
    int *cnt = calloc((size_t)size, sizeof(int)), *dsp = calloc((size_t)size, sizeof(int)), bad = 0;
    double *all = rank == 0 ? malloc((size_t)(t->n_states > 0 ? t->n_states : 1) * (size_t)t->n_quantities * sizeof(double)) : NULL;
    int nl = (int)t->n_local;
    if (cnt == NULL || dsp == NULL || (rank == 0 && all == NULL)) bad = 1;
    MPI_Allreduce(MPI_IN_PLACE, &bad, 1, MPI_INT, MPI_MAX, MPI_COMM_WORLD);
    if (bad) {
        free(cnt);
        free(dsp);
        free(all);
        return SL_ENOMEM;
    }
    MPI_Gather(&nl, 1, MPI_INT, cnt, 1, MPI_INT, 0, MPI_COMM_WORLD);
    for (int p = 1; rank == 0 && p < size; p++) dsp[p] = dsp[p - 1] + cnt[p - 1];
    for (int q = 0; q < t->n_quantities; q++)
        MPI_Gatherv(t->total + (int64_t)q * t->n_local, nl, MPI_DOUBLE, all ? all + (int64_t)q * t->n_states : NULL,
                    cnt, dsp, MPI_DOUBLE, 0, MPI_COMM_WORLD);
    free(cnt);
    free(dsp);
    *out = all;
    return 0;
}

int cli_quantity_totals(cli_args *a, sl_solver *s, const sl_model *m, const sl_solution *pol, const char *model_path,
                        const char *policy_path, const char *compare_path, const char *csv_path)
{
    sl_totals ta, tb;
    sl_solution *other = NULL;
    double *ga = NULL, *gb = NULL;
    memset(&ta, 0, sizeof(ta));
    memset(&tb, 0, sizeof(tb));
    int rc = cli_fail(a, sl_quantity_totals(s, m, pol, model_path, &ta));
    if (rc == 0 && ta.n_quantities == 0 && (csv_path || compare_path)) {
        if (sl_ctx_rank(a->ctx) == 0)
            fprintf(stderr, "sluice evaluate: %s has no outcome quantities (a format 1 model, or a generator that "
                            "declares none): --totals and --compare need them\n", model_path);
        rc = SL_EUSAGE;
    }
    if (rc == 0 && compare_path) {
        /* a rule operated today, as a CSV of actions by state labels, or a solution file */
        rc = cli_fail(a, sl_policy_load(a->ctx, compare_path, m, &other));
        if (rc == 0) rc = cli_fail(a, sl_quantity_totals(s, m, other, model_path, &tb));
    }
    if (rc == 0 && ta.n_quantities > 0) {
        rc = gather(&ta, &ga);
        if (rc == 0 && compare_path) rc = gather(&tb, &gb);
    }
    if (rc == 0 && ta.n_quantities > 0 && sl_ctx_rank(a->ctx) == 0) {
        int64_t n = ta.n_states;
        printf("expected discounted totals of the outcome quantities under the policy in %s (%s evaluation; "
               "discounted per %s):\n", policy_path, ta.method, ta.period_unit[0] ? ta.period_unit : "period");
        printf("  %-16s %-10s %14s %14s %14s %12s", "quantity", "unit", "mean of states", "min", "max", "certified");
        if (compare_path) printf(" %16s %16s", "mean compared", "mean difference");
        printf("\n");
        for (int q = 0; q < ta.n_quantities; q++) {
            double sum = 0, lo = INFINITY, hi = -INFINITY, sb = 0;
            for (int64_t k = 0; k < n; k++) {
                double x = ga[q * n + k];
                sum += x;
                lo = fmin(lo, x);
                hi = fmax(hi, x);
                if (gb) sb += gb[q * n + k];
            }
            printf("  %-16s %-10s %14.6g %14.6g %14.6g %12.2e", ta.name[q], ta.unit[q], sum / (double)n, lo, hi,
                   ta.error_bound[q]);
            if (gb) printf(" %16.6g %16.6g", sb / (double)n, (sum - sb) / (double)n);
            printf("\n");
        }
        if (compare_path) printf("  (compared: the policy in %s; difference = this policy - compared)\n", compare_path);
        printf("Results support, never replace, licensed engineering judgement and local regulations.\n");
        if (csv_path) {
            totals_csv c = {n, ta.n_quantities, compare_path != NULL, &ta, ga, gb};
            rc = cli_write_atomic("evaluate", csv_path, csv_cb, &c);
        }
    }
    MPI_Bcast(&rc, 1, MPI_INT, 0, MPI_COMM_WORLD);
    free(ga);
    free(gb);
    sl_totals_free(&ta);
    sl_totals_free(&tb);
    sl_solution_free(&other);
    return rc;
}
