/* Diagnostics and error codes: the only place that knows how an error is worded and which
 * exit status it maps to. */
#include "pairmap/error.h"

#include <stdarg.h>
#include <stdio.h>
#include <string.h>

#ifndef PM_VERSION_STRING
#define PM_VERSION_STRING "0.0.0"
#endif

void pm_diag_clear(pm_diag_t *d) {
    if (d) {
        memset(d, 0, sizeof *d);
    }
}

pm_err_t pm_diag_set(pm_diag_t *d, pm_err_t code, const char *file, long line, const char *fmt,
                     ...) {
    if (!d) {
        return code;
    }
    d->code = code;
    snprintf(d->file, sizeof d->file, "%s", file ? file : "");
    d->line = line;
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(d->msg, sizeof d->msg, fmt, ap);
    va_end(ap);
    return code;
}

void pm_diag_format(const pm_diag_t *d, char *buf, size_t size) {
    if (!d || size == 0) {
        return;
    }
    if (d->file[0] && d->line > 0) {
        snprintf(buf, size, "%s:%ld: %s", d->file, d->line, d->msg);
    } else if (d->file[0]) {
        snprintf(buf, size, "%s: %s", d->file, d->msg);
    } else {
        snprintf(buf, size, "%s", d->msg);
    }
}

int pm_err_exit_status(pm_err_t code) {
    switch (code) {
    case PM_OK:
        return 0;
    case PM_EUSAGE:
        return 1;
    case PM_EDATA:
        return 2;
    case PM_EIO:
        return 3;
    case PM_EINTERRUPTED:
        return 130;
    case PM_ENOMEM:
    case PM_EINTERNAL:
    default:
        return 4;
    }
}

const char *pm_err_name(pm_err_t code) {
    switch (code) {
    case PM_OK:
        return "success";
    case PM_EUSAGE:
        return "usage error";
    case PM_EDATA:
        return "bad input data";
    case PM_EIO:
        return "input/output error";
    case PM_ENOMEM:
        return "out of memory";
    case PM_EINTERRUPTED:
        return "interrupted";
    case PM_EINTERNAL:
    default:
        return "internal error";
    }
}

const char *pm_version(void) {
    return PM_VERSION_STRING;
}
