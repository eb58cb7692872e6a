/* Checked allocation, growable arrays, the interning string table and number formatting. */
#include "util.h"

#include <math.h>
#include <pthread.h>
#include <stdatomic.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

/* ==== allocation ============================================================================ */
/* Test hook (util.h); 0 = off. Atomic: allocations happen on every thread. */
static atomic_long fail_countdown;

static bool should_fail(void) {
    if (atomic_load_explicit(&fail_countdown, memory_order_relaxed) <= 0) {
        return false;
    }
    return atomic_fetch_sub(&fail_countdown, 1) == 1;
}

void pm_i_alloc_fail_after(long n) {
    atomic_store(&fail_countdown, n);
}

void *pm_i_malloc(size_t n, size_t size) {
    if (size && n > SIZE_MAX / size) {
        return NULL;
    }
    if (should_fail()) {
        return NULL;
    }
    return malloc((n * size) != 0 ? n * size : 1);
}

void *pm_i_calloc(size_t n, size_t size) {
    if (size && n > SIZE_MAX / size) {
        return NULL;
    }
    if (should_fail()) {
        return NULL;
    }
    return calloc(n ? n : 1, size ? size : 1);
}

void *pm_i_realloc(void *p, size_t n, size_t size) {
    if (size && n > SIZE_MAX / size) {
        return NULL;
    }
    if (should_fail()) {
        return NULL;
    }
    return realloc(p, (n * size) != 0 ? n * size : 1);
}

void pm_i_free(void *p) {
    free(p);
}

int pm_i_grow(void **p, size_t *cap, size_t need, size_t size) {
    if (need <= *cap) {
        return 0;
    }
    size_t nc = *cap ? *cap : 16;
    while (nc < need) {
        if (nc > SIZE_MAX / 2) {
            return -1;
        }
        nc *= 2;
    }
    void *q = pm_i_realloc(*p, nc, size);
    if (!q) {
        return -1;
    }
    *p = q;
    *cap = nc;
    return 0;
}

/* ==== string table ========================================================================== */
#define ARENA_BLOCK (1u << 20)

struct pm_i_arena_block {
    pm_i_arena_block *next;
    size_t used, size;
    char data[];
};

static inline uint64_t load64(const char *p) {
    uint64_t v;
    memcpy(&v, p, 8);
    return v;
}

static inline uint64_t mix64(uint64_t h) { /* the splitmix64 finaliser */
    h ^= h >> 30;
    h *= 0xbf58476d1ce4e5b9ULL;
    h ^= h >> 27;
    h *= 0x94d049bb133111ebULL;
    h ^= h >> 31;
    return h;
}

uint64_t pm_i_hash(const char *s, size_t len) {
    /* Eight bytes at a time (the last word overlapping), then an avalanche. Only used to place
     * strings in the table: ids are given in first-seen order, so no result depends on it. */
    uint64_t h = 0x9E3779B97F4A7C15ULL ^ (uint64_t)len;
    if (len >= 8) {
        size_t i = 0;
        for (; i + 8 < len; i += 8) {
            h = (h ^ load64(s + i)) * 0xff51afd7ed558ccdULL;
            h ^= h >> 32;
        }
        h = (h ^ load64(s + len - 8)) * 0xc4ceb9fe1a85ec53ULL;
    } else {
        uint64_t w = 0;
        memcpy(&w, s, len);
        h = (h ^ w) * 0xc4ceb9fe1a85ec53ULL;
    }
    return mix64(h);
}

void pm_i_strtab_init(pm_i_strtab *t) {
    memset(t, 0, sizeof *t);
}

void pm_i_strtab_destroy(pm_i_strtab *t) {
    if (!t) {
        return;
    }
    pm_i_arena_block *b = t->blocks;
    while (b) {
        pm_i_arena_block *n = b->next;
        free(b);
        b = n;
    }
    free(t->slots);
    free((void *)t->str);
    free(t->len);
    free(t->hash);
    memset(t, 0, sizeof *t);
}

static char *arena_copy(pm_i_strtab *t, const char *s, size_t len) {
    pm_i_arena_block *b = t->blocks;
    if (!b || b->size - b->used < len + 1) {
        size_t sz = len + 1 > ARENA_BLOCK ? len + 1 : ARENA_BLOCK;
        b = pm_i_malloc(1, sizeof *b + sz);
        if (!b) {
            return NULL;
        }
        b->size = sz;
        b->used = 0;
        b->next = t->blocks;
        t->blocks = b;
    }
    char *p = b->data + b->used;
    memcpy(p, s, len);
    p[len] = '\0';
    b->used += len + 1;
    return p;
}

/* The key words of s (see pm_i_slot). For 8..16 bytes the first and the last eight bytes
 * (overlapping) together with the length determine the string. */
static inline void slot_key(const char *s, size_t len, uint64_t h, uint64_t *k0, uint64_t *k1) {
    if (len > 16) {
        *k0 = h;
        *k1 = 0;
    } else if (len >= 8) {
        *k0 = load64(s);
        *k1 = load64(s + len - 8);
    } else {
        uint64_t w = 0;
        memcpy(&w, s, len);
        *k0 = w;
        *k1 = 0;
    }
}

static inline int slot_match(const pm_i_strtab *t, const pm_i_slot *sl, const char *s, size_t len,
                             uint64_t k0, uint64_t k1) {
    if (sl->len != len || sl->k0 != k0 || sl->k1 != k1) {
        return 0;
    }
    return len <= 16 || memcmp(t->str[sl->id1 - 1], s, len) == 0;
}

static int rehash(pm_i_strtab *t, size_t ncap) {
    pm_i_slot *ns = pm_i_calloc(ncap, sizeof *ns);
    if (!ns) {
        return -1;
    }
    for (size_t id = 0; id < t->count; id++) {
        size_t i = (size_t)t->hash[id] & (ncap - 1);
        while (ns[i].id1) {
            i = (i + 1) & (ncap - 1);
        }
        slot_key(t->str[id], t->len[id], t->hash[id], &ns[i].k0, &ns[i].k1);
        ns[i].len = t->len[id];
        ns[i].id1 = (uint32_t)id + 1;
    }
    free(t->slots);
    t->slots = ns;
    t->cap = ncap;
    return 0;
}

int64_t pm_i_strtab_find(const pm_i_strtab *t, const char *s, size_t len) {
    if (!t->cap || len > UINT32_MAX) {
        return -1;
    }
    return pm_i_strtab_find_h(t, s, len, pm_i_hash(s, len));
}

int64_t pm_i_strtab_find_h(const pm_i_strtab *t, const char *s, size_t len, uint64_t h) {
    if (!t->cap || len > UINT32_MAX) {
        return -1;
    }
    uint64_t k0, k1;
    slot_key(s, len, h, &k0, &k1);
    size_t i = (size_t)h & (t->cap - 1);
    while (t->slots[i].id1) {
        if (slot_match(t, &t->slots[i], s, len, k0, k1)) {
            return t->slots[i].id1 - 1;
        }
        i = (i + 1) & (t->cap - 1);
    }
    return -1;
}

int64_t pm_i_strtab_intern(pm_i_strtab *t, const char *s, size_t len, bool *added) {
    if (added) {
        *added = false;
    }
    if (len > UINT32_MAX || t->count >= UINT32_MAX - 1) {
        return -1;
    }
    if ((t->count + 1) * 2 > t->cap) { /* load factor at most 1/2 */
        if (rehash(t, t->cap ? t->cap * 2 : 1024) != 0) {
            return -1;
        }
    }
    uint64_t h = pm_i_hash(s, len), k0, k1;
    slot_key(s, len, h, &k0, &k1);
    size_t i = (size_t)h & (t->cap - 1);
    while (t->slots[i].id1) {
        if (slot_match(t, &t->slots[i], s, len, k0, k1)) {
            return t->slots[i].id1 - 1;
        }
        i = (i + 1) & (t->cap - 1);
    }
    if (t->count >= t->str_cap) {
        size_t nc = t->str_cap ? t->str_cap * 2 : 1024;
        const char **ns = pm_i_realloc((void *)t->str, nc, sizeof *ns);
        if (!ns) {
            return -1;
        }
        t->str = ns;
        uint32_t *nl = pm_i_realloc(t->len, nc, sizeof *nl);
        if (!nl) {
            return -1;
        }
        t->len = nl;
        uint64_t *nh = pm_i_realloc(t->hash, nc, sizeof *nh);
        if (!nh) {
            return -1;
        }
        t->hash = nh;
        t->str_cap = nc;
    }
    char *copy = arena_copy(t, s, len);
    if (!copy) {
        return -1;
    }
    size_t id = t->count++;
    t->str[id] = copy;
    t->len[id] = (uint32_t)len;
    t->hash[id] = h;
    t->slots[i].k0 = k0;
    t->slots[i].k1 = k1;
    t->slots[i].len = (uint32_t)len;
    t->slots[i].id1 = (uint32_t)id + 1;
    if (added) {
        *added = true;
    }
    return (int64_t)id;
}

/* ==== sorting =============================================================================== */
static inline uint64_t key_of(const unsigned char *rec) {
    uint64_t k;
    memcpy(&k, rec, sizeof k);
    return k;
}

/* One record from src to dst; the common sizes without a call to memcpy. */
static inline void rec_copy(unsigned char *dst, const unsigned char *src, size_t size) {
    if (size == 16) {
        uint64_t a, b;
        memcpy(&a, src, 8);
        memcpy(&b, src + 8, 8);
        memcpy(dst, &a, 8);
        memcpy(dst + 8, &b, 8);
    } else if (size == 8) {
        uint64_t a;
        memcpy(&a, src, 8);
        memcpy(dst, &a, 8);
    } else {
        memcpy(dst, src, size);
    }
}

/* LSD radix with 11-bit digits (six passes at most; 2048 buckets keep the scatter within the
 * caches), every histogram taken in one read of the keys. */
#define RADIX_BITS 11
#define RADIX_N (1u << RADIX_BITS)
#define RADIX_PASSES ((64 + RADIX_BITS - 1) / RADIX_BITS)

int pm_i_radix_sort(void *base, size_t n, size_t size) {
    return pm_i_radix_sort_from(base, n, size, 0);
}

int pm_i_radix_sort_from(void *base, size_t n, size_t size, int lo) {
    if (n < 2) {
        return 0;
    }
    int passes = (64 - lo + RADIX_BITS - 1) / RADIX_BITS;
    unsigned char *tmp = pm_i_malloc(n, size);
    size_t *cnt = pm_i_calloc((size_t)RADIX_PASSES * RADIX_N, sizeof *cnt);
    if (!tmp || !cnt) {
        free(tmp);
        free(cnt);
        return -1;
    }
    unsigned char *src = base, *dst = tmp;
    for (size_t i = 0; i < n; i++) {
        uint64_t k = key_of(src + i * size);
        for (int p = 0; p < passes; p++) {
            cnt[(size_t)p * RADIX_N + ((k >> (lo + p * RADIX_BITS)) & (RADIX_N - 1))]++;
        }
    }
    uint64_t k0 = key_of(src);
    for (int p = 0; p < passes; p++) {
        int shift = lo + p * RADIX_BITS;
        size_t *c = cnt + (size_t)p * RADIX_N;
        if (c[(k0 >> shift) & (RADIX_N - 1)] == n) {
            continue; /* every key has this digit */
        }
        size_t sum = 0;
        for (unsigned bk = 0; bk < RADIX_N; bk++) {
            size_t x = c[bk];
            c[bk] = sum;
            sum += x;
        }
        for (size_t i = 0; i < n; i++) {
            const unsigned char *r = src + i * size;
            size_t at = c[(key_of(r) >> shift) & (RADIX_N - 1)]++;
            rec_copy(dst + at * size, r, size);
        }
        unsigned char *t = src;
        src = dst;
        dst = t;
    }
    if (src != (unsigned char *)base) {
        memcpy(base, src, n * size);
    }
    free(tmp);
    free(cnt);
    return 0;
}

/* ==== misc ================================================================================== */
int pm_i_bytecmp(const char *a, const char *b) {
    return strcmp(a, b); /* C11 7.24.4: strcmp compares as unsigned char */
}

/* ---- number formatting ---------------------------------------------------------------------
 * pm_i_fmt_double prints the lowest of the precisions 15, 16, 17 whose %g text reads back
 * (strtod) as the same double, in %g's spelling. Two routes give the same text:
 *
 * fast (finite v with |v| < 2^57, about 1.4e17, subnormals included): exact integer arithmetic.
 * With |v| = m 2^q (m an integer), pick k = 16 - E' (E' = floor(log10 2^e2) <= log10|v|, e2 the
 * binary exponent) so that X = |v| 10^k = m 5^k / 2^t (t = -(q + k)) lies in [10^16, 10^18).
 * The integer part of X (< 2^60) and the class of its fraction (zero, below, exactly or above
 * one half) are exact: 5^k is odd, so the low t bits of m 5^k are zero exactly as far as m's
 * trailing zero bits go. Rounding that (ties to even, as glibc's printf in the default rounding
 * mode) to 15, 16 or 17 digits gives what %.Pg gives. A candidate D 10^j reads back as v iff it
 * lies inside the interval that strtod rounds to v: ((2m-1) 5^k / 2^(t+1), (2m+1) 5^k / 2^(t+1))
 * in units of X, with the lower end at (4m-1) 5^k / 2^(t+2) when v is a power of two above
 * the smallest normal, and the ends themselves included when m is even (ties to even). The
 * ends are odd numbers over a power of two, so only their integer parts are needed, plus
 * whether they are integers (only when the shift is not positive). 5^k has at most 13 limbs.
 *
 * slow (|v| >= 2^57, where k would be negative): glibc's printf to 25 digits, rounding those,
 * and strtod. */

enum { P5_MAXK = 340, P5_LIMBS = 13 }; /* 5^340 (k of the smallest subnormal) < 2^790 */

/* 5^0 .. 5^P5_MAXK in 64-bit limbs, least significant first, computed on first use. Written
 * only inside pthread_once, read-only afterwards. */
static uint64_t p5_tab[P5_MAXK + 1][P5_LIMBS];
static unsigned char p5_len[P5_MAXK + 1];
static pthread_once_t p5_once = PTHREAD_ONCE_INIT;

__extension__ typedef unsigned __int128 pm_u128; /* a GCC/Clang extension (-Wpedantic) */

static void p5_build(void) {
    uint64_t cur[P5_LIMBS] = {1};
    int n = 1;
    for (int k = 0; k <= P5_MAXK; k++) {
        memcpy(p5_tab[k], cur, (size_t)n * sizeof cur[0]);
        p5_len[k] = (unsigned char)n;
        uint64_t carry = 0;
        for (int i = 0; i < n; i++) {
            pm_u128 p = (pm_u128)cur[i] * 5 + carry;
            cur[i] = (uint64_t)p;
            carry = (uint64_t)(p >> 64);
        }
        if (carry && n < P5_LIMBS) { /* only 5^341, never stored, would need a 14th limb */
            cur[n++] = carry;
        }
    }
}

static const uint64_t POW10U[19] = {1ULL,
                                    10ULL,
                                    100ULL,
                                    1000ULL,
                                    10000ULL,
                                    100000ULL,
                                    1000000ULL,
                                    10000000ULL,
                                    100000000ULL,
                                    1000000000ULL,
                                    10000000000ULL,
                                    100000000000ULL,
                                    1000000000000ULL,
                                    10000000000000ULL,
                                    100000000000000ULL,
                                    1000000000000000ULL,
                                    10000000000000000ULL,
                                    100000000000000000ULL,
                                    1000000000000000000ULL};

static const char DIGITS2[201] =
    "00010203040506070809101112131415161718192021222324252627282930313233"
    "34353637383940414243444546474849505152535455565758596061626364656667"
    "6869707172737475767778798081828384858687888990919293949596979899";

/* Writes the 8 digits of v < 10^8, zero-padded, in four independent pairs. */
static void put8(char *d, uint32_t v) {
    uint32_t a = v / 10000, b = v % 10000;
    memcpy(d, DIGITS2 + 2 * (a / 100), 2);
    memcpy(d + 2, DIGITS2 + 2 * (a % 100), 2);
    memcpy(d + 4, DIGITS2 + 2 * (b / 100), 2);
    memcpy(d + 6, DIGITS2 + 2 * (b % 100), 2);
}

enum { FRAC_ZERO, FRAC_BELOW, FRAC_HALF, FRAC_ABOVE }; /* the fraction against one half */

/* floor(y / 2^t) for the n-limb y, t >= 0, when the result is known to be below 2^64. */
static uint64_t limbs_shr(const uint64_t *y, int n, int t) {
    int i = t >> 6, sh = t & 63;
    uint64_t lo = i < n ? y[i] : 0, hi = i + 1 < n ? y[i + 1] : 0;
    return sh ? (lo >> sh) | (hi << (64 - sh)) : lo;
}

/* floor(y / 2^t) for any t (t < 0 multiplies; the result is known to be below 2^64). */
static uint64_t u128_shr(pm_u128 y, int t) {
    if (t <= 0) {
        return (uint64_t)y << -t;
    }
    return t < 128 ? (uint64_t)(y >> t) : 0;
}

/* floor(c f / 2^T) for the n-limb f, c < 2^55 and T >= 0, when the result is known to be below
 * 2^64. Only the limbs of f from s0 = T/64 - 1 up are multiplied: the lower ones add less than
 * c < 2^55 to the product's limb s0 (their part of c f is below c 2^(64 s0)), which can reach
 * the bits wanted (64 and up, counted from limb s0) only when that limb is 2^64 - 2^55 or more;
 * then, about once in 500 calls, the whole product is taken. */
static uint64_t mul_shr(const uint64_t *f, int n, uint64_t c, int T) {
    int s0 = T >= 64 ? (T >> 6) - 1 : 0;
    if (s0 >= n) {
        return 0; /* c f < 2^(64 (n + 1)) <= 2^T */
    }
    for (;;) {
        uint64_t p[P5_LIMBS + 1], carry = 0;
        for (int i = s0; i < n; i++) {
            pm_u128 x = (pm_u128)f[i] * c + carry;
            p[i - s0] = (uint64_t)x;
            carry = (uint64_t)(x >> 64);
        }
        p[n - s0] = carry;
        if (s0 == 0 || p[0] >> 55 != 0x1FF) {
            return limbs_shr(p, n - s0 + 1, T - 64 * s0);
        }
        s0 = 0;
    }
}

/* x / 10^j (j = 0..3) rounded to nearest, ties to even, where x is the integer part of the exact
 * value and frac the class of its fraction. */
static uint64_t round_pow10(uint64_t x, int frac, int j) {
    if (j == 0) {
        return x + (frac == FRAC_ABOVE || (frac == FRAC_HALF && (x & 1)));
    }
    uint64_t d; /* constant divisors, so that the compiler multiplies instead of dividing */
    switch (j) {
    case 1:
        d = x / 10;
        break;
    case 2:
        d = x / 100;
        break;
    default:
        d = x / 1000;
        break;
    }
    uint64_t p = POW10U[j], r = x - d * p, h = p / 2;
    if (r > h || (r == h && frac != FRAC_ZERO)) {
        return d + 1;
    }
    return r == h ? d + (d & 1) : d;
}

/* floor(e2 log10(2)) for |e2| <= 1100, from floor(e2 78913 / 2^18): 78913 / 2^18 is log10(2)
 * less 8e-7, and the two floors agree for every e2 in that range (checked for each one when this
 * was written; were one wrong, X would fall outside [10^16, 10^18) and the slow route run). */
static int floor_log10_pow2(int e2) {
    return e2 >= 0 ? (int)(((int64_t)e2 * 78913) >> 18)
                   : -(int)(((int64_t)-e2 * 78913 + 262143) >> 18);
}

/* The fast route: writes the P (15..17) digits of |v| (finite, non-zero) to dig and its
 * decimal exponent to *x, returns P; returns 0 when |v| is too large for it. */
static int fmt_exact(double a, char *dig, int *x) {
    uint64_t bits;
    memcpy(&bits, &a, sizeof bits);
    int be = (int)(bits >> 52) & 0x7ff;
    uint64_t m = bits & ((1ULL << 52) - 1);
    int q = -1074;
    if (be) {
        m |= 1ULL << 52;
        q = be - 1075;
    }
    int e2 = q + 63 - __builtin_clzll(m); /* 2^e2 <= |v| < 2^(e2+1) */
    int E = floor_log10_pow2(e2);         /* floor(log10 |v|) is E or E + 1 */
    int k = 16 - E;
    if (k < 0 || k > P5_MAXK) {
        return 0;
    }
    int t = -(q + k);                       /* X = m 5^k / 2^t */
    int narrow = m == 1ULL << 52 && be > 1; /* the gap below is half the gap above */
    uint64_t c_lo = narrow ? 4 * m - 1 : 2 * m - 1;
    int t_lo = narrow ? t + 2 : t + 1;
    uint64_t fx, f_hi, f_lo; /* integer parts of X and of the two ends */
    int bit;                 /* bit t-1 of m 5^k: the fraction's first binary digit */
    pthread_once(&p5_once, p5_build);
    const uint64_t *p5 = p5_tab[k];
    int n5 = p5_len[k];
    if (n5 == 1) { /* 5^k < 2^64: every product fits in 118 bits */
        pm_u128 f = p5[0], b = f * m;
        fx = u128_shr(b, t);
        bit = t >= 1 && t <= 128 ? (int)((b >> (t - 1)) & 1) : 0;
        f_hi = u128_shr(f * (2 * m + 1), t + 1);
        f_lo = u128_shr(f * c_lo, t_lo);
    } else {
        if (t < 1 || t > 1100) {
            return 0; /* not reached: 5^k >= 2^64 > X needs t >= 5; t <= 1074 - k */
        }
        uint64_t b2 = mul_shr(p5, n5, m, t - 1); /* floor(m 5^k / 2^(t-1)) < 2^61 */
        fx = b2 >> 1;
        bit = (int)(b2 & 1);
        f_hi = mul_shr(p5, n5, 2 * m + 1, t + 1);
        f_lo = mul_shr(p5, n5, c_lo, t_lo);
    }
    if (fx < POW10U[16] || fx >= POW10U[18]) {
        return 0; /* not reached (E is floor(log10 |v|) or one less) */
    }
    int frac = FRAC_ZERO;
    if (t > 0) {
        int z = __builtin_ctzll(m); /* m 5^k has the trailing zero bits of m */
        frac = z >= t ? FRAC_ZERO : z == t - 1 ? FRAC_HALF : bit ? FRAC_ABOVE : FRAC_BELOW;
    }
    int base = fx >= POW10U[17]; /* X has 18 digits: |v| is 10^(E+1) or more */
    int even = !(m & 1), hi_int = t + 1 <= 0, lo_int = t_lo <= 0;
    int P = 15;
    uint64_t d = 0;
    for (; P <= 17; P++) {
        int j = 17 - P + base;
        d = round_pow10(fx, frac, j);
        if (P == 17) {
            break; /* 17 digits always read back */
        }
        uint64_t dx = d * POW10U[j]; /* the candidate in units of X (at most 10^18) */
        int above_lo = dx > f_lo || (lo_int && even && dx == f_lo);
        int below_hi = hi_int ? dx < f_hi || (even && dx == f_hi) : dx <= f_hi;
        if (above_lo && below_hi) {
            break;
        }
    }
    *x = E + base;
    if (d == POW10U[P]) { /* rounded up to a new leading digit */
        d = POW10U[P - 1];
        (*x)++;
    }
    /* the 17 digits of d (zero-padded; d < 10^17) as 1 + 8 + 8, the last P of them kept */
    char t17[40] = {0};
    t17[0] = (char)('0' + d / POW10U[16]);
    put8(t17 + 1, (uint32_t)(d / POW10U[8] % POW10U[8]));
    put8(t17 + 9, (uint32_t)(d % POW10U[8]));
    memcpy(dig, t17 + 17 - P, 17);
    return P;
}

/* Exact powers of ten as doubles (10^0 .. 10^22 are representable). */
static const double P10[23] = {1e0,  1e1,  1e2,  1e3,  1e4,  1e5,  1e6,  1e7,
                               1e8,  1e9,  1e10, 1e11, 1e12, 1e13, 1e14, 1e15,
                               1e16, 1e17, 1e18, 1e19, 1e20, 1e21, 1e22};

/* Does the decimal digits[0..n) x 10^(x - n + 1) read back as v? With an integer part below
 * 2^53 and a small exponent, both operands of one IEEE multiplication or division are exact, so the
 * result is correctly rounded, as strtod's is (Clinger's fast path); otherwise ask strtod. */
static int reads_back(const char *digits, int n, int x, double v) {
    int k = x - n + 1;
    if (n <= 16 && k >= -22 && k <= 22) {
        uint64_t mi = 0;
        for (int i = 0; i < n; i++) {
            mi = mi * 10 + (uint64_t)(digits[i] - '0');
        }
        if (mi <= (1ULL << 53)) { /* the integer is exact as a double */
            double m = (double)mi;
            double r = k >= 0 ? m * P10[k] : m / P10[-k];
            return r == v;
        }
    }
    char tmp[40]; /* digits "e" exponent, built by hand (printf with '*' is slow in glibc) */
    memcpy(tmp, digits, (size_t)n);
    int o = n;
    tmp[o++] = 'e';
    if (k < 0) {
        tmp[o++] = '-';
        k = -k;
    }
    char rev[8];
    int r = 0;
    do {
        rev[r++] = (char)('0' + k % 10);
        k /= 10;
    } while (k);
    while (r) {
        tmp[o++] = rev[--r];
    }
    tmp[o] = '\0';
    return strtod(tmp, NULL) == v;
}

/* Rounds the 17 digits d to n digits (half up), writing into out; may carry into a new
 * leading digit, in which case *x grows by one. */
static void round_digits(const char *d, int n, char *out, int *x) {
    memcpy(out, d, (size_t)n);
    if (d[n] >= '5') {
        int i = n - 1;
        while (i >= 0 && out[i] == '9') {
            out[i--] = '0';
        }
        if (i >= 0) {
            out[i]++;
        } else {
            memmove(out + 1, out, (size_t)n - 1);
            out[0] = '1';
            (*x)++;
        }
    }
}

/* The slow route, for any finite non-zero |v|: the digits come from one conversion to 25
 * significant digits; rounding those to 15 or 16 gives what %.15g / %.16g give, except when the
 * dropped digits are a tie at 25 digits (5000... or 4999...), where the candidate is converted
 * afresh. Writes the P digits to dig and the decimal exponent to *x, returns P. */
static int fmt_slow(double a, char *dig, int *x) {
    char e25[48];
    snprintf(e25, sizeof e25, "%.24e", a);
    char d25[26];
    d25[0] = e25[0];
    memcpy(d25 + 1, e25 + 2, 24);
    d25[25] = '\0';
    int x25 = atoi(e25 + 27);
    for (int p = 15; p <= 17; p++) {
        int xp = x25, tie = 1;
        for (int i = p + 1; i < 25 && tie; i++) {
            tie = d25[i] == (d25[p] == '5' ? '0' : '9');
        }
        tie = tie && (d25[p] == '5' || d25[p] == '4');
        if (tie) {
            char ep[40];
            snprintf(ep, sizeof ep, "%.*e", p - 1, a);
            dig[0] = ep[0];
            memcpy(dig + 1, ep + 2, (size_t)p - 1);
            xp = atoi(strchr(ep, 'e') + 1);
        } else {
            round_digits(d25, p, dig, &xp);
        }
        if (p == 17 || reads_back(dig, p, xp, a)) {
            *x = xp;
            return p;
        }
    }
    return 17; /* not reached */
}

/* Copies the word s to buf as snprintf(buf, size, "%s", s) would; returns its length. */
static int put_word(char *buf, size_t size, const char *s) {
    size_t n = strlen(s);
    if (size) {
        size_t c = n < size - 1 ? n : size - 1;
        memcpy(buf, s, c);
        buf[c] = '\0';
    }
    return (int)n;
}

/* The text out[0..o) (out has 64 bytes) to buf as pm_i_fmt_double promises; returns o. */
static int fmt_out(char *buf, size_t size, char *out, int o) {
    out[o] = '\0';
    if (size >= 32) {
        memcpy(buf, out, 32); /* the text, its terminator, then filler (util.h) */
    } else if (size) {
        size_t c = (size_t)o < size - 1 ? (size_t)o : size - 1;
        memcpy(buf, out, c);
        buf[c] = '\0';
    }
    return o;
}

/* A whole number below 10^15 (counts, and sums of whole weights): its digits are what %.15g
 * prints, and 15 digits read back, so the text of the general route, without its arithmetic. */
static int fmt_whole(char *buf, size_t size, double v) {
    char out[64] = {0}, rev[20];
    int o = 0, r = 0;
    if (v < 0) {
        out[o++] = '-';
    }
    uint64_t u = (uint64_t)fabs(v);
    do {
        rev[r++] = (char)('0' + u % 10);
        u /= 10;
    } while (u);
    while (r) {
        out[o++] = rev[--r];
    }
    return fmt_out(buf, size, out, o);
}

int pm_i_fmt_double(char *buf, size_t size, double v) {
    if (isnan(v)) {
        return put_word(buf, size, "nan");
    }
    if (isinf(v)) {
        return put_word(buf, size, v > 0 ? "inf" : "-inf");
    }
    if (v == 0) {
        return put_word(buf, size, "0"); /* -0 too */
    }
    if (fabs(v) < 1e15 && fabs(v) == (double)(uint64_t)fabs(v)) {
        return fmt_whole(buf, size, v);
    }
    char dig[40] = {0}; /* P digits, then room for the fixed-size copies below */
    int x = 0;
    int P = fmt_exact(fabs(v), dig, &x);
    if (!P) {
        P = fmt_slow(fabs(v), dig, &x);
    }
    int n = P; /* %g semantics with precision P */
    while (n > 1 && dig[n - 1] == '0') {
        n--;
    }
    /* Built in out with fixed-size copies (dig has room past its P digits), so that no copy
     * has a variable length; the text is at most 25 bytes. */
    char out[64] = {0};
    int o = 0;
    if (v < 0) {
        out[o++] = '-';
    }
    if (x < -4 || x >= P) {
        out[o++] = dig[0];
        if (n > 1) {
            out[o++] = '.';
            memcpy(out + o, dig + 1, 16);
            o += n - 1;
        }
        int ax = x < 0 ? -x : x;
        out[o++] = 'e';
        out[o++] = x < 0 ? '-' : '+';
        if (ax >= 100) {
            out[o++] = (char)('0' + ax / 100);
        }
        out[o++] = (char)('0' + ax / 10 % 10);
        out[o++] = (char)('0' + ax % 10);
    } else if (x < 0) {
        out[o++] = '0';
        out[o++] = '.';
        for (int i = 0; i < -x - 1; i++) {
            out[o++] = '0';
        }
        memcpy(out + o, dig, 17);
        o += n;
    } else {
        memcpy(out + o, dig, 17);
        if (n > x + 1) { /* a fraction: the digits after the point move one place right */
            out[o + x + 1] = '.';
            memcpy(out + o + x + 2, dig + x + 1, 16);
            o += n + 1;
        } else {
            for (int i = n; i <= x; i++) {
                out[o + i] = '0';
            }
            o += x + 1;
        }
    }
    return fmt_out(buf, size, out, o);
}

double pm_i_now(void) {
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + (double)ts.tv_nsec * 1e-9;
}

/* ---- sorting with a context ---------------------------------------------------------------- */
static void insertion_ctx(unsigned char *b, size_t n, size_t size,
                          int (*cmp)(const void *, const void *, const void *), const void *ctx,
                          unsigned char *tmp) {
    for (size_t i = 1; i < n; i++) {
        size_t j = i;
        while (j > 0 && cmp(b + (j - 1) * size, b + i * size, ctx) > 0) {
            j--;
        }
        if (j < i) {
            memcpy(tmp, b + i * size, size);
            memmove(b + (j + 1) * size, b + j * size, (i - j) * size);
            memcpy(b + j * size, tmp, size);
        }
    }
}

static void merge_ctx(unsigned char *b, size_t n, size_t size,
                      int (*cmp)(const void *, const void *, const void *), const void *ctx,
                      unsigned char *tmp) {
    if (n < 16) {
        insertion_ctx(b, n, size, cmp, ctx, tmp);
        return;
    }
    size_t h = n / 2;
    merge_ctx(b, h, size, cmp, ctx, tmp);
    merge_ctx(b + h * size, n - h, size, cmp, ctx, tmp);
    if (cmp(b + (h - 1) * size, b + h * size, ctx) <= 0) {
        return; /* already in order */
    }
    memcpy(tmp, b, h * size); /* the left half, merged back with the right one in place */
    size_t i = 0, j = h, o = 0;
    while (i < h && j < n) {
        if (cmp(b + j * size, tmp + i * size, ctx) < 0) {
            memcpy(b + o++ * size, b + j++ * size, size);
        } else {
            memcpy(b + o++ * size, tmp + i++ * size, size);
        }
    }
    if (i < h) {
        memcpy(b + o * size, tmp + i * size, (h - i) * size);
    }
}

int pm_i_sort_ctx(void *base, size_t n, size_t size,
                  int (*cmp)(const void *, const void *, const void *), const void *ctx) {
    if (n < 2) {
        return 0;
    }
    unsigned char *tmp = pm_i_malloc(n / 2 + 1, size);
    if (!tmp) {
        return -1;
    }
    merge_ctx(base, n, size, cmp, ctx, tmp);
    free(tmp);
    return 0;
}
