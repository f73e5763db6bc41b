/* policycsv.c - a policy given as a CSV of actions by state (a rule a
 * planner operates today): header `state,action` or every factor name then
 * `action`; the action by name, by value as printed, or @ID. Every state
 * exactly once; each action must be available in its state. */
#include <errno.h>
#include <math.h>
#include <string.h>

#include "analysis/analysis.h"
#include "model/model.h"
#include "solve/solve.h"

typedef struct policy_rows {
    const sl_meta *m;
    int32_t n_actions;
    int32_t *action;    /* [n_states], -1: no row yet */
    int64_t *line;      /* [n_states] line of the row */
} policy_rows;

static void state_words(const sl_meta *m, int64_t s, char *buf, size_t n)
{
    int64_t fv[SLUICE_MAX_FACTORS];
    char lab[SL_NAME_MAX + 32];
    snprintf(buf, n, "state %lld", (long long)s);
    if (m->n_factors == 0) return;
    sl_meta_decode(m, s, fv);
    for (int f = 0; f < m->n_factors; f++) {
        size_t u = strlen(buf);
        sl_factor_label(m, f, fv[f], lab, sizeof(lab));
        snprintf(buf + u, n - u, "%s%s=%s", f ? "," : " (", m->factor_name[f], lab);
    }
    size_t u = strlen(buf);
    snprintf(buf + u, n - u, ")");
}

/* The action id named by text, or -1. */
static int32_t action_id(const policy_rows *r, const char *text)
{
    const sl_meta *m = r->m;
    char *end = NULL;
    if (text[0] == '@') {
        errno = 0;
        long long v = strtoll(text + 1, &end, 10);
        return text[1] != '\0' && *end == '\0' && errno == 0 && v >= 0 && v < r->n_actions ? (int32_t)v : -1;
    }
    for (int32_t a = 0; a < m->n_action_names; a++)
        if (strcmp(m->action_name[a], text) == 0) return a;
    errno = 0;
    double x = strtod(text, &end);
    if (text[0] == '\0' || *end != '\0' || errno == ERANGE) return -1;
    if (m->n_action_values > 0) {
        char pr[64];
        for (int32_t a = 0; a < m->n_action_values; a++) {
            snprintf(pr, sizeof(pr), "%.6g", m->action_value[a]);
            if (strcmp(pr, text) == 0 || fabs(m->action_value[a] - x) <= 1e-9 * fmax(1.0, fabs(x))) return a;
        }
        return -1;
    }
    /* neither names nor values: the id itself */
    return m->n_action_names == 0 && x == floor(x) && x >= 0 && x < r->n_actions ? (int32_t)x : -1;
}

static sl_status policy_row(sl_ctx *ctx, void *user, const char *where, int64_t line, int64_t s, const char *text)
{
    policy_rows *r = user;
    char sw[1024];
    int32_t a = action_id(r, text);
    if (a < 0) {
        const sl_meta *m = r->m;
        if (m->n_action_names > 0)
            return SL_ERR(ctx, SL_EDATA, "%s: '%s' is not an action of the model (names %s .. %s, or @ID)", where, text,
                          m->action_name[0], m->action_name[m->n_action_names - 1]);
        return SL_ERR(ctx, SL_EDATA, "%s: '%s' is not an action of the model (ids 0..%d, or @ID)", where, text,
                      (int)r->n_actions - 1);
    }
    if (r->action[s] >= 0) {
        state_words(r->m, s, sw, sizeof(sw));
        return SL_ERR(ctx, SL_EDATA, "%s: %s is given twice (also on line %lld)", where, sw, (long long)r->line[s]);
    }
    r->action[s] = a;
    r->line[s] = line;
    return SL_OK;
}

sl_status sl_policy_read_csv(const sl_model *m, const char *path, sl_solution **out)
{
    if (m == NULL || out == NULL) return SL_EUSAGE;
    sl_ctx *ctx = m->ctx;
    sl_status st = SL_OK;
    sl_solution *x = NULL;
    policy_rows r;
    int *cnt = NULL, *dsp = NULL;
    int64_t *lines = NULL;
    memset(&r, 0, sizeof(r));
    *out = NULL;
    SL_TRY(sl_agree(ctx, sl_model_check_ready(ctx, m, "sl_policy_read_csv")));
    const sl_meta *meta = &m->meta;
    int64_t n = meta->n_states, nl = sl_block_states(&m->blk);
    /* actions the model knows: names, values, else the largest id in its pairs */
    int32_t na = meta->n_action_names > meta->n_action_values ? meta->n_action_names : meta->n_action_values;
    for (int64_t k = 0; k < sl_block_pairs(&m->blk); k++)
        if (m->blk.action[k] + 1 > na) na = m->blk.action[k] + 1;
    MPI_Allreduce(MPI_IN_PLACE, &na, 1, MPI_INT32_T, MPI_MAX, ctx->comm);
    r.m = meta;
    r.n_actions = na;
    int64_t nr = ctx->rank == 0 ? n : 0;
    if (n > INT32_MAX) st = SL_ERR(ctx, SL_EUSAGE, "%s: %lld states do not fit one MPI scatter", path, (long long)n);
    else if (SL_ALLOC(ctx, r.action, nr, "policy") == NULL || SL_ALLOC(ctx, r.line, nr, "policy") == NULL ||
             SL_ALLOC(ctx, cnt, ctx->size, "counts") == NULL || SL_ALLOC(ctx, dsp, ctx->size, "counts") == NULL ||
             SL_ALLOC(ctx, lines, nl, "policy") == NULL)
        st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    if (ctx->rank == 0) {
        for (int64_t s = 0; s < n; s++) r.action[s] = -1;
        st = sl_state_csv_read(ctx, meta, path, "action", policy_row, &r);
        int64_t missing = 0, first = -1;
        for (int64_t s = 0; st == SL_OK && s < n; s++)
            if (r.action[s] < 0 && missing++ == 0) first = s;
        if (st == SL_OK && missing > 0) {
            char sw[1024];
            state_words(meta, first, sw, sizeof(sw));
            st = SL_ERR(ctx, SL_EDATA, "%s: no row for %s; %lld of %lld states have no action (every state needs one)",
                        path, sw, (long long)missing, (long long)n);
        }
    }
    SL_TRY(sl_agree(ctx, st));
    SL_TRY(sl_agree(ctx, sl_solution_new(ctx, n, m->blk.s_begin, nl, 1, &x)));
    for (int p = 0; p < ctx->size; p++) {
        cnt[p] = (int)(m->bounds[p + 1] - m->bounds[p]);
        dsp[p] = (int)m->bounds[p];
    }
    MPI_Scatterv(r.action, cnt, dsp, MPI_INT32_T, x->action, (int)nl, MPI_INT32_T, 0, ctx->comm);
    MPI_Scatterv(r.line, cnt, dsp, MPI_INT64_T, lines, (int)nl, MPI_INT64_T, 0, ctx->comm);
    /* every action must be one the model offers in its state */
    for (int64_t i = 0; i < nl && st == SL_OK; i++) {
        const sl_block *b = &m->blk;
        int found = 0;
        for (int64_t q = b->first_pair[i] - b->p_begin; q < b->first_pair[i + 1] - b->p_begin; q++)
            found |= b->action[q] == x->action[i];
        if (!found) {
            char sw[1024];
            state_words(meta, x->s_begin + i, sw, sizeof(sw));
            int32_t a = x->action[i];
            st = SL_ERR(ctx, SL_EDATA, "%s line %lld: action %s is not available in %s", path, (long long)lines[i],
                        a < meta->n_action_names ? meta->action_name[a] : "(unnamed)", sw);
        }
    }
    SL_TRY(sl_agree(ctx, st));
    snprintf(x->info.model_fingerprint, sizeof(x->info.model_fingerprint), "%s", meta->fingerprint);
    snprintf(x->info.method, sizeof(x->info.method), "table");
    /* a rule has no values: x->value stays 0 (sl_solution_new zeroes it) */
    *out = x;
    x = NULL;
cleanup:
    sl_solution_free(&x);
    free(r.action);
    free(r.line);
    free(cnt);
    free(dsp);
    free(lines);
    return st;
}
