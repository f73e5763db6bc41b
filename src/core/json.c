/* json.c - minimal streaming JSON writer. */
#include "core/json.h"

#include <math.h>

static void sep(sl_json *j)
{
    if (j->need_comma[j->depth]) fputc(',', j->f);
    j->need_comma[j->depth] = 1;
    fputc('\n', j->f);
    for (int i = 0; i < j->depth; i++) fputs("  ", j->f);
}

static void put_string(FILE *f, const char *s)
{
    fputc('"', f);
    for (; *s; s++) {
        unsigned char c = (unsigned char)*s;
        if (c == '"' || c == '\\') fprintf(f, "\\%c", c);
        else if (c < 0x20) fprintf(f, "\\u%04x", c);
        else fputc(c, f);
    }
    fputc('"', f);
}

void sl_json_key(sl_json *j, const char *key)
{
    sep(j);
    if (key) {
        put_string(j->f, key);
        fputs(": ", j->f);
    }
}

void sl_json_begin(sl_json *j, FILE *f)
{
    j->f = f;
    j->depth = 0;
    for (int i = 0; i < 32; i++) j->need_comma[i] = 0;
    fputc('{', f);
    j->depth = 1;
}

void sl_json_end(sl_json *j)
{
    fputs("\n}\n", j->f);
    j->depth = 0;
}

static void open_(sl_json *j, const char *key, char c)
{
    sl_json_key(j, key);
    fputc(c, j->f);
    if (j->depth < 31) j->depth++;
    j->need_comma[j->depth] = 0;
}

static void close_(sl_json *j, char c)
{
    j->depth--;
    fputc('\n', j->f);
    for (int i = 0; i < j->depth; i++) fputs("  ", j->f);
    fputc(c, j->f);
}

void sl_json_obj_open(sl_json *j, const char *key) { open_(j, key, '{'); }
void sl_json_arr_open(sl_json *j, const char *key) { open_(j, key, '['); }
void sl_json_close_obj(sl_json *j) { close_(j, '}'); }
void sl_json_close_arr(sl_json *j) { close_(j, ']'); }

void sl_json_str(sl_json *j, const char *key, const char *v)
{
    sl_json_key(j, key);
    put_string(j->f, v);
}

void sl_json_num(sl_json *j, const char *key, double v)
{
    sl_json_key(j, key);
    if (isfinite(v)) fprintf(j->f, "%.17g", v);
    else fputs("null", j->f);
}

void sl_json_int(sl_json *j, const char *key, int64_t v)
{
    sl_json_key(j, key);
    fprintf(j->f, "%lld", (long long)v);
}

void sl_json_bool(sl_json *j, const char *key, int v)
{
    sl_json_key(j, key);
    fputs(v ? "true" : "false", j->f);
}
