/* test_chunk_read.c - the direct chunk reader (src/store/h5_chunks.c) against
 * HDF5's own H5Dread, the reference: the same model file read both ways must
 * give identical arrays, bit for bit, and the same fingerprint, on every rank
 * of a 1, 2 or 3 rank run (mpi_unit_chunk_read_N). The ranges start and end
 * inside chunks and cross several. Datasets the reader does not handle
 * (contiguous layout, a type conversion) and one it handles without
 * decompressing (chunked, no filters) are checked against values known by
 * construction. The model is the invented reservoir of examples/reservoir.c. */
#define _POSIX_C_SOURCE 200809L
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include <cmocka.h>
#include <zlib.h>

#include "core/core.h"
#include "model/model.h"
#include "sluice/sluice.h"
#include "store/h5.h"
#include "store/store.h"

#include "ctx_fixture.h"

/* read both ways; the direct way must have read chunks itself, the other none */
static void read_both(sl_ctx *ctx, const char *path, const sl_meta *m, int64_t s0, int64_t s1, sl_block *direct,
                      sl_block *h5)
{
    int64_t before = ctx->h5_chunks_read;
    ctx->h5_direct = 1;
    assert_int_equal(sl_store_model_read(ctx, path, m, s0, s1, direct), SL_OK);
    assert_true(ctx->h5_chunks_read > before);
    before = ctx->h5_chunks_read;
    ctx->h5_direct = 0;
    assert_int_equal(sl_store_model_read(ctx, path, m, s0, s1, h5), SL_OK);
    assert_int_equal(ctx->h5_chunks_read, before);
    ctx->h5_direct = 1;
}

#define SAME(a, b, n) assert_memory_equal((a), (b), (size_t)(n) * sizeof(*(a)))

static void same_block(const sl_block *a, const sl_block *b)
{
    assert_int_equal(a->p_begin, b->p_begin);
    assert_int_equal(a->p_end, b->p_end);
    assert_int_equal(a->t_begin, b->t_begin);
    assert_int_equal(a->t_end, b->t_end);
    int64_t ns = sl_block_states(a), np = sl_block_pairs(a), nt = sl_block_trans(a);
    SAME(a->first_pair, b->first_pair, ns + 1);
    SAME(a->action, b->action, np);
    SAME(a->reward, b->reward, np);
    SAME(a->first_trans, b->first_trans, np + 1);
    SAME(a->target, b->target, nt);
    SAME(a->prob, b->prob, nt);
    assert_int_equal(a->terminal != NULL, b->terminal != NULL);
    if (a->terminal) SAME(a->terminal, b->terminal, ns);
    assert_int_equal(a->visits != NULL, b->visits != NULL);
    if (a->visits) SAME(a->visits, b->visits, np);
    SAME(a->qacc, b->qacc, 2);
}

/* A reservoir of several chunks per dataset, read both ways: each rank its
 * share (the fingerprint of the shares must be the file's), then ranges of
 * their own on each rank (a single state, one ending inside a chunk, the
 * last states). */
static void test_model_both_ways(void **state)
{
    sl_ctx *ctx = ctx_of(state);
    char dir[] = SLUICE_BINARY_DIR "/chunkread-XXXXXX", path[sizeof(dir) + 16];
    shared_tmpdir(dir);
    snprintf(path, sizeof(path), "%s/r.h5", dir);
    const char *names[2] = {"storage_levels", "inflow_classes"};
    const double values[2] = {250, 5};
    sl_model *mod = NULL;
    assert_int_equal(sl_model_from_generator(ctx, SLUICE_SOURCE_DIR "/examples/reservoir.c", 2, names, values, &mod),
                     SL_OK);
    assert_int_equal(sl_model_save(mod, path), SL_OK);
    sl_model_free(&mod);

    sl_meta m;
    assert_int_equal(sl_store_model_meta(ctx, path, &m), SL_OK);
    /* several chunks in the row datasets, and quantities to hash */
    assert_true(m.n_pairs > 2 * (int64_t)SL_H5_CHUNK);
    assert_true(m.n_trans > 4 * (int64_t)SL_H5_CHUNK);
    assert_true(m.n_quantities > 0);
    int rank = sl_ctx_rank(ctx), size = ctx->size;
    int64_t n = m.n_states;
    sl_block a, b;
    char fa[40], fb[40];
    read_both(ctx, path, &m, n * rank / size, n * (rank + 1) / size, &a, &b);
    same_block(&a, &b);
    assert_int_equal(sl_fingerprint(ctx, &m, &a, fa), SL_OK);
    assert_int_equal(sl_fingerprint(ctx, &m, &b, fb), SL_OK);
    assert_string_equal(fa, m.fingerprint);
    assert_string_equal(fb, m.fingerprint);
    sl_block_free(&a);
    sl_block_free(&b);
    const int64_t ranges[][2] = {{n / 3, n / 3 + 1}, {7 + rank, n / 2 + 11 * rank}, {n - 5 - rank, n}};
    for (size_t r = 0; r < sizeof(ranges) / sizeof(ranges[0]); r++) {
        read_both(ctx, path, &m, ranges[r][0], ranges[r][1], &a, &b);
        same_block(&a, &b);
        sl_block_free(&a);
        sl_block_free(&b);
    }
    /* a quantity's pairs from inside one chunk to inside another */
    int64_t p0 = 1000 + 77 * rank, np = 2 * (int64_t)SL_H5_CHUNK + 5;
    double *qa = malloc(2 * (size_t)np * sizeof(double)), *qb = malloc(2 * (size_t)np * sizeof(double));
    assert_non_null(qa);
    assert_non_null(qb);
    int q = m.n_quantities - 1;
    ctx->h5_direct = 1;
    assert_int_equal(sl_store_quantity_read(ctx, path, &m, q, p0, np, qa, qa + np), SL_OK);
    ctx->h5_direct = 0;
    assert_int_equal(sl_store_quantity_read(ctx, path, &m, q, p0, np, qb, qb + np), SL_OK);
    ctx->h5_direct = 1;
    SAME(qa, qb, 2 * np);
    free(qa);
    free(qb);
    sl_meta_free(&m);
    MPI_Barrier(MPI_COMM_WORLD);
    if (rank == 0) {
        unlink(path);
        rmdir(dir);
    }
}

/* Layouts other than the model writer's: chunked without filters (read
 * directly, no inflate), contiguous and a 32-bit file type read as 64-bit
 * (both left to H5Dread). Values known by construction: v[i] = 3 i - 1e6. */
static void test_other_layouts(void **state)
{
    sl_ctx *ctx = ctx_of(state);
    char dir[] = SLUICE_BINARY_DIR "/chunkread-XXXXXX", path[sizeof(dir) + 16];
    shared_tmpdir(dir);
    snprintf(path, sizeof(path), "%s/l.h5", dir);
    const int64_t n = 3 * (int64_t)SL_H5_CHUNK + 123;
    int rank = sl_ctx_rank(ctx);
    int64_t *v = malloc((size_t)n * sizeof(int64_t)), *got = malloc((size_t)n * sizeof(int64_t));
    int32_t *v32 = malloc((size_t)n * sizeof(int32_t));
    assert_non_null(v);
    assert_non_null(got);
    assert_non_null(v32);
    for (int64_t i = 0; i < n; i++) {
        v[i] = 3 * i - 1000000;
        v32[i] = (int32_t)v[i];
    }
    hid_t f;
    assert_int_equal(sl_h5_create(ctx, path, &f), SL_OK);
    int64_t cnt = rank == 0 ? n : 0;
    assert_int_equal(sl_h5_write_1d(ctx, f, "/plain", H5T_STD_I64LE, H5T_NATIVE_INT64, n, 0, cnt, v, 0, path),
                     SL_OK);
    assert_int_equal(sl_h5_write_1d(ctx, f, "/narrow", H5T_STD_I32LE, H5T_NATIVE_INT32, n, 0, cnt, v32, 1, path),
                     SL_OK);
    {
        /* contiguous, written by HDF5 directly (not a layout sluice writes) */
        hsize_t dims = (hsize_t)n;
        hid_t sp = H5Screate_simple(1, &dims, NULL);
        hid_t d = H5Dcreate2(f, "/contiguous", H5T_STD_I64LE, sp, H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT);
        assert_true(sp >= 0 && d >= 0);
        hid_t dx = H5Pcreate(H5P_DATASET_XFER);
        assert_true(dx >= 0 && H5Pset_dxpl_mpio(dx, H5FD_MPIO_COLLECTIVE) >= 0);
        if (rank != 0) {
            H5Sselect_none(sp);
            hid_t ms = H5Screate_simple(1, &dims, NULL);
            H5Sselect_none(ms);
            assert_true(H5Dwrite(d, H5T_NATIVE_INT64, ms, sp, dx, v) >= 0);
            H5Sclose(ms);
        } else {
            assert_true(H5Dwrite(d, H5T_NATIVE_INT64, H5S_ALL, H5S_ALL, dx, v) >= 0);
        }
        H5Pclose(dx);
        H5Dclose(d);
        H5Sclose(sp);
    }
    assert_int_equal(sl_h5_close(ctx, &f, path), SL_OK);
    assert_int_equal(sl_h5_open(ctx, path, 0, &f), SL_OK);
    const char *names[] = {"/plain", "/narrow", "/contiguous"};
    const int64_t ranges[][2] = {{0, n}, {5 + rank, (int64_t)SL_H5_CHUNK + 9}, {n - 200, n}, {17, 18}};
    for (size_t d = 0; d < 3; d++)
        for (size_t r = 0; r < sizeof(ranges) / sizeof(ranges[0]); r++)
            for (int direct = 0; direct < 2; direct++) {
                int64_t off = ranges[r][0], c = ranges[r][1] - ranges[r][0];
                memset(got, 0x55, (size_t)c * sizeof(int64_t));
                ctx->h5_direct = direct;
                int64_t before = ctx->h5_chunks_read;
                assert_int_equal(sl_h5_read_1d(ctx, f, names[d], H5T_NATIVE_INT64, n, off, c, got, path), SL_OK);
                SAME(got, v + off, c);
                /* only the chunked dataset of the right type is read directly */
                assert_int_equal(ctx->h5_chunks_read > before, direct && d == 0);
            }
    ctx->h5_direct = 1;
    H5Fclose(f);
    free(v);
    free(v32);
    free(got);
    MPI_Barrier(MPI_COMM_WORLD);
    if (rank == 0) {
        unlink(path);
        rmdir(dir);
    }
}

/* The reader refuses a stored chunk larger than zlib's deflate can make of
 * a chunk before reading it; its bound must be zlib's own compressBound (the
 * reference: zlib, which HDF5's deflate filter writes with), or a chunk HDF5
 * wrote could be refused. Sizes: the chunks of 4- and 8-byte elements, and
 * others around the shifts of the formula. */
static void test_zlib_bound(void **state)
{
    (void)state;
    const size_t n[] = {0, 1, 4095, 4096, 16383, 16384, (size_t)SL_H5_CHUNK * 4, (size_t)SL_H5_CHUNK * 8,
                        ((size_t)1 << 25) - 1, (size_t)1 << 25, 123456789};
    for (size_t i = 0; i < sizeof(n) / sizeof(n[0]); i++)
        assert_int_equal(sl_zlib_bound(n[i]), compressBound((uLong)n[i]));
}

int main(int argc, char **argv)
{
    MPI_Init(&argc, &argv);
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_model_both_ways),
        cmocka_unit_test(test_other_layouts),
        cmocka_unit_test(test_zlib_bound),
    };
    int failed = cmocka_run_group_tests(tests, setup, teardown);
    MPI_Finalize();
    return failed ? 1 : 0;
}
