/* csv.h - streaming CSV tokenizer and the CSV model readers (import, estimate).
 *
 * The dialect: one record per line, fields separated by ',', LF or CRLF line
 * ends, a trailing newline optional, blank lines ignored, spaces and tabs
 * around a field ignored, a UTF-8 byte-order mark at the start ignored. There
 * is no quoting: a field containing '"' is rejected with a clear message.
 * The first non-blank line is a header that must name the expected columns
 * exactly and in order.
 *
 * Every error message starts with "NAME:LINE:" (NAME is the file name as
 * given, or "<stdin>") and, for a bad field, names the column. Bad data is
 * SL_EDATA, a file that cannot be opened SL_ENOINPUT, a failing read SL_EIO.
 *
 * Everything here is local (no MPI communication) unless marked collective.
 */
#ifndef SL_CSV_H
#define SL_CSV_H

#include "model/model.h"

/* Longest line accepted, in bytes (without the line end). */
#define SL_CSV_LINE_MAX ((size_t)1 << 20)
/* Most fields a record may have (longer records are an error anyway). */
#define SL_CSV_MAX_FIELDS 16

typedef struct sl_csv sl_csv;

/* Open a reader on `fp` (not closed by sl_csv_free). `name` is used in
 * messages and must outlive the reader. Local. */
sl_status sl_csv_open(sl_ctx *ctx, FILE *fp, const char *name, sl_csv **out);
/* Free a reader; accepts NULL and *c == NULL, sets *c = NULL. Local. */
void sl_csv_free(sl_csv **c);

/* Read the header (first non-blank line) and check that it is exactly the
 * `n` column names `cols`, in order; the names are then used in messages.
 * `cols` must outlive the reader. Local. */
sl_status sl_csv_read_header(sl_ctx *ctx, sl_csv *c, const char *const *cols, int n);

/* Read the next record. On success *more is 1 and the record has exactly the
 * header's number of fields, or *more is 0 at the end of input. Local. */
sl_status sl_csv_next(sl_ctx *ctx, sl_csv *c, int *more);

/* Line number (1-based) of the current record or header. Local. */
int64_t sl_csv_line(const sl_csv *c);
/* The name given to sl_csv_open. Local. */
const char *sl_csv_name(const sl_csv *c);
/* Field `i` of the current record, trimmed and NUL-terminated; *len (if not
 * NULL) receives its length. Valid until the next sl_csv_next. Local. */
const char *sl_csv_field(const sl_csv *c, int i, size_t *len);

/* Field `i` as a decimal integer in [lo, hi]: optional sign, digits only
 * (rejects "1.5", "1e3", "", overflow). Local. */
sl_status sl_csv_int(sl_ctx *ctx, const sl_csv *c, int i, int64_t lo, int64_t hi,
                     int64_t *out);
/* Field `i` as a finite decimal number (sign, digits, '.', exponent; rejects
 * "nan", "inf", hexadecimal, overflow). Local. */
sl_status sl_csv_double(sl_ctx *ctx, const sl_csv *c, int i, double *out);

/* Record an error "NAME:LINE: column 'COL': MESSAGE" for field `i` of the
 * current record (i < 0: no column). Returns `st`. Local. */
sl_status sl_csv_error(sl_ctx *ctx, const sl_csv *c, int i, sl_status st, const char *fmt, ...)
    __attribute__((format(printf, 5, 6)));

/* ---- helpers shared by import and estimate ------------------------------ */

/* Open `path` for reading ("-" is stdin, named "<stdin>"). *fp must later be
 * passed to sl_csv_close_input. Missing, unreadable or a directory:
 * SL_ENOINPUT. Local. */
sl_status sl_csv_open_input(sl_ctx *ctx, const char *path, FILE **fp, const char **name);
/* Close what sl_csv_open_input opened (never closes stdin); accepts NULL. */
void sl_csv_close_input(FILE **fp);

/* Check a discount factor for an objective: [0, 1) for discounted, (0, 1]
 * otherwise; SL_EUSAGE with a message if not. Local. */
sl_status sl_csv_check_discount(sl_ctx *ctx, sl_objective obj, double discount);

/* Wrap a model built on rank 0 into a model handle (other ranks pass
 * anything; their block is replaced by an empty one at the end of the state
 * range). `st` is this rank's status so far: it is agreed first, so a
 * failure on rank 0 stops every rank. Broadcasts meta, fingerprints, and
 * takes ownership of meta and block. Collective. */
sl_status sl_csv_adopt_model(sl_ctx *ctx, sl_status st, sl_meta *meta, sl_block *block, const char *where,
                             sl_model **out);

/* A CSV model reader: parse `fp` (named `name`) with options `opts` into
 * meta and block on rank 0, logging what it has to say. Local. */
typedef sl_status (*sl_csv_model_reader)(sl_ctx *ctx, FILE *fp, const char *name, const void *opts, sl_meta *m,
                                         sl_block *b);

/* The entry point shared by import and estimate: check the output handle,
 * the input (NULL: SL_EUSAGE with `needs` as the message) and the discount
 * for the objective on every rank; open the input and run `read` on rank 0;
 * then adopt the model on every rank (sl_csv_adopt_model). `fn` names the
 * public function in messages. Collective. */
sl_status sl_csv_model_load(sl_ctx *ctx, const char *fn, const char *input, const char *needs, sl_objective obj,
                            double discount, sl_csv_model_reader read, const void *opts, sl_model **out);

/* Records of `size` bytes (a multiple of 8, at most 64) whose first member is an int64_t
 * state in [0, n_states): sort them by state in place (American flag sort:
 * 16 bytes of scratch per state, the records themselves are not copied),
 * then the records of each state by `cmp`, which should order them totally
 * for a result independent of the input order. Local. */
sl_status sl_csv_sort_by_state(sl_ctx *ctx, void *base, size_t n, size_t size, int64_t n_states,
                               int (*cmp)(const void *, const void *));

/* The smallest state in [0, n] that no record names (there is one by
 * counting); records as for sl_csv_sort_by_state. Local. */
sl_status sl_csv_first_absent_state(sl_ctx *ctx, const void *base, size_t n, size_t size,
                                    int64_t *first);

/* ---- the readers (local: no HDF5, no MPI; unit-testable) ---------------- */

/* Read a triplet CSV (state,action,next_state,probability,reward) from `fp`
 * and build the whole model into `b` (states [0, n_states)). Fills `m`:
 * sizes, discount and objective from `opts`, source = `name`. Rows may come
 * in any order; repeated (state, action, next_state) rows merge. opts->input
 * and opts->output are not used. On failure `m` and `b` are left empty (safe
 * to free). Local. */
sl_status sl_csv_read_triplets(sl_ctx *ctx, FILE *fp, const char *name,
                               const sl_import_opts *opts, sl_meta *m, sl_block *b);

/* Read an experience CSV (state,action,reward,next_state) and build the
 * maximum-likelihood model into `b`: P(j|s,a) = count(s,a,j)/count(s,a),
 * r(s,a) = mean observed reward, pairs seen fewer than opts->min_visits times
 * dropped, states without any remaining pair an error unless
 * opts->unseen_absorb (then a self-loop with action 0 and reward 0).
 * *n_dropped and *n_absorbed (may be NULL) receive those counts. Local. */
sl_status sl_csv_read_experience(sl_ctx *ctx, FILE *fp, const char *name,
                                 const sl_estimate_opts *opts, sl_meta *m, sl_block *b,
                                 int64_t *n_dropped, int64_t *n_absorbed);

#endif /* SL_CSV_H */
