/* libFuzzer harness over the command-line parser (issue 6): the input is split at NUL bytes
 * into argv; the first byte picks the command. After pm_cli_parse() every getter the commands
 * use runs on the result (input, selection and thread options, the map and partners numbers).
 * Messages go to /dev/null. */
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "cli/cli.h"
#include "pairmap/network.h"

int LLVMFuzzerInitialize(int *argc, char ***argv);
int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

int LLVMFuzzerInitialize(int *argc, char ***argv) {
    (void)argc;
    (void)argv;
    pm_init();
    /* the parser reports on stderr and prints --help on stdout: keep the fuzzer's log clean
     * (libFuzzer writes its own report to the saved descriptor via -close_fd_mask). */
    if (!freopen("/dev/null", "w", stdout)) {
        abort();
    }
    return 0;
}

#define MAXARGS 600

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size) {
    static const struct {
        const char *name;
        unsigned mask;
    } cmds[] = {{"map", PM_CMD_MAP},          {"partners", PM_CMD_PARTNERS},
                {"pairs", PM_CMD_PAIRS},      {"items", PM_CMD_ITEMS},
                {"unfold", PM_CMD_UNFOLD},    {"count", PM_CMD_COUNT},
                {"segments", PM_CMD_SEGMENTS}};
    if (size < 1 || size > 8192) {
        return 0;
    }
    unsigned ci = data[0] % 7;
    char *buf = malloc(size); /* argv strings: each NUL-terminated, the last one too */
    if (!buf) {
        return 0;
    }
    memcpy(buf, data + 1, size - 1);
    buf[size - 1] = '\0';
    char *argv[MAXARGS + 1];
    int argc = 0;
    char *p = buf, *end = buf + size - 1;
    while (p < end && argc < MAXARGS) {
        argv[argc++] = p;
        p += strlen(p) + 1;
    }
    argv[argc] = NULL;

    static pm_cli_t c; /* large: keep it off the stack */
    int rc = pm_cli_parse(&c, cmds[ci].name, cmds[ci].mask, argc, argv, "usage\n");
    if (rc == 0) {
        if (!c.input) {
            abort(); /* parse succeeded without INPUT */
        }
        pm_input_opts_t io;
        pm_select_opts_t so;
        unsigned th;
        uint64_t u;
        double x;
        (void)pm_cli_input_opts(&c, &io);
        (void)pm_cli_select_opts(&c, &so);
        (void)pm_cli_threads(&c, &th);
        (void)pm_cli_uint(&c, "seed", 1, 0, UINT32_MAX, &u);
        (void)pm_cli_uint(&c, "restarts", 1, 1, 1000, &u);
        (void)pm_cli_uint(&c, "iterations", 500, 0, 100000, &u);
        (void)pm_cli_uint(&c, "draw", 0, 0, 100000, &u);
        (void)pm_cli_uint(&c, "top", 10, 1, 100000, &u);
        (void)pm_cli_double(&c, "resolution", 1, 0, 100, &x);
        static const char *const by[] = {"phi", "lift", "confidence", "together", NULL};
        int k;
        (void)pm_cli_choice(&c, "by", by, 0, &k);
        size_t n;
        const char *const *items = pm_cli_all(&c, "item", &n);
        for (size_t i = 0; i < n; i++) {
            if (!items[i]) {
                abort();
            }
        }
        (void)pm_cli_max_memory(&c, &u);
        (void)pm_cli_get(&c, "output");
        (void)pm_cli_flag(&c, "csv");
    } else if (rc != 1 && rc != -1) {
        abort(); /* only 0, 1 (usage) and -1 (--help) are defined */
    }
    free(buf);
    return 0;
}
