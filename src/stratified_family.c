/* --pair-test within (include/pairmap/stratified.h): the Cochran-Mantel-Haenszel test of every
 * pair of the family over the segments of one column, and Benjamini-Hochberg over them.
 * One pass over the items on all threads: for item a, its respondents with a segment, and in
 * each of their rows the items after a, counted per segment in a per-thread accumulator of
 * items x segments (memory in items, not in pairs); each pair is tested when item a is done
 * with, and only its p-value is kept. Pairs no respondent with a segment chose together
 * (joint count 0 in every segment) share their p-value with every pair of the same two
 * per-segment total vectors: they are counted by classes of such items, as the pooled family
 * counts its never-seen pairs (src/assoc_family.c). */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "assoc_internal.h"
#include "parallel.h"
#include "stratified_internal.h"
#include "util.h"

/* Hard cap on class combinations tested for pairs never chosen together within a segment
 * (the pooled family's cap, src/assoc_family.c). */
#define MAX_CLASS_COMBOS 400000000ULL

/* The family's items: those of the pooled family (pm_pairs_t.in_family: eligible and chosen
 * by at least --min-count respondents). */
static int in_family(const pm_pairs_t *pp, size_t i) {
    return pp->in_family[i] != 0;
}

/* One thread's state. */
typedef struct {
    uint32_t *acc;     /* [items * k] joint counts per segment of item a with each item */
    uint32_t *stamp;   /* [items] a + 1 when the item is in touched for a */
    uint32_t *touched; /* [items] */
    uint32_t *pos;     /* [items] 1 + the offset of the listed pair (a, item), 0 if not listed */
    double *pf;        /* p-values of pairs not listed, at most the limit */
    size_t npf, cpf;
    pidx *lv; /* listed pairs' p-values at most the limit, with their index */
    size_t nlv, clv;
    uint64_t *keys; /* class combinations of the pairs seen (when classes are used) */
    size_t nkeys, ckeys;
    uint64_t seen, above, undefined;
    int fail;
} fam_thread;

typedef struct {
    const pm_incidence_t *inc;
    const pm_segcol_t *c;
    const pm_pairs_t *pp;
    size_t k, ni, nchunks;
    double *n;          /* [k] respondents per segment */
    pm_i_strat_lists L; /* item -> respondents with a segment, per-segment totals */
    pm_sign_t sign;
    double lim;     /* p-values above it are only counted */
    int skip_mean;  /* lim < 0.49, one-sided: pairs seen no more than expected counted */
    uint32_t *cls;  /* item -> class (classes in use), else NULL */
    uint32_t *rep;  /* [D] a class's first item */
    uint64_t *size; /* [D] its items */
    uint64_t D;     /* classes */
    fam_thread *th;
    double *p_listed; /* [pp->n] CMH p of the listed pairs; -1 until seen */
} fam_ctx;

/* The CMH sums of pair (a, b) with per-segment joint counts nab (NULL: 0 everywhere). */
static void pair_sums(const fam_ctx *x, size_t a, size_t b, const uint32_t *nab, double *sa,
                      double *se, double *sv) {
    const uint64_t *ta = x->L.tot + a * x->k, *tb = x->L.tot + b * x->k;
    *sa = *se = *sv = 0;
    for (size_t s = 0; s < x->k; s++) {
        if (x->n[s] == 0) {
            continue;
        }
        pm_i_cmh_add(x->n[s], (double)ta[s], (double)tb[s], se, sv);
        *sa += nab ? (double)nab[s] : 0;
    }
}

static double pair_p(const fam_ctx *x, size_t a, size_t b, const uint32_t *nab) {
    double sa, se, sv;
    pair_sums(x, a, b, nab, &sa, &se, &sv);
    return pm_i_cmh_p(sa, se, sv, x->sign);
}

static int push_double(double **v, size_t *n, size_t *cap, double p) {
    if (*n >= *cap && pm_i_grow((void **)v, cap, *n + 1, sizeof **v)) {
        return -1;
    }
    (*v)[(*n)++] = p;
    return 0;
}

/* Pair (a, b) seen within the segments with joint counts nab: its p-value into the family.
 * listed: 1 + the pair's index in pp, or 0. */
static int take_pair(fam_ctx *x, fam_thread *t, size_t a, size_t b, const uint32_t *nab,
                     size_t listed) {
    t->seen++;
    if (x->cls) {
        uint64_t ca = x->cls[a], cb = x->cls[b];
        uint64_t key = ca < cb ? ca * x->D + cb : cb * x->D + ca;
        if (t->nkeys >= t->ckeys &&
            pm_i_grow((void **)&t->keys, &t->ckeys, t->nkeys + 1, sizeof *t->keys)) {
            return -1;
        }
        t->keys[t->nkeys++] = key;
    }
    double sa, se, sv;
    pair_sums(x, a, b, nab, &sa, &se, &sv);
    /* under a limit below 1/2, one-sided: a pair not listed seen no more often than expected
     * (no less, under negative) has z <= 0 (>= 0), so p >= 1/2: only counted */
    if (!listed && x->skip_mean && (x->sign == PM_SIGN_POSITIVE ? sa <= se : sa >= se)) {
        t->above++;
        return 0;
    }
    double p = pm_i_cmh_p(sa, se, sv, x->sign);
    if (listed) {
        x->p_listed[listed - 1] = p;
    }
    if (isnan(p)) { /* no segment where both items vary: no evidence, p = 1 in the family */
        t->undefined++;
        p = 1.0;
    }
    if (p > x->lim) {
        t->above++;
        return 0;
    }
    if (listed) {
        if (t->nlv >= t->clv && pm_i_grow((void **)&t->lv, &t->clv, t->nlv + 1, sizeof *t->lv)) {
            return -1;
        }
        t->lv[t->nlv].p = p;
        t->lv[t->nlv++].i = listed - 1;
        return 0;
    }
    return push_double(&t->pf, &t->npf, &t->cpf, p);
}

/* The first listed pair (a, *) of pp (pairs in (a, b) order). */
static size_t listed_from(const pm_pairs_t *pp, uint32_t a) {
    size_t lo = 0, hi = pp->n;
    while (lo < hi) {
        size_t mid = lo + (hi - lo) / 2;
        if (pp->a[mid] < a) {
            lo = mid + 1;
        } else {
            hi = mid;
        }
    }
    return lo;
}

/* Every pair (a, b > a) of the family that a respondent with a segment chose together. */
static int one_item(fam_ctx *x, fam_thread *t, uint32_t a) {
    const pm_incidence_t *inc = x->inc;
    const pm_pairs_t *pp = x->pp;
    size_t k = x->k, lo = listed_from(pp, a), hi = lo;
    for (; hi < pp->n && pp->a[hi] == a; hi++) {
        t->pos[pp->b[hi]] = (uint32_t)(hi - lo + 1);
    }
    size_t nt = 0;
    for (uint64_t p = x->L.start[a]; p < x->L.start[a + 1]; p++) {
        uint32_t q = x->L.resp[p];
        size_t s = (size_t)x->c->of[q];
        uint64_t j = inc->row_ptr[q], end = inc->row_ptr[q + 1];
        while (j < end) { /* the row is ascending: the first item after a */
            uint64_t m = j + (end - j) / 2;
            if (inc->col[m] <= a) {
                j = m + 1;
            } else {
                end = m;
            }
        }
        for (end = inc->row_ptr[q + 1]; j < end; j++) {
            uint32_t b = inc->col[j];
            if (!in_family(pp, b)) {
                continue;
            }
            if (t->stamp[b] != a + 1) {
                t->stamp[b] = a + 1;
                t->touched[nt++] = b;
            }
            t->acc[(size_t)b * k + s]++;
        }
    }
    int rc = 0;
    for (size_t i = 0; i < nt; i++) {
        uint32_t b = t->touched[i];
        uint32_t *nab = t->acc + (size_t)b * k;
        if (rc == 0) {
            rc = take_pair(x, t, a, b, nab, t->pos[b] ? lo + t->pos[b] : 0);
        }
        memset(nab, 0, k * sizeof *nab);
    }
    for (size_t i = lo; i < hi; i++) {
        t->pos[pp->b[i]] = 0;
    }
    return rc;
}

static int item_chunk(void *ud, size_t ch, unsigned th) {
    fam_ctx *x = ud;
    fam_thread *t = &x->th[th];
    if (t->fail) {
        return 0;
    }
    size_t a0 = x->ni * ch / x->nchunks, a1 = x->ni * (ch + 1) / x->nchunks;
    if (!t->acc) {
        t->acc = pm_i_calloc(x->ni * (x->k ? x->k : 1), sizeof *t->acc);
        t->stamp = pm_i_calloc(x->ni, sizeof *t->stamp);
        t->touched = pm_i_malloc(x->ni, sizeof *t->touched);
        t->pos = pm_i_calloc(x->ni, sizeof *t->pos);
        if (!t->acc || !t->stamp || !t->touched || !t->pos) {
            t->fail = 1;
            return 0;
        }
    }
    for (size_t a = a0; a < a1; a++) {
        if (in_family(x->pp, a) && one_item(x, t, (uint32_t)a)) {
            t->fail = 1;
            return 0;
        }
    }
    return 0;
}

/* ---- pairs no respondent with a segment chose together --------------------------------------- */
typedef struct {
    const uint64_t *v; /* the item's per-segment totals */
    uint32_t i;
} item_vec;

static int cmp_vec(const void *x, const void *y, const void *ud) {
    const item_vec *a = x, *b = y;
    size_t k = *(const size_t *)ud;
    for (size_t s = 0; s < k; s++) {
        if (a->v[s] != b->v[s]) {
            return a->v[s] < b->v[s] ? -1 : 1;
        }
    }
    return a->i < b->i ? -1 : a->i > b->i;
}

/* Classes of family items with equal per-segment totals: cls[item], rep[class] (its first
 * item), size[class]. */
static pm_err_t classes_build(fam_ctx *x) {
    size_t ne = 0;
    item_vec *v = pm_i_malloc(x->ni ? x->ni : 1, sizeof *v);
    if (!v) {
        return PM_ENOMEM;
    }
    for (size_t i = 0; i < x->ni; i++) {
        if (in_family(x->pp, i)) {
            v[ne].v = x->L.tot + i * x->k;
            v[ne++].i = (uint32_t)i;
        }
    }
    x->cls = pm_i_malloc(x->ni ? x->ni : 1, sizeof *x->cls);
    x->rep = pm_i_malloc(ne ? ne : 1, sizeof *x->rep);
    x->size = pm_i_calloc(ne ? ne : 1, sizeof *x->size);
    if (!x->cls || !x->rep || !x->size || pm_i_sort_ctx(v, ne, sizeof *v, cmp_vec, &x->k)) {
        free(v);
        return PM_ENOMEM;
    }
    uint64_t D = 0;
    for (size_t j = 0; j < ne; j++) {
        if (j == 0 || memcmp(v[j].v, v[j - 1].v, x->k * sizeof *v[j].v) != 0) {
            x->rep[D++] = v[j].i;
        }
        x->cls[v[j].i] = (uint32_t)(D - 1);
        x->size[D - 1]++;
    }
    x->D = D;
    free(v);
    return PM_OK;
}

/* The groups: per class combination, the pairs not seen within a segment share the p-value of
 * the two classes' first items with joint counts 0. keys: the seen pairs' combinations,
 * sorted. */
static pm_err_t unseen_groups(fam_ctx *x, const uint64_t *keys, size_t nkeys, pm_i_family *f,
                              uint64_t *undefined) {
    const uint32_t *rep = x->rep;
    const uint64_t *size = x->size;
    size_t gcap = 0, at = 0;
    for (uint64_t ca = 0; ca < x->D; ca++) {
        for (uint64_t cb = ca; cb < x->D; cb++) {
            uint64_t key = ca * x->D + cb, seen = 0;
            for (; at < nkeys && keys[at] == key; at++) {
                seen++;
            }
            uint64_t tot = ca == cb ? size[ca] * (size[ca] - 1) / 2 : size[ca] * size[cb];
            uint64_t un = tot - seen;
            if (!un) {
                continue;
            }
            double p = pair_p(x, rep[ca], rep[cb], NULL);
            if (isnan(p)) {
                *undefined += un;
                p = 1.0;
            }
            if (p > x->lim) {
                f->above += un;
                continue;
            }
            if (pm_i_grow((void **)&f->groups, &gcap, f->ngroups + 1, sizeof *f->groups)) {
                return PM_ENOMEM;
            }
            f->groups[f->ngroups].p = p;
            f->groups[f->ngroups++].mult = un;
        }
    }
    return PM_OK;
}

/* ---- the whole ---------------------------------------------------------------------------- */
void pm_stratified_family_opts_init(pm_strat_family_opts_t *o) {
    memset(o, 0, sizeof *o);
    o->sign = PM_SIGN_POSITIVE;
    o->q_limit = 1.0;
}

void pm_stratified_family_destroy(pm_strat_family_t *f) {
    if (f) {
        free(f->p);
        free(f->q);
        memset(f, 0, sizeof *f);
    }
}

/* Classes are needed unless every pair nobody with a segment chose together is known to lie
 * above the limit: sign positive (their z is at most 0) under a limit below 0.49. */
static int need_classes(const pm_strat_family_opts_t *o, double lim) {
    return !(o->sign == PM_SIGN_POSITIVE && lim < 0.49);
}

static size_t threads_of(const pm_strat_family_opts_t *o) {
    size_t t = o->threads ? o->threads : pm_cpu_count();
    return t > 256 ? 256 : t;
}

pm_err_t pm_stratified_family_cost(const pm_incidence_t *inc, const pm_segcol_t *c,
                                   const pm_pairs_t *pp, const pm_strat_family_opts_t *o,
                                   uint64_t *bytes) {
    long double k = (long double)(c->n_levels ? c->n_levels : 1), ni = (long double)inc->n_items;
    long double nnz = (long double)inc->row_ptr[inc->n_resp < c->n_resp ? inc->n_resp : c->n_resp];
    long double lim = o->q_limit >= 0 && o->q_limit < 1 ? o->q_limit : 1;
    long double seen = (long double)pp->seen, listed = (long double)pp->n;
    long double b = (long double)threads_of(o) * ni * (4 * k + 12); /* the accumulators */
    b += 8 * (ni + 1) + 4 * nnz + 8 * ni * k;                       /* the lists */
    b += 16 * listed;                                               /* p and q out */
    b += 2 * (8 * seen + 16 * listed);      /* the p-values kept (grown by doubling) */
    b += 8 * (seen + listed) + 16 * listed; /* the sorts of Benjamini-Hochberg */
    if (need_classes(o, (double)lim)) {
        b += 2 * 8 * seen + 8 * seen + 28 * ni; /* combinations seen, their sort, classes */
    }
    *bytes = b > 1.8e19L ? UINT64_MAX : (uint64_t)b;
    return PM_OK;
}

static void threads_free(fam_thread *th, size_t n) {
    for (size_t i = 0; th && i < n; i++) {
        free(th[i].acc);
        free(th[i].stamp);
        free(th[i].touched);
        free(th[i].pos);
        free(th[i].pf);
        free(th[i].lv);
        free(th[i].keys);
    }
    free(th);
}

/* The threads' p-values and keys gathered into the family f and one key array. */
static pm_err_t gather(fam_ctx *x, size_t nth, pm_i_family *f, uint64_t **keys, size_t *nkeys,
                       uint64_t *seen, uint64_t *undefined) {
    size_t nlv = 0, npf = 0, nk = 0;
    for (size_t t = 0; t < nth; t++) {
        if (x->th[t].fail) {
            return PM_ENOMEM;
        }
        nlv += x->th[t].nlv;
        npf += x->th[t].npf;
        nk += x->th[t].nkeys;
        *seen += x->th[t].seen;
        *undefined += x->th[t].undefined;
        f->above += x->th[t].above;
    }
    f->lv = pm_i_malloc(nlv ? nlv : 1, sizeof *f->lv);
    f->pf = pm_i_malloc(npf ? npf : 1, sizeof *f->pf);
    f->pd = pm_i_malloc(1, sizeof *f->pd);
    *keys = pm_i_malloc(nk ? nk : 1, sizeof **keys);
    if (!f->lv || !f->pf || !f->pd || !*keys) {
        return PM_ENOMEM;
    }
    for (size_t t = 0; t < nth; t++) {
        fam_thread *h = &x->th[t];
        /* a thread that met none leaves its arrays NULL: memcpy may not be given NULL */
        if (h->nlv) {
            memcpy(f->lv + f->nlv, h->lv, h->nlv * sizeof *h->lv);
            f->nlv += h->nlv;
        }
        if (h->npf) {
            memcpy(f->pf + f->npf, h->pf, h->npf * sizeof *h->pf);
            f->npf += h->npf;
        }
        if (h->nkeys) {
            memcpy(*keys + *nkeys, h->keys, h->nkeys * sizeof *h->keys);
            *nkeys += h->nkeys;
        }
    }
    return *nkeys > 1 && pm_i_radix_sort(*keys, *nkeys, sizeof **keys) ? PM_ENOMEM : PM_OK;
}

/* The p-values and q-values of the listed pairs no respondent with a segment chose together. */
static void unseen_listed(fam_ctx *x, const pm_pairs_t *bh, int classes, pm_strat_family_t *out) {
    for (size_t i = 0; i < x->pp->n; i++) {
        if (x->p_listed[i] != -1) {
            continue;
        }
        double p = pair_p(x, x->pp->a[i], x->pp->b[i], NULL);
        x->p_listed[i] = p;
        /* the p-value of its group (the same bits: pm_i_cmh_add is symmetric), looked up */
        out->q[i] = classes ? pm_pairs_qvalue(bh, isnan(p) ? 1.0 : p) : INFINITY;
    }
}

/* After the pass: the never-seen groups, Benjamini-Hochberg, the listed pairs' q-values. */
static pm_err_t finish(fam_ctx *x, size_t nth, int classes, const pm_strat_family_opts_t *o,
                       pm_strat_family_t *out, pm_diag_t *diag) {
    pm_i_family f;
    memset(&f, 0, sizeof f);
    uint64_t *keys = NULL;
    size_t nkeys = 0;
    pm_err_t rc = gather(x, nth, &f, &keys, &nkeys, &out->seen_within, &out->undefined);
    uint64_t unseen = x->pp->hypotheses - out->seen_within;
    if (rc == PM_OK && classes) {
        out->classes = (size_t)x->D;
        rc = unseen_groups(x, keys, nkeys, &f, &out->undefined);
    } else if (rc == PM_OK) {
        f.above += unseen; /* sign positive, limit below 1/2: their p is at least 1/2 */
    }
    pm_pairs_t bh; /* the walk's view: the family's size, q of the listed pairs, the lookup */
    memset(&bh, 0, sizeof bh);
    bh.n = x->pp->n;
    bh.q = out->q;
    bh.hypotheses = x->pp->hypotheses;
    bh.q_limit = x->lim < 1 ? x->lim : 1.0;
    if (rc == PM_OK) {
        for (size_t i = 0; i < x->pp->n; i++) {
            out->q[i] = INFINITY; /* above the limit unless the walk gives a q */
        }
        rc = pm_i_assoc_family_bh(&bh, &f, (unsigned)threads_of(o));
    }
    if (rc == PM_OK) {
        unseen_listed(x, &bh, classes, out);
    }
    free(bh.qp);
    free(bh.qq);
    free(bh.qr); /* the ranks the walk records (pm_pairs_prank) */
    free(f.lv);
    free(f.pf);
    free(f.pd);
    free(f.groups);
    free(keys);
    if (rc == PM_ENOMEM) {
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0,
                           "out of memory for the pair tests within segments");
    }
    return rc;
}

pm_err_t pm_stratified_family_run(const pm_incidence_t *inc, const pm_segcol_t *c,
                                  const pm_pairs_t *pp, const pm_strat_family_opts_t *o,
                                  pm_strat_family_t *out, pm_diag_t *diag) {
    memset(out, 0, sizeof *out);
    if (inc->weight) {
        return pm_diag_set(diag, PM_EUSAGE, NULL, 0,
                           "--pair-test within takes unweighted input only (the "
                           "Cochran-Mantel-Haenszel test counts respondents)");
    }
    fam_ctx x;
    memset(&x, 0, sizeof x);
    x.inc = inc;
    x.c = c;
    x.pp = pp;
    x.k = c->n_levels;
    x.ni = inc->n_items;
    x.sign = o->sign;
    x.lim = o->q_limit >= 0 && o->q_limit < 1 ? o->q_limit : INFINITY;
    x.skip_mean = x.lim < 0.49 && o->sign != PM_SIGN_BOTH;
    size_t nth = threads_of(o), nr = inc->n_resp < c->n_resp ? inc->n_resp : c->n_resp;
    int classes = need_classes(o, x.lim);
    out->hypotheses = pp->hypotheses;
    out->p = pm_i_malloc(pp->n ? pp->n : 1, sizeof *out->p);
    out->q = pm_i_malloc(pp->n ? pp->n : 1, sizeof *out->q);
    x.n = pm_i_malloc(x.k ? x.k : 1, sizeof *x.n);
    x.th = pm_i_calloc(nth, sizeof *x.th);
    pm_err_t rc = out->p && out->q && x.n && x.th ? PM_OK : PM_ENOMEM;
    if (rc == PM_OK) {
        rc = pm_i_strat_lists_build(inc, c, nr, &x.L);
    }
    if (rc == PM_OK && classes) { /* first: the pass records each seen pair's combination */
        rc = classes_build(&x);
    }
    if (rc == PM_OK && classes && x.D * (x.D + 1) / 2 > MAX_CLASS_COMBOS) {
        rc = pm_diag_set(diag, PM_EUSAGE, NULL, 0,
                         "too many distinct per-segment item totals (%llu) to test every "
                         "pair within the segments under this --sign and --max-q; raise "
                         "--min-share or use --sign positive",
                         (unsigned long long)x.D);
    } else if (rc == PM_OK) {
        x.p_listed = out->p;
        for (size_t i = 0; i < pp->n; i++) {
            out->p[i] = -1;
        }
        for (size_t s = 0; s < x.k; s++) {
            x.n[s] = (double)c->base[s];
        }
        x.nchunks = x.ni < 256 ? (x.ni ? x.ni : 1) : 256;
        (void)pm_i_parallel((unsigned)nth, x.nchunks, item_chunk, &x); /* runs every chunk */
        rc = finish(&x, nth, classes, o, out, diag);
    } else {
        rc = pm_diag_set(diag, PM_ENOMEM, NULL, 0,
                         "out of memory for the pair tests within segments");
    }
    threads_free(x.th, nth);
    pm_i_strat_lists_free(&x.L);
    free(x.n);
    free(x.cls);
    free(x.rep);
    free(x.size);
    if (rc) {
        pm_stratified_family_destroy(out);
    }
    return rc;
}
