/* test_lu.c - unit tests of the UMFPACK wrapper (src/linalg/lu.c). */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <math.h>
#include <string.h>

#include "linalg/lu.h"

#include <SuiteSparse_config.h>

/* ---- helpers ------------------------------------------------------------ */

typedef struct csr {
    int64_t n;
    int64_t *rowptr, *col;
    double *val;
} csr;

static void csr_free(csr *a)
{
    free(a->rowptr);
    free(a->col);
    free(a->val);
    memset(a, 0, sizeof(*a));
}

/* CSR of a dense row-major n x n matrix; zeros are left out. */
static csr csr_from_dense(int64_t n, const double *d)
{
    csr a = {n, NULL, NULL, NULL};
    int64_t nnz = 0;
    for (int64_t k = 0; k < n * n; k++) nnz += d[k] != 0.0;
    a.rowptr = malloc((size_t)(n + 1) * sizeof(int64_t));
    a.col = malloc((size_t)(nnz ? nnz : 1) * sizeof(int64_t));
    a.val = malloc((size_t)(nnz ? nnz : 1) * sizeof(double));
    assert_non_null(a.rowptr);
    assert_non_null(a.col);
    assert_non_null(a.val);
    int64_t o = 0;
    a.rowptr[0] = 0;
    for (int64_t i = 0; i < n; i++) {
        for (int64_t j = 0; j < n; j++) {
            if (d[i * n + j] != 0.0) {
                a.col[o] = j;
                a.val[o++] = d[i * n + j];
            }
        }
        a.rowptr[i + 1] = o;
    }
    return a;
}

static void csr_matvec(const csr *a, const double *x, double *y)
{
    for (int64_t i = 0; i < a->n; i++) {
        double s = 0.0;
        for (int64_t k = a->rowptr[i]; k < a->rowptr[i + 1]; k++) s += a->val[k] * x[a->col[k]];
        y[i] = s;
    }
}

static double norm_inf(int64_t n, const double *x)
{
    double m = 0.0;
    for (int64_t i = 0; i < n; i++) m = fmax(m, fabs(x[i]));
    return m;
}

/* ||A||_inf: largest absolute row sum */
static double csr_norm_inf(const csr *a)
{
    double m = 0.0;
    for (int64_t i = 0; i < a->n; i++) {
        double s = 0.0;
        for (int64_t k = a->rowptr[i]; k < a->rowptr[i + 1]; k++) s += fabs(a->val[k]);
        m = fmax(m, s);
    }
    return m;
}

/* uniform in [0, 1) from a counter-based generator */
static double urand(uint64_t *state)
{
    *state = sl_mix64(*state);
    return (double)(*state >> 11) * 0x1.0p-53;
}

/* Random stochastic P: row i has 1..max_succ distinct successors drawn from
 * [i - band, i + band] (clipped; band <= 0: anywhere), weights normalised. */
static csr random_stochastic(int64_t n, int max_succ, int64_t band, uint64_t seed)
{
    csr p = {n, NULL, NULL, NULL};
    p.rowptr = malloc((size_t)(n + 1) * sizeof(int64_t));
    p.col = malloc((size_t)(n * max_succ) * sizeof(int64_t));
    p.val = malloc((size_t)(n * max_succ) * sizeof(double));
    assert_non_null(p.rowptr);
    assert_non_null(p.col);
    assert_non_null(p.val);
    uint64_t rs = seed;
    int64_t o = 0;
    p.rowptr[0] = 0;
    for (int64_t i = 0; i < n; i++) {
        int64_t lo = band > 0 ? (i - band < 0 ? 0 : i - band) : 0;
        int64_t hi = band > 0 ? (i + band >= n ? n - 1 : i + band) : n - 1;
        int k = 1 + (int)(urand(&rs) * max_succ);
        int64_t start = o;
        for (int t = 0; t < k; t++) {
            int64_t j = lo + (int64_t)(urand(&rs) * (double)(hi - lo + 1));
            /* insertion into the sorted row, skipping duplicates */
            int64_t pos = o;
            while (pos > start && p.col[pos - 1] > j) pos--;
            if (pos > start && p.col[pos - 1] == j) continue;
            memmove(p.col + pos + 1, p.col + pos, (size_t)(o - pos) * sizeof(int64_t));
            p.col[pos] = j;
            o++;
        }
        double sum = 0.0;
        for (int64_t q = start; q < o; q++) sum += p.val[q] = 0.05 + urand(&rs);
        for (int64_t q = start; q < o; q++) p.val[q] /= sum;
        p.rowptr[i + 1] = o;
    }
    return p;
}

/* Independent reference: dense Gaussian elimination with partial pivoting on
 * a row-major copy of A; returns 0 if a pivot is exactly zero. */
static int dense_solve(const csr *a, const double *b, double *x)
{
    const int64_t n = a->n;
    double *d = calloc((size_t)(n * n), sizeof(double));
    double *r = malloc((size_t)n * sizeof(double));
    assert_non_null(d);
    assert_non_null(r);
    for (int64_t i = 0; i < n; i++) {
        for (int64_t k = a->rowptr[i]; k < a->rowptr[i + 1]; k++) d[i * n + a->col[k]] = a->val[k];
        r[i] = b[i];
    }
    int ok = 1;
    for (int64_t c = 0; c < n && ok; c++) {
        int64_t piv = c;
        for (int64_t i = c + 1; i < n; i++)
            if (fabs(d[i * n + c]) > fabs(d[piv * n + c])) piv = i;
        if (d[piv * n + c] == 0.0) {
            ok = 0;
            break;
        }
        if (piv != c) {
            for (int64_t j = 0; j < n; j++) {
                double t = d[c * n + j];
                d[c * n + j] = d[piv * n + j];
                d[piv * n + j] = t;
            }
            double t = r[c];
            r[c] = r[piv];
            r[piv] = t;
        }
        for (int64_t i = c + 1; i < n; i++) {
            double f = d[i * n + c] / d[c * n + c];
            if (f == 0.0) continue;
            for (int64_t j = c; j < n; j++) d[i * n + j] -= f * d[c * n + j];
            r[i] -= f * r[c];
        }
    }
    for (int64_t i = n - 1; i >= 0 && ok; i--) {
        double s = r[i];
        for (int64_t j = i + 1; j < n; j++) s -= d[i * n + j] * x[j];
        x[i] = s / d[i * n + i];
    }
    free(d);
    free(r);
    return ok;
}

static int message_has(const sl_ctx *ctx, const char *word)
{
    return strstr(sl_ctx_message(ctx), word) != NULL;
}

/* ---- tests -------------------------------------------------------------- */

static void test_free_null(void **state)
{
    sl_ctx *ctx = *state;
    sl_lu_free(NULL);
    sl_lu *lu = NULL;
    sl_lu_free(&lu);
    assert_int_equal(sl_lu_new(ctx, &lu), SL_OK);
    assert_non_null(lu);
    assert_string_equal(sl_lu_ordering(lu), "");
    sl_lu_stats stats;
    sl_lu_get_stats(lu, &stats);
    assert_true(stats.lu_nnz == 0.0 && stats.reused_symbolic == 0);
    sl_lu_free(&lu);
    assert_null(lu);
}

/* 5 x 5 non-symmetric; entries and solution are small integers and halves,
 * so b = A x_true is exact in double precision. */
static const double A5[25] = {
    4, -1, 0, 2, 0,
    0, 3, -2, 0, 1,
    1, 0, 5, 0, 0,
    0, 0, 1, 6, -3,
    2, 0, 0, 0, 7,
};
static const double X5[5] = {1, -2, 3, 0.5, -1};

static void test_known_solution_nonsymmetric(void **state)
{
    sl_ctx *ctx = *state;
    csr a = csr_from_dense(5, A5);
    double b[5], bt[5], x[5];
    csr_matvec(&a, X5, b);
    /* A^T x_true differs from b, so a solve with the transpose (UMFPACK
     * reads our CSR as the compressed columns of A^T) cannot return x_true */
    for (int i = 0; i < 5; i++) {
        bt[i] = 0.0;
        for (int j = 0; j < 5; j++) bt[i] += A5[j * 5 + i] * X5[j];
    }
    double diff = 0.0;
    for (int i = 0; i < 5; i++) diff = fmax(diff, fabs(bt[i] - b[i]));
    assert_true(diff > 1.0);

    sl_lu *lu = NULL;
    assert_int_equal(sl_lu_new(ctx, &lu), SL_OK);
    int fits = -1, reused = -1;
    double est = -1.0;
    assert_int_equal(sl_lu_factor(ctx, lu, 5, a.rowptr, a.col, a.val, 0.0, &fits, &reused, &est),
                     SL_OK);
    assert_int_equal(fits, 1);
    assert_int_equal(reused, 0);
    assert_true(est > 0.0);
    assert_int_equal(sl_lu_solve(ctx, lu, b, x), SL_OK);
    for (int i = 0; i < 5; i++) assert_true(fabs(x[i] - X5[i]) <= 1e-13);

    sl_lu_stats stats;
    sl_lu_get_stats(lu, &stats);
    assert_true(stats.lu_nnz >= (double)a.rowptr[5] - 5.0); /* L+U holds at least A's off-diagonal entries */
    assert_true(stats.peak_bytes == est);
    assert_true(stats.rcond > 0.0 && stats.rcond <= 1.0);
    assert_true(stats.umfpack_peak_bytes > 0.0);
    assert_int_equal(stats.reused_symbolic, 0);
    const char *ord = sl_lu_ordering(lu);
    assert_true(strcmp(ord, "metis") == 0 || strcmp(ord, "amd") == 0 ||
                strcmp(ord, "colamd") == 0 || strcmp(ord, "none") == 0);
    sl_lu_free(&lu);
    csr_free(&a);
}

/* Zero diagonal: the factorization must pivot off the diagonal. */
static void test_zero_diagonal_needs_pivoting(void **state)
{
    sl_ctx *ctx = *state;
    const double d[9] = {0, 2, 1, 3, 0, 0, 1, 1, 0}; /* det = 3 */
    const double xt[3] = {1, 2, 3};
    csr a = csr_from_dense(3, d);
    double b[3], x[3];
    csr_matvec(&a, xt, b);
    sl_lu *lu = NULL;
    assert_int_equal(sl_lu_new(ctx, &lu), SL_OK);
    assert_int_equal(sl_lu_factor(ctx, lu, 3, a.rowptr, a.col, a.val, 0.0, NULL, NULL, NULL),
                     SL_OK);
    assert_int_equal(sl_lu_solve(ctx, lu, b, x), SL_OK);
    for (int i = 0; i < 3; i++) assert_true(fabs(x[i] - xt[i]) <= 1e-14);
    sl_lu_free(&lu);
    csr_free(&a);
}

static void test_symbolic_reuse(void **state)
{
    sl_ctx *ctx = *state;
    csr a = csr_from_dense(5, A5);
    sl_lu *lu = NULL;
    double b[5], x[5];
    int fits, reused;
    sl_lu_stats stats;
    assert_int_equal(sl_lu_new(ctx, &lu), SL_OK);
    assert_int_equal(sl_lu_factor(ctx, lu, 5, a.rowptr, a.col, a.val, 0.0, &fits, &reused, NULL),
                     SL_OK);
    assert_int_equal(reused, 0);

    /* same pattern in fresh arrays, different values: reused, and solved
     * with the NEW values (b2 = A2 x_true while A1 x_true != b2) */
    csr a2 = csr_from_dense(5, A5);
    for (int64_t k = 0; k < a2.rowptr[5]; k++)
        a2.val[k] = a2.val[k] * (1.0 + 0.25 * (double)(k % 3)) + (a2.col[k] == 4 ? 1.0 : 0.0);
    double b1[5];
    csr_matvec(&a2, X5, b);
    csr_matvec(&a, X5, b1);
    assert_true(fabs(b[0] - b1[0]) + fabs(b[4] - b1[4]) > 0.1);
    assert_int_equal(sl_lu_factor(ctx, lu, 5, a2.rowptr, a2.col, a2.val, 0.0, &fits, &reused,
                                  NULL), SL_OK);
    assert_int_equal(fits, 1);
    assert_int_equal(reused, 1);
    sl_lu_get_stats(lu, &stats);
    assert_int_equal(stats.reused_symbolic, 1);
    assert_true(stats.symbolic_seconds == 0.0);
    assert_int_equal(sl_lu_solve(ctx, lu, b, x), SL_OK);
    for (int i = 0; i < 5; i++) assert_true(fabs(x[i] - X5[i]) <= 1e-12);

    /* pattern change (one more entry, same n): analysed afresh */
    double d3[25];
    memcpy(d3, A5, sizeof(d3));
    d3[1 * 5 + 0] = 0.5;
    csr a3 = csr_from_dense(5, d3);
    assert_int_equal(a3.rowptr[5], a.rowptr[5] + 1);
    csr_matvec(&a3, X5, b);
    assert_int_equal(sl_lu_factor(ctx, lu, 5, a3.rowptr, a3.col, a3.val, 0.0, &fits, &reused,
                                  NULL), SL_OK);
    assert_int_equal(reused, 0);
    sl_lu_get_stats(lu, &stats);
    assert_int_equal(stats.reused_symbolic, 0);
    assert_int_equal(sl_lu_solve(ctx, lu, b, x), SL_OK);
    for (int i = 0; i < 5; i++) assert_true(fabs(x[i] - X5[i]) <= 1e-12);

    /* same entry count but a column moved: analysed afresh */
    double d4[25];
    memcpy(d4, A5, sizeof(d4));
    d4[1 * 5 + 4] = 0.0;
    d4[1 * 5 + 3] = 1.0;
    csr a4 = csr_from_dense(5, d4);
    assert_int_equal(a4.rowptr[5], a.rowptr[5]);
    csr_matvec(&a4, X5, b);
    assert_int_equal(sl_lu_factor(ctx, lu, 5, a4.rowptr, a4.col, a4.val, 0.0, &fits, &reused,
                                  NULL), SL_OK);
    assert_int_equal(reused, 0);
    assert_int_equal(sl_lu_solve(ctx, lu, b, x), SL_OK);
    for (int i = 0; i < 5; i++) assert_true(fabs(x[i] - X5[i]) <= 1e-12);

    /* only the last pattern is remembered */
    assert_int_equal(sl_lu_factor(ctx, lu, 5, a.rowptr, a.col, a.val, 0.0, &fits, &reused, NULL),
                     SL_OK);
    assert_int_equal(reused, 0);
    assert_int_equal(sl_lu_factor(ctx, lu, 5, a.rowptr, a.col, a.val, 0.0, &fits, &reused, NULL),
                     SL_OK);
    assert_int_equal(reused, 1);

    /* changing the ordering discards the analysis */
    assert_int_equal(sl_lu_set_ordering(ctx, lu, SL_LU_ORDER_AMD), SL_OK);
    assert_int_equal(sl_lu_factor(ctx, lu, 5, a.rowptr, a.col, a.val, 0.0, &fits, &reused, NULL),
                     SL_OK);
    assert_int_equal(reused, 0);
    csr_matvec(&a, X5, b);
    assert_int_equal(sl_lu_solve(ctx, lu, b, x), SL_OK);
    for (int i = 0; i < 5; i++) assert_true(fabs(x[i] - X5[i]) <= 1e-13);

    sl_error_clear(ctx);
    assert_int_equal(sl_lu_set_ordering(ctx, lu, (sl_lu_order)42), SL_EINTERNAL);
    sl_error_clear(ctx);

    sl_lu_free(&lu);
    csr_free(&a);
    csr_free(&a2);
    csr_free(&a3);
    csr_free(&a4);
}

static void test_memory_limit(void **state)
{
    sl_ctx *ctx = *state;
    csr a = csr_from_dense(5, A5);
    sl_lu *lu = NULL;
    double b[5], x[5];
    int fits = -1, reused = -1;
    double est = -1.0, est2 = -1.0;
    sl_lu_stats stats;
    csr_matvec(&a, X5, b);
    assert_int_equal(sl_lu_new(ctx, &lu), SL_OK);
    /* a valid factorization first, so "not factored" below also means the
     * old one was dropped */
    assert_int_equal(sl_lu_factor(ctx, lu, 5, a.rowptr, a.col, a.val, 0.0, &fits, &reused, &est),
                     SL_OK);
    assert_int_equal(fits, 1);

    assert_int_equal(sl_lu_factor(ctx, lu, 5, a.rowptr, a.col, a.val, 1.0, &fits, &reused, &est2),
                     SL_OK);
    assert_int_equal(fits, 0);
    assert_int_equal(reused, 1);
    assert_true(est2 == est && est2 > 1.0);
    sl_lu_get_stats(lu, &stats);
    assert_true(stats.lu_nnz == 0.0 && stats.numeric_seconds == 0.0 && stats.peak_bytes == est);
    sl_error_clear(ctx);
    assert_int_equal(sl_lu_solve(ctx, lu, b, x), SL_EINTERNAL);
    assert_true(message_has(ctx, "without a factorization"));
    sl_error_clear(ctx);

    /* the limit is inclusive; just below it does not fit */
    assert_int_equal(sl_lu_factor(ctx, lu, 5, a.rowptr, a.col, a.val, est * (1.0 - 1e-9), &fits,
                                  &reused, NULL), SL_OK);
    assert_int_equal(fits, 0);
    assert_int_equal(sl_lu_factor(ctx, lu, 5, a.rowptr, a.col, a.val, est, &fits, &reused, NULL),
                     SL_OK);
    assert_int_equal(fits, 1);
    assert_int_equal(reused, 1);
    assert_int_equal(sl_lu_solve(ctx, lu, b, x), SL_OK);
    for (int i = 0; i < 5; i++) assert_true(fabs(x[i] - X5[i]) <= 1e-13);

    /* tiny limit on a fresh handle: analysed, not factored */
    sl_lu_free(&lu);
    assert_int_equal(sl_lu_new(ctx, &lu), SL_OK);
    assert_int_equal(sl_lu_factor(ctx, lu, 5, a.rowptr, a.col, a.val, 1.0, &fits, &reused, &est2),
                     SL_OK);
    assert_int_equal(fits, 0);
    assert_int_equal(reused, 0);
    assert_true(est2 == est);
    assert_true(strlen(sl_lu_ordering(lu)) > 0);
    assert_int_equal(sl_lu_solve(ctx, lu, b, x), SL_EINTERNAL);
    sl_error_clear(ctx);
    sl_lu_free(&lu);
    csr_free(&a);
}

static void expect_singular(sl_ctx *ctx, const csr *a)
{
    sl_lu *lu = NULL;
    int fits = -1;
    double *b = calloc((size_t)a->n, sizeof(double));
    double *x = malloc((size_t)a->n * sizeof(double));
    assert_true(b && x);
    assert_int_equal(sl_lu_new(ctx, &lu), SL_OK);
    sl_error_clear(ctx);
    sl_status st = sl_lu_factor(ctx, lu, a->n, a->rowptr, a->col, a->val, 0.0, &fits, NULL, NULL);
    if (st != SL_EDATA) {
        sl_lu_stats stats;
        sl_lu_get_stats(lu, &stats);
        sl_lu_free(&lu);
        fail_msg("n %lld: status %d, rcond %.3g, message \"%s\"", (long long)a->n, (int)st,
                 stats.rcond, sl_ctx_message(ctx));
    }
    assert_int_equal(fits, 0);
    if (!message_has(ctx, "singular")) fail_msg("message \"%s\"", sl_ctx_message(ctx));
    sl_error_clear(ctx);
    assert_int_equal(sl_lu_solve(ctx, lu, b, x), SL_EINTERNAL);
    sl_error_clear(ctx);
    sl_lu_free(&lu);
    free(b);
    free(x);
}

static void test_singular(void **state)
{
    sl_ctx *ctx = *state;
    /* rows 0 and 2 equal */
    double d[25];
    memcpy(d, A5, sizeof(d));
    memcpy(d + 10, d, 5 * sizeof(double));
    csr a = csr_from_dense(5, d);
    expect_singular(ctx, &a);
    csr_free(&a);

    /* an empty row (structurally singular) */
    memcpy(d, A5, sizeof(d));
    memset(d + 15, 0, 5 * sizeof(double));
    a = csr_from_dense(5, d);
    expect_singular(ctx, &a);
    csr_free(&a);

    /* I - P for a 3-cycle: rows sum to zero exactly */
    const double c[9] = {1, -1, 0, 0, 1, -1, -1, 0, 1};
    a = csr_from_dense(3, c);
    expect_singular(ctx, &a);
    csr_free(&a);

    /* I - P (gamma = 1) for random stochastic P: singular in exact
     * arithmetic (the rows of I - P sum to zero), but rounding often leaves
     * a tiny nonzero pivot rather than an exact zero */
    const int64_t sizes[3] = {60, 200, 500};
    for (int t = 0; t < 3; t++) {
        for (uint64_t seed = 1; seed <= 4; seed++) {
            csr p = random_stochastic(sizes[t], 4, 0, seed);
            csr e = {sizes[t], NULL, NULL, NULL};
            assert_int_equal(sl_lu_build_evaluation_matrix(ctx, sizes[t], p.rowptr, p.col, p.val,
                                                           1.0, &e.rowptr, &e.col, &e.val),
                             SL_OK);
            expect_singular(ctx, &e);
            csr_free(&e);
            csr_free(&p);
        }
    }
}

/* The singularity threshold does not reject a merely ill-conditioned but
 * nonsingular I - gamma P (gamma = 1 - 1e-6, condition ~ 1e6). */
static void test_near_one_discount_accepted(void **state)
{
    sl_ctx *ctx = *state;
    const int64_t n = 500;
    csr p = random_stochastic(n, 4, 0, 3);
    csr a = {n, NULL, NULL, NULL};
    assert_int_equal(sl_lu_build_evaluation_matrix(ctx, n, p.rowptr, p.col, p.val, 1.0 - 1e-6,
                                                   &a.rowptr, &a.col, &a.val), SL_OK);
    double *b = malloc((size_t)n * sizeof(double));
    double *x = malloc((size_t)n * sizeof(double));
    double *r = malloc((size_t)n * sizeof(double));
    assert_true(b && x && r);
    for (int64_t i = 0; i < n; i++) b[i] = 1.0;
    sl_lu *lu = NULL;
    assert_int_equal(sl_lu_new(ctx, &lu), SL_OK);
    sl_error_clear(ctx);
    sl_status st = sl_lu_factor(ctx, lu, n, a.rowptr, a.col, a.val, 0.0, NULL, NULL, NULL);
    if (st != SL_OK) fail_msg("status %d: %s", (int)st, sl_ctx_message(ctx));
    assert_int_equal(sl_lu_solve(ctx, lu, b, x), SL_OK);
    /* v = sum_t gamma^t P^t 1 = 1 / (1 - gamma) in every state */
    for (int64_t i = 0; i < n; i++) assert_true(fabs(x[i] * 1e-6 - 1.0) <= 1e-6);
    csr_matvec(&a, x, r);
    for (int64_t i = 0; i < n; i++) r[i] -= b[i];
    assert_true(norm_inf(n, r) <= 1e-8);
    sl_lu_free(&lu);
    free(b);
    free(x);
    free(r);
    csr_free(&a);
    csr_free(&p);
}

static void expect_bad(sl_ctx *ctx, int64_t n, const int64_t *rp, const int64_t *ci,
                       const double *v, const char *word)
{
    sl_lu *lu = NULL;
    int fits = -1;
    assert_int_equal(sl_lu_new(ctx, &lu), SL_OK);
    sl_error_clear(ctx);
    assert_int_equal(sl_lu_factor(ctx, lu, n, rp, ci, v, 0.0, &fits, NULL, NULL), SL_EDATA);
    assert_int_equal(fits, 0);
    if (!message_has(ctx, word)) fail_msg("message \"%s\" lacks \"%s\"", sl_ctx_message(ctx), word);
    sl_error_clear(ctx);
    sl_lu_free(&lu);
}

static void test_invalid_input(void **state)
{
    sl_ctx *ctx = *state;
    const int64_t rp[3] = {0, 2, 3};
    const int64_t unsorted[3] = {1, 0, 1};
    const int64_t dup[3] = {0, 0, 1};
    const int64_t range[3] = {0, 2, 1};
    const int64_t neg[3] = {0, -1, 1};
    const int64_t good[3] = {0, 1, 1};
    const double v[3] = {1, 2, 3};
    const double vnan[3] = {1, NAN, 3};
    const double vinf[3] = {1, 2, INFINITY};
    const int64_t rp_bad0[3] = {1, 2, 3};
    const int64_t rp_dec[3] = {0, 1, 0};
    expect_bad(ctx, 2, rp, unsorted, v, "strictly increasing");
    expect_bad(ctx, 2, rp, dup, v, "strictly increasing");
    expect_bad(ctx, 2, rp, range, v, "outside");
    expect_bad(ctx, 2, rp, neg, v, "outside");
    expect_bad(ctx, 2, rp, good, vnan, "finite");
    expect_bad(ctx, 2, rp, good, vinf, "finite");
    expect_bad(ctx, 2, rp_bad0, good, v, "rowptr[0]");
    expect_bad(ctx, 2, rp_dec, good, v, "decreases");
    expect_bad(ctx, 0, rp, good, v, "not positive");

    /* a failed call keeps nothing to solve with */
    sl_lu *lu = NULL;
    double b[2] = {1, 1}, x[2];
    assert_int_equal(sl_lu_new(ctx, &lu), SL_OK);
    assert_int_equal(sl_lu_factor(ctx, lu, 2, rp, good, v, 0.0, NULL, NULL, NULL), SL_OK);
    assert_int_equal(sl_lu_solve(ctx, lu, b, x), SL_OK);
    assert_true(fabs(x[0] - (1.0 - 2.0 / 3.0)) < 1e-15 && fabs(x[1] - 1.0 / 3.0) < 1e-15);
    assert_int_equal(sl_lu_factor(ctx, lu, 2, rp, good, vnan, 0.0, NULL, NULL, NULL), SL_EDATA);
    sl_error_clear(ctx);
    assert_int_equal(sl_lu_solve(ctx, lu, b, x), SL_EINTERNAL);
    sl_error_clear(ctx);
    /* ...but the analysis of the unchanged pattern is still reused */
    int reused = -1;
    assert_int_equal(sl_lu_factor(ctx, lu, 2, rp, good, v, 0.0, NULL, &reused, NULL), SL_OK);
    assert_int_equal(reused, 1);
    /* b and x must be distinct */
    assert_int_equal(sl_lu_solve(ctx, lu, b, b), SL_EINTERNAL);
    sl_error_clear(ctx);
    sl_lu_free(&lu);
}

static void test_build_evaluation_matrix(void **state)
{
    sl_ctx *ctx = *state;
    /* row 0: diagonal present; row 1: diagonal inserted in the middle;
     * row 2: inserted at the end; row 3: empty row (substochastic);
     * row 4: inserted at the front; row 5: explicit zero kept */
    const int64_t rp[7] = {0, 2, 4, 5, 5, 6, 8};
    const int64_t ci[8] = {0, 2, 0, 2, 0, 5, 1, 5};
    const double pr[8] = {0.5, 0.5, 0.2, 0.8, 1.0, 1.0, 0.0, 1.0};
    const double g = 0.9;
    const int64_t ert[7] = {0, 2, 5, 7, 8, 10, 12};
    const int64_t eci[12] = {0, 2, 0, 1, 2, 0, 2, 3, 4, 5, 1, 5};
    const double evl[12] = {1 - g * 0.5, -g * 0.5, -g * 0.2, 1, -g * 0.8, -g * 1.0, 1, 1,
                            1, -g * 1.0, -g * 0.0, 1 - g * 1.0};
    int64_t *orp = NULL, *oci = NULL;
    double *ov = NULL;
    assert_int_equal(sl_lu_build_evaluation_matrix(ctx, 6, rp, ci, pr, g, &orp, &oci, &ov), SL_OK);
    for (int i = 0; i < 7; i++) assert_int_equal(orp[i], ert[i]);
    for (int k = 0; k < 12; k++) {
        assert_int_equal(oci[k], eci[k]);
        assert_true(fabs(ov[k] - evl[k]) <= 1e-15);
    }
    free(orp);
    free(oci);
    free(ov);

    const double bad_p[8] = {0.5, 0.5, 0.2, 0.8, 1.0, 1.0, -0.1, 1.0};
    const int64_t bad_c[8] = {0, 2, 2, 0, 0, 5, 1, 5};
    sl_error_clear(ctx);
    assert_int_equal(sl_lu_build_evaluation_matrix(ctx, 6, rp, ci, pr, 1.5, &orp, &oci, &ov),
                     SL_EDATA);
    assert_true(message_has(ctx, "discount"));
    sl_error_clear(ctx);
    assert_int_equal(sl_lu_build_evaluation_matrix(ctx, 6, rp, ci, pr, NAN, &orp, &oci, &ov),
                     SL_EDATA);
    sl_error_clear(ctx);
    assert_int_equal(sl_lu_build_evaluation_matrix(ctx, 6, rp, ci, bad_p, g, &orp, &oci, &ov),
                     SL_EDATA);
    assert_true(message_has(ctx, "probability"));
    sl_error_clear(ctx);
    assert_int_equal(sl_lu_build_evaluation_matrix(ctx, 6, rp, bad_c, pr, g, &orp, &oci, &ov),
                     SL_EDATA);
    assert_true(message_has(ctx, "strictly increasing"));
    assert_null(orp);
    assert_null(oci);
    assert_null(ov);
    sl_error_clear(ctx);
}

/* (I - gamma P) for a random stochastic P of 2000 states. Checks, each able
 * to fail on its own:
 * - residual ||b - A x||_inf <= 1e-10 ||b||_inf;
 * - normwise backward error ||b - A x|| / (||A|| ||x|| + ||b||) below 1e-14
 *   (the Rigal-Gaches formula; Higham, "Accuracy and Stability of Numerical
 *   Algorithms", 2nd ed., 2002, section 7.1 - recalled from memory);
 * - forward error against the x_true that made b: for this A,
 *   ||A||_inf <= 1 + gamma and ||A^-1||_inf <= 1/(1 - gamma) (Neumann series),
 *   so a backward-stable solve is within ~200 eps of x_true relative;
 * - agreement with the dense Gaussian elimination above.
 * Then a second P with the same pattern (a "policy" with the same successors
 * but new probabilities): the analysis is reused and the checks hold again. */
static void test_random_evaluation_2000(void **state)
{
    sl_ctx *ctx = *state;
    const int64_t n = 2000;
    const double gamma = 0.99;
    csr p = random_stochastic(n, 6, 0, 12345);
    double *xt = malloc((size_t)n * sizeof(double));
    double *b = malloc((size_t)n * sizeof(double));
    double *x = malloc((size_t)n * sizeof(double));
    double *r = malloc((size_t)n * sizeof(double));
    double *xd = malloc((size_t)n * sizeof(double));
    assert_true(xt && b && x && r && xd);
    uint64_t rs = 99;
    for (int64_t i = 0; i < n; i++) xt[i] = 10.0 * urand(&rs) - 3.0;

    sl_lu *lu = NULL;
    assert_int_equal(sl_lu_new(ctx, &lu), SL_OK);
    for (int round = 0; round < 2; round++) {
        if (round == 1) { /* new probabilities on the same successors */
            for (int64_t i = 0; i < n; i++) {
                double s = 0.0;
                for (int64_t k = p.rowptr[i]; k < p.rowptr[i + 1]; k++)
                    s += p.val[k] = 0.01 + urand(&rs);
                for (int64_t k = p.rowptr[i]; k < p.rowptr[i + 1]; k++) p.val[k] /= s;
            }
        }
        csr a = {n, NULL, NULL, NULL};
        assert_int_equal(sl_lu_build_evaluation_matrix(ctx, n, p.rowptr, p.col, p.val, gamma,
                                                       &a.rowptr, &a.col, &a.val), SL_OK);
        csr_matvec(&a, xt, b);
        int fits = -1, reused = -1;
        double est = 0.0;
        assert_int_equal(sl_lu_factor(ctx, lu, n, a.rowptr, a.col, a.val, 0.0, &fits, &reused,
                                      &est), SL_OK);
        assert_int_equal(fits, 1);
        assert_int_equal(reused, round);
        assert_int_equal(sl_lu_solve(ctx, lu, b, x), SL_OK);

        csr_matvec(&a, x, r);
        for (int64_t i = 0; i < n; i++) r[i] = b[i] - r[i];
        const double rn = norm_inf(n, r), bn = norm_inf(n, b), xn = norm_inf(n, x);
        const double an = csr_norm_inf(&a);
        assert_true(an <= 1.0 + gamma + 1e-12);
        assert_true(rn <= 1e-10 * bn);
        const double eta = rn / (an * xn + bn);
        assert_true(eta <= 1e-14);
        double fe = 0.0, de = 0.0;
        for (int64_t i = 0; i < n; i++) fe = fmax(fe, fabs(x[i] - xt[i]));
        assert_true(fe <= 1e-12 * norm_inf(n, xt));

        if (round == 0) {
            assert_true(dense_solve(&a, b, xd));
            for (int64_t i = 0; i < n; i++) de = fmax(de, fabs(x[i] - xd[i]));
            assert_true(de <= 1e-12 * xn);
        }
        sl_lu_stats st;
        sl_lu_get_stats(lu, &st);
        assert_int_equal(st.reused_symbolic, round);
        assert_true(st.lu_nnz > 0.0 && st.numeric_seconds >= 0.0 && st.peak_bytes == est);
        /* UMFPACK's measured peak stays within its own estimate */
        assert_true(st.umfpack_peak_bytes <= est);
        print_message("n %lld: L+U %.0f, ordering %s, residual %.2e |b|, backward error %.2e, "
                      "forward error %.2e, vs dense %.2e, rcond %.2e, est %.3g MB\n",
                      (long long)n, st.lu_nnz, sl_lu_ordering(lu), rn / bn, eta, fe, de, st.rcond,
                      est / 1e6);
        csr_free(&a);
    }
    /* on Debian's SuiteSparse (built with CHOLMOD) the preferred ordering is used */
    assert_string_equal(sl_lu_ordering(lu), "metis");
    sl_lu_free(&lu);
    free(xt);
    free(b);
    free(x);
    free(r);
    free(xd);
    csr_free(&p);
}

/* Forcing AMD gives an AMD-family ordering and the same solution. */
static void test_orderings_agree(void **state)
{
    sl_ctx *ctx = *state;
    const int64_t n = 500;
    csr p = random_stochastic(n, 5, 20, 4242);
    csr a = {n, NULL, NULL, NULL};
    assert_int_equal(sl_lu_build_evaluation_matrix(ctx, n, p.rowptr, p.col, p.val, 0.95,
                                                   &a.rowptr, &a.col, &a.val), SL_OK);
    double *b = malloc((size_t)n * sizeof(double));
    double *x1 = malloc((size_t)n * sizeof(double));
    double *x2 = malloc((size_t)n * sizeof(double));
    assert_true(b && x1 && x2);
    uint64_t rs = 5;
    for (int64_t i = 0; i < n; i++) b[i] = urand(&rs);
    sl_lu *lu = NULL;
    assert_int_equal(sl_lu_new(ctx, &lu), SL_OK);
    assert_int_equal(sl_lu_set_ordering(ctx, lu, SL_LU_ORDER_METIS), SL_OK);
    assert_int_equal(sl_lu_factor(ctx, lu, n, a.rowptr, a.col, a.val, 0.0, NULL, NULL, NULL),
                     SL_OK);
    assert_string_equal(sl_lu_ordering(lu), "metis");
    assert_int_equal(sl_lu_solve(ctx, lu, b, x1), SL_OK);
    assert_int_equal(sl_lu_set_ordering(ctx, lu, SL_LU_ORDER_AMD), SL_OK);
    assert_int_equal(sl_lu_factor(ctx, lu, n, a.rowptr, a.col, a.val, 0.0, NULL, NULL, NULL),
                     SL_OK);
    const char *o = sl_lu_ordering(lu);
    assert_true(strcmp(o, "amd") == 0 || strcmp(o, "colamd") == 0);
    assert_int_equal(sl_lu_solve(ctx, lu, b, x2), SL_OK);
    double d = 0.0;
    for (int64_t i = 0; i < n; i++) d = fmax(d, fabs(x1[i] - x2[i]));
    assert_true(d <= 1e-12 * norm_inf(n, x1));
    sl_lu_free(&lu);
    free(b);
    free(x1);
    free(x2);
    csr_free(&a);
    csr_free(&p);
}

/* ---- UMFPACK allocation failures ----------------------------------------
 * UMFPACK allocates through the function pointers in SuiteSparse_config; the
 * test swaps in counting versions that fail the k-th allocation, for every k
 * of a clean run. The counters are file-level because those pointers carry no
 * context; only this test touches them. */
static struct {
    long calls;    /* allocations seen */
    long fail_at;  /* 0-based index of the allocation to fail; < 0 never */
    long live;     /* blocks allocated and not yet freed */
    int swapped;   /* SuiteSparse_config holds the counting functions */
    struct SuiteSparse_config_struct saved;
} g_alloc;

static void *counting_malloc(size_t size)
{
    if (g_alloc.calls++ == g_alloc.fail_at) return NULL;
    void *p = malloc(size);
    if (p != NULL) g_alloc.live++;
    return p;
}

static void *counting_calloc(size_t count, size_t size)
{
    if (g_alloc.calls++ == g_alloc.fail_at) return NULL;
    void *p = calloc(count, size);
    if (p != NULL) g_alloc.live++;
    return p;
}

static void *counting_realloc(void *old, size_t size)
{
    if (g_alloc.calls++ == g_alloc.fail_at) return NULL;
    void *p = realloc(old, size);
    if (p != NULL && old == NULL) g_alloc.live++;
    return p;
}

static void counting_free(void *p)
{
    if (p != NULL) g_alloc.live--;
    free(p);
}

/* teardown: put the real allocator back even when the test failed midway */
static int restore_allocator(void **state)
{
    (void)state;
    if (g_alloc.swapped) SuiteSparse_config = g_alloc.saved;
    g_alloc.swapped = 0;
    return 0;
}

static void test_umfpack_out_of_memory(void **state)
{
    sl_ctx *ctx = *state;
    const int64_t n = 300;
    csr p = random_stochastic(n, 5, 15, 77);
    csr a = {n, NULL, NULL, NULL};
    assert_int_equal(sl_lu_build_evaluation_matrix(ctx, n, p.rowptr, p.col, p.val, 0.9,
                                                   &a.rowptr, &a.col, &a.val), SL_OK);
    double *xt = malloc((size_t)n * sizeof(double));
    double *b = malloc((size_t)n * sizeof(double));
    double *x = malloc((size_t)n * sizeof(double));
    assert_true(xt && b && x);
    for (int64_t i = 0; i < n; i++) xt[i] = (double)(i % 7) - 3.0;
    csr_matvec(&a, xt, b);

    g_alloc.saved = SuiteSparse_config;
    g_alloc.swapped = 1;
    SuiteSparse_config.malloc_func = counting_malloc;
    SuiteSparse_config.calloc_func = counting_calloc;
    SuiteSparse_config.realloc_func = counting_realloc;
    SuiteSparse_config.free_func = counting_free;

    /* AMD: UMFPACK's own ordering code. AUTO: METIS through CHOLMOD, with
     * our retry with AMD when it fails. */
    const sl_lu_order orders[2] = {SL_LU_ORDER_AMD, SL_LU_ORDER_AUTO};
    for (int o = 0; o < 2; o++) {
        long total = -1, n_enomem = 0, n_absorbed = 0, upstream_leaks = 0;
        for (long k = -1; k < total || total < 0; k++) {
            g_alloc.calls = 0;
            g_alloc.live = 0;
            g_alloc.fail_at = k;
            sl_lu *lu = NULL;
            assert_int_equal(sl_lu_new(ctx, &lu), SL_OK);
            assert_int_equal(sl_lu_set_ordering(ctx, lu, orders[o]), SL_OK);
            sl_error_clear(ctx);
            int fits = -1;
            sl_status st = sl_lu_factor(ctx, lu, n, a.rowptr, a.col, a.val, 0.0, &fits, NULL,
                                        NULL);
            int fell_back = 0;
            if (k < 0) { /* clean run: count the allocations */
                assert_int_equal(st, SL_OK);
                total = g_alloc.calls;
                assert_true(total > 0);
                if (orders[o] == SL_LU_ORDER_AUTO) assert_string_equal(sl_lu_ordering(lu), "metis");
            } else if (st == SL_OK) {
                /* the failure was absorbed: the answer must still be right */
                n_absorbed++;
                fell_back = orders[o] == SL_LU_ORDER_AUTO &&
                            strcmp(sl_lu_ordering(lu), "metis") != 0;
            }
            if (st == SL_OK) {
                assert_int_equal(fits, 1);
                assert_int_equal(sl_lu_solve(ctx, lu, b, x), SL_OK);
                for (int64_t i = 0; i < n; i++) assert_true(fabs(x[i] - xt[i]) <= 1e-11);
            } else {
                if (st != SL_ENOMEM)
                    fail_msg("allocation %ld of %ld failed: status %d, %s", k, total, (int)st,
                             sl_ctx_message(ctx));
                assert_true(message_has(ctx, "memory"));
                assert_int_equal(fits, 0);
                sl_error_clear(ctx);
                assert_int_equal(sl_lu_solve(ctx, lu, b, x), SL_EINTERNAL);
                n_enomem++;
            }
            sl_error_clear(ctx);
            sl_lu_free(&lu);
            /* SuiteSparse 5.12's umf_cholmod returns without cholmod_finish
             * when cholmod_analyze fails, leaking CHOLMOD's workspace; that
             * is the only leak tolerated, and only when METIS was abandoned */
            if (g_alloc.live != 0 && fell_back) {
                upstream_leaks += g_alloc.live;
            } else if (g_alloc.live != 0) {
                fail_msg("%s: allocation %ld of %ld failed: %ld UMFPACK blocks leaked",
                         orders[o] == SL_LU_ORDER_AMD ? "amd" : "auto", k, total, g_alloc.live);
            }
        }
        print_message("%s: failed each of %ld UMFPACK allocations in turn: %ld SL_ENOMEM, "
                      "%ld absorbed, %ld blocks leaked inside UMFPACK's CHOLMOD interface\n",
                      orders[o] == SL_LU_ORDER_AMD ? "amd" : "auto", total, n_enomem,
                      n_absorbed, upstream_leaks);
        assert_true(n_enomem > 0);
    }
    free(xt);
    free(b);
    free(x);
    csr_free(&a);
    csr_free(&p);
}

static void test_solve_without_factor(void **state)
{
    sl_ctx *ctx = *state;
    sl_lu *lu = NULL;
    double b[1] = {1}, x[1];
    assert_int_equal(sl_lu_new(ctx, &lu), SL_OK);
    sl_error_clear(ctx);
    assert_int_equal(sl_lu_solve(ctx, lu, b, x), SL_EINTERNAL);
    assert_true(message_has(ctx, "without a factorization"));
    sl_error_clear(ctx);
    sl_lu_free(&lu);
}

int main(int argc, char **argv)
{
    MPI_Init(&argc, &argv);
    sl_ctx *ctx = NULL;
    if (sl_ctx_new(MPI_COMM_WORLD, 0, &ctx) != SL_OK) {
        fprintf(stderr, "test_lu: cannot create a context\n");
        MPI_Abort(MPI_COMM_WORLD, 1);
    }
    const struct CMUnitTest tests[] = {
        cmocka_unit_test_prestate(test_free_null, ctx),
        cmocka_unit_test_prestate(test_known_solution_nonsymmetric, ctx),
        cmocka_unit_test_prestate(test_zero_diagonal_needs_pivoting, ctx),
        cmocka_unit_test_prestate(test_symbolic_reuse, ctx),
        cmocka_unit_test_prestate(test_memory_limit, ctx),
        cmocka_unit_test_prestate(test_singular, ctx),
        cmocka_unit_test_prestate(test_near_one_discount_accepted, ctx),
        cmocka_unit_test_prestate(test_invalid_input, ctx),
        cmocka_unit_test_prestate(test_build_evaluation_matrix, ctx),
        cmocka_unit_test_prestate(test_random_evaluation_2000, ctx),
        cmocka_unit_test_prestate(test_orderings_agree, ctx),
        cmocka_unit_test_prestate(test_solve_without_factor, ctx),
        cmocka_unit_test_prestate_setup_teardown(test_umfpack_out_of_memory, NULL,
                                                 restore_allocator, ctx),
    };
    int rc = cmocka_run_group_tests_name("lu", tests, NULL, NULL);
    sl_ctx_free(&ctx);
    MPI_Finalize();
    return rc;
}
