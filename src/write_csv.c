/* CSV writers: edges (also `pairs` output) and item shares. */
#include "pairmap/write.h"

#include <errno.h>
#include <string.h>

#include "util.h"

/* A cell that a spreadsheet would read as a formula (OWASP's CSV-injection guidance): it begins
 * with = + - @, a tab or a carriage return. */
static int formula_like(const char *s) {
    return s[0] == '=' || s[0] == '+' || s[0] == '-' || s[0] == '@' || s[0] == '\t' || s[0] == '\r';
}

void pm_write_csv_field(FILE *fp, const char *s, unsigned flags) {
    size_t n = strlen(s);
    int quote = n > 0 && (s[0] == ' ' || s[0] == '\t' || s[n - 1] == ' ' || s[n - 1] == '\t');
    if (!quote && strpbrk(s, ",\"\r\n;\t|")) {
        quote = 1;
    }
    int mark = !(flags & PM_CSV_RAW) && formula_like(s);
    if (!quote) {
        if (mark) {
            fputc('\'', fp);
        }
        fputs(s, fp);
        return;
    }
    fputc('"', fp);
    if (mark) {
        fputc('\'', fp); /* inside the quotes: the cell's text begins with it */
    }
    for (const char *p = s; *p; p++) {
        if (*p == '"') {
            fputc('"', fp);
        }
        fputc(*p, fp);
    }
    fputc('"', fp);
}

void pm_write_number(FILE *fp, double v) {
    char buf[64];
    pm_i_fmt_double(buf, sizeof buf, v);
    fputs(buf, fp);
}

static pm_err_t check(FILE *fp, pm_diag_t *diag) {
    if (ferror(fp)) {
        return pm_diag_set(diag, PM_EIO, NULL, 0, "cannot write the output: %s",
                           strerror(errno ? errno : EIO));
    }
    return PM_OK;
}

pm_err_t pm_write_edges_csv(FILE *fp, const pm_pairs_t *pp, const pm_incidence_t *inc,
                            const pm_edges_t *e, unsigned csv_flags, pm_diag_t *diag) {
    fputs(PM_EDGES_HEADER "\n", fp);
    for (size_t i = 0; i < e->n; i++) {
        size_t k = e->idx[i];
        pm_measures_t m;
        pm_pairs_measures(pp, inc, k, &m);
        pm_write_csv_field(fp, inc->name[pp->a[k]], csv_flags);
        fputc(',', fp);
        pm_write_csv_field(fp, inc->name[pp->b[k]], csv_flags);
        const double v[8] = {m.together,      m.expected, m.support, m.confidence_ab,
                             m.confidence_ba, m.lift,     m.phi,     m.jaccard};
        char buf[16 * 64], *o = buf; /* the numbers of the row, written at once */
        for (int j = 0; j < 8; j++) {
            *o++ = ',';
            o += pm_i_fmt_double(o, 64, v[j]);
        }
        const char *t = m.test == PM_TEST_FISHER ? ",fisher," : ",chi2,";
        memcpy(o, t, strlen(t));
        o += strlen(t);
        o += pm_i_fmt_double(o, 64, m.p);
        *o++ = ',';
        o += pm_i_fmt_double(o, 64, m.q);
        *o++ = '\n';
        fwrite(buf, 1, (size_t)(o - buf), fp);
        if ((i & 4095) == 0 && ferror(fp)) {
            break;
        }
    }
    return check(fp, diag);
}

void pm_write_item_fields(FILE *fp, const pm_incidence_t *inc, size_t i, unsigned csv_flags) {
    double lo, hi;
    uint32_t it = (uint32_t)i;
    (void)pm_assoc_share_intervals(inc, &it, 1, 1, &lo, &hi, NULL);
    pm_write_item_fields_with(fp, inc, i, lo, hi, csv_flags);
}

void pm_write_item_fields_with(FILE *fp, const pm_incidence_t *inc, size_t i, double lo, double hi,
                               unsigned csv_flags) {
    double share = pm_incidence_share(inc, i);
    pm_write_csv_field(fp, inc->name[i], csv_flags);
    fputc(',', fp);
    pm_write_csv_field(fp, inc->category[i] ? inc->category[i] : "", csv_flags);
    fprintf(fp, ",%llu,", (unsigned long long)inc->count[i]);
    pm_write_number(fp, share);
    fputc(',', fp);
    pm_write_number(fp, lo);
    fputc(',', fp);
    pm_write_number(fp, hi);
}

pm_err_t pm_write_items_csv(FILE *fp, const pm_incidence_t *inc, unsigned csv_flags,
                            pm_diag_t *diag) {
    fputs("item,category,respondents,share,share_low,share_high\n", fp);
    for (size_t i = 0; i < inc->n_items; i++) {
        pm_write_item_fields(fp, inc, i, csv_flags);
        fputc('\n', fp);
    }
    return check(fp, diag);
}
