/* Segment columns in the shared run path (see cli.h): --segment-col, --segment-file,
 * --segment-levels and --only-segment, read once by pm_cli_load between reading the input and
 * building the incidence, so that every command sees the same respondents and map, pairs,
 * partners and segments the same columns. */
#include <stdlib.h>
#include <string.h>

#include "cli.h"

const char pm_cli_segment_help[] =
    "Segments:\n"
    "  --segment-col COL     a respondent attribute (region, location, age band, day): a\n"
    "                        column of the input, the same on every row of a respondent, or\n"
    "                        of --segment-file (repeatable: each column on its own). A\n"
    "                        respondent with an empty cell, or missing from the segment file,\n"
    "                        has no segment of that column (counted in a note)\n"
    "  --segment-levels COL=A,B,C   the order of COL's segments (then COL is ordered);\n"
    "                        otherwise labels that hold a number first, by that number, then\n"
    "                        the others by label\n"
    "With --segment-col, pairs, partners --csv (a set: as one item, those who chose all of\n"
    "it) and map's edges.csv gain the\n"
    "columns mh_odds_ratio,mh_low,mh_high,cmh_p,heterogeneity_p,reversed over the segments\n"
    "of the first column: the Mantel-Haenszel odds ratio with its 95% interval (Robins-\n"
    "Breslow-Greenland), the Cochran-Mantel-Haenszel test (no continuity correction; one-\n"
    "or two-sided as --sign), the Breslow-Day test of equal odds ratios (Tarone), and\n"
    "reversed = 1 when the pooled and the within-segment odds ratio lie on opposite sides\n"
    "of 1 with both 95% intervals excluding 1. Unweighted only (weighted: empty cells).\n"
    "  --pair-test T         pooled (default): pairs are selected by the test over all\n"
    "                        respondents; within: by the Cochran-Mantel-Haenszel test over\n"
    "                        the segments of the first --segment-col (cmh_p), so that a pair\n"
    "                        kept holds inside the segments and not only through their mix.\n"
    "                        q_value and --max-q are then Benjamini-Hochberg over the CMH\n"
    "                        p-values of the same family of pairs (every pair of eligible\n"
    "                        items, never-seen ones included; a pair with no segment where\n"
    "                        both items vary counts as p = 1); p_value and test stay the\n"
    "                        pooled test's, and --sign still asks the pooled phi's direction.\n"
    "                        Respondents without a segment are left out of the test.\n"
    "                        partners: over the family --family names (by default the\n"
    "                        item's own: its pairs with every other item).\n"
    "                        Unweighted input only (--weight-col is a usage error)\n";

const char pm_cli_only_help[] =
    "Respondents:\n"
    "  --segment-file FILE   CSV with a header, first column the respondent id, holding\n"
    "                        segment columns (any format; lines needs --id-col 1). A column\n"
    "                        not in it is looked for in the input (long and wide formats)\n"
    "  --only-segment COL=NAME   keep only the respondents whose COL is NAME (a column of\n"
    "                        the input or of --segment-file); repeatable: names of one column\n"
    "                        add up (either), different columns must all hold (both). Every\n"
    "                        result is then the one a file of those respondents' rows alone\n"
    "                        would give; a note says how many were kept\n";

/* The run's columns: the --segment-col ones first (in order), then columns only
 * --only-segment names. */
static struct {
    pm_segcol_t *col;
    size_t n, n_seg;
    int loaded;
} g_seg;

const pm_segcol_t *pm_cli_segcols(size_t *n) {
    *n = g_seg.n_seg;
    return g_seg.col;
}

void pm_cli_segments_free(void) {
    for (size_t i = 0; i < g_seg.n; i++) {
        pm_segcol_destroy(&g_seg.col[i]);
    }
    free(g_seg.col);
    memset(&g_seg, 0, sizeof g_seg);
}

/* The --segment-levels value for column col, or NULL. */
static const char *levels_for(const pm_cli_t *c, const char *col) {
    size_t n;
    const char *const *v = pm_cli_all(c, "segment-levels", &n);
    size_t cl = strlen(col);
    for (size_t i = 0; i < n; i++) {
        if (strncmp(v[i], col, cl) == 0 && v[i][cl] == '=') {
            return v[i] + cl + 1;
        }
    }
    return NULL;
}

static int read_column(const pm_cli_t *c, const pm_table_t *t, const char *col, size_t len,
                       int only, pm_segcol_t *out) {
    char name[1024];
    if (len >= sizeof name) {
        return pm_cli_usage_error(c, "segment column name too long");
    }
    memcpy(name, col, len);
    name[len] = '\0';
    const char *file = pm_cli_get(c, "segment-file");
    pm_segcol_src_t src = {0};
    src.path = file ? file : c->input;
    src.is_input = file == NULL;
    src.id_col = file ? NULL : pm_cli_get(c, "id-col");
    src.column = name;
    src.levels = levels_for(c, name);
    if (!file) {
        pm_input_opts_t io;
        if (pm_cli_input_opts(c, &io)) {
            return 1;
        }
        src.sep = io.sep;
    }
    pm_diag_t d;
    pm_diag_clear(&d);
    pm_err_t rc = pm_segcol_read(t, &src, out, &d);
    if (rc == PM_EUSAGE && file && d.line == 1 && strcmp(c->input, "-") != 0) {
        /* not a column of the segment file: a column of the input itself (long, wide) */
        pm_diag_t d2;
        pm_diag_clear(&d2);
        pm_input_opts_t io;
        if (pm_cli_input_opts(c, &io)) {
            return 1;
        }
        src.path = c->input;
        src.is_input = true;
        src.id_col = pm_cli_get(c, "id-col");
        src.sep = io.sep;
        if (io.format != PM_FORMAT_LINES) {
            pm_err_t rc2 = pm_segcol_read(t, &src, out, &d2);
            if (rc2 == PM_OK) {
                rc = PM_OK;
            } else if (rc2 != PM_EUSAGE || d2.line != 1) {
                d = d2; /* the input has the column, but its values are bad: that error */
                rc = rc2;
            }
        }
    }
    if (rc) {
        static const char said[] = "--segment-col ";
        if (only && strncmp(d.msg, said, sizeof said - 1) == 0) { /* the option the user gave */
            char m[sizeof d.msg + 32];
            snprintf(m, sizeof m, "--only-segment column %s", d.msg + sizeof said - 1);
            memcpy(d.msg, m, sizeof d.msg - 1);
            d.msg[sizeof d.msg - 1] = '\0';
        }
        if (d.code == PM_EUSAGE && !d.file[0]) {
            return pm_cli_usage_error(c, "%s", d.msg);
        }
        return pm_cli_fail(&d);
    }
    return 0;
}

static long find_col(const char *col, size_t len) {
    for (size_t i = 0; i < g_seg.n; i++) {
        if (strlen(g_seg.col[i].column) == len && memcmp(g_seg.col[i].column, col, len) == 0) {
            return (long)i;
        }
    }
    return -1;
}

/* --only-segment COL=NAME: marks NAME's level in allow[column][level]. */
static int mark_only(const pm_cli_t *c, const char *v, unsigned char **allow) {
    const char *eq = strchr(v, '=');
    if (!eq || eq == v || !eq[1]) {
        return pm_cli_usage_error(c, "--only-segment expects COL=NAME, got '%s'", v);
    }
    long k = find_col(v, (size_t)(eq - v));
    const pm_segcol_t *sc = &g_seg.col[k];
    for (size_t s = 0; s < sc->n_levels; s++) {
        if (strcmp(sc->level[s], eq + 1) == 0) {
            allow[k][s] = 1;
            return 0;
        }
    }
    char list[512] = "";
    for (size_t s = 0; s < sc->n_levels && strlen(list) < 400; s++) {
        size_t l = strlen(list);
        snprintf(list + l, sizeof list - l, "%s'%s'", s ? ", " : "", sc->level[s]);
    }
    return pm_cli_usage_error(c, "--only-segment: column '%s' has no segment '%s' (it has %s%s)",
                              sc->column, eq + 1, list,
                              strlen(list) >= 400 && sc->n_levels ? ", ..." : "");
}

/* Applies --only-segment to the table and the columns. */
static int restrict_run(const pm_cli_t *c, pm_table_t *t, const char *const *only, size_t n_only) {
    size_t nr = pm_table_nrespondents(t);
    unsigned char **allow = calloc(g_seg.n, sizeof *allow);
    unsigned char *keep = malloc(nr ? nr : 1);
    int rc = !allow || !keep ? 4 : 0;
    for (size_t k = 0; rc == 0 && k < g_seg.n; k++) {
        rc = (allow[k] = calloc(g_seg.col[k].n_levels + 1, 1)) ? 0 : 4;
    }
    for (size_t i = 0; rc == 0 && i < n_only; i++) {
        rc = mark_only(c, only[i], allow);
    }
    size_t kept = 0;
    if (rc == 0) {
        for (size_t r = 0; r < nr; r++) {
            keep[r] = 1;
            for (size_t k = 0; k < g_seg.n && keep[r]; k++) {
                int32_t lv = g_seg.col[k].of[r];
                int any = 0;
                for (size_t s = 0; s < g_seg.col[k].n_levels && !any; s++) {
                    any = allow[k][s];
                }
                keep[r] = !any || (lv >= 0 && allow[k][lv]);
            }
            kept += keep[r];
        }
        if (kept == 0) {
            rc = pm_cli_usage_error(c, "--only-segment keeps no respondent (no respondent "
                                       "has every segment asked for)");
        }
    }
    pm_diag_t d;
    pm_diag_clear(&d);
    if (rc == 0 && pm_table_keep(t, keep, &d) != PM_OK) {
        rc = pm_cli_fail(&d);
    }
    for (size_t k = 0; rc == 0 && k < g_seg.n; k++) {
        rc = pm_segcol_keep(&g_seg.col[k], keep) == PM_OK ? 0 : 4;
    }
    if (rc == 4) {
        fputs("pairmap: out of memory\n", stderr);
    }
    if (rc == 0) {
        pm_cli_note(c, "note: --only-segment kept %zu of %zu %s", kept, nr, pm_cli_unit(c));
        if (pm_cli_get(c, "respondents")) {
            pm_cli_note(c, "note: --respondents does not apply under --only-segment: "
                           "respondents not in the file have no segment");
        }
    }
    for (size_t k = 0; allow && k < g_seg.n; k++) {
        free(allow[k]);
    }
    free(allow);
    free(keep);
    return rc;
}

int pm_cli_segments_load(const pm_cli_t *c, pm_table_t *t) {
    pm_cli_segments_free();
    size_t n_seg, n_only;
    const char *const *seg = pm_cli_all(c, "segment-col", &n_seg);
    const char *const *only = pm_cli_all(c, "only-segment", &n_only);
    if (n_seg + n_only == 0) {
        return 0;
    }
    size_t nl;
    const char *const *lv = pm_cli_all(c, "segment-levels", &nl);
    for (size_t i = 0; i < nl; i++) {
        const char *eq = strchr(lv[i], '=');
        int known = 0;
        for (size_t j = 0; eq && j < n_seg && !known; j++) {
            known = strlen(seg[j]) == (size_t)(eq - lv[i]) &&
                    memcmp(seg[j], lv[i], (size_t)(eq - lv[i])) == 0;
        }
        if (!known) {
            return pm_cli_usage_error(c,
                                      "--segment-levels expects COL=A,B,... for a column given "
                                      "with --segment-col, got '%s'",
                                      lv[i]);
        }
    }
    g_seg.col = calloc(n_seg + n_only, sizeof *g_seg.col);
    if (!g_seg.col) {
        fputs("pairmap: out of memory\n", stderr);
        return 4;
    }
    int rc = 0;
    for (size_t i = 0; rc == 0 && i < n_seg + n_only; i++) {
        const char *col = i < n_seg ? seg[i] : only[i - n_seg];
        const char *eq = i < n_seg ? NULL : strchr(col, '=');
        if (i >= n_seg && (!eq || eq == col)) {
            return pm_cli_usage_error(c, "--only-segment expects COL=NAME, got '%s'", col);
        }
        size_t len = eq ? (size_t)(eq - col) : strlen(col);
        if (find_col(col, len) >= 0) {
            if (i < n_seg) {
                return pm_cli_usage_error(c, "--segment-col '%s' given twice", col);
            }
            continue;
        }
        if ((rc = read_column(c, t, col, len, i >= n_seg, &g_seg.col[g_seg.n])) == 0) {
            g_seg.n++;
        }
    }
    g_seg.n_seg = n_seg;
    if (rc == 0 && n_only) {
        rc = restrict_run(c, t, only, n_only);
    }
    return rc;
}

int pm_cli_strat(const pm_cli_t *c, const pm_incidence_t *inc, const pm_segcol_t *seg, size_t nseg,
                 const pm_pairs_t *pp, const pm_edges_t *e, const pm_select_opts_t *sel,
                 pm_strat_t **st) {
    *st = NULL;
    if (nseg == 0) {
        return 0;
    }
    if (inc->weight) {
        pm_cli_note(c, "note: weighted input: the Mantel-Haenszel columns are left empty (they "
                       "take unweighted counts)");
        return 0;
    }
    pm_diag_t d;
    pm_diag_clear(&d);
    unsigned th = 0;
    if (pm_cli_threads(c, &th)) {
        return 1;
    }
    if (pm_stratified_edges(inc, &seg[0], pp, e, sel->sign, th, st, &d) != PM_OK) {
        return pm_cli_fail(&d);
    }
    pm_cli_note(c,
                "note: pairs within the %zu segments of '%s' (Mantel-Haenszel; %llu %s "
                "without a segment left out of those columns)",
                seg[0].n_levels, seg[0].column, (unsigned long long)seg[0].none, pm_cli_unit(c));
    return 0;
}

int pm_cli_pair_test(const pm_cli_t *c, int *within) {
    static const char *const tests[] = {"pooled", "within", NULL};
    int t;
    *within = 0;
    if (pm_cli_choice(c, "pair-test", tests, 0, &t)) {
        return 1;
    }
    if (t == 0) {
        return 0;
    }
    size_t nseg;
    pm_cli_all(c, "segment-col", &nseg);
    if (nseg == 0) {
        return pm_cli_usage_error(c, "--pair-test within needs --segment-col COL (the segments "
                                     "the test is taken within)");
    }
    if (pm_cli_get(c, "weight-col")) {
        return pm_cli_usage_error(c, "--pair-test within takes unweighted input (the "
                                     "Cochran-Mantel-Haenszel test counts respondents): leave "
                                     "out --weight-col or use --pair-test pooled");
    }
    *within = 1;
    return 0;
}

int pm_cli_within(const pm_cli_t *c, const pm_incidence_t *inc, const pm_select_opts_t *sel,
                  pm_pairs_t *pp) {
    int within;
    if (pm_cli_pair_test(c, &within) || !within) {
        return within ? 1 : 0;
    }
    size_t nseg;
    const pm_segcol_t *seg = pm_cli_segcols(&nseg);
    pm_strat_family_opts_t o;
    pm_stratified_family_opts_init(&o);
    o.sign = sel->sign;
    o.q_limit = sel->max_q; /* only pairs with q <= --max-q are shown */
    if (pm_cli_threads(c, &o.threads)) {
        return 1;
    }
    uint64_t bytes;
    (void)pm_stratified_family_cost(inc, &seg[0], pp, &o, &bytes);
    int mrc = pm_cli_check_bytes(c, bytes, "the pair tests within segments");
    if (mrc) {
        return mrc;
    }
    pm_diag_t d;
    pm_diag_clear(&d);
    pm_strat_family_t f;
    if (pm_stratified_family_run(inc, &seg[0], pp, &o, &f, &d) != PM_OK) {
        return d.code == PM_EUSAGE && !d.file[0] ? pm_cli_usage_error(c, "%s", d.msg)
                                                 : pm_cli_fail(&d);
    }
    if (pp->n) {
        memcpy(pp->q, f.q, pp->n * sizeof *pp->q);
    }
    pm_cli_note(c,
                "note: --pair-test within: pairs selected by the Cochran-Mantel-Haenszel test "
                "within the %zu segments of '%s'; q over the %llu pairs of the family (%llu "
                "chosen together within a segment, %llu without a defined test, taken as p = "
                "1); %llu %s without a segment left out of the test",
                seg[0].n_levels, seg[0].column, (unsigned long long)f.hypotheses,
                (unsigned long long)f.seen_within, (unsigned long long)f.undefined,
                (unsigned long long)seg[0].none, pm_cli_unit(c));
    pm_stratified_family_destroy(&f);
    return 0;
}

int pm_cli_segments_leave_out(const pm_cli_t *c, const pm_incidence_t *inc) {
    for (size_t k = 0; k < g_seg.n; k++) {
        pm_segcol_t *col = &g_seg.col[k];
        if (pm_segcol_leave_out(col, inc->left_out, inc->n_resp) != PM_OK) {
            fputs("pairmap: out of memory\n", stderr);
            return 4;
        }
        if (k < g_seg.n_seg) {
            pm_cli_note(c,
                        "note: --max-basket: %llu %s with a segment of '%s' left out of its "
                        "segment figures too (%zu segments remain)",
                        (unsigned long long)col->left_out, pm_cli_unit(c), col->column,
                        col->n_levels);
        }
    }
    return 0;
}
