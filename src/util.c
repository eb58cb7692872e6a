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

uint64_t pm_i_hash(const char *s, size_t len) {
    /* FNV-1a, 64-bit, then a final avalanche (splitmix64) so linear probing spreads well. */
    uint64_t h = 1469598103934665603ULL;
    for (size_t i = 0; i < len; i++) {
        h ^= (unsigned char)s[i];
        h *= 1099511628211ULL;
    }
    h ^= h >> 30;
    h *= 0xbf58476d1ce4e5b9ULL;
    h ^= h >> 27;
    h *= 0x94d049bb133111ebULL;
    h ^= h >> 31;
    return h;
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

static int rehash(pm_i_strtab *t, size_t ncap) {
    uint32_t *ns = pm_i_calloc(ncap, sizeof *ns);
    if (!ns) {
        return -1;
    }
    for (size_t id = 0; id < t->count; id++) {
        size_t i = (size_t)t->hash[id] & (ncap - 1);
        while (ns[i]) {
            i = (i + 1) & (ncap - 1);
        }
        ns[i] = (uint32_t)(id + 1);
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
        uint32_t id = t->slots[i] - 1;
        if (t->hash[id] == h && t->len[id] == len && memcmp(t->str[id], s, len) == 0) {
            return id;
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
        uint32_t id = t->slots[i] - 1;
        if (t->hash[id] == h && t->len[id] == len && memcmp(t->str[id], s, len) == 0) {
            return id;
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
    t->slots[i] = (uint32_t)(id + 1);
    if (added) {
        *added = true;
    }
    return (int64_t)id;
}

/* ==== misc ================================================================================== */
int pm_i_bytecmp(const char *a, const char *b) {
    return strcmp(a, b); /* C11 7.24.4: strcmp compares as unsigned char */
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
    for (int prec = 15; prec <= 17; prec++) {
        int n = snprintf(buf, size, "%.*g", prec, v);
        if (strtod(buf, NULL) == v || prec == 17) {
            return n;
        }
    }
    return 0;
}

double pm_i_now(void) {
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + (double)ts.tv_nsec * 1e-9;
}
