/* solution_io.c - solution and values files (DESIGN.md contract). */
#include <math.h>
#include <string.h>

#include "store/h5.h"
#include "store/store.h"

void sl_history_free(sl_history *h)
{
    free(h->iteration);
    free(h->sweeps);
    free(h->seconds);
    free(h->sup);
    free(h->span);
    free(h->value_error);
    free(h->policy_loss);
    memset(h, 0, sizeof(*h));
}

#define GROW(field, type)                                                                  \
    do {                                                                                   \
        type *q_ = realloc(h->field, (size_t)cap * sizeof(type));                          \
        if (q_ == NULL) return SL_ERR(ctx, SL_ENOMEM, "out of memory growing the history"); \
        h->field = q_;                                                                     \
    } while (0)

sl_status sl_history_push(sl_ctx *ctx, sl_history *h, int64_t iteration, int64_t sweeps, double seconds,
                          double sup, double span, double value_error, double policy_loss)
{
    if (h->n == h->cap) {
        int64_t cap = h->cap ? 2 * h->cap : 64;
        GROW(iteration, int64_t);
        GROW(sweeps, int64_t);
        GROW(seconds, double);
        GROW(sup, double);
        GROW(span, double);
        GROW(value_error, double);
        GROW(policy_loss, double);
        h->cap = cap;
    }
    int64_t i = h->n++;
    h->iteration[i] = iteration;
    h->sweeps[i] = sweeps;
    h->seconds[i] = seconds;
    h->sup[i] = sup;
    h->span[i] = span;
    h->value_error[i] = value_error;
    h->policy_loss[i] = policy_loss;
    return SL_OK;
}

void sl_history_columns(const sl_history *h, sl_history_column c[SL_HISTORY_COLUMNS])
{
    sl_history_column t[SL_HISTORY_COLUMNS] = {
        {"/history/iteration", H5T_STD_I64LE, H5T_NATIVE_INT64, h->iteration},
        {"/history/sweeps", H5T_STD_I64LE, H5T_NATIVE_INT64, h->sweeps},
        {"/history/seconds", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, h->seconds},
        {"/history/sup", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, h->sup},
        {"/history/span", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, h->span},
        {"/history/value_error_bound", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, h->value_error},
        {"/history/policy_loss_bound", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, h->policy_loss},
    };
    memcpy(c, t, sizeof(t));
}

sl_status sl_history_read(sl_ctx *ctx, hid_t f, sl_history *h, const char *p)
{
    sl_status st = SL_OK;
    sl_history_free(h);
    int64_t n = sl_h5_length(f, "/history/iteration");
    if (n <= 0) return SL_OK;
    for (int64_t i = 0; i < n; i++) SL_TRY(sl_history_push(ctx, h, 0, 0, 0, 0, 0, 0, 0));
    sl_history_column col[SL_HISTORY_COLUMNS];
    sl_history_columns(h, col);
    for (int k = 0; k < SL_HISTORY_COLUMNS; k++)
        SL_TRY(sl_h5_read_1d(ctx, f, col[k].name, col[k].mtype, n, 0, n, col[k].data, p));
cleanup:
    if (st != SL_OK) sl_history_free(h);
    return st;
}

sl_status sl_store_solution_read_history(sl_ctx *ctx, const char *path, sl_history *h)
{
    sl_status st = SL_OK;
    hid_t f = H5I_INVALID_HID;
    SL_TRY(sl_h5_open(ctx, path, 0, &f));
    st = sl_agree(ctx, sl_history_read(ctx, f, h, path));
cleanup:
    if (f >= 0) H5Fclose(f);
    return st;
}

static const char *kind_str(sl_file_kind k)
{
    return k == SL_FILE_VALUES ? "values" : k == SL_FILE_CHECKPOINT ? "checkpoint" : "solution";
}

sl_status sl_store_solution_write(sl_ctx *ctx, const char *path, sl_file_kind kind, int64_t n_states,
                                  int64_t s_begin, int64_t n_local, const double *value,
                                  const int32_t *actions, const sl_solution_record *in, const sl_history *hist)
{
    return sl_store_solution_write_ex(ctx, path, kind, n_states, s_begin, n_local, value, actions, in, hist, NULL,
                                      NULL);
}

sl_status sl_store_solution_write_ex(sl_ctx *ctx, const char *path, sl_file_kind kind, int64_t n_states,
                                     int64_t s_begin, int64_t n_local, const double *value,
                                     const int32_t *actions, const sl_solution_record *in, const sl_history *hist,
                                     sl_store_extra_fn extra, const void *extra_arg)
{
    sl_status st = SL_OK;
    sl_outfile of;
    hid_t f = H5I_INVALID_HID;
    double need = 12.0 * (double)n_states + 64.0 * (double)(hist ? hist->n : 0);
    SL_TRY(sl_h5_space_check(ctx, path, need));
    SL_TRY(sl_outfile_begin(ctx, &of, path));
    SL_TRY(sl_outfile_reserve(ctx, &of, need + SL_H5_METADATA_ALLOWANCE));
    SL_TRY(sl_h5_create(ctx, of.tmp_path, &f));
    const char *p = path;
    st = sl_h5_attr_write_str(ctx, f, "sluice_format", kind_str(kind), p);
    if (st == SL_OK) st = sl_h5_attr_write_i64(ctx, f, "format_version", SLUICE_FORMAT_VERSION, p);
    if (st == SL_OK) st = sl_h5_attr_write_str(ctx, f, "model_fingerprint", in->model_fingerprint, p);
    if (st == SL_OK) st = sl_h5_attr_write_str(ctx, f, "method", in->method, p);
    if (st == SL_OK && in->order[0]) st = sl_h5_attr_write_str(ctx, f, "order", in->order, p);
    if (st == SL_OK && in->evaluation[0]) st = sl_h5_attr_write_str(ctx, f, "evaluation", in->evaluation, p);
    if (st == SL_OK) st = sl_h5_attr_write_i64(ctx, f, "converged", in->converged, p);
    if (st == SL_OK) st = sl_h5_attr_write_i64(ctx, f, "iterations", in->iterations, p);
    if (st == SL_OK) st = sl_h5_attr_write_i64(ctx, f, "sweeps", in->sweeps, p);
    if (st == SL_OK && in->ranks > 0) st = sl_h5_attr_write_i64(ctx, f, "ranks", in->ranks, p);
    if (st == SL_OK) st = sl_h5_attr_write_i64(ctx, f, "n_states", n_states, p);
    if (st == SL_OK) st = sl_h5_attr_write_f64(ctx, f, "seconds", in->seconds, p);
    if (st == SL_OK) st = sl_h5_attr_write_f64(ctx, f, "tolerance", in->tolerance, p);
    if (st == SL_OK) st = sl_h5_attr_write_f64(ctx, f, "discount", in->discount, p);
    if (st == SL_OK) st = sl_h5_attr_write_f64(ctx, f, "residual_sup", in->residual_sup, p);
    if (st == SL_OK) st = sl_h5_attr_write_f64(ctx, f, "residual_span", in->residual_span, p);
    if (st == SL_OK) st = sl_h5_attr_write_f64(ctx, f, "residual_min", in->residual_min, p);
    if (st == SL_OK) st = sl_h5_attr_write_f64(ctx, f, "residual_max", in->residual_max, p);
    if (st == SL_OK && kind == SL_FILE_VALUES)
        st = sl_h5_attr_write_f64(ctx, f, "error_bound", in->value_error_bound, p);
    if (st == SL_OK) st = sl_h5_attr_write_f64(ctx, f, "value_error_bound", in->value_error_bound, p);
    if (st == SL_OK && kind != SL_FILE_VALUES)
        st = sl_h5_attr_write_f64(ctx, f, "policy_loss_bound", in->policy_loss_bound, p);
    if (st == SL_OK && in->visit_adjust != 0.0)
        st = sl_h5_attr_write_f64(ctx, f, "visit_adjust", in->visit_adjust, p);
    if (st == SL_OK) st = sl_h5_attr_write_str(ctx, f, "created_by", "sluice " SLUICE_VERSION, p);
    SL_TRY(sl_agree(ctx, st));
    SL_TRY(sl_h5_write_1d(ctx, f, "/value", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, n_states, s_begin, n_local, value, 1, p));
    if (actions)
        SL_TRY(sl_h5_write_1d(ctx, f, "/policy", H5T_STD_I32LE, H5T_NATIVE_INT32, n_states, s_begin, n_local, actions,
                              1, p));
    if (hist && hist->n > 0) {
        int64_t n = hist->n, c = ctx->rank == 0 ? n : 0;
        sl_history_column col[SL_HISTORY_COLUMNS];
        sl_history_columns(hist, col);
        for (int k = 0; k < SL_HISTORY_COLUMNS; k++)
            SL_TRY(sl_h5_write_1d(ctx, f, col[k].name, col[k].ftype, col[k].mtype, n, 0, c, col[k].data, 0, p));
    }
    if (extra) SL_TRY(sl_agree(ctx, extra(ctx, f, p, extra_arg)));
    st = sl_h5_close(ctx, &f, p);
cleanup:
    sl_h5_discard(ctx, &f, of.tmp_path);
    return sl_outfile_end(ctx, &of, st);
}

sl_status sl_store_solution_read(sl_ctx *ctx, const char *path, sl_file_kind kind, int64_t n_states,
                                 int64_t s_begin, int64_t n_local, double *value, int32_t *actions,
                                 sl_solution_record *in)
{
    sl_status st = SL_OK;
    hid_t f = H5I_INVALID_HID;
    char fmt[32] = "";
    int64_t conv = 0;
    memset(in, 0, sizeof(*in));
    SL_TRY(sl_h5_open(ctx, path, 0, &f));
    st = sl_h5_attr_read_str(ctx, f, "sluice_format", fmt, sizeof(fmt), 1, path);
    if (st == SL_OK && strcmp(fmt, kind_str(kind)) != 0 &&
        !(kind == SL_FILE_SOLUTION && strcmp(fmt, "values") == 0 && actions == NULL))
        st = SL_ERR(ctx, SL_EDATA, "%s: is a %s file, not a %s file", path, fmt, kind_str(kind));
    int64_t ver = 0;
    if (st == SL_OK) st = sl_h5_attr_read_i64(ctx, f, "format_version", &ver, 1, path);
    if (st == SL_OK && (ver < 1 || ver > SLUICE_FORMAT_VERSION))
        st = SL_ERR(ctx, SL_EDATA, "%s: format_version %lld is not supported (this sluice reads version %d%s)", path,
                    (long long)ver, SLUICE_FORMAT_VERSION, ver > SLUICE_FORMAT_VERSION ? "; written by a newer sluice" : "");
    if (st == SL_OK) st = sl_h5_attr_read_str(ctx, f, "model_fingerprint", in->model_fingerprint,
                                              sizeof(in->model_fingerprint), 1, path);
    if (st == SL_OK) st = sl_h5_attr_read_str(ctx, f, "method", in->method, sizeof(in->method), 0, path);
    if (st == SL_OK) st = sl_h5_attr_read_str(ctx, f, "order", in->order, sizeof(in->order), 0, path);
    if (st == SL_OK) st = sl_h5_attr_read_i64(ctx, f, "converged", &conv, 0, path);
    if (st == SL_OK) st = sl_h5_attr_read_i64(ctx, f, "iterations", &in->iterations, 0, path);
    if (st == SL_OK) st = sl_h5_attr_read_i64(ctx, f, "sweeps", &in->sweeps, 0, path);
    if (st == SL_OK) st = sl_h5_attr_read_i64(ctx, f, "ranks", &in->ranks, 0, path);
    if (st == SL_OK) st = sl_h5_attr_read_f64(ctx, f, "seconds", &in->seconds, 0, path);
    if (st == SL_OK) st = sl_h5_attr_read_f64(ctx, f, "tolerance", &in->tolerance, 0, path);
    if (st == SL_OK) st = sl_h5_attr_read_f64(ctx, f, "discount", &in->discount, 0, path);
    if (st == SL_OK) st = sl_h5_attr_read_f64(ctx, f, "residual_sup", &in->residual_sup, 0, path);
    if (st == SL_OK) st = sl_h5_attr_read_f64(ctx, f, "residual_span", &in->residual_span, 0, path);
    if (st == SL_OK) st = sl_h5_attr_read_f64(ctx, f, "residual_min", &in->residual_min, 0, path);
    if (st == SL_OK) st = sl_h5_attr_read_f64(ctx, f, "residual_max", &in->residual_max, 0, path);
    if (st == SL_OK) st = sl_h5_attr_read_f64(ctx, f, "value_error_bound", &in->value_error_bound, 0, path);
    if (st == SL_OK) st = sl_h5_attr_read_f64(ctx, f, "policy_loss_bound", &in->policy_loss_bound, 0, path);
    if (st == SL_OK) st = sl_h5_attr_read_f64(ctx, f, "visit_adjust", &in->visit_adjust, 0, path);
    if (st == SL_OK && !isfinite(in->visit_adjust))
        st = SL_ERR(ctx, SL_EDATA, "%s: /visit_adjust is not finite", path);
    in->converged = conv != 0;
    if (st == SL_OK) st = sl_saved_length_check(ctx, path, "/value", sl_h5_length(f, "/value"), n_states);
    if (st == SL_OK && actions) st = sl_saved_length_check(ctx, path, "/policy", sl_h5_length(f, "/policy"), n_states);
    SL_TRY(sl_agree(ctx, st));
    if (value) {
        SL_TRY(sl_agree(ctx, sl_h5_read_1d(ctx, f, "/value", H5T_NATIVE_DOUBLE, n_states, s_begin, n_local, value, path)));
        SL_TRY(sl_agree(ctx, sl_saved_values_check(ctx, path, "/value", s_begin, n_local, value)));
    }
    if (actions)
        SL_TRY(sl_agree(ctx, sl_h5_read_1d(ctx, f, "/policy", H5T_NATIVE_INT32, n_states, s_begin, n_local, actions, path)));
cleanup:
    if (f >= 0) H5Fclose(f);
    return st;
}
