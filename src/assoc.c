/* The tests and measures of one pair, Jeffreys intervals and Benjamini-Hochberg on a plain array
 * (see assoc.h); the family of every pair is src/assoc_family.c. */
#include "pairmap/assoc.h"

#include <float.h>
#include <gsl/gsl_cdf.h>
#include <gsl/gsl_randist.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_sf_gamma.h>
#include <limits.h>
#include <math.h>
#include <pthread.h>
#include <stdlib.h>
#include <string.h>

#include "parallel.h"
#include "util.h"
#include "assoc_internal.h"

/* ==== Fisher's exact test =================================================================== */
/* sum_{k >= x} pmf(k) / pmf(x), for x at or above the mode (terms decrease) */
static double upper_rel(uint64_t N, uint64_t K, uint64_t n, uint64_t x, uint64_t hi) {
    double s = 1, t = 1;
    for (uint64_t k = x; k < hi; k++) {
        t *= (double)(K - k) * (double)(n - k) / ((double)(k + 1) * (double)(N - K - n + k + 1));
        s += t;
        if (t < s * 1e-17) {
            break;
        }
    }
    return s;
}

/* sum_{k <= x} pmf(k) / pmf(x), for x at or below the mode */
static double lower_rel(uint64_t N, uint64_t K, uint64_t n, uint64_t x, uint64_t lo) {
    double s = 1, t = 1;
    for (uint64_t k = x; k > lo; k--) {
        /* pmf(k-1)/pmf(k) = k (N-K-n+k) / ((K-k+1)(n-k+1)) */
        t *= (double)k * (double)(N - K - n + k) / ((double)(K - k + 1) * (double)(n - k + 1));
        s += t;
        if (t < s * 1e-17) {
            break;
        }
    }
    return s;
}

static double tail_upper(const lftab *lf, uint64_t N, uint64_t K, uint64_t n, uint64_t x,
                         uint64_t lo, uint64_t hi, uint64_t mode) {
    /* P(X >= x) */
    if (x <= lo) {
        return 1.0;
    }
    if (x > hi) {
        return 0.0;
    }
    if (x > mode) {
        return exp(lpmf(lf, N, K, n, x)) * upper_rel(N, K, n, x, hi);
    }
    double below = exp(lpmf(lf, N, K, n, x - 1)) * lower_rel(N, K, n, x - 1, lo);
    double p = 1.0 - below;
    return p < 0 ? 0 : p;
}

static double tail_lower(const lftab *lf, uint64_t N, uint64_t K, uint64_t n, uint64_t x,
                         uint64_t lo, uint64_t hi, uint64_t mode) {
    /* P(X <= x) */
    if (x >= hi) {
        return 1.0;
    }
    if (x < lo) {
        return 0.0;
    }
    if (x < mode) {
        return exp(lpmf(lf, N, K, n, x)) * lower_rel(N, K, n, x, lo);
    }
    double above = exp(lpmf(lf, N, K, n, x + 1)) * upper_rel(N, K, n, x + 1, hi);
    double p = 1.0 - above;
    return p < 0 ? 0 : p;
}

static double fisher(const lftab *lf, uint64_t N, uint64_t na, uint64_t nb, uint64_t nab,
                     int alternative) {
    uint64_t K = na, n = nb, x = nab;
    uint64_t lo = n > N - K ? n - (N - K) : 0;
    uint64_t hi = K < n ? K : n;
    uint64_t mode = hyper_mode(N, K, n);
    if (mode < lo) {
        mode = lo;
    }
    if (mode > hi) {
        mode = hi;
    }
    if (alternative > 0) {
        return tail_upper(lf, N, K, n, x, lo, hi, mode);
    }
    if (alternative < 0) {
        return tail_lower(lf, N, K, n, x, lo, hi, mode);
    }
    /* two-sided: all tables no more probable than the observed one */
    const double tol = log1p(1e-7);
    double lx = lpmf(lf, N, K, n, x);
    double lm = lpmf(lf, N, K, n, mode);
    if (lm - lx <= tol) {
        return 1.0;
    }
    double p;
    if (x < mode) {
        double plow = exp(lx) * lower_rel(N, K, n, x, lo);
        /* first k in (mode, hi] with lpmf(k) <= lx + tol (pmf decreases there) */
        if (lpmf(lf, N, K, n, hi) > lx + tol) {
            return plow > 1 ? 1 : plow;
        }
        uint64_t a = mode, b = hi; /* lpmf(a) > lx+tol, lpmf(b) <= lx+tol */
        while (b - a > 1) {
            uint64_t mid = a + (b - a) / 2;
            if (lpmf(lf, N, K, n, mid) <= lx + tol) {
                b = mid;
            } else {
                a = mid;
            }
        }
        p = plow + exp(lpmf(lf, N, K, n, b)) * upper_rel(N, K, n, b, hi);
    } else {
        double pup = exp(lx) * upper_rel(N, K, n, x, hi);
        if (lpmf(lf, N, K, n, lo) > lx + tol) {
            return pup > 1 ? 1 : pup;
        }
        uint64_t a = lo, b = mode; /* lpmf(a) <= lx+tol, lpmf(b) > lx+tol */
        while (b - a > 1) {
            uint64_t mid = a + (b - a) / 2;
            if (lpmf(lf, N, K, n, mid) <= lx + tol) {
                a = mid;
            } else {
                b = mid;
            }
        }
        p = pup + exp(lpmf(lf, N, K, n, a)) * lower_rel(N, K, n, a, lo);
    }
    return p > 1 ? 1 : p;
}

double pm_assoc_fisher(uint64_t N, uint64_t na, uint64_t nb, uint64_t nab, int alternative) {
    return fisher(NULL, N, na, nb, nab, alternative);
}

/* ==== measures ============================================================================== */

static double chi2_p(double chi2, double phi, pm_sign_t sign) {
    if (!(chi2 >= 0)) {
        return NAN;
    }
    if (sign == PM_SIGN_BOTH) {
        return gsl_cdf_chisq_Q(chi2, 1.0);
    }
    double z = sqrt(chi2);
    if (phi < 0) {
        z = -z;
    }
    return sign == PM_SIGN_POSITIVE ? gsl_cdf_ugaussian_Q(z) : gsl_cdf_ugaussian_P(z);
}

/* phi: numerator exact in 64-bit integers, denominator in long double (DESIGN.md) */
static inline double phi_counts(uint64_t N, uint64_t na, uint64_t nb, uint64_t nab) {
    long double num;
    if (N < (1ULL << 31)) {
        num = (long double)((int64_t)(N * nab) - (int64_t)(na * nb));
    } else {
        num = (long double)N * nab - (long double)na * nb;
    }
    long double den = sqrtl((long double)na * nb * (long double)(N - na) * (long double)(N - nb));
    return (double)(num / den);
}

double pm_i_assoc_pruned_p(const lftab *lf, uint64_t N, uint64_t na, uint64_t nb, uint64_t nab,
                           double lim) {
    if (test_for(N, na, nb) == PM_TEST_FISHER) {
        uint64_t K = na, n = nb, x = nab;
        uint64_t lo = n > N - K ? n - (N - K) : 0, hi = K < n ? K : n;
        /* x above the mode floor((n+1)(K+1)/(N+2)) is x (N+2) > (n+1)(K+1) for whole x:
         * compared in integers where they fit, without the division */
        int above = n < UINT32_MAX && K < UINT32_MAX && x < UINT32_MAX && N < UINT32_MAX - 2
                        ? x * (N + 2) > (n + 1) * (K + 1)
                        : x > hyper_mode(N, K, n);
        if (above && x <= hi) { /* the first term is the one fisher() uses */
            double e = exp(lpmf(lf, N, K, n, x));
            if (e > lim) {
                return INFINITY;
            }
            /* tail_upper: x above the clamped mode too (it is lo or the mode itself) */
            return x <= lo ? 1.0 : e * upper_rel(N, K, n, x, hi);
        }
    }
    unsigned char t;
    return pm_i_assoc_counts_p(lf, N, na, nb, nab, PM_SIGN_POSITIVE, &t);
}

double pm_i_assoc_counts_p(const lftab *lf, uint64_t N, uint64_t na, uint64_t nb, uint64_t nab,
                           pm_sign_t sign, unsigned char *test) {
    if (test_for(N, na, nb) == PM_TEST_FISHER) {
        *test = PM_TEST_FISHER;
        return fisher(lf, N, na, nb, nab,
                      sign == PM_SIGN_BOTH       ? 0
                      : sign == PM_SIGN_POSITIVE ? 1
                                                 : -1);
    }
    *test = PM_TEST_CHI2;
    double phi = phi_counts(N, na, nb, nab);
    return chi2_p((double)N * phi * phi, phi, sign);
}

void pm_i_assoc_counts_measures(const lftab *lf, uint64_t N, uint64_t na, uint64_t nb, uint64_t nab,
                                pm_sign_t sign, pm_measures_t *m, int with_test) {
    double dN = (double)N, da = (double)na, db = (double)nb, dab = (double)nab;
    m->together = dab;
    m->expected = da * db / dN;
    m->support = dab / dN;
    m->confidence_ab = dab / da;
    m->confidence_ba = dab / db;
    m->lift = dN * dab / (da * db);
    m->jaccard = dab / (da + db - dab);
    m->phi = phi_counts(N, na, nb, nab);
    m->q = NAN;
    m->test = test_for(N, na, nb);
    m->p = NAN;
    if (with_test) {
        unsigned char t;
        m->p = pm_i_assoc_counts_p(lf, N, na, nb, nab, sign, &t);
    }
}

void pm_assoc_counts(uint64_t N, uint64_t na, uint64_t nb, uint64_t nab, pm_sign_t sign,
                     pm_measures_t *m) {
    pm_i_assoc_counts_measures(NULL, N, na, nb, nab, sign, m, 1);
}

void pm_assoc_weighted(double W, double wa, double wb, double wab, double neff, pm_sign_t sign,
                       pm_measures_t *m) {
    m->together = wab;
    m->expected = wa * wb / W;
    m->support = wab / W;
    m->confidence_ab = wab / wa;
    m->confidence_ba = wab / wb;
    m->lift = W * wab / (wa * wb);
    m->jaccard = wab / (wa + wb - wab);
    long double num = (long double)W * wab - (long double)wa * wb;
    long double den = sqrtl((long double)wa * wb * ((long double)W - wa) * ((long double)W - wb));
    m->phi = (double)(num / den);
    m->test = PM_TEST_CHI2;
    m->q = NAN;
    m->p = chi2_p(neff * m->phi * m->phi, m->phi, sign);
}

/* ==== Jeffreys interval ===================================================================== */
typedef struct {
    double a, b, p;
} beta_q;

static double beta_gap(double x, void *v) {
    const beta_q *q = v;
    double c = gsl_cdf_beta_P(x, q->a, q->b);
    if (!isfinite(c)) {
        /* GSL's continued fraction fails (NaN) close to the mean when a + b is large
         * (measured: n = 10^7, within about 0.4 sd of the mean), and Brent's method stops at
         * a non-finite value with a wrong root. There the normal approximation steers the
         * solver; the 2.5% and 97.5% points lie about 2 sd out, where GSL's CDF works. */
        double s = q->a + q->b, mu = q->a / s, sd = sqrt(mu * (1 - mu) / (s + 1));
        c = gsl_cdf_ugaussian_P((x - mu) / sd);
    }
    return c - q->p;
}

/* p-quantile of Beta(a, b): Halley's method on gsl_cdf_beta_P with the density (its log
 * normalising constant computed once) and its slope, from the Cornish-Fisher start to third
 * order (the normal approximation corrected by the skewness and the kurtosis), kept inside a
 * bracket of the root that every step narrows (a step that would leave it bisects instead; a
 * Halley factor outside [1/2, 2] takes Newton's step), until a Halley step is below 1e-7
 * relative or any step below 2 ulp. (gsl_cdf_beta_Pinv returns NaN or spins at basket sizes:
 * API-NOTES.md.) On 187,939 Jeffreys bounds of 10 to 10^6 respondents: 1.86 CDF evaluations
 * where the start to second order and a stop at 1e-8 took 2.44 (and Newton's method from the
 * normal approximation to 2 ulp 8.7), the results within 4.8e-12 relative of those (the
 * CDF's own resolution); against scipy the largest deviation in tests/ref/jeffreys.py is
 * printed by that check. */
static double beta_quantile_with(double p, double z, double a, double b, double lnb) {
    beta_q q = {a, b, p};
    double lo = 0.0, hi = 1.0;
    double s = a + b, mu = a / s, sd = sqrt(mu * (1 - mu) / (s + 1));
    double skew = 2 * (b - a) * sqrt(s + 1) / ((s + 2) * sqrt(a * b));
    double kurt = 6 * ((a - b) * (a - b) * (s + 1) - a * b * (s + 2)) / (a * b * (s + 2) * (s + 3));
    double z3 = z * z * z;
    double x = mu + sd * (z + (z * z - 1) * skew / 6 + (z3 - 3 * z) * kurt / 24 -
                          (2 * z3 - 5 * z) * skew * skew / 36);
    if (!(x > 0 && x < 1)) {
        x = mu + z * sd;
    }
    if (!(x > 0 && x < 1)) {
        x = mu;
    }
    for (int i = 0; i < 400; i++) {
        double g = beta_gap(x, &q);
        if (g == 0) {
            return x;
        }
        if (g < 0) {
            lo = x;
        } else {
            hi = x;
        }
        double f = exp((a - 1) * log(x) + (b - 1) * log1p(-x) - lnb);
        double dx = g / f;
        double h = 1 - 0.5 * dx * ((a - 1) / x - (b - 1) / (1 - x));
        int halley = h >= 0.5 && h <= 2;
        if (halley) {
            dx /= h;
        }
        double xn = x - dx;
        if (!(xn > lo && xn < hi)) { /* also NaN and infinities */
            xn = lo + (hi - lo) / 2;
            halley = 0;
        }
        /* a Halley step of relative size d leaves an error of order d^3: below 1e-7 the step
         * lands on the root to the last bits the CDF resolves; relative to the distance to
         * the nearer end, so that a root near 1 is found to as many digits of 1 - x */
        double scale = x < 0.5 ? x : 1 - x;
        if ((halley && fabs(xn - x) <= 1e-7 * scale) || fabs(xn - x) <= 2 * DBL_EPSILON * fabs(x) ||
            hi - lo <= 2 * DBL_EPSILON * fabs(x)) {
            return xn;
        }
        x = xn;
    }
    return x;
}

/* z = the standard normal p-quantile (the start's), lnb = log B(a, b) (the density's). */
static double beta_quantile(double p, double a, double b) {
    return beta_quantile_with(p, gsl_cdf_ugaussian_Pinv(p), a, b, gsl_sf_lnbeta(a, b));
}

double pm_assoc_beta_quantile(double p, double a, double b) {
    return beta_quantile(p, a, b);
}

/* Both bounds share log B(a, b), and the normal quantiles of a run's one alpha are kept per
 * thread: the same values as computed afresh for each bound, so the same bits. */
static _Thread_local struct {
    double alpha, z_lo, z_hi;
    int set;
} jeff_z;

void pm_assoc_jeffreys(double x, double n, double alpha, double *lo, double *hi) {
    if (!jeff_z.set || jeff_z.alpha != alpha) {
        jeff_z.alpha = alpha;
        jeff_z.z_lo = gsl_cdf_ugaussian_Pinv(alpha / 2);
        jeff_z.z_hi = gsl_cdf_ugaussian_Pinv(1 - alpha / 2);
        jeff_z.set = 1;
    }
    double a = x + 0.5, b = n - x + 0.5;
    double lnb = x <= 0 && x >= n ? 0 : gsl_sf_lnbeta(a, b);
    *lo = x <= 0 ? 0.0 : beta_quantile_with(alpha / 2, jeff_z.z_lo, a, b, lnb);
    *hi = x >= n ? 1.0 : beta_quantile_with(1 - alpha / 2, jeff_z.z_hi, a, b, lnb);
}

/* ==== Benjamini-Hochberg ==================================================================== */

static int cmp_pidx(const void *x, const void *y) {
    const pidx *a = x, *b = y;
    if (a->p < b->p) {
        return -1;
    }
    if (a->p > b->p) {
        return 1;
    }
    return a->i < b->i ? -1 : a->i > b->i;
}

pm_err_t pm_assoc_bh(const double *p, size_t n, double *q) {
    pidx *v = pm_i_malloc(n ? n : 1, sizeof *v);
    if (!v) {
        return PM_ENOMEM;
    }
    for (size_t i = 0; i < n; i++) {
        v[i].p = p[i];
        v[i].i = i;
    }
    qsort(v, n, sizeof *v, cmp_pidx);
    double run = 1.0;
    size_t k = n;
    while (k > 0) {
        size_t j = k; /* tie group v[g..k) */
        size_t g = k - 1;
        while (g > 0 && v[g - 1].p == v[k - 1].p) {
            g--;
        }
        double val = v[k - 1].p * (double)n / (double)j;
        if (val < run) {
            run = val;
        }
        for (size_t t = g; t < k; t++) {
            q[v[t].i] = run;
        }
        k = g;
    }
    free(v);
    return PM_OK;
}

/* ==== share intervals of many items ========================================================== */
typedef struct {
    const pm_incidence_t *inc;
    const uint32_t *item;
    size_t k, chunks;
    double *lo, *hi;
} share_job;

static void share_interval(const pm_incidence_t *inc, size_t i, double *lo, double *hi) {
    if (inc->wcount) {
        double neff = pm_incidence_neff(inc);
        pm_assoc_jeffreys(pm_incidence_share(inc, i) * neff, neff, 0.05, lo, hi);
    } else {
        pm_assoc_jeffreys((double)inc->count[i], (double)inc->N, 0.05, lo, hi);
    }
}

static int share_chunk(void *ud, size_t c, unsigned th) {
    (void)th;
    share_job *j = ud;
    for (size_t x = j->k * c / j->chunks; x < j->k * (c + 1) / j->chunks; x++) {
        share_interval(j->inc, j->item[x], &j->lo[x], &j->hi[x]);
    }
    return 0;
}

pm_err_t pm_assoc_share_intervals(const pm_incidence_t *inc, const uint32_t *item, size_t k,
                                  unsigned threads, double *lo, double *hi, pm_diag_t *diag) {
    (void)diag;
    share_job j = {inc, item, k, k < 64 ? 1 : 64, lo, hi};
    (void)pm_i_parallel(threads ? threads : pm_cpu_count(), j.chunks, share_chunk, &j);
    return PM_OK; /* every chunk ran (parallel.h) */
}
