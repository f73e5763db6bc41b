/* pond.c - the library without files: build a model in memory, solve it,
 * read the values, the policy and the certificate back.
 *
 * The scenario (invented): the Loma pumped-storage pond holds 0..L units of
 * water. Each period the operator may hold, pump one unit up (costs 3 kCU,
 * succeeds with probability 0.9) or release one unit through the turbine
 * (earns 5 kCU). A storm adds one unit with probability 0.2; water above L
 * spills. Discount 0.95 per period.
 *
 *   mpirun -np 2 ./pond [LEVELS] [MODEL.h5 SOLUTION.h5]
 *
 * Every rank contributes its own range of states (rows); the printout
 * (rank 0) is one line per state: state, action name, value. */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <sluice/sluice.h>

enum { HOLD = 0, PUMP = 1, RELEASE = 2 };

/* successors of (level, action), ascending and merged (the model contract):
 * at most 4 (target, probability) entries */
static int successors(int64_t level, int action, int64_t top, int64_t *tgt, double *p)
{
    double mass[4] = {0, 0, 0, 0}; /* next levels level-1 .. level+2 */
    int64_t after[2];
    double pa[2];
    int na = 1;
    after[0] = action == RELEASE ? level - 1 : level;
    pa[0] = 1.0;
    if (action == PUMP) {
        after[0] = level + 1 > top ? top : level + 1;
        pa[0] = 0.9;
        after[1] = level;
        pa[1] = 0.1;
        na = 2;
    }
    for (int i = 0; i < na; i++) {
        int64_t wet = after[i] + 1 > top ? top : after[i] + 1;  /* a storm adds a unit; the rest spills */
        mass[after[i] - level + 1] += pa[i] * 0.8;
        mass[wet - level + 1] += pa[i] * 0.2;
    }
    int n = 0;
    for (int d = 0; d < 4; d++)
        if (mass[d] > 0) {
            tgt[n] = level - 1 + d;
            p[n++] = mass[d];
        }
    return n;
}

int main(int argc, char **argv)
{
    MPI_Init(&argc, &argv);
    sl_ctx *ctx = NULL;
    sl_model *m = NULL;
    sl_solver *s = NULL;
    sl_solution *x = NULL;
    int64_t *first_pair = NULL, *first_trans = NULL, *target = NULL;
    int32_t *action = NULL;
    double *reward = NULL, *prob = NULL, *value = NULL;
    int32_t *policy = NULL;
    sl_status st = SL_OK;
    int64_t levels = argc > 1 ? atoll(argv[1]) : 5;
    if (levels < 2) levels = 2;
    int64_t top = levels - 1;

    if ((st = sl_ctx_new(MPI_COMM_WORLD, 0, &ctx)) != SL_OK) goto done;
    int rank = sl_ctx_rank(ctx), size = sl_ctx_size(ctx);
    int64_t s0 = levels * rank / size, s1 = levels * (rank + 1) / size, ns = s1 - s0;

    /* this rank's rows, offsets local from 0 */
    first_pair = calloc((size_t)ns + 1, sizeof(*first_pair));
    action = calloc((size_t)ns * 3, sizeof(*action));
    reward = calloc((size_t)ns * 3, sizeof(*reward));
    first_trans = calloc((size_t)ns * 3 + 1, sizeof(*first_trans));
    target = calloc((size_t)ns * 12, sizeof(*target));
    prob = calloc((size_t)ns * 12, sizeof(*prob));
    if (!first_pair || !action || !reward || !first_trans || !target || !prob) {
        fprintf(stderr, "pond: out of memory\n");
        st = SL_ENOMEM;
        goto done;
    }
    int64_t k = 0, t = 0;
    for (int64_t lv = s0; lv < s1; lv++) {
        for (int a = HOLD; a <= RELEASE; a++) {
            if (a == PUMP && lv == top) continue;     /* nothing to pump into */
            if (a == RELEASE && lv == 0) continue;    /* nothing to release */
            action[k] = a;
            reward[k] = a == PUMP ? -3.0 : a == RELEASE ? 5.0 : 0.0;
            t += successors(lv, a, top, target + t, prob + t);
            first_trans[++k] = t;
        }
        first_pair[lv - s0 + 1] = k;
    }
    const char *names[] = {"hold", "pump", "release"};
    if ((st = sl_model_create(ctx, levels, 0.95, &m)) != SL_OK) goto done;
    if (ns > 0 && (st = sl_model_set_rows(m, s0, s1, first_pair, action, reward, first_trans, target, prob)) != SL_OK)
        goto done;
    if ((st = sl_model_set_action_names(m, 3, names)) != SL_OK) goto done;
    if ((st = sl_model_assemble(m)) != SL_OK) goto done;

    if ((st = sl_solver_create(ctx, &s)) != SL_OK) goto done;
    if ((st = sl_solver_set_method(s, SL_METHOD_GS)) != SL_OK) goto done;
    if ((st = sl_solver_set_tolerance(s, 1e-10)) != SL_OK) goto done;
    if ((st = sl_solver_solve(s, m, &x)) != SL_OK) goto done;

    sl_certificate c;
    sl_solution_get_certificate(x, &c);
    if ((st = sl_solution_gather(x, 0, &value, &policy)) != SL_OK) goto done;
    if (rank == 0) {
        printf("# fingerprint %s certified %d value_error %.3e policy_loss %.3e\n", sl_model_fingerprint(m),
               c.converged, c.value_error, c.policy_loss);
        for (int64_t i = 0; i < levels; i++)
            printf("%lld,%s,%.12f\n", (long long)i, sl_model_action_name(m, policy[i]), value[i]);
    }
    if (argc > 3) {
        if ((st = sl_model_save(m, argv[2])) != SL_OK) goto done;
        if ((st = sl_solution_save(x, argv[3])) != SL_OK) goto done;
    }
done:
    if (st != SL_OK && ctx != NULL && sl_ctx_rank(ctx) == 0) fprintf(stderr, "pond: %s\n", sl_ctx_message(ctx));
    free(first_pair);
    free(action);
    free(reward);
    free(first_trans);
    free(target);
    free(prob);
    free(value);
    free(policy);
    sl_solution_free(&x);
    sl_solver_free(&s);
    sl_model_free(&m);
    sl_ctx_free(&ctx);
    MPI_Finalize();
    return (int)st;
}
