/* Unit tests of src/util.c: checked allocation and its failure hook, pm_i_grow, the interning
 * string table, byte order and round-trip number formatting. */
#include "unit.h"

#include <float.h>
#include <math.h>

#include "util.h"

/* ==== allocation ============================================================================ */

static void test_util_malloc_overflow(void **state) {
    (void)state;
    /* n * size does not fit in size_t: NULL, never a short block */
    assert_null(pm_i_malloc(SIZE_MAX / 2 + 1, 2));
    assert_null(pm_i_calloc(SIZE_MAX / 4 + 1, 4));
    assert_null(pm_i_realloc(NULL, SIZE_MAX / 8 + 1, 8));
    /* a zero-sized request still returns a block that can be freed */
    void *p = pm_i_malloc(0, 8);
    assert_non_null(p);
    pm_i_free(p);
    p = pm_i_calloc(0, 0);
    assert_non_null(p);
    pm_i_free(p);
}

static void test_util_alloc_fail_after_nth(void **state) {
    (void)state;
    void *p[5];
    /* the 3rd allocation from now fails, once; the ones around it succeed */
    pm_i_alloc_fail_after(3);
    p[0] = pm_i_malloc(4, 4);
    p[1] = pm_i_calloc(4, 4);
    p[2] = pm_i_malloc(4, 4);
    p[3] = pm_i_realloc(NULL, 4, 4);
    p[4] = pm_i_malloc(4, 4);
    assert_non_null(p[0]);
    assert_non_null(p[1]);
    assert_null(p[2]);
    assert_non_null(p[3]);
    assert_non_null(p[4]);
    for (int i = 0; i < 5; i++) {
        pm_i_free(p[i]);
    }
    /* each wrapper honours the hook */
    pm_i_alloc_fail_after(1);
    assert_null(pm_i_calloc(1, 1));
    pm_i_alloc_fail_after(1);
    assert_null(pm_i_malloc(1, 1));
    void *q = pm_i_malloc(1, 1);
    assert_non_null(q);
    pm_i_alloc_fail_after(1);
    assert_null(pm_i_realloc(q, 2, 1)); /* q is untouched and still ours */
    pm_i_free(q);
    /* 0 disables */
    pm_i_alloc_fail_after(0);
    for (int i = 0; i < 4; i++) {
        q = pm_i_malloc(1, 1);
        assert_non_null(q);
        pm_i_free(q);
    }
}

static void test_util_grow_doubles(void **state) {
    (void)state;
    int *v = NULL;
    size_t cap = 0;
    assert_int_equal(pm_i_grow((void **)&v, &cap, 0, sizeof *v), 0); /* nothing needed */
    assert_null(v);
    assert_int_equal(pm_i_grow((void **)&v, &cap, 1, sizeof *v), 0);
    assert_int_equal(cap, 16);
    for (int i = 0; i < 16; i++) {
        v[i] = i;
    }
    int *before = v;
    assert_int_equal(pm_i_grow((void **)&v, &cap, 16, sizeof *v), 0); /* fits: no change */
    assert_ptr_equal(v, before);
    assert_int_equal(cap, 16);
    assert_int_equal(pm_i_grow((void **)&v, &cap, 17, sizeof *v), 0);
    assert_int_equal(cap, 32);
    assert_int_equal(pm_i_grow((void **)&v, &cap, 1000, sizeof *v), 0);
    assert_int_equal(cap, 1024);
    for (int i = 0; i < 16; i++) {
        assert_int_equal(v[i], i); /* contents kept */
    }
    free(v);
}

static void test_util_grow_failure_keeps_array(void **state) {
    (void)state;
    char *v = NULL;
    size_t cap = 0;
    assert_int_equal(pm_i_grow((void **)&v, &cap, 20, 1), 0);
    memcpy(v, "kept", 5);
    char *old = v;
    /* overflow of the doubling */
    assert_int_equal(pm_i_grow((void **)&v, &cap, SIZE_MAX / 2 + 2, 1), -1);
    assert_ptr_equal(v, old);
    assert_int_equal(cap, 32);
    /* overflow of n * size */
    assert_int_equal(pm_i_grow((void **)&v, &cap, SIZE_MAX / 16, 64), -1);
    assert_ptr_equal(v, old);
    assert_int_equal(cap, 32);
    /* allocation failure */
    pm_i_alloc_fail_after(1);
    assert_int_equal(pm_i_grow((void **)&v, &cap, 33, 1), -1);
    assert_ptr_equal(v, old);
    assert_int_equal(cap, 32);
    assert_string_equal(v, "kept");
    free(v);
}

/* ==== string table ========================================================================== */

static void test_util_strtab_intern_ids(void **state) {
    (void)state;
    pm_i_strtab t;
    pm_i_strtab_init(&t);
    assert_int_equal(pm_i_strtab_find(&t, "x", 1), -1); /* empty table */
    bool added = false;
    assert_int_equal(pm_i_strtab_intern(&t, "tea", 3, &added), 0);
    assert_true(added);
    assert_int_equal(pm_i_strtab_intern(&t, "coffee", 6, &added), 1);
    assert_true(added);
    assert_int_equal(pm_i_strtab_intern(&t, "tea", 3, &added), 0);
    assert_false(added);
    assert_int_equal(pm_i_strtab_intern(&t, "", 0, &added), 2); /* the empty string is a key */
    assert_true(added);
    /* lengths, not NUL bytes, delimit keys */
    assert_int_equal(pm_i_strtab_intern(&t, "a\0b", 3, NULL), 3);
    assert_int_equal(pm_i_strtab_intern(&t, "a\0c", 3, NULL), 4);
    assert_int_equal(pm_i_strtab_intern(&t, "a", 1, NULL), 5);
    assert_int_equal(pm_i_strtab_intern(&t, "teapot", 3, NULL), 0); /* prefix "tea" */
    assert_int_equal(t.count, 6);
    assert_int_equal(pm_i_strtab_find(&t, "coffee", 6), 1);
    assert_int_equal(pm_i_strtab_find(&t, "coffe", 5), -1);
    assert_int_equal(pm_i_strtab_find(&t, "a\0c", 3), 4);
    assert_string_equal(t.str[1], "coffee");
    assert_int_equal(t.len[1], 6);
    assert_memory_equal(t.str[3], "a\0b", 4); /* stored NUL-terminated */
    pm_i_strtab_destroy(&t);
    assert_int_equal(t.count, 0);
    pm_i_strtab_destroy(&t); /* destroying twice is safe */
}

static void test_util_strtab_intern_many(void **state) {
    (void)state;
    /* 40000 keys force several rehashes; 300-byte keys fill several 1 MiB arena blocks; one
     * 3 MB key needs a block of its own. Addresses must stay valid throughout. */
    enum { NK = 40000 };
    pm_i_strtab t;
    pm_i_strtab_init(&t);
    const char **first = malloc(NK * sizeof *first);
    assert_non_null(first);
    char key[320];
    for (int i = 0; i < NK; i++) {
        int n = snprintf(key, sizeof key, "item-%d", i);
        if (i % 10 == 0) { /* long keys */
            memset(key + n, 'x', 300 - (size_t)n);
            n = 300;
        }
        int64_t id = pm_i_strtab_intern(&t, key, (size_t)n, NULL);
        assert_int_equal(id, i);
        first[i] = t.str[id];
    }
    size_t biglen = 3u << 20;
    char *big = malloc(biglen);
    assert_non_null(big);
    memset(big, 'b', biglen);
    assert_int_equal(pm_i_strtab_intern(&t, big, biglen, NULL), NK);
    assert_int_equal(t.len[NK], biglen);
    assert_memory_equal(t.str[NK], big, biglen);
    for (int i = 0; i < NK; i++) {
        int n = snprintf(key, sizeof key, "item-%d", i);
        if (i % 10 == 0) {
            memset(key + n, 'x', 300 - (size_t)n);
            n = 300;
        }
        assert_int_equal(pm_i_strtab_find(&t, key, (size_t)n), i);
        assert_ptr_equal(t.str[i], first[i]); /* stable address */
        assert_memory_equal(t.str[i], key, (size_t)n);
        assert_int_equal(t.str[i][n], '\0');
    }
    assert_true(t.cap >= 2 * t.count); /* load factor at most 1/2 */
    free(big);
    free(first);
    pm_i_strtab_destroy(&t);
}

/* Allocation failures at every point: intern returns -1, the table stays usable and keeps
 * every key it had. */
static void test_util_strtab_intern_alloc_failure(void **state) {
    (void)state;
    enum { NK = 3000 };
    char key[32];
    int failures = 0;
    for (long n = 1; n < 200; n++) {
        pm_i_strtab t;
        pm_i_strtab_init(&t);
        pm_i_alloc_fail_after(n);
        int failed_at = -1;
        for (int i = 0; i < NK; i++) {
            int len = snprintf(key, sizeof key, "k%d", i);
            int64_t id = pm_i_strtab_intern(&t, key, (size_t)len, NULL);
            if (id < 0) {
                failed_at = i;
                break;
            }
            assert_int_equal(id, i);
        }
        pm_i_alloc_fail_after(0);
        if (failed_at < 0) {
            pm_i_strtab_destroy(&t);
            break; /* n is past the last allocation */
        }
        failures++;
        assert_int_equal(t.count, failed_at);
        for (int i = 0; i < failed_at; i++) {
            int len = snprintf(key, sizeof key, "k%d", i);
            assert_int_equal(pm_i_strtab_find(&t, key, (size_t)len), i);
        }
        /* retry without the hook: the key that failed gets the next id */
        int len = snprintf(key, sizeof key, "k%d", failed_at);
        assert_int_equal(pm_i_strtab_find(&t, key, (size_t)len), -1);
        assert_int_equal(pm_i_strtab_intern(&t, key, (size_t)len, NULL), failed_at);
        pm_i_strtab_destroy(&t);
    }
    assert_true(failures >= 5); /* the loop reached several allocation sites */
}

/* ==== misc ================================================================================== */

static void test_util_bytecmp_unsigned(void **state) {
    (void)state;
    assert_true(pm_i_bytecmp("a", "b") < 0);
    assert_true(pm_i_bytecmp("Z", "a") < 0); /* ASCII: upper case first */
    assert_true(pm_i_bytecmp("ab", "a") > 0);
    assert_int_equal(pm_i_bytecmp("same", "same"), 0);
    /* UTF-8 lead bytes (>= 0xC3) sort after ASCII: compared as unsigned char (C11 7.24.4) */
    assert_true(pm_i_bytecmp("z", "\xC3\xA9") < 0);
}

/* Known binary64 values and their round-trip text. Source: Python's repr() of the same doubles
 * (shortest round-trip digits, checked with /usr/bin/python3 when this test was written), in C's
 * %g spelling ("1" for 1.0); for the subnormal 5e-324, whose repr has fewer than 15 digits,
 * the expected text is %.15g, the shortest precision pm_i_fmt_double tries. */
static void test_util_fmt_double_known(void **state) {
    (void)state;
    static const struct {
        double v;
        const char *s;
    } cases[] = {
        {0.1, "0.1"},
        {0.15, "0.15"},
        {-0.0625, "-0.0625"},
        {0.9375, "0.9375"},
        {1.0, "1"},
        {0.1 + 0.2, "0.30000000000000004"},
        {1.0 / 3.0, "0.3333333333333333"},
        {2.0 / 3.0, "0.6666666666666666"},
        {1e21, "1e+21"},
        {1e-7, "1e-07"}, /* C's %g exponent has at least two digits (C11 7.21.6.1) */
        {123456789.0, "123456789"},
        {DBL_MAX, "1.7976931348623157e+308"},
        {5e-324, "4.94065645841247e-324"}, /* the smallest subnormal */
        {0.0, "0"},
        {-0.0, "0"}, /* negative zero prints as 0 in outputs */
    };
    char buf[64];
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        int n = pm_i_fmt_double(buf, sizeof buf, cases[i].v);
        assert_string_equal(buf, cases[i].s);
        assert_int_equal(n, (int)strlen(cases[i].s));
    }
    pm_i_fmt_double(buf, sizeof buf, NAN);
    assert_string_equal(buf, "nan");
    pm_i_fmt_double(buf, sizeof buf, INFINITY);
    assert_string_equal(buf, "inf");
    pm_i_fmt_double(buf, sizeof buf, -INFINITY);
    assert_string_equal(buf, "-inf");
}

/* Random bit patterns (every exponent, subnormals included) read back to the same double; the
 * text is that of the lowest precision among %.15g, %.16g, %.17g that round-trips (util.h). */
static void test_util_fmt_double_roundtrip(void **state) {
    (void)state;
    unit_rng r = {20240611};
    char buf[32], shorter[40];
    for (int i = 0; i < 200000; i++) {
        uint64_t bits = unit_next(&r);
        double v;
        if (i % 4 == 0) { /* also plain values of the size of measures */
            v = (unit_unif(&r) - 0.5) * pow(10.0, (double)((int)unit_below(&r, 12) - 6));
        } else {
            memcpy(&v, &bits, sizeof v);
        }
        if (!isfinite(v)) {
            continue;
        }
        int n = pm_i_fmt_double(buf, sizeof buf, v);
        assert_true(n > 0 && n < (int)sizeof buf);
        double back = strtod(buf, NULL);
        if (back != v) {
            fail_msg("%.17g printed as '%s' reads back as %.17g", v, buf, back);
        }
        /* no lower precision of %g would have round-tripped */
        for (int prec = 15; prec <= 17; prec++) {
            snprintf(shorter, sizeof shorter, "%.*g", prec, v);
            if (strcmp(shorter, buf) == 0) {
                break;
            }
            if (strtod(shorter, NULL) == v) {
                fail_msg("%.17g printed as '%s', but %%.%dg '%s' round-trips", v, buf, prec,
                         shorter);
            }
            assert_true(prec < 17); /* the output is one of the three precisions */
        }
    }
}

/* pm_i_radix_sort against qsort with the original position as the second key (a stable sort
 * gives exactly that order), for 8-, 12- and 16-byte records, keys with few and many distinct
 * values and digits that are the same everywhere (the skipped passes). */
typedef struct {
    uint64_t key;
    uint32_t pos;
} radix_ref;

static int cmp_radix_ref(const void *a, const void *b) {
    const radix_ref *x = a, *y = b;
    if (x->key != y->key) {
        return x->key < y->key ? -1 : 1;
    }
    return x->pos < y->pos ? -1 : x->pos > y->pos;
}

static void test_util_radix_sort_stable(void **state) {
    (void)state;
    static const size_t sizes[3] = {8, 12, 16};
    uint64_t rng = 88172645463325252ULL;
    for (int kind = 0; kind < 4; kind++) {
        for (int si = 0; si < 3; si++) {
            size_t size = sizes[si], n = 1 + (size_t)(kind * 7919 + si * 3001) % 20000;
            unsigned char *rec = malloc(n * size);
            radix_ref *ref = malloc(n * sizeof *ref);
            assert_non_null(rec);
            assert_non_null(ref);
            for (size_t i = 0; i < n; i++) {
                rng ^= rng << 13;
                rng ^= rng >> 7;
                rng ^= rng << 17;
                uint64_t k = kind == 0   ? rng                       /* all bits vary */
                             : kind == 1 ? rng % 17                  /* many ties */
                             : kind == 2 ? (rng & 0xFFFF00000000ULL) /* one digit range */
                                         : 0x3FF0000000000000ULL + (rng >> 40);
                memcpy(rec + i * size, &k, 8);
                uint32_t pos = (uint32_t)i;
                memcpy(rec + i * size + 8, &pos, size - 8 < 4 ? size - 8 : 4);
                ref[i].key = k;
                ref[i].pos = pos;
            }
            assert_int_equal(pm_i_radix_sort(rec, n, size), 0);
            qsort(ref, n, sizeof *ref, cmp_radix_ref);
            for (size_t i = 0; i < n; i++) {
                uint64_t k;
                memcpy(&k, rec + i * size, 8);
                assert_true(k == ref[i].key);
                if (size > 8) {
                    uint32_t pos = 0;
                    memcpy(&pos, rec + i * size + 8, 4);
                    assert_int_equal(pos, ref[i].pos);
                }
            }
            /* by the top 32 bits only: records equal there keep their order */
            for (size_t i = 0; i < n; i++) {
                ref[i].key >>= 32;
            }
            qsort(ref, n, sizeof *ref, cmp_radix_ref); /* already by (key, pos): re-sort */
            unsigned char *rec2 = malloc(n * size);
            assert_non_null(rec2);
            /* back in the original order, from the positions the records carry */
            for (size_t i = 0; i < n && size > 8; i++) {
                uint32_t pos;
                memcpy(&pos, rec + i * size + 8, 4);
                memcpy(rec2 + (size_t)pos * size, rec + i * size, size);
            }
            if (size > 8) {
                assert_int_equal(pm_i_radix_sort_from(rec2, n, size, 32), 0);
                for (size_t i = 0; i < n; i++) {
                    uint64_t k;
                    uint32_t pos;
                    memcpy(&k, rec2 + i * size, 8);
                    memcpy(&pos, rec2 + i * size + 8, 4);
                    assert_true(k >> 32 == ref[i].key);
                    assert_int_equal(pos, ref[i].pos);
                }
            }
            free(rec2);
            free(rec);
            free(ref);
        }
    }
}

static const struct CMUnitTest tests[] = {
    cmocka_unit_test(test_util_malloc_overflow),
    cmocka_unit_test(test_util_alloc_fail_after_nth),
    cmocka_unit_test(test_util_grow_doubles),
    cmocka_unit_test(test_util_grow_failure_keeps_array),
    cmocka_unit_test(test_util_strtab_intern_ids),
    cmocka_unit_test(test_util_strtab_intern_many),
    cmocka_unit_test(test_util_strtab_intern_alloc_failure),
    cmocka_unit_test(test_util_bytecmp_unsigned),
    cmocka_unit_test(test_util_fmt_double_known),
    cmocka_unit_test(test_util_fmt_double_roundtrip),
    cmocka_unit_test(test_util_radix_sort_stable),
};

UNIT_MAIN("util", tests)
