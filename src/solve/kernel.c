/* kernel.c - loading a distributed problem, Bellman backups, certificates. */
#include <float.h>
#include <math.h>
#include <string.h>

#include "solve/solve.h"
#include "store/store.h"

void sl_problem_free(sl_problem *p)
{
    if (p == NULL) return;
    sl_meta_free(&p->meta);
    if (p->owns_rows) sl_block_free(&p->blk);
    else free(p->blk.col);      /* the other arrays belong to the model */
    sl_halo_free(&p->halo);
    free(p->bounds);
    free(p->order);
    sl_stage_map_free(&p->stages);
    sl_io_plan_free(&p->io);
    free(p->own_reward);
    memset(p, 0, sizeof(*p));
}

static sl_status build_order(sl_ctx *ctx, sl_problem *p, sl_order order)
{
    int64_t n = p->n_local;
    int stage = sl_meta_stage_factor(&p->meta);
    if (order == SL_ORDER_AUTO) order = stage >= 0 ? SL_ORDER_STAGE_REVERSE : SL_ORDER_NATURAL;
    if (order == SL_ORDER_STAGE_REVERSE && stage < 0) {
        sl_warn(ctx, "%s: no stage factor; using natural sweep order", p->path);
        order = SL_ORDER_NATURAL;
    }
    p->order_used = order;
    if (SL_ALLOC(ctx, p->order, n, "sweep order") == NULL) return SL_ENOMEM;
    if (order == SL_ORDER_STAGE_REVERSE && p->stages.active) {
        /* internal numbering is stage-major: stages from last to first,
         * each in file order */
        int64_t S = p->stages.n_stages, w = n / S, j = 0;
        for (int64_t s = S - 1; s >= 0; s--)
            for (int64_t i = s * w; i < (s + 1) * w; i++) p->order[j++] = i;
        p->staged = 1;
    } else if (order == SL_ORDER_NATURAL) {
        for (int64_t i = 0; i < n; i++) p->order[i] = i;
    } else if (order == SL_ORDER_REVERSE) {
        for (int64_t i = 0; i < n; i++) p->order[i] = n - 1 - i;
    } else {
        /* stable counting sort by stage value, descending */
        int64_t ns = p->meta.factor_size[stage], *count = NULL;
        int64_t stride = 1;
        for (int f = 0; f < stage; f++) stride *= p->meta.factor_size[f];
        if (SL_ZALLOC(ctx, count, ns + 1, "stage order") == NULL) return SL_ENOMEM;
        for (int64_t i = 0; i < n; i++) {
            int64_t st = ((p->blk.s_begin + i) / stride) % ns;
            count[ns - 1 - st + 1]++;
        }
        for (int64_t k = 1; k <= ns; k++) count[k] += count[k - 1];
        for (int64_t i = 0; i < n; i++) {
            int64_t st = ((p->blk.s_begin + i) / stride) % ns;
            p->order[count[ns - 1 - st]++] = i;
        }
        free(count);
    }
    return SL_OK;
}

/* take: m itself (non-const), whose rows may be moved or freed, or NULL */
static sl_status problem_build(sl_ctx *ctx, const sl_model *m, sl_model *take, sl_order order, int allow_any,
                               sl_problem *p)
{
    sl_status st = SL_OK;
    memset(p, 0, sizeof(*p));
    /* a model loaded in the discounted solve's layout (sl_model_load_staged)
     * is for those methods only */
    SL_TRY(sl_agree(ctx, allow_any ? sl_model_check_ready(ctx, m, "solve") : sl_model_check_solvable(ctx, m, "solve")));
    p->path = m->name;
    p->direct_time_limit = SL_DIRECT_TIME_LIMIT;
    if (!allow_any && m->meta.objective != SL_OBJ_DISCOUNTED)
        st = SL_ERR(ctx, SL_EDATA,
                    "%s: objective \"%s\" is recorded in the model, but this method solves only the "
                    "discounted objective",
                    p->path, sl_objective_name(m->meta.objective));
    else if (!allow_any && !(m->meta.discount >= 0.0 && m->meta.discount < 1.0))
        st = SL_ERR(ctx, SL_EDATA, "%s: discount %g is not in [0, 1) as the discounted objective requires", p->path,
                    m->meta.discount);
    SL_TRY(sl_agree(ctx, st));
    SL_TRY(sl_meta_copy(ctx, &p->meta, &m->meta));
    p->gamma = p->meta.discount;
    if (SL_ALLOC(ctx, p->bounds, ctx->size + 1, "partition") == NULL) st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    /* with a stage factor: every rank gets a share of every stage (for the
     * discounted methods; the other objectives (allow_any) keep the model's
     * layout, which their file I/O assumes) */
    /* a model loaded in this layout (sl_model_load_staged) brings its map */
    if (m->staged != NULL) SL_TRY(sl_agree(ctx, sl_stage_map_copy(ctx, m->staged, &p->stages)));
    else if (!allow_any) SL_TRY(sl_stage_map_rows(ctx, &m->meta, &m->blk, &p->stages));
    /* on one rank with the stage factor slowest the internal numbering is
     * the file's: keep the rows where they are */
    int same = (ctx->size == 1 && p->stages.outer == 1) || m->staged != NULL;
    if (p->stages.active)
        for (int r = 0; r <= ctx->size; r++) p->bounds[r] = p->stages.n_stages * p->stages.ub[r];
    if (p->stages.active && !same) {
        /* marked first: a failed move may have freed some of the rows */
        if (take) take->rows_released = 1;
        SL_TRY(sl_stage_redistribute(ctx, &m->blk, m->bounds, &p->stages, take ? &take->blk : NULL, &p->blk));
        p->owns_rows = 1;
    } else if (take) {
        /* the rows move into the problem */
        p->blk = take->blk;
        memset(&take->blk, 0, sizeof(take->blk));
        take->rows_released = 1;
        p->owns_rows = 1;
        if (!p->stages.active) memcpy(p->bounds, m->bounds, (size_t)(ctx->size + 1) * sizeof(int64_t));
    } else {
        /* borrow the rows; only the local columns are this problem's own */
        p->blk = m->blk;
        p->blk.col = NULL;
        p->blk.cap_states = p->blk.cap_pairs = p->blk.cap_ptrs = p->blk.cap_trans = 0;
        if (!p->stages.active) memcpy(p->bounds, m->bounds, (size_t)(ctx->size + 1) * sizeof(int64_t));
    }
    p->n_local = sl_block_states(&p->blk);
    double rmax = 0;
    for (int64_t k = 0; k < sl_block_pairs(&p->blk); k++)
        if (fabs(p->blk.reward[k]) > rmax) rmax = fabs(p->blk.reward[k]);
    p->rmax_abs = sl_max(ctx, rmax);
    /* rows of the problem's own: the local columns replace the targets */
    SL_TRY(sl_halo_build(ctx, p->bounds, &p->blk, p->owns_rows, &p->halo));
    if (p->stages.active) SL_TRY(sl_agree(ctx, sl_halo_stage_plan(ctx, &p->stages, &p->halo)));
    SL_TRY(sl_io_plan_build(ctx, &p->stages, p->bounds, m->bounds, &p->io));
    SL_TRY(sl_agree(ctx, build_order(ctx, p, order)));
cleanup:
    if (st != SL_OK) sl_problem_free(p);
    return st;
}

sl_status sl_problem_from_model(sl_ctx *ctx, const sl_model *m, sl_order order, int allow_any, sl_problem *p)
{
    return problem_build(ctx, m, NULL, order, allow_any, p);
}

sl_status sl_problem_from_model_taking(sl_ctx *ctx, sl_model *m, sl_order order, sl_problem *p)
{
    return problem_build(ctx, m, m, order, 0, p);
}

sl_status sl_problem_visit_adjust(sl_ctx *ctx, sl_problem *p, const sl_model *m, double c)
{
    sl_status st = SL_OK;
    if (c == 0.0) return SL_OK;
    int64_t np = sl_block_pairs(&p->blk);
    if (!isfinite(c))
        st = SL_ERR(ctx, SL_EUSAGE, "visit bonus/penalty %g is not a finite number", c);
    else if (!m->meta.has_visits)
        st = SL_ERR(ctx, SL_EUSAGE,
                    "%s holds no visit counts (/pair/visits): a bonus or penalty for thin data needs a model "
                    "from `sluice estimate`",
                    p->path);
    else if (p->owns_rows || (np > 0 && m->blk.visits == NULL))
        st = SL_ERR(ctx, SL_EUSAGE, "%s: the visit counts cannot follow this model's row layout (stage factor)",
                    p->path);
    SL_TRY(sl_agree(ctx, st));
    if (SL_ALLOC(ctx, p->own_reward, np + 1, "adjusted rewards") == NULL) st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    double rmax = 0;
    for (int64_t k = 0; k < np; k++) {
        int64_t n = m->blk.visits[k];
        p->own_reward[k] = p->blk.reward[k] + (n > 0 ? c / sqrt((double)n) : 0.0);
        if (fabs(p->own_reward[k]) > rmax) rmax = fabs(p->own_reward[k]);
    }
    p->blk.reward = p->own_reward;
    p->rmax_abs = sl_max(ctx, rmax);
    p->visit_adjust = c;
cleanup:
    return st;
}

/* q(s,a) for local pair k: r + gamma * sum p x[col] */
static inline double qval(const sl_block *b, int64_t k, const double *x, double gamma)
{
    int64_t t0 = b->first_trans[k] - b->t_begin, t1 = b->first_trans[k + 1] - b->t_begin;
    double acc = 0.0;
    for (int64_t t = t0; t < t1; t++) acc += b->prob[t] * x[b->col[t]];
    return b->reward[k] + gamma * acc;
}

/* Best value over the pairs of local state i; *choice is the pair offset
 * (kept unless another pair is better by more than a tiny margin). */
static inline double best_q(const sl_block *b, int64_t i, const double *x, double gamma, int32_t *choice)
{
    int64_t p0 = b->first_pair[i] - b->p_begin, p1 = b->first_pair[i + 1] - b->p_begin;
    int32_t cur = *choice;
    if (cur < 0 || cur >= p1 - p0) cur = 0;
    double qcur = qval(b, p0 + cur, x, gamma), best = qcur;
    int32_t arg = cur;
    for (int64_t k = p0; k < p1; k++) {
        if (k - p0 == cur) continue;
        double q = qval(b, k, x, gamma);
        if (q > best) {
            best = q;
            arg = (int32_t)(k - p0);
        }
    }
    /* margin: relative 1e-13 of the magnitude (roundoff level of a backup) */
    if (arg != cur && best - qcur <= 1e-13 * (fabs(best) + 1e-300)) {
        arg = cur;
        best = qcur > best ? qcur : best;
    }
    *choice = arg;
    return best;
}

/* Shared loop of both checks: fixed != 0 applies the policy's own operator. */
static void check_loop(const sl_problem *p, const double *x, double *y, int32_t *policy, int fixed, sl_check *c)
{
    const sl_block *b = &p->blk;
    double dmin = INFINITY, dmax = -INFINITY, xmax = 0;
    int64_t changed = 0;
    for (int64_t i = 0; i < p->n_local; i++) {
        double v;
        if (fixed) {
            v = qval(b, b->first_pair[i] - b->p_begin + policy[i], x, p->gamma);
        } else {
            int32_t ch = policy[i];
            v = best_q(b, i, x, p->gamma, &ch);
            if (ch != policy[i]) changed++;
            policy[i] = ch;
        }
        double d = v - x[i];
        if (!isfinite(d)) {
            /* a non-finite value certifies nothing */
            dmin = -INFINITY;
            dmax = INFINITY;
        }
        if (d < dmin) dmin = d;
        if (d > dmax) dmax = d;
        if (fabs(x[i]) > xmax) xmax = fabs(x[i]);
        y[i] = v;
    }
    memset(c, 0, sizeof(*c));
    c->dmin = dmin;
    c->dmax = dmax;
    c->xmax_abs = xmax;
    c->changed = changed;
}

void sl_bellman_check(const sl_problem *p, const double *x, double *y, int32_t *policy, sl_check *c)
{
    check_loop(p, x, y, policy, 0, c);
}

void sl_policy_check(const sl_problem *p, const double *x, double *y, const int32_t *policy, sl_check *c)
{
    check_loop(p, x, y, (int32_t *)policy, 1, c); /* fixed: policy is only read */
}

double sl_policy_residual_bound(sl_ctx *ctx, const sl_problem *p, const double *x, const int32_t *policy)
{
    /* d(s) = r + g sum p x - x(s) accumulated in long double, plus a bound on
     * the rounding of that accumulation: m products, m-1 additions and three
     * more operations, each within LDBL_EPSILON/2 relative (Higham 2002,
     * "Accuracy and Stability of Numerical Algorithms", 2nd ed., Section 3.1,
     * gamma_n ~ n u); (m + 3) LDBL_EPSILON counts each step twice. On x86-64
     * this allowance is 2048 times smaller than the same count in double, so
     * the bound of a direct solve stays close to its true error. */
    const sl_block *b = &p->blk;
    long double g = p->gamma, worst = 0.0L;
    for (int64_t i = 0; i < p->n_local; i++) {
        int64_t k = b->first_pair[i] - b->p_begin + policy[i];
        int64_t t0 = b->first_trans[k] - b->t_begin, t1 = b->first_trans[k + 1] - b->t_begin;
        long double acc = 0.0L, mag = 0.0L;
        for (int64_t t = t0; t < t1; t++) {
            long double px = (long double)b->prob[t] * (long double)x[b->col[t]];
            acc += px;
            mag += fabsl(px);
        }
        long double d = (long double)b->reward[k] + g * acc - (long double)x[i];
        long double scale = fabsl((long double)b->reward[k]) + g * mag + fabsl((long double)x[i]);
        long double e = fabsl(d) + (long double)(t1 - t0 + 3) * LDBL_EPSILON * scale;
        if (!(e == e)) e = (long double)INFINITY; /* NaN certifies nothing */
        if (e > worst) worst = e;
    }
    /* rounded up into double (one rounding, relative DBL_EPSILON/2) */
    double local = (double)worst * (1.0 + DBL_EPSILON);
    return sl_max(ctx, local);
}

void sl_certify(sl_ctx *ctx, const sl_problem *p, sl_check *c)
{
    double in[4] = {-c->dmin, c->dmax, c->xmax_abs, (double)c->changed}, out[4];
    MPI_Allreduce(in, out, 3, MPI_DOUBLE, MPI_MAX, ctx->comm);
    MPI_Allreduce(&in[3], &out[3], 1, MPI_DOUBLE, MPI_SUM, ctx->comm);
    c->dmin = -out[0];
    c->dmax = out[1];
    c->xmax_abs = out[2];
    c->changed = (int64_t)out[3];
    c->sup = fmax(fabs(c->dmin), fabs(c->dmax));
    /* Roundoff allowance: each computed d(s) may differ from the exact one by
     * a few ulps of the magnitudes involved (common practice, no source:
     * 16 eps * (max|x| + max|r|) covers the sums over a handful of
     * successors). It widens the span on both sides. */
    double fp = 16.0 * DBL_EPSILON * (c->xmax_abs + p->rmax_abs);
    c->span = (c->dmax - c->dmin) + 2.0 * fp;
    double g = p->gamma, f = g < 1.0 ? g / (1.0 - g) : INFINITY;
    /* MacQueen bounds (Puterman 1994, Thm 6.6.3): with d = Tx - x,
     *   Tx + f*min d <= v* <= Tx + f*max d, and the greedy policy pi has
     *   v_pi >= Tx + f*min d, so v* - v_pi <= f*span(d). */
    c->value_error = 0.5 * f * c->span + fp;
    c->policy_loss = f * c->span;
}

void sl_midpoint(const sl_problem *p, const double *y, const sl_check *c, double *out)
{
    double g = p->gamma, shift = g / (1.0 - g) * 0.5 * (c->dmin + c->dmax);
    for (int64_t i = 0; i < p->n_local; i++) out[i] = y[i] + shift;
}

static double sweep_part(const sl_problem *p, double *x, int32_t *policy, int eval, int64_t j0, int64_t j1)
{
    const sl_block *b = &p->blk;
    double delta = 0;
    for (int64_t j = j0; j < j1; j++) {
        int64_t i = p->order[j];
        double v;
        if (eval) {
            v = qval(b, b->first_pair[i] - b->p_begin + policy[i], x, p->gamma);
        } else {
            int32_t ch = policy[i];
            v = best_q(b, i, x, p->gamma, &ch);
            policy[i] = ch;
        }
        double dd = fabs(v - x[i]);
        if (dd > delta) delta = dd;
        x[i] = v;
    }
    return delta;
}

double sl_sweep_gs(const sl_problem *p, double *x, int32_t *policy, int eval)
{
    return sweep_part(p, x, policy, eval, 0, p->n_local);
}

/* Both sweeps: with rows, the fixed-policy sweep over them; else over the
 * model's rows. */
static double sweep_any(sl_ctx *ctx, const sl_problem *p, double *x, int32_t *policy, int eval,
                        const sl_eval_rows *rows)
{
    sl_halo_exchange(ctx, &p->halo, x);
    int64_t S = p->staged ? p->stages.n_stages : 1, w = p->n_local / S;
    double delta = 0;
    for (int64_t k = 0; k < S; k++) {
        double d = rows ? sl_eval_rows_sweep_part(p, rows, x, k * w, (k + 1) * w)
                        : sweep_part(p, x, policy, eval, k * w, (k + 1) * w);
        if (d > delta) delta = d;
        /* order position k holds stage S-1-k; the next stage reads it (the
         * last one's values are refreshed by the next sweep's exchange) */
        if (k + 1 < S) sl_halo_exchange_stage(ctx, &p->halo, x, S - 1 - k);
    }
    return delta;
}

double sl_sweep(sl_ctx *ctx, const sl_problem *p, double *x, int32_t *policy, int eval)
{
    return sweep_any(ctx, p, x, policy, eval, NULL);
}

double sl_sweep_rows(sl_ctx *ctx, const sl_problem *p, double *x, const sl_eval_rows *rows)
{
    return sweep_any(ctx, p, x, NULL, 1, rows);
}

double sl_sweep_rows_jacobi(sl_ctx *ctx, const sl_problem *p, double *x, double *y, const sl_eval_rows *rows)
{
    sl_halo_exchange(ctx, &p->halo, x);
    double d[2], g[2];
    sl_eval_rows_jacobi_part(p, rows, x, y, 0, p->n_local, &d[0], &d[1]);
    d[0] = -d[0];
    MPI_Allreduce(d, g, 2, MPI_DOUBLE, MPI_MAX, ctx->comm);
    return g[0] == -INFINITY ? 0.0 : g[1] + g[0];
}

int64_t sl_problem_file_state(const sl_problem *p, int64_t i) { return sl_stage_file(&p->stages, p->blk.s_begin + i); }

sl_status sl_problem_ckpt_write(sl_ctx *ctx, const sl_problem *p, const char *dir, const double *value,
                                const int32_t *actions, const sl_solver_state *state, const sl_history *hist)
{
    sl_status st = SL_OK;
    double *fv = NULL;
    int32_t *fa = NULL;
    if (SL_ALLOC(ctx, fv, p->io.f_n, "values in file order") == NULL ||
        SL_ALLOC(ctx, fa, p->io.f_n, "policy in file order") == NULL)
        st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    SL_TRY(sl_io_to_file(ctx, &p->io, value, sizeof(double), fv));
    SL_TRY(sl_io_to_file(ctx, &p->io, actions, sizeof(int32_t), fa));
    sl_solver_state with = *state;
    with.visit_adjust = p->visit_adjust; /* the checkpoint says which rewards it was computed with */
    st = sl_ckpt_write(ctx, dir, p->meta.fingerprint, p->meta.n_states, p->io.f_begin, p->io.f_n, fv, fa, &with, hist);
cleanup:
    free(fv);
    free(fa);
    return st;
}

/* "visit bonus 0.5" / "visit penalty 0.5" / "no visit adjustment" into buf. */
static const char *adjust_words(double c, char *buf, size_t n)
{
    if (c > 0) snprintf(buf, n, "visit bonus %.17g", c);
    else if (c < 0) snprintf(buf, n, "visit penalty %.17g", -c);
    else snprintf(buf, n, "no visit adjustment");
    return buf;
}

sl_status sl_problem_ckpt_load(sl_ctx *ctx, const sl_problem *p, const char *dir, double *value, int32_t *actions,
                               sl_solver_state *state, sl_history *hist, int *found)
{
    sl_status st = SL_OK;
    double *fv = NULL;
    int32_t *fa = NULL;
    *found = 0;
    if (SL_ALLOC(ctx, fv, p->io.f_n, "values in file order") == NULL ||
        SL_ALLOC(ctx, fa, p->io.f_n, "policy in file order") == NULL)
        st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    SL_TRY(sl_ckpt_load(ctx, dir, p->meta.fingerprint, p->meta.n_states, p->io.f_begin, p->io.f_n, fv, fa, state, hist,
                        found));
    /* values of r + c/sqrt(n) for one c are no start for another c: refuse,
     * leaving the checkpoint as it is (the fingerprint names the model only) */
    if (*found && state->visit_adjust != p->visit_adjust) {
        char was[64], now[64];
        SL_FAIL(SL_EDATA,
                "%s: the checkpoint was computed with %s, this run asks for %s: refusing to mix them; resume with "
                "the same --visit-bonus/--visit-penalty, or use another --checkpoint directory",
                dir, adjust_words(state->visit_adjust, was, sizeof(was)), adjust_words(p->visit_adjust, now, sizeof(now)));
    }
    if (*found) {
        SL_TRY(sl_io_from_file(ctx, &p->io, fv, sizeof(double), value));
        SL_TRY(sl_io_from_file(ctx, &p->io, fa, sizeof(int32_t), actions));
    }
cleanup:
    free(fv);
    free(fa);
    return st;
}

void sl_policy_actions(const sl_problem *p, const int32_t *policy, int32_t *actions)
{
    const sl_block *b = &p->blk;
    for (int64_t i = 0; i < p->n_local; i++) actions[i] = b->action[b->first_pair[i] - b->p_begin + policy[i]];
}

sl_status sl_policy_offsets(sl_ctx *ctx, const sl_problem *p, const int32_t *actions, int32_t *policy,
                            const char *where)
{
    const sl_block *b = &p->blk;
    for (int64_t i = 0; i < p->n_local; i++) {
        int64_t k = sl_pairs_find_action(b->first_pair, b->p_begin, b->action, i, actions[i]);
        if (k < 0)
            return SL_ERR(ctx, SL_EDATA, "%s: state %lld: policy action %d is not available in the model", where,
                          (long long)sl_problem_file_state(p, i), (int)actions[i]);
        policy[i] = (int32_t)(k - (b->first_pair[i] - b->p_begin));
    }
    return SL_OK;
}
