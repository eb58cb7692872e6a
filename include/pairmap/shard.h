/* Count shards (src/shard.c, src/shard_build.c): N, the weight sums, every item's name,
 * category and total and every pair seen together with its count, for a set of respondents,
 * in a compact file of our own (docs/shard-format.md). Shards of disjoint respondents add up
 * (pm_shard_merge); a map built from the sum is the map of the union (pm_shard_incidence,
 * pm_counts_opts_t.given). */
#ifndef PAIRMAP_SHARD_H
#define PAIRMAP_SHARD_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "pairmap/cooccur.h"
#include "pairmap/error.h"
#include "pairmap/incidence.h"
#include "pairmap/input.h"

#ifdef __cplusplus
extern "C" {
#endif

#define PM_SHARD_VERSION 1

/* One part of one input: respondents whose id hashes to k mod m (m = 1: all of them) of the
 * input whose SHA-256 is src. */
typedef struct {
    unsigned char src[32];
    uint64_t m, k;
} pm_shard_part_t;

/* An exact sum of weights (src/exactsum.h): (hi 2^64 + lo) 2^e, e one exponent per shard
 * for the sums of weights and another (e2) for the sums of squared weights. */
typedef struct {
    uint64_t lo, hi;
} pm_shard_x_t;

/* A shard in memory. Items are in canonical order (names sorted by bytes); pairs are ordered
 * by (a, b), a < b, each seen together n[k] >= 1 times. */
typedef struct {
    bool weighted, has_categories;
    char *fingerprint; /* the counting options, as text (one "name=value" per line) */
    size_t n_parts;
    pm_shard_part_t *parts; /* sorted, distinct */
    uint64_t N;
    uint64_t respondents; /* respondents in the input (N less --respondents' additions) */
    uint64_t rows;        /* respondent-item rows kept, duplicates included */
    uint64_t duplicates, single_item, no_item;
    /* weighted only: the exponents of the exact sums, and wexp, the exponent of the largest
     * weight (as frexp gives it; -2000 when there is no respondent) */
    int e, e2, wexp;
    pm_shard_x_t W, W2; /* sum of weights, of squared weights */
    size_t n_items;
    char **name;
    char **category; /* NULL entries: none */
    uint64_t *count;
    pm_shard_x_t *wcount;  /* weight sums per item (NULL when unweighted) */
    pm_shard_x_t *w2count; /* squared weight sums per item (NULL when unweighted) */
    size_t n_pairs;
    uint32_t *a, *b;
    uint64_t *n;
    pm_shard_x_t *w;     /* weight sums per pair (NULL when unweighted) */
    uint64_t file_bytes; /* set by pm_shard_read: the file's size and SHA-256 */
    unsigned char file_sha256[32];
} pm_shard_t;

void pm_shard_free(pm_shard_t *s);

/* The part of respondent id[0..len): x = FNV-1a 64 of the bytes, then SplitMix64's finaliser
 * of x, modulo m (docs/shard-format.md gives the exact definition and test vectors). */
uint64_t pm_shard_part_of(const char *id, size_t len, uint64_t m);

/* The canonical text of the options that change counting (o's format, columns, drops,
 * merges, weights...; the merge file by the SHA-256 of its bytes) into a malloc'd *out.
 * Errors: PM_EIO (the merge file cannot be read), PM_ENOMEM. */
pm_err_t pm_shard_fingerprint(const pm_input_opts_t *o, char **out, pm_diag_t *diag);

/* The shard of table t (read with o) and its incidence inc: with m > 1 only the respondents
 * whose id falls in part k of m (pm_shard_part_of; respondents without id: the decimal text
 * of their 1-based number in the file). fingerprint is copied. The source's SHA-256
 * (parts[0].src) is the table's: call pm_table_wait_hash before, or set it after. The table's rows
 * are taken as the counting's scratch: afterwards pm_table_nrows(t) is 0 (pm_table_take_rows).
 * Errors: PM_ENOMEM, PM_EDATA (too many respondents). */
pm_err_t pm_shard_build(pm_table_t *t, const pm_incidence_t *inc, uint64_t k, uint64_t m,
                        const char *fingerprint, unsigned threads, pm_shard_t **out,
                        pm_diag_t *diag);

/* Serialises s into a malloc'd buffer (*buf, *len). Errors: PM_ENOMEM. */
pm_err_t pm_shard_encode(const pm_shard_t *s, unsigned char **buf, size_t *len, pm_diag_t *diag);
/* Parses a shard from buf[0..len); name is used in messages. With verify false the checksum
 * is not checked (fuzzing: the parser's own checks still hold). Never reads out of bounds;
 * allocations are bounded by len. Errors: PM_EDATA (bad magic, version, checksum, a
 * truncated or inconsistent file), PM_ENOMEM. */
pm_err_t pm_shard_decode(const unsigned char *buf, size_t len, const char *name, bool verify,
                         pm_shard_t **out, pm_diag_t *diag);
/* Reads and parses the file path ("-": standard input). PM_EIO when it cannot be read. */
pm_err_t pm_shard_read(const char *path, pm_shard_t **out, pm_diag_t *diag);

/* The sum of shards s[0..n) (names[i] names s[i] in messages): items joined by name, counts
 * and sums added, parts joined. The result does not depend on the order of s, nor on how a set
 * of shards was grouped into earlier merges. Errors (PM_EDATA): different fingerprints or
 * weighting, an item whose category differs, the same part twice, parts of one input with
 * different m, a count beyond 2^32 - 1; PM_ENOMEM. */
pm_err_t pm_shard_merge(const pm_shard_t *const *s, const char *const *names, size_t n,
                        pm_shard_t **out, pm_diag_t *diag);

/* The incidence of the shard's items (no respondent rows: n_resp 0), with N, totals and
 * weight sums, and the pairs as counts to hand to pm_counts_opts_t.given. Both owned by the
 * caller. */
pm_err_t pm_shard_incidence(const pm_shard_t *s, pm_incidence_t **inc, pm_counts_t **pairs,
                            pm_diag_t *diag);
/* An empty table standing for the shard as the input (source name, rows and respondents in
 * its stats; bytes and sha256 those of the shard file), for the writers of run.json. */
pm_err_t pm_shard_table(const pm_shard_t *s, const char *name, uint64_t bytes,
                        const unsigned char sha256[32], pm_table_t **out, pm_diag_t *diag);

#ifdef __cplusplus
}
#endif
#endif
