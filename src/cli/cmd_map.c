/* pairmap map: the whole job. Reads, counts, scores and selects pairs, clusters the items
 * (Louvain with restarts), lays them out (Fruchterman-Reingold) and writes DIR/map.graphml,
 * map.svg, edges.csv, nodes.csv and run.json atomically; a summary goes to stdout. */
#include <math.h>
#include <stdbool.h>
#include <pthread.h>
#include <signal.h>
#include <stdatomic.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "cli.h"
#include "pairmap/mapwrite.h"
#include "pairmap/network.h"
#include "map_segments.h"
#include "pairmap/outfile.h"
#include "pairmap/svgmap.h"
#include "pairmap/write.h"

static const char help[] =
    "Usage: pairmap map INPUT -o DIR [options]\n"
    "\n"
    "The whole job: pairs that hold up become edges, Louvain clusters the items, a\n"
    "Fruchterman-Reingold layout places them, and DIR receives\n"
    "  map.graphml  GraphML 1.0 for graph viewers (node data name, category, respondents,\n"
    "               share, cluster, x, y; edge data together, phi, lift, jaccard, q_value,\n"
    "               weight)\n"
    "  map.svg      the picture, for a report\n"
    "  map.html     the same picture in one offline page to explore in a browser: find an\n"
    "               item, its partners with the numbers of `pairmap partners`, clusters,\n"
    "               phi and q filters, zoom; the view is kept in the address's #fragment\n"
    "               (item=NAME, cluster=N, phi=F, q=F); nothing is fetched from anywhere\n"
    "  edges.csv    the kept pairs, columns as `pairmap pairs`\n"
    "  nodes.csv    " PM_NODES_HEADER "\n"
    "               (one row per eligible item; rows by cluster, then share descending,\n"
    "               then name; x, y in the unit box, items without edges on a ring outside)\n"
    "  run.json     version, options, input size and SHA-256, counts, pairs removed by each\n"
    "               threshold, clusters, modularity, stability, and seconds per stage under\n"
    "               \"timings\" (the one part that differs between identical runs)\n"
    "A summary goes to standard output. DIR is created if missing. Every file is written to a\n"
    "temporary file in DIR first and all are renamed into place only when all are complete:\n"
    "a failed or interrupted run leaves the files already in DIR untouched.\n"
    "\n"
    "Network:\n"
    "  -o, --output DIR      output directory (required)\n"
    "  --seed N              seed of the clustering and the layout (default 1)\n"
    "  --restarts R          Louvain runs (default 10); run r uses seed + r * 0x9E3779B97F4A7C15\n"
    "                        (mod 2^64). The run with the highest modularity is kept (ties: the\n"
    "                        first); stability is the mean adjusted Rand index between the\n"
    "                        runs' partitions (1 = every run found the same clusters)\n"
    "  --resolution F        Louvain resolution (default 1; higher gives more, smaller clusters)\n"
    "  --iterations N        Fruchterman-Reingold iterations (default 500 up to 1,000 items\n"
    "                        with edges; above, 500,000 / items, at least 150)\n"
    "  --title TEXT          title of the picture (also stored in the GraphML)\n"
    "  --draw N              how many items the SVG draws (default: as many as fit); the\n"
    "                        GraphML and CSV files keep all\n"
    "  --width PX, --height PX   size of the SVG canvas\n"
    "  --color-by cluster|category   fill of the SVG's items (default cluster)\n"
    "  --no-html             do not write map.html\n"
    "Edges are weighted by --measure. Only edges with phi > 0 take part in clustering and\n"
    "layout (both need positive weights): under --sign negative or both, the negative edges\n"
    "are written to the files but take no part in clustering or layout. An item with no such\n"
    "edge is a cluster of its own (a singleton) and sits on a ring outside the layout's box.\n"
    "Clusters are numbered by size (1 = largest) and named by their leading members (most\n"
    "weight on edges inside the cluster, then share). Same input, options and seed: the same\n"
    "files, byte for byte, for any row order of the input and any --threads (the Louvain runs\n"
    "and the layout share --threads processes).\n"
    "\n";

/* ---- interruption ------------------------------------------------------------------------ */
/* SIGINT, SIGTERM, SIGHUP and SIGQUIT are blocked here, before any thread starts, so every
 * thread inherits the mask; one thread receives them with sigwait and stops the run through
 * pm_outdir_stop, which waits for a commit in progress. SIGXFSZ is ignored: a write over the
 * file-size limit fails as an I/O error with the usual clean-up. */
static sigset_t g_stop_set;
static atomic_int g_stop_sig; /* the signal received, published before pm_outdir_stop */
static pthread_t g_sig_thread;
static int g_sig_running; /* the sigwait thread started (main thread only) */

static void *signal_main(void *arg) {
    (void)arg;
    int sig = 0;
    while (sigwait(&g_stop_set, &sig) != 0) {
    }
    if (sig == SIGUSR2) {
        return NULL; /* release_signals: the run is over */
    }
    atomic_store(&g_stop_sig, sig);
    int replaced = pm_outdir_stop();
    const char *msg = replaced ? "\npairmap: interrupted after the outputs were replaced; the new "
                                 "files are kept\n"
                               : "\npairmap: interrupted; no output file was replaced\n";
    ssize_t w = write(STDERR_FILENO, msg, strlen(msg));
    (void)w;
    _exit(sig == SIGINT ? 130 : 143); /* README: 130 SIGINT, 143 SIGTERM, SIGHUP, SIGQUIT */
}

static void catch_signals(void) {
    sigemptyset(&g_stop_set);
    sigaddset(&g_stop_set, SIGINT);
    sigaddset(&g_stop_set, SIGTERM);
    sigaddset(&g_stop_set, SIGHUP);
    sigaddset(&g_stop_set, SIGQUIT);
    sigaddset(&g_stop_set, SIGUSR2); /* sent by release_signals only */
    pthread_sigmask(SIG_BLOCK, &g_stop_set, NULL);
    signal(SIGXFSZ, SIG_IGN);
    signal(SIGPIPE, SIG_IGN); /* a closed stdout: EPIPE, exit 3, the lock removed on the way */
    if (pthread_create(&g_sig_thread, NULL, signal_main, NULL) == 0) {
        g_sig_running = 1;
    } else {
        pthread_sigmask(SIG_UNBLOCK, &g_stop_set, NULL); /* default action: better than none */
    }
}

/* Ends the sigwait thread (joined: nothing of it outlives the run, which valgrind checks) and
 * unblocks the stop signals, so one that came after the run's last step takes its default
 * action. */
static void release_signals(void) {
    if (g_sig_running) {
        pthread_kill(g_sig_thread, SIGUSR2);
        pthread_join(g_sig_thread, NULL);
        g_sig_running = 0;
        sigset_t stop = g_stop_set;
        sigdelset(&stop, SIGUSR2);
        pthread_sigmask(SIG_UNBLOCK, &stop, NULL);
    }
}

/* ---- the run ------------------------------------------------------------------------------ */
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
    int with_strat;      /* --segment-col: edges.csv gains the within-segment columns */
    pm_strat_t *strat;   /* [e->n] (NULL: empty cells, weighted input) */
    /* edges.csv and the share intervals of nodes.csv need no clusters: with more than one
     * thread they are done on a thread of their own while the graph stage runs */
    struct {
        FILE *fp;
        pthread_t th;
        int running;
        pm_err_t rc;
        pm_diag_t d;
        uint32_t *items;
        size_t n;
        double *lo, *hi;
    } early;
} run_state;

static void early_join(run_state *s) {
    if (s->early.running) {
        pthread_join(s->early.th, NULL);
        s->early.running = 0;
    }
}

static void state_free(run_state *s) {
    early_join(s);
    pm_cli_mapseg_free(&s->seg);
    free(s->strat);
    free(s->early.items);
    free(s->early.lo);
    free(s->early.hi);
    if (s->cluster_name) {
        for (size_t i = 0; s->cl && i < s->cl->n_clusters; i++) {
            free(s->cluster_name[i]);
        }
    }
    free(s->cluster_name);
    free(s->cluster_int);
    free(s->item);
    free(s->vof);
    free(s->ea);
    free(s->eb);
    free(s->degree);
    free(s->wuse);
    free(s->negative);
    free(s->share);
    free(s->xy);
    free(s->names);
    pm_clusters_free(s->cl);
    pm_outdir_free(s->od);
    pm_edges_free(s->e);
    pm_pairs_free(s->pp);
    pm_incidence_free(s->inc);
    pm_table_free(s->t);
}

static int oom(void) {
    fputs("pairmap: out of memory\n", stderr);
    return 4;
}

static int build_network(const pm_cli_t *c, const net_opts *no, const pm_select_opts_t *sel,
                         run_state *s) {
    const pm_pairs_t *pp = s->pp;
    const pm_incidence_t *inc = s->inc;
    size_t ni = inc->n_items, m = s->e->n;
    s->n = pp->n_eligible;
    s->item = malloc((s->n ? s->n : 1) * sizeof *s->item);
    s->vof = malloc((ni ? ni : 1) * sizeof *s->vof);
    s->names = malloc((s->n ? s->n : 1) * sizeof *s->names);
    s->share = malloc((s->n ? s->n : 1) * sizeof *s->share);
    s->degree = calloc(s->n ? s->n : 1, sizeof *s->degree);
    s->xy = malloc((s->n ? s->n : 1) * 2 * sizeof *s->xy);
    s->ea = malloc((m ? m : 1) * sizeof *s->ea);
    s->eb = malloc((m ? m : 1) * sizeof *s->eb);
    s->wuse = malloc((m ? m : 1) * sizeof *s->wuse);
    s->negative = calloc(m ? m : 1, 1);
    if (!s->item || !s->vof || !s->names || !s->share || !s->degree || !s->xy || !s->ea || !s->eb ||
        !s->wuse || !s->negative) {
        return oom();
    }
    size_t v = 0;
    for (size_t i = 0; i < ni; i++) {
        s->vof[i] = UINT32_MAX;
        if (pp->eligible[i]) {
            s->item[v] = (uint32_t)i;
            s->names[v] = inc->name[i];
            s->share[v] = pm_incidence_share(inc, i);
            s->vof[i] = (uint32_t)v++;
        }
    }
    for (size_t k = 0; k < m; k++) {
        size_t idx = s->e->idx[k];
        pm_measures_t ms;
        pm_pairs_measures(pp, inc, idx, &ms);
        s->ea[k] = s->vof[pp->a[idx]];
        s->eb[k] = s->vof[pp->b[idx]];
        s->degree[s->ea[k]]++;
        s->degree[s->eb[k]]++;
        double w = s->e->weight[k];
        s->negative[k] = ms.phi < 0;
        if (ms.phi > 0 && isfinite(w) && w > 0) {
            s->wuse[k] = w;
        } else {
            s->wuse[k] = 0; /* negative association: in the files, not in clusters or layout */
            s->n_negative++;
        }
    }
    (void)sel;
    pm_cluster_opts_t co;
    pm_cluster_opts_init(&co);
    co.resolution = no->resolution;
    co.seed = no->seed;
    co.restarts = (unsigned)no->restarts;
    co.names = s->names;
    co.share = s->share;
    /* --threads: the restarts and the layout run in that many processes (igraph is not
     * thread-safe), with the same results for any number */
    unsigned threads = 0;
    (void)pm_cli_threads(c, &threads); /* validated earlier */
    co.workers = threads ? threads : pm_cpu_count();
    pm_diag_t d;
    pm_diag_clear(&d);
    /* the layout's iterations: as given, else the default for the items with edges */
    s->iterations = (int)no->iterations;
    if (s->iterations <= 0 &&
        (s->iterations = pm_layout_default_iterations_for(s->n, m, s->ea, s->eb, s->wuse)) < 0) {
        return oom();
    }
    if (pm_network_run(s->n, m, s->ea, s->eb, s->wuse, &co, no->seed, s->iterations, &s->cl, s->xy,
                       &d)) {
        return pm_cli_fail(&d);
    }
    s->cluster_name = calloc(s->cl->n_clusters ? s->cl->n_clusters : 1, sizeof *s->cluster_name);
    s->cluster_int = malloc((s->n ? s->n : 1) * sizeof *s->cluster_int);
    if (!s->cluster_name || !s->cluster_int) {
        return oom();
    }
    for (size_t k = 0; k < s->cl->n_clusters; k++) {
        if (!(s->cluster_name[k] = pm_cluster_name(s->cl, k, s->names))) {
            return oom();
        }
    }
    for (size_t k = 0; k < s->n; k++) {
        s->cluster_int[k] = (int)s->cl->cluster[k];
    }
    return 0;
}

/* ---- run.json ------------------------------------------------------------------------------ */
static void json_options(pm_json_t *j, const pm_cli_t *c) {
    pm_json_begin_object(j, "options");
    for (size_t i = 0; i < c->nopts; i++) {
        const char *name = c->opt[i].name;
        if (c->opt[i].n > 1 || strcmp(name, "item") == 0 || strcmp(name, "drop-item") == 0 ||
            strcmp(name, "columns") == 0 || strcmp(name, "drop-value") == 0 ||
            strcmp(name, "skip-col") == 0) {
            pm_json_begin_array(j, name);
            for (size_t k = 0; k < c->opt[i].n; k++) {
                pm_json_string(j, NULL, c->opt[i].vals[k]);
            }
            pm_json_end_array(j);
        } else if (strcmp(name, "quiet") == 0 || strcmp(name, "no-header") == 0) {
            pm_json_bool(j, name, true);
        } else {
            pm_json_string(j, name, c->opt[i].vals[0]);
        }
    }
    pm_json_end_object(j);
}

static pm_err_t write_run_json(FILE *fp, const pm_cli_t *c, const net_opts *no,
                               const pm_select_opts_t *sel, const run_state *s,
                               const char *const *files, size_t nfiles, pm_diag_t *d) {
    const pm_input_stats_t *st = pm_table_stats(s->t);
    const pm_incidence_t *inc = s->inc;
    const pm_pairs_t *pp = s->pp;
    const pm_edges_t *e = s->e;
    const pm_clusters_t *cl = s->cl;
    pm_json_t j;
    pm_json_init(&j, fp);
    pm_json_begin_object(&j, NULL);
    pm_json_string(&j, "pairmap", pm_version());
    pm_json_string(&j, "command", "map");
    pm_json_string(&j, "input", c->input);
    json_options(&j, c);
    pm_json_begin_object(&j, "settings");
    static const char *const formats[] = {"long", "lines", "wide"};
    pm_input_opts_t io;
    pm_cli_input_opts(c, &io);
    pm_json_string(&j, "format", formats[io.format]);
    pm_json_bool(&j, "weighted", inc->wcount != NULL);
    pm_json_uint(&j, "min_count", sel->min_count);
    pm_json_number(&j, "min_share", sel->min_share);
    pm_json_number(&j, "max_q", sel->max_q);
    pm_json_number(&j, "min_phi", sel->min_phi);
    pm_json_number(&j, "min_lift", sel->min_lift);
    if (sel->top_edges) {
        pm_json_uint(&j, "top_edges", sel->top_edges);
    } else {
        pm_json_null(&j, "top_edges");
    }
    pm_json_string(&j, "sign", pm_sign_name(sel->sign));
    pm_json_string(&j, "measure", pm_measure_name(sel->measure));
    pm_json_uint(&j, "seed", no->seed);
    pm_json_uint(&j, "restarts", no->restarts);
    pm_json_string(&j, "restart_seeds", "seed + r * 0x9E3779B97F4A7C15 (mod 2^64), r = 0..R-1");
    pm_json_number(&j, "resolution", no->resolution);
    pm_json_uint(&j, "iterations", (uint64_t)s->iterations);
    pm_json_end_object(&j);

    pm_json_begin_object(&j, "input_file");
    pm_json_string(&j, "name", pm_table_source(s->t));
    pm_json_uint(&j, "bytes", st->bytes);
    char hex[65];
    for (int i = 0; i < 32; i++) {
        snprintf(hex + 2 * i, 3, "%02x", st->sha256[i]);
    }
    pm_json_string(&j, "sha256", hex);
    pm_json_end_object(&j);
    pm_cli_counts_json(&j); /* --from-counts: the shard and the parts it holds */

    pm_json_begin_object(&j, "counts");
    pm_json_uint(&j, "lines", st->lines);
    pm_json_uint(&j, "records", st->records);
    pm_json_uint(&j, "rows_read", st->rows);
    pm_json_uint(&j, "rows_without_item", st->empty_items);
    pm_json_uint(&j, "rows_merged", st->merged_rows);
    pm_json_uint(&j, "merge_entries", st->merge_entries);
    pm_json_uint(&j, "rows_dropped", st->dropped_rows);
    pm_json_uint(&j, "duplicate_rows", inc->duplicates);
    pm_json_uint(&j, "respondents_seen", st->respondents);
    pm_json_uint(&j, "respondents_left_out", st->blank_excluded);
    pm_json_uint(&j, "respondents", inc->N);
    pm_json_uint(&j, "respondents_one_item", inc->single_item);
    pm_json_uint(&j, "respondents_no_item", inc->no_item);
    pm_json_uint(&j, "items", inc->n_items);
    pm_json_uint(&j, "items_eligible", pp->n_eligible);
    pm_json_uint(&j, "items_chosen_by_none", pp->excluded_none);
    pm_json_uint(&j, "items_chosen_by_all", pp->excluded_all);
    pm_json_uint(&j, "items_below_min_share", pp->excluded_share);
    pm_json_end_object(&j);

    pm_json_begin_object(&j, "pairs");
    pm_json_uint(&j, "tested", e->tested);
    pm_json_uint(&j, "seen_together", pp->seen);
    pm_json_uint(&j, "never_seen", e->never_seen);
    pm_json_uint(&j, "kept", e->n);
    pm_json_begin_object(&j, "removed");
    pm_json_uint(&j, "min_count", e->removed_count);
    pm_json_uint(&j, "sign", e->removed_sign);
    pm_json_uint(&j, "max_q", e->removed_q);
    pm_json_uint(&j, "min_phi", e->removed_phi);
    pm_json_uint(&j, "min_lift", e->removed_lift);
    pm_json_uint(&j, "top_edges", e->removed_top);
    pm_json_end_object(&j);
    pm_json_uint(&j, "negative_not_clustered", s->n_negative);
    pm_json_end_object(&j);

    pm_json_begin_object(&j, "network");
    pm_json_uint(&j, "vertices", s->n);
    pm_json_uint(&j, "edges", e->n);
    pm_json_uint(&j, "edges_clustered", cl->n_used_edges);
    pm_json_uint(&j, "clusters", cl->n_clusters);
    pm_json_uint(&j, "singletons", cl->n_singletons);
    pm_json_number(&j, "modularity", cl->modularity);
    pm_json_number(&j, "stability", cl->stability);
    pm_json_uint(&j, "best_restart", cl->best_restart);
    pm_json_begin_array(&j, "restart_modularity");
    for (unsigned r = 0; r < cl->restarts; r++) {
        pm_json_number(&j, NULL, cl->restart_q[r]);
    }
    pm_json_end_array(&j);
    pm_json_end_object(&j);

    pm_json_begin_array(&j, "clusters");
    for (size_t k = 0; k < cl->n_clusters; k++) {
        pm_json_begin_object(&j, NULL);
        pm_json_uint(&j, "cluster", k + 1);
        pm_json_uint(&j, "size", cl->size[k]);
        pm_json_string(&j, "name", s->cluster_name[k]);
        pm_json_begin_array(&j, "members");
        for (size_t t = cl->first[k]; t < cl->first[k + 1]; t++) {
            pm_json_string(&j, NULL, s->names[cl->members[t]]);
        }
        pm_json_end_array(&j);
        pm_json_end_object(&j);
    }
    pm_json_end_array(&j);

    pm_cli_mapseg_json(&s->seg, &j);
    pm_json_begin_object(&j, "svg");
    pm_json_uint(&j, "items_drawn", s->svg.drawn);
    pm_json_uint(&j, "items_left_out", s->svg.left_out);
    pm_json_uint(&j, "edges_drawn", s->svg.edges_drawn);
    pm_json_end_object(&j);

    pm_json_begin_array(&j, "files");
    for (size_t k = 0; k < nfiles; k++) {
        pm_json_string(&j, NULL, files[k]);
    }
    pm_json_end_array(&j);

    /* last, and the one part that varies between identical runs */
    pm_json_begin_object(&j, "timings");
    pm_json_number(&j, "read", s->t_read);
    pm_json_number(&j, "count", s->t_count);
    pm_json_number(&j, "measures", s->t_measures);
    pm_json_number(&j, "graph", s->t_graph);
    pm_json_number(&j, "write", s->t_write);
    pm_json_end_object(&j);
    pm_json_end_object(&j);
    return pm_json_finish(&j, d);
}

/* ---- files ----------------------------------------------------------------------------------- */
static void thresholds_text(char *buf, size_t size, const pm_select_opts_t *sel) {
    int n = snprintf(buf, size, "together >= %u, q <= %g, %s associations", sel->min_count,
                     sel->max_q, pm_sign_name(sel->sign));
    if (sel->min_phi > 0 && n > 0 && (size_t)n < size) {
        n += snprintf(buf + n, size - (size_t)n, ", |phi| >= %g", sel->min_phi);
    }
    if (sel->min_lift > 0 && n > 0 && (size_t)n < size) {
        n += snprintf(buf + n, size - (size_t)n, ", lift >= %g", sel->min_lift);
    }
    if (sel->top_edges && n > 0 && (size_t)n < size) {
        snprintf(buf + n, size - (size_t)n, ", top %zu edges", sel->top_edges);
    }
}

typedef struct {
    const pm_map_t *map;
    FILE *graphml, *nodes;
    pm_err_t *rc_graphml, *rc_nodes;
    pm_diag_t *d_graphml, *d_nodes;
} side_job;

/* Pushes what a finished file has written so far to the disk from the thread that wrote it,
 * while the other thread still writes; pm_outdir_finish flushes the stdio buffer, checks and
 * syncs again (cheap then), so every error still shows there, with its own errno. */
static void early_sync(FILE *fp) {
    (void)fsync(fileno(fp));
}

static pm_err_t write_edges(const run_state *s, FILE *fp, pm_diag_t *d) {
    return s->with_strat
               ? pm_write_edges_csv_strat(fp, s->pp, s->inc, s->e, s->strat, s->csv_flags, d)
               : pm_write_edges_csv(fp, s->pp, s->inc, s->e, s->csv_flags, d);
}

static void *early_main(void *arg) {
    run_state *s = arg;
    /* one thread: the graph stage's processes use the other cores meanwhile */
    (void)pm_assoc_share_intervals(s->inc, s->early.items, s->early.n, 1, s->early.lo, s->early.hi,
                                   NULL);
    s->early.rc = write_edges(s, s->early.fp, &s->early.d);
    early_sync(s->early.fp);
    return NULL;
}

/* Starts the early thread (see run_state); without it, write_files does the same work. */
static void early_start(run_state *s, unsigned threads) {
    if (threads == 1) {
        return;
    }
    size_t n = s->pp->n_eligible, v = 0;
    s->early.items = malloc((n ? n : 1) * sizeof *s->early.items);
    s->early.lo = malloc((n ? n : 1) * sizeof *s->early.lo);
    s->early.hi = malloc((n ? n : 1) * sizeof *s->early.hi);
    if (!s->early.items || !s->early.lo || !s->early.hi) {
        return; /* write_files does it */
    }
    for (size_t i = 0; i < s->inc->n_items; i++) {
        if (s->pp->eligible[i]) { /* the vertices, in order (build_network) */
            s->early.items[v++] = (uint32_t)i;
        }
    }
    s->early.n = v;
    pm_diag_clear(&s->early.d);
    if (pm_outdir_create(s->od, "edges.csv", &s->early.fp, &s->early.d) != PM_OK) {
        s->early.fp = NULL; /* write_files tries again and reports */
        return;
    }
    s->early.running = pthread_create(&s->early.th, NULL, early_main, s) == 0;
    if (!s->early.running) {
        early_main(s); /* here, then */
    }
}

static void *side_writer(void *arg) {
    side_job *j = arg;
    *j->rc_graphml = pm_write_graphml(j->graphml, j->map, j->d_graphml);
    early_sync(j->graphml);
    *j->rc_nodes = pm_write_nodes_csv(j->nodes, j->map, j->d_nodes);
    early_sync(j->nodes);
    return NULL;
}

static int write_files(const pm_cli_t *c, const net_opts *no, const pm_select_opts_t *sel,
                       run_state *s) {
    static const char *const files[] = {"map.graphml", "map.svg", "edges.csv", "nodes.csv",
                                        "run.json"};
    pm_diag_t d;
    pm_diag_clear(&d);
    double t0 = pm_cli_now();
    pm_map_t map = {
        .inc = s->inc,
        .pairs = s->pp,
        .edges = s->e,
        .measure = sel->measure,
        .n = s->n,
        .item = s->item,
        .clusters = s->cl,
        .degree = s->degree,
        .xy = s->xy,
        .ea = s->ea,
        .eb = s->eb,
        .title = no->title,
        .csv_flags = s->csv_flags,
        .cluster_name = (const char *const *)s->cluster_name,
        .n_seg = s->seg.n,
        .segcols = s->seg.cols,
        .segstats = s->seg.stats,
    };
    const char **cats = malloc((s->n ? s->n : 1) * sizeof *cats);
    double *slo = malloc((s->n ? s->n : 1) * sizeof *slo);
    double *shi = malloc((s->n ? s->n : 1) * sizeof *shi);
    if (!cats || !slo || !shi) {
        free(cats);
        free(slo);
        free(shi);
        return oom();
    }
    unsigned nthreads = 0;
    (void)pm_cli_threads(c, &nthreads); /* validated earlier */
    early_join(s);
    int early = s->early.fp != NULL; /* its items are the vertices, in order */
    if (early) {
        memcpy(slo, s->early.lo, s->n * sizeof *slo);
        memcpy(shi, s->early.hi, s->n * sizeof *shi);
    } else { /* the share intervals of nodes.csv (a root search each) on all threads */
        (void)pm_assoc_share_intervals(s->inc, s->item, s->n, nthreads, slo, shi, NULL);
    }
    map.share_low = slo;
    map.share_high = shi;
    for (size_t v = 0; v < s->n; v++) {
        cats[v] = s->inc->category[s->item[v]];
    }
    char thr[256];
    thresholds_text(thr, sizeof thr, sel);
    pm_svg_data_t sd = {
        .n_nodes = s->n,
        .name = s->names,
        .category = cats,
        .share = s->share,
        .cluster = s->cluster_int,
        .strength = s->cl->inner, /* hubs: weighted degree inside the cluster */
        .n_edges = s->e->n,
        .ea = s->ea,
        .eb = s->eb,
        .weight = s->e->weight,
        .n_clusters = s->cl->n_clusters,
        .cluster_name = (const char *const *)s->cluster_name,
        .respondents = s->inc->N,
        .thresholds = thr,
        .measure = pm_measure_name(sel->measure),
        .negative = s->negative,
    };
    pm_svg_opts_t so;
    pm_svg_opts_init(&so);
    so.title = no->title;
    so.width = (int)no->width;
    so.height = (int)no->height;
    so.draw = (size_t)no->draw;
    so.color_by_category = no->color_by == 1;
    so.seed = no->seed;
    so.iterations = (int)no->iterations;
    so.unit = pm_cli_get(c, "unit"); /* NULL: "respondents" */
    /* The four files are created here, then written on two threads: GraphML and nodes.csv on
     * a second thread (plain text, no igraph), the SVG (whose layout calls igraph, which is
     * not thread-safe) and edges.csv on this one. They are finished in order afterwards. */
    pm_err_t rc = PM_OK;
    FILE *fps[4] = {NULL, NULL, NULL, NULL};
    for (size_t k = 0; k < 4 && !rc; k++) {
        if (k == 2 && early) {
            fps[k] = s->early.fp; /* written already */
            continue;
        }
        rc = pm_outdir_create(s->od, files[k], &fps[k], &d);
    }
    pm_err_t wrc[4] = {PM_OK, PM_OK, PM_OK, PM_OK};
    pm_diag_t wd[4];
    for (size_t k = 0; k < 4; k++) {
        pm_diag_clear(&wd[k]);
    }
    if (early) {
        wrc[2] = s->early.rc;
        wd[2] = s->early.d;
    }
    if (!rc) {
        side_job job = {&map, fps[0], fps[3], &wrc[0], &wrc[3], &wd[0], &wd[3]};
        pthread_t th;
        int threaded = nthreads != 1 && pthread_create(&th, NULL, side_writer, &job) == 0;
        if (!threaded) {
            side_writer(&job);
        }
        pm_cli_map_picture_t pic = {c, s->od, no->dir, fps[1], &sd, &so, &map, sel, s->t};
        wrc[1] = pm_cli_map_picture(&pic, &s->svg, &wd[1]); /* map.svg, map.html */
        early_sync(fps[1]);
        if (!early) {
            wrc[2] = write_edges(s, fps[2], &wd[2]);
            early_sync(fps[2]);
        }
        if (threaded) {
            pthread_join(th, NULL);
        }
    }
    /* the input's SHA-256 for run.json, before any output is replaced: a file that changed
     * while it was read is an error */
    pm_diag_t hd;
    pm_diag_clear(&hd);
    if (!rc && pm_table_wait_hash(s->t, &hd) != PM_OK) {
        rc = hd.code;
        d = hd;
    }
    for (size_t k = 0; k < 4; k++) {
        if (!fps[k]) {
            continue;
        }
        if (!rc && wrc[k]) {
            rc = wrc[k];
            d = wd[k];
            if (d.code == PM_EIO && !d.file[0]) { /* one shape: DIR/NAME: cannot write ... */
                snprintf(d.file, sizeof d.file, "%s/%s", no->dir, files[k]);
                size_t ml = strlen(d.msg);
                snprintf(d.msg + ml, sizeof d.msg - ml,
                         "; check the free space and permissions there (no earlier output "
                         "was replaced)");
            }
        }
        pm_err_t rc2 = pm_outdir_finish(s->od, fps[k], rc ? NULL : &d);
        if (!rc) {
            rc = rc2;
        }
    }
    free(cats);
    free(slo);
    free(shi);
    if (rc) {
        if (d.code == PM_EIO && !d.file[0]) {
            snprintf(d.file, sizeof d.file, "%s", no->dir);
        }
        return pm_cli_fail(&d);
    }
    pm_segsvg_data_t pic = {.n = s->n,
                            .item = s->item,
                            .cluster = s->cluster_int,
                            .share = s->share,
                            .name = (const char *const *)s->inc->name,
                            .n_clusters = s->cl->n_clusters,
                            .cluster_name = (const char *const *)s->cluster_name,
                            .max_q = sel->max_q,
                            .draw = (size_t)no->draw,
                            .title = no->title,
                            .respondents = s->inc->N};
    if ((rc = pm_cli_mapseg_write(&s->seg, s->od, s->inc, pic, s->csv_flags, &d)) != PM_OK) {
        return pm_cli_fail(&d);
    }
    s->t_write = pm_cli_now() - t0;
    FILE *fp;
    rc = pm_outdir_create(s->od, files[4], &fp, &d);
    if (!rc) {
        const char *names[8];
        size_t nf = 0;
        static const char *const base[] = {"map.graphml", "map.svg",   "map.html",
                                           "edges.csv",   "nodes.csv", "run.json"};
        for (size_t k = 0; k < 6; k++) {
            if (k != 2 || no->html) {
                names[nf++] = base[k];
            }
        }
        if (s->seg.n) {
            names[nf++] = "segments.csv";
            names[nf++] = "segments.svg";
        }
        rc = write_run_json(fp, c, no, sel, s, names, nf, &d);
        pm_err_t rc2 = pm_outdir_finish(s->od, fp, rc ? NULL : &d);
        if (!rc) {
            rc = rc2;
        }
    }
    if (!rc) {
        rc = pm_outdir_commit(s->od, &d);
    }
    return rc ? pm_cli_fail(&d) : 0;
}

/* ---- summary --------------------------------------------------------------------------------- */
static void summary(const pm_select_opts_t *sel, const net_opts *no, const run_state *s,
                    const char *c_unit) {
    const pm_edges_t *e = s->e;
    const pm_pairs_t *pp = s->pp;
    const pm_clusters_t *cl = s->cl;
    printf("%-13s %llu\n", c_unit, (unsigned long long)s->inc->N);
    printf("items         %zu eligible", pp->n_eligible);
    if (pp->n_eligible != s->inc->n_items) {
        printf(" of %zu (left out: %zu chosen by nobody, %zu by everyone, %zu below "
               "--min-share)",
               s->inc->n_items, pp->excluded_none, pp->excluded_all, pp->excluded_share);
    }
    printf("\npairs tested  %llu (%llu seen together)\n", (unsigned long long)e->tested,
           (unsigned long long)pp->seen);
    /* never-seen pairs are listed (and go through the thresholds) only under --min-count 0
     * with --sign negative or both; otherwise they are a reason of their own */
    bool unseen_apart = e->never_seen && !(sel->min_count == 0 && sel->sign != PM_SIGN_POSITIVE);
    printf("pairs kept    %zu (removed:", e->n);
    const char *sep = " ";
    if (unseen_apart) {
        printf("%s%llu never seen together", sep, (unsigned long long)e->never_seen);
        sep = ", ";
    }
    if (sel->min_count > 0) {
        printf("%s%llu seen together fewer than %u times", sep,
               (unsigned long long)e->removed_count, sel->min_count);
        sep = ", ";
    }
    if (sel->sign != PM_SIGN_BOTH) {
        printf("%s%llu not %s", sep, (unsigned long long)e->removed_sign, pm_sign_name(sel->sign));
        sep = ", ";
    }
    printf("%s%llu with q > %g", sep, (unsigned long long)e->removed_q, sel->max_q);
    if (sel->min_phi > 0) {
        printf(", %llu with |phi| < %g", (unsigned long long)e->removed_phi, sel->min_phi);
    }
    if (sel->min_lift > 0) {
        printf(", %llu with lift < %g", (unsigned long long)e->removed_lift, sel->min_lift);
    }
    if (sel->top_edges) {
        printf(", %llu beyond the top %zu", (unsigned long long)e->removed_top, sel->top_edges);
    }
    printf(")\n");
    if (s->n_negative) {
        printf("              %zu negative edges are in the files but take no part in "
               "clusters or layout\n",
               s->n_negative);
    }
    size_t multi = cl->n_clusters - cl->n_singletons;
    printf("clusters      %zu", cl->n_clusters);
    if (cl->n_singletons) {
        printf(" (%zu of one item: items without a positive kept edge)", cl->n_singletons);
    }
    printf("\n");
    size_t shown = 0;
    for (size_t k = 0; k < cl->n_clusters && shown < 30; k++) {
        if (cl->size[k] < 2 && multi > 0) {
            continue;
        }
        printf("  %4zu  %5zu items  %s\n", k + 1, cl->size[k], pm_cli_shown(s->cluster_name[k]));
        shown++;
    }
    if (multi > shown) {
        printf("        ... %zu more clusters in nodes.csv and run.json\n", multi - shown);
    }
    if (isnan(cl->modularity)) {
        printf("modularity    n/a (no edge to cluster)\n");
    } else {
        printf("modularity    %.12g (best of %llu Louvain runs, run %u; resolution %g, weight "
               "%s)\n",
               cl->modularity, (unsigned long long)no->restarts, cl->best_restart, no->resolution,
               pm_measure_name(sel->measure));
    }
    if (isnan(cl->stability)) {
        printf("stability     n/a (%s)\n",
               cl->n_used_edges == 0 ? "no edge to cluster" : "one run; use --restarts 2 or more");
    } else {
        printf("stability     %.4f (mean adjusted Rand index between the %llu runs' "
               "partitions; 1 = all agree)\n",
               cl->stability, (unsigned long long)no->restarts);
    }
    const pm_svg_stats_t *v = &s->svg;
    printf("picture       %zu of %zu items drawn, %zu edges", v->drawn, s->n, v->edges_drawn);
    /* what was chosen and why (the draw budget, README "The picture") */
    printf("\n              chosen: the %zu most chosen items, the hubs of %zu of %zu clusters of "
           "3 or more items and more members in proportion to cluster size, %zu items on their "
           "own by share",
           v->top_drawn, v->clusters_drawn, v->clusters, v->alone_drawn);
    if (v->small > v->small_drawn) {
        printf("; %zu clusters of 2 summarised in the legend, not drawn",
               v->small - v->small_drawn);
    }
    if (v->negative_left_out) {
        printf("\n              %zu negative pairs left out of the picture (at most 2 dashed "
               "lines an item, the strongest first; the files keep all)",
               v->negative_left_out);
    }
    printf("\n              labels: %zu shortened (to 12 characters or more), %zu left out "
           "(named in the tooltip)",
           v->labels_shortened, v->labels_left_out);
    if (s->svg.left_out) {
        printf("\n              %zu items left out of map.svg so that labels fit (the GraphML and "
               "CSV files "
               "keep all; --draw and --width/--height change it)",
               s->svg.left_out);
    }
    if (s->seg.n) {
        printf("\nsegments      %zu of %zu items in segments.svg, %zu segments of %zu column%s",
               s->seg.svg.rows_drawn, s->n, s->seg.svg.segments_drawn, s->seg.n,
               s->seg.n == 1 ? "" : "s");
        if (s->seg.svg.rows_left_out) {
            printf(" (the items whose segments differ most; --draw changes it, segments.csv "
                   "holds all)");
        }
    }
    printf("\nwritten       %s/: map.graphml, map.svg,%s edges.csv, nodes.csv, run.json%s\n",
           pm_cli_shown(no->dir), no->html ? " map.html," : "",
           s->seg.n ? ", segments.csv, segments.svg" : "");
}

/* ---- command ----------------------------------------------------------------------------------
 */
static int net_options(const pm_cli_t *c, net_opts *no) {
    memset(no, 0, sizeof *no);
    no->dir = pm_cli_get(c, "output");
    if (!no->dir || !no->dir[0]) {
        return pm_cli_usage_error(c, "'pairmap map' needs -o DIR (the output directory)");
    }
    no->title = pm_cli_get(c, "title");
    no->html = !pm_cli_flag(c, "no-html");
    static const char *const colors[] = {"cluster", "category", NULL};
    if (pm_cli_uint(c, "seed", 1, 0, UINT64_MAX, &no->seed) ||
        pm_cli_uint(c, "restarts", 10, 1, 10000, &no->restarts) ||
        pm_cli_double(c, "resolution", 1.0, 0, 1e6, &no->resolution) ||
        pm_cli_uint(c, "iterations", 0, 1, 1000000, &no->iterations) ||
        pm_cli_uint(c, "draw", 0, 1, 100000, &no->draw) ||
        pm_cli_uint(c, "width", 0, 100, 20000, &no->width) ||
        pm_cli_uint(c, "height", 0, 100, 20000, &no->height) ||
        pm_cli_choice(c, "color-by", colors, 0, &no->color_by)) {
        return 1;
    }
    return 0;
}

int pm_cmd_map(int argc, char **argv) {
    pm_cli_t c;
    static char full[16384];
    snprintf(full, sizeof full, "%s%s%s%s%s%s%s\n%s%s%s", help, pm_cli_input_help, pm_cli_only_help,
             pm_cli_segment_help, pm_cli_basket_help, pm_cli_memory_help, pm_cli_csv_help,
             pm_cli_select_help, pm_cli_edge_help, pm_cli_mapseg_help);
    int rc = pm_cli_parse(&c, "map", PM_CMD_MAP, argc, argv, full);
    if (rc) {
        return rc < 0 ? pm_cli_close_stdout() : rc;
    }
    pm_select_opts_t sel;
    net_opts no;
    unsigned th;
    if (pm_cli_select_opts(&c, &sel) || net_options(&c, &no) || pm_cli_threads(&c, &th) ||
        pm_cli_mapseg_check(&c)) {
        return 1;
    }
    pm_input_opts_t io;
    if (pm_cli_input_opts(&c, &io)) {
        return 1;
    }
    run_state s;
    memset(&s, 0, sizeof s);
    s.csv_flags = pm_cli_csv_flags(&c);
    pm_diag_t d;
    pm_diag_clear(&d);
    catch_signals();
    /* the directory first: a run that cannot write should fail before the work */
    if (pm_outdir_open(no.dir, &s.od, &d)) {
        rc = pm_cli_fail(&d);
        goto out;
    }
    char lock_note[640];
    if (pm_outdir_lock(s.od, lock_note, sizeof lock_note, &d)) { /* one run per DIR */
        pm_outdir_free(s.od);
        rc = pm_cli_fail(&d);
        goto out;
    }
    if (lock_note[0]) {
        pm_cli_note(&c, "warning: %s: %s", pm_cli_shown(no.dir), lock_note);
    }
    rc = pm_cli_load(&c, &s.t, &s.inc, &s.t_read);
    if (rc) {
        goto done;
    }
    rc = pm_cli_score(&c, s.t, s.inc, &sel, &s.pp);
    if (rc) {
        goto done;
    }
    double t0 = pm_cli_now();
    if (pm_select_run(s.pp, s.inc, &sel, &s.e, &d)) {
        rc = pm_cli_fail(&d);
        goto done;
    }
    {
        size_t nseg;
        const pm_segcol_t *seg = pm_cli_segcols(&nseg);
        s.with_strat = nseg > 0;
        if ((rc = pm_cli_strat(&c, s.inc, seg, nseg, s.pp, s.e, &sel, &s.strat)) != 0) {
            goto done;
        }
    }
    s.t_count = s.pp->t_count;
    s.t_measures = s.pp->t_measures + (pm_cli_now() - t0);
    t0 = pm_cli_now();
    rc = build_network(&c, &no, &sel, &s);
    if (rc) {
        goto done;
    }
    s.t_graph = pm_cli_now() - t0;
    /* edges.csv's thread starts after the network: the Louvain runs fork, and no thread but the
     * sigwait one may run when they do (issue 12 point 2) */
    early_start(&s, th);
    if ((rc = pm_cli_mapseg_run(&s.seg, s.inc, th)) != 0) {
        goto done;
    }
    rc = write_files(&c, &no, &sel, &s);
    while (atomic_load(&g_stop_sig)) {
        pause(); /* a signal came during the commit: its thread reports it and exits */
    }
    if (rc) {
        goto done;
    }
    summary(&sel, &no, &s, pm_cli_unit(&c));
    rc = pm_cli_close_stdout();
done:
    state_free(&s);
out:
    release_signals();
    return rc;
}
