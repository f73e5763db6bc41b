/* objectives_cmd.c - `solve` and `verify` for the finite, total and average
 * objectives: load, solve, write the solution and report, recompute the
 * certificate. Called from sl_solve / sl_verify. */
#include <math.h>
#include <string.h>

#include "core/json.h"
#include "solve/objectives.h"

static const char *obj_method(sl_objective o, int pi)
{
    if (pi && o == SL_OBJ_TOTAL) return "pi-total";
    if (pi && o == SL_OBJ_AVERAGE) return "pi-average";
    return o == SL_OBJ_FINITE ? "backward" : o == SL_OBJ_TOTAL ? "gs-total" : "rvi";
}

/* Was the solution produced by policy iteration (asked for, and the direct
 * solve did not decline)? */
static int used_pi(const sl_objective_opts *o, const sl_obj_result *r)
{
    return o->method == SL_METHOD_PI && r->objective != SL_OBJ_FINITE && r->fallback[0] == '\0';
}

static sl_status write_report(sl_ctx *ctx, const sl_objective_opts *o, const sl_problem *p, const sl_obj_result *r,
                              sl_status outcome, double seconds)
{
    if (o->report == NULL) return SL_OK;
    sl_status st = SL_OK;
    if (ctx->rank == 0) {
        char tmp[4200];
        snprintf(tmp, sizeof(tmp), "%s.partial", o->report);
        FILE *f = fopen(tmp, "w");
        if (f == NULL) {
            st = SL_ERR(ctx, SL_ECANTCREAT, "%s: cannot create report", o->report);
        } else {
            const sl_obj_cert *c = &r->cert;
            sl_json j;
            sl_json_begin(&j, f);
            sl_json_str(&j, "sluice_version", SLUICE_VERSION);
            sl_json_str(&j, "model", o->model_path);
            sl_json_str(&j, "model_fingerprint", p->meta.fingerprint);
            sl_json_str(&j, "solution", o->output);
            sl_json_str(&j, "objective", sl_objective_name(r->objective));
            sl_json_str(&j, "method", obj_method(r->objective, used_pi(o, r)));
            if (r->fallback[0]) sl_json_str(&j, "policy_iteration_fallback", r->fallback);
            sl_json_int(&j, "ranks", ctx->size);
            sl_json_int(&j, "n_states", p->meta.n_states);
            sl_json_int(&j, "n_transitions", p->meta.n_trans);
            sl_json_num(&j, "discount", p->gamma);
            sl_json_bool(&j, "converged", c->converged);
            sl_json_int(&j, "exit_code", (int64_t)outcome);
            sl_json_num(&j, "tolerance", o->tolerance > 0 ? o->tolerance : 1e-6);
            sl_json_int(&j, "iterations", c->iterations);
            sl_json_int(&j, "sweeps", c->sweeps);
            sl_json_num(&j, "seconds", seconds);
            sl_json_num(&j, "residual_min", c->residual_min);
            sl_json_num(&j, "residual_max", c->residual_max);
            sl_json_num(&j, "roundoff_allowance", c->roundoff);
            if (r->objective == SL_OBJ_FINITE) {
                sl_json_int(&j, "horizon", r->horizon);
                sl_json_num(&j, "value_error_bound", c->value_error_bound);
                sl_json_num(&j, "policy_loss_bound", c->policy_loss_bound);
            } else if (r->objective == SL_OBJ_TOTAL) {
                sl_json_int(&j, "n_absorbing", c->n_absorbing);
                sl_json_num(&j, "steps_bound_max", c->steps_max);
                sl_json_num(&j, "value_error_bound", c->value_error_bound);
                sl_json_num(&j, "policy_loss_bound", c->policy_loss_bound);
            } else {
                sl_json_num(&j, "gain", c->gain);
                sl_json_num(&j, "gain_lower", c->gain_lower);
                sl_json_num(&j, "gain_upper", c->gain_upper);
                sl_json_num(&j, "policy_gain_loss_bound", c->policy_loss_bound);
                sl_json_num(&j, "aperiodicity", c->aperiodicity);
            }
            sl_json_str(&j, "caution",
                        "results support, and never replace, licensed engineering judgement and local regulations");
            sl_json_end(&j);
            int bad = ferror(f);
            bad |= fclose(f) != 0;
            if (bad || rename(tmp, o->report) != 0) {
                remove(tmp);
                st = SL_ERR(ctx, SL_EIO, "%s: cannot write report", o->report);
            }
        }
    }
    return sl_agree(ctx, st);
}

static void summary(sl_ctx *ctx, const sl_objective_opts *o, const sl_problem *p, const sl_obj_result *r, double secs)
{
    if (ctx->rank != 0 || ctx->verbosity < 1 || ctx->log == NULL) return;
    FILE *f = ctx->log;
    const sl_obj_cert *c = &r->cert;
    fprintf(f, "\nsluice solve summary\n");
    fprintf(f, "  model        %s (%lld states, %lld transitions, objective %s)\n", o->model_path,
            (long long)p->meta.n_states, (long long)p->meta.n_trans, sl_objective_name(r->objective));
    fprintf(f, "  method       %s on %d rank(s), %lld iterations, %.2f s\n", obj_method(r->objective, used_pi(o, r)),
            ctx->size, (long long)c->iterations, secs);
    if (r->fallback[0]) fprintf(f, "  fallback     policy iteration without a direct solve: %s\n", r->fallback);
    if (r->objective == SL_OBJ_FINITE) {
        fprintf(f, "  result       EXACT up to roundoff: %lld stages by backward induction (discount %g)\n",
                (long long)r->horizon, p->gamma);
        fprintf(f, "  certificate  |value - v*| <= %.3e (stage 0); stage policy within %.3e of optimal\n",
                c->value_error_bound, c->policy_loss_bound);
    } else if (r->objective == SL_OBJ_TOTAL) {
        fprintf(f, "  result       %s; %lld absorbing states, expected steps to absorption <= %.4g\n",
                c->converged ? "CERTIFIED" : "NOT converged", (long long)c->n_absorbing, c->steps_max);
        fprintf(f, "  certificate  |value - v*| <= %.3e in every state; policy within %.3e of optimal\n",
                c->value_error_bound, c->policy_loss_bound);
    } else {
        fprintf(f, "  result       %s; gain %.10g\n", c->converged ? "CERTIFIED" : "NOT converged", c->gain);
        fprintf(f, "  certificate  %.10g <= optimal gain <= %.10g; policy gain within %.3e of optimal\n",
                c->gain_lower, c->gain_upper, c->policy_loss_bound);
    }
    fprintf(f, "  written      %s\n", o->output);
    fprintf(f, "  caution      results support, and never replace, licensed engineering judgement\n"
               "               and local regulations.\n");
}

/* --resume: a checkpoint directory holding only the other kind of
 * checkpoint (finite-horizon stages vs value-iteration files) is refused,
 * not taken for an empty one; the files are left as they are. Checkpoints
 * of the right kind are checked against the model's fingerprint (which
 * covers the objective) when they are read. Collective. */
static sl_status check_checkpoint_kind(sl_ctx *ctx, const char *dir, sl_objective obj, const char *model)
{
    char vi[4200], stages[4200];
    int have_stages = 0;
    sl_status st = sl_ckpt_newest(ctx, dir, vi, sizeof(vi));
    if (st != SL_OK) return st;
    snprintf(stages, sizeof(stages), "%s/%s", dir, SL_FINITE_CKPT);
    if (ctx->rank == 0) {
        FILE *f = fopen(stages, "rb");
        have_stages = f != NULL;
        if (f) fclose(f);
    }
    MPI_Bcast(&have_stages, 1, MPI_INT, 0, ctx->comm);
    if (obj == SL_OBJ_FINITE && !have_stages && vi[0])
        st = SL_ERR(ctx, SL_EDATA,
                    "%s: a value-iteration checkpoint (of a discounted, total or average model), not the stages of a "
                    "finite-horizon solve of %s: refusing to resume from it; use another --checkpoint directory",
                    vi, model);
    else if (obj != SL_OBJ_FINITE && have_stages && !vi[0])
        st = SL_ERR(ctx, SL_EDATA,
                    "%s: the stages of a finite-horizon solve, not a checkpoint of the %s objective of %s: refusing "
                    "to resume from it; use another --checkpoint directory",
                    stages, sl_objective_name(obj), model);
    return sl_agree(ctx, st);
}

sl_status sl_objective_solve(const sl_model *m, const sl_objective_opts *o)
{
    if (m == NULL || o == NULL || o->output == NULL) return SL_EUSAGE;
    sl_ctx *ctx = m->ctx;
    sl_status st = SL_OK, outcome = SL_OK;
    sl_problem P;
    sl_obj_result R;
    double *term = NULL;
    int32_t *acts = NULL;
    int lock_fd = -1;
    memset(&P, 0, sizeof(P));
    memset(&R, 0, sizeof(R));
    double t0 = sl_now();
    const char *model = o->model_path ? o->model_path : "model";
    SL_TRY(sl_problem_from_model_any(ctx, m, model, o->order, &P));
    int64_t n = P.n_local;
    sl_objective obj = P.meta.objective;
    if (obj != SL_OBJ_FINITE && (o->horizon > 0 || o->terminal))
        SL_TRY(sl_agree(ctx, SL_ERR(ctx, SL_EUSAGE, "--horizon and --terminal apply to the finite objective; %s "
                                                    "records objective \"%s\"",
                                    model, sl_objective_name(obj))));
    if (obj == SL_OBJ_FINITE && o->horizon < 1)
        SL_TRY(sl_agree(ctx, SL_ERR(ctx, SL_EUSAGE, "%s: the finite-horizon objective needs --horizon H", model)));
    char term_src[256] = "zero";
    if (obj == SL_OBJ_FINITE) {
        if (SL_ZALLOC(ctx, term, n + 1, "terminal values") == NULL) st = SL_ENOMEM;
        SL_TRY(sl_agree(ctx, st));
        if (o->terminal) {
            sl_solution_record ti;
            SL_TRY(sl_store_solution_read(ctx, o->terminal, SL_FILE_SOLUTION, P.meta.n_states, P.blk.s_begin, n, term,
                                          NULL, &ti));
            snprintf(term_src, sizeof(term_src), "%s", o->terminal);
        } else {
            int found = 0;
            SL_TRY(sl_store_terminal_read(ctx, model, P.meta.n_states, P.blk.s_begin, n, term, &found));
            if (found) snprintf(term_src, sizeof(term_src), "model /terminal_value");
        }
    }
    /* one run per checkpoint directory (creates it), as for discounted */
    if (o->checkpoint_dir) SL_TRY(sl_ckpt_lock(ctx, o->checkpoint_dir, &lock_fd));
    if (o->checkpoint_dir && o->resume) SL_TRY(check_checkpoint_kind(ctx, o->checkpoint_dir, obj, model));
    sl_obj_opts oo;
    memset(&oo, 0, sizeof(oo));
    oo.horizon = o->horizon;
    oo.terminal = term;
    oo.tolerance = o->tolerance > 0 ? o->tolerance : 1e-6;
    oo.max_iterations = o->max_iterations;
    oo.aperiodicity = o->aperiodicity;
    oo.checkpoint_dir = o->checkpoint_dir;
    oo.checkpoint_every = o->checkpoint_every;
    oo.resume = o->resume;
    oo.walltime = o->walltime;
    oo.fingerprint = P.meta.fingerprint;
    oo.policy_iteration = o->method == SL_METHOD_PI && obj != SL_OBJ_FINITE;
    oo.memory_limit = o->memory_limit;
    oo.strict_memory = o->strict_memory;
    oo.direct_time_limit = o->direct_time_limit;
    sl_log(ctx, "solve: %s, %lld states, objective %s, %d rank(s), tolerance %.1e", model,
           (long long)P.meta.n_states, sl_objective_name(obj), ctx->size, oo.tolerance);
    outcome = sl_obj_solve(ctx, &P, &oo, &R);
    outcome = sl_agree(ctx, outcome);
    if (outcome != SL_OK && outcome != SL_ESTOPPED && outcome != SL_EUSAGE) {
        st = outcome;
        goto cleanup;
    }
    if (obj == SL_OBJ_FINITE && outcome == SL_ESTOPPED) {
        /* stages are in the checkpoint; no partial solution */
        st = outcome;
        goto cleanup;
    }
    /* write */
    int64_t H = obj == SL_OBJ_FINITE ? R.horizon : 0;
    if (SL_ALLOC(ctx, acts, (H > 0 ? H : 1) * n + 1, "policy") == NULL) st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    sl_obj_file xf;
    memset(&xf, 0, sizeof(xf));
    xf.objective = obj;
    if (obj == SL_OBJ_FINITE) {
        for (int64_t t = 0; t < H; t++) sl_policy_actions(&P, R.policy + t * n, acts + t * n);
        xf.horizon = H;
        xf.first_stage = 0;
        xf.stage_value = R.value;
        xf.stage_action = acts;
        xf.roundoff = R.cert.roundoff;
        snprintf(xf.terminal, sizeof(xf.terminal), "%s", term_src);
    } else {
        sl_policy_actions(&P, R.policy, acts);
        xf.steps = R.steps;
        xf.steps_max = R.cert.steps_max;
        xf.n_absorbing = R.cert.n_absorbing;
        xf.gain = R.cert.gain;
        xf.gain_lower = R.cert.gain_lower;
        xf.gain_upper = R.cert.gain_upper;
        xf.aperiodicity = R.cert.aperiodicity;
    }
    sl_solution_record in;
    memset(&in, 0, sizeof(in));
    snprintf(in.model_fingerprint, sizeof(in.model_fingerprint), "%s", P.meta.fingerprint);
    snprintf(in.method, sizeof(in.method), "%s", obj_method(obj, used_pi(o, &R)));
    in.converged = R.cert.converged;
    in.iterations = R.cert.iterations;
    in.sweeps = R.cert.sweeps;
    in.seconds = sl_now() - t0;
    in.tolerance = oo.tolerance;
    in.discount = P.gamma;
    in.residual_sup = R.cert.residual_sup;
    in.residual_span = R.cert.residual_max - R.cert.residual_min;
    in.residual_min = R.cert.residual_min;
    in.residual_max = R.cert.residual_max;
    in.value_error_bound = R.cert.value_error_bound;
    in.policy_loss_bound = R.cert.policy_loss_bound;
    SL_TRY(sl_store_objective_write(ctx, o->output, P.meta.n_states, P.blk.s_begin, n, R.value, acts, &in, &xf));
    SL_TRY(write_report(ctx, o, &P, &R, outcome, sl_now() - t0));
    summary(ctx, o, &P, &R, sl_now() - t0);
    st = outcome;
    if (outcome == SL_EUSAGE)
        st = SL_ERR(ctx, SL_EUSAGE, "tolerance %.1e is below the roundoff floor of this model", oo.tolerance);
    else if (outcome == SL_ESTOPPED) {
        st = SL_ERR(ctx, SL_ESTOPPED, "stopped before the tolerance was certified; the solution is written with "
                                      "converged=0%s",
                    o->checkpoint_dir ? " and a checkpoint is kept" : "");
        sl_warn(ctx, "%s", ctx->err);
    }
cleanup:
    sl_ckpt_unlock(&lock_fd);
    free(term);
    free(acts);
    sl_obj_result_free(&R);
    sl_problem_free(&P);
    return st;
}

sl_status sl_obj_verify_check(const sl_model *m, const char *model_path, const char *solution, double tolerance,
                              sl_obj_check *out)
{
    if (m == NULL || solution == NULL || out == NULL) return SL_EUSAGE;
    sl_ctx *ctx = m->ctx;
    struct {
        const char *model, *solution;
        double tolerance;
    } oo = {model_path ? model_path : "model", solution, tolerance}, *o = &oo;
    memset(out, 0, sizeof(*out));
    sl_status st = SL_OK;
    sl_problem P;
    sl_obj_file xf;
    sl_solution_record info;
    double *v = NULL, *w = NULL;
    int32_t *acts = NULL, *pol = NULL;
    memset(&P, 0, sizeof(P));
    memset(&xf, 0, sizeof(xf));
    SL_TRY(sl_problem_from_model_any(ctx, m, o->model, SL_ORDER_AUTO, &P));
    int64_t n = P.n_local, nx = n + P.halo.n_halo;
    sl_objective obj = P.meta.objective;
    if (SL_ZALLOC(ctx, v, nx, "values") == NULL || SL_ZALLOC(ctx, w, nx, "steps bound") == NULL ||
        SL_ALLOC(ctx, acts, n + 1, "policy") == NULL)
        st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    SL_TRY(sl_store_solution_read(ctx, o->solution, SL_FILE_SOLUTION, P.meta.n_states, P.blk.s_begin, n, v, acts,
                                  &info));
    if (strcmp(info.model_fingerprint, P.meta.fingerprint) != 0)
        SL_TRY(sl_agree(ctx, SL_ERR(ctx, SL_EDATA,
                                    "%s was computed for a different model (fingerprint %s) than %s (fingerprint %s)",
                                    o->solution, info.model_fingerprint, o->model, P.meta.fingerprint)));
    SL_TRY(sl_store_objective_read(ctx, o->solution, P.meta.n_states, P.blk.s_begin, n, &xf));
    if (xf.objective != obj)
        SL_TRY(sl_agree(ctx, SL_ERR(ctx, SL_EDATA, "%s holds a solution of objective \"%s\" but %s records \"%s\"",
                                    o->solution, sl_objective_name(xf.objective), o->model, sl_objective_name(obj))));
    sl_obj_cert c;
    memset(&c, 0, sizeof(c));
    int64_t H = xf.horizon;
    if (obj == SL_OBJ_FINITE) {
        if (xf.first_stage != 0)
            SL_TRY(sl_agree(ctx, SL_ERR(ctx, SL_EDATA, "%s: holds only stages %lld..%lld (a checkpoint?)",
                                        o->solution, (long long)xf.first_stage, (long long)H)));
        if (SL_ALLOC(ctx, pol, H * n + 1, "stage policy") == NULL) st = SL_ENOMEM;
        SL_TRY(sl_agree(ctx, st));
        for (int64_t t = 0; t < H; t++) {
            char where[300];
            snprintf(where, sizeof(where), "%s (stage %lld)", o->solution, (long long)t);
            SL_TRY(sl_agree(ctx, sl_policy_offsets(ctx, &P, xf.stage_action + t * n, pol + t * n, where)));
        }
        /* /value must be stage 0 */
        for (int64_t i = 0; i < n && st == SL_OK; i++)
            if (v[i] != xf.stage_value[i])
                st = SL_ERR(ctx, SL_EDATA, "%s: state %lld: /value differs from /stage/value_000000", o->solution,
                            (long long)(P.blk.s_begin + i));
        SL_TRY(sl_agree(ctx, st));
        /* the terminal stage against its recorded source, where it can be reread */
        int found = 0;
        if (strcmp(xf.terminal, "model /terminal_value") == 0) {
            SL_TRY(sl_store_terminal_read(ctx, o->model, P.meta.n_states, P.blk.s_begin, n, w, &found));
            if (!found)
                SL_TRY(sl_agree(ctx, SL_ERR(ctx, SL_EDATA, "%s: solution used /terminal_value, which %s lacks",
                                            o->solution, o->model)));
        } else if (strcmp(xf.terminal, "zero") == 0) {
            found = 1; /* w is zero */
        }
        out->terminal_rechecked = found;
        for (int64_t i = 0; found && i < n && st == SL_OK; i++)
            if (xf.stage_value[H * n + i] != w[i])
                st = SL_ERR(ctx, SL_EDATA, "%s: state %lld: stored terminal value %.17g differs from its source (%s: %.17g)",
                            o->solution, (long long)(P.blk.s_begin + i), xf.stage_value[H * n + i], xf.terminal, w[i]);
        SL_TRY(sl_agree(ctx, st));
        SL_TRY(sl_obj_certify_finite(ctx, &P, H, xf.stage_value, pol, &c));
    } else {
        if (SL_ALLOC(ctx, pol, n + 1, "policy") == NULL) st = SL_ENOMEM;
        SL_TRY(sl_agree(ctx, st));
        SL_TRY(sl_agree(ctx, sl_policy_offsets(ctx, &P, acts, pol, o->solution)));
        if (obj == SL_OBJ_TOTAL) {
            memcpy(w, xf.steps, (size_t)n * sizeof(double));
            st = sl_obj_certify_total(ctx, &P, v, w, pol, &c);
            if (st == SL_EDATA) {
                c.value_error_bound = c.policy_loss_bound = INFINITY; /* reported below */
                sl_warn(ctx, "%s", ctx->err);
                sl_error_clear(ctx);
                st = SL_OK;
            }
            SL_TRY(st);
        } else {
            SL_TRY(sl_obj_certify_average(ctx, &P, v, pol, &c));
        }
    }
    double tol = o->tolerance > 0 ? o->tolerance : info.tolerance;
    int ok;
    if (obj == SL_OBJ_AVERAGE) {
        /* the stored gain must lie within tol of every gain the bounds allow */
        double gerr = fmax(xf.gain - c.gain_lower, c.gain_upper - xf.gain);
        c.value_error_bound = gerr;
        ok = gerr <= tol && c.policy_loss_bound <= tol;
    } else {
        ok = c.value_error_bound <= tol && c.policy_loss_bound <= tol;
    }
    out->objective = obj;
    out->cert = c;
    out->tolerance = tol;
    out->certified = ok;
    out->horizon = obj == SL_OBJ_FINITE ? H : 0;
    out->gain = xf.gain;
    snprintf(out->terminal, sizeof(out->terminal), "%s", xf.terminal);
    snprintf(out->fingerprint, sizeof(out->fingerprint), "%s", P.meta.fingerprint);
    st = sl_agree(ctx, st);
cleanup:
    free(v);
    free(w);
    free(acts);
    free(pol);
    sl_obj_file_free(&xf);
    sl_problem_free(&P);
    return st;
}

sl_status sl_objective_verify(const sl_model *m, const char *model_path, const char *solution, double tolerance,
                              int json, FILE *out_file)
{
    if (m == NULL || solution == NULL) return SL_EUSAGE;
    sl_ctx *ctx = m->ctx;
    const char *model = model_path ? model_path : "model";
    sl_obj_check k;
    sl_status st = sl_obj_verify_check(m, model_path, solution, tolerance, &k);
    if (st != SL_OK) return st;
    const sl_obj_cert *c = &k.cert;
    sl_objective obj = k.objective;
    if (ctx->rank == 0 && out_file) {
        FILE *out = out_file;
        if (json) {
            fprintf(out, "{\n  \"solution\": \"%s\",\n  \"model_fingerprint\": \"%s\",\n  \"objective\": \"%s\",\n"
                         "  \"residual_min\": %.17g,\n  \"residual_max\": %.17g,\n",
                    solution, k.fingerprint, sl_objective_name(obj), c->residual_min, c->residual_max);
            if (obj == SL_OBJ_AVERAGE)
                fprintf(out, "  \"gain\": %.17g,\n  \"gain_lower\": %.17g,\n  \"gain_upper\": %.17g,\n"
                             "  \"gain_error_bound\": %.17g,\n  \"policy_gain_loss_bound\": %.17g,\n",
                        k.gain, c->gain_lower, c->gain_upper, c->value_error_bound, c->policy_loss_bound);
            else
                fprintf(out, "  \"value_error_bound\": %.17g,\n  \"policy_loss_bound\": %.17g,\n",
                        c->value_error_bound, c->policy_loss_bound);
            if (obj == SL_OBJ_TOTAL) fprintf(out, "  \"steps_bound_max\": %.17g,\n", c->steps_max);
            if (obj == SL_OBJ_FINITE) fprintf(out, "  \"horizon\": %lld,\n", (long long)k.horizon);
            fprintf(out, "  \"tolerance\": %.17g,\n  \"certified\": %s\n}\n", k.tolerance, k.certified ? "true" : "false");
        } else {
            if (obj == SL_OBJ_FINITE && !k.terminal_rechecked)
                fprintf(out, "note: terminal values were taken from %s and are not rechecked here\n", k.terminal);
            fprintf(out, "verify %s against %s (objective %s)\n", solution, model, sl_objective_name(obj));
            if (obj == SL_OBJ_AVERAGE) {
                fprintf(out, "  gain          %.10g <= optimal gain <= %.10g (recomputed); stored gain %.10g\n",
                        c->gain_lower, c->gain_upper, k.gain);
                fprintf(out, "  policy        optimal gain - policy gain <= %.3e\n", c->policy_loss_bound);
            } else {
                if (obj == SL_OBJ_FINITE)
                    fprintf(out, "  stages        %lld, residuals recomputed stage by stage\n", (long long)k.horizon);
                if (obj == SL_OBJ_TOTAL)
                    fprintf(out, "  absorption    expected steps <= %.4g under every policy (bound rechecked)\n",
                            c->steps_max);
                fprintf(out, "  value         |value - v*| <= %.3e in every state\n", c->value_error_bound);
                fprintf(out, "  policy        v* - v_policy <= %.3e in every state\n", c->policy_loss_bound);
            }
            fprintf(out, "  result        %s at tolerance %.1e\n", k.certified ? "CERTIFIED" : "NOT certified",
                    k.tolerance);
        }
    }
    if (!k.certified)
        st = SL_ERR(ctx, SL_EDATA, "%s: not certified within %.1e (value/gain bound %.3e, policy bound %.3e)",
                    solution, k.tolerance, c->value_error_bound, c->policy_loss_bound);
    return sl_agree(ctx, st);
}
