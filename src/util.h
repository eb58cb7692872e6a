/* Internal utilities shared by the library: checked allocation (with a failure-injection hook
 * for tests), growable arrays and an interning string table backed by an arena.
 * Never installed; the CLI does not include it. */
#ifndef PM_UTIL_H
#define PM_UTIL_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

/* ---- allocation ------------------------------------------------------------------------- */
/* All return NULL on overflow of n * size or on failure; they never abort. */
void *pm_i_malloc(size_t n, size_t size);
void *pm_i_calloc(size_t n, size_t size);
void *pm_i_realloc(void *p, size_t n, size_t size);
void pm_i_free(void *p);
/* Test hook: make the n-th allocation from now fail (0 disables). Not thread-safe. */
void pm_i_alloc_fail_after(long n);
/* Test hook: the sparse counting kernel reads an item's partners off its marks (no branch per
 * visit) up to this many eligible items, unweighted (default 65536); 0: always the list. */
extern size_t pm_i_counts_scan_items;

/* Grows *p (holding *cap elements of size) to hold at least need elements. 0 on success. */
int pm_i_grow(void **p, size_t *cap, size_t need, size_t size);

/* ---- string interning -------------------------------------------------------------------- */
/* Open-addressing hash table (linear probing, power-of-two capacity) mapping byte strings to
 * dense ids 0..count-1 in first-seen order. Strings live in an arena of large blocks and are
 * NUL-terminated; their addresses are stable. */
typedef struct pm_i_arena_block pm_i_arena_block;
/* A slot: a string of at most 16 bytes is held in k0, k1 itself (so a lookup that hits reads
 * no other memory); a longer one has its hash in k0 and is compared with str[id]. */
typedef struct {
    uint64_t k0, k1;
    uint32_t len;
    uint32_t id1; /* id + 1; 0 = empty */
} pm_i_slot;
typedef struct {
    pm_i_slot *slots; /* open addressing */
    size_t cap;       /* number of slots, a power of two */
    const char **str; /* id -> string */
    uint32_t *len;    /* id -> length in bytes */
    uint64_t *hash;   /* id -> hash */
    size_t count, str_cap;
    pm_i_arena_block *blocks;
} pm_i_strtab;

void pm_i_strtab_init(pm_i_strtab *t);
void pm_i_strtab_destroy(pm_i_strtab *t);
/* Looks s up, inserting it when absent. Returns the id, or -1 on allocation failure. *added is
 * set when the string was new (may be NULL). */
int64_t pm_i_strtab_intern(pm_i_strtab *t, const char *s, size_t len, bool *added);
/* Returns the id of s, or -1 when absent. */
int64_t pm_i_strtab_find(const pm_i_strtab *t, const char *s, size_t len);
/* The same with h = pm_i_hash(s, len) already taken (pm_i_strtab_prefetch beforehand). */
int64_t pm_i_strtab_find_h(const pm_i_strtab *t, const char *s, size_t len, uint64_t h);
uint64_t pm_i_hash(const char *s, size_t len);
/* A hint: the slot where the string of hash h is looked up first is read into the cache, so
 * that a lookup of it some lines later need not wait for memory. Changes nothing. */
static inline void pm_i_strtab_prefetch(const pm_i_strtab *t, uint64_t h) {
    /* in integers: an empty table (no slots, cap 0) gives some address, never read (gcc 12
     * drops a prefetch under a condition) */
    uintptr_t sl = (uintptr_t)t->slots + ((size_t)h & (t->cap - 1)) * sizeof(pm_i_slot);
    __builtin_prefetch((const void *)sl);
    __builtin_prefetch((const void *)(sl + sizeof(pm_i_slot) - 1)); /* it may straddle two */
}

/* ---- sorting ------------------------------------------------------------------------------ */
/* Sorts n records of size bytes (size >= 8) by the uint64_t their first 8 bytes hold, stably
 * (LSD radix, 11-bit digits; a pass whose digit is the same everywhere is skipped). O(n) time,
 * n records of extra memory. Returns 0, or -1 when memory runs out (base unchanged). */
int pm_i_radix_sort(void *base, size_t n, size_t size);
/* The same by key bits lo..63 only (records equal there keep their order): fewer passes. */
int pm_i_radix_sort_from(void *base, size_t n, size_t size, int lo);

/* Sorts n records of size bytes by cmp(a, b, ctx), stably (merge sort; insertion below 16
 * records): qsort with a context argument, for comparators that need one. Returns 0, or -1
 * when memory for the merge runs out (base then holds the same records in some order). */
int pm_i_sort_ctx(void *base, size_t n, size_t size,
                  int (*cmp)(const void *, const void *, const void *), const void *ctx);

/* ---- counts ------------------------------------------------------------------------------- */
/* The sign of N nab - na nb, phi's numerator: a pair seen more (1), as often (0) or less (-1)
 * often than expected. Exact: the products are below 2^64, which long double holds exactly. */
static inline int pm_i_joint_sign(uint64_t N, uint64_t na, uint64_t nb, uint64_t nab) {
    if (N < (1ULL << 31)) {
        uint64_t x = N * nab, y = na * nb;
        return (x > y) - (x < y);
    }
    long double x = (long double)N * (long double)nab, y = (long double)na * (long double)nb;
    return (x > y) - (x < y);
}

/* ---- misc ---------------------------------------------------------------------------------- */
/* Byte-wise comparison of two NUL-terminated strings as unsigned bytes (strcmp semantics). */
int pm_i_bytecmp(const char *a, const char *b);
/* Formats a double so that it round-trips (shortest of %.15g..%.17g that reads back equal),
 * "nan"/"inf"/"-inf" for non-finite values, "0" for both zeros. Returns the length; the text is
 * at most 25 bytes and is cut to size - 1 bytes as snprintf does. When size >= 32, all of
 * buf[0..32) may be written (filler after the terminator). Exact integer arithmetic for
 * |v| < 2^57 (about 1.4e17), glibc's printf and strtod above (util.c). */
int pm_i_fmt_double(char *buf, size_t size, double v);
/* Monotonic clock in seconds. */
double pm_i_now(void);

#endif
