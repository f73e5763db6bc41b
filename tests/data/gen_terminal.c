/* gen_terminal.c - test generator: an invented hill-farm irrigation pond
 * (no source; all numbers invented) that exports sluice_terminal_value, the
 * optional terminal values of the finite-horizon objective.
 *
 * Factors: water w in [0, W) (fastest), weather x in {0 dry, 1 wet}.
 * Actions: 0 "hold", 1 "irrigate" (uses 1 unit), 2 "flood" (uses 2 units;
 * only with w >= 2). Rain adds 0, 1 or 2 units with probabilities that depend
 * on the weather, the weather changes with probability 0.3; water above W-1
 * spills with a penalty. Terminal value of a state: what the water left in
 * the pond is worth at the end of the season, 0.9 w - 0.04 w^2 + 0.25 x.
 * Parameters `nan_state` and `fail_state` (default -1: none) make the
 * terminal value NaN, or the call fail, at that state (bad-input tests).
 */
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>

#include "sluice/generator.h"

static const sluice_param pond_params[4] = {
    {"levels", 7, "units", "water levels W"},
    {"discount", 0.95, "1", "discount factor per week"},
    {"nan_state", -1, "state", "state whose terminal value is NaN (-1: none)"},
    {"fail_state", -1, "state", "state at which the terminal value call fails (-1: none)"},
};

static const char *const pond_actions[3] = {"hold", "irrigate", "flood"};

typedef struct pond {
    int64_t W, nan_state, fail_state;
} pond;

static int pond_init(const double *v, sluice_shape *shape, void **instance, char *err, size_t errlen)
{
    pond *m = malloc(sizeof(*m));
    if (m == NULL) {
        snprintf(err, errlen, "out of memory");
        return 1;
    }
    m->W = (int64_t)v[0];
    m->nan_state = (int64_t)v[2];
    m->fail_state = (int64_t)v[3];
    if (m->W < 3) {
        snprintf(err, errlen, "levels must be at least 3");
        free(m);
        return 1;
    }
    shape->n_states = 2 * m->W;
    shape->n_factors = 2;
    shape->factors[0] = (sluice_factor){"water", m->W, 0};
    shape->factors[1] = (sluice_factor){"weather", 2, 0};
    shape->n_actions = 3;
    shape->action_names = pond_actions;
    shape->discount = v[1];
    *instance = m;
    return 0;
}

static int pond_available(const void *instance, int64_t state, int32_t action)
{
    const pond *m = instance;
    int64_t w = state % m->W;
    return action == 0 || (action == 1 && w >= 1) || (action == 2 && w >= 2);
}

static int pond_transitions(const void *instance, int64_t state, int32_t action, sluice_sink *sink)
{
    const pond *m = instance;
    int64_t w = state % m->W, x = state / m->W;
    static const double rain[2][3] = {{0.6, 0.3, 0.1}, {0.2, 0.5, 0.3}};
    double crop = action == 0 ? 0.0 : action == 1 ? 1.0 : 1.7;
    for (int64_t nx = 0; nx < 2; nx++) {
        double pw = nx == x ? 0.7 : 0.3;
        for (int r = 0; r < 3; r++) {
            int64_t nw = w - action + r;
            double spill = 0.0;
            if (nw > m->W - 1) {
                spill = (double)(nw - (m->W - 1));
                nw = m->W - 1;
            }
            int rc = sluice_emit(sink, nw + m->W * nx, pw * rain[x][r], crop - 0.3 * spill);
            if (rc) return rc;
        }
    }
    return 0;
}

int sluice_terminal_value(const void *instance, int64_t state, double *value)
{
    const pond *m = instance;
    if (state == m->fail_state) return 7;
    double w = (double)(state % m->W), x = (double)(state / m->W);
    *value = state == m->nan_state ? NAN : 0.9 * w - 0.04 * w * w + 0.25 * x;
    return 0;
}

static void pond_finish(void *instance) { free(instance); }

const sluice_generator_def sluice_generator = {
    SLUICE_GENERATOR_ABI, "pond", "invented irrigation pond with terminal water values (test)",
    4, pond_params, pond_init, pond_available, pond_transitions, pond_finish,
};
