/* analysis.h - what tables, outlooks and totals share: a solution's policy
 * on this rank's slice of states with the model's per-pair numbers, and
 * factor labels / NAME=VALUE lookups. Internal. */
#ifndef SL_ANALYSIS_H
#define SL_ANALYSIS_H

#include "store/store.h"

/* A policy view: states [s_begin, s_end) of this rank (an even split by
 * states, bounds[r] = n*r/P), with the solution's value and action and the
 * model's numbers for the chosen pair (s, pi(s)). */
typedef struct sl_pview {
    sl_meta meta;
    int64_t s_begin, s_end, n_local;
    double *value;          /* [n_local] */
    int32_t *action;        /* [n_local] action id chosen by the policy */
    double *reward;         /* [n_local] r(s, pi(s)) */
    int nq;                 /* quantities loaded (0 unless asked) */
    double *qmean, *qpos;   /* [n_local * nq], state-major */
    /* policy rows, if asked: successors of (s, pi(s)) */
    int64_t *first_trans;   /* [n_local + 1], from 0 */
    int64_t *target;        /* global next states */
    double *prob;
    int is_rule;            /* the policy came from a rule CSV: value[] is 0, not a value */
} sl_pview;

/* Load the view. The policy is a solution file or a rule CSV
 * (sl_policy_file_read). Checks that the solution belongs to the model
 * (fingerprint) and that every policy action is a pair of the model.
 * want_quantities: also the quantities' mean and p_positive at the chosen
 * pairs; want_rows: also the policy rows (transitions). Collective. */
sl_status sl_pview_load(sl_ctx *ctx, const char *model, const char *solution, int want_quantities, int want_rows,
                        sl_pview *pv);
void sl_pview_free(sl_pview *pv);

/* Collect, on every rank, value / action / quantity means of the listed
 * global states (each owned by exactly one rank). Outputs may be NULL;
 * qmean is [n * nq]. Collective. */
sl_status sl_pview_gather(sl_ctx *ctx, const sl_pview *pv, int64_t n, const int64_t *states, double *value,
                          int32_t *action, double *qmean);

/* Label of index i of factor f: its label, else its value ("%.6g"), else
 * the index. Local. */
void sl_factor_label(const sl_meta *m, int f, int64_t i, char *buf, size_t n);

/* Parse "NAME=VALUE" (a label, or a numeric value as printed, or for a
 * factor with neither the index) or "NAME@INDEX" into a factor and an
 * index. `what` names the option for messages. Local; records the error. */
sl_status sl_factor_parse(sl_ctx *ctx, const sl_meta *m, const char *text, const char *what, int *factor,
                          int64_t *index);

/* Index of the grid value named by text (the number x it parses to): the
 * value printed ("%.6g") as text, else the first within a relative 1e-9
 * of x; -1 if none. The printed form comes first so that it names its own
 * value on a grid finer than the tolerance. Local. */
int64_t sl_grid_find(const double *grid, int64_t n, const char *text, double x);

/* Parse a state: a number, or every factor as NAME=VALUE / NAME@INDEX
 * separated by commas. Local; records the error. */
sl_status sl_state_parse(sl_ctx *ctx, const sl_meta *m, const char *text, const char *what, int64_t *state);

/* Stride of factor f in the state number (product of the earlier sizes). */
int64_t sl_factor_stride(const sl_meta *m, int f);

/* Smallest and largest of v[0..n) and the smallest |v| (INFINITY, -INFINITY,
 * INFINITY when n = 0). Local. */
void sl_value_extent_local(const double *v, int64_t n, double *vmin, double *vmax, double *min_abs);

/* A CSV keyed by state (statecsv.c): header `state,LAST` or every factor
 * name then LAST; each row's state is a number or the factors' labels /
 * values / @INDEX. fn is called per row with "PATH line N" for messages;
 * errors name the file and line. Local (rank 0). */
typedef sl_status (*sl_state_row_fn)(sl_ctx *ctx, void *user, const char *where, int64_t line, int64_t state,
                                     const char *value);
sl_status sl_state_csv_read(sl_ctx *ctx, const sl_meta *m, const char *path, const char *last, sl_state_row_fn fn,
                            void *user);

/* A start distribution (statecsv.c): header `state,probability` or every
 * factor name then `probability`; probabilities in [0, 1] summing to 1
 * within 1e-9. Returns the rows' states and probabilities (caller frees).
 * Errors name the file and line. Local (rank 0). */
sl_status sl_start_csv_read(sl_ctx *ctx, const sl_meta *m, const char *path, int64_t *n_out, int64_t **st_out,
                            double **p_out);

/* ---- policies given as a rule CSV (policycsv.c) ---------------------------- */

/* Is `path` a rule CSV (name ends in .csv, any case) rather than a solution
 * file? The one test every command uses. Local. */
int sl_policy_path_is_rule(const char *path);

/* Read a rule CSV (header `state,action` or every factor name then
 * `action`) on rank 0 and hand each rank the actions of its states
 * [s_begin, s_begin + nl) and the CSV line of each. Every state needs
 * exactly one row; n_actions bounds @ID and bare ids. Errors name the file
 * and line. Collective; any contiguous slice per rank. */
sl_status sl_rule_read(sl_ctx *ctx, const sl_meta *m, int32_t n_actions, const char *path, int64_t s_begin,
                       int64_t nl, int32_t *action, int64_t *line);
/* The reading of sl_rule_read, on one process: action[s] and line[s] for
 * every state s of the model (arrays of n_states). Local. */
sl_status sl_rule_read_local(sl_ctx *ctx, const sl_meta *m, int32_t n_actions, const char *path, int32_t *action,
                             int64_t *line);

/* For each of the nl states from s_begin, the pair whose action is
 * action[i] (chosen[i], relative to first_pair[0]; chosen may be NULL).
 * first_pair[0..nl] are absolute pair indices, pair_action[q - first_pair[0]]
 * the actions. With line != NULL (a rule) the error reads "POLICY line N:
 * action X is not available in state S (labels)", else it names the
 * solution, the state and the model. Local. */
sl_status sl_policy_pairs(sl_ctx *ctx, const sl_meta *m, int64_t s_begin, int64_t nl, const int64_t *first_pair,
                          const int32_t *pair_action, const int32_t *action, const int64_t *line, const char *policy,
                          const char *model, int64_t *chosen);

/* Values and actions of states [s_begin, s_begin + nl) from `policy`: a
 * solution file of the model (fingerprint checked), or a rule CSV (values
 * 0, *is_rule set, every row's action checked against the pairs the model
 * file offers, errors naming file and line). Collective. */
sl_status sl_policy_file_read(sl_ctx *ctx, const char *model, const sl_meta *m, const char *policy, int64_t s_begin,
                              int64_t nl, double *value, int32_t *action, int *is_rule);

#endif /* SL_ANALYSIS_H */
