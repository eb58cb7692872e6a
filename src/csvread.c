/* Streaming CSV records with line numbers (see csvread.h). libcsv has no line counter, so the
 * input is fed to csv_parse one physical line at a time and the line of the first byte of each
 * record is remembered (API-NOTES.md, libcsv). */
#include "csvread.h"

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
} state;

static void on_field(void *s, size_t len, void *ud) {
    state *st = ud;
    if (st->err) {
        return;
    }
    if (!st->in_record) {
        st->in_record = 1;
        st->rec_line = st->row_line; /* a first field may span lines: where it began */
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

pm_err_t pm_i_csv_stream(FILE *fp, pm_i_csv_opts *o, pm_i_record_fn fn, void *ud,
                         pm_diag_t *diag) {
    state st;
    memset(&st, 0, sizeof st);
    st.diag = diag;
    st.display = o->display;
    st.fn = fn;
    st.ud = ud;
    st.cur_line = 1;
    struct csv_parser p;
    pm_err_t rc = PM_OK;
    size_t cap = BLOCK;
    char *blk = pm_i_malloc(cap + 1, 1);
    if (!blk) {
        return pm_diag_set(diag, PM_ENOMEM, o->display, 0, "out of memory");
    }
    if (csv_init(&p, CSV_STRICT | CSV_APPEND_NULL | CSV_STRICT_FINI) != 0) {
        free(blk);
        return pm_diag_set(diag, PM_ENOMEM, o->display, 0, "out of memory");
    }
    int first = 1, eof = 0, seen_nul = 0, last_nl = 1;
    uint64_t pending_line = 1;
    size_t have = 0, pos = 0;
    o->bytes = 0;
    uint64_t at = o->start; /* ranged reads: the next offset */
    if (o->ranged && o->start > 0) {
        first = 0; /* mid-file: no BOM, the delimiter is given */
        csv_set_delim(&p, (unsigned char)(o->sep ? o->sep : ','));
    }
    while (!eof) {
        size_t n;
        if (o->ranged) {
            size_t want = cap - have;
            if (o->end != UINT64_MAX) {
                want = o->end - at < want ? (size_t)(o->end - at) : want;
            }
            n = 0;
            while (n < want) {
                ssize_t k = pread(o->fd, blk + have + n, want - n, (off_t)(at + n));
                if (k < 0 && errno == EINTR) {
                    continue;
                }
                if (k < 0) {
                    rc = pm_diag_set(diag, PM_EIO, o->display, 0, "cannot read: %s",
                                     strerror(errno));
                    goto done;
                }
                if (k == 0) {
                    break;
                }
                n += (size_t)k;
            }
            at += n;
            if (n == 0) {
                eof = 1;
            }
        } else {
            n = fread(blk + have, 1, cap - have, fp);
            if (n == 0) {
                if (ferror(fp)) {
                    rc = pm_diag_set(diag, PM_EIO, o->display, 0, "cannot read: %s",
                                     strerror(errno ? errno : EIO));
                    goto done;
                }
                eof = 1;
            }
        }
        if (o->sha && n) {
            pm_i_sha256_update(o->sha, blk + have, n);
        }
        o->bytes += n;
        uint64_t done_all = o->bytes;
        if (o->shared_done) {
            done_all = atomic_fetch_add_explicit(o->shared_done, n, memory_order_relaxed) + n;
        }
        if (o->progress) {
            o->progress(o->progress_ud, "reading", done_all, o->total ? o->total : done_all);
        }
        size_t nul_at = SIZE_MAX;
        /* from 0, not from blk + have: the partial line kept from the last read may hold the
         * NUL (a line across the block boundary, issue 6) */
        const char *nul = have + n ? memchr(blk, '\0', have + n) : NULL;
        if (nul) {
            nul_at = (size_t)(nul - blk);
        }
        have += n;
        pos = 0;
        if (first && (have > 0 || eof)) {
            first = 0;
            if (have >= 3 && memcmp(blk, "\xEF\xBB\xBF", 3) == 0) {
                pos = 3; /* libcsv does not strip a UTF-8 BOM */
            }
            if (!o->sep) {
                o->sep = detect_sep(blk + pos, have - pos);
            }
            csv_set_delim(&p, (unsigned char)o->sep);
        }
        /* whole lines in the buffer; where the next quote and CR are (SIZE_MAX: none), so
         * that lines without either are not searched for them one by one */
        size_t next_q = 0, next_cr = 0;
        int q_valid = 0, cr_valid = 0;
        for (;;) {
            if (o->lines_fn && p.pstate == 0 && !st.in_record && pos < have) {
                if (!q_valid || (next_q != SIZE_MAX && next_q < pos)) {
                    const char *q = memchr(blk + pos, '"', have - pos);
                    next_q = q ? (size_t)(q - blk) : SIZE_MAX;
                    q_valid = 1;
                }
                size_t lim = next_q < have ? next_q : have;
                lim = nul_at < lim ? nul_at : lim;
                if (lim > pos) {
                    size_t used = 0;
                    uint64_t nlines = 0;
                    rc = o->lines_fn(ud, blk + pos, lim - pos, st.cur_line, o->sep, &used,
                                     &nlines, diag);
                    pos += used;
                    st.cur_line += nlines;
                    if (used) {
                        last_nl = 1;
                    }
                    if (rc) {
                        goto done;
                    }
                }
            }
            char *nl = memchr(blk + pos, '\n', have - pos);
            size_t end = nl ? (size_t)(nl - blk) + 1 : (eof ? have : pos);
            if (end == pos) {
                break;
            }
            if (nul_at < end) {
                seen_nul = 1;
                break;
            }
            size_t len = end - pos;
            if (!q_valid || (next_q != SIZE_MAX && next_q < pos)) {
                const char *q = memchr(blk + pos, '"', have - pos);
                next_q = q ? (size_t)(q - blk) : SIZE_MAX;
                q_valid = 1;
            }
            if (!cr_valid || (next_cr != SIZE_MAX && next_cr < pos)) {
                const char *q = memchr(blk + pos, '\r', have - pos);
                next_cr = q ? (size_t)(q - blk) : SIZE_MAX;
                cr_valid = 1;
            }
            if (p.pstate == 0 && !st.in_record && !(next_q < end) &&
                !(next_cr < end && inner_cr(blk + pos, len))) {
                last_nl = blk[end - 1] == '\n';
                rc = fast_line(&st, blk + pos, len, o->sep);
            } else {
                if (p.pstate == 0 && !st.in_record) {
                    pending_line = st.cur_line; /* a record (maybe multi-line) starts here */
                    st.row_line = st.cur_line;
                }
                last_nl = blk[end - 1] == '\n';
                size_t r = csv_parse(&p, blk + pos, len, on_field, on_record, &st);
                if (!st.err && r != len) {
                    rc = csv_error(&p) == CSV_ENOMEM
                             ? pm_diag_set(diag, PM_ENOMEM, o->display, 0, "out of memory")
                             : pm_diag_set(diag, PM_EDATA, o->display, (long)st.cur_line,
                                           "malformed quoting near byte %zu of the line: a "
                                           "quote inside an unquoted field or text after a "
                                           "closing quote",
                                           r + 1);
                }
                if (st.err) {
                    rc = st.err;
                }
                if (!rc) {
                    rc = runaway(&p, &st, pending_line, diag);
                }
            }
            if (rc) {
                goto done;
            }
            pos = end;
            if (nl) {
                st.cur_line++;
            }
        }
        if (seen_nul) {
            rc = pm_diag_set(diag, PM_EDATA, o->display, (long)st.cur_line,
                             "found a NUL byte: the file is binary or UTF-16 text; save it as "
                             "UTF-8 CSV");
            goto done;
        }
        /* keep the partial last line for the next read */
        if (pos > 0) {
            memmove(blk, blk + pos, have - pos);
            have -= pos;
        } else if (have == cap && !eof) {
            /* one line longer than the buffer: hand it to libcsv piecewise */
            if (nul_at < have) {
                rc = pm_diag_set(diag, PM_EDATA, o->display, (long)st.cur_line,
                                 "found a NUL byte: the file is binary or UTF-16 text; save it "
                                 "as UTF-8 CSV");
                goto done;
            }
            if (p.pstate == 0 && !st.in_record) {
                pending_line = st.cur_line; /* a record starts here (issue 6: line numbers) */
                st.row_line = st.cur_line;
            }
            size_t r = csv_parse(&p, blk, have, on_field, on_record, &st);
            if (st.err) {
                rc = st.err;
                goto done;
            }
            if (r != have) {
                rc = csv_error(&p) == CSV_ENOMEM
                         ? pm_diag_set(diag, PM_ENOMEM, o->display, 0, "out of memory")
                         : pm_diag_set(diag, PM_EDATA, o->display, (long)st.cur_line,
                                       "malformed quoting in a very long line");
                goto done;
            }
            if ((rc = runaway(&p, &st, pending_line, diag)) != PM_OK) {
                goto done;
            }
            have = 0;
        }
    }
    if (csv_fini(&p, on_field, on_record, &st) != 0) {
        rc = pm_diag_set(diag, PM_EDATA, o->display,
                         (long)(st.in_record ? st.rec_line : pending_line),
                         "unterminated quoted field: a closing quote is missing");
        goto done;
    }
    if (st.err) {
        rc = st.err;
    }
done:
    o->lines = st.cur_line - 1 + (o->bytes > 0 && !last_nl ? 1 : 0);
    o->sep_used = o->sep ? o->sep : ',';
    csv_free(&p);
    free(blk);
    free(st.buf);
    free(st.off);
    free(st.len);
    free((void *)st.ptr);
    return rc;
}

int pm_i_utf8_valid(const char *str, size_t len) {
    const unsigned char *s = (const unsigned char *)str;
    size_t i = 0;
    while (i < len) {
        unsigned c = s[i];
        if (c < 0x80) {
            i++;
            continue;
        }
        size_t n;
        unsigned cp;
        if (c >= 0xC2 && c <= 0xDF) {
            n = 1;
            cp = c & 0x1F;
        } else if (c >= 0xE0 && c <= 0xEF) {
            n = 2;
            cp = c & 0x0F;
        } else if (c >= 0xF0 && c <= 0xF4) {
            n = 3;
            cp = c & 0x07;
        } else {
            return 0;
        }
        if (i + n >= len) {
            return 0;
        }
        for (size_t k = 1; k <= n; k++) {
            if ((s[i + k] & 0xC0) != 0x80) {
                return 0;
            }
            cp = (cp << 6) | (s[i + k] & 0x3F);
        }
        if ((n == 2 && cp < 0x800) || (n == 3 && (cp < 0x10000 || cp > 0x10FFFF)) ||
            (cp >= 0xD800 && cp <= 0xDFFF)) {
            return 0;
        }
        i += n + 1;
    }
    return 1;
}

/* Copies s[0..len) into buf for a message, with every byte that is not part of valid UTF-8
 * (or is a control byte) written as \xHH, cut at about 60 bytes: the user sees which name it
 * is and where the bad byte sits (issue 6). */
const char *pm_i_shown(const char *s, size_t len, char *buf, size_t size) {
    size_t o = 0;
    for (size_t i = 0; i < len && o + 8 < size; i++) {
        unsigned char c = (unsigned char)s[i];
        size_t n = c < 0x80 ? 1 : c < 0xE0 ? 2 : c < 0xF0 ? 3 : 4;
        if (o > 60) {
            memcpy(buf + o, "...", 3);
            o += 3;
            break;
        }
        if (c >= 0x20 && c != 0x7F && (c < 0x80 || (i + n <= len && pm_i_utf8_valid(s + i, n)))) {
            memcpy(buf + o, s + i, n);
            o += n;
            i += n - 1;
        } else {
            o += (size_t)snprintf(buf + o, size - o, "\\x%02X", c);
        }
    }
    buf[o] = '\0';
    return buf;
}
