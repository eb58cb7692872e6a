/* pairmap merge: the sum of count shards (pm_shard_merge), written atomically. */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "cli.h"
#include "pairmap/shard.h"

int pm_cli_write_shard(const char *path, const unsigned char *buf, size_t len);

static const char help[] =
    "Usage: pairmap merge A.pmc B.pmc ... -o FILE.pmc [-q]\n"
    "\n"
    "Adds count shards (pairmap count) of disjoint respondents: items joined by name, N, totals,\n"
    "weight sums and pair counts added, the parts they hold joined. Any order and any grouping\n"
    "of merges gives the same file, byte for byte. Errors (exit 2): shards counted with other\n"
    "input options, an item whose category differs, the same part twice, parts of one input\n"
    "from different splits (K/M with another M), a damaged or truncated shard.\n"
    "  -o, --output FILE     the shard to write (replaced only when complete)\n"
    "  -q, --quiet           no summary on standard error\n"
    "A shard may be given as - (standard input) once.\n";

static int usage(const char *fmt, const char *arg) {
    fputs("pairmap: ", stderr);
    fprintf(stderr, fmt, arg);
    fputs("; see 'pairmap merge --help'\n", stderr);
    return 1;
}

int pm_cmd_merge(int argc, char **argv) {
    const char *out = NULL;
    int quiet = 0, only_pos = 0;
    const char **in = calloc((size_t)argc + 1, sizeof *in);
    size_t n = 0;
    if (!in) {
        fputs("pairmap: out of memory\n", stderr);
        return 4;
    }
    int rc = 0;
    for (int i = 0; i < argc && !rc; i++) {
        const char *a = argv[i];
        if (only_pos || a[0] != '-' || strcmp(a, "-") == 0) {
            in[n++] = a;
        } else if (strcmp(a, "--") == 0) {
            only_pos = 1;
        } else if (strcmp(a, "-h") == 0 || strcmp(a, "--help") == 0) {
            fputs(help, stdout);
            free(in);
            return pm_cli_close_stdout();
        } else if (strcmp(a, "-q") == 0 || strcmp(a, "--quiet") == 0) {
            quiet = 1;
        } else if (strcmp(a, "-o") == 0 || strcmp(a, "--output") == 0) {
            if (i + 1 >= argc) {
                rc = usage("option %s needs a value", a);
            } else if (out) {
                rc = usage("option %s given twice", a);
            } else {
                out = argv[++i];
            }
        } else if (strncmp(a, "--output=", 9) == 0 && !out) {
            out = a + 9;
        } else {
            rc = usage("unknown option '%s' for 'pairmap merge'", a);
        }
    }
    size_t stdin_uses = 0;
    for (size_t i = 0; i < n; i++) {
        stdin_uses += strcmp(in[i], "-") == 0;
    }
    if (!rc && (!out || !out[0])) {
        rc = usage("%s", "'pairmap merge' needs -o FILE.pmc (the shard to write)");
    } else if (!rc && n == 0) {
        rc = usage("%s", "no shard given (pairmap merge A.pmc B.pmc ... -o FILE.pmc)");
    } else if (!rc && stdin_uses > 1) {
        rc = usage("%s", "standard input (-) given more than once");
    }
    if (rc) {
        free(in);
        return rc;
    }
    pm_cli_signals_shard();
    pm_shard_t **s = calloc(n, sizeof *s);
    const char **names = calloc(n, sizeof *names);
    pm_shard_t *m = NULL;
    unsigned char *buf = NULL;
    size_t len = 0;
    pm_diag_t d;
    pm_diag_clear(&d);
    if (!s || !names) {
        fputs("pairmap: out of memory\n", stderr);
        rc = 4;
    }
    for (size_t i = 0; i < n && !rc; i++) {
        names[i] = strcmp(in[i], "-") == 0 ? "stdin" : in[i];
        if (pm_shard_read(in[i], &s[i], &d)) {
            rc = pm_cli_fail(&d);
        }
    }
    if (!rc && (pm_shard_merge((const pm_shard_t *const *)s, names, n, &m, &d) ||
                pm_shard_encode(m, &buf, &len, &d))) {
        rc = pm_cli_fail(&d);
    }
    if (!rc) {
        rc = pm_cli_write_shard(out, buf, len);
    }
    if (!rc && !quiet) {
        fprintf(stderr,
                "pairmap: %s: %zu shards, %llu respondents, %zu items, %zu pairs, %zu "
                "bytes\n",
                out, n, (unsigned long long)m->N, m->n_items, m->n_pairs, len);
    }
    for (size_t i = 0; s && i < n; i++) {
        pm_shard_free(s[i]);
    }
    free(s);
    free(names);
    free(in);
    free(buf);
    pm_shard_free(m);
    return rc;
}
