/* A streaming JSON writer for run.json (see mapwrite.h): two-space indentation, keys in the
 * order written, numbers as the CSV files print them, non-finite numbers as null. */
#include <errno.h>
#include <inttypes.h>
#include <math.h>
#include <string.h>

#include "pairmap/mapwrite.h"
#include "pairmap/text.h"
#include "pairmap/write.h"

/* script: also < > & as \u003c \u003e \u0026 and U+2028, U+2029 as \u2028, \u2029. */
static void write_string(FILE *fp, const char *s, bool script) {
    fputc('"', fp);
    for (const unsigned char *p = (const unsigned char *)s; *p; p++) {
        switch (*p) {
        case '"':
            fputs("\\\"", fp);
            break;
        case '\\':
            fputs("\\\\", fp);
            break;
        case '\n':
            fputs("\\n", fp);
            break;
        case '\r':
            fputs("\\r", fp);
            break;
        case '\t':
            fputs("\\t", fp);
            break;
        default:
            if (*p < 0x20 || *p == 0x7f || (script && (*p == '<' || *p == '>' || *p == '&'))) {
                fprintf(fp, "\\u%04x", *p);
            } else if (*p < 0x80) {
                fputc(*p, fp);
            } else {
                /* valid UTF-8 as it is; a byte that is not part of it as the lone surrogate
                 * U+DC80 + (byte - 0x80), the lossless "surrogateescape" convention of
                 * Python's PEP 383 (s.encode("utf-8", "surrogateescape") gives the bytes back) */
                size_t n = pm_text_utf8_len(p, strlen((const char *)p));
                if (n == 0) {
                    fprintf(fp, "\\u%04x", 0xDC00u + *p);
                } else if (script && n == 3 && p[0] == 0xE2 && p[1] == 0x80 &&
                           (p[2] == 0xA8 || p[2] == 0xA9)) {
                    fprintf(fp, "\\u%04x", 0x2000u + (p[2] - 0x80u)); /* U+2028, U+2029 */
                    p += 2;
                } else {
                    fwrite(p, 1, n, fp);
                    p += n - 1;
                }
            }
        }
    }
    fputc('"', fp);
}

void pm_json_write_string(FILE *fp, const char *s) {
    write_string(fp, s, false);
}

void pm_json_write_script_string(FILE *fp, const char *s) {
    write_string(fp, s, true);
}

void pm_json_init(pm_json_t *j, FILE *fp) {
    memset(j, 0, sizeof *j);
    j->fp = fp;
    j->first[0] = true;
}

/* Separator, indentation and key before a value. */
static void lead(pm_json_t *j, const char *key) {
    if (!j->first[j->depth]) {
        fputc(',', j->fp);
    }
    if (j->depth > 0 || !j->first[0]) {
        fputc('\n', j->fp);
    }
    j->first[j->depth] = false;
    for (int i = 0; i < j->depth; i++) {
        fputs("  ", j->fp);
    }
    if (key) {
        pm_json_write_string(j->fp, key);
        fputs(": ", j->fp);
    }
}

static void open_(pm_json_t *j, const char *key, char c) {
    if (j->depth >= PM_JSON_DEPTH) {
        j->bad = true;
        return;
    }
    lead(j, key);
    fputc(c, j->fp);
    j->depth++;
    j->first[j->depth] = true;
}

static void close_(pm_json_t *j, char c) {
    if (j->depth <= 0) {
        j->bad = true;
        return;
    }
    bool empty = j->first[j->depth];
    j->depth--;
    if (!empty) {
        fputc('\n', j->fp);
        for (int i = 0; i < j->depth; i++) {
            fputs("  ", j->fp);
        }
    }
    fputc(c, j->fp);
}

void pm_json_begin_object(pm_json_t *j, const char *key) {
    open_(j, key, '{');
}
void pm_json_end_object(pm_json_t *j) {
    close_(j, '}');
}
void pm_json_begin_array(pm_json_t *j, const char *key) {
    open_(j, key, '[');
}
void pm_json_end_array(pm_json_t *j) {
    close_(j, ']');
}

void pm_json_string(pm_json_t *j, const char *key, const char *v) {
    lead(j, key);
    if (v) {
        pm_json_write_string(j->fp, v);
    } else {
        fputs("null", j->fp);
    }
}

void pm_json_number(pm_json_t *j, const char *key, double v) {
    lead(j, key);
    if (isfinite(v)) {
        pm_write_number(j->fp, v);
    } else {
        fputs("null", j->fp);
    }
}

void pm_json_uint(pm_json_t *j, const char *key, uint64_t v) {
    lead(j, key);
    fprintf(j->fp, "%" PRIu64, v);
}

void pm_json_int(pm_json_t *j, const char *key, int64_t v) {
    lead(j, key);
    fprintf(j->fp, "%" PRId64, v);
}

void pm_json_bool(pm_json_t *j, const char *key, bool v) {
    lead(j, key);
    fputs(v ? "true" : "false", j->fp);
}

void pm_json_null(pm_json_t *j, const char *key) {
    lead(j, key);
    fputs("null", j->fp);
}

pm_err_t pm_json_finish(pm_json_t *j, pm_diag_t *diag) {
    fputc('\n', j->fp);
    if (j->bad || j->depth != 0) {
        return pm_diag_set(diag, PM_EINTERNAL, NULL, 0, "unbalanced JSON document");
    }
    if (ferror(j->fp)) {
        return pm_diag_set(diag, PM_EIO, NULL, 0, "cannot write the JSON file: %s",
                           strerror(errno ? errno : EIO));
    }
    return PM_OK;
}
