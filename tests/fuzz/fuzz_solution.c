/* fuzz_solution.c - libFuzzer target: the content checks of solution,
 * values, finite-horizon stage and checkpoint files after HDF5 has read
 * their datasets (src/store/content.c: sl_saved_length_check,
 * sl_saved_values_check, sl_saved_policy_check; src/model/model.c:
 * sl_pairs_find_action), in the order the loaders run them.
 *
 * The input is decoded into one rank's slice of a saved result: the lengths
 * HDF5 reported for the value and policy datasets (mostly right, sometimes
 * missing, short, long or huge), values that may be NaN, infinite, huge or
 * subnormal, and a policy whose actions are mostly ones the state offers,
 * sometimes any int32. The model's slice is always a valid one (the model
 * file has been validated before a result is loaded against it): 1..4
 * distinct actions per state out of 0..5, in any order, pairs numbered from
 * a global offset.
 *
 * Oracle beyond the sanitizers: the documented rules (docs/formats.md,
 * docs/bad-input.md) restated here independently - a dataset holds exactly
 * n_states entries; every value is finite (tested as v == v && v - v == 0,
 * not with isfinite); every policy action is one of the actions generated
 * for its state (a bit set kept aside while generating, not the pair
 * arrays). The checks must accept exactly the valid slices, and reject the
 * others with SL_EDATA and a message naming the file, the dataset and, for
 * contents, the first state at fault; on success each chosen pair must lie
 * in its state's pairs and carry the policy's action.
 */
#define _POSIX_C_SOURCE 200809L
#include <float.h>
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "fuzz_meta.h"
#include "store/store.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

#define N_ACTIONS 6

typedef fz_reader reader;
#define byte fz_byte

static double number(reader *r)
{
    uint8_t b = byte(r);
    if (b < 224) return (double)b / 8.0 - 10.0;
    switch (b % 8) {
    case 0: return NAN;
    case 1: return INFINITY;
    case 2: return -INFINITY;
    case 3: return DBL_MAX;
    case 4: return -DBL_MIN / 4.0; /* subnormal */
    case 5: return -0.0;
    default: {
        uint64_t u = 0;
        for (int k = 0; k < 8; k++) u = (u << 8) | byte(r);
        double x;
        memcpy(&x, &u, sizeof(x));
        return x;
    }
    }
}

/* the length HDF5 reports: mostly right */
static int64_t length(reader *r, int64_t n_states)
{
    uint8_t b = byte(r);
    if (b < 232) return n_states;
    static const int64_t odd[8] = {-1, 0, 1, -2, INT64_MAX, INT64_MIN, 2, 1000};
    return b % 2 ? n_states + odd[b % 8] / (b % 4 == 1 ? 1 : 4) : odd[b % 8];
}

static int32_t wild_action(uint8_t b)
{
    static const int32_t w[8] = {-1, N_ACTIONS, INT32_MAX, INT32_MIN, 0, 5, 3, 1 << 20};
    return w[b % 8];
}

/* the rules, independently */
static int is_finite(double v) { return v == v && v - v == 0.0; }

static int offered(unsigned mask, int32_t a) { return a >= 0 && a < N_ACTIONS && (mask >> a & 1u); }

/* the message names the file, the dataset and (state >= 0) "state N:" */
static void want_message(const sl_ctx *ctx, sl_status st, const char *path, const char *dataset, int64_t state)
{
    char s[48] = "";
    if (state >= 0) snprintf(s, sizeof(s), "state %lld:", (long long)state);
    if (st != SL_EDATA || !strstr(ctx->err, path) || !strstr(ctx->err, dataset) || (s[0] && !strstr(ctx->err, s))) {
        fprintf(stderr, "rejected with status %d, message '%s' (want 65 naming %s, %s, '%s')\n", (int)st, ctx->err,
                path, dataset, s);
        abort();
    }
}

static void want_ok(const sl_ctx *ctx, sl_status st, const char *what)
{
    if (st != SL_OK) {
        fprintf(stderr, "valid %s rejected: %s\n", what, ctx->err);
        abort();
    }
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    reader r = {data, size, 0};
    sl_ctx ctx;
    fz_ctx_init(&ctx);
    static const char *paths[4] = {"sol.h5", "val.h5", "ckpt-000001.h5", "fin.h5"};
    static const char *vnames[4] = {"/value", "/value", "/value", "/stage/value_000002"};
    static const char *pnames[4] = {"/policy", "", "/policy", "/stage/policy_000002"};
    static const char *models[3] = {NULL, "", "reservoir.h5"};
    int kind = byte(&r) % 4; /* solution, values, checkpoint, stage */
    int has_policy = kind != 1;
    const char *path = paths[kind], *vname = vnames[kind], *pname = pnames[kind], *model = models[byte(&r) % 3];
    int64_t n_states = 1 + byte(&r) % 8;
    int64_t n = 1 + byte(&r) % n_states;
    int64_t s_begin = byte(&r) % (n_states - n + 1);
    int64_t p_begin = byte(&r) % 50;
    int64_t len_v = length(&r, n_states), len_p = has_policy ? length(&r, n_states) : n_states;

    double *value = calloc((size_t)n, sizeof(double));
    int32_t *action = calloc((size_t)n, sizeof(int32_t));
    int64_t *first_pair = calloc((size_t)n + 1, sizeof(int64_t));
    int32_t *pair_action = calloc((size_t)n * N_ACTIONS, sizeof(int32_t));
    int64_t *chosen = calloc((size_t)n, sizeof(int64_t));
    unsigned *mask = calloc((size_t)n, sizeof(unsigned));
    if (!value || !action || !first_pair || !pair_action || !chosen || !mask) goto done;

    /* the model's slice: distinct actions per state, rotated */
    first_pair[0] = p_begin;
    for (int64_t i = 0; i < n; i++) {
        unsigned m = 1u + byte(&r) % ((1u << N_ACTIONS) - 1u), rot = byte(&r) % N_ACTIONS;
        int64_t q = first_pair[i] - p_begin;
        for (unsigned k = 0; k < N_ACTIONS; k++) {
            unsigned a = (k + rot) % N_ACTIONS;
            if (m >> a & 1u) pair_action[q++] = (int32_t)a;
        }
        mask[i] = m;
        first_pair[i + 1] = p_begin + q;
    }
    /* the saved slice */
    for (int64_t i = 0; i < n; i++) {
        value[i] = number(&r);
        uint8_t b = byte(&r);
        int64_t p0 = first_pair[i] - p_begin, np = first_pair[i + 1] - first_pair[i];
        action[i] = b < 224 ? pair_action[p0 + b % np] : wild_action(b);
    }

    /* the verdict of the rules, in the loaders' order */
    int64_t bad_v = -1, bad_p = -1;
    for (int64_t i = n - 1; i >= 0; i--) {
        if (!is_finite(value[i])) bad_v = i;
        if (!offered(mask[i], action[i])) bad_p = i;
    }

    sl_status st = sl_saved_length_check(&ctx, path, vname, len_v, n_states);
    if (len_v != n_states) {
        want_message(&ctx, st, path, vname, -1);
        goto done;
    }
    want_ok(&ctx, st, "value length");
    if (has_policy) {
        st = sl_saved_length_check(&ctx, path, pname, len_p, n_states);
        if (len_p != n_states) {
            want_message(&ctx, st, path, pname, -1);
            goto done;
        }
        want_ok(&ctx, st, "policy length");
    }
    st = sl_saved_values_check(&ctx, path, vname, s_begin, n, value);
    if (bad_v >= 0) {
        want_message(&ctx, st, path, vname, s_begin + bad_v);
        goto done;
    }
    want_ok(&ctx, st, "values");
    if (!has_policy) goto done;
    if (kind == 2) {
        /* a checkpoint's policy: the solvers turn each action into its
         * offset within the state's pairs (sl_policy_offsets) */
        for (int64_t i = 0; i < n; i++) {
            int64_t k = sl_pairs_find_action(first_pair, p_begin, pair_action, i, action[i]);
            int64_t p0 = first_pair[i] - p_begin, p1 = first_pair[i + 1] - p_begin;
            if (offered(mask[i], action[i]) != (k >= 0) || (k >= 0 && (k < p0 || k >= p1 || pair_action[k] != action[i]))) {
                fprintf(stderr, "state %lld: action %d found at pair %lld (offered: %d)\n", (long long)(s_begin + i),
                        (int)action[i], (long long)k, offered(mask[i], action[i]));
                abort();
            }
        }
        goto done;
    }
    st = sl_saved_policy_check(&ctx, path, pname, first_pair, pair_action, s_begin, n, action, chosen, model);
    if (bad_p >= 0) {
        want_message(&ctx, st, path, pname, s_begin + bad_p);
        if (model && model[0] && !strstr(ctx.err, model)) {
            fprintf(stderr, "message '%s' does not name the model %s\n", ctx.err, model);
            abort();
        }
        goto done;
    }
    want_ok(&ctx, st, "policy");
    for (int64_t i = 0; i < n; i++) {
        int64_t p0 = first_pair[i] - p_begin, p1 = first_pair[i + 1] - p_begin;
        if (chosen[i] < p0 || chosen[i] >= p1 || pair_action[chosen[i]] != action[i]) {
            fprintf(stderr, "state %lld: chosen pair %lld is not the pair of action %d\n", (long long)(s_begin + i),
                    (long long)chosen[i], (int)action[i]);
            abort();
        }
    }
done:
    free(value);
    free(action);
    free(first_pair);
    free(pair_action);
    free(chosen);
    free(mask);
    return 0;
}
