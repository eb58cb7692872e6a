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
 * allocated here (free()). Cost O(nnz + sum over edges of the respondents of item_b + levels
 * x items); memory O(nnz + levels x items + edges). Errors: PM_ENOMEM, PM_EUSAGE (weighted). */
pm_err_t pm_stratified_edges(const pm_incidence_t *inc, const pm_segcol_t *c, const pm_pairs_t *pp,
                             const pm_edges_t *e, pm_sign_t sign, pm_strat_t **out,
                             pm_diag_t *diag);

#ifdef __cplusplus
}
#endif
#endif
