/* The SVG map, spatial index: a uniform grid of cells over the canvas for the nodes, edges and
 * placed labels, so that label placement and overlap removal test only what lies near (cost
 * about linear in the drawn items instead of quadratic). */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "svg_internal.h"

#define MAX_CELLS (1 << 22) /* bounds the grid before allocation (a 20000 px canvas fits) */

int pm_i_svg_grid_init(grid_t *g, const box_t *area, double cell, size_t nid) {
    memset(g, 0, sizeof *g);
    double w = fmax(area->x1 - area->x0, 1), h = fmax(area->y1 - area->y0, 1);
    if (!(cell > 0)) {
        cell = 32;
    }
    while ((w / cell + 1) * (h / cell + 1) > MAX_CELLS) {
        cell *= 2;
    }
    g->x0 = area->x0;
    g->y0 = area->y0;
    g->cell = cell;
    g->nx = (int)(w / cell) + 1;
    g->ny = (int)(h / cell) + 1;
    g->head = pm_i_malloc((size_t)g->nx * (size_t)g->ny, sizeof *g->head);
    g->nid = nid;
    g->stamp = pm_i_calloc(nid ? nid : 1, sizeof *g->stamp);
    if (!g->head || !g->stamp) {
        pm_i_svg_grid_free(g);
        return -1;
    }
    pm_i_svg_grid_clear(g);
    return 0;
}

void pm_i_svg_grid_clear(grid_t *g) {
    for (size_t i = 0; g->head && i < (size_t)g->nx * (size_t)g->ny; i++) {
        g->head[i] = -1;
    }
    g->n = 0;
}

void pm_i_svg_grid_free(grid_t *g) {
    pm_i_free(g->head);
    pm_i_free(g->next);
    pm_i_free(g->id);
    pm_i_free(g->stamp);
    memset(g, 0, sizeof *g);
}

static int cell_of(const grid_t *g, double v, double o, int n) {
    double k = floor((v - o) / g->cell);
    return k < 0 ? 0 : (k >= n ? n - 1 : (int)k);
}

static int put(grid_t *g, uint32_t id, int cx, int cy) {
    if (g->n >= INT32_MAX) {
        return -1;
    }
    size_t cap = g->cap;
    if (pm_i_grow((void **)&g->next, &cap, g->n + 1, sizeof *g->next)) {
        return -1;
    }
    cap = g->cap;
    if (pm_i_grow((void **)&g->id, &cap, g->n + 1, sizeof *g->id)) {
        return -1;
    }
    g->cap = cap;
    size_t cell = (size_t)cy * (size_t)g->nx + (size_t)cx;
    g->id[g->n] = id;
    g->next[g->n] = g->head[cell];
    g->head[cell] = (int32_t)g->n;
    g->n++;
    return 0;
}

int pm_i_svg_grid_add(grid_t *g, uint32_t id, const box_t *b) {
    int ax = cell_of(g, b->x0, g->x0, g->nx), bx = cell_of(g, b->x1, g->x0, g->nx);
    int ay = cell_of(g, b->y0, g->y0, g->ny), by = cell_of(g, b->y1, g->y0, g->ny);
    for (int y = ay; y <= by; y++) {
        for (int x = ax; x <= bx; x++) {
            if (put(g, id, x, y)) {
                return -1;
            }
        }
    }
    return 0;
}

/* The cells along the segment: samples every quarter cell, each cell once in a row, and the
 * 3x3 block around each sample, so that no cell the segment crosses is missed. */
int pm_i_svg_grid_add_segment(grid_t *g, uint32_t id, double x0, double y0, double x1, double y1) {
    double len = hypot(x1 - x0, y1 - y0);
    size_t steps = (size_t)(len / (0.25 * g->cell)) + 1;
    int lx = -2, ly = -2;
    for (size_t s = 0; s <= steps; s++) {
        double t = (double)s / (double)steps;
        int cx = cell_of(g, x0 + t * (x1 - x0), g->x0, g->nx);
        int cy = cell_of(g, y0 + t * (y1 - y0), g->y0, g->ny);
        if (cx == lx && cy == ly) {
            continue;
        }
        lx = cx;
        ly = cy;
        if (put(g, id, cx, cy)) {
            return -1;
        }
    }
    return 0;
}

/* The distinct ids near b into sp->buf; returns their number (0 also when out of memory,
 * which sets sp->oom). */
size_t pm_i_svg_grid_query(grid_t *g, const box_t *b, spatial_t *sp) {
    if (++g->mark == 0) { /* wrapped: forget every stamp */
        memset(g->stamp, 0, (g->nid ? g->nid : 1) * sizeof *g->stamp);
        g->mark = 1;
    }
    int ax = cell_of(g, b->x0, g->x0, g->nx), bx = cell_of(g, b->x1, g->x0, g->nx);
    int ay = cell_of(g, b->y0, g->y0, g->ny), by = cell_of(g, b->y1, g->y0, g->ny);
    size_t n = 0;
    for (int y = ay; y <= by; y++) {
        for (int x = ax; x <= bx; x++) {
            for (int32_t e = g->head[(size_t)y * (size_t)g->nx + (size_t)x]; e >= 0;
                 e = g->next[e]) {
                uint32_t id = g->id[e];
                if (g->stamp[id] == g->mark) {
                    continue;
                }
                g->stamp[id] = g->mark;
                if (pm_i_grow((void **)&sp->buf, &sp->cap, n + 1, sizeof *sp->buf)) {
                    sp->oom = 1;
                    return 0;
                }
                sp->buf[n++] = id;
            }
        }
    }
    return n;
}

static box_t canvas(const ctx_t *c) {
    return (box_t){0, 0, c->W, c->H};
}

pm_err_t pm_i_svg_spatial_build(const ctx_t *c, pic_t *p) {
    if (!p->sp) {
        p->sp = pm_i_calloc(1, sizeof *p->sp);
        if (!p->sp) {
            return PM_ENOMEM;
        }
        box_t area = canvas(c);
        double cell = 3 * c->fs_label;
        if (pm_i_svg_grid_init(&p->sp->nodes, &area, cell, p->nd) ||
            pm_i_svg_grid_init(&p->sp->edges, &area, cell, p->ne) ||
            pm_i_svg_grid_init(&p->sp->labels, &area, cell, p->nd + p->ng)) {
            return PM_ENOMEM;
        }
    }
    spatial_t *sp = p->sp;
    pm_i_svg_grid_clear(&sp->nodes);
    pm_i_svg_grid_clear(&sp->edges);
    pm_i_svg_grid_clear(&sp->labels);
    for (size_t k = 0; k < p->nd; k++) {
        box_t b = {p->x[k] - p->r[k], p->y[k] - p->r[k], p->x[k] + p->r[k], p->y[k] + p->r[k]};
        if (pm_i_svg_grid_add(&sp->nodes, (uint32_t)k, &b)) {
            return PM_ENOMEM;
        }
    }
    for (size_t e = 0; e < p->ne; e++) {
        if (pm_i_svg_grid_add_segment(&sp->edges, (uint32_t)e, p->x[p->ea[e]], p->y[p->ea[e]],
                                      p->x[p->eb[e]], p->y[p->eb[e]])) {
            return PM_ENOMEM;
        }
    }
    for (size_t k = 0; k < p->nd; k++) { /* labels placed already (none in a fresh pass) */
        if (p->lab[k].placed) {
            pm_i_svg_spatial_add_label(p, k);
        }
    }
    for (size_t g = 0; g < p->ng; g++) {
        if (p->g[g].lab.placed) {
            pm_i_svg_spatial_add_label(p, p->nd + g);
        }
    }
    return sp->oom ? PM_ENOMEM : PM_OK;
}

void pm_i_svg_spatial_add_label(pic_t *p, size_t id) {
    if (!p->sp) {
        return;
    }
    const lab_t *l = id < p->nd ? &p->lab[id] : &p->g[id - p->nd].lab;
    box_t b = l->b;
    if (id < p->nd && l->ring > 0) { /* its leader runs from the node */
        b.x0 = fmin(b.x0, p->x[id]);
        b.y0 = fmin(b.y0, p->y[id]);
        b.x1 = fmax(b.x1, p->x[id]);
        b.y1 = fmax(b.y1, p->y[id]);
    }
    if (pm_i_svg_grid_add(&p->sp->labels, (uint32_t)id, &b)) {
        p->sp->oom = 1;
    }
}

void pm_i_svg_spatial_free(pic_t *p) {
    if (p->sp) {
        pm_i_svg_grid_free(&p->sp->nodes);
        pm_i_svg_grid_free(&p->sp->edges);
        pm_i_svg_grid_free(&p->sp->labels);
        pm_i_free(p->sp->buf);
        pm_i_free(p->sp);
        p->sp = NULL;
    }
}
