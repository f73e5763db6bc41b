/* random_sparse.c - benchmark generator: a random sparse model without any
 * stage structure (no factors), for the kernel-speed targets of bench/speed.sh.
 *
 * Every state has `actions` actions; each pair has `successors` distinct
 * next states, most within `local_width` of the state (banded, as after a
 * locality-preserving numbering) and a fraction `jump_fraction` anywhere.
 * Probabilities and rewards are pseudo-random but a pure function of
 * (state, action), as the generator interface requires (a SplitMix64-style
 * hash, common practice, no source). All numbers are invented.
 */
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>

#include "sluice/generator.h"

static const sluice_param rs_params[6] = {
    {"states", 300000, "states", "number of states"},
    {"actions", 5, "actions", "actions per state"},
    {"successors", 6, "states", "next states per pair"},
    {"local_width", 200, "states", "most successors lie within this distance"},
    {"jump_fraction", 0.1, "1", "fraction of successors drawn anywhere"},
    {"discount", 0.99, "1", "discount factor"},
};

typedef struct rs {
    int64_t n, w;
    int32_t a, k;
    double jump;
} rs;

static uint64_t mix(uint64_t x)
{
    x += 0x9e3779b97f4a7c15ULL;
    x = (x ^ (x >> 30)) * 0xbf58476d1ce4e5b9ULL;
    x = (x ^ (x >> 27)) * 0x94d049bb133111ebULL;
    return x ^ (x >> 31);
}

static double unit(uint64_t x) { return (double)(mix(x) >> 11) * (1.0 / 9007199254740992.0); }

static int rs_init(const double *v, sluice_shape *shape, void **instance, char *err, size_t errlen)
{
    rs *m = malloc(sizeof(*m));
    if (m == NULL) {
        snprintf(err, errlen, "out of memory");
        return 1;
    }
    m->n = (int64_t)v[0];
    m->a = (int32_t)v[1];
    m->k = (int32_t)v[2];
    m->w = (int64_t)v[3];
    m->jump = v[4];
    if (m->n < 2 || m->a < 1 || m->k < 1 || m->k > 64 || m->k > m->n || m->w < 1 || !(m->jump >= 0 && m->jump <= 1) ||
        !(v[5] > 0 && v[5] < 1)) {
        snprintf(err, errlen, "bad parameters");
        free(m);
        return 1;
    }
    shape->n_states = m->n;
    shape->n_factors = 0;
    shape->n_actions = m->a;
    shape->action_names = NULL;
    shape->discount = v[5];
    *instance = m;
    return 0;
}

static int rs_transitions(const void *inst, int64_t s, int32_t a, sluice_sink *sink)
{
    const rs *m = inst;
    uint64_t seed = mix((uint64_t)s * 0x100000001b3ULL + (uint64_t)a);
    int64_t next[64];
    double w[64], sum = 0;
    int n = 0;
    for (int tries = 0; n < m->k && tries < 64 * m->k; tries++) {
        uint64_t h = mix(seed + (uint64_t)tries);
        int64_t t;
        if (unit(h) < m->jump) {
            t = (int64_t)(mix(h) % (uint64_t)m->n);
        } else {
            t = s + (int64_t)(mix(h) % (uint64_t)(2 * m->w + 1)) - m->w;
            t = ((t % m->n) + m->n) % m->n;
        }
        int dup = 0;
        for (int i = 0; i < n; i++) dup |= next[i] == t;
        if (dup) continue;
        next[n] = t;
        w[n] = 0.05 + unit(h ^ 0x5bd1e995ULL);
        sum += w[n];
        n++;
    }
    double r = 10.0 * unit(seed ^ 0xabcdefULL) - 2.0 * (double)a / (double)m->a;
    for (int i = 0; i < n; i++) {
        int rc = sluice_emit(sink, next[i], w[i] / sum, r);
        if (rc) return rc;
    }
    return 0;
}

static void rs_finish(void *inst) { free(inst); }

const sluice_generator_def sluice_generator = {
    SLUICE_GENERATOR_ABI, "random_sparse", "benchmark model: random sparse transitions, no stage structure",
    6, rs_params, rs_init, NULL, rs_transitions, rs_finish,
};
