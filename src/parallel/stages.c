/* stages.c - stage-interleaved layout: internal renumbering of a model with
 * a stage factor so that every rank holds a share of every stage, the rows
 * moved into that order, the per-stage halo exchange and the moves of
 * vectors between the internal and the model's layout. See layout.h. */
#include <string.h>

#include "parallel/layout.h"

void sl_stage_map_free(sl_stage_map *m)
{
    if (m == NULL) return;
    free(m->ub);
    memset(m, 0, sizeof(*m));
}

int64_t sl_stage_internal(const sl_stage_map *m, int64_t s)
{
    if (!m->active) return s;
    int64_t L = m->inner, S = m->n_stages;
    int64_t l = s % L, st = (s / L) % S, h = s / (L * S), u = l + L * h;
    int r = sl_dist_owner(m->ub, m->nparts, u);
    int64_t a = m->ub[r], w = m->ub[r + 1] - a;
    return S * a + st * w + (u - a);
}

int64_t sl_stage_file(const sl_stage_map *m, int64_t i)
{
    if (!m->active) return i;
    int64_t L = m->inner, S = m->n_stages;
    /* owner of internal id i: the r with S*ub[r] <= i < S*ub[r+1] */
    int lo = 0, hi = m->nparts - 1;
    while (lo < hi) {
        int mid = (lo + hi + 1) / 2;
        if (S * m->ub[mid] <= i) lo = mid;
        else hi = mid - 1;
    }
    int64_t a = m->ub[lo], w = m->ub[lo + 1] - a, off = i - S * a;
    int64_t st = off / w, u = a + off % w;
    return u % L + L * (st + S * (u / L));
}

/* Fill L, S, H; inactive (m->active = 0) without a stage factor. */
static sl_status map_shape(sl_ctx *ctx, const sl_meta *meta, int nparts, sl_stage_map *m)
{
    memset(m, 0, sizeof(*m));
    m->nparts = nparts;
    int f = sl_meta_stage_factor(meta);
    if (f < 0) return SL_OK;
    int64_t L = 1, H = 1;
    for (int g = 0; g < meta->n_factors; g++) {
        if (g < f) L *= meta->factor_size[g];
        if (g > f) H *= meta->factor_size[g];
    }
    int64_t S = meta->factor_size[f];
    /* a factor table that does not describe the states gives no layout */
    if (L <= 0 || S <= 0 || H <= 0 || L * S * H != meta->n_states) return SL_OK;
    if (SL_ALLOC(ctx, m->ub, nparts + 1, "stage layout") == NULL) return SL_ENOMEM;
    m->active = 1;
    m->inner = L;
    m->n_stages = S;
    m->outer = H;
    return SL_OK;
}

sl_status sl_stage_map_local(sl_ctx *ctx, const sl_meta *meta, const int64_t *cum, int nparts, sl_stage_map *m)
{
    sl_status st = map_shape(ctx, meta, nparts, m);
    if (st != SL_OK || !m->active) return st;
    int64_t L = m->inner, S = m->n_stages, nu = L * m->outer;
    int64_t *cu = NULL;
    if (SL_ZALLOC(ctx, cu, nu + 1, "stage layout") == NULL) {
        sl_stage_map_free(m);
        return SL_ENOMEM;
    }
    for (int64_t s = 0; s < meta->n_states; s++) cu[1 + s % L + L * (s / (L * S))] += cum[s + 1] - cum[s];
    for (int64_t u = 0; u < nu; u++) cu[u + 1] += cu[u];
    sl_partition_split(cu, nu, nparts, m->ub);
    free(cu);
    return SL_OK;
}

/* The map for ctx->size parts from this rank's share of the per-state
 * transition counts: count(i) for the states s_begin + i, i < n, which
 * every rank gives for its own contiguous file range. Collective. */
static sl_status map_from_counts(sl_ctx *ctx, const sl_meta *meta, int64_t s_begin, int64_t n,
                                 int64_t (*count)(const void *, int64_t), const void *arg, sl_stage_map *m)
{
    sl_status st = map_shape(ctx, meta, ctx->size, m);
    st = sl_agree(ctx, st);
    if (st != SL_OK || !m->active) return st;
    int64_t L = m->inner, S = m->n_stages, nu = L * m->outer;
    int64_t *cu = NULL;
    if (SL_ZALLOC(ctx, cu, nu + 1, "stage layout") == NULL) st = SL_ENOMEM;
    st = sl_agree(ctx, st);
    if (st == SL_OK) {
        for (int64_t i = 0; i < n; i++) {
            int64_t s = s_begin + i;
            cu[1 + s % L + L * (s / (L * S))] += count(arg, i);
        }
        /* in pieces: MPI counts are int */
        for (int64_t off = 1; off <= nu; off += 1 << 28) {
            int64_t c = nu + 1 - off < (1 << 28) ? nu + 1 - off : (1 << 28);
            MPI_Allreduce(MPI_IN_PLACE, cu + off, (int)c, MPI_INT64_T, MPI_SUM, ctx->comm);
        }
        for (int64_t u = 0; u < nu; u++) cu[u + 1] += cu[u];
        sl_partition_split(cu, nu, ctx->size, m->ub);
    }
    free(cu);
    if (st != SL_OK) sl_stage_map_free(m);
    return st;
}

static int64_t rows_count(const void *arg, int64_t i)
{
    const sl_block *rows = arg;
    int64_t p0 = rows->first_pair[i] - rows->p_begin, p1 = rows->first_pair[i + 1] - rows->p_begin;
    return rows->first_trans[p1] - rows->first_trans[p0];
}

static int64_t cum_count(const void *arg, int64_t i)
{
    const int64_t *cum = arg;
    return cum[i + 1] - cum[i];
}

sl_status sl_stage_map_rows(sl_ctx *ctx, const sl_meta *meta, const sl_block *rows, sl_stage_map *m)
{
    return map_from_counts(ctx, meta, rows->s_begin, sl_block_states(rows), rows_count, rows, m);
}

sl_status sl_stage_map_counts(sl_ctx *ctx, const sl_meta *meta, int64_t s_begin, int64_t n, const int64_t *cum,
                              sl_stage_map *m)
{
    return map_from_counts(ctx, meta, s_begin, n, cum_count, cum, m);
}

sl_status sl_stage_map_copy(sl_ctx *ctx, const sl_stage_map *src, sl_stage_map *dst)
{
    *dst = *src;
    dst->ub = NULL;
    if (!src->active) return SL_OK;
    if (SL_ALLOC(ctx, dst->ub, src->nparts + 1, "stage layout") == NULL) {
        memset(dst, 0, sizeof(*dst));
        return SL_ENOMEM;
    }
    memcpy(dst->ub, src->ub, (size_t)(src->nparts + 1) * sizeof(int64_t));
    return SL_OK;
}

static void add_run(int64_t *runs, int64_t *n, int64_t b, int64_t e)
{
    if (e <= b) return;
    if (*n > 0 && runs[2 * *n - 1] == b) {
        runs[2 * *n - 1] = e;
        return;
    }
    runs[2 * *n] = b;
    runs[2 * *n + 1] = e;
    (*n)++;
}

sl_status sl_stage_runs(sl_ctx *ctx, const sl_stage_map *m, int r, int64_t **runs_out, int64_t *n_runs)
{
    int64_t L = m->inner, S = m->n_stages, a = m->ub[r], b = m->ub[r + 1];
    int64_t *runs = NULL, n = 0;
    /* at most: a partial h at each end (S runs each) and one merged middle */
    if (SL_ALLOC(ctx, runs, 2 * (2 * S + 1), "stage runs") == NULL) return SL_ENOMEM;
    for (int64_t h = a / L; a < b && h * L < b; h++) {
        int64_t l0 = a - h * L > 0 ? a - h * L : 0, l1 = b - h * L < L ? b - h * L : L;
        if (l0 == 0 && l1 == L) {
            add_run(runs, &n, L * S * h, L * S * (h + 1));
        } else {
            for (int64_t st = 0; st < S; st++)
                add_run(runs, &n, l0 + L * (st + S * h), l1 + L * (st + S * h));
        }
    }
    *runs_out = runs;
    *n_runs = n;
    return SL_OK;
}

int64_t sl_stage_runs_bound(const sl_stage_map *m, int r)
{
    int64_t L = m->inner, a = m->ub[r], b = m->ub[r + 1];
    return a < b ? m->n_stages * ((b - 1) / L - a / L + 1) : 0;
}

sl_status sl_stage_runs_internal(sl_ctx *ctx, const sl_stage_map *m, int r, int64_t **runs_out, int64_t *n_runs)
{
    int64_t L = m->inner, S = m->n_stages, a = m->ub[r], b = m->ub[r + 1], *runs = NULL, n = 0;
    if (SL_ALLOC(ctx, runs, 2 * (sl_stage_runs_bound(m, r) + 1), "stage runs") == NULL) return SL_ENOMEM;
    /* stage by stage, and in a stage by u = l + L*h from a to b: the
     * internal order. Runs that touch in the file are merged; they also
     * follow each other internally, as every run does in this order. */
    for (int64_t st = 0; st < S && a < b; st++)
        for (int64_t h = a / L; h * L < b; h++) {
            int64_t l0 = a - h * L > 0 ? a - h * L : 0, l1 = b - h * L < L ? b - h * L : L;
            add_run(runs, &n, l0 + L * (st + S * h), l1 + L * (st + S * h));
        }
    *runs_out = runs;
    *n_runs = n;
    return SL_OK;
}

void sl_stage_block_frame(sl_ctx *ctx, const sl_stage_map *m, int64_t np, int64_t nt, sl_block *out)
{
    int64_t S = m->n_stages, a = m->ub[ctx->rank], ns = S * (m->ub[ctx->rank + 1] - a);
    int64_t p_begin = sl_exscan_i64(ctx, np), t_begin = sl_exscan_i64(ctx, nt);
    out->s_begin = S * a;
    out->s_end = S * a + ns;
    out->p_begin = p_begin;
    out->p_end = p_begin + np;
    out->t_begin = t_begin;
    out->t_end = t_begin + nt;
    out->first_pair[0] = p_begin;
    out->first_trans[0] = t_begin;
}

static int fits_int(int64_t v) { return v >= 0 && v <= INT32_MAX; }

sl_status sl_stage_redistribute(sl_ctx *ctx, const sl_block *src, const int64_t *src_bounds, const sl_stage_map *m,
                                sl_block *release, sl_block *out)
{
    sl_status st = SL_OK;
    int P = ctx->size, r = ctx->rank;
    int64_t S = m->n_stages, a = m->ub[r], w = m->ub[r + 1] - a, ns = S * w;
    int *qc = NULL, *qd = NULL, *ac = NULL, *ad = NULL, *pc = NULL, *pd = NULL, *rpc = NULL, *rpd = NULL;
    int *tc = NULL, *td = NULL, *rtc = NULL, *rtd = NULL;
    int64_t *req = NULL, *reqpos = NULL, *asked = NULL, *cur = NULL;
    int64_t *snp = NULL, *rnp = NULL, *sntr = NULL, *rntr = NULL, *stg = NULL, *rtg = NULL;
    int32_t *sact = NULL, *ract = NULL;
    double *srew = NULL, *rrew = NULL;
    int64_t *poff = NULL, *toff = NULL;
    memset(out, 0, sizeof(*out));
    if (SL_ZALLOC(ctx, qc, P, "redistribution") == NULL || SL_ZALLOC(ctx, qd, P, "redistribution") == NULL ||
        SL_ZALLOC(ctx, ac, P, "redistribution") == NULL || SL_ZALLOC(ctx, ad, P, "redistribution") == NULL ||
        SL_ZALLOC(ctx, pc, P, "redistribution") == NULL || SL_ZALLOC(ctx, pd, P, "redistribution") == NULL ||
        SL_ZALLOC(ctx, rpc, P, "redistribution") == NULL || SL_ZALLOC(ctx, rpd, P, "redistribution") == NULL ||
        SL_ZALLOC(ctx, tc, P, "redistribution") == NULL || SL_ZALLOC(ctx, td, P, "redistribution") == NULL ||
        SL_ZALLOC(ctx, rtc, P, "redistribution") == NULL || SL_ZALLOC(ctx, rtd, P, "redistribution") == NULL ||
        SL_ZALLOC(ctx, cur, P, "redistribution") == NULL || SL_ALLOC(ctx, req, ns, "redistribution") == NULL ||
        SL_ALLOC(ctx, reqpos, ns, "redistribution") == NULL)
        st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    /* 1. the file ids of this rank's internal states, grouped by the rank
     * that holds their rows now */
    for (int64_t j = 0; j < ns; j++) qc[sl_dist_owner(src_bounds, P, sl_stage_file(m, S * a + j))]++;
    for (int q = 1; q < P; q++) qd[q] = qd[q - 1] + qc[q - 1];
    for (int q = 0; q < P; q++) cur[q] = qd[q];
    for (int64_t j = 0; j < ns; j++) {
        int64_t f = sl_stage_file(m, S * a + j);
        int64_t k = cur[sl_dist_owner(src_bounds, P, f)]++;
        req[k] = f;
        reqpos[j] = k;
    }
    MPI_Alltoall(qc, 1, MPI_INT, ac, 1, MPI_INT, ctx->comm);
    int64_t na = 0;
    for (int q = 0; q < P; q++) {
        ad[q] = (int)na;
        na += ac[q];
    }
    if (!fits_int(na)) st = SL_ERR(ctx, SL_EDATA, "rank %d: too many states to redistribute", r);
    if (st == SL_OK && SL_ALLOC(ctx, asked, na, "redistribution") == NULL) st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    MPI_Alltoallv(req, qc, qd, MPI_INT64_T, asked, ac, ad, MPI_INT64_T, ctx->comm);
    /* 2. answer in the order asked: pairs per state, then the pairs, then
     * the transitions with targets renumbered */
    int64_t sp = 0, stt = 0;
    for (int q = 0; q < P; q++) {
        int64_t cp = 0, ct = 0;
        for (int64_t k = ad[q]; k < ad[q] + ac[q]; k++) {
            int64_t i = asked[k] - src->s_begin;
            if (i < 0 || i >= sl_block_states(src)) {
                st = SL_ERR(ctx, SL_EINTERNAL, "redistribution: state %lld is not held here", (long long)asked[k]);
                break;
            }
            int64_t p0 = src->first_pair[i] - src->p_begin, p1 = src->first_pair[i + 1] - src->p_begin;
            cp += p1 - p0;
            ct += src->first_trans[p1] - src->first_trans[p0];
        }
        if (!fits_int(cp) || !fits_int(ct) || !fits_int(sp + cp) || !fits_int(stt + ct))
            st = SL_ERR(ctx, SL_EDATA, "rank %d: too many rows to redistribute (use more ranks)", r);
        pc[q] = (int)cp;
        tc[q] = (int)ct;
        pd[q] = (int)sp;
        td[q] = (int)stt;
        sp += cp;
        stt += ct;
    }
    /* the pair records go first; then the transitions' two arrays one at a
     * time (pack, let the source array go if allowed, exchange, put in
     * order), so about 1.5 copies of the transitions are held at the peak
     * instead of 2 */
    if (st == SL_OK &&
        (SL_ALLOC(ctx, snp, na, "redistribution") == NULL || SL_ALLOC(ctx, sact, sp, "redistribution") == NULL ||
         SL_ALLOC(ctx, srew, sp, "redistribution") == NULL || SL_ALLOC(ctx, sntr, sp, "redistribution") == NULL))
        st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    for (int64_t k = 0, kp = 0; k < na; k++) {
        int64_t i = asked[k] - src->s_begin;
        int64_t p0 = src->first_pair[i] - src->p_begin, p1 = src->first_pair[i + 1] - src->p_begin;
        snp[k] = p1 - p0;
        for (int64_t q = p0; q < p1; q++, kp++) {
            sact[kp] = src->action[q];
            srew[kp] = src->reward[q];
            sntr[kp] = src->first_trans[q + 1] - src->first_trans[q];
        }
    }
    MPI_Alltoall(pc, 1, MPI_INT, rpc, 1, MPI_INT, ctx->comm);
    MPI_Alltoall(tc, 1, MPI_INT, rtc, 1, MPI_INT, ctx->comm);
    int64_t np = 0, nt = 0;
    for (int q = 0; q < P; q++) {
        rpd[q] = (int)np;
        rtd[q] = (int)nt;
        np += rpc[q];
        nt += rtc[q];
        if (!fits_int(np) || !fits_int(nt)) st = SL_ERR(ctx, SL_EDATA, "rank %d: too many rows to receive", r);
    }
    if (st == SL_OK &&
        (SL_ALLOC(ctx, rnp, ns, "redistribution") == NULL || SL_ALLOC(ctx, ract, np, "redistribution") == NULL ||
         SL_ALLOC(ctx, rrew, np, "redistribution") == NULL || SL_ALLOC(ctx, rntr, np, "redistribution") == NULL))
        st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    MPI_Alltoallv(snp, ac, ad, MPI_INT64_T, rnp, qc, qd, MPI_INT64_T, ctx->comm);
    MPI_Alltoallv(sact, pc, pd, MPI_INT32_T, ract, rpc, rpd, MPI_INT32_T, ctx->comm);
    MPI_Alltoallv(srew, pc, pd, MPI_DOUBLE, rrew, rpc, rpd, MPI_DOUBLE, ctx->comm);
    MPI_Alltoallv(sntr, pc, pd, MPI_INT64_T, rntr, rpc, rpd, MPI_INT64_T, ctx->comm);
    free(snp), free(sact), free(srew), free(sntr);
    snp = sntr = NULL;
    sact = NULL;
    srew = NULL;
    /* 3. received records are in request order; put them in internal order */
    if (SL_ALLOC(ctx, poff, ns + 1, "redistribution") == NULL || SL_ALLOC(ctx, toff, np + 1, "redistribution") == NULL ||
        SL_ALLOC(ctx, out->first_pair, ns + 1, "first_pair") == NULL ||
        SL_ALLOC(ctx, out->first_trans, np + 1, "first_transition") == NULL ||
        SL_ALLOC(ctx, out->action, np, "actions") == NULL || SL_ALLOC(ctx, out->reward, np, "rewards") == NULL)
        st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    poff[0] = 0;
    for (int64_t k = 0; k < ns; k++) poff[k + 1] = poff[k] + rnp[k];
    toff[0] = 0;
    for (int64_t q = 0; q < np; q++) toff[q + 1] = toff[q] + rntr[q];
    sl_stage_block_frame(ctx, m, np, nt, out);
    int64_t p_begin = out->p_begin, t_begin = out->t_begin;
    for (int64_t j = 0, pp = 0, tt = 0; j < ns; j++) {
        int64_t k = reqpos[j];
        for (int64_t q = poff[k]; q < poff[k + 1]; q++, pp++) {
            out->action[pp] = ract[q];
            out->reward[pp] = rrew[q];
            tt += toff[q + 1] - toff[q];
            out->first_trans[pp + 1] = t_begin + tt;
        }
        out->first_pair[j + 1] = p_begin + pp;
    }
    /* the transitions: pass 0 the targets (as internal ids), pass 1 the
     * probabilities; both are 8-byte values moved as bytes */
    MPI_Datatype t8;
    MPI_Type_contiguous(8, MPI_BYTE, &t8);
    MPI_Type_commit(&t8);
    for (int pass = 0; pass < 2 && st == SL_OK; pass++) {
        if (SL_ALLOC(ctx, stg, stt, "redistribution") == NULL) st = SL_ENOMEM;
        st = sl_agree(ctx, st);
        if (st != SL_OK) break;
        unsigned char *sb = (unsigned char *)stg;
        for (int64_t k = 0, kt = 0; k < na; k++) {
            int64_t i = asked[k] - src->s_begin;
            int64_t p0 = src->first_pair[i] - src->p_begin, p1 = src->first_pair[i + 1] - src->p_begin;
            int64_t t0 = src->first_trans[p0] - src->t_begin, t1 = src->first_trans[p1] - src->t_begin;
            if (pass == 0) {
                for (int64_t t = t0; t < t1; t++, kt++) {
                    int64_t v = sl_stage_internal(m, src->target[t]);
                    memcpy(sb + 8 * kt, &v, 8);
                }
            } else {
                memcpy(sb + 8 * kt, src->prob + t0, (size_t)(t1 - t0) * 8);
                kt += t1 - t0;
            }
        }
        /* packed: the source array may go */
        if (release != NULL && pass == 0) {
            free(release->target);
            release->target = NULL;
        } else if (release != NULL) {
            free(release->prob);
            release->prob = NULL;
        }
        if (SL_ALLOC(ctx, rtg, nt, "redistribution") == NULL) st = SL_ENOMEM;
        st = sl_agree(ctx, st);
        if (st != SL_OK) break;
        MPI_Alltoallv(stg, tc, td, t8, rtg, rtc, rtd, t8, ctx->comm);
        free(stg);
        stg = NULL;
        if (pass == 0 && SL_ALLOC(ctx, out->target, nt, "targets") == NULL) st = SL_ENOMEM;
        if (pass == 1 && SL_ALLOC(ctx, out->prob, nt, "probabilities") == NULL) st = SL_ENOMEM;
        st = sl_agree(ctx, st);
        if (st != SL_OK) break;
        unsigned char *ob = pass == 0 ? (unsigned char *)out->target : (unsigned char *)out->prob;
        const unsigned char *rb = (const unsigned char *)rtg;
        for (int64_t j = 0, tt = 0; j < ns; j++) {
            int64_t k = reqpos[j];
            for (int64_t q = poff[k]; q < poff[k + 1]; q++) {
                int64_t n_t = toff[q + 1] - toff[q];
                memcpy(ob + 8 * tt, rb + 8 * toff[q], (size_t)n_t * 8);
                tt += n_t;
            }
        }
        free(rtg);
        rtg = NULL;
    }
    MPI_Type_free(&t8);
    /* the source rows are moved: the caller may let the rest go now */
    if (st == SL_OK && release != NULL) sl_block_free(release);
cleanup:
    free(qc), free(qd), free(ac), free(ad), free(pc), free(pd), free(rpc), free(rpd);
    free(tc), free(td), free(rtc), free(rtd), free(cur), free(req), free(reqpos), free(asked);
    free(snp), free(rnp), free(sntr), free(rntr), free(stg), free(rtg), free(sact), free(ract);
    free(srew), free(rrew), free(poff), free(toff);
    if (st != SL_OK) sl_block_free(out);
    return st;
}

/* ---- per-stage halo exchange ------------------------------------------------ */

sl_status sl_halo_stage_plan(sl_ctx *ctx, const sl_stage_map *m, sl_halo *h)
{
    int64_t S = m->n_stages, S1 = S + 1;
    int me = ctx->rank;
    if (SL_ZALLOC(ctx, h->recv_st_off, (int64_t)h->n_recv * S1, "stage halo") == NULL ||
        SL_ZALLOC(ctx, h->send_st_off, (int64_t)h->n_send * S1, "stage halo") == NULL)
        return SL_ENOMEM;
    h->n_stages = S;
    for (int i = 0; i < h->n_recv; i++) {
        int q = h->recv_rank[i];
        int64_t a = S * m->ub[q], w = m->ub[q + 1] - m->ub[q], *o = h->recv_st_off + (int64_t)i * S1;
        for (int64_t k = h->recv_off[i]; k < h->recv_off[i + 1]; k++) o[(h->halo_global[k] - a) / w + 1]++;
        for (int64_t s = 0; s < S; s++) o[s + 1] += o[s];
    }
    int64_t wme = m->ub[me + 1] - m->ub[me];
    for (int i = 0; i < h->n_send; i++) {
        int64_t *o = h->send_st_off + (int64_t)i * S1, prev = -1;
        for (int64_t k = h->send_off[i]; k < h->send_off[i + 1]; k++) {
            int64_t s = h->send_idx[k] / wme;
            if (s < prev) return SL_ERR(ctx, SL_EINTERNAL, "stage halo plan: send list not in stage order");
            prev = s;
            o[s + 1]++;
        }
        for (int64_t s = 0; s < S; s++) o[s + 1] += o[s];
    }
    return SL_OK;
}

sl_status sl_halo_exchange_stage(sl_ctx *ctx, const sl_halo *h, double *x, int64_t st)
{
    int nreq = 0;
    int64_t S1 = h->n_stages + 1;
    for (int i = 0; i < h->n_recv; i++) {
        const int64_t *o = h->recv_st_off + (int64_t)i * S1;
        int64_t off = h->recv_off[i] + o[st], n = o[st + 1] - o[st];
        if (n > 0)
            MPI_Irecv(x + h->n_local + off, (int)n, MPI_DOUBLE, h->recv_rank[i], 18, ctx->comm, &h->reqs[nreq++]);
    }
    for (int i = 0; i < h->n_send; i++) {
        const int64_t *o = h->send_st_off + (int64_t)i * S1;
        int64_t off = h->send_off[i] + o[st], n = o[st + 1] - o[st];
        if (n <= 0) continue;
        for (int64_t k = off; k < off + n; k++) h->send_buf[k] = x[h->send_idx[k]];
        MPI_Isend(h->send_buf + off, (int)n, MPI_DOUBLE, h->send_rank[i], 18, ctx->comm, &h->reqs[nreq++]);
    }
    if (nreq > 0 && MPI_Waitall(nreq, h->reqs, MPI_STATUSES_IGNORE) != MPI_SUCCESS)
        return SL_ERR(ctx, SL_EINTERNAL, "stage halo exchange failed");
    return SL_OK;
}

/* ---- file-order I/O --------------------------------------------------------- */

void sl_io_plan_free(sl_io_plan *io)
{
    if (io == NULL) return;
    free(io->scnt);
    free(io->sdsp);
    free(io->rcnt);
    free(io->rdsp);
    free(io->spos);
    free(io->rpos);
    memset(io, 0, sizeof(*io));
}

sl_status sl_io_plan_build(sl_ctx *ctx, const sl_stage_map *m, const int64_t *bounds, const int64_t *fbounds,
                           sl_io_plan *io)
{
    sl_status st = SL_OK;
    int P = ctx->size, r = ctx->rank;
    int64_t *ids = NULL, *rids = NULL, *cur = NULL;
    memset(io, 0, sizeof(*io));
    io->n_local = bounds[r + 1] - bounds[r];
    io->f_begin = fbounds[r];
    io->f_n = fbounds[r + 1] - fbounds[r];
    if (SL_ZALLOC(ctx, io->scnt, P, "io plan") == NULL || SL_ZALLOC(ctx, io->sdsp, P, "io plan") == NULL ||
        SL_ZALLOC(ctx, io->rcnt, P, "io plan") == NULL || SL_ZALLOC(ctx, io->rdsp, P, "io plan") == NULL ||
        SL_ALLOC(ctx, io->spos, io->n_local, "io plan") == NULL || SL_ALLOC(ctx, io->rpos, io->f_n, "io plan") == NULL ||
        SL_ALLOC(ctx, ids, io->n_local, "io plan") == NULL || SL_ALLOC(ctx, rids, io->f_n, "io plan") == NULL ||
        SL_ZALLOC(ctx, cur, P, "io plan") == NULL)
        st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    for (int64_t i = 0; i < io->n_local; i++) io->scnt[sl_dist_owner(fbounds, P, sl_stage_file(m, bounds[r] + i))]++;
    for (int p = 1; p < P; p++) io->sdsp[p] = io->sdsp[p - 1] + io->scnt[p - 1];
    for (int p = 0; p < P; p++) cur[p] = io->sdsp[p];
    for (int64_t i = 0; i < io->n_local; i++) {
        int64_t s = sl_stage_file(m, bounds[r] + i);
        int64_t k = cur[sl_dist_owner(fbounds, P, s)]++;
        io->spos[k] = i;
        ids[k] = s;
    }
    MPI_Alltoall(io->scnt, 1, MPI_INT, io->rcnt, 1, MPI_INT, ctx->comm);
    int64_t tot = 0;
    for (int p = 0; p < P; p++) {
        io->rdsp[p] = (int)tot;
        tot += io->rcnt[p];
    }
    if (tot != io->f_n) st = SL_ERR(ctx, SL_EINTERNAL, "io plan: %lld states arrive for a slice of %lld", (long long)tot,
                                    (long long)io->f_n);
    SL_TRY(sl_agree(ctx, st));
    MPI_Alltoallv(ids, io->scnt, io->sdsp, MPI_INT64_T, rids, io->rcnt, io->rdsp, MPI_INT64_T, ctx->comm);
    for (int64_t k = 0; k < io->f_n; k++) {
        io->rpos[k] = rids[k] - io->f_begin;
        if (io->rpos[k] < 0 || io->rpos[k] >= io->f_n) {
            st = SL_ERR(ctx, SL_EINTERNAL, "io plan: state %lld outside this rank's slice", (long long)rids[k]);
            break;
        }
    }
    st = sl_agree(ctx, st);
cleanup:
    free(ids);
    free(rids);
    free(cur);
    if (st != SL_OK) sl_io_plan_free(io);
    return st;
}

static sl_status io_move(sl_ctx *ctx, const sl_io_plan *io, const void *in, size_t elem, void *out, int to_file)
{
    sl_status st = SL_OK;
    char *a = NULL, *b = NULL;
    int64_t na = to_file ? io->n_local : io->f_n, nb = to_file ? io->f_n : io->n_local;
    const int64_t *pa = to_file ? io->spos : io->rpos, *pb = to_file ? io->rpos : io->spos;
    MPI_Datatype t;
    if (SL_ALLOC(ctx, a, (size_t)na * elem, "redistribution") == NULL ||
        SL_ALLOC(ctx, b, (size_t)nb * elem, "redistribution") == NULL)
        st = SL_ENOMEM;
    st = sl_agree(ctx, st);
    if (st == SL_OK) {
        for (int64_t k = 0; k < na; k++) memcpy(a + (size_t)k * elem, (const char *)in + (size_t)pa[k] * elem, elem);
        MPI_Type_contiguous((int)elem, MPI_BYTE, &t);
        MPI_Type_commit(&t);
        if (to_file)
            MPI_Alltoallv(a, io->scnt, io->sdsp, t, b, io->rcnt, io->rdsp, t, ctx->comm);
        else
            MPI_Alltoallv(a, io->rcnt, io->rdsp, t, b, io->scnt, io->sdsp, t, ctx->comm);
        MPI_Type_free(&t);
        for (int64_t k = 0; k < nb; k++) memcpy((char *)out + (size_t)pb[k] * elem, b + (size_t)k * elem, elem);
    }
    free(a);
    free(b);
    return st;
}

sl_status sl_io_to_file(sl_ctx *ctx, const sl_io_plan *io, const void *owned, size_t elem, void *slice)
{
    return io_move(ctx, io, owned, elem, slice, 1);
}

sl_status sl_io_from_file(sl_ctx *ctx, const sl_io_plan *io, const void *slice, size_t elem, void *owned)
{
    return io_move(ctx, io, slice, elem, owned, 0);
}
