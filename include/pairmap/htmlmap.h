/* The offline HTML view of a map (src/write_html.c): one self-contained page that holds the
 * map's SVG inline, the items, kept pairs and clusters as embedded JSON, and a hand-written
 * script and style sheet (src/html/), so a planner can search, filter and point at the map in
 * a browser from a file:// URL with nothing fetched. */
#ifndef PAIRMAP_HTMLMAP_H
#define PAIRMAP_HTMLMAP_H

#include <stddef.h>
#include <stdint.h>
#include <stdio.h>

#include "pairmap/error.h"
#include "pairmap/mapwrite.h"
#include "pairmap/select.h"

#ifdef __cplusplus
extern "C" {
#endif

/* The run behind the page, for its footer (the values run.json records). All borrowed. */
typedef struct {
    const char *input;          /* the input's name as given */
    uint64_t bytes, lines;      /* input size */
    const char *sha256;         /* hex, or NULL */
    const char *const *options; /* the options as given, one "--name value" string each */
    size_t n_options;
    const char *unit; /* plural noun for respondents (--unit), NULL: "respondents" */
} pm_html_run_t;

/* One segment column for the page's segment selector: index[l * n_items + i] is the shrunk
 * index (posterior share in level l / share over all respondents with a segment) of
 * incidence item i, NaN where it has none (the `index` column of segments.csv). */
typedef struct {
    const char *column;
    size_t n_levels;
    const char *const *level;
    size_t n_items; /* the incidence's items */
    const double *index;
} pm_html_segments_t;

/* Everything the page shows. map: vertices, kept edges and clusters as the other files have
 * them (share_low/share_high required); cluster_name[c - 1] names cluster c as the SVG legend
 * does; svg, svg_len: map.svg's bytes as written (the XML declaration is dropped, the rest is
 * put in the page as it is); sel: the selection behind the edges (the sign ranks partners;
 * max_q bounds the q slider). drawn: items the SVG draws. All borrowed for the call. */
typedef struct {
    const pm_map_t *map;
    const char *const *cluster_name;
    const char *svg;
    size_t svg_len;
    const pm_select_opts_t *sel;
    size_t drawn;
    const pm_html_run_t *run;
    size_t n_segments; /* segment columns (0: no selector) */
    const pm_html_segments_t *segments;
    unsigned threads;        /* for the partner table's Jeffreys intervals (0: all cores) */
    const double *edge_cols; /* pm_html_edge_columns(map, ...), or NULL: made while writing */
} pm_html_data_t;

/* The numbers of the page's partner table (the measures and Jeffreys intervals of both
 * directions of every kept edge, on `threads` threads), which pm_html_write otherwise computes
 * itself: for a caller that has them made beside other work. malloc'd (free() it), NULL when
 * out of memory; PM_HTML_EDGE_BYTES covers it. */
double *pm_html_edge_columns(const pm_map_t *map, unsigned threads);

/* Writes the page to fp. Every text of the data reaches the page through one of two escapers:
 * the XML escaper (pm_write_xml_text) for the title, and pm_json_write_script_string for the
 * embedded JSON (which also escapes < > & and U+2028/U+2029, so no name can end the script
 * element or start markup); the SVG comes escaped from pm_svg_write. Cost O(items + edges)
 * plus one Jeffreys interval per distinct (together, item total) of an edge end, on
 * d->threads threads. Errors: PM_ENOMEM, PM_EIO (stream). */
/* An upper bound of the memory pm_html_write allocates per edge of d->map->edges beyond what
 * its inputs hold: the partner table's 11 columns of doubles (88 bytes) and the Jeffreys
 * intervals' grouping (pm_assoc_jeffreys_many: a 4-byte representative per query and a hash
 * table of fewer than 4 slots of 4 bytes per query, 2 queries per edge: 40 bytes). map checks
 * it against the memory bound before writing (src/cli/map_files.c). */
#define PM_HTML_EDGE_BYTES 128u

pm_err_t pm_html_write(FILE *fp, const pm_html_data_t *d, pm_diag_t *diag);

#ifdef __cplusplus
}
#endif
#endif
