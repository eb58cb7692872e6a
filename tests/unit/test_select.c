/* Unit tests of src/select.c: each threshold's removed count in the documented order
 * (select.h: count, sign, q, phi, lift, top edges), the edge weight by measure, ties of
 * --top-edges broken by item names, and the bookkeeping on a real pipeline run. */
#include "unit.h"

#include <math.h>

#include "pairmap/assoc.h"
#include "pairmap/select.h"
#include "util.h"

/* A hand-made scored family: 8 items chosen by 40 of N = 100 respondents each, so for a pair
 * seen together n times phi = (100 n - 1600) / 2400 and lift = n / 16 (DESIGN.md formulas,
 * by hand). */
typedef struct {
    uint32_t a, b, n;
    double q;
} spec;

static const spec fixture[] = {
    {0, 1, 3, 0.001},  /* k0: n below --min-count 5                         -> count */
    {0, 2, 10, 0.001}, /* k1: phi -0.25                                      -> sign */
    {0, 3, 16, 0.5},   /* k2: phi 0 (not > 0); would fail q too              -> sign */
    {0, 4, 30, 0.2},   /* k3: phi 0.583, lift 1.875, q too large             -> q */
    {0, 5, 22, 0.01},  /* k4: phi 0.25; would fail lift (1.375) too          -> phi */
    {1, 2, 24, 0.01},  /* k5: phi 0.333, lift 1.5                            -> lift */
    {1, 3, 30, 0.001}, /* k6: phi 0.583, lift 1.875                          -> kept */
    {1, 4, 30, 0.001}, /* k7: the same weight as k6 (a tie)                  -> kept */
    {2, 3, 30, 0.001}, /* k8: the same weight again, later by item names     -> top */
    {2, 4, 40, 0.001}, /* k9: phi 1, lift 2.5, the heaviest                  -> kept */
    {3, 4, 27, 0.001}, /* k10: phi 0.458, lift 1.6875                        -> top */
    {3, 5, 30, 0.05},  /* k11: q exactly at --max-q passes; tie with k6      -> top */
    {4, 5, 30, NAN},   /* k12: q NaN never passes                            -> q */
};
#define NFIX (sizeof fixture / sizeof fixture[0])

static pm_incidence_t *fixture_inc(void) {
    uint64_t rp[1] = {0};
    pm_incidence_t *inc = unit_inc_new(8, 0, rp, NULL, NULL, 100);
    for (size_t i = 0; i < 8; i++) {
        inc->count[i] = 40; /* totals only: the measures need no rows */
    }
    return inc;
}

static pm_pairs_t *fixture_pairs(void) {
    pm_pairs_t *pp = calloc(1, sizeof *pp);
    assert_non_null(pp);
    pp->n = NFIX;
    pp->a = malloc(NFIX * sizeof *pp->a);
    pp->b = malloc(NFIX * sizeof *pp->b);
    pp->n_ab = malloc(NFIX * sizeof *pp->n_ab);
    pp->p = malloc(NFIX * sizeof *pp->p);
    pp->q = malloc(NFIX * sizeof *pp->q);
    pp->test = malloc(NFIX);
    assert_true(pp->a && pp->b && pp->n_ab && pp->p && pp->q && pp->test);
    for (size_t k = 0; k < NFIX; k++) {
        pp->a[k] = fixture[k].a;
        pp->b[k] = fixture[k].b;
        pp->n_ab[k] = fixture[k].n;
        pp->q[k] = fixture[k].q;
        pp->p[k] = isnan(fixture[k].q) ? NAN : fixture[k].q / 2;
        pp->test[k] = PM_TEST_CHI2;
    }
    pp->sign = PM_SIGN_POSITIVE;
    pp->n_eligible = 8;
    pp->hypotheses = 28;
    pp->seen = NFIX + 7;
    pp->below_count = 7; /* pruned while counting (pairs of items 6 and 7, not listed) */
    pp->unseen = 28 - pp->seen;
    return pp;
}

static pm_edges_t *select_run(const pm_pairs_t *pp, const pm_incidence_t *inc,
                              const pm_select_opts_t *o) {
    pm_edges_t *e = NULL;
    pm_diag_t d;
    pm_diag_clear(&d);
    assert_int_equal(pm_select_run(pp, inc, o, &e, &d), PM_OK);
    assert_non_null(e);
    return e;
}

static void expect_edges(const pm_edges_t *e, const size_t *idx, size_t n) {
    if (e->n != n) {
        fail_msg("%zu edges, expected %zu", e->n, n);
    }
    for (size_t i = 0; i < n; i++) {
        if (e->idx[i] != idx[i]) {
            fail_msg("edge %zu is pair %zu, expected %zu", i, e->idx[i], idx[i]);
        }
    }
}

static void test_select_run_removed_counts(void **state) {
    (void)state;
    pm_incidence_t *inc = fixture_inc();
    pm_pairs_t *pp = fixture_pairs();
    pm_select_opts_t o;
    pm_select_opts_init(&o);
    assert_int_equal(o.min_count, 5); /* the defaults of DESIGN.md */
    assert_true(o.max_q == 0.05);
    assert_int_equal(o.sign, PM_SIGN_POSITIVE);
    assert_int_equal(o.measure, PM_MEASURE_PHI);
    o.min_phi = 0.3;
    o.min_lift = 1.6;
    o.top_edges = 3;
    pm_edges_t *e = select_run(pp, inc, &o);
    assert_int_equal(e->removed_count, 7 + 1); /* pruned while counting + k0 */
    assert_int_equal(e->removed_sign, 2);      /* k1, k2 */
    assert_int_equal(e->removed_q, 2);         /* k3, k12 */
    assert_int_equal(e->removed_phi, 1);       /* k4 */
    assert_int_equal(e->removed_lift, 1);      /* k5 */
    assert_int_equal(e->removed_top, 3);       /* k8, k10, k11 */
    assert_int_equal(e->tested, 28);
    assert_int_equal(e->never_seen, pp->unseen);
    /* kept: the heaviest (k9) and the two ties of 0.583 first by item names (k6, k7), in
     * (a, b) order */
    static const size_t want[] = {6, 7, 9};
    expect_edges(e, want, 3);
    assert_float_equal(e->weight[0], 1400.0 / 2400.0, 1e-15);
    assert_float_equal(e->weight[2], 1.0, 1e-15);
    /* every listed pair is accounted for once */
    assert_int_equal(e->removed_count - pp->below_count + e->removed_sign + e->removed_q +
                         e->removed_phi + e->removed_lift + e->removed_top + e->n,
                     NFIX);
    pm_edges_free(e);
    /* without --top-edges the three go back in */
    o.top_edges = 0;
    e = select_run(pp, inc, &o);
    static const size_t want_all[] = {6, 7, 8, 9, 10, 11};
    expect_edges(e, want_all, 6);
    assert_int_equal(e->removed_top, 0);
    pm_edges_free(e);
    /* --top-edges at or above the number passing removes nothing */
    o.top_edges = 6;
    e = select_run(pp, inc, &o);
    assert_int_equal(e->n, 6);
    assert_int_equal(e->removed_top, 0);
    pm_edges_free(e);
    pm_pairs_free(pp);
    pm_incidence_free(inc);
}

/* Each threshold alone. */
static void test_select_run_each_threshold(void **state) {
    (void)state;
    pm_incidence_t *inc = fixture_inc();
    pm_pairs_t *pp = fixture_pairs();
    pm_select_opts_t o;
    /* --min-count 0: nothing removed for the count; q and sign still apply */
    pm_select_opts_init(&o);
    o.min_count = 0;
    o.max_q = 1;
    o.sign = PM_SIGN_BOTH;
    pm_edges_t *e = select_run(pp, inc, &o);
    assert_int_equal(e->removed_count, 7); /* only what counting pruned */
    assert_int_equal(e->removed_sign, 0);
    assert_int_equal(e->removed_q, 1); /* NaN */
    assert_int_equal(e->n, NFIX - 1);
    pm_edges_free(e);
    /* --sign negative keeps phi < 0 only */
    pm_select_opts_init(&o);
    o.sign = PM_SIGN_NEGATIVE;
    e = select_run(pp, inc, &o);
    static const size_t neg[] = {1};
    expect_edges(e, neg, 1);
    assert_int_equal(e->removed_sign, NFIX - 2); /* all n >= 5 but k1 */
    assert_float_equal(e->weight[0], -0.25, 1e-15);
    pm_edges_free(e);
    /* --min-phi is on |phi| and inclusive: under --sign both, k1 (-0.25) and k4 (0.25) pass
     * 0.25 and fail 0.26 (k2, phi 0, already went for its q) */
    pm_select_opts_init(&o);
    o.sign = PM_SIGN_BOTH;
    o.min_phi = 0.25;
    e = select_run(pp, inc, &o);
    assert_int_equal(e->removed_q, 3); /* k2, k3, k12 */
    assert_int_equal(e->removed_phi, 0);
    pm_edges_free(e);
    o.min_phi = 0.26;
    e = select_run(pp, inc, &o);
    assert_int_equal(e->removed_phi, 2);
    pm_edges_free(e);
    /* --max-q alone */
    pm_select_opts_init(&o);
    o.max_q = 0.001;
    e = select_run(pp, inc, &o);
    assert_int_equal(e->removed_q, 5); /* k3 (0.2), k4, k5 (0.01), k11 (0.05), k12 (NaN) */
    static const size_t strict[] = {6, 7, 8, 9, 10};
    expect_edges(e, strict, 5);
    pm_edges_free(e);
    pm_pairs_free(pp);
    pm_incidence_free(inc);
}

/* The weight and the ranking follow --measure. */
static void test_select_run_measure_and_ties(void **state) {
    (void)state;
    pm_incidence_t *inc = fixture_inc();
    pm_pairs_t *pp = fixture_pairs();
    pm_select_opts_t o;
    pm_select_opts_init(&o);
    o.measure = PM_MEASURE_LIFT;
    o.top_edges = 1;
    pm_edges_t *e = select_run(pp, inc, &o);
    static const size_t one[] = {9};
    expect_edges(e, one, 1);
    assert_float_equal(e->weight[0], 2.5, 1e-15);
    pm_edges_free(e);
    o.measure = PM_MEASURE_JACCARD;
    o.top_edges = 2;
    e = select_run(pp, inc, &o);
    /* Jaccard = n / (80 - n): k9 (1.0), then the ties at n = 30 (0.6) by names: k6 */
    static const size_t two[] = {6, 9};
    expect_edges(e, two, 2);
    assert_float_equal(e->weight[0], 30.0 / 50.0, 1e-15);
    pm_edges_free(e);
    /* all of a tie group equal: top-edges 2 of {k6, k7, k8, k11} (phi 0.583) keeps k6, k7 */
    o.measure = PM_MEASURE_PHI;
    o.top_edges = 2;
    o.max_q = 0.05;
    pp->n_ab[9] = 30; /* k9 joins the tie */
    pp->n_ab[10] = 30;
    e = select_run(pp, inc, &o);
    static const size_t tie[] = {6, 7};
    expect_edges(e, tie, 2);
    pm_edges_free(e);
    assert_string_equal(pm_measure_name(PM_MEASURE_LIFT), "lift");
    assert_string_equal(pm_sign_name(PM_SIGN_BOTH), "both");
    pm_pairs_free(pp);
    pm_incidence_free(inc);
}

/* Data with both complements and substitutes: 10 groups of 3 items (0..29); half of the
 * respondents take all of one group, and everyone takes 3 distinct items of 30..59. Items of
 * one group go together; items of two groups, and the filler items, replace each other. */
static pm_incidence_t *planted_inc(uint64_t seed, size_t R) {
    unit_rng g = {seed};
    uint64_t *rp = malloc((R + 1) * sizeof *rp);
    uint32_t *col = malloc(R * 6 * sizeof *col);
    assert_true(rp && col);
    size_t nnz = 0;
    for (size_t r = 0; r < R; r++) {
        rp[r] = nnz;
        if (unit_below(&g, 2)) {
            uint32_t grp = (uint32_t)unit_below(&g, 10);
            for (uint32_t j = 0; j < 3; j++) {
                col[nnz++] = 3 * grp + j;
            }
        }
        uint32_t f[3];
        for (int j = 0; j < 3; j++) {
            int dup;
            do {
                f[j] = 30 + (uint32_t)unit_below(&g, 30);
                dup = 0;
                for (int q = 0; q < j; q++) {
                    dup |= f[q] == f[j];
                }
            } while (dup);
        }
        for (int j = 1; j < 3; j++) { /* sort the three */
            for (int q = j; q > 0 && f[q - 1] > f[q]; q--) {
                uint32_t t = f[q];
                f[q] = f[q - 1];
                f[q - 1] = t;
            }
        }
        for (int j = 0; j < 3; j++) {
            col[nnz++] = f[j];
        }
    }
    rp[R] = nnz;
    pm_incidence_t *inc = unit_inc_new(60, R, rp, col, NULL, 0);
    free(rp);
    free(col);
    return inc;
}

/* On a pipeline run: every edge passes every threshold, every listed pair is counted once,
 * and --top-edges keeps the heaviest. */
static void test_select_run_pipeline(void **state) {
    (void)state;
    pm_incidence_t *inc = planted_inc(83, 3000);
    for (int sign = PM_SIGN_POSITIVE; sign <= PM_SIGN_BOTH; sign++) {
        pm_assoc_opts_t ao;
        pm_assoc_opts_init(&ao);
        ao.sign = (pm_sign_t)sign;
        ao.min_count = 3;
        ao.threads = 2;
        pm_pairs_t *pp = NULL;
        pm_diag_t d;
        assert_int_equal(pm_assoc_run(inc, &ao, &pp, &d), PM_OK);
        pm_select_opts_t o;
        pm_select_opts_init(&o);
        o.sign = (pm_sign_t)sign;
        o.min_count = 3;
        o.max_q = 0.2;
        o.min_lift = sign == PM_SIGN_POSITIVE ? 1.1 : 0;
        pm_edges_t *all = select_run(pp, inc, &o);
        assert_int_equal(all->removed_count + all->removed_sign + all->removed_q +
                             all->removed_phi + all->removed_lift + all->n,
                         pp->n + pp->below_count);
        for (size_t i = 0; i < all->n; i++) {
            pm_measures_t m;
            pm_pairs_measures(pp, inc, all->idx[i], &m);
            assert_true(pp->n_ab[all->idx[i]] >= 3 && m.q <= o.max_q);
            assert_true(sign == PM_SIGN_BOTH || (sign == PM_SIGN_POSITIVE ? m.phi > 0 : m.phi < 0));
            assert_true(o.min_lift == 0 || m.lift >= o.min_lift);
            assert_true(all->weight[i] == m.phi);
            assert_true(i == 0 || all->idx[i - 1] < all->idx[i]);
        }
        if (all->n <= 20) {
            fail_msg("sign %d: only %zu edges, too few to test --top-edges", sign, all->n);
        }
        o.top_edges = all->n / 3;
        pm_edges_t *top = select_run(pp, inc, &o);
        assert_int_equal(top->n, o.top_edges);
        assert_int_equal(top->removed_top, all->n - o.top_edges);
        double lightest = INFINITY;
        for (size_t i = 0; i < top->n; i++) {
            lightest = fmin(lightest, fabs(top->weight[i]));
        }
        size_t j = 0;
        for (size_t i = 0; i < all->n; i++) {
            if (j < top->n && top->idx[j] == all->idx[i]) {
                j++;
            } else {
                assert_true(fabs(all->weight[i]) <= lightest); /* dropped ones are lighter */
            }
        }
        assert_int_equal(j, top->n); /* a subsequence, in (a, b) order */
        pm_edges_free(top);
        pm_edges_free(all);
        pm_pairs_free(pp);
    }
    pm_incidence_free(inc);
}

static void test_select_run_alloc_failure(void **state) {
    (void)state;
    pm_incidence_t *inc = fixture_inc();
    pm_pairs_t *pp = fixture_pairs();
    pm_select_opts_t o;
    pm_select_opts_init(&o);
    o.top_edges = 2;
    int failures = 0, done = 0;
    for (long n = 1; n < 50 && !done; n++) {
        pm_edges_t *e = (pm_edges_t *)&o;
        pm_diag_t d;
        pm_i_alloc_fail_after(n);
        pm_err_t rc = pm_select_run(pp, inc, &o, &e, &d);
        pm_i_alloc_fail_after(0);
        if (rc == PM_OK) {
            done = 1;
            pm_edges_free(e);
        } else {
            assert_int_equal(rc, PM_ENOMEM);
            assert_null(e);
            failures++;
        }
    }
    assert_true(done);
    assert_int_equal(failures, 5); /* edges, idx, weight, ranking, kept positions */
    pm_edges_free(NULL);
    pm_pairs_free(pp);
    pm_incidence_free(inc);
}

static const struct CMUnitTest tests[] = {
    cmocka_unit_test(test_select_run_removed_counts),
    cmocka_unit_test(test_select_run_each_threshold),
    cmocka_unit_test(test_select_run_measure_and_ties),
    cmocka_unit_test(test_select_run_pipeline),
    cmocka_unit_test(test_select_run_alloc_failure),
};

UNIT_MAIN("select", tests)
