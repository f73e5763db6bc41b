/* info.c - `sluice info`: describe model, solution, values and checkpoint files;
 * predict the partition of a model over N ranks. */
#include <math.h>
#include <string.h>
#include <sys/stat.h>

#include "parallel/layout.h"
#include "core/json.h"
#include "store/h5.h"
#include "store/store.h"
#include "solve/objectives.h"

typedef struct model_stats {
    int64_t tpp_min, tpp_max;   /* transitions per pair */
    int64_t pps_min, pps_max;   /* pairs per state */
    double stored, raw, file_bytes, plain_bytes;
} model_stats;

/* Distributed scan of the index arrays for min/max counts. */
static sl_status scan_counts(sl_ctx *ctx, hid_t f, const sl_meta *m, model_stats *ms, const char *path)
{
    sl_status st = SL_OK;
    int64_t *buf = NULL;
    int P = ctx->size, r = ctx->rank;
    int64_t lim[4] = {INT64_MAX, 0, INT64_MAX, 0};
    int64_t bad[2] = {INT64_MAX, INT64_MAX}; /* first entry with a count below 1 */
    const int64_t CH = 1 << 20;
    if (SL_ALLOC(ctx, buf, CH + 1, "scan") == NULL) st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    for (int pass = 0; pass < 2; pass++) {
        const char *name = pass == 0 ? "/pair/first_transition" : "/state/first_pair";
        int64_t n = pass == 0 ? m->n_pairs : m->n_states;
        int64_t lo = n * r / P, hi = n * (r + 1) / P;
        /* every rank runs the same number of rounds (collective-safe) */
        int64_t rounds = (n / P + CH) / CH + 1;
        for (int64_t k = 0; k < rounds; k++) {
            int64_t a = lo + k * CH, b = a + CH < hi ? a + CH : hi;
            int64_t cnt = b > a ? b - a + 1 : 0;
            st = sl_h5_read_1d(ctx, f, name, H5T_NATIVE_INT64, n + 1, cnt ? a : 0, cnt, buf, path);
            if (st != SL_OK) break;
            for (int64_t i = 0; i + 1 < cnt; i++) {
                int64_t d = buf[i + 1] - buf[i];
                if (d < 1 && a + i < bad[pass]) bad[pass] = a + i;
                if (d < lim[2 * pass]) lim[2 * pass] = d;
                if (d > lim[2 * pass + 1]) lim[2 * pass + 1] = d;
            }
        }
        if (st != SL_OK) break;
    }
    SL_TRY(sl_agree(ctx, st));
    MPI_Allreduce(MPI_IN_PLACE, bad, 2, MPI_INT64_T, MPI_MIN, ctx->comm);
    if (bad[1] != INT64_MAX)
        SL_FAIL(SL_EDATA, "%s: state %lld: /state/first_pair is not increasing (a state with no action)", path,
                (long long)bad[1]);
    if (bad[0] != INT64_MAX)
        SL_FAIL(SL_EDATA, "%s: pair %lld: /pair/first_transition is not increasing (a pair with no successor)",
                path, (long long)bad[0]);
    int64_t mins[2] = {lim[0], lim[2]}, maxs[2] = {lim[1], lim[3]}, gmin[2], gmax[2];
    MPI_Allreduce(mins, gmin, 2, MPI_INT64_T, MPI_MIN, ctx->comm);
    MPI_Allreduce(maxs, gmax, 2, MPI_INT64_T, MPI_MAX, ctx->comm);
    ms->tpp_min = gmin[0];
    ms->tpp_max = gmax[0];
    ms->pps_min = gmin[1];
    ms->pps_max = gmax[1];
cleanup:
    free(buf);
    return st;
}

static const char *names[] = {"/state/first_pair", "/pair/action", "/pair/reward", "/pair/first_transition",
                              "/transition/target", "/transition/probability"};

/* Predicted partition: halo per part from a streaming pass over targets (rank 0). */
static sl_status partition_report(sl_ctx *ctx, const char *path, const sl_meta *m, int N, int json, FILE *out)
{
    sl_status st = SL_OK;
    int64_t *cum = NULL, *bounds = NULL, *fp = NULL, *ft = NULL, *tg = NULL;
    uint32_t *t32 = NULL;
    uint8_t *mark = NULL;
    int64_t *halo = NULL, *nbr = NULL, *ptrans = NULL, *runs = NULL;
    sl_stage_map sm;
    hid_t f = H5I_INVALID_HID;
    memset(&sm, 0, sizeof(sm));
    int64_t ns = m->n_states;
    /* rank 0 reads; the others wait at the final agreement */
    SL_TRY(sl_store_model_cumulative(ctx, path, 0, ctx->rank == 0 ? ns : 0, &cum));
    if (ctx->rank == 0) {
        if (SL_ALLOC(ctx, bounds, N + 1, "partition") == NULL || SL_ZALLOC(ctx, mark, (ns + 7) / 8, "halo bitmap") == NULL ||
            SL_ZALLOC(ctx, halo, N, "halo") == NULL || SL_ZALLOC(ctx, nbr, N, "halo") == NULL ||
            SL_ZALLOC(ctx, ptrans, N, "partition") == NULL)
            st = SL_ENOMEM;
    }
    SL_TRY(sl_agree(ctx, st));
    SL_TRY(sl_h5_open(ctx, path, 0, &f));
    if (ctx->rank == 0) {
        /* the layout sl_problem_load uses: stage-interleaved with a stage
         * factor (every part holds a share of every stage), else contiguous */
        st = sl_stage_map_local(ctx, m, cum, N, &sm);
        if (st == SL_OK && sm.active)
            for (int k = 0; k <= N; k++) bounds[k] = sm.n_stages * sm.ub[k];
        else
            sl_partition_split(cum, ns, N, bounds);
        int use32 = sl_h5_is_u32(f, "/transition/target");
        const int64_t CH = 1 << 20;
        if (SL_ALLOC(ctx, tg, CH, "targets") == NULL || SL_ALLOC(ctx, t32, CH, "targets") == NULL) st = SL_ENOMEM;
        int *touched = NULL;
        if (st == SL_OK && SL_ZALLOC(ctx, touched, N, "neighbours") == NULL) st = SL_ENOMEM;
        int64_t *distinct = NULL;
        for (int k = 0; k < N && st == SL_OK; k++) {
            int64_t s0 = bounds[k], s1 = bounds[k + 1], nd = 0, cap = 0, nr = 1;
            free(runs);
            runs = NULL;
            if (sm.active) {
                st = sl_stage_runs(ctx, &sm, k, &runs, &nr);
            } else if (SL_ALLOC(ctx, runs, 2, "partition") == NULL) {
                st = SL_ENOMEM;
            } else {
                runs[0] = s0;
                runs[1] = s1;
            }
            for (int64_t ri = 0; st == SL_OK && ri < nr; ri++) {
            int64_t t0 = cum[runs[2 * ri]], t1 = cum[runs[2 * ri + 1]];
            ptrans[k] += t1 - t0;
            for (int64_t a = t0; a < t1 && st == SL_OK; a += CH) {
                int64_t c = a + CH < t1 ? CH : t1 - a;
                if (use32) {
                    st = sl_h5_read_1d(ctx, f, "/transition/target", H5T_NATIVE_UINT32, m->n_trans, a, c, t32, path);
                    for (int64_t i = 0; i < c; i++) tg[i] = t32[i];
                } else {
                    st = sl_h5_read_1d(ctx, f, "/transition/target", H5T_NATIVE_INT64, m->n_trans, a, c, tg, path);
                }
                for (int64_t i = 0; st == SL_OK && i < c; i++) {
                    int64_t g = tg[i];
                    if (g < 0 || g >= ns) {
                        st = SL_ERR(ctx, SL_EDATA, "%s: transition %lld: target %lld out of range", path,
                                    (long long)(a + i), (long long)g);
                        break;
                    }
                    g = sl_stage_internal(&sm, g);
                    if (g >= s0 && g < s1) continue;
                    if (mark[g >> 3] & (1u << (g & 7))) continue;
                    mark[g >> 3] |= (uint8_t)(1u << (g & 7));
                    if (nd == cap) {
                        cap = cap ? 2 * cap : 1024;
                        int64_t *q = realloc(distinct, (size_t)cap * sizeof(int64_t));
                        if (q == NULL) {
                            st = SL_ERR(ctx, SL_ENOMEM, "out of memory in the partition report");
                            break;
                        }
                        distinct = q;
                    }
                    distinct[nd++] = g;
                }
            }
            }
            halo[k] = nd;
            int nn = 0;
            for (int64_t i = 0; i < nd; i++) {
                int o = sl_dist_owner(bounds, N, distinct[i]);
                if (!touched[o]) {
                    touched[o] = 1;
                    nn++;
                }
                mark[distinct[i] >> 3] = 0;
            }
            for (int64_t i = 0; i < nd; i++) touched[sl_dist_owner(bounds, N, distinct[i])] = 0;
            nbr[k] = nn;
        }
        free(distinct);
        free(touched);
        if (st == SL_OK) {
            int64_t hmax = 0, htot = 0, tmax = 0;
            for (int k = 0; k < N; k++) {
                htot += halo[k];
                if (halo[k] > hmax) hmax = halo[k];
                int64_t t = ptrans[k];
                if (t > tmax) tmax = t;
            }
            if (json) {
                sl_json j;
                sl_json_begin(&j, out);
                sl_json_int(&j, "ranks", N);
                sl_json_int(&j, "halo_total", htot);
                sl_json_int(&j, "halo_max", hmax);
                sl_json_num(&j, "bytes_exchanged_per_sweep", 8.0 * (double)htot);
                sl_json_str(&j, "layout", sm.active ? "stage-interleaved" : "contiguous");
                if (sm.active) sl_json_int(&j, "stages", sm.n_stages);
                sl_json_num(&j, "transition_imbalance", (double)tmax * N / (double)(m->n_trans > 0 ? m->n_trans : 1));
                sl_json_arr_open(&j, "parts");
                for (int k = 0; k < N; k++) {
                    sl_json_obj_open(&j, NULL);
                    sl_json_int(&j, "rank", k);
                    sl_json_int(&j, "first_state", bounds[k]);
                    sl_json_int(&j, "states", bounds[k + 1] - bounds[k]);
                    sl_json_int(&j, "transitions", ptrans[k]);
                    sl_json_int(&j, "halo", halo[k]);
                    sl_json_int(&j, "neighbours", nbr[k]);
                    sl_json_num(&j, "bytes_in_per_sweep", 8.0 * (double)halo[k]);
                    double mem = 16.0 * (double)ptrans[k] +
                                 40.0 * (double)(bounds[k + 1] - bounds[k]) + 16.0 * (double)halo[k];
                    sl_json_num(&j, "memory_bytes_estimate", mem);
                    sl_json_close_obj(&j);
                }
                sl_json_close_arr(&j);
                sl_json_end(&j);
            } else {
                fprintf(out, "partition of %s over %d ranks (balanced by transitions)\n", path, N);
                if (sm.active)
                    fprintf(out, "layout: stage-interleaved - every rank holds a share of each of the %lld stages, "
                                 "numbered stage by stage\n(first_state is the internal number); gs sweeps one stage "
                                 "at a time on all ranks, so its sweep count does not grow with the ranks; it exchanges the\nhalo at the start of a sweep and each stage's part after that stage (up to twice the bytes below)\n",
                            (long long)sm.n_stages);
                fprintf(out, "%8s %14s %12s %14s %12s %6s %14s %12s\n", "rank", "first_state", "states", "transitions",
                        "halo", "nbrs", "bytes_in/sweep", "mem_est_MB");
                int shown = 0;
                for (int k = 0; k < N; k++) {
                    if (N > 40 && k >= 16 && k < N - 8) {
                        if (!shown) fprintf(out, "%8s\n", "...");
                        shown = 1;
                        continue;
                    }
                    int64_t t = ptrans[k];
                    double mem = 16.0 * (double)t + 40.0 * (double)(bounds[k + 1] - bounds[k]) + 16.0 * (double)halo[k];
                    fprintf(out, "%8d %14lld %12lld %14lld %12lld %6lld %14.0f %12.1f\n", k, (long long)bounds[k],
                            (long long)(bounds[k + 1] - bounds[k]), (long long)t, (long long)halo[k], (long long)nbr[k],
                            8.0 * (double)halo[k], mem / 1e6);
                }
                fprintf(out, "total halo entries %lld (%.3g MB exchanged per sweep), largest %lld; transition imbalance %.3f\n",
                        (long long)htot, 8e-6 * (double)htot, (long long)hmax,
                        (double)tmax * N / (double)(m->n_trans > 0 ? m->n_trans : 1));
                fprintf(out, "memory estimate: 16 B per transition + 40 B per state + 16 B per halo entry, plus pairs;\n"
                             "policy iteration with a direct solve needs more on rank 0 (see sluice solve --method pi)\n");
            }
        }
    }
    st = sl_agree(ctx, st);
cleanup:
    if (f >= 0) H5Fclose(f);
    free(cum);
    free(bounds);
    free(fp);
    free(ft);
    free(tg);
    free(t32);
    free(mark);
    free(halo);
    free(ptrans);
    free(runs);
    sl_stage_map_free(&sm);
    free(nbr);
    return st;
}

/* Visit counts of an estimated model: totals and the pairs seen fewer than
 * K times (rank 0 reads; at most `keep` of them listed). */
typedef struct visit_stats {
    int64_t K, total, min, max, thin, listed;
    int64_t *thin_state;        /* [listed] */
    int32_t *thin_action;
    int64_t *thin_visits;
} visit_stats;

static void visit_stats_free(visit_stats *v)
{
    free(v->thin_state);
    free(v->thin_action);
    free(v->thin_visits);
}

static sl_status scan_visits(sl_ctx *ctx, hid_t f, const sl_meta *m, int64_t K, int64_t keep, visit_stats *v,
                             const char *path)
{
    sl_status st = SL_OK;
    int64_t *fp = NULL, *vis = NULL;
    int32_t *act = NULL;
    memset(v, 0, sizeof(*v));
    v->K = K;
    v->min = INT64_MAX;
    if (ctx->rank == 0) {
        const int64_t CH = 1 << 20;
        if (SL_ALLOC(ctx, fp, m->n_states + 1, "first_pair") == NULL || SL_ALLOC(ctx, vis, CH, "visits") == NULL ||
            SL_ALLOC(ctx, act, CH, "actions") == NULL || SL_ALLOC(ctx, v->thin_state, keep, "thin pairs") == NULL ||
            SL_ALLOC(ctx, v->thin_action, keep, "thin pairs") == NULL ||
            SL_ALLOC(ctx, v->thin_visits, keep, "thin pairs") == NULL)
            st = SL_ENOMEM;
        if (st == SL_OK)
            st = sl_h5_read_1d(ctx, f, "/state/first_pair", H5T_NATIVE_INT64, m->n_states + 1, 0, m->n_states + 1, fp,
                               path);
        int64_t s = 0;
        for (int64_t a = 0; st == SL_OK && a < m->n_pairs; a += CH) {
            int64_t c = m->n_pairs - a < CH ? m->n_pairs - a : CH;
            st = sl_h5_read_1d(ctx, f, "/pair/visits", H5T_NATIVE_INT64, m->n_pairs, a, c, vis, path);
            if (st == SL_OK) st = sl_h5_read_1d(ctx, f, "/pair/action", H5T_NATIVE_INT32, m->n_pairs, a, c, act, path);
            for (int64_t k = 0; st == SL_OK && k < c; k++) {
                while (s < m->n_states && fp[s + 1] <= a + k) s++;
                int64_t n = vis[k];
                if (n < 0) {
                    st = SL_ERR(ctx, SL_EDATA, "%s: /pair/visits: state %lld, action %d: negative count %lld", path,
                                (long long)s, (int)act[k], (long long)n);
                    break;
                }
                v->total += n;
                if (n < v->min) v->min = n;
                if (n > v->max) v->max = n;
                if (n < K) {
                    if (v->listed < keep) {
                        v->thin_state[v->listed] = s;
                        v->thin_action[v->listed] = act[k];
                        v->thin_visits[v->listed] = n;
                        v->listed++;
                    }
                    v->thin++;
                }
            }
        }
    }
    st = sl_agree(ctx, st);
    free(fp);
    free(vis);
    free(act);
    return st;
}

/* The objective's facts of a model: terminal values (range) and, for the
 * total objective, the number of absorbing states. Collective. */
typedef struct objective_facts {
    double term_min, term_max;
    int64_t n_absorbing;        /* -1: not counted (objective not total) */
} objective_facts;

static sl_status objective_scan(sl_ctx *ctx, hid_t f, const sl_meta *m, const char *path, objective_facts *of)
{
    sl_status st = SL_OK;
    double *tv = NULL;
    char *flag = NULL;
    sl_model *mh = NULL;
    sl_problem P;
    memset(&P, 0, sizeof(P));
    of->term_min = INFINITY;
    of->term_max = -INFINITY;
    of->n_absorbing = -1;
    if (m->has_terminal && ctx->rank == 0) {
        if (SL_ALLOC(ctx, tv, m->n_states, "terminal values") == NULL) st = SL_ENOMEM;
        if (st == SL_OK)
            st = sl_h5_read_1d(ctx, f, "/terminal_value", H5T_NATIVE_DOUBLE, m->n_states, 0, m->n_states, tv, path);
        for (int64_t i = 0; st == SL_OK && i < m->n_states; i++) {
            of->term_min = fmin(of->term_min, tv[i]);
            of->term_max = fmax(of->term_max, tv[i]);
        }
    }
    SL_TRY(sl_agree(ctx, st));
    if (m->objective == SL_OBJ_TOTAL) {
        /* the rows are needed: load the model as solve does */
        SL_TRY(sl_model_load(ctx, path, &mh));
        SL_TRY(sl_problem_from_model_any(ctx, mh, path, SL_ORDER_NATURAL, &P));
        if (SL_ALLOC(ctx, flag, P.n_local + 1, "absorbing states") == NULL) st = SL_ENOMEM;
        SL_TRY(sl_agree(ctx, st));
        of->n_absorbing = sl_sum_i64(ctx, sl_obj_find_absorbing(&P, flag));
    }
cleanup:
    free(tv);
    free(flag);
    sl_problem_free(&P);
    sl_model_free(&mh);
    return st;
}

static sl_status model_info(sl_ctx *ctx, const sl_info_opts *o)
{
    sl_status st = SL_OK;
    sl_meta m;
    model_stats ms;
    visit_stats vis;
    hid_t f = H5I_INVALID_HID;
    memset(&ms, 0, sizeof(ms));
    memset(&vis, 0, sizeof(vis));
    SL_TRY(sl_store_model_meta(ctx, o->path, &m));
    SL_TRY(sl_h5_open(ctx, o->path, 0, &f));
    SL_TRY(scan_counts(ctx, f, &m, &ms, o->path));
    const int64_t K = o->thin_below > 0 ? o->thin_below : SLUICE_THIN_BELOW;
    if (m.has_visits) SL_TRY(scan_visits(ctx, f, &m, K, o->json ? 10000 : 20, &vis, o->path));
    objective_facts of;
    SL_TRY(objective_scan(ctx, f, &m, o->path, &of));
    for (size_t i = 0; i < sizeof(names) / sizeof(names[0]); i++) {
        double s, r;
        sl_h5_sizes(f, names[i], &s, &r);
        ms.stored += s;
    }
    struct stat sb;
    ms.file_bytes = stat(o->path, &sb) == 0 ? (double)sb.st_size : 0;
    /* raw: 8-byte probability + 4-byte index per transition, plus per-pair
     * action (4) + reward (8) + pointer (8) and per-state pointer (8) */
    ms.raw = 12.0 * (double)m.n_trans + 20.0 * (double)m.n_pairs + 8.0 * (double)m.n_states;
    if (ctx->rank == 0) {
        FILE *out = o->out;
        double mean = (double)m.n_trans / (double)m.n_pairs;
        if (o->json) {
            sl_json j;
            sl_json_begin(&j, out);
            sl_json_str(&j, "kind", "model");
            sl_json_str(&j, "path", o->path);
            sl_json_int(&j, "format_version", m.format_version);
            sl_json_int(&j, "n_states", m.n_states);
            sl_json_int(&j, "n_pairs", m.n_pairs);
            sl_json_int(&j, "n_transitions", m.n_trans);
            sl_json_num(&j, "discount", m.discount);
            sl_json_str(&j, "objective", sl_objective_name(m.objective));
            sl_json_bool(&j, "terminal_values", m.has_terminal);
            if (m.has_terminal) {
                sl_json_num(&j, "terminal_value_min", of.term_min);
                sl_json_num(&j, "terminal_value_max", of.term_max);
            }
            if (of.n_absorbing >= 0) sl_json_int(&j, "n_absorbing", of.n_absorbing);
            sl_json_bool(&j, "visit_counts", m.has_visits);
            sl_json_str(&j, "fingerprint", m.fingerprint);
            sl_json_obj_open(&j, "transitions_per_pair");
            sl_json_int(&j, "min", ms.tpp_min);
            sl_json_num(&j, "mean", mean);
            sl_json_int(&j, "max", ms.tpp_max);
            sl_json_close_obj(&j);
            sl_json_obj_open(&j, "actions_per_state");
            sl_json_int(&j, "min", ms.pps_min);
            sl_json_num(&j, "mean", (double)m.n_pairs / (double)m.n_states);
            sl_json_int(&j, "max", ms.pps_max);
            sl_json_close_obj(&j);
            sl_json_num(&j, "file_bytes", ms.file_bytes);
            sl_json_num(&j, "data_bytes_stored", ms.stored);
            sl_json_num(&j, "raw_bytes", ms.raw);
            sl_json_num(&j, "compression_ratio", ms.raw > 0 ? ms.file_bytes / ms.raw : NAN);
            sl_json_arr_open(&j, "factors");
            for (int i = 0; i < m.n_factors; i++) {
                sl_json_obj_open(&j, NULL);
                sl_json_str(&j, "name", m.factor_name[i]);
                sl_json_int(&j, "size", m.factor_size[i]);
                sl_json_bool(&j, "stage", m.factor_stage[i]);
                sl_json_close_obj(&j);
            }
            sl_json_close_arr(&j);
            sl_json_arr_open(&j, "actions");
            for (int32_t a = 0; a < m.n_action_names; a++) sl_json_str(&j, NULL, m.action_name[a]);
            sl_json_close_arr(&j);
            if (m.format_version >= 2) { /* format 2 annotations */
                sl_json_str(&j, "reward_unit", m.reward_unit);
                sl_json_str(&j, "period_unit", m.period_unit);
                sl_json_str(&j, "action_unit", m.action_unit);
                sl_json_obj_open(&j, "factor_units");
                for (int i = 0; i < m.n_factors; i++)
                    if (m.factor_value[i]) sl_json_str(&j, m.factor_name[i], m.factor_unit[i]);
                sl_json_close_obj(&j);
                sl_json_obj_open(&j, "quantities");
                for (int q = 0; q < m.n_quantities; q++) sl_json_str(&j, m.quantity_name[q], m.quantity_unit[q]);
                sl_json_close_obj(&j);
            }
            if (m.generator[0]) {
                sl_json_obj_open(&j, "generator");
                sl_json_str(&j, "name", m.generator);
                sl_json_str(&j, "source", m.source);
                sl_json_obj_open(&j, "parameters");
                for (int i = 0; i < m.n_params; i++) sl_json_num(&j, m.param_name[i], m.param_value[i]);
                sl_json_close_obj(&j);
                sl_json_close_obj(&j);
            } else if (m.source[0]) {
                sl_json_str(&j, "source", m.source);
            }
            if (m.has_visits) {
                sl_json_obj_open(&j, "visits");
                sl_json_int(&j, "total", vis.total);
                sl_json_int(&j, "min", vis.min);
                sl_json_int(&j, "max", vis.max);
                sl_json_int(&j, "thin_below", vis.K);
                sl_json_int(&j, "thin_pairs", vis.thin);
                sl_json_int(&j, "thin_listed", vis.listed);
                sl_json_arr_open(&j, "thin");
                for (int64_t k = 0; k < vis.listed; k++) {
                    sl_json_obj_open(&j, NULL);
                    sl_json_int(&j, "state", vis.thin_state[k]);
                    sl_json_int(&j, "action", vis.thin_action[k]);
                    sl_json_int(&j, "visits", vis.thin_visits[k]);
                    sl_json_close_obj(&j);
                }
                sl_json_close_arr(&j);
                sl_json_close_obj(&j);
            }
            sl_json_end(&j);
        } else {
            fprintf(out, "%s: sluice model (format %d)\n", o->path, m.format_version);
            fprintf(out, "  states        %lld\n  pairs         %lld (actions per state %lld..%lld, mean %.2f)\n",
                    (long long)m.n_states, (long long)m.n_pairs, (long long)ms.pps_min, (long long)ms.pps_max,
                    (double)m.n_pairs / (double)m.n_states);
            fprintf(out, "  transitions   %lld (per pair min %lld, mean %.2f, max %lld)\n", (long long)m.n_trans,
                    (long long)ms.tpp_min, mean, (long long)ms.tpp_max);
            fprintf(out, "  objective     %s, discount %.10g\n", sl_objective_name(m.objective), m.discount);
            if (m.has_terminal)
                fprintf(out, "  terminal      /terminal_value present, %.6g .. %.6g (the horizon is given to solve)\n",
                        of.term_min, of.term_max);
            else if (m.objective == SL_OBJ_FINITE)
                fprintf(out, "  terminal      no /terminal_value (0 unless solve --terminal; the horizon is given to "
                             "solve)\n");
            if (of.n_absorbing >= 0)
                fprintf(out, "  absorbing     %lld states (every action stays, reward 0)\n", (long long)of.n_absorbing);
            fprintf(out, "  size          %.3f MB on disk, %.3f MB raw: %.1f%% of raw\n", ms.file_bytes / 1e6,
                    ms.raw / 1e6, ms.raw > 0 ? 100.0 * ms.file_bytes / ms.raw : 0.0);
            fprintf(out, "  fingerprint   %s\n", m.fingerprint);
            if (m.n_factors > 0) {
                fprintf(out, "  factors      ");
                for (int i = 0; i < m.n_factors; i++)
                    fprintf(out, " %s(%lld%s)", m.factor_name[i], (long long)m.factor_size[i],
                            m.factor_stage[i] ? ", stage" : "");
                fprintf(out, "  [state = factor 0 fastest]\n");
            }
            for (int i = 0; i < m.n_factors; i++) {
                int64_t n = m.factor_size[i];
                if (m.factor_value[i])
                    fprintf(out, "    %-12s values %.6g .. %.6g %s\n", m.factor_name[i], m.factor_value[i][0],
                            m.factor_value[i][n - 1], m.factor_unit[i]);
                if (m.factor_label[i])
                    fprintf(out, "    %-12s labels %s .. %s\n", m.factor_name[i], m.factor_label[i][0],
                            m.factor_label[i][n - 1]);
            }
            if (m.n_action_values > 0)
                fprintf(out, "  action values %.6g .. %.6g %s\n", m.action_value[0],
                        m.action_value[m.n_action_values - 1], m.action_unit);
            if (m.reward_unit[0] || m.period_unit[0])
                fprintf(out, "  reward        in %s per %s\n", m.reward_unit[0] ? m.reward_unit : "(no unit)",
                        m.period_unit[0] ? m.period_unit : "period");
            if (m.n_quantities > 0) {
                fprintf(out, "  quantities   ");
                for (int q = 0; q < m.n_quantities; q++) fprintf(out, " %s [%s]", m.quantity_name[q], m.quantity_unit[q]);
                fprintf(out, "\n");
            }
            if (m.n_action_names > 0) {
                fprintf(out, "  actions      ");
                for (int32_t a = 0; a < m.n_action_names && a < 32; a++) fprintf(out, " %d=%s", a, m.action_name[a]);
                if (m.n_action_names > 32) fprintf(out, " ... (%d in all)", m.n_action_names);
                fprintf(out, "\n");
            }
            if (m.generator[0]) {
                fprintf(out, "  generator     %s (from %s)\n", m.generator, m.source);
                for (int i = 0; i < m.n_params; i++)
                    fprintf(out, "    %-22s %.10g %s\n", m.param_name[i], m.param_value[i], m.param_unit[i]);
            } else if (m.source[0]) {
                fprintf(out, "  source        %s\n", m.source);
            }
            if (m.has_visits) {
                fprintf(out, "  visits        %lld logged steps; per (state, action) min %lld, max %lld\n",
                        (long long)vis.total, (long long)vis.min, (long long)vis.max);
                fprintf(out, "  thin pairs    %lld seen fewer than %lld times (--thin-below)%s\n", (long long)vis.thin,
                        (long long)vis.K, vis.thin > vis.listed ? "; the first listed" : "");
                for (int64_t k = 0; k < vis.listed; k++)
                    fprintf(out, "    state %lld action %d: %lld visits\n", (long long)vis.thin_state[k],
                            (int)vis.thin_action[k], (long long)vis.thin_visits[k]);
            }
        }
    }
    if (o->partition > 0) {
        H5Fclose(f);
        f = H5I_INVALID_HID;
        SL_TRY(partition_report(ctx, o->path, &m, o->partition, o->json, o->out));
    }
cleanup:
    if (f >= 0) H5Fclose(f);
    visit_stats_free(&vis);
    sl_meta_free(&m);
    return st;
}

static void print_history_tail(FILE *out, const sl_history *h)
{
    if (h->n == 0) return;
    fprintf(out, "  history       %lld checks; last:\n", (long long)h->n);
    fprintf(out, "    %10s %10s %10s %12s %12s %12s\n", "iteration", "sweeps", "seconds", "sup", "span", "policy_bound");
    for (int64_t i = h->n > 5 ? h->n - 5 : 0; i < h->n; i++)
        fprintf(out, "    %10lld %10lld %10.2f %12.4e %12.4e %12.4e\n", (long long)h->iteration[i], (long long)h->sweeps[i],
                h->seconds[i], h->sup[i], h->span[i], h->policy_loss[i]);
}

static sl_status solution_info(sl_ctx *ctx, const sl_info_opts *o, sl_file_kind kind)
{
    sl_status st = SL_OK;
    sl_solution_record in;
    sl_obj_file xf;
    hid_t f = H5I_INVALID_HID;
    int64_t n = 0;
    memset(&xf, 0, sizeof(xf));
    SL_TRY(sl_h5_open(ctx, o->path, 0, &f));
    st = sl_agree(ctx, sl_h5_attr_read_i64(ctx, f, "n_states", &n, 0, o->path));
    if (n == 0) n = sl_h5_length(f, "/value");
    H5Fclose(f);
    SL_TRY(st);
    SL_TRY(sl_store_solution_read(ctx, o->path, kind, n, 0, 0, NULL, NULL, &in));
    if (kind == SL_FILE_SOLUTION) SL_TRY(sl_store_objective_read(ctx, o->path, n, 0, 0, &xf));
    if (ctx->rank == 0) {
        FILE *out = o->out;
        const char *kn = kind == SL_FILE_VALUES ? "values" : "solution";
        if (o->json) {
            sl_json j;
            sl_json_begin(&j, out);
            sl_json_str(&j, "kind", kn);
            sl_json_str(&j, "path", o->path);
            sl_json_int(&j, "n_states", n);
            sl_json_str(&j, "model_fingerprint", in.model_fingerprint);
            sl_json_str(&j, "method", in.method);
            sl_json_bool(&j, "converged", in.converged);
            sl_json_int(&j, "iterations", in.iterations);
            sl_json_int(&j, "sweeps", in.sweeps);
            sl_json_num(&j, "seconds", in.seconds);
            sl_json_num(&j, "tolerance", in.tolerance);
            sl_json_num(&j, "discount", in.discount);
            sl_json_num(&j, "residual_sup", in.residual_sup);
            sl_json_num(&j, "residual_span", in.residual_span);
            sl_json_num(&j, "value_error_bound", in.value_error_bound);
            if (kind == SL_FILE_SOLUTION) sl_json_num(&j, "policy_loss_bound", in.policy_loss_bound);
            if (in.visit_adjust != 0.0) sl_json_num(&j, "visit_adjust", in.visit_adjust);
            if (kind == SL_FILE_SOLUTION) {
                sl_json_str(&j, "objective", sl_objective_name(xf.objective));
                if (xf.objective == SL_OBJ_FINITE) {
                    sl_json_int(&j, "horizon", xf.horizon);
                    sl_json_int(&j, "first_stage", xf.first_stage);
                    sl_json_str(&j, "terminal", xf.terminal);
                } else if (xf.objective == SL_OBJ_TOTAL) {
                    sl_json_int(&j, "n_absorbing", xf.n_absorbing);
                    sl_json_num(&j, "steps_bound_max", xf.steps_max);
                } else if (xf.objective == SL_OBJ_AVERAGE) {
                    sl_json_num(&j, "gain", xf.gain);
                    sl_json_num(&j, "gain_lower", xf.gain_lower);
                    sl_json_num(&j, "gain_upper", xf.gain_upper);
                    sl_json_num(&j, "aperiodicity", xf.aperiodicity);
                }
            }
            sl_json_end(&j);
        } else {
            fprintf(out, "%s: sluice %s file\n", o->path, kn);
            fprintf(out, "  states        %lld\n  model         fingerprint %s\n", (long long)n, in.model_fingerprint);
            fprintf(out, "  method        %s%s%s\n", in.method, in.order[0] ? ", order " : "", in.order);
            if (kind == SL_FILE_SOLUTION)
                fprintf(out, "  converged     %s after %lld iterations, %lld sweeps, %.2f s (tolerance %.1e)\n",
                        in.converged ? "yes" : "NO", (long long)in.iterations, (long long)in.sweeps, in.seconds,
                        in.tolerance);
            fprintf(out, "  residual      sup %.3e, span %.3e\n", in.residual_sup, in.residual_span);
            fprintf(out, "  certificate   |value - v%s| <= %.3e", kind == SL_FILE_VALUES ? "_policy" : "*",
                    in.value_error_bound);
            if (kind == SL_FILE_SOLUTION) fprintf(out, "; policy within %.3e of optimal", in.policy_loss_bound);
            fprintf(out, "\n");
            if (in.visit_adjust != 0.0)
                fprintf(out, "  rewards       r %s %g/sqrt(visits) (--visit-%s)\n", in.visit_adjust > 0 ? "+" : "-",
                        fabs(in.visit_adjust), in.visit_adjust > 0 ? "bonus" : "penalty");
            if (kind == SL_FILE_SOLUTION) {
                fprintf(out, "  objective     %s\n", sl_objective_name(xf.objective));
                if (xf.objective == SL_OBJ_FINITE)
                    fprintf(out, "  horizon       %lld stages (stored from stage %lld); terminal values: %s\n",
                            (long long)xf.horizon, (long long)xf.first_stage, xf.terminal);
                else if (xf.objective == SL_OBJ_TOTAL)
                    fprintf(out, "  absorbing     %lld states; expected steps to absorption <= %.4g\n",
                            (long long)xf.n_absorbing, xf.steps_max);
                else if (xf.objective == SL_OBJ_AVERAGE)
                    fprintf(out, "  gain          %.10g (%.10g <= optimal gain <= %.10g), aperiodicity %g\n", xf.gain,
                            xf.gain_lower, xf.gain_upper, xf.aperiodicity);
            }
        }
    }
cleanup:
    sl_obj_file_free(&xf);
    return st;
}

static sl_status checkpoint_info(sl_ctx *ctx, const sl_info_opts *o)
{
    sl_solver_state s;
    sl_history h;
    char fp[40] = "";
    int64_t n = 0;
    int complete = 0;
    memset(&h, 0, sizeof(h));
    sl_status st = sl_ckpt_info(ctx, o->path, fp, &n, &s, &h, &complete);
    if (st == SL_OK && ctx->rank == 0) {
        FILE *out = o->out;
        double sup = h.n ? h.sup[h.n - 1] : NAN, span = h.n ? h.span[h.n - 1] : NAN;
        double bound = h.n ? h.policy_loss[h.n - 1] : NAN, verr = h.n ? h.value_error[h.n - 1] : NAN;
        if (o->json) {
            sl_json j;
            sl_json_begin(&j, out);
            sl_json_str(&j, "kind", "checkpoint");
            sl_json_str(&j, "path", o->path);
            sl_json_bool(&j, "complete", complete);
            sl_json_str(&j, "model_fingerprint", fp);
            sl_json_int(&j, "n_states", n);
            sl_json_str(&j, "method", s.method);
            sl_json_int(&j, "iteration", s.iteration);
            sl_json_int(&j, "sweeps", s.sweeps);
            sl_json_num(&j, "seconds_used", s.elapsed);
            sl_json_num(&j, "residual_sup", sup);
            sl_json_num(&j, "residual_span", span);
            sl_json_num(&j, "value_error_bound", verr);
            sl_json_num(&j, "policy_loss_bound", bound);
            sl_json_end(&j);
        } else {
            fprintf(out, "%s: sluice checkpoint%s\n", o->path, complete ? "" : " (INCOMPLETE: will not be used)");
            fprintf(out, "  model         fingerprint %s, %lld states\n", fp, (long long)n);
            fprintf(out, "  progress      method %s, iteration %lld, %lld sweeps, %.1f s used\n", s.method,
                    (long long)s.iteration, (long long)s.sweeps, s.elapsed);
            fprintf(out, "  bounds        sup %.3e, span %.3e, value within %.3e, policy within %.3e (last check)\n", sup,
                    span, verr, bound);
            print_history_tail(out, &h);
        }
    }
    sl_history_free(&h);
    return st;
}

sl_status sl_info(sl_ctx *ctx, const sl_info_opts *o)
{
    sl_file_kind kind;
    sl_status st = sl_store_kind(ctx, o->path, &kind);
    if (st != SL_OK) return st;
    switch (kind) {
    case SL_FILE_MODEL: return model_info(ctx, o);
    case SL_FILE_SOLUTION:
    case SL_FILE_VALUES:
        if (o->partition > 0) return SL_ERR(ctx, SL_EUSAGE, "--partition applies to model files only");
        return solution_info(ctx, o, kind);
    case SL_FILE_CHECKPOINT: return checkpoint_info(ctx, o);
    default: return SL_ERR(ctx, SL_EDATA, "%s: unknown file kind", o->path);
    }
}
