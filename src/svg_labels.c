/* The SVG map, label placement: candidates beside each node, the best free one, repair and
 * repulsion passes, and the search for the largest picture whose labels all fit. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "svg_internal.h"

/* ==== labels ================================================================================ */
typedef struct {
    box_t b;
    double x, y;
    int anchor;
    int ring; /* 0 beside the node, 1 and 2 one and two lines further out (node_cands) */
    double cost;
} cand_t;

/* The cost of an edge running through a label while labels look for a place at all (an edge
 * weighs about as much as the step from one candidate beside the node to the next, so that
 * crowded pictures still fit), and afterwards in edge_relief: above the spread of one ring's
 * costs and the step to the next ring (node_cands: 0 .. 2.4 beside the node, 4 .. 6.4 one line
 * out), so that a free place beside the node or one line out is taken before one an edge
 * crosses. */
#define PRIMARY_EDGE_COST 1.0
#define EDGE_COST 7.0

#define MAX_CANDS 40

static void cand_add(cand_t *cs, int *nc, double x0, double y0, double w, double h, int anchor,
                     double fs, double cost) {
    cand_t *k = &cs[(*nc)++];
    k->b = (box_t){x0, y0, x0 + w, y0 + h};
    k->anchor = anchor;
    k->x = anchor == 0 ? x0 : (anchor == 1 ? x0 + 0.5 * w : x0 + w);
    k->y = y0 + ASCENT * fs;
    k->cost = cost;
    k->ring = cost >= 7.9 ? 2 : (cost >= 3.9 ? 1 : 0);
}

/* Positions beside a node of radius r at (cx, cy) for a box w x h: right, left, the four
 * diagonals, above and below, then the same one and two lines further out (rings 0 ..
 * max_ring). */
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

static box_t grown(const box_t *b, double d) {
    return (box_t){b->x0 - d, b->y0 - d, b->x1 + d, b->y1 + d};
}

static const lab_t *lab_of(const pic_t *p, uint32_t id) {
    return id < p->nd ? &p->lab[id] : &p->g[id - p->nd].lab;
}

/* Hard test: inside the map, clear of every node and every placed label (near ones, from the
 * spatial index). Returns the number of conflicts (0 = free); *soft gets the edge crossings. */
static int label_conflicts(const ctx_t *c, const pic_t *p, const box_t *b, const lab_t *self,
                           int count_all, double *soft) {
    int bad = 0;
    spatial_t *sp = p->sp;
    if (!box_inside(b, &c->map)) {
        bad++;
        if (!count_all) {
            return bad;
        }
    }
    box_t near = grown(b, CLEAR + 0.5);
    size_t n = pm_i_svg_grid_query(&sp->nodes, &near, sp);
    for (size_t i = 0; i < n; i++) {
        size_t j = sp->buf[i];
        if (circle_hit(p->x[j], p->y[j], p->r[j], b, CLEAR)) {
            bad++;
            if (!count_all) {
                return bad;
            }
        }
    }
    n = pm_i_svg_grid_query(&sp->labels, &near, sp);
    for (size_t i = 0; i < n; i++) {
        uint32_t id = sp->buf[i];
        const lab_t *l = lab_of(p, id);
        if (l == self || !l->placed) {
            continue;
        }
        int hit = box_hit(b, &l->b, CLEAR);
        if (!hit && id < p->nd && l->ring > 0) { /* its leader */
            hit = pm_i_svg_segment_hits_box(p->x[id], p->y[id], clampd(p->x[id], l->b.x0, l->b.x1),
                                            clampd(p->y[id], l->b.y0, l->b.y1), b);
        }
        if (hit) {
            bad++;
            if (!count_all) {
                return bad;
            }
        }
    }
    if (soft) {
        double s = 0;
        n = pm_i_svg_grid_query(&sp->edges, &near, sp);
        for (size_t i = 0; i < n; i++) {
            size_t k = sp->buf[i];
            if (pm_i_svg_segment_hits_box(p->x[p->ea[k]], p->y[p->ea[k]], p->x[p->eb[k]],
                                          p->y[p->eb[k]], b)) {
                s += p->edge_cost;
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
    spatial_t *sp = p->sp;
    box_t seg = {fmin(x0, tx) - 1, fmin(y0, ty) - 1, fmax(x0, tx) + 1, fmax(y0, ty) + 1};
    size_t n = pm_i_svg_grid_query(&sp->labels, &seg, sp);
    for (size_t i = 0; i < n; i++) {
        const lab_t *l = lab_of(p, sp->buf[i]);
        if (l != self && l->placed && pm_i_svg_segment_hits_box(x0, y0, tx, ty, &l->b)) {
            return 1;
        }
    }
    n = pm_i_svg_grid_query(&sp->nodes, &seg, sp);
    for (size_t i = 0; i < n; i++) {
        size_t j = sp->buf[i];
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
    return 0;
}

/* The cost of candidate k for label l with the edges it crosses (soft): a label inside another
 * cluster's region reads as its member, and costs more. */
static double cand_cost(const pic_t *p, const cand_t *k, double soft, int own_group) {
    double cost = k->cost + soft;
    if (own_group < 0) {
        return cost;
    }
    const box_t *b = &k->b;
    const double px[5] = {0.5 * (b->x0 + b->x1), b->x0, b->x1, b->x0, b->x1};
    const double py[5] = {0.5 * (b->y0 + b->y1), b->y0, b->y0, b->y1, b->y1};
    for (size_t g = 0; g < p->ng; g++) {
        if ((int)g == own_group || p->g[g].nh < 3) {
            continue;
        }
        int in = 0;
        for (int t = 0; t < 5; t++) {
            in += pm_i_svg_inside_convex(p->g[g].hull, p->g[g].nh, px[t], py[t]);
        }
        cost += 0.8 * in;
    }
    return cost;
}

/* The best free candidate for label l (node: its item, or -1 for a cluster's name); 1 when
 * found. With p->escape (edge_relief), a candidate one ring beyond p->max_ring is taken only
 * when no edge crosses it (a way off the edges, not a place for a crowded label), and one of
 * the outermost ring only when no place nearer is free at all, whatever edges cross those. */
static int best_free(const ctx_t *c, const pic_t *p, const cand_t *cs, int nc, const lab_t *l,
                     int own_group, long node, cand_t *out) {
    double best[2] = {INFINITY, INFINITY}; /* nearer rings, the outermost */
    int found[2] = {0, 0};
    cand_t pick[2];
    for (int i = 0; i < nc; i++) {
        int tier = p->escape && cs[i].ring >= 2;
        if (cs[i].cost >= best[tier] || (tier && found[0])) {
            continue;
        }
        double soft = 0;
        if (label_conflicts(c, p, &cs[i].b, l, 0, &soft)) {
            continue;
        }
        if (cs[i].ring > p->max_ring && soft > 0) {
            continue;
        }
        if (node >= 0 && cs[i].ring > 0 && leader_blocked(p, (size_t)node, &cs[i].b, l)) {
            continue;
        }
        double cost = cand_cost(p, &cs[i], soft, own_group);
        if (cost < best[tier]) {
            best[tier] = cost;
            pick[tier] = cs[i];
            found[tier] = 1;
        }
    }
    if (found[0] || found[1]) {
        *out = pick[found[0] ? 0 : 1];
        return 1;
    }
    return 0;
}

/* Puts label id (node labels 0..nd-1, cluster labels nd + g) at candidate k. */
static void lab_put(pic_t *p, size_t id, lab_t *l, const cand_t *k) {
    l->b = k->b;
    l->x = k->x;
    l->y = k->y;
    l->anchor = k->anchor;
    l->placed = 1;
    l->strained = k->ring >= 2; /* the outermost ring (see node_cands) */
    l->ring = k->ring;
    pm_i_svg_spatial_add_label(p, id);
}

static int try_node_label(const ctx_t *c, pic_t *p, size_t k) {
    lab_t *l = &p->lab[k];
    if (!l->text) {
        return 0;
    }
    cand_t cs[MAX_CANDS], best = {0};
    double h = (ASCENT + DESCENT) * l->fs;
    /* with escape one ring further out too: a way off the edges (best_free) */
    int rings = p->escape && p->max_ring < 1 ? 1 : p->max_ring;
    int nc = node_cands(p->x[k], p->y[k], p->r[k], l->w, h, l->fs, rings, cs);
    if (best_free(c, p, cs, nc, l, (int)p->grp[k], (long)k, &best)) {
        lab_put(p, k, l, &best);
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
    if (!l->text) {
        return 1; /* left out: nothing to place */
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
        lab_put(p, p->nd + g, l, &best);
        return 1;
    }
    return 0;
}

/* Repair: a label with no free place takes one whose only obstacle is a single other node
 * label, when that label can move elsewhere. */
static int repair_label(const ctx_t *c, pic_t *p, size_t k) {
    lab_t *l = &p->lab[k];
    if (!l->text) {
        return 0;
    }
    cand_t cs[MAX_CANDS];
    double h = (ASCENT + DESCENT) * l->fs;
    int nc = node_cands(p->x[k], p->y[k], p->r[k], l->w, h, l->fs, p->max_ring, cs);
    for (int i = 0; i < nc; i++) {
        const box_t *b = &cs[i].b;
        if (!box_inside(b, &c->map)) {
            continue;
        }
        int blocked = 0;
        spatial_t *sp = p->sp;
        box_t near = grown(b, CLEAR + 0.5);
        size_t n = pm_i_svg_grid_query(&sp->nodes, &near, sp);
        for (size_t q = 0; q < n && !blocked; q++) {
            size_t j = sp->buf[q];
            blocked = circle_hit(p->x[j], p->y[j], p->r[j], b, CLEAR);
        }
        long other = -1;
        n = blocked ? 0 : pm_i_svg_grid_query(&sp->labels, &near, sp);
        for (size_t q = 0; q < n && !blocked; q++) {
            uint32_t id = sp->buf[q];
            const lab_t *o = lab_of(p, id);
            if (id == k || !o->placed || !box_hit(b, &o->b, CLEAR)) {
                continue;
            }
            if (id >= p->nd) {
                blocked = 1; /* a cluster's name */
            } else {
                other = other == -1 ? (long)id : -2;
            }
        }
        if (blocked) {
            continue;
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
        lab_put(p, k, l, &cs[i]);
        if (try_node_label(c, p, (size_t)other)) {
            return 1;
        }
        l->placed = 0;
        *o = saved;
    }
    return 0;
}

/* The label's text: whole, shortened to max_u (never below MIN_KEEP characters), or none
 * (left out) when even that does not fit. */
static pm_err_t set_label_text(lab_t *l, const char *text, double fs, int bold, double max_u) {
    if (max_u < pm_i_svg_min_units(text)) {
        pm_i_free(l->text);
        l->text = NULL;
        l->w = 0;
        l->placed = 0;
        return PM_OK;
    }
    char *t = pm_i_svg_shorten(text, max_u);
    if (!t) {
        return PM_ENOMEM;
    }
    pm_i_free(l->text);
    l->text = t;
    l->fs = fs;
    l->bold = bold;
    l->w = pm_i_svg_text_width(t, fs, bold);
    l->placed = 0;
    return PM_OK;
}

/* A cluster's label that found no place: shortened by the same rule to about its region's
 * width, and at last its number alone (which the legend shows beside its name). */
static pm_err_t cluster_label_fallback(ctx_t *c, pic_t *p, size_t g) {
    const group_t *q = &p->g[g];
    lab_t *l = &p->g[g].lab;
    double x0 = INFINITY, x1 = -INFINITY;
    for (size_t i = 0; i < q->nh; i++) {
        x0 = fmin(x0, q->hull[i].x);
        x1 = fmax(x1, q->hull[i].x);
    }
    double maxu = fmax(1.2 * (x1 - x0), 10 * BOLD * c->fs_cluster) / (BOLD * c->fs_cluster);
    char num[32];
    snprintf(num, sizeof num, "%d: ", q->cluster);
    const char *name = c->cname[q->cluster - 1];
    maxu -= pm_i_svg_text_units(num); /* the number does not count towards MIN_KEEP */
    if (maxu < pm_i_svg_text_units(c->cshort[q->cluster - 1]) && maxu >= pm_i_svg_min_units(name)) {
        char *sh = pm_i_svg_shorten(name, maxu);
        char *t = sh ? pm_i_malloc(strlen(num) + strlen(sh) + 1, 1) : NULL;
        if (!t) {
            pm_i_free(sh);
            return pm_i_svg_nomem(c);
        }
        strcpy(t, num);
        strcat(t, sh);
        pm_i_free(sh);
        pm_err_t rc = set_label_text(l, t, c->fs_cluster, 1, INFINITY);
        pm_i_free(t);
        if (rc) {
            return pm_i_svg_nomem(c);
        }
        if (try_cluster_label(c, p, g)) {
            return PM_OK;
        }
    }
    snprintf(num, sizeof num, "%d", q->cluster);
    if (set_label_text(l, num, c->fs_cluster, 1, INFINITY)) {
        return pm_i_svg_nomem(c);
    }
    try_cluster_label(c, p, g);
    return PM_OK;
}

/* Places every label; with allow_short, labels that find no place are shortened step by
 * step. Sets p->fails (node labels not placed) and p->cfails (cluster names). */
/* The edges through label l where it is now. */
static int crossings(const ctx_t *c, const pic_t *p, const lab_t *l) {
    double soft = 0;
    label_conflicts(c, p, &l->b, l, 0, &soft);
    return (int)(soft / p->edge_cost + 0.5);
}

/* Once every label has its place: a label that edges run through moves to a free place beside
 * its node, or one line out, that fewer edges cross (EDGE_COST: a nearer place first among
 * those). Which labels fit is settled before, so that no item is left out for it. */
static void edge_relief(const ctx_t *c, pic_t *p) {
    p->edge_cost = EDGE_COST;
    p->escape = 1;
    int moved = 1;
    for (int round = 0; round < 2 && moved; round++) { /* a move can free another's place */
        moved = 0;
        for (size_t j = 0; j < p->nd; j++) {
            size_t k = p->prio[j];
            lab_t *l = &p->lab[k];
            if (!l->placed || !l->text || l->strained) {
                continue;
            }
            int now = crossings(c, p, l);
            if (now == 0) {
                continue;
            }
            lab_t saved = *l;
            l->placed = 0;
            if (!try_node_label(c, p, k) || crossings(c, p, l) >= now) {
                *l = saved;
            } else {
                moved = 1;
            }
        }
    }
    p->edge_cost = PRIMARY_EDGE_COST;
    p->escape = 0;
}

static pm_err_t place_labels(ctx_t *c, pic_t *p, int allow_short) {
    double mapw = c->map.x1 - c->map.x0;
    for (size_t k = 0; k < p->nd; k++) {
        p->lab[k].placed = 0;
    }
    for (size_t g = 0; g < p->ng; g++) {
        p->g[g].lab.placed = 0;
    }
    if (pm_i_svg_spatial_build(c, p)) { /* the nodes and edges where they are now */
        return pm_i_svg_nomem(c);
    }
    for (size_t k = 0; k < p->nd; k++) {
        /* a name longer than the map is never drawn whole */
        double maxu = 0.6 * mapw / c->fs_label;
        if (set_label_text(&p->lab[k], c->name[p->item[k]], c->fs_label, 0, maxu)) {
            return pm_i_svg_nomem(c);
        }
    }
    for (size_t g = 0; g < p->ng; g++) {
        pm_i_svg_lab_clear(&p->g[g].lab);
        if (p->g[g].region) {
            /* the cluster's label as the legend gives it (shortened once, in prepare) */
            if (set_label_text(&p->g[g].lab, c->cshort[p->g[g].cluster - 1], c->fs_cluster, 1,
                               INFINITY)) {
                return pm_i_svg_nomem(c);
            }
        }
    }
    p->edge_cost = PRIMARY_EDGE_COST;
    p->escape = 0;
    p->cfails = 0;
    for (size_t g = 0; g < p->ng && p->cfails == 0; g++) {
        if (p->g[g].region && !try_cluster_label(c, p, g)) {
            pm_err_t rc = cluster_label_fallback(c, p, g);
            if (rc) {
                return rc;
            }
        }
    }
    p->cfails = 0;
    for (size_t g = 0; g < p->ng; g++) {
        p->cfails += p->g[g].region && p->g[g].lab.text && !p->g[g].lab.placed;
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
            double u = pm_i_svg_text_units(c->name[p->item[k]]);
            for (double f = 0.8; f > 0.25 && !l->placed; f -= 0.15) {
                double mu = u * f;
                if (mu < pm_i_svg_min_units(c->name[p->item[k]])) {
                    break; /* never cut below MIN_KEEP characters */
                }
                if (set_label_text(l, c->name[p->item[k]], c->fs_label, 0, mu)) {
                    return pm_i_svg_nomem(c);
                }
                if (!try_node_label(c, p, k)) {
                    repair_label(c, p, k);
                }
                l->strained = 1;
            }
            if (!l->placed && set_label_text(l, c->name[p->item[k]], c->fs_label, 0, INFINITY)) {
                return pm_i_svg_nomem(c);
            }
        }
    }
    p->fails = p->strained = 0;
    for (size_t k = 0; k < p->nd; k++) {
        p->fails += !p->lab[k].placed;
        p->strained += p->lab[k].placed && p->lab[k].strained;
    }
    if (p->fails == 0 && p->cfails == 0) {
        edge_relief(c, p);
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
        if (l->placed || !l->text) {
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
        pm_i_svg_clamp_node(c, p, k);
    }
    pm_i_free(dx);
    pm_i_free(dy);
}
static pm_err_t attempt(ctx_t *c, pic_t *p, size_t nd) {
    pm_err_t rc = pm_i_svg_pic_init(c, p, nd);
    if (!rc) {
        rc = pm_i_svg_layout(c, p);
    }
    /* labels beside their node first; after two repulsion passes one line further out;
     * shortened names and a second line out only in the last passes */
    static const int ring_of_pass[6] = {0, 0, 0, 1, 2, 2};
    for (int pass = 0; !rc && pass < 6; pass++) {
        rc = pm_i_svg_regions(c, p);
        p->max_ring = ring_of_pass[pass];
        if (!rc) {
            rc = place_labels(c, p, pass >= 4);
        }
        if (rc || (p->fails == 0 && p->cfails == 0)) {
            break;
        }
        if (pass < 5) {
            repel(c, p);
            pm_i_svg_separate_nodes(c, p, 60);
        }
    }
    return rc;
}

/* The largest number of items, up to nd, whose labels all find a place: shrinks by a quarter
 * (or by the labels that failed, when fewer) until a picture works, then bisects between
 * the last failure and the last success to within 5%. *p gets the picture kept. */
pm_err_t pm_i_svg_fit(ctx_t *c, pic_t *p, size_t nd) {
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
            pm_i_svg_pic_free(p);
            *p = cur;
            memset(&cur, 0, sizeof cur);
            have = 1;
            good = nd;
        } else {
            bad = nd;
            size_t miss = cur.fails + (cur.strained > nd / 10 ? cur.strained - nd / 10 : 0);
            size_t cut = miss > nd / 4 ? nd / 4 : (miss < nd / 50 ? nd / 50 : miss);
            pm_i_svg_pic_free(&cur);
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
    pm_i_svg_pic_free(&cur);
    if (!rc && !have) { /* not even one label fits: an empty picture that says so */
        rc = attempt(c, p, 0);
    }
    return rc;
}
