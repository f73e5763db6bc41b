/* gen_faulty.c - test generator with one deliberate fault chosen by a parameter.
 *
 * Invented scenario (for tests only): a canal lock with 6 water levels and
 * two actions, "hold" (0) and "open" (1). With mode = 0 the model is valid.
 * Any other mode breaks exactly one place, state 3 / action 1 (mode 7 also
 * state 5 / action 0), so the error message can be checked for it:
 *
 *    1  probability -0.25          7  sum drifts by 1e-8 (two pairs)
 *    2  probability 1.5            8  next state 6 (= number of states)
 *    3  probability NaN            9  next state -1
 *    4  reward +infinity          10  state 4 has no available action
 *    5  reward NaN                11  transitions() returns error 7
 *    6  probabilities sum 0.999   12  segmentation fault
 */
#include <math.h>
#include <signal.h>
#include <stdint.h>
#include <stdio.h>

#include "sluice/generator.h"

static const sluice_param faulty_params[1] = {
    {"mode", 0.0, "1", "which fault to inject (0: none; see the file header)"},
};

static const char *const faulty_actions[2] = {"hold", "open"};

static int mode_of(const void *instance)
{
    return (int)(intptr_t)instance;
}

static int faulty_init(const double *v, sluice_shape *shape, void **instance,
                       char *err, size_t errlen)
{
    if (!(v[0] >= 0.0 && v[0] <= 12.0) || v[0] != floor(v[0])) {
        snprintf(err, errlen, "mode = %g is not an integer in 0..12", v[0]);
        return 1;
    }
    *instance = (void *)(intptr_t)(int)v[0];
    shape->n_states = 6;
    shape->n_factors = 0;
    shape->n_actions = 2;
    shape->action_names = faulty_actions;
    shape->discount = 0.9;
    return 0;
}

static int faulty_available(const void *instance, int64_t state, int32_t action)
{
    (void)action;
    return !(mode_of(instance) == 10 && state == 4);
}

static int faulty_transitions(const void *instance, int64_t state, int32_t action,
                              sluice_sink *sink)
{
    int mode = mode_of(instance);
    int bad = (state == 3 && action == 1) || (mode == 7 && state == 5 && action == 0);
    if (bad && mode != 0 && mode != 10) {
        switch (mode) {
        case 1: return sluice_emit(sink, 0, -0.25, 1.0);
        case 2: return sluice_emit(sink, 0, 1.5, 1.0);
        case 3: return sluice_emit(sink, 0, nan(""), 1.0);
        case 4: return sluice_emit(sink, 0, 1.0, HUGE_VAL);
        case 5: return sluice_emit(sink, 0, 1.0, nan(""));
        case 6:
            if (sluice_emit(sink, 0, 0.5, 1.0) != 0) return 1;
            return sluice_emit(sink, 1, 0.499, 1.0);
        case 7:
            if (sluice_emit(sink, 0, 0.5, 1.0) != 0) return 1;
            return sluice_emit(sink, 1, 0.5 - 1e-8, 1.0);
        case 8: return sluice_emit(sink, 6, 1.0, 1.0);
        case 9: return sluice_emit(sink, -1, 1.0, 1.0);
        case 11: return 7;
        case 12: {
            volatile int *nowhere = NULL;
            *nowhere = 1;
            raise(SIGSEGV); /* in case the store above did not fault */
            return 1;
        }
        default: return 1;
        }
    }
    if (action == 0) {
        if (sluice_emit(sink, state, 0.8, (double)state) != 0) return 1;
        return sluice_emit(sink, (state + 1) % 6, 0.2, (double)state);
    }
    return sluice_emit(sink, 0, 1.0, 2.0);
}

const sluice_generator_def sluice_generator = {
    SLUICE_GENERATOR_ABI,
    "faulty_lock",
    "invented canal lock with one injected fault (test generator)",
    1,
    faulty_params,
    faulty_init,
    faulty_available,
    faulty_transitions,
    NULL,
};
