/* map --segment-col (src/cli/map_segments.c): the segment tables of the run's segment columns
 * over the map's incidence, written to DIR/segments.csv and DIR/segments.svg, summarised in
 * run.json and handed to map.graphml (the top segment of every vertex). */
#ifndef PAIRMAP_CLI_MAP_SEGMENTS_H
#define PAIRMAP_CLI_MAP_SEGMENTS_H

#include "cli.h"
#include "pairmap/mapwrite.h"
#include "pairmap/outfile.h"
#include "pairmap/segsvg.h"

typedef struct {
    size_t n;                /* segment columns; 0: none (nothing below is used) */
    const pm_segcol_t *cols; /* borrowed: the run's columns (pm_cli_segcols) */
    pm_segstats_t *stats;    /* [n] owned */
    pm_segsvg_stats_t svg;   /* what segments.svg drew */
    double seconds;          /* computing and writing */
} pm_cli_mapseg_t;

/* map --help: the files --segment-col adds. */
extern const char pm_cli_mapseg_help[];

/* The tables of every --segment-col column over inc on `threads` threads (0: every core;
 * zeroes *ms first; weighted input as `segments` takes it), each one's memory checked against
 * the bound first (pm_cli_check_bytes). 0, or the exit status after an error message. */
int pm_cli_mapseg_run(pm_cli_mapseg_t *ms, const pm_cli_t *c, const pm_incidence_t *inc,
                      unsigned threads);

/* Creates, writes and finishes DIR/segments.csv and DIR/segments.svg in od (renamed into place
 * with the other files at the commit). pic: the picture's rows, clusters, title, max_q and
 * draw (its cols/stats are filled here). Errors as pm_outdir_* and pm_segsvg_write. */
pm_err_t pm_cli_mapseg_write(pm_cli_mapseg_t *ms, pm_outdir_t *od, const pm_incidence_t *inc,
                             pm_segsvg_data_t pic, unsigned csv_flags, pm_diag_t *d);

/* run.json's "segments" array: per column its name, levels with their bases, whether ordered,
 * m and where it lies, the log-likelihood, the cells fitted, and the respondents left out;
 * and "segments_svg" (rows and segments drawn and left out). Nothing without columns. */
void pm_cli_mapseg_json(const pm_cli_mapseg_t *ms, pm_json_t *j);

void pm_cli_mapseg_free(pm_cli_mapseg_t *ms);

#endif
