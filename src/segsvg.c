/* segments.svg: the segment tables of `map --segment-col` as a picture for a report (see
 * include/pairmap/segsvg.h). Rows are the map's items grouped by its clusters, in cluster order
 * and with the map's cluster colours; columns the segments of each segment column, headed by
 * their base; each cell shows the shrunk share, tinted by the shrunk index on a diverging scale
 * of our own (below). Drawn with the map's buffer, text measure and XML text cleaner
 * (src/svg_text.c). */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "pairmap/assoc.h"
#include "pairmap/segsvg.h"
#include "pairmap/text.h"
#include "svg_internal.h"

/* The tint. t = log2(index) / 2, clamped to [-1, 1]: index 1 (as everywhere) is the neutral
 * light grey, 1/4 or less full blue, 4 or more full vermillion, and equal ratios either way
 * equally strong (twice as often and half as often are both t = 1/2). The two ends are the
 * blue and the vermillion of the Okabe-Ito palette the map uses (told apart with every common
 * colour-vision deficiency, from memory), blended linearly in sRGB with the neutral. Text on a
 * cell turns white where the tint is strong. */
static const double NEUTRAL[3] = {246, 246, 243};
static const double LOW[3] = {0x00, 0x72, 0xB2};
static const double HIGH[3] = {0xD5, 0x5E, 0x00};
#define T_WHITE_TEXT 0.62

#define PAD 24.0
#define ROW_H 22.0
#define HEAD_H 20.0 /* a cluster's heading row */
#define CELL_MIN 58.0
#define CELL_MAX 150.0
#define TREND_W 70.0
#define GROUP_GAP 18.0
#define LABEL_MAX 280.0
#define FS 12.0
#define FS_SMALL 10.5
#define FS_TITLE 20.0
#define FS_SUB 12.5
static const char MINUS[] = "\xe2\x88\x92"; /* U+2212 */

/* A share as a percentage for a cell: whole percent from 10% (rounded first, so 9.96% is
 * "10%"), one decimal from 1%, two significant digits below. */
static void percent(char *buf, size_t size, double share) {
    double v = share * 100;
    if (!isfinite(v)) {
        snprintf(buf, size, "\xe2\x80\x93");
    } else if (v >= 9.95) {
        snprintf(buf, size, "%.0f%%", v);
    } else if (v >= 0.995) {
        snprintf(buf, size, "%.1f%%", v);
    } else if (v > 0) {
        snprintf(buf, size, "%.2g%%", v);
    } else {
        snprintf(buf, size, "0%%");
    }
}

static double tint_t(double index) {
    if (!(index > 0) || !isfinite(index)) {
        return isinf(index) ? 1.0 : 0.0;
    }
    return clampd(log2(index) / 2.0, -1.0, 1.0);
}

static void tint(double t, char out[8]) {
    const double *end = t < 0 ? LOW : HIGH;
    double a = fabs(t);
    int rgb[3];
    for (int k = 0; k < 3; k++) {
        rgb[k] = (int)lround(NEUTRAL[k] + a * (end[k] - NEUTRAL[k]));
    }
    snprintf(out, 8, "#%02X%02X%02X", rgb[0], rgb[1], rgb[2]);
}

typedef struct {
    const pm_segsvg_data_t *d;
    sbuf b;
    size_t nrow;    /* rows drawn */
    size_t *row;    /* drawn row -> vertex, display order */
    int *block;     /* per vertex: its block (cluster c - 1, or n_clusters: on their own) */
    int *ccol;      /* per cluster: palette index, -1 grey */
    size_t *csize;  /* per cluster: vertices */
    size_t *nlev;   /* per column: levels drawn */
    double **tq;    /* per column: trend q per item (NULL: not ordered) */
    char **label;   /* per drawn row: clean, shortened name */
    char **cname;   /* per block: clean heading */
    double label_w; /* px */
    double right;   /* the table's right edge, px */
    double *colw;   /* per column, per level (flattened): px */
    size_t ncolw;
} seg_ctx;

/* The plural noun of the picture's counts (--unit). */
static const char *unit_word(const pm_segsvg_data_t *d) {
    return d->unit && d->unit[0] ? d->unit : "respondents";
}

static double cell_index(const pm_segstats_t *s, size_t k, size_t i) {
    double mu = s->mu[i];
    return mu > 0 ? s->shrunk[k * s->n_items + i] / mu : NAN;
}

/* ---- which rows, in which order ---- */
typedef struct {
    double score, share;
    const char *name;
    int block;
    size_t v;
} row_key;

static int cmp_score(const void *pa, const void *pb) {
    const row_key *a = pa, *b = pb;
    if (a->score != b->score) {
        return a->score > b->score ? -1 : 1;
    }
    if (a->share != b->share) {
        return a->share > b->share ? -1 : 1;
    }
    return pm_i_bytecmp(a->name, b->name);
}

static int cmp_display(const void *pa, const void *pb) {
    const row_key *a = pa, *b = pb;
    if (a->block != b->block) {
        return a->block < b->block ? -1 : 1;
    }
    if (a->share != b->share) {
        return a->share > b->share ? -1 : 1;
    }
    return pm_i_bytecmp(a->name, b->name);
}

static size_t row_limit(const seg_ctx *c) {
    const pm_segsvg_data_t *d = c->d;
    size_t limit = d->draw ? d->draw : PM_SEGSVG_ROWS, cols = 0;
    for (size_t j = 0; j < d->n_cols; j++) {
        cols += c->nlev[j] + (c->tq[j] != NULL);
    }
    if (cols && limit > PM_SEGSVG_MAX_CELLS / cols) {
        limit = PM_SEGSVG_MAX_CELLS / cols;
    }
    return limit ? limit : 1;
}

static pm_err_t choose_rows(seg_ctx *c) {
    const pm_segsvg_data_t *d = c->d;
    row_key *rk = pm_i_malloc(d->n ? d->n : 1, sizeof *rk);
    if (!rk) {
        return PM_ENOMEM;
    }
    for (size_t v = 0; v < d->n; v++) {
        double score = 0;
        for (size_t j = 0; j < d->n_cols; j++) {
            for (size_t k = 0; k < c->nlev[j]; k++) {
                double ix = cell_index(&d->stats[j], k, d->item[v]);
                if (ix > 0 && isfinite(ix) && fabs(log(ix)) > score) {
                    score = fabs(log(ix));
                }
            }
        }
        /* to 3 decimals: differences below 0.1% of the share (which the cells, at two
         * significant digits, cannot show) leave the choice to the share */
        score = round(score * 1000) / 1000;
        rk[v] = (row_key){score, d->share[v], d->name[d->item[v]], c->block[v], v};
    }
    size_t limit = row_limit(c);
    c->nrow = d->n;
    if (d->n > limit) {
        qsort(rk, d->n, sizeof *rk, cmp_score);
        c->nrow = limit;
    }
    qsort(rk, c->nrow, sizeof *rk, cmp_display);
    for (size_t r = 0; r < c->nrow; r++) {
        c->row[r] = rk[r].v;
    }
    pm_i_free(rk);
    return PM_OK;
}

/* ---- setup: blocks, colours, trend q-values, text, widths ---- */
static pm_err_t trend_q(seg_ctx *c) {
    const pm_segsvg_data_t *d = c->d;
    for (size_t j = 0; j < d->n_cols; j++) {
        const pm_segstats_t *s = &d->stats[j];
        if (!d->cols[j].ordered) {
            continue;
        }
        size_t ni = s->n_items, nt = 0;
        double *q = pm_i_malloc(ni ? ni : 1, sizeof *q);
        double *p = pm_i_malloc(ni ? ni : 1, sizeof *p);
        if (!q || !p) {
            pm_i_free(q);
            pm_i_free(p);
            return PM_ENOMEM;
        }
        for (size_t i = 0; i < ni; i++) {
            if (!isnan(s->trend_p[i])) {
                p[nt++] = s->trend_p[i];
            }
        }
        pm_err_t rc = pm_assoc_bh(p, nt, p);
        for (size_t i = 0, t = 0; i < ni; i++) {
            q[i] = isnan(s->trend_p[i]) ? NAN : p[t++];
        }
        pm_i_free(p);
        c->tq[j] = q;
        if (rc) {
            return rc;
        }
    }
    return PM_OK;
}

static pm_err_t setup(seg_ctx *c) {
    const pm_segsvg_data_t *d = c->d;
    size_t nc = d->n_clusters, ncol = d->n_cols;
    c->block = pm_i_calloc(d->n ? d->n : 1, sizeof *c->block);
    c->row = pm_i_calloc(d->n ? d->n : 1, sizeof *c->row);
    c->ccol = pm_i_calloc(nc + 1, sizeof *c->ccol);
    c->csize = pm_i_calloc(nc + 1, sizeof *c->csize);
    c->cname = pm_i_calloc(nc + 1, sizeof *c->cname);
    c->nlev = pm_i_calloc(ncol ? ncol : 1, sizeof *c->nlev);
    c->tq = pm_i_calloc(ncol ? ncol : 1, sizeof *c->tq);
    if (!c->block || !c->row || !c->ccol || !c->csize || !c->cname || !c->nlev || !c->tq) {
        return PM_ENOMEM;
    }
    for (size_t v = 0; v < d->n; v++) {
        int cl = d->cluster[v];
        if (cl >= 1 && (size_t)cl <= nc) {
            c->csize[cl - 1]++;
        }
    }
    /* the map's rule: clusters of two or more members take the palette in cluster order */
    int next = 0;
    for (size_t k = 0; k < nc; k++) {
        c->ccol[k] = (c->csize[k] >= 2 && next < N_PAL) ? next++ : -1;
    }
    for (size_t v = 0; v < d->n; v++) {
        int cl = d->cluster[v];
        c->block[v] = (cl >= 1 && (size_t)cl <= nc && c->csize[cl - 1] >= 2) ? cl - 1 : (int)nc;
    }
    size_t alone = 0;
    for (size_t k = 0; k < nc; k++) {
        alone += c->csize[k] < 2 ? c->csize[k] : 0;
    }
    for (size_t k = 0; k <= nc; k++) {
        char dflt[48];
        const char *nm = NULL;
        if (k == nc) {
            nm = "Items on their own (no kept pair)";
        } else if (d->cluster_name && d->cluster_name[k]) {
            nm = d->cluster_name[k];
        } else {
            snprintf(dflt, sizeof dflt, "Cluster %zu", k + 1);
            nm = dflt;
        }
        char *clean = pm_i_svg_clean_text(nm);
        size_t len = clean ? strlen(clean) + 32 : 0;
        c->cname[k] = clean ? pm_i_malloc(len, 1) : NULL;
        if (!c->cname[k]) {
            pm_i_free(clean);
            return PM_ENOMEM;
        }
        snprintf(c->cname[k], len, "%s (%zu)", clean, k == nc ? alone : c->csize[k]);
        pm_i_free(clean);
    }
    for (size_t j = 0; j < ncol; j++) {
        c->nlev[j] =
            d->cols[j].n_levels < PM_SEGSVG_MAX_LEVELS ? d->cols[j].n_levels : PM_SEGSVG_MAX_LEVELS;
    }
    return trend_q(c);
}

static pm_err_t measure(seg_ctx *c) {
    const pm_segsvg_data_t *d = c->d;
    c->label = pm_i_calloc(c->nrow ? c->nrow : 1, sizeof *c->label);
    if (!c->label) {
        return PM_ENOMEM;
    }
    c->label_w = 80;
    for (size_t r = 0; r < c->nrow; r++) {
        char *clean = pm_i_svg_clean_text(d->name[d->item[c->row[r]]]);
        if (!clean) {
            return PM_ENOMEM;
        }
        c->label[r] = pm_i_svg_shorten(clean, LABEL_MAX / FS);
        pm_i_free(clean);
        if (!c->label[r]) {
            return PM_ENOMEM;
        }
        double w = pm_i_svg_text_width(c->label[r], FS, 0);
        c->label_w = w > c->label_w ? w : c->label_w;
    }
    c->ncolw = 0;
    for (size_t j = 0; j < d->n_cols; j++) {
        c->ncolw += c->nlev[j];
    }
    c->colw = pm_i_calloc(c->ncolw ? c->ncolw : 1, sizeof *c->colw);
    if (!c->colw) {
        return PM_ENOMEM;
    }
    for (size_t j = 0, f = 0; j < d->n_cols; j++) {
        for (size_t k = 0; k < c->nlev[j]; k++, f++) {
            char *clean = pm_i_svg_clean_text(d->cols[j].level[k]);
            if (!clean) {
                return PM_ENOMEM;
            }
            double w = pm_i_svg_text_width(clean, FS, 1) + 12;
            pm_i_free(clean);
            char n[48], nb[40];
            pm_i_svg_fmt_count(nb, sizeof nb, d->cols[j].base[k]);
            snprintf(n, sizeof n, "n = %s", nb);
            double wn = pm_i_svg_text_width(n, FS_SMALL, 0) + 10;
            w = wn > w ? wn : w;
            c->colw[f] = clampd(w, CELL_MIN, CELL_MAX);
        }
    }
    return PM_OK;
}

/* ---- drawing ---- */
static void attr_double(sbuf *b, const char *name, double v) {
    pm_i_sb_puts(b, " ");
    pm_i_sb_puts(b, name);
    pm_i_sb_puts(b, "=\"");
    if (!isnan(v)) {
        pm_i_sb_double(b, v);
    }
    pm_i_sb_puts(b, "\"");
}

/* clean text shortened to w px (NULL: nothing fits, or out of memory: b->oom set) */
static char *fit_text(sbuf *b, const char *s, double w, double fs, int bold) {
    char *clean = pm_i_svg_clean_text(s);
    char *out = clean ? pm_i_svg_shorten(clean, w / (fs * (bold ? BOLD : 1.0))) : NULL;
    if (!clean) {
        b->oom = 1;
    }
    pm_i_free(clean);
    return out;
}

static void text_fit(sbuf *b, const char *cls, double x, double y, double fs, int anchor, int bold,
                     const char *fill, const char *s, double w) {
    char *t = fit_text(b, s, w, fs, bold);
    if (t) {
        pm_i_svg_write_text(b, cls, x, y, fs, anchor, bold, fill, t, NULL, 0);
    }
    pm_i_free(t);
}

static double col_width(const seg_ctx *c, size_t j, size_t f0) {
    double w = 0;
    for (size_t k = 0; k < c->nlev[j]; k++) {
        w += c->colw[f0 + k];
    }
    return w + (c->tq[j] ? TREND_W : 0);
}

static void heads(seg_ctx *c, double x, double y) {
    const pm_segsvg_data_t *d = c->d;
    sbuf *b = &c->b;
    for (size_t j = 0, f = 0; j < d->n_cols; j++) {
        const pm_segcol_t *col = &d->cols[j];
        const pm_segstats_t *s = &d->stats[j];
        double w = col_width(c, j, f);
        text_fit(b, "attribute-head", x, y, FS, 0, 1, INK, col->column, w);
        char m[160];
        if (s->m_at > 0) {
            snprintf(m, sizeof m, "no spread beyond chance: m at its bound");
        } else if (s->m < 999.5) {
            snprintf(m, sizeof m, "m = %.3g pseudo-%s", s->m, unit_word(d));
        } else {
            char mb[40];
            pm_i_svg_fmt_count(mb, sizeof mb, (uint64_t)llround(s->m));
            snprintf(m, sizeof m, "m = %s pseudo-%s", mb, unit_word(d));
        }
        text_fit(b, "attribute-note", x, y + 14, FS_SMALL, 0, 0, GREY_TEXT, m, w);
        for (size_t k = 0; k < c->nlev[j]; k++, f++) {
            double cw = c->colw[f], cx = x + cw / 2;
            char *t = fit_text(b, col->level[k], cw - 6, FS, 1);
            pm_i_sb_puts(b, "<g class=\"segment-head\"");
            pm_i_sb_attr(b, "data-attribute", col->column);
            pm_i_sb_attr(b, "data-segment", col->level[k]);
            pm_i_sb_puts(b, " data-base=\"");
            pm_i_sb_int(b, (long long)col->base[k]);
            pm_i_sb_puts(b, "\">\n");
            if (t) {
                pm_i_svg_write_text(b, "segment-label", cx, y + 34, FS, 1, 1, INK, t, NULL, 0);
            }
            pm_i_free(t);
            char n[48], nb[40];
            pm_i_svg_fmt_count(nb, sizeof nb, col->base[k]);
            snprintf(n, sizeof n, "n = %s", nb);
            text_fit(b, "segment-base", cx, y + 49, FS_SMALL, 1, 0, GREY_TEXT, n, cw - 4);
            pm_i_sb_puts(b, "</g>\n");
            x += cw;
        }
        if (c->tq[j]) {
            pm_i_svg_write_text(b, "trend-head", x + TREND_W / 2, y + 34, FS, 1, 1, INK, "trend",
                                NULL, 0);
            pm_i_svg_write_text(b, "trend-head", x + TREND_W / 2, y + 49, FS_SMALL, 1, 0, GREY_TEXT,
                                "z", NULL, 0);
            x += TREND_W;
        }
        x += GROUP_GAP;
    }
}

static void one_cell(seg_ctx *c, const pm_segcol_t *col, const pm_segstats_t *s, size_t k, size_t i,
                     double x, double y, double w) {
    sbuf *b = &c->b;
    size_t at = k * s->n_items + i;
    double ix = cell_index(s, k, i), q = s->q[at];
    int marked = !isnan(q) && q <= c->d->max_q;
    double t = tint_t(ix);
    char fill[8];
    tint(t, fill);
    double in = marked ? 2 : 1;
    pm_i_sb_puts(b, "<rect class=\"cell\"");
    pm_i_sb_attr_num(b, "x", x + in);
    pm_i_sb_attr_num(b, "y", y + in);
    pm_i_sb_attr_num(b, "width", w - 2 * in);
    pm_i_sb_attr_num(b, "height", ROW_H - 2 * in);
    pm_i_sb_attr(b, "fill", fill);
    if (marked) {
        pm_i_sb_attr(b, "stroke", INK);
        pm_i_sb_puts(b, " stroke-width=\"2\"");
    }
    pm_i_sb_attr(b, "data-item", c->d->name[i]);
    pm_i_sb_attr(b, "data-attribute", col->column);
    pm_i_sb_attr(b, "data-segment", col->level[k]);
    attr_double(b, "data-shrunk", s->shrunk[at]);
    attr_double(b, "data-index", ix);
    attr_double(b, "data-q", q);
    pm_i_sb_puts(b, marked ? " data-marked=\"1\"/>\n" : " data-marked=\"0\"/>\n");
    char pct[32];
    percent(pct, sizeof pct, s->shrunk[at]);
    pm_i_svg_write_text(b, "cell-text", x + w / 2, y + 15, FS, 1, marked,
                        fabs(t) > T_WHITE_TEXT ? "#FFFFFF" : INK, pct, NULL, 0);
}

static void trend_cell(seg_ctx *c, size_t j, size_t i, double x, double y) {
    const pm_segstats_t *s = &c->d->stats[j];
    double z = s->trend_z[i], q = c->tq[j][i];
    if (isnan(z)) {
        return;
    }
    int strong = !isnan(q) && q <= c->d->max_q;
    char t[48];
    double az = fabs(z);
    if (az < 0.05) {
        snprintf(t, sizeof t, "0.0");
    } else {
        snprintf(t, sizeof t, "%s %s%.*f", z > 0 ? "\xe2\x86\x91" : "\xe2\x86\x93",
                 z > 0 ? "+" : MINUS, az < 9.95 ? 1 : 0, az);
    }
    sbuf *b = &c->b;
    pm_i_sb_puts(b, "<g class=\"trend\"");
    pm_i_sb_attr(b, "data-item", c->d->name[i]);
    pm_i_sb_attr(b, "data-attribute", c->d->cols[j].column);
    attr_double(b, "data-z", z);
    attr_double(b, "data-q", q);
    pm_i_sb_puts(b, ">");
    pm_i_svg_write_text(b, "trend-text", x + TREND_W / 2, y + 15, FS, 1, strong,
                        strong ? INK : "#767676", t, NULL, 0);
    pm_i_sb_puts(b, "</g>\n");
}

/* the rows from y; returns the y below them */
static double rows(seg_ctx *c, double x_cells, double y) {
    const pm_segsvg_data_t *d = c->d;
    sbuf *b = &c->b;
    int last = -1;
    for (size_t r = 0; r < c->nrow; r++) {
        size_t v = c->row[r], i = d->item[v];
        int blk = c->block[v];
        int pal = blk < (int)d->n_clusters ? c->ccol[blk] : -1;
        if (blk != last) {
            y += r ? 6 : 0;
            text_fit(b, "cluster-head", PAD, y + 15, FS, 0, 1, pal >= 0 ? PAL_TEXT[pal] : GREY_TEXT,
                     c->cname[blk], c->right - PAD);
            y += HEAD_H;
            last = blk;
        }
        pm_i_sb_puts(b, "<rect class=\"stripe\"");
        pm_i_sb_attr_num(b, "x", PAD);
        pm_i_sb_attr_num(b, "y", y + 1);
        pm_i_sb_puts(b, " width=\"6\"");
        pm_i_sb_attr_num(b, "height", ROW_H - 2);
        pm_i_sb_attr(b, "fill", pal >= 0 ? PAL_FILL[pal] : GREY_FILL);
        pm_i_sb_puts(b, "/>\n");
        pm_i_svg_write_text(b, "row-label", PAD + 14, y + 15, FS, 0, 0, INK, c->label[r],
                            d->name[i], d->cluster[v]);
        double x = x_cells;
        for (size_t j = 0, f = 0; j < d->n_cols; j++) {
            for (size_t k = 0; k < c->nlev[j]; k++, f++) {
                one_cell(c, &d->cols[j], &d->stats[j], k, i, x, y, c->colw[f]);
                x += c->colw[f];
            }
            if (c->tq[j]) {
                trend_cell(c, j, i, x, y);
                x += TREND_W;
            }
            x += GROUP_GAP;
        }
        y += ROW_H;
    }
    return y;
}

/* the key from (x, y); returns the y below it and widens *wmax to its right edge */
static double key(seg_ctx *c, double x, double y, double *wmax) {
    const pm_segsvg_data_t *d = c->d;
    sbuf *b = &c->b;
    static const double ix[9] = {0.25, 0.3536, 0.5, 0.7071, 1, 1.4142, 2, 2.8284, 4};
    static const char *const lab[9] = {"1/4", "", "1/2", "", "1", "", "2", "", "4"};
    pm_i_svg_write_text(b, "key", x, y + 12, FS, 0, 1, INK, "Key", NULL, 0);
    y += 22;
    for (int k = 0; k < 9; k++) {
        char fill[8];
        tint(tint_t(ix[k]), fill);
        pm_i_sb_puts(b, "<rect class=\"key-swatch\"");
        pm_i_sb_attr_num(b, "x", x + 34.0 * k);
        pm_i_sb_attr_num(b, "y", y);
        pm_i_sb_puts(b, " width=\"34\" height=\"16\"");
        pm_i_sb_attr(b, "fill", fill);
        pm_i_sb_puts(b, "/>\n");
        if (lab[k][0]) {
            pm_i_svg_write_text(b, "key", x + 34.0 * k + 17, y + 29, FS_SMALL, 1, 0, GREY_TEXT,
                                lab[k], NULL, 0);
        }
    }
    char q[64];
    snprintf(q, sizeof q, "%g", d->max_q);
    char line[4][400];
    snprintf(line[0], sizeof line[0],
             "Tint: index = shrunk share / the item's share over everyone with a segment "
             "(blue: chosen less often there, vermillion: more often; full at 1/4 and 4)");
    snprintf(line[1], sizeof line[1],
             "Outlined, bold: q \xe2\x89\xa4 %s, the segment against all others "
             "(Benjamini-Hochberg over the column's cells)",
             q);
    snprintf(line[2], sizeof line[2],
             "Trend (ordered columns): Cochran-Armitage z, \xe2\x86\x91 rising, \xe2\x86\x93 "
             "falling over the segments; bold: q \xe2\x89\xa4 %s over the column's items",
             q);
    snprintf(line[3], sizeof line[3],
             "Numbers: the shrunk share (empirical Bayes: the segment's share pulled towards "
             "the overall share by m pseudo-%s)%s; n: %s in the segment",
             unit_word(d), d->stats && d->n_cols && d->stats[0].weighted ? ", weighted" : "",
             unit_word(d));
    double tx = x + 34.0 * 9 + 16;
    pm_i_svg_write_text(b, "key", tx, y + 12, FS_SMALL, 0, 0, INK, line[0], NULL, 0);
    double right = tx + pm_i_svg_text_width(line[0], FS_SMALL, 0);
    y += 40;
    pm_i_sb_puts(b, "<rect class=\"key-swatch\"");
    pm_i_sb_attr_num(b, "x", x + 1);
    pm_i_sb_attr_num(b, "y", y + 1);
    pm_i_sb_puts(b, " width=\"56\" height=\"18\"");
    pm_i_sb_attr(b, "fill", "#F6F6F3");
    pm_i_sb_attr(b, "stroke", INK);
    pm_i_sb_puts(b, " stroke-width=\"2\"/>\n");
    pm_i_svg_write_text(b, "key", x + 29, y + 14, FS, 1, 1, INK, "12%", NULL, 0);
    for (int k = 1; k < 4; k++) {
        double yy = y + 14 + 20.0 * (k - 1);
        pm_i_svg_write_text(b, "key", x + 72, yy, FS_SMALL, 0, 0, INK, line[k], NULL, 0);
        double r = x + 72 + pm_i_svg_text_width(line[k], FS_SMALL, 0);
        right = r > right ? r : right;
    }
    y += 66;
    *wmax = right > *wmax ? right : *wmax;
    return y;
}

static void subtitle(const seg_ctx *c, char *buf, size_t size) {
    const pm_segsvg_data_t *d = c->d;
    char n[40];
    pm_i_svg_fmt_count(n, sizeof n, d->respondents);
    size_t k = (size_t)snprintf(buf, size, "%s %s \xc2\xb7 ", n, unit_word(d));
    if (c->nrow < d->n) {
        k += (size_t)snprintf(
            buf + k, size - k,
            "the %zu of %zu items whose segments differ most, then the most chosen (all in "
            "segments.csv)",
            c->nrow, d->n);
    } else {
        k += (size_t)snprintf(buf + k, size - k, "%zu items", d->n);
    }
    for (size_t j = 0; j < d->n_cols && k < size; j++) {
        const pm_segcol_t *col = &d->cols[j];
        if (c->nlev[j] < col->n_levels) {
            k += (size_t)snprintf(buf + k, size - k, " \xc2\xb7 first %zu of %zu segments of %s",
                                  c->nlev[j], col->n_levels, col->column);
        }
    }
}

pm_err_t pm_segsvg_write(FILE *fp, const pm_segsvg_data_t *d, pm_segsvg_stats_t *stats,
                         pm_diag_t *diag) {
    seg_ctx c;
    memset(&c, 0, sizeof c);
    c.d = d;
    pm_err_t rc = setup(&c);
    if (!rc) {
        rc = choose_rows(&c);
    }
    if (!rc) {
        rc = measure(&c);
    }
    char sub[1024];
    double width = 0, height = 0;
    if (!rc) {
        sbuf *b = &c.b;
        char *title = pm_i_svg_clean_text(d->title ? d->title : "How choices differ by segment");
        subtitle(&c, sub, sizeof sub);
        char *subc = pm_i_svg_clean_text(sub);
        if (title && subc) {
            pm_i_svg_write_text(b, "title", PAD, PAD + FS_TITLE, FS_TITLE, 0, 1, INK, title, NULL,
                                0);
            pm_i_svg_write_text(b, "subtitle", PAD, PAD + FS_TITLE + 20, FS_SUB, 0, 0, "#444444",
                                subc, NULL, 0);
            width = PAD + pm_i_svg_text_width(title, FS_TITLE, 1);
            double ws = PAD + pm_i_svg_text_width(subc, FS_SUB, 0);
            width = ws > width ? ws : width;
        } else {
            b->oom = 1;
        }
        pm_i_free(title);
        pm_i_free(subc);
        double x_cells = PAD + 14 + c.label_w + 14, y = PAD + FS_TITLE + 52;
        heads(&c, x_cells, y);
        double right = x_cells;
        for (size_t j = 0, f = 0; j < d->n_cols; j++) {
            right += col_width(&c, j, f) + (j + 1 < d->n_cols ? GROUP_GAP : 0);
            f += c.nlev[j];
        }
        width = right > width ? right : width;
        c.right = right;
        y = rows(&c, x_cells, y + 60);
        y = key(&c, PAD, y + 24, &width);
        width += PAD;
        height = y + PAD;
        if (b->oom) {
            rc = PM_ENOMEM;
        }
    }
    if (!rc) {
        char head[512];
        snprintf(head, sizeof head,
                 "<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n"
                 "<svg xmlns=\"http://www.w3.org/2000/svg\" version=\"1.1\" width=\"%.0f\" "
                 "height=\"%.0f\" viewBox=\"0 0 %.0f %.0f\" font-family=\"",
                 ceil(width), ceil(height), ceil(width), ceil(height));
        if (fputs(head, fp) == EOF || (pm_text_xml_fputs(fp, FONT_STACK, 0), 0) ||
            fputs("\">\n<rect width=\"100%\" height=\"100%\" fill=\"#FFFFFF\"/>\n", fp) == EOF ||
            fwrite(c.b.p, 1, c.b.n, fp) != c.b.n || fputs("</svg>\n", fp) == EOF || ferror(fp)) {
            rc = PM_EIO;
        }
    }
    if (stats && !rc) {
        stats->rows_drawn = c.nrow;
        stats->rows_left_out = d->n - c.nrow;
        stats->segments_drawn = stats->segments_left_out = 0;
        for (size_t j = 0; j < d->n_cols; j++) {
            stats->segments_drawn += c.nlev[j];
            stats->segments_left_out += d->cols[j].n_levels - c.nlev[j];
        }
    }
    if (rc && diag) {
        pm_diag_set(diag, rc, NULL, 0,
                    rc == PM_EIO ? "cannot write segments.svg"
                                 : "out of memory drawing segments.svg");
    }
    for (size_t r = 0; c.label && r < c.nrow; r++) {
        pm_i_free(c.label[r]);
    }
    for (size_t k = 0; c.cname && k <= d->n_clusters; k++) {
        pm_i_free(c.cname[k]);
    }
    for (size_t j = 0; c.tq && j < d->n_cols; j++) {
        pm_i_free(c.tq[j]);
    }
    pm_i_free(c.label);
    pm_i_free(c.cname);
    pm_i_free(c.tq);
    pm_i_free(c.colw);
    pm_i_free(c.nlev);
    pm_i_free(c.block);
    pm_i_free(c.row);
    pm_i_free(c.ccol);
    pm_i_free(c.csize);
    pm_i_free(c.b.p);
    return rc;
}
