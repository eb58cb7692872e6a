/* The table built by the readers and read by src/incidence.c, and what the readers share. Not
 * installed. Who uses whom (no file uses one above it):
 *   src/input.c       pm_input_read: picks a reader
 *   src/read_par.c    the parallel reader (chunks read by read_long.c, hash by filehash.c)
 *   src/input_wide.c  the wide format
 *   src/read_long.c   the long and lines formats
 *   src/filehash.c    the SHA-256 thread of a parallel read
 *   src/table.c       the table builder, --drop-item, --merge-file, accessors
 *   src/table_runs.c  the runs of deferred respondent ids merged (pm_i_table_merge_runs) */
#ifndef PM_INPUT_INTERNAL_H
#define PM_INPUT_INTERNAL_H

#include "pairmap/input.h"
#include "csvread.h"
#include "util.h"

#include <pthread.h>
#include <stdatomic.h>
#include <string.h>

/* Invariants: row_resp[i] < resp.count, row_item[i] < items.count; item_cat[i] is a category
 * id or -1; resp_weight is NULL without a weight column, else resp_weight[r] is NaN until the
 * respondent's first weighted row. Item names are trimmed, non-empty and valid UTF-8. */
/* Tests only: set to read every line through the record path (no pm_i_read_lines fast path), to
 * check that both give the same table or the same error. */
extern int pm_i_no_fast_lines;
/* Tests only: the background SHA-256 thread waits until it is told to stop (a thread that
 * gets no processor), so that its owner must hash the file itself. */
extern int pm_i_hash_stall;
/* Tests only: with pm_i_hash_stall_after > 0 the idle thread (left at the normal priority, so
 * that it gets there) stops hashing after that
 * many windows of pm_i_hash_window bytes (a multiple of the page size; 0: 4 MiB), sets
 * pm_i_hash_stalled and waits until it is told to stop: an owner then goes on from there. */
extern int pm_i_hash_stall_after;
extern size_t pm_i_hash_window;
extern atomic_int pm_i_hash_stalled;

typedef struct pm_i_hash_job pm_i_hash_job; /* src/filehash.c */

/* The runs of ids one chunk of a parallel read found, handed over to the file's table as they
 * are (not copied): run r of the file is run r - r0 of the segment holding it. */
typedef struct {
    char *buf;      /* the ids' text: kept while the table lives (t->rstr points into it) */
    uint64_t *off;  /* [n] where each run's id starts in buf (freed once the runs are merged) */
    uint32_t *len;  /* [n] */
    uint64_t *hash; /* [n] */
    size_t n, r0;
} pm_i_run_seg;

struct pm_table {
    char *source;
    pm_i_strtab resp;  /* respondent ids (kept only for `unfold`; never in results) */
    pm_i_strtab items; /* item names after --merge-file */
    pm_i_strtab cats;
    int32_t *item_cat;
    uint64_t *item_line; /* line of the row that set the item's category */
    size_t item_cap;
    uint32_t *row_resp, *row_item;
    /* [rows_cap], only with --merge-file (else NULL): 0 for a row under the name it was read
     * with, else which name merging replaced (a merge file's entry + 1, a wide option, an item
     * merged late): two rows of one respondent and item that differ here are a collapse of
     * the merge, not a duplicate of the input (pm_incidence_t.merge_collapsed) */
    uint32_t *row_tag;
    uint32_t add_tag; /* the wide reader's tag for the row pm_i_table_add adds next */
    bool tag_rows;    /* a merge file was given: row_tag is kept */
    size_t n_rows, rows_cap;
    double *resp_weight;
    uint64_t *resp_line; /* line of the respondent's first row */
    unsigned char *resp_has_item;
    size_t resp_cap;
    uint64_t n_anon; /* respondents without id (lines format without --id-col) */
    bool weighted, has_category;
    uint64_t respondents_override;
    uint64_t max_basket; /* --max-basket (pm_input_opts_t), applied by the incidence */
    pm_input_stats_t stats;
    /* hygiene */
    pm_i_strtab drop; /* --drop-item names */
    pm_i_strtab merge_from;
    int64_t *merge_to; /* merge_from id -> id in merge_to_names */
    pm_i_strtab merge_to_names;
    unsigned char *drop_hit;  /* drop id -> some row matched it exactly (pm_i_table_late) */
    unsigned char *merge_hit; /* merge_from id -> the same */
    uint64_t *merge_line;     /* merge_from id -> its line in the merge file */
    char **notes;             /* what pm_i_table_late did or could not do ("note: ..." or
                               * "warning: ...", for the CLI to print) */
    size_t n_notes;
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
    /* a parallel read: the runs of the chunks after the first, from run run_own on (the first
     * run_own runs are the ones above); run_n counts them all */
    pm_i_run_seg *run_segs;
    size_t n_run_segs, run_own;
    const char **rstr; /* after finish: respondent -> id (deferred mode) */
    /* fast path: the last respondent seen */
    char *last_id;
    size_t last_len, last_cap;
    int64_t last_r;
    /* how the file was read: 1 serially, else the number of chunks read in parallel */
    unsigned read_chunks;
    /* the header's respondent and item cells (long format), for stats.header_like_data */
    char *hdr_id, *hdr_item;
    /* lines format without --id-col: the first fields of the first lines (stats.id_like_*) */
    pm_i_strtab idsample;
    bool id_unlike;
    /* a SHA-256 still being computed (pm_input_opts_t.defer_hash), or NULL */
    pm_i_hash_job *hash_job;
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
pm_err_t pm_i_table_add(pm_table_t *t, uint32_t r, const char *item, size_t len, const char *cat,
                        size_t catlen, uint64_t line, pm_diag_t *diag);

/* Sets respondent r's weight from the text w (finite, > 0, equal on every row of r). */
pm_err_t pm_i_table_weight(pm_table_t *t, uint32_t r, const char *w, size_t len, uint64_t line,
                           pm_diag_t *diag);

/* Finishes reading: applies --respondents, checks the table is usable. */
pm_err_t pm_i_table_finish(pm_table_t *t, const pm_input_opts_t *o, pm_diag_t *diag);
/* The runs of deferred ids that share an id made one respondent each, in order of first
 * appearance, the rows remapped and t->rstr set, on up to `threads` threads (0: all cores); the
 * same table for any number. Errors: PM_ENOMEM, PM_EDATA (two weights of one respondent, at
 * the first line in run order that differs). (src/table_runs.c) */
pm_err_t pm_i_table_merge_runs(pm_table_t *t, unsigned threads, pm_diag_t *diag);

/* After reading (the table finished): every --drop-item name and --merge-file item that no row
 * matched exactly is looked up with pm_item_find (pairmap/itemfind.h) among the items read.
 * Found ignoring letter case, or as the plain label of wide-format items, it is applied now:
 * those items' rows are dropped or renamed to the group, and a note says so. Ambiguous or not
 * found: a warning naming the candidates or the closest items. Errors: PM_ENOMEM, PM_EDATA (a
 * group that would take a second category). Table: src/table_late.c. */
pm_err_t pm_i_table_late(pm_table_t *t, const pm_input_opts_t *o, pm_diag_t *diag);

/* With --merge-file: the rows of the respondents r with sel[r] (NULL: all) that are a second or
 * later name, merged into one item, of one respondent (two of a respondent's items merged into
 * one group give one): what deduplication removes because of the merge, not because the input
 * repeated a row. *out gets it (0 without a merge file). 0, or -1 when out of memory. Cost: a
 * radix sort of the merged items' rows. (src/incidence.c) */
int pm_i_merge_collapses(const pm_table_t *t, const unsigned char *sel, uint64_t *out);
/* The items --merge-file renamed rows into (0 without a merge file). -1 when out of memory. */
int64_t pm_i_merge_groups(const pm_table_t *t);

/* Adds a line ("note: ..." or "warning: ...") to t->notes (pm_table_notes). 0, or -1 when out
 * of memory. */
int pm_i_table_note(pm_table_t *t, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 2, 3)))
#endif
    ;

/* Resolves a column selector (name or 1-based number) against a header record; returns the
 * 0-based index or -1 when absent. With no header only numbers are accepted. */
long pm_i_column_index(const char *sel, const char *const *hdr, const uint32_t *hlen, size_t n);
/* Writes "'a', 'b', 'c'" (the header's names) into buf for a "columns are" message. */
void pm_i_column_list(const char *const *hdr, size_t n, char *buf, size_t size);

/* Trims ASCII white space from both ends of [*s, *s + *len). */
void pm_i_trim(const char **s, size_t *len);

/* The wide reader (src/input_wide.c). */
pm_err_t pm_i_read_wide(FILE *fp, const pm_input_opts_t *o, pm_table_t *t, pm_i_csv_opts *co,
                        pm_diag_t *diag);

/* ==== table builder (src/table.c) ==== */

/* Room for `need` respondents in the per-respondent arrays (grown together: one capacity).
 * 0 or -1 (out of memory). */
int pm_i_grow_respondents(pm_table_t *t, size_t need);
/* Room for `need` rows in the row arrays (row_resp, row_item and, with --merge-file, row_tag:
 * one capacity). 0 or -1 (out of memory). */
int pm_i_grow_rows(pm_table_t *t, size_t need);
/* Room for `runs` runs of ids and `bytes` bytes of their text (the run arrays share
 * run_off_cap). 0 or -1. */
int pm_i_grow_runs(pm_table_t *t, size_t runs, size_t bytes);

/* id == last over len bytes (the same respondent as the row before: most rows) */
static inline int pm_i_same_id(const char *a, const char *b, size_t len) {
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

/* ==== long and lines readers (src/read_long.c) ==== */

typedef struct pm_i_par_shared pm_i_par_shared;

/* The state of one long or lines read (the whole file, or one chunk of a parallel read). */
typedef struct {
    pm_table_t *t;
    const pm_input_opts_t *o;
    int started;
    int have_header;
    long id, item, cat, weight; /* column indices, -1 = none */
    size_t ncols;               /* fields per row (long format, from the header) */
    pm_i_csv_opts *co;          /* the stream's options: max_fields set from the first record */
    pm_i_par_shared *par;       /* parallel read: NULL when serial */
    int publisher;              /* the stream of the file's first chunk */
    int published;              /* it has let the others start */
} pm_i_reader;

/* Sets stats.header_like_data and stats.id_like_* of a finished long or lines table. */
void pm_i_reader_notes(pm_table_t *t);
/* Lowers rd->co's max_fields to what rd's format can use once the columns are known (long: the
 * first record's count; lines: the general bound stays). */
void pm_i_reader_bound(pm_i_reader *rd);
/* The record callback (pm_i_record_fn) of both formats: the first record resolves the
 * columns, the others are rows. ud: a pm_i_reader. */
pm_err_t pm_i_read_record(void *ud, const pm_i_record *r, pm_diag_t *diag);
/* The fast path for plain two-column long lines (pm_i_lines_fn). ud: a pm_i_reader. */
pm_err_t pm_i_read_lines(void *ud, char *p, size_t len, uint64_t line, char sep, size_t *used,
                         uint64_t *nlines, pm_diag_t *diag);

/* What the first chunk of a parallel read hands to the others once its first lines read well:
 * the resolved columns (tmpl) and the delimiter. */
#define PM_I_PAR_START_LINE 50000 /* lines the first chunk reads before the others start */
struct pm_i_par_shared {
    pthread_mutex_t mu;
    pthread_cond_t cv;
    int state; /* 0: columns not known yet, 1: known (tmpl, sep), -1: stop */
    pm_i_reader tmpl;
    char sep;
    const pm_i_csv_opts *co0; /* the first chunk's options: its delimiter, once detected */
    atomic_int stop;
};
/* Publishes rd's columns (ok) or tells the other chunks not to start (!ok); later calls change
 * nothing. */
void pm_i_par_publish(pm_i_par_shared *ps, const pm_i_reader *rd, int ok);
static inline int pm_i_par_stopped(pm_i_par_shared *ps) {
    return atomic_load_explicit(&ps->stop, memory_order_relaxed);
}

/* ==== the parallel reader (src/read_par.c) ==== */

/* Tries the parallel read of the regular file fp (size bytes) into t. Returns 1 when it
 * succeeded (t filled and finished, co->bytes, co->lines, the hash set or left to
 * pm_table_wait_hash), 0 when the caller must read serially (nothing of t has changed then),
 * -1 when out of memory (diag set). */
int pm_i_read_par(FILE *fp, uint64_t size, const pm_input_opts_t *o, pm_table_t *t,
                  pm_i_csv_opts *co, pm_diag_t *diag);

/* ==== the hash thread (src/filehash.c) ==== */

/* Starts hashing the file fd (duplicated: the job may outlive the caller's descriptor) on a
 * detached thread, in the idle class when idle. NULL when it cannot start. */
pm_i_hash_job *pm_i_hash_job_start(int fd, bool idle);
/* The bytes the parser read: the hash must cover exactly these. */
void pm_i_hash_job_expect(pm_i_hash_job *h, uint64_t bytes);
/* Ends the job: 1 when the file hashed to exactly the expected bytes (digest into out; *hashed
 * gets the bytes hashed), else 0. Frees the caller's share of h. */
int pm_i_hash_job_end(pm_i_hash_job *h, unsigned char out[32], uint64_t *hashed);
/* The hash is not needed: the thread stops; frees the caller's share of h. */
void pm_i_hash_job_cancel(pm_i_hash_job *h);

#endif
