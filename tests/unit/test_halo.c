/* test_halo.c - the halo plan (sl_halo_build) against a plan this test
 * works out itself, on 1 rank and (tests.cmake) 2 and 3 ranks, with
 * invented targets:
 *  - the halo is the ascending list of distinct off-rank targets, found
 *    here by sorting them (qsort);
 *  - every transition's column is its local index, or the number of
 *    owned states plus its place in that list;
 *  - after an exchange every column holds its target's value (each rank
 *    fills its own states with their global ids);
 *  - both ways of finding the halo are taken: a bitmap over the range of
 *    the off-rank targets where they are dense in it, sorting where a few
 *    lie far apart (the case is built so that, on 2 or more ranks, one
 *    rank takes each), with the columns written to their own array and
 *    over the targets' memory (in place). */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <cmocka.h>

#include "parallel/layout.h"

#include "ctx_fixture.h"

static uint64_t next(uint64_t *s)
{
    /* LCG (Knuth's MMIX constants, recalled from memory) */
    *s = *s * 6364136223846793005ULL + 1442695040888963407ULL;
    return *s >> 33;
}

static int cmp_i64(const void *a, const void *b)
{
    int64_t x = *(const int64_t *)a, y = *(const int64_t *)b;
    return (x > y) - (x < y);
}

/* Ranks 0..P-2 own 100 states each; the last rank owns the rest of
 * [0, n). The first ranks' transitions go mostly to their own and
 * neighbouring states, and a handful (`far`) anywhere in the last rank's
 * wide range; the last rank's go mostly to the first ranks' states. */
static void make_targets(int rank, int P, int64_t n, int64_t far, int64_t nt, int64_t *s0, int64_t *s1,
                         int64_t *target)
{
    uint64_t s = 12345u + 977u * (uint64_t)rank;
    *s0 = 100 * (int64_t)rank;
    *s1 = rank == P - 1 ? n : *s0 + 100;
    int64_t small = 100 * (int64_t)P; /* the first ranks' states and a bit more */
    for (int64_t t = 0; t < nt; t++) {
        if (rank < P - 1 && t < far) target[t] = small + (int64_t)(next(&s) % (uint64_t)(n - small));
        else target[t] = (int64_t)(next(&s) % (uint64_t)(small < n ? small : n));
    }
}

static void check_plan(sl_ctx *ctx, int64_t n, int64_t far, int in_place, int *seen_bitmap, int *seen_sort)
{
    int rank = 0, P = 1;
    MPI_Comm_rank(MPI_COMM_WORLD, &rank);
    MPI_Comm_size(MPI_COMM_WORLD, &P);
    int64_t *bounds = malloc((size_t)(P + 1) * sizeof(int64_t));
    assert_non_null(bounds);
    for (int r = 0; r < P; r++) bounds[r] = 100 * (int64_t)r;
    bounds[P] = n;
    const int64_t nt = 5000;
    int64_t *target = malloc((size_t)nt * sizeof(int64_t)), *expect = malloc((size_t)nt * sizeof(int64_t));
    assert_non_null(target);
    assert_non_null(expect);
    sl_block b;
    memset(&b, 0, sizeof(b));
    make_targets(rank, P, n, far, nt, &b.s_begin, &b.s_end, target);
    memcpy(expect, target, (size_t)nt * sizeof(int64_t));
    b.t_begin = 0;
    b.t_end = nt;
    b.target = target;
    /* the halo worked out here: distinct off-rank targets, ascending */
    int64_t *off = malloc((size_t)nt * sizeof(int64_t)), n_off = 0, u = 0;
    assert_non_null(off);
    for (int64_t t = 0; t < nt; t++)
        if (expect[t] < b.s_begin || expect[t] >= b.s_end) off[n_off++] = expect[t];
    qsort(off, (size_t)n_off, sizeof(int64_t), cmp_i64);
    for (int64_t i = 0; i < n_off; i++)
        if (u == 0 || off[i] != off[u - 1]) off[u++] = off[i];

    sl_halo h;
    assert_int_equal(sl_halo_build(ctx, bounds, &b, in_place, &h), SL_OK);
    int64_t nl = b.s_end - b.s_begin;
    assert_int_equal(h.n_local, nl);
    assert_int_equal(h.n_halo, u);
    for (int64_t i = 0; i < u; i++) assert_int_equal(h.halo_global[i], off[i]);
    if (in_place) assert_null(b.target);
    else assert_ptr_equal(b.target, target);
    for (int64_t t = 0; t < nt; t++) {
        int64_t g = expect[t], want;
        if (g >= b.s_begin && g < b.s_end) {
            want = g - b.s_begin;
        } else {
            int64_t *at = bsearch(&g, off, (size_t)u, sizeof(int64_t), cmp_i64);
            assert_non_null(at);
            want = nl + (at - off);
        }
        assert_int_equal((int64_t)b.col[t], want);
    }
    if (u > 0) *(h.by_bitmap ? seen_bitmap : seen_sort) = 1;
    /* the exchange fills every column with its target's value */
    double *x = malloc((size_t)(nl + u) * sizeof(double));
    assert_non_null(x);
    for (int64_t i = 0; i < nl; i++) x[i] = (double)(b.s_begin + i);
    for (int64_t i = nl; i < nl + u; i++) x[i] = -1.0;
    assert_int_equal(sl_halo_exchange(ctx, &h, x), SL_OK);
    for (int64_t t = 0; t < nt; t++) assert_true(x[b.col[t]] == (double)expect[t]);
    free(x);
    sl_halo_free(&h);
    free(b.col);
    if (!in_place) free(target);
    free(expect);
    free(off);
    free(bounds);
}

static void test_halo_plan(void **state)
{
    sl_ctx *ctx = ctx_of(state);
    int P = 1, seen[2] = {0, 0}, all[2] = {0, 0};
    MPI_Comm_size(MPI_COMM_WORLD, &P);
    for (int in_place = 0; in_place <= 1; in_place++) {
        /* narrow: every off-rank target in a few hundred states */
        check_plan(ctx, 100 * (int64_t)P + 50, 0, in_place, &seen[0], &seen[1]);
        /* wide: the last rank spans a million states; the first ranks send
         * 10 transitions anywhere in it */
        check_plan(ctx, 1000000, 10, in_place, &seen[0], &seen[1]);
    }
    MPI_Allreduce(seen, all, 2, MPI_INT, MPI_MAX, MPI_COMM_WORLD);
    if (P >= 2) {
        assert_int_equal(all[0], 1); /* a rank found its halo by the bitmap */
        assert_int_equal(all[1], 1); /* and a rank by sorting */
    }
}

int main(int argc, char **argv)
{
    MPI_Init(&argc, &argv);
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_halo_plan),
    };
    int failed = cmocka_run_group_tests(tests, setup, teardown);
    MPI_Finalize();
    return failed ? 1 : 0;
}
