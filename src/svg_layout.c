/* The SVG map, layout refinement: Fruchterman-Reingold (network.c) on the drawn items, then our
 * own cluster packing, overlap removal and the clusters' pm_i_svg_regions (convex hulls). */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "svg_internal.h"
#include "pairmap/network.h"

int pm_i_svg_segment_hits_box(double x0, double y0, double x1, double y1, const box_t *b) {
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

int pm_i_svg_inside_convex(const pt_t *h, size_t n, double x, double y) {
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

static double footprint(const ctx_t *c, const pic_t *p, size_t k) {
    double lh = (ASCENT + DESCENT) * c->fs_label;
    double lw = fmin(pm_i_svg_text_units(c->name[p->item[k]]), 17) * c->fs_label;
    double w = 2 * p->r[k] + lw + 0.8 * lh;
    double h = fmax(2 * p->r[k], lh) + 1.4 * lh;
    return w * h;
}

void pm_i_svg_clamp_node(const ctx_t *c, pic_t *p, size_t k) {
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

double pm_i_svg_hull_pad(const ctx_t *c) {
    return fmax(7, 10 * c->s);
}

/* Pushes a and b apart when their circles (plus room) overlap; returns 1 when it did. */
static int push_apart(pic_t *p, size_t a, size_t b, double pad, double xgap) {
    double need = p->r[a] + p->r[b] + 2 * pad;
    if (p->grp[a] != p->grp[b]) {
        need = fmax(need, p->r[a] + p->r[b] + xgap);
    }
    double dx = p->x[b] - p->x[a], dy = p->y[b] - p->y[a];
    double dd = dx * dx + dy * dy;
    if (dd >= need * need) {
        return 0;
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
    return 1;
}

/* Pushes apart nodes whose circles (plus room for a label line) overlap; nodes of different
 * clusters keep room for both regions' padding between them. Only the pairs a grid of the
 * positions at the start of each sweep finds near (a sweep with no push is exact, so the result has
 * no overlap the double loop would remove). */
void pm_i_svg_separate_nodes(const ctx_t *c, pic_t *p, int iters) {
    double lh = (ASCENT + DESCENT) * c->fs_label;
    double pad = 0.5 * lh, xgap = 2 * pm_i_svg_hull_pad(c) + 6, rmax = 0;
    for (size_t k = 0; k < p->nd; k++) {
        rmax = fmax(rmax, p->r[k]);
    }
    /* cells at least the largest distance that needs a push: a node's partners are in its
     * own cell and the eight around it */
    double reach = fmax(2 * rmax + fmax(2 * pad, xgap), 8);
    grid_t g;
    box_t area = {0, 0, c->W, c->H};
    if (pm_i_svg_grid_init(&g, &area, reach, p->nd)) {
        return; /* out of memory: the labels then find less room; harmless */
    }
    int oom = 0;
    for (int it = 0; it < iters && !oom; it++) {
        int moved = 0;
        pm_i_svg_grid_clear(&g);
        for (size_t k = 0; k < p->nd && !oom; k++) {
            box_t b = {p->x[k], p->y[k], p->x[k], p->y[k]};
            oom = pm_i_svg_grid_add(&g, (uint32_t)k, &b) != 0;
        }
        /* each pair once: within a cell, and with the cells right, below-left, below and
         * below-right of it */
        static const int nb[4][2] = {{1, 0}, {-1, 1}, {0, 1}, {1, 1}};
        for (int cy = 0; cy < g.ny && !oom; cy++) {
            for (int cx = 0; cx < g.nx; cx++) {
                for (int32_t e = g.head[cy * g.nx + cx]; e >= 0; e = g.next[e]) {
                    size_t a = g.id[e];
                    for (int32_t f = g.next[e]; f >= 0; f = g.next[f]) {
                        moved |= push_apart(p, a, g.id[f], pad, xgap);
                    }
                    for (int q = 0; q < 4; q++) {
                        int x = cx + nb[q][0], y = cy + nb[q][1];
                        if (x < 0 || x >= g.nx || y >= g.ny) {
                            continue;
                        }
                        for (int32_t f = g.head[y * g.nx + x]; f >= 0; f = g.next[f]) {
                            moved |= push_apart(p, a, g.id[f], pad, xgap);
                        }
                    }
                }
            }
        }
        for (size_t k = 0; k < p->nd; k++) {
            pm_i_svg_clamp_node(c, p, k);
        }
        if (!moved) {
            break;
        }
    }
    pm_i_svg_grid_free(&g);
}

/* Separates the groups' discs and stretches their arrangement to fill the map. */
typedef struct {
    double left;
    size_t i;
} edge_key;

static int cmp_edge(const void *pa, const void *pb) {
    const edge_key *a = pa, *b = pb;
    if (a->left != b->left) {
        return a->left < b->left ? -1 : 1;
    }
    return a->i < b->i ? -1 : (a->i > b->i);
}

static void pack_groups(const ctx_t *c, pic_t *p) {
    const box_t *m = &c->map;
    double gap = 2 * pm_i_svg_hull_pad(c) + 0.9 * c->fs_cluster;
    edge_key *sweep = pm_i_malloc(p->ng ? p->ng : 1, sizeof *sweep); /* NULL: every pair */
    for (int round = 0; round < 4; round++) {
        for (int it = 0; it < 150; it++) {
            int moved = 0;
            /* sweep and prune: discs by left edge, pairs whose x ranges (plus the gap) meet */
            for (size_t g = 0; g < p->ng && sweep; g++) {
                sweep[g] = (edge_key){p->g[g].cx - p->g[g].R, g};
            }
            if (sweep) {
                qsort(sweep, p->ng, sizeof *sweep, cmp_edge);
            }
            for (size_t s = 0; s < p->ng; s++) {
                size_t sa = sweep ? sweep[s].i : s;
                double right = sweep ? p->g[sa].cx + p->g[sa].R + gap : INFINITY;
                for (size_t t = s + 1; t < p->ng; t++) {
                    if (sweep && sweep[t].left > right) {
                        break;
                    }
                    size_t sb = sweep ? sweep[t].i : t;
                    size_t a = sa < sb ? sa : sb, b = sa < sb ? sb : sa;
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
    pm_i_free(sweep);
}

/* Fruchterman-Reingold on the drawn items, then our post-processing in pixels. The layout
 * graph is the drawn positive edges plus a light "glue" star from each cluster's leading
 * drawn member to the others, so that members whose partners are not drawn stay with their
 * cluster. The fit's first attempt has the most items, and every later one a prefix of the
 * same priority order (pm_i_svg_fit): the later attempts take their items' positions from
 * the first one's layout instead of laying out again (the items they leave out are the
 * least important, and place_groups packs the clusters' discs afresh for the items kept). */
static pm_err_t layout_fr(ctx_t *c, pic_t *p, double *xy) {
    const pm_svg_data_t *d = c->d;
    size_t nd = p->nd;
    if (c->fr_xy && nd <= c->fr_nd) {
        for (size_t k = 0; k < nd; k++) {
            xy[2 * k] = c->fr_xy[2 * p->item[k]];
            xy[2 * k + 1] = c->fr_xy[2 * p->item[k] + 1];
        }
        return PM_OK;
    }
    size_t cap = p->ne + nd;
    uint32_t *la = pm_i_malloc(cap, sizeof *la), *lb = pm_i_malloc(cap, sizeof *lb);
    double *lw = pm_i_malloc(cap, sizeof *lw);
    if (!la || !lb || !lw) {
        pm_i_free(la);
        pm_i_free(lb);
        pm_i_free(lw);
        return pm_i_svg_nomem(c);
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
    if (!rc) { /* kept for the later attempts (without the memory: they lay out afresh) */
        pm_i_free(c->fr_xy);
        c->fr_xy = pm_i_malloc(2 * (c->n ? c->n : 1), sizeof *c->fr_xy);
        c->fr_nd = c->fr_xy ? nd : 0;
        for (size_t k = 0; c->fr_xy && k < nd; k++) {
            c->fr_xy[2 * p->item[k]] = xy[2 * k];
            c->fr_xy[2 * p->item[k] + 1] = xy[2 * k + 1];
        }
    }
    if (rc && rc != PM_ENOMEM) {
        char why[sizeof c->diag->msg];
        snprintf(why, sizeof why, "%s", c->diag->msg);
        return pm_diag_set(c->diag, PM_EINTERNAL, NULL, 0, "map layout failed: %s", why);
    }
    return rc;
}

/* The groups' discs from the layout xy (layout units): sized by their members' footprints,
 * spread over the map and packed; then each group's members scaled into its disc. */
static pm_err_t place_groups(ctx_t *c, pic_t *p, const double *xy) {
    /* groups: centroids in layout units, discs in pixels */
    const box_t *m = &c->map;
    double area = (m->x1 - m->x0) * (m->y1 - m->y0), need = 0;
    double gap = 2 * pm_i_svg_hull_pad(c) + 0.9 * c->fs_cluster;
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
        return pm_i_svg_nomem(c);
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
            pm_i_svg_clamp_node(c, p, k);
        }
    }
    pm_i_free(gx);
    pm_i_free(gy);
    return PM_OK;
}

pm_err_t pm_i_svg_layout(ctx_t *c, pic_t *p) {
    if (p->nd == 0) {
        return PM_OK;
    }
    double *xy = pm_i_malloc(2 * p->nd, sizeof *xy);
    if (!xy) {
        return pm_i_svg_nomem(c);
    }
    pm_err_t rc = layout_fr(c, p, xy);
    if (!rc) {
        rc = place_groups(c, p, xy);
    }
    pm_i_free(xy);
    if (!rc) {
        pm_i_svg_separate_nodes(c, p, 200);
    }
    return rc;
}

/* ==== regions =============================================================================== */
#define HULL_STEPS 24

static pm_err_t make_hulls(ctx_t *c, pic_t *p) {
    double pad = pm_i_svg_hull_pad(c);
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
            return pm_i_svg_nomem(c);
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

/* Moves every node that lies in (or touches) another cluster's region out of it, across the
 * region's nearest side; returns the number moved. Regions are convex, so the nearest side
 * is the shortest way out. */
static size_t evict(const ctx_t *c, pic_t *p) {
    size_t moved = 0;
    double m =
        0.8 * pm_i_svg_hull_pad(c); /* clear air, so that a neighbour does not look a member */
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
                pm_i_svg_clamp_node(c, p, k);
                moved++;
            }
        }
    }
    return moved;
}

/* Regions, keeping other clusters' nodes out of them. */
pm_err_t pm_i_svg_regions(ctx_t *c, pic_t *p) {
    pm_err_t rc = make_hulls(c, p);
    for (int round = 0; !rc && round < 4; round++) {
        if (evict(c, p) == 0) {
            break;
        }
        pm_i_svg_separate_nodes(c, p, 20);
        rc = make_hulls(c, p);
    }
    return rc;
}

/* One picture of the first nd items: layout, regions, labels, with repulsion passes. */
