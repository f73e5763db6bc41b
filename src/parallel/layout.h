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
    int n_nbr;                  /* ranks we exchange with (either direction) */
    int *recv_rank, n_recv;     /* ranks we receive from */
    int64_t *recv_off;          /* [n_recv + 1] into the halo part */
    int *send_rank, n_send;     /* ranks we send to */
    int64_t *send_off;          /* [n_send + 1] into send_idx */
    int64_t *send_idx;          /* local (owned) indices to send */
    double *send_buf;
    MPI_Request *reqs;          /* n_recv + n_send */
} sl_halo;

/* Build the halo of a block: b->col gets the local column of every
 * transition in [owned | halo]; b->target (global ids) is left as it is.
 * Collective. */
sl_status sl_halo_build(sl_ctx *ctx, const int64_t *bounds, sl_block *b, sl_halo *h);
/* Refresh the halo part of x from the owners. Collective. */
sl_status sl_halo_exchange(sl_ctx *ctx, const sl_halo *h, double *x);
void sl_halo_free(sl_halo *h);

/* Global reductions (collective). */
double sl_sum(sl_ctx *ctx, double v);
double sl_max(sl_ctx *ctx, double v);
double sl_min(sl_ctx *ctx, double v);
int64_t sl_sum_i64(sl_ctx *ctx, int64_t v);
int64_t sl_exscan_i64(sl_ctx *ctx, int64_t v);

#endif /* SL_PARALLEL_LAYOUT_H */
