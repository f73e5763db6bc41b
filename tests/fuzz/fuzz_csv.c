/* fuzz_csv.c - libFuzzer target: arbitrary bytes into the triplet and experience readers.
 *
 * Build with clang through the MPI compiler wrapper (OMPI_CC=clang mpicc),
 * flags -fsanitize=fuzzer,address,undefined, the include directories src/
 * and include/ and those of hdf5-openmpi, linking this file with the library
 * sources of src/core, src/model, src/input (csv.c, import.c, estimate.c)
 * and src/store. Seeds: a selector byte (below) followed by the contents of
 * a tests/data/csv_*.csv file.
 *
 * The first input byte picks the reader and options; with bit 1 set the
 * expected header is prepended so that most inputs reach the data rows.
 * Oracles beyond the sanitizers: an accepted input must give a block that
 * passes sl_block_validate with consistent sizes; a rejected one must fail
 * with a data/usage status and a message naming the input.
 */
#define _POSIX_C_SOURCE 200809L
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "input/csv.h"

int LLVMFuzzerInitialize(int *argc, char ***argv);
int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

/* libFuzzer passes no user pointer: the one context of this process. The
 * readers are local (no communication), so the context is filled in by hand
 * for a single process instead of through MPI_Init and sl_ctx_new: MPI's own
 * start-up allocations and helper threads would otherwise show up in the
 * per-input leak checks. */
static sl_ctx fuzz_ctx;

int LLVMFuzzerInitialize(int *argc, char ***argv)
{
    (void)argc;
    (void)argv;
    memset(&fuzz_ctx, 0, sizeof(fuzz_ctx));
    fuzz_ctx.comm = MPI_COMM_NULL;
    fuzz_ctx.rank = 0;
    fuzz_ctx.size = 1;
    fuzz_ctx.verbosity = 0;
    fuzz_ctx.log = NULL;
    return 0;
}

static void check_result(sl_ctx *ctx, sl_status st, const sl_meta *m, const sl_block *b,
                         double tol)
{
    if (st == SL_OK) {
        if (m->n_states < 1 || sl_block_states(b) != m->n_states ||
            sl_block_pairs(b) != m->n_pairs || sl_block_trans(b) != m->n_trans ||
            m->n_pairs < m->n_states || m->n_trans < m->n_pairs)
            abort();
        if (sl_block_validate(ctx, b, m, tol, "fuzz") != SL_OK) {
            fprintf(stderr, "accepted input gives an invalid block: %s\n", sl_ctx_message(ctx));
            abort();
        }
        return;
    }
    const char *msg = sl_ctx_message(ctx);
    if (st != SL_EDATA && st != SL_EUSAGE && st != SL_ENOMEM) {
        fprintf(stderr, "unexpected status %d: %s\n", (int)st, msg);
        abort();
    }
    if (st == SL_EDATA && strncmp(msg, "fz.csv:", 7) != 0) {
        fprintf(stderr, "message does not name the input: %s\n", msg);
        abort();
    }
    if (b->first_pair != NULL || b->target != NULL) abort(); /* left empty on failure */
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    if (size < 1) return 0;
    const unsigned sel = data[0];
    const int experience = sel & 1, with_header = (sel >> 1) & 1;
    const char *header = experience ? "state,action,reward,next_state\n"
                                    : "state,action,next_state,probability,reward\n";
    size_t hl = with_header ? strlen(header) : 0, n = size - 1 + hl;
    char *text = malloc(n + 1);
    if (text == NULL) return 0;
    memcpy(text, header, hl);
    memcpy(text + hl, data + 1, size - 1);
    FILE *fp = fmemopen(text, n, "r");
    if (fp == NULL) {
        free(text);
        return 0;
    }
    sl_ctx *ctx = &fuzz_ctx;
    sl_meta m;
    sl_block b;
    sl_status st;
    /* a fixed state count keeps unseen-absorbing models small */
    const int64_t n_states = (sel >> 2) & 1 ? 16 : 0;
    if (experience) {
        sl_estimate_opts o;
        memset(&o, 0, sizeof(o));
        o.discount = 0.9;
        o.n_states = n_states;
        o.min_visits = (sel >> 3) & 3;
        o.unseen_absorb = n_states > 0 && ((sel >> 5) & 1);
        int64_t dropped = 0, absorbed = 0;
        st = sl_csv_read_experience(ctx, fp, "fz.csv", &o, &m, &b, &dropped, &absorbed);
    } else {
        sl_import_opts o;
        memset(&o, 0, sizeof(o));
        o.discount = 0.9;
        o.n_states = n_states;
        o.renormalize = (sel >> 3) & 1;
        o.prob_tolerance = (sel >> 4) & 1 ? 1e-6 : 0.0;
        st = sl_csv_read_triplets(ctx, fp, "fz.csv", &o, &m, &b);
    }
    check_result(ctx, st, &m, &b, 1e-6);
    sl_error_clear(ctx);
    sl_block_free(&b);
    sl_meta_free(&m);
    fclose(fp);
    free(text);
    return 0;
}
