/* param.c - the text of number options and of `build --param NAME=VALUE`,
 * as plain functions (no cli_args, no output) so that the fuzz target
 * tests/fuzz/fuzz_param.c runs the code the commands run. */
#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "cli/cli.h"

int cli_finite(const char *s, double *out)
{
    char *end = NULL;
    errno = 0;
    double v = strtod(s, &end);
    if (s[0] == '\0' || *end != '\0' || errno == ERANGE || !isfinite(v)) return 0;
    *out = v;
    return 1;
}

int cli_param_split(const char *text, size_t *name_len, double *value, char *err, size_t errlen)
{
    const char *eq = strchr(text, '=');
    if (eq == NULL || eq == text) {
        snprintf(err, errlen, "--param: expected NAME=VALUE, got '%s'", text);
        return 0;
    }
    if (!cli_finite(eq + 1, value)) {
        snprintf(err, errlen, "%.*s: '%s' is not a finite number", (int)(eq - text), text, eq + 1);
        return 0;
    }
    *name_len = (size_t)(eq - text);
    return 1;
}
