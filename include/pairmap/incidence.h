/* The respondent x item incidence: sparse (CSR), deduplicated, items in canonical order (names
 * sorted by bytes), with item totals, optional respondent weights and the base N
 * (src/incidence.c). */
#ifndef PAIRMAP_INCIDENCE_H
#define PAIRMAP_INCIDENCE_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "pairmap/error.h"
#include "pairmap/input.h"

#ifdef __cplusplus
extern "C" {
#endif

/* Invariants: for respondent r, col[row_ptr[r] .. row_ptr[r+1]) are strictly increasing item
 * indices; count[i] = number of respondents who chose item i; names sorted by bytes.
 * Respondents of the file come first (0 .. n_rows-1); N may exceed n_rows when --respondents
 * adds respondents who chose nothing, and be below it when --max-basket left some out. */
typedef struct {
    size_t n_items;
    const char **name;     /* item -> name (owned by the incidence) */
    const char **category; /* item -> category or NULL */
    uint64_t *count;       /* respondents per item */
    double *wcount;        /* weighted respondents per item (NULL when unweighted) */
    size_t n_resp;         /* respondents in the file */
    uint64_t N;            /* the base: respondents in the file, or --respondents */
    uint64_t *row_ptr;     /* n_resp + 1 */
    uint32_t *col;
    double *weight;       /* respondent weights (NULL when unweighted), divided by 2^wexp */
    double *w2count;      /* squared weights summed per item (NULL when unweighted) */
    double W, W2;         /* sum of weights and of squared weights (N, N when unweighted) */
    int wexp;             /* weight, wcount, W, W2 and the pairs' weighted counts are held
                           * divided by 2^wexp, a power of two near the largest weight, so
                           * that sums and squares of any finite weights stay in range and
                           * every result is the same when all weights are scaled by one
                           * factor (exactly so for a power of two); 0 when unweighted.
                           * pm_incidence_wunits gives a weighted sum in the file's units. */
    uint64_t duplicates;  /* duplicate respondent-item rows merged (rows the input repeated) */
    uint64_t single_item; /* respondents with exactly one item */
    uint64_t no_item;     /* respondents with no item (in N) */
    /* --max-basket: respondents with more items are left out. Their rows are empty, they are
     * in no item's total, weigh nothing and are not in N (so N may be below n_resp). */
    unsigned char *left_out;   /* [n_resp] 1 for a respondent left out; NULL when none */
    uint64_t n_left_out;       /* how many */
    uint64_t largest_left_out; /* items of the largest of them */
    /* --merge-file: rows that became a respondent's second row of an item only because they
     * were renamed into it (not in duplicates), and the items rows were renamed into */
    uint64_t merge_collapsed, merge_groups;
    char *storage; /* owns the names */
} pm_incidence_t;

/* Builds the incidence of table t. On success *out owns a new incidence (pm_incidence_free).
 * Cost O(rows log k + items log items). Errors: PM_ENOMEM. */
pm_err_t pm_incidence_build(const pm_table_t *t, pm_incidence_t **out, pm_diag_t *diag);
/* The same on `threads` threads (0: all cores); the result does not depend on the number. */
pm_err_t pm_incidence_build_threads(const pm_table_t *t, unsigned threads, pm_incidence_t **out,
                                    pm_diag_t *diag);
void pm_incidence_free(pm_incidence_t *inc);

/* Index of item name, or -1. O(log items). */
long pm_incidence_find(const pm_incidence_t *inc, const char *name);

/* Share of item i: count/N, or wcount/W when weighted. */
double pm_incidence_share(const pm_incidence_t *inc, size_t i);

/* Kish's effective sample size (sum w)^2 / sum w^2; N when unweighted. */
double pm_incidence_neff(const pm_incidence_t *inc);

/* A weighted sum v held in the incidence's units (see wexp) in the units of the file's
 * weights; v itself when unweighted. */
double pm_incidence_wunits(const pm_incidence_t *inc, double v);

#ifdef __cplusplus
}
#endif
#endif
