/* reservoir.c - monthly release-rule model of one hydro reservoir (invented data).
 *
 * Scenario (all names and numbers are invented for this demo; any
 * resemblance to a real reservoir, river or company is coincidental): the
 * Tamsel reservoir on the river Ouvrin, run by the Halvard Ridge Energy
 * Cooperative. Each month the operator chooses how much water to release
 * through the turbines. The model is documented equation by equation in
 * docs/reservoir.md; tests/python/reservoir_twin.py re-implements it from
 * that document, so any change here must be made there too.
 *
 * Results computed with this model support, and never replace, licensed
 * engineering judgement and the local regulations that govern releases.
 *
 * State factors (factor 0 varies fastest):
 *   storage i in [0, L)   storage S_i = capacity * i / (L - 1)        [hm3]
 *   inflow  j in [0, J)   class of this month's inflow Q(j, m)        [hm3/month]
 *   month   m in [0, 12)  0 = January; a stage factor (yearly cycle)
 * Action a in [0, N): release R_a = max_release * a / (N - 1)        [hm3/month]
 *
 * Mass balance over one month, with the excess spilled (the usual
 * continuity equation of reservoir simulation, e.g. Loucks & van Beek,
 * "Water Resource Systems Planning and Management", UNESCO 2005, ch. 8 --
 * chapter recalled from memory):
 *   W  = S_i + Q(j, m) - E,       E = min(e_m * A_i, S_i + Q(j, m))
 *   a is available iff R_a <= W   (a = 0 always is, since W >= 0)
 *   x  = W - R_a,   spill = max(0, x - capacity),   S' = min(x, capacity)
 *   next storage level i' = floor(S' / dS + 0.5), dS = capacity / (L - 1)
 * Rounding S' to the nearest grid level is the simplest storage
 * discretisation; its error shrinks as L grows (Klemes, "Discrete
 * representation of storage for stochastic reservoir optimization", Water
 * Resources Research 13(1), 1977 -- recalled from memory).
 *
 * Inflow classes follow a seasonal lag-one Markov chain: the next class k is
 * drawn from a truncated Gaussian kernel around a centre that regresses the
 * current class toward the middle class, restricted to a window of
 * 2 * inflow_band + 1 classes, so each pair has that many successors.
 *
 * Reward (thousand currency units, kCU): value of the energy generated with
 * a head that grows with storage, at a price that varies by month, minus
 * penalties for downstream flow below min_flow and above channel_capacity.
 *
 * The discount factor 0.99 per month is an invented default.
 *
 * Generator ABI 2: storage levels carry S_i (hm3), inflow classes the
 * annual-mean inflow of the class (hm3/month, i.e. Q(j, m) without the
 * seasonal factor), months the labels Jan..Dec; actions carry R_a
 * (hm3/month); the reward is in kCU per month. Outcome quantities reported
 * with every successor, per month (docs/reservoir.md, "Outcome quantities"):
 * energy (MWh), revenue (kCU, energy sales before penalties), release,
 * spill, shortfall (below min_flow), inflow, evaporation (all hm3) and
 * rounding (hm3: the storage grid rounding S_{i'} - S', so that
 *   S_{i'} - S_i = inflow - evaporation - release - spill + rounding
 * holds for every transition).
 *
 * Floating-point note: every quantity is computed with the operation order
 * written in docs/reservoir.md, using only +, -, *, /, sqrt, floor (exactly
 * rounded in IEEE 754) on values from small tables; cos and exp are used only
 * while building the tables in init(). An independent implementation that
 * follows the same order reproduces the targets and probabilities bit for
 * bit on the same C library.
 */
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "sluice/generator.h"

#define RES_MONTHS 12
#define RES_TAU 6.283185307179586 /* 2*pi rounded to double */
#define RES_MWH_PER_HM3_M 2.725   /* rho*g*1e6 m3 / 3.6e9 J per MWh, rho=1000, g=9.81 */

/* Parameter indices; keep in the order of res_params[]. */
enum {
    P_STORAGE_LEVELS,
    P_INFLOW_CLASSES,
    P_RELEASE_LEVELS,
    P_CAPACITY,
    P_MAX_RELEASE,
    P_MEAN_INFLOW,
    P_INFLOW_SEASONALITY,
    P_INFLOW_CV,
    P_PERSISTENCE,
    P_INFLOW_SPREAD,
    P_INFLOW_BAND,
    P_EVAP_DEPTH,
    P_SURFACE_AREA,
    P_HEAD_MIN,
    P_HEAD_MAX,
    P_EFFICIENCY,
    P_PRICE,
    P_PRICE_SEASONALITY,
    P_MIN_FLOW,
    P_SHORTFALL_PENALTY,
    P_CHANNEL_CAPACITY,
    P_FLOOD_PENALTY,
    P_DISCOUNT,
    P_COUNT
};

static const sluice_param res_params[P_COUNT] = {
    {"storage_levels", 60, "levels", "number of storage grid levels L (>= 2)"},
    {"inflow_classes", 6, "classes", "number of inflow classes J (>= 1)"},
    {"release_levels", 11, "actions", "number of release levels N (>= 1)"},
    {"capacity", 1200, "hm3", "active storage capacity"},
    {"max_release", 300, "hm3/month", "largest release (turbine capacity)"},
    {"mean_inflow", 140, "hm3/month", "annual mean of the monthly inflow"},
    {"inflow_seasonality", 0.6, "1", "relative amplitude of the seasonal inflow cycle (peak in May)"},
    {"inflow_cv", 0.45, "1", "spread of inflow classes around the monthly mean (<= 1/sqrt(3))"},
    {"persistence", 0.6, "1", "lag-one persistence of the inflow class, in [0, 1]"},
    {"inflow_spread", 1.0, "classes", "width of the next-class kernel (>= 0.05)"},
    {"inflow_band", 2, "classes", "half-width b: the next class lies in a window of 2b+1 classes"},
    {"evap_depth", 0.12, "m/month", "peak monthly evaporation depth (July)"},
    {"surface_area", 45, "km2", "lake surface area at full storage"},
    {"head_min", 40, "m", "hydraulic head at empty storage"},
    {"head_max", 95, "m", "hydraulic head at full storage"},
    {"efficiency", 0.88, "1", "turbine-generator efficiency, in (0, 1]"},
    {"price", 55, "CU/MWh", "mean energy price (invented currency units)"},
    {"price_seasonality", 0.3, "1", "relative amplitude of the price cycle (peak in January)"},
    {"min_flow", 35, "hm3/month", "downstream minimum flow"},
    {"shortfall_penalty", 20, "kCU/hm3", "penalty per hm3 of flow below min_flow"},
    {"channel_capacity", 420, "hm3/month", "downstream channel capacity"},
    {"flood_penalty", 60, "kCU/hm3", "penalty per hm3 of flow above channel_capacity"},
    {"discount", 0.99, "1/month", "discount factor per month, in (0, 1]"},
};

static const char *const res_month_names[RES_MONTHS] = {
    "Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Oct", "Nov", "Dec"};

/* Outcome quantities; keep in the order of res_quantities[]. */
enum { Q_ENERGY, Q_REVENUE, Q_RELEASE, Q_SPILL, Q_SHORTFALL, Q_INFLOW, Q_EVAPORATION, Q_ROUNDING, Q_COUNT };

static const sluice_quantity res_quantities[Q_COUNT] = {
    {"energy", "MWh", "energy generated in the month"},
    {"revenue", "kCU", "value of the energy at the month's price, before penalties"},
    {"release", "hm3", "water released through the turbines"},
    {"spill", "hm3", "water spilled because the reservoir is full"},
    {"shortfall", "hm3", "downstream flow missing to reach min_flow"},
    {"inflow", "hm3", "inflow of the month"},
    {"evaporation", "hm3", "evaporation from the lake"},
    {"rounding", "hm3", "storage grid rounding: next level's storage minus the exact end storage"},
};

typedef struct res_model {
    int64_t L, J;             /* storage levels, inflow classes */
    int32_t N;                /* release levels */
    int band_width;           /* window width w = min(2*band+1, J) */
    double capacity, dS;
    double head_min, head_span;
    double energy_coef;       /* RES_MWH_PER_HM3_M * efficiency */
    double min_flow, shortfall_penalty, channel_capacity, flood_penalty;
    double *storage;          /* [L]    S_i */
    double *area;             /* [L]    surface area A_i (km2) */
    double *release;          /* [N]    R_a */
    double *class_inflow;     /* [J]    annual-mean inflow of class j */
    double *inflow;           /* [12*J] Q(j, m) at m*J + j */
    double evap[RES_MONTHS];  /* e_m (m/month) */
    double price[RES_MONTHS]; /* price_m (CU/MWh) */
    int64_t *next_lo;         /* [12*J] first next class of the window */
    int *next_n;              /* [12*J] successors kept (zero weights dropped) */
    double *next_prob;        /* [12*J*band_width] probabilities of the window */
    char **names;             /* [N] action names */
} res_model;

/* cos(2*pi*(m - peak)/12), the seasonal shape; evaluated only in init(). */
static double res_season(int m, int peak)
{
    return cos(RES_TAU * (double)(m - peak) / 12.0);
}

static void res_free(void *instance)
{
    res_model *md = instance;
    if (md == NULL)
        return;
    if (md->names != NULL) {
        for (int32_t a = 0; a < md->N; a++)
            free(md->names[a]);
        free(md->names);
    }
    free(md->storage);
    free(md->area);
    free(md->release);
    free(md->class_inflow);
    free(md->inflow);
    free(md->next_lo);
    free(md->next_n);
    free(md->next_prob);
    free(md);
}

/* Allowed range of each parameter; head_max is also checked against head_min. */
typedef struct res_range {
    double lo, hi;
    int integer;
} res_range;

static const res_range res_ranges[P_COUNT] = {
    [P_STORAGE_LEVELS] = {2, 1e8, 1},
    [P_INFLOW_CLASSES] = {1, 1e5, 1},
    [P_RELEASE_LEVELS] = {1, 1000, 1},
    [P_CAPACITY] = {1e-9, 1e12, 0},
    [P_MAX_RELEASE] = {0, 1e12, 0},
    [P_MEAN_INFLOW] = {0, 1e12, 0},
    [P_INFLOW_SEASONALITY] = {0, 1, 0},
    [P_INFLOW_CV] = {0, 0.57735026918962573, 0}, /* 1/sqrt(3): classes stay >= 0 */
    [P_PERSISTENCE] = {0, 1, 0},
    [P_INFLOW_SPREAD] = {0.05, 1e9, 0},
    [P_INFLOW_BAND] = {0, 1e4, 1},
    [P_EVAP_DEPTH] = {0, 1e3, 0},
    [P_SURFACE_AREA] = {0, 1e7, 0},
    [P_HEAD_MIN] = {0, 1e4, 0},
    [P_HEAD_MAX] = {0, 1e4, 0},
    [P_EFFICIENCY] = {1e-9, 1, 0},
    [P_PRICE] = {0, 1e9, 0},
    [P_PRICE_SEASONALITY] = {0, 1, 0},
    [P_MIN_FLOW] = {0, 1e12, 0},
    [P_SHORTFALL_PENALTY] = {0, 1e12, 0},
    [P_CHANNEL_CAPACITY] = {0, 1e12, 0},
    [P_FLOOD_PENALTY] = {0, 1e12, 0},
    [P_DISCOUNT] = {1e-9, 1, 0},
};

/* Check every parameter against its range; write the first problem to err. */
static int res_check(const double *v, char *err, size_t errlen)
{
    for (int k = 0; k < P_COUNT; k++) {
        const res_range *rg = &res_ranges[k];
        double x = v[k];
        if (!isfinite(x) || x < rg->lo || x > rg->hi ||
            (rg->integer && x != floor(x))) {
            snprintf(err, errlen, "reservoir: parameter %s = %g must be %s in [%g, %g]",
                     res_params[k].name, x, rg->integer ? "an integer" : "a number",
                     rg->lo, rg->hi);
            return 1;
        }
    }
    if (v[P_HEAD_MAX] < v[P_HEAD_MIN]) {
        snprintf(err, errlen, "reservoir: head_max = %g must not be below head_min = %g",
                 v[P_HEAD_MAX], v[P_HEAD_MIN]);
        return 1;
    }
    return 0;
}

static int res_init(const double *v, sluice_shape *shape, void **instance,
                    char *err, size_t errlen)
{
    *instance = NULL;
    if (res_check(v, err, errlen))
        return 1;

    res_model *md = calloc(1, sizeof *md);
    if (md == NULL) {
        snprintf(err, errlen, "reservoir: out of memory");
        return 1;
    }
    md->L = (int64_t)v[P_STORAGE_LEVELS];
    md->J = (int64_t)v[P_INFLOW_CLASSES];
    md->N = (int32_t)v[P_RELEASE_LEVELS];
    int64_t band = (int64_t)v[P_INFLOW_BAND];
    int64_t width = 2 * band + 1 < md->J ? 2 * band + 1 : md->J;
    md->band_width = (int)width;
    md->capacity = v[P_CAPACITY];
    md->dS = md->capacity / (double)(md->L - 1);
    md->head_min = v[P_HEAD_MIN];
    md->head_span = v[P_HEAD_MAX] - v[P_HEAD_MIN];
    md->energy_coef = RES_MWH_PER_HM3_M * v[P_EFFICIENCY];
    md->min_flow = v[P_MIN_FLOW];
    md->shortfall_penalty = v[P_SHORTFALL_PENALTY];
    md->channel_capacity = v[P_CHANNEL_CAPACITY];
    md->flood_penalty = v[P_FLOOD_PENALTY];

    size_t L = (size_t)md->L, J = (size_t)md->J, N = (size_t)md->N;
    size_t MJ = RES_MONTHS * J;
    if (L > SIZE_MAX / sizeof(double) || MJ > SIZE_MAX / sizeof(double) / (size_t)width) {
        res_free(md);
        snprintf(err, errlen, "reservoir: tables too large for this machine");
        return 1;
    }
    md->storage = malloc(L * sizeof *md->storage);
    md->area = malloc(L * sizeof *md->area);
    md->release = malloc(N * sizeof *md->release);
    md->class_inflow = malloc(J * sizeof *md->class_inflow);
    md->inflow = malloc(MJ * sizeof *md->inflow);
    md->next_lo = malloc(MJ * sizeof *md->next_lo);
    md->next_n = malloc(MJ * sizeof *md->next_n);
    md->next_prob = malloc(MJ * (size_t)width * sizeof *md->next_prob);
    md->names = calloc(N, sizeof *md->names);
    if (md->storage == NULL || md->area == NULL || md->release == NULL || md->class_inflow == NULL ||
        md->inflow == NULL || md->next_lo == NULL || md->next_n == NULL || md->next_prob == NULL ||
        md->names == NULL) {
        res_free(md);
        snprintf(err, errlen, "reservoir: out of memory");
        return 1;
    }

    for (size_t i = 0; i < L; i++) {
        md->storage[i] = md->capacity * (double)i / (double)(md->L - 1);
        md->area[i] = v[P_SURFACE_AREA] * sqrt(md->storage[i] / md->capacity);
    }
    for (size_t a = 0; a < N; a++) {
        md->release[a] = md->N > 1
            ? v[P_MAX_RELEASE] * (double)a / (double)(md->N - 1) : 0.0;
        char buf[64];
        snprintf(buf, sizeof buf, "release_%.6g", md->release[a]);
        md->names[a] = malloc(strlen(buf) + 1);
        if (md->names[a] == NULL) {
            res_free(md);
            snprintf(err, errlen, "reservoir: out of memory");
            return 1;
        }
        memcpy(md->names[a], buf, strlen(buf) + 1);
    }

    const double cls_scale = sqrt(3.0) * v[P_INFLOW_CV];
    const double mid = (double)(md->J - 1) / 2.0;
    const double sigma = v[P_INFLOW_SPREAD];
    for (int64_t j = 0; j < md->J; j++) {
        double z = md->J > 1 ? 2.0 * (double)j / (double)(md->J - 1) - 1.0 : 0.0;
        md->class_inflow[j] = v[P_MEAN_INFLOW] * (1.0 + cls_scale * z);
    }
    for (int m = 0; m < RES_MONTHS; m++) {
        double mu = v[P_MEAN_INFLOW] * (1.0 + v[P_INFLOW_SEASONALITY] * res_season(m, 4));
        md->evap[m] = v[P_EVAP_DEPTH] * (0.55 + 0.45 * res_season(m, 6));
        md->price[m] = v[P_PRICE] * (1.0 + v[P_PRICE_SEASONALITY] * res_season(m, 0));
        double rho = v[P_PERSISTENCE] * (0.75 + 0.25 * res_season(m, 1));
        for (int64_t j = 0; j < md->J; j++) {
            size_t mj = (size_t)m * J + (size_t)j;
            double z = md->J > 1 ? 2.0 * (double)j / (double)(md->J - 1) - 1.0 : 0.0;
            md->inflow[mj] = mu * (1.0 + cls_scale * z);
            /* centre of the next class: regression toward the middle class */
            double centre = rho * (double)j + (1.0 - rho) * mid;
            int64_t lo = (int64_t)floor(centre + 0.5) - band;
            if (lo > md->J - width)
                lo = md->J - width;
            if (lo < 0)
                lo = 0;
            double *p = md->next_prob + mj * (size_t)width;
            double total = 0.0;
            for (int64_t t = 0; t < width; t++) {
                double u = ((double)(lo + t) - centre) / sigma;
                p[t] = exp(-0.5 * u * u);
                total += p[t];
            }
            /* A very narrow kernel can underflow the weights at the window
             * edges to 0; drop those classes rather than emit zero
             * probabilities. The weight nearest the centre is at least
             * exp(-50) (sigma >= 0.05), so something always remains. */
            int64_t first = 0, last = width - 1;
            while (p[first] == 0.0)
                first++;
            while (p[last] == 0.0)
                last--;
            for (int64_t t = first; t <= last; t++)
                p[t - first] = p[t] / total;
            md->next_lo[mj] = lo + first;
            md->next_n[mj] = (int)(last - first + 1);
        }
    }

    shape->n_states = md->L * md->J * RES_MONTHS;
    shape->n_factors = 3;
    shape->factors[0] = (sluice_factor){"storage", md->L, 0};
    shape->factors[1] = (sluice_factor){"inflow", md->J, 0};
    shape->factors[2] = (sluice_factor){"month", RES_MONTHS, 1};
    shape->n_actions = md->N;
    shape->action_names = (const char *const *)md->names;
    shape->discount = v[P_DISCOUNT];
    shape->factor_values[0] = (sluice_factor_values){"hm3", md->storage, NULL};
    shape->factor_values[1] = (sluice_factor_values){"hm3/month", md->class_inflow, NULL};
    shape->factor_values[2] = (sluice_factor_values){NULL, NULL, res_month_names};
    shape->action_values = md->release;
    shape->action_unit = "hm3/month";
    shape->reward_unit = "kCU";
    shape->period_unit = "month";
    shape->n_quantities = Q_COUNT;
    shape->quantities = res_quantities;
    *instance = md;
    return 0;
}

/* Water available for release W (hm3) in storage level i, class/month mj. */
static inline double res_water(const res_model *md, int64_t i, int m, size_t mj)
{
    double sq = md->storage[i] + md->inflow[mj];
    double e = md->evap[m] * md->area[i];
    if (e > sq)
        e = sq;
    return sq - e;
}

static int res_available(const void *instance, int64_t state, int32_t action)
{
    const res_model *md = instance;
    if (state < 0 || action < 0 || action >= md->N)
        return 0;
    int64_t i = state % md->L;
    int64_t rest = state / md->L;
    int64_t j = rest % md->J;
    int m = (int)(rest / md->J);
    if (m >= RES_MONTHS)
        return 0;
    size_t mj = (size_t)m * (size_t)md->J + (size_t)j;
    return md->release[action] <= res_water(md, i, m, mj);
}

static int res_transitions(const void *instance, int64_t state, int32_t action,
                           sluice_sink *sink)
{
    const res_model *md = instance;
    if (state < 0 || action < 0 || action >= md->N)
        return 1;
    int64_t i = state % md->L;
    int64_t rest = state / md->L;
    int64_t j = rest % md->J;
    int m = (int)(rest / md->J);
    if (m >= RES_MONTHS)
        return 1;
    size_t mj = (size_t)m * (size_t)md->J + (size_t)j;
    double R = md->release[action];
    double SQ = md->storage[i] + md->inflow[mj];
    double E = md->evap[m] * md->area[i];
    if (E > SQ)
        E = SQ;
    double W = SQ - E; /* as res_water() */
    if (!(R <= W))
        return 1; /* not available: the caller should not have asked */

    double x = W - R;
    double spill = x > md->capacity ? x - md->capacity : 0.0;
    double s_end = x < md->capacity ? x : md->capacity;
    int64_t i_next = (int64_t)floor(s_end / md->dS + 0.5);
    if (i_next > md->L - 1)
        i_next = md->L - 1;

    double s_mean = 0.5 * (md->storage[i] + s_end);
    double head = md->head_min + md->head_span * sqrt(s_mean / md->capacity);
    double energy = md->energy_coef * head * R;           /* MWh */
    double flow = R + spill;                              /* hm3/month downstream */
    double shortfall = flow < md->min_flow ? md->min_flow - flow : 0.0;
    double excess = flow > md->channel_capacity ? flow - md->channel_capacity : 0.0;
    double reward = md->price[m] * energy / 1000.0
                    - md->shortfall_penalty * shortfall
                    - md->flood_penalty * excess;         /* kCU */

    double q[Q_COUNT];
    q[Q_ENERGY] = energy;
    q[Q_REVENUE] = md->price[m] * energy / 1000.0;
    q[Q_RELEASE] = R;
    q[Q_SPILL] = spill;
    q[Q_SHORTFALL] = shortfall;
    q[Q_INFLOW] = md->inflow[mj];
    q[Q_EVAPORATION] = E;
    q[Q_ROUNDING] = md->storage[i_next] - s_end;

    int m_next = (m + 1) % RES_MONTHS;
    int64_t base = i_next + md->L * (md->next_lo[mj] + md->J * (int64_t)m_next);
    const double *p = md->next_prob + mj * (size_t)md->band_width;
    for (int t = 0; t < md->next_n[mj]; t++) {
        int rc = sluice_emit_outcome(sink, base + md->L * (int64_t)t, p[t], reward, q);
        if (rc != 0)
            return rc;
    }
    return 0;
}

const sluice_generator_def sluice_generator = {
    SLUICE_GENERATOR_ABI,
    "reservoir",
    "monthly release rule of the invented Tamsel hydro reservoir",
    P_COUNT,
    res_params,
    res_init,
    res_available,
    res_transitions,
    res_free,
};
