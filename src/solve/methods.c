/* methods.c - the solver handle: Gauss-Seidel / Jacobi value iteration,
 * modified policy iteration and policy iteration, with certified stopping,
 * monitor events and checkpoints. Printing is the caller's business. */
#include <math.h>
#include <signal.h>
#include <string.h>

#include "solve/solve.h"
#include "store/store.h"

typedef struct run {
    sl_ctx *ctx;
    const sl_solver *o;
    sl_problem P;
    double *x, *y;          /* [n_local + n_halo] */
    int32_t *pol;           /* pair offsets, owned states */
    int32_t *actions;       /* scratch for writing */
    sl_history hist;
    sl_solver_state S;
    double t0;              /* start of this process's solve (reset at each checkpoint) */
    double wall0;           /* start of this process's solve, for --walltime: the solver clock's 0 */
    double prev_poll;       /* solver clock of the previous sweep boundary (< 0: none yet) */
    int64_t start_iteration; /* iteration this run started (or resumed) at */
    int held;               /* the walltime stop waited for this run's first iteration */
    double tol;
    double last_ckpt, last_progress;
    sl_check last;
    int have_check;
    void *lu;               /* PI: cached factorization */
    sl_eval_rows prow;    /* MPI: the policy's transitions, contiguous */
    int prow_built;       /* prow holds the rows of pol (the same on every rank) */
    double eval_rate[2];  /* MPI: measured rate per evaluation sweep, gs / jacobi (< 0: not yet) */
    char evaluation[16];
    double lu_estimate;
    int64_t n_ckpt;
    int lock_fd;            /* checkpoint directory lock (rank 0), -1 if none */
    sl_solution *out;
} run;

static double elapsed(const run *r) { return r->S.elapsed + (sl_now() - r->t0); }

/* The largest change of a sweep at which gs checks: the span of the
 * residual, and so the certificate, is then near the tolerance. */
static double sweep_target(const run *r) { return r->tol * (1.0 - r->P.gamma) / (r->P.gamma > 0 ? r->P.gamma : 1.0); }

/* ---- monitor ------------------------------------------------------------------- */

static void notify(run *r, sl_event ev, const sl_check *c, const char *note)
{
    if (r->o->monitor == NULL) return;
    sl_progress p;
    memset(&p, 0, sizeof(p));
    p.event = ev;
    p.iteration = r->S.iteration;
    p.sweeps = r->S.sweeps;
    p.seconds = elapsed(r);
    p.have_check = r->have_check && c != NULL;
    p.residual_sup = p.residual_span = p.value_error = p.policy_loss = NAN;
    p.rate = p.eta = NAN;
    p.note = note;
    p.resumed = r->S.iteration > 0 || r->S.sweeps > 0;
    if (p.have_check) {
        p.residual_sup = c->sup;
        p.residual_span = c->span;
        p.value_error = c->value_error;
        p.policy_loss = c->policy_loss;
        /* observed contraction per sweep from the last two checks */
        if (r->hist.n >= 2) {
            int64_t a = r->hist.n - 2, b = r->hist.n - 1;
            int64_t ds = r->hist.sweeps[b] - r->hist.sweeps[a];
            if (ds > 0 && r->hist.span[a] > 0 && r->hist.span[b] > 0)
                p.rate = pow(r->hist.span[b] / r->hist.span[a], 1.0 / (double)ds);
            double target = sweep_target(r);
            double secs_per_sweep = r->S.sweeps > 0 ? elapsed(r) / (double)r->S.sweeps : 0;
            if (p.rate > 0 && p.rate < 1 && c->span > target)
                p.eta = log(target / c->span) / log(p.rate) * secs_per_sweep;
            else if (c->span <= target)
                p.eta = 0;
        }
    }
    r->o->monitor(&p, r->o->monitor_user);
}

/* ---- checks ----------------------------------------------------------------- */

/* Synchronous check at x: y = Tx, greedy policy into pol; records history.
 * Returns 1 if certified within tolerance. Collective. */
static int check(run *r, int32_t *pol)
{
    sl_halo_exchange(r->ctx, &r->P.halo, r->x);
    sl_bellman_check(&r->P, r->x, r->y, pol, &r->last);
    sl_certify(r->ctx, &r->P, &r->last);
    r->have_check = 1;
    r->S.last_span = r->last.span;
    r->S.last_check_sweeps = r->S.sweeps;
    if (sl_history_push(r->ctx, &r->hist, r->S.iteration, r->S.sweeps, elapsed(r), r->last.sup, r->last.span,
                        r->last.value_error, r->last.policy_loss) != SL_OK)
        return -1;
    notify(r, SL_EVENT_CHECK, &r->last, NULL);
    if (r->last.value_error <= r->tol && r->last.policy_loss <= r->tol) return 1;
    /* The measured spread of d has reached the roundoff allowance: further
     * sweeps cannot shrink the certificate below its floor. */
    double fp = 0.5 * (r->last.span - (r->last.dmax - r->last.dmin));
    if (r->last.dmax - r->last.dmin <= 2.0 * fp) return 3;
    return 0;
}

/* ---- the solution ---------------------------------------------------------------- */

static sl_status form_solution(run *r, int converged)
{
    sl_ctx *ctx = r->ctx;
    sl_status st = SL_OK;
    int64_t n = r->P.n_local;
    int32_t *pol2 = NULL;
    double *val = NULL;
    sl_solution *x = NULL;
    if (SL_ALLOC(ctx, pol2, n, "policy") == NULL || SL_ALLOC(ctx, val, n, "values") == NULL) st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    /* the solution is in the model's layout (P.io), the iterates in P's */
    SL_TRY(sl_agree(ctx, sl_solution_new(ctx, r->P.meta.n_states, r->P.io.f_begin, r->P.io.f_n, 1, &x)));
    memcpy(pol2, r->pol, (size_t)n * sizeof(int32_t));
    /* a fresh synchronous check at the current x defines value and bounds
     * (x itself is left untouched so a checkpoint stays exact) */
    if (!converged) {
        if (check(r, pol2) < 0) st = SL_ENOMEM;
        SL_TRY(sl_agree(ctx, st));
    }
    sl_midpoint(&r->P, r->y, &r->last, val);
    sl_policy_actions(&r->P, pol2, r->actions);
    SL_TRY(sl_io_to_file(ctx, &r->P.io, val, sizeof(double), x->value));
    SL_TRY(sl_io_to_file(ctx, &r->P.io, r->actions, sizeof(int32_t), x->action));
    snprintf(x->info.model_fingerprint, sizeof(x->info.model_fingerprint), "%s", r->P.meta.fingerprint);
    snprintf(x->info.method, sizeof(x->info.method), "%s", sl_method_name(r->o->method));
    snprintf(x->info.order, sizeof(x->info.order), "%s", sl_order_name(r->P.order_used));
    snprintf(x->info.evaluation, sizeof(x->info.evaluation), "%s", r->evaluation);
    x->info.iterations = r->S.iteration;
    x->info.sweeps = r->S.sweeps;
    x->info.seconds = elapsed(r);
    x->info.discount = r->P.gamma;
    x->info.visit_adjust = r->P.visit_adjust;
    x->info.checkpoints_written = r->n_ckpt;
    x->cert.converged = converged;
    x->cert.tolerance = r->tol;
    x->cert.residual_sup = r->last.sup;
    x->cert.residual_span = r->last.span;
    x->cert.residual_min = r->last.dmin;
    x->cert.residual_max = r->last.dmax;
    x->cert.value_error = r->last.value_error;
    x->cert.policy_loss = r->last.policy_loss;
    notify(r, SL_EVENT_END, &r->last, NULL);
    x->hist = r->hist;
    memset(&r->hist, 0, sizeof(r->hist));
    r->out = x;
    x = NULL;
cleanup:
    sl_solution_free(&x);
    free(pol2);
    free(val);
    return st;
}

/* ---- checkpoints and stop requests ------------------------------------------------ */

enum { POLL_NONE = 0, POLL_CKPT = 1, POLL_STOP = 2 };

/* sl_now() time by which a --walltime run must stop (0: none): the margin
 * is the one poll() uses */
static double stop_deadline(const run *r)
{
    if (r->o->walltime <= 0) return 0;
    double margin = fmax(10.0, 0.05 * r->o->walltime);
    if (r->o->walltime < 60) margin = fmin(margin, 0.2 * r->o->walltime);
    double origin = r->o->have_wall_origin ? r->o->wall_origin : r->wall0;
    return origin + r->o->walltime - margin;
}

const char *sl_signal_name(int sig)
{
    switch (sig) {
    case SIGUSR1: return "USR1";
    case SIGUSR2: return "USR2";
    case SIGTERM: return "TERM";
    case SIGINT: return "INT";
    default: return "other";
    }
}

/* Agree on what to do at this sweep boundary. Deterministic for the numbers:
 * only whether to write/stop depends on time or signals. Collective. */
static int poll(run *r)
{
    int want = 0, flag = 0, by_signal = 0, by_walltime = 0;
    /* the boundary's time is taken before the flag is read and again after:
     * a signal noticed here arrived after `before` of the previous boundary
     * (which saw no flag) and before `now` of this one */
    /* the solver's clock: seconds since the walltime origin (the process
     * start when the CLI sets it), else since the start of this solve */
    double c0 = r->o->have_wall_origin ? r->o->wall_origin : r->wall0;
    double before = sl_now() - c0;
    if (r->ctx->signal_flag) flag = *r->ctx->signal_flag;
    double now = sl_now();
    if (flag) {
        want = flag >= 2 ? POLL_STOP : POLL_CKPT;
        if (want == POLL_CKPT) *r->ctx->signal_flag = 0;
        by_signal = 1;
    }
    double every = r->o->checkpoint_every > 0 ? r->o->checkpoint_every : 600.0;
    if (r->o->checkpoint_dir && now - r->last_ckpt >= every && want < POLL_CKPT) want = POLL_CKPT;
    double margin = 0, due = 0;
    if (r->o->walltime > 0) {
        /* stop with a margin for the final write: 5% or 10 s, whichever is more (common practice, no source) */
        margin = fmax(10.0, 0.05 * r->o->walltime);
        if (r->o->walltime < 60) margin = fmin(margin, 0.2 * r->o->walltime);
        due = r->o->walltime - margin;
        /* every run makes progress: the walltime stop waits for one
         * iteration after the (re)start, so a requeued chain whose start-up
         * eats the walltime still converges after finitely many runs (a
         * signal still stops at once) */
        if (now - c0 >= due && r->S.iteration == r->start_iteration) r->held = 1;
        if (now - c0 >= due && r->S.iteration > r->start_iteration) {
            want = POLL_STOP;
            by_walltime = 1;
        }
    }
    int agreed = 0, why = (by_walltime ? 2 : 0) | (by_signal ? 1 : 0), why_any = 0;
    MPI_Allreduce(&want, &agreed, 1, MPI_INT, MPI_MAX, r->ctx->comm);
    /* the walltime may be reached first on another rank (each measures from
     * its own start): rank 0 logs the stop all the same */
    MPI_Allreduce(&why, &why_any, 1, MPI_INT, MPI_BOR, r->ctx->comm);
    if ((why_any & 2) && !by_signal) by_walltime = 1;
    /* mpiexec forwards a signal to every rank, but not at the same moment:
     * another rank's flag may decide the stop before rank 0 sees its own */
    int elsewhere = (why_any & 1) && !by_signal && !by_walltime;
    /* the solver's own account of when it acted (rank 0's clock): what the
     * signal and walltime tests check, instead of a busy machine's wall clock */
    char prev[32] = "none (first boundary)";
    if (r->prev_poll >= 0) snprintf(prev, sizeof(prev), "%.3f s", r->prev_poll);
    if (by_signal) {
        const volatile sig_atomic_t *in = r->ctx->signal_info;
        if (in != NULL && in[0] != 0) {
            double at = (double)in[1] + 1e-6 * (double)in[2] - c0;
            sl_log(r->ctx, "solve: signal %d (%s) arrived at %.3f s; acted on at the sweep boundary at %.3f s "
                           "(iteration %lld; previous boundary %s)",
                   (int)in[0], sl_signal_name((int)in[0]), at, now - c0, (long long)r->S.iteration, prev);
        } else {
            sl_log(r->ctx, "solve: stop/checkpoint flag seen at the sweep boundary at %.3f s (iteration %lld; "
                           "previous boundary %s)",
                   now - c0, (long long)r->S.iteration, prev);
        }
    } else if (elsewhere) {
        sl_log(r->ctx, "solve: a signal received by another rank acted on at the sweep boundary at %.3f s "
                       "(iteration %lld; previous boundary %s)",
               now - c0, (long long)r->S.iteration, prev);
    } else if (by_walltime) {
        sl_log(r->ctx, "solve: --walltime %.3f s: stop due at %.3f s (margin %.3f s); acted on at the sweep boundary "
                       "at %.3f s (iteration %lld; previous boundary %s)%s",
               r->o->walltime, due, margin, now - c0, (long long)r->S.iteration, prev,
               r->held ? "; held for this run's first iteration (every run makes progress)" : "");
    }
    r->prev_poll = before;
    return agreed;
}

static sl_status checkpoint(run *r)
{
    if (r->o->checkpoint_dir == NULL) return SL_OK;
    sl_policy_actions(&r->P, r->pol, r->actions);
    r->S.elapsed = elapsed(r);
    r->t0 = sl_now();
    snprintf(r->S.method, sizeof(r->S.method), "%s", sl_method_name(r->o->method));
    sl_status st = sl_problem_ckpt_write(r->ctx, &r->P, r->o->checkpoint_dir, r->x, r->actions, &r->S, &r->hist);
    r->last_ckpt = sl_now();
    if (st == SL_OK) {
        r->n_ckpt++;
        notify(r, SL_EVENT_CHECKPOINT, r->have_check ? &r->last : NULL, r->o->checkpoint_dir);
    }
    return st;
}

/* ---- methods ------------------------------------------------------------------ */

/* One step of a method. Returns 1 converged, 0 continue, <0 error (st set). */
static int step_gs(run *r)
{
    double delta = sl_max(r->ctx, sl_sweep(r->ctx, &r->P, r->x, r->pol, 0));
    r->S.sweeps++;
    r->S.since_check++;
    r->S.iteration++;
    if (r->S.since_check >= r->S.check_interval || delta <= sweep_target(r)) {
        r->S.since_check = 0;
        if (r->S.check_interval < 32) r->S.check_interval *= 2;
        int c = check(r, r->pol);
        if (c != 0) return c;
        /* y = Tx is one more exact backup; continue from it */
        double *t = r->x;
        r->x = r->y;
        r->y = t;
        r->S.sweeps++;
    }
    return 0;
}

static int step_jacobi(run *r)
{
    int c = check(r, r->pol);
    r->S.iteration++;
    r->S.sweeps++;
    if (c != 0) return c;
    double *t = r->x;
    r->x = r->y;
    r->y = t;
    return 0;
}

static int step_mpi(run *r, sl_status *st)
{
    int c = check(r, r->pol); /* improvement: greedy policy + certificate */
    r->S.sweeps++;
    if (c != 0) return c;
    double *t = r->x;
    r->x = r->y;
    r->y = t;
    /* the evaluation sweeps run over the policy's own transitions, laid
     * out contiguously: after an improvement only the changed states' rows
     * are copied again (the count of changes is global, so all ranks
     * decide alike). With m adaptive they stop early where gs would
     * check: at a sweep that changed no value by more than the target. */
    if (r->last.changed > 0 || !r->prow_built) {
        *st = sl_agree(r->ctx, sl_eval_rows_update(r->ctx, &r->P, r->pol, &r->prow));
        if (*st != SL_OK) return -1;
        int64_t nvec = 0, nent = 0;
        if (!r->prow_built && sl_eval_rows_shared(&r->prow, &nvec, &nent))
            sl_log(r->ctx, "solve: the policy's rows share %lld distinct probability vectors (%lld entries, rank 0)",
                   (long long)nvec, (long long)nent);
        r->prow_built = 1;
    }
    const double target = sweep_target(r);
    int64_t m = r->o->sweeps > 0 ? r->o->sweeps : r->S.mpi_m;
    /* staged models: stage-reverse Gauss-Seidel sweeps, which carry a
     * value back through every stage in one sweep. Others: whichever kind
     * converged faster per sweep when each was tried once (gs's largest
     * change, jacobi's span of changes: what each kind's stop reads) */
    const double *rate = r->eval_rate;
    int rated = rate[SL_EVAL_GS] >= 0 && rate[SL_EVAL_JACOBI] >= 0;
    int trial = !r->P.staged && !rated;
    int kind = r->P.staged ? SL_EVAL_GS
             : rated       ? sl_mpi_pick_eval(rate[SL_EVAL_GS], rate[SL_EVAL_JACOBI])
             : rate[SL_EVAL_GS] < 0 ? SL_EVAL_GS : SL_EVAL_JACOBI;
    /* a trial runs at least SL_EVAL_TRIAL sweeps and rates the second half,
     * past the first sweeps' quick drop of the fast components (an M given
     * is kept: below SL_EVAL_TRIAL no trial completes, Gauss-Seidel stays) */
    if (trial && r->o->sweeps <= 0 && m < SL_EVAL_TRIAL) m = SL_EVAL_TRIAL;
    snprintf(r->evaluation, sizeof(r->evaluation), "%s", kind == SL_EVAL_JACOBI ? "jacobi" : "gauss-seidel");
    double mid = 0, delta = 0;
    int64_t done = 0;
    for (int64_t j = 0; j < m; j++) {
        if (kind == SL_EVAL_JACOBI) {
            delta = sl_sweep_rows_jacobi(r->ctx, &r->P, r->x, r->y, &r->prow);
            double *t2 = r->x;
            r->x = r->y;
            r->y = t2;
        } else {
            delta = sl_max(r->ctx, sl_sweep_rows(r->ctx, &r->P, r->x, &r->prow));
        }
        r->S.sweeps++;
        if (++done == SL_EVAL_TRIAL / 2) mid = delta;
        if (r->o->sweeps <= 0 && delta <= target && !(trial && done < SL_EVAL_TRIAL))
            break; /* an M given is kept */
    }
    if (trial && done >= SL_EVAL_TRIAL) {
        /* converged within the trial: as fast as can be (rate 0) */
        r->eval_rate[kind] = mid > 0 ? pow(delta / mid, 1.0 / (double)(done - SL_EVAL_TRIAL / 2)) : 0.0;
        if (rate[SL_EVAL_GS] >= 0 && rate[SL_EVAL_JACOBI] >= 0)
            sl_log(r->ctx, "solve: evaluation sweeps %s (change shrank %.3g per sweep with gs, %.3g with jacobi)",
                   sl_mpi_pick_eval(rate[SL_EVAL_GS], rate[SL_EVAL_JACOBI]) == SL_EVAL_JACOBI ? "jacobi" : "gs",
                   rate[SL_EVAL_GS], rate[SL_EVAL_JACOBI]);
    }
    if (r->o->sweeps <= 0) r->S.mpi_m = sl_mpi_next_m(r->S.mpi_m, r->last.changed, r->P.meta.n_states);
    r->S.iteration++;
    return 0;
}

static int step_pi(run *r, sl_status *st)
{
    sl_ctx *ctx = r->ctx;
    if (!r->S.pi_initialized) {
        /* initial policy: greedy with respect to the starting values */
        check(r, r->pol);
        r->S.sweeps++;
        r->S.pi_initialized = 1;
        r->hist.n = 0; /* that check certifies nothing useful */
    }
    int direct = 0;
    double est = 0;
    double limit = r->o->memory_limit > 0 ? r->o->memory_limit : 0.5 * sl_physical_memory();
    int abandoned = 0;
    *st = sl_evaluate_direct(ctx, &r->P, r->pol, limit, stop_deadline(r), r->x, &direct, &abandoned, &est, &r->lu);
    if (*st != SL_OK) return -1;
    if (abandoned) return 0; /* poll() acts on the stop request; x is as before */
    r->lu_estimate = est;
    if (!direct) {
        *st = sl_direct_declined(ctx, est, limit, r->o->strict_memory, strcmp(r->evaluation, "iterative") != 0,
                                 "evaluate iteratively", "evaluating iteratively");
        if (*st != SL_OK) return -1;
        snprintf(r->evaluation, sizeof(r->evaluation), "iterative");
        sl_check ce;
        int64_t sw = 0;
        *st = sl_evaluate_iterative(ctx, &r->P, r->pol, r->S.eval_tol, 0, r->x, r->y, &ce, &sw);
        if (*st != SL_OK) return -1;
        r->S.sweeps += sw;
    } else {
        snprintf(r->evaluation, sizeof(r->evaluation), "direct");
    }
    r->S.iteration++;
    int c = check(r, r->pol);
    r->S.sweeps++;
    if (c != 0) return c;
    if (r->last.changed == 0) {
        /* stable policy but not certified: evaluation was too loose */
        if (!direct) r->S.eval_tol *= 0.01;
        else {
            /* exact evaluation and no improving action: the certificate is
             * limited by roundoff; accept what the bound says */
            return 2;
        }
    }
    return 0;
}

/* take: m itself when the solve may take its rows (sl_solver_solve_lean) */
static sl_status solve_model(sl_solver *o, const sl_model *m, sl_model *take, sl_solution **xout)
{
    if (o == NULL) return SL_EUSAGE;
    sl_ctx *ctx = o->ctx;
    sl_status st = SL_OK;
    run R;
    run *r = &R;
    memset(r, 0, sizeof(*r));
    r->ctx = ctx;
    r->o = o;
    r->t0 = sl_now();
    r->wall0 = r->t0;
    r->prev_poll = -1;
    r->lock_fd = -1;
    r->last_ckpt = r->t0;
    r->last_progress = r->t0 - 1e9;
    r->tol = o->tolerance > 0 ? o->tolerance : 1e-6;
    sl_status outcome = SL_OK;
    int converged = 0;
    if (xout == NULL) return SL_ERR(ctx, SL_EUSAGE, "sl_solver_solve: no output handle");
    *xout = NULL;

    if (o->checkpoint_dir) SL_TRY(sl_ckpt_lock(ctx, o->checkpoint_dir, &r->lock_fd));
    /* the visit adjustment reads the model's visit counts in its own
     * layout: with it the rows stay where they are */
    if (take != NULL && o->visit_adjust == 0.0) SL_TRY(sl_problem_from_model_taking(ctx, take, o->order, &r->P));
    else SL_TRY(sl_problem_from_model(ctx, m, o->order, 0, &r->P));
    r->P.direct_time_limit = o->direct_time_limit;
    SL_TRY(sl_problem_visit_adjust(ctx, &r->P, m, o->visit_adjust));
    int64_t n = r->P.n_local, nx = n + r->P.halo.n_halo;
    if (SL_ZALLOC(ctx, r->x, nx, "values") == NULL || SL_ZALLOC(ctx, r->y, nx, "values") == NULL ||
        SL_ZALLOC(ctx, r->pol, n, "policy") == NULL || SL_ZALLOC(ctx, r->actions, n, "policy") == NULL)
        st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    r->S.check_interval = 1;
    r->S.mpi_m = SL_MPI_M_MIN;
    r->S.eval_tol = r->tol * 0.1;
    r->eval_rate[SL_EVAL_GS] = r->eval_rate[SL_EVAL_JACOBI] = -1;
    if (o->method == SL_METHOD_MPI) {
        /* start below v*: x = min r / (1 - gamma) makes Tx >= x, the
         * condition of the convergence theorem (Puterman & Shin 1978) */
        double rmin = INFINITY;
        for (int64_t k = 0; k < sl_block_pairs(&r->P.blk); k++) rmin = fmin(rmin, r->P.blk.reward[k]);
        rmin = sl_min(ctx, rmin);
        for (int64_t i = 0; i < n; i++) r->x[i] = rmin / (1.0 - r->P.gamma);
    }
    if (o->resume && o->checkpoint_dir) {
        int found = 0;
        SL_TRY(sl_problem_ckpt_load(ctx, &r->P, o->checkpoint_dir, r->x, r->actions, &r->S, &r->hist, &found));
        if (found) {
            SL_TRY(sl_agree(ctx, sl_policy_offsets(ctx, &r->P, r->actions, r->pol, o->checkpoint_dir)));
            if (strcmp(r->S.method, sl_method_name(o->method)) != 0) {
                sl_warn(ctx, "checkpoint was written by method %s; continuing with %s from its values", r->S.method,
                        sl_method_name(o->method));
                sl_solver_state keep = r->S;
                memset(&r->S, 0, sizeof(r->S));
                r->S.check_interval = 1;
                r->S.mpi_m = SL_MPI_M_MIN;
                r->S.eval_tol = r->tol * 0.1;
                r->S.elapsed = keep.elapsed;
                r->S.sweeps = keep.sweeps;
                r->S.iteration = keep.iteration;
            }
        }
    }
    r->start_iteration = r->S.iteration;
    notify(r, SL_EVENT_START, NULL, sl_order_name(r->P.order_used));

    for (;;) {
        int pr = poll(r);
        if (pr >= POLL_CKPT) SL_TRY(checkpoint(r));
        if (pr == POLL_STOP) {
            notify(r, SL_EVENT_STOP, r->have_check ? &r->last : NULL,
                   o->checkpoint_dir ? "stop requested; checkpoint written"
                                     : "stop requested; no checkpoint directory given");
            outcome = SL_ESTOPPED;
            break;
        }
        if (o->max_iterations > 0 && r->S.iteration >= o->max_iterations) {
            if (o->checkpoint_dir) SL_TRY(checkpoint(r));
            notify(r, SL_EVENT_STOP, r->have_check ? &r->last : NULL,
                   "iteration limit reached without certifying the tolerance");
            outcome = SL_ESTOPPED;
            break;
        }
        int c = 0;
        switch (o->method) {
        case SL_METHOD_GS: c = step_gs(r); break;
        case SL_METHOD_JACOBI: c = step_jacobi(r); break;
        case SL_METHOD_MPI: c = step_mpi(r, &st); break;
        case SL_METHOD_PI: c = step_pi(r, &st); break;
        }
        st = sl_agree(ctx, st);
        if (st != SL_OK) goto cleanup;
        if (c < 0) SL_TRY(sl_agree(ctx, SL_ERR(ctx, SL_ENOMEM, "out of memory recording the history")));
        if (c == 2 || c == 3) {
            /* not 75: a requeued job could never do better */
            sl_warn(ctx, "cannot certify the tolerance %.1e: floating-point roundoff limits this model's "
                         "certificate to about %.3e (value) and %.3e (policy); the solution is written with "
                         "converged=0; ask for a tolerance of at least %.1e",
                    r->tol, r->last.value_error, r->last.policy_loss,
                    fmax(r->last.value_error, r->last.policy_loss) * 2.0);
            outcome = SL_EUSAGE;
            break;
        }
        if (c == 1) {
            converged = 1;
            break;
        }
    }
    SL_TRY(form_solution(r, converged));
    *xout = r->out;
    r->out = NULL;
    st = outcome;
    if (outcome == SL_EUSAGE)
        st = SL_ERR(ctx, SL_EUSAGE, "tolerance %.1e is below the roundoff floor of this model (about %.1e)", r->tol,
                    fmax(r->last.value_error, r->last.policy_loss));
    else if (outcome == SL_ESTOPPED)
        st = SL_ERR(ctx, SL_ESTOPPED, "stopped before certifying the tolerance %.1e (bounds %.3e, %.3e)%s", r->tol,
                    r->last.value_error, r->last.policy_loss,
                    o->checkpoint_dir ? "; a checkpoint was written" : "");
cleanup:
    sl_solution_free(&r->out);
    sl_evaluate_direct_free(&r->lu);
    sl_eval_rows_free(&r->prow);
    free(r->x);
    free(r->y);
    free(r->pol);
    free(r->actions);
    sl_history_free(&r->hist);
    sl_problem_free(&r->P);
    sl_ckpt_unlock(&r->lock_fd);
    return st;
}

sl_status sl_solver_solve(sl_solver *o, const sl_model *m, sl_solution **xout) { return solve_model(o, m, NULL, xout); }

sl_status sl_solver_solve_lean(sl_solver *o, sl_model *m, sl_solution **xout) { return solve_model(o, m, m, xout); }

/* ---- the solver handle --------------------------------------------------------------- */

sl_status sl_solver_create(sl_ctx *ctx, sl_solver **out)
{
    sl_solver *s = NULL;
    if (out == NULL) return SL_ERR(ctx, SL_EUSAGE, "sl_solver_create: no output handle");
    *out = NULL;
    sl_status st = SL_OK;
    if (SL_ZALLOC(ctx, s, 1, "solver") == NULL) st = SL_ENOMEM;
    st = sl_agree(ctx, st);
    if (st != SL_OK) return st;
    s->ctx = ctx;
    s->method = SL_METHOD_GS;
    s->order = SL_ORDER_AUTO;
    s->tolerance = 1e-6;
    s->direct_time_limit = SL_DIRECT_TIME_LIMIT;
    *out = s;
    return SL_OK;
}

void sl_solver_free(sl_solver **ps)
{
    if (ps == NULL || *ps == NULL) return;
    free((*ps)->checkpoint_dir);
    free(*ps);
    *ps = NULL;
}

sl_status sl_solver_set_method(sl_solver *s, sl_method method)
{
    if (s == NULL) return SL_EUSAGE;
    if (method != SL_METHOD_GS && method != SL_METHOD_JACOBI && method != SL_METHOD_MPI && method != SL_METHOD_PI)
        return SL_ERR(s->ctx, SL_EUSAGE, "sl_solver_set_method: unknown method %d", (int)method);
    s->method = method;
    return SL_OK;
}

sl_status sl_solver_set_tolerance(sl_solver *s, double eps)
{
    if (s == NULL) return SL_EUSAGE;
    if (!(eps > 0) || !isfinite(eps))
        return SL_ERR(s->ctx, SL_EUSAGE, "sl_solver_set_tolerance: %g is not a positive number", eps);
    s->tolerance = eps;
    return SL_OK;
}

sl_status sl_solver_set_order(sl_solver *s, sl_order order)
{
    if (s == NULL) return SL_EUSAGE;
    if (order != SL_ORDER_AUTO && order != SL_ORDER_NATURAL && order != SL_ORDER_STAGE_REVERSE &&
        order != SL_ORDER_REVERSE)
        return SL_ERR(s->ctx, SL_EUSAGE, "sl_solver_set_order: unknown order %d", (int)order);
    s->order = order;
    return SL_OK;
}

sl_status sl_solver_set_max_iterations(sl_solver *s, int64_t n)
{
    if (s == NULL) return SL_EUSAGE;
    if (n < 0) return SL_ERR(s->ctx, SL_EUSAGE, "sl_solver_set_max_iterations: %lld is negative", (long long)n);
    s->max_iterations = n;
    return SL_OK;
}

sl_status sl_solver_set_walltime(sl_solver *s, double seconds)
{
    if (s == NULL) return SL_EUSAGE;
    if (!(seconds >= 0) || !isfinite(seconds))
        return SL_ERR(s->ctx, SL_EUSAGE, "sl_solver_set_walltime: %g is not a number of seconds", seconds);
    s->walltime = seconds;
    return SL_OK;
}

sl_status sl_solver_set_walltime_origin(sl_solver *s, double clock_seconds)
{
    if (s == NULL) return SL_EUSAGE;
    s->wall_origin = clock_seconds;
    s->have_wall_origin = 1;
    return SL_OK;
}

sl_status sl_solver_set_sweeps(sl_solver *s, int sweeps)
{
    if (s == NULL) return SL_EUSAGE;
    if (sweeps < 0 || sweeps > 100000)
        return SL_ERR(s->ctx, SL_EUSAGE, "sl_solver_set_sweeps: %d is not in [0, 100000]", sweeps);
    s->sweeps = sweeps;
    return SL_OK;
}

sl_status sl_solver_set_memory_limit(sl_solver *s, double bytes, int strict)
{
    if (s == NULL) return SL_EUSAGE;
    if (!(bytes >= 0) || !isfinite(bytes))
        return SL_ERR(s->ctx, SL_EUSAGE, "sl_solver_set_memory_limit: %g is not a number of bytes", bytes);
    s->memory_limit = bytes;
    s->strict_memory = strict != 0;
    return SL_OK;
}

sl_status sl_solver_set_direct_time_limit(sl_solver *s, double seconds)
{
    if (s == NULL) return SL_EUSAGE;
    if (!(seconds >= 0) || !isfinite(seconds))
        return SL_ERR(s->ctx, SL_EUSAGE, "sl_solver_set_direct_time_limit: %g is not a number of seconds", seconds);
    s->direct_time_limit = seconds;
    return SL_OK;
}

static sl_status set_visit_adjust(sl_solver *s, double c, const char *what)
{
    if (s == NULL) return SL_EUSAGE;
    if (!(c >= 0) || !isfinite(c)) return SL_ERR(s->ctx, SL_EUSAGE, "%s: %g is not a number >= 0", what, c);
    s->visit_adjust = c;
    return SL_OK;
}

sl_status sl_solver_set_visit_bonus(sl_solver *s, double c)
{
    return set_visit_adjust(s, c, "sl_solver_set_visit_bonus");
}

sl_status sl_solver_set_visit_penalty(sl_solver *s, double c)
{
    sl_status st = set_visit_adjust(s, c, "sl_solver_set_visit_penalty");
    if (st == SL_OK) s->visit_adjust = -c;
    return st;
}

sl_status sl_solver_set_checkpoint(sl_solver *s, const char *dir, double every_s, int resume)
{
    if (s == NULL) return SL_EUSAGE;
    if (!(every_s >= 0) || !isfinite(every_s))
        return SL_ERR(s->ctx, SL_EUSAGE, "sl_solver_set_checkpoint: interval %g is not a number of seconds", every_s);
    char *copy = NULL;
    if (dir != NULL && (copy = strdup(dir)) == NULL)
        return SL_ERR(s->ctx, SL_ENOMEM, "out of memory copying the checkpoint directory name");
    free(s->checkpoint_dir);
    s->checkpoint_dir = copy;
    s->checkpoint_every = every_s;
    s->resume = resume != 0;
    return SL_OK;
}

sl_status sl_solver_set_monitor(sl_solver *s, sl_monitor_fn fn, void *user)
{
    if (s == NULL) return SL_EUSAGE;
    s->monitor = fn;
    s->monitor_user = user;
    return SL_OK;
}

double sl_clock(void) { return sl_now(); }
