/* Exact sums of positive doubles (weights): each addend as an integer multiple of 2^e for one
 * exponent e per run (the lowest bit any addend has), added in 128-bit integers and rounded to
 * a double once. The result does not depend on the order or grouping of the additions, so
 * sums over parts of the respondents (count shards) equal the sums over all of them. */
#ifndef PM_EXACTSUM_H
#define PM_EXACTSUM_H

#include <math.h>
#include <stddef.h>
#include <stdint.h>

__extension__ typedef unsigned __int128 pm_i_u128;

/* The range of a set of addends, seen one by one (pm_i_xs_see), then the exponent for them
 * (pm_i_xs_fit). */
typedef struct {
    int lo, hi, any, bad;
} pm_i_xs_range;

static inline void pm_i_xs_see(pm_i_xs_range *r, double v) {
    if (!isfinite(v) || v < 0) {
        r->bad = 1;
        return;
    }
    if (v == 0) {
        return;
    }
    int x;
    double f = frexp(v, &x); /* v = f 2^x, f in [0.5, 1) */
    uint64_t m = (uint64_t)ldexp(f, 53);
    int l = x - 53 + __builtin_ctzll(m);
    if (!r->any || l < r->lo) {
        r->lo = l;
    }
    if (!r->any || x > r->hi) {
        r->hi = x;
    }
    r->any = 1;
}

/* The exponent e (the lowest bit of any addend seen) when the sum of up to `count` of them
 * fits 126 bits in units of 2^e: 0 and *e set; -1 when the range is too wide. */
static inline int pm_i_xs_fit(const pm_i_xs_range *r, uint64_t count, int *e) {
    int bits = 0;
    while (bits < 64 && (count >> bits)) {
        bits++;
    }
    if (r->bad || (r->any && r->hi - r->lo + bits > 126)) {
        return -1;
    }
    *e = r->any ? r->lo : 0;
    return 0;
}

/* v (finite, >= 0, a multiple of 2^e that fits) in units of 2^e. */
static inline pm_i_u128 pm_i_xs_units(double v, int e) {
    if (v == 0) {
        return 0;
    }
    int x;
    double f = frexp(v, &x);
    uint64_t m = (uint64_t)ldexp(f, 53);
    int sh = x - 53 - e;
    return sh >= 0 ? (pm_i_u128)m << sh : (pm_i_u128)(m >> -sh);
}

/* u 2^e rounded to the nearest double (ties to even). */
static inline double pm_i_xs_double(pm_i_u128 u, int e) {
    return ldexp((double)u, e); /* the conversion rounds correctly; ldexp is exact */
}

#endif
