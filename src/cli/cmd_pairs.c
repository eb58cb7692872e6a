/* pairmap pairs: every pair that passes the selection, all measures, CSV on stdout. */
#include <stdio.h>

#include "cli.h"
#include "pairmap/write.h"

static const char help[] =
    "Usage: pairmap pairs INPUT [options]\n"
    "\n"
    "Writes the item pairs that pass the selection as CSV on standard output, columns\n"
    "  " PM_EDGES_HEADER "\n"
    "(item_a < item_b by bytes; rows in item_a, item_b order). `--min-count 0 --max-q 1\n"
    "--sign both` lists every pair seen together.\n"
    "\n";

int pm_cmd_pairs(int argc, char **argv) {
    pm_cli_t c;
    static char full[8192];
    snprintf(full, sizeof full, "%s%s%s\n%s%s", help, pm_cli_input_help, pm_cli_csv_help,
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
    if (pm_select_run(pp, inc, &sel, &e, &d) || pm_write_edges_csv(stdout, pp, inc, e, pm_cli_csv_flags(&c), &d)) {
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
                (unsigned long long)pp->hypotheses,
                (unsigned long long)pp->seen, e->n, (unsigned long long)e->removed_count,
                (unsigned long long)e->removed_sign, (unsigned long long)e->removed_q,
                (unsigned long long)e->removed_phi, (unsigned long long)e->removed_lift,
                (unsigned long long)e->removed_top);
    rc = pm_cli_close_stdout();
done:
    pm_edges_free(e);
    pm_pairs_free(pp);
    pm_incidence_free(inc);
    pm_table_free(t);
    return rc;
}
