/* Unit tests of src/input.c: pm_input_read on temporary files in the long and lines formats,
 * columns by name and number, categories, weights, duplicates, empty items, --respondents,
 * --drop-item and --merge-file, and the error (code, line, message) of every bad input. */
#include "unit.h"

#include <math.h>

#include "pairmap/incidence.h"
#include "pairmap/input.h"
#include "input_internal.h"
#include "util.h"

/* ---- helpers ------------------------------------------------------------------------------ */

typedef struct {
    pm_input_opts_t o;
    pm_table_t *t;
    pm_diag_t d;
    char *path;
} rd;

static void rd_init(rd *r) {
    memset(r, 0, sizeof *r);
    pm_input_opts_init(&r->o);
    r->o.display_name = "in.csv";
}

/* The parallel reader (chunks at line ends, one table per chunk, appended in file order)
 * must give exactly the serial reader's table, or exactly its error. */
static void same_table(const pm_table_t *a, const pm_table_t *b) {
    assert_memory_equal(pm_table_stats(a), pm_table_stats(b), sizeof(pm_input_stats_t));
    assert_int_equal(pm_table_nrows(a), pm_table_nrows(b));
    assert_int_equal(pm_table_nitems(a), pm_table_nitems(b));
    assert_int_equal(pm_table_nrespondents(a), pm_table_nrespondents(b));
    for (size_t i = 0; i < pm_table_nrows(a); i++) {
        const char *ra, *ia, *ca, *rb, *ib, *cb;
        size_t xa, ya, xb, yb;
        pm_table_row(a, i, &ra, &ia, &ca);
        pm_table_row(b, i, &rb, &ib, &cb);
        pm_table_row_index(a, i, &xa, &ya);
        pm_table_row_index(b, i, &xb, &yb);
        assert_true((ra == NULL) == (rb == NULL));
        if (ra) {
            assert_string_equal(ra, rb);
        }
        assert_string_equal(ia, ib);
        assert_true((ca == NULL) == (cb == NULL));
        if (ca) {
            assert_string_equal(ca, cb);
        }
        assert_int_equal(xa, xb);
        assert_int_equal(ya, yb);
    }
    for (size_t r = 0; r < pm_table_nrespondents(a); r++) {
        const char *sa = pm_table_respondent(a, r), *sb = pm_table_respondent(b, r);
        assert_true((sa == NULL) == (sb == NULL));
        if (sa) {
            assert_string_equal(sa, sb);
        }
        assert_int_equal(pm_table_respondent_empty(a, r), pm_table_respondent_empty(b, r));
        double wa = pm_table_respondent_weight(a, r), wb = pm_table_respondent_weight(b, r);
        assert_true((wa != wa && wb != wb) || wa == wb);
        assert_int_equal(a->resp_line[r], b->resp_line[r]);
    }
    for (size_t i = 0; i < pm_table_nitems(a); i++) {
        assert_int_equal(a->item_cat[i], b->item_cat[i]);
        assert_int_equal(a->item_line[i], b->item_line[i]);
    }
}

/* Reads text with the options in r->o; then again in parallel chunks of a few bytes on 2, 3
 * and 16 threads, which must give the same table or the same error. */
static pm_err_t rd_run(rd *r, const char *text) {
    r->path = unit_tmpfile_str(text);
    pm_diag_clear(&r->d);
    pm_err_t rc = pm_input_read(r->path, &r->o, &r->t, &r->d);
    if (rc != PM_OK) {
        assert_null(r->t); /* a failed read hands back nothing */
        assert_int_equal(r->d.code, rc);
    }
    if (r->o.format != PM_FORMAT_WIDE) {
        /* every line through the record path: the same table or the same error */
        pm_table_t *st = NULL;
        pm_diag_t sd;
        pm_diag_clear(&sd);
        pm_i_no_fast_lines = 1;
        pm_err_t src = pm_input_read(r->path, &r->o, &st, &sd);
        pm_i_no_fast_lines = 0;
        assert_int_equal(src, rc);
        if (rc == PM_OK) {
            same_table(r->t, st);
        } else {
            assert_int_equal(sd.line, r->d.line);
            assert_string_equal(sd.msg, r->d.msg);
        }
        pm_table_free(st);
    }
    static const unsigned threads[3] = {2, 3, 16};
    for (int k = 0; k < 3 && r->o.format != PM_FORMAT_WIDE; k++) {
        pm_input_opts_t po = r->o;
        po.threads = threads[k];
        po.chunk_bytes = 1;
        pm_table_t *pt = NULL;
        pm_diag_t pd;
        pm_diag_clear(&pd);
        /* the hash finished in the background, or by its owner when the thread gets no
         * processor (k = 2): the same bytes */
        po.defer_hash = k >= 1;
        pm_i_hash_stall = k == 2;
        pm_err_t prc = pm_input_read(r->path, &po, &pt, &pd);
        assert_int_equal(prc, rc);
        if (rc == PM_OK) {
            assert_int_equal(pm_table_wait_hash(pt, &pd), PM_OK);
            pm_i_hash_stall = 0;
            same_table(r->t, pt);
            /* a file without quotes and with a few lines is really read in chunks */
            size_t lines = 0;
            for (const char *c = text; *c; c++) {
                lines += *c == '\n';
            }
            if (!strchr(text, '"') && !strchr(text, '\r') && lines >= 4) {
                assert_true(pt->read_chunks >= 2);
            }
        } else {
            assert_int_equal(pd.code, r->d.code);
            assert_int_equal(pd.line, r->d.line);
            assert_string_equal(pd.msg, r->d.msg);
            assert_string_equal(pd.file, r->d.file);
        }
        pm_i_hash_stall = 0;
        pm_table_free(pt);
    }
    return rc;
}

static void rd_done(rd *r) {
    pm_table_free(r->t);
    r->t = NULL;
    unit_rmfile(r->path);
    r->path = NULL;
}

/* Expects failure with code, diagnostic line and message parts. */
static void expect_error(rd *r, const char *text, pm_err_t code, long line, const char *part1,
                         const char *part2) {
    pm_err_t rc = rd_run(r, text);
    if (rc != code) {
        fail_msg("expected code %d, got %d (%s)", code, rc, r->d.msg);
    }
    assert_int_equal(r->d.line, line);
    if (part1 && !strstr(r->d.msg, part1)) {
        fail_msg("message '%s' lacks '%s'", r->d.msg, part1);
    }
    if (part2 && !strstr(r->d.msg, part2)) {
        fail_msg("message '%s' lacks '%s'", r->d.msg, part2);
    }
    rd_done(r);
}

static void expect_row(const pm_table_t *t, size_t i, const char *resp, const char *item,
                       const char *cat) {
    const char *r, *it, *c;
    pm_table_row(t, i, &r, &it, &c);
    if (resp) {
        assert_string_equal(r, resp);
    } else {
        assert_null(r);
    }
    assert_string_equal(it, item);
    if (cat) {
        assert_non_null(c);
        assert_string_equal(c, cat);
    } else {
        assert_null(c);
    }
}

/* ---- long format -------------------------------------------------------------------------- */

/* The background SHA-256 stopped after some windows and finished by its owner, either where it
 * waits for it (pm_table_wait_hash) or by a thread at the normal priority (pm_table_hash_ahead):
 * the digest the serial reader computes while it reads (its own code path). */
static void test_input_hash_resumed(void **state) {
    (void)state;
    char path[] = "/tmp/pm_hash_XXXXXX";
    int fd = mkstemp(path);
    assert_true(fd >= 0);
    FILE *fp = fdopen(fd, "w");
    fputs("respondent,item\n", fp);
    for (int i = 0; i < 40000; i++) { /* about 800 kB: some 200 windows of a page */
        fprintf(fp, "r%06d,item%03d\n", i / 7, (i * 37) % 500);
    }
    fclose(fp);
    pm_input_opts_t o;
    pm_input_opts_init(&o);
    o.threads = 1;
    pm_table_t *ref = NULL, *t = NULL;
    pm_diag_t d;
    pm_diag_clear(&d);
    assert_int_equal(pm_input_read(path, &o, &ref, &d), PM_OK);
    for (int ahead = 0; ahead < 2; ahead++) {
        for (int after = 1; after <= 150; after += 149) {
            o.threads = 2;
            o.chunk_bytes = 1;
            o.defer_hash = true;
            pm_i_hash_window = (size_t)sysconf(_SC_PAGESIZE);
            pm_i_hash_stall_after = after;
            atomic_store(&pm_i_hash_stalled, 0);
            assert_int_equal(pm_input_read(path, &o, &t, &d), PM_OK);
            for (int w = 0; w < 60000 && !atomic_load(&pm_i_hash_stalled); w++) {
                struct timespec ms = {0, 1000000};
                nanosleep(&ms, NULL);
            }
            assert_true(atomic_load(&pm_i_hash_stalled)); /* stopped part-way, then resumed */
            if (ahead) {
                pm_table_hash_ahead(t);
            }
            assert_int_equal(pm_table_wait_hash(t, &d), PM_OK);
            assert_memory_equal(pm_table_stats(t)->sha256, pm_table_stats(ref)->sha256, 32);
            pm_table_free(t);
        }
    }
    pm_i_hash_stall_after = 0;
    pm_i_hash_window = 0;
    pm_table_free(ref);
    unlink(path);
}

static void test_input_read_long_basic(void **state) {
    (void)state;
    rd r;
    rd_init(&r);
    const char *text = "order,item\n1,tea\n1, scone \n2,tea\n3,\n";
    assert_int_equal(rd_run(&r, text), PM_OK);
    const pm_input_stats_t *s = pm_table_stats(r.t);
    assert_int_equal(s->records, 4);
    assert_int_equal(s->rows, 3);
    assert_int_equal(s->empty_items, 1);
    assert_int_equal(s->respondents, 3);
    assert_int_equal(s->lines, 5);
    assert_int_equal(s->bytes, strlen(text));
    assert_string_equal(pm_table_source(r.t), "in.csv");
    assert_false(pm_table_weighted(r.t));
    assert_false(pm_table_has_categories(r.t));
    assert_int_equal(pm_table_nrows(r.t), 3);
    expect_row(r.t, 0, "1", "tea", NULL);
    expect_row(r.t, 1, "1", "scone", NULL); /* trimmed */
    expect_row(r.t, 2, "2", "tea", NULL);
    assert_int_equal(pm_table_nrespondents(r.t), 3);
    assert_string_equal(pm_table_respondent(r.t, 2), "3");
    assert_false(pm_table_respondent_empty(r.t, 0));
    assert_true(pm_table_respondent_empty(r.t, 2)); /* chose nothing, still a respondent */
    rd_done(&r);
}

static void test_input_read_long_bom_crlf_semicolon(void **state) {
    (void)state;
    rd r;
    rd_init(&r);
    /* the BOM must not stick to the first header name, or --id-col order would not match */
    r.o.id_col = "order";
    r.o.item_col = "item";
    assert_int_equal(rd_run(&r, "\xEF\xBB\xBF"
                                "order;item\r\n7;\"hot\r\nchocolate\"\r\n8;tea\r\n"),
                     PM_OK);
    assert_int_equal(pm_table_nrows(r.t), 2);
    expect_row(r.t, 0, "7", "hot\r\nchocolate", NULL); /* quoted newline kept, not trimmed */
    expect_row(r.t, 1, "8", "tea", NULL);
    rd_done(&r);
}

static void test_input_read_long_columns(void **state) {
    (void)state;
    const char *text = "day,dish,guest,kind\nmon,soup,g1,starter\nmon,cake,g2,dessert\n";
    rd r;
    /* by name */
    rd_init(&r);
    r.o.id_col = "guest";
    r.o.item_col = "dish";
    r.o.category_col = "kind";
    assert_int_equal(rd_run(&r, text), PM_OK);
    assert_true(pm_table_has_categories(r.t));
    expect_row(r.t, 0, "g1", "soup", "starter");
    expect_row(r.t, 1, "g2", "cake", "dessert");
    rd_done(&r);
    /* by 1-based number */
    rd_init(&r);
    r.o.id_col = "3";
    r.o.item_col = "2";
    r.o.category_col = "4";
    assert_int_equal(rd_run(&r, text), PM_OK);
    expect_row(r.t, 1, "g2", "cake", "dessert");
    rd_done(&r);
    /* defaults: columns 1 and 2 */
    rd_init(&r);
    assert_int_equal(rd_run(&r, text), PM_OK);
    expect_row(r.t, 0, "mon", "soup", NULL);
    assert_int_equal(pm_table_nrespondents(r.t), 1);
    rd_done(&r);
    /* without a header, numbers still work and the first line is data */
    rd_init(&r);
    r.o.no_header = true;
    r.o.id_col = "3";
    assert_int_equal(rd_run(&r, "mon,soup,g1\nmon,cake,g2\n"), PM_OK);
    assert_int_equal(pm_table_nrows(r.t), 2);
    expect_row(r.t, 0, "g1", "soup", NULL);
    assert_int_equal(pm_table_stats(r.t)->records, 2);
    rd_done(&r);
}

static void test_input_read_long_unknown_column(void **state) {
    (void)state;
    rd r;
    rd_init(&r);
    r.o.item_col = "dish";
    /* the message lists the columns there are */
    expect_error(&r, "order,item,kind\n1,tea,drink\n", PM_EUSAGE, 1,
                 "--item-col 'dish' names no column", "the columns are 'order', 'item', 'kind'");
    rd_init(&r);
    r.o.weight_col = "4";
    expect_error(&r, "order,item,kind\n1,tea,drink\n", PM_EUSAGE, 1, "--weight-col 4",
                 "past the 3 columns");
    rd_init(&r);
    r.o.category_col = "kind";
    r.o.no_header = true; /* no header: names cannot match */
    expect_error(&r, "1,tea,drink\n", PM_EUSAGE, 1, "--category-col 'kind' names no column", NULL);
    rd_init(&r);
    r.o.id_col = "2";
    expect_error(&r, "order,item\n1,tea\n", PM_EUSAGE, 1, "same column", NULL);
    rd_init(&r);
    expect_error(&r, "item\ntea\n", PM_EDATA, 1, "the first line has 1 field;", NULL);
}

static void test_input_read_long_categories(void **state) {
    (void)state;
    rd r;
    rd_init(&r);
    r.o.category_col = "cat";
    /* a category given on some rows only applies to every row of the item */
    assert_int_equal(rd_run(&r, "o,item,cat\n1,tea,\n2,tea,drink\n3,scone,bake\n4,tea,drink\n"),
                     PM_OK);
    expect_row(r.t, 0, "1", "tea", "drink");
    expect_row(r.t, 2, "3", "scone", "bake");
    rd_done(&r);
    /* two categories: the error names both lines */
    rd_init(&r);
    r.o.category_col = "cat";
    expect_error(&r, "o,item,cat\n1,tea,drink\n2,jam,spread\n3,tea,food\n", PM_EDATA, 4,
                 "item 'tea' has category 'food' here but 'drink' on line 2", NULL);
    /* the line named is the one that set the first category, not the item's first row */
    rd_init(&r);
    r.o.category_col = "cat";
    expect_error(&r, "o,item,cat\n1,tea,\n2,tea,drink\n3,tea,food\n", PM_EDATA, 4,
                 "'drink' on line 3", NULL);
    /* --category-col with --format lines is a usage error */
    rd_init(&r);
    r.o.format = PM_FORMAT_LINES;
    r.o.category_col = "2";
    expect_error(&r, "a,b\n", PM_EUSAGE, 0, "--category-col", NULL);
}

/* ---- weights --------------------------------------------------------------------------------- */

static void test_input_read_weight_valid(void **state) {
    (void)state;
    rd r;
    rd_init(&r);
    r.o.weight_col = "w";
    assert_int_equal(rd_run(&r, "id,item,w\nr1,tea,1.5\nr1,jam, 1.5 \nr2,tea,2e-1\nr3,,3\n"),
                     PM_OK);
    assert_true(pm_table_weighted(r.t));
    pm_incidence_t *inc = NULL;
    pm_diag_t d;
    assert_int_equal(pm_incidence_build(r.t, &inc, &d), PM_OK);
    assert_non_null(inc->weight);
    assert_true(pm_incidence_wunits(inc, inc->weight[0]) == 1.5);
    assert_true(pm_incidence_wunits(inc, inc->weight[1]) == 0.2);
    assert_true(pm_incidence_wunits(inc, inc->weight[2]) ==
                3.0); /* the respondent who chose nothing keeps a weight */
    pm_incidence_free(inc);
    rd_done(&r);
}

static void test_input_read_weight_invalid(void **state) {
    (void)state;
    static const char *const bad[] = {"abc",  "0",     "-1", "nan", "NaN", "inf",
                                      "-inf", "1e400", "2x", "0x",  "",    "-0"};
    char text[128];
    for (size_t i = 0; i < sizeof bad / sizeof bad[0]; i++) {
        rd r;
        rd_init(&r);
        r.o.weight_col = "w";
        snprintf(text, sizeof text, "id,item,w\nr1,tea,1\nr2,tea,%s\n", bad[i]);
        pm_err_t rc = rd_run(&r, text);
        if (rc != PM_EDATA) {
            fail_msg("weight '%s' accepted", bad[i]);
        }
        assert_int_equal(r.d.line, 3);
        assert_non_null(strstr(r.d.msg, "weight"));
        char quoted[16];
        snprintf(quoted, sizeof quoted, "'%s'", bad[i]);
        assert_non_null(strstr(r.d.msg, quoted)); /* the bad value is shown */
        rd_done(&r);
    }
}

static void test_input_read_weight_differs(void **state) {
    (void)state;
    rd r;
    rd_init(&r);
    r.o.weight_col = "3";
    /* the respondent's rows need not be adjacent; the message names a line where the
     * respondent has the other weight (the first row of the current run of its rows) */
    expect_error(&r, "id,item,w\nr1,tea,2\nr2,tea,1\nr1,jam,2.0\nr1,cake,3\n", PM_EDATA, 5,
                 "weight '3' differs from the weight 2 ", "on line 4");
    /* runs of one respondent far apart: checked when the runs are merged */
    rd_init(&r);
    r.o.weight_col = "3";
    expect_error(&r, "id,item,w\nr1,tea,2\nr2,tea,1\nr1,jam,3\n", PM_EDATA, 4,
                 "weight 3 differs from the weight 2 ", "on line 2");
    /* numerically equal spellings are the same weight */
    rd_init(&r);
    r.o.weight_col = "3";
    assert_int_equal(rd_run(&r, "id,item,w\nr1,tea,2\nr1,jam,2.0\nr1,cake,2e0\n"), PM_OK);
    rd_done(&r);
    /* --respondents cannot be combined with weights */
    rd_init(&r);
    r.o.weight_col = "3";
    r.o.respondents = 10;
    expect_error(&r, "id,item,w\nr1,tea,2\n", PM_EUSAGE, 0, "--respondents", NULL);
}

static void test_input_read_lines_weight(void **state) {
    (void)state;
    rd r;
    rd_init(&r);
    r.o.format = PM_FORMAT_LINES;
    r.o.no_header = true;
    r.o.id_col = "1";
    r.o.weight_col = "2";
    assert_int_equal(rd_run(&r, "r1,2,tea,scone\nr2,0.5,jam\n"), PM_OK);
    assert_int_equal(pm_table_nrows(r.t), 3); /* the weight is not an item */
    expect_row(r.t, 2, "r2", "jam", NULL);
    rd_done(&r);
    rd_init(&r);
    r.o.format = PM_FORMAT_LINES;
    r.o.no_header = true;
    r.o.weight_col = "3";
    expect_error(&r, "a,b,1\nc,d\n", PM_EDATA, 2, "fewer than --weight-col 3", NULL);
}

/* ---- duplicates, empty items, the base -------------------------------------------------- */

static void test_input_read_duplicates(void **state) {
    (void)state;
    rd r;
    rd_init(&r);
    /* duplicate rows are kept by the reader (rows counts them) and merged by the incidence */
    assert_int_equal(rd_run(&r, "o,item\n1,tea\n1,tea\n1, tea\n2,tea\n1,jam\n"), PM_OK);
    assert_int_equal(pm_table_stats(r.t)->rows, 5);
    assert_int_equal(pm_table_nrows(r.t), 5);
    assert_int_equal(pm_table_stats(r.t)->respondents, 2);
    pm_incidence_t *inc = NULL;
    pm_diag_t d;
    assert_int_equal(pm_incidence_build(r.t, &inc, &d), PM_OK);
    assert_int_equal(inc->duplicates, 2);
    long tea = pm_incidence_find(inc, "tea");
    assert_true(tea >= 0);
    assert_int_equal(inc->count[tea], 2);
    pm_incidence_free(inc);
    rd_done(&r);
}

static void test_input_read_empty_items(void **state) {
    (void)state;
    rd r;
    rd_init(&r);
    assert_int_equal(rd_run(&r, "o,item\n1,\n2,tea\n3,   \n2,\n4,\"\"\n"), PM_OK);
    const pm_input_stats_t *s = pm_table_stats(r.t);
    assert_int_equal(s->empty_items, 4);
    assert_int_equal(s->respondents, 4);
    assert_int_equal(s->rows, 1);
    assert_true(pm_table_respondent_empty(r.t, 0));
    assert_false(pm_table_respondent_empty(r.t, 1)); /* an empty row does not undo an item */
    pm_incidence_t *inc = NULL;
    pm_diag_t d;
    assert_int_equal(pm_incidence_build(r.t, &inc, &d), PM_OK);
    assert_int_equal(inc->N, 4); /* respondents who chose nothing count in N */
    assert_int_equal(inc->no_item, 3);
    pm_incidence_free(inc);
    rd_done(&r);
}

static void test_input_read_respondents(void **state) {
    (void)state;
    const char *text = "o,item\n1,tea\n2,jam\n3,tea\n";
    rd r;
    rd_init(&r);
    r.o.respondents = 2;
    expect_error(&r, text, PM_EDATA, 0, "--respondents 2 is below the 3 respondents", NULL);
    for (uint64_t n = 3; n <= 10; n += 7) {
        rd_init(&r);
        r.o.respondents = n;
        assert_int_equal(rd_run(&r, text), PM_OK);
        pm_incidence_t *inc = NULL;
        pm_diag_t d;
        assert_int_equal(pm_incidence_build(r.t, &inc, &d), PM_OK);
        assert_int_equal(inc->N, n);
        assert_int_equal(inc->n_resp, 3);
        assert_int_equal(inc->no_item, n - 3);
        pm_incidence_free(inc);
        rd_done(&r);
    }
}

/* ---- hygiene ------------------------------------------------------------------------------ */

static void test_input_read_drop_merge(void **state) {
    (void)state;
    char *merge = unit_tmpfile_str("item,group\nlatte,coffee\n espresso ,coffee\nchai,tea\n");
    const char *text = "o,item\n1,latte\n1,espresso\n2,chai\n2,tea\n3,scone\n3,water\n";
    rd r;
    /* drop only */
    static const char *const drop[] = {"water", " scone "};
    rd_init(&r);
    r.o.drop_items = drop;
    r.o.n_drop_items = 2;
    assert_int_equal(rd_run(&r, text), PM_OK);
    assert_int_equal(pm_table_stats(r.t)->dropped_rows, 2);
    assert_int_equal(pm_table_nrows(r.t), 4);
    assert_int_equal(pm_table_nrespondents(r.t), 3);
    assert_true(pm_table_respondent_empty(r.t, 2)); /* all their items dropped: still in N */
    rd_done(&r);
    /* merge only */
    rd_init(&r);
    r.o.merge_file = merge;
    assert_int_equal(rd_run(&r, text), PM_OK);
    const pm_input_stats_t *s = pm_table_stats(r.t);
    assert_int_equal(s->merge_entries, 3);
    assert_int_equal(s->merged_rows, 3);
    expect_row(r.t, 0, "1", "coffee", NULL);
    expect_row(r.t, 1, "1", "coffee", NULL);
    expect_row(r.t, 2, "2", "tea", NULL);
    expect_row(r.t, 3, "2", "tea", NULL);
    pm_incidence_t *inc = NULL;
    pm_diag_t d;
    assert_int_equal(pm_incidence_build(r.t, &inc, &d), PM_OK);
    /* latte+espresso and chai+tea: made one by the merge, not duplicates of the input */
    assert_int_equal(inc->duplicates, 0);
    assert_int_equal(inc->merge_collapsed, 2);
    assert_int_equal(inc->merge_groups, 2); /* coffee, tea */
    assert_int_equal(inc->n_items, 4);      /* coffee, scone, tea, water */
    assert_int_equal(pm_incidence_find(inc, "latte"), -1);
    pm_incidence_free(inc);
    rd_done(&r);
    /* a row the input repeats is a duplicate, merged or not (latte twice; tea twice) */
    rd_init(&r);
    r.o.merge_file = merge;
    assert_int_equal(rd_run(&r, "o,item\n1,latte\n1,espresso\n1,latte\n2,tea\n2,tea\n"), PM_OK);
    assert_int_equal(pm_incidence_build(r.t, &inc, &d), PM_OK);
    assert_int_equal(inc->duplicates, 2);
    assert_int_equal(inc->merge_collapsed, 1);
    pm_incidence_free(inc);
    rd_done(&r);
    /* dropping a group name drops what was merged into it */
    static const char *const drop2[] = {"coffee"};
    rd_init(&r);
    r.o.merge_file = merge;
    r.o.drop_items = drop2;
    r.o.n_drop_items = 1;
    assert_int_equal(rd_run(&r, text), PM_OK);
    assert_int_equal(pm_table_stats(r.t)->dropped_rows, 2);
    assert_int_equal(pm_table_nrows(r.t), 4);
    rd_done(&r);
    unit_rmfile(merge);
}

static void test_input_read_merge_file_errors(void **state) {
    (void)state;
    const char *text = "o,item\n1,latte\n";
    static const struct {
        const char *merge;
        long line;
        const char *part;
    } cases[] = {
        {"item,group\nlatte,coffee\nmocha,coffee\nlatte,milk\n", 4,
         "item 'latte' is listed twice (first on line 2)"},
        {"latte,coffee,extra\n", 1, "expected 2 fields"},
        {"item,group\nlatte,\n", 2, "empty item or group name"},
        {"item,group\ncaf\xE9,coffee\n", 2, "invalid UTF-8"},
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        char *merge = unit_tmpfile_str(cases[i].merge);
        rd r;
        rd_init(&r);
        r.o.merge_file = merge;
        expect_error(&r, text, PM_EDATA, cases[i].line, cases[i].part, NULL);
        unit_rmfile(merge);
    }
    rd r;
    rd_init(&r);
    r.o.merge_file = "/nonexistent/merge.csv";
    expect_error(&r, text, PM_EIO, 0, "cannot open the merge file", NULL);
}

/* ---- the lines format ------------------------------------------------------------------- */

static void test_input_read_lines(void **state) {
    (void)state;
    rd r;
    rd_init(&r);
    r.o.format = PM_FORMAT_LINES;
    r.o.no_header = true;
    assert_int_equal(rd_run(&r, "tea,scone\njam\n\ncoffee, tea ,,tea\n,\n"), PM_OK);
    const pm_input_stats_t *s = pm_table_stats(r.t);
    assert_int_equal(s->respondents, 4); /* blank line skipped; "," is a respondent */
    assert_int_equal(s->rows, 6);
    assert_int_equal(s->empty_items, 1);
    expect_row(r.t, 0, NULL, "tea", NULL); /* no ids in this format without --id-col */
    expect_row(r.t, 2, NULL, "jam", NULL);
    expect_row(r.t, 4, NULL, "tea", NULL);
    assert_null(pm_table_respondent(r.t, 0));
    assert_true(pm_table_respondent_empty(r.t, 3));
    rd_done(&r);
    /* with an id field and a header line; the same id on two lines is one respondent */
    rd_init(&r);
    r.o.format = PM_FORMAT_LINES;
    r.o.id_col = "1";
    r.o.sep = ';';
    assert_int_equal(rd_run(&r, "guest;choices\nr1;tea;scone\nr2\nr1;jam\n"), PM_OK);
    s = pm_table_stats(r.t);
    assert_int_equal(s->respondents, 2);
    assert_int_equal(s->records, 3);
    assert_int_equal(pm_table_nrows(r.t), 3);
    expect_row(r.t, 2, "r1", "jam", NULL);
    assert_true(pm_table_respondent_empty(r.t, 1));
    rd_done(&r);
    rd_init(&r);
    r.o.format = PM_FORMAT_LINES;
    r.o.no_header = true;
    r.o.id_col = "1";
    expect_error(&r, "r1,tea\n ,jam\n", PM_EDATA, 2, "empty respondent id", NULL);
}

/* ---- other errors -------------------------------------------------------------------------- */

static void test_input_read_errors(void **state) {
    (void)state;
    rd r;
    rd_init(&r);
    expect_error(&r, "o,item\n1,tea\n2,tea,extra\n", PM_EDATA, 3,
                 "found more than 2 fields, expected 2 as on the header", NULL);
    rd_init(&r);
    expect_error(&r, "o,item\n1,tea\n ,jam\n", PM_EDATA, 3, "empty respondent id in column 1",
                 NULL);
    rd_init(&r);
    expect_error(&r, "o,item\n1,tea\n2,caf\xE9\n", PM_EDATA, 3, "invalid UTF-8 in item name", NULL);
    rd_init(&r);
    expect_error(&r, "", PM_EDATA, 0, "the file is empty", NULL);
    rd_init(&r);
    expect_error(&r, "o,item\n\n", PM_EDATA, 0, "no data rows after the header", NULL);
    /* errors of the CSV layer reach the caller with the file and line */
    rd_init(&r);
    expect_error(&r, "o,item\n1,te\"a\n", PM_EDATA, 2, "malformed quoting", NULL);
    assert_string_equal(r.d.file, "in.csv");
    /* files that cannot be read */
    pm_input_opts_t o;
    pm_input_opts_init(&o);
    pm_table_t *t = (pm_table_t *)&o; /* must be reset to NULL */
    pm_diag_t d;
    assert_int_equal(pm_input_read("/nonexistent/in.csv", &o, &t, &d), PM_EIO);
    assert_null(t);
    assert_string_equal(d.file, "/nonexistent/in.csv");
    assert_non_null(strstr(d.msg, "cannot open"));
    assert_int_equal(pm_input_read("/tmp", &o, &t, &d), PM_EIO);
    assert_null(t);
}

/* Every allocation of a read fails in turn: PM_ENOMEM each time, nothing leaks (valgrind and
 * ASan runs of this test check that), and the run after the last allocation succeeds. */
static void test_input_read_alloc_failure(void **state) {
    (void)state;
    char *merge = unit_tmpfile_str("item,group\nlatte,coffee\n");
    char *path = unit_tmpfile_str("o,item,cat\n1,latte,drink\n1,scone,bake\n2,tea,drink\n3,,\n");
    static const char *const drop[] = {"tea"};
    pm_input_opts_t o;
    pm_input_opts_init(&o);
    o.category_col = "cat";
    o.merge_file = merge;
    o.drop_items = drop;
    o.n_drop_items = 1;
    int failures = 0, done = 0;
    for (long n = 1; n < 1000 && !done; n++) {
        pm_table_t *t = NULL;
        pm_diag_t d;
        pm_diag_clear(&d);
        pm_i_alloc_fail_after(n);
        pm_err_t rc = pm_input_read(path, &o, &t, &d);
        pm_i_alloc_fail_after(0);
        if (rc == PM_OK) {
            assert_int_equal(pm_table_nrows(t), 2);
            done = 1;
        } else {
            if (rc != PM_ENOMEM) {
                fail_msg("allocation %ld failed: code %d (%s), expected PM_ENOMEM", n, rc, d.msg);
            }
            assert_null(t);
            failures++;
        }
        pm_table_free(t);
    }
    assert_true(done);
    assert_true(failures >= 10);
    unit_rmfile(path);
    unit_rmfile(merge);
}

/* A two-column file of some megabytes (so that reads cross the 1 MiB block edge many times)
 * with every kind of line the fast reader of plain lines (pm_i_read_lines) must leave to the
 * record path mixed among ordinary ones: CRLF ends, spaces and tabs around fields, blank
 * lines, quoted fields (with the delimiter inside), empty items, ids of 8, 16 and 17 bytes,
 * respondents coming back after others, items first seen late, and no final newline. rd_run
 * reads it with and without the fast path and in parallel chunks: the same table each time.
 * Then single defects far into the file: the same error, on the same line, every way. */
static char *messy_text(uint64_t seed, size_t lines, const char *defect, size_t defect_at,
                        long *defect_line, int swap) {
    unit_rng g = {seed};
    size_t cap = lines * 64 + 256, n = 0;
    char *s = malloc(cap);
    assert_non_null(s);
    n += (size_t)snprintf(s + n, cap - n, swap ? "item,respondent\n" : "respondent,item\n");
    unsigned resp = 0;
    for (size_t i = 0; i < lines; i++) {
        if (i == defect_at && defect) {
            long nl = 1;
            for (size_t k = 0; k < n; k++) {
                nl += s[k] == '\n';
            }
            *defect_line = nl;
            n += (size_t)snprintf(s + n, cap - n, "%s", defect);
            continue;
        }
        if (unit_below(&g, 6) == 0) {
            resp++;
        }
        unsigned r = unit_below(&g, 200) == 0 ? (unsigned)unit_below(&g, resp + 1) : resp;
        unsigned it = (unsigned)(unit_below(&g, 40) * unit_below(&g, 40));
        if (i > lines / 2 && unit_below(&g, 50) == 0) {
            it += 5000; /* items first seen late in the file */
        }
        char id[64], item[64];
        unsigned w = (unsigned)unit_below(&g, 20);
        if (w == 0) {
            snprintf(id, sizeof id, "r%07u", r); /* 8 bytes */
        } else if (w == 1) {
            snprintf(id, sizeof id, "respondent-%05u", r); /* 16 bytes */
        } else if (w == 2) {
            snprintf(id, sizeof id, "respondent-%06u", r); /* 17 bytes */
        } else {
            snprintf(id, sizeof id, "c%u", r);
        }
        snprintf(item, sizeof item, "dish %u", it);
        if (swap) { /* the item column first (named in the header): the fields trade places */
            char tmp[64];
            memcpy(tmp, id, sizeof tmp);
            memcpy(id, item, sizeof tmp);
            memcpy(item, tmp, sizeof tmp);
        }
        unsigned kind = (unsigned)unit_below(&g, 400);
        const char *end = "\n";
        switch (kind) {
        case 0:
            n += (size_t)snprintf(s + n, cap - n, " %s,%s", id, item);
            break;
        case 1:
            n += (size_t)snprintf(s + n, cap - n, "%s ,%s", id, item);
            break;
        case 2:
            n += (size_t)snprintf(s + n, cap - n, "%s,\t%s", id, item);
            break;
        case 3:
            n += (size_t)snprintf(s + n, cap - n, "%s,%s  ", id, item);
            break;
        case 4:
            n += (size_t)snprintf(s + n, cap - n, "%s,\"%s, large\"", id, item);
            break;
        case 5:
            n += (size_t)snprintf(s + n, cap - n, "\n%s,%s", id, item);
            break; /* blank */
        case 6:    /* an empty item */
            n += (size_t)(swap ? snprintf(s + n, cap - n, ",%s", item)
                               : snprintf(s + n, cap - n, "%s,", id));
            break;
        case 7:
            n += (size_t)snprintf(s + n, cap - n, "%s,%s\tx", id, item);
            break;
        default:
            n += (size_t)snprintf(s + n, cap - n, "%s,%s", id, item);
            break;
        }
        if (kind >= 8 && kind < 40) {
            end = "\r\n";
        }
        if (i + 1 < lines) {
            n += (size_t)snprintf(s + n, cap - n, "%s", end);
        }
        assert_true(n + 128 < cap);
    }
    return s;
}

static void test_input_read_plain_lines_fast(void **state) {
    (void)state;
    rd r;
    for (int swap = 0; swap <= 1; swap++) {
        rd_init(&r);
        if (swap) {
            r.o.id_col = "respondent";
            r.o.item_col = "item";
        }
        char *text = messy_text(41, 220000, NULL, 0, NULL, swap);
        assert_true(strlen(text) > 3000000);
        assert_int_equal(rd_run(&r, text), PM_OK);
        const pm_input_stats_t *st = pm_table_stats(r.t);
        assert_true(st->empty_items > 100);
        print_message("swap %d: %zu items, %zu respondents\n", swap, pm_table_nitems(r.t),
                      pm_table_nrespondents(r.t));
        assert_true(pm_table_nitems(r.t) > 500);
        rd_done(&r);
        free(text);
    }
    char *text;
    /* defects after a million bytes of plain lines: the record path's error, same line */
    static const struct {
        const char *line;
        const char *msg;
    } bad[] = {
        {"r1,dish 1,extra\n", "found more than 2 fields"},
        {",dish 1\n", "empty respondent id"},
        {"r1\rdish 1\n", NULL},
        {"r1,dish \xff\n", "invalid UTF-8"},
    };
    for (size_t k = 0; k < sizeof bad / sizeof bad[0]; k++) {
        rd_init(&r);
        long at = 0;
        text = messy_text(43 + k, 200000, bad[k].line, 150000, &at, 0);
        pm_err_t rc = rd_run(&r, text);
        assert_int_equal(rc, PM_EDATA);
        if (bad[k].msg) {
            assert_int_equal(r.d.line, at);
            if (!strstr(r.d.msg, bad[k].msg)) {
                fail_msg("message '%s' lacks '%s'", r.d.msg, bad[k].msg);
            }
        }
        rd_done(&r);
        free(text);
    }
}

static const struct CMUnitTest tests[] = {
    cmocka_unit_test(test_input_read_long_basic),
    cmocka_unit_test(test_input_read_long_bom_crlf_semicolon),
    cmocka_unit_test(test_input_read_long_columns),
    cmocka_unit_test(test_input_read_long_unknown_column),
    cmocka_unit_test(test_input_read_long_categories),
    cmocka_unit_test(test_input_read_weight_valid),
    cmocka_unit_test(test_input_read_weight_invalid),
    cmocka_unit_test(test_input_read_weight_differs),
    cmocka_unit_test(test_input_read_lines_weight),
    cmocka_unit_test(test_input_read_duplicates),
    cmocka_unit_test(test_input_read_empty_items),
    cmocka_unit_test(test_input_read_respondents),
    cmocka_unit_test(test_input_read_drop_merge),
    cmocka_unit_test(test_input_read_merge_file_errors),
    cmocka_unit_test(test_input_read_lines),
    cmocka_unit_test(test_input_read_errors),
    cmocka_unit_test(test_input_read_alloc_failure),
    cmocka_unit_test(test_input_read_plain_lines_fast),
    cmocka_unit_test(test_input_hash_resumed),
};

UNIT_MAIN("input", tests)
