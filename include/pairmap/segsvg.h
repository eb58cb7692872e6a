/* segments.svg (src/segsvg.c): the segment tables of `map --segment-col` as one standalone
 * SVG 1.1 picture to put beside the map: items as rows grouped by the map's clusters (cluster
 * order and colours as map.svg), segments as columns headed by their base, each cell tinted by
 * the shrunk index and showing the shrunk share. */
#ifndef PAIRMAP_SEGSVG_H
#define PAIRMAP_SEGSVG_H

#include <stddef.h>
#include <stdint.h>
#include <stdio.h>

#include "pairmap/error.h"
#include "pairmap/segments.h"

#ifdef __cplusplus
extern "C" {
#endif

/* What to draw. Row candidates are the map's vertices: vertex v is item item[v] of the
 * segment tables (and of name[]), in cluster cluster[v] (1..n_clusters, 1 = largest, as the
 * map numbers them), with share share[v] (rows of a cluster by share descending, then name).
 * cluster_name[c - 1] names cluster c (NULL or an entry NULL: "Cluster c"). Segment column j
 * is cols[j] with its table stats[j] (pm_segstats_run over the same items). Text is UTF-8 and
 * goes through the one XML text cleaner (text.h). Everything is borrowed. */
typedef struct {
    size_t n;
    const uint32_t *item;
    const int *cluster;
    const double *share;
    const char *const *name;
    size_t n_clusters;
    const char *const *cluster_name;
    size_t n_cols;
    const pm_segcol_t *cols;
    const pm_segstats_t *stats;
    double max_q;         /* cells with q_value <= max_q are marked */
    size_t draw;          /* rows at most; 0: PM_SEGSVG_ROWS */
    const char *title;    /* NULL: a default title */
    uint64_t respondents; /* for the subtitle */
    const char *unit;     /* what one respondent is, a plural noun (--unit); NULL or "":
                           * respondents */
} pm_segsvg_data_t;

#define PM_SEGSVG_ROWS 60         /* default rows */
#define PM_SEGSVG_MAX_CELLS 20000 /* rows x segment columns drawn, at most */
#define PM_SEGSVG_MAX_LEVELS 40   /* segments drawn per column, at most */

typedef struct {
    size_t rows_drawn, rows_left_out;
    size_t segments_drawn, segments_left_out;
} pm_segsvg_stats_t;

/* Writes the picture to fp in one piece (nothing on error). When there are more vertices than
 * rows to draw, the rows kept are those whose segments differ most (largest |log index| over
 * every drawn cell; ties by share, then name), shown in cluster order. Deterministic.
 * Machine-readable marks: cells are rects of class "cell" with data-item, data-attribute,
 * data-segment, data-shrunk, data-index, data-q (round-trip; empty when not defined) and
 * data-marked ("1" when q <= max_q); column heads class "segment-head" with data-attribute,
 * data-segment, data-base; row labels class "row-label" with data-item and data-cluster;
 * trend marks class "trend" with data-item, data-attribute, data-z, data-q. stats may be
 * NULL. Errors: PM_EIO (stream), PM_ENOMEM. Cost O(rows x segments + vertices log vertices). */
pm_err_t pm_segsvg_write(FILE *fp, const pm_segsvg_data_t *d, pm_segsvg_stats_t *stats,
                         pm_diag_t *diag);

#ifdef __cplusplus
}
#endif
#endif
