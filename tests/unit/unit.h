/* Shared helpers of the cmocka unit tests (tests/unit/test_*.c): the cmocka includes in the
 * order cmocka needs, temporary input files, a seeded PRNG, and small-table builders.
 * Header only (static inline), so each test executable stays one source file. */
#ifndef PM_TEST_UNIT_H
#define PM_TEST_UNIT_H

/* cmocka needs these four first (API-NOTES.md, cmocka) */
#include <stdarg.h>
#include <stddef.h>
#include <setjmp.h>
#include <stdint.h>
#include <cmocka.h>

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

/* cmocka 1.1's assert_float_equal converts its arguments to float, which rounds the values
 * compared and makes a tolerance below 1e-7 meaningless: here it compares doubles, and fails
 * on NaN. */
static inline void unit_double_equal(double a, double b, double eps, const char *ea, const char *eb,
                                     const char *file, int line) {
    if (!(fabs(a - b) <= eps) && !(a == b)) {
        print_error("%s = %.17g, %s = %.17g: differ by more than %.3g\n", ea, a, eb, b, eps);
        _fail(file, line);
    }
}
#undef assert_float_equal
#define assert_float_equal(a, b, eps)                                                              \
    unit_double_equal((double)(a), (double)(b), (double)(eps), #a, #b, __FILE__, __LINE__)

/* Writes len bytes to a new temporary file; returns its path (free it after unlink). */
static inline char *unit_tmpfile(const char *data, size_t len) {
    const char *dir = getenv("TMPDIR");
    char *path = malloc(512);
    assert_non_null(path);
    snprintf(path, 512, "%s/pm_unit_XXXXXX", dir && *dir ? dir : "/tmp");
    int fd = mkstemp(path);
    assert_true(fd >= 0);
    size_t off = 0;
    while (off < len) {
        ssize_t w = write(fd, data + off, len - off);
        assert_true(w > 0);
        off += (size_t)w;
    }
    assert_int_equal(close(fd), 0);
    return path;
}

static inline char *unit_tmpfile_str(const char *s) {
    return unit_tmpfile(s, strlen(s));
}

static inline void unit_rmfile(char *path) {
    if (path) {
        unlink(path);
        free(path);
    }
}

/* splitmix64 (Steele, Lea & Flood 2014): a small seeded generator for test data. */
typedef struct {
    uint64_t s;
} unit_rng;

static inline uint64_t unit_next(unit_rng *r) {
    uint64_t z = (r->s += 0x9E3779B97F4A7C15ULL);
    z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9ULL;
    z = (z ^ (z >> 27)) * 0x94D049BB133111EBULL;
    return z ^ (z >> 31);
}

/* Uniform in 0..n-1 (n > 0; the modulo bias is irrelevant for test data). */
static inline uint64_t unit_below(unit_rng *r, uint64_t n) {
    return unit_next(r) % n;
}

/* Uniform in [0, 1). */
static inline double unit_unif(unit_rng *r) {
    return (double)(unit_next(r) >> 11) * (1.0 / 9007199254740992.0);
}

/* ---- hand-built incidences -------------------------------------------------------------- */
#include "pairmap/incidence.h"

/* An incidence from CSR rows (each row sorted and distinct; checked), freed with
 * pm_incidence_free. Items are named "i00000", "i00001", ... so that index order is byte
 * order, as in a real incidence. weight may be NULL (unweighted); N 0 means n_resp. */
static inline pm_incidence_t *unit_inc_new(size_t n_items, size_t n_resp, const uint64_t *row_ptr,
                                           const uint32_t *col, const double *weight, uint64_t N) {
    pm_incidence_t *inc = calloc(1, sizeof *inc);
    assert_non_null(inc);
    uint64_t nnz = row_ptr[n_resp];
    inc->n_items = n_items;
    inc->n_resp = n_resp;
    inc->N = N ? N : n_resp;
    assert_true(inc->N >= n_resp);
    inc->row_ptr = malloc((n_resp + 1) * sizeof *inc->row_ptr);
    inc->col = malloc((nnz ? nnz : 1) * sizeof *inc->col);
    inc->count = calloc(n_items ? n_items : 1, sizeof *inc->count);
    inc->name = malloc((n_items ? n_items : 1) * sizeof *inc->name);
    inc->category = calloc(n_items ? n_items : 1, sizeof *inc->category);
    inc->storage = malloc(n_items * 8 + 1);
    assert_true(inc->row_ptr && inc->col && inc->count && inc->name && inc->category &&
                inc->storage);
    assert_true(n_items <= 100000);
    for (size_t i = 0; i < n_items; i++) {
        snprintf(inc->storage + 8 * i, 8, "i%05u", (unsigned)i);
        inc->name[i] = inc->storage + 8 * i;
    }
    memcpy(inc->row_ptr, row_ptr, (n_resp + 1) * sizeof *row_ptr);
    if (nnz) {
        assert_non_null(col);
        if (col) { /* gcc -O3 cannot see that assert_non_null does not return (-Wnonnull) */
            memcpy(inc->col, col, nnz * sizeof *col);
        }
    }
    for (size_t r = 0; r < n_resp; r++) {
        uint64_t len = row_ptr[r + 1] - row_ptr[r];
        inc->single_item += len == 1;
        inc->no_item += len == 0;
        for (uint64_t k = row_ptr[r]; k < row_ptr[r + 1]; k++) {
            assert_true(col[k] < n_items);
            assert_true(k == row_ptr[r] || col[k - 1] < col[k]);
            inc->count[col[k]]++;
        }
    }
    inc->no_item += inc->N - n_resp;
    inc->W = inc->W2 = (double)inc->N;
    if (weight) {
        assert_true(inc->N == n_resp);
        inc->weight = malloc((n_resp ? n_resp : 1) * sizeof *inc->weight);
        inc->wcount = calloc(n_items ? n_items : 1, sizeof *inc->wcount);
        assert_true(inc->weight && inc->wcount);
        double W = 0, W2 = 0;
        for (size_t r = 0; r < n_resp; r++) {
            inc->weight[r] = weight[r];
            W += weight[r];
            W2 += weight[r] * weight[r];
            for (uint64_t k = row_ptr[r]; k < row_ptr[r + 1]; k++) {
                inc->wcount[col[k]] += weight[r];
            }
        }
        inc->W = W;
        inc->W2 = W2;
    }
    return inc;
}

/* Random incidence: R respondents, E items with skewed popularity (item i about as common as
 * (E - i)^2, so there are rare and common items); rows of 0, 1, 2..12 and, for about 1% of
 * respondents, hundreds of items; items 0, E-2 and E-1 paired explicitly. Weighted when
 * weighted is set (weights in (0.1, 5), not exact binary fractions). */
static inline pm_incidence_t *unit_inc_random(uint64_t seed, size_t R, size_t E, int weighted) {
    unit_rng g = {seed};
    uint64_t *rp = malloc((R + 1) * sizeof *rp);
    size_t cap = R * 8 + 1024, nnz = 0;
    uint32_t *col = malloc(cap * sizeof *col);
    double *w = weighted ? malloc((R ? R : 1) * sizeof *w) : NULL;
    unsigned char *mark = calloc(E ? E : 1, 1);
    uint32_t *tmp = malloc((E ? E : 1) * sizeof *tmp);
    assert_true(rp && col && mark && tmp && (!weighted || w));
    for (size_t r = 0; r < R; r++) {
        rp[r] = nnz;
        double u = unit_unif(&g);
        size_t k;
        if (r < 2 && E >= 3) {
            k = 2; /* the explicit edge pairs */
        } else if (u < 0.08) {
            k = 0;
        } else if (u < 0.25) {
            k = 1;
        } else if (u < 0.99) {
            k = 2 + (size_t)unit_below(&g, 11);
        } else {
            k = 100 + (size_t)unit_below(&g, 300);
        }
        if (k > E) {
            k = E;
        }
        size_t m = 0;
        if (r == 0 && E >= 3) {
            tmp[m++] = 0;
            tmp[m++] = (uint32_t)(E - 1);
        } else if (r == 1 && E >= 3) {
            tmp[m++] = (uint32_t)(E - 2);
            tmp[m++] = (uint32_t)(E - 1);
        } else {
            while (m < k) {
                double v = unit_unif(&g);
                uint32_t i = k > 20 ? (uint32_t)unit_below(&g, E) : (uint32_t)((double)E * v * v);
                if (i >= E) {
                    i = (uint32_t)(E - 1);
                }
                if (!mark[i]) {
                    mark[i] = 1;
                    tmp[m++] = i;
                }
            }
        }
        for (size_t j = 0; j < m; j++) {
            mark[tmp[j]] = 0;
        }
        /* insertion sort (rows are short but for the rare big ones) */
        for (size_t j = 1; j < m; j++) {
            uint32_t x = tmp[j];
            size_t q = j;
            while (q > 0 && tmp[q - 1] > x) {
                tmp[q] = tmp[q - 1];
                q--;
            }
            tmp[q] = x;
        }
        if (nnz + m > cap) {
            cap = (nnz + m) * 2;
            col = realloc(col, cap * sizeof *col);
            assert_non_null(col);
        }
        memcpy(col + nnz, tmp, m * sizeof *tmp);
        nnz += m;
        if (w) {
            w[r] = 0.1 + 4.9 * unit_unif(&g);
        }
    }
    rp[R] = nnz;
    pm_incidence_t *inc = unit_inc_new(E, R, rp, col, w, 0);
    free(rp);
    free(col);
    free(w);
    free(mark);
    free(tmp);
    return inc;
}

/* Runs the group with the filter of argv[1] when given (STYLE.md section 9), after the
 * process set-up every pairmap program does first (pm_init: GSL's aborting handler off). */
#include "pairmap/network.h"
#define UNIT_MAIN(name, tests)                                                                     \
    int main(int argc, char **argv) {                                                              \
        pm_init();                                                                                 \
        if (argc > 1) {                                                                            \
            cmocka_set_test_filter(argv[1]);                                                       \
        }                                                                                          \
        return cmocka_run_group_tests_name(name, tests, NULL, NULL);                               \
    }

#endif
