/* Unit tests of pm_i_fmt_double (src/util.c), the number formatter of every output, against a
 * reference built from glibc itself: glibc's printf (%.15g, %.16g, %.17g) and strtod are the
 * reference, used as its contract (util.h) says: the lowest precision whose text reads back.
 * Millions of doubles from the kinds of values pairmap writes and from the hard cases of decimal
 * conversion (exact ties, powers of two, read-back on the edge of the rounding interval). */
#include "unit.h"

#include <float.h>
#include <math.h>
#include <pthread.h>

#include "util.h"

/* ==== the reference ========================================================================= */

/* The contract, written with glibc: %.Pg for the lowest P of 15, 16, 17 whose text strtod reads
 * back as v. %g already drops the mantissa's trailing zeros and picks fixed or exponent notation
 * with that P (C11 7.21.6.1), so its text is used as it is. Words for the non-finite values and
 * "0" for both zeros are the contract's own (glibc would print "-nan" and "-0"). */
static void ref_fmt(char *out, size_t size, double v) {
    if (isnan(v)) {
        snprintf(out, size, "nan");
        return;
    }
    if (isinf(v)) {
        snprintf(out, size, v > 0 ? "inf" : "-inf");
        return;
    }
    if (v == 0) {
        snprintf(out, size, "0");
        return;
    }
    for (int p = 15; p <= 17; p++) {
        snprintf(out, size, "%.*g", p, v);
        if (p == 17 || strtod(out, NULL) == v) {
            return;
        }
    }
}

typedef struct {
    long checked, bad;
} tally;

/* Formats v both ways; a mismatch is counted and the first few are printed. The return value
 * must be the length, as snprintf's is. */
static void check(tally *t, double v) {
    char got[64], want[64];
    int n = pm_i_fmt_double(got, sizeof got, v);
    ref_fmt(want, sizeof want, v);
    t->checked++;
    if (strcmp(got, want) != 0 || n != (int)strlen(want)) {
        if (t->bad++ < 10) {
            print_message("%a: got '%s' (%d), want '%s'\n", v, got, n, want);
        }
    }
}

/* v and its k nearest neighbours on either side (nextafter). */
static void check_around(tally *t, double v, int k) {
    check(t, v);
    double lo = v, hi = v;
    for (int i = 0; i < k; i++) {
        lo = nextafter(lo, -INFINITY);
        hi = nextafter(hi, INFINITY);
        check(t, lo);
        check(t, hi);
    }
}

static void expect_clean(const tally *t, long at_least) {
    assert_int_equal(t->bad, 0);
    assert_true(t->checked >= at_least);
}

static double from_bits(uint64_t b) {
    double v;
    memcpy(&v, &b, sizeof v);
    return v;
}

/* ==== values of every kind =================================================================== */

/* Uniformly random bit patterns: every exponent, both signs, subnormals, NaNs and infinities. */
static void test_fmt_double_random_bits(void **state) {
    (void)state;
    unit_rng r = {0x5eed0001};
    tally t = {0, 0};
    for (int i = 0; i < 250000; i++) {
        check(&t, from_bits(unit_next(&r)));
    }
    /* subnormals and the normals just above them: exponent field 0 and 1, random mantissa */
    for (int i = 0; i < 100000; i++) {
        uint64_t b = unit_next(&r) & 0x801FFFFFFFFFFFFFULL;
        check(&t, from_bits(b));
    }
    expect_clean(&t, 350000);
}

/* Shares, confidences, phi: uniform in [0, 1) and in [-1, 1]. */
static void test_fmt_double_unit_interval(void **state) {
    (void)state;
    unit_rng r = {0x5eed0002};
    tally t = {0, 0};
    for (int i = 0; i < 300000; i++) {
        check(&t, unit_unif(&r));
        check(&t, 2 * unit_unif(&r) - 1);
    }
    expect_clean(&t, 600000);
}

/* p- and q-values: 10^-U(0, 320) (down into the subnormals), and values just below 1. */
static void test_fmt_double_pvalues(void **state) {
    (void)state;
    unit_rng r = {0x5eed0003};
    tally t = {0, 0};
    for (int i = 0; i < 400000; i++) {
        check(&t, pow(10.0, -320.0 * unit_unif(&r)));
    }
    for (int i = 0; i < 50000; i++) {
        check(&t, 1.0 - ldexp(unit_unif(&r), -(int)unit_below(&r, 60)));
    }
    expect_clean(&t, 450000);
}

/* Counts, lifts and expected counts: integers of every size up to 2^64, half-integers, and
 * lifts in [1, 50). */
static void test_fmt_double_integers(void **state) {
    (void)state;
    unit_rng r = {0x5eed0004};
    tally t = {0, 0};
    for (int i = 0; i < 200000; i++) {
        uint64_t u = unit_next(&r) >> unit_below(&r, 64);
        check(&t, (double)u);
        check(&t, -(double)(u >> 12) - 0.5); /* below 2^52: the half is exact */
    }
    for (int i = 0; i <= 100000; i++) {
        check(&t, (double)i);
        check(&t, 1 + 49 * unit_unif(&r));
    }
    expect_clean(&t, 600000);
}

/* ==== the hard cases ========================================================================= */

/* Every power of two (2^-1074 .. 2^1023) and every power of ten in range (strtod of "1eN", the
 * nearest double), with four neighbours on each side; the extremes of the format; and values
 * whose text is well known (checked with /usr/bin/python3's '%.15g' % v, which uses Python's
 * own correctly rounded conversion, not glibc's). */
static void test_fmt_double_powers_and_extremes(void **state) {
    (void)state;
    tally t = {0, 0};
    for (int e = -1074; e <= 1023; e++) {
        check_around(&t, ldexp(1.0, e), 4);
        check_around(&t, -ldexp(1.0, e), 1);
    }
    char s[16];
    for (int e = -323; e <= 308; e++) {
        snprintf(s, sizeof s, "1e%d", e);
        check_around(&t, strtod(s, NULL), 4);
    }
    const double special[] = {DBL_MIN,
                              DBL_MAX,
                              DBL_TRUE_MIN,
                              -DBL_TRUE_MIN,
                              0.1,
                              0.3,
                              1e22,
                              1e23,
                              5e-324,
                              0.0,
                              -0.0,
                              NAN,
                              -NAN,
                              INFINITY,
                              -INFINITY,
                              DBL_EPSILON,
                              1e17,
                              1e16,
                              9007199254740992.0,
                              123456789012345678.0};
    for (size_t i = 0; i < sizeof special / sizeof special[0]; i++) {
        check_around(&t, special[i], 2);
    }
    expect_clean(&t, 10000);

    static const struct {
        double v;
        const char *s;
    } known[] = {
        {0.1, "0.1"},
        {0.3, "0.3"},
        {1e22, "1e+22"},
        {1e23, "1e+23"},
        {1e-5, "1e-05"},
        {1e15, "1e+15"},
        {123456.0, "123456"},
        {0.1 + 0.2, "0.30000000000000004"},
        {5e-324, "4.94065645841247e-324"},
        {3 * 5e-324, "1.48219693752374e-323"},
        {DBL_MIN, "2.2250738585072014e-308"},
        {DBL_MAX, "1.7976931348623157e+308"},
        {9007199254740993.0, "9007199254740992"}, /* 2^53 + 1 rounds to 2^53 */
        {123456789012345678.0, "1.2345678901234568e+17"},
        {-0.0, "0"}, /* the contract, not %g's "-0" */
        {-NAN, "nan"},
        {-INFINITY, "-inf"},
    };
    char buf[64];
    for (size_t i = 0; i < sizeof known / sizeof known[0]; i++) {
        int n = pm_i_fmt_double(buf, sizeof buf, known[i].v);
        assert_string_equal(buf, known[i].s);
        assert_int_equal(n, (int)strlen(known[i].s));
    }
}

/* Is the decimal value of v an exact tie at p significant digits (the digits after the p-th are
 * 5 then zeros)? %.80e prints every digit of the dyadic rationals used here exactly. */
static int is_tie(double v, int p) {
    char s[128];
    snprintf(s, sizeof s, "%.80e", fabs(v));
    char d[128] = {0};
    int n = 0;
    for (const char *c = s; *c && *c != 'e' && n < 100; c++) {
        if (*c != '.') {
            d[n++] = *c;
        }
    }
    if (d[p] != '5') {
        return 0;
    }
    for (int i = p + 1; i < n; i++) {
        if (d[i] != '0') {
            return 0;
        }
    }
    return 1;
}

/* Exact ties at 15, 16 and 17 digits, where printf rounds to even: k / 2^n with k odd, so that
 * the exact decimal k 5^n / 10^n has P + 1 significant digits ending in 5. The generator is
 * checked to produce such ties (counted with is_tie), so the test cannot pass vacuously. */
static void test_fmt_double_exact_ties(void **state) {
    (void)state;
    unit_rng r = {0x5eed0005};
    tally t = {0, 0};
    long ties[18] = {0};
    for (int i = 0; i < 80000; i++) {
        int p = 15 + (int)unit_below(&r, 3);
        int n = 1 + (int)unit_below(&r, 25);
        /* k in [10^p / 5^n, 10^(p+1) / 5^n), below 2^53 */
        double lo = pow(10.0, p) / pow(5.0, n), hi = 10 * lo;
        if (lo < 1) {
            lo = 1;
        }
        if (hi > 9007199254740991.0) {
            hi = 9007199254740991.0;
        }
        if (lo >= hi) {
            continue;
        }
        uint64_t k = (uint64_t)(lo + (hi - lo) * unit_unif(&r)) | 1;
        double v = ldexp((double)k, -n);
        if (unit_below(&r, 2)) {
            v = -v;
        }
        ties[p] += is_tie(v, p);
        check(&t, v);
        check_around(&t, v, 1);
    }
    /* small dyadic rationals of every kind: j / 2^n for n up to 60 */
    for (int i = 0; i < 100000; i++) {
        int n = (int)unit_below(&r, 61);
        double v = ldexp((double)(unit_next(&r) >> (11 + unit_below(&r, 53))), -n);
        check(&t, v);
    }
    print_message("exact ties at 15, 16, 17 digits: %ld, %ld, %ld\n", ties[15], ties[16], ties[17]);
    expect_clean(&t, 300000);
    for (int p = 15; p <= 17; p++) {
        assert_true(ties[p] > 10000);
    }
}

/* Candidate decimal value of %.{p}e of v as an integer (v >= 10^(p-1), below 2^63). */
static uint64_t candidate_int(double v, int p) {
    char s[64];
    snprintf(s, sizeof s, "%.*e", p - 1, v);
    uint64_t d = 0;
    const char *c = s;
    for (; *c != 'e'; c++) {
        if (*c != '.') {
            d = d * 10 + (uint64_t)(*c - '0');
        }
    }
    int x = atoi(c + 1) - (p - 1);
    while (x-- > 0) {
        d *= 10;
    }
    return d;
}

/* Doubles in [2^54, 2^62): integers, spaced 4 to 1024 apart, where the 15- or 16-digit
 * candidate often falls exactly on the edge of the rounding interval (v plus or minus half the
 * spacing); strtod then rounds to the even neighbour, so it reads back only when v's mantissa
 * is even. Such edge cases are counted with exact integer arithmetic, so that the test cannot
 * pass vacuously. */
static void test_fmt_double_readback_edges(void **state) {
    (void)state;
    unit_rng r = {0x5eed0006};
    tally t = {0, 0};
    long edges_even = 0, edges_odd = 0;
    for (int i = 0; i < 120000; i++) {
        uint64_t e = 1023 + 54 + unit_below(&r, 8);
        double v = from_bits((e << 52) | (unit_next(&r) & ((1ULL << 52) - 1)));
        uint64_t iv = (uint64_t)v, half = 1ULL << (e - 1023 - 53);
        for (int p = 15; p <= 16; p++) {
            uint64_t c = candidate_int(v, p);
            if (c == iv - half || c == iv + half) {
                edges_even += (iv / (2 * half)) % 2 == 0;
                edges_odd += (iv / (2 * half)) % 2 == 1;
            }
        }
        check(&t, v);
        check(&t, -v);
    }
    print_message("candidates on the edge: %ld with v's mantissa even, %ld odd\n", edges_even,
                  edges_odd);
    expect_clean(&t, 240000);
    assert_true(edges_even > 1000);
    assert_true(edges_odd > 1000);
}

/* ==== the interface ========================================================================== */

/* A short buffer gets the text cut as snprintf cuts it, and the full length is returned. */
static void test_fmt_double_short_buffer(void **state) {
    (void)state;
    const double vals[] = {
        0.30000000000000004, -1.2345678901234567e-300, 12345.5, 0.0, -INFINITY, NAN, 1e-7,
        123456789012345678.0};
    for (size_t i = 0; i < sizeof vals / sizeof vals[0]; i++) {
        char full[64], want[64], got[64];
        int n = pm_i_fmt_double(full, sizeof full, vals[i]);
        assert_int_equal(n, (int)strlen(full));
        for (size_t size = 0; size <= (size_t)n + 1; size++) {
            memset(got, 'x', sizeof got);
            memset(want, 'x', sizeof want);
            int m = pm_i_fmt_double(got, size, vals[i]);
            snprintf(want, size, "%s", full);
            assert_int_equal(m, n);
            assert_memory_equal(got, want, sizeof got); /* nothing written past size */
        }
    }
    char *nothing = NULL; /* size 0: buf is not touched, as with snprintf */
    assert_int_equal(pm_i_fmt_double(nothing, 0, 0.1), 3);
}

/* Threads formatting at the same time from the first call on (the power table is built once,
 * under pthread_once). cmocka's asserts are not thread-safe, so the threads only count. */
typedef struct {
    uint64_t seed;
    long bad;
} thread_job;

static void *format_many(void *arg) {
    thread_job *job = arg;
    unit_rng r = {job->seed};
    char got[64], want[64];
    for (int i = 0; i < 20000; i++) {
        double v = i % 2 ? from_bits(unit_next(&r)) : pow(10.0, -320.0 * unit_unif(&r));
        pm_i_fmt_double(got, sizeof got, v);
        ref_fmt(want, sizeof want, v);
        job->bad += strcmp(got, want) != 0;
    }
    return NULL;
}

static void test_fmt_double_threads(void **state) {
    (void)state;
    pthread_t th[4];
    thread_job job[4];
    for (int i = 0; i < 4; i++) {
        job[i].seed = 0x5eed0100 + (uint64_t)i;
        job[i].bad = 0;
        assert_int_equal(pthread_create(&th[i], NULL, format_many, &job[i]), 0);
    }
    for (int i = 0; i < 4; i++) {
        assert_int_equal(pthread_join(th[i], NULL), 0);
        assert_int_equal(job[i].bad, 0);
    }
}

static const struct CMUnitTest tests[] = {
    cmocka_unit_test(test_fmt_double_threads), /* first: the table's first use is threaded */
    cmocka_unit_test(test_fmt_double_random_bits),
    cmocka_unit_test(test_fmt_double_unit_interval),
    cmocka_unit_test(test_fmt_double_pvalues),
    cmocka_unit_test(test_fmt_double_integers),
    cmocka_unit_test(test_fmt_double_powers_and_extremes),
    cmocka_unit_test(test_fmt_double_exact_ties),
    cmocka_unit_test(test_fmt_double_readback_edges),
    cmocka_unit_test(test_fmt_double_short_buffer),
};

UNIT_MAIN("fmt", tests)
