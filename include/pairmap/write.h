/* Writers of result files (src/write_*.c). Each writes to an open stream and checks it;
 * atomic placement in an output directory is src/outfile.c's job. */
#ifndef PAIRMAP_WRITE_H
#define PAIRMAP_WRITE_H

#include <stdio.h>

#include "pairmap/assoc.h"
#include "pairmap/incidence.h"
#include "pairmap/oddsratio.h"
#include "pairmap/select.h"
#include "pairmap/stratified.h"

#ifdef __cplusplus
extern "C" {
#endif

/* The edges.csv columns of DESIGN.md (contract), the odds ratio (pm_write_pair_oddsratio) last. */
#define PM_EDGES_HEADER                                                                            \
    "item_a,item_b,together,expected,support,confidence_ab,confidence_ba,lift,phi,jaccard,"        \
    "test,p_value,q_value,odds_ratio,odds_ratio_low,odds_ratio_high"

/* Flags of the CSV text cells (pm_write_csv_field): PM_CSV_RAW writes text as it is; without
 * it, a cell that begins with = + - @, tab or CR gets a leading apostrophe so that a
 * spreadsheet shows it as text instead of running it as a formula (OWASP's CSV-injection
 * guidance; `--csv-raw` in the CLI). */
#define PM_CSV_RAW 1u

/* Writes the header and one row per selected edge (rows in (item_a, item_b) order); names
 * written with csv_flags. Returns PM_EIO when the stream reports an error. */
pm_err_t pm_write_edges_csv(FILE *fp, const pm_pairs_t *pp, const pm_incidence_t *inc,
                            const pm_edges_t *e, unsigned csv_flags, pm_diag_t *diag);
/* The within-segment columns (--segment-col), appended after PM_EDGES_HEADER's. */
#define PM_STRAT_HEADER ",mh_odds_ratio,mh_low,mh_high,cmh_p,heterogeneity_p,reversed"
/* The same with the columns of PM_STRAT_HEADER appended: st[i] for edge i of e, or, with st
 * NULL, empty cells (weighted input). */
pm_err_t pm_write_edges_csv_strat(FILE *fp, const pm_pairs_t *pp, const pm_incidence_t *inc,
                                  const pm_edges_t *e, const pm_strat_t *st, unsigned csv_flags,
                                  pm_diag_t *diag);

/* Either of the two above (with_strat: the within-segment columns from st) with the rows made
 * on `threads` threads (0: one per core); the bytes do not depend on it. */
pm_err_t pm_write_edges_csv_on(FILE *fp, const pm_pairs_t *pp, const pm_incidence_t *inc,
                               const pm_edges_t *e, int with_strat, const pm_strat_t *st,
                               unsigned csv_flags, unsigned threads, pm_diag_t *diag);

/* The odds ratio of listed pair k of pp (measures m from pm_pairs_measures: its test picks the
 * branch), as edges.csv writes it. */
void pm_write_pair_oddsratio(const pm_pairs_t *pp, const pm_incidence_t *inc, size_t k,
                             const pm_measures_t *m, pm_oddsratio_t *r);

/* `items`: item,category,respondents,share,share_low,share_high for every item (95% Jeffreys
 * interval; weighted input: share of the weight, interval on Kish's effective size). */
pm_err_t pm_write_items_csv(FILE *fp, const pm_incidence_t *inc, unsigned csv_flags,
                            pm_diag_t *diag);

/* Writes the fields item,category,respondents,share,share_low,share_high of item i (no line
 * end): the `items` row, and the start of a nodes.csv row. */
void pm_write_item_fields(FILE *fp, const pm_incidence_t *inc, size_t i, unsigned csv_flags);
/* The same with the interval given (from pm_assoc_share_intervals). */
void pm_write_item_fields_with(FILE *fp, const pm_incidence_t *inc, size_t i, double lo, double hi,
                               unsigned csv_flags);

/* The one CSV text-cell writer: s as one field, quoted when it holds a delimiter, quote, line
 * break or edge spaces, with the apostrophe rule of PM_CSV_RAW above unless flags has it.
 * Names that only look like numbers ("-5") are text and get the apostrophe too. */
void pm_write_csv_field(FILE *fp, const char *s, unsigned flags);
/* Writes a number so that it reads back to the same double (C locale). */
void pm_write_number(FILE *fp, double v);

#ifdef __cplusplus
}
#endif
#endif
