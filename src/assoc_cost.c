/* The scoring stage's cost, known before it starts (pm_assoc_cost, see assoc.h): the
 * counting's bounds (pm_counts_cost) with the measures' and the family's memory per pair. */
#include "pairmap/assoc.h"

#include <stdlib.h>
#include <string.h>

#include "util.h"

pm_err_t pm_assoc_cost(const pm_incidence_t *inc, const pm_assoc_opts_t *o, pm_counts_cost_t *out,
                       pm_diag_t *diag) {
    memset(out, 0, sizeof *out);
    unsigned char *el = pm_i_calloc(inc->n_items ? inc->n_items : 1, 1);
    if (!el) {
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
    }
    uint64_t E = 0;
    for (size_t i = 0; i < inc->n_items; i++) { /* as pm_assoc_run decides */
        el[i] = inc->count[i] > 0 && inc->count[i] < inc->N &&
                !(pm_incidence_share(inc, i) < o->min_share) &&
                inc->count[i] >= o->min_count; /* the family's items: only they are counted */
        E += el[i];
    }
    pm_counts_opts_t co;
    pm_counts_opts_init(&co);
    co.threads = o->threads;
    co.min_keep = o->min_count ? o->min_count : 1;
    co.eligible = el;
    co.kernel = o->kernel;
    co.dense_max_items = o->dense_max_items;
    co.given = o->given;
    pm_err_t rc = pm_counts_cost(inc, &co, out);
    free(el);
    if (rc) {
        return pm_diag_set(diag, rc, NULL, 0, "out of memory");
    }
    int w = inc->wcount != NULL, ids = o->sign != PM_SIGN_POSITIVE;
    uint64_t kept = out->kept_max, pruned = out->pairs_max - out->kept_max;
    if (o->sign == PM_SIGN_NEGATIVE && o->min_count == 0) {
        kept = E * (E - (E > 0)) / 2; /* every pair of eligible items is listed */
        pruned = 0;
    }
    long double b = (long double)out->bytes - (long double)out->kept_max * PM_COUNTS_KEPT_BYTES(w);
    b += (long double)kept * PM_ASSOC_KEPT_BYTES(w);
    b += (long double)pruned * PM_ASSOC_PRUNED_BYTES(w, ids);
    out->bytes = b >= 1.8e19L ? UINT64_MAX : (uint64_t)b;
    return PM_OK;
}
