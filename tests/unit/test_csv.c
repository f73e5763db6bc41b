/* test_csv.c - CSV tokenizer, strict numbers, triplet import and estimation. */
#define _POSIX_C_SOURCE 200809L
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>
#include <math.h>

#include <cmocka.h>

#include "input/csv.h"
#include "store/store.h"

/* ---- helpers ------------------------------------------------------------- */

/* cmocka 1.1 compares floats only: a double comparison with the caller's line */
#define assert_double_equal(a, b, tol) assert_close((a), (b), (tol), __FILE__, __LINE__)
static void assert_close(double a, double b, double tol, const char *file, int line)
{
    if (!(fabs(a - b) <= tol)) {
        print_error("%s:%d: %.17g != %.17g (tolerance %g)\n", file, line, a, b, tol);
        fail();
    }
}

static sl_ctx *ctx_of(void **state) { return (sl_ctx *)*state; }

/* A read-only stream over a string (not copied: keep it alive). */
static FILE *text_stream(const char *text)
{
    FILE *fp = fmemopen((void *)text, strlen(text), "r");
    assert_non_null(fp);
    return fp;
}

/* Check the status and that the message contains every given substring
 * (NULL-terminated list), then clear the error. */
static void check_error(sl_ctx *ctx, sl_status got, sl_status want, ...)
{
    char msg[SL_MSG_MAX];
    snprintf(msg, sizeof(msg), "%s", sl_ctx_message(ctx));
    sl_error_clear(ctx);    /* before any failure: the next test starts clean */
    if (got != want) {
        print_error("status %d, expected %d; message: '%s'\n", (int)got, (int)want, msg);
        fail();
    }
    va_list ap;
    va_start(ap, want);
    for (const char *sub = va_arg(ap, const char *); sub != NULL; sub = va_arg(ap, const char *)) {
        if (strstr(msg, sub) == NULL) {
            print_error("message '%s' lacks '%s'\n", msg, sub);
            va_end(ap);
            fail();
        }
    }
    va_end(ap);
}

static const char *const cols3[] = {"a", "b", "c"};

/* Read header a,b,c then the records of `text`; returns the first failing
 * status (or SL_OK) and the number of records read. */
static sl_status read_all(sl_ctx *ctx, const char *text, int *records)
{
    FILE *fp = text_stream(text);
    sl_csv *c = NULL;
    *records = 0;
    sl_status st = sl_csv_open(ctx, fp, "t.csv", &c);
    if (st == SL_OK) st = sl_csv_read_header(ctx, c, cols3, 3);
    for (int more = 1; st == SL_OK && more;) {
        st = sl_csv_next(ctx, c, &more);
        if (st == SL_OK && more) (*records)++;
    }
    sl_csv_free(&c);
    fclose(fp);
    return st;
}

/* Parse the single record of "a,b,c\n<row>\n" and return field 0 as an
 * integer in [lo, hi] (status returned). */
static sl_status one_int(sl_ctx *ctx, const char *field, int64_t lo, int64_t hi, int64_t *out)
{
    char text[256];
    snprintf(text, sizeof(text), "a,b,c\n%s,0,0\n", field);
    FILE *fp = text_stream(text);
    sl_csv *c = NULL;
    int more = 0;
    sl_status st = sl_csv_open(ctx, fp, "n.csv", &c);
    if (st == SL_OK) st = sl_csv_read_header(ctx, c, cols3, 3);
    if (st == SL_OK) st = sl_csv_next(ctx, c, &more);
    assert_int_equal(st == SL_OK ? more : 1, 1);
    if (st == SL_OK) st = sl_csv_int(ctx, c, 0, lo, hi, out);
    sl_csv_free(&c);
    fclose(fp);
    return st;
}

static sl_status one_double(sl_ctx *ctx, const char *field, double *out)
{
    char text[256];
    snprintf(text, sizeof(text), "a,b,c\n0,%s,0\n", field);
    FILE *fp = text_stream(text);
    sl_csv *c = NULL;
    int more = 0;
    sl_status st = sl_csv_open(ctx, fp, "n.csv", &c);
    if (st == SL_OK) st = sl_csv_read_header(ctx, c, cols3, 3);
    if (st == SL_OK) st = sl_csv_next(ctx, c, &more);
    if (st == SL_OK) st = sl_csv_double(ctx, c, 1, out);
    sl_csv_free(&c);
    fclose(fp);
    return st;
}

static sl_import_opts import_opts(void)
{
    sl_import_opts o;
    memset(&o, 0, sizeof(o));
    o.discount = 0.95;
    o.objective = SL_OBJ_DISCOUNTED;
    return o;
}

static sl_status import_text(sl_ctx *ctx, const char *text, const sl_import_opts *o, sl_meta *m,
                             sl_block *b)
{
    FILE *fp = text_stream(text);
    sl_status st = sl_csv_read_triplets(ctx, fp, "dock.csv", o, m, b);
    fclose(fp);
    return st;
}

static sl_estimate_opts estimate_opts(void)
{
    sl_estimate_opts o;
    memset(&o, 0, sizeof(o));
    o.discount = 0.9;
    o.objective = SL_OBJ_DISCOUNTED;
    o.min_visits = 1;
    return o;
}

static sl_status estimate_text(sl_ctx *ctx, const char *text, const sl_estimate_opts *o,
                               sl_meta *m, sl_block *b, int64_t *dropped, int64_t *absorbed)
{
    FILE *fp = text_stream(text);
    sl_status st = sl_csv_read_experience(ctx, fp, "log.csv", o, m, b, dropped, absorbed);
    fclose(fp);
    return st;
}

/* Probability and reward of (state s, action a, next j) in a block (global
 * indices, as in the file); returns 0 if the transition is absent. */
static int find_trans(const sl_block *b, int64_t s, int32_t a, int64_t j, double *p, double *r)
{
    if (s < b->s_begin || s >= b->s_end) return 0;
    const int64_t *fp = b->first_pair - b->s_begin, *ft = b->first_trans - b->p_begin;
    for (int64_t k = fp[s]; k < fp[s + 1]; k++) {
        if (b->action[k - b->p_begin] != a) continue;
        *r = b->reward[k - b->p_begin];
        for (int64_t t = ft[k]; t < ft[k + 1]; t++)
            if (b->target[t - b->t_begin] == j) {
                *p = b->prob[t - b->t_begin];
                return 1;
            }
    }
    return 0;
}

/* ---- tokenizer ------------------------------------------------------------ */

static void test_tokenizer_dialect(void **state)
{
    sl_ctx *ctx = ctx_of(state);
    /* BOM, CRLF, blank lines (also before the header), spaces and tabs
     * around fields, no trailing newline */
    const char *text = "\xEF\xBB\xBF\r\n  a , b,\tc\r\n\r\n1,2,3\r\n   \n \t\r\n 4 ,5 , 6";
    FILE *fp = text_stream(text);
    sl_csv *c = NULL;
    int more = 0;
    size_t len = 0;
    int64_t v = 0;
    assert_int_equal(sl_csv_open(ctx, fp, "d.csv", &c), SL_OK);
    assert_int_equal(sl_csv_read_header(ctx, c, cols3, 3), SL_OK);
    assert_int_equal(sl_csv_line(c), 2);
    assert_int_equal(sl_csv_next(ctx, c, &more), SL_OK);
    assert_int_equal(more, 1);
    assert_int_equal(sl_csv_line(c), 4);
    assert_string_equal(sl_csv_field(c, 2, &len), "3");
    assert_int_equal(len, 1);
    assert_int_equal(sl_csv_next(ctx, c, &more), SL_OK);
    assert_int_equal(more, 1);
    assert_int_equal(sl_csv_line(c), 7);
    assert_string_equal(sl_csv_field(c, 0, NULL), "4");
    assert_string_equal(sl_csv_field(c, 2, NULL), "6");
    assert_int_equal(sl_csv_int(ctx, c, 1, 0, 10, &v), SL_OK);
    assert_int_equal(v, 5);
    assert_int_equal(sl_csv_next(ctx, c, &more), SL_OK);
    assert_int_equal(more, 0);
    /* end of input is sticky */
    assert_int_equal(sl_csv_next(ctx, c, &more), SL_OK);
    assert_int_equal(more, 0);
    sl_csv_free(&c);
    assert_null(c);
    sl_csv_free(&c);
    sl_csv_free(NULL);
    fclose(fp);
}

static void test_tokenizer_long_lines(void **state)
{
    sl_ctx *ctx = ctx_of(state);
    /* a 700 kB line (padding spaces) spans several reads and buffer growths */
    size_t pad = 700 * 1000;
    char *text = malloc(pad + 64);
    assert_non_null(text);
    int k = snprintf(text, 64, "a,b,c\n1,2,");
    memset(text + k, ' ', pad);
    snprintf(text + k + pad, 64, "3\n4,5,6\n");
    FILE *fp = text_stream(text);
    sl_csv *c = NULL;
    int more = 0;
    int64_t v = 0;
    assert_int_equal(sl_csv_open(ctx, fp, "long.csv", &c), SL_OK);
    assert_int_equal(sl_csv_read_header(ctx, c, cols3, 3), SL_OK);
    assert_int_equal(sl_csv_next(ctx, c, &more), SL_OK);
    assert_int_equal(sl_csv_int(ctx, c, 2, 0, 9, &v), SL_OK);
    assert_int_equal(v, 3);
    assert_int_equal(sl_csv_next(ctx, c, &more), SL_OK);
    assert_int_equal(more, 1);
    assert_int_equal(sl_csv_line(c), 3);
    assert_int_equal(sl_csv_int(ctx, c, 0, 0, 9, &v), SL_OK);
    assert_int_equal(v, 4);
    sl_csv_free(&c);
    fclose(fp);
    free(text);

    /* a line longer than the maximum is an error naming its line */
    pad = SL_CSV_LINE_MAX + 10;
    text = malloc(pad + 64);
    assert_non_null(text);
    k = snprintf(text, 64, "a,b,c\n1,2,3\n1,2,");
    memset(text + k, '7', pad);
    snprintf(text + k + pad, 64, "\n");
    int n = 0;
    check_error(ctx, read_all(ctx, text, &n), SL_EDATA, "t.csv:3:", "longer than", NULL);
    assert_int_equal(n, 1);
    free(text);
}

static void test_tokenizer_errors(void **state)
{
    sl_ctx *ctx = ctx_of(state);
    int n = 0;
    check_error(ctx, read_all(ctx, "a,b,c\n1,2,3\n1,\"2\",3\n", &n), SL_EDATA, "t.csv:3:",
                "column 'b'", "quoted", NULL);
    check_error(ctx, read_all(ctx, "a,b,c\n1,2\n", &n), SL_EDATA, "t.csv:2:",
                "expected 3 fields (a,b,c), found 2", NULL);
    check_error(ctx, read_all(ctx, "a,b,c\n\n1,2,3,4\n", &n), SL_EDATA, "t.csv:3:", "found 4",
                NULL);
    check_error(ctx, read_all(ctx, "a,b,c\n1,2,3\n,,,,,,,,,,,,,,,,,,,,,,,,\n", &n), SL_EDATA,
                "t.csv:3:", "found 25", NULL);
    /* headers */
    check_error(ctx, read_all(ctx, "", &n), SL_EDATA, "t.csv:1:", "empty input", "'a,b,c'",
                NULL);
    check_error(ctx, read_all(ctx, "\n \r\n", &n), SL_EDATA, "t.csv:3:", "empty input", NULL);
    check_error(ctx, read_all(ctx, "a,c,b\n", &n), SL_EDATA, "t.csv:1:",
                "column 2 is 'c', expected 'b'", "exactly 'a,b,c'", NULL);
    check_error(ctx, read_all(ctx, "A,b,c\n", &n), SL_EDATA, "t.csv:1:", "column 1 is 'A'",
                NULL);
    check_error(ctx, read_all(ctx, "a,b\n", &n), SL_EDATA, "t.csv:1:", "2 columns, expected 3",
                NULL);
    check_error(ctx, read_all(ctx, "a,b,c,d\n", &n), SL_EDATA, "t.csv:1:",
                "4 columns, expected 3", "found 'a,b,c,d'", NULL);
    check_error(ctx, read_all(ctx, "\n1,2,3\n", &n), SL_EDATA, "t.csv:2:",
                "the first line must be the header", NULL);
    check_error(ctx, read_all(ctx, "\"a\",b,c\n", &n), SL_EDATA, "t.csv:1:", "quoted", NULL);
    /* a NUL byte never passes as part of a name or number */
    static const char nul_header[] = "a,b\0,c\n1,2,3\n";
    FILE *fp = fmemopen((void *)nul_header, sizeof(nul_header) - 1, "r");
    assert_non_null(fp);
    sl_csv *c = NULL;
    assert_int_equal(sl_csv_open(ctx, fp, "z.csv", &c), SL_OK);
    check_error(ctx, sl_csv_read_header(ctx, c, cols3, 3), SL_EDATA, "z.csv:1:", "column 2",
                NULL);
    sl_csv_free(&c);
    fclose(fp);
    /* a stream that cannot be read: an I/O error, not bad data */
    char wbuf[16];
    fp = fmemopen(wbuf, sizeof(wbuf), "w");
    assert_non_null(fp);
    assert_int_equal(sl_csv_open(ctx, fp, "w.csv", &c), SL_OK);
    check_error(ctx, sl_csv_read_header(ctx, c, cols3, 3), SL_EIO, "w.csv:1:", "read error",
                NULL);
    sl_csv_free(&c);
    fclose(fp);
}

static void test_integers(void **state)
{
    sl_ctx *ctx = ctx_of(state);
    int64_t v = -5;
    assert_int_equal(one_int(ctx, "0", 0, 10, &v), SL_OK);
    assert_int_equal(v, 0);
    assert_int_equal(one_int(ctx, " +7 ", 0, 10, &v), SL_OK);
    assert_int_equal(v, 7);
    assert_int_equal(one_int(ctx, "007", 0, 10, &v), SL_OK);
    assert_int_equal(v, 7);
    assert_int_equal(one_int(ctx, "-0", 0, 10, &v), SL_OK);
    assert_int_equal(v, 0);
    assert_int_equal(one_int(ctx, "-9223372036854775808", INT64_MIN, 0, &v), SL_OK);
    assert_true(v == INT64_MIN);
    assert_int_equal(one_int(ctx, "9223372036854775807", 0, INT64_MAX, &v), SL_OK);
    assert_true(v == INT64_MAX);
    const struct {
        const char *text;
        const char *msg;
    } bad[] = {
        {"1.5", "'1.5' is not an integer"},
        {"1e3", "'1e3' is not an integer"},
        {"0x10", "not an integer"},
        {"", "empty field"},
        {"-", "not an integer"},
        {"+", "not an integer"},
        {"1 2", "not an integer"},
        {"-1", "'-1' is negative"},
        {"11", "out of range [0, 10]"},
        {"9223372036854775808", "out of range"},
        {"99999999999999999999999", "out of range"},
        {"18446744073709551616", "out of range"},   /* 2^64: would wrap to 0 */
        {"18446744073709551623", "out of range"},   /* would wrap to 7 */
        {"-9223372036854775809", "out of range"},
    };
    for (size_t i = 0; i < sizeof(bad) / sizeof(bad[0]); i++) {
        v = 42;
        check_error(ctx, one_int(ctx, bad[i].text, 0, 10, &v), SL_EDATA, "n.csv:2:",
                    "column 'a'", bad[i].msg, NULL);
        assert_int_equal(v, 42);
    }
}

static void test_doubles(void **state)
{
    sl_ctx *ctx = ctx_of(state);
    double v = -1.0;
    const struct {
        const char *text;
        double want;
    } good[] = {{"0.25", 0.25}, {"-3", -3.0}, {"+1.5e-3", 1.5e-3}, {".5", 0.5}, {"5.", 5.0},
                {"1E2", 100.0}, {"1e-400", 0.0}, {" 2.5 ", 2.5}};
    for (size_t i = 0; i < sizeof(good) / sizeof(good[0]); i++) {
        assert_int_equal(one_double(ctx, good[i].text, &v), SL_OK);
        assert_true(v == good[i].want);
    }
    const char *bad[] = {"nan", "NaN", "inf", "-inf", "infinity", "0x1p3", "1e", "1e+",
                         ".", "-", "1.5.2", "e5", "--1", "1d", ".e1", "+.", "1e5.0"};
    for (size_t i = 0; i < sizeof(bad) / sizeof(bad[0]); i++)
        check_error(ctx, one_double(ctx, bad[i], &v), SL_EDATA, "n.csv:2:", "column 'b'",
                    "is not a finite decimal number", NULL);
    check_error(ctx, one_double(ctx, "1e999", &v), SL_EDATA, "n.csv:2:", "column 'b'",
                "'1e999' is out of the range of a double", NULL);
    check_error(ctx, one_double(ctx, "-1e309", &v), SL_EDATA, "out of the range", NULL);
    /* "1,5" splits into an extra field */
    check_error(ctx, one_double(ctx, "1,5", &v), SL_EDATA, "n.csv:2:", "found 4", NULL);
    check_error(ctx, one_double(ctx, "", &v), SL_EDATA, "n.csv:2:", "empty field", NULL);
}

/* Deterministic pseudo-random numbers. */
static uint64_t next_rand(uint64_t *s)
{
    *s = *s * 6364136223846793005ULL + 1442695040888963407ULL;
    return *s >> 33;
}

/* Every accepted number is bit-identical to strtod's correctly rounded
 * value, whichever way the reader computed it. */
static void test_doubles_match_strtod(void **state)
{
    sl_ctx *ctx = ctx_of(state);
    enum { N = 100000 };
    char(*num)[48] = malloc(N * sizeof(*num));
    char *text = malloc((size_t)N * 56 + 16);
    assert_non_null(num);
    assert_non_null(text);
    uint64_t seed = 7;
    size_t len = (size_t)sprintf(text, "a,b,c\n");
    for (int i = 0; i < N; i++) {
        char digits[24];
        int nd = 1 + (int)(next_rand(&seed) % 20), k = 0;
        for (int d = 0; d < nd; d++) digits[k++] = (char)('0' + next_rand(&seed) % 10);
        digits[k] = '\0';
        int point = (int)(next_rand(&seed) % (unsigned)(nd + 2)) - 1; /* -1: none */
        int form = (int)(next_rand(&seed) % 4);
        int ex = (int)(next_rand(&seed) % 61) - 30;
        const char *sign = next_rand(&seed) % 3 == 0 ? "-" : "";
        char mant[32];
        if (point < 0) snprintf(mant, sizeof(mant), "%s%s", sign, digits);
        else snprintf(mant, sizeof(mant), "%s%.*s.%s", sign, point, digits, digits + point);
        if (form == 0) snprintf(num[i], sizeof(num[i]), "%se%d", mant, ex);
        else snprintf(num[i], sizeof(num[i]), "%s", mant);
        if (strcmp(mant, ".") == 0 || strcmp(mant, "-.") == 0) snprintf(num[i], 48, "0");
        len += (size_t)sprintf(text + len, "0,%s,0\n", num[i]);
    }
    FILE *fp = text_stream(text);
    sl_csv *c = NULL;
    assert_int_equal(sl_csv_open(ctx, fp, "r.csv", &c), SL_OK);
    assert_int_equal(sl_csv_read_header(ctx, c, cols3, 3), SL_OK);
    for (int i = 0; i < N; i++) {
        int more = 0;
        double v = 0, want = strtod(num[i], NULL);
        assert_int_equal(sl_csv_next(ctx, c, &more), SL_OK);
        sl_status st = sl_csv_double(ctx, c, 1, &v);
        if (st != SL_OK) print_error("'%s': %s\n", num[i], sl_ctx_message(ctx));
        assert_int_equal(st, SL_OK);
        if (memcmp(&v, &want, sizeof(v)) != 0) {
            print_error("'%s': read %.17g, strtod %.17g\n", num[i], v, want);
            fail();
        }
    }
    sl_csv_free(&c);
    fclose(fp);
    free(text);
    free(num);
}

typedef struct sort_rec {
    int64_t state;
    int32_t key;
    int32_t seq;
} sort_rec;

static int cmp_sort_rec(const void *x, const void *y)
{
    const sort_rec *a = x, *b = y;
    if (a->state != b->state) return a->state < b->state ? -1 : 1;
    if (a->key != b->key) return a->key < b->key ? -1 : 1;
    return (a->seq > b->seq) - (a->seq < b->seq);
}

/* The in-place state sort agrees with qsort on the same total order, for
 * small and large buckets and empty states. */
static void test_state_sort(void **state)
{
    sl_ctx *ctx = ctx_of(state);
    enum { N = 20000, S = 700 };
    sort_rec *a = malloc(N * sizeof(*a)), *b = malloc(N * sizeof(*b));
    assert_non_null(a);
    assert_non_null(b);
    uint64_t seed = 99;
    for (int i = 0; i < N; i++) {
        /* state 5 gets a large bucket; states >= 600 none */
        a[i].state = i % 4 == 0 ? 5 : (int64_t)(next_rand(&seed) % 600);
        a[i].key = (int32_t)(next_rand(&seed) % 7);
        a[i].seq = i;
    }
    memcpy(b, a, N * sizeof(*a));
    qsort(b, N, sizeof(*b), cmp_sort_rec);
    assert_int_equal(sl_csv_sort_by_state(ctx, a, N, sizeof(*a), S, cmp_sort_rec), SL_OK);
    assert_memory_equal(a, b, N * sizeof(*a));
    int64_t first = -1;
    assert_int_equal(sl_csv_first_absent_state(ctx, a, N, sizeof(*a), &first), SL_OK);
    assert_int_equal(first, 600);
    a[N - 1].state = 700; /* outside [0, S): an internal error, not a crash */
    check_error(ctx, sl_csv_sort_by_state(ctx, a, N, sizeof(*a), S, cmp_sort_rec),
                SL_EINTERNAL, "state 700", NULL);
    free(a);
    free(b);
}

/* ---- import ----------------------------------------------------------------- */

/* A small ferry dock: state = boats waiting (0..2), action 0 = wait,
 * 1 = run the ferry. Rows out of order; (0,1,1) given twice. */
static const char dock_csv[] =
    "state,action,next_state,probability,reward\n"
    "2,0,2,1.0,0\n"
    "0,1,2,0.5,3\n"
    "0,0,0,0.25,1\n"
    "0,0,1,0.75,2\n"
    "0,1,1,0.25,-1\n"
    "1,0,0,1,5\n"
    "0,1,1,0.25,1\n";

static void test_import_tiny(void **state)
{
    sl_ctx *ctx = ctx_of(state);
    sl_import_opts o = import_opts();
    sl_meta m;
    sl_block b;
    assert_int_equal(import_text(ctx, dock_csv, &o, &m, &b), SL_OK);
    assert_int_equal(m.format_version, 1);
    assert_int_equal(m.n_states, 3);
    assert_int_equal(m.n_pairs, 4);
    assert_int_equal(m.n_trans, 6);
    assert_true(m.discount == 0.95);
    assert_int_equal(m.objective, SL_OBJ_DISCOUNTED);
    assert_string_equal(m.source, "dock.csv");
    assert_int_equal(m.n_factors, 0);
    assert_int_equal(m.n_action_names, 0);
    assert_int_equal(b.s_begin, 0);
    assert_int_equal(b.s_end, 3);
    const int64_t first_pair[] = {0, 2, 3, 4};
    const int32_t action[] = {0, 1, 0, 0};
    const double reward[] = {0.25 * 1 + 0.75 * 2, 0.5 * 3 + 0.25 * -1 + 0.25 * 1, 5, 0};
    const int64_t first_trans[] = {0, 2, 4, 5, 6};
    const int64_t target[] = {0, 1, 1, 2, 0, 2};
    const double prob[] = {0.25, 0.75, 0.5, 0.5, 1, 1};
    for (int i = 0; i < 4; i++) assert_int_equal(b.first_pair[i], first_pair[i]);
    for (int k = 0; k < 4; k++) {
        assert_int_equal(b.action[k], action[k]);
        assert_double_equal(b.reward[k], reward[k], 1e-12);
    }
    for (int k = 0; k < 5; k++) assert_int_equal(b.first_trans[k], first_trans[k]);
    for (int t = 0; t < 6; t++) {
        assert_int_equal(b.target[t], target[t]);
        assert_double_equal(b.prob[t], prob[t], 1e-15);
    }
    sl_block_free(&b);
    sl_meta_free(&m);

    /* n_states larger than the rows cover: the first uncovered state named */
    o.n_states = 5;
    check_error(ctx, import_text(ctx, dock_csv, &o, &m, &b), SL_EDATA, "dock.csv:",
                "state 3 has no row", "2 of the 5 states", NULL);
    assert_null(b.first_pair);
    o.n_states = 2;
    check_error(ctx, import_text(ctx, dock_csv, &o, &m, &b), SL_EDATA, "dock.csv:2:",
                "column 'state'", "the model has 2 states", NULL);
    /* more states than rows: refused before anything is allocated per state */
    o.n_states = 100;
    check_error(ctx, import_text(ctx, dock_csv, &o, &m, &b), SL_EDATA, "dock.csv: state 3 has no row",
                "100 states, but only 7 rows", NULL);
    o.n_states = 0;
    check_error(ctx,
                import_text(ctx,
                            "state,action,next_state,probability,reward\n"
                            "0,0,0,1,0\n2,0,1000000000000,1,0\n",
                            &o, &m, &b),
                SL_EDATA, "dock.csv: state 1 has no row", "1000000000001 states", NULL);
}

static void test_import_errors(void **state)
{
    sl_ctx *ctx = ctx_of(state);
    sl_import_opts o = import_opts();
    sl_meta m;
    sl_block b;
    /* a pair summing to 0.9; its rows are scattered and preceded by blank
     * lines: the message names the first line of the pair in the input */
    const char *short_sum =
        "state,action,next_state,probability,reward\n"
        "1,0,1,1,0\n"
        "\n\n"
        "0,1,0,0.4,0\n"
        "0,0,0,1,0\n"
        "\n"
        "0,1,1,0.5,0\n";
    check_error(ctx, import_text(ctx, short_sum, &o, &m, &b), SL_EDATA, "dock.csv:5:",
                "state 0, action 1", "sum to 0.9", NULL);
    assert_int_equal(m.n_states, 0);
    assert_null(b.first_pair);
    /* a gap in the states */
    check_error(ctx,
                import_text(ctx,
                            "state,action,next_state,probability,reward\n0,0,2,1,0\n2,0,0,1,0\n",
                            &o, &m, &b),
                SL_EDATA, "dock.csv:", "state 1 has no row", NULL);
    /* field errors name the line and column */
    const struct {
        const char *row;
        const char *msg;
    } bad[] = {
        {"0,0,0,1.5,0", "column 'probability': 1.5 is not in [0, 1]"},
        {"0,0,0,-0.5,0", "column 'probability'"},
        {"0,0,0,nan,0", "column 'probability': 'nan'"},
        {"0,0,0,1,inf", "column 'reward': 'inf'"},
        {"0,0,0,1,", "column 'reward': empty field"},
        {"0.5,0,0,1,0", "column 'state': '0.5' is not an integer"},
        {"-1,0,0,1,0", "column 'state': '-1' is negative"},
        {"0,-2,0,1,0", "column 'action': '-2' is negative"},
        {"0,2147483648,0,1,0", "column 'action': '2147483648' is out of range"},
        {"0,0,1e3,1,0", "column 'next_state': '1e3' is not an integer"},
        {"0,0,9223372036854775807,1,0", "column 'next_state'"},
        {"0,0,0,1", "expected 5 fields"},
    };
    for (size_t i = 0; i < sizeof(bad) / sizeof(bad[0]); i++) {
        char text[256];
        snprintf(text, sizeof(text),
                 "state,action,next_state,probability,reward\n0,1,0,1,0\n%s\n", bad[i].row);
        check_error(ctx, import_text(ctx, text, &o, &m, &b), SL_EDATA, "dock.csv:3:",
                    bad[i].msg, NULL);
    }
    check_error(ctx, import_text(ctx, "state,action,next_state,probability,reward\n\n", &o, &m, &b),
                SL_EDATA, "dock.csv:", "no data rows", NULL);
    check_error(ctx, import_text(ctx, "state,action,next,probability,reward\n0,0,0,1,0\n", &o, &m, &b),
                SL_EDATA, "dock.csv:1:", "column 3 is 'next', expected 'next_state'",
                "state,action,next_state,probability,reward", NULL);
    /* discount and objective */
    o.discount = 1.0;
    check_error(ctx, import_text(ctx, dock_csv, &o, &m, &b), SL_EUSAGE, "discount 1",
                "[0, 1)", NULL);
    o.objective = SL_OBJ_TOTAL;
    assert_int_equal(import_text(ctx, dock_csv, &o, &m, &b), SL_OK);
    assert_true(m.discount == 1.0);
    assert_int_equal(m.objective, SL_OBJ_TOTAL);
    sl_block_free(&b);
    o.discount = 0.0;
    check_error(ctx, import_text(ctx, dock_csv, &o, &m, &b), SL_EUSAGE, "(0, 1]", "total",
                NULL);
    o.objective = SL_OBJ_DISCOUNTED;
    o.discount = -0.1;
    check_error(ctx, import_text(ctx, dock_csv, &o, &m, &b), SL_EUSAGE, "discount", NULL);
}

static void test_import_renormalize(void **state)
{
    sl_ctx *ctx = ctx_of(state);
    sl_import_opts o = import_opts();
    sl_meta m;
    sl_block b;
    const char *drift =
        "state,action,next_state,probability,reward\n"
        "0,0,0,0.5000004,2\n"
        "0,0,1,0.5,0\n"
        "1,0,1,1,0\n";
    check_error(ctx, import_text(ctx, drift, &o, &m, &b), SL_EDATA, "dock.csv:2:",
                "state 0, action 0", NULL);
    o.renormalize = 1;
    assert_int_equal(import_text(ctx, drift, &o, &m, &b), SL_OK);
    assert_int_equal(b.n_renormalized, 1);
    assert_double_equal(b.prob[0] + b.prob[1], 1.0, 1e-15);
    assert_double_equal(b.reward[0], 2 * 0.5000004 / 1.0000004, 1e-12);
    sl_block_free(&b);
    /* a looser tolerance accepts the drift without rescaling */
    o.renormalize = 0;
    o.prob_tolerance = 1e-6;
    assert_int_equal(import_text(ctx, drift, &o, &m, &b), SL_OK);
    assert_int_equal(b.n_renormalized, 0);
    sl_block_free(&b);
    /* looser than model readers allow: refused up front */
    o.prob_tolerance = 1e-3;
    check_error(ctx, import_text(ctx, drift, &o, &m, &b), SL_EUSAGE, "probability tolerance",
                NULL);
}

/* Two rows to the same successor summing to just above 1, within the
 * tolerance: whatever the builder makes of them, an accepted model must pass
 * the validation that every model reader applies, or the file written could
 * not be read back. */
static void test_import_merged_over_one(void **state)
{
    sl_ctx *ctx = ctx_of(state);
    sl_import_opts o = import_opts();
    sl_meta m;
    sl_block b;
    const char *over =
        "state,action,next_state,probability,reward\n"
        "0,0,0,0.5,1\n"
        "0,0,0,0.5000000001,1\n";
    sl_status st = import_text(ctx, over, &o, &m, &b);
    if (st == SL_OK) {
        sl_status vs = sl_block_validate(ctx, &b, &m, 1e-6, "over.csv");
        if (vs != SL_OK) print_error("accepted, but unreadable: %s\n", sl_ctx_message(ctx));
        sl_block_free(&b);
        assert_int_equal(vs, SL_OK);
    } else {
        check_error(ctx, st, SL_EDATA, "dock.csv:2:", NULL);
    }
}

/* Rows written in state order and the same rows shuffled (with some rows
 * split into two halves) build identical blocks. */
static void test_import_order_independent(void **state)
{
    sl_ctx *ctx = ctx_of(state);
    enum { NS = 300, NA = 3, NJ = 4 };
    size_t maxrows = (size_t)NS * NA * (NJ + 1);
    char (*line)[64] = malloc(maxrows * sizeof(*line));
    assert_non_null(line);
    size_t n = 0;
    uint64_t seed = 12345;
    for (int s = 0; s < NS; s++)
        for (int a = 0; a < NA; a++) {
            if (a == 1 && s % 7 == 0) continue; /* action 1 unavailable there */
            for (int j = 0; j < NJ; j++) {
                int64_t t = (s + j * 37) % NS;
                double r = (double)(int)(next_rand(&seed) % 100) / 4.0 - 10.0;
                if (j == 0) {
                    /* split the first successor into two rows of 0.125 */
                    snprintf(line[n++], 64, "%d,%d,%lld,0.125,%g", s, a, (long long)t, r);
                    snprintf(line[n++], 64, "%d,%d,%lld,0.125,%g", s, a, (long long)t, r + 1);
                } else {
                    snprintf(line[n++], 64, "%d,%d,%lld,0.25,%g", s, a, (long long)t, r);
                }
            }
        }
    size_t bytes = (n + 1) * 64 + 64;
    char *ordered = malloc(bytes), *shuffled = malloc(bytes);
    size_t *perm = malloc(n * sizeof(*perm));
    assert_non_null(ordered);
    assert_non_null(shuffled);
    assert_non_null(perm);
    for (size_t i = 0; i < n; i++) perm[i] = i;
    for (size_t i = n - 1; i > 0; i--) {
        size_t k = (size_t)(next_rand(&seed) % (i + 1)), tmp = perm[i];
        perm[i] = perm[k];
        perm[k] = tmp;
    }
    size_t lo = 0, ls = 0;
    const char *hdr = "state,action,next_state,probability,reward\n";
    lo += (size_t)snprintf(ordered, bytes, "%s", hdr);
    ls += (size_t)snprintf(shuffled, bytes, "%s", hdr);
    for (size_t i = 0; i < n; i++) {
        lo += (size_t)snprintf(ordered + lo, bytes - lo, "%s\n", line[i]);
        ls += (size_t)snprintf(shuffled + ls, bytes - ls, "%s\r\n", line[perm[i]]);
    }
    sl_import_opts o = import_opts();
    sl_meta m1, m2;
    sl_block b1, b2;
    assert_int_equal(import_text(ctx, ordered, &o, &m1, &b1), SL_OK);
    assert_int_equal(import_text(ctx, shuffled, &o, &m2, &b2), SL_OK);
    assert_int_equal(m1.n_states, NS);
    assert_int_equal(m1.n_pairs, NS * NA - (NS + 6) / 7);
    assert_int_equal(m1.n_trans, m1.n_pairs * NJ);
    assert_int_equal(m2.n_pairs, m1.n_pairs);
    assert_int_equal(m2.n_trans, m1.n_trans);
    for (int64_t i = 0; i <= NS; i++) assert_int_equal(b1.first_pair[i], b2.first_pair[i]);
    for (int64_t k = 0; k < m1.n_pairs; k++) {
        assert_int_equal(b1.action[k], b2.action[k]);
        assert_int_equal(b1.first_trans[k + 1], b2.first_trans[k + 1]);
        /* sums of p*r in a different order: equal to rounding */
        assert_double_equal(b1.reward[k], b2.reward[k], 1e-12);
    }
    for (int64_t t = 0; t < m1.n_trans; t++) {
        assert_int_equal(b1.target[t], b2.target[t]);
        assert_double_equal(b1.prob[t], b2.prob[t], 1e-15);
        assert_double_equal(b1.prob[t], 0.25, 1e-15);
    }
    sl_block_free(&b1);
    sl_block_free(&b2);
    free(perm);
    free(ordered);
    free(shuffled);
    free(line);
}

/* ---- estimate --------------------------------------------------------------- */

/* A parking garage log: state = floors free (0..2), action 0 = hold price,
 * 1 = discount. */
static const char garage_csv[] =
    "state,action,reward,next_state\n"
    "0,0,1,1\n"
    "1,1,4,2\n"
    "0,0,3,1\n"
    "0,0,2,0\n"
    "1,1,2,2\n"
    "0,1,-1,2\n"
    "2,0,0,0\n"
    "0,0,6,1\n";

static void test_estimate_tiny(void **state)
{
    sl_ctx *ctx = ctx_of(state);
    sl_estimate_opts o = estimate_opts();
    sl_meta m;
    sl_block b;
    int64_t dropped = -1, absorbed = -1;
    double p = 0, r = 0;
    assert_int_equal(estimate_text(ctx, garage_csv, &o, &m, &b, &dropped, &absorbed), SL_OK);
    assert_int_equal(dropped, 0);
    assert_int_equal(absorbed, 0);
    assert_int_equal(m.n_states, 3);
    assert_int_equal(m.n_pairs, 4);
    assert_int_equal(m.n_trans, 5);
    assert_true(m.discount == 0.9);
    assert_string_equal(m.source, "log.csv");
    /* (0,0): 4 visits: to 1 three times (rewards 1,3,6), to 0 once (2) */
    assert_true(find_trans(&b, 0, 0, 1, &p, &r));
    assert_double_equal(p, 0.75, 1e-15);
    assert_double_equal(r, (1.0 + 3 + 6 + 2) / 4, 1e-12);
    assert_true(find_trans(&b, 0, 0, 0, &p, &r));
    assert_double_equal(p, 0.25, 1e-15);
    assert_true(find_trans(&b, 0, 1, 2, &p, &r));
    assert_double_equal(p, 1.0, 0);
    assert_double_equal(r, -1.0, 1e-15);
    assert_true(find_trans(&b, 1, 1, 2, &p, &r));
    assert_double_equal(r, 3.0, 1e-15);
    assert_true(find_trans(&b, 2, 0, 0, &p, &r));
    assert_false(find_trans(&b, 1, 0, 2, &p, &r));
    sl_block_free(&b);

    /* min_visits 2 drops (0,1) and (2,0): state 2 then has no data */
    o.min_visits = 2;
    check_error(ctx, estimate_text(ctx, garage_csv, &o, &m, &b, &dropped, &absorbed), SL_EDATA,
                "log.csv:", "state 2 has no data", "minimum visits", "1 of the 3 states",
                NULL);
    o.unseen_absorb = 1;
    assert_int_equal(estimate_text(ctx, garage_csv, &o, &m, &b, &dropped, &absorbed), SL_OK);
    assert_int_equal(dropped, 2);
    assert_int_equal(absorbed, 1);
    assert_int_equal(m.n_pairs, 3);
    assert_true(find_trans(&b, 2, 0, 2, &p, &r));
    assert_double_equal(p, 1.0, 0);
    assert_double_equal(r, 0.0, 0);
    assert_false(find_trans(&b, 0, 1, 2, &p, &r));
    sl_block_free(&b);

    /* a state seen only as a successor, and a state never seen at all */
    o = estimate_opts();
    const char *gap = "state,action,reward,next_state\n0,0,1,3\n1,0,1,0\n0,0,1,1\n1,0,1,0\n";
    check_error(ctx, estimate_text(ctx, gap, &o, &m, &b, NULL, NULL), SL_EDATA,
                "state 2 has no data", "never occurs in the state column", "2 of the 4", NULL);
    o.unseen_absorb = 1;
    assert_int_equal(estimate_text(ctx, gap, &o, &m, &b, &dropped, &absorbed), SL_OK);
    assert_int_equal(absorbed, 2);
    assert_int_equal(m.n_states, 4);
    assert_true(find_trans(&b, 3, 0, 3, &p, &r));
    sl_block_free(&b);
    o.n_states = 3;
    check_error(ctx, estimate_text(ctx, gap, &o, &m, &b, NULL, NULL), SL_EDATA, "log.csv:2:",
                "column 'next_state'", "the model has 3 states", NULL);
    /* more states than steps: refused before anything is allocated per state */
    o = estimate_opts();
    check_error(ctx,
                estimate_text(ctx, "state,action,reward,next_state\n0,0,1,1000000000000\n", &o,
                              &m, &b, NULL, NULL),
                SL_EDATA, "log.csv: state 1 has no data", "1000000000001 states", NULL);
}

static void test_estimate_errors(void **state)
{
    sl_ctx *ctx = ctx_of(state);
    sl_estimate_opts o = estimate_opts();
    sl_meta m;
    sl_block b;
    check_error(ctx, estimate_text(ctx, "state,action,next_state,reward\n0,0,0,1\n", &o, &m, &b,
                                   NULL, NULL),
                SL_EDATA, "log.csv:1:", "column 3 is 'next_state', expected 'reward'",
                "'state,action,reward,next_state'", NULL);
    check_error(ctx, estimate_text(ctx, "state,action,reward,next_state\n0,0,x,0\n", &o, &m, &b,
                                   NULL, NULL),
                SL_EDATA, "log.csv:2:", "column 'reward': 'x'", NULL);
    check_error(ctx, estimate_text(ctx, "state,action,reward,next_state\n0,0,1,0.0\n", &o, &m,
                                   &b, NULL, NULL),
                SL_EDATA, "log.csv:2:", "column 'next_state': '0.0' is not an integer", NULL);
    o.min_visits = -1;
    check_error(ctx, estimate_text(ctx, garage_csv, &o, &m, &b, NULL, NULL), SL_EUSAGE,
                "minimum visits", NULL);
    o = estimate_opts();
    o.objective = SL_OBJ_AVERAGE;
    o.discount = 1.0;
    assert_int_equal(estimate_text(ctx, garage_csv, &o, &m, &b, NULL, NULL), SL_OK);
    sl_block_free(&b);
}

/* The estimated model does not depend on the order of the log. */
static void test_estimate_order_independent(void **state)
{
    sl_ctx *ctx = ctx_of(state);
    const char *a_csv =
        "state,action,reward,next_state\n"
        "0,0,0.1,1\n0,0,0.7,1\n0,0,0.2,0\n1,0,5,0\n1,1,1e-3,1\n0,0,0.3,1\n1,0,2,0\n";
    const char *b_csv =
        "state,action,reward,next_state\n"
        "1,0,2,0\n0,0,0.3,1\n0,0,0.7,1\n1,1,1e-3,1\n0,0,0.2,0\n1,0,5,0\n0,0,0.1,1\n";
    sl_estimate_opts o = estimate_opts();
    sl_meta m1, m2;
    sl_block b1, b2;
    assert_int_equal(estimate_text(ctx, a_csv, &o, &m1, &b1, NULL, NULL), SL_OK);
    assert_int_equal(estimate_text(ctx, b_csv, &o, &m2, &b2, NULL, NULL), SL_OK);
    assert_int_equal(m1.n_trans, m2.n_trans);
    assert_int_equal(m1.n_pairs, 3);
    for (int64_t k = 0; k < m1.n_pairs; k++) {
        assert_int_equal(b1.action[k], b2.action[k]);
        assert_memory_equal(&b1.reward[k], &b2.reward[k], sizeof(double));
    }
    for (int64_t t = 0; t < m1.n_trans; t++) {
        assert_int_equal(b1.target[t], b2.target[t]);
        assert_memory_equal(&b1.prob[t], &b2.prob[t], sizeof(double));
    }
    assert_double_equal(b1.reward[0], (0.1 + 0.7 + 0.2 + 0.3) / 4, 1e-12);
    sl_block_free(&b1);
    sl_block_free(&b2);
}

/* ---- the collective entry points, up to the point of writing --------------- */

/* A fresh directory made by rank 0, its name on every rank. */
static void shared_dir(char *dir, size_t n)
{
    int rank = 0, ok = 1;
    MPI_Comm_rank(MPI_COMM_WORLD, &rank);
    if (rank == 0) {
        const char *tmp = getenv("TMPDIR");
        snprintf(dir, n, "%s/sl_csv_test_XXXXXX", tmp && tmp[0] ? tmp : "/tmp");
        ok = mkdtemp(dir) != NULL;
    }
    MPI_Bcast(&ok, 1, MPI_INT, 0, MPI_COMM_WORLD);
    assert_true(ok);
    MPI_Bcast(dir, (int)n, MPI_CHAR, 0, MPI_COMM_WORLD);
}

static void write_file(const char *path, const char *text)
{
    int rank = 0;
    MPI_Comm_rank(MPI_COMM_WORLD, &rank);
    if (rank == 0) {
        FILE *fp = fopen(path, "w");
        assert_non_null(fp);
        assert_int_equal(fputs(text, fp) >= 0, 1);
        assert_int_equal(fclose(fp), 0);
    }
    MPI_Barrier(MPI_COMM_WORLD);
}

static void remove_files(const char *dir, const char *const *names, int n)
{
    int rank = 0;
    MPI_Barrier(MPI_COMM_WORLD);
    MPI_Comm_rank(MPI_COMM_WORLD, &rank);
    if (rank == 0) {
        for (int i = 0; i < n; i++) {
            char path[600];
            snprintf(path, sizeof(path), "%s/%s", dir, names[i]);
            unlink(path);
        }
        assert_int_equal(rmdir(dir), 0);
    }
    MPI_Barrier(MPI_COMM_WORLD);
}

/* The command line's import/estimate: a model handle, then the file. */
static sl_status import_to(sl_ctx *ctx, const sl_import_opts *o, const char *path)
{
    sl_model *m = NULL;
    sl_status st = sl_model_import_csv(ctx, o, &m);
    if (st == SL_OK) st = sl_model_save(m, path);
    sl_model_free(&m);
    return st;
}

static sl_status estimate_to(sl_ctx *ctx, const sl_estimate_opts *o, const char *path)
{
    sl_model *m = NULL;
    sl_status st = sl_model_estimate_csv(ctx, o, &m);
    if (st == SL_OK) st = sl_model_save(m, path);
    sl_model_free(&m);
    return st;
}

static void test_entry_points_errors(void **state)
{
    sl_ctx *ctx = ctx_of(state);
    char d[512], missing[600], bad[600], out[600];
    shared_dir(d, sizeof(d));
    snprintf(missing, sizeof(missing), "%s/none.csv", d);
    snprintf(bad, sizeof(bad), "%s/bad.csv", d);
    snprintf(out, sizeof(out), "%s/out.h5", d);
    write_file(bad, "state,action,next_state,probability,reward\n0,0,0,1,0\n0,1,0,2,0\n");

    sl_import_opts io = import_opts();
    io.input = missing;
    check_error(ctx, import_to(ctx, &io, out), SL_ENOINPUT, missing, "cannot open", NULL);
    io.input = d;
    check_error(ctx, import_to(ctx, &io, out), SL_ENOINPUT, "is a directory", NULL);
    io.input = bad;
    check_error(ctx, import_to(ctx, &io, out), SL_EDATA, bad, ":3: column 'probability'", NULL);
    io.discount = 1.5;
    check_error(ctx, import_to(ctx, &io, out), SL_EUSAGE, "discount 1.5", NULL);

    sl_estimate_opts eo = estimate_opts();
    eo.input = missing;
    check_error(ctx, estimate_to(ctx, &eo, out), SL_ENOINPUT, missing, NULL);
    eo.input = bad;
    check_error(ctx, estimate_to(ctx, &eo, out), SL_EDATA, bad, ":1: bad header", NULL);
    assert_int_equal(access(out, F_OK), -1);

    const char *names[] = {"bad.csv"};
    remove_files(d, names, 1);
}

/* Import and estimate through the model file, read back on every rank's
 * share of the states. */
static void test_entry_points_write(void **state)
{
    sl_ctx *ctx = ctx_of(state);
    int rank = sl_ctx_rank(ctx), size = sl_ctx_size(ctx);
    char d[512], in[600], in2[600], log[600], out[600], out2[600];
    shared_dir(d, sizeof(d));
    snprintf(in, sizeof(in), "%s/dock.csv", d);
    snprintf(in2, sizeof(in2), "%s/dock2.csv", d);
    snprintf(log, sizeof(log), "%s/garage.csv", d);
    snprintf(out, sizeof(out), "%s/dock.h5", d);
    snprintf(out2, sizeof(out2), "%s/dock2.h5", d);
    write_file(in, dock_csv);
    /* the same rows in another order (exact binary fractions: the merged
     * rewards are identical to the bit, and so is the fingerprint) */
    write_file(in2, "state,action,next_state,probability,reward\n"
                    "0,1,1,0.25,1\n0,0,1,0.75,2\n1,0,0,1,5\n0,1,1,0.25,-1\n"
                    "2,0,2,1.0,0\n0,1,2,0.5,3\n0,0,0,0.25,1\n");
    write_file(log, garage_csv);

    sl_import_opts io = import_opts();
    io.input = in;
    assert_int_equal(import_to(ctx, &io, out), SL_OK);
    io.input = in2;
    assert_int_equal(import_to(ctx, &io, out2), SL_OK);

    sl_meta m, m2;
    assert_int_equal(sl_store_model_meta(ctx, out, &m), SL_OK);
    assert_int_equal(sl_store_model_meta(ctx, out2, &m2), SL_OK);
    assert_int_equal(m.n_states, 3);
    assert_int_equal(m.n_pairs, 4);
    assert_int_equal(m.n_trans, 6);
    assert_true(m.discount == 0.95);
    assert_int_equal(m.objective, SL_OBJ_DISCOUNTED);
    assert_string_equal(m.source, in);
    assert_int_equal(strlen(m.fingerprint), 32);
    assert_string_equal(m.fingerprint, m2.fingerprint);

    int64_t s0 = m.n_states * rank / size, s1 = m.n_states * (rank + 1) / size;
    sl_block b;
    assert_int_equal(sl_store_model_read(ctx, out, &m, s0, s1, &b), SL_OK);
    const int64_t first_pair[] = {0, 2, 3, 4};
    const int32_t action[] = {0, 1, 0, 0};
    const double reward[] = {1.75, 1.5, 5, 0};
    const int64_t first_trans[] = {0, 2, 4, 5, 6};
    const int64_t target[] = {0, 1, 1, 2, 0, 2};
    const double prob[] = {0.25, 0.75, 0.5, 0.5, 1, 1};
    for (int64_t s = s0; s <= s1; s++) assert_int_equal(b.first_pair[s - s0], first_pair[s]);
    for (int64_t k = b.p_begin; k < b.p_end; k++) {
        assert_int_equal(b.action[k - b.p_begin], action[k]);
        assert_double_equal(b.reward[k - b.p_begin], reward[k], 1e-12);
        assert_int_equal(b.first_trans[k - b.p_begin + 1], first_trans[k + 1]);
    }
    for (int64_t t = b.t_begin; t < b.t_end; t++) {
        assert_int_equal(b.target[t - b.t_begin], target[t]);
        assert_double_equal(b.prob[t - b.t_begin], prob[t], 1e-15);
    }
    sl_block_free(&b);
    sl_meta_free(&m);
    sl_meta_free(&m2);

    sl_estimate_opts eo = estimate_opts();
    eo.input = log;
    eo.min_visits = 2;
    eo.unseen_absorb = 1;
    /* replaces the imported model atomically */
    assert_int_equal(estimate_to(ctx, &eo, out), SL_OK);
    assert_int_equal(sl_store_model_meta(ctx, out, &m), SL_OK);
    assert_int_equal(m.n_states, 3);
    assert_int_equal(m.n_pairs, 3);
    assert_true(m.discount == 0.9);
    s0 = m.n_states * rank / size;
    s1 = m.n_states * (rank + 1) / size;
    assert_int_equal(sl_store_model_read(ctx, out, &m, s0, s1, &b), SL_OK);
    double p = 0, r = 0;
    for (int64_t s = s0; s < s1; s++) {
        if (s == 0) {
            assert_true(find_trans(&b, 0, 0, 1, &p, &r));
            assert_double_equal(p, 0.75, 1e-15);
            assert_double_equal(r, 3.0, 1e-12);
            assert_false(find_trans(&b, 0, 1, 2, &p, &r)); /* dropped */
        } else if (s == 1) {
            assert_true(find_trans(&b, 1, 1, 2, &p, &r));
            assert_double_equal(r, 3.0, 1e-12);
        } else {
            assert_true(find_trans(&b, 2, 0, 2, &p, &r)); /* absorbing */
            assert_double_equal(p, 1.0, 0);
            assert_double_equal(r, 0.0, 0);
        }
    }
    sl_block_free(&b);
    sl_meta_free(&m);

    const char *names[] = {"dock.csv", "dock2.csv", "garage.csv", "dock.h5", "dock2.h5"};
    remove_files(d, names, 5);
}

/* ---- main --------------------------------------------------------------------- */

/* Each test starts without a recorded error, even after a failed one. */
static int clean_error(void **state)
{
    sl_error_clear(ctx_of(state));
    return 0;
}

static int setup(void **state)
{
    sl_ctx *ctx = NULL;
    if (sl_ctx_new(MPI_COMM_WORLD, 0, &ctx) != SL_OK) return -1;
    *state = ctx;
    return 0;
}

static int teardown(void **state)
{
    sl_ctx *ctx = *state;
    sl_ctx_free(&ctx);
    return 0;
}

int main(int argc, char **argv)
{
    MPI_Init(&argc, &argv);
    const struct CMUnitTest tests[] = {
        cmocka_unit_test_setup(test_tokenizer_dialect, clean_error),
        cmocka_unit_test_setup(test_tokenizer_long_lines, clean_error),
        cmocka_unit_test_setup(test_tokenizer_errors, clean_error),
        cmocka_unit_test_setup(test_integers, clean_error),
        cmocka_unit_test_setup(test_doubles, clean_error),
        cmocka_unit_test_setup(test_doubles_match_strtod, clean_error),
        cmocka_unit_test_setup(test_state_sort, clean_error),
        cmocka_unit_test_setup(test_import_tiny, clean_error),
        cmocka_unit_test_setup(test_import_errors, clean_error),
        cmocka_unit_test_setup(test_import_renormalize, clean_error),
        cmocka_unit_test_setup(test_import_merged_over_one, clean_error),
        cmocka_unit_test_setup(test_import_order_independent, clean_error),
        cmocka_unit_test_setup(test_estimate_tiny, clean_error),
        cmocka_unit_test_setup(test_estimate_errors, clean_error),
        cmocka_unit_test_setup(test_estimate_order_independent, clean_error),
        cmocka_unit_test_setup(test_entry_points_errors, clean_error),
        cmocka_unit_test_setup(test_entry_points_write, clean_error),
    };
    int failed = cmocka_run_group_tests(tests, setup, teardown);
    MPI_Finalize();
    return failed ? 1 : 0;
}
