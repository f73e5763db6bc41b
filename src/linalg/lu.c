/* lu.c - UMFPACK wrapper: analyse, factor and solve CSR systems, reusing the symbolic analysis. */
#include "linalg/lu.h"

#include <float.h>
#include <math.h>
#include <string.h>

#include <umfpack.h>

/* The CSR arrays are handed to umfpack_dl_* as they are. */
_Static_assert(sizeof(SuiteSparse_long) == sizeof(int64_t),
               "SuiteSparse_long must be 64 bits wide");

/* UMFPACK takes compressed columns. The CSR arrays of A are the compressed
 * columns of A^T, so UMFPACK factors M = A^T and we solve M^T x = b
 * (UMFPACK_At). For I - gamma P this is also the better-conditioned side:
 * A is diagonally dominant by rows, so M is by columns, which is what
 * UMFPACK's column threshold pivoting looks at. */
struct sl_lu {
    sl_lu_order order;
    double control[UMFPACK_CONTROL];
    void *symbolic;
    void *numeric;
    int64_t n, nnz;          /* of the analysed pattern; n == 0: none */
    int64_t *ap, *ai;        /* copy of the analysed pattern (rowptr, col) */
    double *ax;              /* values of the last matrix given to sl_lu_factor */
    SuiteSparse_long *wi;    /* solve workspace: n */
    double *w;               /* solve workspace: 5 n (with iterative refinement) */
    double ordering_used;    /* Info[UMFPACK_ORDERING_USED] of the analysis; < 0 none */
    double strategy_used;    /* Info[UMFPACK_STRATEGY_USED] */
    double umf_peak_estimate;/* Info[UMFPACK_PEAK_MEMORY_ESTIMATE] * unit size, bytes */
    double flops_estimate;   /* Info[UMFPACK_FLOPS_ESTIMATE] of the analysis */
    double time_limit;       /* seconds; 0: no time guard */
    double flop_rate;        /* flop/s measured by the last numeric step; 0: none yet */
    int declined;            /* a guard refused the last factorization */
    sl_lu_stats stats;
};

static const char *umf_status_name(SuiteSparse_long s)
{
    switch (s) {
    case UMFPACK_OK: return "ok";
    case UMFPACK_WARNING_singular_matrix: return "singular matrix";
    case UMFPACK_WARNING_determinant_underflow: return "determinant underflow";
    case UMFPACK_WARNING_determinant_overflow: return "determinant overflow";
    case UMFPACK_ERROR_out_of_memory: return "out of memory";
    case UMFPACK_ERROR_invalid_Numeric_object: return "invalid Numeric object";
    case UMFPACK_ERROR_invalid_Symbolic_object: return "invalid Symbolic object";
    case UMFPACK_ERROR_argument_missing: return "argument missing";
    case UMFPACK_ERROR_n_nonpositive: return "n not positive";
    case UMFPACK_ERROR_invalid_matrix: return "invalid matrix";
    case UMFPACK_ERROR_different_pattern: return "different pattern";
    case UMFPACK_ERROR_invalid_system: return "invalid system";
    case UMFPACK_ERROR_invalid_permutation: return "invalid permutation";
    case UMFPACK_ERROR_file_IO: return "file I/O error";
    case UMFPACK_ERROR_ordering_failed: return "ordering failed";
    case UMFPACK_ERROR_internal_error: return "internal error";
    default: return "unknown status";
    }
}

/* Map a failing UMFPACK status (anything but UMFPACK_OK) to ours. */
static sl_status umf_fail(sl_ctx *ctx, SuiteSparse_long s, const char *step, int64_t n)
{
    sl_status code = SL_EINTERNAL;
    if (s == UMFPACK_ERROR_out_of_memory) code = SL_ENOMEM;
    else if (s == UMFPACK_ERROR_invalid_matrix || s == UMFPACK_WARNING_singular_matrix)
        code = SL_EDATA;
    return SL_ERR(ctx, code, "UMFPACK %s of a %lld x %lld matrix failed: %s (status %ld)",
                  step, (long long)n, (long long)n, umf_status_name(s), (long)s);
}

static const char *ordering_name(double ordering, double strategy)
{
    if (ordering < 0) return "";
    switch ((int)ordering) {
    case UMFPACK_ORDERING_METIS: return "metis";
    case UMFPACK_ORDERING_AMD:
        return (int)strategy == UMFPACK_STRATEGY_SYMMETRIC ? "amd" : "colamd";
    case UMFPACK_ORDERING_NONE: return "none";
    case UMFPACK_ORDERING_GIVEN: return "given";
    case UMFPACK_ORDERING_CHOLMOD: return "cholmod";
    case UMFPACK_ORDERING_BEST: return "best";
    case UMFPACK_ORDERING_USER: return "user";
    default: return "unknown";
    }
}

/* Check the CSR invariants of the file header. prob != 0: values must lie in
 * [0, 1] (a transition matrix), otherwise only be finite. */
static sl_status check_csr(sl_ctx *ctx, const char *what, int64_t n, const int64_t *rowptr,
                           const int64_t *col, const double *val, int prob)
{
    if (n <= 0)
        return SL_ERR(ctx, SL_EDATA, "%s: dimension %lld is not positive", what, (long long)n);
    if (rowptr == NULL || col == NULL || val == NULL)
        return SL_ERR(ctx, SL_EINTERNAL, "%s: NULL array", what);
    if (rowptr[0] != 0)
        return SL_ERR(ctx, SL_EDATA, "%s: rowptr[0] is %lld, not 0", what, (long long)rowptr[0]);
    for (int64_t i = 0; i < n; i++) {
        if (rowptr[i + 1] < rowptr[i])
            return SL_ERR(ctx, SL_EDATA, "%s: rowptr decreases at row %lld (%lld -> %lld)", what,
                          (long long)i, (long long)rowptr[i], (long long)rowptr[i + 1]);
        int64_t prev = -1;
        for (int64_t k = rowptr[i]; k < rowptr[i + 1]; k++) {
            if (col[k] < 0 || col[k] >= n)
                return SL_ERR(ctx, SL_EDATA, "%s: row %lld has column %lld outside [0, %lld)",
                              what, (long long)i, (long long)col[k], (long long)n);
            if (col[k] <= prev)
                return SL_ERR(ctx, SL_EDATA,
                              "%s: columns of row %lld are not strictly increasing (%lld after %lld)",
                              what, (long long)i, (long long)col[k], (long long)prev);
            prev = col[k];
            if (prob ? !(val[k] >= 0.0 && val[k] <= 1.0) : !isfinite(val[k]))
                return SL_ERR(ctx, SL_EDATA, "%s: entry (%lld, %lld) = %g is not %s", what,
                              (long long)i, (long long)col[k], val[k],
                              prob ? "a probability in [0, 1]" : "finite");
        }
    }
    return SL_OK;
}

sl_status sl_lu_new(sl_ctx *ctx, sl_lu **out)
{
    *out = NULL;
    sl_lu *lu;
    if (SL_ZALLOC(ctx, lu, 1, "LU handle") == NULL) return SL_ENOMEM;
    umfpack_dl_defaults(lu->control);
    lu->order = SL_LU_ORDER_AUTO;
    lu->ordering_used = -1;
    lu->strategy_used = -1;
    *out = lu;
    return SL_OK;
}

static void drop_numeric(sl_lu *lu)
{
    if (lu->numeric != NULL) umfpack_dl_free_numeric(&lu->numeric);
    lu->numeric = NULL;
}

/* Forget the analysis (and with it the factorization and the copy of A). */
static void drop_analysis(sl_lu *lu)
{
    drop_numeric(lu);
    if (lu->symbolic != NULL) umfpack_dl_free_symbolic(&lu->symbolic);
    lu->symbolic = NULL;
    free(lu->ap);
    free(lu->ai);
    free(lu->ax);
    free(lu->wi);
    free(lu->w);
    lu->ap = lu->ai = NULL;
    lu->ax = lu->w = NULL;
    lu->wi = NULL;
    lu->n = lu->nnz = 0;
    lu->ordering_used = lu->strategy_used = -1;
    lu->umf_peak_estimate = 0.0;
}

void sl_lu_free(sl_lu **plu)
{
    if (plu == NULL || *plu == NULL) return;
    drop_analysis(*plu);
    free(*plu);
    *plu = NULL;
}

sl_status sl_lu_set_ordering(sl_ctx *ctx, sl_lu *lu, sl_lu_order order)
{
    if (order != SL_LU_ORDER_AUTO && order != SL_LU_ORDER_AMD && order != SL_LU_ORDER_METIS)
        return SL_ERR(ctx, SL_EINTERNAL, "unknown LU ordering %d", (int)order);
    if (order != lu->order) drop_analysis(lu);
    lu->order = order;
    return SL_OK;
}

const char *sl_lu_ordering(const sl_lu *lu)
{
    return ordering_name(lu->ordering_used, lu->strategy_used);
}

void sl_lu_get_stats(const sl_lu *lu, sl_lu_stats *stats)
{
    *stats = lu->stats;
}

static int same_pattern(const sl_lu *lu, int64_t n, const int64_t *rowptr, const int64_t *col)
{
    if (lu->symbolic == NULL || lu->n != n || lu->nnz != rowptr[n]) return 0;
    return memcmp(lu->ap, rowptr, (size_t)(n + 1) * sizeof(*rowptr)) == 0 &&
           memcmp(lu->ai, col, (size_t)lu->nnz * sizeof(*col)) == 0;
}

/* Symbolic analysis of the stored pattern with the requested ordering. */
static sl_status analyse(sl_ctx *ctx, sl_lu *lu, double info[UMFPACK_INFO])
{
    const SuiteSparse_long n = (SuiteSparse_long)lu->n;
    const SuiteSparse_long *ap = (const SuiteSparse_long *)lu->ap;
    const SuiteSparse_long *ai = (const SuiteSparse_long *)lu->ai;
    lu->control[UMFPACK_ORDERING] =
        lu->order == SL_LU_ORDER_AMD ? UMFPACK_ORDERING_AMD : UMFPACK_ORDERING_METIS;
    /* values are not passed: the analysis then depends on the pattern only,
     * which is what makes reusing it for new values exact */
    SuiteSparse_long s = umfpack_dl_symbolic(n, n, ap, ai, NULL, &lu->symbolic, lu->control, info);
    if (s != UMFPACK_OK && lu->order == SL_LU_ORDER_AUTO && s != UMFPACK_ERROR_invalid_matrix) {
        if (lu->symbolic != NULL) umfpack_dl_free_symbolic(&lu->symbolic);
        lu->symbolic = NULL;
        if (ctx->verbosity >= 2)
            sl_log(ctx, "lu: METIS ordering failed (%s); retrying with AMD", umf_status_name(s));
        lu->control[UMFPACK_ORDERING] = UMFPACK_ORDERING_AMD;
        s = umfpack_dl_symbolic(n, n, ap, ai, NULL, &lu->symbolic, lu->control, info);
    }
    if (s != UMFPACK_OK) {
        if (lu->symbolic != NULL) umfpack_dl_free_symbolic(&lu->symbolic);
        lu->symbolic = NULL;
        return umf_fail(ctx, s, "symbolic analysis", lu->n);
    }
    lu->ordering_used = info[UMFPACK_ORDERING_USED];
    lu->strategy_used = info[UMFPACK_STRATEGY_USED];
    lu->umf_peak_estimate = info[UMFPACK_PEAK_MEMORY_ESTIMATE] * info[UMFPACK_SIZE_OF_UNIT];
    lu->flops_estimate = info[UMFPACK_FLOPS_ESTIMATE];
    return SL_OK;
}

void sl_lu_set_time_limit(sl_lu *lu, double seconds) { lu->time_limit = seconds > 0 ? seconds : 0; }

int sl_lu_declined(const sl_lu *lu) { return lu != NULL && lu->declined; }

sl_status sl_lu_prepare(sl_ctx *ctx, sl_lu *lu, int64_t n, const int64_t *rowptr, const int64_t *col,
                        const double *val, double memory_limit, int *fits, int *reused, double *estimate_bytes)
{
    sl_status st = SL_OK;
    double info[UMFPACK_INFO];
    if (fits != NULL) *fits = 0;
    if (reused != NULL) *reused = 0;
    if (estimate_bytes != NULL) *estimate_bytes = 0.0;
    memset(&lu->stats, 0, sizeof(lu->stats));
    drop_numeric(lu);

    SL_TRY(check_csr(ctx, "LU matrix", n, rowptr, col, val, 0));
    const int64_t nnz = rowptr[n];

    const int reuse = same_pattern(lu, n, rowptr, col);
    if (reuse) {
        memcpy(lu->ax, val, (size_t)nnz * sizeof(*val));
    } else {
        drop_analysis(lu);
        if (SL_ALLOC(ctx, lu->ap, n + 1, "LU pattern (row pointers)") == NULL ||
            SL_ALLOC(ctx, lu->ai, nnz, "LU pattern (columns)") == NULL ||
            SL_ALLOC(ctx, lu->ax, nnz, "LU values") == NULL ||
            SL_ALLOC(ctx, lu->wi, n, "LU solve workspace") == NULL ||
            SL_ALLOC(ctx, lu->w, 5 * n, "LU solve workspace") == NULL) {
            st = SL_ENOMEM;
            goto cleanup;
        }
        memcpy(lu->ap, rowptr, (size_t)(n + 1) * sizeof(*rowptr));
        memcpy(lu->ai, col, (size_t)nnz * sizeof(*col));
        memcpy(lu->ax, val, (size_t)nnz * sizeof(*val));
        lu->n = n;
        lu->nnz = nnz;
        const double t0 = sl_now();
        SL_TRY(analyse(ctx, lu, info));
        lu->stats.symbolic_seconds = sl_now() - t0;
    }
    if (reused != NULL) *reused = reuse;
    lu->stats.reused_symbolic = reuse;

    /* what this handle holds besides UMFPACK's objects: the copy of A and
     * the solve workspace (Wi: n integers, W: 5 n doubles) */
    const double own = (double)(n + 1) * sizeof(int64_t) + (double)nnz * sizeof(int64_t) +
                       (double)nnz * sizeof(double) + (double)n * sizeof(SuiteSparse_long) +
                       5.0 * (double)n * sizeof(double);
    const double estimate = lu->umf_peak_estimate + own;
    lu->stats.peak_bytes = estimate;
    if (estimate_bytes != NULL) *estimate_bytes = estimate;
    /* time guard: UMFPACK's flop estimate from the symbolic step at the rate
     * the last numeric step of this handle achieved, or at an assumed
     * SL_LU_ASSUMED_FLOP_RATE before any (a rule of thumb for one core,
     * common practice, no source) */
    const double rate = lu->flop_rate > 0 ? lu->flop_rate : SL_LU_ASSUMED_FLOP_RATE;
    lu->stats.flops_estimate = lu->flops_estimate;
    lu->stats.seconds_estimate = lu->flops_estimate / rate;
    lu->stats.flop_rate = rate;
    const int fit_mem = !(memory_limit > 0.0) || estimate <= memory_limit;
    const int fit_time = !(lu->time_limit > 0.0) || lu->stats.seconds_estimate <= lu->time_limit;
    const int fit = fit_mem && fit_time;
    lu->declined = !fit;
    lu->stats.declined_for_time = fit_mem && !fit_time;
    if (ctx->verbosity >= 2)
        sl_log(ctx, "lu: n %lld, nnz %lld, ordering %s, symbolic %s %.3f s, "
                    "estimated peak %.3g GB%s",
               (long long)n, (long long)nnz, sl_lu_ordering(lu), reuse ? "reused" : "analysed",
               lu->stats.symbolic_seconds, estimate / 1e9,
               fit ? "" : fit_mem ? " (over the time limit: not factored)" : " (over the memory limit: not factored)");
    if (fits != NULL) *fits = fit;

cleanup:
    if (st != SL_OK && lu->symbolic == NULL) drop_analysis(lu);
    return st;
}

sl_status sl_lu_numeric(sl_ctx *ctx, sl_lu *lu)
{
    sl_status st = SL_OK;
    double info[UMFPACK_INFO];
    const int64_t n = lu->n;
    drop_numeric(lu);
    if (lu->symbolic == NULL) return SL_ERR(ctx, SL_EINTERNAL, "LU numeric step without an analysis");
    const double t1 = sl_now();
    SuiteSparse_long s = umfpack_dl_numeric((const SuiteSparse_long *)lu->ap,
                                            (const SuiteSparse_long *)lu->ai, lu->ax,
                                            lu->symbolic, &lu->numeric, lu->control, info);
    lu->stats.numeric_seconds = sl_now() - t1;
    if (s == UMFPACK_WARNING_singular_matrix) {
        SL_FAIL(SL_EDATA,
                "matrix is singular: %.0f of %lld pivots are exactly zero "
                "(UMFPACK numeric factorization, status %ld)",
                (double)n - info[UMFPACK_UDIAG_NZ], (long long)n, (long)s);
    }
    if (s != UMFPACK_OK) {
        st = umf_fail(ctx, s, "numeric factorization", n);
        goto cleanup;
    }
    const double rcond = info[UMFPACK_RCOND];
    /* rcond = min|u_ii| / max|u_ii|. For a matrix that is singular in exact
     * arithmetic, such as I - P for a stochastic P, rounding usually leaves a
     * tiny nonzero pivot instead of an exact zero; a pivot ratio below
     * n * eps is at the rounding level of an n-step elimination and is
     * treated as zero. (Measured on random I - P, n = 60..5000: singular
     * gave 2.5e-16..4.7e-14, gamma = 1 - 1e-9 gave >= 5e-11.) */
    if (!(rcond >= (double)n * DBL_EPSILON)) {
        SL_FAIL(SL_EDATA,
                "matrix is numerically singular: UMFPACK's reciprocal condition estimate "
                "%.3g (min/max |pivot|) is below n * machine epsilon = %.3g; with discount 1 "
                "every recurrent class of the policy needs an exit",
                rcond, (double)n * DBL_EPSILON);
    }
    lu->stats.lu_nnz = info[UMFPACK_LNZ] + info[UMFPACK_UNZ] - (double)n;
    lu->stats.umfpack_peak_bytes = info[UMFPACK_PEAK_MEMORY] * info[UMFPACK_SIZE_OF_UNIT];
    lu->stats.rcond = rcond;
    /* measured rate for the next time estimate (too short a run says little) */
    lu->stats.flops = info[UMFPACK_FLOPS];
    sl_lu_note_numeric(lu, lu->stats.numeric_seconds, info[UMFPACK_FLOPS]);
    if (ctx->verbosity >= 2)
        sl_log(ctx, "lu: numeric %.3f s, L+U %.4g entries, UMFPACK peak %.3g GB, rcond %.3g",
               lu->stats.numeric_seconds, lu->stats.lu_nnz, lu->stats.umfpack_peak_bytes / 1e9,
               rcond);

cleanup:
    if (st != SL_OK) {
        drop_numeric(lu);
        lu->stats.lu_nnz = lu->stats.rcond = lu->stats.umfpack_peak_bytes = 0.0;
        /* a failed analysis leaves a pattern copy without its analysis */
        if (lu->symbolic == NULL) drop_analysis(lu);
    }
    return st;
}

sl_status sl_lu_factor(sl_ctx *ctx, sl_lu *lu, int64_t n, const int64_t *rowptr,
                       const int64_t *col, const double *val, double memory_limit,
                       int *fits, int *reused, double *estimate_bytes)
{
    int fit = 0;
    if (fits != NULL) *fits = 0;
    sl_status st = sl_lu_prepare(ctx, lu, n, rowptr, col, val, memory_limit, &fit, reused, estimate_bytes);
    if (st != SL_OK || !fit) return st;
    st = sl_lu_numeric(ctx, lu);
    if (st == SL_OK && fits != NULL) *fits = 1;
    return st;
}

void sl_lu_note_numeric(sl_lu *lu, double seconds, double flops)
{
    /* calibrate the estimate, not the count: UMFPACK's symbolic flop
     * estimate is an upper bound that can exceed the flops done many times
     * over, so the rate that predicts time is estimate / seconds. Runs under
     * a second or under 1e9 estimated flops are mostly overhead (start-up,
     * page faults, a loaded machine) and say nothing about the rate. */
    (void)flops;
    if (seconds >= 1.0 && lu->flops_estimate >= 1e9) lu->flop_rate = lu->flops_estimate / seconds;
}

sl_status sl_lu_solve(sl_ctx *ctx, sl_lu *lu, const double *b, double *x)
{
    double info[UMFPACK_INFO];
    if (lu->numeric == NULL)
        return SL_ERR(ctx, SL_EINTERNAL,
                      "LU solve without a factorization (none made, it did not fit, or it failed)");
    if (b == NULL || x == NULL || (const double *)x == b)
        return SL_ERR(ctx, SL_EINTERNAL, "LU solve: right-hand side and solution must be "
                                         "distinct arrays");
    /* UMFPACK holds A^T (see struct sl_lu), so A x = b is its transposed system */
    SuiteSparse_long s = umfpack_dl_wsolve(UMFPACK_At, (const SuiteSparse_long *)lu->ap,
                                           (const SuiteSparse_long *)lu->ai, lu->ax, x, b,
                                           lu->numeric, lu->control, info, lu->wi, lu->w);
    if (s != UMFPACK_OK) return umf_fail(ctx, s, "solve", lu->n);
    for (int64_t i = 0; i < lu->n; i++) {
        if (!isfinite(x[i]))
            return SL_ERR(ctx, SL_EDATA, "LU solve: solution entry %lld is %g", (long long)i,
                          x[i]);
    }
    return SL_OK;
}

sl_status sl_lu_build_evaluation_matrix(sl_ctx *ctx, int64_t n, const int64_t *rowptr,
                                        const int64_t *col, const double *prob, double gamma,
                                        int64_t **out_rowptr, int64_t **out_col,
                                        double **out_val)
{
    sl_status st = SL_OK;
    int64_t *rp = NULL, *ci = NULL;
    double *v = NULL;
    *out_rowptr = NULL;
    *out_col = NULL;
    *out_val = NULL;
    if (!(gamma >= 0.0 && gamma <= 1.0))
        SL_FAIL(SL_EDATA, "evaluation matrix: discount %g is not in [0, 1]", gamma);
    SL_TRY(check_csr(ctx, "transition matrix", n, rowptr, col, prob, 1));

    if (SL_ALLOC(ctx, rp, n + 1, "evaluation matrix (row pointers)") == NULL) {
        st = SL_ENOMEM;
        goto cleanup;
    }
    rp[0] = 0;
    for (int64_t i = 0; i < n; i++) {
        int has_diag = 0;
        for (int64_t k = rowptr[i]; k < rowptr[i + 1] && col[k] <= i; k++)
            has_diag |= col[k] == i;
        /* no overflow: rp[i] <= rowptr[i] + i < INT64_MAX for any array that fits in memory */
        rp[i + 1] = rp[i] + (rowptr[i + 1] - rowptr[i]) + !has_diag;
    }
    const int64_t nnz = rp[n];
    if (SL_ALLOC(ctx, ci, nnz, "evaluation matrix (columns)") == NULL ||
        SL_ALLOC(ctx, v, nnz, "evaluation matrix (values)") == NULL) {
        st = SL_ENOMEM;
        goto cleanup;
    }
    for (int64_t i = 0; i < n; i++) {
        int64_t o = rp[i];
        int placed = 0;
        for (int64_t k = rowptr[i]; k < rowptr[i + 1]; k++) {
            if (!placed && col[k] > i) {
                ci[o] = i;
                v[o++] = 1.0;
                placed = 1;
            }
            ci[o] = col[k];
            if (col[k] == i) {
                v[o++] = 1.0 - gamma * prob[k];
                placed = 1;
            } else {
                v[o++] = -gamma * prob[k];
            }
        }
        if (!placed) {
            ci[o] = i;
            v[o++] = 1.0;
        }
        if (o != rp[i + 1]) SL_FAIL(SL_EINTERNAL, "evaluation matrix: row %lld miscounted",
                                    (long long)i);
    }
    *out_rowptr = rp;
    *out_col = ci;
    *out_val = v;
    rp = ci = NULL;
    v = NULL;

cleanup:
    free(rp);
    free(ci);
    free(v);
    return st;
}
