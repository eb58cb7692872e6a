/* The network stage: an igraph graph of the kept pairs, Louvain clusters with restarts and a
 * stability figure, and a Fruchterman-Reingold layout (src/network.c, the only file that
 * includes igraph). Everything here takes plain arrays, so callers never see igraph types.
 *
 * Edges with a weight that is not finite and > 0 (negative associations under --sign negative
 * or both are passed with weight 0 by the CLI) are kept in the counts but take no part in
 * clustering or layout: Louvain and Fruchterman-Reingold both need positive weights.
 *
 * igraph's random generator, error handler and finally stack are process-global: these
 * functions are not thread-safe and must not run concurrently. To use several cores,
 * pm_cluster_louvain and pm_network_run share their work among forked worker processes
 * instead (pm_cluster_opts_t.workers); results are the same for any number of workers. */
#ifndef PAIRMAP_NETWORK_H
#define PAIRMAP_NETWORK_H

#include <stddef.h>
#include <stdint.h>

#include "pairmap/error.h"

#ifdef __cplusplus
extern "C" {
#endif

/* Process set-up, once, before any other pairmap call: installs igraph's attribute table and
 * a non-aborting igraph error handler (igraph errors come back as PM_EINTERNAL with igraph's
 * text, never an abort), and turns GSL's aborting handler off. */
void pm_init(void);

/* Default number of Fruchterman-Reingold iterations (iterations <= 0 selects it) for up to
 * PM_LAYOUT_FULL_ITEMS laid-out vertices (those with a usable edge); above, fewer, so that the
 * layout's work grows about linearly: PM_LAYOUT_ITERATIONS * PM_LAYOUT_FULL_ITEMS / vertices,
 * at least PM_LAYOUT_MIN_ITERATIONS. (On a 5,000-item benchmark map with 49 clusters, 150
 * iterations put 92.0% of the ten nearest neighbours of an item in its own cluster, 500
 * iterations 92.8%, in a third of the time.) */
#define PM_LAYOUT_ITERATIONS 500
#define PM_LAYOUT_FULL_ITEMS 1000
#define PM_LAYOUT_MIN_ITERATIONS 150
/* The default for `laid_out` vertices with usable edges (see above). */
int pm_layout_default_iterations(size_t laid_out);
/* The default for the graph (n, m, ea, eb, w) as pm_layout_fr counts its vertices with usable
 * edges; -1 when out of memory. */
int pm_layout_default_iterations_for(size_t n, size_t m, const uint32_t *ea, const uint32_t *eb,
                                     const double *w);

/* Fruchterman-Reingold layout of an undirected graph given as plain arrays, in the calling
 * process (pm_network_run runs it in a worker process alongside the clustering).
 *   n           vertices 0 .. n-1
 *   m, ea, eb   edges (ea[k], eb[k]); self-loops and edges with w[k] not finite or <= 0 are
 *               ignored; parallel edges are allowed
 *   w           edge weights (NULL: all 1). Heavier edges pull harder (shorter edges). The
 *               weights used are divided by their mean, so the picture does not depend on the
 *               measure's scale
 *   seed        seeds igraph's generator right before the layout (same seed, same picture)
 *   iterations  <= 0: PM_LAYOUT_ITERATIONS
 *   xy          out, 2n doubles (x of vertex i at xy[2i], y at xy[2i+1]). Vertices with at least
 *               one usable edge fill the unit box [0,1]^2 (scaled by one factor on both axes,
 *               centred on the shorter one); the others ("isolated") sit on a ring of radius
 *               PM_LAYOUT_RING_RADIUS around (0.5, 0.5), outside the box, evenly spaced in
 *               vertex order starting at the top, going clockwise on screen (y grows downward)
 * Only the vertices with edges are laid out by igraph (its grid variant, used above 1000
 * vertices, would let isolated vertices drift far away). Cost O(iterations * n'^2) up to 1000
 * laid-out vertices, O(iterations * n') beyond.
 * Errors: PM_EINTERNAL (an edge names a vertex >= n; igraph failure, with igraph's text),
 * PM_ENOMEM. On error xy is left unspecified. */
#define PM_LAYOUT_RING_RADIUS 0.8
pm_err_t pm_layout_fr(size_t n, size_t m, const uint32_t *ea, const uint32_t *eb, const double *w,
                      uint64_t seed, int iterations, double *xy, pm_diag_t *diag);

/* ---- clustering -------------------------------------------------------------------------- */

/* Louvain options. */
typedef struct {
    double resolution; /* >= 0, default 1 */
    uint64_t seed;     /* default 1 */
    unsigned restarts; /* runs, >= 1, default 10 */
    /* Optional, per vertex: names break ties between clusters of equal size and between
     * members of equal strength (by bytes; NULL: by vertex index); share is the second key
     * for a cluster's leading members (NULL: none). */
    const char *const *names;
    const double *share;
    /* Processes that share the work (default 1; 0 counts as 1): see pm_network_run. */
    unsigned workers;
} pm_cluster_opts_t;

void pm_cluster_opts_init(pm_cluster_opts_t *o);

/* What the restarts may cost, bounded before anything is allocated: every run's membership
 * is kept (R x v x 4 bytes for v clustered vertices, at most PM_CLUSTER_MEMB_BYTES) and the
 * stability compares every pair of runs (an adjusted Rand index, a pass over the v vertices
 * each: R(R-1)/2 x v at most PM_CLUSTER_ARI_WORK, some ten seconds), R at most
 * PM_CLUSTER_MAX_RESTARTS in any case. pm_cluster_max_restarts(v) is the largest R within
 * all three (at least 1); a call with more restarts fails with PM_EUSAGE. */
#define PM_CLUSTER_MAX_RESTARTS 1000u
#define PM_CLUSTER_MEMB_BYTES (UINT64_C(1) << 30)
#define PM_CLUSTER_ARI_WORK UINT64_C(2000000000)
unsigned pm_cluster_max_restarts(size_t vertices);

/* Seed of restart r: seed + r * PM_CLUSTER_SEED_STEP (mod 2^64). The step is a large odd
 * constant (2^64 / golden ratio), so the restarts' seeds are far apart and distinct. */
#define PM_CLUSTER_SEED_STEP UINT64_C(0x9E3779B97F4A7C15)

/* Clusters, renumbered 1 .. n_clusters by size (1 = largest; ties by the name of the leading
 * member). A vertex with no usable edge is a cluster of its own (a singleton). */
typedef struct {
    size_t n;          /* vertices */
    uint32_t *cluster; /* [n] 1-based cluster of each vertex */
    size_t n_clusters;
    size_t *size;        /* [n_clusters] size of cluster c+1 */
    uint32_t *members;   /* [n] vertices grouped by cluster, leading member first: by
                          * inner strength, then share, then name */
    size_t *first;       /* [n_clusters + 1] members of cluster c+1 are
                          * members[first[c] .. first[c+1]) */
    double *strength;    /* [n] sum of the vertex's usable edge weights (all clusters) */
    double *inner;       /* [n] the same over edges within the vertex's own cluster */
    size_t n_used_edges; /* edges that took part */
    size_t n_singletons; /* clusters of one vertex */
    double modularity;   /* of the kept partition (igraph_modularity, same weights and
                          * resolution); NaN when no edge took part */
    double stability;    /* mean adjusted Rand index over all pairs of restarts; NaN with
                          * one restart */
    unsigned restarts;
    unsigned best_restart; /* index of the kept run (highest modularity, ties: lowest) */
    double *restart_q;     /* [restarts] modularity of each run */
    /* [restarts * n] every run's community labels, run r at runs[r * n ..] (arbitrary label
     * values; isolated vertices a label of their own); NULL with one restart or no edge */
    uint32_t *runs;
    /* [n_clusters] cluster-wise stability (Hennig 2007, Comput. Stat. Data Anal. 52:258-271):
     * for cluster c+1 of the kept run, the mean over the other runs of the best Jaccard
     * overlap |C & D| / |C | D| with one of their communities D; 1 for every cluster when no
     * edge took part, NaN with one restart */
    double *cluster_stability;
} pm_clusters_t;

/* The name of cluster c (0-based: cluster c + 1) for people: its PM_CLUSTER_NAME_MEMBERS most
 * central members, joined by " · " (U+00B7 between spaces). The most central members are
 * the first of cl->members: the most weight on edges inside the cluster (weighted degree
 * within it), ties by share, then by name. names[v] is the name of vertex v (UTF-8; each
 * writer cleans it for its medium). Returns a new string (free() it); NULL when out of
 * memory or c is out of range. The one naming function of the summary, run.json, nodes.csv,
 * the SVG and the HTML view. O(length of the name). */
#define PM_CLUSTER_NAME_MEMBERS 3
char *pm_cluster_name(const pm_clusters_t *cl, size_t c, const char *const *names);

/* Louvain (igraph_community_multilevel) with weights w (see the note at the top on unusable
 * edges), o->restarts runs from seeds derived from o->seed, the best modularity kept. Vertices
 * are taken in the order given (give them in canonical order for reproducible results).
 * With o->workers > 1 the restarts are split among worker processes as in pm_network_run,
 * with the same results. *out owns the result (pm_clusters_free). Errors: PM_EUSAGE (resolution <
 * 0, restarts 0), PM_EINTERNAL (bad vertex id, igraph failure), PM_ENOMEM. Cost: restarts Louvain
 * runs (about O(m log n) each) plus O(restarts^2 n) for the stability. */
pm_err_t pm_cluster_louvain(size_t n, size_t m, const uint32_t *ea, const uint32_t *eb,
                            const double *w, const pm_cluster_opts_t *o, pm_clusters_t **out,
                            pm_diag_t *diag);
void pm_clusters_free(pm_clusters_t *c);

/* The whole network stage: pm_cluster_louvain(n, m, ea, eb, w, o, clusters, diag) followed by
 * pm_layout_fr(n, m, ea, eb, w, layout_seed, iterations, xy, diag), with the same results,
 * bit for bit, and the same errors in the same order (clustering first), for any
 * o->workers.
 *
 * Workers: with o->workers > 1 the calling process forks up to o->workers - 1 children
 * (never more than there are pieces of work: the o->restarts Louvain runs and the layout).
 * With a layout the layout goes to one child and the restarts are split, in order, among the
 * caller and the other children; each child sends its memberships, modularities or
 * coordinates back through a pipe (or its error: code and igraph's message) and ends with
 * _exit. The caller reads and reaps every child before returning, on every path, and
 * computes itself any share whose child could not be started (pipe or fork failing: EAGAIN,
 * ENOMEM, EMFILE, a sandbox without fork), died, answered short or ran out of memory; such
 * fallbacks are silent and change nothing in the results.
 * Children reset SIGINT and SIGTERM to their defaults (the caller's handlers, e.g. the ones
 * that remove temporary output files, never run in a child), stay in the caller's process
 * group (a terminal's Ctrl-C reaches them) and, on Linux, get SIGKILL when the thread that
 * forked them ends (PR_SET_PDEATHSIG): call this from a thread that outlives the call, such
 * as the main thread. They share the caller's memory copy-on-write: nothing large is copied.
 * A SIGCHLD handler of the caller that reaps children itself does no harm: the answers come
 * through the pipes, and a child already reaped counts as ended.
 *
 * Parameters as for the two calls; xy is out, 2n doubles. *clusters owns the result
 * (pm_clusters_free); on error *clusters is NULL and xy unspecified. Errors: those of
 * pm_cluster_louvain, then those of pm_layout_fr. Cost: that of the two calls, spread over
 * the workers, plus one fork per child (copying its page tables: about 10 ms for a process of
 * 330 MB, measured). */
pm_err_t pm_network_run(size_t n, size_t m, const uint32_t *ea, const uint32_t *eb, const double *w,
                        const pm_cluster_opts_t *o, uint64_t layout_seed, int iterations,
                        pm_clusters_t **clusters, double *xy, pm_diag_t *diag);

/* ---- clusters at more than one scale (src/multiscale.c) ------------------------------------ */

/* A cluster is big when it holds more than this share of the clustered items (the vertices
 * with a usable edge: the ones Louvain groups; items on their own are not counted, or a long
 * tail of unclustered items would hide any tangle). */
#define PM_BIG_CLUSTER_SHARE 0.25
/* The resolutions tried on the same graph when a cluster is big, besides the map's own. */
#define PM_TRIED_RESOLUTIONS                                                                       \
    { 0.5, 1.0, 1.5, 2.0, 3.0 }
#define PM_N_TRIED_RESOLUTIONS 5

/* One resolution tried on the whole graph: one Louvain run from the seed of restart 0 (the
 * map's own resolution: the kept partition of its restarts instead). */
typedef struct {
    double resolution;
    int own;              /* 1: the map's own --resolution (the kept partition) */
    double modularity;    /* at this resolution (igraph_modularity) */
    double modularity_1;  /* the same partition's modularity at resolution 1: comparable */
    size_t n_clusters;    /* clusters of two or more items */
    size_t largest;       /* items in the largest cluster */
    double largest_share; /* largest / clustered */
    uint32_t *cluster;    /* [n] 1-based cluster of each vertex (by size, as pm_clusters_t) */
    size_t n_all;         /* clusters, singletons included */
    uint32_t *grouped;    /* [n] the vertices by cluster, increasing within one */
    size_t *first;        /* [n_all + 1] cluster c + 1 is grouped[first[c] .. first[c + 1]) */
} pm_tried_resolution_t;

/* The next level inside the big clusters, and the resolutions tried. Big clusters are
 * clusters 1 .. n_big (clusters are numbered by size). The next level of big cluster k + 1 is
 * Louvain run again on the cluster's own graph (its members and the usable edges between
 * them), with the same restarts, seeds and workers as the map, at sub_resolution: the map's
 * resolution or 1, whichever is higher. Nested in the cluster by construction, the same for
 * the same seed and any number of workers. On the cluster's own graph, with its own null
 * model, the same resolution is a finer scale than on the whole graph (modularity's
 * resolution limit, Fortunato & Barthelemy 2007, PNAS 104:36-41); the floor of 1 keeps a low
 * resolution, asked for to merge clusters, from merging their parts again. */
typedef struct {
    size_t n;             /* vertices */
    size_t clustered;     /* vertices with a usable edge */
    double largest_share; /* cluster 1's size / clustered (0 when nothing is clustered) */
    size_t n_big;
    double sub_resolution; /* of the next level: max(map's resolution, 1) */
    /* [n_big] the sub-clustering of cluster k + 1 over its members: local vertex j is the
     * vertex members[first[k] + j] of the map's clusters; sub[k]->modularity is the
     * modularity within the cluster's own graph at sub_resolution */
    pm_clusters_t **sub;
    char ***sub_name; /* [n_big][sub[k]->n_clusters] pm_cluster_name of each sub-cluster */
    /* [n] 1-based sub-cluster of the vertex within its cluster; 0 outside the big clusters
     * and in a big cluster that does not split (one sub-cluster) */
    uint32_t *subcluster;
    size_t n_tried; /* 0 when no cluster is big: nothing is tried */
    pm_tried_resolution_t tried[PM_N_TRIED_RESOLUTIONS + 1]; /* by resolution, increasing */
    int suggested; /* index into tried: the resolution with the highest modularity at 1 among
                    * those whose largest cluster holds no more than PM_BIG_CLUSTER_SHARE (ties:
                    * the lower resolution); -1 when none does */
} pm_multiscale_t;

/* Fills *out for the graph (n, m, ea, eb, w) and its clusters cl (from pm_cluster_louvain or
 * pm_network_run with the same graph and options o). o->names (needed) names the sub-clusters
 * with pm_cluster_name; o->share orders their members as for the clusters. When no cluster
 * is big, nothing is run (n_big and n_tried 0, subcluster all 0). Otherwise, per big cluster,
 * o->restarts Louvain runs on its own graph (shared among o->workers processes), and one run
 * on the whole graph per resolution tried (PM_TRIED_RESOLUTIONS other than o->resolution).
 * *out owns everything (pm_multiscale_free). Errors: those of pm_cluster_louvain and
 * pm_modularity, PM_ENOMEM. */
pm_err_t pm_multiscale_run(size_t n, size_t m, const uint32_t *ea, const uint32_t *eb,
                           const double *w, const pm_cluster_opts_t *o, const pm_clusters_t *cl,
                           pm_multiscale_t **out, pm_diag_t *diag);
void pm_multiscale_free(pm_multiscale_t *ms);

/* Adjusted Rand index (Hubert & Arabie 1985) of two partitions of n elements given as
 * labels (any values); computed from the contingency table. 1 for identical partitions;
 * defined as 1 when both partitions are trivial in the same way (all one cluster, or all
 * singletons). Errors: PM_ENOMEM. */
pm_err_t pm_adjusted_rand(size_t n, const uint32_t *x, const uint32_t *y, double *ari,
                          pm_diag_t *diag);

/* Modularity (Newman 2004, with resolution gamma) of a partition with weights w; unusable
 * edges are left out as above. NaN when no edge has positive weight. Uses igraph_modularity. */
pm_err_t pm_modularity(size_t n, size_t m, const uint32_t *ea, const uint32_t *eb, const double *w,
                       const uint32_t *membership, double resolution, double *q, pm_diag_t *diag);

#ifdef __cplusplus
}
#endif
#endif
