/* cmd_solve.c - solve, evaluate, verify, export and simulate commands:
 * options, the library calls, and everything printed. */
#include <math.h>
#include <signal.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "cli/cli.h"
#include "cli/cmd_totals.h"
#include "core/json.h"

/* What `sluice solve` was asked for. */
typedef struct solve_args {
    const char *model, *output, *report;
    sl_method method;
    sl_order order;
    double tolerance;
    int64_t max_iterations;
    double walltime;
    int sweeps;
    double memory_limit;
    int strict_memory;
    double direct_time_limit;   /* < 0: the library's default */
    const char *checkpoint_dir;
    double checkpoint_every;
    int resume;
    double progress_every;
    int64_t horizon;            /* finite */
    const char *terminal;       /* finite */
    double aperiodicity;        /* average */
    double visit_bonus, visit_penalty;  /* estimated models: r +- c/sqrt(visits) */
} solve_args;

static int num_opt(cli_args *a, const char *name, double *out)
{
    const char *v = cli_value(a);
    return v != NULL && cli_double(a, name, v, out);
}

static int int_opt(cli_args *a, const char *name, int64_t *out)
{
    const char *v = cli_value(a);
    return v != NULL && cli_int64(a, name, v, out);
}

static const char solve_help[] =
    "usage: sluice solve MODEL.h5 -o SOLUTION.h5 [options]\n"
    "  compute an optimal policy and its value with a certified error bound.\n"
    "  --method M            gs (Gauss-Seidel value iteration, default), jacobi (value\n"
    "                        iteration), mpi (modified policy iteration), pi (policy\n"
    "                        iteration with exact UMFPACK evaluation)\n"
    "  --tolerance EPS       certify |value - v*| <= EPS and the policy within EPS of\n"
    "                        optimal in every state (default 1e-6)\n"
    "  --order O             sweep order: auto (stage-reverse when the model has a stage\n"
    "                        factor), natural, stage-reverse, reverse\n"
    "  --sweeps M            mpi: partial-evaluation sweeps per iteration (default adaptive)\n"
    "  --max-iterations N    stop after N iterations (exit 75 if not certified)\n"
    "  --memory-limit BYTES  pi: largest factorization to attempt (default half of RAM)\n"
    "  --strict-memory       pi: fail instead of evaluating iteratively when over the limit\n"
    "                        (total/average: instead of falling back to value iteration)\n"
    "  --direct-time-limit S pi: do not start a factorization UMFPACK estimates to take\n"
    "                        longer than S seconds (default 120; 0 = no limit)\n"
    "  --checkpoint DIR      write checkpoints to DIR (newest two kept)\n"
    "  --checkpoint-every S  seconds between checkpoints (default 600)\n"
    "  --resume              continue from the newest valid checkpoint in DIR (fresh if none)\n"
    "  --walltime S          stop cleanly before S seconds (exit 75); also read from\n"
    "                        $SLUICE_WALLTIME, or $SLURM_JOB_END_TIME when set\n"
    "  --report FILE.json    machine-readable report\n"
    "  --progress-every S    seconds between progress lines (default 1 on a terminal, 30 otherwise)\n"
    "objectives other than discounted (recorded in the model; docs/objectives.md):\n"
    "  --horizon H           finite: number of stages (required)\n"
    "  --terminal SOL.h5     finite: terminal values from another solution's /value\n"
    "                        (default: the model's /terminal_value, else 0)\n"
    "  --aperiodicity TAU    average: weight of staying put in the transform, in (0, 1)\n"
    "                        (default 0.5); --tolerance bounds the gain\n"
    "models from `sluice estimate` (discounted): sensitivity to thin data\n"
    "  --visit-bonus C       solve with r(s,a) + C/sqrt(visits(s,a)) (optimistic)\n"
    "  --visit-penalty C     solve with r(s,a) - C/sqrt(visits(s,a)) (pessimistic)\n"
    "signals: USR1 = checkpoint now and continue; TERM, INT, USR2 = checkpoint and exit 75.\n";

/* ---- progress lines (rank 0) ------------------------------------------------------ */

typedef struct monitor_state {
    cli_args *a;
    const solve_args *o;
    double every, last;
} monitor_state;

static void stamp(char *buf, size_t n)
{
    time_t t = time(NULL);
    struct tm tmv;
    if (localtime_r(&t, &tmv) == NULL || strftime(buf, n, "%Y-%m-%d %H:%M:%S", &tmv) == 0) snprintf(buf, n, "?");
}

static void on_progress(const sl_progress *p, void *user)
{
    monitor_state *ms = user;
    sl_ctx *ctx = ms->a->ctx;
    if (sl_ctx_rank(ctx) != 0 || sl_ctx_verbosity(ctx) < 1) return;
    char ts[32];
    stamp(ts, sizeof(ts));
    const solve_args *o = ms->o;
    switch (p->event) {
    case SL_EVENT_START:
        if (o->resume && p->resumed)
            fprintf(stderr, "[%s] solve: resumed at iteration %lld, sweep %lld (%.1f s already spent)\n", ts,
                    (long long)p->iteration, (long long)p->sweeps, p->seconds);
        else if (o->resume)
            fprintf(stderr, "[%s] solve: no checkpoint in %s; starting fresh\n", ts, o->checkpoint_dir);
        fprintf(stderr, "[%s] solve: %s, %s order, %d rank(s), tolerance %.1e\n", ts, o->model,
                p->note ? p->note : "?", sl_ctx_size(ctx), o->tolerance > 0 ? o->tolerance : 1e-6);
        return;
    case SL_EVENT_CHECKPOINT:
        fprintf(stderr, "[%s] solve: checkpoint written to %s (iteration %lld, sweep %lld)\n", ts,
                p->note ? p->note : "?", (long long)p->iteration, (long long)p->sweeps);
        return;
    case SL_EVENT_STOP:
        fprintf(stderr, "[%s] solve: %s (iteration %lld, sweep %lld, %.1f s)\n", ts, p->note ? p->note : "stopping",
                (long long)p->iteration, (long long)p->sweeps, p->seconds);
        return;
    case SL_EVENT_CHECK:
    case SL_EVENT_END:
        break;
    }
    double now = sl_clock();
    if (p->event == SL_EVENT_CHECK && now - ms->last < ms->every) return;
    ms->last = now;
    if (!p->have_check) {
        fprintf(stderr, "[%s] solve: iter %lld  sweeps %lld  %.1fs  (no Bellman check yet)\n", ts,
                (long long)p->iteration, (long long)p->sweeps, p->seconds);
        return;
    }
    char etas[32] = "?";
    if (isfinite(p->eta)) snprintf(etas, sizeof(etas), "%.0fs", p->eta);
    fprintf(stderr,
            "[%s] solve: iter %lld  sweeps %lld  sup|Tv-v| %.3e  span %.3e  bound %.3e  rate %.4f  %.1fs  ETA %s\n",
            ts, (long long)p->iteration, (long long)p->sweeps, p->residual_sup, p->residual_span,
            fmax(p->value_error, p->policy_loss), p->rate, p->seconds, etas);
}

/* ---- report and summary --------------------------------------------------------- */

/* The values' extent, for bounds relative to the smallest value. */
typedef struct value_extent {
    double vmin, vmax, min_abs;
} value_extent;

/* Units of the model in a report: "units": {"reward", "period"}, and the
 * bounds relative to the smallest value in magnitude (null if it is 0). */
static void json_units_and_relative(sl_json *j, const sl_model *m, const value_extent *e, double value_error,
                                    double policy_loss)
{
    sl_json_obj_open(j, "units");
    sl_json_str(j, "reward", sl_model_reward_unit(m));
    sl_json_str(j, "period", sl_model_period_unit(m));
    sl_json_close_obj(j);
    sl_json_num(j, "value_min", e->vmin);
    sl_json_num(j, "value_max", e->vmax);
    sl_json_num(j, "value_min_abs", e->min_abs);
    sl_json_num(j, "value_error_relative", sl_bound_relative(value_error, e->min_abs));
    sl_json_num(j, "policy_loss_relative", sl_bound_relative(policy_loss, e->min_abs));
}

static int write_report(cli_args *a, const solve_args *o, const sl_model *m, const sl_solution *x, int exit_code,
                        const value_extent *e)
{
    sl_ctx *ctx = a->ctx;
    if (o->report == NULL || sl_ctx_rank(ctx) != 0) return 0;
    sl_solution_info in;
    sl_certificate c;
    sl_history_view h;
    sl_solution_get_info(x, &in);
    sl_solution_get_certificate(x, &c);
    sl_solution_get_history(x, &h);
    char tmp[4200];
    snprintf(tmp, sizeof(tmp), "%s.partial", o->report);
    FILE *f = fopen(tmp, "w");
    if (f == NULL) {
        fprintf(stderr, "sluice solve: %s: cannot create report\n", o->report);
        return SL_ECANTCREAT;
    }
    sl_json j;
    sl_json_begin(&j, f);
    sl_json_str(&j, "sluice_version", SLUICE_VERSION);
    sl_json_str(&j, "model", o->model);
    sl_json_str(&j, "model_fingerprint", sl_model_fingerprint(m));
    sl_json_str(&j, "solution", o->output);
    sl_json_str(&j, "method", in.method);
    sl_json_str(&j, "order", in.order);
    if (in.evaluation[0]) sl_json_str(&j, "evaluation", in.evaluation);
    sl_json_int(&j, "ranks", sl_ctx_size(ctx));
    sl_json_int(&j, "n_states", sl_model_n_states(m));
    sl_json_int(&j, "n_transitions", sl_model_n_transitions(m));
    sl_json_num(&j, "discount", sl_model_discount(m));
    if (in.visit_adjust != 0.0) sl_json_num(&j, "visit_adjust", in.visit_adjust);
    sl_json_bool(&j, "converged", c.converged);
    sl_json_int(&j, "exit_code", (int64_t)exit_code);
    sl_json_num(&j, "tolerance", c.tolerance);
    sl_json_int(&j, "iterations", in.iterations);
    sl_json_int(&j, "sweeps", in.sweeps);
    sl_json_num(&j, "seconds", in.seconds);
    sl_json_num(&j, "residual_sup", c.residual_sup);
    sl_json_num(&j, "residual_span", c.residual_span);
    sl_json_num(&j, "residual_min", c.residual_min);
    sl_json_num(&j, "residual_max", c.residual_max);
    sl_json_num(&j, "value_error_bound", c.value_error);
    sl_json_num(&j, "policy_loss_bound", c.policy_loss);
    json_units_and_relative(&j, m, e, c.value_error, c.policy_loss);
    sl_json_int(&j, "checkpoints_written", in.checkpoints_written);
    sl_json_arr_open(&j, "history");
    for (int64_t i = 0; i < h.n; i++) {
        sl_json_obj_open(&j, NULL);
        sl_json_int(&j, "iteration", h.iteration[i]);
        sl_json_int(&j, "sweeps", h.sweeps[i]);
        sl_json_num(&j, "seconds", h.seconds[i]);
        sl_json_num(&j, "sup", h.sup[i]);
        sl_json_num(&j, "span", h.span[i]);
        sl_json_num(&j, "value_error_bound", h.value_error[i]);
        sl_json_num(&j, "policy_loss_bound", h.policy_loss[i]);
        sl_json_close_obj(&j);
    }
    sl_json_close_arr(&j);
    sl_json_str(&j, "caution",
                "results support, and never replace, licensed engineering judgement and local regulations");
    sl_json_end(&j);
    int bad = ferror(f);
    bad |= fclose(f) != 0;
    if (bad || rename(tmp, o->report) != 0) {
        remove(tmp);
        fprintf(stderr, "sluice solve: %s: cannot write report\n", o->report);
        return SL_EIO;
    }
    return 0;
}

static void print_summary(cli_args *a, const solve_args *o, const sl_model *m, const sl_solution *x,
                          const value_extent *e)
{
    sl_ctx *ctx = a->ctx;
    if (sl_ctx_rank(ctx) != 0 || sl_ctx_verbosity(ctx) < 1) return;
    sl_solution_info in;
    sl_certificate c;
    sl_solution_get_info(x, &in);
    sl_solution_get_certificate(x, &c);
    FILE *f = stderr;
    fprintf(f, "\nsluice solve summary\n");
    fprintf(f, "  model        %s (%lld states, %lld transitions, discount %g)\n", o->model,
            (long long)sl_model_n_states(m), (long long)sl_model_n_transitions(m), sl_model_discount(m));
    fprintf(f, "  method       %s (order %s%s%s) on %d rank(s)\n", in.method, in.order,
            in.evaluation[0] ? ", evaluation " : "", in.evaluation, sl_ctx_size(ctx));
    fprintf(f, "  result       %s after %lld iterations, %lld sweeps, %.2f s\n",
            c.converged ? "CERTIFIED" : "NOT converged", (long long)in.iterations, (long long)in.sweeps, in.seconds);
    const char *ru = sl_model_reward_unit(m);
    char vw[160], pw[160];
    sl_bound_words(c.value_error, ru, e->min_abs, vw, sizeof(vw));
    sl_bound_words(c.policy_loss, ru, e->min_abs, pw, sizeof(pw));
    fprintf(f, "  values       %.6g .. %.6g %s\n", e->vmin, e->vmax, ru[0] ? ru : "(reward units)");
    fprintf(f, "  residual     sup|Tv - v| = %.3e, span = %.3e %s\n", c.residual_sup, c.residual_span, ru);
    fprintf(f, "  certificate  |value - v*| <= %s, in every state\n", vw);
    fprintf(f, "               v* - v_policy <= %s, in every state (tolerance %.1e %s)\n", pw, c.tolerance, ru);
    fprintf(f, "  written      %s\n", o->output);
    fprintf(f, "  caution      results support, and never replace, licensed engineering judgement\n"
               "               and local regulations.\n");
}

/* A stop signal (TERM, INT, USR2) that arrived before the solver started:
 * nothing has been computed, so nothing is written and no checkpoint is
 * touched; exit 75 (stopped early) with a line that says so. The flag is
 * seen by every rank of a run under mpirun only if each got the signal
 * (mpirun forwards it to all); the decision is agreed. Collective. */
static int startup_stop(cli_args *a, const char *when)
{
    int sig = 0;
    double arrived = 0;
    int mine = cli_signals_stop_requested(&sig, &arrived);
    /* the signal and its time (after this rank's start) from a rank that got it */
    double in[2] = {mine ? (double)sig : 0.0, mine ? arrived - a->start_clock : -1.0}, out[2];
    MPI_Allreduce(in, out, 2, MPI_DOUBLE, MPI_MAX, MPI_COMM_WORLD); /* main's communicator */
    if (out[0] == 0.0) return 0;
    if (sl_ctx_rank(a->ctx) == 0)
        fprintf(stderr, "sluice solve: signal %d (%s) arrived during start-up, %s (%.3f s after the process "
                        "started): stopped before the first iteration; no solution written, checkpoints "
                        "untouched\n",
                (int)out[0], sl_signal_name((int)out[0]), when, out[1]);
    return SL_ESTOPPED;
}

/* --visit-bonus / --visit-penalty: C > 0, and not both. */
static int visit_check(cli_args *a, double c, double other)
{
    if (!(c > 0) || !isfinite(c)) return cli_usage_error(a, "--visit-bonus/--visit-penalty: C must be a positive number");
    if (other > 0) return cli_usage_error(a, "--visit-bonus and --visit-penalty exclude each other");
    return 0;
}

static int run_solve(cli_args *a, const solve_args *o)
{
    sl_ctx *ctx = a->ctx;
    sl_model *m = NULL;
    sl_solver *s = NULL;
    sl_solution *x = NULL;
    monitor_state ms = {a, o, 0, -1e300};
    ms.every = o->progress_every > 0 ? o->progress_every : (a->stderr_tty ? 1.0 : 30.0);
    int rc = startup_stop(a, "before the model was loaded");
    /* on several ranks the rows of a staged model are read in the layout
     * the discounted solve sweeps in (the other objectives keep the file's) */
    if (rc == 0) rc = cli_fail(a, sl_model_load_staged(ctx, o->model, &m));
    if (rc == 0) rc = startup_stop(a, "while the model was loaded");
    if (rc == 0 && sl_model_objective(m) != SL_OBJ_DISCOUNTED && (o->visit_bonus > 0 || o->visit_penalty > 0))
        rc = cli_usage_error(a, "--visit-bonus and --visit-penalty apply to the discounted objective; %s records "
                                "objective \"%s\"",
                             o->model, sl_objective_name(sl_model_objective(m)));
    if (rc == 0 && sl_model_objective(m) != SL_OBJ_DISCOUNTED) {
        /* finite, total, average: docs/objectives.md */
        sl_objective_opts oo;
        memset(&oo, 0, sizeof(oo));
        oo.model_path = o->model;
        oo.output = o->output;
        oo.report = o->report;
        oo.order = o->order;
        oo.tolerance = o->tolerance;
        oo.max_iterations = o->max_iterations;
        oo.walltime = o->walltime;
        oo.checkpoint_dir = o->checkpoint_dir;
        oo.checkpoint_every = o->checkpoint_every;
        oo.resume = o->resume;
        oo.horizon = o->horizon;
        oo.terminal = o->terminal;
        oo.aperiodicity = o->aperiodicity;
        oo.method = o->method;
        oo.memory_limit = o->memory_limit;
        oo.strict_memory = o->strict_memory;
        /* the CLI's 0 means no limit, the library's 0 its default */
        oo.direct_time_limit = o->direct_time_limit < 0 ? 0 : o->direct_time_limit == 0 ? -1 : o->direct_time_limit;
        sl_objective obj = sl_model_objective(m);
        int pi_ok = o->method == SL_METHOD_PI && obj != SL_OBJ_FINITE;
        if (o->method != SL_METHOD_GS && !pi_ok && sl_ctx_rank(ctx) == 0)
            fprintf(stderr, "sluice solve: warning: --method %s does not apply to objective %s (value iteration%s "
                            "is used)\n",
                    sl_method_name(o->method), sl_objective_name(obj),
                    obj == SL_OBJ_FINITE ? ": backward induction" : "; --method pi also applies");
        rc = cli_fail(a, sl_objective_solve(m, &oo));
        sl_model_free(&m);
        return rc;
    }
    if (rc == 0 && (o->horizon > 0 || o->terminal || o->aperiodicity > 0))
        rc = cli_usage_error(a, "--horizon, --terminal and --aperiodicity apply to the finite and average "
                                "objectives; %s is discounted",
                             o->model);
    if (rc == 0) rc = cli_fail(a, sl_solver_create(ctx, &s));
    if (rc == 0) {
        sl_status st = sl_solver_set_method(s, o->method);
        if (st == SL_OK) st = sl_solver_set_order(s, o->order);
        if (st == SL_OK && o->tolerance > 0) st = sl_solver_set_tolerance(s, o->tolerance);
        if (st == SL_OK) st = sl_solver_set_max_iterations(s, o->max_iterations);
        if (st == SL_OK) st = sl_solver_set_walltime(s, o->walltime);
        if (st == SL_OK) st = sl_solver_set_walltime_origin(s, a->start_clock);
        if (st == SL_OK) st = sl_solver_set_sweeps(s, o->sweeps);
        if (st == SL_OK) st = sl_solver_set_memory_limit(s, o->memory_limit, o->strict_memory);
        if (st == SL_OK && o->direct_time_limit >= 0) st = sl_solver_set_direct_time_limit(s, o->direct_time_limit);
        if (st == SL_OK && o->visit_bonus > 0) st = sl_solver_set_visit_bonus(s, o->visit_bonus);
        if (st == SL_OK && o->visit_penalty > 0) st = sl_solver_set_visit_penalty(s, o->visit_penalty);
        if (st == SL_OK && o->checkpoint_dir)
            st = sl_solver_set_checkpoint(s, o->checkpoint_dir, o->checkpoint_every, o->resume);
        if (st == SL_OK) st = sl_solver_set_monitor(s, on_progress, &ms);
        rc = cli_fail(a, st);
    }
    if (rc == 0) {
        /* only the model's description is needed after this */
        sl_status st = sl_solver_solve_lean(s, m, &x);
        if (x != NULL) {
            /* certified, stopped early or below the roundoff floor: the
             * solution is honest either way; write it, then say how it ended */
            value_extent e;
            int wrc = cli_fail(a, sl_solution_save(x, o->output));
            if (wrc == 0) wrc = cli_fail(a, sl_solution_value_extent(x, &e.vmin, &e.vmax, &e.min_abs));
            if (wrc == 0) wrc = write_report(a, o, m, x, (int)st, &e);
            if (wrc == 0) print_summary(a, o, m, x, &e);
            rc = wrc != 0 ? wrc : cli_fail(a, st);
        } else {
            rc = cli_fail(a, st);
        }
    }
    sl_solution_free(&x);
    sl_solver_free(&s);
    sl_model_free(&m);
    return rc;
}

int cmd_solve(cli_args *a)
{
    solve_args o;
    memset(&o, 0, sizeof(o));
    o.direct_time_limit = -1;
    int rc = 0;
    const char *v;
    int64_t iv;
    while (a->i < a->argc && rc == 0) {
        int c = cli_common_opt(a, solve_help);
        if (c < 0) return 0;
        if (c > 0) continue;
        if (cli_opt(a, "-o") || cli_opt(a, "--output")) {
            if ((o.output = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--method")) {
            if ((v = cli_value(a)) == NULL) rc = SL_EUSAGE;
            else if (!sl_method_parse(v, &o.method))
                rc = cli_usage_error(a, "--method: '%s' is not one of gs, jacobi, mpi, pi", v);
        } else if (cli_opt(a, "--order")) {
            if ((v = cli_value(a)) == NULL) rc = SL_EUSAGE;
            else if (!sl_order_parse(v, &o.order))
                rc = cli_usage_error(a, "--order: '%s' is not one of auto, natural, stage-reverse, reverse", v);
        } else if (cli_opt(a, "--tolerance")) {
            if (!num_opt(a, "--tolerance", &o.tolerance)) rc = SL_EUSAGE;
            else if (!(o.tolerance > 0)) rc = cli_usage_error(a, "--tolerance must be positive");
        } else if (cli_opt(a, "--max-iterations")) {
            if (!int_opt(a, "--max-iterations", &o.max_iterations)) rc = SL_EUSAGE;
            else if (o.max_iterations < 1) rc = cli_usage_error(a, "--max-iterations must be at least 1");
        } else if (cli_opt(a, "--sweeps")) {
            if (!int_opt(a, "--sweeps", &iv)) rc = SL_EUSAGE;
            else if (iv < 1 || iv > 100000) rc = cli_usage_error(a, "--sweeps must be in [1, 100000]");
            else o.sweeps = (int)iv;
        } else if (cli_opt(a, "--memory-limit")) {
            if (!num_opt(a, "--memory-limit", &o.memory_limit)) rc = SL_EUSAGE;
            else if (!(o.memory_limit > 0)) rc = cli_usage_error(a, "--memory-limit must be positive (bytes)");
        } else if (cli_opt(a, "--strict-memory")) {
            o.strict_memory = 1;
        } else if (cli_opt(a, "--direct-time-limit")) {
            if (!num_opt(a, "--direct-time-limit", &o.direct_time_limit)) rc = SL_EUSAGE;
            else if (!(o.direct_time_limit >= 0))
                rc = cli_usage_error(a, "--direct-time-limit must be 0 (no limit) or a number of seconds");
        } else if (cli_opt(a, "--visit-bonus")) {
            if (!num_opt(a, "--visit-bonus", &o.visit_bonus)) rc = SL_EUSAGE;
            else rc = visit_check(a, o.visit_bonus, o.visit_penalty);
        } else if (cli_opt(a, "--visit-penalty")) {
            if (!num_opt(a, "--visit-penalty", &o.visit_penalty)) rc = SL_EUSAGE;
            else rc = visit_check(a, o.visit_penalty, o.visit_bonus);
        } else if (cli_opt(a, "--checkpoint")) {
            if ((o.checkpoint_dir = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--checkpoint-every")) {
            if (!num_opt(a, "--checkpoint-every", &o.checkpoint_every)) rc = SL_EUSAGE;
            else if (!(o.checkpoint_every > 0)) rc = cli_usage_error(a, "--checkpoint-every must be positive");
        } else if (cli_opt(a, "--resume")) {
            o.resume = 1;
        } else if (cli_opt(a, "--walltime")) {
            if (!num_opt(a, "--walltime", &o.walltime)) rc = SL_EUSAGE;
            else if (!(o.walltime > 0)) rc = cli_usage_error(a, "--walltime must be positive (seconds)");
        } else if (cli_opt(a, "--report")) {
            if ((o.report = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--progress-every")) {
            if (!num_opt(a, "--progress-every", &o.progress_every)) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--horizon")) {
            if (!int_opt(a, "--horizon", &o.horizon)) rc = SL_EUSAGE;
            else if (o.horizon < 1 || o.horizon > 100000000) rc = cli_usage_error(a, "--horizon must be in [1, 1e8]");
        } else if (cli_opt(a, "--terminal")) {
            if ((o.terminal = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--aperiodicity")) {
            if (!num_opt(a, "--aperiodicity", &o.aperiodicity)) rc = SL_EUSAGE;
            else if (!(o.aperiodicity > 0 && o.aperiodicity < 1))
                rc = cli_usage_error(a, "--aperiodicity must be in (0, 1)");
        } else {
            rc = cli_positional(a, (const char **[]){&o.model}, 1);
        }
    }
    if (rc) return rc;
    if (o.model == NULL) return cli_usage_error(a, "no model file given");
    if (o.output == NULL) return cli_usage_error(a, "no output file given (-o SOLUTION.h5)");
    if (o.resume && o.checkpoint_dir == NULL) return cli_usage_error(a, "--resume needs --checkpoint DIR");
    if (o.walltime <= 0) {
        const char *w = getenv("SLUICE_WALLTIME"), *end = getenv("SLURM_JOB_END_TIME");
        if (w && *w) o.walltime = atof(w);
        else if (end && *end) {
            double left = atof(end) - (double)time(NULL);
            if (left > 0) o.walltime = left;
        }
    }
    return run_solve(a, &o);
}

static const char evaluate_help[] =
    "usage: sluice evaluate MODEL.h5 --policy SOLUTION.h5|RULE.csv -o VALUES.h5 [options]\n"
    "  value of a fixed policy: the one stored in SOLUTION.h5, or a rule operated today\n"
    "  given as RULE.csv (same format as --compare's CSV below).\n"
    "  --iterative           evaluate by sweeps instead of a direct UMFPACK solve\n"
    "  --tolerance EPS       iterative: certified error bound (default 1e-6)\n"
    "  --memory-limit BYTES  largest factorization to attempt (default half of RAM);\n"
    "                        above it the evaluation is iterative\n"
    "  For a model with outcome quantities it also prints each quantity's expected\n"
    "  discounted total under the policy (policy evaluation with the quantity as reward):\n"
    "  --totals FILE.csv     those totals per state, with units in the header\n"
    "  --compare OTHER       the same for another policy, and the difference: a solution\n"
    "                        file, or a CSV of actions by state (a rule operated today):\n"
    "                        header 'state,action' or every factor name then 'action',\n"
    "                        e.g. 'storage,inflow,month,action' / '600,140,Jan,release_150';\n"
    "                        factors by label, value or @INDEX, actions by name, value or @ID\n";

typedef struct evaluate_args {
    const char *model, *policy, *output;
    const char *totals, *compare; /* outcome-quantity totals (cmd_totals.c) */
    double tolerance, memory_limit;
    int iterative;
} evaluate_args;

static int run_evaluate(cli_args *a, const evaluate_args *o)
{
    sl_ctx *ctx = a->ctx;
    sl_model *m = NULL;
    sl_solver *s = NULL;
    sl_solution *pol = NULL, *v = NULL;
    int rc = cli_fail(a, sl_model_load(ctx, o->model, &m));
    if (rc == 0) rc = cli_fail(a, sl_policy_load(ctx, o->policy, m, &pol));
    if (rc == 0) rc = cli_fail(a, sl_solver_create(ctx, &s));
    if (rc == 0) {
        sl_status st = sl_solver_set_method(s, o->iterative ? SL_METHOD_GS : SL_METHOD_PI);
        if (st == SL_OK && o->tolerance > 0) st = sl_solver_set_tolerance(s, o->tolerance);
        if (st == SL_OK) st = sl_solver_set_memory_limit(s, o->memory_limit, 0);
        rc = cli_fail(a, st);
    }
    if (rc == 0) rc = cli_fail(a, sl_solver_evaluate(s, m, pol, &v));
    /* totals (and --compare's policy) first: bad input there leaves no values file */
    if (rc == 0) rc = cli_quantity_totals(a, s, m, pol, o->model, o->policy, o->compare, o->totals);
    if (rc == 0) rc = cli_fail(a, sl_solution_save(v, o->output));
    value_extent e;
    if (rc == 0) rc = cli_fail(a, sl_solution_value_extent(v, &e.vmin, &e.vmax, &e.min_abs));
    if (rc == 0 && sl_ctx_rank(ctx) == 0 && sl_ctx_verbosity(ctx) >= 1) {
        sl_solution_info in;
        sl_certificate c;
        char w[160];
        const char *ru = sl_model_reward_unit(m);
        sl_solution_get_info(v, &in);
        sl_solution_get_certificate(v, &c);
        sl_bound_words(c.value_error, ru, e.min_abs, w, sizeof(w));
        fprintf(stderr, "evaluate: %s evaluation of the policy in %s: values %.6g .. %.6g %s; "
                        "|value - v_policy| <= %s; wrote %s\n",
                in.evaluation, o->policy, e.vmin, e.vmax, ru[0] ? ru : "(reward units)", w, o->output);
    }
    sl_solution_free(&v);
    sl_solution_free(&pol);
    sl_solver_free(&s);
    sl_model_free(&m);
    return rc;
}

int cmd_evaluate(cli_args *a)
{
    evaluate_args o;
    memset(&o, 0, sizeof(o));
    int rc = 0;
    while (a->i < a->argc && rc == 0) {
        int c = cli_common_opt(a, evaluate_help);
        if (c < 0) return 0;
        if (c > 0) continue;
        if (cli_opt(a, "-o") || cli_opt(a, "--output")) {
            if ((o.output = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--policy")) {
            if ((o.policy = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--iterative")) {
            o.iterative = 1;
        } else if (cli_opt(a, "--totals")) {
            if ((o.totals = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--compare")) {
            if ((o.compare = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--tolerance")) {
            if (!num_opt(a, "--tolerance", &o.tolerance)) rc = SL_EUSAGE;
            else if (!(o.tolerance > 0)) rc = cli_usage_error(a, "--tolerance must be positive");
        } else if (cli_opt(a, "--memory-limit")) {
            if (!num_opt(a, "--memory-limit", &o.memory_limit)) rc = SL_EUSAGE;
        } else {
            rc = cli_positional(a, (const char **[]){&o.model}, 1);
        }
    }
    if (rc) return rc;
    if (o.model == NULL) return cli_usage_error(a, "no model file given");
    if (o.policy == NULL) return cli_usage_error(a, "no policy given (--policy SOLUTION.h5 or RULE.csv)");
    if (o.output == NULL) return cli_usage_error(a, "no output file given (-o VALUES.h5)");
    return run_evaluate(a, &o);
}

static const char verify_help[] =
    "usage: sluice verify MODEL.h5 SOLUTION.h5 [--tolerance EPS] [--json]\n"
    "  recompute d = Tv - v from the model and the stored value and policy, and\n"
    "  certify the value and the policy independently of how they were computed.\n"
    "  Exit 0 if both bounds are within EPS (default: the solution's tolerance), 65 if not.\n";

typedef struct verify_args {
    const char *model, *solution;
    double tolerance;
    int json;
} verify_args;

static int run_verify(cli_args *a, const verify_args *o)
{
    sl_ctx *ctx = a->ctx;
    sl_model *m = NULL;
    sl_solution *x = NULL;
    sl_verification r;
    memset(&r, 0, sizeof(r));
    int rc = cli_fail(a, sl_model_load(ctx, o->model, &m));
    if (rc == 0 && sl_model_objective(m) != SL_OBJ_DISCOUNTED) {
        rc = cli_fail(a, sl_objective_verify(m, o->model, o->solution, o->tolerance, o->json, stdout));
        sl_model_free(&m);
        return rc;
    }
    if (rc == 0) rc = cli_fail(a, sl_solution_load(ctx, o->solution, m, &x));
    value_extent e;
    if (rc == 0) rc = cli_fail(a, sl_solution_value_extent(x, &e.vmin, &e.vmax, &e.min_abs));
    if (rc == 0) {
        sl_status st = sl_verify(m, x, o->tolerance, &r);
        const char *ru = sl_model_reward_unit(m);
        if ((st == SL_OK || st == SL_EDATA) && sl_ctx_rank(ctx) == 0) {
            sl_solution_info in;
            sl_solution_get_info(x, &in);
            FILE *out = stdout;
            if (o->json) {
                sl_json j;
                sl_json_begin(&j, out);
                sl_json_str(&j, "solution", o->solution);
                sl_json_str(&j, "model_fingerprint", sl_model_fingerprint(m));
                sl_json_num(&j, "residual_sup", r.residual_sup);
                sl_json_num(&j, "residual_span", r.residual_span);
                sl_json_num(&j, "value_error_bound", r.value_error);
                sl_json_num(&j, "policy_loss_bound", r.policy_loss);
                sl_json_num(&j, "tolerance", r.tolerance);
                sl_json_bool(&j, "certified", r.certified);
                json_units_and_relative(&j, m, &e, r.value_error, r.policy_loss);
                sl_json_end(&j);
            } else {
                fprintf(out, "verify %s against %s\n", o->solution, o->model);
                char vw[160], pw[160];
                sl_bound_words(r.value_error, ru, e.min_abs, vw, sizeof(vw));
                sl_bound_words(r.policy_loss, ru, e.min_abs, pw, sizeof(pw));
                fprintf(out, "  values        %.6g .. %.6g %s\n", e.vmin, e.vmax, ru[0] ? ru : "(reward units)");
                fprintf(out, "  residual      sup|Tv - v| = %.3e, span = %.3e %s (recomputed)\n", r.residual_sup,
                        r.residual_span, ru);
                fprintf(out, "  value         |value - v*| <= %s, in every state\n", vw);
                fprintf(out, "  policy        v* - v_policy <= %s, in every state\n", pw);
                fprintf(out, "  claimed       value %.3e, policy %.3e %s (by %s)\n", r.claimed.value_error,
                        r.claimed.policy_loss, ru, in.method);
                fprintf(out, "  result        %s at tolerance %.1e %s\n", r.certified ? "CERTIFIED" : "NOT certified",
                        r.tolerance, ru);
            }
            fflush(out);
        }
        if (st == SL_EDATA && r.tolerance > 0 && sl_ctx_rank(ctx) == 0)
            fprintf(stderr, "sluice verify: %s: %s\n", o->solution, sl_ctx_message(ctx));
        rc = st == SL_EDATA && r.tolerance > 0 ? (int)st : cli_fail(a, st);
    }
    sl_solution_free(&x);
    sl_model_free(&m);
    return rc;
}

int cmd_verify(cli_args *a)
{
    verify_args o;
    memset(&o, 0, sizeof(o));
    int rc = 0;
    while (a->i < a->argc && rc == 0) {
        int c = cli_common_opt(a, verify_help);
        if (c < 0) return 0;
        if (c > 0) continue;
        if (cli_opt(a, "--tolerance")) {
            if (!num_opt(a, "--tolerance", &o.tolerance)) rc = SL_EUSAGE;
            else if (!(o.tolerance > 0)) rc = cli_usage_error(a, "--tolerance must be positive");
        } else if (cli_opt(a, "--json")) {
            o.json = 1;
        } else {
            rc = cli_positional(a, (const char **[]){&o.model, &o.solution}, 2);
        }
    }
    if (rc) return rc;
    if (o.model == NULL || o.solution == NULL) return cli_usage_error(a, "need MODEL.h5 and SOLUTION.h5");
    return run_verify(a, &o);
}

static const char simulate_help[] =
    "usage: sluice simulate MODEL.h5 SOLUTION.h5|--policy RULE.csv --start STATE|--start-distribution F.csv\n"
    "                       --episodes N --seed S [options]\n"
    "  STATE: a state number, or every factor as NAME=VALUE / NAME@INDEX, comma-separated\n"
    "  Monte Carlo rollouts of the solution's policy; prints the mean discounted\n"
    "  return with a 95% interval next to the solution's value.\n"
    "  --policy P            the policy: a solution file, or a rule operated today as a CSV of\n"
    "                        actions by state (as evaluate --compare reads; it has no values)\n"
    "  --start-distribution F  CSV 'state,probability' or '<factor names>,probability';\n"
    "                        each episode draws its start from it\n"
    "  --horizon T           steps per episode (default: until discount^T < 1e-6)\n"
    "  --stages N            also per stage 0..N the figures 'sluice outlook' computes exactly:\n"
    "                        each numeric factor's mean, each quantity's mean and P(>0), the\n"
    "                        discounted reward so far, as sample means with intervals\n"
    "  --interval M          normal (default; central limit theorem, approximate) or hoeffding\n"
    "                        (Hoeffding 1963: guaranteed for the bounded figures, wider)\n"
    "  --confidence C        of each interval (default 0.95)\n"
    "  --replicates K        K independent runs with seeds S, S+1, ..., S+K-1 (with --json: an array)\n"
    "  --trajectories F.csv  every sampled step: episode, stage, state, factors, action,\n"
    "                        reward, quantities, discounted reward so far (atomically)\n"
    "  -o FILE.csv           the per-stage table (needs --stages): one row per stage, each\n"
    "                        figure's mean, low and high, units in the header (atomically)\n"
    "  --json                machine-readable output\n"
    "Results support, never replace, licensed engineering judgement and local regulations.\n";

int cmd_simulate(cli_args *a)
{
    sl_simulate_opts o;
    memset(&o, 0, sizeof(o));
    o.out = stdout;
    o.episodes = 1000;
    int have_start = 0, rc = 0;
    const char *start_text = NULL;
    int64_t seed = 1, replicates = 1;
    while (a->i < a->argc && rc == 0) {
        int c = cli_common_opt(a, simulate_help);
        if (c < 0) return 0;
        if (c > 0) continue;
        if (cli_opt(a, "--start")) {
            /* a state number, or NAME=VALUE,... resolved once the model is known */
            if ((start_text = cli_value(a)) == NULL) rc = SL_EUSAGE;
            have_start = 1;
        } else if (cli_opt(a, "--start-distribution")) {
            if ((o.start_distribution = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--policy")) {
            rc = cli_policy_opt(a, &o.solution);
        } else if (cli_opt(a, "-o") || cli_opt(a, "--output")) {
            if ((o.stages_csv = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--episodes")) {
            if (!int_opt(a, "--episodes", &o.episodes)) rc = SL_EUSAGE;
            else if (o.episodes < 1) rc = cli_usage_error(a, "--episodes must be at least 1");
        } else if (cli_opt(a, "--seed")) {
            if (!int_opt(a, "--seed", &seed)) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--horizon")) {
            if (!int_opt(a, "--horizon", &o.horizon)) rc = SL_EUSAGE;
            else if (o.horizon < 1) rc = cli_usage_error(a, "--horizon must be at least 1");
        } else if (cli_opt(a, "--stages")) {
            if (!int_opt(a, "--stages", &o.stages)) rc = SL_EUSAGE;
            else if (o.stages < 1 || o.stages > 100000000) rc = cli_usage_error(a, "--stages must be in [1, 1e8]");
        } else if (cli_opt(a, "--interval")) {
            const char *v = cli_value(a);
            if (v == NULL) rc = SL_EUSAGE;
            else if (strcmp(v, "normal") == 0) o.interval = SL_INTERVAL_NORMAL;
            else if (strcmp(v, "hoeffding") == 0) o.interval = SL_INTERVAL_HOEFFDING;
            else rc = cli_usage_error(a, "--interval: '%s' is not one of normal, hoeffding", v);
        } else if (cli_opt(a, "--confidence")) {
            if (!num_opt(a, "--confidence", &o.confidence)) rc = SL_EUSAGE;
            else if (!(o.confidence > 0 && o.confidence < 1)) rc = cli_usage_error(a, "--confidence must be in (0, 1)");
        } else if (cli_opt(a, "--trajectories")) {
            if ((o.trajectories = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--replicates")) {
            if (!int_opt(a, "--replicates", &replicates)) rc = SL_EUSAGE;
            else if (replicates < 1 || replicates > 1000000) rc = cli_usage_error(a, "--replicates must be in [1, 1e6]");
        } else if (cli_opt(a, "--json")) {
            o.json = 1;
        } else {
            rc = cli_positional(a, (const char **[]){&o.model, &o.solution}, 2);
        }
    }
    if (rc) return rc;
    if (o.model == NULL || o.solution == NULL)
        return cli_usage_error(a, "need MODEL.h5 and a policy (SOLUTION.h5, or --policy RULE.csv)");
    if (have_start == (o.start_distribution != NULL))
        return cli_usage_error(a, "give exactly one of --start STATE and --start-distribution FILE.csv");
    if (o.stages_csv && o.stages == 0) return cli_usage_error(a, "-o %s: the per-stage table needs --stages N", o.stages_csv);
    if (o.stages_csv && replicates > 1) return cli_usage_error(a, "-o writes one run: leave out --replicates");
    if (have_start) rc = cli_fail(a, sl_state_lookup(a->ctx, o.model, start_text, "--start", &o.start));
    if (rc) return rc;
    if (replicates > 1 && o.trajectories)
        return cli_usage_error(a, "--trajectories writes one run: leave out --replicates");
    int root = sl_ctx_rank(a->ctx) == 0, many = replicates > 1 && o.json;
    if (many && root) printf("[\n");
    for (int64_t r = 0; r < replicates && rc == 0; r++) {
        if (many && root && r > 0) printf(",\n");
        fflush(stdout);
        o.seed = (uint64_t)(seed + r);
        rc = cli_fail(a, sl_simulate(a->ctx, &o));
    }
    if (many && root && rc == 0) printf("]\n");
    return rc;
}
