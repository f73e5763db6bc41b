/* h5.h - thin checked adapters over parallel HDF5 (internal to src/store). */
#ifndef SL_H5_H
#define SL_H5_H

#include <hdf5.h>

#include "core/core.h"

#define SL_H5_CHUNK ((hsize_t)1 << 16)

/* Open or create a file with the MPI-IO driver on ctx->comm. Collective.
 * open: missing -> SL_ENOINPUT, not HDF5 -> SL_EDATA. */
sl_status sl_h5_open(sl_ctx *ctx, const char *path, int writable, hid_t *file);
sl_status sl_h5_create(sl_ctx *ctx, const char *path, hid_t *file);
/* Flush (collective) and close; records an error if either fails. */
sl_status sl_h5_close(sl_ctx *ctx, hid_t *file, const char *path);
/* Close a file whose content is thrown away (after an error), with its
 * temporary truncated first so the close needs next to no space. Collective. */
void sl_h5_discard(sl_ctx *ctx, hid_t *file, const char *tmp_path);

/* Attributes on the root group or any object (scalars / strings). Writes are
 * collective with identical values on all ranks. */
sl_status sl_h5_attr_write_i64(sl_ctx *ctx, hid_t obj, const char *name, int64_t v, const char *path);
sl_status sl_h5_attr_write_f64(sl_ctx *ctx, hid_t obj, const char *name, double v, const char *path);
sl_status sl_h5_attr_write_str(sl_ctx *ctx, hid_t obj, const char *name, const char *v, const char *path);
/* Reads: `required` = 0 leaves the output untouched if missing and returns OK. */
sl_status sl_h5_attr_read_i64(sl_ctx *ctx, hid_t obj, const char *name, int64_t *v, int required, const char *path);
sl_status sl_h5_attr_read_f64(sl_ctx *ctx, hid_t obj, const char *name, double *v, int required, const char *path);
sl_status sl_h5_attr_read_str(sl_ctx *ctx, hid_t obj, const char *name, char *v, size_t n, int required, const char *path);

/* Create group (and parents); returns a handle to close with H5Gclose. */
sl_status sl_h5_group(sl_ctx *ctx, hid_t file, const char *name, hid_t *group, const char *path);
int sl_h5_exists(hid_t file, const char *name);

/* Collective 1-D write: the dataset `name` of `total` elements of file type
 * `ftype`, this rank writing `count` elements from `buf` (memory type
 * `mtype`) at `offset`. Chunked, shuffle + deflate when `compress`. */
sl_status sl_h5_write_1d(sl_ctx *ctx, hid_t file, const char *name, hid_t ftype, hid_t mtype,
                         int64_t total, int64_t offset, int64_t count, const void *buf,
                         int compress, const char *path);
/* The two halves of sl_h5_write_1d, for datasets written in pieces:
 * create the dataset (*dset to close with H5Dclose; H5I_INVALID_HID on
 * failure), then any number of collective writes of [offset, offset+count)
 * on each rank (count 0: this rank writes nothing). `name` is for messages. */
sl_status sl_h5_create_1d(sl_ctx *ctx, hid_t file, const char *name, hid_t ftype, int64_t total, int compress,
                          const char *path, hid_t *dset);
sl_status sl_h5_write_at(sl_ctx *ctx, hid_t dset, hid_t mtype, int64_t offset, int64_t count, const void *buf,
                         const char *name, const char *path);
/* Collective 1-D read of [offset, offset+count) into buf (memory type mtype).
 * *total receives the dataset length if not NULL; expected >= 0 checks it. */
/* Before writing PATH: fail (74, nothing written) if its directory has less
 * free space than BYTES plus 1 MiB. HDF5 1.10 cannot recover from a write
 * that fills the disk (it crashes at exit), so a file that cannot fit is
 * refused up front; a disk filled by someone else meanwhile is not caught.
 * Collective (rank 0 looks). */
/* room HDF5's own metadata may take beyond the data (1 MiB) */
#define SL_H5_METADATA_ALLOWANCE 1048576.0
sl_status sl_h5_space_check(sl_ctx *ctx, const char *path, double bytes);
/* A 1-D dataset NAME of type class CLS with EXPECTED entries, or an error
 * naming the dataset (missing, wrong class, not 1-D, wrong length). */
sl_status sl_h5_check_1d(sl_ctx *ctx, hid_t file, const char *name, H5T_class_t cls, int64_t expected,
                         const char *path);
sl_status sl_h5_read_1d(sl_ctx *ctx, hid_t file, const char *name, hid_t mtype, int64_t expected,
                        int64_t offset, int64_t count, void *buf, const char *path);
/* The read of sl_h5_read_1d by the dataset's stored chunks (h5_chunks.c):
 * returns 0, having read nothing, if the dataset is not one this reader
 * handles (the caller then uses H5Dread); else 1 with *st the outcome
 * (SL_EDATA naming the file, dataset and chunk if a chunk is corrupt).
 * Local. */
int sl_h5_read_chunks(sl_ctx *ctx, hid_t file, hid_t dset, hid_t mtype, int64_t offset, int64_t count, void *buf,
                      const char *name, const char *path, sl_status *st);
/* The most bytes zlib's deflate (HDF5's deflate filter) can make of N bytes:
 * a larger stored chunk is refused before anything that large is read. */
size_t sl_zlib_bound(size_t n);
/* Length of a 1-D dataset (-1 if missing). Local. */
int64_t sl_h5_length(hid_t file, const char *name);
/* Storage and raw sizes of a dataset in bytes. Local. */
void sl_h5_sizes(hid_t file, const char *name, double *stored, double *raw);
/* Is the on-disk integer type of `name` 32-bit unsigned? Local. */
int sl_h5_is_u32(hid_t file, const char *name);

/* The residual history as a table of 1-D columns, so every file kind that
 * stores it writes and reads the same datasets. */
#define SL_HISTORY_COLUMNS 7
typedef struct sl_history_column {
    const char *name;   /* dataset path, e.g. "/history/sup" */
    hid_t ftype, mtype; /* file and memory types */
    void *data;         /* the history's array */
} sl_history_column;
struct sl_history;
void sl_history_columns(const struct sl_history *h, sl_history_column cols[SL_HISTORY_COLUMNS]);
/* Read the /history datasets of an open file into h (empty if absent). Local. */
sl_status sl_history_read(sl_ctx *ctx, hid_t f, struct sl_history *h, const char *path);

/* Fixed-length string type of n bytes (close with H5Tclose). */
hid_t sl_h5_str_type(size_t n);

#endif /* SL_H5_H */
