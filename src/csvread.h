/* Streaming CSV records with physical line numbers, on top of libcsv: block reads, UTF-8 BOM,
 * CRLF, quoted fields, delimiter detection, NUL-byte and field-size checks, SHA-256 of the
 * bytes read. Shared by the long, lines and wide readers (src/read_long.c, src/input_wide.c). */
#ifndef PM_CSVREAD_H
#define PM_CSVREAD_H

#include <stdatomic.h>
#include <stdbool.h>
#include <stdint.h>
#include <stdio.h>

#include "pairmap/error.h"
#include "sha256.h"

/* One record. Fields are NUL-terminated, valid until the callback returns. */
typedef struct {
    const char *const *f;
    const uint32_t *len;
    size_t n;
    uint64_t line; /* physical line where the record starts, 1-based */
} pm_i_record;

/* Called once per non-blank record. Return PM_OK to go on; any other code stops the read and
 * is returned by pm_i_csv_stream (the callback fills diag). */
typedef pm_err_t (*pm_i_record_fn)(void *ud, const pm_i_record *r, pm_diag_t *diag);

/* Optional reader of many plain lines at once, tried before the record-by-record path:
 * p[0..len) holds whole lines and maybe a partial last one, with no quote and no NUL byte,
 * while libcsv holds no partial record; line is the number of the first. It reads lines from
 * the start for as long as it likes (each to its '\n'), sets *used to their bytes and *nlines
 * to their number, and stops at any line it does not take (that one and the rest go the usual
 * way, then it is called again), so it can leave every unusual line (blank, CR inside, spaces
 * around fields, wrong field count, ...) to the ordinary path and its messages. Its own
 * errors stop the read like the callback's. */
typedef pm_err_t (*pm_i_lines_fn)(void *ud, char *p, size_t len, uint64_t line, char sep,
                                  size_t *used, uint64_t *nlines, pm_diag_t *diag);

typedef struct {
    char sep;            /* 0: detect from the first line among , TAB ; | (default ,) */
    const char *display; /* file name for messages */
    uint64_t bytes;      /* out: bytes read */
    uint64_t lines;      /* out: physical lines */
    char sep_used;       /* out: the delimiter */
    pm_i_sha256 *sha;    /* optional: updated with every byte read */
    uint64_t total;      /* size of the input when known (progress), else 0 */
    void (*progress)(void *ud, const char *stage, uint64_t done, uint64_t total);
    void *progress_ud;
    /* Ranged reads (the parallel reader in src/read_par.c): with ranged set, fp is ignored and
     * the bytes [start, end) of the file fd are read with pread (end UINT64_MAX: to the end of
     * the file). start must be 0 or just past a '\n'; a BOM is looked for, and the delimiter
     * detected, only when start is 0. Line numbers count from 1 at start. */
    bool ranged;
    int fd;
    uint64_t start, end;
    /* optional: bytes read by every stream of one file, for progress across threads */
    _Atomic uint64_t *shared_done;
    /* optional: see pm_i_lines_fn (ud: the record callback's) */
    pm_i_lines_fn lines_fn;
    /* Most fields a record may have (0: PM_INPUT_MAX_FIELDS); the record callback may lower it
     * once it knows the format's count (e.g. the header's). A record with more is an error at
     * its first field over: with max_what set, "found more than N fields, expected N as on the
     * <max_what>", else the general limit. */
    size_t max_fields;
    const char *max_what;
} pm_i_csv_opts;

/* Reads fp to its end, calling fn for every record. Errors: PM_EDATA (malformed quoting,
 * unterminated quote, NUL byte, field over PM_INPUT_MAX_FIELD), PM_EIO, PM_ENOMEM, or the
 * callback's code. */
pm_err_t pm_i_csv_stream(FILE *fp, pm_i_csv_opts *o, pm_i_record_fn fn, void *ud, pm_diag_t *diag);

/* True when s[0..len) is valid UTF-8 (no overlong forms, no surrogates). */
int pm_i_utf8_valid(const char *s, size_t len);

/* Copies s[0..len) into buf (size bytes) for a message, every byte that is not valid UTF-8 or
 * is a control byte written as \xHH, cut at about 60 bytes. Returns buf. */
const char *pm_i_shown(const char *s, size_t len, char *buf, size_t size);

#endif
