/* ctx_fixture.h - the cmocka group fixture of the unit tests that use a
 * library context on MPI_COMM_WORLD: setup makes it, teardown frees it,
 * ctx_of gets it from the test's state; shared_tmpdir makes a directory of
 * the run's own for every rank. Included by one test file each. */
#ifndef SL_TEST_CTX_FIXTURE_H
#define SL_TEST_CTX_FIXTURE_H

#include <string.h>

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

/* dir: a mkdtemp template; rank 0 makes the directory and every rank gets
 * its name (unit and mpi_unit runs of one test go side by side under ctest
 * -j2, so fixed file names would collide) */
static inline void shared_tmpdir(char *dir)
{
    int rank;
    MPI_Comm_rank(MPI_COMM_WORLD, &rank);
    if (rank == 0) assert_non_null(mkdtemp(dir));
    MPI_Bcast(dir, (int)strlen(dir) + 1, MPI_CHAR, 0, MPI_COMM_WORLD);
}

#endif
