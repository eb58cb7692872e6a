/* Unit tests of src/incidence.c: canonical item order, deduplication and its counts, the CSR
 * invariants on random data, weighted sums and Kish's effective sample size. */
#include "unit.h"

#include <math.h>

#include "pairmap/incidence.h"
#include "pairmap/input.h"
#include "util.h"

/* Reads text (long format unless o says otherwise) and builds its incidence. */
static pm_incidence_t *build(const char *text, const pm_input_opts_t *opts) {
    pm_input_opts_t o;
    if (opts) {
        o = *opts;
    } else {
        pm_input_opts_init(&o);
    }
    char *path = unit_tmpfile_str(text);
    pm_table_t *t = NULL;
    pm_diag_t d;
    pm_diag_clear(&d);
    pm_err_t rc = pm_input_read(path, &o, &t, &d);
    if (rc != PM_OK) {
        fail_msg("read failed: %s", d.msg);
    }
    pm_incidence_t *inc = NULL;
    rc = pm_incidence_build(t, &inc, &d);
    if (rc != PM_OK) {
        fail_msg("build failed: %s", d.msg);
    }
    pm_table_free(t);
    unit_rmfile(path);
    return inc;
}

/* Checks the documented invariants of any incidence. */
static void check_invariants(const pm_incidence_t *inc) {
    assert_int_equal(inc->row_ptr[0], 0);
    uint64_t *cnt = calloc(inc->n_items + 1, sizeof *cnt);
    assert_non_null(cnt);
    uint64_t single = 0, none = 0;
    for (size_t r = 0; r < inc->n_resp; r++) {
        assert_true(inc->row_ptr[r] <= inc->row_ptr[r + 1]);
        uint64_t len = inc->row_ptr[r + 1] - inc->row_ptr[r];
        single += len == 1;
        none += len == 0;
        for (uint64_t k = inc->row_ptr[r]; k < inc->row_ptr[r + 1]; k++) {
            assert_true(inc->col[k] < inc->n_items);
            if (k > inc->row_ptr[r]) {
                assert_true(inc->col[k - 1] < inc->col[k]); /* strictly increasing */
            }
            cnt[inc->col[k]]++;
        }
    }
    for (size_t i = 0; i < inc->n_items; i++) {
        assert_int_equal(cnt[i], inc->count[i]);
        if (i > 0) {
            assert_true(pm_i_bytecmp(inc->name[i - 1], inc->name[i]) < 0); /* canonical */
        }
        assert_int_equal(pm_incidence_find(inc, inc->name[i]), (long)i);
    }
    assert_int_equal(inc->single_item, single);
    assert_int_equal(inc->no_item, none + (inc->N - inc->n_resp));
    assert_true(inc->N >= inc->n_resp);
    free(cnt);
}

/* ---- canonical order ------------------------------------------------------------------------ */

static void test_incidence_build_canonical_order(void **state) {
    (void)state;
    pm_input_opts_t o;
    pm_input_opts_init(&o);
    o.category_col = "3";
    /* byte order: upper case before lower case, ' ' (0x20) before '-' (0x2D), a prefix first,
     * UTF-8 multi-byte names (lead byte >= 0xC2) after ASCII */
    pm_incidence_t *inc = build("o,item,cat\n"
                                "1,tea,drink\n"
                                "1,\xC3\xA9"
                                "clair,bake\n"
                                "2,apple-pie,bake\n"
                                "2,Tea,drink\n"
                                "3,apple pie,bake\n"
                                "3,zucchini,\n"
                                "3,apple,fruit\n",
                                &o);
    static const char *const want[] = {"Tea",
                                       "apple",
                                       "apple pie",
                                       "apple-pie",
                                       "tea",
                                       "zucchini",
                                       ("\xC3\xA9" /* é, then plain text */
                                        "clair")};
    static const char *const cat[] = {"drink", "fruit", "bake", "bake", "drink", NULL, "bake"};
    assert_int_equal(inc->n_items, 7);
    for (size_t i = 0; i < 7; i++) {
        assert_string_equal(inc->name[i], want[i]);
        if (cat[i]) {
            assert_string_equal(inc->category[i], cat[i]);
        } else {
            assert_null(inc->category[i]);
        }
        assert_int_equal(pm_incidence_find(inc, want[i]), (long)i);
    }
    assert_int_equal(pm_incidence_find(inc, "apple "), -1);
    assert_int_equal(pm_incidence_find(inc, ""), -1);
    assert_int_equal(pm_incidence_find(inc, "\xC3\xA9"), -1);
    /* respondent 3 (index 2) holds apple pie, zucchini, apple: indices 2, 5, 1 sorted */
    assert_int_equal(inc->row_ptr[2], 4);
    assert_int_equal(inc->row_ptr[3], 7);
    assert_int_equal(inc->col[4], 1);
    assert_int_equal(inc->col[5], 2);
    assert_int_equal(inc->col[6], 5);
    check_invariants(inc);
    pm_incidence_free(inc);
}

/* Row order of the file changes nothing but the respondents' numbering. */
static void test_incidence_build_row_order_invariant(void **state) {
    (void)state;
    pm_incidence_t *a = build("o,item\n1,tea\n2,jam\n1,scone\n3,jam\n2,tea\n", NULL);
    pm_incidence_t *b = build("o,item\n3,jam\n2,tea\n1,scone\n2,jam\n1,tea\n", NULL);
    assert_int_equal(a->n_items, b->n_items);
    for (size_t i = 0; i < a->n_items; i++) {
        assert_string_equal(a->name[i], b->name[i]);
        assert_int_equal(a->count[i], b->count[i]);
    }
    assert_int_equal(a->N, b->N);
    pm_incidence_free(a);
    pm_incidence_free(b);
}

/* ---- deduplication -------------------------------------------------------------------------- */

static void test_incidence_build_dedup_counts(void **state) {
    (void)state;
    pm_input_opts_t o;
    pm_input_opts_init(&o);
    o.respondents = 6;
    /* r1: tea x3, jam; r2: tea; r3: nothing; r4: jam x2; r5: scone, tea, jam, scone */
    pm_incidence_t *inc = build("o,item\n"
                                "r1,tea\nr1,tea\nr1,jam\nr1,tea\n"
                                "r2,tea\n"
                                "r3,\n"
                                "r4,jam\nr4,jam\n"
                                "r5,scone\nr5,tea\nr5,jam\nr5,scone\n",
                                &o);
    assert_int_equal(inc->n_items, 3); /* jam, scone, tea */
    assert_int_equal(inc->duplicates, 4);
    assert_int_equal(inc->count[0], 3); /* jam: r1, r4, r5 */
    assert_int_equal(inc->count[1], 1); /* scone: r5 */
    assert_int_equal(inc->count[2], 3); /* tea: r1, r2, r5 */
    assert_int_equal(inc->n_resp, 5);
    assert_int_equal(inc->N, 6);
    assert_int_equal(inc->single_item, 2); /* r2, r4 */
    assert_int_equal(inc->no_item, 2);     /* r3 and the one added by --respondents */
    assert_int_equal(inc->row_ptr[5], 7);  /* 2 + 1 + 0 + 1 + 3 distinct pairs */
    assert_null(inc->weight);
    assert_null(inc->wcount);
    assert_true(inc->W == 6.0 && inc->W2 == 6.0);
    assert_true(pm_incidence_neff(inc) == 6.0);
    assert_true(pm_incidence_share(inc, 0) == 0.5); /* 3 of N = 6 */
    check_invariants(inc);
    pm_incidence_free(inc);
}

/* Random data with duplicates: the CSR holds exactly the distinct items of each respondent. */
static void test_incidence_build_random_csr(void **state) {
    (void)state;
    enum { NR = 700, NI = 60 };
    for (uint64_t seed = 1; seed <= 3; seed++) {
        unit_rng g = {seed};
        size_t cap = 1u << 20, len = 0;
        char *text = malloc(cap);
        assert_non_null(text);
        len += (size_t)snprintf(text, cap, "o,item\n");
        /* has[r][i]: respondent r chose item i; first[r]: order of first appearance */
        static unsigned char has[NR][NI];
        memset(has, 0, sizeof has);
        int first[NR];
        int nseen = 0;
        for (int r = 0; r < NR; r++) {
            first[r] = -1;
        }
        size_t nrows = 0;
        for (int k = 0; k < 6000; k++) {
            int r = (int)unit_below(&g, NR);
            /* skewed popularity: rare and common items */
            int i = (int)(unit_below(&g, NI) * unit_below(&g, NI) / NI);
            if (first[r] < 0) {
                first[r] = nseen++;
            }
            has[r][i] = 1;
            nrows++;
            len += (size_t)snprintf(text + len, cap - len, "resp%d,item%02d\n", r, i);
            assert_true(len < cap);
        }
        pm_incidence_t *inc = build(text, NULL);
        free(text);
        check_invariants(inc);
        assert_int_equal(inc->n_resp, (size_t)nseen);
        uint64_t nnz = inc->row_ptr[inc->n_resp];
        assert_int_equal(inc->duplicates, nrows - nnz);
        for (int r = 0; r < NR; r++) {
            if (first[r] < 0) {
                continue;
            }
            size_t rr = (size_t)first[r];
            size_t k = (size_t)inc->row_ptr[rr];
            for (int i = 0; i < NI; i++) {
                if (!has[r][i]) {
                    continue;
                }
                char name[16];
                snprintf(name, sizeof name, "item%02d", i);
                assert_true(k < inc->row_ptr[rr + 1]);
                assert_string_equal(inc->name[inc->col[k]], name);
                k++;
            }
            assert_int_equal(k, inc->row_ptr[rr + 1]);
        }
        pm_incidence_free(inc);
    }
}

/* ---- weights ----------------------------------------------------------------------------------
 */

static void test_incidence_build_weighted_sums(void **state) {
    (void)state;
    pm_input_opts_t o;
    pm_input_opts_init(&o);
    o.weight_col = "w";
    /* weights 1, 2, 3, 4; r2 lists tea twice (counted once); r4 chose nothing */
    pm_incidence_t *inc = build("id,item,w\n"
                                "r1,tea,1\nr1,jam,1\n"
                                "r2,tea,2\nr2,tea,2\n"
                                "r3,jam,3\n"
                                "r4,,4\n",
                                &o);
    assert_int_equal(inc->n_items, 2); /* jam, tea */
    assert_non_null(inc->wcount);
    assert_true(pm_incidence_wunits(inc, inc->wcount[0]) == 4.0); /* jam: r1 + r3 */
    assert_true(pm_incidence_wunits(inc, inc->wcount[1]) ==
                3.0); /* tea: r1 + r2, the duplicate not twice */
    assert_int_equal(inc->count[1], 2);
    /* held divided by 2^wexp (a power of two near the largest weight, 4 = 0.5 * 2^3) */
    assert_int_equal(inc->wexp, 3);
    assert_true(pm_incidence_wunits(inc, inc->W) == 10.0);
    assert_true(ldexp(inc->W2, 2 * inc->wexp) == 30.0);
    /* Kish's effective sample size (Kish 1965, Survey Sampling; formula from memory):
     * (sum w)^2 / sum w^2 = 100 / 30, computed by hand */
    assert_float_equal(pm_incidence_neff(inc), 10.0 / 3.0, 1e-15);
    /* weighted share: wcount / W */
    assert_float_equal(pm_incidence_share(inc, 1), 0.3, 1e-15);
    assert_int_equal(inc->N, 4);
    check_invariants(inc);
    pm_incidence_free(inc);
    /* equal weights: neff = N, whatever the weight */
    pm_incidence_t *eq = build("id,item,w\na,x,2.5\nb,x,2.5\nc,y,2.5\n", &o);
    assert_float_equal(pm_incidence_neff(eq), 3.0, 1e-12);
    assert_float_equal(pm_incidence_share(eq, 0), 2.0 / 3.0, 1e-15);
    pm_incidence_free(eq);
}

/* Weighted sums on random data against sums computed here in respondent order. */
static void test_incidence_build_weighted_random(void **state) {
    (void)state;
    enum { NR = 300, NI = 20 };
    unit_rng g = {77};
    size_t cap = 1u << 20, len = 0;
    char *text = malloc(cap);
    assert_non_null(text);
    len += (size_t)snprintf(text, cap, "id,item,w\n");
    static double w[NR];
    static unsigned char has[NR][NI];
    memset(has, 0, sizeof has);
    for (int r = 0; r < NR; r++) {
        w[r] = 0.25 + (double)unit_below(&g, 1000) / 64.0; /* exact binary fractions */
        int k = 1 + (int)unit_below(&g, 5);
        for (int j = 0; j < k; j++) {
            int i = (int)unit_below(&g, NI);
            has[r][i] = 1;
            len += (size_t)snprintf(text + len, cap - len, "r%03d,i%02d,%.17g\n", r, i, w[r]);
        }
    }
    pm_input_opts_t o;
    pm_input_opts_init(&o);
    o.weight_col = "3";
    pm_incidence_t *inc = build(text, &o);
    free(text);
    double W = 0, W2 = 0, wc[NI] = {0};
    for (int r = 0; r < NR; r++) {
        W += w[r];
        W2 += w[r] * w[r];
        for (int i = 0; i < NI; i++) {
            if (has[r][i]) {
                wc[i] += w[r];
            }
        }
    }
    /* the weights are multiples of 1/64 below 16: every sum here is exact in double */
    assert_true(pm_incidence_wunits(inc, inc->W) == W);
    assert_true(ldexp(inc->W2, 2 * inc->wexp) == W2);
    for (int i = 0; i < NI; i++) {
        char name[8];
        snprintf(name, sizeof name, "i%02d", i);
        long k = pm_incidence_find(inc, name);
        if (wc[i] == 0) {
            assert_int_equal(k, -1);
            continue;
        }
        assert_true(k >= 0);
        assert_true(pm_incidence_wunits(inc, inc->wcount[k]) == wc[i]);
    }
    for (int r = 0; r < NR; r++) {
        assert_true(pm_incidence_wunits(inc, inc->weight[r]) == w[r]); /* ids in order */
    }
    assert_float_equal(pm_incidence_neff(inc), W * W / W2, 1e-12 * W);
    check_invariants(inc);
    pm_incidence_free(inc);
}

/* ---- allocation failure -----------------------------------------------------------------------
 */

static void test_incidence_build_alloc_failure(void **state) {
    (void)state;
    pm_input_opts_t o;
    pm_input_opts_init(&o);
    o.weight_col = "w";
    o.category_col = "c";
    char *path = unit_tmpfile_str("id,item,c,w\nr1,tea,d,1\nr1,jam,s,1\nr2,tea,d,2\nr3,,,3\n");
    pm_table_t *t = NULL;
    pm_diag_t d;
    assert_int_equal(pm_input_read(path, &o, &t, &d), PM_OK);
    int failures = 0, done = 0;
    for (long n = 1; n < 200 && !done; n++) {
        pm_incidence_t *inc = (pm_incidence_t *)&o; /* must be reset */
        pm_diag_clear(&d);
        pm_i_alloc_fail_after(n);
        pm_err_t rc = pm_incidence_build(t, &inc, &d);
        pm_i_alloc_fail_after(0);
        if (rc == PM_OK) {
            check_invariants(inc);
            pm_incidence_free(inc);
            done = 1;
        } else {
            assert_int_equal(rc, PM_ENOMEM);
            assert_int_equal(d.code, PM_ENOMEM);
            assert_null(inc);
            failures++;
        }
    }
    assert_true(done);
    assert_true(failures >= 8);
    pm_incidence_free(NULL); /* accepts NULL */
    pm_table_free(t);
    unit_rmfile(path);
}

/* The build on several threads (the item mapping, the grouped check and the row pointers in
 * chunks) gives the one-thread incidence exactly: files of 100,000 rows with respondents in
 * order (some with no item at all, before the first row, in the middle and at the end) and
 * with respondents coming back later (the counting-sort path), duplicates included. */
static void test_incidence_build_threads_identical(void **state) {
    (void)state;
    for (int ungrouped = 0; ungrouped <= 1; ungrouped++) {
        unit_rng g = {7 + (uint64_t)ungrouped};
        size_t cap = 4u << 20, len = 0;
        char *text = malloc(cap);
        assert_non_null(text);
        len += (size_t)snprintf(text, cap, "o,item\nfirst-empty,\n");
        unsigned r = 0;
        for (int k = 0; k < 100000; k++) {
            if (unit_below(&g, 3) == 0) {
                r++;
            }
            unsigned who = r;
            if (ungrouped && unit_below(&g, 50) == 0) {
                who = (unsigned)unit_below(&g, r + 1);
            }
            if (unit_below(&g, 400) == 0) {
                len += (size_t)snprintf(text + len, cap - len, "e%u,\n", who); /* no item */
            } else {
                len += (size_t)snprintf(text + len, cap - len, "r%u,i%03u\n", who,
                                        (unsigned)(unit_below(&g, 30) * unit_below(&g, 30)));
            }
            assert_true(len + 64 < cap);
        }
        len += (size_t)snprintf(text + len, cap - len, "last-empty,\n");
        char *path = unit_tmpfile_str(text);
        free(text);
        pm_input_opts_t o;
        pm_input_opts_init(&o);
        pm_table_t *t = NULL;
        pm_diag_t d;
        pm_diag_clear(&d);
        assert_int_equal(pm_input_read(path, &o, &t, &d), PM_OK);
        pm_incidence_t *ref = NULL;
        assert_int_equal(pm_incidence_build_threads(t, 1, &ref, &d), PM_OK);
        check_invariants(ref);
        static const unsigned th[] = {2, 3, 7};
        for (size_t k = 0; k < 3; k++) {
            pm_incidence_t *inc = NULL;
            assert_int_equal(pm_incidence_build_threads(t, th[k], &inc, &d), PM_OK);
            assert_int_equal(inc->n_resp, ref->n_resp);
            assert_int_equal(inc->n_items, ref->n_items);
            assert_memory_equal(inc->row_ptr, ref->row_ptr,
                                (ref->n_resp + 1) * sizeof *inc->row_ptr);
            assert_memory_equal(inc->col, ref->col, ref->row_ptr[ref->n_resp] * sizeof *inc->col);
            assert_memory_equal(inc->count, ref->count, ref->n_items * sizeof *inc->count);
            assert_int_equal(inc->duplicates, ref->duplicates);
            assert_int_equal(inc->single_item, ref->single_item);
            assert_int_equal(inc->no_item, ref->no_item);
            pm_incidence_free(inc);
        }
        assert_true(ref->no_item > 100 && ref->duplicates > 100);
        pm_incidence_free(ref);
        pm_table_free(t);
        unit_rmfile(path);
    }
}

static const struct CMUnitTest tests[] = {
    cmocka_unit_test(test_incidence_build_canonical_order),
    cmocka_unit_test(test_incidence_build_row_order_invariant),
    cmocka_unit_test(test_incidence_build_dedup_counts),
    cmocka_unit_test(test_incidence_build_random_csr),
    cmocka_unit_test(test_incidence_build_weighted_sums),
    cmocka_unit_test(test_incidence_build_weighted_random),
    cmocka_unit_test(test_incidence_build_alloc_failure),
    cmocka_unit_test(test_incidence_build_threads_identical),
};

UNIT_MAIN("incidence", tests)
