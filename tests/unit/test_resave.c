/* test_resave.c - a format 2 model with outcome quantities, loaded through
 * the library and saved again (sl_model_load, sl_model_save), is the same
 * file: every dataset, attribute and the fingerprint, compared independently
 * with h5py (tests/python/compare_models.py). And the quantities are copied
 * honestly: if the file the model was loaded from is replaced by another
 * model of the same shape (another turbine efficiency, so other energy
 * quantities) before the save, the save fails (SL_EDATA) and writes nothing. */
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

#include "sluice/sluice.h"

static sl_ctx *ctx_of(void **state) { return (sl_ctx *)*state; }

static int setup(void **state)
{
    sl_ctx *ctx = NULL;
    if (sl_ctx_new(MPI_COMM_WORLD, 0, &ctx) != SL_OK) return -1;
    *state = ctx;
    return 0;
}

static int teardown(void **state)
{
    sl_ctx *ctx = ctx_of(state);
    sl_ctx_free(&ctx);
    return 0;
}

static sl_status build(sl_ctx *ctx, double efficiency, const char *path)
{
    const char *names[4] = {"storage_levels", "inflow_classes", "release_levels", "efficiency"};
    const double values[4] = {7, 2, 3, efficiency};
    sl_model *m = NULL;
    sl_status st = sl_model_from_generator(ctx, SLUICE_SOURCE_DIR "/examples/reservoir.c", 4, names, values, &m);
    if (st == SL_OK) st = sl_model_save(m, path);
    sl_model_free(&m);
    return st;
}

static void test_resave(void **state)
{
    sl_ctx *ctx = ctx_of(state);
    const char *a = SLUICE_BINARY_DIR "/resave_a.h5", *b = SLUICE_BINARY_DIR "/resave_b.h5",
               *c = SLUICE_BINARY_DIR "/resave_c.h5", *d = SLUICE_BINARY_DIR "/resave_d.h5";
    remove(b);
    remove(d);
    assert_int_equal(build(ctx, 0.88, a), SL_OK);
    assert_int_equal(build(ctx, 0.8, c), SL_OK);
    sl_model *m = NULL;
    assert_int_equal(sl_model_load(ctx, a, &m), SL_OK);
    assert_true(sl_model_n_quantities(m) > 0);
    assert_int_equal(sl_model_save(m, b), SL_OK);
    char cmd[2048];
    snprintf(cmd, sizeof(cmd), "/usr/bin/python3 %s/tests/python/compare_models.py %s %s", SLUICE_SOURCE_DIR, a, b);
    assert_int_equal(system(cmd), 0);
    /* the source replaced by another model: the copy must not mix them */
    assert_int_equal(rename(c, a), 0);
    assert_int_equal(sl_model_save(m, d), SL_EDATA);
    fprintf(stderr, "expected failure: %s\n", sl_ctx_message(ctx));
    assert_non_null(strstr(sl_ctx_message(ctx), "changed since the model was loaded"));
    assert_int_not_equal(access(d, F_OK), 0);
    sl_model_free(&m);
}

int main(int argc, char **argv)
{
    MPI_Init(&argc, &argv);
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_resave),
    };
    int rc = cmocka_run_group_tests(tests, setup, teardown);
    MPI_Finalize();
    return rc;
}
