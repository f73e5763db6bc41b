/* gen_bad_shape.c - test generator whose declared size is wrong, by mode.
 *
 * Invented scenario (for tests only): a grain silo indexed by fill level and
 * day. The sizes are absurd on purpose; transitions() is never reached.
 *
 *    1  factors 2^32 x 2^32; n_states = their product in wrapping unsigned
 *       arithmetic (0), as a careless generator would compute it
 *    2  factors (2^32 + 1) x 2^32; n_states = wrapped product (2^32)
 *    3  n_states = 2^62, no factors
 *    4  n_states = 0
 *    5  n_states = -5
 */
#include <stdint.h>
#include <stdio.h>

#include "sluice/generator.h"

static const sluice_param shape_params[1] = {
    {"mode", 1.0, "1", "which size fault (see the file header)"},
};

static int shape_init(const double *v, sluice_shape *shape, void **instance,
                      char *err, size_t errlen)
{
    (void)err;
    (void)errlen;
    int mode = (int)v[0];
    uint64_t f0 = 0, f1 = 0;
    *instance = NULL;
    shape->n_actions = 1;
    shape->action_names = NULL;
    shape->discount = 0.9;
    shape->n_factors = 0;
    switch (mode) {
    case 1: f0 = (uint64_t)1 << 32; f1 = (uint64_t)1 << 32; break;
    case 2: f0 = ((uint64_t)1 << 32) + 1; f1 = (uint64_t)1 << 32; break;
    case 3: shape->n_states = (int64_t)1 << 62; return 0;
    case 4: shape->n_states = 0; return 0;
    default: shape->n_states = -5; return 0;
    }
    shape->n_factors = 2;
    shape->factors[0].name = "fill";
    shape->factors[0].size = (int64_t)f0;
    shape->factors[0].stage = 0;
    shape->factors[1].name = "day";
    shape->factors[1].size = (int64_t)f1;
    shape->factors[1].stage = 1;
    shape->n_states = (int64_t)(f0 * f1);
    return 0;
}

static int shape_transitions(const void *instance, int64_t state, int32_t action,
                             sluice_sink *sink)
{
    (void)instance;
    (void)action;
    return sluice_emit(sink, state, 1.0, 0.0);
}

const sluice_generator_def sluice_generator = {
    SLUICE_GENERATOR_ABI,
    "bad_shape_silo",
    "invented silo with a wrong declared size (test generator)",
    1,
    shape_params,
    shape_init,
    NULL,
    shape_transitions,
    NULL,
};
