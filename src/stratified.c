/* Pairs within segments (include/pairmap/stratified.h): Mantel-Haenszel, Robins-Breslow-
 * Greenland, Cochran-Mantel-Haenszel, Breslow-Day with Tarone's correction, Simpson
 * reversal; per-stratum joint counts of the listed edges. */
#include "pairmap/stratified.h"

#include <gsl/gsl_cdf.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

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
        se += r1 * c1 / N;
        if (n[s] > 1) {
            sv += r1 * (N - r1) * c1 * (N - c1) / (N * N * (N - 1));
        }
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
    if (sv > 0) {
        double z = (sa - se) / sqrt(sv);
        out->cmh_p = sign == PM_SIGN_BOTH       ? gsl_cdf_chisq_Q(z * z, 1)
                     : sign == PM_SIGN_POSITIVE ? gsl_cdf_ugaussian_Q(z)
                                                : gsl_cdf_ugaussian_P(z);
    }
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

/* ---- the edges --------------------------------------------------------------------------- */
static int cmp_by_a(const void *x, const void *y, const pm_pairs_t *pp, const pm_edges_t *e) {
    size_t i = *(const size_t *)x, j = *(const size_t *)y;
    uint32_t a = pp->a[e->idx[i]], b = pp->a[e->idx[j]];
    return a < b ? -1 : a > b ? 1 : (i < j ? -1 : i > j);
}
static const pm_pairs_t *sort_pp; /* qsort has no context argument (the CLI is one thread here) */
static const pm_edges_t *sort_e;
static int cmp_edge(const void *x, const void *y) {
    return cmp_by_a(x, y, sort_pp, sort_e);
}

pm_err_t pm_stratified_edges(const pm_incidence_t *inc, const pm_segcol_t *c, const pm_pairs_t *pp,
                             const pm_edges_t *e, pm_sign_t sign, pm_strat_t **out,
                             pm_diag_t *diag) {
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
    uint64_t nnz = inc->row_ptr[nr];
    uint64_t *chose = pm_i_calloc(k * ni > 0 ? k * ni : 1, sizeof *chose);
    uint64_t *start = pm_i_calloc(ni + 1, sizeof *start);
    uint32_t *resp = pm_i_malloc(nnz ? (size_t)nnz : 1, sizeof *resp);
    uint32_t *mark = pm_i_calloc(nr ? nr : 1, sizeof *mark);
    size_t *order = pm_i_malloc(e->n ? e->n : 1, sizeof *order);
    uint64_t *cnt = pm_i_calloc(4 * (k ? k : 1), sizeof *cnt);
    pm_strat_t *r = pm_i_malloc(e->n ? e->n : 1, sizeof *r);
    pm_err_t rc = PM_OK;
    if (!chose || !start || !resp || !mark || !order || !cnt || !r) {
        rc = pm_diag_set(diag, PM_ENOMEM, NULL, 0,
                         "out of memory for the pair tests within "
                         "segments");
        goto done;
    }
    /* item -> its respondents with a segment (ascending), and the counts per level */
    for (size_t q = 0; q < nr; q++) {
        if (c->of[q] < 0) {
            continue;
        }
        for (uint64_t p = inc->row_ptr[q]; p < inc->row_ptr[q + 1]; p++) {
            start[inc->col[p] + 1]++;
            chose[(size_t)c->of[q] * ni + inc->col[p]]++;
        }
    }
    for (size_t i = 0; i < ni; i++) {
        start[i + 1] += start[i];
    }
    {
        uint64_t *cur = pm_i_malloc(ni ? ni : 1, sizeof *cur);
        if (!cur) {
            rc = pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
            goto done;
        }
        memcpy(cur, start, ni * sizeof *cur);
        for (size_t q = 0; q < nr; q++) {
            if (c->of[q] < 0) {
                continue;
            }
            for (uint64_t p = inc->row_ptr[q]; p < inc->row_ptr[q + 1]; p++) {
                resp[cur[inc->col[p]]++] = (uint32_t)q;
            }
        }
        free(cur);
    }
    for (size_t i = 0; i < e->n; i++) {
        order[i] = i;
    }
    sort_pp = pp;
    sort_e = e;
    qsort(order, e->n, sizeof *order, cmp_edge);
    uint64_t *n = cnt, *na = cnt + k, *nb = cnt + 2 * k, *nab = cnt + 3 * k;
    for (size_t s = 0; s < k; s++) {
        n[s] = c->base[s];
    }
    uint32_t cur_a = UINT32_MAX;
    for (size_t o = 0; o < e->n; o++) {
        size_t i = order[o], pk = e->idx[i];
        uint32_t a = pp->a[pk], b = pp->b[pk];
        if (a != cur_a) { /* mark item a's respondents: the stamp a + 1 */
            cur_a = a;
            for (uint64_t p = start[a]; p < start[a + 1]; p++) {
                mark[resp[p]] = a + 1;
            }
        }
        memset(nab, 0, k * sizeof *nab);
        for (uint64_t p = start[b]; p < start[b + 1]; p++) {
            uint32_t q = resp[p];
            if (mark[q] == a + 1) {
                nab[c->of[q]]++;
            }
        }
        for (size_t s = 0; s < k; s++) {
            na[s] = chose[s * ni + a];
            nb[s] = chose[s * ni + b];
        }
        pm_stratified_pair(k, n, na, nb, nab, sign, &r[i]);
    }
    *out = r;
    r = NULL;
done:
    free(chose);
    free(start);
    free(resp);
    free(mark);
    free(order);
    free(cnt);
    free(r);
    return rc;
}
