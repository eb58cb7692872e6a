/* pairmap items: item shares with 95% Jeffreys intervals, CSV on stdout. */
#include <stdio.h>

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
    "\n";

int pm_cmd_items(int argc, char **argv) {
    pm_cli_t c;
    static char full[8192];
    snprintf(full, sizeof full, "%s%s%s", help, pm_cli_input_help, pm_cli_csv_help);
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
    if (pm_write_items_csv(stdout, inc, pm_cli_csv_flags(&c), &d)) {
        rc = pm_cli_fail(&d);
    } else {
        rc = pm_cli_close_stdout();
    }
    pm_incidence_free(inc);
    pm_table_free(t);
    return rc;
}
