/* lu.h - sparse LU factorization (SuiteSparse UMFPACK) for exact policy evaluation.
 *
 * Everything here is LOCAL: it runs on one rank, on a matrix the caller has
 * gathered there. Matrices are n x n in compressed sparse row form with int64
 * indices: rowptr[n+1] (rowptr[0] == 0, non-decreasing), col[nnz] (column
 * indices strictly increasing within each row, in [0, n)), val[nnz], where
 * nnz = rowptr[n].
 */
#ifndef SL_LINALG_LU_H
#define SL_LINALG_LU_H

#include "core/core.h"

typedef struct sl_lu sl_lu;

/* Fill-reducing ordering requested for the symbolic analysis. */
typedef enum sl_lu_order {
    SL_LU_ORDER_AUTO = 0,   /* METIS; AMD/COLAMD if METIS fails or is not built in */
    SL_LU_ORDER_AMD = 1,    /* AMD (symmetric strategy) or COLAMD (unsymmetric) */
    SL_LU_ORDER_METIS = 2   /* METIS only; an ordering failure is an error */
} sl_lu_order;

/* Create an empty factorization handle (ordering SL_LU_ORDER_AUTO).
 * Output: *out (NULL on failure). Returns SL_OK or SL_ENOMEM. Local. */
sl_status sl_lu_new(sl_ctx *ctx, sl_lu **out);

/* Release a handle and everything it holds. Accepts NULL and *lu == NULL;
 * sets *lu = NULL. Local. */
void sl_lu_free(sl_lu **lu);

/* Choose the ordering for later analyses. Changing it discards the stored
 * symbolic analysis and factorization (the next sl_lu_factor re-analyses).
 * Returns SL_OK, or SL_EINTERNAL for an unknown value. Local. */
sl_status sl_lu_set_ordering(sl_ctx *ctx, sl_lu *lu, sl_lu_order order);

/* Analyse and factor A (CSR, see the file header).
 *
 * If (n, rowptr, col) equal, entry by entry, the pattern analysed last time,
 * the symbolic analysis is reused and *reused is set to 1; otherwise the
 * pattern is analysed afresh (*reused = 0). The symbolic analysis depends on
 * the pattern only, never on the values.
 *
 * After the symbolic step, *estimate_bytes is set to the memory the
 * factorization will need: UMFPACK's peak estimate for symbolic + numeric
 * (Info[UMFPACK_PEAK_MEMORY_ESTIMATE] * Info[UMFPACK_SIZE_OF_UNIT]; UMFPACK
 * documents that this count already includes the Symbolic and Numeric
 * objects), plus the solve workspace and this handle's copy of A (kept for
 * the pattern comparison and iterative refinement in sl_lu_solve).
 * If memory_limit > 0 and the estimate exceeds it, A is NOT factored:
 * returns SL_OK with *fits = 0, and the symbolic analysis is kept for reuse;
 * sl_lu_solve then fails until a later sl_lu_factor succeeds.
 * Otherwise *fits = 1 and A is factored.
 *
 * The ordering used is logged at verbosity >= 2 and reported by
 * sl_lu_ordering(). Any of the output pointers may be NULL.
 *
 * Returns SL_OK; SL_EDATA for a malformed matrix, non-finite values, or a
 * matrix that is singular (an exactly zero pivot, or UMFPACK's reciprocal
 * condition estimate min|u_ii|/max|u_ii| below n * DBL_EPSILON, i.e. a pivot
 * at rounding level); SL_ENOMEM; SL_EINTERNAL for other
 * UMFPACK failures. After a failure the handle holds no factorization.
 * Local. */
sl_status sl_lu_factor(sl_ctx *ctx, sl_lu *lu, int64_t n, const int64_t *rowptr,
                       const int64_t *col, const double *val, double memory_limit,
                       int *fits, int *reused, double *estimate_bytes);

/* sl_lu_factor in two steps, so that the numeric step can run where it can
 * be abandoned (evaluate.c runs it in a child process): sl_lu_prepare does
 * everything up to the guards and sets *fits; sl_lu_numeric then factors
 * (same errors as sl_lu_factor). sl_lu_note_numeric records the time and
 * flops of a numeric step done elsewhere (a child process) for the next
 * time estimate. Local. */
sl_status sl_lu_prepare(sl_ctx *ctx, sl_lu *lu, int64_t n, const int64_t *rowptr, const int64_t *col,
                        const double *val, double memory_limit, int *fits, int *reused, double *estimate_bytes);
sl_status sl_lu_numeric(sl_ctx *ctx, sl_lu *lu);
void sl_lu_note_numeric(sl_lu *lu, double seconds, double flops);

/* Solve A x = b with the last factorization (A as passed to sl_lu_factor, not
 * its transpose), with UMFPACK's iterative refinement. b and x have n entries
 * and must not overlap. Returns SL_OK; SL_EINTERNAL if there is no
 * factorization (none yet, the last one did not fit, or it failed) or b == x;
 * SL_EDATA if the solution is not finite. Local. */
sl_status sl_lu_solve(sl_ctx *ctx, sl_lu *lu, const double *b, double *x);

/* Ordering used by the last symbolic analysis: "metis", "amd" (symmetric
 * strategy), "colamd" (unsymmetric strategy), "none" (nothing left to order
 * after singletons were removed), or "" if nothing has been analysed. The
 * string is static. Local. */
const char *sl_lu_ordering(const sl_lu *lu);

/* Statistics of the last sl_lu_factor call, for reports. */
typedef struct sl_lu_stats {
    double lu_nnz;            /* entries stored in L and U (L's unit diagonal not counted); 0 if not factored */
    double symbolic_seconds;  /* wall time of the symbolic analysis (0 if reused) */
    double numeric_seconds;   /* wall time of the numeric factorization (0 if not factored) */
    double peak_bytes;        /* the estimate compared with memory_limit */
    int reused_symbolic;      /* 1 if the symbolic analysis was reused */
    double umfpack_peak_bytes;/* UMFPACK's measured peak after the numeric step (0 if not factored) */
    double rcond;             /* UMFPACK's reciprocal condition estimate min|u_ii|/max|u_ii| (0 if not factored) */
    double flops_estimate;    /* UMFPACK's flop estimate after the symbolic step */
    double seconds_estimate;  /* flops_estimate / flop_rate, compared with the time limit */
    double flop_rate;         /* rate used (estimated flops per second): calibrated by this handle's last
                               * numeric step of at least 1 s, else assumed */
    int declined_for_time;    /* the time guard (not memory) refused the factorization */
    double flops;             /* flops of the numeric step (0 if not factored) */
} sl_lu_stats;

/* Flop rate assumed before a handle has measured one (flop/s). */
#define SL_LU_ASSUMED_FLOP_RATE 1e9

/* Time guard: sl_lu_factor does not factor (returns *fits = 0) when UMFPACK's
 * flop estimate after the symbolic step, divided by the rate of estimated
 * flops per second this handle's last numeric factorization of 1 s or more
 * and 1e9 estimated flops or more achieved (SL_LU_ASSUMED_FLOP_RATE before any), exceeds `seconds`. 0 (the default) disables the guard. Local. */
void sl_lu_set_time_limit(sl_lu *lu, double seconds);
/* 1 if the last sl_lu_factor call was refused by the memory or time guard.
 * Accepts NULL (0). Local. */
int sl_lu_declined(const sl_lu *lu);

/* Copy the statistics of the last sl_lu_factor call (all zero before any). Local. */
void sl_lu_get_stats(const sl_lu *lu, sl_lu_stats *stats);

/* Build A = I - gamma * P in CSR from P in CSR (n x n, columns strictly
 * increasing within each row), merging the diagonal: where P has an entry
 * (i, i) the result holds 1 - gamma * p_ii, elsewhere a diagonal 1 is
 * inserted in column order. Entries of P that are zero are kept, so the
 * pattern of A depends only on the pattern of P.
 * Inputs: 0 <= gamma <= 1, entries of P in [0, 1]. Outputs: *out_rowptr[n+1],
 * *out_col[nnz], *out_val[nnz], allocated with malloc (caller frees; all NULL
 * on failure). Returns SL_OK, SL_EDATA for a malformed P or gamma, SL_ENOMEM.
 * Local. */
sl_status sl_lu_build_evaluation_matrix(sl_ctx *ctx, int64_t n, const int64_t *rowptr,
                                        const int64_t *col, const double *prob, double gamma,
                                        int64_t **out_rowptr, int64_t **out_col,
                                        double **out_val);

#endif /* SL_LINALG_LU_H */
