/* The SVG map: picks the items to draw, lays them out afresh (Fruchterman-Reingold from
 * network.c, then our own cluster packing and overlap removal), places every label beside its
 * node without overlaps, and writes a standalone SVG 1.1 file with regions, edges, nodes,
 * labels, title, legend and size key. No plotting library; deterministic for a given seed. */
#include "pairmap/svgmap.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "svg_internal.h"

/* ==== preparation: clean text, sizes, colours, priority ==================================== */

/* ==== writing =============================================================================== */
static const char *fill_of(const ctx_t *c, size_t item) {
    int k = c->o->color_by_category ? c->colour[item] : c->ccolour[c->d->cluster[item] - 1];
    return k >= 0 ? PAL_FILL[k] : GREY_FILL;
}

static void write_header(const ctx_t *c, sbuf *b) {
    pm_i_sb_puts(b, "<?xml version=\"1.0\" encoding=\"UTF-8\" standalone=\"no\"?>\n");
    pm_i_sb_puts(b, "<svg xmlns=\"http://www.w3.org/2000/svg\" version=\"1.1\"");
    pm_i_sb_puts(b, " width=\"");
    pm_i_sb_int(b, c->W);
    pm_i_sb_puts(b, "\" height=\"");
    pm_i_sb_int(b, c->H);
    pm_i_sb_puts(b, "\" viewBox=\"0 0 ");
    pm_i_sb_int(b, c->W);
    pm_i_sb_puts(b, " ");
    pm_i_sb_int(b, c->H);
    pm_i_sb_puts(b, "\"");
    pm_i_sb_attr(b, "font-family", FONT_STACK);
    pm_i_sb_puts(b, ">\n<title>");
    pm_i_sb_esc(b, c->title);
    pm_i_sb_puts(b, "</title>\n");
}

static void write_regions(const ctx_t *c, const pic_t *p, sbuf *b) {
    /* regions: a smooth closed curve through the padded hull (quadratic pieces between the
     * midpoints of its sides, the hull's corners as control points) */
    pm_i_sb_puts(b, "<g id=\"regions\">\n");
    for (size_t g = 0; g < p->ng; g++) {
        const group_t *q = &p->g[g];
        if (q->nh < 3) {
            continue;
        }
        int col = c->ccolour[q->cluster - 1];
        int cat_mode = c->o->color_by_category;
        const char *fill = (col >= 0 && !cat_mode) ? PAL_FILL[col] : GREY_FILL;
        double tint = (col >= 0 && !cat_mode) ? PAL_TINT[col] : GREY_TINT;
        pm_i_sb_puts(b, "<path class=\"region\" data-cluster=\"");
        pm_i_sb_int(b, q->cluster);
        pm_i_sb_puts(b, "\" d=\"M");
        for (size_t i = 0; i <= q->nh; i++) {
            pt_t a = q->hull[i % q->nh], z = q->hull[(i + 1) % q->nh];
            pt_t mid = {0.5 * (a.x + z.x), 0.5 * (a.y + z.y)};
            if (i == 0) {
                pm_i_sb_num(b, mid.x);
                pm_i_sb_puts(b, " ");
                pm_i_sb_num(b, mid.y);
            } else {
                pm_i_sb_puts(b, " Q");
                pm_i_sb_num(b, a.x);
                pm_i_sb_puts(b, " ");
                pm_i_sb_num(b, a.y);
                pm_i_sb_puts(b, " ");
                pm_i_sb_num(b, mid.x);
                pm_i_sb_puts(b, " ");
                pm_i_sb_num(b, mid.y);
            }
        }
        pm_i_sb_puts(b, " Z\"");
        pm_i_sb_attr(b, "fill", fill);
        pm_i_sb_attr_num(b, "fill-opacity", tint);
        pm_i_sb_attr(b, "stroke", fill);
        if (col >= 0 && !cat_mode && c->ccycle[q->cluster - 1] > 0) {
            /* the palette came round: a dashed, stronger outline tells the clusters apart */
            pm_i_sb_puts(b, " stroke-opacity=\"0.8\" stroke-dasharray=\"5 3\"");
        } else {
            pm_i_sb_puts(b, " stroke-opacity=\"0.45\"");
        }
        pm_i_sb_attr_num(b, "stroke-width", 1.2 * c->s);
        pm_i_sb_puts(b, " stroke-linejoin=\"round\"/>\n");
    }
    pm_i_sb_puts(b, "</g>\n");
}

/* The range of |weight| over the drawn edges, and whether any is negative. */
static void edge_range(const ctx_t *c, const pic_t *p, double *wmin, double *wmax, int *neg) {
    const pm_svg_data_t *d = c->d;
    double lo = INFINITY, hi = 0;
    int any = 0;
    for (size_t e = 0; e < p->ne; e++) {
        double w = fabs(d->weight[p->edge[e]]);
        if (isfinite(w)) {
            lo = fmin(lo, w);
            hi = fmax(hi, w);
        }
        any |= c->negative[p->edge[e]];
    }
    if (!(lo <= hi)) {
        lo = hi = 0;
    }
    *wmin = lo;
    *wmax = hi;
    *neg = any;
}

/* Edges weakest first, so that strong ones lie on top; ties by index. */
static pm_err_t write_edges(ctx_t *c, const pic_t *p, sbuf *b, double wmin, double wmax) {
    const pm_svg_data_t *d = c->d;
    num_key *eo = pm_i_malloc(p->ne ? p->ne : 1, sizeof *eo);
    if (!eo) {
        return pm_i_svg_nomem(c);
    }
    for (size_t e = 0; e < p->ne; e++) {
        double w = fabs(d->weight[p->edge[e]]);
        eo[e] = (num_key){isfinite(w) ? w : 0, e};
    }
    qsort(eo, p->ne, sizeof *eo, cmp_num_up);
    pm_i_sb_puts(b, "<g id=\"edges\" stroke-linecap=\"round\">\n");
    for (size_t j = 0; j < p->ne; j++) {
        size_t e = eo[j].i, ke = p->edge[e];
        size_t a = p->ea[e], z = p->eb[e];
        double w = d->weight[ke], aw = isfinite(w) ? fabs(w) : wmin;
        double t = wmax > wmin ? (aw - wmin) / (wmax - wmin) : 1;
        t = 0.1 + 0.9 * clampd(t, 0, 1);
        int neg = c->negative[ke];
        const char *stroke = "#4D5A66";
        if (neg) {
            stroke = "#3A3A3A";
        } else if (!c->o->color_by_category && p->grp[a] == p->grp[z]) {
            int col = c->ccolour[d->cluster[p->item[a]] - 1];
            if (col >= 0) {
                stroke = PAL_TEXT[col];
            }
        }
        pm_i_sb_puts(b, neg ? "<line class=\"edge negative\"" : "<line class=\"edge\"");
        pm_i_sb_attr_num(b, "x1", p->x[a]);
        pm_i_sb_attr_num(b, "y1", p->y[a]);
        pm_i_sb_attr_num(b, "x2", p->x[z]);
        pm_i_sb_attr_num(b, "y2", p->y[z]);
        pm_i_sb_attr(b, "stroke", stroke);
        pm_i_sb_attr_num(b, "stroke-width", (0.6 + 3.9 * t) * c->s + 0.2);
        pm_i_sb_attr_num(b, "stroke-opacity", neg ? 0.2 + 0.45 * t : 0.25 + 0.55 * t);
        if (neg) {
            pm_i_sb_puts(b, " stroke-dasharray=\"6 4\"");
        }
        pm_i_sb_attr(b, "data-a", c->name[p->item[a]]);
        pm_i_sb_attr(b, "data-b", c->name[p->item[z]]);
        pm_i_sb_puts(b, " data-weight=\"");
        pm_i_sb_double(b, w);
        pm_i_sb_puts(b, "\"/>\n");
    }
    pm_i_sb_puts(b, "</g>\n");
    pm_i_free(eo);
    return PM_OK;
}

static void write_leaders(const ctx_t *c, const pic_t *p, sbuf *b) {
    /* leaders: a thin line from a label set further out to its node */
    pm_i_sb_puts(b, "<g id=\"leaders\" stroke=\"#6B6B6B\" stroke-opacity=\"0.8\"");
    pm_i_sb_attr_num(b, "stroke-width", 0.8 * c->s);
    pm_i_sb_puts(b, ">\n");
    for (size_t kk = 0; kk < p->nd; kk++) {
        const lab_t *l = &p->lab[kk];
        if (!l->placed || l->ring == 0) {
            continue;
        }
        double tx = clampd(p->x[kk], l->b.x0, l->b.x1), ty = clampd(p->y[kk], l->b.y0, l->b.y1);
        double dx = tx - p->x[kk], dy = ty - p->y[kk], dd = sqrt(dx * dx + dy * dy);
        if (dd <= p->r[kk] + 1) {
            continue;
        }
        pm_i_sb_puts(b, "<line class=\"leader\"");
        pm_i_sb_attr_num(b, "x1", p->x[kk] + dx / dd * (p->r[kk] + 1));
        pm_i_sb_attr_num(b, "y1", p->y[kk] + dy / dd * (p->r[kk] + 1));
        pm_i_sb_attr_num(b, "x2", tx - dx / dd);
        pm_i_sb_attr_num(b, "y2", ty - dy / dd);
        pm_i_sb_attr(b, "data-item", c->name[p->item[kk]]);
        pm_i_sb_puts(b, "/>\n");
    }
    pm_i_sb_puts(b, "</g>\n");
}

/* Nodes largest first, so that small ones stay visible; ties by index. */
static pm_err_t write_nodes(ctx_t *c, const pic_t *p, sbuf *b) {
    const pm_svg_data_t *d = c->d;
    char num[64];
    num_key *no = pm_i_malloc(p->nd ? p->nd : 1, sizeof *no);
    if (!no) {
        return pm_i_svg_nomem(c);
    }
    for (size_t j = 0; j < p->nd; j++) {
        no[j] = (num_key){p->r[j], j};
    }
    qsort(no, p->nd, sizeof *no, cmp_num_down);
    /* nodes */
    pm_i_sb_puts(b, "<g id=\"nodes\" stroke=\"#222222\">\n");
    for (size_t j = 0; j < p->nd; j++) {
        size_t kk = no[j].i, i = p->item[kk];
        pm_i_sb_puts(b, "<circle class=\"node\"");
        pm_i_sb_attr_num(b, "cx", p->x[kk]);
        pm_i_sb_attr_num(b, "cy", p->y[kk]);
        pm_i_sb_attr_num(b, "r", p->r[kk]);
        pm_i_sb_attr(b, "fill", fill_of(c, i));
        pm_i_sb_attr_num(b, "stroke-width", 0.9 * c->s + 0.1);
        pm_i_sb_attr(b, "data-item", c->name[i]);
        pm_i_sb_puts(b, " data-cluster=\"");
        pm_i_sb_int(b, d->cluster[i]);
        pm_i_sb_puts(b, "\" data-share=\"");
        pm_i_sb_double(b, c->share[i]);
        pm_i_sb_puts(b, "\"");
        if (c->cat[i]) {
            pm_i_sb_attr(b, "data-category", c->cat[i]);
        }
        pm_i_sb_puts(b, "><title>");
        pm_i_sb_esc(b, c->name[i]);
        pm_i_svg_fmt_percent(num, sizeof num, c->share[i]);
        pm_i_sb_puts(b, " \xe2\x80\x93 ");
        pm_i_sb_puts(b, num);
        pm_i_sb_puts(b, " of ");
        pm_i_sb_esc(b, c->unit);
        pm_i_sb_puts(b, ", ");
        pm_i_sb_esc(b, c->cname[d->cluster[i] - 1]);
        pm_i_sb_puts(b, "</title></circle>\n");
    }
    pm_i_sb_puts(b, "</g>\n");
    pm_i_free(no);
    return PM_OK;
}

static void write_labels(const ctx_t *c, const pic_t *p, sbuf *b) {
    const pm_svg_data_t *d = c->d;
    /* labels: a white halo under each, then the text */
    pm_i_sb_puts(b,
                 "<g id=\"halos\" fill=\"#FFFFFF\" stroke=\"#FFFFFF\" stroke-linejoin=\"round\"");
    pm_i_sb_attr_num(b, "stroke-width", 3 * c->s + 0.5);
    pm_i_sb_puts(b, " opacity=\"0.85\">\n");
    for (size_t kk = 0; kk < p->nd; kk++) {
        const lab_t *l = &p->lab[kk];
        if (l->placed && l->text) {
            pm_i_svg_write_text(b, "halo", l->x, l->y, l->fs, l->anchor, 0, NULL, l->text, NULL, 0);
        }
    }
    for (size_t g = 0; g < p->ng; g++) {
        const lab_t *l = &p->g[g].lab;
        if (l->placed) {
            pm_i_svg_write_text(b, "halo", l->x, l->y, l->fs, l->anchor, 1, NULL, l->text, NULL, 0);
        }
    }
    pm_i_sb_puts(b, "</g>\n<g id=\"labels\">\n");
    for (size_t kk = 0; kk < p->nd; kk++) {
        const lab_t *l = &p->lab[kk];
        size_t i = p->item[kk];
        if (!l->placed || !l->text) {
            continue; /* left out: the node's tooltip names it */
        }
        pm_i_svg_write_text(b, "label", l->x, l->y, l->fs, l->anchor, 0, INK, l->text, c->name[i],
                            d->cluster[i]);
    }
    for (size_t g = 0; g < p->ng; g++) {
        const lab_t *l = &p->g[g].lab;
        if (l->placed) {
            int col = c->ccolour[p->g[g].cluster - 1];
            const char *fill = (col >= 0 && !c->o->color_by_category) ? PAL_TEXT[col] : GREY_TEXT;
            pm_i_svg_write_text(b, "cluster-label", l->x, l->y, l->fs, l->anchor, 1, fill, l->text,
                                NULL, p->g[g].cluster);
        }
    }
    pm_i_sb_puts(b, "</g>\n");
}

static void write_titles(const ctx_t *c, const pic_t *p, sbuf *b, const char *line) {
    /* title and subtitle */
    double m = c->map.x0, tw = c->W - 2 * m;
    char *t = pm_i_svg_shorten(c->title, tw / (BOLD * c->fs_title));
    double title_base = fmax(12, round(22 * c->s)) + ASCENT * c->fs_title;
    if (t) {
        pm_i_svg_write_text(b, "title", m, title_base, c->fs_title, 0, 1, INK, t, NULL, 0);
        pm_i_free(t);
    }
    t = pm_i_svg_shorten(line, tw / c->fs_sub);
    if (t) {
        pm_i_svg_write_text(b, "subtitle", m,
                            title_base + 0.5 * c->fs_title + ASCENT * c->fs_sub + 2, c->fs_sub, 0,
                            0, "#444444", t, NULL, 0);
        pm_i_free(t);
    }
    if (p->nd == 0) {
        pm_i_svg_write_text(b, "note", 0.5 * (c->map.x0 + c->map.x1), 0.5 * (c->map.y0 + c->map.y1),
                            c->fs_leg, 1, 0, "#444444", "No item to draw", NULL, 0);
    }
}

/* The subtitle, which doubles as the description. */
static void subtitle(const ctx_t *c, const pic_t *p, char *line, size_t size) {
    const pm_svg_data_t *d = c->d;
    char resp[40];
    pm_i_svg_fmt_count(resp, sizeof resp, d->respondents);
    /* "1 respondent" in the default words; a --unit word is used as it is given */
    int plain = c->o->unit == NULL || c->o->unit[0] == '\0';
    const char *word = plain && d->respondents == 1 ? "respondent" : c->unit;
    int k = snprintf(line, size, "%s %s \xc2\xb7 %zu of %zu items drawn", resp, word, p->nd, c->n);
    k += snprintf(line + k, size - (size_t)k, " \xc2\xb7 %zu edge%s drawn", p->ne,
                  p->ne == 1 ? "" : "s");
    if (c->thresholds[0] && (size_t)k < size) {
        snprintf(line + k, size - (size_t)k, " \xc2\xb7 %s", c->thresholds);
    }
}

/* What the picture holds, for the summary: see pm_svg_stats_t. */
static void picture_stats(const ctx_t *c, const pic_t *p, pm_svg_stats_t *st) {
    const pm_svg_data_t *d = c->d;
    memset(st, 0, sizeof *st);
    st->drawn = p->nd;
    st->left_out = c->n - p->nd;
    st->edges_drawn = p->ne;
    st->negative_left_out = p->neg_left_out;
    for (size_t j = 0; j < c->n_top && j < c->n; j++) {
        st->top_drawn += c->rank[c->order[j]] < p->nd; /* the order's first nd are drawn */
    }
    st->top = c->n_top;
    for (size_t k = 0; k < p->nd; k++) {
        size_t i = p->item[k];
        const lab_t *l = &p->lab[k];
        if (!l->placed || !l->text) {
            st->labels_left_out++;
        } else if (strcmp(l->text, c->name[i]) != 0) {
            st->labels_shortened++;
        }
        st->alone_drawn += c->csize[d->cluster[i] - 1] == 1;
    }
    for (size_t g = 0; g < p->ng; g++) {
        size_t k = (size_t)p->g[g].cluster - 1;
        if (c->csize[k] >= SIZEABLE) {
            st->clusters_drawn++;
        } else if (c->csize[k] >= 2) {
            st->small_drawn++;
        }
    }
    for (size_t k = 0; k < d->n_clusters; k++) {
        st->clusters += c->csize[k] >= SIZEABLE;
        st->small += c->csize[k] >= 2 && c->csize[k] < SIZEABLE;
    }
}

static pm_err_t write_svg(ctx_t *c, pic_t *p, sbuf *b, pm_svg_stats_t *st) {
    char line[2048];
    pm_i_svg_colours(c, p);
    if (c->o->color_by_category && pm_i_svg_categories(c, p)) {
        return PM_ENOMEM;
    }
    write_header(c, b);
    subtitle(c, p, line, sizeof line);
    pm_i_sb_puts(b, "<desc>");
    pm_i_sb_esc(b, line);
    pm_i_sb_puts(b, "</desc>\n");
    pm_i_sb_puts(b, "<rect class=\"background\" x=\"0\" y=\"0\" width=\"");
    pm_i_sb_int(b, c->W);
    pm_i_sb_puts(b, "\" height=\"");
    pm_i_sb_int(b, c->H);
    pm_i_sb_puts(b, "\" fill=\"#FFFFFF\"/>\n");
    write_regions(c, p, b);
    double wmin, wmax;
    int any_negative;
    edge_range(c, p, &wmin, &wmax, &any_negative);
    pm_err_t rc = write_edges(c, p, b, wmin, wmax);
    if (!rc) {
        write_leaders(c, p, b);
        rc = write_nodes(c, p, b);
    }
    if (!rc) {
        write_labels(c, p, b);
        write_titles(c, p, b, line);
        rc = pm_i_svg_write_legend(c, p, b, wmin, wmax, any_negative);
    }
    pm_i_sb_puts(b, "</svg>\n");
    picture_stats(c, p, st);
    if (!rc && b->oom) {
        rc = pm_i_svg_nomem(c);
    }
    return rc;
}

/* ==== entry points ========================================================================== */
void pm_svg_opts_init(pm_svg_opts_t *o) {
    memset(o, 0, sizeof *o);
    o->seed = 1;
}

/* No more items than the map can hold with their labels: labels may not overlap, so the
 * first nd items of the order fit only while their label boxes (each at its narrowest, the
 * MIN_KEEP-character form) and circles add up to no more than the map's area. A hard bound,
 * so that a large --draw does not try pictures that cannot work. */
static size_t area_bound(const ctx_t *c, size_t nd) {
    double area = (c->map.x1 - c->map.x0) * (c->map.y1 - c->map.y0), sum = 0;
    double lh = (ASCENT + DESCENT) * c->fs_label;
    for (size_t j = 0; j < nd; j++) {
        size_t i = c->order[j];
        double r = c->rk * sqrt(c->share[i]);
        r = r < c->rmin ? c->rmin : r;
        double u = fmin(pm_i_svg_text_units(c->name[i]), pm_i_svg_min_units(c->name[i]));
        sum += u * c->fs_label * lh + 4 * r * r;
        if (sum > area) {
            return j > 0 ? j : 1;
        }
    }
    return nd;
}

pm_err_t pm_svg_render(const pm_svg_data_t *d, const pm_svg_opts_t *o, char **out, size_t *len,
                       pm_svg_stats_t *stats, pm_diag_t *diag) {
    pm_svg_opts_t defaults;
    pm_svg_stats_t st_local;
    pm_diag_t dg_local;
    if (!o) {
        pm_svg_opts_init(&defaults);
        o = &defaults;
    }
    if (!stats) {
        stats = &st_local;
    }
    if (!diag) {
        diag = &dg_local;
    }
    memset(stats, 0, sizeof *stats);
    if (!out || !len || !d) {
        return pm_diag_set(diag, PM_EINTERNAL, NULL, 0, "no buffer or no data for the map");
    }
    *out = NULL;
    *len = 0;
    ctx_t c;
    memset(&c, 0, sizeof c);
    c.d = d;
    c.o = o;
    c.diag = diag;
    if ((o->width > 0 && o->width < MIN_W) || (o->height > 0 && o->height < MIN_H) ||
        o->width > 20000 || o->height > 20000) {
        return pm_diag_set(diag, PM_EUSAGE, NULL, 0,
                           "map canvas %dx%d is out of range (%dx%d to 20000x20000 px)", o->width,
                           o->height, MIN_W, MIN_H);
    }
    pm_err_t rc = pm_i_svg_check_data(&c);
    if (rc) {
        return rc;
    }
    pm_i_svg_set_canvas(&c);
    pic_t p;
    memset(&p, 0, sizeof p);
    sbuf b = {0};
    rc = pm_i_svg_prepare(&c);
    if (rc) {
        goto cleanup;
    }
    size_t nd = o->draw ? (o->draw < c.n ? o->draw : c.n) : pm_i_svg_auto_budget(&c);
    {
        size_t sizeable = 0;
        for (size_t k = 0; k < c.d->n_clusters; k++) {
            sizeable += c.csize[k] >= SIZEABLE;
        }
        if (sizeable > nd && (rc = pm_i_svg_make_order(&c, 1)) != PM_OK) {
            goto cleanup;
        }
    }
    nd = area_bound(&c, nd);
    rc = pm_i_svg_fit(&c, &p, nd);
    if (!rc) {
        rc = write_svg(&c, &p, &b, stats);
    }
    if (!rc) {
        *out = b.p;
        *len = b.n;
        b.p = NULL;
    } else {
        memset(stats, 0, sizeof *stats);
    }
cleanup:
    pm_i_free(b.p);
    pm_i_svg_pic_free(&p);
    pm_i_svg_ctx_free(&c);
    return rc;
}

pm_err_t pm_svg_write(FILE *fp, const pm_svg_data_t *d, const pm_svg_opts_t *o,
                      pm_svg_stats_t *stats, pm_diag_t *diag) {
    pm_diag_t dg_local;
    pm_svg_stats_t st_local;
    if (!diag) {
        diag = &dg_local;
    }
    if (!stats) {
        stats = &st_local;
    }
    if (!fp) {
        memset(stats, 0, sizeof *stats);
        return pm_diag_set(diag, PM_EINTERNAL, NULL, 0, "no stream or no data for the map");
    }
    char *buf = NULL;
    size_t len = 0;
    pm_err_t rc = pm_svg_render(d, o, &buf, &len, stats, diag);
    if (!rc && (fwrite(buf, 1, len, fp) != len || fflush(fp) != 0 || ferror(fp))) {
        rc = pm_diag_set(diag, PM_EIO, NULL, 0, "cannot write the SVG map");
        memset(stats, 0, sizeof *stats);
    }
    pm_i_free(buf);
    return rc;
}
