/* simulate.c - Monte Carlo rollouts of a policy from one start state: the
 * discounted return, and per stage the figures sl_outlook_compute gives
 * exactly (factor means, quantity means and P(q > 0), discounted reward so
 * far) as sample means with confidence intervals; optionally every sampled
 * step as CSV. */
#include <errno.h>
#include <math.h>
#include <string.h>

#include "analysis/analysis.h"
#include "store/store.h"

/* Whole model + policy (a solution, or a rule CSV: values 0, *is_rule) on
 * rank 0 (others hold nothing). Collective. */
static sl_status load_on_root(sl_ctx *ctx, const char *model, const char *solution, sl_meta *m, sl_block *b,
                              double **value, int32_t **actions, int *is_rule, int need_rows)
{
    sl_status st = SL_OK;
    *value = NULL;
    *actions = NULL;
    memset(b, 0, sizeof(*b));
    SL_TRY(sl_store_model_meta(ctx, model, m));
    int64_t n = ctx->rank == 0 ? m->n_states : 0;
    if (SL_ALLOC(ctx, *value, n, "values") == NULL || SL_ALLOC(ctx, *actions, n, "policy") == NULL) st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    SL_TRY(sl_policy_file_read(ctx, model, m, solution, 0, n, *value, *actions, is_rule));
    if (need_rows) SL_TRY(sl_store_model_read(ctx, model, m, 0, n, b));
cleanup:
    if (st != SL_OK) {
        free(*value);
        free(*actions);
        *value = NULL;
        *actions = NULL;
    }
    return st;
}

/* xoshiro256** (Blackman & Vigna 2018), seeded by splitmix64 */
typedef struct rng {
    uint64_t s[4];
} rng;
static uint64_t rotl(uint64_t x, int k) { return (x << k) | (x >> (64 - k)); }
static uint64_t rng_next(rng *r)
{
    uint64_t *s = r->s, res = rotl(s[1] * 5, 7) * 9, t = s[1] << 17;
    s[2] ^= s[0];
    s[3] ^= s[1];
    s[1] ^= s[2];
    s[0] ^= s[3];
    s[2] ^= t;
    s[3] = rotl(s[3], 45);
    return res;
}
static double rng_unit(rng *r) { return (double)(rng_next(r) >> 11) * 0x1.0p-53; }

/* Per-stage accumulators: Welford's running mean and sum of squared
 * deviations (Welford 1962, Technometrics 4(3):419-420), one per statistic. */
typedef struct stage_acc {
    int nf, nq, nstat;          /* numeric factors, quantities, statistics per stage */
    int fac[SLUICE_MAX_FACTORS];
    double *mean, *m2;          /* [(T + 1) * nstat] */
    double *lo, *hi;            /* [nstat] range of each statistic's samples (stage-free part) */
} stage_acc;

/* z with P(|N(0,1)| > z) = alpha: bisection on erfc(z / sqrt 2) = alpha. */
static double normal_quantile(double alpha)
{
    double a = 0, b = 40;
    for (int i = 0; i < 200; i++) {
        double c = 0.5 * (a + b);
        if (erfc(c / sqrt(2.0)) > alpha) a = c;
        else b = c;
    }
    return 0.5 * (a + b);
}

/* One interval: [mean - h, mean + h] clipped to the range [a, b] the
 * samples (and so their expectation) lie in. */
static void interval(const sl_simulate_opts *o, double n, double mean, double m2, double a, double b, double z,
                     double *low, double *high)
{
    double alpha = 1 - (o->confidence > 0 ? o->confidence : 0.95), h;
    /* every sample equal (m2 = 0): the normal approximation says nothing
     * about the spread, so such a cell gets Hoeffding's interval */
    if (o->interval == SL_INTERVAL_HOEFFDING || !(m2 > 0)) h = (b - a) * sqrt(log(2 / alpha) / (2 * n));
    else h = z * sqrt(m2 / (n - 1) / n);
    *low = fmax(mean - h, a);
    *high = fmin(mean + h, b);
}

static void csv_unit(FILE *f, const char *name, const char *unit)
{
    fprintf(f, ",%s%s%s%s", name, unit[0] ? " [" : "", unit, unit[0] ? "]" : "");
}

/* Three columns of the per-stage CSV: NAMESUFFIX_mean [unit], _low, _high. */
static void stage_csv_head(FILE *f, const char *name, const char *suffix, const char *unit)
{
    static const char *part[3] = {"mean", "low", "high"};
    for (int i = 0; i < 3; i++)
        fprintf(f, ",%s%s_%s%s%s%s", name, suffix, part[i], unit[0] ? " [" : "", unit, unit[0] ? "]" : "");
}

static void trajectory_header(FILE *f, const sl_meta *m)
{
    fprintf(f, "episode,stage,state");
    for (int k = 0; k < m->n_factors; k++) csv_unit(f, m->factor_name[k], m->factor_unit[k]);
    fprintf(f, ",action");
    if (m->n_action_values > 0) csv_unit(f, "action_value", m->action_unit);
    csv_unit(f, "reward", m->reward_unit);
    for (int q = 0; q < m->n_quantities; q++) csv_unit(f, m->quantity_name[q], m->quantity_unit[q]);
    csv_unit(f, "discounted_reward_so_far", m->reward_unit);
    fprintf(f, "\n");
}

sl_status sl_simulate(sl_ctx *ctx, const sl_simulate_opts *o)
{
    sl_status st = SL_OK;
    sl_meta m;
    sl_block b;
    double *v = NULL, *qm = NULL, *qp = NULL, *buf = NULL, *start_p = NULL, *fig = NULL;
    int64_t n_start = 0, *start_states = NULL;
    int32_t *a = NULL;
    int is_rule = 0;
    stage_acc acc;
    sl_outfile of, sof;
    FILE *tf = NULL, *sf = NULL;
    memset(&of, 0, sizeof(of));
    memset(&sof, 0, sizeof(sof));
    memset(&acc, 0, sizeof(acc));
    memset(&m, 0, sizeof(m));
    memset(&b, 0, sizeof(b));
    SL_TRY(load_on_root(ctx, o->model, o->solution, &m, &b, &v, &a, &is_rule, 1));
    if (o->start_distribution) {
        /* rank 0 draws every episode's start from it */
        if (ctx->rank == 0) st = sl_start_csv_read(ctx, &m, o->start_distribution, &n_start, &start_states, &start_p);
        SL_TRY(sl_agree(ctx, st));
    } else if (o->start < 0 || o->start >= m.n_states)
        SL_TRY(sl_agree(ctx, SL_ERR(ctx, SL_EUSAGE, "--start %lld is not a state of %s (0..%lld)", (long long)o->start,
                                    o->model, (long long)m.n_states - 1)));
    if (o->confidence != 0 && !(o->confidence > 0 && o->confidence < 1))
        SL_TRY(sl_agree(ctx, SL_ERR(ctx, SL_EUSAGE, "--confidence %g is not in (0, 1)", o->confidence)));
    int per_stage = o->stages > 0, T = (int)(per_stage ? o->stages : 0);
    if (o->stages < 0 || o->stages > 100000000)
        SL_TRY(sl_agree(ctx, SL_ERR(ctx, SL_EUSAGE, "--stages %lld is not in [0, 1e8]", (long long)o->stages)));
    if (o->stages_csv && !per_stage)
        SL_TRY(sl_agree(ctx, SL_ERR(ctx, SL_EUSAGE, "-o %s: the per-stage table needs --stages N", o->stages_csv)));
    int64_t np = ctx->rank == 0 ? m.n_pairs : 0;
    int nq = m.n_quantities;
    if (nq > 0 && (per_stage || o->trajectories)) {
        /* the quantities of every pair, on rank 0, pair-major */
        if (SL_ALLOC(ctx, qm, np * nq, "quantities") == NULL || SL_ALLOC(ctx, qp, np * nq, "quantities") == NULL ||
            SL_ALLOC(ctx, buf, 2 * np, "quantities") == NULL)
            st = SL_ENOMEM;
        SL_TRY(sl_agree(ctx, st));
        for (int q = 0; q < nq; q++) {
            SL_TRY(sl_store_quantity_read(ctx, o->model, &m, q, 0, np, buf, buf + np));
            for (int64_t k = 0; k < np; k++) {
                qm[k * nq + q] = buf[k];
                qp[k * nq + q] = buf[np + k];
            }
        }
    } else {
        nq = 0;
    }
    if (per_stage) {
        for (int f = 0; f < m.n_factors; f++)
            if (m.factor_value[f]) acc.fac[acc.nf++] = f;
        acc.nq = nq;
        acc.nstat = acc.nf + 2 * nq + 1;
        int64_t cells = ctx->rank == 0 ? (int64_t)(T + 1) * acc.nstat : 0;
        if (SL_ALLOC(ctx, acc.mean, cells, "stage figures") == NULL || SL_ALLOC(ctx, acc.m2, cells, "stage figures") == NULL ||
            SL_ALLOC(ctx, acc.lo, acc.nstat, "stage figures") == NULL ||
            SL_ALLOC(ctx, acc.hi, acc.nstat, "stage figures") == NULL ||
            SL_ALLOC(ctx, fig, 3 * (ctx->rank == 0 ? cells : 0), "stage figures") == NULL)
            st = SL_ENOMEM;
        SL_TRY(sl_agree(ctx, st));
        for (int64_t c = 0; c < cells; c++) acc.mean[c] = acc.m2[c] = 0;
    }
    if (o->trajectories) {
        SL_TRY(sl_outfile_begin(ctx, &of, o->trajectories));
        if (ctx->rank == 0 && (tf = fopen(of.tmp_path, "w")) == NULL)
            st = SL_ERR(ctx, SL_ECANTCREAT, "%s: cannot create: %s", o->trajectories, strerror(errno));
        SL_TRY(sl_agree(ctx, st));
        if (tf) trajectory_header(tf, &m);
    }
    if (o->stages_csv) {
        SL_TRY(sl_outfile_begin(ctx, &sof, o->stages_csv));
        if (ctx->rank == 0 && (sf = fopen(sof.tmp_path, "w")) == NULL)
            st = SL_ERR(ctx, SL_ECANTCREAT, "%s: cannot create: %s", o->stages_csv, strerror(errno));
        SL_TRY(sl_agree(ctx, st));
    }
    if (ctx->rank == 0) {
        double g = m.discount;
        int64_t H = o->horizon > 0 ? o->horizon : (g > 0 ? (int64_t)ceil(log(1e-6) / log(g)) : 1);
        int64_t steps = per_stage && T + 1 > H ? T + 1 : H;
        int64_t rec = per_stage ? T : H - 1; /* trajectory rows for stages 0..rec */
        rng R;
        uint64_t z = o->seed;
        for (int i = 0; i < 4; i++) R.s[i] = sl_mix64(z += 0x9e3779b97f4a7c15ULL);
        double sum = 0, sum2 = 0;
        int64_t fv[SLUICE_MAX_FACTORS];
        for (int64_t e = 0; e < o->episodes && st == SL_OK; e++) {
            int64_t s = o->start;
            if (n_start > 0) {
                /* the start drawn from the distribution (the last row takes rounding) */
                double u = rng_unit(&R), c = 0;
                s = start_states[n_start - 1];
                for (int64_t j = 0; j < n_start; j++) {
                    c += start_p[j];
                    if (u < c) {
                        s = start_states[j];
                        break;
                    }
                }
            }
            double ret = 0, disc = 1, sofar = 0;
            for (int64_t t = 0; t < steps; t++) {
                int64_t p0 = b.first_pair[s], p1 = b.first_pair[s + 1], k = -1;
                for (int64_t q = p0; q < p1; q++)
                    if (b.action[q] == a[s]) k = q;
                if (k < 0) {
                    st = SL_ERR(ctx, SL_EDATA, "%s: state %lld: policy action %d not in the model", o->solution,
                                (long long)s, (int)a[s]);
                    break;
                }
                if (per_stage && t <= T) {
                    /* the figures of stage t: the state at its start, the
                     * visited pair's quantity mean and P(q > 0), and the
                     * discounted reward of the periods before t */
                    double *mu = acc.mean + t * acc.nstat, *m2 = acc.m2 + t * acc.nstat, n1 = (double)(e + 1);
                    sl_meta_decode(&m, s, fv);
                    for (int j = 0; j < acc.nstat; j++) {
                        double x;
                        if (j < acc.nf) x = m.factor_value[acc.fac[j]][fv[acc.fac[j]]];
                        else if (j < acc.nf + 2 * nq) {
                            int q = (j - acc.nf) / 2;
                            x = (j - acc.nf) % 2 ? qp[k * nq + q] : qm[k * nq + q];
                        } else x = sofar;
                        double d = x - mu[j];
                        mu[j] += d / n1;
                        m2[j] += d * (x - mu[j]);
                    }
                }
                if (tf && t <= rec) {
                    sl_meta_decode(&m, s, fv);
                    fprintf(tf, "%lld,%lld,%lld", (long long)e, (long long)t, (long long)s);
                    for (int f = 0; f < m.n_factors; f++) {
                        if (m.factor_label[f]) fprintf(tf, ",%s", m.factor_label[f][fv[f]]);
                        else if (m.factor_value[f]) fprintf(tf, ",%.15g", m.factor_value[f][fv[f]]);
                        else fprintf(tf, ",%lld", (long long)fv[f]);
                    }
                    if (a[s] < m.n_action_names && m.action_name[a[s]][0]) fprintf(tf, ",%s", m.action_name[a[s]]);
                    else fprintf(tf, ",%d", (int)a[s]);
                    if (m.n_action_values > 0) fprintf(tf, ",%.15g", a[s] < m.n_action_values ? m.action_value[a[s]] : NAN);
                    fprintf(tf, ",%.15g", b.reward[k]);
                    for (int q = 0; q < nq; q++) fprintf(tf, ",%.15g", qm[k * nq + q]);
                    fprintf(tf, ",%.15g\n", sofar);
                }
                if (t < H) ret += disc * b.reward[k];
                sofar += disc * b.reward[k];
                disc *= g;
                double u = rng_unit(&R), c = 0;
                int64_t t0 = b.first_trans[k], t1 = b.first_trans[k + 1], next = b.target[t1 - 1];
                for (int64_t q = t0; q < t1; q++) {
                    c += b.prob[q];
                    if (u < c) {
                        next = b.target[q];
                        break;
                    }
                }
                s = next;
            }
            sum += ret;
            sum2 += ret * ret;
        }
        if (tf) {
            int bad = ferror(tf) != 0;
            bad |= fclose(tf) != 0;
            tf = NULL;
            if (bad && st == SL_OK) st = SL_ERR(ctx, SL_EIO, "%s: write failed", o->trajectories);
        }
        if (st == SL_OK) {
            double ne = (double)o->episodes, mean = sum / ne;
            double var = ne > 1 ? (sum2 - ne * mean * mean) / (ne - 1) : 0, se = sqrt(var > 0 ? var / ne : 0);
            /* truncation: rewards beyond the horizon are worth at most g^H max|r|/(1-g) */
            double rmax = 0, rlo = INFINITY, rhi = -INFINITY;
            for (int64_t k = 0; k < m.n_pairs; k++) {
                rmax = fmax(rmax, fabs(b.reward[k]));
                rlo = fmin(rlo, b.reward[k]);
                rhi = fmax(rhi, b.reward[k]);
            }
            double trunc = g < 1 ? pow(g, (double)H) * rmax / (1 - g) : 0;
            const char *ru = m.reward_unit;
            double conf = o->confidence > 0 ? o->confidence : 0.95, zq = normal_quantile(1 - conf);
            const char *method = o->interval == SL_INTERVAL_HOEFFDING ? "hoeffding" : "normal";
            const char *source = o->interval == SL_INTERVAL_HOEFFDING
                                     ? "Hoeffding 1963, J. Amer. Statist. Assoc. 58(301):13-30, Theorem 2: "
                                       "mean +- (b - a) sqrt(ln(2/alpha) / (2n)) for samples in [a, b]"
                                     : "central limit theorem: mean +- z s / sqrt(n), s the sample standard "
                                       "deviation (approximate; poor when samples are few or nearly constant); "
                                       "Hoeffding's interval where every sample is equal";
            /* the range [a, b] of every statistic, stage t's reward range scaled by sum_{tau<t} g^tau */
            for (int j = 0; per_stage && j < acc.nstat; j++) {
                double lo = INFINITY, hi = -INFINITY;
                if (j < acc.nf) {
                    int f = acc.fac[j];
                    for (int64_t i = 0; i < m.factor_size[f]; i++) {
                        lo = fmin(lo, m.factor_value[f][i]);
                        hi = fmax(hi, m.factor_value[f][i]);
                    }
                } else if (j < acc.nf + 2 * nq) {
                    int q = (j - acc.nf) / 2;
                    const double *x = (j - acc.nf) % 2 ? qp : qm;
                    for (int64_t k = 0; k < m.n_pairs; k++) {
                        lo = fmin(lo, x[k * nq + q]);
                        hi = fmax(hi, x[k * nq + q]);
                    }
                } else {
                    lo = rlo;
                    hi = rhi;
                }
                acc.lo[j] = lo;
                acc.hi[j] = hi;
            }
            /* every figure's mean and interval, once for all outputs */
            for (int t = 0; per_stage && t <= T; t++) {
                const double *mu = acc.mean + t * acc.nstat, *m2 = acc.m2 + t * acc.nstat;
                double S = g == 1 ? t : (1 - pow(g, t)) / (1 - g);
                for (int j = 0; j < acc.nstat; j++) {
                    double sc = j == acc.nstat - 1 ? S : 1, *x = fig + 3 * ((int64_t)t * acc.nstat + j);
                    x[0] = mu[j];
                    interval(o, ne, mu[j], m2[j], acc.lo[j] * sc, acc.hi[j] * sc, zq, &x[1], &x[2]);
                }
            }
            /* the value the solution gives the start (a rule CSV has none) */
            double v0 = 0;
            if (n_start > 0)
                for (int64_t j = 0; j < n_start; j++) v0 += start_p[j] * v[start_states[j]];
            else v0 = v[o->start];
            char from[4200];
            if (n_start > 0) snprintf(from, sizeof(from), "the distribution in %s", o->start_distribution);
            else snprintf(from, sizeof(from), "state %lld", (long long)o->start);
            FILE *out = o->out ? o->out : stdout;
            if (o->json) {
                fprintf(out, "{\n  \"start\": ");
                if (n_start > 0) fprintf(out, "null,\n  \"start_distribution\": \"%s\"", o->start_distribution);
                else fprintf(out, "%lld", (long long)o->start);
                fprintf(out, ",\n  \"policy\": \"%s\",\n  \"policy_is_rule\": %s,\n", o->solution,
                        is_rule ? "true" : "false");
                fprintf(out, "  \"episodes\": %lld,\n  \"horizon\": %lld,\n  \"seed\": %llu,\n"
                             "  \"mean_return\": %.17g,\n  \"standard_error\": %.17g,\n  \"truncation_bound\": %.17g,\n",
                        (long long)o->episodes, (long long)H, (unsigned long long)o->seed, mean, se, trunc);
                if (is_rule) fprintf(out, "  \"solution_value\": null,\n");
                else fprintf(out, "  \"solution_value\": %.17g,\n", v0);
                fprintf(out, "  \"units\": {\"reward\": \"%s\", \"period\": \"%s\"},\n"
                             "  \"caution\": \"Results support, never replace, licensed engineering judgement and "
                             "local regulations.\"",
                        ru, m.period_unit);
                if (per_stage) {
                    fprintf(out, ",\n  \"interval\": {\"method\": \"%s\", \"confidence\": %.17g, \"source\": \"%s\"},\n"
                                 "  \"stages\": [\n", method, conf, source);
                    for (int t = 0; t <= T; t++) {
                        const double *x = fig + 3 * (int64_t)t * acc.nstat;
                        fprintf(out, "    {\"stage\": %d, \"factors\": {", t);
                        for (int j = 0; j < acc.nf; j++)
                            fprintf(out, "%s\"%s\": {\"mean\": %.17g, \"low\": %.17g, \"high\": %.17g}", j ? ", " : "",
                                    m.factor_name[acc.fac[j]], x[3 * j], x[3 * j + 1], x[3 * j + 2]);
                        fprintf(out, "}, \"quantities\": {");
                        for (int q = 0; q < nq; q++) {
                            const double *y = x + 3 * (acc.nf + 2 * q);
                            fprintf(out, "%s\"%s\": {\"mean\": %.17g, \"mean_low\": %.17g, \"mean_high\": %.17g, "
                                         "\"p_positive\": %.17g, \"p_positive_low\": %.17g, \"p_positive_high\": %.17g}",
                                    q ? ", " : "", m.quantity_name[q], y[0], y[1], y[2], y[3], y[4], y[5]);
                        }
                        const double *y = x + 3 * (acc.nstat - 1);
                        fprintf(out, "}, \"discounted_reward\": {\"mean\": %.17g, \"low\": %.17g, \"high\": %.17g}}%s\n",
                                y[0], y[1], y[2], t < T ? "," : "");
                    }
                    fprintf(out, "  ]");
                }
                fprintf(out, "\n}\n");
            } else {
                fprintf(out, "simulate %lld episodes of %lld steps from %s (seed %llu) under %s%s\n"
                             "  mean discounted return %.6g +- %.3g %s (95%% interval, normal approximation)\n"
                             "  horizon truncation     at most %.3g %s\n",
                        (long long)o->episodes, (long long)H, from, (unsigned long long)o->seed, o->solution,
                        is_rule ? " (a rule)" : "", mean, 1.96 * se, ru, trunc, ru);
                if (is_rule) fprintf(out, "  solution value         none: a rule CSV has no values\n");
                else fprintf(out, "  solution value         %.6g %s\n", v0, ru);
                if (per_stage) {
                    fprintf(out, "per stage (one stage = one %s): sample mean [low, high], %.4g%% intervals, %s\n",
                            m.period_unit[0] ? m.period_unit : "period", 100 * conf, source);
                    fprintf(out, "%6s", "stage");
                    char h[2 * SL_NAME_MAX + 40];
                    for (int j = 0; j < acc.nf; j++) {
                        snprintf(h, sizeof(h), "%s [%s]", m.factor_name[acc.fac[j]], m.factor_unit[acc.fac[j]]);
                        fprintf(out, "  %-30s", h);
                    }
                    for (int q = 0; q < nq; q++) {
                        snprintf(h, sizeof(h), "%s [%s]", m.quantity_name[q], m.quantity_unit[q]);
                        fprintf(out, "  %-30s  %-22s", h, "P>0");
                    }
                    fprintf(out, "  discounted reward so far [%s]\n", ru);
                    for (int t = 0; t <= T; t++) {
                        const double *x = fig + 3 * (int64_t)t * acc.nstat;
                        fprintf(out, "%6d", t);
                        for (int j = 0; j < acc.nstat; j++) {
                            int last = j == acc.nstat - 1;
                            snprintf(h, sizeof(h), "%.5g [%.5g, %.5g]", x[3 * j], x[3 * j + 1], x[3 * j + 2]);
                            fprintf(out, "  %-*s", j >= acc.nf && !last && (j - acc.nf) % 2 ? 22 : 30, h);
                        }
                        fprintf(out, "\n");
                    }
                }
                fprintf(out, "Results support, never replace, licensed engineering judgement and local regulations.\n");
            }
            if (sf) {
                /* the per-stage table: the figures above, one row per stage, units in the header */
                fprintf(sf, "stage");
                for (int j = 0; j < acc.nf; j++)
                    stage_csv_head(sf, m.factor_name[acc.fac[j]], "", m.factor_unit[acc.fac[j]]);
                for (int q = 0; q < nq; q++) {
                    stage_csv_head(sf, m.quantity_name[q], "", m.quantity_unit[q]);
                    stage_csv_head(sf, m.quantity_name[q], "_p_positive", "");
                }
                stage_csv_head(sf, "discounted_reward", "", ru);
                fprintf(sf, "\n");
                for (int t = 0; t <= T; t++) {
                    const double *x = fig + 3 * (int64_t)t * acc.nstat;
                    fprintf(sf, "%d", t);
                    for (int j = 0; j < 3 * acc.nstat; j++) fprintf(sf, ",%.15g", x[j]);
                    fprintf(sf, "\n");
                }
            }
        }
        if (sf) {
            int bad = ferror(sf) != 0;
            bad |= fclose(sf) != 0;
            sf = NULL;
            if (bad && st == SL_OK) st = SL_ERR(ctx, SL_EIO, "%s: write failed", o->stages_csv);
        }
    }
    st = sl_agree(ctx, st);
    if (o->trajectories && of.tmp_path[0]) st = sl_outfile_end(ctx, &of, st);
    if (o->stages_csv && sof.tmp_path[0]) st = sl_outfile_end(ctx, &sof, st);
cleanup:
    if (tf) fclose(tf);
    if (sf) fclose(sf);
    if (of.tmp_path[0]) sl_outfile_end(ctx, &of, st != SL_OK ? st : SL_EINTERNAL);
    if (sof.tmp_path[0]) sl_outfile_end(ctx, &sof, st != SL_OK ? st : SL_EINTERNAL);
    free(v);
    free(a);
    free(qm);
    free(qp);
    free(buf);
    free(fig);
    free(start_states);
    free(start_p);
    free(acc.mean);
    free(acc.m2);
    free(acc.lo);
    free(acc.hi);
    sl_block_free(&b);
    sl_meta_free(&m);
    return st;
}
