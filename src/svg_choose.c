/* The SVG map, what to draw: clean names, sizes, colours and the priority order of the items, the
 * drawn subgraph of one attempt, colours by category. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "svg_internal.h"

static double item_r(const ctx_t *c, size_t i) {
    double r = c->rk * sqrt(c->share[i]);
    return r < c->rmin ? c->rmin : r;
}

void pm_i_svg_lab_clear(lab_t *l) {
    pm_i_free(l->text);
    memset(l, 0, sizeof *l);
}

void pm_i_svg_pic_free(pic_t *p) {
    if (!p) {
        return;
    }
    pm_i_svg_spatial_free(p);
    if (p->lab) {
        for (size_t k = 0; k < p->nd; k++) {
            pm_i_svg_lab_clear(&p->lab[k]);
        }
    }
    if (p->g) {
        for (size_t g = 0; g < p->ng; g++) {
            pm_i_free(p->g[g].hull);
            pm_i_svg_lab_clear(&p->g[g].lab);
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

void pm_i_svg_ctx_free(ctx_t *c) {
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
    for (size_t i = 0; c->cshort && i < c->d->n_clusters; i++) {
        pm_i_free(c->cshort[i]);
    }
    pm_i_free(c->cshort);
    pm_i_free(c->cname);
    pm_i_free(c->share);
    pm_i_free(c->strength);
    pm_i_free(c->colour);
    pm_i_free(c->ccolour);
    pm_i_free(c->ccycle);
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
    pm_i_free(c->unit);
    pm_i_free(c->fr_xy);
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

static int cmp_size(const void *pa, const void *pb) {
    size_t a = *(const size_t *)pa, b = *(const size_t *)pb;
    return a < b ? -1 : (a > b);
}

pm_err_t pm_i_svg_nomem(ctx_t *c) {
    return pm_diag_set(c->diag, PM_ENOMEM, NULL, 0, "out of memory while drawing the map");
}

pm_err_t pm_i_svg_check_data(ctx_t *c) {
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

void pm_i_svg_set_canvas(ctx_t *c) {
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
/* Items by share, most chosen first; ties by name (bytes), then index. */
typedef struct {
    double share;
    const char *name;
    size_t i;
} share_key;

static int cmp_share(const void *pa, const void *pb) {
    const share_key *a = pa, *b = pb;
    if (a->share != b->share) {
        return a->share > b->share ? -1 : 1;
    }
    int k = pm_i_bytecmp(a->name, b->name);
    if (k) {
        return k;
    }
    return a->i < b->i ? -1 : (a->i > b->i);
}

/* Appends item i to the order unless it is there already. */
static void take(ctx_t *c, unsigned char *taken, size_t *no, size_t i) {
    if (!taken[i]) {
        taken[i] = 1;
        c->order[(*no)++] = i;
    }
}

pm_err_t pm_i_svg_make_order(ctx_t *c, int cluster_major) {
    size_t n = c->n, nc = c->d->n_clusters;
    slot_key *slot = pm_i_malloc(n ? n : 1, sizeof *slot);
    share_key *sk = pm_i_malloc(n ? n : 1, sizeof *sk);
    unsigned char *taken = pm_i_calloc(n ? n : 1, 1);
    if (!slot || !sk || !taken) {
        pm_i_free(slot);
        pm_i_free(sk);
        pm_i_free(taken);
        return pm_i_svg_nomem(c);
    }
    for (size_t i = 0; i < n; i++) {
        sk[i] = (share_key){c->share[i], c->name[i], i};
    }
    qsort(sk, n, sizeof *sk, cmp_share);
    size_t no = 0, ns = 0;
    /* 1. the most chosen items, whatever their cluster */
    c->n_top = n < TOP ? n : TOP;
    for (size_t j = 0; j < c->n_top; j++) {
        take(c, taken, &no, sk[j].i);
    }
    /* 2. the hubs: QUOTA rounds over the sizeable clusters (round by round; with a budget too
     * small for every sizeable cluster, cluster by cluster: the largest clusters (1 = largest)
     * with QUOTA members each, rather than one member of many) */
    size_t outer = cluster_major ? nc : QUOTA, inner = cluster_major ? QUOTA : nc;
    for (size_t a = 0; a < outer; a++) {
        for (size_t b = 0; b < inner; b++) {
            size_t k = cluster_major ? a : b, round = cluster_major ? b : a;
            if (c->csize[k] >= SIZEABLE && c->csize[k] > round) {
                take(c, taken, &no, c->corder[c->cfirst[k] + round]);
            }
        }
    }
    /* 3. more members of the sizeable clusters in proportion to cluster size */
    for (size_t k = 0; k < nc; k++) {
        size_t t0 = c->csize[k] < QUOTA ? c->csize[k] : QUOTA;
        for (size_t t = t0; c->csize[k] >= SIZEABLE && t < c->csize[k]; t++) {
            slot[ns++] = (slot_key){c->csize[k], k, t};
        }
    }
    qsort(slot, ns, sizeof *slot, cmp_slot);
    for (size_t j = 0; j < ns; j++) {
        take(c, taken, &no, c->corder[c->cfirst[slot[j].k] + slot[j].t]);
    }
    /* 4. items on their own, most chosen first; 5. last, the members of clusters too small to
     * show (drawn only when there is room for everything) */
    for (int pass = 0; pass < 2; pass++) {
        for (size_t j = 0; j < n; j++) {
            size_t i = sk[j].i, k = (size_t)c->d->cluster[i] - 1;
            if ((pass == 0) == (c->csize[k] == 1)) {
                take(c, taken, &no, i);
            }
        }
    }
    pm_i_free(slot);
    pm_i_free(sk);
    pm_i_free(taken);
    for (size_t i = 0; i < n; i++) {
        c->rank[c->order[i]] = i;
    }
    return PM_OK;
}

/* Clean cluster names (cname) and the clusters' labels (cshort). */
static pm_err_t cluster_labels(ctx_t *c) {
    const pm_svg_data_t *d = c->d;
    size_t nc = d->n_clusters;
    for (size_t k = 0; k < nc; k++) {
        char def[48];
        snprintf(def, sizeof def, "Cluster %zu", k + 1);
        const char *nm = d->cluster_name && d->cluster_name[k] ? d->cluster_name[k] : def;
        c->cname[k] = pm_i_svg_clean_text(nm);
        if (!c->cname[k]) {
            return pm_i_svg_nomem(c);
        }
        if (!c->cname[k][0]) {
            pm_i_free(c->cname[k]);
            if (!(c->cname[k] = pm_i_svg_clean_text(def))) {
                return pm_i_svg_nomem(c);
            }
        }
        /* the label of cluster k + 1, the same in the map and the legend: its number, then its
         * name shortened (never below MIN_KEEP characters) to about two legend lines */
        char num[32];
        snprintf(num, sizeof num, "%zu: ", k + 1);
        double room = 1.7 * (c->legend.x1 - c->legend.x0 - 1.4 * c->fs_leg) / (BOLD * c->fs_leg) -
                      pm_i_svg_text_units(num);
        char *sh = pm_i_svg_shorten(c->cname[k], fmax(room, pm_i_svg_min_units(c->cname[k])));
        c->cshort[k] = sh ? pm_i_malloc(strlen(num) + strlen(sh) + 1, 1) : NULL;
        if (!c->cshort[k]) {
            pm_i_free(sh);
            return pm_i_svg_nomem(c);
        }
        strcpy(c->cshort[k], num);
        strcat(c->cshort[k], sh);
        pm_i_free(sh);
    }
    return PM_OK;
}

pm_err_t pm_i_svg_prepare(ctx_t *c) {
    const pm_svg_data_t *d = c->d;
    size_t n = c->n = d->n_nodes, nc = d->n_clusters, m = d->n_edges;
    c->name = pm_i_calloc(n, sizeof *c->name);
    c->cat = pm_i_calloc(n, sizeof *c->cat);
    c->cname = pm_i_calloc(nc, sizeof *c->cname);
    c->share = pm_i_calloc(n, sizeof *c->share);
    c->strength = pm_i_calloc(n, sizeof *c->strength);
    c->colour = pm_i_calloc(n, sizeof *c->colour);
    c->ccolour = pm_i_calloc(nc, sizeof *c->ccolour);
    c->ccycle = pm_i_calloc(nc, sizeof *c->ccycle);
    c->cshort = pm_i_calloc(nc, sizeof *c->cshort);
    c->csize = pm_i_calloc(nc, sizeof *c->csize);
    c->corder = pm_i_calloc(n, sizeof *c->corder);
    c->cfirst = pm_i_calloc(nc + 1, sizeof *c->cfirst);
    c->order = pm_i_calloc(n, sizeof *c->order);
    c->rank = pm_i_calloc(n, sizeof *c->rank);
    c->negative = pm_i_calloc(m, sizeof *c->negative);
    c->cats = pm_i_calloc(n, sizeof *c->cats);
    c->catcolour = pm_i_calloc(n, sizeof *c->catcolour);
    c->title = pm_i_svg_clean_text(c->o->title ? c->o->title : "Which items go together");
    c->thresholds = pm_i_svg_clean_text(d->thresholds);
    c->measure = pm_i_svg_clean_text(d->measure ? d->measure : "edge weight");
    c->unit = pm_i_svg_clean_text(c->o->unit && c->o->unit[0] ? c->o->unit : "respondents");
    if (!c->name || !c->cat || !c->cname || !c->share || !c->strength || !c->colour ||
        !c->ccolour || !c->ccycle || !c->cshort || !c->csize || !c->corder || !c->cfirst ||
        !c->order || !c->rank || !c->negative || !c->cats || !c->catcolour || !c->title ||
        !c->thresholds || !c->measure || !c->unit) {
        return pm_i_svg_nomem(c);
    }
    for (size_t i = 0; i < n; i++) {
        c->name[i] = pm_i_svg_clean_text(d->name[i]);
        if (!c->name[i]) {
            return pm_i_svg_nomem(c);
        }
        if (d->category && d->category[i] && d->category[i][0]) {
            c->cat[i] = pm_i_svg_clean_text(d->category[i]);
            if (!c->cat[i]) {
                return pm_i_svg_nomem(c);
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
    pm_err_t lrc = cluster_labels(c);
    if (lrc) {
        return lrc;
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
    for (size_t k = 0; k < nc; k++) {
        c->ccolour[k] = -1; /* set for the drawn picture by pm_i_svg_colours */
    }
    /* members of each cluster by strength */
    member_key *mk = pm_i_malloc(n ? n : 1, sizeof *mk);
    if (!mk) {
        return pm_i_svg_nomem(c);
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
    /* priority (the draw budget): the TOP most chosen items; QUOTA rounds over the sizeable
     * clusters (each cluster's hubs, its most connected members inside it, so every sizeable
     * cluster is shown readably); then the remaining members in proportion to cluster size
     * (D'Hondt's highest averages: the next slot goes to the cluster with the largest
     * size / (taken + 1)), each cluster giving its strongest remaining member (by strength
     * alone the densest cluster would take every slot); then items on their own by share;
     * last the members of clusters of two, which the legend summarises instead. */
    pm_err_t orc = pm_i_svg_make_order(c, 0);
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
size_t pm_i_svg_auto_budget(const ctx_t *c) {
    size_t n = c->n, probe = n < 60 ? n : 60;
    if (n == 0) {
        return 0;
    }
    double u = 0;
    for (size_t k = 0; k < probe; k++) {
        u += fmin(pm_i_svg_text_units(c->name[c->order[k]]), 18);
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
/* Negative pairs in the picture: strongest first (|weight|, ties by edge), an edge is drawn
 * while both its items have fewer than NEG_PER_ITEM dashed lines; the others are counted in
 * p->neg_left_out (the files keep them all). Positive edges all stay. */
static pm_err_t thin_negatives(ctx_t *c, pic_t *p) {
    const pm_svg_data_t *d = c->d;
    num_key *nk = pm_i_malloc(p->ne ? p->ne : 1, sizeof *nk);
    unsigned char *keep = pm_i_malloc(p->ne ? p->ne : 1, 1);
    unsigned *cnt = pm_i_calloc(p->nd ? p->nd : 1, sizeof *cnt);
    if (!nk || !keep || !cnt) {
        pm_i_free(nk);
        pm_i_free(keep);
        pm_i_free(cnt);
        return pm_i_svg_nomem(c);
    }
    size_t nn = 0;
    for (size_t e = 0; e < p->ne; e++) {
        keep[e] = !c->negative[p->edge[e]];
        if (!keep[e]) {
            double w = fabs(d->weight[p->edge[e]]);
            nk[nn++] = (num_key){isfinite(w) ? w : 0, e};
        }
    }
    qsort(nk, nn, sizeof *nk, cmp_num_down);
    for (size_t j = 0; j < nn; j++) {
        size_t e = nk[j].i;
        if (cnt[p->ea[e]] < NEG_PER_ITEM && cnt[p->eb[e]] < NEG_PER_ITEM) {
            keep[e] = 1;
            cnt[p->ea[e]]++;
            cnt[p->eb[e]]++;
        } else {
            p->neg_left_out++;
        }
    }
    size_t m = 0;
    for (size_t e = 0; e < p->ne; e++) {
        if (keep[e]) {
            p->edge[m] = p->edge[e];
            p->ea[m] = p->ea[e];
            p->eb[m] = p->eb[e];
            m++;
        }
    }
    p->ne = m;
    pm_i_free(nk);
    pm_i_free(keep);
    pm_i_free(cnt);
    return PM_OK;
}

/* Picks the first nd items of the priority order and builds the drawn subgraph. */
pm_err_t pm_i_svg_pic_init(ctx_t *c, pic_t *p, size_t nd) {
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
        return pm_i_svg_nomem(c);
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
        return pm_i_svg_nomem(c);
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
        return pm_i_svg_nomem(c);
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
        return pm_i_svg_nomem(c);
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
        p->g[g].region = p->g[g].n >= 2 || c->csize[p->g[g].cluster - 1] >= 2;
    }
    pm_i_free(pos);
    pm_i_free(byc);
    return thin_negatives(c, p);
}

/* Space one item needs in the picture: its node and label box with some air around. */
/* Colours of the drawn picture: every drawn cluster of two or more items takes the palette
 * in cluster order (1 = largest); past the palette's end the colours come round again with a
 * dashed outline, and the cluster's number in the map and the legend tells them apart. Grey
 * is for items on their own only. */
void pm_i_svg_colours(ctx_t *c, const pic_t *p) {
    size_t nc = c->d->n_clusters, next = 0;
    for (size_t k = 0; k < nc; k++) {
        c->ccolour[k] = -1;
        c->ccycle[k] = 0;
    }
    for (size_t g = 0; g < p->ng; g++) { /* groups are in cluster order */
        size_t k = (size_t)p->g[g].cluster - 1;
        if (c->csize[k] >= 2 && c->ccolour[k] < 0) {
            c->ccolour[k] = (int)(next % N_PAL);
            c->ccycle[k] = (int)(next / N_PAL);
            next++;
        }
    }
}

/* Colours by category: the distinct categories of the drawn items, most drawn first (ties
 * by name), get the palette in turn; past it, "other categories" in grey. */
pm_err_t pm_i_svg_categories(ctx_t *c, const pic_t *p) {
    size_t nc = 0;
    size_t *cnt = pm_i_calloc(c->n ? c->n : 1, sizeof *cnt);
    if (!cnt) {
        return pm_i_svg_nomem(c);
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
