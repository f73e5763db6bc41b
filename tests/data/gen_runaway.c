/* gen_runaway.c - test generator that runs away in a way chosen by a parameter.
 *
 * Invented scenario (for tests only): a sluice gate with 8 positions and two
 * actions, "keep" (0) and "move" (1). With mode = 0 the model is valid.
 *    1  state 2, action 1 emits 10^9 successors (probability 1e-9 each)
 *    2  state 2, action 1 never returns (an endless loop); it first writes
 *       "runaway: looping" to stderr so a test knows the loop has begun
 */
#include <math.h>
#include <stdint.h>
#include <stdio.h>

#include "sluice/generator.h"

static const sluice_param runaway_params[1] = {
    {"mode", 0.0, "1", "0: valid; 1: 10^9 successors; 2: endless loop"},
};

static const char *const runaway_actions[2] = {"keep", "move"};

static int runaway_init(const double *v, sluice_shape *shape, void **instance, char *err, size_t errlen)
{
    if (!(v[0] >= 0.0 && v[0] <= 2.0) || v[0] != floor(v[0])) {
        snprintf(err, errlen, "mode = %g is not 0, 1 or 2", v[0]);
        return 1;
    }
    *instance = (void *)(intptr_t)(int)v[0];
    shape->n_states = 8;
    shape->n_factors = 0;
    shape->n_actions = 2;
    shape->action_names = runaway_actions;
    shape->discount = 0.9;
    return 0;
}

static int runaway_transitions(const void *instance, int64_t state, int32_t action, sluice_sink *sink)
{
    int mode = (int)(intptr_t)instance;
    if (state == 2 && action == 1 && mode == 1) {
        for (int64_t k = 0; k < 1000000000; k++) {
            int rc = sluice_emit(sink, k % 8, 1e-9, 0.0);
            if (rc) return rc;
        }
        return 0;
    }
    if (state == 2 && action == 1 && mode == 2) {
        volatile uint64_t spin = 0;
        fputs("runaway: looping\n", stderr);
        fflush(stderr);
        for (;;) spin++;
    }
    int64_t next = action == 1 ? (state + 1) % 8 : state;
    return sluice_emit(sink, next, 1.0, action == 1 ? -1.0 : (double)state);
}

const sluice_generator_def sluice_generator = {
    SLUICE_GENERATOR_ABI, "runaway", "test generator that runs away (tests only)", 1, runaway_params,
    runaway_init, NULL, runaway_transitions, NULL,
};
