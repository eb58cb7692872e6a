/* Pair counting kernels (see cooccur.h).
 *
 * Both kernels first build a filtered copy of the incidence holding only eligible items
 * (renumbered 0..E-1, order kept) and only respondents with two or more of them.
 *
 * dense: respondent-major; each thread adds its share of respondents into its own upper
 *   triangle of E(E-1)/2 counters; the triangles are summed (integers: exact, so the result
 *   does not depend on the split). Unweighted only, E <= dense_max_items.
 * sparse: item-major Gustavson. With the transpose (item a -> the rows holding a), the pairs
 *   (a, b > a) are accumulated in a dense per-thread vector of E counters plus a list of the
 *   touched b, then emitted in b order. Weighted sums run over rows in increasing order, so
 *   they too are identical for any thread count. Work per item is estimated beforehand and
 *   items are cut into chunks of similar work; chunk results are concatenated in order. */
#include "pairmap/cooccur.h"

#include <stdatomic.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "exactsum.h"
#include "parallel.h"
#include "util.h"

void pm_counts_opts_init(pm_counts_opts_t *o) {
    memset(o, 0, sizeof *o);
    o->min_keep = 1;
}

void pm_counts_free(pm_counts_t *c) {
    if (!c) {
        return;
    }
    free(c->a);
    free(c->b);
    free(c->n);
    free(c->w);
    free(c);
}

unsigned pm_cpu_count(void) {
    long n = sysconf(_SC_NPROCESSORS_ONLN);
    return n > 0 ? (unsigned)n : 1u;
}

long pm_counts_find(const pm_counts_t *c, uint32_t a, uint32_t b) {
    size_t lo = 0, hi = c->n_pairs;
    while (lo < hi) {
        size_t mid = lo + (hi - lo) / 2;
        if (c->a[mid] < a || (c->a[mid] == a && c->b[mid] < b)) {
            lo = mid + 1;
        } else {
            hi = mid;
        }
    }
    if (lo < c->n_pairs && c->a[lo] == a && c->b[lo] == b) {
        return (long)lo;
    }
    return -1;
}

/* ---- output: one stream per thread, chunks recorded in it ------------------------------ */
/* A thread appends the pairs of each chunk it runs to its own stream (chunks are claimed in
 * increasing order, so a stream holds its chunks in order); the chunks are put in place at
 * the end in the stream that holds most of them (concat_outputs): with one thread the stream
 * is the result, no copy, and no chunk buffer is regrown from small sizes. */
typedef struct {
    uint32_t *a, *b, *n;
    double *w;
    size_t len, cap;
} outbuf;

typedef struct {
    unsigned th;     /* the stream holding the chunk */
    size_t off, len; /* its pairs there */
    uint64_t seen, pruned;
} chunkout;

static int out_push(outbuf *o, uint32_t a, uint32_t b, uint32_t n, double w, int weighted) {
    if (o->len == o->cap) {
        size_t nc = o->cap ? o->cap * 2 : 256;
        uint32_t *na = pm_i_realloc(o->a, nc, sizeof *na);
        if (!na) {
            return -1;
        }
        o->a = na;
        uint32_t *nb = pm_i_realloc(o->b, nc, sizeof *nb);
        if (!nb) {
            return -1;
        }
        o->b = nb;
        uint32_t *nn = pm_i_realloc(o->n, nc, sizeof *nn);
        if (!nn) {
            return -1;
        }
        o->n = nn;
        if (weighted) {
            double *nw = pm_i_realloc(o->w, nc, sizeof *nw);
            if (!nw) {
                return -1;
            }
            o->w = nw;
        }
        o->cap = nc;
    }
    o->a[o->len] = a;
    o->b[o->len] = b;
    o->n[o->len] = n;
    if (weighted) {
        o->w[o->len] = w;
    }
    o->len++;
    return 0;
}

/* ---- shared state ------------------------------------------------------------------------ */
typedef struct {
    const pm_counts_opts_t *o;
    size_t E;
    uint32_t *gidx; /* eligible index -> item index */
    size_t R;       /* filtered respondents */
    uint64_t *rp;   /* R + 1 */
    uint32_t *ci;   /* filtered rows */
    double *wt;     /* R weights or NULL */
    /* sparse: transpose */
    uint64_t *tp;   /* E + 1 */
    uint32_t *tbeg; /* entry: offset in ci just after the item (its row's suffix) */
    uint32_t *tend; /* entry: offset in ci of its row's end */
    int tscratch;   /* tbeg and tend are the caller's scratch (not freed here) */
    uint32_t *trow; /* entry: its row (weighted only) */
    /* chunking */
    size_t nchunks;
    size_t *cbeg;    /* chunk c covers items (sparse) or rows (dense) cbeg[c]..cbeg[c+1] */
    outbuf *outs;    /* one per thread: nouts */
    chunkout *couts; /* one per chunk */
    unsigned nouts;
    unsigned threads;
    /* per-thread scratch */
    uint32_t **acc;
    double **wacc;
    pm_i_u128 *wtx; /* R weights in units of 2^xe (exact sums, pm_i_xs), or NULL */
    int xe;
    uint32_t **touched;
    uint64_t **mark;     /* per thread: a bit per item, set with its first count (sparse) */
    uint32_t **tri;      /* dense triangles */
    unsigned nacc, ntri; /* scratch buffers allocated */
    int borrowed;        /* rp, ci, wt belong to the incidence */
    atomic_uint_fast64_t done;
    uint64_t total;
    atomic_int progress_lock;
} kstate;

static void report(kstate *k, uint64_t add) {
    uint64_t d = atomic_fetch_add(&k->done, add) + add;
    if (k->o->progress) {
        int expected = 0;
        if (atomic_compare_exchange_strong(&k->progress_lock, &expected, 1)) {
            k->o->progress(k->o->progress_ud, "counting pairs", d, k->total);
            atomic_store(&k->progress_lock, 0);
        }
    }
}

static int emit(kstate *k, chunkout *co, unsigned thread, uint32_t ea, uint32_t eb, uint32_t n,
                double w) {
    uint32_t a = k->gidx[ea], b = k->gidx[eb];
    outbuf *ob = &k->outs[thread];
    co->seen++;
    if (n < k->o->min_keep) {
        co->pruned++;
        if (k->o->prune) {
            k->o->prune(k->o->prune_ud, thread, a, b, n, w);
        }
        return 0;
    }
    return out_push(ob, a, b, n, w, k->wt != NULL);
}

/* Chunk c starts at the end of thread th's stream. */
static chunkout *chunk_begin(kstate *k, size_t c, unsigned th) {
    chunkout *co = &k->couts[c];
    co->th = th;
    co->off = k->outs[th].len;
    return co;
}

static int cmp_u32(const void *x, const void *y) {
    uint32_t a = *(const uint32_t *)x, b = *(const uint32_t *)y;
    return a < b ? -1 : a > b;
}

/* ---- sparse kernel ------------------------------------------------------------------------ */
/* The items marked with item a (all > a) in increasing order into touched, and mark cleared;
 * returns their number. */
static size_t marked_in_order(uint64_t *mark, uint32_t *touched, size_t a, size_t E) {
    size_t n = 0;
    for (size_t w = (a + 1) >> 6, w1 = (E - 1) >> 6; w <= w1; w++) {
        uint64_t x = mark[w];
        mark[w] = 0;
        while (x) {
            touched[n++] = (uint32_t)(w * 64 + (size_t)__builtin_ctzll(x));
            x &= x - 1;
        }
    }
    return n;
}

/* The nt items touched with item a (all > a, their bits set in mark) in increasing order into
 * touched, and mark cleared: by a scan of the bit words after a's when they are few enough
 * for the touched items (a word or more per eight), else by sorting the list. */
static size_t touched_in_order(uint64_t *mark, uint32_t *touched, size_t nt, size_t a, size_t E) {
    size_t w0 = (a + 1) >> 6, w1 = (E - 1) >> 6;
    if (nt * 8 < w1 - w0 + 1) {
        qsort(touched, nt, sizeof *touched, cmp_u32);
        for (size_t i = 0; i < nt; i++) {
            mark[touched[i] >> 6] = 0;
        }
        return nt;
    }
    return marked_in_order(mark, touched, a, E);
}

size_t pm_i_counts_scan_items = 65536;

static int sparse_chunk(void *ud, size_t c, unsigned th) {
    kstate *k = ud;
    chunkout *co = chunk_begin(k, c, th);
    uint32_t *acc = k->acc[th];
    double *wacc = k->wacc ? k->wacc[th] : NULL;
    uint32_t *touched = k->touched[th];
    uint64_t *mark = k->mark[th];
    uint64_t work = 0;
    /* unweighted with up to 65536 items (pm_i_counts_scan_items): every visit counts and
     * marks without a branch (whether a partner is new is a coin toss for the branch
     * predictor), and the partners are read off the marks, a scan of at most 1,024 words per
     * item; beyond that the list of the touched ones */
    const int scan = !wacc && k->E <= pm_i_counts_scan_items;
    for (size_t a = k->cbeg[c]; a < k->cbeg[c + 1]; a++) {
        size_t nt = 0;
        const uint64_t t_end = k->tp[a + 1];
        for (uint64_t t = k->tp[a]; t < t_end; t++) {
            /* the rows of item a are scattered over ci: fetch a few entries ahead */
            if (t + 8 < t_end) {
                __builtin_prefetch(&k->ci[k->tbeg[t + 8]]);
            }
            uint64_t beg = k->tbeg[t], end = k->tend[t];
            const uint32_t *row = k->ci;
            work += end - beg;
            if (wacc && k->wtx) { /* exact: 128-bit integers, one rounding at the end */
                pm_i_u128 w = k->wtx[k->trow[t]];
                pm_i_u128 *wx = (pm_i_u128 *)(void *)wacc;
                for (uint64_t q = beg; q < end; q++) {
                    uint32_t b = row[q];
                    if (acc[b]++ == 0) {
                        touched[nt++] = b;
                        mark[b >> 6] |= (uint64_t)1 << (b & 63);
                    }
                    wx[b] += w;
                }
            } else if (wacc) {
                double w = k->wt[k->trow[t]];
                for (uint64_t q = beg; q < end; q++) {
                    uint32_t b = row[q];
                    if (acc[b]++ == 0) {
                        touched[nt++] = b;
                        mark[b >> 6] |= (uint64_t)1 << (b & 63);
                    }
                    wacc[b] += w;
                }
            } else if (scan) { /* no branch: the partners are found in mark afterwards */
                for (uint64_t q = beg; q < end; q++) {
                    uint32_t b = row[q];
                    acc[b]++;
                    mark[b >> 6] |= (uint64_t)1 << (b & 63);
                }
                nt += end > beg;
            } else {
                for (uint64_t q = beg; q < end; q++) {
                    uint32_t b = row[q];
                    if (acc[b]++ == 0) {
                        touched[nt++] = b;
                        mark[b >> 6] |= (uint64_t)1 << (b & 63);
                    }
                }
            }
        }
        if (nt == 0) {
            continue;
        }
        nt = scan ? marked_in_order(mark, touched, a, k->E)
                  : touched_in_order(mark, touched, nt, a, k->E);
        for (size_t i = 0; i < nt; i++) {
            uint32_t b = touched[i];
            double wab = 0;
            if (wacc && k->wtx) {
                pm_i_u128 *wx = (pm_i_u128 *)(void *)wacc;
                wab = pm_i_xs_double(wx[b], k->xe);
                wx[b] = 0;
            } else if (wacc) {
                wab = wacc[b];
                wacc[b] = 0;
            }
            if (emit(k, co, th, (uint32_t)a, b, acc[b], wab) != 0) {
                return 1;
            }
            acc[b] = 0;
        }
    }
    co->len = k->outs[th].len - co->off;
    report(k, work);
    return 0;
}

/* ---- dense kernel --------------------------------------------------------------------------- */
static inline size_t tri_index(size_t E, size_t a, size_t b) {
    /* row-major upper triangle without the diagonal */
    return a * (2 * E - a - 1) / 2 + (b - a - 1);
}

static int dense_chunk(void *ud, size_t c, unsigned th) {
    kstate *k = ud;
    uint32_t *tri = k->tri[th];
    uint64_t work = 0;
    for (size_t r = k->cbeg[c]; r < k->cbeg[c + 1]; r++) {
        uint64_t beg = k->rp[r], end = k->rp[r + 1];
        for (uint64_t i = beg; i < end; i++) {
            size_t a = k->ci[i];
            size_t base = a * (2 * k->E - a - 1) / 2 - a - 1;
            for (uint64_t j = i + 1; j < end; j++) {
                tri[base + k->ci[j]]++;
            }
        }
        work += (end - beg) * (end - beg - 1) / 2;
    }
    report(k, work);
    return 0;
}

static int dense_emit_chunk(void *ud, size_t c, unsigned th) {
    kstate *k = ud;
    chunkout *co = chunk_begin(k, c, th);
    uint32_t *tri = k->tri[0];
    for (size_t a = k->cbeg[c]; a < k->cbeg[c + 1]; a++) {
        for (size_t b = a + 1; b < k->E; b++) {
            uint32_t n = tri[tri_index(k->E, a, b)];
            if (n && emit(k, co, th, (uint32_t)a, (uint32_t)b, n, 0) != 0) {
                return 1;
            }
        }
    }
    co->len = k->outs[th].len - co->off;
    return 0;
}

static int dense_sum_chunk(void *ud, size_t c, unsigned th) {
    (void)th;
    kstate *k = ud;
    size_t T = k->E * (k->E - 1) / 2;
    size_t per = (T + k->nchunks - 1) / k->nchunks;
    size_t b = c * per, e = b + per < T ? b + per : T;
    uint32_t *dst = k->tri[0];
    for (unsigned t = 1; t < k->threads; t++) {
        const uint32_t *src = k->tri[t];
        for (size_t i = b; i < e; i++) {
            dst[i] += src[i];
        }
    }
    return 0;
}

/* ---- parallel transpose ------------------------------------------------------------------ */
typedef struct {
    kstate *k;
    unsigned parts;
    int phase;       /* 0: count, 1: fill */
    uint64_t *cnt;   /* parts x E: entries per item, then fill offsets */
    uint64_t *pcost; /* parts x E: work per item */
} tjob;

static int transpose_part(void *ud, size_t part, unsigned th) {
    (void)th;
    tjob *j = ud;
    kstate *k = j->k;
    size_t per = (k->R + j->parts - 1) / j->parts;
    size_t r0 = part * per, r1 = r0 + per < k->R ? r0 + per : k->R;
    uint64_t *cnt = j->cnt + part * k->E;
    if (j->phase == 0) {
        uint64_t *pc = j->pcost + part * k->E;
        for (size_t r = r0; r < r1; r++) {
            uint64_t e = k->rp[r + 1];
            for (uint64_t q = k->rp[r]; q < e; q++) {
                cnt[k->ci[q]]++;
                pc[k->ci[q]] += e - q - 1;
            }
        }
        return 0;
    }
    for (size_t r = r0; r < r1; r++) {
        uint64_t e = k->rp[r + 1];
        for (uint64_t q = k->rp[r]; q < e; q++) {
            uint64_t at = cnt[k->ci[q]]++;
            k->tbeg[at] = (uint32_t)(q + 1);
            k->tend[at] = (uint32_t)e;
            if (k->trow) {
                k->trow[at] = (uint32_t)r;
            }
        }
    }
    return 0;
}

/* Splits 0..n into at most nch chunks of similar cost. */
static size_t make_chunks(const uint64_t *cost, size_t n, size_t nch, size_t *beg) {
    uint64_t total = 0;
    for (size_t i = 0; i < n; i++) {
        total += cost[i] + 1;
    }
    uint64_t per = total / nch + 1, acc = 0;
    size_t c = 0;
    beg[0] = 0;
    for (size_t i = 0; i < n; i++) {
        acc += cost[i] + 1;
        if (acc >= per && c + 1 < nch) {
            beg[++c] = i + 1;
            acc = 0;
        }
    }
    if (beg[c] != n) {
        beg[++c] = n;
    }
    return c;
}

/* The pairs of o->given (every pair seen together, counted elsewhere: a count shard) as if
 * counted from the rows: filtered by eligible and min_keep, the rest handed to prune; in
 * chunks of the list on all threads (pass 1 counts and prunes, pass 2 copies the kept pairs
 * to their place), so the result does not depend on the threads. */
typedef struct {
    const pm_counts_opts_t *o;
    const pm_counts_t *g;
    pm_counts_t *res;
    size_t nchunks, per;
    size_t *kept; /* per chunk; then its first index in res */
    uint64_t *seen, *pruned, *work;
} given_job;

static int given_keeps(const given_job *j, size_t k) {
    const pm_counts_t *g = j->g;
    const unsigned char *el = j->o->eligible;
    return !el || (el[g->a[k]] && el[g->b[k]]);
}

static int given_pass1(void *ud, size_t c, unsigned th) {
    given_job *j = ud;
    const pm_counts_t *g = j->g;
    const pm_counts_opts_t *o = j->o;
    size_t lo = c * j->per, hi = lo + j->per < g->n_pairs ? lo + j->per : g->n_pairs;
    for (size_t k = lo; k < hi; k++) {
        if (!given_keeps(j, k)) {
            continue;
        }
        j->seen[c]++;
        j->work[c] += g->n[k]; /* each respondent's k(k-1)/2 is the sum of its pairs' counts */
        if (g->n[k] < o->min_keep) {
            j->pruned[c]++;
            if (o->prune) {
                o->prune(o->prune_ud, th, g->a[k], g->b[k], g->n[k],
                         g->w ? g->w[k] : (double)g->n[k]);
            }
        } else {
            j->kept[c]++;
        }
    }
    return 0;
}

static int given_pass2(void *ud, size_t c, unsigned th) {
    (void)th;
    given_job *j = ud;
    const pm_counts_t *g = j->g;
    pm_counts_t *res = j->res;
    size_t lo = c * j->per, hi = lo + j->per < g->n_pairs ? lo + j->per : g->n_pairs;
    size_t at = j->kept[c];
    for (size_t k = lo; k < hi; k++) {
        if (given_keeps(j, k) && g->n[k] >= j->o->min_keep) {
            res->a[at] = g->a[k];
            res->b[at] = g->b[k];
            res->n[at] = g->n[k];
            if (res->w) {
                res->w[at] = g->w[k];
            }
            at++;
        }
    }
    return 0;
}

static pm_err_t counts_given(const pm_incidence_t *inc, const pm_counts_opts_t *o,
                             pm_counts_t **out, pm_diag_t *diag) {
    const pm_counts_t *g = o->given;
    unsigned threads = o->threads ? o->threads : pm_cpu_count();
    threads = threads > 256 ? 256 : threads;
    given_job j = {o, g, NULL, 0, 65536, NULL, NULL, NULL, NULL};
    j.nchunks = (g->n_pairs + j.per - 1) / j.per;
    pm_counts_t *res = pm_i_calloc(1, sizeof *res);
    size_t nc = j.nchunks ? j.nchunks : 1;
    j.kept = pm_i_calloc(nc, sizeof *j.kept);
    j.seen = pm_i_calloc(nc, sizeof *j.seen);
    j.pruned = pm_i_calloc(nc, sizeof *j.pruned);
    j.work = pm_i_calloc(nc, sizeof *j.work);
    pm_err_t rc = PM_ENOMEM;
    if (!res || !j.kept || !j.seen || !j.pruned || !j.work) {
        goto done;
    }
    (void)pm_i_parallel(threads, j.nchunks, given_pass1, &j); /* runs every chunk */
    size_t total = 0;
    for (size_t c = 0; c < j.nchunks; c++) {
        size_t kc = j.kept[c];
        j.kept[c] = total;
        total += kc;
        res->seen += j.seen[c];
        res->pruned += j.pruned[c];
        res->work += j.work[c];
    }
    res->a = pm_i_malloc(total ? total : 1, sizeof *res->a);
    res->b = pm_i_malloc(total ? total : 1, sizeof *res->b);
    res->n = pm_i_malloc(total ? total : 1, sizeof *res->n);
    res->w = g->w ? pm_i_malloc(total ? total : 1, sizeof *res->w) : NULL;
    if (!res->a || !res->b || !res->n || (g->w && !res->w)) {
        goto done;
    }
    j.res = res;
    (void)pm_i_parallel(threads, j.nchunks, given_pass2, &j);
    res->n_pairs = total;
    size_t E = 0;
    for (size_t i = 0; i < inc->n_items; i++) {
        E += !o->eligible || o->eligible[i];
    }
    size_t dmax = o->dense_max_items ? o->dense_max_items : 2048;
    int kernel = o->kernel;
    if (kernel == PM_COUNTS_AUTO) { /* the kernel the rows would have been counted with */
        kernel = (!g->w && E <= dmax) ? PM_COUNTS_DENSE : PM_COUNTS_SPARSE;
    }
    res->kernel = kernel == PM_COUNTS_DENSE && g->w ? PM_COUNTS_SPARSE : kernel;
    rc = PM_OK;
done:
    free(j.kept);
    free(j.seen);
    free(j.pruned);
    free(j.work);
    if (rc) {
        pm_counts_free(res);
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory counting pairs");
    }
    *out = res;
    return PM_OK;
}

/* ---- pm_counts_build, step by step ------------------------------------------------------- */

static void kstate_free(kstate *k) {
    if (k->outs) {
        for (unsigned t = 0; t < k->nouts; t++) {
            free(k->outs[t].a);
            free(k->outs[t].b);
            free(k->outs[t].n);
            free(k->outs[t].w);
        }
        free(k->outs);
    }
    free(k->couts);
    for (unsigned t = 0; t < k->nacc; t++) {
        free(k->acc[t]);
        free(k->touched[t]);
        free(k->mark[t]);
        if (k->wacc) {
            free(k->wacc[t]);
        }
    }
    for (unsigned t = 0; t < k->ntri; t++) {
        free(k->tri[t]);
    }
    free(k->acc);
    free(k->touched);
    free(k->mark);
    free(k->wacc);
    free(k->wtx);
    free(k->tri);
    free(k->cbeg);
    free(k->tp);
    free(k->trow);
    if (!k->tscratch) {
        free(k->tbeg);
        free(k->tend);
    }
    if (!k->borrowed) {
        free(k->rp);
        free(k->ci);
        free(k->wt);
    }
    free(k->gidx);
}

/* The eligible items renumbered 0..E-1 (eidx[item], -1 for the others; k->gidx back). */
static pm_err_t renumber_eligible(kstate *k, const pm_incidence_t *inc, int32_t *eidx) {
    k->gidx = pm_i_malloc(inc->n_items, sizeof *k->gidx);
    if (!k->gidx) {
        return PM_ENOMEM;
    }
    for (size_t i = 0; i < inc->n_items; i++) {
        if (!k->o->eligible || k->o->eligible[i]) {
            eidx[i] = (int32_t)k->E;
            k->gidx[k->E++] = (uint32_t)i;
        } else {
            eidx[i] = -1;
        }
    }
    return PM_OK;
}

/* Sum over the rows of m(m-1)/2, m the row's length: the pair incidences to visit. */
static void rows_total(kstate *k) {
    for (size_t r = 0; r < k->R; r++) {
        uint64_t m = k->rp[r + 1] - k->rp[r];
        k->total += m * (m - 1) / 2;
    }
}

/* The rows of eligible items, only those with two or more; when every item is eligible the
 * incidence's own rows are used as they are (rows with fewer than two items simply yield no
 * pair). *nnz gets their entries. */
static pm_err_t filter_rows(kstate *k, const pm_incidence_t *inc, const int32_t *eidx,
                            uint64_t *nnz) {
    *nnz = 0;
    if (k->E == inc->n_items) {
        k->borrowed = 1;
        k->R = inc->n_resp;
        k->rp = (uint64_t *)inc->row_ptr; /* read only */
        k->ci = (uint32_t *)inc->col;
        k->wt = (double *)inc->weight;
        *nnz = inc->row_ptr[inc->n_resp];
        rows_total(k);
        return PM_OK;
    }
    size_t R = 0;
    for (size_t r = 0; r < inc->n_resp; r++) {
        size_t m = 0;
        for (uint64_t q = inc->row_ptr[r]; q < inc->row_ptr[r + 1]; q++) {
            m += eidx[inc->col[q]] >= 0;
        }
        if (m >= 2) {
            *nnz += m;
            R++;
        }
    }
    k->R = R;
    k->rp = pm_i_malloc(R + 1, sizeof *k->rp);
    /* + 1: the fill loop below writes a row's single eligible item before dropping the row
     * (found by tests/fuzz/fuzz_input, issue 6) */
    k->ci = pm_i_malloc(*nnz + 1, sizeof *k->ci);
    if (inc->weight) {
        k->wt = pm_i_malloc(R ? R : 1, sizeof *k->wt);
    }
    if (!k->rp || !k->ci || (inc->weight && !k->wt)) {
        return PM_ENOMEM;
    }
    uint64_t w = 0;
    size_t rr = 0;
    for (size_t r = 0; r < inc->n_resp; r++) {
        uint64_t start = w;
        for (uint64_t q = inc->row_ptr[r]; q < inc->row_ptr[r + 1]; q++) {
            int32_t e = eidx[inc->col[q]];
            if (e >= 0) {
                k->ci[w++] = (uint32_t)e;
            }
        }
        if (w - start >= 2) {
            k->rp[rr] = start;
            if (k->wt) {
                k->wt[rr] = inc->weight[r];
            }
            rr++;
        } else {
            w = start;
        }
    }
    k->rp[R] = w;
    rows_total(k);
    return PM_OK;
}

static int pick_kernel(const pm_counts_opts_t *o, const pm_incidence_t *inc, size_t E) {
    int kernel = o->kernel;
    size_t dmax = o->dense_max_items ? o->dense_max_items : 2048;
    if (kernel == PM_COUNTS_AUTO) {
        kernel = (!inc->weight && E <= dmax) ? PM_COUNTS_DENSE : PM_COUNTS_SPARSE;
    }
    if (kernel == PM_COUNTS_DENSE && inc->weight) {
        kernel = PM_COUNTS_SPARSE;
    }
    return kernel;
}

/* Parallel transpose: thread t takes rows [T t, T (t+1)), counts its entries per item, then
 * fills from offsets that follow the threads before it, so each item's list is in row order
 * whatever the number of threads. cost[e] gets item e's work. */
static pm_err_t transpose(kstate *k, uint64_t *cost) {
    tjob tj;
    memset(&tj, 0, sizeof tj);
    tj.k = k;
    tj.parts = k->threads;
    tj.cnt = pm_i_calloc((size_t)tj.parts * (k->E ? k->E : 1), sizeof *tj.cnt);
    tj.pcost = pm_i_calloc((size_t)tj.parts * (k->E ? k->E : 1), sizeof *tj.pcost);
    if (!tj.cnt || !tj.pcost) {
        free(tj.cnt);
        free(tj.pcost);
        return PM_ENOMEM;
    }
    tj.phase = 0;
    (void)pm_i_parallel(k->threads, tj.parts, transpose_part, &tj); /* runs every part */
    {
        uint64_t at = 0;
        for (size_t e = 0; e < k->E; e++) {
            k->tp[e] = at;
            for (unsigned t = 0; t < tj.parts; t++) {
                uint64_t c = tj.cnt[(size_t)t * k->E + e];
                tj.cnt[(size_t)t * k->E + e] = at; /* becomes the fill offset */
                at += c;
                cost[e] += tj.pcost[(size_t)t * k->E + e];
            }
        }
        k->tp[k->E] = at;
        tj.phase = 1;
        (void)pm_i_parallel(k->threads, tj.parts, transpose_part, &tj);
    }
    free(tj.cnt);
    free(tj.pcost);
    return PM_OK;
}

/* The transposed index's memory: the caller's scratch when it is large enough. */
static pm_err_t transpose_alloc(kstate *k, uint64_t nnz) {
    const pm_counts_opts_t *o = k->o;
    k->tp = pm_i_calloc(k->E + 1, sizeof *k->tp);
    if (nnz >= UINT32_MAX) {
        return PM_EDATA;
    }
    if (o->scratch[0] && o->scratch[1] && o->scratch_n >= nnz) {
        k->tbeg = o->scratch[0]; /* the caller's: memory already in use, no page faults */
        k->tend = o->scratch[1];
        k->tscratch = 1;
    } else {
        k->tbeg = pm_i_malloc(nnz ? nnz : 1, sizeof *k->tbeg);
        k->tend = pm_i_malloc(nnz ? nnz : 1, sizeof *k->tend);
    }
    if (k->wt) {
        k->trow = pm_i_malloc(nnz ? nnz : 1, sizeof *k->trow);
    }
    return !k->tp || !k->tbeg || !k->tend || (k->wt && !k->trow) ? PM_ENOMEM : PM_OK;
}

/* Exact weighted sums where the weights' range allows (src/exactsum.h): k->wtx. */
static pm_err_t exact_weights(kstate *k) {
    pm_i_xs_range xr = {0};
    for (size_t r = 0; r < k->R; r++) {
        pm_i_xs_see(&xr, k->wt[r]);
    }
    if (pm_i_xs_fit(&xr, k->R, &k->xe) != 0) {
        return PM_OK;
    }
    k->wtx = pm_i_malloc(k->R ? k->R : 1, sizeof *k->wtx);
    if (!k->wtx) {
        return PM_ENOMEM;
    }
    for (size_t r = 0; r < k->R; r++) {
        k->wtx[r] = pm_i_xs_units(k->wt[r], k->xe);
    }
    return PM_OK;
}

/* The threads' output streams and the chunks' records (k->threads, k->nchunks set). */
static pm_err_t outputs_alloc(kstate *k) {
    k->outs = pm_i_calloc(k->threads ? k->threads : 1, sizeof *k->outs);
    k->couts = pm_i_calloc(k->nchunks ? k->nchunks : 1, sizeof *k->couts);
    k->nouts = k->outs ? k->threads : 0;
    return k->outs && k->couts ? PM_OK : PM_ENOMEM;
}

/* Per-thread accumulators of the sparse kernel: E counters, the touched list, weights. */
static pm_err_t sparse_scratch(kstate *k) {
    k->acc = pm_i_calloc(k->threads, sizeof *k->acc);
    k->touched = pm_i_calloc(k->threads, sizeof *k->touched);
    k->mark = pm_i_calloc(k->threads, sizeof *k->mark);
    if (!k->acc || !k->touched || !k->mark) {
        return PM_ENOMEM;
    }
    k->nacc = k->threads;
    if (k->wt) {
        k->wacc = pm_i_calloc(k->threads, sizeof *k->wacc);
        if (!k->wacc || exact_weights(k)) {
            return PM_ENOMEM;
        }
    }
    for (unsigned t = 0; t < k->threads; t++) {
        k->acc[t] = pm_i_calloc(k->E ? k->E : 1, sizeof(uint32_t));
        k->touched[t] = pm_i_malloc(k->E ? k->E : 1, sizeof(uint32_t));
        k->mark[t] = pm_i_calloc(k->E / 64 + 1, sizeof(uint64_t));
        if (!k->acc[t] || !k->touched[t] || !k->mark[t]) {
            return PM_ENOMEM;
        }
        if (k->wt) {
            k->wacc[t] = pm_i_calloc(k->E ? k->E : 1, k->wtx ? sizeof(pm_i_u128) : sizeof(double));
            if (!k->wacc[t]) {
                return PM_ENOMEM;
            }
        }
    }
    return PM_OK;
}

/* A pm_i_parallel result as an error: every chunk runs (parallel.h), and a chunk fails only
 * when its output buffer cannot grow. */
static pm_err_t parallel_rc(int prc) {
    return prc == 0 ? PM_OK : PM_ENOMEM;
}

/* The sparse kernel: transpose with positions and work per item, chunks of similar work. */
static pm_err_t count_sparse(kstate *k, uint64_t nnz, size_t want) {
    pm_err_t rc = transpose_alloc(k, nnz);
    uint64_t *cost = NULL;
    if (rc == PM_OK) {
        cost = pm_i_calloc(k->E ? k->E : 1, sizeof *cost);
        rc = cost ? transpose(k, cost) : PM_ENOMEM;
    }
    if (rc == PM_OK) {
        k->cbeg = pm_i_malloc(want + 2, sizeof *k->cbeg);
        rc = k->cbeg ? PM_OK : PM_ENOMEM;
    }
    if (rc == PM_OK) {
        k->nchunks = make_chunks(cost, k->E, want, k->cbeg);
        rc = sparse_scratch(k);
    }
    free(cost);
    if (rc == PM_OK) {
        rc = outputs_alloc(k);
        rc = rc ? rc : parallel_rc(pm_i_parallel(k->threads, k->nchunks, sparse_chunk, k));
    }
    return rc;
}

/* Dense kernel, first half: each thread's triangle, rows cut into chunks of similar work;
 * then the triangles summed into the first. */
static pm_err_t dense_triangles(kstate *k, size_t want) {
    size_t R = k->R, T = k->E * (k->E > 0 ? k->E - 1 : 0) / 2;
    unsigned nt = k->threads;
    if ((uint64_t)nt * 64 > R + 64) {
        nt = (unsigned)(R / 64 + 1); /* few rows: fewer triangles */
    }
    if (nt > k->threads) {
        nt = k->threads;
    }
    k->threads = nt;
    k->tri = pm_i_calloc(nt, sizeof *k->tri);
    if (!k->tri) {
        return PM_ENOMEM;
    }
    k->ntri = nt;
    for (unsigned t = 0; t < nt; t++) {
        k->tri[t] = pm_i_calloc(T ? T : 1, sizeof(uint32_t));
        if (!k->tri[t]) {
            return PM_ENOMEM;
        }
    }
    uint64_t *cost = pm_i_malloc(R ? R : 1, sizeof *cost);
    k->cbeg = pm_i_malloc(want + 2, sizeof *k->cbeg);
    if (!cost || !k->cbeg) {
        free(cost);
        return PM_ENOMEM;
    }
    for (size_t r = 0; r < R; r++) {
        uint64_t m = k->rp[r + 1] - k->rp[r];
        cost[r] = m * (m - 1) / 2;
    }
    k->nchunks = make_chunks(cost, R, want, k->cbeg);
    free(cost);
    /* Each thread must own its triangle: chunks are claimed dynamically, so a chunk may
     * run on any thread; that is fine because the sum over triangles is exact. */
    pm_err_t rc = parallel_rc(pm_i_parallel(nt, k->nchunks, dense_chunk, k));
    if (rc == PM_OK && nt > 1) {
        size_t save = k->nchunks;
        k->nchunks = want;
        pm_i_parallel(k->threads, want, dense_sum_chunk, k);
        k->nchunks = save;
    }
    return rc;
}

/* The dense kernel: triangles, then the pairs emitted by item ranges on all threads. */
static pm_err_t count_dense(kstate *k, size_t want) {
    pm_err_t rc = dense_triangles(k, want);
    if (rc) {
        return rc;
    }
    uint64_t *cost = pm_i_malloc(k->E ? k->E : 1, sizeof *cost);
    if (!cost) {
        return PM_ENOMEM;
    }
    for (size_t a = 0; a < k->E; a++) {
        cost[a] = k->E - a;
    }
    k->nchunks = make_chunks(cost, k->E, want, k->cbeg);
    free(cost);
    k->threads = k->o->threads ? k->o->threads : pm_cpu_count();
    if (k->threads > 256) {
        k->threads = 256;
    }
    if (outputs_alloc(k)) {
        return PM_ENOMEM;
    }
    return parallel_rc(pm_i_parallel(k->threads, k->nchunks, dense_emit_chunk, k));
}

/* Stream t's arrays resized to n entries (n >= its length). */
static int stream_resize(outbuf *ob, size_t n, int weighted) {
    n = n ? n : 1;
    uint32_t *na = pm_i_realloc(ob->a, n, sizeof *na);
    if (na) {
        ob->a = na;
    }
    uint32_t *nb = na ? pm_i_realloc(ob->b, n, sizeof *nb) : NULL;
    if (nb) {
        ob->b = nb;
    }
    uint32_t *nn = nb ? pm_i_realloc(ob->n, n, sizeof *nn) : NULL;
    if (nn) {
        ob->n = nn;
    }
    double *nw = nn && weighted ? pm_i_realloc(ob->w, n, sizeof *nw) : NULL;
    if (nw) {
        ob->w = nw;
    }
    if (!nn || (weighted && !nw)) {
        return -1;
    }
    ob->cap = n;
    return 0;
}

/* Entries [from, from + len) of src to [to, to + len) of dst (may be the same stream). */
static void stream_move(outbuf *dst, size_t to, const outbuf *src, size_t from, size_t len) {
    if (len == 0 || (dst == src && to == from)) {
        return;
    }
    memmove(dst->a + to, src->a + from, len * sizeof *dst->a);
    memmove(dst->b + to, src->b + from, len * sizeof *dst->b);
    memmove(dst->n + to, src->n + from, len * sizeof *dst->n);
    if (dst->w) {
        memmove(dst->w + to, src->w + from, len * sizeof *dst->w);
    }
}

/* The chunks' outputs in chunk order into res: in the longest stream, grown to the total, its
 * own chunks moved up to their places (the last first: a chunk only moves towards the end,
 * never over one not yet moved), the other streams' chunks copied in between. */
static pm_err_t concat_outputs(kstate *k, pm_counts_t *res, int weighted) {
    size_t total = 0;
    unsigned base = 0;
    for (size_t c = 0; c < k->nchunks; c++) {
        total += k->couts[c].len;
        res->seen += k->couts[c].seen;
        res->pruned += k->couts[c].pruned;
    }
    for (unsigned t = 1; t < k->nouts; t++) {
        base = k->outs[t].len > k->outs[base].len ? t : base;
    }
    outbuf *ob = &k->outs[base];
    if (stream_resize(ob, total, weighted)) {
        return PM_ENOMEM;
    }
    size_t at = total;
    for (size_t c = k->nchunks; c-- > 0;) {
        const chunkout *co = &k->couts[c];
        at -= co->len;
        if (co->th == base) {
            stream_move(ob, at, ob, co->off, co->len);
        }
    }
    for (size_t c = 0; c < k->nchunks; c++) {
        const chunkout *co = &k->couts[c];
        if (co->th != base) {
            stream_move(ob, at, &k->outs[co->th], co->off, co->len);
        }
        at += co->len;
    }
    res->a = ob->a;
    res->b = ob->b;
    res->n = ob->n;
    res->w = weighted ? ob->w : NULL;
    ob->a = ob->b = ob->n = NULL;
    ob->w = NULL;
    res->n_pairs = total;
    return PM_OK;
}

static pm_err_t counts_error(pm_err_t rc, pm_diag_t *diag) {
    if (rc == PM_ENOMEM) {
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory while counting pairs");
    }
    if (rc == PM_EDATA) {
        return pm_diag_set(diag, PM_EDATA, NULL, 0,
                           "more than 4294967294 respondent-item rows of eligible items; "
                           "split the input or raise --min-share");
    }
    return pm_diag_set(diag, rc, NULL, 0, "counting pairs failed");
}

pm_err_t pm_counts_build(const pm_incidence_t *inc, const pm_counts_opts_t *o, pm_counts_t **out,
                         pm_diag_t *diag) {
    *out = NULL;
    if (o->given) {
        return counts_given(inc, o, out, diag);
    }
    kstate k;
    memset(&k, 0, sizeof k);
    k.o = o;
    k.threads = o->threads ? o->threads : pm_cpu_count();
    if (k.threads > 256) {
        k.threads = 256;
    }
    atomic_init(&k.done, 0);
    atomic_init(&k.progress_lock, 0);
    pm_counts_t *res = pm_i_calloc(1, sizeof *res);
    int32_t *eidx = pm_i_malloc(inc->n_items, sizeof *eidx);
    uint64_t nnz = 0;
    pm_err_t rc = res && eidx ? renumber_eligible(&k, inc, eidx) : PM_ENOMEM;
    if (rc == PM_OK) {
        rc = filter_rows(&k, inc, eidx, &nnz);
    }
    free(eidx);
    if (rc == PM_OK) {
        res->work = k.total;
        res->kernel = pick_kernel(o, inc, k.E);
        size_t want = (size_t)k.threads * 64; /* small chunks: the last one alone is short */
        rc = res->kernel == PM_COUNTS_SPARSE ? count_sparse(&k, nnz, want) : count_dense(&k, want);
    }
    if (rc == PM_OK) {
        rc = concat_outputs(&k, res, inc->weight != NULL);
    }
    kstate_free(&k);
    if (rc != PM_OK) {
        pm_counts_free(res);
        return counts_error(rc, diag);
    }
    *out = res;
    return PM_OK;
}

/* ==== one item's joint counts ============================================================ */
/* One pass over the rows (or the given pairs) with one counter per item: memory in the number
 * of items, never in the number of pairs (issue 15 point 9). Weighted sums are exact where the
 * weights' range allows (src/exactsum.h), so they equal those of pm_counts_build and of count
 * shards bit for bit. */
pm_err_t pm_counts_item(const pm_incidence_t *inc, uint32_t item, const pm_counts_t *given,
                        uint32_t *nb, double *wb, pm_diag_t *diag) {
    size_t n = inc->n_items;
    memset(nb, 0, n * sizeof *nb);
    if (wb) {
        memset(wb, 0, n * sizeof *wb);
    }
    if (given) {
        for (size_t k = 0; k < given->n_pairs; k++) {
            uint32_t a = given->a[k], b = given->b[k];
            if (a != item && b != item) {
                continue;
            }
            uint32_t o = a == item ? b : a;
            nb[o] = given->n[k];
            if (wb) {
                wb[o] = given->w ? given->w[k] : (double)given->n[k];
            }
        }
        return PM_OK;
    }
    const double *wt = inc->weight;
    pm_i_u128 *wx = NULL;
    int xe = 0;
    if (wt && wb) {
        pm_i_xs_range xr = {0};
        for (size_t r = 0; r < inc->n_resp; r++) {
            pm_i_xs_see(&xr, wt[r]);
        }
        if (pm_i_xs_fit(&xr, inc->n_resp, &xe) == 0) {
            wx = pm_i_calloc(n ? n : 1, sizeof *wx);
            if (!wx) {
                return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory while counting pairs");
            }
        }
    }
    for (size_t r = 0; r < inc->n_resp; r++) {
        uint64_t beg = inc->row_ptr[r], end = inc->row_ptr[r + 1];
        uint64_t lo = beg, hi = end; /* the row's items increase: binary search for item */
        while (lo < hi) {
            uint64_t mid = lo + (hi - lo) / 2;
            if (inc->col[mid] < item) {
                lo = mid + 1;
            } else {
                hi = mid;
            }
        }
        if (lo == end || inc->col[lo] != item) {
            continue;
        }
        pm_i_u128 u = wx ? pm_i_xs_units(wt[r], xe) : 0;
        for (uint64_t q = beg; q < end; q++) {
            uint32_t b = inc->col[q];
            if (b == item) {
                continue;
            }
            nb[b]++;
            if (wx) {
                wx[b] += u;
            } else if (wt && wb) {
                wb[b] += wt[r];
            }
        }
    }
    if (wb) {
        for (size_t b = 0; b < n; b++) {
            wb[b] = wx ? pm_i_xs_double(wx[b], xe) : wt ? wb[b] : (double)nb[b];
        }
    }
    free(wx);
    return PM_OK;
}
