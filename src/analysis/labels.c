/* labels.c - factor labels and the NAME=VALUE / NAME@INDEX forms of the
 * command line (docs/formats.md, "Naming a factor value or a state"). */
#include <errno.h>
#include <math.h>
#include <string.h>

#include "analysis/analysis.h"

int64_t sl_factor_stride(const sl_meta *m, int f)
{
    int64_t s = 1;
    for (int i = 0; i < f; i++) s *= m->factor_size[i];
    return s;
}

void sl_factor_label(const sl_meta *m, int f, int64_t i, char *buf, size_t n)
{
    if (m->factor_label[f]) snprintf(buf, n, "%s", m->factor_label[f][i]);
    else if (m->factor_value[f]) snprintf(buf, n, "%.6g", m->factor_value[f][i]);
    else snprintf(buf, n, "%lld", (long long)i);
}

int64_t sl_grid_find(const double *grid, int64_t n, const char *text, double x)
{
    char buf[64];
    for (int64_t k = 0; k < n; k++) {
        snprintf(buf, sizeof(buf), "%.6g", grid[k]);
        if (strcmp(buf, text) == 0) return k;
    }
    for (int64_t k = 0; k < n; k++)
        if (fabs(grid[k] - x) <= 1e-9 * fmax(1.0, fabs(grid[k]))) return k;
    return -1;
}

static void factor_list(const sl_meta *m, char *buf, size_t n)
{
    buf[0] = '\0';
    for (int f = 0; f < m->n_factors; f++) {
        strncat(buf, f ? ", " : "", n - strlen(buf) - 1);
        strncat(buf, m->factor_name[f], n - strlen(buf) - 1);
    }
}

static int parse_i64(const char *s, int64_t *out)
{
    char *end = NULL;
    errno = 0;
    long long v = strtoll(s, &end, 10);
    if (s[0] == '\0' || *end != '\0' || errno == ERANGE) return 0;
    *out = (int64_t)v;
    return 1;
}

sl_status sl_factor_parse(sl_ctx *ctx, const sl_meta *m, const char *text, const char *what, int *factor,
                          int64_t *index)
{
    char name[SL_NAME_MAX + 1], list[1024];
    const char *eq = strchr(text, '='), *at = strchr(text, '@');
    const char *sep = eq && (!at || eq < at) ? eq : at;
    if (m->n_factors == 0)
        return SL_ERR(ctx, SL_EUSAGE, "%s '%s': the model has no named factors (give a state number)", what, text);
    if (sep == NULL || sep == text || (size_t)(sep - text) > SL_NAME_MAX)
        return SL_ERR(ctx, SL_EUSAGE, "%s '%s': expected NAME=VALUE or NAME@INDEX", what, text);
    snprintf(name, sizeof(name), "%.*s", (int)(sep - text), text);
    int f = sl_meta_factor_index(m, name);
    if (f < 0) {
        factor_list(m, list, sizeof(list));
        return SL_ERR(ctx, SL_EUSAGE, "%s '%s': the model has no factor '%s' (factors: %s)", what, text, name, list);
    }
    const char *val = sep + 1;
    int64_t n = m->factor_size[f], i = -1;
    if (*sep == '@') {
        if (!parse_i64(val, &i) || i < 0 || i >= n)
            return SL_ERR(ctx, SL_EUSAGE, "%s '%s': index of factor %s must be an integer in 0..%lld", what, text,
                          name, (long long)n - 1);
    } else if (m->factor_label[f]) {
        for (int64_t k = 0; k < n && i < 0; k++)
            if (strcmp(m->factor_label[f][k], val) == 0) i = k;
        if (i < 0)
            return SL_ERR(ctx, SL_EUSAGE, "%s '%s': '%s' is not a label of factor %s (labels %s .. %s; or use %s@INDEX)",
                          what, text, val, name, m->factor_label[f][0], m->factor_label[f][n - 1], name);
    } else if (m->factor_value[f]) {
        char *end = NULL;
        errno = 0;
        double x = strtod(val, &end);
        if (val[0] == '\0' || *end != '\0' || errno == ERANGE || !isfinite(x))
            return SL_ERR(ctx, SL_EUSAGE, "%s '%s': '%s' is not a number", what, text, val);
        i = sl_grid_find(m->factor_value[f], n, val, x);
        if (i < 0) {
            int64_t best = 0;
            for (int64_t k = 1; k < n; k++)
                if (fabs(m->factor_value[f][k] - x) < fabs(m->factor_value[f][best] - x)) best = k;
            return SL_ERR(ctx, SL_EUSAGE,
                          "%s '%s': %s = %s %s is not on the grid (nearest: %.6g %s, index %lld; give a value as "
                          "printed or %s@INDEX)",
                          what, text, name, val, m->factor_unit[f], m->factor_value[f][best], m->factor_unit[f],
                          (long long)best, name);
        }
    } else {
        if (!parse_i64(val, &i) || i < 0 || i >= n)
            return SL_ERR(ctx, SL_EUSAGE, "%s '%s': factor %s has no values or labels; give an index in 0..%lld", what,
                          text, name, (long long)n - 1);
    }
    *factor = f;
    *index = i;
    return SL_OK;
}

sl_status sl_state_parse(sl_ctx *ctx, const sl_meta *m, const char *text, const char *what, int64_t *state)
{
    int64_t s;
    if (parse_i64(text, &s)) {
        if (s < 0 || s >= m->n_states)
            return SL_ERR(ctx, SL_EUSAGE, "%s %lld is not a state of the model (0..%lld)", what, (long long)s,
                          (long long)m->n_states - 1);
        *state = s;
        return SL_OK;
    }
    int64_t idx[SLUICE_MAX_FACTORS];
    int seen[SLUICE_MAX_FACTORS] = {0};
    char part[256];
    const char *p = text;
    do { /* at least once: an empty text is no state, even of a model without factors */
        const char *comma = strchr(p, ',');
        size_t len = comma ? (size_t)(comma - p) : strlen(p);
        if (len == 0 || len >= sizeof(part))
            return SL_ERR(ctx, SL_EUSAGE, "%s '%s': expected a state number or NAME=VALUE,... for every factor", what,
                          text);
        memcpy(part, p, len);
        part[len] = '\0';
        int f;
        int64_t i;
        sl_status st = sl_factor_parse(ctx, m, part, what, &f, &i);
        if (st != SL_OK) return st;
        if (seen[f]) return SL_ERR(ctx, SL_EUSAGE, "%s '%s': factor %s is given twice", what, text, m->factor_name[f]);
        seen[f] = 1;
        idx[f] = i;
        p += len + (comma ? 1 : 0);
        if (comma && *p == '\0')
            return SL_ERR(ctx, SL_EUSAGE, "%s '%s': trailing comma", what, text);
    } while (*p);
    s = 0;
    for (int f = m->n_factors - 1; f >= 0; f--) {
        if (!seen[f])
            return SL_ERR(ctx, SL_EUSAGE, "%s '%s': factor %s is missing (give every factor, or a state number)", what,
                          text, m->factor_name[f]);
        s = s * m->factor_size[f] + idx[f];
    }
    *state = s;
    return SL_OK;
}

sl_status sl_state_lookup(sl_ctx *ctx, const char *model_path, const char *text, const char *what, int64_t *state)
{
    sl_meta m;
    memset(&m, 0, sizeof(m));
    sl_status st = sl_store_model_meta(ctx, model_path, &m);
    if (st != SL_OK) return st;
    st = sl_agree(ctx, sl_state_parse(ctx, &m, text, what, state));
    sl_meta_free(&m);
    return st;
}
