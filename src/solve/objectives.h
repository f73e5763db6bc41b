/* objectives.h - finite-horizon, total-reward and average-reward solvers on a
 * loaded problem, each with a certificate that can be recomputed (internal).
 *
 * All functions take an sl_problem loaded with sl_problem_load_any and are
 * independent of the discounted solver's state. Methods, bounds and
 * citations: docs/objectives.md. */
#ifndef SL_SOLVE_OBJECTIVES_H
#define SL_SOLVE_OBJECTIVES_H

#include "solve/solve.h"
#include "store/store.h"

/* Prepare an assembled model of any objective for solving; the discount is
 * checked per objective: finite (0, 1], total exactly 1, average ignored
 * and taken as 1. path names the model in messages. Collective. */
sl_status sl_problem_from_model_any(sl_ctx *ctx, const sl_model *m, const char *path, sl_order order,
                                    sl_problem *p);

/* The finite-horizon stage checkpoint inside a --checkpoint directory
 * (total and average use the ordinary ckpt-NNNNNN.h5 files). */
#define SL_FINITE_CKPT "finite-stages.h5"

typedef struct sl_obj_opts {
    int64_t horizon;            /* finite: number of stages H >= 1 */
    const double *terminal;     /* finite: terminal values of the owned states
                                 * ([n_local]); NULL = 0 */
    double tolerance;           /* total: value and policy bound; average: gain
                                 * bound; finite: only reported */
    int64_t max_iterations;     /* total/average; 0: none */
    double aperiodicity;        /* average: tau in (0, 1); <= 0 -> 0.5 */
    const char *checkpoint_dir; /* NULL: none */
    double checkpoint_every;    /* seconds; <= 0 -> 600 */
    int resume;
    double walltime;            /* seconds from start; 0: none */
    const char *fingerprint;    /* model fingerprint (checkpoint identity) */
    int policy_iteration;       /* total/average: policy iteration (UMFPACK
                                 * evaluation) instead of value iteration */
    double memory_limit;        /* policy iteration: bytes; <= 0 -> half of RAM */
    int strict_memory;          /* over the memory limit: SL_EDATA, not a fallback */
    double direct_time_limit;   /* seconds; 0 -> SL_DIRECT_TIME_LIMIT; < 0: none */
} sl_obj_opts;

/* What a solve certifies (and what verify recomputes). */
typedef struct sl_obj_cert {
    int converged;
    int64_t iterations, sweeps;
    double residual_min, residual_max, residual_sup;
    double value_error_bound;   /* finite/total: sup |value - v*| */
    double policy_loss_bound;   /* finite/total: sup (v* - v_policy);
                                 * average: g* - g_policy */
    double roundoff;            /* allowance used for floating-point error */
    double gain, gain_lower, gain_upper;    /* average */
    double aperiodicity;        /* average */
    double steps_max;           /* total: max_s of the certified bound on
                                 * expected steps to absorption */
    int64_t n_absorbing;        /* total */
} sl_obj_cert;

typedef struct sl_obj_result {
    sl_objective objective;
    int64_t horizon;            /* finite: H; otherwise 0 */
    /* finite: [(H + 1) * n_local] stage values, V_t at t * n_local (V_H =
     * terminal); otherwise [n_local + n_halo], owned part is the value
     * (total) or the bias (average) */
    double *value;
    /* pair offsets; finite: [H * n_local], stage t at t * n_local;
     * otherwise [n_local] */
    int32_t *policy;
    double *steps;              /* total: [n_local] bound on expected steps */
    sl_obj_cert cert;
    /* policy iteration asked for but the direct solve declined: why, and
     * value iteration finished the job ("" otherwise) */
    char fallback[256];
} sl_obj_result;

void sl_obj_result_free(sl_obj_result *r);

/* Flag the owned absorbing states (every action stays with probability 1
 * and reward 0) in flag[n_local]; returns how many. Local. */
int64_t sl_obj_find_absorbing(const sl_problem *p, char *flag);

/* Solve the problem's objective. Returns SL_OK when certified, SL_ESTOPPED
 * when stopped early (result filled, converged = 0), SL_EDATA for models
 * the objective cannot handle (no absorbing state, improper policies,
 * multichain), naming a state. Collective. */
sl_status sl_obj_solve(sl_ctx *ctx, const sl_problem *p, const sl_obj_opts *o, sl_obj_result *res);

/* Independent certificates from stored values (verify). Collective.
 * finite: V [(H+1) * n_local], policy [H * n_local] pair offsets.
 * total: v and w ([n_local + n_halo] each, halo filled inside), policy.
 * average: h ([n_local + n_halo]), policy. */
sl_status sl_obj_certify_finite(sl_ctx *ctx, const sl_problem *p, int64_t H, double *V,
                                const int32_t *policy, sl_obj_cert *c);
sl_status sl_obj_certify_total(sl_ctx *ctx, const sl_problem *p, double *v, double *w,
                               const int32_t *policy, sl_obj_cert *c);
sl_status sl_obj_certify_average(sl_ctx *ctx, const sl_problem *p, double *h, const int32_t *policy,
                                 sl_obj_cert *c);

/* What verify recomputes for a solution file of such a model. */
typedef struct sl_obj_check {
    sl_objective objective;
    sl_obj_cert cert;           /* recomputed; average: value_error_bound is the
                                 * stored gain's distance to the far end of
                                 * [gain_lower, gain_upper] */
    double tolerance;           /* the one applied (given, else the solution's) */
    int certified;              /* both bounds within tolerance */
    int64_t horizon;            /* finite */
    double gain;                /* average: the stored gain */
    int terminal_rechecked;     /* finite: terminal values compared with their source */
    char terminal[256];         /* finite: where the terminal values came from */
    char fingerprint[40];
} sl_obj_check;

/* Recompute the certificate of a solution file (objective finite, total or
 * average) into *out. SL_OK whether certified or not (out->certified);
 * SL_EDATA for a file that cannot be checked (another model, another
 * objective, inconsistent stages or terminal values), naming it. The
 * printing entry point is sl_objective_verify. Collective. */
sl_status sl_obj_verify_check(const sl_model *m, const char *model_path, const char *solution, double tolerance,
                              sl_obj_check *out);

/* ---- files (src/store/objective_io.c) ------------------------------------ */

/* The objective-specific part of a solution file. */
typedef struct sl_obj_file {
    sl_objective objective;
    int64_t horizon, first_stage;   /* finite: stages first_stage..horizon stored */
    double *stage_value;            /* finite: [(horizon - first_stage + 1) * n_local] */
    int32_t *stage_action;          /* finite: [(horizon - first_stage) * n_local] action ids */
    double *steps;                  /* total: [n_local] */
    double gain, gain_lower, gain_upper, aperiodicity, roundoff, steps_max;
    int64_t n_absorbing;
    char terminal[256];             /* finite: where the terminal values came from */
} sl_obj_file;

/* Write a solution (or, kind SL_FILE_CHECKPOINT-like use, a finite-horizon
 * stage checkpoint) with the objective part. Atomic. Collective. */
sl_status sl_store_objective_write(sl_ctx *ctx, const char *path, int64_t n_states, int64_t s_begin,
                                   int64_t n_local, const double *value, const int32_t *actions,
                                   const sl_solution_record *info, const sl_obj_file *x);
/* Read the objective part (allocates the arrays; free with
 * sl_obj_file_free). A file without the objective attribute is
 * "discounted". Collective. */
sl_status sl_store_objective_read(sl_ctx *ctx, const char *path, int64_t n_states, int64_t s_begin,
                                  int64_t n_local, sl_obj_file *x);
void sl_obj_file_free(sl_obj_file *x);
/* Terminal values stored in a model file (/terminal_value, optional):
 * *found = 0 if the dataset is absent. Collective. */
sl_status sl_store_terminal_read(sl_ctx *ctx, const char *model, int64_t n_states, int64_t s_begin, int64_t n_local,
                                 double *value, int *found);

#endif /* SL_SOLVE_OBJECTIVES_H */
