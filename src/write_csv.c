/* CSV writers: edges (also `pairs` output) and item shares. */
#include "pairmap/write.h"

#include <errno.h>
#include <stdlib.h>
#include <string.h>

#include <math.h>

#include "pairmap/oddsratio.h"
#include "util.h"
#include "windows.h"

/* A cell that a spreadsheet would read as a formula (OWASP's CSV-injection guidance): it begins
 * with = + - @, a tab or a carriage return. */
static int formula_like(const char *s) {
    return s[0] == '=' || s[0] == '+' || s[0] == '-' || s[0] == '@' || s[0] == '\t' || s[0] == '\r';
}

/* How a text cell s of n bytes is written: in quotes (edge spaces or tabs, or a delimiter,
 * quote or line break inside) and with the leading apostrophe before a formula-like text. The
 * one rule of both writers below. */
static void field_form(const char *s, size_t n, unsigned flags, int *quote, int *mark) {
    *quote = (n > 0 && (s[0] == ' ' || s[0] == '\t' || s[n - 1] == ' ' || s[n - 1] == '\t')) ||
             strpbrk(s, ",\"\r\n;\t|") != NULL;
    *mark = !(flags & PM_CSV_RAW) && formula_like(s);
}

void pm_write_csv_field(FILE *fp, const char *s, unsigned flags) {
    size_t n = strlen(s);
    int quote, mark;
    field_form(s, n, flags, &quote, &mark);
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

/* pm_write_csv_field's text at o (2 strlen(s) + 3 bytes at most); returns its end. */
static char *csv_field_at(char *o, const char *s, unsigned flags) {
    size_t n = strlen(s);
    int quote, mark;
    field_form(s, n, flags, &quote, &mark);
    if (!quote) {
        if (mark) {
            *o++ = '\'';
        }
        memcpy(o, s, n);
        return o + n;
    }
    *o++ = '"';
    if (mark) {
        *o++ = '\''; /* inside the quotes: the cell's text begins with it */
    }
    for (const char *p = s; *p; p++) {
        if (*p == '"') {
            *o++ = '"';
        }
        *o++ = *p;
    }
    *o++ = '"';
    return o;
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

/* What the rows of edges.csv are made from. */
typedef struct {
    const pm_pairs_t *pp;
    const pm_incidence_t *inc;
    const pm_edges_t *e;
    int with_strat;
    const pm_strat_t *st;
    unsigned csv_flags;
} rows_src;

/* The bytes row i may take: its two names quoted with every character doubled, and 24
 * numbers of at most 64 bytes with their separators (16 columns, 6 more with segments). */
static size_t row_room(const rows_src *r, size_t i) {
    size_t k = r->e->idx[i];
    return 2 * strlen(r->inc->name[r->pp->a[k]]) + 2 * strlen(r->inc->name[r->pp->b[k]]) + 6 +
           24 * 65 + 2;
}

/* Row i of edges.csv from the comma after its names to its newline at o (24 x 65 + 2 bytes
 * at most); returns its end. */
static char *edge_numbers(char *o, const rows_src *r, size_t i) {
    const pm_pairs_t *pp = r->pp;
    size_t k = r->e->idx[i];
    pm_measures_t m;
    pm_pairs_measures(pp, r->inc, k, &m);
    const double v[8] = {m.together,      m.expected, m.support, m.confidence_ab,
                         m.confidence_ba, m.lift,     m.phi,     m.jaccard};
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
    pm_oddsratio_t or ;
    pm_write_pair_oddsratio(pp, r->inc, k, &m, & or);
    const double orv[3] = { or.estimate, or.low, or.high};
    for (int j = 0; j < 3; j++) {
        *o++ = ',';
        o += pm_i_fmt_double(o, 64, orv[j]);
    }
    if (r->with_strat) {
        o = strat_cells(o, r->st ? &r->st[i] : NULL);
    }
    *o++ = '\n';
    return o;
}

/* Row i of edges.csv at o (row_room bytes); returns its end. The odds ratio of the exact
 * branch costs some microseconds per pair, the row's formatting about one: both are made on
 * the threads asked for (pm_i_write_windows), in windows of rows written in order. */
static char *edge_row(char *o, const rows_src *r, size_t i) {
    size_t k = r->e->idx[i];
    o = csv_field_at(o, r->inc->name[r->pp->a[k]], r->csv_flags);
    *o++ = ',';
    o = csv_field_at(o, r->inc->name[r->pp->b[k]], r->csv_flags);
    return edge_numbers(o, r, i);
}

#define ROW_CHUNK 512 /* rows per chunk of the parallel loop (pm_i_write_windows) */

static size_t row_room_cb(void *ud, size_t i) {
    return row_room(ud, i);
}

static char *edge_row_cb(void *ud, char *o, size_t i) {
    return edge_row(o, ud, i);
}

/* Row i straight to fp, where a window's buffers cannot be had (names of any length). */
static void edge_row_one(void *ud, FILE *fp, size_t i) {
    const rows_src *r = ud;
    size_t k = r->e->idx[i];
    char buf[24 * 65 + 2];
    pm_write_csv_field(fp, r->inc->name[r->pp->a[k]], r->csv_flags);
    fputc(',', fp);
    pm_write_csv_field(fp, r->inc->name[r->pp->b[k]], r->csv_flags);
    fwrite(buf, 1, (size_t)(edge_numbers(buf, r, i) - buf), fp);
}

pm_err_t pm_write_edges_csv(FILE *fp, const pm_pairs_t *pp, const pm_incidence_t *inc,
                            const pm_edges_t *e, unsigned csv_flags, pm_diag_t *diag) {
    return pm_write_edges_csv_on(fp, pp, inc, e, 0, NULL, csv_flags, 0, diag);
}

pm_err_t pm_write_edges_csv_strat(FILE *fp, const pm_pairs_t *pp, const pm_incidence_t *inc,
                                  const pm_edges_t *e, const pm_strat_t *st, unsigned csv_flags,
                                  pm_diag_t *diag) {
    return pm_write_edges_csv_on(fp, pp, inc, e, 1, st, csv_flags, 0, diag);
}

/* Each row depends on its pair only: the same bytes on any number of threads. */
pm_err_t pm_write_edges_csv_on(FILE *fp, const pm_pairs_t *pp, const pm_incidence_t *inc,
                               const pm_edges_t *e, int with_strat, const pm_strat_t *st,
                               unsigned csv_flags, unsigned threads, pm_diag_t *diag) {
    fputs(with_strat ? PM_EDGES_HEADER PM_STRAT_HEADER "\n" : PM_EDGES_HEADER "\n", fp);
    rows_src r = {pp, inc, e, with_strat, st, csv_flags};
    const pm_i_windows w = {e->n, ROW_CHUNK, row_room_cb, edge_row_cb, edge_row_one, &r, threads};
    pm_i_write_windows(fp, &w);
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
