/* Streaming CSV records with line numbers (see csvread.h). libcsv has no line counter, so the
 * input is fed to csv_parse one physical line at a time and the line of the first byte of each
 * record is remembered (API-NOTES.md, libcsv). */
#include "csvread.h"

#include <csv.h>
#include <errno.h>
#include <stdlib.h>
#include <string.h>

#include "pairmap/input.h"
#include "util.h"

#define BLOCK (1u << 20)

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
        st->rec_line = st->cur_line;
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

static uint64_t line_of(const char *p, size_t upto, uint64_t first) {
    uint64_t l = first;
    for (size_t i = 0; i < upto; i++) {
        if (p[i] == '\n') {
            l++;
        }
    }
    return l;
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
    char *blk = pm_i_malloc(BLOCK, 1);
    if (!blk) {
        return pm_diag_set(diag, PM_ENOMEM, o->display, 0, "out of memory");
    }
    if (csv_init(&p, CSV_STRICT | CSV_APPEND_NULL | CSV_STRICT_FINI) != 0) {
        free(blk);
        return pm_diag_set(diag, PM_ENOMEM, o->display, 0, "out of memory");
    }
    int first = 1;
    o->bytes = 0;
    for (;;) {
        size_t n = fread(blk, 1, BLOCK, fp);
        if (n == 0) {
            if (ferror(fp)) {
                rc = pm_diag_set(diag, PM_EIO, o->display, 0, "cannot read: %s",
                                 strerror(errno ? errno : EIO));
                goto done;
            }
            break;
        }
        if (o->sha) {
            pm_i_sha256_update(o->sha, blk, n);
        }
        o->bytes += n;
        size_t pos = 0;
        if (first) {
            first = 0;
            if (n >= 3 && memcmp(blk, "\xEF\xBB\xBF", 3) == 0) {
                pos = 3; /* libcsv does not strip a UTF-8 BOM */
            }
            if (!o->sep) {
                o->sep = detect_sep(blk + pos, n - pos);
            }
            csv_set_delim(&p, (unsigned char)o->sep);
        }
        const char *nul = memchr(blk + pos, '\0', n - pos);
        size_t limit = nul ? (size_t)(nul - blk) : n;
        while (pos < limit) {
            const char *nl = memchr(blk + pos, '\n', limit - pos);
            size_t end = nl ? (size_t)(nl - blk) + 1 : limit;
            size_t r = csv_parse(&p, blk + pos, end - pos, on_field, on_record, &st);
            if (st.err) {
                rc = st.err;
                goto done;
            }
            if (r != end - pos) {
                rc = pm_diag_set(diag, PM_EDATA, o->display, (long)st.cur_line,
                                 "malformed quoting near byte %zu of the line: a quote inside "
                                 "an unquoted field or text after a closing quote",
                                 r + 1);
                goto done;
            }
            pos = end;
            if (nl) {
                st.cur_line++;
            }
        }
        if (nul) {
            rc = pm_diag_set(diag, PM_EDATA, o->display, (long)line_of(blk, 0, st.cur_line),
                             "NUL byte in the input; the file is binary or not UTF-8 text");
            goto done;
        }
    }
    if (csv_fini(&p, on_field, on_record, &st) != 0) {
        rc = pm_diag_set(diag, PM_EDATA, o->display, (long)(st.in_record ? st.rec_line : st.cur_line),
                         "unterminated quoted field: a closing quote is missing");
        goto done;
    }
    if (st.err) {
        rc = st.err;
    }
done:
    o->lines = st.cur_line - 1 + (o->bytes > 0 ? 1 : 0);
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
