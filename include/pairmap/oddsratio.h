/* Odds ratios of item pairs with 95% intervals (src/oddsratio.c). The 2x2 table of a pair
 * (a, b) is [[both, a only], [b only, neither]] = [[nab, na - nab], [nb - nab, N - na - nb + nab]].
 * Two branches, chosen as the pair's test is (DESIGN.md):
 *  - Woolf: where the pair takes the chi-square test (Cochran's rule) and no cell is zero, the
 *    sample odds ratio ad/bc with Woolf's interval exp(log OR +- z sqrt(1/a + 1/b + 1/c + 1/d)),
 *    z the 97.5% normal quantile (Woolf 1955, Ann. Hum. Genet. 19:251-253);
 *  - exact: where it takes Fisher's test, and for any table with a zero cell, the conditional
 *    maximum-likelihood estimate (the odds ratio at which the mean of Fisher's noncentral
 *    hypergeometric distribution, given the margins, equals nab) with the exact interval that
 *    inverts the two one-sided conditional tests at 2.5% each (Cornfield 1956). At the edges of
 *    the support: nab at its smallest possible value gives estimate and lower bound 0, at its
 *    largest estimate and upper bound +infinity.
 * Weighted tables take the Woolf branch on the weighted cells, with the variance scaled by
 * Kish's effective sample size (each cell times neff / W); a weighted table with a zero cell
 * has the cross product as estimate (0 or +infinity) and no interval (NaN). */
#ifndef PAIRMAP_ODDSRATIO_H
#define PAIRMAP_ODDSRATIO_H

#include <stdint.h>

#include "pairmap/assoc.h"

#ifdef __cplusplus
extern "C" {
#endif

typedef enum { PM_OR_WOOLF = 0, PM_OR_EXACT = 1 } pm_or_method_t;

typedef struct {
    double estimate, low, high;
    pm_or_method_t method;
} pm_oddsratio_t;

/* The odds ratio of the unweighted table of (N, na, nb, nab), whose test (pm_measures_t.test,
 * from Cochran's rule) picks the branch. Requires 0 < na, nb < N and
 * max(0, na + nb - N) <= nab <= min(na, nb). Cost: Woolf O(1); exact O(s) per evaluation of
 * the conditional distribution (s its effective width, a few standard deviations), about 8
 * evaluations in all (measured on the bench data). */
void pm_oddsratio_counts(uint64_t N, uint64_t na, uint64_t nb, uint64_t nab, pm_test_t test,
                         pm_oddsratio_t *out);

/* The exact branch alone (conditional MLE and exact interval), whatever Cochran's rule says:
 * for tests and for `explain`. Same requirements as pm_oddsratio_counts. */
void pm_oddsratio_exact(uint64_t N, uint64_t na, uint64_t nb, uint64_t nab, pm_oddsratio_t *out);

/* The weighted table of weight sums W, wa, wb, wab with Kish's effective size neff. */
void pm_oddsratio_weighted(double W, double wa, double wb, double wab, double neff,
                           pm_oddsratio_t *out);

#ifdef __cplusplus
}
#endif
#endif
