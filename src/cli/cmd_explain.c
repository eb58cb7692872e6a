/* pairmap explain: one pair, from its 2x2 table to the threshold that kept or removed it. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "cli.h"
#include "pairmap/network.h"
#include "pairmap/write.h"

static const char help[] =
    "Usage: pairmap explain INPUT A B [options]\n"
    "\n"
    "Explains one pair of items: why it is (or is not) among the pairs of `pairmap pairs`\n"
    "and on the map run with the same options. Prints the 2x2 table (both, A only, B only,\n"
    "neither) with the counts chance alone would give, every measure, the odds ratio with\n"
    "its 95% interval, the test used and why (Cochran's rule), the p-value, the family of\n"
    "tests (pairs of items each chosen by at least --min-count respondents), the p-value's\n"
    "rank in it and its Benjamini-Hochberg q-value, then each threshold in the order the\n"
    "selection applies them, with the margin by which the pair passes or fails it.\n"
    "Last, the clusters of A and B in a map run with the same options (Louvain on the kept\n"
    "pairs, as `pairmap map` clusters them: the same clusters, numbered the same way).\n"
    "The numbers are printed as `name = value` lines, in full precision.\n"
    "  A, B                  the two items (exact names); an unknown name is an error (exit 2)\n"
    "  --seed N              Louvain's seed, as for `pairmap map` (default 1)\n"
    "  --restarts R          Louvain runs, as for `pairmap map` (default 10)\n"
    "  --resolution F        Louvain's resolution, as for `pairmap map` (default 1)\n"
    "  --from-counts F.pmc   explain from a count shard (pairmap count) instead of INPUT\n"
    "  --unit WORD           what one respondent is, as a plural noun (default respondents)\n"
    "\n";

/* The 2x2 table with row and column totals, and the counts chance alone would give. */
static void print_table(const pm_cli_t *c, const char *a, const char *b, double N, double na,
                        double nb, double nab) {
    double cell[2][2] = {{nab, na - nab}, {nb - nab, N - na - nb + nab}};
    double row[2] = {na, N - na}, col[2] = {nb, N - nb};
    printf("2x2 table (%s; in brackets: what chance alone would give)\n", pm_cli_unit(c));
    printf("  %-22s %22s %22s %12s\n", "", "chose B", "not B", "total");
    const char *rn[2] = {"chose A", "not A"};
    for (int i = 0; i < 2; i++) {
        printf("  %-22s", rn[i]);
        for (int j = 0; j < 2; j++) {
            char cellbuf[64];
            snprintf(cellbuf, sizeof cellbuf, "%.10g [%.1f]", cell[i][j], row[i] * col[j] / N);
            printf(" %22s", cellbuf);
        }
        printf(" %12.10g\n", row[i]);
    }
    printf("  %-22s %22.10g %22.10g %12.10g\n", "total", col[0], col[1], N);
    printf("  A = '%s'\n  B = '%s'\n", pm_cli_shown(a), pm_cli_shown(b));
}

static void num(const char *name, double v) {
    printf("%s = ", name);
    pm_write_number(stdout, v);
    fputc('\n', stdout);
}

/* Why the test is the one it is (Cochran's rule on the smallest expected cell). */
static void print_test(const pm_incidence_t *inc, uint32_t a, uint32_t b, const pm_measures_t *m,
                       pm_sign_t sign) {
    double N = inc->wcount ? inc->W : (double)inc->N;
    double na = inc->wcount ? inc->wcount[a] : (double)inc->count[a];
    double nb = inc->wcount ? inc->wcount[b] : (double)inc->count[b];
    double e[4] = {na * nb / N, na * (N - nb) / N, (N - na) * nb / N, (N - na) * (N - nb) / N};
    double emin = fmin(fmin(e[0], e[1]), fmin(e[2], e[3]));
    printf("test = %s\n", m->test == PM_TEST_FISHER ? "fisher" : "chi2");
    const char *side = sign == PM_SIGN_BOTH       ? "two-sided"
                       : sign == PM_SIGN_POSITIVE ? "one-sided, together more often than chance"
                                                  : "one-sided, together less often than chance";
    if (inc->wcount) {
        printf("  (weighted input: chi-square with 1 df on Kish's effective sample size "
               "%.1f, %s)\n",
               pm_incidence_neff(inc), side);
    } else if (m->test == PM_TEST_FISHER) {
        printf("  (Fisher's exact test, %s: the smallest expected cell is %.3g, below 5, "
               "Cochran's rule)\n",
               side, emin);
    } else {
        printf("  (chi-square with 1 df, no continuity correction, %s: every expected cell is "
               "at least 5, the smallest %.3g, Cochran's rule)\n",
               side, emin);
    }
}

/* The family, the p-value's rank in it and its q-value. */
static void print_family(const pm_cli_t *c, const pm_pairs_t *pp, uint32_t a, uint32_t b,
                         const pm_measures_t *m, uint32_t min_count) {
    printf("family = %llu\n", (unsigned long long)pp->hypotheses);
    printf("  (pairs of the %zu items each chosen by at least --min-count %u %s)\n", pp->n_family,
           min_count, pm_cli_unit(c));
    if (!pp->in_family[a] || !pp->in_family[b]) {
        printf("rank = none\n  (the pair is outside the family: %s was chosen by fewer than "
               "%u %s, so the pair can never be reported and is not tested)\n",
               pp->in_family[a] ? "B" : "A", min_count, pm_cli_unit(c));
        num("q_value", NAN);
        return;
    }
    printf("rank = %llu\n", (unsigned long long)pm_pairs_prank(pp, m->p));
    printf("  (family p-values at most this one; Benjamini-Hochberg q = min over p' >= p of "
           "p' family / rank(p'))\n");
    num("q_value", m->q);
}

/* One threshold: its line and whether it passes; first_fail (64 bytes) gets the name of the
 * first that fails. */
static void gate(const char *what, bool pass, const char *detail, char *first_fail) {
    printf("  %-22s %-52s %s\n", what, detail, pass ? "passes" : "FAILS");
    if (!pass && !first_fail[0]) {
        snprintf(first_fail, 64, "%s", what);
    }
}

static void print_selection(const pm_select_opts_t *sel, const pm_pairs_t *pp, const pm_edges_t *e,
                            long idx, uint32_t nab, const pm_measures_t *m) {
    char first[64] = "", buf[160], what[64];
    printf("selection, in the order it applies:\n");
    snprintf(what, sizeof what, "--min-count %u", sel->min_count);
    snprintf(buf, sizeof buf, "together %u (%+lld against the bound)", nab,
             (long long)nab - (long long)sel->min_count);
    gate(what, nab >= sel->min_count, buf, first);
    snprintf(what, sizeof what, "--sign %s", pm_sign_name(sel->sign));
    snprintf(buf, sizeof buf, "phi %.4g", m->phi);
    gate(what,
         sel->sign == PM_SIGN_BOTH || (sel->sign == PM_SIGN_POSITIVE ? m->phi > 0 : m->phi < 0),
         buf, first);
    snprintf(what, sizeof what, "--max-q %g", sel->max_q);
    char qs[32]; /* the one style of q-values in text (pm_cli_q) */
    snprintf(buf, sizeof buf, "q %s (%.3g times the bound)", pm_cli_q(m->q, qs, sizeof qs),
             m->q / sel->max_q);
    gate(what, m->q <= sel->max_q, buf, first);
    if (sel->min_phi > 0) {
        snprintf(what, sizeof what, "--min-phi %g", sel->min_phi);
        snprintf(buf, sizeof buf, "|phi| %.4g (%+.3g against the bound)", fabs(m->phi),
                 fabs(m->phi) - sel->min_phi);
        gate(what, fabs(m->phi) >= sel->min_phi, buf, first);
    }
    if (sel->min_lift > 0) {
        snprintf(what, sizeof what, "--min-lift %g", sel->min_lift);
        snprintf(buf, sizeof buf, "lift %.4g (%+.3g against the bound)", m->lift,
                 m->lift - sel->min_lift);
        gate(what, m->lift >= sel->min_lift, buf, first);
    }
    bool kept = false;
    for (size_t i = 0; idx >= 0 && i < e->n; i++) {
        kept = kept || e->idx[i] == (size_t)idx;
    }
    if (sel->top_edges && !first[0]) {
        snprintf(what, sizeof what, "--top-edges %zu", sel->top_edges);
        gate(what, kept, "rank by |weight| among the pairs left", first);
    }
    (void)pp;
    if (!first[0] && !kept) { /* cannot happen: every threshold is listed above */
        snprintf(first, sizeof first, "the selection");
    }
    printf("verdict = %s\n", kept ? "kept" : "removed");
    if (kept) {
        printf("  (a row of `pairmap pairs` and an edge of the map with these options)\n");
    } else {
        printf("  (removed by %s)\n", first);
    }
}

/* The clusters of a and b: Louvain on the kept pairs exactly as `pairmap map` runs it
 * (vertices the eligible items in canonical order, weights the kept positive pairs' measure;
 * pm_cluster_louvain gives pm_network_run's clusters). Returns 0 or an exit status. */
static int print_clusters(const pm_cli_t *c, const pm_incidence_t *inc, const pm_pairs_t *pp,
                          const pm_edges_t *e, uint32_t a, uint32_t b) {
    uint64_t seed, restarts;
    double resolution;
    unsigned threads = 0;
    if (pm_cli_uint(c, "seed", 1, 0, UINT64_MAX, &seed) ||
        pm_cli_uint(c, "restarts", 10, 1, 10000, &restarts) ||
        pm_cli_double(c, "resolution", 1.0, 0, 1e6, &resolution) || pm_cli_threads(c, &threads)) {
        return 1;
    }
    size_t n = pp->n_eligible, ni = inc->n_items, m = e->n;
    uint32_t *vof = malloc((ni ? ni : 1) * sizeof *vof), *ea = malloc((m ? m : 1) * sizeof *ea);
    uint32_t *eb = malloc((m ? m : 1) * sizeof *eb);
    const char **names = malloc((n ? n : 1) * sizeof *names);
    double *share = malloc((n ? n : 1) * sizeof *share), *w = malloc((m ? m : 1) * sizeof *w);
    pm_clusters_t *cl = NULL;
    int rc = 4;
    if (!vof || !ea || !eb || !names || !share || !w) {
        fputs("pairmap: out of memory\n", stderr);
        goto out;
    }
    for (size_t i = 0, v = 0; i < ni; i++) {
        vof[i] = UINT32_MAX;
        if (pp->eligible[i]) {
            names[v] = inc->name[i];
            share[v] = pm_incidence_share(inc, i);
            vof[i] = (uint32_t)v++;
        }
    }
    for (size_t k = 0; k < m; k++) {
        size_t idx = e->idx[k];
        pm_measures_t ms;
        pm_pairs_measures(pp, inc, idx, &ms);
        ea[k] = vof[pp->a[idx]];
        eb[k] = vof[pp->b[idx]];
        w[k] = ms.phi > 0 && isfinite(e->weight[k]) && e->weight[k] > 0 ? e->weight[k] : 0;
    }
    pm_cluster_opts_t co;
    pm_cluster_opts_init(&co);
    co.resolution = resolution;
    co.seed = seed;
    co.restarts = (unsigned)restarts;
    co.names = names;
    co.share = share;
    co.workers = threads ? threads : pm_cpu_count();
    pm_diag_t d;
    pm_diag_clear(&d);
    if (pm_cluster_louvain(n, m, ea, eb, w, &co, &cl, &d)) {
        rc = pm_cli_fail(&d);
        goto out;
    }
    printf("\nclusters (a map run with these options: --seed %llu --restarts %llu "
           "--resolution %g)\n",
           (unsigned long long)seed, (unsigned long long)restarts, resolution);
    const uint32_t it[2] = {a, b};
    for (int j = 0; j < 2; j++) {
        uint32_t k = cl->cluster[vof[it[j]]] - 1;
        printf("cluster_%c = %u\n  (%zu items:", j ? 'b' : 'a', k + 1, cl->size[k]);
        for (size_t q = cl->first[k]; q < cl->first[k + 1] && q < cl->first[k] + 3; q++) {
            printf("%s %s", q > cl->first[k] ? " \xc2\xb7" : "",
                   pm_cli_shown(names[cl->members[q]]));
        }
        printf("%s)\n", cl->size[k] > 3 ? " ..." : "");
    }
    printf("  (%s)\n",
           cl->cluster[vof[a]] == cl->cluster[vof[b]] ? "the same cluster" : "different clusters");
    rc = 0;
out:
    pm_clusters_free(cl);
    free(vof);
    free(ea);
    free(eb);
    free(names);
    free(share);
    free(w);
    return rc;
}

static int find_item(const pm_incidence_t *inc, const char *src, const char *name, uint32_t *out) {
    long it = pm_incidence_find(inc, name);
    if (it < 0) {
        fprintf(stderr, "pairmap: %s: no item '%s'\n", pm_cli_shown(src), pm_cli_shown(name));
        return 2;
    }
    *out = (uint32_t)it;
    return 0;
}

/* A pair that `pairs` does not list (seen together fewer than --min-count times, or never):
 * its joint count from one pass (pm_counts_item) and its measures as the family tested it. */
static int joint_count(const pm_incidence_t *inc, const pm_pairs_t *pp, uint32_t a, uint32_t b,
                       uint32_t *nab, pm_measures_t *m) {
    uint32_t *nb = calloc(inc->n_items, sizeof *nb);
    double *wb = calloc(inc->n_items, sizeof *wb);
    pm_diag_t d;
    pm_diag_clear(&d);
    if (!nb || !wb || pm_counts_item(inc, a, pm_cli_given_counts(), nb, wb, &d) != PM_OK) {
        free(nb);
        free(wb);
        fputs("pairmap: out of memory\n", stderr);
        return 4;
    }
    *nab = nb[b];
    pm_pairs_measure_any(pp, inc, a, b, nb[b], wb[b], m);
    if (nb[b] == 0 && pp->sign == PM_SIGN_POSITIVE) {
        m->p = 1; /* DESIGN.md: a never-seen pair's one-sided p under --sign positive */
        m->q = pp->in_family[a] && pp->in_family[b] ? pm_pairs_qvalue(pp, 1.0) : NAN;
    }
    free(nb);
    free(wb);
    return 0;
}

static void print_report(const pm_cli_t *c, const pm_incidence_t *inc, const pm_pairs_t *pp,
                         const pm_edges_t *e, const pm_select_opts_t *sel, uint32_t a, uint32_t b,
                         long idx, uint32_t nab, const pm_measures_t *m) {
    bool w = inc->wcount != NULL;
    double N = w ? pm_incidence_wunits(inc, inc->W) : (double)inc->N;
    double na = w ? pm_incidence_wunits(inc, inc->wcount[a]) : (double)inc->count[a];
    double nbt = w ? pm_incidence_wunits(inc, inc->wcount[b]) : (double)inc->count[b];
    print_table(c, inc->name[a], inc->name[b], N, na, nbt, m->together);
    printf("\nmeasures\n");
    num("together", m->together);
    num("expected", m->expected);
    num("support", m->support);
    num("confidence_ab", m->confidence_ab);
    num("confidence_ba", m->confidence_ba);
    num("lift", m->lift);
    num("phi", m->phi);
    num("jaccard", m->jaccard);
    pm_oddsratio_t r;
    if (w) {
        pm_oddsratio_weighted(inc->W, inc->wcount[a], inc->wcount[b], m->together * inc->W / N,
                              pm_incidence_neff(inc), &r);
    } else {
        pm_oddsratio_counts(inc->N, inc->count[a], inc->count[b], nab, m->test, &r);
    }
    num("odds_ratio", r.estimate);
    num("odds_ratio_low", r.low);
    num("odds_ratio_high", r.high);
    printf("  (%s)\n", r.method == PM_OR_WOOLF
                           ? "sample odds ratio with Woolf's log interval"
                           : "conditional maximum-likelihood estimate with the exact interval");
    printf("\ntest\n");
    print_test(inc, a, b, m, pp->sign);
    num("p_value", m->p);
    print_family(c, pp, a, b, m, sel->min_count);
    printf("\n");
    print_selection(sel, pp, e, idx, nab, m);
}

int pm_cmd_explain(int argc, char **argv) {
    pm_cli_t c;
    static char full[8192];
    snprintf(full, sizeof full, "%s%s%s%s%s\n%s%s", help, pm_cli_input_help, pm_cli_only_help,
             pm_cli_basket_help, pm_cli_memory_help, pm_cli_select_help, pm_cli_edge_help);
    int rc = pm_cli_parse(&c, "explain", PM_CMD_EXPLAIN, argc, argv, full);
    if (rc) {
        return rc < 0 ? pm_cli_close_stdout() : rc;
    }
    if (c.nargs != 2) {
        return pm_cli_usage_error(&c, "'pairmap explain' needs INPUT and two item names");
    }
    pm_select_opts_t sel;
    if (pm_cli_select_opts(&c, &sel)) {
        return 1;
    }
    pm_table_t *t = NULL;
    pm_incidence_t *inc = NULL;
    pm_pairs_t *pp = NULL;
    pm_edges_t *e = NULL;
    uint32_t a, b;
    rc = pm_cli_load(&c, &t, &inc, NULL);
    if (rc || (rc = find_item(inc, pm_table_source(t), c.args[0], &a)) ||
        (rc = find_item(inc, pm_table_source(t), c.args[1], &b))) {
        goto done;
    }
    if (a == b) {
        rc = pm_cli_usage_error(&c, "'pairmap explain' needs two different items");
        goto done;
    }
    if (a > b) { /* the pair in canonical order, as `pairs` lists it */
        uint32_t x = a;
        a = b;
        b = x;
    }
    rc = pm_cli_score_q(&c, t, inc, &sel, 1.0, &pp); /* exact q-values everywhere */
    pm_diag_t d;
    pm_diag_clear(&d);
    if (rc || (pm_select_run(pp, inc, &sel, &e, &d) && (rc = pm_cli_fail(&d)))) {
        goto done;
    }
    if (!pp->eligible[a] || !pp->eligible[b]) {
        uint32_t x = pp->eligible[a] ? b : a;
        fprintf(stderr, "pairmap: %s: item '%s' is not eligible (%s): the pair has no test\n",
                pm_cli_shown(pm_table_source(t)), pm_cli_shown(inc->name[x]),
                inc->count[x] >= inc->N ? "chosen by every respondent" : "below --min-share");
        rc = 2;
        goto done;
    }
    pm_measures_t m;
    long idx = pm_pairs_find(pp, a, b);
    uint32_t nab;
    if (idx >= 0) { /* a listed pair: exactly the numbers of its `pairs` row */
        pm_pairs_measures(pp, inc, (size_t)idx, &m);
        nab = pp->n_ab[idx];
    } else if ((rc = joint_count(inc, pp, a, b, &nab, &m)) != 0) {
        goto done;
    }
    print_report(&c, inc, pp, e, &sel, a, b, idx, nab, &m);
    if ((rc = print_clusters(&c, inc, pp, e, a, b)) == 0) {
        rc = pm_cli_close_stdout();
    }
    goto done;
done:
    pm_edges_free(e);
    pm_pairs_free(pp);
    pm_incidence_free(inc);
    pm_table_free(t);
    return rc;
}
