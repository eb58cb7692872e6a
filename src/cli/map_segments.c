/* map --segment-col: segments.csv, segments.svg, run.json's "segments" (see map_segments.h). */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "cli.h"
#include "map_segments.h"

const char pm_cli_mapseg_help[] =
    "With --segment-col also (see pairmap segments --help for the table's columns)\n"
    "  segments.csv the segments table of every --segment-col column, as pairmap segments\n"
    "               prints it; map.graphml gains per vertex and column the segment with the\n"
    "               highest shrunk index and that index (top_segment, top_index), run.json\n"
    "               the columns, segments, bases, m, log-likelihood and what was left out\n"
    "  segments.svg the items as rows grouped by the map's clusters, the segments as columns\n"
    "               headed by their base; each cell shows the shrunk share, tinted by the\n"
    "               shrunk index from blue (1/4 or less) through light grey (1: as everywhere)\n"
    "               to vermillion (4 or more), on log2(index) / 2; outlined where q is at\n"
    "               most --max-q; ordered columns get a trend column (Cochran-Armitage z;\n"
    "               bold where its Benjamini-Hochberg q over the column's items is at most\n"
    "               the same --max-q). Rows: at most --draw (default 60, and 20,000 cells),\n"
    "               the items whose segments differ most (largest |log index| to 3\n"
    "               decimals), then the most chosen; at most 40 segments per column\n";

int pm_cli_mapseg_run(pm_cli_mapseg_t *ms, const pm_cli_t *c, const pm_incidence_t *inc,
                      unsigned threads) {
    memset(ms, 0, sizeof *ms);
    size_t n = 0;
    const pm_segcol_t *cols = pm_cli_segcols(&n);
    if (n == 0) {
        return 0;
    }
    double t0 = pm_cli_now();
    ms->stats = calloc(n, sizeof *ms->stats);
    if (!ms->stats) {
        fputs("pairmap: out of memory\n", stderr);
        return 4;
    }
    ms->cols = cols;
    for (size_t j = 0; j < n; j++) {
        int rc = pm_cli_check_segtable(c, cols[j].n_levels, inc->n_items);
        if (rc) {
            pm_cli_mapseg_free(ms);
            return rc;
        }
        pm_diag_t d;
        pm_diag_clear(&d);
        if (pm_segstats_run(inc, &cols[j], threads, &ms->stats[j], &d)) {
            pm_cli_mapseg_free(ms);
            return pm_cli_fail(&d);
        }
        ms->n = j + 1;
    }
    ms->seconds = pm_cli_now() - t0;
    return 0;
}

static pm_err_t write_csv(pm_cli_mapseg_t *ms, pm_outdir_t *od, const pm_incidence_t *inc,
                          unsigned csv_flags, pm_diag_t *d) {
    FILE *fp = NULL;
    pm_err_t rc = pm_outdir_create(od, "segments.csv", &fp, d);
    if (rc) {
        return rc;
    }
    fputs(PM_SEGMENTS_HEADER "\n", fp);
    for (size_t j = 0; j < ms->n && !rc; j++) {
        rc = pm_segstats_write_csv(fp, &ms->cols[j], &ms->stats[j], inc, csv_flags);
    }
    if (rc) {
        pm_diag_set(d, PM_EIO, NULL, 0, "cannot write segments.csv");
    }
    pm_err_t rc2 = pm_outdir_finish(od, fp, rc ? NULL : d);
    return rc ? rc : rc2;
}

pm_err_t pm_cli_mapseg_write(pm_cli_mapseg_t *ms, pm_outdir_t *od, const pm_incidence_t *inc,
                             pm_segsvg_data_t pic, unsigned csv_flags, pm_diag_t *d) {
    if (ms->n == 0) {
        return PM_OK;
    }
    double t0 = pm_cli_now();
    pm_err_t rc = write_csv(ms, od, inc, csv_flags, d);
    if (rc) {
        return rc;
    }
    FILE *fp = NULL;
    if ((rc = pm_outdir_create(od, "segments.svg", &fp, d)) != PM_OK) {
        return rc;
    }
    pic.n_cols = ms->n;
    pic.cols = ms->cols;
    pic.stats = ms->stats;
    rc = pm_segsvg_write(fp, &pic, &ms->svg, d);
    pm_err_t rc2 = pm_outdir_finish(od, fp, rc ? NULL : d);
    ms->seconds += pm_cli_now() - t0;
    return rc ? rc : rc2;
}

void pm_cli_mapseg_json(const pm_cli_mapseg_t *ms, pm_json_t *j) {
    if (ms->n == 0) {
        return;
    }
    pm_json_begin_array(j, "segments");
    for (size_t k = 0; k < ms->n; k++) {
        const pm_segcol_t *c = &ms->cols[k];
        const pm_segstats_t *s = &ms->stats[k];
        pm_json_begin_object(j, NULL);
        pm_json_string(j, "column", c->column);
        pm_json_bool(j, "ordered", c->ordered);
        pm_json_begin_array(j, "levels");
        for (size_t l = 0; l < c->n_levels; l++) {
            pm_json_begin_object(j, NULL);
            pm_json_string(j, "segment", c->level[l]);
            pm_json_uint(j, "base", c->base[l]);
            if (s->weighted) {
                pm_json_number(j, "effective_size", s->n_eff[l]); /* Kish */
            }
            pm_json_end_object(j);
        }
        pm_json_end_array(j);
        pm_json_bool(j, "weighted", s->weighted);
        pm_json_uint(j, "respondents_with_segment", s->B);
        pm_json_number(j, "m", s->m);
        pm_json_string(j, "m_at",
                       s->m_at > 0   ? "upper bound (no spread beyond chance)"
                       : s->m_at < 0 ? "lower bound"
                                     : "interior");
        pm_json_number(j, "m_lower_bound", PM_SEG_M_MIN);
        pm_json_number(j, "m_upper_bound", PM_SEG_M_MAX);
        pm_json_number(j, "log_likelihood", s->loglik);
        pm_json_uint(j, "cells_fitted", s->cells_fitted);
        pm_json_begin_object(j, "left_out");
        pm_json_uint(j, "respondents_without_segment", c->none);
        pm_json_uint(j, "respondents_left_out_by_max_basket", c->left_out);
        pm_json_uint(j, "segment_file_ids_not_in_input", c->unknown_ids);
        pm_json_end_object(j);
        pm_json_end_object(j);
    }
    pm_json_end_array(j);
    pm_json_begin_object(j, "segments_svg");
    pm_json_uint(j, "rows_drawn", ms->svg.rows_drawn);
    pm_json_uint(j, "rows_left_out", ms->svg.rows_left_out);
    pm_json_uint(j, "segments_drawn", ms->svg.segments_drawn);
    pm_json_uint(j, "segments_left_out", ms->svg.segments_left_out);
    pm_json_end_object(j);
}

void pm_cli_mapseg_free(pm_cli_mapseg_t *ms) {
    for (size_t j = 0; ms->stats && j < ms->n; j++) {
        pm_segstats_destroy(&ms->stats[j]);
    }
    free(ms->stats);
    memset(ms, 0, sizeof *ms);
}
