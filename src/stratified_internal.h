/* Private to the pairs-within-segments files (src/stratified.c: one pair and the listed edges;
 * src/stratified_family.c: the Cochran-Mantel-Haenszel test of every pair of the family): the
 * CMH sums written once, so that a pair's cmh_p column and its p-value in the family are the
 * same bits, and the item -> respondents lists both scan. */
#ifndef PM_STRATIFIED_INTERNAL_H
#define PM_STRATIFIED_INTERNAL_H

#include <gsl/gsl_cdf.h>
#include <math.h>
#include <stddef.h>
#include <stdint.h>

#include "pairmap/stratified.h"

/* One stratum's share of the CMH sums: N respondents, r1 and c1 choosing each item; adds the
 * expected joint count r1 c1 / N to *se and the hypergeometric variance r1 (N - r1) c1
 * (N - c1) / (N^2 (N - 1)) to *sv (nothing for N = 1). Symmetric in r1 and c1 to the bit
 * (each item's factor is formed first and IEEE products commute), so a pair gives the same
 * p-value whichever item comes first, and pairs of equal per-stratum totals share theirs. */
static inline void pm_i_cmh_add(double N, double r1, double c1, double *se, double *sv) {
    *se += r1 * c1 / N;
    if (N > 1) {
        *sv += (r1 * (N - r1)) * (c1 * (N - c1)) / (N * N * (N - 1));
    }
}

/* The CMH p-value from the sums: observed joint count sa, expected se, variance sv; z =
 * (sa - se) / sqrt(sv), the normal tail in the sign's direction, two-sided as chi-square on
 * z^2 with 1 df; NaN when sv is 0 (no stratum where both items vary). */
static inline double pm_i_cmh_p(double sa, double se, double sv, pm_sign_t sign) {
    if (!(sv > 0)) {
        return NAN;
    }
    double z = (sa - se) / sqrt(sv);
    return sign == PM_SIGN_BOTH       ? gsl_cdf_chisq_Q(z * z, 1)
           : sign == PM_SIGN_POSITIVE ? gsl_cdf_ugaussian_Q(z)
                                      : gsl_cdf_ugaussian_P(z);
}

/* Item -> its respondents with a segment of column c (ascending), over the first nr
 * respondents: resp[start[i] .. start[i + 1]); tot[i * k + s] respondents of level s who chose
 * item i (k = c->n_levels). */
typedef struct {
    uint64_t *start; /* [items + 1] */
    uint32_t *resp;  /* [choices of respondents with a segment] */
    uint64_t *tot;   /* [items * k] */
} pm_i_strat_lists;

/* Builds the lists; 0, or PM_ENOMEM (nothing left allocated). O(nnz + items x levels). */
pm_err_t pm_i_strat_lists_build(const pm_incidence_t *inc, const pm_segcol_t *c, size_t nr,
                                pm_i_strat_lists *out);
void pm_i_strat_lists_free(pm_i_strat_lists *l);

/* src/stratified_rows.c: whether the one-pass count of the edges' joint counts per level fits
 * (items x items bits at most 32 MiB, edges x levels x threads counts at most 64 MiB). */
int pm_i_strat_rows_fits(size_t items, size_t edges, size_t levels, unsigned threads);
/* The joint counts per level of every edge i of e into nab[i * levels + s], over the
 * respondents q < nr with a level (c->of[q] >= 0), on `threads` threads (at most 8; the same
 * result on any number). 0, or PM_ENOMEM. */
pm_err_t pm_i_strat_rows_counts(const pm_incidence_t *inc, const pm_segcol_t *c, size_t nr,
                                const pm_pairs_t *pp, const pm_edges_t *e, unsigned threads,
                                uint64_t *nab);

#endif
