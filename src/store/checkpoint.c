/* checkpoint.c - solver checkpoints: written atomically, two kept, validated on load.
 *
 * Writing: the ranks send their slices to rank 0, which alone writes the
 * file: HDF5's core driver builds it in memory and writes it to a temporary
 * file with plain write(2) calls when it is flushed and closed; then
 * sl_outfile_end fsyncs it, renames it to ckpt-NNNNNN.h5 and fsyncs the
 * directory. A full disk, a quota or an I/O error is thus a failed write on
 * rank 0: the temporary is removed, the earlier checkpoints are untouched
 * and the error is reported (74). (With the MPI-IO driver, a disk that
 * fills during the final flush leaves a file HDF5 can neither close nor
 * forget, and the library then crashes inside MPI_Finalize.) The cost is
 * O(n_states) memory on rank 0 while writing: 12 bytes per state plus the
 * compressed file.
 *
 * Loading: every rank reads its own slice with parallel HDF5. A newest file
 * that does not validate is skipped with a warning and, once an older one
 * has been loaded, renamed to ckpt-NNNNNN.h5.unusable, so that keeping the
 * newest two never keeps it in place of a valid checkpoint. A checkpoint
 * written by a newer sluice (higher format_version) is refused, never
 * skipped or set aside.
 *
 * Locking: a run that uses DIR holds a POSIX record lock (fcntl F_SETLK,
 * which also works over NFS) on DIR/.lock for its whole life, so a second
 * run on the same directory stops at once (73) instead of removing the
 * first run's temporaries or interleaving checkpoints. The lock is released
 * by the kernel when the process ends, however it ends. */
#include <dirent.h>
#include <errno.h>
#include <fcntl.h>
#include <signal.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/types.h>
#include <unistd.h>

#include "store/h5.h"
#include "store/store.h"

#define CKPT_KEEP 2
#define CKPT_MAX_LIST 64
#define CKPT_UNUSABLE ".unusable"
/* elements per point-to-point message when gathering slices on rank 0 */
#define CKPT_PIECE ((int64_t)1 << 24)

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

/* Sequence numbers of ckpt-NNNNNN.h5 in dir, newest first (rank 0).
 * *max_any (if not NULL) receives the largest sequence number of any
 * ckpt-N.h5* name, including files moved aside as unusable, so that a new
 * checkpoint never reuses a number. */
static int list_ckpts(const char *dir, int64_t *seq, int max, int64_t *max_any)
{
    DIR *d = opendir(dir);
    if (d == NULL) return -1;
    int n = 0;
    struct dirent *e;
    if (max_any) *max_any = 0;
    while ((e = readdir(d)) != NULL) {
        long long s = -1;
        int end = 0;
        char canon[40];
        /* exactly the names ckpt_path() makes; others (ckpt-7.h5, ckpt-000007.tmp) are not checkpoints */
        if (sscanf(e->d_name, "ckpt-%lld%n", &s, &end) != 1 || s < 0 || strncmp(e->d_name + end, ".h5", 3) != 0)
            continue;
        snprintf(canon, sizeof(canon), "ckpt-%06lld", s);
        if ((size_t)end != strlen(canon) || strncmp(e->d_name, canon, (size_t)end) != 0) continue;
        if (max_any && s > *max_any) *max_any = s;
        if (e->d_name[end + 3] == '\0') {
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

/* Remove temporaries .ckpt-NNNNNN.h5.<pid>.partial left in dir by processes
 * that no longer run on this host (a run killed during a write leaves one).
 * A temporary of a live process, or of this one, is kept. Rank 0; failures
 * to remove are only reported. */
static void remove_stale_partials(sl_ctx *ctx, const char *dir)
{
    DIR *d = opendir(dir);
    if (d == NULL) return;
    struct dirent *e;
    while ((e = readdir(d)) != NULL) {
        long long s, pid;
        char tail[16] = "";
        if (sscanf(e->d_name, ".ckpt-%lld.h5.%lld%15s", &s, &pid, tail) != 3 || strcmp(tail, ".partial") != 0)
            continue;
        if (pid <= 0 || (pid_t)pid == getpid()) continue;
        if (kill((pid_t)pid, 0) == 0 || errno != ESRCH) continue; /* alive, or not ours to judge */
        char p[4200];
        snprintf(p, sizeof(p), "%s/%s", dir, e->d_name);
        if (unlink(p) == 0)
            sl_log(ctx, "checkpoint: removed %s, left by process %lld, which has ended", p, pid);
        else
            sl_warn(ctx, "checkpoint: cannot remove the stale temporary %s: %s", p, strerror(errno));
    }
    closedir(d);
}

/* Test hook: SLUICE_FAULT_CKPT=N makes the write of checkpoint sequence
 * number N (ckpt-N.h5) fail after its temporary file has been partly
 * written, as a full disk would. Only read from the environment; nothing
 * global is changed. */
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
    if (st == SL_OK) st = sl_h5_attr_write_f64(ctx, f, "visit_adjust", s->visit_adjust, p);
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
    /* optional: checkpoints written before it existed had no adjustment */
    if (st == SL_OK) st = sl_h5_attr_read_f64(ctx, f, "visit_adjust", &s->visit_adjust, 0, p);
    return st;
}

/* One whole 1-D dataset into a file open in this process only (rank 0). */
static sl_status put_1d(sl_ctx *ctx, hid_t f, const char *name, hid_t ftype, hid_t mtype, int64_t n,
                        const void *buf, int compress, const char *path)
{
    sl_status st = SL_OK;
    hsize_t dims = (hsize_t)n, chunk = dims < SL_H5_CHUNK ? dims : SL_H5_CHUNK;
    hid_t space = H5I_INVALID_HID, dcpl = H5I_INVALID_HID, lcpl = H5I_INVALID_HID, dset = H5I_INVALID_HID;
    if (chunk == 0) chunk = 1;
    space = H5Screate_simple(1, &dims, NULL);
    dcpl = H5Pcreate(H5P_DATASET_CREATE);
    lcpl = H5Pcreate(H5P_LINK_CREATE);
    if (space < 0 || dcpl < 0 || lcpl < 0 || H5Pset_create_intermediate_group(lcpl, 1) < 0 ||
        H5Pset_fill_time(dcpl, H5D_FILL_TIME_NEVER) < 0 || (n > 0 && H5Pset_chunk(dcpl, 1, &chunk) < 0) ||
        (n > 0 && compress && (H5Pset_shuffle(dcpl) < 0 || H5Pset_deflate(dcpl, 1) < 0)))
        SL_TRY(SL_ERR(ctx, SL_EINTERNAL, "%s: HDF5 property setup failed for %s", path, name));
    dset = H5Dcreate2(f, name, ftype, space, lcpl, dcpl, H5P_DEFAULT);
    if (dset < 0) SL_TRY(SL_ERR(ctx, SL_ENOMEM, "%s: cannot create dataset %s in memory", path, name));
    if (n > 0 && H5Dwrite(dset, mtype, H5S_ALL, H5S_ALL, H5P_DEFAULT, buf) < 0)
        SL_TRY(SL_ERR(ctx, SL_ENOMEM, "%s: cannot write dataset %s in memory", path, name));
cleanup:
    if (dset >= 0) H5Dclose(dset);
    if (lcpl >= 0) H5Pclose(lcpl);
    if (dcpl >= 0) H5Pclose(dcpl);
    if (space >= 0) H5Sclose(space);
    return st;
}

static sl_status put_history(sl_ctx *ctx, hid_t f, const sl_history *h, const char *p)
{
    sl_status st = SL_OK;
    int64_t n = h->n;
    if (n == 0) return SL_OK;
    sl_history_column col[SL_HISTORY_COLUMNS];
    sl_history_columns(h, col);
    for (int k = 0; k < SL_HISTORY_COLUMNS; k++)
        SL_TRY(put_1d(ctx, f, col[k].name, col[k].ftype, col[k].mtype, n, col[k].data, 0, p));
cleanup:
    return st;
}

/* Collect every rank's slice [s_begin, s_begin + n_local) of elements of
 * `size` bytes into `all` on rank 0 (n_states elements; NULL elsewhere).
 * Point-to-point in pieces, so counts beyond INT_MAX are fine. Collective;
 * the caller has agreed that rank 0's buffer exists. */
static void gather_slices(sl_ctx *ctx, const void *mine, int64_t s_begin, int64_t n_local, size_t size, void *all)
{
    int64_t here[2] = {s_begin, n_local};
    if (ctx->rank != 0) {
        MPI_Send(here, 2, MPI_INT64_T, 0, 1, ctx->comm);
        for (int64_t i = 0; i < n_local; i += CKPT_PIECE) {
            int64_t m = n_local - i < CKPT_PIECE ? n_local - i : CKPT_PIECE;
            MPI_Send((const char *)mine + (size_t)i * size, (int)((size_t)m * size), MPI_BYTE, 0, 2, ctx->comm);
        }
        return;
    }
    if (n_local > 0) memcpy((char *)all + (size_t)s_begin * size, mine, (size_t)n_local * size);
    for (int r = 1; r < ctx->size; r++) {
        int64_t there[2];
        MPI_Recv(there, 2, MPI_INT64_T, r, 1, ctx->comm, MPI_STATUS_IGNORE);
        for (int64_t i = 0; i < there[1]; i += CKPT_PIECE) {
            int64_t m = there[1] - i < CKPT_PIECE ? there[1] - i : CKPT_PIECE;
            MPI_Recv((char *)all + (size_t)(there[0] + i) * size, (int)((size_t)m * size), MPI_BYTE, r, 2,
                     ctx->comm, MPI_STATUS_IGNORE);
        }
    }
}

/* Write the whole checkpoint file `tmp` from rank 0 alone: HDF5's core
 * driver builds it in memory and writes it out with plain write(2) calls
 * when the file is flushed and closed. With `fault` (test hook), the file is
 * then cut to half its size and the write reported as failed. */
static sl_status write_file(sl_ctx *ctx, const char *tmp, const char *path, const char *fingerprint,
                            int64_t n_states, const double *value, const int32_t *actions, const char *cvs,
                            const char *cps, const sl_solver_state *state, const sl_history *hist, int fault)
{
    sl_status st = SL_OK;
    hid_t fapl = H5I_INVALID_HID, f = H5I_INVALID_HID;
    /* grow the in-memory image in steps of about the raw size of the arrays;
     * write tracking makes the driver write only the pages in use, so the
     * disk never needs more than the file's own size (plus a page) */
    size_t step = (size_t)n_states * 12 + ((size_t)1 << 20);
    H5Eset_auto2(H5E_DEFAULT, NULL, NULL);
    fapl = H5Pcreate(H5P_FILE_ACCESS);
    if (fapl < 0 || H5Pset_fapl_core(fapl, step, 1) < 0 || H5Pset_core_write_tracking(fapl, 1, 4096) < 0 ||
        H5Pset_libver_bounds(fapl, H5F_LIBVER_V18, H5F_LIBVER_V110) < 0)
        SL_TRY(SL_ERR(ctx, SL_EINTERNAL, "%s: cannot set up HDF5 file access", path));
    errno = 0;
    f = H5Fcreate(tmp, H5F_ACC_TRUNC, H5P_DEFAULT, fapl);
    if (f < 0)
        SL_TRY(SL_ERR(ctx, SL_EIO, "%s: cannot create the temporary file %s%s%s", path, tmp, errno ? ": " : "",
                      errno ? strerror(errno) : ""));
    SL_TRY(sl_h5_attr_write_str(ctx, f, "sluice_format", "checkpoint", path));
    SL_TRY(sl_h5_attr_write_i64(ctx, f, "format_version", SLUICE_FORMAT_VERSION, path));
    SL_TRY(sl_h5_attr_write_str(ctx, f, "model_fingerprint", fingerprint, path));
    SL_TRY(sl_h5_attr_write_str(ctx, f, "sluice_version", SLUICE_VERSION, path));
    SL_TRY(sl_h5_attr_write_i64(ctx, f, "n_states", n_states, path));
    SL_TRY(sl_h5_attr_write_i64(ctx, f, "ranks", ctx->size, path));
    SL_TRY(sl_h5_attr_write_str(ctx, f, "value_checksum", cvs, path));
    SL_TRY(sl_h5_attr_write_str(ctx, f, "policy_checksum", cps, path));
    SL_TRY(write_state(ctx, f, state, path));
    SL_TRY(put_1d(ctx, f, "/value", H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, n_states, value, 1, path));
    SL_TRY(put_1d(ctx, f, "/policy", H5T_STD_I32LE, H5T_NATIVE_INT32, n_states, actions, 1, path));
    SL_TRY(put_history(ctx, f, hist, path));
    /* the complete mark goes last */
    SL_TRY(sl_h5_attr_write_i64(ctx, f, "complete", 1, path));
    errno = 0;
    if (H5Fflush(f, H5F_SCOPE_GLOBAL) < 0)
        SL_TRY(SL_ERR(ctx, SL_EIO, "%s: writing the checkpoint failed: %s", path,
                      errno ? strerror(errno) : "HDF5 could not write the file (disk full?)"));
cleanup:
    /* with the core driver a failed close still releases the file */
    errno = 0;
    if (f >= 0 && H5Fclose(f) < 0 && st == SL_OK)
        st = SL_ERR(ctx, SL_EIO, "%s: writing the checkpoint failed at close: %s", path,
                    errno ? strerror(errno) : "HDF5 could not write the file (disk full?)");
    if (fapl >= 0) H5Pclose(fapl);
    if (st == SL_OK && fault) {
        struct stat sb;
        if (stat(tmp, &sb) == 0 && truncate(tmp, sb.st_size / 2) != 0)
            sl_warn(ctx, "%s: test hook could not truncate %s: %s", path, tmp, strerror(errno));
        st = SL_ERR(ctx, SL_EIO, "%s: injected write failure (SLUICE_FAULT_CKPT)", path);
    }
    return st;
}

sl_status sl_ckpt_write(sl_ctx *ctx, const char *dir, const char *fingerprint, int64_t n_states, int64_t s_begin,
                        int64_t n_local, const double *value, const int32_t *actions, const sl_solver_state *state,
                        const sl_history *hist)
{
    sl_status st = SL_OK;
    int64_t seq[CKPT_MAX_LIST];
    int64_t next = 1, max_any = 0;
    int nlist = 0;
    char path[4200];
    sl_outfile of;
    double *all_v = NULL;
    int32_t *all_a = NULL;
    if (ctx->rank == 0) {
        if (mkdir(dir, 0755) != 0 && errno != EEXIST)
            st = SL_ERR(ctx, SL_ECANTCREAT, "%s: cannot create checkpoint directory: %s", dir, strerror(errno));
        else {
            remove_stale_partials(ctx, dir);
            if ((nlist = list_ckpts(dir, seq, CKPT_MAX_LIST, &max_any)) < 0)
                st = SL_ERR(ctx, SL_EIO, "%s: cannot list checkpoint directory: %s", dir, strerror(errno));
            else
                next = max_any + 1;
        }
    }
    SL_TRY(sl_agree(ctx, st));
    MPI_Bcast(&next, 1, MPI_INT64_T, 0, ctx->comm);
    ckpt_path(path, sizeof(path), dir, next);
    uint64_t cv = checksum_f64(ctx, value, s_begin, n_local);
    uint64_t cp = checksum_i32(ctx, actions, s_begin, n_local);
    char cvs[24], cps[24];
    snprintf(cvs, sizeof(cvs), "%016llx", (unsigned long long)cv);
    snprintf(cps, sizeof(cps), "%016llx", (unsigned long long)cp);

    if (ctx->rank == 0 && (SL_ALLOC(ctx, all_v, n_states, "checkpoint values") == NULL ||
                           SL_ALLOC(ctx, all_a, n_states, "checkpoint policy") == NULL))
        st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    gather_slices(ctx, value, s_begin, n_local, sizeof(double), all_v);
    gather_slices(ctx, actions, s_begin, n_local, sizeof(int32_t), all_a);

    SL_TRY(sl_outfile_begin(ctx, &of, path));
    if (ctx->rank == 0)
        st = write_file(ctx, of.tmp_path, path, fingerprint, n_states, all_v, all_a, cvs, cps, state, hist,
                        fault_due(next));
    /* agrees; on success fsync, rename, fsync the directory; else remove the temporary */
    st = sl_outfile_end(ctx, &of, st);
    if (st != SL_OK) {
        /* the previous checkpoints are untouched */
        st = SL_ERR(ctx, st == SL_ENOMEM ? SL_ENOMEM : SL_EIO, "%s", ctx->err);
        goto cleanup;
    }
    /* keep the newest CKPT_KEEP */
    if (ctx->rank == 0) {
        nlist = list_ckpts(dir, seq, CKPT_MAX_LIST, NULL);
        for (int i = CKPT_KEEP; i < nlist; i++) {
            char old[4200];
            ckpt_path(old, sizeof(old), dir, seq[i]);
            if (unlink(old) != 0 && errno != ENOENT)
                sl_warn(ctx, "checkpoint: cannot remove the old %s: %s", old, strerror(errno));
        }
    }
cleanup:
    free(all_v);
    free(all_a);
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
    int64_t complete = 0, ns = 0, ver = 0;
    *refuse = 0;
    SL_TRY(sl_h5_open(ctx, path, 0, &f));
    st = sl_h5_attr_read_str(ctx, f, "sluice_format", fmt, sizeof(fmt), 1, path);
    if (st == SL_OK && strcmp(fmt, "checkpoint") != 0) st = SL_ERR(ctx, SL_EDATA, "%s: not a checkpoint", path);
    if (st == SL_OK) st = sl_h5_attr_read_i64(ctx, f, "format_version", &ver, 1, path);
    if (st == SL_OK && ver > SLUICE_FORMAT_VERSION) {
        *refuse = 1;
        st = SL_ERR(ctx, SL_EDATA,
                    "%s: checkpoint written by a newer sluice (format_version %lld; this sluice reads up to %d): "
                    "refusing to use it or set it aside; resume with that version, or move the directory aside",
                    path, (long long)ver, SLUICE_FORMAT_VERSION);
    }
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
    if (st == SL_OK) st = sl_history_read(ctx, f, hist, path);
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
    /* the checksum says the values are the ones written, not that they are
     * a start: a non-finite value (a diverged run, a crafted file) is not */
    if (st == SL_OK) st = sl_agree(ctx, sl_saved_values_check(ctx, path, "/value", s_begin, n_local, value));
cleanup:
    if (f >= 0) H5Fclose(f);
    return st;
}

/* Rename the n newer checkpoints that did not validate to
 * ckpt-NNNNNN.h5.unusable (rank 0): they stay for inspection but no longer
 * count among the newest two kept, nor are they tried again. */
static void set_aside(sl_ctx *ctx, const char *dir, const int64_t *seq, int n)
{
    if (ctx->rank != 0) return;
    for (int i = 0; i < n; i++) {
        char from[4200], to[4300];
        ckpt_path(from, sizeof(from), dir, seq[i]);
        snprintf(to, sizeof(to), "%s%s", from, CKPT_UNUSABLE);
        if (rename(from, to) == 0)
            sl_warn(ctx, "moved the unusable %s aside to %s", from, to);
        else
            sl_warn(ctx, "cannot move the unusable %s aside: %s", from, strerror(errno));
    }
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
        else if ((n = list_ckpts(dir, seq, CKPT_MAX_LIST, NULL)) < 0)
            st = SL_ERR(ctx, SL_ENOINPUT, "%s: cannot list: %s", dir, strerror(errno));
        else
            remove_stale_partials(ctx, dir);
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
            if (i > 0) {
                sl_warn(ctx, "newest checkpoint is unusable (%s); resuming from the older %s", first_err, path);
                set_aside(ctx, dir, seq, i);
            }
            *found = 1;
            return SL_OK;
        }
        /* out of memory says nothing about the file: stop here, set nothing
         * aside (found by tests/cli/fault_alloc.sh) */
        if (refuse || st == SL_ENOMEM) return st;
        if (i == 0) snprintf(first_err, sizeof(first_err), "%s", ctx->err);
        else sl_warn(ctx, "checkpoint unusable: %s", ctx->err);
        sl_error_clear(ctx);
    }
    return SL_ERR(ctx, SL_EDATA, "%s: no usable checkpoint (%s); to start afresh, move the directory aside", dir,
                  first_err);
cleanup:
    return st;
}

sl_status sl_ckpt_newest(sl_ctx *ctx, const char *dir, char *path, size_t len)
{
    int64_t seq[CKPT_MAX_LIST];
    int n = 0;
    path[0] = '\0';
    if (ctx->rank == 0) {
        n = list_ckpts(dir, seq, CKPT_MAX_LIST, NULL);
        if (n > 0) ckpt_path(path, len, dir, seq[0]);
    }
    MPI_Bcast(&n, 1, MPI_INT, 0, ctx->comm);
    if (n > 0) {
        int l = (int)strlen(path) + 1;
        MPI_Bcast(&l, 1, MPI_INT, 0, ctx->comm);
        MPI_Bcast(path, l, MPI_CHAR, 0, ctx->comm);
    }
    return SL_OK;
}

sl_status sl_ckpt_lock(sl_ctx *ctx, const char *dir, int *fd)
{
    sl_status st = SL_OK;
    *fd = -1;
    if (ctx->rank == 0) {
        char path[4200], held[32] = "";
        snprintf(path, sizeof(path), "%s/.lock", dir);
        if (mkdir(dir, 0755) != 0 && errno != EEXIST)
            st = SL_ERR(ctx, SL_ECANTCREAT, "%s: cannot create checkpoint directory: %s", dir, strerror(errno));
        else if ((*fd = open(path, O_RDWR | O_CREAT, 0644)) < 0)
            st = SL_ERR(ctx, SL_ECANTCREAT, "%s: cannot open the checkpoint directory's lock file: %s", path,
                        strerror(errno));
        else {
            struct flock lk;
            memset(&lk, 0, sizeof(lk));
            lk.l_type = F_WRLCK;
            lk.l_whence = SEEK_SET;
            if (fcntl(*fd, F_SETLK, &lk) != 0) {
                int e = errno;
                ssize_t got = pread(*fd, held, sizeof(held) - 1, 0);
                held[got > 0 ? got : 0] = '\0';
                held[strcspn(held, "\n")] = '\0';
                if (e == EACCES || e == EAGAIN)
                    st = SL_ERR(ctx, SL_ECANTCREAT,
                                "%s: checkpoint directory in use by another run (lock %s held%s%s); "
                                "one run per checkpoint directory",
                                dir, path, held[0] ? " by pid " : "", held);
                else
                    st = SL_ERR(ctx, SL_ECANTCREAT, "%s: cannot lock: %s", path, strerror(e));
                close(*fd);
                *fd = -1;
            } else {
                char me[32];
                int len = snprintf(me, sizeof(me), "%ld\n", (long)getpid());
                if (ftruncate(*fd, 0) != 0 || pwrite(*fd, me, (size_t)len, 0) != len)
                    sl_warn(ctx, "%s: cannot record this run's pid in the lock file: %s", path, strerror(errno));
            }
        }
    }
    return sl_agree(ctx, st);
}

void sl_ckpt_unlock(int *fd)
{
    if (*fd >= 0) close(*fd); /* releases the lock; the file stays (removing it would race) */
    *fd = -1;
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
    if (st == SL_OK) st = sl_history_read(ctx, f, hist, path);
    *complete = c == 1;
    st = sl_agree(ctx, st);
cleanup:
    if (f >= 0) H5Fclose(f);
    return st;
}
