/* simulate.c - Monte Carlo rollouts of a policy from one start state. */
#include <errno.h>
#include <math.h>
#include <string.h>

#include "store/store.h"

/* Whole model + solution on rank 0 (others hold nothing). Collective. */
static sl_status load_on_root(sl_ctx *ctx, const char *model, const char *solution, sl_meta *m, sl_block *b,
                              double **value, int32_t **actions, sl_solution_record *info, int need_rows)
{
    sl_status st = SL_OK;
    *value = NULL;
    *actions = NULL;
    memset(b, 0, sizeof(*b));
    SL_TRY(sl_store_model_meta(ctx, model, m));
    int64_t n = ctx->rank == 0 ? m->n_states : 0;
    if (SL_ALLOC(ctx, *value, n, "values") == NULL || SL_ALLOC(ctx, *actions, n, "policy") == NULL) st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    SL_TRY(sl_store_solution_read(ctx, solution, SL_FILE_SOLUTION, m->n_states, 0, n, *value, *actions, info));
    if (strcmp(info->model_fingerprint, m->fingerprint) != 0)
        SL_TRY(sl_agree(ctx, SL_ERR(ctx, SL_EDATA,
                                    "%s was computed for a different model (fingerprint %s) than %s (fingerprint %s)",
                                    solution, info->model_fingerprint, model, m->fingerprint)));
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

sl_status sl_simulate(sl_ctx *ctx, const sl_simulate_opts *o)
{
    sl_status st = SL_OK;
    sl_meta m;
    sl_block b;
    double *v = NULL;
    int32_t *a = NULL;
    sl_solution_record info;
    memset(&m, 0, sizeof(m));
    memset(&b, 0, sizeof(b));
    SL_TRY(load_on_root(ctx, o->model, o->solution, &m, &b, &v, &a, &info, 1));
    if (o->start < 0 || o->start >= m.n_states)
        SL_TRY(sl_agree(ctx, SL_ERR(ctx, SL_EUSAGE, "--start %lld is not a state of %s (0..%lld)", (long long)o->start,
                                    o->model, (long long)m.n_states - 1)));
    if (ctx->rank == 0) {
        double g = m.discount;
        int64_t H = o->horizon > 0 ? o->horizon : (g > 0 ? (int64_t)ceil(log(1e-6) / log(g)) : 1);
        rng R;
        uint64_t z = o->seed;
        for (int i = 0; i < 4; i++) R.s[i] = sl_mix64(z += 0x9e3779b97f4a7c15ULL);
        double sum = 0, sum2 = 0;
        for (int64_t e = 0; e < o->episodes && st == SL_OK; e++) {
            int64_t s = o->start;
            double ret = 0, disc = 1;
            for (int64_t t = 0; t < H; t++) {
                int64_t p0 = b.first_pair[s], p1 = b.first_pair[s + 1], k = -1;
                for (int64_t q = p0; q < p1; q++)
                    if (b.action[q] == a[s]) k = q;
                if (k < 0) {
                    st = SL_ERR(ctx, SL_EDATA, "%s: state %lld: policy action %d not in the model", o->solution,
                                (long long)s, (int)a[s]);
                    break;
                }
                ret += disc * b.reward[k];
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
        if (st == SL_OK) {
            double ne = (double)o->episodes, mean = sum / ne;
            double var = ne > 1 ? (sum2 - ne * mean * mean) / (ne - 1) : 0, se = sqrt(var > 0 ? var / ne : 0);
            /* truncation: rewards beyond the horizon are worth at most g^H max|r|/(1-g) */
            double rmax = 0;
            for (int64_t k = 0; k < m.n_pairs; k++) rmax = fmax(rmax, fabs(b.reward[k]));
            double trunc = g < 1 ? pow(g, (double)H) * rmax / (1 - g) : 0;
            FILE *out = o->out ? o->out : stdout;
            if (o->json)
                fprintf(out, "{\n  \"start\": %lld,\n  \"episodes\": %lld,\n  \"horizon\": %lld,\n  \"seed\": %llu,\n"
                             "  \"mean_return\": %.17g,\n  \"standard_error\": %.17g,\n  \"truncation_bound\": %.17g,\n"
                             "  \"solution_value\": %.17g\n}\n",
                        (long long)o->start, (long long)o->episodes, (long long)H, (unsigned long long)o->seed, mean, se,
                        trunc, v[o->start]);
            else
                fprintf(out, "simulate %lld episodes of %lld steps from state %lld (seed %llu)\n"
                             "  mean discounted return %.6g +- %.3g (95%% interval, normal approximation)\n"
                             "  horizon truncation     at most %.3g\n  solution value         %.6g\n",
                        (long long)o->episodes, (long long)H, (long long)o->start, (unsigned long long)o->seed, mean,
                        1.96 * se, trunc, v[o->start]);
        }
    }
    st = sl_agree(ctx, st);
cleanup:
    free(v);
    free(a);
    sl_block_free(&b);
    sl_meta_free(&m);
    return st;
}
