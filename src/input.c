/* Readers for the long and lines formats, the table builder shared with the wide reader, and
 * item hygiene (--drop-item, --merge-file). One pass, streaming; strings interned once. */
#include "input_internal.h"
#include "parallel.h"

#include <ctype.h>
#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/mman.h>
#include <sys/stat.h>
#include <pthread.h>
#include <sched.h>
#include <stdatomic.h>
#include <time.h>
#include <unistd.h>

void pm_input_opts_init(pm_input_opts_t *o) {
    memset(o, 0, sizeof *o);
    o->format = PM_FORMAT_LONG;
    o->threads = 1;
}

/* ==== table builder ========================================================================= */

/* isspace in the C locale, without the locale lookup (this runs for every field) */
static inline int is_ws(unsigned char c) {
    return c == ' ' || (c >= '\t' && c <= '\r');
}

void pm_i_trim(const char **s, size_t *len) {
    const char *p = *s;
    size_t n = *len;
    if (n && !is_ws((unsigned char)p[0]) && !is_ws((unsigned char)p[n - 1])) {
        return; /* the usual case */
    }
    while (n && isspace((unsigned char)p[0])) {
        p++;
        n--;
    }
    while (n && isspace((unsigned char)p[n - 1])) {
        n--;
    }
    *s = p;
    *len = n;
}

typedef struct pm_i_hash_job par_hash;
static void hash_job_cancel(par_hash *h);

void pm_table_free(pm_table_t *t) {
    if (!t) {
        return;
    }
    if (t->hash_job) {
        hash_job_cancel(t->hash_job);
        t->hash_job = NULL;
    }
    free(t->source);
    pm_i_strtab_destroy(&t->resp);
    pm_i_strtab_destroy(&t->items);
    pm_i_strtab_destroy(&t->cats);
    pm_i_strtab_destroy(&t->drop);
    pm_i_strtab_destroy(&t->merge_from);
    pm_i_strtab_destroy(&t->merge_to_names);
    free(t->merge_to);
    free(t->item_cat);
    free(t->item_line);
    free(t->row_resp);
    free(t->row_item);
    free(t->resp_weight);
    free(t->resp_line);
    free(t->resp_has_item);
    free(t->last_id);
    free(t->run_buf);
    free(t->run_off);
    free(t->run_len);
    free(t->run_hash);
    free((void *)t->rstr);
    free(t);
}

typedef struct {
    pm_table_t *t;
    const char *file;
    uint64_t *line_of; /* merge_from id -> line */
    size_t cap;
    int header_checked;
} merge_state;

static pm_err_t merge_record(void *ud, const pm_i_record *r, pm_diag_t *diag) {
    merge_state *m = ud;
    if (!m->header_checked) {
        m->header_checked = 1;
        if (r->n >= 2 && strcmp(r->f[0], "item") == 0 && strcmp(r->f[1], "group") == 0) {
            return PM_OK;
        }
    }
    if (r->n != 2) {
        return pm_diag_set(diag, PM_EDATA, m->file, (long)r->line,
                           "expected 2 fields 'item,group', got %zu", r->n);
    }
    const char *a = r->f[0], *g = r->f[1];
    size_t al = r->len[0], gl = r->len[1];
    pm_i_trim(&a, &al);
    pm_i_trim(&g, &gl);
    if (!al || !gl) {
        return pm_diag_set(diag, PM_EDATA, m->file, (long)r->line,
                           "empty item or group name in the merge file");
    }
    if (!pm_i_utf8_valid(a, al) || !pm_i_utf8_valid(g, gl)) {
        char b[96];
        return pm_diag_set(diag, PM_EDATA, m->file, (long)r->line,
                           "invalid UTF-8 in the name '%s'; save the merge file as UTF-8",
                           pm_i_utf8_valid(a, al) ? pm_i_shown(g, gl, b, sizeof b)
                                                  : pm_i_shown(a, al, b, sizeof b));
    }
    bool added;
    int64_t id = pm_i_strtab_intern(&m->t->merge_from, a, al, &added);
    if (id < 0) {
        return pm_diag_set(diag, PM_ENOMEM, m->file, 0, "out of memory");
    }
    if (!added) {
        return pm_diag_set(diag, PM_EDATA, m->file, (long)r->line,
                           "item '%.*s' is listed twice (first on line %llu)", (int)al, a,
                           (unsigned long long)m->line_of[id]);
    }
    int64_t gid = pm_i_strtab_intern(&m->t->merge_to_names, g, gl, NULL);
    size_t cap2 = m->cap;
    if (gid < 0 || pm_i_grow((void **)&m->line_of, &m->cap, (size_t)id + 1, sizeof(uint64_t)) ||
        pm_i_grow((void **)&m->t->merge_to, &cap2, (size_t)id + 1, sizeof(int64_t))) {
        return pm_diag_set(diag, PM_ENOMEM, m->file, 0, "out of memory");
    }
    m->line_of[id] = r->line;
    m->t->merge_to[id] = gid;
    m->t->stats.merge_entries++;
    return PM_OK;
}

static pm_err_t load_merge(pm_table_t *t, const char *path, pm_diag_t *diag) {
    FILE *fp = fopen(path, "rb");
    if (!fp) {
        return pm_diag_set(diag, PM_EIO, path, 0, "cannot open the merge file: %s",
                           strerror(errno));
    }
    merge_state m = {t, path, NULL, 0, 0};
    pm_i_csv_opts co = {0};
    co.sep = ',';
    co.display = path;
    pm_err_t rc = pm_i_csv_stream(fp, &co, merge_record, &m, diag);
    free(m.line_of);
    fclose(fp);
    return rc;
}

pm_err_t pm_i_table_new(const pm_input_opts_t *o, const char *display, pm_table_t **out,
                        pm_diag_t *diag) {
    *out = NULL;
    pm_table_t *t = pm_i_calloc(1, sizeof *t);
    if (!t) {
        return pm_diag_set(diag, PM_ENOMEM, display, 0, "out of memory");
    }
    pm_i_strtab_init(&t->resp);
    pm_i_strtab_init(&t->items);
    pm_i_strtab_init(&t->cats);
    pm_i_strtab_init(&t->drop);
    pm_i_strtab_init(&t->merge_from);
    pm_i_strtab_init(&t->merge_to_names);
    t->last_r = -1;
    t->read_chunks = 1;
    t->source = strdup(display);
    if (!t->source) {
        pm_table_free(t);
        return pm_diag_set(diag, PM_ENOMEM, display, 0, "out of memory");
    }
    for (size_t i = 0; i < o->n_drop_items; i++) {
        const char *s = o->drop_items[i];
        size_t n = strlen(s);
        pm_i_trim(&s, &n);
        if (pm_i_strtab_intern(&t->drop, s, n, NULL) < 0) {
            pm_table_free(t);
            return pm_diag_set(diag, PM_ENOMEM, display, 0, "out of memory");
        }
    }
    if (o->merge_file) {
        pm_err_t rc = load_merge(t, o->merge_file, diag);
        if (rc != PM_OK) {
            pm_table_free(t);
            return rc;
        }
    }
    t->weighted = o->weight_col != NULL;
    t->has_category = o->category_col != NULL;
    *out = t;
    return PM_OK;
}

/* Room for `need` respondents in the per-respondent arrays (grown together: one capacity). */
static int grow_respondents(pm_table_t *t, size_t need) {
    if (need <= t->resp_cap) {
        return 0;
    }
    size_t c1 = t->resp_cap, c2 = t->resp_cap, c3 = t->resp_cap;
    if (pm_i_grow((void **)&t->resp_weight, &c1, need, sizeof(double)) ||
        pm_i_grow((void **)&t->resp_line, &c2, need, sizeof(uint64_t)) ||
        pm_i_grow((void **)&t->resp_has_item, &c3, need, 1)) {
        return -1;
    }
    t->resp_cap = c1;
    return 0;
}

/* Room for `runs` runs of ids and `bytes` bytes of their text (the run arrays share
 * run_off_cap). */
static int grow_runs(pm_table_t *t, size_t runs, size_t bytes) {
    size_t c2 = t->run_off_cap, c3 = t->run_off_cap;
    return pm_i_grow((void **)&t->run_buf, &t->run_cap, bytes, 1) ||
           pm_i_grow((void **)&t->run_off, &t->run_off_cap, runs, sizeof *t->run_off) ||
           pm_i_grow((void **)&t->run_len, &c2, runs, sizeof *t->run_len) ||
           pm_i_grow((void **)&t->run_hash, &c3, runs, sizeof *t->run_hash);
}

static pm_err_t new_respondent(pm_table_t *t, size_t r, uint64_t line, pm_diag_t *diag) {
    if (grow_respondents(t, r + 1)) {
        return pm_diag_set(diag, PM_ENOMEM, t->source, 0, "out of memory");
    }
    t->resp_weight[r] = NAN;
    t->resp_line[r] = line;
    t->resp_has_item[r] = 0;
    t->stats.respondents++;
    return PM_OK;
}

/* id == last over len bytes (the same respondent as the row before: most rows) */
static inline int same_id(const char *a, const char *b, size_t len) {
    if (len >= 8 && len <= 16) {
        uint64_t x, y, u, v;
        memcpy(&x, a, 8);
        memcpy(&y, b, 8);
        memcpy(&u, a + len - 8, 8);
        memcpy(&v, b + len - 8, 8);
        return x == y && u == v;
    }
    return memcmp(a, b, len) == 0;
}

pm_err_t pm_i_table_respondent(pm_table_t *t, const char *id, size_t len, uint64_t line,
                               uint32_t *r, pm_diag_t *diag) {
    if (t->last_r >= 0 && len == t->last_len && same_id(id, t->last_id, len)) {
        *r = (uint32_t)t->last_r;
        return PM_OK;
    }
    if (t->n_anon) {
        return pm_diag_set(diag, PM_EINTERNAL, t->source, (long)line,
                           "respondents with and without ids mixed");
    }
    if (t->defer) {
        size_t rr = t->run_n;
        if (rr >= UINT32_MAX - 1) {
            return pm_diag_set(diag, PM_EDATA, t->source, (long)line,
                               "more than %u runs of respondent rows", (unsigned)(UINT32_MAX - 2));
        }
        if (grow_runs(t, rr + 1, t->run_used + len + 1) ||
            pm_i_grow((void **)&t->last_id, &t->last_cap, len + 1, 1)) {
            return pm_diag_set(diag, PM_ENOMEM, t->source, 0, "out of memory (respondent ids)");
        }
        memcpy(t->run_buf + t->run_used, id, len);
        t->run_buf[t->run_used + len] = '\0';
        t->run_off[rr] = t->run_used;
        t->run_len[rr] = (uint32_t)len;
        t->run_hash[rr] = pm_i_hash(id, len);
        t->run_used += len + 1;
        t->run_n++;
        pm_err_t rc = new_respondent(t, rr, line, diag);
        if (rc) {
            return rc;
        }
        memcpy(t->last_id, id, len);
        t->last_len = len;
        t->last_r = (int64_t)rr;
        *r = (uint32_t)rr;
        return PM_OK;
    }
    bool added;
    int64_t id_ = pm_i_strtab_intern(&t->resp, id, len, &added);
    if (id_ < 0) {
        return pm_diag_set(diag, PM_ENOMEM, t->source, 0, "out of memory (respondent ids)");
    }
    if (added) {
        pm_err_t rc = new_respondent(t, (size_t)id_, line, diag);
        if (rc) {
            return rc;
        }
    }
    if (pm_i_grow((void **)&t->last_id, &t->last_cap, len + 1, 1)) {
        return pm_diag_set(diag, PM_ENOMEM, t->source, 0, "out of memory");
    }
    memcpy(t->last_id, id, len);
    t->last_len = len;
    t->last_r = id_;
    *r = (uint32_t)id_;
    return PM_OK;
}

pm_err_t pm_i_table_anon_respondent(pm_table_t *t, uint64_t line, uint32_t *r,
                                    pm_diag_t *diag) {
    if (t->n_anon >= UINT32_MAX - 1) {
        return pm_diag_set(diag, PM_EDATA, t->source, (long)line,
                           "more than %u respondents", (unsigned)(UINT32_MAX - 1));
    }
    size_t id = (size_t)t->n_anon++;
    pm_err_t rc = new_respondent(t, id, line, diag);
    *r = (uint32_t)id;
    return rc;
}

pm_err_t pm_i_table_add(pm_table_t *t, uint32_t r, const char *item, size_t len,
                        const char *cat, size_t catlen, uint64_t line, pm_diag_t *diag) {
    pm_i_trim(&item, &len);
    if (len == 0) {
        t->stats.empty_items++;
        return PM_OK;
    }
    if (t->drop.count && pm_i_strtab_find(&t->drop, item, len) >= 0) {
        t->stats.dropped_rows++;
        return PM_OK;
    }
    if (t->merge_from.count) {
        int64_t m = pm_i_strtab_find(&t->merge_from, item, len);
        if (m >= 0) {
            int64_t g = t->merge_to[m];
            item = t->merge_to_names.str[g];
            len = t->merge_to_names.len[g];
            t->stats.merged_rows++;
            if (t->drop.count && pm_i_strtab_find(&t->drop, item, len) >= 0) {
                t->stats.dropped_rows++;
                return PM_OK;
            }
        }
    }
    bool added;
    int64_t it = pm_i_strtab_find(&t->items, item, len);
    if (it < 0) {
        if (!pm_i_utf8_valid(item, len)) {
            char b[96];
            return pm_diag_set(diag, PM_EDATA, t->source, (long)line,
                               "invalid UTF-8 in item name '%s'; save the file as UTF-8",
                               pm_i_shown(item, len, b, sizeof b));
        }
        it = pm_i_strtab_intern(&t->items, item, len, &added);
        if (it < 0) {
            return pm_diag_set(diag, PM_ENOMEM, t->source, 0, "out of memory");
        }
        if ((size_t)it >= t->item_cap) {
            size_t c2 = t->item_cap;
            if (pm_i_grow((void **)&t->item_cat, &t->item_cap, (size_t)it + 1, sizeof(int32_t)) ||
                pm_i_grow((void **)&t->item_line, &c2, (size_t)it + 1, sizeof(uint64_t))) {
                return pm_diag_set(diag, PM_ENOMEM, t->source, 0, "out of memory");
            }
        }
        t->item_cat[it] = -1;
        t->item_line[it] = line;
    }
    if (cat) {
        pm_i_trim(&cat, &catlen);
    }
    if (cat && catlen) {
        int64_t c = pm_i_strtab_find(&t->cats, cat, catlen);
        if (c < 0) {
            if (!pm_i_utf8_valid(cat, catlen)) {
                char b[96];
                return pm_diag_set(diag, PM_EDATA, t->source, (long)line,
                                   "invalid UTF-8 in category name '%s'; save the file as UTF-8",
                                   pm_i_shown(cat, catlen, b, sizeof b));
            }
            c = pm_i_strtab_intern(&t->cats, cat, catlen, NULL);
            if (c < 0) {
                return pm_diag_set(diag, PM_ENOMEM, t->source, 0, "out of memory");
            }
        }
        if (t->item_cat[it] < 0) {
            t->item_cat[it] = (int32_t)c;
            t->item_line[it] = line;
        } else if (t->item_cat[it] != c) {
            return pm_diag_set(diag, PM_EDATA, t->source, (long)line,
                               "item '%s' has category '%s' here but '%s' on line %llu; give "
                               "each item one category",
                               t->items.str[it], t->cats.str[c], t->cats.str[t->item_cat[it]],
                               (unsigned long long)t->item_line[it]);
        }
    }
    if (t->n_rows >= t->rows_cap) {
        size_t c1 = t->rows_cap, c2 = t->rows_cap;
        if (pm_i_grow((void **)&t->row_resp, &c1, t->n_rows + 1, sizeof(uint32_t)) ||
            pm_i_grow((void **)&t->row_item, &c2, t->n_rows + 1, sizeof(uint32_t))) {
            return pm_diag_set(diag, PM_ENOMEM, t->source, 0, "out of memory");
        }
        t->rows_cap = c1 < c2 ? c1 : c2;
    }
    t->row_resp[t->n_rows] = r;
    t->row_item[t->n_rows] = (uint32_t)it;
    t->n_rows++;
    t->resp_has_item[r] = 1;
    t->stats.rows++;
    return PM_OK;
}

pm_err_t pm_i_table_weight(pm_table_t *t, uint32_t r, const char *w, size_t len, uint64_t line,
                           pm_diag_t *diag) {
    pm_i_trim(&w, &len);
    char buf[64];
    if (len == 0 || len >= sizeof buf) {
        return pm_diag_set(diag, PM_EDATA, t->source, (long)line,
                           "expected a weight (a number > 0), got '%.*s'",
                           (int)(len < 40 ? len : 40), w);
    }
    memcpy(buf, w, len);
    buf[len] = '\0';
    char *end;
    errno = 0;
    double v = strtod(buf, &end);
    if (*end != '\0' || !isfinite(v) || !(v > 0)) {
        return pm_diag_set(diag, PM_EDATA, t->source, (long)line,
                           "expected a weight that is a finite number > 0, got '%s'", buf);
    }
    if (isnan(t->resp_weight[r])) {
        t->resp_weight[r] = v;
    } else if (t->resp_weight[r] != v) {
        return pm_diag_set(diag, PM_EDATA, t->source, (long)line,
                           "weight '%s' differs from the weight %.17g this respondent has on "
                           "line %llu; give each respondent one weight",
                           buf, t->resp_weight[r], (unsigned long long)t->resp_line[r]);
    }
    return PM_OK;
}

/* Merges the runs of deferred respondent ids that share an id (see struct pm_table): hashes
 * sorted with a stable radix sort, equal strings found within equal hashes, then respondents
 * renumbered in order of first appearance and the rows remapped. */
typedef struct {
    uint64_t h; /* the sort key: first */
    uint32_t r;
} run_key;

static pm_err_t merge_runs(pm_table_t *t, pm_diag_t *diag) {
    size_t n = t->run_n;
    pm_err_t rc = PM_ENOMEM;
    run_key *rk = pm_i_malloc(n ? n : 1, sizeof *rk);
    uint32_t *ix = pm_i_malloc(n ? n : 1, sizeof *ix); /* the new index of each run */
    uint32_t *canon = pm_i_malloc(n ? n : 1, sizeof *canon);
    t->rstr = pm_i_malloc(n ? n : 1, sizeof *t->rstr);
    if (!rk || !ix || !canon || !t->rstr) {
        goto done;
    }
    for (size_t r = 0; r < n; r++) {
        rk[r].h = t->run_hash[r] >> 32; /* 32 bits: half the radix passes; equal keys are
                                          * told apart by their strings below */
        rk[r].r = (uint32_t)r;
        canon[r] = (uint32_t)r;
    }
    if (pm_i_radix_sort(rk, n, sizeof *rk)) { /* stable: equal hashes keep run order */
        goto done;
    }
    size_t dups = 0;
    for (size_t i = 0; i < n;) {
        size_t j = i + 1;
        while (j < n && rk[j].h == rk[i].h) {
            j++;
        }
        for (size_t a = i + 1; a < j; a++) { /* groups are tiny: pairwise */
            uint32_t ra = rk[a].r;
            for (size_t b = i; b < a; b++) {
                uint32_t rb = rk[b].r;
                if (canon[rb] == rb && t->run_len[ra] == t->run_len[rb] &&
                    memcmp(t->run_buf + t->run_off[ra], t->run_buf + t->run_off[rb],
                           t->run_len[ra]) == 0) {
                    canon[ra] = rb; /* rb < ra: groups are in run order */
                    dups++;
                    break;
                }
            }
        }
        i = j;
    }
    if (dups) {
        /* fold each later run into its first: weights must agree */
        for (size_t r = 0; r < n; r++) {
            uint32_t c = canon[r];
            if (c == r) {
                continue;
            }
            double wc = t->resp_weight[c], wr = t->resp_weight[r];
            if (!isnan(wr)) {
                if (isnan(wc)) {
                    t->resp_weight[c] = wr;
                } else if (wc != wr) {
                    rc = pm_diag_set(diag, PM_EDATA, t->source, (long)t->resp_line[r],
                                     "weight %.17g differs from the weight %.17g this respondent "
                                     "has on line %llu; give each respondent one weight",
                                     wr, wc, (unsigned long long)t->resp_line[c]);
                    goto done;
                }
            }
            t->resp_has_item[c] |= t->resp_has_item[r];
        }
        /* renumber: first appearances in order */
        size_t k = 0;
        for (size_t r = 0; r < n; r++) {
            if (canon[r] == r) {
                ix[r] = (uint32_t)k;
                t->resp_weight[k] = t->resp_weight[r];
                t->resp_line[k] = t->resp_line[r];
                t->resp_has_item[k] = t->resp_has_item[r];
                t->rstr[k] = t->run_buf + t->run_off[r];
                k++;
            } else {
                ix[r] = ix[canon[r]];
            }
        }
        for (size_t i = 0; i < t->n_rows; i++) {
            t->row_resp[i] = ix[t->row_resp[i]];
        }
        t->stats.respondents = k;
    } else {
        for (size_t r = 0; r < n; r++) {
            t->rstr[r] = t->run_buf + t->run_off[r];
        }
    }
    rc = PM_OK;
done:
    free(rk);
    free(ix);
    free(canon);
    if (rc == PM_ENOMEM) {
        pm_diag_set(diag, PM_ENOMEM, t->source, 0, "out of memory (respondent ids)");
    }
    return rc;
}

pm_err_t pm_i_table_finish(pm_table_t *t, const pm_input_opts_t *o, pm_diag_t *diag) {
    if (t->defer && t->run_n) {
        pm_err_t rc = merge_runs(t, diag);
        if (rc) {
            return rc;
        }
    }
    if (t->stats.respondents == 0) {
        return pm_diag_set(diag, PM_EDATA, t->source, 0,
                           t->stats.lines == 0 ? "the file is empty; expected rows of "
                                                 "respondent and item"
                                               : "no data rows after the header; expected rows of "
                                                 "respondent and item");
    }
    if (o->respondents) {
        if (o->respondents < t->stats.respondents) {
            return pm_diag_set(diag, PM_EDATA, t->source, 0,
                               "--respondents %llu is below the %llu respondents in the file",
                               (unsigned long long)o->respondents,
                               (unsigned long long)t->stats.respondents);
        }
        t->respondents_override = o->respondents;
    }
    return PM_OK;
}

/* ==== columns ============================================================================== */

long pm_i_column_index(const char *sel, const char *const *hdr, const uint32_t *hlen,
                       size_t n) {
    if (hdr) {
        for (size_t i = 0; i < n; i++) {
            const char *h = hdr[i];
            size_t hl = hlen[i];
            pm_i_trim(&h, &hl);
            if (hl == strlen(sel) && memcmp(h, sel, hl) == 0) {
                return (long)i;
            }
        }
    }
    char *end;
    errno = 0;
    long v = strtol(sel, &end, 10);
    if (*sel && *end == '\0' && errno == 0 && v >= 1) {
        return v - 1;
    }
    return -1;
}

void pm_i_column_list(const char *const *hdr, size_t n, char *buf, size_t size) {
    size_t used = 0;
    buf[0] = '\0';
    for (size_t i = 0; i < n && used + 8 < size; i++) {
        int k = snprintf(buf + used, size - used, "%s'%s'", i ? ", " : "", hdr[i]);
        if (k < 0) {
            break;
        }
        used += (size_t)k;
    }
    if (used >= size) {
        buf[size - 1] = '\0';
    }
}

/* ==== long and lines readers ================================================================= */

typedef struct par_shared par_shared;

typedef struct {
    pm_table_t *t;
    const pm_input_opts_t *o;
    int started;
    int have_header;
    long id, item, cat, weight; /* column indices, -1 = none */
    size_t ncols;               /* fields per row (long format, from the header) */
    par_shared *par;            /* parallel read: NULL when serial */
    int publisher;              /* the stream of the file's first chunk */
    int published;              /* it has let the others start */
} reader;

static void par_publish(par_shared *ps, const reader *rd, int ok);
#define PAR_START_LINE 50000 /* lines the first chunk reads before the others start */
static int par_stopped(par_shared *ps);

static pm_err_t resolve(reader *rd, const char *opt, const char *sel, long dflt, long *out,
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

static pm_err_t first_record(reader *rd, const pm_i_record *r, pm_diag_t *diag) {
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
    } else {
        if ((rc = resolve(rd, "--id-col", o->id_col, -1, &rd->id, r, diag)) ||
            (rc = resolve(rd, "--weight-col", o->weight_col, -1, &rd->weight, r, diag))) {
            return rc;
        }
        rd->item = -1;
        rd->cat = -1;
    }
    return PM_OK;
}

static pm_err_t long_row(reader *rd, const pm_i_record *r, pm_diag_t *diag) {
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
                          rd->cat >= 0 ? r->f[rd->cat] : NULL,
                          rd->cat >= 0 ? r->len[rd->cat] : 0, r->line, diag);
}

static pm_err_t lines_row(reader *rd, const pm_i_record *r, pm_diag_t *diag) {
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

static pm_err_t on_rec(void *ud, const pm_i_record *r, pm_diag_t *diag) {
    reader *rd = ud;
    if (!rd->started) { /* first record: resolve columns */
        rd->started = 1;
        pm_err_t rc = first_record(rd, r, diag);
        if (rc) {
            if (rd->par) {
                par_publish(rd->par, rd, 0); /* the other chunks do not start */
            }
            return rc;
        }
        if (rd->have_header) {
            return PM_OK;
        }
    } else if (rd->par && !rd->publisher && par_stopped(rd->par)) {
        return pm_diag_set(diag, PM_EINTERNAL, rd->t->source, 0, "stopped");
    } else if (rd->par && rd->publisher && !rd->published && r->line >= PAR_START_LINE) {
        /* the first lines read well: the other chunks can start (a file that goes wrong at
         * once, e.g. a quote never closed, is then not read in parallel at all) */
        rd->published = 1;
        par_publish(rd->par, rd, 1);
    }
    rd->t->stats.records++;
    return rd->o->format == PM_FORMAT_LONG ? long_row(rd, r, diag) : lines_row(rd, r, diag);
}

int pm_i_no_fast_lines;
int pm_i_hash_stall;

/* The plain lines of a two-column long file (respondent and item, no category or weight
 * column, no --drop-item or --merge-items), read without building records: the usual case,
 * and most of the reading time. Every line it takes has exactly the effect on_rec would give
 * it; it leaves to on_rec every line that could be different in any way (see pm_i_lines_fn):
 * a line without its '\n' in p, a CR other than a final CRLF one, a field count other than
 * two, an empty field, a space or tab at a field's edge (trimmed by the record path), a field
 * over the length limit, and the lines where the parallel reader must look at the stream. */
static pm_err_t long_lines(void *ud, char *p, size_t len, uint64_t line, char sep, size_t *used,
                           uint64_t *nlines, pm_diag_t *diag) {
    reader *rd = ud;
    pm_table_t *t = rd->t;
    *used = 0;
    *nlines = 0;
    if (pm_i_no_fast_lines || !rd->started || rd->o->format != PM_FORMAT_LONG ||
        rd->ncols != 2 || rd->cat >= 0 || rd->weight >= 0 || rd->id == rd->item || rd->id < 0 ||
        rd->id > 1 || t->drop.count || t->merge_from.count || !t->defer || t->n_anon) {
        return PM_OK;
    }
    if (rd->par && !rd->publisher && par_stopped(rd->par)) {
        return PM_OK; /* on_rec stops the stream */
    }
    uint64_t stop_line = UINT64_MAX;
    if (rd->par && rd->publisher && !rd->published) {
        stop_line = PAR_START_LINE; /* on_rec lets the other chunks start there */
    }
    const char *end = p + len;
    const char *cr = memchr(p, '\r', len); /* the next CR, or NULL */
    char *at = p;
    const int id_first = rd->id == 0;
    pm_err_t rc = PM_OK;
    while (at < end && line < stop_line) {
        char *nl = memchr(at, '\n', (size_t)(end - at));
        if (!nl) {
            break;
        }
        char *le = nl;
        if (cr && cr < nl) {
            if (cr != nl - 1) {
                break; /* a CR inside the line: libcsv ends a record there */
            }
            le = nl - 1; /* CRLF */
            cr = nl + 1 < end ? memchr(nl + 1, '\r', (size_t)(end - nl - 1)) : NULL;
        }
        char *d = memchr(at, sep, (size_t)(le - at));
        if (!d || d == at || d + 1 == le || memchr(d + 1, sep, (size_t)(le - d - 1))) {
            break; /* not two non-empty fields */
        }
        const char *f0 = at, *f1 = d + 1;
        size_t l0 = (size_t)(d - at), l1 = (size_t)(le - d - 1);
        if (f0[0] == ' ' || f0[0] == '\t' || f0[l0 - 1] == ' ' || f0[l0 - 1] == '\t' ||
            f1[0] == ' ' || f1[0] == '\t' || f1[l1 - 1] == ' ' || f1[l1 - 1] == '\t' ||
            l0 > PM_INPUT_MAX_FIELD || l1 > PM_INPUT_MAX_FIELD) {
            break;
        }
        const char *id = id_first ? f0 : f1, *item = id_first ? f1 : f0;
        size_t idl = id_first ? l0 : l1, iteml = id_first ? l1 : l0;
        t->stats.records++;
        uint32_t resp;
        if (t->last_r >= 0 && idl == t->last_len && same_id(id, t->last_id, idl)) {
            resp = (uint32_t)t->last_r;
        } else if ((rc = pm_i_table_respondent(t, id, idl, line, &resp, diag)) != PM_OK) {
            break;
        }
        int64_t it = pm_i_strtab_find(&t->items, item, iteml);
        if (it < 0 || t->n_rows >= t->rows_cap) {
            /* a new item or full row arrays: the record path's function does the rest */
            if ((rc = pm_i_table_add(t, resp, item, iteml, NULL, 0, line, diag)) != PM_OK) {
                break;
            }
        } else {
            t->row_resp[t->n_rows] = resp;
            t->row_item[t->n_rows] = (uint32_t)it;
            t->n_rows++;
            t->resp_has_item[resp] = 1;
            t->stats.rows++;
        }
        line++;
        (*nlines)++;
        at = nl + 1;
    }
    *used = (size_t)(at - p);
    return rc;
}

/* ==== parallel reading of a regular file ======================================================
 * A long or lines file of some size is cut into chunks at line ends and each chunk is read by
 * its own thread into its own table; the tables are then appended in file order, which gives
 * exactly the table one serial pass builds (rows, item and respondent order, first lines).
 * Anything unusual (a chunk that fails for any reason, a record that spans a cut, an item with
 * two categories in different chunks) makes the caller read the whole file again serially, so
 * every message and exit status stays what the serial reader gives. The SHA-256 of the file is
 * computed by one more thread reading it in order. */

#define PAR_MIN_CHUNK (8u << 20) /* bytes per chunk at least */
#define PAR_MAX 16

struct par_shared {
    pthread_mutex_t mu;
    pthread_cond_t cv;
    int state; /* 0: columns not known yet, 1: known (tmpl, sep), -1: stop */
    reader tmpl;
    char sep;
    const pm_i_csv_opts *co0; /* the first chunk's options: its delimiter, once detected */
    atomic_int stop;
};

static void par_publish(par_shared *ps, const reader *rd, int ok) {
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

static int par_stopped(par_shared *ps) {
    return atomic_load_explicit(&ps->stop, memory_order_relaxed);
}

typedef struct {
    par_shared *ps;
    pm_table_t *t;
    reader rd;
    pm_i_csv_opts co;
    pm_diag_t diag;
    pm_err_t rc;
    int ran;
} par_chunk;

/* Reads chunk c (k >= 1) once the first chunk has published the columns. */
static void par_chunk_run(par_chunk *c) {
    par_shared *ps = c->ps;
    pthread_mutex_lock(&ps->mu);
    while (ps->state == 0) {
        pthread_cond_wait(&ps->cv, &ps->mu);
    }
    int state = ps->state;
    if (state == 1) {
        c->rd = ps->tmpl; /* columns and delimiter found by the first chunk */
        c->co.sep = ps->sep;
    }
    pthread_mutex_unlock(&ps->mu);
    c->ran = 1;
    if (state != 1 || par_stopped(ps)) {
        c->rc = PM_EINTERNAL;
        return;
    }
    c->rd.t = c->t;
    c->rd.publisher = 0;
    c->rd.started = 1;
    c->co.lines_fn = long_lines;
    c->rc = pm_i_csv_stream(NULL, &c->co, on_rec, &c->rd, &c->diag);
    if (c->rc) {
        atomic_store(&ps->stop, 1);
    }
}

/* The chunks after the first are taken in order from a counter by every thread (the calling
 * one too, once its first chunk is read), so a thread slowed by the hash thread or the
 * machine simply reads fewer of them. */
typedef struct {
    par_chunk *ch;
    size_t n;
    atomic_size_t next;
} par_pool;

static void par_pool_work(par_pool *pool) {
    for (;;) {
        size_t k = atomic_fetch_add(&pool->next, 1);
        if (k >= pool->n) {
            break;
        }
        par_chunk_run(&pool->ch[k]);
    }
}

static void *par_worker_main(void *arg) {
    par_pool_work(arg);
    return NULL;
}

/* The hash of the file being read in parallel, on a thread of its own. It may outlive
 * par_read (pm_input_opts_t.defer_hash): it owns a duplicate of the descriptor. */
struct pm_i_hash_job {
    int fd;
    uint64_t expect;  /* bytes the parser read (set before the job is handed to the table) */
    atomic_int stop;  /* set when the hash is not needed any more, or taken over */
    atomic_int done;  /* set by the thread once sha, bytes and failed are final */
    atomic_int refs;  /* the thread's and the owner's: the last one frees the job */
    pm_i_sha256 sha;  /* the thread's */
    uint64_t bytes;   /* hashed by the thread */
    int failed;
    int idle;         /* the thread runs in the idle class (defer_hash); else it is waited for */
};

static void hash_job_unref(par_hash *h) {
    if (atomic_fetch_sub(&h->refs, 1) == 1) {
        close(h->fd);
        free(h);
    }
}

/* Hashes the file fd from its start to its end into sha; *bytes gets the count. Stops, and
 * returns -1, when stop is set (may be NULL); -1 too on a read error; else 0. The bytes go
 * through windows of a read-only mapping (no copy; at most one window resident at a time),
 * the rest (a file that grew, or no mapping) by pread. */
#define HASH_WINDOW ((size_t)4 << 20)
static int hash_file(int fd, atomic_int *stop, pm_i_sha256 *sha, uint64_t *bytes) {
    pm_i_sha256_init(sha);
    *bytes = 0;
    struct stat st;
    if (fstat(fd, &st) == 0 && S_ISREG(st.st_mode)) {
        uint64_t size = (uint64_t)st.st_size;
        while (*bytes < size) {
            if (stop && atomic_load_explicit(stop, memory_order_relaxed)) {
                return -1;
            }
            size_t len = size - *bytes < HASH_WINDOW ? (size_t)(size - *bytes) : HASH_WINDOW;
            void *m = mmap(NULL, len, PROT_READ, MAP_PRIVATE, fd, (off_t)*bytes);
            if (m == MAP_FAILED) {
                break;
            }
            (void)posix_madvise(m, len, POSIX_MADV_SEQUENTIAL);
            pm_i_sha256_update(sha, m, len);
            munmap(m, len);
            *bytes += len;
        }
    }
    size_t cap = 1u << 20;
    char *buf = malloc(cap);
    if (!buf) {
        return -1;
    }
    int rc = 0;
    for (;;) {
        if (stop && atomic_load_explicit(stop, memory_order_relaxed)) {
            rc = -1;
            break;
        }
        ssize_t k = pread(fd, buf, cap, (off_t)*bytes);
        if (k < 0 && errno == EINTR) {
            continue;
        }
        if (k < 0) {
            rc = -1;
            break;
        }
        if (k == 0) {
            break;
        }
        pm_i_sha256_update(sha, buf, (size_t)k);
        *bytes += (uint64_t)k;
    }
    free(buf);
    return rc;
}

/* Ends the job: 1 when the file hashed to exactly the expected bytes (digest into out; *hashed
 * gets the bytes hashed). A thread at the normal priority is waited for; one in the idle class
 * that is still at work (it may get no processor for long on a busy machine) is told to stop,
 * and the file is hashed here instead. */
static int hash_job_end(par_hash *h, unsigned char out[32], uint64_t *hashed) {
    int ok;
    while (!h->idle && !atomic_load_explicit(&h->done, memory_order_acquire)) {
        struct timespec t = {0, 100000}; /* a thread at the normal priority: it finishes */
        nanosleep(&t, NULL);
    }
    if (atomic_load_explicit(&h->done, memory_order_acquire)) {
        *hashed = h->bytes;
        ok = !h->failed && h->bytes == h->expect;
        if (ok) {
            pm_i_sha256_final(&h->sha, out);
        }
    } else {
        atomic_store(&h->stop, 1);
        pm_i_sha256 own;
        uint64_t bytes = 0;
        ok = hash_file(h->fd, NULL, &own, &bytes) == 0 && bytes == h->expect;
        *hashed = bytes;
        if (ok) {
            pm_i_sha256_final(&own, out);
        }
    }
    hash_job_unref(h);
    return ok;
}

static void hash_job_cancel(par_hash *h) {
    atomic_store(&h->stop, 1);
    hash_job_unref(h);
}

/* Linux's idle scheduling class (sched.h defines it only under _GNU_SOURCE) */
#ifndef SCHED_IDLE
#define SCHED_IDLE 5
#endif

static void *par_hash_main(void *arg) {
    par_hash *h = arg;
    /* With defer_hash the hash runs in the idle class: it takes the cores the later stages
     * leave free rather than a third of two cores from the parser, and its owner never waits
     * for it (hash_job_end). Where the class is refused the thread simply runs at the normal
     * priority. Without defer_hash it runs beside the parser and is waited for. */
    if (h->idle) {
        struct sched_param sp;
        memset(&sp, 0, sizeof sp);
        (void)pthread_setschedparam(pthread_self(), SCHED_IDLE, &sp);
    }
    while (pm_i_hash_stall && !atomic_load(&h->stop)) {
        struct timespec ms = {0, 1000000};
        nanosleep(&ms, NULL);
    }
    h->failed = hash_file(h->fd, &h->stop, &h->sha, &h->bytes) != 0;
    atomic_store_explicit(&h->done, 1, memory_order_release);
    hash_job_unref(h);
    return NULL;
}

/* The first cut point at or after want: just past a '\n'. 0 when there is none before limit. */
static uint64_t par_cut(int fd, uint64_t want, uint64_t limit) {
    char buf[1 << 16];
    uint64_t at = want - 1; /* a '\n' right before want makes want itself a line start */
    while (at < limit) {
        ssize_t k = pread(fd, buf, sizeof buf, (off_t)at);
        if (k < 0 && errno == EINTR) {
            continue;
        }
        if (k <= 0) {
            return 0;
        }
        const char *nl = memchr(buf, '\n', (size_t)k);
        if (nl) {
            uint64_t cut = at + (uint64_t)(nl - buf) + 1;
            return cut < limit ? cut : 0;
        }
        at += (uint64_t)k;
    }
    return 0;
}

/* Appends chunk table c to t (see above). base: lines before the chunk. Returns PM_OK,
 * PM_ENOMEM, or PM_EINTERNAL when the chunks disagree (read serially then). */
/* The rows of one chunk, copied into the table after every chunk is appended (on all
 * threads): respondent numbers shifted by r0, item ids mapped. */
typedef struct {
    pm_table_t *t;
    const pm_table_t *c;
    uint32_t *item_map; /* owned */
    size_t dst;
    uint32_t r0;
    size_t nr;        /* the chunk's respondents (runs or anonymous lines), from r0 */
    uint64_t base;    /* lines before the chunk */
    size_t rn, used0; /* its runs start at run rn, their ids at run_buf + used0 */
} par_rows;

static int par_rows_copy(void *ud, size_t k, unsigned th) {
    (void)th;
    const par_rows *pr = (const par_rows *)ud + k;
    pm_table_t *t = pr->t;
    const pm_table_t *c = pr->c;
    if (pr->nr) {
        memcpy(t->resp_weight + pr->r0, c->resp_weight, pr->nr * sizeof(double));
        memcpy(t->resp_has_item + pr->r0, c->resp_has_item, pr->nr);
        for (size_t r = 0; r < pr->nr; r++) {
            t->resp_line[pr->r0 + r] = c->resp_line[r] + pr->base;
        }
    }
    if (c->run_n) {
        memcpy(t->run_hash + pr->rn, c->run_hash, c->run_n * sizeof *t->run_hash);
        memcpy(t->run_buf + pr->used0, c->run_buf, c->run_used);
        for (size_t r = 0; r < c->run_n; r++) {
            t->run_off[pr->rn + r] = c->run_off[r] + pr->used0;
        }
        memcpy(t->run_len + pr->rn, c->run_len, c->run_n * sizeof *t->run_len);
    }
    uint32_t *rr = pr->t->row_resp + pr->dst, *ri = pr->t->row_item + pr->dst;
    const uint32_t *cr = pr->c->row_resp, *ci = pr->c->row_item;
    for (size_t i = 0; i < pr->c->n_rows; i++) {
        rr[i] = cr[i] + pr->r0;
        ri[i] = pr->item_map[ci[i]];
    }
    return 0;
}

static pm_err_t par_append(pm_table_t *t, pm_table_t *c, uint64_t base, par_rows *rows_job) {
    pm_err_t rc = PM_ENOMEM;
    int64_t *cat_map = pm_i_malloc(c->cats.count ? c->cats.count : 1, sizeof *cat_map);
    uint32_t *item_map = pm_i_malloc(c->items.count ? c->items.count : 1, sizeof *item_map);
    if (!cat_map || !item_map) {
        goto done;
    }
    for (size_t k = 0; k < c->cats.count; k++) {
        if ((cat_map[k] = pm_i_strtab_intern(&t->cats, c->cats.str[k], c->cats.len[k], NULL)) <
            0) {
            goto done;
        }
    }
    for (size_t i = 0; i < c->items.count; i++) {
        int64_t g = pm_i_strtab_find(&t->items, c->items.str[i], c->items.len[i]);
        int32_t lc = c->item_cat[i] >= 0 ? (int32_t)cat_map[c->item_cat[i]] : -1;
        if (g < 0) {
            if ((g = pm_i_strtab_intern(&t->items, c->items.str[i], c->items.len[i], NULL)) < 0) {
                goto done;
            }
            if ((size_t)g >= t->item_cap) {
                size_t c2 = t->item_cap;
                if (pm_i_grow((void **)&t->item_cat, &t->item_cap, (size_t)g + 1,
                              sizeof(int32_t)) ||
                    pm_i_grow((void **)&t->item_line, &c2, (size_t)g + 1, sizeof(uint64_t))) {
                    goto done;
                }
            }
            t->item_cat[g] = lc;
            t->item_line[g] = c->item_line[i] + base;
        } else if (lc >= 0) {
            if (t->item_cat[g] < 0) {
                t->item_cat[g] = lc;
                t->item_line[g] = c->item_line[i] + base;
            } else if (t->item_cat[g] != lc) {
                rc = PM_EINTERNAL; /* two categories: the serial reader names the lines */
                goto done;
            }
        }
        item_map[i] = (uint32_t)g;
    }
    /* respondents: runs of ids (or anonymous lines) numbered after t's */
    size_t r0 = (size_t)t->stats.respondents, nr = (size_t)c->stats.respondents;
    if (r0 + nr >= UINT32_MAX - 1 || (t->n_anon && c->run_n) || (t->run_n && c->n_anon)) {
        rc = PM_EINTERNAL;
        goto done;
    }
    if (grow_respondents(t, r0 + nr)) {
        goto done;
    }
    /* the respondents' and runs' arrays are copied with the rows, later (par_rows_copy) */
    rows_job->nr = nr;
    rows_job->base = base;
    rows_job->rn = t->run_n;
    rows_job->used0 = t->run_used;
    if (c->run_n) {
        if (grow_runs(t, t->run_n + c->run_n, t->run_used + c->run_used)) {
            goto done;
        }
        t->run_used += c->run_used;
        t->run_n += c->run_n;
    }
    t->n_anon += c->n_anon;
    if (t->n_rows + c->n_rows > t->rows_cap) { /* the caller made room for every row */
        rc = PM_EINTERNAL;
        goto done;
    }
    rows_job->t = t; /* copied later, on all threads */
    rows_job->c = c;
    rows_job->item_map = item_map;
    item_map = NULL;
    rows_job->dst = t->n_rows;
    rows_job->r0 = (uint32_t)r0;
    t->n_rows += c->n_rows;
    t->stats.respondents += c->stats.respondents;
    t->stats.records += c->stats.records;
    t->stats.rows += c->stats.rows;
    t->stats.empty_items += c->stats.empty_items;
    t->stats.dropped_rows += c->stats.dropped_rows;
    t->stats.merged_rows += c->stats.merged_rows;
    rc = PM_OK;
done:
    free(cat_map);
    free(item_map);
    return rc;
}

/* Tries the parallel read of the regular file fp (size bytes) into t. Returns 1 when it
 * succeeded (t filled, co->bytes, co->lines, the hash set or left to pm_table_wait_hash), 0
 * when the caller must read serially (nothing of t has changed then), -1 when out of memory
 * (diag set). */
static int par_read(FILE *fp, uint64_t size, const pm_input_opts_t *o, pm_table_t *t,
                    pm_i_csv_opts *co, pm_diag_t *diag) {
    unsigned threads = o->threads;
    if (threads == 0) {
        long n = sysconf(_SC_NPROCESSORS_ONLN);
        threads = n > 0 ? (unsigned)n : 1;
    }
    /* up to four chunks per thread, handed out as threads come free */
    uint64_t nc = size / (o->chunk_bytes ? o->chunk_bytes : PAR_MIN_CHUNK);
    nc = nc < (uint64_t)threads * 4 ? nc : (uint64_t)threads * 4;
    nc = nc < PAR_MAX ? nc : PAR_MAX;
    if (nc < 2 || threads < 2 || o->format == PM_FORMAT_WIDE) {
        return 0;
    }
    int fd = fileno(fp);
    uint64_t cut[PAR_MAX + 1];
    size_t n = 0;
    cut[n++] = 0;
    for (uint64_t k = 1; k < nc; k++) {
        uint64_t want = size / nc * k;
        if (want <= cut[n - 1]) {
            continue;
        }
        uint64_t c = par_cut(fd, want, size);
        if (c > cut[n - 1]) {
            cut[n++] = c;
        }
    }
    if (n < 2) {
        return 0;
    }
    cut[n] = UINT64_MAX; /* the last chunk reads to the end, as a serial read would */
    par_shared ps;
    memset(&ps, 0, sizeof ps);
    pthread_mutex_init(&ps.mu, NULL);
    pthread_cond_init(&ps.cv, NULL);
    atomic_init(&ps.stop, 0);
    _Atomic uint64_t done_bytes;
    atomic_init(&done_bytes, 0);
    par_chunk ch[PAR_MAX];
    pthread_t th[PAR_MAX];
    int started[PAR_MAX];
    memset(ch, 0, sizeof ch);
    memset(started, 0, sizeof started);
    par_pool pool;
    pool.ch = ch;
    pool.n = n;
    atomic_init(&pool.next, 1);
    size_t nworkers = threads - 1 < n - 1 ? threads - 1 : n - 1;
    int result = 0;
    for (size_t k = 0; k < n; k++) {
        ch[k].ps = &ps;
        pm_diag_clear(&ch[k].diag);
        if (k == 0) {
            ch[k].t = t;
        } else if (pm_i_table_new(o, t->source, &ch[k].t, &ch[k].diag)) {
            goto stop;
        }
        ch[k].t->defer = true;
        ch[k].co = *co;
        ch[k].co.sha = NULL;
        ch[k].co.ranged = true;
        ch[k].co.fd = fd;
        ch[k].co.start = cut[k];
        ch[k].co.end = cut[k + 1];
        ch[k].co.shared_done = &done_bytes;
        if (k) {
            ch[k].co.progress = NULL; /* the first chunk's thread reports for all */
        }
    }
    ps.co0 = &ch[0].co;
    par_hash *hj = pm_i_calloc(1, sizeof *hj);
    if (!hj) {
        goto stop;
    }
    hj->fd = dup(fd);
    atomic_init(&hj->stop, 0);
    atomic_init(&hj->done, 0);
    atomic_init(&hj->refs, 2);
    hj->idle = o->defer_hash;
    pthread_t hth;
    if (hj->fd < 0 || pthread_create(&hth, NULL, par_hash_main, hj) != 0) {
        if (hj->fd >= 0) {
            close(hj->fd);
        }
        free(hj);
        goto stop;
    }
    pthread_detach(hth); /* never joined: see hash_job_end */
    for (size_t w = 0; w < nworkers; w++) { /* a thread that cannot start: the others read more */
        started[w] = pthread_create(&th[w], NULL, par_worker_main, &pool) == 0;
    }
    /* the first chunk on this thread: it resolves the columns and lets the others start */
    memset(&ch[0].rd, 0, sizeof ch[0].rd);
    ch[0].rd.t = t;
    ch[0].rd.o = o;
    ch[0].rd.par = &ps;
    ch[0].rd.publisher = 1;
    ch[0].co.lines_fn = long_lines;
    ch[0].rc = pm_i_csv_stream(NULL, &ch[0].co, on_rec, &ch[0].rd, &ch[0].diag);
    /* a first chunk shorter than PAR_START_LINE lines: the others start now, if it read well */
    par_publish(&ps, &ch[0].rd, ch[0].rc == PM_OK && ch[0].rd.started);
    if (ch[0].rc) {
        atomic_store(&ps.stop, 1);
    }
    par_pool_work(&pool); /* then the rest, beside the workers */
    for (size_t w = 0; w < nworkers; w++) {
        if (started[w]) {
            pthread_join(th[w], NULL);
        }
    }
    int ok = ch[0].rc == PM_OK && ch[0].rd.started;
    for (size_t k = 1; k < n && ok; k++) {
        ok = ch[k].ran && ch[k].rc == PM_OK;
    }
    if (!ok) {
        hash_job_cancel(hj); /* the hash is not needed */
    }
    par_rows rows[PAR_MAX];
    memset(rows, 0, sizeof rows);
    if (ok) {
        uint64_t base = ch[0].co.lines, bytes = ch[0].co.bytes;
        size_t total = t->n_rows;
        for (size_t k = 1; k < n; k++) {
            total += ch[k].t->n_rows;
        }
        size_t c1 = t->rows_cap, c2 = t->rows_cap;
        if (total > t->rows_cap &&
            (pm_i_grow((void **)&t->row_resp, &c1, total, sizeof(uint32_t)) ||
             pm_i_grow((void **)&t->row_item, &c2, total, sizeof(uint32_t)))) {
            ok = 0;
            result = -1;
            pm_diag_set(diag, PM_ENOMEM, t->source, 0, "out of memory");
        } else if (total > t->rows_cap) {
            t->rows_cap = c1 < c2 ? c1 : c2;
        }
        for (size_t k = 1; k < n && ok; k++) {
            pm_err_t rc = par_append(t, ch[k].t, base, &rows[k - 1]);
            if (rc == PM_ENOMEM) {
                pm_diag_set(diag, PM_ENOMEM, t->source, 0, "out of memory");
                result = -1;
                ok = 0;
                break;
            }
            ok = rc == PM_OK;
            base += ch[k].co.lines;
            bytes += ch[k].co.bytes;
        }
        if (ok) {
            ok = pm_i_parallel(threads, n - 1, par_rows_copy, rows) == 0;
        }
        for (size_t k = 1; k < n; k++) {
            free(rows[k - 1].item_map);
            pm_table_free(ch[k].t);
            ch[k].t = NULL;
        }
        if (ok) {
            co->bytes = bytes;
            co->lines = base;
            co->sep_used = ch[0].co.sep_used;
        }
        if (ok) { /* merging runs of ids can fail (weights); the serial read says where */
            pm_diag_t fdg;
            pm_diag_clear(&fdg);
            t->stats.bytes = bytes;
            t->stats.lines = base;
            if (pm_i_table_finish(t, o, &fdg) != PM_OK) {
                ok = 0;
                if (fdg.code == PM_ENOMEM) {
                    *diag = fdg;
                    result = -1;
                }
            }
        }
        hj->expect = bytes;
        uint64_t hashed;
        if (!ok) {
            hash_job_cancel(hj);
        } else if (o->defer_hash) {
            t->hash_job = hj; /* pm_table_wait_hash finishes it */
        } else if (!hash_job_end(hj, t->stats.sha256, &hashed)) {
            ok = 0; /* the file changed while it was read, or could not be hashed */
        }
        if (ok) {
            t->read_chunks = (unsigned)n;
            result = 1;
        }
    }
stop:
    for (size_t k = 1; k < n; k++) {
        pm_table_free(ch[k].t);
    }
    pthread_cond_destroy(&ps.cv);
    pthread_mutex_destroy(&ps.mu);
    return result;
}

size_t pm_table_take_rows(pm_table_t *t, uint32_t **resp, uint32_t **item) {
    size_t cap = t->row_resp && t->row_item ? t->rows_cap : 0;
    *resp = cap ? t->row_resp : NULL;
    *item = cap ? t->row_item : NULL;
    if (!cap) {
        free(t->row_resp);
        free(t->row_item);
    }
    t->row_resp = t->row_item = NULL;
    t->n_rows = t->rows_cap = 0;
    return cap;
}

pm_err_t pm_table_wait_hash(pm_table_t *t, pm_diag_t *diag) {
    if (!t->hash_job) {
        return PM_OK;
    }
    par_hash *h = t->hash_job;
    t->hash_job = NULL;
    uint64_t hashed = 0, expect = h->expect;
    if (!hash_job_end(h, t->stats.sha256, &hashed)) {
        return pm_diag_set(diag, PM_EIO, t->source, 0,
                           "the file changed while it was read (%llu bytes read, %llu hashed); "
                           "run again once it is complete",
                           (unsigned long long)expect, (unsigned long long)hashed);
    }
    return PM_OK;
}

pm_err_t pm_input_read(const char *path, const pm_input_opts_t *o, pm_table_t **out,
                       pm_diag_t *diag) {
    *out = NULL;
    int is_stdin = strcmp(path, "-") == 0;
    const char *display = o->display_name ? o->display_name : (is_stdin ? "stdin" : path);
    if (o->format == PM_FORMAT_LINES && o->category_col) {
        return pm_diag_set(diag, PM_EUSAGE, NULL, 0,
                           "--category-col does not apply to --format lines");
    }
    if (o->respondents && o->weight_col) {
        return pm_diag_set(diag, PM_EUSAGE, NULL, 0,
                           "--respondents cannot be combined with --weight-col: the weights of "
                           "respondents missing from the file are unknown");
    }
    FILE *fp = is_stdin ? stdin : fopen(path, "rb");
    if (!fp) {
        return pm_diag_set(diag, PM_EIO, display, 0, "cannot open: %s", strerror(errno));
    }
    pm_table_t *t = NULL;
    pm_err_t rc = pm_i_table_new(o, display, &t, diag);
    if (rc) {
        goto done;
    }
    int par = 0; /* 1: read in parallel and finished */
    pm_i_sha256 sha;
    pm_i_sha256_init(&sha);
    pm_i_csv_opts co = {0};
    co.sep = o->sep;
    co.display = display;
    co.sha = &sha;
    co.progress = o->progress;
    co.progress_ud = o->progress_ud;
    {
        struct stat stt;
        if (fstat(fileno(fp), &stt) == 0 && S_ISREG(stt.st_mode)) {
            co.total = (uint64_t)stt.st_size;
        }
    }
    if (o->format == PM_FORMAT_WIDE) {
        rc = pm_i_read_wide(fp, o, t, &co, diag);
    } else {
        if (!is_stdin && co.total > 0) {
            par = par_read(fp, co.total, o, t, &co, diag);
            if (par == 0) { /* read serially from a fresh table */
                pm_table_free(t);
                t = NULL;
                pm_i_sha256_init(&sha);
                if ((rc = pm_i_table_new(o, display, &t, diag)) != PM_OK) {
                    goto done;
                }
            }
        }
        reader rd;
        memset(&rd, 0, sizeof rd);
        rd.t = t;
        rd.o = o;
        t->defer = true;
        if (par < 0) {
            rc = PM_ENOMEM;
        } else if (par > 0) {
            rd.started = 1;
        } else {
            co.lines_fn = long_lines;
            rc = pm_i_csv_stream(fp, &co, on_rec, &rd, diag);
        }
        if (rc == PM_OK && !rd.started && co.bytes > 0) { /* not "no data after the header" */
            rc = pm_diag_set(diag, PM_EDATA, display, 0,
                             "the file holds only blank lines; expected rows of respondent and "
                             "item");
        }
    }
    if (rc == PM_OK && ferror(fp)) {
        rc = pm_diag_set(diag, PM_EIO, display, 0, "cannot read");
    }
    if (rc == PM_EIO && errno == EISDIR) {
        rc = pm_diag_set(diag, PM_EIO, display, 0, "is a directory, not a file");
    }
    t->stats.bytes = co.bytes;
    t->stats.lines = co.lines;
    if (par <= 0) { /* a parallel read set it, or left it to pm_table_wait_hash */
        pm_i_sha256_final(&sha, t->stats.sha256);
    }
    if (rc == PM_OK && par <= 0) {
        rc = pm_i_table_finish(t, o, diag);
    }
done:
    if (!is_stdin) {
        fclose(fp);
    }
    if (rc) {
        pm_table_free(t);
        return rc;
    }
    *out = t;
    return PM_OK;
}

/* ==== accessors ============================================================================= */

const pm_input_stats_t *pm_table_stats(const pm_table_t *t) {
    return &t->stats;
}
const char *pm_table_source(const pm_table_t *t) {
    return t->source;
}
bool pm_table_weighted(const pm_table_t *t) {
    return t->weighted;
}
bool pm_table_has_categories(const pm_table_t *t) {
    return t->has_category;
}
size_t pm_table_nrows(const pm_table_t *t) {
    return t->n_rows;
}
void pm_table_row(const pm_table_t *t, size_t i, const char **respondent, const char **item,
                  const char **category) {
    uint32_t r = t->row_resp[i], it = t->row_item[i];
    *respondent = t->n_anon ? NULL : t->rstr ? t->rstr[r] : t->resp.str[r];
    *item = t->items.str[it];
    *category = t->item_cat[it] >= 0 ? t->cats.str[t->item_cat[it]] : NULL;
}
size_t pm_table_nrespondents(const pm_table_t *t) {
    return (size_t)t->stats.respondents;
}
const char *pm_table_respondent(const pm_table_t *t, size_t r) {
    return t->n_anon ? NULL : t->rstr ? t->rstr[r] : t->resp.str[r];
}
bool pm_table_respondent_empty(const pm_table_t *t, size_t r) {
    return !t->resp_has_item[r];
}
void pm_table_row_index(const pm_table_t *t, size_t i, size_t *respondent, size_t *item) {
    *respondent = t->row_resp[i];
    *item = t->row_item[i];
}
size_t pm_table_nitems(const pm_table_t *t) {
    return t->items.count;
}
double pm_table_respondent_weight(const pm_table_t *t, size_t r) {
    return t->weighted ? t->resp_weight[r] : NAN;
}
