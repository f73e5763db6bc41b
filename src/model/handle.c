/* handle.c - the public model handle: creation from rows, assembly, loading,
 * saving and getters. The rows themselves live in an sl_block (model.c). */
#include <math.h>
#include <string.h>

#include "model/model.h"
#include "parallel/layout.h"
#include "store/store.h"

static sl_status gather_bounds(sl_ctx *ctx, sl_model *m)
{
    sl_status st = SL_OK;
    int64_t *se = NULL;
    if (SL_ALLOC(ctx, m->bounds, ctx->size + 1, "partition") == NULL ||
        SL_ALLOC(ctx, se, 2 * (size_t)ctx->size, "partition") == NULL)
        st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    int64_t mine[2] = {m->blk.s_begin, m->blk.s_end};
    if (!m->have_rows) mine[0] = mine[1] = -1;
    MPI_Allgather(mine, 2, MPI_INT64_T, se, 2, MPI_INT64_T, ctx->comm);
    /* ranges must tile [0, n) in rank order; ranks without rows own an empty
     * range at the current position */
    int64_t pos = 0;
    for (int r = 0; r < ctx->size && st == SL_OK; r++) {
        m->bounds[r] = pos;
        if (se[2 * r] < 0) continue;
        if (se[2 * r] != pos)
            st = SL_ERR(ctx, SL_EDATA,
                        "model rows: rank %d holds states [%lld, %lld) but the ranks before it end at state %lld; "
                        "ranges must tile [0, %lld) in rank order",
                        r, (long long)se[2 * r], (long long)se[2 * r + 1], (long long)pos,
                        (long long)m->meta.n_states);
        pos = se[2 * r + 1];
    }
    m->bounds[ctx->size] = pos;
    if (st == SL_OK && pos != m->meta.n_states)
        st = SL_ERR(ctx, SL_EDATA, "model rows cover states [0, %lld) of %lld", (long long)pos,
                    (long long)m->meta.n_states);
    if (st == SL_OK && !m->have_rows) {
        /* an empty block placed where this rank's range is */
        int64_t at = m->bounds[ctx->rank];
        sl_block_free(&m->blk);
        st = sl_block_init(ctx, &m->blk, at, m->meta.n_states, "model");
    }
cleanup:
    free(se);
    return st;
}

sl_status sl_model_create(sl_ctx *ctx, int64_t n_states, double discount, sl_model **out)
{
    sl_status st = SL_OK;
    sl_model *m = NULL;
    if (out == NULL) return SL_ERR(ctx, SL_EUSAGE, "sl_model_create: no output handle");
    *out = NULL;
    if (n_states < 1)
        st = SL_ERR(ctx, SL_EUSAGE, "sl_model_create: %lld states: a model needs at least one", (long long)n_states);
    else if (!(discount >= 0.0 && discount < 1.0))
        st = SL_ERR(ctx, SL_EUSAGE, "sl_model_create: discount %g is not in [0, 1)", discount);
    else if (SL_ZALLOC(ctx, m, 1, "model") == NULL)
        st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    m->ctx = ctx;
    m->meta.format_version = SLUICE_FORMAT_VERSION;
    m->meta.n_states = n_states;
    m->meta.discount = discount;
    m->meta.objective = SL_OBJ_DISCOUNTED;
    snprintf(m->meta.source, sizeof(m->meta.source), "%s", "library");
    snprintf(m->name, sizeof(m->name), "%s", "model built in memory");
    *out = m;
    m = NULL;
cleanup:
    free(m);
    return st;
}

sl_status sl_model_set_objective(sl_model *m, sl_objective objective)
{
    if (m == NULL) return SL_EUSAGE;
    if (m->assembled) return SL_ERR(m->ctx, SL_EUSAGE, "sl_model_set_objective: the model is already assembled");
    if (objective != SL_OBJ_DISCOUNTED && objective != SL_OBJ_TOTAL && objective != SL_OBJ_AVERAGE &&
        objective != SL_OBJ_FINITE)
        return SL_ERR(m->ctx, SL_EUSAGE, "sl_model_set_objective: unknown objective %d", (int)objective);
    m->meta.objective = objective;
    return SL_OK;
}

sl_status sl_model_set_rows(sl_model *m, int64_t s_begin, int64_t s_end, const int64_t *first_pair,
                            const int32_t *action, const double *reward, const int64_t *first_transition,
                            const int64_t *target, const double *probability)
{
    if (m == NULL) return SL_EUSAGE;
    sl_ctx *ctx = m->ctx;
    sl_status st = SL_OK;
    sl_block b;
    memset(&b, 0, sizeof(b));
    if (m->assembled) return SL_ERR(ctx, SL_EUSAGE, "sl_model_set_rows: the model is already assembled");
    if (m->have_rows) return SL_ERR(ctx, SL_EUSAGE, "sl_model_set_rows: rows were already set on this rank");
    if (!(0 <= s_begin && s_begin < s_end && s_end <= m->meta.n_states))
        return SL_ERR(ctx, SL_EUSAGE, "sl_model_set_rows: state range [%lld, %lld) is empty or outside [0, %lld)",
                      (long long)s_begin, (long long)s_end, (long long)m->meta.n_states);
    if (!first_pair || !action || !reward || !first_transition || !target || !probability)
        return SL_ERR(ctx, SL_EUSAGE, "sl_model_set_rows: an array argument is NULL");
    int64_t ns = s_end - s_begin;
    if (first_pair[0] != 0)
        return SL_ERR(ctx, SL_EDATA, "sl_model_set_rows: first_pair[0] is %lld, not 0", (long long)first_pair[0]);
    for (int64_t i = 0; i < ns; i++)
        if (first_pair[i + 1] < first_pair[i])
            return SL_ERR(ctx, SL_EDATA, "sl_model_set_rows: state %lld: first_pair decreases",
                          (long long)(s_begin + i));
    int64_t np = first_pair[ns];
    if (first_transition[0] != 0)
        return SL_ERR(ctx, SL_EDATA, "sl_model_set_rows: first_transition[0] is %lld, not 0",
                      (long long)first_transition[0]);
    for (int64_t k = 0; k < np; k++)
        if (first_transition[k + 1] < first_transition[k])
            return SL_ERR(ctx, SL_EDATA, "sl_model_set_rows: pair %lld (state range %lld..): first_transition decreases",
                          (long long)k, (long long)s_begin);
    int64_t nt = first_transition[np];
    b.s_begin = s_begin;
    b.s_end = s_end;
    b.p_begin = 0;
    b.p_end = np;
    b.t_begin = 0;
    b.t_end = nt;
    if (SL_ALLOC(ctx, b.first_pair, ns + 1, "model rows") == NULL || SL_ALLOC(ctx, b.action, np, "model rows") == NULL ||
        SL_ALLOC(ctx, b.reward, np, "model rows") == NULL || SL_ALLOC(ctx, b.first_trans, np + 1, "model rows") == NULL ||
        SL_ALLOC(ctx, b.target, nt, "model rows") == NULL || SL_ALLOC(ctx, b.prob, nt, "model rows") == NULL)
    {
        st = SL_ENOMEM;
        goto cleanup;
    }
    memcpy(b.first_pair, first_pair, (size_t)(ns + 1) * sizeof(int64_t));
    memcpy(b.action, action, (size_t)np * sizeof(int32_t));
    memcpy(b.reward, reward, (size_t)np * sizeof(double));
    memcpy(b.first_trans, first_transition, (size_t)(np + 1) * sizeof(int64_t));
    memcpy(b.target, target, (size_t)nt * sizeof(int64_t));
    memcpy(b.prob, probability, (size_t)nt * sizeof(double));
    b.where = "model rows";
    sl_block_free(&m->blk);
    m->blk = b;
    memset(&b, 0, sizeof(b));
    m->have_rows = 1;
cleanup:
    sl_block_free(&b);
    return st;
}

sl_status sl_model_set_factors(sl_model *m, int n_factors, const char *const *names, const int64_t *sizes,
                               int stage_factor)
{
    if (m == NULL) return SL_EUSAGE;
    sl_ctx *ctx = m->ctx;
    if (m->assembled) return SL_ERR(ctx, SL_EUSAGE, "sl_model_set_factors: the model is already assembled");
    if (n_factors < 0 || n_factors > SLUICE_MAX_FACTORS)
        return SL_ERR(ctx, SL_EUSAGE, "sl_model_set_factors: %d factors (at most %d)", n_factors, SLUICE_MAX_FACTORS);
    if (stage_factor >= n_factors || stage_factor < -1)
        return SL_ERR(ctx, SL_EUSAGE, "sl_model_set_factors: stage factor %d is not one of the %d factors",
                      stage_factor, n_factors);
    int64_t prod = 1;
    for (int f = 0; f < n_factors; f++) {
        if (sizes[f] < 1 || prod > INT64_MAX / sizes[f])
            return SL_ERR(ctx, SL_EUSAGE, "sl_model_set_factors: factor %d has size %lld", f, (long long)sizes[f]);
        prod *= sizes[f];
        if (names == NULL || names[f] == NULL || names[f][0] == '\0' || strlen(names[f]) >= SL_NAME_MAX)
            return SL_ERR(ctx, SL_EUSAGE, "sl_model_set_factors: factor %d needs a name of 1 to %d characters", f,
                          SL_NAME_MAX - 1);
    }
    if (n_factors > 0 && prod != m->meta.n_states)
        return SL_ERR(ctx, SL_EUSAGE, "sl_model_set_factors: factor sizes multiply to %lld, the model has %lld states",
                      (long long)prod, (long long)m->meta.n_states);
    m->meta.n_factors = n_factors;
    for (int f = 0; f < n_factors; f++) {
        snprintf(m->meta.factor_name[f], SL_NAME_MAX, "%s", names[f]);
        m->meta.factor_size[f] = sizes[f];
        m->meta.factor_stage[f] = f == stage_factor;
    }
    return SL_OK;
}

sl_status sl_model_set_action_names(sl_model *m, int32_t n_actions, const char *const *names)
{
    if (m == NULL) return SL_EUSAGE;
    sl_ctx *ctx = m->ctx;
    if (m->assembled) return SL_ERR(ctx, SL_EUSAGE, "sl_model_set_action_names: the model is already assembled");
    if (n_actions < 0 || (n_actions > 0 && names == NULL))
        return SL_ERR(ctx, SL_EUSAGE, "sl_model_set_action_names: %d names", (int)n_actions);
    char(*an)[SL_NAME_MAX] = NULL;
    if (SL_ZALLOC(ctx, an, n_actions, "action names") == NULL) return SL_ENOMEM;
    for (int32_t a = 0; a < n_actions; a++)
        snprintf(an[a], SL_NAME_MAX, "%s", names[a] ? names[a] : "");
    free(m->meta.action_name);
    m->meta.action_name = an;
    m->meta.n_action_names = n_actions;
    return SL_OK;
}

/* The file contract (docs/formats.md): action ids non-negative, ascending
 * and unique within a state; targets ascending and unique within a pair. */
static sl_status check_order(sl_ctx *ctx, const sl_block *b)
{
    for (int64_t i = 0; i < sl_block_states(b); i++) {
        int64_t s = b->s_begin + i;
        int64_t p0 = b->first_pair[i] - b->p_begin, p1 = b->first_pair[i + 1] - b->p_begin;
        for (int64_t k = p0; k < p1; k++) {
            int32_t a = b->action[k];
            if (a < 0)
                return SL_ERR(ctx, SL_EDATA, "model rows: state %lld: negative action id %d", (long long)s, (int)a);
            if (k > p0 && a <= b->action[k - 1])
                return SL_ERR(ctx, SL_EDATA,
                              "model rows: state %lld: action %d follows action %d (ids must be ascending and unique "
                              "within a state)",
                              (long long)s, (int)a, (int)b->action[k - 1]);
            int64_t t0 = b->first_trans[k] - b->t_begin, t1 = b->first_trans[k + 1] - b->t_begin;
            for (int64_t t = t0 + 1; t < t1; t++)
                if (b->target[t] <= b->target[t - 1])
                    return SL_ERR(ctx, SL_EDATA,
                                  "model rows: state %lld, action %d: next state %lld follows %lld (targets must be "
                                  "ascending and unique within a pair)",
                                  (long long)s, (int)a, (long long)b->target[t], (long long)b->target[t - 1]);
        }
    }
    return SL_OK;
}

sl_status sl_model_assemble(sl_model *m)
{
    if (m == NULL) return SL_EUSAGE;
    sl_ctx *ctx = m->ctx;
    sl_status st = SL_OK;
    if (m->assembled) st = SL_ERR(ctx, SL_EUSAGE, "sl_model_assemble: the model is already assembled");
    SL_TRY(sl_agree(ctx, st));
    SL_TRY(gather_bounds(ctx, m));
    /* local offsets from 0 become global */
    sl_block_rebase(&m->blk, sl_exscan_i64(ctx, sl_block_pairs(&m->blk)),
                    sl_exscan_i64(ctx, sl_block_trans(&m->blk)));
    m->meta.n_pairs = sl_sum_i64(ctx, sl_block_pairs(&m->blk));
    m->meta.n_trans = sl_sum_i64(ctx, sl_block_trans(&m->blk));
    st = check_order(ctx, &m->blk);
    if (st == SL_OK) st = sl_block_validate(ctx, &m->blk, &m->meta, 1e-9, "model rows");
    SL_TRY(sl_agree(ctx, st));
    SL_TRY(sl_fingerprint(ctx, &m->meta, &m->blk, m->meta.fingerprint));
    m->assembled = 1;
cleanup:
    /* a model that failed to assemble can only be freed */
    return st;
}

sl_status sl_model_adopt(sl_ctx *ctx, sl_meta *meta, sl_block *blk, sl_model **out)
{
    sl_status st = SL_OK;
    sl_model *m = NULL;
    *out = NULL;
    if (SL_ZALLOC(ctx, m, 1, "model") == NULL) st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    m->ctx = ctx;
    m->meta = *meta;
    m->blk = *blk;
    memset(meta, 0, sizeof(*meta));
    memset(blk, 0, sizeof(*blk));
    m->have_rows = 1;
    snprintf(m->name, sizeof(m->name), "%s", m->meta.source[0] ? m->meta.source : "model");
    SL_TRY(gather_bounds(ctx, m));
    m->assembled = 1;
    *out = m;
    m = NULL;
cleanup:
    sl_meta_free(meta);
    sl_block_free(blk);
    sl_model_free(&m);
    return st;
}

static sl_status check_ready(sl_ctx *ctx, const sl_model *m, const char *what, int solve)
{
    if (m == NULL) return SL_ERR(ctx, SL_EUSAGE, "%s: no model", what);
    if (!m->assembled) return SL_ERR(ctx, SL_EUSAGE, "%s: the model is not assembled (call sl_model_assemble)", what);
    if (m->rows_released)
        return SL_ERR(ctx, SL_EUSAGE,
                      "%s: the model's rows were handed to an earlier solve (sl_solver_solve_lean); load it again",
                      what);
    if (m->staged != NULL && !solve)
        return SL_ERR(ctx, SL_EUSAGE,
                      "%s: the model's rows were loaded in the discounted solve's layout (sl_model_load_staged); "
                      "load it with sl_model_load for this",
                      what);
    return SL_OK;
}

sl_status sl_model_check_ready(sl_ctx *ctx, const sl_model *m, const char *what)
{
    return check_ready(ctx, m, what, 0);
}

sl_status sl_model_check_solvable(sl_ctx *ctx, const sl_model *m, const char *what)
{
    return check_ready(ctx, m, what, 1);
}

/* At most this many runs of file states per rank for sl_model_load_staged
 * to read them one by one (the reservoir example: 12, one per month). */
#define SL_STAGED_MAX_RUNS 256

/* This rank's rows in the stage-interleaved layout of map, read straight
 * from the file: its states are a few runs of file states (one per stage
 * and outer value), each read into its place in the block as
 * sl_store_model_read reads a range (every check, the quantities hashed),
 * added to the fingerprint sum acc, then renumbered in place (pairs,
 * transitions, targets as internal ids): the block sl_stage_redistribute
 * would make from the file's layout, without a second copy of the rows,
 * a temporary one, or any exchange. Collective. */
static sl_status read_staged(sl_ctx *ctx, const char *path, const sl_meta *meta, const sl_stage_map *map,
                             sl_block *out, uint64_t acc[2])
{
    sl_status st = SL_OK;
    int64_t *runs = NULL, n_runs = 0, *rp = NULL, *rt = NULL;
    int64_t S = map->n_stages, a = map->ub[ctx->rank], ns = S * (map->ub[ctx->rank + 1] - a);
    sl_block tb;
    memset(&tb, 0, sizeof(tb));
    memset(out, 0, sizeof(*out));
    st = sl_stage_runs_internal(ctx, map, ctx->rank, &runs, &n_runs);
    if (st == SL_OK &&
        (SL_ALLOC(ctx, rp, n_runs + 1, "stage runs") == NULL || SL_ALLOC(ctx, rt, n_runs + 1, "stage runs") == NULL))
        st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    SL_TRY(sl_store_model_run_sizes(ctx, path, meta, runs, n_runs, rp, rt));
    int64_t np = 0, nt = 0;
    for (int64_t k = 0; k < n_runs; k++) {
        np += rp[k];
        nt += rt[k];
    }
    if (SL_ALLOC(ctx, out->first_pair, ns + 1, "first_pair") == NULL ||
        SL_ALLOC(ctx, out->action, np, "actions") == NULL || SL_ALLOC(ctx, out->reward, np, "rewards") == NULL ||
        SL_ALLOC(ctx, out->first_trans, np + 1, "first_transition") == NULL ||
        SL_ALLOC(ctx, out->target, nt, "targets") == NULL || SL_ALLOC(ctx, out->prob, nt, "probabilities") == NULL)
        st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    sl_stage_block_frame(ctx, map, np, nt, out);
    int64_t p_begin = out->p_begin, t_begin = out->t_begin;
    /* every rank reads as many runs as the rank with the most (the reads
     * are collective); the others read empty ranges into a spare entry */
    int64_t n_max = n_runs;
    MPI_Allreduce(&n_runs, &n_max, 1, MPI_INT64_T, MPI_MAX, ctx->comm);
    int64_t j = 0, pp = 0, tt = 0, spare_i[2] = {0, 0};
    int32_t spare_a[1] = {0};
    double spare_d[2] = {0, 0};
    for (int64_t k = 0; k < n_max; k++) {
        /* the run goes straight to its place: first_pair from entry j,
         * pairs from pp, transitions from tt. Its first first_pair and
         * first_transition entries land on the last ones of the run before,
         * which are kept and put back once the run is renumbered. */
        sl_block at;
        memset(&at, 0, sizeof(at));
        int64_t s0 = 0, s1 = 0;
        if (k < n_runs) {
            s0 = runs[2 * k];
            s1 = runs[2 * k + 1];
            at.first_pair = out->first_pair + j;
            at.action = out->action + pp;
            at.reward = out->reward + pp;
            at.first_trans = out->first_trans + pp;
            at.target = out->target + tt;
            at.prob = out->prob + tt;
            at.p_end = rp[k];
            at.t_end = rt[k];
        } else {
            at.first_pair = &spare_i[0];
            at.first_trans = &spare_i[1];
            at.action = spare_a;
            at.reward = &spare_d[0];
            at.target = &spare_i[0];
            at.prob = &spare_d[1];
        }
        int64_t keep_p = at.first_pair[0], keep_t = at.first_trans[0];
        SL_TRY(sl_store_model_read_into(ctx, path, meta, s0, s1, &at, &tb));
        sl_fingerprint_add(acc, meta, &tb);
        int64_t n = sl_block_states(&tb), bp = sl_block_pairs(&tb), bt = sl_block_trans(&tb);
        if (k < n_runs) {
            for (int64_t i = 1; i <= n; i++) at.first_pair[i] = p_begin + pp + (at.first_pair[i] - tb.p_begin);
            for (int64_t q = 1; q <= bp; q++) at.first_trans[q] = t_begin + tt + (at.first_trans[q] - tb.t_begin);
            for (int64_t t = 0; t < bt; t++) at.target[t] = sl_stage_internal(map, at.target[t]);
            at.first_pair[0] = keep_p;
            at.first_trans[0] = keep_t;
            j += n;
            pp += bp;
            tt += bt;
        }
        memset(&tb, 0, sizeof(tb)); /* its arrays are out's */
    }
    if (j != ns) st = SL_ERR(ctx, SL_EINTERNAL, "stage layout: rank %d read %lld states, not %lld", ctx->rank,
                             (long long)j, (long long)ns);
    st = sl_agree(ctx, st);
cleanup:
    free(runs);
    free(rp);
    free(rt);
    if (st != SL_OK) sl_block_free(out);
    return st;
}

/* staged: the rows may be read in the stage-interleaved layout (see
 * sl_model_load_staged). */
static sl_status load(sl_ctx *ctx, const char *path, int staged, sl_model **out)
{
    sl_status st = SL_OK;
    sl_meta meta;
    sl_block blk;
    sl_stage_map map;
    int64_t *bounds = NULL, *cum = NULL;
    uint64_t acc[2] = {0, 0};
    char fp[40];
    memset(&meta, 0, sizeof(meta));
    memset(&blk, 0, sizeof(blk));
    memset(&map, 0, sizeof(map));
    if (out == NULL) return SL_ERR(ctx, SL_EUSAGE, "sl_model_load: no output handle");
    *out = NULL;
    SL_TRY(sl_store_model_meta(ctx, path, &meta));
    if (SL_ALLOC(ctx, bounds, ctx->size + 1, "partition") == NULL) st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    /* each rank reads an even share of the cumulative counts; the parallel
     * layer turns them into ranges balanced by transitions */
    int64_t lo = meta.n_states * ctx->rank / ctx->size, hi = meta.n_states * (ctx->rank + 1) / ctx->size;
    SL_TRY(sl_store_model_cumulative(ctx, path, lo, hi, &cum));
    SL_TRY(sl_partition_from_counts(ctx, meta.n_states, meta.n_trans, cum, bounds));
    /* the discounted solve's layout, from the same counts; models with
     * per-pair visits or terminal values keep the file's layout */
    if (staged && ctx->size > 1 && meta.objective == SL_OBJ_DISCOUNTED && !meta.has_visits && !meta.has_terminal)
        SL_TRY(sl_stage_map_counts(ctx, &meta, lo, hi - lo, cum, &map));
    if (map.active) {
        /* a run costs a collective open and a partial chunk at each end:
         * with more runs on some rank (many values of the factors above
         * the stage), the plain read and the move between ranks instead */
        int64_t most = sl_stage_runs_bound(&map, ctx->rank);
        MPI_Allreduce(MPI_IN_PLACE, &most, 1, MPI_INT64_T, MPI_MAX, ctx->comm);
        if (most > SL_STAGED_MAX_RUNS) sl_stage_map_free(&map);
    }
    if (map.active) {
        SL_TRY(read_staged(ctx, path, &meta, &map, &blk, acc));
    } else {
        SL_TRY(sl_store_model_read(ctx, path, &meta, bounds[ctx->rank], bounds[ctx->rank + 1], &blk));
        sl_fingerprint_add(acc, &meta, &blk);
    }
    SL_TRY(sl_fingerprint_finish(ctx, &meta, acc, fp));
    if (strcmp(fp, meta.fingerprint) != 0)
        SL_TRY(SL_ERR(ctx, SL_EDATA,
                      "%s: contents do not match the file's fingerprint (%s recorded, %s computed): the file "
                      "was altered or is corrupted",
                      path, meta.fingerprint, fp));
    st = sl_model_adopt(ctx, &meta, &blk, out);
    if (st == SL_OK) snprintf((*out)->name, sizeof((*out)->name), "%s", path);
    if (st == SL_OK && map.active) {
        /* the rows are in the internal layout: the model keeps the map and
         * the file's partition (for writing vectors) */
        sl_model *m = *out;
        if (SL_ZALLOC(ctx, m->staged, 1, "stage layout") == NULL) st = SL_ENOMEM;
        st = sl_agree(ctx, st);
        if (st != SL_OK) {
            sl_model_free(out);
        } else {
            *m->staged = map;
            memset(&map, 0, sizeof(map));
            free(m->bounds);
            m->bounds = bounds;
            bounds = NULL;
        }
    }
cleanup:
    free(bounds);
    free(cum);
    sl_stage_map_free(&map);
    sl_meta_free(&meta);
    sl_block_free(&blk);
    return st;
}

sl_status sl_model_load(sl_ctx *ctx, const char *path, sl_model **out) { return load(ctx, path, 0, out); }

sl_status sl_model_load_staged(sl_ctx *ctx, const char *path, sl_model **out) { return load(ctx, path, 1, out); }

/* A loaded model keeps only a hash of its outcome quantities (they can be
 * larger than the transitions): saving it copies them from the file it was
 * loaded from, after checking that they still hash to what was loaded. */
static sl_status save_copying_quantities(const sl_model *m, const char *path)
{
    sl_ctx *ctx = m->ctx;
    sl_status st = SL_OK;
    sl_block b = m->blk; /* shallow: the rows are only read */
    int nq = m->meta.n_quantities;
    int64_t np = sl_block_pairs(&m->blk);
    double *qm = NULL, *qp = NULL, *mean = NULL, *pos = NULL;
    uint64_t acc[2] = {0, 0};
    if (SL_ALLOC(ctx, qm, np * nq, "quantities") == NULL || SL_ALLOC(ctx, qp, np * nq, "quantities") == NULL ||
        SL_ALLOC(ctx, mean, np, "quantities") == NULL || SL_ALLOC(ctx, pos, np, "quantities") == NULL)
        st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    for (int q = 0; q < nq; q++) {
        SL_TRY(sl_store_quantity_read(ctx, m->name, &m->meta, q, m->blk.p_begin, np, mean, pos));
        sl_fingerprint_quantity(acc, q, m->blk.p_begin, np, mean, pos, 1);
        for (int64_t k = 0; k < np; k++) {
            qm[k * nq + q] = mean[k];
            qp[k * nq + q] = pos[k];
        }
    }
    if (acc[0] != m->blk.qacc[0] || acc[1] != m->blk.qacc[1])
        st = SL_ERR(ctx, SL_EDATA,
                    "%s: its outcome quantities changed since the model was loaded from it; %s not written", m->name,
                    path);
    SL_TRY(sl_agree(ctx, st));
    b.nq = nq;
    b.qmean = qm;
    b.qpos = qp;
    st = sl_store_model_write(ctx, path, &m->meta, &b);
cleanup:
    free(qm);
    free(qp);
    free(mean);
    free(pos);
    return st;
}

sl_status sl_model_save(const sl_model *m, const char *path)
{
    if (m == NULL) return SL_EUSAGE;
    sl_status st = sl_agree(m->ctx, sl_model_check_ready(m->ctx, m, "sl_model_save"));
    if (st != SL_OK) return st;
    if (m->meta.n_quantities > 0 && m->blk.nq == 0) return save_copying_quantities(m, path);
    return sl_store_model_write(m->ctx, path, &m->meta, &m->blk);
}

void sl_model_free(sl_model **pm)
{
    if (pm == NULL || *pm == NULL) return;
    sl_model *m = *pm;
    sl_meta_free(&m->meta);
    sl_block_free(&m->blk);
    free(m->bounds);
    sl_stage_map_free(m->staged);
    free(m->staged);
    free(m);
    *pm = NULL;
}

/* ---- getters (local) -------------------------------------------------------- */

int64_t sl_model_n_states(const sl_model *m) { return m ? m->meta.n_states : 0; }
int64_t sl_model_n_pairs(const sl_model *m) { return m ? m->meta.n_pairs : 0; }
int64_t sl_model_n_transitions(const sl_model *m) { return m ? m->meta.n_trans : 0; }
double sl_model_discount(const sl_model *m) { return m ? m->meta.discount : NAN; }
sl_objective sl_model_objective(const sl_model *m) { return m ? m->meta.objective : SL_OBJ_DISCOUNTED; }
const char *sl_model_fingerprint(const sl_model *m) { return m && m->assembled ? m->meta.fingerprint : ""; }
void sl_model_local_range(const sl_model *m, int64_t *s_begin, int64_t *s_end)
{
    *s_begin = m ? m->blk.s_begin : 0;
    *s_end = m ? m->blk.s_end : 0;
}
int sl_model_n_factors(const sl_model *m) { return m ? m->meta.n_factors : 0; }
const char *sl_model_factor_name(const sl_model *m, int f)
{
    return m && f >= 0 && f < m->meta.n_factors ? m->meta.factor_name[f] : "";
}
int64_t sl_model_factor_size(const sl_model *m, int f)
{
    return m && f >= 0 && f < m->meta.n_factors ? m->meta.factor_size[f] : 0;
}
int sl_model_stage_factor(const sl_model *m) { return m ? sl_meta_stage_factor(&m->meta) : -1; }
void sl_model_decode_state(const sl_model *m, int64_t state, int64_t *factor_index)
{
    if (m) sl_meta_decode(&m->meta, state, factor_index);
}
int32_t sl_model_n_action_names(const sl_model *m) { return m ? m->meta.n_action_names : 0; }
const char *sl_model_action_name(const sl_model *m, int32_t a)
{
    return m && a >= 0 && a < m->meta.n_action_names ? m->meta.action_name[a] : "";
}
const char *sl_model_generator(const sl_model *m) { return m ? m->meta.generator : ""; }
int sl_model_n_params(const sl_model *m) { return m ? m->meta.n_params : 0; }
const char *sl_model_param_name(const sl_model *m, int i)
{
    return m && i >= 0 && i < m->meta.n_params ? m->meta.param_name[i] : "";
}
const char *sl_model_param_unit(const sl_model *m, int i)
{
    return m && i >= 0 && i < m->meta.n_params ? m->meta.param_unit[i] : "";
}
double sl_model_param_value(const sl_model *m, int i)
{
    return m && i >= 0 && i < m->meta.n_params ? m->meta.param_value[i] : NAN;
}

/* ---- format 2 annotations (docs/formats.md); "" / 0 when the model has none ---- */
const char *sl_model_reward_unit(const sl_model *m) { return m ? m->meta.reward_unit : ""; }
const char *sl_model_period_unit(const sl_model *m) { return m ? m->meta.period_unit : ""; }
const char *sl_model_factor_unit(const sl_model *m, int f)
{
    return m && f >= 0 && f < m->meta.n_factors ? m->meta.factor_unit[f] : "";
}
int sl_model_factor_value(const sl_model *m, int f, int64_t i, double *value)
{
    if (m == NULL || f < 0 || f >= m->meta.n_factors || m->meta.factor_value[f] == NULL || i < 0 ||
        i >= m->meta.factor_size[f])
        return 0;
    if (value) *value = m->meta.factor_value[f][i];
    return 1;
}
const char *sl_model_factor_label(const sl_model *m, int f, int64_t i)
{
    if (m == NULL || f < 0 || f >= m->meta.n_factors || m->meta.factor_label[f] == NULL || i < 0 ||
        i >= m->meta.factor_size[f])
        return "";
    return m->meta.factor_label[f][i];
}
int sl_model_action_value(const sl_model *m, int32_t a, double *value)
{
    if (m == NULL || a < 0 || a >= m->meta.n_action_values) return 0;
    if (value) *value = m->meta.action_value[a];
    return 1;
}
const char *sl_model_action_unit(const sl_model *m) { return m ? m->meta.action_unit : ""; }
int sl_model_n_quantities(const sl_model *m) { return m ? m->meta.n_quantities : 0; }
const char *sl_model_quantity_name(const sl_model *m, int q)
{
    return m && q >= 0 && q < m->meta.n_quantities ? m->meta.quantity_name[q] : "";
}
const char *sl_model_quantity_unit(const sl_model *m, int q)
{
    return m && q >= 0 && q < m->meta.n_quantities ? m->meta.quantity_unit[q] : "";
}
