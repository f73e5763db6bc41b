/* fuzz_param.c - libFuzzer target: the text of `sluice build --param
 * NAME=VALUE` (cli_param_split, src/cli/param.c, with cli_finite, which
 * every number option goes through).
 *
 * The first byte chooses how the rest is read:
 *   even: the rest is the option's text as typed (raw bytes up to a NUL);
 *   odd:  the rest picks a name and a value from tables of pieces whose
 *         verdict is written here by hand from the documented syntax, and
 *         bytes to put around the value.
 *
 * Oracle beyond the sanitizers:
 * - the rules restated (`build --help`, docs/bad-input.md): NAME is all
 *   before the first '=', not empty; VALUE all after it, a number in C
 *   strtod's syntax taking the whole text, finite, not out of range; an
 *   accepted text gives that name and value, a rejected one a message naming
 *   NAME=VALUE (no '=' or nothing before it) or the name and the value;
 * - for the table pieces, the verdict and value written by hand;
 * - an accepted NAME=VALUE printed back as NAME=%.17g parses to the same
 *   name and the same bits.
 */
#define _POSIX_C_SOURCE 200809L
#include <errno.h>
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "cli/cli.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

/* value texts and their verdicts, by hand (C11 7.22.1.3 strtod: leading
 * white space skipped, hex and exponent forms, inf/nan words) */
static const struct {
    const char *text;
    int ok;
    double value;
} pieces[] = {
    {"12.5", 1, 12.5},    {"0", 1, 0.0},           {"-0", 1, -0.0},      {"1e3", 1, 1000.0},
    {"0x10", 1, 16.0},    {" 7", 1, 7.0},          {"+.5", 1, 0.5},      {"1e308", 1, 1e308},
    {"7 ", 0, 0},         {"", 0, 0},              {"nan", 0, 0},        {"inf", 0, 0},
    {"-Infinity", 0, 0},  {"1e999", 0, 0},         {"-1e999", 0, 0},     {"1e-400", 0, 0},
    {"abc", 0, 0},        {"1,5", 0, 0},           {"5=6", 0, 0},        {"0x", 0, 0},
    {".", 0, 0},          {"1e", 0, 0},            {"--1", 0, 0},        {"2.5e-3", 1, 0.0025},
};
static const char *names[] = {"storage_levels", "inflow_classes", "mode", "x", "a b", "=", "", "q\t"};

#define N_PIECES (sizeof(pieces) / sizeof(pieces[0]))
#define N_NAMES (sizeof(names) / sizeof(names[0]))

/* the rules, restated */
static int rule(const char *text, size_t *name_len, double *value)
{
    const char *eq = strchr(text, '=');
    if (eq == NULL || eq == text) return 0;
    const char *v = eq + 1;
    char *end = NULL;
    errno = 0;
    double x = strtod(v, &end);
    if (*v == '\0' || *end != '\0' || errno == ERANGE || x != x || x - x != 0.0) return 0;
    *name_len = (size_t)(eq - text);
    *value = x;
    return 1;
}

static void fail(const char *what, const char *text, const char *err)
{
    fprintf(stderr, "--param '%s': %s (message '%s')\n", text, what, err);
    abort();
}

static void check(const char *text, int want_by_hand, double value_by_hand)
{
    size_t nl = 0, want_nl = 0;
    double v = 0, want_v = 0;
    char err[600] = "";
    int got = cli_param_split(text, &nl, &v, err, sizeof(err));
    int want = rule(text, &want_nl, &want_v);
    if (want_by_hand >= 0 && want != want_by_hand) fail("the restated rule disagrees with the table", text, err);
    if (got != want) fail(want ? "valid text rejected" : "invalid text accepted", text, err);
    if (!got) {
        const char *eq = strchr(text, '=');
        if (eq == NULL || eq == text) {
            if (!strstr(err, "NAME=VALUE")) fail("syntax error without NAME=VALUE", text, err);
        } else if (strncmp(err, text, (size_t)(eq - text)) != 0 || !strstr(err, "not a finite number")) {
            fail("number error not naming the parameter", text, err);
        }
        return;
    }
    if (nl != want_nl || memcmp(&v, &want_v, sizeof(v)) != 0) fail("wrong name or value", text, err);
    if (want_by_hand > 0 && memcmp(&v, &value_by_hand, sizeof(v)) != 0) fail("value differs from the table", text, err);
    /* printed back */
    size_t n = nl + 40;
    char *again = malloc(n);
    if (again == NULL) return;
    snprintf(again, n, "%.*s=%.17g", (int)nl, text, v);
    size_t nl2 = 0;
    double v2 = 0;
    int ok2 = cli_param_split(again, &nl2, &v2, err, sizeof(err));
    if (!ok2 || nl2 != nl || memcmp(&v, &v2, sizeof(v)) != 0) {
        fprintf(stderr, "printed back as '%s': %s\n", again, ok2 ? "other name or value" : err);
        free(again);
        abort();
    }
    free(again);
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    if (size == 0) return 0;
    char *text = malloc(size + 64);
    if (text == NULL) return 0;
    if (data[0] % 2 == 0) {
        memcpy(text, data + 1, size - 1);
        text[size - 1] = '\0';
        check(text, -1, 0);
    } else {
        uint8_t k = size > 1 ? data[1] : 0, p = size > 2 ? data[2] : 0, around = size > 3 ? data[3] : 0;
        const char *name = names[k % N_NAMES];
        int i = (int)(p % N_PIECES);
        /* around: 0 as it is; otherwise a byte of the input after the value */
        char tail[2] = {around && size > 4 ? (char)data[4] : '\0', '\0'};
        snprintf(text, size + 64, "%s=%s%s", name, pieces[i].text, tail);
        int by_hand = pieces[i].ok && tail[0] == '\0' ? 1 : -1;
        if (!pieces[i].ok && tail[0] == '\0') by_hand = 0;
        /* a name with '=' or empty: the first '=' decides, not the table */
        if (strchr(name, '=') || name[0] == '\0') by_hand = -1;
        check(text, by_hand, pieces[i].value);
    }
    free(text);
    return 0;
}
