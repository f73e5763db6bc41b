/* model.h - a contiguous block of model rows in memory, its metadata,
 * the row builder used by every input path, validation and fingerprint. */
#ifndef SL_MODEL_H
#define SL_MODEL_H

#include "core/core.h"
#include "sluice/generator.h"

#define SL_NAME_MAX 64

/* Everything about a model except its rows; identical on every rank. */
typedef struct sl_meta {
    int format_version;
    int64_t n_states, n_pairs, n_trans;
    double discount;
    sl_objective objective;
    char fingerprint[40];               /* 32 hex digits */
    int n_factors;
    char factor_name[SLUICE_MAX_FACTORS][SL_NAME_MAX];
    int64_t factor_size[SLUICE_MAX_FACTORS];
    int factor_stage[SLUICE_MAX_FACTORS];
    int32_t n_action_names;             /* 0: no names */
    char (*action_name)[SL_NAME_MAX];   /* [n_action_names], indexed by action id */
    char generator[SL_NAME_MAX];        /* "" if not built from a generator */
    char source[256];                   /* input file the model came from */
    int n_params;
    char (*param_name)[SL_NAME_MAX];
    double *param_value;
    char (*param_unit)[SL_NAME_MAX];
    /* format 2 annotations (docs/formats.md); all optional. Arrays are
     * owned by the meta and freed by sl_meta_free. */
    char factor_unit[SLUICE_MAX_FACTORS][SL_NAME_MAX];
    double *factor_value[SLUICE_MAX_FACTORS];               /* [factor_size] or NULL */
    char (*factor_label[SLUICE_MAX_FACTORS])[SL_NAME_MAX];  /* [factor_size] or NULL */
    int32_t n_action_values;                                /* 0: none */
    double *action_value;                                   /* [n_action_values] */
    char action_unit[SL_NAME_MAX];
    char reward_unit[SL_NAME_MAX];
    char period_unit[SL_NAME_MAX];
    int n_quantities;
    char quantity_name[SLUICE_MAX_QUANTITIES][SL_NAME_MAX];
    char quantity_unit[SLUICE_MAX_QUANTITIES][SL_NAME_MAX];
    /* optional datasets of any format version, covered by the fingerprint
     * only when present (so files without them keep theirs) */
    int has_visits;                     /* /pair/visits: logged visits per pair */
    int has_terminal;                   /* /terminal_value: finite-horizon terminal values */
} sl_meta;

/* Largest model format version this build reads and writes. A model is
 * written as version 2 only when it carries format 2 annotations. */
#define SL_MODEL_FORMAT_MAX 2
/* Does the meta carry any format 2 annotation? Local. */
int sl_meta_has_annotations(const sl_meta *m);
/* Index of factor / quantity `name`, or -1. Local. */
int sl_meta_factor_index(const sl_meta *m, const char *name);
int sl_meta_quantity_index(const sl_meta *m, const char *name);

void sl_meta_free(sl_meta *m);
/* Deep copy (allocates the name arrays). Local. */
sl_status sl_meta_copy(sl_ctx *ctx, sl_meta *dst, const sl_meta *src);
/* Broadcast meta from rank 0 to all ranks (arrays allocated on receivers). */
sl_status sl_meta_bcast(sl_ctx *ctx, sl_meta *m);
/* Decode a state into its factor values (mixed radix, factor 0 fastest). */
void sl_meta_decode(const sl_meta *m, int64_t state, int64_t *values);
/* Index of the stage factor, or -1. */
int sl_meta_stage_factor(const sl_meta *m);

/* Rows [s_begin, s_end) of the model. Index arrays hold GLOBAL indices, as
 * in the file: pairs of state s (global) are first_pair[s - s_begin] ..
 * first_pair[s - s_begin + 1] - 1, and so on. */
typedef struct sl_block {
    int64_t s_begin, s_end;     /* owned states */
    int64_t p_begin, p_end;     /* owned pairs */
    int64_t t_begin, t_end;     /* owned transitions */
    int64_t *first_pair;        /* [n_states_local + 1] */
    int32_t *action;            /* [n_pairs_local] */
    double *reward;             /* [n_pairs_local] */
    int64_t *first_trans;       /* [n_pairs_local + 1] */
    int64_t *target;            /* [n_trans_local] */
    double *prob;               /* [n_trans_local] */
    int nq;                     /* outcome quantities per pair (0: none) */
    double *qmean;              /* [n_pairs_local * nq], pair-major: E[q | s,a] */
    double *qpos;               /* [n_pairs_local * nq]: P(q > 0 | s,a) */
    uint64_t qacc[2];           /* fingerprint sum of the quantity entries when
                                 * a reader hashed them without keeping them */
    double *terminal;           /* [n_states_local] finite-horizon terminal values
                                 * (/terminal_value), or NULL */
    int64_t *visits;            /* [n_pairs_local] logged visits of each pair
                                 * (models from `estimate`), or NULL */
    uint32_t *col;              /* after sl_halo_build: local columns into
                                 * [owned | halo]; `target` is then freed */
    /* builder state */
    size_t cap_states, cap_pairs, cap_ptrs, cap_trans, cap_q;
    int in_pair;
    double prob_tolerance;      /* |sum - 1| allowed */
    int renormalize;            /* fix |sum - 1| <= 1e-6 by rescaling */
    int64_t n_renormalized;     /* pairs rescaled */
    int64_t n_states_total;     /* for target range checks; 0 = unchecked */
    const char *where;          /* source name for messages */
} sl_block;

static inline int64_t sl_block_states(const sl_block *b) { return b->s_end - b->s_begin; }
static inline int64_t sl_block_pairs(const sl_block *b) { return b->p_end - b->p_begin; }
static inline int64_t sl_block_trans(const sl_block *b) { return b->t_end - b->t_begin; }

/* The pair of state i of a slice that has `action`: its index among the
 * slice's pairs (first_pair[i] - p_begin .. first_pair[i + 1] - p_begin - 1,
 * pair_action indexed alike; p_begin is the global number of the slice's
 * first pair), or -1 if state i does not offer it. The one test of "is this
 * action available in this state" for policies read from files, rules and
 * the solvers. Local. */
int64_t sl_pairs_find_action(const int64_t *first_pair, int64_t p_begin, const int32_t *pair_action, int64_t i,
                             int32_t action);

void sl_block_free(sl_block *b);

/* ---- builder: append rows in order ------------------------------------
 * sl_block_init(b, s_begin, p_begin, t_begin) (p_begin/t_begin may be 0 and
 * fixed later with sl_block_rebase once global offsets are known); then per
 * state: sl_block_begin_state; per pair: sl_block_begin_pair, any number of
 * sl_block_add, sl_block_end_pair (merges duplicate targets, sorts them,
 * computes r(s,a) = sum p*r, validates); sl_block_end_state (fails if the
 * state has no action). Errors name the state and action. Local. */
sl_status sl_block_init(sl_ctx *ctx, sl_block *b, int64_t s_begin, int64_t n_states_total,
                        const char *where);
sl_status sl_block_begin_state(sl_ctx *ctx, sl_block *b);
sl_status sl_block_begin_pair(sl_ctx *ctx, sl_block *b, int32_t action);
sl_status sl_block_add(sl_ctx *ctx, sl_block *b, int64_t target, double prob, double reward);
/* Start collecting `nq` quantities per pair (call right after init). */
sl_status sl_block_set_quantities(sl_ctx *ctx, sl_block *b, int nq);
/* As sl_block_add, with the value of every quantity on this transition:
 * the pair keeps sum p*q and sum of p over transitions with q > 0. */
sl_status sl_block_add_outcome(sl_ctx *ctx, sl_block *b, int64_t target, double prob, double reward,
                               const double *q);
sl_status sl_block_end_pair(sl_ctx *ctx, sl_block *b);
sl_status sl_block_end_state(sl_ctx *ctx, sl_block *b);
/* Empty the block, keeping its memory, to build the rows that start at
 * state s_begin, pair p_begin and transition t_begin (global numbers; the
 * builder of a model a block of states at a time). Local. */
void sl_block_restart(sl_block *b, int64_t s_begin, int64_t p_begin, int64_t t_begin);
/* Shift the global pair/transition offsets (after an exclusive scan). */
void sl_block_rebase(sl_block *b, int64_t p_begin, int64_t t_begin);

/* Check a block read from a file: monotone pointers, sizes, targets in
 * range, probabilities in [0,1] summing to 1, finite rewards, no repeated
 * action in a state, every state with an action. `where` names the file.
 * Local (callers agree). */
sl_status sl_block_validate(sl_ctx *ctx, const sl_block *b, const sl_meta *m,
                            double prob_tolerance, const char *where);

/* Fingerprint of the model contents: an order-independent sum of hashed
 * (position, value) entries over the block, reduced over ranks, mixed with
 * sizes and discount. Same value for any partition. Collective. */
sl_status sl_fingerprint(sl_ctx *ctx, const sl_meta *m, const sl_block *b, char out[40]);
/* The two halves of sl_fingerprint, for rows seen a block at a time: add
 * a block's entries to an accumulator (local; blocks in any order), then
 * reduce over ranks and mix with the sizes and annotations (collective). */
void sl_fingerprint_add(uint64_t acc[2], const sl_meta *m, const sl_block *b);
sl_status sl_fingerprint_finish(sl_ctx *ctx, const sl_meta *m, const uint64_t acc[2], char out[40]);
/* Add the entries of quantity q for pairs [p0, p0+n) (global numbers) to a
 * fingerprint accumulator; mean[k*stride], pos[k*stride] belong to pair
 * p0+k. Used by the in-memory fingerprint and by streaming readers. Local. */
void sl_fingerprint_quantity(uint64_t acc[2], int q, int64_t p0, int64_t n, const double *mean,
                             const double *pos, int stride);

/* ---- the public model handle -------------------------------------------- */

/* An immutable model once assembled: metadata identical on every rank, this
 * rank's rows with global indices, and every rank's state range. */
struct sl_model {
    sl_ctx *ctx;
    sl_meta meta;
    sl_block blk;
    int64_t *bounds;            /* [size + 1] state ranges of all ranks */
    char name[4096];            /* for messages: the file it was loaded from or its source */
    int have_rows;              /* sl_model_set_rows was called on this rank */
    int assembled;
    int rows_released;          /* a solve took the rows (sl_solver_solve_lean):
                                 * only the description is left */
    struct sl_stage_map *staged; /* NULL; or (sl_model_load_staged) the rows are
                                 * this rank's share of every stage in the
                                 * solve's internal layout, with this map;
                                 * bounds is then the file's partition */
};

/* Wrap rows that are already validated, rebased to global offsets and
 * fingerprinted (meta->fingerprint set) into an assembled model. Takes
 * ownership of *meta and *blk (left empty), also on failure. Collective. */
sl_status sl_model_adopt(sl_ctx *ctx, sl_meta *meta, sl_block *blk, sl_model **out);

/* Whether a model is ready for solving (assembled); records an error. Local. */
sl_status sl_model_check_ready(sl_ctx *ctx, const sl_model *m, const char *what);
/* The same, but a model loaded in the solve's layout (sl_model_load_staged)
 * is accepted: for the discounted solve only. Local. */
sl_status sl_model_check_solvable(sl_ctx *ctx, const sl_model *m, const char *what);

#endif /* SL_MODEL_H */
