/* two_state.c - two-state discounted model with a closed-form optimal value.
 *
 * The transition structure is the two-state example that runs through
 * M. L. Puterman, "Markov Decision Processes: Discrete Stochastic Dynamic
 * Programming", Wiley 1994 (introduced in Section 3.1 and solved under
 * discounting with lambda = 0.95 in Chapter 6, where v*(s1) = -8.57 and
 * v*(s2) = -20 are reported). Section numbers and the reported values are
 * recalled from memory; the exact values below are derived here and do not
 * rely on the book.
 *
 *   state 0, action 0: reward  5, next state 0 or 1 with probability 1/2 each
 *   state 0, action 1: reward 10, next state 1 with probability 1
 *   state 1, action 0: reward -1, next state 1 with probability 1
 *   (action 1 is not available in state 1)
 *
 * Derivation, discount g in (0, 1):
 *   State 1 has one action and never leaves:  v(1) = -1 + g v(1),
 *     so v*(1) = -1 / (1 - g).
 *   State 0, keeping action 0:  v = 5 + g (v/2 + v*(1)/2),
 *     so q0 = (5 - g / (2 (1 - g))) / (1 - g/2).
 *   State 0, action 1 once, then state 1 for ever:  q1 = 10 - g / (1 - g).
 *   v*(0) = max(q0, q1).  q0 = q1 exactly when
 *     5 - 5.5 g = (10 - 11 g)(1 - g/2)  <=>  11 g^2 - 21 g + 10 = 0
 *     <=>  g = 10/11 (or g = 1),
 *   and q0 > q1 for 10/11 < g < 1 (e.g. g = 0.95), q1 > q0 for g < 10/11.
 * At the default g = 0.95 = 19/20:
 *   v*(1) = -20,  q0 = (5 - 9.5) / 0.525 = -60/7 = -8.571428571428571...,
 *   q1 = 10 - 19 = -9,  so v*(0) = -60/7 with action 0 optimal in state 0.
 * At g = 0.5: v*(1) = -2, q0 = 4.5/0.75 = 6, q1 = 9, so action 1 is optimal.
 *
 * The numbers are abstract (no units); this example exists to test solvers
 * against a known answer.
 */
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>

#include "sluice/generator.h"

static const sluice_param two_params[1] = {
    {"discount", 0.95, "1", "discount factor, in (0, 1)"},
};

static const char *const two_action_names[2] = {"split", "direct"};

static int two_init(const double *v, sluice_shape *shape, void **instance,
                    char *err, size_t errlen)
{
    *instance = NULL;
    if (!(v[0] > 0.0 && v[0] < 1.0)) {
        snprintf(err, errlen, "parameter discount = %g must lie in (0, 1)", v[0]);
        return 1;
    }
    shape->n_states = 2;
    shape->n_factors = 0;
    shape->n_actions = 2;
    shape->action_names = two_action_names;
    shape->discount = v[0];
    return 0;
}

static int two_available(const void *instance, int64_t state, int32_t action)
{
    (void)instance;
    if (state == 0)
        return action == 0 || action == 1;
    return state == 1 && action == 0;
}

static int two_transitions(const void *instance, int64_t state, int32_t action,
                           sluice_sink *sink)
{
    (void)instance;
    int rc;
    if (state == 0 && action == 0) {
        rc = sluice_emit(sink, 0, 0.5, 5.0);
        if (rc == 0)
            rc = sluice_emit(sink, 1, 0.5, 5.0);
        return rc;
    }
    if (state == 0 && action == 1)
        return sluice_emit(sink, 1, 1.0, 10.0);
    if (state == 1 && action == 0)
        return sluice_emit(sink, 1, 1.0, -1.0);
    return 1;
}

const sluice_generator_def sluice_generator = {
    SLUICE_GENERATOR_ABI,
    "two_state",
    "two-state discounted model with a closed-form optimal value",
    1,
    two_params,
    two_init,
    two_available,
    two_transitions,
    NULL,
};
