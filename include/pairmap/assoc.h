/* Association measures, significance tests and false-discovery control for item pairs
 * (src/assoc.c). Definitions follow DESIGN.md: support, confidences, lift, phi, Jaccard,
 * expected count; Fisher's exact test where the smallest expected cell is below 5 (Cochran's
 * rule), else chi-square with 1 df without continuity correction; weighted input: chi-square
 * scaled by Kish's effective sample size; Benjamini-Hochberg q-values over the family: every
 * pair of eligible items whose smaller total reaches min_count (independent filtering on the
 * totals), pairs never seen together included. Distribution functions come from GSL. */
#ifndef PAIRMAP_ASSOC_H
#define PAIRMAP_ASSOC_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "pairmap/cooccur.h"
#include "pairmap/error.h"
#include "pairmap/incidence.h"

#ifdef __cplusplus
extern "C" {
#endif

typedef enum { PM_SIGN_POSITIVE = 0, PM_SIGN_NEGATIVE = 1, PM_SIGN_BOTH = 2 } pm_sign_t;
typedef enum { PM_TEST_FISHER = 0, PM_TEST_CHI2 = 1 } pm_test_t;

/* The measures of one pair (a, b). Counts are weighted sums when the input is weighted. */
typedef struct {
    double together, expected, support, confidence_ab, confidence_ba, lift, phi, jaccard;
    pm_test_t test;
    double p; /* one-sided in the direction of the sign, two-sided for PM_SIGN_BOTH */
    double q; /* Benjamini-Hochberg (NaN until computed) */
} pm_measures_t;

/* Measures of a 2x2 table from counts: N respondents, na and nb choosing each item, nab both.
 * Requires 0 < na, nb < N and nab <= min(na, nb). */
void pm_assoc_counts(uint64_t N, uint64_t na, uint64_t nb, uint64_t nab, pm_sign_t sign,
                     pm_measures_t *m);
/* The same from weighted sums, with chi-square scaled by neff (Kish) as the only test. */
void pm_assoc_weighted(double W, double wa, double wb, double wab, double neff, pm_sign_t sign,
                       pm_measures_t *m);

/* Fisher's exact test for the table [[nab, na-nab], [nb-nab, N-na-nb+nab]]:
 * alternative 1 = greater (P(X >= nab)), -1 = less, 0 = two-sided (sum of the table
 * probabilities not above the observed one, relative tolerance 1e-7). */
double pm_assoc_fisher(uint64_t N, uint64_t na, uint64_t nb, uint64_t nab, int alternative);

/* 95% (or 1-alpha) Jeffreys interval for x successes of n: Beta(x+1/2, n-x+1/2) quantiles,
 * with 0 as lower bound at x = 0 and 1 as upper bound at x = n (Brown, Cai & DasGupta 2001).
 * x and n may be fractional (weighted, effective sizes). */
void pm_assoc_jeffreys(double x, double n, double alpha, double *lo, double *hi);
/* Confidence of a -> b, n_ab / n_a (weighted: w_ab / w_a), with its 95% Jeffreys interval:
 * unweighted on (n_ab, n_a); weighted on Kish's effective size of a's respondents,
 * w_a^2 / w2_a (src/confidence.c; the numbers `pairmap partners` and the HTML page show).
 * inc gives n_a, w_a and w2_a; w_ab is in inc's internal units, as pm_pairs_t.w_ab holds it
 * (ignored when unweighted). */
void pm_assoc_confidence(const pm_incidence_t *inc, uint32_t a, uint64_t n_ab, double w_ab,
                         double *conf, double *lo, double *hi);
/* What pm_assoc_confidence solves: the confidence into *conf and the (x, n) of its Jeffreys
 * interval (pm_assoc_jeffreys(x, n, 0.05, ..) gives the interval pm_assoc_confidence gives). */
void pm_assoc_confidence_args(const pm_incidence_t *inc, uint32_t a, uint64_t n_ab, double w_ab,
                              double *conf, double *x, double *n);
/* pm_assoc_jeffreys(x[q], n[q], alpha, &lo[q], &hi[q]) for every q < k, the same values bit for
 * bit, on `threads` threads (0: all cores): each distinct (x, n) is solved once (a kept pair's
 * confidence shares its (n_ab, n_a) with many others). lo may be x and hi may be n (the
 * arguments are read first). Extra memory: 4 bytes a query, and a table of at most 16 bytes a
 * query while the queries are grouped; without it every query is solved on its own. */
void pm_assoc_jeffreys_many(const double *x, const double *n, size_t k, double alpha,
                            unsigned threads, double *lo, double *hi);
/* The p-quantile of Beta(a, b), a, b > 0 (the robust solver behind pm_assoc_jeffreys: Newton
 * steps on GSL's beta CDF inside a shrinking bracket). */
double pm_assoc_beta_quantile(double p, double a, double b);
/* The 95% Jeffreys interval of the share of each of the k items item[0..k) (as `items` prints
 * it: Kish's effective size when weighted) into lo[j], hi[j], on `threads` threads (0: all
 * cores); the values do not depend on the number. Always PM_OK: nothing is allocated here, and
 * threads that cannot start leave their work to the others. */
pm_err_t pm_assoc_share_intervals(const pm_incidence_t *inc, const uint32_t *item, size_t k,
                                  unsigned threads, double *lo, double *hi, pm_diag_t *diag);

/* ---- scoring every pair ---------------------------------------------------------------- */
typedef struct {
    pm_sign_t sign;
    uint32_t min_count; /* pairs seen together fewer times are tested but not listed */
    double min_share;   /* items below this share are not eligible */
    unsigned threads;   /* 0: all cores */
    int kernel;         /* PM_COUNTS_* */
    size_t dense_max_items;
    /* q-values are exact where they are at most q_limit (default 1: everywhere). Below 1, a
     * caller that only ever uses pairs with q <= q_limit (a --max-q of the same value) saves
     * the sorting of every larger p-value: they are counted as hypotheses, not ranked, and
     * pairs whose q exceeds q_limit get some q > q_limit (+INFINITY where p > q_limit). Under
     * a limit below 0.49 with sign positive (unweighted), a listed pair whose p-value is shown
     * to exceed the limit without computing it gets p = q = +INFINITY: one seen no more often
     * than expected (p >= 1/2), or one under Fisher's test whose first tail term alone
     * exceeds the limit. */
    double q_limit;
    pm_progress_fn progress;
    void *progress_ud;
    uint32_t *scratch[2]; /* optional scratch memory for the counting (pm_counts_opts_t) */
    size_t scratch_n;
    const pm_counts_t *given; /* optional: the pairs counted elsewhere (pm_counts_opts_t) */
} pm_assoc_opts_t;

void pm_assoc_opts_init(pm_assoc_opts_t *o);

/* The listed pairs with p- and q-values, ordered by (a, b). With sign negative or both and
 * min_count 0, pairs never seen together are listed too (items^2 of them). */
typedef struct {
    size_t n;
    uint32_t *a, *b, *n_ab; /* raw joint counts */
    double *w_ab;           /* weighted joint counts (NULL when unweighted) */
    double *p, *q;
    unsigned char *test; /* pm_test_t */
    pm_sign_t sign;
    /* the family */
    unsigned char *eligible; /* per item: 0 < n < N and the share reaches min_share */
    size_t n_eligible;
    unsigned char *in_family; /* per item: eligible, and chosen by at least min_count */
    size_t n_family;
    uint64_t hypotheses;    /* the family: n_family (n_family - 1) / 2 pairs */
    uint64_t seen;          /* pairs seen together */
    uint64_t below_count;   /* seen together fewer than min_count times: tested, not listed */
    uint64_t below_count_q; /* of those, the ones with q <= q_limit: their one-sided p (or
                             * two-sided, sign both) is small, so they also point in the
                             * sign's direction; left out by min_count alone unless a phi or
                             * lift bound would remove them too */
    uint64_t unseen;        /* pairs never seen together */
    size_t excluded_none, excluded_all, excluded_share; /* items left out, by reason */
    int kernel;
    uint64_t work;
    double t_count, t_measures; /* seconds */
    /* q-value lookup for any p of the family (sorted distinct p with their q) */
    double *qp, *qq;
    uint64_t *qr; /* the number of family p-values <= qp[i] (its rank) */
    size_t nq;
    double q_limit; /* as in the options: q-values above it are only known to be so */
} pm_pairs_t;

/* What pm_assoc_run(inc, o) will cost, before any of it is allocated: the counting's cost
 * (pm_counts_cost, min_keep = min_count) with bytes raised to an upper bound of the whole
 * scoring stage's peak: per kept pair PM_ASSOC_KEPT_BYTES, per pair seen fewer than min_count
 * times PM_ASSOC_PRUNED_BYTES, and, with sign negative and min_count 0, every pair of eligible
 * items listed. The constants are upper bounds of the measured peaks (README, Limits).
 * Errors: PM_ENOMEM. O(rows + items). */
#define PM_ASSOC_KEPT_BYTES(weighted) ((weighted) ? 128u : 96u)
#define PM_ASSOC_PRUNED_BYTES(weighted, ids) ((ids) ? ((weighted) ? 64u : 48u) : 32u)
pm_err_t pm_assoc_cost(const pm_incidence_t *inc, const pm_assoc_opts_t *o, pm_counts_cost_t *out,
                       pm_diag_t *diag);

/* Scoring runs in three steps, the counting in the middle called by the pipeline:
 *   pm_assoc_begin   eligible items, the log-factorial table, the stores for pruned pairs;
 *                    fills *co with the options the counting must run with
 *   pm_counts_build  (cooccur.h) the counting, with *co
 *   pm_assoc_finish  tests of the listed, pruned and never-seen pairs, Benjamini-Hochberg
 * pm_assoc_run (src/score.c) is the three in a row. *out owns the result (pm_pairs_free).
 * Cost O(sum k^2 + seen pairs log seen pairs + D^2) where D is the number of distinct item
 * totals (classes of never-seen pairs share one p-value). Errors: PM_ENOMEM (every allocation
 * is checked: tests/unit/test_assoc.c fails each in turn), PM_EUSAGE (too many classes of
 * never-seen pairs under sign negative or both), and the counting's (cooccur.h). Threads that
 * cannot start are no error (parallel.h). */
typedef struct pm_assoc_stage pm_assoc_stage_t;
pm_err_t pm_assoc_begin(const pm_incidence_t *inc, const pm_assoc_opts_t *o, pm_assoc_stage_t **st,
                        pm_counts_opts_t *co, pm_diag_t *diag);
/* Takes cnt (freed here) and st (freed here, whatever the outcome). */
pm_err_t pm_assoc_finish(pm_assoc_stage_t *st, pm_counts_t *cnt, pm_pairs_t **out, pm_diag_t *diag);
/* Frees a stage that pm_assoc_finish will not see (the counting failed); NULL is fine. */
void pm_assoc_stage_free(pm_assoc_stage_t *st);
pm_err_t pm_assoc_run(const pm_incidence_t *inc, const pm_assoc_opts_t *o, pm_pairs_t **out,
                      pm_diag_t *diag);
void pm_pairs_free(pm_pairs_t *p);

/* All measures of listed pair k (q included). */
void pm_pairs_measures(const pm_pairs_t *pp, const pm_incidence_t *inc, size_t k, pm_measures_t *m);
/* Measures of any eligible pair (a, b) with joint counts nab/wab, q from the family (NaN for
 * a pair outside it: not tested). */
void pm_pairs_measure_any(const pm_pairs_t *pp, const pm_incidence_t *inc, uint32_t a, uint32_t b,
                          uint32_t nab, double wab, pm_measures_t *m);
/* The q-value of a p-value of the family (the q of the largest family p-value <= p);
 * +INFINITY for p > q_limit. */
double pm_pairs_qvalue(const pm_pairs_t *pp, double p);
/* The rank of a p-value of the family: how many family p-values are at most p (0 for NaN;
 * the family's size for p above q_limit, where ranks are not kept). */
uint64_t pm_pairs_prank(const pm_pairs_t *pp, double p);
/* Index of listed pair (a, b), a < b, or -1. */
long pm_pairs_find(const pm_pairs_t *pp, uint32_t a, uint32_t b);

/* Benjamini-Hochberg q-values of p[0..n) into q (q may equal p). Ties share a q. O(n log n). */
pm_err_t pm_assoc_bh(const double *p, size_t n, double *q);

#ifdef __cplusplus
}
#endif
#endif
