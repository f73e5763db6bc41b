/* evaluate.c - value of a fixed policy: exact (UMFPACK on rank 0) or
 * iterative; the `evaluate` command. */
#include <math.h>
#include <string.h>

#include "linalg/lu.h"
#include "solve/solve.h"
#include "store/store.h"

static inline int64_t global_col(const sl_problem *p, int64_t c)
{
    return c < p->n_local ? p->blk.s_begin + c : p->halo.halo_global[c - p->n_local];
}

void sl_evaluate_direct_free(void **lu_cache)
{
    sl_lu *lu = *lu_cache;
    sl_lu_free(&lu);
    *lu_cache = NULL;
}

sl_status sl_evaluate_direct(sl_ctx *ctx, const sl_problem *p, const int32_t *policy, double memory_limit,
                             double *x, int *used_direct, double *estimate_bytes, void **lu_cache)
{
    sl_status st = SL_OK;
    const sl_block *b = &p->blk;
    int P = ctx->size, root = ctx->rank == 0;
    int64_t n = p->n_local, N = p->meta.n_states;
    int *cnt = NULL, *dsp = NULL, *scnt = NULL, *sdsp = NULL;
    int64_t *rowlen = NULL, *cols = NULL, *all_len = NULL, *all_cols = NULL, *rowptr = NULL;
    double *probs = NULL, *rew = NULL, *all_probs = NULL, *all_rew = NULL, *v = NULL;
    int64_t *arp = NULL, *acol = NULL;
    double *aval = NULL;
    *used_direct = 0;
    *estimate_bytes = 0;

    /* rows of P_pi with global columns, sorted within each row */
    int64_t nnz = 0;
    for (int64_t i = 0; i < n; i++) {
        int64_t k = b->first_pair[i] - b->p_begin + policy[i];
        nnz += b->first_trans[k + 1] - b->first_trans[k];
    }
    if (SL_ALLOC(ctx, rowlen, n, "P_pi") == NULL || SL_ALLOC(ctx, cols, nnz, "P_pi") == NULL ||
        SL_ALLOC(ctx, probs, nnz, "P_pi") == NULL || SL_ALLOC(ctx, rew, n, "P_pi") == NULL)
        st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    int64_t w = 0;
    for (int64_t i = 0; i < n; i++) {
        int64_t k = b->first_pair[i] - b->p_begin + policy[i];
        int64_t t0 = b->first_trans[k] - b->t_begin, t1 = b->first_trans[k + 1] - b->t_begin, w0 = w;
        for (int64_t t = t0; t < t1; t++) {
            int64_t g = global_col(p, b->col[t]);
            double q = b->prob[t];
            int64_t j = w - 1;
            while (j >= w0 && cols[j] > g) {
                cols[j + 1] = cols[j];
                probs[j + 1] = probs[j];
                j--;
            }
            cols[j + 1] = g;
            probs[j + 1] = q;
            w++;
        }
        rowlen[i] = t1 - t0;
        rew[i] = b->reward[k];
    }
    /* gather to rank 0 (counts fit in int for any model a single node can factor) */
    if (nnz > INT32_MAX || n > INT32_MAX)
        st = SL_ERR(ctx, SL_EDATA, "a rank's share of P_pi is too large to gather for a direct solve");
    if (SL_ZALLOC(ctx, cnt, P, "gather") == NULL || SL_ZALLOC(ctx, dsp, P, "gather") == NULL ||
        SL_ZALLOC(ctx, scnt, P, "gather") == NULL || SL_ZALLOC(ctx, sdsp, P, "gather") == NULL)
        st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    int ni = (int)n, nz = (int)nnz;
    MPI_Gather(&ni, 1, MPI_INT, scnt, 1, MPI_INT, 0, ctx->comm);
    MPI_Gather(&nz, 1, MPI_INT, cnt, 1, MPI_INT, 0, ctx->comm);
    int64_t tot_nz = 0;
    if (root) {
        int64_t sn = 0;
        for (int r = 0; r < P; r++) {
            sdsp[r] = (int)sn;
            dsp[r] = (int)tot_nz;
            sn += scnt[r];
            tot_nz += cnt[r];
        }
        if (tot_nz > INT32_MAX) st = SL_ERR(ctx, SL_EDATA, "P_pi has %lld entries: too many to gather for a direct solve", (long long)tot_nz);
        else if (SL_ALLOC(ctx, all_len, N, "P_pi") == NULL || SL_ALLOC(ctx, all_cols, tot_nz, "P_pi") == NULL ||
                 SL_ALLOC(ctx, all_probs, tot_nz, "P_pi") == NULL || SL_ALLOC(ctx, all_rew, N, "P_pi") == NULL ||
                 SL_ALLOC(ctx, rowptr, N + 1, "P_pi") == NULL || SL_ALLOC(ctx, v, N, "values") == NULL)
            st = SL_ENOMEM;
    }
    SL_TRY(sl_agree(ctx, st));
    MPI_Gatherv(rowlen, ni, MPI_INT64_T, all_len, scnt, sdsp, MPI_INT64_T, 0, ctx->comm);
    MPI_Gatherv(rew, ni, MPI_DOUBLE, all_rew, scnt, sdsp, MPI_DOUBLE, 0, ctx->comm);
    MPI_Gatherv(cols, nz, MPI_INT64_T, all_cols, cnt, dsp, MPI_INT64_T, 0, ctx->comm);
    MPI_Gatherv(probs, nz, MPI_DOUBLE, all_probs, cnt, dsp, MPI_DOUBLE, 0, ctx->comm);
    int fits = 0;
    if (root) {
        rowptr[0] = 0;
        for (int64_t i = 0; i < N; i++) rowptr[i + 1] = rowptr[i] + all_len[i];
        sl_lu *lu = *lu_cache;
        if (lu == NULL) st = sl_lu_new(ctx, &lu);
        *lu_cache = lu;
        if (st == SL_OK)
            st = sl_lu_build_evaluation_matrix(ctx, N, rowptr, all_cols, all_probs, p->gamma, &arp, &acol, &aval);
        int reused = 0;
        if (st == SL_OK) st = sl_lu_factor(ctx, lu, N, arp, acol, aval, memory_limit, &fits, &reused, estimate_bytes);
        if (st == SL_OK && fits) st = sl_lu_solve(ctx, lu, all_rew, v);
        if (st == SL_OK && fits) {
            sl_lu_stats ls;
            sl_lu_get_stats(lu, &ls);
            sl_log(ctx, "evaluate: UMFPACK (%s ordering%s): %.3g entries in L+U, %.1f s numeric, peak estimate %.2f GB",
                   sl_lu_ordering(lu), reused ? ", symbolic analysis reused" : "", ls.lu_nnz, ls.numeric_seconds,
                   ls.peak_bytes / 1e9);
        }
    }
    SL_TRY(sl_agree(ctx, st));
    MPI_Bcast(&fits, 1, MPI_INT, 0, ctx->comm);
    MPI_Bcast(estimate_bytes, 1, MPI_DOUBLE, 0, ctx->comm);
    if (fits) {
        MPI_Scatterv(v, scnt, sdsp, MPI_DOUBLE, x, ni, MPI_DOUBLE, 0, ctx->comm);
        *used_direct = 1;
    }
cleanup:
    free(cnt);
    free(dsp);
    free(scnt);
    free(sdsp);
    free(rowlen);
    free(cols);
    free(probs);
    free(rew);
    free(all_len);
    free(all_cols);
    free(all_probs);
    free(all_rew);
    free(rowptr);
    free(v);
    free(arp);
    free(acol);
    free(aval);
    return st;
}

sl_status sl_evaluate_iterative(sl_ctx *ctx, const sl_problem *p, const int32_t *policy, double tol,
                                int64_t max_sweeps, double *x, double *y, sl_check *c, int64_t *sweeps)
{
    int32_t *pol = (int32_t *)policy; /* eval sweeps do not modify it */
    *sweeps = 0;
    int64_t since = 0, interval = 1;
    for (;;) {
        sl_halo_exchange(ctx, &p->halo, x);
        sl_sweep_gs(p, x, pol, 1);
        (*sweeps)++;
        if (++since >= interval) {
            since = 0;
            if (interval < 16) interval *= 2;
            sl_halo_exchange(ctx, &p->halo, x);
            sl_policy_check(p, x, y, policy, c);
            sl_certify(ctx, p, c);
            (*sweeps)++;
            /* for a fixed policy the bounds hold with T_pi in place of T */
            if (c->value_error <= tol) {
                sl_midpoint(p, y, c, x);
                return SL_OK;
            }
            memcpy(x, y, (size_t)p->n_local * sizeof(double));
        }
        if (max_sweeps > 0 && *sweeps >= max_sweeps)
            return SL_ERR(ctx, SL_ESTOPPED, "iterative evaluation stopped after %lld sweeps at error bound %.3e",
                          (long long)*sweeps, c->value_error);
    }
}

/* Prepare a model and the policy of a solution for it: pair offsets of the
 * solution's actions (each must be available in its state) and the values
 * in a vector with room for the halo. Collective. */
static sl_status prepare_with_policy(sl_ctx *ctx, const sl_model *m, const sl_solution *x, sl_problem *p,
                                     int32_t **policy, double **value, const char *what)
{
    sl_status st = SL_OK;
    *policy = NULL;
    *value = NULL;
    SL_TRY(sl_problem_from_model(ctx, m, SL_ORDER_AUTO, 0, p));
    if (x == NULL || x->action == NULL)
        st = SL_ERR(ctx, SL_EUSAGE, "%s: the solution holds no policy (a values file?)", what);
    else if (strcmp(x->info.model_fingerprint, p->meta.fingerprint) != 0)
        st = SL_ERR(ctx, SL_EDATA, "%s: the solution was computed for a different model (fingerprint %s, model %s)",
                    what, x->info.model_fingerprint, p->meta.fingerprint);
    else if (x->s_begin != p->blk.s_begin || x->n != p->n_local)
        st = SL_ERR(ctx, SL_EUSAGE, "%s: the solution is distributed differently from the model (load it with "
                                    "sl_solution_load for this model)", what);
    SL_TRY(sl_agree(ctx, st));
    int64_t n = p->n_local, nx = n + p->halo.n_halo;
    if (SL_ALLOC(ctx, *policy, n, "policy") == NULL || SL_ZALLOC(ctx, *value, nx, "values") == NULL)
        st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    memcpy(*value, x->value, (size_t)n * sizeof(double));
    SL_TRY(sl_agree(ctx, sl_policy_offsets(ctx, p, x->action, *policy, what)));
cleanup:
    if (st != SL_OK) {
        free(*policy);
        free(*value);
        *policy = NULL;
        *value = NULL;
        sl_problem_free(p);
    }
    return st;
}

sl_status sl_solver_evaluate(sl_solver *s, const sl_model *m, const sl_solution *policy, sl_solution **out)
{
    if (s == NULL) return SL_EUSAGE;
    sl_ctx *ctx = s->ctx;
    sl_status st = SL_OK;
    sl_problem P;
    int32_t *pol = NULL;
    double *x = NULL, *y = NULL;
    void *lu = NULL;
    sl_solution *res = NULL;
    double t0 = sl_now();
    memset(&P, 0, sizeof(P));
    if (out == NULL) return SL_ERR(ctx, SL_EUSAGE, "sl_solver_evaluate: no output handle");
    *out = NULL;
    SL_TRY(prepare_with_policy(ctx, m, policy, &P, &pol, &x, "evaluate"));
    int64_t n = P.n_local, nx = n + P.halo.n_halo;
    if (SL_ZALLOC(ctx, y, nx, "values") == NULL) st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    double tol = s->tolerance > 0 ? s->tolerance : 1e-6;
    int direct = 0;
    double est = 0;
    double limit = s->memory_limit > 0 ? s->memory_limit : 0.5 * sl_physical_memory();
    int iterative_only = s->method != SL_METHOD_PI;
    if (!iterative_only) SL_TRY(sl_evaluate_direct(ctx, &P, pol, limit, x, &direct, &est, &lu));
    if (!iterative_only && !direct) {
        if (s->strict_memory)
            SL_TRY(sl_agree(ctx, SL_ERR(ctx, SL_EDATA,
                                        "exact evaluation needs about %.2f GB (UMFPACK estimate), over the memory "
                                        "limit of %.2f GB",
                                        est / 1e9, limit / 1e9)));
        sl_warn(ctx, "exact evaluation needs about %.2f GB (UMFPACK estimate), over the limit of %.2f GB: "
                     "evaluating iteratively", est / 1e9, limit / 1e9);
    }
    sl_check c;
    memset(&c, 0, sizeof(c));
    int64_t sweeps = 0;
    if (direct) {
        /* report the residual of the direct solution under T_pi */
        sl_halo_exchange(ctx, &P.halo, x);
        sl_policy_check(&P, x, y, pol, &c);
        sl_certify(ctx, &P, &c);
        /* |x - v_pi| <= sup|T_pi x - x| / (1 - gamma) (contraction; Puterman 1994, Thm 6.2.3) */
        c.value_error = c.sup / (1.0 - P.gamma);
    } else {
        for (int64_t i = 0; i < n; i++) x[i] = 0;
        SL_TRY(sl_evaluate_iterative(ctx, &P, pol, tol, 0, x, y, &c, &sweeps));
    }
    SL_TRY(sl_agree(ctx, sl_solution_new(ctx, P.meta.n_states, P.blk.s_begin, n, 0, &res)));
    memcpy(res->value, x, (size_t)n * sizeof(double));
    snprintf(res->info.model_fingerprint, sizeof(res->info.model_fingerprint), "%s", P.meta.fingerprint);
    snprintf(res->info.method, sizeof(res->info.method), "%s", direct ? "direct" : "iterative");
    snprintf(res->info.evaluation, sizeof(res->info.evaluation), "%s", direct ? "direct" : "iterative");
    res->info.sweeps = sweeps;
    res->info.seconds = sl_now() - t0;
    res->info.discount = P.gamma;
    res->cert.converged = c.value_error <= tol;
    res->cert.tolerance = tol;
    res->cert.residual_sup = c.sup;
    res->cert.residual_span = c.span;
    res->cert.residual_min = c.dmin;
    res->cert.residual_max = c.dmax;
    res->cert.value_error = c.value_error;
    res->cert.policy_loss = NAN;
    *out = res;
    res = NULL;
cleanup:
    sl_solution_free(&res);
    sl_evaluate_direct_free(&lu);
    free(pol);
    free(x);
    free(y);
    sl_problem_free(&P);
    return st;
}

/* ---- verify ----------------------------------------------------------------------- */

sl_status sl_verify(const sl_model *m, const sl_solution *sol, double tolerance, sl_verification *out)
{
    if (m == NULL || sol == NULL || out == NULL) return SL_EUSAGE;
    sl_ctx *ctx = m->ctx;
    sl_status st = SL_OK;
    sl_problem P;
    int32_t *pol = NULL, *greedy = NULL;
    double *x = NULL, *y = NULL, *ypi = NULL;
    memset(&P, 0, sizeof(P));
    memset(out, 0, sizeof(*out));
    SL_TRY(prepare_with_policy(ctx, m, sol, &P, &pol, &x, "verify"));
    int64_t n = P.n_local, nx = n + P.halo.n_halo;
    if (SL_ALLOC(ctx, greedy, n, "policy") == NULL || SL_ZALLOC(ctx, y, nx, "values") == NULL ||
        SL_ZALLOC(ctx, ypi, nx, "values") == NULL)
        st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    memcpy(greedy, pol, (size_t)n * sizeof(int32_t));
    sl_halo_exchange(ctx, &P.halo, x);
    sl_check c, cpi;
    sl_bellman_check(&P, x, y, greedy, &c);
    sl_certify(ctx, &P, &c);
    sl_policy_check(&P, x, ypi, pol, &cpi);
    sl_certify(ctx, &P, &cpi);
    /* Independent bounds for the stored value x and policy pi (Puterman 1994, 6.6):
     *   Tx + f min d <= v* <= Tx + f max d, with d = Tx - x, f = gamma/(1-gamma);
     *   v_pi >= T_pi x + f min d_pi, d_pi = T_pi x - x.
     * so |x(s) - v*(s)| <= max(|d(s) + f min d|, |d(s) + f max d|) and
     *   v*(s) - v_pi(s) <= (Tx - T_pi x)(s) + f (max d - min d_pi). */
    double g = P.gamma, f = g / (1.0 - g), fp = 0.5 * (c.span - (c.dmax - c.dmin));
    double verr = 0, loss = 0;
    for (int64_t i = 0; i < n; i++) {
        double d = y[i] - x[i];
        double e = fmax(fabs(d + f * c.dmin), fabs(d + f * c.dmax));
        if (e > verr) verr = e;
        double l = (y[i] - ypi[i]) + f * (c.dmax - cpi.dmin);
        if (l > loss) loss = l;
    }
    verr = sl_max(ctx, verr) + (1.0 + 2.0 * f) * fp;
    loss = sl_max(ctx, loss) + 2.0 * f * fp + fp;
    double tol = tolerance > 0 ? tolerance : sol->cert.tolerance;
    out->residual_sup = c.sup;
    out->residual_span = c.span;
    out->value_error = verr;
    out->policy_loss = loss;
    out->tolerance = tol;
    out->certified = verr <= tol && loss <= tol;
    out->claimed = sol->cert;
    if (!out->certified)
        st = SL_ERR(ctx, SL_EDATA, "not certified within %.1e (value bound %.3e, policy bound %.3e)", tol, verr,
                    loss);
    st = sl_agree(ctx, st);
cleanup:
    free(pol);
    free(greedy);
    free(x);
    free(y);
    free(ypi);
    sl_problem_free(&P);
    return st;
}
