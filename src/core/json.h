/* json.h - a minimal streaming JSON writer for reports. Local. */
#ifndef SL_JSON_H
#define SL_JSON_H

#include <stdint.h>
#include <stdio.h>

typedef struct sl_json {
    FILE *f;
    int depth;
    int need_comma[32];
} sl_json;

void sl_json_begin(sl_json *j, FILE *f);         /* opens the top-level object */
void sl_json_end(sl_json *j);                    /* closes it, newline */
void sl_json_key(sl_json *j, const char *key);   /* before a value inside an object */
void sl_json_obj_open(sl_json *j, const char *key);
void sl_json_arr_open(sl_json *j, const char *key);
void sl_json_close_obj(sl_json *j);
void sl_json_close_arr(sl_json *j);
void sl_json_str(sl_json *j, const char *key, const char *v);
void sl_json_num(sl_json *j, const char *key, double v);   /* non-finite -> null */
void sl_json_int(sl_json *j, const char *key, int64_t v);
void sl_json_bool(sl_json *j, const char *key, int v);

#endif
