/* Writers of result files (src/write_*.c). Each writes to an open stream and checks it;
 * atomic placement in an output directory is src/outfile.c's job. */
#ifndef PAIRMAP_WRITE_H
#define PAIRMAP_WRITE_H

#include <stdio.h>

#include "pairmap/assoc.h"
#include "pairmap/incidence.h"
#include "pairmap/select.h"

#ifdef __cplusplus
extern "C" {
#endif

/* The edges.csv columns of DESIGN.md (contract). */
#define PM_EDGES_HEADER                                                                         \
    "item_a,item_b,together,expected,support,confidence_ab,confidence_ba,lift,phi,jaccard,"    \
    "test,p_value,q_value"

/* Writes the header and one row per selected edge (rows in (item_a, item_b) order).
 * Returns PM_EIO when the stream reports an error. */
pm_err_t pm_write_edges_csv(FILE *fp, const pm_pairs_t *pp, const pm_incidence_t *inc,
                            const pm_edges_t *e, pm_diag_t *diag);

/* `items`: item,category,respondents,share,share_low,share_high for every item (95% Jeffreys
 * interval; weighted input: share of the weight, interval on Kish's effective size). */
pm_err_t pm_write_items_csv(FILE *fp, const pm_incidence_t *inc, pm_diag_t *diag);

/* Writes the fields item,category,respondents,share,share_low,share_high of item i (no line
 * end): the `items` row, and the start of a nodes.csv row. */
void pm_write_item_fields(FILE *fp, const pm_incidence_t *inc, size_t i);
/* The same with the interval given (from pm_assoc_share_intervals). */
void pm_write_item_fields_with(FILE *fp, const pm_incidence_t *inc, size_t i, double lo,
                               double hi);

/* Writes s as one CSV field, quoted when it holds a delimiter, quote, line break or edge
 * spaces. */
void pm_write_csv_field(FILE *fp, const char *s);
/* Writes a number so that it reads back to the same double (C locale). */
void pm_write_number(FILE *fp, double v);

#ifdef __cplusplus
}
#endif
#endif
