/* Streaming CSV records with line numbers (see csvread.h). libcsv has no line counter, so the
 * input is fed to csv_parse one physical line at a time and the line of the first byte of each
 * record is remembered (API-NOTES.md, libcsv). */
#include "csvread.h"
#include "pairmap/text.h"

#include <csv.h>
#include <errno.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "pairmap/input.h"
#include "util.h"

/* Bytes per read. tests/fuzz/build.sh makes it tiny so that lines across reads get fuzzed. */
#ifndef PM_CSV_BLOCK
#define PM_CSV_BLOCK (1u << 20)
#endif
#define BLOCK PM_CSV_BLOCK

typedef struct {
    /* the record being assembled: fields packed in buf, NUL-terminated */
    char *buf;
    size_t buf_len, buf_cap;
    size_t *off;
    uint32_t *len;
    const char **ptr;
    size_t ptr_cap;
    size_t nf, f_cap, len_cap;
    uint64_t cur_line, rec_line;
    uint64_t row_line; /* line where the next record can start (not inside a quoted field) */
    int in_record;
    pm_err_t err;
    pm_diag_t *diag;
    const char *display;
    pm_i_record_fn fn;
    void *ud;
    const pm_i_csv_opts *o; /* max_fields, max_what */
} state;

/* The record that started on line has one field too many: the error. */
static pm_err_t too_many(const state *st, uint64_t line) {
    const pm_i_csv_opts *o = st->o;
    size_t max = o->max_fields ? o->max_fields : PM_INPUT_MAX_FIELDS;
    if (o->max_fields && o->max_what) {
        return pm_diag_set(st->diag, PM_EDATA, st->display, (long)line,
                           "found more than %zu field%s, expected %zu as on the %s; check the "
                           "delimiter and quoting",
                           max, max == 1 ? "" : "s", max, o->max_what);
    }
    return pm_diag_set(st->diag, PM_EDATA, st->display, (long)line,
                       "more than %u fields on one line, over the limit of %u; check the "
                       "delimiter and quoting",
                       (unsigned)max, (unsigned)max);
}

static inline int over_fields(const state *st, size_t nf) {
    size_t max = st->o->max_fields ? st->o->max_fields : PM_INPUT_MAX_FIELDS;
    return nf >= max;
}

static void on_field(void *s, size_t len, void *ud) {
    state *st = ud;
    if (st->err) {
        return;
    }
    if (!st->in_record) {
        st->in_record = 1;
        st->rec_line = st->row_line; /* a first field may span lines: where it began */
    }
    if (over_fields(st, st->nf)) { /* before the field is held (issue 13) */
        st->err = too_many(st, st->rec_line);
        return;
    }
    if (len > PM_INPUT_MAX_FIELD) {
        st->err = pm_diag_set(st->diag, PM_EDATA, st->display, (long)st->rec_line,
                              "field %zu is %zu bytes long, over the limit of %u bytes; check "
                              "the delimiter and quoting",
                              st->nf + 1, len, (unsigned)PM_INPUT_MAX_FIELD);
        return;
    }
    if (pm_i_grow((void **)&st->off, &st->f_cap, st->nf + 1, sizeof *st->off) != 0) {
        st->err = pm_diag_set(st->diag, PM_ENOMEM, st->display, 0, "out of memory");
        return;
    }
    if (pm_i_grow((void **)&st->len, &st->len_cap, st->nf + 1, sizeof *st->len) != 0) {
        st->err = pm_diag_set(st->diag, PM_ENOMEM, st->display, 0, "out of memory");
        return;
    }
    if (pm_i_grow((void **)&st->buf, &st->buf_cap, st->buf_len + len + 1, 1) != 0) {
        st->err = pm_diag_set(st->diag, PM_ENOMEM, st->display, 0, "out of memory");
        return;
    }
    st->off[st->nf] = st->buf_len;
    st->len[st->nf] = (uint32_t)len;
    if (len) {
        memcpy(st->buf + st->buf_len, s, len);
    }
    st->buf[st->buf_len + len] = '\0';
    st->buf_len += len + 1;
    st->nf++;
}

static void on_record(int term, void *ud) {
    (void)term;
    state *st = ud;
    if (st->err) {
        goto reset;
    }
    if (!st->in_record) {
        goto reset;
    }
    /* a line holding only white space is blank */
    if (st->nf == 1 && st->len[0] == 0) {
        goto reset;
    }
    if (pm_i_grow((void **)&st->ptr, &st->ptr_cap, st->nf, sizeof *st->ptr) != 0) {
        st->err = pm_diag_set(st->diag, PM_ENOMEM, st->display, 0, "out of memory");
        goto reset;
    }
    for (size_t i = 0; i < st->nf; i++) {
        st->ptr[i] = st->buf + st->off[i];
    }
    pm_i_record r = {st->ptr, st->len, st->nf, st->rec_line};
    pm_err_t rc = st->fn(st->ud, &r, st->diag);
    if (rc != PM_OK) {
        st->err = rc;
    }
reset:
    st->nf = 0;
    st->buf_len = 0;
    st->in_record = 0;
}

/* Picks the delimiter that occurs most often outside quotes in the first line. */
static char detect_sep(const char *p, size_t n) {
    static const char cand[4] = {',', '\t', ';', '|'};
    size_t cnt[4] = {0, 0, 0, 0};
    int inq = 0;
    for (size_t i = 0; i < n && (inq || (p[i] != '\n' && p[i] != '\r')); i++) {
        if (p[i] == '"') {
            inq = !inq;
        } else if (!inq) {
            for (int k = 0; k < 4; k++) {
                if (p[i] == cand[k]) {
                    cnt[k]++;
                }
            }
        }
    }
    int best = 0;
    for (int k = 1; k < 4; k++) {
        if (cnt[k] > cnt[best]) {
            best = k;
        }
    }
    return cand[best];
}

/* libcsv collects a whole field before on_field sees it, so a field that never ends (a
 * missing closing quote early in a big file) would be buffered to the end of the file. Stop
 * it as soon as it passes the limit (issue 6). start: the line where its record began. */
static pm_err_t runaway(const struct csv_parser *p, const state *st, uint64_t start,
                        pm_diag_t *diag) {
    if (p->entry_pos <= PM_INPUT_MAX_FIELD) {
        return PM_OK;
    }
    if (p->quoted) {
        return pm_diag_set(diag, PM_EDATA, st->display, (long)start,
                           "quoted field %zu runs past the limit of %u bytes: a closing quote "
                           "is probably missing",
                           st->nf + 1, (unsigned)PM_INPUT_MAX_FIELD);
    }
    return pm_diag_set(diag, PM_EDATA, st->display, (long)start,
                       "field %zu is over the limit of %u bytes; check the delimiter and quoting",
                       st->nf + 1, (unsigned)PM_INPUT_MAX_FIELD);
}

/* True when a CR other than that of a final CRLF is in the line: libcsv ends a record there
 * (files with CR-only line ends), so such a line must not take the fast path (issue 6). */
static int inner_cr(const char *s, size_t len) {
    if (len && s[len - 1] == '\n') {
        len--;
    }
    if (len && s[len - 1] == '\r') {
        len--;
    }
    return len && memchr(s, '\r', len) != NULL;
}

/* Fast path for a line without quotes while libcsv holds no partial record: split at the
 * delimiter in place (the buffer is ours), trimming spaces and tabs around fields as libcsv
 * does. line[len-1] is '\n' or the line is the file's last. */
static pm_err_t fast_line(state *st, char *line, size_t len, char sep) {
    if (len && line[len - 1] == '\n') {
        len--;
    }
    if (len && line[len - 1] == '\r') {
        len--;
    }
    size_t nf = 0, b = 0;
    for (;;) {
        const char *d = memchr(line + b, sep, len - b);
        size_t i = d ? (size_t)(d - line) : len;
        size_t fb = b, fe = i;
        while (fb < fe && (line[fb] == ' ' || line[fb] == '\t') && line[fb] != sep) {
            fb++;
        }
        while (fe > fb && (line[fe - 1] == ' ' || line[fe - 1] == '\t') && line[fe - 1] != sep) {
            fe--;
        }
        if (fe - fb > PM_INPUT_MAX_FIELD) {
            return pm_diag_set(st->diag, PM_EDATA, st->display, (long)st->cur_line,
                               "field %zu is %zu bytes long, over the limit of %u bytes; check "
                               "the delimiter and quoting",
                               nf + 1, fe - fb, (unsigned)PM_INPUT_MAX_FIELD);
        }
        if (over_fields(st, nf)) {
            return too_many(st, st->cur_line);
        }
        if ((nf >= st->ptr_cap &&
             pm_i_grow((void **)&st->ptr, &st->ptr_cap, nf + 1, sizeof *st->ptr)) ||
            (nf >= st->len_cap &&
             pm_i_grow((void **)&st->len, &st->len_cap, nf + 1, sizeof *st->len))) {
            return pm_diag_set(st->diag, PM_ENOMEM, st->display, 0, "out of memory");
        }
        line[fe] = '\0'; /* fe <= i: a delimiter, the line end or inside trimmed space */
        st->ptr[nf] = line + fb;
        st->len[nf] = (uint32_t)(fe - fb);
        nf++;
        if (!d) {
            break;
        }
        b = i + 1;
    }
    if (nf == 1 && st->len[0] == 0) {
        return PM_OK; /* blank line */
    }
    pm_i_record r = {st->ptr, st->len, nf, st->cur_line};
    return st->fn(st->ud, &r, st->diag);
}

/* One pm_i_csv_stream: the block of input, where the scan is, and libcsv's state. */
typedef struct {
    state st;
    struct csv_parser p;
    pm_i_csv_opts *o;
    FILE *fp;
    void *ud;
    pm_diag_t *diag;
    char *blk;
    size_t cap, have, pos;
    size_t nul_at; /* offset of the first NUL byte in blk, SIZE_MAX: none */
    int first, eof, seen_nul, last_nl;
    uint64_t pending_line;
    uint64_t at; /* ranged reads: the next offset */
    /* where the next quote and CR are (SIZE_MAX: none), so that lines without either are not
     * searched for them one by one */
    size_t next_q, next_cr;
    int q_valid, cr_valid;
} stream;

/* Reads the next block after the kept partial line; *n gets its bytes (0 and s->eof at the
 * end). */
static pm_err_t read_block(stream *s, size_t *n_out) {
    pm_i_csv_opts *o = s->o;
    size_t n;
    if (o->ranged) {
        size_t want = s->cap - s->have;
        if (o->end != UINT64_MAX) {
            want = o->end - s->at < want ? (size_t)(o->end - s->at) : want;
        }
        n = 0;
        while (n < want) {
            ssize_t k = pread(o->fd, s->blk + s->have + n, want - n, (off_t)(s->at + n));
            if (k < 0 && errno == EINTR) {
                continue;
            }
            if (k < 0) {
                return pm_diag_set(s->diag, PM_EIO, o->display, 0, "cannot read: %s",
                                   strerror(errno));
            }
            if (k == 0) {
                break;
            }
            n += (size_t)k;
        }
        s->at += n;
        if (n == 0) {
            s->eof = 1;
        }
    } else {
        n = fread(s->blk + s->have, 1, s->cap - s->have, s->fp);
        if (n == 0) {
            if (ferror(s->fp)) {
                return pm_diag_set(s->diag, PM_EIO, o->display, 0, "cannot read: %s",
                                   strerror(errno ? errno : EIO));
            }
            s->eof = 1;
        }
    }
    *n_out = n;
    return PM_OK;
}

/* The n bytes just read: hash, progress, NUL search, and on the first block the BOM and the
 * delimiter. */
static void took_block(stream *s, size_t n) {
    pm_i_csv_opts *o = s->o;
    if (o->sha && n) {
        pm_i_sha256_update(o->sha, s->blk + s->have, n);
    }
    o->bytes += n;
    uint64_t done_all = o->bytes;
    if (o->shared_done) {
        done_all = atomic_fetch_add_explicit(o->shared_done, n, memory_order_relaxed) + n;
    }
    if (o->progress) {
        o->progress(o->progress_ud, "reading", done_all, o->total ? o->total : done_all);
    }
    s->nul_at = SIZE_MAX;
    /* from 0, not from blk + have: the partial line kept from the last read may hold the
     * NUL (a line across the block boundary, issue 6) */
    const char *nul = s->have + n ? memchr(s->blk, '\0', s->have + n) : NULL;
    if (nul) {
        s->nul_at = (size_t)(nul - s->blk);
    }
    s->have += n;
    s->pos = 0;
    if (s->first && (s->have > 0 || s->eof)) {
        s->first = 0;
        if (s->have >= 3 && memcmp(s->blk, "\xEF\xBB\xBF", 3) == 0) {
            s->pos = 3; /* libcsv does not strip a UTF-8 BOM */
        }
        if (!o->sep) {
            o->sep = detect_sep(s->blk + s->pos, s->have - s->pos);
        }
        csv_set_delim(&s->p, (unsigned char)o->sep);
    }
}

static void find_quote(stream *s) {
    if (!s->q_valid || (s->next_q != SIZE_MAX && s->next_q < s->pos)) {
        const char *q = memchr(s->blk + s->pos, '"', s->have - s->pos);
        s->next_q = q ? (size_t)(q - s->blk) : SIZE_MAX;
        s->q_valid = 1;
    }
}

/* The plain lines from pos up to the next quote or NUL, through o->lines_fn. */
static pm_err_t plain_lines(stream *s) {
    pm_i_csv_opts *o = s->o;
    if (!o->lines_fn || s->p.pstate != 0 || s->st.in_record || s->pos >= s->have) {
        return PM_OK;
    }
    find_quote(s);
    size_t lim = s->next_q < s->have ? s->next_q : s->have;
    lim = s->nul_at < lim ? s->nul_at : lim;
    if (lim <= s->pos) {
        return PM_OK;
    }
    size_t used = 0;
    uint64_t nlines = 0;
    pm_err_t rc = o->lines_fn(s->ud, s->blk + s->pos, lim - s->pos, s->st.cur_line, o->sep, &used,
                              &nlines, s->diag);
    s->pos += used;
    s->st.cur_line += nlines;
    if (used) {
        s->last_nl = 1;
    }
    return rc;
}

/* The line [pos, end): the quote-free fast path, or libcsv. */
static pm_err_t one_line(stream *s, size_t end) {
    pm_i_csv_opts *o = s->o;
    size_t len = end - s->pos;
    find_quote(s);
    if (!s->cr_valid || (s->next_cr != SIZE_MAX && s->next_cr < s->pos)) {
        const char *q = memchr(s->blk + s->pos, '\r', s->have - s->pos);
        s->next_cr = q ? (size_t)(q - s->blk) : SIZE_MAX;
        s->cr_valid = 1;
    }
    s->last_nl = s->blk[end - 1] == '\n';
    if (s->p.pstate == 0 && !s->st.in_record && !(s->next_q < end) &&
        !(s->next_cr < end && inner_cr(s->blk + s->pos, len))) {
        return fast_line(&s->st, s->blk + s->pos, len, o->sep);
    }
    if (s->p.pstate == 0 && !s->st.in_record) {
        s->pending_line = s->st.cur_line; /* a record (maybe multi-line) starts here */
        s->st.row_line = s->st.cur_line;
    }
    pm_err_t rc = PM_OK;
    size_t r = csv_parse(&s->p, s->blk + s->pos, len, on_field, on_record, &s->st);
    if (!s->st.err && r != len) {
        rc = csv_error(&s->p) == CSV_ENOMEM
                 ? pm_diag_set(s->diag, PM_ENOMEM, o->display, 0, "out of memory")
                 : pm_diag_set(s->diag, PM_EDATA, o->display, (long)s->st.cur_line,
                               "malformed quoting near byte %zu of the line: a quote inside an "
                               "unquoted field or text after a closing quote",
                               r + 1);
    }
    if (s->st.err) {
        rc = s->st.err;
    }
    if (!rc) {
        rc = runaway(&s->p, &s->st, s->pending_line, s->diag);
    }
    return rc;
}

/* Every whole line in the block (the last one too at the end of the input). */
static pm_err_t whole_lines(stream *s) {
    s->q_valid = s->cr_valid = 0;
    s->next_q = s->next_cr = 0;
    for (;;) {
        pm_err_t rc = plain_lines(s);
        if (rc) {
            return rc;
        }
        char *nl = memchr(s->blk + s->pos, '\n', s->have - s->pos);
        size_t end = nl ? (size_t)(nl - s->blk) + 1 : (s->eof ? s->have : s->pos);
        if (end == s->pos) {
            break;
        }
        if (s->nul_at < end) {
            s->seen_nul = 1;
            break;
        }
        if ((rc = one_line(s, end)) != PM_OK) {
            return rc;
        }
        s->pos = end;
        if (nl) {
            s->st.cur_line++;
        }
    }
    if (s->seen_nul) {
        return pm_diag_set(s->diag, PM_EDATA, s->o->display, (long)s->st.cur_line,
                           "found a NUL byte: the file is binary or UTF-16 text; save it as "
                           "UTF-8 CSV");
    }
    return PM_OK;
}

/* Keeps the partial last line for the next read; a line longer than the buffer goes to libcsv
 * piecewise. */
static pm_err_t keep_partial(stream *s) {
    pm_i_csv_opts *o = s->o;
    if (s->pos > 0) {
        memmove(s->blk, s->blk + s->pos, s->have - s->pos);
        s->have -= s->pos;
        return PM_OK;
    }
    if (s->have != s->cap || s->eof) {
        return PM_OK;
    }
    if (s->nul_at < s->have) {
        return pm_diag_set(s->diag, PM_EDATA, o->display, (long)s->st.cur_line,
                           "found a NUL byte: the file is binary or UTF-16 text; save it as "
                           "UTF-8 CSV");
    }
    if (s->p.pstate == 0 && !s->st.in_record) {
        s->pending_line = s->st.cur_line; /* a record starts here (issue 6: line numbers) */
        s->st.row_line = s->st.cur_line;
    }
    size_t r = csv_parse(&s->p, s->blk, s->have, on_field, on_record, &s->st);
    if (s->st.err) {
        return s->st.err;
    }
    if (r != s->have) {
        return csv_error(&s->p) == CSV_ENOMEM
                   ? pm_diag_set(s->diag, PM_ENOMEM, o->display, 0, "out of memory")
                   : pm_diag_set(s->diag, PM_EDATA, o->display, (long)s->st.cur_line,
                                 "malformed quoting in a very long line");
    }
    pm_err_t rc = runaway(&s->p, &s->st, s->pending_line, s->diag);
    if (rc == PM_OK) {
        s->have = 0;
    }
    return rc;
}

pm_err_t pm_i_csv_stream(FILE *fp, pm_i_csv_opts *o, pm_i_record_fn fn, void *ud, pm_diag_t *diag) {
    stream s;
    memset(&s, 0, sizeof s);
    s.st.diag = diag;
    s.st.display = o->display;
    s.st.fn = fn;
    s.st.ud = ud;
    s.st.cur_line = 1;
    s.st.o = o;
    s.o = o;
    s.fp = fp;
    s.ud = ud;
    s.diag = diag;
    pm_err_t rc = PM_OK;
    s.cap = BLOCK;
    s.blk = pm_i_malloc(s.cap + 1, 1);
    if (!s.blk) {
        return pm_diag_set(diag, PM_ENOMEM, o->display, 0, "out of memory");
    }
    if (csv_init(&s.p, CSV_STRICT | CSV_APPEND_NULL | CSV_STRICT_FINI) != 0) {
        free(s.blk);
        return pm_diag_set(diag, PM_ENOMEM, o->display, 0, "out of memory");
    }
    s.first = 1;
    s.last_nl = 1;
    s.pending_line = 1;
    o->bytes = 0;
    s.at = o->start;
    if (o->ranged && o->start > 0) {
        s.first = 0; /* mid-file: no BOM, the delimiter is given */
        csv_set_delim(&s.p, (unsigned char)(o->sep ? o->sep : ','));
    }
    while (!s.eof) {
        size_t n;
        if ((rc = read_block(&s, &n)) != PM_OK) {
            goto done;
        }
        took_block(&s, n);
        if ((rc = whole_lines(&s)) != PM_OK || (rc = keep_partial(&s)) != PM_OK) {
            goto done;
        }
    }
    if (csv_fini(&s.p, on_field, on_record, &s.st) != 0) {
        rc = pm_diag_set(diag, PM_EDATA, o->display,
                         (long)(s.st.in_record ? s.st.rec_line : s.pending_line),
                         "unterminated quoted field: a closing quote is missing");
        goto done;
    }
    if (s.st.err) {
        rc = s.st.err;
    }
done:
    o->lines = s.st.cur_line - 1 + (o->bytes > 0 && !s.last_nl ? 1 : 0);
    o->sep_used = o->sep ? o->sep : ',';
    csv_free(&s.p);
    free(s.blk);
    free(s.st.buf);
    free(s.st.off);
    free(s.st.len);
    free((void *)s.st.ptr);
    return rc;
}

/* One UTF-8 decoder for the tree: pm_text_utf8_len (src/text.c). */
int pm_i_utf8_valid(const char *str, size_t len) {
    const unsigned char *s = (const unsigned char *)str;
    for (size_t i = 0; i < len;) {
        size_t n = pm_text_utf8_len(s + i, len - i);
        if (n == 0) {
            return 0;
        }
        i += n;
    }
    return 1;
}

/* A name in a message: the one escaper of human-facing text (pm_text_shown), cut at about 60
 * bytes, so the user sees which name it is and where a bad byte sits. */
const char *pm_i_shown(const char *s, size_t len, char *buf, size_t size) {
    return pm_text_shown(s, len, buf, size, 64);
}
