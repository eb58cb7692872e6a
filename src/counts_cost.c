/* The counting's cost, known before it starts (pm_counts_cost, see cooccur.h): the largest
 * row, the pair visits, the distinct and kept pairs at most, and the bytes of the kernel the
 * counting would pick. */
#include "pairmap/cooccur.h"

#include <stdlib.h>
#include <string.h>

#include "parallel.h"
#include "util.h"
/* ---- the cost, before counting ------------------------------------------------------------- */
static uint64_t sat_add(uint64_t a, uint64_t b) {
    return a > UINT64_MAX - b ? UINT64_MAX : a + b;
}

static uint64_t sat_mul(uint64_t a, uint64_t b) {
    return b && a > UINT64_MAX / b ? UINT64_MAX : a * b;
}

/* The pairs that can be seen, and kept: item a has at most min(E - 1, d_a) partners, d_a the
 * pair visits involving a (sum of k - 1 over its rows), of which at most d_a / min_keep are
 * seen min_keep times; each pair is counted from both of its items. O(rows); -1 when out of
 * memory. */
/* One thread's share of the rows' bounds: each thread its own per-item sums, totals and
 * largest row; all the sums are of non-negative terms saturating at UINT64_MAX, so their
 * grouping by thread changes nothing. */
typedef struct {
    uint64_t *d; /* partners per item counted with multiplicity */
    uint64_t work, nnz, R, largest;
} bound_part;

typedef struct {
    const pm_incidence_t *inc;
    const unsigned char *el;
    size_t nchunks;
    bound_part *part; /* one per thread */
} bound_job;

static int bound_chunk(void *ud, size_t c, unsigned t) {
    bound_job *j = ud;
    const pm_incidence_t *inc = j->inc;
    const unsigned char *el = j->el;
    bound_part *bp = &j->part[t];
    size_t r0 = inc->n_resp * c / j->nchunks, r1 = inc->n_resp * (c + 1) / j->nchunks;
    for (size_t r = r0; r < r1; r++) {
        uint64_t m = el ? 0 : inc->row_ptr[r + 1] - inc->row_ptr[r];
        for (uint64_t q = inc->row_ptr[r]; el && q < inc->row_ptr[r + 1]; q++) {
            m += el[inc->col[q]] != 0;
        }
        if (m > bp->largest) {
            bp->largest = m;
        }
        if (m < 2) {
            continue;
        }
        bp->nnz += m;
        bp->R++;
        bp->work = sat_add(bp->work, m * (m - 1) / 2);
        for (uint64_t q = inc->row_ptr[r]; q < inc->row_ptr[r + 1]; q++) {
            if (!el || el[inc->col[q]]) {
                bp->d[inc->col[q]] = sat_add(bp->d[inc->col[q]], m - 1);
            }
        }
    }
    return 0;
}

/* The rows' bounds on up to th threads (at most 8: each holds a counter per item): the
 * largest row, the pair visits, the entries and rows of two items or more (nnz, R), and the
 * distinct and kept pairs at most (every item's partners, counted with multiplicity, capped
 * at the other items). */
static int pair_bounds(const pm_incidence_t *inc, const unsigned char *el, uint64_t E, uint64_t mk,
                       unsigned th, uint64_t *nnz, uint64_t *R, pm_counts_cost_t *out) {
    th = th < 1 ? 1 : th > 8 ? 8 : th;
    size_t ni = inc->n_items ? inc->n_items : 1;
    while (th > 1 && ni * sizeof(uint64_t) * th > ((size_t)64 << 20)) {
        th--; /* the extra counters stay small beside the incidence */
    }
    bound_part part[8];
    memset(part, 0, sizeof part);
    for (unsigned t = 0; t < th; t++) {
        if (!(part[t].d = pm_i_calloc(ni, sizeof *part[t].d))) {
            th = t; /* fewer threads, down to one */
            break;
        }
    }
    if (th == 0) {
        return -1;
    }
    bound_job j = {inc, el, inc->n_resp >= 65536 ? (size_t)th * 8 : 1, part};
    (void)pm_i_parallel(th, j.nchunks, bound_chunk, &j);
    uint64_t seen2 = 0, kept2 = 0, lim = E > 0 ? E - 1 : 0;
    for (size_t i = 0; i < inc->n_items; i++) {
        uint64_t d = 0;
        for (unsigned t = 0; t < th; t++) {
            d = sat_add(d, part[t].d[i]);
        }
        seen2 = sat_add(seen2, d < lim ? d : lim);
        kept2 = sat_add(kept2, d / mk < lim ? d / mk : lim);
    }
    for (unsigned t = 0; t < th; t++) {
        out->work = sat_add(out->work, part[t].work);
        *nnz += part[t].nnz;
        *R += part[t].R;
        out->largest = part[t].largest > out->largest ? part[t].largest : out->largest;
        free(part[t].d);
    }
    out->pairs_max = seen2 / 2;
    out->kept_max = kept2 / 2;
    return 0;
}

pm_err_t pm_counts_cost(const pm_incidence_t *inc, const pm_counts_opts_t *o,
                        pm_counts_cost_t *out) {
    memset(out, 0, sizeof *out);
    if (o->given) { /* the pairs are counted already (a shard): they are the result */
        out->pairs_max = out->kept_max = o->given->n_pairs;
        out->bytes = sat_mul(o->given->n_pairs, PM_COUNTS_KEPT_BYTES(inc->weight != NULL));
        return PM_OK;
    }
    uint64_t E = 0, nnz = 0, R = 0;
    for (size_t i = 0; i < inc->n_items; i++) {
        E += !o->eligible || o->eligible[i];
    }
    unsigned th = o->threads ? o->threads : pm_cpu_count();
    th = th > 256 ? 256 : th;
    uint64_t mk = o->min_keep > 1 ? o->min_keep : 1;
    if (pair_bounds(inc, o->eligible, E, mk, th, &nnz, &R, out) != 0) {
        return PM_ENOMEM;
    }
    uint64_t all = E * (E - (E > 0)) / 2;
    int weighted = inc->weight != NULL;
    size_t dmax = o->dense_max_items ? o->dense_max_items : 2048;
    int kernel = o->kernel;
    if (kernel == PM_COUNTS_AUTO) {
        kernel = (!weighted && E <= dmax) ? PM_COUNTS_DENSE : PM_COUNTS_SPARSE;
    }
    if (kernel == PM_COUNTS_DENSE && weighted) {
        kernel = PM_COUNTS_SPARSE;
    }
    /* the filtered rows (8 R + 4 nnz, weights 24 R), then the kernel's scratch */
    uint64_t b = sat_add(sat_mul(R, weighted ? 32 : 8), sat_mul(nnz, 4));
    if (kernel == PM_COUNTS_SPARSE) {
        /* transpose 8-12 per entry; tp and cost 16 per item; per thread acc and touched (and
         * 16-byte weighted sums), the transpose's two counters per item and a bit per item
         * (a byte counted, and a word) */
        b = sat_add(b, sat_mul(nnz, weighted ? 12 : 8));
        b = sat_add(b, sat_mul(E, 16 + (uint64_t)th * (weighted ? 41 : 25)));
        b = sat_add(b, (uint64_t)th * 8);
    } else {
        b = sat_add(b, sat_mul(sat_mul(all, 4), th)); /* one triangle per thread */
    }
    out->bytes = sat_add(b, sat_mul(out->kept_max, PM_COUNTS_KEPT_BYTES(weighted)));
    return PM_OK;
}
