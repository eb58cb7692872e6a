/* clusters.csv: one row per cluster of the map (see mapwrite.h). */
#include <errno.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "pairmap/mapwrite.h"
#include "pairmap/write.h"
#include "util.h"

/* The cluster's term of the modularity, e_c - resolution a_c^2, with e_c its inner weight over
 * the total and a_c its strength over twice the total (Newman & Girvan 2004; the terms add up
 * to the modularity igraph reports for the same weights and resolution). */
static double modularity_term(double inner, double strength, double total, double resolution) {
    double a = strength / (2 * total);
    return inner / total - resolution * a * a;
}

pm_err_t pm_write_clusters_csv(FILE *fp, const pm_map_t *map, double resolution, pm_diag_t *diag) {
    const pm_clusters_t *cl = map->clusters;
    size_t n = map->n;
    const char **names = pm_i_malloc(n ? n : 1, sizeof *names);
    if (!names) {
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory while writing clusters.csv");
    }
    double total = 0; /* the usable edge weight: half the strengths' sum */
    for (size_t v = 0; v < n; v++) {
        names[v] = map->inc->name[map->item[v]];
        total += cl->strength[v];
    }
    total /= 2;
    fputs(PM_CLUSTERS_HEADER "\n", fp);
    pm_err_t rc = PM_OK;
    for (size_t c = 0; c < cl->n_clusters && rc == PM_OK; c++) {
        double inner = 0, strength = 0;
        for (size_t q = cl->first[c]; q < cl->first[c + 1]; q++) {
            inner += cl->inner[cl->members[q]];
            strength += cl->strength[cl->members[q]];
        }
        inner /= 2; /* each inner edge counted at both ends */
        char *own = map->cluster_name ? NULL : pm_cluster_name(cl, c, names);
        const char *name = map->cluster_name ? map->cluster_name[c] : own;
        if (!name) {
            rc = pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory while writing clusters.csv");
            break;
        }
        fprintf(fp, "%zu,", c + 1);
        pm_write_csv_field(fp, name, map->csv_flags);
        fprintf(fp, ",%zu,", cl->size[c]);
        pm_write_number(fp, (double)cl->size[c] / (double)n);
        fputc(',', fp);
        pm_write_number(fp, inner);
        fputc(',', fp);
        double term = total > 0 ? modularity_term(inner, strength, total, resolution) : NAN;
        pm_write_number(fp, term / cl->modularity);
        fputc(',', fp);
        pm_write_number(fp, cl->cluster_stability ? cl->cluster_stability[c] : NAN);
        fputc(',', fp);
        /* the members, leading ones first, joined by "; " into one cell */
        size_t len = 1;
        for (size_t q = cl->first[c]; q < cl->first[c + 1]; q++) {
            len += strlen(names[cl->members[q]]) + 2;
        }
        char *cell = pm_i_malloc(len, 1);
        if (!cell) {
            free(own);
            rc = pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory while writing clusters.csv");
            break;
        }
        size_t o = 0;
        for (size_t q = cl->first[c]; q < cl->first[c + 1]; q++) {
            const char *nm = names[cl->members[q]];
            if (o) {
                memcpy(cell + o, "; ", 2);
                o += 2;
            }
            memcpy(cell + o, nm, strlen(nm));
            o += strlen(nm);
        }
        cell[o] = '\0';
        pm_write_csv_field(fp, cell, map->csv_flags);
        fputc('\n', fp);
        free(cell);
        free(own);
    }
    free(names);
    if (rc == PM_OK && ferror(fp)) {
        rc = pm_diag_set(diag, PM_EIO, NULL, 0, "cannot write the output: %s",
                         strerror(errno ? errno : EIO));
    }
    return rc;
}
