/* Segment columns (include/pairmap/segments.h): every respondent's label read from a column of
 * the input or of a segment file, the levels put in order. */
#include "pairmap/segments.h"

#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

#include "csvread.h"
#include "util.h"

double pm_segment_label_number(const char *s) {
    const char *p = s;
    while (*p && !(*p >= '0' && *p <= '9')) {
        p++;
    }
    if (!*p) {
        return NAN;
    }
    double v = 0;
    for (;;) {
        while (*p >= '0' && *p <= '9') {
            v = v * 10 + (*p - '0');
            p++;
        }
        /* a thousands separator: a comma followed by exactly three digits */
        if (p[0] == ',' && p[1] >= '0' && p[1] <= '9' && p[2] >= '0' && p[2] <= '9' &&
            p[3] >= '0' && p[3] <= '9' && !(p[4] >= '0' && p[4] <= '9')) {
            p++;
            continue;
        }
        break;
    }
    if (p[0] == '.' && p[1] >= '0' && p[1] <= '9') {
        double f = 0.1;
        for (p++; *p >= '0' && *p <= '9'; p++) {
            v += f * (*p - '0');
            f /= 10;
        }
    }
    return v;
}

void pm_segcol_destroy(pm_segcol_t *c) {
    if (!c) {
        return;
    }
    for (size_t i = 0; c->level && i < c->n_levels; i++) {
        free(c->level[i]);
    }
    free(c->level);
    free(c->of);
    free(c->base);
    free(c->column);
    memset(c, 0, sizeof *c);
}

/* Trims spaces and tabs around s[0..*len) (as the input's readers do with names). */
static void trim(const char **s, size_t *len) {
    while (*len && (**s == ' ' || **s == '\t')) {
        (*s)++;
        (*len)--;
    }
    while (*len && ((*s)[*len - 1] == ' ' || (*s)[*len - 1] == '\t')) {
        (*len)--;
    }
}

/* ==== reading =============================================================================== */
typedef struct {
    const pm_segcol_src_t *src;
    const char *file;
    const pm_table_t *t;
    size_t n;           /* respondents of the table */
    size_t next;        /* the respondent expected next: the table numbers respondents in the
                         * order they first appear in the input, so when the input is read
                         * again (or a segment file lists them alike) a new id is most often
                         * this one, found with one comparison and no hash table */
    int ids_built;      /* ids below is filled (at the first id that is not `next`) */
    pm_i_strtab ids;    /* respondent id -> table index (same ids, same order) */
    pm_i_strtab labels; /* label -> first-seen id */
    int32_t *lab;       /* [n_resp] label id or -1 */
    uint64_t *line;     /* [n_resp] line that set it (0: none) */
    long idc, segc;     /* 0-based columns */
    int header_done;
    uint64_t unknown;
    /* the previous row's id and label (a respondent's rows usually follow each other): the
     * same bytes again skip the look-ups */
    const char *last_id, *last_v;
    size_t last_il, last_vl;
    int64_t last_resp, last_lab;
    char *keep; /* copies of last_id and last_v (the record's fields do not outlive it) */
    size_t keep_cap;
} reader;

/* Column spec s (a header name or a 1-based number) in header r; -1 when absent. */
static long find_col(const pm_i_record *r, const char *s) {
    char *end;
    errno = 0;
    long v = strtol(s, &end, 10);
    if (*s && *end == '\0' && errno == 0 && v >= 1 && (size_t)v <= r->n) {
        return v - 1;
    }
    for (size_t i = 0; i < r->n; i++) {
        const char *f = r->f[i];
        size_t l = r->len[i];
        trim(&f, &l);
        if (l == strlen(s) && memcmp(f, s, l) == 0) {
            return (long)i;
        }
    }
    return -1;
}

static pm_err_t header(reader *rd, const pm_i_record *r, pm_diag_t *diag) {
    const char *idspec = rd->src->id_col ? rd->src->id_col : "1";
    rd->idc = find_col(r, idspec);
    rd->segc = find_col(r, rd->src->column);
    if (rd->idc < 0) {
        return pm_diag_set(diag, PM_EUSAGE, rd->file, (long)r->line,
                           "no respondent id column '%s' in the header", idspec);
    }
    if (rd->segc < 0) {
        return pm_diag_set(diag, PM_EUSAGE, rd->file, (long)r->line,
                           "--segment-col '%s' is not a column of the header", rd->src->column);
    }
    if (rd->segc == rd->idc) {
        return pm_diag_set(diag, PM_EUSAGE, rd->file, (long)r->line,
                           "--segment-col '%s' is the respondent id column", rd->src->column);
    }
    return PM_OK;
}

/* The respondent ids of the table in the hash table ids (their numbers as in the table). 0,
 * or -1 when out of memory. */
static int build_ids(reader *rd) {
    for (size_t r = 0; r < rd->n; r++) {
        const char *id = pm_table_respondent(rd->t, r);
        if (pm_i_strtab_intern(&rd->ids, id, strlen(id), NULL) != (int64_t)r) {
            return -1; /* ids are distinct: only an allocation failure gives another number */
        }
    }
    rd->ids_built = 1;
    return 0;
}

/* The table's number of the respondent id[0..il), -1 when it is not in the table, -2 when
 * out of memory. */
static int64_t find_resp(reader *rd, const char *id, size_t il) {
    if (rd->next < rd->n) {
        const char *e = pm_table_respondent(rd->t, rd->next);
        if (strncmp(e, id, il) == 0 && e[il] == '\0') {
            return (int64_t)rd->next++;
        }
    }
    if (!rd->ids_built && build_ids(rd) != 0) {
        return -2;
    }
    int64_t r = pm_i_strtab_find(&rd->ids, id, il);
    if (r >= 0 && (size_t)r >= rd->next) {
        rd->next = (size_t)r + 1;
    }
    return r;
}

static pm_err_t row(reader *rd, const char *id, size_t il, const char *v, size_t vl, uint64_t line,
                    pm_diag_t *diag);

static pm_err_t record(void *ud, const pm_i_record *r, pm_diag_t *diag) {
    reader *rd = ud;
    if (!rd->header_done) {
        rd->header_done = 1;
        return header(rd, r, diag);
    }
    if ((size_t)rd->idc >= r->n || (size_t)rd->segc >= r->n) {
        return PM_OK; /* a short row: the input's own reader reports it */
    }
    const char *id = r->f[rd->idc], *v = r->f[rd->segc];
    size_t il = r->len[rd->idc], vl = r->len[rd->segc];
    trim(&id, &il);
    trim(&v, &vl);
    return row(rd, id, il, v, vl, r->line, diag);
}

/* One row's respondent id[0..il) and segment v[0..vl), trimmed, from line `line`. */
static pm_err_t row(reader *rd, const char *id, size_t il, const char *v, size_t vl, uint64_t line,
                    pm_diag_t *diag) {
    int same_id = rd->last_id && il == rd->last_il && memcmp(id, rd->last_id, il) == 0;
    int64_t resp = same_id ? rd->last_resp : find_resp(rd, id, il);
    if (resp == -2) {
        return pm_diag_set(diag, PM_ENOMEM, rd->file, 0, "out of memory");
    }
    if (resp < 0) {
        rd->unknown += !rd->src->is_input; /* the input's rows are all in the table */
        return PM_OK;
    }
    int same_v = rd->last_v && vl == rd->last_vl && memcmp(v, rd->last_v, vl) == 0;
    int64_t lab = -1;
    if (same_v) {
        lab = rd->last_lab; /* checked and interned on an earlier row */
    } else {
        if (!pm_i_utf8_valid(v, vl)) {
            char b[96];
            return pm_diag_set(diag, PM_EDATA, rd->file, (long)line,
                               "invalid UTF-8 in segment '%s'; save the file as UTF-8",
                               pm_i_shown(v, vl, b, sizeof b));
        }
        if (vl > 0 && (lab = pm_i_strtab_intern(&rd->labels, v, vl, NULL)) < 0) {
            return pm_diag_set(diag, PM_ENOMEM, rd->file, 0, "out of memory");
        }
    }
    if (!same_id || !same_v) {
        if (pm_i_grow((void **)&rd->keep, &rd->keep_cap, il + vl + 1, 1)) {
            return pm_diag_set(diag, PM_ENOMEM, rd->file, 0, "out of memory");
        }
        memcpy(rd->keep, id, il);
        memcpy(rd->keep + il, v, vl);
        rd->last_id = rd->keep;
        rd->last_v = rd->keep + il;
        rd->last_il = il;
        rd->last_vl = vl;
        rd->last_resp = resp;
        rd->last_lab = lab;
    }
    if (rd->line[resp]) {
        if (!rd->src->is_input) {
            return pm_diag_set(diag, PM_EDATA, rd->file, (long)line,
                               "the respondent on this line is also on line %llu; a segment "
                               "file holds one row per respondent",
                               (unsigned long long)rd->line[resp]);
        }
        if (rd->lab[resp] != (int32_t)lab) {
            char b[96];
            return pm_diag_set(diag, PM_EDATA, rd->file, (long)line,
                               "segment '%s' in column '%s' differs from the one this "
                               "respondent has on line %llu; a respondent has one segment",
                               pm_i_shown(v, vl, b, sizeof b), rd->src->column,
                               (unsigned long long)rd->line[resp]);
        }
        return PM_OK;
    }
    rd->line[resp] = line;
    rd->lab[resp] = (int32_t)lab;
    return PM_OK;
}

/* Plain lines read without building records (see pm_i_lines_fn): the id and segment fields
 * found by their separators. A line is taken only where it has the same effect as its record:
 * its '\n' in p, no CR but a final CRLF one, both fields there, no space or tab at their
 * edges (the record path trims them) and none over the field limit; any other line, and the
 * header, go the record way. */
static pm_err_t seg_lines(void *ud, char *p, size_t len, uint64_t line, char sep, size_t *used,
                          uint64_t *nlines, pm_diag_t *diag) {
    reader *rd = ud;
    *used = 0;
    *nlines = 0;
    if (!rd->header_done) {
        return PM_OK;
    }
    long need = (rd->idc > rd->segc ? rd->idc : rd->segc) + 1;
    const char *end = p + len, *at = p, *cr = memchr(p, '\r', len);
    pm_err_t rc = PM_OK;
    while (at < end && rc == PM_OK) {
        const char *nl = memchr(at, '\n', (size_t)(end - at)), *le = nl;
        if (!nl) {
            break;
        }
        if (cr && cr < nl) {
            if (cr != nl - 1) {
                break;
            }
            le = nl - 1;
            cr = nl + 1 < end ? memchr(nl + 1, '\r', (size_t)(end - nl - 1)) : NULL;
        }
        const char *f[2] = {NULL, NULL}, *q = at;
        size_t fl[2] = {0, 0};
        int whole = 1;
        for (long k = 0; k < need; k++) {
            const char *d = memchr(q, sep, (size_t)(le - q)), *fe = d ? d : le;
            if (k == rd->idc || k == rd->segc) {
                int w = k == rd->segc;
                f[w] = q;
                fl[w] = (size_t)(fe - q);
                if (fl[w] > PM_INPUT_MAX_FIELD ||
                    (fl[w] && (q[0] == ' ' || q[0] == '\t' || fe[-1] == ' ' || fe[-1] == '\t'))) {
                    goto stop; /* the record path trims, or reports, it */
                }
            }
            if (!d) {
                whole = k + 1 == need; /* fewer fields: a short row, skipped both ways */
                break;
            }
            q = d + 1;
        }
        if (whole) {
            rc = row(rd, f[0], fl[0], f[1], fl[1], line, diag);
        }
        line++;
        (*nlines)++;
        at = nl + 1;
    }
stop:
    *used = (size_t)(at - p);
    return rc;
}

static pm_err_t read_file(reader *rd, pm_diag_t *diag) {
    FILE *fp = strcmp(rd->src->path, "-") == 0 ? NULL : fopen(rd->src->path, "rb");
    if (!fp) {
        return pm_diag_set(diag, PM_EIO, rd->file, 0, "cannot open the file for segments: %s",
                           strcmp(rd->src->path, "-") == 0 ? "standard input is read once"
                                                           : strerror(errno));
    }
    pm_i_csv_opts co = {0};
    co.sep = rd->src->sep;
    co.display = rd->file;
    co.lines_fn = seg_lines;
    pm_err_t rc = pm_i_csv_stream(fp, &co, record, rd, diag);
    fclose(fp);
    return rc;
}

/* ==== level order =========================================================================== */
typedef struct {
    const char *s;
    double num;
    int below; /* "under 25", "below 25", "less than 25", "up to 25", "<25": before 25-39 */
    uint32_t id;
} lev;

/* True when the text before the label's first digit says "below": under, below, less than,
 * up to, fewer than, < (any case). */
static int says_below(const char *s) {
    static const char *const words[] = {"under", "below", "less than", "up to", "fewer than", "<"};
    const char *d = s;
    while (*d && !(*d >= '0' && *d <= '9')) {
        d++;
    }
    for (size_t w = 0; w < sizeof words / sizeof words[0]; w++) {
        size_t n = strlen(words[w]);
        for (const char *p = s; p + n <= d; p++) {
            if (strncasecmp(p, words[w], n) == 0) {
                return 1;
            }
        }
    }
    return 0;
}

static int cmp_lev(const void *x, const void *y) {
    const lev *a = x, *b = y;
    int an = !isnan(a->num), bn = !isnan(b->num);
    if (an != bn) {
        return an ? -1 : 1; /* labels with a number first */
    }
    if (an && a->num != b->num) {
        return a->num < b->num ? -1 : 1;
    }
    if (an && a->below != b->below) {
        return a->below ? -1 : 1;
    }
    return pm_i_bytecmp(a->s, b->s);
}

/* rank[id] = position of label id; the order of --segment-levels when given. */
static pm_err_t order_levels(const reader *rd, pm_segcol_t *c, uint32_t *rank, pm_diag_t *diag) {
    size_t k = rd->labels.count;
    lev *l = pm_i_malloc(k ? k : 1, sizeof *l);
    if (!l) {
        return pm_diag_set(diag, PM_ENOMEM, rd->file, 0, "out of memory");
    }
    int all_numbered = k > 0;
    for (size_t i = 0; i < k; i++) {
        l[i].s = rd->labels.str[i];
        l[i].num = pm_segment_label_number(l[i].s);
        l[i].below = says_below(l[i].s);
        l[i].id = (uint32_t)i;
        all_numbered &= !isnan(l[i].num);
    }
    pm_err_t rc = PM_OK;
    if (rd->src->levels) {
        /* the order given: every listed level occurs, every level is listed */
        size_t pos = 0;
        for (uint32_t i = 0; i < k; i++) {
            rank[i] = UINT32_MAX;
        }
        const char *p = rd->src->levels;
        while (rc == PM_OK) {
            /* a label may hold commas itself ("€1,000-1,999"): the longest run of pieces up to
             * a comma that names a level is taken */
            const char *e = strchr(p, ',');
            size_t n = e ? (size_t)(e - p) : strlen(p);
            int64_t id = pm_i_strtab_find(&rd->labels, p, n);
            for (const char *x = e; x; x = strchr(x + 1, ',')) {
                const char *nx = strchr(x + 1, ',');
                size_t nn = nx ? (size_t)(nx - p) : strlen(p);
                int64_t jd = pm_i_strtab_find(&rd->labels, p, nn);
                if (jd >= 0) {
                    id = jd;
                    n = nn;
                    e = nx;
                }
            }
            if (id < 0 || rank[id] != UINT32_MAX) {
                rc = pm_diag_set(diag, PM_EUSAGE, NULL, 0,
                                 id < 0 ? "--segment-levels: level '%.*s' never occurs in "
                                          "column '%s'"
                                        : "--segment-levels: level '%.*s' is given twice for "
                                          "column '%s'",
                                 (int)n, p, rd->src->column);
                break;
            }
            rank[id] = (uint32_t)pos++;
            if (!e) {
                break;
            }
            p = e + 1;
        }
        for (size_t i = 0; rc == PM_OK && i < k; i++) {
            if (rank[i] == UINT32_MAX) {
                rc = pm_diag_set(diag, PM_EUSAGE, NULL, 0,
                                 "--segment-levels: level '%s' of column '%s' is not listed",
                                 rd->labels.str[i], rd->src->column);
            }
        }
        c->ordered = true;
    } else {
        qsort(l, k, sizeof *l, cmp_lev);
        for (size_t i = 0; i < k; i++) {
            rank[l[i].id] = (uint32_t)i;
        }
        c->ordered = all_numbered;
    }
    free(l);
    return rc;
}

static pm_err_t fill(const reader *rd, const uint32_t *rank, pm_segcol_t *c, pm_diag_t *diag) {
    size_t k = rd->labels.count;
    c->n_levels = k;
    c->level = pm_i_calloc(k ? k : 1, sizeof *c->level);
    c->base = pm_i_calloc(k ? k : 1, sizeof *c->base);
    c->column = strdup(rd->src->column);
    if (!c->level || !c->base || !c->column) {
        return pm_diag_set(diag, PM_ENOMEM, rd->file, 0, "out of memory");
    }
    for (size_t i = 0; i < k; i++) {
        if (!(c->level[rank[i]] = strdup(rd->labels.str[i]))) {
            return pm_diag_set(diag, PM_ENOMEM, rd->file, 0, "out of memory");
        }
    }
    for (size_t r = 0; r < c->n_resp; r++) {
        int32_t lb = rd->lab[r];
        c->of[r] = lb < 0 ? -1 : (int32_t)rank[lb];
        if (lb < 0) {
            c->none++;
        } else {
            c->base[rank[lb]]++;
        }
    }
    c->unknown_ids = rd->unknown;
    return PM_OK;
}

pm_err_t pm_segcol_read(const pm_table_t *t, const pm_segcol_src_t *src, pm_segcol_t *out,
                        pm_diag_t *diag) {
    memset(out, 0, sizeof *out);
    reader rd;
    memset(&rd, 0, sizeof rd);
    rd.src = src;
    rd.file = src->display ? src->display : src->path;
    size_t n = pm_table_nrespondents(t);
    rd.t = t;
    rd.n = n;
    pm_i_strtab_init(&rd.ids);
    pm_i_strtab_init(&rd.labels);
    pm_err_t rc = PM_OK;
    uint32_t *rank = NULL;
    out->n_resp = n;
    rd.lab = pm_i_malloc(n ? n : 1, sizeof *rd.lab);
    rd.line = pm_i_calloc(n ? n : 1, sizeof *rd.line);
    out->of = pm_i_malloc(n ? n : 1, sizeof *out->of);
    if (!rd.lab || !rd.line || !out->of) {
        rc = pm_diag_set(diag, PM_ENOMEM, rd.file, 0, "out of memory");
        goto cleanup;
    }
    for (size_t r = 0; r < n; r++) {
        const char *id = pm_table_respondent(t, r);
        if (!id) {
            rc = pm_diag_set(diag, PM_EUSAGE, NULL, 0,
                             "segments need respondent ids: give --id-col (lines format)");
            goto cleanup;
        }
        rd.lab[r] = -1;
    }
    if ((rc = read_file(&rd, diag)) != PM_OK) {
        goto cleanup;
    }
    if (!rd.header_done) {
        rc = pm_diag_set(diag, PM_EDATA, rd.file, 0, "the file for segments is empty");
        goto cleanup;
    }
    rank = pm_i_malloc(rd.labels.count ? rd.labels.count : 1, sizeof *rank);
    if (!rank) {
        rc = pm_diag_set(diag, PM_ENOMEM, rd.file, 0, "out of memory");
        goto cleanup;
    }
    if ((rc = order_levels(&rd, out, rank, diag)) == PM_OK) {
        rc = fill(&rd, rank, out, diag);
    }
cleanup:
    free(rank);
    free(rd.lab);
    free(rd.line);
    pm_i_free(rd.keep);
    pm_i_strtab_destroy(&rd.ids);
    pm_i_strtab_destroy(&rd.labels);
    if (rc != PM_OK) {
        pm_segcol_destroy(out);
    }
    return rc;
}

/* Bases and `none` recounted over the first n respondents (those with gone[r] set count in
 * neither; gone may be NULL), the levels nobody holds removed (the others keep their order).
 * to: n_levels entries of scratch. */
static void recount(pm_segcol_t *c, size_t n, const unsigned char *gone, int32_t *to) {
    for (size_t s = 0; s < c->n_levels; s++) {
        c->base[s] = 0;
    }
    c->none = 0;
    for (size_t r = 0; r < n; r++) {
        if (c->of[r] >= 0) {
            c->base[c->of[r]]++;
        } else if (!(gone && gone[r])) {
            c->none++;
        }
    }
    /* the levels someone holds, in their order */
    size_t nl = 0;
    for (size_t s = 0; s < c->n_levels; s++) {
        if (c->base[s] == 0) {
            free(c->level[s]);
            to[s] = -1;
            continue;
        }
        to[s] = (int32_t)nl;
        c->level[nl] = c->level[s];
        c->base[nl] = c->base[s];
        nl++;
    }
    c->n_levels = nl;
    for (size_t r = 0; r < n; r++) {
        if (c->of[r] >= 0) {
            c->of[r] = to[c->of[r]];
        }
    }
}

pm_err_t pm_segcol_keep(pm_segcol_t *c, const unsigned char *keep) {
    int32_t *to = pm_i_malloc(c->n_levels ? c->n_levels : 1, sizeof *to);
    if (!to) {
        return PM_ENOMEM;
    }
    size_t k = 0;
    for (size_t r = 0; r < c->n_resp; r++) {
        if (keep[r]) {
            c->of[k++] = c->of[r];
        }
    }
    c->n_resp = k;
    recount(c, k, NULL, to);
    free(to);
    return PM_OK;
}

pm_err_t pm_segcol_leave_out(pm_segcol_t *c, const unsigned char *gone, size_t n) {
    int32_t *to = pm_i_malloc(c->n_levels ? c->n_levels : 1, sizeof *to);
    if (!to) {
        return PM_ENOMEM;
    }
    if (n > c->n_resp) {
        n = c->n_resp;
    }
    for (size_t r = 0; r < n; r++) {
        if (gone[r]) {
            c->left_out += c->of[r] >= 0;
            c->of[r] = -1;
        }
    }
    recount(c, c->n_resp, gone, to);
    free(to);
    return PM_OK;
}
