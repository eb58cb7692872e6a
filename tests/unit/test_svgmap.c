/* Unit tests of the SVG map (src/svgmap.c): the demo run through the library (read, incidence,
 * scoring, selection, Louvain) and drawn; determinism; XML escaping and UTF-8 repair; the
 * choice of drawn items; a crowded canvas; error paths.
 *
 * Tool mode for tests/cli/test_svg_map.sh and tests/ref/svg_geometry.py:
 *   test_svgmap --write DIR        (or PM_SVG_OUT=DIR test_svgmap)
 * writes DIR/NAME.svg for each picture below, with DIR/NAME.nodes.csv (item,cluster,share) and
 * DIR/NAME.edges.csv (item_a,item_b,weight): the data the picture was drawn from. */
#include "unit.h"

#include <math.h>

#include "pairmap/assoc.h"
#include "pairmap/incidence.h"
#include "pairmap/input.h"
#include "pairmap/network.h"
#include "pairmap/select.h"
#include "pairmap/svgmap.h"
#include "pairmap/write.h"
#include "util.h"

/* ==== test data ============================================================================= */
/* A map's data with owned arrays. */
typedef struct {
    pm_svg_data_t d;
    size_t n, m, nc;
    char **name, **cat, **cname;
    double *share, *strength, *weight;
    int *cluster;
    uint32_t *ea, *eb;
    char thresholds[128];
} mapdata;

static void mapdata_free(mapdata *md) {
    for (size_t i = 0; i < md->n; i++) {
        free(md->name[i]);
        free(md->cat ? md->cat[i] : NULL);
    }
    for (size_t k = 0; k < md->nc; k++) {
        free(md->cname[k]);
    }
    free(md->name);
    free(md->cat);
    free(md->cname);
    free(md->share);
    free(md->strength);
    free(md->weight);
    free(md->cluster);
    free(md->ea);
    free(md->eb);
    memset(md, 0, sizeof *md);
}

static char *dupstr(const char *s) {
    char *c = malloc(strlen(s) + 1);
    assert_non_null(c);
    strcpy(c, s);
    return c;
}

static void mapdata_wire(mapdata *md) {
    pm_svg_data_t *d = &md->d;
    d->n_nodes = md->n;
    d->name = (const char *const *)md->name;
    d->category = (const char *const *)md->cat;
    d->share = md->share;
    d->cluster = md->cluster;
    d->strength = md->strength;
    d->n_edges = md->m;
    d->ea = md->ea;
    d->eb = md->eb;
    d->weight = md->weight;
    d->n_clusters = md->nc;
    d->cluster_name = (const char *const *)md->cname;
    d->thresholds = md->thresholds;
    d->measure = "phi";
}

static const char *repo_path(const char *rel, char *buf, size_t size) {
    /* this file is REPO/tests/unit/test_svgmap.c */
    snprintf(buf, size, "%s", __FILE__);
    for (int up = 0; up < 3; up++) {
        char *sl = strrchr(buf, '/');
        assert_non_null(sl);
        *sl = '\0';
    }
    size_t len = strlen(buf);
    snprintf(buf + len, size - len, "/%s", rel);
    return buf;
}

/* The planted group of each demo item (demo/cafe-groups.csv), to name clusters the way a
 * user would: after the group most of their members come from. */
static char *demo_group(const char *item) {
    char path[1024], line[512];
    FILE *fp = fopen(repo_path("demo/cafe-groups.csv", path, sizeof path), "r");
    assert_non_null(fp);
    char *found = NULL;
    while (!found && fgets(line, sizeof line, fp)) {
        line[strcspn(line, "\r\n")] = '\0';
        char *comma = strrchr(line, ',');
        if (!comma) {
            continue;
        }
        *comma = '\0';
        char *nm = line;
        if (nm[0] == '"') { /* "Apple strudel, warm" */
            nm++;
            nm[strlen(nm) - 1] = '\0';
        }
        if (strcmp(nm, item) == 0) {
            found = dupstr(comma + 1);
        }
    }
    fclose(fp);
    return found ? found : dupstr("none");
}

/* demo/cafe-orders.csv through the library with the default selection of `pairmap pairs`,
 * clustered by Louvain (seed 1, 10 restarts). */
static void demo_data(mapdata *md) {
    memset(md, 0, sizeof *md);
    char path[1024];
    pm_input_opts_t io;
    pm_input_opts_init(&io);
    io.category_col = "category";
    pm_table_t *t = NULL;
    pm_incidence_t *inc = NULL;
    pm_pairs_t *pp = NULL;
    pm_edges_t *e = NULL;
    pm_diag_t dg;
    assert_int_equal(
        pm_input_read(repo_path("demo/cafe-orders.csv", path, sizeof path), &io, &t, &dg), PM_OK);
    assert_int_equal(pm_incidence_build(t, &inc, &dg), PM_OK);
    pm_select_opts_t so;
    pm_select_opts_init(&so);
    pm_assoc_opts_t ao;
    pm_assoc_opts_init(&ao);
    ao.sign = so.sign;
    ao.min_count = so.min_count;
    ao.threads = 1;
    assert_int_equal(pm_assoc_run(inc, &ao, &pp, &dg), PM_OK);
    assert_int_equal(pm_select_run(pp, inc, &so, &e, &dg), PM_OK);
    size_t n = md->n = inc->n_items, m = md->m = e->n;
    md->name = calloc(n, sizeof *md->name);
    md->cat = calloc(n, sizeof *md->cat);
    md->share = calloc(n, sizeof *md->share);
    md->strength = calloc(n, sizeof *md->strength);
    md->cluster = calloc(n, sizeof *md->cluster);
    md->ea = calloc(m, sizeof *md->ea);
    md->eb = calloc(m, sizeof *md->eb);
    md->weight = calloc(m, sizeof *md->weight);
    for (size_t i = 0; i < n; i++) {
        md->name[i] = dupstr(inc->name[i]);
        md->cat[i] = inc->category[i] ? dupstr(inc->category[i]) : NULL;
        md->share[i] = pm_incidence_share(inc, i);
    }
    for (size_t k = 0; k < m; k++) {
        md->ea[k] = pp->a[e->idx[k]];
        md->eb[k] = pp->b[e->idx[k]];
        md->weight[k] = e->weight[k];
    }
    pm_cluster_opts_t co;
    pm_cluster_opts_init(&co);
    co.names = (const char *const *)md->name;
    co.share = md->share;
    pm_clusters_t *cl = NULL;
    assert_int_equal(pm_cluster_louvain(n, m, md->ea, md->eb, md->weight, &co, &cl, &dg), PM_OK);
    md->nc = cl->n_clusters;
    md->cname = calloc(md->nc, sizeof *md->cname);
    for (size_t i = 0; i < n; i++) {
        md->cluster[i] = (int)cl->cluster[i];
        md->strength[i] = cl->strength[i];
    }
    for (size_t c = 0; c < md->nc; c++) {
        /* the most common planted group among the members; singletons keep their name */
        size_t best = 0;
        char *bname = NULL;
        for (size_t j = cl->first[c]; j < cl->first[c + 1]; j++) {
            char *g = demo_group(md->name[cl->members[j]]);
            size_t cnt = 0;
            for (size_t h = cl->first[c]; h < cl->first[c + 1]; h++) {
                char *g2 = demo_group(md->name[cl->members[h]]);
                cnt += strcmp(g, g2) == 0;
                free(g2);
            }
            if (cnt > best && strcmp(g, "none") != 0) {
                best = cnt;
                free(bname);
                bname = g;
            } else {
                free(g);
            }
        }
        md->cname[c] = bname ? bname : dupstr(md->name[cl->members[cl->first[c]]]);
    }
    snprintf(md->thresholds, sizeof md->thresholds, "pairs seen %u+ times, q \xe2\x89\xa4 %g",
             so.min_count, so.max_q);
    md->d.respondents = inc->N;
    pm_clusters_free(cl);
    pm_edges_free(e);
    pm_pairs_free(pp);
    pm_incidence_free(inc);
    pm_table_free(t);
    mapdata_wire(md);
}

/* Invented scale data: n items in planted clusters of falling size plus loose items, dense
 * positive edges inside clusters, a few weak ones and some negative ones between. */
static void synth_data(mapdata *md, size_t n, size_t nc, uint64_t seed) {
    static const char *const a[] = {"Spiced", "Smoked", "Roasted", "Frozen",  "Sweet",
                                    "Sour",   "Herbal", "Salted",  "Toasted", "Fresh"};
    static const char *const b[] = {"pear tart",  "oat bar",    "lemon cake", "bean stew",
                                    "corn bread", "berry tea",  "plum jam",   "nut crunch",
                                    "beet salad", "ginger ale", "rice bowl",  "leek pie"};
    memset(md, 0, sizeof *md);
    unit_rng r = {seed};
    md->n = n;
    md->nc = nc;
    md->name = calloc(n, sizeof *md->name);
    md->share = calloc(n, sizeof *md->share);
    md->strength = calloc(n, sizeof *md->strength);
    md->cluster = calloc(n, sizeof *md->cluster);
    md->cname = calloc(nc, sizeof *md->cname);
    size_t cap = n * 40;
    md->ea = calloc(cap, sizeof *md->ea);
    md->eb = calloc(cap, sizeof *md->eb);
    md->weight = calloc(cap, sizeof *md->weight);
    /* cluster sizes: planted clusters of falling size fill 85% of the items, the rest are
     * singletons (clusters nc - singles + 1 .. nc) */
    size_t singles = n / 7, planted = nc - singles, left = n - singles;
    size_t *sz = calloc(nc, sizeof *sz);
    for (size_t c = 0; c < planted; c++) {
        sz[c] = 2 + (left - 2 * planted) * 2 * (planted - c) / (planted * (planted + 1));
    }
    size_t used = 0;
    for (size_t c = 0; c < planted; c++) {
        used += sz[c];
    }
    sz[0] += left - used;
    for (size_t c = planted; c < nc; c++) {
        sz[c] = 1;
    }
    size_t i = 0;
    for (size_t c = 0; c < nc; c++) {
        char nm[64];
        snprintf(nm, sizeof nm, "Group %zu", c + 1);
        md->cname[c] = dupstr(nm);
        for (size_t j = 0; j < sz[c]; j++, i++) {
            char it[96];
            snprintf(it, sizeof it, "%s %s %zu", a[unit_below(&r, 10)], b[unit_below(&r, 12)],
                     i + 1);
            md->name[i] = dupstr(it);
            md->cluster[i] = (int)c + 1;
            md->share[i] = 0.004 + 0.25 * pow(unit_unif(&r), 3);
        }
    }
    free(sz);
    size_t m = 0;
    for (size_t x = 0; x < n && m + n < cap; x++) {
        for (size_t y = x + 1; y < n && m < cap; y++) {
            double u = unit_unif(&r);
            int same = md->cluster[x] == md->cluster[y];
            if (same && md->cluster[x] <= (int)planted && u < 0.35) {
                md->weight[m] = 0.08 + 0.4 * unit_unif(&r);
            } else if (!same && u < 0.002) {
                md->weight[m] = 0.03 + 0.05 * unit_unif(&r);
            } else if (!same && u < 0.0026) {
                md->weight[m] = -(0.03 + 0.05 * unit_unif(&r));
            } else {
                continue;
            }
            md->ea[m] = (uint32_t)x;
            md->eb[m] = (uint32_t)y;
            if (md->weight[m] > 0) {
                md->strength[x] += md->weight[m];
                md->strength[y] += md->weight[m];
            }
            m++;
        }
    }
    md->m = m;
    md->d.respondents = 250000;
    snprintf(md->thresholds, sizeof md->thresholds, "invented data");
    mapdata_wire(md);
}

/* ==== helpers =============================================================================== */
static char *render(const pm_svg_data_t *d, const pm_svg_opts_t *o, pm_svg_stats_t *st,
                    size_t *len) {
    char *buf = NULL;
    size_t n = 0;
    FILE *fp = open_memstream(&buf, &n);
    assert_non_null(fp);
    pm_diag_t dg;
    pm_diag_clear(&dg);
    pm_err_t rc = pm_svg_write(fp, d, o, st, &dg);
    if (rc) {
        fprintf(stderr, "pm_svg_write: %s\n", dg.msg);
    }
    assert_int_equal(rc, PM_OK);
    assert_int_equal(fclose(fp), 0);
    /* pm_svg_render (for an SVG inline in a page) gives the same document in a buffer */
    char *mem = NULL;
    size_t mn = 1;
    pm_svg_stats_t st2;
    assert_int_equal(pm_svg_render(d, o, &mem, &mn, &st2, &dg), PM_OK);
    assert_int_equal(mn, n);
    assert_memory_equal(mem, buf, n);
    assert_int_equal(mem[mn], '\0');
    free(mem);
    if (len) {
        *len = n;
    }
    return buf;
}

static size_t count_of(const char *hay, const char *needle) {
    size_t c = 0;
    for (const char *p = strstr(hay, needle); p; p = strstr(p + 1, needle)) {
        c++;
    }
    return c;
}

/* Well-formed UTF-8 with no character XML 1.0 forbids (controls other than TAB/LF/CR). */
static int valid_xml_utf8(const char *s, size_t n) {
    const unsigned char *p = (const unsigned char *)s;
    for (size_t i = 0; i < n;) {
        unsigned c = p[i];
        if (c < 0x80) {
            if (c < 0x20 && c != '\t' && c != '\n' && c != '\r') {
                return 0;
            }
            i++;
            continue;
        }
        size_t len = c >= 0xF0 ? 4 : c >= 0xE0 ? 3 : c >= 0xC2 ? 2 : 0;
        if (len == 0 || c > 0xF4 || i + len > n) {
            return 0;
        }
        uint32_t v = c & (0x7F >> len);
        for (size_t k = 1; k < len; k++) {
            if ((p[i + k] & 0xC0) != 0x80) {
                return 0;
            }
            v = (v << 6) | (p[i + k] & 0x3F);
        }
        if ((len == 3 && v < 0x800) || (len == 4 && v < 0x10000) || v > 0x10FFFF ||
            (v >= 0xD800 && v <= 0xDFFF) || v == 0xFFFE || v == 0xFFFF) {
            return 0;
        }
        i += len;
    }
    return 1;
}

/* The value of attribute attr of the element starting at el (up to its '>'), into out. */
static int attr_of(const char *el, const char *attr, char *out, size_t size) {
    const char *end = strchr(el, '>');
    char key[64];
    snprintf(key, sizeof key, " %s=\"", attr);
    const char *p = strstr(el, key);
    if (!p || (end && p > end)) {
        return 0;
    }
    p += strlen(key);
    const char *q = strchr(p, '"');
    size_t n = (size_t)(q - p) < size - 1 ? (size_t)(q - p) : size - 1;
    memcpy(out, p, n);
    out[n] = '\0';
    return 1;
}

/* ==== tests ================================================================================= */
static void test_svgmap_write_demo(void **state) {
    (void)state;
    mapdata md;
    demo_data(&md);
    pm_svg_opts_t o;
    pm_svg_opts_init(&o);
    pm_svg_stats_t st;
    size_t len;
    char *svg = render(&md.d, &o, &st, &len);
    /* standalone SVG 1.1 */
    assert_true(strncmp(svg, "<?xml version=\"1.0\" encoding=\"UTF-8\"", 36) == 0);
    assert_non_null(strstr(svg, "<svg xmlns=\"http://www.w3.org/2000/svg\" version=\"1.1\""));
    assert_non_null(strstr(svg, "width=\"1600\" height=\"1100\" viewBox=\"0 0 1600 1100\""));
    assert_non_null(strstr(svg, "font-family=\"&apos;DejaVu Sans&apos;"));
    assert_true(valid_xml_utf8(svg, len));
    /* the demo's 44 items fit the default canvas: all drawn, every kept edge drawn */
    assert_int_equal(md.n, 44);
    assert_int_equal(st.drawn, 44);
    assert_int_equal(st.left_out, 0);
    assert_int_equal(st.edges_drawn, md.m);
    assert_int_equal(count_of(svg, "<circle class=\"node\""), 44);
    assert_int_equal(count_of(svg, "<text class=\"label\""), 44);
    assert_int_equal(count_of(svg, "<line class=\"edge"), md.m);
    /* each multi-member cluster has a region and a cluster label */
    size_t multi = 0;
    for (size_t c = 1; c <= md.nc; c++) {
        size_t k = 0;
        for (size_t i = 0; i < md.n; i++) {
            k += md.cluster[i] == (int)c;
        }
        multi += k >= 2;
    }
    assert_true(multi >= 5);
    assert_int_equal(count_of(svg, "<path class=\"region\""), multi);
    assert_true(count_of(svg, "<text class=\"cluster-label\"") >= multi);
    /* every circle's data-share is the item's share and radii grow with it */
    double prev_r = -1;
    for (const char *p = strstr(svg, "<circle class=\"node\""); p;
         p = strstr(p + 1, "<circle class=\"node\"")) {
        char v[64];
        assert_true(attr_of(p, "data-share", v, sizeof v));
        double sh = strtod(v, NULL);
        assert_true(attr_of(p, "r", v, sizeof v));
        double r = strtod(v, NULL);
        /* drawn largest first: radii never grow along the file */
        if (prev_r >= 0) {
            assert_true(r <= prev_r + 1e-9);
        }
        prev_r = r;
        assert_true(sh > 0 && sh < 1);
    }
    free(svg);
    mapdata_free(&md);
}

static void test_svgmap_write_deterministic(void **state) {
    (void)state;
    mapdata md;
    demo_data(&md);
    pm_svg_opts_t o;
    pm_svg_opts_init(&o);
    pm_svg_stats_t s1, s2;
    size_t l1, l2;
    char *a = render(&md.d, &o, &s1, &l1);
    char *b = render(&md.d, &o, &s2, &l2);
    assert_int_equal(l1, l2);
    assert_memory_equal(a, b, l1);
    free(b);
    o.seed = 7; /* another seed, another layout: the seed reaches the layout */
    b = render(&md.d, &o, &s2, &l2);
    assert_true(l1 != l2 || memcmp(a, b, l1) != 0);
    free(a);
    free(b);
    mapdata_free(&md);
}

static void test_svgmap_write_escaping(void **state) {
    (void)state;
    /* markup characters, an invalid byte (Latin-1 e-acute), a control character, a name with
     * surrounding and inner runs of spaces, a non-ASCII name */
    const char *names[5] = {"Fish & <chips>", "Caf\xe9 \"cr\xc3\xa8me\" 'x'", "tab\there\x01",
                            "  wide   gap  ", "R\xc3\xb6sti"};
    const double share[5] = {0.3, 0.2, 0.1, 0.05, 0.02};
    const int cluster[5] = {1, 1, 1, 2, 2};
    const uint32_t ea[3] = {0, 0, 3}, eb[3] = {1, 2, 4};
    const double w[3] = {0.4, 0.2, 0.3};
    const char *cn[2] = {"A & B", "<none>"};
    pm_svg_data_t d;
    memset(&d, 0, sizeof d);
    d.n_nodes = 5;
    d.name = names;
    d.share = share;
    d.cluster = cluster;
    d.n_edges = 3;
    d.ea = ea;
    d.eb = eb;
    d.weight = w;
    d.n_clusters = 2;
    d.cluster_name = cn;
    d.respondents = 1;
    d.thresholds = "q < 0.05 & count >= 5";
    pm_svg_opts_t o;
    pm_svg_opts_init(&o);
    o.title = "Tom's <map> & \"more\"";
    pm_svg_stats_t st;
    size_t len;
    char *svg = render(&d, &o, &st, &len);
    assert_true(valid_xml_utf8(svg, len));
    assert_non_null(strstr(svg, "Fish &amp; &lt;chips&gt;"));
    assert_non_null(strstr(svg, "Caf\xef\xbf\xbd &quot;cr\xc3\xa8me&quot; &apos;x&apos;"));
    /* the one XML rule (text.h): a tab is white space (one line: a space), the control
     * U+0001 is not allowed in XML 1.0 (section 2.2) and becomes U+FFFD */
    assert_non_null(strstr(svg, "data-item=\"tab here\xef\xbf\xbd\""));
    assert_non_null(strstr(svg, "data-item=\"wide gap\""));
    assert_non_null(strstr(svg, "Tom&apos;s &lt;map&gt; &amp; &quot;more&quot;"));
    assert_non_null(strstr(svg, "A &amp; B"));
    assert_null(strstr(svg, "<none>"));
    assert_non_null(strstr(svg, "1 respondent \xc2\xb7"));
    assert_int_equal(st.drawn, 5);
    assert_int_equal(st.edges_drawn, 3);
    free(svg);
}

/* --draw N: N items at most; chosen by structure so that every sizeable cluster is shown. */
static void test_svgmap_write_draw_limit(void **state) {
    (void)state;
    mapdata md;
    synth_data(&md, 300, 60, 11);
    size_t sizeable = 0;
    size_t *size = calloc(md.nc + 1, sizeof *size);
    for (size_t i = 0; i < md.n; i++) {
        size[md.cluster[i]]++;
    }
    for (size_t c = 1; c <= md.nc; c++) {
        sizeable += size[c] >= 3;
    }
    assert_true(sizeable >= 10);
    pm_svg_opts_t o;
    pm_svg_opts_init(&o);
    o.draw = sizeable + 5;
    pm_svg_stats_t st;
    char *svg = render(&md.d, &o, &st, NULL);
    assert_true(st.drawn <= o.draw);
    assert_int_equal(st.drawn + st.left_out, md.n);
    assert_int_equal(st.drawn, o.draw); /* a handful of items fits the default canvas */
    for (size_t c = 1; c <= md.nc; c++) {
        if (size[c] < 3) {
            continue;
        }
        const char *key = "<circle class=\"node\"";
        int shown = 0;
        for (const char *p = strstr(svg, key); p && !shown; p = strstr(p + 1, key)) {
            char v[32];
            assert_true(attr_of(p, "data-cluster", v, sizeof v));
            shown = (size_t)atoi(v) == c;
        }
        assert_true(shown);
    }
    free(svg);
    free(size);
    mapdata_free(&md);
}

/* A crowded canvas: the picture draws fewer items rather than overlap, and says so. */
static void test_svgmap_write_crowded(void **state) {
    (void)state;
    mapdata md;
    synth_data(&md, 400, 70, 5);
    pm_svg_opts_t o;
    pm_svg_opts_init(&o);
    o.width = 800;
    o.height = 600;
    o.draw = 400;
    pm_svg_stats_t st;
    char *svg = render(&md.d, &o, &st, NULL);
    assert_true(st.drawn > 10);
    assert_true(st.drawn < 400);
    assert_int_equal(st.left_out, 400 - st.drawn);
    assert_int_equal(count_of(svg, "<text class=\"label\""), st.drawn);
    char expect[64];
    snprintf(expect, sizeof expect, "%zu of 400 items drawn", st.drawn);
    assert_non_null(strstr(svg, expect));
    free(svg);
    /* the default budget on the default canvas also leaves items out here */
    pm_svg_opts_init(&o);
    svg = render(&md.d, &o, &st, NULL);
    assert_true(st.drawn > 40 && st.drawn < 400);
    free(svg);
    mapdata_free(&md);
}

/* Negative pairs: dashed in dark grey and explained in the legend, whether flagged by a
 * negative weight or by the negative array (a lift stays positive for substitutes). */
static void test_svgmap_write_negative(void **state) {
    (void)state;
    const char *names[4] = {"Tea", "Coffee", "Milk", "Sugar"};
    const double share[4] = {0.3, 0.4, 0.2, 0.1};
    const int cluster[4] = {1, 1, 2, 2};
    const uint32_t ea[3] = {0, 2, 0}, eb[3] = {2, 3, 1};
    double w[3] = {0.3, 0.2, -0.25};
    pm_svg_data_t d;
    memset(&d, 0, sizeof d);
    d.n_nodes = 4;
    d.name = names;
    d.share = share;
    d.cluster = cluster;
    d.n_edges = 3;
    d.ea = ea;
    d.eb = eb;
    d.weight = w;
    d.n_clusters = 2;
    d.respondents = 500;
    pm_svg_stats_t st;
    char *svg = render(&d, NULL, &st, NULL);
    assert_int_equal(count_of(svg, "<line class=\"edge negative\""), 1);
    assert_int_equal(count_of(svg, "<line class=\"edge\""), 2);
    const char *neg = strstr(svg, "<line class=\"edge negative\"");
    char v[64];
    assert_true(attr_of(neg, "stroke-dasharray", v, sizeof v));
    assert_true(attr_of(neg, "data-a", v, sizeof v));
    assert_string_equal(v, "Tea");
    /* issue 16 point 4: the dashed key is worded as a hint (it may wrap after "than") */
    assert_non_null(strstr(svg, "dashed: chosen together less than"));
    assert_non_null(strstr(svg, "Cluster 1")); /* default cluster names */
    free(svg);
    /* lift-like weights, all positive, with the negative flags */
    const unsigned char flag[3] = {0, 0, 1};
    w[2] = 0.6;
    d.negative = flag;
    d.measure = "lift";
    svg = render(&d, NULL, &st, NULL);
    neg = strstr(svg, "<line class=\"edge negative\"");
    assert_non_null(neg);
    assert_true(attr_of(neg, "data-b", v, sizeof v));
    assert_string_equal(v, "Coffee");
    assert_non_null(strstr(svg, "Line width: lift"));
    free(svg);
    /* no negative pair drawn: no dashes, no legend line for them */
    w[2] = 0.1;
    d.negative = NULL;
    svg = render(&d, NULL, &st, NULL);
    assert_null(strstr(svg, "stroke-dasharray"));
    assert_null(strstr(svg, "chosen instead of each other"));
    free(svg);
}

/* --color-by category: the fill follows the category, the legend lists the categories. */
static void test_svgmap_write_category(void **state) {
    (void)state;
    mapdata md;
    demo_data(&md);
    pm_svg_opts_t o;
    pm_svg_opts_init(&o);
    o.color_by_category = 1;
    pm_svg_stats_t st;
    char *svg = render(&md.d, &o, &st, NULL);
    assert_non_null(strstr(svg, ">Categories</text>"));
    /* one fill per category, different fills for different categories */
    char fills[16][16], cats[16][64];
    size_t nf = 0;
    const char *key = "<circle class=\"node\"";
    for (const char *p = strstr(svg, key); p; p = strstr(p + 1, key)) {
        char f[16], ct[64];
        assert_true(attr_of(p, "fill", f, sizeof f));
        assert_true(attr_of(p, "data-category", ct, sizeof ct));
        size_t j = 0;
        while (j < nf && strcmp(cats[j], ct) != 0) {
            j++;
        }
        if (j == nf) {
            assert_true(nf < 16);
            strcpy(cats[nf], ct);
            strcpy(fills[nf], f);
            nf++;
        }
        assert_string_equal(fills[j], f);
    }
    assert_int_equal(nf, 6); /* the demo's six categories */
    for (size_t a = 0; a < nf; a++) {
        for (size_t b = a + 1; b < nf; b++) {
            assert_string_not_equal(fills[a], fills[b]);
        }
    }
    free(svg);
    mapdata_free(&md);
}

static void test_svgmap_write_empty(void **state) {
    (void)state;
    pm_svg_data_t d;
    memset(&d, 0, sizeof d);
    pm_svg_stats_t st;
    size_t len;
    char *svg = render(&d, NULL, &st, &len);
    assert_int_equal(st.drawn, 0);
    assert_int_equal(st.left_out, 0);
    assert_non_null(strstr(svg, "No item to draw"));
    assert_non_null(strstr(svg, "</svg>\n"));
    free(svg);
}

static void test_svgmap_write_errors(void **state) {
    (void)state;
    const char *names[3] = {"a", "b", "c"};
    const double share[3] = {0.5, 0.2, 0.1};
    int cluster[3] = {1, 1, 3};
    const uint32_t ea[1] = {0}, eb[1] = {1};
    const double w[1] = {0.3};
    pm_svg_data_t d;
    memset(&d, 0, sizeof d);
    d.n_nodes = 3;
    d.name = names;
    d.share = share;
    d.cluster = cluster;
    d.n_edges = 1;
    d.ea = ea;
    d.eb = eb;
    d.weight = w;
    d.n_clusters = 2;
    pm_diag_t dg;
    pm_svg_stats_t st;
    FILE *fp = tmpfile();
    assert_non_null(fp);
    /* cluster 3 of 2 */
    assert_int_equal(pm_svg_write(fp, &d, NULL, &st, &dg), PM_EINTERNAL);
    assert_non_null(strstr(dg.msg, "cluster 3"));
    cluster[2] = 2;
    /* canvas too small */
    pm_svg_opts_t o;
    pm_svg_opts_init(&o);
    o.width = 120;
    assert_int_equal(pm_svg_write(fp, &d, &o, &st, &dg), PM_EUSAGE);
    assert_non_null(strstr(dg.msg, "canvas"));
    /* an edge to a missing item */
    const uint32_t bad[1] = {7};
    d.eb = bad;
    assert_int_equal(pm_svg_write(fp, &d, NULL, &st, &dg), PM_EINTERNAL);
    d.eb = eb;
    assert_int_equal(ftell(fp), 0); /* nothing written by the failures */
    fclose(fp);
    /* a full device: PM_EIO */
    fp = fopen("/dev/full", "w");
    if (fp) {
        assert_int_equal(pm_svg_write(fp, &d, NULL, &st, &dg), PM_EIO);
        assert_non_null(strstr(dg.msg, "cannot write"));
        fclose(fp);
    }
    /* every allocation failing in turn: PM_ENOMEM and nothing written, until it succeeds */
    pm_err_t rc = PM_ENOMEM;
    long n;
    for (n = 1; n < 5000 && rc == PM_ENOMEM; n++) {
        fp = tmpfile();
        assert_non_null(fp);
        pm_i_alloc_fail_after(n);
        rc = pm_svg_write(fp, &d, NULL, &st, &dg);
        pm_i_alloc_fail_after(0);
        if (rc == PM_ENOMEM) {
            assert_int_equal(ftell(fp), 0);
        }
        fclose(fp);
    }
    assert_int_equal(rc, PM_OK);
    assert_true(n > 20);
}

/* ==== tool mode ============================================================================= */
static void write_csvs(const char *base, const mapdata *md) {
    char path[1200];
    snprintf(path, sizeof path, "%s.nodes.csv", base);
    FILE *fp = fopen(path, "w");
    assert_non_null(fp);
    fputs("item,cluster,share\n", fp);
    for (size_t i = 0; i < md->n; i++) {
        pm_write_csv_field(fp, md->name[i], PM_CSV_RAW);
        fprintf(fp, ",%d,", md->cluster[i]);
        pm_write_number(fp, md->share[i]);
        fputc('\n', fp);
    }
    assert_int_equal(fclose(fp), 0);
    snprintf(path, sizeof path, "%s.edges.csv", base);
    fp = fopen(path, "w");
    assert_non_null(fp);
    fputs("item_a,item_b,weight\n", fp);
    for (size_t k = 0; k < md->m; k++) {
        pm_write_csv_field(fp, md->name[md->ea[k]], PM_CSV_RAW);
        fputc(',', fp);
        pm_write_csv_field(fp, md->name[md->eb[k]], PM_CSV_RAW);
        fputc(',', fp);
        pm_write_number(fp, md->weight[k]);
        fputc('\n', fp);
    }
    assert_int_equal(fclose(fp), 0);
}

static void write_one(const char *dir, const char *name, const mapdata *md,
                      const pm_svg_opts_t *o) {
    char base[1024], path[1100];
    snprintf(base, sizeof base, "%s/%s", dir, name);
    snprintf(path, sizeof path, "%s.svg", base);
    FILE *fp = fopen(path, "w");
    assert_non_null(fp);
    pm_svg_stats_t st;
    pm_diag_t dg;
    pm_diag_clear(&dg);
    pm_err_t rc = pm_svg_write(fp, &md->d, o, &st, &dg);
    if (rc) {
        fprintf(stderr, "test_svgmap: %s: %s\n", path, dg.msg);
    }
    assert_int_equal(rc, PM_OK);
    assert_int_equal(fclose(fp), 0);
    write_csvs(base, md);
    printf("%s: %zu drawn, %zu left out, %zu edges\n", path, st.drawn, st.left_out, st.edges_drawn);
}

static void tool_write(void **state) {
    const char *dir = *state;
    mapdata md;
    pm_svg_opts_t o;
    demo_data(&md);
    pm_svg_opts_init(&o);
    o.title = "Mountain caf\xc3\xa9: what guests order together";
    write_one(dir, "demo", &md, &o);
    o.color_by_category = 1;
    write_one(dir, "demo-category", &md, &o);
    o.color_by_category = 0;
    o.width = 800;
    o.height = 560;
    write_one(dir, "demo-small", &md, &o);
    mapdata_free(&md);
    synth_data(&md, 400, 70, 5);
    pm_svg_opts_init(&o);
    write_one(dir, "scale", &md, &o);
    o.width = 800;
    o.height = 600;
    o.draw = 400;
    write_one(dir, "scale-small", &md, &o);
    mapdata_free(&md);
}

int main(int argc, char **argv) {
    const char *out = getenv("PM_SVG_OUT");
    if (argc > 2 && strcmp(argv[1], "--write") == 0) {
        out = argv[2];
    }
    pm_init();
    if (out && *out) {
        const struct CMUnitTest tool[] = {cmocka_unit_test_prestate(tool_write, (void *)out)};
        return cmocka_run_group_tests_name("svgmap-write", tool, NULL, NULL);
    }
    if (argc > 1) {
        cmocka_set_test_filter(argv[1]);
    }
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_svgmap_write_demo),
        cmocka_unit_test(test_svgmap_write_deterministic),
        cmocka_unit_test(test_svgmap_write_escaping),
        cmocka_unit_test(test_svgmap_write_draw_limit),
        cmocka_unit_test(test_svgmap_write_crowded),
        cmocka_unit_test(test_svgmap_write_negative),
        cmocka_unit_test(test_svgmap_write_category),
        cmocka_unit_test(test_svgmap_write_empty),
        cmocka_unit_test(test_svgmap_write_errors),
    };
    return cmocka_run_group_tests_name("svgmap", tests, NULL, NULL);
}
