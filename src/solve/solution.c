/* solution.c - the public solution handle: getters, gather, save and load. */
#include <math.h>
#include <string.h>

#include "analysis/analysis.h"
#include "solve/solve.h"

sl_status sl_solution_new(sl_ctx *ctx, int64_t n_states, int64_t s_begin, int64_t n, int with_actions,
                          sl_solution **out)
{
    sl_solution *x = NULL;
    *out = NULL;
    if (SL_ZALLOC(ctx, x, 1, "solution") == NULL) return SL_ENOMEM;
    x->ctx = ctx;
    x->n_states = n_states;
    x->s_begin = s_begin;
    x->n = n;
    x->info.n_states = n_states;
    x->info.has_policy = with_actions;
    x->info.ranks = ctx->size;
    if (SL_ZALLOC(ctx, x->value, n, "solution values") == NULL ||
        (with_actions && SL_ZALLOC(ctx, x->action, n, "solution policy") == NULL)) {
        sl_solution_free(&x);
        return SL_ENOMEM;
    }
    *out = x;
    return SL_OK;
}

void sl_solution_free(sl_solution **px)
{
    if (px == NULL || *px == NULL) return;
    sl_solution *x = *px;
    free(x->value);
    free(x->action);
    sl_history_free(&x->hist);
    free(x);
    *px = NULL;
}

sl_status sl_solution_get_local(const sl_solution *x, int64_t *s_begin, int64_t *n, const double **value,
                                const int32_t **action)
{
    if (x == NULL) return SL_EUSAGE;
    if (s_begin) *s_begin = x->s_begin;
    if (n) *n = x->n;
    if (value) *value = x->value;
    if (action) *action = x->action;
    return SL_OK;
}

sl_status sl_solution_get_certificate(const sl_solution *x, sl_certificate *c)
{
    if (x == NULL || c == NULL) return SL_EUSAGE;
    *c = x->cert;
    return SL_OK;
}

sl_status sl_solution_get_info(const sl_solution *x, sl_solution_info *info)
{
    if (x == NULL || info == NULL) return SL_EUSAGE;
    *info = x->info;
    return SL_OK;
}

sl_status sl_solution_get_history(const sl_solution *x, sl_history_view *h)
{
    if (x == NULL || h == NULL) return SL_EUSAGE;
    h->n = x->hist.n;
    h->iteration = x->hist.iteration;
    h->sweeps = x->hist.sweeps;
    h->seconds = x->hist.seconds;
    h->sup = x->hist.sup;
    h->span = x->hist.span;
    h->value_error = x->hist.value_error;
    h->policy_loss = x->hist.policy_loss;
    return SL_OK;
}

sl_status sl_solution_value_extent(const sl_solution *x, double *vmin, double *vmax, double *min_abs)
{
    if (x == NULL) return SL_EUSAGE;
    double e[3];
    sl_value_extent_local(x->value, x->n, &e[0], &e[1], &e[2]);
    e[1] = -e[1]; /* one MIN reduction for all three */
    if (MPI_Allreduce(MPI_IN_PLACE, e, 3, MPI_DOUBLE, MPI_MIN, x->ctx->comm) != MPI_SUCCESS)
        return SL_ERR(x->ctx, SL_EINTERNAL, "sl_solution_value_extent: MPI_Allreduce failed");
    if (vmin) *vmin = e[0];
    if (vmax) *vmax = -e[1];
    if (min_abs) *min_abs = e[2];
    return SL_OK;
}

sl_status sl_solution_gather(const sl_solution *x, int root, double **value, int32_t **action)
{
    if (x == NULL) return SL_EUSAGE;
    sl_ctx *ctx = x->ctx;
    sl_status st = SL_OK;
    int *counts = NULL, *displs = NULL;
    double *v = NULL;
    int32_t *a = NULL;
    if (value) *value = NULL;
    if (action) *action = NULL;
    if (root < 0 || root >= ctx->size) st = SL_ERR(ctx, SL_EUSAGE, "sl_solution_gather: no rank %d", root);
    else if (x->n_states > INT32_MAX)
        st = SL_ERR(ctx, SL_EUSAGE, "sl_solution_gather: %lld states do not fit one MPI gather",
                    (long long)x->n_states);
    else if (action && x->action == NULL)
        st = SL_ERR(ctx, SL_EUSAGE, "sl_solution_gather: this solution holds values only (no policy)");
    SL_TRY(sl_agree(ctx, st));
    if (SL_ALLOC(ctx, counts, ctx->size, "gather") == NULL || SL_ALLOC(ctx, displs, ctx->size, "gather") == NULL)
        st = SL_ENOMEM;
    if (st == SL_OK && ctx->rank == root) {
        if ((value && SL_ALLOC(ctx, v, x->n_states, "gathered values") == NULL) ||
            (action && SL_ALLOC(ctx, a, x->n_states, "gathered policy") == NULL))
            st = SL_ENOMEM;
    }
    SL_TRY(sl_agree(ctx, st));
    int mine = (int)x->n, at = (int)x->s_begin;
    MPI_Allgather(&mine, 1, MPI_INT, counts, 1, MPI_INT, ctx->comm);
    MPI_Allgather(&at, 1, MPI_INT, displs, 1, MPI_INT, ctx->comm);
    if (value) MPI_Gatherv(x->value, mine, MPI_DOUBLE, v, counts, displs, MPI_DOUBLE, root, ctx->comm);
    if (action) MPI_Gatherv(x->action, mine, MPI_INT32_T, a, counts, displs, MPI_INT32_T, root, ctx->comm);
    if (value) *value = v;
    if (action) *action = a;
    v = NULL;
    a = NULL;
cleanup:
    free(counts);
    free(displs);
    free(v);
    free(a);
    return st;
}

static void to_record(const sl_solution *x, sl_solution_record *r)
{
    memset(r, 0, sizeof(*r));
    snprintf(r->model_fingerprint, sizeof(r->model_fingerprint), "%s", x->info.model_fingerprint);
    snprintf(r->method, sizeof(r->method), "%s", x->info.method);
    snprintf(r->order, sizeof(r->order), "%s", x->info.order);
    snprintf(r->evaluation, sizeof(r->evaluation), "%s", x->info.evaluation);
    r->converged = x->cert.converged;
    r->ranks = x->info.ranks;
    r->iterations = x->info.iterations;
    r->sweeps = x->info.sweeps;
    r->seconds = x->info.seconds;
    r->tolerance = x->cert.tolerance;
    r->discount = x->info.discount;
    r->residual_sup = x->cert.residual_sup;
    r->residual_span = x->cert.residual_span;
    r->residual_min = x->cert.residual_min;
    r->residual_max = x->cert.residual_max;
    r->value_error_bound = x->cert.value_error;
    r->policy_loss_bound = x->cert.policy_loss;
    r->visit_adjust = x->info.visit_adjust;
}

static void from_record(sl_solution *x, const sl_solution_record *r)
{
    snprintf(x->info.model_fingerprint, sizeof(x->info.model_fingerprint), "%s", r->model_fingerprint);
    snprintf(x->info.method, sizeof(x->info.method), "%s", r->method);
    snprintf(x->info.order, sizeof(x->info.order), "%s", r->order);
    snprintf(x->info.evaluation, sizeof(x->info.evaluation), "%s", r->evaluation);
    x->info.ranks = (int)r->ranks;
    x->info.iterations = r->iterations;
    x->info.sweeps = r->sweeps;
    x->info.seconds = r->seconds;
    x->info.discount = r->discount;
    x->cert.converged = r->converged;
    x->cert.tolerance = r->tolerance;
    x->cert.residual_sup = r->residual_sup;
    x->cert.residual_span = r->residual_span;
    x->cert.residual_min = r->residual_min;
    x->cert.residual_max = r->residual_max;
    x->cert.value_error = r->value_error_bound;
    x->cert.policy_loss = r->policy_loss_bound;
    x->info.visit_adjust = r->visit_adjust;
}

sl_status sl_solution_save(const sl_solution *x, const char *path)
{
    if (x == NULL) return SL_EUSAGE;
    sl_solution_record r;
    to_record(x, &r);
    return sl_store_solution_write(x->ctx, path, x->action ? SL_FILE_SOLUTION : SL_FILE_VALUES, x->n_states,
                                   x->s_begin, x->n, x->value, x->action, &r, &x->hist);
}

sl_status sl_solution_load(sl_ctx *ctx, const char *path, const sl_model *m, sl_solution **out)
{
    sl_status st = SL_OK;
    sl_solution *x = NULL;
    sl_file_kind kind = SL_FILE_UNKNOWN;
    sl_solution_record r;
    if (out == NULL) return SL_ERR(ctx, SL_EUSAGE, "sl_solution_load: no output handle");
    *out = NULL;
    SL_TRY(sl_agree(ctx, sl_model_check_ready(ctx, m, "sl_solution_load")));
    SL_TRY(sl_store_kind(ctx, path, &kind));
    if (kind != SL_FILE_SOLUTION && kind != SL_FILE_VALUES)
        SL_TRY(sl_agree(ctx, SL_ERR(ctx, SL_EDATA, "%s: not a solution or values file", path)));
    int with_actions = kind == SL_FILE_SOLUTION;
    SL_TRY(sl_agree(ctx, sl_solution_new(ctx, m->meta.n_states, m->blk.s_begin, sl_block_states(&m->blk),
                                         with_actions, &x)));
    SL_TRY(sl_store_solution_read(ctx, path, kind, m->meta.n_states, x->s_begin, x->n, x->value, x->action, &r));
    from_record(x, &r);
    x->info.has_policy = with_actions;
    SL_TRY(sl_store_solution_read_history(ctx, path, &x->hist));
    if (strcmp(r.model_fingerprint, m->meta.fingerprint) != 0)
        SL_TRY(sl_agree(ctx, SL_ERR(ctx, SL_EDATA,
                                    "%s was computed for a different model (fingerprint %s) than the one given "
                                    "(%s, fingerprint %s)",
                                    path, r.model_fingerprint, m->name, m->meta.fingerprint)));
    /* every action must be one the model offers in its state */
    if (with_actions)
        st = sl_saved_policy_check(ctx, path, "/policy", m->blk.first_pair, m->blk.action, x->s_begin, x->n,
                                   x->action, NULL, m->name);
    SL_TRY(sl_agree(ctx, st));
    *out = x;
    x = NULL;
cleanup:
    sl_solution_free(&x);
    return st;
}
