/* layout.c - partition of states by transitions, halo plan and exchange,
 * reductions. Works from row counts; never reads files. */
#include "parallel/layout.h"

#include <string.h>

double sl_sum(sl_ctx *ctx, double v)
{
    double r = 0;
    MPI_Allreduce(&v, &r, 1, MPI_DOUBLE, MPI_SUM, ctx->comm);
    return r;
}

double sl_max(sl_ctx *ctx, double v)
{
    double r = 0;
    MPI_Allreduce(&v, &r, 1, MPI_DOUBLE, MPI_MAX, ctx->comm);
    return r;
}

double sl_min(sl_ctx *ctx, double v)
{
    double r = 0;
    MPI_Allreduce(&v, &r, 1, MPI_DOUBLE, MPI_MIN, ctx->comm);
    return r;
}

int64_t sl_sum_i64(sl_ctx *ctx, int64_t v)
{
    int64_t r = 0;
    MPI_Allreduce(&v, &r, 1, MPI_INT64_T, MPI_SUM, ctx->comm);
    return r;
}

int64_t sl_exscan_i64(sl_ctx *ctx, int64_t v)
{
    int64_t r = 0;
    MPI_Exscan(&v, &r, 1, MPI_INT64_T, MPI_SUM, ctx->comm);
    return ctx->rank == 0 ? 0 : r;
}

/* First i in [lo, hi] with cum[i] >= q (cum non-decreasing). */
static int64_t lower_bound(const int64_t *cum, int64_t lo, int64_t hi, int64_t q)
{
    while (lo < hi) {
        int64_t mid = lo + (hi - lo) / 2;
        if (cum[mid] < q) lo = mid + 1;
        else hi = mid;
    }
    return lo;
}

void sl_partition_split(const int64_t *cum, int64_t n, int nparts, int64_t *bounds)
{
    int64_t total = cum[n];
    bounds[0] = 0;
    for (int k = 1; k < nparts; k++) {
        int64_t q = (int64_t)((double)total * k / nparts);
        int64_t b = lower_bound(cum, 0, n, q);
        if (b < bounds[k - 1]) b = bounds[k - 1];
        bounds[k] = b;
    }
    bounds[nparts] = n;
}

sl_status sl_partition_from_counts(sl_ctx *ctx, int64_t n, int64_t total, const int64_t *cum, int64_t *bounds)
{
    int P = ctx->size, r = ctx->rank;
    int64_t lo = n * r / P, hi = n * (r + 1) / P;
    int64_t *cand = NULL;
    sl_status st = SL_OK;
    if (SL_ALLOC(ctx, cand, P + 1, "partition") == NULL) st = SL_ENOMEM;
    st = sl_agree(ctx, st);
    if (st != SL_OK) return st;
    /* phase 2: split point k is the first state whose cumulative count
     * reaches q_k; the rank whose share holds it proposes it */
    for (int k = 0; k <= P; k++) {
        int64_t q = (int64_t)((double)total * k / P);
        cand[k] = n;
        if (k == 0) cand[k] = 0;
        else if (k < P && cum[hi - lo] >= q && (r == 0 || cum[0] < q))
            cand[k] = lo + lower_bound(cum, 0, hi - lo, q);
        else if (k < P && r == 0 && cum[0] >= q)
            cand[k] = 0;
    }
    MPI_Allreduce(cand, bounds, P + 1, MPI_INT64_T, MPI_MIN, ctx->comm);
    for (int k = 1; k <= P; k++)
        if (bounds[k] < bounds[k - 1]) bounds[k] = bounds[k - 1];
    bounds[P] = n;
    free(cand);
    return SL_OK;
}

int sl_dist_owner(const int64_t *bounds, int nparts, int64_t s)
{
    int lo = 0, hi = nparts - 1;
    while (lo < hi) {
        int mid = (lo + hi + 1) / 2;
        if (bounds[mid] <= s) lo = mid;
        else hi = mid - 1;
    }
    return lo;
}

static int cmp_i64(const void *a, const void *b)
{
    int64_t x = *(const int64_t *)a, y = *(const int64_t *)b;
    return (x > y) - (x < y);
}

void sl_halo_free(sl_halo *h)
{
    if (h == NULL) return;
    free(h->halo_global);
    free(h->recv_rank);
    free(h->recv_off);
    free(h->send_rank);
    free(h->send_off);
    free(h->send_idx);
    free(h->send_buf);
    free(h->reqs);
    free(h->recv_st_off);
    free(h->send_st_off);
    memset(h, 0, sizeof(*h));
}

sl_status sl_halo_build(sl_ctx *ctx, const int64_t *bounds, sl_block *b, int in_place, sl_halo *h)
{
    sl_status st = SL_OK;
    int P = ctx->size;
    int *cnt_recv = NULL, *cnt_send = NULL, *displ_r = NULL, *displ_s = NULL;
    uint64_t *bits = NULL;
    int64_t *before = NULL;
    memset(h, 0, sizeof(*h));
    int64_t nt = sl_block_trans(b), s0 = b->s_begin, s1 = b->s_end;
    h->n_local = s1 - s0;

    /* distinct off-rank targets, ascending, and the column of every
     * transition. Where the off-rank targets span a range of at most 32
     * ids per off-rank transition (the usual case: a stage-interleaved
     * layout sends about half the transitions off-rank, to a few hundred
     * thousand distinct states), a bitmap over that range finds them and
     * a count of set bits before each word numbers them: linear time, and
     * the bitmap with its counts is no larger than the list a sort needs. Otherwise (few off-rank
     * targets spread wide) they are sorted and found by binary search.
     * Both give the same halo and the same columns. */
    int64_t n_off = 0, gmin = INT64_MAX, gmax = INT64_MIN;
    for (int64_t t = 0; t < nt; t++) {
        int64_t g = b->target[t];
        if (g < s0 || g >= s1) {
            n_off++;
            gmin = g < gmin ? g : gmin;
            gmax = g > gmax ? g : gmax;
        }
    }
    int64_t nw = n_off > 0 ? (gmax - gmin) / 64 + 1 : 0;
    h->by_bitmap = n_off > 0 && 2 * nw <= n_off;
    if (h->by_bitmap && (SL_ZALLOC(ctx, bits, nw, "halo") == NULL || SL_ALLOC(ctx, before, nw, "halo") == NULL))
        st = SL_ENOMEM;
    if (st == SL_OK && h->by_bitmap) {
        for (int64_t t = 0; t < nt; t++) {
            int64_t g = b->target[t];
            if (g < s0 || g >= s1) bits[(g - gmin) / 64] |= (uint64_t)1 << ((g - gmin) % 64);
        }
        int64_t u = 0;
        for (int64_t k = 0; k < nw; k++) {
            before[k] = u;
            u += __builtin_popcountll(bits[k]);
        }
        h->n_halo = u;
        if (SL_ALLOC(ctx, h->halo_global, u, "halo") == NULL) st = SL_ENOMEM;
        for (int64_t k = 0, i = 0; st == SL_OK && k < nw; k++)
            for (uint64_t w = bits[k]; w != 0; w &= w - 1) h->halo_global[i++] = gmin + 64 * k + __builtin_ctzll(w);
    } else if (st == SL_OK) {
        if (SL_ALLOC(ctx, h->halo_global, n_off, "halo") == NULL) st = SL_ENOMEM;
        if (st == SL_OK) {
            int64_t w = 0;
            for (int64_t t = 0; t < nt; t++)
                if (b->target[t] < s0 || b->target[t] >= s1) h->halo_global[w++] = b->target[t];
            qsort(h->halo_global, (size_t)n_off, sizeof(int64_t), cmp_i64);
            int64_t u = 0;
            for (int64_t i = 0; i < n_off; i++)
                if (u == 0 || h->halo_global[i] != h->halo_global[u - 1]) h->halo_global[u++] = h->halo_global[i];
            h->n_halo = u;
        }
    }
    if (st == SL_OK && h->n_local + h->n_halo > (int64_t)UINT32_MAX)
        st = SL_ERR(ctx, SL_EDATA,
                    "rank %d would hold %lld value entries, more than 32-bit columns address: use more ranks",
                    ctx->rank, (long long)(h->n_local + h->n_halo));
    /* local columns in 32 bits: 12 instead of 16 bytes per transition in the
     * memory-bound sweeps */
    if (st == SL_OK && !in_place && SL_ALLOC(ctx, b->col, nt, "local columns") == NULL) st = SL_ENOMEM;
    if (st == SL_OK) {
        int64_t u = h->n_halo;
        /* in place: column t (bytes 4t..4t+3) overwrites only targets
         * already read (those at or below t/2); bytes are moved with
         * memcpy, so no pointer of another type reads them */
        unsigned char *buf = (unsigned char *)b->target;
        for (int64_t t = 0; t < nt; t++) {
            int64_t g;
            memcpy(&g, buf + 8 * t, sizeof(g));
            uint32_t c;
            if (g >= s0 && g < s1) {
                c = (uint32_t)(g - s0);
            } else if (h->by_bitmap) {
                int64_t d = g - gmin;
                uint64_t below = bits[d / 64] & (((uint64_t)1 << (d % 64)) - 1);
                c = (uint32_t)(h->n_local + before[d / 64] + __builtin_popcountll(below));
            } else {
                int64_t lo = 0, hi = u - 1;
                while (lo < hi) {
                    int64_t mid = lo + (hi - lo) / 2;
                    if (h->halo_global[mid] < g) lo = mid + 1;
                    else hi = mid;
                }
                c = (uint32_t)(h->n_local + lo);
            }
            if (in_place) memcpy(buf + 4 * t, &c, sizeof(c));
            else b->col[t] = c;
        }
        if (in_place) {
            /* shrinking cannot fail for lack of memory; if realloc says
             * no, the larger block stays valid */
            void *shrunk = nt > 0 ? realloc(buf, (size_t)nt * sizeof(uint32_t)) : NULL;
            b->col = shrunk != NULL ? (uint32_t *)shrunk : (uint32_t *)(void *)buf;
            b->target = NULL;
        }
    }
    free(bits);
    free(before);
    bits = NULL;
    before = NULL;
    if (SL_ZALLOC(ctx, cnt_recv, P, "halo") == NULL || SL_ZALLOC(ctx, cnt_send, P, "halo") == NULL ||
        SL_ZALLOC(ctx, displ_r, P, "halo") == NULL || SL_ZALLOC(ctx, displ_s, P, "halo") == NULL)
        st = SL_ENOMEM;
    st = sl_agree(ctx, st);
    if (st != SL_OK) goto cleanup;

    /* how many we want from each owner (halo is sorted, so owners are contiguous) */
    for (int64_t i = 0; i < h->n_halo; i++) cnt_recv[sl_dist_owner(bounds, P, h->halo_global[i])]++;
    MPI_Alltoall(cnt_recv, 1, MPI_INT, cnt_send, 1, MPI_INT, ctx->comm);
    int64_t n_send = 0;
    for (int p = 0; p < P; p++) {
        displ_r[p] = p ? displ_r[p - 1] + cnt_recv[p - 1] : 0;
        displ_s[p] = p ? displ_s[p - 1] + cnt_send[p - 1] : 0;
        n_send += cnt_send[p];
        if (cnt_recv[p]) h->n_recv++;
        if (cnt_send[p]) h->n_send++;
    }
    if (SL_ALLOC(ctx, h->send_idx, n_send, "halo") == NULL || SL_ALLOC(ctx, h->send_buf, n_send, "halo") == NULL ||
        SL_ALLOC(ctx, h->recv_rank, h->n_recv, "halo") == NULL ||
        SL_ALLOC(ctx, h->recv_off, h->n_recv + 1, "halo") == NULL ||
        SL_ALLOC(ctx, h->send_rank, h->n_send, "halo") == NULL ||
        SL_ALLOC(ctx, h->send_off, h->n_send + 1, "halo") == NULL ||
        SL_ALLOC(ctx, h->reqs, h->n_recv + h->n_send, "halo") == NULL)
        st = SL_ENOMEM;
    st = sl_agree(ctx, st);
    if (st != SL_OK) goto cleanup;
    MPI_Alltoallv(h->halo_global, cnt_recv, displ_r, MPI_INT64_T, h->send_idx, cnt_send, displ_s, MPI_INT64_T,
                  ctx->comm);
    for (int64_t i = 0; i < n_send; i++) h->send_idx[i] -= s0;
    int ir = 0, is = 0;
    h->recv_off[0] = 0;
    h->send_off[0] = 0;
    for (int p = 0; p < P; p++) {
        if (cnt_recv[p]) {
            h->recv_rank[ir] = p;
            h->recv_off[ir + 1] = h->recv_off[ir] + cnt_recv[p];
            ir++;
        }
        if (cnt_send[p]) {
            h->send_rank[is] = p;
            h->send_off[is + 1] = h->send_off[is] + cnt_send[p];
            is++;
        }
    }
    for (int64_t i = 0; i < n_send; i++)
        if (h->send_idx[i] < 0 || h->send_idx[i] >= h->n_local) {
            st = SL_ERR(ctx, SL_EINTERNAL, "halo plan: requested state not owned");
            break;
        }
    st = sl_agree(ctx, st);
cleanup:
    free(cnt_recv);
    free(cnt_send);
    free(displ_r);
    free(displ_s);
    if (st != SL_OK) sl_halo_free(h);
    return st;
}

sl_status sl_halo_exchange(sl_ctx *ctx, const sl_halo *h, double *x)
{
    int nreq = 0;
    for (int i = 0; i < h->n_recv; i++) {
        int64_t off = h->recv_off[i], n = h->recv_off[i + 1] - off;
        MPI_Irecv(x + h->n_local + off, (int)n, MPI_DOUBLE, h->recv_rank[i], 17, ctx->comm, &h->reqs[nreq++]);
    }
    for (int i = 0; i < h->n_send; i++) {
        int64_t off = h->send_off[i], n = h->send_off[i + 1] - off;
        for (int64_t k = off; k < off + n; k++) h->send_buf[k] = x[h->send_idx[k]];
        MPI_Isend(h->send_buf + off, (int)n, MPI_DOUBLE, h->send_rank[i], 17, ctx->comm, &h->reqs[nreq++]);
    }
    if (nreq > 0 && MPI_Waitall(nreq, h->reqs, MPI_STATUSES_IGNORE) != MPI_SUCCESS)
        return SL_ERR(ctx, SL_EINTERNAL, "halo exchange failed");
    return SL_OK;
}
