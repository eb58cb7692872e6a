/* pairmap count (a count shard of INPUT, or of part K/M of its respondents), and the loading
 * of a shard for --from-counts on map, pairs, items and partners. pairmap merge is in
 * cmd_merge.c. */
#include <errno.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "cli.h"
#include "pairmap/mapwrite.h"
#include "pairmap/outfile.h"
#include "pairmap/shard.h"

static const char help[] =
    "Usage: pairmap count INPUT -o FILE.pmc [--part K/M] [input options]\n"
    "\n"
    "Counts INPUT into a count shard: N, the weight sums, every item's name, category and\n"
    "total, and every pair seen together with its count (docs/shard-format.md). Shards of\n"
    "disjoint respondents add up with 'pairmap merge'; map, pairs, items and partners (one\n"
    "item) build from a shard with --from-counts FILE.pmc, with the same results as from the\n"
    "rows.\n"
    "  -o, --output FILE     the shard to write (replaced only when complete)\n"
    "  --part K/M            count only the respondents whose id falls in part K of M\n"
    "                        (0 <= K < M; FNV-1a 64 of the id, SplitMix64's finaliser, mod M):\n"
    "                        M runs with K = 0 .. M-1 on one file partition its respondents\n"
    "\n";

/* Writes buf[0..len) to path atomically (a temporary file in its directory, renamed). */
int pm_cli_write_shard(const char *path, const unsigned char *buf, size_t len);
int pm_cli_write_shard(const char *path, const unsigned char *buf, size_t len) {
    const char *slash = strrchr(path, '/');
    char dir[4096];
    const char *base = slash ? slash + 1 : path;
    if (!*base || strlen(path) >= sizeof dir) {
        fprintf(stderr, "pairmap: %s: not a file name for the shard\n", pm_cli_shown(path));
        return 1;
    }
    if (slash) {
        snprintf(dir, sizeof dir, "%.*s", (int)(slash - path == 0 ? 1 : slash - path), path);
    } else {
        snprintf(dir, sizeof dir, ".");
    }
    pm_diag_t d;
    pm_diag_clear(&d);
    pm_outdir_t *od = NULL;
    FILE *fp = NULL;
    pm_err_t rc = pm_outdir_open(dir, &od, &d);
    if (!rc) {
        rc = pm_outdir_create(od, base, &fp, &d);
    }
    if (!rc) {
        if (fwrite(buf, 1, len, fp) != len) {
            rc = pm_diag_set(&d, PM_EIO, path, 0, "cannot write: %s", strerror(errno));
        }
        pm_err_t r2 = pm_outdir_finish(od, fp, rc ? NULL : &d);
        rc = rc ? rc : r2;
    }
    if (!rc) {
        rc = pm_outdir_commit(od, &d);
    }
    pm_outdir_free(od);
    return rc ? pm_cli_fail(&d) : 0;
}

static int parse_part(const pm_cli_t *c, uint64_t *k, uint64_t *m) {
    const char *v = pm_cli_get(c, "part");
    *k = 0;
    *m = 1;
    if (!v) {
        return 0;
    }
    unsigned long long a, b;
    char extra;
    if (v[0] < '0' || v[0] > '9' || sscanf(v, "%llu/%llu%c", &a, &b, &extra) != 2 || b == 0 ||
        a >= b || b > 1000000 || !strchr(v, '/') || strchr(v, '-') || strchr(v, '+') ||
        strchr(v, ' ')) {
        return pm_cli_usage_error(c, "--part expects K/M with 0 <= K < M <= 1000000, got '%s'", v);
    }
    *k = a;
    *m = b;
    return 0;
}

int pm_cmd_count(int argc, char **argv) {
    pm_cli_t c;
    static char full[8192];
    snprintf(full, sizeof full, "%s%s%s%s%s", help, pm_cli_input_help, pm_cli_only_help,
             pm_cli_basket_help, pm_cli_memory_help);
    int rc = pm_cli_parse(&c, "count", PM_CMD_COUNT, argc, argv, full);
    if (rc) {
        return rc < 0 ? pm_cli_close_stdout() : rc;
    }
    const char *out = pm_cli_get(&c, "output");
    if (!out || !out[0]) {
        return pm_cli_usage_error(&c, "'pairmap count' needs -o FILE.pmc (the shard to write)");
    }
    uint64_t k, m;
    pm_input_opts_t io;
    unsigned th;
    if (parse_part(&c, &k, &m) || pm_cli_input_opts(&c, &io) || pm_cli_threads(&c, &th)) {
        return 1;
    }
    if (m > 1 && io.respondents) {
        return pm_cli_usage_error(&c, "--respondents sets N for the whole input, not for a "
                                      "part: leave it out with --part");
    }
    pm_diag_t d;
    pm_diag_clear(&d);
    char *fp = NULL;
    if (pm_shard_fingerprint(&io, &fp, &d)) {
        return pm_cli_fail(&d);
    }
    pm_cli_signals_shard();
    pm_table_t *t = NULL;
    pm_incidence_t *inc = NULL;
    pm_shard_t *s = NULL;
    unsigned char *buf = NULL;
    size_t len = 0;
    rc = pm_cli_load(&c, &t, &inc, NULL);
    if (!rc) { /* the bound before the counting allocates anything */
        pm_counts_opts_t co;
        pm_counts_opts_init(&co);
        co.threads = th;
        pm_counts_cost_t cost;
        if (pm_counts_cost(inc, &co, &cost)) {
            fprintf(stderr, "pairmap: out of memory\n");
            rc = 4;
        }
        /* and the shard's copy of every pair (with its exact weighted sum) */
        long double b =
            (long double)cost.bytes + (long double)cost.pairs_max * (inc->weight ? 28 : 12);
        cost.bytes = b >= 1.8e19L ? UINT64_MAX : (uint64_t)b;
        rc = rc ? rc : pm_cli_check_memory(&c, &cost);
    }
    /* the hash runs beside the counting (pm_table_hash_ahead): the shard's source is set
     * once it is done */
    if (!rc && (pm_shard_build(t, inc, k, m, fp, th, &s, &d) || pm_table_wait_hash(t, &d))) {
        rc = pm_cli_fail(&d);
    }
    if (!rc) {
        memcpy(s->parts[0].src, pm_table_stats(t)->sha256, 32);
        if (pm_shard_encode(s, &buf, &len, &d)) {
            rc = pm_cli_fail(&d);
        }
    }
    if (!rc) {
        rc = pm_cli_write_shard(out, buf, len);
    }
    if (!rc) {
        pm_cli_note(&c, "%s: %llu respondents (part %llu/%llu), %zu items, %zu pairs, %zu bytes",
                    out, (unsigned long long)s->N, (unsigned long long)k, (unsigned long long)m,
                    s->n_items, s->n_pairs, len);
    }
    free(buf);
    free(fp);
    pm_shard_free(s);
    pm_incidence_free(inc);
    pm_table_free(t);
    return rc;
}
