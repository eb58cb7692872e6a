/* pairmap items: item shares with 95% Jeffreys intervals: CSV on stdout, or an aligned text
 * table when stdout is a terminal. */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "cli.h"
#include "pairmap/assoc.h"
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
    "When standard output is a terminal: an aligned text table (item, category when the\n"
    "input has categories, respondents, share with its interval in percent).\n"
    "  --csv                 CSV even on a terminal (numbers in full precision)\n"
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

/* The aligned text table of the items in the order o. */
static void print_text(const pm_cli_t *c, const pm_incidence_t *inc, const size_t *o, int by) {
    size_t n = inc->n_items, wn = strlen("item"), wc = 0;
    for (size_t i = 0; i < n; i++) {
        size_t d = pm_cli_text_width(pm_cli_shown(inc->name[i]));
        wn = d > wn ? d : wn;
        if (inc->category[i]) {
            d = pm_cli_text_width(pm_cli_shown(inc->category[i]));
            wc = d > wc ? d : wc;
        }
    }
    wc = wc && wc < strlen("category") ? strlen("category") : wc;
    printf("%zu items, N = %llu %s%s, %s\n", n, (unsigned long long)inc->N, pm_cli_unit(c),
           inc->weight ? " (shares weighted)" : "", by == 1 ? "sorted by share" : "in name order");
    fputs("item", stdout);
    pm_cli_pad(wn - strlen("item"));
    if (wc) {
        fputs("  category", stdout);
        pm_cli_pad(wc - strlen("category"));
    }
    printf("  %11s  %s\n", pm_cli_unit(c), "share (95% interval)");
    for (size_t k = 0; k < n; k++) {
        size_t i = o ? o[k] : k;
        double lo, hi;
        uint32_t it = (uint32_t)i;
        (void)pm_assoc_share_intervals(inc, &it, 1, 1, &lo, &hi, NULL);
        const char *nm = pm_cli_shown(inc->name[i]);
        fputs(nm, stdout);
        pm_cli_pad(wn - pm_cli_text_width(nm));
        if (wc) {
            const char *cat = inc->category[i] ? pm_cli_shown(inc->category[i]) : "";
            fputs("  ", stdout);
            fputs(cat, stdout);
            pm_cli_pad(wc - pm_cli_text_width(cat));
        }
        printf("  %11llu  %5.1f%% [%4.1f, %4.1f]\n", (unsigned long long)inc->count[i],
               100 * pm_incidence_share(inc, i), 100 * lo, 100 * hi);
    }
}

/* The rows, by share (largest first) when by is 1, as CSV or a text table. */
static pm_err_t write_items(const pm_cli_t *c, const pm_incidence_t *inc, int by, pm_diag_t *d) {
    size_t *o = NULL;
    if (by == 1) {
        o = malloc((inc->n_items ? inc->n_items : 1) * sizeof *o);
        if (!o) {
            return pm_diag_set(d, PM_ENOMEM, NULL, 0, "out of memory");
        }
        for (size_t i = 0; i < inc->n_items; i++) {
            o[i] = i;
        }
        g_inc = inc;
        qsort(o, inc->n_items, sizeof *o, by_share);
    }
    if (pm_cli_text_out(c)) {
        print_text(c, inc, o, by);
    } else {
        fputs("item,category,respondents,share,share_low,share_high\n", stdout);
        for (size_t i = 0; i < inc->n_items; i++) {
            pm_write_item_fields(stdout, inc, o ? o[i] : i, pm_cli_csv_flags(c));
            fputc('\n', stdout);
        }
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
    if (write_items(&c, inc, by, &d) != PM_OK) {
        rc = pm_cli_fail(&d);
    } else {
        rc = pm_cli_close_stdout();
    }
    pm_incidence_free(inc);
    pm_table_free(t);
    return rc;
}
