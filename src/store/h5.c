/* h5.c - checked parallel HDF5 adapters. */
#define _GNU_SOURCE /* memfd_create */
#include "store/h5.h"

#include <dirent.h>
#include <limits.h>
#include <stdlib.h>
#include <sys/mman.h>

#include <errno.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/statvfs.h>
#include <unistd.h>

sl_status sl_h5_open(sl_ctx *ctx, const char *path, int writable, hid_t *file)
{
    *file = H5I_INVALID_HID;
    sl_status st = SL_OK;
    if (ctx->rank == 0) {
        struct stat sb;
        if (stat(path, &sb) != 0)
            st = SL_ERR(ctx, SL_ENOINPUT, "%s: %s", path, strerror(errno));
        else if (S_ISDIR(sb.st_mode))
            st = SL_ERR(ctx, SL_ENOINPUT, "%s: is a directory", path);
        else if (access(path, R_OK) != 0)
            st = SL_ERR(ctx, SL_ENOINPUT, "%s: not readable: %s", path, strerror(errno));
    }
    st = sl_agree(ctx, st);
    if (st != SL_OK) return st;
    H5Eset_auto2(H5E_DEFAULT, NULL, NULL);
    hid_t fapl = H5Pcreate(H5P_FILE_ACCESS);
    if (fapl < 0 || H5Pset_fapl_mpio(fapl, ctx->comm, MPI_INFO_NULL) < 0)
        st = SL_ERR(ctx, SL_EINTERNAL, "%s: cannot set up parallel HDF5 access", path);
    if (st == SL_OK) {
        *file = H5Fopen(path, writable ? H5F_ACC_RDWR : H5F_ACC_RDONLY, fapl);
        if (*file < 0)
            st = SL_ERR(ctx, SL_EDATA, "%s: not an HDF5 file, or truncated or corrupted", path);
    }
    if (fapl >= 0) H5Pclose(fapl);
    return sl_agree(ctx, st);
}

sl_status sl_h5_create(sl_ctx *ctx, const char *path, hid_t *file)
{
    *file = H5I_INVALID_HID;
    sl_status st = SL_OK;
    H5Eset_auto2(H5E_DEFAULT, NULL, NULL);
    hid_t fapl = H5Pcreate(H5P_FILE_ACCESS);
    /* metadata written collectively: with the default (distributed) writes,
     * HDF5 1.10.8 under OpenMPI 4.1.4 failed a metadata flush of the chunk
     * index (pwritev: Bad address) while writing the 10^7-state model a
     * block at a time (bench/README.md, big10m.sh) */
    if (fapl < 0 || H5Pset_fapl_mpio(fapl, ctx->comm, MPI_INFO_NULL) < 0 ||
        H5Pset_libver_bounds(fapl, H5F_LIBVER_V18, H5F_LIBVER_V110) < 0 || H5Pset_coll_metadata_write(fapl, 1) < 0)
        st = SL_ERR(ctx, SL_EINTERNAL, "%s: cannot set up parallel HDF5 access", path);
    if (st == SL_OK) {
        *file = H5Fcreate(path, H5F_ACC_TRUNC, H5P_DEFAULT, fapl);
        if (*file < 0) st = SL_ERR(ctx, SL_ECANTCREAT, "%s: cannot create HDF5 file", path);
    }
    if (fapl >= 0) H5Pclose(fapl);
    return sl_agree(ctx, st);
}

sl_status sl_h5_close(sl_ctx *ctx, hid_t *file, const char *path)
{
    sl_status st = SL_OK;
    if (*file < 0) return SL_OK;
    if (H5Fflush(*file, H5F_SCOPE_GLOBAL) < 0)
        st = SL_ERR(ctx, SL_EIO, "%s: writing the file failed (disk full or an I/O error?); nothing written", path);
    /* a failed flush leaves the file open for sl_h5_discard: H5Fclose would
     * flush again, fail, and leave a half-destroyed file that HDF5 1.10
     * closes a second time at exit (segfault in H5F__close_cb) */
    SL_TRY(sl_agree(ctx, st));
    if (H5Fclose(*file) < 0) st = SL_ERR(ctx, SL_EIO, "%s: closing the file failed (disk full?)", path);
    *file = H5I_INVALID_HID;
cleanup:
    return st;
}

/* Point every descriptor this process holds on `path` at an anonymous
 * in-memory file (Linux memfd), so that whatever is still written to it
 * succeeds and goes nowhere. Best effort: without /proc or memfd nothing
 * changes. */
static void divert_to_memory(const char *path)
{
    char want[PATH_MAX], link[64], got[PATH_MAX];
    if (realpath(path, want) == NULL) return;
    DIR *d = opendir("/proc/self/fd");
    if (d == NULL) return;
    int mfd = memfd_create("sluice-discarded-output", MFD_CLOEXEC);
    struct dirent *e;
    while (mfd >= 0 && (e = readdir(d)) != NULL) {
        char *end;
        long n = strtol(e->d_name, &end, 10);
        if (end == e->d_name || *end != '\0' || n == dirfd(d) || n == mfd) continue;
        snprintf(link, sizeof(link), "/proc/self/fd/%ld", n);
        ssize_t k = readlink(link, got, sizeof(got) - 1);
        if (k <= 0) continue;
        got[k] = '\0';
        if (strcmp(got, want) == 0 && dup2(mfd, (int)n) < 0) continue; /* left as it was */
    }
    if (mfd >= 0) close(mfd);
    closedir(d);
}

void sl_h5_discard(sl_ctx *ctx, hid_t *file, const char *tmp_path)
{
    if (*file < 0) return;
    /* The content is thrown away, but H5Fclose still flushes HDF5's cached
     * metadata. On a disk that is full (or failing) that flush fails, and
     * HDF5 1.10 then leaves a half-destroyed file object behind that it
     * closes again in MPI_Finalize: a segfault in H5F__close_cb (exit 139)
     * after the error was reported. So the flush is sent to memory: each
     * rank diverts its own descriptors of the temporary, which is removed
     * afterwards anyway (sl_outfile_end). */
    divert_to_memory(tmp_path);
    MPI_Barrier(ctx->comm);
    H5Fclose(*file);
    *file = H5I_INVALID_HID;
}

hid_t sl_h5_str_type(size_t n)
{
    hid_t t = H5Tcopy(H5T_C_S1);
    if (t < 0) return t;
    if (H5Tset_size(t, n) < 0 || H5Tset_strpad(t, H5T_STR_NULLTERM) < 0) {
        H5Tclose(t);
        return H5I_INVALID_HID;
    }
    return t;
}

static sl_status attr_write(sl_ctx *ctx, hid_t obj, const char *name, hid_t ftype,
                            hid_t mtype, const void *v, const char *path)
{
    sl_status st = SL_OK;
    hid_t space = H5Screate(H5S_SCALAR), attr = H5I_INVALID_HID;
    if (space < 0) return SL_ERR(ctx, SL_EINTERNAL, "%s: H5Screate failed", path);
    if (H5Aexists(obj, name) > 0) H5Adelete(obj, name);
    attr = H5Acreate2(obj, name, ftype, space, H5P_DEFAULT, H5P_DEFAULT);
    if (attr < 0 || H5Awrite(attr, mtype, v) < 0)
        st = SL_ERR(ctx, SL_EIO, "%s: cannot write attribute %s", path, name);
    if (attr >= 0) H5Aclose(attr);
    H5Sclose(space);
    return st;
}

sl_status sl_h5_attr_write_i64(sl_ctx *ctx, hid_t obj, const char *name, int64_t v, const char *path)
{
    return attr_write(ctx, obj, name, H5T_STD_I64LE, H5T_NATIVE_INT64, &v, path);
}

sl_status sl_h5_attr_write_f64(sl_ctx *ctx, hid_t obj, const char *name, double v, const char *path)
{
    return attr_write(ctx, obj, name, H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, &v, path);
}

sl_status sl_h5_attr_write_str(sl_ctx *ctx, hid_t obj, const char *name, const char *v, const char *path)
{
    size_t n = strlen(v) + 1;
    hid_t t = sl_h5_str_type(n);
    if (t < 0) return SL_ERR(ctx, SL_EINTERNAL, "%s: cannot make string type", path);
    sl_status st = attr_write(ctx, obj, name, t, t, v, path);
    H5Tclose(t);
    return st;
}

static sl_status attr_open(sl_ctx *ctx, hid_t obj, const char *name, int required,
                           const char *path, hid_t *attr)
{
    *attr = H5I_INVALID_HID;
    htri_t ex = H5Aexists(obj, name);
    if (ex <= 0) {
        if (!required) return SL_OK;
        return SL_ERR(ctx, SL_EDATA, "%s: attribute /%s is missing", path, name);
    }
    *attr = H5Aopen(obj, name, H5P_DEFAULT);
    if (*attr < 0) return SL_ERR(ctx, SL_EDATA, "%s: cannot open attribute /%s", path, name);
    return SL_OK;
}

sl_status sl_h5_attr_read_i64(sl_ctx *ctx, hid_t obj, const char *name, int64_t *v, int required,
                              const char *path)
{
    hid_t a;
    sl_status st = attr_open(ctx, obj, name, required, path, &a);
    if (st != SL_OK || a < 0) return st;
    hid_t t = H5Aget_type(a);
    if (t < 0 || H5Tget_class(t) != H5T_INTEGER || H5Aread(a, H5T_NATIVE_INT64, v) < 0)
        st = SL_ERR(ctx, SL_EDATA, "%s: attribute /%s is not an integer", path, name);
    if (t >= 0) H5Tclose(t);
    H5Aclose(a);
    return st;
}

sl_status sl_h5_attr_read_f64(sl_ctx *ctx, hid_t obj, const char *name, double *v, int required,
                              const char *path)
{
    hid_t a;
    sl_status st = attr_open(ctx, obj, name, required, path, &a);
    if (st != SL_OK || a < 0) return st;
    hid_t t = H5Aget_type(a);
    H5T_class_t c = t >= 0 ? H5Tget_class(t) : H5T_NO_CLASS;
    if ((c != H5T_FLOAT && c != H5T_INTEGER) || H5Aread(a, H5T_NATIVE_DOUBLE, v) < 0)
        st = SL_ERR(ctx, SL_EDATA, "%s: attribute /%s is not a number", path, name);
    if (t >= 0) H5Tclose(t);
    H5Aclose(a);
    return st;
}

sl_status sl_h5_attr_read_str(sl_ctx *ctx, hid_t obj, const char *name, char *v, size_t n,
                              int required, const char *path)
{
    hid_t a;
    sl_status st = attr_open(ctx, obj, name, required, path, &a);
    if (st != SL_OK || a < 0) return st;
    hid_t t = H5Aget_type(a), mt = H5I_INVALID_HID;
    if (t < 0 || H5Tget_class(t) != H5T_STRING) {
        st = SL_ERR(ctx, SL_EDATA, "%s: attribute /%s is not a string", path, name);
    } else if (H5Tis_variable_str(t) > 0) {
        char *s = NULL;
        mt = H5Tcopy(H5T_C_S1);
        H5Tset_size(mt, H5T_VARIABLE);
        if (H5Aread(a, mt, &s) < 0 || s == NULL) {
            st = SL_ERR(ctx, SL_EDATA, "%s: cannot read attribute /%s", path, name);
        } else {
            snprintf(v, n, "%s", s);
            H5free_memory(s);
        }
    } else {
        size_t sz = H5Tget_size(t);
        char *buf = sl_malloc(ctx, sz + 1, 1, "attribute");
        if (buf == NULL) {
            st = SL_ENOMEM;
        } else {
            mt = sl_h5_str_type(sz + 1);
            if (mt < 0 || H5Aread(a, mt, buf) < 0)
                st = SL_ERR(ctx, SL_EDATA, "%s: cannot read attribute /%s", path, name);
            else {
                buf[sz] = '\0';
                snprintf(v, n, "%s", buf);
            }
            free(buf);
        }
    }
    if (mt >= 0) H5Tclose(mt);
    if (t >= 0) H5Tclose(t);
    H5Aclose(a);
    return st;
}

int sl_h5_exists(hid_t file, const char *name)
{
    /* check each path component so intermediate groups may be missing */
    char buf[256];
    size_t n = strlen(name);
    if (n >= sizeof(buf)) return 0;
    memcpy(buf, name, n + 1);
    for (size_t i = 1; i <= n; i++) {
        if (buf[i] == '/' || buf[i] == '\0') {
            char c = buf[i];
            buf[i] = '\0';
            if (H5Lexists(file, buf, H5P_DEFAULT) <= 0) return 0;
            buf[i] = c;
        }
    }
    return 1;
}

sl_status sl_h5_group(sl_ctx *ctx, hid_t file, const char *name, hid_t *group, const char *path)
{
    if (sl_h5_exists(file, name))
        *group = H5Gopen2(file, name, H5P_DEFAULT);
    else
        *group = H5Gcreate2(file, name, H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT);
    if (*group < 0) return SL_ERR(ctx, SL_EIO, "%s: cannot create group %s", path, name);
    return SL_OK;
}

static sl_status ensure_parent(sl_ctx *ctx, hid_t file, const char *name, const char *path)
{
    const char *slash = strrchr(name, '/');
    if (slash == NULL || slash == name) return SL_OK;
    char parent[256];
    snprintf(parent, sizeof(parent), "%.*s", (int)(slash - name), name);
    if (sl_h5_exists(file, parent)) return SL_OK;
    sl_status st = ensure_parent(ctx, file, parent, path); /* grandparents first */
    if (st != SL_OK) return st;
    hid_t g;
    st = sl_h5_group(ctx, file, parent, &g, path);
    if (st == SL_OK) H5Gclose(g);
    return st;
}

sl_status sl_h5_create_1d(sl_ctx *ctx, hid_t file, const char *name, hid_t ftype, int64_t total, int compress,
                          const char *path, hid_t *dset)
{
    *dset = H5I_INVALID_HID;
    sl_status st = ensure_parent(ctx, file, name, path);
    if (st != SL_OK) return st;
    hsize_t dims = (hsize_t)total, chunk = (hsize_t)total < SL_H5_CHUNK ? (hsize_t)total : SL_H5_CHUNK;
    if (chunk == 0) chunk = 1;
    hid_t fspace = H5Screate_simple(1, &dims, NULL);
    hid_t dcpl = H5Pcreate(H5P_DATASET_CREATE);
    if (fspace < 0 || dcpl < 0)
        st = SL_ERR(ctx, SL_EINTERNAL, "%s: HDF5 property setup failed for %s", path, name);
    if (st == SL_OK && total > 0) {
        if (H5Pset_chunk(dcpl, 1, &chunk) < 0 ||
            (compress && (H5Pset_shuffle(dcpl) < 0 || H5Pset_deflate(dcpl, 1) < 0)))
            st = SL_ERR(ctx, SL_EINTERNAL, "%s: cannot set compression for %s", path, name);
        H5Pset_fill_time(dcpl, H5D_FILL_TIME_NEVER);
    }
    if (st == SL_OK) {
        *dset = H5Dcreate2(file, name, ftype, fspace, H5P_DEFAULT, dcpl, H5P_DEFAULT);
        if (*dset < 0) st = SL_ERR(ctx, SL_EIO, "%s: cannot create dataset %s (disk full or an I/O error?); nothing written", path, name);
    }
    if (dcpl >= 0) H5Pclose(dcpl);
    if (fspace >= 0) H5Sclose(fspace);
    return st;
}

sl_status sl_h5_write_at(sl_ctx *ctx, hid_t dset, hid_t mtype, int64_t offset, int64_t count, const void *buf,
                         const char *name, const char *path)
{
    sl_status st = SL_OK;
    hsize_t off = (hsize_t)offset, cnt = (hsize_t)count, dummy = 0;
    hid_t fspace = H5Dget_space(dset);
    hid_t dxpl = H5Pcreate(H5P_DATASET_XFER);
    hid_t mspace = H5Screate_simple(1, &cnt, NULL);
    if (fspace < 0 || dxpl < 0 || mspace < 0 || H5Pset_dxpl_mpio(dxpl, H5FD_MPIO_COLLECTIVE) < 0)
        st = SL_ERR(ctx, SL_EINTERNAL, "%s: HDF5 property setup failed for %s", path, name);
    if (st == SL_OK && H5Sget_simple_extent_npoints(fspace) > 0) {
        herr_t e;
        if (count > 0)
            e = H5Sselect_hyperslab(fspace, H5S_SELECT_SET, &off, NULL, &cnt, NULL);
        else
            e = H5Sselect_none(fspace) < 0 || H5Sselect_none(mspace) < 0 ? -1 : 0;
        if (e < 0)
            st = SL_ERR(ctx, SL_EINTERNAL, "%s: selection failed for %s", path, name);
        else if (H5Dwrite(dset, mtype, mspace, fspace, dxpl, count > 0 ? buf : (const void *)&dummy) < 0)
            st = SL_ERR(ctx, SL_EIO, "%s: writing %s failed (disk full or an I/O error?); nothing written", path, name);
    }
    if (mspace >= 0) H5Sclose(mspace);
    if (dxpl >= 0) H5Pclose(dxpl);
    if (fspace >= 0) H5Sclose(fspace);
    return st;
}

sl_status sl_h5_write_1d(sl_ctx *ctx, hid_t file, const char *name, hid_t ftype, hid_t mtype,
                         int64_t total, int64_t offset, int64_t count, const void *buf,
                         int compress, const char *path)
{
    hid_t dset;
    sl_status st = sl_h5_create_1d(ctx, file, name, ftype, total, compress, path, &dset);
    if (st == SL_OK) st = sl_h5_write_at(ctx, dset, mtype, offset, count, buf, name, path);
    if (dset >= 0) H5Dclose(dset);
    return st;
}

int64_t sl_h5_length(hid_t file, const char *name)
{
    if (!sl_h5_exists(file, name)) return -1;
    hid_t d = H5Dopen2(file, name, H5P_DEFAULT);
    if (d < 0) return -1;
    hid_t s = H5Dget_space(d);
    int64_t n = -1;
    if (s >= 0 && H5Sget_simple_extent_ndims(s) == 1) {
        hsize_t dim;
        H5Sget_simple_extent_dims(s, &dim, NULL);
        n = (int64_t)dim;
    }
    if (s >= 0) H5Sclose(s);
    H5Dclose(d);
    return n;
}

void sl_h5_sizes(hid_t file, const char *name, double *stored, double *raw)
{
    *stored = 0;
    *raw = 0;
    if (!sl_h5_exists(file, name)) return;
    hid_t d = H5Dopen2(file, name, H5P_DEFAULT);
    if (d < 0) return;
    hid_t t = H5Dget_type(d), s = H5Dget_space(d);
    if (t >= 0 && s >= 0)
        *raw = (double)H5Tget_size(t) * (double)H5Sget_simple_extent_npoints(s);
    *stored = (double)H5Dget_storage_size(d);
    if (t >= 0) H5Tclose(t);
    if (s >= 0) H5Sclose(s);
    H5Dclose(d);
}

int sl_h5_is_u32(hid_t file, const char *name)
{
    hid_t d = H5Dopen2(file, name, H5P_DEFAULT);
    if (d < 0) return 0;
    hid_t t = H5Dget_type(d);
    int r = t >= 0 && H5Tget_class(t) == H5T_INTEGER && H5Tget_size(t) == 4 &&
            H5Tget_sign(t) == H5T_SGN_NONE;
    if (t >= 0) H5Tclose(t);
    H5Dclose(d);
    return r;
}

sl_status sl_h5_space_check(sl_ctx *ctx, const char *path, double bytes)
{
    sl_status st = SL_OK;
    if (ctx->rank == 0) {
        char dir[4200];
        snprintf(dir, sizeof(dir), "%s", path);
        char *slash = strrchr(dir, '/');
        if (slash == NULL) snprintf(dir, sizeof(dir), ".");
        else if (slash == dir) dir[1] = '\0';
        else *slash = '\0';
        struct statvfs v;
        /* room for the temporary next to the file, plus 1 MiB for HDF5's own metadata */
        double need = bytes + SL_H5_METADATA_ALLOWANCE;
        if (statvfs(dir, &v) == 0 && (double)v.f_bavail * (double)v.f_frsize < need)
            st = SL_ERR(ctx, SL_EIO,
                        "%s: not enough free space in %s: writing needs up to %.3f MB (uncompressed bound), "
                        "%.3f MB free; nothing written",
                        path, dir, need / 1e6, (double)v.f_bavail * (double)v.f_frsize / 1e6);
    }
    return sl_agree(ctx, st);
}

sl_status sl_h5_check_1d(sl_ctx *ctx, hid_t file, const char *name, H5T_class_t cls, int64_t expected,
                         const char *path)
{
    sl_status st = SL_OK;
    if (!sl_h5_exists(file, name)) return SL_ERR(ctx, SL_EDATA, "%s: dataset %s is missing", path, name);
    hid_t d = H5Dopen2(file, name, H5P_DEFAULT);
    hid_t t = d >= 0 ? H5Dget_type(d) : H5I_INVALID_HID, s = d >= 0 ? H5Dget_space(d) : H5I_INVALID_HID;
    if (d < 0 || t < 0 || s < 0) {
        st = SL_ERR(ctx, SL_EDATA, "%s: cannot open dataset %s", path, name);
    } else if (H5Tget_class(t) != cls) {
        st = SL_ERR(ctx, SL_EDATA, "%s: dataset %s holds %s numbers, expected %s", path, name,
                    H5Tget_class(t) == H5T_FLOAT ? "floating-point" : H5Tget_class(t) == H5T_INTEGER ? "integer" : "non-numeric",
                    cls == H5T_FLOAT ? "floating-point" : "integers");
    } else if (H5Sget_simple_extent_ndims(s) != 1) {
        st = SL_ERR(ctx, SL_EDATA, "%s: dataset %s has %d dimensions, expected 1", path, name,
                    H5Sget_simple_extent_ndims(s));
    } else {
        hsize_t dim = 0;
        H5Sget_simple_extent_dims(s, &dim, NULL);
        if ((int64_t)dim != expected)
            st = SL_ERR(ctx, SL_EDATA, "%s: dataset %s has %llu entries, expected %lld (from the size attributes)", path,
                        name, (unsigned long long)dim, (long long)expected);
    }
    if (s >= 0) H5Sclose(s);
    if (t >= 0) H5Tclose(t);
    if (d >= 0) H5Dclose(d);
    return st;
}

sl_status sl_h5_read_1d(sl_ctx *ctx, hid_t file, const char *name, hid_t mtype, int64_t expected,
                        int64_t offset, int64_t count, void *buf, const char *path)
{
    sl_status st = SL_OK;
    if (!sl_h5_exists(file, name))
        return SL_ERR(ctx, SL_EDATA, "%s: dataset %s is missing (not a sluice file?)", path, name);
    hid_t dset = H5Dopen2(file, name, H5P_DEFAULT);
    hid_t fspace = dset >= 0 ? H5Dget_space(dset) : H5I_INVALID_HID;
    hid_t mspace = H5I_INVALID_HID, dxpl = H5Pcreate(H5P_DATASET_XFER);
    if (dset < 0 || fspace < 0 || dxpl < 0)
        st = SL_ERR(ctx, SL_EDATA, "%s: cannot open dataset %s", path, name);
    if (st == SL_OK) {
        hsize_t dim = 0;
        if (H5Sget_simple_extent_ndims(fspace) != 1) {
            st = SL_ERR(ctx, SL_EDATA, "%s: dataset %s is not one-dimensional", path, name);
        } else {
            H5Sget_simple_extent_dims(fspace, &dim, NULL);
            if (expected >= 0 && (int64_t)dim != expected)
                st = SL_ERR(ctx, SL_EDATA, "%s: dataset %s has %llu entries, expected %lld",
                            path, name, (unsigned long long)dim, (long long)expected);
            else if (offset < 0 || count < 0 || (hsize_t)(offset + count) > dim)
                st = SL_ERR(ctx, SL_EDATA, "%s: dataset %s is shorter than its index says",
                            path, name);
        }
    }
    if (st == SL_OK && !sl_h5_read_chunks(ctx, file, dset, mtype, offset, count, buf, name, path, &st)) {
        hsize_t off = (hsize_t)offset, cnt = (hsize_t)count;
        mspace = H5Screate_simple(1, &cnt, NULL);
        herr_t e;
        if (count > 0)
            e = H5Sselect_hyperslab(fspace, H5S_SELECT_SET, &off, NULL, &cnt, NULL);
        else
            e = H5Sselect_none(fspace) < 0 || H5Sselect_none(mspace) < 0 ? -1 : 0;
        if (mspace < 0 || e < 0)
            st = SL_ERR(ctx, SL_EINTERNAL, "%s: selection failed for %s", path, name);
        else if (H5Dread(dset, mtype, mspace, fspace, dxpl, count > 0 ? buf : (void *)&off) < 0)
            st = SL_ERR(ctx, SL_EDATA,
                        "%s: reading %s failed (file truncated or corrupted?)", path, name);
    }
    if (mspace >= 0) H5Sclose(mspace);
    if (dxpl >= 0) H5Pclose(dxpl);
    if (fspace >= 0) H5Sclose(fspace);
    if (dset >= 0) H5Dclose(dset);
    return st;
}
