/* sluice/generator.h - the interface a model generator program implements.
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
 *      successor (or, for a generator that declares outcome quantities,
 *      sluice_emit_outcome(sink, next_state, probability, reward, q) with
 *      one value per quantity). Repeated successors are merged
 *      (probabilities added, rewards and quantities probability-weighted).
 *      Return 0 on success, non-zero on error.
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
 *
 * ABI 2 (this header) only appends: a generator written for ABI 1 compiles
 * unchanged against it, and a shared object compiled against the ABI 1
 * header (abi_version 1) still loads. The additions, all optional, are the
 * fields of sluice_shape after `discount` and sluice_emit_outcome():
 *   - per factor: the unit and numeric value of each index, and labels
 *     (e.g. month names);
 *   - per action: a numeric value and its unit (e.g. a release in hm3/month);
 *   - the unit of the reward and of one period (the discounting step);
 *   - named outcome quantities with units (energy, spill, ...) reported
 *     beside the reward for every successor. The model file keeps, per
 *     (state, action), each quantity's expected value and the probability
 *     that it is positive (docs/formats.md, format 2).
 * Names of factors and quantities are identifiers: letters, digits, '_'.
 */
#ifndef SLUICE_GENERATOR_H
#define SLUICE_GENERATOR_H

#include <stddef.h>
#include <stdint.h>

#define SLUICE_GENERATOR_ABI 2
#define SLUICE_MAX_FACTORS 16
#define SLUICE_MAX_QUANTITIES 32

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

/* ABI 2: what the indices of one factor stand for. */
typedef struct sluice_factor_values {
    const char *unit;           /* unit of `values`, e.g. "hm3"; NULL: none */
    const double *values;       /* [size] numeric value of each index, or NULL */
    const char *const *labels;  /* [size] short labels (e.g. "Jan"), or NULL */
} sluice_factor_values;

/* ABI 2: one outcome quantity reported with every successor. */
typedef struct sluice_quantity {
    const char *name;           /* identifier, e.g. "spill" */
    const char *unit;           /* e.g. "hm3" */
    const char *help;           /* one line */
} sluice_quantity;

/* What init() reports about the model. Strings must stay valid until
 * finish() is called. */
typedef struct sluice_shape {
    int64_t n_states;
    int n_factors;                          /* 0: no factor labels */
    sluice_factor factors[SLUICE_MAX_FACTORS];
    int32_t n_actions;                      /* action ids are 0..n_actions-1 */
    const char *const *action_names;        /* n_actions names, or NULL */
    double discount;                        /* default discount factor */
    /* ---- ABI 2 (optional; sluice zeroes them before calling init) ---- */
    sluice_factor_values factor_values[SLUICE_MAX_FACTORS]; /* by factor */
    const double *action_values;            /* [n_actions] or NULL */
    const char *action_unit;                /* unit of action_values */
    const char *reward_unit;                /* e.g. "kCU" */
    const char *period_unit;                /* one step of time, e.g. "month" */
    int n_quantities;                       /* 0..SLUICE_MAX_QUANTITIES */
    const sluice_quantity *quantities;      /* [n_quantities] */
} sluice_shape;

/* The sink successors are emitted into. Opaque to the generator: call
 * sluice_emit() only. */
typedef struct sluice_sink {
    int (*emit)(struct sluice_sink *sink, int64_t next_state,
                double probability, double reward);
    void *opaque;
    /* ABI 2: emit with one value per declared quantity */
    int (*emit_outcome)(struct sluice_sink *sink, int64_t next_state,
                        double probability, double reward,
                        const double *quantities);
} sluice_sink;

/* Emit one successor of the pair being generated. Returns non-zero if the
 * sink refused it (out of memory); the generator should then return that
 * value from transitions(). */
static inline int sluice_emit(sluice_sink *sink, int64_t next_state,
                              double probability, double reward)
{
    return sink->emit(sink, next_state, probability, reward);
}

/* ABI 2: emit one successor with the value of every declared outcome
 * quantity (quantities[0..n_quantities-1]) on that transition. A generator
 * that declares quantities must use this for every successor. */
static inline int sluice_emit_outcome(sluice_sink *sink, int64_t next_state,
                                      double probability, double reward,
                                      const double *quantities)
{
    return sink->emit_outcome(sink, next_state, probability, reward, quantities);
}

/* Optional, for any ABI: terminal values of the finite-horizon objective.
 * A generator may also export a function with this name and signature:
 *
 *     int sluice_terminal_value(const void *instance, int64_t state,
 *                               double *value);
 *
 * When the model is built with `--objective finite`, sluice calls it once
 * for every state (after transitions(), before finish()) and stores *value
 * as that state's terminal value V_H (the model's /terminal_value, covered
 * by its fingerprint; docs/objectives.md). Return 0 on success, non-zero on
 * error; *value must be a finite number. Like transitions() it must be a
 * pure function of the state. It is not a member of sluice_generator_def,
 * so ABI 1 and 2 generators without it build unchanged; for the other
 * objectives it is not called. */
#define SLUICE_TERMINAL_VALUE_SYMBOL "sluice_terminal_value"
int sluice_terminal_value(const void *instance, int64_t state, double *value);

typedef struct sluice_generator_def {
    int abi_version;            /* SLUICE_GENERATOR_ABI (1 or 2 accepted) */
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
