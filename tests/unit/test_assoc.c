/* Unit tests of src/assoc.c: the measures of a 2x2 table on published worked examples,
 * Fisher's exact test against exact hypergeometric sums in integer arithmetic, the Jeffreys
 * interval, Benjamini-Hochberg on hand-computed cases, and pm_assoc_run: the family of
 * hypotheses, and q-values that do not depend on --min-count. */
#include "unit.h"

#include <gsl/gsl_cdf.h>
#include <math.h>

#include "pairmap/assoc.h"
#include "pairmap/cooccur.h"
#include "pairmap/select.h"
#include "util.h"

/* |got - want| <= tol * max(|want|, tiny) */
static void near_rel(double got, double want, double tol, const char *what) {
    double scale = fabs(want) > 1e-300 ? fabs(want) : 1e-300;
    if (!(fabs(got - want) <= tol * scale)) {
        fail_msg("%s: got %.17g, expected %.17g (relative error %.3g)", what, got, want,
                 fabs(got - want) / scale);
    }
}

/* ==== worked examples ======================================================================== */

/* Tan, Steinbach & Kumar, Introduction to Data Mining, the tea/coffee table (from memory):
 * N = 1000, tea 200, coffee 800, both 150. */
static void test_assoc_counts_tea_coffee(void **state) {
    (void)state;
    pm_measures_t m;
    pm_assoc_counts(1000, 200, 800, 150, PM_SIGN_BOTH, &m);
    assert_float_equal(m.together, 150, 0);
    assert_float_equal(m.support, 0.15, 1e-15);       /* Tan et al. */
    assert_float_equal(m.confidence_ab, 0.75, 1e-15); /* tea -> coffee, Tan et al. */
    assert_float_equal(m.lift, 0.9375, 1e-15);        /* Tan et al. */
    assert_float_equal(m.phi, -0.0625, 1e-15);        /* Tan et al. */
    /* the rest by the definitions of DESIGN.md, computed by hand */
    assert_float_equal(m.confidence_ba, 150.0 / 800.0, 1e-15);
    assert_float_equal(m.jaccard, 150.0 / 850.0, 1e-15);
    assert_float_equal(m.expected, 160.0, 1e-12);
    /* the smallest expected cell is 40 (Cochran's rule, common practice): chi-square; chi2 =
     * N phi^2 = 3.90625 and p = 0.04810682788851937 from
     * scipy.stats.chi2_contingency([[150, 50], [650, 150]], correction=False) */
    assert_int_equal(m.test, PM_TEST_CHI2);
    near_rel(m.p, 0.04810682788851937, 1e-12, "tea/coffee two-sided p");
    assert_true(isnan(m.q));
    /* one-sided: phi < 0, so "positive" gets the large tail and "negative" the small half */
    pm_assoc_counts(1000, 200, 800, 150, PM_SIGN_NEGATIVE, &m);
    near_rel(m.p, 0.04810682788851937 / 2, 1e-12, "tea/coffee one-sided negative p");
    pm_assoc_counts(1000, 200, 800, 150, PM_SIGN_POSITIVE, &m);
    near_rel(m.p, 1 - 0.04810682788851937 / 2, 1e-12, "tea/coffee one-sided positive p");
    /* the same table with the items swapped: symmetric measures, swapped confidences */
    pm_measures_t s;
    pm_assoc_counts(1000, 800, 200, 150, PM_SIGN_BOTH, &s);
    assert_float_equal(s.phi, -0.0625, 1e-15);
    assert_float_equal(s.confidence_ab, 150.0 / 800.0, 1e-15);
    assert_float_equal(s.confidence_ba, 0.75, 1e-15);
}

/* Fisher (1935), The Design of Experiments: the lady tasting tea, 8 cups, 4 with milk first,
 * 3 of her 4 "milk first" picks right. Two-sided p = 34/70 = 0.485714...; one-sided
 * (greater) 17/70 (both from the hypergeometric counts 1, 16, 36, 16, 1 of 70). */
static void test_assoc_fisher_tea_tasting(void **state) {
    (void)state;
    near_rel(pm_assoc_fisher(8, 4, 4, 3, 0), 34.0 / 70.0, 1e-13, "two-sided");
    near_rel(pm_assoc_fisher(8, 4, 4, 3, 1), 17.0 / 70.0, 1e-13, "greater");
    near_rel(pm_assoc_fisher(8, 4, 4, 3, -1), 69.0 / 70.0, 1e-13, "less");
    near_rel(pm_assoc_fisher(8, 4, 4, 4, 1), 1.0 / 70.0, 1e-13, "all four right");
    near_rel(pm_assoc_fisher(8, 4, 4, 4, 0), 2.0 / 70.0, 1e-13, "all four right, two-sided");
    near_rel(pm_assoc_fisher(8, 4, 4, 2, 0), 1.0, 1e-15, "the mode");
    /* through pm_assoc_counts: the smallest expected cell is 2 < 5, so Fisher */
    pm_measures_t m;
    pm_assoc_counts(8, 4, 4, 3, PM_SIGN_BOTH, &m);
    assert_int_equal(m.test, PM_TEST_FISHER);
    near_rel(m.p, 34.0 / 70.0, 1e-13, "pm_assoc_counts two-sided");
    pm_assoc_counts(8, 4, 4, 3, PM_SIGN_POSITIVE, &m);
    near_rel(m.p, 17.0 / 70.0, 1e-13, "pm_assoc_counts greater");
    assert_float_equal(m.phi, 0.5, 1e-15); /* (8*3 - 16) / sqrt(4*4*4*4), by hand */
}

/* Binomial coefficients as exact integers (Pascal's triangle), up to C(60, 30) < 2^57. */
#define BMAX 60
static uint64_t binom[BMAX + 1][BMAX + 1];

static void binom_init(void) {
    for (int n = 0; n <= BMAX; n++) {
        binom[n][0] = binom[n][n] = 1;
        for (int k = 1; k < n; k++) {
            binom[n][k] = binom[n - 1][k - 1] + binom[n - 1][k];
        }
    }
}

/* Fisher's p-values by exact hypergeometric sums: the number of tables C(K,k) C(N-K,n-k) in
 * integers, divided once by C(N,n). Two-sided: tables whose count is at most the observed one
 * times 1 + 1e-7 (the relative tolerance of assoc.h, as scipy's fisher_exact uses), decided
 * exactly as c - obs <= floor(obs / 10^7). */
static void exact_fisher(int N, int K, int n, int x, double *greater, double *less, double *two) {
    int lo = n - (N - K) > 0 ? n - (N - K) : 0, hi = K < n ? K : n;
    uint64_t tot = binom[N][n], g = 0, l = 0, t = 0;
    uint64_t obs = binom[K][x] * binom[N - K][n - x];
    uint64_t slack = obs / 10000000u;
    for (int k = lo; k <= hi; k++) {
        uint64_t c = binom[K][k] * binom[N - K][n - k];
        if (k >= x) {
            g += c;
        }
        if (k <= x) {
            l += c;
        }
        if (c <= obs || c - obs <= slack) {
            t += c;
        }
    }
    *greater = (double)((long double)g / (long double)tot);
    *less = (double)((long double)l / (long double)tot);
    *two = (double)((long double)t / (long double)tot);
}

static void test_assoc_fisher_exact_sums(void **state) {
    (void)state;
    binom_init();
    static const int sizes[] = {2, 3, 4, 5, 6, 7, 8, 9, 10, 12, 15, 20, 24, 31, 40, 47, 60};
    double worst = 0;
    long checked = 0;
    for (size_t si = 0; si < sizeof sizes / sizeof sizes[0]; si++) {
        int N = sizes[si];
        int step = N > 30 ? 3 : 1;
        for (int K = 1; K < N; K += step) {
            for (int n = 1; n < N; n += step) {
                int lo = n - (N - K) > 0 ? n - (N - K) : 0, hi = K < n ? K : n;
                for (int x = lo; x <= hi; x++) {
                    double g, l, t;
                    exact_fisher(N, K, n, x, &g, &l, &t);
                    double pg =
                        pm_assoc_fisher((uint64_t)N, (uint64_t)K, (uint64_t)n, (uint64_t)x, 1);
                    double pl =
                        pm_assoc_fisher((uint64_t)N, (uint64_t)K, (uint64_t)n, (uint64_t)x, -1);
                    double pt =
                        pm_assoc_fisher((uint64_t)N, (uint64_t)K, (uint64_t)n, (uint64_t)x, 0);
                    double e[3] = {fabs(pg - g) / g, fabs(pl - l) / l, fabs(pt - t) / t};
                    for (int q = 0; q < 3; q++) {
                        if (!(e[q] <= 1e-11)) {
                            fail_msg("N=%d na=%d nb=%d nab=%d: greater %.17g/%.17g less "
                                     "%.17g/%.17g two-sided %.17g/%.17g",
                                     N, K, n, x, pg, g, pl, l, pt, t);
                        }
                        worst = e[q] > worst ? e[q] : worst;
                    }
                    checked++;
                }
            }
        }
    }
    print_message("fisher: %ld tables, largest relative deviation %.3g\n", checked, worst);
}

/* Large tables: the tails stay in [0, 1] and overlap in the point probability, and the
 * two-sided p is at least the smaller tail (that tail's terms are all below the observed
 * one, the distribution being unimodal). */
static void test_assoc_fisher_large_tables(void **state) {
    (void)state;
    static const uint64_t tabs[][4] = {
        {1000000, 20, 30, 0},
        {1000000, 20, 30, 5},
        {10000000, 5000, 4000, 2},
        {10000000, 5000, 4000, 40},
        {5000000, 2500000, 3, 3},
        {200000, 100000, 100000, 50000},
        {200000, 100000, 100000, 50500},
    };
    for (size_t i = 0; i < sizeof tabs / sizeof tabs[0]; i++) {
        uint64_t N = tabs[i][0], a = tabs[i][1], b = tabs[i][2], x = tabs[i][3];
        double g = pm_assoc_fisher(N, a, b, x, 1), l = pm_assoc_fisher(N, a, b, x, -1);
        double t = pm_assoc_fisher(N, a, b, x, 0);
        assert_true(g >= 0 && g <= 1 && l >= 0 && l <= 1 && t >= 0 && t <= 1);
        /* P(X >= x) + P(X <= x) = 1 + P(X = x) >= 1 */
        assert_true(g + l >= 1 - 1e-12);
        double small = g < l ? g : l;
        assert_true(t >= small * (1 - 1e-9));
    }
    /* x at the extremes of the support */
    assert_true(pm_assoc_fisher(100, 10, 20, 0, 1) == 1.0);
    assert_true(pm_assoc_fisher(100, 10, 20, 10, -1) == 1.0);
}

/* ==== weighted measures ====================================================================== */

/* Integer weights give the point measures of the rows repeated that many times (issue 2);
 * the test is chi-square with Kish's neff in place of N. */
static void test_assoc_weighted_matches_counts(void **state) {
    (void)state;
    /* weight 2 on a table of N = 500: counts 100, 400, 75 become 200, 800, 150 of 1000 */
    pm_measures_t w, c;
    pm_assoc_weighted(1000, 200, 800, 150, 500, PM_SIGN_BOTH, &w);
    pm_assoc_counts(1000, 200, 800, 150, PM_SIGN_BOTH, &c);
    assert_float_equal(w.support, c.support, 1e-15);
    assert_float_equal(w.confidence_ab, c.confidence_ab, 1e-15);
    assert_float_equal(w.confidence_ba, c.confidence_ba, 1e-15);
    assert_float_equal(w.lift, c.lift, 1e-15);
    assert_float_equal(w.phi, c.phi, 1e-15);
    assert_float_equal(w.jaccard, c.jaccard, 1e-15);
    assert_float_equal(w.expected, c.expected, 1e-12);
    assert_int_equal(w.test, PM_TEST_CHI2);
    /* chi2 = neff phi^2 = 500 * 0.0625^2 */
    near_rel(w.p, gsl_cdf_chisq_Q(500 * 0.0625 * 0.0625, 1), 1e-14, "weighted p");
    /* with neff = W it is the unweighted chi-square */
    pm_assoc_weighted(1000, 200, 800, 150, 1000, PM_SIGN_BOTH, &w);
    near_rel(w.p, c.p, 1e-14, "weighted p with neff = N");
}

/* ==== Jeffreys interval ====================================================================== */

static void test_assoc_jeffreys_edges(void **state) {
    (void)state;
    double lo, hi;
    /* Brown, Cai & DasGupta (2001): lower bound 0 at x = 0, upper bound 1 at x = n */
    pm_assoc_jeffreys(0, 10, 0.05, &lo, &hi);
    assert_true(lo == 0.0);
    near_rel(hi, 0.21719626750921053, 1e-9, "hi(0, 10)"); /* scipy.stats.beta.ppf(.975, .5, 10.5) */
    pm_assoc_jeffreys(10, 10, 0.05, &lo, &hi);
    assert_true(hi == 1.0);
    near_rel(lo, 0.7828037324907894, 1e-9, "lo(10, 10)"); /* beta.ppf(.025, 10.5, .5) */
    /* interior values from scipy.stats.beta.ppf([0.025, 0.975], x + 0.5, n - x + 0.5) */
    static const double ref[][4] = {
        {3, 10, 0.09269459393815316, 0.6058183181486713},
        {150, 1000, 0.12889304420708794, 0.17312933343625642},
        /* x = 1 of 10^6: gsl_cdf_beta_Pinv returns NaN here (API-NOTES.md, GSL) */
        {1, 1000000, 1.0789766246541867e-07, 4.6741920467298275e-06},
        /* n = 10^7: gsl_cdf_beta_P gives NaN close to the mean, where the solver steps */
        {8487500, 10000000, 0.8485278312302241, 0.8489719668919768},
        {2112500, 10000000, 0.2109970861500742, 0.21150308099604895},
        /* more of the same command, spanning the sizes the property test below walks */
        {1, 2, 0.06083027592009732, 0.9391697240799026},
        {5, 7, 0.352338345040579, 0.9352717330505166},
        {25, 50, 0.364686111382503, 0.6353138886174969},
        {300, 1000, 0.2722061579361612, 0.3289496539247107},
        {61728, 123457, 0.4972069021709211, 0.5027849980327411},
        {999999, 1000000, 0.9999953258079533, 0.9999998921023375},
    };
    for (size_t i = 0; i < sizeof ref / sizeof ref[0]; i++) {
        pm_assoc_jeffreys(ref[i][0], ref[i][1], 0.05, &lo, &hi);
        near_rel(lo, ref[i][2], 1e-9, "jeffreys lower");
        near_rel(hi, ref[i][3], 1e-9, "jeffreys upper");
    }
    /* x = 0: lower bound 0 (Brown, Cai & DasGupta 2001), upper bound
     * scipy.stats.beta.ppf(0.975, 0.5, n + 0.5) for n = 1, 37, 1000, 1e6, 1e7 */
    static const double zero[][2] = {
        {1, 0.8532536836904248},
        {37, 0.06520745644543387},
        {1000, 0.0025081643414222978},
        {1000000, 2.5119393107467838e-06},
        {10000000, 2.5119427153660024e-07},
    };
    for (size_t i = 0; i < sizeof zero / sizeof zero[0]; i++) {
        pm_assoc_jeffreys(0, zero[i][0], 0.05, &lo, &hi);
        assert_true(lo == 0.0);
        near_rel(hi, zero[i][1], 1e-9, "jeffreys upper at x = 0");
        /* and the mirror at x = n */
        pm_assoc_jeffreys(zero[i][0], zero[i][0], 0.05, &lo, &hi);
        assert_true(hi == 1.0);
        near_rel(lo, 1 - zero[i][1], 1e-9, "jeffreys lower at x = n");
    }
    /* n = 1 */
    pm_assoc_jeffreys(0, 1, 0.05, &lo, &hi);
    assert_true(lo == 0.0 && hi > 0 && hi < 1);
    pm_assoc_jeffreys(1, 1, 0.05, &lo, &hi);
    assert_true(hi == 1.0 && lo > 0 && lo < 1);
}

/* lo < x/n < hi inside, both bounds increasing in x, the bounds mirror under x -> n - x
 * (Beta quantile symmetry). The values themselves are checked against scipy's tables above, not
 * with GSL's CDF, which is the one the solver inverts. */
static void test_assoc_jeffreys_properties(void **state) {
    (void)state;
    static const double ns[] = {2, 7, 50, 1000, 123457, 1e6, 1e7};
    for (size_t i = 0; i < sizeof ns / sizeof ns[0]; i++) {
        double n = ns[i];
        double plo = -1, phi = -1;
        int steps = 40;
        for (int s = 0; s <= steps; s++) {
            /* x from 0 to n, denser near both ends */
            double u = (double)s / steps;
            double x = floor(n * (u < 0.5 ? 2 * u * u : 1 - 2 * (1 - u) * (1 - u)));
            if (s > 0 && s < steps && (x <= 0 || x >= n)) {
                continue;
            }
            double lo, hi;
            pm_assoc_jeffreys(x, n, 0.05, &lo, &hi);
            assert_true(isfinite(lo) && isfinite(hi));
            assert_true(lo >= 0 && hi <= 1);
            if (x > 0 && x < n) {
                if (!(lo < x / n && x / n < hi)) {
                    fail_msg("x=%g n=%g: [%.17g, %.17g] misses %.17g", x, n, lo, hi, x / n);
                }
                double mlo, mhi;
                pm_assoc_jeffreys(n - x, n, 0.05, &mlo, &mhi);
                near_rel(mlo, 1 - hi, 1e-8, "mirror lower");
                near_rel(mhi, 1 - lo, 1e-8, "mirror upper");
            }
            if (!(lo >= plo && hi >= phi)) {
                fail_msg("n=%g: bounds decrease at x=%g", n, x);
            }
            plo = lo;
            phi = hi;
        }
    }
    /* fractional counts (weighted shares, effective sizes) */
    double lo, hi;
    pm_assoc_jeffreys(2.5, 10.2, 0.05, &lo, &hi);
    assert_true(lo > 0 && lo < 2.5 / 10.2 && hi > 2.5 / 10.2 && hi < 1);
    /* the 90% interval lies inside the 95% one */
    double lo90, hi90;
    pm_assoc_jeffreys(30, 100, 0.10, &lo90, &hi90);
    pm_assoc_jeffreys(30, 100, 0.05, &lo, &hi);
    assert_true(lo < lo90 && hi90 < hi);
}

/* ==== Benjamini-Hochberg ===================================================================== */

/* Hand-computed with q_(i) = min_{j >= i} p_(j) m / j; statsmodels'
 * multipletests(method="fdr_bh") gives the same values (checked when writing this test). */
static void test_assoc_bh_hand_cases(void **state) {
    (void)state;
    static const struct {
        size_t n;
        double p[10], q[10];
    } cases[] = {
        /* ties at 0.04: the raw values 0.05, 0.075, 0.0667, 0.05, 0.2 fold down to 0.05 */
        {5, {0.01, 0.04, 0.03, 0.04, 0.20}, {0.05, 0.05, 0.05, 0.05, 0.2}},
        /* tied smallest pair: both get 0.02 * 4 / 2, not 0.02 * 4 / 1 */
        {4, {0.02, 0.5, 0.02, 0.9}, {0.04, 2.0 / 3.0, 0.04, 0.9}},
        {3, {0.5, 0.5, 0.5}, {0.5, 0.5, 0.5}},
        {10,
         {0.216, 0.001, 0.008, 0.039, 0.041, 0.042, 0.06, 0.074, 0.205, 0.212},
         {0.216, 0.01, 0.04, 0.084, 0.084, 0.084, 0.1, 0.10571428571428572, 0.216, 0.216}},
        {1, {0.3}, {0.3}},
        {2, {1.0, 1.0}, {1.0, 1.0}},
        {3, {0.0, 0.0, 0.7}, {0.0, 0.0, 0.7}},
    };
    for (size_t c = 0; c < sizeof cases / sizeof cases[0]; c++) {
        double q[10];
        assert_int_equal(pm_assoc_bh(cases[c].p, cases[c].n, q), PM_OK);
        for (size_t i = 0; i < cases[c].n; i++) {
            if (fabs(q[i] - cases[c].q[i]) > 1e-15) {
                fail_msg("case %zu, p[%zu] = %g: q %.17g, expected %.17g", c, i, cases[c].p[i],
                         q[i], cases[c].q[i]);
            }
        }
        /* in place (q may equal p) */
        double pq[10];
        memcpy(pq, cases[c].p, sizeof pq);
        assert_int_equal(pm_assoc_bh(pq, cases[c].n, pq), PM_OK);
        assert_memory_equal(pq, q, cases[c].n * sizeof *q);
    }
    assert_int_equal(pm_assoc_bh(NULL, 0, NULL), PM_OK);
    /* allocation failure */
    double p[3] = {0.1, 0.2, 0.3}, q[3];
    pm_i_alloc_fail_after(1);
    assert_int_equal(pm_assoc_bh(p, 3, q), PM_ENOMEM);
    pm_i_alloc_fail_after(0);
}

/* ==== pm_assoc_run
 * ================================================================================ */

/* Joint counts by the definition. */
static void naive_pairs(const pm_incidence_t *inc, uint32_t *n, double *w) {
    size_t E = inc->n_items;
    memset(n, 0, E * E * sizeof *n);
    if (w) {
        memset(w, 0, E * E * sizeof *w);
    }
    for (size_t r = 0; r < inc->n_resp; r++) {
        for (uint64_t i = inc->row_ptr[r]; i < inc->row_ptr[r + 1]; i++) {
            for (uint64_t j = i + 1; j < inc->row_ptr[r + 1]; j++) {
                size_t at = (size_t)inc->col[i] * E + inc->col[j];
                n[at]++;
                if (w) {
                    w[at] += inc->weight[r];
                }
            }
        }
    }
}

static pm_pairs_t *run(const pm_incidence_t *inc, pm_sign_t sign, uint32_t min_count,
                       double min_share, unsigned threads, int kernel) {
    pm_assoc_opts_t o;
    pm_assoc_opts_init(&o);
    o.sign = sign;
    o.min_count = min_count;
    o.min_share = min_share;
    o.threads = threads;
    o.kernel = kernel;
    pm_pairs_t *pp = NULL;
    pm_diag_t d;
    pm_diag_clear(&d);
    pm_err_t rc = pm_assoc_run(inc, &o, &pp, &d);
    if (rc != PM_OK) {
        fail_msg("pm_assoc_run: %s", d.msg);
    }
    return pp;
}

/* An incidence whose item 0 nobody chose and item 1 everybody chose, with a random rest. */
static pm_incidence_t *family_inc(uint64_t seed, size_t R, size_t E) {
    pm_incidence_t *base = unit_inc_random(seed, R, E - 2, 0);
    uint64_t *rp = malloc((R + 1) * sizeof *rp);
    uint32_t *col = malloc((base->row_ptr[R] + R) * sizeof *col);
    assert_true(rp && col);
    size_t nnz = 0;
    for (size_t r = 0; r < R; r++) {
        rp[r] = nnz;
        col[nnz++] = 1; /* everybody */
        for (uint64_t k = base->row_ptr[r]; k < base->row_ptr[r + 1]; k++) {
            col[nnz++] = base->col[k] + 2;
        }
    }
    rp[R] = nnz;
    pm_incidence_t *inc = unit_inc_new(E, R, rp, col, NULL, 0);
    free(rp);
    free(col);
    pm_incidence_free(base);
    return inc;
}

static void test_assoc_run_family_counts(void **state) {
    (void)state;
    size_t E = 70, R = 1200;
    pm_incidence_t *inc = family_inc(3, R, E);
    uint32_t *nn = malloc(E * E * sizeof *nn);
    assert_non_null(nn);
    naive_pairs(inc, nn, NULL);
    static const uint32_t mins[] = {0, 1, 3, 10};
    static const double shares[] = {0, 0.02};
    for (size_t si = 0; si < 2; si++) {
        /* eligible: 0 < n < N and share >= min_share */
        unsigned char el[70];
        size_t ne = 0, none = 0, all = 0, low = 0;
        for (size_t i = 0; i < E; i++) {
            el[i] = 0;
            if (inc->count[i] == 0) {
                none++;
            } else if (inc->count[i] == inc->N) {
                all++;
            } else if ((double)inc->count[i] / (double)inc->N < shares[si]) {
                low++;
            } else {
                el[i] = 1;
                ne++;
            }
        }
        assert_true(none >= 1 && all == 1);
        for (size_t mi = 0; mi < sizeof mins / sizeof mins[0]; mi++) {
            uint64_t seen = 0, below = 0;
            for (size_t a = 0; a < E; a++) {
                for (size_t b = a + 1; b < E; b++) {
                    uint32_t n = nn[a * E + b];
                    if (el[a] && el[b] && n) {
                        seen++;
                        below += n < mins[mi];
                    }
                }
            }
            for (int sign = PM_SIGN_POSITIVE; sign <= PM_SIGN_BOTH; sign++) {
                pm_pairs_t *pp = run(inc, (pm_sign_t)sign, mins[mi], shares[si], 2, 0);
                assert_int_equal(pp->n_eligible, ne);
                assert_int_equal(pp->hypotheses, (uint64_t)ne * (ne - 1) / 2);
                assert_int_equal(pp->excluded_none, none);
                assert_int_equal(pp->excluded_all, all);
                assert_int_equal(pp->excluded_share, low);
                assert_int_equal(pp->seen, seen);
                assert_int_equal(pp->below_count, below);
                assert_int_equal(pp->unseen, pp->hypotheses - seen);
                for (size_t i = 0; i < E; i++) {
                    assert_int_equal(pp->eligible[i], el[i]);
                }
                /* listed: the kept seen pairs; all pairs under negative with min-count 0 */
                uint64_t listed = seen - below;
                if (sign == PM_SIGN_NEGATIVE && mins[mi] == 0) {
                    listed = pp->hypotheses;
                }
                assert_int_equal(pp->n, listed);
                for (size_t k = 0; k < pp->n; k++) {
                    assert_true(el[pp->a[k]] && el[pp->b[k]] && pp->a[k] < pp->b[k]);
                    assert_int_equal(pp->n_ab[k], nn[pp->a[k] * E + pp->b[k]]);
                    if (k > 0) {
                        assert_true(pp->a[k - 1] < pp->a[k] ||
                                    (pp->a[k - 1] == pp->a[k] && pp->b[k - 1] < pp->b[k]));
                    }
                    assert_int_equal(pm_pairs_find(pp, pp->a[k], pp->b[k]), (long)k);
                }
                pm_pairs_free(pp);
            }
        }
    }
    free(nn);
    pm_incidence_free(inc);
}

/* The p-value of every pair of the family, computed here pair by pair: pm_assoc_counts or
 * pm_assoc_weighted, and 1 for never-seen pairs under "positive" (DESIGN.md). */
static double family_p(const pm_incidence_t *inc, pm_sign_t sign, size_t a, size_t b, uint32_t nab,
                       double wab) {
    if (nab == 0 && sign == PM_SIGN_POSITIVE) {
        return 1.0;
    }
    pm_measures_t m;
    if (inc->wcount) {
        pm_assoc_weighted(inc->W, inc->wcount[a], inc->wcount[b], wab, pm_incidence_neff(inc), sign,
                          &m);
    } else {
        pm_assoc_counts(inc->N, inc->count[a], inc->count[b], nab, sign, &m);
    }
    return m.p;
}

/* Benjamini & Hochberg (1995), step-up, from the definition, written here apart from the
 * project's code: q_(i) = min over j >= i of p_(j) m / j for p sorted ascending (ties share
 * the q of the last of them). Checked against statsmodels on Southern Women above. */
typedef struct {
    double p;
    size_t i;
} ref_pi;

static int ref_pi_cmp(const void *x, const void *y) {
    const ref_pi *a = x, *b = y;
    return a->p < b->p ? -1 : a->p > b->p ? 1 : (a->i > b->i) - (a->i < b->i);
}

static void ref_bh(const double *p, size_t m, double *q) {
    ref_pi *v = malloc((m ? m : 1) * sizeof *v);
    assert_non_null(v);
    for (size_t i = 0; i < m; i++) {
        v[i].p = p[i];
        v[i].i = i;
    }
    qsort(v, m, sizeof *v, ref_pi_cmp);
    double run = 1;
    for (size_t j = m; j-- > 0;) {
        double val = v[j].p * (double)m / (double)(j + 1);
        run = val < run ? val : run;
        q[v[j].i] = run;
    }
    for (size_t j = m; j-- > 1;) { /* ties: the q of the largest rank among them */
        if (v[j - 1].p == v[j].p) {
            q[v[j - 1].i] = q[v[j].i];
        }
    }
    free(v);
}

/* q-values of pm_assoc_run against ref_bh over the whole family computed here, and the same q
 * for the pairs kept by a run with --min-count 3 (thresholds never change the family). */
static void test_assoc_run_qvalues_min_count(void **state) {
    (void)state;
    int failures = 0;
    for (int weighted = 0; weighted <= 1; weighted++) {
        size_t E = 400, R = 900;
        pm_incidence_t *inc = unit_inc_random(17 + (uint64_t)weighted, R, E, weighted);
        uint32_t *nn = malloc(E * E * sizeof *nn);
        double *ww = weighted ? malloc(E * E * sizeof *ww) : NULL;
        assert_non_null(nn);
        naive_pairs(inc, nn, ww);
        size_t *idx = malloc(E * E * sizeof *idx);
        double *fp = malloc(E * E * sizeof *fp), *fq = malloc(E * E * sizeof *fq);
        assert_true(idx && fp && fq);
        for (int sign = PM_SIGN_POSITIVE; sign <= PM_SIGN_BOTH; sign++) {
            size_t m = 0;
            for (size_t a = 0; a < E; a++) {
                for (size_t b = a + 1; b < E; b++) {
                    if (inc->count[a] == 0 || inc->count[a] == inc->N || inc->count[b] == 0 ||
                        inc->count[b] == inc->N) {
                        continue;
                    }
                    idx[a * E + b] = m;
                    fp[m++] =
                        family_p(inc, (pm_sign_t)sign, a, b, nn[a * E + b], ww ? ww[a * E + b] : 0);
                }
            }
            ref_bh(fp, m, fq);
            pm_pairs_t *all = run(inc, (pm_sign_t)sign, 0, 0, 2, 0);
            assert_int_equal(all->hypotheses, m);
            double worst = 0;
            for (size_t k = 0; k < all->n; k++) {
                size_t at = idx[all->a[k] * E + all->b[k]];
                near_rel(all->p[k], fp[at], 1e-13, "p of a listed pair");
                near_rel(all->q[k], fq[at], 1e-12, "q against ref_bh over the family");
                double e = fabs(all->q[k] - fq[at]) / fq[at];
                worst = e > worst ? e : worst;
                /* the lookup for any p of the family */
                near_rel(pm_pairs_qvalue(all, all->p[k]), all->q[k], 1e-15, "qvalue lookup");
            }
            print_message("sign %d, weighted %d: %zu hypotheses, %zu listed, largest q "
                          "deviation from ref_bh %.3g\n",
                          sign, weighted, m, all->n, worst);
            for (unsigned th = 1; th <= 3; th += 2) {
                pm_pairs_t *pruned = run(inc, (pm_sign_t)sign, 3, 0, th, 0);
                assert_true(pruned->below_count > 0);
                assert_int_equal(pruned->hypotheses, all->hypotheses);
                size_t matched = 0, differ = 0;
                double dev = 0;
                for (size_t k = 0; k < pruned->n; k++) {
                    long j = pm_pairs_find(all, pruned->a[k], pruned->b[k]);
                    assert_true(j >= 0);
                    assert_true(pruned->p[k] == all->p[j]);
                    if (pruned->q[k] != all->q[j]) {
                        if (!differ) {
                            print_message("sign %d, weighted %d, %u threads: pair (%u, %u) "
                                          "p=%.17g has q %.17g with --min-count 3 but %.17g "
                                          "with --min-count 0\n",
                                          sign, weighted, th, pruned->a[k], pruned->b[k],
                                          pruned->p[k], pruned->q[k], all->q[j]);
                        }
                        differ++;
                        double e = fabs(pruned->q[k] - all->q[j]) / all->q[j];
                        dev = e > dev ? e : dev;
                    }
                    matched++;
                }
                assert_true(matched > 0);
                if (differ) {
                    print_message("sign %d, weighted %d, %u threads: %zu of %zu kept pairs "
                                  "change q under --min-count 3 (largest relative change "
                                  "%.3g)\n",
                                  sign, weighted, th, differ, matched, dev);
                    failures++;
                }
                pm_pairs_free(pruned);
            }
            pm_pairs_free(all);
        }
        free(idx);
        free(fp);
        free(fq);
        free(nn);
        free(ww);
        pm_incidence_free(inc);
    }
    if (failures) {
        fail_msg("%d runs with --min-count 3 changed q-values of kept pairs", failures);
    }
}

/* Same results for every thread count and kernel. */
static void test_assoc_run_threads_identical(void **state) {
    (void)state;
    pm_incidence_t *inc = unit_inc_random(23, 2000, 90, 0);
    pm_pairs_t *ref = run(inc, PM_SIGN_BOTH, 2, 0, 1, PM_COUNTS_DENSE);
    for (unsigned th = 1; th <= 4; th++) {
        for (int k = PM_COUNTS_AUTO; k <= PM_COUNTS_SPARSE; k++) {
            pm_pairs_t *pp = run(inc, PM_SIGN_BOTH, 2, 0, th, k);
            assert_int_equal(pp->n, ref->n);
            assert_memory_equal(pp->a, ref->a, ref->n * sizeof *pp->a);
            assert_memory_equal(pp->b, ref->b, ref->n * sizeof *pp->b);
            assert_memory_equal(pp->p, ref->p, ref->n * sizeof *pp->p);
            assert_memory_equal(pp->q, ref->q, ref->n * sizeof *pp->q);
            pm_pairs_free(pp);
        }
    }
    pm_pairs_free(ref);
    pm_incidence_free(inc);
}

/* Southern Women (Davis, Gardner & Gardner 1941): 18 women, 14 events, as networkx ships it
 * (networkx.davis_southern_women_graph(), events E1..E14 as items 0..13). The reference table
 * was computed outside the project with /usr/bin/python3: joint counts with numpy; p-values by
 * scipy.stats.fisher_exact on [[both, a only], [b only, neither]] (alternative "greater" for
 * sign positive, where never-seen pairs take p = 1 as DESIGN.md fixes, and "two-sided" for
 * both; with N = 18 every table has an expected cell below 5, so Cochran's rule picks Fisher's
 * test everywhere); q-values by statsmodels multipletests(method="fdr_bh") over all 91 pairs;
 * phi, lift and Jaccard by their definitions in numpy. */
static const uint64_t SW_ROW_PTR[] = {0,  8,  15, 23, 30, 34, 38, 42, 45, 49,
                                      53, 57, 63, 70, 78, 83, 85, 87, 89};
static const uint32_t SW_COL[] = {0, 1, 2,  3,  4,  5,  7,  8,  0,  1,  2,  4, 5, 6,  7,  1,  2,  3,
                                  4, 5, 6,  7,  8,  0,  2,  3,  4,  5,  6,  7, 2, 3,  4,  6,  2,  4,
                                  5, 7, 4,  5,  6,  7,  5,  7,  8,  4,  6,  7, 8, 6,  7,  8,  11, 7,
                                  8, 9, 11, 7,  8,  9,  11, 12, 13, 6,  7,  8, 9, 11, 12, 13, 5,  6,
                                  8, 9, 10, 11, 12, 13, 6,  7,  9,  10, 11, 7, 8, 8,  10, 8,  10};
static const struct {
    uint32_t a, b, nab;
    double p_pos, q_pos, p_both, q_both, phi, lift, jaccard;
} SW_PAIRS[] = {
    {0, 1, 2, 0.056372549019607844, 0.34694989106753815, 0.05637254901960786, 0.2699948400412797,
     0.6, 4.0, 0.5},
    {0, 2, 3, 0.024509803921568627, 0.20276292335115864, 0.024509803921568627, 0.1715686274509804,
     0.6324555320336759, 3.0, 0.5},
    {0, 3, 2, 0.10784313725490195, 0.4906862745098039, 0.10784313725490195, 0.3634713144517066,
     0.4780914437337575, 3.0, 0.4},
    {0, 4, 3, 0.06862745098039216, 0.34694989106753815, 0.06862745098039215, 0.27152600170502983,
     0.5, 2.25, 0.375},
    {0, 5, 3, 0.06862745098039216, 0.34694989106753815, 0.06862745098039215, 0.27152600170502983,
     0.5, 2.25, 0.375},
    {0, 6, 2, 0.5882352941176471, 1.0, 1.0, 1.0, 0.1, 1.2, 0.18181818181818182},
    {0, 7, 3, 0.446078431372549, 1.0, 1.0, 1.0, 0.23904572186687875, 1.2857142857142858,
     0.21428571428571427},
    {0, 8, 1, 0.9754901960784313, 1.0, 0.24509803921568626, 0.6195533769063181,
     -0.31622776601683794, 0.5, 0.07142857142857142},
    {0, 9, 0, 1.0, 1.0, 0.5220588235294118, 0.9558823529411766, -0.2773500981126146, 0.0, 0.0},
    {0, 10, 0, 1.0, 1.0, 1.0, 1.0, -0.23904572186687875, 0.0, 0.0},
    {0, 11, 0, 1.0, 1.0, 0.5147058823529411, 0.9558823529411766, -0.31622776601683794, 0.0, 0.0},
    {0, 12, 0, 1.0, 1.0, 1.0, 1.0, -0.2, 0.0, 0.0},
    {0, 13, 0, 1.0, 1.0, 1.0, 1.0, -0.2, 0.0, 0.0},
    {1, 2, 3, 0.024509803921568627, 0.20276292335115864, 0.024509803921568627, 0.1715686274509804,
     0.6324555320336759, 3.0, 0.5},
    {1, 3, 2, 0.10784313725490195, 0.4906862745098039, 0.10784313725490195, 0.3634713144517066,
     0.4780914437337575, 3.0, 0.4},
    {1, 4, 3, 0.06862745098039216, 0.34694989106753815, 0.06862745098039215, 0.27152600170502983,
     0.5, 2.25, 0.375},
    {1, 5, 3, 0.06862745098039216, 0.34694989106753815, 0.06862745098039215, 0.27152600170502983,
     0.5, 2.25, 0.375},
    {1, 6, 2, 0.5882352941176471, 1.0, 1.0, 1.0, 0.1, 1.2, 0.18181818181818182},
    {1, 7, 3, 0.446078431372549, 1.0, 1.0, 1.0, 0.23904572186687875, 1.2857142857142858,
     0.21428571428571427},
    {1, 8, 2, 0.7549019607843137, 1.0, 1.0, 1.0, 0.0, 1.0, 0.15384615384615385},
    {1, 9, 0, 1.0, 1.0, 0.5220588235294118, 0.9558823529411766, -0.2773500981126146, 0.0, 0.0},
    {1, 10, 0, 1.0, 1.0, 1.0, 1.0, -0.23904572186687875, 0.0, 0.0},
    {1, 11, 0, 1.0, 1.0, 0.5147058823529411, 0.9558823529411766, -0.31622776601683794, 0.0, 0.0},
    {1, 12, 0, 1.0, 1.0, 1.0, 1.0, -0.2, 0.0, 0.0},
    {1, 13, 0, 1.0, 1.0, 1.0, 1.0, -0.2, 0.0, 0.0},
    {2, 3, 4, 0.004901960784313725, 0.11151960784313725, 0.0049019607843137246, 0.11151960784313722,
     0.7559289460184544, 3.0, 0.6666666666666666},
    {2, 4, 6, 0.0015082956259426846, 0.0457516339869281, 0.0015082956259426846, 0.0457516339869281,
     0.7905694150420948, 2.25, 0.75},
    {2, 5, 5, 0.03167420814479638, 0.22171945701357465, 0.042986425339366516, 0.24448529411764708,
     0.5533985905294664, 1.875, 0.5555555555555556},
    {2, 6, 4, 0.43665158371040724, 1.0, 0.6380090497737557, 0.9676470588235295, 0.15811388300841897,
     1.2, 0.3333333333333333},
    {2, 7, 5, 0.5931372549019609, 1.0, 1.0, 1.0, 0.0944911182523068, 1.0714285714285714,
     0.3333333333333333},
    {2, 8, 2, 0.9960676578323637, 1.0, 0.1070351217410041, 0.3634713144517066, -0.5, 0.5, 0.125},
    {2, 9, 0, 1.0, 1.0, 0.11414565826330533, 0.3709733893557423, -0.43852900965351455, 0.0, 0.0},
    {2, 10, 0, 1.0, 1.0, 0.24509803921568624, 0.6195533769063181, -0.3779644730092272, 0.0, 0.0},
    {2, 11, 0, 1.0, 1.0, 0.05370609782374487, 0.2699948400412797, -0.5, 0.0, 0.0},
    {2, 12, 0, 1.0, 1.0, 0.5147058823529411, 0.9558823529411766, -0.31622776601683794, 0.0, 0.0},
    {2, 13, 0, 1.0, 1.0, 0.5147058823529411, 0.9558823529411766, -0.31622776601683794, 0.0, 0.0},
    {3, 4, 4, 0.022875816993464058, 0.20276292335115864, 0.022875816993464054, 0.1715686274509804,
     0.5976143046671968, 2.25, 0.5},
    {3, 5, 3, 0.20588235294117652, 0.8516042780748665, 0.27450980392156865, 0.665204678362573,
     0.3286878675669582, 1.6875, 0.3333333333333333},
    {3, 6, 3, 0.38235294117647056, 1.0, 0.5882352941176472, 0.9558823529411766, 0.2091650066335189,
     1.35, 0.2727272727272727},
    {3, 7, 3, 0.8029411764705883, 1.0, 1.0, 1.0, -0.03571428571428571, 0.9642857142857143, 0.2},
    {3, 8, 2, 0.9166666666666667, 1.0, 0.5686274509803921, 0.9558823529411766, -0.1889822365046136,
     0.75, 0.14285714285714285},
    {3, 9, 0, 1.0, 1.0, 0.27777777777777773, 0.665204678362573, -0.33149677206589795, 0.0, 0.0},
    {3, 10, 0, 1.0, 1.0, 0.5241830065359477, 0.9558823529411766, -0.2857142857142857, 0.0, 0.0},
    {3, 11, 0, 1.0, 1.0, 0.24509803921568626, 0.6195533769063181, -0.3779644730092272, 0.0, 0.0},
    {3, 12, 0, 1.0, 1.0, 1.0, 1.0, -0.23904572186687875, 0.0, 0.0},
    {3, 13, 0, 1.0, 1.0, 1.0, 1.0, -0.23904572186687875, 0.0, 0.0},
    {4, 5, 6, 0.030645824763471823, 0.22171945701357465, 0.053613053613053616, 0.2699948400412797,
     0.55, 1.6875, 0.6},
    {4, 6, 6, 0.15734265734265732, 0.6818181818181817, 0.18798848210612917, 0.5518371571502502,
     0.35, 1.35, 0.5},
    {4, 7, 7, 0.38235294117647073, 1.0, 0.588235294117647, 0.9558823529411766, 0.2091650066335189,
     1.125, 0.4666666666666667},
    {4, 8, 3, 0.9984917043740573, 1.0, 0.04298642533936652, 0.24448529411764708,
     -0.5533985905294664, 0.5625, 0.17647058823529413},
    {4, 9, 0, 1.0, 1.0, 0.03594771241830065, 0.23366013071895422, -0.5547001962252291, 0.0, 0.0},
    {4, 10, 0, 1.0, 1.0, 0.09150326797385623, 0.3469498910675382, -0.47809144373375745, 0.0, 0.0},
    {4, 11, 0, 1.0, 1.0, 0.012820512820512822, 0.16666666666666669, -0.6324555320336759, 0.0, 0.0},
    {4, 12, 0, 1.0, 1.0, 0.21568627450980393, 0.5947712418300654, -0.4, 0.0, 0.0},
    {4, 13, 0, 1.0, 1.0, 0.21568627450980393, 0.5947712418300654, -0.4, 0.0, 0.0},
    {5, 6, 5, 0.47984368572603864, 1.0, 0.6640614287673112, 0.9906490166856611, 0.125, 1.125,
     0.38461538461538464},
    {5, 7, 7, 0.38235294117647073, 1.0, 0.588235294117647, 0.9558823529411766, 0.2091650066335189,
     1.125, 0.4666666666666667},
    {5, 8, 4, 0.9683257918552036, 1.0, 0.32126696832579194, 0.7308823529411766,
     -0.31622776601683794, 0.75, 0.25},
    {5, 9, 1, 0.9705882352941176, 1.0, 0.3137254901960785, 0.7308823529411766, -0.305085107923876,
     0.45, 0.08333333333333333},
    {5, 10, 1, 0.9313725490196079, 1.0, 0.5882352941176472, 0.9558823529411766, -0.2091650066335189,
     0.5625, 0.09090909090909091},
    {5, 11, 1, 0.9886877828054299, 1.0, 0.15158371040723984, 0.4598039215686275,
     -0.3952847075210474, 0.375, 0.07692307692307693},
    {5, 12, 1, 0.8529411764705882, 1.0, 1.0, 1.0, -0.1, 0.75, 0.1},
    {5, 13, 1, 0.8529411764705882, 1.0, 1.0, 1.0, -0.1, 0.75, 0.1},
    {6, 7, 8, 0.6176470588235294, 1.0, 1.0, 1.0, 0.05976143046671968, 1.0285714285714285, 0.5},
    {6, 8, 5, 0.9886877828054299, 1.0, 0.15158371040723984, 0.4598039215686275, -0.3952847075210474,
     0.75, 0.29411764705882354},
    {6, 9, 3, 0.6176470588235294, 1.0, 1.0, 1.0, 0.05547001962252291, 1.08, 0.25},
    {6, 10, 2, 0.7941176470588235, 1.0, 1.0, 1.0, -0.05976143046671968, 0.9, 0.16666666666666666},
    {6, 11, 4, 0.4366515837104073, 1.0, 0.6380090497737556, 0.9676470588235295, 0.15811388300841897,
     1.2, 0.3333333333333333},
    {6, 12, 2, 0.588235294117647, 1.0, 1.0, 1.0, 0.1, 1.2, 0.18181818181818182},
    {6, 13, 2, 0.588235294117647, 1.0, 1.0, 1.0, 0.1, 1.2, 0.18181818181818182},
    {7, 8, 9, 0.8382352941176471, 1.0, 1.0, 1.0, -0.0944911182523068, 0.9642857142857143,
     0.5294117647058824},
    {7, 9, 4, 0.7009803921568627, 1.0, 1.0, 1.0, 0.033149677206589796, 1.0285714285714285,
     0.26666666666666666},
    {7, 10, 1, 0.9996732026143791, 1.0, 0.018627450980392157, 0.1715686274509804,
     -0.6785714285714286, 0.32142857142857145, 0.058823529411764705},
    {7, 11, 5, 0.5931372549019608, 1.0, 1.0, 1.0, 0.0944911182523068, 1.0714285714285714,
     0.3333333333333333},
    {7, 12, 2, 0.892156862745098, 1.0, 1.0, 1.0, -0.11952286093343938, 0.8571428571428571,
     0.13333333333333333},
    {7, 13, 2, 0.892156862745098, 1.0, 1.0, 1.0, -0.11952286093343938, 0.8571428571428571,
     0.13333333333333333},
    {8, 9, 4, 0.4390756302521007, 1.0, 0.6148459383753502, 0.9646720757268425, 0.17541160386140583,
     1.2, 0.3076923076923077},
    {8, 10, 3, 0.5931372549019608, 1.0, 1.0, 1.0, 0.0944911182523068, 1.125, 0.23076923076923078},
    {8, 11, 5, 0.3057530704589528, 1.0, 0.6000323206205558, 0.9579463364293084, 0.25, 1.25,
     0.38461538461538464},
    {8, 12, 3, 0.2696078431372549, 1.0, 0.5147058823529411, 0.9558823529411766, 0.31622776601683794,
     1.5, 0.25},
    {8, 13, 3, 0.2696078431372549, 1.0, 0.5147058823529411, 0.9558823529411766, 0.31622776601683794,
     1.5, 0.25},
    {9, 10, 2, 0.29901960784313725, 1.0, 0.5326797385620916, 0.9558823529411766,
     0.26519741765271837, 1.8, 0.2857142857142857},
    {9, 11, 5, 0.0007002801120448179, 0.0457516339869281, 0.0007002801120448179, 0.0457516339869281,
     0.8770580193070291, 3.0, 0.8333333333333334},
    {9, 12, 3, 0.012254901960784314, 0.18586601307189543, 0.012254901960784315, 0.16666666666666669,
     0.7211102550927979, 3.6, 0.6},
    {9, 13, 3, 0.012254901960784314, 0.18586601307189543, 0.012254901960784315, 0.16666666666666669,
     0.7211102550927979, 3.6, 0.6},
    {10, 11, 2, 0.4068627450980392, 1.0, 0.5686274509803921, 0.9558823529411766, 0.1889822365046136,
     1.5, 0.25},
    {10, 12, 1, 0.5539215686274509, 1.0, 1.0, 1.0, 0.11952286093343938, 1.5, 0.16666666666666666},
    {10, 13, 1, 0.5539215686274509, 1.0, 1.0, 1.0, 0.11952286093343938, 1.5, 0.16666666666666666},
    {11, 12, 3, 0.024509803921568627, 0.20276292335115864, 0.024509803921568627, 0.1715686274509804,
     0.6324555320336759, 3.0, 0.5},
    {11, 13, 3, 0.024509803921568627, 0.20276292335115864, 0.024509803921568627, 0.1715686274509804,
     0.6324555320336759, 3.0, 0.5},
    {12, 13, 3, 0.0012254901960784314, 0.0457516339869281, 0.0012254901960784316,
     0.0457516339869281, 1.0, 6.0, 1.0},
};

static void test_assoc_run_southern_women(void **state) {
    (void)state;
    pm_incidence_t *inc = unit_inc_new(14, 18, SW_ROW_PTR, SW_COL, NULL, 0);
    size_t npairs = sizeof SW_PAIRS / sizeof SW_PAIRS[0];
    assert_int_equal(npairs, 91);
    for (int both = 0; both <= 1; both++) {
        pm_pairs_t *pp = run(inc, both ? PM_SIGN_BOTH : PM_SIGN_POSITIVE, 0, 0, 2, 0);
        assert_int_equal(pp->hypotheses, npairs);
        size_t listed = 0;
        double worst_p = 0, worst_q = 0;
        for (size_t i = 0; i < npairs; i++) {
            double p = both ? SW_PAIRS[i].p_both : SW_PAIRS[i].p_pos;
            double q = both ? SW_PAIRS[i].q_both : SW_PAIRS[i].q_pos;
            long k = pm_pairs_find(pp, SW_PAIRS[i].a, SW_PAIRS[i].b);
            if (SW_PAIRS[i].nab == 0) {
                assert_true(k < 0); /* never seen together: in the family, not listed */
                if (!both) {
                    near_rel(pm_pairs_qvalue(pp, 1.0), q, 1e-12, "q of p = 1 (never seen)");
                }
                continue;
            }
            assert_true(k >= 0);
            listed++;
            pm_measures_t m;
            pm_pairs_measures(pp, inc, (size_t)k, &m);
            assert_int_equal(m.test, PM_TEST_FISHER);
            near_rel(m.p, p, 1e-10, "p against scipy.stats.fisher_exact");
            near_rel(m.q, q, 1e-10, "q against statsmodels multipletests fdr_bh");
            near_rel(m.phi, SW_PAIRS[i].phi, 1e-13, "phi against numpy");
            near_rel(m.lift, SW_PAIRS[i].lift, 1e-13, "lift against numpy");
            near_rel(m.jaccard, SW_PAIRS[i].jaccard, 1e-13, "Jaccard against numpy");
            assert_true(m.together == SW_PAIRS[i].nab);
            double ep = fabs(m.p - p) / p, eq = fabs(m.q - q) / q;
            worst_p = ep > worst_p ? ep : worst_p;
            worst_q = eq > worst_q ? eq : worst_q;
        }
        assert_int_equal(listed, pp->n);
        print_message("Southern Women, sign %s: %zu pairs listed; largest relative deviation "
                      "from scipy p %.3g, from statsmodels q %.3g\n",
                      both ? "both" : "positive", listed, worst_p, worst_q);
        pm_pairs_free(pp);
    }
    pm_incidence_free(inc);
}

/* The measures of listed pairs (pm_pairs_measures, pm_pairs_measure_any) against the
 * definitions evaluated here, independently of src/assoc.c: the 2x2 table's support,
 * confidences, lift, Jaccard and phi in long double, the expected count n_a n_b / N; p-values
 * two-sided (sign both): chi-square with 1 df as erfc(sqrt(N phi^2 / 2)) from the C library,
 * Fisher's as the sum of the hypergeometric probabilities not above the observed one (relative
 * tolerance 1e-7, as R and scipy do), each term from lgammal; the test by Cochran's rule
 * (smallest expected cell below 5: Fisher; common practice). */
static long double lchoosel(uint64_t n, uint64_t k) {
    return lgammal((long double)n + 1) - lgammal((long double)k + 1) -
           lgammal((long double)(n - k) + 1);
}

static double fisher_two_sided_sum(uint64_t N, uint64_t na, uint64_t nb, uint64_t nab) {
    uint64_t lo = nb > N - na ? nb - (N - na) : 0, hi = na < nb ? na : nb;
    long double lden = lchoosel(N, nb);
    long double pobs = expl(lchoosel(na, nab) + lchoosel(N - na, nb - nab) - lden);
    long double sum = 0;
    for (uint64_t x = lo; x <= hi; x++) {
        long double px = expl(lchoosel(na, x) + lchoosel(N - na, nb - x) - lden);
        if (px <= pobs * (1 + 1e-7L)) {
            sum += px;
        }
    }
    return (double)(sum > 1 ? 1 : sum);
}

static void test_assoc_pairs_measures(void **state) {
    (void)state;
    pm_incidence_t *inc = unit_inc_random(29, 800, 40, 0);
    pm_pairs_t *pp = run(inc, PM_SIGN_BOTH, 1, 0, 2, 0);
    assert_true(pp->n > 10);
    size_t fisher = 0, chi2 = 0;
    for (size_t k = 0; k < pp->n; k++) {
        uint64_t N = inc->N, na = inc->count[pp->a[k]], nb = inc->count[pp->b[k]];
        uint64_t nab = pp->n_ab[k];
        long double dN = N, da = na, db = nb, dab = nab;
        pm_measures_t m, any;
        pm_pairs_measures(pp, inc, k, &m);
        near_rel(m.together, (double)dab, 0, "together");
        near_rel(m.expected, (double)(da * db / dN), 1e-15, "expected");
        near_rel(m.support, (double)(dab / dN), 1e-15, "support");
        near_rel(m.confidence_ab, (double)(dab / da), 1e-15, "confidence a -> b");
        near_rel(m.confidence_ba, (double)(dab / db), 1e-15, "confidence b -> a");
        near_rel(m.lift, (double)(dN * dab / (da * db)), 1e-15, "lift");
        near_rel(m.jaccard, (double)(dab / (da + db - dab)), 1e-15, "Jaccard");
        long double phi = (dN * dab - da * db) / sqrtl(da * db * (dN - da) * (dN - db));
        near_rel(m.phi, (double)phi, 1e-14, "phi");
        long double ra = na < N - na ? da : dN - da, rb = nb < N - nb ? db : dN - db;
        int want_fisher = ra * rb / dN < 5;
        assert_int_equal(m.test, want_fisher ? PM_TEST_FISHER : PM_TEST_CHI2);
        double p = want_fisher ? fisher_two_sided_sum(N, na, nb, nab)
                               : erfc(sqrt((double)(dN * phi * phi) / 2));
        near_rel(m.p, p, 1e-9, want_fisher ? "Fisher two-sided by exact sum" : "chi-square erfc");
        fisher += want_fisher != 0;
        chi2 += want_fisher == 0;
        assert_true(m.q == pp->q[k]);
        pm_pairs_measure_any(pp, inc, pp->a[k], pp->b[k], pp->n_ab[k], 0, &any);
        assert_true(any.p == m.p && any.q == pp->q[k] && any.phi == m.phi);
    }
    assert_true(fisher > 0 && chi2 > 0); /* both tests were checked */
    pm_pairs_free(pp);
    pm_incidence_free(inc);
}

static void test_assoc_run_alloc_failure(void **state) {
    (void)state;
    pm_incidence_t *inc = unit_inc_random(37, 300, 25, 0);
    for (int sign = PM_SIGN_POSITIVE; sign <= PM_SIGN_BOTH; sign++) {
        int failures = 0, done = 0;
        for (long n = 1; n < 2000 && !done; n++) {
            pm_assoc_opts_t o;
            pm_assoc_opts_init(&o);
            o.sign = (pm_sign_t)sign;
            o.min_count = 2;
            o.threads = 1; /* the hook is not thread-safe */
            pm_pairs_t *pp = (pm_pairs_t *)&o;
            pm_diag_t d;
            pm_diag_clear(&d);
            pm_i_alloc_fail_after(n);
            pm_err_t rc = pm_assoc_run(inc, &o, &pp, &d);
            pm_i_alloc_fail_after(0);
            if (rc == PM_OK) {
                pm_pairs_free(pp);
                done = 1;
            } else {
                assert_int_equal(rc, PM_ENOMEM);
                assert_null(pp);
                failures++;
            }
        }
        assert_true(done);
        assert_true(failures >= 10);
    }
    pm_incidence_free(inc);
}

/* The rule pm_assoc_run uses to skip pairs under a q limit below 1/2: a pair seen no more often
 * than expected (nab N <= na nb) has a one-sided "greater" Fisher p-value of at least 1/2, as
 * the hypergeometric median is floor or ceil of the mean (Kaas and Buhrman 1980). Checked by
 * the exact integer sums on every table up to N = 60, and on pm_assoc_fisher itself (which
 * the run uses) against the 0.49 margin on those and on random large tables. */
static void test_assoc_fisher_half_at_most_expected(void **state) {
    (void)state;
    binom_init();
    long checked = 0;
    double lowest = 1;
    for (int N = 2; N <= BMAX; N++) {
        for (int K = 1; K < N; K++) {
            for (int n = 1; n < N; n++) {
                int lo = n - (N - K) > 0 ? n - (N - K) : 0;
                for (int x = lo; x * N <= K * n; x++) {
                    double g, l, t;
                    exact_fisher(N, K, n, x, &g, &l, &t);
                    uint64_t tot = binom[N][n], gs = 0;
                    for (int k = x; k <= (K < n ? K : n); k++) {
                        gs += binom[K][k] * binom[N - K][n - k];
                    }
                    if (2 * gs < tot) {
                        fail_msg("N=%d na=%d nb=%d nab=%d: P(X >= nab) = %.17g < 1/2", N, K, n, x,
                                 g);
                    }
                    double pg =
                        pm_assoc_fisher((uint64_t)N, (uint64_t)K, (uint64_t)n, (uint64_t)x, 1);
                    assert_true(pg >= 0.49);
                    lowest = pg < lowest ? pg : lowest;
                    checked++;
                }
            }
        }
    }
    unit_rng g = {77};
    for (int i = 0; i < 20000; i++) {
        uint64_t N = 100 + unit_below(&g, 2000000);
        uint64_t na = 1 + unit_below(&g, N - 1), nb = 1 + unit_below(&g, N - 1);
        uint64_t mean = (uint64_t)((long double)na * nb / N);
        uint64_t lo = nb > N - na ? nb - (N - na) : 0;
        if (mean < lo) {
            continue;
        }
        uint64_t x = mean - (mean - lo) * unit_below(&g, 4) / 4; /* at the mean or below */
        double pg = pm_assoc_fisher(N, na, nb, x, 1);
        if (!(pg >= 0.49)) {
            fail_msg("N=%llu na=%llu nb=%llu nab=%llu: p = %.17g", (unsigned long long)N,
                     (unsigned long long)na, (unsigned long long)nb, (unsigned long long)x, pg);
        }
        lowest = pg < lowest ? pg : lowest;
        checked++;
    }
    print_message("at most expected: %ld tables, smallest p %.6f\n", checked, lowest);
}

/* Items in taste groups (strong pairs), rare items planted in pairs (small p-values of pairs
 * seen fewer than --min-count times) and a few common items. */
static pm_incidence_t *planted_inc(uint64_t seed, size_t R) {
    const size_t G = 6, per = 10, rare = 12, E = G * per + rare;
    unit_rng g = {seed};
    uint64_t *rp = malloc((R + 1) * sizeof *rp);
    uint32_t *col = malloc((R * E + 1) * sizeof *col);
    assert_true(rp && col);
    size_t nnz = 0;
    for (size_t r = 0; r < R; r++) {
        rp[r] = nnz;
        size_t grp = unit_below(&g, G);
        size_t pair = unit_below(&g, 400); /* rare items: pair j chosen together now and then */
        for (size_t i = 0; i < E; i++) {
            double u = unit_unif(&g), pr;
            if (i < G * per) {
                pr = i / per == grp ? 0.25 : 0.04;
            } else {
                pr = (i - G * per) / 2 == pair ? 0.8 : 0.001;
            }
            if (u < pr) {
                col[nnz++] = (uint32_t)i;
            }
        }
    }
    rp[R] = nnz;
    pm_incidence_t *inc = unit_inc_new(E, R, rp, col, NULL, 0);
    free(rp);
    free(col);
    return inc;
}

/* A q limit (what every command passes as --max-q) changes no q-value at or below it, keeps
 * every larger one above it, and so selects the same pairs; checked against the run without a
 * limit on every sign and several --min-count values, with pruned pairs among the small
 * p-values (so that dropping them from the ranks would move the q-values). */
static void test_assoc_run_q_limit(void **state) {
    (void)state;
    pm_incidence_t *inc = planted_inc(91, 3000);
    static const double lims[] = {0.05, 0.2, 0.0001, 0, 0.6};
    static const uint32_t mins[] = {1, 5, 12};
    size_t small_pruned = 0, exact = 0, above = 0, first_term = 0;
    for (int sign = PM_SIGN_POSITIVE; sign <= PM_SIGN_BOTH; sign++) {
        for (size_t mi = 0; mi < sizeof mins / sizeof mins[0]; mi++) {
            pm_pairs_t *ref = run(inc, (pm_sign_t)sign, mins[mi], 0, 2, 0);
            assert_true(ref->q_limit == 1.0);
            for (size_t li = 0; li < sizeof lims / sizeof lims[0]; li++) {
                double lim = lims[li];
                pm_assoc_opts_t o;
                pm_assoc_opts_init(&o);
                o.sign = (pm_sign_t)sign;
                o.min_count = mins[mi];
                o.threads = 1 + (unsigned)(li % 2);
                o.q_limit = lim;
                pm_pairs_t *pp = NULL;
                pm_diag_t d;
                pm_diag_clear(&d);
                assert_int_equal(pm_assoc_run(inc, &o, &pp, &d), PM_OK);
                assert_int_equal(pp->n, ref->n);
                assert_int_equal(pp->hypotheses, ref->hypotheses);
                assert_memory_equal(pp->a, ref->a, ref->n * sizeof *pp->a);
                assert_memory_equal(pp->b, ref->b, ref->n * sizeof *pp->b);
                for (size_t k = 0; k < ref->n; k++) {
                    uint64_t na = inc->count[ref->a[k]], nb = inc->count[ref->b[k]];
                    if (lim < 0.49 && sign == PM_SIGN_POSITIVE &&
                        inc->N * ref->n_ab[k] <= na * nb) {
                        /* not positive: p not computed under the limit */
                        assert_true(isinf(pp->p[k]) && pp->p[k] > 0 && ref->p[k] >= 0.5);
                        assert_int_equal(pp->test[k], ref->test[k]);
                        continue;
                    }
                    if (isinf(pp->p[k])) {
                        /* shown above the limit by its first term (Fisher's test) */
                        assert_true(lim < 0.49 && sign == PM_SIGN_POSITIVE);
                        assert_true(ref->p[k] > lim);
                        assert_int_equal(ref->test[k], PM_TEST_FISHER);
                        assert_int_equal(pp->test[k], ref->test[k]);
                        first_term++;
                        continue;
                    }
                    assert_memory_equal(&pp->p[k], &ref->p[k], sizeof(double));
                }
                for (size_t k = 0; k < ref->n; k++) {
                    if (ref->q[k] <= lim) {
                        if (memcmp(&pp->q[k], &ref->q[k], sizeof(double)) != 0) {
                            fail_msg("sign %d min %u limit %g: pair %zu q %.17g, without the "
                                     "limit %.17g",
                                     sign, mins[mi], lim, k, pp->q[k], ref->q[k]);
                        }
                        exact++;
                    } else {
                        assert_true(pp->q[k] > lim);
                        above++;
                    }
                    double qa = pm_pairs_qvalue(pp, ref->p[k]);
                    double qb = pm_pairs_qvalue(ref, ref->p[k]);
                    if (qb <= lim) {
                        assert_true(memcmp(&qa, &qb, sizeof qa) == 0);
                    } else {
                        assert_true(qa > lim);
                    }
                }
                pm_select_opts_t so;
                pm_select_opts_init(&so);
                so.sign = (pm_sign_t)sign;
                so.min_count = mins[mi];
                so.max_q = lim;
                pm_edges_t *e1 = NULL, *e2 = NULL;
                assert_int_equal(pm_select_run(ref, inc, &so, &e1, &d), PM_OK);
                assert_int_equal(pm_select_run(pp, inc, &so, &e2, &d), PM_OK);
                assert_int_equal(e1->n, e2->n);
                assert_int_equal(e1->removed_q, e2->removed_q);
                assert_int_equal(e1->removed_sign, e2->removed_sign);
                assert_memory_equal(e1->idx, e2->idx, e1->n * sizeof *e1->idx);
                assert_memory_equal(e1->weight, e2->weight, e1->n * sizeof *e1->weight);
                pm_edges_free(e1);
                pm_edges_free(e2);
                pm_pairs_free(pp);
            }
            pm_pairs_free(ref);
        }
    }
    /* the case that needs the pruned p-values: pairs seen fewer than 12 times with p < 0.05 */
    for (size_t a = 0; a < inc->n_items; a++) {
        for (size_t b = a + 1; b < inc->n_items; b++) {
            uint32_t nab = 0;
            for (size_t r = 0; r < inc->n_resp; r++) {
                int ha = 0, hb = 0;
                for (uint64_t q = inc->row_ptr[r]; q < inc->row_ptr[r + 1]; q++) {
                    ha |= inc->col[q] == a;
                    hb |= inc->col[q] == b;
                }
                nab += ha && hb;
            }
            if (nab > 0 && nab < 12 && family_p(inc, PM_SIGN_POSITIVE, a, b, nab, 0) < 0.05) {
                small_pruned++;
            }
        }
    }
    print_message("q limit: %zu q-values equal, %zu above the limit (%zu listed p-values left "
                  "out by their first term), %zu pruned pairs with p < 0.05\n",
                  exact, above, first_term, small_pruned);
    assert_true(exact > 1000 && above > 1000 && small_pruned > 10 && first_term > 10);
    pm_incidence_free(inc);
}

static const struct CMUnitTest tests[] = {
    cmocka_unit_test(test_assoc_counts_tea_coffee),
    cmocka_unit_test(test_assoc_fisher_tea_tasting),
    cmocka_unit_test(test_assoc_fisher_exact_sums),
    cmocka_unit_test(test_assoc_fisher_large_tables),
    cmocka_unit_test(test_assoc_weighted_matches_counts),
    cmocka_unit_test(test_assoc_jeffreys_edges),
    cmocka_unit_test(test_assoc_jeffreys_properties),
    cmocka_unit_test(test_assoc_bh_hand_cases),
    cmocka_unit_test(test_assoc_run_family_counts),
    cmocka_unit_test(test_assoc_run_qvalues_min_count),
    cmocka_unit_test(test_assoc_run_threads_identical),
    cmocka_unit_test(test_assoc_pairs_measures),
    cmocka_unit_test(test_assoc_run_southern_women),
    cmocka_unit_test(test_assoc_run_alloc_failure),
    cmocka_unit_test(test_assoc_fisher_half_at_most_expected),
    cmocka_unit_test(test_assoc_run_q_limit),
};

UNIT_MAIN("assoc", tests)
