/* Private to `pairmap map`: the run's state (src/cli/cmd_map.c, the command) and its files
 * (src/cli/map_files.c: the writer threads, the files and run.json, the commit). */
#ifndef PM_CLI_CMD_MAP_H
#define PM_CLI_CMD_MAP_H

#include <pthread.h>
#include <stdbool.h>
#include <stdio.h>

#include "cli.h"
#include "map_segments.h"
#include "pairmap/network.h"
#include "pairmap/outfile.h"
#include "pairmap/svgmap.h"

typedef struct {
    uint64_t seed, restarts, iterations, draw, width, height;
    double resolution;
    const char *dir, *title;
    int color_by;
    bool html; /* map.html too (not --no-html) */
} net_opts;

typedef struct {
    pm_table_t *t;
    pm_incidence_t *inc;
    pm_pairs_t *pp;
    pm_edges_t *e;
    pm_clusters_t *cl;
    pm_multiscale_t *ms; /* the big clusters' sub-clusters, the resolutions tried */
    char **sub_label;    /* [sub-clusters of the big clusters] "K.S: NAME", for the legend */
    uint32_t *sub_of;    /* [same] its 0-based cluster */
    size_t *sub_size;    /* [same] its items */
    size_t n_sub_labels;
    pm_outdir_t *od;
    size_t n;
    uint32_t *item, *vof, *ea, *eb, *degree;
    double *wuse, *share, *xy;
    unsigned char *negative; /* [edges] phi < 0 */
    const char **names;
    char **cluster_name;
    int *cluster_int;
    size_t n_negative;
    double t_read, t_count, t_measures, t_graph, t_write;
    pm_svg_stats_t svg;
    pm_cli_mapseg_t seg; /* --segment-col: segments.csv, segments.svg */
    int iterations;      /* the layout's, resolved */
    unsigned csv_flags;  /* --csv-raw */
    unsigned threads;    /* --threads (0: one per core) */
    int with_strat;      /* --segment-col: edges.csv gains the within-segment columns */
    pm_strat_t *strat;   /* [e->n] (NULL: empty cells, weighted input) */
    const char *within;  /* --pair-test within: the column of the test, else NULL */
    /* edges.csv needs no clusters, layout or picture: with more than one thread it is
     * written on a thread of its own beside all the other files */
    struct {
        FILE *fp;
        pthread_t th;
        int running;
        pm_err_t rc;
        pm_diag_t d;
    } early;
} run_state;

/* "pairmap: out of memory" on stderr; returns the exit status 4. */
int pm_cli_map_oom(void);
/* Starts the early thread (see run_state) unless threads is 1; without it the files' step
 * does the same work. */
void pm_cli_map_early_start(run_state *s, unsigned threads);
void pm_cli_map_early_join(run_state *s);
/* Writes the four files on two threads beside the early one, then run.json, and commits the
 * directory. Returns the exit status (0: done). */
int pm_cli_map_write_files(const pm_cli_t *c, const net_opts *no, const pm_select_opts_t *sel,
                           run_state *s);

#endif
