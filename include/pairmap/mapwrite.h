/* Writers of the map's files: nodes.csv and map.graphml (src/write_graphml.c), and a small
 * JSON emitter for run.json (src/write_json.c). Each writes to an open stream and reports a
 * stream error as PM_EIO; placing the files atomically is outfile.h's job. */
#ifndef PAIRMAP_MAPWRITE_H
#define PAIRMAP_MAPWRITE_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>

#include "pairmap/assoc.h"
#include "pairmap/incidence.h"
#include "pairmap/input.h"
#include "pairmap/network.h"
#include "pairmap/segments.h"
#include "pairmap/select.h"

#ifdef __cplusplus
extern "C" {
#endif

/* The nodes.csv columns of DESIGN.md (contract). */
#define PM_NODES_HEADER                                                                            \
    "item,category,respondents,share,share_low,share_high,cluster,degree,x,y,cluster_name,"        \
    "subcluster"

/* Everything the map's writers read. Vertex v is incidence item item[v]; vertices are in
 * canonical order (item[] increasing). Edge k is selected edge k of edges, joining vertices
 * ea[k] < eb[k]. All borrowed. */
typedef struct {
    const pm_incidence_t *inc;
    const pm_pairs_t *pairs;
    const pm_edges_t *edges;
    pm_measure_t measure; /* the edge weight written as `weight` */
    size_t n;             /* vertices */
    const uint32_t *item; /* [n] */
    const pm_clusters_t *clusters;
    const uint32_t *degree;  /* [n] kept edges at the vertex (negative ones included) */
    const double *xy;        /* [2n] layout, unit box (isolated items on a ring outside) */
    const uint32_t *ea, *eb; /* [edges->n] */
    const char *title;       /* graph-level data (NULL: none) */
    /* [n] optional: the share intervals of the vertices (pm_assoc_share_intervals over
     * item[]); NULL: nodes.csv computes them */
    const double *share_low, *share_high;
    unsigned csv_flags; /* pm_write_csv_field flags of nodes.csv's names (write.h) */
    unsigned threads;   /* threads map.graphml's edges are made on (0: one per core) */
    /* [clusters->n_clusters] optional: the clusters' names (pm_cluster_name); NULL: made here
     * by pm_cluster_name from the items' names */
    const char *const *cluster_name;
    /* optional (n_seg 0: none): the segment columns of --segment-col and their tables over
     * the items of inc, for map.graphml's top segment of every vertex */
    size_t n_seg;
    const pm_segcol_t *segcols;
    const pm_segstats_t *segstats;
    /* optional: the sub-clusters of the big clusters (pm_multiscale_run over the vertices);
     * NULL: nodes.csv's subcluster cells are empty, run.json has no "multiscale" object */
    const pm_multiscale_t *multiscale;
} pm_map_t;

/* nodes.csv: one row per vertex, rows ordered by cluster, then share descending, then name
 * (bytes). share and its 95% Jeffreys interval as `pairmap items` prints them; cluster_name
 * the name of the vertex's cluster (pm_cluster_name: its leading members, the legend's name
 * of it); subcluster "K.S" (sub-cluster S of big cluster K, pm_multiscale_t) or empty outside
 * the big clusters. */
pm_err_t pm_write_nodes_csv(FILE *fp, const pm_map_t *map, pm_diag_t *diag);

/* The clusters.csv columns of DESIGN.md (contract). */
#define PM_CLUSTERS_HEADER                                                                         \
    "cluster,name,size,share_of_items,internal_weight,modularity_share,stability,members"

/* clusters.csv: one row per cluster (1 = the largest), singletons included: its name
 * (pm_cluster_name), size, share of the map's items, internal weight (the sum of the weights
 * of its kept positive pairs), modularity_share (its term e_c - resolution a_c^2 of the
 * modularity over the modularity: the shares add up to 1; NaN without edges), stability
 * (pm_clusters_t.cluster_stability) and its members joined by "; ", leading ones first. */
pm_err_t pm_write_clusters_csv(FILE *fp, const pm_map_t *map, double resolution, pm_diag_t *diag);

/* map.graphml: GraphML 1.0, undirected, node ids n0.. in vertex order, typed keys with distinct
 * ids (v_* for nodes, e_* for edges, g_* for the graph): node data name, category,
 * respondents, share, cluster, x, y; edge data together, phi, lift, jaccard, q_value, weight.
 * With segment columns (n_seg > 0), per column j (1-based) also node keys item.top_segment.j
 * ("top_segment (COL)", string: the segment with the highest shrunk index of the vertex, the
 * first on ties) and item.top_index.j ("top_index (COL)", double: that index); no data where
 * no index is defined.
 * Numbers are printed as in the CSV files (NaN and infinities as NaN, INF, -INF, the
 * xs:double spellings). Names and the title go through the one XML text cleaner
 * (pm_text_xml_write in text.h: bytes that are not UTF-8, controls and non-characters become
 * U+FFFD; tab, LF, CR are kept as character references). */
pm_err_t pm_write_graphml(FILE *fp, const pm_map_t *map, pm_diag_t *diag);

/* Writes s cleaned and escaped for XML: pm_text_xml_fputs(fp, s, 0) (text.h). */
void pm_write_xml_text(FILE *fp, const char *s);

/* ---- JSON --------------------------------------------------------------------------------- */
/* A streaming JSON writer, two-space indented, keys in the order written. Inside an object
 * every value needs a key; inside an array (and at the top) key is NULL. Nesting is limited to
 * PM_JSON_DEPTH levels (deeper calls are ignored and make pm_json_finish fail). */
#define PM_JSON_DEPTH 32
typedef struct {
    FILE *fp;
    int depth;
    bool first[PM_JSON_DEPTH + 1];
    bool bad;
} pm_json_t;

void pm_json_init(pm_json_t *j, FILE *fp);
void pm_json_begin_object(pm_json_t *j, const char *key);
void pm_json_end_object(pm_json_t *j);
void pm_json_begin_array(pm_json_t *j, const char *key);
void pm_json_end_array(pm_json_t *j);
void pm_json_string(pm_json_t *j, const char *key, const char *v); /* NULL: null */
void pm_json_number(pm_json_t *j, const char *key, double v);      /* not finite: null */
void pm_json_uint(pm_json_t *j, const char *key, uint64_t v);
void pm_json_int(pm_json_t *j, const char *key, int64_t v);
void pm_json_bool(pm_json_t *j, const char *key, bool v);
void pm_json_null(pm_json_t *j, const char *key);
/* Ends the document with a newline. PM_EIO on a stream error, PM_EINTERNAL on unbalanced
 * nesting. */
pm_err_t pm_json_finish(pm_json_t *j, pm_diag_t *diag);
/* Writes s as a JSON string literal: valid UTF-8 passed through, controls as \u00XX, and each
 * byte 0xHH that is not part of valid UTF-8 as \udcHH (the lone surrogate U+DC80..U+DCFF of
 * Python's "surrogateescape", PEP 383), so the file is always valid UTF-8 and no byte is lost. */
void pm_json_write_string(FILE *fp, const char *s);
/* The same for JSON inside an HTML <script> element: also < > & as \u003c \u003e \u0026
 * (no "</script>" or "<!--" can appear) and U+2028, U+2029 as escapes. */
void pm_json_write_script_string(FILE *fp, const char *s);

/* ---- run.json ------------------------------------------------------------------------------ */
/* What run.json records of one map run besides the map itself (pm_write_run_json). All
 * borrowed. */
typedef struct {
    const char *command; /* "map" */
    const char *input;   /* the INPUT argument */
    /* writes the "options" object (the options as given); after_input (may be NULL) writes
     * objects that follow "input_file" (the CLI's "counts_from") */
    void (*options)(pm_json_t *j, const void *ud);
    void (*after_input)(pm_json_t *j, const void *ud);
    /* may be NULL: objects between "clusters" and "svg" (the CLI's "segments") */
    void (*after_clusters)(pm_json_t *j, const void *ud);
    const void *ud;
    const char *format; /* long, lines or wide */
    const pm_select_opts_t *sel;
    const char *pair_test;        /* settings.pair_test: "pooled" (NULL too) or "within" */
    const char *pair_test_column; /* within: the segment column the test is taken within */
    uint64_t seed, restarts;
    double resolution;
    int iterations;     /* the layout's, resolved */
    const char *source; /* input_file.name */
    const pm_input_stats_t *stats;
    const pm_map_t *map;             /* inc, pairs, edges, clusters and n are read */
    size_t n_negative;               /* kept edges with phi < 0 (not clustered) */
    const char *const *names;        /* [map->n] vertex names */
    const char *const *cluster_name; /* [clusters] */
    size_t svg_drawn, svg_left_out, svg_edges_drawn;
    const char *const *files;
    size_t n_files;
    double t_read, t_count, t_measures, t_graph, t_write; /* seconds: "timings", last */
} pm_run_report_t;

/* run.json (DESIGN.md): version, options, settings, input file and its SHA-256, counts, pairs
 * removed by each threshold, network, clusters, picture, files, timings. */
pm_err_t pm_write_run_json(FILE *fp, const pm_run_report_t *r, pm_diag_t *diag);

#ifdef __cplusplus
}
#endif
#endif
