/* import.c - `sluice import`: a triplet CSV (one row per transition) to a model file. */
#include "input/csv.h"

#include <string.h>

static const char *const trip_cols[] = {"state", "action", "next_state", "probability",
                                        "reward"};
enum { T_STATE, T_ACTION, T_NEXT, T_PROB, T_REWARD, T_NCOLS };

/* One parsed row, 40 bytes; the text is never kept. Memory for N rows and
 * S <= N states: 40 N for the rows (10^8 rows: 4.0 GB), up to 20 N more
 * while the array grows by half (realloc of a large block usually moves
 * pages instead of copying), 16 S for the in-place state sort (none when
 * the input is already in (state, action) order), then the built block
 * (8 bytes per state, 20 per pair, 16 per transition) while the rows are
 * still held: about 36 + 40 = 76 bytes per row at the peak when no
 * transitions merge. */
typedef struct trip {
    int64_t state, next;
    double prob, reward;
    int32_t action;
    uint32_t row;               /* input order; its line comes from the line map */
} trip;

#define TRIP_MAX_ROWS ((size_t)UINT32_MAX)

/* Lines of rows without a line number per row: consecutive rows are on
 * consecutive lines except where blank lines intervene, so only the breaks
 * are recorded as (first row, its line). */
typedef struct linemap {
    uint32_t *row;
    int64_t *line;
    size_t n, cap;
    int64_t expect;             /* line the next row would have without a break */
} linemap;

static sl_status linemap_note(sl_ctx *ctx, linemap *lm, uint32_t row, int64_t line)
{
    if (line != lm->expect) {
        if (lm->n == lm->cap) {
            size_t ncap = lm->cap ? lm->cap * 2 : 64;
            uint32_t *r = realloc(lm->row, ncap * sizeof(*r));
            if (r == NULL) return SL_ERR(ctx, SL_ENOMEM, "out of memory for the line map");
            lm->row = r;
            int64_t *l = realloc(lm->line, ncap * sizeof(*l));
            if (l == NULL) return SL_ERR(ctx, SL_ENOMEM, "out of memory for the line map");
            lm->line = l;
            lm->cap = ncap;
        }
        lm->row[lm->n] = row;
        lm->line[lm->n] = line;
        lm->n++;
    }
    lm->expect = line + 1;
    return SL_OK;
}

static int64_t linemap_line(const linemap *lm, uint32_t row)
{
    size_t lo = 0, hi = lm->n;  /* last entry with entry.row <= row; entry 0 is row 0 */
    while (hi - lo > 1) {
        size_t mid = lo + (hi - lo) / 2;
        if (lm->row[mid] <= row) lo = mid;
        else hi = mid;
    }
    return lm->n ? lm->line[lo] + (int64_t)(row - lm->row[lo]) : 0;
}

static void linemap_free(linemap *lm)
{
    free(lm->row);
    free(lm->line);
    memset(lm, 0, sizeof(*lm));
}

static int cmp_trip(const void *x, const void *y)
{
    const trip *a = x, *b = y;
    if (a->state != b->state) return a->state < b->state ? -1 : 1;
    if (a->action != b->action) return a->action < b->action ? -1 : 1;
    return (a->row > b->row) - (a->row < b->row);
}

/* Re-record the builder's message (which starts "NAME: ") as "NAME:LINE: ...". */
static sl_status at_line(sl_ctx *ctx, sl_status st, const char *name, int64_t line,
                         const char *what)
{
    if (st == SL_ENOMEM) return st;
    char msg[SL_MSG_MAX];
    const char *m = ctx->err;
    size_t nl = strlen(name);
    if (strncmp(m, name, nl) == 0 && m[nl] == ':' && m[nl + 1] == ' ') m += nl + 2;
    snprintf(msg, sizeof(msg), "%s", m);
    sl_error_clear(ctx);
    return SL_ERR(ctx, st, "%s:%lld: %s (%s)", name, (long long)line, msg, what);
}

sl_status sl_csv_read_triplets(sl_ctx *ctx, FILE *fp, const char *name,
                               const sl_import_opts *opts, sl_meta *m, sl_block *b)
{
    sl_status st = SL_OK;
    sl_csv *c = NULL;
    trip *rows = NULL;
    size_t n = 0, cap = 0;
    linemap lm = {0};
    lm.expect = -1;
    int sorted = 1;
    int64_t max_index = -1;
    double t0 = sl_now();
    memset(m, 0, sizeof(*m));
    memset(b, 0, sizeof(*b));

    if (opts->n_states < 0)
        SL_FAIL(SL_EUSAGE, "number of states %lld is negative", (long long)opts->n_states);
    /* model readers check sums to 1e-6 (sl_store_model_read): a looser
     * tolerance here would write a file that cannot be read back */
    if (!(opts->prob_tolerance >= 0.0 && opts->prob_tolerance <= 1e-6))
        SL_FAIL(SL_EUSAGE,
                "probability tolerance %g is not in [0, 1e-6] (model files are read back "
                "with 1e-6); fix the rows, or renormalize drift up to 1e-6",
                opts->prob_tolerance);
    SL_TRY(sl_csv_check_discount(ctx, opts->objective, opts->discount));
    const int64_t limit = opts->n_states > 0 ? opts->n_states : INT64_MAX;

    SL_TRY(sl_csv_open(ctx, fp, name, &c));
    SL_TRY(sl_csv_read_header(ctx, c, trip_cols, T_NCOLS));
    for (;;) {
        int more = 0;
        SL_TRY(sl_csv_next(ctx, c, &more));
        if (!more) break;
        if (n == TRIP_MAX_ROWS)
            SL_FAIL(SL_EDATA, "%s:%lld: more than %zu rows, too many for one import", name,
                    (long long)sl_csv_line(c), TRIP_MAX_ROWS);
        int64_t s, a, j;
        double p, r;
        SL_TRY(sl_csv_int(ctx, c, T_STATE, 0, INT64_MAX - 1, &s));
        SL_TRY(sl_csv_int(ctx, c, T_ACTION, 0, INT32_MAX, &a));
        SL_TRY(sl_csv_int(ctx, c, T_NEXT, 0, INT64_MAX - 1, &j));
        SL_TRY(sl_csv_double(ctx, c, T_PROB, &p));
        SL_TRY(sl_csv_double(ctx, c, T_REWARD, &r));
        if (s >= limit) {
            st = sl_csv_error(ctx, c, T_STATE, SL_EDATA,
                              "state %lld is out of range: the model has %lld states",
                              (long long)s, (long long)limit);
            goto cleanup;
        }
        if (j >= limit) {
            st = sl_csv_error(ctx, c, T_NEXT, SL_EDATA,
                              "next state %lld is out of range: the model has %lld states",
                              (long long)j, (long long)limit);
            goto cleanup;
        }
        if (!(p >= 0.0 && p <= 1.0)) {
            st = sl_csv_error(ctx, c, T_PROB, SL_EDATA, "%.17g is not in [0, 1]", p);
            goto cleanup;
        }
        if (n == cap) {
            size_t ncap = cap ? cap + cap / 2 : 4096;
            if (ncap > TRIP_MAX_ROWS) ncap = TRIP_MAX_ROWS;
            trip *nr = ncap <= SIZE_MAX / sizeof(*nr) ? realloc(rows, ncap * sizeof(*nr)) : NULL;
            if (nr == NULL)
                SL_FAIL(SL_ENOMEM, "%s:%lld: out of memory holding %zu rows (%zu bytes each)",
                        name, (long long)sl_csv_line(c), n, sizeof(*rows));
            rows = nr;
            cap = ncap;
        }
        trip *t = &rows[n];
        t->state = s;
        t->next = j;
        t->prob = p;
        t->reward = r;
        t->action = (int32_t)a;
        t->row = (uint32_t)n;
        if (n > 0 && (s < t[-1].state || (s == t[-1].state && t->action < t[-1].action)))
            sorted = 0;
        SL_TRY(linemap_note(ctx, &lm, (uint32_t)n, sl_csv_line(c)));
        if (s > max_index) max_index = s;
        if (j > max_index) max_index = j;
        n++;
    }
    if (n == 0)
        SL_FAIL(SL_EDATA, "%s:%lld: no data rows after the header", name,
                (long long)sl_csv_line(c));
    const int64_t n_states = opts->n_states > 0 ? opts->n_states : max_index + 1;
    if (n_states > (int64_t)n) {
        /* more states than rows: some state has none; say so before
         * allocating anything per state */
        int64_t first = 0;
        SL_TRY(sl_csv_first_absent_state(ctx, rows, n, sizeof(*rows), &first));
        SL_FAIL(SL_EDATA,
                "%s: state %lld has no row (%lld states, but only %zu rows; every state needs "
                "at least one action)",
                name, (long long)first, (long long)n_states, n);
    }
    double t1 = sl_now();
    if (!sorted) SL_TRY(sl_csv_sort_by_state(ctx, rows, n, sizeof(*rows), n_states, cmp_trip));
    double t2 = sl_now();

    /* every state needs a row; name the first one without, and count them */
    {
        int64_t expect = 0, missing = 0, first_missing = -1;
        for (size_t i = 0; i < n; i++) {
            if (rows[i].state > expect) {
                if (first_missing < 0) first_missing = expect;
                missing += rows[i].state - expect;
            }
            expect = rows[i].state + 1;
        }
        if (expect < n_states) {
            if (first_missing < 0) first_missing = expect;
            missing += n_states - expect;
        }
        if (missing > 0)
            SL_FAIL(SL_EDATA,
                    "%s: state %lld has no row (%lld of the %lld states have none; every state "
                    "needs at least one action)",
                    name, (long long)first_missing, (long long)missing, (long long)n_states);
    }

    SL_TRY(sl_block_init(ctx, b, 0, n_states, name));
    if (opts->prob_tolerance > 0.0) b->prob_tolerance = opts->prob_tolerance;
    b->renormalize = opts->renormalize;
    size_t i = 0;
    for (int64_t s = 0; s < n_states; s++) {
        SL_TRY(sl_block_begin_state(ctx, b));
        while (i < n && rows[i].state == s) {
            const size_t first = i;
            const int32_t a = rows[i].action;
            st = sl_block_begin_pair(ctx, b, a);
            if (st != SL_OK) {
                st = at_line(ctx, st, name, linemap_line(&lm, rows[first].row), "first row");
                goto cleanup;
            }
            for (; i < n && rows[i].state == s && rows[i].action == a; i++) {
                st = sl_block_add(ctx, b, rows[i].next, rows[i].prob, rows[i].reward);
                if (st != SL_OK) {
                    st = at_line(ctx, st, name, linemap_line(&lm, rows[i].row), "this row");
                    goto cleanup;
                }
            }
            st = sl_block_end_pair(ctx, b);
            if (st != SL_OK) {
                st = at_line(ctx, st, name, linemap_line(&lm, rows[first].row),
                             "the first row of this state and action");
                goto cleanup;
            }
        }
        SL_TRY(sl_block_end_state(ctx, b));
    }

    m->format_version = SLUICE_FORMAT_VERSION;
    m->n_states = n_states;
    m->n_pairs = sl_block_pairs(b);
    m->n_trans = sl_block_trans(b);
    m->discount = opts->discount;
    m->objective = opts->objective;
    snprintf(m->source, sizeof(m->source), "%s", name);
    double t3 = sl_now();
    sl_log(ctx,
           "%s: %zu rows read in %.2f s (%.3g rows/s)%s; %lld states, %lld pairs, %lld "
           "transitions after merging (sort %.2f s, build %.2f s)",
           name, n, t1 - t0, (double)n / (t1 - t0 > 1e-9 ? t1 - t0 : 1e-9),
           sorted ? ", already in order" : "", (long long)m->n_states, (long long)m->n_pairs,
           (long long)m->n_trans, t2 - t1, t3 - t2);

cleanup:
    if (st != SL_OK) {
        sl_block_free(b);
        sl_meta_free(m);
        memset(m, 0, sizeof(*m));
    }
    free(rows);
    linemap_free(&lm);
    sl_csv_free(&c);
    return st;
}

/* Terminal values 'state,terminal_value' for every state of b exactly once
 * into b->terminal (rank 0 holds every state). Local. */
static sl_status read_terminal(sl_ctx *ctx, const char *path, sl_meta *m, sl_block *b)
{
    static const char *const cols[] = {"state", "terminal_value"};
    sl_status st = SL_OK;
    FILE *fp = NULL;
    sl_csv *c = NULL;
    char *seen = NULL;
    const char *name = path;
    int64_t n = sl_block_states(b);
    if (m->objective != SL_OBJ_FINITE)
        return SL_ERR(ctx, SL_EUSAGE, "%s: terminal values apply to the finite objective, not \"%s\"", path,
                      sl_objective_name(m->objective));
    if (SL_ALLOC(ctx, b->terminal, n + 1, "terminal values") == NULL || SL_ZALLOC(ctx, seen, n + 1, "flags") == NULL)
        SL_TRY(SL_ENOMEM);
    SL_TRY(sl_csv_open_input(ctx, path, &fp, &name));
    SL_TRY(sl_csv_open(ctx, fp, name, &c));
    SL_TRY(sl_csv_read_header(ctx, c, cols, 2));
    for (;;) {
        int more = 0;
        int64_t s;
        double v;
        SL_TRY(sl_csv_next(ctx, c, &more));
        if (!more) break;
        SL_TRY(sl_csv_int(ctx, c, 0, 0, INT64_MAX - 1, &s));
        SL_TRY(sl_csv_double(ctx, c, 1, &v));
        if (s >= n) {
            st = sl_csv_error(ctx, c, 0, SL_EDATA, "state %lld is out of range: the model has %lld states",
                              (long long)s, (long long)n);
            goto cleanup;
        }
        if (seen[s]) {
            st = sl_csv_error(ctx, c, 0, SL_EDATA, "state %lld is given twice", (long long)s);
            goto cleanup;
        }
        seen[s] = 1;
        b->terminal[s] = v;
    }
    for (int64_t s = 0; s < n; s++)
        if (!seen[s]) SL_FAIL(SL_EDATA, "%s: state %lld has no terminal value (every state needs one)", name, (long long)s);
    m->has_terminal = 1;
cleanup:
    if (st != SL_OK) {
        free(b->terminal);
        b->terminal = NULL;
    }
    free(seen);
    sl_csv_free(&c);
    sl_csv_close_input(&fp);
    return st;
}

/* The reader for sl_csv_model_load: triplets, terminal values, then the
 * renormalization count. */
static sl_status read_import(sl_ctx *ctx, FILE *fp, const char *name, const void *arg, sl_meta *m, sl_block *b)
{
    const sl_import_opts *opts = arg;
    sl_status st = sl_csv_read_triplets(ctx, fp, name, opts, m, b);
    if (st == SL_OK && opts->terminal_values) st = read_terminal(ctx, opts->terminal_values, m, b);
    if (st == SL_OK && opts->renormalize)
        sl_log(ctx, "%s: %lld of %lld pairs renormalized (probability sums within 1e-6 of 1)", name,
               (long long)b->n_renormalized, (long long)m->n_pairs);
    return st;
}

sl_status sl_model_import_csv(sl_ctx *ctx, const sl_import_opts *opts, sl_model **out)
{
    return sl_csv_model_load(ctx, "sl_model_import_csv", opts ? opts->input : NULL, "import needs an input CSV",
                             opts ? opts->objective : SL_OBJ_DISCOUNTED, opts ? opts->discount : 0.0, read_import,
                             opts, out);
}
