/* sluice/sluice.h - library API: build, import, solve and check MDP models.
 *
 * Every function that takes an sl_ctx is collective over the context's
 * communicator unless marked "local": all ranks must call it, and all ranks
 * return the same status (errors found on one rank are agreed across ranks;
 * the message is available on every rank through sl_ctx_message()).
 */
#ifndef SLUICE_SLUICE_H
#define SLUICE_SLUICE_H

#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <signal.h>
#include <mpi.h>

#define SLUICE_VERSION "0.1.0"
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
const char *sl_strerror(sl_status st);

typedef struct sl_ctx sl_ctx;

/* Create a context on `comm` (duplicated). verbosity: 0 quiet, 1 normal
 * progress, 2 debug (messages carry source file:line). Collective. */
sl_status sl_ctx_new(MPI_Comm comm, int verbosity, sl_ctx **out);
/* Free a context; accepts NULL and *ctx == NULL, sets *ctx = NULL. Collective. */
void sl_ctx_free(sl_ctx **ctx);
int sl_ctx_rank(const sl_ctx *ctx);
int sl_ctx_size(const sl_ctx *ctx);
/* The message of the last error (agreed across ranks), "" if none. Local. */
const char *sl_ctx_message(const sl_ctx *ctx);
/* Where progress lines go (default stderr, rank 0 only). Local. */
void sl_ctx_set_log(sl_ctx *ctx, FILE *log);
/* A flag set asynchronously (e.g. by a signal handler): 1 = checkpoint now,
 * 2 = checkpoint and stop. Solvers poll it at sweep boundaries and agree on
 * it across ranks. Local. */
void sl_ctx_set_signal_flag(sl_ctx *ctx, volatile sig_atomic_t *flag);
/* Optional: where the handler that sets the flag records each signal before
 * setting it: info[0] the signal number, info[1] and info[2] the
 * CLOCK_MONOTONIC seconds and microseconds of its arrival. Solvers then log
 * when the signal arrived and at which sweep boundary they acted on it, on
 * their own clock, so tests can check the promise without a wall clock. Local. */
void sl_ctx_set_signal_info(sl_ctx *ctx, volatile sig_atomic_t *info);

/* ---- model building ------------------------------------------------- */

typedef enum sl_objective {
    SL_OBJ_DISCOUNTED = 0,
    SL_OBJ_TOTAL = 1,
    SL_OBJ_AVERAGE = 2,
    SL_OBJ_FINITE = 3
} sl_objective;

/* Parse/print objective names ("discounted", ...). Local. */
int sl_objective_parse(const char *name, sl_objective *out);
const char *sl_objective_name(sl_objective obj);

typedef struct sl_build_opts {
    const char *generator;      /* path to GEN.c or GEN.so */
    const char *output;         /* model file to write */
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
} sl_build_opts;

/* Compile (if .c), load and enumerate a generator; write the model file
 * atomically. Collective: each rank enumerates a slice of states. */
sl_status sl_build(sl_ctx *ctx, const sl_build_opts *opts);

typedef struct sl_import_opts {
    const char *input;          /* CSV path, or "-" for stdin */
    const char *output;
    double discount;
    sl_objective objective;
    int64_t n_states;           /* 0: max index + 1 */
    double prob_tolerance;
    int renormalize;
} sl_import_opts;

/* Import a triplet CSV (state,action,next_state,probability,reward).
 * Collective (rank 0 parses; all ranks write). */
sl_status sl_import(sl_ctx *ctx, const sl_import_opts *opts);

typedef struct sl_estimate_opts {
    const char *input;          /* experience CSV: state,action,reward,next_state */
    const char *output;
    double discount;
    sl_objective objective;
    int64_t n_states;           /* 0: max index + 1 */
    int64_t min_visits;         /* pairs seen fewer times are dropped (>=1) */
    int unseen_absorb;          /* states with no data become absorbing, reward 0 */
} sl_estimate_opts;

/* Maximum-likelihood model from logged experience. Collective. */
sl_status sl_estimate(sl_ctx *ctx, const sl_estimate_opts *opts);

/* ---- inspection ----------------------------------------------------- */

typedef struct sl_info_opts {
    const char *path;
    int json;
    int partition;              /* > 0: print predicted partition for N ranks */
    FILE *out;
} sl_info_opts;

/* Describe a model, solution or checkpoint file. Collective. */
sl_status sl_info(sl_ctx *ctx, const sl_info_opts *opts);

/* ---- solving -------------------------------------------------------- */

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

int sl_method_parse(const char *name, sl_method *out);
const char *sl_method_name(sl_method m);
int sl_order_parse(const char *name, sl_order *out);
const char *sl_order_name(sl_order o);

typedef struct sl_solve_opts {
    const char *model;
    const char *output;
    sl_method method;
    sl_order order;
    double tolerance;           /* certified sup-norm bound; <= 0 -> 1e-6 */
    int64_t max_iterations;     /* 0: no limit */
    double walltime;            /* seconds; 0: none */
    int sweeps;                 /* MPI partial-evaluation sweeps; 0: adaptive */
    int64_t check_every;        /* GS: sweeps between certificate checks; 0 auto */
    double memory_limit;        /* bytes for a direct factorization; 0: auto */
    int strict_memory;          /* fail instead of falling back to iterative */
    const char *checkpoint_dir; /* NULL: no checkpoints */
    double checkpoint_every;    /* seconds; 0 -> 600 */
    int resume;
    const char *report;         /* JSON report path, or NULL */
    double progress_every;      /* seconds between progress lines; 0 -> 2/30 */
} sl_solve_opts;

/* Solve a model; writes the solution file atomically. Returns SL_OK when the
 * tolerance was certified, SL_ESTOPPED when stopped early (the solution is
 * written with converged=false and, with a checkpoint directory, a
 * checkpoint). Collective. */
sl_status sl_solve(sl_ctx *ctx, const sl_solve_opts *opts);

typedef struct sl_evaluate_opts {
    const char *model;
    const char *policy;         /* solution file holding /policy */
    const char *output;
    double tolerance;           /* for iterative evaluation */
    double memory_limit;
    int iterative;              /* force iterative evaluation */
} sl_evaluate_opts;

/* Value of a fixed policy. Collective. */
sl_status sl_evaluate(sl_ctx *ctx, const sl_evaluate_opts *opts);

typedef struct sl_verify_opts {
    const char *model;
    const char *solution;
    double tolerance;           /* <= 0: use the solution's own */
    int json;
    FILE *out;
} sl_verify_opts;

/* Recompute the certificate of a solution independently of how it was
 * produced. Returns SL_OK if certified within tolerance, SL_EDATA if not.
 * Collective. */
sl_status sl_verify(sl_ctx *ctx, const sl_verify_opts *opts);

typedef struct sl_export_opts {
    const char *solution;
    const char *model;
    const char *output;         /* "-" for stdout */
} sl_export_opts;

/* One CSV row per state: state, factor labels, action, action name, value.
 * Collective (rank 0 writes). */
sl_status sl_export(sl_ctx *ctx, const sl_export_opts *opts);

typedef struct sl_simulate_opts {
    const char *model;
    const char *solution;
    int64_t start;
    int64_t episodes;
    int64_t horizon;            /* steps per episode; 0 -> until gamma^t < 1e-6 */
    uint64_t seed;
    int json;
    FILE *out;
} sl_simulate_opts;

/* Monte Carlo rollouts of the solution's policy from one start state.
 * Collective. */
sl_status sl_simulate(sl_ctx *ctx, const sl_simulate_opts *opts);

#endif /* SLUICE_SLUICE_H */
