/* Edge selection (see select.h for the order of the thresholds). */
#include "pairmap/select.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "util.h"

void pm_select_opts_init(pm_select_opts_t *o) {
    memset(o, 0, sizeof *o);
    o->min_count = 5;
    o->max_q = 0.05;
    o->sign = PM_SIGN_POSITIVE;
    o->measure = PM_MEASURE_PHI;
}

void pm_edges_free(pm_edges_t *e) {
    if (!e) {
        return;
    }
    free(e->idx);
    free(e->weight);
    free(e);
}

double pm_select_weight(const pm_measures_t *m, pm_measure_t measure) {
    switch (measure) {
    case PM_MEASURE_LIFT:
        return m->lift;
    case PM_MEASURE_JACCARD:
        return m->jaccard;
    case PM_MEASURE_PHI:
    default:
        return m->phi;
    }
}

const char *pm_measure_name(pm_measure_t m) {
    return m == PM_MEASURE_LIFT ? "lift" : m == PM_MEASURE_JACCARD ? "jaccard" : "phi";
}

const char *pm_sign_name(pm_sign_t s) {
    return s == PM_SIGN_NEGATIVE ? "negative" : s == PM_SIGN_BOTH ? "both" : "positive";
}

typedef struct {
    double key;
    size_t pos;
} ranked;

static int cmp_ranked(const void *x, const void *y) {
    const ranked *a = x, *b = y;
    if (a->key != b->key) {
        return a->key > b->key ? -1 : 1;
    }
    return a->pos < b->pos ? -1 : a->pos > b->pos;
}

static int cmp_size(const void *x, const void *y) {
    size_t a = *(const size_t *)x, b = *(const size_t *)y;
    return a < b ? -1 : a > b;
}

pm_err_t pm_select_run(const pm_pairs_t *pp, const pm_incidence_t *inc, const pm_select_opts_t *o,
                       pm_edges_t **out, pm_diag_t *diag) {
    *out = NULL;
    pm_edges_t *e = pm_i_calloc(1, sizeof *e);
    if (!e) {
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
    }
    e->idx = pm_i_malloc(pp->n ? pp->n : 1, sizeof *e->idx);
    e->weight = pm_i_malloc(pp->n ? pp->n : 1, sizeof *e->weight);
    if (!e->idx || !e->weight) {
        pm_edges_free(e);
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
    }
    e->tested = pp->hypotheses;
    e->never_seen = pp->unseen;
    e->removed_count = pp->below_count;
    for (size_t k = 0; k < pp->n; k++) {
        if (pp->n_ab[k] < o->min_count) {
            e->removed_count++; /* listed never-seen pairs under --min-count 0 are kept */
            continue;
        }
        if (!inc->weight) {
            /* the sign and q tests first, without the other measures: the sign of phi is
             * that of N nab - na nb (its numerator, exact as phi_counts takes it) */
            int sg =
                pm_i_joint_sign(inc->N, inc->count[pp->a[k]], inc->count[pp->b[k]], pp->n_ab[k]);
            if ((o->sign == PM_SIGN_POSITIVE && sg <= 0) ||
                (o->sign == PM_SIGN_NEGATIVE && sg >= 0)) {
                e->removed_sign++;
                continue;
            }
            if (!(pp->q[k] <= o->max_q)) {
                e->removed_q++;
                continue;
            }
        }
        pm_measures_t m;
        pm_pairs_measures(pp, inc, k, &m);
        if ((o->sign == PM_SIGN_POSITIVE && !(m.phi > 0)) ||
            (o->sign == PM_SIGN_NEGATIVE && !(m.phi < 0))) {
            e->removed_sign++;
            continue;
        }
        if (!(m.q <= o->max_q)) {
            e->removed_q++;
            continue;
        }
        if (o->min_phi > 0 && !(fabs(m.phi) >= o->min_phi)) {
            e->removed_phi++;
            continue;
        }
        if (o->min_lift > 0 && !(m.lift >= o->min_lift)) {
            e->removed_lift++;
            continue;
        }
        e->idx[e->n] = k;
        e->weight[e->n] = pm_select_weight(&m, o->measure);
        e->n++;
    }
    if (o->top_edges && e->n > o->top_edges) {
        ranked *r = pm_i_malloc(e->n, sizeof *r);
        if (!r) {
            pm_edges_free(e);
            return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
        }
        for (size_t i = 0; i < e->n; i++) {
            r[i].key = fabs(e->weight[i]);
            r[i].pos = i;
        }
        qsort(r, e->n, sizeof *r, cmp_ranked);
        size_t *keep = pm_i_malloc(o->top_edges, sizeof *keep);
        if (!keep) {
            free(r);
            pm_edges_free(e);
            return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
        }
        for (size_t i = 0; i < o->top_edges; i++) {
            keep[i] = r[i].pos;
        }
        qsort(keep, o->top_edges, sizeof *keep, cmp_size);
        for (size_t i = 0; i < o->top_edges; i++) {
            e->idx[i] = e->idx[keep[i]];
            e->weight[i] = e->weight[keep[i]];
        }
        e->removed_top = e->n - o->top_edges;
        e->n = o->top_edges;
        free(keep);
        free(r);
    }
    *out = e;
    return PM_OK;
}
