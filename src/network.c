/* The network stage (igraph): Louvain clusters with restarts and stability, Fruchterman-Reingold
 * layout, modularity and the adjusted Rand index, all on plain arrays (see network.h).
 * The only file of the library that includes igraph; igraph errors become PM_EINTERNAL with
 * igraph's own text (or PM_ENOMEM), never an abort. */
#include "pairmap/network.h"

#include <gsl/gsl_errno.h>
#include <igraph.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "util.h"

/* ---- igraph set-up and errors --------------------------------------------------------------- */

/* The last non-empty reason igraph gave. IGRAPH_CHECK calls the handler again with an empty
 * reason on the way up, so only non-empty reasons overwrite it. Process-global like igraph's
 * own handler state (see network.h: not thread-safe). */
static char g_reason[512];

static void on_igraph_error(const char *reason, const char *file, int line, igraph_error_t err) {
    (void)file;
    (void)line;
    (void)err;
    if (reason && reason[0]) {
        snprintf(g_reason, sizeof g_reason, "%s", reason);
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

static pm_err_t from_igraph(igraph_error_t rc, const char *what, pm_diag_t *diag) {
    if (rc == IGRAPH_ENOMEM) {
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory (%s)", what);
    }
    return pm_diag_set(diag, PM_EINTERNAL, NULL, 0, "igraph failed in %s: %s%s%s", what,
                       igraph_strerror(rc), g_reason[0] ? ": " : "", g_reason);
}

/* ---- usable edges -----------------------------------------------------------------------------
 */

/* The edges that take part (see network.h), renumbered to the vertices that have one. */
typedef struct {
    size_t nv;              /* vertices with a usable edge */
    size_t me;              /* usable edges */
    uint32_t *newid;        /* [n] new id, or UINT32_MAX for isolated vertices */
    uint32_t *oldid;        /* [nv] */
    igraph_integer_t *ends; /* [2 me] new ids */
    double *w;              /* [me] */
} usable;

static void usable_free(usable *u) {
    free(u->newid);
    free(u->oldid);
    free(u->ends);
    free(u->w);
    memset(u, 0, sizeof *u);
}

static int edge_ok(const uint32_t *ea, const uint32_t *eb, const double *w, size_t k) {
    double x = w ? w[k] : 1.0;
    return ea[k] != eb[k] && isfinite(x) && x > 0;
}

/* renumber: 1 to drop the vertices without usable edges, 0 to keep all n (newid = id). */
static pm_err_t usable_init(usable *u, size_t n, size_t m, const uint32_t *ea, const uint32_t *eb,
                            const double *w, int renumber, pm_diag_t *diag) {
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
        usable_free(u);
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
    }
    for (size_t i = 0; i < n; i++) {
        u->newid[i] = UINT32_MAX;
    }
    size_t me = 0;
    for (size_t k = 0; k < m; k++) {
        if (edge_ok(ea, eb, w, k)) {
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
        usable_free(u);
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
    }
    for (size_t k = 0; k < m; k++) {
        if (edge_ok(ea, eb, w, k)) {
            u->ends[2 * u->me] = u->newid[ea[k]];
            u->ends[2 * u->me + 1] = u->newid[eb[k]];
            u->w[u->me] = w ? w[k] : 1.0;
            u->me++;
        }
    }
    return PM_OK;
}

/* Builds the igraph graph and weight vector of u (both to be destroyed by the caller). */
static igraph_error_t make_graph(const usable *u, igraph_t *g, igraph_vector_t *wv, double scale) {
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

/* ---- layout -----------------------------------------------------------------------------------
 */

static igraph_error_t fr_run(const usable *u, uint64_t seed, int iterations, double *out) {
    igraph_t g;
    igraph_vector_t wv;
    double sum = 0;
    for (size_t k = 0; k < u->me; k++) {
        sum += u->w[k];
    }
    double scale = sum > 0 ? (double)u->me / sum : 1.0; /* mean weight 1 */
    IGRAPH_CHECK(make_graph(u, &g, &wv, scale));
    IGRAPH_FINALLY(igraph_destroy, &g);
    IGRAPH_FINALLY(igraph_vector_destroy, &wv);
    igraph_matrix_t xy;
    IGRAPH_CHECK(igraph_matrix_init(&xy, 0, 0));
    IGRAPH_FINALLY(igraph_matrix_destroy, &xy);
    IGRAPH_CHECK(igraph_rng_seed(igraph_rng_default(), (igraph_uint_t)seed));
    IGRAPH_CHECK(igraph_layout_fruchterman_reingold(&g, &xy, false, (igraph_integer_t)iterations,
                                                    sqrt((double)u->nv),
                                                    /* the exact variant costs O(n^2) per
                                                     * iteration (1.4 s at n = 1000, API-NOTES);
                                                     * igraph's own switch is at 1000 */
                                                    u->nv > 300 ? IGRAPH_LAYOUT_GRID
                                                                : IGRAPH_LAYOUT_NOGRID,
                                                    &wv, NULL, NULL, NULL, NULL));
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

pm_err_t pm_layout_fr(size_t n, size_t m, const uint32_t *ea, const uint32_t *eb, const double *w,
                      uint64_t seed, int iterations, double *xy, pm_diag_t *diag) {
    usable u;
    pm_err_t rc = usable_init(&u, n, m, ea, eb, w, 1, diag);
    if (rc) {
        return rc;
    }
    if (iterations <= 0) {
        iterations = PM_LAYOUT_ITERATIONS;
    }
    double *pos = NULL;
    if (u.nv > 0) {
        pos = pm_i_malloc(2 * u.nv, sizeof *pos);
        if (!pos) {
            usable_free(&u);
            return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
        }
        g_reason[0] = '\0';
        igraph_error_t ig = fr_run(&u, seed, iterations, pos);
        if (ig != IGRAPH_SUCCESS) {
            free(pos);
            usable_free(&u);
            return from_igraph(ig, "the Fruchterman-Reingold layout", diag);
        }
        /* unit box, one factor for both axes, the shorter axis centred */
        double x0 = INFINITY, x1 = -INFINITY, y0 = INFINITY, y1 = -INFINITY;
        for (size_t i = 0; i < u.nv; i++) {
            x0 = fmin(x0, pos[2 * i]);
            x1 = fmax(x1, pos[2 * i]);
            y0 = fmin(y0, pos[2 * i + 1]);
            y1 = fmax(y1, pos[2 * i + 1]);
        }
        double rx = x1 - x0, ry = y1 - y0, r = fmax(rx, ry);
        if (!isfinite(r)) {
            free(pos);
            usable_free(&u);
            return pm_diag_set(diag, PM_EINTERNAL, NULL, 0,
                               "the layout produced a coordinate that is not finite");
        }
        for (size_t i = 0; i < u.nv; i++) {
            double x = r > 0 ? (pos[2 * i] - x0) / r + (1 - rx / r) / 2 : 0.5;
            double y = r > 0 ? (pos[2 * i + 1] - y0) / r + (1 - ry / r) / 2 : 0.5;
            xy[2 * (size_t)u.oldid[i]] = fmin(1.0, fmax(0.0, x));
            xy[2 * (size_t)u.oldid[i] + 1] = fmin(1.0, fmax(0.0, y));
        }
        free(pos);
    }
    size_t n_iso = n - u.nv, k = 0;
    const double pi = 3.14159265358979323846;
    for (size_t i = 0; i < n; i++) {
        if (u.newid[i] != UINT32_MAX) {
            continue;
        }
        double a = -pi / 2 + 2 * pi * (double)k / (double)n_iso;
        xy[2 * i] = 0.5 + PM_LAYOUT_RING_RADIUS * cos(a);
        xy[2 * i + 1] = 0.5 + PM_LAYOUT_RING_RADIUS * sin(a);
        k++;
    }
    usable_free(&u);
    return PM_OK;
}

/* ---- adjusted Rand index -----------------------------------------------------------------------
 */

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

static int cmp_u32(const void *p, const void *q) {
    uint32_t a = *(const uint32_t *)p, b = *(const uint32_t *)q;
    return a < b ? -1 : a > b;
}

static double choose2(double k) {
    return k * (k - 1) / 2;
}

/* Sum over the distinct values v of sorted[0..n) of C(count(v), 2). */
static double sum_choose2_sorted(const uint32_t *s, size_t n) {
    double t = 0;
    for (size_t i = 0; i < n;) {
        size_t j = i;
        while (j < n && s[j] == s[i]) {
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
    label_pair *p = pm_i_malloc(n, sizeof *p);
    uint32_t *s = pm_i_malloc(n, sizeof *s);
    if (!p || !s) {
        free(p);
        free(s);
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
    }
    for (size_t i = 0; i < n; i++) {
        p[i].x = x[i];
        p[i].y = y[i];
    }
    qsort(p, n, sizeof *p, cmp_pair);
    double nij = 0;
    for (size_t i = 0; i < n;) {
        size_t j = i;
        while (j < n && p[j].x == p[i].x && p[j].y == p[i].y) {
            j++;
        }
        nij += choose2((double)(j - i));
        i = j;
    }
    memcpy(s, x, n * sizeof *s);
    qsort(s, n, sizeof *s, cmp_u32);
    double A = sum_choose2_sorted(s, n);
    memcpy(s, y, n * sizeof *s);
    qsort(s, n, sizeof *s, cmp_u32);
    double B = sum_choose2_sorted(s, n);
    free(p);
    free(s);
    double expected = A * B / choose2((double)n), top = (A + B) / 2;
    if (top == expected) {
        *ari = 1.0; /* both partitions trivial in the same way (see network.h) */
    } else {
        *ari = (nij - expected) / (top - expected);
    }
    return PM_OK;
}

/* ---- modularity ---------------------------------------------------------------------------------
 */

static igraph_error_t modularity_run(const usable *u, const uint32_t *membership, double resolution,
                                     double *q) {
    igraph_t g;
    igraph_vector_t wv;
    IGRAPH_CHECK(make_graph(u, &g, &wv, 1.0));
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
    usable u;
    pm_err_t rc = usable_init(&u, n, m, ea, eb, w, 0, diag);
    if (rc) {
        return rc;
    }
    if (u.me == 0) {
        *q = NAN;
        usable_free(&u);
        return PM_OK;
    }
    g_reason[0] = '\0';
    igraph_error_t ig = modularity_run(&u, membership, resolution, q);
    usable_free(&u);
    return ig == IGRAPH_SUCCESS ? PM_OK : from_igraph(ig, "the modularity", diag);
}

/* ---- Louvain ------------------------------------------------------------------------------------
 */

void pm_cluster_opts_init(pm_cluster_opts_t *o) {
    memset(o, 0, sizeof *o);
    o->resolution = 1.0;
    o->seed = 1;
    o->restarts = 10;
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
    free(c);
}

/* Runs R Louvain passes; memb[r * nv + i] gets run r's community of vertex i (0-based ids),
 * q[r] the modularity igraph_modularity gives it (equal to the last level's value). */
static igraph_error_t louvain_runs(const usable *u, double resolution, uint64_t seed, unsigned R,
                                   uint32_t *memb, double *q) {
    igraph_t g;
    igraph_vector_t wv;
    IGRAPH_CHECK(make_graph(u, &g, &wv, 1.0));
    IGRAPH_FINALLY(igraph_destroy, &g);
    IGRAPH_FINALLY(igraph_vector_destroy, &wv);
    igraph_vector_int_t mv;
    IGRAPH_CHECK(igraph_vector_int_init(&mv, 0));
    IGRAPH_FINALLY(igraph_vector_int_destroy, &mv);
    for (unsigned r = 0; r < R; r++) {
        uint64_t s = seed + (uint64_t)r * PM_CLUSTER_SEED_STEP;
        IGRAPH_CHECK(igraph_rng_seed(igraph_rng_default(), (igraph_uint_t)s));
        IGRAPH_CHECK(igraph_community_multilevel(&g, &wv, resolution, &mv, NULL, NULL));
        if (igraph_vector_int_size(&mv) != (igraph_integer_t)u->nv) {
            IGRAPH_ERROR("membership of unexpected length", IGRAPH_EINTERNAL);
        }
        for (size_t i = 0; i < u->nv; i++) {
            igraph_integer_t c = VECTOR(mv)[(igraph_integer_t)i];
            if (c < 0 || c >= (igraph_integer_t)u->nv) {
                IGRAPH_ERROR("community id out of range", IGRAPH_EINTERNAL);
            }
            memb[(size_t)r * u->nv + i] = (uint32_t)c;
        }
        igraph_real_t Q;
        IGRAPH_CHECK(igraph_modularity(&g, &mv, &wv, resolution, IGRAPH_UNDIRECTED, &Q));
        q[r] = Q;
    }
    igraph_vector_int_destroy(&mv);
    igraph_vector_destroy(&wv);
    igraph_destroy(&g);
    IGRAPH_FINALLY_CLEAN(3);
    return IGRAPH_SUCCESS;
}

typedef struct {
    const pm_clusters_t *c;
    const pm_cluster_opts_t *o;
} order_ctx;

/* Member order within a cluster: inner strength descending, then share descending, then name
 * (bytes) or index. qsort has no context argument, so it comes through a file-local pointer
 * set right before each sort (single-threaded, see network.h). */
static const order_ctx *g_order;

static int name_cmp(uint32_t a, uint32_t b) {
    const char *const *names = g_order->o->names;
    if (names) {
        int r = pm_i_bytecmp(names[a], names[b]);
        if (r) {
            return r;
        }
    }
    return a < b ? -1 : a > b;
}

static int cmp_member(const void *p, const void *q) {
    uint32_t a = *(const uint32_t *)p, b = *(const uint32_t *)q;
    const pm_clusters_t *c = g_order->c;
    if (c->inner[a] != c->inner[b]) {
        return c->inner[a] > c->inner[b] ? -1 : 1;
    }
    const double *share = g_order->o->share;
    if (share && share[a] != share[b]) {
        return share[a] > share[b] ? -1 : 1;
    }
    return name_cmp(a, b);
}

typedef struct {
    uint32_t label; /* raw label */
    size_t size;
    uint32_t lead; /* leading member */
    size_t start;  /* position of its members in the grouped array */
} raw_cluster;

static int cmp_raw_cluster(const void *p, const void *q) {
    const raw_cluster *a = p, *b = q;
    if (a->size != b->size) {
        return a->size > b->size ? -1 : 1;
    }
    return name_cmp(a->lead, b->lead);
}

typedef struct {
    uint32_t label, v;
} labelled;

static int cmp_labelled(const void *p, const void *q) {
    const labelled *a = p, *b = q;
    if (a->label != b->label) {
        return a->label < b->label ? -1 : 1;
    }
    return a->v < b->v ? -1 : a->v > b->v;
}

/* Groups the vertices by raw label (raw[i] for vertex i), orders members and clusters and
 * fills c->cluster, size, members, first. */
static pm_err_t finish_clusters(pm_clusters_t *c, const pm_cluster_opts_t *o, const uint32_t *raw,
                                pm_diag_t *diag) {
    size_t n = c->n;
    labelled *lv = pm_i_malloc(n ? n : 1, sizeof *lv);
    raw_cluster *rc = pm_i_malloc(n ? n : 1, sizeof *rc);
    uint32_t *grouped = pm_i_malloc(n ? n : 1, sizeof *grouped);
    if (!lv || !rc || !grouped) {
        free(lv);
        free(rc);
        free(grouped);
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
    }
    for (size_t i = 0; i < n; i++) {
        lv[i].label = raw[i];
        lv[i].v = (uint32_t)i;
    }
    qsort(lv, n, sizeof *lv, cmp_labelled);
    order_ctx ctx = {c, o};
    g_order = &ctx;
    size_t k = 0;
    for (size_t i = 0; i < n;) {
        size_t j = i;
        while (j < n && lv[j].label == lv[i].label) {
            grouped[j] = lv[j].v;
            j++;
        }
        qsort(grouped + i, j - i, sizeof *grouped, cmp_member);
        rc[k].label = lv[i].label;
        rc[k].size = j - i;
        rc[k].lead = grouped[i];
        rc[k].start = i;
        k++;
        i = j;
    }
    qsort(rc, k, sizeof *rc, cmp_raw_cluster);
    g_order = NULL;
    c->n_clusters = k;
    c->size = pm_i_malloc(k ? k : 1, sizeof *c->size);
    c->first = pm_i_malloc(k + 1, sizeof *c->first);
    if (!c->size || !c->first) {
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

pm_err_t pm_cluster_louvain(size_t n, size_t m, const uint32_t *ea, const uint32_t *eb,
                            const double *w, const pm_cluster_opts_t *o, pm_clusters_t **out,
                            pm_diag_t *diag) {
    *out = NULL;
    if (!(o->resolution >= 0) || !isfinite(o->resolution)) {
        return pm_diag_set(diag, PM_EUSAGE, NULL, 0,
                           "the resolution must be a finite number >= 0, got %g", o->resolution);
    }
    if (o->restarts < 1) {
        return pm_diag_set(diag, PM_EUSAGE, NULL, 0, "at least one Louvain run is needed");
    }
    usable u;
    pm_err_t rc = usable_init(&u, n, m, ea, eb, w, 1, diag);
    if (rc) {
        return rc;
    }
    unsigned R = o->restarts;
    pm_clusters_t *c = pm_i_calloc(1, sizeof *c);
    uint32_t *memb = NULL, *raw = NULL;
    if (!c) {
        usable_free(&u);
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
    }
    c->n = n;
    c->restarts = R;
    c->n_used_edges = u.me;
    c->cluster = pm_i_malloc(n ? n : 1, sizeof *c->cluster);
    c->members = pm_i_malloc(n ? n : 1, sizeof *c->members);
    c->strength = pm_i_calloc(n ? n : 1, sizeof *c->strength);
    c->inner = pm_i_calloc(n ? n : 1, sizeof *c->inner);
    c->restart_q = pm_i_malloc(R, sizeof *c->restart_q);
    memb = pm_i_malloc((size_t)R * (u.nv ? u.nv : 1), sizeof *memb);
    raw = pm_i_malloc(n ? n : 1, sizeof *raw);
    if (!c->cluster || !c->members || !c->strength || !c->inner || !c->restart_q || !memb || !raw) {
        rc = pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
        goto cleanup;
    }
    for (size_t k = 0; k < u.me; k++) {
        c->strength[u.oldid[u.ends[2 * k]]] += u.w[k];
        c->strength[u.oldid[u.ends[2 * k + 1]]] += u.w[k];
    }
    c->modularity = NAN;
    c->stability = NAN;
    if (u.me > 0) {
        g_reason[0] = '\0';
        igraph_error_t ig = louvain_runs(&u, o->resolution, o->seed, R, memb, c->restart_q);
        if (ig != IGRAPH_SUCCESS) {
            rc = from_igraph(ig, "Louvain clustering", diag);
            goto cleanup;
        }
        unsigned best = 0;
        for (unsigned r = 1; r < R; r++) {
            if (c->restart_q[r] > c->restart_q[best]) {
                best = r;
            }
        }
        c->best_restart = best;
        c->modularity = c->restart_q[best];
        if (R > 1) {
            /* stability: mean ARI over all pairs of runs, over the vertices with edges
             * (isolated vertices are singletons in every run and would only inflate it) */
            double sum = 0;
            size_t pairs = 0;
            for (unsigned r = 0; r < R; r++) {
                for (unsigned t = r + 1; t < R; t++) {
                    double a;
                    rc = pm_adjusted_rand(u.nv, memb + (size_t)r * u.nv, memb + (size_t)t * u.nv,
                                          &a, diag);
                    if (rc) {
                        goto cleanup;
                    }
                    sum += a;
                    pairs++;
                }
            }
            c->stability = sum / (double)pairs;
        }
    } else {
        for (unsigned r = 0; r < R; r++) {
            c->restart_q[r] = NAN;
        }
    }
    /* raw labels: the best run's communities for vertices with edges; n + i for isolated
     * vertex i would overflow uint32 for huge n, so isolated vertices get nv + their rank */
    {
        size_t iso = 0;
        for (size_t i = 0; i < n; i++) {
            if (u.newid[i] != UINT32_MAX) {
                raw[i] = memb[(size_t)c->best_restart * u.nv + u.newid[i]];
            } else {
                raw[i] = (uint32_t)(u.nv + iso++);
            }
        }
    }
    for (size_t k = 0; k < u.me; k++) {
        uint32_t a = u.oldid[u.ends[2 * k]], b = u.oldid[u.ends[2 * k + 1]];
        if (raw[a] == raw[b]) {
            c->inner[a] += u.w[k];
            c->inner[b] += u.w[k];
        }
    }
    rc = finish_clusters(c, o, raw, diag);
cleanup:
    free(memb);
    free(raw);
    usable_free(&u);
    if (rc) {
        pm_clusters_free(c);
        return rc;
    }
    *out = c;
    return PM_OK;
}
