/* Memory bounds of the counting commands (issue 13 point 1): what the machine or the process
 * may use (physical memory, the control group's memory.max, ulimit -v and -d, or --max-memory),
 * checked against the counting's cost before anything of it is allocated. */
#include "cli.h"
#include "pairmap/segments.h"

#include <errno.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>
#include <unistd.h>

/* --max-memory SIZE: a number of bytes with an optional K, M, G or T (powers of 1024, an
 * optional trailing B; case does not matter). 0 when absent, 1 after a usage error. */
static int mem_parse_size(const pm_cli_t *c, uint64_t *out) {
    *out = 0;
    const char *v = pm_cli_get(c, "max-memory");
    if (!v) {
        return 0;
    }
    char *end = NULL;
    errno = 0;
    double x = v[0] >= '0' && v[0] <= '9' ? strtod(v, &end) : -1;
    double mult = 1;
    if (end && *end) {
        const char *units = "KMGT";
        const char *u = strchr(units, end[0] & ~0x20);
        if (u && end[0] != '\0') {
            for (const char *p = units; p <= u; p++) {
                mult *= 1024;
            }
            end++;
        }
        if ((end[0] & ~0x20) == 'B') {
            end++;
        }
    }
    double bytes = x * mult;
    if (!end || *end || errno || !(bytes >= 1) || bytes > 1.8e19) {
        return pm_cli_usage_error(c, "--max-memory expects a size such as 512M or 8G, got '%s'", v);
    }
    *out = (uint64_t)bytes;
    return 0;
}

/* /proc/self/statm field k (0: size, 1: resident) in bytes; 0 when unknown. */
static uint64_t mem_statm(int k) {
    FILE *fp = fopen("/proc/self/statm", "r");
    unsigned long long f[2] = {0, 0};
    if (fp) {
        if (fscanf(fp, "%llu %llu", &f[0], &f[1]) != 2) {
            f[0] = f[1] = 0;
        }
        fclose(fp);
    }
    long ps = sysconf(_SC_PAGE_SIZE);
    return f[k] * (uint64_t)(ps > 0 ? ps : 4096);
}

/* The bound in bytes, what it is, and the memory in use that counts against it. */
static uint64_t mem_bound(const pm_cli_t *c, uint64_t given, const char **what, uint64_t *in_use) {
    (void)c;
    *in_use = mem_statm(1);
    if (given) {
        *what = "--max-memory";
        return given;
    }
    long pages = sysconf(_SC_PHYS_PAGES), ps = sysconf(_SC_PAGE_SIZE);
    uint64_t lim = pages > 0 && ps > 0 ? (uint64_t)pages * (uint64_t)ps : UINT64_MAX;
    *what = "the machine's physical memory";
    FILE *fp = fopen("/sys/fs/cgroup/memory.max", "r"); /* cgroup v2; "max" when unbounded */
    unsigned long long cg = 0;
    if (fp) {
        if (fscanf(fp, "%llu", &cg) == 1 && cg > 0 && cg < lim) {
            lim = cg;
            *what = "the memory.max of this control group";
        }
        fclose(fp);
    }
    struct rlimit rl;
    if (getrlimit(RLIMIT_DATA, &rl) == 0 && rl.rlim_cur != RLIM_INFINITY && rl.rlim_cur < lim) {
        lim = rl.rlim_cur;
        *what = "the data-size limit (ulimit -d)";
        *in_use = mem_statm(0);
    }
    if (getrlimit(RLIMIT_AS, &rl) == 0 && rl.rlim_cur != RLIM_INFINITY && rl.rlim_cur < lim) {
        lim = rl.rlim_cur;
        *what = "the address-space limit (ulimit -v)";
        *in_use = mem_statm(0);
    }
    return lim;
}

static void mem_human(uint64_t b, char *buf, size_t size) {
    if (b >= ((uint64_t)1 << 30)) {
        snprintf(buf, size, "%.1f GiB", (double)b / (double)((uint64_t)1 << 30));
    } else {
        snprintf(buf, size, "%.0f MiB", (double)b / (double)((uint64_t)1 << 20));
    }
}

int pm_cli_max_memory(const pm_cli_t *c, uint64_t *bytes) {
    return mem_parse_size(c, bytes);
}

/* bytes (plus the memory in use) against the bound: 0 when they fit; 1 after a bad
 * --max-memory; -1 when over, with the need and the bound in words in nb and lb and what the
 * bound is in *what. */
static int mem_over(const pm_cli_t *c, uint64_t bytes, char nb[32], char lb[32],
                    const char **what) {
    uint64_t given;
    if (mem_parse_size(c, &given)) {
        return 1;
    }
    uint64_t in_use;
    uint64_t lim = mem_bound(c, given, what, &in_use);
    uint64_t need = bytes > UINT64_MAX - in_use ? UINT64_MAX : bytes + in_use;
    if (need <= lim) {
        return 0;
    }
    mem_human(need, nb, 32);
    mem_human(lim, lb, 32);
    return -1;
}

int pm_cli_check_memory(const pm_cli_t *c, const pm_counts_cost_t *cost) {
    char nb[32], lb[32];
    const char *what;
    int over = mem_over(c, cost->bytes, nb, lb, &what);
    if (over >= 0) {
        return over;
    }
    uint64_t k = cost->largest, kp = k * (k - (k > 0)) / 2;
    const char *src = c->input[0] == '-' && !c->input[1] ? "stdin" : pm_cli_shown(c->input);
    if (kp >= cost->work / 2) { /* one basket makes most of the work */
        fprintf(stderr,
                "pairmap: %s: counting pairs needs about %s, more than %s of %s: the largest of "
                "the %s holds %llu items (%llu pairs), which usually means that --id-col names a "
                "store, date or batch column; --max-basket K leaves out those with more than K "
                "items, --max-memory SIZE sets the bound\n",
                src, nb, lb, what, pm_cli_unit(c), (unsigned long long)k, (unsigned long long)kp);
    } else {
        fprintf(stderr,
                "pairmap: %s: counting pairs needs about %s, more than %s of %s: %llu pair "
                "visits over up to %llu distinct pairs (the largest of the %s holds %llu "
                "items); --min-share F leaves rare items out, --max-basket K large baskets, "
                "--max-memory SIZE sets the bound\n",
                src, nb, lb, what, (unsigned long long)cost->work,
                (unsigned long long)cost->pairs_max, pm_cli_unit(c), (unsigned long long)k);
    }
    return 4; /* README: 4 out of memory */
}

int pm_cli_check_bytes_hint(const pm_cli_t *c, uint64_t bytes, const char *stage,
                            const char *hint) {
    char nb[32], lb[32];
    const char *what;
    int over = mem_over(c, bytes, nb, lb, &what);
    if (over >= 0) {
        return over;
    }
    fprintf(stderr,
            "pairmap: %s: %s need about %s with what is in use, more than %s of %s; %s, "
            "--max-memory SIZE sets the bound\n",
            c->input[0] == '-' && !c->input[1] ? "stdin" : pm_cli_shown(c->input), stage, nb, lb,
            what, hint);
    return 4; /* README: 4 out of memory */
}

int pm_cli_check_bytes(const pm_cli_t *c, uint64_t bytes, const char *stage) {
    return pm_cli_check_bytes_hint(c, bytes, stage, "--min-share F leaves rare items out");
}

int pm_cli_check_segtable(const pm_cli_t *c, size_t levels, size_t items) {
    return pm_cli_check_bytes_hint(c, pm_segstats_bytes(levels, items), "the segment tables",
                                   "a column of fewer segments (or --only-segment) needs less");
}
