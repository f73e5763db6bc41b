/* ctx_fixture.h - the cmocka group fixture of the unit tests that use a
 * library context on MPI_COMM_WORLD: setup makes it, teardown frees it,
 * ctx_of gets it from the test's state. Included by one test file each. */
#ifndef SL_TEST_CTX_FIXTURE_H
#define SL_TEST_CTX_FIXTURE_H

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

#endif
