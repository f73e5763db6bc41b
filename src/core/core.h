/* core.h - internal context, error propagation and small helpers. */
#ifndef SL_CORE_H
#define SL_CORE_H

#include <stdarg.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>

#include "sluice/sluice.h"

#define SL_MSG_MAX 1024

struct sl_ctx {
    MPI_Comm comm;
    int rank, size;
    int verbosity;
    FILE *log;                          /* progress (rank 0 only) */
    int log_tty;                        /* log is a terminal */
    volatile sig_atomic_t *signal_flag; /* may be NULL */
    volatile sig_atomic_t *signal_info; /* [3] signal, monotonic s, us; may be NULL */
    int64_t fault_alloc_at;             /* test hook: this allocation fails (0: none) */
    int64_t alloc_count;                /* checked allocations so far (counted when the hook is set) */
    int h5_direct;                      /* read deflated HDF5 chunks directly (0: through H5Dread only) */
    int64_t h5_chunks_read;             /* chunks read directly so far (for the tests) */
    sl_status err_status;
    char err[SL_MSG_MAX];               /* first error on this rank */
};

/* Record an error on this rank (first one wins until sl_error_clear).
 * Returns `st` so it can be used as `return SL_ERR(ctx, SL_EDATA, ...)`. */
sl_status sl_error_at(sl_ctx *ctx, sl_status st, const char *file, int line,
                      const char *fmt, ...)
    __attribute__((format(printf, 5, 6)));
#define SL_ERR(ctx, st, ...) sl_error_at((ctx), (st), __FILE__, __LINE__, __VA_ARGS__)
void sl_error_clear(sl_ctx *ctx);

/* Propagate: on failure jump to the function's `cleanup:` label with `st`
 * set. Never use across a collective call that other ranks may be in;
 * agree first with sl_agree(). */
#define SL_TRY(expr)                      \
    do {                                  \
        st = (expr);                      \
        if (st != SL_OK) goto cleanup;    \
    } while (0)

/* Fail with a message and jump to cleanup. */
#define SL_FAIL(code, ...)                          \
    do {                                            \
        st = SL_ERR(ctx, (code), __VA_ARGS__);      \
        goto cleanup;                               \
    } while (0)

/* Collective: agree on a status across ranks. The result is the largest
 * status of any rank (SL_OK only if all are OK); the message of the
 * lowest-numbered failing rank is copied to every rank. */
sl_status sl_agree(sl_ctx *ctx, sl_status st);

/* Checked allocation: returns NULL and records SL_ENOMEM on failure. A
 * count of 0 allocates 1 byte so NULL always means failure. */
void *sl_malloc(sl_ctx *ctx, size_t count, size_t size, const char *what);
void *sl_calloc(sl_ctx *ctx, size_t count, size_t size, const char *what);
#define SL_ALLOC(ctx, ptr, count, what) \
    ((ptr) = sl_malloc((ctx), (size_t)(count), sizeof(*(ptr)), (what)))
#define SL_ZALLOC(ctx, ptr, count, what) \
    ((ptr) = sl_calloc((ctx), (size_t)(count), sizeof(*(ptr)), (what)))

/* Progress / log lines on rank 0 (no-op on others or at verbosity 0). */
void sl_log(sl_ctx *ctx, const char *fmt, ...) __attribute__((format(printf, 2, 3)));
/* Warning: always printed on rank 0 (even at verbosity 0), "warning: " prefix. */
void sl_warn(sl_ctx *ctx, const char *fmt, ...) __attribute__((format(printf, 2, 3)));

/* Wall clock in seconds (monotonic). */
double sl_now(void);

/* Total physical memory in bytes (0 if unknown). */
double sl_physical_memory(void);

/* 64-bit mixing (splitmix64 finaliser). */
static inline uint64_t sl_mix64(uint64_t x)
{
    x += 0x9e3779b97f4a7c15ULL;
    x = (x ^ (x >> 30)) * 0xbf58476d1ce4e5b9ULL;
    x = (x ^ (x >> 27)) * 0x94d049bb133111ebULL;
    return x ^ (x >> 31);
}

/* Atomic output files: the final path is only created by a rename after the
 * content is complete. Collective (rank 0 does the file system work). */
typedef struct sl_outfile {
    char final_path[4096];
    char tmp_path[4096];
    int reserved;           /* rank 0: disk space reserved beyond the temporary's end */
} sl_outfile;
sl_status sl_outfile_begin(sl_ctx *ctx, sl_outfile *of, const char *path);
/* Create the (empty) temporary and reserve `bytes` of disk space for it
 * without changing its size (Linux fallocate, FALLOC_FL_KEEP_SIZE), so that
 * another program filling the disk while the file is written cannot make
 * the writes fail. ENOSPC: a clean SL_EIO, nothing written. A file system
 * without fallocate: no reservation, not an error. Collective. */
sl_status sl_outfile_reserve(sl_ctx *ctx, sl_outfile *of, double bytes);
/* Commit if st == SL_OK (fsync file, rename, fsync directory), else remove
 * the temporary. Returns the (possibly new) status, agreed. */
sl_status sl_outfile_end(sl_ctx *ctx, sl_outfile *of, sl_status st);

#endif /* SL_CORE_H */
