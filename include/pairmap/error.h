/* pairmap error codes and diagnostics.
 * Library functions never print and never exit: they return a pm_err_t and fill a pm_diag_t
 * (message plus the input location) that the command-line tool prints. */
#ifndef PAIRMAP_ERROR_H
#define PAIRMAP_ERROR_H

#include <stddef.h>

#ifdef __cplusplus
extern "C" {
#endif

/* Codes; the CLI maps them to the exit statuses of DESIGN.md with pm_err_exit_status(). */
typedef enum {
    PM_OK = 0,
    PM_EUSAGE = 1,      /* bad options or arguments                        -> exit 1 */
    PM_EDATA = 2,       /* bad input data (message names file and line)    -> exit 2 */
    PM_EIO = 3,         /* cannot read, create or write a file             -> exit 3 */
    PM_ENOMEM = 4,      /* out of memory                                   -> exit 4 */
    PM_EINTERNAL = 5,   /* internal error (igraph, GSL, a broken invariant) -> exit 4 */
    PM_EINTERRUPTED = 6 /* stopped by SIGINT/SIGTERM                        -> exit 130 */
} pm_err_t;

/* Where and why something failed. line is the physical line (1-based), 0 when unknown; no
 * column is kept: the messages name the column by its header or number where it matters. */
typedef struct {
    pm_err_t code;
    char file[512];
    long line;
    char msg[1024];
} pm_diag_t;

/* Clears a diagnostic (accepts NULL). */
void pm_diag_clear(pm_diag_t *d);

/* Records an error in d (accepts NULL) and returns code, so callers can write
 * `return pm_diag_set(d, PM_EDATA, file, line, "...", ...);`. file may be NULL, line 0. */
pm_err_t pm_diag_set(pm_diag_t *d, pm_err_t code, const char *file, long line, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 5, 6)))
#endif
    ;

/* Formats "FILE:LINE: message" (or "FILE: message", or "message") into buf. */
void pm_diag_format(const pm_diag_t *d, char *buf, size_t size);

/* The process exit status of DESIGN.md for an error code. */
int pm_err_exit_status(pm_err_t code);

/* Short English name of a code ("bad input data", ...). */
const char *pm_err_name(pm_err_t code);

/* The pairmap version string, e.g. "0.1.0". */
const char *pm_version(void);

#ifdef __cplusplus
}
#endif
#endif
