/* Pairs within segments (issue 14 point 3): for a pair of items and the strata of one segment
 * column, the Mantel-Haenszel common odds ratio with the Robins-Breslow-Greenland 95%
 * interval, the Cochran-Mantel-Haenszel test (no continuity correction), the Breslow-Day test
 * of equal odds ratios with Tarone's correction, and the Simpson-reversal flag
 * (src/stratified.c). Unweighted counts only. */
#ifndef PAIRMAP_STRATIFIED_H
#define PAIRMAP_STRATIFIED_H

#include <stddef.h>
#include <stdint.h>

#include "pairmap/assoc.h"
#include "pairmap/error.h"
#include "pairmap/incidence.h"
#include "pairmap/segments.h"
#include "pairmap/select.h"

#ifdef __cplusplus
extern "C" {
#endif

/* NaN where a figure is not defined (see pm_stratified_pair); reversed -1 then. */
typedef struct {
    double mh_or, mh_low, mh_high; /* mh_or may be 0 or +INFINITY (then no interval) */
    double cmh_p;                  /* one-sided in the direction of the sign, two-sided for both */
    double het_p;                  /* Breslow-Day with Tarone's correction */
    int reversed;                  /* 1, 0, or -1 (no Mantel-Haenszel odds ratio) */
} pm_strat_t;

/* The figures of one pair over k strata: stratum s has n[s] respondents, na[s] and nb[s]
 * choosing each item, nab[s] both. Per stratum the table A = nab, B = na - nab,
 * C = nb - nab, D = n - na - nb + nab.
 * - MH odds ratio sum(AD/n) / sum(BC/n); NaN when both sums are 0; 0 or +INFINITY when one
 *   is (then mh_low/mh_high NaN). Interval exp(log OR -/+ 1.959964 se), se the
 *   Robins-Breslow-Greenland (1986) estimate.
 * - CMH: z = (sum A - sum E) / sqrt(sum V), E = na nb / n, V = na (n - na) nb (n - nb) /
 *   (n^2 (n - 1)); p from the normal tail in the sign's direction (two-sided: chi-square 1 df
 *   on z^2); NaN when sum V = 0. A stratum where an item is chosen by none or all of its
 *   respondents (or of one respondent) has AD = BC = 0 and V = 0: it adds nothing to either.
 * - Breslow-Day over the informative strata (0 < na < n and 0 < nb < n), whose expected A
 *   under the common MH odds ratio solves the quadratic of the fixed margins, with Tarone's
 *   correction, chi-square on (informative strata - 1) df; NaN with fewer than 2 informative
 *   strata or an MH odds ratio of 0, +INFINITY or NaN. The other strata carry no
 *   information on their own odds ratio (A is fixed by the margins) and are left out.
 * - reversed: 1 when the crude odds ratio of the summed table (Woolf's 95% interval, all four
 *   cells > 0) and the MH odds ratio lie on opposite sides of 1 with both intervals
 *   excluding 1 (a Simpson reversal); 0 otherwise (also when the crude interval is not
 *   defined); -1 when the MH odds ratio is NaN. */
void pm_stratified_pair(size_t k, const uint64_t *n, const uint64_t *na, const uint64_t *nb,
                        const uint64_t *nab, pm_sign_t sign, pm_strat_t *out);

/* The figures of every edge of e (listed pairs of pp, over incidence inc) over the levels of
 * column c (respondents without a segment left out): out[i] for e->idx[i]. *out is
 * allocated here (free()), on `threads` threads (0: every core; at most 8), the same for any
 * number. Cost O(nnz + sum over edges of the respondents of item_b + levels x items); memory
 * O(nnz + levels x items + edges + threads x respondents). Errors: PM_ENOMEM, PM_EUSAGE (weighted).
 */
pm_err_t pm_stratified_edges(const pm_incidence_t *inc, const pm_segcol_t *c, const pm_pairs_t *pp,
                             const pm_edges_t *e, pm_sign_t sign, unsigned threads,
                             pm_strat_t **out, pm_diag_t *diag);

/* ---- --pair-test within: the Cochran-Mantel-Haenszel test of every pair of the family -------- */
typedef struct {
    pm_sign_t sign;   /* one-sided in its direction, two-sided for both (as pm_stratified_pair) */
    double q_limit;   /* as pm_assoc_opts_t.q_limit: q-values above it are only known to be so
                       * (+INFINITY); 1: exact everywhere */
    unsigned threads; /* 0: all cores */
} pm_strat_family_opts_t;

void pm_stratified_family_opts_init(pm_strat_family_opts_t *o);

typedef struct {
    double *p;            /* [pp->n] the CMH p-value of each listed pair (NaN: not defined) */
    double *q;            /* [pp->n] its Benjamini-Hochberg q over the family */
    uint64_t hypotheses;  /* the family: pp->hypotheses pairs */
    uint64_t seen_within; /* of them, chosen together by some respondent with a segment */
    uint64_t undefined;   /* of them, without a defined CMH test (taken as p = 1) */
    size_t classes;       /* classes of items by per-segment totals (0: none needed) */
} pm_strat_family_t;

/* The Cochran-Mantel-Haenszel test (pm_stratified_pair's cmh_p, the same bits) of every pair
 * of pp's family (all pairs of its eligible items, pairs never seen together included) over
 * the levels of column c, respondents without a segment left out, and Benjamini-Hochberg
 * over the family's hypotheses; a pair whose test is not defined (no segment where both items
 * vary) counts with p = 1. Pairs no respondent with a segment chose together are tested by
 * classes of items with equal per-segment totals (they share a p-value), unless sign is
 * positive and q_limit below 0.49 (their z is at most 0: p >= 1/2, only counted). *out is
 * initialised here (pm_stratified_family_destroy). Cost O(sum over respondents with a segment
 * of k^2 + seen pairs x levels + D^2 levels) for D classes; memory bounded by
 * pm_stratified_family_cost. Errors: PM_EUSAGE (weighted input; too many classes),
 * PM_ENOMEM. */
pm_err_t pm_stratified_family_run(const pm_incidence_t *inc, const pm_segcol_t *c,
                                  const pm_pairs_t *pp, const pm_strat_family_opts_t *o,
                                  pm_strat_family_t *out, pm_diag_t *diag);
/* An upper bound of the bytes pm_stratified_family_run holds at its peak: per thread items x
 * (4 levels + 12), the lists (8 per item and level, 4 per choice), and per seen pair of pp
 * up to 40 bytes (its p-value kept and sorted, its class combination). Always PM_OK. */
pm_err_t pm_stratified_family_cost(const pm_incidence_t *inc, const pm_segcol_t *c,
                                   const pm_pairs_t *pp, const pm_strat_family_opts_t *o,
                                   uint64_t *bytes);
void pm_stratified_family_destroy(pm_strat_family_t *f);

#ifdef __cplusplus
}
#endif
#endif
