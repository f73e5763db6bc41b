/* objectives.c - finite horizon (backward induction), total reward to
 * absorption (value iteration with a certified bound on the expected time to
 * absorption) and average reward (relative value iteration with the
 * aperiodicity transform), each with its certificate. docs/objectives.md. */
#include <float.h>
#include <math.h>
#include <string.h>

#include "solve/objectives.h"

/* ---- loading ------------------------------------------------------------------ */

sl_status sl_problem_from_model_any(sl_ctx *ctx, const sl_model *m, const char *path, sl_order order,
                                    sl_problem *p)
{
    sl_status st = SL_OK;
    const sl_meta *mm = &m->meta;
    memset(p, 0, sizeof(*p));
    if (mm->objective == SL_OBJ_FINITE && !(mm->discount > 0.0 && mm->discount <= 1.0))
        st = SL_ERR(ctx, SL_EDATA, "%s: discount %g is not in (0, 1] as the finite-horizon objective requires", path,
                    mm->discount);
    else if (mm->objective == SL_OBJ_TOTAL && mm->discount != 1.0)
        st = SL_ERR(ctx, SL_EDATA,
                    "%s: the total-reward objective sums rewards undiscounted, but the model records discount %g "
                    "(rebuild with --discount 1, or use --objective discounted)",
                    path, mm->discount);
    SL_TRY(sl_agree(ctx, st));
    SL_TRY(sl_problem_from_model(ctx, m, order, 1, p));
    p->path = path;
    /* sl_problem_from_model keeps the file layout when allow_any is set (no
     * stage-interleaved renumbering), which the file I/O here assumes */
    p->gamma = mm->objective == SL_OBJ_AVERAGE ? 1.0 : mm->discount;
cleanup:
    return st;
}

/* ---- shared helpers ----------------------------------------------------------- */

/* Largest number of successors of any pair. Collective. */
static int64_t max_successors(sl_ctx *ctx, const sl_problem *p)
{
    const sl_block *b = &p->blk;
    int64_t m = 1;
    for (int64_t k = 0; k < sl_block_pairs(b); k++) {
        int64_t c = b->first_trans[k + 1] - b->first_trans[k];
        if (c > m) m = c;
    }
    return (int64_t)sl_max(ctx, (double)m);
}

/* Roundoff allowance of one computed backup r + g sum_j p_j x_j with m
 * terms (Higham 2002, "Accuracy and Stability of Numerical Algorithms",
 * 2nd ed., Section 3.1, inner products: error <= gamma_m sum |p_j x_j|,
 * gamma_m = m u / (1 - m u); recalled from memory), plus the relative
 * 1e-13 tie margin the greedy choice allows itself (kernel.c). */
static double backup_roundoff(int64_t m, double rmax, double g, double xmax)
{
    double u = 0.5 * DBL_EPSILON, k = (double)(m + 3);
    double gm = k * u / (1.0 - k * u);
    return 1.01 * gm * (rmax + g * xmax) + 2e-13 * (rmax + g * xmax);
}

static double local_absmax(const double *x, int64_t n)
{
    double m = 0;
    for (int64_t i = 0; i < n; i++)
        if (fabs(x[i]) > m) m = fabs(x[i]);
    return m;
}

/* q(s,a) for local pair k with discount g. */
static inline double q_pair(const sl_block *b, int64_t k, const double *x, double g)
{
    int64_t t0 = b->first_trans[k] - b->t_begin, t1 = b->first_trans[k + 1] - b->t_begin;
    double acc = 0.0;
    for (int64_t t = t0; t < t1; t++) acc += b->prob[t] * x[b->col[t]];
    return b->reward[k] + g * acc;
}

void sl_obj_result_free(sl_obj_result *r)
{
    if (r == NULL) return;
    free(r->value);
    free(r->policy);
    free(r->steps);
    memset(r, 0, sizeof(*r));
}

/* Checkpoint / stop decision at an iteration boundary, agreed across
 * ranks: 0 nothing, 1 checkpoint, 2 checkpoint and stop. */
static int poll_stop(sl_ctx *ctx, const sl_obj_opts *o, double t0, double *last_ckpt)
{
    int want = 0;
    double now = sl_now();
    if (ctx->signal_flag && *ctx->signal_flag) {
        want = *ctx->signal_flag >= 2 ? 2 : 1;
        if (want == 1) *ctx->signal_flag = 0;
    }
    double every = o->checkpoint_every > 0 ? o->checkpoint_every : 600.0;
    if (o->checkpoint_dir && now - *last_ckpt >= every && want < 1) want = 1;
    if (o->walltime > 0) {
        /* same margin rule as the discounted solver (common practice, no source) */
        double margin = fmax(10.0, 0.05 * o->walltime);
        if (o->walltime < 60) margin = fmin(margin, 0.2 * o->walltime);
        if (now - t0 >= o->walltime - margin) want = 2;
    }
    int agreed = 0;
    MPI_Allreduce(&want, &agreed, 1, MPI_INT, MPI_MAX, ctx->comm);
    if (agreed) *last_ckpt = now;
    return agreed;
}

/* The checkpoints of the total and average objectives (value iteration,
 * relative value iteration and policy iteration alike): the ordinary
 * ckpt-NNNNNN.h5 files of sl_ckpt_write (atomic, the newest two kept),
 * values of the owned states, the policy as action ids, and the solver
 * state whose method says who wrote it ("total", "average", "pi-total",
 * "pi-average"). acts is scratch of n_local + 1. Collective. */
static sl_status obj_ckpt_save(sl_ctx *ctx, const sl_problem *p, const sl_obj_opts *o, const char *method,
                               const double *value, const int32_t *policy, int32_t *acts, sl_solver_state *S,
                               const sl_history *hist)
{
    sl_policy_actions(p, policy, acts);
    snprintf(S->method, sizeof(S->method), "%s", method);
    return sl_ckpt_write(ctx, o->checkpoint_dir, o->fingerprint, p->meta.n_states, p->blk.s_begin, p->n_local, value,
                         acts, S, hist);
}

/* The newest usable checkpoint of o->checkpoint_dir into value, policy
 * (pair offsets), *S and *hist; *found = 0 when there is none (nothing
 * changed then). A checkpoint of another model or objective is refused
 * (SL_EDATA, by its fingerprint). acts is scratch of n_local + 1.
 * Collective. */
static sl_status obj_ckpt_resume(sl_ctx *ctx, const sl_problem *p, const sl_obj_opts *o, double *value,
                                 int32_t *policy, int32_t *acts, sl_solver_state *S, sl_history *hist, int *found)
{
    sl_status st = SL_OK;
    SL_TRY(sl_ckpt_load(ctx, o->checkpoint_dir, o->fingerprint, p->meta.n_states, p->blk.s_begin, p->n_local, value,
                        acts, S, hist, found));
    if (*found) SL_TRY(sl_agree(ctx, sl_policy_offsets(ctx, p, acts, policy, o->checkpoint_dir)));
cleanup:
    return st;
}

/* ---- finite horizon ----------------------------------------------------------- */

/* Per-stage residuals of stored stage values: e*_t = sup |T V_{t+1} - V_t|
 * and e_pi_t = sup |T_{pi_t} V_{t+1} - V_t|, each widened by the roundoff
 * of computing them. |V_0 - V*_0| <= sum_t g^t e*_t and
 * |V_0 - V^pi_0| <= sum_t g^t e_pi_t (T and T_pi are g-Lipschitz in the
 * sup norm), so V*_0 - V^pi_0 <= both sums added. */
sl_status sl_obj_certify_finite(sl_ctx *ctx, const sl_problem *p, int64_t H, double *V, const int32_t *policy,
                                sl_obj_cert *c)
{
    sl_status st = SL_OK;
    int64_t n = p->n_local, nx = n + p->halo.n_halo, m = max_successors(ctx, p);
    double *x = NULL;
    if (SL_ZALLOC(ctx, x, nx, "stage values") == NULL) st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    const sl_block *b = &p->blk;
    double g = p->gamma, gt = 1.0, verr = 0, perr = 0, rmin = INFINITY, rmax = -INFINITY, fpsum = 0;
    for (int64_t t = 0; t < H; t++) {
        memcpy(x, V + (t + 1) * n, (size_t)n * sizeof(double));
        SL_TRY(sl_halo_exchange(ctx, &p->halo, x));
        double xmax = sl_max(ctx, local_absmax(x, nx));
        double fp = backup_roundoff(m, p->rmax_abs, g, xmax);
        double es = 0, ep = 0;
        for (int64_t i = 0; i < n; i++) {
            int64_t p0 = b->first_pair[i] - b->p_begin, p1 = b->first_pair[i + 1] - b->p_begin;
            double best = -INFINITY;
            for (int64_t k = p0; k < p1; k++) best = fmax(best, q_pair(b, k, x, g));
            double qp = q_pair(b, p0 + policy[t * n + i], x, g), vt = V[t * n + i];
            double d = best - vt;
            if (!isfinite(d) || !isfinite(qp - vt)) {
                es = ep = INFINITY;
                continue;
            }
            es = fmax(es, fabs(d));
            ep = fmax(ep, fabs(qp - vt));
            if (t == 0) {
                rmin = fmin(rmin, d);
                rmax = fmax(rmax, d);
            }
        }
        es = sl_max(ctx, es) + fp;
        ep = sl_max(ctx, ep) + fp;
        verr += gt * es;
        perr += gt * ep;
        fpsum += gt * fp;
        gt *= g;
    }
    memset(c, 0, sizeof(*c));
    c->residual_min = sl_min(ctx, rmin);
    c->residual_max = sl_max(ctx, rmax);
    c->residual_sup = fmax(fabs(c->residual_min), fabs(c->residual_max));
    c->value_error_bound = verr;
    c->policy_loss_bound = verr + perr;
    c->roundoff = fpsum;
    c->iterations = H;
    c->sweeps = H;
    c->converged = 1;
cleanup:
    free(x);
    return st;
}

/* Backward induction V_t = T V_{t+1}, V_H = terminal. The computed V_t
 * differs from the exact backup of the computed V_{t+1} by at most the
 * roundoff allowance fp_t, hence |V_0 - V*_0| <= sum_t g^t fp_t; the
 * certificate is then recomputed from the stored stages
 * (sl_obj_certify_finite), exactly as verify does. */
static sl_status solve_finite(sl_ctx *ctx, const sl_problem *p, const sl_obj_opts *o, sl_obj_result *res)
{
    sl_status st = SL_OK;
    int64_t n = p->n_local, nx = n + p->halo.n_halo, H = o->horizon;
    double *x = NULL, *y = NULL;
    int32_t *actions = NULL;
    if (H < 1) return SL_ERR(ctx, SL_EUSAGE, "%s: the finite-horizon objective needs --horizon H (H >= 1)", p->path);
    if ((double)n * (double)(H + 1) * 12.0 > 0.8 * sl_physical_memory() && sl_physical_memory() > 0)
        st = SL_ERR(ctx, SL_ENOMEM,
                    "%s: %lld stages of %lld states need %.2f GB on this rank for the stage values and policy; "
                    "run on more ranks or shorten the horizon",
                    p->path, (long long)H, (long long)n, (double)n * (double)(H + 1) * 12.0 / 1e9);
    SL_TRY(sl_agree(ctx, st));
    if (SL_ZALLOC(ctx, res->value, (H + 1) * n, "stage values") == NULL ||
        SL_ZALLOC(ctx, res->policy, H * n, "stage policy") == NULL || SL_ZALLOC(ctx, x, nx, "values") == NULL ||
        SL_ZALLOC(ctx, y, nx, "values") == NULL || SL_ZALLOC(ctx, actions, n, "policy") == NULL)
        st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    res->horizon = H;
    if (o->terminal) memcpy(res->value + H * n, o->terminal, (size_t)n * sizeof(double));
    int64_t t = H; /* V_t .. V_H are known */
    char ck[4200] = "";
    if (o->checkpoint_dir) snprintf(ck, sizeof(ck), "%s/%s", o->checkpoint_dir, SL_FINITE_CKPT);
    if (o->resume && o->checkpoint_dir) {
        /* stages first..H from the checkpoint, if it is ours */
        int exists = 0;
        if (ctx->rank == 0) {
            FILE *f = fopen(ck, "rb");
            exists = f != NULL;
            if (f) fclose(f);
        }
        MPI_Bcast(&exists, 1, MPI_INT, 0, ctx->comm);
        if (exists) {
            sl_obj_file xf;
            sl_solution_record info;
            memset(&xf, 0, sizeof(xf));
            st = sl_store_solution_read(ctx, ck, SL_FILE_SOLUTION, p->meta.n_states, p->blk.s_begin, n, NULL, NULL,
                                        &info);
            if (st == SL_OK) st = sl_store_objective_read(ctx, ck, p->meta.n_states, p->blk.s_begin, n, &xf);
            if (st == SL_OK && (strcmp(info.model_fingerprint, p->meta.fingerprint) != 0 || xf.horizon != H ||
                                xf.objective != SL_OBJ_FINITE))
                st = SL_ERR(ctx, SL_EDATA,
                            "%s: checkpoint belongs to another model or horizon (horizon %lld, asked %lld); "
                            "remove it or use another --checkpoint directory",
                            ck, (long long)xf.horizon, (long long)H);
            if (st == SL_OK) {
                int64_t f0 = xf.first_stage;
                /* the terminal stage must be the one asked for now */
                for (int64_t i = 0; i < n && st == SL_OK; i++)
                    if (xf.stage_value[(H - f0) * n + i] != res->value[H * n + i])
                        st = SL_ERR(ctx, SL_EDATA,
                                    "%s: state %lld: checkpoint's terminal value differs from the one given now", ck,
                                    (long long)(p->blk.s_begin + i));
                st = sl_agree(ctx, st);
                for (int64_t s = f0; s <= H && st == SL_OK; s++)
                    memcpy(res->value + s * n, xf.stage_value + (s - f0) * n, (size_t)n * sizeof(double));
                for (int64_t s = f0; s < H && st == SL_OK; s++)
                    st = sl_policy_offsets(ctx, p, xf.stage_action + (s - f0) * n, res->policy + s * n, ck);
                if (st == SL_OK) t = f0;
            }
            sl_obj_file_free(&xf);
            SL_TRY(sl_agree(ctx, st));
            sl_log(ctx, "solve: resumed backward induction at stage %lld of %lld", (long long)t, (long long)H);
        }
    }
    double t0 = sl_now(), last_ckpt = t0;
    sl_log(ctx, "solve: backward induction over %lld stages (discount %g)", (long long)H, p->gamma);
    while (t > 0) {
        memcpy(x, res->value + t * n, (size_t)n * sizeof(double));
        SL_TRY(sl_halo_exchange(ctx, &p->halo, x));
        int32_t *pol = res->policy + (t - 1) * n;
        sl_check c;
        sl_bellman_check(p, x, y, pol, &c);
        memcpy(res->value + (t - 1) * n, y, (size_t)n * sizeof(double));
        t--;
        res->cert.sweeps++;
        int pr = poll_stop(ctx, o, t0, &last_ckpt);
        if (o->max_iterations > 0 && res->cert.sweeps >= o->max_iterations && t > 0) pr = 2;
        if ((pr >= 1 || t == 0) && o->checkpoint_dir && !(t == 0 && pr == 0)) {
            sl_obj_file xf;
            sl_solution_record info;
            memset(&xf, 0, sizeof(xf));
            memset(&info, 0, sizeof(info));
            int32_t *acts = NULL;
            if (SL_ALLOC(ctx, acts, (H - t) * n + 1, "policy") == NULL) st = SL_ENOMEM;
            SL_TRY(sl_agree(ctx, st));
            for (int64_t s = t; s < H; s++) sl_policy_actions(p, res->policy + s * n, acts + (s - t) * n);
            snprintf(info.model_fingerprint, sizeof(info.model_fingerprint), "%s", p->meta.fingerprint);
            snprintf(info.method, sizeof(info.method), "backward");
            info.iterations = H - t;
            info.discount = p->gamma;
            xf.objective = SL_OBJ_FINITE;
            xf.horizon = H;
            xf.first_stage = t;
            xf.stage_value = res->value + t * n;
            xf.stage_action = acts;
            st = sl_store_objective_write(ctx, ck, p->meta.n_states, p->blk.s_begin, n, res->value + t * n,
                                          t < H ? acts : NULL, &info, &xf);
            free(acts);
            SL_TRY(st);
            sl_log(ctx, "solve: checkpoint of stages %lld..%lld written to %s", (long long)t, (long long)H, ck);
        }
        if (pr == 2 && t > 0) {
            res->cert.converged = 0;
            if (o->checkpoint_dir)
                st = SL_ERR(ctx, SL_ESTOPPED,
                            "stopped at stage %lld of %lld; stages %lld..%lld are in %s (continue with --resume); "
                            "no solution file is written for an unfinished horizon",
                            (long long)t, (long long)H, (long long)t, (long long)H, ck);
            else
                st = SL_ERR(ctx, SL_ESTOPPED,
                            "stopped at stage %lld of %lld without --checkpoint: the computed stages are lost and "
                            "no solution file is written",
                            (long long)t, (long long)H);
            sl_warn(ctx, "%s", ctx->err); /* the CLI prints nothing itself for exit 75 */
            goto cleanup;
        }
    }
    SL_TRY(sl_obj_certify_finite(ctx, p, H, res->value, res->policy, &res->cert));
    res->cert.converged = 1;
cleanup:
    free(x);
    free(y);
    free(actions);
    return st;
}

/* ---- total reward ------------------------------------------------------------- */

/* Absorbing: every action returns to the state with probability 1 and
 * reward 0. flag[i] = 1 for absorbing owned states. Local. */
int64_t sl_obj_find_absorbing(const sl_problem *p, char *flag)
{
    const sl_block *b = &p->blk;
    int64_t count = 0;
    for (int64_t i = 0; i < p->n_local; i++) {
        int64_t p0 = b->first_pair[i] - b->p_begin, p1 = b->first_pair[i + 1] - b->p_begin;
        int abs = 1;
        for (int64_t k = p0; k < p1 && abs; k++) {
            int64_t t0 = b->first_trans[k] - b->t_begin, t1 = b->first_trans[k + 1] - b->t_begin;
            abs = t1 - t0 == 1 && b->col[t0] == (uint32_t)i && b->prob[t0] == 1.0 && b->reward[k] == 0.0;
        }
        flag[i] = (char)abs;
        count += abs;
    }
    return count;
}

/* Graph test for improper policies. E = the largest set of non-absorbing
 * states in which every state has an action whose successors all lie in E
 * (a policy can stay in E forever); R = states that can reach E with
 * positive probability. A state has an improper policy iff it is in R:
 * if some policy never absorbs with positive probability, a stationary
 * one does and its chain has a closed class inside the non-absorbing
 * states, which lies in E. Fixpoints computed with halo exchanges of 0/1
 * flags. Collective. */
static sl_status find_improper(sl_ctx *ctx, const sl_problem *p, const char *absorbing, double *inE, double *inR,
                               int64_t *n_improper, int64_t *state, int32_t *action)
{
    sl_status st = SL_OK;
    const sl_block *b = &p->blk;
    int64_t n = p->n_local, nx = n + p->halo.n_halo;
    for (int64_t i = 0; i < nx; i++) inE[i] = i < n ? (absorbing[i] ? 0.0 : 1.0) : 1.0;
    /* greatest fixpoint: shrink E (halo starts at 1: over-approximation is safe) */
    for (;;) {
        int64_t changed;
        do {
            changed = 0;
            for (int64_t i = 0; i < n; i++) {
                if (inE[i] == 0.0) continue;
                int64_t p0 = b->first_pair[i] - b->p_begin, p1 = b->first_pair[i + 1] - b->p_begin;
                int keep = 0;
                for (int64_t k = p0; k < p1 && !keep; k++) {
                    int64_t t0 = b->first_trans[k] - b->t_begin, t1 = b->first_trans[k + 1] - b->t_begin;
                    int all = 1;
                    for (int64_t tt = t0; tt < t1 && all; tt++)
                        if (b->prob[tt] > 0 && inE[b->col[tt]] == 0.0) all = 0;
                    keep = all;
                }
                if (!keep) {
                    inE[i] = 0.0;
                    changed++;
                }
            }
        } while (changed);
        SL_TRY(sl_halo_exchange(ctx, &p->halo, inE));
        /* recheck with fresh halo: done when no rank changes */
        int64_t again = 0;
        for (int64_t i = 0; i < n && !again; i++) {
            if (inE[i] == 0.0) continue;
            int64_t p0 = b->first_pair[i] - b->p_begin, p1 = b->first_pair[i + 1] - b->p_begin;
            int keep = 0;
            for (int64_t k = p0; k < p1 && !keep; k++) {
                int64_t t0 = b->first_trans[k] - b->t_begin, t1 = b->first_trans[k + 1] - b->t_begin;
                int all = 1;
                for (int64_t tt = t0; tt < t1 && all; tt++)
                    if (b->prob[tt] > 0 && inE[b->col[tt]] == 0.0) all = 0;
                keep = all;
            }
            if (!keep) again = 1;
        }
        if (sl_sum_i64(ctx, again) == 0) break;
    }
    /* least fixpoint: R = E plus states with a successor in R */
    for (int64_t i = 0; i < nx; i++) inR[i] = inE[i];
    for (;;) {
        int64_t changed;
        do {
            changed = 0;
            for (int64_t i = 0; i < n; i++) {
                if (inR[i] != 0.0 || absorbing[i]) continue;
                int64_t t0 = b->first_trans[b->first_pair[i] - b->p_begin] - b->t_begin;
                int64_t t1 = b->first_trans[b->first_pair[i + 1] - b->p_begin] - b->t_begin;
                for (int64_t tt = t0; tt < t1; tt++)
                    if (b->prob[tt] > 0 && inR[b->col[tt]] != 0.0) {
                        inR[i] = 1.0;
                        changed++;
                        break;
                    }
            }
        } while (changed);
        SL_TRY(sl_halo_exchange(ctx, &p->halo, inR));
        int64_t again = 0;
        for (int64_t i = 0; i < n && !again; i++) {
            if (inR[i] != 0.0 || absorbing[i]) continue;
            int64_t t0 = b->first_trans[b->first_pair[i] - b->p_begin] - b->t_begin;
            int64_t t1 = b->first_trans[b->first_pair[i + 1] - b->p_begin] - b->t_begin;
            for (int64_t tt = t0; tt < t1; tt++)
                if (b->prob[tt] > 0 && inR[b->col[tt]] != 0.0) again = 1;
        }
        if (sl_sum_i64(ctx, again) == 0) break;
    }
    /* count, and name the lowest state of E with an action that keeps it in E */
    int64_t cnt = 0, first = INT64_MAX;
    int32_t act = -1;
    for (int64_t i = 0; i < n; i++) {
        if (inR[i] != 0.0) cnt++;
        if (inE[i] != 0.0 && first == INT64_MAX) {
            first = b->s_begin + i;
            int64_t p0 = b->first_pair[i] - b->p_begin, p1 = b->first_pair[i + 1] - b->p_begin;
            for (int64_t k = p0; k < p1 && act < 0; k++) {
                int64_t t0 = b->first_trans[k] - b->t_begin, t1 = b->first_trans[k + 1] - b->t_begin;
                int all = 1;
                for (int64_t tt = t0; tt < t1 && all; tt++)
                    if (b->prob[tt] > 0 && inE[b->col[tt]] == 0.0) all = 0;
                if (all) act = b->action[k];
            }
        }
    }
    *n_improper = sl_sum_i64(ctx, cnt);
    struct {
        double s;
        int r;
    } in = {(double)first, ctx->rank}, out;
    MPI_Allreduce(&in, &out, 1, MPI_DOUBLE_INT, MPI_MINLOC, ctx->comm);
    int32_t a = act;
    MPI_Bcast(&a, 1, MPI_INT32_T, out.r, ctx->comm);
    *state = out.s >= (double)INT64_MAX ? -1 : (int64_t)out.s;
    *action = a;
cleanup:
    return st;
}

/* w = T1 w - with T1 w(s) = 1 + max_a sum_j p w(j) on transient states and
 * 0 on absorbing ones - by Gauss-Seidel sweeps, then scaled up until
 * T1 w <= w holds with room for roundoff. Such a w bounds the expected
 * number of steps to absorption of EVERY policy: w >= 1 + P_pi w implies
 * w >= sum_{k<K} P_pi^k 1 + P_pi^K w >= E_pi[min(steps, K)] for all K. */
static sl_status steps_bound(sl_ctx *ctx, const sl_problem *p, const sl_obj_opts *o, const char *absorbing,
                             int64_t max_sweeps, double *w, int64_t *sweeps_out)
{
    double start = sl_now(), last_ckpt = start;
    const sl_block *b = &p->blk;
    int64_t n = p->n_local, nx = n + p->halo.n_halo, m = max_successors(ctx, p), sweeps = 0;
    for (int64_t i = 0; i < nx; i++) w[i] = 0.0;
    for (;;) {
        sl_status st = sl_halo_exchange(ctx, &p->halo, w);
        if (st != SL_OK) return st;
        double delta = 0;
        for (int64_t j = 0; j < n; j++) {
            int64_t i = p->order[j];
            if (absorbing[i]) continue;
            int64_t p0 = b->first_pair[i] - b->p_begin, p1 = b->first_pair[i + 1] - b->p_begin;
            double best = -INFINITY;
            for (int64_t k = p0; k < p1; k++) {
                int64_t t0 = b->first_trans[k] - b->t_begin, t1 = b->first_trans[k + 1] - b->t_begin;
                double acc = 0;
                for (int64_t tt = t0; tt < t1; tt++) acc += b->prob[tt] * w[b->col[tt]];
                best = fmax(best, acc);
            }
            double v = 1.0 + best;
            delta = fmax(delta, fabs(v - w[i]));
            w[i] = v;
        }
        sweeps++;
        double wmax = sl_max(ctx, local_absmax(w, n));
        delta = sl_max(ctx, delta);
        if (!(wmax <= 1e12)) {
            /* a guard behind find_improper: expected steps this large (or
             * growing without bound) mean absorption is not certain
             * (threshold is common practice, no source) */
            double loc = -1;
            for (int64_t i = 0; i < n; i++)
                if (fabs(w[i]) >= wmax || !isfinite(w[i])) loc = (double)(b->s_begin + i);
            loc = sl_max(ctx, loc);
            return SL_ERR(ctx, SL_EDATA,
                          "%s: state %.0f: expected steps to absorption exceed 1e12 under some policy; treating "
                          "the model as having improper policies",
                          p->path, loc);
        }
        if (delta <= 1e-9 * (1.0 + wmax) || (sweeps % 64) == 0) {
            /* try to certify: eta with T1((1+eta) w) <= (1+eta) w - fp */
            st = sl_halo_exchange(ctx, &p->halo, w);
            if (st != SL_OK) return st;
            double fp = backup_roundoff(m, 1.0, 1.0, wmax), dmax = -INFINITY;
            for (int64_t i = 0; i < n; i++) {
                if (absorbing[i]) continue;
                int64_t p0 = b->first_pair[i] - b->p_begin, p1 = b->first_pair[i + 1] - b->p_begin;
                double best = -INFINITY;
                for (int64_t k = p0; k < p1; k++) {
                    int64_t t0 = b->first_trans[k] - b->t_begin, t1 = b->first_trans[k + 1] - b->t_begin;
                    double acc = 0;
                    for (int64_t tt = t0; tt < t1; tt++) acc += b->prob[tt] * w[b->col[tt]];
                    best = fmax(best, acc);
                }
                dmax = fmax(dmax, 1.0 + best - w[i]);
            }
            dmax = sl_max(ctx, dmax);
            /* T1((1+e)w) - (1+e)w = (1+e)(T1 w - w) - e; ask for <= -4 fp (1+e) */
            double d = dmax + 8.0 * fp;
            if (d < 0.5) {
                double eta = d > 0 ? 2.0 * d / (1.0 - d) : 0.0;
                for (int64_t i = 0; i < n; i++) w[i] *= 1.0 + eta;
                *sweeps_out = sweeps;
                return SL_OK;
            }
        }
        /* signals and --walltime stop this phase too (nothing to checkpoint yet) */
        if ((sweeps % 64) == 0 && poll_stop(ctx, o, start, &last_ckpt) == 2) max_sweeps = sweeps;
        if (max_sweeps > 0 && sweeps >= max_sweeps)
            return SL_ERR(ctx, SL_ESTOPPED,
                          "%s: the bound on the expected steps to absorption did not settle within %lld sweeps "
                          "(largest so far %.3g); absorption may be extremely slow",
                          p->path, (long long)max_sweeps, wmax);
    }
}

/* The certificate of the total-reward objective for a value v (v = 0 on
 * absorbing states), a policy pi and a steps bound w (T1 w <= w): with
 * d = Tv - v and d_pi = T_pi v - v on transient states,
 *   v + min(d_pi, 0)-ish:  v_pi - v = (I - P_pi)^{-1} d_pi >= w min(min d_pi, 0)
 *   v* - v = (I - P_*)^{-1} d_* <= w max(max d, 0)
 * (the inverse is the nonnegative sum of P^k over a proper policy, and
 * (I - P)^{-1} 1 <= w). Pointwise bounds, reduced to sup norms. */
sl_status sl_obj_certify_total(sl_ctx *ctx, const sl_problem *p, double *v, double *w, const int32_t *policy,
                               sl_obj_cert *c)
{
    sl_status st = SL_OK;
    const sl_block *b = &p->blk;
    int64_t n = p->n_local, m = max_successors(ctx, p);
    char *abs = NULL;
    if (SL_ALLOC(ctx, abs, n + 1, "absorbing states") == NULL) st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    int64_t nabs = sl_sum_i64(ctx, sl_obj_find_absorbing(p, abs));
    SL_TRY(sl_halo_exchange(ctx, &p->halo, v));
    SL_TRY(sl_halo_exchange(ctx, &p->halo, w));
    double vmax = sl_max(ctx, local_absmax(v, n + p->halo.n_halo)), wmax = sl_max(ctx, local_absmax(w, n));
    double fp = backup_roundoff(m, p->rmax_abs, 1.0, vmax), fpw = backup_roundoff(m, 1.0, 1.0, wmax);
    /* w must satisfy T1 w <= w with room for its own roundoff; v = 0 on absorbing states */
    int64_t bad_w = -1, bad_v = -1;
    double dmin = INFINITY, dmax = -INFINITY, dpmin = INFINITY, lossmax = 0, verrmax = 0;
    for (int64_t i = 0; i < n; i++) {
        if (abs[i]) {
            if (v[i] != 0.0 && bad_v < 0) bad_v = b->s_begin + i;
            continue;
        }
        int64_t p0 = b->first_pair[i] - b->p_begin, p1 = b->first_pair[i + 1] - b->p_begin;
        double best = -INFINITY, bw = -INFINITY;
        for (int64_t k = p0; k < p1; k++) {
            best = fmax(best, q_pair(b, k, v, 1.0));
            bw = fmax(bw, q_pair(b, k, w, 1.0) - b->reward[k]);
        }
        if (!(1.0 + bw + fpw <= w[i]) && bad_w < 0) bad_w = b->s_begin + i;
        double d = best - v[i], dp = q_pair(b, p0 + policy[i], v, 1.0) - v[i];
        if (!isfinite(d) || !isfinite(dp)) d = dp = NAN;
        dmin = fmin(dmin, d);
        dmax = fmax(dmax, d);
        dpmin = fmin(dpmin, dp);
        if (isnan(d)) dmin = -INFINITY, dmax = INFINITY, dpmin = -INFINITY;
    }
    double bw_g = sl_min(ctx, bad_w < 0 ? INFINITY : (double)bad_w);
    double bv_g = sl_min(ctx, bad_v < 0 ? INFINITY : (double)bad_v);
    dmin = sl_min(ctx, dmin) - fp;
    dmax = sl_max(ctx, dmax) + fp;
    dpmin = sl_min(ctx, dpmin) - fp;
    memset(c, 0, sizeof(*c));
    c->n_absorbing = nabs;
    c->residual_min = dmin + fp;
    c->residual_max = dmax - fp;
    c->residual_sup = fmax(fabs(c->residual_min), fabs(c->residual_max));
    c->roundoff = fp * wmax;
    c->steps_max = wmax;
    for (int64_t i = 0; i < n; i++) {
        if (abs[i]) continue;
        verrmax = fmax(verrmax, w[i] * fmax(fabs(fmin(dmin, 0)), fmax(dmax, 0)));
        lossmax = fmax(lossmax, w[i] * (fmax(dmax, 0) - fmin(dpmin, 0)));
    }
    c->value_error_bound = sl_max(ctx, verrmax);
    c->policy_loss_bound = sl_max(ctx, lossmax);
    if (bw_g < INFINITY) {
        c->value_error_bound = c->policy_loss_bound = INFINITY;
        st = SL_ERR(ctx, SL_EDATA,
                    "state %lld: the stored bound on the expected steps to absorption fails its check "
                    "(1 + max_a sum_j p w(j) > w); the certificate is void",
                    (long long)bw_g);
    } else if (bv_g < INFINITY) {
        c->value_error_bound = c->policy_loss_bound = INFINITY;
        st = SL_ERR(ctx, SL_EDATA, "state %lld is absorbing but its stored value is not 0", (long long)bv_g);
    }
    st = sl_agree(ctx, st);
cleanup:
    free(abs);
    return st;
}

static sl_status check_closed_classes(sl_ctx *ctx, const sl_problem *p, const int32_t *policy, const char *which);

/* Policy iteration (Howard 1960, "Dynamic Programming and Markov
 * Processes"; for the total reward to absorption Bertsekas & Tsitsiklis
 * 1991, Math. Oper. Res. 16, and for the average reward of unichain models
 * Puterman 1994, Section 8.6; recalled from memory): exact evaluation of
 * the policy by UMFPACK (sl_evaluate_direct: total, I - P_pi with v = 0 on
 * absorbing states; average, gain and bias with h(0) = 0), then the greedy
 * improvement on the evaluated values, keeping the current action unless
 * another is better by more than the tie margin (kernel.c), which makes it
 * stop; it stops when no action changes (the average gain of each
 * evaluated policy is logged). The direct solve is guarded as the
 * discounted pi's is (memory and UMFPACK's estimated time after the
 * symbolic step, sl_evaluate_direct / sl_direct_declined): when it declines,
 * *fallback gets the reason and SL_OK is returned with x and policy as they
 * are (the last evaluated values and the policy greedy for them; zero and
 * the first actions before any evaluation) for value iteration to finish
 * from; under strict memory an estimate over the limit is SL_EDATA.
 * Checkpoints (obj_ckpt_save, method "pi-total"/"pi-average"): at the top
 * of an iteration, when a stop, a checkpoint signal or --checkpoint-every
 * is due, the last evaluated values and the policy greedy for them - all
 * the next iteration needs, since it evaluates that policy afresh. A signal
 * during a factorization abandons it (x and policy stay as they were) and
 * the loop top acts on the request; --walltime is looked at there only. A
 * stop before the first evaluation has nothing to save and leaves any
 * earlier checkpoint alone. --resume continues from a policy-iteration
 * checkpoint as it stood; from a value-iteration one (of these solvers, or
 * of an earlier fallback) it starts from the policy greedy for its values.
 * A signal or the walltime stops it with SL_ESTOPPED; the certificate is
 * then computed from the values as for value iteration. Collective. */
static sl_status policy_iteration(sl_ctx *ctx, const sl_problem *p0, const sl_obj_opts *o, int average, double *x,
                                  double *y, int32_t *policy, int64_t *iterations, char *fallback, size_t fallback_len)
{
    sl_status st = SL_OK;
    sl_problem q = *p0; /* shallow: only the evaluation system differs */
    q.eval_average = average;
    q.eval_ref = 0;
    q.direct_time_limit = o->direct_time_limit > 0 ? o->direct_time_limit
                          : o->direct_time_limit < 0 ? 0.0
                                                     : SL_DIRECT_TIME_LIMIT;
    const char *vi = average ? "relative value iteration" : "value iteration";
    const char *method = average ? "pi-average" : "pi-total";
    char doing[96];
    snprintf(doing, sizeof(doing), "falling back to %s", vi);
    q.direct_fallback = doing;
    const sl_problem *p = &q;
    void *lu = NULL;
    int32_t *acts = NULL;
    sl_solver_state S;
    sl_history hist;
    memset(&S, 0, sizeof(S));
    memset(&hist, 0, sizeof(hist));
    double t0 = sl_now(), last = t0, mem = o->memory_limit > 0 ? o->memory_limit : 0.5 * sl_physical_memory();
    fallback[0] = '\0';
    int owner = p->blk.s_begin == 0 && p->n_local > 0;
    *iterations = 0;
    if (o->checkpoint_dir && SL_ALLOC(ctx, acts, p->n_local + 1, "policy") == NULL) st = SL_ENOMEM;
    st = sl_agree(ctx, st);
    int have = 0; /* x and policy hold a state worth saving */
    if (st == SL_OK && o->resume && o->checkpoint_dir) {
        int found = 0;
        st = obj_ckpt_resume(ctx, p, o, x, policy, acts, &S, &hist, &found);
        if (st == SL_OK && found && strcmp(S.method, method) == 0) {
            *iterations = S.iteration;
            have = 1;
            sl_log(ctx, "solve: resumed policy iteration after iteration %lld (the checkpoint's values and policy)",
                   (long long)S.iteration);
        } else if (st == SL_OK && found) {
            /* written by value iteration: its values, and the policy greedy
             * for them (ties kept as the checkpoint had them) */
            st = sl_halo_exchange(ctx, &p->halo, x);
            sl_check c;
            if (st == SL_OK) sl_bellman_check(p, x, y, policy, &c);
            have = st == SL_OK;
            sl_log(ctx, "solve: resumed policy iteration from a %s checkpoint (iteration %lld): starting from the "
                        "policy greedy for its values",
                   vi, (long long)S.iteration);
            memset(&S, 0, sizeof(S));
        }
    }
    while (st == SL_OK) {
        int pr = poll_stop(ctx, o, t0, &last);
        if (o->max_iterations > 0 && *iterations >= o->max_iterations) pr = 2;
        if (pr >= 1 && o->checkpoint_dir && have) {
            S.iteration = S.sweeps = *iterations;
            st = obj_ckpt_save(ctx, p, o, method, x, policy, acts, &S, &hist);
            if (st != SL_OK) break;
            sl_log(ctx, "solve: checkpoint after policy iteration %lld written to %s", (long long)*iterations,
                   o->checkpoint_dir);
        }
        if (pr == 2) {
            if (o->checkpoint_dir && !have)
                sl_log(ctx, "solve: stopped before the first policy evaluation: nothing to checkpoint");
            st = SL_ESTOPPED;
            break;
        }
        int used = 0, abandoned = 0;
        double est = 0;
        if (average) {
            char which[64];
            snprintf(which, sizeof(which), "policy of policy iteration %lld", (long long)*iterations + 1);
            st = check_closed_classes(ctx, p, policy, which);
            if (st != SL_OK) break;
        }
        st = sl_evaluate_direct(ctx, p, policy, mem > 0 ? mem : 0, 0, x, &used, &abandoned, &est, &lu);
        if (st == SL_EDATA && average) {
            char msg[SL_MSG_MAX];
            snprintf(msg, sizeof(msg), "%s", ctx->err);
            sl_error_clear(ctx);
            st = SL_ERR(ctx, SL_EDATA,
                        "%s: policy iteration: the gain and bias equations of the policy of iteration %lld cannot be "
                        "solved (%s): the policy's chain has more than one closed class (multichain), which this "
                        "solver refuses",
                        p->path, (long long)*iterations + 1, msg);
        }
        if (st != SL_OK) break;
        if (abandoned) continue; /* a signal killed the factorization; x is as before; the loop top acts on it */
        if (!used) {
            char instead[96];
            snprintf(instead, sizeof(instead), "solve by %s", vi);
            st = sl_direct_declined(ctx, est, mem, o->strict_memory, 1, instead, doing);
            if (st != SL_OK) break;
            if (est > mem)
                snprintf(fallback, fallback_len,
                         "the factorization of iteration %lld needs about %.3g GB (UMFPACK estimate), over the "
                         "limit of %.3g GB",
                         (long long)*iterations + 1, est / 1e9, mem / 1e9);
            else
                snprintf(fallback, fallback_len,
                         "the factorization of iteration %lld would take longer than the direct-solve time limit "
                         "of %.3g s (UMFPACK's flop estimate)",
                         (long long)*iterations + 1, q.direct_time_limit);
            if (*iterations > 0)
                sl_log(ctx, "solve: policy iteration without a direct solve: %s; %s from the values of the policy "
                            "of iteration %lld",
                       fallback, doing, (long long)*iterations);
            else
                sl_log(ctx, "solve: policy iteration without a direct solve: %s; %s from %s", fallback, doing,
                       have ? "the checkpoint's values" : "the start");
            break;
        }
        double g = owner ? x[0] : 0.0;
        MPI_Allreduce(MPI_IN_PLACE, &g, 1, MPI_DOUBLE, MPI_SUM, ctx->comm);
        if (average && owner) x[0] = 0.0; /* h(0) = 0; the solve put g there */
        (*iterations)++;
        have = 1;
        st = sl_halo_exchange(ctx, &p->halo, x);
        if (st != SL_OK) break;
        sl_check c;
        sl_bellman_check(p, x, y, policy, &c);
        int64_t changed = sl_sum_i64(ctx, c.changed);
        if (average)
            sl_log(ctx, "solve: policy iteration %lld: gain of the evaluated policy %.12g, %lld actions changed",
                   (long long)*iterations, g, (long long)changed);
        else
            sl_log(ctx, "solve: policy iteration %lld: %lld actions changed", (long long)*iterations, (long long)changed);
        if (changed == 0) break;
    }
    st = sl_agree(ctx, st);
    sl_evaluate_direct_free(&lu);
    free(acts);
    sl_history_free(&hist);
    return st;
}

static sl_status solve_total(sl_ctx *ctx, const sl_problem *p, const sl_obj_opts *o, sl_obj_result *res)
{
    sl_status st = SL_OK;
    int64_t n = p->n_local, nx = n + p->halo.n_halo;
    char *abs = NULL;
    double *inE = NULL, *inR = NULL, *y = NULL;
    double tol = o->tolerance > 0 ? o->tolerance : 1e-6;
    if (SL_ALLOC(ctx, abs, n + 1, "absorbing states") == NULL || SL_ZALLOC(ctx, inE, nx, "flags") == NULL ||
        SL_ZALLOC(ctx, inR, nx, "flags") == NULL || SL_ZALLOC(ctx, res->value, nx, "values") == NULL ||
        SL_ZALLOC(ctx, y, nx, "values") == NULL || SL_ZALLOC(ctx, res->steps, nx, "steps bound") == NULL ||
        SL_ZALLOC(ctx, res->policy, n + 1, "policy") == NULL)
        st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    int64_t nabs = sl_sum_i64(ctx, sl_obj_find_absorbing(p, abs));
    if (nabs == 0)
        SL_TRY(sl_agree(ctx, SL_ERR(ctx, SL_EDATA,
                                    "%s: no absorbing state (a state whose every action stays with probability 1 "
                                    "and reward 0): the total reward is not defined",
                                    p->path)));
    int64_t nimp = 0, s_imp = -1;
    int32_t a_imp = -1;
    SL_TRY(find_improper(ctx, p, abs, inE, inR, &nimp, &s_imp, &a_imp));
    if (nimp > 0)
        SL_TRY(sl_agree(ctx, SL_ERR(ctx, SL_EDATA,
                                    "%s: %lld state(s) have a policy that never reaches an absorbing state "
                                    "(improper policy); e.g. state %lld with action %d stays among non-absorbing "
                                    "states forever. The total-reward objective needs every policy to reach "
                                    "absorption: make those states leave, or use the discounted objective",
                                    p->path, (long long)nimp, (long long)s_imp, (int)a_imp)));
    int64_t wsweeps = 0;
    SL_TRY(steps_bound(ctx, p, o, abs, o->max_iterations > 0 ? 64 * o->max_iterations : 0, res->steps, &wsweeps));
    double wmax = sl_max(ctx, local_absmax(res->steps, n));
    sl_log(ctx, "solve: %lld absorbing states; every policy absorbs, expected steps <= %.4g (certified after %lld "
                "sweeps)",
           (long long)nabs, wmax, (long long)wsweeps);
    res->cert.sweeps = wsweeps;
    int64_t pi_its = 0;
    if (o->policy_iteration) {
        sl_status keep =
            policy_iteration(ctx, p, o, 0, res->value, y, res->policy, &pi_its, res->fallback, sizeof(res->fallback));
        if (keep != SL_OK && keep != SL_ESTOPPED) {
            st = keep;
            goto cleanup;
        }
        if (!res->fallback[0]) {
            SL_TRY(sl_halo_exchange(ctx, &p->halo, res->value));
            SL_TRY(sl_obj_certify_total(ctx, p, res->value, res->steps, res->policy, &res->cert));
            res->cert.converged =
                keep == SL_OK && res->cert.value_error_bound <= tol && res->cert.policy_loss_bound <= tol;
            if (keep == SL_OK && !res->cert.converged) {
                sl_warn(ctx, "policy iteration ended but the certificate (%.1e, %.1e) exceeds the tolerance %.1e",
                        res->cert.value_error_bound, res->cert.policy_loss_bound, tol);
                keep = SL_EUSAGE;
            }
            res->cert.iterations = pi_its;
            res->cert.sweeps = wsweeps;
            st = keep;
            goto cleanup;
        }
        /* the direct solve declined: value iteration goes on from here */
    }
    /* resume */
    sl_solver_state S;
    sl_history hist;
    memset(&S, 0, sizeof(S));
    memset(&hist, 0, sizeof(hist));
    int32_t *acts = NULL;
    if (SL_ALLOC(ctx, acts, n + 1, "policy") == NULL) st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    S.iteration = pi_its;
    if (o->resume && o->checkpoint_dir && !res->fallback[0]) {
        int found = 0;
        st = obj_ckpt_resume(ctx, p, o, res->value, res->policy, acts, &S, &hist, &found);
        if (st == SL_OK && found) sl_log(ctx, "solve: resumed at iteration %lld", (long long)S.iteration);
        if (st != SL_OK) goto total_done;
    }
    double t0 = sl_now(), last_ckpt = t0;
    int64_t interval = 1, since = 0;
    for (;;) {
        int pr = poll_stop(ctx, o, t0, &last_ckpt);
        if (o->max_iterations > 0 && S.iteration >= o->max_iterations) pr = 2;
        if (pr >= 1 && o->checkpoint_dir) {
            st = obj_ckpt_save(ctx, p, o, "total", res->value, res->policy, acts, &S, &hist);
            if (st != SL_OK) goto total_done;
        }
        if (pr == 2) {
            st = SL_ESTOPPED;
            break;
        }
        st = sl_halo_exchange(ctx, &p->halo, res->value);
        if (st != SL_OK) goto total_done;
        sl_sweep_gs(p, res->value, res->policy, 0);
        S.iteration++;
        S.sweeps++;
        if (++since >= interval) {
            since = 0;
            if (interval < 32) interval *= 2;
            /* certificate at the current values with the greedy policy */
            st = sl_halo_exchange(ctx, &p->halo, res->value);
            if (st != SL_OK) goto total_done;
            sl_check c;
            sl_bellman_check(p, res->value, y, res->policy, &c);
            st = sl_obj_certify_total(ctx, p, res->value, res->steps, res->policy, &res->cert);
            if (st != SL_OK) goto total_done;
            st = sl_history_push(ctx, &hist, S.iteration, S.sweeps, sl_now() - t0, res->cert.residual_sup,
                                 res->cert.residual_max - res->cert.residual_min, res->cert.value_error_bound,
                                 res->cert.policy_loss_bound);
            st = sl_agree(ctx, st);
            if (st != SL_OK) goto total_done;
            if (res->cert.value_error_bound <= tol && res->cert.policy_loss_bound <= tol) {
                res->cert.converged = 1;
                break;
            }
            /* roundoff floor: the allowance alone exceeds the tolerance */
            if (2.0 * res->cert.roundoff > tol) {
                sl_warn(ctx, "cannot certify the tolerance %.1e: roundoff times the expected steps to absorption "
                             "limits the bound to about %.1e",
                        tol, 2.0 * res->cert.roundoff);
                st = SL_EUSAGE;
                break;
            }
        }
    }
    if (!res->cert.converged) {
        sl_status keep = st;
        st = sl_halo_exchange(ctx, &p->halo, res->value);
        sl_check c;
        if (st == SL_OK) sl_bellman_check(p, res->value, y, res->policy, &c);
        if (st == SL_OK) st = sl_obj_certify_total(ctx, p, res->value, res->steps, res->policy, &res->cert);
        if (st == SL_OK) st = keep;
    }
    res->cert.iterations = S.iteration;
    res->cert.sweeps += S.sweeps;
total_done:
    free(acts);
    sl_history_free(&hist);
cleanup:
    free(abs);
    free(inE);
    free(inR);
    free(y);
    return st;
}

/* ---- average reward ----------------------------------------------------------- */

/* Closed classes of the chain of `policy`: the strongly connected
 * components of the graph of P_pi (edges of positive probability) that no
 * edge leaves (Tarjan 1972, "Depth-first search and linear graph
 * algorithms", SIAM J. Comput. 1(2); iterative form). Every finite chain
 * has at least one; more than one means the policy is multichain, and so is
 * the model (Puterman 1994, Section 8.3; recalled from memory). The rows are
 * gathered on rank 0, as for the direct evaluation. SL_EDATA naming the
 * smallest state of two closed classes when there are several. Collective. */
static sl_status check_closed_classes(sl_ctx *ctx, const sl_problem *p, const int32_t *policy, const char *which)
{
    sl_status st = SL_OK;
    sl_policy_rows G;
    int64_t *index = NULL, *low = NULL, *comp = NULL, *stk = NULL, *cv = NULL, *ce = NULL, *minst = NULL;
    char *on = NULL, *closed = NULL;
    int64_t found[3] = {0, -1, -1}; /* closed classes, a state of the first two */
    SL_TRY(sl_gather_policy_rows(ctx, p, policy, &G));
    if (ctx->rank == 0) {
        int64_t N = G.N;
        if (SL_ALLOC(ctx, index, N, "classes") == NULL || SL_ALLOC(ctx, low, N, "classes") == NULL ||
            SL_ALLOC(ctx, comp, N, "classes") == NULL || SL_ALLOC(ctx, stk, N, "classes") == NULL ||
            SL_ALLOC(ctx, cv, N, "classes") == NULL || SL_ALLOC(ctx, ce, N, "classes") == NULL ||
            SL_ALLOC(ctx, minst, N, "classes") == NULL || SL_ZALLOC(ctx, on, N, "classes") == NULL ||
            SL_ALLOC(ctx, closed, N, "classes") == NULL)
            st = SL_ENOMEM;
        int64_t next = 0, sp = 0, ncomp = 0;
        for (int64_t i = 0; st == SL_OK && i < N; i++) index[i] = -1;
        for (int64_t s0 = 0; st == SL_OK && s0 < N; s0++) {
            if (index[s0] >= 0) continue;
            int64_t depth = 0;
            cv[0] = s0;
            ce[0] = G.rowptr[s0];
            index[s0] = low[s0] = next++;
            stk[sp++] = s0;
            on[s0] = 1;
            depth = 1;
            while (depth > 0) {
                int64_t v = cv[depth - 1];
                if (ce[depth - 1] < G.rowptr[v + 1]) {
                    int64_t e = ce[depth - 1]++;
                    int64_t w = G.cols[e];
                    if (!(G.probs[e] > 0.0)) continue;
                    if (index[w] < 0) {
                        index[w] = low[w] = next++;
                        stk[sp++] = w;
                        on[w] = 1;
                        cv[depth] = w;
                        ce[depth] = G.rowptr[w];
                        depth++;
                    } else if (on[w] && index[w] < low[v]) {
                        low[v] = index[w];
                    }
                } else {
                    depth--;
                    if (low[v] == index[v]) {
                        int64_t w, m = v;
                        do {
                            w = stk[--sp];
                            on[w] = 0;
                            comp[w] = ncomp;
                            if (w < m) m = w;
                        } while (w != v);
                        minst[ncomp] = m;
                        closed[ncomp] = 1;
                        ncomp++;
                    }
                    if (depth > 0 && low[v] < low[cv[depth - 1]]) low[cv[depth - 1]] = low[v];
                }
            }
        }
        for (int64_t u = 0; st == SL_OK && u < N; u++)
            for (int64_t e = G.rowptr[u]; e < G.rowptr[u + 1]; e++)
                if (G.probs[e] > 0.0 && comp[G.cols[e]] != comp[u]) closed[comp[u]] = 0;
        /* the two closed classes with the smallest states */
        for (int64_t c = 0; st == SL_OK && c < ncomp; c++) {
            if (!closed[c]) continue;
            found[0]++;
            int64_t m = minst[c];
            if (found[1] < 0 || m < found[1]) {
                found[2] = found[1];
                found[1] = m;
            } else if (found[2] < 0 || m < found[2]) {
                found[2] = m;
            }
        }
    }
    SL_TRY(sl_agree(ctx, st));
    MPI_Bcast(found, 3, MPI_INT64_T, 0, ctx->comm);
    if (found[0] > 1)
        st = SL_ERR(ctx, SL_EDATA,
                    "%s: the %s has %lld closed classes of states, e.g. one holding state %lld and another holding "
                    "state %lld (neither reaches the other): the model is multichain, which the average-reward "
                    "solver refuses",
                    p->path, which, (long long)found[0], (long long)found[1], (long long)found[2]);
    st = sl_agree(ctx, st);
cleanup:
    sl_policy_rows_free(&G);
    free(index);
    free(low);
    free(comp);
    free(stk);
    free(cv);
    free(ce);
    free(minst);
    free(on);
    free(closed);
    return st;
}

/* Gain bounds from any h and policy pi (d = Th - h, d_pi = T_pi h - h):
 * for every policy pi', g_pi' = P*_pi' d_pi' <= max d, so g* <= max d; and
 * g_pi = P*_pi d_pi >= min d_pi (P*_pi the limiting matrix, stochastic).
 * Puterman 1994, Section 8.5 (bounds attributed to Odoni 1969; recalled
 * from memory). Holds for multichain models too. */
sl_status sl_obj_certify_average(sl_ctx *ctx, const sl_problem *p, double *h, const int32_t *policy,
                                 sl_obj_cert *c)
{
    sl_status st = SL_OK;
    const sl_block *b = &p->blk;
    int64_t n = p->n_local, m = max_successors(ctx, p);
    SL_TRY(sl_halo_exchange(ctx, &p->halo, h));
    double hmax = sl_max(ctx, local_absmax(h, n + p->halo.n_halo));
    double fp = backup_roundoff(m, p->rmax_abs, 1.0, hmax) + 2.0 * DBL_EPSILON * hmax;
    double dmin = INFINITY, dmax = -INFINITY, dpmin = INFINITY;
    for (int64_t i = 0; i < n; i++) {
        int64_t p0 = b->first_pair[i] - b->p_begin, p1 = b->first_pair[i + 1] - b->p_begin;
        double best = -INFINITY;
        for (int64_t k = p0; k < p1; k++) best = fmax(best, q_pair(b, k, h, 1.0));
        double d = best - h[i], dp = q_pair(b, p0 + policy[i], h, 1.0) - h[i];
        if (!isfinite(d) || !isfinite(dp)) {
            dmin = dpmin = -INFINITY;
            dmax = INFINITY;
            continue;
        }
        dmin = fmin(dmin, d);
        dmax = fmax(dmax, d);
        dpmin = fmin(dpmin, dp);
    }
    memset(c, 0, sizeof(*c));
    c->residual_min = sl_min(ctx, dmin);
    c->residual_max = sl_max(ctx, dmax);
    c->residual_sup = fmax(fabs(c->residual_min), fabs(c->residual_max));
    dpmin = sl_min(ctx, dpmin);
    c->roundoff = fp;
    c->gain_lower = c->residual_min - fp;
    c->gain_upper = c->residual_max + fp;
    c->gain = 0.5 * (c->residual_min + c->residual_max);
    c->policy_loss_bound = c->gain_upper - (dpmin - fp);
    c->value_error_bound = 0.5 * (c->gain_upper - c->gain_lower); /* |gain - g*| */
cleanup:
    return st;
}

static sl_status solve_average(sl_ctx *ctx, const sl_problem *p, const sl_obj_opts *o, sl_obj_result *res)
{
    sl_status st = SL_OK;
    int64_t n = p->n_local, nx = n + p->halo.n_halo;
    double *y = NULL;
    int32_t *acts = NULL;
    double tol = o->tolerance > 0 ? o->tolerance : 1e-6;
    double tau = o->aperiodicity > 0 ? o->aperiodicity : 0.5;
    sl_solver_state S;
    sl_history hist;
    memset(&S, 0, sizeof(S));
    memset(&hist, 0, sizeof(hist));
    if (!(tau > 0 && tau < 1)) return SL_ERR(ctx, SL_EUSAGE, "--aperiodicity must be in (0, 1)");
    if (SL_ZALLOC(ctx, res->value, nx, "bias") == NULL || SL_ZALLOC(ctx, y, nx, "values") == NULL ||
        SL_ZALLOC(ctx, res->policy, n + 1, "policy") == NULL || SL_ALLOC(ctx, acts, n + 1, "policy") == NULL)
        st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    res->cert.aperiodicity = tau;
    int64_t pi_its = 0;
    sl_status keep = SL_OK;
    if (o->policy_iteration) {
        keep = policy_iteration(ctx, p, o, 1, res->value, y, res->policy, &pi_its, res->fallback, sizeof(res->fallback));
        if (keep != SL_OK && keep != SL_ESTOPPED) {
            st = keep;
            goto cleanup;
        }
    }
    if (o->policy_iteration && !res->fallback[0]) {
        int64_t it = pi_its;
        SL_TRY(sl_obj_certify_average(ctx, p, res->value, res->policy, &res->cert));
        res->cert.converged = keep == SL_OK && res->cert.gain_upper - res->cert.gain_lower <= tol &&
                              res->cert.policy_loss_bound <= tol;
        if (keep == SL_OK && !res->cert.converged) {
            sl_warn(ctx, "policy iteration ended but the gain bounds [%.12g, %.12g] are wider than the tolerance %.1e",
                    res->cert.gain_lower, res->cert.gain_upper, tol);
            keep = SL_EUSAGE;
        }
        res->cert.aperiodicity = 0;
        res->cert.iterations = it;
        res->cert.sweeps = it;
        st = keep;
        goto cleanup;
    }
    /* the direct solve declined: relative value iteration goes on from the
     * last bias and policy (no resume then) */
    S.iteration = S.sweeps = pi_its;
    if (o->resume && o->checkpoint_dir && !res->fallback[0]) {
        int found = 0;
        SL_TRY(obj_ckpt_resume(ctx, p, o, res->value, res->policy, acts, &S, &hist, &found));
        if (found) sl_log(ctx, "solve: resumed at iteration %lld", (long long)S.iteration);
    }
    /* stall detection: the span of Th - h after K iterations against now */
    const int64_t K = 2000;
    double span_mark = INFINITY;
    int64_t mark_iter = S.iteration;
    double t0 = sl_now(), last_ckpt = t0;
    for (;;) {
        int pr = poll_stop(ctx, o, t0, &last_ckpt);
        if (o->max_iterations > 0 && S.iteration >= o->max_iterations) pr = 2;
        if (pr >= 1 && o->checkpoint_dir) {
            SL_TRY(obj_ckpt_save(ctx, p, o, "average", res->value, res->policy, acts, &S, &hist));
        }
        if (pr == 2) {
            st = SL_ESTOPPED;
            break;
        }
        SL_TRY(sl_halo_exchange(ctx, &p->halo, res->value));
        sl_check c;
        sl_bellman_check(p, res->value, y, res->policy, &c);
        double dmin = sl_min(ctx, c.dmin), dmax = sl_max(ctx, c.dmax);
        S.iteration++;
        S.sweeps++;
        if (S.iteration == 1) SL_TRY(check_closed_classes(ctx, p, res->policy, "first greedy policy"));
        if (S.iteration % 16 == 1 || dmax - dmin <= tol) {
            SL_TRY(sl_obj_certify_average(ctx, p, res->value, res->policy, &res->cert));
            SL_TRY(sl_agree(ctx, sl_history_push(ctx, &hist, S.iteration, S.sweeps, sl_now() - t0,
                                                 res->cert.residual_sup, res->cert.gain_upper - res->cert.gain_lower,
                                                 res->cert.value_error_bound, res->cert.policy_loss_bound)));
            if (res->cert.gain_upper - res->cert.gain_lower <= tol && res->cert.policy_loss_bound <= tol) {
                res->cert.converged = 1;
                break;
            }
            if (2.0 * res->cert.roundoff > tol) {
                sl_warn(ctx, "cannot certify the gain to %.1e: roundoff limits the bounds to about %.1e", tol,
                        2.0 * res->cert.roundoff);
                st = SL_EUSAGE;
                break;
            }
        }
        if (S.iteration - mark_iter >= K) {
            double span = dmax - dmin;
            if (span > 0.999 * span_mark) {
                /* a definite answer where the current policy shows it */
                SL_TRY(check_closed_classes(ctx, p, res->policy, "current greedy policy"));
                st = SL_ERR(ctx, SL_EDATA,
                            "%s: the gain bounds stopped narrowing (span of Th - h %.6g after %lld iterations, "
                            "%.6g %lld iterations earlier): the optimal gain differs between states, i.e. the "
                            "model is multichain, which this solver refuses (bounds: %.6g <= gain <= %.6g)",
                            p->path, span, (long long)S.iteration, span_mark, (long long)K, dmin, dmax);
                goto cleanup;
            }
            span_mark = span;
            mark_iter = S.iteration;
        }
        /* h <- tau h + (1 - tau) (T h - mid): relative value iteration on the
         * transformed model tau I + (1 - tau) P (Puterman 1994, Section
         * 8.5.4, recalled from memory); same gain and optimal policies. */
        double mid = 0.5 * (dmin + dmax);
        for (int64_t i = 0; i < n; i++) res->value[i] = tau * res->value[i] + (1.0 - tau) * (y[i] - mid);
    }
    if (!res->cert.converged) {
        keep = st;
        SL_TRY(sl_halo_exchange(ctx, &p->halo, res->value));
        sl_check c;
        sl_bellman_check(p, res->value, y, res->policy, &c);
        SL_TRY(sl_obj_certify_average(ctx, p, res->value, res->policy, &res->cert));
        st = keep;
    }
    if (res->cert.converged) SL_TRY(check_closed_classes(ctx, p, res->policy, "final policy"));
    res->cert.aperiodicity = tau;
    res->cert.iterations = S.iteration;
    res->cert.sweeps = S.sweeps;
cleanup:
    free(y);
    free(acts);
    sl_history_free(&hist);
    return st;
}

sl_status sl_obj_solve(sl_ctx *ctx, const sl_problem *p, const sl_obj_opts *o, sl_obj_result *res)
{
    memset(res, 0, sizeof(*res));
    res->objective = p->meta.objective;
    switch (p->meta.objective) {
    case SL_OBJ_FINITE: return solve_finite(ctx, p, o, res);
    case SL_OBJ_TOTAL: return solve_total(ctx, p, o, res);
    case SL_OBJ_AVERAGE: return solve_average(ctx, p, o, res);
    default: break;
    }
    return SL_ERR(ctx, SL_EINTERNAL, "sl_obj_solve called for the discounted objective");
}
