/* The one cluster-naming function (network.h): a cluster is named by its most central
 * members. Used by the summary, run.json, nodes.csv's cluster_name, the SVG legend and
 * regions, and the HTML view. */
#include <string.h>

#include "pairmap/network.h"
#include "util.h"

char *pm_cluster_name(const pm_clusters_t *cl, size_t c, const char *const *names) {
    if (!cl || !names || c >= cl->n_clusters) {
        return NULL;
    }
    size_t k = cl->first[c + 1] - cl->first[c], len = 1;
    static const char sep[] = " \xc2\xb7 "; /* " · " */
    if (k > PM_CLUSTER_NAME_MEMBERS) {
        k = PM_CLUSTER_NAME_MEMBERS;
    }
    for (size_t j = 0; j < k; j++) {
        len += strlen(names[cl->members[cl->first[c] + j]]) + (j ? sizeof sep - 1 : 0);
    }
    char *out = pm_i_malloc(len, 1);
    if (!out) {
        return NULL;
    }
    size_t o = 0;
    for (size_t j = 0; j < k; j++) {
        const char *nm = names[cl->members[cl->first[c] + j]];
        size_t n = strlen(nm);
        if (j) {
            memcpy(out + o, sep, sizeof sep - 1);
            o += sizeof sep - 1;
        }
        memcpy(out + o, nm, n);
        o += n;
    }
    out[o] = '\0';
    return out;
}
