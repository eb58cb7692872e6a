/* Count shards: the file format (encode, decode with every check, read) and the merge.
 * The format is documented in docs/shard-format.md; keep the two in step. */
#include "pairmap/shard.h"

#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#include "exactsum.h"
#include "sha256.h"
#include "shard_internal.h"
#include "util.h"

static const unsigned char MAGIC[8] = {0x89, 'P', 'M', 'C', '\r', '\n', 0x1a, '\n'};
#define HEAD_BYTES 24 /* magic, version, flags, body length */
#define SUM_BYTES 32  /* SHA-256 of everything before it */
#define FLAG_WEIGHTED 1u
#define FLAG_CATEGORIES 2u

void pm_shard_free(pm_shard_t *s) {
    if (!s) {
        return;
    }
    for (size_t i = 0; i < s->n_items; i++) {
        free(s->name ? s->name[i] : NULL);
        free(s->category ? s->category[i] : NULL);
    }
    free(s->name);
    free(s->category);
    free(s->count);
    free(s->wcount);
    free(s->w2count);
    free(s->a);
    free(s->b);
    free(s->n);
    free(s->w);
    free(s->parts);
    free(s->fingerprint);
    free(s);
}

uint64_t pm_shard_part_of(const char *id, size_t len, uint64_t m) {
    uint64_t x = 0xcbf29ce484222325u; /* FNV-1a 64 */
    for (size_t i = 0; i < len; i++) {
        x ^= (unsigned char)id[i];
        x *= 0x100000001b3u;
    }
    x ^= x >> 30; /* SplitMix64's finaliser */
    x *= 0xbf58476d1ce4e5b9u;
    x ^= x >> 27;
    x *= 0x94d049bb133111ebu;
    x ^= x >> 31;
    return m ? x % m : 0;
}

/* ---- encoding ------------------------------------------------------------------------------ */
typedef struct {
    unsigned char *p;
    size_t n, cap;
    int fail;
} wbuf;

static void put(wbuf *b, const void *d, size_t n) {
    if (b->fail || pm_i_grow((void **)&b->p, &b->cap, b->n + n, 1)) {
        b->fail = 1;
        return;
    }
    memcpy(b->p + b->n, d, n);
    b->n += n;
}

static void put_var(wbuf *b, uint64_t v) {
    unsigned char t[10];
    size_t n = 0;
    do {
        unsigned char c = (unsigned char)(v & 0x7f);
        v >>= 7;
        t[n++] = (unsigned char)(c | (v ? 0x80 : 0));
    } while (v);
    put(b, t, n);
}

static void put_u64(wbuf *b, uint64_t v, size_t bytes) {
    unsigned char t[8];
    for (size_t i = 0; i < bytes; i++) {
        t[i] = (unsigned char)(v >> (8 * i));
    }
    put(b, t, bytes);
}

static void put_x(wbuf *b, pm_shard_x_t x) {
    unsigned char t[19];
    size_t n = 0;
    pm_i_u128 v = (pm_i_u128)x.hi << 64 | x.lo;
    do {
        unsigned char c = (unsigned char)(v & 0x7f);
        v >>= 7;
        t[n++] = (unsigned char)(c | (v ? 0x80 : 0));
    } while (v);
    put(b, t, n);
}

static void put_int(wbuf *b, int v) { /* zigzag */
    put_var(b, v < 0 ? ((uint64_t)(-(int64_t)v) << 1) - 1 : (uint64_t)v << 1);
}

static void put_str(wbuf *b, const char *s) {
    size_t l = strlen(s);
    put_var(b, l);
    put(b, s, l);
}

/* v as a variable-length number at o (as put_var); returns the byte after it. */
static unsigned char *var_at(unsigned char *o, uint64_t v) {
    while (v >= 0x80) {
        *o++ = (unsigned char)(v | 0x80);
        v >>= 7;
    }
    *o++ = (unsigned char)v;
    return o;
}

/* The pairs: item a's step from the pair before, b's step (from the pair before when a is the
 * same, else from a), the count, and the weighted sum. Room for a pair's three numbers is
 * made once per pair, and they are written in place. */
static void put_pairs(wbuf *b, const pm_shard_t *s) {
    for (size_t k = 0; k < s->n_pairs && !b->fail; k++) {
        if (b->n + 32 > b->cap && pm_i_grow((void **)&b->p, &b->cap, b->n + 32, 1)) {
            b->fail = 1;
            return;
        }
        uint32_t da = k ? s->a[k] - s->a[k - 1] : s->a[k];
        unsigned char *o = var_at(b->p + b->n, da);
        o = var_at(o, k && !da ? s->b[k] - s->b[k - 1] - 1 : s->b[k] - s->a[k] - 1);
        o = var_at(o, s->n[k]);
        b->n = (size_t)(o - b->p);
        if (s->weighted) {
            put_x(b, s->w[k]);
        }
    }
}

pm_err_t pm_shard_encode(const pm_shard_t *s, unsigned char **buf, size_t *len, pm_diag_t *diag) {
    wbuf b = {0};
    put(&b, MAGIC, 8);
    put_u64(&b, PM_SHARD_VERSION, 4);
    put_u64(&b, (s->weighted ? FLAG_WEIGHTED : 0) | (s->has_categories ? FLAG_CATEGORIES : 0), 4);
    put_u64(&b, 0, 8); /* body length, set below */
    put_str(&b, s->fingerprint);
    put_var(&b, s->n_parts);
    for (size_t i = 0; i < s->n_parts; i++) {
        put(&b, s->parts[i].src, 32);
        put_var(&b, s->parts[i].m);
        put_var(&b, s->parts[i].k);
    }
    put_var(&b, s->N);
    put_var(&b, s->respondents);
    put_var(&b, s->rows);
    put_var(&b, s->duplicates);
    put_var(&b, s->single_item);
    put_var(&b, s->no_item);
    if (s->weighted) {
        put_int(&b, s->e);
        put_int(&b, s->e2);
        put_int(&b, s->wexp);
        put_x(&b, s->W);
        put_x(&b, s->W2);
    }
    put_var(&b, s->n_items);
    for (size_t i = 0; i < s->n_items; i++) {
        put_str(&b, s->name[i]);
        const char *c = s->category[i];
        put_var(&b, c ? strlen(c) + 1 : 0);
        if (c) {
            put(&b, c, strlen(c));
        }
        put_var(&b, s->count[i]);
        if (s->weighted) {
            put_x(&b, s->wcount[i]);
            put_x(&b, s->w2count[i]);
        }
    }
    put_var(&b, s->n_pairs);
    put_pairs(&b, s);
    if (!b.fail) {
        uint64_t body = b.n - HEAD_BYTES;
        for (size_t i = 0; i < 8; i++) {
            b.p[16 + i] = (unsigned char)(body >> (8 * i));
        }
        unsigned char sum[32];
        pm_i_sha256 h;
        pm_i_sha256_init(&h);
        pm_i_sha256_update(&h, b.p, b.n);
        pm_i_sha256_final(&h, sum);
        put(&b, sum, 32);
    }
    if (b.fail) {
        free(b.p);
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory encoding the shard");
    }
    *buf = b.p;
    *len = b.n;
    return PM_OK;
}

/* ---- decoding ------------------------------------------------------------------------------ */
typedef struct {
    const unsigned char *p, *end;
    const char *name;
    pm_diag_t *diag;
    int bad;
} rbuf;

static pm_err_t bad(rbuf *r, const char *what) {
    if (!r->bad) {
        r->bad = 1;
        pm_diag_set(r->diag, PM_EDATA, r->name, 0, "not a valid count shard: %s", what);
    }
    return PM_EDATA;
}

static size_t left(const rbuf *r) {
    return (size_t)(r->end - r->p);
}

static uint64_t get_var(rbuf *r, const char *what) {
    uint64_t v = 0;
    for (int i = 0; i < 10; i++) {
        if (r->p >= r->end) {
            bad(r, what);
            return 0;
        }
        unsigned char c = *r->p++;
        if (i == 9 && c > 1) {
            bad(r, what);
            return 0;
        }
        v |= (uint64_t)(c & 0x7f) << (7 * i);
        if (!(c & 0x80)) {
            if (i > 0 && c == 0) { /* overlong: one value, one encoding */
                bad(r, what);
                return 0;
            }
            return v;
        }
    }
    bad(r, what);
    return 0;
}

static pm_shard_x_t get_x(rbuf *r, const char *what) {
    pm_i_u128 v = 0;
    pm_shard_x_t x = {0, 0};
    for (int i = 0; i < 19; i++) {
        if (r->p >= r->end) {
            bad(r, what);
            return x;
        }
        unsigned char c = *r->p++;
        if ((i == 18 && c > 1) || (!(c & 0x80) && i > 0 && c == 0)) {
            bad(r, what); /* beyond 127 bits, or overlong */
            return x;
        }
        v |= (pm_i_u128)(c & 0x7f) << (7 * i);
        if (!(c & 0x80)) {
            x.lo = (uint64_t)v;
            x.hi = (uint64_t)(v >> 64);
            return x;
        }
    }
    bad(r, what);
    return x;
}

static int get_int(rbuf *r, const char *what, int lo, int hi) {
    uint64_t z = get_var(r, what);
    int64_t v = (z & 1) ? -(int64_t)((z + 1) >> 1) : (int64_t)(z >> 1);
    if (z > (1u << 20) || v < lo || v > hi) {
        bad(r, what);
        return 0;
    }
    return (int)v;
}

/* A string of len bytes without NUL (NULL and r->bad on error or out of memory). */
static char *get_bytes(rbuf *r, uint64_t len, const char *what) {
    if (r->bad || len > left(r) || memchr(r->p, 0, (size_t)len)) {
        bad(r, what);
        return NULL;
    }
    char *s = pm_i_malloc((size_t)len + 1, 1);
    if (!s) {
        r->bad = 1;
        pm_diag_set(r->diag, PM_ENOMEM, r->name, 0, "out of memory");
        return NULL;
    }
    memcpy(s, r->p, (size_t)len);
    s[len] = '\0';
    r->p += len;
    return s;
}

static int part_cmp(const pm_shard_part_t *x, const pm_shard_part_t *y) {
    int c = memcmp(x->src, y->src, 32);
    if (c) {
        return c;
    }
    if (x->m != y->m) {
        return x->m < y->m ? -1 : 1;
    }
    return x->k < y->k ? -1 : x->k > y->k;
}

int pm_i_shard_alloc(pm_shard_t *s, size_t ni, size_t np) {
    s->name = pm_i_calloc(ni ? ni : 1, sizeof *s->name);
    s->category = pm_i_calloc(ni ? ni : 1, sizeof *s->category);
    s->count = pm_i_calloc(ni ? ni : 1, sizeof *s->count);
    s->a = pm_i_malloc(np ? np : 1, sizeof *s->a);
    s->b = pm_i_malloc(np ? np : 1, sizeof *s->b);
    s->n = pm_i_malloc(np ? np : 1, sizeof *s->n);
    if (s->weighted) {
        s->wcount = pm_i_calloc(ni ? ni : 1, sizeof *s->wcount);
        s->w2count = pm_i_calloc(ni ? ni : 1, sizeof *s->w2count);
        s->w = pm_i_malloc(np ? np : 1, sizeof *s->w);
    }
    return !s->name || !s->category || !s->count || !s->a || !s->b || !s->n ||
           (s->weighted && (!s->wcount || !s->w2count || !s->w));
}

static pm_err_t decode_head(rbuf *r, const unsigned char *buf, size_t len, bool verify,
                            pm_shard_t *s) {
    if (len < 8 || memcmp(buf, MAGIC, 8) != 0) {
        return bad(r, "it does not begin with the shard signature (was it written by "
                      "'pairmap count' or 'pairmap merge'?)");
    }
    if (len < HEAD_BYTES + SUM_BYTES) {
        return bad(r, "truncated (shorter than a header)");
    }
    uint64_t ver = 0, flags = 0, body = 0;
    for (int i = 0; i < 4; i++) {
        ver |= (uint64_t)buf[8 + i] << (8 * i);
        flags |= (uint64_t)buf[12 + i] << (8 * i);
    }
    for (int i = 0; i < 8; i++) {
        body |= (uint64_t)buf[16 + i] << (8 * i);
    }
    if (ver != PM_SHARD_VERSION) {
        r->bad = 1;
        return pm_diag_set(r->diag, PM_EDATA, r->name, 0,
                           "count shard format version %llu; this pairmap reads version %d",
                           (unsigned long long)ver, PM_SHARD_VERSION);
    }
    if (body != len - HEAD_BYTES - SUM_BYTES) {
        return bad(r, body > len - HEAD_BYTES - SUM_BYTES
                          ? "truncated (shorter than its header says)"
                          : "longer than its header says");
    }
    if (flags & ~(uint64_t)(FLAG_WEIGHTED | FLAG_CATEGORIES)) {
        return bad(r, "unknown flags");
    }
    if (verify) {
        unsigned char sum[32];
        pm_i_sha256 h;
        pm_i_sha256_init(&h);
        pm_i_sha256_update(&h, buf, len - SUM_BYTES);
        pm_i_sha256_final(&h, sum);
        if (memcmp(sum, buf + len - SUM_BYTES, 32) != 0) {
            return bad(r, "checksum mismatch (the file is damaged)");
        }
    }
    s->weighted = flags & FLAG_WEIGHTED;
    s->has_categories = (flags & FLAG_CATEGORIES) != 0;
    r->p = buf + HEAD_BYTES;
    r->end = buf + len - SUM_BYTES;
    return PM_OK;
}

static pm_err_t decode_totals(rbuf *r, pm_shard_t *s) {
    uint64_t fl = get_var(r, "truncated fingerprint");
    s->fingerprint = get_bytes(r, fl, "bad fingerprint");
    if (r->bad) {
        return PM_EDATA;
    }
    uint64_t np = get_var(r, "truncated part list");
    if (r->bad || np == 0 || np > left(r) / 34) {
        return bad(r, "bad part list");
    }
    s->parts = pm_i_malloc((size_t)np, sizeof *s->parts);
    if (!s->parts) {
        r->bad = 1;
        return pm_diag_set(r->diag, PM_ENOMEM, r->name, 0, "out of memory");
    }
    for (size_t i = 0; i < np; i++) {
        memcpy(s->parts[i].src, r->p, 32);
        r->p += 32;
        s->parts[i].m = get_var(r, "truncated part");
        s->parts[i].k = get_var(r, "truncated part");
        s->n_parts = i + 1;
        if (r->bad || s->parts[i].m == 0 || s->parts[i].k >= s->parts[i].m ||
            (i && part_cmp(&s->parts[i - 1], &s->parts[i]) >= 0) ||
            (i && memcmp(s->parts[i - 1].src, s->parts[i].src, 32) == 0 &&
             s->parts[i - 1].m != s->parts[i].m) ||
            left(r) < 34 * (np - i - 1)) {
            return bad(r, "bad part list");
        }
    }
    s->N = get_var(r, "truncated N");
    s->respondents = get_var(r, "truncated totals");
    s->rows = get_var(r, "truncated totals");
    s->duplicates = get_var(r, "truncated totals");
    s->single_item = get_var(r, "truncated totals");
    s->no_item = get_var(r, "truncated totals");
    if (r->bad || s->N > UINT32_MAX || s->respondents > s->N || s->single_item > s->N ||
        s->no_item > s->N) {
        return bad(r, "inconsistent totals");
    }
    if (s->weighted) {
        s->e = get_int(r, "bad weight exponent", -3000, 3000);
        s->e2 = get_int(r, "bad weight exponent", -6000, 6000);
        s->wexp = get_int(r, "bad weight exponent", -2000, 1100);
        s->W = get_x(r, "truncated weight sums");
        s->W2 = get_x(r, "truncated weight sums");
        if (r->bad) {
            return bad(r, "bad weight sums");
        }
    }
    return PM_OK;
}

static pm_err_t decode_items(rbuf *r, pm_shard_t *s, size_t ni) {
    for (size_t i = 0; i < ni; i++) {
        uint64_t l = get_var(r, "truncated item");
        s->name[i] = get_bytes(r, l, "bad item name");
        if (r->bad || l == 0) {
            return bad(r, "bad item name");
        }
        if (i && strcmp(s->name[i - 1], s->name[i]) >= 0) {
            return bad(r, "items out of order");
        }
        uint64_t cl = get_var(r, "truncated item");
        if (cl) {
            s->category[i] = get_bytes(r, cl - 1, "bad category");
        }
        s->count[i] = get_var(r, "truncated item");
        if (r->bad || s->count[i] > s->N || (cl && !s->has_categories)) {
            return bad(r, "bad item");
        }
        if (s->weighted) {
            s->wcount[i] = get_x(r, "truncated item");
            s->w2count[i] = get_x(r, "truncated item");
            if (r->bad) {
                return bad(r, "bad item weight");
            }
        }
    }
    return PM_OK;
}

static pm_err_t decode_pairs(rbuf *r, pm_shard_t *s, size_t np) {
    uint64_t a = 0, b = 0;
    for (size_t k = 0; k < np; k++) {
        uint64_t da = get_var(r, "truncated pair");
        uint64_t db = get_var(r, "truncated pair");
        if (r->bad || da > s->n_items) {
            return bad(r, "bad pair");
        }
        a += da;
        b = k && !da ? b + db + 1 : a + db + 1;
        if (b < a || b >= s->n_items || db >= s->n_items) {
            return bad(r, "bad pair");
        }
        s->a[k] = (uint32_t)a;
        s->b[k] = (uint32_t)b;
        s->n[k] = get_var(r, "truncated pair");
        /* a 2x2 table: both <= each total, and neither = N - na - nb + both >= 0 */
        if (r->bad || s->n[k] == 0 || s->n[k] > s->count[a] || s->n[k] > s->count[b] ||
            s->count[a] + s->count[b] - s->n[k] > s->N) {
            return bad(r, "pair count out of range");
        }
        if (s->weighted) {
            s->w[k] = get_x(r, "truncated pair");
            if (r->bad) {
                return bad(r, "bad pair weight");
            }
        }
    }
    s->n_pairs = np;
    return PM_OK;
}

static int u64_cmp(const void *x, const void *y) {
    uint64_t a = *(const uint64_t *)x, b = *(const uint64_t *)y;
    return (a > b) - (a < b);
}

/* Two items chosen by more than N respondents together must have been seen together (at
 * least n_a + n_b - N times): every such pair must be in the list. O(items log items). */
static pm_err_t forced_pairs(const pm_shard_t *s, rbuf *r) {
    size_t ni = s->n_items;
    uint64_t *c = pm_i_malloc(ni ? ni : 1, sizeof *c);
    if (!c) {
        r->bad = 1;
        return pm_diag_set(r->diag, PM_ENOMEM, r->name, 0, "out of memory");
    }
    memcpy(c, s->count, ni * sizeof *c);
    qsort(c, ni, sizeof *c, u64_cmp);
    uint64_t need = 0, have = 0;
    size_t j = ni;
    for (size_t i = 0; i < ni; i++) { /* j: the first index with c[i] + c[j] > N */
        while (j > i + 1 && c[i] + c[j - 1] > s->N) {
            j--;
        }
        if (j <= i) {
            j = i + 1;
        }
        need += ni - j;
    }
    free(c);
    for (size_t k = 0; k < s->n_pairs; k++) {
        have += s->count[s->a[k]] + s->count[s->b[k]] > s->N;
    }
    return have == need ? PM_OK : bad(r, "a pair its item totals force is missing");
}

static int x_zero(pm_shard_x_t x) {
    return !x.lo && !x.hi;
}

/* A shard without respondents holds no weight (every sum 0, e = e2 = 0, wexp -2000); one with
 * respondents has a positive sum of weights. */
static int weights_inconsistent(const pm_shard_t *s) {
    if (s->respondents) {
        return x_zero(s->W) || x_zero(s->W2) || s->wexp == -2000;
    }
    int z = x_zero(s->W) && x_zero(s->W2) && s->e == 0 && s->e2 == 0 && s->wexp == -2000;
    for (size_t i = 0; z && i < s->n_items; i++) {
        z = x_zero(s->wcount[i]) && x_zero(s->w2count[i]);
    }
    for (size_t k = 0; z && k < s->n_pairs; k++) {
        z = x_zero(s->w[k]);
    }
    return !z;
}

pm_err_t pm_shard_decode(const unsigned char *buf, size_t len, const char *name, bool verify,
                         pm_shard_t **out, pm_diag_t *diag) {
    *out = NULL;
    pm_shard_t *s = pm_i_calloc(1, sizeof *s);
    if (!s) {
        return pm_diag_set(diag, PM_ENOMEM, name, 0, "out of memory");
    }
    rbuf r = {buf, buf + len, name, diag, 0};
    pm_err_t rc = decode_head(&r, buf, len, verify, s);
    if (!rc) {
        rc = decode_totals(&r, s);
    }
    if (!rc) {
        uint64_t ni = get_var(&r, "truncated item list");
        /* each item takes at least 4 bytes: bounds the allocation by the file's size */
        if (r.bad || ni > left(&r) / 4 || ni >= UINT32_MAX) {
            rc = bad(&r, "bad item list");
        } else {
            s->n_items = (size_t)ni;
            s->name = pm_i_calloc(ni ? ni : 1, sizeof *s->name);
            s->category = pm_i_calloc(ni ? ni : 1, sizeof *s->category);
            s->count = pm_i_calloc(ni ? ni : 1, sizeof *s->count);
            if (s->weighted) {
                s->wcount = pm_i_calloc(ni ? ni : 1, sizeof *s->wcount);
                s->w2count = pm_i_calloc(ni ? ni : 1, sizeof *s->w2count);
            }
            if (!s->name || !s->category || !s->count ||
                (s->weighted && (!s->wcount || !s->w2count))) {
                s->n_items = 0;
                rc = pm_diag_set(diag, PM_ENOMEM, name, 0, "out of memory");
            } else {
                rc = decode_items(&r, s, (size_t)ni);
            }
        }
    }
    if (!rc) {
        uint64_t np = get_var(&r, "truncated pair list");
        if (r.bad || np > left(&r) / 3) { /* at least 3 bytes per pair */
            rc = bad(&r, "bad pair list");
        } else {
            s->a = pm_i_malloc(np ? (size_t)np : 1, sizeof *s->a);
            s->b = pm_i_malloc(np ? (size_t)np : 1, sizeof *s->b);
            s->n = pm_i_malloc(np ? (size_t)np : 1, sizeof *s->n);
            s->w = s->weighted ? pm_i_malloc(np ? (size_t)np : 1, sizeof *s->w) : NULL;
            if (!s->a || !s->b || !s->n || (s->weighted && !s->w)) {
                rc = pm_diag_set(diag, PM_ENOMEM, name, 0, "out of memory");
            } else {
                rc = decode_pairs(&r, s, (size_t)np);
            }
        }
    }
    if (!rc && r.p != r.end) {
        rc = bad(&r, "bytes after the pair list");
    }
    if (!rc && (rc = forced_pairs(s, &r)) != PM_OK) {
        /* reported */
    } else if (!rc && s->weighted && weights_inconsistent(s)) {
        rc = bad(&r, "weight sums that do not fit its respondents");
    }
    if (rc) {
        pm_shard_free(s);
        return rc;
    }
    *out = s;
    return PM_OK;
}

pm_err_t pm_shard_read(const char *path, pm_shard_t **out, pm_diag_t *diag) {
    *out = NULL;
    int is_stdin = strcmp(path, "-") == 0;
    const char *name = is_stdin ? "stdin" : path;
    FILE *fp = is_stdin ? stdin : fopen(path, "rb");
    if (!fp) {
        return pm_diag_set(diag, PM_EIO, name, 0, "cannot open: %s", strerror(errno));
    }
    struct stat st;
    if (fstat(fileno(fp), &st) == 0 && S_ISDIR(st.st_mode)) {
        if (!is_stdin) {
            fclose(fp);
        }
        return pm_diag_set(diag, PM_EIO, name, 0, "is a directory; give a .pmc file");
    }
    unsigned char *buf = NULL;
    size_t n = 0, cap = 0;
    pm_err_t rc = PM_OK;
    for (;;) {
        if (pm_i_grow((void **)&buf, &cap, n + 65536, 1)) {
            rc = pm_diag_set(diag, PM_ENOMEM, name, 0, "out of memory reading the shard");
            break;
        }
        size_t got = fread(buf + n, 1, cap - n, fp);
        n += got;
        if (got == 0) {
            if (ferror(fp)) {
                rc = pm_diag_set(diag, PM_EIO, name, 0, "cannot read: %s", strerror(errno));
            }
            break;
        }
    }
    if (!is_stdin) {
        fclose(fp);
    }
    if (!rc) {
        rc = pm_shard_decode(buf, n, name, true, out, diag);
    }
    if (!rc) {
        pm_i_sha256 h;
        pm_i_sha256_init(&h);
        pm_i_sha256_update(&h, buf, n);
        pm_i_sha256_final(&h, (*out)->file_sha256);
        (*out)->file_bytes = n;
    }
    free(buf);
    return rc;
}

/* ---- merge --------------------------------------------------------------------------------- */
typedef struct {
    const char *name;
    uint32_t shard, item;
} item_ref;

static int item_ref_cmp(const void *x, const void *y) {
    const item_ref *a = x, *b = y;
    int c = strcmp(a->name, b->name);
    return c ? c : (a->shard > b->shard) - (a->shard < b->shard);
}

typedef struct {
    pm_shard_part_t p;
    size_t shard;
} part_ref;

static int part_ref_cmp(const void *x, const void *y) {
    const part_ref *a = x, *b = y;
    int c = part_cmp(&a->p, &b->p);
    return c ? c : (a->shard > b->shard) - (a->shard < b->shard);
}

static pm_i_u128 x_u(pm_shard_x_t x) {
    return (pm_i_u128)x.hi << 64 | x.lo;
}

static pm_shard_x_t u_x(pm_i_u128 u) {
    return (pm_shard_x_t){(uint64_t)u, (uint64_t)(u >> 64)};
}

/* *acc += x 2^sh in exact integers; 1 when the result would need more than 127 bits. */
static int x_add(pm_i_u128 *acc, pm_shard_x_t x, int sh) {
    pm_i_u128 u = x_u(x);
    if (!u) {
        return 0;
    }
    if (sh > 126 || (u >> (127 - sh)) != 0) {
        return 1;
    }
    u <<= sh;
    pm_i_u128 top = (pm_i_u128)1 << 127;
    if (u >= top || *acc >= top - u) {
        return 1;
    }
    *acc += u;
    return 0;
}

static pm_err_t too_wide(pm_diag_t *diag) {
    return pm_diag_set(diag, PM_EDATA, NULL, 0,
                       "the weights of these shards span too wide a range to be added exactly "
                       "(over 2^127 times the smallest step)");
}

static void short_src(const unsigned char *src, char *hex) {
    for (int i = 0; i < 6; i++) {
        snprintf(hex + 2 * i, 3, "%02x", src[i]);
    }
}

/* The first line where two fingerprints differ, into a and b (both "(none)" at the end). */
static void first_diff(const char *x, const char *y, char *a, char *b, size_t cap) {
    while (*x && *y) {
        size_t lx = strcspn(x, "\n"), ly = strcspn(y, "\n");
        if (lx != ly || memcmp(x, y, lx) != 0) {
            break;
        }
        x += lx + (x[lx] == '\n');
        y += ly + (y[ly] == '\n');
    }
    snprintf(a, cap, "%.*s", (int)strcspn(x, "\n"), *x ? x : "(none)");
    snprintf(b, cap, "%.*s", (int)strcspn(y, "\n"), *y ? y : "(none)");
}

static pm_err_t merge_check(const pm_shard_t *const *s, const char *const *names, size_t n,
                            pm_diag_t *diag) {
    for (size_t i = 1; i < n; i++) {
        if (strcmp(s[0]->fingerprint, s[i]->fingerprint) != 0) {
            char a[256], b[256];
            first_diff(s[0]->fingerprint, s[i]->fingerprint, a, b, sizeof a);
            return pm_diag_set(diag, PM_EDATA, names[i], 0,
                               "counted with other input options than %s (%s here, %s there); "
                               "shards add up only when counted alike",
                               names[0], b, a);
        }
        if (s[0]->weighted != s[i]->weighted) {
            return pm_diag_set(diag, PM_EDATA, names[i], 0,
                               "weighted and %s is not, or the "
                               "other way round",
                               names[0]);
        }
    }
    return PM_OK;
}

static pm_err_t merge_parts(const pm_shard_t *const *s, const char *const *names, size_t n,
                            pm_shard_t *m, pm_diag_t *diag) {
    size_t np = 0;
    for (size_t i = 0; i < n; i++) {
        np += s[i]->n_parts;
    }
    part_ref *pr = pm_i_malloc(np ? np : 1, sizeof *pr);
    m->parts = pm_i_malloc(np ? np : 1, sizeof *m->parts);
    if (!pr || !m->parts) {
        free(pr);
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory merging shards");
    }
    np = 0;
    for (size_t i = 0; i < n; i++) {
        for (size_t j = 0; j < s[i]->n_parts; j++) {
            pr[np].p = s[i]->parts[j];
            pr[np++].shard = i;
        }
    }
    qsort(pr, np, sizeof *pr, part_ref_cmp);
    pm_err_t rc = PM_OK;
    for (size_t j = 0; j < np && !rc; j++) {
        if (j && memcmp(pr[j].p.src, pr[j - 1].p.src, 32) == 0) {
            const pm_shard_part_t *x = &pr[j - 1].p, *y = &pr[j].p;
            char hex[13];
            short_src(y->src, hex);
            if (x->m != y->m) {
                rc = pm_diag_set(diag, PM_EDATA, names[pr[j].shard], 0,
                                 "holds part %llu/%llu of input %s, %s part %llu/%llu of it: "
                                 "parts of one input must come from one split (the same M)",
                                 (unsigned long long)y->k, (unsigned long long)y->m, hex,
                                 names[pr[j - 1].shard], (unsigned long long)x->k,
                                 (unsigned long long)x->m);
            } else if (x->k == y->k) {
                rc = pm_diag_set(diag, PM_EDATA, names[pr[j].shard], 0,
                                 "holds part %llu/%llu of input %s, which %s holds as well: "
                                 "each part may be added once",
                                 (unsigned long long)y->k, (unsigned long long)y->m, hex,
                                 names[pr[j - 1].shard]);
            }
        }
        m->parts[j] = pr[j].p;
    }
    m->n_parts = np;
    free(pr);
    return rc;
}

static int add_u64(uint64_t *acc, uint64_t v) {
    if (*acc > UINT64_MAX - v) {
        return 1;
    }
    *acc += v;
    return 0;
}

/* Items joined by name; map[i][j] is item j of shard i in the merged numbering. */
static pm_err_t merge_items(const pm_shard_t *const *s, const char *const *names, size_t n,
                            pm_shard_t *m, uint32_t **map, const int *sh, pm_diag_t *diag) {
    size_t ni = 0;
    for (size_t i = 0; i < n; i++) {
        ni += s[i]->n_items;
    }
    item_ref *ir = pm_i_malloc(ni ? ni : 1, sizeof *ir);
    if (!ir) {
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory merging shards");
    }
    ni = 0;
    for (size_t i = 0; i < n; i++) {
        for (size_t j = 0; j < s[i]->n_items; j++) {
            ir[ni++] = (item_ref){s[i]->name[j], (uint32_t)i, (uint32_t)j};
        }
    }
    qsort(ir, ni, sizeof *ir, item_ref_cmp);
    size_t distinct = 0;
    for (size_t k = 0; k < ni; k++) {
        distinct += !k || strcmp(ir[k].name, ir[k - 1].name) != 0;
    }
    pm_err_t rc = PM_OK;
    if (distinct >= UINT32_MAX) {
        rc = pm_diag_set(diag, PM_EDATA, NULL, 0, "more than 2^32 - 2 items");
    } else if (pm_i_shard_alloc(m, distinct, 0)) {
        rc = pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory merging shards");
    }
    size_t at = 0;
    for (size_t k = 0; k < ni && !rc; k++) {
        const pm_shard_t *x = s[ir[k].shard];
        const char *cat = x->category[ir[k].item];
        if (k && strcmp(ir[k].name, ir[k - 1].name) == 0) {
            const char *prev = m->category[at - 1];
            if ((cat == NULL) != (prev == NULL) || (cat && strcmp(cat, prev) != 0)) {
                rc = pm_diag_set(diag, PM_EDATA, names[ir[k].shard], 0,
                                 "item '%s' has category '%s' here but '%s' in %s", ir[k].name,
                                 cat ? cat : "(none)", prev ? prev : "(none)",
                                 names[ir[k - 1].shard]);
                break;
            }
        } else {
            m->name[at] = pm_i_malloc(strlen(ir[k].name) + 1, 1);
            m->category[at] = cat ? pm_i_malloc(strlen(cat) + 1, 1) : NULL;
            m->n_items = ++at;
            if (!m->name[at - 1] || (cat && !m->category[at - 1])) {
                rc = pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory merging shards");
                break;
            }
            strcpy(m->name[at - 1], ir[k].name);
            if (cat) {
                strcpy(m->category[at - 1], cat);
            }
        }
        map[ir[k].shard][ir[k].item] = (uint32_t)(at - 1);
        if (add_u64(&m->count[at - 1], x->count[ir[k].item])) {
            rc = pm_diag_set(diag, PM_EDATA, NULL, 0, "an item total beyond 2^64");
        }
    }
    for (size_t k = 0; k < ni && !rc && m->weighted;) {
        size_t e = k;
        pm_i_u128 w = 0, w2 = 0;
        int over = 0;
        while (e < ni && strcmp(ir[e].name, ir[k].name) == 0) {
            const pm_shard_t *x = s[ir[e].shard];
            over |= x_add(&w, x->wcount[ir[e].item], sh[2 * ir[e].shard]);
            over |= x_add(&w2, x->w2count[ir[e].item], sh[2 * ir[e].shard + 1]);
            e++;
        }
        uint32_t to = map[ir[k].shard][ir[k].item];
        m->wcount[to] = u_x(w);
        m->w2count[to] = u_x(w2);
        if (over) {
            rc = too_wide(diag);
        }
        k = e;
    }
    free(ir);
    return rc;
}

/* m's pairs so far and shard x's (renumbered by map, which keeps their order: items are
 * joined in name order), both sorted by (a, b), merged into one sorted list, equal pairs
 * added. 0, 1 when out of memory, 2 when a weighted sum would need more than 127 bits. */
static int merge_two(pm_shard_t *m, const pm_shard_t *x, const uint32_t *map, int sh) {
    size_t cap = m->n_pairs + x->n_pairs, p = 0, q = 0, at = 0;
    uint32_t *a = pm_i_malloc(cap ? cap : 1, sizeof *a);
    uint32_t *b = pm_i_malloc(cap ? cap : 1, sizeof *b);
    uint64_t *nn = pm_i_malloc(cap ? cap : 1, sizeof *nn);
    pm_shard_x_t *w = m->weighted ? pm_i_malloc(cap ? cap : 1, sizeof *w) : NULL;
    int rc = (!a || !b || !nn || (m->weighted && !w)) ? 1 : 0;
    while (!rc && (p < m->n_pairs || q < x->n_pairs)) {
        uint64_t kp = p < m->n_pairs ? (uint64_t)m->a[p] << 32 | m->b[p] : UINT64_MAX;
        uint64_t kq = q < x->n_pairs ? (uint64_t)map[x->a[q]] << 32 | map[x->b[q]] : UINT64_MAX;
        a[at] = (uint32_t)((kp < kq ? kp : kq) >> 32);
        b[at] = (uint32_t)(kp < kq ? kp : kq);
        nn[at] = 0;
        pm_i_u128 u = 0;
        if (kp <= kq) {
            nn[at] += m->n[p];
            if (w && x_add(&u, m->w[p], 0)) {
                rc = 2;
            }
            p++;
        }
        if (kq <= kp) {
            nn[at] += x->n[q]; /* each below 2^33: no overflow */
            if (w && x_add(&u, x->w[q], sh)) {
                rc = 2;
            }
            q++;
        }
        if (w) {
            w[at] = u_x(u);
        }
        at++;
    }
    if (rc) {
        free(a);
        free(b);
        free(nn);
        free(w);
        return rc;
    }
    free(m->a);
    free(m->b);
    free(m->n);
    free(m->w);
    m->a = a;
    m->b = b;
    m->n = nn;
    m->w = w;
    m->n_pairs = at;
    return 0;
}

static pm_err_t merge_pairs(const pm_shard_t *const *s, size_t n, uint32_t *const *map,
                            const int *sh, pm_shard_t *m, pm_diag_t *diag) {
    m->n_pairs = 0;
    for (size_t i = 0; i < n; i++) {
        int rc = merge_two(m, s[i], map[i], sh[2 * i]);
        if (rc == 2) {
            return too_wide(diag);
        }
        if (rc) {
            return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory merging shards");
        }
    }
    return PM_OK; /* counts over 2^32 - 1: refused by the caller */
}

/* N and the totals; weighted: the exponents of the sum (the lowest of the shards that hold
 * weights, the highest wexp) and each shard's shifts into them, sh[2i] and sh[2i + 1]. */
static pm_err_t merge_totals(const pm_shard_t *const *s, size_t n, pm_shard_t *m, int *sh,
                             pm_diag_t *diag) {
    int over = 0, any = 0, any2 = 0;
    m->wexp = -2000;
    for (size_t i = 0; i < n && m->weighted; i++) {
        if (s[i]->respondents) {
            m->e = any++ ? (s[i]->e < m->e ? s[i]->e : m->e) : s[i]->e;
            m->e2 = any2++ ? (s[i]->e2 < m->e2 ? s[i]->e2 : m->e2) : s[i]->e2;
        }
        m->wexp = s[i]->wexp > m->wexp ? s[i]->wexp : m->wexp;
    }
    for (size_t i = 0; i < n; i++) {
        sh[2 * i] = m->weighted && s[i]->respondents ? s[i]->e - m->e : 0;
        sh[2 * i + 1] = m->weighted && s[i]->respondents ? s[i]->e2 - m->e2 : 0;
    }
    for (size_t i = 0; i < n; i++) {
        over |= add_u64(&m->N, s[i]->N) | add_u64(&m->respondents, s[i]->respondents) |
                add_u64(&m->rows, s[i]->rows) | add_u64(&m->duplicates, s[i]->duplicates) |
                add_u64(&m->single_item, s[i]->single_item) | add_u64(&m->no_item, s[i]->no_item);
        m->has_categories |= s[i]->has_categories;
    }
    if (m->weighted) {
        pm_i_u128 w = 0, w2 = 0;
        int wide = 0;
        for (size_t i = 0; i < n; i++) {
            wide |= x_add(&w, s[i]->W, sh[2 * i]) | x_add(&w2, s[i]->W2, sh[2 * i + 1]);
        }
        m->W = u_x(w);
        m->W2 = u_x(w2);
        if (wide) {
            return too_wide(diag);
        }
    }
    if (over || m->N > UINT32_MAX) {
        return pm_diag_set(diag, PM_EDATA, NULL, 0,
                           "the shards hold more than 2^32 - 1 respondents together");
    }
    return PM_OK;
}

pm_err_t pm_shard_merge(const pm_shard_t *const *s, const char *const *names, size_t n,
                        pm_shard_t **out, pm_diag_t *diag) {
    *out = NULL;
    if (n == 0) {
        return pm_diag_set(diag, PM_EUSAGE, NULL, 0, "no shard to merge");
    }
    pm_err_t rc = merge_check(s, names, n, diag);
    if (rc) {
        return rc;
    }
    pm_shard_t *m = pm_i_calloc(1, sizeof *m);
    uint32_t **map = pm_i_calloc(n, sizeof *map);
    int *sh = pm_i_calloc(2 * n, sizeof *sh);
    if (!m || !map || !sh || !(m->fingerprint = pm_i_malloc(strlen(s[0]->fingerprint) + 1, 1))) {
        free(map);
        free(sh);
        pm_shard_free(m);
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory merging shards");
    }
    strcpy(m->fingerprint, s[0]->fingerprint);
    m->weighted = s[0]->weighted;
    for (size_t i = 0; i < n && !rc; i++) {
        map[i] = pm_i_malloc(s[i]->n_items ? s[i]->n_items : 1, sizeof **map);
        if (!map[i]) {
            rc = pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory merging shards");
        }
    }
    if (!rc) {
        rc = merge_parts(s, names, n, m, diag);
    }
    if (!rc) {
        rc = merge_totals(s, n, m, sh, diag);
    }
    if (!rc) {
        rc = merge_items(s, names, n, m, map, sh, diag);
    }
    if (!rc) {
        free(m->a); /* pm_i_shard_alloc made room for 0 pairs */
        free(m->b);
        free(m->n);
        free(m->w);
        m->a = m->b = NULL;
        m->n = NULL;
        m->w = NULL;
        rc = merge_pairs(s, n, map, sh, m, diag);
    }
    for (size_t k = 0; !rc && k < m->n_pairs; k++) {
        if (m->n[k] > UINT32_MAX) {
            rc = pm_diag_set(diag, PM_EDATA, NULL, 0,
                             "a pair seen together more than 2^32 - 1 "
                             "times");
        }
    }
    for (size_t i = 0; i < n; i++) {
        free(map[i]);
    }
    free(map);
    free(sh);
    if (rc) {
        pm_shard_free(m);
        return rc;
    }
    *out = m;
    return PM_OK;
}
