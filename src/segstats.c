/* The table of one segment column (include/pairmap/segments.h): shares with Jeffreys
 * intervals, the empirical-Bayes beta-binomial shrinkage with one prior strength m per column
 * fitted by maximum likelihood, the one-against-the-rest tests with Benjamini-Hochberg, and the
 * Cochran-Armitage trend test for ordered columns. */
#include <gsl/gsl_cdf.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_min.h>
#include <gsl/gsl_sf_gamma.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "pairmap/assoc.h"
#include "pairmap/cooccur.h"
#include "pairmap/segments.h"
#include "parallel.h"
#include "util.h"

void pm_segstats_destroy(pm_segstats_t *s) {
    if (!s) {
        return;
    }
    free(s->chose);
    free(s->n_eff);
    free(s->x_eff);
    free(s->share);
    free(s->mu);
    free(s->share_low);
    free(s->share_high);
    free(s->shrunk);
    free(s->shrunk_low);
    free(s->shrunk_high);
    free(s->p);
    free(s->q);
    free(s->test);
    free(s->trend_z);
    free(s->trend_p);
    memset(s, 0, sizeof *s);
}

/* log Gamma(a + x) - log Gamma(a), x a count >= 0, a > 0. GSL's gsl_sf_lnpoch loses about
 * 1e-7 (absolute) at a near 1e8 (measured against a long-double sum of log(a + j): 2.6e-7 at
 * a = 1e8, x = 1), which is more than the flat likelihood of a column without spread varies
 * by. Small x: the sum itself, x log a + sum log1p(j / a). Large a: Stirling's series for the
 * difference written without cancellation, (a - 1/2) log1p(x / a) + x log(a + x) - x
 * + c(a + x) - c(a) with c(z) = 1/(12 z) - 1/(360 z^3) + 1/(1260 z^5) (Abramowitz and Stegun
 * 6.1.41; the next term is below 1e-30 for z >= 1e4). Otherwise GSL. */
#define PM_STIRLING_C(t)                                                                           \
    (1 / (12 * (t)) - 1 / (360 * (t) * (t) * (t)) + 1 / (1260 * (t) * (t) * (t) * (t) * (t)))
static double stirling_diff(double a, double x) {
    double z = a + x;
    return (a - 0.5) * log1p(x / a) + x * log(z) - x + (PM_STIRLING_C(z) - PM_STIRLING_C(a));
}
#undef PM_STIRLING_C

static double lnpoch_int(double a, double x) {
    if (x <= 0) {
        return 0;
    }
    if (x <= 32) {
        double s = x * log(a);
        for (double j = 1; j < x; j++) {
            s += log1p(j / a);
        }
        return s;
    }
    if (a >= 1e4 && x <= 0.1 * a) {
        return stirling_diff(a, x);
    }
    return gsl_sf_lnpoch(a, x);
}

/* The same for any x >= 0 (weighted input gives effective counts with a fraction f):
 * Gamma(a + x) / Gamma(a) = Gamma(a + f) / Gamma(a) * Gamma(a + f + n) / Gamma(a + f),
 * n = floor(x); a whole x takes lnpoch_int alone (the same bits as before fractions). */
static double lnpoch(double a, double x) {
    double n = floor(x), f = x - n;
    if (!(f > 0)) {
        return lnpoch_int(a, x);
    }
    double head = a >= 1e4 ? stirling_diff(a, f) : gsl_sf_lnpoch(a, f);
    return head + lnpoch_int(a + f, n);
}

/* log C(n, x) for counts, or for effective counts as log Gamma(n + 1) - log Gamma(x + 1)
 * - log Gamma(n - x + 1) = -log(n + 1) - log B(n - x + 1, x + 1). */
static double lnchoose(double n, double x, int whole) {
    if (whole) {
        return gsl_sf_lnchoose((unsigned)n, (unsigned)x);
    }
    return -log1p(n) - gsl_sf_lnbeta(n - x + 1, x + 1);
}

/* ==== the beta-binomial fit ================================================================= */
/* The log-likelihood is a sum over items, cut into FIT_CHUNKS fixed ranges of items that the
 * threads share; the partial sums are added in chunk order, so the result does not depend on
 * the number of threads. */
#define FIT_CHUNKS 64
typedef struct {
    const pm_segstats_t *s;
    const pm_segcol_t *c;
    unsigned threads;
    double m;
    int with_const;
    double *lpn; /* [levels] lnpoch(m, n_k): the same for every item */
    double part[FIT_CHUNKS];
} fit_ctx;

/* Log-likelihood of the cells of chunk ch at prior strength f->m: sum over cells of
 * log C(n, x) + log B(x + m mu, n - x + m (1 - mu)) - log B(m mu, m (1 - mu)), over items with
 * 0 < mu < 1 (an item chosen by none or by all of them carries no information on m). */
static int ll_chunk(void *ud, size_t ch, unsigned th) {
    (void)th;
    fit_ctx *f = ud;
    const pm_segstats_t *s = f->s;
    size_t i0 = s->n_items * ch / FIT_CHUNKS, i1 = s->n_items * (ch + 1) / FIT_CHUNKS;
    double ll = 0, m = f->m;
    for (size_t i = i0; i < i1; i++) {
        double mu = s->mu[i];
        if (!(mu > 0 && mu < 1)) {
            continue;
        }
        double a = m * mu, b = m * (1 - mu);
        for (size_t k = 0; k < s->n_levels; k++) {
            double n = s->n_eff[k], x = s->x_eff[k * s->n_items + i];
            if (f->c->base[k] == 0) {
                continue;
            }
            /* log B(x + a, n - x + b) - log B(a, b) as Pochhammer terms: no cancellation of
             * two large log-betas when m is large */
            ll += lnpoch(a, x) + lnpoch(b, n - x) - f->lpn[k];
            if (f->with_const) {
                ll += lnchoose(n, x, !s->weighted);
            }
        }
    }
    f->part[ch] = ll;
    return 0;
}

static double loglik_c(fit_ctx *f, double m, int with_const) {
    f->m = m;
    f->with_const = with_const;
    for (size_t k = 0; k < f->s->n_levels; k++) {
        f->lpn[k] = lnpoch(m, f->s->n_eff[k]);
    }
    if (f->threads < 2 || pm_i_parallel(f->threads, FIT_CHUNKS, ll_chunk, f) != 0) {
        for (size_t ch = 0; ch < FIT_CHUNKS; ch++) {
            ll_chunk(f, ch, 0);
        }
    }
    double ll = 0;
    for (size_t ch = 0; ch < FIT_CHUNKS; ch++) {
        ll += f->part[ch];
    }
    return ll;
}

/* Without the binomial terms, which do not depend on m: for the search. */
static double loglik(fit_ctx *f, double m) {
    return loglik_c(f, m, 0);
}

static double neg_ll_log(double lm, void *v) {
    return -loglik(v, exp(lm));
}

/* The search grid: G points, 22 a decade, over [log M_MIN, log M_MAX]. Its points are
 * evaluated lazily: every COARSE-th first, then the fine points around the best coarse one,
 * climbing while the best lies at the edge of what has been evaluated, so that the fine grid's
 * best point near the coarse optimum is found with about a fifth of the evaluations. */
enum { G = 241, COARSE = 6 };
typedef struct {
    fit_ctx *f;
    double lo, hi;
    double val[G];
    unsigned char done[G];
} grid_t;

static double grid_lm(const grid_t *g, int i) {
    return g->lo + (g->hi - g->lo) * i / (G - 1);
}

static double grid_at(grid_t *g, int i) {
    if (!g->done[i]) {
        g->val[i] = loglik(g->f, exp(grid_lm(g, i)));
        g->done[i] = 1;
    }
    return g->val[i];
}

/* the best evaluated point after the coarse pass and the climb (ties: the lower point) */
static int grid_best(grid_t *g) {
    int bi = 0;
    for (int i = 0; i < G; i += COARSE) {
        if (grid_at(g, i) > grid_at(g, bi)) {
            bi = i;
        }
    }
    int lo = bi - COARSE < 0 ? 0 : bi - COARSE, hi = bi + COARSE > G - 1 ? G - 1 : bi + COARSE;
    for (;;) {
        for (int i = lo; i <= hi; i++) {
            if (grid_at(g, i) > grid_at(g, bi)) {
                bi = i;
            }
        }
        if (bi == lo && lo > 0) {
            lo = lo - COARSE < 0 ? 0 : lo - COARSE;
        } else if (bi == hi && hi < G - 1) {
            hi = hi + COARSE > G - 1 ? G - 1 : hi + COARSE;
        } else {
            return bi;
        }
    }
}

/* Maximises the log-likelihood over log m: the grid above, then GSL's Brent minimiser inside
 * the best point's neighbours. At a grid end the optimum is that bound (reported in m_at). */
static pm_err_t fit_m(pm_segstats_t *s, const pm_segcol_t *c, unsigned threads) {
    grid_t *g = pm_i_calloc(1, sizeof *g);
    fit_ctx f = {s,  c, threads, 0, 0, pm_i_malloc(s->n_levels ? s->n_levels : 1, sizeof(double)),
                 {0}};
    if (!g || !f.lpn) {
        pm_i_free(g);
        pm_i_free(f.lpn);
        return PM_ENOMEM;
    }
    g->f = &f;
    g->lo = log(PM_SEG_M_MIN);
    g->hi = log(PM_SEG_M_MAX);
    double lo = g->lo, hi = g->hi;
    int bi = grid_best(g);
    double best = grid_at(g, bi);
    double lm = grid_lm(g, bi);
    if (bi == 0 || bi == G - 1) {
        /* at a grid end: the optimum may still lie between the end and its neighbour (the
         * likelihood is flat towards m -> infinity); a golden-section search there */
        int nb = bi == 0 ? 1 : G - 2;
        double a = grid_lm(g, bi < nb ? bi : nb), b = a + (hi - lo) / (G - 1);
        const double r = 0.6180339887498949;
        double c1 = b - r * (b - a), c2 = a + r * (b - a);
        double f1 = loglik(&f, exp(c1)), f2 = loglik(&f, exp(c2));
        for (int it = 0; it < 48; it++) { /* the bracket to 0.618^48: 1e-11 of a step */
            if (f1 >= f2) {
                b = c2;
                c2 = c1;
                f2 = f1;
                c1 = b - r * (b - a);
                f1 = loglik(&f, exp(c1));
            } else {
                a = c1;
                c1 = c2;
                f1 = f2;
                c2 = a + r * (b - a);
                f2 = loglik(&f, exp(c2));
            }
        }
        double mid = 0.5 * (a + b), v = loglik(&f, exp(mid));
        if (v > best) {
            best = v;
            lm = mid;
        }
        /* the bound itself when it is as good to 1e-9 (a flat likelihood: no spread beyond
         * binomial noise at the upper end, reported as such) */
        double edge = bi == 0 ? lo : hi, ve = loglik(&f, exp(edge));
        if (ve >= best - 1e-9) {
            lm = edge;
        }
        s->m_at = lm == edge ? (bi == 0 ? -1 : 1) : 0;
    } else {
        s->m_at = 0;
    }
    if (bi > 0 && bi < G - 1) {
        double a = grid_lm(g, bi - 1), b = grid_lm(g, bi + 1);
        gsl_function F = {neg_ll_log, &f};
        gsl_min_fminimizer *mn = gsl_min_fminimizer_alloc(gsl_min_fminimizer_brent);
        if (mn && gsl_min_fminimizer_set_with_values(mn, &F, lm, -best, a, -grid_at(g, bi - 1), b,
                                                     -grid_at(g, bi + 1)) == GSL_SUCCESS) {
            for (int it = 0; it < 100; it++) {
                if (gsl_min_fminimizer_iterate(mn) != GSL_SUCCESS) {
                    break;
                }
                double x0 = gsl_min_fminimizer_x_lower(mn), x1 = gsl_min_fminimizer_x_upper(mn);
                if (gsl_min_test_interval(x0, x1, 1e-10, 0) == GSL_SUCCESS) {
                    break;
                }
            }
            double xm = gsl_min_fminimizer_x_minimum(mn);
            if (-gsl_min_fminimizer_f_minimum(mn) >= best) {
                lm = xm;
            }
        }
        gsl_min_fminimizer_free(mn);
    }
    /* the upper bound when it is as good to 1e-9 (a flat likelihood towards m -> infinity:
     * no spread beyond binomial noise), reported as such */
    if (s->m_at == 0 && loglik(&f, PM_SEG_M_MAX) >= loglik(&f, exp(lm)) - 1e-9) {
        lm = hi;
        s->m_at = 1;
    }
    s->m = s->m_at > 0 ? PM_SEG_M_MAX : s->m_at < 0 ? PM_SEG_M_MIN : exp(lm);
    s->loglik = loglik_c(&f, s->m, 1);
    pm_i_free(g);
    pm_i_free(f.lpn);
    return PM_OK;
}

/* ==== per cell ============================================================================== */
/* The weighted sums a weighted table needs besides the counts (NULL arrays when unweighted). */
typedef struct {
    double *wchose; /* [cells] weight of the segment's respondents who chose the item */
    double *wbase;  /* [levels] weight of the segment */
    double *w2base; /* [levels] squared weights of the segment */
    double *wtot;   /* [items] weight of the respondents with a segment who chose the item */
    double WB, W2B; /* weight and squared weights of the respondents with a segment */
} wsums;

/* The Jeffreys intervals of the counts 0..JT of every segment, computed once (most items
 * are rare: their counts repeat from item to item); jt[(k * (JT + 1) + x) * 2 + 0/1]. The
 * same function on the same arguments: the same bits as computing them per cell. Unweighted
 * only (weighted counts are fractions). */
#define JT 64
static void cell_test(pm_segstats_t *s, const pm_segcol_t *c, const wsums *w, size_t k, size_t i,
                      uint64_t tot) {
    size_t j = k * s->n_items + i;
    uint64_t n = c->base[k], x = s->chose[j];
    s->p[j] = NAN;
    s->test[j] = 0;
    if (!(n > 0 && n < s->B && tot > 0 && tot < s->B)) {
        return;
    }
    pm_measures_t m;
    if (s->weighted) {
        /* as pairs are tested with weights: chi-square on Kish's effective size of the
         * respondents with a segment (the segment and the item as the two "items") */
        pm_assoc_weighted(w->WB, w->wbase[k], w->wtot[i], w->wchose[j], w->WB * w->WB / w->W2B,
                          PM_SIGN_BOTH, &m);
    } else {
        pm_assoc_counts(s->B, n, tot, x, PM_SIGN_BOTH, &m);
    }
    s->p[j] = m.p;
    s->test[j] = m.test == PM_TEST_FISHER ? 1 : 2;
}

static void cell(pm_segstats_t *s, const pm_segcol_t *c, const wsums *w, const double *jt, size_t k,
                 size_t i, uint64_t tot) {
    size_t j = k * s->n_items + i;
    double n = s->n_eff[k], x = s->x_eff[j], mu = s->mu[i];
    if (jt && s->chose[j] <= JT) {
        s->share_low[j] = jt[(k * (JT + 1) + s->chose[j]) * 2];
        s->share_high[j] = jt[(k * (JT + 1) + s->chose[j]) * 2 + 1];
    } else {
        pm_assoc_jeffreys(x, n, 0.05, &s->share_low[j], &s->share_high[j]);
    }
    double a = x + s->m * mu, b = (n - x) + s->m * (1 - mu);
    s->shrunk[j] = a / (a + b);
    s->shrunk_low[j] = a <= 0 ? 0 : pm_assoc_beta_quantile(0.025, a, b);
    s->shrunk_high[j] = b <= 0 ? 1 : pm_assoc_beta_quantile(0.975, a, b);
    cell_test(s, c, w, k, i, tot);
}

/* The cells in CELL_CHUNKS fixed ranges shared by the threads (each cell on its own). */
#define CELL_CHUNKS 64
typedef struct {
    pm_segstats_t *s;
    const pm_segcol_t *c;
    const uint64_t *tot;
    const wsums *w;
    double *jt; /* NULL: no table */
} cell_job;

static int jt_chunk(void *ud, size_t ch, unsigned th) {
    (void)th;
    cell_job *j = ud;
    size_t nl = j->s->n_levels;
    for (size_t k = nl * ch / CELL_CHUNKS; k < nl * (ch + 1) / CELL_CHUNKS; k++) {
        uint64_t n = j->c->base[k];
        for (uint64_t x = 0; x <= JT && x <= n; x++) {
            double *o = &j->jt[(k * (JT + 1) + x) * 2];
            pm_assoc_jeffreys((double)x, (double)n, 0.05, &o[0], &o[1]);
        }
    }
    return 0;
}

static int cell_chunk(void *ud, size_t ch, unsigned th) {
    (void)th;
    cell_job *j = ud;
    size_t n = j->s->n_levels * j->s->n_items, ni = j->s->n_items;
    for (size_t x = n * ch / CELL_CHUNKS; x < n * (ch + 1) / CELL_CHUNKS; x++) {
        cell(j->s, j->c, j->w, j->jt, x / ni, x % ni, j->tot[x % ni]);
    }
    return 0;
}

/* Cochran-Armitage test of a linear trend in item i's share over the ordered levels, scores
 * 1..k, no continuity correction (Agresti, Categorical Data Analysis, section 5.3.5):
 * z = sum t_s (x_s - n_s pbar) / sqrt(pbar (1 - pbar) sum n_s (t_s - tbar)^2), on the
 * effective counts x_eff of n_eff when weighted (pbar = sum x_s / sum n_s). */
static void trend(pm_segstats_t *s, const pm_segcol_t *c, size_t i, uint64_t tot) {
    s->trend_z[i] = s->trend_p[i] = NAN;
    if (!c->ordered || s->n_levels < 2 || tot == 0 || tot >= s->B) {
        return;
    }
    double B = 0, X = 0, tbar = 0;
    for (size_t k = 0; k < s->n_levels; k++) {
        B += s->n_eff[k];
        X += s->x_eff[k * s->n_items + i];
        tbar += (double)(k + 1) * s->n_eff[k];
    }
    double pbar = s->weighted ? X / B : (double)tot / (double)s->B;
    tbar /= s->weighted ? B : (double)s->B;
    double num = 0, ss = 0;
    for (size_t k = 0; k < s->n_levels; k++) {
        double t = (double)(k + 1), n = s->n_eff[k];
        num += t * (s->x_eff[k * s->n_items + i] - n * pbar);
        ss += n * (t - tbar) * (t - tbar);
    }
    double v = pbar * (1 - pbar) * ss;
    if (v > 0) {
        s->trend_z[i] = num / sqrt(v);
        s->trend_p[i] = 2 * gsl_cdf_ugaussian_Q(fabs(s->trend_z[i]));
    }
}

uint64_t pm_segstats_bytes(size_t levels, size_t items) {
    double cells = (double)levels * (double)items;
    double b = (cells + 1) * PM_SEG_CELL_BYTES + ((double)levels + 1) * (JT + 1) * 16 +
               ((double)items + 1) * 48 + ((double)levels + 1) * 32;
    return b >= 1.8e19 ? UINT64_MAX : (uint64_t)b;
}

static pm_err_t alloc_all(pm_segstats_t *s, size_t k, size_t ni, wsums *w) {
    size_t cells = k * ni > 0 ? k * ni : 1, items = ni ? ni : 1, lv = k ? k : 1;
    s->chose = pm_i_calloc(cells, sizeof *s->chose);
    s->mu = pm_i_calloc(items, sizeof *s->mu);
    s->trend_z = pm_i_calloc(items, sizeof *s->trend_z);
    s->trend_p = pm_i_calloc(items, sizeof *s->trend_p);
    s->n_eff = pm_i_calloc(lv, sizeof *s->n_eff);
    double **d[] = {&s->share_low, &s->share_high, &s->shrunk, &s->shrunk_low, &s->shrunk_high,
                    &s->p,         &s->q,          &s->x_eff,  &s->share};
    int ok = s->chose && s->mu && s->trend_z && s->trend_p && s->n_eff;
    for (size_t j = 0; j < sizeof d / sizeof d[0]; j++) {
        ok &= (*d[j] = pm_i_calloc(cells, sizeof(double))) != NULL;
    }
    ok &= (s->test = pm_i_calloc(cells, 1)) != NULL;
    if (s->weighted) {
        ok &= (w->wchose = pm_i_calloc(cells, sizeof(double))) != NULL;
        ok &= (w->wbase = pm_i_calloc(lv, sizeof(double))) != NULL;
        ok &= (w->w2base = pm_i_calloc(lv, sizeof(double))) != NULL;
        ok &= (w->wtot = pm_i_calloc(items, sizeof(double))) != NULL;
    }
    return ok ? PM_OK : PM_ENOMEM;
}

static void wsums_free(wsums *w) {
    pm_i_free(w->wchose);
    pm_i_free(w->wbase);
    pm_i_free(w->w2base);
    pm_i_free(w->wtot);
}

/* The counts (and weighted sums) of every cell, in respondent order. */
static void count_cells(pm_segstats_t *s, const pm_segcol_t *c, const pm_incidence_t *inc,
                        wsums *w) {
    size_t ni = s->n_items, nr = inc->n_resp < c->n_resp ? inc->n_resp : c->n_resp;
    for (size_t r = 0; r < nr; r++) {
        int32_t lv = c->of[r];
        if (lv < 0) {
            continue;
        }
        double wr = s->weighted ? inc->weight[r] : 0;
        if (s->weighted) {
            w->wbase[lv] += wr;
            w->w2base[lv] += wr * wr;
        }
        for (uint64_t p = inc->row_ptr[r]; p < inc->row_ptr[r + 1]; p++) {
            size_t j = (size_t)lv * ni + inc->col[p];
            s->chose[j]++;
            if (s->weighted) {
                w->wchose[j] += wr;
            }
        }
    }
}

/* Shares, effective sizes and counts, the item totals tot[] and the prior means mu[]. */
static void shares(pm_segstats_t *s, const pm_segcol_t *c, wsums *w, uint64_t *tot) {
    size_t k = s->n_levels, ni = s->n_items;
    for (size_t l = 0; l < k; l++) {
        s->B += c->base[l];
        if (s->weighted) {
            w->WB += w->wbase[l];
            w->W2B += w->w2base[l];
        }
        s->n_eff[l] = s->weighted
                          ? (w->w2base[l] > 0 ? w->wbase[l] * w->wbase[l] / w->w2base[l] : 0)
                          : (double)c->base[l];
    }
    for (size_t l = 0; l < k; l++) {
        for (size_t i = 0; i < ni; i++) {
            size_t j = l * ni + i;
            if (s->weighted) {
                s->share[j] = w->wbase[l] > 0 ? w->wchose[j] / w->wbase[l] : NAN;
                s->x_eff[j] = w->wbase[l] > 0 ? s->share[j] * s->n_eff[l] : 0;
                w->wtot[i] += w->wchose[j];
            } else {
                s->share[j] = c->base[l] ? (double)s->chose[j] / (double)c->base[l] : NAN;
                s->x_eff[j] = (double)s->chose[j];
            }
            tot[i] += s->chose[j];
        }
    }
    for (size_t i = 0; i < ni; i++) {
        if (s->weighted) {
            s->mu[i] = w->WB > 0 ? w->wtot[i] / w->WB : NAN;
        } else {
            s->mu[i] = s->B ? (double)tot[i] / (double)s->B : NAN;
        }
        s->cells_fitted += (tot[i] > 0 && tot[i] < s->B) ? k : 0;
    }
}

/* Benjamini-Hochberg over the cells that have a test. */
static pm_err_t bh_cells(pm_segstats_t *s) {
    size_t nt = 0, n = s->n_levels * s->n_items;
    double *pp = pm_i_malloc(n > 0 ? n : 1, sizeof *pp);
    if (!pp) {
        return PM_ENOMEM;
    }
    for (size_t j = 0; j < n; j++) {
        if (!isnan(s->p[j])) {
            pp[nt++] = s->p[j];
        }
    }
    pm_err_t rc = pm_assoc_bh(pp, nt, pp);
    for (size_t j = 0, t = 0; rc == PM_OK && j < n; j++) {
        s->q[j] = isnan(s->p[j]) ? NAN : pp[t++];
    }
    pm_i_free(pp);
    return rc;
}

static void cells_all(pm_segstats_t *s, const pm_segcol_t *c, const wsums *w, const uint64_t *tot,
                      unsigned threads) {
    size_t k = s->n_levels, ni = s->n_items;
    /* the table only where it costs fewer quantiles than it saves at most */
    double *jt =
        !s->weighted && ni > 2 * (JT + 1) ? pm_i_malloc(k * (JT + 1) * 2, sizeof *jt) : NULL;
    cell_job cj = {s, c, tot, w, jt};
    if (jt && (threads < 2 || pm_i_parallel(threads, CELL_CHUNKS, jt_chunk, &cj) != 0)) {
        for (size_t ch = 0; ch < CELL_CHUNKS; ch++) {
            jt_chunk(&cj, ch, 0);
        }
    }
    if (threads < 2 || pm_i_parallel(threads, CELL_CHUNKS, cell_chunk, &cj) != 0) {
        for (size_t ch = 0; ch < CELL_CHUNKS; ch++) {
            cell_chunk(&cj, ch, 0);
        }
    }
    pm_i_free(jt);
    for (size_t i = 0; i < ni; i++) {
        trend(s, c, i, tot[i]);
    }
}

pm_err_t pm_segstats_run(const pm_incidence_t *inc, const pm_segcol_t *c, unsigned threads,
                         pm_segstats_t *s, pm_diag_t *diag) {
    memset(s, 0, sizeof *s);
    size_t k = c->n_levels, ni = inc->n_items;
    s->n_levels = k;
    s->n_items = ni;
    s->weighted = inc->weight != NULL;
    wsums w = {0};
    uint64_t *tot = NULL;
    pm_err_t rc = alloc_all(s, k, ni, &w);
    if (rc == PM_OK && !(tot = pm_i_calloc(ni ? ni : 1, sizeof *tot))) {
        rc = PM_ENOMEM;
    }
    if (rc == PM_OK) {
        count_cells(s, c, inc, &w);
        shares(s, c, &w, tot);
        if (threads == 0) {
            threads = pm_cpu_count();
        }
        rc = fit_m(s, c, threads);
    }
    if (rc == PM_OK) {
        cells_all(s, c, &w, tot, threads);
        rc = bh_cells(s);
    }
    pm_i_free(tot);
    wsums_free(&w);
    if (rc != PM_OK) {
        pm_segstats_destroy(s);
        return pm_diag_set(diag, rc, NULL, 0, "out of memory");
    }
    return PM_OK;
}
