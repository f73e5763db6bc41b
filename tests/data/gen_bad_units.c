/* gen_bad_units.c - a small ABI 2 generator with one injected fault in its
 * units, labels or outcome quantities per --param mode=N (0: none), for
 * tests/cli/abi2_build.sh; mode 8 declares nothing of ABI 2 (a format 1
 * model with two factors, for tests/cli/table_bad_input.sh). Invented: a two-level storage pond of a mill
 * stream; the numbers mean nothing. */
#include <math.h>
#include <stdint.h>
#include <stdio.h>

#include "sluice/generator.h"

static const sluice_param bad_params[1] = {{"mode", 0, "1", "fault to inject (0: none)"}};
static const char *const good_labels[3] = {"dry", "wet", "flood"};
static const char *const dup_labels[3] = {"dry", "wet", "dry"};
static const double level_values[2] = {0.0, 2.5};
static double nan_values[2] = {0.0, 0.0};
static const double gate_values[2] = {0.0, 1.5};
static const sluice_quantity good_q[2] = {{"overflow", "hm3", "water over the weir"}, {"gate_flow", "hm3", "through the gate"}};
static const sluice_quantity bad_name_q[1] = {{"over flow", "hm3", "space in the name"}};
static const sluice_quantity reserved_q[1] = {{"value", "kCU", "a --show keyword"}};
static const sluice_quantity dup_q[2] = {{"overflow", "hm3", ""}, {"overflow", "hm3", ""}};

static int mode_of(const void *inst) { return (int)(intptr_t)inst; }

static int bad_init(const double *v, sluice_shape *sh, void **inst, char *err, size_t n)
{
    (void)err;
    (void)n;
    int mode = (int)v[0];
    *inst = (void *)(intptr_t)mode;
    sh->n_states = 6;
    sh->n_factors = 2;
    sh->factors[0] = (sluice_factor){"level", 2, 0};
    sh->factors[1] = (sluice_factor){"season", 3, 0};
    sh->n_actions = 2;
    sh->discount = 0.9;
    sh->factor_values[0] = (sluice_factor_values){"m", level_values, NULL};
    sh->factor_values[1] = (sluice_factor_values){NULL, NULL, good_labels};
    sh->action_values = gate_values;
    sh->action_unit = "hm3/week";
    sh->reward_unit = "kCU";
    sh->period_unit = "week";
    sh->n_quantities = 2;
    sh->quantities = good_q;
    nan_values[1] = NAN;
    switch (mode) {
    case 1: sh->factor_values[1].labels = dup_labels; break;
    case 2: sh->quantities = bad_name_q; sh->n_quantities = 1; break;
    case 3: sh->quantities = reserved_q; sh->n_quantities = 1; break;
    case 4: break; /* emits without quantities, below */
    case 5: break; /* NaN quantity, below */
    case 6: sh->factor_values[0].values = nan_values; break;
    case 7: sh->quantities = dup_q; break;
    case 8: /* no annotations at all: a format 1 model with two factors */
        sh->factor_values[0] = (sluice_factor_values){NULL, NULL, NULL};
        sh->factor_values[1] = (sluice_factor_values){NULL, NULL, NULL};
        sh->action_values = NULL;
        sh->action_unit = sh->reward_unit = sh->period_unit = NULL;
        sh->n_quantities = 0;
        sh->quantities = NULL;
        break;
    default: break;
    }
    return 0;
}

static int bad_transitions(const void *inst, int64_t s, int32_t a, sluice_sink *sink)
{
    int mode = mode_of(inst);
    int64_t level = s % 2, season = s / 2;
    int64_t next_level = a == 1 ? 0 : 1, next_season = (season + 1) % 3;
    double q[2] = {level == 1 && a == 0 ? 1.0 : 0.0, a == 1 ? gate_values[1] : 0.0};
    if (mode == 5 && s == 3 && a == 1) q[0] = NAN;
    if (mode == 4 && s == 3 && a == 1) return sluice_emit(sink, next_level + 2 * next_season, 1.0, 1.0);
    return sluice_emit_outcome(sink, next_level + 2 * next_season, 1.0, a == 1 ? 2.0 - (double)level : 0.5, q);
}

const sluice_generator_def sluice_generator = {
    SLUICE_GENERATOR_ABI, "mill_pond", "fault injection for units and quantities", 1, bad_params,
    bad_init, NULL, bad_transitions, NULL,
};
