/* policycsv.c - a policy given as a CSV of actions by state (a rule a
 * planner operates today): header `state,action` or every factor name then
 * `action`; the action by name, by value as printed, or @ID. Every state
 * exactly once; each action must be available in its state. */
#include <errno.h>
#include <math.h>
#include <string.h>
#include <strings.h>

#include "analysis/analysis.h"
#include "model/model.h"
#include "solve/solve.h"
#include "store/h5.h"

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
    if (m->n_action_values > 0) return (int32_t)sl_grid_find(m->action_value, m->n_action_values, text, x);
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

int sl_policy_path_is_rule(const char *path)
{
    size_t n = path ? strlen(path) : 0;
    return n > 4 && strcasecmp(path + n - 4, ".csv") == 0;
}

sl_status sl_rule_read_local(sl_ctx *ctx, const sl_meta *meta, int32_t n_actions, const char *path, int32_t *action,
                             int64_t *line)
{
    policy_rows r = {meta, n_actions, action, line};
    int64_t n = meta->n_states, missing = 0, first = -1;
    for (int64_t s = 0; s < n; s++) action[s] = -1;
    sl_status st = sl_state_csv_read(ctx, meta, path, "action", policy_row, &r);
    for (int64_t s = 0; st == SL_OK && s < n; s++)
        if (action[s] < 0 && missing++ == 0) first = s;
    if (st == SL_OK && missing > 0) {
        char sw[1024];
        state_words(meta, first, sw, sizeof(sw));
        st = SL_ERR(ctx, SL_EDATA, "%s: no row for %s; %lld of %lld states have no action (every state needs one)",
                    path, sw, (long long)missing, (long long)n);
    }
    return st;
}

sl_status sl_rule_read(sl_ctx *ctx, const sl_meta *meta, int32_t n_actions, const char *path, int64_t s_begin,
                       int64_t nl, int32_t *action, int64_t *line)
{
    sl_status st = SL_OK;
    policy_rows r;
    int *cnt = NULL, *dsp = NULL;
    int64_t *lay = NULL, mine[2] = {s_begin, nl};
    memset(&r, 0, sizeof(r));
    int64_t n = meta->n_states, nr = ctx->rank == 0 ? n : 0;
    r.m = meta;
    r.n_actions = n_actions;
    if (n > INT32_MAX) st = SL_ERR(ctx, SL_EUSAGE, "%s: %lld states do not fit one MPI scatter", path, (long long)n);
    else if (SL_ALLOC(ctx, r.action, nr, "policy") == NULL || SL_ALLOC(ctx, r.line, nr, "policy") == NULL ||
             SL_ALLOC(ctx, cnt, ctx->size, "counts") == NULL || SL_ALLOC(ctx, dsp, ctx->size, "counts") == NULL ||
             SL_ALLOC(ctx, lay, 2 * ctx->size, "counts") == NULL)
        st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    if (MPI_Allgather(mine, 2, MPI_INT64_T, lay, 2, MPI_INT64_T, ctx->comm) != MPI_SUCCESS)
        st = SL_ERR(ctx, SL_EINTERNAL, "MPI_Allgather failed reading %s", path);
    for (int p = 0; st == SL_OK && p < ctx->size; p++) {
        if (lay[2 * p] < 0 || lay[2 * p + 1] < 0 || lay[2 * p] + lay[2 * p + 1] > n)
            st = SL_ERR(ctx, SL_EUSAGE, "%s: states %lld + %lld of rank %d are outside the model", path,
                        (long long)lay[2 * p], (long long)lay[2 * p + 1], p);
        else {
            dsp[p] = (int)lay[2 * p];
            cnt[p] = (int)lay[2 * p + 1];
        }
    }
    SL_TRY(sl_agree(ctx, st));
    if (ctx->rank == 0) st = sl_rule_read_local(ctx, meta, n_actions, path, r.action, r.line);
    SL_TRY(sl_agree(ctx, st));
    if (MPI_Scatterv(r.action, cnt, dsp, MPI_INT32_T, action, (int)nl, MPI_INT32_T, 0, ctx->comm) != MPI_SUCCESS ||
        MPI_Scatterv(r.line, cnt, dsp, MPI_INT64_T, line, (int)nl, MPI_INT64_T, 0, ctx->comm) != MPI_SUCCESS)
        st = SL_ERR(ctx, SL_EINTERNAL, "MPI_Scatterv failed reading %s", path);
    st = sl_agree(ctx, st);
cleanup:
    free(r.action);
    free(r.line);
    free(cnt);
    free(dsp);
    free(lay);
    return st;
}

sl_status sl_policy_pairs(sl_ctx *ctx, const sl_meta *m, int64_t s_begin, int64_t nl, const int64_t *first_pair,
                          const int32_t *pair_action, const int32_t *action, const int64_t *line, const char *policy,
                          const char *model, int64_t *chosen)
{
    if (line == NULL)
        return sl_saved_policy_check(ctx, policy, "/policy", first_pair, pair_action, s_begin, nl, action, chosen,
                                     model);
    for (int64_t i = 0; i < nl; i++) {
        int64_t k = sl_pairs_find_action(first_pair, first_pair[0], pair_action, i, action[i]);
        if (k >= 0) {
            if (chosen) chosen[i] = k;
            continue;
        }
        char sw[1024], an[SL_NAME_MAX + 16];
        int32_t a = action[i];
        state_words(m, s_begin + i, sw, sizeof(sw));
        if (a >= 0 && a < m->n_action_names) snprintf(an, sizeof(an), "%s", m->action_name[a]);
        else snprintf(an, sizeof(an), "@%d", (int)a);
        return SL_ERR(ctx, SL_EDATA, "%s line %lld: action %s is not available in %s", policy, (long long)line[i], an, sw);
    }
    return SL_OK;
}

/* Actions a rule may name: names, values, else the largest id among pairs
 * [p0, p0 + np). Collective. */
static int32_t rule_action_count(sl_ctx *ctx, const sl_meta *m, const int32_t *pair_action, int64_t np)
{
    int32_t na = m->n_action_names > m->n_action_values ? m->n_action_names : m->n_action_values;
    for (int64_t k = 0; k < np; k++)
        if (pair_action[k] + 1 > na) na = pair_action[k] + 1;
    MPI_Allreduce(MPI_IN_PLACE, &na, 1, MPI_INT32_T, MPI_MAX, ctx->comm);
    return na;
}

sl_status sl_policy_file_read(sl_ctx *ctx, const char *model, const sl_meta *m, const char *policy, int64_t s_begin,
                              int64_t nl, double *value, int32_t *action, int *is_rule)
{
    sl_status st = SL_OK;
    hid_t f = H5I_INVALID_HID;
    int64_t *fp = NULL, *line = NULL;
    int32_t *pa = NULL;
    *is_rule = sl_policy_path_is_rule(policy);
    if (!*is_rule) {
        sl_solution_record info;
        SL_TRY(sl_store_solution_read(ctx, policy, SL_FILE_SOLUTION, m->n_states, s_begin, nl, value, action, &info));
        if (strcmp(info.model_fingerprint, m->fingerprint) != 0)
            st = SL_ERR(ctx, SL_EDATA, "%s was computed for a different model (fingerprint %s) than %s (fingerprint %s)",
                        policy, info.model_fingerprint, model, m->fingerprint);
        st = sl_agree(ctx, st);
        goto cleanup;
    }
    /* a rule: the slice's pairs, to know the actions and check each row's */
    SL_TRY(sl_h5_open(ctx, model, 0, &f));
    if (SL_ALLOC(ctx, fp, nl + 1, "first_pair") == NULL || SL_ALLOC(ctx, line, nl, "policy") == NULL) st = SL_ENOMEM;
    if (st == SL_OK)
        st = sl_h5_read_1d(ctx, f, "/state/first_pair", H5T_NATIVE_INT64, m->n_states + 1, s_begin, nl + 1, fp, model);
    int64_t p0 = st == SL_OK ? fp[0] : 0, np = st == SL_OK ? fp[nl] - fp[0] : 0;
    if (st == SL_OK && (p0 < 0 || np < 0 || fp[nl] > m->n_pairs))
        st = SL_ERR(ctx, SL_EDATA, "%s: /state/first_pair of states %lld..%lld is out of range", model,
                    (long long)s_begin, (long long)(s_begin + nl));
    if (st == SL_OK && SL_ALLOC(ctx, pa, np, "pair actions") == NULL) st = SL_ENOMEM;
    if (st == SL_OK) st = sl_h5_read_1d(ctx, f, "/pair/action", H5T_NATIVE_INT32, m->n_pairs, p0, np, pa, model);
    H5Fclose(f);
    f = H5I_INVALID_HID;
    SL_TRY(sl_agree(ctx, st));
    SL_TRY(sl_rule_read(ctx, m, rule_action_count(ctx, m, pa, np), policy, s_begin, nl, action, line));
    for (int64_t i = 0; i < nl; i++) value[i] = 0.0; /* a rule has no values */
    st = sl_agree(ctx, sl_policy_pairs(ctx, m, s_begin, nl, fp, pa, action, line, policy, model, NULL));
cleanup:
    if (f >= 0) H5Fclose(f);
    free(fp);
    free(line);
    free(pa);
    return st;
}

sl_status sl_policy_read_csv(const sl_model *m, const char *path, sl_solution **out)
{
    if (m == NULL || out == NULL) return SL_EUSAGE;
    sl_ctx *ctx = m->ctx;
    sl_status st = SL_OK;
    sl_solution *x = NULL;
    int64_t *lines = NULL;
    *out = NULL;
    SL_TRY(sl_agree(ctx, sl_model_check_ready(ctx, m, "sl_policy_read_csv")));
    const sl_meta *meta = &m->meta;
    const sl_block *b = &m->blk;
    int64_t nl = sl_block_states(b);
    if (SL_ALLOC(ctx, lines, nl, "policy") == NULL) st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    SL_TRY(sl_agree(ctx, sl_solution_new(ctx, meta->n_states, b->s_begin, nl, 1, &x)));
    int32_t na = rule_action_count(ctx, meta, b->action, sl_block_pairs(b));
    SL_TRY(sl_rule_read(ctx, meta, na, path, b->s_begin, nl, x->action, lines));
    /* every action must be one the model offers in its state */
    SL_TRY(sl_agree(ctx, sl_policy_pairs(ctx, meta, b->s_begin, nl, b->first_pair, b->action, x->action, lines, path,
                                         "", NULL)));
    snprintf(x->info.model_fingerprint, sizeof(x->info.model_fingerprint), "%s", meta->fingerprint);
    snprintf(x->info.method, sizeof(x->info.method), "table");
    /* a rule has no values: x->value stays 0 (sl_solution_new zeroes it) */
    *out = x;
    x = NULL;
cleanup:
    sl_solution_free(&x);
    free(lines);
    return st;
}

sl_status sl_policy_load(sl_ctx *ctx, const char *path, const sl_model *m, sl_solution **x)
{
    if (path == NULL) return SL_EUSAGE;
    return sl_policy_path_is_rule(path) ? sl_policy_read_csv(m, path, x) : sl_solution_load(ctx, path, m, x);
}
