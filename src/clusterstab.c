/* Cluster-wise stability over the Louvain restarts (Hennig 2007, Computational Statistics &
 * Data Analysis 52:258-271, with the restarts in place of his resamples): for each cluster C of
 * the kept run, the mean over the other runs of max over their communities D of the Jaccard
 * overlap |C & D| / |C | D|. A planner reads it as how much of the group comes back whatever
 * the run: near 1 solid, near 0.5 or below an accident of the run. */
#include <math.h>
#include <stdlib.h>

#include "network_internal.h"
#include "util.h"

static int cmp_u64(const void *x, const void *y) {
    uint64_t a = *(const uint64_t *)x, b = *(const uint64_t *)y;
    return a < b ? -1 : a > b;
}

pm_err_t pm_i_cluster_stability(pm_clusters_t *c, pm_diag_t *diag) {
    size_t n = c->n, K = c->n_clusters;
    c->cluster_stability = pm_i_malloc(K ? K : 1, sizeof *c->cluster_stability);
    if (!c->cluster_stability) {
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory while clustering");
    }
    if (!c->runs) { /* one run: nothing to compare; no edge: every run is all singletons */
        for (size_t k = 0; k < K; k++) {
            c->cluster_stability[k] = c->restarts > 1 ? 1.0 : NAN;
        }
        return PM_OK;
    }
    size_t L = 2 * n + 1; /* labels are below (vertices with edges) + (isolated) <= 2n */
    uint64_t *key = pm_i_malloc(n ? n : 1, sizeof *key);
    size_t *dsize = pm_i_calloc(L, sizeof *dsize);
    double *best = pm_i_malloc(K ? K : 1, sizeof *best);
    if (!key || !dsize || !best) {
        free(key);
        free(dsize);
        free(best);
        free(c->cluster_stability);
        c->cluster_stability = NULL;
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory while clustering");
    }
    for (size_t k = 0; k < K; k++) {
        c->cluster_stability[k] = 0;
    }
    for (unsigned r = 0; r < c->restarts; r++) {
        if (r == c->best_restart) {
            continue;
        }
        const uint32_t *lab = c->runs + (size_t)r * n;
        for (size_t i = 0; i < n; i++) {
            dsize[lab[i]]++;
            key[i] = (uint64_t)(c->cluster[i] - 1) * L + lab[i];
        }
        qsort(key, n, sizeof *key, cmp_u64);
        for (size_t k = 0; k < K; k++) {
            best[k] = 0;
        }
        for (size_t i = 0; i < n;) {
            size_t j = i;
            while (j < n && key[j] == key[i]) {
                j++;
            }
            size_t C = (size_t)(key[i] / L), D = (size_t)(key[i] % L), both = j - i;
            double jac = (double)both / (double)(c->size[C] + dsize[D] - both);
            if (jac > best[C]) {
                best[C] = jac;
            }
            i = j;
        }
        for (size_t k = 0; k < K; k++) {
            c->cluster_stability[k] += best[k];
        }
        for (size_t i = 0; i < n; i++) {
            dsize[lab[i]] = 0;
        }
    }
    for (size_t k = 0; k < K; k++) {
        c->cluster_stability[k] /= (double)(c->restarts - 1);
    }
    free(key);
    free(dsize);
    free(best);
    return PM_OK;
}
