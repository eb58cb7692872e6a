/* Reading an input file (include/pairmap/input.h): the checks of the options, then the wide
 * reader (src/input_wide.c), the parallel reader (src/read_par.c) or one serial pass of the
 * long and lines readers (src/read_long.c) into a table (src/table.c). */
#include "input_internal.h"

#include <errno.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

void pm_input_opts_init(pm_input_opts_t *o) {
    memset(o, 0, sizeof *o);
    o->format = PM_FORMAT_LONG;
    o->threads = 1;
}

pm_err_t pm_input_read(const char *path, const pm_input_opts_t *o, pm_table_t **out,
                       pm_diag_t *diag) {
    *out = NULL;
    int is_stdin = strcmp(path, "-") == 0;
    const char *display = o->display_name ? o->display_name : (is_stdin ? "stdin" : path);
    if (o->format == PM_FORMAT_LINES && o->category_col) {
        return pm_diag_set(diag, PM_EUSAGE, NULL, 0,
                           "--category-col does not apply to --format lines");
    }
    if (o->respondents && o->weight_col) {
        return pm_diag_set(diag, PM_EUSAGE, NULL, 0,
                           "--respondents cannot be combined with --weight-col: the weights of "
                           "respondents missing from the file are unknown");
    }
    FILE *fp = is_stdin ? stdin : fopen(path, "rb");
    if (!fp) {
        return pm_diag_set(diag, PM_EIO, display, 0, "cannot open: %s", strerror(errno));
    }
    pm_table_t *t = NULL;
    pm_err_t rc = pm_i_table_new(o, display, &t, diag);
    if (rc) {
        goto done;
    }
    int par = 0; /* 1: read in parallel and finished */
    pm_i_sha256 sha;
    pm_i_sha256_init(&sha);
    pm_i_csv_opts co = {0};
    co.sep = o->sep;
    co.display = display;
    co.sha = &sha;
    co.progress = o->progress;
    co.progress_ud = o->progress_ud;
    {
        struct stat stt;
        if (fstat(fileno(fp), &stt) == 0 && S_ISREG(stt.st_mode)) {
            co.total = (uint64_t)stt.st_size;
        }
    }
    if (o->format == PM_FORMAT_WIDE) {
        rc = pm_i_read_wide(fp, o, t, &co, diag);
    } else {
        if (!is_stdin && co.total > 0) {
            par = pm_i_read_par(fp, co.total, o, t, &co, diag);
            if (par == 0) { /* read serially from a fresh table */
                pm_table_free(t);
                t = NULL;
                pm_i_sha256_init(&sha);
                if ((rc = pm_i_table_new(o, display, &t, diag)) != PM_OK) {
                    goto done;
                }
            }
        }
        pm_i_reader rd;
        memset(&rd, 0, sizeof rd);
        rd.t = t;
        rd.o = o;
        rd.co = &co;
        t->defer = true;
        if (par < 0) {
            rc = PM_ENOMEM;
        } else if (par > 0) {
            rd.started = 1;
        } else {
            co.lines_fn = pm_i_read_lines;
            rc = pm_i_csv_stream(fp, &co, pm_i_read_record, &rd, diag);
        }
        if (rc == PM_OK && !rd.started && co.bytes > 0) { /* not "no data after the header" */
            rc = pm_diag_set(diag, PM_EDATA, display, 0,
                             "the file holds only blank lines; expected rows of respondent and "
                             "item");
        }
    }
    if (rc == PM_OK && ferror(fp)) {
        rc = pm_diag_set(diag, PM_EIO, display, 0, "cannot read");
    }
    if (rc == PM_EIO && errno == EISDIR) {
        rc = pm_diag_set(diag, PM_EIO, display, 0, "is a directory, not a file");
    }
    t->stats.bytes = co.bytes;
    t->stats.lines = co.lines;
    if (par <= 0) { /* a parallel read set it, or left it to pm_table_wait_hash */
        pm_i_sha256_final(&sha, t->stats.sha256);
    }
    if (rc == PM_OK && par <= 0) {
        rc = pm_i_table_finish(t, o, diag);
    }
    if (rc == PM_OK) {
        rc = pm_i_table_late(t, o, diag);
    }
    if (rc == PM_OK && o->format != PM_FORMAT_WIDE) {
        pm_i_reader_notes(t);
    }
done:
    if (!is_stdin) {
        fclose(fp);
    }
    if (rc) {
        pm_table_free(t);
        return rc;
    }
    *out = t;
    return PM_OK;
}
