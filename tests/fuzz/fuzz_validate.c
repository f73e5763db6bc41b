/* fuzz_validate.c - libFuzzer target: the validation of a model's dataset
 * contents after HDF5 has read them (sl_block_validate), the check every
 * model file passes through on load (and the only one between a crafted file
 * and the solver's indexing).
 *
 * The input is decoded into a block of 1..8 states: pointer arrays
 * (/state/first_pair, /pair/first_transition) of arbitrary small values,
 * actions, rewards and probabilities that may be negative, NaN or infinite,
 * and next states that may be out of range. The arrays are allocated to the
 * sizes the block's own ranges give, exactly as the loader does.
 *
 * Oracle beyond the sanitizers: an independent check, written here from the
 * file format's rules (docs/formats.md), decides whether the block is valid;
 * sl_block_validate must accept exactly the valid blocks, and reject the
 * others with SL_EDATA and a message naming the source.
 */
#define _POSIX_C_SOURCE 200809L
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "core/core.h"
#include "model/model.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

typedef struct reader {
    const uint8_t *d;
    size_t n, i;
} reader;

static uint8_t byte(reader *r) { return r->i < r->n ? r->d[r->i++] : 0; }

/* small signed pointer offsets: mostly the "right" value, sometimes off */
static int64_t ptr(reader *r, int64_t right)
{
    uint8_t b = byte(r);
    if (b < 200) return right;
    return right + (int64_t)(b % 11) - 5 + (b >= 250 ? 1000 : 0);
}

static double number(reader *r)
{
    uint8_t b = byte(r);
    switch (b % 16) {
    case 0: return NAN;
    case 1: return INFINITY;
    case 2: return -INFINITY;
    case 3: return -0.25;
    case 4: return 1.5;
    case 5: {
        uint64_t u = 0;
        for (int k = 0; k < 8; k++) u = (u << 8) | byte(r);
        double x;
        memcpy(&x, &u, sizeof(x));
        return x;
    }
    default: return (double)(b % 16 - 6) / 8.0; /* 0, 0.125, ... 1.125 */
    }
}

/* The rules, independently: 1 if the block is a valid piece of a model. */
static int valid(const sl_block *b, int64_t n_states, double tol)
{
    int64_t ns = b->s_end - b->s_begin, np = b->p_end - b->p_begin, nt = b->t_end - b->t_begin;
    if (b->first_pair[0] != b->p_begin || b->first_pair[ns] != b->p_end) return 0;
    if (b->first_trans[0] != b->t_begin || b->first_trans[np] != b->t_end) return 0;
    for (int64_t i = 0; i < ns; i++) {
        int64_t p0 = b->first_pair[i] - b->p_begin, p1 = b->first_pair[i + 1] - b->p_begin;
        if (!(p0 < p1) || p0 < 0 || p1 > np) return 0; /* at least one action, inside the pairs */
        for (int64_t k = p0; k < p1; k++) {
            for (int64_t k2 = p0; k2 < k; k2++)
                if (b->action[k2] == b->action[k]) return 0;
            if (!isfinite(b->reward[k])) return 0;
            int64_t t0 = b->first_trans[k] - b->t_begin, t1 = b->first_trans[k + 1] - b->t_begin;
            if (!(t0 < t1) || t0 < 0 || t1 > nt) return 0;
            double sum = 0;
            for (int64_t t = t0; t < t1; t++) {
                if (b->target[t] < 0 || b->target[t] >= n_states) return 0;
                if (!(b->prob[t] >= 0.0 && b->prob[t] <= 1.0)) return 0;
                sum += b->prob[t];
            }
            if (fabs(sum - 1.0) > tol) return 0;
        }
    }
    return 1;
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    reader r = {data, size, 0};
    sl_ctx ctx;
    memset(&ctx, 0, sizeof(ctx));
    ctx.comm = MPI_COMM_NULL;
    ctx.size = 1;
    sl_block b;
    memset(&b, 0, sizeof(b));
    sl_meta m;
    memset(&m, 0, sizeof(m));
    int64_t ns = 1 + byte(&r) % 8;
    int64_t n_states = ns + byte(&r) % 3; /* the block may be a slice of a larger model */
    int64_t acts = 1 + byte(&r) % 3;      /* pairs per state, before damage */
    int64_t succ = 1 + byte(&r) % 3;      /* successors per pair, before damage */
    b.s_begin = byte(&r) % 2 ? n_states - ns : 0;
    b.s_end = b.s_begin + ns;
    b.p_begin = byte(&r) % 4;
    b.t_begin = byte(&r) % 4;
    int64_t np = ns * acts, nt = np * succ;
    b.p_end = b.p_begin + np;
    b.t_end = b.t_begin + nt;
    m.n_states = n_states;
    m.n_pairs = np;
    m.n_trans = nt;
    b.where = "fuzz.h5";
    b.first_pair = calloc((size_t)ns + 1, sizeof(int64_t));
    b.action = calloc((size_t)np, sizeof(int32_t));
    b.reward = calloc((size_t)np, sizeof(double));
    b.first_trans = calloc((size_t)np + 1, sizeof(int64_t));
    b.target = calloc((size_t)nt, sizeof(int64_t));
    b.prob = calloc((size_t)nt, sizeof(double));
    if (!b.first_pair || !b.action || !b.reward || !b.first_trans || !b.target || !b.prob) goto done;
    for (int64_t i = 0; i <= ns; i++) b.first_pair[i] = ptr(&r, b.p_begin + i * acts);
    for (int64_t k = 0; k < np; k++) {
        uint8_t a = byte(&r);
        b.action[k] = a < 230 ? (int32_t)(k % acts) : (int32_t)(a % 4);
        b.reward[k] = byte(&r) < 240 ? (double)(k % 7) : number(&r);
    }
    for (int64_t k = 0; k <= np; k++) b.first_trans[k] = ptr(&r, b.t_begin + k * succ);
    for (int64_t t = 0; t < nt; t++) {
        uint8_t c = byte(&r);
        b.target[t] = c < 220 ? (int64_t)(c % n_states) : (int64_t)(c % 7) - 3 + n_states * (c % 2);
        b.prob[t] = byte(&r) < 200 ? 1.0 / (double)succ : number(&r);
    }
    double tol = 1e-9;
    int want = valid(&b, n_states, tol);
    sl_status st = sl_block_validate(&ctx, &b, &m, tol, b.where);
    if (want && st != SL_OK) {
        fprintf(stderr, "valid block rejected: %s\n", ctx.err);
        abort();
    }
    if (!want && st == SL_OK) {
        fprintf(stderr, "invalid block accepted\n");
        abort();
    }
    if (!want && (st != SL_EDATA || strstr(ctx.err, "fuzz.h5") == NULL)) {
        fprintf(stderr, "rejected with status %d, message '%s' (want 65 naming fuzz.h5)\n", (int)st, ctx.err);
        abort();
    }
done:
    free(b.first_pair);
    free(b.action);
    free(b.reward);
    free(b.first_trans);
    free(b.target);
    free(b.prob);
    return 0;
}
