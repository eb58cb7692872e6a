/* pairmap pairs: every pair that passes the selection, all measures: CSV on stdout, or an
 * aligned text table when stdout is a terminal. */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "cli.h"
#include "pairmap/write.h"

static const char help[] =
    "Usage: pairmap pairs INPUT [options]\n"
    "\n"
    "Writes the item pairs that pass the selection as CSV on standard output, columns\n"
    "  " PM_EDGES_HEADER "\n"
    "(item_a < item_b by bytes; rows in item_a, item_b order). `--min-count 0 --max-q 1\n"
    "--sign both` lists every pair seen together. When standard output is a terminal, an\n"
    "aligned text table instead (item_a, item_b, together, expected, confidence both ways,\n"
    "lift, phi, Jaccard, q_value; numbers rounded).\n"
    "  --csv                 CSV even on a terminal (numbers in full precision)\n"
    "  --sort KEY            row order: name (item_a, item_b: the default), together, lift,\n"
    "                        phi, confidence (the larger of the two directions), each largest\n"
    "                        first, or q (smallest first); with --sign negative, lift and phi\n"
    "                        smallest first (the strongest substitutes). Ties: q ascending,\n"
    "                        then together descending, then item_a, item_b\n"
    "\n";

/* ---- --sort --------------------------------------------------------------------------- */
typedef struct {
    double key, q, together;
    size_t pos; /* position in name order: the last tie-break */
    size_t idx;
    double weight;
} sort_row;

static int cmp_sort(const void *x, const void *y) {
    const sort_row *a = x, *b = y;
    if (a->key != b->key) {
        return a->key > b->key ? -1 : 1; /* larger first (keys are negated for ascending) */
    }
    if (a->q != b->q) {
        return a->q < b->q ? -1 : 1;
    }
    if (a->together != b->together) {
        return a->together > b->together ? -1 : 1;
    }
    return a->pos < b->pos ? -1 : a->pos > b->pos;
}

/* Reorders the kept edges by --sort (they come in name order). 0, or 1 after a usage error. */
static int sort_edges(const pm_cli_t *c, const pm_pairs_t *pp, const pm_incidence_t *inc,
                      const pm_select_opts_t *sel, pm_edges_t *e) {
    static const char *const keys[] = {"name", "together", "lift", "phi", "q", "confidence", NULL};
    int by;
    if (pm_cli_choice(c, "sort", keys, 0, &by)) {
        return 1;
    }
    if (by == 0 || e->n < 2) {
        return 0;
    }
    sort_row *r = malloc(e->n * sizeof *r);
    if (!r) {
        fputs("pairmap: out of memory\n", stderr);
        return 4;
    }
    int neg = sel->sign == PM_SIGN_NEGATIVE;
    for (size_t i = 0; i < e->n; i++) {
        pm_measures_t m;
        pm_pairs_measures(pp, inc, e->idx[i], &m);
        double k = by == 1   ? m.together
                   : by == 2 ? (neg ? -m.lift : m.lift)
                   : by == 3 ? (neg ? -m.phi : m.phi)
                   : by == 4 ? -m.q
                             : fmax(m.confidence_ab, m.confidence_ba);
        r[i] = (sort_row){isnan(k) ? -INFINITY : k, m.q, m.together, i, e->idx[i], e->weight[i]};
    }
    qsort(r, e->n, sizeof *r, cmp_sort);
    for (size_t i = 0; i < e->n; i++) {
        e->idx[i] = r[i].idx;
        e->weight[i] = r[i].weight;
    }
    free(r);
    return 0;
}

/* ---- the text table ------------------------------------------------------------------- */
static void print_text(const pm_cli_t *c, const pm_pairs_t *pp, const pm_incidence_t *inc,
                       const pm_select_opts_t *sel, const pm_edges_t *e) {
    const char *by = pm_cli_get(c, "sort");
    char order[64] = "in name order";
    if (by && strcmp(by, "name") != 0) {
        snprintf(order, sizeof order, "sorted by %s", by);
    }
    printf("%zu pairs kept of %llu tested, %s; together >= %u, q <= %g, %s associations\n", e->n,
           (unsigned long long)pp->hypotheses, order, sel->min_count, sel->max_q,
           pm_sign_name(sel->sign));
    if (e->n == 0) {
        printf("no pair passes the selection\n");
        return;
    }
    size_t wa = strlen("item_a"), wb = strlen("item_b");
    for (size_t i = 0; i < e->n; i++) {
        uint32_t a = pp->a[e->idx[i]], b = pp->b[e->idx[i]];
        size_t da = pm_cli_text_width(pm_cli_shown(inc->name[a]));
        size_t db = pm_cli_text_width(pm_cli_shown(inc->name[b]));
        wa = da > wa ? da : wa;
        wb = db > wb ? db : wb;
    }
    fputs("item_a", stdout);
    pm_cli_pad(wa - strlen("item_a") + 2);
    fputs("item_b", stdout);
    pm_cli_pad(wb - strlen("item_b"));
    printf("  %9s  %9s  %7s  %7s  %7s  %7s  %7s  %9s\n", "together", "expected", "conf_ab",
           "conf_ba", "lift", "phi", "jaccard", "q_value");
    for (size_t i = 0; i < e->n; i++) {
        pm_measures_t m;
        pm_pairs_measures(pp, inc, e->idx[i], &m);
        const char *na = pm_cli_shown(inc->name[pp->a[e->idx[i]]]);
        const char *nb = pm_cli_shown(inc->name[pp->b[e->idx[i]]]);
        fputs(na, stdout);
        pm_cli_pad(wa - pm_cli_text_width(na) + 2);
        fputs(nb, stdout);
        pm_cli_pad(wb - pm_cli_text_width(nb));
        char q[32];
        printf(inc->weight ? "  %9.1f" : "  %9.0f", m.together);
        printf("  %9.1f  %6.1f%%  %6.1f%%  %7.2f  %7.3f  %7.3f  %9s\n", m.expected,
               100 * m.confidence_ab, 100 * m.confidence_ba, m.lift, m.phi, m.jaccard,
               pm_cli_q(m.q, q, sizeof q));
    }
}

int pm_cmd_pairs(int argc, char **argv) {
    pm_cli_t c;
    static char full[16384];
    snprintf(full, sizeof full, "%s%s%s%s%s%s%s\n%s%s", help, pm_cli_input_help, pm_cli_only_help,
             pm_cli_segment_help, pm_cli_basket_help, pm_cli_memory_help, pm_cli_csv_help,
             pm_cli_select_help, pm_cli_edge_help);
    int rc = pm_cli_parse(&c, "pairs", PM_CMD_PAIRS, argc, argv, full);
    if (rc) {
        return rc < 0 ? pm_cli_close_stdout() : rc;
    }
    pm_select_opts_t sel;
    if (pm_cli_select_opts(&c, &sel)) {
        return 1;
    }
    unsigned th;
    if (pm_cli_threads(&c, &th)) {
        return 1;
    }
    pm_table_t *t = NULL;
    pm_incidence_t *inc = NULL;
    pm_pairs_t *pp = NULL;
    pm_edges_t *e = NULL;
    rc = pm_cli_load(&c, &t, &inc, NULL);
    if (rc) {
        goto done;
    }
    rc = pm_cli_score(&c, t, inc, &sel, &pp);
    if (rc) {
        goto done;
    }
    pm_diag_t d;
    pm_diag_clear(&d);
    if (pm_select_run(pp, inc, &sel, &e, &d)) {
        rc = pm_cli_fail(&d);
        goto done;
    }
    if ((rc = sort_edges(&c, pp, inc, &sel, e)) != 0) {
        goto done;
    }
    size_t nseg;
    const pm_segcol_t *seg = pm_cli_segcols(&nseg);
    pm_strat_t *st = NULL;
    if ((rc = pm_cli_strat(&c, inc, seg, nseg, pp, e, &sel, &st)) != 0) {
        goto done;
    }
    pm_err_t wr = PM_OK;
    if (pm_cli_text_out(&c) && nseg == 0) { /* the segment columns: CSV only */
        print_text(&c, pp, inc, &sel, e);
    } else {
        wr = pm_write_edges_csv_on(stdout, pp, inc, e, nseg > 0, st, pm_cli_csv_flags(&c), th, &d);
    }
    free(st);
    if (wr) {
        /* a failed write is reported as one on standard output (full disk, issue 6) */
        rc = d.code == PM_EIO && ferror(stdout) ? pm_cli_close_stdout() : 0;
        if (rc == 0) {
            rc = pm_cli_fail(&d);
        }
        goto done;
    }
    pm_cli_note(&c,
                "%llu %s, %zu eligible items, %llu pairs tested (the family: pairs of the %zu "
                "items chosen by at least --min-count), %llu seen together, "
                "%zu kept (removed: %llu below --min-count, %llu by --sign, %llu by --max-q, "
                "%llu by --min-phi, %llu by --min-lift, %llu by --top-edges)",
                (unsigned long long)inc->N, pm_cli_unit(&c), pp->n_eligible,
                (unsigned long long)pp->hypotheses, pp->n_family, (unsigned long long)pp->seen,
                e->n, (unsigned long long)e->removed_count, (unsigned long long)e->removed_sign,
                (unsigned long long)e->removed_q, (unsigned long long)e->removed_phi,
                (unsigned long long)e->removed_lift, (unsigned long long)e->removed_top);
    rc = pm_cli_close_stdout();
done:
    pm_edges_free(e);
    pm_pairs_free(pp);
    pm_incidence_free(inc);
    pm_table_free(t);
    return rc;
}
