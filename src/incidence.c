/* Builds the sparse respondent x item incidence from the reader's table: items renumbered in
 * canonical order, rows grouped by respondent with a counting sort, each row sorted and
 * deduplicated. */
#include "pairmap/incidence.h"

#include <float.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "exactsum.h"
#include "input_internal.h"
#include "parallel.h"
#include "util.h"

void pm_incidence_free(pm_incidence_t *inc) {
    if (!inc) {
        return;
    }
    free(inc->name);
    free(inc->category);
    free(inc->count);
    free(inc->wcount);
    free(inc->w2count);
    free(inc->row_ptr);
    free(inc->col);
    free(inc->weight);
    free(inc->storage);
    free(inc->left_out);
    free(inc);
}

/* item order by name (bytes); ctx: the table */
static int cmp_item(const void *a, const void *b, const void *ctx) {
    const pm_table_t *t = ctx;
    uint32_t x = *(const uint32_t *)a, y = *(const uint32_t *)b;
    return strcmp(t->items.str[x], t->items.str[y]);
}

static int cmp_u32(const void *a, const void *b) {
    uint32_t x = *(const uint32_t *)a, y = *(const uint32_t *)b;
    return x < y ? -1 : x > y;
}

/* Sorts a respondent's items. Up to 32 by rank: each value goes to the place the values
 * before it that are not larger and the values after it that are smaller give it, counted
 * without a branch (an insertion sort mispredicts about once per value: twice the time on
 * baskets of ten). */
static void sort_small(uint32_t *v, size_t n) {
    if (n > 32) {
        qsort(v, n, sizeof *v, cmp_u32);
        return;
    }
    uint32_t out[32];
    for (size_t i = 0; i < n; i++) {
        uint32_t x = v[i];
        size_t at = 0;
        for (size_t j = 0; j < i; j++) {
            at += v[j] <= x;
        }
        for (size_t j = i + 1; j < n; j++) {
            at += v[j] < x;
        }
        out[at] = x;
    }
    memcpy(v, out, n * sizeof *v);
}

/* Sorting and deduplicating the rows, in chunks of respondents on several threads: each
 * chunk compacts its rows in place from its own first row; the chunks are then moved together
 * in order, so the result is the serial one. */
typedef struct {
    pm_incidence_t *inc;
    size_t nr, nchunks, ni;
    uint64_t *out_len; /* [nchunks] entries kept by the chunk */
    uint64_t *dups;    /* [nchunks] */
    uint64_t *singles; /* [nchunks] */
    uint64_t *empties; /* [nchunks] */
    uint32_t *rowlen;  /* [nr] kept entries of each respondent */
    uint64_t **counts; /* [threads][ni] item counts per thread */
} rows_job;

static int rows_chunk(void *ud, size_t c, unsigned thread) {
    rows_job *j = ud;
    pm_incidence_t *inc = j->inc;
    size_t r0 = j->nr * c / j->nchunks, r1 = j->nr * (c + 1) / j->nchunks;
    uint64_t *count = j->counts[thread];
    uint64_t w = inc->row_ptr[r0], start = w, dups = 0, singles = 0, empties = 0;
    for (size_t r = r0; r < r1; r++) {
        uint64_t b = inc->row_ptr[r], e = inc->row_ptr[r + 1];
        sort_small(inc->col + b, (size_t)(e - b));
        uint64_t w0 = w;
        for (uint64_t k = b; k < e; k++) {
            if (k > b && inc->col[k] == inc->col[k - 1]) {
                dups++;
                continue;
            }
            inc->col[w++] = inc->col[k];
            count[inc->col[k]]++;
        }
        uint64_t len = w - w0;
        j->rowlen[r] = (uint32_t)len;
        empties += len == 0;
        singles += len == 1;
    }
    j->out_len[c] = w - start;
    j->dups[c] = dups;
    j->singles[c] = singles;
    j->empties[c] = empties;
    return 0;
}

static pm_err_t sort_rows(pm_incidence_t *inc, size_t nr, size_t ni, unsigned threads) {
    rows_job j;
    memset(&j, 0, sizeof j);
    j.inc = inc;
    j.nr = nr;
    j.ni = ni;
    j.nchunks = nr < 4096 ? 1 : (threads > 1 ? 16 * (size_t)threads : 1);
    pm_err_t rc = PM_ENOMEM;
    j.out_len = pm_i_calloc(j.nchunks, sizeof *j.out_len);
    j.dups = pm_i_calloc(j.nchunks, sizeof *j.dups);
    j.singles = pm_i_calloc(j.nchunks, sizeof *j.singles);
    j.empties = pm_i_calloc(j.nchunks, sizeof *j.empties);
    j.rowlen = pm_i_malloc(nr ? nr : 1, sizeof *j.rowlen);
    j.counts = pm_i_calloc(threads, sizeof *j.counts);
    if (!j.out_len || !j.dups || !j.singles || !j.empties || !j.rowlen || !j.counts) {
        goto done;
    }
    j.counts[0] = inc->count; /* thread 0 counts into the result */
    for (unsigned k = 1; k < threads; k++) {
        if (!(j.counts[k] = pm_i_calloc(ni ? ni : 1, sizeof **j.counts))) {
            goto done;
        }
    }
    int prc = pm_i_parallel(j.nchunks > 1 ? threads : 1, j.nchunks, rows_chunk, &j);
    if (prc) {
        goto done;
    }
    /* move the chunks together and set the row pointers */
    uint64_t w = 0;
    for (size_t c = 0; c < j.nchunks; c++) {
        size_t r0 = nr * c / j.nchunks;
        uint64_t from = inc->row_ptr[r0];
        if (from != w && j.out_len[c]) {
            memmove(inc->col + w, inc->col + from, j.out_len[c] * sizeof *inc->col);
        }
        w += j.out_len[c];
        inc->duplicates += j.dups[c];
        inc->single_item += j.singles[c];
        inc->no_item += j.empties[c];
    }
    w = 0;
    for (size_t r = 0; r < nr; r++) {
        inc->row_ptr[r] = w;
        w += j.rowlen[r];
    }
    inc->row_ptr[nr] = w;
    for (unsigned k = 1; k < threads; k++) {
        for (size_t i = 0; i < ni; i++) {
            inc->count[i] += j.counts[k][i];
        }
    }
    rc = PM_OK;
done:
    if (j.counts) {
        for (unsigned k = 1; k < threads; k++) {
            free(j.counts[k]);
        }
    }
    free(j.counts);
    free(j.out_len);
    free(j.dups);
    free(j.singles);
    free(j.empties);
    free(j.rowlen);
    return rc;
}

/* One row of an item some merge renamed rows into: its respondent and item (the key) and the
 * name it was read with (tag). */
typedef struct {
    uint64_t key;
    uint32_t tag, pad;
} tagged_row;

/* The rows of the items marked in merged[] of the respondents r with sel[r] (NULL: all); *n:
 * how many. NULL when out of memory. */
static tagged_row *tagged_rows(const pm_table_t *t, const unsigned char *merged,
                               const unsigned char *sel, size_t *n) {
    size_t m = 0;
    for (size_t k = 0; k < t->n_rows; k++) {
        m += merged[t->row_item[k]] && (!sel || sel[t->row_resp[k]]);
    }
    *n = m;
    tagged_row *v = pm_i_malloc(m ? m : 1, sizeof *v);
    for (size_t k = 0, w = 0; v && k < t->n_rows; k++) {
        if (merged[t->row_item[k]] && (!sel || sel[t->row_resp[k]])) {
            v[w].key = (uint64_t)t->row_resp[k] << 32 | t->row_item[k];
            v[w].tag = t->row_tag[k];
            v[w++].pad = 0;
        }
    }
    return v;
}

/* merged[i] = 1 for the items some row was renamed into; NULL when out of memory. */
static unsigned char *merged_items(const pm_table_t *t) {
    unsigned char *merged = pm_i_calloc(t->items.count ? t->items.count : 1, 1);
    for (size_t k = 0; merged && k < t->n_rows; k++) {
        merged[t->row_item[k]] |= t->row_tag[k] != 0;
    }
    return merged;
}

int64_t pm_i_merge_groups(const pm_table_t *t) {
    if (!t->row_tag) {
        return 0;
    }
    unsigned char *merged = merged_items(t);
    if (!merged) {
        return -1;
    }
    int64_t n = 0;
    for (size_t i = 0; i < t->items.count; i++) {
        n += merged[i];
    }
    free(merged);
    return n;
}

int pm_i_merge_collapses(const pm_table_t *t, const unsigned char *sel, uint64_t *out) {
    *out = 0;
    if (!t->row_tag) {
        return 0;
    }
    unsigned char *merged = merged_items(t);
    if (!merged) {
        return -1;
    }
    size_t n;
    tagged_row *v = tagged_rows(t, merged, sel, &n);
    free(merged);
    if (!v || pm_i_radix_sort(v, n, sizeof *v) != 0) {
        free(v);
        return -1;
    }
    /* per respondent and item: the names it was read with beyond the first */
    uint64_t collapsed = 0;
    for (size_t a = 0, b; a < n; a = b) {
        for (b = a + 1; b < n && v[b].key == v[a].key; b++) {
            uint32_t x = v[b].tag;
            size_t j = b;
            for (; j > a && v[j - 1].tag > x; j--) {
                v[j].tag = v[j - 1].tag;
            }
            v[j].tag = x;
        }
        for (size_t j = a + 1; j < b; j++) {
            collapsed += v[j].tag != v[j - 1].tag;
        }
    }
    free(v);
    *out = collapsed;
    return 0;
}

/* The rows of a table whose respondents come in order, one run each: phase 0 maps the items
 * to canonical indices (col) and tells whether each chunk's rows are in respondent order,
 * also across its first edge; phase 1 sets the row pointers of the respondents whose run
 * starts in the chunk (and of the respondents without rows before them; the chunk holding
 * the last row sets those after it too). */
typedef struct {
    const pm_table_t *t;
    const uint32_t *rank;
    pm_incidence_t *inc;
    size_t nr;
    int phase;
    unsigned char *ungrouped; /* per chunk (phase 0) */
    size_t nchunks;
} scatter_job;

static int scatter_chunk(void *ud, size_t c, unsigned th) {
    (void)th;
    scatter_job *j = ud;
    const pm_table_t *t = j->t;
    size_t n = t->n_rows, k0 = n * c / j->nchunks, k1 = n * (c + 1) / j->nchunks;
    const uint32_t *rr = t->row_resp;
    if (j->phase == 0) {
        int bad = 0;
        for (size_t k = k0; k < k1; k++) {
            j->inc->col[k] = j->rank[t->row_item[k]];
            bad |= k > 0 && rr[k] < rr[k - 1];
        }
        j->ungrouped[c] = (unsigned char)bad;
        return 0;
    }
    uint64_t *rp = j->inc->row_ptr;
    for (size_t k = k0; k < k1; k++) {
        if (k == 0 || rr[k] != rr[k - 1]) {
            size_t from = k == 0 ? 0 : (size_t)rr[k - 1] + 1;
            for (size_t r = from; r <= rr[k]; r++) {
                rp[r] = k;
            }
        }
    }
    if (k1 == n) {
        size_t from = n == 0 ? 0 : (size_t)rr[n - 1] + 1;
        for (size_t r = from; r <= j->nr; r++) {
            rp[r] = n;
        }
    }
    return 0;
}

/* Items that only left-out respondents chose (had[i] and now no total) are dropped from the
 * incidence, the others renumbered in order (canonical order kept). Frees had. */
static int drop_gone_items(pm_incidence_t *inc, unsigned char *had) {
    size_t ni = inc->n_items, at = 0;
    uint32_t *to = pm_i_malloc(ni ? ni : 1, sizeof *to);
    if (!to) {
        free(had);
        return -1;
    }
    for (size_t i = 0; i < ni; i++) {
        if (had[i] && inc->count[i] == 0) {
            to[i] = UINT32_MAX;
            continue;
        }
        to[i] = (uint32_t)at;
        inc->name[at] = inc->name[i];
        inc->category[at] = inc->category[i];
        inc->count[at] = inc->count[i];
        at++;
    }
    uint64_t nnz = inc->row_ptr[inc->n_resp];
    for (uint64_t q = 0; q < nnz; q++) {
        inc->col[q] = to[inc->col[q]]; /* never a dropped item: those rows are gone */
    }
    inc->n_items = at;
    free(to);
    free(had);
    return 0;
}

/* --max-basket k: a respondent with more than k items (after deduplication) is left out: the
 * row emptied (the others moved up in place), the items' totals without it, flagged in
 * left_out. Common practice for store-level or test baskets. 0, or -1 out of memory. */
static int leave_out_large(pm_incidence_t *inc, size_t nr, uint64_t k) {
    unsigned char *had = pm_i_malloc(inc->n_items ? inc->n_items : 1, 1);
    if (!had) {
        return -1;
    }
    for (size_t i = 0; i < inc->n_items; i++) {
        had[i] = inc->count[i] > 0;
    }
    uint64_t w = 0, beg = inc->row_ptr[0];
    for (size_t r = 0; r < nr; r++) {
        uint64_t end = inc->row_ptr[r + 1];
        inc->row_ptr[r] = w;
        if (end - beg > k) {
            if (!inc->left_out && !(inc->left_out = pm_i_calloc(nr, 1))) {
                free(had);
                return -1;
            }
            inc->left_out[r] = 1;
            inc->n_left_out++;
            if (end - beg > inc->largest_left_out) {
                inc->largest_left_out = end - beg;
            }
            for (uint64_t q = beg; q < end; q++) {
                inc->count[inc->col[q]]--;
            }
        } else {
            if (w != beg) {
                memmove(inc->col + w, inc->col + beg, (size_t)(end - beg) * sizeof *inc->col);
            }
            w += end - beg;
        }
        beg = end;
    }
    inc->row_ptr[nr] = w;
    if (!inc->n_left_out) {
        free(had);
        return 0;
    }
    return drop_gone_items(inc, had);
}

static int is_left_out(const pm_incidence_t *inc, size_t r) {
    return inc->left_out && inc->left_out[r];
}

/* The respondents' weights divided by 2^wexp, a power of two near the largest (issue 13: the
 * same weight 1e160 on every row overflowed the sum of squares, 1e308 the sum, 1e-308
 * underflowed the squares; scaling every weight by 2^k now changes no bit of any result). The
 * division is exact but for a weight over 2^1021 times smaller than the largest, which is
 * refused, as are weights whose sum (in the file's units) is not a finite double. Sums run in
 * respondent order so the result never depends on threads. */
static pm_err_t scale_weights(const pm_table_t *t, pm_incidence_t *inc, pm_diag_t *diag) {
    size_t nr = (size_t)t->stats.respondents;
    double wmax = 0;
    size_t rmax = 0;
    for (size_t r = 0; r < nr; r++) {
        double wr = t->resp_weight[r];
        if (is_left_out(inc, r)) {
            continue; /* weighs nothing, checked for nothing */
        }
        if (wr != wr) {
            return pm_diag_set(diag, PM_EDATA, t->source, (long)t->resp_line[r],
                               "respondent has no weight");
        }
        if (wr > wmax) {
            wmax = wr;
            rmax = r;
        }
    }
    int e = 0;
    (void)frexp(wmax, &e); /* wmax = f * 2^e, 0.5 <= f < 1 */
    inc->wexp = e;
    long double W = 0, W2 = 0;
    for (size_t r = 0; r < nr; r++) {
        double wr = ldexp(t->resp_weight[r], -e);
        if (is_left_out(inc, r)) {
            inc->weight[r] = 0;
            continue;
        }
        if (wr < DBL_MIN) {
            return pm_diag_set(diag, PM_EDATA, t->source, (long)t->resp_line[r],
                               "weight %.17g is over 2^1021 times smaller than the weight "
                               "%.17g on line %llu: the ratio cannot be represented; give "
                               "weights of a narrower range",
                               t->resp_weight[r], wmax, (unsigned long long)t->resp_line[rmax]);
        }
        inc->weight[r] = wr;
        W += wr;
        W2 += (long double)wr * wr;
    }
    inc->W = (double)W;
    inc->W2 = (double)W2;
    /* exact sums where the weights' range allows (pm_i_xs: any split of the respondents, count
     * shards, adds up to the same bits) */
    pm_i_xs_range xr = {0}, xr2 = {0};
    for (size_t r = 0; r < nr; r++) {
        pm_i_xs_see(&xr, inc->weight[r]);
        pm_i_xs_see(&xr2, inc->weight[r] * inc->weight[r]);
    }
    int xe, xe2;
    if (pm_i_xs_fit(&xr, nr, &xe) == 0 && pm_i_xs_fit(&xr2, nr, &xe2) == 0) {
        pm_i_u128 xw = 0, xw2 = 0;
        for (size_t r = 0; r < nr; r++) {
            xw += pm_i_xs_units(inc->weight[r], xe);
            xw2 += pm_i_xs_units(inc->weight[r] * inc->weight[r], xe2);
        }
        inc->W = pm_i_xs_double(xw, xe);
        inc->W2 = pm_i_xs_double(xw2, xe2);
    }
    if (!isfinite(ldexp(inc->W, e))) {
        return pm_diag_set(diag, PM_EDATA, t->source, 0,
                           "the weights sum to more than %.3g, the largest number a result "
                           "can hold; divide every weight by one factor (results do not "
                           "change)",
                           DBL_MAX);
    }
    return PM_OK;
}

/* wcount and w2count: exact sums (pm_i_xs) where the weights' range allows, else in long
 * double in respondent order. 0, or -1 when out of memory. */
static int item_weight_sums(pm_incidence_t *inc) {
    size_t nr = inc->n_resp, ni = inc->n_items;
    pm_i_xs_range xr = {0}, xr2 = {0};
    for (size_t r = 0; r < nr; r++) {
        pm_i_xs_see(&xr, inc->weight[r]);
        pm_i_xs_see(&xr2, inc->weight[r] * inc->weight[r]);
    }
    int xe, xe2;
    if (pm_i_xs_fit(&xr, nr, &xe) == 0 && pm_i_xs_fit(&xr2, nr, &xe2) == 0) {
        pm_i_u128 *acc = pm_i_calloc(2 * (ni ? ni : 1), sizeof *acc);
        if (!acc) {
            return -1;
        }
        for (size_t r = 0; r < nr; r++) {
            pm_i_u128 u = pm_i_xs_units(inc->weight[r], xe);
            pm_i_u128 u2 = pm_i_xs_units(inc->weight[r] * inc->weight[r], xe2);
            for (uint64_t k = inc->row_ptr[r]; k < inc->row_ptr[r + 1]; k++) {
                acc[2 * inc->col[k]] += u;
                acc[2 * inc->col[k] + 1] += u2;
            }
        }
        for (size_t i = 0; i < ni; i++) {
            inc->wcount[i] = pm_i_xs_double(acc[2 * i], xe);
            inc->w2count[i] = pm_i_xs_double(acc[2 * i + 1], xe2);
        }
        free(acc);
        return 0;
    }
    long double *acc = pm_i_calloc(2 * (ni ? ni : 1), sizeof *acc);
    if (!acc) {
        return -1;
    }
    for (size_t r = 0; r < nr; r++) {
        for (uint64_t k = inc->row_ptr[r]; k < inc->row_ptr[r + 1]; k++) {
            acc[2 * inc->col[k]] += inc->weight[r];
            acc[2 * inc->col[k] + 1] += inc->weight[r] * inc->weight[r];
        }
    }
    for (size_t i = 0; i < ni; i++) {
        inc->wcount[i] = (double)acc[2 * i];
        inc->w2count[i] = (double)acc[2 * i + 1];
    }
    free(acc);
    return 0;
}

double pm_incidence_wunits(const pm_incidence_t *inc, double v) {
    return inc->weight ? ldexp(v, inc->wexp) : v;
}

pm_err_t pm_incidence_build(const pm_table_t *t, pm_incidence_t **out, pm_diag_t *diag) {
    return pm_incidence_build_threads(t, 1, out, diag);
}

/* Canonical order (names sorted by bytes): rank[table item] is its index; the names and
 * categories copied into inc's storage in that order. */
static pm_err_t canonical_names(const pm_table_t *t, pm_incidence_t *inc, uint32_t *order,
                                uint32_t *rank) {
    size_t ni = t->items.count;
    for (size_t i = 0; i < ni; i++) {
        order[i] = (uint32_t)i;
    }
    if (pm_i_sort_ctx(order, ni, sizeof *order, cmp_item, t)) {
        return PM_ENOMEM;
    }
    size_t bytes = 0;
    for (size_t i = 0; i < ni; i++) {
        rank[order[i]] = (uint32_t)i;
        bytes += t->items.len[i] + 1;
    }
    for (size_t i = 0; i < ni; i++) {
        int32_t c = t->item_cat[order[i]];
        if (c >= 0) {
            bytes += t->cats.len[c] + 1;
        }
    }
    inc->storage = pm_i_malloc(bytes ? bytes : 1, 1);
    if (!inc->storage) {
        return PM_ENOMEM;
    }
    char *p = inc->storage;
    for (size_t i = 0; i < ni; i++) {
        uint32_t o = order[i];
        memcpy(p, t->items.str[o], t->items.len[o] + 1);
        inc->name[i] = p;
        p += t->items.len[o] + 1;
        int32_t c = t->item_cat[o];
        if (c >= 0) {
            memcpy(p, t->cats.str[c], t->cats.len[c] + 1);
            inc->category[i] = p;
            p += t->cats.len[c] + 1;
        }
    }
    return PM_OK;
}

/* Counting sort of rows by respondent; when every respondent's rows are together and in order
 * (one run each: the usual file), the sort is the identity, and the row pointers are where the
 * respondent changes: both on all threads. */
static pm_err_t rows_by_respondent(const pm_table_t *t, pm_incidence_t *inc, const uint32_t *rank,
                                   size_t nr, unsigned threads) {
    scatter_job sj = {t, rank, inc, nr, 0, NULL, 1};
    sj.nchunks = t->n_rows < 65536 || threads < 2 ? 1 : 16 * (size_t)threads;
    sj.ungrouped = pm_i_calloc(sj.nchunks, 1);
    if (!sj.ungrouped) {
        return PM_ENOMEM;
    }
    int grouped = 0;
    if (pm_i_parallel(sj.nchunks > 1 ? threads : 1, sj.nchunks, scatter_chunk, &sj) == 0) {
        grouped = 1;
        for (size_t c = 0; c < sj.nchunks; c++) {
            grouped &= !sj.ungrouped[c];
        }
    }
    free(sj.ungrouped);
    if (grouped) {
        sj.phase = 1;
        grouped = pm_i_parallel(sj.nchunks > 1 ? threads : 1, sj.nchunks, scatter_chunk, &sj) == 0;
    }
    if (grouped) {
        return PM_OK;
    }
    memset(inc->row_ptr, 0, (nr + 1) * sizeof *inc->row_ptr);
    for (size_t k = 0; k < t->n_rows; k++) {
        inc->row_ptr[t->row_resp[k] + 1]++;
    }
    for (size_t r = 0; r < nr; r++) {
        inc->row_ptr[r + 1] += inc->row_ptr[r];
    }
    uint64_t *fill = pm_i_malloc(nr ? nr : 1, sizeof *fill);
    if (!fill) {
        return PM_ENOMEM;
    }
    memcpy(fill, inc->row_ptr, nr * sizeof *fill);
    for (size_t k = 0; k < t->n_rows; k++) {
        inc->col[fill[t->row_resp[k]]++] = rank[t->row_item[k]];
    }
    free(fill);
    return PM_OK;
}

/* Respondents' weights in the file's scale and the items' weighted totals. */
static pm_err_t weights_setup(const pm_table_t *t, pm_incidence_t *inc, pm_diag_t *diag) {
    size_t ni = inc->n_items, nr = inc->n_resp;
    inc->weight = pm_i_malloc(nr ? nr : 1, sizeof *inc->weight);
    inc->wcount = pm_i_calloc(ni, sizeof *inc->wcount);
    if (!inc->weight || !inc->wcount) {
        return PM_ENOMEM;
    }
    pm_err_t rc = scale_weights(t, inc, diag);
    if (rc != PM_OK) {
        return rc;
    }
    inc->w2count = pm_i_calloc(ni, sizeof *inc->w2count);
    if (!inc->w2count || item_weight_sums(inc) != 0) {
        return PM_ENOMEM;
    }
    return PM_OK;
}

pm_err_t pm_incidence_build_threads(const pm_table_t *t, unsigned threads, pm_incidence_t **out,
                                    pm_diag_t *diag) {
    *out = NULL;
    if (threads == 0) {
        long np = sysconf(_SC_NPROCESSORS_ONLN);
        threads = np > 0 ? (unsigned)np : 1;
    }
    pm_err_t rc = PM_OK;
    size_t ni = t->items.count, nr = (size_t)t->stats.respondents;
    pm_incidence_t *inc = pm_i_calloc(1, sizeof *inc);
    if (!inc) {
        return pm_diag_set(diag, PM_ENOMEM, t->source, 0, "out of memory");
    }
    uint32_t *order = pm_i_malloc(ni, sizeof *order);
    uint32_t *rank = pm_i_malloc(ni, sizeof *rank);
    inc->name = pm_i_malloc(ni, sizeof *inc->name);
    inc->category = pm_i_calloc(ni, sizeof *inc->category);
    inc->count = pm_i_calloc(ni, sizeof *inc->count);
    inc->row_ptr = pm_i_calloc(nr + 1, sizeof *inc->row_ptr);
    inc->col = pm_i_malloc(t->n_rows, sizeof *inc->col);
    if (!order || !rank || !inc->name || !inc->category || !inc->count || !inc->row_ptr ||
        !inc->col) {
        rc = PM_ENOMEM;
    }
    if (rc == PM_OK) {
        rc = canonical_names(t, inc, order, rank);
    }
    if (rc == PM_OK) {
        rc = rows_by_respondent(t, inc, rank, nr, threads);
    }
    if (rc == PM_OK) { /* sort and deduplicate each row, compacting in place */
        rc = sort_rows(inc, nr, ni, threads);
    }
    int64_t groups = pm_i_merge_groups(t);
    if (rc == PM_OK && (groups < 0 || pm_i_merge_collapses(t, NULL, &inc->merge_collapsed))) {
        rc = PM_ENOMEM;
    }
    inc->merge_groups = groups > 0 ? (uint64_t)groups : 0;
    if (rc == PM_OK) { /* what merging made are not duplicates of the input */
        inc->duplicates -= inc->merge_collapsed <= inc->duplicates ? inc->merge_collapsed : 0;
    }
    if (rc == PM_OK) {
        inc->n_items = ni;
        inc->n_resp = nr;
        if (t->max_basket && leave_out_large(inc, nr, t->max_basket) != 0) {
            rc = PM_ENOMEM;
        }
    }
    if (rc == PM_OK) {
        uint64_t base = t->respondents_override ? t->respondents_override : nr;
        inc->no_item += base - nr;
        inc->N = base - inc->n_left_out;
        inc->W = (double)inc->N;
        inc->W2 = (double)inc->N;
        if (t->weighted) {
            rc = weights_setup(t, inc, diag);
        }
    }
    free(order);
    free(rank);
    if (rc) {
        pm_incidence_free(inc);
        if (rc == PM_ENOMEM) {
            pm_diag_set(diag, PM_ENOMEM, t->source, 0, "out of memory");
        }
        return rc;
    }
    *out = inc;
    return PM_OK;
}

long pm_incidence_find(const pm_incidence_t *inc, const char *name) {
    size_t lo = 0, hi = inc->n_items;
    while (lo < hi) {
        size_t mid = lo + (hi - lo) / 2;
        int c = strcmp(inc->name[mid], name);
        if (c == 0) {
            return (long)mid;
        }
        if (c < 0) {
            lo = mid + 1;
        } else {
            hi = mid;
        }
    }
    return -1;
}

double pm_incidence_share(const pm_incidence_t *inc, size_t i) {
    if (inc->wcount) {
        return inc->wcount[i] / inc->W;
    }
    return (double)inc->count[i] / (double)inc->N;
}

double pm_incidence_neff(const pm_incidence_t *inc) {
    if (!inc->weight) {
        return (double)inc->N;
    }
    return inc->W * inc->W / inc->W2;
}
