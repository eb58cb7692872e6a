/* Confidence of one item towards another with its Jeffreys interval: the one definition
 * behind `pairmap partners` and the HTML page's partner table (see assoc.h). */
#include "pairmap/assoc.h"

void pm_assoc_confidence(const pm_incidence_t *inc, uint32_t a, uint64_t n_ab, double w_ab,
                         double *conf, double *lo, double *hi) {
    if (inc->weight) {
        double n = (double)inc->count[a];
        double w = inc->wcount ? inc->wcount[a] : n, w2 = inc->w2count ? inc->w2count[a] : n;
        double neff = w2 > 0 ? w * w / w2 : 0;
        *conf = w_ab / w;
        pm_assoc_jeffreys(*conf * neff, neff, 0.05, lo, hi);
    } else {
        *conf = (double)n_ab / (double)inc->count[a];
        pm_assoc_jeffreys((double)n_ab, (double)inc->count[a], 0.05, lo, hi);
    }
}
