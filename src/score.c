/* The scoring pipeline in one call (see assoc.h): pm_assoc_begin, the counting, pm_assoc_finish.
 * The CLI runs the same three steps itself (src/cli/cli.c, pm_cli_score). */
#include "pairmap/assoc.h"
#include "pairmap/cooccur.h"

pm_err_t pm_assoc_run(const pm_incidence_t *inc, const pm_assoc_opts_t *o, pm_pairs_t **out,
                      pm_diag_t *diag) {
    pm_assoc_stage_t *st = NULL;
    pm_counts_opts_t co;
    pm_counts_t *cnt = NULL;
    *out = NULL;
    pm_err_t rc = pm_assoc_begin(inc, o, &st, &co, diag);
    if (rc) {
        return rc;
    }
    rc = pm_counts_build(inc, &co, &cnt, diag);
    if (rc) {
        pm_assoc_stage_free(st);
        return rc;
    }
    return pm_assoc_finish(st, cnt, out, diag);
}
