/* The segments table as CSV (include/pairmap/segments.h): what `pairmap segments` prints and
 * `map --segment-col` writes to segments.csv, and the segment with the highest shrunk index of
 * an item (map.graphml). */
#include <math.h>
#include <stdio.h>

#include "pairmap/segments.h"
#include "pairmap/write.h"

static void num(FILE *fp, double v) {
    if (!isnan(v)) {
        pm_write_number(fp, v);
    }
}

double pm_segstats_index(const pm_segstats_t *s, size_t level, size_t item) {
    double mu = s->mu[item];
    return mu > 0 ? s->shrunk[level * s->n_items + item] / mu : NAN;
}

int pm_segstats_top(const pm_segstats_t *s, size_t item, size_t *level, double *index) {
    int found = 0;
    for (size_t k = 0; k < s->n_levels; k++) {
        double ix = pm_segstats_index(s, k, item);
        if (!isnan(ix) && (!found || ix > *index)) {
            *level = k;
            *index = ix;
            found = 1;
        }
    }
    return found;
}

pm_err_t pm_segstats_write_csv(FILE *fp, const pm_segcol_t *col, const pm_segstats_t *s,
                               const pm_incidence_t *inc, unsigned flags) {
    static const char *const tests[] = {"", "fisher", "chi2"};
    for (size_t k = 0; k < s->n_levels; k++) {
        for (size_t i = 0; i < s->n_items; i++) {
            size_t j = k * s->n_items + i;
            pm_write_csv_field(fp, col->column, flags);
            fputc(',', fp);
            pm_write_csv_field(fp, col->level[k], flags);
            fputc(',', fp);
            pm_write_csv_field(fp, inc->name[i], flags);
            fputc(',', fp);
            pm_write_csv_field(fp, inc->category[i] ? inc->category[i] : "", flags);
            fprintf(fp, ",%llu,%llu,", (unsigned long long)col->base[k],
                    (unsigned long long)s->chose[j]);
            num(fp, s->share[j]);
            const double v[] = {s->share_low[j],  s->share_high[j],  s->shrunk[j],
                                s->shrunk_low[j], s->shrunk_high[j], pm_segstats_index(s, k, i)};
            for (size_t t = 0; t < sizeof v / sizeof v[0]; t++) {
                fputc(',', fp);
                num(fp, v[t]);
            }
            fprintf(fp, ",%s,", tests[s->test[j]]);
            num(fp, s->p[j]);
            fputc(',', fp);
            num(fp, s->q[j]);
            fputc(',', fp);
            num(fp, s->trend_z[i]);
            fputc(',', fp);
            num(fp, s->trend_p[i]);
            fputc('\n', fp);
        }
    }
    return ferror(fp) ? PM_EIO : PM_OK;
}
