/* Wide survey exports (issue 7): one row per respondent, one column per answer option, several
 * multi-select questions side by side. One streaming pass: the header picks each question's
 * option columns (--columns PREFIX); every row is one respondent. An item is its (question,
 * label); items are named `label (category)` at the end where the label alone is ambiguous. */
#include "input_internal.h"

#include <ctype.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* Characters that separate a prefix from an option name ("drinks_3", "hot dishes: Ramen"). */
static const char SEPS[] = "_-:. \t";

enum { KIND_NONE = 0, KIND_LABEL = 1, KIND_FLAG = 2 };
enum { ACT_DROP = 1, ACT_MERGED = 2 };

/* Longest built-in "not chosen" or flag word, in bytes ("false"). */
#define WORD_MAX 5

typedef struct {
    const char *prefix; /* trimmed, borrowed from the options */
    size_t plen;
    char *cat; /* the question's category, owned */
    size_t catlen;
    size_t ncols;
} question;

/* An option column decides its kind (labels or flags) at its first chosen cell; a later cell of
 * the other kind is an error naming that line. */
typedef struct {
    int32_t q; /* question, -1: not an option column */
    int kind;
    uint64_t kind_line;
    char kind_val[48]; /* the cell that decided the kind, shortened */
    char *name;        /* trimmed header, owned */
    const char *opt;   /* flag columns: the item label (header without prefix), into name */
    size_t optlen;
    int64_t last_rid; /* raw key id of the column's last chosen label, -1 = none */
    char *last;       /* label columns: that label (a column mostly repeats one label) */
    size_t last_len, last_cap;
} column;

/* What --drop-item and --merge-file make of one (question, label), found once per distinct
 * pair: the internal key of the item it counts as (interned in wide.keys, stable). */
typedef struct {
    uint8_t act;
    const char *key;
    size_t keylen;
    uint64_t cells; /* label columns: cells that held it */
    uint32_t col;   /* the column it was first seen in */
} rawinfo;

typedef struct {
    pm_table_t *t;
    const pm_input_opts_t *o;
    pm_i_csv_opts *co; /* max_fields: the header's count once it is read */
    int started;
    size_t ncols;
    long id, weight; /* column indices; weight -1 = none */
    column *cols;
    question *qs;
    size_t nq;
    size_t *opt_cols; /* indices of option columns, in file order */
    size_t nopt;
    size_t *chosen; /* option columns chosen in the current row */
    size_t nchosen;
    pm_i_strtab dropv; /* --drop-value, lower-cased */
    size_t dropv_max;
    /* hygiene, moved out of the table while reading so that pm_i_table_add does not apply it to
     * the internal keys: it is applied here to the labels instead */
    pm_i_strtab drop, mfrom;
    pm_i_strtab raw;  /* "label\x1fcategory" as read -> rawinfo */
    pm_i_strtab keys; /* the keys given to pm_i_table_add */
    rawinfo *rinfo;
    size_t rinfo_cap;
    pm_i_strtab blank; /* ids of respondents left out (--base answered): checked against the
                        * respondents' ids at the end, for duplicates */
    uint64_t *blank_line;
    size_t blank_cap;
    char *buf; /* key and name scratch */
    size_t buf_cap;
} wide;

/* ==== small helpers ========================================================================== */

static int is_sep(char c) {
    return c != '\0' && strchr(SEPS, c) != NULL;
}

static char lower(char c) {
    return (c >= 'A' && c <= 'Z') ? (char)(c - 'A' + 'a') : c;
}

/* s[0..n) equals the lower-case word w in ASCII letter case. */
static int word_eq(const char *s, size_t n, const char *w) {
    size_t wl = strlen(w);
    if (n != wl) {
        return 0;
    }
    for (size_t i = 0; i < n; i++) {
        if (lower(s[i]) != w[i]) {
            return 0;
        }
    }
    return 1;
}

static int is_flag(const char *s, size_t n) {
    return word_eq(s, n, "1") || word_eq(s, n, "yes") || word_eq(s, n, "true");
}

/* A trimmed cell means "not chosen": empty, 0, no, false, or a --drop-value (ASCII case
 * ignored). */
static int not_chosen(wide *w, const char *s, size_t n) {
    if (n == 0 || word_eq(s, n, "0") || word_eq(s, n, "no") || word_eq(s, n, "false")) {
        return 1;
    }
    if (w->dropv.count == 0 || n > w->dropv_max) {
        return 0;
    }
    char tmp[256];
    char *p = n < sizeof tmp ? tmp : w->buf; /* w->buf holds dropv_max + 1 bytes */
    for (size_t i = 0; i < n; i++) {
        p[i] = lower(s[i]);
    }
    return pm_i_strtab_find(&w->dropv, p, n) >= 0;
}

static pm_err_t oom(const wide *w, pm_diag_t *diag) {
    return pm_diag_set(diag, PM_ENOMEM, w->t->source, 0, "out of memory");
}

static int reserve(wide *w, size_t n) {
    return n <= w->buf_cap ? 0 : pm_i_grow((void **)&w->buf, &w->buf_cap, n, 1);
}

/* pm_i_trim for the common case of a cell without surrounding white space (the CSV reader
 * has already removed spaces and tabs around unquoted fields). */
static void trim(const char **s, size_t *n) {
    if (*n && ((unsigned char)(*s)[0] <= ' ' || (unsigned char)(*s)[*n - 1] <= ' ')) {
        pm_i_trim(s, n);
    }
}

/* Writes label \x1f category into w->buf; returns the length. The unit separator cannot
 * appear in a category (it is a control character, and categories come from prefixes that
 * match header names); the label is recovered from the length of the item's category. */
static int make_key(wide *w, const char *label, size_t ll, const question *q, size_t *len) {
    if (reserve(w, ll + q->catlen + 2)) {
        return -1;
    }
    memcpy(w->buf, label, ll);
    w->buf[ll] = '\x1f';
    memcpy(w->buf + ll + 1, q->cat, q->catlen);
    w->buf[ll + 1 + q->catlen] = '\0';
    *len = ll + 1 + q->catlen;
    return 0;
}

/* "label (category)" into w->buf. */
static int make_qualified(wide *w, const char *label, size_t ll, const char *cat, size_t cl,
                          size_t *len) {
    if (reserve(w, ll + cl + 4)) {
        return -1;
    }
    memcpy(w->buf, label, ll);
    memcpy(w->buf + ll, " (", 2);
    memcpy(w->buf + ll + 2, cat, cl);
    memcpy(w->buf + ll + 2 + cl, ")", 2);
    *len = ll + cl + 3;
    return 0;
}

/* A name given to --drop-item or --merge-file matches the label alone (under every question)
 * or `label (category)` (under that question only). */
static int64_t find_name(wide *w, const pm_i_strtab *tab, const char *label, size_t ll,
                         const question *q, int *err) {
    *err = 0;
    if (tab->count == 0) {
        return -1;
    }
    size_t n;
    if (make_qualified(w, label, ll, q->cat, q->catlen, &n)) {
        *err = 1;
        return -1;
    }
    int64_t id = pm_i_strtab_find(tab, w->buf, n);
    return id >= 0 ? id : pm_i_strtab_find(tab, label, ll);
}

/* Decides once what hygiene does to the raw (question, label) with id rid. */
static int resolve_raw(wide *w, int64_t rid, const question *q) {
    pm_table_t *t = w->t;
    size_t ll = w->raw.len[rid] - q->catlen - 1;
    const char *label = w->raw.str[rid];
    size_t cap = w->rinfo_cap;
    if (pm_i_grow((void **)&w->rinfo, &cap, (size_t)rid + 1, sizeof *w->rinfo)) {
        return -1;
    }
    w->rinfo_cap = cap;
    rawinfo *ri = &w->rinfo[rid];
    ri->act = 0;
    ri->key = w->raw.str[rid];
    ri->keylen = w->raw.len[rid];
    int err;
    int64_t d = find_name(w, &w->drop, label, ll, q, &err);
    if (d >= 0) {
        t->drop_hit[d] = 1;
        ri->act = ACT_DROP;
        return 0;
    }
    int64_t m = err ? -1 : find_name(w, &w->mfrom, label, ll, q, &err);
    if (m >= 0) {
        int64_t g = t->merge_to[m];
        const char *gl = t->merge_to_names.str[g];
        size_t gn = t->merge_to_names.len[g];
        t->merge_hit[m] = 1;
        ri->act = ACT_MERGED;
        if ((d = find_name(w, &w->drop, gl, gn, q, &err)) >= 0) {
            t->drop_hit[d] = 1;
            ri->act |= ACT_DROP;
        }
        size_t kl;
        int64_t k;
        if (err || make_key(w, gl, gn, q, &kl) ||
            (k = pm_i_strtab_intern(&w->keys, w->buf, kl, NULL)) < 0) {
            return -1;
        }
        ri->key = w->keys.str[k];
        ri->keylen = w->keys.len[k];
    }
    return err ? -1 : 0;
}

/* ==== header ================================================================================= */

/* The category of a prefix: without trailing digits and separators ("Q1_" -> "Q"), or with
 * digits kept (level 2) when level 1 is empty or shared with another question. */
static size_t cat_len(const char *p, size_t n, int keep_digits) {
    while (n && (is_sep(p[n - 1]) || (!keep_digits && isdigit((unsigned char)p[n - 1])))) {
        n--;
    }
    return n;
}

static pm_err_t usage_cols(wide *w, const pm_i_record *r, pm_diag_t *diag, const char *fmt,
                           const char *arg) {
    char cols[700];
    pm_i_column_list(r->f, r->n, cols, sizeof cols);
    char msg[300];
    snprintf(msg, sizeof msg, fmt, arg);
    return pm_diag_set(diag, PM_EUSAGE, w->t->source, (long)r->line, "%s; the columns are %s", msg,
                       cols);
}

static pm_err_t pick_column(wide *w, const pm_i_record *r, const char *opt, const char *sel,
                            long dflt, long *out, pm_diag_t *diag) {
    if (!sel) {
        *out = dflt;
        return PM_OK;
    }
    long i = pm_i_column_index(sel, r->f, r->len, r->n);
    if (i < 0 || (size_t)i >= r->n) {
        char what[200];
        snprintf(what, sizeof what, "%s '%%s' names no column", opt);
        return usage_cols(w, r, diag, what, sel);
    }
    *out = i;
    return PM_OK;
}

static pm_err_t setup_questions(wide *w, pm_diag_t *diag) {
    const pm_input_opts_t *o = w->o;
    w->nq = o->n_columns;
    w->qs = pm_i_calloc(w->nq, sizeof *w->qs);
    if (!w->qs) {
        return oom(w, diag);
    }
    for (size_t i = 0; i < w->nq; i++) {
        const char *p = o->columns[i];
        size_t n = strlen(p);
        pm_i_trim(&p, &n);
        if (n == 0) {
            return pm_diag_set(diag, PM_EUSAGE, NULL, 0,
                               "--columns needs a non-empty prefix of the option columns");
        }
        for (size_t j = 0; j < i; j++) {
            if (w->qs[j].plen == n && memcmp(w->qs[j].prefix, p, n) == 0) {
                return pm_diag_set(diag, PM_EUSAGE, NULL, 0, "--columns '%.*s' is given twice",
                                   (int)n, p);
            }
        }
        w->qs[i].prefix = p;
        w->qs[i].plen = n;
    }
    /* categories: level 1 unless it is empty or another question has the same level 1 */
    for (size_t i = 0; i < w->nq; i++) {
        question *q = &w->qs[i];
        size_t l1 = cat_len(q->prefix, q->plen, 0);
        int shared = l1 == 0;
        for (size_t j = 0; j < w->nq && !shared; j++) {
            const question *b = &w->qs[j];
            shared = j != i && cat_len(b->prefix, b->plen, 0) == l1 &&
                     memcmp(b->prefix, q->prefix, l1) == 0;
        }
        size_t l = shared ? cat_len(q->prefix, q->plen, 1) : l1;
        if (l == 0) {
            l = q->plen; /* a prefix of separators only: keep it as it is */
        }
        q->cat = pm_i_malloc(l + 1, 1);
        if (!q->cat) {
            return oom(w, diag);
        }
        memcpy(q->cat, q->prefix, l);
        q->cat[l] = '\0';
        q->catlen = l;
    }
    for (size_t i = 0; i < w->nq; i++) {
        for (size_t j = 0; j < i; j++) {
            if (w->qs[i].catlen == w->qs[j].catlen &&
                memcmp(w->qs[i].cat, w->qs[j].cat, w->qs[i].catlen) == 0) {
                return pm_diag_set(diag, PM_EUSAGE, NULL, 0,
                                   "--columns '%.*s' and '%.*s' both give the question "
                                   "(category) '%s'; use prefixes that differ in more than "
                                   "their trailing separators",
                                   (int)w->qs[j].plen, w->qs[j].prefix, (int)w->qs[i].plen,
                                   w->qs[i].prefix, w->qs[i].cat);
            }
        }
    }
    return PM_OK;
}

static pm_err_t header(wide *w, const pm_i_record *r, pm_diag_t *diag) {
    const pm_input_opts_t *o = w->o;
    pm_err_t rc;
    w->ncols = r->n;
    w->cols = pm_i_calloc(r->n, sizeof *w->cols);
    w->opt_cols = pm_i_calloc(r->n, sizeof *w->opt_cols);
    w->chosen = pm_i_calloc(r->n, sizeof *w->chosen);
    if (!w->cols || !w->opt_cols || !w->chosen) {
        return oom(w, diag);
    }
    for (size_t i = 0; i < r->n; i++) {
        const char *h = r->f[i];
        size_t hl = r->len[i];
        pm_i_trim(&h, &hl);
        column *c = &w->cols[i];
        c->q = -1;
        c->last_rid = -1;
        c->name = pm_i_malloc(hl + 1, 1);
        if (!c->name) {
            return oom(w, diag);
        }
        memcpy(c->name, h, hl);
        c->name[hl] = '\0';
    }
    if ((rc = pick_column(w, r, "--id-col", o->id_col, 0, &w->id, diag)) ||
        (rc = pick_column(w, r, "--weight-col", o->weight_col, -1, &w->weight, diag)) ||
        (rc = setup_questions(w, diag))) {
        return rc;
    }
    if (w->weight == w->id) {
        return pm_diag_set(diag, PM_EUSAGE, w->t->source, (long)r->line,
                           "--id-col and --weight-col name the same column");
    }
    unsigned char *skip = pm_i_calloc(r->n, 1);
    if (!skip) {
        return oom(w, diag);
    }
    for (size_t k = 0; k < o->n_skip_cols; k++) {
        long i = pm_i_column_index(o->skip_cols[k], r->f, r->len, r->n);
        if (i < 0 || (size_t)i >= r->n) {
            free(skip);
            return usage_cols(w, r, diag, "--skip-col '%s' names no column", o->skip_cols[k]);
        }
        skip[i] = 1;
    }
    /* each remaining column belongs to the question with the longest matching prefix */
    size_t *matched = pm_i_calloc(w->nq, sizeof *matched); /* columns a prefix matches at all */
    if (!matched) {
        free(skip);
        return oom(w, diag);
    }
    for (size_t i = 0; i < r->n; i++) {
        column *c = &w->cols[i];
        size_t hl = strlen(c->name);
        long best = -1;
        for (size_t q = 0; q < w->nq; q++) {
            const question *qq = &w->qs[q];
            if (hl >= qq->plen && memcmp(c->name, qq->prefix, qq->plen) == 0) {
                matched[q]++;
                if (best < 0 || qq->plen > w->qs[best].plen) {
                    best = (long)q;
                }
            }
        }
        if (best < 0 || (long)i == w->id || (long)i == w->weight || skip[i]) {
            continue;
        }
        c->q = (int32_t)best;
        w->qs[best].ncols++;
        w->opt_cols[w->nopt++] = i;
        /* flag columns name their item by the header without prefix and separators */
        const char *rest = c->name + w->qs[best].plen;
        while (is_sep(*rest)) {
            rest++;
        }
        c->opt = *rest ? rest : c->name;
        c->optlen = strlen(c->opt);
    }
    free(skip);
    for (size_t q = 0; q < w->nq; q++) {
        if (w->qs[q].ncols == 0) {
            const char *what = matched[q] ? "--columns '%s' matches only the id, weight or "
                                            "skipped columns"
                                          : "--columns '%s' matches no column";
            char p[300];
            snprintf(p, sizeof p, "%.*s", (int)w->qs[q].plen, w->qs[q].prefix);
            free(matched);
            return usage_cols(w, r, diag, what, p);
        }
    }
    free(matched);
    return PM_OK;
}

/* ==== rows =================================================================================== */

static pm_err_t duplicate_id(wide *w, const pm_i_record *r, const char *id, size_t idl,
                             uint64_t first, pm_diag_t *diag) {
    return pm_diag_set(diag, PM_EDATA, w->t->source, (long)r->line,
                       "the respondent on this line has a second row (the first is on line "
                       "%llu); a wide file holds one row per respondent ",
                       (unsigned long long)first);
}

/* A respondent who chose nothing, left out of N (--base answered). */
static pm_err_t blank_row(wide *w, const pm_i_record *r, const char *id, size_t idl,
                          pm_diag_t *diag) {
    pm_table_t *t = w->t;
    bool added;
    int64_t b = pm_i_strtab_intern(&w->blank, id, idl, &added);
    if (b < 0) {
        return oom(w, diag);
    }
    if (!added) {
        return duplicate_id(w, r, id, idl, w->blank_line[b], diag);
    }
    if (pm_i_grow((void **)&w->blank_line, &w->blank_cap, (size_t)b + 1, sizeof(uint64_t))) {
        return oom(w, diag);
    }
    w->blank_line[b] = r->line;
    t->stats.blank_excluded++;
    return PM_OK;
}

static pm_err_t add_choice(wide *w, uint32_t resp, size_t ci, const pm_i_record *r,
                           pm_diag_t *diag) {
    pm_table_t *t = w->t;
    column *c = &w->cols[ci];
    const question *q = &w->qs[c->q];
    const char *label = c->opt;
    size_t ll = c->optlen;
    if (c->kind == KIND_LABEL) {
        label = r->f[ci];
        ll = r->len[ci];
        trim(&label, &ll);
    }
    int64_t rid = c->last_rid;
    if (rid < 0 ||
        (c->kind == KIND_LABEL && (ll != c->last_len || memcmp(label, c->last, ll) != 0))) {
        if (!pm_i_utf8_valid(label, ll)) {
            char b1[96], b2[96];
            return pm_diag_set(diag, PM_EDATA, t->source, (long)r->line,
                               "invalid UTF-8 in '%s' (column '%s'); save the file as UTF-8",
                               pm_i_shown(label, ll, b1, sizeof b1),
                               pm_i_shown(c->name, strlen(c->name), b2, sizeof b2));
        }
        size_t kl;
        bool added;
        if (make_key(w, label, ll, q, &kl) ||
            (rid = pm_i_strtab_intern(&w->raw, w->buf, kl, &added)) < 0 ||
            (added && resolve_raw(w, rid, q))) {
            return oom(w, diag);
        }
        c->last_rid = rid;
        if (added) {
            w->rinfo[rid].cells = 0;
            w->rinfo[rid].col = (uint32_t)ci;
        }
        if (c->kind == KIND_LABEL) {
            if (pm_i_grow((void **)&c->last, &c->last_cap, ll + 1, 1)) {
                return oom(w, diag);
            }
            memcpy(c->last, label, ll);
            c->last_len = ll;
        }
    }
    rawinfo *ri = &w->rinfo[rid];
    ri->cells += c->kind == KIND_LABEL;
    if (ri->act & ACT_MERGED) {
        t->stats.merged_rows++;
    }
    if (ri->act & ACT_DROP) {
        t->stats.dropped_rows++;
        return PM_OK;
    }
    t->add_tag = ri->act & ACT_MERGED ? (uint32_t)rid + 1 : 0; /* the option merged */
    pm_err_t rc = pm_i_table_add(t, resp, ri->key, ri->keylen, q->cat, q->catlen, r->line, diag);
    t->add_tag = 0;
    return rc;
}

static pm_err_t row(wide *w, const pm_i_record *r, pm_diag_t *diag) {
    pm_table_t *t = w->t;
    t->stats.records++;
    if (r->n != w->ncols) {
        return pm_diag_set(diag, PM_EDATA, t->source, (long)r->line,
                           "found %zu fields, expected %zu as on the header; check the "
                           "delimiter and quoting",
                           r->n, w->ncols);
    }
    const char *id = r->f[w->id];
    size_t idl = r->len[w->id];
    trim(&id, &idl);
    if (idl == 0) {
        char b[96];
        const char *h = w->cols[w->id].name;
        return pm_diag_set(diag, PM_EDATA, t->source, (long)r->line,
                           "empty respondent id in column '%s'",
                           pm_i_shown(h, strlen(h), b, sizeof b));
    }
    w->nchosen = 0;
    for (size_t k = 0; k < w->nopt; k++) {
        size_t ci = w->opt_cols[k];
        const char *s = r->f[ci];
        size_t l = r->len[ci];
        trim(&s, &l);
        if (not_chosen(w, s, l)) {
            continue;
        }
        column *c = &w->cols[ci];
        int kind = is_flag(s, l) ? KIND_FLAG : KIND_LABEL;
        if (c->kind == KIND_NONE) {
            c->kind = kind;
            c->kind_line = r->line;
            pm_i_shown(s, l, c->kind_val, sizeof c->kind_val);
        } else if (c->kind != kind) {
            char b1[96], b2[96];
            return pm_diag_set(diag, PM_EDATA, t->source, (long)r->line,
                               "column '%s' mixes option labels and 1/0, yes/no or true/false "
                               "flags: '%s' here but '%s' on line %llu; a column holds "
                               "either its option's label or a flag (give --drop-value for a "
                               "value that means 'not chosen')",
                               pm_i_shown(c->name, strlen(c->name), b1, sizeof b1),
                               pm_i_shown(s, l, b2, sizeof b2), c->kind_val,
                               (unsigned long long)c->kind_line);
        }
        w->chosen[w->nchosen++] = ci;
    }
    if (w->nchosen == 0 && !w->o->base_all) {
        return blank_row(w, r, id, idl, diag);
    }
    uint64_t before = t->stats.respondents;
    uint32_t resp;
    pm_err_t rc = pm_i_table_respondent(t, id, idl, r->line, &resp, diag);
    if (rc) {
        return rc;
    }
    if (t->stats.respondents == before) {
        return duplicate_id(w, r, id, idl, t->resp_line[resp], diag);
    }
    if (w->weight >= 0) {
        rc = pm_i_table_weight(t, resp, r->f[w->weight], r->len[w->weight], r->line, diag);
        if (rc) {
            return rc;
        }
    }
    if (w->nchosen == 0) {
        t->stats.empty_items++; /* --base all: in N, no item */
    }
    for (size_t k = 0; k < w->nchosen; k++) {
        rc = add_choice(w, resp, w->chosen[k], r, diag);
        if (rc) {
            return rc;
        }
    }
    return PM_OK;
}

static pm_err_t on_rec(void *ud, const pm_i_record *r, pm_diag_t *diag) {
    wide *w = ud;
    if (!w->started) {
        w->started = 1;
        w->co->max_fields = r->n; /* rows have no more fields than the header */
        w->co->max_what = "header";
        return header(w, r, diag);
    }
    return row(w, r, diag);
}

/* A respondent left out as blank whose id also has a row with choices. Checked once at the
 * end (blank rows are few), so that the rows with choices need no second lookup. */
static pm_err_t blank_duplicates(wide *w, pm_diag_t *diag) {
    pm_table_t *t = w->t;
    for (size_t b = 0; b < w->blank.count; b++) {
        int64_t r = pm_i_strtab_find(&t->resp, w->blank.str[b], w->blank.len[b]);
        if (r >= 0) {
            uint64_t lb = w->blank_line[b], lr = t->resp_line[r];
            return pm_diag_set(diag, PM_EDATA, t->source, (long)(lb > lr ? lb : lr),
                               "the respondent on this line has a second row (the first is on "
                               "line %llu); a wide file holds one row per respondent",
                               (unsigned long long)(lb < lr ? lb : lr));
        }
    }
    return PM_OK;
}

/* ==== naming ================================================================================= */

/* Replaces the internal keys "label\x1fcategory" of t->items by the names users see: the
 * label, or `label (category)` where the label names items of two or more questions. Ids do
 * not change, so row_item stays valid. */
static pm_err_t name_items(wide *w, pm_diag_t *diag) {
    pm_table_t *t = w->t;
    size_t n = t->items.count;
    pm_err_t rc = PM_OK;
    pm_i_strtab labels, names;
    pm_i_strtab_init(&labels);
    pm_i_strtab_init(&names);
    uint32_t *lab = pm_i_malloc(n, sizeof *lab);
    uint32_t *cnt = pm_i_calloc(n, sizeof *cnt);
    if (!lab || !cnt) {
        rc = oom(w, diag);
        goto cleanup;
    }
    for (size_t i = 0; i < n; i++) {
        size_t ll = t->items.len[i] - t->cats.len[t->item_cat[i]] - 1;
        int64_t id = pm_i_strtab_intern(&labels, t->items.str[i], ll, NULL);
        if (id < 0) {
            rc = oom(w, diag);
            goto cleanup;
        }
        lab[i] = (uint32_t)id;
        cnt[id]++;
    }
    for (size_t i = 0; i < n; i++) {
        const char *l = labels.str[lab[i]];
        size_t ll = labels.len[lab[i]], nl = ll;
        const char *name = l;
        if (cnt[lab[i]] > 1) {
            int32_t c = t->item_cat[i];
            if (make_qualified(w, l, ll, t->cats.str[c], t->cats.len[c], &nl)) {
                rc = oom(w, diag);
                goto cleanup;
            }
            name = w->buf;
        }
        bool added;
        int64_t id = pm_i_strtab_intern(&names, name, nl, &added);
        if (id < 0) {
            rc = oom(w, diag);
            goto cleanup;
        }
        if (!added) {
            size_t j = (size_t)id;
            rc = pm_diag_set(diag, PM_EDATA, t->source, (long)t->item_line[i],
                             "the item name '%s' would stand for two items: '%s' under '%s' "
                             "(line %llu) and '%s' under '%s'; rename one of the labels",
                             names.str[j], labels.str[lab[j]], t->cats.str[t->item_cat[j]],
                             (unsigned long long)t->item_line[j], l, t->cats.str[t->item_cat[i]]);
            goto cleanup;
        }
    }
    pm_i_strtab_destroy(&t->items);
    t->items = names;
    pm_i_strtab_init(&names);
cleanup:
    free(lab);
    free(cnt);
    pm_i_strtab_destroy(&labels);
    pm_i_strtab_destroy(&names);
    return rc;
}

/* ==== pitfalls said out loud ================================================================= */

/* A label that reads as "not asked" rather than an option: only ASCII punctuation and spaces,
 * or a dash or ellipsis, or a word a survey export writes for a missing answer. */
static int placeholder_like(const char *s, size_t n) {
    static const char *const words[] = {
        "n/a", "na", "null", "nan", "missing", "not asked", "not applicable", "skipped", NULL};
    for (int k = 0; words[k]; k++) {
        if (word_eq(s, n, words[k])) {
            return 1;
        }
    }
    for (size_t i = 0; i < n;) {
        unsigned char c = (unsigned char)s[i];
        if (c < 0x80) {
            if (isalnum(c)) {
                return 0;
            }
            i++;
        } else if (n - i >= 3 && c == 0xE2 && (unsigned char)s[i + 1] == 0x80 &&
                   ((unsigned char)s[i + 2] == 0x93 || (unsigned char)s[i + 2] == 0x94 ||
                    (unsigned char)s[i + 2] == 0xA6)) {
            i += 3; /* U+2013, U+2014, U+2026 */
        } else {
            return 0;
        }
    }
    return 1;
}

/* The label of raw id rid (the key without its category). */
static size_t raw_label(const wide *w, int64_t rid, const char **s) {
    const char *k = w->raw.str[rid];
    const char *sep = memchr(k, '\x1f', w->raw.len[rid]);
    *s = k;
    return sep ? (size_t)(sep - k) : w->raw.len[rid];
}

/* The three raw ids of column ci (or of question qi when ci is SIZE_MAX) with the most cells,
 * placeholder-like ones only (ph 1) or the others (ph 0), as "'a' (12), 'b' (9)" in buf.
 * Returns how many ids matched and sets *cells to their cells. */
static size_t top_labels(const wide *w, size_t ci, int32_t qi, int ph, char *buf, size_t cap,
                         uint64_t *cells, size_t *rare, int64_t *top) {
    int64_t best[3] = {-1, -1, -1};
    size_t n = 0;
    *cells = 0;
    *rare = 0;
    for (size_t r = 0; r < w->raw.count; r++) {
        const rawinfo *ri = &w->rinfo[r];
        if (ri->cells == 0 || (ci != SIZE_MAX ? ri->col != ci : w->cols[ri->col].q != qi)) {
            continue;
        }
        const char *s;
        size_t l = raw_label(w, (int64_t)r, &s);
        if (placeholder_like(s, l) != ph) {
            continue;
        }
        n++;
        *cells += ri->cells;
        *rare += ri->cells <= 2;
        for (int k = 0; k < 3; k++) {
            if (best[k] < 0 || ri->cells > w->rinfo[best[k]].cells) {
                for (int j = 2; j > k; j--) {
                    best[j] = best[j - 1];
                }
                best[k] = (int64_t)r;
                break;
            }
        }
    }
    size_t used = 0;
    buf[0] = '\0';
    *top = best[0];
    for (int k = 0; k < 3 && best[k] >= 0 && used < cap; k++) {
        const char *s;
        size_t l = raw_label(w, best[k], &s);
        char b[96];
        int m =
            snprintf(buf + used, cap - used, "%s'%s' (%llu cells)", k ? ", " : "",
                     pm_i_shown(s, l, b, sizeof b), (unsigned long long)w->rinfo[best[k]].cells);
        used += m > 0 ? (size_t)m : 0;
    }
    return n;
}

/* Notes on what a selected question's columns hold that is likely not an option: free text
 * (a label column with many different answers, most given once or twice, or with several
 * where the question's other label columns hold one each) and placeholders such as '-'. */
static int pitfall_notes(wide *w) {
    char list[400];
    uint64_t cells;
    size_t rare;
    int64_t top;
    for (size_t qi = 0; qi < w->nq; qi++) {
        size_t single = 0, labelcols = 0;
        for (size_t ci = 0; ci < w->ncols; ci++) {
            if (w->cols[ci].q == (int32_t)qi && w->cols[ci].kind == KIND_LABEL) {
                labelcols++;
                single += top_labels(w, ci, 0, 0, list, sizeof list, &cells, &rare, &top) <= 1;
            }
        }
        for (size_t ci = 0; ci < w->ncols; ci++) {
            const column *c = &w->cols[ci];
            if (c->q != (int32_t)qi || c->kind != KIND_LABEL) {
                continue;
            }
            size_t n = top_labels(w, ci, 0, 0, list, sizeof list, &cells, &rare, &top);
            if ((n >= 5 && 2 * rare >= n) || (n >= 3 && single >= 2 && 2 * single >= labelcols)) {
                char b[96];
                if (pm_i_table_note(w->t,
                                    "note: column '%s' looks like free text: %zu different "
                                    "answers (%zu given once or twice), most often %s; each "
                                    "answer counts as an item; --skip-col '%s' leaves it out",
                                    pm_i_shown(c->name, strlen(c->name), b, sizeof b), n, rare,
                                    list, b) < 0) {
                    return -1;
                }
            }
        }
        size_t n = top_labels(w, SIZE_MAX, (int32_t)qi, 1, list, sizeof list, &cells, &rare, &top);
        if (n) {
            size_t first = SIZE_MAX, ncol = 0;
            for (size_t ci = 0; ci < w->ncols; ci++) {
                if (w->cols[ci].q == (int32_t)qi && w->cols[ci].kind == KIND_LABEL) {
                    first = first == SIZE_MAX ? ci : first;
                    ncol++;
                }
            }
            const char *s;
            size_t l = raw_label(w, top, &s);
            char b[96], v[96];
            const char *fc = w->cols[first].name;
            if (pm_i_table_note(w->t,
                                "note: %s'%s'%s hold%s %s, which look%s like 'not asked' "
                                "rather than an option and count%s as an item; --drop-value "
                                "'%s' reads it as not chosen",
                                ncol > 1 ? "the label columns from " : "column ",
                                pm_i_shown(fc, strlen(fc), b, sizeof b), ncol > 1 ? "" : "",
                                ncol > 1 ? "" : "s", list, n > 1 ? "" : "s", n > 1 ? "" : "s",
                                pm_i_shown(s, l, v, sizeof v)) < 0) {
                return -1;
            }
        }
    }
    return 0;
}

/* ==== entry ================================================================================== */

static pm_err_t setup(wide *w, pm_diag_t *diag) {
    const pm_input_opts_t *o = w->o;
    if (o->no_header) {
        return pm_diag_set(diag, PM_EUSAGE, NULL, 0,
                           "--format wide needs the header row (--columns prefixes match its "
                           "names); leave out --no-header");
    }
    if (o->n_columns == 0) {
        return pm_diag_set(diag, PM_EUSAGE, NULL, 0,
                           "--format wide needs at least one --columns PREFIX");
    }
    if (o->item_col || o->category_col) {
        return pm_diag_set(diag, PM_EUSAGE, NULL, 0,
                           "--item-col and --category-col do not apply to --format wide "
                           "(items come from --columns)");
    }
    for (size_t i = 0; i < o->n_drop_values; i++) {
        const char *s = o->drop_values[i];
        size_t n = strlen(s);
        pm_i_trim(&s, &n);
        if (n == 0) {
            continue; /* empty cells never count as chosen anyway */
        }
        if (reserve(w, n + 1)) {
            return oom(w, diag);
        }
        for (size_t k = 0; k < n; k++) {
            w->buf[k] = lower(s[k]);
        }
        if (pm_i_strtab_intern(&w->dropv, w->buf, n, NULL) < 0) {
            return oom(w, diag);
        }
        if (n > w->dropv_max) {
            w->dropv_max = n;
        }
    }
    return PM_OK;
}

pm_err_t pm_i_read_wide(FILE *fp, const pm_input_opts_t *o, pm_table_t *t, pm_i_csv_opts *co,
                        pm_diag_t *diag) {
    wide w;
    memset(&w, 0, sizeof w);
    w.t = t;
    w.o = o;
    w.co = co;
    pm_i_strtab_init(&w.dropv);
    pm_i_strtab_init(&w.raw);
    pm_i_strtab_init(&w.keys);
    pm_i_strtab_init(&w.blank);
    w.drop = t->drop;
    w.mfrom = t->merge_from;
    pm_i_strtab_init(&t->drop);
    pm_i_strtab_init(&t->merge_from);
    t->has_category = true;

    pm_err_t rc = setup(&w, diag);
    if (rc == PM_OK) {
        rc = pm_i_csv_stream(fp, co, on_rec, &w, diag);
    }
    if (rc == PM_OK && !w.started) {
        rc = pm_diag_set(diag, PM_EDATA, t->source, 1,
                         "the file is empty; a wide file needs a header row naming the option "
                         "columns and one row per respondent");
    } else if (rc == PM_OK && t->stats.records == 0) {
        rc = pm_diag_set(diag, PM_EDATA, t->source, 1,
                         "the header is the only line; no respondent rows follow");
    } else if (rc == PM_OK && t->stats.respondents == 0) {
        rc = pm_diag_set(diag, PM_EDATA, t->source, 0,
                         "none of the %llu respondents chose anything in the selected "
                         "columns; check --columns and --drop-value, or give --base all",
                         (unsigned long long)t->stats.records);
    }
    if (rc == PM_OK) {
        rc = blank_duplicates(&w, diag);
    }
    if (rc == PM_OK && pitfall_notes(&w) < 0) {
        rc = oom(&w, diag);
    }
    if (rc == PM_OK) {
        rc = name_items(&w, diag);
    }

    pm_i_strtab_destroy(&t->drop);
    pm_i_strtab_destroy(&t->merge_from);
    t->drop = w.drop;
    t->merge_from = w.mfrom;
    if (w.cols) {
        for (size_t i = 0; i < w.ncols; i++) {
            free(w.cols[i].name);
            free(w.cols[i].last);
        }
    }
    if (w.qs) {
        for (size_t i = 0; i < w.nq; i++) {
            free(w.qs[i].cat);
        }
    }
    free(w.cols);
    free(w.qs);
    free(w.opt_cols);
    free(w.chosen);
    free(w.rinfo);
    free(w.blank_line);
    free(w.buf);
    pm_i_strtab_destroy(&w.dropv);
    pm_i_strtab_destroy(&w.raw);
    pm_i_strtab_destroy(&w.keys);
    pm_i_strtab_destroy(&w.blank);
    return rc;
}
