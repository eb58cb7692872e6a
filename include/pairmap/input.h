/* Reading "who chose what" data: long pairs, one line per respondent, or a wide survey export
 * (src/input.c, src/input_wide.c). The result is a pm_table_t: interned respondents, items and
 * categories plus the (respondent, item) rows, ready for src/incidence.c. */
#ifndef PAIRMAP_INPUT_H
#define PAIRMAP_INPUT_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "pairmap/error.h"

#ifdef __cplusplus
extern "C" {
#endif

typedef enum { PM_FORMAT_LONG = 0, PM_FORMAT_LINES = 1, PM_FORMAT_WIDE = 2 } pm_format_t;

/* Largest field accepted, in bytes (a longer one is a data error, exit 2). */
#define PM_INPUT_MAX_FIELD 65536
/* Most fields a line (a record) may have in any format: a line with more is a data error,
 * found before more than this many fields are held. Rows of the long and wide formats may not
 * have more fields than their header (or first line) either. */
#define PM_INPUT_MAX_FIELDS 100000

/* Options of the reader. Strings are borrowed: they must outlive pm_input_read().
 * Column selectors are a header name or a 1-based number given as text ("2"). */
typedef struct {
    pm_format_t format;
    const char *id_col;            /* NULL: column 1 (long); none (lines) */
    const char *item_col;          /* NULL: column 2 (long) */
    const char *category_col;      /* NULL: no categories */
    const char *weight_col;        /* NULL: unweighted */
    char sep;                      /* 0: detect from the first line among , TAB ; | */
    bool no_header;                /* the first line is data */
    uint64_t respondents;          /* 0: N = respondents seen; else N outright (>= seen) */
    uint64_t max_basket;           /* 0: none; else respondents with more items are left out
                                    * (of the rows and of N) by pm_incidence_build */
    const char *const *drop_items; /* items removed before counting */
    size_t n_drop_items;
    const char *merge_file; /* CSV item,group: items renamed to their group; NULL: none */
    /* wide format (src/input_wide.c) */
    const char *const *columns; /* prefixes selecting each question's option columns */
    size_t n_columns;
    const char *const *drop_values; /* extra "not chosen" cell values */
    size_t n_drop_values;
    const char *const *skip_cols; /* columns never read as options */
    size_t n_skip_cols;
    bool base_all; /* wide: keep respondents who chose nothing in N */
    /* --only-segment COL=NAME values and the --segment-file: not used by the reader (the
     * caller restricts the table, pm_table_keep), only recorded in a count shard's
     * fingerprint (pm_shard_fingerprint) so that shards of different restrictions never add */
    const char *const *only_segments;
    size_t n_only_segments;
    const char *segment_file;
    const char *display_name; /* name used in messages; NULL: the path ("-" shows "stdin") */
    /* progress while reading: done and total bytes (total = done when the size is unknown) */
    void (*progress)(void *ud, const char *stage, uint64_t done, uint64_t total);
    void *progress_ud;
    /* threads for reading a long or lines file (0: all cores; 1: one). A regular file of some
     * size is read in chunks in parallel; the table is the same for every value. */
    unsigned threads;
    uint64_t chunk_bytes; /* least bytes per chunk of a parallel read (0: 8 MiB; tests) */
    /* A parallel read may leave the SHA-256 of the file to finish in the background (in the
     * idle scheduling class, on the cores the later stages leave free): stats.sha256 is then
     * only set by pm_table_wait_hash, which the caller must call first. */
    bool defer_hash;
} pm_input_opts_t;

/* Sets every option to its default. */
void pm_input_opts_init(pm_input_opts_t *o);

/* What the reader saw; counted once each, never printed per row. */
typedef struct {
    uint64_t lines;          /* physical lines read */
    uint64_t records;        /* data records (header excluded) */
    uint64_t rows;           /* respondent-item rows kept (before deduplication) */
    uint64_t empty_items;    /* rows or lines that named no item */
    uint64_t dropped_rows;   /* rows removed by --drop-item */
    uint64_t merged_rows;    /* rows renamed by --merge-file */
    uint64_t merge_entries;  /* entries in the merge file */
    uint64_t respondents;    /* distinct respondents seen */
    uint64_t blank_excluded; /* wide --base answered: respondents who chose nothing, left out */
    uint64_t respondents_left_out; /* removed by pm_table_keep (--only-segment) */
    uint64_t bytes;                /* bytes read */
    unsigned char sha256[32];      /* SHA-256 of the bytes read */
    /* For notes the caller shows (the library prints nothing). */
    uint64_t header_line;  /* the line read as the header; 0: none (--no-header) */
    char header_text[128]; /* that line as shown in a message (escaped, shortened) */
    bool header_like_data; /* long: its respondent or item cell is seen again as data */
    /* lines format without --id-col: the first field of the first lines (up to 1,000) differs
     * on every line and looks like an id (a number, an e-mail address, a code with digits), so
     * that the ids would become items; the lines looked at (0: no such sign) and one of them */
    uint64_t id_like_lines;
    char id_like_example[64];
} pm_input_stats_t;

typedef struct pm_table pm_table_t;

/* Reads path ("-" = standard input) with the options o. On success *out owns a new table
 * (free with pm_table_free). On failure *out is NULL and diag names the file and line:
 * PM_EDATA for bad data, PM_EIO when the file cannot be read, PM_EUSAGE for options that do
 * not fit the file (an unknown column name), PM_ENOMEM. Streams: memory is O(rows + strings). */
pm_err_t pm_input_read(const char *path, const pm_input_opts_t *o, pm_table_t **out,
                       pm_diag_t *diag);

/* Frees a table (accepts NULL). */
void pm_table_free(pm_table_t *t);

const pm_input_stats_t *pm_table_stats(const pm_table_t *t);
/* Hands the table's row arrays (respondent and item index per row) to the caller, who frees
 * them; returns how many entries each holds room for (0 and NULLs when there are none).
 * Afterwards the table has no rows (pm_table_nrows is 0): for callers done with them, e.g.
 * once the incidence is built, to reuse the memory as scratch. */
size_t pm_table_take_rows(pm_table_t *t, uint32_t **resp, uint32_t **item);
/* Restricts the table to the respondents r with keep[r] (keep has pm_table_nrespondents()
 * entries): the other respondents and their rows are removed, the kept ones renumbered in
 * their order, items left without a row removed, --respondents dropped (respondents not in
 * the file are not kept). The table is then the one a file of the kept respondents' rows
 * gives; stats stay those of the file read, with respondents the kept count and
 * respondents_left_out the others. Errors: PM_ENOMEM (the table is then unchanged). */
pm_err_t pm_table_keep(pm_table_t *t, const unsigned char *keep, pm_diag_t *diag);
/* Waits for a SHA-256 left to finish in the background (defer_hash) and sets stats.sha256.
 * PM_OK at once when there is none; PM_EIO (diag set) when the file changed while it was read
 * or could not be read again for the hash. */
pm_err_t pm_table_wait_hash(pm_table_t *t, pm_diag_t *diag);
/* A SHA-256 left to the idle class goes on at the normal priority, from where it got, beside
 * the caller's next stages (for a caller that needs it soon: count); pm_table_wait_hash still
 * ends it. Nothing to do when there is none or it is done. */
void pm_table_hash_ahead(pm_table_t *t);
/* The name shown in messages ("stdin" for "-"). */
const char *pm_table_source(const pm_table_t *t);
/* What reading noted about --drop-item and --merge-file names found only ignoring letter case
 * or as a wide label, or not found (lines that begin "note: " or "warning: "): their number,
 * *notes the array (owned by the table). */
size_t pm_table_notes(const pm_table_t *t, const char *const **notes);
bool pm_table_weighted(const pm_table_t *t);
bool pm_table_has_categories(const pm_table_t *t);

/* Row access for `unfold`, the one output that shows respondent ids. Rows are the kept
 * respondent-item rows in input order (duplicates included); a respondent who chose nothing
 * has no row: find them with pm_table_respondent_empty. respondent is NULL for respondents
 * without id (lines format without --id-col); category is NULL when the item has none. */
size_t pm_table_nrows(const pm_table_t *t);
void pm_table_row(const pm_table_t *t, size_t i, const char **respondent, const char **item,
                  const char **category);
/* Respondent index (0 .. pm_table_nrespondents() - 1, in order of first appearance) and item
 * index (0 .. pm_table_nitems() - 1) of row i. */
void pm_table_row_index(const pm_table_t *t, size_t i, size_t *respondent, size_t *item);
/* The number of rows whose respondent index r is below n and, when sel is not NULL, has
 * sel[r] set: one pass over the rows' respondent indices (no call per row). */
uint64_t pm_table_rows_of(const pm_table_t *t, size_t n, const unsigned char *sel);
size_t pm_table_nitems(const pm_table_t *t);
size_t pm_table_nrespondents(const pm_table_t *t);
const char *pm_table_respondent(const pm_table_t *t, size_t r);
/* True when respondent r has no row with an item. */
bool pm_table_respondent_empty(const pm_table_t *t, size_t r);
/* Respondent r's weight (--weight-col); NaN when the table is unweighted. */
double pm_table_respondent_weight(const pm_table_t *t, size_t r);

#ifdef __cplusplus
}
#endif
#endif
