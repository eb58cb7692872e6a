/* The Fruchterman-Reingold layout (see network.h): igraph's on the usable edges, scaled into
 * the unit box, isolated vertices on a ring. */
#include "pairmap/network.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define PM_NETWORK_STAGE
#include "network_internal.h"
#include "util.h"

void pm_i_network_hooks_init(pm_i_network_hooks_t *h) {
    memset(h, 0, sizeof *h);
    h->faults.bad_restart = -1;
}

igraph_error_t pm_i_fr_run(const pm_i_network_hooks_t *h, const pm_i_usable *u, uint64_t seed,
                           int iterations, double *out) {
    igraph_t g;
    igraph_vector_t wv;
    double sum = 0;
    for (size_t k = 0; k < u->me; k++) {
        sum += u->w[k];
    }
    double scale = sum > 0 ? (double)u->me / sum : 1.0; /* mean weight 1 */
    IGRAPH_CHECK(pm_i_make_graph(u, &g, &wv, scale));
    IGRAPH_FINALLY(igraph_destroy, &g);
    IGRAPH_FINALLY(igraph_vector_destroy, &wv);
    igraph_matrix_t xy;
    IGRAPH_CHECK(igraph_matrix_init(&xy, 0, 0));
    IGRAPH_FINALLY(igraph_matrix_destroy, &xy);
    IGRAPH_CHECK(igraph_rng_seed(igraph_rng_default(), (igraph_uint_t)seed));
    igraph_integer_t niter = h->faults.bad_layout ? -1 : (igraph_integer_t)iterations; /* test */
    IGRAPH_CHECK(igraph_layout_fruchterman_reingold(
        &g, &xy, false, niter, sqrt((double)u->nv),
        /* the exact variant costs O(n^2) per
         * iteration (1.4 s at n = 1000, API-NOTES);
         * igraph's own switch is at 1000 */
        u->nv > 300 ? IGRAPH_LAYOUT_GRID : IGRAPH_LAYOUT_NOGRID, &wv, NULL, NULL, NULL, NULL));
    for (size_t i = 0; i < u->nv; i++) {
        out[2 * i] = MATRIX(xy, (igraph_integer_t)i, 0);
        out[2 * i + 1] = MATRIX(xy, (igraph_integer_t)i, 1);
    }
    igraph_matrix_destroy(&xy);
    igraph_vector_destroy(&wv);
    igraph_destroy(&g);
    IGRAPH_FINALLY_CLEAN(3);
    return IGRAPH_SUCCESS;
}

pm_err_t pm_i_layout_finish(const pm_i_usable *u, size_t n, const double *pos, double *xy,
                            pm_diag_t *diag) {
    if (u->nv > 0) {
        /* unit box, one factor for both axes, the shorter axis centred */
        double x0 = INFINITY, x1 = -INFINITY, y0 = INFINITY, y1 = -INFINITY;
        for (size_t i = 0; i < u->nv; i++) {
            x0 = fmin(x0, pos[2 * i]);
            x1 = fmax(x1, pos[2 * i]);
            y0 = fmin(y0, pos[2 * i + 1]);
            y1 = fmax(y1, pos[2 * i + 1]);
        }
        double rx = x1 - x0, ry = y1 - y0, r = fmax(rx, ry);
        if (!isfinite(r)) {
            return pm_diag_set(diag, PM_EINTERNAL, NULL, 0,
                               "the layout produced a coordinate that is not finite");
        }
        for (size_t i = 0; i < u->nv; i++) {
            double x = r > 0 ? (pos[2 * i] - x0) / r + (1 - rx / r) / 2 : 0.5;
            double y = r > 0 ? (pos[2 * i + 1] - y0) / r + (1 - ry / r) / 2 : 0.5;
            xy[2 * (size_t)u->oldid[i]] = fmin(1.0, fmax(0.0, x));
            xy[2 * (size_t)u->oldid[i] + 1] = fmin(1.0, fmax(0.0, y));
        }
    }
    size_t n_iso = n - u->nv, k = 0;
    const double pi = 3.14159265358979323846;
    for (size_t i = 0; i < n; i++) {
        if (u->newid[i] != UINT32_MAX) {
            continue;
        }
        double a = -pi / 2 + 2 * pi * (double)k / (double)n_iso;
        xy[2 * i] = 0.5 + PM_LAYOUT_RING_RADIUS * cos(a);
        xy[2 * i + 1] = 0.5 + PM_LAYOUT_RING_RADIUS * sin(a);
        k++;
    }
    return PM_OK;
}

int pm_layout_default_iterations(size_t laid_out) {
    if (laid_out <= PM_LAYOUT_FULL_ITEMS) {
        return PM_LAYOUT_ITERATIONS;
    }
    size_t it = (size_t)PM_LAYOUT_ITERATIONS * PM_LAYOUT_FULL_ITEMS / laid_out;
    return it > PM_LAYOUT_MIN_ITERATIONS ? (int)it : PM_LAYOUT_MIN_ITERATIONS;
}

int pm_layout_default_iterations_for(size_t n, size_t m, const uint32_t *ea, const uint32_t *eb,
                                     const double *w) {
    unsigned char *has = pm_i_calloc(n ? n : 1, 1);
    if (!has) {
        return -1;
    }
    size_t laid = 0;
    for (size_t k = 0; k < m; k++) {
        if (pm_i_edge_ok(ea, eb, w, k) && ea[k] < n && eb[k] < n) {
            laid += (size_t)(!has[ea[k]] + !has[eb[k]]);
            has[ea[k]] = has[eb[k]] = 1;
        }
    }
    free(has);
    return pm_layout_default_iterations(laid);
}

pm_err_t pm_i_layout_call(pm_i_network_hooks_t *h, size_t n, size_t m, const uint32_t *ea,
                          const uint32_t *eb, const double *w, uint64_t seed, int iterations,
                          double *xy, pm_diag_t *diag) {
    pm_i_usable u;
    pm_err_t rc = pm_i_usable_init(&u, n, m, ea, eb, w, 1, diag);
    if (rc) {
        return rc;
    }
    if (iterations <= 0) {
        iterations = pm_layout_default_iterations(u.nv);
    }
    double *pos = NULL;
    if (u.nv > 0) {
        pos = pm_i_malloc(2 * u.nv, sizeof *pos);
        if (!pos) {
            pm_i_usable_free(&u);
            return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
        }
        pm_i_net_reason_clear();
        igraph_error_t ig = pm_i_fr_run(h, &u, seed, iterations, pos);
        if (ig != IGRAPH_SUCCESS) {
            free(pos);
            pm_i_usable_free(&u);
            return pm_i_net_from_igraph(ig, "the Fruchterman-Reingold layout", diag);
        }
    }
    rc = pm_i_layout_finish(&u, n, pos, xy, diag);
    free(pos);
    pm_i_usable_free(&u);
    return rc;
}

pm_err_t pm_layout_fr(size_t n, size_t m, const uint32_t *ea, const uint32_t *eb, const double *w,
                      uint64_t seed, int iterations, double *xy, pm_diag_t *diag) {
    pm_i_network_hooks_t h;
    pm_i_network_hooks_init(&h);
    return pm_i_layout_call(&h, n, m, ea, eb, w, seed, iterations, xy, diag);
}
