/* Edge selection: which scored pairs become edges of the map (src/select.c).
 * Thresholds apply in this order, and each counts the pairs it removed:
 *   1. --min-count (raw joint count; applied while counting, the pairs are still tested)
 *   2. --sign      (positive keeps phi > 0, negative phi < 0, both keeps every pair)
 *   3. --max-q     (Benjamini-Hochberg q-value)
 *   4. --min-phi   (|phi|)
 *   5. --min-lift  (lift)
 *   6. --top-edges (the K pairs with the largest |weight|, ties by item names)
 * --min-share acts earlier: items below it are not eligible, so their pairs are never tested. */
#ifndef PAIRMAP_SELECT_H
#define PAIRMAP_SELECT_H

#include <stddef.h>
#include <stdint.h>

#include "pairmap/assoc.h"

#ifdef __cplusplus
extern "C" {
#endif

typedef enum { PM_MEASURE_PHI = 0, PM_MEASURE_LIFT = 1, PM_MEASURE_JACCARD = 2 } pm_measure_t;

typedef struct {
    uint32_t min_count;   /* default 5 */
    double min_share;     /* default 0 */
    double max_q;         /* default 0.05 */
    double min_phi;       /* default 0 (no bound) */
    double min_lift;      /* default 0 (no bound) */
    size_t top_edges;     /* 0: no limit */
    pm_sign_t sign;       /* default positive */
    pm_measure_t measure; /* edge weight, default phi */
} pm_select_opts_t;

void pm_select_opts_init(pm_select_opts_t *o);

/* The kept pairs: idx[] into the pm_pairs_t, in (a, b) order; weight[] the chosen measure. */
typedef struct {
    size_t n;
    size_t *idx;
    double *weight;
    uint64_t tested;     /* hypotheses */
    uint64_t never_seen; /* pairs never seen together (not listed under --min-count > 0) */
    uint64_t removed_count, removed_sign, removed_q, removed_phi, removed_lift, removed_top;
} pm_edges_t;

/* Applies o to pp. *out owns the result (pm_edges_free). O(pairs log pairs). */
pm_err_t pm_select_run(const pm_pairs_t *pp, const pm_incidence_t *inc, const pm_select_opts_t *o,
                       pm_edges_t **out, pm_diag_t *diag);
void pm_edges_free(pm_edges_t *e);

/* The chosen measure of m. */
double pm_select_weight(const pm_measures_t *m, pm_measure_t measure);
const char *pm_measure_name(pm_measure_t m);
const char *pm_sign_name(pm_sign_t s);

#ifdef __cplusplus
}
#endif
#endif
