/* Unit tests of the network stage on several processes (src/network.c, pm_network_run and
 * pm_cluster_louvain with workers > 1): the memberships, modularities, stability and layout
 * coordinates are the serial ones bit for bit for workers 1 .. 4 and beyond; a failing
 * pipe or fork, a child that dies, is killed, answers short or runs out of memory changes
 * nothing (the parent computes that share itself); a real igraph error inside a child reaches
 * the caller with the same message as in one process; no child is left behind (every call
 * reaps its children: waitpid(-1) finds none afterwards).
 * Graphs: Zachary's karate club as igraph ships it (igraph_famous "Zachary", an outside copy
 * of the data) and generated ones (invented planted-partition graphs for scale: the grid
 * variant of the layout above 300 vertices, and answers larger than a pipe's 64 KiB buffer,
 * so that children block on writing until the parent reads them). */
#include "unit.h"

#include <errno.h>
#include <igraph.h>
#include <math.h>
#include <sys/wait.h>

#include "network_internal.h"
#include "pairmap/network.h"

/* The calls under test with the hooks of network_internal.h: the faults a case asks for, and
 * what the last call did (each call carries them down in its own context). */
static pm_i_network_hooks_t hooks;

static void set_faults(const pm_i_network_faults_t *f) {
    pm_i_network_hooks_init(&hooks);
    if (f) {
        hooks.faults = *f;
    }
}

static pm_err_t louvain_hooked(size_t n, size_t m, const uint32_t *ea, const uint32_t *eb,
                               const double *w, const pm_cluster_opts_t *o, pm_clusters_t **out,
                               pm_diag_t *diag) {
    return pm_i_network_call(&hooks, n, m, ea, eb, w, o, 0, 0, 0, out, NULL, diag);
}

static pm_err_t network_hooked(size_t n, size_t m, const uint32_t *ea, const uint32_t *eb,
                               const double *w, const pm_cluster_opts_t *o, uint64_t layout_seed,
                               int iterations, pm_clusters_t **out, double *xy, pm_diag_t *diag) {
    return pm_i_network_call(&hooks, n, m, ea, eb, w, o, 1, layout_seed, iterations, out, xy, diag);
}

static pm_err_t layout_hooked(size_t n, size_t m, const uint32_t *ea, const uint32_t *eb,
                              const double *w, uint64_t seed, int iterations, double *xy,
                              pm_diag_t *diag) {
    return pm_i_layout_call(&hooks, n, m, ea, eb, w, seed, iterations, xy, diag);
}

typedef struct {
    size_t n, m;
    uint32_t *ea, *eb;
    double *w; /* NULL: unweighted */
    const char **names;
    char *name_store;
    int iterations;
} graph;

static void graph_free(graph *g) {
    free(g->ea);
    free(g->eb);
    free(g->w);
    free(g->names);
    free(g->name_store);
    memset(g, 0, sizeof *g);
}

static void graph_names(graph *g) {
    g->names = malloc(g->n * sizeof *g->names);
    g->name_store = malloc(g->n * 8);
    assert_true(g->names && g->name_store);
    for (size_t i = 0; i < g->n; i++) {
        snprintf(g->name_store + 8 * i, 8, "v%05u", (unsigned)i);
        g->names[i] = g->name_store + 8 * i;
    }
}

/* Zachary (1977) karate club (igraph_famous: 34 vertices, 78 edges) plus 3 isolated
 * vertices, unweighted. */
static void karate(graph *g) {
    igraph_t ig;
    assert_int_equal(igraph_famous(&ig, "Zachary"), IGRAPH_SUCCESS);
    memset(g, 0, sizeof *g);
    g->n = (size_t)igraph_vcount(&ig) + 3;
    g->m = (size_t)igraph_ecount(&ig);
    g->ea = malloc(g->m * sizeof *g->ea);
    g->eb = malloc(g->m * sizeof *g->eb);
    assert_true(g->ea && g->eb);
    for (igraph_integer_t k = 0; k < igraph_ecount(&ig); k++) {
        g->ea[k] = (uint32_t)IGRAPH_FROM(&ig, k);
        g->eb[k] = (uint32_t)IGRAPH_TO(&ig, k);
    }
    igraph_destroy(&ig);
    graph_names(g);
}

/* Invented planted-partition graph: groups of `size` vertices; each vertex gets `in` edges
 * to random members of its group and `out` to random vertices anywhere, weights in
 * (0.05, 1.05). Every 97th vertex has no edge (isolated), and about 1% of the edges get a
 * weight of 0 or below or are self-loops (they take no part). */
static void planted(graph *g, uint64_t seed, size_t n, size_t size, unsigned in, unsigned out,
                    int iterations) {
    unit_rng r = {seed};
    memset(g, 0, sizeof *g);
    g->n = n;
    size_t cap = n * (in + out);
    g->ea = malloc(cap * sizeof *g->ea);
    g->eb = malloc(cap * sizeof *g->eb);
    g->w = malloc(cap * sizeof *g->w);
    assert_true(g->ea && g->eb && g->w);
    for (size_t v = 0; v < n; v++) {
        if (v % 97 == 13) {
            continue;
        }
        size_t g0 = v / size * size, gs = g0 + size > n ? n - g0 : size;
        for (unsigned k = 0; k < in + out; k++) {
            uint32_t u = k < in ? (uint32_t)(g0 + unit_below(&r, gs)) : (uint32_t)unit_below(&r, n);
            if (u % 97 == 13) {
                continue;
            }
            double x = unit_unif(&r);
            g->ea[g->m] = (uint32_t)v;
            g->eb[g->m] = u;
            g->w[g->m] = x < 0.005 ? 0.0 : x < 0.01 ? -0.5 : 0.05 + unit_unif(&r);
            g->m++;
        }
    }
    g->iterations = iterations;
    graph_names(g);
}

/* 4400 vertices in groups of 20: the layout's answer (2 x 8 bytes per vertex with an edge)
 * and that of 4 restarts (4 x 4 bytes per vertex) exceed a pipe's 64 KiB buffer. */
static void wide(graph *g) {
    planted(g, 12, 4400, 20, 3, 0, 40);
}

static int bits_equal(double a, double b) {
    return memcmp(&a, &b, sizeof a) == 0;
}

static void assert_same_clusters(const pm_clusters_t *a, const pm_clusters_t *b) {
    assert_non_null(a);
    assert_non_null(b);
    assert_int_equal(a->n, b->n);
    assert_int_equal(a->n_clusters, b->n_clusters);
    assert_memory_equal(a->cluster, b->cluster, a->n * sizeof *a->cluster);
    assert_memory_equal(a->size, b->size, a->n_clusters * sizeof *a->size);
    assert_memory_equal(a->members, b->members, a->n * sizeof *a->members);
    assert_memory_equal(a->first, b->first, (a->n_clusters + 1) * sizeof *a->first);
    assert_memory_equal(a->strength, b->strength, a->n * sizeof *a->strength);
    assert_memory_equal(a->inner, b->inner, a->n * sizeof *a->inner);
    assert_int_equal(a->n_used_edges, b->n_used_edges);
    assert_int_equal(a->n_singletons, b->n_singletons);
    assert_true(bits_equal(a->modularity, b->modularity));
    assert_true(bits_equal(a->stability, b->stability));
    assert_int_equal(a->restarts, b->restarts);
    assert_int_equal(a->best_restart, b->best_restart);
    assert_memory_equal(a->restart_q, b->restart_q, a->restarts * sizeof *a->restart_q);
}

/* Every child of the call just made has been reaped. */
static void assert_no_children(void) {
    errno = 0;
    assert_int_equal(waitpid(-1, NULL, WNOHANG), -1);
    assert_int_equal(errno, ECHILD);
    assert_int_equal(IGRAPH_FINALLY_STACK_SIZE(), 0);
}

/* The serial reference: the two separate calls in this process. */
typedef struct {
    pm_clusters_t *c;
    double *xy;
} result;

static void result_free(result *r) {
    pm_clusters_free(r->c);
    free(r->xy);
    memset(r, 0, sizeof *r);
}

static void opts(pm_cluster_opts_t *o, const graph *g, uint64_t seed, unsigned restarts,
                 unsigned workers) {
    pm_cluster_opts_init(o);
    o->seed = seed;
    o->restarts = restarts;
    o->names = g->names;
    o->workers = workers;
}

static void serial(const graph *g, uint64_t seed, unsigned restarts, result *r) {
    pm_cluster_opts_t o;
    opts(&o, g, seed, restarts, 1);
    pm_diag_t d;
    r->xy = malloc(2 * g->n * sizeof *r->xy);
    assert_non_null(r->xy);
    assert_int_equal(pm_cluster_louvain(g->n, g->m, g->ea, g->eb, g->w, &o, &r->c, &d), PM_OK);
    assert_int_equal(pm_layout_fr(g->n, g->m, g->ea, g->eb, g->w, seed, g->iterations, r->xy, &d),
                     PM_OK);
}

/* pm_network_run with `workers`; checks it against ref and returns the call's counts. */
static pm_i_network_stats_t run_and_compare(const graph *g, uint64_t seed, unsigned restarts,
                                            unsigned workers, const result *ref) {
    pm_cluster_opts_t o;
    opts(&o, g, seed, restarts, workers);
    result r = {NULL, malloc(2 * g->n * sizeof(double))};
    assert_non_null(r.xy);
    pm_diag_t d;
    pm_diag_clear(&d);
    pm_err_t rc =
        network_hooked(g->n, g->m, g->ea, g->eb, g->w, &o, seed, g->iterations, &r.c, r.xy, &d);
    if (rc) {
        fail_msg("pm_network_run with %u workers: %s", workers, d.msg);
    }
    pm_i_network_stats_t st;
    st = hooks.stats;
    assert_no_children();
    assert_same_clusters(ref->c, r.c);
    assert_memory_equal(ref->xy, r.xy, 2 * g->n * sizeof *r.xy);
    result_free(&r);
    return st;
}

/* Workers 1 .. 4, 0 and more than there are pieces of work (ALL_WORKERS) or just 2 and 4
 * (SOME_WORKERS, to keep the test short) against the serial calls, for pm_network_run and
 * for pm_cluster_louvain alone. */
static const unsigned ALL_WORKERS[] = {1, 2, 3, 4, 0, 40};
static const unsigned SOME_WORKERS[] = {2, 4};
#define WORKERS(list) list, sizeof list / sizeof *list

static void check_workers(const graph *g, uint64_t seed, unsigned restarts, const unsigned *workers,
                          size_t nw) {
    result ref;
    serial(g, seed, restarts, &ref);
    if (ref.c->n_used_edges > 0) { /* a reference worth matching: clusters, a spread layout */
        assert_true(ref.c->n_clusters >= 2);
        size_t spread = 0;
        for (size_t i = 1; i < g->n; i++) {
            spread += ref.xy[2 * i] != ref.xy[0];
        }
        assert_true(spread > g->n / 2);
    }
    for (size_t k = 0; k < nw; k++) {
        unsigned wk = workers[k];
        pm_i_network_stats_t st = run_and_compare(g, seed, restarts, wk, &ref);
        /* pieces of work: the restarts and the layout, none without a usable edge */
        unsigned units = ref.c->n_used_edges > 0 ? restarts + 1 : 0;
        unsigned expect = wk < 1 || units == 0 ? 1 : wk > units ? units : wk;
        assert_int_equal(st.shares, expect);
        assert_int_equal(st.forked, expect - 1);
        assert_int_equal(st.from_child, expect - 1);
        assert_int_equal(st.redone, 0);
        /* the clustering alone, restarts split over all the workers */
        pm_cluster_opts_t o;
        opts(&o, g, seed, restarts, wk);
        pm_clusters_t *c = NULL;
        pm_diag_t d;
        assert_int_equal(louvain_hooked(g->n, g->m, g->ea, g->eb, g->w, &o, &c, &d), PM_OK);
        st = hooks.stats;
        assert_no_children();
        unsigned runs = ref.c->n_used_edges > 0 ? restarts : 0;
        expect = wk < 1 || runs == 0 ? 1 : wk > runs ? runs : wk;
        assert_int_equal(st.shares, expect);
        assert_int_equal(st.forked, expect - 1);
        assert_same_clusters(ref.c, c);
        pm_clusters_free(c);
    }
    result_free(&ref);
}

static void test_network_par_karate(void **state) {
    (void)state;
    graph g;
    karate(&g);
    check_workers(&g, 1, 10, WORKERS(ALL_WORKERS));
    check_workers(&g, 7, 10, WORKERS(ALL_WORKERS));
    check_workers(&g, 3, 1, WORKERS(ALL_WORKERS)); /* one restart: at most two processes */
    check_workers(&g, 3, 3, WORKERS(ALL_WORKERS));
    graph_free(&g);
}

static void test_network_par_generated(void **state) {
    (void)state;
    graph g;
    /* 800 vertices: the layout's grid variant (above 300) */
    planted(&g, 11, 800, 100, 10, 2, 150);
    check_workers(&g, 1, 10, WORKERS(ALL_WORKERS));
    check_workers(&g, 5, 4, WORKERS(SOME_WORKERS));
    graph_free(&g);
    wide(&g);
    check_workers(&g, 2, 10, WORKERS(SOME_WORKERS));
    /* above 1,000 laid-out vertices the layout's share is balanced with the last restarts
     * (cost model in network.c): the results stay those of the serial calls */
    {
        result ref = {NULL, NULL};
        serial(&g, 3, 10, &ref);
        pm_i_network_stats_t st = run_and_compare(&g, 3, 10, 2, &ref);
        assert_int_equal(st.shares, 2);
        assert_true(st.layout_restarts > 0 && st.layout_restarts < 10);
        result_free(&ref);
    }
    graph_free(&g);
}

static void test_network_par_no_usable_edge(void **state) {
    (void)state;
    const uint32_t ea[] = {0, 1}, eb[] = {1, 2};
    const double w[] = {-1, 0};
    graph g = {3, 2, (uint32_t *)ea, (uint32_t *)eb, (double *)w, NULL, NULL, 0};
    check_workers(&g, 1, 10, WORKERS(ALL_WORKERS)); /* nothing to share out: no child */
}

/* Faults at a given spawn. With 4 workers and 10 restarts the shares are restarts 0-2 (the
 * parent), 3-5 (spawn 1), 6-9 (spawn 2) and the layout (spawn 3). */
typedef struct {
    const char *what;
    pm_i_network_faults_t f;
    unsigned forked, from_child, redone;
} fault_case;

static void test_network_par_fallbacks(void **state) {
    (void)state;
    graph g;
    wide(&g);
    result ref;
    serial(&g, 9, 10, &ref);
    static const fault_case cases[] = {
        {"fork fails at once", {0, 1, 0, 0, 0, 0, -1, 0, 0}, 0, 0, 3},
        {"fork fails for the layout", {0, 3, 0, 0, 0, 0, -1, 0, 0}, 2, 2, 1},
        {"pipe fails at the second", {2, 0, 0, 0, 0, 0, -1, 0, 0}, 1, 1, 2},
        {"pipe fails at once", {1, 0, 0, 0, 0, 0, -1, 0, 0}, 0, 0, 3},
        {"layout child exits", {0, 0, 3, 0, 0, 0, -1, 0, 0}, 3, 2, 1},
        {"restart child exits", {0, 0, 1, 0, 0, 0, -1, 0, 0}, 3, 2, 1},
        {"restart child killed", {0, 0, 0, 2, 0, 0, -1, 0, 0}, 3, 2, 1},
        {"layout child killed", {0, 0, 0, 3, 0, 0, -1, 0, 0}, 3, 2, 1},
        {"layout child short", {0, 0, 0, 0, 3, 0, -1, 0, 0}, 3, 2, 1},
        {"restart child short", {0, 0, 0, 0, 1, 0, -1, 0, 0}, 3, 2, 1},
        {"restart child out of memory", {0, 0, 0, 0, 0, 2, -1, 0, 0}, 3, 2, 1},
        {"layout child out of memory", {0, 0, 0, 0, 0, 3, -1, 0, 0}, 3, 2, 1},
    };
    for (size_t k = 0; k < sizeof cases / sizeof *cases; k++) {
        print_message("fault: %s\n", cases[k].what);
        set_faults(&cases[k].f);
        pm_i_network_stats_t st = run_and_compare(&g, 9, 10, 4, &ref);
        set_faults(NULL);
        assert_int_equal(st.shares, 4);
        assert_int_equal(st.forked, cases[k].forked);
        assert_int_equal(st.from_child, cases[k].from_child);
        assert_int_equal(st.redone, cases[k].redone);
    }
    /* with two workers: the layout's child fails to start or dies */
    static const pm_i_network_faults_t two[] = {{0, 1, 0, 0, 0, 0, -1, 0, 0},
                                                {0, 0, 1, 0, 0, 0, -1, 0, 0}};
    for (size_t k = 0; k < 2; k++) {
        set_faults(&two[k]);
        pm_i_network_stats_t st = run_and_compare(&g, 9, 10, 2, &ref);
        set_faults(NULL);
        assert_int_equal(st.redone, 1);
        assert_int_equal(st.from_child, 0);
    }
    result_free(&ref);
    graph_free(&g);
}

/* A real igraph error (invalid argument injected into one restart or into the layout) gives
 * the message one process gives, whichever process met it; the clustering's error comes
 * before the layout's, as with the two separate calls. */
static void expect_error(const graph *g, unsigned workers, const pm_i_network_faults_t *f,
                         const char *msg) {
    pm_cluster_opts_t o;
    opts(&o, g, 4, 10, workers);
    static pm_clusters_t sentinel;
    pm_clusters_t *c = &sentinel; /* must come back NULL */
    double *xy = malloc(2 * g->n * sizeof *xy);
    assert_non_null(xy);
    pm_diag_t d;
    pm_diag_clear(&d);
    set_faults(f);
    pm_err_t rc = network_hooked(g->n, g->m, g->ea, g->eb, g->w, &o, 4, g->iterations, &c, xy, &d);
    set_faults(NULL);
    assert_no_children();
    assert_int_equal(rc, PM_EINTERNAL);
    assert_null(c);
    assert_string_equal(d.msg, msg);
    free(xy);
}

static void test_network_par_igraph_errors(void **state) {
    (void)state;
    graph g;
    planted(&g, 13, 800, 100, 10, 2, 30);
    pm_cluster_opts_t o;
    opts(&o, &g, 4, 10, 1);
    pm_diag_t d;
    pm_clusters_t *c = NULL;
    static const long bad[] = {0, 3, 5, 9};
    for (size_t k = 0; k < sizeof bad / sizeof *bad; k++) {
        /* the serial message, from the clustering call alone */
        pm_i_network_faults_t f = {0, 0, 0, 0, 0, 0, bad[k], 0, 0};
        set_faults(&f);
        assert_int_equal(louvain_hooked(g.n, g.m, g.ea, g.eb, g.w, &o, &c, &d), PM_EINTERNAL);
        set_faults(NULL);
        assert_null(c);
        assert_non_null(strstr(d.msg, "Louvain clustering"));
        assert_non_null(strstr(d.msg, "resolution")); /* igraph's own words */
        char msg[sizeof d.msg];
        snprintf(msg, sizeof msg, "%s", d.msg);
        for (unsigned wk = 1; wk <= 4; wk++) {
            expect_error(&g, wk, &f, msg);
            /* the layout failing too changes nothing: the clustering's error comes first */
            f.bad_layout = 1;
            expect_error(&g, wk, &f, msg);
            f.bad_layout = 0;
        }
    }
    graph_free(&g);
    /* a failing restart in the layout's share (which takes the last restarts on a graph of
     * more than 1,000 vertices) is still the clustering's error, as in one process */
    wide(&g);
    opts(&o, &g, 4, 10, 1);
    {
        pm_i_network_faults_t f = {0, 0, 0, 0, 0, 0, 9, 0, 0};
        set_faults(&f);
        assert_int_equal(louvain_hooked(g.n, g.m, g.ea, g.eb, g.w, &o, &c, &d), PM_EINTERNAL);
        set_faults(NULL);
        char msg[sizeof d.msg];
        snprintf(msg, sizeof msg, "%s", d.msg);
        expect_error(&g, 2, &f, msg);
        f.bad_layout = 1;
        expect_error(&g, 2, &f, msg);
    }
    graph_free(&g);
    planted(&g, 13, 800, 100, 10, 2, 30);
    /* the layout's error, from the layout call alone */
    pm_i_network_faults_t f = {0, 0, 0, 0, 0, 0, -1, 1, 0};
    double *xy = malloc(2 * g.n * sizeof *xy);
    assert_non_null(xy);
    set_faults(&f);
    assert_int_equal(layout_hooked(g.n, g.m, g.ea, g.eb, g.w, 4, g.iterations, xy, &d),
                     PM_EINTERNAL);
    set_faults(NULL);
    assert_non_null(strstr(d.msg, "Fruchterman-Reingold"));
    char msg[sizeof d.msg];
    snprintf(msg, sizeof msg, "%s", d.msg);
    print_message("igraph error as the user sees it: %s\n", msg);
    for (unsigned wk = 1; wk <= 4; wk++) {
        expect_error(&g, wk, &f, msg);
    }
    free(xy);
    graph_free(&g);
}

/* The parent runs restarts of the layout's share from its end while the child lays out
 * (network.c louvain_runs, shared flags): with the child held back after its layout
 * (child_slow) the parent has run them all and the child sends only the layout; the results
 * stay the serial ones, also when that child then dies or writes half an answer, and a
 * restart error met while helping is still reported as one process reports it. */
static void test_network_par_helping(void **state) {
    (void)state;
    graph g;
    wide(&g);
    result ref;
    serial(&g, 3, 10, &ref);
    pm_i_network_faults_t f = {0, 0, 0, 0, 0, 0, -1, 0, 1};
    set_faults(&f);
    pm_i_network_stats_t st = run_and_compare(&g, 3, 10, 2, &ref);
    set_faults(NULL);
    assert_true(st.layout_restarts > 0);
    assert_int_equal(st.helped, st.layout_restarts);
    assert_int_equal(st.from_child, 1);
    assert_int_equal(st.redone, 0);
    /* without the delay: whatever the split, the same results */
    st = run_and_compare(&g, 3, 10, 2, &ref);
    assert_true(st.helped <= st.layout_restarts);
    /* the helped child lost or cut short: the parent computes its share */
    static const pm_i_network_faults_t lost[] = {{0, 0, 1, 0, 0, 0, -1, 0, 1},
                                                 {0, 0, 0, 0, 1, 0, -1, 0, 1}};
    for (size_t k = 0; k < 2; k++) {
        set_faults(&lost[k]);
        st = run_and_compare(&g, 3, 10, 2, &ref);
        set_faults(NULL);
        assert_int_equal(st.redone, 1);
    }
    result_free(&ref);
    /* an igraph error in the restarts the parent helps with: the last one (it stops at once)
     * and the one before (it has run the last); the message of one process */
    pm_cluster_opts_t o;
    opts(&o, &g, 4, 10, 1);
    static const long bad[] = {9, 8};
    for (size_t k = 0; k < 2; k++) {
        pm_i_network_faults_t e = {0, 0, 0, 0, 0, 0, bad[k], 0, 0};
        pm_diag_t d;
        pm_clusters_t *c = NULL;
        set_faults(&e);
        assert_int_equal(louvain_hooked(g.n, g.m, g.ea, g.eb, g.w, &o, &c, &d), PM_EINTERNAL);
        set_faults(NULL);
        char msg[sizeof d.msg];
        snprintf(msg, sizeof msg, "%s", d.msg);
        e.child_slow = 1;
        expect_error(&g, 2, &e, msg);
        e.child_slow = 0;
        expect_error(&g, 2, &e, msg);
    }
    graph_free(&g);
}

int main(int argc, char **argv) {
    pm_init();
    set_faults(NULL);
    if (argc > 1) {
        cmocka_set_test_filter(argv[1]);
    }
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_network_par_karate),
        cmocka_unit_test(test_network_par_generated),
        cmocka_unit_test(test_network_par_no_usable_edge),
        cmocka_unit_test(test_network_par_fallbacks),
        cmocka_unit_test(test_network_par_igraph_errors),
        cmocka_unit_test(test_network_par_helping),
    };
    return cmocka_run_group_tests_name("network_par", tests, NULL, NULL);
}
