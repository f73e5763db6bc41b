/* fuzz_meta.h - what the text-parser fuzz targets share (fuzz_parse.c,
 * fuzz_statecsv.c; fuzz_solution.c takes only the byte reader and the
 * context): a small model description (sl_meta) shaped by the first
 * input bytes, and the rules for naming a factor value or a state written
 * here independently from docs/results.md ("Naming a factor value or a
 * state"), to decide what the library's parsers must accept and what they
 * must give. Header-only, test code.
 *
 * The rules, as documented:
 *   NAME@INDEX    the index, an integer in 0..size-1 (C strtoll, base 10,
 *                 the whole text);
 *   NAME=LABEL    the label, compared exactly, for a factor with labels;
 *   NAME=VALUE    for a factor with values: the value as printed ("%.6g")
 *                 or a number within a relative 1e-9 of a grid value;
 *                 a value printed as given wins over a nearby one (the
 *                 printed form of every value must name that value);
 *   NAME=INDEX    for a factor with neither;
 *   a state:      a state number in 0..n-1, or every factor once,
 *                 comma-separated, each part shorter than 256 characters.
 */
#ifndef SL_FUZZ_META_H
#define SL_FUZZ_META_H

#include <errno.h>
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "analysis/analysis.h"
#include "core/core.h"
#include "model/model.h"

typedef struct fz_reader {
    const uint8_t *d;
    size_t n, i;
} fz_reader;

static uint8_t fz_byte(fz_reader *r) { return r->i < r->n ? r->d[r->i++] : 0; }

/* Fill m (zeroed by the caller) with 0..3 factors; returns 0 on out of
 * memory. Factors have values (some grids finer than the parser's 1e-9
 * tolerance, some whose values print alike), labels, or neither. */
static int fz_meta_build(fz_reader *r, sl_meta *m)
{
    static const char *names[3] = {"storage", "season", "gate"};
    static const char *pool[8] = {"dry", "wet", "flood", "Jan", "Feb", "2", "low", "high"};
    static const double base[4] = {0.0, -3.0, 100.0, 1e6};
    static const double step[8] = {1.0, 0.5, 12.5, 1e-12, 1.0, 1e-3, 7.0, 0.1};
    uint8_t b = fz_byte(r);
    m->n_factors = b % 4;
    m->n_states = 1;
    if (m->n_factors == 0) m->n_states = 1 + fz_byte(r) % 40;
    for (int f = 0; f < m->n_factors; f++) {
        uint8_t k = fz_byte(r), g = fz_byte(r);
        int64_t n = 1 + (k >> 2) % 5;
        snprintf(m->factor_name[f], SL_NAME_MAX, "%s", names[f]);
        m->factor_size[f] = n;
        m->n_states *= n;
        if (k % 3 == 0) {
            if ((m->factor_value[f] = malloc((size_t)n * sizeof(double))) == NULL) return 0;
            for (int64_t i = 0; i < n; i++) m->factor_value[f][i] = base[g % 4] + (double)i * step[(g >> 2) % 8];
            snprintf(m->factor_unit[f], SL_NAME_MAX, "hm3");
        } else if (k % 3 == 1) {
            if ((m->factor_label[f] = calloc((size_t)n, SL_NAME_MAX)) == NULL) return 0;
            for (int64_t i = 0; i < n; i++) snprintf(m->factor_label[f][i], SL_NAME_MAX, "%s", pool[(g + i) % 8]);
        }
    }
    return 1;
}

/* strtoll over the whole text, as the rules say. */
static int fz_int(const char *s, int64_t *out)
{
    char *end = NULL;
    errno = 0;
    long long v = strtoll(s, &end, 10);
    if (s[0] == '\0' || *end != '\0' || errno == ERANGE) return 0;
    *out = v;
    return 1;
}

/* Expected result of NAME=VALUE / NAME@INDEX: 1 and (factor, index), or 0. */
static int fz_expect_factor(const sl_meta *m, const char *text, int *factor, int64_t *index)
{
    const char *eq = strchr(text, '='), *at = strchr(text, '@'), *sep = eq;
    if (at && (!eq || at < eq)) sep = at;
    if (sep == NULL || m->n_factors == 0) return 0;
    int f = -1;
    for (int k = 0; k < m->n_factors; k++)
        if (strlen(m->factor_name[k]) == (size_t)(sep - text) && strncmp(m->factor_name[k], text, (size_t)(sep - text)) == 0)
            f = k;
    if (f < 0) return 0;
    const char *v = sep + 1;
    int64_t n = m->factor_size[f], i = -1;
    if (*sep == '@' || (!m->factor_label[f] && !m->factor_value[f])) {
        if (!fz_int(v, &i) || i < 0 || i >= n) return 0;
    } else if (m->factor_label[f]) {
        for (int64_t k = n - 1; k >= 0; k--) /* labels are distinct: any order */
            if (strcmp(m->factor_label[f][k], v) == 0) i = k;
    } else {
        char *end = NULL, pr[64];
        errno = 0;
        double x = strtod(v, &end);
        if (v[0] == '\0' || *end != '\0' || errno == ERANGE || !isfinite(x)) return 0;
        for (int64_t k = 0; k < n && i < 0; k++) {
            snprintf(pr, sizeof(pr), "%.6g", m->factor_value[f][k]);
            if (strcmp(pr, v) == 0) i = k;
        }
        for (int64_t k = 0; k < n && i < 0; k++) {
            double g = m->factor_value[f][k];
            if (fabs(g - x) <= 1e-9 * fmax(1.0, fabs(g))) i = k;
        }
    }
    if (i < 0) return 0;
    *factor = f;
    *index = i;
    return 1;
}

/* Expected result of a state: 1 and the state, or 0. */
static int fz_expect_state(const sl_meta *m, const char *text, int64_t *state)
{
    int64_t s, idx[SLUICE_MAX_FACTORS];
    int seen[SLUICE_MAX_FACTORS] = {0}, nparts = 0;
    if (fz_int(text, &s)) {
        if (s < 0 || s >= m->n_states) return 0;
        *state = s;
        return 1;
    }
    size_t len = strlen(text);
    char *copy = malloc(len + 1);
    if (copy == NULL) return 0;
    memcpy(copy, text, len + 1);
    int ok = len > 0 && text[len - 1] != ',';
    for (char *p = copy; ok;) {
        char *comma = strchr(p, ',');
        if (comma) *comma = '\0';
        int f;
        int64_t i;
        if (strlen(p) == 0 || strlen(p) >= 256 || !fz_expect_factor(m, p, &f, &i) || seen[f]) ok = 0;
        else {
            seen[f] = 1;
            idx[f] = i;
            nparts++;
        }
        if (!comma) break;
        p = comma + 1;
    }
    free(copy);
    if (!ok || nparts != m->n_factors) return 0;
    s = 0;
    for (int f = m->n_factors - 1; f >= 0; f--) s = s * m->factor_size[f] + idx[f];
    *state = s;
    return 1;
}

/* The single-process context the library's local functions need: filled
 * by hand, no MPI_Init (whose start-up allocations would show up in the
 * per-input leak checks). */
static void fz_ctx_init(sl_ctx *ctx)
{
    memset(ctx, 0, sizeof(*ctx));
    ctx->comm = MPI_COMM_NULL;
    ctx->size = 1;
}

#endif /* SL_FUZZ_META_H */
