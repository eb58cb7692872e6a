/* CSV writers: edges (also `pairs` output) and item shares. */
#include "pairmap/write.h"

#include <errno.h>
#include <stdlib.h>
#include <string.h>

#include <math.h>

#include "pairmap/oddsratio.h"
#include "parallel.h"
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

void pm_write_pair_oddsratio(const pm_pairs_t *pp, const pm_incidence_t *inc, size_t k,
                             const pm_measures_t *m, pm_oddsratio_t *r) {
    uint32_t a = pp->a[k], b = pp->b[k];
    if (inc->wcount) {
        pm_oddsratio_weighted(inc->W, inc->wcount[a], inc->wcount[b], pp->w_ab[k],
                              pm_incidence_neff(inc), r);
    } else {
        pm_oddsratio_counts(inc->N, inc->count[a], inc->count[b], pp->n_ab[k], m->test, r);
    }
}

/* The odds ratios of the edges, computed on all cores before the rows are written (the exact
 * branch costs some microseconds per pair: on a single thread it came to a third of a whole
 * `map` run on the bench data). Each value depends on its pair only: the same on any
 * number of threads. */
typedef struct {
    const pm_pairs_t *pp;
    const pm_incidence_t *inc;
    const pm_edges_t *e;
    pm_oddsratio_t *r;
} or_job;

#define OR_CHUNK 512

static int or_chunk(void *ud, size_t c, unsigned th) {
    (void)th;
    const or_job *j = ud;
    size_t b = c * OR_CHUNK, end = b + OR_CHUNK < j->e->n ? b + OR_CHUNK : j->e->n;
    for (size_t i = b; i < end; i++) {
        pm_measures_t m;
        pm_pairs_measures(j->pp, j->inc, j->e->idx[i], &m);
        pm_write_pair_oddsratio(j->pp, j->inc, j->e->idx[i], &m, &j->r[i]);
    }
    return 0;
}

/* The within-segment cells of one row (empty where not defined or st is NULL). */
static char *strat_cells(char *o, const pm_strat_t *st) {
    const double v[5] = {st ? st->mh_or : NAN, st ? st->mh_low : NAN, st ? st->mh_high : NAN,
                         st ? st->cmh_p : NAN, st ? st->het_p : NAN};
    for (int j = 0; j < 5; j++) {
        *o++ = ',';
        if (!isnan(v[j])) {
            o += pm_i_fmt_double(o, 64, v[j]);
        }
    }
    *o++ = ',';
    if (st && st->reversed >= 0) {
        *o++ = (char)('0' + st->reversed);
    }
    return o;
}

static pm_err_t edges_csv(FILE *fp, const pm_pairs_t *pp, const pm_incidence_t *inc,
                          const pm_edges_t *e, int with_strat, const pm_strat_t *st,
                          unsigned csv_flags, pm_diag_t *diag);

pm_err_t pm_write_edges_csv(FILE *fp, const pm_pairs_t *pp, const pm_incidence_t *inc,
                            const pm_edges_t *e, unsigned csv_flags, pm_diag_t *diag) {
    return edges_csv(fp, pp, inc, e, 0, NULL, csv_flags, diag);
}

pm_err_t pm_write_edges_csv_strat(FILE *fp, const pm_pairs_t *pp, const pm_incidence_t *inc,
                                  const pm_edges_t *e, const pm_strat_t *st, unsigned csv_flags,
                                  pm_diag_t *diag) {
    return edges_csv(fp, pp, inc, e, 1, st, csv_flags, diag);
}

static pm_err_t edges_csv(FILE *fp, const pm_pairs_t *pp, const pm_incidence_t *inc,
                          const pm_edges_t *e, int with_strat, const pm_strat_t *st,
                          unsigned csv_flags, pm_diag_t *diag) {
    fputs(with_strat ? PM_EDGES_HEADER PM_STRAT_HEADER "\n" : PM_EDGES_HEADER "\n", fp);
    /* without memory for them, or without threads, each row computes its own */
    or_job oj = {pp, inc, e, pm_i_malloc(e->n ? e->n : 1, sizeof(pm_oddsratio_t))};
    if (oj.r && pm_i_parallel(pm_cpu_count(), (e->n + OR_CHUNK - 1) / OR_CHUNK, or_chunk, &oj)) {
        free(oj.r);
        oj.r = NULL;
    }
    for (size_t i = 0; i < e->n; i++) {
        size_t k = e->idx[i];
        pm_measures_t m;
        pm_pairs_measures(pp, inc, k, &m);
        pm_write_csv_field(fp, inc->name[pp->a[k]], csv_flags);
        fputc(',', fp);
        pm_write_csv_field(fp, inc->name[pp->b[k]], csv_flags);
        const double v[8] = {m.together,      m.expected, m.support, m.confidence_ab,
                             m.confidence_ba, m.lift,     m.phi,     m.jaccard};
        char buf[24 * 64], *o = buf; /* the numbers of the row, written at once */
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
        pm_oddsratio_t r;
        if (oj.r) {
            r = oj.r[i];
        } else {
            pm_write_pair_oddsratio(pp, inc, k, &m, &r);
        }
        const double orv[3] = {r.estimate, r.low, r.high};
        for (int j = 0; j < 3; j++) {
            *o++ = ',';
            o += pm_i_fmt_double(o, 64, orv[j]);
        }
        if (with_strat) {
            o = strat_cells(o, st ? &st[i] : NULL);
        }
        *o++ = '\n';
        fwrite(buf, 1, (size_t)(o - buf), fp);
        if ((i & 4095) == 0 && ferror(fp)) {
            break;
        }
    }
    free(oj.r);
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
