/* content.c - the content checks of solution, values, stage and checkpoint
 * files once HDF5 has read their datasets: lengths, finite values, policy
 * actions the model offers in their state. Plain functions over arrays (no
 * HDF5, no MPI), so that the loaders and the fuzz target
 * (tests/fuzz/fuzz_solution.c) run the same code. Local: callers agree. */
#include <math.h>

#include "store/store.h"

sl_status sl_saved_length_check(sl_ctx *ctx, const char *path, const char *dataset, int64_t length,
                                int64_t n_states)
{
    if (length == n_states) return SL_OK;
    if (length < 0)
        return SL_ERR(ctx, SL_EDATA, "%s: %s is missing or not one-dimensional (the model has %lld states)", path,
                      dataset, (long long)n_states);
    return SL_ERR(ctx, SL_EDATA, "%s: %s has %lld entries but the model has %lld states", path, dataset,
                  (long long)length, (long long)n_states);
}

sl_status sl_saved_values_check(sl_ctx *ctx, const char *path, const char *dataset, int64_t s_begin, int64_t n,
                                const double *value)
{
    for (int64_t i = 0; i < n; i++)
        if (!isfinite(value[i]))
            return SL_ERR(ctx, SL_EDATA, "%s: %s: state %lld: value is not finite (%g)", path, dataset,
                          (long long)(s_begin + i), value[i]);
    return SL_OK;
}

sl_status sl_saved_policy_check(sl_ctx *ctx, const char *path, const char *dataset, const int64_t *first_pair,
                                const int32_t *pair_action, int64_t s_begin, int64_t n, const int32_t *action,
                                int64_t *chosen, const char *model)
{
    for (int64_t i = 0; i < n; i++) {
        int64_t k = sl_pairs_find_action(first_pair, first_pair[0], pair_action, i, action[i]);
        if (k < 0)
            return SL_ERR(ctx, SL_EDATA, "%s: %s: state %lld: policy action %d is not available in the model%s%s%s",
                          path, dataset, (long long)(s_begin + i), (int)action[i], model && model[0] ? " (" : "",
                          model && model[0] ? model : "", model && model[0] ? ")" : "");
        if (chosen) chosen[i] = k;
    }
    return SL_OK;
}
