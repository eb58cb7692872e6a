/* Unit tests of src/cooccur.c (issue 5, the counting kernel): the dense and the sparse kernel
 * and every thread count 1..4 agree exactly with a naive O(R k^2) count on seeded random data,
 * at the dense/sparse switch point, with respondents of one item and of hundreds of items,
 * with weights (sums identical for any thread count), with an eligibility mask, and with
 * min_keep pruning, whose callback must receive exactly the pruned pairs. */
#include "unit.h"

#include <pthread.h>

#include "pairmap/cooccur.h"
#include "util.h"

/* ---- the naive reference ------------------------------------------------------------------- */
/* Joint counts by the definition: for every respondent, every pair of its (eligible) items.
 * A dense E x E matrix, so only for test sizes. Weighted sums are exact sums rounded once
 * (the kernel's pm_i_xs sums, src/exactsum.h), computed here independently by Shewchuk's
 * error-free partials with a correctly rounded total: the algorithm of Python's math.fsum
 * (Shewchuk 1997, "Adaptive precision floating-point arithmetic"). */
typedef struct {
    size_t E;
    uint32_t *n; /* n[a * E + b], a < b */
    double *w;
    uint64_t pairs, work;
} naive;

typedef struct {
    double *p;
    size_t n, cap;
} partials;

static void partials_add(partials *ps, double x) {
    size_t i = 0;
    for (size_t j = 0; j < ps->n; j++) {
        double y = ps->p[j];
        if (fabs(x) < fabs(y)) {
            double t = x;
            x = y;
            y = t;
        }
        double hi = x + y, lo = y - (hi - x);
        if (lo != 0) {
            ps->p[i++] = lo;
        }
        x = hi;
    }
    if (i >= ps->cap) {
        ps->cap = 2 * ps->cap + 4;
        ps->p = realloc(ps->p, ps->cap * sizeof *ps->p);
        assert_non_null(ps->p);
    }
    ps->p[i++] = x;
    ps->n = i;
}

static double partials_sum(const partials *ps) { /* as math.fsum rounds its partials */
    size_t n = ps->n;
    if (n == 0) {
        return 0;
    }
    double hi = ps->p[--n], lo = 0;
    while (n > 0) {
        double x = hi, y = ps->p[--n];
        hi = x + y;
        double yr = hi - x;
        lo = y - yr;
        if (lo != 0) {
            break;
        }
    }
    if (n > 0 && ((lo < 0 && ps->p[n - 1] < 0) || (lo > 0 && ps->p[n - 1] > 0))) {
        double y = lo * 2, x = hi + y, yr = x - hi;
        if (y == yr) {
            hi = x;
        }
    }
    return hi;
}

static void naive_count(naive *nv, const pm_incidence_t *inc, const unsigned char *eligible) {
    size_t E = inc->n_items;
    nv->E = E;
    nv->n = calloc(E * E + 1, sizeof *nv->n);
    nv->w = inc->weight ? calloc(E * E + 1, sizeof *nv->w) : NULL;
    partials *ps = inc->weight ? calloc(E * E + 1, sizeof *ps) : NULL;
    assert_non_null(nv->n);
    nv->pairs = nv->work = 0;
    for (size_t r = 0; r < inc->n_resp; r++) {
        uint64_t m = 0;
        for (uint64_t i = inc->row_ptr[r]; i < inc->row_ptr[r + 1]; i++) {
            uint32_t a = inc->col[i];
            if (eligible && !eligible[a]) {
                continue;
            }
            m++;
            for (uint64_t j = i + 1; j < inc->row_ptr[r + 1]; j++) {
                uint32_t b = inc->col[j];
                if (eligible && !eligible[b]) {
                    continue;
                }
                if (nv->n[a * E + b]++ == 0) {
                    nv->pairs++;
                }
                if (nv->w) {
                    partials_add(&ps[a * E + b], inc->weight[r]);
                }
            }
        }
        nv->work += m * (m > 0 ? m - 1 : 0) / 2;
    }
    for (size_t k = 0; ps && k < E * E; k++) {
        nv->w[k] = partials_sum(&ps[k]);
        free(ps[k].p);
    }
    free(ps);
}

static void naive_free(naive *nv) {
    free(nv->n);
    free(nv->w);
}

/* The kept pairs of c are exactly the naive pairs with n >= min_keep, in (a, b) order, with
 * the same counts and bit-identical weighted sums. */
static void check_against(const pm_counts_t *c, const naive *nv, uint32_t min_keep,
                          const char *what) {
    size_t k = 0;
    uint64_t below = 0;
    for (size_t a = 0; a < nv->E; a++) {
        for (size_t b = a + 1; b < nv->E; b++) {
            uint32_t n = nv->n[a * nv->E + b];
            if (n == 0) {
                continue;
            }
            if (n < min_keep) {
                below++;
                continue;
            }
            if (k >= c->n_pairs || c->a[k] != a || c->b[k] != b || c->n[k] != n) {
                fail_msg("%s: pair %zu is (%u, %u, n=%u), expected (%zu, %zu, n=%u)", what, k,
                         k < c->n_pairs ? c->a[k] : 0, k < c->n_pairs ? c->b[k] : 0,
                         k < c->n_pairs ? c->n[k] : 0, a, b, n);
            }
            if (nv->w) {
                assert_non_null(c->w);
                if (c->w[k] != nv->w[a * nv->E + b]) {
                    fail_msg("%s: weighted sum of (%zu, %zu) is %.17g, expected %.17g", what, a, b,
                             c->w[k], nv->w[a * nv->E + b]);
                }
            } else {
                assert_null(c->w);
            }
            k++;
        }
    }
    if (k != c->n_pairs) {
        fail_msg("%s: %zu pairs, expected %zu", what, c->n_pairs, k);
    }
    assert_int_equal(c->seen, nv->pairs);
    assert_int_equal(c->pruned, below);
    assert_int_equal(c->work, nv->work);
}

static pm_counts_t *count(const pm_incidence_t *inc, int kernel, unsigned threads, size_t dense_max,
                          uint32_t min_keep, const unsigned char *eligible) {
    pm_counts_opts_t o;
    pm_counts_opts_init(&o);
    o.kernel = kernel;
    o.threads = threads;
    o.dense_max_items = dense_max;
    o.min_keep = min_keep;
    o.eligible = eligible;
    pm_counts_t *c = NULL;
    pm_diag_t d;
    pm_diag_clear(&d);
    pm_err_t rc = pm_counts_build(inc, &o, &c, &d);
    if (rc != PM_OK) {
        fail_msg("pm_counts_build: %s", d.msg);
    }
    return c;
}

static const char *kname(int k) {
    return k == PM_COUNTS_DENSE ? "dense" : k == PM_COUNTS_SPARSE ? "sparse" : "auto";
}

/* Every kernel and thread count against the naive count. */
static void all_kernels(const pm_incidence_t *inc, size_t dense_max, uint32_t min_keep,
                        const unsigned char *eligible) {
    naive nv;
    naive_count(&nv, inc, eligible);
    static const int kernels[] = {PM_COUNTS_DENSE, PM_COUNTS_SPARSE, PM_COUNTS_AUTO};
    /* the sparse kernel's two ways to an item's partners: read off the marks, and the list */
    for (size_t ki = 0; ki < 5; ki++) {
        pm_i_counts_scan_items = ki < 3 ? 65536 : 0;
        for (unsigned th = 1; th <= 4; th++) {
            char what[128];
            snprintf(what, sizeof what, "%s kernel%s, %u thread%s, min_keep %u",
                     kname(kernels[ki % 3]), ki < 3 ? "" : " (partners listed)", th,
                     th > 1 ? "s" : "", min_keep);
            pm_counts_t *c = count(inc, kernels[ki % 3], th, dense_max, min_keep, eligible);
            check_against(c, &nv, min_keep, what);
            int expect = kernels[ki % 3];
            if (inc->weight) {
                expect = PM_COUNTS_SPARSE; /* dense is unweighted only */
            }
            if (expect == PM_COUNTS_AUTO) {
                size_t E = 0;
                for (size_t i = 0; i < inc->n_items; i++) {
                    E += !eligible || eligible[i];
                }
                expect = E <= (dense_max ? dense_max : 2048) ? PM_COUNTS_DENSE : PM_COUNTS_SPARSE;
            }
            assert_int_equal(c->kernel, expect);
            pm_counts_free(c);
        }
    }
    pm_i_counts_scan_items = 65536;
    naive_free(&nv);
}

/* ---- agreement with the naive count -----------------------------------------------------------
 */

static void test_cooccur_build_random_agree(void **state) {
    (void)state;
    static const struct {
        uint64_t seed;
        size_t R, E;
        int weighted;
    } cases[] = {
        {1, 2000, 40, 0},  {2, 3000, 300, 0}, {3, 500, 700, 0},
        {4, 1500, 120, 1}, {5, 800, 450, 1},  {6, 64, 5, 0},
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        pm_incidence_t *inc =
            unit_inc_random(cases[i].seed, cases[i].R, cases[i].E, cases[i].weighted);
        all_kernels(inc, 0, 1, NULL);
        pm_incidence_free(inc);
    }
}

/* E at the switch point: E = dense_max_items is counted densely, E + 1 sparsely; with the
 * default bound of 2048 (cooccur.h) as well as a small one. */
static void test_cooccur_build_switch_point(void **state) {
    (void)state;
    for (size_t E = 2047; E <= 2049; E++) {
        pm_incidence_t *inc = unit_inc_random(10 + E, 1500, E, 0);
        naive nv;
        naive_count(&nv, inc, NULL);
        for (unsigned th = 1; th <= 4; th++) {
            pm_counts_t *c = count(inc, PM_COUNTS_AUTO, th, 0, 1, NULL);
            assert_int_equal(c->kernel, E <= 2048 ? PM_COUNTS_DENSE : PM_COUNTS_SPARSE);
            check_against(c, &nv, 1, "auto at the default switch point");
            pm_counts_free(c);
        }
        naive_free(&nv);
        /* the item at the top of the range pairs with the lowest and its neighbour */
        pm_counts_t *c = count(inc, PM_COUNTS_AUTO, 2, 0, 1, NULL);
        assert_true(pm_counts_find(c, 0, (uint32_t)(E - 1)) >= 0);
        assert_true(pm_counts_find(c, (uint32_t)(E - 2), (uint32_t)(E - 1)) >= 0);
        pm_counts_free(c);
        pm_incidence_free(inc);
    }
    pm_incidence_t *inc = unit_inc_random(99, 2500, 64, 0);
    all_kernels(inc, 64, 1, NULL); /* E == dense_max_items: dense */
    all_kernels(inc, 63, 1, NULL); /* one above: sparse */
    pm_incidence_free(inc);
}

/* Respondents with a single item give no pair; one with hundreds gives all C(k, 2). */
static void test_cooccur_build_single_and_huge_rows(void **state) {
    (void)state;
    enum { E = 600, BIG = 450 };
    uint64_t rp[6];
    uint32_t col[4 + BIG + 2];
    size_t nnz = 0;
    rp[0] = 0;
    col[nnz++] = 5; /* r0: one item */
    rp[1] = nnz;
    col[nnz++] = 599; /* r1: one item, the last */
    rp[2] = nnz;
    for (uint32_t i = 0; i < BIG; i++) {            /* r2: 450 items spread over 1..598 */
        col[nnz++] = 1 + (uint32_t)(i * 599 / BIG); /* strictly increasing, up to 598 */
    }
    rp[3] = nnz;
    col[nnz++] = 2;
    col[nnz++] = 599; /* r3: a pair */
    rp[4] = nnz;
    rp[5] = nnz; /* r4: nothing */
    pm_incidence_t *inc = unit_inc_new(E, 5, rp, col, NULL, 0);
    all_kernels(inc, 0, 1, NULL);
    all_kernels(inc, 100, 1, NULL); /* sparse under auto */
    pm_counts_t *c = count(inc, PM_COUNTS_SPARSE, 3, 0, 1, NULL);
    assert_int_equal(c->work, (uint64_t)BIG * (BIG - 1) / 2 + 1);
    pm_counts_free(c);
    pm_incidence_free(inc);
    /* only single-item respondents: nothing at all */
    uint64_t rp1[4] = {0, 1, 2, 3};
    uint32_t col1[3] = {0, 1, 1};
    inc = unit_inc_new(3, 3, rp1, col1, NULL, 0);
    for (unsigned th = 1; th <= 4; th++) {
        for (int k = PM_COUNTS_DENSE; k <= PM_COUNTS_SPARSE; k++) {
            c = count(inc, k, th, 0, 1, NULL);
            assert_int_equal(c->n_pairs, 0);
            assert_int_equal(c->seen, 0);
            assert_int_equal(c->work, 0);
            assert_int_equal(pm_counts_find(c, 0, 1), -1);
            pm_counts_free(c);
        }
    }
    pm_incidence_free(inc);
    /* no items, no respondents */
    uint64_t rp0[1] = {0};
    inc = unit_inc_new(0, 0, rp0, NULL, NULL, 0);
    for (int k = PM_COUNTS_DENSE; k <= PM_COUNTS_SPARSE; k++) {
        c = count(inc, k, 2, 0, 1, NULL);
        assert_int_equal(c->n_pairs, 0);
        pm_counts_free(c);
    }
    pm_incidence_free(inc);
}

/* Weighted sums are bit-identical for every thread count and equal to sums in respondent
 * order. */
static void test_cooccur_build_weighted_threads(void **state) {
    (void)state;
    pm_incidence_t *inc = unit_inc_random(31, 4000, 200, 1);
    pm_counts_t *ref = count(inc, PM_COUNTS_SPARSE, 1, 0, 1, NULL);
    naive nv;
    naive_count(&nv, inc, NULL);
    check_against(ref, &nv, 1, "weighted, 1 thread");
    naive_free(&nv);
    for (unsigned th = 2; th <= 4; th++) {
        for (int k = PM_COUNTS_AUTO; k <= PM_COUNTS_SPARSE; k++) {
            pm_counts_t *c = count(inc, k, th, 0, 1, NULL);
            assert_int_equal(c->n_pairs, ref->n_pairs);
            assert_memory_equal(c->a, ref->a, ref->n_pairs * sizeof *c->a);
            assert_memory_equal(c->b, ref->b, ref->n_pairs * sizeof *c->b);
            assert_memory_equal(c->n, ref->n, ref->n_pairs * sizeof *c->n);
            assert_memory_equal(c->w, ref->w, ref->n_pairs * sizeof *c->w); /* bitwise */
            pm_counts_free(c);
        }
    }
    pm_counts_free(ref);
    pm_incidence_free(inc);
}

/* Only pairs of eligible items are counted; indices stay those of the incidence. */
static void test_cooccur_build_eligible(void **state) {
    (void)state;
    pm_incidence_t *inc = unit_inc_random(41, 2000, 90, 0);
    unsigned char *el = malloc(90);
    assert_non_null(el);
    unit_rng g = {5};
    size_t E = 0;
    for (size_t i = 0; i < 90; i++) {
        el[i] = unit_below(&g, 3) != 0;
        E += el[i];
    }
    all_kernels(inc, 0, 1, el);
    all_kernels(inc, E, 1, el); /* the switch point counts eligible items only */
    all_kernels(inc, E - 1, 1, el);
    memset(el, 0, 90);
    el[3] = 1; /* a single eligible item: no pair */
    pm_counts_t *c = count(inc, PM_COUNTS_AUTO, 2, 0, 1, el);
    assert_int_equal(c->n_pairs, 0);
    assert_int_equal(c->seen, 0);
    pm_counts_free(c);
    free(el);
    pm_incidence_free(inc);
}

/* ---- pruning -------------------------------------------------------------------------------- */

typedef struct {
    pthread_mutex_t mu; /* only to check that calls of one thread index never overlap */
    unsigned threads;
    int bad_thread, overlap;
    int busy[8];
    size_t n[8], cap[8];
    uint32_t *a[8], *b[8], *nab[8];
    double *w[8];
} pruned_log;

static void on_prune(void *ud, unsigned thread, uint32_t a, uint32_t b, uint32_t n_ab,
                     double w_ab) {
    pruned_log *L = ud;
    if (thread >= L->threads || thread >= 8) {
        L->bad_thread = 1;
        return;
    }
    pthread_mutex_lock(&L->mu);
    if (L->busy[thread]) {
        L->overlap = 1;
    }
    L->busy[thread] = 1;
    pthread_mutex_unlock(&L->mu);
    if (L->n[thread] == L->cap[thread]) {
        size_t nc = L->cap[thread] ? 2 * L->cap[thread] : 256;
        L->a[thread] = realloc(L->a[thread], nc * sizeof(uint32_t));
        L->b[thread] = realloc(L->b[thread], nc * sizeof(uint32_t));
        L->nab[thread] = realloc(L->nab[thread], nc * sizeof(uint32_t));
        L->w[thread] = realloc(L->w[thread], nc * sizeof(double));
        L->cap[thread] = nc;
    }
    size_t k = L->n[thread]++;
    L->a[thread][k] = a;
    L->b[thread][k] = b;
    L->nab[thread][k] = n_ab;
    L->w[thread][k] = w_ab;
    pthread_mutex_lock(&L->mu);
    L->busy[thread] = 0;
    pthread_mutex_unlock(&L->mu);
}

static void log_free(pruned_log *L) {
    for (int t = 0; t < 8; t++) {
        free(L->a[t]);
        free(L->b[t]);
        free(L->nab[t]);
        free(L->w[t]);
    }
    pthread_mutex_destroy(&L->mu);
}

/* The union of the per-thread logs equals the naive pairs with 0 < n < min_keep, each once,
 * with its count (and weighted sum). */
static void check_pruned(const pruned_log *L, const naive *nv, uint32_t min_keep,
                         const char *what) {
    assert_false(L->bad_thread);
    assert_false(L->overlap);
    unsigned char *got = calloc(nv->E * nv->E + 1, 1);
    assert_non_null(got);
    uint64_t total = 0;
    for (unsigned t = 0; t < L->threads && t < 8; t++) {
        for (size_t k = 0; k < L->n[t]; k++) {
            uint32_t a = L->a[t][k], b = L->b[t][k];
            assert_true(a < b && b < nv->E);
            size_t at = (size_t)a * nv->E + b;
            uint32_t n = nv->n[at];
            if (got[at] || n == 0 || n >= min_keep || L->nab[t][k] != n) {
                fail_msg("%s: pruned (%u, %u, n=%u): naive n=%u, reported before: %d", what, a, b,
                         L->nab[t][k], n, got[at]);
            }
            if (nv->w && L->w[t][k] != nv->w[at]) {
                fail_msg("%s: pruned (%u, %u) w=%.17g, expected %.17g", what, a, b, L->w[t][k],
                         nv->w[at]);
            }
            got[at] = 1;
            total++;
        }
    }
    uint64_t want = 0;
    for (size_t a = 0; a < nv->E; a++) {
        for (size_t b = a + 1; b < nv->E; b++) {
            uint32_t n = nv->n[a * nv->E + b];
            want += n > 0 && n < min_keep;
        }
    }
    assert_int_equal(total, want);
    free(got);
}

static void test_cooccur_build_prune_callback(void **state) {
    (void)state;
    static const struct {
        uint64_t seed;
        size_t R, E;
        int weighted;
        uint32_t min_keep;
    } cases[] = {
        {51, 3000, 1500, 0, 3},
        {52, 3000, 150, 0, 40},
        {53, 1200, 1000, 1, 2},
        {54, 2000, 60, 0, 1000000}, /* everything pruned */
    };
    for (size_t ci = 0; ci < sizeof cases / sizeof cases[0]; ci++) {
        pm_incidence_t *inc =
            unit_inc_random(cases[ci].seed, cases[ci].R, cases[ci].E, cases[ci].weighted);
        naive nv;
        naive_count(&nv, inc, NULL);
        for (int kernel = PM_COUNTS_DENSE; kernel <= PM_COUNTS_SPARSE; kernel++) {
            for (unsigned th = 1; th <= 4; th++) {
                pruned_log L;
                memset(&L, 0, sizeof L);
                pthread_mutex_init(&L.mu, NULL);
                L.threads = th;
                pm_counts_opts_t o;
                pm_counts_opts_init(&o);
                o.kernel = kernel;
                o.threads = th;
                o.min_keep = cases[ci].min_keep;
                o.prune = on_prune;
                o.prune_ud = &L;
                pm_counts_t *c = NULL;
                pm_diag_t d;
                assert_int_equal(pm_counts_build(inc, &o, &c, &d), PM_OK);
                char what[96];
                snprintf(what, sizeof what, "case %zu, %s kernel, %u threads", ci, kname(kernel),
                         th);
                check_against(c, &nv, cases[ci].min_keep, what);
                check_pruned(&L, &nv, cases[ci].min_keep, what);
                if (c->pruned == 0) {
                    fail_msg("%s: nothing pruned; the case tests nothing", what);
                }
                pm_counts_free(c);
                log_free(&L);
            }
        }
        naive_free(&nv);
        pm_incidence_free(inc);
    }
}

/* ---- progress, lookup, failure -----------------------------------------------------------------
 */

typedef struct {
    uint64_t last_done, total, calls;
    int backwards;
} progress_log;

static void on_progress(void *ud, const char *stage, uint64_t done, uint64_t total) {
    progress_log *p = ud;
    assert_non_null(stage);
    if (done < p->last_done) {
        p->backwards = 1;
    }
    p->last_done = done;
    p->total = total;
    p->calls++;
}

static void test_cooccur_build_progress(void **state) {
    (void)state;
    pm_incidence_t *inc = unit_inc_random(61, 3000, 100, 0);
    for (int kernel = PM_COUNTS_DENSE; kernel <= PM_COUNTS_SPARSE; kernel++) {
        progress_log p = {0, 0, 0, 0};
        pm_counts_opts_t o;
        pm_counts_opts_init(&o);
        o.kernel = kernel;
        o.threads = 1;
        o.progress = on_progress;
        o.progress_ud = &p;
        pm_counts_t *c = NULL;
        pm_diag_t d;
        assert_int_equal(pm_counts_build(inc, &o, &c, &d), PM_OK);
        assert_true(p.calls > 0);
        assert_false(p.backwards);
        assert_int_equal(p.total, c->work);
        assert_int_equal(p.last_done, c->work); /* one thread: the last report is complete */
        pm_counts_free(c);
    }
    pm_incidence_free(inc);
}

static void test_cooccur_find_pairs(void **state) {
    (void)state;
    uint64_t rp[4] = {0, 3, 5, 7};
    uint32_t col[7] = {0, 2, 3, 2, 3, 1, 3};
    pm_incidence_t *inc = unit_inc_new(4, 3, rp, col, NULL, 0);
    pm_counts_t *c = count(inc, PM_COUNTS_AUTO, 1, 0, 1, NULL);
    /* pairs (0,2) (0,3) (1,3) (2,3) with counts 1 1 1 2 */
    assert_int_equal(c->n_pairs, 4);
    assert_int_equal(pm_counts_find(c, 2, 3), 3);
    assert_int_equal(c->n[3], 2);
    assert_int_equal(pm_counts_find(c, 0, 2), 0);
    assert_int_equal(pm_counts_find(c, 1, 3), 2);
    assert_int_equal(pm_counts_find(c, 0, 1), -1);
    assert_int_equal(pm_counts_find(c, 3, 2), -1); /* a < b only */
    assert_int_equal(pm_counts_find(c, 3, 4), -1);
    pm_counts_free(c);
    pm_counts_free(NULL);
    pm_incidence_free(inc);
    assert_true(pm_cpu_count() >= 1);
}

/* Allocation failures (one thread: the hook is not thread-safe): PM_ENOMEM, no result. */
static void test_cooccur_build_alloc_failure(void **state) {
    (void)state;
    pm_incidence_t *inc = unit_inc_random(71, 300, 30, 1);
    pm_incidence_t *inc2 = unit_inc_random(72, 300, 30, 0);
    for (int kernel = PM_COUNTS_DENSE; kernel <= PM_COUNTS_SPARSE; kernel++) {
        for (int weighted = 0; weighted <= 1; weighted++) {
            int failures = 0, done = 0;
            for (long n = 1; n < 500 && !done; n++) {
                pm_counts_opts_t o;
                pm_counts_opts_init(&o);
                o.kernel = kernel;
                o.threads = 1;
                o.min_keep = 2;
                pm_counts_t *c = (pm_counts_t *)&o;
                pm_diag_t d;
                pm_diag_clear(&d);
                pm_i_alloc_fail_after(n);
                pm_err_t rc = pm_counts_build(weighted ? inc : inc2, &o, &c, &d);
                pm_i_alloc_fail_after(0);
                if (rc == PM_OK) {
                    done = 1;
                    pm_counts_free(c);
                } else {
                    assert_int_equal(rc, PM_ENOMEM);
                    assert_int_equal(d.code, PM_ENOMEM);
                    assert_null(c);
                    failures++;
                }
            }
            assert_true(done);
            assert_true(failures >= 5);
        }
    }
    pm_incidence_free(inc);
    pm_incidence_free(inc2);
}

static const struct CMUnitTest tests[] = {
    cmocka_unit_test(test_cooccur_build_random_agree),
    cmocka_unit_test(test_cooccur_build_switch_point),
    cmocka_unit_test(test_cooccur_build_single_and_huge_rows),
    cmocka_unit_test(test_cooccur_build_weighted_threads),
    cmocka_unit_test(test_cooccur_build_eligible),
    cmocka_unit_test(test_cooccur_build_prune_callback),
    cmocka_unit_test(test_cooccur_build_progress),
    cmocka_unit_test(test_cooccur_find_pairs),
    cmocka_unit_test(test_cooccur_build_alloc_failure),
};

UNIT_MAIN("cooccur", tests)
