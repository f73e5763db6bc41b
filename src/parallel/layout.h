/* layout.h - partition of states over ranks and the halo exchange of values. */
#ifndef SL_PARALLEL_LAYOUT_H
#define SL_PARALLEL_LAYOUT_H

#include "model/model.h"

/* Split states into nparts contiguous ranges with about equal transitions.
 * cum[i] = transitions of states [0, i) (length n_states + 1). bounds gets
 * nparts + 1 entries. Local and pure. */
void sl_partition_split(const int64_t *cum, int64_t n_states, int nparts, int64_t *bounds);

/* The same split computed collectively when each rank holds only an even
 * share of the cumulative counts: rank r passes cum[i] = transitions of
 * states [0, lo + i) for i in [0, hi - lo], lo = n*r/size, hi = n*(r+1)/size
 * (so no rank needs more than its share of the index arrays). bounds:
 * size + 1 entries on every rank. Collective. */
sl_status sl_partition_from_counts(sl_ctx *ctx, int64_t n_states, int64_t n_transitions, const int64_t *cum,
                                   int64_t *bounds);

/* Owner rank of global state s (binary search in bounds). Local. */
int sl_dist_owner(const int64_t *bounds, int nparts, int64_t s);

/* The values a rank reads but does not own, and how to exchange them. The
 * local value vector is [owned (n_local) | halo (n_halo)]. */
typedef struct sl_halo {
    int64_t n_local, n_halo;
    int64_t *halo_global;       /* [n_halo] ascending global ids */
    int by_bitmap;              /* how sl_halo_build found them: 1 bitmap
                                 * over their range, 0 sort (same result) */
    int n_nbr;                  /* ranks we exchange with (either direction) */
    int *recv_rank, n_recv;     /* ranks we receive from */
    int64_t *recv_off;          /* [n_recv + 1] into the halo part */
    int *send_rank, n_send;     /* ranks we send to */
    int64_t *send_off;          /* [n_send + 1] into send_idx */
    int64_t *send_idx;          /* local (owned) indices to send */
    double *send_buf;
    MPI_Request *reqs;          /* n_recv + n_send */
    /* stage-interleaved layout only (sl_halo_stage_plan): the part of each
     * neighbour's range that belongs to stage st is
     * [off + st_off[i * (n_stages + 1) + st], off + st_off[i * (n_stages + 1) + st + 1]) */
    int64_t n_stages;
    int64_t *recv_st_off;       /* [n_recv * (n_stages + 1)], relative to recv_off[i] */
    int64_t *send_st_off;       /* [n_send * (n_stages + 1)], relative to send_off[i] */
} sl_halo;

/* Build the halo of a block: b->col gets the local column of every
 * transition in [owned | halo]; b->target (global ids) is left as it is,
 * or with in_place (the caller owns b) the columns are written over the
 * targets' memory, which then shrinks to 4 bytes per transition and
 * b->target becomes NULL (no second array at the peak). Collective. */
sl_status sl_halo_build(sl_ctx *ctx, const int64_t *bounds, sl_block *b, int in_place, sl_halo *h);
/* Refresh the halo part of x from the owners. Collective. */
sl_status sl_halo_exchange(sl_ctx *ctx, const sl_halo *h, double *x);
void sl_halo_free(sl_halo *h);

/* ---- stage-interleaved layout (stages.c) ----------------------------------
 * A model with a stage factor is renumbered internally when it is loaded so
 * that every rank holds a share of every stage. Write a file state as
 * s = l + L*(st + S*h) (l: the factors below the stage factor, L states;
 * st: the stage, S values; h: the factors above it) and its stage-free
 * index u = l + L*h. The u range [0, L*H) is split into nparts contiguous
 * ranges ub[r] .. ub[r+1] balanced by transitions; rank r owns every state
 * whose u is in its range, numbered internally stage-major:
 *     internal(s) = S*ub[r] + st*(ub[r+1] - ub[r]) + (u - ub[r]).
 * So a rank's states of stage st are the contiguous local range
 * [st*w, (st+1)*w), w = ub[r+1] - ub[r], and within a stage the local order
 * is the file order. The file, its contract and its fingerprint are not
 * changed; only the in-memory numbering is. */
typedef struct sl_stage_map {
    int active;                 /* 1: the model has a stage factor */
    int64_t inner, n_stages, outer; /* L, S, H */
    int nparts;
    int64_t *ub;                /* [nparts + 1] split of u */
} sl_stage_map;

void sl_stage_map_free(sl_stage_map *m);
/* Internal id of file state s, and back. Local and pure. */
int64_t sl_stage_internal(const sl_stage_map *m, int64_t s);
int64_t sl_stage_file(const sl_stage_map *m, int64_t i);
/* The map of a model for nparts parts from the file's cumulative
 * transition counts cum[0..n_states] (all states). Local. */
sl_status sl_stage_map_local(sl_ctx *ctx, const sl_meta *meta, const int64_t *cum, int nparts, sl_stage_map *m);
/* The map for ctx->size parts from the rows each rank holds (contiguous
 * file ranges, global targets). Collective. */
sl_status sl_stage_map_rows(sl_ctx *ctx, const sl_meta *meta, const sl_block *rows, sl_stage_map *m);
/* The same map from the cumulative transition counts of each rank's own
 * contiguous file range: cum[i] for states s_begin + i, i <= n (as
 * sl_store_model_cumulative gives them), before any rows are read.
 * Collective. */
sl_status sl_stage_map_counts(sl_ctx *ctx, const sl_meta *meta, int64_t s_begin, int64_t n, const int64_t *cum,
                              sl_stage_map *m);
/* A copy of src (its own ub). Local. */
sl_status sl_stage_map_copy(sl_ctx *ctx, const sl_stage_map *src, sl_stage_map *dst);
/* Contiguous file ranges holding part r's states, ascending and merged:
 * runs[2k], runs[2k+1] = begin, end. *n_runs <= 2*S + 1. Local. */
sl_status sl_stage_runs(sl_ctx *ctx, const sl_stage_map *m, int r, int64_t **runs, int64_t *n_runs);
/* The same states as runs of file states in part r's internal order (stage
 * by stage): read one after the other they give its rows in that order.
 * At most sl_stage_runs_bound(m, r) runs. Local. */
sl_status sl_stage_runs_internal(sl_ctx *ctx, const sl_stage_map *m, int r, int64_t **runs, int64_t *n_runs);
/* The most runs sl_stage_runs_internal gives part r: S times the number of
 * outer values its states touch. Local and pure. */
int64_t sl_stage_runs_bound(const sl_stage_map *m, int r);
/* The ranges of this rank's block in the internal layout of m, holding np
 * pairs and nt transitions (global offsets by exclusive scan over ranks),
 * and the first entries of its first_pair and first_trans, which the
 * caller has allocated. Collective. */
void sl_stage_block_frame(sl_ctx *ctx, const sl_stage_map *m, int64_t np, int64_t nt, sl_block *out);
/* Move rows from their current layout (src: this rank's contiguous file
 * range, src_bounds of all ranks, global file targets) to the
 * stage-interleaved one: out gets this rank's states in internal order
 * with targets as internal ids (out->target kept). release: NULL, or the
 * block src points to, which is freed as soon as its rows are packed for
 * sending (lower peak memory when the caller no longer needs them).
 * Collective. */
sl_status sl_stage_redistribute(sl_ctx *ctx, const sl_block *src, const int64_t *src_bounds, const sl_stage_map *m,
                                sl_block *release, sl_block *out);
/* Per-stage exchange plan for a halo built on the stage-interleaved
 * bounds (bounds[r] = S*ub[r]). Local. */
sl_status sl_halo_stage_plan(sl_ctx *ctx, const sl_stage_map *m, sl_halo *h);
/* Refresh the halo entries of stage st only. Collective. */
sl_status sl_halo_exchange_stage(sl_ctx *ctx, const sl_halo *h, double *x, int64_t st);

/* Moving owned vectors between the internal layout and the model's layout
 * (contiguous file ranges fbounds), for solutions and checkpoints. Rank r's
 * file slice is [f_begin, f_begin + f_n) = [fbounds[r], fbounds[r + 1]). */
typedef struct sl_io_plan {
    int64_t f_begin, f_n, n_local;
    int *scnt, *sdsp, *rcnt, *rdsp; /* [size] in elements */
    int64_t *spos;              /* [n_local] owned index at send slot k */
    int64_t *rpos;              /* [f_n] file-slice offset of receive slot k */
} sl_io_plan;
/* bounds: internal bounds of all ranks; file_of(i) via the map; fbounds:
 * the destination layout. Collective. */
sl_status sl_io_plan_build(sl_ctx *ctx, const sl_stage_map *m, const int64_t *bounds, const int64_t *fbounds,
                           sl_io_plan *io);
void sl_io_plan_free(sl_io_plan *io);
/* owned (internal order) -> file slice, and back; elem bytes per entry.
 * Collective. */
sl_status sl_io_to_file(sl_ctx *ctx, const sl_io_plan *io, const void *owned, size_t elem, void *slice);
sl_status sl_io_from_file(sl_ctx *ctx, const sl_io_plan *io, const void *slice, size_t elem, void *owned);

/* Global reductions (collective). */
double sl_sum(sl_ctx *ctx, double v);
double sl_max(sl_ctx *ctx, double v);
double sl_min(sl_ctx *ctx, double v);
int64_t sl_sum_i64(sl_ctx *ctx, int64_t v);
int64_t sl_exscan_i64(sl_ctx *ctx, int64_t v);

#endif /* SL_PARALLEL_LAYOUT_H */
