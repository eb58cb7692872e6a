/* Clusters at more than one scale (see network.h): when a cluster holds more than a quarter of
 * the clustered items, Louvain again on that cluster's own graph (its sub-clusters), and a few
 * resolutions tried on the whole graph with their modularity, for a suggested --resolution.
 * Built on the public calls of the network stage (pm_cluster_louvain, pm_modularity). */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "pairmap/network.h"
#include "util.h"

static int usable(const uint32_t *ea, const uint32_t *eb, const double *w, size_t k) {
    double x = w ? w[k] : 1.0;
    return ea[k] != eb[k] && isfinite(x) && x > 0;
}

void pm_multiscale_free(pm_multiscale_t *ms) {
    if (!ms) {
        return;
    }
    for (size_t k = 0; k < ms->n_big; k++) {
        if (ms->sub_name && ms->sub_name[k] && ms->sub[k]) {
            for (size_t s = 0; s < ms->sub[k]->n_clusters; s++) {
                free(ms->sub_name[k][s]);
            }
        }
        if (ms->sub_name) {
            free(ms->sub_name[k]);
        }
        if (ms->sub) {
            pm_clusters_free(ms->sub[k]);
        }
    }
    free(ms->sub_name);
    free(ms->sub);
    free(ms->subcluster);
    for (size_t t = 0; t < ms->n_tried; t++) {
        free(ms->tried[t].cluster);
        free(ms->tried[t].grouped);
        free(ms->tried[t].first);
    }
    free(ms);
}

/* The local graph of cluster k (0-based): its members in cl's member order as local vertices
 * 0 .. size-1, the usable edges between them. Fills the arrays (allocated by the caller:
 * loc [n], ea2/eb2/w2 [m]) and *m2. */
static void cluster_graph(const pm_clusters_t *cl, size_t k, size_t m, const uint32_t *ea,
                          const uint32_t *eb, const double *w, uint32_t *loc, uint32_t *ea2,
                          uint32_t *eb2, double *w2, size_t *m2) {
    for (size_t t = cl->first[k]; t < cl->first[k + 1]; t++) {
        loc[cl->members[t]] = (uint32_t)(t - cl->first[k]);
    }
    size_t e = 0;
    for (size_t j = 0; j < m; j++) {
        if (usable(ea, eb, w, j) && cl->cluster[ea[j]] == k + 1 && cl->cluster[eb[j]] == k + 1) {
            ea2[e] = loc[ea[j]];
            eb2[e] = loc[eb[j]];
            w2[e] = w ? w[j] : 1.0;
            e++;
        }
    }
    *m2 = e;
}

/* Sub-clusters of big cluster k: Louvain on its own graph, then its sub-clusters' names and
 * each member's sub-cluster (when it splits). */
static pm_err_t split_cluster(pm_multiscale_t *ms, size_t m, const uint32_t *ea, const uint32_t *eb,
                              const double *w, const pm_cluster_opts_t *o, const pm_clusters_t *cl,
                              size_t k, pm_diag_t *diag) {
    size_t size = cl->size[k], first = cl->first[k];
    uint32_t *loc = pm_i_malloc(ms->n ? ms->n : 1, sizeof *loc);
    uint32_t *ea2 = pm_i_malloc(m ? m : 1, sizeof *ea2), *eb2 = pm_i_malloc(m ? m : 1, sizeof *eb2);
    double *w2 = pm_i_malloc(m ? m : 1, sizeof *w2), *share = NULL;
    const char **names = pm_i_malloc(size, sizeof *names);
    pm_err_t rc = PM_ENOMEM;
    if (o->share) {
        share = pm_i_malloc(size, sizeof *share);
    }
    if (!loc || !ea2 || !eb2 || !w2 || !names || (o->share && !share)) {
        goto cleanup;
    }
    for (size_t j = 0; j < size; j++) {
        uint32_t v = cl->members[first + j];
        names[j] = o->names[v];
        if (share) {
            share[j] = o->share[v];
        }
    }
    size_t m2 = 0;
    cluster_graph(cl, k, m, ea, eb, w, loc, ea2, eb2, w2, &m2);
    pm_cluster_opts_t so = *o;
    so.names = names;
    so.share = share;
    so.resolution = ms->sub_resolution;
    if ((rc = pm_cluster_louvain(size, m2, ea2, eb2, w2, &so, &ms->sub[k], diag)) != PM_OK) {
        goto done;
    }
    const pm_clusters_t *sub = ms->sub[k];
    rc = PM_ENOMEM;
    if (!(ms->sub_name[k] = pm_i_calloc(sub->n_clusters ? sub->n_clusters : 1, sizeof(char *)))) {
        goto cleanup;
    }
    for (size_t s = 0; s < sub->n_clusters; s++) {
        if (!(ms->sub_name[k][s] = pm_cluster_name(sub, s, names))) {
            goto cleanup;
        }
    }
    for (size_t j = 0; j < size && sub->n_clusters > 1; j++) {
        ms->subcluster[cl->members[first + j]] = sub->cluster[j];
    }
    rc = PM_OK;
cleanup:
    if (rc) {
        rc = pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
    }
done:
    free(loc);
    free(ea2);
    free(eb2);
    free(w2);
    free(share);
    pm_i_free(names);
    return rc;
}

/* Entry t of the table from the partition c (1-based clusters over n vertices) found at
 * resolution res with modularity q there. */
static pm_err_t tried_fill(pm_multiscale_t *ms, size_t t, const pm_clusters_t *c, double res,
                           int own, size_t m, const uint32_t *ea, const uint32_t *eb,
                           const double *w, pm_diag_t *diag) {
    pm_tried_resolution_t *tr = &ms->tried[t];
    memset(tr, 0, sizeof *tr);
    tr->resolution = res;
    tr->own = own;
    tr->modularity = c->modularity;
    tr->n_all = c->n_clusters;
    tr->cluster = pm_i_malloc(ms->n ? ms->n : 1, sizeof *tr->cluster);
    tr->grouped = pm_i_malloc(ms->n ? ms->n : 1, sizeof *tr->grouped);
    tr->first = pm_i_calloc(c->n_clusters + 1, sizeof *tr->first);
    uint32_t *zero = pm_i_malloc(ms->n ? ms->n : 1, sizeof *zero);
    if (!tr->cluster || !tr->grouped || !tr->first || !zero) {
        pm_i_free(zero);
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
    }
    for (size_t v = 0; v < ms->n; v++) {
        tr->cluster[v] = c->cluster[v];
        zero[v] = c->cluster[v] - 1; /* igraph wants memberships below the vertex count */
    }
    for (size_t k = 0; k < c->n_clusters; k++) {
        tr->first[k + 1] = tr->first[k] + c->size[k];
    }
    for (size_t v = 0; v < ms->n; v++) { /* first[c] as the cursor of cluster c, then shifted */
        tr->grouped[tr->first[zero[v]]++] = (uint32_t)v;
    }
    for (size_t k = c->n_clusters; k > 0; k--) {
        tr->first[k] = tr->first[k - 1];
    }
    tr->first[0] = 0;
    for (size_t k = 0; k < c->n_clusters; k++) {
        tr->n_clusters += c->size[k] > 1;
        tr->largest = c->size[k] > tr->largest ? c->size[k] : tr->largest;
    }
    tr->largest_share = ms->clustered ? (double)tr->largest / (double)ms->clustered : 0;
    pm_err_t rc = pm_modularity(ms->n, m, ea, eb, w, zero, 1.0, &tr->modularity_1, diag);
    pm_i_free(zero);
    return rc;
}

/* The resolutions tried (the map's own among them, from cl), by resolution, and the
 * suggestion. */
static pm_err_t try_resolutions(pm_multiscale_t *ms, size_t m, const uint32_t *ea,
                                const uint32_t *eb, const double *w, const pm_cluster_opts_t *o,
                                const pm_clusters_t *cl, pm_diag_t *diag) {
    static const double res[PM_N_TRIED_RESOLUTIONS] = PM_TRIED_RESOLUTIONS;
    int own_done = 0;
    pm_err_t rc = PM_OK;
    for (size_t i = 0; i <= PM_N_TRIED_RESOLUTIONS && rc == PM_OK; i++) {
        if (!own_done && (i == PM_N_TRIED_RESOLUTIONS || o->resolution <= res[i])) {
            rc = tried_fill(ms, ms->n_tried++, cl, o->resolution, 1, m, ea, eb, w, diag);
            own_done = 1;
        }
        if (rc || i == PM_N_TRIED_RESOLUTIONS || res[i] == o->resolution) {
            continue;
        }
        pm_cluster_opts_t to = *o;
        to.resolution = res[i];
        to.restarts = 1; /* the seed of restart 0 */
        pm_clusters_t *c = NULL;
        rc = pm_cluster_louvain(ms->n, m, ea, eb, w, &to, &c, diag);
        if (rc == PM_OK) {
            rc = tried_fill(ms, ms->n_tried++, c, res[i], 0, m, ea, eb, w, diag);
        }
        pm_clusters_free(c);
    }
    ms->suggested = -1;
    for (size_t t = 0; t < ms->n_tried && rc == PM_OK; t++) {
        const pm_tried_resolution_t *tr = &ms->tried[t];
        if (tr->largest_share <= PM_BIG_CLUSTER_SHARE &&
            (ms->suggested < 0 || tr->modularity_1 > ms->tried[ms->suggested].modularity_1)) {
            ms->suggested = (int)t;
        }
    }
    return rc;
}

pm_err_t pm_multiscale_run(size_t n, size_t m, const uint32_t *ea, const uint32_t *eb,
                           const double *w, const pm_cluster_opts_t *o, const pm_clusters_t *cl,
                           pm_multiscale_t **out, pm_diag_t *diag) {
    *out = NULL;
    pm_multiscale_t *ms = pm_i_calloc(1, sizeof *ms);
    if (!ms || !(ms->subcluster = pm_i_calloc(n ? n : 1, sizeof *ms->subcluster))) {
        free(ms);
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
    }
    ms->n = n;
    ms->suggested = -1;
    ms->sub_resolution = o->resolution > 1.0 ? o->resolution : 1.0;
    for (size_t v = 0; v < n; v++) {
        ms->clustered += cl->strength[v] > 0;
    }
    if (ms->clustered && cl->n_clusters) {
        ms->largest_share = (double)cl->size[0] / (double)ms->clustered;
    }
    while (ms->n_big < cl->n_clusters &&
           (double)cl->size[ms->n_big] > PM_BIG_CLUSTER_SHARE * (double)ms->clustered &&
           cl->size[ms->n_big] > 1) {
        ms->n_big++;
    }
    pm_err_t rc = PM_OK;
    if (ms->n_big) {
        ms->sub = pm_i_calloc(ms->n_big, sizeof *ms->sub);
        ms->sub_name = pm_i_calloc(ms->n_big, sizeof *ms->sub_name);
        if (!ms->sub || !ms->sub_name) {
            rc = pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
        }
        for (size_t k = 0; k < ms->n_big && rc == PM_OK; k++) {
            rc = split_cluster(ms, m, ea, eb, w, o, cl, k, diag);
        }
        if (rc == PM_OK) {
            rc = try_resolutions(ms, m, ea, eb, w, o, cl, diag);
        }
    }
    if (rc) {
        pm_multiscale_free(ms);
        return rc;
    }
    *out = ms;
    return PM_OK;
}
