/* cmd_table.c - `sluice table`: print a two-factor table of a solution
 * (computed by sl_table_compute) aligned on the terminal or as CSV. */
#include <stdlib.h>
#include <string.h>

#include "cli/cli.h"
#include "cli/cli_out.h"

static const char table_help[] =
    "usage: sluice table SOLUTION.h5|RULE.csv --model MODEL.h5 --rows FACTOR --cols FACTOR\n"
    "                    [--fix NAME=VALUE|NAME@INDEX]... [--show WHAT] [-o FILE.csv|-]\n"
    "  a table of the solution over two factors, every other factor fixed. SOLUTION may\n"
    "  also be a rule operated today as RULE.csv (actions by state, as evaluate --compare\n"
    "  reads): its actions, quantities and switches (a rule has no values).\n"
    "  --show action            the policy's action, in the action's unit (default)\n"
    "         value             the value, in reward units\n"
    "         marginal:FACTOR   marginal value of one unit of a numeric factor: central\n"
    "                           differences of the value along FACTOR over the step of\n"
    "                           its values (one-sided at the ends); e.g. marginal:storage\n"
    "                           is the water value in reward units per hm3\n"
    "         QUANTITY          expected one-period outcome quantity under the policy\n"
    "         switch            per column, the row values where the chosen action changes\n"
    "  --fix NAME=VALUE         a factor value by label or value as printed (month=Jan,\n"
    "                           inflow=140); NAME@INDEX by index (inflow@2)\n"
    "  -o FILE.csv              write CSV (first row: row factor and unit, then the column\n"
    "                           labels; then one row per row label); '-' for stdout\n"
    "Results support, never replace, licensed engineering judgement and local regulations.\n";

static void fmt_cell(const sl_table *t, int64_t k, char *buf, size_t n, int csv)
{
    if (t->show == SL_SHOW_ACTION) {
        int32_t a = t->action[k];
        snprintf(buf, n, "%s", a >= 0 && a < t->n_actions ? t->action_label[a] : "?");
    } else {
        snprintf(buf, n, csv ? "%.15g" : "%.6g", t->cell[k]);
    }
}

/* CSV field, quoted when it holds a comma or quote. */
static void csv_field(FILE *f, const char *s)
{
    if (strpbrk(s, ",\"\n") == NULL) {
        fputs(s, f);
        return;
    }
    fputc('"', f);
    for (; *s; s++) {
        if (*s == '"') fputc('"', f);
        fputc(*s, f);
    }
    fputc('"', f);
}

static void head(char *buf, size_t n, const char *name, const char *unit)
{
    if (unit[0]) snprintf(buf, n, "%s [%s]", name, unit);
    else snprintf(buf, n, "%s", name);
}

static const char *alabel(const sl_table *t, int32_t a)
{
    return a >= 0 && a < t->n_actions ? t->action_label[a] : "?";
}

static void write_csv(FILE *f, const sl_table *t)
{
    char buf[256];
    if (t->show == SL_SHOW_SWITCH) {
        char rh[160], ah[160];
        head(rh, sizeof(rh), t->row_name, t->row_unit);
        head(ah, sizeof(ah), "action", t->unit);
        csv_field(f, t->col_name);
        fprintf(f, ",");
        snprintf(buf, sizeof(buf), "%s below", rh);
        csv_field(f, buf);
        fprintf(f, ",");
        snprintf(buf, sizeof(buf), "%s at", rh);
        csv_field(f, buf);
        fprintf(f, ",");
        snprintf(buf, sizeof(buf), "%s below", ah);
        csv_field(f, buf);
        fprintf(f, ",");
        snprintf(buf, sizeof(buf), "%s at", ah);
        csv_field(f, buf);
        fprintf(f, "\n");
        for (int64_t k = 0; k < t->n_switches; k++) {
            const sl_table_switch *w = &t->switches[k];
            csv_field(f, t->col_label[w->col]);
            fprintf(f, ",");
            csv_field(f, t->row_label[w->row - 1]);
            fprintf(f, ",");
            csv_field(f, t->row_label[w->row]);
            fprintf(f, ",");
            csv_field(f, alabel(t, w->from));
            fprintf(f, ",");
            csv_field(f, alabel(t, w->to));
            fprintf(f, "\n");
        }
        return;
    }
    head(buf, sizeof(buf), t->row_name, t->row_unit);
    csv_field(f, buf);
    for (int64_t c = 0; c < t->n_cols; c++) {
        fprintf(f, ",");
        csv_field(f, t->col_label[c]);
    }
    fprintf(f, "\n");
    for (int64_t r = 0; r < t->n_rows; r++) {
        csv_field(f, t->row_label[r]);
        for (int64_t c = 0; c < t->n_cols; c++) {
            fmt_cell(t, r * t->n_cols + c, buf, sizeof(buf), 1);
            fprintf(f, ",");
            csv_field(f, buf);
        }
        fprintf(f, "\n");
    }
}

static void write_text(FILE *f, const sl_table *t, const char *solution, const char *model)
{
    char buf[512], rh[200];
    fprintf(f, "%s%s%s%s of %s (model %s)\n", t->what, t->unit[0] ? " [" : "", t->unit, t->unit[0] ? "]" : "",
            solution, model);
    if (t->fixed[0]) fprintf(f, "fixed: %s\n", t->fixed);
    head(rh, sizeof(rh), t->row_name, t->row_unit);
    if (t->show == SL_SHOW_SWITCH) {
        fprintf(f, "down %s, per %s%s%s:\n", rh, t->col_name, t->col_unit[0] ? " " : "", t->col_unit);
        for (int64_t c = 0; c < t->n_cols; c++) {
            fprintf(f, "  %-10s", t->col_label[c]);
            int any = 0;
            for (int64_t k = 0; k < t->n_switches; k++) {
                const sl_table_switch *w = &t->switches[k];
                if (w->col != c) continue;
                fprintf(f, "%s%s -> %s from %s %s", any ? "; " : " ", alabel(t, w->from), alabel(t, w->to),
                        t->row_name, t->row_label[w->row]);
                any = 1;
            }
            fprintf(f, "%s\n", any ? "" : " no change");
        }
    } else {
        snprintf(buf, sizeof(buf), "%s \\ %s", rh, t->col_name);
        int w0 = (int)strlen(buf), w = 6;
        for (int64_t r = 0; r < t->n_rows; r++)
            if ((int)strlen(t->row_label[r]) > w0) w0 = (int)strlen(t->row_label[r]);
        for (int64_t c = 0; c < t->n_cols; c++)
            if ((int)strlen(t->col_label[c]) > w) w = (int)strlen(t->col_label[c]);
        for (int64_t k = 0; k < t->n_rows * t->n_cols; k++) {
            char cb[64];
            fmt_cell(t, k, cb, sizeof(cb), 0);
            if ((int)strlen(cb) > w) w = (int)strlen(cb);
        }
        fprintf(f, "%-*s", w0, buf);
        for (int64_t c = 0; c < t->n_cols; c++) fprintf(f, " %*s", w, t->col_label[c]);
        fprintf(f, "\n");
        for (int64_t r = 0; r < t->n_rows; r++) {
            fprintf(f, "%-*s", w0, t->row_label[r]);
            for (int64_t c = 0; c < t->n_cols; c++) {
                char cb[64];
                fmt_cell(t, r * t->n_cols + c, cb, sizeof(cb), 0);
                fprintf(f, " %*s", w, cb);
            }
            fprintf(f, "\n");
        }
    }
    fprintf(f, "Results support, never replace, licensed engineering judgement and local regulations.\n");
}

static void csv_cb(FILE *f, const void *t) { write_csv(f, (const sl_table *)t); }

int cmd_table(cli_args *a)
{
    sl_table_opts o;
    const char *out = NULL, *v;
    const char **fix = NULL;
    int rc = 0;
    memset(&o, 0, sizeof(o));
    fix = calloc((size_t)a->argc, sizeof(*fix));
    if (fix == NULL) return cli_fail(a, SL_ENOMEM);
    while (a->i < a->argc && rc == 0) {
        int c = cli_common_opt(a, table_help);
        if (c < 0) {
            free(fix);
            return 0;
        }
        if (c > 0) continue;
        if (cli_opt(a, "--model")) {
            if ((o.model = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--rows")) {
            if ((o.rows = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--cols")) {
            if ((o.cols = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--fix")) {
            if ((v = cli_value(a)) == NULL) rc = SL_EUSAGE;
            else fix[o.n_fix++] = v;
        } else if (cli_opt(a, "--show")) {
            if ((o.show = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else if (cli_opt(a, "-o") || cli_opt(a, "--output")) {
            if ((out = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else {
            rc = cli_positional(a, (const char **[]){&o.solution}, 1);
        }
    }
    if (rc == 0 && o.solution == NULL) rc = cli_usage_error(a, "no solution file given");
    if (rc == 0 && o.model == NULL) rc = cli_usage_error(a, "--model MODEL.h5 is required");
    if (rc == 0 && (o.rows == NULL || o.cols == NULL)) rc = cli_usage_error(a, "--rows and --cols are required");
    if (rc) {
        free(fix);
        return rc;
    }
    o.fix = fix;
    sl_table t;
    sl_status st = sl_table_compute(a->ctx, &o, &t);
    free(fix);
    if (st != SL_OK) return cli_fail(a, st);
    if (sl_ctx_rank(a->ctx) == 0) {
        if (out == NULL) write_text(stdout, &t, o.solution, o.model);
        else if (strcmp(out, "-") == 0) write_csv(stdout, &t);
        else rc = cli_write_atomic("table", out, csv_cb, &t);
    }
    MPI_Bcast(&rc, 1, MPI_INT, 0, MPI_COMM_WORLD);
    sl_table_free(&t);
    return rc;
}
