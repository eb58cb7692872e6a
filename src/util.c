/* Checked allocation, growable arrays, the interning string table and number formatting. */
#include "util.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

/* ==== allocation ============================================================================ */
static long fail_countdown; /* test hook; 0 = off */

static bool should_fail(void) {
    if (fail_countdown > 0) {
        if (--fail_countdown == 0) {
            return true;
        }
    }
    return false;
}

void pm_i_alloc_fail_after(long n) {
    fail_countdown = n;
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

/* A slot holds id + 1 in its low 32 bits (0 = empty) and the top 32 bits of the string's hash,
 * so that most probes that miss never touch the string arrays. */
#define SLOT(id, h) (((h) & 0xffffffff00000000ULL) | (uint64_t)((id) + 1))
#define SLOT_ID(v) ((uint32_t)(v) - 1)
#define SLOT_TAG_EQ(v, h) ((((v) ^ (h)) >> 32) == 0)

static int rehash(pm_i_strtab *t, size_t ncap) {
    uint64_t *ns = pm_i_calloc(ncap, sizeof *ns);
    if (!ns) {
        return -1;
    }
    for (size_t id = 0; id < t->count; id++) {
        size_t i = (size_t)t->hash[id] & (ncap - 1);
        while (ns[i]) {
            i = (i + 1) & (ncap - 1);
        }
        ns[i] = SLOT(id, t->hash[id]);
    }
    free(t->slots);
    t->slots = ns;
    t->cap = ncap;
    return 0;
}

int64_t pm_i_strtab_find(const pm_i_strtab *t, const char *s, size_t len) {
    if (!t->cap) {
        return -1;
    }
    uint64_t h = pm_i_hash(s, len);
    size_t i = (size_t)h & (t->cap - 1);
    while (t->slots[i]) {
        uint64_t v = t->slots[i];
        if (SLOT_TAG_EQ(v, h)) {
            uint32_t id = SLOT_ID(v);
            if (t->len[id] == len && memcmp(t->str[id], s, len) == 0) {
                return id;
            }
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
    uint64_t h = pm_i_hash(s, len);
    size_t i = (size_t)h & (t->cap - 1);
    while (t->slots[i]) {
        uint64_t v = t->slots[i];
        if (SLOT_TAG_EQ(v, h)) {
            uint32_t id = SLOT_ID(v);
            if (t->len[id] == len && memcmp(t->str[id], s, len) == 0) {
                return id;
            }
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
    t->slots[i] = SLOT(id, h);
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

int pm_i_radix_sort(void *base, size_t n, size_t size) {
    if (n < 2) {
        return 0;
    }
    unsigned char *tmp = pm_i_malloc(n, size);
    size_t *cnt = pm_i_malloc(65537, sizeof *cnt);
    if (!tmp || !cnt) {
        free(tmp);
        free(cnt);
        return -1;
    }
    unsigned char *src = base, *dst = tmp;
    for (int shift = 0; shift < 64; shift += 16) {
        memset(cnt, 0, 65537 * sizeof *cnt);
        for (size_t i = 0; i < n; i++) {
            cnt[((key_of(src + i * size) >> shift) & 0xffff) + 1]++;
        }
        if (cnt[((key_of(src) >> shift) & 0xffff) + 1] == n) {
            continue; /* every key has this digit */
        }
        for (int b = 0; b < 65536; b++) {
            cnt[b + 1] += cnt[b];
        }
        for (size_t i = 0; i < n; i++) {
            size_t at = cnt[(key_of(src + i * size) >> shift) & 0xffff]++;
            memcpy(dst + at * size, src + i * size, size);
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

int pm_i_fmt_double(char *buf, size_t size, double v) {
    if (isnan(v)) {
        return snprintf(buf, size, "nan");
    }
    if (isinf(v)) {
        return snprintf(buf, size, v > 0 ? "inf" : "-inf");
    }
    if (v == 0) {
        return snprintf(buf, size, "0");
    }
    /* 17 significant digits always read back; try 15 and 16 first (shortest of the three).
     * The digits come from one conversion to 25 significant digits; rounding those to 15 or 16
     * gives what %.15g / %.16g give, except when the dropped digits are a tie at 25 digits
     * (5000... or 4999...), where the candidate is converted afresh. */
    char e25[48];
    snprintf(e25, sizeof e25, "%.24e", fabs(v));
    char d25[26];
    d25[0] = e25[0];
    memcpy(d25 + 1, e25 + 2, 24);
    d25[25] = '\0';
    int x25 = atoi(e25 + 27);
    char dig[26];
    int n = 0, x = x25;
    for (int p = 15; p <= 17; p++) {
        int xp = x25, tie = 1;
        for (int i = p + 1; i < 25 && tie; i++) {
            tie = d25[i] == (d25[p] == '5' ? '0' : '9');
        }
        tie = tie && (d25[p] == '5' || d25[p] == '4');
        if (tie) {
            char ep[40];
            snprintf(ep, sizeof ep, "%.*e", p - 1, fabs(v));
            dig[0] = ep[0];
            memcpy(dig + 1, ep + 2, (size_t)p - 1);
            xp = atoi(strchr(ep, 'e') + 1);
        } else {
            round_digits(d25, p, dig, &xp);
        }
        if (p == 17 || reads_back(dig, p, xp, fabs(v))) {
            n = p;
            x = xp;
            break;
        }
    }
    int P = n; /* %g semantics with precision P */
    while (n > 1 && dig[n - 1] == '0') {
        n--;
    }
    char out[48];
    int o = 0;
    if (v < 0) {
        out[o++] = '-';
    }
    if (x < -4 || x >= P) {
        out[o++] = dig[0];
        if (n > 1) {
            out[o++] = '.';
            memcpy(out + o, dig + 1, (size_t)n - 1);
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
        memcpy(out + o, dig, (size_t)n);
        o += n;
    } else {
        for (int i = 0; i <= x; i++) {
            out[o++] = i < n ? dig[i] : '0';
        }
        if (n > x + 1) {
            out[o++] = '.';
            memcpy(out + o, dig + x + 1, (size_t)(n - x - 1));
            o += n - x - 1;
        }
    }
    out[o] = '\0';
    if (size) {
        size_t c = (size_t)o < size - 1 ? (size_t)o : size - 1;
        memcpy(buf, out, c);
        buf[c] = '\0';
    }
    return o;
}

double pm_i_now(void) {
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + (double)ts.tv_nsec * 1e-9;
}
