/* The network stage (igraph): Louvain clusters with restarts and stability, Fruchterman-Reingold
 * layout, modularity and the adjusted Rand index, all on plain arrays (see network.h); the
 * restarts and the layout can run in forked worker processes (igraph is not thread-safe here).
 * The only file of the library that includes igraph; igraph errors become PM_EINTERNAL with
 * igraph's own text (or PM_ENOMEM), never an abort. */
#include "pairmap/network.h"

#include <errno.h>
#include <gsl/gsl_errno.h>
#include <igraph.h>
#include <math.h>
#include <pthread.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <stdatomic.h>
#include <sys/mman.h>
#ifndef MAP_ANONYMOUS
#define MAP_ANONYMOUS 0x20 /* Linux's value (sys/mman.h names it only beyond POSIX) */
#endif
#include <sys/types.h>
#include <sys/wait.h>
#include <unistd.h>
#ifdef __linux__
#include <sys/prctl.h>
#endif

#include "network_internal.h"
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

/* The faults a test asks for (network_internal.h); all off outside tests. */
static pm_i_network_faults_t g_faults = {0, 0, 0, 0, 0, 0, -1, 0, 0};
static pm_i_network_stats_t g_stats;

void pm_i_network_set_faults(const pm_i_network_faults_t *f) {
    if (f) {
        g_faults = *f;
    } else {
        memset(&g_faults, 0, sizeof g_faults);
        g_faults.bad_restart = -1;
    }
}

void pm_i_network_get_stats(pm_i_network_stats_t *s) {
    *s = g_stats;
}

/* igraph's Fruchterman-Reingold on the usable edges; out gets 2 u->nv raw coordinates. */
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
    igraph_integer_t niter = g_faults.bad_layout ? -1 : (igraph_integer_t)iterations; /* test */
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

/* The raw layout pos (2 u->nv, from fr_run; NULL when u->nv is 0) scaled into the unit box,
 * the isolated vertices on the ring (see network.h): fills xy[2n]. */
static pm_err_t layout_finish(const usable *u, size_t n, const double *pos, double *xy,
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
        if (edge_ok(ea, eb, w, k) && ea[k] < n && eb[k] < n) {
            laid += (size_t)(!has[ea[k]] + !has[eb[k]]);
            has[ea[k]] = has[eb[k]] = 1;
        }
    }
    free(has);
    return pm_layout_default_iterations(laid);
}

pm_err_t pm_layout_fr(size_t n, size_t m, const uint32_t *ea, const uint32_t *eb, const double *w,
                      uint64_t seed, int iterations, double *xy, pm_diag_t *diag) {
    usable u;
    pm_err_t rc = usable_init(&u, n, m, ea, eb, w, 1, diag);
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
    }
    rc = layout_finish(&u, n, pos, xy, diag);
    free(pos);
    usable_free(&u);
    return rc;
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
    o->workers = 1;
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

/* Flags of the restarts in memory shared with the children (see network()): claimed[r] is
 * set by the layout's child before it runs restart r, helped[r] by the parent once it has
 * run r itself; either skips what the other has. */
typedef struct {
    atomic_uchar *claimed, *helped; /* [R] */
    atomic_uchar *over;             /* set once the parent has stopped helping (tests wait) */
} help_flags;

/* One restart r on the graph g: memb[r * nv + i] gets its community of vertex i (0-based
 * ids), q[r] the modularity igraph_modularity gives it (equal to the last level's value). */
static igraph_error_t louvain_one(const usable *u, igraph_t *g, igraph_vector_t *wv,
                                  igraph_vector_int_t *mv, double resolution, uint64_t seed,
                                  unsigned r, uint32_t *memb, double *q) {
    uint64_t s = seed + (uint64_t)r * PM_CLUSTER_SEED_STEP;
    double res = (long)r == g_faults.bad_restart ? -1.0 : resolution; /* test hook */
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
static igraph_error_t louvain_runs(const usable *u, double resolution, uint64_t seed, unsigned r0,
                                   unsigned r1, uint32_t *memb, double *q, const help_flags *hf,
                                   int down, unsigned char *done) {
    igraph_t g;
    igraph_vector_t wv;
    IGRAPH_CHECK(make_graph(u, &g, &wv, 1.0));
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
            IGRAPH_CHECK(louvain_one(u, &g, &wv, &mv, resolution, seed, r, memb, q));
            atomic_store(&hf->helped[r], 1);
            g_stats.helped++;
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
            IGRAPH_CHECK(louvain_one(u, &g, &wv, &mv, resolution, seed, r, memb, q));
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

/* Groups the vertices by raw label (raw[i] for vertex i), orders members and clusters and
 * fills c->cluster, size, members, first. */
static pm_err_t finish_clusters(pm_clusters_t *c, const pm_cluster_opts_t *o, const uint32_t *raw,
                                pm_diag_t *diag) {
    size_t n = c->n;
    label_pair *lv = pm_i_malloc(n ? n : 1, sizeof *lv); /* x: label, y: vertex */
    raw_cluster *rc = pm_i_malloc(n ? n : 1, sizeof *rc);
    uint32_t *grouped = pm_i_malloc(n ? n : 1, sizeof *grouped);
    if (!lv || !rc || !grouped) {
        free(lv);
        free(rc);
        free(grouped);
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
    }
    for (size_t i = 0; i < n; i++) {
        lv[i].x = raw[i];
        lv[i].y = (uint32_t)i;
    }
    qsort(lv, n, sizeof *lv, cmp_pair);
    order_ctx ctx = {c, o};
    g_order = &ctx;
    size_t k = 0;
    for (size_t i = 0; i < n;) {
        size_t j = i;
        while (j < n && lv[j].x == lv[i].x) {
            grouped[j] = lv[j].y;
            j++;
        }
        qsort(grouped + i, j - i, sizeof *grouped, cmp_member);
        rc[k].label = lv[i].x;
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

/* ---- the stage's work, in worker processes ------------------------------------------------
 *
 * igraph 0.10 as built here is not thread-safe (global generator, error handler and finally
 * stack), so the stage is shared among processes instead of threads. The units of work are
 * the R Louvain restarts and the layout, each a function of the graph and its own seed only.
 * They are cut into shares: the parent runs the first one and a forked child each of the
 * others; a child writes its result (raw bytes through a pipe: same machine, same layout) or
 * its error (code and message) and leaves with _exit. The parent reads every child in order,
 * reaps it, and assembles exactly what one process would have computed. A share whose child
 * could not be started, died, wrote a short answer or ran out of memory is computed by the
 * parent itself, so the results never depend on the number of processes. The children share
 * the parent's memory copy-on-write and only write their own small result arrays. */

/* All the work of one call: restarts 0 .. R-1 into memb and q, the layout into pos. */
typedef struct {
    const usable *u;
    double resolution;
    uint64_t seed;
    unsigned R;     /* 0: no Louvain run (no usable edge) */
    uint32_t *memb; /* [R nv] */
    double *q;      /* [R] */
    int layout;     /* 1: lay out (u->nv > 0) */
    uint64_t layout_seed;
    int iterations;
    double *pos;          /* [2 nv] raw coordinates */
    const help_flags *hf; /* shared flags when the parent may help the layout's child, or NULL */
} stage;

enum { SHARE_PENDING, SHARE_DONE };

/* A share: restarts r0 .. r1-1, then the layout when layout is set. */
typedef struct {
    unsigned r0, r1;
    int layout;
    pid_t pid; /* child computing it, 0: none */
    int fd;    /* read end of the child's pipe, -1: none */
    int state;
    pm_err_t rc;   /* once done */
    int in_layout; /* the error came from the layout */
    pm_diag_t diag;
} share;

/* Computes share sh here. done (may be NULL) gets, per restart of the share, whether it ran
 * here: all of them, except in the layout's child while the parent may help (st->hf, in_child
 * set), which lays out first and then runs the restarts the parent does not have. Either
 * way a restart's error is the share's error before the layout's, as in one process. */
static void run_share(const stage *st, share *sh, int in_child, unsigned char *done) {
    pm_diag_clear(&sh->diag);
    sh->rc = PM_OK;
    sh->in_layout = 0;
    sh->state = SHARE_DONE;
    int helped = in_child && st->hf && sh->layout && sh->r1 > sh->r0;
    pm_err_t lrc = PM_OK;
    pm_diag_t ldiag;
    pm_diag_clear(&ldiag);
    if (helped && st->pos) { /* the layout first: the parent takes restarts from the end */
        g_reason[0] = '\0';
        igraph_error_t ig = fr_run(st->u, st->layout_seed, st->iterations, st->pos);
        if (ig != IGRAPH_SUCCESS) {
            lrc = from_igraph(ig, "the Fruchterman-Reingold layout", &ldiag);
        }
        /* test hook: the child waits until the parent has stopped helping (at most a
         * minute), so that the parent has run every restart it could */
        for (int i = 0; g_faults.child_slow && i < 60000 && !atomic_load(st->hf->over); i++) {
            struct timespec t = {0, 1000000};
            nanosleep(&t, NULL);
        }
    }
    if (sh->r1 > sh->r0) {
        g_reason[0] = '\0';
        igraph_error_t ig = louvain_runs(st->u, st->resolution, st->seed, sh->r0, sh->r1, st->memb,
                                         st->q, helped ? st->hf : NULL, 0, done);
        if (ig != IGRAPH_SUCCESS) {
            sh->rc = from_igraph(ig, "Louvain clustering", &sh->diag);
            return;
        }
    }
    if (helped) {
        if (lrc) {
            sh->rc = lrc;
            sh->diag = ldiag;
            sh->in_layout = 1;
        }
        return;
    }
    if (sh->layout && st->pos) {
        g_reason[0] = '\0';
        igraph_error_t ig = fr_run(st->u, st->layout_seed, st->iterations, st->pos);
        if (ig != IGRAPH_SUCCESS) {
            sh->rc = from_igraph(ig, "the Fruchterman-Reingold layout", &sh->diag);
            sh->in_layout = 1;
        }
    }
}

/* What a child writes first; then head.bytes bytes: the result when code is PM_OK (one byte
 * per restart of the share, 1 for those it ran; their memberships, then their modularities,
 * in order; then the layout), else the message. */
#define WIRE_MAGIC UINT32_C(0x706d6e77)
typedef struct {
    uint32_t magic;
    int32_t code;
    uint32_t r0, r1;
    uint32_t layout, in_layout;
    uint64_t bytes;
} wire_head;

static size_t result_bytes(const stage *st, const share *sh, size_t ran) {
    size_t runs = sh->r1 - sh->r0, nv = st->u->nv;
    return runs + ran * nv * sizeof *st->memb + ran * sizeof *st->q +
           (sh->layout ? 2 * nv * sizeof *st->pos : 0);
}

static int write_all(int fd, const void *p, size_t len) {
    const char *c = p;
    while (len > 0) {
        ssize_t w = write(fd, c, len);
        if (w < 0 && errno == EINTR) {
            continue;
        }
        if (w <= 0) {
            return -1;
        }
        c += w;
        len -= (size_t)w;
    }
    return 0;
}

/* Bytes read into p: len, or less at end of file or on an error. */
static size_t read_all(int fd, void *p, size_t len) {
    char *c = p;
    size_t got = 0;
    while (got < len) {
        ssize_t r = read(fd, c + got, len - got);
        if (r < 0 && errno == EINTR) {
            continue;
        }
        if (r <= 0) {
            break;
        }
        got += (size_t)r;
    }
    return got;
}

/* The child of spawn number spawn_no: computes its share, writes it to fd, _exits. Never
 * returns. Only _exit: no atexit handler, no flush of stdio buffers inherited from the
 * parent, no removal of the parent's temporary files. */
static void child_main(const stage *st, share *sh, int fd, int spawn_no, pid_t parent,
                       const sigset_t *mask, const share *all, size_t nall) {
    /* the parent's handlers (outfile.h: they remove its temporary files) are not for us;
     * a terminal's SIGINT or a SIGTERM simply ends the child */
    struct sigaction sa;
    memset(&sa, 0, sizeof sa);
    sa.sa_handler = SIG_DFL;
    sigemptyset(&sa.sa_mask);
    sigaction(SIGINT, &sa, NULL);
    sigaction(SIGTERM, &sa, NULL);
#ifdef __linux__
    /* killed when the parent dies (best effort: if prctl is refused, the pipe still ends the
     * child, which gets EPIPE or SIGPIPE on writing once the parent is gone) */
    (void)prctl(PR_SET_PDEATHSIG, SIGKILL);
#endif
    if (getppid() != parent) {
        _exit(1); /* the parent died before the line above took effect */
    }
    pthread_sigmask(SIG_SETMASK, mask, NULL);
    sigset_t stop; /* the parent blocks these in every thread (cmd_map.c): not the child */
    sigemptyset(&stop);
    sigaddset(&stop, SIGINT);
    sigaddset(&stop, SIGTERM);
    sigaddset(&stop, SIGHUP);
    sigaddset(&stop, SIGQUIT);
    pthread_sigmask(SIG_UNBLOCK, &stop, NULL);
    for (size_t i = 0; i < nall; i++) {
        if (&all[i] != sh && all[i].fd >= 0) {
            close(all[i].fd); /* earlier children's read ends */
        }
    }
    if (g_faults.child_dies == spawn_no) {
        _exit(1);
    }
    if (g_faults.child_killed == spawn_no) {
        raise(SIGKILL);
    }
    size_t runs = sh->r1 - sh->r0, nv = st->u->nv;
    unsigned char *done = calloc(runs ? runs : 1, 1);
    if (g_faults.child_nomem == spawn_no || !done) {
        sh->rc = pm_diag_set(&sh->diag, PM_ENOMEM, NULL, 0, "out of memory");
        sh->in_layout = 0;
    } else {
        run_share(st, sh, 1, done);
    }
    wire_head h;
    memset(&h, 0, sizeof h);
    h.magic = WIRE_MAGIC;
    h.code = (int32_t)sh->rc;
    h.r0 = sh->r0;
    h.r1 = sh->r1;
    h.layout = (uint32_t)sh->layout;
    h.in_layout = (uint32_t)sh->in_layout;
    int bad = 0;
    if (sh->rc == PM_OK) {
        size_t ran = 0;
        for (size_t i = 0; i < runs; i++) {
            ran += done[i];
        }
        h.bytes = result_bytes(st, sh, ran);
        if (g_faults.child_short == spawn_no) {
            /* the head, the flags and half of the next array, then a clean exit */
            const void *first =
                ran ? (const void *)(st->memb + (size_t)sh->r0 * nv) : (const void *)st->pos;
            size_t len = ran ? nv * sizeof *st->memb : 2 * nv * sizeof *st->pos;
            bad = write_all(fd, &h, sizeof h) || write_all(fd, done, runs) ||
                  write_all(fd, first, len / 2);
            free(done);
            _exit(bad);
        }
        bad = write_all(fd, &h, sizeof h) || write_all(fd, done, runs);
        for (size_t i = 0; i < runs && !bad; i++) {
            if (done[i]) {
                bad = write_all(fd, st->memb + (size_t)(sh->r0 + i) * nv, nv * sizeof *st->memb);
            }
        }
        for (size_t i = 0; i < runs && !bad; i++) {
            if (done[i]) {
                bad = write_all(fd, st->q + sh->r0 + i, sizeof *st->q);
            }
        }
        bad = bad || (sh->layout && write_all(fd, st->pos, 2 * nv * sizeof *st->pos));
    } else {
        h.bytes = strlen(sh->diag.msg);
        bad = write_all(fd, &h, sizeof h) || write_all(fd, sh->diag.msg, (size_t)h.bytes);
    }
    free(done);
    _exit(bad);
}

/* Forks the child of share sh (spawn number spawn_no). 0 on success; -1 when pipe or fork
 * failed (nothing is left open then). */
static int spawn(const stage *st, share *sh, int spawn_no, const share *all, size_t nall) {
    int fds[2];
    if (g_faults.pipe_fail_from > 0 && spawn_no >= g_faults.pipe_fail_from) {
        return -1;
    }
    if (pipe(fds) != 0) {
        return -1;
    }
    /* no signal handler may run in the child before it has reset them */
    sigset_t block, old;
    sigemptyset(&block);
    sigaddset(&block, SIGINT);
    sigaddset(&block, SIGTERM);
    pthread_sigmask(SIG_BLOCK, &block, &old);
    pid_t parent = getpid();
    pid_t pid = -1;
    if (!(g_faults.fork_fail_from > 0 && spawn_no >= g_faults.fork_fail_from)) {
        pid = fork();
    }
    if (pid == 0) {
        close(fds[0]);
        child_main(st, sh, fds[1], spawn_no, parent, &old, all, nall);
    }
    pthread_sigmask(SIG_SETMASK, &old, NULL);
    close(fds[1]); /* so that later children do not hold it: EOF comes when this child ends */
    if (pid < 0) {
        close(fds[0]);
        return -1;
    }
    sh->pid = pid;
    sh->fd = fds[0];
    return 0;
}

static void reap(share *sh) {
    if (sh->fd >= 0) {
        close(sh->fd);
        sh->fd = -1;
    }
    if (sh->pid > 0) {
        int status;
        while (waitpid(sh->pid, &status, 0) < 0 && errno == EINTR) {
        }
        sh->pid = 0; /* ECHILD (SIGCHLD ignored: reaped already) is fine too */
    }
}

/* Reads the answer of sh's child into the stage's arrays and reaps the child. 1 when a
 * complete answer for this very share came (sh->rc and sh->diag set), 0 otherwise. */
static int collect(const stage *st, share *sh) {
    wire_head h;
    int ok = 0;
    if (read_all(sh->fd, &h, sizeof h) == sizeof h && h.magic == WIRE_MAGIC && h.r0 == sh->r0 &&
        h.r1 == sh->r1 && h.layout == (uint32_t)sh->layout) {
        pm_diag_clear(&sh->diag);
        size_t runs = sh->r1 - sh->r0, nv = st->u->nv;
        unsigned char *done = h.code == PM_OK ? calloc(runs ? runs : 1, 1) : NULL;
        if (done && read_all(sh->fd, done, runs) == runs) {
            /* every restart the child did not run is one this process ran (helped) */
            size_t ran = 0;
            int whole = 1;
            for (size_t i = 0; i < runs; i++) {
                ran += done[i] != 0;
                whole &= done[i] || (st->hf && atomic_load(&st->hf->helped[sh->r0 + i]));
            }
            size_t bp = sh->layout ? 2 * nv * sizeof *st->pos : 0;
            ok = whole && h.bytes == result_bytes(st, sh, ran);
            for (size_t i = 0; i < runs && ok; i++) {
                size_t b = nv * sizeof *st->memb;
                ok = !done[i] || read_all(sh->fd, st->memb + (sh->r0 + i) * nv, b) == b;
            }
            for (size_t i = 0; i < runs && ok; i++) {
                size_t b = sizeof *st->q;
                ok = !done[i] || read_all(sh->fd, st->q + sh->r0 + i, b) == b;
            }
            ok = ok && (!bp || read_all(sh->fd, st->pos, bp) == bp);
            sh->rc = PM_OK;
            sh->in_layout = 0;
        } else if (h.code > PM_OK && h.code <= PM_EINTERRUPTED && h.bytes < sizeof sh->diag.msg) {
            char msg[sizeof sh->diag.msg];
            if (read_all(sh->fd, msg, (size_t)h.bytes) == h.bytes) {
                msg[h.bytes] = '\0';
                sh->rc = pm_diag_set(&sh->diag, (pm_err_t)h.code, NULL, 0, "%s", msg);
                sh->in_layout = h.in_layout != 0;
                ok = 1;
            }
        }
        free(done);
    }
    reap(sh);
    if (ok) {
        sh->state = SHARE_DONE;
    }
    return ok;
}

static int failed_before(const share *sh, size_t i) {
    for (size_t j = 0; j < i; j++) {
        if (sh[j].state == SHARE_DONE && sh[j].rc != PM_OK) {
            return 1;
        }
    }
    return 0;
}

/* Cuts the work into at most `workers` shares: with a layout and two or more workers, the
 * layout is a share of its own, with the last restarts when it is the lighter one (measured on the
 * medium benchmark file, 5,000 items and 149,000 edges: 0.62 s for the layout, 0.53 s for the ten
 * restarts) and the restarts are cut into the rest, in order; share 0 (the parent's) holds the
 * first restarts, so that the parent summarises the restarts while the layout's child works.
 * Returns the number of shares. */
/* How many of the last restarts the layout's share takes as well, so that the shares cost
 * about the same. Cost model, in units of one Louvain run, fitted on the medium benchmark
 * (5,000 items, 149,000 edges; grid variant): a run costs about 3.6e-7 s per edge, the grid
 * layout about 8.7e-9 s per iteration and per vertex or edge, so the layout is worth
 * 0.024 * iterations * (vertices + edges) / edges runs. Small graphs (exact repulsion, and
 * only milliseconds either way) keep the layout alone. The split never changes results. */
static unsigned layout_extra(const stage *st, unsigned workers, unsigned k) {
    const usable *u = st->u;
    if (u->nv <= 1000 || u->me == 0 || st->R <= k) {
        return 0;
    }
    double L = 0.024 * (double)st->iterations * (double)(u->nv + u->me) / (double)u->me;
    double per = ((double)st->R + L) / (double)workers;
    if (per <= L) {
        return 0;
    }
    double x = floor(per - L + 0.5);
    unsigned extra = x > 0 ? (unsigned)x : 0;
    return extra > st->R - k ? st->R - k : extra; /* every other share keeps a run */
}

static size_t plan(const stage *st, unsigned workers, share *sh) {
    unsigned units = st->R + (st->layout ? 1u : 0u);
    if (workers > units) {
        workers = units;
    }
    if (workers < 1) {
        workers = 1;
    }
    for (unsigned i = 0; i < workers; i++) {
        memset(&sh[i], 0, sizeof sh[i]);
        sh[i].fd = -1;
        sh[i].state = SHARE_PENDING;
    }
    if (workers == 1) {
        sh[0].r1 = st->R;
        sh[0].layout = st->layout;
        return 1;
    }
    unsigned k = st->layout ? workers - 1 : workers; /* restart shares, k <= R */
    unsigned extra = st->layout ? layout_extra(st, workers, k) : 0;
    unsigned R = st->R - extra;
    for (unsigned i = 0; i < k; i++) {
        sh[i].r0 = (unsigned)((uint64_t)R * i / k);
        sh[i].r1 = (unsigned)((uint64_t)R * (i + 1) / k);
    }
    if (st->layout) {
        sh[k].layout = 1;
        sh[k].r0 = R; /* the last restarts, when the layout alone is the lighter share */
        sh[k].r1 = st->R;
    }
    return workers;
}

/* The shares of one call and their children. Shares 1 .. spawned-1 got a child; the rest are
 * the parent's. */
typedef struct {
    share one; /* the only share when there is no room for more */
    share *sh;
    size_t ns, spawned;
} crew;

/* Plans the shares, forks the children and runs share 0 in this process while they work. */
static void crew_start(crew *cw, const stage *st, unsigned workers) {
    memset(&g_stats, 0, sizeof g_stats);
    unsigned units = st->R + (st->layout ? 1u : 0u);
    if (workers > units) {
        workers = units;
    }
    cw->sh = &cw->one;
    if (workers > 1) {
        cw->sh = pm_i_calloc(workers, sizeof *cw->sh);
        if (!cw->sh) {
            cw->sh = &cw->one; /* no room for the bookkeeping: one process */
            workers = 1;
        }
    }
    cw->ns = plan(st, workers, cw->sh);
    g_stats.shares = (unsigned)cw->ns;
    if (cw->ns > 1 && st->layout) {
        g_stats.layout_restarts = cw->sh[cw->ns - 1].r1 - cw->sh[cw->ns - 1].r0;
    }
    cw->spawned = 1;
    /* after the first failure the rest are the parent's: the next fork would fail too */
    while (cw->spawned < cw->ns &&
           spawn(st, &cw->sh[cw->spawned], (int)cw->spawned, cw->sh, cw->ns) == 0) {
        cw->spawned++;
        g_stats.forked++;
    }
    if (units > 0) {
        run_share(st, &cw->sh[0], 0, NULL);
    }
}

/* Completes shares from .. upto-1 (share 0 is done already): first those without a child,
 * computed here, then the children's, read in order; a lost child's share is computed here.
 * Shares after an error are left undone (children killed): that error decides the outcome. */
static void crew_finish(crew *cw, const stage *st, size_t from, size_t upto) {
    share *sh = cw->sh;
    for (size_t i = from > cw->spawned ? from : cw->spawned; i < upto; i++) {
        if (!failed_before(sh, i)) {
            run_share(st, &sh[i], 0, NULL);
            g_stats.redone++;
        }
    }
    for (size_t i = from; i < upto && i < cw->spawned; i++) {
        if (sh[i].pid == 0) {
            continue;
        }
        if (failed_before(sh, i)) {
            kill(sh[i].pid, SIGKILL);
            reap(&sh[i]);
            continue;
        }
        if (collect(st, &sh[i]) && sh[i].rc != PM_ENOMEM) {
            g_stats.from_child++;
        } else {
            run_share(st, &sh[i], 0, NULL); /* lost, cut short, or short of memory in the child */
            g_stats.redone++;
        }
    }
}

/* The first error among shares 0 .. upto-1, in the order one process meets them. */
static pm_err_t crew_error(const crew *cw, size_t upto, int *in_layout, pm_diag_t *diag) {
    for (size_t i = 0; i < upto; i++) {
        const share *s = &cw->sh[i];
        if (s->state == SHARE_DONE && s->rc != PM_OK) {
            *in_layout = s->in_layout;
            if (diag) {
                *diag = s->diag;
            }
            return s->rc;
        }
    }
    *in_layout = 0;
    return PM_OK;
}

/* Kills and reaps the children still running (their results are no longer wanted), frees. */
static void crew_end(crew *cw) {
    for (size_t i = 1; i < cw->spawned; i++) {
        if (cw->sh[i].pid > 0) {
            kill(cw->sh[i].pid, SIGKILL);
            reap(&cw->sh[i]);
        }
    }
    if (cw->sh != &cw->one) {
        free(cw->sh);
    }
    cw->sh = NULL;
}

/* ---- clustering and layout ------------------------------------------------------------------ */

/* pm_cluster_louvain (layout 0) and pm_network_run (layout 1, xy[2n]). Errors come in the
 * order the two separate calls would give them: clustering first, then the layout. */
static pm_err_t network(size_t n, size_t m, const uint32_t *ea, const uint32_t *eb, const double *w,
                        const pm_cluster_opts_t *o, int layout, uint64_t layout_seed,
                        int iterations, pm_clusters_t **out, double *xy, pm_diag_t *diag) {
    *out = NULL;
    memset(&g_stats, 0, sizeof g_stats);
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
    double *pos = NULL;
    pm_err_t layout_rc = PM_OK;
    pm_diag_t layout_diag;
    pm_diag_clear(&layout_diag);
    crew cw;
    memset(&cw, 0, sizeof cw);
    help_flags hf = {NULL, NULL, NULL};
    void *shared = MAP_FAILED;
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
    if (layout && u.nv > 0) {
        pos = pm_i_malloc(2 * u.nv, sizeof *pos);
    }
    if (!c->cluster || !c->members || !c->strength || !c->inner || !c->restart_q || !memb || !raw ||
        (layout && u.nv > 0 && !pos)) {
        rc = pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
        goto cleanup;
    }
    for (size_t k = 0; k < u.me; k++) {
        c->strength[u.oldid[u.ends[2 * k]]] += u.w[k];
        c->strength[u.oldid[u.ends[2 * k + 1]]] += u.w[k];
    }
    c->modularity = NAN;
    c->stability = NAN;
    stage st = {.u = &u,
                .resolution = o->resolution,
                .seed = o->seed,
                .R = u.me > 0 ? R : 0,
                .memb = memb,
                .q = c->restart_q,
                .layout = pos != NULL,
                .layout_seed = layout_seed,
                .iterations = iterations > 0 ? iterations : pm_layout_default_iterations(u.nv),
                .pos = pos,
                .hf = NULL};
    /* flags shared with the children: the parent may run restarts of the layout's share
     * (from its end) while the child lays out; without the mapping it simply does not */
    if (layout && o->workers != 1 && st.R > 0) {
        shared = mmap(NULL, (2 * (size_t)st.R + 1) * sizeof(atomic_uchar), PROT_READ | PROT_WRITE,
                      MAP_SHARED | MAP_ANONYMOUS, -1, 0);
        if (shared != MAP_FAILED) {
            hf.claimed = shared;
            hf.helped = hf.claimed + st.R;
            hf.over = hf.helped + st.R;
            atomic_init(hf.over, 0);
            for (unsigned r = 0; r < st.R; r++) {
                atomic_init(&hf.claimed[r], 0);
                atomic_init(&hf.helped[r], 0);
            }
            st.hf = &hf;
        }
    }
    /* the restarts' shares first; the layout's child (the last share) keeps working while
     * this process summarises the restarts */
    crew_start(&cw, &st, o->workers);
    /* the layout's child runs its restarts after the layout: this process runs them from the
     * end meanwhile, as far as the child has not come (louvain_runs); a layout share that
     * still holds restarts of the child's is waited for with the restarts */
    int layout_runs = 0;
    if (cw.ns > 1 && st.layout) {
        share *ls = &cw.sh[cw.ns - 1];
        if (ls->r1 > ls->r0 && st.hf && ls->pid > 0 && cw.sh[0].rc == PM_OK) {
            g_reason[0] = '\0';
            (void)louvain_runs(st.u, st.resolution, st.seed, ls->r0, ls->r1, st.memb, st.q, st.hf,
                               1, NULL);
        }
        if (st.hf) {
            atomic_store(st.hf->over, 1);
        }
        for (unsigned r = ls->r0; r < ls->r1; r++) {
            layout_runs |= !(st.hf && ls->pid > 0 && atomic_load(&st.hf->helped[r]));
        }
    }
    size_t n_restart_shares = cw.ns > 1 && st.layout && !layout_runs ? cw.ns - 1 : cw.ns;
    crew_finish(&cw, &st, 1, n_restart_shares);
    int in_layout;
    pm_diag_t sd;
    pm_diag_clear(&sd);
    pm_err_t src = crew_error(&cw, n_restart_shares, &in_layout, &sd);
    if (src && !in_layout) {
        rc = src;
        if (diag) {
            *diag = sd;
        }
        goto cleanup;
    }
    if (src) { /* one process, and its layout failed: reported after the errors of the
                * summary below, as the two separate calls would */
        layout_rc = src;
        layout_diag = sd;
    }
    if (u.me > 0) {
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
                    double a = 0;
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
    if (rc == PM_OK && cw.ns > n_restart_shares) {
        crew_finish(&cw, &st, n_restart_shares, cw.ns);
        layout_rc = crew_error(&cw, cw.ns, &in_layout, &layout_diag);
    }
    if (rc == PM_OK && layout) {
        if (layout_rc) {
            rc = layout_rc;
            if (diag) {
                *diag = layout_diag;
            }
        } else {
            rc = layout_finish(&u, n, pos, xy, diag);
        }
    }
cleanup:
    crew_end(&cw);
    if (shared != MAP_FAILED) {
        munmap(shared, (2 * (size_t)st.R + 1) * sizeof(atomic_uchar));
    }
    free(memb);
    free(raw);
    free(pos);
    usable_free(&u);
    if (rc) {
        pm_clusters_free(c);
        return rc;
    }
    *out = c;
    return PM_OK;
}

pm_err_t pm_cluster_louvain(size_t n, size_t m, const uint32_t *ea, const uint32_t *eb,
                            const double *w, const pm_cluster_opts_t *o, pm_clusters_t **out,
                            pm_diag_t *diag) {
    return network(n, m, ea, eb, w, o, 0, 0, 0, out, NULL, diag);
}

pm_err_t pm_network_run(size_t n, size_t m, const uint32_t *ea, const uint32_t *eb, const double *w,
                        const pm_cluster_opts_t *o, uint64_t layout_seed, int iterations,
                        pm_clusters_t **clusters, double *xy, pm_diag_t *diag) {
    return network(n, m, ea, eb, w, o, 1, layout_seed, iterations, clusters, xy, diag);
}
