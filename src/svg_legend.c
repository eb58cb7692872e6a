/* The SVG map, legend: the clusters with their leading members, the size key, the line key and
 * the footer. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "svg_internal.h"

static void swatch_circle(sbuf *b, double x, double y, double r, const char *fill) {
    pm_i_sb_puts(b, "<circle class=\"swatch\"");
    pm_i_sb_attr_num(b, "cx", x);
    pm_i_sb_attr_num(b, "cy", y);
    pm_i_sb_attr_num(b, "r", r);
    pm_i_sb_attr(b, "fill", fill);
    pm_i_sb_puts(b, " stroke=\"#222222\" stroke-width=\"0.8\"/>\n");
}

static void swatch_region(sbuf *b, double x, double y, double w, double h, const char *fill,
                          double tint) {
    pm_i_sb_puts(b, "<rect class=\"swatch\"");
    pm_i_sb_attr_num(b, "x", x);
    pm_i_sb_attr_num(b, "y", y);
    pm_i_sb_attr_num(b, "width", w);
    pm_i_sb_attr_num(b, "height", h);
    pm_i_sb_attr_num(b, "rx", h / 2);
    pm_i_sb_attr(b, "fill", fill);
    pm_i_sb_attr_num(b, "fill-opacity", tint * 1.6);
    pm_i_sb_attr(b, "stroke", fill);
    pm_i_sb_puts(b, " stroke-opacity=\"0.6\" stroke-width=\"1\"/>\n");
}

/* Nice share values for the size key: up to three of 1-2-5 steps within the drawn range. */
static size_t size_key_values(double lo, double hi, double *v) {
    static const double steps[] = {0.001, 0.002, 0.005, 0.01, 0.02, 0.05,
                                   0.1,   0.2,   0.3,   0.5,  0.75, 1.0};
    size_t ns = sizeof steps / sizeof *steps, a = ns, z = ns;
    for (size_t i = 0; i < ns; i++) {
        if (a == ns && steps[i] >= lo * 0.999) {
            a = i;
        }
        if (steps[i] <= hi * 1.001) {
            z = i;
        }
    }
    if (z == ns || a == ns || a > z) {
        /* the range falls between two steps: use the largest step below hi */
        if (z == ns) {
            v[0] = hi;
            return hi > 0;
        }
        v[0] = steps[z];
        return 1;
    }
    if (a == z) {
        v[0] = steps[a];
        return 1;
    }
    v[0] = steps[a];
    if (z - a >= 2) {
        v[1] = steps[(a + z + 1) / 2];
        v[2] = steps[z];
        return v[1] < v[2] ? 3 : 2;
    }
    v[1] = steps[z];
    return 2;
}

static double max_units(double w, double fs, int bold) {
    return w / (fs * (bold ? BOLD : 1.0));
}

/* A paragraph of at most max_lines lines in the legend from (x, y); returns the lines drawn
 * through *drawn. */
static pm_err_t legend_para(ctx_t *c, sbuf *b, double x, double y, double fs, int bold,
                            const char *fill, const char *text, size_t max_lines, size_t *drawn) {
    char *lines[4] = {NULL, NULL, NULL, NULL};
    if (max_lines > 4) {
        max_lines = 4;
    }
    long nl = pm_i_svg_wrap_text(text, max_units(c->legend.x1 - x, fs, bold), lines, max_lines);
    if (nl < 0) {
        for (size_t i = 0; i < max_lines; i++) {
            pm_i_free(lines[i]);
        }
        return pm_i_svg_nomem(c);
    }
    size_t k = (size_t)nl < max_lines ? (size_t)nl : max_lines;
    for (size_t i = 0; i < k; i++) {
        pm_i_svg_write_text(b, "legend", x, y + (double)i * 1.25 * fs, fs, 0, bold, fill, lines[i],
                            NULL, 0);
        pm_i_free(lines[i]);
    }
    *drawn = k;
    return PM_OK;
}

/* Lines the paragraph takes (at most max_lines); 0 when out of memory. */
static size_t para_lines(const ctx_t *c, double x, double fs, int bold, const char *text,
                         size_t max_lines) {
    long nl = pm_i_svg_wrap_text(text, max_units(c->legend.x1 - x, fs, bold), NULL, 0);
    if (nl < 0) {
        return 0;
    }
    return (size_t)nl < max_lines ? (size_t)nl : max_lines;
}

/* The leading members of items[0..n): as many names as fit in max_lines lines of the
 * legend, then "+K more". Writes into s. */
static void members_text(const ctx_t *c, const size_t *items, size_t n, size_t total, double x,
                         double fs, long max_lines, char *s, size_t size) {
    size_t best = 1;
    for (size_t m = 1; m <= n && m <= 12; m++) {
        size_t len = 0;
        for (size_t j = 0; j < m && len < size; j++) {
            int w = snprintf(s + len, size - len, "%s%s", j ? ", " : "", c->name[items[j]]);
            len += w > 0 ? (size_t)w : 0;
        }
        if (total > m && len < size) {
            snprintf(s + len, size - len, ", +%zu more", total - m);
        }
        long nl = pm_i_svg_wrap_text(s, max_units(c->legend.x1 - x, fs, 0), NULL, 0);
        if (nl < 0 || nl > max_lines) {
            break;
        }
        best = m;
    }
    size_t len = 0;
    s[0] = '\0';
    for (size_t j = 0; j < best && j < n && len < size; j++) {
        int w = snprintf(s + len, size - len, "%s%s", j ? ", " : "", c->name[items[j]]);
        len += w > 0 ? (size_t)w : 0;
    }
    if (total > best && len < size) {
        snprintf(s + len, size - len, ", +%zu more", total - best);
    }
}

/* The sub-clusters of cluster k (0-based): sub_label[*from .. *from + return). */
static size_t subs_of(const pm_svg_data_t *d, size_t k, size_t *from) {
    size_t f = 0, n = 0;
    while (f < d->n_sub && d->sub_of[f] != k) {
        f++;
    }
    while (f + n < d->n_sub && d->sub_of[f + n] == k) {
        n++;
    }
    *from = f;
    return n;
}

/* The sub-clusters of big cluster k, one a line from baseline y: "K.S: NAME (SIZE)", the name
 * shortened to the line when needed (or left at "K.S (SIZE)"), at most max_lines lines, the
 * last one "+J more sub-clusters" when they do not all fit. b NULL: measure only. Returns the
 * lines drawn. */
static size_t sub_entries(ctx_t *c, sbuf *b, size_t k, double x, double y, double fs,
                          size_t max_lines, pm_err_t *err) {
    const pm_svg_data_t *d = c->d;
    size_t from, n = subs_of(d, k, &from);
    size_t lines = n <= max_lines ? n : max_lines;
    double room = max_units(c->legend.x1 - x, fs, 0);
    for (size_t j = 0; j < lines && !*err; j++) {
        char text[1400];
        if (j + 1 == lines && lines < n) {
            snprintf(text, sizeof text, "+%zu more sub-clusters", n - j);
        } else {
            char size[40];
            snprintf(size, sizeof size, NBSP "(%zu)", d->sub_size[from + j]);
            char *clean = pm_i_svg_clean_text(d->sub_label[from + j]);
            char *cut = clean ? pm_i_svg_shorten(clean, room - pm_i_svg_text_units(size)) : NULL;
            if (!clean) {
                *err = pm_i_svg_nomem(c);
                break;
            }
            if (cut) {
                snprintf(text, sizeof text, "%s%s", cut, size);
            } else { /* the number alone, up to the colon */
                const char *colon = strchr(clean, ':');
                int len = colon ? (int)(colon - clean) : (int)strlen(clean);
                snprintf(text, sizeof text, "%.*s%s", len, clean, size);
            }
            pm_i_free(cut);
            pm_i_free(clean);
        }
        pm_i_svg_write_text(b, "legend", x, y + (double)j * 1.25 * fs, fs, 0, 0, "#444444", text,
                            NULL, 0);
    }
    return lines;
}

/* Does the cluster name already list this member (as a whole part of it)? */
static int name_lists(const char *cname, const char *member) {
    size_t ml = strlen(member);
    if (ml == 0) {
        return 0;
    }
    for (const char *q = strstr(cname, member); q; q = strstr(q + 1, member)) {
        int head = q == cname || (q - cname >= 2 && q[-1] == ' ' &&
                                  (q[-2] == ',' || (unsigned char)q[-2] == 0xB7 || q[-2] == '&'));
        const char *e = q + ml;
        int tail = *e == '\0' || *e == ',' ||
                   (e[0] == ' ' && ((unsigned char)e[1] == 0xC2 || e[1] == '&'));
        if (head && tail) {
            return 1;
        }
    }
    return 0;
}

/* The grey entries below the coloured clusters: the small clusters together, then the items
 * on their own, each with its leading members. */
static double grey_entries(ctx_t *c, sbuf *b, double y, double keys_top, size_t mem_lines,
                           const size_t counts[3], size_t alone_out, const size_t *drawn_in,
                           size_t *tmp, pm_err_t *err) {
    size_t small = counts[0], small_items = counts[1], alone = counts[2];
    const pm_svg_data_t *d = c->d;
    double x = c->legend.x0, xi = x + 1.4 * c->fs_leg;
    double fs = c->fs_leg, fs2 = c->fs_small;
    double lh = 1.25 * fs, lh2 = 1.25 * fs2;
    char line[2048];
    size_t nl = 0;
    pm_err_t rc = PM_OK;
    for (int grey = 0; grey < 2 && !rc; grey++) {
        size_t count = grey == 0 ? small : alone;
        if (count == 0 || y + lh > keys_top) {
            continue;
        }
        if (grey == 0) { /* not in the picture: no swatch */
            snprintf(line, sizeof line, "%zu cluster%s of 2, not drawn", small,
                     small == 1 ? "" : "s");
        } else {
            swatch_circle(b, x + 0.45 * fs, y - 0.35 * fs, 0.45 * fs, GREY_FILL);
            if (alone_out) { /* the drawn ones are listed, the others only counted */
                char all[32];
                pm_i_svg_fmt_count(all, sizeof all, alone + alone_out);
                snprintf(line, sizeof line, "%zu of %s items on their own", alone, all);
            } else {
                snprintf(line, sizeof line, "%zu item%s on %s own", alone, alone == 1 ? "" : "s",
                         alone == 1 ? "its" : "their");
            }
        }
        rc = legend_para(c, b, xi, y, fs, 1, GREY_TEXT, line, 1, &nl);
        y += 1.15 * lh;
        size_t m = 0, total = grey == 0 ? small_items : alone;
        for (size_t j = 0; j < c->n; j++) { /* by priority */
            size_t i = c->order[j], k = (size_t)d->cluster[i] - 1;
            int want = grey == 0 ? c->csize[k] >= 2 : drawn_in[k] > 0;
            if (c->ccolour[k] < 0 && want) {
                tmp[m++] = i;
            }
        }
        if (grey == 1 && alone_out) {
            total = m; /* the drawn ones only; say how many more the files hold */
        }
        if (mem_lines) {
            members_text(c, tmp, m, total, xi, fs2, (long)mem_lines, line, sizeof line);
        }
        if (!rc && mem_lines && y + lh2 <= keys_top + lh) {
            rc = legend_para(c, b, xi, y, fs2, 0, "#444444", line, mem_lines, &nl);
            y += (double)nl * lh2;
        }
        y += 0.45 * fs;
    }
    *err = rc;
    return y;
}

/* Opens the legend entry of cluster k (0-based) with its swatch at baseline y. */
static void entry_open(const ctx_t *c, sbuf *b, size_t k, size_t drawn, size_t nsub, double x,
                       double y) {
    double fs = c->fs_leg;
    int col = c->ccolour[k];
    pm_i_sb_puts(b, "<g class=\"legend-cluster\" data-cluster=\"");
    pm_i_sb_int(b, (long long)k + 1);
    pm_i_sb_puts(b, "\" data-size=\"");
    pm_i_sb_int(b, (long long)c->csize[k]);
    pm_i_sb_puts(b, "\" data-drawn=\"");
    pm_i_sb_int(b, (long long)drawn);
    if (nsub) {
        pm_i_sb_puts(b, "\" data-subclusters=\"");
        pm_i_sb_int(b, (long long)nsub);
    }
    pm_i_sb_puts(b, "\">\n");
    if (c->o->color_by_category) {
        swatch_region(b, x, y - 0.8 * fs, 1.1 * fs, 0.9 * fs, GREY_FILL, GREY_TINT);
        return;
    }
    swatch_circle(b, x + 0.45 * fs, y - 0.35 * fs, 0.45 * fs, PAL_FILL[col]);
    if (c->ccycle[k] > 0) { /* the palette came round: dashed, as the region */
        pm_i_sb_puts(b, "<circle class=\"swatch\"");
        pm_i_sb_attr_num(b, "cx", x + 0.45 * fs);
        pm_i_sb_attr_num(b, "cy", y - 0.35 * fs);
        pm_i_sb_attr_num(b, "r", 0.45 * fs + 2);
        pm_i_sb_attr(b, "stroke", PAL_FILL[col]);
        pm_i_sb_puts(b, " fill=\"none\" stroke-width=\"1.2\" stroke-dasharray=\"3 2\"/>\n");
    }
}

/* The legend's list of clusters from baseline y: each coloured cluster by colour with its
 * leading members, then the small clusters together and the items on their own. mode 0
 * gives names two lines and members two; mode 1 members one line; mode 2 names one line and
 * no members. b NULL: measure only. Returns the y below the list; *unlisted counts the
 * coloured clusters that found no room. */
static double cluster_list(ctx_t *c, const pic_t *p, sbuf *b, int mode, double y, double keys_top,
                           const size_t *drawn_in, size_t *tmp, size_t *unlisted, pm_err_t *err) {
    const pm_svg_data_t *d = c->d;
    double x = c->legend.x0, xi = x + 1.4 * c->fs_leg;
    double fs = c->fs_leg, fs2 = c->fs_small;
    double lh = 1.25 * fs, lh2 = 1.25 * fs2;
    size_t nc = d->n_clusters, nl = 0;
    size_t head_lines = mode == 2 ? 1 : 2, mem_lines = mode == 0 ? 2 : (mode == 1 ? 1 : 0);
    int cat_mode = c->o->color_by_category;
    char line[2048];
    pm_err_t rc = PM_OK;
    (void)p;
    /* each coloured cluster with its leading members; then the small ones together, and the
     * items on their own (clusters of one) */
    size_t coloured = 0, listed = 0, small = 0, small_items = 0, alone = 0, alone_out = 0;
    for (size_t k = 0; k < nc; k++) {
        if (c->ccolour[k] >= 0) {
            coloured++;
        } else if (c->csize[k] >= 2) {
            small++; /* not drawn */
            small_items += c->csize[k];
        } else if (drawn_in[k]) {
            alone++; /* drawn: the items on their own that are not drawn are not listed */
        } else {
            alone_out++;
        }
    }
    double more_h = lh2 + 0.4 * fs;
    double grey_h = (small ? lh + (double)mem_lines * lh2 + 0.4 * fs : 0) +
                    (alone ? lh + (double)mem_lines * lh2 + 0.4 * fs : 0);
    for (size_t k = 0; k < nc && !rc; k++) {
        int col = c->ccolour[k];
        if (col < 0) {
            continue;
        }
        /* the leading members, less those the cluster's name already gives */
        size_t cnt = 0, named = 0;
        for (size_t j = c->cfirst[k]; j < c->cfirst[k + 1]; j++) {
            if (name_lists(c->cname[k], c->name[c->corder[j]])) {
                named++;
            } else {
                tmp[cnt++] = c->corder[j];
            }
        }
        line[0] = '\0';
        /* a big cluster shows its sub-clusters, one a line, instead of more members */
        size_t first_sub, nsub = subs_of(d, k, &first_sub);
        size_t sub_lines = nsub && mem_lines ? (mode == 0 ? 8 : 3) : 0; /* lines, at most */
        if (nsub) {
            cnt = 0;
            sub_lines = sub_lines < nsub ? sub_lines : nsub;
        } else if (cnt && mem_lines) {
            members_text(c, tmp, cnt, cnt, xi, fs2, (long)mem_lines, line + (named ? 5 : 0),
                         sizeof line - 5);
            if (named) {
                memcpy(line, "also ", 5);
            }
        }
        /* "k: name (size)": the size joined to the last word by no-break spaces, so that it
         * never wraps onto a line of its own */
        char head[1200];
        if (drawn_in[k] == c->csize[k]) {
            snprintf(head, sizeof head, "%s" NBSP "(%zu)", c->cshort[k], c->csize[k]);
        } else {
            snprintf(head, sizeof head, "%s" NBSP "(%zu," NBSP "%zu" NBSP "drawn)", c->cshort[k],
                     c->csize[k], drawn_in[k]);
        }
        size_t hl = para_lines(c, xi, fs, 1, head, head_lines);
        size_t ml = cnt && mem_lines ? para_lines(c, xi, fs2, 0, line, mem_lines) : sub_lines;
        double need = (double)hl * 1.15 * lh + (double)ml * lh2 + 0.45 * fs;
        double reserve = (listed + 1 < coloured ? more_h : 0) + grey_h;
        if (y + need + reserve - lh > keys_top) {
            break;
        }
        listed++;
        entry_open(c, b, k, drawn_in[k], nsub, x, y);
        rc = legend_para(c, b, xi, y, fs, 1, cat_mode ? INK : PAL_TEXT[col], head, head_lines, &nl);
        y += (double)nl * 1.15 * lh;
        nl = 0;
        if (!rc && cnt && mem_lines) {
            rc = legend_para(c, b, xi, y, fs2, 0, "#444444", line, mem_lines, &nl);
        } else if (!rc && sub_lines) {
            nl = sub_entries(c, b, k, xi, y, fs2, sub_lines, &rc);
        }
        y += (double)nl * lh2 + 0.45 * fs;
        pm_i_sb_puts(b, "</g>\n");
    }
    if (!rc && listed < coloured) {
        snprintf(line, sizeof line, "and %zu more cluster%s", coloured - listed,
                 coloured - listed == 1 ? "" : "s");
        rc = legend_para(c, b, xi, y, fs2, 0, "#444444", line, 1, &nl);
        y += lh2 + 0.4 * fs;
    }
    if (!rc) {
        size_t counts[3] = {small, small_items, alone};
        y = grey_entries(c, b, y, keys_top, mem_lines, counts, alone_out, drawn_in, tmp, &rc);
    }
    *unlisted = coloured - listed;
    *err = rc;
    return y;
}

/* The size key from baseline y: circles of the shares v[0..nv); returns the y below it. */
static double size_key(ctx_t *c, sbuf *b, double y, const char *size_head, const double *v,
                       size_t nv, double rbig, pm_err_t *err) {
    double x = c->legend.x0, fs = c->fs_leg, fs2 = c->fs_small, lh = 1.25 * fs;
    size_t nl = 0;
    pm_err_t rc;
    rc = legend_para(c, b, x, y, fs, 1, INK, size_head, 2, &nl);
    double base = y + ((double)nl - 1) * lh + 0.3 * lh + DESCENT * fs + 2 * rbig;
    double cx = x + rbig + 2;
    pm_i_sb_puts(b, "<g class=\"size-key\">\n");
    for (size_t i = 0; i < nv; i++) {
        double r = fmax(c->rk * sqrt(v[i]), c->rmin);
        pm_i_sb_puts(b, "<circle class=\"key\"");
        pm_i_sb_attr_num(b, "cx", cx);
        pm_i_sb_attr_num(b, "cy", base - r);
        pm_i_sb_attr_num(b, "r", r);
        pm_i_sb_puts(b, " fill=\"none\" stroke=\"#333333\" stroke-width=\"1\" data-share=\"");
        pm_i_sb_double(b, v[i]);
        pm_i_sb_puts(b, "\"/>\n");
        char pct[32];
        pm_i_svg_fmt_percent(pct, sizeof pct, v[i]);
        pm_i_svg_write_text(b, "legend", cx, base + 1.2 * fs2, fs2, 1, 0, "#333333", pct, NULL, 0);
        double half = fmax(r, 0.5 * pm_i_svg_text_width(pct, fs2, 0));
        double next = i + 1 < nv ? fmax(fmax(c->rk * sqrt(v[i + 1]), c->rmin),
                                        0.5 * pm_i_svg_text_width(pct, fs2, 0))
                                 : 0;
        cx += half + 1.3 * fs + next;
    }
    pm_i_sb_puts(b, "</g>\n");
    y = base + 1.2 * fs2 + 0.9 * lh + ASCENT * fs;
    *err = rc;
    return y;
}

/* The start of a key's line from x0 to x1 at height y (its stroke follows). */
static void key_line(sbuf *b, double x0, double x1, double y) {
    pm_i_sb_puts(b, "<line class=\"key\"");
    pm_i_sb_attr_num(b, "x1", x0);
    pm_i_sb_attr_num(b, "y1", y);
    pm_i_sb_attr_num(b, "x2", x1);
    pm_i_sb_attr_num(b, "y2", y);
}

/* The line key from baseline y: the weakest and strongest drawn widths, the dashed line of
 * negative pairs; returns the y below it. */
static double line_key(ctx_t *c, sbuf *b, double y, const char *line_head, const char *neg_text,
                       double wmin, double wmax, int any_negative, pm_err_t *err) {
    double x = c->legend.x0, fs = c->fs_leg, fs2 = c->fs_small;
    double lh = 1.25 * fs, lh2 = 1.25 * fs2;
    size_t nl = 0;
    pm_err_t rc;
    rc = legend_para(c, b, x, y, fs, 1, INK, line_head, 2, &nl);
    y += (double)nl * lh;
    double lw0 = 0.6 * c->s + 0.2 + 0.39 * c->s, lw1 = 4.5 * c->s + 0.2;
    const double ws[2] = {wmin, wmax};
    for (int i = 0; i < 2 && !rc; i++) {
        if (i == 1 && wmax == wmin) {
            y += lh2;
            break;
        }
        key_line(b, x, x + 3 * fs, y - 0.35 * fs2);
        pm_i_sb_puts(b, " stroke=\"#4D5A66\"");
        pm_i_sb_attr_num(b, "stroke-width", i ? lw1 : lw0);
        pm_i_sb_attr_num(b, "stroke-opacity", i ? 0.8 : 0.3);
        pm_i_sb_puts(b, "/>\n");
        char num[64];
        snprintf(num, sizeof num, "%s %.2f", i ? "strongest" : "weakest drawn", ws[i]);
        rc = legend_para(c, b, x + 3.6 * fs, y, fs2, 0, "#333333", num, 1, &nl);
        y += lh2;
    }
    if (!rc && any_negative) {
        key_line(b, x, x + 3 * fs, y - 0.35 * fs2);
        pm_i_sb_puts(b, " stroke=\"#3A3A3A\" stroke-width=\"1.6\" stroke-dasharray=\"6 4\"/>\n");
        rc = legend_para(c, b, x + 3.6 * fs, y, fs2, 0, "#333333", neg_text, 2, &nl);
        y += (double)nl * lh2;
    }
    y += 0.9 * lh - lh2;
    *err = rc;
    return y;
}

pm_err_t pm_i_svg_write_legend(ctx_t *c, const pic_t *p, sbuf *b, double wmin, double wmax,
                               int any_negative) {
    const pm_svg_data_t *d = c->d;
    const box_t *L = &c->legend;
    double x = L->x0, xi = x + 1.4 * c->fs_leg; /* text beside a swatch */
    double fs = c->fs_leg, fs2 = c->fs_small, fh = c->fs_cluster;
    double lh = 1.25 * fs, lh2 = 1.25 * fs2;
    double bottom = L->y1;
    char size_head[128], line_head[256], neg_text[128], foot[256];
    size_t nc = d->n_clusters, nl = 0;
    pm_err_t rc = PM_OK;
    int cat_mode = c->o->color_by_category;
    /* the keys, measured first: they sit at the bottom, the clusters take the rest */
    double lo = INFINITY, hi = 0;
    for (size_t k = 0; k < p->nd; k++) {
        lo = fmin(lo, c->share[p->item[k]]);
        hi = fmax(hi, c->share[p->item[k]]);
    }
    double v[3];
    size_t nv = p->nd && hi > 0 ? size_key_values(lo, hi, v) : 0;
    double rbig = 0;
    for (size_t i = 0; i < nv; i++) {
        rbig = fmax(rbig, fmax(c->rk * sqrt(v[i]), c->rmin));
    }
    snprintf(size_head, sizeof size_head, "Circle area: share of %s", c->unit);
    /* with negative weights drawn (phi) the width shows the strength either way: |phi|; a
     * measure that stays positive for substitutes (lift) keeps its plain name */
    int signed_w = 0;
    for (size_t e = 0; e < p->ne; e++) {
        signed_w |= d->weight[p->edge[e]] < 0;
    }
    snprintf(line_head, sizeof line_head, signed_w ? "Line width: |%s|" : "Line width: %s",
             c->measure);
    snprintf(neg_text, sizeof neg_text, "dashed: chosen together less than expected");
    snprintf(foot, sizeof foot, "Layout: Fruchterman-Reingold, seed %llu \xc2\xb7 pairmap %s",
             (unsigned long long)c->o->seed, pm_version());
    double size_lines = (double)para_lines(c, x, fs, 1, size_head, 2);
    double size_h = nv ? size_lines * lh + 0.3 * lh + 2 * rbig + 1.4 * fs2 + 0.9 * lh : 0;
    double neg_lines = any_negative ? (double)para_lines(c, x + 3.6 * fs, fs2, 0, neg_text, 2) : 0;
    double line_h = p->ne ? (double)para_lines(c, x, fs, 1, line_head, 2) * lh + 2 * lh2 +
                                neg_lines * lh2 + 0.9 * lh
                          : 0;
    double foot_h = (double)para_lines(c, x, fs2, 0, foot, 2) * lh2;
    double keys_top = bottom - foot_h - line_h - size_h;
    double y = L->y0 + ASCENT * fh;
    pm_i_sb_puts(b, "<g id=\"legend\">\n");
    if (cat_mode) {
        rc = legend_para(c, b, x, y, fh, 1, INK, "Categories", 1, &nl);
        y += 1.45 * lh;
        for (size_t k = 0; k < c->ncat && !rc; k++) {
            if (y + DESCENT * fs > keys_top) {
                break;
            }
            int col = c->catcolour[k];
            swatch_circle(b, x + 0.45 * fs, y - 0.35 * fs, 0.45 * fs,
                          col >= 0 ? PAL_FILL[col] : GREY_FILL);
            rc = legend_para(c, b, xi, y, fs, 0, INK, col >= 0 ? c->cats[k] : "other categories", 1,
                             &nl);
            y += 1.15 * lh;
            if (col < 0) {
                break;
            }
        }
        y += 0.7 * lh;
    }
    if (!rc) {
        rc = legend_para(c, b, x, y, fh, 1, INK, "Clusters", 1, &nl);
        y += 1.45 * lh;
    }
    size_t *drawn_in = pm_i_calloc(nc ? nc : 1, sizeof *drawn_in);
    size_t *tmp = pm_i_malloc(c->n ? c->n : 1, sizeof *tmp);
    if (!drawn_in || !tmp) {
        pm_i_free(drawn_in);
        pm_i_free(tmp);
        return pm_i_svg_nomem(c);
    }
    for (size_t k = 0; k < p->nd; k++) {
        drawn_in[d->cluster[p->item[k]] - 1]++;
    }
    /* the most detailed list of clusters that fits above the keys */
    int mode = 0;
    for (; mode < 2; mode++) {
        size_t unlisted = 0;
        cluster_list(c, p, NULL, mode, y, keys_top, drawn_in, tmp, &unlisted, &rc);
        if (rc || unlisted == 0) {
            break;
        }
    }
    size_t unlisted = 0;
    if (!rc) {
        y = cluster_list(c, p, b, mode, y, keys_top, drawn_in, tmp, &unlisted, &rc);
    }
    pm_i_free(drawn_in);
    pm_i_free(tmp);
    /* size key */
    y = fmax(y + 0.5 * lh, keys_top + ASCENT * fs);
    if (!rc && nv) {
        y = size_key(c, b, y, size_head, v, nv, rbig, &rc);
    }
    /* line key */
    if (!rc && p->ne) {
        y = line_key(c, b, y, line_head, neg_text, wmin, wmax, any_negative, &rc);
    }
    if (!rc) {
        double fy = fmax(y + lh2, bottom - foot_h + ASCENT * fs2);
        if (fy + foot_h - lh2 + DESCENT * fs2 <= bottom + 0.01) {
            rc = legend_para(c, b, x, fy, fs2, 0, "#666666", foot, 2, &nl);
        }
    }
    pm_i_sb_puts(b, "</g>\n");
    return rc;
}
