/* export.c - `sluice export` (policy and values as CSV). */
#include <errno.h>
#include <math.h>
#include <string.h>

#include "store/store.h"

/* Whole model + solution on rank 0 (others hold nothing). Collective. */
static sl_status load_on_root(sl_ctx *ctx, const char *model, const char *solution, sl_meta *m, sl_block *b,
                              double **value, int32_t **actions, sl_solution_info *info, int need_rows)
{
    sl_status st = SL_OK;
    *value = NULL;
    *actions = NULL;
    memset(b, 0, sizeof(*b));
    SL_TRY(sl_store_model_meta(ctx, model, m));
    int64_t n = ctx->rank == 0 ? m->n_states : 0;
    if (SL_ALLOC(ctx, *value, n, "values") == NULL || SL_ALLOC(ctx, *actions, n, "policy") == NULL) st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    SL_TRY(sl_store_solution_read(ctx, solution, SL_FILE_SOLUTION, m->n_states, 0, n, *value, *actions, info));
    if (strcmp(info->model_fingerprint, m->fingerprint) != 0)
        SL_TRY(sl_agree(ctx, SL_ERR(ctx, SL_EDATA,
                                    "%s was computed for a different model (fingerprint %s) than %s (fingerprint %s)",
                                    solution, info->model_fingerprint, model, m->fingerprint)));
    if (need_rows) SL_TRY(sl_store_model_read(ctx, model, m, 0, n, b));
cleanup:
    if (st != SL_OK) {
        free(*value);
        free(*actions);
        *value = NULL;
        *actions = NULL;
    }
    return st;
}

sl_status sl_export(sl_ctx *ctx, const sl_export_opts *o)
{
    sl_status st = SL_OK;
    sl_meta m;
    sl_block b;
    double *v = NULL;
    int32_t *a = NULL;
    sl_solution_info info;
    memset(&m, 0, sizeof(m));
    SL_TRY(load_on_root(ctx, o->model, o->solution, &m, &b, &v, &a, &info, 1));
    /* every policy action must be one the model offers in that state */
    for (int64_t s = 0; ctx->rank == 0 && s < m.n_states && st == SL_OK; s++) {
        int found = 0;
        for (int64_t q = b.first_pair[s]; q < b.first_pair[s + 1]; q++) found |= b.action[q] == a[s];
        if (!found)
            st = SL_ERR(ctx, SL_EDATA, "%s: state %lld: policy action %d is not available in %s", o->solution,
                        (long long)s, (int)a[s], o->model);
    }
    SL_TRY(sl_agree(ctx, st));
    if (ctx->rank == 0) {
        int to_stdout = strcmp(o->output, "-") == 0;
        char tmp[4200];
        snprintf(tmp, sizeof(tmp), "%s.partial", o->output);
        FILE *f = to_stdout ? stdout : fopen(tmp, "w");
        if (f == NULL) {
            st = SL_ERR(ctx, SL_ECANTCREAT, "%s: cannot create: %s", o->output, strerror(errno));
        } else {
            fprintf(f, "state");
            for (int k = 0; k < m.n_factors; k++) fprintf(f, ",%s", m.factor_name[k]);
            fprintf(f, ",action,action_name,value\n");
            int64_t fv[SLUICE_MAX_FACTORS];
            for (int64_t s = 0; s < m.n_states; s++) {
                sl_meta_decode(&m, s, fv);
                fprintf(f, "%lld", (long long)s);
                for (int k = 0; k < m.n_factors; k++) fprintf(f, ",%lld", (long long)fv[k]);
                const char *name = a[s] >= 0 && a[s] < m.n_action_names ? m.action_name[a[s]] : "";
                fprintf(f, ",%d,%s,%.17g\n", (int)a[s], name, v[s]);
            }
            int bad = ferror(f) != 0;
            if (to_stdout) bad |= fflush(f) != 0;
            else bad |= fclose(f) != 0;
            if (bad) st = SL_ERR(ctx, SL_EIO, "%s: write failed", o->output);
            if (!to_stdout) {
                if (st == SL_OK && rename(tmp, o->output) != 0)
                    st = SL_ERR(ctx, SL_ECANTCREAT, "%s: cannot rename into place: %s", o->output, strerror(errno));
                if (st != SL_OK) remove(tmp);
            }
        }
    }
    st = sl_agree(ctx, st);
cleanup:
    free(v);
    free(a);
    sl_block_free(&b);
    sl_meta_free(&m);
    return st;
}

