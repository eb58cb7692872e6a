/* pairmap unfold: the input as long pairs respondent,item,category on stdout, so that a user
 * can check or reuse the conversion of a wide survey export (or of a lines file). The one
 * output that shows respondent ids: they are the user's own. */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>

#include "cli.h"
#include "pairmap/write.h"

static const char help[] =
    "Usage: pairmap unfold INPUT --format wide --columns PREFIX [--columns PREFIX ...]\n"
    "                       [options] > long.csv\n"
    "\n"
    "Writes the respondent-item pairs the other commands count, as long CSV on standard\n"
    "output, columns\n"
    "  respondent,item,category            (plus weight with --weight-col)\n"
    "one row per respondent and item, respondents in input order, each respondent's items in\n"
    "the order of the columns (a repeated item is written once). A respondent kept in N who\n"
    "chose nothing (--base all, or every choice removed by --drop-item) gets one row with an\n"
    "empty item, so that `pairmap map long.csv --category-col category` counts the same N.\n"
    "Respondent ids come from the input (--id-col; wide default: column 1).\n"
    "\n"
    "Wide format: every row is one respondent, every option of a multi-select question one\n"
    "column. --columns PREFIX selects the columns of one question: those whose header starts\n"
    "with PREFIX (a column matching two prefixes belongs to the longer one). The prefix\n"
    "without trailing digits and separators (_ - : . space) is the items' category\n"
    "('drinks_' -> drinks; when two prefixes would give the same category, only the\n"
    "separators are removed: 'Q1_' -> Q1, 'Q2_' -> Q2). A cell is 'not chosen' when it is\n"
    "empty, 0, no, false or a --drop-value (ASCII letter case ignored). Otherwise the item is\n"
    "the cell's text, or, where a column holds 1, yes or true, the column header without the\n"
    "prefix and separators. A column decides at its first chosen cell and must keep to it.\n"
    "An item is its (question, label): a label chosen under two questions gives two items,\n"
    "named 'label (category)'; --drop-item and --merge-file match either the label (under\n"
    "every question) or 'label (category)'. N, the base of every share and every pair (a\n"
    "pair across two questions too), is the respondents who chose something in at least one\n"
    "selected question (--base answered, the default: the others are left out and counted\n"
    "in a note) or every respondent row (--base all).\n"
    "\n";

/* Rows grouped by respondent (a counting sort keeps input order within a respondent):
 * respondent r's rows are order[start[r] .. start[r + 1]). */
static void group_rows(const pm_table_t *t, size_t nr, size_t nrows, size_t *start, size_t *order) {
    for (size_t i = 0; i < nrows; i++) {
        size_t r, it;
        pm_table_row_index(t, i, &r, &it);
        start[r + 1]++;
    }
    for (size_t r = 0; r < nr; r++) {
        start[r + 1] += start[r];
    }
    for (size_t i = 0; i < nrows; i++) {
        size_t r, it;
        pm_table_row_index(t, i, &r, &it);
        order[start[r]++] = i;
    }
    for (size_t r = nr; r > 0; r--) { /* start[r] now ends respondent r: shift back */
        start[r] = start[r - 1];
    }
    start[0] = 0;
}

/* What the long file got: rows written, respondents with no item, repeated pairs. */
typedef struct {
    unsigned long long written, empty, dups;
} unfold_counts;

static void write_weight(const pm_table_t *t, size_t r) {
    fputc(',', stdout);
    pm_write_number(stdout, pm_table_respondent_weight(t, r));
}

/* The long file on stdout: one row per (respondent, item), each pair once. */
static unfold_counts write_long(const pm_table_t *t, size_t nr, const size_t *start,
                                const size_t *order, size_t *seen) {
    unfold_counts n = {0, 0, 0};
    bool weighted = pm_table_weighted(t);
    fputs(weighted ? "respondent,item,category,weight\n" : "respondent,item,category\n", stdout);
    for (size_t r = 0; r < nr; r++) {
        const char *id = pm_table_respondent(t, r);
        size_t kept = 0;
        for (size_t k = start[r]; k < start[r + 1]; k++) {
            size_t rr, it;
            pm_table_row_index(t, order[k], &rr, &it);
            if (seen[it] == r + 1) {
                n.dups++;
                continue;
            }
            seen[it] = r + 1;
            const char *rid, *item, *cat;
            pm_table_row(t, order[k], &rid, &item, &cat);
            pm_write_csv_field(stdout, id, PM_CSV_RAW);
            fputc(',', stdout);
            pm_write_csv_field(stdout, item, PM_CSV_RAW);
            fputc(',', stdout);
            pm_write_csv_field(stdout, cat ? cat : "", PM_CSV_RAW);
            if (weighted) {
                write_weight(t, r);
            }
            fputc('\n', stdout);
            kept++;
        }
        if (kept == 0) { /* in N with no item: one row with an empty item */
            pm_write_csv_field(stdout, id, PM_CSV_RAW);
            fputs(",,", stdout);
            if (weighted) {
                write_weight(t, r);
            }
            fputc('\n', stdout);
            n.empty++;
        }
        n.written += kept;
        if ((r & 4095) == 0 && ferror(stdout)) {
            break;
        }
    }
    return n;
}

static void unfold_notes(const pm_cli_t *c, const pm_table_t *t, const pm_input_opts_t *io,
                         size_t nr, const unfold_counts *n) {
    const pm_input_stats_t *s = pm_table_stats(t);
    if (s->blank_excluded) {
        pm_cli_note(c,
                    "note: %llu respondents chose nothing in the selected questions and are "
                    "left out (--base answered; --base all keeps them)",
                    (unsigned long long)s->blank_excluded);
    }
    if (s->dropped_rows) {
        pm_cli_note(c, "note: %llu choices dropped by --drop-item",
                    (unsigned long long)s->dropped_rows);
    }
    if (s->merged_rows) {
        pm_cli_note(c, "note: %llu choices renamed by --merge-file (%llu entries)",
                    (unsigned long long)s->merged_rows, (unsigned long long)s->merge_entries);
    }
    if (n->dups) {
        pm_cli_note(c, "note: %llu repeated respondent-item pairs written once", n->dups);
    }
    if (io->respondents) {
        pm_cli_note(c,
                    "note: --respondents %llu is not part of the long file; give it again "
                    "when you read it",
                    (unsigned long long)io->respondents);
    }
    pm_cli_note(c, "%zu respondents, %llu respondent-item rows, %llu respondents with no item", nr,
                n->written, n->empty);
}

int pm_cmd_unfold(int argc, char **argv) {
    pm_cli_t c;
    static char full[8192];
    snprintf(full, sizeof full, "%s%s%s", help, pm_cli_input_help, pm_cli_only_help);
    int rc = pm_cli_parse(&c, "unfold", PM_CMD_UNFOLD, argc, argv, full);
    if (rc) {
        return rc < 0 ? pm_cli_close_stdout() : rc;
    }
    pm_input_opts_t io;
    if (pm_cli_input_opts(&c, &io)) {
        return 1;
    }
    pm_diag_t d;
    pm_diag_clear(&d);
    pm_table_t *t = NULL;
    if (pm_input_read(c.input, &io, &t, &d)) {
        return pm_cli_fail(&d);
    }
    if ((rc = pm_cli_segments_load(&c, t)) != 0) {
        pm_table_free(t);
        return rc;
    }
    size_t nr = pm_table_nrespondents(t), nrows = pm_table_nrows(t), ni = pm_table_nitems(t);
    size_t *start = NULL, *order = NULL, *seen = NULL;
    if (nr && !pm_table_respondent(t, 0)) {
        fprintf(stderr,
                "pairmap: %s: unfold writes the respondent ids of the input, and these "
                "lines have none; give --id-col\n",
                pm_table_source(t));
        rc = 1;
        goto done;
    }
    start = calloc(nr + 1, sizeof *start);
    order = malloc((nrows ? nrows : 1) * sizeof *order);
    seen = calloc(ni ? ni : 1, sizeof *seen);
    if (!start || !order || !seen) {
        fputs("pairmap: out of memory\n", stderr);
        rc = 4;
        goto done;
    }
    group_rows(t, nr, nrows, start, order);
    unfold_counts n = write_long(t, nr, start, order, seen);
    rc = pm_cli_close_stdout();
    if (rc == 0) {
        unfold_notes(&c, t, &io, nr, &n);
    }
done:
    free(start);
    free(order);
    free(seen);
    pm_table_free(t);
    return rc;
}
