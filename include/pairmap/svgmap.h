/* The SVG map (src/svgmap.c and its stages src/svg_*.c): a standalone SVG 1.1 picture of the
 * clusters for a report. Input is plain arrays so the drawing knows nothing of igraph; the picture
 * is laid out afresh for the drawn items with pm_layout_fr (network.h). */
#ifndef PAIRMAP_SVGMAP_H
#define PAIRMAP_SVGMAP_H

#include <stddef.h>
#include <stdint.h>
#include <stdio.h>

#include "pairmap/error.h"

#ifdef __cplusplus
extern "C" {
#endif

/* What to draw. Node i: name, category (the array or an entry NULL: none), share in [0,1],
 * cluster 1..n_clusters (1 = largest; clusters of one are items on their own), strength (sum
 * of positive edge weights; the array NULL: summed from the edges). Edge k joins ea[k] and
 * eb[k] with the edge measure weight[k]; negative weight = a negative (substitute) edge.
 * cluster_name NULL, or an entry NULL: "Cluster c". Text is UTF-8; every text goes through
 * the one XML text cleaner (pm_text_xml_clean with PM_TEXT_XML_LINE, text.h): bad bytes,
 * controls and non-characters become U+FFFD, bidirectional controls visible \u202E. Everything is
 * borrowed for the duration of the call. */
typedef struct {
    size_t n_nodes;
    const char *const *name;
    const char *const *category;
    const double *share;
    const int *cluster;
    const double *strength;
    size_t n_edges;
    const uint32_t *ea, *eb;
    const double *weight;
    size_t n_clusters;
    const char *const *cluster_name; /* cluster c (1-based) is cluster_name[c - 1] */
    uint64_t respondents;
    const char *thresholds; /* e.g. "min count 5, q <= 0.05, phi > 0", for the subtitle */
    /* Optional (NULL when not given; a zeroed struct gets the defaults): */
    const char *measure;           /* name of the edge measure for the legend, e.g. "phi";
                                    * NULL: "edge weight" */
    const unsigned char *negative; /* per edge, nonzero = a negative (substitute) pair; NULL:
                                    * weight[k] < 0. Needed when the measure is lift, which
                                    * stays positive for substitutes */
    /* the sub-clusters of big clusters (pm_multiscale_t), for the legend: sub_label[j] (e.g.
     * "1.2: Name · Name") of sub_size[j] items is a sub-cluster of cluster sub_of[j] + 1; a
     * cluster's come together, in order. n_sub 0: none. The legend lists them under their
     * cluster, one a line, in place of its other members */
    size_t n_sub;
    const char *const *sub_label;
    const uint32_t *sub_of;
    const size_t *sub_size;
} pm_svg_data_t;

typedef struct {
    const char *title;     /* NULL: a default title */
    int width, height;     /* canvas in px; 0: defaults */
    size_t draw;           /* items to draw; 0: sized from the canvas */
    int color_by_category; /* 0: fill by cluster */
    uint64_t seed;         /* of the layout */
    int iterations;        /* layout iterations; 0: default */
    const char *unit;      /* what one respondent is, a plural noun ("orders"), for the
                            * subtitle, the size key and the tooltips; NULL: "respondents" */
} pm_svg_opts_t;

typedef struct {
    size_t drawn;    /* items drawn */
    size_t left_out; /* items not drawn */
    size_t edges_drawn;
    /* what was chosen and why (the draw budget; see pm_svg_write) */
    size_t top, top_drawn; /* the most chosen items (always first) and how many were drawn */
    size_t clusters, clusters_drawn; /* clusters of 3 or more items; drawn (hubs first) */
    size_t small, small_drawn;       /* clusters of two: summarised in the legend; drawn */
    size_t alone_drawn;              /* items on their own drawn */
    size_t labels_shortened;         /* shortened with an ellipsis (never below 12 characters) */
    size_t labels_left_out;          /* no room even shortened: the tooltip names the item */
    size_t negative_left_out;        /* negative pairs between drawn items not drawn: at most 2
                                      * dashed lines an item, the strongest first */
} pm_svg_stats_t;

/* Defaults: seed 1, everything else 0. */
void pm_svg_opts_init(pm_svg_opts_t *o);

/* Machine-readable marks in the SVG (for scripts and tests/ref/svg_geometry.py): node
 * circles have class "node" with data-item, data-cluster, data-share (round-trip) and
 * data-category; their labels class "label" with data-item (a label's box is computable from
 * x, y, font-size, text-anchor and font-weight as src/svg_text.c measures text); edges class
 * "edge" (negative ones "edge negative") with data-a, data-b, data-weight; regions class
 * "region" and cluster names class "cluster-label" with data-cluster; legend entries of
 * clusters class "legend-cluster" with data-cluster, data-size, data-drawn (and
 * data-subclusters, their number, for a big cluster that lists its sub-clusters).
 *
 * Writes the SVG to fp in one piece (nothing on error). Deterministic for the same data and
 * options. Draws at most o->draw items (fewer when their labels cannot all fit without
 * overlap), chosen in this order (the draw budget): the 6 most chosen items; the hubs of each
 * cluster of 3 or more items (its 3 members with the most strength, the largest clusters
 * first when the budget cannot hold 3 of every cluster); more members of those clusters in
 * proportion to cluster size; items on their own by share; last the members of clusters of
 * two, which the legend otherwise summarises. A label is shown whole, shortened with an
 * ellipsis to no fewer than 12 characters, or left out (the node's tooltip names it); a
 * cluster's label is "k: " and its name shortened once, the same in the map and the legend.
 * Clusters beyond the palette's seven colours reuse them with a dashed outline; grey is for
 * items on their own. stats says what was drawn and why. o NULL: defaults; stats and diag may be
 * NULL. Cost: a few layouts of the drawn items (Fruchterman-Reingold, O(iterations * drawn^2)
 * each). Errors: PM_EUSAGE (canvas below 400x300 or above 20000 px), PM_EIO (stream), PM_ENOMEM,
 * PM_EINTERNAL (layout; data that breaks the invariants above). */
pm_err_t pm_svg_write(FILE *fp, const pm_svg_data_t *d, const pm_svg_opts_t *o,
                      pm_svg_stats_t *stats, pm_diag_t *diag);

/* The same picture (byte for byte what pm_svg_write writes) into a new buffer, e.g. to put it
 * inline into an HTML page: *out gets the whole SVG document (the XML declaration first),
 * NUL-terminated, *len its length without the NUL; the caller frees *out with free(). On
 * error *out is NULL and *len 0. Same options, errors and cost as pm_svg_write (no PM_EIO). */
pm_err_t pm_svg_render(const pm_svg_data_t *d, const pm_svg_opts_t *o, char **out, size_t *len,
                       pm_svg_stats_t *stats, pm_diag_t *diag);

#ifdef __cplusplus
}
#endif
#endif
