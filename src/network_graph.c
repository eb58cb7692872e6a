/* The network stage's ground floor (see network.h): igraph's set-up and error handling, the
 * usable edges renumbered for igraph, the modularity of a partition and the adjusted Rand
 * index between two. */
#include "pairmap/network.h"

#include <gsl/gsl_errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define PM_NETWORK_STAGE
#include "network_internal.h"
#include "util.h"

/* ---- igraph set-up and errors --------------------------------------------------------------- */

/* The last non-empty reason igraph gave on this thread (see network_internal.h). IGRAPH_CHECK
 * calls the handler again with an empty reason on the way up, so only non-empty reasons
 * overwrite it. */
static _Thread_local char tl_reason[512];

static void on_igraph_error(const char *reason, const char *file, int line, igraph_error_t err) {
    (void)file;
    (void)line;
    (void)err;
    if (reason && reason[0]) {
        snprintf(tl_reason, sizeof tl_reason, "%s", reason);
    }
    IGRAPH_FINALLY_FREE(); /* frees the temporaries registered with IGRAPH_FINALLY */
}
static void on_igraph_warning(const char *reason, const char *file, int line) {
    (void)reason;
    (void)file;
    (void)line;
}

void pm_init(void) {
    igraph_set_attribute_table(&igraph_cattribute_table);
    igraph_set_error_handler(on_igraph_error);
    igraph_set_warning_handler(on_igraph_warning);
    gsl_set_error_handler_off();
}

void pm_i_net_reason_clear(void) {
    tl_reason[0] = '\0';
}

pm_err_t pm_i_net_from_igraph(igraph_error_t rc, const char *what, pm_diag_t *diag) {
    if (rc == IGRAPH_ENOMEM) {
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory (%s)", what);
    }
    return pm_diag_set(diag, PM_EINTERNAL, NULL, 0, "igraph failed in %s: %s%s%s", what,
                       igraph_strerror(rc), tl_reason[0] ? ": " : "", tl_reason);
}

/* ---- usable edges ------------------------------------------------------------------------- */
void pm_i_usable_free(pm_i_usable *u) {
    free(u->newid);
    free(u->oldid);
    free(u->ends);
    free(u->w);
    memset(u, 0, sizeof *u);
}

int pm_i_edge_ok(const uint32_t *ea, const uint32_t *eb, const double *w, size_t k) {
    double x = w ? w[k] : 1.0;
    return ea[k] != eb[k] && isfinite(x) && x > 0;
}

pm_err_t pm_i_usable_init(pm_i_usable *u, size_t n, size_t m, const uint32_t *ea,
                          const uint32_t *eb, const double *w, int renumber, pm_diag_t *diag) {
    memset(u, 0, sizeof *u);
    if (n >= (size_t)UINT32_MAX || n > (size_t)IGRAPH_VCOUNT_MAX || m > (size_t)IGRAPH_ECOUNT_MAX) {
        return pm_diag_set(diag, PM_EINTERNAL, NULL, 0,
                           "graph too large for igraph (%zu vertices, %zu edges)", n, m);
    }
    for (size_t k = 0; k < m; k++) {
        if (ea[k] >= n || eb[k] >= n) {
            return pm_diag_set(diag, PM_EINTERNAL, NULL, 0,
                               "edge %zu names vertex %u of a graph with %zu vertices", k,
                               ea[k] >= n ? ea[k] : eb[k], n);
        }
    }
    u->newid = pm_i_malloc(n ? n : 1, sizeof *u->newid);
    u->oldid = pm_i_malloc(n ? n : 1, sizeof *u->oldid);
    if (!u->newid || !u->oldid) {
        pm_i_usable_free(u);
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
    }
    for (size_t i = 0; i < n; i++) {
        u->newid[i] = UINT32_MAX;
    }
    size_t me = 0;
    for (size_t k = 0; k < m; k++) {
        if (pm_i_edge_ok(ea, eb, w, k)) {
            me++;
            u->newid[ea[k]] = 0;
            u->newid[eb[k]] = 0;
        }
    }
    for (size_t i = 0; i < n; i++) {
        if (!renumber || u->newid[i] == 0) {
            u->oldid[u->nv] = (uint32_t)i;
            u->newid[i] = (uint32_t)u->nv++;
        }
    }
    u->ends = pm_i_malloc(me ? 2 * me : 1, sizeof *u->ends);
    u->w = pm_i_malloc(me ? me : 1, sizeof *u->w);
    if (!u->ends || !u->w) {
        pm_i_usable_free(u);
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
    }
    for (size_t k = 0; k < m; k++) {
        if (pm_i_edge_ok(ea, eb, w, k)) {
            u->ends[2 * u->me] = u->newid[ea[k]];
            u->ends[2 * u->me + 1] = u->newid[eb[k]];
            u->w[u->me] = w ? w[k] : 1.0;
            u->me++;
        }
    }
    return PM_OK;
}

igraph_error_t pm_i_make_graph(const pm_i_usable *u, igraph_t *g, igraph_vector_t *wv,
                               double scale) {
    igraph_vector_int_t ev;
    IGRAPH_CHECK(igraph_vector_int_init(&ev, (igraph_integer_t)(2 * u->me)));
    IGRAPH_FINALLY(igraph_vector_int_destroy, &ev);
    for (size_t i = 0; i < 2 * u->me; i++) {
        VECTOR(ev)[(igraph_integer_t)i] = u->ends[i];
    }
    IGRAPH_CHECK(igraph_create(g, &ev, (igraph_integer_t)u->nv, IGRAPH_UNDIRECTED));
    IGRAPH_FINALLY(igraph_destroy, g);
    IGRAPH_CHECK(igraph_vector_init(wv, (igraph_integer_t)u->me));
    for (size_t k = 0; k < u->me; k++) {
        VECTOR(*wv)[(igraph_integer_t)k] = u->w[k] * scale;
    }
    IGRAPH_FINALLY_CLEAN(1); /* g: the caller owns it now */
    igraph_vector_int_destroy(&ev);
    IGRAPH_FINALLY_CLEAN(1);
    return IGRAPH_SUCCESS;
}

/* ---- adjusted Rand index ------------------------------------------------------------------ */

static double choose2(double k) {
    return k * (k - 1) / 2;
}

/* Sum over the runs of equal k >> shift in sorted k[0..n) of C(run length, 2). */
static double sum_choose2_runs(const uint64_t *k, size_t n, int shift) {
    double t = 0;
    for (size_t i = 0; i < n;) {
        size_t j = i;
        while (j < n && k[j] >> shift == k[i] >> shift) {
            j++;
        }
        t += choose2((double)(j - i));
        i = j;
    }
    return t;
}

/* ARI = (sum_ij C(n_ij,2) - A B / C(n,2)) / ((A + B) / 2 - A B / C(n,2)) with
 * A = sum_i C(a_i,2), B = sum_j C(b_j,2) (Hubert & Arabie 1985). Counts are exact in double
 * up to n of about 10^7. */
pm_err_t pm_adjusted_rand(size_t n, const uint32_t *x, const uint32_t *y, double *ari,
                          pm_diag_t *diag) {
    if (n < 2) {
        *ari = 1.0;
        return PM_OK;
    }
    /* (x, y) and then y as 64-bit keys, radix sorted: the runs give n_ij, a_i and b_j */
    uint64_t *k = pm_i_malloc(n, sizeof *k);
    if (!k) {
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
    }
    for (size_t i = 0; i < n; i++) {
        k[i] = (uint64_t)x[i] << 32 | y[i];
    }
    if (pm_i_radix_sort(k, n, sizeof *k)) {
        free(k);
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
    }
    double nij = sum_choose2_runs(k, n, 0), A = sum_choose2_runs(k, n, 32), B;
    for (size_t i = 0; i < n; i++) {
        k[i] = y[i];
    }
    if (pm_i_radix_sort(k, n, sizeof *k)) {
        free(k);
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
    }
    B = sum_choose2_runs(k, n, 0);
    free(k);
    double expected = A * B / choose2((double)n), top = (A + B) / 2;
    if (top == expected) {
        *ari = 1.0; /* both partitions trivial in the same way (see network.h) */
    } else {
        *ari = (nij - expected) / (top - expected);
    }
    return PM_OK;
}

/* ---- modularity -------------------------------------------------------------------------- */

static igraph_error_t modularity_run(const pm_i_usable *u, const uint32_t *membership,
                                     double resolution, double *q) {
    igraph_t g;
    igraph_vector_t wv;
    IGRAPH_CHECK(pm_i_make_graph(u, &g, &wv, 1.0));
    IGRAPH_FINALLY(igraph_destroy, &g);
    IGRAPH_FINALLY(igraph_vector_destroy, &wv);
    igraph_vector_int_t mv;
    IGRAPH_CHECK(igraph_vector_int_init(&mv, (igraph_integer_t)u->nv));
    IGRAPH_FINALLY(igraph_vector_int_destroy, &mv);
    for (size_t i = 0; i < u->nv; i++) {
        VECTOR(mv)[(igraph_integer_t)i] = membership[u->oldid[i]];
    }
    igraph_real_t Q;
    IGRAPH_CHECK(igraph_modularity(&g, &mv, &wv, resolution, IGRAPH_UNDIRECTED, &Q));
    *q = Q;
    igraph_vector_int_destroy(&mv);
    igraph_vector_destroy(&wv);
    igraph_destroy(&g);
    IGRAPH_FINALLY_CLEAN(3);
    return IGRAPH_SUCCESS;
}

pm_err_t pm_modularity(size_t n, size_t m, const uint32_t *ea, const uint32_t *eb, const double *w,
                       const uint32_t *membership, double resolution, double *q, pm_diag_t *diag) {
    pm_i_usable u;
    pm_err_t rc = pm_i_usable_init(&u, n, m, ea, eb, w, 0, diag);
    if (rc) {
        return rc;
    }
    if (u.me == 0) {
        *q = NAN;
        pm_i_usable_free(&u);
        return PM_OK;
    }
    pm_i_net_reason_clear();
    igraph_error_t ig = modularity_run(&u, membership, resolution, q);
    pm_i_usable_free(&u);
    return ig == IGRAPH_SUCCESS ? PM_OK : pm_i_net_from_igraph(ig, "the modularity", diag);
}
