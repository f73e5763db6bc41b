/* core.c - context, errors, agreement across ranks, allocation, atomic files. */
#define _POSIX_C_SOURCE 200809L
#define _GNU_SOURCE /* fallocate */
#include "core/core.h"

#include <errno.h>
#include <fcntl.h>
#include <signal.h>
#include <stdlib.h>
#include <string.h>
#include <sys/mman.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>

const char *sl_strerror(sl_status st)
{
    switch (st) {
    case SL_OK: return "success";
    case SL_EUSAGE: return "usage error";
    case SL_EDATA: return "invalid data";
    case SL_ENOINPUT: return "missing or unreadable input";
    case SL_EINTERNAL: return "internal error";
    case SL_ENOMEM: return "out of memory";
    case SL_ECANTCREAT: return "cannot create output";
    case SL_EIO: return "input/output error";
    case SL_ESTOPPED: return "stopped early";
    }
    return "unknown status";
}

sl_status sl_ctx_new(MPI_Comm comm, int verbosity, sl_ctx **out)
{
    *out = NULL;
    sl_ctx *ctx = calloc(1, sizeof(*ctx));
    int ok = ctx != NULL;
    int all_ok = 0;
    /* agree before any rank returns, so none is left in MPI_Comm_dup */
    MPI_Allreduce(&ok, &all_ok, 1, MPI_INT, MPI_MIN, comm);
    if (!all_ok) {
        free(ctx);
        return SL_ENOMEM;
    }
    if (MPI_Comm_dup(comm, &ctx->comm) != MPI_SUCCESS) {
        free(ctx);
        return SL_EINTERNAL;
    }
    MPI_Comm_rank(ctx->comm, &ctx->rank);
    MPI_Comm_size(ctx->comm, &ctx->size);
    ctx->verbosity = verbosity;
    /* fault injection for the tests (tests/cli/fault_alloc.sh): the N-th
     * checked allocation of this process fails */
    const char *fa = getenv("SLUICE_FAULT_ALLOC");
    ctx->fault_alloc_at = fa != NULL ? atoll(fa) : 0;
    /* SLUICE_DIRECT_CHUNKS=0 reads every dataset through H5Dread, the
     * reference the direct chunk reader is compared with (tests, bench) */
    const char *dc = getenv("SLUICE_DIRECT_CHUNKS");
    ctx->h5_direct = !(dc != NULL && strcmp(dc, "0") == 0);
    ctx->log = NULL;            /* the library prints nothing unless asked */
    ctx->log_tty = 0;
    *out = ctx;
    return SL_OK;
}

void sl_ctx_free(sl_ctx **pctx)
{
    if (pctx == NULL || *pctx == NULL) return;
    MPI_Comm_free(&(*pctx)->comm);
    free(*pctx);
    *pctx = NULL;
}

int sl_ctx_rank(const sl_ctx *ctx) { return ctx->rank; }
int sl_ctx_verbosity(const sl_ctx *ctx) { return ctx->verbosity; }
int sl_ctx_size(const sl_ctx *ctx) { return ctx->size; }
const char *sl_ctx_message(const sl_ctx *ctx) { return ctx->err; }

void sl_ctx_set_log(sl_ctx *ctx, FILE *log)
{
    ctx->log = log;
    ctx->log_tty = log != NULL && isatty(fileno(log));
}

void sl_ctx_set_signal_flag(sl_ctx *ctx, volatile sig_atomic_t *flag)
{
    ctx->signal_flag = flag;
}

void sl_ctx_set_signal_info(sl_ctx *ctx, volatile sig_atomic_t *info)
{
    ctx->signal_info = info;
}

sl_status sl_error_at(sl_ctx *ctx, sl_status st, const char *file, int line,
                      const char *fmt, ...)
{
    /* the message of the last failing call wins: a failure recorded earlier
     * that an API call returned is overwritten by the next one */
    if (ctx == NULL) return st;
    ctx->err_status = st;
    /* format into a scratch buffer first: the arguments may point into
     * ctx->err itself (re-raising the current message) */
    char buf[SL_MSG_MAX];
    va_list ap;
    va_start(ap, fmt);
    int n = vsnprintf(buf, sizeof(buf), fmt, ap);
    va_end(ap);
    if (ctx->verbosity >= 2 && n >= 0 && (size_t)n < sizeof(buf))
        snprintf(buf + n, sizeof(buf) - (size_t)n, " [%s:%d]", file, line);
    memcpy(ctx->err, buf, sizeof(buf));
    return st;
}

void sl_error_clear(sl_ctx *ctx)
{
    ctx->err_status = SL_OK;
    ctx->err[0] = '\0';
}

sl_status sl_agree(sl_ctx *ctx, sl_status st)
{
    int mine = (int)st, worst = 0;
    MPI_Allreduce(&mine, &worst, 1, MPI_INT, MPI_MAX, ctx->comm);
    if (worst == SL_OK) return SL_OK;
    /* the lowest rank that failed with any error speaks for all */
    int cand = st != SL_OK ? ctx->rank : ctx->size, root = 0;
    MPI_Allreduce(&cand, &root, 1, MPI_INT, MPI_MIN, ctx->comm);
    if (ctx->rank == root && ctx->err[0] == '\0')
        snprintf(ctx->err, sizeof(ctx->err), "%s", sl_strerror(st));
    MPI_Bcast(ctx->err, SL_MSG_MAX, MPI_CHAR, root, ctx->comm);
    ctx->err[SL_MSG_MAX - 1] = '\0';
    ctx->err_status = (sl_status)worst;
    return (sl_status)worst;
}

/* Large arrays (the model's rows, vectors) are filled once and then read
 * every sweep. A block of 4 MB or more is allocated on a 2 MB boundary and
 * rounded up to whole 2 MB pages (at most 2 MB more, never touched), and
 * transparent huge pages are asked for on all of it: one page fault per
 * 2 MB instead of 512 while it is filled, none at its ends, and fewer TLB
 * misses of the gathered x[col] loads. The advice is only that: where the
 * kernel does not support it (EINVAL) or has THP switched off, nothing
 * changes, so its failure is deliberately not an error. NULL if out of
 * memory. */
static void *alloc_large(size_t bytes)
{
#ifdef MADV_HUGEPAGE
    const size_t huge = (size_t)2 << 20;
    if (bytes >= 2 * huge && bytes <= SIZE_MAX - huge) {
        const size_t whole = (bytes + huge - 1) / huge * huge;
        void *p = NULL;
        if (posix_memalign(&p, huge, whole) != 0) return NULL;
        (void)madvise(p, whole, MADV_HUGEPAGE); /* refused: plain pages, nothing else changes */
        return p;
    }
#endif
    return malloc(bytes ? bytes : 1);
}

/* What sl_malloc and sl_calloc check before they allocate: the size does
 * not overflow, and the N-th allocation is not the one the tests asked to
 * fail (SLUICE_FAULT_ALLOC). 0 with the error set; else 1, and *bytes holds
 * count * size. */
static int alloc_allowed(sl_ctx *ctx, size_t count, size_t size, const char *what, size_t *bytes)
{
    if (size != 0 && count > SIZE_MAX / size) {
        SL_ERR(ctx, SL_ENOMEM, "size overflow allocating %s", what);
        return 0;
    }
    *bytes = count * size;
    if (ctx->fault_alloc_at > 0 && ++ctx->alloc_count == ctx->fault_alloc_at) {
        SL_ERR(ctx, SL_ENOMEM, "out of memory allocating %s (%zu bytes; injected failure of allocation %lld)", what,
               *bytes, (long long)ctx->alloc_count);
        return 0;
    }
    return 1;
}

void *sl_malloc(sl_ctx *ctx, size_t count, size_t size, const char *what)
{
    size_t bytes = 0;
    if (!alloc_allowed(ctx, count, size, what, &bytes)) return NULL;
    void *p = alloc_large(bytes);
    if (p == NULL)
        SL_ERR(ctx, SL_ENOMEM, "out of memory allocating %s (%zu bytes)", what, bytes);
    return p;
}

void *sl_calloc(sl_ctx *ctx, size_t count, size_t size, const char *what)
{
    size_t bytes = 0;
    if (!alloc_allowed(ctx, count, size, what, &bytes)) return NULL;
    void *p = calloc(count ? count : 1, size ? size : 1);
    if (p == NULL)
        SL_ERR(ctx, SL_ENOMEM, "out of memory allocating %s (%zu bytes)", what, bytes);
    return p;
}

static void vlog(sl_ctx *ctx, const char *prefix, const char *fmt, va_list ap)
{
    if (ctx->log == NULL || ctx->rank != 0) return;
    fputs(prefix, ctx->log);
    vfprintf(ctx->log, fmt, ap);
    fputc('\n', ctx->log);
    fflush(ctx->log);
}

void sl_log(sl_ctx *ctx, const char *fmt, ...)
{
    if (ctx->verbosity < 1) return;
    va_list ap;
    va_start(ap, fmt);
    vlog(ctx, "", fmt, ap);
    va_end(ap);
}

void sl_warn(sl_ctx *ctx, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    vlog(ctx, "sluice: warning: ", fmt, ap);
    va_end(ap);
}

double sl_now(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

double sl_physical_memory(void)
{
    long pages = sysconf(_SC_PHYS_PAGES), psize = sysconf(_SC_PAGESIZE);
    if (pages <= 0 || psize <= 0) return 0.0;
    return (double)pages * (double)psize;
}

/* ---- atomic output files ---------------------------------------------- */

static sl_status fsync_path(sl_ctx *ctx, const char *path, int dir)
{
    int fd = open(path, dir ? O_RDONLY | O_DIRECTORY : O_RDONLY);
    if (fd < 0) return SL_ERR(ctx, SL_EIO, "%s: cannot open for fsync: %s", path, strerror(errno));
    sl_status st = SL_OK;
    if (fsync(fd) != 0 && !(dir && (errno == EINVAL || errno == EBADF)))
        st = SL_ERR(ctx, SL_EIO, "%s: fsync failed: %s", path, strerror(errno));
    if (close(fd) != 0 && st == SL_OK)
        st = SL_ERR(ctx, SL_EIO, "%s: close failed: %s", path, strerror(errno));
    return st;
}

static void dir_of(const char *path, char *dir, size_t n)
{
    const char *slash = strrchr(path, '/');
    if (slash == NULL) snprintf(dir, n, ".");
    else if (slash == path) snprintf(dir, n, "/");
    else snprintf(dir, n, "%.*s", (int)(slash - path), path);
}

sl_status sl_outfile_begin(sl_ctx *ctx, sl_outfile *of, const char *path)
{
    sl_status st = SL_OK;
    memset(of, 0, sizeof(*of));
    if (strlen(path) + 32 >= sizeof(of->final_path))
        st = SL_ERR(ctx, SL_EUSAGE, "%s: path too long", path);
    if (st == SL_OK && ctx->rank == 0) {
        snprintf(of->final_path, sizeof(of->final_path), "%s", path);
        const char *base = strrchr(path, '/');
        base = base ? base + 1 : path;
        char dir[4096];
        dir_of(path, dir, sizeof(dir));
        struct stat sb;
        int w = snprintf(of->tmp_path, sizeof(of->tmp_path), "%s/.%s.%ld.partial", dir, base,
                         (long)getpid());
        if (w < 0 || (size_t)w >= sizeof(of->tmp_path))
            st = SL_ERR(ctx, SL_EUSAGE, "%s: path too long", path);
        else if (stat(dir, &sb) != 0 || !S_ISDIR(sb.st_mode))
            st = SL_ERR(ctx, SL_ECANTCREAT, "%s: directory %s does not exist", path, dir);
        else if (access(dir, W_OK) != 0)
            st = SL_ERR(ctx, SL_ECANTCREAT, "%s: directory %s is not writable", path, dir);
        else if (stat(path, &sb) == 0 && S_ISDIR(sb.st_mode))
            st = SL_ERR(ctx, SL_ECANTCREAT, "%s: is a directory", path);
    }
    st = sl_agree(ctx, st);
    if (st != SL_OK) return st;
    MPI_Bcast(of->final_path, (int)sizeof(of->final_path), MPI_CHAR, 0, ctx->comm);
    MPI_Bcast(of->tmp_path, (int)sizeof(of->tmp_path), MPI_CHAR, 0, ctx->comm);
    return SL_OK;
}

sl_status sl_outfile_reserve(sl_ctx *ctx, sl_outfile *of, double bytes)
{
    sl_status st = SL_OK;
    if (ctx->rank == 0) {
        /* HDF5's MPI-IO driver truncates an existing file only when it is not
         * empty: an empty file with blocks reserved past its end keeps them */
        int fd = open(of->tmp_path, O_WRONLY | O_CREAT | O_TRUNC | O_CLOEXEC, 0666);
        if (fd < 0)
            return sl_agree(ctx, SL_ERR(ctx, SL_ECANTCREAT, "%s: cannot create %s: %s", of->final_path, of->tmp_path,
                                        strerror(errno)));
        int e = 0;
        /* test hook: SLUICE_FAULT_STOP=reserve / =write stops the process
         * (SIGSTOP) before / after the reservation, so that a test can fill
         * the disk at that point and let it go on (tests/cli/bad_input_more.sh) */
        const char *stop = getenv("SLUICE_FAULT_STOP");
        if (stop != NULL && strcmp(stop, "reserve") == 0) raise(SIGSTOP);
#ifdef FALLOC_FL_KEEP_SIZE
        if (bytes > 0) {
            off_t len = bytes < 9.2e18 ? (off_t)bytes : (off_t)9200000000000000000LL;
            /* test hook: SLUICE_FAULT_NO_RESERVE=1 behaves as a file system
             * without fallocate (tests/cli/bad_input_more.sh) */
            const char *nr = getenv("SLUICE_FAULT_NO_RESERVE");
            if (nr != NULL && strcmp(nr, "1") == 0)
                e = EOPNOTSUPP;
            else
                while ((e = fallocate(fd, FALLOC_FL_KEEP_SIZE, 0, len) == 0 ? 0 : errno) == EINTR) continue;
        }
#else
        (void)bytes;
        e = EOPNOTSUPP;
#endif
        if (stop != NULL && strcmp(stop, "write") == 0) raise(SIGSTOP);
        if (e == 0)
            of->reserved = 1;
        else if (e == ENOSPC || e == EFBIG || e == EDQUOT)
            st = SL_ERR(ctx, SL_EIO,
                        "%s: not enough free space to reserve %.3f MB for writing it (%s; another program may "
                        "be filling the disk); nothing written",
                        of->final_path, bytes / 1e6, strerror(e));
        else if (e != EOPNOTSUPP && e != ENOSYS && e != EINVAL)
            st = SL_ERR(ctx, SL_EIO, "%s: reserving disk space for %s: %s", of->final_path, of->tmp_path,
                        strerror(e));
        if (close(fd) != 0 && st == SL_OK)
            st = SL_ERR(ctx, SL_EIO, "%s: close failed: %s", of->tmp_path, strerror(errno));
    }
    return sl_agree(ctx, st);
}

sl_status sl_outfile_end(sl_ctx *ctx, sl_outfile *of, sl_status st)
{
    st = sl_agree(ctx, st);
    sl_status fs = SL_OK;
    if (ctx->rank == 0 && of->tmp_path[0] != '\0') {
        if (st == SL_OK) {
            char dir[4096];
            dir_of(of->final_path, dir, sizeof(dir));
            /* give back what the reservation held past the file's end (a
             * truncate to the same size frees it on ext4, xfs and tmpfs) */
            struct stat sb;
            if (of->reserved && stat(of->tmp_path, &sb) == 0 && truncate(of->tmp_path, sb.st_size) != 0)
                fs = SL_ERR(ctx, SL_EIO, "%s: releasing reserved space: %s", of->tmp_path, strerror(errno));
            if (fs == SL_OK) fs = fsync_path(ctx, of->tmp_path, 0);
            if (fs == SL_OK && rename(of->tmp_path, of->final_path) != 0)
                fs = SL_ERR(ctx, SL_ECANTCREAT, "%s: cannot rename into place: %s",
                            of->final_path, strerror(errno));
            if (fs == SL_OK) fs = fsync_path(ctx, dir, 1);
            if (fs != SL_OK) unlink(of->tmp_path);
        } else {
            unlink(of->tmp_path);
        }
    }
    if (st == SL_OK) st = sl_agree(ctx, fs);
    of->tmp_path[0] = '\0';
    return st;
}
