/* libFuzzer harness over the input reader (issue 6): the first bytes pick the format and the
 * reader's options, the rest is the file. The file is handed to pm_input_read() by path
 * through a memfd (/proc/self/fd/N), so the library needs no in-memory entry point. A read
 * that succeeds is carried on through the incidence, pair scoring, selection and the CSV
 * writers, so bad tables that slip through the reader show up as crashes downstream. */
#define _GNU_SOURCE
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/mman.h>
#include <unistd.h>

#include "pairmap/assoc.h"
#include "pairmap/error.h"
#include "pairmap/incidence.h"
#include "pairmap/input.h"
#include "pairmap/network.h"
#include "pairmap/select.h"
#include "pairmap/write.h"
#include "util.h" /* pm_i_alloc_fail_after */

static int data_fd = -1, merge_fd = -1;
static char data_path[64], merge_path[64];
static FILE *devnull;

int LLVMFuzzerInitialize(int *argc, char ***argv);
int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

int LLVMFuzzerInitialize(int *argc, char ***argv) {
    (void)argc;
    (void)argv;
    pm_init();
    data_fd = memfd_create("pm-fuzz-input", 0);
    merge_fd = memfd_create("pm-fuzz-merge", 0);
    if (data_fd < 0 || merge_fd < 0) {
        perror("memfd_create");
        abort();
    }
    snprintf(data_path, sizeof data_path, "/proc/self/fd/%d", data_fd);
    snprintf(merge_path, sizeof merge_path, "/proc/self/fd/%d", merge_fd);
    devnull = fopen("/dev/null", "w");
    return 0;
}

static void put(int fd, const uint8_t *p, size_t n) {
    if (ftruncate(fd, 0) != 0) {
        abort();
    }
    size_t off = 0;
    while (off < n) {
        ssize_t w = pwrite(fd, p + off, n - off, (off_t)off);
        if (w <= 0) {
            abort();
        }
        off += (size_t)w;
    }
}

/* Column selectors the option bytes choose from: numbers, header names of the seeds, a name
 * that never exists. */
static const char *const SEL[] = {NULL,
                                  "1",
                                  "2",
                                  "3",
                                  "4",
                                  "order",
                                  "item",
                                  "category",
                                  "weight",
                                  "id",
                                  "nope",
                                  "0",
                                  "99999999999999999999"};
#define NSEL (sizeof SEL / sizeof SEL[0])

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size) {
    if (size < 6) {
        return 0;
    }
    /* option bytes: f0 format (% 3), delimiter ((f0 / 3) % 5), 0x80 --no-header; f1 id and
     * item columns; f2 category column; f3 respondents (low 2 bits 3: f3 >> 2), 0x04
     * --drop-item, 0x08 merge file (long, lines) or --base all (wide), 0x10 min-count 0,
     * sign (f3 >> 5) % 3, wide: question prefixes; f4 weight column (0: none); f5 in 1..63:
     * the f5-th allocation fails (the out-of-memory paths must free what they hold) */
    uint8_t f0 = data[0], f1 = data[1], f2 = data[2], f3 = data[3], f4 = data[4], f5 = data[5];
    data += 6;
    size -= 6;

    pm_input_opts_t o;
    pm_input_opts_init(&o);
    o.format = (pm_format_t)(f0 % 3);
    static const char seps[5] = {0, ',', '\t', ';', '|'};
    o.sep = seps[(f0 / 3) % 5];
    o.no_header = (f0 & 0x80) != 0;
    o.id_col = SEL[f1 % NSEL];
    o.item_col = o.format == PM_FORMAT_LONG ? SEL[(f1 / NSEL) % NSEL] : NULL;
    o.category_col = o.format == PM_FORMAT_LONG ? SEL[f2 % NSEL] : NULL;
    o.weight_col = SEL[f4 % NSEL];
    o.respondents = (f3 & 0x03) == 3 && !o.weight_col ? (uint64_t)(f3 >> 2) * 7 : 0;
    static const char *const drops[] = {"a", "Espresso", "x y"};
    if (f3 & 0x04) {
        o.drop_items = drops;
        o.n_drop_items = 3;
    }
    /* wide format: question prefixes, "not chosen" values, skipped columns */
    static const char *const cols[] = {"q1_", "q2_", "drinks_"};
    static const char *const dvals[] = {"n/a", "-"};
    static const char *const skips[] = {"id", "q1_other"};
    if (o.format == PM_FORMAT_WIDE) {
        o.columns = cols;
        o.n_columns = 1 + (size_t)((f3 >> 4) % 3);
        o.drop_values = dvals;
        o.n_drop_values = (f3 & 0x40) ? 2 : 0;
        o.skip_cols = skips;
        o.n_skip_cols = (f3 & 0x80) ? 2 : 0;
        o.base_all = (f3 & 0x08) != 0;
    }
    /* a merge file: the part after the first "\n===\n" */
    size_t main_len = size;
    if (f3 & 0x08 && o.format != PM_FORMAT_WIDE) {
        const uint8_t *m = memmem(data, size, "\n===\n", 5);
        if (m) {
            main_len = (size_t)(m - data) + 1;
            put(merge_fd, m + 5, size - main_len - 4);
            o.merge_file = merge_path;
        }
    }
    put(data_fd, data, main_len);
    o.display_name = "fuzz.csv";

    pm_i_alloc_fail_after(f5 < 64 ? (long)f5 : 0);
    pm_table_t *t = NULL;
    pm_diag_t d;
    pm_diag_clear(&d);
    pm_err_t rc = pm_input_read(data_path, &o, &t, &d);
    if (rc != PM_OK) {
        /* the contract: no table, a message, and a code the CLI can map */
        if (t != NULL || d.msg[0] == '\0' || d.code != rc) {
            abort();
        }
        pm_i_alloc_fail_after(0);
        return 0;
    }
    pm_incidence_t *inc = NULL;
    if (pm_incidence_build(t, &inc, &d) == PM_OK) {
        if (inc->n_items <= 200) {
            pm_assoc_opts_t ao;
            pm_assoc_opts_init(&ao);
            ao.threads = 1;
            ao.sign = (pm_sign_t)((f3 >> 5) % 3);
            ao.min_count = f3 & 0x10 ? 0 : 1;
            pm_pairs_t *pp = NULL;
            if (pm_assoc_run(inc, &ao, &pp, &d) == PM_OK) {
                pm_select_opts_t so;
                pm_select_opts_init(&so);
                so.sign = ao.sign;
                so.min_count = ao.min_count;
                so.max_q = 1;
                pm_edges_t *e = NULL;
                if (pm_select_run(pp, inc, &so, &e, &d) == PM_OK) {
                    pm_write_edges_csv(devnull, pp, inc, e, 0, &d);
                }
                pm_edges_free(e);
            }
            pm_pairs_free(pp);
        }
        pm_write_items_csv(devnull, inc, 0, &d);
    }
    pm_incidence_free(inc);
    pm_table_free(t);
    pm_i_alloc_fail_after(0);
    return 0;
}
