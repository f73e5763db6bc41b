/* staged_ferry.c - test generator: an invented ferry operator's fleet with a
 * seasonal (stage) factor whose position in the state numbering is a
 * parameter, for the stage-interleaved layout tests.
 *
 * Factors: fuel stock f in [0, F), season s in [0, S) (the stage factor),
 * berth b in [0, B). The parameter `stage_position` puts the season factor
 * fastest (0), in the middle (1) or slowest (2); the model is the same up to
 * that renumbering, so solutions must agree after mapping states back.
 * Actions: 0 "idle", 1 "sail", 2 "bunker" (buy fuel).
 * Each transition moves to the next season (cyclic), except with
 * probability `stay` it stays in the same season (0 by default: then a
 * season's states depend only on the next season's, the case in which the
 * staged sweep reproduces the one-rank iterates exactly). Fuel and berth
 * move to up to three neighbours; rewards are an invented pure function of
 * (state, action). All numbers are invented test data.
 */
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>

#include "sluice/generator.h"

static const sluice_param ferry_params[6] = {
    {"fuel_levels", 30, "levels", "fuel stock levels F"},
    {"seasons", 6, "seasons", "seasons per cycle S (the stage factor)"},
    {"berths", 4, "berths", "berths B"},
    {"stage_position", 1, "1", "0: season fastest, 1: middle, 2: slowest"},
    {"stay", 0, "1", "probability of staying in the same season"},
    {"discount", 0.97, "1", "discount factor per season"},
};

static const char *const ferry_actions[3] = {"idle", "sail", "bunker"};

typedef struct ferry {
    int64_t F, S, B;
    int pos;
    double stay;
} ferry;

static int ferry_init(const double *v, sluice_shape *shape, void **instance, char *err, size_t errlen)
{
    ferry *m = malloc(sizeof(*m));
    if (m == NULL) {
        snprintf(err, errlen, "out of memory");
        return 1;
    }
    m->F = (int64_t)v[0];
    m->S = (int64_t)v[1];
    m->B = (int64_t)v[2];
    m->pos = (int)v[3];
    m->stay = v[4];
    if (m->F < 2 || m->S < 2 || m->B < 1 || m->pos < 0 || m->pos > 2 || !(m->stay >= 0 && m->stay < 1) ||
        !(v[5] > 0 && v[5] < 1)) {
        snprintf(err, errlen, "bad parameters");
        free(m);
        return 1;
    }
    sluice_factor fuel = {"fuel", m->F, 0}, season = {"season", m->S, 1}, berth = {"berth", m->B, 0};
    shape->n_states = m->F * m->S * m->B;
    shape->n_factors = 3;
    if (m->pos == 0) {
        shape->factors[0] = season;
        shape->factors[1] = fuel;
        shape->factors[2] = berth;
    } else if (m->pos == 1) {
        shape->factors[0] = fuel;
        shape->factors[1] = season;
        shape->factors[2] = berth;
    } else {
        shape->factors[0] = fuel;
        shape->factors[1] = berth;
        shape->factors[2] = season;
    }
    shape->n_actions = 3;
    shape->action_names = ferry_actions;
    shape->discount = v[5];
    *instance = m;
    return 0;
}

static int64_t enc(const ferry *m, int64_t f, int64_t s, int64_t b)
{
    if (m->pos == 0) return s + m->S * (f + m->F * b);
    if (m->pos == 1) return f + m->F * (s + m->S * b);
    return f + m->F * (b + m->B * s);
}

static void dec(const ferry *m, int64_t x, int64_t *f, int64_t *s, int64_t *b)
{
    if (m->pos == 0) {
        *s = x % m->S;
        *f = (x / m->S) % m->F;
        *b = x / (m->S * m->F);
    } else if (m->pos == 1) {
        *f = x % m->F;
        *s = (x / m->F) % m->S;
        *b = x / (m->F * m->S);
    } else {
        *f = x % m->F;
        *b = (x / m->F) % m->B;
        *s = x / (m->F * m->B);
    }
}

static int ferry_available(const void *inst, int64_t state, int32_t action)
{
    const ferry *m = inst;
    int64_t f, s, b;
    dec(m, state, &f, &s, &b);
    if (action == 1) return f > 0;          /* sailing needs fuel */
    if (action == 2) return f < m->F - 1;   /* bunkering needs room */
    return 1;
}

/* invented reward: fare income depends on season and berth, fuel costs */
static double fare(const ferry *m, int64_t s, int64_t b, int32_t a, int64_t f)
{
    double season = 1.0 + 0.5 * (double)((s * 7 + 3) % m->S) / (double)m->S;
    double berth = 1.0 + 0.25 * (double)((b * 5 + 1) % (m->B + 1));
    if (a == 1) return 10.0 * season * berth - 0.1 * (double)f;
    if (a == 2) return -3.0 - 0.05 * (double)s;
    return -0.2 * (double)f / (double)m->F;
}

static int ferry_transitions(const void *inst, int64_t state, int32_t action, sluice_sink *sink)
{
    const ferry *m = inst;
    int64_t f, s, b;
    dec(m, state, &f, &s, &b);
    int64_t f1 = f + (action == 2 ? 3 : 0) - (action == 1 ? 2 : 0);
    if (f1 < 0) f1 = 0;
    if (f1 > m->F - 1) f1 = m->F - 1;
    double r = fare(m, s, b, action, f);
    int64_t seasons[2] = {(s + 1) % m->S, s};
    double ps[2] = {1.0 - m->stay, m->stay};
    for (int k = 0; k < 2; k++) {
        if (ps[k] <= 0) continue;
        /* fuel use varies: f1 with 1/2, one less and one more with 1/4 */
        int64_t fs[3] = {f1, f1 > 0 ? f1 - 1 : f1, f1 < m->F - 1 ? f1 + 1 : f1};
        double pf[3] = {0.5, 0.25, 0.25};
        int64_t bs[2] = {b, (b + 1 + (int64_t)action) % m->B};
        double pb[2] = {0.75, 0.25};
        for (int i = 0; i < 3; i++)
            for (int j = 0; j < 2; j++) {
                int rc = sluice_emit(sink, enc(m, fs[i], seasons[k], bs[j]), ps[k] * pf[i] * pb[j], r);
                if (rc) return rc;
            }
    }
    return 0;
}

static void ferry_finish(void *inst) { free(inst); }

const sluice_generator_def sluice_generator = {
    SLUICE_GENERATOR_ABI, "staged_ferry", "test model: a ferry fleet with a seasonal stage factor at any position",
    6, ferry_params, ferry_init, ferry_available, ferry_transitions, ferry_finish,
};
