/* pairmap segments: item shares by segment (region, store, age band, day), with Jeffreys
 * intervals, empirical-Bayes shrinkage, one-against-the-rest tests and trends. */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "cli.h"
#include "pairmap/segments.h"
#include "pairmap/write.h"

static const char help[] =
    "Usage: pairmap segments INPUT --segment-col COL [--segment-col COL ...] [options]\n"
    "\n"
    "How choices differ by segment. Writes CSV on standard output, one row per (column,\n"
    "segment, item), columns\n"
    "  attribute,segment,item,category,base,chose,share,share_low,share_high,shrunk,\n"
    "  shrunk_low,shrunk_high,index,test,p_value,q_value,trend_z,trend_p\n"
    "  base, chose       respondents in the segment, and those of them who chose the item\n"
    "  share             chose / base, with its 95% Jeffreys interval\n"
    "  shrunk            the empirical-Bayes share: (chose + m mu) / (base + m), where mu is\n"
    "                    the item's share over all respondents with a segment of the column\n"
    "                    and m (pseudo-respondents, one per column) is fitted by maximum\n"
    "                    likelihood of a beta-binomial model over every (item, segment) cell;\n"
    "                    shrunk_low/high: the 95% equal-tailed posterior interval. Small\n"
    "                    segments are pulled towards mu, large ones keep their own share. When\n"
    "                    the segments differ no more than chance would make them, m reaches\n"
    "                    its upper bound (1e8, said in a note) and every shrunk share is mu\n"
    "  index             shrunk / mu (1 = as everywhere; 1.5 = half as often again)\n"
    "  test, p_value     the segment against all other respondents with a segment: Fisher's\n"
    "                    exact test where an expected cell is below 5, else chi-square (two-\n"
    "                    sided); q_value: Benjamini-Hochberg over every cell of the column\n"
    "  trend_z, trend_p  ordered columns: the Cochran-Armitage test of a linear trend of the\n"
    "                    item's share over the segments (scores 1..k), z > 0 when it rises\n"
    "Rows by column (as given), segment order, item. Empty cells: not defined (no test when\n"
    "the segment holds everyone or nobody, or the item is chosen by all or none of them).\n"
    "\n"
    "Segments:\n"
    "  --segment-col COL     a respondent attribute: a column of the input (the same on every\n"
    "                        row of a respondent) or of --segment-file (repeatable: each\n"
    "                        column on its own). An empty cell: no segment (left out of that\n"
    "                        column's figures, counted in a note)\n"
    "  --segment-levels COL=A,B,C   the order of COL's segments (then COL is ordered).\n"
    "                        Otherwise labels that hold a number come first, by their first\n"
    "                        number (16-24 before 65 and over; 1,000 is a thousand; 'under 25'\n"
    "                        before '25-39': under, below, less than, up to, fewer than or <\n"
    "                        before the number put a label first among equal numbers), other\n"
    "                        ties and labels without a number by label (bytes); a column is\n"
    "                        ordered when every label holds a number\n"
    "  --csv-raw             names as they are (default: a leading apostrophe before = + - @)\n"
    "Weighted input (--weight-col): base and chose stay counts of respondents; share, mu\n"
    "and shrunk are weighted (the chosen weight over the segment's weight), and the\n"
    "intervals, the beta-binomial fit (m, log-likelihood) and the trend test take each\n"
    "segment's Kish effective size n' = (sum w)^2 / sum w^2 with share x n' chosen; the\n"
    "test is the pairs' weighted one: chi-square (1 df) on the effective size of all\n"
    "respondents with a segment.\n"
    "\n";

static void notes(const pm_cli_t *c, const pm_segcol_t *col, const pm_segstats_t *s) {
    pm_cli_note(c,
                "note: segments of '%s': %zu (%s); %llu respondents with a segment, %llu "
                "without",
                pm_cli_shown(col->column), col->n_levels, col->ordered ? "ordered" : "unordered",
                (unsigned long long)s->B, (unsigned long long)col->none);
    if (col->unknown_ids) {
        pm_cli_note(c, "note: %llu ids of the segment file are not in the input",
                    (unsigned long long)col->unknown_ids);
    }
    pm_cli_note(c,
                "note: '%s': prior strength m = %.17g pseudo-respondents, log-likelihood "
                "%.17g over %zu cells%s",
                pm_cli_shown(col->column), s->m, s->loglik, s->cells_fitted,
                s->m_at > 0   ? " (no spread beyond chance: m at its upper bound, every shrunk "
                                "share is the item's overall share)"
                : s->m_at < 0 ? " (m at its lower bound: the segments differ a lot)"
                              : "");
    if (s->weighted) {
        pm_cli_note(c,
                    "note: '%s': weighted: shares weighted; intervals, m and trends on each "
                    "segment's Kish effective size; tests chi-square on the effective size of "
                    "those with a segment (base and chose count %s)",
                    pm_cli_shown(col->column), pm_cli_unit(c));
    }
}

int pm_cmd_segments(int argc, char **argv) {
    pm_cli_t c;
    static char full[16384];
    snprintf(full, sizeof full, "%s%s%s%s%s", help, pm_cli_input_help, pm_cli_only_help,
             pm_cli_basket_help, pm_cli_memory_help);
    int rc = pm_cli_parse(&c, "segments", PM_CMD_SEGMENTS, argc, argv, full);
    if (rc) {
        return rc < 0 ? pm_cli_close_stdout() : rc;
    }
    size_t ncol;
    pm_cli_all(&c, "segment-col", &ncol);
    if (ncol == 0) {
        return pm_cli_usage_error(&c, "give --segment-col COL");
    }
    pm_table_t *t = NULL;
    pm_incidence_t *inc = NULL;
    if ((rc = pm_cli_load(&c, &t, &inc, NULL)) != 0) {
        return rc;
    }
    /* every column computed before the first byte of output: an error leaves standard
     * output empty */
    const pm_segcol_t *sc = pm_cli_segcols(&ncol);
    pm_segstats_t *st = calloc(ncol, sizeof *st);
    size_t done = 0;
    if (!st) {
        fputs("pairmap: out of memory\n", stderr);
        rc = 4;
    }
    for (; rc == 0 && done < ncol; done++) {
        if ((rc = pm_cli_check_segtable(&c, sc[done].n_levels, inc->n_items))) {
            break;
        }
        pm_diag_t d;
        pm_diag_clear(&d);
        if (pm_segstats_run(inc, &sc[done], 0, &st[done], &d)) {
            rc = pm_cli_fail(&d);
            break;
        }
    }
    if (rc == 0) {
        fputs(PM_SEGMENTS_HEADER "\n", stdout);
        for (size_t i = 0; i < ncol; i++) {
            notes(&c, &sc[i], &st[i]);
            pm_segstats_write_csv(stdout, &sc[i], &st[i], inc, pm_cli_csv_flags(&c));
        }
    }
    for (size_t i = 0; st && i < done; i++) {
        pm_segstats_destroy(&st[i]);
    }
    free(st);
    pm_cli_segments_free();
    pm_incidence_free(inc);
    pm_table_free(t);
    return rc ? rc : pm_cli_close_stdout();
}
