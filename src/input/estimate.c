/* estimate.c - `sluice estimate`: a maximum-likelihood model from logged experience. */
#include "input/csv.h"

#include <string.h>

static const char *const exp_cols[] = {"state", "action", "reward", "next_state"};
enum { E_STATE, E_ACTION, E_REWARD, E_NEXT, E_NCOLS };

/* One logged step, 32 bytes; the text is never kept. Memory for N steps
 * and S states: 32 N (10^8 steps: 3.2 GB), up to 16 N more while the array
 * grows, 16 S for the in-place state sort, then the built block (at most
 * 8 S + 20 per pair + 16 per distinct transition) while the steps are held. */
typedef struct step {
    int64_t state, next;
    double reward;
    int32_t action;
    int32_t unused;
} step;

/* Full order (state, action, next, reward): the model, down to the order in
 * which rewards are summed, does not depend on the order of the log. */
static int cmp_step(const void *x, const void *y)
{
    const step *a = x, *b = y;
    if (a->state != b->state) return a->state < b->state ? -1 : 1;
    if (a->action != b->action) return a->action < b->action ? -1 : 1;
    if (a->next != b->next) return a->next < b->next ? -1 : 1;
    return (a->reward > b->reward) - (a->reward < b->reward);
}

static int cmp_i64(const void *x, const void *y)
{
    int64_t a = *(const int64_t *)x, b = *(const int64_t *)y;
    return (a > b) - (a < b);
}

/* Append one pair's visit count. */
static sl_status push_visits(sl_ctx *ctx, int64_t **vis, size_t *n, size_t *cap, int64_t count, const char *name)
{
    if (*n == *cap) {
        size_t ncap = *cap ? 2 * *cap : 1024;
        int64_t *nv = realloc(*vis, ncap * sizeof(*nv));
        if (nv == NULL) return SL_ERR(ctx, SL_ENOMEM, "%s: out of memory for the visit counts", name);
        *vis = nv;
        *cap = ncap;
    }
    (*vis)[(*n)++] = count;
    return SL_OK;
}

/* End of the (state, action) group starting at i. */
static size_t group_end(const step *v, size_t n, size_t i)
{
    size_t e = i + 1;
    while (e < n && v[e].state == v[i].state && v[e].action == v[i].action) e++;
    return e;
}

sl_status sl_csv_read_experience(sl_ctx *ctx, FILE *fp, const char *name,
                                 const sl_estimate_opts *opts, sl_meta *m, sl_block *b,
                                 int64_t *n_dropped, int64_t *n_absorbed)
{
    sl_status st = SL_OK;
    sl_csv *c = NULL;
    step *v = NULL;
    size_t n = 0, cap = 0;
    int64_t *vis = NULL, *sup = NULL;   /* visits per built pair; a state's successors */
    size_t n_vis = 0, vis_cap = 0, sup_cap = 0;
    int sorted = 1;
    int64_t max_index = -1, dropped = 0, absorbed = 0;
    double t0 = sl_now();
    memset(m, 0, sizeof(*m));
    memset(b, 0, sizeof(*b));
    if (n_dropped) *n_dropped = 0;
    if (n_absorbed) *n_absorbed = 0;

    if (opts->n_states < 0)
        SL_FAIL(SL_EUSAGE, "number of states %lld is negative", (long long)opts->n_states);
    if (opts->min_visits < 0)
        SL_FAIL(SL_EUSAGE, "minimum visits %lld is negative", (long long)opts->min_visits);
    if (!(opts->smoothing >= 0.0 && opts->smoothing <= 1e6))
        SL_FAIL(SL_EUSAGE, "smoothing %g is not in [0, 1e6]", opts->smoothing);
    SL_TRY(sl_csv_check_discount(ctx, opts->objective, opts->discount));
    const int64_t min_visits = opts->min_visits > 0 ? opts->min_visits : 1;
    const int64_t limit = opts->n_states > 0 ? opts->n_states : INT64_MAX;

    SL_TRY(sl_csv_open(ctx, fp, name, &c));
    SL_TRY(sl_csv_read_header(ctx, c, exp_cols, E_NCOLS));
    for (;;) {
        int more = 0;
        SL_TRY(sl_csv_next(ctx, c, &more));
        if (!more) break;
        int64_t s, a, j;
        double r;
        SL_TRY(sl_csv_int(ctx, c, E_STATE, 0, INT64_MAX - 1, &s));
        SL_TRY(sl_csv_int(ctx, c, E_ACTION, 0, INT32_MAX, &a));
        SL_TRY(sl_csv_double(ctx, c, E_REWARD, &r));
        SL_TRY(sl_csv_int(ctx, c, E_NEXT, 0, INT64_MAX - 1, &j));
        if (s >= limit) {
            st = sl_csv_error(ctx, c, E_STATE, SL_EDATA,
                              "state %lld is out of range: the model has %lld states",
                              (long long)s, (long long)limit);
            goto cleanup;
        }
        if (j >= limit) {
            st = sl_csv_error(ctx, c, E_NEXT, SL_EDATA,
                              "next state %lld is out of range: the model has %lld states",
                              (long long)j, (long long)limit);
            goto cleanup;
        }
        if (n == cap) {
            size_t ncap = cap ? cap + cap / 2 : 4096;
            step *nv = ncap <= SIZE_MAX / sizeof(*nv) ? realloc(v, ncap * sizeof(*nv)) : NULL;
            if (nv == NULL)
                SL_FAIL(SL_ENOMEM, "%s:%lld: out of memory holding %zu steps (%zu bytes each)",
                        name, (long long)sl_csv_line(c), n, sizeof(*v));
            v = nv;
            cap = ncap;
        }
        step *t = &v[n];
        t->state = s;
        t->next = j;
        t->reward = r;
        t->action = (int32_t)a;
        t->unused = 0;
        if (n > 0 && cmp_step(&t[-1], t) > 0) sorted = 0;
        if (s > max_index) max_index = s;
        if (j > max_index) max_index = j;
        n++;
    }
    if (n == 0)
        SL_FAIL(SL_EDATA, "%s:%lld: no data rows after the header", name,
                (long long)sl_csv_line(c));
    const int64_t n_states = opts->n_states > 0 ? opts->n_states : max_index + 1;
    if (n_states > (int64_t)n && !opts->unseen_absorb) {
        /* more states than steps: some state has no data; say so before
         * allocating anything per state */
        int64_t first = 0;
        SL_TRY(sl_csv_first_absent_state(ctx, v, n, sizeof(*v), &first));
        SL_FAIL(SL_EDATA,
                "%s: state %lld has no data (it never occurs in the state column; %lld states, "
                "but only %zu steps). Log more experience, or make unseen states absorbing",
                name, (long long)first, (long long)n_states, n);
    }
    double t1 = sl_now();
    if (!sorted) SL_TRY(sl_csv_sort_by_state(ctx, v, n, sizeof(*v), n_states, cmp_step));
    double t2 = sl_now();

    /* every state needs a pair that survives min_visits, unless unseen
     * states are made absorbing: find the first without, and how many */
    if (!opts->unseen_absorb) {
        int64_t expect = 0, bad = 0, first_bad = -1, first_bad_visited = 0;
        size_t i = 0;
        while (i < n) {
            int64_t s = v[i].state, kept = 0;
            if (s > expect) {
                if (first_bad < 0) first_bad = expect;
                bad += s - expect;
            }
            while (i < n && v[i].state == s) {
                size_t e = group_end(v, n, i);
                if ((int64_t)(e - i) >= min_visits) kept++;
                i = e;
            }
            if (kept == 0) {
                if (first_bad < 0) {
                    first_bad = s;
                    first_bad_visited = 1;
                }
                bad++;
            }
            expect = s + 1;
        }
        if (expect < n_states) {
            if (first_bad < 0) first_bad = expect;
            bad += n_states - expect;
        }
        if (bad > 0)
            SL_FAIL(SL_EDATA,
                    "%s: state %lld has no data (%s); %lld of the %lld states have none. "
                    "Log more experience, lower the minimum visits, or make unseen states "
                    "absorbing",
                    name, (long long)first_bad,
                    first_bad_visited ? "every action there was seen fewer times than the "
                                        "minimum visits"
                                      : "it never occurs in the state column",
                    (long long)bad, (long long)n_states);
    }

    SL_TRY(sl_block_init(ctx, b, 0, n_states, name));
    const double alpha = opts->smoothing;
    size_t i = 0;
    for (int64_t s = 0; s < n_states; s++) {
        SL_TRY(sl_block_begin_state(ctx, b));
        int64_t kept = 0;
        size_t n_sup = 0;
        if (alpha > 0) {
            /* the state's observed successors (under any action), sorted */
            size_t e = i;
            while (e < n && v[e].state == s) e++;
            if (e - i > sup_cap) {
                int64_t *ns = realloc(sup, (e - i) * sizeof(*ns));
                if (ns == NULL) SL_FAIL(SL_ENOMEM, "%s: out of memory for the successors of state %lld", name,
                                        (long long)s);
                sup = ns;
                sup_cap = e - i;
            }
            for (size_t k = i; k < e; k++) sup[k - i] = v[k].next;
            qsort(sup, e - i, sizeof(*sup), cmp_i64);
            for (size_t k = 0; k < e - i; k++)
                if (n_sup == 0 || sup[n_sup - 1] != sup[k]) sup[n_sup++] = sup[k];
        }
        while (i < n && v[i].state == s) {
            size_t e = group_end(v, n, i);
            const int64_t count = (int64_t)(e - i);
            if (count < min_visits) {
                dropped++;
                i = e;
                continue;
            }
            SL_TRY(sl_block_begin_pair(ctx, b, v[i].action));
            SL_TRY(push_visits(ctx, &vis, &n_vis, &vis_cap, count, name));
            if (alpha > 0) {
                /* additive smoothing over the state's observed successors:
                 * p_j = (c_j + alpha) / (n + alpha m); an unseen successor
                 * gets the pair's mean reward, a seen one its rewards plus
                 * alpha times that mean, so sum p*r stays the mean reward */
                double total = 0.0;
                for (size_t k = i; k < e; k++) total += v[k].reward;
                const double mean = total / (double)count, den = (double)count + alpha * (double)n_sup;
                size_t k = i;
                for (size_t q = 0; q < n_sup; q++) {
                    double sum = 0.0, cnt = 0.0;
                    for (; k < e && v[k].next == sup[q]; k++, cnt += 1.0) sum += v[k].reward;
                    SL_TRY(sl_block_add(ctx, b, sup[q], (cnt + alpha) / den, (sum + alpha * mean) / (cnt + alpha)));
                }
                i = e;
            }
            /* one transition per distinct next state: its frequency, and
             * the mean reward of those steps, so that the builder's
             * sum p*r is the mean reward of the pair */
            while (i < e) {
                size_t k = i;
                double sum = 0.0;
                for (; k < e && v[k].next == v[i].next; k++) sum += v[k].reward;
                const double cnt = (double)(k - i);
                SL_TRY(sl_block_add(ctx, b, v[i].next, cnt / (double)count, sum / cnt));
                i = k;
            }
            SL_TRY(sl_block_end_pair(ctx, b));
            kept++;
        }
        if (kept == 0) {
            if (!opts->unseen_absorb)
                SL_FAIL(SL_EINTERNAL, "%s: state %lld has no pair after the check", name,
                        (long long)s);
            SL_TRY(sl_block_begin_pair(ctx, b, 0));
            SL_TRY(sl_block_add(ctx, b, s, 1.0, 0.0));
            SL_TRY(sl_block_end_pair(ctx, b));
            SL_TRY(push_visits(ctx, &vis, &n_vis, &vis_cap, 0, name));
            absorbed++;
        }
        SL_TRY(sl_block_end_state(ctx, b));
    }
    if ((int64_t)n_vis != sl_block_pairs(b))
        SL_FAIL(SL_EINTERNAL, "%s: %zu visit counts for %lld pairs", name, n_vis, (long long)sl_block_pairs(b));
    b->visits = vis;
    vis = NULL;
    m->has_visits = 1;

    m->format_version = SLUICE_FORMAT_VERSION;
    m->n_states = n_states;
    m->n_pairs = sl_block_pairs(b);
    m->n_trans = sl_block_trans(b);
    m->discount = opts->discount;
    m->objective = opts->objective;
    snprintf(m->source, sizeof(m->source), "%s", name);
    if (n_dropped) *n_dropped = dropped;
    if (n_absorbed) *n_absorbed = absorbed;
    double t3 = sl_now();
    sl_log(ctx,
           "%s: %zu steps read in %.2f s (%.3g rows/s); %lld states, %lld pairs, %lld "
           "transitions (sort %.2f s, build %.2f s)",
           name, n, t1 - t0, (double)n / (t1 - t0 > 1e-9 ? t1 - t0 : 1e-9),
           (long long)m->n_states, (long long)m->n_pairs, (long long)m->n_trans, t2 - t1,
           t3 - t2);

cleanup:
    if (st != SL_OK) {
        sl_block_free(b);
        sl_meta_free(m);
        memset(m, 0, sizeof(*m));
    }
    free(v);
    free(vis);
    free(sup);
    sl_csv_free(&c);
    return st;
}

/* The reader for sl_csv_model_load: experience, then what was dropped and
 * made absorbing. */
static sl_status read_estimate(sl_ctx *ctx, FILE *fp, const char *name, const void *arg, sl_meta *m, sl_block *b)
{
    const sl_estimate_opts *opts = arg;
    int64_t dropped = 0, absorbed = 0;
    sl_status st = sl_csv_read_experience(ctx, fp, name, opts, m, b, &dropped, &absorbed);
    if (st == SL_OK) {
        sl_log(ctx, "%s: %lld (state, action) pairs seen fewer than %lld times dropped", name, (long long)dropped,
               (long long)(opts->min_visits > 0 ? opts->min_visits : 1));
        if (opts->unseen_absorb)
            sl_log(ctx, "%s: %lld states without data made absorbing (reward 0)", name, (long long)absorbed);
    }
    return st;
}

sl_status sl_model_estimate_csv(sl_ctx *ctx, const sl_estimate_opts *opts, sl_model **out)
{
    return sl_csv_model_load(ctx, "sl_model_estimate_csv", opts ? opts->input : NULL,
                             "estimate needs an experience CSV", opts ? opts->objective : SL_OBJ_DISCOUNTED,
                             opts ? opts->discount : 0.0, read_estimate, opts, out);
}
