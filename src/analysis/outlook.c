/* outlook.c - the exact forward distribution of the state under a policy,
 * mu_{t+1} = mu_t P_pi, summarised per stage: factor means and quantiles,
 * expected outcome quantities and their probability of being positive, and
 * the expected discounted reward so far. No sampling. */
#include <math.h>
#include <string.h>

#include "analysis/analysis.h"

static const double quantile_p[SL_OUTLOOK_NQ - 1] = {0.05, 0.25, 0.50, 0.75, 0.95};

void sl_outlook_free(sl_outlook *r)
{
    if (r == NULL) return;
    free(r->factor_name);
    free(r->factor_unit);
    free(r->quantity_name);
    free(r->quantity_unit);
    free(r->factor_stats);
    free(r->quantity_stats);
    free(r->discounted_reward);
    free(r->mass);
    memset(r, 0, sizeof(*r));
}

/* ---- propagation ------------------------------------------------------------ */

static int cmp_by_value(const void *a, const void *b, const double *x)
{
    double u = x[*(const int64_t *)a], v = x[*(const int64_t *)b];
    return u < v ? -1 : u > v;
}

/* insertion-free sort of indices by value (heap sort keeps it in C11) */
static void sort_by_value(int64_t *idx, int64_t n, const double *x)
{
    for (int64_t i = 1; i < n; i++) { /* factors are small or already sorted */
        int64_t t = idx[i], j = i - 1;
        while (j >= 0 && cmp_by_value(&idx[j], &t, x) > 0) {
            idx[j + 1] = idx[j];
            j--;
        }
        idx[j + 1] = t;
    }
}

sl_status sl_outlook_compute(sl_ctx *ctx, const sl_outlook_opts *o, sl_outlook *r)
{
    sl_status st = SL_OK;
    sl_pview pv;
    sl_meta mm;
    int64_t n_start = 0, *start_states = NULL, *order = NULL;
    double *start_p = NULL, *mu = NULL, *next = NULL, *buf = NULL;
    int *counts = NULL;
    int fac[SLUICE_MAX_FACTORS];
    int64_t off[SLUICE_MAX_FACTORS + 1];
    memset(r, 0, sizeof(*r));
    memset(&pv, 0, sizeof(pv));
    memset(&mm, 0, sizeof(mm));
    SL_TRY(sl_store_model_meta(ctx, o->model, &mm));
    const sl_meta *m = &mm;
    if (o->stages < 0 || o->stages > 100000000)
        st = SL_ERR(ctx, SL_EUSAGE, "--stages %lld is not in [0, 10^8]", (long long)o->stages);
    else if ((o->start == NULL) == (o->start_distribution == NULL))
        st = SL_ERR(ctx, SL_EUSAGE, "give exactly one of --start and --start-distribution");
    else if (o->start != NULL) {
        int64_t s0 = 0;
        st = sl_state_parse(ctx, m, o->start, "--start", &s0);
        if (st == SL_OK) {
            if (SL_ALLOC(ctx, start_states, 1, "start") == NULL || SL_ALLOC(ctx, start_p, 1, "start") == NULL)
                st = SL_ENOMEM;
            else {
                start_states[0] = s0;
                start_p[0] = 1.0;
                n_start = 1;
            }
        }
    } else if (ctx->rank == 0) {
        st = sl_start_csv_read(ctx, m, o->start_distribution, &n_start, &start_states, &start_p);
    }
    SL_TRY(sl_agree(ctx, st));
    if (o->start_distribution != NULL) {
        MPI_Bcast(&n_start, 1, MPI_INT64_T, 0, ctx->comm);
        if (n_start > INT32_MAX) st = SL_ERR(ctx, SL_EUSAGE, "%s: too many rows", o->start_distribution);
        else if (ctx->rank != 0 && (SL_ALLOC(ctx, start_states, n_start, "start") == NULL ||
                                    SL_ALLOC(ctx, start_p, n_start, "start") == NULL))
            st = SL_ENOMEM;
        SL_TRY(sl_agree(ctx, st));
        MPI_Bcast(start_states, (int)n_start, MPI_INT64_T, 0, ctx->comm);
        MPI_Bcast(start_p, (int)n_start, MPI_DOUBLE, 0, ctx->comm);
    }

    SL_TRY(sl_pview_load(ctx, o->model, o->solution, 1, 1, &pv));
    int64_t N = o->stages, nl = pv.n_local, n = m->n_states;
    int nq = pv.nq, nf = 0;
    off[0] = 0;
    for (int f = 0; f < m->n_factors; f++)
        if (m->factor_value[f]) {
            fac[nf] = f;
            off[nf + 1] = off[nf] + m->factor_size[f];
            nf++;
        }
    int64_t nb = off[nf] + 2 * nq + 2; /* factor pmfs, quantity sums, reward, mass */
    r->n_stages = N;
    r->n_factors = nf;
    r->n_quantities = nq;
    r->discount = m->discount;
    snprintf(r->reward_unit, SL_LABEL_MAX, "%.63s", m->reward_unit);
    snprintf(r->period_unit, SL_LABEL_MAX, "%.63s", m->period_unit);
    if (n > INT32_MAX * (int64_t)ctx->size) st = SL_ERR(ctx, SL_EUSAGE, "too many states per rank for an outlook");
    else if (SL_ZALLOC(ctx, r->factor_name, nf, "outlook") == NULL || SL_ZALLOC(ctx, r->factor_unit, nf, "outlook") == NULL ||
        SL_ZALLOC(ctx, r->quantity_name, nq, "outlook") == NULL || SL_ZALLOC(ctx, r->quantity_unit, nq, "outlook") == NULL ||
        SL_ALLOC(ctx, r->factor_stats, (N + 1) * nf * SL_OUTLOOK_NQ, "outlook") == NULL ||
        SL_ALLOC(ctx, r->quantity_stats, (N + 1) * nq * 2, "outlook") == NULL ||
        SL_ALLOC(ctx, r->discounted_reward, N + 1, "outlook") == NULL || SL_ALLOC(ctx, r->mass, N + 1, "outlook") == NULL ||
        SL_ZALLOC(ctx, mu, nl, "distribution") == NULL || SL_ZALLOC(ctx, next, n, "distribution") == NULL ||
        SL_ALLOC(ctx, buf, nb, "outlook") == NULL || SL_ALLOC(ctx, order, off[nf], "outlook") == NULL ||
        SL_ALLOC(ctx, counts, ctx->size, "outlook") == NULL)
        st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    for (int k = 0; k < nf; k++) {
        snprintf(r->factor_name[k], SL_LABEL_MAX, "%s", m->factor_name[fac[k]]);
        snprintf(r->factor_unit[k], SL_LABEL_MAX, "%s", m->factor_unit[fac[k]]);
        for (int64_t i = 0; i < m->factor_size[fac[k]]; i++) order[off[k] + i] = i;
        sort_by_value(order + off[k], m->factor_size[fac[k]], m->factor_value[fac[k]]);
    }
    for (int q = 0; q < nq; q++) {
        snprintf(r->quantity_name[q], SL_LABEL_MAX, "%s", m->quantity_name[q]);
        snprintf(r->quantity_unit[q], SL_LABEL_MAX, "%s", m->quantity_unit[q]);
    }
    for (int p = 0; p < ctx->size; p++) counts[p] = (int)(n * (p + 1) / ctx->size - n * p / ctx->size);
    double v0 = 0.0;
    for (int64_t k = 0; k < n_start; k++)
        if (start_states[k] >= pv.s_begin && start_states[k] < pv.s_end) {
            mu[start_states[k] - pv.s_begin] += start_p[k];
            v0 += start_p[k] * pv.value[start_states[k] - pv.s_begin];
        }
    MPI_Allreduce(MPI_IN_PLACE, &v0, 1, MPI_DOUBLE, MPI_SUM, ctx->comm);
    r->start_value = pv.is_rule ? NAN : v0; /* a rule CSV has no values */

    double disc = 1.0, acc = 0.0, t_start = MPI_Wtime();
    for (int64_t t = 0; t <= N; t++) {
        /* summaries of mu_t */
        memset(buf, 0, (size_t)nb * sizeof(*buf));
        double *qsum = buf + off[nf], *psum = qsum + nq;
        for (int64_t i = 0; i < nl; i++) {
            double w = mu[i];
            if (w == 0.0) continue;
            int64_t s = pv.s_begin + i;
            for (int k = 0; k < nf; k++) {
                int f = fac[k];
                buf[off[k] + (s / sl_factor_stride(m, f)) % m->factor_size[f]] += w;
            }
            for (int q = 0; q < nq; q++) {
                qsum[q] += w * pv.qmean[i * nq + q];
                psum[q] += w * pv.qpos[i * nq + q];
            }
            buf[nb - 2] += w * pv.reward[i];
            buf[nb - 1] += w;
        }
        if (MPI_Allreduce(MPI_IN_PLACE, buf, (int)nb, MPI_DOUBLE, MPI_SUM, ctx->comm) != MPI_SUCCESS)
            st = SL_ERR(ctx, SL_EINTERNAL, "MPI_Allreduce failed in the outlook");
        SL_TRY(sl_agree(ctx, st));
        double mass = buf[nb - 1];
        r->mass[t] = mass;
        r->discounted_reward[t] = acc;
        acc += disc * buf[nb - 2];
        disc *= m->discount;
        for (int k = 0; k < nf; k++) {
            const double *x = m->factor_value[fac[k]], *w = buf + off[k];
            double mean = 0.0, cum = 0.0, *out = r->factor_stats + (t * nf + k) * SL_OUTLOOK_NQ;
            int64_t sz = m->factor_size[fac[k]], j = 0;
            for (int64_t i = 0; i < sz; i++) mean += w[i] * x[i];
            out[0] = mean / mass;
            for (int qi = 0; qi < SL_OUTLOOK_NQ - 1; qi++) {
                double target = quantile_p[qi] * mass - 1e-12;
                while (j < sz - 1 && cum + w[order[off[k] + j]] < target) cum += w[order[off[k] + j++]];
                out[1 + qi] = x[order[off[k] + j]];
            }
        }
        for (int q = 0; q < nq; q++) {
            r->quantity_stats[(t * nq + q) * 2] = qsum[q] / mass;
            r->quantity_stats[(t * nq + q) * 2 + 1] = psum[q] / mass;
        }
        if (t == N) break;
        /* push mu_t along the policy rows: next = mu_t P_pi, summed over ranks
         * into each rank's slice */
        memset(next, 0, (size_t)n * sizeof(*next));
        for (int64_t i = 0; i < nl; i++) {
            double w = mu[i];
            if (w == 0.0) continue;
            for (int64_t e = pv.first_trans[i]; e < pv.first_trans[i + 1]; e++) next[pv.target[e]] += w * pv.prob[e];
        }
        if (MPI_Reduce_scatter(next, mu, counts, MPI_DOUBLE, MPI_SUM, ctx->comm) != MPI_SUCCESS)
            st = SL_ERR(ctx, SL_EINTERNAL, "MPI_Reduce_scatter failed in the outlook");
        SL_TRY(sl_agree(ctx, st));
    }
    r->seconds = MPI_Wtime() - t_start;
cleanup:
    free(start_states);
    free(start_p);
    free(mu);
    free(next);
    free(buf);
    free(order);
    free(counts);
    sl_pview_free(&pv);
    sl_meta_free(&mm);
    if (st != SL_OK) sl_outlook_free(r);
    return st;
}
