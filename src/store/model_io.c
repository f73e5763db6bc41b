/* model_io.c - the model file (DESIGN.md contract), written and read in parallel. */
#include <inttypes.h>
#include <math.h>
#include <string.h>

#include "store/h5.h"
#include "store/store.h"

static const char *kind_name(sl_file_kind k)
{
    switch (k) {
    case SL_FILE_MODEL: return "model";
    case SL_FILE_SOLUTION: return "solution";
    case SL_FILE_VALUES: return "values";
    case SL_FILE_CHECKPOINT: return "checkpoint";
    default: return "unknown";
    }
}

static sl_status read_kind(sl_ctx *ctx, hid_t f, const char *path, sl_file_kind *kind)
{
    char fmt[64] = "";
    *kind = SL_FILE_UNKNOWN;
    if (H5Aexists(f, "sluice_format") <= 0)
        return SL_ERR(ctx, SL_EDATA, "%s: not a sluice file (no /sluice_format attribute)", path);
    sl_status st = sl_h5_attr_read_str(ctx, f, "sluice_format", fmt, sizeof(fmt), 1, path);
    if (st != SL_OK) return st;
    for (int k = SL_FILE_MODEL; k <= SL_FILE_CHECKPOINT; k++)
        if (strcmp(fmt, kind_name((sl_file_kind)k)) == 0) *kind = (sl_file_kind)k;
    if (*kind == SL_FILE_UNKNOWN)
        return SL_ERR(ctx, SL_EDATA, "%s: unknown sluice file kind \"%s\"", path, fmt);
    return SL_OK;
}

sl_status sl_store_kind(sl_ctx *ctx, const char *path, sl_file_kind *kind)
{
    hid_t f;
    sl_status st = sl_h5_open(ctx, path, 0, &f);
    if (st != SL_OK) return st;
    st = sl_agree(ctx, read_kind(ctx, f, path, kind));
    H5Fclose(f);
    return st;
}

/* ---- write ------------------------------------------------------------------ */

static sl_status write_labels(sl_ctx *ctx, hid_t f, const sl_meta *m, const char *path)
{
    sl_status st = SL_OK;
    hid_t str = sl_h5_str_type(SL_NAME_MAX);
    int root = ctx->rank == 0;
    if (str < 0) return SL_ERR(ctx, SL_EINTERNAL, "%s: string type", path);
    if (m->n_factors > 0) {
        int32_t stage[SLUICE_MAX_FACTORS];
        for (int i = 0; i < m->n_factors; i++) stage[i] = m->factor_stage[i];
        int64_t nf = m->n_factors, c = root ? nf : 0;
        SL_TRY(sl_h5_write_1d(ctx, f, "/labels/factor_name", str, str, nf, 0, c, m->factor_name, 0, path));
        SL_TRY(sl_h5_write_1d(ctx, f, "/labels/factor_size", H5T_STD_I64LE, H5T_NATIVE_INT64, nf, 0, c,
                              m->factor_size, 0, path));
        SL_TRY(sl_h5_write_1d(ctx, f, "/labels/factor_stage", H5T_STD_I32LE, H5T_NATIVE_INT32, nf, 0, c,
                              stage, 0, path));
    }
    if (m->n_action_names > 0)
        SL_TRY(sl_h5_write_1d(ctx, f, "/labels/action_name", str, str, m->n_action_names, 0,
                              root ? m->n_action_names : 0, m->action_name, 1, path));
    if (m->generator[0] != '\0') {
        hid_t g;
        SL_TRY(sl_h5_group(ctx, f, "/generator", &g, path));
        st = sl_h5_attr_write_str(ctx, g, "name", m->generator, path);
        H5Gclose(g);
        if (st != SL_OK) goto cleanup;
        if (m->n_params > 0) {
            int64_t np = m->n_params, c = root ? np : 0;
            SL_TRY(sl_h5_write_1d(ctx, f, "/generator/param_name", str, str, np, 0, c, m->param_name, 0, path));
            SL_TRY(sl_h5_write_1d(ctx, f, "/generator/param_unit", str, str, np, 0, c, m->param_unit, 0, path));
            SL_TRY(sl_h5_write_1d(ctx, f, "/generator/param_value", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, np, 0,
                                  c, m->param_value, 0, path));
        }
    }
cleanup:
    H5Tclose(str);
    return st;
}

/* Write a string attribute `unit` on the existing dataset `name`. Collective. */
static sl_status write_unit(sl_ctx *ctx, hid_t f, const char *name, const char *unit, const char *path)
{
    hid_t d = H5Dopen2(f, name, H5P_DEFAULT);
    if (d < 0) return SL_ERR(ctx, SL_EIO, "%s: cannot open %s to set its unit", path, name);
    sl_status st = sl_h5_attr_write_str(ctx, d, "unit", unit, path);
    H5Dclose(d);
    return st;
}

/* Format 2 annotations that do not depend on the rows: units, factor and
 * action values and labels, quantity names (their per-pair datasets are
 * streams of the writer). */
static sl_status write_annotations(sl_ctx *ctx, hid_t f, const sl_meta *m, const char *path)
{
    sl_status st = SL_OK;
    hid_t str = sl_h5_str_type(SL_NAME_MAX);
    int root = ctx->rank == 0;
    char name[3 * SL_NAME_MAX];
    if (str < 0) return SL_ERR(ctx, SL_EINTERNAL, "%s: string type", path);
    SL_TRY(sl_h5_attr_write_str(ctx, f, "reward_unit", m->reward_unit, path));
    SL_TRY(sl_h5_attr_write_str(ctx, f, "period_unit", m->period_unit, path));
    for (int i = 0; i < m->n_factors; i++) {
        int64_t n = m->factor_size[i], c = root ? n : 0;
        if (m->factor_value[i]) {
            snprintf(name, sizeof(name), "/factor/%s/value", m->factor_name[i]);
            SL_TRY(sl_h5_write_1d(ctx, f, name, H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, n, 0, c, m->factor_value[i], 1,
                                  path));
            SL_TRY(write_unit(ctx, f, name, m->factor_unit[i], path));
        }
        if (m->factor_label[i]) {
            snprintf(name, sizeof(name), "/factor/%s/label", m->factor_name[i]);
            SL_TRY(sl_h5_write_1d(ctx, f, name, str, str, n, 0, c, m->factor_label[i], 1, path));
        }
    }
    if (m->n_action_names > 0)
        SL_TRY(sl_h5_write_1d(ctx, f, "/action/name", str, str, m->n_action_names, 0, root ? m->n_action_names : 0,
                              m->action_name, 1, path));
    if (m->n_action_values > 0) {
        SL_TRY(sl_h5_write_1d(ctx, f, "/action/value", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, m->n_action_values, 0,
                              root ? m->n_action_values : 0, m->action_value, 1, path));
        SL_TRY(write_unit(ctx, f, "/action/value", m->action_unit, path));
    }
    if (m->n_quantities > 0)
        SL_TRY(sl_h5_write_1d(ctx, f, "/labels/quantity_name", str, str, m->n_quantities, 0,
                              root ? m->n_quantities : 0, m->quantity_name, 0, path));
cleanup:
    H5Tclose(str);
    return st;
}

/* ---- the writer: rows appended a block at a time ------------------------------
 * Every row dataset is a stream: a block's entries go to the file in whole
 * chunks (SL_H5_CHUNK entries, aligned to the dataset's chunks) and the
 * rest waits in a buffer of less than a chunk for the next block, so no
 * compressed chunk is written twice by one rank. The last append writes
 * what is left. Streams are written one after the other, so the extra
 * memory is one stream's entries of one block at most. */

enum { W_FIRST_PAIR, W_ACTION, W_REWARD, W_FIRST_TRANS, W_TARGET, W_PROB, W_TERMINAL, W_VISITS, W_QUANTITY };
enum { W_STATE = 0, W_PAIR = 1, W_TRANS = 2 }; /* what a stream has one entry per */
#define W_MAX (W_QUANTITY + 2 * SLUICE_MAX_QUANTITIES)

typedef struct wstream {
    char name[3 * SL_NAME_MAX];
    hid_t dset, mtype;
    size_t esize;               /* bytes per entry in memory (and buffer) */
    int per;                    /* W_STATE, W_PAIR or W_TRANS */
    int narrow;                 /* int64 rows stored as uint32 */
    unsigned char *buf;         /* entries not yet written */
    int64_t n, cap;
    int64_t off;                /* file position of buf[0] */
} wstream;

struct sl_model_writer {
    sl_outfile of;
    hid_t f;
    char path[4096];
    int ns;                     /* streams in use */
    wstream w[W_MAX];
    int64_t next[3], end[3];    /* next state/pair/transition this rank appends; its range's end */
};

static sl_status stream_open(sl_ctx *ctx, sl_model_writer *w, const char *name, hid_t ftype, hid_t mtype,
                             size_t esize, int per, int narrow, int64_t total)
{
    wstream *s = &w->w[w->ns++];
    memset(s, 0, sizeof(*s));
    snprintf(s->name, sizeof(s->name), "%s", name);
    s->mtype = mtype;
    s->esize = esize;
    s->per = per;
    s->narrow = narrow;
    s->off = w->next[per];
    return sl_h5_create_1d(ctx, w->f, name, ftype, total, 1, w->path, &s->dset);
}

/* Make room for `need` buffered entries, keeping the buffered ones (a
 * checked allocation, so the allocation-failure tests reach it). Local. */
static sl_status stream_reserve(sl_ctx *ctx, wstream *s, int64_t need)
{
    if (need <= s->cap) return SL_OK;
    unsigned char *nb = sl_malloc(ctx, (size_t)need, s->esize, "model writer buffer");
    if (nb == NULL) return SL_ENOMEM; /* the allocator recorded the message */
    if (s->n > 0) memcpy(nb, s->buf, (size_t)s->n * s->esize);
    free(s->buf);
    s->buf = nb;
    s->cap = need;
    return SL_OK;
}

/* Append `count` entries, entry k at src + k * stride bytes (int64 narrowed
 * to uint32 for a narrow stream), and write what fills whole chunks (all of
 * it when `final`). Exactly one collective write per call on every rank. */
static sl_status stream_put(sl_ctx *ctx, wstream *s, const void *src, int64_t count, size_t stride, int final,
                            const char *path)
{
    sl_status st = SL_OK;
    const unsigned char *from = src, *data;
    int64_t pos, avail;
    int direct = s->n == 0 && !s->narrow && stride == s->esize;
    if (direct) { /* nothing waiting: write straight from the rows */
        data = from;
        avail = count;
    } else {
        st = stream_reserve(ctx, s, s->n + count);
        for (int64_t k = 0; st == SL_OK && k < count; k++) {
            unsigned char *to = s->buf + (size_t)(s->n + k) * s->esize;
            if (s->narrow) {
                int64_t v;
                memcpy(&v, from + (size_t)k * stride, sizeof(v));
                uint32_t u = (uint32_t)v;
                memcpy(to, &u, sizeof(u));
            } else {
                memcpy(to, from + (size_t)k * stride, s->esize);
            }
        }
        if (st == SL_OK) s->n += count;
        data = s->buf;
        avail = s->n;
    }
    st = sl_agree(ctx, st);
    if (st != SL_OK) return st;
    pos = s->off + avail;
    int64_t wr = final ? avail : (int64_t)(pos / (int64_t)SL_H5_CHUNK * (int64_t)SL_H5_CHUNK) - s->off;
    if (wr < 0) wr = 0;
    st = sl_h5_write_at(ctx, s->dset, s->mtype, s->off, wr, data, s->name, path);
    if (st != SL_OK) return st;
    s->off += wr;
    int64_t rest = avail - wr;
    if (direct) {
        if (rest > 0) {
            st = stream_reserve(ctx, s, rest);
            if (st == SL_OK) memcpy(s->buf, from + (size_t)wr * stride, (size_t)rest * s->esize);
        }
        if (st == SL_OK) s->n = rest;
    } else {
        /* s->buf is NULL on a rank that has buffered nothing yet: memmove
         * must not see it even for 0 bytes (UBSan: mpi_unit_handles_2) */
        if (rest > 0) memmove(s->buf, s->buf + (size_t)wr * s->esize, (size_t)rest * s->esize);
        s->n = rest;
    }
    return sl_agree(ctx, st);
}

/* Close the datasets (before the file: an MPI-IO file with open objects
 * does not close). Collective. */
static void writer_close_datasets(sl_model_writer *w)
{
    for (int i = 0; i < w->ns; i++) {
        if (w->w[i].dset >= 0) H5Dclose(w->w[i].dset);
        w->w[i].dset = H5I_INVALID_HID;
    }
}

static void writer_free(sl_model_writer *w)
{
    writer_close_datasets(w);
    for (int i = 0; i < w->ns; i++) free(w->w[i].buf);
    free(w);
}

sl_status sl_store_model_begin(sl_ctx *ctx, const char *path, const sl_meta *m, const int64_t begin[3],
                               const int64_t end[3], sl_model_writer **out)
{
    sl_status st = SL_OK;
    sl_model_writer *w = NULL;
    int use32 = m->n_states <= (int64_t)UINT32_MAX;
    *out = NULL;
    /* uncompressed bound: pointers, actions, rewards, targets, probabilities */
    double need = 8.0 * (double)(m->n_states + 1) + 20.0 * (double)m->n_pairs + 8.0 +
                  (use32 ? 12.0 : 16.0) * (double)m->n_trans;
    SL_TRY(sl_h5_space_check(ctx, path, need));
    need += SL_H5_METADATA_ALLOWANCE;
    if (SL_ZALLOC(ctx, w, 1, "model writer") == NULL) st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    w->f = H5I_INVALID_HID;
    snprintf(w->path, sizeof(w->path), "%s", path);
    for (int i = 0; i < 3; i++) {
        w->next[i] = begin[i];
        w->end[i] = end[i];
    }
    SL_TRY(sl_outfile_begin(ctx, &w->of, path));
    SL_TRY(sl_outfile_reserve(ctx, &w->of, need));
    SL_TRY(sl_h5_create(ctx, w->of.tmp_path, &w->f));

    const char *p = path;
    hid_t f = w->f;
    st = sl_h5_attr_write_str(ctx, f, "sluice_format", "model", p);
    if (st == SL_OK) st = sl_h5_attr_write_i64(ctx, f, "format_version", m->format_version >= 2 ? 2 : 1, p);
    if (st == SL_OK) st = sl_h5_attr_write_i64(ctx, f, "n_states", m->n_states, p);
    if (st == SL_OK) st = sl_h5_attr_write_i64(ctx, f, "n_pairs", m->n_pairs, p);
    if (st == SL_OK) st = sl_h5_attr_write_i64(ctx, f, "n_transitions", m->n_trans, p);
    if (st == SL_OK) st = sl_h5_attr_write_f64(ctx, f, "discount", m->discount, p);
    if (st == SL_OK) st = sl_h5_attr_write_str(ctx, f, "objective", sl_objective_name(m->objective), p);
    if (st == SL_OK) st = sl_h5_attr_write_str(ctx, f, "created_by", "sluice " SLUICE_VERSION, p);
    if (st == SL_OK && m->source[0]) st = sl_h5_attr_write_str(ctx, f, "source", m->source, p);
    SL_TRY(sl_agree(ctx, st));

    SL_TRY(stream_open(ctx, w, "/state/first_pair", H5T_STD_I64LE, H5T_NATIVE_INT64, 8, W_STATE, 0,
                       m->n_states + 1));
    SL_TRY(stream_open(ctx, w, "/pair/action", H5T_STD_I32LE, H5T_NATIVE_INT32, 4, W_PAIR, 0, m->n_pairs));
    SL_TRY(stream_open(ctx, w, "/pair/reward", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, 8, W_PAIR, 0, m->n_pairs));
    SL_TRY(stream_open(ctx, w, "/pair/first_transition", H5T_STD_I64LE, H5T_NATIVE_INT64, 8, W_PAIR, 0,
                       m->n_pairs + 1));
    if (use32)
        SL_TRY(stream_open(ctx, w, "/transition/target", H5T_STD_U32LE, H5T_NATIVE_UINT32, 4, W_TRANS, 1,
                           m->n_trans));
    else
        SL_TRY(stream_open(ctx, w, "/transition/target", H5T_STD_I64LE, H5T_NATIVE_INT64, 8, W_TRANS, 0,
                           m->n_trans));
    SL_TRY(stream_open(ctx, w, "/transition/probability", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, 8, W_TRANS, 0,
                       m->n_trans));
    if (m->has_terminal)
        SL_TRY(stream_open(ctx, w, "/terminal_value", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, 8, W_STATE, 0,
                           m->n_states));
    if (m->has_visits)
        SL_TRY(stream_open(ctx, w, "/pair/visits", H5T_STD_I64LE, H5T_NATIVE_INT64, 8, W_PAIR, 0, m->n_pairs));
    SL_TRY(write_labels(ctx, f, m, p));
    if (m->format_version >= 2) {
        SL_TRY(write_annotations(ctx, f, m, p));
        char name[3 * SL_NAME_MAX];
        for (int q = 0; q < m->n_quantities; q++)
            for (int part = 0; part < 2; part++) {
                snprintf(name, sizeof(name), "/quantity/%s/%s", m->quantity_name[q], part == 0 ? "mean" : "p_positive");
                SL_TRY(stream_open(ctx, w, name, H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, 8, W_PAIR, 0, m->n_pairs));
                SL_TRY(write_unit(ctx, f, name, part == 0 ? m->quantity_unit[q] : "1", p));
            }
    }
cleanup:
    if (st != SL_OK && w != NULL) {
        writer_close_datasets(w);
        sl_h5_discard(ctx, &w->f, w->of.tmp_path);
        sl_outfile_end(ctx, &w->of, st);
        writer_free(w);
    } else {
        *out = w;
    }
    return st;
}

sl_status sl_store_model_append(sl_ctx *ctx, sl_model_writer *w, const sl_meta *m, const sl_block *b, int final)
{
    sl_status st = SL_OK;
    int64_t ns = sl_block_states(b), np = sl_block_pairs(b), nt = sl_block_trans(b);
    int closing = final && ctx->rank == ctx->size - 1; /* the last rank also writes the closing entries */
    if (b->s_begin != w->next[W_STATE] || b->p_begin != w->next[W_PAIR] || b->t_begin != w->next[W_TRANS])
        st = SL_ERR(ctx, SL_EINTERNAL, "%s: rows appended out of order (states from %lld, expected %lld)", w->path,
                    (long long)b->s_begin, (long long)w->next[W_STATE]);
    else if (b->s_end > w->end[W_STATE] || b->p_end > w->end[W_PAIR] || b->t_end > w->end[W_TRANS] ||
             (final && (b->s_end != w->end[W_STATE] || b->p_end != w->end[W_PAIR] || b->t_end != w->end[W_TRANS])))
        st = SL_ERR(ctx, SL_EDATA,
                    "%s: the rows up to state %lld end at pair %lld and transition %lld, but this rank's states "
                    "were counted to end at %lld and %lld (a generator that gives different rows when run "
                    "twice?); nothing written",
                    w->path, (long long)b->s_end - 1, (long long)b->p_end, (long long)b->t_end,
                    (long long)w->end[W_PAIR], (long long)w->end[W_TRANS]);
    else if ((m->has_terminal && ns > 0 && b->terminal == NULL) || (m->has_visits && np > 0 && b->visits == NULL) ||
             (m->n_quantities > 0 && np > 0 && (b->nq != m->n_quantities || b->qmean == NULL || b->qpos == NULL)))
        st = SL_ERR(ctx, SL_EINTERNAL, "%s: the rows lack terminal values, visit counts or quantities", w->path);
    SL_TRY(sl_agree(ctx, st));
    for (int i = 0; i < w->ns; i++) {
        wstream *s = &w->w[i];
        const void *src = NULL;
        int64_t count = s->per == W_STATE ? ns : s->per == W_PAIR ? np : nt;
        size_t stride = s->esize;
        switch (i) {
        case W_FIRST_PAIR: src = b->first_pair; count += closing; stride = 8; break;
        case W_ACTION: src = b->action; break;
        case W_REWARD: src = b->reward; break;
        case W_FIRST_TRANS: src = b->first_trans; count += closing; stride = 8; break;
        case W_TARGET: src = b->target; stride = 8; break;
        case W_PROB: src = b->prob; break;
        default: break;
        }
        /* optional streams follow the six row streams in the order opened */
        if (i >= W_TERMINAL) {
            int k = i - W_TERMINAL;
            if (m->has_terminal && k-- == 0) src = b->terminal;
            else if (m->has_visits && k-- == 0) src = b->visits;
            else {
                if (k < 0 || k >= 2 * m->n_quantities)
                    SL_FAIL(SL_EINTERNAL, "%s: stream %d has no rows", w->path, i);
                src = (k % 2 == 0 ? b->qmean : b->qpos) + k / 2;
                stride = (size_t)m->n_quantities * sizeof(double);
            }
        }
        SL_TRY(stream_put(ctx, s, src, count, stride, final, w->path));
    }
    w->next[W_STATE] = b->s_end;
    w->next[W_PAIR] = b->p_end;
    w->next[W_TRANS] = b->t_end;
cleanup:
    return st;
}

sl_status sl_store_model_end(sl_ctx *ctx, sl_model_writer **pw, const sl_meta *m, sl_status st)
{
    sl_model_writer *w = *pw;
    if (w == NULL) return st;
    *pw = NULL;
    for (int i = 0; st == SL_OK && i < w->ns; i++)
        if (w->w[i].n != 0)
            st = SL_ERR(ctx, SL_EINTERNAL, "%s: %s: %lld entries never written", w->path, w->w[i].name,
                        (long long)w->w[i].n);
    st = sl_agree(ctx, st);
    if (st == SL_OK) st = sl_agree(ctx, sl_h5_attr_write_str(ctx, w->f, "fingerprint", m->fingerprint, w->path));
    writer_close_datasets(w);
    if (st == SL_OK) st = sl_h5_close(ctx, &w->f, w->path);
    sl_h5_discard(ctx, &w->f, w->of.tmp_path);
    st = sl_outfile_end(ctx, &w->of, st);
    writer_free(w);
    return st;
}

sl_status sl_store_model_write(sl_ctx *ctx, const char *path, const sl_meta *m, const sl_block *b)
{
    sl_model_writer *w = NULL;
    int64_t begin[3] = {b->s_begin, b->p_begin, b->t_begin}, end[3] = {b->s_end, b->p_end, b->t_end};
    sl_status st = sl_store_model_begin(ctx, path, m, begin, end, &w);
    if (st != SL_OK) return st;
    st = sl_store_model_append(ctx, w, m, b, 1);
    return sl_store_model_end(ctx, &w, m, st);
}

/* ---- read ------------------------------------------------------------------- */

static sl_status read_labels(sl_ctx *ctx, hid_t f, sl_meta *m, const char *path)
{
    sl_status st = SL_OK;
    hid_t str = sl_h5_str_type(SL_NAME_MAX);
    if (str < 0) return SL_ERR(ctx, SL_EINTERNAL, "string type");
    int64_t nf = sl_h5_length(f, "/labels/factor_name");
    if (nf > 0) {
        if (nf > SLUICE_MAX_FACTORS) SL_FAIL(SL_EDATA, "%s: too many factors (%lld)", path, (long long)nf);
        int32_t stage[SLUICE_MAX_FACTORS] = {0};
        m->n_factors = (int)nf;
        SL_TRY(sl_h5_read_1d(ctx, f, "/labels/factor_name", str, nf, 0, nf, m->factor_name, path));
        SL_TRY(sl_h5_read_1d(ctx, f, "/labels/factor_size", H5T_NATIVE_INT64, nf, 0, nf, m->factor_size, path));
        SL_TRY(sl_h5_read_1d(ctx, f, "/labels/factor_stage", H5T_NATIVE_INT32, nf, 0, nf, stage, path));
        int64_t prod = 1;
        for (int i = 0; i < m->n_factors; i++) {
            m->factor_name[i][SL_NAME_MAX - 1] = '\0';
            m->factor_stage[i] = stage[i] != 0;
            if (m->factor_size[i] < 1 || prod > INT64_MAX / m->factor_size[i])
                SL_FAIL(SL_EDATA, "%s: factor %s has a bad size", path, m->factor_name[i]);
            prod *= m->factor_size[i];
        }
        if (prod != m->n_states)
            SL_FAIL(SL_EDATA, "%s: factor sizes multiply to %lld, not n_states %lld", path,
                    (long long)prod, (long long)m->n_states);
    }
    int64_t na = sl_h5_length(f, "/labels/action_name");
    if (na > 0) {
        if (na > INT32_MAX) SL_FAIL(SL_EDATA, "%s: too many action names", path);
        if (SL_ZALLOC(ctx, m->action_name, na, "action names") == NULL) SL_TRY(SL_ENOMEM); /* the allocator recorded the message */
        m->n_action_names = (int32_t)na;
        SL_TRY(sl_h5_read_1d(ctx, f, "/labels/action_name", str, na, 0, na, m->action_name, path));
        for (int64_t i = 0; i < na; i++) m->action_name[i][SL_NAME_MAX - 1] = '\0';
    }
    if (sl_h5_exists(f, "/generator")) {
        hid_t g = H5Gopen2(f, "/generator", H5P_DEFAULT);
        if (g < 0) SL_FAIL(SL_EDATA, "%s: cannot open /generator", path);
        st = sl_h5_attr_read_str(ctx, g, "name", m->generator, sizeof(m->generator), 0, path);
        H5Gclose(g);
        if (st != SL_OK) goto cleanup;
        int64_t np = sl_h5_length(f, "/generator/param_name");
        if (np > 0) {
            if (np > 4096) SL_FAIL(SL_EDATA, "%s: too many generator parameters", path);
            if (SL_ZALLOC(ctx, m->param_name, np, "params") == NULL ||
                SL_ZALLOC(ctx, m->param_unit, np, "params") == NULL ||
                SL_ZALLOC(ctx, m->param_value, np, "params") == NULL)
                SL_TRY(SL_ENOMEM); /* the allocator recorded the message */
            m->n_params = (int)np;
            SL_TRY(sl_h5_read_1d(ctx, f, "/generator/param_name", str, np, 0, np, m->param_name, path));
            SL_TRY(sl_h5_read_1d(ctx, f, "/generator/param_unit", str, np, 0, np, m->param_unit, path));
            SL_TRY(sl_h5_read_1d(ctx, f, "/generator/param_value", H5T_NATIVE_DOUBLE, np, 0, np,
                                 m->param_value, path));
            for (int64_t i = 0; i < np; i++) {
                m->param_name[i][SL_NAME_MAX - 1] = '\0';
                m->param_unit[i][SL_NAME_MAX - 1] = '\0';
            }
        }
    }
cleanup:
    H5Tclose(str);
    return st;
}

/* Read the string attribute `unit` of dataset `name` (empty if absent). Local. */
static sl_status read_unit(sl_ctx *ctx, hid_t f, const char *name, char *unit, const char *path)
{
    unit[0] = '\0';
    hid_t d = H5Dopen2(f, name, H5P_DEFAULT);
    if (d < 0) return SL_ERR(ctx, SL_EDATA, "%s: cannot open %s", path, name);
    sl_status st = sl_h5_attr_read_str(ctx, d, "unit", unit, SL_NAME_MAX, 0, path);
    H5Dclose(d);
    return st;
}

/* Format 2 annotations into the meta (every rank reads them). Local. */
static sl_status read_annotations(sl_ctx *ctx, hid_t f, sl_meta *m, const char *path)
{
    sl_status st = SL_OK;
    char name[3 * SL_NAME_MAX];
    hid_t str = sl_h5_str_type(SL_NAME_MAX);
    if (str < 0) return SL_ERR(ctx, SL_EINTERNAL, "string type");
    SL_TRY(sl_h5_attr_read_str(ctx, f, "reward_unit", m->reward_unit, SL_NAME_MAX, 0, path));
    SL_TRY(sl_h5_attr_read_str(ctx, f, "period_unit", m->period_unit, SL_NAME_MAX, 0, path));
    for (int i = 0; i < m->n_factors; i++) {
        int64_t n = m->factor_size[i];
        snprintf(name, sizeof(name), "/factor/%s/value", m->factor_name[i]);
        if (sl_h5_exists(f, name)) {
            if (n > INT32_MAX) SL_FAIL(SL_EDATA, "%s: factor %s is too large for values", path, m->factor_name[i]);
            if (SL_ALLOC(ctx, m->factor_value[i], n, "factor values") == NULL) SL_TRY(SL_ENOMEM); /* the allocator recorded the message */
            SL_TRY(sl_h5_read_1d(ctx, f, name, H5T_NATIVE_DOUBLE, n, 0, n, m->factor_value[i], path));
            SL_TRY(read_unit(ctx, f, name, m->factor_unit[i], path));
            for (int64_t k = 0; k < n; k++)
                if (!isfinite(m->factor_value[i][k]))
                    SL_FAIL(SL_EDATA, "%s: %s[%lld] is not finite", path, name, (long long)k);
        }
        snprintf(name, sizeof(name), "/factor/%s/label", m->factor_name[i]);
        if (sl_h5_exists(f, name)) {
            if (n > INT32_MAX / SL_NAME_MAX)
                SL_FAIL(SL_EDATA, "%s: factor %s is too large for labels", path, m->factor_name[i]);
            if (SL_ZALLOC(ctx, m->factor_label[i], n, "factor labels") == NULL) SL_TRY(SL_ENOMEM); /* the allocator recorded the message */
            SL_TRY(sl_h5_read_1d(ctx, f, name, str, n, 0, n, m->factor_label[i], path));
            for (int64_t k = 0; k < n; k++) m->factor_label[i][k][SL_NAME_MAX - 1] = '\0';
        }
    }
    int64_t na = sl_h5_length(f, "/action/value");
    if (na > 0) {
        if (na > INT32_MAX) SL_FAIL(SL_EDATA, "%s: too many action values", path);
        if (SL_ALLOC(ctx, m->action_value, na, "action values") == NULL) SL_TRY(SL_ENOMEM); /* the allocator recorded the message */
        m->n_action_values = (int32_t)na;
        SL_TRY(sl_h5_read_1d(ctx, f, "/action/value", H5T_NATIVE_DOUBLE, na, 0, na, m->action_value, path));
        SL_TRY(read_unit(ctx, f, "/action/value", m->action_unit, path));
    }
    int64_t nq = sl_h5_length(f, "/labels/quantity_name");
    if (nq > 0) {
        if (nq > SLUICE_MAX_QUANTITIES) SL_FAIL(SL_EDATA, "%s: %lld quantities (at most %d)", path, (long long)nq,
                                                SLUICE_MAX_QUANTITIES);
        m->n_quantities = (int)nq;
        SL_TRY(sl_h5_read_1d(ctx, f, "/labels/quantity_name", str, nq, 0, nq, m->quantity_name, path));
        for (int q = 0; q < m->n_quantities; q++) {
            m->quantity_name[q][SL_NAME_MAX - 1] = '\0';
            for (int part = 0; part < 2; part++) {
                snprintf(name, sizeof(name), "/quantity/%s/%s", m->quantity_name[q], part ? "p_positive" : "mean");
                if (sl_h5_length(f, name) != m->n_pairs)
                    SL_FAIL(SL_EDATA, "%s: quantity %s: dataset %s is missing or does not hold n_pairs entries",
                            path, m->quantity_name[q], name);
            }
            snprintf(name, sizeof(name), "/quantity/%s/mean", m->quantity_name[q]);
            SL_TRY(read_unit(ctx, f, name, m->quantity_unit[q], path));
        }
    }
cleanup:
    H5Tclose(str);
    return st;
}

static sl_status read_meta_open(sl_ctx *ctx, hid_t f, const char *path, sl_meta *m)
{
    sl_file_kind kind;
    int64_t ver = 0;
    char obj[32] = "discounted";
    memset(m, 0, sizeof(*m));
    sl_status st = read_kind(ctx, f, path, &kind);
    if (st != SL_OK) return st;
    if (kind != SL_FILE_MODEL)
        return SL_ERR(ctx, SL_EDATA, "%s: is a %s file, not a model file", path, kind_name(kind));
    SL_TRY(sl_h5_attr_read_i64(ctx, f, "format_version", &ver, 1, path));
    if (ver > SL_MODEL_FORMAT_MAX || ver < 1)
        SL_FAIL(SL_EDATA, "%s: format_version %lld is not supported (this sluice reads versions 1 to %d%s)",
                path, (long long)ver, SL_MODEL_FORMAT_MAX,
                ver > SL_MODEL_FORMAT_MAX ? "; the file was written by a newer sluice" : "");
    m->format_version = (int)ver;
    SL_TRY(sl_h5_attr_read_i64(ctx, f, "n_states", &m->n_states, 1, path));
    SL_TRY(sl_h5_attr_read_i64(ctx, f, "n_pairs", &m->n_pairs, 1, path));
    SL_TRY(sl_h5_attr_read_i64(ctx, f, "n_transitions", &m->n_trans, 1, path));
    SL_TRY(sl_h5_attr_read_f64(ctx, f, "discount", &m->discount, 1, path));
    SL_TRY(sl_h5_attr_read_str(ctx, f, "fingerprint", m->fingerprint, sizeof(m->fingerprint), 1, path));
    SL_TRY(sl_h5_attr_read_str(ctx, f, "objective", obj, sizeof(obj), 0, path));
    SL_TRY(sl_h5_attr_read_str(ctx, f, "source", m->source, sizeof(m->source), 0, path));
    int o;
    if (!sl_objective_parse(obj, (sl_objective *)&o))
        SL_FAIL(SL_EDATA, "%s: unknown objective \"%s\"", path, obj);
    m->objective = (sl_objective)o;
    if (m->n_states < 1 || m->n_pairs < m->n_states || m->n_trans < m->n_pairs)
        SL_FAIL(SL_EDATA, "%s: inconsistent sizes (n_states %lld, n_pairs %lld, n_transitions %lld)",
                path, (long long)m->n_states, (long long)m->n_pairs, (long long)m->n_trans);
    {
        /* each dataset by name: missing, not 1-D, wrong length or wrong class */
        static const struct {
            const char *name;
            int per; /* 0 states+1, 1 pairs, 2 pairs+1, 3 transitions */
            H5T_class_t cls;
        } want[] = {{"/state/first_pair", 0, H5T_INTEGER},      {"/pair/action", 1, H5T_INTEGER},
                    {"/pair/reward", 1, H5T_FLOAT},             {"/pair/first_transition", 2, H5T_INTEGER},
                    {"/transition/target", 3, H5T_INTEGER},     {"/transition/probability", 3, H5T_FLOAT}};
        for (size_t i = 0; i < sizeof(want) / sizeof(want[0]); i++) {
            int64_t n = want[i].per == 0   ? m->n_states + 1
                        : want[i].per == 1 ? m->n_pairs
                        : want[i].per == 2 ? m->n_pairs + 1
                                           : m->n_trans;
            SL_TRY(sl_h5_check_1d(ctx, f, want[i].name, want[i].cls, n, path));
        }
    }
    if (!(m->discount >= 0.0 && m->discount <= 1.0))
        SL_FAIL(SL_EDATA, "%s: discount %g is not in [0, 1]", path, m->discount);
    /* optional datasets of any version */
    if (sl_h5_exists(f, "/pair/visits")) {
        SL_TRY(sl_h5_check_1d(ctx, f, "/pair/visits", H5T_INTEGER, m->n_pairs, path));
        m->has_visits = 1;
    }
    if (sl_h5_exists(f, "/terminal_value")) {
        SL_TRY(sl_h5_check_1d(ctx, f, "/terminal_value", H5T_FLOAT, m->n_states, path));
        m->has_terminal = 1;
    }
    SL_TRY(read_labels(ctx, f, m, path));
    if (m->format_version >= 2) SL_TRY(read_annotations(ctx, f, m, path));
cleanup:
    if (st != SL_OK) sl_meta_free(m);
    return st;
}

sl_status sl_store_model_meta(sl_ctx *ctx, const char *path, sl_meta *m)
{
    hid_t f;
    memset(m, 0, sizeof(*m));
    sl_status st = sl_h5_open(ctx, path, 0, &f);
    if (st != SL_OK) return st;
    /* every rank reads the same small metadata independently */
    st = sl_agree(ctx, read_meta_open(ctx, f, path, m));
    if (st != SL_OK) sl_meta_free(m);
    H5Fclose(f);
    return st;
}

sl_status sl_store_model_cumulative(sl_ctx *ctx, const char *path, int64_t s_begin,
                                    int64_t s_end, int64_t **cum_out)
{
    sl_status st = SL_OK;
    hid_t f;
    int64_t *fp = NULL, *cum = NULL, n = s_end - s_begin;
    *cum_out = NULL;
    SL_TRY(sl_h5_open(ctx, path, 0, &f));
    if (SL_ALLOC(ctx, fp, n + 1, "first_pair") == NULL || SL_ALLOC(ctx, cum, n + 1, "cumulative") == NULL)
        st = SL_ENOMEM;
    if (st == SL_OK) st = sl_h5_read_1d(ctx, f, "/state/first_pair", H5T_NATIVE_INT64, -1, s_begin, n + 1, fp, path);
    if (st == SL_OK) {
        /* first_transition at the pairs bounding each state: one contiguous
         * read of the pair range, then pick */
        int64_t p0 = fp[0], p1 = fp[n];
        int64_t np = sl_h5_length(f, "/pair/first_transition");
        if (p0 < 0 || p1 < p0 || p1 >= np) {
            st = SL_ERR(ctx, SL_EDATA, "%s: /state/first_pair out of range near state %lld", path,
                        (long long)s_begin);
        } else {
            int64_t *ft = NULL;
            if (SL_ALLOC(ctx, ft, p1 - p0 + 1, "first_transition") == NULL) {
                st = SL_ENOMEM;
            } else {
                st = sl_h5_read_1d(ctx, f, "/pair/first_transition", H5T_NATIVE_INT64, -1, p0, p1 - p0 + 1, ft,
                                   path);
                for (int64_t i = 0; st == SL_OK && i <= n; i++) {
                    if (fp[i] < p0 || fp[i] > p1 || (i > 0 && fp[i] < fp[i - 1])) {
                        st = SL_ERR(ctx, SL_EDATA, "%s: state %lld: /state/first_pair is not monotone",
                                    path, (long long)(s_begin + i - 1));
                        break;
                    }
                    cum[i] = ft[fp[i] - p0];
                }
                free(ft);
            }
        }
    }
    st = sl_agree(ctx, st);
    H5Fclose(f);
cleanup:
    free(fp);
    if (st == SL_OK) *cum_out = cum;
    else free(cum);
    return st;
}

static sl_status quantity_read(sl_ctx *ctx, hid_t f, const sl_meta *m, int q, int64_t p_begin, int64_t n,
                               double *mean, double *pos, const char *path);

sl_status sl_store_model_run_sizes(sl_ctx *ctx, const char *path, const sl_meta *m, const int64_t *runs,
                                   int64_t n_runs, int64_t *n_pairs, int64_t *n_trans)
{
    sl_status st = SL_OK;
    hid_t f;
    SL_TRY(sl_h5_open(ctx, path, 0, &f));
    for (int64_t k = 0; st == SL_OK && k < n_runs; k++) {
        int64_t s0 = runs[2 * k], s1 = runs[2 * k + 1], p[2] = {0, 0}, t[2] = {0, 0};
        if (s0 < 0 || s1 < s0 || s1 > m->n_states) {
            st = SL_ERR(ctx, SL_EINTERNAL, "%s: states %lld..%lld are not in the model", path, (long long)s0,
                        (long long)s1);
            break;
        }
        st = sl_h5_read_1d(ctx, f, "/state/first_pair", H5T_NATIVE_INT64, m->n_states + 1, s0, 1, &p[0], path);
        if (st == SL_OK)
            st = sl_h5_read_1d(ctx, f, "/state/first_pair", H5T_NATIVE_INT64, m->n_states + 1, s1, 1, &p[1], path);
        if (st == SL_OK && (p[0] < 0 || p[1] < p[0] || p[1] > m->n_pairs))
            st = SL_ERR(ctx, SL_EDATA, "%s: /state/first_pair of states %lld..%lld is out of range", path,
                        (long long)s0, (long long)s1);
        if (st == SL_OK)
            st = sl_h5_read_1d(ctx, f, "/pair/first_transition", H5T_NATIVE_INT64, m->n_pairs + 1, p[0], 1, &t[0],
                               path);
        if (st == SL_OK)
            st = sl_h5_read_1d(ctx, f, "/pair/first_transition", H5T_NATIVE_INT64, m->n_pairs + 1, p[1], 1, &t[1],
                               path);
        if (st == SL_OK && (t[0] < 0 || t[1] < t[0] || t[1] > m->n_trans))
            st = SL_ERR(ctx, SL_EDATA, "%s: /pair/first_transition of states %lld..%lld is out of range", path,
                        (long long)s0, (long long)s1);
        n_pairs[k] = p[1] - p[0];
        n_trans[k] = t[1] - t[0];
    }
    st = sl_agree(ctx, st);
    H5Fclose(f);
cleanup:
    return st;
}


/* into: NULL, the arrays are allocated; or arrays of the right sizes
 * (known from sl_store_model_run_sizes) that b then points into (not
 * owned by b: freed by the caller, also on failure). */
static sl_status read_rows(sl_ctx *ctx, const char *path, const sl_meta *m, int64_t s_begin, int64_t s_end,
                           sl_block *b, const sl_block *into)
{
    sl_status st = SL_OK;
    hid_t f = H5I_INVALID_HID;
    int64_t ns = s_end - s_begin;
    memset(b, 0, sizeof(*b));
    b->s_begin = s_begin;
    b->s_end = s_end;
    SL_TRY(sl_h5_open(ctx, path, 0, &f));
    if (into != NULL && (m->has_visits || m->has_terminal))
        st = SL_ERR(ctx, SL_EINTERNAL, "%s: rows with visit counts or terminal values are read whole", path);
    else if (into != NULL) b->first_pair = into->first_pair;
    else if (SL_ALLOC(ctx, b->first_pair, ns + 1, "first_pair") == NULL) st = SL_ENOMEM;
    if (st == SL_OK)
        st = sl_h5_read_1d(ctx, f, "/state/first_pair", H5T_NATIVE_INT64, m->n_states + 1, s_begin, ns + 1,
                           b->first_pair, path);
    int64_t np = 0;
    if (st == SL_OK) {
        b->p_begin = b->first_pair[0];
        b->p_end = b->first_pair[ns];
        np = b->p_end - b->p_begin;
        if (b->p_begin < 0 || np < 0 || b->p_end > m->n_pairs)
            st = SL_ERR(ctx, SL_EDATA, "%s: /state/first_pair of states %lld..%lld is out of range", path,
                        (long long)s_begin, (long long)s_end);
    }
    if (st == SL_OK && into != NULL) {
        if (np != sl_block_pairs(into))
            st = SL_ERR(ctx, SL_EDATA, "%s: the rows of states %lld..%lld changed while they were read", path,
                        (long long)s_begin, (long long)s_end);
        b->action = into->action;
        b->reward = into->reward;
        b->first_trans = into->first_trans;
    } else if (st == SL_OK && (SL_ALLOC(ctx, b->action, np, "actions") == NULL ||
                               SL_ALLOC(ctx, b->reward, np, "rewards") == NULL ||
                               SL_ALLOC(ctx, b->first_trans, np + 1, "first_transition") == NULL)) {
        st = SL_ENOMEM;
    }
    if (st == SL_OK)
        st = sl_h5_read_1d(ctx, f, "/pair/action", H5T_NATIVE_INT32, m->n_pairs, b->p_begin, np, b->action, path);
    if (st == SL_OK)
        st = sl_h5_read_1d(ctx, f, "/pair/reward", H5T_NATIVE_DOUBLE, m->n_pairs, b->p_begin, np, b->reward, path);
    if (st == SL_OK)
        st = sl_h5_read_1d(ctx, f, "/pair/first_transition", H5T_NATIVE_INT64, m->n_pairs + 1, b->p_begin,
                           np + 1, b->first_trans, path);
    int64_t nt = 0;
    if (st == SL_OK) {
        b->t_begin = b->first_trans[0];
        b->t_end = b->first_trans[np];
        nt = b->t_end - b->t_begin;
        if (b->t_begin < 0 || nt < 0 || b->t_end > m->n_trans)
            st = SL_ERR(ctx, SL_EDATA, "%s: /pair/first_transition of states %lld..%lld is out of range",
                        path, (long long)s_begin, (long long)s_end);
    }
    int use32 = st == SL_OK && sl_h5_is_u32(f, "/transition/target");
    if (st == SL_OK && into != NULL) {
        if (nt != sl_block_trans(into))
            st = SL_ERR(ctx, SL_EDATA, "%s: the rows of states %lld..%lld changed while they were read", path,
                        (long long)s_begin, (long long)s_end);
        b->target = into->target;
        b->prob = into->prob;
    } else if (st == SL_OK && (SL_ALLOC(ctx, b->target, nt, "targets") == NULL ||
                               SL_ALLOC(ctx, b->prob, nt, "probabilities") == NULL)) {
        st = SL_ENOMEM;
    }
    if (st == SL_OK) {
        if (use32) {
            /* 32-bit targets are read into the upper half of the 64-bit
             * array and widened in place from the front (no second array at
             * the load peak): target t (bytes 8t..8t+7) overwrites only
             * 32-bit entries at or below t, already read. Bytes move by
             * memcpy, so no pointer of another type reads them. */
            unsigned char *buf = (unsigned char *)b->target;
            st = sl_h5_read_1d(ctx, f, "/transition/target", H5T_NATIVE_UINT32, m->n_trans, b->t_begin, nt,
                               buf + 4 * nt, path);
            for (int64_t t = 0; st == SL_OK && t < nt; t++) {
                uint32_t v;
                memcpy(&v, buf + 4 * nt + 4 * t, sizeof(v));
                int64_t w = (int64_t)v;
                memcpy(buf + 8 * t, &w, sizeof(w));
            }
        } else {
            st = sl_h5_read_1d(ctx, f, "/transition/target", H5T_NATIVE_INT64, m->n_trans, b->t_begin, nt,
                               b->target, path);
        }
    }
    if (st == SL_OK)
        st = sl_h5_read_1d(ctx, f, "/transition/probability", H5T_NATIVE_DOUBLE, m->n_trans, b->t_begin, nt,
                           b->prob, path);
    if (st == SL_OK) st = sl_block_validate(ctx, b, m, 1e-6, path);
    if (st == SL_OK && m->has_visits) {
        if (SL_ALLOC(ctx, b->visits, np + 1, "visit counts") == NULL) st = SL_ENOMEM;
        if (st == SL_OK)
            st = sl_h5_read_1d(ctx, f, "/pair/visits", H5T_NATIVE_INT64, m->n_pairs, b->p_begin, np, b->visits, path);
        for (int64_t k = 0; st == SL_OK && k < np; k++)
            if (b->visits[k] < 0) {
                int64_t s = s_begin;
                while (s + 1 < s_end && b->first_pair[s + 1 - s_begin] <= b->p_begin + k) s++;
                st = SL_ERR(ctx, SL_EDATA, "%s: /pair/visits: state %lld, action %d: negative count %lld", path,
                            (long long)s, (int)b->action[k], (long long)b->visits[k]);
            }
    }
    /* terminal values are kept with the rows (fingerprint, writing back) */
    if (st == SL_OK && m->has_terminal) {
        if (SL_ALLOC(ctx, b->terminal, ns + 1, "terminal values") == NULL) st = SL_ENOMEM;
        if (st == SL_OK)
            st = sl_h5_read_1d(ctx, f, "/terminal_value", H5T_NATIVE_DOUBLE, m->n_states, s_begin, ns, b->terminal,
                               path);
    }
    /* quantities are hashed for the fingerprint, not kept: read a stored
     * chunk at a time (pieces end on chunk boundaries, so no chunk is
     * inflated twice) into two reused buffers */
    for (int q = 0; st == SL_OK && q < m->n_quantities; q++) {
        const int64_t CH = SL_H5_CHUNK;
        double *mean = NULL, *pos = NULL;
        if (SL_ALLOC(ctx, mean, CH, "quantities") == NULL || SL_ALLOC(ctx, pos, CH, "quantities") == NULL)
            st = SL_ENOMEM;
        for (int64_t a = b->p_begin, c = 0; st == SL_OK && a < b->p_end; a += c) {
            const int64_t next = (a / CH + 1) * CH;
            c = (next < b->p_end ? next : b->p_end) - a;
            st = quantity_read(ctx, f, m, q, a, c, mean, pos, path);
            if (st == SL_OK) sl_fingerprint_quantity(b->qacc, q, a, c, mean, pos, 1);
        }
        free(mean);
        free(pos);
    }
    st = sl_agree(ctx, st);
cleanup:
    if (f >= 0) H5Fclose(f);
    if (st != SL_OK && into != NULL) memset(b, 0, sizeof(*b)); /* the arrays are the caller's */
    else if (st != SL_OK) sl_block_free(b);
    return st;
}

sl_status sl_store_model_read(sl_ctx *ctx, const char *path, const sl_meta *m, int64_t s_begin, int64_t s_end,
                              sl_block *b)
{
    return read_rows(ctx, path, m, s_begin, s_end, b, NULL);
}

sl_status sl_store_model_read_into(sl_ctx *ctx, const char *path, const sl_meta *m, int64_t s_begin, int64_t s_end,
                                   const sl_block *into, sl_block *b)
{
    return read_rows(ctx, path, m, s_begin, s_end, b, into);
}

sl_status sl_store_quantity_read(sl_ctx *ctx, const char *path, const sl_meta *m, int q, int64_t p_begin,
                                 int64_t n, double *mean, double *pos)
{
    hid_t f;
    sl_status st = sl_h5_open(ctx, path, 0, &f);
    if (st != SL_OK) return st;
    st = quantity_read(ctx, f, m, q, p_begin, n, mean, pos, path);
    st = sl_agree(ctx, st);
    H5Fclose(f);
    return st;
}

/* 1 if any of v[0..n) is not finite (means) or not in [0, 1] (p_positive;
 * NaN is not). Every quantity of every pair passes here on each load, so it
 * is written on the IEEE 754 bits, with no comparison (GCC 12 vectorises no
 * loop that ORs comparison results together) and no early exit; bit 63 of
 * the accumulated word is the answer:
 * - not finite: the exponent all ones, the only case where adding one to
 *   the exponent field carries into bit 63;
 * - not in [0, 1]: the magnitude bits above those of 1.0 (> 1, Inf, NaN of
 *   either sign), so ONE - mag wraps around to bit 63 set; or the sign set
 *   with a magnitude not zero (a negative number; -0.0 passes), where
 *   mag + 0x7FF..F reaches bit 63.
 * The plain test (!isfinite(x), !(x >= 0.0 && x <= 1.0)) finds the value
 * for the message. */
static int quantity_bad(const double *v, int64_t n, int probability)
{
    const uint64_t sign = (uint64_t)1 << 63, exp_bits = 0x7FF0000000000000ull, one = 0x3FF0000000000000ull;
    uint64_t bad = 0;
    if (probability) {
        for (int64_t k = 0; k < n; k++) {
            uint64_t b;
            memcpy(&b, v + k, sizeof(b));
            const uint64_t mag = b & ~sign;
            bad |= (b & (mag + ~sign)) | (one - mag);
        }
    } else {
        for (int64_t k = 0; k < n; k++) {
            uint64_t b;
            memcpy(&b, v + k, sizeof(b));
            bad |= (b & exp_bits) + ((uint64_t)1 << 52);
        }
    }
    return (bad & sign) != 0;
}

static sl_status quantity_read(sl_ctx *ctx, hid_t f, const sl_meta *m, int q, int64_t p_begin, int64_t n,
                               double *mean, double *pos, const char *path)
{
    char name[3 * SL_NAME_MAX];
    sl_status st = SL_OK;
    if (q < 0 || q >= m->n_quantities) return SL_ERR(ctx, SL_EINTERNAL, "quantity %d out of range", q);
    for (int part = 0; part < 2 && st == SL_OK; part++) {
        double *dst = part ? pos : mean;
        snprintf(name, sizeof(name), "/quantity/%s/%s", m->quantity_name[q], part ? "p_positive" : "mean");
        st = sl_h5_read_1d(ctx, f, name, H5T_NATIVE_DOUBLE, m->n_pairs, p_begin, n, dst, path);
        if (st != SL_OK || !quantity_bad(dst, n, part)) continue;
        /* the first value that is wrong, for the message */
        for (int64_t k = 0; st == SL_OK && k < n; k++)
            if (!isfinite(dst[k]) || (part && !(dst[k] >= 0.0 && dst[k] <= 1.0)))
                st = SL_ERR(ctx, SL_EDATA, "%s: %s[%lld] = %g is %s", path, name, (long long)(p_begin + k), dst[k],
                            part ? "not a probability" : "not finite");
    }
    return st;
}
