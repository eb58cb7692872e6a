/* The table the readers build (long and lines in src/read_long.c, wide in src/input_wide.c,
 * chunks of the parallel reader in src/read_par.c): respondents, items, categories, weights,
 * item hygiene (--drop-item, --merge-file), the column selectors and the accessors of
 * include/pairmap/input.h. The runs of deferred respondent ids are merged by src/table_runs.c. */
#include "input_internal.h"

#include <ctype.h>
#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

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

void pm_table_free(pm_table_t *t) {
    if (!t) {
        return;
    }
    if (t->hash_job) {
        pm_i_hash_job_cancel(t->hash_job);
        t->hash_job = NULL;
    }
    free(t->source);
    free(t->hdr_id);
    free(t->hdr_item);
    pm_i_strtab_destroy(&t->idsample);
    pm_i_strtab_destroy(&t->resp);
    pm_i_strtab_destroy(&t->items);
    pm_i_strtab_destroy(&t->cats);
    pm_i_strtab_destroy(&t->drop);
    pm_i_strtab_destroy(&t->merge_from);
    pm_i_strtab_destroy(&t->merge_to_names);
    free(t->merge_to);
    free(t->drop_hit);
    free(t->merge_hit);
    free(t->merge_line);
    for (size_t i = 0; i < t->n_notes; i++) {
        free(t->notes[i]);
    }
    free(t->notes);
    free(t->item_cat);
    free(t->item_line);
    free(t->row_resp);
    free(t->row_item);
    free(t->row_tag);
    free(t->resp_weight);
    free(t->resp_line);
    free(t->resp_has_item);
    free(t->last_id);
    free(t->run_buf);
    free(t->run_off);
    free(t->run_len);
    free(t->run_hash);
    for (size_t k = 0; k < t->n_run_segs; k++) {
        free(t->run_segs[k].buf);
        free(t->run_segs[k].off);
        free(t->run_segs[k].len);
        free(t->run_segs[k].hash);
    }
    free(t->run_segs);
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
    t->merge_line = m.line_of;
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
    pm_i_strtab_init(&t->idsample);
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
    t->drop_hit = pm_i_calloc(t->drop.count ? t->drop.count : 1, 1);
    t->merge_hit = pm_i_calloc(t->merge_from.count ? t->merge_from.count : 1, 1);
    if (!t->drop_hit || !t->merge_hit) {
        pm_table_free(t);
        return pm_diag_set(diag, PM_ENOMEM, display, 0, "out of memory");
    }
    t->tag_rows = t->merge_from.count > 0;
    t->weighted = o->weight_col != NULL;
    t->has_category = o->category_col != NULL;
    *out = t;
    return PM_OK;
}

int pm_i_grow_respondents(pm_table_t *t, size_t need) {
    if (need <= t->resp_cap) {
        return 0;
    }
    size_t c1 = t->resp_cap, c2 = t->resp_cap, c3 = t->resp_cap;
    if (pm_i_grow((void **)&t->resp_line, &c1, need, sizeof(uint64_t)) ||
        pm_i_grow((void **)&t->resp_has_item, &c2, need, 1) ||
        (t->weighted && pm_i_grow((void **)&t->resp_weight, &c3, need, sizeof(double)))) {
        return -1;
    }
    t->resp_cap = c1;
    return 0;
}

int pm_i_grow_rows(pm_table_t *t, size_t need) {
    if (need <= t->rows_cap) {
        return 0;
    }
    size_t c1 = t->rows_cap, c2 = t->rows_cap, c3 = t->rows_cap;
    if (pm_i_grow((void **)&t->row_resp, &c1, need, sizeof(uint32_t)) ||
        pm_i_grow((void **)&t->row_item, &c2, need, sizeof(uint32_t)) ||
        (t->tag_rows && pm_i_grow((void **)&t->row_tag, &c3, need, sizeof(uint32_t)))) {
        return -1;
    }
    t->rows_cap = c1 < c2 ? c1 : c2;
    return 0;
}

int pm_i_grow_runs(pm_table_t *t, size_t runs, size_t bytes) {
    size_t c2 = t->run_off_cap, c3 = t->run_off_cap;
    return pm_i_grow((void **)&t->run_buf, &t->run_cap, bytes, 1) ||
           pm_i_grow((void **)&t->run_off, &t->run_off_cap, runs, sizeof *t->run_off) ||
           pm_i_grow((void **)&t->run_len, &c2, runs, sizeof *t->run_len) ||
           pm_i_grow((void **)&t->run_hash, &c3, runs, sizeof *t->run_hash);
}

static pm_err_t new_respondent(pm_table_t *t, size_t r, uint64_t line, pm_diag_t *diag) {
    if (pm_i_grow_respondents(t, r + 1)) {
        return pm_diag_set(diag, PM_ENOMEM, t->source, 0, "out of memory");
    }
    if (t->resp_weight) { /* only with weights */
        t->resp_weight[r] = NAN;
    }
    t->resp_line[r] = line;
    t->resp_has_item[r] = 0;
    t->stats.respondents++;
    return PM_OK;
}

pm_err_t pm_i_table_respondent(pm_table_t *t, const char *id, size_t len, uint64_t line,
                               uint32_t *r, pm_diag_t *diag) {
    if (t->last_r >= 0 && len == t->last_len && pm_i_same_id(id, t->last_id, len)) {
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
        if (pm_i_grow_runs(t, rr + 1, t->run_used + len + 1) ||
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
        t->run_own = t->run_n;
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

pm_err_t pm_i_table_anon_respondent(pm_table_t *t, uint64_t line, uint32_t *r, pm_diag_t *diag) {
    if (t->n_anon >= UINT32_MAX - 1) {
        return pm_diag_set(diag, PM_EDATA, t->source, (long)line, "more than %u respondents",
                           (unsigned)(UINT32_MAX - 1));
    }
    size_t id = (size_t)t->n_anon++;
    pm_err_t rc = new_respondent(t, id, line, diag);
    *r = (uint32_t)id;
    return rc;
}

pm_err_t pm_i_table_add(pm_table_t *t, uint32_t r, const char *item, size_t len, const char *cat,
                        size_t catlen, uint64_t line, pm_diag_t *diag) {
    pm_i_trim(&item, &len);
    if (len == 0) {
        t->stats.empty_items++;
        return PM_OK;
    }
    int64_t d;
    if (t->drop.count && (d = pm_i_strtab_find(&t->drop, item, len)) >= 0) {
        t->drop_hit[d] = 1;
        t->stats.dropped_rows++;
        return PM_OK;
    }
    uint32_t tag = t->add_tag;
    if (t->merge_from.count) {
        int64_t m = pm_i_strtab_find(&t->merge_from, item, len);
        if (m >= 0) {
            tag = (uint32_t)m + 1;
            int64_t g = t->merge_to[m];
            t->merge_hit[m] = 1;
            item = t->merge_to_names.str[g];
            len = t->merge_to_names.len[g];
            t->stats.merged_rows++;
            if (t->drop.count && (d = pm_i_strtab_find(&t->drop, item, len)) >= 0) {
                t->drop_hit[d] = 1;
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
    if (pm_i_grow_rows(t, t->n_rows + 1)) {
        return pm_diag_set(diag, PM_ENOMEM, t->source, 0, "out of memory");
    }
    t->row_resp[t->n_rows] = r;
    t->row_item[t->n_rows] = (uint32_t)it;
    if (t->row_tag) {
        t->row_tag[t->n_rows] = tag;
    }
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
    if (*end == ',' && end > buf && isdigit((unsigned char)end[-1]) &&
        isdigit((unsigned char)end[1]) && !strchr(end + 1, ',')) {
        return pm_diag_set(diag, PM_EDATA, t->source, (long)line,
                           "weight '%s' has a decimal comma; a decimal point is expected "
                           "(%.*s.%s)",
                           buf, (int)(end - buf), buf, end + 1);
    }
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

pm_err_t pm_i_table_finish(pm_table_t *t, const pm_input_opts_t *o, pm_diag_t *diag) {
    if (t->defer && t->run_n) {
        pm_err_t rc = pm_i_table_merge_runs(t, o->threads, diag);
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
    t->max_basket = o->max_basket;
    return PM_OK;
}

/* ==== columns ============================================================================== */

long pm_i_column_index(const char *sel, const char *const *hdr, const uint32_t *hlen, size_t n) {
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

/* ==== accessors ============================================================================= */

size_t pm_table_take_rows(pm_table_t *t, uint32_t **resp, uint32_t **item) {
    size_t cap = t->row_resp && t->row_item ? t->rows_cap : 0;
    *resp = cap ? t->row_resp : NULL;
    *item = cap ? t->row_item : NULL;
    if (!cap) {
        free(t->row_resp);
        free(t->row_item);
    }
    free(t->row_tag);
    t->row_resp = t->row_item = t->row_tag = NULL;
    t->n_rows = t->rows_cap = 0;
    return cap;
}

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
uint64_t pm_table_rows_of(const pm_table_t *t, size_t n, const unsigned char *sel) {
    const uint32_t *rr = t->row_resp;
    uint64_t k = 0;
    if (!sel) {
        for (size_t i = 0; i < t->n_rows; i++) {
            k += rr[i] < n;
        }
        return k;
    }
    for (size_t i = 0; i < t->n_rows; i++) {
        k += rr[i] < n && sel[rr[i]];
    }
    return k;
}
size_t pm_table_nitems(const pm_table_t *t) {
    return t->items.count;
}
double pm_table_respondent_weight(const pm_table_t *t, size_t r) {
    return t->weighted ? t->resp_weight[r] : NAN;
}

/* ==== restriction to some respondents (--only-segment) ===================================== */
pm_err_t pm_table_keep(pm_table_t *t, const unsigned char *keep, pm_diag_t *diag) {
    size_t nr = (size_t)t->stats.respondents, ni = t->items.count;
    uint32_t *newr = pm_i_malloc(nr ? nr : 1, sizeof *newr);
    int64_t *newi = pm_i_malloc(ni ? ni : 1, sizeof *newi);
    const char **ids = t->n_anon ? NULL : pm_i_malloc(nr ? nr : 1, sizeof *ids);
    pm_i_strtab items;
    pm_i_strtab_init(&items);
    if (!newr || !newi || (!t->n_anon && !ids)) {
        free(newr);
        free(newi);
        free((void *)ids);
        return pm_diag_set(diag, PM_ENOMEM, t->source, 0, "out of memory");
    }
    size_t k = 0;
    for (size_t r = 0; r < nr; r++) {
        if (!keep[r]) {
            newr[r] = UINT32_MAX;
            continue;
        }
        newr[r] = (uint32_t)k;
        if (ids) {
            ids[k] = pm_table_respondent(t, r); /* addresses stay valid: the arena is kept */
        }
        if (t->resp_weight) {
            t->resp_weight[k] = t->resp_weight[r];
        }
        t->resp_line[k] = t->resp_line[r];
        t->resp_has_item[k] = t->resp_has_item[r];
        k++;
    }
    for (size_t i = 0; i < ni; i++) {
        newi[i] = -1;
    }
    size_t w = 0;
    for (size_t i = 0; i < t->n_rows; i++) {
        uint32_t r = newr[t->row_resp[i]];
        if (r != UINT32_MAX) {
            t->row_resp[w] = r;
            t->row_item[w] = t->row_item[i];
            if (t->row_tag) {
                t->row_tag[w] = t->row_tag[i];
            }
            newi[t->row_item[i]] = 0; /* used */
            w++;
        }
    }
    /* the items that still have a row, renumbered in their old order (so that the item
     * arrays compact in place): the table is the one the kept respondents' rows alone give */
    pm_err_t rc = PM_OK;
    for (size_t i = 0; i < ni && rc == PM_OK; i++) {
        if (newi[i] < 0) {
            continue;
        }
        newi[i] = pm_i_strtab_intern(&items, t->items.str[i], t->items.len[i], NULL);
        if (newi[i] < 0) {
            rc = pm_diag_set(diag, PM_ENOMEM, t->source, 0, "out of memory");
        } else {
            t->item_cat[newi[i]] = t->item_cat[i];
            t->item_line[newi[i]] = t->item_line[i];
        }
    }
    if (rc != PM_OK) {
        pm_i_strtab_destroy(&items);
        free(newr);
        free(newi);
        free((void *)ids);
        return rc;
    }
    for (size_t i = 0; i < w; i++) {
        t->row_item[i] = (uint32_t)newi[t->row_item[i]];
    }
    pm_i_strtab_destroy(&t->items);
    t->items = items;
    t->n_rows = w;
    if (ids) {
        free((void *)t->rstr);
        t->rstr = ids;
    } else {
        t->n_anon = k;
    }
    t->stats.respondents_left_out += nr - k;
    t->stats.respondents = k;
    t->respondents_override = 0; /* respondents not in the file have no segment */
    free(newr);
    free(newi);
    return PM_OK;
}
