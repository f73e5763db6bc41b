/* statecsv.c - CSV files keyed by state: a header `state,LAST` or every
 * factor name then LAST, one row per state given by number or by factor
 * labels / values / @INDEX. Read by the outlook's start distribution and
 * by policies given as a table of actions (rule CSVs). */
#include <errno.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "analysis/analysis.h"

static char *trim(char *s)
{
    while (*s == ' ' || *s == '\t') s++;
    size_t n = strlen(s);
    while (n > 0 && (s[n - 1] == ' ' || s[n - 1] == '\t' || s[n - 1] == '\r' || s[n - 1] == '\n')) s[--n] = '\0';
    return s;
}

/* One line of f into buf (newline kept, NUL-terminated). Returns 1 for a
 * line, 0 at the end of the file, -1 for a line longer than cap - 2 bytes,
 * -2 for a line holding a NUL byte (which the string functions would take
 * for its end: part of the line unread, or the line called too long). */
static int read_line(FILE *f, char *buf, size_t cap)
{
    size_t n = 0;
    int c, nul = 0;
    while ((c = getc(f)) != EOF) {
        if (n + 1 >= cap) return -1;
        if (c == '\0') nul = 1;
        buf[n++] = (char)c;
        if (c == '\n') break;
    }
    buf[n] = '\0';
    if (n == 0) return 0;
    return nul ? -2 : 1;
}

/* Split a line at commas in place; returns the number of fields (max + 1: too many). */
static int split(char *line, char **field, int max)
{
    int n = 0;
    char *p = line;
    while (n < max) {
        char *c = strchr(p, ',');
        if (c != NULL) *c = '\0'; /* first: trim this field's end, not the line's */
        field[n++] = trim(p);
        if (c == NULL) return n;
        p = c + 1;
    }
    return max + 1;
}

sl_status sl_state_csv_read(sl_ctx *ctx, const sl_meta *m, const char *path, const char *last, sl_state_row_fn fn,
                            void *user)
{
    sl_status st = SL_OK;
    FILE *f = fopen(path, "r");
    char line[4096], *field[SLUICE_MAX_FACTORS + 2], where[4200];
    int64_t lineno = 0, rows = 0;
    int by_factor = 0, nf = 0, fmap[SLUICE_MAX_FACTORS + 1];
    if (f == NULL) return SL_ERR(ctx, SL_ENOINPUT, "%s: %s", path, strerror(errno));
    int got = read_line(f, line, sizeof(line));
    if (got == 0) SL_FAIL(SL_EDATA, "%s: empty file (expected a header line)", path);
    lineno = 1;
    if (got < 0) SL_FAIL(SL_EDATA, "%s line 1: %s", path, got == -1 ? "line too long" : "a NUL byte (not a text file?)");
    nf = split(line, field, SLUICE_MAX_FACTORS + 1);
    if (nf == 2 && strcmp(field[0], "state") == 0 && strcmp(field[1], last) == 0) {
        by_factor = 0;
    } else if (nf == m->n_factors + 1 && m->n_factors > 0 && strcmp(field[nf - 1], last) == 0) {
        by_factor = 1;
        for (int k = 0; k < nf - 1; k++) {
            fmap[k] = sl_meta_factor_index(m, field[k]);
            if (fmap[k] < 0) SL_FAIL(SL_EDATA, "%s line 1: '%s' is not a factor of the model", path, field[k]);
            for (int j = 0; j < k; j++)
                if (fmap[j] == fmap[k]) SL_FAIL(SL_EDATA, "%s line 1: factor %s appears twice", path, field[k]);
        }
    } else {
        SL_FAIL(SL_EDATA, "%s line 1: the header must be 'state,%s' or every factor name then '%s'", path, last, last);
    }
    while ((got = read_line(f, line, sizeof(line))) != 0) {
        lineno++;
        if (got < 0)
            SL_FAIL(SL_EDATA, "%s line %lld: %s", path, (long long)lineno,
                    got == -1 ? "line too long" : "a NUL byte (not a text file?)");
        if (trim(line)[0] == '\0') continue;
        int k = split(line, field, SLUICE_MAX_FACTORS + 1);
        if (k != nf) SL_FAIL(SL_EDATA, "%s line %lld: %d fields, the header has %d", path, (long long)lineno, k, nf);
        snprintf(where, sizeof(where), "%s line %lld", path, (long long)lineno);
        int64_t s = 0;
        if (!by_factor) {
            char *end = NULL;
            errno = 0;
            long long v = strtoll(field[0], &end, 10);
            if (field[0][0] == '\0' || *end != '\0' || errno == ERANGE || v < 0 || v >= m->n_states)
                SL_FAIL(SL_EDATA, "%s: state '%s' is not a state number of the model (0..%lld)", where, field[0],
                        (long long)m->n_states - 1);
            s = (int64_t)v;
        } else {
            int64_t idx[SLUICE_MAX_FACTORS];
            for (int j = 0; j < nf - 1; j++) {
                char spec[SL_NAME_MAX + 80], what[4300];
                int fi;
                int64_t ii;
                const char *v = field[j];
                if (v[0] == '@') snprintf(spec, sizeof(spec), "%s%s", m->factor_name[fmap[j]], v);
                else snprintf(spec, sizeof(spec), "%s=%s", m->factor_name[fmap[j]], v);
                snprintf(what, sizeof(what), "%s:", where);
                if (sl_factor_parse(ctx, m, spec, what, &fi, &ii) != SL_OK) {
                    st = SL_EDATA;
                    goto cleanup;
                }
                idx[fi] = ii;
            }
            for (int fi = m->n_factors - 1; fi >= 0; fi--) s = s * m->factor_size[fi] + idx[fi];
        }
        SL_TRY(fn(ctx, user, where, lineno, s, field[nf - 1]));
        rows++;
    }
    if (ferror(f)) SL_FAIL(SL_EIO, "%s: read error", path);
    if (rows == 0) SL_FAIL(SL_EDATA, "%s: no rows after the header", path);
cleanup:
    fclose(f);
    return st;
}

/* ---- start distributions (outlook and simulate) ----------------------------- */

typedef struct start_rows {
    int64_t n, cap, *states;
    double *prob, sum;
} start_rows;

static sl_status start_row(sl_ctx *ctx, void *user, const char *where, int64_t line, int64_t s, const char *text)
{
    start_rows *r = user;
    char *end = NULL;
    (void)line;
    errno = 0;
    double p = strtod(text, &end);
    if (text[0] == '\0' || *end != '\0' || errno == ERANGE || !isfinite(p) || p < 0.0 || p > 1.0)
        return SL_ERR(ctx, SL_EDATA, "%s: probability '%s' is not a number in [0, 1]", where, text);
    if (r->n == r->cap) {
        int64_t nc = r->cap ? 2 * r->cap : 1024;
        int64_t *ns = realloc(r->states, (size_t)nc * sizeof(*ns));
        if (ns == NULL) return SL_ERR(ctx, SL_ENOMEM, "%s: out of memory", where);
        r->states = ns;
        double *np = realloc(r->prob, (size_t)nc * sizeof(*np));
        if (np == NULL) return SL_ERR(ctx, SL_ENOMEM, "%s: out of memory", where);
        r->prob = np;
        r->cap = nc;
    }
    r->states[r->n] = s;
    r->prob[r->n++] = p;
    r->sum += p;
    return SL_OK;
}

sl_status sl_start_csv_read(sl_ctx *ctx, const sl_meta *m, const char *path, int64_t *n_out, int64_t **st_out,
                                double **p_out)
{
    start_rows r;
    memset(&r, 0, sizeof(r));
    sl_status st = sl_state_csv_read(ctx, m, path, "probability", start_row, &r);
    if (st == SL_OK && fabs(r.sum - 1.0) > 1e-9)
        st = SL_ERR(ctx, SL_EDATA, "%s: probabilities sum to %.17g, not 1 (tolerance 1e-9)", path, r.sum);
    if (st != SL_OK) {
        free(r.states);
        free(r.prob);
        return st;
    }
    *n_out = r.n;
    *st_out = r.states;
    *p_out = r.prob;
    return SL_OK;
}
