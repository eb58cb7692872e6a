/* Unit tests of pm_assoc_jeffreys_many (src/confidence.c), the batch behind map.html's partner
 * table: every interval equal, bit for bit, to pm_assoc_jeffreys on the same (x, n) (the
 * solver whose values tests/ref/jeffreys.py checks against scipy.stats.beta.ppf), on 1, 2, 3
 * and 16 threads, with the bounds written over the arguments, and when the grouping's memory
 * cannot be allocated (every query then solved on its own). The queries repeat (x, n) as kept
 * pairs do (many pairs share an item and a joint count), and include x = 0, x = n, fractional
 * (weighted) values and 0.0 beside -0.0. */
#include "unit.h"

#include "pairmap/assoc.h"
#include "util.h"

#define Q 5000

static unit_rng g = {20261203};
static uint64_t rng(void) {
    return unit_next(&g);
}

static void make_queries(double *x, double *n) {
    static const double totals[] = {7, 40, 41, 1000, 123457, 5e6};
    for (size_t q = 0; q < Q; q++) {
        double t = totals[rng() % 6];
        uint64_t r = rng() % 100;
        if (r < 5) {
            x[q] = 0;
        } else if (r < 10) {
            x[q] = t;
        } else if (r < 15) { /* weighted: a share of an effective size */
            t = t * 0.731 + (double)(rng() % 3);
            x[q] = t * (double)(rng() % 1000) / 1000.0;
        } else {
            x[q] = (double)(1 + rng() % (uint64_t)(t < 60 ? t : 60));
        }
        n[q] = t;
    }
    x[17] = -0.0; /* a key apart from 0.0 by its bits, with the same interval */
    n[17] = 40;
}

static void check_against_single(const double *x, const double *n, const double *lo,
                                 const double *hi, const char *what, unsigned th) {
    for (size_t q = 0; q < Q; q++) {
        double l, h;
        pm_assoc_jeffreys(x[q], n[q], 0.05, &l, &h);
        if (memcmp(&l, &lo[q], sizeof l) != 0 || memcmp(&h, &hi[q], sizeof h) != 0) {
            fail_msg("%s, %u threads: query %zu (x %.17g, n %.17g): [%.17g, %.17g], alone "
                     "[%.17g, %.17g]",
                     what, th, q, x[q], n[q], lo[q], hi[q], l, h);
        }
    }
}

static void test_jeffreys_many_equals_single(void **state) {
    (void)state;
    static double x[Q], n[Q], lo[Q], hi[Q], ax[Q], an[Q];
    make_queries(x, n);
    static const unsigned threads[] = {1, 2, 3, 16};
    for (size_t t = 0; t < 4; t++) {
        pm_assoc_jeffreys_many(x, n, Q, 0.05, threads[t], lo, hi);
        check_against_single(x, n, lo, hi, "apart", threads[t]);
        memcpy(ax, x, sizeof ax); /* the bounds over the arguments, as map.html's table does */
        memcpy(an, n, sizeof an);
        pm_assoc_jeffreys_many(ax, an, Q, 0.05, threads[t], ax, an);
        check_against_single(x, n, ax, an, "in place", threads[t]);
    }
}

static void test_jeffreys_many_without_memory(void **state) {
    (void)state;
    static double x[Q], n[Q], ax[Q], an[Q];
    make_queries(x, n);
    for (long k = 1; k <= 2; k++) { /* the representatives, then the hash table */
        memcpy(ax, x, sizeof ax);
        memcpy(an, n, sizeof an);
        pm_i_alloc_fail_after(k);
        pm_assoc_jeffreys_many(ax, an, Q, 0.05, 1, ax, an);
        pm_i_alloc_fail_after(0);
        check_against_single(x, n, ax, an, "allocation failing", 1);
    }
}

static void test_jeffreys_many_empty(void **state) {
    (void)state;
    double x = 1, n = 2, lo = -1, hi = -1;
    pm_assoc_jeffreys_many(&x, &n, 0, 0.05, 2, &lo, &hi);
    assert_true(lo == -1 && hi == -1); /* nothing written */
}

int main(void) {
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_jeffreys_many_equals_single),
        cmocka_unit_test(test_jeffreys_many_without_memory),
        cmocka_unit_test(test_jeffreys_many_empty),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
