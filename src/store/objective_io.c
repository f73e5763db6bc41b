/* objective_io.c - the objective-specific part of solution files: objective
 * name and scalars as attributes, finite-horizon stages as one 1-D dataset
 * per stage (/stage/value_T, /stage/policy_T, each split over ranks like
 * /value), the total-reward steps bound as /steps_bound. docs/formats.md. */
#include <math.h>
#include <string.h>

#include "solve/objectives.h"
#include "store/h5.h"

typedef struct extra_arg {
    const sl_obj_file *x;
    int64_t n_states, s_begin, n_local;
} extra_arg;

static sl_status write_extra(sl_ctx *ctx, int64_t file, const char *p, const void *arg)
{
    const extra_arg *a = arg;
    const sl_obj_file *x = a->x;
    hid_t f = (hid_t)file;
    sl_status st = sl_h5_attr_write_str(ctx, f, "objective", sl_objective_name(x->objective), p);
    int64_t n = a->n_local;
    char name[64];
    if (x->objective == SL_OBJ_FINITE) {
        if (st == SL_OK) st = sl_h5_attr_write_i64(ctx, f, "horizon", x->horizon, p);
        if (st == SL_OK) st = sl_h5_attr_write_i64(ctx, f, "first_stage", x->first_stage, p);
        if (st == SL_OK) st = sl_h5_attr_write_f64(ctx, f, "roundoff_bound", x->roundoff, p);
        if (st == SL_OK) st = sl_h5_attr_write_str(ctx, f, "terminal", x->terminal, p);
        for (int64_t t = x->first_stage; t <= x->horizon && st == SL_OK; t++) {
            snprintf(name, sizeof(name), "/stage/value_%06lld", (long long)t);
            st = sl_h5_write_1d(ctx, f, name, H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, a->n_states, a->s_begin, n,
                                x->stage_value + (t - x->first_stage) * n, 1, p);
            if (st == SL_OK && t < x->horizon) {
                snprintf(name, sizeof(name), "/stage/policy_%06lld", (long long)t);
                st = sl_h5_write_1d(ctx, f, name, H5T_STD_I32LE, H5T_NATIVE_INT32, a->n_states, a->s_begin, n,
                                    x->stage_action + (t - x->first_stage) * n, 1, p);
            }
        }
    } else if (x->objective == SL_OBJ_TOTAL) {
        if (st == SL_OK) st = sl_h5_attr_write_f64(ctx, f, "steps_bound_max", x->steps_max, p);
        if (st == SL_OK) st = sl_h5_attr_write_i64(ctx, f, "n_absorbing", x->n_absorbing, p);
        if (st == SL_OK)
            st = sl_h5_write_1d(ctx, f, "/steps_bound", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, a->n_states, a->s_begin,
                                n, x->steps, 1, p);
    } else if (x->objective == SL_OBJ_AVERAGE) {
        if (st == SL_OK) st = sl_h5_attr_write_f64(ctx, f, "gain", x->gain, p);
        if (st == SL_OK) st = sl_h5_attr_write_f64(ctx, f, "gain_lower", x->gain_lower, p);
        if (st == SL_OK) st = sl_h5_attr_write_f64(ctx, f, "gain_upper", x->gain_upper, p);
        if (st == SL_OK) st = sl_h5_attr_write_f64(ctx, f, "aperiodicity", x->aperiodicity, p);
    }
    return st;
}

sl_status sl_store_objective_write(sl_ctx *ctx, const char *path, int64_t n_states, int64_t s_begin,
                                   int64_t n_local, const double *value, const int32_t *actions,
                                   const sl_solution_record *info, const sl_obj_file *x)
{
    extra_arg a = {x, n_states, s_begin, n_local};
    return sl_store_solution_write_ex(ctx, path, SL_FILE_SOLUTION, n_states, s_begin, n_local, value, actions, info,
                                      NULL, write_extra, &a);
}

void sl_obj_file_free(sl_obj_file *x)
{
    if (x == NULL) return;
    free(x->stage_value);
    free(x->stage_action);
    free(x->steps);
    memset(x, 0, sizeof(*x));
}

sl_status sl_store_objective_read(sl_ctx *ctx, const char *path, int64_t n_states, int64_t s_begin,
                                  int64_t n_local, sl_obj_file *x)
{
    sl_status st = SL_OK;
    hid_t f = H5I_INVALID_HID;
    char obj[32] = "discounted", name[64];
    memset(x, 0, sizeof(*x));
    SL_TRY(sl_h5_open(ctx, path, 0, &f));
    st = sl_h5_attr_read_str(ctx, f, "objective", obj, sizeof(obj), 0, path);
    int o = 0;
    if (st == SL_OK && !sl_objective_parse(obj, (sl_objective *)&o))
        st = SL_ERR(ctx, SL_EDATA, "%s: unknown objective \"%s\"", path, obj);
    SL_TRY(sl_agree(ctx, st));
    x->objective = (sl_objective)o;
    int64_t n = n_local;
    if (x->objective == SL_OBJ_FINITE) {
        st = sl_h5_attr_read_i64(ctx, f, "horizon", &x->horizon, 1, path);
        if (st == SL_OK) st = sl_h5_attr_read_i64(ctx, f, "first_stage", &x->first_stage, 1, path);
        if (st == SL_OK) st = sl_h5_attr_read_f64(ctx, f, "roundoff_bound", &x->roundoff, 0, path);
        if (st == SL_OK) st = sl_h5_attr_read_str(ctx, f, "terminal", x->terminal, sizeof(x->terminal), 0, path);
        if (st == SL_OK && !(x->horizon >= 1 && x->first_stage >= 0 && x->first_stage <= x->horizon &&
                             x->horizon < ((int64_t)1 << 30)))
            st = SL_ERR(ctx, SL_EDATA, "%s: horizon %lld / first stage %lld are not valid", path,
                        (long long)x->horizon, (long long)x->first_stage);
        SL_TRY(sl_agree(ctx, st));
        int64_t ns = x->horizon - x->first_stage;
        if (SL_ALLOC(ctx, x->stage_value, (ns + 1) * n + 1, "stage values") == NULL ||
            SL_ALLOC(ctx, x->stage_action, ns * n + 1, "stage policy") == NULL)
            st = SL_ENOMEM;
        SL_TRY(sl_agree(ctx, st));
        for (int64_t t = x->first_stage; t <= x->horizon; t++) {
            snprintf(name, sizeof(name), "/stage/value_%06lld", (long long)t);
            SL_TRY(sl_agree(ctx, sl_saved_length_check(ctx, path, name, sl_h5_length(f, name), n_states)));
            SL_TRY(sl_agree(ctx, sl_h5_read_1d(ctx, f, name, H5T_NATIVE_DOUBLE, n_states, s_begin, n,
                                               x->stage_value + (t - x->first_stage) * n, path)));
            SL_TRY(sl_agree(ctx, sl_saved_values_check(ctx, path, name, s_begin, n,
                                                       x->stage_value + (t - x->first_stage) * n)));
            if (t == x->horizon) break;
            snprintf(name, sizeof(name), "/stage/policy_%06lld", (long long)t);
            SL_TRY(sl_agree(ctx, sl_saved_length_check(ctx, path, name, sl_h5_length(f, name), n_states)));
            SL_TRY(sl_agree(ctx, sl_h5_read_1d(ctx, f, name, H5T_NATIVE_INT32, n_states, s_begin, n,
                                               x->stage_action + (t - x->first_stage) * n, path)));
        }
    } else if (x->objective == SL_OBJ_TOTAL) {
        st = sl_h5_attr_read_f64(ctx, f, "steps_bound_max", &x->steps_max, 0, path);
        if (st == SL_OK) st = sl_h5_attr_read_i64(ctx, f, "n_absorbing", &x->n_absorbing, 0, path);
        if (st == SL_OK)
            st = sl_saved_length_check(ctx, path, "/steps_bound", sl_h5_length(f, "/steps_bound"), n_states);
        SL_TRY(sl_agree(ctx, st));
        if (SL_ALLOC(ctx, x->steps, n + 1, "steps bound") == NULL) st = SL_ENOMEM;
        SL_TRY(sl_agree(ctx, st));
        SL_TRY(sl_agree(ctx, sl_h5_read_1d(ctx, f, "/steps_bound", H5T_NATIVE_DOUBLE, n_states, s_begin, n, x->steps,
                                           path)));
        for (int64_t i = 0; i < n && st == SL_OK; i++)
            if (!(x->steps[i] >= 0 && isfinite(x->steps[i])))
                st = SL_ERR(ctx, SL_EDATA, "%s: /steps_bound: state %lld: not a finite non-negative number", path,
                            (long long)(s_begin + i));
        SL_TRY(sl_agree(ctx, st));
    } else if (x->objective == SL_OBJ_AVERAGE) {
        st = sl_h5_attr_read_f64(ctx, f, "gain", &x->gain, 1, path);
        if (st == SL_OK) st = sl_h5_attr_read_f64(ctx, f, "gain_lower", &x->gain_lower, 0, path);
        if (st == SL_OK) st = sl_h5_attr_read_f64(ctx, f, "gain_upper", &x->gain_upper, 0, path);
        if (st == SL_OK) st = sl_h5_attr_read_f64(ctx, f, "aperiodicity", &x->aperiodicity, 0, path);
        SL_TRY(sl_agree(ctx, st));
    }
cleanup:
    if (f >= 0) H5Fclose(f);
    if (st != SL_OK) sl_obj_file_free(x);
    return st;
}

sl_status sl_store_terminal_read(sl_ctx *ctx, const char *model, int64_t n_states, int64_t s_begin, int64_t n_local,
                                 double *value, int *found)
{
    sl_status st = SL_OK;
    hid_t f = H5I_INVALID_HID;
    *found = 0;
    SL_TRY(sl_h5_open(ctx, model, 0, &f));
    int64_t len = sl_h5_length(f, "/terminal_value");
    if (len < 0) goto cleanup;
    SL_TRY(sl_agree(ctx, sl_saved_length_check(ctx, model, "/terminal_value", len, n_states)));
    SL_TRY(sl_agree(ctx, sl_h5_read_1d(ctx, f, "/terminal_value", H5T_NATIVE_DOUBLE, n_states, s_begin, n_local, value,
                                       model)));
    SL_TRY(sl_agree(ctx, sl_saved_values_check(ctx, model, "/terminal_value", s_begin, n_local, value)));
    *found = 1;
cleanup:
    if (f >= 0) H5Fclose(f);
    return st;
}
