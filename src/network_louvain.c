/* Louvain clustering's pieces (see network.h): restarts on one graph, each from its own seed,
 * and the order of clusters and of their members. */
#include "pairmap/network.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define PM_NETWORK_STAGE
#include "network_internal.h"
#include "util.h"

void pm_cluster_opts_init(pm_cluster_opts_t *o) {
    memset(o, 0, sizeof *o);
    o->resolution = 1.0;
    o->seed = 1;
    o->restarts = 10;
    o->workers = 1;
}

unsigned pm_cluster_max_restarts(size_t vertices) {
    uint64_t v = vertices ? (uint64_t)vertices : 1;
    unsigned r = PM_CLUSTER_MAX_RESTARTS;
    if ((uint64_t)r * v * 4 > PM_CLUSTER_MEMB_BYTES) {
        r = (unsigned)(PM_CLUSTER_MEMB_BYTES / (v * 4));
    }
    while (r > 1 && (uint64_t)r * (r - 1) / 2 * v > PM_CLUSTER_ARI_WORK) {
        r--;
    }
    return r ? r : 1;
}

void pm_clusters_free(pm_clusters_t *c) {
    if (!c) {
        return;
    }
    free(c->cluster);
    free(c->size);
    free(c->members);
    free(c->first);
    free(c->strength);
    free(c->inner);
    free(c->restart_q);
    free(c->runs);
    free(c->cluster_stability);
    free(c);
}

/* One restart r on the graph g: memb[r * nv + i] gets its community of vertex i (0-based
 * ids), q[r] the modularity igraph_modularity gives it (equal to the last level's value). */
static igraph_error_t louvain_one(const pm_i_network_hooks_t *h, const pm_i_usable *u, igraph_t *g,
                                  igraph_vector_t *wv, igraph_vector_int_t *mv, double resolution,
                                  uint64_t seed, unsigned r, uint32_t *memb, double *q) {
    uint64_t s = seed + (uint64_t)r * PM_CLUSTER_SEED_STEP;
    double res = (long)r == h->faults.bad_restart ? -1.0 : resolution; /* test hook */
    IGRAPH_CHECK(igraph_rng_seed(igraph_rng_default(), (igraph_uint_t)s));
    IGRAPH_CHECK(igraph_community_multilevel(g, wv, res, mv, NULL, NULL));
    if (igraph_vector_int_size(mv) != (igraph_integer_t)u->nv) {
        IGRAPH_ERROR("membership of unexpected length", IGRAPH_EINTERNAL);
    }
    for (size_t i = 0; i < u->nv; i++) {
        igraph_integer_t c = VECTOR(*mv)[(igraph_integer_t)i];
        if (c < 0 || c >= (igraph_integer_t)u->nv) {
            IGRAPH_ERROR("community id out of range", IGRAPH_EINTERNAL);
        }
        memb[(size_t)r * u->nv + i] = (uint32_t)c;
    }
    igraph_real_t Q;
    IGRAPH_CHECK(igraph_modularity(g, mv, wv, resolution, IGRAPH_UNDIRECTED, &Q));
    q[r] = Q;
    return IGRAPH_SUCCESS;
}

/* Runs Louvain restarts r0 .. r1-1 (see louvain_one). Run r depends only on the graph and its
 * own seed, so any split of 0 .. R-1 over processes gives the same numbers as one call over
 * all of them. With hf (the layout's child): each run is claimed first and skipped when the
 * parent has it already; done[r - r0] tells which ran here (may be NULL without hf). With
 * down set (the parent helping): from r1-1 downwards, each marked helped once it ran well,
 * stopping at the first one the child has claimed, or at an error (which the caller then
 * ignores: the child meets the same error on that run and reports it, as one process would). */
igraph_error_t pm_i_louvain_runs(pm_i_network_hooks_t *h, const pm_i_usable *u, double resolution,
                                 uint64_t seed, unsigned r0, unsigned r1, uint32_t *memb, double *q,
                                 const pm_i_help_flags *hf, int down, unsigned char *done) {
    igraph_t g;
    igraph_vector_t wv;
    IGRAPH_CHECK(pm_i_make_graph(u, &g, &wv, 1.0));
    IGRAPH_FINALLY(igraph_destroy, &g);
    IGRAPH_FINALLY(igraph_vector_destroy, &wv);
    igraph_vector_int_t mv;
    IGRAPH_CHECK(igraph_vector_int_init(&mv, 0));
    IGRAPH_FINALLY(igraph_vector_int_destroy, &mv);
    if (down) {
        for (unsigned r = r1; r-- > r0;) {
            if (atomic_load(&hf->claimed[r])) {
                break;
            }
            /* an error ends the help (the handler has freed the graph: return at once); the
             * child meets the same error on this run and reports it */
            IGRAPH_CHECK(louvain_one(h, u, &g, &wv, &mv, resolution, seed, r, memb, q));
            atomic_store(&hf->helped[r], 1);
            h->stats.helped++;
        }
    } else {
        for (unsigned r = r0; r < r1; r++) {
            if (hf) {
                atomic_store(&hf->claimed[r], 1);
                if (atomic_load(&hf->helped[r])) {
                    done[r - r0] = 0;
                    continue;
                }
            }
            IGRAPH_CHECK(louvain_one(h, u, &g, &wv, &mv, resolution, seed, r, memb, q));
            if (done) {
                done[r - r0] = 1;
            }
        }
    }
    igraph_vector_int_destroy(&mv);
    igraph_vector_destroy(&wv);
    igraph_destroy(&g);
    IGRAPH_FINALLY_CLEAN(3);
    return IGRAPH_SUCCESS;
}

typedef struct {
    uint32_t x, y;
} label_pair;

static int cmp_pair(const void *p, const void *q) {
    const label_pair *a = p, *b = q;
    if (a->x != b->x) {
        return a->x < b->x ? -1 : 1;
    }
    return a->y < b->y ? -1 : a->y > b->y;
}

/* What the member and cluster orders look at (passed to the comparators, pm_i_sort_ctx). */
typedef struct {
    const pm_clusters_t *c;
    const pm_cluster_opts_t *o;
} order_ctx;

static int name_cmp(const order_ctx *oc, uint32_t a, uint32_t b) {
    const char *const *names = oc->o->names;
    if (names) {
        int r = pm_i_bytecmp(names[a], names[b]);
        if (r) {
            return r;
        }
    }
    return a < b ? -1 : a > b;
}

/* Member order within a cluster: inner strength descending, then share descending, then name
 * (bytes) or index. */
static int cmp_member(const void *p, const void *q, const void *ctx) {
    const order_ctx *oc = ctx;
    uint32_t a = *(const uint32_t *)p, b = *(const uint32_t *)q;
    const pm_clusters_t *c = oc->c;
    if (c->inner[a] != c->inner[b]) {
        return c->inner[a] > c->inner[b] ? -1 : 1;
    }
    const double *share = oc->o->share;
    if (share && share[a] != share[b]) {
        return share[a] > share[b] ? -1 : 1;
    }
    return name_cmp(oc, a, b);
}

typedef struct {
    uint32_t label; /* raw label */
    size_t size;
    uint32_t lead; /* leading member */
    size_t start;  /* position of its members in the grouped array */
} raw_cluster;

/* Cluster order: size descending, then the leading member's name (or index). */
static int cmp_raw_cluster(const void *p, const void *q, const void *ctx) {
    const raw_cluster *a = p, *b = q;
    if (a->size != b->size) {
        return a->size > b->size ? -1 : 1;
    }
    return name_cmp(ctx, a->lead, b->lead);
}

/* The vertices grouped by raw label, each group's members in order: grouped[], and one
 * raw_cluster per group in rc[0..*k), in cluster order. */
static int group_members(size_t n, const uint32_t *raw, const order_ctx *oc, label_pair *lv,
                         uint32_t *grouped, raw_cluster *rc, size_t *k) {
    for (size_t i = 0; i < n; i++) {
        lv[i].x = raw[i];
        lv[i].y = (uint32_t)i;
    }
    qsort(lv, n, sizeof *lv, cmp_pair);
    *k = 0;
    for (size_t i = 0; i < n;) {
        size_t j = i;
        while (j < n && lv[j].x == lv[i].x) {
            grouped[j] = lv[j].y;
            j++;
        }
        if (pm_i_sort_ctx(grouped + i, j - i, sizeof *grouped, cmp_member, oc)) {
            return -1;
        }
        rc[*k].label = lv[i].x;
        rc[*k].size = j - i;
        rc[*k].lead = grouped[i];
        rc[*k].start = i;
        (*k)++;
        i = j;
    }
    return pm_i_sort_ctx(rc, *k, sizeof *rc, cmp_raw_cluster, oc);
}

pm_err_t pm_i_finish_clusters(pm_clusters_t *c, const pm_cluster_opts_t *o, const uint32_t *raw,
                              pm_diag_t *diag) {
    size_t n = c->n, k = 0;
    label_pair *lv = pm_i_malloc(n ? n : 1, sizeof *lv); /* x: label, y: vertex */
    raw_cluster *rc = pm_i_malloc(n ? n : 1, sizeof *rc);
    uint32_t *grouped = pm_i_malloc(n ? n : 1, sizeof *grouped);
    order_ctx oc = {c, o};
    int bad = !lv || !rc || !grouped || group_members(n, raw, &oc, lv, grouped, rc, &k) != 0;
    if (!bad) {
        c->n_clusters = k;
        c->size = pm_i_malloc(k ? k : 1, sizeof *c->size);
        c->first = pm_i_malloc(k + 1, sizeof *c->first);
        bad = !c->size || !c->first;
    }
    if (bad) {
        free(lv);
        free(rc);
        free(grouped);
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
    }
    size_t pos = 0;
    for (size_t h = 0; h < k; h++) {
        c->size[h] = rc[h].size;
        c->first[h] = pos;
        if (rc[h].size == 1) {
            c->n_singletons++;
        }
        for (size_t t = 0; t < rc[h].size; t++) {
            uint32_t v = grouped[rc[h].start + t];
            c->members[pos++] = v;
            c->cluster[v] = (uint32_t)(h + 1);
        }
    }
    c->first[k] = pos;
    free(lv);
    free(rc);
    free(grouped);
    return PM_OK;
}
