/* report_data.c - the report-data JSON document (docs/report.md) from a model
 * and a solution: certificate, verification, history, model facts, rule map. */
#include <math.h>
#include <string.h>
#include <time.h>

#include "analysis/analysis.h"
#include "core/json.h"
#include "sluice/report.h"
#include "solve/objectives.h"

static const char caution_text[] =
    "Water release, grid and safety decisions can hurt people. sluice computes what a model implies; it knows "
    "nothing the model leaves out. Its results support, and never replace, the judgement of licensed engineers "
    "and the rules and regulations that apply where the decision is made.";

/* A unit string, or null when the model gives none. */
static void unit_json(sl_json *j, const char *key, const char *u)
{
    if (u && u[0]) {
        sl_json_str(j, key, u);
    } else {
        sl_json_key(j, key);
        fputs("null", j->f);
    }
}

/* What the document is made of. The handles are distributed over the ranks;
 * value, action and history are whole on rank 0. */
typedef struct report_in {
    sl_model *mh;
    sl_solution *xh;
    const sl_meta *m;           /* mh's metadata */
    sl_solution_info info;
    sl_certificate cert;
    sl_history_view hist;       /* owned by xh */
    double *value;              /* [n_states] on rank 0 */
    int32_t *action;            /* [n_states] on rank 0: the policy's action ids */
    int64_t *avail;             /* states where each action id is available (all ranks) */
    int32_t n_actions;          /* 1 + largest action id */
    int64_t aps_min, aps_max;   /* actions per state */
    int64_t thin_below, thin_pairs, visits_total;   /* models with visit counts */
    sl_obj_file xf;             /* finite/total/average: the objective part of the
                                 * solution file (its scalars) */
} report_in;

static void report_in_free(report_in *r)
{
    free(r->value);
    free(r->action);
    free(r->avail);
    sl_obj_file_free(&r->xf);
    sl_solution_free(&r->xh);
    sl_model_free(&r->mh);
    memset(r, 0, sizeof(*r));
}

/* Model and solution as handles (the solution must belong to the model and
 * choose only offered actions: sl_solution_load checks both), availability
 * counted over every rank's rows, value and policy gathered on rank 0.
 * Collective. */
static sl_status load(sl_ctx *ctx, const sl_report_data_opts *o, report_in *r)
{
    sl_status st = SL_OK;
    SL_TRY(sl_model_load(ctx, o->model, &r->mh));
    SL_TRY(sl_solution_load(ctx, o->solution, r->mh, &r->xh));
    r->m = &r->mh->meta;
    SL_TRY(sl_solution_get_info(r->xh, &r->info));
    SL_TRY(sl_solution_get_certificate(r->xh, &r->cert));
    SL_TRY(sl_solution_get_history(r->xh, &r->hist));
    if (!r->info.has_policy)
        SL_TRY(sl_agree(ctx, SL_ERR(ctx, SL_EDATA, "%s holds values only (from evaluate), no policy to report on",
                                    o->solution)));
    SL_TRY(sl_solution_gather(r->xh, 0, &r->value, &r->action));
    const sl_block *b = &r->mh->blk;
    if (r->m->objective != SL_OBJ_DISCOUNTED)
        SL_TRY(sl_store_objective_read(ctx, o->solution, r->m->n_states, b->s_begin, sl_block_states(b), &r->xf));
    int32_t amax = r->m->n_action_names > 0 ? r->m->n_action_names - 1 : 0;
    int64_t lim[2] = {INT64_MAX, 0};
    for (int64_t q = 0; q < sl_block_pairs(b); q++)
        if (b->action[q] > amax) amax = b->action[q];
    for (int64_t i = 0; i < sl_block_states(b); i++) {
        int64_t c = b->first_pair[i + 1] - b->first_pair[i];
        if (c < lim[0]) lim[0] = c;
        if (c > lim[1]) lim[1] = c;
    }
    MPI_Allreduce(MPI_IN_PLACE, &amax, 1, MPI_INT32_T, MPI_MAX, ctx->comm);
    MPI_Allreduce(MPI_IN_PLACE, &lim[0], 1, MPI_INT64_T, MPI_MIN, ctx->comm);
    MPI_Allreduce(MPI_IN_PLACE, &lim[1], 1, MPI_INT64_T, MPI_MAX, ctx->comm);
    r->aps_min = lim[0];
    r->aps_max = lim[1];
    r->n_actions = amax + 1;
    if (SL_ZALLOC(ctx, r->avail, r->n_actions, "availability") == NULL) st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    for (int64_t q = 0; q < sl_block_pairs(b); q++) r->avail[b->action[q]]++;
    MPI_Allreduce(MPI_IN_PLACE, r->avail, r->n_actions, MPI_INT64_T, MPI_SUM, ctx->comm);
    r->thin_below = o->thin_below > 0 ? o->thin_below : SLUICE_THIN_BELOW;
    if (r->m->has_visits) {
        int64_t cnt[2] = {0, 0};
        for (int64_t q = 0; b->visits && q < sl_block_pairs(b); q++) {
            cnt[0] += b->visits[q] < r->thin_below;
            cnt[1] += b->visits[q];
        }
        MPI_Allreduce(MPI_IN_PLACE, cnt, 2, MPI_INT64_T, MPI_SUM, ctx->comm);
        r->thin_pairs = cnt[0];
        r->visits_total = cnt[1];
    }
cleanup:
    return st;
}

/* ---- the independent check: the `verify` computation, in-process ---------- */

typedef struct verify_out {
    int ran;
    sl_verification v;          /* discounted */
    sl_obj_check k;             /* finite, total, average */
} verify_out;

/* sl_verify recomputes the bounds from the model, the value and the policy
 * alone. A solution that fails them is a result for the page, not an error.
 * Collective. */
static sl_status run_verify(sl_ctx *ctx, const sl_report_data_opts *o, const report_in *r, verify_out *v)
{
    memset(v, 0, sizeof(*v));
    if (r->m->objective != SL_OBJ_DISCOUNTED) {
        /* the objectives' own verify: SL_OK certified or not, an error for a
         * file that cannot be checked */
        sl_status so = sl_obj_verify_check(r->mh, o->model, o->solution, 0, &v->k);
        v->ran = so == SL_OK;
        return so;
    }
    sl_status st = sl_verify(r->mh, r->xh, 0, &v->v);
    if (st == SL_OK || (st == SL_EDATA && !v->v.certified && v->v.tolerance > 0)) {
        sl_error_clear(ctx);
        v->ran = 1;
        st = SL_OK;
    }
    return st;
}

/* ---- rule map ----------------------------------------------------------------- */

/* Evenly spaced indices of a factor of `size` values, at most `max` of them. */
static int64_t pick(int64_t size, int64_t max, int64_t *idx)
{
    int64_t n = size <= max ? size : max;
    for (int64_t k = 0; k < n; k++) idx[k] = n == 1 ? 0 : (int64_t)llround((double)k * (double)(size - 1) / (double)(n - 1));
    return n;
}

static void axis_json(sl_json *j, const char *key, const sl_meta *m, int f, const int64_t *idx, int64_t n)
{
    char lab[SL_LABEL_MAX];
    sl_json_obj_open(j, key);
    sl_json_str(j, "factor", m->factor_name[f]);
    unit_json(j, "unit", m->factor_value[f] && !m->factor_label[f] ? m->factor_unit[f] : "");
    sl_json_int(j, "size", m->factor_size[f]);
    sl_json_bool(j, "sampled", n < m->factor_size[f]);
    sl_json_arr_open(j, "indices");
    for (int64_t k = 0; k < n; k++) sl_json_int(j, NULL, idx[k]);
    sl_json_close_arr(j);
    sl_json_arr_open(j, "labels");
    for (int64_t k = 0; k < n; k++) {
        sl_factor_label(m, f, idx[k], lab, sizeof(lab));
        sl_json_str(j, NULL, lab);
    }
    sl_json_close_arr(j);
    sl_json_close_obj(j);
}

static sl_status rule_map_json(sl_ctx *ctx, sl_json *j, const sl_report_data_opts *o, const report_in *r)
{
    const sl_meta *m = r->m;
    if (m->n_factors < 2) {
        sl_json_obj_open(j, "rule_map");
        sl_json_str(j, "omitted", m->n_factors == 0
                                      ? "the model has no named factors (its states are numbers only), so there are "
                                        "no two factors to map the rule over"
                                      : "the model has a single factor; a map needs two");
        sl_json_close_obj(j);
        return SL_OK;
    }
    /* x: the first factor that is not a stage; y: the stage factor, or the
     * next one; panels: the next remaining factor; the rest fixed mid-range */
    int fx = -1, fy = sl_meta_stage_factor(m), fp = -1;
    for (int f = 0; f < m->n_factors && fx < 0; f++)
        if (f != fy) fx = f;
    if (fy < 0)
        for (int f = 0; f < m->n_factors && fy < 0; f++)
            if (f != fx) fy = f;
    for (int f = 0; f < m->n_factors && fp < 0; f++)
        if (f != fx && f != fy) fp = f;
    int64_t mx = o->map_max_x > 0 ? o->map_max_x : 60, my = o->map_max_y > 0 ? o->map_max_y : 24,
            mp = o->map_max_panels > 0 ? o->map_max_panels : 12;
    int64_t *ix = NULL, *iy = NULL, *ip = NULL;
    sl_status st = SL_OK;
    if (SL_ALLOC(ctx, ix, mx, "map") == NULL || SL_ALLOC(ctx, iy, my, "map") == NULL || SL_ALLOC(ctx, ip, mp, "map") == NULL) {
        free(ix);
        free(iy);
        free(ip);
        return SL_ENOMEM;
    }
    int64_t nx = pick(m->factor_size[fx], mx, ix), ny = pick(m->factor_size[fy], my, iy);
    int64_t np = fp >= 0 ? pick(m->factor_size[fp], mp, ip) : 1;
    if (fp < 0) ip[0] = 0;
    int64_t fv[SLUICE_MAX_FACTORS];
    for (int f = 0; f < m->n_factors; f++) fv[f] = m->factor_size[f] / 2;
    sl_json_obj_open(j, "rule_map");
    axis_json(j, "x", m, fx, ix, nx);
    axis_json(j, "y", m, fy, iy, ny);
    if (fp >= 0) axis_json(j, "facet", m, fp, ip, np);
    sl_json_arr_open(j, "fixed");
    for (int f = 0; f < m->n_factors; f++) {
        if (f == fx || f == fy || f == fp) continue;
        char lab[SL_LABEL_MAX];
        sl_factor_label(m, f, fv[f], lab, sizeof(lab));
        sl_json_obj_open(j, NULL);
        sl_json_str(j, "factor", m->factor_name[f]);
        sl_json_int(j, "index", fv[f]);
        sl_json_str(j, "label", lab);
        sl_json_close_obj(j);
    }
    sl_json_close_arr(j);
    /* one pass per array: action ids, then values, row-major (panel, y, x) */
    for (int pass = 0; pass < 3; pass++) {
        sl_json_arr_open(j, pass == 0 ? "action" : pass == 1 ? "value" : "state");
        for (int64_t p = 0; p < np; p++)
            for (int64_t y = 0; y < ny; y++)
                for (int64_t x = 0; x < nx; x++) {
                    if (fp >= 0) fv[fp] = ip[p];
                    fv[fy] = iy[y];
                    fv[fx] = ix[x];
                    int64_t s = 0;
                    for (int f = m->n_factors - 1; f >= 0; f--) s = s * m->factor_size[f] + fv[f];
                    if (pass == 0) sl_json_int(j, NULL, r->action[s]);
                    else if (pass == 1) sl_json_num(j, NULL, r->value[s]);
                    else sl_json_int(j, NULL, s);
                }
        sl_json_close_arr(j);
    }
    sl_json_close_obj(j);
    free(ix);
    free(iy);
    free(ip);
    return st;
}

/* ---- water values: the marginal value table of the planner-results work ---------- */

typedef struct water_in {
    int have;
    int factor;             /* the numeric factor */
    sl_table t;             /* rows: that factor; columns: the stage (or next) factor */
    char reason[256];       /* why left out, when !have */
} water_in;

/* The first factor that is not a stage and has numeric values, over the
 * stage factor (or the next factor), the others fixed mid-range. Collective. */
static sl_status water_values(sl_ctx *ctx, const sl_report_data_opts *o, const sl_meta *m, water_in *w)
{
    memset(w, 0, sizeof(*w));
    int wf = -1, cf = sl_meta_stage_factor(m);
    for (int f = 0; f < m->n_factors && wf < 0; f++)
        if (f != cf && m->factor_value[f] && m->factor_size[f] >= 2) wf = f;
    if (m->n_factors == 0) {
        snprintf(w->reason, sizeof(w->reason), "the model has no factors, so no numeric factor to take a marginal value of");
        return SL_OK;
    }
    if (wf < 0) {
        snprintf(w->reason, sizeof(w->reason), "%s",
                 m->format_version < 2 ? "the model gives no numeric values for its factors (a model file of format 1), "
                                         "so a marginal value per unit cannot be formed"
                                       : "no factor other than the stage has numeric values, so a marginal value per "
                                         "unit cannot be formed");
        return SL_OK;
    }
    if (cf < 0)
        for (int f = 0; f < m->n_factors && cf < 0; f++)
            if (f != wf) cf = f;
    if (cf < 0) {
        snprintf(w->reason, sizeof(w->reason), "the model has a single factor; the water values are drawn by a second one");
        return SL_OK;
    }
    char fixbuf[SLUICE_MAX_FACTORS][SL_NAME_MAX + 32];
    const char *fix[SLUICE_MAX_FACTORS];
    int nfix = 0;
    for (int f = 0; f < m->n_factors; f++) {
        if (f == wf || f == cf) continue;
        snprintf(fixbuf[nfix], sizeof(fixbuf[nfix]), "%s@%lld", m->factor_name[f], (long long)(m->factor_size[f] / 2));
        fix[nfix] = fixbuf[nfix];
        nfix++;
    }
    char show[SL_NAME_MAX + 16];
    snprintf(show, sizeof(show), "marginal:%s", m->factor_name[wf]);
    sl_table_opts to;
    memset(&to, 0, sizeof(to));
    to.solution = o->solution;
    to.model = o->model;
    to.rows = m->factor_name[wf];
    to.cols = m->factor_name[cf];
    to.n_fix = nfix;
    to.fix = fix;
    to.show = show;
    sl_status st = sl_table_compute(ctx, &to, &w->t);
    if (st == SL_OK) {
        w->have = 1;
        w->factor = wf;
    }
    return st;
}

static void water_json(sl_json *j, const sl_meta *m, const water_in *w)
{
    sl_json_obj_open(j, "water_values");
    if (!w->have) {
        sl_json_str(j, "omitted", w->reason);
        sl_json_close_obj(j);
        return;
    }
    const sl_table *t = &w->t;
    int f = w->factor;
    int64_t R = t->n_rows, C = t->n_cols, nr = R <= 200 ? R : 200;
    sl_json_str(j, "factor", m->factor_name[f]);
    sl_json_str(j, "x_unit", m->factor_unit[f]);
    sl_json_str(j, "unit", t->unit);
    sl_json_str(j, "by", t->col_name);
    char note[1400];
    snprintf(note, sizeof(note), "%s%s; central differences of the value along %s (one-sided at the ends)%s",
             t->fixed[0] ? "fixed: " : "", t->fixed, m->factor_name[f], nr < R ? "; evenly spaced values shown" : "");
    sl_json_str(j, "note", note);
    int64_t *rows = malloc((size_t)nr * sizeof(*rows));
    if (rows == NULL) nr = 0; /* an empty plot is left out by the renderer */
    for (int64_t k = 0; k < nr; k++) rows[k] = nr == 1 ? 0 : (int64_t)llround((double)k * (double)(R - 1) / (double)(nr - 1));
    sl_json_arr_open(j, "x");
    for (int64_t k = 0; k < nr; k++) sl_json_num(j, NULL, m->factor_value[f][rows[k]]);
    sl_json_close_arr(j);
    sl_json_arr_open(j, "series");
    for (int64_t c = 0; c < C; c++) {
        sl_json_obj_open(j, NULL);
        sl_json_str(j, "label", t->col_label[c]);
        sl_json_arr_open(j, "values");
        for (int64_t k = 0; k < nr; k++) sl_json_num(j, NULL, t->cell[rows[k] * C + c]);
        sl_json_close_arr(j);
        sl_json_close_obj(j);
    }
    sl_json_close_arr(j);
    free(rows);
    sl_json_close_obj(j);
}

/* ---- the outlook: the exact forward distribution of the planner-results work ------ */

typedef struct outlook_in {
    int have;
    sl_outlook o;
    char start[1024];
    char label[2048];           /* the start in the model's words */
} outlook_in;

/* From the start given, or a middle state of the first stage (every factor
 * at its middle index, the stage factor at 0; a middle state number for a
 * model without factors). Collective; a bad start is the caller's error. */
static sl_status outlook(sl_ctx *ctx, const sl_report_data_opts *o, const sl_meta *m, outlook_in *w)
{
    memset(w, 0, sizeof(*w));
    if (o->outlook_start) {
        snprintf(w->start, sizeof(w->start), "%s", o->outlook_start);
        snprintf(w->label, sizeof(w->label), "%s", o->outlook_start);
    } else if (m->n_factors == 0) {
        snprintf(w->start, sizeof(w->start), "%lld", (long long)(m->n_states / 2));
        snprintf(w->label, sizeof(w->label), "state %lld (the middle state)", (long long)(m->n_states / 2));
    } else {
        for (int f = 0; f < m->n_factors; f++) {
            int64_t i = m->factor_stage[f] ? 0 : m->factor_size[f] / 2;
            char lab[SL_LABEL_MAX];
            sl_factor_label(m, f, i, lab, sizeof(lab));
            size_t len = strlen(w->start), ll = strlen(w->label);
            snprintf(w->start + len, sizeof(w->start) - len, "%s%s@%lld", f ? "," : "", m->factor_name[f], (long long)i);
            snprintf(w->label + ll, sizeof(w->label) - ll, "%s%s = %s%s%s", f ? ", " : "", m->factor_name[f], lab,
                     m->factor_value[f] && !m->factor_label[f] && m->factor_unit[f][0] ? " " : "",
                     m->factor_value[f] && !m->factor_label[f] ? m->factor_unit[f] : "");
        }
    }
    sl_outlook_opts oo;
    memset(&oo, 0, sizeof(oo));
    oo.model = o->model;
    oo.solution = o->solution;
    oo.start = w->start;
    oo.stages = o->outlook_stages > 0 ? o->outlook_stages : 24;
    sl_status st = sl_outlook_compute(ctx, &oo, &w->o);
    w->have = st == SL_OK;
    return st;
}

static void outlook_json(sl_json *j, const outlook_in *w, int discounted)
{
    sl_json_obj_open(j, "outlook");
    if (!w->have) {
        sl_json_str(j, "omitted", "the outlook was not asked for");
        sl_json_close_obj(j);
        return;
    }
    const sl_outlook *r = &w->o;
    static const char *stat[SL_OUTLOOK_NQ] = {"mean", "p5", "p25", "p50", "p75", "p95"};
    sl_json_str(j, "start", w->start);
    sl_json_str(j, "start_label", w->label);
    sl_json_str(j, "period_unit", r->period_unit);
    sl_json_str(j, "reward_unit", r->reward_unit);
    sl_json_obj_open(j, "factor_units");
    for (int k = 0; k < r->n_factors; k++) sl_json_str(j, r->factor_name[k], r->factor_unit[k]);
    sl_json_close_obj(j);
    sl_json_obj_open(j, "quantity_units");
    for (int q = 0; q < r->n_quantities; q++) sl_json_str(j, r->quantity_name[q], r->quantity_unit[q]);
    sl_json_close_obj(j);
    sl_json_arr_open(j, "stages");
    for (int64_t t = 0; t <= r->n_stages; t++) {
        sl_json_obj_open(j, NULL);
        sl_json_int(j, "stage", t);
        sl_json_obj_open(j, "factors");
        for (int k = 0; k < r->n_factors; k++) {
            sl_json_obj_open(j, r->factor_name[k]);
            for (int i = 0; i < SL_OUTLOOK_NQ; i++)
                sl_json_num(j, stat[i], r->factor_stats[(t * r->n_factors + k) * SL_OUTLOOK_NQ + i]);
            sl_json_close_obj(j);
        }
        sl_json_close_obj(j);
        sl_json_obj_open(j, "quantities");
        for (int q = 0; q < r->n_quantities; q++) {
            sl_json_obj_open(j, r->quantity_name[q]);
            sl_json_num(j, "mean", r->quantity_stats[(t * r->n_quantities + q) * 2]);
            sl_json_num(j, "p_positive", r->quantity_stats[(t * r->n_quantities + q) * 2 + 1]);
            sl_json_close_obj(j);
        }
        sl_json_close_obj(j);
        if (discounted) sl_json_num(j, "discounted_reward", r->discounted_reward[t]);
        sl_json_num(j, "mass", r->mass[t]);
        sl_json_close_obj(j);
    }
    sl_json_close_arr(j);
    sl_json_close_obj(j);
}

/* ---- the document --------------------------------------------------------------- */

/* The certificate keys of the finite, total and average objectives, from the
 * solution file (docs/report.md). bias_span: max - min of the stored value. */
static void objective_cert_json(sl_json *j, const sl_meta *m, const sl_obj_file *x, double bias_span)
{
    sl_json_str(j, "objective", sl_objective_name(m->objective));
    if (m->objective == SL_OBJ_FINITE) {
        sl_json_int(j, "horizon", x->horizon);
        sl_json_str(j, "terminal", x->terminal);
        sl_json_num(j, "roundoff_bound", x->roundoff);
    } else if (m->objective == SL_OBJ_TOTAL) {
        sl_json_int(j, "n_absorbing", x->n_absorbing);
        sl_json_num(j, "steps_bound_max", x->steps_max);
    } else {
        sl_json_num(j, "gain", x->gain);
        sl_json_num(j, "gain_lower", x->gain_lower);
        sl_json_num(j, "gain_upper", x->gain_upper);
        sl_json_num(j, "bias_span", bias_span);
        sl_json_num(j, "aperiodicity", x->aperiodicity);
    }
}

/* What the objectives' verify recomputed (sl_obj_verify_check). */
static void objective_verify_json(sl_json *j, const sl_obj_check *k)
{
    const sl_obj_cert *c = &k->cert;
    sl_json_str(j, "objective", sl_objective_name(k->objective));
    sl_json_bool(j, "certified", k->certified != 0);
    sl_json_num(j, "tolerance", k->tolerance);
    sl_json_num(j, "residual_sup", c->residual_sup);
    sl_json_num(j, "residual_min", c->residual_min);
    sl_json_num(j, "residual_max", c->residual_max);
    sl_json_num(j, "residual_span", c->residual_max - c->residual_min);
    sl_json_num(j, "value_error_bound", c->value_error_bound);
    sl_json_num(j, "policy_loss_bound", c->policy_loss_bound);
    if (k->objective == SL_OBJ_FINITE) {
        sl_json_int(j, "horizon", k->horizon);
        sl_json_str(j, "terminal", k->terminal);
        sl_json_bool(j, "terminal_rechecked", k->terminal_rechecked != 0);
    } else if (k->objective == SL_OBJ_TOTAL) {
        sl_json_num(j, "steps_bound_max", c->steps_max);
    } else {
        sl_json_num(j, "gain", k->gain);
        sl_json_num(j, "gain_lower", c->gain_lower);
        sl_json_num(j, "gain_upper", c->gain_upper);
    }
}


static void hist_array(sl_json *j, const char *key, const report_in *r, int k)
{
    sl_json_arr_open(j, key);
    for (int64_t i = 0; i < r->hist.n; i++) {
        const sl_history_view *h = &r->hist;
        switch (k) {
        case 0: sl_json_int(j, NULL, h->iteration[i]); break;
        case 1: sl_json_int(j, NULL, h->sweeps[i]); break;
        case 2: sl_json_num(j, NULL, h->seconds[i]); break;
        case 3: sl_json_num(j, NULL, h->sup[i]); break;
        case 4: sl_json_num(j, NULL, h->span[i]); break;
        case 5: sl_json_num(j, NULL, h->value_error[i]); break;
        default: sl_json_num(j, NULL, h->policy_loss[i]); break;
        }
    }
    sl_json_close_arr(j);
}

static sl_status write_doc(sl_ctx *ctx, const sl_report_data_opts *o, const report_in *r, const verify_out *v,
                           const water_in *w, const outlook_in *ol)
{
    const sl_meta *m = r->m;
    const sl_solution_info *in = &r->info;
    const sl_certificate *c = &r->cert;
    sl_json jj, *j = &jj;
    sl_status st = SL_OK;
    FILE *out = o->out;
    sl_json_begin(j, out);
    sl_json_int(j, "sluice_report_data", 1);
    sl_json_str(j, "generated_by", "sluice " SLUICE_VERSION);
    char when[64] = "";
    time_t now = time(NULL);
    struct tm tmv;
    if (gmtime_r(&now, &tmv)) strftime(when, sizeof(when), "%Y-%m-%d %H:%M UTC", &tmv);
    sl_json_str(j, "created", when);
    char title[512];
    snprintf(title, sizeof(title), "sluice report: %s", m->generator[0] ? m->generator : o->model);
    sl_json_str(j, "title", title);
    sl_json_str(j, "caution", caution_text);

    /* model facts */
    sl_json_obj_open(j, "model");
    sl_json_str(j, "path", o->model);
    sl_json_str(j, "name", m->generator);
    sl_json_str(j, "source", m->source);
    sl_json_str(j, "fingerprint", m->fingerprint);
    sl_json_int(j, "format_version", m->format_version);
    sl_json_int(j, "n_states", m->n_states);
    sl_json_int(j, "n_pairs", m->n_pairs);
    sl_json_int(j, "n_transitions", m->n_trans);
    sl_json_num(j, "discount", m->discount);
    sl_json_str(j, "objective", sl_objective_name(m->objective));
    if (m->has_visits) {
        /* a model estimated from logged experience */
        sl_json_obj_open(j, "visits");
        sl_json_int(j, "total", r->visits_total);
        sl_json_int(j, "thin_below", r->thin_below);
        sl_json_int(j, "thin_pairs", r->thin_pairs);
        sl_json_num(j, "visit_adjust", in->visit_adjust);
        sl_json_close_obj(j);
    }
    unit_json(j, "reward_unit", m->reward_unit);
    unit_json(j, "period_unit", m->period_unit);
    unit_json(j, "action_unit", m->n_action_values > 0 ? m->action_unit : "");
    sl_json_arr_open(j, "parameters");
    for (int k = 0; k < m->n_params; k++) {
        sl_json_obj_open(j, NULL);
        sl_json_str(j, "name", m->param_name[k]);
        sl_json_num(j, "value", m->param_value[k]);
        sl_json_str(j, "unit", m->param_unit ? m->param_unit[k] : "");
        sl_json_close_obj(j);
    }
    sl_json_close_arr(j);
    sl_json_arr_open(j, "factors");
    for (int f = 0; f < m->n_factors; f++) {
        sl_json_obj_open(j, NULL);
        sl_json_str(j, "name", m->factor_name[f]);
        sl_json_int(j, "size", m->factor_size[f]);
        sl_json_bool(j, "stage", m->factor_stage[f] != 0);
        unit_json(j, "unit", m->factor_value[f] ? m->factor_unit[f] : "");
        if (m->factor_value[f]) {
            sl_json_arr_open(j, "values");
            for (int64_t i = 0; i < m->factor_size[f]; i++) sl_json_num(j, NULL, m->factor_value[f][i]);
            sl_json_close_arr(j);
        }
        if (m->factor_label[f]) {
            sl_json_arr_open(j, "labels");
            for (int64_t i = 0; i < m->factor_size[f]; i++) sl_json_str(j, NULL, m->factor_label[f][i]);
            sl_json_close_arr(j);
        }
        sl_json_close_obj(j);
    }
    sl_json_close_arr(j);
    sl_json_arr_open(j, "actions");
    for (int32_t a = 0; a < r->n_actions; a++) {
        char name[SL_NAME_MAX + 16];
        if (a < m->n_action_names) snprintf(name, sizeof(name), "%s", m->action_name[a]);
        else snprintf(name, sizeof(name), "action %d", (int)a);
        sl_json_obj_open(j, NULL);
        sl_json_int(j, "id", a);
        sl_json_str(j, "name", name);
        if (a < m->n_action_values) sl_json_num(j, "value", m->action_value[a]);
        sl_json_int(j, "states_available", r->avail[a]);
        sl_json_close_obj(j);
    }
    sl_json_close_arr(j);
    sl_json_arr_open(j, "quantities");
    for (int q = 0; q < m->n_quantities; q++) {
        sl_json_obj_open(j, NULL);
        sl_json_str(j, "name", m->quantity_name[q]);
        sl_json_str(j, "unit", m->quantity_unit[q]);
        sl_json_close_obj(j);
    }
    sl_json_close_arr(j);
    sl_json_obj_open(j, "actions_per_state");
    sl_json_int(j, "min", r->aps_min);
    sl_json_num(j, "mean", (double)m->n_pairs / (double)m->n_states);
    sl_json_int(j, "max", r->aps_max);
    sl_json_close_obj(j);
    sl_json_close_obj(j);

    /* solution and certificate */
    double vmin, vmax, vabs;
    sl_value_extent_local(r->value, m->n_states, &vmin, &vmax, &vabs);
    sl_json_obj_open(j, "solution");
    sl_json_str(j, "path", o->solution);
    sl_json_str(j, "method", in->method);
    sl_json_str(j, "order", in->order);
    if (in->ranks > 0) {
        sl_json_int(j, "ranks", in->ranks);
    } else { /* not recorded by older writers */
        sl_json_key(j, "ranks");
        fputs("null", out);
    }
    sl_json_bool(j, "converged", c->converged);
    sl_json_int(j, "iterations", in->iterations);
    sl_json_int(j, "sweeps", in->sweeps);
    sl_json_num(j, "seconds", in->seconds);
    sl_json_num(j, "value_min", vmin);
    sl_json_num(j, "value_max", vmax);
    sl_json_num(j, "value_min_abs", vabs);
    sl_json_close_obj(j);
    sl_json_obj_open(j, "certificate");
    sl_json_num(j, "tolerance", c->tolerance);
    sl_json_num(j, "value_error_bound", c->value_error);
    sl_json_num(j, "policy_loss_bound", c->policy_loss);
    sl_json_num(j, "residual_sup", c->residual_sup);
    sl_json_num(j, "residual_span", c->residual_span);
    sl_json_bool(j, "certified", c->converged && c->value_error <= c->tolerance && c->policy_loss <= c->tolerance);
    /* relative to the smallest |value| (null when some value is 0) */
    const sl_obj_file *x = &r->xf;
    if (m->objective == SL_OBJ_AVERAGE) {
        /* the bias is defined up to a constant: relative to the gain instead */
        sl_json_num(j, "value_error_relative", sl_bound_relative(c->value_error, fabs(x->gain)));
        sl_json_num(j, "policy_loss_relative", sl_bound_relative(c->policy_loss, fabs(x->gain)));
    } else {
        sl_json_num(j, "value_error_relative", sl_bound_relative(c->value_error, vabs));
        sl_json_num(j, "policy_loss_relative", sl_bound_relative(c->policy_loss, vabs));
    }
    if (m->objective != SL_OBJ_DISCOUNTED) objective_cert_json(j, m, x, vmax - vmin);
    sl_json_close_obj(j);

    sl_json_obj_open(j, "verify");
    if (!v->ran) {
        sl_json_str(j, "omitted", "the verification was skipped on request (--no-verify)");
    } else if (m->objective != SL_OBJ_DISCOUNTED) {
        objective_verify_json(j, &v->k);
        sl_json_int(j, "ranks", ctx->size);
    } else {
        sl_json_bool(j, "certified", v->v.certified);
        sl_json_num(j, "tolerance", v->v.tolerance);
        sl_json_num(j, "residual_sup", v->v.residual_sup);
        sl_json_num(j, "residual_span", v->v.residual_span);
        sl_json_num(j, "value_error_bound", v->v.value_error);
        sl_json_num(j, "policy_loss_bound", v->v.policy_loss);
        sl_json_int(j, "ranks", ctx->size);
    }
    sl_json_close_obj(j);

    sl_json_obj_open(j, "history");
    if (r->hist.n == 0) {
        sl_json_str(j, "omitted", "the solution file holds no residual history");
    } else {
        static const char *keys[] = {"iteration", "sweeps", "seconds", "sup", "span", "value_error_bound",
                                     "policy_loss_bound"};
        for (int k = 0; k < 7; k++) hist_array(j, keys[k], r, k);
    }
    sl_json_close_obj(j);

    st = rule_map_json(ctx, j, o, r);
    water_json(j, m, w);
    outlook_json(j, ol, m->objective == SL_OBJ_DISCOUNTED);
    sl_json_end(j);
    if (ferror(out)) st = SL_ERR(ctx, SL_EIO, "writing the report data failed");
    return st;
}

sl_status sl_report_data(sl_ctx *ctx, const sl_report_data_opts *o)
{
    sl_status st = SL_OK;
    report_in r;
    verify_out v;
    water_in w;
    outlook_in ol;
    memset(&ol, 0, sizeof(ol));
    memset(&r, 0, sizeof(r));
    memset(&v, 0, sizeof(v));
    memset(&w, 0, sizeof(w));
    if (o == NULL || o->model == NULL || o->solution == NULL || (ctx->rank == 0 && o->out == NULL))
        SL_TRY(sl_agree(ctx, SL_ERR(ctx, SL_EUSAGE, "report data: model, solution and output are required")));
    SL_TRY(load(ctx, o, &r));
    if (!o->skip_verify) SL_TRY(run_verify(ctx, o, &r, &v));
    SL_TRY(water_values(ctx, o, r.m, &w));
    SL_TRY(outlook(ctx, o, r.m, &ol));
    if (ctx->rank == 0) st = write_doc(ctx, o, &r, &v, &w, &ol);
    st = sl_agree(ctx, st);
cleanup:
    sl_table_free(&w.t);
    sl_outlook_free(&ol.o);
    report_in_free(&r);
    return st;
}
