/* gen_rank_error.c - test generator: a ring of states that goes wrong at one
 * chosen state, so that under `mpirun -np N sluice build` only the rank whose
 * slice holds that state sees the problem (tests/mpi/error_one_rank.sh).
 *
 *   state s, action 0 ("step"): to (s + 1) mod n with probability 1,
 *                               reward 1 when s is a multiple of 7, else 0
 *   state s, action 1 ("wait"): stay with probability 1/2, or to
 *                               (s + 2) mod n with 1/2; reward 1/2
 *
 * At state bad_state, action 0, `mode` selects the fault:
 *   0  transitions() returns the error code 7
 *   1  the successor is emitted with probability 1.5 (invalid data)
 *   2  the generator crashes (raises SIGSEGV)
 *   3  no fault: a valid model (used to make a model file)
 * Invented test data; the numbers mean nothing.
 */
#include <signal.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>

#include "sluice/generator.h"

static const sluice_param params[3] = {
    {"states", 3000, "1", "number of states of the ring"},
    {"bad_state", 2900, "1", "the state where the fault happens"},
    {"mode", 0, "1", "0 error code, 1 probability 1.5, 2 crash, 3 no fault"},
};

static const char *const action_names[2] = {"step", "wait"};

typedef struct ring {
    int64_t n, bad;
    int mode;
} ring;

static int ring_init(const double *v, sluice_shape *shape, void **instance, char *err, size_t errlen)
{
    *instance = NULL;
    if (!(v[0] >= 3 && v[0] <= 1e7) || !(v[1] >= 0 && v[1] < v[0]) || !(v[2] >= 0 && v[2] <= 3)) {
        snprintf(err, errlen, "need 3 <= states <= 1e7, 0 <= bad_state < states, mode in 0..3");
        return 1;
    }
    ring *r = malloc(sizeof(*r));
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
    shape->n_actions = 2;
    shape->action_names = action_names;
    shape->discount = 0.9;
    return 0;
}

static void ring_finish(void *instance)
{
    free(instance);
}

static int ring_transitions(const void *instance, int64_t s, int32_t a, sluice_sink *sink)
{
    const ring *r = instance;
    if (s == r->bad && a == 0) {
        if (r->mode == 0) return 7;
        if (r->mode == 1) return sluice_emit(sink, (s + 1) % r->n, 1.5, 0.0);
        if (r->mode == 2) raise(SIGSEGV);
    }
    if (a == 0) return sluice_emit(sink, (s + 1) % r->n, 1.0, s % 7 == 0 ? 1.0 : 0.0);
    int rc = sluice_emit(sink, s, 0.5, 0.5);
    if (rc == 0) rc = sluice_emit(sink, (s + 2) % r->n, 0.5, 0.5);
    return rc;
}

const sluice_generator_def sluice_generator = {
    SLUICE_GENERATOR_ABI,
    "rank_error",
    "ring of states with a fault at one chosen state (test generator)",
    3,
    params,
    ring_init,
    NULL,
    ring_transitions,
    ring_finish,
};
