/* Test hooks of the network stage (src/network.c): faults to inject into its worker processes
 * and counts of what the last call did. Never installed; only tests use them. Not
 * thread-safe, like the rest of network.c. */
#ifndef PM_NETWORK_INTERNAL_H
#define PM_NETWORK_INTERNAL_H

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

/* Sets the faults (NULL: none) for all later calls until changed. */
void pm_i_network_set_faults(const pm_i_network_faults_t *f);

/* What the last pm_cluster_louvain or pm_network_run call did. */
typedef struct {
    unsigned shares;          /* pieces of work the call was split into (1: serial) */
    unsigned forked;          /* child processes started */
    unsigned from_child;      /* shares whose result (or error) came from a child */
    unsigned redone;          /* shares the parent computed itself after a failed spawn or child */
    unsigned layout_restarts; /* Louvain runs the layout's share took as well */
    unsigned helped;          /* of those, runs the parent made itself while the child laid out */
} pm_i_network_stats_t;

void pm_i_network_get_stats(pm_i_network_stats_t *s);

#endif
