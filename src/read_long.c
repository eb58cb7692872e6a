/* The long and lines formats: the columns resolved on the first record, one row per record
 * (pm_i_read_record) and the plain two-column lines read without building records
 * (pm_i_read_lines). Used serially by pm_input_read (src/input.c) and per chunk by the
 * parallel reader (src/read_par.c), which learns the columns from the first chunk through
 * pm_i_par_publish. */
#include "input_internal.h"

#include <stdatomic.h>
#include <string.h>

static pm_err_t resolve(pm_i_reader *rd, const char *opt, const char *sel, long dflt, long *out,
                        const pm_i_record *r, pm_diag_t *diag) {
    if (!sel) {
        *out = dflt;
        return PM_OK;
    }
    long i = pm_i_column_index(sel, rd->have_header ? r->f : NULL, r->len, r->n);
    if (i < 0 || (size_t)i >= r->n) {
        char cols[512];
        pm_i_column_list(r->f, r->n, cols, sizeof cols);
        if (i >= 0) {
            return pm_diag_set(diag, PM_EUSAGE, rd->t->source, (long)r->line,
                               "%s %s is past the %zu columns of the first line", opt, sel, r->n);
        }
        return pm_diag_set(diag, PM_EUSAGE, rd->t->source, (long)r->line,
                           "%s '%s' names no column; the columns are %s", opt, sel, cols);
    }
    *out = i;
    return PM_OK;
}

void pm_i_reader_bound(pm_i_reader *rd) {
    if (rd->co && rd->o->format == PM_FORMAT_LONG) { /* rows have the first record's count */
        rd->co->max_fields = rd->ncols;
        rd->co->max_what = rd->have_header ? "header" : "first line";
    }
}

/* Keeps what a note about the header line needs (stats.header_*). */
static pm_err_t keep_header(pm_i_reader *rd, const pm_i_record *r, pm_diag_t *diag) {
    pm_table_t *t = rd->t;
    char line[256], *at = line;
    char sep = rd->co && rd->co->sep ? rd->co->sep : ',';
    for (size_t i = 0; i < r->n && at < line + sizeof line - 2; i++) {
        size_t room = (size_t)(line + sizeof line - 2 - at), l = r->len[i];
        if (i) {
            *at++ = sep;
            room--;
        }
        l = l < room ? l : room;
        memcpy(at, r->f[i], l);
        at += l;
    }
    t->stats.header_line = r->line;
    pm_i_shown(line, (size_t)(at - line), t->stats.header_text, sizeof t->stats.header_text);
    if (rd->o->format == PM_FORMAT_LONG) {
        const char *a = r->f[rd->id], *b = r->f[rd->item];
        size_t al = r->len[rd->id], bl = r->len[rd->item];
        pm_i_trim(&a, &al);
        pm_i_trim(&b, &bl);
        t->hdr_id = pm_i_malloc(al + 1, 1);
        t->hdr_item = pm_i_malloc(bl + 1, 1);
        if (!t->hdr_id || !t->hdr_item) {
            return pm_diag_set(diag, PM_ENOMEM, t->source, 0, "out of memory");
        }
        memcpy(t->hdr_id, a, al);
        t->hdr_id[al] = '\0';
        memcpy(t->hdr_item, b, bl);
        t->hdr_item[bl] = '\0';
    }
    return PM_OK;
}

/* A number, an e-mail address or a code with three digits or more, without spaces. */
static int id_like(const char *s, size_t n) {
    size_t digits = 0, at = 0, dot_after_at = 0;
    for (size_t i = 0; i < n; i++) {
        unsigned char c = (unsigned char)s[i];
        if (c == ' ' || c == '\t') {
            return 0;
        }
        digits += c >= '0' && c <= '9';
        if (c == '@') {
            at++;
        } else if (c == '.' && at) {
            dot_after_at = 1;
        }
    }
    return n && (digits == n || (at == 1 && dot_after_at) || (digits >= 3 && 2 * digits >= n));
}

/* Lines format without --id-col: the first field of one of the first lines (stats.id_like). */
static pm_err_t sample_first_field(pm_table_t *t, const pm_i_record *r, long skip) {
    if (t->id_unlike || t->idsample.count >= 1000 || r->n < 2) {
        return PM_OK;
    }
    size_t k = skip == 0 ? 1 : 0;
    const char *s = r->f[k];
    size_t l = r->len[k];
    pm_i_trim(&s, &l);
    bool added = false;
    if (!id_like(s, l)) {
        t->id_unlike = true;
    } else if (pm_i_strtab_intern(&t->idsample, s, l, &added) < 0) {
        return PM_ENOMEM;
    } else if (!added) {
        t->id_unlike = true;
    } else if (t->idsample.count == 1) {
        pm_i_shown(s, l, t->stats.id_like_example, sizeof t->stats.id_like_example);
    }
    return PM_OK;
}

void pm_i_reader_notes(pm_table_t *t) {
    if (t->hdr_id && t->hdr_item) {
        bool seen = pm_i_strtab_find(&t->items, t->hdr_item, strlen(t->hdr_item)) >= 0;
        size_t idl = strlen(t->hdr_id);
        for (size_t r = 0; !seen && r < (size_t)t->stats.respondents; r++) {
            const char *id = pm_table_respondent(t, r);
            seen = id && strlen(id) == idl && memcmp(id, t->hdr_id, idl) == 0;
        }
        t->stats.header_like_data = seen;
    }
    t->stats.id_like_lines = !t->id_unlike && t->idsample.count >= 3 ? t->idsample.count : 0;
}

static pm_err_t first_record(pm_i_reader *rd, const pm_i_record *r, pm_diag_t *diag) {
    const pm_input_opts_t *o = rd->o;
    pm_err_t rc;
    rd->have_header = !o->no_header;
    if (o->format == PM_FORMAT_LONG) {
        if ((rc = resolve(rd, "--id-col", o->id_col, 0, &rd->id, r, diag)) ||
            (rc = resolve(rd, "--item-col", o->item_col, 1, &rd->item, r, diag)) ||
            (rc = resolve(rd, "--category-col", o->category_col, -1, &rd->cat, r, diag)) ||
            (rc = resolve(rd, "--weight-col", o->weight_col, -1, &rd->weight, r, diag))) {
            return rc;
        }
        if ((size_t)rd->item >= r->n) {
            return pm_diag_set(diag, PM_EDATA, rd->t->source, (long)r->line,
                               "the first line has %zu field%s; long format needs a respondent "
                               "column and an item column (or give --format lines)",
                               r->n, r->n == 1 ? "" : "s");
        }
        if (rd->id == rd->item) {
            return pm_diag_set(diag, PM_EUSAGE, rd->t->source, (long)r->line,
                               "--id-col and --item-col name the same column");
        }
        rd->ncols = r->n;
        pm_i_reader_bound(rd);
    } else {
        if ((rc = resolve(rd, "--id-col", o->id_col, -1, &rd->id, r, diag)) ||
            (rc = resolve(rd, "--weight-col", o->weight_col, -1, &rd->weight, r, diag))) {
            return rc;
        }
        rd->item = -1;
        rd->cat = -1;
    }
    return rd->have_header ? keep_header(rd, r, diag) : PM_OK;
}

static pm_err_t long_row(pm_i_reader *rd, const pm_i_record *r, pm_diag_t *diag) {
    pm_table_t *t = rd->t;
    if (r->n != rd->ncols) {
        return pm_diag_set(diag, PM_EDATA, t->source, (long)r->line,
                           "found %zu fields, expected %zu as on the %s; check the delimiter "
                           "and quoting",
                           r->n, rd->ncols, rd->have_header ? "header" : "first line");
    }
    const char *id = r->f[rd->id];
    size_t idl = r->len[rd->id];
    pm_i_trim(&id, &idl);
    if (idl == 0) {
        return pm_diag_set(diag, PM_EDATA, t->source, (long)r->line,
                           "empty respondent id in column %ld", rd->id + 1);
    }
    uint32_t resp;
    pm_err_t rc = pm_i_table_respondent(t, id, idl, r->line, &resp, diag);
    if (rc) {
        return rc;
    }
    if (rd->weight >= 0) {
        rc = pm_i_table_weight(t, resp, r->f[rd->weight], r->len[rd->weight], r->line, diag);
        if (rc) {
            return rc;
        }
    }
    return pm_i_table_add(t, resp, r->f[rd->item], r->len[rd->item],
                          rd->cat >= 0 ? r->f[rd->cat] : NULL, rd->cat >= 0 ? r->len[rd->cat] : 0,
                          r->line, diag);
}

static pm_err_t lines_row(pm_i_reader *rd, const pm_i_record *r, pm_diag_t *diag) {
    pm_table_t *t = rd->t;
    uint32_t resp;
    pm_err_t rc;
    if (rd->id >= 0) {
        if ((size_t)rd->id >= r->n) {
            return pm_diag_set(diag, PM_EDATA, t->source, (long)r->line,
                               "the line has %zu fields, fewer than --id-col %ld", r->n,
                               rd->id + 1);
        }
        const char *id = r->f[rd->id];
        size_t idl = r->len[rd->id];
        pm_i_trim(&id, &idl);
        if (idl == 0) {
            return pm_diag_set(diag, PM_EDATA, t->source, (long)r->line, "empty respondent id");
        }
        rc = pm_i_table_respondent(t, id, idl, r->line, &resp, diag);
    } else {
        rc = pm_i_table_anon_respondent(t, r->line, &resp, diag);
        if (rc == PM_OK && sample_first_field(t, r, rd->weight) != PM_OK) {
            rc = pm_diag_set(diag, PM_ENOMEM, t->source, 0, "out of memory");
        }
    }
    if (rc) {
        return rc;
    }
    if (rd->weight >= 0) {
        if ((size_t)rd->weight >= r->n) {
            return pm_diag_set(diag, PM_EDATA, t->source, (long)r->line,
                               "the line has %zu fields, fewer than --weight-col %ld", r->n,
                               rd->weight + 1);
        }
        rc = pm_i_table_weight(t, resp, r->f[rd->weight], r->len[rd->weight], r->line, diag);
        if (rc) {
            return rc;
        }
    }
    int any = 0;
    for (size_t i = 0; i < r->n; i++) {
        if ((long)i == rd->id || (long)i == rd->weight) {
            continue;
        }
        const char *s = r->f[i];
        size_t l = r->len[i];
        pm_i_trim(&s, &l);
        if (l == 0) {
            continue;
        }
        any = 1;
        rc = pm_i_table_add(t, resp, s, l, NULL, 0, r->line, diag);
        if (rc) {
            return rc;
        }
    }
    if (!any) {
        t->stats.empty_items++;
    }
    return PM_OK;
}

pm_err_t pm_i_read_record(void *ud, const pm_i_record *r, pm_diag_t *diag) {
    pm_i_reader *rd = ud;
    if (!rd->started) { /* first record: resolve columns */
        rd->started = 1;
        pm_err_t rc = first_record(rd, r, diag);
        if (rc) {
            if (rd->par) {
                pm_i_par_publish(rd->par, rd, 0); /* the other chunks do not start */
            }
            return rc;
        }
        if (rd->have_header) {
            return PM_OK;
        }
    } else if (rd->par && !rd->publisher && pm_i_par_stopped(rd->par)) {
        return pm_diag_set(diag, PM_EINTERNAL, rd->t->source, 0, "stopped");
    } else if (rd->par && rd->publisher && !rd->published && r->line >= PM_I_PAR_START_LINE) {
        /* the first lines read well: the other chunks can start (a file that goes wrong at
         * once, e.g. a quote never closed, is then not read in parallel at all) */
        rd->published = 1;
        pm_i_par_publish(rd->par, rd, 1);
    }
    rd->t->stats.records++;
    return rd->o->format == PM_FORMAT_LONG ? long_row(rd, r, diag) : lines_row(rd, r, diag);
}

int pm_i_no_fast_lines;
int pm_i_hash_stall;

/* One plain line of the fast path, split (lines_split) before it is taken (lines_take). */
typedef struct {
    const char *id, *item;
    size_t idl, iteml;
    uint64_t h; /* pm_i_hash of the item */
    char *next; /* the next line */
} plain_line;

/* Lines are split this many ahead of their use, each item's slot fetched into the cache
 * meanwhile: the item lookup (50,000 names: a cache miss per row) then rarely waits. */
#define LINES_AHEAD 16

/* Splits the line at `at` (before end) into *pl and fetches its item's slot: 1, or 0 when the
 * line is not plain (see pm_i_read_lines). *cr: the next CR at or after at, or NULL. */
static int lines_split(char *at, const char *end, const char **cr, char sep, int id_first,
                       const pm_i_strtab *items, plain_line *pl) {
    char *nl = memchr(at, '\n', (size_t)(end - at));
    if (!nl) {
        return 0;
    }
    char *le = nl;
    if (*cr && *cr < nl) {
        if (*cr != nl - 1) {
            return 0; /* a CR inside the line: libcsv ends a record there */
        }
        le = nl - 1; /* CRLF */
        *cr = nl + 1 < end ? memchr(nl + 1, '\r', (size_t)(end - nl - 1)) : NULL;
    }
    char *d = memchr(at, sep, (size_t)(le - at));
    if (!d || d == at || d + 1 == le || memchr(d + 1, sep, (size_t)(le - d - 1))) {
        return 0; /* not two non-empty fields */
    }
    const char *f0 = at, *f1 = d + 1;
    size_t l0 = (size_t)(d - at), l1 = (size_t)(le - d - 1);
    if (f0[0] == ' ' || f0[0] == '\t' || f0[l0 - 1] == ' ' || f0[l0 - 1] == '\t' || f1[0] == ' ' ||
        f1[0] == '\t' || f1[l1 - 1] == ' ' || f1[l1 - 1] == '\t' || l0 > PM_INPUT_MAX_FIELD ||
        l1 > PM_INPUT_MAX_FIELD) {
        return 0;
    }
    pl->id = id_first ? f0 : f1;
    pl->item = id_first ? f1 : f0;
    pl->idl = id_first ? l0 : l1;
    pl->iteml = id_first ? l1 : l0;
    pl->h = pm_i_hash(pl->item, pl->iteml);
    pm_i_strtab_prefetch(items, pl->h);
    pl->next = nl + 1;
    return 1;
}

/* The row of plain line pl, with exactly the effect pm_i_read_record gives it. */
static pm_err_t lines_take(pm_table_t *t, const plain_line *pl, uint64_t line, pm_diag_t *diag) {
    pm_err_t rc;
    t->stats.records++;
    uint32_t resp;
    if (t->last_r >= 0 && pl->idl == t->last_len && pm_i_same_id(pl->id, t->last_id, pl->idl)) {
        resp = (uint32_t)t->last_r;
    } else if ((rc = pm_i_table_respondent(t, pl->id, pl->idl, line, &resp, diag)) != PM_OK) {
        return rc;
    }
    int64_t it = pm_i_strtab_find_h(&t->items, pl->item, pl->iteml, pl->h);
    if (it < 0 || t->n_rows >= t->rows_cap) {
        /* a new item or full row arrays: the record path's function does the rest */
        return pm_i_table_add(t, resp, pl->item, pl->iteml, NULL, 0, line, diag);
    }
    t->row_resp[t->n_rows] = resp;
    t->row_item[t->n_rows] = (uint32_t)it;
    if (t->row_tag) { /* a row under the name it was read with */
        t->row_tag[t->n_rows] = 0;
    }
    t->n_rows++;
    t->resp_has_item[resp] = 1;
    t->stats.rows++;
    return PM_OK;
}

/* The plain lines of a two-column long file (respondent and item, no category or weight
 * column, no --drop-item or --merge-items), read without building records: the usual case,
 * and most of the reading time. Every line it takes has exactly the effect pm_i_read_record
 * would give it; it leaves to pm_i_read_record every line that could be different in any way
 * (see pm_i_lines_fn): a line without its '\n' in p, a CR other than a final CRLF one, a field
 * count other than two, an empty field, a space or tab at a field's edge (trimmed by the record
 * path), a field over the length limit, and the lines where the parallel reader must look at
 * the stream. Lines are split up to LINES_AHEAD before they are taken, in the same order. */
pm_err_t pm_i_read_lines(void *ud, char *p, size_t len, uint64_t line, char sep, size_t *used,
                         uint64_t *nlines, pm_diag_t *diag) {
    pm_i_reader *rd = ud;
    pm_table_t *t = rd->t;
    *used = 0;
    *nlines = 0;
    if (pm_i_no_fast_lines || !rd->started || rd->o->format != PM_FORMAT_LONG || rd->ncols != 2 ||
        rd->cat >= 0 || rd->weight >= 0 || rd->id == rd->item || rd->id < 0 || rd->id > 1 ||
        t->drop.count || t->merge_from.count || !t->defer || t->n_anon) {
        return PM_OK;
    }
    if (rd->par && !rd->publisher && pm_i_par_stopped(rd->par)) {
        return PM_OK; /* pm_i_read_record stops the stream */
    }
    uint64_t stop_line = UINT64_MAX;
    if (rd->par && rd->publisher && !rd->published) {
        stop_line = PM_I_PAR_START_LINE; /* pm_i_read_record lets the others start there */
    }
    const char *end = p + len;
    const char *cr = memchr(p, '\r', len); /* the next CR, or NULL */
    char *at = p, *split = p;              /* lines before `split` are in pl[] */
    const int id_first = rd->id == 0;
    plain_line pl[LINES_AHEAD];
    pm_err_t rc = PM_OK;
    int more = 1;
    while (more && rc == PM_OK) {
        size_t n = 0;
        while (n < LINES_AHEAD && split < end && line + n < stop_line &&
               lines_split(split, end, &cr, sep, id_first, &t->items, &pl[n])) {
            split = pl[n++].next;
        }
        more = n == LINES_AHEAD;
        for (size_t k = 0; k < n; k++) {
            if ((rc = lines_take(t, &pl[k], line, diag)) != PM_OK) {
                break;
            }
            line++;
            (*nlines)++;
            at = pl[k].next;
        }
    }
    *used = (size_t)(at - p);
    return rc;
}

/* The first chunk's side of a parallel read (src/read_par.c): see struct pm_i_par_shared. */
void pm_i_par_publish(pm_i_par_shared *ps, const pm_i_reader *rd, int ok) {
    pthread_mutex_lock(&ps->mu);
    if (ps->state == 0) { /* later calls change nothing */
        ps->state = ok ? 1 : -1;
        ps->tmpl = *rd;
        ps->sep = ps->co0->sep ? ps->co0->sep : ',';
        if (!ok) {
            atomic_store(&ps->stop, 1);
        }
    }
    pthread_cond_broadcast(&ps->cv);
    pthread_mutex_unlock(&ps->mu);
}
