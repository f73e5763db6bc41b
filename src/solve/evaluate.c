/* evaluate.c - value of a fixed policy: exact (UMFPACK on rank 0) or
 * iterative; the `evaluate` command. */
/* MAP_ANONYMOUS */
#ifndef _DEFAULT_SOURCE
#define _DEFAULT_SOURCE
#endif
#include <errno.h>
#include <float.h>
#include <math.h>
#include <signal.h>
#include <string.h>
#include <sys/mman.h>
#include <sys/wait.h>
#include <time.h>
#include <unistd.h>

#include "linalg/lu.h"
#include "solve/solve.h"
#include "store/store.h"

static inline int64_t global_col(const sl_problem *p, int64_t c)
{
    return c < p->n_local ? p->blk.s_begin + c : p->halo.halo_global[c - p->n_local];
}

/* Root: adapt A = I - gamma P (CSR, columns ascending) to the problem's
 * system (solve.h, eval_average): unit diagonal on zero rows; or column
 * `ref` replaced by ones (inserted in order where a row lacks it). May
 * reallocate the arrays. Local. */
static sl_status adapt_system(sl_ctx *ctx, const sl_problem *p, int64_t N, int64_t **arp, int64_t **acol,
                              double **aval)
{
    int64_t *rp = *arp, *c = *acol;
    double *v = *aval;
    if (!p->eval_average) {
        for (int64_t i = 0; i < N; i++) {
            int zero = 1;
            for (int64_t t = rp[i]; t < rp[i + 1] && zero; t++) zero = v[t] == 0.0;
            if (!zero) continue;
            for (int64_t t = rp[i]; t < rp[i + 1]; t++)
                if (c[t] == i) v[t] = 1.0;
        }
        return SL_OK;
    }
    int64_t ref = p->eval_ref, nnz = rp[N], *nrp = NULL, *nc = NULL;
    double *nv = NULL;
    if (SL_ALLOC(ctx, nrp, N + 1, "gain and bias system") == NULL || SL_ALLOC(ctx, nc, nnz + N, "gain and bias system") == NULL ||
        SL_ALLOC(ctx, nv, nnz + N, "gain and bias system") == NULL) {
        free(nrp);
        free(nc);
        free(nv);
        return SL_ENOMEM;
    }
    int64_t w = 0;
    for (int64_t i = 0; i < N; i++) {
        nrp[i] = w;
        int done = 0;
        for (int64_t t = rp[i]; t < rp[i + 1]; t++) {
            if (!done && c[t] >= ref) {
                nc[w] = ref;
                nv[w++] = 1.0;
                done = 1;
                if (c[t] == ref) continue;
            }
            nc[w] = c[t];
            nv[w++] = v[t];
        }
        if (!done) {
            nc[w] = ref;
            nv[w++] = 1.0;
        }
    }
    nrp[N] = w;
    free(rp);
    free(c);
    free(v);
    *arp = nrp;
    *acol = nc;
    *aval = nv;
    return SL_OK;
}

void sl_evaluate_direct_free(void **lu_cache)
{
    sl_lu *lu = *lu_cache;
    sl_lu_free(&lu);
    *lu_cache = NULL;
}

/* What the child process of a direct solve reports (in shared memory, in
 * front of the solution vector). */
typedef struct child_report {
    int status;             /* sl_status; -1 until the child finishes */
    double numeric_seconds, flops, lu_nnz, rcond, umf_peak;
    char err[SL_MSG_MAX];
} child_report;

static int stop_wanted(const sl_ctx *ctx, double deadline)
{
    return (ctx->signal_flag != NULL && *ctx->signal_flag) || (deadline > 0 && sl_now() >= deadline);
}

/* Numeric factorization and solve of the prepared handle, in a child
 * process that is killed when a stop is requested (signal flag) or the
 * deadline passes, so a long factorization never delays a stop by more
 * than the polling interval (20 ms). The parent's memory is not touched by
 * the factorization; the child's goes with it. If the child cannot be
 * started, the step runs here (and cannot be abandoned). Local (rank 0). */
static sl_status numeric_abandonable(sl_ctx *ctx, sl_lu *lu, int64_t n, const double *b, double *v, double deadline,
                                     int *abandoned)
{
    sl_status st = SL_OK;
    size_t head = (sizeof(child_report) + 63) / 64 * 64, bytes = head + (size_t)n * sizeof(double);
    *abandoned = 0;
    void *shm = mmap(NULL, bytes, PROT_READ | PROT_WRITE, MAP_SHARED | MAP_ANONYMOUS, -1, 0);
    pid_t pid = -1;
    if (shm != MAP_FAILED) {
        memset(shm, 0, head);
        ((child_report *)shm)->status = -1;
        pid = fork();
    }
    if (pid < 0) {
        if (shm != MAP_FAILED) munmap(shm, bytes);
        sl_log(ctx, "evaluate: cannot start a separate process for the factorization (%s); it runs here and "
                    "cannot be interrupted", strerror(errno));
        st = sl_lu_numeric(ctx, lu);
        if (st == SL_OK) st = sl_lu_solve(ctx, lu, b, v);
        return st;
    }
    child_report *rep = shm;
    double *xv = (double *)((char *)shm + head);
    if (pid == 0) {
        /* child: factor, solve, report, leave without running exit handlers
         * (the parent owns every other resource) */
        sl_status cs = sl_lu_numeric(ctx, lu);
        if (cs == SL_OK) cs = sl_lu_solve(ctx, lu, b, xv);
        sl_lu_stats ls;
        sl_lu_get_stats(lu, &ls);
        rep->numeric_seconds = ls.numeric_seconds;
        rep->flops = ls.flops;
        rep->lu_nnz = ls.lu_nnz;
        rep->rcond = ls.rcond;
        rep->umf_peak = ls.umfpack_peak_bytes;
        if (cs != SL_OK) snprintf(rep->err, sizeof(rep->err), "%s", ctx->err);
        rep->status = (int)cs;
        _exit(0);
    }
    double t0 = sl_now();
    int wst = 0;
    for (;;) {
        pid_t w = waitpid(pid, &wst, WNOHANG);
        if (w == pid) break;
        if (w < 0 && errno != EINTR) {
            st = SL_ERR(ctx, SL_EINTERNAL, "waiting for the factorization process: %s", strerror(errno));
            kill(pid, SIGKILL);
            while (waitpid(pid, &wst, 0) < 0 && errno == EINTR) continue;
            goto done;
        }
        if (stop_wanted(ctx, deadline)) {
            kill(pid, SIGKILL);
            while (waitpid(pid, &wst, 0) < 0 && errno == EINTR) continue;
            *abandoned = 1;
            sl_log(ctx, "evaluate: direct solve abandoned after %.1f s: %s", sl_now() - t0,
                   ctx->signal_flag != NULL && *ctx->signal_flag ? "stop or checkpoint requested by a signal"
                                                                : "--walltime reached");
            goto done;
        }
        struct timespec ts = {0, 20000000};
        nanosleep(&ts, NULL);
    }
    if (!WIFEXITED(wst) || rep->status < 0) {
        st = SL_ERR(ctx, SL_ENOMEM,
                    "the factorization process ended abnormally (%s %d), e.g. killed for lack of memory; "
                    "use --memory-limit or another method",
                    WIFSIGNALED(wst) ? "signal" : "status", WIFSIGNALED(wst) ? WTERMSIG(wst) : WEXITSTATUS(wst));
    } else if (rep->status != SL_OK) {
        st = SL_ERR(ctx, (sl_status)rep->status, "%s", rep->err);
    } else {
        memcpy(v, xv, (size_t)n * sizeof(double));
        sl_lu_note_numeric(lu, rep->numeric_seconds, rep->flops);
        sl_log(ctx, "evaluate: UMFPACK numeric %.1f s, %.3g entries in L+U, %.3g flops, peak %.2f GB, rcond %.2g",
               rep->numeric_seconds, rep->lu_nnz, rep->flops, rep->umf_peak / 1e9, rep->rcond);
    }
done:
    munmap(shm, bytes);
    return st;
}

void sl_policy_rows_free(sl_policy_rows *r)
{
    free(r->rowptr);
    free(r->cols);
    free(r->probs);
    free(r->rew);
    free(r->scnt);
    free(r->sdsp);
    memset(r, 0, sizeof(*r));
}

sl_status sl_gather_policy_rows(sl_ctx *ctx, const sl_problem *p, const int32_t *policy, sl_policy_rows *out)
{
    sl_status st = SL_OK;
    const sl_block *b = &p->blk;
    int P = ctx->size, root = ctx->rank == 0;
    int64_t n = p->n_local, N = p->meta.n_states;
    int *cnt = NULL, *dsp = NULL;
    int64_t *rowlen = NULL, *cols = NULL, *all_len = NULL;
    double *probs = NULL, *rew = NULL;
    memset(out, 0, sizeof(*out));
    out->N = N;
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
        SL_ZALLOC(ctx, out->scnt, P, "gather") == NULL || SL_ZALLOC(ctx, out->sdsp, P, "gather") == NULL)
        st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    int ni = (int)n, nz = (int)nnz;
    MPI_Gather(&ni, 1, MPI_INT, out->scnt, 1, MPI_INT, 0, ctx->comm);
    MPI_Gather(&nz, 1, MPI_INT, cnt, 1, MPI_INT, 0, ctx->comm);
    int64_t tot_nz = 0;
    if (root) {
        int64_t sn = 0;
        for (int r = 0; r < P; r++) {
            out->sdsp[r] = (int)sn;
            dsp[r] = (int)tot_nz;
            sn += out->scnt[r];
            tot_nz += cnt[r];
        }
        if (tot_nz > INT32_MAX) st = SL_ERR(ctx, SL_EDATA, "P_pi has %lld entries: too many to gather for a direct solve", (long long)tot_nz);
        else if (SL_ALLOC(ctx, all_len, N, "P_pi") == NULL || SL_ALLOC(ctx, out->cols, tot_nz, "P_pi") == NULL ||
                 SL_ALLOC(ctx, out->probs, tot_nz, "P_pi") == NULL || SL_ALLOC(ctx, out->rew, N, "P_pi") == NULL ||
                 SL_ALLOC(ctx, out->rowptr, N + 1, "P_pi") == NULL)
            st = SL_ENOMEM;
    }
    SL_TRY(sl_agree(ctx, st));
    MPI_Gatherv(rowlen, ni, MPI_INT64_T, all_len, out->scnt, out->sdsp, MPI_INT64_T, 0, ctx->comm);
    MPI_Gatherv(rew, ni, MPI_DOUBLE, out->rew, out->scnt, out->sdsp, MPI_DOUBLE, 0, ctx->comm);
    MPI_Gatherv(cols, nz, MPI_INT64_T, out->cols, cnt, dsp, MPI_INT64_T, 0, ctx->comm);
    MPI_Gatherv(probs, nz, MPI_DOUBLE, out->probs, cnt, dsp, MPI_DOUBLE, 0, ctx->comm);
    if (root) {
        out->rowptr[0] = 0;
        for (int64_t i = 0; i < N; i++) out->rowptr[i + 1] = out->rowptr[i] + all_len[i];
    }
cleanup:
    if (st != SL_OK) sl_policy_rows_free(out);
    free(cnt);
    free(dsp);
    free(rowlen);
    free(cols);
    free(probs);
    free(rew);
    free(all_len);
    return st;
}

sl_status sl_evaluate_direct(sl_ctx *ctx, const sl_problem *p, const int32_t *policy, double memory_limit,
                             double deadline, double *x, int *used_direct, int *abandoned, double *estimate_bytes,
                             void **lu_cache)
{
    sl_status st = SL_OK;
    int root = ctx->rank == 0;
    int64_t n = p->n_local, N = p->meta.n_states;
    sl_policy_rows G;
    double *v = NULL;
    int64_t *arp = NULL, *acol = NULL;
    double *aval = NULL;
    memset(&G, 0, sizeof(G));
    *used_direct = 0;
    *abandoned = 0;
    *estimate_bytes = 0;
    /* once a guard has refused a factorization, stay iterative: no gather
     * and no re-analysis for every later policy */
    int skip = root && sl_lu_declined(*lu_cache);
    MPI_Bcast(&skip, 1, MPI_INT, 0, ctx->comm);
    if (skip) {
        sl_lu_stats ls;
        if (root) sl_lu_get_stats(*lu_cache, &ls);
        MPI_Bcast(root ? &ls.peak_bytes : estimate_bytes, 1, MPI_DOUBLE, 0, ctx->comm);
        if (root) *estimate_bytes = ls.peak_bytes;
        return SL_OK;
    }
    SL_TRY(sl_gather_policy_rows(ctx, p, policy, &G));
    if (root && SL_ALLOC(ctx, v, N, "values") == NULL) st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    int fits = 0;
    if (root) {
        sl_lu *lu = *lu_cache;
        if (lu == NULL) st = sl_lu_new(ctx, &lu);
        *lu_cache = lu;
        if (st == SL_OK)
            st = sl_lu_build_evaluation_matrix(ctx, N, G.rowptr, G.cols, G.probs, p->gamma, &arp, &acol, &aval);
        if (st == SL_OK && (p->gamma == 1.0 || p->eval_average)) st = adapt_system(ctx, p, N, &arp, &acol, &aval);
        int reused = 0;
        /* time guard: the factorization should not take longer than
         * SL_DIRECT_TIME_LIMIT nor run past the deadline */
        double tlim = p->direct_time_limit > 0 ? p->direct_time_limit : INFINITY;
        if (deadline > 0) tlim = fmax(1e-3, fmin(tlim, deadline - sl_now()));
        if (st == SL_OK) sl_lu_set_time_limit(lu, tlim);
        if (st == SL_OK) st = sl_lu_prepare(ctx, lu, N, arp, acol, aval, memory_limit, &fits, &reused, estimate_bytes);
        sl_lu_stats ls;
        if (st == SL_OK) {
            sl_lu_get_stats(lu, &ls);
            sl_log(ctx, "evaluate: UMFPACK (%s ordering%s): estimated %.3g flops (about %.0f s at %.3g flop/s%s), "
                        "peak %.2f GB",
                   sl_lu_ordering(lu), reused ? ", symbolic analysis reused" : "", ls.flops_estimate,
                   ls.seconds_estimate, ls.flop_rate, ls.flop_rate == SL_LU_ASSUMED_FLOP_RATE ? " assumed" : " measured",
                   ls.peak_bytes / 1e9);
            if (!fits && ls.declined_for_time)
                sl_warn(ctx, "exact evaluation would take about %.0f s (UMFPACK's flop estimate %.3g at %.3g flop/s), "
                             "over the limit of %.0f s: %s",
                        ls.seconds_estimate, ls.flops_estimate, ls.flop_rate, tlim,
                        p->direct_fallback ? p->direct_fallback : "evaluating iteratively from now on");
        }
        int ab = 0;
        if (st == SL_OK && fits) st = numeric_abandonable(ctx, lu, N, G.rew, v, deadline, &ab);
        if (ab) fits = 0;
        *abandoned = ab;
    }
    SL_TRY(sl_agree(ctx, st));
    MPI_Bcast(&fits, 1, MPI_INT, 0, ctx->comm);
    MPI_Bcast(abandoned, 1, MPI_INT, 0, ctx->comm);
    MPI_Bcast(estimate_bytes, 1, MPI_DOUBLE, 0, ctx->comm);
    if (fits) {
        MPI_Scatterv(v, G.scnt, G.sdsp, MPI_DOUBLE, x, (int)n, MPI_DOUBLE, 0, ctx->comm);
        *used_direct = 1;
    }
cleanup:
    sl_policy_rows_free(&G);
    free(v);
    free(arp);
    free(acol);
    free(aval);
    return st;
}

sl_status sl_direct_declined(sl_ctx *ctx, double est, double limit, int strict, int warn, const char *instead,
                             const char *doing)
{
    if (est > limit && strict)
        return SL_ERR(ctx, SL_EDATA,
                      "exact evaluation needs about %.2f GB (UMFPACK estimate), over the memory limit of %.2f GB; "
                      "use --memory-limit, another method, or drop --strict-memory to %s",
                      est / 1e9, limit / 1e9, instead);
    if (est > limit && warn)
        sl_warn(ctx, "exact evaluation needs about %.2f GB (UMFPACK estimate), over the limit of %.2f GB: %s", est / 1e9,
                limit / 1e9, doing);
    return SL_OK;
}

sl_status sl_evaluate_iterative(sl_ctx *ctx, const sl_problem *p, const int32_t *policy, double tol,
                                int64_t max_sweeps, double *x, double *y, sl_check *c, int64_t *sweeps)
{
    sl_status st = SL_OK;
    sl_eval_rows rows;
    *sweeps = 0;
    int64_t since = 0, interval = 1;
    /* the sweeps run over the policy's transitions laid out contiguously;
     * the checks (and so the certificate) use the model's rows */
    SL_TRY(sl_agree(ctx, sl_eval_rows_build(ctx, p, policy, &rows)));
    for (;;) {
        sl_sweep_rows(ctx, p, x, &rows);
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
                break;
            }
            memcpy(x, y, (size_t)p->n_local * sizeof(double));
        }
        if (max_sweeps > 0 && *sweeps >= max_sweeps) {
            st = SL_ERR(ctx, SL_ESTOPPED, "iterative evaluation stopped after %lld sweeps at error bound %.3e",
                        (long long)*sweeps, c->value_error);
            break;
        }
    }
cleanup:
    sl_eval_rows_free(&rows);
    return st;
}

/* Prepare a model and the policy of a solution for it: pair offsets of the
 * solution's actions (each must be available in its state) and the values
 * in a vector with room for the halo. Collective. */
static sl_status prepare_with_policy(sl_ctx *ctx, const sl_model *m, const sl_solution *x, sl_problem *p,
                                     int32_t **policy, double **value, const char *what)
{
    sl_status st = SL_OK;
    int32_t *actions = NULL;
    *policy = NULL;
    *value = NULL;
    SL_TRY(sl_problem_from_model(ctx, m, SL_ORDER_AUTO, 0, p));
    /* the rewards the solution was computed with */
    if (x != NULL) SL_TRY(sl_problem_visit_adjust(ctx, p, m, x->info.visit_adjust));
    if (x == NULL || x->action == NULL)
        st = SL_ERR(ctx, SL_EUSAGE, "%s: the solution holds no policy (a values file?)", what);
    else if (strcmp(x->info.model_fingerprint, p->meta.fingerprint) != 0)
        st = SL_ERR(ctx, SL_EDATA, "%s: the solution was computed for a different model (fingerprint %s, model %s)",
                    what, x->info.model_fingerprint, p->meta.fingerprint);
    else if (x->s_begin != p->io.f_begin || x->n != p->io.f_n)
        st = SL_ERR(ctx, SL_EUSAGE, "%s: the solution is distributed differently from the model (load it with "
                                    "sl_solution_load for this model)", what);
    SL_TRY(sl_agree(ctx, st));
    int64_t n = p->n_local, nx = n + p->halo.n_halo;
    if (SL_ALLOC(ctx, *policy, n, "policy") == NULL || SL_ZALLOC(ctx, *value, nx, "values") == NULL)
        st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    /* the solution is in the model's layout, the problem may be renumbered */
    if (SL_ALLOC(ctx, actions, n, "policy") == NULL) st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    SL_TRY(sl_io_from_file(ctx, &p->io, x->value, sizeof(double), *value));
    SL_TRY(sl_io_from_file(ctx, &p->io, x->action, sizeof(int32_t), actions));
    SL_TRY(sl_agree(ctx, sl_policy_offsets(ctx, p, actions, *policy, what)));
cleanup:
    free(actions);
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
    P.direct_time_limit = s->direct_time_limit;
    int abandoned = 0;
    if (!iterative_only) SL_TRY(sl_evaluate_direct(ctx, &P, pol, limit, 0, x, &direct, &abandoned, &est, &lu));
    if (abandoned) SL_TRY(sl_agree(ctx, SL_ERR(ctx, SL_ESTOPPED, "evaluate: stopped by a signal during the direct solve")));
    if (!iterative_only && !direct && est > limit) {
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
        /* |x - v_pi| <= sup|T_pi x - x| / (1 - gamma) (contraction; Puterman 1994, Thm 6.2.3),
         * with the residual accumulated in long double and its rounding bounded:
         * c.sup (double) can underestimate the residual of a solution that is
         * accurate to a few ulps. The division and 1 - gamma are rounded up. */
        c.value_error = sl_policy_residual_bound(ctx, &P, x, pol) / (1.0 - P.gamma) * (1.0 + 4.0 * DBL_EPSILON);
    } else {
        for (int64_t i = 0; i < n; i++) x[i] = 0;
        SL_TRY(sl_evaluate_iterative(ctx, &P, pol, tol, 0, x, y, &c, &sweeps));
    }
    SL_TRY(sl_agree(ctx, sl_solution_new(ctx, P.meta.n_states, P.io.f_begin, P.io.f_n, 0, &res)));
    SL_TRY(sl_io_to_file(ctx, &P.io, x, sizeof(double), res->value));
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
