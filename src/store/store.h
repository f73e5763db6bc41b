/* store.h - HDF5 model, solution and checkpoint files (parallel HDF5). */
#ifndef SL_STORE_H
#define SL_STORE_H

#include "model/model.h"

/* Kinds of sluice file, from the /sluice_format attribute. */
typedef enum sl_file_kind {
    SL_FILE_UNKNOWN = 0,
    SL_FILE_MODEL,
    SL_FILE_SOLUTION,
    SL_FILE_VALUES,
    SL_FILE_CHECKPOINT
} sl_file_kind;

/* Open `path` and read its kind. Missing/unreadable -> SL_ENOINPUT; not an
 * HDF5 file or no sluice attribute -> SL_EDATA. Collective. */
sl_status sl_store_kind(sl_ctx *ctx, const char *path, sl_file_kind *kind);

/* Write a model: every rank passes its block (ranks in state order,
 * contiguous, possibly empty); meta->fingerprint must be set. The file is
 * written to a temporary name and renamed into place when complete.
 * Collective. */
sl_status sl_store_model_write(sl_ctx *ctx, const char *path, const sl_meta *meta,
                               const sl_block *block);

/* The same a block of rows at a time, so a model larger than memory can be
 * written as it is built. sl_store_model_begin: sizes, format and
 * annotations from `meta` (the fingerprint is not needed yet); this rank
 * will append states, pairs and transitions [begin[i], end[i]) (i = 0, 1, 2;
 * global numbers, ranks in state order). sl_store_model_append: the next
 * rows of this rank (possibly none), `final` = 1 on the last call of every
 * rank; a rank whose rows overrun its range, or end short of it at the
 * last call, fails with SL_EDATA. sl_store_model_end: with st == SL_OK
 * writes meta->fingerprint and puts the file in place; otherwise (or if
 * that fails) removes the temporary. Always frees *w. All collective. */
typedef struct sl_model_writer sl_model_writer;
sl_status sl_store_model_begin(sl_ctx *ctx, const char *path, const sl_meta *meta, const int64_t begin[3],
                               const int64_t end[3], sl_model_writer **w);
sl_status sl_store_model_append(sl_ctx *ctx, sl_model_writer *w, const sl_meta *meta, const sl_block *block,
                                int final);
sl_status sl_store_model_end(sl_ctx *ctx, sl_model_writer **w, const sl_meta *meta, sl_status st);

/* Read model metadata only (all ranks). Checks kind and format_version. */
sl_status sl_store_model_meta(sl_ctx *ctx, const char *path, sl_meta *meta);

/* Read states [s_begin, s_end) of a model into `block` on this rank
 * (collective: every rank passes its own range, possibly empty), then
 * validate the rows. Errors name the file and the state. */
sl_status sl_store_model_read(sl_ctx *ctx, const char *path, const sl_meta *meta,
                              int64_t s_begin, int64_t s_end, sl_block *block);
/* The same into arrays the caller owns: into's first_pair (ns + 1
 * entries), action, reward, first_transition (np + 1), target and
 * probability (nt), where np and nt (sl_block_pairs/trans of into) must be
 * the range's counts (sl_store_model_run_sizes). b describes the range as
 * sl_store_model_read would, its arrays pointing into into's: the caller
 * frees them, not b (never sl_block_free it). Models with visit counts or
 * terminal values are not read this way. Collective. */
sl_status sl_store_model_read_into(sl_ctx *ctx, const char *path, const sl_meta *m, int64_t s_begin, int64_t s_end,
                                   const sl_block *into, sl_block *b);

/* Read quantity q of pairs [p_begin, p_begin + n) (each rank its own
 * range, possibly empty): expected value and probability of being
 * positive, checked (finite; a probability). Collective (opens the file). */
sl_status sl_store_quantity_read(sl_ctx *ctx, const char *path, const sl_meta *m, int q, int64_t p_begin,
                                 int64_t n, double *mean, double *pos);

/* The number of pairs and transitions of each run of states [runs[2k],
 * runs[2k+1]), k < n_runs, from first_pair and first_transition at its
 * ends (range-checked; the rows themselves are checked when read).
 * Collective (every rank calls it, with its own runs). */
sl_status sl_store_model_run_sizes(sl_ctx *ctx, const char *path, const sl_meta *m, const int64_t *runs,
                                   int64_t n_runs, int64_t *n_pairs, int64_t *n_trans);
/* Read first_pair[s_begin .. s_end] and the first_transition entries at
 * those pairs: cum[i] = first_transition[first_pair[s_begin + i]], i in
 * [0, s_end - s_begin]. Used to partition by transitions. Collective. */
sl_status sl_store_model_cumulative(sl_ctx *ctx, const char *path, int64_t s_begin,
                                    int64_t s_end, int64_t **cum);


/* ---- solutions ---------------------------------------------------------------- */

/* Residual history: one record per synchronous check. */
typedef struct sl_history {
    int64_t n, cap;
    int64_t *iteration, *sweeps;
    double *seconds, *sup, *span, *value_error, *policy_loss;
} sl_history;
sl_status sl_history_push(sl_ctx *ctx, sl_history *h, int64_t iteration, int64_t sweeps, double seconds,
                          double sup, double span, double value_error, double policy_loss);
void sl_history_free(sl_history *h);

/* Scalars of a solution (or values, or checkpoint) file. */
typedef struct sl_solution_record {
    char model_fingerprint[40];
    char method[16];            /* gs, jacobi, mpi, pi; for values: direct/iterative */
    char order[24];
    char evaluation[16];        /* pi/evaluate: "direct" or "iterative" */
    int converged;
    int64_t ranks;              /* ranks of the run (0: not recorded) */
    int64_t iterations, sweeps;
    double seconds;
    double tolerance, discount;
    double residual_sup, residual_span, residual_min, residual_max;
    double value_error_bound, policy_loss_bound;
    double visit_adjust;        /* r + c/sqrt(visits) used (0: none; attr only when set) */
} sl_solution_record;

/* Write a solution (kind SL_FILE_SOLUTION; value + policy) or a values file
 * (SL_FILE_VALUES; actions == NULL). Each rank writes its owned slice
 * [s_begin, s_begin + n_local). Atomic. Collective. */
sl_status sl_store_solution_write(sl_ctx *ctx, const char *path, sl_file_kind kind, int64_t n_states,
                                  int64_t s_begin, int64_t n_local, const double *value,
                                  const int32_t *actions, const sl_solution_record *info,
                                  const sl_history *hist);
/* Same, calling extra(ctx, file, path, extra_arg) on the open file (an HDF5
 * hid_t) before it is closed, to add objective-specific attributes and
 * datasets (src/store/objective_io.c). Collective. */
typedef sl_status (*sl_store_extra_fn)(sl_ctx *ctx, int64_t file, const char *path, const void *arg);
sl_status sl_store_solution_write_ex(sl_ctx *ctx, const char *path, sl_file_kind kind, int64_t n_states,
                                     int64_t s_begin, int64_t n_local, const double *value,
                                     const int32_t *actions, const sl_solution_record *info,
                                     const sl_history *hist, sl_store_extra_fn extra, const void *extra_arg);
/* Read a solution's scalars and (if not NULL) the slice of value/policy.
 * Requires kind SL_FILE_SOLUTION (or SL_FILE_VALUES when `kind` says so) and
 * n_states to match. Collective. */
sl_status sl_store_solution_read(sl_ctx *ctx, const char *path, sl_file_kind kind, int64_t n_states,
                                 int64_t s_begin, int64_t n_local, double *value, int32_t *actions,
                                 sl_solution_record *info);

/* The residual history of a solution file (empty if it has none). Collective. */
sl_status sl_store_solution_read_history(sl_ctx *ctx, const char *path, sl_history *h);

/* ---- content checks of saved results (src/store/content.c) ----------------
 * Run by the loaders of solution, values, stage and checkpoint files on the
 * arrays HDF5 has read, and by the fuzz target tests/fuzz/fuzz_solution.c.
 * Each fails with SL_EDATA and a message naming the file, the dataset and,
 * for contents, the first state at fault. Local (callers agree). */

/* `length` (as sl_h5_length reports it: -1 if missing) must be n_states. */
sl_status sl_saved_length_check(sl_ctx *ctx, const char *path, const char *dataset, int64_t length,
                                int64_t n_states);
/* Every value of states s_begin .. s_begin + n - 1 is finite. */
sl_status sl_saved_values_check(sl_ctx *ctx, const char *path, const char *dataset, int64_t s_begin, int64_t n,
                                const double *value);
/* Every action[i] is offered by state i of the slice whose pair pointers are
 * first_pair[0..n] and pair actions pair_action (sl_pairs_find_action);
 * chosen (if not NULL) receives each one's pair index in the slice. `model`
 * (may be NULL or "") is named in the message. */
sl_status sl_saved_policy_check(sl_ctx *ctx, const char *path, const char *dataset, const int64_t *first_pair,
                                const int32_t *pair_action, int64_t s_begin, int64_t n, const int32_t *action,
                                int64_t *chosen, const char *model);

/* ---- checkpoints ---------------------------------------------------------------- */

/* Everything a solver needs to continue exactly where it stopped. */
typedef struct sl_solver_state {
    char method[16];
    int64_t iteration;      /* outer iterations done */
    int64_t sweeps;         /* sweeps done (all kinds) */
    int64_t since_check;    /* GS: sweeps since the last check */
    int64_t check_interval; /* GS: current check interval */
    int64_t mpi_m;          /* MPI: current partial-evaluation sweeps */
    int64_t pi_initialized; /* PI: initial policy chosen */
    double eval_tol;        /* PI: iterative-evaluation tolerance in use */
    double elapsed;         /* seconds of solving before this run */
    double last_span;       /* span at the last check (for rates) */
    int64_t last_check_sweeps;
    double visit_adjust;    /* c of the rewards r + c/sqrt(visits) solved with (0: none);
                             * a resume must ask for the same (attr, absent = 0) */
} sl_solver_state;

/* Write a checkpoint into dir: temporary file in dir, complete mark last,
 * flush, close, fsync, rename to ckpt-<seq>.h5, fsync dir, keep the newest
 * two. value/actions: this rank's owned slice. Collective. */
sl_status sl_ckpt_write(sl_ctx *ctx, const char *dir, const char *fingerprint, int64_t n_states,
                        int64_t s_begin, int64_t n_local, const double *value, const int32_t *actions,
                        const sl_solver_state *state, const sl_history *hist);

/* Load the newest checkpoint of dir that validates (complete mark,
 * checksums, fingerprint), falling back to the older with a warning.
 * *found = 0 if dir has no checkpoint. A checkpoint of another model is
 * refused (SL_EDATA). Collective. */
sl_status sl_ckpt_load(sl_ctx *ctx, const char *dir, const char *fingerprint, int64_t n_states, int64_t s_begin,
                       int64_t n_local, double *value, int32_t *actions, sl_solver_state *state,
                       sl_history *hist, int *found);

/* Path of the newest value-iteration checkpoint (ckpt-NNNNNN.h5) in dir
 * into path[len], "" if there is none or dir cannot be listed; the same on
 * every rank. Used to refuse such a checkpoint where another kind is
 * expected (a finite-horizon stage file). Collective. */
sl_status sl_ckpt_newest(sl_ctx *ctx, const char *dir, char *path, size_t len);

/* For `sluice info`: read a checkpoint's state and history. Collective. */
/* Lock the checkpoint directory DIR for this run (rank 0 creates DIR and
 * locks DIR/.lock; *fd is its descriptor there, -1 elsewhere). 73 if another
 * run holds it. Collective. sl_ckpt_unlock releases it (accepts -1). */
sl_status sl_ckpt_lock(sl_ctx *ctx, const char *dir, int *fd);
void sl_ckpt_unlock(int *fd);
sl_status sl_ckpt_info(sl_ctx *ctx, const char *path, char *fingerprint, int64_t *n_states,
                       sl_solver_state *state, sl_history *hist, int *complete);

#endif /* SL_STORE_H */
