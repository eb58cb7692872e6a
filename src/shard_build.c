/* Count shards from a table and its incidence (pm_shard_build, the options' fingerprint), and
 * back: the incidence, pair list and stand-in table a map is built from (pm_shard_incidence,
 * pm_shard_table). */
#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "exactsum.h"
#include "input_internal.h"
#include "sha256.h"
#include "shard_internal.h"
#include "util.h"

/* ---- fingerprint --------------------------------------------------------------------------- */
typedef struct {
    char *p;
    size_t n, cap;
    int fail;
} tbuf;

static void tput(tbuf *b, const char *s, size_t n) {
    if (b->fail || pm_i_grow((void **)&b->p, &b->cap, b->n + n + 1, 1)) {
        b->fail = 1;
        return;
    }
    memcpy(b->p + b->n, s, n);
    b->n += n;
    b->p[b->n] = '\0';
}

/* name=value, with \ and line breaks in value escaped as \\, \n, \r */
static void tline(tbuf *b, const char *name, const char *value) {
    tput(b, name, strlen(name));
    tput(b, "=", 1);
    for (const char *v = value ? value : ""; *v; v++) {
        if (*v == '\\' || *v == '\n' || *v == '\r') {
            char e[2] = {'\\', *v == '\n' ? 'n' : *v == '\r' ? 'r' : '\\'};
            tput(b, e, 2);
        } else {
            tput(b, v, 1);
        }
    }
    tput(b, "\n", 1);
}

static int str_cmp(const void *x, const void *y) {
    return strcmp(*(const char *const *)x, *(const char *const *)y);
}

/* Each value of a repeatable option, sorted (their order does not change counting) unless
 * keep_order. */
static void tlist(tbuf *b, const char *name, const char *const *v, size_t n, int keep_order) {
    const char **s = pm_i_malloc(n ? n : 1, sizeof *s);
    if (!s) {
        b->fail = 1;
        return;
    }
    if (n) { /* v may be NULL when the option was not given */
        memcpy(s, v, n * sizeof *s);
    }
    if (!keep_order && n > 1) {
        qsort(s, n, sizeof *s, str_cmp);
    }
    for (size_t i = 0; i < n; i++) {
        if (i && !keep_order && strcmp(s[i], s[i - 1]) == 0) {
            continue;
        }
        tline(b, name, s[i]);
    }
    free(s);
}

static pm_err_t file_sha256(const char *path, const char *what, char hex[65], pm_diag_t *diag) {
    FILE *fp = fopen(path, "rb");
    if (!fp) {
        return pm_diag_set(diag, PM_EIO, path, 0, "cannot open the %s: %s", what, strerror(errno));
    }
    pm_i_sha256 h;
    pm_i_sha256_init(&h);
    unsigned char buf[65536];
    size_t n;
    while ((n = fread(buf, 1, sizeof buf, fp)) > 0) {
        pm_i_sha256_update(&h, buf, n);
    }
    int err = ferror(fp);
    fclose(fp);
    if (err) {
        return pm_diag_set(diag, PM_EIO, path, 0, "cannot read the %s", what);
    }
    unsigned char d[32];
    pm_i_sha256_final(&h, d);
    for (int i = 0; i < 32; i++) {
        snprintf(hex + 2 * i, 3, "%02x", d[i]);
    }
    return PM_OK;
}

pm_err_t pm_shard_fingerprint(const pm_input_opts_t *o, char **out, pm_diag_t *diag) {
    *out = NULL;
    static const char *const formats[] = {"long", "lines", "wide"};
    tbuf b = {0};
    char num[32];
    tline(&b, "format", formats[o->format]);
    tline(&b, "id-col", o->id_col);
    tline(&b, "item-col", o->item_col);
    tline(&b, "category-col", o->category_col);
    tline(&b, "weight-col", o->weight_col);
    snprintf(num, sizeof num, "%d", (int)(unsigned char)o->sep);
    tline(&b, "sep", o->sep ? num : "detect");
    tline(&b, "header", o->no_header ? "no" : "yes");
    snprintf(num, sizeof num, "%llu", (unsigned long long)o->respondents);
    tline(&b, "respondents", o->respondents ? num : "");
    if (o->max_basket) { /* only when given: older shards keep their fingerprints */
        snprintf(num, sizeof num, "%llu", (unsigned long long)o->max_basket);
        tline(&b, "max-basket", num);
    }
    tlist(&b, "drop-item", o->drop_items, o->n_drop_items, 0);
    char hex[65] = "";
    if (o->merge_file) {
        pm_err_t rc = file_sha256(o->merge_file, "merge file", hex, diag);
        if (rc) {
            free(b.p);
            return rc;
        }
    }
    tline(&b, "merge-file-sha256", hex);
    tlist(&b, "columns", o->columns, o->n_columns, 1);
    tlist(&b, "drop-value", o->drop_values, o->n_drop_values, 0);
    tlist(&b, "skip-col", o->skip_cols, o->n_skip_cols, 0);
    tline(&b, "base", o->format != PM_FORMAT_WIDE ? "" : o->base_all ? "all" : "answered");
    /* a restriction to some respondents (--only-segment): lines only when given, so that the
     * fingerprints of unrestricted shards stay as they were */
    tlist(&b, "only-segment", o->only_segments, o->n_only_segments, 0);
    if (o->n_only_segments && o->segment_file) {
        pm_err_t rc = file_sha256(o->segment_file, "segment file", hex, diag);
        if (rc) {
            free(b.p);
            return rc;
        }
        tline(&b, "segment-file-sha256", hex);
    }
    if (b.fail) {
        free(b.p);
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
    }
    *out = b.p;
    return PM_OK;
}

/* ---- a shard from the rows ------------------------------------------------------------------ */
/* The incidence of the respondents r with sel[r] (borrowing inc's names): rows, totals and
 * weight sums as pm_incidence_build makes them (sums in respondent order). */
static pm_err_t sub_incidence(const pm_incidence_t *inc, const unsigned char *sel,
                              pm_incidence_t *sub) {
    memset(sub, 0, sizeof *sub);
    size_t nr = 0;
    uint64_t nnz = 0;
    for (size_t r = 0; r < inc->n_resp; r++) {
        if (sel[r]) {
            nr++;
            nnz += inc->row_ptr[r + 1] - inc->row_ptr[r];
        }
    }
    sub->n_items = inc->n_items;
    sub->name = inc->name;
    sub->category = inc->category;
    sub->count = pm_i_calloc(inc->n_items ? inc->n_items : 1, sizeof *sub->count);
    sub->row_ptr = pm_i_malloc(nr + 1, sizeof *sub->row_ptr);
    sub->col = pm_i_malloc(nnz ? (size_t)nnz : 1, sizeof *sub->col);
    if (inc->weight) {
        sub->weight = pm_i_malloc(nr ? nr : 1, sizeof *sub->weight);
        sub->wcount = pm_i_calloc(inc->n_items ? inc->n_items : 1, sizeof *sub->wcount);
    }
    if (!sub->count || !sub->row_ptr || !sub->col ||
        (inc->weight && (!sub->weight || !sub->wcount))) {
        return PM_ENOMEM;
    }
    size_t at = 0;
    uint64_t w = 0;
    sub->row_ptr[0] = 0;
    long double W = 0, W2 = 0;
    for (size_t r = 0; r < inc->n_resp; r++) {
        if (!sel[r]) {
            continue;
        }
        uint64_t len = inc->row_ptr[r + 1] - inc->row_ptr[r];
        memcpy(sub->col + w, inc->col + inc->row_ptr[r], (size_t)len * sizeof *sub->col);
        for (uint64_t q = 0; q < len; q++) {
            sub->count[sub->col[w + q]]++;
        }
        sub->single_item += len == 1;
        sub->no_item += len == 0;
        w += len;
        if (inc->weight) {
            sub->weight[at] = inc->weight[r];
            W += inc->weight[r];
            W2 += (long double)inc->weight[r] * inc->weight[r];
        }
        sub->row_ptr[++at] = w;
    }
    sub->n_resp = nr;
    sub->N = nr;
    sub->W = sub->W2 = (double)nr;
    if (inc->weight) {
        sub->W = (double)W;
        sub->W2 = (double)W2;
        long double *acc = pm_i_calloc(inc->n_items ? inc->n_items : 1, sizeof *acc);
        if (!acc) {
            return PM_ENOMEM;
        }
        for (size_t r = 0; r < nr; r++) {
            for (uint64_t k = sub->row_ptr[r]; k < sub->row_ptr[r + 1]; k++) {
                acc[sub->col[k]] += sub->weight[r];
            }
        }
        for (size_t i = 0; i < inc->n_items; i++) {
            sub->wcount[i] = (double)acc[i];
        }
        free(acc);
    }
    return PM_OK;
}

static void sub_free(pm_incidence_t *sub) {
    free(sub->count);
    free(sub->wcount);
    free(sub->row_ptr);
    free(sub->col);
    free(sub->weight);
}

static char *dup_str(const char *s) {
    char *d = pm_i_malloc(strlen(s) + 1, 1);
    if (d) {
        strcpy(d, s);
    }
    return d;
}

static pm_shard_x_t u_x(pm_i_u128 u) {
    return (pm_shard_x_t){(uint64_t)u, (uint64_t)(u >> 64)};
}

/* The exact weight sums of sub (weights held divided by 2^wexp) into s: W, W2, per item and
 * per pair (c's pairs, found by binary search in each row). 0, 1 when out of memory, 2 when
 * the weights' range is too wide for exact sums. */
static int exact_sums(pm_shard_t *s, const pm_incidence_t *sub, const pm_counts_t *c, int wexp) {
    size_t nr = sub->n_resp;
    pm_i_xs_range xr = {0}, xr2 = {0};
    double wmax = 0;
    for (size_t r = 0; r < nr; r++) {
        pm_i_xs_see(&xr, sub->weight[r]);
        pm_i_xs_see(&xr2, sub->weight[r] * sub->weight[r]);
        wmax = sub->weight[r] > wmax ? sub->weight[r] : wmax;
    }
    int xe, xe2, x;
    if (pm_i_xs_fit(&xr, nr, &xe) || pm_i_xs_fit(&xr2, nr, &xe2)) {
        return 2;
    }
    (void)frexp(wmax, &x);
    s->wexp = nr ? x + wexp : -2000; /* no respondent: no weight, e = e2 = 0 */
    s->e = nr ? xe + wexp : 0;
    s->e2 = nr ? xe2 + 2 * wexp : 0;
    size_t ni = sub->n_items, np = c->n_pairs;
    pm_i_u128 *acc = pm_i_calloc(2 * ni + np + 1, sizeof *acc);
    size_t *first = pm_i_malloc(ni + 1, sizeof *first);
    if (!acc || !first) {
        free(acc);
        free(first);
        return 1;
    }
    for (size_t a = 0, k = 0; a <= ni; a++) { /* pairs (a, .) are first[a] .. first[a + 1] */
        while (k < np && c->a[k] < a) {
            k++;
        }
        first[a] = k;
    }
    pm_i_u128 W = 0, W2 = 0, *pw = acc + 2 * ni;
    for (size_t r = 0; r < nr; r++) {
        pm_i_u128 u = pm_i_xs_units(sub->weight[r], xe);
        pm_i_u128 u2 = pm_i_xs_units(sub->weight[r] * sub->weight[r], xe2);
        W += u;
        W2 += u2;
        for (uint64_t q = sub->row_ptr[r]; q < sub->row_ptr[r + 1]; q++) {
            uint32_t a = sub->col[q];
            acc[2 * a] += u;
            acc[2 * a + 1] += u2;
            size_t lo = first[a];
            for (uint64_t q2 = q + 1; q2 < sub->row_ptr[r + 1]; q2++) {
                uint32_t b = sub->col[q2];
                size_t l = lo, h = first[a + 1]; /* the row is sorted: b only grows */
                while (l < h) {
                    size_t mid = l + (h - l) / 2;
                    if (c->b[mid] < b) {
                        l = mid + 1;
                    } else {
                        h = mid;
                    }
                }
                pw[l] += u;
                lo = l + 1;
            }
        }
    }
    s->W = u_x(W);
    s->W2 = u_x(W2);
    for (size_t i = 0; i < ni; i++) {
        s->wcount[i] = u_x(acc[2 * i]);
        s->w2count[i] = u_x(acc[2 * i + 1]);
    }
    for (size_t k = 0; k < np; k++) {
        s->w[k] = u_x(pw[k]);
    }
    free(acc);
    free(first);
    return 0;
}

/* Copies the items, totals and pair counts of sub (counted in c) into s; the pairs' items are
 * c's arrays, taken (c->a and c->b are NULL afterwards). */
static int fill_shard(pm_shard_t *s, const pm_incidence_t *sub, pm_counts_t *c, int wexp) {
    if (pm_i_shard_alloc(s, sub->n_items, c->n_pairs)) {
        return 1;
    }
    for (size_t i = 0; i < sub->n_items; i++) {
        s->n_items = i + 1;
        s->name[i] = dup_str(sub->name[i]);
        s->category[i] = sub->category[i] ? dup_str(sub->category[i]) : NULL;
        if (!s->name[i] || (sub->category[i] && !s->category[i])) {
            return 1;
        }
        s->count[i] = sub->count[i];
    }
    for (size_t k = 0; k < c->n_pairs; k++) {
        s->n[k] = c->n[k];
    }
    s->n_pairs = c->n_pairs;
    int rc = s->weighted ? exact_sums(s, sub, c, wexp) : 0;
    free(s->a); /* the pairs' items are c's arrays, taken */
    free(s->b);
    s->a = c->a;
    s->b = c->b;
    c->a = c->b = NULL;
    return rc;
}

/* The pairs of use, with the table's rows (no longer needed: the rows and duplicates are
 * counted) as the counting's scratch: memory in use already instead of fresh pages. */
static pm_err_t count_pairs(pm_table_t *t, const pm_incidence_t *use, unsigned threads,
                            pm_counts_t **c, pm_diag_t *diag) {
    pm_counts_opts_t co;
    pm_counts_opts_init(&co);
    co.threads = threads;
    co.min_keep = 1;
    co.scratch_n = pm_table_take_rows(t, &co.scratch[0], &co.scratch[1]);
    pm_err_t rc = pm_counts_build(use, &co, c, diag);
    free(co.scratch[0]);
    free(co.scratch[1]);
    return rc;
}

pm_err_t pm_shard_build(pm_table_t *t, const pm_incidence_t *inc, uint64_t k, uint64_t m,
                        const char *fingerprint, unsigned threads, pm_shard_t **out,
                        pm_diag_t *diag) {
    *out = NULL;
    pm_shard_t *s = pm_i_calloc(1, sizeof *s);
    unsigned char *sel = pm_i_malloc(inc->n_resp ? inc->n_resp : 1, 1);
    pm_incidence_t sub;
    memset(&sub, 0, sizeof sub);
    pm_counts_t *c = NULL;
    pm_err_t rc = PM_ENOMEM;
    if (!s || !sel || !(s->fingerprint = dup_str(fingerprint)) ||
        !(s->parts = pm_i_calloc(1, sizeof *s->parts))) {
        goto done;
    }
    m = m ? m : 1;
    for (size_t r = 0; r < inc->n_resp && m == 1; r++) { /* the whole input: no id hashed */
        sel[r] = !(inc->left_out && inc->left_out[r]);   /* --max-basket: in no part */
    }
    for (size_t r = 0; r < inc->n_resp && m > 1; r++) {
        const char *id = pm_table_respondent(t, r);
        char num[32];
        if (!id) { /* no id: the respondent's 1-based number */
            snprintf(num, sizeof num, "%llu", (unsigned long long)r + 1);
            id = num;
        }
        sel[r] = pm_shard_part_of(id, strlen(id), m) == k;
        if (inc->left_out && inc->left_out[r]) {
            sel[r] = 0; /* --max-basket: in no part */
        }
    }
    const pm_incidence_t *use = inc;
    if (m > 1) {
        if ((rc = sub_incidence(inc, sel, &sub)) != PM_OK) {
            goto done;
        }
        use = &sub;
    }
    rc = PM_ENOMEM;
    s->weighted = inc->wcount != NULL;
    s->has_categories = pm_table_has_categories(t);
    memcpy(s->parts[0].src, pm_table_stats(t)->sha256, 32);
    s->parts[0].m = m;
    s->parts[0].k = k;
    s->n_parts = 1;
    s->N = m == 1 ? inc->N : sub.N;
    s->respondents = use->n_resp - (m == 1 ? inc->n_left_out : 0); /* sub: none left out */
    s->rows = pm_table_rows_of(t, inc->n_resp, m == 1 && !inc->left_out ? NULL : sel);
    s->duplicates = m == 1 ? inc->duplicates : s->rows - use->row_ptr[use->n_resp];
    uint64_t collapsed = 0; /* rows merging made one (not duplicates of the input) */
    if (m > 1 && pm_i_merge_collapses(t, sel, &collapsed) != 0) {
        goto done;
    }
    s->duplicates -= m > 1 && collapsed <= s->duplicates ? collapsed : 0;
    s->single_item = use->single_item;
    s->no_item = m == 1 ? inc->no_item : sub.no_item;
    if ((rc = count_pairs(t, use, threads, &c, diag)) != PM_OK) {
        goto done;
    }
    rc = PM_ENOMEM;
    int fr = fill_shard(s, use, c, inc->wexp);
    if (fr == 2) {
        rc = pm_diag_set(diag, PM_EDATA, pm_table_source(t), 0,
                         "the weights span too wide a range for the exact sums of a count shard "
                         "(over 2^60 between the largest and the finest step); give weights "
                         "of a narrower range");
        goto done;
    }
    if (fr) {
        goto done;
    }
    rc = PM_OK;
done:
    if (rc == PM_ENOMEM) {
        pm_diag_set(diag, PM_ENOMEM, pm_table_source(t), 0, "out of memory building the shard");
    }
    pm_counts_free(c);
    sub_free(&sub);
    free(sel);
    if (rc) {
        pm_shard_free(s);
        return rc;
    }
    *out = s;
    return PM_OK;
}

/* ---- a map's inputs from a shard ----------------------------------------------------------- */
/* x 2^e rounded to a double (x an exact sum; the rounding of the conversion is the only one) */
static double x_double(pm_shard_x_t x, int e) {
    return pm_i_xs_double((pm_i_u128)x.hi << 64 | x.lo, e);
}

pm_err_t pm_shard_incidence(const pm_shard_t *s, pm_incidence_t **out, pm_counts_t **pairs,
                            pm_diag_t *diag) {
    *out = NULL;
    *pairs = NULL;
    size_t ni = s->n_items, bytes = 0;
    int wexp = s->weighted && s->wexp > -2000 ? s->wexp : 0;
    for (size_t i = 0; i < ni; i++) {
        bytes += strlen(s->name[i]) + 1 + (s->category[i] ? strlen(s->category[i]) + 1 : 0);
    }
    pm_incidence_t *inc = pm_i_calloc(1, sizeof *inc);
    pm_counts_t *c = pm_i_calloc(1, sizeof *c);
    if (!inc || !c) {
        goto fail;
    }
    inc->name = pm_i_calloc(ni ? ni : 1, sizeof *inc->name);
    inc->category = pm_i_calloc(ni ? ni : 1, sizeof *inc->category);
    inc->count = pm_i_malloc(ni ? ni : 1, sizeof *inc->count);
    inc->storage = pm_i_malloc(bytes ? bytes : 1, 1);
    inc->row_ptr = pm_i_calloc(1, sizeof *inc->row_ptr);
    inc->col = pm_i_calloc(1, sizeof *inc->col);
    if (s->weighted) {
        inc->wcount = pm_i_malloc(ni ? ni : 1, sizeof *inc->wcount);
        inc->w2count = pm_i_malloc(ni ? ni : 1, sizeof *inc->w2count);
        inc->weight = pm_i_calloc(1, sizeof *inc->weight); /* weighted, without rows */
    }
    size_t np = s->n_pairs;
    c->a = pm_i_malloc(np ? np : 1, sizeof *c->a);
    c->b = pm_i_malloc(np ? np : 1, sizeof *c->b);
    c->n = pm_i_malloc(np ? np : 1, sizeof *c->n);
    c->w = s->weighted ? pm_i_malloc(np ? np : 1, sizeof *c->w) : NULL;
    if (!inc->name || !inc->category || !inc->count || !inc->storage || !inc->row_ptr ||
        !inc->col || (s->weighted && (!inc->wcount || !inc->w2count || !inc->weight)) || !c->a ||
        !c->b || !c->n || (s->weighted && !c->w)) {
        goto fail;
    }
    char *at = inc->storage;
    for (size_t i = 0; i < ni; i++) {
        inc->name[i] = strcpy(at, s->name[i]);
        at += strlen(at) + 1;
        if (s->category[i]) {
            inc->category[i] = strcpy(at, s->category[i]);
            at += strlen(at) + 1;
        }
        inc->count[i] = s->count[i];
        if (s->weighted) {
            inc->wcount[i] = x_double(s->wcount[i], s->e - wexp);
            inc->w2count[i] = x_double(s->w2count[i], s->e2 - 2 * wexp);
        }
    }
    inc->n_items = ni;
    inc->N = s->N;
    inc->W = s->weighted ? x_double(s->W, s->e - wexp) : (double)s->N;
    inc->W2 = s->weighted ? x_double(s->W2, s->e2 - 2 * wexp) : (double)s->N;
    inc->wexp = s->weighted ? wexp : 0;
    inc->duplicates = s->duplicates;
    inc->single_item = s->single_item;
    inc->no_item = s->no_item;
    for (size_t k = 0; k < np; k++) {
        if (s->n[k] > UINT32_MAX) {
            pm_incidence_free(inc);
            pm_counts_free(c);
            return pm_diag_set(diag, PM_EDATA, NULL, 0, "a pair count beyond 2^32 - 1");
        }
        c->a[k] = s->a[k];
        c->b[k] = s->b[k];
        c->n[k] = (uint32_t)s->n[k];
        if (s->weighted) {
            c->w[k] = x_double(s->w[k], s->e - wexp);
        }
    }
    c->n_pairs = np;
    c->seen = np;
    int finite = isfinite(inc->W) && isfinite(inc->W2);
    for (size_t i = 0; s->weighted && i < ni; i++) {
        finite &= isfinite(inc->wcount[i]) && isfinite(inc->w2count[i]);
    }
    for (size_t k = 0; s->weighted && k < np; k++) {
        finite &= isfinite(c->w[k]);
    }
    if (!finite) {
        pm_incidence_free(inc);
        pm_counts_free(c);
        return pm_diag_set(diag, PM_EDATA, NULL, 0, "weight sums beyond the range of a double");
    }
    *out = inc;
    *pairs = c;
    return PM_OK;
fail:
    pm_incidence_free(inc);
    pm_counts_free(c);
    return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
}

pm_err_t pm_shard_table(const pm_shard_t *s, const char *name, uint64_t bytes,
                        const unsigned char sha256[32], pm_table_t **out, pm_diag_t *diag) {
    *out = NULL;
    pm_table_t *t = pm_i_calloc(1, sizeof *t);
    if (!t || !(t->source = dup_str(name))) {
        free(t);
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
    }
    t->weighted = s->weighted;
    t->has_category = s->has_categories;
    t->stats.bytes = bytes;
    memcpy(t->stats.sha256, sha256, 32);
    t->stats.respondents = s->respondents;
    t->stats.rows = s->rows;
    t->stats.records = s->rows;
    *out = t;
    return PM_OK;
}
