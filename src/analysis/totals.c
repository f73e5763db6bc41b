/* totals.c - expected discounted totals of each outcome quantity under a
 * policy: policy evaluation with the quantity as the reward, by the same
 * solver (direct or iterative) and with the same certificate as values. */
#include <math.h>
#include <string.h>

#include "analysis/analysis.h"

void sl_totals_free(sl_totals *t)
{
    if (t == NULL) return;
    free(t->name);
    free(t->unit);
    free(t->total);
    free(t->error_bound);
    memset(t, 0, sizeof(*t));
}

/* Deep copy of a block's rows (no builder state, no halo columns). */
static sl_status copy_block(sl_ctx *ctx, const sl_block *b, sl_block *c)
{
    int64_t ns = sl_block_states(b), np = sl_block_pairs(b), nt = sl_block_trans(b);
    memset(c, 0, sizeof(*c));
    c->s_begin = b->s_begin;
    c->s_end = b->s_end;
    c->p_begin = b->p_begin;
    c->p_end = b->p_end;
    c->t_begin = b->t_begin;
    c->t_end = b->t_end;
    c->n_states_total = b->n_states_total;
    c->where = b->where;
    if (b->target == NULL) return SL_ERR(ctx, SL_EINTERNAL, "model rows hold no targets to copy");
    if (SL_ALLOC(ctx, c->first_pair, ns + 1, "rows") == NULL || SL_ALLOC(ctx, c->action, np, "rows") == NULL ||
        SL_ALLOC(ctx, c->reward, np, "rows") == NULL || SL_ALLOC(ctx, c->first_trans, np + 1, "rows") == NULL ||
        SL_ALLOC(ctx, c->target, nt, "rows") == NULL || SL_ALLOC(ctx, c->prob, nt, "rows") == NULL) {
        sl_block_free(c);
        return SL_ENOMEM;
    }
    memcpy(c->first_pair, b->first_pair, (size_t)(ns + 1) * sizeof(int64_t));
    memcpy(c->action, b->action, (size_t)np * sizeof(int32_t));
    memcpy(c->reward, b->reward, (size_t)np * sizeof(double));
    memcpy(c->first_trans, b->first_trans, (size_t)(np + 1) * sizeof(int64_t));
    memcpy(c->target, b->target, (size_t)nt * sizeof(int64_t));
    memcpy(c->prob, b->prob, (size_t)nt * sizeof(double));
    return SL_OK;
}

sl_status sl_quantity_totals(sl_solver *s, const sl_model *m, const sl_solution *policy, const char *model_path,
                             sl_totals *t)
{
    if (s == NULL || m == NULL || policy == NULL || t == NULL) return SL_EUSAGE;
    sl_ctx *ctx = m->ctx;
    sl_status st = SL_OK;
    sl_meta meta;
    sl_block blk;
    sl_model *qm = NULL;
    sl_solution *v = NULL;
    double *pos = NULL;
    memset(t, 0, sizeof(*t));
    memset(&meta, 0, sizeof(meta));
    memset(&blk, 0, sizeof(blk));
    int nq = m->meta.n_quantities;
    int64_t n = sl_block_states(&m->blk), np = sl_block_pairs(&m->blk);
    t->n_quantities = nq;
    t->n_states = m->meta.n_states;
    t->s_begin = m->blk.s_begin;
    t->n_local = n;
    snprintf(t->period_unit, SL_LABEL_MAX, "%.63s", m->meta.period_unit);
    if (nq == 0) return SL_OK;
    if (SL_ZALLOC(ctx, t->name, nq, "totals") == NULL || SL_ZALLOC(ctx, t->unit, nq, "totals") == NULL ||
        SL_ALLOC(ctx, t->total, (int64_t)nq * n, "totals") == NULL || SL_ALLOC(ctx, t->error_bound, nq, "totals") == NULL ||
        SL_ALLOC(ctx, pos, np, "quantities") == NULL)
        st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    for (int q = 0; q < nq; q++) {
        snprintf(t->name[q], SL_LABEL_MAX, "%.63s", m->meta.quantity_name[q]);
        snprintf(t->unit[q], SL_LABEL_MAX, "%.63s", m->meta.quantity_unit[q]);
    }
    t->method[0] = '\0';
    for (int q = 0; q < nq; q++) {
        /* the same rows with r(s,a) = E[quantity q | s,a]; the copy keeps the
         * model's fingerprint so the policy (made for that model) applies */
        SL_TRY(sl_agree(ctx, sl_meta_copy(ctx, &meta, &m->meta)));
        SL_TRY(sl_agree(ctx, copy_block(ctx, &m->blk, &blk)));
        SL_TRY(sl_store_quantity_read(ctx, model_path, &meta, q, blk.p_begin, np, blk.reward, pos));
        SL_TRY(sl_model_adopt(ctx, &meta, &blk, &qm));
        SL_TRY(sl_solver_evaluate(s, qm, policy, &v));
        int64_t b0, nl;
        const double *val;
        const int32_t *act;
        sl_certificate c;
        SL_TRY(sl_solution_get_local(v, &b0, &nl, &val, &act));
        SL_TRY(sl_solution_get_certificate(v, &c));
        if (b0 != t->s_begin || nl != n)
            SL_TRY(sl_agree(ctx, SL_ERR(ctx, SL_EINTERNAL, "evaluation returned another state range")));
        memcpy(t->total + (int64_t)q * n, val, (size_t)n * sizeof(double));
        t->error_bound[q] = c.value_error;
        sl_solution_info in;
        if (sl_solution_get_info(v, &in) == SL_OK) snprintf(t->method, sizeof(t->method), "%.15s", in.evaluation);
        sl_solution_free(&v);
        sl_model_free(&qm);
    }
cleanup:
    sl_solution_free(&v);
    sl_model_free(&qm);
    sl_meta_free(&meta);
    sl_block_free(&blk);
    free(pos);
    if (st != SL_OK) sl_totals_free(t);
    return st;
}
