/* Unit tests of edges.csv's windows (src/write_csv.c): the rows are made on all cores in
 * windows of 32,768 and written in order; without the memory for a window's buffers each row
 * is made and written on its own. A generated family of 79,800 pairs (invented: all pairs of
 * 400 items, so three windows, the last one partial) checks that the rows come out in the
 * order of the edges across the windows' and chunks' boundaries, one row per edge, and that
 * every way of failing an allocation on the way (the first, the second, ... of them) gives
 * the same bytes as the run that had its memory. */
#include "unit.h"

#include <math.h>
#include <stdio.h>
#include <string.h>

#include "pairmap/select.h"
#include "pairmap/write.h"
#include "parallel.h"
#include "util.h"

#define NI 400
#define NP (NI * (NI - 1) / 2)

static pm_incidence_t *family_inc(void) {
    uint64_t rp[1] = {0};
    pm_incidence_t *inc = unit_inc_new(NI, 0, rp, NULL, NULL, 10000);
    for (size_t i = 0; i < NI; i++) {
        inc->count[i] = 40 + i % 50; /* totals only: the measures need no rows */
    }
    return inc;
}

static pm_pairs_t *family_pairs(void) {
    pm_pairs_t *pp = calloc(1, sizeof *pp);
    assert_non_null(pp);
    pp->n = NP;
    pp->a = malloc(NP * sizeof *pp->a);
    pp->b = malloc(NP * sizeof *pp->b);
    pp->n_ab = malloc(NP * sizeof *pp->n_ab);
    pp->p = malloc(NP * sizeof *pp->p);
    pp->q = malloc(NP * sizeof *pp->q);
    pp->test = malloc(NP);
    assert_true(pp->a && pp->b && pp->n_ab && pp->p && pp->q && pp->test);
    size_t k = 0;
    for (uint32_t a = 0; a < NI; a++) {
        for (uint32_t b = a + 1; b < NI; b++, k++) {
            pp->a[k] = a;
            pp->b[k] = b;
            pp->n_ab[k] = (a * 7 + b * 3) % 30; /* 0 .. 29: zero cells too */
            pp->p[k] = 1.0 / (1.0 + (double)(k % 977));
            pp->q[k] = pp->p[k] * 3 < 1 ? pp->p[k] * 3 : 1;
            pp->test[k] = k % 3 ? PM_TEST_FISHER : PM_TEST_CHI2; /* both odds ratio branches */
        }
    }
    pp->sign = PM_SIGN_POSITIVE;
    pp->n_eligible = NI;
    pp->hypotheses = NP;
    pp->seen = NP;
    return pp;
}

static void family_free(pm_pairs_t *pp) {
    free(pp->a);
    free(pp->b);
    free(pp->n_ab);
    free(pp->p);
    free(pp->q);
    free(pp->test);
    free(pp);
}

/* edges.csv of every pair in the family's order (after the first allocation failure
 * fail_at, 0: none) in a malloc'd string of *len bytes. */
static char *edges_text_on(const pm_pairs_t *pp, const pm_incidence_t *inc, long fail_at,
                           unsigned threads, size_t *len) {
    pm_edges_t e;
    memset(&e, 0, sizeof e);
    e.n = NP;
    e.idx = malloc(NP * sizeof *e.idx);
    e.weight = malloc(NP * sizeof *e.weight);
    assert_true(e.idx && e.weight);
    for (size_t k = 0; k < NP; k++) {
        e.idx[k] = k;
        e.weight[k] = 1;
    }
    char *text = NULL;
    FILE *fp = open_memstream(&text, len);
    assert_non_null(fp);
    pm_diag_t d;
    pm_diag_clear(&d);
    pm_i_alloc_fail_after(fail_at);
    pm_err_t rc = threads ? pm_write_edges_csv_on(fp, pp, inc, &e, 0, NULL, 0, threads, &d)
                          : pm_write_edges_csv(fp, pp, inc, &e, 0, &d);
    pm_i_alloc_fail_after(0);
    assert_int_equal(rc, PM_OK);
    assert_int_equal(fclose(fp), 0);
    free(e.idx);
    free(e.weight);
    return text;
}

static char *edges_text(const pm_pairs_t *pp, const pm_incidence_t *inc, long fail_at,
                        size_t *len) {
    return edges_text_on(pp, inc, fail_at, 0, len);
}

/* One row per edge, in the edges' order: row k names pair k's items "i%05u" (unit.h). */
static void test_windows_rows_in_order(void **state) {
    (void)state;
    pm_incidence_t *inc = family_inc();
    pm_pairs_t *pp = family_pairs();
    size_t len = 0;
    char *text = edges_text(pp, inc, 0, &len);
    const char *line = strchr(text, '\n');
    assert_non_null(line);
    assert_memory_equal(text, "item_a,item_b,together,", 23); /* the header first */
    size_t rows = 0;
    for (line++; *line; rows++) {
        char want[32];
        snprintf(want, sizeof want, "i%05u,i%05u,%u,", (unsigned)pp->a[rows], (unsigned)pp->b[rows],
                 (unsigned)pp->n_ab[rows]);
        assert_true(rows < NP);
        assert_memory_equal(line, want, strlen(want));
        const char *end = strchr(line, '\n');
        assert_non_null(end);
        line = end + 1;
    }
    assert_int_equal(rows, NP);
    free(text);
    family_free(pp);
    pm_incidence_free(inc);
}

/* edges_text_on's text is want's len bytes. */
static void same_text(const pm_pairs_t *pp, const pm_incidence_t *inc, long fail_at,
                      unsigned threads, const char *want, size_t len) {
    size_t n = 0;
    char *got = edges_text_on(pp, inc, fail_at, threads, &n);
    assert_int_equal(n, len);
    assert_memory_equal(got, want, len);
    free(got);
}

/* Any allocation that fails (a chunk's buffer, the threads' bookkeeping) changes how the
 * rows are made, never their bytes. */
static void test_windows_without_memory(void **state) {
    (void)state;
    pm_incidence_t *inc = family_inc();
    pm_pairs_t *pp = family_pairs();
    size_t len = 0;
    char *want = edges_text(pp, inc, 0, &len);
    static const long fail_at[] = {1, 2, 3, 5, 8, 40, 65, 66, 100, 130, 131, 200};
    for (size_t i = 0; i < sizeof fail_at / sizeof fail_at[0]; i++) {
        same_text(pp, inc, fail_at[i], 0, want, len);
    }
    free(want);
    family_free(pp);
    pm_incidence_free(inc);
}

/* --threads reaches the windows: the rows are made on as many threads as asked (the last
 * window's 28 chunks on exactly that many; the threads' count of the last parallel loop,
 * pm_i_parallel_last_threads), never on one per core regardless, and the bytes are the same
 * for each. */
static void test_windows_threads(void **state) {
    (void)state;
    pm_incidence_t *inc = family_inc();
    pm_pairs_t *pp = family_pairs();
    size_t len = 0;
    char *want = edges_text(pp, inc, 0, &len);
    for (unsigned th = 1; th <= 3; th++) {
        same_text(pp, inc, 0, th, want, len);
        assert_int_equal(pm_i_parallel_last_threads(), th);
    }
    free(want);
    family_free(pp);
    pm_incidence_free(inc);
}

int main(void) {
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_windows_rows_in_order),
        cmocka_unit_test(test_windows_without_memory),
        cmocka_unit_test(test_windows_threads),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
