/* model.c - row builder, validation, fingerprint and metadata helpers. */
#include "model/model.h"

#include <math.h>
#include <string.h>

/* ---- metadata ----------------------------------------------------------- */

void sl_meta_free(sl_meta *m)
{
    if (m == NULL) return;
    for (int f = 0; f < SLUICE_MAX_FACTORS; f++) {
        free(m->factor_value[f]);
        free(m->factor_label[f]);
        m->factor_value[f] = NULL;
        m->factor_label[f] = NULL;
    }
    free(m->action_value);
    m->action_value = NULL;
    m->n_action_values = 0;
    free(m->action_name);
    free(m->param_name);
    free(m->param_value);
    free(m->param_unit);
    m->action_name = NULL;
    m->param_name = NULL;
    m->param_value = NULL;
    m->param_unit = NULL;
    m->n_action_names = 0;
    m->n_params = 0;
}

/* Allocate the arrays of a meta whose scalars were copied from another;
 * `has_value`/`has_label` say which factor arrays the source holds. */
static sl_status meta_alloc_arrays(sl_ctx *ctx, sl_meta *m, const int *has_value, const int *has_label)
{
    int bad = 0;
    m->action_name = NULL;
    m->param_name = NULL;
    m->param_value = NULL;
    m->param_unit = NULL;
    m->action_value = NULL;
    for (int f = 0; f < SLUICE_MAX_FACTORS; f++) {
        m->factor_value[f] = NULL;
        m->factor_label[f] = NULL;
    }
    for (int f = 0; f < m->n_factors && f < SLUICE_MAX_FACTORS; f++) {
        if (has_value[f] && SL_ZALLOC(ctx, m->factor_value[f], m->factor_size[f], "factor values") == NULL) bad = 1;
        if (has_label[f] && SL_ZALLOC(ctx, m->factor_label[f], m->factor_size[f], "factor labels") == NULL) bad = 1;
    }
    if (m->n_action_values > 0 && SL_ZALLOC(ctx, m->action_value, m->n_action_values, "action values") == NULL)
        bad = 1;
    if (bad || SL_ZALLOC(ctx, m->action_name, m->n_action_names, "action names") == NULL ||
        SL_ZALLOC(ctx, m->param_name, m->n_params, "parameter names") == NULL ||
        SL_ZALLOC(ctx, m->param_value, m->n_params, "parameter values") == NULL ||
        SL_ZALLOC(ctx, m->param_unit, m->n_params, "parameter units") == NULL) {
        sl_meta_free(m);
        return SL_ENOMEM;
    }
    return SL_OK;
}

static void meta_which(const sl_meta *m, int *has_value, int *has_label)
{
    for (int f = 0; f < SLUICE_MAX_FACTORS; f++) {
        has_value[f] = f < m->n_factors && m->factor_value[f] != NULL;
        has_label[f] = f < m->n_factors && m->factor_label[f] != NULL;
    }
}

sl_status sl_meta_copy(sl_ctx *ctx, sl_meta *dst, const sl_meta *src)
{
    int hv[SLUICE_MAX_FACTORS], hl[SLUICE_MAX_FACTORS];
    meta_which(src, hv, hl);
    *dst = *src;
    sl_status st = meta_alloc_arrays(ctx, dst, hv, hl);
    if (st != SL_OK) return st;
    for (int f = 0; f < src->n_factors; f++) {
        size_t n = (size_t)src->factor_size[f];
        if (hv[f]) memcpy(dst->factor_value[f], src->factor_value[f], n * sizeof(double));
        if (hl[f]) memcpy(dst->factor_label[f], src->factor_label[f], n * SL_NAME_MAX);
    }
    if (src->n_action_values > 0)
        memcpy(dst->action_value, src->action_value, (size_t)src->n_action_values * sizeof(double));
    /* empty arrays may be NULL in src: memcpy from NULL is undefined even for 0 bytes */
    if (src->n_action_names > 0)
        memcpy(dst->action_name, src->action_name, (size_t)src->n_action_names * SL_NAME_MAX);
    if (src->n_params > 0) {
        memcpy(dst->param_name, src->param_name, (size_t)src->n_params * SL_NAME_MAX);
        memcpy(dst->param_unit, src->param_unit, (size_t)src->n_params * SL_NAME_MAX);
        memcpy(dst->param_value, src->param_value, (size_t)src->n_params * sizeof(double));
    }
    return SL_OK;
}

sl_status sl_meta_bcast(sl_ctx *ctx, sl_meta *m)
{
    sl_meta copy = *m;
    int which[2 * SLUICE_MAX_FACTORS];
    meta_which(m, which, which + SLUICE_MAX_FACTORS);
    MPI_Bcast(&copy, (int)sizeof(copy), MPI_BYTE, 0, ctx->comm);
    MPI_Bcast(which, 2 * SLUICE_MAX_FACTORS, MPI_INT, 0, ctx->comm);
    sl_status st = SL_OK;
    if (ctx->rank != 0) {
        *m = copy;
        st = meta_alloc_arrays(ctx, m, which, which + SLUICE_MAX_FACTORS);
    }
    st = sl_agree(ctx, st);
    if (st != SL_OK) return st;
    MPI_Bcast(m->action_name, m->n_action_names * SL_NAME_MAX, MPI_CHAR, 0, ctx->comm);
    MPI_Bcast(m->param_name, m->n_params * SL_NAME_MAX, MPI_CHAR, 0, ctx->comm);
    MPI_Bcast(m->param_unit, m->n_params * SL_NAME_MAX, MPI_CHAR, 0, ctx->comm);
    MPI_Bcast(m->param_value, m->n_params, MPI_DOUBLE, 0, ctx->comm);
    for (int f = 0; f < m->n_factors; f++) {
        /* factor sizes are bounded by the writer (sl_meta_has_annotations
         * users check them against INT_MAX / SL_NAME_MAX) */
        if (which[f]) MPI_Bcast(m->factor_value[f], (int)m->factor_size[f], MPI_DOUBLE, 0, ctx->comm);
        if (which[SLUICE_MAX_FACTORS + f])
            MPI_Bcast(m->factor_label[f], (int)m->factor_size[f] * SL_NAME_MAX, MPI_CHAR, 0, ctx->comm);
    }
    if (m->n_action_values > 0) MPI_Bcast(m->action_value, m->n_action_values, MPI_DOUBLE, 0, ctx->comm);
    return SL_OK;
}

int sl_meta_has_annotations(const sl_meta *m)
{
    if (m->n_action_values > 0 || m->action_unit[0] || m->reward_unit[0] || m->period_unit[0] ||
        m->n_quantities > 0)
        return 1;
    for (int f = 0; f < m->n_factors; f++)
        if (m->factor_value[f] || m->factor_label[f] || m->factor_unit[f][0]) return 1;
    return 0;
}

int sl_meta_factor_index(const sl_meta *m, const char *name)
{
    for (int f = 0; f < m->n_factors; f++)
        if (strcmp(m->factor_name[f], name) == 0) return f;
    return -1;
}

int sl_meta_quantity_index(const sl_meta *m, const char *name)
{
    for (int q = 0; q < m->n_quantities; q++)
        if (strcmp(m->quantity_name[q], name) == 0) return q;
    return -1;
}

void sl_meta_decode(const sl_meta *m, int64_t state, int64_t *values)
{
    for (int f = 0; f < m->n_factors; f++) {
        int64_t n = m->factor_size[f] > 0 ? m->factor_size[f] : 1;
        values[f] = state % n;
        state /= n;
    }
}

int sl_meta_stage_factor(const sl_meta *m)
{
    for (int f = 0; f < m->n_factors; f++)
        if (m->factor_stage[f]) return f;
    return -1;
}

/* ---- block ---------------------------------------------------------------- */

void sl_block_free(sl_block *b)
{
    if (b == NULL) return;
    free(b->first_pair);
    free(b->action);
    free(b->reward);
    free(b->first_trans);
    free(b->target);
    free(b->prob);
    free(b->col);
    free(b->qmean);
    free(b->qpos);
    free(b->visits);
    free(b->terminal);
    memset(b, 0, sizeof(*b));
}

static sl_status grow(sl_ctx *ctx, void **p, size_t *cap, size_t need, size_t elem,
                      const char *what)
{
    if (need <= *cap) return SL_OK;
    size_t n = *cap ? *cap : 1024;
    while (n < need) n *= 2;
    if (n > SIZE_MAX / elem) return SL_ERR(ctx, SL_ENOMEM, "size overflow growing %s", what);
    void *q = realloc(*p, n * elem);
    if (q == NULL)
        return SL_ERR(ctx, SL_ENOMEM, "out of memory growing %s to %zu entries", what, n);
    *p = q;
    *cap = n;
    return SL_OK;
}

sl_status sl_block_init(sl_ctx *ctx, sl_block *b, int64_t s_begin, int64_t n_states_total,
                        const char *where)
{
    memset(b, 0, sizeof(*b));
    b->s_begin = b->s_end = s_begin;
    b->n_states_total = n_states_total;
    b->prob_tolerance = 1e-9;
    b->where = where ? where : "model";
    sl_status st = grow(ctx, (void **)&b->first_pair, &b->cap_states, 1, sizeof(int64_t),
                        "state index");
    if (st != SL_OK) return st;
    st = grow(ctx, (void **)&b->first_trans, &b->cap_ptrs, 1, sizeof(int64_t), "pair index");
    if (st != SL_OK) return st;
    b->first_pair[0] = 0;
    b->first_trans[0] = 0;
    return SL_OK;
}

void sl_block_restart(sl_block *b, int64_t s_begin, int64_t p_begin, int64_t t_begin)
{
    b->s_begin = b->s_end = s_begin;
    b->p_begin = b->p_end = p_begin;
    b->t_begin = b->t_end = t_begin;
    b->first_pair[0] = p_begin;
    b->first_trans[0] = t_begin;
    b->in_pair = 0;
}

sl_status sl_block_begin_state(sl_ctx *ctx, sl_block *b)
{
    size_t need = (size_t)(b->s_end - b->s_begin) + 2;
    return grow(ctx, (void **)&b->first_pair, &b->cap_states, need, sizeof(int64_t),
                "state index");
}

sl_status sl_block_begin_pair(sl_ctx *ctx, sl_block *b, int32_t action)
{
    int64_t s = b->s_end;
    int64_t np = b->p_end - b->p_begin;
    int64_t first = b->first_pair[s - b->s_begin] - b->p_begin;
    for (int64_t k = first; k < np; k++)
        if (b->action[k] == action)
            return SL_ERR(ctx, SL_EDATA, "%s: state %lld: action %d appears twice", b->where,
                          (long long)s, (int)action);
    if (action < 0)
        return SL_ERR(ctx, SL_EDATA, "%s: state %lld: negative action id %d", b->where,
                      (long long)s, (int)action);
    size_t need = (size_t)np + 1, cap_a = b->cap_pairs, cap_r = b->cap_pairs;
    sl_status st = grow(ctx, (void **)&b->action, &cap_a, need, sizeof(int32_t), "pair actions");
    if (st == SL_OK)
        st = grow(ctx, (void **)&b->reward, &cap_r, need, sizeof(double), "pair rewards");
    if (st == SL_OK)
        st = grow(ctx, (void **)&b->first_trans, &b->cap_ptrs, need + 1, sizeof(int64_t),
                  "pair index");
    if (st != SL_OK) return st;
    b->cap_pairs = cap_a < cap_r ? cap_a : cap_r;
    if (b->nq > 0) {
        size_t need_q = ((size_t)np + 1) * (size_t)b->nq, cap_m = b->cap_q, cap_p = b->cap_q;
        st = grow(ctx, (void **)&b->qmean, &cap_m, need_q, sizeof(double), "pair quantities");
        if (st == SL_OK) st = grow(ctx, (void **)&b->qpos, &cap_p, need_q, sizeof(double), "pair quantities");
        if (st != SL_OK) return st;
        b->cap_q = cap_m < cap_p ? cap_m : cap_p;
        for (int q = 0; q < b->nq; q++) {
            b->qmean[(size_t)np * (size_t)b->nq + (size_t)q] = 0.0;
            b->qpos[(size_t)np * (size_t)b->nq + (size_t)q] = 0.0;
        }
    }
    b->action[np] = action;
    b->reward[np] = 0.0;
    b->in_pair = 1;
    return SL_OK;
}

sl_status sl_block_add(sl_ctx *ctx, sl_block *b, int64_t target, double prob, double reward)
{
    int64_t s = b->s_end;
    int32_t a = b->action[b->p_end - b->p_begin];
    if (!isfinite(prob) || prob < 0.0 || prob > 1.0)
        return SL_ERR(ctx, SL_EDATA,
                      "%s: state %lld, action %d, next state %lld: probability %.17g is not in [0, 1]",
                      b->where, (long long)s, (int)a, (long long)target, prob);
    if (!isfinite(reward))
        return SL_ERR(ctx, SL_EDATA,
                      "%s: state %lld, action %d, next state %lld: reward %g is not finite",
                      b->where, (long long)s, (int)a, (long long)target, reward);
    if (target < 0 || (b->n_states_total > 0 && target >= b->n_states_total))
        return SL_ERR(ctx, SL_EDATA,
                      "%s: state %lld, action %d: next state %lld is out of range [0, %lld)",
                      b->where, (long long)s, (int)a, (long long)target,
                      (long long)b->n_states_total);
    size_t nt = (size_t)(b->t_end - b->t_begin);
    size_t cap_t = b->cap_trans, cap_p = b->cap_trans;
    sl_status st = grow(ctx, (void **)&b->target, &cap_t, nt + 1, sizeof(int64_t), "transitions");
    if (st == SL_OK)
        st = grow(ctx, (void **)&b->prob, &cap_p, nt + 1, sizeof(double), "transitions");
    if (st != SL_OK) return st;
    b->cap_trans = cap_t < cap_p ? cap_t : cap_p;
    b->target[nt] = target;
    b->prob[nt] = prob;
    /* reward accumulated as sum p*r; merged targets keep the sum */
    b->reward[b->p_end - b->p_begin] += prob * reward;
    b->t_end++;
    return SL_OK;
}

sl_status sl_block_set_quantities(sl_ctx *ctx, sl_block *b, int nq)
{
    if (nq < 0 || nq > SLUICE_MAX_QUANTITIES || b->p_end != b->p_begin)
        return SL_ERR(ctx, SL_EINTERNAL, "%s: cannot set %d quantities here", b->where, nq);
    b->nq = nq;
    return SL_OK;
}

sl_status sl_block_add_outcome(sl_ctx *ctx, sl_block *b, int64_t target, double prob, double reward,
                               const double *q)
{
    int64_t k = b->p_end - b->p_begin;
    if (b->nq > 0 && q == NULL)
        return SL_ERR(ctx, SL_EDATA, "%s: state %lld, action %d: a successor without its %d quantities",
                      b->where, (long long)b->s_end, (int)b->action[k], b->nq);
    for (int i = 0; i < b->nq; i++)
        if (!isfinite(q[i]))
            return SL_ERR(ctx, SL_EDATA,
                          "%s: state %lld, action %d, next state %lld: quantity %d is %g, not finite",
                          b->where, (long long)b->s_end, (int)b->action[k], (long long)target, i, q[i]);
    sl_status st = sl_block_add(ctx, b, target, prob, reward);
    if (st != SL_OK) return st;
    double *mean = b->qmean + (size_t)k * (size_t)b->nq, *pos = b->qpos + (size_t)k * (size_t)b->nq;
    for (int i = 0; i < b->nq; i++) {
        mean[i] += prob * q[i];
        if (q[i] > 0.0) pos[i] += prob;
    }
    return SL_OK;
}

sl_status sl_block_end_pair(sl_ctx *ctx, sl_block *b)
{
    int64_t k = b->p_end - b->p_begin;
    int64_t s = b->s_end;
    int32_t a = b->action[k];
    int64_t lo = b->first_trans[k] - b->t_begin, hi = b->t_end - b->t_begin;
    if (hi == lo)
        return SL_ERR(ctx, SL_EDATA, "%s: state %lld, action %d: no successor states", b->where,
                      (long long)s, (int)a);
    /* insertion sort by target (pairs have few successors), then merge */
    for (int64_t i = lo + 1; i < hi; i++) {
        int64_t t = b->target[i];
        double p = b->prob[i];
        int64_t j = i - 1;
        while (j >= lo && b->target[j] > t) {
            b->target[j + 1] = b->target[j];
            b->prob[j + 1] = b->prob[j];
            j--;
        }
        b->target[j + 1] = t;
        b->prob[j + 1] = p;
    }
    int64_t w = lo;
    for (int64_t i = lo + 1; i < hi; i++) {
        if (b->target[i] == b->target[w]) {
            b->prob[w] += b->prob[i];
        } else {
            w++;
            b->target[w] = b->target[i];
            b->prob[w] = b->prob[i];
        }
    }
    hi = w + 1;
    b->t_end = b->t_begin + hi;
    double sum = 0.0;
    for (int64_t i = lo; i < hi; i++) sum += b->prob[i];
    double drift = fabs(sum - 1.0);
    if (drift > b->prob_tolerance) {
        if (b->renormalize && drift <= 1e-6) {
            for (int64_t i = lo; i < hi; i++) b->prob[i] /= sum;
            b->reward[k] /= sum;
            for (int i = 0; i < b->nq; i++) {
                b->qmean[(size_t)k * (size_t)b->nq + (size_t)i] /= sum;
                b->qpos[(size_t)k * (size_t)b->nq + (size_t)i] /= sum;
            }
            b->n_renormalized++;
        } else {
            return SL_ERR(ctx, SL_EDATA,
                          "%s: state %lld, action %d: probabilities sum to %.17g, not 1 "
                          "(tolerance %g%s)",
                          b->where, (long long)s, (int)a, sum, b->prob_tolerance,
                          b->renormalize ? "; --renormalize fixes drift up to 1e-6 only"
                                         : "; --renormalize rescales drift up to 1e-6");
        }
    }
    for (int64_t i = lo; i < hi; i++) {
        if (b->prob[i] > 1.0 + b->prob_tolerance)
            return SL_ERR(ctx, SL_EDATA,
                          "%s: state %lld, action %d, next state %lld: merged probability %.17g > 1",
                          b->where, (long long)s, (int)a, (long long)b->target[i], b->prob[i]);
        /* merged rows may exceed 1 by less than the tolerance: the file
         * contract is p in [0, 1], so store 1 */
        if (b->prob[i] > 1.0) b->prob[i] = 1.0;
    }
    for (int i = 0; i < b->nq; i++) { /* same rule for a probability of being positive */
        double *pp = &b->qpos[(size_t)k * (size_t)b->nq + (size_t)i];
        if (*pp > 1.0) *pp = 1.0;
    }
    b->p_end++;
    b->first_trans[b->p_end - b->p_begin] = b->t_end;
    b->in_pair = 0;
    return SL_OK;
}

sl_status sl_block_end_state(sl_ctx *ctx, sl_block *b)
{
    int64_t i = b->s_end - b->s_begin;
    if (b->p_end == b->first_pair[i])
        return SL_ERR(ctx, SL_EDATA, "%s: state %lld has no action", b->where,
                      (long long)b->s_end);
    b->s_end++;
    b->first_pair[i + 1] = b->p_end;
    return SL_OK;
}

void sl_block_rebase(sl_block *b, int64_t p_begin, int64_t t_begin)
{
    int64_t dp = p_begin - b->p_begin, dt = t_begin - b->t_begin;
    for (int64_t i = 0; i <= sl_block_states(b); i++) b->first_pair[i] += dp;
    for (int64_t k = 0; k <= sl_block_pairs(b); k++) b->first_trans[k] += dt;
    b->p_begin += dp;
    b->p_end += dp;
    b->t_begin += dt;
    b->t_end += dt;
}

int64_t sl_pairs_find_action(const int64_t *first_pair, int64_t p_begin, const int32_t *pair_action, int64_t i,
                             int32_t action)
{
    for (int64_t q = first_pair[i] - p_begin; q < first_pair[i + 1] - p_begin; q++)
        if (pair_action[q] == action) return q;
    return -1;
}

/* ---- validation of rows read from a file --------------------------------- */

sl_status sl_block_validate(sl_ctx *ctx, const sl_block *b, const sl_meta *m,
                            double tol, const char *where)
{
    int64_t ns = sl_block_states(b);
    if (b->first_pair[0] != b->p_begin || b->first_pair[ns] != b->p_end)
        return SL_ERR(ctx, SL_EDATA,
                      "%s: /state/first_pair of states %lld..%lld does not match the pair range",
                      where, (long long)b->s_begin, (long long)b->s_end);
    int64_t np = sl_block_pairs(b), nt = sl_block_trans(b);
    if (b->first_trans[0] != b->t_begin || b->first_trans[np] != b->t_end)
        return SL_ERR(ctx, SL_EDATA,
                      "%s: /pair/first_transition does not match the transition range of "
                      "states %lld..%lld",
                      where, (long long)b->s_begin, (long long)b->s_end);
    for (int64_t i = 0; i < ns; i++) {
        int64_t s = b->s_begin + i;
        int64_t p0 = b->first_pair[i] - b->p_begin, p1 = b->first_pair[i + 1] - b->p_begin;
        if (p1 < p0)
            return SL_ERR(ctx, SL_EDATA, "%s: state %lld: /state/first_pair decreases", where,
                          (long long)s);
        if (p1 == p0)
            return SL_ERR(ctx, SL_EDATA, "%s: state %lld has no action", where, (long long)s);
        if (p0 < 0 || p1 > np) /* inside the pairs of this block (found by fuzz_validate) */
            return SL_ERR(ctx, SL_EDATA, "%s: state %lld: /state/first_pair points outside the pairs", where,
                          (long long)s);
        for (int64_t k = p0; k < p1; k++) {
            int32_t a = b->action[k];
            for (int64_t k2 = p0; k2 < k; k2++)
                if (b->action[k2] == a)
                    return SL_ERR(ctx, SL_EDATA, "%s: state %lld: action %d appears twice",
                                  where, (long long)s, (int)a);
            if (!isfinite(b->reward[k]))
                return SL_ERR(ctx, SL_EDATA, "%s: state %lld, action %d: reward is not finite",
                              where, (long long)s, (int)a);
            int64_t t0 = b->first_trans[k] - b->t_begin, t1 = b->first_trans[k + 1] - b->t_begin;
            if (t1 <= t0)
                return SL_ERR(ctx, SL_EDATA,
                              "%s: state %lld, action %d: /pair/first_transition not increasing",
                              where, (long long)s, (int)a);
            if (t0 < 0 || t1 > nt) /* inside the transitions of this block (found by fuzz_validate) */
                return SL_ERR(ctx, SL_EDATA,
                              "%s: state %lld, action %d: /pair/first_transition points outside the transitions",
                              where, (long long)s, (int)a);
            double sum = 0.0;
            for (int64_t t = t0; t < t1; t++) {
                if (b->target[t] < 0 || b->target[t] >= m->n_states)
                    return SL_ERR(ctx, SL_EDATA,
                                  "%s: state %lld, action %d: next state %lld out of range "
                                  "[0, %lld)",
                                  where, (long long)s, (int)a, (long long)b->target[t],
                                  (long long)m->n_states);
                double p = b->prob[t];
                if (!(p >= 0.0 && p <= 1.0))
                    return SL_ERR(ctx, SL_EDATA,
                                  "%s: state %lld, action %d: probability %g not in [0, 1]",
                                  where, (long long)s, (int)a, p);
                sum += p;
            }
            if (fabs(sum - 1.0) > tol)
                return SL_ERR(ctx, SL_EDATA,
                              "%s: state %lld, action %d: probabilities sum to %.17g, not 1",
                              where, (long long)s, (int)a, sum);
        }
    }
    return SL_OK;
}

/* ---- fingerprint ---------------------------------------------------------- */

static inline uint64_t dbits(double x)
{
    uint64_t u;
    if (x == 0.0) x = 0.0; /* -0 == +0 */
    memcpy(&u, &x, sizeof(u));
    return u;
}

/* The hash of one entry: its array tag, its global position and its value;
 * the two lanes' sums are what the fingerprint mixes (docs/formats.md). */
static inline uint64_t entry_hash(uint64_t tag, int64_t pos, uint64_t val)
{
    return sl_mix64(tag ^ sl_mix64((uint64_t)pos ^ sl_mix64(val)));
}

static inline uint64_t lane2(uint64_t h)
{
    return sl_mix64(h ^ 0x5851f42d4c957f2dULL);
}

/* Entries are hashed independently and summed modulo 2^64, so the loops
 * below vectorise. On x86-64 with GCC a second copy for AVX-512 (64-bit
 * multiplies in vector registers) is picked when the program is loaded, on
 * CPUs that have it. Integer arithmetic: every copy gives the same sums. */
#if defined(__x86_64__) && defined(__GNUC__) && !defined(__clang__) && defined(__has_attribute)
#if __has_attribute(target_clones)
#define SL_HASH_CLONES __attribute__((target_clones("arch=x86-64-v4", "default")))
#endif
#endif
#ifndef SL_HASH_CLONES
#define SL_HASH_CLONES
#endif

/* One loop, made for each element type: VAL(x) is the entry's 64-bit value. */
#define SL_HASH_LOOP(NAME, TYPE, VAL)                                                                     \
    SL_HASH_CLONES static void NAME(uint64_t acc[2], uint64_t tag, int64_t p0, int64_t n, const TYPE *v, \
                                    int64_t stride)                                                      \
    {                                                                                                    \
        uint64_t a0 = 0, a1 = 0;                                                                         \
        for (int64_t k = 0; k < n; k++) {                                                                \
            uint64_t h = entry_hash(tag, p0 + k, VAL(v[k * stride]));                                    \
            a0 += h;                                                                                     \
            a1 += lane2(h);                                                                              \
        }                                                                                                \
        acc[0] += a0;                                                                                    \
        acc[1] += a1;                                                                                    \
    }
#define SL_HASH_I64(x) ((uint64_t)(x))
#define SL_HASH_I32(x) ((uint64_t)(uint32_t)(x))
SL_HASH_LOOP(hash_f64, double, dbits)
SL_HASH_LOOP(hash_i64, int64_t, SL_HASH_I64)
SL_HASH_LOOP(hash_i32, int32_t, SL_HASH_I32)

void sl_fingerprint_quantity(uint64_t acc[2], int q, int64_t p0, int64_t n, const double *mean,
                             const double *pos, int stride)
{
    hash_f64(acc, 7u + 2u * (uint64_t)q, p0, n, mean, stride);
    hash_f64(acc, 8u + 2u * (uint64_t)q, p0, n, pos, stride);
}

static uint64_t hash_str(uint64_t h, const char *s)
{
    for (; *s; s++) h = sl_mix64(h ^ (unsigned char)*s);
    return sl_mix64(h ^ 0xffu);
}

/* Format 2 annotations (units, factor and action values, labels, quantity
 * names): identical on every rank, hashed in sequence. */
static uint64_t annotation_hash(const sl_meta *m)
{
    uint64_t h = 0x243f6a8885a308d3ULL;
    for (int f = 0; f < m->n_factors; f++) {
        h = hash_str(h, m->factor_unit[f]);
        if (m->factor_value[f])
            for (int64_t i = 0; i < m->factor_size[f]; i++) h = sl_mix64(h ^ dbits(m->factor_value[f][i]));
        h = sl_mix64(h ^ (m->factor_value[f] ? 1u : 2u));
        if (m->factor_label[f])
            for (int64_t i = 0; i < m->factor_size[f]; i++) h = hash_str(h, m->factor_label[f][i]);
        h = sl_mix64(h ^ (m->factor_label[f] ? 3u : 4u));
    }
    for (int32_t a = 0; a < m->n_action_values; a++) h = sl_mix64(h ^ dbits(m->action_value[a]));
    h = hash_str(h, m->action_unit);
    h = hash_str(h, m->reward_unit);
    h = hash_str(h, m->period_unit);
    for (int q = 0; q < m->n_quantities; q++) {
        h = hash_str(h, m->quantity_name[q]);
        h = hash_str(h, m->quantity_unit[q]);
    }
    return sl_mix64(h ^ (uint64_t)m->n_quantities);
}

void sl_fingerprint_add(uint64_t acc[2], const sl_meta *m, const sl_block *b)
{
    int64_t ns = sl_block_states(b), np = sl_block_pairs(b), nt = sl_block_trans(b);
    hash_i64(acc, 1, b->s_begin, ns, b->first_pair + 1, 1);
    hash_i32(acc, 2, b->p_begin, np, b->action, 1);
    hash_f64(acc, 3, b->p_begin, np, b->reward, 1);
    hash_i64(acc, 4, b->p_begin, np, b->first_trans + 1, 1);
    hash_i64(acc, 5, b->t_begin, nt, b->target, 1);
    hash_f64(acc, 6, b->t_begin, nt, b->prob, 1);
    if (b->nq > 0 && b->qmean != NULL)
        for (int q = 0; q < b->nq; q++)
            sl_fingerprint_quantity(acc, q, b->p_begin, np, b->qmean + q, b->qpos + q, b->nq);
    /* entries a reader hashed without keeping them (0 for built blocks) */
    acc[0] += b->qacc[0];
    acc[1] += b->qacc[1];
    if (m->has_terminal && b->terminal != NULL) hash_f64(acc, 29, b->s_begin, ns, b->terminal, 1);
    if (m->has_visits && b->visits != NULL)
        hash_i64(acc, 30, b->p_begin, np, b->visits, 1);
}

sl_status sl_fingerprint_finish(sl_ctx *ctx, const sl_meta *m, const uint64_t acc[2], char out[40])
{
    uint64_t tot[2] = {0, 0};
    MPI_Allreduce(acc, tot, 2, MPI_UINT64_T, MPI_SUM, ctx->comm);
    uint64_t head = sl_mix64((uint64_t)m->n_states) ^ sl_mix64((uint64_t)m->n_pairs * 3u) ^
                    sl_mix64((uint64_t)m->n_trans * 7u) ^ sl_mix64(dbits(m->discount)) ^
                    sl_mix64((uint64_t)m->objective + 11u);
    if (m->format_version >= 2) head ^= sl_mix64(annotation_hash(m) + 13u);
    /* optional datasets: mixed in only when present, so older files keep
     * their fingerprint */
    if (m->has_visits) head ^= sl_mix64(0x7669736974730001ULL);
    if (m->has_terminal) head ^= sl_mix64(0x7465726d696e0002ULL);
    uint64_t h0 = sl_mix64(tot[0] ^ head), h1 = sl_mix64(tot[1] + head);
    snprintf(out, 40, "%016llx%016llx", (unsigned long long)h0, (unsigned long long)h1);
    return SL_OK;
}

sl_status sl_fingerprint(sl_ctx *ctx, const sl_meta *m, const sl_block *b, char out[40])
{
    uint64_t acc[2] = {0, 0};
    sl_fingerprint_add(acc, m, b);
    return sl_fingerprint_finish(ctx, m, acc, out);
}
