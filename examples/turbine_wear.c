/* turbine_wear.c - when to replace a wearing turbine runner (invented data).
 *
 * Scenario (invented; every name and figure here is made up for the demo):
 * the run-of-river plant at Tessel Falls, owned by the utility Brennmark
 * Kraft, has one turbine whose runner wears with use. Each month the owner
 * either runs the turbine (revenue falls as wear lowers efficiency, upkeep
 * rises) or replaces the runner (the month's output is lost, the runner
 * costs replace_cost, and the turbine starts the next month as new). A
 * runner at the last wear level has failed and must be replaced.
 *
 * Results computed from this model support, never replace, licensed
 * engineering judgement and local regulations.
 *
 * State: wear 0 .. wear_levels-1 (one factor). Actions: 0 run, 1 replace.
 * Run from wear i: wear grows by 0, 1 or 2 levels with probabilities
 * 1 - wear_rate, 0.75 wear_rate, 0.25 wear_rate (capped at the last level,
 * where capped outcomes merge); the month earns
 *   revenue * (1 - efficiency_loss * i / (wear_levels-1)) - upkeep * i.
 * Replace: reward -replace_cost, next wear 0 with probability 1.
 *
 * Run rewards fall with wear, the wear of a running turbine is stochastically
 * increasing in the current wear, and replacing does not depend on the wear,
 * so an optimal policy replaces exactly from some wear level on (a
 * control-limit policy: C. Derman, "On optimal replacement rules when
 * changes of state are Markovian", in R. Bellman (ed.), Mathematical
 * Optimization Techniques, Univ. of California Press, 1963 -- recalled from
 * memory). tests/python/turbine_wear_twin.py re-implements this model from
 * the rules above and checks the theorem's premises; test_examples.py checks
 * that property of the optimum and of sluice's solutions.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>

#include "sluice/generator.h"

enum {
    P_LEVELS, P_WEAR_RATE, P_REVENUE, P_EFFICIENCY_LOSS, P_UPKEEP,
    P_REPLACE_COST, P_DISCOUNT, N_PARAMS
};

static const sluice_param params[N_PARAMS] = {
    {"wear_levels", 30, "levels", "number of wear levels; the last one is failure"},
    {"wear_rate", 0.4, "1", "probability that wear grows in a month of running"},
    {"revenue", 100, "credits/month", "revenue of a month with a new runner"},
    {"efficiency_loss", 0.5, "1", "fraction of revenue lost just before failure"},
    {"upkeep", 1.5, "credits/month/level", "upkeep cost per wear level"},
    {"replace_cost", 800, "credits", "cost of a new runner"},
    {"discount", 0.98, "1/month", "monthly discount factor"},
};

static const char *const action_names[2] = {"run", "replace"};

typedef struct turbine {
    int64_t n_levels;
    double wear_rate, revenue, efficiency_loss, upkeep, replace_cost;
} turbine;

static int tw_init(const double *v, sluice_shape *shape, void **instance,
                   char *err, size_t errlen)
{
    turbine *t = NULL;
    *instance = NULL;

    if (!(v[P_LEVELS] >= 2 && v[P_LEVELS] <= 1e9) || v[P_LEVELS] != floor(v[P_LEVELS])) {
        snprintf(err, errlen, "turbine_wear: wear_levels must be an integer in [2, 1e9], got %g",
                 v[P_LEVELS]);
        return 1;
    }
    if (!(v[P_WEAR_RATE] > 0.0 && v[P_WEAR_RATE] <= 1.0)) {
        snprintf(err, errlen, "turbine_wear: wear_rate must be in (0, 1], got %g", v[P_WEAR_RATE]);
        return 1;
    }
    if (!(v[P_EFFICIENCY_LOSS] >= 0.0 && v[P_EFFICIENCY_LOSS] <= 1.0)) {
        snprintf(err, errlen, "turbine_wear: efficiency_loss must be in [0, 1], got %g",
                 v[P_EFFICIENCY_LOSS]);
        return 1;
    }
    static const int money[3] = {P_REVENUE, P_UPKEEP, P_REPLACE_COST};
    for (int i = 0; i < 3; i++) {
        int k = money[i];
        if (!(v[k] >= 0.0 && v[k] <= 1e12)) {
            snprintf(err, errlen, "turbine_wear: %s must be in [0, 1e12], got %g",
                     params[k].name, v[k]);
            return 1;
        }
    }
    if (!(v[P_DISCOUNT] > 0.0 && v[P_DISCOUNT] <= 1.0)) {
        snprintf(err, errlen, "turbine_wear: discount must be in (0, 1], got %g", v[P_DISCOUNT]);
        return 1;
    }

    t = malloc(sizeof(*t));
    if (t == NULL) {
        snprintf(err, errlen, "turbine_wear: out of memory");
        return 1;
    }
    t->n_levels = (int64_t)v[P_LEVELS];
    t->wear_rate = v[P_WEAR_RATE];
    t->revenue = v[P_REVENUE];
    t->efficiency_loss = v[P_EFFICIENCY_LOSS];
    t->upkeep = v[P_UPKEEP];
    t->replace_cost = v[P_REPLACE_COST];

    shape->n_states = t->n_levels;
    shape->n_factors = 1;
    shape->factors[0] = (sluice_factor){"wear", t->n_levels, 0};
    shape->n_actions = 2;
    shape->action_names = action_names;
    shape->discount = v[P_DISCOUNT];
    *instance = t;
    return 0;
}

static int tw_available(const void *instance, int64_t state, int32_t action)
{
    const turbine *t = instance;
    if (action == 1)
        return 1;
    return action == 0 && state < t->n_levels - 1;
}

static int tw_transitions(const void *instance, int64_t state, int32_t action,
                          sluice_sink *sink)
{
    const turbine *t = instance;
    if (state < 0 || state >= t->n_levels || !tw_available(instance, state, action))
        return 1;
    if (action == 1)
        return sluice_emit(sink, 0, 1.0, -t->replace_cost);

    int64_t top = t->n_levels - 1;
    double p[3] = {1.0 - t->wear_rate, 0.75 * t->wear_rate, 0.25 * t->wear_rate};
    double reward = t->revenue * (1.0 - t->efficiency_loss * (double)state / (double)top) -
                    t->upkeep * (double)state;
    for (int k = 0; k < 3; k++) {
        if (p[k] <= 0.0)
            continue;   /* wear_rate = 1: wear always grows */
        int64_t next = state + k > top ? top : state + k;
        int rc = sluice_emit(sink, next, p[k], reward);
        if (rc != 0)
            return rc;
    }
    return 0;
}

static void tw_finish(void *instance)
{
    free(instance);
}

const sluice_generator_def sluice_generator = {
    SLUICE_GENERATOR_ABI,
    "turbine_wear",
    "invented turbine runner: run or replace as wear grows",
    N_PARAMS,
    params,
    tw_init,
    tw_available,
    tw_transitions,
    tw_finish,
};
