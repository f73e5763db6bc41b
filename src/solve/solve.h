/* solve.h - distributed problem, Bellman kernels, certificates (internal). */
#ifndef SL_SOLVE_H
#define SL_SOLVE_H

#include "parallel/layout.h"
#include "store/store.h"

/* A model prepared for solving: each rank's rows [s_begin, s_end) as the
 * model holds them (borrowed, read only) plus the local columns of every
 * transition in x = [owned | halo], the halo and the sweep order. */
typedef struct sl_problem {
    sl_meta meta;
    sl_block blk;           /* arrays borrowed from the model except col,
                             * unless owns_rows */
    sl_halo halo;
    int64_t *bounds;        /* [size + 1] state ranges of all ranks */
    int64_t n_local;
    double gamma;
    double rmax_abs;        /* global max |r(s,a)| */
    int64_t *order;         /* [n_local] sweep order (local indices) */
    sl_order order_used;
    const char *path;       /* for messages */
    /* With a stage factor the rows are moved into the stage-interleaved
     * layout (layout.h) and owned here: blk, bounds and halo then use
     * internal ids; solutions and checkpoints use the model's layout. */
    int owns_rows;
    sl_stage_map stages;
    sl_io_plan io;          /* internal order <-> the model's layout */
    int staged;             /* sweeps run stage by stage on all ranks */
    double direct_time_limit; /* seconds a direct factorization may take (UMFPACK's
                               * estimate); <= 0: no limit */
    double visit_adjust;    /* c of the reward adjustment r + c/sqrt(visits); 0: none */
    /* the system sl_evaluate_direct solves: 0 (I - gamma P_pi) v = r_pi; with
     * gamma = 1 a row of I - P_pi that is all zero (an absorbing state, whose
     * reward is 0) gets a unit diagonal, so v = 0 there. 1 (average reward):
     * gain and bias, h + g 1 = r_pi + P_pi h with h(eval_ref) = 0, solved as
     * (I - P_pi) with column eval_ref replaced by ones; the solution holds g
     * at eval_ref (callers put it back). */
    int eval_average;
    int64_t eval_ref;       /* global state */
    const char *direct_fallback; /* what follows a factorization the time guard
                                  * declines, for its warning; NULL: "evaluating
                                  * iteratively from now on" */
    double *own_reward;     /* the adjusted rewards (blk.reward points here), or NULL */
} sl_problem;

/* Prepare an assembled model for solving: local columns, halo and sweep
 * order; refuses objectives other than discounted unless allow_any. With
 * a stage factor and !allow_any the rows are moved into the
 * stage-interleaved layout (layout.h).
 * Collective. */
sl_status sl_problem_from_model(sl_ctx *ctx, const sl_model *m, sl_order order, int allow_any, sl_problem *p);
void sl_problem_free(sl_problem *p);
/* The same for the discounted methods, taking the model's rows: they are
 * moved into the problem (or freed once copied into the stage-interleaved
 * layout), and the targets' memory becomes the local columns, so peak
 * memory holds the rows about once. The model keeps its description and
 * refuses further use of its rows (sl_model_check_ready). Collective. */
sl_status sl_problem_from_model_taking(sl_ctx *ctx, sl_model *m, sl_order order, sl_problem *p);
/* Sensitivity to thin data (models from `estimate`, which store the visits
 * n of every pair): replace r(s,a) by r(s,a) + c / sqrt(n) (c > 0: an
 * optimistic bonus; c < 0: a pessimistic penalty). Pairs with n = 0 (states
 * made absorbing for lack of data) keep their reward. c = 0: nothing. The
 * model's rows are not touched. Collective. */
sl_status sl_problem_visit_adjust(sl_ctx *ctx, sl_problem *p, const sl_model *m, double c);

/* ---- handles ---------------------------------------------------------------- */

struct sl_solver {
    sl_ctx *ctx;
    sl_method method;
    sl_order order;
    double tolerance;           /* > 0 */
    int64_t max_iterations;     /* 0: no limit */
    double walltime;            /* seconds; 0: none */
    double wall_origin;         /* sl_now() instant the walltime counts from */
    int have_wall_origin;
    int sweeps;                 /* mpi: partial-evaluation sweeps; 0 adaptive */
    double memory_limit;        /* pi: bytes; 0 auto */
    int strict_memory;
    double direct_time_limit;   /* pi/evaluate: seconds; <= 0 no limit */
    double visit_adjust;        /* r + c/sqrt(visits); 0: none */
    char *checkpoint_dir;       /* NULL: none */
    double checkpoint_every;    /* seconds; 0 -> 600 */
    int resume;
    sl_monitor_fn monitor;
    void *monitor_user;
};

struct sl_solution {
    sl_ctx *ctx;
    int64_t n_states, s_begin, n;
    double *value;              /* [n] */
    int32_t *action;            /* [n] action ids; NULL for values only */
    sl_solution_info info;
    sl_certificate cert;
    sl_history hist;
};

/* A solution with room for n local entries (actions if with_actions).
 * Local (callers agree). */
sl_status sl_solution_new(sl_ctx *ctx, int64_t n_states, int64_t s_begin, int64_t n, int with_actions,
                          sl_solution **out);

/* One synchronous Bellman check: y = T x on owned states, greedy policy
 * (pair offsets within each state; ties keep the current choice unless
 * another is better by more than a tiny margin), d = y - x. x's halo must
 * be current. Local; results reduced by sl_certify. */
typedef struct sl_check {
    double dmin, dmax;      /* global after sl_certify */
    double sup, span;
    double xmax_abs;        /* global max |x| */
    double value_error;     /* certified bound for the midpoint value */
    double policy_loss;     /* certified bound for the greedy policy */
    int64_t changed;        /* policy entries changed by this check */
} sl_check;
void sl_bellman_check(const sl_problem *p, const double *x, double *y, int32_t *policy,
                      sl_check *c);
/* Same with the operator of a fixed policy (T_pi x). */
void sl_policy_check(const sl_problem *p, const double *x, double *y, const int32_t *policy,
                     sl_check *c);
/* Rigorous sup |T_pi x - x| for a fixed policy (pair offsets), accumulated in
 * long double with a bound on its own rounding added. Collective. */
double sl_policy_residual_bound(sl_ctx *ctx, const sl_problem *p, const double *x, const int32_t *policy);
/* Reduce a check over ranks and fill the bounds. Collective. */
void sl_certify(sl_ctx *ctx, const sl_problem *p, sl_check *c);
/* Midpoint value: out = y + gamma/(1-gamma) * (dmin + dmax)/2 (owned part). */
void sl_midpoint(const sl_problem *p, const double *y, const sl_check *c, double *out);

/* Gauss-Seidel sweep in the problem's order, in place on x (owned part).
 * policy != NULL and eval: sweep of the fixed policy. Returns the largest
 * change. Local. */
double sl_sweep_gs(const sl_problem *p, double *x, int32_t *policy, int eval);

/* The same sweep as a collective step: refresh the halo, then sweep. With
 * the stage-interleaved layout and the stage-reverse order it sweeps one
 * stage at a time on all ranks and refreshes that stage's halo entries
 * before the next, so a state reads the values of the stages swept before
 * it in this sweep, as on one rank: the iterates equal the one-rank
 * iterates whenever no transition stays within a stage across ranks.
 * Returns the local largest change (reduce it). Collective. */
double sl_sweep(sl_ctx *ctx, const sl_problem *p, double *x, int32_t *policy, int eval);

/* The transitions of one fixed policy, copied out of the model's rows in
 * sweep order (entry j is state order[j]) so that a fixed-policy sweep
 * streams through them contiguously instead of jumping over the other
 * actions' rows (policy_rows.c). Where the rows' probability vectors repeat
 * (on average 4 times or more), each distinct vector is stored once in a
 * table and a row holds its offset. Arithmetic is the same as the sweep
 * over the model's rows (same terms, same order), so the iterates are
 * bitwise equal. */
typedef struct sl_prob_table sl_prob_table;
/* The table of distinct probability vectors: an empty one (t NULL: a new
 * one; else its allocations are kept), NULL out of memory. */
sl_prob_table *sl_prob_table_reset(sl_ctx *ctx, sl_prob_table *t);
/* Offset of the vector v[0..len) in the table (equal bits, equal length),
 * added if new; -1 when adding it would take the table past `limit`
 * entries, -2 out of memory. */
int64_t sl_prob_table_find(sl_ctx *ctx, sl_prob_table *t, const double *v, int64_t len, int64_t limit);
const double *sl_prob_table_values(const sl_prob_table *t);
void sl_prob_table_free(sl_prob_table *t);
typedef struct sl_eval_rows {
    int64_t n;              /* owned states; 0: not built */
    uint32_t *first;        /* [n + 1] offsets into col (and prob) */
    uint32_t *col;          /* local columns into [owned | halo] */
    double *prob;           /* the probabilities, or NULL when shared: */
    uint32_t *poff;         /* [n] offset of row j's probabilities in the table */
    sl_prob_table *table;   /* the distinct probability vectors (NULL: prob) */
    double *reward;         /* [n] */
    int32_t *entry;         /* [n] the policy entry each row was copied from */
    int64_t cap;            /* transitions col (and prob) can hold */
} sl_eval_rows;
/* Build the rows of `policy` (pair offsets) into `rows` (overwritten, not
 * freed). Fails with SL_EDATA if the policy's transitions on this rank do
 * not fit 32-bit offsets. Local. */
sl_status sl_eval_rows_build(sl_ctx *ctx, const sl_problem *p, const int32_t *policy, sl_eval_rows *rows);
/* The same for rows built before (or zeroed): rows whose entry is
 * unchanged are kept; changed ones are overwritten in place when every
 * changed state's new pair has as many transitions as its old one, else all
 * rows are laid out again (in the same arrays when they are large enough).
 * Same rows as a fresh build would sweep; freed on failure. Local. */
sl_status sl_eval_rows_update(sl_ctx *ctx, const sl_problem *p, const int32_t *policy, sl_eval_rows *rows);
void sl_eval_rows_free(sl_eval_rows *rows);
/* 1 if the rows share probability vectors (then the count of distinct
 * vectors and of table entries), else 0. */
int sl_eval_rows_shared(const sl_eval_rows *rows, int64_t *vectors, int64_t *entries);
/* The fixed-policy sweep over rows j0..j1 of `rows` (one stage's share);
 * returns the largest change. Local. */
double sl_eval_rows_sweep_part(const sl_problem *p, const sl_eval_rows *rows, double *x, int64_t j0, int64_t j1);
/* sl_sweep(ctx, p, x, policy, 1) for the policy the rows were built from.
 * Collective. */
double sl_sweep_rows(sl_ctx *ctx, const sl_problem *p, double *x, const sl_eval_rows *rows);
/* The Jacobi form over rows j0..j1: y = r + gamma P x for the policy's
 * rows (x is not written), and the least and largest change y - x. Local. */
void sl_eval_rows_jacobi_part(const sl_problem *p, const sl_eval_rows *rows, const double *x, double *y, int64_t j0,
                              int64_t j1, double *dmin, double *dmax);
/* y = T_pi x over all owned states (x's halo refreshed first); returns the
 * span of y - x over all ranks. A constant error in x stays constant in y
 * (times gamma), so the span measures what MacQueen's bounds need.
 * Collective. */
double sl_sweep_rows_jacobi(sl_ctx *ctx, const sl_problem *p, double *x, double *y, const sl_eval_rows *rows);
/* Modified policy iteration's adaptive m: the evaluation sweeps after an
 * improvement that changed `changed` of `n_states` actions (global counts,
 * so every rank agrees). Doubles (to at most SL_MPI_M_MAX) while at most one
 * state in SL_MPI_M_SHARE changed, halves (to at least SL_MPI_M_MIN) above
 * that. Local. */
#define SL_MPI_M_MIN 4
#define SL_MPI_M_MAX 512
#define SL_MPI_M_SHARE 1000
int64_t sl_mpi_next_m(int64_t m, int64_t changed, int64_t n_states);
/* mpi's evaluation sweeps on a model without stages: Gauss-Seidel (sup of
 * the change stops them) or Jacobi (the span of the change stops them; a
 * constant error stays constant, which MacQueen's bounds discount). Chosen
 * from each kind's measured shrink of its stop quantity per sweep: the
 * smaller rate wins, gs on a tie. Local and pure. */
enum { SL_EVAL_GS = 0, SL_EVAL_JACOBI = 1, SL_EVAL_TRIAL = 8 };
int sl_mpi_pick_eval(double rate_gs, double rate_jacobi);

/* File id of owned local state i (for messages). Local. */
int64_t sl_problem_file_state(const sl_problem *p, int64_t i);

/* Checkpoints of a prepared problem: owned vectors in internal order are
 * moved to (from) the model's layout and written (read) with sl_ckpt_*.
 * Collective. */
sl_status sl_problem_ckpt_write(sl_ctx *ctx, const sl_problem *p, const char *dir, const double *value,
                                const int32_t *actions, const sl_solver_state *state, const sl_history *hist);
sl_status sl_problem_ckpt_load(sl_ctx *ctx, const sl_problem *p, const char *dir, double *value, int32_t *actions,
                               sl_solver_state *state, sl_history *hist, int *found);

/* The rows of P_pi (global columns ascending within each row) and r_pi
 * gathered on rank 0: rowptr[N+1], cols, probs, rew (NULL elsewhere);
 * scnt/sdsp: every rank's state count and offset (rank 0), for scattering
 * back. */
typedef struct sl_policy_rows {
    int64_t N;
    int64_t *rowptr, *cols;
    double *probs, *rew;
    int *scnt, *sdsp;
} sl_policy_rows;
sl_status sl_gather_policy_rows(sl_ctx *ctx, const sl_problem *p, const int32_t *policy, sl_policy_rows *out);
void sl_policy_rows_free(sl_policy_rows *r);

/* Exact value of a fixed policy: gather P_pi to rank 0, UMFPACK, scatter.
 * *used_direct = 0 (and x untouched) when the factorization would exceed
 * memory_limit or take longer than SL_DIRECT_TIME_LIMIT (or run past
 * `deadline`, an sl_now() time; 0: none); once that has happened for this
 * lu_cache, later calls return *used_direct = 0 at once. The numeric step
 * runs in a child process of rank 0 that is killed when ctx's signal flag
 * is set or the deadline passes: then *abandoned = 1, *used_direct = 0 and
 * x is untouched. Collective. */
sl_status sl_evaluate_direct(sl_ctx *ctx, const sl_problem *p, const int32_t *policy,
                             double memory_limit, double deadline, double *x, int *used_direct,
                             int *abandoned, double *estimate_bytes, void **lu_cache);
/* Time guard of the direct solve (seconds): a factorization UMFPACK's flop
 * estimate says will take longer is not started (rule of thumb, common
 * practice, no source: a 10^6-state evaluation iterates to 1e-7 in about a
 * minute here). */
#define SL_DIRECT_TIME_LIMIT 120.0
void sl_evaluate_direct_free(void **lu_cache);
/* After sl_evaluate_direct declined a factorization (used_direct = 0, not
 * abandoned) with UMFPACK's estimate est bytes against limit bytes: under
 * strict memory an estimate over the limit is SL_EDATA with a message
 * naming both and `instead` (what the caller does without it); otherwise
 * SL_OK - go on without the direct solve - after a warning when warn is set
 * and the estimate is over the limit, saying `doing` (a decline for time has been warned
 * about by sl_evaluate_direct). One rule for the discounted pi and the
 * total/average policy iteration. Collective (the inputs are agreed). */
sl_status sl_direct_declined(sl_ctx *ctx, double est, double limit, int strict, int warn, const char *instead,
                             const char *doing);

/* Iterative evaluation of a fixed policy to a certified sup error `tol`.
 * x holds the start and receives the midpoint value. Collective. */
sl_status sl_evaluate_iterative(sl_ctx *ctx, const sl_problem *p, const int32_t *policy,
                                double tol, int64_t max_sweeps, double *x, double *y,
                                sl_check *c, int64_t *sweeps);

/* Action ids of a pair-offset policy (owned states). Local. */
void sl_policy_actions(const sl_problem *p, const int32_t *policy, int32_t *actions);
/* Pair offsets from action ids; fails naming the state if an action is not
 * available there. Local (callers agree). */
sl_status sl_policy_offsets(sl_ctx *ctx, const sl_problem *p, const int32_t *actions,
                            int32_t *policy, const char *where);

#endif /* SL_SOLVE_H */
