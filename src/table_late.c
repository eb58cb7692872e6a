/* --drop-item names and --merge-file items that no row matched exactly, looked up after reading
 * with the rules of pairmap/itemfind.h (letter case, a wide label under several questions) and
 * applied to the finished table; what cannot be found is a warning naming the closest items. */
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "input_internal.h"
#include "pairmap/itemfind.h"

#define DEAD UINT32_MAX
/* Warnings about names that match nothing, one per name up to this many; the rest are counted
 * in one line (a merge file may list many codes this file does not hold). */
#define MAX_MISSING 5

int pm_i_table_note(pm_table_t *t, const char *fmt, ...) {
    char buf[1024];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(buf, sizeof buf, fmt, ap);
    va_end(ap);
    char **n2 = realloc(t->notes, (t->n_notes + 1) * sizeof *n2);
    if (!n2) {
        return -1;
    }
    t->notes = n2;
    if (!(t->notes[t->n_notes] = strdup(buf))) {
        return -1;
    }
    t->n_notes++;
    return 0;
}

/* "'a', 'b', 'c'" of the items idx[0..n) into buf (at most 8 names). */
static void name_list(const pm_table_t *t, const size_t *idx, size_t n, char *buf, size_t cap) {
    size_t used = 0;
    buf[0] = '\0';
    for (size_t k = 0; k < n && k < 8 && used < cap; k++) {
        int w = snprintf(buf + used, cap - used, "%s'%.200s'", k ? ", " : "", t->items.str[idx[k]]);
        used += w > 0 ? (size_t)w : 0;
    }
    if (n > 8 && used < cap) {
        snprintf(buf + used, cap - used, " and %zu more", n - 8);
    }
}

typedef struct {
    pm_table_t *t;
    pm_item_index_t *ix;
    uint32_t *map; /* old item -> itself, DEAD or the item it merges into */
    size_t n_old;
    size_t missing; /* names that matched nothing */
    uint64_t first_missing_line;
    int changed;
} late;

/* Looks name up; kind is "--drop-item" or the merge file's "PATH:LINE". Returns 1 when it
 * matched items (in f), 0 when not (a warning was noted), -1 when out of memory. */
static int look_up(late *L, const char *name, const char *kind, uint64_t line, pm_item_found_t *f) {
    char list[1200];
    int near = L->missing < MAX_MISSING;
    if (pm_item_find(L->ix, name, near, f)) {
        return -1;
    }
    if (f->how == PM_ITEM_CASE || f->how == PM_ITEM_LABEL || f->how == PM_ITEM_EXACT) {
        name_list(L->t, f->match, f->n, list, sizeof list);
        return pm_i_table_note(L->t, "note: %s '%.200s' taken as %s (%s)", kind, name, list,
                               f->how == PM_ITEM_LABEL ? "the label under each question"
                                                       : "letter case differs") < 0
                   ? -1
                   : 1;
    }
    if (f->how == PM_ITEM_AMBIGUOUS) {
        name_list(L->t, f->match, f->n, list, sizeof list);
        return pm_i_table_note(L->t,
                               "warning: %s '%.200s' matches no item exactly and, ignoring letter "
                               "case, several: %s; none taken: give the name exactly",
                               kind, name, list) < 0
                   ? -1
                   : 0;
    }
    if (L->missing++ == 0) {
        L->first_missing_line = line;
    }
    if (!near) {
        return 0;
    }
    name_list(L->t, f->near, f->n_near, list, sizeof list);
    return pm_i_table_note(L->t, "warning: %s '%.200s' matches no item; closest: %s", kind, name,
                           f->n_near ? list : "(no items)") < 0
               ? -1
               : 0;
}

/* The item that item y (category cy) joins for the group g. Long and lines formats: the item
 * named g (a category it lacks is taken from y; another category: -2, as when reading).
 * Wide format (a merged group stays in its question): the item with label g under y's
 * question, named g or "g (question)", else a new one ("g (question)": compact() names it as
 * the wide reader would). A new item is added to t->items. Returns its id, or -1 when out of
 * memory. */
static int64_t group_item(late *L, const pm_input_opts_t *o, uint32_t y, const char *g, size_t gl) {
    pm_table_t *t = L->t;
    int32_t cy = t->item_cat[y];
    int64_t gi = pm_i_strtab_find(&t->items, g, gl);
    char name[1024];
    if (o->format != PM_FORMAT_WIDE) {
        if (gi >= 0 && t->item_cat[gi] != cy && cy >= 0 && t->item_cat[gi] >= 0) {
            return -2;
        }
        if (gi >= 0) {
            if (t->item_cat[gi] < 0) {
                t->item_cat[gi] = cy;
            }
            return gi;
        }
    } else {
        if (gi >= 0 && t->item_cat[gi] == cy) {
            return gi;
        }
        snprintf(name, sizeof name, "%.*s (%s)", (int)(gl > 800 ? 800 : gl), g, t->cats.str[cy]);
        g = name;
        gl = strlen(name);
        gi = pm_i_strtab_find(&t->items, g, gl);
        if (gi >= 0 && t->item_cat[gi] == cy) {
            return gi;
        }
    }
    gi = pm_i_strtab_intern(&t->items, g, gl, NULL);
    if (gi < 0) {
        return -1;
    }
    if ((size_t)gi >= t->item_cap) {
        size_t c2 = t->item_cap;
        if (pm_i_grow((void **)&t->item_cat, &t->item_cap, (size_t)gi + 1, sizeof(int32_t)) ||
            pm_i_grow((void **)&t->item_line, &c2, (size_t)gi + 1, sizeof(uint64_t))) {
            return -1;
        }
    }
    t->item_cat[gi] = cy;
    t->item_line[gi] = t->item_line[y];
    return gi;
}

/* Wide format: the name of live item i as the wide reader gives it (src/input_wide.c,
 * name_items): its label alone when no other live item has that label, else "label
 * (question)". lab_len[i] is the label's length (the name without " (question)"). */
static size_t label_len(const pm_table_t *t, size_t i) {
    size_t n = t->items.len[i];
    int32_t c = t->item_cat[i];
    if (c < 0) {
        return n;
    }
    size_t cl = t->cats.len[c];
    const char *s = t->items.str[i];
    if (n > cl + 3 && s[n - 1] == ')' && s[n - cl - 3] == ' ' && s[n - cl - 2] == '(' &&
        memcmp(s + n - cl - 1, t->cats.str[c], cl) == 0) {
        return n - cl - 3;
    }
    return n;
}

/* The new name of each live item (keep[i]) into names (wide: relabelled; else as it is). */
static pm_err_t new_names(late *L, const pm_input_opts_t *o, const unsigned char *keep,
                          pm_i_strtab *names, uint32_t *newid, pm_diag_t *diag) {
    pm_table_t *t = L->t;
    size_t n = t->items.count;
    pm_i_strtab labels;
    pm_i_strtab_init(&labels);
    uint32_t *lab = pm_i_malloc(n ? n : 1, sizeof *lab), *cnt = pm_i_calloc(n ? n : 1, 4);
    pm_err_t rc = PM_ENOMEM;
    if (!lab || !cnt) {
        goto done;
    }
    int wide = o->format == PM_FORMAT_WIDE;
    for (size_t i = 0; i < n; i++) {
        if (keep[i]) {
            size_t ll = wide ? label_len(t, i) : t->items.len[i];
            int64_t id = pm_i_strtab_intern(&labels, t->items.str[i], ll, NULL);
            if (id < 0) {
                goto done;
            }
            lab[i] = (uint32_t)id;
            cnt[id]++;
        }
    }
    for (size_t i = 0; i < n; i++) {
        newid[i] = DEAD;
        if (!keep[i]) {
            continue;
        }
        const char *nm = t->items.str[i];
        size_t nl = t->items.len[i];
        if (wide && cnt[lab[i]] == 1) {
            nl = labels.len[lab[i]];
        }
        bool added;
        int64_t id = pm_i_strtab_intern(names, nm, nl, &added);
        if (id < 0) {
            goto done;
        }
        if (!added) {
            rc = pm_diag_set(diag, PM_EDATA, t->source, (long)t->item_line[i],
                             "after --drop-item and --merge-file the item name '%.*s' would "
                             "stand for two items; give the names exactly",
                             (int)nl, nm);
            goto done;
        }
        newid[i] = (uint32_t)id;
    }
    rc = PM_OK;
done:
    if (rc == PM_ENOMEM) {
        pm_diag_set(diag, PM_ENOMEM, t->source, 0, "out of memory");
    }
    free(lab);
    free(cnt);
    pm_i_strtab_destroy(&labels);
    return rc;
}

/* The first tag (pm_table_t.row_tag) for the items merged here: above every tag given while
 * reading. */
static uint32_t late_tag_base(const pm_table_t *t) {
    uint32_t top = 0;
    for (size_t k = 0; t->row_tag && k < t->n_rows; k++) {
        top = t->row_tag[k] > top ? t->row_tag[k] : top;
    }
    return top + 1;
}

/* Rebuilds the item table without the items merged away or dropped, and the rows with it. */
static pm_err_t compact(late *L, const pm_input_opts_t *o, pm_diag_t *diag) {
    pm_table_t *t = L->t;
    size_t n = t->items.count;
    uint32_t *newid = pm_i_malloc(n ? n : 1, sizeof *newid);
    int32_t *cat = pm_i_malloc(n ? n : 1, sizeof *cat);
    uint64_t *line = pm_i_malloc(n ? n : 1, sizeof *line);
    unsigned char *keep = pm_i_calloc(n ? n : 1, 1);
    pm_i_strtab items;
    pm_i_strtab_init(&items);
    pm_err_t rc = PM_ENOMEM;
    if (!newid || !cat || !line || !keep) {
        goto fail;
    }
    for (size_t i = 0; i < n; i++) {
        keep[i] = !(i < L->n_old && L->map[i] != i);
    }
    if ((rc = new_names(L, o, keep, &items, newid, diag)) != PM_OK) {
        goto fail;
    }
    for (size_t i = 0; i < n; i++) {
        if (keep[i]) {
            cat[newid[i]] = t->item_cat[i];
            line[newid[i]] = t->item_line[i];
        }
    }
    uint64_t removed = 0, renamed = 0;
    uint32_t tag0 = late_tag_base(t);
    size_t w = 0;
    for (size_t k = 0; k < t->n_rows; k++) {
        uint32_t it = t->row_item[k];
        if (t->row_tag) {
            t->row_tag[w] = t->row_tag[k];
        }
        if (it < L->n_old && L->map[it] != it) {
            if (L->map[it] == DEAD) {
                removed++;
                continue;
            }
            renamed++;
            if (t->row_tag && !t->row_tag[w]) { /* the name it was read with, merged now */
                t->row_tag[w] = tag0 + it;
            }
            it = L->map[it];
        }
        t->row_resp[w] = t->row_resp[k];
        t->row_item[w++] = newid[it];
    }
    t->n_rows = w;
    t->stats.rows -= removed;
    t->stats.dropped_rows += removed;
    t->stats.merged_rows += renamed;
    memset(t->resp_has_item, 0, (size_t)t->stats.respondents);
    for (size_t k = 0; k < w; k++) {
        t->resp_has_item[t->row_resp[k]] = 1;
    }
    memcpy(t->item_cat, cat, items.count * sizeof *cat);
    memcpy(t->item_line, line, items.count * sizeof *line);
    pm_i_strtab_destroy(&t->items);
    t->items = items;
    pm_i_strtab_init(&items);
    rc = PM_OK;
fail:
    if (rc == PM_ENOMEM) {
        pm_diag_set(diag, PM_ENOMEM, t->source, 0, "out of memory");
    }
    free(newid);
    free(cat);
    free(line);
    free(keep);
    pm_i_strtab_destroy(&items);
    return rc;
}

static pm_err_t late_drops(late *L) {
    pm_table_t *t = L->t;
    for (size_t d = 0; d < t->drop.count; d++) {
        if (t->drop_hit[d]) {
            continue;
        }
        pm_item_found_t f;
        int r = look_up(L, t->drop.str[d], "--drop-item", 0, &f);
        for (size_t k = 0; r == 1 && k < f.n; k++) {
            if (f.match[k] < L->n_old) {
                L->map[f.match[k]] = DEAD;
                L->changed = 1;
            }
        }
        pm_item_found_destroy(&f);
        if (r < 0) {
            return PM_ENOMEM;
        }
    }
    return PM_OK;
}

static pm_err_t late_merges(late *L, const pm_input_opts_t *o, pm_diag_t *diag) {
    pm_table_t *t = L->t;
    for (size_t m = 0; m < t->merge_from.count; m++) {
        if (t->merge_hit[m]) {
            continue;
        }
        char kind[600];
        snprintf(kind, sizeof kind, "%.500s:%llu: merge item", o->merge_file,
                 (unsigned long long)t->merge_line[m]);
        pm_item_found_t f;
        int r = look_up(L, t->merge_from.str[m], kind, t->merge_line[m], &f);
        const char *g = t->merge_to_names.str[t->merge_to[m]];
        size_t gl = t->merge_to_names.len[t->merge_to[m]];
        for (size_t k = 0; r == 1 && k < f.n; k++) {
            uint32_t y = (uint32_t)f.match[k];
            if (y >= L->n_old || L->map[y] != y) {
                continue;
            }
            int64_t gi = group_item(L, o, y, g, gl);
            if (gi == -2) {
                int64_t e = pm_i_strtab_find(&t->items, g, gl);
                pm_item_found_destroy(&f);
                return pm_diag_set(diag, PM_EDATA, o->merge_file, (long)t->merge_line[m],
                                   "item '%s' has category '%s' but its group '%s' has '%s'; "
                                   "give each group one category",
                                   t->items.str[y], t->cats.str[t->item_cat[y]], g,
                                   t->cats.str[t->item_cat[e]]);
            }
            if (gi < 0) {
                r = -1;
                break;
            }
            if ((uint32_t)gi != y) {
                L->map[y] = (uint32_t)gi;
                L->changed = 1;
            }
        }
        pm_item_found_destroy(&f);
        if (r < 0) {
            return pm_diag_set(diag, PM_ENOMEM, t->source, 0, "out of memory");
        }
    }
    return PM_OK;
}

pm_err_t pm_i_table_late(pm_table_t *t, const pm_input_opts_t *o, pm_diag_t *diag) {
    int todo = 0;
    for (size_t d = 0; d < t->drop.count; d++) {
        todo |= !t->drop_hit[d];
    }
    for (size_t m = 0; m < t->merge_from.count; m++) {
        todo |= !t->merge_hit[m];
    }
    if (!todo) {
        return PM_OK;
    }
    late L = {t, NULL, NULL, t->items.count, 0, 0, 0};
    pm_err_t rc = PM_ENOMEM;
    L.map = pm_i_malloc(L.n_old ? L.n_old : 1, sizeof *L.map);
    if (!L.map || pm_item_index_new(t->items.str, L.n_old, &L.ix)) {
        goto done;
    }
    for (size_t i = 0; i < L.n_old; i++) {
        L.map[i] = (uint32_t)i;
    }
    if ((rc = late_drops(&L)) != PM_OK) {
        goto done;
    }
    if ((rc = late_merges(&L, o, diag)) != PM_OK) {
        goto done;
    }
    if (L.missing > MAX_MISSING &&
        pm_i_table_note(
            t, "warning: %zu more names given to --drop-item or --merge-file match no item",
            L.missing - MAX_MISSING) < 0) {
        rc = PM_ENOMEM;
        goto done;
    }
    rc = L.changed ? compact(&L, o, diag) : PM_OK;
done:
    if (rc == PM_ENOMEM && diag && diag->code != PM_ENOMEM) {
        pm_diag_set(diag, PM_ENOMEM, t->source, 0, "out of memory");
    }
    pm_item_index_free(L.ix);
    free(L.map);
    return rc;
}

size_t pm_table_notes(const pm_table_t *t, const char *const **notes) {
    *notes = (const char *const *)t->notes;
    return t->n_notes;
}
