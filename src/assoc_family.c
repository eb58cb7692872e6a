/* The family of every pair of eligible items (see assoc.h): which items are eligible, the
 * pairs the counting prunes (their p-values kept per thread), the p-values of the listed pairs,
 * the never-seen pairs in classes of equal item totals, and Benjamini-Hochberg over all of them
 * (src/assoc_bh.c). The counting itself (pm_counts_build) runs between pm_assoc_begin and
 * pm_assoc_finish, called by the pipeline. */
#include <gsl/gsl_sf_gamma.h>
#include <limits.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "assoc_internal.h"
#include "parallel.h"
#include "util.h"

void pm_assoc_opts_init(pm_assoc_opts_t *o) {
    memset(o, 0, sizeof *o);
    o->sign = PM_SIGN_POSITIVE;
    o->min_count = 5;
    o->q_limit = 1.0;
}

void pm_pairs_free(pm_pairs_t *p) {
    if (!p) {
        return;
    }
    free(p->a);
    free(p->b);
    free(p->n_ab);
    free(p->w_ab);
    free(p->p);
    free(p->q);
    free(p->test);
    free(p->eligible);
    free(p->in_family);
    free(p->qp);
    free(p->qq);
    free(p->qr);
    free(p);
}

/* A pair's p-value under the run's rules. */
static double pair_p(const lftab *lf, const pm_incidence_t *inc, pm_sign_t sign, double neff,
                     uint32_t a, uint32_t b, uint32_t nab, double wab, unsigned char *test) {
    if (!inc->wcount) {
        unsigned char t;
        double p = pm_i_assoc_counts_p(lf, inc->N, inc->count[a], inc->count[b], nab, sign, &t);
        if (test) {
            *test = t;
        }
        return p;
    }
    pm_measures_t m;
    pm_assoc_weighted(inc->W, inc->wcount[a], inc->wcount[b], wab, neff, sign, &m);
    if (test) {
        *test = (unsigned char)m.test;
    }
    return m.p;
}

/* Per-thread store of pruned pairs: their p-values (sign positive) or identities (otherwise).
 * p-values are kept as doubles: rounding them to float moved ranks and so changed the q-values
 * of kept pairs when --min-count pruned others. */
typedef struct {
    double *pf;
    size_t nf, cf;
    uint32_t *a, *b, *n;
    double *w;
    size_t ni, ci;
    uint64_t above; /* p-values above the q limit: counted, not kept */
    int fail;
} prune_buf;

typedef struct {
    const pm_incidence_t *inc;
    const lftab *lf;
    pm_sign_t sign;
    double neff;
    int keep_ids;
    double lim;    /* p-values above it are only counted (q_limit; +INFINITY: none) */
    int skip_mean; /* pairs seen no more often than expected have p >= 1/2 > lim */
    prune_buf *bufs;
} prune_ctx;

/* True when nab <= na nb / N, that is when the pair is seen no more often than expected
 * (exactly: pm_i_joint_sign). The one-sided
 * "greater" p-value of such a pair is at least 1/2: for chi-square z <= 0; for Fisher's test
 * the median of the hypergeometric distribution is floor or ceil of its mean (Kaas and
 * Buhrman 1980), so P(X >= nab) >= P(X >= median) >= 1/2 (checked exhaustively for small
 * tables in tests/unit/test_assoc.c). */
static inline int at_most_expected(uint64_t N, uint64_t na, uint64_t nb, uint64_t nab) {
    return pm_i_joint_sign(N, na, nb, nab) <= 0;
}

/* Under a q limit below 0.49 (sign positive, unweighted: skip_mean), a pair whose p-value is
 * shown to exceed the limit without computing it: seen no more often than expected, or its
 * first Fisher term over the limit (pm_i_assoc_pruned_p: where Fisher's test applies and nab
 * is above the mode, the p-value is exp(lpmf(nab)) times a sum of at least 1). Such pairs get
 * +INFINITY; the others their p-value, the first term computed once. */
static inline double p_or_above(const lftab *lf, uint64_t N, uint64_t na, uint64_t nb, uint64_t nab,
                                double lim) {
    return at_most_expected(N, na, nb, nab) ? INFINITY
                                            : pm_i_assoc_pruned_p(lf, N, na, nb, nab, lim);
}

/* A pruned pair's p-value, or +INFINITY when it is shown above the limit without it. */
static double pruned_p(const prune_ctx *c, uint32_t a, uint32_t b, uint32_t nab, double wab) {
    const pm_incidence_t *inc = c->inc;
    if (c->skip_mean) {
        return p_or_above(c->lf, inc->N, inc->count[a], inc->count[b], nab, c->lim);
    }
    return pair_p(c->lf, inc, c->sign, c->neff, a, b, nab, wab, NULL);
}

static void on_prune(void *ud, unsigned thread, uint32_t a, uint32_t b, uint32_t nab, double wab) {
    prune_ctx *c = ud;
    prune_buf *pb = &c->bufs[thread];
    if (pb->fail) {
        return;
    }
    if (!c->keep_ids) {
        double p = pruned_p(c, a, b, nab, wab);
        if (p > c->lim) {
            pb->above++;
            return;
        }
        if (pb->nf >= pb->cf && pm_i_grow((void **)&pb->pf, &pb->cf, pb->nf + 1, sizeof *pb->pf)) {
            pb->fail = 1;
            return;
        }
        pb->pf[pb->nf++] = p;
        return;
    }
    if (pb->ni == pb->ci) {
        size_t c1 = pb->ci, c2 = pb->ci, c3 = pb->ci, c4 = pb->ci;
        if (pm_i_grow((void **)&pb->a, &c1, pb->ni + 1, sizeof *pb->a) ||
            pm_i_grow((void **)&pb->b, &c2, pb->ni + 1, sizeof *pb->b) ||
            pm_i_grow((void **)&pb->n, &c3, pb->ni + 1, sizeof *pb->n) ||
            (c->inc->wcount && pm_i_grow((void **)&pb->w, &c4, pb->ni + 1, sizeof *pb->w))) {
            pb->fail = 1;
            return;
        }
        pb->ci = c1;
    }
    pb->a[pb->ni] = a;
    pb->b[pb->ni] = b;
    pb->n[pb->ni] = nab;
    if (pb->w) {
        pb->w[pb->ni] = wab;
    }
    pb->ni++;
}

/* p-values of listed pairs, in parallel over ranges */
typedef struct {
    pm_pairs_t *pp;
    const pm_incidence_t *inc;
    const lftab *lf;
    double neff;
    size_t per;
    int skip_mean; /* as prune_ctx: such pairs get p = +INFINITY (above any q limit) */
    double lim;
} pjob;

static int p_chunk(void *ud, size_t c, unsigned th) {
    (void)th;
    pjob *j = ud;
    pm_pairs_t *pp = j->pp;
    size_t b = c * j->per, e = b + j->per < pp->n ? b + j->per : pp->n;
    const pm_incidence_t *inc = j->inc;
    for (size_t k = b; k < e; k++) {
        uint64_t na = inc->count[pp->a[k]], nb = inc->count[pp->b[k]];
        if (j->skip_mean) {
            /* p above the q limit shown without it: not computed (the pair is never shown),
             * only counted in the family; else the value, its first term computed once */
            pp->p[k] = p_or_above(j->lf, inc->N, na, nb, pp->n_ab[k], j->lim);
            pp->test[k] = test_for(inc->N, na, nb);
            continue;
        }
        pp->p[k] = pair_p(j->lf, inc, pp->sign, j->neff, pp->a[k], pp->b[k], pp->n_ab[k],
                          pp->w_ab ? pp->w_ab[k] : 0, &pp->test[k]);
    }
    return 0;
}

/* key -> count, open addressing, for seen pairs per class combination */
typedef struct {
    uint64_t *key, *val;
    size_t cap, n;
} u64map;

static int map_add(u64map *m, uint64_t key, uint64_t add) {
    if ((m->n + 1) * 2 > m->cap) {
        size_t nc = m->cap ? m->cap * 2 : 1024;
        uint64_t *nk = pm_i_malloc(nc, sizeof *nk), *nv = pm_i_calloc(nc, sizeof *nv);
        if (!nk || !nv) {
            free(nk);
            free(nv);
            return -1;
        }
        memset(nk, 0xff, nc * sizeof *nk);
        for (size_t i = 0; i < m->cap; i++) {
            if (m->key[i] != UINT64_MAX) {
                size_t h = (size_t)(m->key[i] * 0x9E3779B97F4A7C15ULL) & (nc - 1);
                while (nk[h] != UINT64_MAX) {
                    h = (h + 1) & (nc - 1);
                }
                nk[h] = m->key[i];
                nv[h] = m->val[i];
            }
        }
        free(m->key);
        free(m->val);
        m->key = nk;
        m->val = nv;
        m->cap = nc;
    }
    size_t h = (size_t)(key * 0x9E3779B97F4A7C15ULL) & (m->cap - 1);
    while (m->key[h] != UINT64_MAX && m->key[h] != key) {
        h = (h + 1) & (m->cap - 1);
    }
    if (m->key[h] == UINT64_MAX) {
        m->key[h] = key;
        m->n++;
    }
    m->val[h] += add;
    return 0;
}

static uint64_t map_get(const u64map *m, uint64_t key) {
    if (!m->cap) {
        return 0;
    }
    size_t h = (size_t)(key * 0x9E3779B97F4A7C15ULL) & (m->cap - 1);
    while (m->key[h] != UINT64_MAX) {
        if (m->key[h] == key) {
            return m->val[h];
        }
        h = (h + 1) & (m->cap - 1);
    }
    return 0;
}

/* items grouped by their totals: never-seen pairs of two classes share one p-value */

/* Hard cap on class combinations tested for never-seen pairs (weighted input with many
 * distinct item totals under --sign negative|both). */
#define MAX_CLASS_COMBOS 400000000ULL

/* The log-factorial table, filled in chunks on all threads (each entry from GSL alone, so
 * the table does not depend on the number of threads). */
typedef struct {
    double *lf;
    size_t n, chunks;
} lf_job;

static int lf_chunk(void *ud, size_t c, unsigned th) {
    (void)th;
    lf_job *j = ud;
    size_t i0 = j->n * c / j->chunks, i1 = j->n * (c + 1) / j->chunks;
    for (size_t i = i0; i < i1; i++) {
        j->lf[i] = gsl_sf_lnfact((unsigned)i);
    }
    return 0;
}

/* ---- the steps ------------------------------------------------------------------------------ */

struct pm_assoc_stage {
    const pm_incidence_t *inc;
    pm_assoc_opts_t o;
    unsigned threads;
    pm_pairs_t *pp; /* the result being built */
    double neff;
    double *lft; /* the log-factorial table (unweighted input), or NULL */
    lftab lfs;
    const lftab *lf; /* &lfs, or NULL */
    prune_ctx pc;    /* what the counting hands over: the pruned pairs */
    int list_unseen; /* never-seen pairs are listed (sign negative, min_count 0) */
    double t0, t1;   /* counting started, measures started */
};

/* Step 1: which items take part, and the number of hypotheses. */
static pm_err_t eligible_items(pm_assoc_stage_t *st) {
    const pm_incidence_t *inc = st->inc;
    pm_pairs_t *pp = st->pp;
    pp->sign = st->o.sign;
    pp->eligible = pm_i_calloc(inc->n_items ? inc->n_items : 1, 1);
    if (!pp->eligible) {
        return PM_ENOMEM;
    }
    for (size_t i = 0; i < inc->n_items; i++) {
        if (inc->count[i] == 0) {
            pp->excluded_none++;
        } else if (inc->count[i] >= inc->N) {
            pp->excluded_all++;
        } else if (pm_incidence_share(inc, i) < st->o.min_share) {
            pp->excluded_share++;
        } else {
            pp->eligible[i] = 1;
            pp->n_eligible++;
        }
    }
    /* the family (DESIGN.md): pairs of eligible items whose smaller total reaches min_count.
     * A pair with a rarer item can never be seen together min_count times, so it can never
     * be reported; the tests condition on the item totals, so leaving such pairs out keeps
     * the false-discovery control (independent filtering: Bourgon, Gentleman & Huber 2010,
     * PNAS 107:9546-9551) and gives the reportable pairs their power back. */
    pp->in_family = pm_i_calloc(inc->n_items ? inc->n_items : 1, 1);
    if (!pp->in_family) {
        return PM_ENOMEM;
    }
    for (size_t i = 0; i < inc->n_items; i++) {
        if (pp->eligible[i] && inc->count[i] >= st->o.min_count) {
            pp->in_family[i] = 1;
            pp->n_family++;
        }
    }
    uint64_t E = pp->n_family;
    pp->hypotheses = E * (E - (E > 0)) / 2;
    return PM_OK;
}

/* Step 2: log-factorials for Fisher's test (unweighted input only): a table up to what the
 * rows can reach, on demand beyond (lftab). */
static pm_err_t logfact_table(pm_assoc_stage_t *st) {
    const pm_incidence_t *inc = st->inc;
    if (inc->wcount || inc->N > UINT_MAX) {
        return PM_OK;
    }
    uint64_t used = inc->row_ptr[inc->n_resp];
    if (used < inc->n_resp) {
        used = inc->n_resp;
    }
    size_t n = (size_t)(used < inc->N ? used : inc->N) + 1;
    st->lft = pm_i_malloc(n, sizeof *st->lft);
    if (!st->lft) {
        return PM_ENOMEM;
    }
    lf_job lj = {st->lft, n, 64};
    (void)pm_i_parallel(st->threads, lj.chunks, lf_chunk, &lj); /* runs every chunk */
    st->lfs.t = st->lft;
    st->lfs.n = n;
    st->lf = &st->lfs;
    return PM_OK;
}

/* Step 3: the per-thread stores of the pairs the counting prunes, and the q limit's rules. */
static pm_err_t prune_setup(pm_assoc_stage_t *st) {
    prune_ctx *pc = &st->pc;
    pc->inc = st->inc;
    pc->lf = st->lf;
    pc->sign = st->o.sign;
    pc->neff = st->neff;
    pc->keep_ids = st->o.sign != PM_SIGN_POSITIVE;
    /* 0.49, not 0.5: room for the rounding of a p-value whose exact value is 1/2 */
    pc->lim = st->o.q_limit >= 0 && st->o.q_limit < 1 ? st->o.q_limit : INFINITY;
    pc->skip_mean = pc->lim < 0.49 && st->o.sign == PM_SIGN_POSITIVE && !st->inc->wcount;
    st->pp->q_limit = pc->lim < 1 ? pc->lim : 1.0;
    pc->bufs = pm_i_calloc(st->threads, sizeof *pc->bufs);
    return pc->bufs ? PM_OK : PM_ENOMEM;
}

/* The counting's options: eligible items, the prune callback and the caller's settings. */
static void counts_options(pm_assoc_stage_t *st, pm_counts_opts_t *co) {
    const pm_assoc_opts_t *o = &st->o;
    pm_counts_opts_init(co);
    co->threads = st->threads;
    co->min_keep = o->min_count ? o->min_count : 1;
    co->eligible = st->pp->in_family; /* a pair outside the family cannot reach min_count */
    co->prune = on_prune;
    co->prune_ud = &st->pc;
    co->kernel = o->kernel;
    co->dense_max_items = o->dense_max_items;
    co->progress = o->progress;
    co->progress_ud = o->progress_ud;
    co->scratch[0] = o->scratch[0];
    co->scratch[1] = o->scratch[1];
    co->scratch_n = o->scratch_n;
    co->given = o->given;
}

void pm_assoc_stage_free(pm_assoc_stage_t *st) {
    if (!st) {
        return;
    }
    if (st->pc.bufs) {
        for (unsigned t = 0; t < st->threads; t++) {
            free(st->pc.bufs[t].pf);
            free(st->pc.bufs[t].a);
            free(st->pc.bufs[t].b);
            free(st->pc.bufs[t].n);
            free(st->pc.bufs[t].w);
        }
        free(st->pc.bufs);
    }
    free(st->lft);
    pm_pairs_free(st->pp);
    free(st);
}

pm_err_t pm_assoc_begin(const pm_incidence_t *inc, const pm_assoc_opts_t *o, pm_assoc_stage_t **out,
                        pm_counts_opts_t *co, pm_diag_t *diag) {
    *out = NULL;
    pm_assoc_stage_t *st = pm_i_calloc(1, sizeof *st);
    pm_err_t rc = PM_ENOMEM;
    if (st) {
        st->inc = inc;
        st->o = *o;
        st->threads = o->threads ? o->threads : pm_cpu_count();
        if (st->threads > 256) {
            st->threads = 256;
        }
        st->pp = pm_i_calloc(1, sizeof *st->pp);
        rc = st->pp ? eligible_items(st) : PM_ENOMEM;
    }
    if (rc == PM_OK) {
        st->neff = pm_incidence_neff(inc);
        rc = logfact_table(st);
    }
    if (rc == PM_OK) {
        rc = prune_setup(st);
    }
    if (rc) {
        pm_assoc_stage_free(st);
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory while testing pairs");
    }
    counts_options(st, co);
    st->t0 = pm_i_now();
    *out = st;
    return PM_OK;
}

/* Lists every eligible pair, merged with the counted ones (both in (a, b) order). */
static void merge_unseen(pm_pairs_t *pp, const pm_incidence_t *inc, const pm_counts_t *cnt) {
    size_t k = 0, at = 0;
    for (uint32_t a = 0; a < inc->n_items; a++) {
        if (!pp->in_family[a]) {
            continue;
        }
        for (uint32_t b = a + 1; b < inc->n_items; b++) {
            if (!pp->in_family[b]) {
                continue;
            }
            pp->a[at] = a;
            pp->b[at] = b;
            if (k < cnt->n_pairs && cnt->a[k] == a && cnt->b[k] == b) {
                pp->n_ab[at] = cnt->n[k];
                if (pp->w_ab) {
                    pp->w_ab[at] = cnt->w[k];
                }
                k++;
            } else {
                pp->n_ab[at] = 0;
            }
            at++;
        }
    }
    pp->n = at;
}

/* Step 4 (after the counting): the listed pairs, the kept ones plus never-seen ones when they
 * can be selected. Never-seen pairs can only pass the selection as substitutes: listed under
 * --sign negative with --min-count 0 (with both they are tested but not listed). */
static pm_err_t listed_pairs(pm_assoc_stage_t *st, pm_counts_t *cnt) {
    const pm_incidence_t *inc = st->inc;
    pm_pairs_t *pp = st->pp;
    for (unsigned t = 0; t < st->threads; t++) {
        if (st->pc.bufs[t].fail) {
            return PM_ENOMEM;
        }
    }
    pp->kernel = cnt->kernel;
    pp->work = cnt->work;
    pp->seen = cnt->seen;
    pp->below_count = cnt->pruned;
    pp->unseen = pp->hypotheses - pp->seen;
    st->t1 = pm_i_now();
    pp->t_count = st->t1 - st->t0;
    st->list_unseen = st->o.sign == PM_SIGN_NEGATIVE && st->o.min_count == 0;
    size_t nlist = cnt->n_pairs + (st->list_unseen ? (size_t)pp->unseen : 0);
    if (!st->list_unseen) { /* the counts' arrays become the listed pairs' (no copy) */
        pp->a = cnt->a;
        pp->b = cnt->b;
        pp->n_ab = cnt->n;
        pp->w_ab = cnt->w;
        cnt->a = cnt->b = cnt->n = NULL;
        cnt->w = NULL;
        pp->n = cnt->n_pairs;
    } else {
        pp->a = pm_i_malloc(nlist ? nlist : 1, sizeof *pp->a);
        pp->b = pm_i_malloc(nlist ? nlist : 1, sizeof *pp->b);
        pp->n_ab = pm_i_malloc(nlist ? nlist : 1, sizeof *pp->n_ab);
        if (inc->wcount) {
            pp->w_ab = pm_i_calloc(nlist ? nlist : 1, sizeof *pp->w_ab);
        }
    }
    pp->p = pm_i_malloc(nlist ? nlist : 1, sizeof *pp->p);
    pp->q = pm_i_malloc(nlist ? nlist : 1, sizeof *pp->q);
    pp->test = pm_i_malloc(nlist ? nlist : 1, 1);
    if (!pp->a || !pp->b || !pp->n_ab || !pp->p || !pp->q || !pp->test ||
        (inc->wcount && !pp->w_ab)) {
        return PM_ENOMEM;
    }
    if (st->list_unseen) {
        merge_unseen(pp, inc, cnt);
    }
    return PM_OK;
}

/* Step 5: the p-values of the listed pairs, in parallel over ranges. */
static void listed_pvalues(pm_assoc_stage_t *st) {
    pjob j = {st->pp, st->inc, st->lf, st->neff, 4096, st->pc.skip_mean, st->pc.lim};
    size_t nch = (st->pp->n + j.per - 1) / j.per;
    (void)pm_i_parallel(st->threads, nch, p_chunk, &j); /* runs every chunk */
}

enum { MERGE_MAX = 4 }; /* stores merged by looking at each one's head */

static int sort_store(void *ud, size_t c, unsigned t) {
    (void)t;
    prune_buf *pb = &((prune_buf *)ud)[c];
    return pm_i_sort_pvalues(pb->pf, pb->nf, sizeof *pb->pf) ? -1 : 0;
}

/* The threads' stores of pruned p-values (k of them, each in order) merged into out. */
static void merge_stores(const prune_buf *bufs, unsigned k, double *out) {
    size_t at[MERGE_MAX] = {0};
    for (size_t o = 0;; o++) {
        unsigned best = k;
        for (unsigned t = 0; t < k; t++) {
            if (at[t] < bufs[t].nf && (best == k || bufs[t].pf[at[t]] < bufs[best].pf[at[best]])) {
                best = t;
            }
        }
        if (best == k) {
            return;
        }
        out[o] = bufs[best].pf[at[best]++];
    }
}

/* Step 6: the pruned pairs' p-values, gathered from the threads' stores (those kept by
 * identity tested here); the ones above the q limit only counted. With many of them (the large
 * bench file has 13 million) each thread's store is sorted on a thread of its own and the
 * stores merged, in place of one sort of them all on one thread: the same values in the same
 * order (equal doubles cannot be told apart), and a radix sort's scratch of the same size. */
static pm_err_t pruned_pvalues(pm_assoc_stage_t *st, pm_i_family *f) {
    for (unsigned t = 0; t < st->threads; t++) {
        f->npf += st->pc.bufs[t].nf;
        f->npd += st->pc.bufs[t].ni;
        f->above += st->pc.bufs[t].above;
    }
    unsigned k = st->threads;
    if (k > 1 && k <= MERGE_MAX && f->npf > 100000) {
        if (pm_i_parallel(k, k, sort_store, st->pc.bufs)) {
            return PM_ENOMEM;
        }
        f->pf_sorted = 1;
    }
    f->pf = pm_i_malloc(f->npf ? f->npf : 1, sizeof *f->pf);
    f->pd = pm_i_malloc(f->npd ? f->npd : 1, sizeof *f->pd);
    if (!f->pf || !f->pd) {
        return PM_ENOMEM;
    }
    if (f->pf_sorted) {
        merge_stores(st->pc.bufs, k, f->pf);
    }
    size_t at = 0, d = 0;
    for (unsigned t = 0; t < st->threads; t++) {
        prune_buf *pb = &st->pc.bufs[t];
        if (pb->nf && !f->pf_sorted) {
            memcpy(f->pf + at, pb->pf, pb->nf * sizeof *f->pf);
        }
        at += pb->nf;
        free(pb->pf); /* gathered: the store's memory back before the family's sort */
        pb->pf = NULL;
        pb->cf = 0;
        for (size_t i = 0; i < pb->ni; i++) {
            double p = pair_p(st->lf, st->inc, st->o.sign, st->neff, pb->a[i], pb->b[i], pb->n[i],
                              pb->w ? pb->w[i] : 0, NULL);
            if (p > st->pc.lim) {
                f->above++;
            } else {
                f->pd[d++] = p;
            }
        }
    }
    f->npd = d;
    return PM_OK;
}

/* Classes of eligible items with equal totals: cls[item] is its class, csize[c] the class's
 * size, crep[c] an item of it (the first by totals, then index). */
typedef struct {
    uint32_t *cls;
    uint64_t *csize;
    uint32_t *crep;
    size_t D;
} item_classes;

typedef struct {
    double w;
    uint64_t c;
    uint32_t i;
} item_total;

/* items grouped by their totals: weighted total (when weighted), count, then index */
static int cmp_item_total(const void *x, const void *y) {
    const item_total *a = x, *b = y;
    if (a->w != b->w) {
        return a->w < b->w ? -1 : 1;
    }
    if (a->c != b->c) {
        return a->c < b->c ? -1 : 1;
    }
    return a->i < b->i ? -1 : a->i > b->i;
}

static pm_err_t classes_build(const pm_assoc_stage_t *st, item_classes *cl) {
    const pm_incidence_t *inc = st->inc;
    size_t ne = (size_t)st->pp->n_family;
    item_total *order = pm_i_malloc(ne ? ne : 1, sizeof *order);
    cl->cls = pm_i_malloc(inc->n_items ? inc->n_items : 1, sizeof *cl->cls);
    cl->csize = pm_i_calloc(ne ? ne : 1, sizeof *cl->csize);
    cl->crep = pm_i_malloc(ne ? ne : 1, sizeof *cl->crep);
    if (!order || !cl->cls || !cl->csize || !cl->crep) {
        free(order);
        return PM_ENOMEM;
    }
    size_t w = 0;
    for (uint32_t i = 0; i < inc->n_items; i++) {
        if (st->pp->in_family[i]) {
            order[w].w = inc->wcount ? inc->wcount[i] : 0;
            order[w].c = inc->count[i];
            order[w++].i = i;
        }
    }
    qsort(order, ne, sizeof *order, cmp_item_total);
    size_t D = 0;
    for (size_t i = 0; i < ne; i++) {
        uint32_t it = order[i].i;
        if (i == 0 || order[i].c != order[i - 1].c || order[i].w != order[i - 1].w) {
            cl->crep[D++] = it;
        }
        cl->cls[it] = (uint32_t)(D - 1);
        cl->csize[D - 1]++;
    }
    cl->D = D;
    free(order);
    return PM_OK;
}

static int combo_add(u64map *m, const item_classes *cl, uint32_t a, uint32_t b) {
    uint64_t ca = cl->cls[a], cb = cl->cls[b];
    if (ca > cb) {
        uint64_t t = ca;
        ca = cb;
        cb = t;
    }
    return map_add(m, ca * cl->D + cb, 1);
}

/* Seen pairs per class combination: the listed and the pruned ones. */
static pm_err_t combos_seen(const pm_assoc_stage_t *st, const item_classes *cl, u64map *m) {
    const pm_pairs_t *pp = st->pp;
    for (size_t k = 0; k < pp->n; k++) {
        if (combo_add(m, cl, pp->a[k], pp->b[k])) {
            return PM_ENOMEM;
        }
    }
    for (unsigned t = 0; t < st->threads; t++) {
        const prune_buf *pb = &st->pc.bufs[t];
        for (size_t i = 0; i < pb->ni; i++) {
            if (combo_add(m, cl, pb->a[i], pb->b[i])) {
                return PM_ENOMEM;
            }
        }
    }
    return PM_OK;
}

/* One group per class combination with never-seen pairs: their shared p-value. */
static pm_err_t combo_groups(const pm_assoc_stage_t *st, const item_classes *cl, const u64map *m,
                             pm_i_family *f) {
    size_t gcap = 0, D = cl->D;
    for (size_t ca = 0; ca < D; ca++) {
        for (size_t cb = ca; cb < D; cb++) {
            uint64_t tot =
                ca == cb ? cl->csize[ca] * (cl->csize[ca] - 1) / 2 : cl->csize[ca] * cl->csize[cb];
            uint64_t un = tot - map_get(m, (uint64_t)ca * D + cb);
            if (!un) {
                continue;
            }
            if (pm_i_grow((void **)&f->groups, &gcap, f->ngroups + 1, sizeof *f->groups)) {
                return PM_ENOMEM;
            }
            double gp = pair_p(st->lf, st->inc, st->o.sign, st->neff, cl->crep[ca], cl->crep[cb], 0,
                               0, NULL);
            if (gp > st->pc.lim) {
                f->above += un;
                continue;
            }
            f->groups[f->ngroups].p = gp;
            f->groups[f->ngroups].mult = un;
            f->ngroups++;
        }
    }
    return PM_OK;
}

/* Never-seen pairs under sign negative or both: classes of items with equal totals share one
 * p-value per class combination. */
static pm_err_t unseen_classes(const pm_assoc_stage_t *st, pm_i_family *f, pm_diag_t *diag) {
    item_classes cl = {NULL, NULL, NULL, 0};
    u64map seen = {0};
    pm_err_t rc = classes_build(st, &cl);
    if (rc == PM_OK && (uint64_t)cl.D * (cl.D + 1) / 2 > MAX_CLASS_COMBOS) {
        rc = pm_diag_set(diag, PM_EUSAGE, NULL, 0,
                         "too many distinct item totals (%zu) to test every never-seen "
                         "pair under this --sign; raise --min-share or use --sign "
                         "positive",
                         cl.D);
    }
    if (rc == PM_OK) {
        rc = combos_seen(st, &cl, &seen);
    }
    if (rc == PM_OK) {
        rc = combo_groups(st, &cl, &seen, f);
    }
    free(cl.cls);
    free(cl.csize);
    free(cl.crep);
    free(seen.key);
    free(seen.val);
    return rc;
}

/* Step 7: the never-seen pairs that are not listed, in groups sharing a p-value. */
static pm_err_t unseen_groups(const pm_assoc_stage_t *st, pm_i_family *f, pm_diag_t *diag) {
    const pm_pairs_t *pp = st->pp;
    if (st->list_unseen || pp->unseen == 0) {
        return PM_OK;
    }
    if (st->o.sign != PM_SIGN_POSITIVE) {
        return unseen_classes(st, f, diag);
    }
    /* one-sided "greater" p of a never-seen pair: 1 for Fisher's test; the chi-square p
     * (>= 0.5) is taken as 1 too, as DESIGN.md fixes */
    f->groups = pm_i_malloc(1, sizeof *f->groups);
    if (!f->groups) {
        return PM_ENOMEM;
    }
    f->groups[0].p = 1.0;
    f->groups[0].mult = pp->unseen;
    f->ngroups = 1;
    if (f->groups[0].p > st->pc.lim) {
        f->above += pp->unseen;
        f->ngroups = 0;
    }
    return PM_OK;
}

/* Step 8: the listed pairs' p-values as the walk takes them (those above the limit get q =
 * +INFINITY and are only counted). */
static pm_err_t listed_family(const pm_assoc_stage_t *st, pm_i_family *f) {
    const pm_pairs_t *pp = st->pp;
    f->lv = pm_i_malloc(pp->n ? pp->n : 1, sizeof *f->lv);
    if (!f->lv) {
        return PM_ENOMEM;
    }
    for (size_t k = 0; k < pp->n; k++) {
        if (pp->p[k] > st->pc.lim) {
            pp->q[k] = INFINITY;
            f->above++;
            continue;
        }
        f->lv[f->nlv].p = pp->p[k];
        f->lv[f->nlv].i = k;
        f->nlv++;
    }
    return PM_OK;
}

/* How many of the p-values v[0..n), sorted ascending (as the walk left them: no NaN), have a
 * q-value within the limit. A q-value never falls as p grows (the walk's running minimum, and
 * +INFINITY above the limit), so they are a prefix of v: its length by halving, where asking
 * each p-value's q (a search of its own) took a second on the large bench file's pruned pairs. */
static uint64_t q_within(const pm_pairs_t *pp, const double *v, size_t n) {
    size_t lo = 0, hi = n;
    while (lo < hi) {
        size_t mid = lo + (hi - lo) / 2;
        if (pm_pairs_qvalue(pp, v[mid]) <= pp->q_limit) {
            lo = mid + 1;
        } else {
            hi = mid;
        }
    }
    return lo;
}

pm_err_t pm_assoc_finish(pm_assoc_stage_t *st, pm_counts_t *cnt, pm_pairs_t **out,
                         pm_diag_t *diag) {
    *out = NULL;
    pm_i_family f;
    memset(&f, 0, sizeof f);
    pm_err_t rc = listed_pairs(st, cnt);
    pm_counts_free(cnt);
    if (rc == PM_OK) {
        listed_pvalues(st);
    }
    if (rc == PM_OK) {
        rc = pruned_pvalues(st, &f);
    }
    if (rc == PM_OK) {
        rc = unseen_groups(st, &f, diag);
    }
    if (rc == PM_OK) {
        rc = listed_family(st, &f);
    }
    if (rc == PM_OK) { /* step 9: Benjamini-Hochberg over the whole family */
        rc = pm_i_assoc_family_bh(st->pp, &f, st->threads);
    }
    if (rc == PM_OK) { /* the pruned pairs that --min-count alone keeps out of the listing */
        st->pp->below_count_q = q_within(st->pp, f.pf, f.npf) + q_within(st->pp, f.pd, f.npd);
    }
    free(f.lv);
    free(f.pf);
    free(f.pd);
    free(f.groups);
    if (rc) {
        pm_assoc_stage_free(st);
        if (rc == PM_ENOMEM) {
            return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory while testing pairs");
        }
        return rc;
    }
    pm_pairs_t *pp = st->pp;
    /* NaN p-values (cannot happen for eligible items) get NaN q */
    for (size_t k = 0; k < pp->n; k++) {
        if (isnan(pp->p[k])) {
            pp->q[k] = NAN;
        }
    }
    pp->t_measures = pm_i_now() - st->t1;
    st->pp = NULL;
    pm_assoc_stage_free(st);
    *out = pp;
    return PM_OK;
}

double pm_pairs_qvalue(const pm_pairs_t *pp, double p) {
    if (p > pp->q_limit && pp->q_limit < 1) {
        return INFINITY;
    }
    if (isnan(p) || pp->nq == 0) {
        return NAN;
    }
    /* largest recorded p <= p */
    size_t lo = 0, hi = pp->nq;
    while (lo < hi) {
        size_t mid = lo + (hi - lo) / 2;
        if (pp->qp[mid] <= p) {
            lo = mid + 1;
        } else {
            hi = mid;
        }
    }
    if (lo == 0) {
        return pp->qq[0];
    }
    return pp->qq[lo - 1];
}

uint64_t pm_pairs_prank(const pm_pairs_t *pp, double p) {
    if (isnan(p) || pp->nq == 0) {
        return 0;
    }
    if (p > pp->q_limit && pp->q_limit < 1) {
        return pp->hypotheses; /* not ranked exactly: above the limit */
    }
    size_t lo = 0, hi = pp->nq; /* largest recorded p <= p */
    while (lo < hi) {
        size_t mid = lo + (hi - lo) / 2;
        if (pp->qp[mid] <= p) {
            lo = mid + 1;
        } else {
            hi = mid;
        }
    }
    return lo == 0 ? 0 : pp->qr[lo - 1];
}

long pm_pairs_find(const pm_pairs_t *pp, uint32_t a, uint32_t b) {
    size_t lo = 0, hi = pp->n;
    while (lo < hi) {
        size_t mid = lo + (hi - lo) / 2;
        if (pp->a[mid] < a || (pp->a[mid] == a && pp->b[mid] < b)) {
            lo = mid + 1;
        } else {
            hi = mid;
        }
    }
    if (lo < pp->n && pp->a[lo] == a && pp->b[lo] == b) {
        return (long)lo;
    }
    return -1;
}

void pm_pairs_measure_any(const pm_pairs_t *pp, const pm_incidence_t *inc, uint32_t a, uint32_t b,
                          uint32_t nab, double wab, pm_measures_t *m) {
    if (inc->wcount) {
        pm_assoc_weighted(inc->W, inc->wcount[a], inc->wcount[b], wab, pm_incidence_neff(inc),
                          pp->sign, m);
        m->together = pm_incidence_wunits(inc, m->together); /* in the file's units */
        m->expected = pm_incidence_wunits(inc, m->expected);
    } else {
        pm_assoc_counts(inc->N, inc->count[a], inc->count[b], nab, pp->sign, m);
    }
    m->q = pp->in_family[a] && pp->in_family[b] ? pm_pairs_qvalue(pp, m->p) : NAN;
}

void pm_pairs_measures(const pm_pairs_t *pp, const pm_incidence_t *inc, size_t k,
                       pm_measures_t *m) {
    uint32_t a = pp->a[k], b = pp->b[k];
    if (inc->wcount) {
        /* chi-square only: cheap, recompute */
        pm_assoc_weighted(inc->W, inc->wcount[a], inc->wcount[b], pp->w_ab[k],
                          pm_incidence_neff(inc), pp->sign, m);
        m->together = pm_incidence_wunits(inc, m->together); /* in the file's units */
        m->expected = pm_incidence_wunits(inc, m->expected);
    } else {
        pm_i_assoc_counts_measures(NULL, inc->N, inc->count[a], inc->count[b], pp->n_ab[k],
                                   pp->sign, m, 0);
    }
    m->p = pp->p[k];
    m->q = pp->q[k];
    m->test = (pm_test_t)pp->test[k];
}
