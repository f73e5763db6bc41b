/* policy_rows.c - one fixed policy's transitions laid out contiguously for
 * the evaluation sweeps of modified policy iteration and of iterative
 * evaluation, updated in place after an improvement.
 *
 * Where many rows carry the same probabilities (in the reservoir model
 * every release from one inflow class in one month has the same inflow
 * distribution), each distinct probability vector is stored once and a row
 * holds its offset: 4 bytes per row instead of 8 per transition, so a sweep
 * reads about half the bytes (value-indexed storage of repeated values).
 * The products and their order are the model's either way, so the iterates
 * are bitwise those of the sweep over the model's rows. */
#include <math.h>
#include <string.h>

#include "solve/solve.h"

/* The shared table is kept while it holds at most a quarter of the
 * policy's transitions (each vector used 4 times on average or more; below
 * that the offsets save little) and at most 2^28 entries. Both are choices
 * of ours, not measured optima. */
#define SHARED_SHARE 4
#define SHARED_MAX ((int64_t)1 << 28)

struct sl_prob_table {
    double *val;    /* the distinct vectors, one after the other */
    int64_t n, cap; /* entries used, allocated */
    uint32_t *slot; /* open addressing: offset + 1 of a vector, 0 empty */
    uint32_t *len;  /* its length, per slot */
    int64_t nslot;  /* a power of two, more than twice the vectors */
    int64_t nvec;
};

void sl_prob_table_free(sl_prob_table *t)
{
    if (t == NULL) return;
    free(t->val);
    free(t->slot);
    free(t->len);
    free(t);
}

static uint64_t vec_hash(const double *v, int64_t len)
{
    uint64_t h = sl_mix64((uint64_t)len);
    for (int64_t i = 0; i < len; i++) {
        uint64_t u;
        memcpy(&u, &v[i], sizeof(u));
        h = sl_mix64(h ^ u);
    }
    return h;
}

/* Place offset+1 `o` of a vector of length `len` in the slots. */
static void slot_put(uint32_t *slot, uint32_t *lens, int64_t nslot, const double *val, uint32_t o, uint32_t len)
{
    uint64_t mask = (uint64_t)(nslot - 1), h = vec_hash(val + o - 1, len) & mask;
    while (slot[h] != 0) h = (h + 1) & mask;
    slot[h] = o;
    lens[h] = len;
}

static int grow_slots(sl_ctx *ctx, sl_prob_table *t)
{
    int64_t ns = t->nslot ? 2 * t->nslot : 16;
    uint32_t *slot = NULL, *len = NULL;
    if (SL_ZALLOC(ctx, slot, ns, "probability table") == NULL || SL_ALLOC(ctx, len, ns, "probability table") == NULL) {
        free(slot);
        return 0;
    }
    for (int64_t s = 0; s < t->nslot; s++)
        if (t->slot[s] != 0) slot_put(slot, len, ns, t->val, t->slot[s], t->len[s]);
    free(t->slot);
    free(t->len);
    t->slot = slot;
    t->len = len;
    t->nslot = ns;
    return 1;
}

static int grow_values(sl_ctx *ctx, sl_prob_table *t, int64_t need)
{
    int64_t cap = t->cap ? 2 * t->cap : 4096;
    while (cap < need) cap *= 2;
    double *val = NULL;
    if (SL_ALLOC(ctx, val, cap, "probability table") == NULL) return 0;
    if (t->n > 0) memcpy(val, t->val, (size_t)t->n * sizeof(double));
    free(t->val);
    t->val = val;
    t->cap = cap;
    return 1;
}

int64_t sl_prob_table_find(sl_ctx *ctx, sl_prob_table *t, const double *v, int64_t len, int64_t limit)
{
    if (2 * (t->nvec + 1) > t->nslot && !grow_slots(ctx, t)) return -2;
    uint64_t mask = (uint64_t)(t->nslot - 1), h = vec_hash(v, len) & mask;
    for (; t->slot[h] != 0; h = (h + 1) & mask)
        if (t->len[h] == (uint32_t)len && memcmp(t->val + t->slot[h] - 1, v, (size_t)len * sizeof(double)) == 0)
            return t->slot[h] - 1;
    if (t->n + len > limit) return -1;
    if (t->n + len > t->cap && !grow_values(ctx, t, t->n + len)) return -2;
    int64_t off = t->n;
    memcpy(t->val + off, v, (size_t)len * sizeof(double));
    t->n += len;
    t->nvec++;
    t->slot[h] = (uint32_t)(off + 1);
    t->len[h] = (uint32_t)len;
    return off;
}

sl_prob_table *sl_prob_table_reset(sl_ctx *ctx, sl_prob_table *t)
{
    if (t == NULL) return SL_ZALLOC(ctx, t, 1, "probability table");
    t->n = t->nvec = 0;
    if (t->slot != NULL) memset(t->slot, 0, (size_t)t->nslot * sizeof(uint32_t));
    return t;
}

const double *sl_prob_table_values(const sl_prob_table *t) { return t->val; }

void sl_eval_rows_free(sl_eval_rows *rows)
{
    if (rows == NULL) return;
    free(rows->first);
    free(rows->col);
    free(rows->prob);
    free(rows->reward);
    free(rows->entry);
    free(rows->poff);
    sl_prob_table_free(rows->table);
    memset(rows, 0, sizeof(*rows));
}

/* The model's pair `entry` of local state i: its offset in the block's
 * pair arrays and its transitions t0..t1 (local). */
static int64_t pair_of(const sl_block *b, int64_t i, int32_t entry, int64_t *t0, int64_t *t1)
{
    int64_t k = b->first_pair[i] - b->p_begin + entry;
    *t0 = b->first_trans[k] - b->t_begin;
    *t1 = b->first_trans[k + 1] - b->t_begin;
    return k;
}

static int64_t pair_len(const sl_block *b, int64_t i, int32_t entry)
{
    int64_t t0, t1;
    (void)pair_of(b, i, entry, &t0, &t1);
    return t1 - t0;
}

/* Copy the policy's pair for the state at order position j into the rows
 * from transition offset w on. Returns the offset after it, or (shared
 * layout) -1 when the table is full, -2 out of memory. */
static int64_t copy_row(sl_ctx *ctx, const sl_problem *p, const int32_t *policy, sl_eval_rows *rows, int64_t j,
                        int64_t w, int64_t limit)
{
    const sl_block *b = &p->blk;
    int64_t i = p->order[j], t0, t1, k = pair_of(b, i, policy[i], &t0, &t1);
    if (rows->table != NULL) {
        int64_t off = sl_prob_table_find(ctx, rows->table, b->prob + t0, t1 - t0, limit);
        if (off < 0) return off;
        rows->poff[j] = (uint32_t)off;
    } else {
        memcpy(rows->prob + w, b->prob + t0, (size_t)(t1 - t0) * sizeof(double));
    }
    rows->reward[j] = b->reward[k];
    rows->entry[j] = policy[i];
    for (int64_t t = t0; t < t1; t++, w++) rows->col[w] = b->col[t];
    return w;
}

/* Every row from the start; -1 when the shared table filled up, -2 out of
 * memory, else 0. */
static int64_t lay_out(sl_ctx *ctx, const sl_problem *p, const int32_t *policy, sl_eval_rows *rows, int64_t limit)
{
    int64_t w = 0;
    for (int64_t j = 0; j < rows->n; j++) {
        rows->first[j] = (uint32_t)w;
        if ((w = copy_row(ctx, p, policy, rows, j, w, limit)) < 0) return w;
    }
    rows->first[rows->n] = (uint32_t)w;
    return 0;
}

static int64_t shared_limit(int64_t nt)
{
    int64_t l = nt / SHARED_SHARE;
    return l < SHARED_MAX ? l : SHARED_MAX;
}

/* Rows overwritten where they stand: 1 done, 0 not possible (a changed row
 * changes length, or the shared table filled up), -1 out of memory. */
static int update_in_place(sl_ctx *ctx, const sl_problem *p, const int32_t *policy, sl_eval_rows *rows)
{
    const int64_t n = rows->n;
    for (int64_t j = 0; j < n; j++) {
        int64_t i = p->order[j];
        if (rows->entry[j] != policy[i] && pair_len(&p->blk, i, rows->entry[j]) != pair_len(&p->blk, i, policy[i]))
            return 0;
    }
    const int64_t limit = shared_limit(rows->first[n]);
    for (int64_t j = 0; j < n; j++) {
        if (rows->entry[j] == policy[p->order[j]]) continue;
        int64_t w = copy_row(ctx, p, policy, rows, j, rows->first[j], limit);
        if (w == -2) return -1;
        if (w < 0) return 0;
    }
    return 1;
}

sl_status sl_eval_rows_update(sl_ctx *ctx, const sl_problem *p, const int32_t *policy, sl_eval_rows *rows)
{
    const sl_block *b = &p->blk;
    const int64_t n = p->n_local;
    if (rows->first != NULL && rows->n == n) {
        int c = update_in_place(ctx, p, policy, rows);
        if (c > 0) return SL_OK;
        if (c < 0) goto nomem;
    }
    int64_t nt = 0;
    for (int64_t i = 0; i < n; i++) nt += pair_len(b, i, policy[i]);
    if (nt > (int64_t)UINT32_MAX) {
        sl_eval_rows_free(rows);
        return SL_ERR(ctx, SL_EDATA, "%s: the policy has %lld transitions on rank %d, more than 32-bit offsets address",
                      p->path, (long long)nt, ctx->rank);
    }
    if (rows->first == NULL || rows->n != n || rows->cap < nt) {
        sl_prob_table *keep = rows->table;
        rows->table = NULL;
        sl_eval_rows_free(rows);
        rows->table = keep;
        if (SL_ALLOC(ctx, rows->first, n + 1, "policy rows") == NULL || SL_ALLOC(ctx, rows->col, nt, "policy rows") == NULL ||
            SL_ALLOC(ctx, rows->reward, n, "policy rows") == NULL || SL_ALLOC(ctx, rows->entry, n, "policy rows") == NULL)
            goto nomem;
        rows->cap = nt;
        rows->n = n;
    }
    /* shared probabilities first; where they do not repeat enough, plain */
    if ((rows->poff == NULL && SL_ALLOC(ctx, rows->poff, n, "policy rows") == NULL) ||
        (rows->table = sl_prob_table_reset(ctx, rows->table)) == NULL)
        goto nomem;
    int64_t c = lay_out(ctx, p, policy, rows, shared_limit(nt));
    if (c == -2) goto nomem;
    if (c == 0) {
        free(rows->prob);
        rows->prob = NULL;
        return SL_OK;
    }
    sl_prob_table_free(rows->table);
    rows->table = NULL;
    free(rows->poff);
    rows->poff = NULL;
    if (rows->prob == NULL && SL_ALLOC(ctx, rows->prob, rows->cap, "policy rows") == NULL) goto nomem;
    (void)lay_out(ctx, p, policy, rows, 0);
    return SL_OK;
nomem:
    sl_eval_rows_free(rows);
    return SL_ENOMEM;
}

sl_status sl_eval_rows_build(sl_ctx *ctx, const sl_problem *p, const int32_t *policy, sl_eval_rows *rows)
{
    memset(rows, 0, sizeof(*rows));
    return sl_eval_rows_update(ctx, p, policy, rows);
}

/* The arrays a sweep over the rows reads, and the value of row j: its
 * reward plus gamma times its probabilities (its vector in the table, or its
 * own) against x. Shared by the Gauss-Seidel and Jacobi forms. */
typedef struct row_view {
    const uint32_t *first, *col, *poff;
    const double *rew, *prob, *tab;
    double gamma;
} row_view;

static inline row_view view_of(const sl_problem *p, const sl_eval_rows *r)
{
    row_view v = {r->first, r->col, r->poff, r->reward, r->prob, r->table != NULL ? r->table->val : NULL, p->gamma};
    return v;
}

static inline double row_value(const row_view *v, const double *restrict x, int64_t j)
{
    const uint32_t t0 = v->first[j], t1 = v->first[j + 1];
    const uint32_t *restrict col = v->col;
    const double *restrict pr = v->tab != NULL ? v->tab + v->poff[j] : v->prob + t0;
    double acc = 0.0;
    for (uint32_t t = t0; t < t1; t++) acc += pr[t - t0] * x[col[t]];
    return v->rew[j] + v->gamma * acc;
}

double sl_eval_rows_sweep_part(const sl_problem *p, const sl_eval_rows *r, double *x, int64_t j0, int64_t j1)
{
    const row_view v = view_of(p, r);
    const int64_t *restrict order = p->order;
    double delta = 0;
    for (int64_t j = j0; j < j1; j++) {
        double val = row_value(&v, x, j);
        int64_t i = order[j];
        double dd = fabs(val - x[i]);
        delta = dd > delta ? dd : delta;
        x[i] = val;
    }
    return delta;
}

void sl_eval_rows_jacobi_part(const sl_problem *p, const sl_eval_rows *r, const double *x, double *y, int64_t j0,
                              int64_t j1, double *dmin, double *dmax)
{
    const row_view v = view_of(p, r);
    const int64_t *restrict order = p->order;
    double lo = INFINITY, hi = -INFINITY;
    for (int64_t j = j0; j < j1; j++) {
        double val = row_value(&v, x, j);
        int64_t i = order[j];
        double d = val - x[i];
        lo = d < lo ? d : lo;
        hi = d > hi ? d : hi;
        y[i] = val;
    }
    *dmin = lo;
    *dmax = hi;
}

int sl_eval_rows_shared(const sl_eval_rows *rows, int64_t *vectors, int64_t *entries)
{
    if (rows->table == NULL) return 0;
    if (vectors) *vectors = rows->table->nvec;
    if (entries) *entries = rows->table->n;
    return 1;
}

/* Puterman & Shin (1978) leave m free. Doubling while the policy is stable
 * is common practice (no source); counting a policy as settled while at most
 * 0.1% of its actions change is our own rule of thumb, chosen on the bench
 * models (bench/README.md, eighth pass): a model whose policy keeps moving a
 * few states at every improvement otherwise stays at the smallest m. */
int64_t sl_mpi_next_m(int64_t m, int64_t changed, int64_t n_states)
{
    if (changed <= n_states / SL_MPI_M_SHARE) return m < SL_MPI_M_MAX ? 2 * m : m;
    return m > SL_MPI_M_MIN ? m / 2 : m;
}

int sl_mpi_pick_eval(double rate_gs, double rate_jacobi)
{
    return rate_jacobi < rate_gs ? SL_EVAL_JACOBI : SL_EVAL_GS;
}
