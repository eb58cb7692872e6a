/* pairmap items: item shares with 95% Jeffreys intervals, CSV on stdout. */
#include <stdio.h>
#include <stdlib.h>
#include <unistd.h>

#include "cli.h"
#include "pairmap/write.h"

static const char help[] =
    "Usage: pairmap items INPUT [options]\n"
    "\n"
    "Writes every item as CSV on standard output, columns\n"
    "  item,category,respondents,share,share_low,share_high\n"
    "share is respondents / N; share_low and share_high bound its 95% Jeffreys interval\n"
    "(Beta(x + 1/2, N - x + 1/2) quantiles; 0 at x = 0 and 1 at x = N). With --weight-col the\n"
    "share is weighted and the interval uses Kish's effective sample size.\n"
    "  --sort share|name     row order: share (largest first; ties by name) or name (bytes).\n"
    "                        Default: share when standard output is a terminal, else name\n"
    "\n";

static const pm_incidence_t *g_inc; /* qsort has no context; CLI, single-threaded */

static int by_share(const void *x, const void *y) {
    size_t a = *(const size_t *)x, b = *(const size_t *)y;
    double sa = pm_incidence_share(g_inc, a), sb = pm_incidence_share(g_inc, b);
    if (sa != sb) {
        return sa > sb ? -1 : 1;
    }
    return a < b ? -1 : a > b; /* items are in name order */
}

/* The rows by share, largest first. */
static pm_err_t write_by_share(const pm_incidence_t *inc, unsigned flags, pm_diag_t *d) {
    size_t *o = malloc((inc->n_items ? inc->n_items : 1) * sizeof *o);
    if (!o) {
        return pm_diag_set(d, PM_ENOMEM, NULL, 0, "out of memory");
    }
    for (size_t i = 0; i < inc->n_items; i++) {
        o[i] = i;
    }
    g_inc = inc;
    qsort(o, inc->n_items, sizeof *o, by_share);
    fputs("item,category,respondents,share,share_low,share_high\n", stdout);
    for (size_t i = 0; i < inc->n_items; i++) {
        pm_write_item_fields(stdout, inc, o[i], flags);
        fputc('\n', stdout);
    }
    free(o);
    return ferror(stdout) ? pm_diag_set(d, PM_EIO, NULL, 0, "cannot write the output") : PM_OK;
}

int pm_cmd_items(int argc, char **argv) {
    pm_cli_t c;
    static char full[8192];
    snprintf(full, sizeof full, "%s%s%s%s%s", help, pm_cli_input_help, pm_cli_only_help,
             pm_cli_basket_help, pm_cli_csv_help);
    int rc = pm_cli_parse(&c, "items", PM_CMD_ITEMS, argc, argv, full);
    if (rc) {
        return rc < 0 ? pm_cli_close_stdout() : rc;
    }
    pm_table_t *t = NULL;
    pm_incidence_t *inc = NULL;
    rc = pm_cli_load(&c, &t, &inc, NULL);
    if (rc) {
        return rc;
    }
    pm_diag_t d;
    pm_diag_clear(&d);
    static const char *const sorts[] = {"name", "share", NULL};
    int by;
    if (pm_cli_choice(&c, "sort", sorts, isatty(STDOUT_FILENO) ? 1 : 0, &by)) {
        pm_incidence_free(inc);
        pm_table_free(t);
        return 1;
    }
    if (by == 1 ? write_by_share(inc, pm_cli_csv_flags(&c), &d) != PM_OK
                : pm_write_items_csv(stdout, inc, pm_cli_csv_flags(&c), &d) != PM_OK) {
        rc = pm_cli_fail(&d);
    } else {
        rc = pm_cli_close_stdout();
    }
    pm_incidence_free(inc);
    pm_table_free(t);
    return rc;
}
