/* pairmap map: the whole job. Reads, counts, scores and selects pairs, clusters the items
 * (Louvain with restarts), lays them out (Fruchterman-Reingold) and writes DIR/map.graphml,
 * map.svg, edges.csv, nodes.csv and run.json atomically; a summary goes to stdout. */
#include <math.h>
#include <stdbool.h>
#include <pthread.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "cli.h"
#include "pairmap/htmlmap.h"
#include "pairmap/mapwrite.h"
#include "pairmap/network.h"
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
    "               item, its partners with the numbers of `pairmap partners --family\n"
    "               all`, clusters, phi and q filters, zoom; the view is kept in the\n"
    "               address's #fragment (item=NAME, cluster=N, phi=F, q=F); nothing is\n"
    "               fetched from anywhere\n"
    "  edges.csv    the kept pairs, columns as `pairmap pairs`\n"
    "  nodes.csv    " PM_NODES_HEADER "\n"
    "               (one row per eligible item; rows by cluster, then share descending,\n"
    "               then name; x, y in the unit box, items without edges on a ring outside)\n"
    "  clusters.csv " PM_CLUSTERS_HEADER "\n"
    "               (one row per cluster; stability: for each cluster, the mean over the\n"
    "               other Louvain runs of its best Jaccard overlap with one of their\n"
    "               clusters, Hennig 2007: near 1 solid, low an accident of the run)\n"
    "  run.json     version, options, input size and SHA-256, counts, pairs removed by each\n"
    "               threshold, clusters, modularity, stability, and seconds per stage under\n"
    "               \"timings\" (the one part that differs between identical runs)\n"
    "A summary goes to standard output. DIR is created if missing. Every file is written to a\n"
    "temporary file in DIR first and all are renamed into place only when all are complete:\n"
    "a failed or interrupted run leaves the files already in DIR untouched.\n"
    "\n";

static const char help_network[] =
    "Output, clustering and layout:\n"
    "  -o, --output DIR      output directory (required)\n"
    "  --seed N              seed of the clustering and the layout (default 1); runs with\n"
    "                        the same --seed repeat every file byte for byte, and another\n"
    "                        seed may give other clusters where the data leave them open\n"
    "  --restarts R          Louvain runs (default 10), each with a seed of its own derived\n"
    "                        from --seed and its number. The run with the highest modularity\n"
    "                        is kept (ties: the first); stability is the mean adjusted\n"
    "                        Rand index between the runs' partitions (1 = every run found\n"
    "                        the same clusters). At most 1000, and fewer on large maps:\n"
    "                        every run's clusters are kept\n"
    "                        (R x items x 4 bytes, up to 1 GiB) and the stability compares\n"
    "                        all R(R-1)/2 pairs of runs (R(R-1)/2 x items up to 2e9: 894 runs\n"
    "                        for 5,000 clustered items, 283 for 50,000); beyond, a usage\n"
    "                        error (exit 1)\n"
    "  --resolution F        Louvain resolution (default 1; higher gives more, smaller clusters)\n"
    "  --iterations N        Fruchterman-Reingold iterations (default 500 up to 1,000 items\n"
    "                        with edges; above, 500,000 / items, at least 150)\n"
    "Picture (map.svg, map.html):\n"
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
    "weight on edges inside the cluster, then share). A cluster that holds more than a\n"
    "quarter of the clustered items (those with such an edge) is big: Louvain runs again on\n"
    "its own edges (at the map's resolution or 1, whichever is higher) and its sub-clusters\n"
    "K.S go to nodes.csv's subcluster column, the summary, the legend and run.json; the\n"
    "summary then lists resolutions 0.5, 1, 1.5, 2 and 3 tried on the same graph (one run\n"
    "each) with their modularity at resolution 1 and largest cluster, and suggests one.\n"
    "Same input, options and seed: the same files, byte for byte, for any row order of the\n"
    "input and any --threads (the Louvain runs and the layout share --threads processes).\n"
    "\n";

#include "cmd_map.h"

static void state_free(run_state *s) {
    pm_cli_map_early_join(s);
    pm_cli_mapseg_free(&s->seg);
    free(s->strat);
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
    for (size_t i = 0; s->sub_label && i < s->n_sub_labels; i++) {
        free(s->sub_label[i]);
    }
    free(s->sub_label);
    free(s->sub_of);
    free(s->sub_size);
    pm_multiscale_free(s->ms);
    pm_clusters_free(s->cl);
    pm_outdir_free(s->od);
    pm_edges_free(s->e);
    pm_pairs_free(s->pp);
    pm_incidence_free(s->inc);
    pm_table_free(s->t);
}

int pm_cli_map_oom(void) {
    fputs("pairmap: out of memory\n", stderr);
    return 4;
}

/* The legend's lines of the big clusters' sub-clusters: "K.S: NAME" and the size. */
static int sub_labels(run_state *s) {
    const pm_multiscale_t *ms = s->ms;
    size_t total = 0;
    for (size_t k = 0; k < ms->n_big; k++) {
        total += ms->sub[k]->n_clusters > 1 ? ms->sub[k]->n_clusters : 0;
    }
    s->sub_label = calloc(total ? total : 1, sizeof *s->sub_label);
    s->sub_of = malloc((total ? total : 1) * sizeof *s->sub_of);
    s->sub_size = malloc((total ? total : 1) * sizeof *s->sub_size);
    if (!s->sub_label || !s->sub_of || !s->sub_size) {
        return pm_cli_map_oom();
    }
    for (size_t k = 0; k < ms->n_big; k++) {
        const pm_clusters_t *sub = ms->sub[k];
        for (size_t t = 0; t < sub->n_clusters && sub->n_clusters > 1; t++) {
            const char *nm = ms->sub_name[k][t];
            size_t len = strlen(nm) + 64;
            char *l = malloc(len);
            if (!l) {
                return pm_cli_map_oom();
            }
            snprintf(l, len, "%zu.%zu: %s", k + 1, t + 1, nm);
            s->sub_of[s->n_sub_labels] = (uint32_t)k;
            s->sub_size[s->n_sub_labels] = sub->size[t];
            s->sub_label[s->n_sub_labels++] = l;
        }
    }
    return 0;
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
        return pm_cli_map_oom();
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
        return pm_cli_map_oom();
    }
    if (pm_network_run(s->n, m, s->ea, s->eb, s->wuse, &co, no->seed, s->iterations, &s->cl, s->xy,
                       &d)) {
        return pm_cli_fail(&d);
    }
    s->cluster_name = calloc(s->cl->n_clusters ? s->cl->n_clusters : 1, sizeof *s->cluster_name);
    s->cluster_int = malloc((s->n ? s->n : 1) * sizeof *s->cluster_int);
    if (!s->cluster_name || !s->cluster_int) {
        return pm_cli_map_oom();
    }
    for (size_t k = 0; k < s->cl->n_clusters; k++) {
        if (!(s->cluster_name[k] = pm_cluster_name(s->cl, k, s->names))) {
            return pm_cli_map_oom();
        }
    }
    for (size_t k = 0; k < s->n; k++) {
        s->cluster_int[k] = (int)s->cl->cluster[k];
    }
    /* a big cluster's next level and the resolutions tried, on the same graph (forks as the
     * restarts do: before any thread of ours starts) */
    if (pm_multiscale_run(s->n, m, s->ea, s->eb, s->wuse, &co, s->cl, &s->ms, &d)) {
        return pm_cli_fail(&d);
    }
    return sub_labels(s);
}

/* ---- summary --------------------------------------------------------------------------------- */
/* Which test selected the pairs (with --segment-col only: the choice is there). */
static void summary_pair_test(const run_state *s, const char *c_unit) {
    if (s->within) {
        printf("pair test     Cochran-Mantel-Haenszel within the segments of '%s' (--pair-test "
               "within): q_value over its p-values\n",
               pm_cli_shown(s->within));
    } else if (s->with_strat) {
        printf("pair test     pooled over all %s (--pair-test within: within the segments)\n",
               c_unit);
    }
}

/* The summary's "pairs kept" line: what each threshold removed. */
static void summary_kept(const pm_select_opts_t *sel, const pm_edges_t *e) {
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
}

/* The summary's "picture" lines: the draw budget's choices, labels, items left out. */
static void summary_picture(const run_state *s) {
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
}

/* The summary's lines on the big clusters: each one's share, its sub-clusters (the next
 * level), and the resolutions tried with the suggestion. Nothing when no cluster is big. */
static void summary_multiscale(const run_state *s) {
    const pm_multiscale_t *ms = s->ms;
    if (!ms || ms->n_big == 0) {
        return;
    }
    for (size_t k = 0; k < ms->n_big; k++) {
        const pm_clusters_t *sub = ms->sub[k];
        printf("big cluster   %zu holds %zu of the %zu clustered items (%.0f%%, more than a "
               "quarter);",
               k + 1, s->cl->size[k], ms->clustered,
               100.0 * (double)s->cl->size[k] / (double)ms->clustered);
        if (sub->n_clusters < 2) {
            printf("\n              Louvain on its own edges (resolution %g) does not split it\n",
                   ms->sub_resolution);
            continue;
        }
        printf("\n              its next level, Louvain on its own edges (resolution %g): %zu "
               "sub-clusters,\n              modularity within it %.4f (nodes.csv: subcluster)\n",
               ms->sub_resolution, sub->n_clusters, sub->modularity);
        for (size_t t = 0; t < sub->n_clusters && t < 30; t++) {
            char num[48];
            snprintf(num, sizeof num, "%zu.%zu", k + 1, t + 1);
            printf("  %6s %5zu items  %s\n", num, sub->size[t], pm_cli_shown(ms->sub_name[k][t]));
        }
        if (sub->n_clusters > 30) {
            printf("        ... %zu more sub-clusters in nodes.csv and run.json\n",
                   sub->n_clusters - 30);
        }
    }
    printf("resolutions   tried on the same graph, one Louvain run each from --seed (this map: "
           "its kept run);\n              modularity at resolution 1, so that they compare:\n");
    for (size_t t = 0; t < ms->n_tried; t++) {
        const pm_tried_resolution_t *tr = &ms->tried[t];
        printf("  %10g  modularity %.4f  largest cluster %3.0f%% (%zu items), %zu cluster%s of 2 "
               "or more%s\n",
               tr->resolution, tr->modularity_1, 100.0 * tr->largest_share, tr->largest,
               tr->n_clusters, tr->n_clusters == 1 ? "" : "s", tr->own ? "  (this map)" : "");
    }
    if (ms->suggested >= 0) {
        const pm_tried_resolution_t *tr = &ms->tried[ms->suggested];
        printf("              suggested: --resolution %g (the highest modularity of those whose "
               "largest\n              cluster holds a quarter of the clustered items or less)\n",
               tr->resolution);
    } else {
        printf("              none of these brings the largest cluster to a quarter of the "
               "clustered items or less\n");
    }
}

/* The note on stderr when a cluster is big: what it holds, where its sub-clusters are, and the
 * suggested resolution. */
static void note_multiscale(const pm_cli_t *c, const run_state *s) {
    const pm_multiscale_t *ms = s->ms;
    if (!ms || ms->n_big == 0) {
        return;
    }
    char tail[256];
    if (ms->suggested >= 0) {
        const pm_tried_resolution_t *tr = &ms->tried[ms->suggested];
        snprintf(tail, sizeof tail,
                 "; --resolution %g brings the largest cluster to %.0f%% (modularity at "
                 "resolution 1: %.4f)",
                 tr->resolution, 100.0 * tr->largest_share, tr->modularity_1);
    } else {
        snprintf(tail, sizeof tail, "; none of the resolutions tried brings it to a quarter");
    }
    int splits = 0;
    for (size_t k = 0; k < ms->n_big; k++) {
        splits |= ms->sub[k]->n_clusters > 1;
    }
    char head[160];
    if (ms->n_big == 1) {
        snprintf(head, sizeof head,
                 "cluster 1 holds %.0f%% of the %zu clustered items, more than a quarter",
                 100.0 * ms->largest_share, ms->clustered);
    } else {
        snprintf(head, sizeof head,
                 "clusters 1 %s %zu each hold more than a quarter of the %zu clustered items",
                 ms->n_big == 2 ? "and" : "to", ms->n_big, ms->clustered);
    }
    pm_cli_note(c, "note: %s%s%s; the summary lists the resolutions tried", head,
                splits ? "; sub-clusters: nodes.csv's subcluster column"
                       : "; Louvain on the cluster's own edges does not split it",
                tail);
}

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
    printf("\npairs tested  %llu (%llu seen together)", (unsigned long long)e->tested,
           (unsigned long long)pp->seen);
    if (pp->n_family != pp->n_eligible) { /* the family, DESIGN.md */
        printf(": the family of pairs among the %zu items chosen by at least %u %s (the other "
               "%zu cannot reach --min-count)",
               pp->n_family, sel->min_count, c_unit, pp->n_eligible - pp->n_family);
    }
    printf("\n");
    summary_kept(sel, e);
    summary_pair_test(s, c_unit);
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
    summary_multiscale(s);
    summary_picture(s);
    if (s->seg.n) {
        printf("\nsegments      %zu of %zu items in segments.svg, %zu segments of %zu column%s",
               s->seg.svg.rows_drawn, s->n, s->seg.svg.segments_drawn, s->seg.n,
               s->seg.n == 1 ? "" : "s");
        if (s->seg.svg.rows_left_out) {
            printf(" (the items whose segments differ most; --draw changes it, segments.csv "
                   "holds all)");
        }
    }
    printf("\nwritten       %s/: map.graphml, map.svg,%s edges.csv, nodes.csv, clusters.csv, "
           "run.json%s\n",
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
        pm_cli_uint(c, "restarts", 10, 1, PM_CLUSTER_MAX_RESTARTS, &no->restarts) ||
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
    snprintf(full, sizeof full, "%s%s%s%s%s%s%s%s\n%s%s%s", help, help_network, pm_cli_input_help,
             pm_cli_only_help, pm_cli_segment_help, pm_cli_basket_help, pm_cli_memory_help,
             pm_cli_csv_help, pm_cli_select_help, pm_cli_edge_help, pm_cli_mapseg_help);
    int rc = pm_cli_parse(&c, "map", PM_CMD_MAP, argc, argv, full);
    if (rc) {
        return rc < 0 ? pm_cli_close_stdout() : rc;
    }
    pm_select_opts_t sel;
    net_opts no;
    unsigned th;
    if (pm_cli_select_opts(&c, &sel) || net_options(&c, &no) || pm_cli_threads(&c, &th)) {
        return 1;
    }
    pm_input_opts_t io;
    if (pm_cli_input_opts(&c, &io)) {
        return 1;
    }
    run_state s;
    memset(&s, 0, sizeof s);
    s.csv_flags = pm_cli_csv_flags(&c);
    s.threads = th;
    pm_diag_t d;
    pm_diag_clear(&d);
    pm_cli_signals_catch();
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
    /* map.html's partner table, bounded before the graph stage spends its time */
    if (no.html && (rc = pm_cli_check_bytes(&c, (uint64_t)s.e->n * PM_HTML_EDGE_BYTES,
                                            "the columns of map.html's partner table")) != 0) {
        goto done;
    }
    {
        size_t nseg;
        const pm_segcol_t *seg = pm_cli_segcols(&nseg);
        s.with_strat = nseg > 0;
        int within;
        (void)pm_cli_pair_test(&c, &within); /* checked with the options */
        s.within = within ? seg[0].column : NULL;
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
    pm_cli_map_early_start(&s, th);
    if ((rc = pm_cli_mapseg_run(&s.seg, &c, s.inc, th)) != 0) {
        goto done;
    }
    rc = pm_cli_map_write_files(&c, &no, &sel, &s);
    pm_cli_signals_settle();
    if (rc) {
        goto done;
    }
    note_multiscale(&c, &s);
    summary(&sel, &no, &s, pm_cli_unit(&c));
    rc = pm_cli_close_stdout();
done:
    state_free(&s);
out:
    pm_cli_signals_release();
    return rc;
}
