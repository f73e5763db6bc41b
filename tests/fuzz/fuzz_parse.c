/* fuzz_parse.c - libFuzzer target: the text a user types to name a factor
 * value or a state (table --fix, outlook --start, simulate --start):
 * sl_factor_parse (NAME=VALUE, NAME@INDEX) and sl_state_parse (a state
 * number or every factor, comma-separated).
 *
 * Input: the first bytes shape a small model description (fuzz_meta.h: 0..3
 * factors with values, labels or neither), the next byte picks the parser,
 * the rest (up to its first NUL) is the text.
 *
 * Oracles beyond the sanitizers:
 *  - the rules written independently in fuzz_meta.h decide acceptance and
 *    the result: the parser must accept exactly what they accept and give
 *    the same factor / index / state;
 *  - every accepted state is printed back in its three forms (number,
 *    NAME@INDEX for every factor, NAME=LABEL with the library's own label
 *    printer, sl_factor_label) and each must parse to the same state; for
 *    a factor whose grid prints two values alike, the label form must at
 *    least give a value printed the same;
 *  - a rejection is a usage error (SL_EUSAGE) whose message names the
 *    option.
 */
#define _POSIX_C_SOURCE 200809L
#include "fuzz_meta.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

static const char *const what = "--start";

static void must_reject(sl_ctx *ctx, sl_status st, const char *text)
{
    if (st != SL_EUSAGE || ctx->err[0] == '\0' || strstr(ctx->err, what) == NULL) {
        fprintf(stderr, "'%s' rejected with status %d, message '%s' (want 64 naming %s)\n", text, (int)st, ctx->err,
                what);
        abort();
    }
}

/* Every accepted state s: its printed forms parse back to s. */
static void round_trip(sl_ctx *ctx, const sl_meta *m, int64_t s, int reverse)
{
    char text[3][1024], lab[SL_NAME_MAX + 32];
    int64_t fv[SLUICE_MAX_FACTORS], got;
    sl_meta_decode(m, s, fv);
    snprintf(text[0], sizeof(text[0]), "%lld", (long long)s);
    text[1][0] = text[2][0] = '\0';
    for (int k = 0; k < m->n_factors; k++) {
        int f = reverse ? m->n_factors - 1 - k : k;
        size_t u1 = strlen(text[1]), u2 = strlen(text[2]);
        sl_factor_label(m, f, fv[f], lab, sizeof(lab));
        snprintf(text[1] + u1, sizeof(text[1]) - u1, "%s%s@%lld", k ? "," : "", m->factor_name[f], (long long)fv[f]);
        snprintf(text[2] + u2, sizeof(text[2]) - u2, "%s%s=%s", k ? "," : "", m->factor_name[f], lab);
    }
    for (int form = 0; form < (m->n_factors ? 3 : 1); form++) {
        sl_status st = sl_state_parse(ctx, m, text[form], what, &got);
        if (st != SL_OK) {
            fprintf(stderr, "state %lld printed as '%s' is rejected: %s\n", (long long)s, text[form], ctx->err);
            abort();
        }
        if (got == s) continue;
        /* the label form of a grid whose values print alike: same print */
        int64_t gv[SLUICE_MAX_FACTORS];
        char a[SL_NAME_MAX + 32], b[SL_NAME_MAX + 32];
        int alike = form == 2;
        sl_meta_decode(m, got, gv);
        for (int f = 0; alike && f < m->n_factors; f++) {
            sl_factor_label(m, f, fv[f], a, sizeof(a));
            sl_factor_label(m, f, gv[f], b, sizeof(b));
            alike = strcmp(a, b) == 0;
        }
        if (!alike) {
            fprintf(stderr, "state %lld printed as '%s' parses to state %lld\n", (long long)s, text[form],
                    (long long)got);
            abort();
        }
    }
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    fz_reader r = {data, size, 0};
    sl_ctx ctx;
    sl_meta m;
    fz_ctx_init(&ctx);
    memset(&m, 0, sizeof(m));
    char *text = NULL;
    if (!fz_meta_build(&r, &m)) goto done;
    uint8_t mode = fz_byte(&r);
    size_t n = r.n - r.i;
    if ((text = malloc(n + 1)) == NULL) goto done;
    memcpy(text, r.d + r.i, n);
    text[n] = '\0';
    if (mode % 2 == 0) {
        int f = -1, ef = -1;
        int64_t i = -1, ei = -1;
        int want = fz_expect_factor(&m, text, &ef, &ei);
        sl_status st = sl_factor_parse(&ctx, &m, text, what, &f, &i);
        if (want && (st != SL_OK || f != ef || i != ei)) {
            fprintf(stderr, "'%s': want factor %d index %lld, got status %d factor %d index %lld (%s)\n", text, ef,
                    (long long)ei, (int)st, f, (long long)i, ctx.err);
            abort();
        }
        if (!want && st == SL_OK) {
            fprintf(stderr, "'%s' accepted as factor %d index %lld\n", text, f, (long long)i);
            abort();
        }
        if (!want) must_reject(&ctx, st, text);
    } else {
        int64_t s = -1, es = -1;
        int want = fz_expect_state(&m, text, &es);
        sl_status st = sl_state_parse(&ctx, &m, text, what, &s);
        if (want && (st != SL_OK || s != es)) {
            fprintf(stderr, "'%s': want state %lld, got status %d state %lld (%s)\n", text, (long long)es, (int)st,
                    (long long)s, ctx.err);
            abort();
        }
        if (!want && st == SL_OK) {
            fprintf(stderr, "'%s' accepted as state %lld\n", text, (long long)s);
            abort();
        }
        if (!want) must_reject(&ctx, st, text);
        else round_trip(&ctx, &m, s, (mode >> 1) & 1);
    }
done:
    free(text);
    sl_meta_free(&m);
    return 0;
}
