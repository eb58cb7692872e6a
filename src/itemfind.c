/* Finding an item the way a person types it: exact, then ignoring letter case, then the plain
 * label of wide-format items split by question, else suggestions ranked by closeness. The
 * rules are stated in include/pairmap/itemfind.h (and in README.md for users). */
#include "pairmap/itemfind.h"

#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include "util.h"

/* Edit distances look at the first FOLD_MAX bytes of each name only: suggestions need no
 * more, and the cost stays bounded whatever the names' length. */
#define FOLD_MAX 256

/* One byte of s folded to lower case: ASCII A..Z, and the second byte of the two-byte UTF-8
 * form of U+00C0..U+00DE (except U+00D7, the multiplication sign), which is 0xC3 0x80..0x9E. */
static unsigned char fold_at(const unsigned char *s, size_t i) {
    unsigned char c = s[i];
    if (c >= 'A' && c <= 'Z') {
        return (unsigned char)(c + 32);
    }
    if (i > 0 && s[i - 1] == 0xC3 && c >= 0x80 && c <= 0x9E && c != 0x97) {
        return (unsigned char)(c + 32);
    }
    return c;
}

static size_t fold(const char *s, size_t n, unsigned char *out, size_t cap) {
    if (n > cap) {
        n = cap;
    }
    for (size_t i = 0; i < n; i++) {
        out[i] = fold_at((const unsigned char *)s, i);
    }
    return n;
}

static size_t edit_distance(const unsigned char *a, size_t la, const unsigned char *b, size_t lb,
                            size_t *prev, size_t *cur) {
    for (size_t j = 0; j <= lb; j++) {
        prev[j] = j;
    }
    for (size_t i = 1; i <= la; i++) {
        cur[0] = i;
        for (size_t j = 1; j <= lb; j++) {
            size_t sub = prev[j - 1] + (a[i - 1] != b[j - 1]);
            size_t del = prev[j] + 1, ins = cur[j - 1] + 1;
            cur[j] = sub < del ? (sub < ins ? sub : ins) : (del < ins ? del : ins);
        }
        size_t *t = prev;
        prev = cur;
        cur = t;
    }
    return prev[lb];
}

static int contains(const unsigned char *h, size_t lh, const unsigned char *nd, size_t ln) {
    if (ln == 0) {
        return 1;
    }
    for (size_t i = 0; i + ln <= lh; i++) {
        if (memcmp(h + i, nd, ln) == 0) {
            return 1;
        }
    }
    return 0;
}

typedef struct {
    int group; /* 0 prefix, 1 substring, 2 other */
    size_t dist, len, idx;
} cand;

static int cand_less(const cand *x, const cand *y, const char *const *names) {
    if (x->group != y->group) {
        return x->group < y->group;
    }
    if (x->dist != y->dist) {
        return x->dist < y->dist;
    }
    if (x->len != y->len) {
        return x->len < y->len;
    }
    return strcmp(names[x->idx], names[y->idx]) < 0;
}

static pm_err_t suggest(const char *const *names, size_t n, const char *text, size_t lt,
                        pm_item_found_t *out) {
    unsigned char ft[FOLD_MAX], fn[FOLD_MAX];
    size_t *buf = pm_i_malloc(2 * (FOLD_MAX + 1), sizeof *buf);
    if (!buf) {
        return PM_ENOMEM;
    }
    size_t flt = fold(text, lt, ft, FOLD_MAX);
    cand best[PM_ITEM_FIND_NEAR];
    size_t nb = 0;
    for (size_t i = 0; i < n; i++) {
        size_t ln = strlen(names[i]);
        size_t fl = fold(names[i], ln, fn, FOLD_MAX);
        cand c = {2, 0, ln, i};
        if (fl >= flt && memcmp(fn, ft, flt) == 0) {
            c.group = 0;
        } else if (contains(fn, fl, ft, flt)) {
            c.group = 1;
        }
        c.dist = edit_distance(fn, fl, ft, flt, buf, buf + FOLD_MAX + 1);
        size_t k = nb;
        while (k > 0 && cand_less(&c, &best[k - 1], names)) {
            k--;
        }
        if (k >= PM_ITEM_FIND_NEAR) {
            continue;
        }
        size_t last = nb < PM_ITEM_FIND_NEAR ? nb : PM_ITEM_FIND_NEAR - 1;
        memmove(best + k + 1, best + k, (last - k) * sizeof *best);
        best[k] = c;
        if (nb < PM_ITEM_FIND_NEAR) {
            nb++;
        }
    }
    free(buf);
    out->n_near = nb;
    for (size_t k = 0; k < nb; k++) {
        out->near[k] = best[k].idx;
    }
    return PM_OK;
}

struct pm_item_index {
    const char *const *names; /* = own */
    const char **own;         /* a copy of the caller's array (the strings are not copied) */
    size_t n;
    size_t *len;          /* bytes of each name */
    unsigned char **fold; /* each name folded (the same length) */
    size_t *order;        /* indices sorted by folded name (memcmp, then length), then index */
};

static const pm_item_index_t *g_ix; /* qsort has no context; building is brief and CLI-only */

static int cmp_fold(const unsigned char *a, size_t la, const unsigned char *b, size_t lb) {
    int c = memcmp(a, b, la < lb ? la : lb);
    return c ? c : (la < lb ? -1 : la > lb);
}

static int cmp_order(const void *p, const void *q) {
    size_t x = *(const size_t *)p, y = *(const size_t *)q;
    int c = cmp_fold(g_ix->fold[x], g_ix->len[x], g_ix->fold[y], g_ix->len[y]);
    return c ? c : (x < y ? -1 : x > y);
}

pm_err_t pm_item_index_new(const char *const *names, size_t n, pm_item_index_t **out) {
    *out = NULL;
    pm_item_index_t *ix = pm_i_calloc(1, sizeof *ix);
    if (!ix) {
        return PM_ENOMEM;
    }
    ix->n = n;
    ix->names = ix->own = pm_i_malloc(n ? n : 1, sizeof *ix->own);
    ix->len = pm_i_malloc(n ? n : 1, sizeof *ix->len);
    ix->fold = pm_i_calloc(n ? n : 1, sizeof *ix->fold);
    ix->order = pm_i_malloc(n ? n : 1, sizeof *ix->order);
    if (!ix->own || !ix->len || !ix->fold || !ix->order) {
        pm_item_index_free(ix);
        return PM_ENOMEM;
    }
    for (size_t i = 0; i < n; i++) {
        ix->own[i] = names[i];
        ix->len[i] = strlen(names[i]);
        ix->fold[i] = pm_i_malloc(ix->len[i] ? ix->len[i] : 1, 1);
        if (!ix->fold[i]) {
            pm_item_index_free(ix);
            return PM_ENOMEM;
        }
        fold(names[i], ix->len[i], ix->fold[i], ix->len[i]);
        ix->order[i] = i;
    }
    g_ix = ix;
    qsort(ix->order, n, sizeof *ix->order, cmp_order);
    g_ix = NULL;
    *out = ix;
    return PM_OK;
}

void pm_item_index_free(pm_item_index_t *ix) {
    if (!ix) {
        return;
    }
    if (ix->fold) {
        for (size_t i = 0; i < ix->n; i++) {
            free(ix->fold[i]);
        }
    }
    free(ix->fold);
    free(ix->len);
    free(ix->order);
    free(ix->own);
    free(ix);
}

/* The first position in order whose folded name is not below key (prefix 0), or whose first
 * lk bytes are not below key (prefix 1). */
static size_t lower_bound(const pm_item_index_t *ix, const unsigned char *key, size_t lk,
                          int prefix) {
    size_t lo = 0, hi = ix->n;
    while (lo < hi) {
        size_t mid = lo + (hi - lo) / 2, i = ix->order[mid];
        size_t l = prefix && ix->len[i] > lk ? lk : ix->len[i];
        if (cmp_fold(ix->fold[i], l, key, lk) < 0) {
            lo = mid + 1;
        } else {
            hi = mid;
        }
    }
    return lo;
}

static int cmp_size(const void *p, const void *q) {
    size_t x = *(const size_t *)p, y = *(const size_t *)q;
    return x < y ? -1 : x > y;
}

/* Appends index i to out->match (room for cap entries was made). */
static void put(pm_item_found_t *out, size_t i) {
    out->match[out->n++] = i;
}

pm_err_t pm_item_find(const pm_item_index_t *ix, const char *text, int want_near,
                      pm_item_found_t *out) {
    memset(out, 0, sizeof *out);
    size_t lt = strlen(text);
    while (lt && (text[0] == ' ' || text[0] == '\t')) {
        text++;
        lt--;
    }
    while (lt && (text[lt - 1] == ' ' || text[lt - 1] == '\t' || text[lt - 1] == '\r' ||
                  text[lt - 1] == '\n')) {
        lt--;
    }
    /* the folded text, with " (" after it for rule 3 */
    unsigned char *key = pm_i_malloc(lt + 2, 1);
    if (!key) {
        return PM_ENOMEM;
    }
    fold(text, lt, key, lt);
    key[lt] = ' ';
    key[lt + 1] = '(';
    /* rules 1 and 2: the names equal to the text ignoring case are one run of order */
    size_t a = lower_bound(ix, key, lt, 0), b = a;
    while (b < ix->n && cmp_fold(ix->fold[ix->order[b]], ix->len[ix->order[b]], key, lt) == 0) {
        b++;
    }
    size_t c = lower_bound(ix, key, lt + 2, 1), d = c; /* rule 3: "text (" ... */
    while (d < ix->n && ix->len[ix->order[d]] >= lt + 2 &&
           memcmp(ix->fold[ix->order[d]], key, lt + 2) == 0) {
        d++;
    }
    free(key);
    size_t cap = (b - a) + (d - c);
    out->match = pm_i_malloc(cap ? cap : 1, sizeof *out->match);
    if (!out->match) {
        return PM_ENOMEM;
    }
    for (size_t k = a; k < b; k++) { /* rule 1 */
        size_t i = ix->order[k];
        if (memcmp(ix->names[i], text, lt) == 0) {
            put(out, i);
            out->how = PM_ITEM_EXACT;
            return PM_OK;
        }
    }
    if (b > a) { /* rule 2 */
        for (size_t k = a; k < b; k++) {
            put(out, ix->order[k]);
        }
        out->how = out->n == 1 ? PM_ITEM_CASE : PM_ITEM_AMBIGUOUS;
    } else {
        for (int ci = 0; ci < 2 && out->n == 0; ci++) { /* rule 3, exact case first */
            for (size_t k = c; k < d; k++) {
                size_t i = ix->order[k];
                if (ix->names[i][ix->len[i] - 1] == ')' && ix->len[i] >= lt + 4 &&
                    (ci || memcmp(ix->names[i], text, lt) == 0)) {
                    put(out, i);
                }
            }
        }
        if (out->n) {
            out->how = PM_ITEM_LABEL;
        }
    }
    if (out->n) {
        qsort(out->match, out->n, sizeof *out->match, cmp_size);
        return PM_OK;
    }
    return want_near ? suggest(ix->names, ix->n, text, lt, out) : PM_OK;
}
void pm_item_found_destroy(pm_item_found_t *f) {
    if (!f) {
        return;
    }
    free(f->match);
    memset(f, 0, sizeof *f);
}
