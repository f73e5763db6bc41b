/* pview.c - a solution's policy on this rank's slice of states, with the
 * model's numbers for the chosen pairs (reward, quantities, successors). */
#include <math.h>
#include <string.h>

#include "analysis/analysis.h"
#include "parallel/layout.h"
#include "store/h5.h"

void sl_pview_free(sl_pview *pv)
{
    if (pv == NULL) return;
    free(pv->value);
    free(pv->action);
    free(pv->reward);
    free(pv->qmean);
    free(pv->qpos);
    free(pv->first_trans);
    free(pv->target);
    free(pv->prob);
    sl_meta_free(&pv->meta);
    memset(pv, 0, sizeof(*pv));
}

sl_status sl_pview_load(sl_ctx *ctx, const char *model, const char *solution, int want_quantities, int want_rows,
                        sl_pview *pv)
{
    sl_status st = SL_OK;
    sl_block blk;
    hid_t f = H5I_INVALID_HID;
    int64_t *fp = NULL, *chosen = NULL;
    int32_t *pa = NULL;
    double *pr = NULL, *qm = NULL, *qp = NULL;
    memset(pv, 0, sizeof(*pv));
    memset(&blk, 0, sizeof(blk));
    SL_TRY(sl_store_model_meta(ctx, model, &pv->meta));
    const sl_meta *m = &pv->meta;
    int64_t n = m->n_states;
    pv->s_begin = n * ctx->rank / ctx->size;
    pv->s_end = n * (ctx->rank + 1) / ctx->size;
    pv->n_local = pv->s_end - pv->s_begin;
    int64_t nl = pv->n_local;
    if (SL_ALLOC(ctx, pv->value, nl, "values") == NULL || SL_ALLOC(ctx, pv->action, nl, "policy") == NULL ||
        SL_ALLOC(ctx, pv->reward, nl, "rewards") == NULL || SL_ALLOC(ctx, chosen, nl, "pairs") == NULL)
        st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    SL_TRY(sl_policy_file_read(ctx, model, m, solution, pv->s_begin, nl, pv->value, pv->action, &pv->is_rule));
    int nq = want_quantities ? m->n_quantities : 0;
    if (want_rows) {
        /* the whole slice, validated and checked against the fingerprint */
        char fpr[40];
        SL_TRY(sl_store_model_read(ctx, model, m, pv->s_begin, pv->s_end, &blk));
        SL_TRY(sl_fingerprint(ctx, m, &blk, fpr));
        if (strcmp(fpr, m->fingerprint) != 0)
            SL_TRY(sl_agree(ctx, SL_ERR(ctx, SL_EDATA,
                                        "%s: contents do not match the file's fingerprint (%s recorded, %s computed)",
                                        model, m->fingerprint, fpr)));
        st = sl_policy_pairs(ctx, m, pv->s_begin, nl, blk.first_pair, blk.action, pv->action, NULL, solution, model, chosen);
        SL_TRY(sl_agree(ctx, st));
        int64_t nt = 0;
        for (int64_t i = 0; i < nl; i++) nt += blk.first_trans[chosen[i] + 1] - blk.first_trans[chosen[i]];
        if (SL_ALLOC(ctx, pv->first_trans, nl + 1, "policy rows") == NULL ||
            SL_ALLOC(ctx, pv->target, nt, "policy rows") == NULL || SL_ALLOC(ctx, pv->prob, nt, "policy rows") == NULL)
            st = SL_ENOMEM;
        SL_TRY(sl_agree(ctx, st));
        pv->first_trans[0] = 0;
        for (int64_t i = 0; i < nl; i++) {
            int64_t k = chosen[i], t0 = blk.first_trans[k] - blk.t_begin, t1 = blk.first_trans[k + 1] - blk.t_begin;
            int64_t w = pv->first_trans[i];
            for (int64_t t = t0; t < t1; t++, w++) {
                pv->target[w] = blk.target[t];
                pv->prob[w] = blk.prob[t];
            }
            pv->first_trans[i + 1] = w;
            pv->reward[i] = blk.reward[k];
        }
        sl_block_free(&blk);
    }
    /* first_pair and pair actions of the slice (again, cheaply, when the
     * rows were read: the block is gone) */
    SL_TRY(sl_h5_open(ctx, model, 0, &f));
    if (SL_ALLOC(ctx, fp, nl + 1, "first_pair") == NULL) st = SL_ENOMEM;
    if (st == SL_OK)
        st = sl_h5_read_1d(ctx, f, "/state/first_pair", H5T_NATIVE_INT64, n + 1, pv->s_begin, nl + 1, fp, model);
    int64_t p0 = st == SL_OK ? fp[0] : 0, np = st == SL_OK ? fp[nl] - fp[0] : 0;
    if (st == SL_OK && (p0 < 0 || np < nl || fp[nl] > m->n_pairs))
        st = SL_ERR(ctx, SL_EDATA, "%s: /state/first_pair of states %lld..%lld is out of range", model,
                    (long long)pv->s_begin, (long long)pv->s_end);
    if (st == SL_OK && (SL_ALLOC(ctx, pa, np, "pair actions") == NULL || SL_ALLOC(ctx, pr, np, "pair rewards") == NULL))
        st = SL_ENOMEM;
    if (st == SL_OK) st = sl_h5_read_1d(ctx, f, "/pair/action", H5T_NATIVE_INT32, m->n_pairs, p0, np, pa, model);
    if (st == SL_OK) st = sl_h5_read_1d(ctx, f, "/pair/reward", H5T_NATIVE_DOUBLE, m->n_pairs, p0, np, pr, model);
    if (st == SL_OK) st = sl_policy_pairs(ctx, m, pv->s_begin, nl, fp, pa, pv->action, NULL, solution, model, chosen);
    if (st == SL_OK)
        for (int64_t i = 0; i < nl; i++) pv->reward[i] = pr[chosen[i]];
    H5Fclose(f);
    f = H5I_INVALID_HID;
    SL_TRY(sl_agree(ctx, st));
    if (nq > 0) {
        if (SL_ALLOC(ctx, pv->qmean, nl * nq, "quantities") == NULL || SL_ALLOC(ctx, pv->qpos, nl * nq, "quantities") == NULL ||
            SL_ALLOC(ctx, qm, np, "quantities") == NULL || SL_ALLOC(ctx, qp, np, "quantities") == NULL)
            st = SL_ENOMEM;
        SL_TRY(sl_agree(ctx, st));
        for (int q = 0; q < nq; q++) {
            SL_TRY(sl_store_quantity_read(ctx, model, m, q, p0, np, qm, qp));
            for (int64_t i = 0; i < nl; i++) {
                pv->qmean[i * nq + q] = qm[chosen[i]];
                pv->qpos[i * nq + q] = qp[chosen[i]];
            }
        }
        pv->nq = nq;
    }
cleanup:
    if (f >= 0) H5Fclose(f);
    free(fp);
    free(chosen);
    free(pa);
    free(pr);
    free(qm);
    free(qp);
    sl_block_free(&blk);
    if (st != SL_OK) sl_pview_free(pv);
    return st;
}

sl_status sl_pview_gather(sl_ctx *ctx, const sl_pview *pv, int64_t n, const int64_t *states, double *value,
                          int32_t *action, double *qmean)
{
    sl_status st = SL_OK;
    int nq = pv->nq;
    int64_t w = 2 + (qmean ? nq : 0), total = n * w;
    double *buf = NULL;
    if (total > INT32_MAX) return sl_agree(ctx, SL_ERR(ctx, SL_EUSAGE, "too many states asked for at once (%lld)",
                                                       (long long)n));
    if (SL_ZALLOC(ctx, buf, total, "gather") == NULL) st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    for (int64_t c = 0; c < n; c++) {
        int64_t s = states[c];
        if (s < pv->s_begin || s >= pv->s_end) continue;
        int64_t i = s - pv->s_begin;
        buf[c * w] = pv->value[i];
        buf[c * w + 1] = (double)pv->action[i];
        for (int q = 0; qmean && q < nq; q++) buf[c * w + 2 + q] = pv->qmean[i * nq + q];
    }
    /* each entry has exactly one owner; the others add zeros */
    if (MPI_Allreduce(MPI_IN_PLACE, buf, (int)total, MPI_DOUBLE, MPI_SUM, ctx->comm) != MPI_SUCCESS)
        st = SL_ERR(ctx, SL_EINTERNAL, "MPI_Allreduce failed gathering table cells");
    SL_TRY(sl_agree(ctx, st));
    for (int64_t c = 0; c < n; c++) {
        if (value) value[c] = buf[c * w];
        if (action) action[c] = (int32_t)buf[c * w + 1];
        for (int q = 0; qmean && q < nq; q++) qmean[c * nq + q] = buf[c * w + 2 + q];
    }
cleanup:
    free(buf);
    return st;
}
