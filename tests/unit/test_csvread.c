/* Unit tests of src/csvread.c: pm_i_csv_stream on in-memory input (fmemopen): BOM, CRLF,
 * quoted fields with embedded newlines and their line numbers, blank lines, delimiter
 * detection, and every data error with the line it names; pm_i_utf8_valid. */
#include "unit.h"

#include "csvread.h"
#include "pairmap/input.h"

/* ---- collecting records ------------------------------------------------------------------ */
#define MAXREC 64
#define MAXF 8

typedef struct {
    size_t n;
    uint64_t line[MAXREC];
    size_t nf[MAXREC];
    char *f[MAXREC][MAXF];
    size_t len[MAXREC][MAXF];
    size_t total;   /* records seen (also beyond MAXREC) */
    size_t stop_at; /* 1-based record at which the callback fails (0: never) */
} sink;

static pm_err_t collect(void *ud, const pm_i_record *r, pm_diag_t *diag) {
    sink *s = ud;
    s->total++;
    if (s->stop_at && s->total == s->stop_at) {
        return pm_diag_set(diag, PM_EDATA, "cb", (long)r->line, "stopped by the callback");
    }
    if (s->n < MAXREC) {
        size_t i = s->n++;
        s->line[i] = r->line;
        s->nf[i] = r->n;
        for (size_t k = 0; k < r->n && k < MAXF; k++) {
            assert_int_equal(r->f[k][r->len[k]], '\0'); /* NUL-terminated */
            s->f[i][k] = malloc(r->len[k] + 1);
            assert_non_null(s->f[i][k]);
            memcpy(s->f[i][k], r->f[k], r->len[k] + 1);
            s->len[i][k] = r->len[k];
        }
    }
    return PM_OK;
}

static void sink_free(sink *s) {
    for (size_t i = 0; i < s->n; i++) {
        for (size_t k = 0; k < s->nf[i] && k < MAXF; k++) {
            free(s->f[i][k]);
        }
    }
    memset(s, 0, sizeof *s);
}

/* Streams len bytes of data through pm_i_csv_stream with delimiter sep (0: detect). */
static pm_err_t run(const char *data, size_t len, char sep, sink *s, pm_i_csv_opts *o,
                    pm_diag_t *d) {
    memset(o, 0, sizeof *o);
    o->sep = sep;
    o->display = "mem.csv";
    pm_diag_clear(d);
    FILE *fp = fmemopen((void *)data, len, "rb");
    assert_non_null(fp);
    pm_err_t rc = pm_i_csv_stream(fp, o, collect, s, d);
    fclose(fp);
    return rc;
}

static pm_err_t run_str(const char *data, char sep, sink *s, pm_i_csv_opts *o, pm_diag_t *d) {
    return run(data, strlen(data), sep, s, o, d);
}

static void expect_rec(const sink *s, size_t i, uint64_t line, size_t nf, const char *f0,
                       const char *f1) {
    assert_true(i < s->n);
    assert_int_equal(s->line[i], line);
    assert_int_equal(s->nf[i], nf);
    if (f0) {
        assert_string_equal(s->f[i][0], f0);
    }
    if (f1) {
        assert_string_equal(s->f[i][1], f1);
    }
}

/* ---- records and line numbers ------------------------------------------------------------ */

static void test_csvread_stream_basic(void **state) {
    (void)state;
    sink s = {0};
    pm_i_csv_opts o;
    pm_diag_t d;
    assert_int_equal(run_str("order,item\n1,tea\n2,scone\n", 0, &s, &o, &d), PM_OK);
    assert_int_equal(s.n, 3);
    expect_rec(&s, 0, 1, 2, "order", "item");
    expect_rec(&s, 1, 2, 2, "1", "tea");
    expect_rec(&s, 2, 3, 2, "2", "scone");
    assert_int_equal(o.lines, 3);
    assert_int_equal(o.bytes, 25);
    assert_int_equal(o.sep_used, ',');
    sink_free(&s);
    /* no final newline: the last record still arrives */
    assert_int_equal(run_str("a,b\n1,tea", 0, &s, &o, &d), PM_OK);
    assert_int_equal(s.n, 2);
    expect_rec(&s, 1, 2, 2, "1", "tea");
    assert_int_equal(o.lines, 2);
    sink_free(&s);
    /* empty input: no record, no error (the readers report empty files) */
    assert_int_equal(run_str("", 0, &s, &o, &d), PM_OK);
    assert_int_equal(s.n, 0);
    assert_int_equal(o.lines, 0);
    assert_int_equal(o.bytes, 0);
}

static void test_csvread_stream_bom(void **state) {
    (void)state;
    sink s = {0};
    pm_i_csv_opts o;
    pm_diag_t d;
    /* libcsv keeps a UTF-8 BOM in the first field (API-NOTES.md, libcsv): it must be gone */
    assert_int_equal(run_str("\xEF\xBB\xBForder,item\n1,tea\n", 0, &s, &o, &d), PM_OK);
    expect_rec(&s, 0, 1, 2, "order", "item");
    expect_rec(&s, 1, 2, 2, "1", "tea");
    assert_int_equal(o.bytes, 20); /* the BOM counts as bytes read */
    sink_free(&s);
    /* BOM then a quoted first field: CSV_EPARSE at byte 3 in libcsv if not skipped */
    assert_int_equal(run_str("\xEF\xBB\xBF\"order\";item\n1;tea\n", 0, &s, &o, &d), PM_OK);
    assert_int_equal(o.sep_used, ';');
    expect_rec(&s, 0, 1, 2, "order", "item");
    sink_free(&s);
    /* a BOM byte sequence later in the file is data, not skipped */
    assert_int_equal(run_str("a,b\n\xEF\xBB\xBFx,y\n", 0, &s, &o, &d), PM_OK);
    expect_rec(&s, 1, 2, 2, "\xEF\xBB\xBFx", "y");
    sink_free(&s);
}

static void test_csvread_stream_crlf(void **state) {
    (void)state;
    sink s = {0};
    pm_i_csv_opts o;
    pm_diag_t d;
    assert_int_equal(
        run_str("order,item\r\n1,tea\r\n\r\n2,\"hot\r\nchocolate\"\r\n3,x", 0, &s, &o, &d), PM_OK);
    assert_int_equal(s.n, 4);
    expect_rec(&s, 0, 1, 2, "order", "item"); /* no stray \r in the last field */
    expect_rec(&s, 1, 2, 2, "1", "tea");
    expect_rec(&s, 2, 4, 2, "2", "hot\r\nchocolate"); /* quoted CRLF kept verbatim */
    expect_rec(&s, 3, 6, 2, "3", "x");
    assert_int_equal(o.lines, 6);
    sink_free(&s);
}

static void test_csvread_stream_quoted_newlines(void **state) {
    (void)state;
    sink s = {0};
    pm_i_csv_opts o;
    pm_diag_t d;
    const char *in = "id,item\n"
                     "1,\"apple\n"
                     "pie\"\n"
                     "2,\"say \"\"cheese\"\"\"\n"
                     "\"3\",\"a,b\"\n"
                     "4,\"\n"
                     "\n"
                     "two blank lines inside\"\n"
                     "5,last\n";
    assert_int_equal(run_str(in, 0, &s, &o, &d), PM_OK);
    assert_int_equal(s.n, 6);
    expect_rec(&s, 1, 2, 2, "1", "apple\npie");     /* the record starts on line 2 */
    expect_rec(&s, 2, 4, 2, "2", "say \"cheese\""); /* "" is a quote */
    expect_rec(&s, 3, 5, 2, "3", "a,b");
    expect_rec(&s, 4, 6, 2, "4", "\n\ntwo blank lines inside");
    expect_rec(&s, 5, 9, 2, "5", "last"); /* physical line, newlines in quotes counted */
    assert_int_equal(o.lines, 9);
    sink_free(&s);
}

static void test_csvread_stream_blank_lines(void **state) {
    (void)state;
    sink s = {0};
    pm_i_csv_opts o;
    pm_diag_t d;
    assert_int_equal(run_str("\n\na,b\n\n   \n\t\n1,x\n\n", 0, &s, &o, &d), PM_OK);
    assert_int_equal(s.n, 2); /* empty and white-space-only lines give no record */
    expect_rec(&s, 0, 3, 2, "a", "b");
    expect_rec(&s, 1, 7, 2, "1", "x");
    assert_int_equal(o.lines, 8);
    sink_free(&s);
    /* empty fields are kept: a line of delimiters is a record of empty fields */
    assert_int_equal(run_str("a,b,c\n,,\n1,,3\n", 0, &s, &o, &d), PM_OK);
    assert_int_equal(s.n, 3);
    expect_rec(&s, 1, 2, 3, "", "");
    expect_rec(&s, 2, 3, 3, "1", "");
    assert_int_equal(s.len[2][1], 0);
    sink_free(&s);
}

static void test_csvread_stream_trims_unquoted(void **state) {
    (void)state;
    sink s = {0};
    pm_i_csv_opts o;
    pm_diag_t d;
    /* libcsv trims spaces and tabs around unquoted fields, keeps them inside quotes
     * (API-NOTES.md, libcsv) */
    assert_int_equal(run_str("a,b\n  1 , tea  \n2,\" x \"\n", 0, &s, &o, &d), PM_OK);
    expect_rec(&s, 1, 2, 2, "1", "tea");
    expect_rec(&s, 2, 3, 2, "2", " x ");
    sink_free(&s);
}

/* ---- delimiters ------------------------------------------------------------------------------ */

static void test_csvread_stream_detect_sep(void **state) {
    (void)state;
    static const struct {
        const char *in;
        char sep;
    } cases[] =
        {
            {"order,item\n1,tea\n", ','},    {"order\titem\n1\ttea\n", '\t'},
            {"order;item\n1;tea\n", ';'},    {"order|item\n1|tea\n", '|'},
            {"\"a,b,c\";x;y\n1;2;3\n", ';'}, /* delimiters inside quotes do not count */
            {"a;b,c;d\n1;2,3;4\n", ';'},     /* the most frequent wins */
            {"single\nrow\n", ','},          /* none: the default */
            {"a\tb\r\n1\t2\r\n", '\t'},
        };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        sink s = {0};
        pm_i_csv_opts o;
        pm_diag_t d;
        assert_int_equal(run_str(cases[i].in, 0, &s, &o, &d), PM_OK);
        assert_int_equal(o.sep_used, cases[i].sep);
        assert_int_equal(s.n, 2);
        sink_free(&s);
    }
    /* a given delimiter is used as is */
    sink s = {0};
    pm_i_csv_opts o;
    pm_diag_t d;
    assert_int_equal(run_str("a;b,c\n1;2,3\n", ',', &s, &o, &d), PM_OK);
    assert_int_equal(o.sep_used, ',');
    expect_rec(&s, 0, 1, 2, "a;b", "c");
    sink_free(&s);
}

/* ---- errors -------------------------------------------------------------------------------- */

static void test_csvread_stream_nul_byte(void **state) {
    (void)state;
    sink s = {0};
    pm_i_csv_opts o;
    pm_diag_t d;
    static const char in[] = "a,b\n1,tea\n2,sc\0one\n3,jam\n";
    assert_int_equal(run(in, sizeof in - 1, 0, &s, &o, &d), PM_EDATA);
    assert_int_equal(d.code, PM_EDATA);
    assert_int_equal(d.line, 3);
    assert_string_equal(d.file, "mem.csv");
    assert_non_null(strstr(d.msg, "NUL byte"));
    assert_int_equal(s.n, 2); /* the records before it were delivered, nothing after */
    sink_free(&s);
    /* NUL on the first line, and inside a quoted field spanning lines */
    static const char in2[] = "\0a,b\n";
    assert_int_equal(run(in2, sizeof in2 - 1, 0, &s, &o, &d), PM_EDATA);
    assert_int_equal(d.line, 1);
    sink_free(&s);
    static const char in3[] = "a,b\n1,\"x\ny\nz\0\"\n";
    assert_int_equal(run(in3, sizeof in3 - 1, 0, &s, &o, &d), PM_EDATA);
    assert_int_equal(d.line, 4);
    sink_free(&s);
}

static void test_csvread_stream_unterminated_quote(void **state) {
    (void)state;
    sink s = {0};
    pm_i_csv_opts o;
    pm_diag_t d;
    /* the record whose quote never closes starts on line 3 */
    assert_int_equal(run_str("a,b\n1,tea\n2,\"open\nmore\nlines\n", 0, &s, &o, &d), PM_EDATA);
    assert_int_equal(d.line, 3);
    assert_non_null(strstr(d.msg, "unterminated quoted field"));
    assert_int_equal(s.n, 2);
    sink_free(&s);
    /* the same when the quoted field is the first of its record */
    assert_int_equal(run_str("a,b\n1,tea\n\"open,x\nmore\nlines\n", 0, &s, &o, &d), PM_EDATA);
    assert_int_equal(d.line, 3);
    sink_free(&s);
    /* and after blank lines and a multi-line record */
    assert_int_equal(run_str("a,b\n1,\"x\ny\"\n\n\n\"open\n", 0, &s, &o, &d), PM_EDATA);
    assert_int_equal(d.line, 6);
    assert_int_equal(s.n, 2);
    sink_free(&s);
}

static void test_csvread_stream_malformed_quote(void **state) {
    (void)state;
    static const struct {
        const char *in;
        long line;
    } cases[] = {
        {"a,b\n1,te\"a\n", 2},                    /* a quote inside an unquoted field */
        {"a,b\n1,\"tea\"x\n", 2},                 /* text after a closing quote */
        {"a,b\n1,x\n2,\"multi\nline\"junk\n", 4}, /* the line of the bad byte */
        {"a,\"b\"c\n", 1},
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        sink s = {0};
        pm_i_csv_opts o;
        pm_diag_t d;
        assert_int_equal(run_str(cases[i].in, 0, &s, &o, &d), PM_EDATA);
        assert_int_equal(d.line, cases[i].line);
        assert_non_null(strstr(d.msg, "malformed quoting"));
        sink_free(&s);
    }
}

static void test_csvread_stream_field_too_long(void **state) {
    (void)state;
    /* a field of exactly PM_INPUT_MAX_FIELD bytes is accepted, one more byte is an error */
    size_t n = PM_INPUT_MAX_FIELD;
    for (int over = 0; over <= 1; over++) {
        size_t flen = n + (size_t)over;
        size_t len = 4 + 2 + flen + 1 + 6;
        char *in = malloc(len + 1);
        assert_non_null(in);
        memcpy(in, "a,b\n", 4);
        memcpy(in + 4, "1,", 2);
        memset(in + 6, 'x', flen);
        memcpy(in + 6 + flen, "\n2,tea\n", 7);
        sink s = {0};
        pm_i_csv_opts o;
        pm_diag_t d;
        pm_err_t rc = run(in, len, 0, &s, &o, &d);
        if (!over) {
            assert_int_equal(rc, PM_OK);
            assert_int_equal(s.n, 3);
            assert_int_equal(s.len[1][1], n);
        } else {
            assert_int_equal(rc, PM_EDATA);
            assert_int_equal(d.line, 2);
            assert_non_null(strstr(d.msg, "field 2 is 65537 bytes long"));
            assert_int_equal(s.n, 1);
        }
        sink_free(&s);
        free(in);
    }
    /* a quoted field spanning lines is measured whole and named by its first line */
    size_t flen = n + 10;
    char *in = malloc(flen + 16);
    assert_non_null(in);
    memcpy(in, "a,b\n\"", 5);
    memset(in + 5, 'y', flen);
    for (size_t k = 5 + 100; k < 5 + flen; k += 1000) {
        in[k] = '\n';
    }
    memcpy(in + 5 + flen, "\",z\n", 4);
    sink s = {0};
    pm_i_csv_opts o;
    pm_diag_t d;
    assert_int_equal(run(in, flen + 9, 0, &s, &o, &d), PM_EDATA);
    assert_int_equal(d.line, 2);
    assert_non_null(strstr(d.msg, "field 1 is"));
    sink_free(&s);
    free(in);
}

static void test_csvread_stream_callback_error(void **state) {
    (void)state;
    sink s = {0};
    s.stop_at = 3;
    pm_i_csv_opts o;
    pm_diag_t d;
    assert_int_equal(run_str("a,b\n1,x\n2,y\n3,z\n4,w\n", 0, &s, &o, &d), PM_EDATA);
    assert_string_equal(d.msg, "stopped by the callback");
    assert_int_equal(d.line, 3);
    assert_int_equal(s.total, 3); /* no record after the failing one */
    sink_free(&s);
}

/* Records and line numbers across the reader's 1 MiB blocks: the callback recomputes what each
 * record must be from its number. */
typedef struct {
    uint64_t n, expect_line;
} counter;

static pm_err_t check_big(void *ud, const pm_i_record *r, pm_diag_t *diag) {
    (void)diag;
    counter *c = ud;
    char want[64];
    snprintf(want, sizeof want, "r%llu", (unsigned long long)c->n);
    if (r->line != c->expect_line || r->n != 2 || strcmp(r->f[0], want) != 0) {
        fail_msg("record %llu: line %llu (expected %llu), first field '%s' (expected '%s')",
                 (unsigned long long)c->n, (unsigned long long)r->line,
                 (unsigned long long)c->expect_line, r->f[0], want);
    }
    if (c->n % 1000 == 999) {
        assert_string_equal(r->f[1], "two\nlines");
        c->expect_line += 2;
    } else {
        snprintf(want, sizeof want, "item%llu", (unsigned long long)(c->n % 7));
        assert_string_equal(r->f[1], want);
        c->expect_line += 1;
    }
    c->n++;
    return PM_OK;
}

static void test_csvread_stream_block_boundaries(void **state) {
    (void)state;
    /* 3 MB of "r<i>,item<i%7>" with a quoted two-line field every 1000 records, then a NUL */
    size_t cap = 4u << 20, len = 0;
    char *in = malloc(cap);
    assert_non_null(in);
    uint64_t line = 1, nrec = 0;
    while (len < (3u << 20)) {
        int w;
        if (nrec % 1000 == 999) {
            w = snprintf(in + len, cap - len, "r%llu,\"two\nlines\"\n", (unsigned long long)nrec);
            line += 2;
        } else {
            w = snprintf(in + len, cap - len, "r%llu,item%llu\n", (unsigned long long)nrec,
                         (unsigned long long)(nrec % 7));
            line += 1;
        }
        len += (size_t)w;
        nrec++;
    }
    for (int with_nul = 0; with_nul <= 1; with_nul++) {
        size_t n = len;
        if (with_nul) {
            memcpy(in + len, "x,\0\n", 4);
            n += 4;
        }
        counter c = {0, 1};
        pm_i_csv_opts o;
        memset(&o, 0, sizeof o);
        o.display = "big.csv";
        pm_diag_t d;
        pm_diag_clear(&d);
        FILE *fp = fmemopen(in, n, "rb");
        assert_non_null(fp);
        pm_err_t rc = pm_i_csv_stream(fp, &o, check_big, &c, &d);
        fclose(fp);
        assert_int_equal(c.n, nrec);
        if (with_nul) {
            assert_int_equal(rc, PM_EDATA);
            assert_int_equal(d.line, line); /* the line after the last record */
        } else {
            assert_int_equal(rc, PM_OK);
            assert_int_equal(o.lines, line - 1);
            assert_int_equal(o.bytes, len);
        }
    }
    free(in);
}

/* ---- UTF-8 ----------------------------------------------------------------------------------- */

/* Well-formed and ill-formed sequences after RFC 3629 section 4 (the UTF8-octets grammar) and
 * Unicode 15 Table 3-7; the cases follow Markus Kuhn's decoder stress test (from memory). */
static void test_csvread_utf8_valid_cases(void **state) {
    (void)state;
    static const struct {
        const char *s;
        int ok;
    } cases[] = {
        {"", 1},
        {"plain ascii", 1},
        {"caf\xC3\xA9", 1},      /* U+00E9 */
        {"\xE2\x82\xAC", 1},     /* U+20AC */
        {"\xEF\xBF\xBD", 1},     /* U+FFFD */
        {"\xF0\x9F\x98\x80", 1}, /* U+1F600 */
        {"\xF4\x8F\xBF\xBF", 1}, /* U+10FFFF, the last code point */
        {"\xED\x9F\xBF", 1},     /* U+D7FF, just below the surrogates */
        {"caf\xE9", 0},          /* Latin-1 e-acute */
        {"\x80", 0},             /* a lone continuation byte */
        {"\xC3", 0},             /* truncated at the end */
        {"\xE2\x82", 0},
        {"\xF0\x9F\x98", 0},
        {"\xC3\x28", 0}, /* bad continuation */
        {"\xC0\xAF", 0}, /* overlong '/' */
        {"\xC1\xBF", 0},
        {"\xE0\x80\xAF", 0}, /* overlong, 3 bytes */
        {"\xE0\x9F\xBF", 0},
        {"\xF0\x80\x80\xAF", 0}, /* overlong, 4 bytes */
        {"\xF0\x8F\xBF\xBF", 0},
        {"\xED\xA0\x80", 0},     /* U+D800, a surrogate */
        {"\xED\xBF\xBF", 0},     /* U+DFFF */
        {"\xF4\x90\x80\x80", 0}, /* above U+10FFFF */
        {"\xF5\x80\x80\x80", 0},
        {"\xFE", 0},
        {"\xFF", 0},
        {"ok\xC3\xA9ok\xC3", 0}, /* valid prefix, truncated end */
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        if (pm_i_utf8_valid(cases[i].s, strlen(cases[i].s)) != cases[i].ok) {
            fail_msg("case %zu: expected %s", i, cases[i].ok ? "valid" : "invalid");
        }
    }
    /* the length bounds the check: a valid prefix of an invalid string */
    assert_true(pm_i_utf8_valid("ab\xFF", 2));
    assert_false(pm_i_utf8_valid("\xC3\xA9", 1));
}

static const struct CMUnitTest tests[] = {
    cmocka_unit_test(test_csvread_stream_basic),
    cmocka_unit_test(test_csvread_stream_bom),
    cmocka_unit_test(test_csvread_stream_crlf),
    cmocka_unit_test(test_csvread_stream_quoted_newlines),
    cmocka_unit_test(test_csvread_stream_blank_lines),
    cmocka_unit_test(test_csvread_stream_trims_unquoted),
    cmocka_unit_test(test_csvread_stream_detect_sep),
    cmocka_unit_test(test_csvread_stream_nul_byte),
    cmocka_unit_test(test_csvread_stream_unterminated_quote),
    cmocka_unit_test(test_csvread_stream_malformed_quote),
    cmocka_unit_test(test_csvread_stream_field_too_long),
    cmocka_unit_test(test_csvread_stream_callback_error),
    cmocka_unit_test(test_csvread_stream_block_boundaries),
    cmocka_unit_test(test_csvread_utf8_valid_cases),
};

UNIT_MAIN("csvread", tests)
