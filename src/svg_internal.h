/* Shared inside the SVG map (src/svgmap.c and its stages src/svg_*.c): constants, the drawing's
 * state and the stages' entry points. Never installed. */
#ifndef PAIRMAP_SVG_INTERNAL_H
#define PAIRMAP_SVG_INTERNAL_H

#include <math.h>
#include <stddef.h>
#include <stdint.h>

#include "pairmap/svgmap.h"
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
#define QUOTA 3        /* members per sizeable cluster taken before the strongest remaining */
#define TOP 6          /* the most chosen items, always drawn first */
#define MIN_KEEP 12    /* a shortened label keeps at least this many characters */
#define NEG_PER_ITEM 2 /* dashed lines (negative pairs) at most at one item */
#define SIZEABLE 3     /* a cluster of this many members or more is shown */
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
#define NBSP "\xc2\xa0" /* U+00A0: word wrap never breaks there */

/* ==== output buffer ========================================================================= */
/* The whole picture is built in memory and written with one fwrite, so a failed run writes
 * nothing half-done and every write error is seen in one place. */
typedef struct {
    char *p;
    size_t n, cap;
    int oom;
} sbuf;

/* Sort keys of numbers with a tie-break index, up and down. */
typedef struct {
    double v;
    size_t i;
} num_key;

static inline int cmp_num_up(const void *pa, const void *pb) {
    const num_key *a = pa, *b = pb;
    if (a->v != b->v) {
        return a->v < b->v ? -1 : 1;
    }
    return a->i < b->i ? -1 : (a->i > b->i);
}

static inline int cmp_num_down(const void *pa, const void *pb) {
    const num_key *a = pa, *b = pb;
    if (a->v != b->v) {
        return a->v > b->v ? -1 : 1;
    }
    return a->i < b->i ? -1 : (a->i > b->i);
}

/* ---- the output buffer (svg_text.c); b may be NULL: the legend measures itself by writing
 * to nowhere first ---- */
void pm_i_sb_add(sbuf *b, const char *s, size_t len);
void pm_i_sb_puts(sbuf *b, const char *s);
void pm_i_sb_int(sbuf *b, long long v);
void pm_i_sb_num(sbuf *b, double v);    /* fixed point, at most two decimals, never "-0" */
void pm_i_sb_double(sbuf *b, double v); /* round-trip */
void pm_i_sb_esc(sbuf *b, const char *s);
void pm_i_sb_attr(sbuf *b, const char *name, const char *value);
void pm_i_sb_attr_num(sbuf *b, const char *name, double v);

/* ==== geometry ============================================================================== */
typedef struct {
    double x0, y0, x1, y1;
} box_t;

static inline int box_hit(const box_t *a, const box_t *b, double clear) {
    return a->x0 < b->x1 + clear && b->x0 < a->x1 + clear && a->y0 < b->y1 + clear &&
           b->y0 < a->y1 + clear;
}

static inline int circle_hit(double cx, double cy, double r, const box_t *b, double clear) {
    double nx = cx < b->x0 ? b->x0 : (cx > b->x1 ? b->x1 : cx);
    double ny = cy < b->y0 ? b->y0 : (cy > b->y1 ? b->y1 : cy);
    double dx = cx - nx, dy = cy - ny;
    double rr = r + clear;
    return dx * dx + dy * dy < rr * rr;
}

static inline int box_inside(const box_t *b, const box_t *area) {
    return b->x0 >= area->x0 && b->x1 <= area->x1 && b->y0 >= area->y0 && b->y1 <= area->y1;
}

/* Does the segment (x0,y0)-(x1,y1) cross box b? Liang-Barsky clipping. */
typedef struct {
    double x, y;
} pt_t;

static inline double clampd(double v, double lo, double hi) {
    return v < lo ? lo : (v > hi ? hi : v);
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

/* A uniform grid over the canvas (svg_grid.c), the spatial index of label placement and
 * overlap removal: each entry (an id) sits in every cell its box covers; a query returns each
 * id whose entry shares a cell with the query box once (stamps), for the exact test after. */
typedef struct {
    double x0, y0, cell;
    int nx, ny;
    int32_t *head; /* [nx * ny] first entry of the cell, -1: none */
    int32_t *next; /* per entry */
    uint32_t *id;  /* per entry */
    size_t n, cap;
    uint32_t *stamp; /* per id: the query that last returned it */
    size_t nid;
    uint32_t mark;
} grid_t;

/* The spatial index of one picture: nodes (circle boxes), edges (segments), placed labels
 * (node labels 0..nd-1, cluster labels nd + g; a label drawn with a leader covers its node
 * too). Entries of moved labels stay behind: queries test the current boxes. */
typedef struct {
    grid_t nodes, edges, labels;
    uint32_t *buf; /* query results */
    size_t cap;
    int oom;
} spatial_t;

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
    int max_ring;        /* label candidates: 0 beside the node only, 1 and 2 further out */
    double edge_cost;    /* label placement: the cost of an edge through a label */
    int escape;          /* and candidates one ring beyond max_ring, taken off the edges */
    spatial_t *sp;       /* owned; the index for label placement (NULL: none yet) */
    size_t neg_left_out; /* negative pairs between drawn items that are not drawn */
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
    size_t n_top;   /* the first n_top of order are the most chosen items */
    int *negative;  /* per edge */
    size_t ncat;
    const char **cats; /* distinct categories by drawn count (category colouring), borrowed */
    int *catcolour;
    char *title, *thresholds, *measure;
    char *unit;    /* clean; "respondents" by default */
    char **cname;  /* clean cluster names */
    char **cshort; /* "k: name", shortened once: the cluster's label in the map and legend */
    int *ccycle;   /* per cluster: how often the palette came round before its colour (0:
                    * solid outline; more: dashed), set by pm_i_svg_colours */
    double *fr_xy; /* per item: the first attempt's Fruchterman-Reingold position (layout
                    * units), reused by the later attempts, whose items are a prefix of the
                    * same order (svg_layout.c); NULL until then */
    size_t fr_nd;  /* the number of items that layout was made for */
} ctx_t;

/* ---- text (svg_text.c) ---- */
char *pm_i_svg_clean_text(const char *s);
double pm_i_svg_char_em(uint32_t cp);
double pm_i_svg_text_units(const char *s);
double pm_i_svg_text_width(const char *s, double fs, int bold);
char *pm_i_svg_shorten(const char *s, double max_units);
double pm_i_svg_min_units(const char *s); /* the narrowest pm_i_svg_shorten allows */
long pm_i_svg_wrap_text(const char *text, double max_u, char **out, size_t max_lines);
void pm_i_svg_write_text(sbuf *b, const char *cls, double x, double y, double fs, int anchor,
                         int bold, const char *fill, const char *text, const char *item,
                         int cluster);
void pm_i_svg_fmt_count(char *buf, size_t size, uint64_t v);
void pm_i_svg_fmt_percent(char *buf, size_t size, double share);

/* ---- what to draw (svg_choose.c) ---- */
pm_err_t pm_i_svg_nomem(ctx_t *c);
pm_err_t pm_i_svg_check_data(ctx_t *c);
void pm_i_svg_set_canvas(ctx_t *c);
pm_err_t pm_i_svg_prepare(ctx_t *c);
pm_err_t pm_i_svg_make_order(ctx_t *c, int cluster_major);
size_t pm_i_svg_auto_budget(const ctx_t *c);
pm_err_t pm_i_svg_pic_init(ctx_t *c, pic_t *p, size_t nd);
pm_err_t pm_i_svg_categories(ctx_t *c, const pic_t *p);
void pm_i_svg_colours(ctx_t *c, const pic_t *p);
void pm_i_svg_lab_clear(lab_t *l);
void pm_i_svg_pic_free(pic_t *p);
void pm_i_svg_ctx_free(ctx_t *c);

/* ---- layout (svg_layout.c) ---- */
int pm_i_svg_segment_hits_box(double x0, double y0, double x1, double y1, const box_t *b);
int pm_i_svg_inside_convex(const pt_t *h, size_t n, double x, double y);
void pm_i_svg_clamp_node(const ctx_t *c, pic_t *p, size_t k);
double pm_i_svg_hull_pad(const ctx_t *c);
void pm_i_svg_separate_nodes(const ctx_t *c, pic_t *p, int iters);
pm_err_t pm_i_svg_layout(ctx_t *c, pic_t *p);
pm_err_t pm_i_svg_regions(ctx_t *c, pic_t *p);

/* ---- the spatial index (svg_grid.c) ---- */
int pm_i_svg_grid_init(grid_t *g, const box_t *area, double cell, size_t nid);
void pm_i_svg_grid_clear(grid_t *g);
void pm_i_svg_grid_free(grid_t *g);
int pm_i_svg_grid_add(grid_t *g, uint32_t id, const box_t *b);
int pm_i_svg_grid_add_segment(grid_t *g, uint32_t id, double x0, double y0, double x1, double y1);
size_t pm_i_svg_grid_query(grid_t *g, const box_t *b, spatial_t *sp);
pm_err_t pm_i_svg_spatial_build(const ctx_t *c, pic_t *p); /* nodes, edges; labels emptied */
void pm_i_svg_spatial_free(pic_t *p);
void pm_i_svg_spatial_add_label(pic_t *p, size_t id);

/* ---- labels (svg_labels.c) ---- */
pm_err_t pm_i_svg_fit(ctx_t *c, pic_t *p, size_t nd);

/* ---- legend (svg_legend.c) ---- */
pm_err_t pm_i_svg_write_legend(ctx_t *c, const pic_t *p, sbuf *b, double wmin, double wmax,
                               int any_negative);

#endif
