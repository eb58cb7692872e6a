/* The SVG map: picks the items to draw, lays them out afresh (Fruchterman-Reingold from
 * network.c, then our own cluster packing and overlap removal), places every label beside its
 * node without overlaps, and writes a standalone SVG 1.1 file with regions, edges, nodes,
 * labels, title, legend and size key. No plotting library; deterministic for a given seed. */
#include "pairmap/svgmap.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "pairmap/network.h"
#include "util.h"

/* ==== constants ============================================================================= */
/* Text is measured conservatively, per code point (char_em): at least 0.6 font sizes (em)
 * each, more for the glyphs DejaVu Sans draws wider (capitals 0.8, m and w 1.0, digits 0.65,
 * the ellipsis 1.0, East Asian wide characters 1.2), bold text BOLD times that; a line's box
 * runs from ASCENT font sizes above the baseline to DESCENT below it. Its lowercase letters
 * are about 0.55 em on average (from memory), so real text ends inside its box.
 * tests/ref/svg_geometry.py measures the same way, so its overlap check is the one used here;
 * the padding CLEAR around every box is extra. */
#define BOLD (7.0 / 6.0)
#define ASCENT 0.95
#define DESCENT 0.25
#define CLEAR 1.5 /* px kept free around label boxes and circles */

#define DEFAULT_W 1600
#define DEFAULT_H 1100
#define MIN_W 400
#define MIN_H 300
#define QUOTA 3    /* members per sizeable cluster taken before the strongest remaining */
#define SIZEABLE 3 /* a cluster of this many members or more is shown */
#define N_PAL 7
#define MAX_ATTEMPTS 40
#define PI 3.14159265358979323846

/* Colour-blind-safe palette of Okabe, M. & Ito, K. (2008), "Color Universal Design (CUD):
 * how to make figures and presentations that are friendly to colorblind people" (from
 * memory). Their eight colours are used in an order of our own; their black is kept for
 * outlines and text, never as a fill. TEXT is a darker shade of each for cluster names on
 * white, TINT the opacity of a cluster's region (yellow needs more to show at all). */
static const char *const PAL_FILL[N_PAL] = {"#0072B2", "#E69F00", "#009E73", "#CC79A7",
                                            "#56B4E9", "#D55E00", "#F0E442"};
static const char *const PAL_TEXT[N_PAL] = {"#00568A", "#8A5F00", "#006B4E", "#8E4470",
                                            "#2A6F96", "#A04600", "#6F6A1C"};
static const double PAL_TINT[N_PAL] = {0.11, 0.15, 0.12, 0.15, 0.16, 0.11, 0.26};
static const char GREY_FILL[] = "#A3A3A3";
static const char GREY_TEXT[] = "#555555";
static const double GREY_TINT = 0.13;
static const char INK[] = "#1B1B1B";
static const char FONT_STACK[] = "'DejaVu Sans', 'Bitstream Vera Sans', Verdana, sans-serif";
static const char ELLIPSIS[] = "\xe2\x80\xa6";

/* ==== output buffer ========================================================================= */
/* The whole picture is built in memory and written with one fwrite, so a failed run writes
 * nothing half-done and every write error is seen in one place. */
typedef struct {
    char *p;
    size_t n, cap;
    int oom;
} sbuf;

/* b may be NULL: the legend measures itself by writing to nowhere first. */
static void sb_add(sbuf *b, const char *s, size_t len) {
    if (!b || b->oom) {
        return;
    }
    if (pm_i_grow((void **)&b->p, &b->cap, b->n + len + 1, 1)) {
        b->oom = 1;
        return;
    }
    memcpy(b->p + b->n, s, len);
    b->n += len;
    b->p[b->n] = '\0';
}

static void sb_puts(sbuf *b, const char *s) {
    sb_add(b, s, strlen(s));
}

static void sb_int(sbuf *b, long long v) {
    char t[32];
    int k = snprintf(t, sizeof t, "%lld", v);
    sb_add(b, t, (size_t)k);
}

/* Fixed-point with at most two decimals, written by hand so that no locale can turn the
 * decimal point into a comma inside the SVG; never "-0". */
static void sb_num(sbuf *b, double v) {
    if (!isfinite(v)) {
        v = 0;
    }
    long long q = llround(v * 100.0);
    char t[40];
    int k = 0;
    if (q < 0) {
        t[k++] = '-';
        q = -q;
    }
    k += snprintf(t + k, sizeof t - (size_t)k, "%lld", q / 100);
    long long f = q % 100;
    if (f) {
        t[k++] = '.';
        t[k++] = (char)('0' + f / 10);
        if (f % 10) {
            t[k++] = (char)('0' + f % 10);
        }
    }
    sb_add(b, t, (size_t)k);
}

static void sb_double(sbuf *b, double v) {
    char t[40];
    int k = pm_i_fmt_double(t, sizeof t, v);
    sb_add(b, t, (size_t)k);
}

/* XML-escaped text; s is already clean UTF-8 (see clean_text). */
static void sb_esc(sbuf *b, const char *s) {
    const char *run = s;
    for (; *s; s++) {
        const char *e = NULL;
        switch (*s) {
        case '&':
            e = "&amp;";
            break;
        case '<':
            e = "&lt;";
            break;
        case '>':
            e = "&gt;";
            break;
        case '"':
            e = "&quot;";
            break;
        case '\'':
            e = "&apos;";
            break;
        default:
            break;
        }
        if (e) {
            sb_add(b, run, (size_t)(s - run));
            sb_puts(b, e);
            run = s + 1;
        }
    }
    sb_add(b, run, (size_t)(s - run));
}

/* name="value" with a leading space; value escaped. */
static void sb_attr(sbuf *b, const char *name, const char *value) {
    sb_puts(b, " ");
    sb_puts(b, name);
    sb_puts(b, "=\"");
    sb_esc(b, value);
    sb_puts(b, "\"");
}

static void sb_attr_num(sbuf *b, const char *name, double v) {
    sb_puts(b, " ");
    sb_puts(b, name);
    sb_puts(b, "=\"");
    sb_num(b, v);
    sb_puts(b, "\"");
}

/* ==== UTF-8 ================================================================================= */
/* Decodes one code point at s (NUL-terminated); returns its length in bytes, 0 when the bytes
 * are not well-formed UTF-8 (overlong forms, surrogates and values above U+10FFFF included). */
static size_t utf8_decode(const unsigned char *s, uint32_t *cp) {
    unsigned c = s[0];
    if (c < 0x80) {
        *cp = c;
        return 1;
    }
    size_t len;
    uint32_t v, min;
    if (c >= 0xC2 && c <= 0xDF) {
        len = 2;
        v = c & 0x1F;
        min = 0x80;
    } else if (c >= 0xE0 && c <= 0xEF) {
        len = 3;
        v = c & 0x0F;
        min = 0x800;
    } else if (c >= 0xF0 && c <= 0xF4) {
        len = 4;
        v = c & 0x07;
        min = 0x10000;
    } else {
        return 0;
    }
    for (size_t i = 1; i < len; i++) {
        if ((s[i] & 0xC0) != 0x80) {
            return 0;
        }
        v = (v << 6) | (s[i] & 0x3F);
    }
    if (v < min || v > 0x10FFFF || (v >= 0xD800 && v <= 0xDFFF)) {
        return 0;
    }
    *cp = v;
    return len;
}

/* A copy of s that is safe in XML 1.0 text: ill-formed bytes and non-characters become
 * U+FFFD, control characters a space; runs of white space collapse to one space and the ends
 * are trimmed. NULL gives "". Returns NULL when out of memory. */
static char *clean_text(const char *s) {
    if (!s) {
        s = "";
    }
    size_t n = strlen(s);
    char *out = pm_i_malloc(3 * n + 1, 1); /* one bad byte grows to 3 */
    if (!out) {
        return NULL;
    }
    size_t k = 0;
    int space = 1; /* drop leading spaces */
    const unsigned char *p = (const unsigned char *)s;
    while (*p) {
        uint32_t cp = 0;
        size_t len = utf8_decode(p, &cp);
        if (len == 0) {
            memcpy(out + k, "\xef\xbf\xbd", 3);
            k += 3;
            p++;
            space = 0;
            continue;
        }
        if (cp < 0x20 || cp == 0x7F || (cp >= 0x80 && cp <= 0x9F) || cp == ' ') {
            if (!space) {
                out[k++] = ' ';
            }
            space = 1;
            p += len;
            continue;
        }
        if (cp == 0xFFFE || cp == 0xFFFF || (cp >= 0xFDD0 && cp <= 0xFDEF)) {
            memcpy(out + k, "\xef\xbf\xbd", 3);
            k += 3;
        } else {
            memcpy(out + k, p, len);
            k += len;
        }
        space = 0;
        p += len;
    }
    while (k > 0 && out[k - 1] == ' ') {
        k--;
    }
    out[k] = '\0';
    return out;
}

/* East Asian wide and emoji code points count as two character widths. */
static int wide(uint32_t cp) {
    return (cp >= 0x1100 && cp <= 0x115F) || (cp >= 0x2E80 && cp <= 0xA4CF) ||
           (cp >= 0xAC00 && cp <= 0xD7A3) || (cp >= 0xF900 && cp <= 0xFAFF) ||
           (cp >= 0xFE30 && cp <= 0xFE4F) || (cp >= 0xFF00 && cp <= 0xFF60) ||
           (cp >= 0xFFE0 && cp <= 0xFFE6) || (cp >= 0x1F300 && cp <= 0x1FAFF) ||
           (cp >= 0x20000 && cp <= 0x3FFFD);
}

/* Width of one code point in font sizes (see the note on text at the top). */
static double char_em(uint32_t cp) {
    if (wide(cp)) {
        return 1.2;
    }
    if (cp == 'm' || cp == 'w' || cp == 'M' || cp == 'W' || cp == '%' || cp == '@' ||
        cp == 0x2026) {
        return 1.0;
    }
    if ((cp >= 'A' && cp <= 'Z') || cp == '&' || cp == '#') {
        return 0.8;
    }
    if (cp >= '0' && cp <= '9') {
        return 0.65;
    }
    return 0.6;
}

/* Width of the first len bytes of clean text s, in font sizes. */
static double prefix_units(const char *s, size_t len) {
    double u = 0;
    const unsigned char *p = (const unsigned char *)s;
    size_t i = 0;
    while (i < len && p[i]) {
        uint32_t cp = 0;
        size_t l = utf8_decode(p + i, &cp);
        u += char_em(cp);
        i += l ? l : 1; /* l is never 0 on clean text */
    }
    return u;
}

/* Width of clean text in font sizes (regular weight). */
static double text_units(const char *s) {
    return prefix_units(s, strlen(s));
}

static double text_width(const char *s, double fs, int bold) {
    return text_units(s) * fs * (bold ? BOLD : 1.0);
}

static char *concat(const char *s, size_t len, const char *tail) {
    size_t tl = strlen(tail);
    char *c = pm_i_malloc(len + tl + 1, 1);
    if (c) {
        memcpy(c, s, len);
        memcpy(c + len, tail, tl + 1);
    }
    return c;
}

/* A copy of clean text s shortened to at most max_units font sizes wide and ending in an
 * ellipsis; a plain copy when it fits. Cuts where a reader expects it: after a whole part of
 * a list separated by middle dots whenever one part fits (then it ends in a middle dot and
 * the ellipsis), else after a whole word when that keeps at least 60% of the room, else after
 * the last code point that fits. NULL when out of memory or when nothing fits. */
static char *shorten(const char *s, double max_units) {
    size_t n = strlen(s);
    if (text_units(s) <= max_units) {
        return concat(s, n, "");
    }
    static const char dot_tail[] = " \xc2\xb7 \xe2\x80\xa6", word_tail[] = " \xe2\x80\xa6";
    double dot_u = text_units(dot_tail), word_u = text_units(word_tail), ell_u = char_em(0x2026);
    if (max_units < ell_u + 0.6) {
        return NULL;
    }
    static const char dot[] = " \xc2\xb7 "; /* " · " */
    size_t best = 0;
    for (const char *q = strstr(s, dot); q; q = strstr(q + 1, dot)) {
        size_t len = (size_t)(q - s);
        if (prefix_units(s, len) + dot_u <= max_units) {
            best = len;
        }
    }
    if (best > 0) { /* never half a part of a list */
        return concat(s, best, dot_tail);
    }
    best = 0;
    for (size_t i = 1; i < n; i++) {
        if (s[i] == ' ' && s[i - 1] != ' ') {
            size_t len = i;
            while (len > 0 && (s[len - 1] == ',' || s[len - 1] == '-' || s[len - 1] == ':')) {
                len--;
            }
            if (len > 0 && prefix_units(s, len) + word_u <= max_units) {
                best = len;
            }
        }
    }
    if (best > 0 && prefix_units(s, best) + word_u >= 0.6 * max_units) {
        return concat(s, best, word_tail);
    }
    const unsigned char *p = (const unsigned char *)s;
    double u = 0;
    size_t cut = 0;
    while (p[cut]) {
        uint32_t cp = 0;
        size_t len = utf8_decode(p + cut, &cp);
        double cu = char_em(cp);
        if (u + cu > max_units - ell_u) {
            break;
        }
        u += cu;
        cut += len ? len : 1;
    }
    while (cut > 0 && (s[cut - 1] == ' ' || s[cut - 1] == ',' || s[cut - 1] == '-')) {
        cut--;
    }
    if (cut == 0) {
        return NULL;
    }
    return concat(s, cut, ELLIPSIS);
}

/* ==== geometry ============================================================================== */
typedef struct {
    double x0, y0, x1, y1;
} box_t;

static int box_hit(const box_t *a, const box_t *b, double clear) {
    return a->x0 < b->x1 + clear && b->x0 < a->x1 + clear && a->y0 < b->y1 + clear &&
           b->y0 < a->y1 + clear;
}

static int circle_hit(double cx, double cy, double r, const box_t *b, double clear) {
    double nx = cx < b->x0 ? b->x0 : (cx > b->x1 ? b->x1 : cx);
    double ny = cy < b->y0 ? b->y0 : (cy > b->y1 ? b->y1 : cy);
    double dx = cx - nx, dy = cy - ny;
    double rr = r + clear;
    return dx * dx + dy * dy < rr * rr;
}

static int box_inside(const box_t *b, const box_t *area) {
    return b->x0 >= area->x0 && b->x1 <= area->x1 && b->y0 >= area->y0 && b->y1 <= area->y1;
}

/* Does the segment (x0,y0)-(x1,y1) cross box b? Liang-Barsky clipping. */
static int segment_hits_box(double x0, double y0, double x1, double y1, const box_t *b) {
    double t0 = 0, t1 = 1, dx = x1 - x0, dy = y1 - y0;
    const double p[4] = {-dx, dx, -dy, dy};
    const double q[4] = {x0 - b->x0, b->x1 - x0, y0 - b->y0, b->y1 - y0};
    for (int i = 0; i < 4; i++) {
        if (p[i] == 0) {
            if (q[i] < 0) {
                return 0;
            }
        } else {
            double t = q[i] / p[i];
            if (p[i] < 0) {
                if (t > t1) {
                    return 0;
                }
                if (t > t0) {
                    t0 = t;
                }
            } else {
                if (t < t0) {
                    return 0;
                }
                if (t < t1) {
                    t1 = t;
                }
            }
        }
    }
    return 1;
}

typedef struct {
    double x, y;
} pt_t;

static int cmp_pt(const void *pa, const void *pb) {
    const pt_t *a = pa, *b = pb;
    if (a->x != b->x) {
        return a->x < b->x ? -1 : 1;
    }
    if (a->y != b->y) {
        return a->y < b->y ? -1 : 1;
    }
    return 0;
}

static double cross(pt_t o, pt_t a, pt_t b) {
    return (a.x - o.x) * (b.y - o.y) - (a.y - o.y) * (b.x - o.x);
}

/* Convex hull of p[0..n) by Andrew's monotone chain; writes it to h (room for n + 1 points)
 * and returns its size. p is sorted in place. */
static size_t convex_hull(pt_t *p, size_t n, pt_t *h) {
    if (n < 3) {
        memcpy(h, p, n * sizeof *p);
        return n;
    }
    qsort(p, n, sizeof *p, cmp_pt);
    size_t k = 0;
    for (size_t i = 0; i < n; i++) {
        while (k >= 2 && cross(h[k - 2], h[k - 1], p[i]) <= 0) {
            k--;
        }
        h[k++] = p[i];
    }
    for (size_t i = n - 1, t = k + 1; i-- > 0;) {
        while (k >= t && cross(h[k - 2], h[k - 1], p[i]) <= 0) {
            k--;
        }
        h[k++] = p[i];
    }
    return k - 1;
}

static int inside_convex(const pt_t *h, size_t n, double x, double y) {
    if (n < 3) {
        return 0;
    }
    pt_t q = {x, y};
    for (size_t i = 0; i < n; i++) {
        if (cross(h[i], h[(i + 1) % n], q) < 0) {
            return 0;
        }
    }
    return 1;
}

/* ==== the drawing's state =================================================================== */
typedef struct {
    char *text; /* owned */
    double w, fs;
    int bold;
    box_t b;
    double x, y; /* text position (x by anchor, y the baseline) */
    int anchor;  /* 0 start, 1 middle, 2 end */
    int placed;
    int strained; /* placed two lines out, or shortened to find a place */
    int ring;     /* 0 beside the node, 1 or 2 lines further out (drawn with a leader) */
} lab_t;

typedef struct {
    int cluster;
    size_t n, first; /* members: pic.gm[first .. first + n), drawn indices */
    double cx, cy, R;
    pt_t *hull;
    size_t nh;
    int region; /* a tinted region and a cluster label are drawn */
    lab_t lab;
} group_t;

/* One attempt at a picture of nd items. */
typedef struct {
    size_t nd;
    size_t *item; /* drawn k -> item, ascending */
    double *x, *y, *r;
    size_t *grp;  /* drawn k -> group */
    size_t *prio; /* drawn indices in priority order */
    lab_t *lab;   /* per drawn k */
    size_t ng;
    group_t *g;
    size_t *gm;
    size_t ne;
    size_t *edge;      /* into d's edges, both ends drawn */
    uint32_t *ea, *eb; /* drawn indices of the ends */
    size_t fails, cfails, strained;
    int max_ring; /* label candidates: 0 beside the node only, 1 and 2 further out */
} pic_t;

typedef struct {
    const pm_svg_data_t *d;
    const pm_svg_opts_t *o;
    pm_diag_t *diag;
    int W, H;
    double s; /* size relative to the default canvas */
    double fs_label, fs_title, fs_sub, fs_leg, fs_small, fs_cluster;
    box_t map, legend;
    double rk;   /* node radius = rk * sqrt(share) */
    double rmin; /* smallest radius drawn */
    size_t n;
    char **name; /* clean names */
    char **cat;  /* clean categories, NULL entries for none */
    double *share, *strength;
    int *colour;    /* per item: palette index, -1 grey */
    int *ccolour;   /* per cluster (0-based): palette index, -1 grey */
    size_t *csize;  /* per cluster: members */
    size_t *corder; /* all items grouped by cluster, by strength within: cluster c is */
    size_t *cfirst; /* corder[cfirst[c] .. cfirst[c+1]) */
    size_t *order;  /* priority order of all items */
    size_t *rank;   /* item -> position in order */
    int *negative;  /* per edge */
    size_t ncat;
    const char **cats; /* distinct categories by drawn count (category colouring), borrowed */
    int *catcolour;
    char *title, *thresholds, *measure;
    char **cname; /* clean cluster names */
} ctx_t;

static double item_r(const ctx_t *c, size_t i) {
    double r = c->rk * sqrt(c->share[i]);
    return r < c->rmin ? c->rmin : r;
}

static void lab_clear(lab_t *l) {
    pm_i_free(l->text);
    memset(l, 0, sizeof *l);
}

static void pic_free(pic_t *p) {
    if (!p) {
        return;
    }
    if (p->lab) {
        for (size_t k = 0; k < p->nd; k++) {
            lab_clear(&p->lab[k]);
        }
    }
    if (p->g) {
        for (size_t g = 0; g < p->ng; g++) {
            pm_i_free(p->g[g].hull);
            lab_clear(&p->g[g].lab);
        }
    }
    pm_i_free(p->item);
    pm_i_free(p->x);
    pm_i_free(p->y);
    pm_i_free(p->r);
    pm_i_free(p->grp);
    pm_i_free(p->prio);
    pm_i_free(p->lab);
    pm_i_free(p->g);
    pm_i_free(p->gm);
    pm_i_free(p->edge);
    pm_i_free(p->ea);
    pm_i_free(p->eb);
    memset(p, 0, sizeof *p);
}

static void ctx_free(ctx_t *c) {
    for (size_t i = 0; c->name && i < c->n; i++) {
        pm_i_free(c->name[i]);
    }
    for (size_t i = 0; c->cat && i < c->n; i++) {
        pm_i_free(c->cat[i]);
    }
    for (size_t i = 0; c->cname && i < c->d->n_clusters; i++) {
        pm_i_free(c->cname[i]);
    }
    pm_i_free(c->name);
    pm_i_free(c->cat);
    pm_i_free(c->cname);
    pm_i_free(c->share);
    pm_i_free(c->strength);
    pm_i_free(c->colour);
    pm_i_free(c->ccolour);
    pm_i_free(c->csize);
    pm_i_free(c->corder);
    pm_i_free(c->cfirst);
    pm_i_free(c->order);
    pm_i_free(c->rank);
    pm_i_free(c->negative);
    pm_i_free(c->cats);
    pm_i_free(c->catcolour);
    pm_i_free(c->title);
    pm_i_free(c->thresholds);
    pm_i_free(c->measure);
}

/* ==== preparation: clean text, sizes, colours, priority ==================================== */
/* Sort records carry their keys, so comparators need no context (qsort has none). */
typedef struct {
    int cluster;
    double strength, share;
    const char *name;
    size_t i;
} member_key;

/* Cluster, then strength descending, share descending, name by bytes, index. */
static int cmp_member(const void *pa, const void *pb) {
    const member_key *a = pa, *b = pb;
    if (a->cluster != b->cluster) {
        return a->cluster < b->cluster ? -1 : 1;
    }
    if (a->strength != b->strength) {
        return a->strength > b->strength ? -1 : 1;
    }
    if (a->share != b->share) {
        return a->share > b->share ? -1 : 1;
    }
    int k = pm_i_bytecmp(a->name, b->name);
    if (k) {
        return k;
    }
    return a->i < b->i ? -1 : (a->i > b->i);
}

typedef struct {
    unsigned long long size; /* members of cluster k */
    size_t k, t;             /* the t-th member of cluster k */
} slot_key;

/* Slots by size / (t + 1) descending, compared exactly in integers; ties by cluster, then t. */
static int cmp_slot(const void *pa, const void *pb) {
    const slot_key *a = pa, *b = pb;
    unsigned long long l = a->size * (b->t + 1), r = b->size * (a->t + 1);
    if (l != r) {
        return l > r ? -1 : 1;
    }
    if (a->k != b->k) {
        return a->k < b->k ? -1 : 1;
    }
    return a->t < b->t ? -1 : (a->t > b->t);
}

typedef struct {
    double v;
    size_t i;
} num_key;

static int cmp_num_up(const void *pa, const void *pb) {
    const num_key *a = pa, *b = pb;
    if (a->v != b->v) {
        return a->v < b->v ? -1 : 1;
    }
    return a->i < b->i ? -1 : (a->i > b->i);
}

static int cmp_num_down(const void *pa, const void *pb) {
    const num_key *a = pa, *b = pb;
    if (a->v != b->v) {
        return a->v > b->v ? -1 : 1;
    }
    return a->i < b->i ? -1 : (a->i > b->i);
}

static int cmp_size(const void *pa, const void *pb) {
    size_t a = *(const size_t *)pa, b = *(const size_t *)pb;
    return a < b ? -1 : (a > b);
}

static pm_err_t nomem(ctx_t *c) {
    return pm_diag_set(c->diag, PM_ENOMEM, NULL, 0, "out of memory while drawing the map");
}

static pm_err_t check_data(ctx_t *c) {
    const pm_svg_data_t *d = c->d;
    if (d->n_nodes && (!d->name || !d->share || !d->cluster)) {
        return pm_diag_set(c->diag, PM_EINTERNAL, NULL, 0,
                           "map data lacks names, shares or clusters");
    }
    if (d->n_edges && (!d->ea || !d->eb || !d->weight)) {
        return pm_diag_set(c->diag, PM_EINTERNAL, NULL, 0, "map data lacks edge arrays");
    }
    if (d->n_nodes > UINT32_MAX) {
        return pm_diag_set(c->diag, PM_EINTERNAL, NULL, 0, "too many items to draw");
    }
    for (size_t i = 0; i < d->n_nodes; i++) {
        if (d->cluster[i] < 1 || (size_t)d->cluster[i] > d->n_clusters) {
            return pm_diag_set(c->diag, PM_EINTERNAL, NULL, 0,
                               "map item %zu has cluster %d, not in 1..%zu", i, d->cluster[i],
                               d->n_clusters);
        }
    }
    for (size_t k = 0; k < d->n_edges; k++) {
        if (d->ea[k] >= d->n_nodes || d->eb[k] >= d->n_nodes) {
            return pm_diag_set(c->diag, PM_EINTERNAL, NULL, 0,
                               "map edge %zu names an item outside 0..%zu", k, d->n_nodes);
        }
    }
    return PM_OK;
}

static double clampd(double v, double lo, double hi) {
    return v < lo ? lo : (v > hi ? hi : v);
}

static void set_canvas(ctx_t *c) {
    const pm_svg_opts_t *o = c->o;
    c->W = o->width > 0 ? o->width : DEFAULT_W;
    c->H = o->height > 0 ? o->height : DEFAULT_H;
    double s = fmin((double)c->W / DEFAULT_W, (double)c->H / DEFAULT_H);
    c->s = clampd(s, 0.5, 1.0); /* larger canvases hold more items, not larger type */
    s = c->s;
    /* 13 px at 1600 px wide prints at about 2.3 mm on A4 landscape; never below 11 px */
    c->fs_label = fmax(11, round(13 * s));
    c->fs_title = fmax(16, round(26 * s));
    c->fs_sub = fmax(11, round(14 * s));
    c->fs_leg = fmax(11, round(13 * s));
    c->fs_small = fmax(11, round(12 * s));
    c->fs_cluster = fmax(12, round(15 * s));
    double m = fmax(12, round(22 * s));
    double title_base = m + ASCENT * c->fs_title;
    double sub_base = title_base + 0.5 * c->fs_title + ASCENT * c->fs_sub + 2;
    double top = sub_base + DESCENT * c->fs_sub + fmax(8, 14 * s);
    double lw = clampd(round(0.22 * c->W), fmin(230, round(0.36 * c->W)), 400);
    c->map = (box_t){m, top, c->W - lw - m, c->H - m};
    c->legend = (box_t){c->W - lw, top, c->W - m, c->H - m};
    c->rmin = 1.5;
}

/* The priority order of items to draw (see prepare). */
static pm_err_t make_order(ctx_t *c, int cluster_major) {
    size_t n = c->n, nc = c->d->n_clusters;
    slot_key *slot = pm_i_malloc(n ? n : 1, sizeof *slot);
    if (!slot) {
        return nomem(c);
    }
    size_t no = 0, ns = 0;
    if (cluster_major) {
        /* a budget too small for every sizeable cluster: the largest clusters (1 = largest)
         * with QUOTA members each, rather than one member of many */
        for (size_t k = 0; k < nc; k++) {
            for (size_t round = 0; round < QUOTA; round++) {
                if (c->csize[k] >= SIZEABLE && c->csize[k] > round) {
                    c->order[no++] = c->corder[c->cfirst[k] + round];
                }
            }
        }
    } else {
        for (size_t round = 0; round < QUOTA; round++) {
            for (size_t k = 0; k < nc; k++) {
                if (c->csize[k] >= SIZEABLE && c->csize[k] > round) {
                    c->order[no++] = c->corder[c->cfirst[k] + round];
                }
            }
        }
    }
    for (size_t k = 0; k < nc; k++) {
        size_t t0 = c->csize[k] >= SIZEABLE ? (c->csize[k] < QUOTA ? c->csize[k] : QUOTA) : 0;
        for (size_t t = t0; t < c->csize[k]; t++) {
            slot[ns++] = (slot_key){c->csize[k], k, t};
        }
    }
    qsort(slot, ns, sizeof *slot, cmp_slot);
    for (size_t j = 0; j < ns; j++) {
        c->order[no++] = c->corder[c->cfirst[slot[j].k] + slot[j].t];
    }
    pm_i_free(slot);
    for (size_t i = 0; i < n; i++) {
        c->rank[c->order[i]] = i;
    }
    return PM_OK;
}

static pm_err_t prepare(ctx_t *c) {
    const pm_svg_data_t *d = c->d;
    size_t n = c->n = d->n_nodes, nc = d->n_clusters, m = d->n_edges;
    c->name = pm_i_calloc(n, sizeof *c->name);
    c->cat = pm_i_calloc(n, sizeof *c->cat);
    c->cname = pm_i_calloc(nc, sizeof *c->cname);
    c->share = pm_i_calloc(n, sizeof *c->share);
    c->strength = pm_i_calloc(n, sizeof *c->strength);
    c->colour = pm_i_calloc(n, sizeof *c->colour);
    c->ccolour = pm_i_calloc(nc, sizeof *c->ccolour);
    c->csize = pm_i_calloc(nc, sizeof *c->csize);
    c->corder = pm_i_calloc(n, sizeof *c->corder);
    c->cfirst = pm_i_calloc(nc + 1, sizeof *c->cfirst);
    c->order = pm_i_calloc(n, sizeof *c->order);
    c->rank = pm_i_calloc(n, sizeof *c->rank);
    c->negative = pm_i_calloc(m, sizeof *c->negative);
    c->cats = pm_i_calloc(n, sizeof *c->cats);
    c->catcolour = pm_i_calloc(n, sizeof *c->catcolour);
    c->title = clean_text(c->o->title ? c->o->title : "Which items go together");
    c->thresholds = clean_text(d->thresholds);
    c->measure = clean_text(d->measure ? d->measure : "edge weight");
    if (!c->name || !c->cat || !c->cname || !c->share || !c->strength || !c->colour ||
        !c->ccolour || !c->csize || !c->corder || !c->cfirst || !c->order || !c->rank ||
        !c->negative || !c->cats || !c->catcolour || !c->title || !c->thresholds || !c->measure) {
        return nomem(c);
    }
    for (size_t i = 0; i < n; i++) {
        c->name[i] = clean_text(d->name[i]);
        if (!c->name[i]) {
            return nomem(c);
        }
        if (d->category && d->category[i] && d->category[i][0]) {
            c->cat[i] = clean_text(d->category[i]);
            if (!c->cat[i]) {
                return nomem(c);
            }
            if (!c->cat[i][0]) {
                pm_i_free(c->cat[i]);
                c->cat[i] = NULL;
            }
        }
        double sh = d->share[i];
        c->share[i] = isfinite(sh) && sh > 0 ? fmin(sh, 1.0) : 0.0;
        c->csize[d->cluster[i] - 1]++;
    }
    for (size_t k = 0; k < nc; k++) {
        char def[48];
        snprintf(def, sizeof def, "Cluster %zu", k + 1);
        const char *nm = d->cluster_name && d->cluster_name[k] ? d->cluster_name[k] : def;
        c->cname[k] = clean_text(nm);
        if (!c->cname[k]) {
            return nomem(c);
        }
        if (!c->cname[k][0]) {
            pm_i_free(c->cname[k]);
            if (!(c->cname[k] = clean_text(def))) {
                return nomem(c);
            }
        }
    }
    for (size_t k = 0; k < m; k++) {
        double w = d->weight[k];
        c->negative[k] = d->negative ? d->negative[k] != 0 : (isfinite(w) && w < 0);
    }
    if (d->strength) {
        for (size_t i = 0; i < n; i++) {
            c->strength[i] = isfinite(d->strength[i]) ? d->strength[i] : 0;
        }
    } else {
        for (size_t k = 0; k < m; k++) {
            double w = d->weight[k];
            if (!c->negative[k] && isfinite(w) && w > 0) {
                c->strength[d->ea[k]] += w;
                c->strength[d->eb[k]] += w;
            }
        }
    }
    /* palette: clusters of two or more members in cluster order (1 = largest) */
    int next = 0;
    for (size_t k = 0; k < nc; k++) {
        c->ccolour[k] = (c->csize[k] >= 2 && next < N_PAL) ? next++ : -1;
    }
    /* members of each cluster by strength */
    member_key *mk = pm_i_malloc(n ? n : 1, sizeof *mk);
    if (!mk) {
        return nomem(c);
    }
    for (size_t i = 0; i < n; i++) {
        mk[i] = (member_key){d->cluster[i], c->strength[i], c->share[i], c->name[i], i};
    }
    qsort(mk, n, sizeof *mk, cmp_member);
    for (size_t i = 0; i < n; i++) {
        c->corder[i] = mk[i].i;
    }
    pm_i_free(mk);
    for (size_t k = 0, i = 0; k < nc; k++) {
        c->cfirst[k] = i;
        while (i < n && (size_t)d->cluster[c->corder[i]] == k + 1) {
            i++;
        }
        c->cfirst[k + 1] = i;
    }
    /* priority: QUOTA rounds over the sizeable clusters (each cluster's most connected
     * members first, so every sizeable cluster is shown), then the remaining members cluster
     * by cluster in proportion to cluster size (D'Hondt's highest averages: the next slot
     * goes to the cluster with the largest size / (taken + 1)), each cluster giving its
     * strongest remaining member. By strength alone the densest cluster would take every
     * remaining slot; items on their own (clusters of one) come last. */
    pm_err_t orc = make_order(c, 0);
    if (orc) {
        return orc;
    }
    /* node size: the largest share of all items gets the largest radius */
    double smax = 0;
    for (size_t i = 0; i < n; i++) {
        smax = fmax(smax, c->share[i]);
    }
    c->rk = smax > 0 ? 22.0 * c->s / sqrt(smax) : 0;
    return PM_OK;
}

/* Items the canvas holds with room for their labels: each gets a share of the map area a few
 * times its label box (measured on the names of the leading items). */
static size_t auto_budget(const ctx_t *c) {
    size_t n = c->n, probe = n < 60 ? n : 60;
    if (n == 0) {
        return 0;
    }
    double u = 0;
    for (size_t k = 0; k < probe; k++) {
        u += fmin(text_units(c->name[c->order[k]]), 18);
    }
    u = probe ? u / (double)probe : 10;
    double lw = u * c->fs_label + 2 * 12 * c->s + 8;
    double lh = (ASCENT + DESCENT) * c->fs_label;
    double area = (c->map.x1 - c->map.x0) * (c->map.y1 - c->map.y0);
    size_t b = (size_t)(area / (lw * lh * 4.5));
    if (b < 1) {
        b = 1;
    }
    return b < n ? b : n;
}

/* ==== layout ================================================================================ */
/* Picks the first nd items of the priority order and builds the drawn subgraph. */
static pm_err_t pic_init(ctx_t *c, pic_t *p, size_t nd) {
    const pm_svg_data_t *d = c->d;
    memset(p, 0, sizeof *p);
    p->nd = nd;
    size_t a = nd ? nd : 1;
    p->item = pm_i_malloc(a, sizeof *p->item);
    p->x = pm_i_calloc(a, sizeof *p->x);
    p->y = pm_i_calloc(a, sizeof *p->y);
    p->r = pm_i_calloc(a, sizeof *p->r);
    p->grp = pm_i_calloc(a, sizeof *p->grp);
    p->prio = pm_i_calloc(a, sizeof *p->prio);
    p->lab = pm_i_calloc(a, sizeof *p->lab);
    p->gm = pm_i_calloc(a, sizeof *p->gm);
    long *pos = pm_i_malloc(c->n ? c->n : 1, sizeof *pos);
    if (!p->item || !p->x || !p->y || !p->r || !p->grp || !p->prio || !p->lab || !p->gm || !pos) {
        pm_i_free(pos);
        return nomem(c);
    }
    memcpy(p->item, c->order, nd * sizeof *p->item);
    qsort(p->item, nd, sizeof *p->item, cmp_size);
    for (size_t i = 0; i < c->n; i++) {
        pos[i] = -1;
    }
    for (size_t k = 0; k < nd; k++) {
        pos[p->item[k]] = (long)k;
        p->r[k] = item_r(c, p->item[k]);
    }
    for (size_t j = 0; j < nd; j++) {
        p->prio[j] = (size_t)pos[c->order[j]];
    }
    size_t ne = 0;
    for (size_t k = 0; k < d->n_edges; k++) {
        if (pos[d->ea[k]] >= 0 && pos[d->eb[k]] >= 0 && d->ea[k] != d->eb[k]) {
            ne++;
        }
    }
    p->edge = pm_i_malloc(ne ? ne : 1, sizeof *p->edge);
    p->ea = pm_i_malloc(ne ? ne : 1, sizeof *p->ea);
    p->eb = pm_i_malloc(ne ? ne : 1, sizeof *p->eb);
    if (!p->edge || !p->ea || !p->eb) {
        pm_i_free(pos);
        return nomem(c);
    }
    for (size_t k = 0; k < d->n_edges; k++) {
        if (pos[d->ea[k]] >= 0 && pos[d->eb[k]] >= 0 && d->ea[k] != d->eb[k]) {
            p->edge[p->ne] = k;
            p->ea[p->ne] = (uint32_t)pos[d->ea[k]];
            p->eb[p->ne] = (uint32_t)pos[d->eb[k]];
            p->ne++;
        }
    }
    /* groups: the drawn members of each cluster, in cluster order; members by priority */
    size_t ng = 0;
    int last = 0;
    size_t *byc = pm_i_malloc(a, sizeof *byc);
    if (!byc) {
        pm_i_free(pos);
        return nomem(c);
    }
    size_t nb = 0;
    for (size_t k = 0; k < d->n_clusters; k++) {
        for (size_t j = c->cfirst[k]; j < c->cfirst[k + 1]; j++) {
            long q = pos[c->corder[j]];
            if (q >= 0) {
                byc[nb++] = (size_t)q;
            }
        }
    }
    for (size_t j = 0; j < nb; j++) {
        int cl = d->cluster[p->item[byc[j]]];
        if (j == 0 || cl != last) {
            ng++;
            last = cl;
        }
    }
    p->g = pm_i_calloc(ng ? ng : 1, sizeof *p->g);
    if (!p->g) {
        pm_i_free(pos);
        pm_i_free(byc);
        return nomem(c);
    }
    p->ng = ng;
    size_t g = 0;
    for (size_t j = 0; j < nb; j++) {
        int cl = d->cluster[p->item[byc[j]]];
        if (j > 0 && cl != p->g[g].cluster) {
            g++;
        }
        if (p->g[g].n == 0) {
            p->g[g].cluster = cl;
            p->g[g].first = j;
        }
        p->g[g].n++;
        p->gm[j] = byc[j];
        p->grp[byc[j]] = g;
    }
    for (g = 0; g < ng; g++) {
        int col = c->ccolour[p->g[g].cluster - 1];
        p->g[g].region = p->g[g].n >= 2 || col >= 0;
    }
    pm_i_free(pos);
    pm_i_free(byc);
    return PM_OK;
}

/* Space one item needs in the picture: its node and label box with some air around. */
static double footprint(const ctx_t *c, const pic_t *p, size_t k) {
    double lh = (ASCENT + DESCENT) * c->fs_label;
    double lw = fmin(text_units(c->name[p->item[k]]), 17) * c->fs_label;
    double w = 2 * p->r[k] + lw + 0.8 * lh;
    double h = fmax(2 * p->r[k], lh) + 1.4 * lh;
    return w * h;
}

static void clamp_node(const ctx_t *c, pic_t *p, size_t k) {
    double pad = p->r[k] + 2;
    const box_t *m = &c->map;
    if (m->x1 - m->x0 > 2 * pad) {
        p->x[k] = clampd(p->x[k], m->x0 + pad, m->x1 - pad);
    } else {
        p->x[k] = 0.5 * (m->x0 + m->x1);
    }
    if (m->y1 - m->y0 > 2 * pad) {
        p->y[k] = clampd(p->y[k], m->y0 + pad, m->y1 - pad);
    } else {
        p->y[k] = 0.5 * (m->y0 + m->y1);
    }
}

static double hull_pad(const ctx_t *c) {
    return fmax(7, 10 * c->s);
}

/* Pushes apart nodes whose circles (plus room for a label line) overlap; nodes of different
 * clusters keep room for both regions' padding between them. */
static void separate_nodes(const ctx_t *c, pic_t *p, int iters) {
    double lh = (ASCENT + DESCENT) * c->fs_label;
    double pad = 0.5 * lh, xgap = 2 * hull_pad(c) + 6;
    for (int it = 0; it < iters; it++) {
        int moved = 0;
        for (size_t a = 0; a < p->nd; a++) {
            for (size_t b = a + 1; b < p->nd; b++) {
                double need = p->r[a] + p->r[b] + 2 * pad;
                if (p->grp[a] != p->grp[b]) {
                    need = fmax(need, p->r[a] + p->r[b] + xgap);
                }
                double dx = p->x[b] - p->x[a], dy = p->y[b] - p->y[a];
                double dd = dx * dx + dy * dy;
                if (dd >= need * need) {
                    continue;
                }
                double dist = sqrt(dd);
                double push = 0.5 * (need - dist) * 1.02;
                if (dist < 1e-6) { /* coincident: a fixed direction by index */
                    double ang = 2.399963229728653 * (double)(a + b);
                    dx = cos(ang);
                    dy = sin(ang);
                } else {
                    dx /= dist;
                    dy /= dist;
                }
                p->x[a] -= dx * push;
                p->y[a] -= dy * push;
                p->x[b] += dx * push;
                p->y[b] += dy * push;
                moved = 1;
            }
        }
        for (size_t k = 0; k < p->nd; k++) {
            clamp_node(c, p, k);
        }
        if (!moved) {
            break;
        }
    }
}

/* Separates the groups' discs and stretches their arrangement to fill the map. */
static void pack_groups(const ctx_t *c, pic_t *p) {
    const box_t *m = &c->map;
    double gap = 2 * hull_pad(c) + 0.9 * c->fs_cluster;
    for (int round = 0; round < 4; round++) {
        for (int it = 0; it < 150; it++) {
            int moved = 0;
            for (size_t a = 0; a < p->ng; a++) {
                for (size_t b = a + 1; b < p->ng; b++) {
                    group_t *ga = &p->g[a], *gb = &p->g[b];
                    double need = ga->R + gb->R + gap;
                    double dx = gb->cx - ga->cx, dy = gb->cy - ga->cy;
                    double dd = dx * dx + dy * dy;
                    if (dd >= need * need) {
                        continue;
                    }
                    double dist = sqrt(dd);
                    if (dist < 1e-6) {
                        double ang = 2.399963229728653 * (double)(a + 2 * b + 1);
                        dx = cos(ang);
                        dy = sin(ang);
                    } else {
                        dx /= dist;
                        dy /= dist;
                    }
                    double over = (need - dist) * 0.5;
                    double wa = gb->R * gb->R, wb = ga->R * ga->R, ws = wa + wb;
                    double fa = ws > 0 ? wa / ws : 0.5, fb = 1 - fa;
                    ga->cx -= dx * over * 2 * fa;
                    ga->cy -= dy * over * 2 * fa;
                    gb->cx += dx * over * 2 * fb;
                    gb->cy += dy * over * 2 * fb;
                    moved = 1;
                }
            }
            for (size_t g = 0; g < p->ng; g++) {
                group_t *q = &p->g[g];
                double R = q->R;
                q->cx = (m->x1 - m->x0 > 2 * R) ? clampd(q->cx, m->x0 + R, m->x1 - R)
                                                : 0.5 * (m->x0 + m->x1);
                q->cy = (m->y1 - m->y0 > 2 * R) ? clampd(q->cy, m->y0 + R, m->y1 - R)
                                                : 0.5 * (m->y0 + m->y1);
            }
            if (!moved) {
                break;
            }
        }
        if (round == 3 || p->ng < 2) {
            break;
        }
        /* stretch: the discs' bounding box to the map's, each axis about the map's centre */
        double bx0 = INFINITY, by0 = INFINITY, bx1 = -INFINITY, by1 = -INFINITY;
        for (size_t g = 0; g < p->ng; g++) {
            group_t *q = &p->g[g];
            bx0 = fmin(bx0, q->cx - q->R);
            bx1 = fmax(bx1, q->cx + q->R);
            by0 = fmin(by0, q->cy - q->R);
            by1 = fmax(by1, q->cy + q->R);
        }
        double mx = 0.5 * (m->x0 + m->x1), my = 0.5 * (m->y0 + m->y1);
        double bcx = 0.5 * (bx0 + bx1), bcy = 0.5 * (by0 + by1);
        double fx = (bx1 - bx0) > 1 ? (m->x1 - m->x0) / (bx1 - bx0) : 1;
        double fy = (by1 - by0) > 1 ? (m->y1 - m->y0) / (by1 - by0) : 1;
        fx = clampd(fx, 1, 3);
        fy = clampd(fy, 1, 3);
        for (size_t g = 0; g < p->ng; g++) {
            group_t *q = &p->g[g];
            q->cx = mx + (q->cx - bcx) * fx;
            q->cy = my + (q->cy - bcy) * fy;
        }
    }
}

/* Fruchterman-Reingold on the drawn items, then our post-processing in pixels. The layout
 * graph is the drawn positive edges plus a light "glue" star from each cluster's leading
 * drawn member to the others, so that members whose partners are not drawn stay with their
 * cluster. */
static pm_err_t layout(ctx_t *c, pic_t *p) {
    const pm_svg_data_t *d = c->d;
    size_t nd = p->nd;
    if (nd == 0) {
        return PM_OK;
    }
    size_t cap = p->ne + nd;
    uint32_t *la = pm_i_malloc(cap, sizeof *la), *lb = pm_i_malloc(cap, sizeof *lb);
    double *lw = pm_i_malloc(cap, sizeof *lw), *xy = pm_i_malloc(2 * nd, sizeof *xy);
    if (!la || !lb || !lw || !xy) {
        pm_i_free(la);
        pm_i_free(lb);
        pm_i_free(lw);
        pm_i_free(xy);
        return nomem(c);
    }
    size_t ml = 0;
    double sum = 0;
    for (size_t k = 0; k < p->ne; k++) {
        double w = d->weight[p->edge[k]];
        if (!c->negative[p->edge[k]] && isfinite(w) && w > 0) {
            la[ml] = p->ea[k];
            lb[ml] = p->eb[k];
            lw[ml] = w;
            sum += w;
            ml++;
        }
    }
    double glue = ml ? 0.25 * sum / (double)ml : 1;
    for (size_t g = 0; g < p->ng; g++) {
        const group_t *q = &p->g[g];
        for (size_t j = 1; j < q->n; j++) {
            la[ml] = (uint32_t)p->gm[q->first];
            lb[ml] = (uint32_t)p->gm[q->first + j];
            lw[ml] = glue;
            ml++;
        }
    }
    pm_err_t rc = pm_layout_fr(nd, ml, la, lb, lw, c->o->seed, c->o->iterations, xy, c->diag);
    pm_i_free(la);
    pm_i_free(lb);
    pm_i_free(lw);
    if (rc) {
        pm_i_free(xy);
        if (rc == PM_ENOMEM) {
            return rc;
        }
        char why[sizeof c->diag->msg];
        snprintf(why, sizeof why, "%s", c->diag->msg);
        return pm_diag_set(c->diag, PM_EINTERNAL, NULL, 0, "map layout failed: %s", why);
    }
    /* groups: centroids in layout units, discs in pixels */
    const box_t *m = &c->map;
    double area = (m->x1 - m->x0) * (m->y1 - m->y0), need = 0;
    double gap = 2 * hull_pad(c) + 0.9 * c->fs_cluster;
    for (size_t g = 0; g < p->ng; g++) {
        group_t *q = &p->g[g];
        double fx = 0, fy = 0, foot = 0, rmax = 0;
        for (size_t j = 0; j < q->n; j++) {
            size_t k = p->gm[q->first + j];
            fx += xy[2 * k];
            fy += xy[2 * k + 1];
            foot += footprint(c, p, k);
            rmax = fmax(rmax, p->r[k]);
        }
        q->cx = fx / (double)q->n;
        q->cy = fy / (double)q->n;
        q->R = fmax(sqrt(foot / PI), rmax + 4);
        need += PI * (q->R + 0.5 * gap) * (q->R + 0.5 * gap);
    }
    /* crowded: shrink the discs (labels may then not fit and items are dropped); sparse:
     * grow them a little so that the clusters use the space */
    double f = need > 0 ? sqrt(0.68 * area / need) : 1;
    f = clampd(f, 0.3, 2.2);
    double bx0 = INFINITY, by0 = INFINITY, bx1 = -INFINITY, by1 = -INFINITY, Rmax = 0;
    for (size_t g = 0; g < p->ng; g++) {
        group_t *q = &p->g[g];
        q->R *= f;
        Rmax = fmax(Rmax, q->R);
        bx0 = fmin(bx0, q->cx);
        bx1 = fmax(bx1, q->cx);
        by0 = fmin(by0, q->cy);
        by1 = fmax(by1, q->cy);
    }
    /* keep each group's layout-unit centroid for the member offsets */
    double *gx = pm_i_malloc(p->ng, sizeof *gx), *gy = pm_i_malloc(p->ng, sizeof *gy);
    if (!gx || !gy) {
        pm_i_free(gx);
        pm_i_free(gy);
        pm_i_free(xy);
        return nomem(c);
    }
    double ix0 = m->x0 + Rmax, ix1 = m->x1 - Rmax, iy0 = m->y0 + Rmax, iy1 = m->y1 - Rmax;
    if (ix1 < ix0) {
        ix0 = ix1 = 0.5 * (m->x0 + m->x1);
    }
    if (iy1 < iy0) {
        iy0 = iy1 = 0.5 * (m->y0 + m->y1);
    }
    for (size_t g = 0; g < p->ng; g++) {
        group_t *q = &p->g[g];
        gx[g] = q->cx;
        gy[g] = q->cy;
        q->cx = bx1 > bx0 ? ix0 + (q->cx - bx0) / (bx1 - bx0) * (ix1 - ix0) : 0.5 * (ix0 + ix1);
        q->cy = by1 > by0 ? iy0 + (q->cy - by0) / (by1 - by0) * (iy1 - iy0) : 0.5 * (iy0 + iy1);
    }
    pack_groups(c, p);
    /* members: the group's own layout, scaled into its disc */
    for (size_t g = 0; g < p->ng; g++) {
        group_t *q = &p->g[g];
        double rho = 0, rmax = 0;
        for (size_t j = 0; j < q->n; j++) {
            size_t k = p->gm[q->first + j];
            double dx = xy[2 * k] - gx[g], dy = xy[2 * k + 1] - gy[g];
            rho = fmax(rho, sqrt(dx * dx + dy * dy));
            rmax = fmax(rmax, p->r[k]);
        }
        double sc = rho > 1e-9 ? fmax(q->R - rmax, 0) / rho : 0;
        for (size_t j = 0; j < q->n; j++) {
            size_t k = p->gm[q->first + j];
            p->x[k] = q->cx + (xy[2 * k] - gx[g]) * sc;
            p->y[k] = q->cy + (xy[2 * k + 1] - gy[g]) * sc;
            clamp_node(c, p, k);
        }
    }
    pm_i_free(gx);
    pm_i_free(gy);
    pm_i_free(xy);
    separate_nodes(c, p, 200);
    return PM_OK;
}

/* ==== regions =============================================================================== */
#define HULL_STEPS 24

static pm_err_t make_hulls(ctx_t *c, pic_t *p) {
    double pad = hull_pad(c);
    for (size_t g = 0; g < p->ng; g++) {
        group_t *q = &p->g[g];
        pm_i_free(q->hull);
        q->hull = NULL;
        q->nh = 0;
        if (!q->region) {
            continue;
        }
        size_t np = q->n * HULL_STEPS;
        pt_t *pts = pm_i_malloc(np, sizeof *pts);
        q->hull = pm_i_malloc(np + 1, sizeof *q->hull);
        if (!pts || !q->hull) {
            pm_i_free(pts);
            return nomem(c);
        }
        for (size_t j = 0; j < q->n; j++) {
            size_t k = p->gm[q->first + j];
            double rr = p->r[k] + pad;
            for (int s = 0; s < HULL_STEPS; s++) {
                double a = 2 * PI * s / HULL_STEPS;
                pts[j * HULL_STEPS + (size_t)s] =
                    (pt_t){p->x[k] + rr * cos(a), p->y[k] + rr * sin(a)};
            }
        }
        q->nh = convex_hull(pts, np, q->hull);
        pm_i_free(pts);
    }
    return PM_OK;
}

/* ==== labels ================================================================================ */
typedef struct {
    box_t b;
    double x, y;
    int anchor;
    double cost;
} cand_t;

#define MAX_CANDS 40

static void cand_add(cand_t *cs, int *nc, double x0, double y0, double w, double h, int anchor,
                     double fs, double cost) {
    cand_t *k = &cs[(*nc)++];
    k->b = (box_t){x0, y0, x0 + w, y0 + h};
    k->anchor = anchor;
    k->x = anchor == 0 ? x0 : (anchor == 1 ? x0 + 0.5 * w : x0 + w);
    k->y = y0 + ASCENT * fs;
    k->cost = cost;
}

/* Positions beside a node of radius r at (cx, cy) for a box w x h: right, left, the four
 * diagonals, above and below, then the same one and two lines further out. */
static int node_cands(double cx, double cy, double r, double w, double h, double fs, int max_ring,
                      cand_t *cs) {
    int nc = 0;
    double g0 = 0.25 * h + 2;
    for (int ring = 0; ring <= max_ring && ring < 3; ring++) {
        double d = r + g0 + ring * 0.85 * h, dg = 0.7071 * d, pen = 4.0 * ring;
        cand_add(cs, &nc, cx + d, cy - 0.5 * h, w, h, 0, fs, pen + 0.0);
        cand_add(cs, &nc, cx - d - w, cy - 0.5 * h, w, h, 2, fs, pen + 1.0);
        cand_add(cs, &nc, cx + dg, cy - dg - h, w, h, 0, fs, pen + 1.3);
        cand_add(cs, &nc, cx + dg, cy + dg, w, h, 0, fs, pen + 1.5);
        cand_add(cs, &nc, cx - dg - w, cy - dg - h, w, h, 2, fs, pen + 1.8);
        cand_add(cs, &nc, cx - dg - w, cy + dg, w, h, 2, fs, pen + 2.0);
        cand_add(cs, &nc, cx - 0.5 * w, cy - d - h, w, h, 1, fs, pen + 2.2);
        cand_add(cs, &nc, cx - 0.5 * w, cy + d, w, h, 1, fs, pen + 2.4);
        if (ring == 0) {
            cand_add(cs, &nc, cx + d, cy - 0.95 * h, w, h, 0, fs, 0.6);
            cand_add(cs, &nc, cx + d, cy - 0.05 * h, w, h, 0, fs, 0.7);
            cand_add(cs, &nc, cx - d - w, cy - 0.95 * h, w, h, 2, fs, 1.4);
            cand_add(cs, &nc, cx - d - w, cy - 0.05 * h, w, h, 2, fs, 1.5);
        }
    }
    return nc;
}

/* Hard test: inside the map, clear of every node and every placed label. Returns the number
 * of conflicts (0 = free); *soft gets the edge crossings and foreign regions it covers. */
static int label_conflicts(const ctx_t *c, const pic_t *p, const box_t *b, const lab_t *self,
                           int count_all, double *soft) {
    int bad = 0;
    if (!box_inside(b, &c->map)) {
        bad++;
        if (!count_all) {
            return bad;
        }
    }
    for (size_t j = 0; j < p->nd; j++) {
        if (circle_hit(p->x[j], p->y[j], p->r[j], b, CLEAR)) {
            bad++;
            if (!count_all) {
                return bad;
            }
        }
    }
    for (size_t j = 0; j < p->nd; j++) {
        const lab_t *l = &p->lab[j];
        if (l == self || !l->placed) {
            continue;
        }
        int hit = box_hit(b, &l->b, CLEAR);
        if (!hit && l->ring > 0) { /* its leader */
            hit = segment_hits_box(p->x[j], p->y[j], clampd(p->x[j], l->b.x0, l->b.x1),
                                   clampd(p->y[j], l->b.y0, l->b.y1), b);
        }
        if (hit) {
            bad++;
            if (!count_all) {
                return bad;
            }
        }
    }
    for (size_t g = 0; g < p->ng; g++) {
        const lab_t *l = &p->g[g].lab;
        if (l != self && l->placed && box_hit(b, &l->b, CLEAR)) {
            bad++;
            if (!count_all) {
                return bad;
            }
        }
    }
    if (soft) {
        double s = 0;
        if (p->ne <= 20000) {
            for (size_t k = 0; k < p->ne; k++) {
                if (segment_hits_box(p->x[p->ea[k]], p->y[p->ea[k]], p->x[p->eb[k]], p->y[p->eb[k]],
                                     b)) {
                    s += 1.0;
                }
            }
        }
        *soft = s;
    }
    return bad;
}

/* The best free candidate for label l at node k (or cluster box); 1 when found. */
/* A label set further out gets a leader from its node to the nearest point of its box: the
 * leader must cross no other label and no other node. */
static int leader_blocked(const pic_t *p, size_t k, const box_t *b, const lab_t *self) {
    double tx = clampd(p->x[k], b->x0, b->x1), ty = clampd(p->y[k], b->y0, b->y1);
    double x0 = p->x[k], y0 = p->y[k];
    for (size_t j = 0; j < p->nd; j++) {
        const lab_t *l = &p->lab[j];
        if (l != self && l->placed && segment_hits_box(x0, y0, tx, ty, &l->b)) {
            return 1;
        }
        if (j == k) {
            continue;
        }
        /* distance from node j to the segment */
        double ex = tx - x0, ey = ty - y0, ll = ex * ex + ey * ey;
        double t = ll > 0 ? clampd(((p->x[j] - x0) * ex + (p->y[j] - y0) * ey) / ll, 0, 1) : 0;
        double dx = p->x[j] - x0 - t * ex, dy = p->y[j] - y0 - t * ey;
        if (dx * dx + dy * dy < (p->r[j] + 1) * (p->r[j] + 1)) {
            return 1;
        }
    }
    for (size_t g = 0; g < p->ng; g++) {
        const lab_t *l = &p->g[g].lab;
        if (l->placed && segment_hits_box(x0, y0, tx, ty, &l->b)) {
            return 1;
        }
    }
    return 0;
}

static int best_free(const ctx_t *c, const pic_t *p, const cand_t *cs, int nc, const lab_t *l,
                     int own_group, long node, cand_t *out) {
    int found = 0;
    double best = INFINITY;
    for (int i = 0; i < nc; i++) {
        if (cs[i].cost >= best) {
            continue;
        }
        double soft = 0;
        if (label_conflicts(c, p, &cs[i].b, l, 0, &soft)) {
            continue;
        }
        if (node >= 0 && cs[i].cost >= 3.9 && leader_blocked(p, (size_t)node, &cs[i].b, l)) {
            continue;
        }
        double cost = cs[i].cost + soft;
        if (own_group >= 0) { /* a label inside another cluster's region reads as its member */
            const box_t *b = &cs[i].b;
            const double px[5] = {0.5 * (b->x0 + b->x1), b->x0, b->x1, b->x0, b->x1};
            const double py[5] = {0.5 * (b->y0 + b->y1), b->y0, b->y0, b->y1, b->y1};
            for (size_t g = 0; g < p->ng; g++) {
                if ((int)g == own_group || p->g[g].nh < 3) {
                    continue;
                }
                int in = 0;
                for (int t = 0; t < 5; t++) {
                    in += inside_convex(p->g[g].hull, p->g[g].nh, px[t], py[t]);
                }
                cost += 0.8 * in;
            }
        }
        if (cost < best) {
            best = cost;
            *out = cs[i];
            found = 1;
        }
    }
    return found;
}

static void lab_put(lab_t *l, const cand_t *k) {
    l->b = k->b;
    l->x = k->x;
    l->y = k->y;
    l->anchor = k->anchor;
    l->placed = 1;
    l->strained = k->cost >= 7.9; /* the outermost ring (see node_cands) */
    l->ring = k->cost >= 7.9 ? 2 : (k->cost >= 3.9 ? 1 : 0);
}

static int try_node_label(const ctx_t *c, pic_t *p, size_t k) {
    lab_t *l = &p->lab[k];
    cand_t cs[MAX_CANDS], best = {0};
    double h = (ASCENT + DESCENT) * l->fs;
    int nc = node_cands(p->x[k], p->y[k], p->r[k], l->w, h, l->fs, p->max_ring, cs);
    if (best_free(c, p, cs, nc, l, (int)p->grp[k], (long)k, &best)) {
        lab_put(l, &best);
        return 1;
    }
    return 0;
}

/* Cluster names: above the region, below it, or at its sides. */
static int try_cluster_label(const ctx_t *c, pic_t *p, size_t g) {
    group_t *q = &p->g[g];
    lab_t *l = &q->lab;
    if (q->nh == 0) {
        return 0;
    }
    double x0 = INFINITY, y0 = INFINITY, x1 = -INFINITY, y1 = -INFINITY;
    double topx = 0, botx = 0;
    for (size_t i = 0; i < q->nh; i++) {
        if (q->hull[i].y < y0) {
            y0 = q->hull[i].y;
            topx = q->hull[i].x;
        }
        if (q->hull[i].y > y1) {
            y1 = q->hull[i].y;
            botx = q->hull[i].x;
        }
        x0 = fmin(x0, q->hull[i].x);
        x1 = fmax(x1, q->hull[i].x);
    }
    double w = l->w, h = (ASCENT + DESCENT) * l->fs, fs = l->fs;
    double xc = 0.5 * (x0 + x1);
    cand_t cs[MAX_CANDS];
    int nc = 0;
    cand_add(cs, &nc, topx - 0.5 * w, y0 - h - 1, w, h, 1, fs, 0.0);
    cand_add(cs, &nc, xc - 0.5 * w, y0 - h - 1, w, h, 1, fs, 0.2);
    cand_add(cs, &nc, x0, y0 - h - 1, w, h, 0, fs, 0.4);
    cand_add(cs, &nc, x1 - w, y0 - h - 1, w, h, 2, fs, 0.4);
    cand_add(cs, &nc, botx - 0.5 * w, y1 + 1, w, h, 1, fs, 1.0);
    cand_add(cs, &nc, xc - 0.5 * w, y1 + 1, w, h, 1, fs, 1.2);
    cand_add(cs, &nc, x0, y1 + 1, w, h, 0, fs, 1.4);
    cand_add(cs, &nc, x1 - w, y1 + 1, w, h, 2, fs, 1.4);
    cand_add(cs, &nc, xc - 0.5 * w, y0 + 2, w, h, 1, fs, 2.0); /* just inside the top */
    cand_add(cs, &nc, xc - 0.5 * w, y1 - h - 2, w, h, 1, fs, 2.2);
    cand_add(cs, &nc, x1 + 2, 0.5 * (y0 + y1) - 0.5 * h, w, h, 0, fs, 2.5);
    cand_add(cs, &nc, x0 - 2 - w, 0.5 * (y0 + y1) - 0.5 * h, w, h, 2, fs, 2.5);
    cand_add(cs, &nc, xc - 0.5 * w, y0 - 2 * h - 1, w, h, 1, fs, 3.0);
    cand_add(cs, &nc, xc - 0.5 * w, y1 + h + 1, w, h, 1, fs, 3.2);
    cand_t best = {0};
    if (best_free(c, p, cs, nc, l, -1, -1, &best)) {
        lab_put(l, &best);
        return 1;
    }
    return 0;
}

/* Repair: a label with no free place takes one whose only obstacle is a single other node
 * label, when that label can move elsewhere. */
static int repair_label(const ctx_t *c, pic_t *p, size_t k) {
    lab_t *l = &p->lab[k];
    cand_t cs[MAX_CANDS];
    double h = (ASCENT + DESCENT) * l->fs;
    int nc = node_cands(p->x[k], p->y[k], p->r[k], l->w, h, l->fs, p->max_ring, cs);
    for (int i = 0; i < nc; i++) {
        const box_t *b = &cs[i].b;
        if (!box_inside(b, &c->map)) {
            continue;
        }
        int blocked = 0;
        for (size_t j = 0; j < p->nd && !blocked; j++) {
            blocked = circle_hit(p->x[j], p->y[j], p->r[j], b, CLEAR);
        }
        for (size_t g = 0; g < p->ng && !blocked; g++) {
            blocked = p->g[g].lab.placed && box_hit(b, &p->g[g].lab.b, CLEAR);
        }
        if (blocked) {
            continue;
        }
        long other = -1;
        for (size_t j = 0; j < p->nd; j++) {
            if (j != k && p->lab[j].placed && box_hit(b, &p->lab[j].b, CLEAR)) {
                if (other >= 0) {
                    other = -2;
                    break;
                }
                other = (long)j;
            }
        }
        if (other < 0) {
            continue; /* free (cannot be: k would have taken it) or several in the way */
        }
        if (cs[i].cost >= 3.9 && leader_blocked(p, k, b, l)) {
            continue;
        }
        lab_t *o = &p->lab[other];
        lab_t saved = *o;
        o->placed = 0;
        lab_put(l, &cs[i]);
        if (try_node_label(c, p, (size_t)other)) {
            return 1;
        }
        l->placed = 0;
        *o = saved;
    }
    return 0;
}

static pm_err_t set_label_text(lab_t *l, const char *text, double fs, int bold, double max_u) {
    char *t = shorten(text, max_u);
    if (!t) {
        return PM_ENOMEM;
    }
    pm_i_free(l->text);
    l->text = t;
    l->fs = fs;
    l->bold = bold;
    l->w = text_width(t, fs, bold);
    l->placed = 0;
    return PM_OK;
}

/* Places every label; with allow_short, labels that find no place are shortened step by
 * step. Sets p->fails (node labels not placed) and p->cfails (cluster names). */
static pm_err_t place_labels(ctx_t *c, pic_t *p, int allow_short) {
    double mapw = c->map.x1 - c->map.x0;
    for (size_t k = 0; k < p->nd; k++) {
        /* a name longer than the map is never drawn whole */
        double maxu = 0.6 * mapw / c->fs_label;
        if (set_label_text(&p->lab[k], c->name[p->item[k]], c->fs_label, 0, maxu)) {
            return nomem(c);
        }
    }
    for (size_t g = 0; g < p->ng; g++) {
        lab_clear(&p->g[g].lab);
        if (p->g[g].region) {
            /* a cluster's name runs about as wide as its region, at least 16 characters */
            double rw = 0;
            const group_t *q = &p->g[g];
            if (q->nh) {
                double x0 = INFINITY, x1 = -INFINITY;
                for (size_t i = 0; i < q->nh; i++) {
                    x0 = fmin(x0, q->hull[i].x);
                    x1 = fmax(x1, q->hull[i].x);
                }
                rw = x1 - x0;
            }
            double maxu = fmin(fmax(1.2 * rw, 10 * BOLD * c->fs_cluster), 0.5 * mapw) /
                          (BOLD * c->fs_cluster);
            if (set_label_text(&p->g[g].lab, c->cname[p->g[g].cluster - 1], c->fs_cluster, 1,
                               maxu)) {
                return nomem(c);
            }
        }
    }
    p->cfails = 0;
    for (size_t g = 0; g < p->ng; g++) {
        if (p->g[g].region && !try_cluster_label(c, p, g)) {
            p->cfails++;
        }
    }
    for (size_t j = 0; j < p->nd; j++) {
        try_node_label(c, p, p->prio[j]);
    }
    for (int round = 0; round < 3; round++) {
        int fixed = 0;
        for (size_t j = 0; j < p->nd; j++) {
            size_t k = p->prio[j];
            if (!p->lab[k].placed && repair_label(c, p, k)) {
                fixed = 1;
            }
        }
        if (!fixed) {
            break;
        }
    }
    if (allow_short) {
        for (size_t j = 0; j < p->nd; j++) {
            size_t k = p->prio[j];
            lab_t *l = &p->lab[k];
            if (l->placed) {
                continue;
            }
            double u = text_units(c->name[p->item[k]]);
            for (double f = 0.8; f > 0.25 && !l->placed; f -= 0.15) {
                double mu = u * f;
                if (mu < 4.5) {
                    break;
                }
                if (set_label_text(l, c->name[p->item[k]], c->fs_label, 0, mu)) {
                    return nomem(c);
                }
                if (!try_node_label(c, p, k)) {
                    repair_label(c, p, k);
                }
                l->strained = 1;
            }
            if (!l->placed && set_label_text(l, c->name[p->item[k]], c->fs_label, 0, INFINITY)) {
                return nomem(c);
            }
        }
    }
    p->fails = p->strained = 0;
    for (size_t k = 0; k < p->nd; k++) {
        p->fails += !p->lab[k].placed;
        p->strained += p->lab[k].placed && p->lab[k].strained;
    }
    return PM_OK;
}

/* The repulsion pass: nodes in the way of a label that found no place move away from the
 * spot it wants most; the node itself moves into the map when that spot is outside. */
static void repel(const ctx_t *c, pic_t *p) {
    double h = (ASCENT + DESCENT) * c->fs_label;
    double *dx = pm_i_calloc(p->nd ? p->nd : 1, sizeof *dx);
    double *dy = pm_i_calloc(p->nd ? p->nd : 1, sizeof *dy);
    if (!dx || !dy) {
        pm_i_free(dx);
        pm_i_free(dy);
        return; /* the attempt then just fails to place: harmless */
    }
    for (size_t k = 0; k < p->nd; k++) {
        lab_t *l = &p->lab[k];
        if (l->placed) {
            continue;
        }
        cand_t cs[MAX_CANDS];
        int nc = node_cands(p->x[k], p->y[k], p->r[k], l->w, h, l->fs, 0, cs);
        int bi = 0, bc = 1 << 30;
        for (int i = 0; i < nc; i++) {
            int n = label_conflicts(c, p, &cs[i].b, l, 1, NULL) * 4 + (int)cs[i].cost;
            if (n < bc) {
                bc = n;
                bi = i;
            }
        }
        const box_t *b = &cs[bi].b;
        double bx = 0.5 * (b->x0 + b->x1), by = 0.5 * (b->y0 + b->y1);
        for (size_t j = 0; j < p->nd; j++) {
            int hit = j != k && (circle_hit(p->x[j], p->y[j], p->r[j], b, CLEAR + 2) ||
                                 (p->lab[j].placed && box_hit(b, &p->lab[j].b, CLEAR + 2)));
            if (!hit) {
                continue;
            }
            double ux = p->x[j] - bx, uy = p->y[j] - by, dd = sqrt(ux * ux + uy * uy);
            if (dd < 1e-6) {
                ux = 0;
                uy = 1;
                dd = 1;
            }
            dx[j] += 0.6 * h * ux / dd;
            dy[j] += 0.6 * h * uy / dd;
        }
        if (b->x0 < c->map.x0) {
            dx[k] += c->map.x0 - b->x0;
        }
        if (b->x1 > c->map.x1) {
            dx[k] -= b->x1 - c->map.x1;
        }
        if (b->y0 < c->map.y0) {
            dy[k] += c->map.y0 - b->y0;
        }
        if (b->y1 > c->map.y1) {
            dy[k] -= b->y1 - c->map.y1;
        }
        /* and the node itself a little away from its crowd */
        dx[k] -= 0.3 * h * (bx - p->x[k]) / (fabs(bx - p->x[k]) + fabs(by - p->y[k]) + 1e-9);
        dy[k] -= 0.3 * h * (by - p->y[k]) / (fabs(bx - p->x[k]) + fabs(by - p->y[k]) + 1e-9);
    }
    /* a cluster's name that found no place wants the spot above its region */
    for (size_t g = 0; g < p->ng; g++) {
        const group_t *q = &p->g[g];
        if (!q->region || q->lab.placed || q->nh == 0 || !q->lab.text) {
            continue;
        }
        double top = INFINITY, topx = 0;
        for (size_t i = 0; i < q->nh; i++) {
            if (q->hull[i].y < top) {
                top = q->hull[i].y;
                topx = q->hull[i].x;
            }
        }
        double w = q->lab.w, hh = (ASCENT + DESCENT) * q->lab.fs;
        box_t b = {topx - 0.5 * w, top - hh - 1, topx + 0.5 * w, top - 1};
        double bx = topx, by = top - 0.5 * hh;
        for (size_t j = 0; j < p->nd; j++) {
            int hit = circle_hit(p->x[j], p->y[j], p->r[j], &b, CLEAR + 2) ||
                      (p->lab[j].placed && box_hit(&b, &p->lab[j].b, CLEAR + 2));
            if (hit && p->grp[j] != g) {
                double ux = p->x[j] - bx, uy = p->y[j] - by, dd = sqrt(ux * ux + uy * uy);
                dx[j] += dd > 1e-6 ? 0.6 * h * ux / dd : 0;
                dy[j] += dd > 1e-6 ? 0.6 * h * uy / dd : 0.6 * h;
            }
        }
        if (b.y0 < c->map.y0) { /* no room above the region: the cluster moves down */
            for (size_t j = 0; j < q->n; j++) {
                dy[p->gm[q->first + j]] += c->map.y0 - b.y0;
            }
        }
    }
    for (size_t k = 0; k < p->nd; k++) {
        p->x[k] += clampd(dx[k], -2 * h, 2 * h);
        p->y[k] += clampd(dy[k], -2 * h, 2 * h);
        clamp_node(c, p, k);
    }
    pm_i_free(dx);
    pm_i_free(dy);
}

/* Moves every node that lies in (or touches) another cluster's region out of it, across the
 * region's nearest side; returns the number moved. Regions are convex, so the nearest side
 * is the shortest way out. */
static size_t evict(const ctx_t *c, pic_t *p) {
    size_t moved = 0;
    double m = 0.8 * hull_pad(c); /* clear air, so that a neighbour does not look a member */
    for (size_t k = 0; k < p->nd; k++) {
        for (size_t g = 0; g < p->ng; g++) {
            const group_t *q = &p->g[g];
            if (g == p->grp[k] || q->nh < 3) {
                continue;
            }
            double best = INFINITY, nx = 0, ny = 0;
            int in = 1;
            for (size_t i = 0; i < q->nh && in; i++) {
                pt_t a = q->hull[i], b = q->hull[(i + 1) % q->nh];
                double ex = b.x - a.x, ey = b.y - a.y, len = sqrt(ex * ex + ey * ey);
                if (len < 1e-9) {
                    continue;
                }
                double ix = -ey / len, iy = ex / len; /* inward normal */
                double dist = ix * (p->x[k] - a.x) + iy * (p->y[k] - a.y);
                if (dist <= -(p->r[k] + m)) {
                    in = 0; /* clear of this side: outside */
                } else if (dist < best) {
                    best = dist;
                    nx = -ix;
                    ny = -iy;
                }
            }
            if (in && isfinite(best)) {
                double step = best + p->r[k] + m + 0.5;
                p->x[k] += nx * step;
                p->y[k] += ny * step;
                clamp_node(c, p, k);
                moved++;
            }
        }
    }
    return moved;
}

/* Regions, keeping other clusters' nodes out of them. */
static pm_err_t regions(ctx_t *c, pic_t *p) {
    pm_err_t rc = make_hulls(c, p);
    for (int round = 0; !rc && round < 4; round++) {
        if (evict(c, p) == 0) {
            break;
        }
        separate_nodes(c, p, 20);
        rc = make_hulls(c, p);
    }
    return rc;
}

/* One picture of the first nd items: layout, regions, labels, with repulsion passes. */
static pm_err_t attempt(ctx_t *c, pic_t *p, size_t nd) {
    pm_err_t rc = pic_init(c, p, nd);
    if (!rc) {
        rc = layout(c, p);
    }
    /* labels beside their node first; after two repulsion passes one line further out;
     * shortened names and a second line out only in the last passes */
    static const int ring_of_pass[6] = {0, 0, 0, 1, 2, 2};
    for (int pass = 0; !rc && pass < 6; pass++) {
        rc = regions(c, p);
        p->max_ring = ring_of_pass[pass];
        if (!rc) {
            rc = place_labels(c, p, pass >= 4);
        }
        if (rc || (p->fails == 0 && p->cfails == 0)) {
            break;
        }
        if (pass < 5) {
            repel(c, p);
            separate_nodes(c, p, 60);
        }
    }
    return rc;
}

/* The largest number of items, up to nd, whose labels all find a place: shrinks by a quarter
 * (or by the labels that failed, when fewer) until a picture works, then bisects between
 * the last failure and the last success to within 5%. *p gets the picture kept. */
static pm_err_t fit(ctx_t *c, pic_t *p, size_t nd) {
    pic_t cur;
    memset(&cur, 0, sizeof cur);
    size_t good = 0, bad = nd + 1;
    int have = 0;
    pm_err_t rc = PM_OK;
    for (int a = 0; a < MAX_ATTEMPTS; a++) {
        rc = attempt(c, &cur, nd);
        if (rc) {
            break;
        }
        /* a picture works when every label is placed and at most one in ten had to move
         * two lines out or be shortened */
        if (cur.fails == 0 && cur.strained * 10 <= nd) {
            pic_free(p);
            *p = cur;
            memset(&cur, 0, sizeof cur);
            have = 1;
            good = nd;
        } else {
            bad = nd;
            size_t miss = cur.fails + (cur.strained > nd / 10 ? cur.strained - nd / 10 : 0);
            size_t cut = miss > nd / 4 ? nd / 4 : (miss < nd / 50 ? nd / 50 : miss);
            pic_free(&cur);
            if (!have) {
                if (a >= MAX_ATTEMPTS / 2 && cut < nd / 4) {
                    cut = nd / 4; /* running out of attempts: shrink faster */
                }
                nd -= cut > 0 ? cut : 1;
                if (nd == 0) {
                    break;
                }
                continue;
            }
        }
        if (bad - good <= 1 || (double)(bad - good) <= 0.05 * (double)good) {
            break;
        }
        nd = good + (bad - good) / 2;
    }
    pic_free(&cur);
    if (!rc && !have) { /* not even one label fits: an empty picture that says so */
        rc = attempt(c, p, 0);
    }
    return rc;
}

/* ==== writing =============================================================================== */
static const char *fill_of(const ctx_t *c, size_t item) {
    int k = c->o->color_by_category ? c->colour[item] : c->ccolour[c->d->cluster[item] - 1];
    return k >= 0 ? PAL_FILL[k] : GREY_FILL;
}

static void write_text(sbuf *b, const char *cls, double x, double y, double fs, int anchor,
                       int bold, const char *fill, const char *text, const char *item,
                       int cluster) {
    static const char *const anchors[3] = {"start", "middle", "end"};
    sb_puts(b, "<text");
    sb_attr(b, "class", cls);
    sb_attr_num(b, "x", x);
    sb_attr_num(b, "y", y);
    sb_attr_num(b, "font-size", fs);
    sb_attr(b, "text-anchor", anchors[anchor]);
    if (bold) {
        sb_attr(b, "font-weight", "bold");
    }
    if (fill) {
        sb_attr(b, "fill", fill);
    }
    if (item) {
        sb_attr(b, "data-item", item);
    }
    if (cluster > 0) {
        sb_puts(b, " data-cluster=\"");
        sb_int(b, cluster);
        sb_puts(b, "\"");
    }
    sb_puts(b, ">");
    sb_esc(b, text);
    sb_puts(b, "</text>\n");
}

static void fmt_count(char *buf, size_t size, uint64_t v) {
    char t[32];
    int n = snprintf(t, sizeof t, "%llu", (unsigned long long)v);
    size_t k = 0;
    for (int i = 0; i < n && k + 2 < size; i++) {
        if (i > 0 && (n - i) % 3 == 0) {
            buf[k++] = ',';
        }
        buf[k++] = t[i];
    }
    buf[k] = '\0';
}

static void fmt_percent(char *buf, size_t size, double share) {
    double v = share * 100;
    if (v >= 10 || v == floor(v)) {
        snprintf(buf, size, "%.0f%%", v);
    } else if (v >= 1) {
        snprintf(buf, size, "%.1f%%", v);
    } else {
        snprintf(buf, size, "%.2g%%", v);
    }
}

static void swatch_circle(sbuf *b, double x, double y, double r, const char *fill) {
    sb_puts(b, "<circle class=\"swatch\"");
    sb_attr_num(b, "cx", x);
    sb_attr_num(b, "cy", y);
    sb_attr_num(b, "r", r);
    sb_attr(b, "fill", fill);
    sb_puts(b, " stroke=\"#222222\" stroke-width=\"0.8\"/>\n");
}

static void swatch_region(sbuf *b, double x, double y, double w, double h, const char *fill,
                          double tint) {
    sb_puts(b, "<rect class=\"swatch\"");
    sb_attr_num(b, "x", x);
    sb_attr_num(b, "y", y);
    sb_attr_num(b, "width", w);
    sb_attr_num(b, "height", h);
    sb_attr_num(b, "rx", h / 2);
    sb_attr(b, "fill", fill);
    sb_attr_num(b, "fill-opacity", tint * 1.6);
    sb_attr(b, "stroke", fill);
    sb_puts(b, " stroke-opacity=\"0.6\" stroke-width=\"1\"/>\n");
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

/* ---- word wrap ---- */
/* Greedy word wrap of clean text into lines of at most max_u character widths. Returns the
 * number of lines needed. With out, stores the first max_lines lines there (each owned by
 * the caller); the last one ends in an ellipsis when words are left over, and a word wider
 * than a line is shortened. -1 when out of memory. */
static long wrap_text(const char *text, double max_u, char **out, size_t max_lines) {
    size_t n = strlen(text), lines = 0, i = 0;
    while (i < n) {
        while (i < n && text[i] == ' ') {
            i++;
        }
        if (i >= n) {
            break;
        }
        size_t start = i, end = i; /* the line is text[start .. end) */
        double u = 0;
        while (i < n) {
            size_t j = i;
            while (j < n && text[j] != ' ') {
                j++;
            }
            char *w = pm_i_malloc(j - i + 1, 1);
            if (!w) {
                return -1;
            }
            memcpy(w, text + i, j - i);
            w[j - i] = '\0';
            double wu = text_units(w);
            pm_i_free(w);
            if (end > start && u + 0.6 + wu > max_u) {
                break;
            }
            u += (end > start ? 0.6 : 0) + wu;
            end = j;
            i = j;
            while (i < n && text[i] == ' ') {
                i++;
            }
            if (u > max_u) {
                break; /* a lone word wider than the line */
            }
        }
        if (out && lines < max_lines) {
            int last = lines + 1 == max_lines && i < n;
            size_t len = last ? n - start : end - start;
            char *t = pm_i_malloc(len + 1, 1);
            if (!t) {
                return -1;
            }
            memcpy(t, text + start, len);
            t[len] = '\0';
            out[lines] = shorten(t, max_u);
            pm_i_free(t);
            if (!out[lines]) {
                return -1;
            }
        }
        lines++;
    }
    return (long)lines;
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
    long nl = wrap_text(text, max_units(c->legend.x1 - x, fs, bold), lines, max_lines);
    if (nl < 0) {
        for (size_t i = 0; i < max_lines; i++) {
            pm_i_free(lines[i]);
        }
        return nomem(c);
    }
    size_t k = (size_t)nl < max_lines ? (size_t)nl : max_lines;
    for (size_t i = 0; i < k; i++) {
        write_text(b, "legend", x, y + (double)i * 1.25 * fs, fs, 0, bold, fill, lines[i], NULL, 0);
        pm_i_free(lines[i]);
    }
    *drawn = k;
    return PM_OK;
}

/* Lines the paragraph takes (at most max_lines); 0 when out of memory. */
static size_t para_lines(const ctx_t *c, double x, double fs, int bold, const char *text,
                         size_t max_lines) {
    long nl = wrap_text(text, max_units(c->legend.x1 - x, fs, bold), NULL, 0);
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
        long nl = wrap_text(s, max_units(c->legend.x1 - x, fs, 0), NULL, 0);
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
    size_t coloured = 0, listed = 0, small = 0, small_items = 0, alone = 0;
    for (size_t k = 0; k < nc; k++) {
        if (c->ccolour[k] >= 0) {
            coloured++;
        } else if (c->csize[k] >= 2) {
            small++;
            small_items += c->csize[k];
        } else {
            alone++;
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
        if (cnt && mem_lines) {
            members_text(c, tmp, cnt, cnt, xi, fs2, (long)mem_lines, line + (named ? 5 : 0),
                         sizeof line - 5);
            if (named) {
                memcpy(line, "also ", 5);
            }
        }
        char head[1200];
        if (drawn_in[k] == c->csize[k]) {
            snprintf(head, sizeof head, "%s (%zu)", c->cname[k], c->csize[k]);
        } else {
            snprintf(head, sizeof head, "%s (%zu, %zu drawn)", c->cname[k], c->csize[k],
                     drawn_in[k]);
        }
        size_t hl = para_lines(c, xi, fs, 1, head, head_lines);
        size_t ml = cnt && mem_lines ? para_lines(c, xi, fs2, 0, line, mem_lines) : 0;
        double need = (double)hl * 1.15 * lh + (double)ml * lh2 + 0.45 * fs;
        double reserve = (listed + 1 < coloured ? more_h : 0) + grey_h;
        if (y + need + reserve - lh > keys_top) {
            break;
        }
        listed++;
        sb_puts(b, "<g class=\"legend-cluster\" data-cluster=\"");
        sb_int(b, (long long)k + 1);
        sb_puts(b, "\" data-size=\"");
        sb_int(b, (long long)c->csize[k]);
        sb_puts(b, "\" data-drawn=\"");
        sb_int(b, (long long)drawn_in[k]);
        sb_puts(b, "\">\n");
        if (cat_mode) {
            swatch_region(b, x, y - 0.8 * fs, 1.1 * fs, 0.9 * fs, GREY_FILL, GREY_TINT);
        } else {
            swatch_circle(b, x + 0.45 * fs, y - 0.35 * fs, 0.45 * fs, PAL_FILL[col]);
        }
        rc = legend_para(c, b, xi, y, fs, 1, cat_mode ? INK : PAL_TEXT[col], head, head_lines, &nl);
        y += (double)nl * 1.15 * lh;
        nl = 0;
        if (!rc && cnt && mem_lines) {
            rc = legend_para(c, b, xi, y, fs2, 0, "#444444", line, mem_lines, &nl);
        }
        y += (double)nl * lh2 + 0.45 * fs;
        sb_puts(b, "</g>\n");
    }
    if (!rc && listed < coloured) {
        snprintf(line, sizeof line, "and %zu more cluster%s", coloured - listed,
                 coloured - listed == 1 ? "" : "s");
        rc = legend_para(c, b, xi, y, fs2, 0, "#444444", line, 1, &nl);
        y += lh2 + 0.4 * fs;
    }
    for (int grey = 0; grey < 2 && !rc; grey++) {
        size_t count = grey == 0 ? small : alone;
        if (count == 0 || y + lh > keys_top) {
            continue;
        }
        swatch_circle(b, x + 0.45 * fs, y - 0.35 * fs, 0.45 * fs, GREY_FILL);
        if (grey == 0) {
            snprintf(line, sizeof line, "%zu more cluster%s (%zu items)", small,
                     small == 1 ? "" : "s", small_items);
        } else {
            snprintf(line, sizeof line, "%zu item%s on %s own", alone, alone == 1 ? "" : "s",
                     alone == 1 ? "its" : "their");
        }
        rc = legend_para(c, b, xi, y, fs, 1, GREY_TEXT, line, 1, &nl);
        y += 1.15 * lh;
        size_t m = 0, total = grey == 0 ? small_items : alone;
        for (size_t j = 0; j < c->n; j++) { /* by priority */
            size_t i = c->order[j], k = (size_t)d->cluster[i] - 1;
            if (c->ccolour[k] < 0 && (grey == 0) == (c->csize[k] >= 2)) {
                tmp[m++] = i;
            }
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
    *unlisted = coloured - listed;
    *err = rc;
    return y;
}

static pm_err_t write_legend(ctx_t *c, const pic_t *p, sbuf *b, double wmin, double wmax,
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
    snprintf(size_head, sizeof size_head, "Circle area: share of respondents");
    snprintf(line_head, sizeof line_head, "Line width: %s", c->measure);
    snprintf(neg_text, sizeof neg_text, "dashed: chosen instead of each other");
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
    sb_puts(b, "<g id=\"legend\">\n");
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
        return nomem(c);
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
        rc = legend_para(c, b, x, y, fs, 1, INK, size_head, 2, &nl);
        double base = y + ((double)nl - 1) * lh + 0.3 * lh + DESCENT * fs + 2 * rbig;
        double cx = x + rbig + 2;
        sb_puts(b, "<g class=\"size-key\">\n");
        for (size_t i = 0; i < nv; i++) {
            double r = fmax(c->rk * sqrt(v[i]), c->rmin);
            sb_puts(b, "<circle class=\"key\"");
            sb_attr_num(b, "cx", cx);
            sb_attr_num(b, "cy", base - r);
            sb_attr_num(b, "r", r);
            sb_puts(b, " fill=\"none\" stroke=\"#333333\" stroke-width=\"1\" data-share=\"");
            sb_double(b, v[i]);
            sb_puts(b, "\"/>\n");
            char pct[32];
            fmt_percent(pct, sizeof pct, v[i]);
            write_text(b, "legend", cx, base + 1.2 * fs2, fs2, 1, 0, "#333333", pct, NULL, 0);
            double half = fmax(r, 0.5 * text_width(pct, fs2, 0));
            double next = i + 1 < nv ? fmax(fmax(c->rk * sqrt(v[i + 1]), c->rmin),
                                            0.5 * text_width(pct, fs2, 0))
                                     : 0;
            cx += half + 1.3 * fs + next;
        }
        sb_puts(b, "</g>\n");
        y = base + 1.2 * fs2 + 0.9 * lh + ASCENT * fs;
    }
    /* line key */
    if (!rc && p->ne) {
        rc = legend_para(c, b, x, y, fs, 1, INK, line_head, 2, &nl);
        y += (double)nl * lh;
        double lw0 = 0.6 * c->s + 0.2 + 0.39 * c->s, lw1 = 4.5 * c->s + 0.2;
        const double ws[2] = {wmin, wmax};
        for (int i = 0; i < 2 && !rc; i++) {
            if (i == 1 && wmax == wmin) {
                y += lh2;
                break;
            }
            sb_puts(b, "<line class=\"key\"");
            sb_attr_num(b, "x1", x);
            sb_attr_num(b, "y1", y - 0.35 * fs2);
            sb_attr_num(b, "x2", x + 3 * fs);
            sb_attr_num(b, "y2", y - 0.35 * fs2);
            sb_puts(b, " stroke=\"#4D5A66\"");
            sb_attr_num(b, "stroke-width", i ? lw1 : lw0);
            sb_attr_num(b, "stroke-opacity", i ? 0.8 : 0.3);
            sb_puts(b, "/>\n");
            char num[64];
            snprintf(num, sizeof num, "%s %.2f", i ? "strongest" : "weakest drawn", ws[i]);
            rc = legend_para(c, b, x + 3.6 * fs, y, fs2, 0, "#333333", num, 1, &nl);
            y += lh2;
        }
        if (!rc && any_negative) {
            sb_puts(b, "<line class=\"key\"");
            sb_attr_num(b, "x1", x);
            sb_attr_num(b, "y1", y - 0.35 * fs2);
            sb_attr_num(b, "x2", x + 3 * fs);
            sb_attr_num(b, "y2", y - 0.35 * fs2);
            sb_puts(b, " stroke=\"#3A3A3A\" stroke-width=\"1.6\" stroke-dasharray=\"6 4\"/>\n");
            rc = legend_para(c, b, x + 3.6 * fs, y, fs2, 0, "#333333", neg_text, 2, &nl);
            y += (double)nl * lh2;
        }
        y += 0.9 * lh - lh2;
    }
    if (!rc) {
        double fy = fmax(y + lh2, bottom - foot_h + ASCENT * fs2);
        if (fy + foot_h - lh2 + DESCENT * fs2 <= bottom + 0.01) {
            rc = legend_para(c, b, x, fy, fs2, 0, "#666666", foot, 2, &nl);
        }
    }
    sb_puts(b, "</g>\n");
    return rc;
}

/* Colours by category: the distinct categories of the drawn items, most drawn first (ties
 * by name), get the palette in turn; past it, "other categories" in grey. */
static pm_err_t categories(ctx_t *c, const pic_t *p) {
    size_t nc = 0;
    size_t *cnt = pm_i_calloc(c->n ? c->n : 1, sizeof *cnt);
    if (!cnt) {
        return nomem(c);
    }
    for (size_t k = 0; k < p->nd; k++) {
        const char *ct = c->cat[p->item[k]] ? c->cat[p->item[k]] : "(no category)";
        size_t j = 0;
        while (j < nc && strcmp(c->cats[j], ct) != 0) {
            j++;
        }
        if (j == nc) {
            c->cats[nc++] = ct;
        }
        cnt[j]++;
    }
    /* selection sort: few categories */
    for (size_t a = 0; a < nc; a++) {
        size_t best = a;
        for (size_t b = a + 1; b < nc; b++) {
            if (cnt[b] > cnt[best] ||
                (cnt[b] == cnt[best] && pm_i_bytecmp(c->cats[b], c->cats[best]) < 0)) {
                best = b;
            }
        }
        const char *t = c->cats[a];
        c->cats[a] = c->cats[best];
        c->cats[best] = t;
        size_t u = cnt[a];
        cnt[a] = cnt[best];
        cnt[best] = u;
    }
    for (size_t a = 0; a < nc; a++) {
        c->catcolour[a] = (a < N_PAL && !(nc > N_PAL && a == N_PAL - 1)) ? (int)a : -1;
    }
    c->ncat = nc;
    for (size_t i = 0; i < c->n; i++) {
        const char *ct = c->cat[i] ? c->cat[i] : "(no category)";
        c->colour[i] = -1;
        for (size_t a = 0; a < nc; a++) {
            if (strcmp(c->cats[a], ct) == 0) {
                c->colour[i] = c->catcolour[a];
                break;
            }
        }
    }
    pm_i_free(cnt);
    return PM_OK;
}

static void write_header(const ctx_t *c, sbuf *b) {
    sb_puts(b, "<?xml version=\"1.0\" encoding=\"UTF-8\" standalone=\"no\"?>\n");
    sb_puts(b, "<svg xmlns=\"http://www.w3.org/2000/svg\" version=\"1.1\"");
    sb_puts(b, " width=\"");
    sb_int(b, c->W);
    sb_puts(b, "\" height=\"");
    sb_int(b, c->H);
    sb_puts(b, "\" viewBox=\"0 0 ");
    sb_int(b, c->W);
    sb_puts(b, " ");
    sb_int(b, c->H);
    sb_puts(b, "\"");
    sb_attr(b, "font-family", FONT_STACK);
    sb_puts(b, ">\n<title>");
    sb_esc(b, c->title);
    sb_puts(b, "</title>\n");
}

static pm_err_t write_svg(ctx_t *c, pic_t *p, sbuf *b, pm_svg_stats_t *st) {
    const pm_svg_data_t *d = c->d;
    char line[2048], num[64];
    if (c->o->color_by_category && categories(c, p)) {
        return PM_ENOMEM;
    }
    write_header(c, b);
    /* the subtitle doubles as the description */
    char resp[40];
    fmt_count(resp, sizeof resp, d->respondents);
    int k = snprintf(line, sizeof line, "%s respondent%s \xc2\xb7 %zu of %zu items drawn", resp,
                     d->respondents == 1 ? "" : "s", p->nd, c->n);
    k += snprintf(line + k, sizeof line - (size_t)k, " \xc2\xb7 %zu edge%s drawn", p->ne,
                  p->ne == 1 ? "" : "s");
    if (c->thresholds[0] && (size_t)k < sizeof line) {
        snprintf(line + k, sizeof line - (size_t)k, " \xc2\xb7 %s", c->thresholds);
    }
    sb_puts(b, "<desc>");
    sb_esc(b, line);
    sb_puts(b, "</desc>\n");
    sb_puts(b, "<rect class=\"background\" x=\"0\" y=\"0\" width=\"");
    sb_int(b, c->W);
    sb_puts(b, "\" height=\"");
    sb_int(b, c->H);
    sb_puts(b, "\" fill=\"#FFFFFF\"/>\n");
    /* regions: a smooth closed curve through the padded hull (quadratic pieces between the
     * midpoints of its sides, the hull's corners as control points) */
    sb_puts(b, "<g id=\"regions\">\n");
    for (size_t g = 0; g < p->ng; g++) {
        const group_t *q = &p->g[g];
        if (q->nh < 3) {
            continue;
        }
        int col = c->ccolour[q->cluster - 1];
        int cat_mode = c->o->color_by_category;
        const char *fill = (col >= 0 && !cat_mode) ? PAL_FILL[col] : GREY_FILL;
        double tint = (col >= 0 && !cat_mode) ? PAL_TINT[col] : GREY_TINT;
        sb_puts(b, "<path class=\"region\" data-cluster=\"");
        sb_int(b, q->cluster);
        sb_puts(b, "\" d=\"M");
        for (size_t i = 0; i <= q->nh; i++) {
            pt_t a = q->hull[i % q->nh], z = q->hull[(i + 1) % q->nh];
            pt_t mid = {0.5 * (a.x + z.x), 0.5 * (a.y + z.y)};
            if (i == 0) {
                sb_num(b, mid.x);
                sb_puts(b, " ");
                sb_num(b, mid.y);
            } else {
                sb_puts(b, " Q");
                sb_num(b, a.x);
                sb_puts(b, " ");
                sb_num(b, a.y);
                sb_puts(b, " ");
                sb_num(b, mid.x);
                sb_puts(b, " ");
                sb_num(b, mid.y);
            }
        }
        sb_puts(b, " Z\"");
        sb_attr(b, "fill", fill);
        sb_attr_num(b, "fill-opacity", tint);
        sb_attr(b, "stroke", fill);
        sb_puts(b, " stroke-opacity=\"0.45\"");
        sb_attr_num(b, "stroke-width", 1.2 * c->s);
        sb_puts(b, " stroke-linejoin=\"round\"/>\n");
    }
    sb_puts(b, "</g>\n");
    /* edges */
    double wmin = INFINITY, wmax = 0;
    int any_negative = 0;
    for (size_t e = 0; e < p->ne; e++) {
        double w = fabs(d->weight[p->edge[e]]);
        if (isfinite(w)) {
            wmin = fmin(wmin, w);
            wmax = fmax(wmax, w);
        }
        any_negative |= c->negative[p->edge[e]];
    }
    if (!(wmin <= wmax)) {
        wmin = wmax = 0;
    }
    /* edges weakest first, so that strong ones lie on top; nodes largest first, so that small
     * ones stay visible; ties by index */
    num_key *eo = pm_i_malloc(p->ne ? p->ne : 1, sizeof *eo);
    num_key *no = pm_i_malloc(p->nd ? p->nd : 1, sizeof *no);
    if (!eo || !no) {
        pm_i_free(eo);
        pm_i_free(no);
        return nomem(c);
    }
    for (size_t e = 0; e < p->ne; e++) {
        double w = fabs(d->weight[p->edge[e]]);
        eo[e] = (num_key){isfinite(w) ? w : 0, e};
    }
    for (size_t j = 0; j < p->nd; j++) {
        no[j] = (num_key){p->r[j], j};
    }
    qsort(eo, p->ne, sizeof *eo, cmp_num_up);
    qsort(no, p->nd, sizeof *no, cmp_num_down);
    sb_puts(b, "<g id=\"edges\" stroke-linecap=\"round\">\n");
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
        sb_puts(b, neg ? "<line class=\"edge negative\"" : "<line class=\"edge\"");
        sb_attr_num(b, "x1", p->x[a]);
        sb_attr_num(b, "y1", p->y[a]);
        sb_attr_num(b, "x2", p->x[z]);
        sb_attr_num(b, "y2", p->y[z]);
        sb_attr(b, "stroke", stroke);
        sb_attr_num(b, "stroke-width", (0.6 + 3.9 * t) * c->s + 0.2);
        sb_attr_num(b, "stroke-opacity", neg ? 0.2 + 0.45 * t : 0.25 + 0.55 * t);
        if (neg) {
            sb_puts(b, " stroke-dasharray=\"6 4\"");
        }
        sb_attr(b, "data-a", c->name[p->item[a]]);
        sb_attr(b, "data-b", c->name[p->item[z]]);
        sb_puts(b, " data-weight=\"");
        sb_double(b, w);
        sb_puts(b, "\"/>\n");
    }
    sb_puts(b, "</g>\n");
    /* leaders: a thin line from a label set further out to its node */
    sb_puts(b, "<g id=\"leaders\" stroke=\"#6B6B6B\" stroke-opacity=\"0.8\"");
    sb_attr_num(b, "stroke-width", 0.8 * c->s);
    sb_puts(b, ">\n");
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
        sb_puts(b, "<line class=\"leader\"");
        sb_attr_num(b, "x1", p->x[kk] + dx / dd * (p->r[kk] + 1));
        sb_attr_num(b, "y1", p->y[kk] + dy / dd * (p->r[kk] + 1));
        sb_attr_num(b, "x2", tx - dx / dd);
        sb_attr_num(b, "y2", ty - dy / dd);
        sb_attr(b, "data-item", c->name[p->item[kk]]);
        sb_puts(b, "/>\n");
    }
    sb_puts(b, "</g>\n");
    /* nodes */
    sb_puts(b, "<g id=\"nodes\" stroke=\"#222222\">\n");
    for (size_t j = 0; j < p->nd; j++) {
        size_t kk = no[j].i, i = p->item[kk];
        sb_puts(b, "<circle class=\"node\"");
        sb_attr_num(b, "cx", p->x[kk]);
        sb_attr_num(b, "cy", p->y[kk]);
        sb_attr_num(b, "r", p->r[kk]);
        sb_attr(b, "fill", fill_of(c, i));
        sb_attr_num(b, "stroke-width", 0.9 * c->s + 0.1);
        sb_attr(b, "data-item", c->name[i]);
        sb_puts(b, " data-cluster=\"");
        sb_int(b, d->cluster[i]);
        sb_puts(b, "\" data-share=\"");
        sb_double(b, c->share[i]);
        sb_puts(b, "\"");
        if (c->cat[i]) {
            sb_attr(b, "data-category", c->cat[i]);
        }
        sb_puts(b, "><title>");
        sb_esc(b, c->name[i]);
        fmt_percent(num, sizeof num, c->share[i]);
        sb_puts(b, " \xe2\x80\x93 ");
        sb_puts(b, num);
        sb_puts(b, " of respondents, ");
        sb_esc(b, c->cname[d->cluster[i] - 1]);
        sb_puts(b, "</title></circle>\n");
    }
    sb_puts(b, "</g>\n");
    pm_i_free(eo);
    pm_i_free(no);
    /* labels: a white halo under each, then the text */
    sb_puts(b, "<g id=\"halos\" fill=\"#FFFFFF\" stroke=\"#FFFFFF\" stroke-linejoin=\"round\"");
    sb_attr_num(b, "stroke-width", 3 * c->s + 0.5);
    sb_puts(b, " opacity=\"0.85\">\n");
    for (size_t kk = 0; kk < p->nd; kk++) {
        const lab_t *l = &p->lab[kk];
        write_text(b, "halo", l->x, l->y, l->fs, l->anchor, 0, NULL, l->text, NULL, 0);
    }
    for (size_t g = 0; g < p->ng; g++) {
        const lab_t *l = &p->g[g].lab;
        if (l->placed) {
            write_text(b, "halo", l->x, l->y, l->fs, l->anchor, 1, NULL, l->text, NULL, 0);
        }
    }
    sb_puts(b, "</g>\n<g id=\"labels\">\n");
    for (size_t kk = 0; kk < p->nd; kk++) {
        const lab_t *l = &p->lab[kk];
        size_t i = p->item[kk];
        write_text(b, "label", l->x, l->y, l->fs, l->anchor, 0, INK, l->text, c->name[i],
                   d->cluster[i]);
    }
    for (size_t g = 0; g < p->ng; g++) {
        const lab_t *l = &p->g[g].lab;
        if (l->placed) {
            int col = c->ccolour[p->g[g].cluster - 1];
            const char *fill = (col >= 0 && !c->o->color_by_category) ? PAL_TEXT[col] : GREY_TEXT;
            write_text(b, "cluster-label", l->x, l->y, l->fs, l->anchor, 1, fill, l->text, NULL,
                       p->g[g].cluster);
        }
    }
    sb_puts(b, "</g>\n");
    /* title and subtitle */
    double m = c->map.x0, tw = c->W - 2 * m;
    char *t = shorten(c->title, tw / (BOLD * c->fs_title));
    double title_base = fmax(12, round(22 * c->s)) + ASCENT * c->fs_title;
    if (t) {
        write_text(b, "title", m, title_base, c->fs_title, 0, 1, INK, t, NULL, 0);
        pm_i_free(t);
    }
    t = shorten(line, tw / c->fs_sub);
    if (t) {
        write_text(b, "subtitle", m, title_base + 0.5 * c->fs_title + ASCENT * c->fs_sub + 2,
                   c->fs_sub, 0, 0, "#444444", t, NULL, 0);
        pm_i_free(t);
    }
    if (p->nd == 0) {
        write_text(b, "note", 0.5 * (c->map.x0 + c->map.x1), 0.5 * (c->map.y0 + c->map.y1),
                   c->fs_leg, 1, 0, "#444444", "No item to draw", NULL, 0);
    }
    pm_err_t rc = write_legend(c, p, b, wmin, wmax, any_negative);
    sb_puts(b, "</svg>\n");
    st->drawn = p->nd;
    st->left_out = c->n - p->nd;
    st->edges_drawn = p->ne;
    if (!rc && b->oom) {
        rc = nomem(c);
    }
    return rc;
}

/* ==== entry points ========================================================================== */
void pm_svg_opts_init(pm_svg_opts_t *o) {
    memset(o, 0, sizeof *o);
    o->seed = 1;
}

pm_err_t pm_svg_write(FILE *fp, const pm_svg_data_t *d, const pm_svg_opts_t *o,
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
    ctx_t c;
    memset(&c, 0, sizeof c);
    c.d = d;
    c.o = o;
    c.diag = diag;
    if (!fp || !d) {
        return pm_diag_set(diag, PM_EINTERNAL, NULL, 0, "no stream or no data for the map");
    }
    if ((o->width > 0 && o->width < MIN_W) || (o->height > 0 && o->height < MIN_H) ||
        o->width > 20000 || o->height > 20000) {
        return pm_diag_set(diag, PM_EUSAGE, NULL, 0,
                           "map canvas %dx%d is out of range (%dx%d to 20000x20000 px)", o->width,
                           o->height, MIN_W, MIN_H);
    }
    pm_err_t rc = check_data(&c);
    if (rc) {
        return rc;
    }
    set_canvas(&c);
    pic_t p;
    memset(&p, 0, sizeof p);
    sbuf b = {0};
    rc = prepare(&c);
    if (rc) {
        goto cleanup;
    }
    size_t nd = o->draw ? (o->draw < c.n ? o->draw : c.n) : auto_budget(&c);
    {
        size_t sizeable = 0;
        for (size_t k = 0; k < c.d->n_clusters; k++) {
            sizeable += c.csize[k] >= SIZEABLE;
        }
        if (sizeable > nd && (rc = make_order(&c, 1)) != PM_OK) {
            goto cleanup;
        }
    }
    rc = fit(&c, &p, nd);
    if (rc) {
        goto cleanup;
    }
    rc = write_svg(&c, &p, &b, stats);
    if (rc) {
        goto cleanup;
    }
    if (fwrite(b.p, 1, b.n, fp) != b.n || fflush(fp) != 0 || ferror(fp)) {
        rc = pm_diag_set(diag, PM_EIO, NULL, 0, "cannot write the SVG map");
        memset(stats, 0, sizeof *stats);
    }
cleanup:
    pm_i_free(b.p);
    pic_free(&p);
    ctx_free(&c);
    return rc;
}
