/* Confidence of one item towards another with its Jeffreys interval: the one definition
 * behind `pairmap partners` and the HTML page's partner table (see assoc.h), and the Jeffreys
 * intervals of many (x, n) at once, each distinct (x, n) solved once, on several threads. */
#include "pairmap/assoc.h"

#include <stdint.h>
#include <string.h>

#include "parallel.h"
#include "util.h"

/* The confidence a -> b and the (x, n) of its Jeffreys interval. */
static void confidence_args(const pm_incidence_t *inc, uint32_t a, uint64_t n_ab, double w_ab,
                            double *conf, double *x, double *n) {
    if (inc->weight) {
        double na = (double)inc->count[a];
        double w = inc->wcount ? inc->wcount[a] : na, w2 = inc->w2count ? inc->w2count[a] : na;
        double neff = w2 > 0 ? w * w / w2 : 0;
        *conf = w_ab / w;
        *x = *conf * neff;
        *n = neff;
    } else {
        *conf = (double)n_ab / (double)inc->count[a];
        *x = (double)n_ab;
        *n = (double)inc->count[a];
    }
}

void pm_assoc_confidence(const pm_incidence_t *inc, uint32_t a, uint64_t n_ab, double w_ab,
                         double *conf, double *lo, double *hi) {
    double x, n;
    confidence_args(inc, a, n_ab, w_ab, conf, &x, &n);
    pm_assoc_jeffreys(x, n, 0.05, lo, hi);
}

void pm_assoc_confidence_args(const pm_incidence_t *inc, uint32_t a, uint64_t n_ab, double w_ab,
                              double *conf, double *x, double *n) {
    confidence_args(inc, a, n_ab, w_ab, conf, x, n);
}

/* ---- many intervals ------------------------------------------------------------------------ */
#define JEFF_CHUNKS 64 /* chunks per thread: the work per interval varies */

typedef struct {
    const double *x, *n;
    double alpha, *lo, *hi;
    const uint32_t *rep; /* query -> the first query with its (x, n); NULL: none shared */
    size_t k, chunks;
} jeff_job;

static int jeff_chunk(void *ud, size_t c, unsigned th) {
    (void)th;
    const jeff_job *j = ud;
    for (size_t q = j->k * c / j->chunks; q < j->k * (c + 1) / j->chunks; q++) {
        if (!j->rep || j->rep[q] == q) {
            double x = j->x[q], n = j->n[q]; /* read before lo, hi (may alias) are written */
            pm_assoc_jeffreys(x, n, j->alpha, &j->lo[q], &j->hi[q]);
        }
    }
    return 0;
}

static uint64_t bits_of(double v) {
    uint64_t b;
    memcpy(&b, &v, sizeof b);
    return b;
}

/* rep[q]: the first query with q's (x, n), bit for bit, by open addressing on their hash. 0,
 * or -1 when the table cannot be allocated (rep is then unset). */
static int jeff_groups(const double *x, const double *n, size_t k, uint32_t *rep) {
    size_t cap = 16;
    while (cap < 2 * k) {
        cap *= 2;
    }
    uint32_t *slot = pm_i_malloc(cap, sizeof *slot);
    if (!slot) {
        return -1;
    }
    memset(slot, 0xff, cap * sizeof *slot);
    for (size_t q = 0; q < k; q++) {
        uint64_t bx = bits_of(x[q]), bn = bits_of(n[q]);
        uint64_t h = (bx ^ (bn * 0x9E3779B97F4A7C15ull)) * 0xBF58476D1CE4E5B9ull;
        size_t at = (size_t)(h >> 32) & (cap - 1);
        for (;;) {
            uint32_t r = slot[at];
            if (r == UINT32_MAX) {
                slot[at] = (uint32_t)q;
                rep[q] = (uint32_t)q;
                break;
            }
            if (bits_of(x[r]) == bx && bits_of(n[r]) == bn) {
                rep[q] = r;
                break;
            }
            at = (at + 1) & (cap - 1);
        }
    }
    pm_i_free(slot);
    return 0;
}

void pm_assoc_jeffreys_many(const double *x, const double *n, size_t k, double alpha,
                            unsigned threads, double *lo, double *hi) {
    threads = threads ? threads : pm_cpu_count();
    uint32_t *rep = k < UINT32_MAX ? pm_i_malloc(k ? k : 1, sizeof *rep) : NULL;
    if (rep && jeff_groups(x, n, k, rep) != 0) {
        pm_i_free(rep);
        rep = NULL; /* every query solved on its own: the same values, more work */
    }
    size_t chunks = (size_t)threads * JEFF_CHUNKS;
    jeff_job j = {x, n, alpha, lo, hi, rep, k, k < chunks ? (k ? k : 1) : chunks};
    (void)pm_i_parallel(threads, j.chunks, jeff_chunk, &j); /* every chunk runs (parallel.h) */
    if (rep) {
        for (size_t q = 0; q < k; q++) { /* the first query of each (x, n) is solved by now */
            if (rep[q] != q) {
                lo[q] = lo[rep[q]];
                hi[q] = hi[rep[q]];
            }
        }
    }
    pm_i_free(rep);
}
