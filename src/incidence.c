/* Builds the sparse respondent x item incidence from the reader's table: items renumbered in
 * canonical order, rows grouped by respondent with a counting sort, each row sorted and
 * deduplicated. */
#include "pairmap/incidence.h"

#include <stdlib.h>
#include <string.h>

#include "input_internal.h"
#include "util.h"

void pm_incidence_free(pm_incidence_t *inc) {
    if (!inc) {
        return;
    }
    free(inc->name);
    free(inc->category);
    free(inc->count);
    free(inc->wcount);
    free(inc->row_ptr);
    free(inc->col);
    free(inc->weight);
    free(inc->storage);
    free(inc);
}

static const pm_table_t *sort_table; /* qsort has no context argument; build is not reentrant
                                        across threads, which the CLI never needs */
static int cmp_item(const void *a, const void *b) {
    uint32_t x = *(const uint32_t *)a, y = *(const uint32_t *)b;
    return strcmp(sort_table->items.str[x], sort_table->items.str[y]);
}

static int cmp_u32(const void *a, const void *b) {
    uint32_t x = *(const uint32_t *)a, y = *(const uint32_t *)b;
    return x < y ? -1 : x > y;
}

static void sort_small(uint32_t *v, size_t n) {
    if (n > 32) {
        qsort(v, n, sizeof *v, cmp_u32);
        return;
    }
    for (size_t i = 1; i < n; i++) {
        uint32_t x = v[i];
        size_t j = i;
        while (j > 0 && v[j - 1] > x) {
            v[j] = v[j - 1];
            j--;
        }
        v[j] = x;
    }
}

pm_err_t pm_incidence_build(const pm_table_t *t, pm_incidence_t **out, pm_diag_t *diag) {
    *out = NULL;
    pm_err_t rc = PM_OK;
    size_t ni = t->items.count, nr = (size_t)t->stats.respondents;
    uint32_t *order = NULL, *rank = NULL;
    pm_incidence_t *inc = pm_i_calloc(1, sizeof *inc);
    if (!inc) {
        return pm_diag_set(diag, PM_ENOMEM, t->source, 0, "out of memory");
    }
    order = pm_i_malloc(ni, sizeof *order);
    rank = pm_i_malloc(ni, sizeof *rank);
    inc->name = pm_i_malloc(ni, sizeof *inc->name);
    inc->category = pm_i_calloc(ni, sizeof *inc->category);
    inc->count = pm_i_calloc(ni, sizeof *inc->count);
    inc->row_ptr = pm_i_calloc(nr + 1, sizeof *inc->row_ptr);
    inc->col = pm_i_malloc(t->n_rows, sizeof *inc->col);
    if (!order || !rank || !inc->name || !inc->category || !inc->count || !inc->row_ptr ||
        !inc->col) {
        rc = PM_ENOMEM;
        goto cleanup;
    }
    /* canonical order: names sorted by bytes */
    for (size_t i = 0; i < ni; i++) {
        order[i] = (uint32_t)i;
    }
    sort_table = t;
    qsort(order, ni, sizeof *order, cmp_item);
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
        rc = PM_ENOMEM;
        goto cleanup;
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
    /* counting sort of rows by respondent */
    for (size_t k = 0; k < t->n_rows; k++) {
        inc->row_ptr[t->row_resp[k] + 1]++;
    }
    for (size_t r = 0; r < nr; r++) {
        inc->row_ptr[r + 1] += inc->row_ptr[r];
    }
    {
        uint64_t *fill = pm_i_malloc(nr ? nr : 1, sizeof *fill);
        if (!fill) {
            rc = PM_ENOMEM;
            goto cleanup;
        }
        memcpy(fill, inc->row_ptr, nr * sizeof *fill);
        for (size_t k = 0; k < t->n_rows; k++) {
            inc->col[fill[t->row_resp[k]]++] = rank[t->row_item[k]];
        }
        free(fill);
    }
    /* sort and deduplicate each row, compacting in place */
    uint64_t w = 0;
    for (size_t r = 0; r < nr; r++) {
        uint64_t b = inc->row_ptr[r], e = inc->row_ptr[r + 1];
        sort_small(inc->col + b, (size_t)(e - b));
        inc->row_ptr[r] = w;
        for (uint64_t k = b; k < e; k++) {
            if (k > b && inc->col[k] == inc->col[k - 1]) {
                inc->duplicates++;
                continue;
            }
            inc->col[w++] = inc->col[k];
            inc->count[inc->col[k]]++;
        }
        uint64_t len = w - inc->row_ptr[r];
        if (len == 0) {
            inc->no_item++;
        } else if (len == 1) {
            inc->single_item++;
        }
    }
    inc->row_ptr[nr] = w;
    inc->n_items = ni;
    inc->n_resp = nr;
    inc->N = t->respondents_override ? t->respondents_override : nr;
    inc->no_item += inc->N - nr;
    inc->W = (double)inc->N;
    inc->W2 = (double)inc->N;
    if (t->weighted) {
        inc->weight = pm_i_malloc(nr ? nr : 1, sizeof *inc->weight);
        inc->wcount = pm_i_calloc(ni, sizeof *inc->wcount);
        if (!inc->weight || !inc->wcount) {
            rc = PM_ENOMEM;
            goto cleanup;
        }
        /* Sums run in respondent order so the result never depends on threads. */
        long double W = 0, W2 = 0;
        for (size_t r = 0; r < nr; r++) {
            double wr = t->resp_weight[r];
            if (wr != wr) {
                rc = pm_diag_set(diag, PM_EDATA, t->source, (long)t->resp_line[r],
                                 "respondent has no weight");
                goto cleanup;
            }
            inc->weight[r] = wr;
            W += wr;
            W2 += (long double)wr * wr;
        }
        inc->W = (double)W;
        inc->W2 = (double)W2;
        long double *acc = pm_i_calloc(ni, sizeof *acc);
        if (!acc) {
            rc = PM_ENOMEM;
            goto cleanup;
        }
        for (size_t r = 0; r < nr; r++) {
            for (uint64_t k = inc->row_ptr[r]; k < inc->row_ptr[r + 1]; k++) {
                acc[inc->col[k]] += inc->weight[r];
            }
        }
        for (size_t i = 0; i < ni; i++) {
            inc->wcount[i] = (double)acc[i];
        }
        free(acc);
    }
cleanup:
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
