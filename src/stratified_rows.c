/* The per-segment joint counts of the listed edges in one pass over the respondents' rows
 * (src/stratified_internal.h): the edges as a bit matrix of items x items, so that every pair
 * of items in a respondent's row is tested with one bit, and only the pairs that are edges
 * look up their edge (a binary search among the item's partners). The rows are read in order,
 * shared by the threads in fixed chunks, each thread counting in an array of its own; the
 * arrays are added in thread order, and counts are integers: the same result on any number of
 * threads, and the same counts as the item-by-item way in stratified.c. Used where the bit
 * matrix and the counts are small (pm_i_strat_rows_fits). */
#include <stdlib.h>
#include <string.h>

#include "pairmap/stratified.h"
#include "parallel.h"
#include "stratified_internal.h"
#include "util.h"

#define ROWS_CHUNKS 64
#define ROWS_MAX_ITEMS 16384              /* the bit matrix at most 32 MiB */
#define ROWS_MAX_COUNTS ((size_t)1 << 24) /* edges x levels x threads, at most 64 MiB */
#define ROWS_MAX_THREADS 8

int pm_i_strat_rows_fits(size_t items, size_t edges, size_t levels, unsigned threads) {
    if (items == 0 || items > ROWS_MAX_ITEMS || levels == 0) {
        return 0;
    }
    size_t t = threads > ROWS_MAX_THREADS ? ROWS_MAX_THREADS : threads ? threads : 1;
    return edges <= ROWS_MAX_COUNTS / levels / t;
}

typedef struct {
    const pm_incidence_t *inc;
    const pm_segcol_t *c;
    size_t nr, k, words;
    const uint64_t *bits;   /* [items x words]: bit b of row a when (a, b), a < b, is an edge */
    const uint64_t *estart; /* [items + 1]: item a's partners b > a in eb[estart[a] ..) */
    const uint32_t *eb;     /* partners, ascending within an item */
    const uint32_t *eidx;   /* the edge of each (a, eb[.]) */
    uint32_t *cnt[ROWS_MAX_THREADS]; /* [edges x k] per thread */
} rows_job;

static uint32_t edge_of(const rows_job *j, uint32_t a, uint32_t b) {
    /* the last partner <= b, which is b (the bit says the edge is there), without branches on
     * the data */
    const uint32_t *p = j->eb + j->estart[a];
    size_t n = (size_t)(j->estart[a + 1] - j->estart[a]);
    while (n > 1) {
        size_t half = n / 2;
        p = p[half] <= b ? p + half : p;
        n -= half;
    }
    return j->eidx[p - j->eb];
}

static int rows_chunk(void *ud, size_t ch, unsigned th) {
    rows_job *j = ud;
    const pm_incidence_t *inc = j->inc;
    uint32_t *cnt = j->cnt[th];
    for (size_t r = j->nr * ch / ROWS_CHUNKS; r < j->nr * (ch + 1) / ROWS_CHUNKS; r++) {
        int32_t s = j->c->of[r];
        if (s < 0) {
            continue;
        }
        const uint32_t *row = inc->col + inc->row_ptr[r];
        size_t len = (size_t)(inc->row_ptr[r + 1] - inc->row_ptr[r]);
        for (size_t x = 0; x + 1 < len; x++) {
            uint32_t a = row[x];
            if (j->estart[a] == j->estart[a + 1]) {
                continue;
            }
            const uint64_t *bits = j->bits + (size_t)a * j->words;
            for (size_t y = x + 1; y < len; y++) {
                uint32_t b = row[y];
                if (bits[b >> 6] >> (b & 63) & 1) {
                    cnt[(size_t)edge_of(j, a, b) * j->k + (size_t)s]++;
                }
            }
        }
    }
    return 0;
}

typedef struct {
    uint64_t key; /* item << 32 | partner, item < partner */
    uint32_t edge;
} ekey;

static int cmp_ekey(const void *x, const void *y) {
    const ekey *a = x, *b = y;
    return a->key < b->key ? -1 : a->key > b->key;
}

/* The edges as the bit matrix and each item's partners, ascending. */
static pm_err_t build_index(rows_job *j, const pm_pairs_t *pp, const pm_edges_t *e, size_t ni,
                            uint64_t **bits, uint64_t **estart, uint32_t **eb, uint32_t **eidx) {
    *bits = pm_i_calloc(ni * j->words, sizeof **bits);
    *estart = pm_i_calloc(ni + 1, sizeof **estart);
    *eb = pm_i_malloc(e->n ? e->n : 1, sizeof **eb);
    *eidx = pm_i_malloc(e->n ? e->n : 1, sizeof **eidx);
    ekey *keys = pm_i_malloc(e->n ? e->n : 1, sizeof *keys);
    if (!*bits || !*estart || !*eb || !*eidx || !keys) {
        pm_i_free(keys);
        return PM_ENOMEM;
    }
    for (size_t i = 0; i < e->n; i++) {
        uint32_t a = pp->a[e->idx[i]], b = pp->b[e->idx[i]];
        uint32_t lo = a < b ? a : b, hi = a < b ? b : a;
        (*bits)[(size_t)lo * j->words + (hi >> 6)] |= (uint64_t)1 << (hi & 63);
        keys[i].key = (uint64_t)lo << 32 | hi;
        keys[i].edge = (uint32_t)i;
    }
    qsort(keys, e->n, sizeof *keys, cmp_ekey);
    for (size_t i = 0; i < e->n; i++) {
        (*estart)[(keys[i].key >> 32) + 1]++;
        (*eb)[i] = (uint32_t)keys[i].key;
        (*eidx)[i] = keys[i].edge;
    }
    for (size_t i = 0; i < ni; i++) {
        (*estart)[i + 1] += (*estart)[i];
    }
    pm_i_free(keys);
    return PM_OK;
}

pm_err_t pm_i_strat_rows_counts(const pm_incidence_t *inc, const pm_segcol_t *c, size_t nr,
                                const pm_pairs_t *pp, const pm_edges_t *e, unsigned threads,
                                uint64_t *nab) {
    size_t k = c->n_levels, ni = inc->n_items;
    threads = threads > ROWS_MAX_THREADS ? ROWS_MAX_THREADS : threads ? threads : 1;
    rows_job j = {inc, c, nr, k, (ni + 63) / 64, NULL, NULL, NULL, NULL, {NULL}};
    uint64_t *bits = NULL, *estart = NULL;
    uint32_t *eb = NULL, *eidx = NULL;
    pm_err_t rc = build_index(&j, pp, e, ni, &bits, &estart, &eb, &eidx);
    for (unsigned t = 0; rc == PM_OK && t < threads; t++) {
        if (!(j.cnt[t] = pm_i_calloc(e->n * k > 0 ? e->n * k : 1, sizeof *j.cnt[t]))) {
            rc = PM_ENOMEM;
        }
    }
    if (rc == PM_OK) {
        j.bits = bits;
        j.estart = estart;
        j.eb = eb;
        j.eidx = eidx;
        if (threads < 2) {
            for (size_t ch = 0; ch < ROWS_CHUNKS; ch++) {
                rows_chunk(&j, ch, 0);
            }
        } else {
            (void)pm_i_parallel(threads, ROWS_CHUNKS, rows_chunk, &j); /* every chunk runs */
        }
        memset(nab, 0, e->n * k * sizeof *nab);
        for (unsigned t = 0; t < threads; t++) {
            for (size_t x = 0; x < e->n * k; x++) {
                nab[x] += j.cnt[t][x];
            }
        }
    }
    for (unsigned t = 0; t < ROWS_MAX_THREADS; t++) {
        pm_i_free(j.cnt[t]);
    }
    pm_i_free(bits);
    pm_i_free(estart);
    pm_i_free(eb);
    pm_i_free(eidx);
    return rc;
}
