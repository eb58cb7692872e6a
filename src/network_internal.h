/* Private to the network stage: src/network_graph.c (igraph set-up and errors, the usable
 * edges, modularity, adjusted Rand index), src/network_layout.c (Fruchterman-Reingold),
 * src/network_louvain.c (restarts, cluster order) and src/network.c (the work shared among
 * worker processes, the public calls). Also the test hooks: faults to inject into the worker
 * processes and counts of what a call did, carried down by each call in a context of its own
 * (pm_i_network_hooks_t), never in file-scope state. Never installed; only tests use them. */
#ifndef PM_NETWORK_INTERNAL_H
#define PM_NETWORK_INTERNAL_H

#include <stddef.h>
#include <stdint.h>

#include "pairmap/network.h"

/* Spawns of one call are numbered 1, 2, ... in the order the children are forked. A field
 * left 0 (bad_restart: -1) injects nothing. */
typedef struct {
    int pipe_fail_from; /* pipe() "fails" (EMFILE) for spawn k and every later one */
    int fork_fail_from; /* fork() "fails" (EAGAIN) for spawn k and every later one */
    int child_dies;     /* the child of spawn k exits with status 1 before writing anything */
    int child_killed;   /* the child of spawn k kills itself with SIGKILL before writing */
    int child_short;    /* the child of spawn k writes half of its result, then exits 0 */
    int child_nomem;    /* the child of spawn k reports PM_ENOMEM instead of computing */
    long bad_restart;   /* >= 0: that Louvain restart calls igraph with resolution -1, a real
                         * igraph error (in whichever process runs it, serial runs too) */
    int bad_layout;     /* the layout calls igraph with -1 iterations: a real igraph error */
    int child_slow;     /* the layout's child waits after its layout until the parent has
                         * stopped helping (so the parent runs every restart it can) */
} pm_i_network_faults_t;

/* What a pm_i_network_call did. */
typedef struct {
    unsigned shares;          /* pieces of work the call was split into (1: serial) */
    unsigned forked;          /* child processes started */
    unsigned from_child;      /* shares whose result (or error) came from a child */
    unsigned redone;          /* shares the parent computed itself after a failed spawn or child */
    unsigned layout_restarts; /* Louvain runs the layout's share took as well */
    unsigned helped;          /* of those, runs the parent made itself while the child laid out */
} pm_i_network_stats_t;

/* What one call carries down to every step: the faults to inject (none outside tests) and
 * the counts of what it did. */
typedef struct {
    pm_i_network_faults_t faults;
    pm_i_network_stats_t stats;
} pm_i_network_hooks_t;

/* hooks with no fault */
void pm_i_network_hooks_init(pm_i_network_hooks_t *h);

/* Fills c->cluster_stability (see pm_clusters_t) from c->runs and the kept run
 * (src/clusterstab.c). Errors: PM_ENOMEM. */
pm_err_t pm_i_cluster_stability(pm_clusters_t *c, pm_diag_t *diag);

/* pm_cluster_louvain (layout 0) and pm_network_run (layout 1, xy[2n]) with the hooks h. */
pm_err_t pm_i_network_call(pm_i_network_hooks_t *h, size_t n, size_t m, const uint32_t *ea,
                           const uint32_t *eb, const double *w, const pm_cluster_opts_t *o,
                           int layout, uint64_t layout_seed, int iterations, pm_clusters_t **out,
                           double *xy, pm_diag_t *diag);
/* pm_layout_fr with the hooks h. */
pm_err_t pm_i_layout_call(pm_i_network_hooks_t *h, size_t n, size_t m, const uint32_t *ea,
                          const uint32_t *eb, const double *w, uint64_t seed, int iterations,
                          double *xy, pm_diag_t *diag);

#ifdef PM_NETWORK_STAGE /* the stage's own files only (they include igraph) */
#include <igraph.h>
#include <stdatomic.h>

/* ---- src/network_graph.c ---- */
/* igraph's error handler takes no user pointer: the last non-empty reason igraph gave goes to
 * a buffer of the calling thread, cleared before each igraph call (pm_i_net_reason_clear) and
 * read right after it into the call's diagnostic (pm_i_net_from_igraph). */
void pm_i_net_reason_clear(void);
pm_err_t pm_i_net_from_igraph(igraph_error_t rc, const char *what, pm_diag_t *diag);

/* The edges that take part (see network.h), renumbered to the vertices that have one. */
typedef struct {
    size_t nv;              /* vertices with a usable edge */
    size_t me;              /* usable edges */
    uint32_t *newid;        /* [n] new id, or UINT32_MAX for isolated vertices */
    uint32_t *oldid;        /* [nv] */
    igraph_integer_t *ends; /* [2 me] new ids */
    double *w;              /* [me] */
} pm_i_usable;

void pm_i_usable_free(pm_i_usable *u);
int pm_i_edge_ok(const uint32_t *ea, const uint32_t *eb, const double *w, size_t k);
/* renumber: 1 to drop the vertices without usable edges, 0 to keep all n (newid = id). */
pm_err_t pm_i_usable_init(pm_i_usable *u, size_t n, size_t m, const uint32_t *ea,
                          const uint32_t *eb, const double *w, int renumber, pm_diag_t *diag);
/* Builds the igraph graph and weight vector of u (both to be destroyed by the caller). */
igraph_error_t pm_i_make_graph(const pm_i_usable *u, igraph_t *g, igraph_vector_t *wv,
                               double scale);

/* ---- src/network_layout.c ---- */
/* igraph's Fruchterman-Reingold on the usable edges; out gets 2 u->nv raw coordinates. */
igraph_error_t pm_i_fr_run(const pm_i_network_hooks_t *h, const pm_i_usable *u, uint64_t seed,
                           int iterations, double *out);
/* The raw layout pos (2 u->nv, from pm_i_fr_run; NULL when u->nv is 0) scaled into the unit
 * box, the isolated vertices on the ring (see network.h): fills xy[2n]. */
pm_err_t pm_i_layout_finish(const pm_i_usable *u, size_t n, const double *pos, double *xy,
                            pm_diag_t *diag);

/* ---- src/network_louvain.c ---- */
/* Flags of the restarts in memory shared with the children (see network.c): claimed[r] is
 * set by the layout's child before it runs restart r, helped[r] by the parent once it has
 * run r itself; either skips what the other has. */
typedef struct {
    atomic_uchar *claimed, *helped; /* [R] */
    atomic_uchar *over;             /* set once the parent has stopped helping (tests wait) */
} pm_i_help_flags;

igraph_error_t pm_i_louvain_runs(pm_i_network_hooks_t *h, const pm_i_usable *u, double resolution,
                                 uint64_t seed, unsigned r0, unsigned r1, uint32_t *memb, double *q,
                                 const pm_i_help_flags *hf, int down, unsigned char *done);
/* Groups the vertices by raw label (raw[i] for vertex i), orders members and clusters and
 * fills c->cluster, size, members, first. */
pm_err_t pm_i_finish_clusters(pm_clusters_t *c, const pm_cluster_opts_t *o, const uint32_t *raw,
                              pm_diag_t *diag);
#endif

#endif
