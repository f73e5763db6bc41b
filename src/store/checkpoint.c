/* checkpoint.c - solver checkpoints: written atomically, two kept, validated on load. */
#include <dirent.h>
#include <errno.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "store/h5.h"
#include "store/store.h"

#define CKPT_KEEP 2
#define CKPT_MAX_LIST 64

static uint64_t checksum_f64(sl_ctx *ctx, const double *v, int64_t off, int64_t n)
{
    uint64_t acc = 0, tot = 0;
    for (int64_t i = 0; i < n; i++) {
        uint64_t u;
        memcpy(&u, &v[i], sizeof(u));
        acc += sl_mix64(sl_mix64((uint64_t)(off + i)) ^ u);
    }
    MPI_Allreduce(&acc, &tot, 1, MPI_UINT64_T, MPI_SUM, ctx->comm);
    return tot;
}

static uint64_t checksum_i32(sl_ctx *ctx, const int32_t *v, int64_t off, int64_t n)
{
    uint64_t acc = 0, tot = 0;
    for (int64_t i = 0; i < n; i++) acc += sl_mix64(sl_mix64((uint64_t)(off + i) + 7) ^ (uint32_t)v[i]);
    MPI_Allreduce(&acc, &tot, 1, MPI_UINT64_T, MPI_SUM, ctx->comm);
    return tot;
}

/* Sequence numbers of ckpt-NNNNNN.h5 in dir, newest first (rank 0). */
static int list_ckpts(const char *dir, int64_t *seq, int max)
{
    DIR *d = opendir(dir);
    if (d == NULL) return -1;
    int n = 0;
    struct dirent *e;
    while ((e = readdir(d)) != NULL) {
        long long s;
        char tail[8];
        if (sscanf(e->d_name, "ckpt-%lld.h5%7s", &s, tail) == 1 && s >= 0) {
            if (n < max) seq[n++] = s;
            else {
                /* keep the largest */
                int mi = 0;
                for (int i = 1; i < n; i++)
                    if (seq[i] < seq[mi]) mi = i;
                if (s > seq[mi]) seq[mi] = s;
            }
        }
    }
    closedir(d);
    for (int i = 1; i < n; i++)
        for (int j = i; j > 0 && seq[j] > seq[j - 1]; j--) {
            int64_t t = seq[j];
            seq[j] = seq[j - 1];
            seq[j - 1] = t;
        }
    return n;
}

static void ckpt_path(char *buf, size_t n, const char *dir, int64_t seq)
{
    snprintf(buf, n, "%s/ckpt-%06lld.h5", dir, (long long)seq);
}

/* Test hook: SLUICE_FAULT_CKPT=N makes the N-th checkpoint write of this
 * process fail after its temporary file has been partly written, as a full
 * disk would. Only read from the environment; nothing global is changed. */
static int fault_due(int64_t count)
{
    const char *f = getenv("SLUICE_FAULT_CKPT");
    return f && *f && atoll(f) == count;
}

static sl_status write_state(sl_ctx *ctx, hid_t f, const sl_solver_state *s, const char *p)
{
    sl_status st = sl_h5_attr_write_str(ctx, f, "method", s->method, p);
    if (st == SL_OK) st = sl_h5_attr_write_i64(ctx, f, "iteration", s->iteration, p);
    if (st == SL_OK) st = sl_h5_attr_write_i64(ctx, f, "sweeps", s->sweeps, p);
    if (st == SL_OK) st = sl_h5_attr_write_i64(ctx, f, "since_check", s->since_check, p);
    if (st == SL_OK) st = sl_h5_attr_write_i64(ctx, f, "check_interval", s->check_interval, p);
    if (st == SL_OK) st = sl_h5_attr_write_i64(ctx, f, "mpi_m", s->mpi_m, p);
    if (st == SL_OK) st = sl_h5_attr_write_i64(ctx, f, "pi_initialized", s->pi_initialized, p);
    if (st == SL_OK) st = sl_h5_attr_write_f64(ctx, f, "eval_tol", s->eval_tol, p);
    if (st == SL_OK) st = sl_h5_attr_write_f64(ctx, f, "elapsed", s->elapsed, p);
    if (st == SL_OK) st = sl_h5_attr_write_f64(ctx, f, "last_span", s->last_span, p);
    if (st == SL_OK) st = sl_h5_attr_write_i64(ctx, f, "last_check_sweeps", s->last_check_sweeps, p);
    return st;
}

static sl_status read_state(sl_ctx *ctx, hid_t f, sl_solver_state *s, const char *p)
{
    memset(s, 0, sizeof(*s));
    sl_status st = sl_h5_attr_read_str(ctx, f, "method", s->method, sizeof(s->method), 1, p);
    if (st == SL_OK) st = sl_h5_attr_read_i64(ctx, f, "iteration", &s->iteration, 1, p);
    if (st == SL_OK) st = sl_h5_attr_read_i64(ctx, f, "sweeps", &s->sweeps, 1, p);
    if (st == SL_OK) st = sl_h5_attr_read_i64(ctx, f, "since_check", &s->since_check, 1, p);
    if (st == SL_OK) st = sl_h5_attr_read_i64(ctx, f, "check_interval", &s->check_interval, 1, p);
    if (st == SL_OK) st = sl_h5_attr_read_i64(ctx, f, "mpi_m", &s->mpi_m, 1, p);
    if (st == SL_OK) st = sl_h5_attr_read_i64(ctx, f, "pi_initialized", &s->pi_initialized, 1, p);
    if (st == SL_OK) st = sl_h5_attr_read_f64(ctx, f, "eval_tol", &s->eval_tol, 1, p);
    if (st == SL_OK) st = sl_h5_attr_read_f64(ctx, f, "elapsed", &s->elapsed, 1, p);
    if (st == SL_OK) st = sl_h5_attr_read_f64(ctx, f, "last_span", &s->last_span, 1, p);
    if (st == SL_OK) st = sl_h5_attr_read_i64(ctx, f, "last_check_sweeps", &s->last_check_sweeps, 1, p);
    return st;
}

static sl_status write_history(sl_ctx *ctx, hid_t f, const sl_history *h, const char *p)
{
    sl_status st = SL_OK;
    int64_t n = h->n, c = ctx->rank == 0 ? n : 0;
    if (n == 0) return SL_OK;
    SL_TRY(sl_h5_write_1d(ctx, f, "/history/iteration", H5T_STD_I64LE, H5T_NATIVE_INT64, n, 0, c, h->iteration, 0, p));
    SL_TRY(sl_h5_write_1d(ctx, f, "/history/sweeps", H5T_STD_I64LE, H5T_NATIVE_INT64, n, 0, c, h->sweeps, 0, p));
    SL_TRY(sl_h5_write_1d(ctx, f, "/history/seconds", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, n, 0, c, h->seconds, 0, p));
    SL_TRY(sl_h5_write_1d(ctx, f, "/history/sup", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, n, 0, c, h->sup, 0, p));
    SL_TRY(sl_h5_write_1d(ctx, f, "/history/span", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, n, 0, c, h->span, 0, p));
    SL_TRY(sl_h5_write_1d(ctx, f, "/history/value_error_bound", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, n, 0, c,
                          h->value_error, 0, p));
    SL_TRY(sl_h5_write_1d(ctx, f, "/history/policy_loss_bound", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, n, 0, c,
                          h->policy_loss, 0, p));
cleanup:
    return st;
}

static sl_status read_history(sl_ctx *ctx, hid_t f, sl_history *h, const char *p)
{
    sl_status st = SL_OK;
    sl_history_free(h);
    int64_t n = sl_h5_length(f, "/history/iteration");
    if (n <= 0) return SL_OK;
    for (int64_t i = 0; i < n; i++) SL_TRY(sl_history_push(ctx, h, 0, 0, 0, 0, 0, 0, 0));
    SL_TRY(sl_h5_read_1d(ctx, f, "/history/iteration", H5T_NATIVE_INT64, n, 0, n, h->iteration, p));
    SL_TRY(sl_h5_read_1d(ctx, f, "/history/sweeps", H5T_NATIVE_INT64, n, 0, n, h->sweeps, p));
    SL_TRY(sl_h5_read_1d(ctx, f, "/history/seconds", H5T_NATIVE_DOUBLE, n, 0, n, h->seconds, p));
    SL_TRY(sl_h5_read_1d(ctx, f, "/history/sup", H5T_NATIVE_DOUBLE, n, 0, n, h->sup, p));
    SL_TRY(sl_h5_read_1d(ctx, f, "/history/span", H5T_NATIVE_DOUBLE, n, 0, n, h->span, p));
    SL_TRY(sl_h5_read_1d(ctx, f, "/history/value_error_bound", H5T_NATIVE_DOUBLE, n, 0, n, h->value_error, p));
    SL_TRY(sl_h5_read_1d(ctx, f, "/history/policy_loss_bound", H5T_NATIVE_DOUBLE, n, 0, n, h->policy_loss, p));
cleanup:
    return st;
}

sl_status sl_ckpt_write(sl_ctx *ctx, const char *dir, const char *fingerprint, int64_t n_states, int64_t s_begin,
                        int64_t n_local, const double *value, const int32_t *actions, const sl_solver_state *state,
                        const sl_history *hist)
{
    sl_status st = SL_OK;
    int64_t seq[CKPT_MAX_LIST];
    int64_t next = 1;
    int nlist = 0;
    char path[4200];
    sl_outfile of;
    hid_t f = H5I_INVALID_HID;
    if (ctx->rank == 0) {
        if (mkdir(dir, 0755) != 0 && errno != EEXIST)
            st = SL_ERR(ctx, SL_ECANTCREAT, "%s: cannot create checkpoint directory: %s", dir, strerror(errno));
        else if ((nlist = list_ckpts(dir, seq, CKPT_MAX_LIST)) < 0)
            st = SL_ERR(ctx, SL_EIO, "%s: cannot list checkpoint directory: %s", dir, strerror(errno));
        else if (nlist > 0)
            next = seq[0] + 1;
    }
    SL_TRY(sl_agree(ctx, st));
    MPI_Bcast(&next, 1, MPI_INT64_T, 0, ctx->comm);
    ckpt_path(path, sizeof(path), dir, next);
    uint64_t cv = checksum_f64(ctx, value, s_begin, n_local);
    uint64_t cp = checksum_i32(ctx, actions, s_begin, n_local);
    char cvs[24], cps[24];
    snprintf(cvs, sizeof(cvs), "%016llx", (unsigned long long)cv);
    snprintf(cps, sizeof(cps), "%016llx", (unsigned long long)cp);

    SL_TRY(sl_outfile_begin(ctx, &of, path));
    st = sl_h5_create(ctx, of.tmp_path, &f);
    if (st == SL_OK) st = sl_h5_attr_write_str(ctx, f, "sluice_format", "checkpoint", path);
    if (st == SL_OK) st = sl_h5_attr_write_i64(ctx, f, "format_version", SLUICE_FORMAT_VERSION, path);
    if (st == SL_OK) st = sl_h5_attr_write_str(ctx, f, "model_fingerprint", fingerprint, path);
    if (st == SL_OK) st = sl_h5_attr_write_str(ctx, f, "sluice_version", SLUICE_VERSION, path);
    if (st == SL_OK) st = sl_h5_attr_write_i64(ctx, f, "n_states", n_states, path);
    if (st == SL_OK) st = sl_h5_attr_write_i64(ctx, f, "ranks", ctx->size, path);
    if (st == SL_OK) st = sl_h5_attr_write_str(ctx, f, "value_checksum", cvs, path);
    if (st == SL_OK) st = sl_h5_attr_write_str(ctx, f, "policy_checksum", cps, path);
    if (st == SL_OK) st = write_state(ctx, f, state, path);
    st = sl_agree(ctx, st);
    if (st == SL_OK)
        st = sl_h5_write_1d(ctx, f, "/value", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, n_states, s_begin, n_local, value, 1,
                            path);
    if (st == SL_OK && fault_due(next))
        st = SL_ERR(ctx, SL_EIO, "%s: injected write failure (SLUICE_FAULT_CKPT)", path);
    st = sl_agree(ctx, st);
    if (st == SL_OK)
        st = sl_h5_write_1d(ctx, f, "/policy", H5T_STD_I32LE, H5T_NATIVE_INT32, n_states, s_begin, n_local, actions, 1,
                            path);
    if (st == SL_OK) st = write_history(ctx, f, hist, path);
    /* the complete mark goes last */
    if (st == SL_OK) st = sl_h5_attr_write_i64(ctx, f, "complete", 1, path);
    st = sl_agree(ctx, st);
    if (f >= 0) {
        sl_status cs = sl_h5_close(ctx, &f, path);
        if (st == SL_OK) st = cs;
    }
    st = sl_outfile_end(ctx, &of, st);
    if (st != SL_OK) {
        /* the previous checkpoints are untouched */
        return SL_ERR(ctx, st == SL_ENOMEM ? SL_ENOMEM : SL_EIO, "%s", ctx->err);
    }
    /* keep the newest CKPT_KEEP */
    if (ctx->rank == 0) {
        nlist = list_ckpts(dir, seq, CKPT_MAX_LIST);
        for (int i = CKPT_KEEP; i < nlist; i++) {
            char old[4200];
            ckpt_path(old, sizeof(old), dir, seq[i]);
            unlink(old);
        }
    }
cleanup:
    return st;
}

/* Try one checkpoint file. Returns SL_OK if usable; SL_EDATA with refuse=1
 * if it belongs to another model. */
static sl_status try_load(sl_ctx *ctx, const char *path, const char *fingerprint, int64_t n_states, int64_t s_begin,
                          int64_t n_local, double *value, int32_t *actions, sl_solver_state *state,
                          sl_history *hist, int *refuse)
{
    sl_status st = SL_OK;
    hid_t f = H5I_INVALID_HID;
    char fmt[32] = "", fp[40] = "", cvs[24] = "", cps[24] = "";
    int64_t complete = 0, ns = 0;
    *refuse = 0;
    SL_TRY(sl_h5_open(ctx, path, 0, &f));
    st = sl_h5_attr_read_str(ctx, f, "sluice_format", fmt, sizeof(fmt), 1, path);
    if (st == SL_OK && strcmp(fmt, "checkpoint") != 0) st = SL_ERR(ctx, SL_EDATA, "%s: not a checkpoint", path);
    if (st == SL_OK) st = sl_h5_attr_read_i64(ctx, f, "complete", &complete, 0, path);
    if (st == SL_OK && complete != 1) st = SL_ERR(ctx, SL_EDATA, "%s: incomplete checkpoint (no complete mark)", path);
    if (st == SL_OK) st = sl_h5_attr_read_str(ctx, f, "model_fingerprint", fp, sizeof(fp), 1, path);
    if (st == SL_OK && strcmp(fp, fingerprint) != 0) {
        *refuse = 1;
        st = SL_ERR(ctx, SL_EDATA, "%s: checkpoint of another model (fingerprint %s, this model %s): refusing to use it",
                    path, fp, fingerprint);
    }
    if (st == SL_OK) st = sl_h5_attr_read_i64(ctx, f, "n_states", &ns, 1, path);
    if (st == SL_OK && ns != n_states) st = SL_ERR(ctx, SL_EDATA, "%s: checkpoint has %lld states", path, (long long)ns);
    if (st == SL_OK) st = sl_h5_attr_read_str(ctx, f, "value_checksum", cvs, sizeof(cvs), 1, path);
    if (st == SL_OK) st = sl_h5_attr_read_str(ctx, f, "policy_checksum", cps, sizeof(cps), 1, path);
    if (st == SL_OK) st = read_state(ctx, f, state, path);
    if (st == SL_OK) st = sl_h5_read_1d(ctx, f, "/value", H5T_NATIVE_DOUBLE, n_states, s_begin, n_local, value, path);
    if (st == SL_OK) st = sl_h5_read_1d(ctx, f, "/policy", H5T_NATIVE_INT32, n_states, s_begin, n_local, actions, path);
    if (st == SL_OK) st = read_history(ctx, f, hist, path);
    st = sl_agree(ctx, st);
    MPI_Allreduce(MPI_IN_PLACE, refuse, 1, MPI_INT, MPI_MAX, ctx->comm);
    if (st == SL_OK) {
        char a[24], b[24];
        snprintf(a, sizeof(a), "%016llx", (unsigned long long)checksum_f64(ctx, value, s_begin, n_local));
        snprintf(b, sizeof(b), "%016llx", (unsigned long long)checksum_i32(ctx, actions, s_begin, n_local));
        if (strcmp(a, cvs) != 0 || strcmp(b, cps) != 0)
            st = SL_ERR(ctx, SL_EDATA, "%s: checksum mismatch (corrupted checkpoint)", path);
        st = sl_agree(ctx, st);
    }
cleanup:
    if (f >= 0) H5Fclose(f);
    return st;
}

sl_status sl_ckpt_load(sl_ctx *ctx, const char *dir, const char *fingerprint, int64_t n_states, int64_t s_begin,
                       int64_t n_local, double *value, int32_t *actions, sl_solver_state *state, sl_history *hist,
                       int *found)
{
    sl_status st = SL_OK;
    int64_t seq[CKPT_MAX_LIST];
    int n = 0;
    *found = 0;
    if (ctx->rank == 0) {
        struct stat sb;
        if (stat(dir, &sb) != 0) n = 0; /* no directory yet: fresh start */
        else if (!S_ISDIR(sb.st_mode)) st = SL_ERR(ctx, SL_EUSAGE, "%s: not a directory", dir);
        else if ((n = list_ckpts(dir, seq, CKPT_MAX_LIST)) < 0)
            st = SL_ERR(ctx, SL_ENOINPUT, "%s: cannot list: %s", dir, strerror(errno));
    }
    SL_TRY(sl_agree(ctx, st));
    MPI_Bcast(&n, 1, MPI_INT, 0, ctx->comm);
    MPI_Bcast(seq, n, MPI_INT64_T, 0, ctx->comm);
    if (n == 0) return SL_OK;
    char first_err[SL_MSG_MAX] = "";
    for (int i = 0; i < n; i++) {
        char path[4200];
        int refuse = 0;
        ckpt_path(path, sizeof(path), dir, seq[i]);
        st = try_load(ctx, path, fingerprint, n_states, s_begin, n_local, value, actions, state, hist, &refuse);
        if (st == SL_OK) {
            if (i > 0)
                sl_warn(ctx, "newest checkpoint is unusable (%s); resuming from the older %s", first_err, path);
            *found = 1;
            return SL_OK;
        }
        if (refuse) return st;
        if (i == 0) snprintf(first_err, sizeof(first_err), "%s", ctx->err);
        else sl_warn(ctx, "checkpoint unusable: %s", ctx->err);
        sl_error_clear(ctx);
    }
    return SL_ERR(ctx, SL_EDATA, "%s: no usable checkpoint (%s); remove the directory to start afresh", dir, first_err);
cleanup:
    return st;
}

sl_status sl_ckpt_info(sl_ctx *ctx, const char *path, char *fingerprint, int64_t *n_states, sl_solver_state *state,
                       sl_history *hist, int *complete)
{
    sl_status st = SL_OK;
    hid_t f = H5I_INVALID_HID;
    int64_t c = 0;
    SL_TRY(sl_h5_open(ctx, path, 0, &f));
    st = sl_h5_attr_read_str(ctx, f, "model_fingerprint", fingerprint, 40, 1, path);
    if (st == SL_OK) st = sl_h5_attr_read_i64(ctx, f, "n_states", n_states, 1, path);
    if (st == SL_OK) st = sl_h5_attr_read_i64(ctx, f, "complete", &c, 0, path);
    if (st == SL_OK) st = read_state(ctx, f, state, path);
    if (st == SL_OK) st = read_history(ctx, f, hist, path);
    *complete = c == 1;
    st = sl_agree(ctx, st);
cleanup:
    if (f >= 0) H5Fclose(f);
    return st;
}
