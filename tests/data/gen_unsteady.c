/* gen_unsteady.c - test generator that does not give the same rows when run
 * twice: a ring of `states` states, one action, where state `bad_state`
 * has one successor the first time it is generated and two (probability
 * 1/2 each) every later time (mode 0), or the other way round (mode 1);
 * mode 2 is steady (always one successor). `sluice build` generates every
 * state twice (a counting pass, then the pass that writes), so modes 0 and 1
 * must fail cleanly with nothing written. Invented test data.
 */
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>

#include "sluice/generator.h"

static const sluice_param params[3] = {
    {"states", 5000, "1", "number of states of the ring"},
    {"bad_state", 4000, "1", "the state whose rows change between runs"},
    {"mode", 0, "1", "0 more successors later, 1 fewer later, 2 steady"},
};

typedef struct ring {
    int64_t n, bad;
    int mode;
    int seen; /* times bad_state was generated (the instance changes: the fault under test) */
} ring;

static int ring_init(const double *v, sluice_shape *shape, void **instance, char *err, size_t errlen)
{
    *instance = NULL;
    if (!(v[0] >= 3 && v[0] <= 1e7) || !(v[1] >= 0 && v[1] < v[0]) || !(v[2] >= 0 && v[2] <= 2)) {
        snprintf(err, errlen, "need 3 <= states <= 1e7, 0 <= bad_state < states, mode in 0..2");
        return 1;
    }
    ring *r = calloc(1, sizeof(*r));
    if (r == NULL) {
        snprintf(err, errlen, "out of memory");
        return 1;
    }
    r->n = (int64_t)v[0];
    r->bad = (int64_t)v[1];
    r->mode = (int)v[2];
    *instance = r;
    shape->n_states = r->n;
    shape->n_factors = 0;
    shape->n_actions = 1;
    shape->discount = 0.9;
    return 0;
}

static void ring_finish(void *instance) { free(instance); }

static int ring_transitions(const void *instance, int64_t s, int32_t a, sluice_sink *sink)
{
    ring *r = (ring *)instance;
    (void)a;
    int two = 0;
    if (s == r->bad) {
        two = r->mode == 0 ? r->seen > 0 : r->mode == 1 ? r->seen == 0 : 0;
        r->seen++;
    }
    if (two) {
        sluice_emit(sink, (s + 1) % r->n, 0.5, 1.0);
        sluice_emit(sink, (s + 2) % r->n, 0.5, 1.0);
    } else {
        sluice_emit(sink, (s + 1) % r->n, 1.0, 1.0);
    }
    return 0;
}

const sluice_generator_def sluice_generator = {
    SLUICE_GENERATOR_ABI,
    "unsteady_ring",
    "a ring whose rows at one state change between runs (test generator)",
    3,
    params,
    ring_init,
    NULL,
    ring_transitions,
    ring_finish,
};
