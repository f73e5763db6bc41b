/* h5_chunks.c - reading a 1-D dataset's stored chunks directly.
 *
 * H5Dread of a shuffled and deflated dataset inflates each chunk into a
 * buffer of HDF5's chunk cache, unshuffles it there and copies the wanted
 * part out. Here each chunk the range touches is read as stored (its address
 * and size from the chunk index), inflated by libdeflate in one call (the
 * zlib format of RFC 1950 that HDF5's deflate filter writes: its header and
 * its adler32 checksum are checked here, as zlib does for HDF5's own reads)
 * and unshuffled straight into the caller's array: one pass less over the
 * data, and no chunk cache. libdeflate rather than zlib's streaming inflate:
 * it takes a whole chunk at once and its adler32 is vectorised (zlib was
 * about a third of a solve's start-up CPU, its adler32 alone a tenth;
 * bench/README.md, fifth pass).
 *
 * Only what sl_h5_create_1d writes is read this way: chunked layout, no
 * filters or deflate alone or shuffle then deflate, a file type equal to
 * the memory type (no conversion), every chunk stored with all its filters
 * applied, no user block, the MPI-IO driver. Anything else falls back to
 * H5Dread, which is also the reference this reader is tested against
 * (tests/unit/test_chunk_read.c; SLUICE_DIRECT_CHUNKS=0 forces it).
 *
 * The raw bytes are read with MPI_File_read_at on the handle HDF5 holds
 * open: the HDF5 1.10 reference says H5Dread_chunk is "currently not
 * supported with parallel HDF5" (H5Dpublic.h, 1.10.8). Reads are
 * independent, like the H5Dread they replace: each rank reads the chunks of
 * its own range. */
#include "store/h5.h"

#include <limits.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>
#include <libdeflate.h>

typedef struct chunk_plan {
    size_t esize;  /* bytes per element */
    hsize_t ce;    /* elements per chunk */
    int shuffle;   /* shuffle filter first */
    int deflate;   /* deflate filter */
    MPI_File fh;   /* HDF5's open file */
} chunk_plan;

size_t sl_zlib_bound(size_t n)
{
    /* zlib 1.2.13 compress.c, compressBound() */
    return n + (n >> 12) + (n >> 14) + (n >> 25) + 13;
}

/* A stored chunk IN of N bytes in the zlib format (RFC 1950: a 2-byte
 * header, a raw deflate stream, the adler32 of the plain bytes big-endian)
 * inflated into OUT, which takes exactly CBYTES. NULL if it held exactly a
 * chunk and the checksum matches, else what is wrong with it. */
static const char *inflate_chunk(struct libdeflate_decompressor *d, const unsigned char *in, size_t n,
                                 unsigned char *out, size_t cbytes)
{
    if (n < 6) return "truncated";
    /* CM 8 (deflate), a window of at most 32 KB, no preset dictionary, and
     * the two bytes a multiple of 31 */
    if ((in[0] & 0x0f) != 8 || (in[0] >> 4) > 7 || (in[1] & 0x20) != 0 || (((unsigned)in[0] << 8) | in[1]) % 31 != 0)
        return "not a zlib stream";
    size_t used = 0, got = 0;
    switch (libdeflate_deflate_decompress_ex(d, in + 2, n - 2, out, cbytes, &used, &got)) {
    case LIBDEFLATE_SUCCESS: break;
    case LIBDEFLATE_INSUFFICIENT_SPACE: return "inflates to more than a chunk";
    default: return "invalid or truncated deflate data";
    }
    if (got != cbytes) return "inflates to less than a chunk";
    if (n - 2 - used < 4) return "truncated before its checksum";
    const unsigned char *t = in + 2 + used;
    const uint32_t want = (uint32_t)t[0] << 24 | (uint32_t)t[1] << 16 | (uint32_t)t[2] << 8 | (uint32_t)t[3];
    if (libdeflate_adler32(1, out, cbytes) != want) return "adler32 checksum does not match";
    return NULL;
}

/* 1 if the chunks of dset can be read directly into memory of type mtype. */
static int plan_of(hid_t file, hid_t dset, hid_t mtype, chunk_plan *p)
{
    int ok = 0;
    hid_t dcpl = H5Dget_create_plist(dset), ftype = H5Dget_type(dset);
    hid_t fcpl = H5Fget_create_plist(file);
    hsize_t ub = 1;
    hbool_t atomic = 0;
    void *handle = NULL;
    memset(p, 0, sizeof(*p));
    if (dcpl < 0 || ftype < 0 || fcpl < 0) goto cleanup;
    /* chunk addresses are relative to the superblock, which a user block moves */
    if (H5Pget_userblock(fcpl, &ub) < 0 || ub != 0) goto cleanup;
    /* the MPI-IO driver: H5Fget_mpi_atomicity fails for any other (HDF5
     * 1.10 H5Fmpi.c) and is local, unlike H5Fget_access_plist, which
     * duplicates the file's communicator (collective: a rank reading
     * alone hung there on 3 ranks) */
    if (H5Fget_mpi_atomicity(file, &atomic) < 0) goto cleanup;
    if (H5Pget_layout(dcpl) != H5D_CHUNKED || H5Pget_chunk(dcpl, 1, &p->ce) != 1 || p->ce == 0) goto cleanup;
    if (H5Tequal(ftype, mtype) <= 0) goto cleanup;
    p->esize = H5Tget_size(ftype);
    if ((p->esize != 4 && p->esize != 8) || p->ce > (hsize_t)(INT_MAX / 8)) goto cleanup;
    int nf = H5Pget_nfilters(dcpl);
    if (nf < 0 || nf > 2) goto cleanup;
    for (int i = 0; i < nf; i++) {
        unsigned flags = 0, cd[8] = {0}, config = 0;
        size_t ncd = sizeof(cd) / sizeof(cd[0]);
        char fname[64];
        H5Z_filter_t id = H5Pget_filter2(dcpl, (unsigned)i, &flags, &ncd, cd, sizeof(fname), fname, &config);
        if (id == H5Z_FILTER_SHUFFLE && i == 0 && ncd >= 1 && cd[0] == p->esize)
            p->shuffle = 1;
        else if (id == H5Z_FILTER_DEFLATE && i == nf - 1)
            p->deflate = 1;
        else
            goto cleanup;
    }
    if (H5Fget_vfd_handle(file, H5P_DEFAULT, &handle) < 0 || handle == NULL) goto cleanup;
    p->fh = *(MPI_File *)handle;
    ok = 1;
cleanup:
    if (fcpl >= 0) H5Pclose(fcpl);
    if (ftype >= 0) H5Tclose(ftype);
    if (dcpl >= 0) H5Pclose(dcpl);
    return ok;
}

/* Elements [e0, e1) of a shuffled chunk of ce elements of K bytes: byte b of
 * element e is src[b * ce + e] (the shuffle filter's layout). */
static inline void unshuffle_k(unsigned char *restrict dst, const unsigned char *restrict src, size_t ce,
                               const size_t k, size_t e0, size_t e1)
{
    for (size_t e = e0; e < e1; e++) {
        unsigned char v[8];
        for (size_t b = 0; b < k; b++) v[b] = src[b * ce + e];
        memcpy(dst + (e - e0) * k, v, k);
    }
}

static int little_endian(void)
{
    const uint16_t one = 1;
    unsigned char c;
    memcpy(&c, &one, 1);
    return c == 1;
}

/* Eight elements at a time: one 64-bit word from each byte plane (byte j
 * of word b is byte b of element e + j on a little-endian machine), then
 * the 8x8 (or 4x8) byte matrix transposed in registers by three (two)
 * rounds of masked swaps: 1-byte, 2-byte, 4-byte blocks between word
 * pairs. Elements before the first multiple of eight from e0 and after the
 * last go through unshuffle_k. */
#define SWAP_BLOCKS(a, b, shift, mask)                      \
    do {                                                    \
        uint64_t t_ = (((a) >> (shift)) ^ (b)) & (mask);    \
        (b) ^= t_;                                          \
        (a) ^= t_ << (shift);                               \
    } while (0)

static void unshuffle8x8(unsigned char *restrict dst, const unsigned char *restrict src, size_t ce, size_t e)
{
    uint64_t r[8];
    for (int b = 0; b < 8; b++) memcpy(&r[b], src + (size_t)b * ce + e, 8);
    for (int b = 0; b < 8; b += 2) SWAP_BLOCKS(r[b], r[b + 1], 8, 0x00FF00FF00FF00FFull);
    for (int b = 0; b < 8; b += 4) {
        SWAP_BLOCKS(r[b], r[b + 2], 16, 0x0000FFFF0000FFFFull);
        SWAP_BLOCKS(r[b + 1], r[b + 3], 16, 0x0000FFFF0000FFFFull);
    }
    for (int b = 0; b < 4; b++) SWAP_BLOCKS(r[b], r[b + 4], 32, 0x00000000FFFFFFFFull);
    /* word by word: one 64-byte copy went through the stack (store
     * forwarding failed: 8-byte stores read back as 16-byte loads) */
    for (int j = 0; j < 8; j++) memcpy(dst + 8 * j, &r[j], 8);
}

static void unshuffle4x8(unsigned char *restrict dst, const unsigned char *restrict src, size_t ce, size_t e)
{
    uint64_t r[4];
    for (int b = 0; b < 4; b++) memcpy(&r[b], src + (size_t)b * ce + e, 8);
    SWAP_BLOCKS(r[0], r[1], 8, 0x00FF00FF00FF00FFull);
    SWAP_BLOCKS(r[2], r[3], 8, 0x00FF00FF00FF00FFull);
    SWAP_BLOCKS(r[0], r[2], 16, 0x0000FFFF0000FFFFull);
    SWAP_BLOCKS(r[1], r[3], 16, 0x0000FFFF0000FFFFull);
    /* word j holds element j in its low half and element j + 4 in its high half */
    for (int j = 0; j < 4; j++) {
        uint32_t lo = (uint32_t)r[j], hi = (uint32_t)(r[j] >> 32);
        memcpy(dst + 4 * j, &lo, 4);
        memcpy(dst + 4 * (j + 4), &hi, 4);
    }
}

static void unshuffle(unsigned char *dst, const unsigned char *src, size_t ce, size_t esize, size_t e0, size_t e1)
{
    size_t a = e1, z = e1; /* elsewhere all by the byte loop */
    if (little_endian()) {
        a = (e0 + 7) / 8 * 8;
        if (a > e1) a = e1;
        z = a + (e1 - a) / 8 * 8;
        for (size_t e = a; e < z; e += 8) {
            if (esize == 8)
                unshuffle8x8(dst + (e - e0) * 8, src, ce, e);
            else
                unshuffle4x8(dst + (e - e0) * 4, src, ce, e);
        }
    }
    /* the elements the blocks did not cover: [e0, a) and [z, e1) */
    if (esize == 8) {
        unshuffle_k(dst, src, ce, 8, e0, a);
        unshuffle_k(dst + (z - e0) * 8, src, ce, 8, z, e1);
    } else {
        unshuffle_k(dst, src, ce, 4, e0, a);
        unshuffle_k(dst + (z - e0) * 4, src, ce, 4, z, e1);
    }
}

int sl_h5_read_chunks(sl_ctx *ctx, hid_t file, hid_t dset, hid_t mtype, int64_t offset, int64_t count, void *buf,
                      const char *name, const char *path, sl_status *out)
{
    sl_status st = SL_OK;
    chunk_plan p;
    int done = 0;
    struct chunk_loc {
        haddr_t addr; /* in the file */
        hsize_t size; /* stored bytes */
    } *loc = NULL;
    unsigned char *raw = NULL, *plain = NULL; /* one allocation: raw, then plain */
    struct libdeflate_decompressor *dec = NULL;
    if (!ctx->h5_direct || count <= 0 || !plan_of(file, dset, mtype, &p)) return 0;
    const int64_t ce = (int64_t)p.ce, c0 = offset / ce, c1 = (offset + count - 1) / ce, nc = c1 - c0 + 1;
    const size_t cbytes = (size_t)ce * p.esize;
    hsize_t maxsize = 0;
    if (SL_ALLOC(ctx, loc, nc, "chunk index") == NULL) {
        st = SL_ENOMEM;
        done = 1;
        goto cleanup;
    }
    /* every chunk stored, all filters applied; else H5Dread (fill values) */
    for (int64_t i = 0; i < nc; i++) {
        hsize_t at = (hsize_t)((c0 + i) * ce);
        unsigned mask = 0;
        if (H5Dget_chunk_info_by_coord(dset, &at, &mask, &loc[i].addr, &loc[i].size) < 0 || loc[i].size == 0 ||
            mask != 0 || loc[i].size > (hsize_t)INT_MAX || loc[i].addr == HADDR_UNDEF)
            goto cleanup;
        if (loc[i].size > maxsize) maxsize = loc[i].size;
    }
    done = 1;
    /* a stored size no chunk can have (a damaged index): refused before
     * anything that large is allocated or read */
    if (maxsize > (p.deflate ? (hsize_t)sl_zlib_bound(cbytes) : (hsize_t)cbytes)) {
        st = SL_ERR(ctx, SL_EDATA, "%s: dataset %s: a stored chunk of %llu bytes, more than a chunk of %zu bytes can take",
                    path, name, (unsigned long long)maxsize, cbytes);
        goto cleanup;
    }
    if (SL_ALLOC(ctx, raw, (size_t)maxsize + cbytes, "chunk buffers") == NULL) {
        st = SL_ENOMEM;
        goto cleanup;
    }
    plain = raw + maxsize;
    if (p.deflate && (dec = libdeflate_alloc_decompressor()) == NULL) {
        st = SL_ERR(ctx, SL_ENOMEM, "%s: dataset %s: out of memory setting up the decompressor", path, name);
        goto cleanup;
    }
    for (int64_t i = 0; i < nc; i++) {
        const int64_t first = (c0 + i) * ce; /* the chunk's first element */
        const int64_t lo = first > offset ? first : offset;
        const int64_t hi = first + ce < offset + count ? first + ce : offset + count;
        unsigned char *dst = (unsigned char *)buf + (size_t)(lo - offset) * p.esize;
        const int whole = lo == first && hi == first + ce;
        MPI_Status ms;
        int got = -1;
        const hsize_t stored = loc[i].size;
        if (MPI_File_read_at(p.fh, (MPI_Offset)loc[i].addr, raw, (int)stored, MPI_BYTE, &ms) != MPI_SUCCESS ||
            MPI_Get_count(&ms, MPI_BYTE, &got) != MPI_SUCCESS || got != (int)stored) {
            st = SL_ERR(ctx, SL_EDATA, "%s: dataset %s: cannot read the chunk of elements %lld..%lld (file truncated?)",
                        path, name, (long long)first, (long long)(first + ce - 1));
            goto cleanup;
        }
        if (!p.deflate && stored != cbytes) {
            st = SL_ERR(ctx, SL_EDATA, "%s: dataset %s: the chunk of elements %lld..%lld holds %llu bytes, expected %zu",
                        path, name, (long long)first, (long long)(first + ce - 1), (unsigned long long)stored, cbytes);
            goto cleanup;
        }
        /* the chunk's plain bytes, straight into place when nothing follows */
        unsigned char *plainp = raw;
        if (p.deflate) {
            plainp = whole && !p.shuffle ? dst : plain;
            const char *bad = inflate_chunk(dec, raw, (size_t)stored, plainp, cbytes);
            if (bad != NULL) {
                st = SL_ERR(ctx, SL_EDATA,
                            "%s: dataset %s: the compressed chunk of elements %lld..%lld is corrupted (%s)", path,
                            name, (long long)first, (long long)(first + ce - 1), bad);
                goto cleanup;
            }
        }
        ctx->h5_chunks_read++;
        if (p.shuffle)
            unshuffle(dst, plainp, (size_t)ce, p.esize, (size_t)(lo - first), (size_t)(hi - first));
        else if (plainp != dst)
            memcpy(dst, plainp + (size_t)(lo - first) * p.esize, (size_t)(hi - lo) * p.esize);
    }
cleanup:
    libdeflate_free_decompressor(dec);
    free(raw);
    free(loc);
    if (done) *out = st;
    return done;
}
