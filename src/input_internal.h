/* The table built by the readers (src/input.c, src/input_wide.c) and read by
 * src/incidence.c. Not installed. */
#ifndef PM_INPUT_INTERNAL_H
#define PM_INPUT_INTERNAL_H

#include "pairmap/input.h"
#include "csvread.h"
#include "util.h"

/* Invariants: row_resp[i] < resp.count, row_item[i] < items.count; item_cat[i] is a category
 * id or -1; resp_weight[r] is NaN until the respondent's first weighted row. Item names are
 * trimmed, non-empty and valid UTF-8. */
/* Tests only: set to read every line through the record path (no long_lines fast path), to
 * check that both give the same table or the same error. */
extern int pm_i_no_fast_lines;
/* Tests only: the background SHA-256 thread waits until it is told to stop (a thread that
 * gets no processor), so that its owner must hash the file itself. */
extern int pm_i_hash_stall;

struct pm_table {
    char *source;
    pm_i_strtab resp;  /* respondent ids (kept only for `reshape`; never in results) */
    pm_i_strtab items; /* item names after --merge-file */
    pm_i_strtab cats;
    int32_t *item_cat;
    uint64_t *item_line; /* line of the row that set the item's category */
    size_t item_cap;
    uint32_t *row_resp, *row_item;
    size_t n_rows, rows_cap;
    double *resp_weight;
    uint64_t *resp_line;   /* line of the respondent's first row */
    unsigned char *resp_has_item;
    size_t resp_cap;
    uint64_t n_anon;       /* respondents without id (lines format without --id-col) */
    bool weighted, has_category;
    uint64_t respondents_override;
    pm_input_stats_t stats;
    /* hygiene */
    pm_i_strtab drop;      /* --drop-item names */
    pm_i_strtab merge_from;
    int64_t *merge_to;     /* merge_from id -> id in merge_to_names */
    pm_i_strtab merge_to_names;
    /* deferred respondent ids (long and lines readers): each run of rows with one id gets a
     * provisional index; runs with the same id are merged by pm_i_table_finish, which sorts
     * their hashes instead of probing a hash table once per run */
    bool defer;
    char *run_buf;
    size_t run_used, run_cap;
    uint64_t *run_off;
    uint32_t *run_len;
    uint64_t *run_hash; /* pm_i_hash of each run's id, taken while reading */
    size_t run_n, run_off_cap;
    const char **rstr; /* after finish: respondent -> id (deferred mode) */
    /* fast path: the last respondent seen */
    char *last_id;
    size_t last_len, last_cap;
    int64_t last_r;
    /* how the file was read: 1 serially, else the number of chunks read in parallel */
    unsigned read_chunks;
    /* a SHA-256 still being computed (pm_input_opts_t.defer_hash), or NULL */
    struct pm_i_hash_job *hash_job;
};

/* Creates an empty table for the source display name, with the hygiene options of o loaded
 * (--drop-item, --merge-file). */
pm_err_t pm_i_table_new(const pm_input_opts_t *o, const char *display, pm_table_t **out,
                        pm_diag_t *diag);

/* Registers respondent id[0..len) first seen at line; *r gets its index. Consecutive calls with
 * the same id skip the hash table. */
pm_err_t pm_i_table_respondent(pm_table_t *t, const char *id, size_t len, uint64_t line,
                               uint32_t *r, pm_diag_t *diag);
/* A respondent without id (one per call). */
pm_err_t pm_i_table_anon_respondent(pm_table_t *t, uint64_t line, uint32_t *r, pm_diag_t *diag);

/* Adds the row (r, item) with an optional category (cat NULL or catlen 0: none). The item is
 * trimmed; an empty item only registers r. --drop-item and --merge-file apply here. Errors:
 * invalid UTF-8, an item with two categories (naming both lines). */
pm_err_t pm_i_table_add(pm_table_t *t, uint32_t r, const char *item, size_t len,
                        const char *cat, size_t catlen, uint64_t line, pm_diag_t *diag);

/* Sets respondent r's weight from the text w (finite, > 0, equal on every row of r). */
pm_err_t pm_i_table_weight(pm_table_t *t, uint32_t r, const char *w, size_t len, uint64_t line,
                           pm_diag_t *diag);

/* Finishes reading: applies --respondents, checks the table is usable. */
pm_err_t pm_i_table_finish(pm_table_t *t, const pm_input_opts_t *o, pm_diag_t *diag);

/* Resolves a column selector (name or 1-based number) against a header record; returns the
 * 0-based index or -1 when absent. With no header only numbers are accepted. */
long pm_i_column_index(const char *sel, const char *const *hdr, const uint32_t *hlen,
                       size_t n);
/* Writes "'a', 'b', 'c'" (the header's names) into buf for a "columns are" message. */
void pm_i_column_list(const char *const *hdr, size_t n, char *buf, size_t size);

/* Trims ASCII white space from both ends of [*s, *s + *len). */
void pm_i_trim(const char **s, size_t *len);

/* The wide reader (src/input_wide.c). */
pm_err_t pm_i_read_wide(FILE *fp, const pm_input_opts_t *o, pm_table_t *t, pm_i_csv_opts *co,
                        pm_diag_t *diag);

#endif
