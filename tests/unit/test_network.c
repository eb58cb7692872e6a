/* Unit tests of the network module (src/network.c): Louvain with restarts on Zachary's karate
 * club, adjusted Rand index, modularity, Fruchterman-Reingold layout, error paths.
 *
 * Also a small tool mode for the reference check tests/ref/network_karate.py:
 *   test_network --edges FILE [SEEDS [RESTARTS]]
 * reads "a b" vertex pairs (0-based, one edge per line) and prints, for seeds 1..SEEDS (default
 * 20), one line "seed modularity membership..." from pm_cluster_louvain with RESTARTS runs
 * (default 10, as `pairmap map`). */
#include "unit.h"

#include <igraph.h>
#include <math.h>

#include "pairmap/network.h"

/* Zachary (1977) karate club as igraph ships it (igraph_famous "Zachary": 34 vertices, 78
 * edges), an outside copy of the data, unweighted. */
static void karate(size_t *n, size_t *m, uint32_t **ea, uint32_t **eb) {
    igraph_t g;
    assert_int_equal(igraph_famous(&g, "Zachary"), IGRAPH_SUCCESS);
    *n = (size_t)igraph_vcount(&g);
    *m = (size_t)igraph_ecount(&g);
    *ea = malloc(*m * sizeof **ea);
    *eb = malloc(*m * sizeof **eb);
    assert_non_null(*ea);
    assert_non_null(*eb);
    for (igraph_integer_t k = 0; k < igraph_ecount(&g); k++) {
        (*ea)[k] = (uint32_t)IGRAPH_FROM(&g, k);
        (*eb)[k] = (uint32_t)IGRAPH_TO(&g, k);
    }
    igraph_destroy(&g);
}

static void test_network_louvain_karate(void **state) {
    (void)state;
    size_t n, m;
    uint32_t *ea, *eb;
    karate(&n, &m, &ea, &eb);
    assert_int_equal(n, 34);
    assert_int_equal(m, 78);
    /* The best known partition of the unweighted karate club scores about 0.4198 (from
     * memory); with the default 10 restarts Louvain reaches 0.40 or more for every seed tried
     * (a single run does not: seeds 2, 11 and 15 give 0.398 and 0.395, measured). */
    double lowest_single = 1;
    for (uint64_t seed = 1; seed <= 30; seed++) {
        pm_cluster_opts_t o;
        pm_cluster_opts_init(&o);
        o.seed = seed;
        o.restarts = 1;
        pm_clusters_t *single = NULL;
        pm_diag_t d1;
        assert_int_equal(pm_cluster_louvain(n, m, ea, eb, NULL, &o, &single, &d1), PM_OK);
        lowest_single = fmin(lowest_single, single->modularity);
        assert_true(single->modularity >= 0.38);
        pm_clusters_free(single);
        o.restarts = 10;
        pm_clusters_t *c = NULL;
        pm_diag_t d;
        assert_int_equal(pm_cluster_louvain(n, m, ea, eb, NULL, &o, &c, &d), PM_OK);
        assert_true(c->modularity >= 0.40);
        assert_true(c->modularity <= 0.4198 + 1e-4);
        /* the modularity reported is that of the partition returned */
        double q;
        assert_int_equal(pm_modularity(n, m, ea, eb, NULL, c->cluster, 1.0, &q, &d), PM_OK);
        assert_float_equal(q, c->modularity, 1e-12);
        /* renumbered by size: 1 is the largest */
        for (size_t k = 1; k < c->n_clusters; k++) {
            assert_true(c->size[k - 1] >= c->size[k]);
        }
        size_t total = 0;
        for (size_t k = 0; k < c->n_clusters; k++) {
            total += c->size[k];
            for (size_t t = c->first[k]; t < c->first[k + 1]; t++) {
                assert_int_equal(c->cluster[c->members[t]], k + 1);
            }
        }
        assert_int_equal(total, n);
        assert_int_equal(c->n_singletons, 0);
        assert_true(c->stability > 0 && c->stability <= 1);
        pm_clusters_free(c);
    }
    print_message("karate: lowest single-run modularity over seeds 1..30: %.4f\n", lowest_single);
    assert_int_equal(IGRAPH_FINALLY_STACK_SIZE(), 0);
    free(ea);
    free(eb);
}

static void test_network_louvain_restarts_deterministic(void **state) {
    (void)state;
    size_t n, m;
    uint32_t *ea, *eb;
    karate(&n, &m, &ea, &eb);
    pm_cluster_opts_t o;
    pm_cluster_opts_init(&o);
    o.seed = 7;
    o.restarts = 10;
    pm_clusters_t *a = NULL, *b = NULL;
    pm_diag_t d;
    assert_int_equal(pm_cluster_louvain(n, m, ea, eb, NULL, &o, &a, &d), PM_OK);
    assert_int_equal(pm_cluster_louvain(n, m, ea, eb, NULL, &o, &b, &d), PM_OK);
    assert_memory_equal(a->cluster, b->cluster, n * sizeof *a->cluster);
    assert_true(a->stability > 0 && a->stability <= 1);
    /* the kept run is the best one, the first among equals */
    for (unsigned r = 0; r < a->restarts; r++) {
        assert_true(a->restart_q[r] <= a->modularity);
        if (r < a->best_restart) {
            assert_true(a->restart_q[r] < a->modularity);
        }
    }
    /* restart r uses seed + r * step: run r alone with that seed gives the same modularity */
    pm_clusters_t *one = NULL;
    o.seed = 7 + (uint64_t)a->best_restart * PM_CLUSTER_SEED_STEP;
    o.restarts = 1;
    assert_int_equal(pm_cluster_louvain(n, m, ea, eb, NULL, &o, &one, &d), PM_OK);
    assert_true(one->modularity == a->modularity);
    assert_memory_equal(one->cluster, a->cluster, n * sizeof *a->cluster);
    pm_clusters_free(one);
    pm_clusters_free(a);
    pm_clusters_free(b);
    free(ea);
    free(eb);
}

/* Two triangles joined by a negative edge, plus an isolated vertex: the negative edge takes no
 * part, the isolated vertex is a singleton, clusters are numbered by size then leading name. */
static void test_network_louvain_negative_and_isolated(void **state) {
    (void)state;
    const uint32_t ea[] = {0, 1, 0, 3, 4, 3, 2};
    const uint32_t eb[] = {1, 2, 2, 4, 5, 5, 3};
    const double w[] = {1, 1, 1, 2, 2, 2, -0.5};
    const char *const names[] = {"d", "e", "f", "a", "b", "c", "zz"};
    pm_cluster_opts_t o;
    pm_cluster_opts_init(&o);
    o.names = names;
    pm_clusters_t *c = NULL;
    pm_diag_t d;
    assert_int_equal(pm_cluster_louvain(7, 7, ea, eb, w, &o, &c, &d), PM_OK);
    assert_int_equal(c->n_clusters, 3);
    assert_int_equal(c->n_singletons, 1);
    assert_int_equal(c->n_used_edges, 6);
    /* equal sizes 3 and 3: the tie goes to the leading name, "a" < "d" */
    assert_int_equal(c->cluster[3], 1);
    assert_int_equal(c->cluster[4], 1);
    assert_int_equal(c->cluster[0], 2);
    assert_int_equal(c->cluster[6], 3);
    /* two disjoint triangles of total weight 3 and 6 (m = 9): Q = sum over clusters of
     * L_c/m - (d_c/2m)^2 = (3/9 - (6/18)^2) + (6/9 - (12/18)^2) = 2/9 + 2/9 (Newman 2004) */
    assert_float_equal(c->modularity, 4.0 / 9.0, 1e-12);
    assert_float_equal(c->stability, 1.0, 1e-12);
    assert_float_equal(c->strength[6], 0.0, 0);
    pm_clusters_free(c);
}

static void test_network_louvain_errors(void **state) {
    (void)state;
    const uint32_t ea[] = {0}, eb[] = {5};
    pm_cluster_opts_t o;
    pm_cluster_opts_init(&o);
    pm_clusters_t *c = NULL;
    pm_diag_t d;
    assert_int_equal(pm_cluster_louvain(3, 1, ea, eb, NULL, &o, &c, &d), PM_EINTERNAL);
    assert_null(c);
    assert_non_null(strstr(d.msg, "vertex 5"));
    o.resolution = -1;
    assert_int_equal(pm_cluster_louvain(6, 1, ea, eb, NULL, &o, &c, &d), PM_EUSAGE);
    o.resolution = 1;
    o.restarts = 0;
    assert_int_equal(pm_cluster_louvain(6, 1, ea, eb, NULL, &o, &c, &d), PM_EUSAGE);
    /* no usable edge: all singletons, modularity undefined */
    const double w[] = {-1};
    o.restarts = 3;
    assert_int_equal(pm_cluster_louvain(6, 1, ea, eb, w, &o, &c, &d), PM_OK);
    assert_int_equal(c->n_clusters, 6);
    assert_true(isnan(c->modularity));
    pm_clusters_free(c);
    assert_int_equal(IGRAPH_FINALLY_STACK_SIZE(), 0);
}

static void test_network_adjusted_rand_values(void **state) {
    (void)state;
    pm_diag_t d;
    double ari;
    /* worked by hand from the contingency table: sum C(n_ij,2) = 1, A = 2, B = 1, C(4,2) = 6,
     * ARI = (1 - 1/3) / (3/2 - 1/3) = 4/7 */
    const uint32_t x[] = {0, 0, 1, 1}, y[] = {0, 0, 1, 2};
    assert_int_equal(pm_adjusted_rand(4, x, y, &ari, &d), PM_OK);
    assert_float_equal(ari, 4.0 / 7.0, 1e-15);
    /* relabelling does not matter */
    const uint32_t z[] = {9, 9, 4, 4};
    assert_int_equal(pm_adjusted_rand(4, x, z, &ari, &d), PM_OK);
    assert_float_equal(ari, 1.0, 0);
    /* one cluster against all singletons: no agreement beyond chance */
    const uint32_t one[] = {0, 0, 0, 0}, sing[] = {0, 1, 2, 3};
    assert_int_equal(pm_adjusted_rand(4, one, sing, &ari, &d), PM_OK);
    assert_float_equal(ari, 0.0, 0);
    assert_int_equal(pm_adjusted_rand(4, sing, sing, &ari, &d), PM_OK);
    assert_float_equal(ari, 1.0, 0);
}

static void test_network_layout_fr_box_and_ring(void **state) {
    (void)state;
    size_t n, m;
    uint32_t *ea, *eb;
    karate(&n, &m, &ea, &eb);
    /* karate plus 4 isolated vertices */
    size_t N = n + 4;
    double *xy = malloc(2 * N * sizeof *xy), *xy2 = malloc(2 * N * sizeof *xy2);
    assert_non_null(xy);
    assert_non_null(xy2);
    pm_diag_t d;
    assert_int_equal(pm_layout_fr(N, m, ea, eb, NULL, 3, 0, xy, &d), PM_OK);
    assert_int_equal(pm_layout_fr(N, m, ea, eb, NULL, 3, 0, xy2, &d), PM_OK);
    assert_memory_equal(xy, xy2, 2 * N * sizeof *xy);
    double x0 = 1, x1 = 0, y0 = 1, y1 = 0;
    for (size_t i = 0; i < n; i++) {
        assert_true(xy[2 * i] >= 0 && xy[2 * i] <= 1);
        assert_true(xy[2 * i + 1] >= 0 && xy[2 * i + 1] <= 1);
        x0 = fmin(x0, xy[2 * i]);
        x1 = fmax(x1, xy[2 * i]);
        y0 = fmin(y0, xy[2 * i + 1]);
        y1 = fmax(y1, xy[2 * i + 1]);
    }
    /* one axis spans the box exactly */
    assert_true(fabs(fmax(x1 - x0, y1 - y0) - 1.0) < 1e-12);
    for (size_t i = n; i < N; i++) {
        double r = hypot(xy[2 * i] - 0.5, xy[2 * i + 1] - 0.5);
        assert_float_equal(r, PM_LAYOUT_RING_RADIUS, 1e-12);
    }
    /* the first isolated vertex sits at the top of the ring */
    assert_float_equal(xy[2 * n], 0.5, 1e-12);
    assert_float_equal(xy[2 * n + 1], 0.5 - PM_LAYOUT_RING_RADIUS, 1e-12);
    /* another seed, another picture */
    assert_int_equal(pm_layout_fr(N, m, ea, eb, NULL, 4, 0, xy2, &d), PM_OK);
    assert_true(memcmp(xy, xy2, 2 * n * sizeof *xy) != 0);
    /* bad vertex id */
    eb[0] = (uint32_t)N;
    assert_int_equal(pm_layout_fr(N, m, ea, eb, NULL, 3, 0, xy, &d), PM_EINTERNAL);
    assert_int_equal(IGRAPH_FINALLY_STACK_SIZE(), 0);
    free(xy);
    free(xy2);
    free(ea);
    free(eb);
}

static void test_network_layout_fr_heavier_is_shorter(void **state) {
    (void)state;
    /* a path 0-1-2 with a heavy and a light edge: the heavy one comes out shorter (igraph's
     * weights multiply the attraction, API-NOTES.md) */
    const uint32_t ea[] = {0, 1}, eb[] = {1, 2};
    const double w[] = {8, 0.125};
    double xy[6];
    pm_diag_t d;
    assert_int_equal(pm_layout_fr(3, 2, ea, eb, w, 1, 0, xy, &d), PM_OK);
    double l01 = hypot(xy[0] - xy[2], xy[1] - xy[3]), l12 = hypot(xy[2] - xy[4], xy[3] - xy[5]);
    assert_true(l01 < l12);
}

/* ---- tool mode ------------------------------------------------------------------------------ */
static int tool(const char *path, int seeds, unsigned restarts) {
    FILE *fp = fopen(path, "r");
    if (!fp) {
        perror(path);
        return 2;
    }
    size_t cap = 1024, m = 0, n = 0;
    uint32_t *ea = malloc(cap * sizeof *ea), *eb = malloc(cap * sizeof *eb);
    unsigned a, b;
    while (ea && eb && fscanf(fp, "%u %u", &a, &b) == 2) {
        if (m == cap) {
            break; /* enough for the test graphs */
        }
        ea[m] = a;
        eb[m] = b;
        m++;
        n = a + 1 > n ? a + 1 : n;
        n = b + 1 > n ? b + 1 : n;
    }
    fclose(fp);
    for (int s = 1; s <= seeds; s++) {
        pm_cluster_opts_t o;
        pm_cluster_opts_init(&o);
        o.seed = (uint64_t)s;
        o.restarts = restarts;
        pm_clusters_t *c = NULL;
        pm_diag_t d;
        if (pm_cluster_louvain(n, m, ea, eb, NULL, &o, &c, &d)) {
            fprintf(stderr, "%s\n", d.msg);
            return 1;
        }
        printf("%d %.17g", s, c->modularity);
        for (size_t i = 0; i < n; i++) {
            printf(" %u", c->cluster[i]);
        }
        printf("\n");
        pm_clusters_free(c);
    }
    free(ea);
    free(eb);
    return 0;
}

/* --restarts bounded by what the runs cost (network.h): the largest R whose memberships fit
 * 1 GiB and whose R(R-1)/2 ARI passes over v vertices fit 2e9, checked against the bounds'
 * definitions at the edge (R fits, R + 1 does not); a call beyond fails before allocating. */
static void test_network_restarts_bound(void **state) {
    (void)state;
    static const size_t vs[] = {1, 500, 2000, 5000, 50000, 300000};
    for (size_t i = 0; i < sizeof vs / sizeof *vs; i++) {
        uint64_t v = vs[i];
        unsigned r = pm_cluster_max_restarts(vs[i]);
        assert_true(r >= 1 && r <= PM_CLUSTER_MAX_RESTARTS);
        assert_true((uint64_t)r * v * 4 <= PM_CLUSTER_MEMB_BYTES || r == 1);
        assert_true((uint64_t)r * (r - 1) / 2 * v <= PM_CLUSTER_ARI_WORK || r == 1);
        if (r < PM_CLUSTER_MAX_RESTARTS) {
            uint64_t r1 = (uint64_t)r + 1;
            assert_true(r1 * v * 4 > PM_CLUSTER_MEMB_BYTES ||
                        r1 * (r1 - 1) / 2 * v > PM_CLUSTER_ARI_WORK);
        }
    }
    /* 5,000 vertices (the medium benchmark's items): 894 runs, as README and --help say */
    assert_int_equal(pm_cluster_max_restarts(5000), 894);
    assert_int_equal(pm_cluster_max_restarts(50000), 283);
    const uint32_t ea[] = {0, 1, 2}, eb[] = {1, 2, 0};
    pm_cluster_opts_t o;
    pm_cluster_opts_init(&o);
    pm_clusters_t *c = NULL;
    pm_diag_t d;
    o.restarts = PM_CLUSTER_MAX_RESTARTS + 1;
    assert_int_equal(pm_cluster_louvain(3, 3, ea, eb, NULL, &o, &c, &d), PM_EUSAGE);
    assert_null(c);
    assert_non_null(strstr(d.msg, "Louvain runs are too many"));
    o.restarts = PM_CLUSTER_MAX_RESTARTS;
    assert_int_equal(pm_cluster_louvain(3, 3, ea, eb, NULL, &o, &c, &d), PM_OK);
    pm_clusters_free(c);
}

int main(int argc, char **argv) {
    pm_init();
    if (argc > 2 && strcmp(argv[1], "--edges") == 0) {
        return tool(argv[2], argc > 3 ? atoi(argv[3]) : 20,
                    argc > 4 ? (unsigned)atoi(argv[4]) : 10);
    }
    if (argc > 1) {
        cmocka_set_test_filter(argv[1]);
    }
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_network_louvain_karate),
        cmocka_unit_test(test_network_louvain_restarts_deterministic),
        cmocka_unit_test(test_network_louvain_negative_and_isolated),
        cmocka_unit_test(test_network_louvain_errors),
        cmocka_unit_test(test_network_adjusted_rand_values),
        cmocka_unit_test(test_network_layout_fr_box_and_ring),
        cmocka_unit_test(test_network_layout_fr_heavier_is_shorter),
        cmocka_unit_test(test_network_restarts_bound),
    };
    return cmocka_run_group_tests_name("network", tests, NULL, NULL);
}
