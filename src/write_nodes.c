/* nodes.csv of the map: one row per vertex with share, Jeffreys interval, cluster, degree and
 * layout position (see mapwrite.h). */
#include <errno.h>
#include <stdlib.h>
#include <string.h>

#include "pairmap/mapwrite.h"
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
    fputs(PM_NODES_HEADER "\n", fp);
    for (size_t r = 0; r < map->n; r++) {
        size_t v = k[r].v;
        if (map->share_low && map->share_high) {
            pm_write_item_fields_with(fp, inc, map->item[v], map->share_low[v], map->share_high[v],
                                      map->csv_flags);
        } else {
            pm_write_item_fields(fp, inc, map->item[v], map->csv_flags);
        }
        fprintf(fp, ",%u,%u,", map->clusters->cluster[v], map->degree[v]);
        pm_write_number(fp, map->xy[2 * v]);
        fputc(',', fp);
        pm_write_number(fp, map->xy[2 * v + 1]);
        fputc('\n', fp);
    }
    free(k);
    if (ferror(fp)) {
        return pm_diag_set(diag, PM_EIO, NULL, 0, "cannot write nodes.csv: %s",
                           strerror(errno ? errno : EIO));
    }
    return PM_OK;
}
