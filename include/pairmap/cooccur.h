/* Joint counts of every pair of eligible items seen together (src/cooccur.c).
 * Two kernels behind one call: a dense upper-triangle accumulator, respondent-major, for few
 * items; a row-wise sparse (Gustavson) accumulation, item-major, for many items, whose memory
 * is O(items) per thread, never items^2. Both use every core and give identical results for
 * any thread count. */
#ifndef PAIRMAP_COOCCUR_H
#define PAIRMAP_COOCCUR_H

#include <stddef.h>
#include <stdint.h>

#include "pairmap/error.h"
#include "pairmap/incidence.h"

#ifdef __cplusplus
extern "C" {
#endif

/* Pairs kept, ordered by (a, b) with a < b (item indices of the incidence, canonical order).
 * n[k] is the raw (unweighted) joint count; w[k] the weighted one (NULL when unweighted). */
typedef struct {
    size_t n_pairs;
    uint32_t *a, *b, *n;
    double *w;
    uint64_t seen;   /* distinct pairs seen together, kept or pruned */
    uint64_t pruned; /* pairs seen together fewer than min_keep times (not kept) */
    uint64_t work;   /* pair incidences visited: sum over respondents of k(k-1)/2 */
    int kernel;      /* the kernel used: PM_COUNTS_DENSE or PM_COUNTS_SPARSE */
} pm_counts_t;

enum { PM_COUNTS_AUTO = 0, PM_COUNTS_DENSE = 1, PM_COUNTS_SPARSE = 2 };

/* Called for each pruned pair, from worker thread `thread` (0 .. threads-1), concurrently
 * from different threads; calls with the same thread index never overlap. */
typedef void (*pm_counts_prune_fn)(void *ud, unsigned thread, uint32_t a, uint32_t b, uint32_t n_ab,
                                   double w_ab);
/* Progress: done of total work units; called from one thread at a time. */
typedef void (*pm_progress_fn)(void *ud, const char *stage, uint64_t done, uint64_t total);

typedef struct {
    unsigned threads;              /* 0: all cores */
    uint32_t min_keep;             /* pairs with n < min_keep go to prune, not the output */
    const unsigned char *eligible; /* per item: count pairs of this item (NULL: all) */
    pm_counts_prune_fn prune;      /* may be NULL */
    void *prune_ud;
    int kernel;             /* PM_COUNTS_AUTO picks dense up to dense_max_items */
    size_t dense_max_items; /* 0: default 2048 */
    pm_progress_fn progress;
    void *progress_ud;
    /* optional: two arrays of scratch_n entries the sparse kernel may use (and overwrite) for
     * its transposed index instead of fresh memory; the caller keeps and frees them */
    uint32_t *scratch[2];
    size_t scratch_n;
    /* optional: every pair seen together, counted elsewhere (a count shard, pairmap/shard.h),
     * ordered by (a, b) over inc's items; the rows are then not read: the result is these
     * pairs filtered by eligible and min_keep (the rest to prune, from thread 0) */
    const pm_counts_t *given;
} pm_counts_opts_t;

void pm_counts_opts_init(pm_counts_opts_t *o);

/* Counts the pairs of inc. On success *out owns the result (pm_counts_free). Time
 * O(sum over respondents of k^2 + items * threads); memory O(kept pairs + rows + items *
 * threads), plus items^2/2 counters per thread for the dense kernel (only up to
 * dense_max_items). Errors: PM_ENOMEM, PM_EDATA (4294967295 or more rows of eligible items);
 * threads that cannot start are no error (the others do their work). */
pm_err_t pm_counts_build(const pm_incidence_t *inc, const pm_counts_opts_t *o, pm_counts_t **out,
                         pm_diag_t *diag);
void pm_counts_free(pm_counts_t *c);

/* What pm_counts_build(inc, o) will cost, known before any of it is allocated. */
typedef struct {
    uint64_t work;      /* pair visits: sum over respondents of k(k-1)/2, k their eligible items */
    uint64_t pairs_max; /* an upper bound of the distinct pairs seen (pm_counts_cost) */
    uint64_t kept_max;  /* of them, at most this many can reach min_keep */
    uint64_t largest;   /* eligible items of the largest basket */
    uint64_t bytes;     /* an upper bound of the memory counting holds at its peak: the kernel's
                         * scratch plus PM_COUNTS_KEPT_BYTES per kept pair (saturates) */
} pm_counts_cost_t;

/* Peak bytes per kept pair: the chunk buffers (a, b, n and w when weighted, grown by doubling:
 * up to twice the length) and the result they are concatenated into. */
#define PM_COUNTS_KEPT_BYTES(weighted) ((weighted) ? 60u : 36u)

/* Fills *out for counting inc with o (eligible, min_keep, threads, kernel, dense_max_items and
 * given are read as pm_counts_build reads them). The pair bounds: item a has at most
 * min(E - 1, d_a) partners, d_a the pair visits involving it, and at most d_a / min_keep of
 * them kept. O(rows), 8 bytes per item. Errors: PM_ENOMEM. */
pm_err_t pm_counts_cost(const pm_incidence_t *inc, const pm_counts_opts_t *o,
                        pm_counts_cost_t *out);

/* The joint counts of `item` with every item b of inc into nb[b] (0 for b = item), and with
 * wb non-NULL the weighted joint counts into wb[b] (the counts as doubles when unweighted);
 * nb and wb hold inc->n_items entries. From the rows, or from `given` (the pairs of a count
 * shard) when non-NULL. Time O(rows) or O(given pairs); memory O(items), never O(pairs).
 * Errors: PM_ENOMEM. */
pm_err_t pm_counts_item(const pm_incidence_t *inc, uint32_t item, const pm_counts_t *given,
                        uint32_t *nb, double *wb, pm_diag_t *diag);

/* Index of pair (a, b), a < b, in c, or -1. O(log pairs). */
long pm_counts_find(const pm_counts_t *c, uint32_t a, uint32_t b);

/* Number of cores the machine offers (at least 1). */
unsigned pm_cpu_count(void);

#ifdef __cplusplus
}
#endif
#endif
