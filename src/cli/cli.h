/* Command-line plumbing shared by the commands: option table and parser, conversion of
 * options into the library's option structs, loading the input, notes and progress. */
#ifndef PM_CLI_H
#define PM_CLI_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>

#include "pairmap/assoc.h"
#include "pairmap/cooccur.h"
#include "pairmap/error.h"
#include "pairmap/incidence.h"
#include "pairmap/input.h"
#include "pairmap/mapwrite.h"
#include "pairmap/outfile.h"
#include "pairmap/segments.h"
#include "pairmap/select.h"
#include "pairmap/stratified.h"
#include "pairmap/svgmap.h"

/* Commands, as a bit mask for the option table. */
enum {
    PM_CMD_MAP = 1,
    PM_CMD_PARTNERS = 2,
    PM_CMD_PAIRS = 4,
    PM_CMD_ITEMS = 8,
    PM_CMD_UNFOLD = 16,
    PM_CMD_COUNT = 32,
    PM_CMD_SEGMENTS = 64,
    PM_CMD_EXPLAIN = 128,
};

#define PM_CLI_MAX_VALUES 256

/* Parsed command line: every option's values in order, plus the positional INPUT. */
typedef struct {
    const char *command;
    unsigned cmd;
    const char *input;
    size_t nopts;
    struct {
        const char *name;
        const char *vals[PM_CLI_MAX_VALUES];
        size_t n;
    } opt[96];
    /* `explain`: the positional words after INPUT (the two item names) */
    const char *args[2];
    size_t nargs;
} pm_cli_t;

/* Parses argv after the command name. Returns 0, or the exit status to leave with (1 for a
 * usage error, already reported; -1 when --help was printed: exit 0). usage is the command's
 * help text. */
int pm_cli_parse(pm_cli_t *c, const char *command, unsigned cmd, int argc, char **argv,
                 const char *usage);

/* Last value of option name (without "--"), or NULL when absent. */
const char *pm_cli_get(const pm_cli_t *c, const char *name);
/* All values of a repeatable option; *n gets the count. */
const char *const *pm_cli_all(const pm_cli_t *c, const char *name, size_t *n);
bool pm_cli_flag(const pm_cli_t *c, const char *name);

/* Typed getters: return 0, or report a usage error and return 1. */
int pm_cli_uint(const pm_cli_t *c, const char *name, uint64_t dflt, uint64_t min, uint64_t max,
                uint64_t *out);
int pm_cli_double(const pm_cli_t *c, const char *name, double dflt, double min, double max,
                  double *out);
/* One of the words of choices (NULL-terminated); *out its index. */
int pm_cli_choice(const pm_cli_t *c, const char *name, const char *const *choices, int dflt,
                  int *out);

/* Builds the reader's options from the command line. */
int pm_cli_input_opts(const pm_cli_t *c, pm_input_opts_t *o);
/* Builds the selection options (map, pairs, partners). */
int pm_cli_select_opts(const pm_cli_t *c, pm_select_opts_t *o);
/* --threads (0 = all cores). */
int pm_cli_threads(const pm_cli_t *c, unsigned *threads);

/* Reports a usage error on one line: "pairmap: <msg>; see 'pairmap CMD --help'". Returns 1. */
int pm_cli_usage_error(const pm_cli_t *c, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 2, 3)))
#endif
    ;
/* Prints a diagnostic as "pairmap: FILE:LINE: message" and returns its exit status. */
int pm_cli_fail(const pm_diag_t *d);
/* s as the terminal may show it (pm_text_shown: controls and bad bytes as \xHH, bidi
 * controls as \uXXXX), cut at about 1,000 bytes; one of 8 rotating buffers (main thread). */
const char *pm_cli_shown(const char *s);
/* --unit: the plural noun for one respondent in human-facing text ("respondents" by default);
 * pm_cli_check_unit returns 1 (after the usage message) when it is not a plain word. */
const char *pm_cli_unit(const pm_cli_t *c);
/* Text tables (partners, pairs, items on a terminal): the width of a name as shown (code
 * points of pm_cli_shown's text), and n spaces on stdout. */
size_t pm_cli_text_width(const char *shown);
void pm_cli_pad(size_t n);
/* A q-value as every human-facing text shows it: two significant digits ("%.2g": 0.0012,
 * 8.9e-34), "1" at 1. */
const char *pm_cli_q(double q, char *buf, size_t size);
/* 1 when data goes out as a text table: standard output is a terminal and --csv is not
 * given (pairs, items). */
int pm_cli_text_out(const pm_cli_t *c);
int pm_cli_check_unit(const pm_cli_t *c);
/* A note on stderr unless --quiet (escaped as pm_cli_shown does). */
void pm_cli_note(const pm_cli_t *c, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 2, 3)))
#endif
    ;

/* Reads INPUT and builds the incidence, printing the reader's notes. Returns 0 or the exit
 * status. */
int pm_cli_load(const pm_cli_t *c, pm_table_t **table, pm_incidence_t **inc, double *t_read);
/* Before counting (src/cli/cli_memory.c): 0 when cost->bytes plus the memory in use fits the
 * bound (--max-memory, else the least of physical memory, the control group's memory.max,
 * ulimit -v and ulimit -d); else prints the one-line reason (the largest basket's size, never
 * its id, and the likely cause) and returns 4; 1 after a bad --max-memory. */
int pm_cli_check_memory(const pm_cli_t *c, const pm_counts_cost_t *cost);
/* The same bound for another stage that needs `bytes` (what: its name in the message, e.g.
 * "the pair tests within segments"): 0, or 4 after the one-line reason; 1 after a bad
 * --max-memory. */
int pm_cli_check_bytes(const pm_cli_t *c, uint64_t bytes, const char *what);
/* The same with another way out than --min-share in the message. */
int pm_cli_check_bytes_hint(const pm_cli_t *c, uint64_t bytes, const char *what, const char *hint);
/* The segments table of a column of `levels` segments over `items` items (segments,
 * map --segment-col) against the bound, before it is allocated. */
int pm_cli_check_segtable(const pm_cli_t *c, size_t levels, size_t items);
/* --max-memory in bytes (0 when absent); 1 after a usage error. */
int pm_cli_max_memory(const pm_cli_t *c, uint64_t *bytes);
/* Scores every pair with the command line's options. */
/* Scores every pair of inc. The rows of table t (whose incidence inc is) are taken from it
 * and serve as the counting's scratch memory: t has no rows afterwards. */
int pm_cli_score(const pm_cli_t *c, pm_table_t *t, const pm_incidence_t *inc,
                 const pm_select_opts_t *sel, pm_pairs_t **pairs);
/* The same with the q limit given (pm_assoc_opts_t.q_limit; pm_cli_score uses --max-q). */
int pm_cli_score_q(const pm_cli_t *c, pm_table_t *t, const pm_incidence_t *inc,
                   const pm_select_opts_t *sel, double q_limit, pm_pairs_t **pairs);

/* The notes on items left out (chosen by nobody, by everyone, below min_share) and the error
 * when fewer than 2 items are eligible, as pm_cli_score prints them, without scoring. Returns
 * 0 or 2. */
/* The note on pairs left out by --min-count alone (n of them; nothing when n is 0 or nothing
 * is pruned, min_count <= 1): issue 16 point 1. */
void pm_cli_note_min_count(const pm_cli_t *c, uint64_t n, unsigned min_count);
int pm_cli_check_eligible(const pm_cli_t *c, const pm_incidence_t *inc, double min_share);

/* ---- segments (src/cli/cli_segments.c) ---- */
/* Reads the run's segment columns (--segment-col, and the columns --only-segment names) from
 * the input or --segment-file, and applies --only-segment to table t (pm_table_keep). Called
 * by pm_cli_load before the incidence is built. Returns 0 or the exit status (reported). */
int pm_cli_segments_load(const pm_cli_t *c, pm_table_t *t);
/* --max-basket: the respondents inc left out leave every segment column too
 * (pm_segcol_leave_out), a note per column says how many. 0, or 4 out of memory (reported). */
int pm_cli_segments_leave_out(const pm_cli_t *c, const pm_incidence_t *inc);
/* The --segment-col columns of the run, in the order given, restricted to the kept
 * respondents (respondent r of the table and of the incidence); *n = 0 when none. */
const pm_segcol_t *pm_cli_segcols(size_t *n);
void pm_cli_segments_free(void);
/* The within-segment figures of the edges over the first column seg[0] (nseg > 0): *st
 * allocated (free()), or NULL with a note when the input is weighted (the columns stay
 * empty). Returns 0 or the exit status. */
int pm_cli_strat(const pm_cli_t *c, const pm_incidence_t *inc, const pm_segcol_t *seg, size_t nseg,
                 const pm_pairs_t *pp, const pm_edges_t *e, const pm_select_opts_t *sel,
                 pm_strat_t **st);
/* --pair-test pooled|within: *within 1 for within. Returns 0, or 1 after a usage error
 * (reported): within needs --segment-col and unweighted input (no --weight-col). */
int pm_cli_pair_test(const pm_cli_t *c, int *within);
/* --pair-test within (else nothing): the CMH test of every pair of pp's family over the first
 * segment column (pm_stratified_family_run, its memory bounded first by
 * pm_cli_check_bytes), whose q-values replace pp->q of the listed pairs; a note says so.
 * Returns 0 or the exit status. */
int pm_cli_within(const pm_cli_t *c, const pm_incidence_t *inc, const pm_select_opts_t *sel,
                  pm_pairs_t *pp);
/* Help blocks: --segment-col and --segment-levels (map, pairs, partners); --segment-file and
 * --only-segment (every command that reads rows). */
extern const char pm_cli_segment_help[];
extern const char pm_cli_only_help[];

/* Progress on stderr (a terminal only, and not with --quiet). */
void pm_cli_progress(void *ud, const char *stage, uint64_t done, uint64_t total);
void pm_cli_progress_end(const pm_cli_t *c);
bool pm_cli_show_progress(const pm_cli_t *c);

/* Monotonic clock in seconds, for the stage timings. */
double pm_cli_now(void);

/* Closes stdout and reports a write error (full disk, closed pipe). Returns 0 or 3. */
int pm_cli_close_stdout(void);

/* The common help texts. */
extern const char pm_cli_input_help[];
extern const char pm_cli_basket_help[]; /* --max-basket (map, pairs, partners, items, count) */
extern const char pm_cli_memory_help[]; /* --max-memory (map, pairs, partners, count) */
extern const char pm_cli_select_help[];
/* --csv-raw's help lines, and the pm_write_csv_field flags it gives. */
extern const char pm_cli_csv_help[];
/* --top-edges and --measure (map and pairs). */
extern const char pm_cli_edge_help[];
unsigned pm_cli_csv_flags(const pm_cli_t *c);

/* Commands (src/cli/cmd_*.c): argc/argv start after the command name. */
int pm_cmd_map(int argc, char **argv);
int pm_cmd_partners(int argc, char **argv);
int pm_cmd_pairs(int argc, char **argv);
int pm_cmd_items(int argc, char **argv);
int pm_cmd_unfold(int argc, char **argv);
int pm_cmd_count(int argc, char **argv);
int pm_cmd_segments(int argc, char **argv);
int pm_cmd_merge(int argc, char **argv);
int pm_cmd_explain(int argc, char **argv);

/* The picture step of `map` (src/cli/map_html.c): the SVG of svg/svg_opts to svg_fp and,
 * unless --no-html, DIR/map.html (created in od and finished there) around the same SVG
 * bytes. All borrowed. */
typedef struct {
    const pm_cli_t *cli;
    pm_outdir_t *od;
    const char *dir;
    FILE *svg_fp;
    const pm_svg_data_t *svg;
    const pm_svg_opts_t *svg_opts;
    const pm_map_t *map;
    const pm_select_opts_t *sel;
    const pm_table_t *table;
    /* map.html's partner table made beside the picture: waits for it and returns it (NULL:
     * made while writing the page); NULL: none */
    const double *(*edge_cols)(void *ud);
    void *edge_cols_ud;
} pm_cli_map_picture_t;
pm_err_t pm_cli_map_picture(const pm_cli_map_picture_t *p, pm_svg_stats_t *stats, pm_diag_t *diag);

/* --from-counts FILE.pmc (src/cli/cmd_count.c): loads the shard as the run's table (a
 * stand-in without rows) and incidence (no rows), keeping its pairs for pm_cli_score. Returns
 * 0 or the exit status. */
int pm_cli_load_counts(const pm_cli_t *c, pm_table_t **table, pm_incidence_t **inc, double *t_read);
/* The pairs of the shard loaded by pm_cli_load_counts (NULL when the run reads rows). */
const pm_counts_t *pm_cli_given_counts(void);
/* Writes run.json's "counts_from" object (nothing when the run read rows). */
void pm_cli_counts_json(void *json);

/* ---- signals (src/cli/signals.c) ---- */
/* map: SIGINT, SIGTERM, SIGHUP and SIGQUIT blocked in every thread (call before starting any)
 * and received by one sigwait thread, which stops the run through pm_outdir_stop (a commit in
 * progress completes first) and exits 130 (SIGINT) or 143; SIGXFSZ ignored. */
void pm_cli_signals_catch(void);
/* map, after its commit: when a signal came meanwhile, waits for that thread to exit. */
void pm_cli_signals_settle(void);
/* map, at the end of every run: ends the sigwait thread (joined) and unblocks the stop
 * signals. */
void pm_cli_signals_release(void);
/* count and merge: the same signals remove the temporary files and exit 130 or 143. */
void pm_cli_signals_shard(void);

#endif
