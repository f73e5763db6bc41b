/* test_kernel.c - the optimised sweep paths against the simple reference
 * path, on small random models (invented data) with and without a stage
 * factor, on 1 rank and (tests.cmake) 2 and 3 ranks:
 *  - the fixed-policy sweep over a policy's own contiguous rows
 *    (sl_sweep_rows) gives bitwise the iterates of the sweep over the
 *    model's rows (sl_sweep with eval), in every sweep order;
 *  - modified policy iteration (which sweeps over those rows once the
 *    policy is stable) and Gauss-Seidel agree within their certified
 *    bounds, and pick the same action wherever the best action leads the
 *    second by more than 1e-6 (checked against Q-values this test computes
 *    itself from the gathered values, outside the library);
 *  - a solve that takes the model's rows (sl_solver_solve_lean) gives
 *    bitwise the plain solve's answer. */
#define _POSIX_C_SOURCE 200809L
#include <math.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include <cmocka.h>

#include "model/model.h"
#include "solve/solve.h"

#include "ctx_fixture.h"

enum { FL = 3, FS = 4, FH = 5, NS = FL * FS * FH, MAXA = 3, MAXK = 4 };

typedef struct rows {
    int64_t first_pair[NS + 1];
    int32_t action[NS * MAXA];
    double reward[NS * MAXA];
    int64_t first_trans[NS * MAXA + 1];
    int64_t target[NS * MAXA * MAXK];
    double prob[NS * MAXA * MAXK];
} rows;

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

/* Random rows: 1-3 actions per state, 1-4 distinct successors, random
 * rewards and probabilities; with `repeat` 1, one probability vector per
 * number of successors (so they repeat, as an inflow distribution does);
 * with 2, two vectors of 3 or 4 successors that differ only after the
 * first entry (telling them apart needs the whole vector). */
static void make_rows_as(uint64_t seed, rows *r, int repeat)
{
    uint64_t s = seed;
    int64_t k = 0, t = 0;
    r->first_pair[0] = 0;
    r->first_trans[0] = 0;
    for (int64_t i = 0; i < NS; i++) {
        int na = 1 + (int)(next(&s) % MAXA);
        for (int a = 0; a < na; a++, k++) {
            r->action[k] = a;
            r->reward[k] = (double)(next(&s) % 1000) / 100.0 - 3.0;
            int nk = 1 + (int)(next(&s) % MAXK), got = 0;
            int64_t tg[MAXK];
            while (got < nk) {
                int64_t c = (int64_t)(next(&s) % NS), dup = 0;
                for (int j = 0; j < got; j++) dup |= tg[j] == c;
                if (!dup) tg[got++] = c;
            }
            qsort(tg, (size_t)nk, sizeof(int64_t), cmp_i64);
            double w[MAXK], sum = 0;
            int swap = repeat == 2 && nk >= 3 && next(&s) % 2;
            for (int j = 0; j < nk; j++)
                sum += w[j] = !repeat ? 1.0 + (double)(next(&s) % 97) : swap && (j == 1 || j == 2) ? 4.0 - j : 1.0 + j;
            double acc = 0;
            for (int j = 0; j < nk; j++, t++) {
                r->target[t] = tg[j];
                /* the last one takes the rest so the sum is 1 to roundoff */
                r->prob[t] = j + 1 < nk ? w[j] / sum : 1.0 - acc;
                acc += r->prob[t];
            }
            r->first_trans[k + 1] = t;
        }
        r->first_pair[i + 1] = k;
    }
}

static void make_rows(uint64_t seed, rows *r) { make_rows_as(seed, r, 0); }

/* The model on rank 0's rows (other ranks none); stage factor 1 or none. */
static sl_status make_model(sl_ctx *ctx, const rows *r, int stage, sl_model **m)
{
    const char *names[] = {"level", "season", "zone"};
    const int64_t sizes[] = {FL, FS, FH};
    sl_status st = sl_model_create(ctx, NS, 0.95, m);
    if (st != SL_OK) return st;
    if (sl_ctx_rank(ctx) == 0)
        st = sl_model_set_rows(*m, 0, NS, r->first_pair, r->action, r->reward, r->first_trans, r->target, r->prob);
    if (st == SL_OK) st = sl_model_set_factors(*m, 3, names, sizes, stage);
    sl_status sa = sl_model_assemble(*m);
    return st != SL_OK ? st : sa;
}

/* Transitions of the policy's pairs on this rank. */
static int64_t policy_transitions(const sl_problem *P, const int32_t *pol)
{
    int64_t nt = 0;
    for (int64_t i = 0; i < P->n_local; i++) {
        int64_t k = P->blk.first_pair[i] - P->blk.p_begin + pol[i];
        nt += P->blk.first_trans[k + 1] - P->blk.first_trans[k];
    }
    return nt;
}

/* The Jacobi form of the rows' sweep (sl_sweep_rows_jacobi) against the
 * fixed-policy check over the model's rows (sl_policy_check, which the
 * certificates use): y = T_pi x bitwise, x untouched, and the span of y - x
 * over all ranks. */
static void jacobi_rows_is_the_policy_check(sl_ctx *ctx, const sl_problem *P, double *x, const int32_t *pol,
                                            const sl_eval_rows *pr)
{
    int64_t n = P->n_local, nx = n + P->halo.n_halo;
    double *y1 = calloc((size_t)nx + 1, sizeof(double)), *y2 = calloc((size_t)nx + 1, sizeof(double));
    double *keep = calloc((size_t)nx + 1, sizeof(double));
    assert_non_null(y1);
    assert_non_null(y2);
    assert_non_null(keep);
    memcpy(keep, x, (size_t)n * sizeof(double));
    double span = sl_sweep_rows_jacobi(ctx, P, x, y2, pr); /* refreshes x's halo first */
    sl_halo_exchange(ctx, &P->halo, x); /* (the sweeps before left it stale) */
    sl_check c;
    memset(&c, 0, sizeof(c));
    sl_policy_check(P, x, y1, pol, &c);
    assert_memory_equal(keep, x, (size_t)n * sizeof(double));
    assert_memory_equal(y1, y2, (size_t)n * sizeof(double));
    double lo = n > 0 ? INFINITY : -INFINITY, hi = -INFINITY;
    for (int64_t i = 0; i < n; i++) {
        lo = fmin(lo, y1[i] - x[i]);
        hi = fmax(hi, y1[i] - x[i]);
    }
    double want = sl_max(ctx, hi) + sl_max(ctx, n > 0 ? -lo : -INFINITY);
    assert_memory_equal(&span, &want, sizeof(double));
    assert_true(span > 0);
    free(y1);
    free(y2);
    free(keep);
}

/* sl_sweep_rows == sl_sweep(eval) bitwise, over 6 sweeps, for every order,
 * with and without the stage factor, with probability vectors all
 * different (plain layout) and repeated (shared), and again after the rows
 * are updated for two changes of the policy. */
static void policy_rows_sweep_is_the_reference_sweep(void **state)
{
    sl_ctx *ctx = (sl_ctx *)*state;
    static rows r;
    const sl_order orders[] = {SL_ORDER_AUTO, SL_ORDER_NATURAL, SL_ORDER_REVERSE};
    for (int repeat = 0; repeat < 3; repeat++)
    for (int stage = -1; stage <= 1; stage += 2) {
        make_rows_as(7, &r, repeat);
        for (int o = 0; o < 3; o++) {
            sl_model *m = NULL;
            sl_problem P;
            sl_eval_rows pr;
            assert_int_equal(make_model(ctx, &r, stage, &m), SL_OK);
            assert_int_equal(sl_problem_from_model(ctx, m, orders[o], 0, &P), SL_OK);
            if (stage >= 0 && orders[o] == SL_ORDER_AUTO) assert_true(P.staged);
            int64_t n = P.n_local, nx = n + P.halo.n_halo;
            double *x = calloc((size_t)nx + 1, sizeof(double)), *x2 = calloc((size_t)nx + 1, sizeof(double));
            int32_t *pol = calloc((size_t)n + 1, sizeof(int32_t));
            assert_non_null(x);
            assert_non_null(x2);
            assert_non_null(pol);
            uint64_t s = 99 + (uint64_t)ctx->rank;
            for (int64_t i = 0; i < n; i++) {
                int64_t np = P.blk.first_pair[i + 1] - P.blk.first_pair[i];
                pol[i] = (int32_t)(next(&s) % (uint64_t)np);
                x[i] = x2[i] = (double)(next(&s) % 1000) / 7.0;
            }
            assert_int_equal(sl_eval_rows_build(ctx, &P, pol, &pr), SL_OK);
            /* the layout: shared where the vectors repeat (at most 10 or
             * 17 table entries, against a quarter of the transitions),
             * plain where they are all different */
            int64_t nvec = 0, nent = 0, most = repeat == 1 ? 10 : 17;
            if (repeat && policy_transitions(&P, pol) >= 4 * most) {
                assert_true(sl_eval_rows_shared(&pr, &nvec, &nent));
                assert_true(nvec <= (repeat == 1 ? 4 : 6) && nent <= most);
            }
            if (!repeat && n > 0) assert_false(sl_eval_rows_shared(&pr, NULL, NULL));
            for (int sw = 0; sw < 6; sw++) {
                double d1 = sl_sweep(ctx, &P, x, pol, 1);
                double d2 = sl_sweep_rows(ctx, &P, x2, &pr);
                assert_memory_equal(&d1, &d2, sizeof(double));
                assert_memory_equal(x, x2, (size_t)n * sizeof(double));
            }
            jacobi_rows_is_the_policy_check(ctx, &P, x, pol, &pr);
            assert_int_equal(pr.first[n], policy_transitions(&P, pol));
            /* updated in place after an improvement: round 0 changes only
             * to pairs of the same length (rows overwritten where they
             * stand), round 1 anywhere (rows laid out again) */
            for (int round = 0; round < 2; round++) {
                int64_t changed = 0;
                for (int64_t i = 0; i < n; i++) {
                    int64_t f = P.blk.first_pair[i] - P.blk.p_begin, np = P.blk.first_pair[i + 1] - P.blk.first_pair[i];
                    int32_t a = (int32_t)(next(&s) % (uint64_t)np);
                    int64_t la = P.blk.first_trans[f + a + 1] - P.blk.first_trans[f + a];
                    int64_t lp = P.blk.first_trans[f + pol[i] + 1] - P.blk.first_trans[f + pol[i]];
                    if (a != pol[i] && (round == 1 || la == lp)) {
                        pol[i] = a;
                        changed++;
                    }
                }
                uint32_t *first_before = round == 0 ? malloc(((size_t)n + 1) * sizeof(uint32_t)) : NULL;
                if (first_before) memcpy(first_before, pr.first, ((size_t)n + 1) * sizeof(uint32_t));
                assert_int_equal(sl_eval_rows_update(ctx, &P, pol, &pr), SL_OK);
                if (first_before) { /* same lengths: no row moved */
                    assert_memory_equal(first_before, pr.first, ((size_t)n + 1) * sizeof(uint32_t));
                    free(first_before);
                }
                assert_int_equal(pr.first[n], policy_transitions(&P, pol));
                for (int sw = 0; sw < 3; sw++) {
                    double d1 = sl_sweep(ctx, &P, x, pol, 1);
                    double d2 = sl_sweep_rows(ctx, &P, x2, &pr);
                    assert_memory_equal(&d1, &d2, sizeof(double));
                    assert_memory_equal(x, x2, (size_t)n * sizeof(double));
                }
                if (n > 4) assert_true(changed > 0);
            }
            sl_eval_rows_free(&pr);
            free(x);
            free(x2);
            free(pol);
            sl_problem_free(&P);
            sl_model_free(&m);
        }
    }
}

/* The table of distinct probability vectors: 300 vectors of 3 entries
 * that all begin alike (so equal hashes' neighbours are told apart by the
 * whole vector), their 2-entry prefixes (told apart by length), each found
 * again at its own offset with its own values; the limit refuses a new
 * vector and leaves the table as it was. */
static void probability_table_keeps_vectors_apart(void **state)
{
    sl_ctx *ctx = (sl_ctx *)*state;
    enum { NV = 300 };
    static double v[NV][3];
    static int64_t off[NV], off2[NV];
    sl_prob_table *t = sl_prob_table_reset(ctx, NULL);
    assert_non_null(t);
    for (int k = 0; k < NV; k++) {
        v[k][0] = 0.25;
        v[k][1] = 0.5 * (double)(k + 1) / (double)(NV + 1);
        v[k][2] = 0.75 - v[k][1];
        off[k] = sl_prob_table_find(ctx, t, v[k], 3, 1 << 20);
        assert_true(off[k] >= 0);
    }
    for (int k = 0; k < NV; k++) {
        off2[k] = sl_prob_table_find(ctx, t, v[k], 2, 1 << 20);
        assert_true(off2[k] >= 0);
    }
    const double *val = sl_prob_table_values(t);
    for (int k = 0; k < NV; k++) {
        assert_int_equal(sl_prob_table_find(ctx, t, v[k], 3, 1 << 20), off[k]);
        assert_int_equal(sl_prob_table_find(ctx, t, v[k], 2, 1 << 20), off2[k]);
        assert_memory_equal(val + off[k], v[k], 3 * sizeof(double));
        assert_memory_equal(val + off2[k], v[k], 2 * sizeof(double));
        for (int q = 0; q < k; q++) assert_true(off[q] != off[k] && off2[q] != off2[k] && off[q] != off2[k]);
    }
    double fresh[3] = {0.25, 0.7, 0.05};
    assert_int_equal(sl_prob_table_find(ctx, t, fresh, 3, NV * 5), -1);
    assert_int_equal(sl_prob_table_find(ctx, t, v[7], 3, NV * 5), off[7]); /* known ones still found */
    assert_true(sl_prob_table_find(ctx, t, fresh, 3, NV * 5 + 3) >= 0);
    /* reset: empty again */
    assert_ptr_equal(sl_prob_table_reset(ctx, t), t);
    assert_int_equal(sl_prob_table_find(ctx, t, v[9], 3, 1 << 20), 0);
    sl_prob_table_free(t);
}

/* mpi's adaptive m: doubles while at most one state in SL_MPI_M_SHARE
 * changed action (exactly at the share too), halves above it, and stays in
 * [SL_MPI_M_MIN, SL_MPI_M_MAX]. The values here are worked out by hand. */
static void mpi_m_follows_the_changed_share(void **state)
{
    (void)state;
    assert_int_equal(SL_MPI_M_SHARE, 1000);
    assert_int_equal(sl_mpi_next_m(4, 0, 300000), 8);
    assert_int_equal(sl_mpi_next_m(8, 300, 300000), 16);  /* 0.1%: still settled */
    assert_int_equal(sl_mpi_next_m(16, 301, 300000), 8);  /* above 0.1% */
    assert_int_equal(sl_mpi_next_m(4, 301, 300000), 4);   /* not below the minimum */
    assert_int_equal(sl_mpi_next_m(512, 0, 300000), 512); /* nor above the maximum */
    assert_int_equal(sl_mpi_next_m(256, 0, 300000), 512);
    assert_int_equal(sl_mpi_next_m(64, 1, 999), 32);      /* a small model: any change counts */
    assert_int_equal(sl_mpi_next_m(64, 0, 999), 128);
    assert_int_equal(SL_MPI_M_MIN, 4);
    assert_int_equal(SL_MPI_M_MAX, 512);
    /* the evaluation sweeps: the smaller measured rate, gs on a tie */
    assert_int_equal(sl_mpi_pick_eval(0.97, 0.88), SL_EVAL_JACOBI);
    assert_int_equal(sl_mpi_pick_eval(0.50, 0.50), SL_EVAL_GS);
    assert_int_equal(sl_mpi_pick_eval(0.0, 0.30), SL_EVAL_GS);
    assert_int_equal(sl_mpi_pick_eval(0.93, 0.0), SL_EVAL_JACOBI);
}

static sl_status solve(sl_ctx *ctx, const sl_model *m, sl_method method, sl_solution **x)
{
    sl_solver *s = NULL;
    sl_status st = sl_solver_create(ctx, &s);
    if (st == SL_OK) st = sl_solver_set_method(s, method);
    if (st == SL_OK) st = sl_solver_set_tolerance(s, 1e-9);
    if (st == SL_OK) st = sl_solver_solve(s, m, x);
    sl_solver_free(&s);
    return st;
}

/* mpi (evaluation over the policy's rows) against gs (the reference sweep) */
static void mpi_agrees_with_gs(void **state)
{
    sl_ctx *ctx = (sl_ctx *)*state;
    static rows r;
    make_rows(11, &r);
    for (int stage = -1; stage <= 1; stage += 2) {
        sl_model *m = NULL;
        sl_solution *xg = NULL, *xm = NULL;
        assert_int_equal(make_model(ctx, &r, stage, &m), SL_OK);
        assert_int_equal(solve(ctx, m, SL_METHOD_GS, &xg), SL_OK);
        assert_int_equal(solve(ctx, m, SL_METHOD_MPI, &xm), SL_OK);
        sl_certificate cg, cm;
        assert_int_equal(sl_solution_get_certificate(xg, &cg), SL_OK);
        assert_int_equal(sl_solution_get_certificate(xm, &cm), SL_OK);
        assert_true(cg.converged && cm.converged);
        /* staged: stage-reverse Gauss-Seidel evaluation; else as measured */
        if (stage >= 0) assert_string_equal(xm->info.evaluation, "gauss-seidel");
        else assert_true(strcmp(xm->info.evaluation, "gauss-seidel") == 0 || strcmp(xm->info.evaluation, "jacobi") == 0);
        double *vg = NULL, *vm = NULL;
        int32_t *ag = NULL, *am = NULL;
        assert_int_equal(sl_solution_gather(xg, 0, &vg, &ag), SL_OK);
        assert_int_equal(sl_solution_gather(xm, 0, &vm, &am), SL_OK);
        if (ctx->rank == 0) {
            int64_t compared = 0;
            for (int64_t i = 0; i < NS; i++) {
                assert_true(fabs(vg[i] - vm[i]) <= cg.value_error + cm.value_error + 1e-12);
                /* Q-values from the gs values, computed here */
                double best = -INFINITY, second = -INFINITY;
                int32_t arg = -1;
                for (int64_t k = r.first_pair[i]; k < r.first_pair[i + 1]; k++) {
                    double q = 0;
                    for (int64_t t = r.first_trans[k]; t < r.first_trans[k + 1]; t++) q += r.prob[t] * vg[r.target[t]];
                    q = r.reward[k] + 0.95 * q;
                    if (q > best) {
                        second = best;
                        best = q;
                        arg = r.action[k];
                    } else if (q > second) {
                        second = q;
                    }
                }
                if (best - second > 1e-6) {
                    assert_int_equal(am[i], arg);
                    assert_int_equal(ag[i], arg);
                    compared++;
                }
            }
            assert_true(compared > NS / 2);
        }
        free(vg);
        free(vm);
        free(ag);
        free(am);
        sl_solution_free(&xg);
        sl_solution_free(&xm);
        sl_model_free(&m);
    }
}

/* This rank's values and actions of xa and xb are bitwise the same. */
static void assert_same_solution(const sl_solution *xa, const sl_solution *xb)
{
    int64_t b1, n1, b2, n2;
    const double *v1, *v2;
    const int32_t *a1, *a2;
    assert_int_equal(sl_solution_get_local(xa, &b1, &n1, &v1, &a1), SL_OK);
    assert_int_equal(sl_solution_get_local(xb, &b2, &n2, &v2, &a2), SL_OK);
    assert_int_equal(b1, b2);
    assert_int_equal(n1, n2);
    assert_memory_equal(v1, v2, (size_t)n1 * sizeof(double));
    assert_memory_equal(a1, a2, (size_t)n1 * sizeof(int32_t));
}

/* sl_solver_solve_lean (rows taken, columns built over the targets) gives
 * bitwise the solution of sl_solver_solve, and the model refuses a second
 * solve instead of reading freed rows */
static void lean_solve_is_the_plain_solve(void **state)
{
    sl_ctx *ctx = (sl_ctx *)*state;
    static rows r;
    make_rows(23, &r);
    for (int stage = -1; stage <= 1; stage += 2) {
        for (int mi = 0; mi < 2; mi++) {
            sl_method meth = mi == 0 ? SL_METHOD_GS : SL_METHOD_MPI;
            sl_model *m = NULL;
            sl_solution *xa = NULL, *xb = NULL, *xc = NULL;
            sl_solver *s = NULL;
            assert_int_equal(make_model(ctx, &r, stage, &m), SL_OK);
            assert_int_equal(solve(ctx, m, meth, &xa), SL_OK);
            assert_int_equal(sl_solver_create(ctx, &s), SL_OK);
            assert_int_equal(sl_solver_set_method(s, meth), SL_OK);
            assert_int_equal(sl_solver_set_tolerance(s, 1e-9), SL_OK);
            assert_int_equal(sl_solver_solve_lean(s, m, &xb), SL_OK);
            assert_same_solution(xa, xb);
            /* the description is still there, the rows are not */
            assert_int_equal(sl_model_n_states(m), NS);
            assert_int_equal(sl_solver_solve(s, m, &xc), SL_EUSAGE);
            assert_null(xc);
            assert_non_null(strstr(sl_ctx_message(ctx), "handed to an earlier solve"));
            sl_solver_free(&s);
            sl_solution_free(&xa);
            sl_solution_free(&xb);
            sl_model_free(&m);
        }
    }
}

/* sl_model_load_staged: the rows read straight into the stage-interleaved
 * layout are bitwise the rows sl_model_load + the move between ranks make
 * (pairs, transitions, local columns, halo, partition), with the same
 * fingerprint; the solve is bitwise the same; the model refuses anything
 * but solving. Without a stage factor, or on one rank, it is a plain load. */
static void staged_load_is_the_moved_layout(void **state)
{
    sl_ctx *ctx = ctx_of(state);
    static rows r;
    make_rows(31, &r);
    char dir[] = "/tmp/sluice-kernel-XXXXXX", path[64];
    shared_tmpdir(dir);
    snprintf(path, sizeof(path), "%s/m.h5", dir);
    for (int stage = -1; stage <= 1; stage += 2) {
        sl_model *m = NULL, *plain = NULL, *staged = NULL;
        assert_int_equal(make_model(ctx, &r, stage, &m), SL_OK);
        assert_int_equal(sl_model_save(m, path), SL_OK);
        sl_model_free(&m);
        assert_int_equal(sl_model_load(ctx, path, &plain), SL_OK);
        assert_int_equal(sl_model_load_staged(ctx, path, &staged), SL_OK);
        assert_string_equal(sl_model_fingerprint(plain), sl_model_fingerprint(staged));
        int moved = stage >= 0 && ctx->size > 1;
        assert_int_equal(staged->staged != NULL, moved);
        sl_problem A, B;
        assert_int_equal(sl_problem_from_model(ctx, plain, SL_ORDER_AUTO, 0, &A), SL_OK);
        assert_int_equal(sl_problem_from_model(ctx, staged, SL_ORDER_AUTO, 0, &B), SL_OK);
        assert_int_equal(A.staged, B.staged);
        assert_memory_equal(A.bounds, B.bounds, (size_t)(ctx->size + 1) * sizeof(int64_t));
        const sl_block *a = &A.blk, *b = &B.blk;
        assert_int_equal(a->s_begin, b->s_begin);
        assert_int_equal(a->s_end, b->s_end);
        assert_int_equal(a->p_begin, b->p_begin);
        assert_int_equal(a->p_end, b->p_end);
        assert_int_equal(a->t_begin, b->t_begin);
        assert_int_equal(a->t_end, b->t_end);
        int64_t ns = sl_block_states(a), np = sl_block_pairs(a), nt = sl_block_trans(a);
        assert_memory_equal(a->first_pair, b->first_pair, (size_t)(ns + 1) * sizeof(int64_t));
        if (np > 0) {
            assert_memory_equal(a->action, b->action, (size_t)np * sizeof(int32_t));
            assert_memory_equal(a->reward, b->reward, (size_t)np * sizeof(double));
        }
        assert_memory_equal(a->first_trans, b->first_trans, (size_t)(np + 1) * sizeof(int64_t));
        if (nt > 0) {
            assert_memory_equal(a->col, b->col, (size_t)nt * sizeof(uint32_t));
            assert_memory_equal(a->prob, b->prob, (size_t)nt * sizeof(double));
        }
        assert_int_equal(A.halo.n_halo, B.halo.n_halo);
        if (A.halo.n_halo > 0)
            assert_memory_equal(A.halo.halo_global, B.halo.halo_global, (size_t)A.halo.n_halo * sizeof(int64_t));
        sl_problem_free(&A);
        sl_problem_free(&B);
        /* the whole solve, the lean one on the staged model */
        sl_solution *xa = NULL, *xb = NULL;
        sl_solver *s = NULL;
        assert_int_equal(solve(ctx, plain, SL_METHOD_GS, &xa), SL_OK);
        assert_int_equal(sl_solver_create(ctx, &s), SL_OK);
        assert_int_equal(sl_solver_set_method(s, SL_METHOD_GS), SL_OK);
        assert_int_equal(sl_solver_set_tolerance(s, 1e-9), SL_OK);
        if (moved) {
            /* anything that would read the rows in the file's layout is refused */
            assert_int_equal(sl_model_save(staged, path), SL_EUSAGE);
            assert_non_null(strstr(sl_ctx_message(ctx), "discounted solve's layout"));
        }
        assert_int_equal(sl_solver_solve_lean(s, staged, &xb), SL_OK);
        assert_same_solution(xa, xb);
        sl_solver_free(&s);
        sl_solution_free(&xa);
        sl_solution_free(&xb);
        sl_model_free(&plain);
        sl_model_free(&staged);
    }
    MPI_Barrier(MPI_COMM_WORLD);
    if (ctx->rank == 0) {
        remove(path);
        rmdir(dir);
    }
}

int main(void)
{
    MPI_Init(NULL, NULL);
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(policy_rows_sweep_is_the_reference_sweep),
        cmocka_unit_test(probability_table_keeps_vectors_apart),
        cmocka_unit_test(mpi_m_follows_the_changed_share),
        cmocka_unit_test(mpi_agrees_with_gs),
        cmocka_unit_test(lean_solve_is_the_plain_solve),
        cmocka_unit_test(staged_load_is_the_moved_layout),
    };
    int rc = cmocka_run_group_tests(tests, setup, teardown);
    MPI_Finalize();
    return rc;
}
