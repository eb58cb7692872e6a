/* map.html: the offline view (see htmlmap.h). The page is the SVG inline, the data as one JSON
 * object in a <script type="application/json"> element, and the style sheet and script of
 * src/html/ (compiled in by cmake/embed.cmake). Nothing in it refers to anything outside. */
#include <errno.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "html_assets.h"
#include "pairmap/htmlmap.h"
#include "pairmap/text.h"
#include "pairmap/write.h"
#include "util.h"
#include "windows.h"

/* ---- JSON pieces (compact: the page's weight matters) ---------------------------------------- */
static void jstr(FILE *fp, const char *s) {
    if (s) {
        pm_json_write_script_string(fp, s);
    } else {
        fputs("null", fp);
    }
}

static void jnum(FILE *fp, double v) {
    if (isfinite(v)) {
        pm_write_number(fp, v);
    } else {
        fputs("null", fp);
    }
}

static void jkey(FILE *fp, const char *key, int first) {
    if (!first) {
        fputc(',', fp);
    }
    jstr(fp, key);
    fputc(':', fp);
}

/* A column of numbers or indices built in a buffer and written in pieces (the same text as
 * one fputs per number, without a stdio call for each). */
#define JBUF 65536
#define JROOM 80 /* the longest number, its comma and "null" fit */

/* One number of a column and the comma before it (not before the first). */
static size_t jnum_room(void *ud, size_t i) {
    (void)ud;
    (void)i;
    return JROOM;
}

static char *jnum_make(void *ud, char *o, size_t i) {
    const double *v = ud;
    if (i) {
        *o++ = ',';
    }
    if (isfinite(v[i])) {
        return o + pm_i_fmt_double(o, JROOM, v[i]);
    }
    memcpy(o, "null", 4);
    return o + 4;
}

static void jnum_one(void *ud, FILE *fp, size_t i) {
    char t[JROOM];
    fwrite(t, 1, (size_t)(jnum_make(ud, t, i) - t), fp);
}

#define JNUMS_PAR 65536 /* columns this long are made on several threads (pm_i_write_windows) */

/* "key":[v0,v1,...] of n numbers */
static void jnums_on(FILE *fp, const char *key, const double *v, size_t n, unsigned threads) {
    jkey(fp, key, 0);
    if (n >= JNUMS_PAR) { /* the same text, in windows of chunks made on `threads` threads */
        fputc('[', fp);
        const pm_i_windows w = {n, 1024, jnum_room, jnum_make, jnum_one, (void *)v, threads};
        pm_i_write_windows(fp, &w);
        fputc(']', fp);
        return;
    }
    char buf[JBUF];
    size_t o = 0;
    buf[o++] = '[';
    for (size_t i = 0; i < n; i++) {
        o = (size_t)(jnum_make((void *)v, buf + o, i) - buf);
        if (o > JBUF - JROOM) {
            fwrite(buf, 1, o, fp);
            o = 0;
        }
    }
    buf[o++] = ']';
    fwrite(buf, 1, o, fp);
}

/* "key":[u0,u1,...] of n indices (first: no comma before the key) */
static void jindices(FILE *fp, const char *key, int first, const uint32_t *v, size_t n) {
    jkey(fp, key, first);
    char buf[JBUF];
    size_t o = 0;
    buf[o++] = '[';
    for (size_t i = 0; i < n; i++) {
        if (i) {
            buf[o++] = ',';
        }
        char t[12];
        int k = 0;
        uint32_t u = v[i];
        do {
            t[k++] = (char)('0' + u % 10);
            u /= 10;
        } while (u);
        while (k) {
            buf[o++] = t[--k];
        }
        if (o > JBUF - JROOM) {
            fwrite(buf, 1, o, fp);
            o = 0;
        }
    }
    buf[o++] = ']';
    fwrite(buf, 1, o, fp);
}

/* ---- the data -------------------------------------------------------------------------------- */
static pm_err_t write_items(FILE *fp, const pm_html_data_t *d, double *buf) {
    const pm_map_t *map = d->map;
    const pm_incidence_t *inc = map->inc;
    size_t n = map->n;
    jkey(fp, "items", 0);
    fputc('{', fp);
    jkey(fp, "name", 1);
    fputc('[', fp);
    for (size_t v = 0; v < n; v++) {
        if (v) {
            fputc(',', fp);
        }
        jstr(fp, inc->name[map->item[v]]);
    }
    fputs("]", fp);
    jkey(fp, "category", 0);
    fputc('[', fp);
    for (size_t v = 0; v < n; v++) {
        if (v) {
            fputc(',', fp);
        }
        jstr(fp, inc->category ? inc->category[map->item[v]] : NULL);
    }
    fputs("]", fp);
    for (size_t v = 0; v < n; v++) {
        buf[v] = (double)inc->count[map->item[v]];
    }
    jnums_on(fp, "respondents", buf, n, d->threads);
    for (size_t v = 0; v < n; v++) {
        buf[v] = pm_incidence_share(inc, map->item[v]);
    }
    jnums_on(fp, "share", buf, n, d->threads);
    jnums_on(fp, "share_low", map->share_low, n, d->threads);
    jnums_on(fp, "share_high", map->share_high, n, d->threads);
    for (size_t v = 0; v < n; v++) {
        buf[v] = map->clusters->cluster[v];
    }
    jnums_on(fp, "cluster", buf, n, d->threads);
    for (size_t v = 0; v < n; v++) {
        buf[v] = map->degree[v];
    }
    jnums_on(fp, "degree", buf, n, d->threads);
    /* names as the SVG writes them (data-item, data-a, data-b) where the XML cleaner changes
     * them: [[vertex, name], ...] */
    jkey(fp, "svg_name", 0);
    fputc('[', fp);
    int first = 1;
    for (size_t v = 0; v < n; v++) {
        const char *name = inc->name[map->item[v]];
        size_t len = strlen(name);
        char *clean =
            len <= (SIZE_MAX - 1) / 3 ? pm_i_malloc(PM_TEXT_XML_CLEAN_SIZE(len), 1) : NULL;
        if (!clean) {
            return PM_ENOMEM;
        }
        pm_text_xml_clean(name, len, PM_TEXT_XML_LINE, clean);
        if (strcmp(clean, name) != 0) {
            fprintf(fp, first ? "[%zu," : ",[%zu,", v);
            jstr(fp, clean);
            fputc(']', fp);
            first = 0;
        }
        pm_i_free(clean);
    }
    fputs("]}", fp);
    return PM_OK;
}

/* The partner table's numbers for both directions (cols: EDGE_COLS * edges numbers, column by
 * column in the order of slot[]: both lower bounds side by side and both upper bounds, so that
 * the 2 x edges Jeffreys intervals are solved in one call). */
#define EDGE_COLS 11
static const size_t slot[EDGE_COLS] = {0, 1, 2, 3, 4, 5, 7, 9, 6, 8, 10};

static void edge_columns(const pm_map_t *map, unsigned threads, double *buf) {
    const pm_incidence_t *inc = map->inc;
    const pm_pairs_t *pp = map->pairs;
    size_t m = map->edges->n;
    double *lo = buf + 7 * m, *hi = buf + 9 * m; /* a -> b at k, b -> a at m + k */
    for (size_t k = 0; k < m; k++) {
        size_t idx = map->edges->idx[k];
        double w_ab = pp->w_ab ? pp->w_ab[idx] : (double)pp->n_ab[idx];
        pm_measures_t ms;
        pm_pairs_measures(pp, inc, idx, &ms);
        buf[k] = ms.together;
        buf[m + k] = ms.expected;
        buf[2 * m + k] = ms.lift;
        buf[3 * m + k] = ms.phi;
        buf[4 * m + k] = ms.q;
        /* a -> b and b -> a, as `partners --item a` and `--item b` print them: the (x, n) of
         * each interval first, in the places of its bounds */
        pm_assoc_confidence_args(inc, pp->a[idx], pp->n_ab[idx], w_ab, &buf[5 * m + k], &lo[k],
                                 &hi[k]);
        pm_assoc_confidence_args(inc, pp->b[idx], pp->n_ab[idx], w_ab, &buf[6 * m + k], &lo[m + k],
                                 &hi[m + k]);
    }
    pm_assoc_jeffreys_many(lo, hi, 2 * m, 0.05, threads, lo, hi);
}

double *pm_html_edge_columns(const pm_map_t *map, unsigned threads) {
    size_t m = map->edges->n;
    double *cols =
        m <= SIZE_MAX / EDGE_COLS ? malloc((m ? m : 1) * EDGE_COLS * sizeof *cols) : NULL;
    if (cols) {
        edge_columns(map, threads, cols);
    }
    return cols;
}

/* The kept edges, columnar: vertex indices a < b and the partner table's columns (from
 * d->edge_cols, else made in buf). */
static void write_edges(FILE *fp, const pm_html_data_t *d, double *buf) {
    const pm_map_t *map = d->map;
    const pm_incidence_t *inc = map->inc;
    size_t m = map->edges->n;
    jkey(fp, "edges", 0);
    fputc('{', fp);
    jindices(fp, "a", 1, map->ea, m);
    jindices(fp, "b", 0, map->eb, m);
    static const char *const cols[EDGE_COLS] = {"together",
                                                "expected",
                                                "lift",
                                                "phi",
                                                "q_value",
                                                "confidence_ab",
                                                "confidence_ab_low",
                                                "confidence_ab_high",
                                                "confidence_ba",
                                                "confidence_ba_low",
                                                "confidence_ba_high"};
    const double *v = d->edge_cols;
    if (!v) {
        edge_columns(map, d->threads, buf);
        v = buf;
    }
    for (size_t col = 0; col < EDGE_COLS; col++) {
        /* unweighted, expected, lift and both confidences are one or two double operations
         * on the counts the page holds (src/assoc.c's order): the script derives them, bit
         * for bit, and the page is 40% lighter */
        if (!inc->wcount && (col == 1 || col == 2 || col == 5 || col == 8)) {
            continue;
        }
        jnums_on(fp, cols[col], v + slot[col] * m, m, d->threads);
    }
    fputc('}', fp);
}

/* "segments":[{"column":..,"levels":[..],"index":[[per vertex] per level]}] (none: nothing) */
static void write_segments(FILE *fp, const pm_html_data_t *d) {
    const pm_map_t *map = d->map;
    if (!d->n_segments) {
        return;
    }
    jkey(fp, "segments", 0);
    fputc('[', fp);
    for (size_t c = 0; c < d->n_segments; c++) {
        const pm_html_segments_t *sg = &d->segments[c];
        fputs(c ? ",{" : "{", fp);
        jkey(fp, "column", 1);
        jstr(fp, sg->column);
        jkey(fp, "levels", 0);
        fputc('[', fp);
        for (size_t l = 0; l < sg->n_levels; l++) {
            if (l) {
                fputc(',', fp);
            }
            jstr(fp, sg->level[l]);
        }
        fputc(']', fp);
        jkey(fp, "index", 0);
        fputc('[', fp);
        for (size_t l = 0; l < sg->n_levels; l++) {
            fputs(l ? ",[" : "[", fp);
            for (size_t v = 0; v < map->n; v++) {
                if (v) {
                    fputc(',', fp);
                }
                jnum(fp,
                     map->item[v] < sg->n_items ? sg->index[l * sg->n_items + map->item[v]] : NAN);
            }
            fputc(']', fp);
        }
        fputs("]}", fp);
    }
    fputc(']', fp);
}

static void write_clusters(FILE *fp, const pm_html_data_t *d) {
    const pm_clusters_t *cl = d->map->clusters;
    jkey(fp, "clusters", 0);
    fputc('[', fp);
    for (size_t c = 0; c < cl->n_clusters; c++) {
        fputs(c ? ",{" : "{", fp);
        jkey(fp, "name", 1);
        jstr(fp, d->cluster_name ? d->cluster_name[c] : NULL);
        fprintf(fp, ",\"size\":%zu}", cl->size[c]);
    }
    fputc(']', fp);
}

static void write_run(FILE *fp, const pm_html_data_t *d) {
    const pm_html_run_t *r = d->run;
    const pm_select_opts_t *sel = d->sel;
    const pm_incidence_t *inc = d->map->inc;
    jkey(fp, "run", 0);
    fputc('{', fp);
    jkey(fp, "version", 1);
    jstr(fp, pm_version());
    jkey(fp, "input", 0);
    jstr(fp, r ? r->input : NULL);
    jkey(fp, "bytes", 0);
    fprintf(fp, "%llu", r ? (unsigned long long)r->bytes : 0ULL);
    jkey(fp, "lines", 0);
    fprintf(fp, "%llu", r ? (unsigned long long)r->lines : 0ULL);
    jkey(fp, "sha256", 0);
    jstr(fp, r ? r->sha256 : NULL);
    jkey(fp, "unit", 0);
    jstr(fp, r && r->unit ? r->unit : "respondents");
    jkey(fp, "options", 0);
    fputc('[', fp);
    for (size_t i = 0; r && i < r->n_options; i++) {
        if (i) {
            fputc(',', fp);
        }
        jstr(fp, r->options[i]);
    }
    fputc(']', fp);
    jkey(fp, "respondents", 0);
    fprintf(fp, "%llu", (unsigned long long)inc->N);
    jkey(fp, "items_read", 0);
    fprintf(fp, "%zu", inc->n_items);
    jkey(fp, "drawn", 0);
    fprintf(fp, "%zu", d->drawn);
    jkey(fp, "weighted", 0);
    fputs(inc->weight ? "true" : "false", fp);
    jkey(fp, "sign", 0);
    jstr(fp, pm_sign_name(sel->sign));
    jkey(fp, "min_count", 0);
    fprintf(fp, "%u", sel->min_count);
    jkey(fp, "max_q", 0);
    jnum(fp, sel->max_q);
    jkey(fp, "min_phi", 0);
    jnum(fp, sel->min_phi);
    jkey(fp, "min_lift", 0);
    jnum(fp, sel->min_lift);
    jkey(fp, "top_edges", 0);
    fprintf(fp, "%zu", sel->top_edges);
    jkey(fp, "measure", 0);
    jstr(fp, pm_measure_name(sel->measure));
    fputc('}', fp);
}

/* ---- the page -------------------------------------------------------------------------------- */
static const char page_head[] =
    "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
    "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n"
    "<meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; "
    "style-src 'unsafe-inline'; script-src 'unsafe-inline'\">\n<title>";

/* The controls; the script fills in the lists, the panel and the footer. */
static const char page_body[] =
    "</h1>\n<p id=\"pm-sub\"></p>\n"
    "<div class=\"pm-controls\" role=\"search\">\n"
    "<div class=\"pm-find\"><label for=\"pm-search\">Find an item</label>\n"
    "<input id=\"pm-search\" type=\"text\" role=\"combobox\" autocomplete=\"off\" "
    "spellcheck=\"false\" aria-autocomplete=\"list\" aria-expanded=\"false\" "
    "aria-controls=\"pm-suggest\" aria-describedby=\"pm-search-help\" placeholder=\"type a "
    "name\">\n"
    "<span id=\"pm-search-help\" class=\"pm-hidden\">Suggestions follow as you type; arrow "
    "keys move through them, Enter chooses, Escape closes.</span>\n"
    "<ul id=\"pm-suggest\" role=\"listbox\" aria-label=\"Matching items\" hidden></ul></div>\n"
    "<div class=\"pm-filter\"><label for=\"pm-phi\">phi at least <output id=\"pm-phi-out\" "
    "for=\"pm-phi\"></output></label>\n"
    "<input id=\"pm-phi\" type=\"range\" min=\"0\" max=\"1\" step=\"0.01\" value=\"0\" "
    "aria-label=\"Hide pairs whose phi is below this value\"></div>\n"
    "<div class=\"pm-filter\"><label for=\"pm-q\">q at most <output id=\"pm-q-out\" "
    "for=\"pm-q\"></output></label>\n"
    "<input id=\"pm-q\" type=\"range\" min=\"-12\" max=\"0\" step=\"0.1\" value=\"0\" "
    "aria-label=\"Hide pairs whose q-value is above this value (log scale)\"></div>\n"
    "<div class=\"pm-filter\" id=\"pm-neg-box\" hidden><label><input id=\"pm-neg\" "
    "type=\"checkbox\" checked> negative pairs</label></div>\n"
    "<div class=\"pm-filter\" id=\"pm-seg-box\" hidden><label for=\"pm-seg\">tint by segment"
    "</label>\n<select id=\"pm-seg\" aria-label=\"Tint items by their shrunk index in a "
    "segment\"></select>\n<span id=\"pm-seg-key\" class=\"pm-note\" hidden></span></div>\n"
    "<button type=\"button\" id=\"pm-clear\">Clear</button>\n"
    "</div>\n</header>\n<main>\n"
    "<section id=\"pm-view\" tabindex=\"0\" aria-label=\"The map. Arrow keys pan, plus and "
    "minus zoom, 0 shows it all; the mouse wheel zooms and dragging pans.\">\n"
    "<div class=\"pm-zoom\"><button type=\"button\" id=\"pm-zoom-in\" aria-label=\"Zoom "
    "in\">+</button><button type=\"button\" id=\"pm-zoom-out\" aria-label=\"Zoom "
    "out\">&#8722;</button><button type=\"button\" id=\"pm-zoom-fit\" aria-label=\"Show the "
    "whole map\">&#8634;</button></div>\n";

static const char page_side[] =
    "\n</section>\n<aside id=\"pm-side\">\n"
    "<section id=\"pm-panel\" aria-live=\"polite\" aria-label=\"Chosen item or cluster\">"
    "</section>\n"
    "<nav id=\"pm-clusters\" aria-label=\"Clusters\"><h2>Clusters</h2><ul id=\"pm-cluster-list\">"
    "</ul></nav>\n</aside>\n</main>\n<footer id=\"pm-footer\"></footer>\n"
    "<script type=\"application/json\" id=\"pm-data\">";

/* The SVG without its XML declaration (and anything else before the root element). */
static void write_svg(FILE *fp, const char *svg, size_t len) {
    const char *p = svg;
    while (p && (size_t)(p - svg) + 4 <= len) {
        if (memcmp(p, "<svg", 4) == 0) {
            fwrite(p, 1, len - (size_t)(p - svg), fp);
            return;
        }
        p = memchr(p + 1, '<', len - (size_t)(p + 1 - svg));
    }
}

pm_err_t pm_html_write(FILE *fp, const pm_html_data_t *d, pm_diag_t *diag) {
    const pm_map_t *map = d->map;
    size_t m = map->edges->n;
    if (m > SIZE_MAX / EDGE_COLS) {
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
    }
    size_t cap = d->edge_cols || map->n > m * EDGE_COLS ? map->n : m * EDGE_COLS;
    double *buf = pm_i_malloc(cap ? cap : 1, sizeof *buf);
    if (!buf) {
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
    }
    const char *title = map->title && map->title[0] ? map->title : "Which items go together";
    fputs(page_head, fp);
    pm_text_xml_fputs(fp, title, PM_TEXT_XML_LINE); /* as the SVG's title */
    fputs("</title>\n<style>\n", fp);
    fwrite(pm_i_page_css, 1, pm_i_page_css_len, fp);
    fputs("</style>\n</head>\n<body>\n<header>\n<h1 id=\"pm-title\">", fp);
    pm_text_xml_fputs(fp, title, PM_TEXT_XML_LINE);
    fputs(page_body, fp);
    write_svg(fp, d->svg, d->svg_len);
    fputs(page_side, fp);
    fputs("{\"format\":1", fp);
    if (write_items(fp, d, buf) != PM_OK) {
        pm_i_free(buf);
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
    }
    write_edges(fp, d, buf);
    write_clusters(fp, d);
    write_segments(fp, d);
    /* the run on a line of its own: what names this run (input, options, size), as run.json */
    fputs("}</script>\n<script type=\"application/json\" id=\"pm-run\">{\"format\":1", fp);
    write_run(fp, d);
    fputs("}</script>\n<script>\n", fp);
    fwrite(pm_i_page_js, 1, pm_i_page_js_len, fp);
    fputs("</script>\n</body>\n</html>\n", fp);
    pm_i_free(buf);
    if (ferror(fp)) {
        return pm_diag_set(diag, PM_EIO, NULL, 0, "cannot write map.html: %s",
                           strerror(errno ? errno : EIO));
    }
    return PM_OK;
}
