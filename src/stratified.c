/* Pairs within segments (include/pairmap/stratified.h): Mantel-Haenszel, Robins-Breslow-
 * Greenland, Cochran-Mantel-Haenszel, Breslow-Day with Tarone's correction, Simpson
 * reversal; per-stratum joint counts of the listed edges. */
#include "pairmap/stratified.h"

#include <gsl/gsl_cdf.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "pairmap/cooccur.h"
#include "stratified_internal.h"
#include "parallel.h"
#include "util.h"

#define Z975 1.959963984540054 /* the 0.975 normal quantile */

/* Breslow-Day with Tarone's correction at common odds ratio r (finite, > 0). */
static double breslow_day(size_t k, const uint64_t *n, const uint64_t *na, const uint64_t *nb,
                          const uint64_t *nab, double r) {
    double stat = 0, diff = 0, vsum = 0;
    size_t inf = 0;
    for (size_t s = 0; s < k; s++) {
        if (!(na[s] > 0 && na[s] < n[s] && nb[s] > 0 && nb[s] < n[s])) {
            continue; /* A fixed by the margins: no information on this stratum's odds ratio */
        }
        inf++;
        double r1 = (double)na[s], c1 = (double)nb[s], N = (double)n[s];
        double dma = N - r1 - c1; /* D - A, from the margins */
        /* the root of (1 - r) e^2 + (r (r1 + c1) + dma) e - r r1 c1 = 0 in (max(0, -dma),
         * min(r1, c1)), written as -2c / (b + sqrt(b^2 - 4ac)): no cancellation, and the
         * linear case r = 1 (e = r1 c1 / N) included */
        double a = 1 - r, b = r * (r1 + c1) + dma, c = -r * r1 * c1;
        double e = -2 * c / (b + sqrt(b * b - 4 * a * c));
        double v = 1 / (1 / e + 1 / (c1 - e) + 1 / (r1 - e) + 1 / (dma + e));
        double A = (double)nab[s];
        stat += (A - e) * (A - e) / v;
        diff += A - e;
        vsum += v;
    }
    if (inf < 2) {
        return NAN;
    }
    stat -= diff * diff / vsum; /* Tarone's correction */
    return stat <= 0 ? 1.0 : gsl_cdf_chisq_Q(stat, (double)(inf - 1));
}

void pm_stratified_pair(size_t k, const uint64_t *n, const uint64_t *na, const uint64_t *nb,
                        const uint64_t *nab, pm_sign_t sign, pm_strat_t *out) {
    double R = 0, S = 0, pr = 0, mid = 0, qs = 0, sa = 0, se = 0, sv = 0;
    uint64_t T[4] = {0, 0, 0, 0}; /* the summed table A, B, C, D */
    for (size_t s = 0; s < k; s++) {
        if (n[s] == 0) {
            continue;
        }
        double N = (double)n[s], r1 = (double)na[s], c1 = (double)nb[s];
        double A = (double)nab[s], B = r1 - A, C = c1 - A, D = N - r1 - c1 + A;
        double ad = A * D / N, bc = B * C / N, P = (A + D) / N, Q = (B + C) / N;
        R += ad;
        S += bc;
        pr += P * ad;
        mid += P * bc + Q * ad;
        qs += Q * bc;
        sa += A;
        pm_i_cmh_add(N, r1, c1, &se, &sv);
        T[0] += nab[s];
        T[1] += na[s] - nab[s];
        T[2] += nb[s] - nab[s];
        T[3] += n[s] - na[s] - nb[s] + nab[s];
    }
    out->mh_low = out->mh_high = out->het_p = out->cmh_p = NAN;
    out->reversed = -1;
    if (R == 0 && S == 0) {
        out->mh_or = NAN;
    } else if (S == 0 || R == 0) {
        out->mh_or = S == 0 ? INFINITY : 0;
    } else {
        out->mh_or = R / S;
        double var = pr / (2 * R * R) + mid / (2 * R * S) + qs / (2 * S * S);
        double lo = log(out->mh_or), h = Z975 * sqrt(var);
        out->mh_low = exp(lo - h);
        out->mh_high = exp(lo + h);
        out->het_p = breslow_day(k, n, na, nb, nab, out->mh_or);
    }
    out->cmh_p = pm_i_cmh_p(sa, se, sv, sign);
    if (!isnan(out->mh_or)) {
        out->reversed = 0;
        if (T[0] && T[1] && T[2] && T[3] && !isnan(out->mh_low)) {
            double a = (double)T[0], b = (double)T[1], c = (double)T[2], d = (double)T[3];
            double l = log(a * d / (b * c)), h = Z975 * sqrt(1 / a + 1 / b + 1 / c + 1 / d);
            double clo = exp(l - h), chi = exp(l + h);
            out->reversed = (clo > 1 && out->mh_high < 1) || (chi < 1 && out->mh_low > 1);
        }
    }
}

/* ---- the lists ---------------------------------------------------------------------------- */
void pm_i_strat_lists_free(pm_i_strat_lists *l) {
    free(l->start);
    free(l->resp);
    free(l->tot);
    memset(l, 0, sizeof *l);
}

pm_err_t pm_i_strat_lists_build(const pm_incidence_t *inc, const pm_segcol_t *c, size_t nr,
                                pm_i_strat_lists *l) {
    size_t k = c->n_levels, ni = inc->n_items;
    memset(l, 0, sizeof *l);
    uint64_t nnz = 0;
    for (size_t q = 0; q < nr; q++) {
        nnz += c->of[q] >= 0 ? inc->row_ptr[q + 1] - inc->row_ptr[q] : 0;
    }
    l->start = pm_i_calloc(ni + 1, sizeof *l->start);
    l->resp = pm_i_malloc(nnz ? (size_t)nnz : 1, sizeof *l->resp);
    l->tot = pm_i_calloc(k * ni > 0 ? k * ni : 1, sizeof *l->tot);
    uint64_t *cur = pm_i_malloc(ni ? ni : 1, sizeof *cur);
    if (!l->start || !l->resp || !l->tot || !cur || (uint64_t)(size_t)nnz != nnz) {
        free(cur);
        pm_i_strat_lists_free(l);
        return PM_ENOMEM;
    }
    for (size_t q = 0; q < nr; q++) { /* the counts per item and level */
        if (c->of[q] < 0) {
            continue;
        }
        for (uint64_t p = inc->row_ptr[q]; p < inc->row_ptr[q + 1]; p++) {
            l->start[inc->col[p] + 1]++;
            l->tot[(size_t)inc->col[p] * k + (size_t)c->of[q]]++;
        }
    }
    for (size_t i = 0; i < ni; i++) {
        l->start[i + 1] += l->start[i];
    }
    memcpy(cur, l->start, ni * sizeof *cur);
    for (size_t q = 0; q < nr; q++) {
        if (c->of[q] < 0) {
            continue;
        }
        for (uint64_t p = inc->row_ptr[q]; p < inc->row_ptr[q + 1]; p++) {
            l->resp[cur[inc->col[p]]++] = (uint32_t)q;
        }
    }
    free(cur);
    return PM_OK;
}

/* ---- the edges --------------------------------------------------------------------------- */
typedef struct {
    const pm_pairs_t *pp;
    const pm_edges_t *e;
} edge_order;

/* edges by item a, then position (stable) */
static int cmp_edge(const void *x, const void *y, const void *ud) {
    const edge_order *o = ud;
    size_t i = *(const size_t *)x, j = *(const size_t *)y;
    uint32_t a = o->pp->a[o->e->idx[i]], b = o->pp->a[o->e->idx[j]];
    return a < b ? -1 : a > b ? 1 : (i < j ? -1 : i > j);
}

/* The edges in order (by item a) cut into chunks at changes of a, shared by the threads: each
 * thread stamps its items' respondents in a mark array of its own (an item's edges all lie in
 * one chunk, so the stamp a + 1 marks exactly a's respondents), and every edge's figures
 * depend on that edge only: the same on any number of threads. */
#define SEDGE_CHUNKS 64
#define SEDGE_MAX_THREADS 8
#define SEDGE_NABS ((size_t)1 << 21) /* counts (16 MiB) a thread holds for one item's edges */
typedef struct {
    const pm_incidence_t *inc;
    const pm_segcol_t *c;
    const pm_pairs_t *pp;
    const pm_edges_t *e;
    pm_sign_t sign;
    const pm_i_strat_lists *L;
    const size_t *order;
    size_t bound[SEDGE_CHUNKS + 1];
    uint32_t *mark[SEDGE_MAX_THREADS]; /* [nr] per thread */
    uint64_t *cnt[SEDGE_MAX_THREADS];  /* [4 k] per thread */
    uint32_t *slot[SEDGE_MAX_THREADS]; /* [items] per thread: partner -> 1 + its place, or 0 */
    uint64_t *nabs[SEDGE_MAX_THREADS]; /* [nabs_len] per thread */
    size_t nabs_len;                   /* k x the largest group, at most SEDGE_NABS (>= k) */
    pm_strat_t *r;
} sedge_job;

#define SEDGE_ITEM(j, o) ((j)->pp->a[(j)->e->idx[(j)->order[o]]])
#define SEDGE_PARTNER(j, o) ((j)->pp->b[(j)->e->idx[(j)->order[o]]])

/* The joint counts per level of the edges [o0, o1) of item a, into nab (k per edge), by the
 * cheaper of two ways that count the same: each partner's respondents looked up among a's
 * (stamped in mark), or the rows of a's respondents scanned once for the partners (slot). */
static void group_counts(sedge_job *j, unsigned th, uint32_t a, size_t o0, size_t o1,
                         uint64_t *nab) {
    const pm_i_strat_lists *L = j->L;
    const pm_incidence_t *inc = j->inc;
    size_t k = j->c->n_levels, g = o1 - o0;
    uint64_t by_partner = 0, by_rows = 0;
    for (size_t o = o0; o < o1; o++) {
        uint32_t b = SEDGE_PARTNER(j, o);
        by_partner += L->start[b + 1] - L->start[b];
    }
    for (uint64_t p = L->start[a]; p < L->start[a + 1]; p++) {
        uint32_t q = L->resp[p];
        by_rows += inc->row_ptr[q + 1] - inc->row_ptr[q];
    }
    memset(nab, 0, g * k * sizeof *nab);
    if (by_rows < by_partner) {
        uint32_t *slot = j->slot[th], lb = UINT32_MAX;
        for (size_t o = o0; o < o1; o++) {
            uint32_t b = SEDGE_PARTNER(j, o);
            slot[b] = (uint32_t)(o - o0) + 1;
            lb = b < lb ? b : lb;
        }
        for (uint64_t p = L->start[a]; p < L->start[a + 1]; p++) {
            uint32_t q = L->resp[p];
            size_t s = (size_t)j->c->of[q];
            /* a row's items ascend: only those from the smallest partner on */
            for (uint64_t x = inc->row_ptr[q + 1]; x > inc->row_ptr[q] && inc->col[x - 1] >= lb;
                 x--) {
                uint32_t sl = slot[inc->col[x - 1]];
                if (sl) {
                    nab[(size_t)(sl - 1) * k + s]++;
                }
            }
        }
        for (size_t o = o0; o < o1; o++) {
            slot[SEDGE_PARTNER(j, o)] = 0;
        }
        return;
    }
    uint32_t *mark = j->mark[th];
    for (uint64_t p = L->start[a]; p < L->start[a + 1]; p++) { /* the stamp a + 1 */
        mark[L->resp[p]] = a + 1;
    }
    for (size_t o = o0; o < o1; o++) {
        uint32_t b = SEDGE_PARTNER(j, o);
        uint64_t *row = nab + (o - o0) * k;
        for (uint64_t p = L->start[b]; p < L->start[b + 1]; p++) {
            uint32_t q = L->resp[p];
            if (mark[q] == a + 1) {
                row[j->c->of[q]]++;
            }
        }
    }
}

static int sedge_chunk(void *ud, size_t ch, unsigned th) {
    sedge_job *j = ud;
    const pm_i_strat_lists *L = j->L;
    size_t k = j->c->n_levels;
    uint64_t *n = j->cnt[th], *na = n + k, *nb = n + 2 * k;
    for (size_t s = 0; s < k; s++) {
        n[s] = j->c->base[s];
    }
    for (size_t o0 = j->bound[ch], o1; o0 < j->bound[ch + 1]; o0 = o1) {
        uint32_t a = SEDGE_ITEM(j, o0);
        for (o1 = o0 + 1; o1 < j->bound[ch + 1] && SEDGE_ITEM(j, o1) == a; o1++) {
        }
        for (size_t s = 0; s < k; s++) {
            na[s] = L->tot[(size_t)a * k + s];
        }
        /* the whole group at once when its counts fit in nabs, else one edge at a time */
        int whole = (o1 - o0) * k <= j->nabs_len;
        for (size_t oa = o0, ob; oa < o1; oa = ob) {
            ob = whole ? o1 : oa + 1;
            group_counts(j, th, a, oa, ob, j->nabs[th]);
            for (size_t o = oa; o < ob; o++) {
                uint32_t b = SEDGE_PARTNER(j, o);
                for (size_t s = 0; s < k; s++) {
                    nb[s] = L->tot[(size_t)b * k + s];
                }
                pm_stratified_pair(k, n, na, nb, j->nabs[th] + (o - oa) * k, j->sign,
                                   &j->r[j->order[o]]);
            }
        }
    }
    return 0;
}

/* Chunk bounds over the sorted edges: about equal parts, each moved forward to where item a
 * changes. */
static void sedge_bounds(sedge_job *j) {
    size_t ne = j->e->n;
    j->bound[0] = 0;
    for (size_t c = 1; c <= SEDGE_CHUNKS; c++) {
        size_t b = c == SEDGE_CHUNKS ? ne : ne * c / SEDGE_CHUNKS;
        b = b < j->bound[c - 1] ? j->bound[c - 1] : b;
        while (b > 0 && b < ne && SEDGE_ITEM(j, b) == SEDGE_ITEM(j, b - 1)) {
            b++;
        }
        j->bound[c] = b;
    }
}

static void sedge_free(sedge_job *j) {
    for (unsigned t = 0; t < SEDGE_MAX_THREADS; t++) {
        free(j->mark[t]);
        free(j->cnt[t]);
        free(j->slot[t]);
        free(j->nabs[t]);
    }
}

/* The most edges one item has in the sorted order. */
static size_t sedge_max_group(const sedge_job *j) {
    size_t best = 0;
    for (size_t o0 = 0, o1; o0 < j->e->n; o0 = o1) {
        for (o1 = o0 + 1; o1 < j->e->n && SEDGE_ITEM(j, o1) == SEDGE_ITEM(j, o0); o1++) {
        }
        best = o1 - o0 > best ? o1 - o0 : best;
    }
    return best;
}

/* The figures of edges [i0, i1) of chunk ch from their counts, shared by the threads (each
 * edge on its own). */
typedef struct {
    const pm_segcol_t *c;
    const pm_pairs_t *pp;
    const pm_edges_t *e;
    pm_sign_t sign;
    const uint64_t *tot, *nab;
    pm_strat_t *r;
} pair_job;

static int pair_chunk(void *ud, size_t ch, unsigned th) {
    (void)th;
    const pair_job *j = ud;
    size_t k = j->c->n_levels, n = j->e->n;
    for (size_t i = n * ch / SEDGE_CHUNKS; i < n * (ch + 1) / SEDGE_CHUNKS; i++) {
        uint32_t a = j->pp->a[j->e->idx[i]], b = j->pp->b[j->e->idx[i]];
        pm_stratified_pair(k, j->c->base, j->tot + (size_t)a * k, j->tot + (size_t)b * k,
                           j->nab + i * k, j->sign, &j->r[i]);
    }
    return 0;
}

/* The figures of the edges from the one-pass counts (stratified_rows.c). */
static pm_err_t rows_path(const pm_incidence_t *inc, const pm_segcol_t *c, size_t nr,
                          const pm_pairs_t *pp, const pm_edges_t *e, pm_sign_t sign,
                          unsigned threads, pm_strat_t **out, pm_diag_t *diag) {
    size_t k = c->n_levels, ni = inc->n_items;
    uint64_t *nab = pm_i_malloc(e->n * k > 0 ? e->n * k : 1, sizeof *nab);
    uint64_t *tot = pm_i_calloc(ni * k > 0 ? ni * k : 1, sizeof *tot);
    pm_strat_t *r = pm_i_malloc(e->n ? e->n : 1, sizeof *r);
    pm_err_t rc = nab && tot && r ? PM_OK : PM_ENOMEM;
    for (size_t q = 0; rc == PM_OK && q < nr; q++) { /* the counts per item and level */
        if (c->of[q] >= 0) {
            for (uint64_t p = inc->row_ptr[q]; p < inc->row_ptr[q + 1]; p++) {
                tot[(size_t)inc->col[p] * k + (size_t)c->of[q]]++;
            }
        }
    }
    if (rc == PM_OK) {
        rc = pm_i_strat_rows_counts(inc, c, nr, pp, e, threads, nab);
    }
    if (rc == PM_OK) {
        pair_job pj = {c, pp, e, sign, tot, nab, r};
        if (threads < 2) {
            for (size_t ch = 0; ch < SEDGE_CHUNKS; ch++) {
                pair_chunk(&pj, ch, 0);
            }
        } else {
            (void)pm_i_parallel(threads, SEDGE_CHUNKS, pair_chunk, &pj); /* every chunk runs */
        }
    }
    pm_i_free(nab);
    pm_i_free(tot);
    if (rc != PM_OK) {
        pm_i_free(r);
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0,
                           "out of memory for the pair tests within segments");
    }
    *out = r;
    return PM_OK;
}

pm_err_t pm_stratified_edges(const pm_incidence_t *inc, const pm_segcol_t *c, const pm_pairs_t *pp,
                             const pm_edges_t *e, pm_sign_t sign, unsigned threads,
                             pm_strat_t **out, pm_diag_t *diag) {
    *out = NULL;
    if (inc->weight) {
        return pm_diag_set(diag, PM_EUSAGE, NULL, 0,
                           "the pair tests within segments take unweighted input only");
    }
    size_t k = c->n_levels, ni = inc->n_items,
           nr = inc->n_resp < c->n_resp ? inc->n_resp : c->n_resp;
    if (k && ni > SIZE_MAX / 4 / k) {
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "too many segments x items");
    }
    threads = threads ? threads : pm_cpu_count();
    threads = threads > SEDGE_MAX_THREADS ? SEDGE_MAX_THREADS : threads;
    threads = e->n < 2 * SEDGE_CHUNKS ? 1 : threads; /* few edges: not worth a thread */
    /* test hook: PM_TEST_STRAT_BY_ITEM=1 takes the item-by-item way below even where the
     * one-pass count fits, so that tests can compare the two */
    const char *by_item = getenv("PM_TEST_STRAT_BY_ITEM");
    if (!(by_item && by_item[0] == '1') && pm_i_strat_rows_fits(ni, e->n, k, threads)) {
        return rows_path(inc, c, nr, pp, e, sign, threads, out, diag);
    }
    pm_i_strat_lists L;
    pm_err_t rc = pm_i_strat_lists_build(inc, c, nr, &L);
    sedge_job j = {inc, c, pp, e, sign, &L, NULL, {0}, {NULL}, {NULL}, {NULL}, {NULL}, 0, NULL};
    size_t *order = pm_i_malloc(e->n ? e->n : 1, sizeof *order);
    j.r = pm_i_malloc(e->n ? e->n : 1, sizeof *j.r);
    if (rc != PM_OK || !order || !j.r) {
        rc = pm_diag_set(diag, PM_ENOMEM, NULL, 0,
                         "out of memory for the pair tests within segments");
        goto done;
    }
    for (size_t i = 0; i < e->n; i++) {
        order[i] = i;
    }
    edge_order eo = {pp, e};
    if (pm_i_sort_ctx(order, e->n, sizeof *order, cmp_edge, &eo)) {
        rc = pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
        goto done;
    }
    j.order = order;
    size_t kk = k ? k : 1, mg = sedge_max_group(&j);
    size_t per = SEDGE_NABS / kk ? SEDGE_NABS / kk : 1; /* edges whose counts fit */
    j.nabs_len = kk * (mg < 1 ? 1 : mg < per ? mg : per);
    int ok = 1;
    for (unsigned t = 0; ok && t < threads; t++) {
        j.mark[t] = pm_i_calloc(nr ? nr : 1, sizeof *j.mark[t]);
        j.cnt[t] = pm_i_calloc(3 * (k ? k : 1), sizeof *j.cnt[t]);
        j.slot[t] = pm_i_calloc(ni ? ni : 1, sizeof *j.slot[t]);
        j.nabs[t] = pm_i_calloc(j.nabs_len, sizeof *j.nabs[t]);
        ok = j.mark[t] && j.cnt[t] && j.slot[t] && j.nabs[t];
    }
    if (!ok) {
        rc = pm_diag_set(diag, PM_ENOMEM, NULL, 0,
                         "out of memory for the pair tests within segments");
        goto done;
    }
    sedge_bounds(&j);
    if (threads < 2) {
        for (size_t ch = 0; ch < SEDGE_CHUNKS; ch++) {
            sedge_chunk(&j, ch, 0);
        }
    } else {
        (void)pm_i_parallel(threads, SEDGE_CHUNKS, sedge_chunk, &j); /* every chunk runs */
    }
    *out = j.r;
    j.r = NULL;
done:
    pm_i_strat_lists_free(&L);
    sedge_free(&j);
    free(order);
    free(j.r);
    return rc;
}
