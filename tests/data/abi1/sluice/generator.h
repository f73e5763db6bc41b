/* sluice/generator.h AS OF GENERATOR ABI 1 - a frozen copy kept for the test that an
 * object compiled against ABI 1 still loads (tests/cli/abi2_build.sh). Do not edit.
 *
 *
 * A generator is a plain C file compiled by `sluice build` into a shared
 * object. It exports one symbol, `sluice_generator`, of type
 * `const sluice_generator_def`. sluice calls, in this order:
 *
 *   1. init(params, shape, &instance, err, errlen) once per process, with the
 *      parameter values in the order of `params` (defaults replaced by any
 *      `--param NAME=VALUE`). It fills in `shape` (state count, factors,
 *      action names, discount) and may allocate private data in *instance.
 *   2. available(instance, state, action) for every state and every action
 *      id in [0, n_actions): non-zero if that action may be taken there.
 *      May be NULL: every action is then available everywhere.
 *   3. transitions(instance, state, action, sink) for each available pair:
 *      it calls sluice_emit(sink, next_state, probability, reward) once per
 *      successor. Repeated successors are merged (probabilities added,
 *      rewards probability-weighted). Return 0 on success, non-zero on error.
 *   4. finish(instance) once at the end (may be NULL).
 *
 * transitions() and available() must be pure functions of (state, action):
 * sluice enumerates slices of states in separate processes and in any order.
 *
 * State numbering: when factors are given, state = f0 + n0*(f1 + n1*(f2 ...)),
 * i.e. factor 0 varies fastest. A factor marked `stage` (for example the
 * month of a yearly cycle) lets the Gauss-Seidel solver sweep stages in
 * reverse order.
 *
 * ABI: bump SLUICE_GENERATOR_ABI whenever a struct below changes. The
 * compiled-object cache is keyed by it.
 */
#ifndef SLUICE_GENERATOR_H
#define SLUICE_GENERATOR_H

#include <stddef.h>
#include <stdint.h>

#define SLUICE_GENERATOR_ABI 1
#define SLUICE_MAX_FACTORS 16

/* One named parameter with a default and a unit. */
typedef struct sluice_param {
    const char *name;     /* identifier used in --param NAME=VALUE */
    double default_value;
    const char *unit;     /* free text, e.g. "hm3", "levels", "1" */
    const char *help;     /* one line */
} sluice_param;

/* One factor of the mixed-radix state index. */
typedef struct sluice_factor {
    const char *name;     /* e.g. "storage" */
    int64_t size;         /* number of values, >= 1 */
    int stage;            /* non-zero: a stage-like (cyclic time) factor */
} sluice_factor;

/* What init() reports about the model. Strings must stay valid until
 * finish() is called. */
typedef struct sluice_shape {
    int64_t n_states;
    int n_factors;                          /* 0: no factor labels */
    sluice_factor factors[SLUICE_MAX_FACTORS];
    int32_t n_actions;                      /* action ids are 0..n_actions-1 */
    const char *const *action_names;        /* n_actions names, or NULL */
    double discount;                        /* default discount factor */
} sluice_shape;

/* The sink successors are emitted into. Opaque to the generator: call
 * sluice_emit() only. */
typedef struct sluice_sink {
    int (*emit)(struct sluice_sink *sink, int64_t next_state,
                double probability, double reward);
    void *opaque;
} sluice_sink;

/* Emit one successor of the pair being generated. Returns non-zero if the
 * sink refused it (out of memory); the generator should then return that
 * value from transitions(). */
static inline int sluice_emit(sluice_sink *sink, int64_t next_state,
                              double probability, double reward)
{
    return sink->emit(sink, next_state, probability, reward);
}

typedef struct sluice_generator_def {
    int abi_version;            /* SLUICE_GENERATOR_ABI */
    const char *name;           /* short name, e.g. "reservoir" */
    const char *description;    /* one line */
    int n_params;
    const sluice_param *params;
    int (*init)(const double *param_values, sluice_shape *shape,
                void **instance, char *err, size_t errlen);
    int (*available)(const void *instance, int64_t state, int32_t action);
    int (*transitions)(const void *instance, int64_t state, int32_t action,
                       sluice_sink *sink);
    void (*finish)(void *instance);
} sluice_generator_def;

#endif /* SLUICE_GENERATOR_H */
