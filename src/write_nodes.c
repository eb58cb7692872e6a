/* nodes.csv of the map: one row per vertex with share, Jeffreys interval, cluster, degree and
 * layout position, cluster name and sub-cluster (see mapwrite.h). */
#include <errno.h>
#include <stdlib.h>
#include <string.h>

#include "pairmap/mapwrite.h"
#include "pairmap/network.h"
#include "pairmap/write.h"
#include "util.h"

typedef struct {
    uint32_t cluster;
    double share;
    const char *name;
    size_t v;
} node_key;

static int cmp_node(const void *p, const void *q) {
    const node_key *a = p, *b = q;
    if (a->cluster != b->cluster) {
        return a->cluster < b->cluster ? -1 : 1;
    }
    if (a->share != b->share) {
        return a->share > b->share ? -1 : 1;
    }
    return pm_i_bytecmp(a->name, b->name);
}

pm_err_t pm_write_nodes_csv(FILE *fp, const pm_map_t *map, pm_diag_t *diag) {
    const pm_incidence_t *inc = map->inc;
    node_key *k = pm_i_malloc(map->n ? map->n : 1, sizeof *k);
    if (!k) {
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
    }
    for (size_t v = 0; v < map->n; v++) {
        k[v].cluster = map->clusters->cluster[v];
        k[v].share = pm_incidence_share(inc, map->item[v]);
        k[v].name = inc->name[map->item[v]];
        k[v].v = v;
    }
    qsort(k, map->n, sizeof *k, cmp_node);
    /* the clusters' names: given, or made by the one naming function */
    size_t nc = map->clusters->n_clusters;
    char **own = NULL;
    const char *const *cname = map->cluster_name;
    pm_err_t rc = PM_ENOMEM;
    if (!cname) {
        const char **names = pm_i_malloc(map->n ? map->n : 1, sizeof *names);
        own = pm_i_calloc(nc ? nc : 1, sizeof *own);
        for (size_t v = 0; names && v < map->n; v++) {
            names[v] = inc->name[map->item[v]];
        }
        for (size_t c = 0; names && own && c < nc; c++) {
            if (!(own[c] = pm_cluster_name(map->clusters, c, names))) {
                break;
            }
        }
        int ok = names && own && (nc == 0 || own[nc - 1]);
        pm_i_free(names);
        if (!ok) {
            goto cleanup;
        }
        cname = (const char *const *)own;
    }
    fputs(PM_NODES_HEADER "\n", fp);
    for (size_t r = 0; r < map->n; r++) {
        size_t v = k[r].v;
        if (map->share_low && map->share_high) {
            pm_write_item_fields_with(fp, inc, map->item[v], map->share_low[v], map->share_high[v],
                                      map->csv_flags);
        } else {
            pm_write_item_fields(fp, inc, map->item[v], map->csv_flags);
        }
        uint32_t cl = map->clusters->cluster[v];
        fprintf(fp, ",%u,%u,", cl, map->degree[v]);
        pm_write_number(fp, map->xy[2 * v]);
        fputc(',', fp);
        pm_write_number(fp, map->xy[2 * v + 1]);
        fputc(',', fp);
        pm_write_csv_field(fp, cname[cl - 1], map->csv_flags);
        fputc(',', fp);
        if (map->multiscale && map->multiscale->subcluster[v]) {
            fprintf(fp, "%u.%u", cl, map->multiscale->subcluster[v]);
        }
        fputc('\n', fp);
    }
    rc = PM_OK;
cleanup:
    if (own) {
        for (size_t c = 0; c < nc; c++) {
            free(own[c]);
        }
        free(own);
    }
    free(k);
    if (rc) {
        return pm_diag_set(diag, rc, NULL, 0, "out of memory");
    }
    if (ferror(fp)) {
        return pm_diag_set(diag, PM_EIO, NULL, 0, "cannot write nodes.csv: %s",
                           strerror(errno ? errno : EIO));
    }
    return PM_OK;
}
