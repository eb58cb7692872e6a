/* Segments: a respondent attribute (region, store, age band, day) read from a column of the
 * input or of a segment file, its levels in order, and per (segment, item) the share with its
 * Jeffreys interval, an empirical-Bayes shrunk share, a one-against-the-rest test with
 * Benjamini-Hochberg q-values and, for ordered columns, the Cochran-Armitage trend
 * (src/segments.c, src/segstats.c). */
#ifndef PAIRMAP_SEGMENTS_H
#define PAIRMAP_SEGMENTS_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>

#include "pairmap/error.h"
#include "pairmap/incidence.h"
#include "pairmap/input.h"

#ifdef __cplusplus
extern "C" {
#endif

/* One segment column. Invariants: of[r] is a level index < n_levels or -1 (no segment) for
 * every respondent r < n_resp of the table; base[s] counts the respondents of level s;
 * levels are in their order (see pm_segcol_read). */
typedef struct {
    char *column;  /* the column's name as given */
    size_t n_resp; /* respondents of the table */
    size_t n_levels;
    char **level;         /* [n_levels] labels */
    bool ordered;         /* --segment-levels given, or every label holds a number */
    int32_t *of;          /* [n_resp] */
    uint64_t *base;       /* [n_levels] */
    uint64_t none;        /* respondents of the table without a segment */
    uint64_t unknown_ids; /* ids of the segment file that are not in the input */
    uint64_t left_out;    /* respondents with a segment left out by --max-basket (now in
                           * neither base nor none) */
} pm_segcol_t;

/* Where the column is. */
typedef struct {
    const char *path;    /* the CSV file that holds the column (the input or --segment-file) */
    const char *display; /* name in messages (NULL: path) */
    bool is_input;       /* the input itself: a respondent may have many rows, which must agree;
                          * otherwise a segment file: one row per respondent */
    const char *id_col;  /* respondent id column (header name or 1-based number; NULL: 1) */
    char sep;            /* 0: detected */
    const char *column;  /* the segment column (header name or 1-based number) */
    const char *levels;  /* --segment-levels A,B,C for this column, or NULL */
} pm_segcol_src_t;

/* Reads the segment of every respondent of table t from src (the file must have a header).
 * Level order: the levels of src->levels as given (each must occur, and every level that
 * occurs must be listed); otherwise labels that hold a number first, by their first number
 * (digits with optional thousands separators "1,000" and a decimal point; ties by label
 * bytes), then labels without a number by bytes. An empty cell gives no segment. Errors:
 * PM_EUSAGE (unknown column; a level of src->levels missing or one not listed; the table
 * has no respondent ids), PM_EDATA (two different values for one respondent, naming both
 * lines; a segment file with an id twice), PM_EIO, PM_ENOMEM. *out is initialised here and
 * owned by the caller (pm_segcol_destroy) on success; zeroed on failure. */
pm_err_t pm_segcol_read(const pm_table_t *t, const pm_segcol_src_t *src, pm_segcol_t *out,
                        pm_diag_t *diag);
void pm_segcol_destroy(pm_segcol_t *c);
/* Restricts column c to the respondents r with keep[r] (c->n_resp entries; pm_table_keep with
 * the same mask renumbers the table alike): of[] compacted, bases and `none` recounted, levels
 * no kept respondent holds removed (the others keep their order). Errors: PM_ENOMEM (c is
 * then unchanged). */
pm_err_t pm_segcol_keep(pm_segcol_t *c, const unsigned char *keep);

/* --max-basket: the respondents r < n with gone[r] (pm_incidence_t.left_out) leave the
 * column: no segment, in no base and not in `none`, counted in left_out; levels only they held
 * removed (the others keep their order). Respondents keep their numbers. Errors: PM_ENOMEM (c
 * then unchanged). */
pm_err_t pm_segcol_leave_out(pm_segcol_t *c, const unsigned char *gone, size_t n);

/* The first number in a label (NaN when it holds none): "16-24" 16, "€1,000-1,999" 1000,
 * "5 to 9 km" 5, "2.5 kg" 2.5. */
double pm_segment_label_number(const char *label);

/* The table of one column: one row per (segment, item), segment-major. */
typedef struct {
    size_t n_levels, n_items;
    double m;            /* fitted prior strength (pseudo-respondents) */
    double loglik;       /* the beta-binomial log-likelihood at m (binomial terms included) */
    int m_at;            /* 0: interior; 1: at the upper bound (no spread beyond binomial
                          * noise); -1: at the lower bound */
    size_t cells_fitted; /* (item, segment) cells in the fit */
    uint64_t B;          /* respondents with a segment */
    uint64_t *chose;     /* [n_levels * n_items] respondents (unweighted counts, also when
                          * the input is weighted) */
    bool weighted;       /* the input carries weights: shares weighted, sizes effective */
    double *n_eff;       /* [n_levels] the segment's size in the intervals, the shrinkage and
                          * the trend: its base, or weighted Kish's (sum w)^2 / sum w^2 */
    double *x_eff;       /* [n_levels * n_items] chose, or weighted share * n_eff */
    double *share;       /* [n_levels * n_items] chose / base, or weighted the chosen weight
                          * over the segment's weight (NaN for an empty segment) */
    double *mu;          /* [n_items] share over respondents with a segment (weighted) */
    double *share_low, *share_high, *shrunk, *shrunk_low, *shrunk_high, *p, *q;
    unsigned char *test;       /* 0 none, 1 fisher, 2 chi2 */
    double *trend_z, *trend_p; /* [n_items]; NaN when the column is not ordered */
} pm_segstats_t;

/* Lower and upper bounds of the fitted m. */
#define PM_SEG_M_MIN 1e-3
#define PM_SEG_M_MAX 1e8

/* Computes the table of column c over incidence inc. Weighted input (inc->weight): shares
 * weighted; the Jeffreys and posterior intervals, the beta-binomial fit and the trend test on
 * each segment's effective counts (x_eff of n_eff, Kish); the one-against-the-rest test is the
 * pairs' weighted test (chi-square on Kish's effective size of the respondents with a segment,
 * pm_assoc_weighted). m is fitted by maximum
 * likelihood over every (item, segment) cell of items with 0 < chosen < B, on log m in
 * [PM_SEG_M_MIN, PM_SEG_M_MAX]: a grid of 241 points (22 a decade) evaluated coarse to fine
 * (every 6th point, then the fine points around the best, climbing while the best is at the
 * edge), then GSL's Brent minimiser. The likelihood and the cells are computed on `threads`
 * threads (0: every core); the result is the same for any number. *out owned by the caller
 * (pm_segstats_destroy). Errors: PM_ENOMEM. Cost O(rows + levels * items * evaluations),
 * about 60 evaluations. */
/* Bytes the table of levels x items cells takes at most while it is computed (the bound
 * checked before allocation). */
#define PM_SEG_CELL_BYTES 128u
uint64_t pm_segstats_bytes(size_t levels, size_t items);

pm_err_t pm_segstats_run(const pm_incidence_t *inc, const pm_segcol_t *c, unsigned threads,
                         pm_segstats_t *out, pm_diag_t *diag);
void pm_segstats_destroy(pm_segstats_t *s);

/* The CSV header of the segments table (contract, DESIGN.md). */
#define PM_SEGMENTS_HEADER                                                                         \
    "attribute,segment,item,category,base,chose,share,share_low,share_high,shrunk,shrunk_low,"     \
    "shrunk_high,index,test,p_value,q_value,trend_z,trend_p"

/* The shrunk index of item at level: shrunk / mu (NaN when mu is 0). */
double pm_segstats_index(const pm_segstats_t *s, size_t level, size_t item);

/* The level with the highest shrunk index of item into *level and that index into *index
 * (ties: the first level); 0 when no index is defined (the item chosen by nobody with a
 * segment), 1 otherwise. O(levels). */
int pm_segstats_top(const pm_segstats_t *s, size_t item, size_t *level, double *index);

/* Writes the rows of column col (table s over the items of inc) as CSV, without the header:
 * one row per (segment, item), segment-major, numbers round-trip, undefined ones empty. flags:
 * pm_write_csv_field's (write.h). PM_EIO when the stream has an error. */
pm_err_t pm_segstats_write_csv(FILE *fp, const pm_segcol_t *col, const pm_segstats_t *s,
                               const pm_incidence_t *inc, unsigned flags);

#ifdef __cplusplus
}
#endif
#endif
