/* Benjamini-Hochberg over the whole family of pairs (see assoc.h): the p-values sorted by radix
 * on their top 32 bits, then exactly, and one walk from the largest downwards that fills the
 * q-values of the listed pairs and the lookup table of every other p-value of the family. */
#include <math.h>
#include <pthread.h>
#include <stdlib.h>
#include <string.h>

#include "assoc_internal.h"
#include "util.h"

static int cmp_pgroup(const void *x, const void *y) {
    const pgroup *a = x, *b = y;
    return a->p < b->p ? -1 : a->p > b->p;
}

/* Sorts records whose first member is a p-value (a double) by it, stably. p-values are >= 0,
 * so their bit patterns order as unsigned integers (pm_i_radix_sort); -0.0 becomes 0 and a NaN
 * (impossible for eligible items) 1, which would otherwise break that order. */
int pm_i_sort_pvalues(void *base, size_t n, size_t size) {
    unsigned char *b = base;
    for (size_t i = 0; i < n; i++) {
        double p;
        memcpy(&p, b + i * size, sizeof p);
        if (!(p > 0)) {
            p = isnan(p) ? 1.0 : 0.0;
            memcpy(b + i * size, &p, sizeof p);
        }
    }
    /* by the top 32 bits (sign, exponent and 20 bits of mantissa: three radix passes instead
     * of six), then each run of equal top bits by the whole value, stably: insertion for
     * short runs, the full radix sort for long ones (e.g. many p-values just below 1) */
    if (pm_i_radix_sort_from(base, n, size, 32)) {
        return -1;
    }
    unsigned char tmp[64];
    if (size > sizeof tmp) {
        return pm_i_radix_sort(base, n, size);
    }
    for (size_t r0 = 0; r0 < n;) {
        uint64_t top;
        memcpy(&top, b + r0 * size, 8);
        top >>= 32;
        size_t r1 = r0 + 1;
        for (; r1 < n; r1++) {
            uint64_t k;
            memcpy(&k, b + r1 * size, 8);
            if (k >> 32 != top) {
                break;
            }
        }
        if (r1 - r0 > 32) { /* a long run: the full sort on it (stable too), never n^2 */
            if (pm_i_radix_sort(b + r0 * size, r1 - r0, size)) {
                return -1;
            }
            r0 = r1;
            continue;
        }
        for (size_t i = r0 + 1; i < r1; i++) {
            uint64_t ki;
            memcpy(&ki, b + i * size, 8);
            size_t j = i;
            for (; j > r0; j--) {
                uint64_t kj;
                memcpy(&kj, b + (j - 1) * size, 8);
                if (kj <= ki) {
                    break;
                }
            }
            if (j < i) {
                memcpy(tmp, b + i * size, size);
                memmove(b + (j + 1) * size, b + j * size, (i - j) * size);
                memcpy(b + j * size, tmp, size);
            }
        }
        r0 = r1;
    }
    return 0;
}

typedef struct {
    void *base;
    size_t n, size;
    int rc;
} sort_job;

static void *sort_main(void *arg) {
    sort_job *j = arg;
    j->rc = pm_i_sort_pvalues(j->base, j->n, j->size);
    return NULL;
}

/* key -> count, open addressing, for seen pairs per class combination */
typedef struct {
    uint64_t *key, *val;
    size_t cap, n;
} u64map;

/* The family's p-values in ascending order: lv by p (equal ones in index order: the order
 * pm_assoc_bh's cmp_pidx gives), pf and pd; the three sorts are independent, so pf (the
 * pruned p-values, the most numerous) runs on a second thread when there are many. */
static pm_err_t sort_family(pm_i_family *f, unsigned threads) {
    sort_job sj = {f->pf, f->pf_sorted ? 0 : f->npf, sizeof *f->pf, 0};
    pthread_t sth;
    int sthreaded = threads > 1 && sj.n > 100000 && pthread_create(&sth, NULL, sort_main, &sj) == 0;
    int src = pm_i_sort_pvalues(f->lv, f->nlv, sizeof *f->lv) |
              pm_i_sort_pvalues(f->pd, f->npd, sizeof *f->pd);
    if (sthreaded) {
        pthread_join(sth, NULL);
    } else {
        sort_main(&sj);
    }
    if (src || sj.rc) {
        return PM_ENOMEM;
    }
    if (f->ngroups) { /* groups may be NULL: qsort's pointer must not be (UBSan, issue 6) */
        qsort(f->groups, f->ngroups, sizeof *f->groups, cmp_pgroup);
    }
    return PM_OK;
}

/* The largest p-value not yet walked, or -INFINITY when none is left. */
static double next_largest(const pm_i_family *f, size_t il, size_t ifl, size_t id, size_t ig) {
    double v = -INFINITY;
    if (il && f->lv[il - 1].p > v) {
        v = f->lv[il - 1].p;
    }
    if (ifl && f->pf[ifl - 1] > v) {
        v = f->pf[ifl - 1];
    }
    if (id && f->pd[id - 1] > v) {
        v = f->pd[id - 1];
    }
    if (ig && f->groups[ig - 1].p > v) {
        v = f->groups[ig - 1].p;
    }
    return v;
}

/* Reverses the lookup table (stored descending by the walk) to ascending. */
static void reverse_lookup(pm_pairs_t *pp, size_t nq) {
    for (size_t i = 0; i < nq / 2; i++) {
        double t = pp->qp[i];
        pp->qp[i] = pp->qp[nq - 1 - i];
        pp->qp[nq - 1 - i] = t;
        t = pp->qq[i];
        pp->qq[i] = pp->qq[nq - 1 - i];
        pp->qq[nq - 1 - i] = t;
        uint64_t r = pp->qr[i];
        pp->qr[i] = pp->qr[nq - 1 - i];
        pp->qr[nq - 1 - i] = r;
    }
    pp->nq = nq;
}

/* The walk: every p-value of the family from the largest down, the running minimum of
 * p m / rank; listed pairs get their q, and every distinct value is recorded with its q for
 * pm_pairs_qvalue and its rank for pm_pairs_prank. */
static pm_err_t bh_walk(pm_pairs_t *pp, const pm_i_family *f) {
    size_t il = f->nlv, ifl = f->npf, id = f->npd, ig = f->ngroups;
    /* The table gets at most one entry per value walked: made that long at once (only the
     * pages written are ever touched) and cut to its length at the end, instead of grown by
     * doubling, whose copies into fresh pages cost more than the walk itself on the large
     * bench file (3.1 million entries of at most 14.1 million). */
    size_t cap = il + ifl + id + ig;
    if (cap < 16) {
        cap = 16;
    }
    pp->qp = pm_i_malloc(cap, sizeof *pp->qp);
    pp->qq = pm_i_malloc(cap, sizeof *pp->qq);
    pp->qr = pm_i_malloc(cap, sizeof *pp->qr);
    if (!pp->qp || !pp->qq || !pp->qr) {
        return PM_ENOMEM; /* pm_pairs_free frees what was made */
    }
    /* the p-values above the limit are the largest of the family: the walk starts below
     * them with their number taken off the rank, so every q <= the limit is the same as
     * in the whole walk (the larger ones only raise the running minimum above the limit) */
    uint64_t rank = f->above <= pp->hypotheses ? pp->hypotheses - f->above : 0;
    double run = 1.0, m = (double)pp->hypotheses;
    size_t nq = 0;
    while (il || ifl || id || ig) {
        double v = next_largest(f, il, ifl, id, ig);
        if (isnan(v) || v == -INFINITY) {
            break;
        }
        double val = rank ? v * m / (double)rank : v;
        if (val < run) {
            run = val;
        }
        uint64_t used = 0;
        while (il && f->lv[il - 1].p == v) {
            pp->q[f->lv[il - 1].i] = run;
            il--;
            used++;
        }
        while (ifl && f->pf[ifl - 1] == v) {
            ifl--;
            used++;
        }
        while (id && f->pd[id - 1] == v) {
            id--;
            used++;
        }
        while (ig && f->groups[ig - 1].p == v) {
            used += f->groups[ig - 1].mult;
            ig--;
        }
        {                    /* every distinct p: its q and its rank (pm_pairs_prank, explain) */
            if (nq >= cap) { /* cannot happen: one entry per value at most */
                return PM_ENOMEM;
            }
            pp->qp[nq] = v;
            pp->qq[nq] = run;
            pp->qr[nq] = rank; /* family p-values <= v */
            nq++;
        }
        rank = used <= rank ? rank - used : 0;
    }
    if (nq < cap) { /* the unused tail given back (a shrink: cannot fail, else kept) */
        size_t keep = nq ? nq : 1;
        double *a = realloc(pp->qp, keep * sizeof *pp->qp);
        double *b = realloc(pp->qq, keep * sizeof *pp->qq);
        uint64_t *c = realloc(pp->qr, keep * sizeof *pp->qr);
        pp->qp = a ? a : pp->qp;
        pp->qq = b ? b : pp->qq;
        pp->qr = c ? c : pp->qr;
    }
    reverse_lookup(pp, nq);
    return PM_OK;
}

pm_err_t pm_i_assoc_family_bh(pm_pairs_t *pp, pm_i_family *f, unsigned threads) {
    pm_err_t rc = sort_family(f, threads);
    if (rc == PM_OK) {
        rc = bh_walk(pp, f);
    }
    return rc;
}
