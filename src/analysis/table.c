/* table.c - two-factor tables of a solution: the action, the value, the
 * marginal value along a numeric factor (e.g. the water value), expected
 * outcome quantities, and where the chosen action switches. */
#include <math.h>
#include <string.h>

#include "analysis/analysis.h"

void sl_table_free(sl_table *t)
{
    if (t == NULL) return;
    free(t->row_label);
    free(t->col_label);
    free(t->cell);
    free(t->action);
    free(t->action_label);
    free(t->switches);
    memset(t, 0, sizeof(*t));
}

static void append(char *buf, size_t n, const char *s) { strncat(buf, s, n - strlen(buf) - 1); }

/* "name [unit]" pieces of the header. */
static void factor_unit(const sl_meta *m, int f, char *out)
{
    snprintf(out, SL_LABEL_MAX, "%s", m->factor_value[f] && !m->factor_label[f] ? m->factor_unit[f] : "");
}

/* Parse --show into kind, marginal factor or quantity index. Local. */
static sl_status parse_show(sl_ctx *ctx, const sl_meta *m, const char *show, sl_table_show *kind, int *arg)
{
    char list[1024] = "";
    *arg = -1;
    if (show == NULL || strcmp(show, "action") == 0) {
        *kind = SL_SHOW_ACTION;
    } else if (strcmp(show, "value") == 0) {
        *kind = SL_SHOW_VALUE;
    } else if (strcmp(show, "switch") == 0) {
        *kind = SL_SHOW_SWITCH;
    } else if (strncmp(show, "marginal:", 9) == 0) {
        const char *fn = show + 9;
        int f = sl_meta_factor_index(m, fn);
        if (f < 0) {
            for (int i = 0; i < m->n_factors; i++) {
                append(list, sizeof(list), i ? ", " : "");
                append(list, sizeof(list), m->factor_name[i]);
            }
            return SL_ERR(ctx, SL_EUSAGE, "--show %s: the model has no factor '%s' (factors: %s)", show, fn,
                          m->n_factors ? list : "none");
        }
        if (m->factor_value[f] == NULL)
            return SL_ERR(ctx, SL_EUSAGE,
                          "--show %s: factor %s has no numeric values in the model, so it has no marginal value%s", show,
                          fn, m->factor_label[f] ? " (it has labels only)" : "");
        if (m->factor_size[f] < 2)
            return SL_ERR(ctx, SL_EUSAGE, "--show %s: factor %s has a single value", show, fn);
        for (int64_t i = 1; i < m->factor_size[f]; i++)
            if (!(m->factor_value[f][i] != m->factor_value[f][i - 1]))
                return SL_ERR(ctx, SL_EDATA, "--show %s: factor %s has equal values at indices %lld and %lld", show, fn,
                              (long long)i - 1, (long long)i);
        *kind = SL_SHOW_MARGINAL;
        *arg = f;
    } else {
        int q = sl_meta_quantity_index(m, show);
        if (q < 0) {
            for (int i = 0; i < m->n_quantities; i++) {
                append(list, sizeof(list), ", ");
                append(list, sizeof(list), m->quantity_name[i]);
            }
            if (m->n_quantities == 0)
                return SL_ERR(ctx, SL_EUSAGE,
                              "--show %s: not action, value, switch or marginal:FACTOR, and the model has no outcome "
                              "quantities (format %d; quantities need a generator of ABI 2)",
                              show, m->format_version);
            return SL_ERR(ctx, SL_EUSAGE, "--show %s: unknown; choose action, value, switch, marginal:FACTOR%s", show,
                          list);
        }
        *kind = SL_SHOW_QUANTITY;
        *arg = q;
    }
    return SL_OK;
}

sl_status sl_table_compute(sl_ctx *ctx, const sl_table_opts *o, sl_table *t)
{
    sl_status st = SL_OK;
    sl_pview pv;
    int64_t *states = NULL;
    double *val = NULL, *qm = NULL;
    int32_t *act = NULL;
    memset(t, 0, sizeof(*t));
    memset(&pv, 0, sizeof(pv));
    sl_meta mm;
    memset(&mm, 0, sizeof(mm));
    /* options that need only the metadata are checked before any data is read */
    SL_TRY(sl_store_model_meta(ctx, o->model, &mm));
    const sl_meta *m = &mm;
    int rf = -1, cf = -1, arg = -1;
    int64_t fixed_idx[SLUICE_MAX_FACTORS];
    int is_fixed[SLUICE_MAX_FACTORS] = {0};
    sl_table_show kind = SL_SHOW_ACTION;
    if (m->n_factors < 2)
        st = SL_ERR(ctx, SL_EUSAGE, "%s: a table needs a model with at least two named factors (it has %d)", o->model,
                    m->n_factors);
    if (st == SL_OK && (o->rows == NULL || o->cols == NULL))
        st = SL_ERR(ctx, SL_EUSAGE, "--rows FACTOR and --cols FACTOR are required");
    if (st == SL_OK && (rf = sl_meta_factor_index(m, o->rows)) < 0)
        st = SL_ERR(ctx, SL_EUSAGE, "--rows %s: the model %s has no such factor", o->rows, o->model);
    if (st == SL_OK && (cf = sl_meta_factor_index(m, o->cols)) < 0)
        st = SL_ERR(ctx, SL_EUSAGE, "--cols %s: the model %s has no such factor", o->cols, o->model);
    if (st == SL_OK && rf == cf) st = SL_ERR(ctx, SL_EUSAGE, "--rows and --cols name the same factor %s", o->rows);
    for (int k = 0; st == SL_OK && k < o->n_fix; k++) {
        int f;
        int64_t i;
        st = sl_factor_parse(ctx, m, o->fix[k], "--fix", &f, &i);
        if (st != SL_OK) break;
        if (f == rf || f == cf)
            st = SL_ERR(ctx, SL_EUSAGE, "--fix %s: factor %s is already the %s factor", o->fix[k], m->factor_name[f],
                        f == rf ? "row" : "column");
        else if (is_fixed[f])
            st = SL_ERR(ctx, SL_EUSAGE, "--fix %s: factor %s is fixed twice", o->fix[k], m->factor_name[f]);
        is_fixed[f] = 1;
        fixed_idx[f] = i;
    }
    for (int f = 0; st == SL_OK && f < m->n_factors; f++)
        if (f != rf && f != cf && !is_fixed[f])
            st = SL_ERR(ctx, SL_EUSAGE, "factor %s must be fixed: add --fix %s=VALUE or --fix %s@INDEX",
                        m->factor_name[f], m->factor_name[f], m->factor_name[f]);
    if (st == SL_OK) st = parse_show(ctx, m, o->show, &kind, &arg);
    SL_TRY(sl_agree(ctx, st));

    SL_TRY(sl_pview_load(ctx, o->model, o->solution, kind == SL_SHOW_QUANTITY, 0, &pv));
    if (pv.is_rule && (kind == SL_SHOW_VALUE || kind == SL_SHOW_MARGINAL))
        SL_TRY(sl_agree(ctx, SL_ERR(ctx, SL_EUSAGE, "--show %s: %s is a rule CSV, which has no values (evaluate it "
                                                    "first: sluice evaluate --policy %s -o VALUES.h5)",
                                    o->show, o->solution, o->solution)));
    int64_t R = m->factor_size[rf], C = m->factor_size[cf], n = R * C;
    if (n > (int64_t)1 << 24)
        SL_TRY(sl_agree(ctx, SL_ERR(ctx, SL_EUSAGE, "the table would have %lld cells (at most 2^24)", (long long)n)));
    t->show = kind;
    t->n_rows = R;
    t->n_cols = C;
    int32_t na = m->n_action_values > m->n_action_names ? m->n_action_values : m->n_action_names;
    for (int64_t i = 0; i < pv.n_local; i++)
        if (pv.action[i] >= na) na = pv.action[i] + 1;
    MPI_Allreduce(MPI_IN_PLACE, &na, 1, MPI_INT32_T, MPI_MAX, ctx->comm);
    t->n_actions = na;
    int span = kind == SL_SHOW_MARGINAL ? 3 : 1;
    if (SL_ZALLOC(ctx, t->row_label, R, "table") == NULL || SL_ZALLOC(ctx, t->col_label, C, "table") == NULL ||
        SL_ALLOC(ctx, t->cell, n, "table") == NULL || SL_ALLOC(ctx, t->action, n, "table") == NULL ||
        SL_ZALLOC(ctx, t->action_label, na, "table") == NULL || SL_ALLOC(ctx, states, n * span, "table") == NULL ||
        SL_ALLOC(ctx, val, n * span, "table") == NULL || SL_ALLOC(ctx, act, n * span, "table") == NULL ||
        (kind == SL_SHOW_QUANTITY && SL_ALLOC(ctx, qm, n * m->n_quantities, "table") == NULL))
        st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));

    /* labels and units */
    snprintf(t->row_name, SL_LABEL_MAX, "%s", m->factor_name[rf]);
    snprintf(t->col_name, SL_LABEL_MAX, "%s", m->factor_name[cf]);
    factor_unit(m, rf, t->row_unit);
    factor_unit(m, cf, t->col_unit);
    for (int64_t r = 0; r < R; r++) sl_factor_label(m, rf, r, t->row_label[r], SL_LABEL_MAX);
    for (int64_t c = 0; c < C; c++) sl_factor_label(m, cf, c, t->col_label[c], SL_LABEL_MAX);
    for (int32_t a = 0; a < na; a++) {
        if (a < m->n_action_values) snprintf(t->action_label[a], SL_LABEL_MAX, "%.6g", m->action_value[a]);
        else if (a < m->n_action_names) snprintf(t->action_label[a], SL_LABEL_MAX, "%s", m->action_name[a]);
        else snprintf(t->action_label[a], SL_LABEL_MAX, "%d", (int)a);
    }
    for (int f = 0; f < m->n_factors; f++) {
        if (!is_fixed[f]) continue;
        char lab[SL_LABEL_MAX], piece[256];
        sl_factor_label(m, f, fixed_idx[f], lab, sizeof(lab));
        snprintf(piece, sizeof(piece), "%s%s=%s%s%s (index %lld)", t->fixed[0] ? ", " : "", m->factor_name[f], lab,
                 m->factor_value[f] && !m->factor_label[f] && m->factor_unit[f][0] ? " " : "",
                 m->factor_value[f] && !m->factor_label[f] ? m->factor_unit[f] : "", (long long)fixed_idx[f]);
        append(t->fixed, sizeof(t->fixed), piece);
    }
    const char *ru = m->reward_unit;
    switch (kind) {
    case SL_SHOW_ACTION:
    case SL_SHOW_SWITCH:
        snprintf(t->what, sizeof(t->what), "%s", kind == SL_SHOW_SWITCH ? "action switches" : "action");
        if (m->n_action_values > 0) snprintf(t->unit, sizeof(t->unit), "%.63s", m->action_unit);
        break;
    case SL_SHOW_VALUE:
        snprintf(t->what, sizeof(t->what), "value");
        snprintf(t->unit, sizeof(t->unit), "%.63s", ru);
        break;
    case SL_SHOW_MARGINAL:
        snprintf(t->what, sizeof(t->what), "marginal value of %.63s", m->factor_name[arg]);
        if (ru[0] || m->factor_unit[arg][0])
            snprintf(t->unit, sizeof(t->unit), "%.63s/%.63s", ru[0] ? ru : "1", m->factor_unit[arg][0] ? m->factor_unit[arg] : "1");
        break;
    case SL_SHOW_QUANTITY:
        snprintf(t->what, sizeof(t->what), "%.63s per %.40s (expected)", m->quantity_name[arg],
                 m->period_unit[0] ? m->period_unit : "period");
        snprintf(t->unit, sizeof(t->unit), "%.63s", m->quantity_unit[arg]);
        break;
    }

    /* the states of the cells (and their neighbours along the marginal factor) */
    int64_t base = 0, rs = sl_factor_stride(m, rf), cs = sl_factor_stride(m, cf);
    for (int f = 0; f < m->n_factors; f++)
        if (is_fixed[f]) base += fixed_idx[f] * sl_factor_stride(m, f);
    int64_t ms = kind == SL_SHOW_MARGINAL ? sl_factor_stride(m, arg) : 0;
    int64_t mn = kind == SL_SHOW_MARGINAL ? m->factor_size[arg] : 0;
    for (int64_t r = 0; r < R; r++)
        for (int64_t c = 0; c < C; c++) {
            int64_t cell = r * C + c, s = base + r * rs + c * cs;
            states[cell * span] = s;
            if (span == 3) {
                int64_t i = (s / ms) % mn;
                states[cell * 3 + 1] = i > 0 ? s - ms : s;
                states[cell * 3 + 2] = i < mn - 1 ? s + ms : s;
            }
        }
    SL_TRY(sl_pview_gather(ctx, &pv, n * span, states, val, act, qm));
    for (int64_t cell = 0; cell < n; cell++) {
        int32_t a = act[cell * span];
        t->action[cell] = a;
        switch (kind) {
        case SL_SHOW_ACTION:
        case SL_SHOW_SWITCH: t->cell[cell] = a < m->n_action_values ? m->action_value[a] : (double)a; break;
        case SL_SHOW_VALUE: t->cell[cell] = val[cell]; break;
        case SL_SHOW_QUANTITY: t->cell[cell] = qm[cell * m->n_quantities + arg]; break;
        case SL_SHOW_MARGINAL: {
            int64_t s = states[cell * 3], lo = states[cell * 3 + 1], hi = states[cell * 3 + 2];
            int64_t i = (s / ms) % mn, il = lo == s ? i : i - 1, ih = hi == s ? i : i + 1;
            double dx = m->factor_value[arg][ih] - m->factor_value[arg][il];
            t->cell[cell] = (val[cell * 3 + 2] - val[cell * 3 + 1]) / dx;
            break;
        }
        }
    }
    if (kind == SL_SHOW_SWITCH) {
        int64_t ns = 0;
        for (int64_t c = 0; c < C; c++)
            for (int64_t r = 1; r < R; r++) ns += t->action[r * C + c] != t->action[(r - 1) * C + c];
        if (SL_ALLOC(ctx, t->switches, ns, "switches") == NULL) st = SL_ENOMEM;
        SL_TRY(sl_agree(ctx, st));
        for (int64_t c = 0; c < C; c++)
            for (int64_t r = 1; r < R; r++)
                if (t->action[r * C + c] != t->action[(r - 1) * C + c])
                    t->switches[t->n_switches++] =
                        (sl_table_switch){c, r, t->action[(r - 1) * C + c], t->action[r * C + c]};
    }
cleanup:
    free(states);
    free(val);
    free(qm);
    free(act);
    sl_pview_free(&pv);
    sl_meta_free(&mm);
    if (st != SL_OK) sl_table_free(t);
    return st;
}
