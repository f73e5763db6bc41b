/* csv.c - streaming CSV tokenizer, strict number fields, shared import glue. */
#ifndef _POSIX_C_SOURCE
#define _POSIX_C_SOURCE 200809L
#endif
#include "input/csv.h"

#include <errno.h>
#include <float.h>
#include <math.h>
#include <stdarg.h>
#include <string.h>
#include <sys/stat.h>

#include "store/store.h"

/* First read buffer; it doubles (up to a line of SL_CSV_LINE_MAX plus CRLF)
 * only when one line does not fit. */
#define CSV_BUF_INITIAL ((size_t)1 << 18)
#define CSV_BUF_MAX (SL_CSV_LINE_MAX + 2)
/* How much of a bad field or header is quoted back in a message. */
#define CSV_SHOW_MAX 60

struct sl_csv {
    FILE *fp;
    const char *name;
    char *buf;                  /* cap + 1 bytes: room for a final NUL */
    size_t cap, len, pos;       /* unread bytes are buf[pos, len) */
    int eof;
    int at_start;               /* nothing read yet (byte-order mark check) */
    int64_t lines_read;         /* lines consumed so far */
    int64_t line;               /* line of the current record */
    const char *const *cols;    /* header names, once checked */
    int ncols;
    int nf;                     /* fields in the current record (stored) */
    int nf_total;               /* fields counted, may exceed nf */
    char *f[SL_CSV_MAX_FIELDS];
    size_t flen[SL_CSV_MAX_FIELDS];
};

static int is_blank(char ch) { return ch == ' ' || ch == '\t' || ch == '\r'; }

/* Copy `s` for a message: printable ASCII only, at most CSV_SHOW_MAX bytes. */
static void show(char *dst, size_t n, const char *s, size_t len)
{
    size_t k = 0;
    for (size_t i = 0; i < len && k + 4 < n; i++) {
        if (i == CSV_SHOW_MAX) {
            memcpy(dst + k, "...", 3);
            k += 3;
            break;
        }
        unsigned char ch = (unsigned char)s[i];
        dst[k++] = (ch >= 0x20 && ch < 0x7f) ? (char)ch : '?';
    }
    dst[k] = '\0';
}

sl_status sl_csv_open(sl_ctx *ctx, FILE *fp, const char *name, sl_csv **out)
{
    *out = NULL;
    sl_csv *c = sl_calloc(ctx, 1, sizeof(*c), "CSV reader");
    if (c == NULL) return SL_ENOMEM;
    c->buf = sl_malloc(ctx, CSV_BUF_INITIAL + 1, 1, "CSV read buffer");
    if (c->buf == NULL) {
        free(c);
        return SL_ENOMEM;
    }
    c->fp = fp;
    c->name = name ? name : "<input>";
    c->cap = CSV_BUF_INITIAL;
    c->at_start = 1;
    *out = c;
    return SL_OK;
}

void sl_csv_free(sl_csv **pc)
{
    if (pc == NULL || *pc == NULL) return;
    free((*pc)->buf);
    free(*pc);
    *pc = NULL;
}

int64_t sl_csv_line(const sl_csv *c) { return c->line; }
const char *sl_csv_name(const sl_csv *c) { return c->name; }

const char *sl_csv_field(const sl_csv *c, int i, size_t *len)
{
    if (i < 0 || i >= c->nf) {
        if (len) *len = 0;
        return "";
    }
    if (len) *len = c->flen[i];
    return c->f[i];
}

sl_status sl_csv_error(sl_ctx *ctx, const sl_csv *c, int i, sl_status st, const char *fmt, ...)
{
    char msg[SL_MSG_MAX];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(msg, sizeof(msg), fmt, ap);
    va_end(ap);
    if (i >= 0 && c->cols != NULL && i < c->ncols)
        return SL_ERR(ctx, st, "%s:%lld: column '%s': %s", c->name, (long long)c->line,
                      c->cols[i], msg);
    if (i >= 0)
        return SL_ERR(ctx, st, "%s:%lld: field %d: %s", c->name, (long long)c->line, i + 1, msg);
    return SL_ERR(ctx, st, "%s:%lld: %s", c->name, (long long)c->line, msg);
}

/* Next physical line, without its '\n', NUL-terminated in the buffer (the
 * pointer stays valid until the next call). *got = 0 at end of input. */
static sl_status read_line(sl_ctx *ctx, sl_csv *c, char **line, size_t *len, int *got)
{
    *got = 0;
    for (;;) {
        char *start = c->buf + c->pos;
        size_t avail = c->len - c->pos;
        char *nl = avail ? memchr(start, '\n', avail) : NULL;
        if (nl != NULL || (c->eof && avail > 0)) {
            size_t n = nl ? (size_t)(nl - start) : avail;
            start[n] = '\0';    /* the '\n', or buf[len] (cap + 1 bytes) */
            c->pos += nl ? n + 1 : n;
            c->lines_read++;
            if (c->at_start) {
                c->at_start = 0;
                if (n >= 3 && memcmp(start, "\xEF\xBB\xBF", 3) == 0) {
                    start += 3;
                    n -= 3;
                }
            }
            *line = start;
            *len = n;
            *got = 1;
            return SL_OK;
        }
        if (c->eof) return SL_OK;
        /* keep the partial line, make room, read more */
        if (c->pos > 0) {
            memmove(c->buf, start, avail);
            c->len = avail;
            c->pos = 0;
        }
        if (c->len == c->cap) {
            if (c->cap >= CSV_BUF_MAX)
                return SL_ERR(ctx, SL_EDATA, "%s:%lld: line is longer than %zu bytes", c->name,
                              (long long)c->lines_read + 1, SL_CSV_LINE_MAX);
            size_t ncap = c->cap * 2 < CSV_BUF_MAX ? c->cap * 2 : CSV_BUF_MAX;
            char *nb = realloc(c->buf, ncap + 1);
            if (nb == NULL)
                return SL_ERR(ctx, SL_ENOMEM, "%s: out of memory for a %zu-byte line buffer",
                              c->name, ncap);
            c->buf = nb;
            c->cap = ncap;
        }
        size_t r = fread(c->buf + c->len, 1, c->cap - c->len, c->fp);
        if (r == 0) {
            if (ferror(c->fp))
                return SL_ERR(ctx, SL_EIO, "%s:%lld: read error: %s", c->name,
                              (long long)c->lines_read + 1, strerror(errno));
            c->eof = 1;
        }
        c->len += r;
    }
}

/* Split a line into trimmed, NUL-terminated fields. Returns 0 for a blank
 * line (nothing but spaces, tabs, CR). */
static int split(sl_csv *c, char *line, size_t len)
{
    size_t i = 0;
    while (i < len && is_blank(line[i])) i++;
    if (i == len) return 0;
    c->nf = 0;
    c->nf_total = 0;
    size_t b = 0;
    for (;;) {
        size_t e = b;
        while (e < len && line[e] != ',') e++;
        size_t fb = b, fe = e;
        while (fb < fe && is_blank(line[fb])) fb++;
        while (fe > fb && is_blank(line[fe - 1])) fe--;
        if (c->nf < SL_CSV_MAX_FIELDS) {
            line[fe] = '\0';    /* fe <= e: the ',', a blank or the line end */
            c->f[c->nf] = line + fb;
            c->flen[c->nf] = fe - fb;
            c->nf++;
        }
        c->nf_total++;
        if (e == len) break;
        b = e + 1;
    }
    return 1;
}

/* Next non-blank line, split; *got = 0 at end of input. */
static sl_status next_nonblank(sl_ctx *ctx, sl_csv *c, int *got)
{
    for (;;) {
        char *line;
        size_t len;
        sl_status st = read_line(ctx, c, &line, &len, got);
        if (st != SL_OK || !*got) return st;
        c->line = c->lines_read;
        /* a quote anywhere: report it before splitting destroys the text */
        char *q = memchr(line, '"', len);
        if (q != NULL) {
            int field = 0;
            for (char *p = line; p < q; p++) field += *p == ',';
            return sl_csv_error(ctx, c, field, SL_EDATA,
                                "quoted fields are not supported (plain numbers only, "
                                "no '\"')");
        }
        if (split(c, line, len)) return SL_OK;
    }
}

static void join_cols(char *dst, size_t n, const char *const *cols, int ncols)
{
    size_t k = 0;
    dst[0] = '\0';
    for (int i = 0; i < ncols && k < n; i++) {
        int w = snprintf(dst + k, n - k, "%s%s", i ? "," : "", cols[i]);
        if (w < 0) break;
        k += (size_t)w;
    }
}

sl_status sl_csv_read_header(sl_ctx *ctx, sl_csv *c, const char *const *cols, int n)
{
    char want[512], found[CSV_SHOW_MAX + 8];
    if (n < 1 || n > SL_CSV_MAX_FIELDS)
        return SL_ERR(ctx, SL_EINTERNAL, "%s: %d header columns requested (1..%d supported)",
                      c->name, n, SL_CSV_MAX_FIELDS);
    join_cols(want, sizeof(want), cols, n);
    char *line = NULL;
    size_t len = 0;
    int got = 0;
    for (;;) {
        sl_status st = read_line(ctx, c, &line, &len, &got);
        if (st != SL_OK) return st;
        if (!got)
            return SL_ERR(ctx, SL_EDATA, "%s:%lld: empty input; expected the header line '%s'",
                          c->name, (long long)c->lines_read + 1, want);
        c->line = c->lines_read;
        size_t i = 0;
        while (i < len && is_blank(line[i])) i++;
        if (i < len) break;
    }
    /* quote the raw line before splitting replaces separators by NULs */
    show(found, sizeof(found), line, len);
    if (memchr(line, '"', len) != NULL)
        return SL_ERR(ctx, SL_EDATA,
                      "%s:%lld: quoted header fields are not supported; the header must be "
                      "exactly '%s', found '%s'",
                      c->name, (long long)c->line, want, found);
    split(c, line, len);
    int bad = -1;
    for (int i = 0; i < n && i < c->nf; i++) {
        if (c->flen[i] != strlen(cols[i]) || memcmp(c->f[i], cols[i], c->flen[i]) != 0) {
            bad = i;
            break;
        }
    }
    if (bad >= 0) {
        char col[CSV_SHOW_MAX + 8];
        show(col, sizeof(col), c->f[bad], c->flen[bad]);
        const char *hint = "";
        if (c->flen[0] > 0 && (c->f[0][0] == '-' || (c->f[0][0] >= '0' && c->f[0][0] <= '9')))
            hint = " (the first line must be the header)";
        return SL_ERR(ctx, SL_EDATA,
                      "%s:%lld: bad header: column %d is '%s', expected '%s'; the header must "
                      "be exactly '%s', found '%s'%s",
                      c->name, (long long)c->line, bad + 1, col, cols[bad], want, found, hint);
    }
    if (c->nf_total != n)
        return SL_ERR(ctx, SL_EDATA,
                      "%s:%lld: bad header: %d columns, expected %d; the header must be exactly "
                      "'%s', found '%s'",
                      c->name, (long long)c->line, c->nf_total, n, want, found);
    c->cols = cols;
    c->ncols = n;
    return SL_OK;
}

sl_status sl_csv_next(sl_ctx *ctx, sl_csv *c, int *more)
{
    *more = 0;
    int got = 0;
    sl_status st = next_nonblank(ctx, c, &got);
    if (st != SL_OK || !got) return st;
    if (c->nf_total != c->ncols) {
        char want[512];
        join_cols(want, sizeof(want), c->cols, c->ncols);
        return sl_csv_error(ctx, c, -1, SL_EDATA, "expected %d fields (%s), found %d",
                            c->ncols, want, c->nf_total);
    }
    *more = 1;
    return SL_OK;
}

sl_status sl_csv_int(sl_ctx *ctx, const sl_csv *c, int i, int64_t lo, int64_t hi, int64_t *out)
{
    const char *s = c->f[i];
    size_t n = c->flen[i];
    char txt[CSV_SHOW_MAX + 8];
    if (n == 0) return sl_csv_error(ctx, c, i, SL_EDATA, "empty field, expected an integer");
    size_t k = 0;
    int neg = 0;
    if (s[0] == '+' || s[0] == '-') {
        neg = s[0] == '-';
        k = 1;
    }
    uint64_t mag = 0;
    int overflow = 0;
    if (k == n) goto not_int;
    for (; k < n; k++) {
        unsigned d = (unsigned)(unsigned char)s[k] - '0';
        if (d > 9) goto not_int;
        if (mag > (UINT64_MAX - d) / 10) overflow = 1;
        else mag = mag * 10 + d;
    }
    int64_t v;
    if (overflow || mag > (neg ? (uint64_t)INT64_MAX + 1 : (uint64_t)INT64_MAX)) {
        show(txt, sizeof(txt), s, n);
        return sl_csv_error(ctx, c, i, SL_EDATA, "'%s' is out of range [%lld, %lld]", txt,
                            (long long)lo, (long long)hi);
    }
    v = neg ? (mag == (uint64_t)INT64_MAX + 1 ? INT64_MIN : -(int64_t)mag) : (int64_t)mag;
    if (v < lo || v > hi) {
        show(txt, sizeof(txt), s, n);
        if (v < 0 && lo == 0)
            return sl_csv_error(ctx, c, i, SL_EDATA, "'%s' is negative, expected an integer >= 0",
                                txt);
        return sl_csv_error(ctx, c, i, SL_EDATA, "'%s' is out of range [%lld, %lld]", txt,
                            (long long)lo, (long long)hi);
    }
    *out = v;
    return SL_OK;
not_int:
    show(txt, sizeof(txt), s, n);
    return sl_csv_error(ctx, c, i, SL_EDATA, "'%s' is not an integer", txt);
}

/* Decimal grammar: [+-] digits [. digits] [(e|E) [+-] digits], at least one
 * mantissa digit. Excludes what strtod would also take (inf, nan, hex).
 * Returns 0 if `s` is not such a number. When the value has at most 15
 * significant digits and a decimal exponent within +-22, both the digits
 * and the power of ten are exact doubles and one IEEE multiplication or
 * division rounds correctly: *v is set and *exact = 1, sparing strtod (the
 * dominant cost of reading). Otherwise the caller uses strtod. */
static int scan_decimal(const char *s, size_t n, double *v, int *exact)
{
    static const double p10[] = {1e0,  1e1,  1e2,  1e3,  1e4,  1e5,  1e6,  1e7,
                                 1e8,  1e9,  1e10, 1e11, 1e12, 1e13, 1e14, 1e15,
                                 1e16, 1e17, 1e18, 1e19, 1e20, 1e21, 1e22};
    size_t k = 0, digits = 0;
    int neg = 0, sig = 0;
    uint64_t m = 0;
    int64_t e10 = 0;
    *exact = 0;
    if (k < n && (s[k] == '+' || s[k] == '-')) neg = s[k++] == '-';
    for (; k < n && s[k] >= '0' && s[k] <= '9'; k++, digits++) {
        unsigned d = (unsigned)(s[k] - '0');
        if (sig < 16) {
            m = m * 10 + d;
            if (m != 0) sig++;
        } else {
            e10++;              /* (no fast path: sig > 15) */
        }
    }
    if (k < n && s[k] == '.') {
        for (k++; k < n && s[k] >= '0' && s[k] <= '9'; k++, digits++) {
            unsigned d = (unsigned)(s[k] - '0');
            if (sig < 16) {
                m = m * 10 + d;
                if (m != 0) sig++;
                e10--;
            }
        }
    }
    if (digits == 0) return 0;
    if (k < n && (s[k] == 'e' || s[k] == 'E')) {
        k++;
        int eneg = 0;
        if (k < n && (s[k] == '+' || s[k] == '-')) eneg = s[k++] == '-';
        size_t ed = 0;
        int64_t ev = 0;
        for (; k < n && s[k] >= '0' && s[k] <= '9'; k++, ed++)
            if (ev < 100000) ev = ev * 10 + (s[k] - '0');
        if (ed == 0) return 0;
        e10 += eneg ? -ev : ev;
    }
    if (k != n) return 0;
#if FLT_EVAL_METHOD == 0
    if (sig <= 15) {
        if (m == 0) {
            *v = neg ? -0.0 : 0.0;
            *exact = 1;
        } else if (e10 >= -22 && e10 <= 22) {
            double x = (double)m;
            x = e10 >= 0 ? x * p10[e10] : x / p10[-e10];
            *v = neg ? -x : x;
            *exact = 1;
        }
    }
#else
    (void)p10;
    (void)neg;
#endif
    return 1;
}

sl_status sl_csv_double(sl_ctx *ctx, const sl_csv *c, int i, double *out)
{
    const char *s = c->f[i];
    size_t n = c->flen[i];
    char txt[CSV_SHOW_MAX + 8];
    double v = 0.0;
    int exact = 0;
    if (n == 0) return sl_csv_error(ctx, c, i, SL_EDATA, "empty field, expected a number");
    if (!scan_decimal(s, n, &v, &exact)) {
        show(txt, sizeof(txt), s, n);
        return sl_csv_error(ctx, c, i, SL_EDATA, "'%s' is not a finite decimal number", txt);
    }
    if (!exact) {
        /* s is NUL-terminated right after the field (split); strtod follows
         * LC_NUMERIC, which the library never changes from "C". */
        char *end = NULL;
        v = strtod(s, &end);
        if (end != s + n || !isfinite(v)) {
            show(txt, sizeof(txt), s, n);
            return sl_csv_error(ctx, c, i, SL_EDATA, "'%s' is out of the range of a double", txt);
        }
        /* underflow (a subnormal or 0 with ERANGE) is accepted */
    }
    *out = v;
    return SL_OK;
}

/* ---- shared by import and estimate --------------------------------------- */

static int64_t rec_state(const char *rec)
{
    int64_t s;
    memcpy(&s, rec, sizeof(s));
    return s;
}

#define SORT_REC_MAX 64
#define SORT_SMALL 24

/* Insertion sort of a few records (stable; cmp is total anyway). */
static void sort_small(char *v, size_t n, size_t size, int (*cmp)(const void *, const void *))
{
    char tmp[SORT_REC_MAX];
    for (size_t i = 1; i < n; i++) {
        if (cmp(v + (i - 1) * size, v + i * size) <= 0) continue;
        memcpy(tmp, v + i * size, size);
        size_t j = i;
        while (j > 0 && cmp(v + (j - 1) * size, tmp) > 0) {
            memcpy(v + j * size, v + (j - 1) * size, size);
            j--;
        }
        memcpy(v + j * size, tmp, size);
    }
}

sl_status sl_csv_sort_by_state(sl_ctx *ctx, void *base, size_t n, size_t size, int64_t n_states,
                               int (*cmp)(const void *, const void *))
{
    sl_status st = SL_OK;
    char *v = base;
    int64_t *start = NULL, *next = NULL;
    if (size > SORT_REC_MAX || size < sizeof(int64_t) || size % sizeof(uint64_t) != 0)
        return SL_ERR(ctx, SL_EINTERNAL, "record size %zu not supported by the state sort", size);
    if (SL_ZALLOC(ctx, start, (size_t)n_states + 1, "sort bucket starts") == NULL ||
        SL_ALLOC(ctx, next, (size_t)n_states, "sort bucket positions") == NULL) {
        st = SL_ENOMEM;
        goto cleanup;
    }
    for (size_t i = 0; i < n; i++) {
        int64_t s = rec_state(v + i * size);
        if (s < 0 || s >= n_states)
            SL_FAIL(SL_EINTERNAL, "state %lld outside [0, %lld) in the state sort", (long long)s,
                    (long long)n_states);
        start[s + 1]++;
    }
    for (int64_t s = 0; s < n_states; s++) start[s + 1] += start[s];
    memcpy(next, start, (size_t)n_states * sizeof(*next));
    /* cycle each misplaced record to the next free slot of its bucket
     * (records are swapped word by word: sizes are multiples of 8) */
    const size_t words = size / sizeof(uint64_t);
    uint64_t carry[SORT_REC_MAX / sizeof(uint64_t)];
    for (int64_t b = 0; b < n_states; b++) {
        while (next[b] < start[b + 1]) {
            char *slot = v + (size_t)next[b] * size;
            int64_t s = rec_state(slot);
            if (s != b) {
                memcpy(carry, slot, size);
                do {
                    char *dst = v + (size_t)next[s]++ * size;
                    for (size_t w = 0; w < words; w++) {
                        uint64_t t;
                        memcpy(&t, dst + w * sizeof(t), sizeof(t));
                        memcpy(dst + w * sizeof(t), &carry[w], sizeof(t));
                        carry[w] = t;
                    }
                    s = (int64_t)carry[0];
                } while (s != b);
                memcpy(slot, carry, size);
            }
            next[b]++;
        }
    }
    for (int64_t s = 0; s < n_states; s++) {
        size_t lo = (size_t)start[s], k = (size_t)(start[s + 1] - start[s]);
        if (k <= 1) continue;
        if (k <= SORT_SMALL) sort_small(v + lo * size, k, size, cmp);
        else qsort(v + lo * size, k, size, cmp);
    }
cleanup:
    free(start);
    free(next);
    return st;
}

sl_status sl_csv_first_absent_state(sl_ctx *ctx, const void *base, size_t n, size_t size,
                                    int64_t *first)
{
    const char *v = base;
    unsigned char *seen = sl_calloc(ctx, n + 1, 1, "state marks");
    if (seen == NULL) return SL_ENOMEM;
    for (size_t i = 0; i < n; i++) {
        int64_t s = rec_state(v + i * size);
        if (s >= 0 && (uint64_t)s <= (uint64_t)n) seen[s] = 1;
    }
    size_t k = 0;
    while (k < n && seen[k]) k++;   /* seen[n] may be set only if some k < n is not */
    free(seen);
    *first = (int64_t)k;
    return SL_OK;
}

sl_status sl_csv_open_input(sl_ctx *ctx, const char *path, FILE **fp, const char **name)
{
    *fp = NULL;
    *name = path;
    if (path == NULL || path[0] == '\0')
        return SL_ERR(ctx, SL_EUSAGE, "no input file given");
    if (strcmp(path, "-") == 0) {
        *fp = stdin;
        *name = "<stdin>";
        return SL_OK;
    }
    FILE *f = fopen(path, "rb");
    if (f == NULL)
        return SL_ERR(ctx, SL_ENOINPUT, "%s: cannot open: %s", path, strerror(errno));
    struct stat sb;
    if (fstat(fileno(f), &sb) != 0) {
        int e = errno;
        fclose(f);
        return SL_ERR(ctx, SL_ENOINPUT, "%s: cannot stat: %s", path, strerror(e));
    }
    if (S_ISDIR(sb.st_mode)) {
        fclose(f);
        return SL_ERR(ctx, SL_ENOINPUT, "%s: is a directory, expected a CSV file", path);
    }
    *fp = f;
    return SL_OK;
}

void sl_csv_close_input(FILE **fp)
{
    if (fp == NULL || *fp == NULL) return;
    if (*fp != stdin) fclose(*fp);  /* read-only: nothing to flush */
    *fp = NULL;
}

static const char *objective_label(sl_objective obj)
{
    switch (obj) {
    case SL_OBJ_DISCOUNTED: return "discounted";
    case SL_OBJ_TOTAL: return "total";
    case SL_OBJ_AVERAGE: return "average";
    case SL_OBJ_FINITE: return "finite";
    }
    return NULL;
}

sl_status sl_csv_check_discount(sl_ctx *ctx, sl_objective obj, double discount)
{
    const char *label = objective_label(obj);
    if (label == NULL) return SL_ERR(ctx, SL_EUSAGE, "unknown objective %d", (int)obj);
    if (obj == SL_OBJ_DISCOUNTED) {
        if (!(discount >= 0.0 && discount < 1.0))
            return SL_ERR(ctx, SL_EUSAGE,
                          "discount %g is not in [0, 1), as the discounted objective requires",
                          discount);
    } else if (!(discount > 0.0 && discount <= 1.0)) {
        return SL_ERR(ctx, SL_EUSAGE,
                      "discount %g is not in (0, 1], as the %s objective requires", discount,
                      label);
    }
    return SL_OK;
}

sl_status sl_csv_model_load(sl_ctx *ctx, const char *fn, const char *input, const char *needs, sl_objective obj,
                            double discount, sl_csv_model_reader read, const void *opts, sl_model **out)
{
    sl_status st = SL_OK;
    FILE *fp = NULL;
    const char *name = "<input>";
    sl_meta m;
    sl_block b;
    memset(&m, 0, sizeof(m));
    memset(&b, 0, sizeof(b));
    if (out == NULL) return SL_ERR(ctx, SL_EUSAGE, "%s: no output handle", fn);
    *out = NULL;
    /* the same checks on every rank, agreed inside sl_csv_adopt_model */
    if (input == NULL)
        st = SL_ERR(ctx, SL_EUSAGE, "%s", needs);
    else {
        name = strcmp(input, "-") == 0 ? "<stdin>" : input;
        st = sl_csv_check_discount(ctx, obj, discount);
    }
    if (st == SL_OK && ctx->rank == 0) {
        st = sl_csv_open_input(ctx, input, &fp, &name);
        if (st == SL_OK) st = read(ctx, fp, name, opts, &m, &b);
        sl_csv_close_input(&fp);
    }
    st = sl_csv_adopt_model(ctx, st, &m, &b, name, out);
    sl_block_free(&b);
    sl_meta_free(&m);
    return st;
}

sl_status sl_csv_adopt_model(sl_ctx *ctx, sl_status st, sl_meta *meta, sl_block *block, const char *where,
                             sl_model **out)
{
    st = sl_agree(ctx, st);
    if (st != SL_OK) return st;
    st = sl_meta_bcast(ctx, meta);
    if (st != SL_OK) return st;     /* agreed inside */
    if (ctx->rank != 0) {
        /* empty slice after the last state: rank 0 holds every row */
        sl_block_free(block);
        st = sl_block_init(ctx, block, meta->n_states, meta->n_states, where);
        if (st == SL_OK) sl_block_rebase(block, meta->n_pairs, meta->n_trans);
    }
    st = sl_agree(ctx, st);
    if (st != SL_OK) return st;
    st = sl_agree(ctx, sl_fingerprint(ctx, meta, block, meta->fingerprint));
    if (st != SL_OK) return st;
    return sl_model_adopt(ctx, meta, block, out);
}
