/* fuzz_statecsv.c - libFuzzer target: the CSV files keyed by state that a
 * user writes by hand: start distributions (sl_start_csv_read, outlook and
 * simulate --start FILE.csv) and rules (sl_rule_read_local, the reading of
 * sl_rule_read, then sl_policy_pairs as every rule goes through: an action
 * by state that the model must offer there).
 *
 * Input: the first bytes shape a small model description (fuzz_meta.h),
 * then a mode byte (start or rule, a header prepended or not, NUL bytes
 * kept or the text cut at the first, the rest taken as the file or as the
 * choices of structured rows), for a rule an actions byte (1..4
 * actions with names, values or neither) and a seed byte for the actions
 * each state offers; the rest is the file, written to a temporary file per
 * input (the readers take a path).
 *
 * Oracles beyond the sanitizers, from the format's rules (docs/results.md;
 * state fields by the rules of fuzz_meta.h):
 *  - the file is read independently here: header `state,LAST` or every
 *    factor once then LAST; each non-blank row a state and a LAST field.
 *    The reader must accept exactly the files whose rows all resolve and
 *    whose start probabilities are numbers in [0, 1] summing to 1 within
 *    1e-9 (the same sum, in file order), or whose rule gives every state
 *    exactly one action that the state offers;
 *  - an accepted start distribution gives the rows' states and
 *    probabilities in file order, as resolved here; an accepted rule gives
 *    each state the action and the line resolved here;
 *  - a rejection is SL_EDATA with a message that begins with the file's
 *    path and, where it names a line, a line of the file.
 * With NUL bytes kept (the C library's line reading and this file's
 * reading may see different lines) only the second and third hold, on the
 * library's own result; and a file holding a NUL byte is never accepted,
 * and a message that speaks of a NUL byte names the line of the first one.
 */
#define _POSIX_C_SOURCE 200809L
#include <unistd.h>

#include "fuzz_meta.h"

int LLVMFuzzerInitialize(int *argc, char ***argv);
int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

/* libFuzzer passes no user pointer: the temporary file of this process,
 * named by its descriptor (/proc/self/fd/N). Its directory entry is removed
 * as soon as it is made, so a run that crashes or is killed leaves nothing
 * in /dev/shm (an exit handler does not run then); the kernel frees the
 * file when the process ends, however it ends. */
static char tmp_path[64];

int LLVMFuzzerInitialize(int *argc, char ***argv)
{
    (void)argc;
    (void)argv;
    char name[64];
    snprintf(name, sizeof(name), "%s/sluice-fuzz-statecsv-XXXXXX", access("/dev/shm", W_OK) == 0 ? "/dev/shm" : "/tmp");
    int fd = mkstemp(name);
    if (fd < 0 || unlink(name) != 0) abort();
    snprintf(tmp_path, sizeof(tmp_path), "/proc/self/fd/%d", fd);
    return 0;
}

static char *trim(char *s)
{
    while (*s == ' ' || *s == '\t') s++;
    size_t n = strlen(s);
    while (n > 0 && strchr(" \t\r\n", s[n - 1])) s[--n] = '\0';
    return s;
}

/* Fields of a line (modified in place), at most max. */
static int fields(char *line, char **f, int max)
{
    int n = 0;
    for (char *p = line;;) {
        char *c = strchr(p, ',');
        if (c) *c = '\0';
        if (n < max) f[n] = trim(p);
        n++;
        if (!c) return n;
        p = c + 1;
    }
}

typedef struct actions {
    int32_t n;
    const sl_meta *m;
    uint8_t seed;
} actions;

static int offered(const actions *a, int64_t s, int32_t id)
{
    uint64_t mask = sl_mix64(a->seed * 1000003ULL + (uint64_t)s) | (1ULL << (s % a->n));
    return (mask >> id) & 1;
}

/* The action a rule names: '@ID', a name, a value as printed (else within a
 * relative 1e-9 of a value), or for actions with neither the id; -1 if
 * none. */
static int32_t expect_action(const actions *a, const char *t)
{
    const sl_meta *m = a->m;
    int64_t v;
    if (t[0] == '@') return fz_int(t + 1, &v) && v >= 0 && v < a->n ? (int32_t)v : -1;
    for (int32_t k = 0; k < m->n_action_names; k++)
        if (strcmp(m->action_name[k], t) == 0) return k;
    char *end = NULL, pr[64];
    errno = 0;
    double x = strtod(t, &end);
    if (t[0] == '\0' || *end != '\0' || errno == ERANGE) return -1;
    if (m->n_action_values > 0) {
        for (int32_t k = 0; k < m->n_action_values; k++) {
            snprintf(pr, sizeof(pr), "%.6g", m->action_value[k]);
            if (strcmp(pr, t) == 0) return k;
        }
        for (int32_t k = 0; k < m->n_action_values; k++)
            if (fabs(m->action_value[k] - x) <= 1e-9 * fmax(1.0, fabs(m->action_value[k]))) return k;
        return -1;
    }
    return m->n_action_names == 0 && x == floor(x) && x >= 0 && x < a->n ? (int32_t)x : -1;
}

/* Structured rows (mode bit 4), so that the search reaches the meaning of
 * the fields and not only their syntax: per row a state (a number, a
 * factor's index, label or printed value, sometimes off the model) and a
 * probability or action from plausible and edge forms. Columns as in the
 * header this file prepends (factors last to first). */
static void rows_from_bytes(fz_reader *r, const sl_meta *m, const actions *a, int rule, int by_number, char *out,
                            size_t n)
{
    static const char *probs[16] = {"1", "0.5", "0.25", "0", "-0", "nan", "inf", "-0.5",
                                    "1.5", "0.4999999999", "0.4999991", "1e-10", "0.75", "0x1p-1", " 0.5", ""};
    char lab[SL_NAME_MAX + 32];
    int rows = 1 + fz_byte(r) % 6;
    out[0] = '\0';
    for (int k = 0; k < rows; k++) {
        size_t u = strlen(out);
        uint8_t b = fz_byte(r);
        if (by_number) snprintf(out + u, n - u, "%d,", (int)(b % (m->n_states + 2)) - (b >= 250));
        for (int f = m->n_factors - 1; !by_number && f >= 0; f--) {
            int64_t i = b % (m->factor_size[f] + 1); /* one past the end, now and then */
            u = strlen(out);
            if ((b >> 4) % 3 == 0 || i == m->factor_size[f]) snprintf(out + u, n - u, "@%lld,", (long long)i);
            else {
                sl_factor_label(m, f, i, lab, sizeof(lab));
                snprintf(out + u, n - u, "%s,", lab);
            }
            b = fz_byte(r);
        }
        u = strlen(out);
        uint8_t c = fz_byte(r);
        if (!rule) snprintf(out + u, n - u, "%s\n", probs[c % 16]);
        else if (c % 4 == 0) snprintf(out + u, n - u, "@%d\n", (int)(c >> 2) % (a->n + 1));
        else if (c % 4 == 1 && m->n_action_names) snprintf(out + u, n - u, "%s\n", m->action_name[(c >> 2) % a->n]);
        else if (c % 4 == 1 && m->n_action_values) snprintf(out + u, n - u, "%.6g\n", m->action_value[(c >> 2) % a->n]);
        else snprintf(out + u, n - u, "%d\n", (int)(c >> 2) % (a->n + 1));
    }
}

/* The file read by the rules: 1 if the header and every row's state resolve
 * (states[k], last[k] of the k-th row, line_of[k] its line), else 0. */
static int expect_rows(const sl_meta *m, char *text, const char *last, int64_t *nrows, int64_t *states, char **lastf,
                       int64_t *line_of)
{
    char *f[SLUICE_MAX_FACTORS + 2], *next = NULL;
    int fmap[SLUICE_MAX_FACTORS + 1], nf = 0, by_factor = 0;
    int64_t lineno = 0;
    *nrows = 0;
    for (char *ln = text; ln; ln = next) {
        next = strchr(ln, '\n');
        if (next) *next++ = '\0';
        else if (*ln == '\0' && lineno > 0) break; /* the file ends with a newline */
        lineno++;
        if (lineno == 1) {
            nf = fields(ln, f, SLUICE_MAX_FACTORS + 2);
            if (nf == 2 && strcmp(f[0], "state") == 0 && strcmp(f[1], last) == 0) continue;
            if (nf != m->n_factors + 1 || m->n_factors == 0 || strcmp(f[nf - 1], last) != 0) return 0;
            by_factor = 1;
            for (int k = 0; k < nf - 1; k++) {
                fmap[k] = sl_meta_factor_index(m, f[k]);
                for (int j = 0; j < k; j++)
                    if (fmap[j] == fmap[k]) return 0;
                if (fmap[k] < 0) return 0;
            }
            continue;
        }
        if (trim(ln)[0] == '\0') continue;
        if (fields(ln, f, SLUICE_MAX_FACTORS + 2) != nf) return 0;
        int64_t s = -1;
        if (!by_factor) {
            if (!fz_int(f[0], &s) || s < 0 || s >= m->n_states) return 0;
        } else {
            char spec[4096 + 2 * SL_NAME_MAX];
            spec[0] = '\0';
            for (int k = 0; k < nf - 1; k++) {
                size_t u = strlen(spec);
                snprintf(spec + u, sizeof(spec) - u, "%s%s%s%s", k ? "," : "", m->factor_name[fmap[k]],
                         f[k][0] == '@' ? "" : "=", f[k]);
            }
            for (int k = 0; k < nf - 1; k++) /* a field of its own, not parts joined by the commas above */
                if (f[k][0] == '\0') return 0;
            if (!fz_expect_state(m, spec, &s)) return 0;
        }
        states[*nrows] = s;
        lastf[*nrows] = f[nf - 1];
        line_of[(*nrows)++] = lineno;
    }
    return lineno >= 1 && *nrows > 0;
}

/* A rejection: SL_EDATA, the path first, any line named one of the file. */
static void check_rejection(const sl_ctx *ctx, sl_status st, int64_t nlines, int64_t nul_line)
{
    const char *l = strstr(ctx->err, " line ");
    size_t n = strlen(tmp_path);
    if (st != SL_EDATA || strncmp(ctx->err, tmp_path, n) != 0 || (l && (atoll(l + 6) < 1 || atoll(l + 6) > nlines))) {
        fprintf(stderr, "rejected with status %d, message '%s' (want 65, naming the file and a line of its %lld)\n",
                (int)st, ctx->err, (long long)nlines);
        abort();
    }
    /* "PATH line N: a NUL byte ..." (the file's own text may say "NUL byte" too) */
    char *e = NULL;
    long long ln = strncmp(ctx->err + n, " line ", 6) == 0 ? strtoll(ctx->err + n + 6, &e, 10) : -1;
    if (e && strncmp(e, ": a NUL byte", 12) == 0 && ln != nul_line) {
        fprintf(stderr, "message '%s' names a NUL byte; the first is on line %lld (-1: none)\n", ctx->err,
                (long long)nul_line);
        abort();
    }
}

static void fail(const char *what, int64_t k, const sl_ctx *ctx)
{
    fprintf(stderr, "%s (row/state %lld; %s)\n", what, (long long)k, ctx->err);
    abort();
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    static const char *names[4] = {"hold", "spill", "release_150", "pump"};
    static const double values[4][4] = {{0, 12.5, 25, 50}, {0, 1e-12, 2e-12, 3e-12}, {-1, 0, 1, 2}, {1e6, 1e6 + 1, 2e6, 3e6}};
    fz_reader r = {data, size, 0};
    sl_ctx ctx;
    sl_meta m;
    fz_ctx_init(&ctx);
    memset(&m, 0, sizeof(m));
    char *text = NULL, *copy = NULL, **lastf = NULL;
    int64_t *states = NULL, *line_of = NULL, *got_line = NULL, *fp = NULL, nrows = 0, n = 0, *st_out = NULL;
    int32_t *got = NULL, *pa = NULL;
    double *p_out = NULL;
    if (!fz_meta_build(&r, &m)) goto done;
    uint8_t mode = fz_byte(&r), ab = fz_byte(&r);
    const int rule = mode & 1, keep_nul = (mode >> 3) & 1;
    const char *last = rule ? "action" : "probability";
    actions acts = {1 + ab % 4, &m, fz_byte(&r)};
    if (rule && (ab >> 2) % 3 == 0) {
        if ((m.action_name = calloc((size_t)acts.n, SL_NAME_MAX)) == NULL) goto done;
        m.n_action_names = acts.n;
        for (int32_t k = 0; k < acts.n; k++) snprintf(m.action_name[k], SL_NAME_MAX, "%s", names[k]);
    } else if (rule && (ab >> 2) % 3 == 1) {
        if ((m.action_value = malloc((size_t)acts.n * sizeof(double))) == NULL) goto done;
        m.n_action_values = acts.n;
        for (int32_t k = 0; k < acts.n; k++) m.action_value[k] = values[(ab >> 4) % 4][k];
    }
    /* the file: an optional header, then the rest of the input */
    char header[256] = "";
    if ((mode >> 1) & 1) {
        if ((mode >> 2) & 1 || m.n_factors == 0) snprintf(header, sizeof(header), "state,%s\n", last);
        else {
            for (int f = m.n_factors - 1; f >= 0; f--) {
                size_t u = strlen(header);
                snprintf(header + u, sizeof(header) - u, "%s,", m.factor_name[f]);
            }
            size_t u = strlen(header);
            snprintf(header + u, sizeof(header) - u, "%s\n", last);
        }
    }
    size_t hl = strlen(header), rest = r.n - r.i, len = hl + rest;
    char rows[2048];
    if ((mode >> 4) & 1) { /* rows made of the rest: every field from a few plausible and edge forms */
        rows_from_bytes(&r, &m, &acts, rule, header[0] == 's' || m.n_factors == 0, rows, sizeof(rows));
        rest = strlen(rows);
        len = hl + rest;
    }
    if ((text = malloc(len + 1)) == NULL || (copy = malloc(len + 1)) == NULL) goto done;
    memcpy(text, header, hl);
    memcpy(text + hl, (mode >> 4) & 1 ? (const uint8_t *)rows : r.d + r.i, rest);
    text[len] = '\0';
    if (!keep_nul) len = strlen(text);
    memcpy(copy, text, len + 1);
    int64_t nlines = 1;
    int64_t nul_line = -1; /* the line of the first NUL byte, -1 if none */
    for (size_t k = 0; k < len; k++) {
        if (text[k] == '\0' && nul_line < 0) nul_line = nlines;
        nlines += text[k] == '\n';
    }
    FILE *out = fopen(tmp_path, "w");
    if (out == NULL) abort();
    if (fwrite(text, 1, len, out) != len || fclose(out) != 0) abort();

    if ((states = calloc(len + 2, sizeof(*states))) == NULL || (lastf = calloc(len + 2, sizeof(*lastf))) == NULL ||
        (line_of = calloc(len + 2, sizeof(*line_of))) == NULL)
        goto done;
    int want = !keep_nul && expect_rows(&m, copy, last, &nrows, states, lastf, line_of);
    if (!rule) {
        double sum = 0;
        for (int64_t k = 0; want && k < nrows; k++) {
            char *end = NULL;
            errno = 0;
            double p = strtod(lastf[k], &end);
            if (lastf[k][0] == '\0' || *end != '\0' || errno == ERANGE || !(p >= 0.0 && p <= 1.0)) want = 0;
            sum += p;
        }
        if (want && !(fabs(sum - 1.0) <= 1e-9)) want = 0;
        sl_status st = sl_start_csv_read(&ctx, &m, tmp_path, &n, &st_out, &p_out);
        if (st == SL_OK) {
            double s2 = 0;
            for (int64_t k = 0; k < n; k++) {
                if (st_out[k] < 0 || st_out[k] >= m.n_states) fail("a start state out of range", k, &ctx);
                if (!(p_out[k] >= 0.0 && p_out[k] <= 1.0)) fail("a start probability outside [0, 1]", k, &ctx);
                s2 += p_out[k];
            }
            if (!(fabs(s2 - 1.0) <= 1e-9)) fail("accepted probabilities do not sum to 1 within 1e-9", n, &ctx);
            if (!keep_nul && !want) fail("an invalid start distribution was accepted", 0, &ctx);
            if (nul_line >= 0) fail("a start distribution with a NUL byte was accepted", nul_line, &ctx);
            for (int64_t k = 0; want && k < n; k++)
                if (n != nrows || st_out[k] != states[k] || p_out[k] != strtod(lastf[k], NULL))
                    fail("an accepted row differs from the file read independently", k, &ctx);
        } else {
            if (want) fail("a valid start distribution was rejected", 0, &ctx);
            check_rejection(&ctx, st, nlines, nul_line);
        }
    } else {
        int64_t ns = m.n_states;
        if ((got = malloc((size_t)ns * sizeof(*got))) == NULL || (got_line = malloc((size_t)ns * sizeof(*got_line))) == NULL ||
            (fp = malloc((size_t)(ns + 1) * sizeof(*fp))) == NULL || (pa = malloc((size_t)(ns * acts.n) * sizeof(*pa))) == NULL)
            goto done;
        /* the pairs the model offers: each state's offered actions, in order */
        fp[0] = 0;
        for (int64_t s = 0; s < ns; s++) {
            fp[s + 1] = fp[s];
            for (int32_t a = 0; a < acts.n; a++)
                if (offered(&acts, s, a)) pa[fp[s + 1]++] = a;
        }
        /* the rules: every state exactly once, with an action it offers */
        int32_t *want_action = malloc((size_t)ns * sizeof(int32_t));
        int64_t *want_line = malloc((size_t)ns * sizeof(int64_t));
        if (want_action == NULL || want_line == NULL) {
            free(want_action);
            free(want_line);
            goto done;
        }
        for (int64_t s = 0; s < ns; s++) want_action[s] = -1;
        for (int64_t k = 0; want && k < nrows; k++) {
            int32_t a = expect_action(&acts, lastf[k]);
            if (a < 0 || want_action[states[k]] >= 0 || !offered(&acts, states[k], a)) want = 0;
            else {
                want_action[states[k]] = a;
                want_line[states[k]] = line_of[k];
            }
        }
        for (int64_t s = 0; want && s < ns; s++)
            if (want_action[s] < 0) want = 0;
        sl_status st = sl_rule_read_local(&ctx, &m, acts.n, tmp_path, got, got_line);
        if (st == SL_OK) st = sl_policy_pairs(&ctx, &m, 0, ns, fp, pa, got, got_line, tmp_path, "", NULL);
        if (st == SL_OK && nul_line >= 0) fail("a rule with a NUL byte was accepted", nul_line, &ctx);
        if (st == SL_OK) {
            for (int64_t s = 0; s < ns; s++) {
                if (got[s] < 0 || got[s] >= acts.n || !offered(&acts, s, got[s]))
                    fail("an accepted rule gives a state an action it does not offer", s, &ctx);
                if (got_line[s] < 2 || got_line[s] > nlines) fail("an accepted rule gives a line outside the file", s, &ctx);
                if (!keep_nul && (!want || got[s] != want_action[s] || got_line[s] != want_line[s]))
                    fail(want ? "an accepted rule differs from the file read independently"
                              : "an invalid rule was accepted", s, &ctx);
            }
        } else {
            if (want) fail("a valid rule was rejected", 0, &ctx);
            check_rejection(&ctx, st, nlines, nul_line);
        }
        free(want_action);
        free(want_line);
    }
done:
    free(text);
    free(copy);
    free(states);
    free(lastf);
    free(line_of);
    free(got);
    free(got_line);
    free(fp);
    free(pa);
    free(st_out);
    free(p_out);
    sl_meta_free(&m);
    return 0;
}
