/* pairmap pairs: every pair that passes the selection, all measures, CSV on stdout. */
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
    "--sign both` lists every pair seen together.\n"
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
    pm_err_t wr = nseg ? pm_write_edges_csv_strat(stdout, pp, inc, e, st, pm_cli_csv_flags(&c), &d)
                       : pm_write_edges_csv(stdout, pp, inc, e, pm_cli_csv_flags(&c), &d);
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
                "%llu %s, %zu eligible items, %llu pairs tested, %llu seen together, "
                "%zu kept (removed: %llu below --min-count, %llu by --sign, %llu by --max-q, "
                "%llu by --min-phi, %llu by --min-lift, %llu by --top-edges)",
                (unsigned long long)inc->N, pm_cli_unit(&c), pp->n_eligible,
                (unsigned long long)pp->hypotheses, (unsigned long long)pp->seen, e->n,
                (unsigned long long)e->removed_count, (unsigned long long)e->removed_sign,
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
