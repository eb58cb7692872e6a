/* Merging the runs of deferred respondent ids (see struct pm_table in src/input_internal.h):
 * the runs that share an id become one respondent, numbered in order of first appearance, and
 * the rows are remapped. The runs are grouped by the top 32 bits of their ids' hashes on all
 * threads: keys (hash << 32 | run) are cut by their top bits into buckets (each thread's share
 * of the runs scattered in order, so each bucket holds its runs in run order), each bucket is
 * sorted by a stable radix sort on one thread, and equal strings are looked for only among the
 * runs of one hash, in run order. Which thread sorts which bucket changes nothing: a run's
 * first equal run is the same whatever the order of the buckets. The runs of a parallel read
 * stay where its chunks left them (pm_i_run_seg, handed over by src/read_par.c): the table's
 * own runs first, then each segment's. */
#include "input_internal.h"
#include "parallel.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#define RUNS_BUCKET_BITS 8 /* 256 buckets when there are many runs */
#define RUNS_MANY (1u << 20)

typedef struct {
    uint32_t later, first; /* run `later` has the id of run `first` (first < later) */
} run_dup;

typedef struct {
    run_dup *v;
    size_t n, cap;
    unsigned char *seen; /* [group] a run of the group already known to be a repeat */
    size_t seen_cap;
} dup_list;

/* A share of the runs for phases 0 and 1: runs a..b of one segment. */
typedef struct {
    const pm_i_run_seg *seg;
    size_t a, b;
} run_share;

typedef struct {
    const pm_i_run_seg *segs; /* [nsegs] in run order: the table's own runs, then the chunks' */
    size_t nsegs;
    run_share *share;  /* [nparts] in run order */
    size_t n, nparts;  /* runs; shares of them */
    int bits;          /* bucket bits: 0 (one bucket) or RUNS_BUCKET_BITS */
    int phase;         /* 0: count, 1: scatter, 2: sort and find repeats */
    uint64_t *keys;    /* [n] hash << 32 | run, by bucket */
    size_t *at;        /* [nparts][buckets] where each share's runs of a bucket go */
    size_t *start;     /* [buckets + 1] where each bucket starts */
    dup_list *dups;    /* [threads] */
    const char **rstr; /* [n] set in phase 1: each run's id */
} runs_job;

static size_t runs_bucket(const runs_job *j, uint64_t h) {
    return j->bits ? (size_t)(h >> (64 - j->bits)) : 0;
}

/* Phases 0 and 1 on share c of the runs. */
static void runs_scatter(runs_job *j, size_t c) {
    const run_share *sh = &j->share[c];
    const uint64_t *h = sh->seg->hash;
    size_t *at = j->at + (c << j->bits);
    if (j->phase == 0) {
        for (size_t r = sh->a; r < sh->b; r++) {
            at[runs_bucket(j, h[r])]++;
        }
        return;
    }
    for (size_t r = sh->a; r < sh->b; r++) {
        j->keys[at[runs_bucket(j, h[r])]++] = (h[r] >> 32) << 32 | (uint64_t)(sh->seg->r0 + r);
        j->rstr[sh->seg->r0 + r] = sh->seg->buf + sh->seg->off[r];
    }
}

/* The id of run r (its length into *len). */
static const char *run_id(const runs_job *j, size_t r, uint32_t *len) {
    size_t lo = 0, hi = j->nsegs; /* the last segment starting at or before r */
    while (hi - lo > 1) {
        size_t mid = lo + (hi - lo) / 2;
        if (j->segs[mid].r0 <= r) {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    const pm_i_run_seg *g = &j->segs[lo];
    *len = g->len[r - g->r0];
    return g->buf + g->off[r - g->r0];
}

/* The repeats among keys[a..b) (one hash, in run order) into d. -1 when out of memory. */
static int runs_group(const runs_job *j, size_t a, size_t b, dup_list *d) {
    size_t m = b - a;
    if (m > d->seen_cap) {
        free(d->seen);
        d->seen_cap = 0;
        if (!(d->seen = pm_i_malloc(m, 1))) {
            return -1;
        }
        d->seen_cap = m;
    }
    memset(d->seen, 0, m);
    for (size_t x = 1; x < m; x++) {
        uint32_t ra = (uint32_t)j->keys[a + x], la, lb;
        const char *ida = run_id(j, ra, &la);
        for (size_t y = 0; y < x; y++) {
            uint32_t rb = (uint32_t)j->keys[a + y];
            const char *idb = run_id(j, rb, &lb);
            if (!d->seen[y] && la == lb && memcmp(ida, idb, la) == 0) {
                if (d->n == d->cap && pm_i_grow((void **)&d->v, &d->cap, d->n + 1, sizeof *d->v)) {
                    return -1;
                }
                d->v[d->n++] = (run_dup){ra, rb}; /* rb: the first run of this id */
                d->seen[x] = 1;
                break;
            }
        }
    }
    return 0;
}

/* Phase 2 on bucket c: sorted by hash (stable: run order within a hash), repeats found. */
static int runs_sort_bucket(runs_job *j, size_t c, unsigned th) {
    size_t a = j->start[c], b = j->start[c + 1];
    uint64_t *k = j->keys;
    if (b - a > 1 && pm_i_radix_sort_from(k + a, b - a, sizeof *k, 32)) {
        return -1;
    }
    for (size_t i = a; i < b;) {
        size_t e = i + 1;
        while (e < b && k[e] >> 32 == k[i] >> 32) {
            e++;
        }
        if (e - i > 1 && runs_group(j, i, e, &j->dups[th])) {
            return -1;
        }
        i = e;
    }
    return 0;
}

static int runs_chunk(void *ud, size_t c, unsigned th) {
    runs_job *j = ud;
    if (j->phase < 2) {
        runs_scatter(j, c);
        return 0;
    }
    return runs_sort_bucket(j, c, th);
}

/* The shares of phases 0 and 1: each segment cut into pieces of about `size` runs, in run
 * order. Returns how many (at most nsegs + n / size), or 0 when out of memory. */
static size_t runs_shares(runs_job *j, size_t size) {
    size_t most = j->nsegs + j->n / size, k = 0;
    j->share = pm_i_malloc(most ? most : 1, sizeof *j->share);
    for (size_t g = 0; j->share && g < j->nsegs; g++) {
        size_t n = j->segs[g].n, parts = (n + size - 1) / size;
        for (size_t p = 0; p < parts; p++) {
            j->share[k++] = (run_share){&j->segs[g], n * p / parts, n * (p + 1) / parts};
        }
    }
    return j->share ? k : 0;
}

/* Where each share's runs of each bucket go: bucket by bucket, the shares in run order. */
static void runs_offsets(runs_job *j) {
    size_t sum = 0, nb = (size_t)1 << j->bits;
    for (size_t bk = 0; bk < nb; bk++) {
        j->start[bk] = sum;
        for (size_t c = 0; c < j->nparts; c++) {
            size_t x = j->at[(c << j->bits) + bk];
            j->at[(c << j->bits) + bk] = sum;
            sum += x;
        }
    }
    j->start[nb] = sum;
}

/* The repeats found into canon (made only when there are some: *dups). -1 out of memory. */
static int runs_canon_make(runs_job *j, unsigned threads, uint32_t **canon, size_t *dups) {
    for (unsigned th = 0; th < threads; th++) {
        *dups += j->dups[th].n;
    }
    if (*dups) {
        if (!(*canon = pm_i_malloc(j->n, sizeof **canon))) {
            return -1;
        }
        for (size_t r = 0; r < j->n; r++) {
            (*canon)[r] = (uint32_t)r;
        }
        for (unsigned th = 0; th < threads; th++) {
            for (size_t i = 0; i < j->dups[th].n; i++) {
                (*canon)[j->dups[th].v[i].later] = j->dups[th].v[i].first;
            }
        }
    }
    return 0;
}

/* Every run's first run of the same id into canon (canon[r] = r: the first of its id; NULL
 * when no id repeats), and every run's id into rstr, on up to `threads` threads. *dups gets the
 * number of repeats. -1 when out of memory. */
static int runs_canon(const pm_i_run_seg *segs, size_t nsegs, size_t n, unsigned threads,
                      const char **rstr, uint32_t **canon, size_t *dups) {
    runs_job j;
    memset(&j, 0, sizeof j);
    j.rstr = rstr;
    j.segs = segs;
    j.nsegs = nsegs;
    j.n = n;
    j.bits = n >= RUNS_MANY && threads > 1 ? RUNS_BUCKET_BITS : 0;
    size_t nb = (size_t)1 << j.bits;
    j.nparts = runs_shares(&j, j.bits ? n / (4 * (size_t)threads) + 1 : n + 1);
    j.keys = pm_i_malloc(n ? n : 1, sizeof *j.keys);
    j.at = pm_i_calloc((j.nparts ? j.nparts : 1) * nb, sizeof *j.at);
    j.start = pm_i_malloc(nb + 1, sizeof *j.start);
    j.dups = pm_i_calloc(threads, sizeof *j.dups);
    int rc = -1;
    *canon = NULL;
    *dups = 0;
    if (j.nparts && j.keys && j.at && j.start && j.dups &&
        pm_i_parallel(threads, j.nparts, runs_chunk, &j) == 0) {
        runs_offsets(&j);
        j.phase = 1;
        if (pm_i_parallel(threads, j.nparts, runs_chunk, &j) == 0) {
            j.phase = 2;
            if (pm_i_parallel(j.bits ? threads : 1, nb, runs_chunk, &j) == 0) {
                rc = runs_canon_make(&j, threads, canon, dups);
            }
        }
    }
    for (unsigned th = 0; j.dups && th < threads; th++) {
        free(j.dups[th].v);
        free(j.dups[th].seen);
    }
    free(j.dups);
    free(j.share);
    free(j.keys);
    free(j.at);
    free(j.start);
    return rc;
}

/* Folds each later run into its first (weights must agree), renumbers the respondents in
 * order of first appearance (t->rstr, set for every run, compacted) and remaps the rows. */
static pm_err_t runs_fold(pm_table_t *t, const uint32_t *canon, pm_diag_t *diag) {
    size_t n = t->run_n;
    for (size_t r = 0; r < n; r++) {
        uint32_t c = canon[r];
        if (c == r) {
            continue;
        }
        double wc = t->resp_weight ? t->resp_weight[c] : NAN;
        double wr = t->resp_weight ? t->resp_weight[r] : NAN;
        if (!isnan(wr)) {
            if (isnan(wc)) {
                t->resp_weight[c] = wr;
            } else if (wc != wr) {
                return pm_diag_set(diag, PM_EDATA, t->source, (long)t->resp_line[r],
                                   "weight %.17g differs from the weight %.17g this respondent "
                                   "has on line %llu; give each respondent one weight",
                                   wr, wc, (unsigned long long)t->resp_line[c]);
            }
        }
        t->resp_has_item[c] |= t->resp_has_item[r];
    }
    uint32_t *ix = pm_i_malloc(n ? n : 1, sizeof *ix); /* the new index of each run */
    if (!ix) {
        return pm_diag_set(diag, PM_ENOMEM, t->source, 0, "out of memory (respondent ids)");
    }
    size_t k = 0;
    for (size_t r = 0; r < n; r++) {
        if (canon[r] == r) {
            ix[r] = (uint32_t)k;
            if (t->resp_weight) {
                t->resp_weight[k] = t->resp_weight[r];
            }
            t->resp_line[k] = t->resp_line[r];
            t->resp_has_item[k] = t->resp_has_item[r];
            t->rstr[k] = t->rstr[r]; /* k <= r */
            k++;
        } else {
            ix[r] = ix[canon[r]];
        }
    }
    for (size_t i = 0; i < t->n_rows; i++) {
        t->row_resp[i] = ix[t->row_resp[i]];
    }
    t->stats.respondents = k;
    free(ix);
    return PM_OK;
}

pm_err_t pm_i_table_merge_runs(pm_table_t *t, unsigned threads, pm_diag_t *diag) {
    if (threads == 0) {
        long np = sysconf(_SC_NPROCESSORS_ONLN);
        threads = np > 0 ? (unsigned)np : 1;
    }
    size_t n = t->run_n, dups, nsegs = 0;
    uint32_t *canon = NULL;
    pm_i_run_seg *segs = pm_i_malloc(t->n_run_segs + 1, sizeof *segs);
    t->rstr = pm_i_malloc(n ? n : 1, sizeof *t->rstr);
    if (!segs || !t->rstr) {
        free(segs);
        return pm_diag_set(diag, PM_ENOMEM, t->source, 0, "out of memory (respondent ids)");
    }
    if (t->run_own) { /* the table's own runs, then the chunks' */
        segs[nsegs++] =
            (pm_i_run_seg){t->run_buf, t->run_off, t->run_len, t->run_hash, t->run_own, 0};
    }
    for (size_t k = 0; k < t->n_run_segs; k++) {
        segs[nsegs++] = t->run_segs[k];
    }
    int crc = runs_canon(segs, nsegs, n, threads, t->rstr, &canon, &dups);
    free(segs);
    if (crc) {
        return pm_diag_set(diag, PM_ENOMEM, t->source, 0, "out of memory (respondent ids)");
    }
    for (size_t k = 0; k < t->n_run_segs; k++) { /* only the ids' text is needed now */
        free(t->run_segs[k].off);
        free(t->run_segs[k].len);
        free(t->run_segs[k].hash);
        t->run_segs[k].off = NULL;
        t->run_segs[k].len = NULL;
        t->run_segs[k].hash = NULL;
    }
    pm_err_t rc = dups ? runs_fold(t, canon, diag) : PM_OK;
    free(canon);
    return rc;
}
