/* tie.c - three-state model with an exact tie between two actions in state 0.
 *
 * Every reward, probability and the default discount are dyadic (k / 2^n),
 * so every value below is exactly representable in binary floating point
 * and every Bellman backup evaluates the tie without rounding.
 *
 *   state 0, action 0: reward 1/2, next state 1 with probability 1
 *   state 0, action 1: reward 3/4, next state 1 or 2 with probability 1/2 each
 *   state 1, action 0: reward 1,   next state 2 with probability 1
 *   state 2, action 0: reward 0,   next state 2 with probability 1
 *   (action 1 is available in state 0 only)
 *
 * Derivation, discount g:
 *   v*(2) = 0 + g v*(2)            = 0
 *   v*(1) = 1 + g v*(2)            = 1
 *   q(0, 0) = 1/2 + g v*(1)                    = 1/2 + g
 *   q(0, 1) = 3/4 + g (v*(1)/2 + v*(2)/2)      = 3/4 + g/2
 *   q(0, 0) - q(0, 1) = g/2 - 1/4, zero exactly at g = 1/2.
 * At the default g = 1/2: q(0, 0) = q(0, 1) = v*(0) = 1, an exact tie. In
 * double precision 0.5 + 0.5*1.0 and 0.75 + 0.5*(0.5*1.0 + 0.5*0.0) are
 * both exactly 1.0, and value iteration started from 0 reaches v = (1, 1, 0)
 * exactly after two sweeps (Jacobi) and stays there.
 * For g > 1/2 action 0 is strictly better in state 0; for g < 1/2 action 1.
 * So the model also tests how a solver breaks ties, and (with
 * --param discount=0.75, say) that the tie-break is not mistaken for an
 * argmax: there v*(0) = 5/4 via action 0 (q(0, 1) = 9/8).
 *
 * The numbers are abstract (no units).
 */
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>

#include "sluice/generator.h"

static const sluice_param tie_params[1] = {
    {"discount", 0.5, "1", "discount factor, in (0, 1); the tie is exact at 0.5"},
};

static const char *const tie_action_names[2] = {"direct", "split"};

static int tie_init(const double *v, sluice_shape *shape, void **instance,
                    char *err, size_t errlen)
{
    *instance = NULL;
    if (!(v[0] > 0.0 && v[0] < 1.0)) {
        snprintf(err, errlen, "parameter discount = %g must lie in (0, 1)", v[0]);
        return 1;
    }
    shape->n_states = 3;
    shape->n_factors = 0;
    shape->n_actions = 2;
    shape->action_names = tie_action_names;
    shape->discount = v[0];
    return 0;
}

static int tie_available(const void *instance, int64_t state, int32_t action)
{
    (void)instance;
    if (state == 0)
        return action == 0 || action == 1;
    return (state == 1 || state == 2) && action == 0;
}

static int tie_transitions(const void *instance, int64_t state, int32_t action,
                           sluice_sink *sink)
{
    (void)instance;
    int rc;
    if (state == 0 && action == 0)
        return sluice_emit(sink, 1, 1.0, 0.5);
    if (state == 0 && action == 1) {
        rc = sluice_emit(sink, 1, 0.5, 0.75);
        if (rc == 0)
            rc = sluice_emit(sink, 2, 0.5, 0.75);
        return rc;
    }
    if (state == 1 && action == 0)
        return sluice_emit(sink, 2, 1.0, 1.0);
    if (state == 2 && action == 0)
        return sluice_emit(sink, 2, 1.0, 0.0);
    return 1;
}

const sluice_generator_def sluice_generator = {
    SLUICE_GENERATOR_ABI,
    "tie",
    "three-state model with an exact tie between two actions",
    1,
    tie_params,
    tie_init,
    tie_available,
    tie_transitions,
    NULL,
};
