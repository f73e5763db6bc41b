/* sluice/sluice.h - library API: models, solvers and solutions as handles.
 *
 * Three opaque handles, each created and freed in pairs (`_free(&h)` accepts
 * NULL and sets the pointer to NULL):
 *   sl_model     an immutable sparse model, each rank holding a contiguous
 *                range of states (rows) with global state numbers;
 *   sl_solver    a method and its settings (tolerance, checkpoints, monitor);
 *   sl_solution  values, actions and the certificate, distributed like the
 *                model it was computed for.
 * Every function is collective over the context's communicator unless marked
 * "local": all ranks call it and all ranks return the same status (an error
 * found on one rank is agreed across ranks; the message of the last failing
 * call is available on every rank through sl_ctx_message()).
 * The library prints nothing unless a log stream is set (sl_ctx_set_log) or a
 * monitor is installed (sl_solver_set_monitor).
 */
#ifndef SLUICE_SLUICE_H
#define SLUICE_SLUICE_H

#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <signal.h>
#include <mpi.h>

#if defined(__GNUC__) && !defined(SLUICE_STATIC)
#define SLUICE_API __attribute__((visibility("default")))
#else
#define SLUICE_API
#endif

#define SLUICE_VERSION "0.2.0"
#define SLUICE_FORMAT_VERSION 1

/* Status codes. Values are the sysexits.h exit codes the CLI returns. */
typedef enum sl_status {
    SL_OK = 0,
    SL_EUSAGE = 64,     /* bad command line or argument */
    SL_EDATA = 65,      /* input data is invalid */
    SL_ENOINPUT = 66,   /* input missing or unreadable */
    SL_EINTERNAL = 70,  /* internal error (a bug) */
    SL_ENOMEM = 71,     /* out of memory (EX_OSERR) */
    SL_ECANTCREAT = 73, /* cannot create output */
    SL_EIO = 74,        /* I/O error */
    SL_ESTOPPED = 75    /* stopped early; a valid checkpoint exists */
} sl_status;

/* Short description of a status (local). */
SLUICE_API const char *sl_strerror(sl_status st);

typedef struct sl_ctx sl_ctx;

/* Create a context on `comm` (duplicated). verbosity: 0 quiet, 1 normal
 * progress, 2 debug (messages carry source file:line). Collective. */
SLUICE_API sl_status sl_ctx_new(MPI_Comm comm, int verbosity, sl_ctx **out);
/* Free a context; accepts NULL and *ctx == NULL, sets *ctx = NULL. Collective. */
SLUICE_API void sl_ctx_free(sl_ctx **ctx);
SLUICE_API int sl_ctx_rank(const sl_ctx *ctx);
SLUICE_API int sl_ctx_size(const sl_ctx *ctx);
SLUICE_API int sl_ctx_verbosity(const sl_ctx *ctx);
/* The message of the last failing call (agreed across ranks), "" if none. Local. */
SLUICE_API const char *sl_ctx_message(const sl_ctx *ctx);
/* Where log lines and warnings go (default: nowhere; rank 0 only). Local. */
SLUICE_API void sl_ctx_set_log(sl_ctx *ctx, FILE *log);
/* A flag set asynchronously (e.g. by a signal handler): 1 = checkpoint now,
 * 2 = checkpoint and stop. Solvers poll it at sweep boundaries and agree on
 * it across ranks. Local. */
SLUICE_API void sl_ctx_set_signal_flag(sl_ctx *ctx, volatile sig_atomic_t *flag);
/* Optional: where the handler that sets the flag records each signal before
 * setting it: info[0] the signal number, info[1] and info[2] the
 * CLOCK_MONOTONIC seconds and microseconds of its arrival. Solvers then log
 * when the signal arrived and at which sweep boundary they acted on it, on
 * their own clock, so tests can check the promise without a wall clock. Local. */
SLUICE_API void sl_ctx_set_signal_info(sl_ctx *ctx, volatile sig_atomic_t *info);

/* ---- names ------------------------------------------------------------------ */

typedef enum sl_objective {
    SL_OBJ_DISCOUNTED = 0,
    SL_OBJ_TOTAL = 1,
    SL_OBJ_AVERAGE = 2,
    SL_OBJ_FINITE = 3
} sl_objective;

typedef enum sl_method {
    SL_METHOD_GS = 0,       /* Gauss-Seidel value iteration */
    SL_METHOD_JACOBI = 1,   /* value iteration */
    SL_METHOD_MPI = 2,      /* modified policy iteration */
    SL_METHOD_PI = 3        /* policy iteration, exact evaluation */
} sl_method;

typedef enum sl_order {
    SL_ORDER_AUTO = 0,      /* stage-reverse if the model has a stage factor */
    SL_ORDER_NATURAL = 1,
    SL_ORDER_STAGE_REVERSE = 2,
    SL_ORDER_REVERSE = 3
} sl_order;

/* Parse / print names ("discounted", "gs", "stage-reverse", ...). Local. */
SLUICE_API int sl_objective_parse(const char *name, sl_objective *out);
SLUICE_API const char *sl_objective_name(sl_objective obj);
SLUICE_API int sl_method_parse(const char *name, sl_method *out);
SLUICE_API const char *sl_method_name(sl_method m);
SLUICE_API int sl_order_parse(const char *name, sl_order *out);
SLUICE_API const char *sl_order_name(sl_order o);

/* ---- models ----------------------------------------------------------------- */

typedef struct sl_model sl_model;

/* An empty discounted model of n_states states. Fill it with
 * sl_model_set_rows on every rank that owns rows, then sl_model_assemble. */
SLUICE_API sl_status sl_model_create(sl_ctx *ctx, int64_t n_states, double discount, sl_model **m);

/* This rank's rows [s_begin, s_end), copied. Offsets are local, from 0:
 * the pairs of state s_begin+i are first_pair[i] .. first_pair[i+1]-1;
 * per pair: its action id and reward r(s,a); the transitions of local pair k
 * are first_transition[k] .. first_transition[k+1]-1, each a GLOBAL target
 * state and its probability. Ranks' ranges must tile [0, n_states) in rank
 * order; a rank that owns no rows need not call this. Local (checked again
 * collectively by sl_model_assemble). */
SLUICE_API sl_status sl_model_set_rows(sl_model *m, int64_t s_begin, int64_t s_end, const int64_t *first_pair,
                            const int32_t *action, const double *reward, const int64_t *first_transition,
                            const int64_t *target, const double *probability);

/* Optional description, before assembling. Factors: the state number is
 * mixed radix over the factors, factor 0 fastest; at most one is the stage
 * (e.g. month). Action names are indexed by action id. Local. */
SLUICE_API sl_status sl_model_set_factors(sl_model *m, int n_factors, const char *const *names, const int64_t *sizes,
                               int stage_factor /* -1: none */);
SLUICE_API sl_status sl_model_set_action_names(sl_model *m, int32_t n_actions, const char *const *names);
SLUICE_API sl_status sl_model_set_objective(sl_model *m, sl_objective objective);

/* Validate every row (targets in range, probabilities in [0,1] summing to 1
 * within 1e-9, finite rewards, no repeated action, every state with an
 * action) and compute the fingerprint. After this the model is immutable. */
SLUICE_API sl_status sl_model_assemble(sl_model *m);

/* Load a model file, each rank reading a range of states balanced by
 * transitions; checks the fingerprint. */
SLUICE_API sl_status sl_model_load(sl_ctx *ctx, const char *path, sl_model **m);
/* sl_model_load for a discounted solve: on more than one rank, a model
 * with a stage factor (and no visit counts or terminal values) is read in
 * the layout the discounted methods sweep in, each rank a share of every
 * stage, instead of a range of states that the solve would then move
 * between ranks (about half the rows on 2 ranks, and the memory of a
 * second copy). Such a model can only be solved (sl_solver_solve,
 * sl_solver_solve_lean) and described (the getters; sl_model_local_range
 * then gives the solve's internal numbering); anything that reads its rows
 * otherwise is refused with SL_EUSAGE. On one rank, or for any other
 * model, the same as sl_model_load. */
SLUICE_API sl_status sl_model_load_staged(sl_ctx *ctx, const char *path, sl_model **m);
/* Write the model file atomically (temporary name, then rename). A loaded
 * model with outcome quantities copies them from the file it was loaded from
 * (checked against their hash at load; SL_EDATA if that file changed). */
SLUICE_API sl_status sl_model_save(const sl_model *m, const char *path);

/* Compile (for .c), load and enumerate a generator (see sluice/generator.h),
 * each rank enumerating a slice of states; n_params NAME=VALUE overrides. */
SLUICE_API sl_status sl_model_from_generator(sl_ctx *ctx, const char *path_or_so, int n_params, const char *const *names,
                                  const double *values, sl_model **m);

typedef struct sl_build_opts {
    const char *generator;      /* path to GEN.c or GEN.so */
    int n_params;
    const char *const *param_names;
    const double *param_values;
    int have_discount;          /* override generator's discount */
    double discount;
    sl_objective objective;
    double prob_tolerance;      /* |sum p - 1| allowed; 0 -> 1e-9 */
    int renormalize;            /* rescale pairs within 1e-6 of 1 */
    const char *cache_dir;      /* NULL -> $SLUICE_CACHE or ~/.cache/sluice */
    const char *cc;             /* NULL -> $CC or "cc" */
    int64_t block_transitions;  /* sl_build_to_file: transitions per block (0: 2^21) */
} sl_build_opts;
/* The same with every build setting. */
SLUICE_API sl_status sl_model_from_generator_opts(sl_ctx *ctx, const sl_build_opts *opts, sl_model **m);
/* Build a generator's model straight into the file `path`, a block of
 * states at a time, without holding the model: the generator runs twice
 * (a first pass counts each rank's pairs and transitions so that every rank
 * knows where its rows go; the second generates them again and writes
 * them), so memory stays at a few blocks whatever the model's size. The
 * file is the one sl_model_save of sl_model_from_generator_opts writes
 * (same datasets and fingerprint). Atomic: on any error no file is left at
 * `path` (a generator that gives different rows in the two passes is
 * SL_EDATA). counts (may be NULL): states, pairs, transitions. Collective. */
SLUICE_API sl_status sl_build_to_file(sl_ctx *ctx, const sl_build_opts *opts, const char *path, int64_t counts[3]);

typedef struct sl_import_opts {
    const char *input;          /* CSV path, or "-" for stdin */
    double discount;
    sl_objective objective;
    int64_t n_states;           /* 0: max index + 1 */
    double prob_tolerance;
    int renormalize;
    const char *terminal_values;    /* finite objective: CSV 'state,terminal_value'
                                     * with every state once, stored as
                                     * /terminal_value; NULL: none */
} sl_import_opts;
/* A model from a triplet CSV (state,action,next_state,probability,reward).
 * Rank 0 parses; the rows are then spread over the ranks. */
SLUICE_API sl_status sl_model_import_csv(sl_ctx *ctx, const sl_import_opts *opts, sl_model **m);

typedef struct sl_estimate_opts {
    const char *input;          /* experience CSV: state,action,reward,next_state */
    double discount;
    sl_objective objective;
    int64_t n_states;           /* 0: max index + 1 */
    int64_t min_visits;         /* pairs seen fewer times are dropped (>=1) */
    int unseen_absorb;          /* states with no data become absorbing, reward 0 */
    double smoothing;           /* additive (Dirichlet) pseudo-count per observed
                                 * successor of the state; 0: none */
} sl_estimate_opts;
/* The maximum-likelihood model of logged experience. */
SLUICE_API sl_status sl_model_estimate_csv(sl_ctx *ctx, const sl_estimate_opts *opts, sl_model **m);

SLUICE_API void sl_model_free(sl_model **m);

/* Getters. Local. Strings stay valid while the model lives. */
SLUICE_API int64_t sl_model_n_states(const sl_model *m);
SLUICE_API int64_t sl_model_n_pairs(const sl_model *m);          /* global */
SLUICE_API int64_t sl_model_n_transitions(const sl_model *m);    /* global */
SLUICE_API double sl_model_discount(const sl_model *m);
SLUICE_API sl_objective sl_model_objective(const sl_model *m);
SLUICE_API const char *sl_model_fingerprint(const sl_model *m);  /* 32 hex digits; "" before assembling */
/* This rank's rows [*s_begin, *s_end). */
SLUICE_API void sl_model_local_range(const sl_model *m, int64_t *s_begin, int64_t *s_end);
SLUICE_API int sl_model_n_factors(const sl_model *m);
SLUICE_API const char *sl_model_factor_name(const sl_model *m, int f);
SLUICE_API int64_t sl_model_factor_size(const sl_model *m, int f);
SLUICE_API int sl_model_stage_factor(const sl_model *m);         /* -1: none */
/* Factor indices of a state (mixed radix, factor 0 fastest). */
SLUICE_API void sl_model_decode_state(const sl_model *m, int64_t state, int64_t *factor_index);
SLUICE_API int32_t sl_model_n_action_names(const sl_model *m);
SLUICE_API const char *sl_model_action_name(const sl_model *m, int32_t action);  /* "" if unnamed */
SLUICE_API const char *sl_model_generator(const sl_model *m);    /* "" if not built from one */
SLUICE_API int sl_model_n_params(const sl_model *m);
SLUICE_API const char *sl_model_param_name(const sl_model *m, int i);
SLUICE_API const char *sl_model_param_unit(const sl_model *m, int i);
SLUICE_API double sl_model_param_value(const sl_model *m, int i);
/* Format 2 annotations (docs/formats.md). Local; "" or 0 when the model has
 * none. Units of the reward and of one discount period: */
SLUICE_API const char *sl_model_reward_unit(const sl_model *m);
SLUICE_API const char *sl_model_period_unit(const sl_model *m);
/* Factor f: its unit; the numeric value of index i (returns 0 when the
 * factor has no values); the label of index i ("" when it has none). */
SLUICE_API const char *sl_model_factor_unit(const sl_model *m, int f);
SLUICE_API int sl_model_factor_value(const sl_model *m, int f, int64_t i, double *value);
SLUICE_API const char *sl_model_factor_label(const sl_model *m, int f, int64_t i);
/* Numeric value of action id a (0 when actions have no values) and its unit. */
SLUICE_API int sl_model_action_value(const sl_model *m, int32_t a, double *value);
SLUICE_API const char *sl_model_action_unit(const sl_model *m);
/* Outcome quantities: count, names and units of one period's quantity. */
SLUICE_API int sl_model_n_quantities(const sl_model *m);
SLUICE_API const char *sl_model_quantity_name(const sl_model *m, int q);
SLUICE_API const char *sl_model_quantity_unit(const sl_model *m, int q);

/* ---- solvers ---------------------------------------------------------------- */

typedef struct sl_solver sl_solver;
typedef struct sl_solution sl_solution;

SLUICE_API sl_status sl_solver_create(sl_ctx *ctx, sl_solver **s);
SLUICE_API void sl_solver_free(sl_solver **s);
/* Settings. Local (every rank must set the same). */
SLUICE_API sl_status sl_solver_set_method(sl_solver *s, sl_method method);          /* default gs */
SLUICE_API sl_status sl_solver_set_tolerance(sl_solver *s, double eps);             /* certified sup bound; default 1e-6 */
SLUICE_API sl_status sl_solver_set_order(sl_solver *s, sl_order order);             /* default auto */
SLUICE_API sl_status sl_solver_set_max_iterations(sl_solver *s, int64_t n);         /* 0: no limit */
SLUICE_API sl_status sl_solver_set_walltime(sl_solver *s, double seconds);          /* 0: none; counted from set */
/* The walltime is counted from this instant (sl_now()-like monotonic seconds
 * from sl_clock()); a command line passes its process start. Local. */
SLUICE_API sl_status sl_solver_set_walltime_origin(sl_solver *s, double clock_seconds);
SLUICE_API sl_status sl_solver_set_sweeps(sl_solver *s, int sweeps);                /* mpi: 0 adaptive */
SLUICE_API sl_status sl_solver_set_memory_limit(sl_solver *s, double bytes, int strict);  /* pi */
/* pi and exact evaluation: a factorization UMFPACK estimates to take longer
 * than this is not started (evaluation turns iterative); default 120 s,
 * 0: no limit. */
SLUICE_API sl_status sl_solver_set_direct_time_limit(sl_solver *s, double seconds);
/* Checkpoints into dir every every_s seconds (0 -> 600) and when asked by
 * the context's signal flag; resume: start from the newest valid one. */
SLUICE_API sl_status sl_solver_set_checkpoint(sl_solver *s, const char *dir, double every_s, int resume);
/* Sensitivity to thin data, for models from `estimate` (which store the
 * visits n of each (state, action)): solve with r(s,a) + c/sqrt(n) (bonus,
 * optimistic) or r(s,a) - c/sqrt(n) (penalty, pessimistic); pairs with
 * n = 0 keep their reward. c >= 0; 0 (default) turns it off; the later call
 * wins. The solution records the adjustment and verify applies it. Not with
 * checkpoints. */
SLUICE_API sl_status sl_solver_set_visit_bonus(sl_solver *s, double c);
SLUICE_API sl_status sl_solver_set_visit_penalty(sl_solver *s, double c);

/* Monitor: called on every rank with the same numbers (print on rank 0). */
typedef enum sl_event {
    SL_EVENT_START = 0,     /* before the first sweep (resumed: iteration > 0) */
    SL_EVENT_CHECK = 1,     /* after a synchronous Bellman check */
    SL_EVENT_CHECKPOINT = 2,/* a checkpoint was written */
    SL_EVENT_STOP = 3,      /* stopping early (signal, walltime, iteration limit) */
    SL_EVENT_END = 4        /* the last check before the solution is formed */
} sl_event;
typedef struct sl_progress {
    sl_event event;
    int64_t iteration, sweeps;
    double seconds;         /* solving time, including earlier runs before a resume */
    int have_check;         /* 0 before the first Bellman check: bounds below are NaN */
    double residual_sup;    /* sup |Tv - v| */
    double residual_span;
    double value_error;     /* certified bound at this check */
    double policy_loss;
    double rate;            /* observed contraction of the span per sweep (NaN if unknown) */
    double eta;             /* seconds to the tolerance at that rate (NaN if unknown) */
    int resumed;            /* START: resumed from a checkpoint */
    const char *note;       /* STOP: why; START: the sweep order used */
} sl_progress;
typedef void (*sl_monitor_fn)(const sl_progress *p, void *user);
SLUICE_API sl_status sl_solver_set_monitor(sl_solver *s, sl_monitor_fn fn, void *user);

/* Solve. SL_OK when the tolerance was certified; SL_ESTOPPED when stopped
 * early (signal, walltime, iteration limit; *x is still a valid solution
 * with converged = 0 and honest bounds, and with a checkpoint directory a
 * checkpoint was written); SL_EUSAGE when the tolerance is below the
 * model's roundoff floor (*x is set too). On other errors *x is NULL. */
SLUICE_API sl_status sl_solver_solve(sl_solver *s, const sl_model *m, sl_solution **x);
/* The same, lean on memory: the solver takes the model's rows instead of
 * copying them (peak memory about one copy of the rows instead of two).
 * Afterwards m keeps its description (counts, discount, fingerprint,
 * names) but not its rows; solving, saving or evaluating it again fails
 * with SL_EUSAGE. Free it as usual. (With a visit bonus or penalty the
 * rows are left in place, as sl_solver_solve does.) */
SLUICE_API sl_status sl_solver_solve_lean(sl_solver *s, sl_model *m, sl_solution **x);

/* Value of a fixed policy (the actions of `policy`): exact (UMFPACK) when it
 * fits the memory limit, else iterative to the solver's tolerance. *values
 * has no actions. */
SLUICE_API sl_status sl_solver_evaluate(sl_solver *s, const sl_model *m, const sl_solution *policy, sl_solution **values);

/* ---- solutions --------------------------------------------------------------- */

typedef struct sl_certificate {
    int converged;              /* both bounds <= tolerance */
    double value_error;         /* |value - v*| <= value_error in every state */
    double policy_loss;         /* v* - v_policy <= policy_loss in every state */
    double residual_span;       /* span of Tv - v at the last check */
    double residual_sup;        /* sup |Tv - v| */
    double residual_min, residual_max;
    double tolerance;
} sl_certificate;

typedef struct sl_solution_info {
    char model_fingerprint[40];
    char method[16];            /* gs, jacobi, mpi, pi; for values: direct/iterative */
    char order[24];
    char evaluation[16];        /* pi: "direct" or "iterative" */
    int ranks;                  /* ranks of the run that wrote it (0: unknown) */
    int has_policy;             /* 0 for a values file */
    int64_t n_states;
    int64_t iterations, sweeps;
    double seconds;
    double discount;
    int64_t checkpoints_written;
    double visit_adjust;        /* c of r + c/sqrt(visits) the solve used (0: none) */
} sl_solution_info;

/* This rank's slice: states [s_begin, s_begin + n); action ids (NULL for a
 * values-only solution). Local. */
SLUICE_API sl_status sl_solution_get_local(const sl_solution *x, int64_t *s_begin, int64_t *n, const double **value,
                                const int32_t **action);
SLUICE_API sl_status sl_solution_get_certificate(const sl_solution *x, sl_certificate *c);   /* local */
SLUICE_API sl_status sl_solution_get_info(const sl_solution *x, sl_solution_info *info);     /* local */
/* Residual history, one entry per synchronous check: *n entries, arrays
 * owned by x. Local. */
typedef struct sl_history_view {
    int64_t n;
    const int64_t *iteration, *sweeps;
    const double *seconds, *sup, *span, *value_error, *policy_loss;
} sl_history_view;
SLUICE_API sl_status sl_solution_get_history(const sl_solution *x, sl_history_view *h);
/* Whole vectors on rank `root` (malloc'ed there, NULL elsewhere; free()). */
SLUICE_API sl_status sl_solution_gather(const sl_solution *x, int root, double **value, int32_t **action);
/* Smallest and largest value and smallest |value| over all states.
 * Collective. */
SLUICE_API sl_status sl_solution_value_extent(const sl_solution *x, double *vmin, double *vmax, double *min_abs);
/* A certificate bound relative to the smallest |value| (NaN when some value
 * is 0 or min_abs is not finite). Local. */
SLUICE_API double sl_bound_relative(double bound, double min_abs);
/* The bound in words, in the reward unit and relative to the smallest
 * |value|: "4.9e-07 kCU, 3e-12 of the smallest value in magnitude" (or
 * "..., no relative figure: the smallest value is 0"). `unit` may be "".
 * Local. */
SLUICE_API void sl_bound_words(double bound, const char *unit, double min_abs, char *buf, size_t n);

/* Write atomically; load distributed like m, checking that x was computed
 * for m (fingerprint). A values file (from evaluate) loads without actions. */
SLUICE_API sl_status sl_solution_save(const sl_solution *x, const char *path);
SLUICE_API sl_status sl_solution_load(sl_ctx *ctx, const char *path, const sl_model *m, sl_solution **x);
/* A policy from a CSV of actions by state (a rule operated today), for
 * evaluation: header `state,action` or every factor name then `action`;
 * states by number or by factor labels / values / @INDEX, actions by name,
 * value as printed, or @ID; every state exactly once, each action available
 * in its state. Errors name the file and line (or the first missing state).
 * The solution holds the policy (values 0), distributed like m.
 * Collective. */
SLUICE_API sl_status sl_policy_read_csv(const sl_model *m, const char *path, sl_solution **x);
/* A policy from `path`: a rule CSV (sl_policy_read_csv) if the name ends in
 * .csv (any case), else a solution file (sl_solution_load). The one choice
 * every command makes for --policy and --compare. Collective. */
SLUICE_API sl_status sl_policy_load(sl_ctx *ctx, const char *path, const sl_model *m, sl_solution **x);
SLUICE_API void sl_solution_free(sl_solution **x);

/* ---- independent checks ------------------------------------------------------ */

typedef struct sl_verification {
    int certified;              /* both bounds <= tolerance */
    double residual_sup, residual_span;
    double value_error;         /* recomputed from the model, the value and the policy alone */
    double policy_loss;
    double tolerance;           /* used */
    sl_certificate claimed;     /* what the solution says of itself */
} sl_verification;
/* Recompute the bounds of x for m (tolerance <= 0: the solution's own).
 * SL_OK if certified within tolerance, SL_EDATA if not (*out filled). */
SLUICE_API sl_status sl_verify(const sl_model *m, const sl_solution *x, double tolerance, sl_verification *out);

/* ---- file inspection (printing lives here for `sluice info`) ------------------ */

/* Option structs may gain fields at their end in later versions, zero meaning
 * the earlier behaviour: initialise them with designated initializers. */
typedef struct sl_info_opts {
    const char *path;
    int json;
    int partition;              /* > 0: print predicted partition for N ranks */
    FILE *out;
    int64_t thin_below;         /* models with visit counts: pairs seen fewer
                                 * times are listed; 0 -> SLUICE_THIN_BELOW */
} sl_info_opts;
/* Default threshold of a thin (state, action): seen fewer than this many
 * times in the logged experience (rule of thumb, common practice, no source). */
#define SLUICE_THIN_BELOW 10
/* Describe a model, solution or checkpoint file. */
SLUICE_API sl_status sl_info(sl_ctx *ctx, const sl_info_opts *opts);

typedef struct sl_simulate_opts {
    const char *model;
    const char *solution;
    int64_t start;
    int64_t episodes;
    int64_t horizon;            /* steps per episode; 0 -> until gamma^t < 1e-6 */
    uint64_t seed;
    int json;
    FILE *out;
    /* per-stage figures (docs/results.md), as sl_outlook_compute reports them
     * exactly: for stages 0..stages, the sample mean of each numeric factor,
     * of each quantity's per-pair mean and P(q > 0) at the visited pair, and
     * of the discounted reward so far, each with a confidence interval */
    int64_t stages;             /* 0: only the discounted return */
    int interval;               /* SL_INTERVAL_NORMAL or SL_INTERVAL_HOEFFDING */
    double confidence;          /* of each interval, in (0, 1); 0 -> 0.95 */
    const char *trajectories;   /* CSV of every sampled step (written atomically), or NULL */
    const char *start_distribution; /* instead of start: a CSV of start probabilities (as
                                     * sl_outlook_opts); each episode draws its start */
    const char *stages_csv;     /* the per-stage figures as CSV, one row per stage (atomically), or
                                 * NULL; needs stages > 0 */
} sl_simulate_opts;
#define SL_INTERVAL_NORMAL 0    /* mean +- z s / sqrt(n), the central limit theorem */
#define SL_INTERVAL_HOEFFDING 1 /* mean +- (b - a) sqrt(ln(2/alpha) / (2n)), for values in [a, b] */
/* Monte Carlo rollouts of a policy (opts->solution: a solution file, or a
 * rule CSV by its .csv name) from one start state or a start distribution.
 * Collective; rank 0 simulates and prints. */
SLUICE_API sl_status sl_simulate(sl_ctx *ctx, const sl_simulate_opts *opts);

/* ---- objectives other than discounted ------------------------------------------
 * Finite horizon, total reward to absorption and average reward per period
 * (docs/objectives.md). Interim file-level entry points, to be folded into
 * sl_solver / sl_solution: they write the solution file (and report) and
 * print progress, the summary and the verification through the context's
 * log, like the command line does. */

typedef struct sl_objective_opts {
    const char *model_path;     /* for messages and the report */
    const char *output;         /* solution file to write */
    const char *report;         /* JSON report, or NULL */
    sl_order order;
    double tolerance;           /* total: value and policy; average: gain; <= 0 -> 1e-6 */
    int64_t max_iterations;     /* total/average: iterations; finite: stages; 0: none */
    double walltime;            /* seconds; 0: none */
    const char *checkpoint_dir; /* NULL: none */
    double checkpoint_every;    /* seconds; <= 0 -> 600 */
    int resume;
    int64_t horizon;            /* finite: number of stages */
    const char *terminal;       /* finite: solution file whose /value closes the horizon;
                                 * NULL: the model's /terminal_value, else 0 */
    double aperiodicity;        /* average: tau in (0, 1); <= 0 -> 0.5 */
    sl_method method;           /* total/average: SL_METHOD_PI for policy iteration
                                 * (exact evaluation by UMFPACK); otherwise value
                                 * iteration. Finite: ignored */
    /* policy iteration's guard on the direct solve (the discounted pi's rule):
     * a factorization over memory_limit bytes (<= 0: half of RAM) or one
     * UMFPACK estimates to take longer than direct_time_limit seconds (0: the
     * default, 120 s; < 0: no limit) is not attempted; policy iteration then
     * falls back to value iteration (total) or relative value iteration
     * (average) from its last values, with the reason logged and in the
     * report, unless strict_memory makes an estimate over the memory limit an
     * error (SL_EDATA). */
    double memory_limit;
    int strict_memory;
    double direct_time_limit;
} sl_objective_opts;

/* Solve m (objective finite, total or average) and write o->output.
 * Returns SL_OK certified, SL_ESTOPPED stopped early (solution written with
 * converged = 0; finite: stages kept in the checkpoint only), SL_EDATA for
 * models the objective cannot handle, naming a state. Collective. */
SLUICE_API sl_status sl_objective_solve(const sl_model *m, const sl_objective_opts *o);
/* Recompute the certificate of a solution file of such a model and print it
 * to out on rank 0 (text or JSON). SL_OK if certified within tolerance (<= 0:
 * the solution's own), SL_EDATA if not. Collective. */
SLUICE_API sl_status sl_objective_verify(const sl_model *m, const char *model_path, const char *solution,
                                         double tolerance, int json, FILE *out);

/* Monotonic seconds (the clock the solver's walltime uses). Local. */
SLUICE_API double sl_clock(void);
/* Short name of a signal the solver acts on ("TERM", "INT", "USR1", "USR2"; else "other"). */
SLUICE_API const char *sl_signal_name(int sig);

/* ==== results a planner can read (issue 9) ==============================
 * Units, outcome quantities, tables and outlooks. Kept in one block at the
 * end of the header so it merges independently of the rest. */

/* Describe a generator before building: its parameters with defaults,
 * units and help, and what init() reports with the defaults (factors with
 * values, units and labels, actions, reward and period units, outcome
 * quantities). `generator` is a .c (compiled into the cache) or .so file.
 * Collective; rank 0 prints. */
SLUICE_API sl_status sl_generator_describe(sl_ctx *ctx, const char *generator, FILE *out);

#define SL_LABEL_MAX 64

/* What `sluice table` shows in its cells. */
typedef enum sl_table_show {
    SL_SHOW_ACTION = 0,     /* the policy's action: its value (and unit) or name */
    SL_SHOW_VALUE = 1,      /* v, in reward units */
    SL_SHOW_MARGINAL = 2,   /* dv/dx along a numeric factor, reward unit per factor unit */
    SL_SHOW_QUANTITY = 3,   /* expected one-period outcome quantity under the policy */
    SL_SHOW_SWITCH = 4      /* per column, the row values where the action changes */
} sl_table_show;

typedef struct sl_table_opts {
    const char *solution;
    const char *model;
    const char *rows;           /* factor along the rows */
    const char *cols;           /* factor along the columns */
    int n_fix;
    const char *const *fix;     /* every other factor: NAME=VALUE or NAME@INDEX */
    const char *show;           /* action (NULL), value, marginal:FACTOR, QUANTITY, switch */
} sl_table_opts;

/* One change of the chosen action down a column (SL_SHOW_SWITCH). */
typedef struct sl_table_switch {
    int64_t col;                /* column index */
    int64_t row;                /* first row index with the new action */
    int32_t from, to;           /* action ids at row - 1 and at row */
} sl_table_switch;

/* A computed two-factor table. Owned by the caller; release with
 * sl_table_free. */
typedef struct sl_table {
    sl_table_show show;
    int64_t n_rows, n_cols;
    char row_name[SL_LABEL_MAX], row_unit[SL_LABEL_MAX];
    char col_name[SL_LABEL_MAX], col_unit[SL_LABEL_MAX];
    char (*row_label)[SL_LABEL_MAX];    /* [n_rows] label, value as printed, or index */
    char (*col_label)[SL_LABEL_MAX];    /* [n_cols] */
    double *cell;                       /* [n_rows * n_cols], row-major: the number shown
                                         * (SL_SHOW_ACTION: the action's value, or its id
                                         * when actions have no values) */
    int32_t *action;                    /* [n_rows * n_cols] the policy's action ids */
    int32_t n_actions;
    char (*action_label)[SL_LABEL_MAX]; /* [n_actions] action value as printed, or name */
    char what[128];                     /* what the cells hold, e.g. "release" */
    char unit[2 * SL_LABEL_MAX + 2];    /* unit of the cells, e.g. "kCU/hm3" ("" if none) */
    char fixed[1024];                   /* the fixed factors, e.g. "inflow=140 hm3/month (index 2)" */
    int64_t n_switches;
    sl_table_switch *switches;          /* SL_SHOW_SWITCH only, by column then row */
} sl_table;

/* Compute a table of a solution over two factors of its model, the other
 * factors fixed. marginal:FACTOR uses central differences of the value
 * along FACTOR divided by the step of its values (one-sided at the ends).
 * Errors (SL_EUSAGE / SL_EDATA) name the factor, quantity, value or file.
 * Collective: each rank reads its slice of the solution and model; every
 * rank gets the whole table. */
SLUICE_API sl_status sl_table_compute(sl_ctx *ctx, const sl_table_opts *o, sl_table *t);
/* Release a table's arrays (accepts a zeroed table). Local. */
SLUICE_API void sl_table_free(sl_table *t);

typedef struct sl_outlook_opts {
    const char *model;
    const char *solution;           /* a solution file, or a rule CSV of actions by state
                                     * (sl_policy_read_csv's format; chosen by the .csv name) */
    const char *start;              /* a state number or NAME=VALUE,... for every factor */
    const char *start_distribution; /* or a CSV of start probabilities (docs/outlook.md) */
    int64_t stages;                 /* N >= 0: stages 0..N are reported */
} sl_outlook_opts;

#define SL_OUTLOOK_NQ 6             /* factor statistics: mean, p5, p25, p50, p75, p95 */

/* The exact forward distribution of the state under a solution's policy,
 * mu_{t+1} = mu_t P_pi, summarised per stage. Owned by the caller. */
typedef struct sl_outlook {
    int64_t n_stages;                   /* N; arrays hold stages 0..N */
    int n_factors;                      /* numeric factors summarised */
    char (*factor_name)[SL_LABEL_MAX];
    char (*factor_unit)[SL_LABEL_MAX];
    int n_quantities;
    char (*quantity_name)[SL_LABEL_MAX];
    char (*quantity_unit)[SL_LABEL_MAX];
    char reward_unit[SL_LABEL_MAX], period_unit[SL_LABEL_MAX];
    double discount;
    double *factor_stats;       /* [(N+1) * n_factors * SL_OUTLOOK_NQ] mean, p5, p25, p50, p75, p95 of
                                 * the factor's value at the start of stage t */
    double *quantity_stats;     /* [(N+1) * n_quantities * 2] expected value of the quantity over
                                 * period t and the probability that it is positive */
    double *discounted_reward;  /* [N+1] sum over periods tau < t of gamma^tau E[r_tau] */
    double *mass;               /* [N+1] sum of mu_t (1 up to rounding) */
    double start_value;         /* sum of mu_0(s) value(s), from the solution; NaN for a rule CSV */
    double seconds;             /* wall time of the stage loop (rank 0's clock, after loading) */
} sl_outlook;

/* Propagate the start distribution N stages under the policy, exactly (no
 * sampling). Quantiles are lower quantiles of the factor's marginal
 * distribution: the smallest value whose cumulative probability reaches p
 * (within 1e-12). Collective: each rank owns a slice of states; mu_t is
 * pushed along the policy rows and summed with MPI_Reduce_scatter. */
SLUICE_API sl_status sl_outlook_compute(sl_ctx *ctx, const sl_outlook_opts *o, sl_outlook *r);
/* Release an outlook's arrays (accepts a zeroed one). Local. */
SLUICE_API void sl_outlook_free(sl_outlook *r);

/* Expected discounted totals of each outcome quantity under a policy. */
typedef struct sl_totals {
    int n_quantities;                   /* 0 for a model without quantities */
    char (*name)[SL_LABEL_MAX];         /* [n_quantities] */
    char (*unit)[SL_LABEL_MAX];         /* [n_quantities] unit of one period's quantity */
    char period_unit[SL_LABEL_MAX];
    char method[16];                    /* "direct" or "iterative" */
    int64_t n_states, s_begin, n_local; /* this rank's states */
    double *total;                      /* [n_quantities * n_local], quantity-major: the
                                         * expected discounted total from each state */
    double *error_bound;                /* [n_quantities] certified sup |total - exact| */
} sl_totals;

/* Policy evaluation with each quantity's per-pair mean as the reward, by the
 * solver's settings (sl_solver_evaluate: same methods and certificate).
 * `model_path` is the file `m` was loaded from (the quantities are read from
 * it). Needs one extra copy of the model's rows. Collective. */
SLUICE_API sl_status sl_quantity_totals(sl_solver *s, const sl_model *m, const sl_solution *policy,
                                        const char *model_path, sl_totals *t);
/* Release a totals result (accepts a zeroed one). Local. */
SLUICE_API void sl_totals_free(sl_totals *t);

/* Resolve a state given as a number or as NAME=VALUE / NAME@INDEX for every
 * factor, comma-separated (labels or values as printed), against the model
 * file's factors. `what` names the option in messages. Collective. */
SLUICE_API sl_status sl_state_lookup(sl_ctx *ctx, const char *model_path, const char *text, const char *what,
                                     int64_t *state);

#endif /* SLUICE_SLUICE_H */
