/* Finding an item the way a person types it (src/itemfind.c): the one set of rules behind
 * --item, --drop-item and the items of a --merge-file. The HTML view's search follows the same
 * rules (written in JS there); README.md ("Finding an item") states them for users.
 *
 * The rules, in order; the first that matches decides:
 *  1. exact: the name equal to the text, byte for byte;
 *  2. case: the one name equal to the text when letter case is ignored (ASCII letters and the
 *     Latin-1 letters U+00C0..U+00DE / U+00E0..U+00FE, which UTF-8 writes as two bytes);
 *     two or more such names are ambiguous (each is listed, none is taken);
 *  3. label: the names "TEXT (category)", which a wide survey gives one label that occurs
 *     under several questions (`Lemonade` -> `Lemonade (drinks)` and `Lemonade (sweets)`):
 *     exact letter case first, else ignoring case; all of them match;
 *  4. none: up to PM_ITEM_FIND_NEAR suggestions, ranked by closeness: names that begin with
 *     the text (ignoring case) first, then names that contain it, then all others by edit
 *     distance (Levenshtein over bytes, ignoring case); within each group the smaller edit
 *     distance first, then the shorter name, then byte order.
 * The text is trimmed of surrounding ASCII white space first (item names are trimmed when
 * read). */
#ifndef PAIRMAP_ITEMFIND_H
#define PAIRMAP_ITEMFIND_H

#include <stddef.h>

#include "pairmap/error.h"

#ifdef __cplusplus
extern "C" {
#endif

#define PM_ITEM_FIND_NEAR 3

typedef enum {
    PM_ITEM_NONE = 0,  /* nothing matches: see near */
    PM_ITEM_EXACT,     /* rule 1: one match */
    PM_ITEM_CASE,      /* rule 2: one match */
    PM_ITEM_AMBIGUOUS, /* rule 2 with several names: all listed in match, none taken */
    PM_ITEM_LABEL      /* rule 3: every "TEXT (category)" in match */
} pm_item_how_t;

typedef struct {
    pm_item_how_t how;
    size_t n;      /* entries of match */
    size_t *match; /* indices into names, ascending (owned: pm_item_found_destroy) */
    size_t n_near; /* how == PM_ITEM_NONE: suggestions, closest first */
    size_t near[PM_ITEM_FIND_NEAR];
} pm_item_found_t;

/* An index over item names for pm_item_find: the names folded to lower case and sorted, so that
 * rules 1-3 cost O(log n) per look-up. It copies the array of pointers and the names' folded
 * form, not the names (which must outlive it): O(total name bytes) memory. Errors: PM_ENOMEM (*out
 * NULL). */
typedef struct pm_item_index pm_item_index_t;
pm_err_t pm_item_index_new(const char *const *names, size_t n, pm_item_index_t **out);
void pm_item_index_free(pm_item_index_t *ix);

/* Looks text up by the rules above and fills *out (which the caller then releases with
 * pm_item_found_destroy, also after an error). Rule 4 (suggestions) runs only when want_near
 * is set: it reads every name, O(n * 256^2) at worst. Errors: PM_ENOMEM. */
pm_err_t pm_item_find(const pm_item_index_t *ix, const char *text, int want_near,
                      pm_item_found_t *out);

/* Releases what pm_item_find allocated; accepts NULL or a zeroed struct. */
void pm_item_found_destroy(pm_item_found_t *f);

#ifdef __cplusplus
}
#endif
#endif
