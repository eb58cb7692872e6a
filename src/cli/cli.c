/* Option parsing and the steps shared by every command (see cli.h). */
#include "cli.h"

#include "pairmap/text.h"
#include "pairmap/write.h"

#include <errno.h>
#include <math.h>
#include <stdarg.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>
#include <unistd.h>

#define ALL                                                                                        \
    (PM_CMD_MAP | PM_CMD_PARTNERS | PM_CMD_PAIRS | PM_CMD_ITEMS | PM_CMD_UNFOLD | PM_CMD_COUNT |   \
     PM_CMD_SEGMENTS | PM_CMD_EXPLAIN)
#define FROM_COUNTS (PM_CMD_MAP | PM_CMD_PARTNERS | PM_CMD_PAIRS | PM_CMD_ITEMS | PM_CMD_EXPLAIN)
#define SCORE (PM_CMD_MAP | PM_CMD_PARTNERS | PM_CMD_PAIRS | PM_CMD_EXPLAIN)
#define SEGMENTED (PM_CMD_MAP | PM_CMD_PARTNERS | PM_CMD_PAIRS | PM_CMD_SEGMENTS)

typedef struct {
    const char *name;
    char shortname;
    int arg; /* takes a value */
    int repeatable;
    unsigned cmds;
} opt_def;

static const opt_def OPTS[] = {
    /* input */
    {"format", 0, 1, 0, ALL},
    {"id-col", 0, 1, 0, ALL},
    {"item-col", 0, 1, 0, ALL},
    {"category-col", 0, 1, 0, ALL},
    {"weight-col", 0, 1, 0, ALL},
    {"sep", 0, 1, 0, ALL},
    {"no-header", 0, 0, 0, ALL},
    {"respondents", 0, 1, 0, ALL},
    {"drop-item", 0, 1, 1, ALL},
    {"merge-file", 0, 1, 0, ALL},
    {"columns", 0, 1, 1, ALL},
    {"drop-value", 0, 1, 1, ALL},
    {"skip-col", 0, 1, 1, ALL},
    {"base", 0, 1, 0, ALL},
    {"quiet", 'q', 0, 0, ALL},
    {"threads", 0, 1, 0, ALL},
    {"unit", 0, 1, 0, FROM_COUNTS},
    {"max-basket", 0, 1, 0, FROM_COUNTS | PM_CMD_COUNT | PM_CMD_SEGMENTS},
    {"max-memory", 0, 1, 0, SCORE | PM_CMD_COUNT | PM_CMD_SEGMENTS},
    /* selection */
    {"min-count", 0, 1, 0, SCORE},
    {"min-share", 0, 1, 0, SCORE},
    {"max-q", 0, 1, 0, SCORE},
    {"min-phi", 0, 1, 0, SCORE},
    {"min-lift", 0, 1, 0, SCORE},
    {"top-edges", 0, 1, 0, PM_CMD_MAP | PM_CMD_PAIRS | PM_CMD_EXPLAIN},
    {"sign", 0, 1, 0, SCORE},
    {"measure", 0, 1, 0, PM_CMD_MAP | PM_CMD_PAIRS | PM_CMD_EXPLAIN},
    /* map */
    {"output", 'o', 1, 0, PM_CMD_MAP | PM_CMD_COUNT},
    /* count shards */
    {"part", 0, 1, 0, PM_CMD_COUNT},
    {"from-counts", 0, 1, 0, FROM_COUNTS},
    {"seed", 0, 1, 0, PM_CMD_MAP | PM_CMD_EXPLAIN},
    {"restarts", 0, 1, 0, PM_CMD_MAP | PM_CMD_EXPLAIN},
    {"resolution", 0, 1, 0, PM_CMD_MAP | PM_CMD_EXPLAIN},
    {"iterations", 0, 1, 0, PM_CMD_MAP},
    {"draw", 0, 1, 0, PM_CMD_MAP},
    {"title", 0, 1, 0, PM_CMD_MAP},
    {"width", 0, 1, 0, PM_CMD_MAP},
    {"height", 0, 1, 0, PM_CMD_MAP},
    {"color-by", 0, 1, 0, PM_CMD_MAP},
    {"no-html", 0, 0, 0, PM_CMD_MAP},
    /* partners */
    {"item", 0, 1, 1, PM_CMD_PARTNERS},
    {"top", 0, 1, 0, PM_CMD_PARTNERS},
    {"by", 0, 1, 0, PM_CMD_PARTNERS},
    {"csv", 0, 0, 0, PM_CMD_PARTNERS | PM_CMD_PAIRS | PM_CMD_ITEMS},
    {"family", 0, 1, 0, PM_CMD_PARTNERS},
    {"sort", 0, 1, 0, PM_CMD_PAIRS | PM_CMD_ITEMS},
    /* segments */
    {"segment-col", 0, 1, 1, SEGMENTED},
    {"segment-file", 0, 1, 0, ALL},
    {"segment-levels", 0, 1, 1, SEGMENTED},
    {"only-segment", 0, 1, 1, ALL},
    {"pair-test", 0, 1, 0, PM_CMD_MAP | PM_CMD_PARTNERS | PM_CMD_PAIRS},
    {"csv-raw", 0, 0, 0,
     PM_CMD_MAP | PM_CMD_PARTNERS | PM_CMD_PAIRS | PM_CMD_ITEMS | PM_CMD_SEGMENTS},
    {"help", 'h', 0, 0, ALL},
};
#define NOPTS (sizeof OPTS / sizeof OPTS[0])

const char pm_cli_input_help[] =
    "Input:\n"
    "  INPUT                 a CSV file, or - for standard input\n"
    "  --format F            long (default: one row per respondent and item), lines (one\n"
    "                        respondent per line, items in the fields) or wide (one column\n"
    "                        per answer option)\n"
    "  --id-col COL          respondent column, by header name or 1-based number\n"
    "                        (long: default 1; lines: none, every line is a respondent)\n"
    "  --item-col COL        item column (long; default 2)\n"
    "  --category-col COL    item category column (optional)\n"
    "  --weight-col COL      sampling weight per respondent (a finite number > 0, the same\n"
    "                        on every row of a respondent)\n"
    "  --sep C               delimiter: , tab ; | (default: detected from the first line)\n"
    "  --no-header           the first line is data (default: it is a header)\n"
    "  --respondents N       the base N outright, when respondents who chose nothing are\n"
    "                        not in the file (an error if below the respondents seen)\n"
    "  --drop-item NAME      leave the item out (repeatable)\n"
    "  --merge-file FILE     CSV item,group: items renamed to their group before counting\n"
    "  --columns PREFIX      wide: the option columns of one question (repeatable)\n"
    "  --drop-value TEXT     wide: a cell value meaning 'not chosen' besides empty, 0, no,\n"
    "                        false (repeatable)\n"
    "  --skip-col NAME       wide: a column never read as an option (repeatable)\n"
    "  --base answered|all   wide: leave respondents who chose nothing out of N (answered,\n"
    "                        default) or keep them (all)\n"
    "  --threads N           threads (and, for map, worker processes) to use; the results\n"
    "                        are the same for any number (default: all cores)\n"
    "  -q, --quiet           no notes, no progress\n"
    "A long row with an empty item registers a respondent who chose nothing (counted in N).\n"
    "Duplicate respondent-item rows count once. Item names are trimmed of white space.\n";

const char pm_cli_basket_help[] =
    "Bounds:\n"
    "  --max-basket K        leave out respondents with more than K items (duplicates merged)\n"
    "                        and out of N: store-level or test baskets (a note says how many)\n";

const char pm_cli_memory_help[] =
    "  --max-memory SIZE     refuse before counting when the pairs (or segment tables) would\n"
    "                        need more than SIZE (K, M, G, T: powers of 1024; default:\n"
    "                        physical memory, or the ulimit -v, ulimit -d or control-group\n"
    "                        bound when lower)\n";

const char pm_cli_edge_help[] =
    "Edges (map and pairs):\n"
    "  --top-edges K         keep the K pairs with the largest |weight| (after the others)\n"
    "  --measure M           edge weight: phi (default), lift or jaccard\n";

const char pm_cli_csv_help[] =
    "  --from-counts F.pmc   build from a count shard (pairmap count, pairmap merge) instead\n"
    "                        of INPUT: the same results as from the rows\n"
    "Output:\n"
    "  --unit WORD           what one respondent is, as a plural noun (orders, baskets,\n"
    "                        visitors), used in summaries, notes and pictures (default\n"
    "                        respondents; CSV columns keep their names)\n"
    "  --csv-raw             names in CSV output exactly as they are. Without it a name or\n"
    "                        category that begins with = + - @, tab or CR is written with a\n"
    "                        leading apostrophe, so that a spreadsheet shows it as text instead\n"
    "                        of running it as a formula; programs reading the CSV back should\n"
    "                        use --csv-raw\n";

unsigned pm_cli_csv_flags(const pm_cli_t *c) {
    return pm_cli_flag(c, "csv-raw") ? PM_CSV_RAW : 0u;
}

const char pm_cli_select_help[] =
    "Selection (applied in this order; each reports how many pairs it removed):\n"
    "  --min-count N         least raw joint count (default 5). Also small-cell suppression:\n"
    "                        no pair reported rests on fewer respondents. It also fixes the\n"
    "                        family of tests (below); pairs of such items seen together\n"
    "                        fewer times are still tested and enter Benjamini-Hochberg.\n"
    "  --sign S              positive (default: pairs chosen together more than chance,\n"
    "                        one-sided test), negative (less than chance: possible\n"
    "                        substitutes, one-sided) or both (two-sided)\n"
    "  --max-q F             largest Benjamini-Hochberg q-value (default 0.05)\n"
    "  --min-phi F           least |phi| (default 0)\n"
    "  --min-lift F          least lift (default 0)\n"
    "  --min-share F         items chosen by a smaller share are not eligible (default 0)\n"
    "Tests: Fisher's exact test where the smallest expected cell is below 5, else chi-square\n"
    "(1 df, no continuity correction); weighted input: chi-square on Kish's effective sample\n"
    "size. q-values: Benjamini-Hochberg over the family: every pair of eligible items\n"
    "(0 < n < N) that are each chosen by at least --min-count respondents (a pair with a\n"
    "rarer item can never be reported; leaving it out keeps the false-discovery control,\n"
    "since the tests condition on the item totals, and gives the other pairs their power),\n"
    "pairs never seen together included. With --sign negative or both their p-values are computed\n"
    "as well; with --sign negative --min-count 0 they are also listed (the cost grows as\n"
    "items^2).\n"
    "A negative association is a hint, not proof of substitution: items sold in different\n"
    "seasons or mutually exclusive answer options show it too.\n";

static const opt_def *find_long(const char *name, size_t len) {
    for (size_t i = 0; i < NOPTS; i++) {
        if (strlen(OPTS[i].name) == len && memcmp(OPTS[i].name, name, len) == 0) {
            return &OPTS[i];
        }
    }
    return NULL;
}

static const opt_def *find_short(char c) {
    for (size_t i = 0; i < NOPTS; i++) {
        if (OPTS[i].shortname == c) {
            return &OPTS[i];
        }
    }
    return NULL;
}

/* ---- human-facing text ---------------------------------------------------------------- */
/* Every message goes through the one escaper (pairmap/text.h): a name in it cannot hold a
 * control character, a line break or a bidirectional control when it reaches the terminal. */
static void put_message(const char *fmt, va_list ap) {
    char raw[4096], shown[4 * 4096 + 16];
    vsnprintf(raw, sizeof raw, fmt, ap);
    fputs("pairmap: ", stderr);
    fputs(pm_text_shown(raw, strlen(raw), shown, sizeof shown, 0), stderr);
}

const char *pm_cli_unit(const pm_cli_t *c) {
    const char *u = pm_cli_get(c, "unit");
    return u ? u : "respondents";
}

int pm_cli_check_unit(const pm_cli_t *c) {
    const char *u = pm_cli_get(c, "unit");
    if (!u) {
        return 0;
    }
    size_t n = strlen(u);
    int ok = n > 0 && n <= 32;
    for (size_t i = 0; ok && i < n; i++) {
        unsigned char ch = (unsigned char)u[i];
        /* letters (any UTF-8 letter byte), digits, space, hyphen: a word, not markup */
        ok = ch >= 0x80 || (ch >= 'a' && ch <= 'z') || (ch >= 'A' && ch <= 'Z') ||
             (ch >= '0' && ch <= '9') || ch == ' ' || ch == '-';
    }
    if (ok) {
        char b[160];
        ok = strcmp(pm_text_shown(u, n, b, sizeof b, 0), u) == 0; /* valid UTF-8, no controls */
    }
    if (!ok) {
        return pm_cli_usage_error(c,
                                  "--unit takes a plural noun of letters, digits, spaces or "
                                  "hyphens (at most 32 bytes), got '%s'",
                                  u);
    }
    return 0;
}

const char *pm_cli_shown(const char *s) {
    /* a ring of buffers, so that a printf may show a few names at once (main thread only) */
    static char ring[8][1024];
    static unsigned next;
    char *b = ring[next++ % 8];
    return pm_text_shown(s, strlen(s), b, sizeof ring[0], sizeof ring[0] - 1);
}

size_t pm_cli_text_width(const char *s) {
    size_t w = 0;
    for (const unsigned char *p = (const unsigned char *)s; *p; p++) {
        w += (*p & 0xC0) != 0x80; /* code points */
    }
    return w;
}

void pm_cli_pad(size_t n) {
    while (n-- > 0) {
        fputc(' ', stdout);
    }
}

const char *pm_cli_q(double q, char *buf, size_t size) {
    snprintf(buf, size, "%.2g", q);
    return buf;
}

int pm_cli_text_out(const pm_cli_t *c) {
    return !pm_cli_flag(c, "csv") && isatty(STDOUT_FILENO);
}

int pm_cli_usage_error(const pm_cli_t *c, const char *fmt, ...) {
    va_list ap;
    va_start(ap, fmt);
    put_message(fmt, ap);
    va_end(ap);
    /* one line: what is wrong, then where to look (issue 6) */
    if (c && c->command) {
        fprintf(stderr, "; see 'pairmap %s --help'\n", c->command);
    } else {
        fputs("; see 'pairmap --help'\n", stderr);
    }
    return 1;
}

static int store(pm_cli_t *c, const opt_def *d, const char *val) {
    for (size_t i = 0; i < c->nopts; i++) {
        if (c->opt[i].name == d->name) {
            if (!d->repeatable) {
                return pm_cli_usage_error(c, "option --%s given twice", d->name);
            }
            if (c->opt[i].n >= PM_CLI_MAX_VALUES) {
                return pm_cli_usage_error(c, "option --%s given more than %d times", d->name,
                                          PM_CLI_MAX_VALUES);
            }
            c->opt[i].vals[c->opt[i].n++] = val;
            return 0;
        }
    }
    c->opt[c->nopts].name = d->name;
    c->opt[c->nopts].vals[0] = val;
    c->opt[c->nopts].n = 1;
    c->nopts++;
    return 0;
}

int pm_cli_parse(pm_cli_t *c, const char *command, unsigned cmd, int argc, char **argv,
                 const char *usage) {
    memset(c, 0, sizeof *c);
    c->command = command;
    c->cmd = cmd;
    int only_pos = 0;
    for (int i = 0; i < argc; i++) {
        const char *a = argv[i];
        const opt_def *d = NULL;
        const char *val = NULL;
        if (!only_pos && strcmp(a, "--") == 0) {
            only_pos = 1;
            continue;
        }
        if (!only_pos && a[0] == '-' && a[1] == '-') {
            const char *eq = strchr(a + 2, '=');
            size_t len = eq ? (size_t)(eq - a - 2) : strlen(a + 2);
            d = find_long(a + 2, len);
            if (!d) {
                return pm_cli_usage_error(c, "unknown option '%.*s' for 'pairmap %s'",
                                          (int)(len + 2), a, command);
            }
            if (eq) {
                if (!d->arg) {
                    return pm_cli_usage_error(c, "option --%s takes no value", d->name);
                }
                val = eq + 1;
            }
        } else if (!only_pos && a[0] == '-' && a[1] != '\0') {
            d = a[2] == '\0' ? find_short(a[1]) : NULL;
            if (!d) {
                return pm_cli_usage_error(c, "unknown option '%s' for 'pairmap %s'", a, command);
            }
        } else {
            if (c->input && cmd == PM_CMD_EXPLAIN && c->nargs < 3) {
                /* explain INPUT A B: the words after INPUT (a third, with --from-counts,
                 * shows up in the check below) */
                c->args[c->nargs < 2 ? c->nargs : 1] = a;
                c->nargs++;
                continue;
            }
            if (c->input) {
                return pm_cli_usage_error(c, "more than one INPUT given ('%s' and '%s')", c->input,
                                          a);
            }
            c->input = a;
            continue;
        }
        if (!(d->cmds & cmd)) {
            return pm_cli_usage_error(c, "option --%s does not apply to 'pairmap %s'", d->name,
                                      command);
        }
        if (strcmp(d->name, "help") == 0) {
            fputs(usage, stdout);
            return -1;
        }
        if (d->arg && !val) {
            if (i + 1 >= argc) {
                return pm_cli_usage_error(c, "option --%s needs a value", d->name);
            }
            val = argv[++i];
        }
        if (!d->arg) {
            val = "";
        }
        int rc = store(c, d, val);
        if (rc) {
            return rc;
        }
    }
    const char *fc = pm_cli_get(c, "from-counts");
    if (fc && c->input && cmd == PM_CMD_EXPLAIN && c->nargs < 2) { /* the words are A B */
        c->args[1] = c->nargs ? c->args[0] : NULL;
        c->args[0] = c->input;
        c->nargs++;
        c->input = NULL;
    }
    if (fc && c->input) {
        return pm_cli_usage_error(c, "give INPUT or --from-counts FILE.pmc, not both");
    }
    if (fc) {
        c->input = fc; /* messages and run.json name the shard */
    }
    if (!c->input) {
        return pm_cli_usage_error(c, "no INPUT given (a file, or - for standard input)");
    }
    return pm_cli_check_unit(c);
}

const char *pm_cli_get(const pm_cli_t *c, const char *name) {
    for (size_t i = 0; i < c->nopts; i++) {
        if (strcmp(c->opt[i].name, name) == 0) {
            return c->opt[i].vals[c->opt[i].n - 1];
        }
    }
    return NULL;
}

const char *const *pm_cli_all(const pm_cli_t *c, const char *name, size_t *n) {
    for (size_t i = 0; i < c->nopts; i++) {
        if (strcmp(c->opt[i].name, name) == 0) {
            *n = c->opt[i].n;
            return c->opt[i].vals;
        }
    }
    *n = 0;
    return NULL;
}

bool pm_cli_flag(const pm_cli_t *c, const char *name) {
    return pm_cli_get(c, name) != NULL;
}

int pm_cli_uint(const pm_cli_t *c, const char *name, uint64_t dflt, uint64_t min, uint64_t max,
                uint64_t *out) {
    const char *v = pm_cli_get(c, name);
    if (!v) {
        *out = dflt;
        return 0;
    }
    char *end;
    errno = 0;
    unsigned long long x = 0;
    if (v[0] != '-' && v[0] != '\0') {
        x = strtoull(v, &end, 10);
    }
    if (v[0] == '-' || v[0] == '\0' || *end || errno || x < min || x > max) {
        if (max >= SIZE_MAX) { /* no real upper bound: do not print 2^64 - 1 */
            return pm_cli_usage_error(c, "--%s expects a whole number >= %llu, got '%s'", name,
                                      (unsigned long long)min, v);
        }
        return pm_cli_usage_error(c, "--%s expects a whole number from %llu to %llu, got '%s'",
                                  name, (unsigned long long)min, (unsigned long long)max, v);
    }
    *out = x;
    return 0;
}

int pm_cli_double(const pm_cli_t *c, const char *name, double dflt, double min, double max,
                  double *out) {
    const char *v = pm_cli_get(c, name);
    if (!v) {
        *out = dflt;
        return 0;
    }
    char *end;
    errno = 0;
    double x = strtod(v, &end);
    if (*v == '\0' || *end || errno || !isfinite(x) || x < min || x > max) {
        if (max >= 1e300) { /* no real upper bound */
            return pm_cli_usage_error(c, "--%s expects a number >= %g, got '%s'", name, min, v);
        }
        return pm_cli_usage_error(c, "--%s expects a number from %g to %g, got '%s'", name, min,
                                  max, v);
    }
    *out = x;
    return 0;
}

int pm_cli_choice(const pm_cli_t *c, const char *name, const char *const *choices, int dflt,
                  int *out) {
    const char *v = pm_cli_get(c, name);
    if (!v) {
        *out = dflt;
        return 0;
    }
    char list[256] = "";
    for (int i = 0; choices[i]; i++) {
        if (strcmp(v, choices[i]) == 0) {
            *out = i;
            return 0;
        }
        size_t l = strlen(list);
        snprintf(list + l, sizeof list - l, "%s%s", i ? ", " : "", choices[i]);
    }
    return pm_cli_usage_error(c, "--%s expects one of %s, got '%s'", name, list, v);
}

int pm_cli_input_opts(const pm_cli_t *c, pm_input_opts_t *o) {
    pm_input_opts_init(o);
    static const char *const formats[] = {"long", "lines", "wide", NULL};
    int f;
    if (pm_cli_choice(c, "format", formats, 0, &f)) {
        return 1;
    }
    o->format = (pm_format_t)f;
    if (pm_cli_threads(c, &o->threads)) {
        return 1;
    }
    o->id_col = pm_cli_get(c, "id-col");
    o->item_col = pm_cli_get(c, "item-col");
    o->category_col = pm_cli_get(c, "category-col");
    o->weight_col = pm_cli_get(c, "weight-col");
    const char *sep = pm_cli_get(c, "sep");
    if (sep) {
        if (strcmp(sep, "\\t") == 0 || strcmp(sep, "tab") == 0 || strcmp(sep, "\t") == 0) {
            o->sep = '\t';
        } else if (strlen(sep) == 1 && strchr(",;|", sep[0])) {
            o->sep = sep[0];
        } else {
            return pm_cli_usage_error(c, "--sep expects one of , ; | tab, got '%s'", sep);
        }
    }
    o->no_header = pm_cli_flag(c, "no-header");
    uint64_t n;
    if (pm_cli_uint(c, "respondents", 0, 1, UINT32_MAX, &n)) {
        return 1;
    }
    o->respondents = n;
    if (pm_cli_uint(c, "max-basket", 0, 1, UINT32_MAX, &n)) {
        return 1;
    }
    o->max_basket = n;
    o->drop_items = pm_cli_all(c, "drop-item", &o->n_drop_items);
    o->merge_file = pm_cli_get(c, "merge-file");
    o->columns = pm_cli_all(c, "columns", &o->n_columns);
    o->drop_values = pm_cli_all(c, "drop-value", &o->n_drop_values);
    o->skip_cols = pm_cli_all(c, "skip-col", &o->n_skip_cols);
    o->only_segments = pm_cli_all(c, "only-segment", &o->n_only_segments);
    o->segment_file = pm_cli_get(c, "segment-file");
    static const char *const bases[] = {"answered", "all", NULL};
    int b;
    if (pm_cli_choice(c, "base", bases, 0, &b)) {
        return 1;
    }
    o->base_all = b == 1;
    if (o->format != PM_FORMAT_WIDE) {
        static const char *const wide_only[] = {"columns", "drop-value", "skip-col", "base"};
        for (size_t i = 0; i < 4; i++) {
            if (pm_cli_get(c, wide_only[i])) {
                return pm_cli_usage_error(c, "--%s needs --format wide", wide_only[i]);
            }
        }
    } else {
        if (o->n_columns == 0) {
            return pm_cli_usage_error(c, "--format wide needs at least one --columns PREFIX");
        }
        if (o->item_col || o->category_col) {
            return pm_cli_usage_error(c, "--item-col and --category-col do not apply to "
                                         "--format wide (items come from --columns)");
        }
    }
    if (o->format == PM_FORMAT_LINES && o->item_col) {
        return pm_cli_usage_error(c, "--item-col does not apply to --format lines");
    }
    return 0;
}

int pm_cli_threads(const pm_cli_t *c, unsigned *threads) {
    uint64_t t;
    if (pm_cli_uint(c, "threads", 0, 1, 256, &t)) {
        return 1;
    }
    *threads = (unsigned)t;
    return 0;
}

int pm_cli_select_opts(const pm_cli_t *c, pm_select_opts_t *o) {
    pm_select_opts_init(o);
    uint64_t u;
    if (pm_cli_uint(c, "min-count", 5, 0, UINT32_MAX, &u)) {
        return 1;
    }
    o->min_count = (uint32_t)u;
    if (pm_cli_double(c, "min-share", 0, 0, 1, &o->min_share) ||
        pm_cli_double(c, "max-q", 0.05, 0, 1, &o->max_q) ||
        pm_cli_double(c, "min-phi", 0, 0, 1, &o->min_phi) ||
        pm_cli_double(c, "min-lift", 0, 0, 1e300, &o->min_lift)) {
        return 1;
    }
    if (pm_cli_uint(c, "top-edges", 0, 1, SIZE_MAX, &u)) {
        return 1;
    }
    o->top_edges = (size_t)u;
    static const char *const signs[] = {"positive", "negative", "both", NULL};
    static const char *const measures[] = {"phi", "lift", "jaccard", NULL};
    int s, m;
    if (pm_cli_choice(c, "sign", signs, 0, &s) || pm_cli_choice(c, "measure", measures, 0, &m)) {
        return 1;
    }
    o->sign = (pm_sign_t)s;
    o->measure = (pm_measure_t)m;
    int within;
    return pm_cli_pair_test(c, &within); /* its usage errors before any work */
}

int pm_cli_fail(const pm_diag_t *d) {
    char buf[2048];
    char shown[4 * sizeof buf + 16];
    pm_diag_format(d, buf, sizeof buf);
    fprintf(stderr, "pairmap: %s\n", pm_text_shown(buf, strlen(buf), shown, sizeof shown, 0));
    return pm_err_exit_status(d->code ? d->code : PM_EINTERNAL);
}

void pm_cli_note(const pm_cli_t *c, const char *fmt, ...) {
    if (pm_cli_flag(c, "quiet")) {
        return;
    }
    va_list ap;
    va_start(ap, fmt);
    put_message(fmt, ap);
    fputc('\n', stderr);
    va_end(ap);
}

/* ---- progress ------------------------------------------------------------------------------ */
typedef struct {
    double start, last;
    int shown;
} progress_state;
static progress_state g_progress; /* CLI only: one progress line per process */

bool pm_cli_show_progress(const pm_cli_t *c) {
    return !pm_cli_flag(c, "quiet") && isatty(STDERR_FILENO);
}

double pm_cli_now(void) {
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + (double)ts.tv_nsec * 1e-9;
}

void pm_cli_progress(void *ud, const char *stage, uint64_t done, uint64_t total) {
    (void)ud;
    double t = pm_cli_now();
    if (g_progress.start == 0) {
        g_progress.start = t;
    }
    if (t - g_progress.last < 0.2 && done < total) {
        return;
    }
    if (t - g_progress.start < 1.0 && !g_progress.shown) {
        return; /* short work: no bar */
    }
    g_progress.last = t;
    double frac = total ? (double)done / (double)total : 1;
    int w = 30, filled = (int)(frac * w);
    char bar[32];
    for (int i = 0; i < w; i++) {
        bar[i] = i < filled ? '#' : '.';
    }
    bar[w] = '\0';
    double rate = (double)done / (t - g_progress.start + 1e-9) / 1e6;
    fprintf(stderr, "\r%-16s [%s] %3.0f%%  %.1f %s ", stage, bar, frac * 100, rate,
            strcmp(stage, "reading") == 0 ? "MB/s" : "M pairs/s");
    g_progress.shown = 1;
}

void pm_cli_progress_end(const pm_cli_t *c) {
    (void)c;
    if (g_progress.shown) {
        fputs("\r\033[K", stderr);
    }
    memset(&g_progress, 0, sizeof g_progress);
}

/* ---- loading ----------------------------------------------------------------------------- */
/* How many rows --merge-file renamed into how many groups, and how many of them a respondent
 * already held under another name of the group: not duplicates of the input (the warning
 * about those counts only rows the input repeated), each group counts once per respondent. */
static void merge_note(const pm_cli_t *c, const pm_input_stats_t *s, const pm_incidence_t *ic) {
    char tail[200] = "";
    if (ic->merge_collapsed) {
        snprintf(tail, sizeof tail,
                 "; %llu of them joined a group one of the %s already held "
                 "(a group counts once in each)",
                 (unsigned long long)ic->merge_collapsed, pm_cli_unit(c));
    }
    pm_cli_note(c, "note: %llu rows renamed by --merge-file into %llu group%s (%llu entr%s)%s",
                (unsigned long long)s->merged_rows, (unsigned long long)ic->merge_groups,
                ic->merge_groups == 1 ? "" : "s", (unsigned long long)s->merge_entries,
                s->merge_entries == 1 ? "y" : "ies", tail);
}

/* The notes and warnings after reading (pm_cli_load): what was taken as a header, merged,
 * dropped or left out. Returns 0, 1 when --max-basket left no respondent, or 4 when leaving
 * its respondents out of the segment columns ran out of memory (the table and the incidence
 * are freed then). */
static int load_notes(const pm_cli_t *c, const pm_input_opts_t *iop, pm_table_t **table,
                      pm_incidence_t **inc) {
    const pm_input_opts_t io = *iop;
    const pm_input_stats_t *s = pm_table_stats(*table);
    const pm_incidence_t *ic = *inc;
    /* a header taken from a file that may have none (issue 16): always for baskets, for long
     * files when a header cell is seen again as data */
    if (s->header_line && (io.format == PM_FORMAT_LINES || s->header_like_data)) {
        pm_cli_note(c, "note: line %llu was read as a header ('%s'); --no-header keeps it as data",
                    (unsigned long long)s->header_line, s->header_text);
    }
    if (s->id_like_lines) {
        pm_cli_note(c,
                    "warning: the first field differs on each of the first %llu lines and "
                    "looks like an id ('%s'); without --id-col 1 the ids become items",
                    (unsigned long long)s->id_like_lines, s->id_like_example);
    }
    if (ic->duplicates) {
        pm_cli_note(c, "warning: %llu duplicate respondent-item rows merged (each counts once)",
                    (unsigned long long)ic->duplicates);
    }
    if (s->empty_items && io.format == PM_FORMAT_WIDE) {
        pm_cli_note(c,
                    "note: %llu %s chose nothing in the selected questions and are "
                    "kept in N (--base all)",
                    (unsigned long long)s->empty_items, pm_cli_unit(c));
    } else if (s->empty_items) {
        pm_cli_note(c, "note: %llu rows named no item (their %s count in N)",
                    (unsigned long long)s->empty_items, pm_cli_unit(c));
    }
    const char *const *late;
    size_t n_late = pm_table_notes(*table, &late);
    for (size_t i = 0; i < n_late; i++) {
        pm_cli_note(c, "%s", late[i]);
    }
    if (s->dropped_rows) {
        pm_cli_note(c, "note: %llu rows dropped by --drop-item",
                    (unsigned long long)s->dropped_rows);
    }
    if (s->merged_rows) {
        merge_note(c, s, ic);
    }
    if (s->blank_excluded) {
        pm_cli_note(c,
                    "note: %llu %s chose nothing in the selected questions and are "
                    "left out of N (--base answered)",
                    (unsigned long long)s->blank_excluded, pm_cli_unit(c));
    }
    if (ic->n_left_out && ic->N == 0) {
        fprintf(stderr, "pairmap: %s: --max-basket %s leaves out every one of the %s\n",
                c->input[0] == '-' && !c->input[1] ? "stdin" : pm_cli_shown(c->input),
                pm_cli_get(c, "max-basket"), pm_cli_unit(c));
        pm_incidence_free(*inc);
        pm_table_free(*table);
        *inc = NULL;
        *table = NULL;
        return 1;
    }
    if (ic->n_left_out) {
        pm_cli_note(c,
                    "note: %llu %s with more than %s items left out (--max-basket; the largest "
                    "held %llu items); N is %llu without them",
                    (unsigned long long)ic->n_left_out, pm_cli_unit(c), pm_cli_get(c, "max-basket"),
                    (unsigned long long)ic->largest_left_out, (unsigned long long)ic->N);
    }
    if (ic->n_left_out && pm_cli_segments_leave_out(c, ic)) { /* out of the segments too */
        pm_incidence_free(*inc);
        pm_table_free(*table);
        *inc = NULL;
        *table = NULL;
        return 4;
    }
    if (ic->single_item) {
        pm_cli_note(c,
                    "note: %llu %s chose one item only (they count in N but form no "
                    "pair)",
                    (unsigned long long)ic->single_item, pm_cli_unit(c));
    }
    return 0;
}

int pm_cli_load(const pm_cli_t *c, pm_table_t **table, pm_incidence_t **inc, double *t_read) {
    *table = NULL;
    *inc = NULL;
    if (pm_cli_get(c, "from-counts")) {
        size_t a, b;
        pm_cli_all(c, "segment-col", &a);
        pm_cli_all(c, "only-segment", &b);
        if (a + b) { /* a shard holds pair counts, not who is in which segment */
            return pm_cli_usage_error(c, "--segment-col and --only-segment need the rows; "
                                         "they do not apply to --from-counts");
        }
        if (pm_cli_get(c, "max-basket")) {
            return pm_cli_usage_error(c, "--max-basket applies to rows, not to a shard: give it "
                                         "to 'pairmap count'");
        }
        return pm_cli_load_counts(c, table, inc, t_read);
    }
    pm_input_opts_t io;
    if (pm_cli_input_opts(c, &io)) {
        return 1;
    }
    if (strcmp(c->input, "-") != 0) {
        struct stat st;
        if (stat(c->input, &st) == 0 && S_ISDIR(st.st_mode)) {
            fprintf(stderr, "pairmap: %s: is a directory; give a CSV file\n",
                    pm_cli_shown(c->input));
            return 3;
        }
    }
    pm_diag_t d;
    pm_diag_clear(&d);
    double t0 = pm_cli_now();
    if (pm_cli_show_progress(c)) {
        io.progress = pm_cli_progress;
    }
    /* the SHA-256 (only run.json shows it) may finish in the background: map waits for it
     * before it replaces any output (pm_table_wait_hash); the others never need it */
    io.defer_hash = true;
    pm_err_t rc = pm_input_read(c->input, &io, table, &d);
    pm_cli_progress_end(c);
    if (rc) {
        return pm_cli_fail(&d);
    }
    if (c->cmd == PM_CMD_COUNT) { /* the shard holds the hash: beside the incidence, counting */
        pm_table_hash_ahead(*table);
    }
    /* segments: read once here, --only-segment applied to the table before the incidence */
    int src = pm_cli_segments_load(c, *table);
    if (src) {
        pm_table_free(*table);
        *table = NULL;
        return src;
    }
    rc = pm_incidence_build_threads(*table, io.threads, inc, &d);
    if (rc) {
        pm_table_free(*table);
        *table = NULL;
        return pm_cli_fail(&d);
    }
    if (t_read) {
        *t_read = pm_cli_now() - t0;
    }
    return load_notes(c, &io, table, inc);
}

int pm_cli_score(const pm_cli_t *c, pm_table_t *t, const pm_incidence_t *inc,
                 const pm_select_opts_t *sel, pm_pairs_t **pairs) {
    /* every command shows only pairs with q <= --max-q: larger q-values need not be exact */
    return pm_cli_score_q(c, t, inc, sel, sel->max_q, pairs);
}

/* The notes on items left out, and the error when fewer than 2 are eligible (returns 1). */
static int report_eligible(const pm_cli_t *c, size_t none, size_t all, size_t share,
                           size_t eligible) {
    if (all) {
        pm_cli_note(c,
                    "note: %zu items chosen by all %s have no defined phi and are "
                    "left out",
                    all, pm_cli_unit(c));
    }
    if (none) {
        pm_cli_note(c, "note: %zu items chosen by nobody are left out", none);
    }
    if (share) {
        pm_cli_note(c, "note: %zu items below --min-share are left out", share);
    }
    if (eligible < 2) {
        fprintf(stderr,
                "pairmap: %s: only %zu eligible item%s (chosen by some but not all "
                "%s); pairs need at least 2\n",
                c->input[0] == '-' && !c->input[1] ? "stdin" : pm_cli_shown(c->input), eligible,
                eligible == 1 ? "" : "s", pm_cli_unit(c));
        return 1;
    }
    return 0;
}

int pm_cli_score_q(const pm_cli_t *c, pm_table_t *t, const pm_incidence_t *inc,
                   const pm_select_opts_t *sel, double q_limit, pm_pairs_t **pairs) {
    pm_assoc_opts_t ao;
    pm_assoc_opts_init(&ao);
    ao.sign = sel->sign;
    ao.min_count = sel->min_count;
    ao.min_share = sel->min_share;
    /* every command shows only pairs with q <= --max-q: larger q-values need not be exact;
     * under --pair-test within the CMH q selects, and the pooled p of every pair it keeps is
     * shown: exact everywhere */
    int within;
    if (pm_cli_pair_test(c, &within)) {
        return 1;
    }
    ao.q_limit = within ? 1.0 : q_limit;
    if (pm_cli_threads(c, &ao.threads)) {
        return 1;
    }
    if (pm_cli_show_progress(c)) {
        ao.progress = pm_cli_progress;
    }
    ao.given = pm_cli_given_counts(); /* --from-counts: the shard's pairs */
    pm_diag_t d;
    pm_diag_clear(&d);
    pm_counts_cost_t cost;
    if (!ao.given) { /* the bound before the counting allocates anything */
        if (pm_assoc_cost(inc, &ao, &cost, &d)) {
            return pm_cli_fail(&d);
        }
        int mrc = pm_cli_check_memory(c, &cost);
        if (mrc) {
            return mrc;
        }
    }
    /* the table's rows (no longer needed: the incidence is built) as the counting's scratch,
     * memory in use already instead of some 80 MB of fresh pages on the benchmark file */
    ao.scratch_n = pm_table_take_rows(t, &ao.scratch[0], &ao.scratch[1]);
    /* the stages in a row: the scoring's set-up, the counting, the tests */
    pm_assoc_stage_t *st = NULL;
    pm_counts_opts_t co;
    pm_counts_t *cnt = NULL;
    *pairs = NULL;
    pm_err_t rc = pm_assoc_begin(inc, &ao, &st, &co, &d);
    if (rc == PM_OK) {
        rc = pm_counts_build(inc, &co, &cnt, &d);
    }
    if (rc == PM_OK) {
        rc = pm_assoc_finish(st, cnt, pairs, &d);
    } else {
        pm_assoc_stage_free(st);
    }
    free(ao.scratch[0]);
    free(ao.scratch[1]);
    pm_cli_progress_end(c);
    if (rc) {
        return pm_cli_fail(&d);
    }
    const pm_pairs_t *pp = *pairs;
    if (report_eligible(c, pp->excluded_none, pp->excluded_all, pp->excluded_share,
                        pp->n_eligible)) {
        pm_pairs_free(*pairs);
        *pairs = NULL;
        return 2;
    }
    if (!within && q_limit == sel->max_q) { /* the pooled q selects: say what --min-count hid */
        pm_cli_note_min_count(c, (*pairs)->below_count_q, sel->min_count);
    }
    int wrc = pm_cli_within(c, inc, sel, *pairs); /* --pair-test within: CMH q-values */
    if (wrc) {
        pm_pairs_free(*pairs);
        *pairs = NULL;
    }
    return wrc;
}

void pm_cli_note_min_count(const pm_cli_t *c, uint64_t n, unsigned min_count) {
    if (n && min_count > 1) {
        pm_cli_note(c,
                    "note: %llu pair%s pass%s --sign and --max-q but %s seen together fewer "
                    "than --min-count (%u) times, so %s left out (small cells, README); "
                    "--min-count 1 lists %s",
                    (unsigned long long)n, n == 1 ? "" : "s", n == 1 ? "es" : "",
                    n == 1 ? "was" : "were", min_count, n == 1 ? "it is" : "they are",
                    n == 1 ? "it" : "them");
    }
}

int pm_cli_check_eligible(const pm_cli_t *c, const pm_incidence_t *inc, double min_share) {
    size_t none = 0, all = 0, share = 0, ok = 0;
    for (size_t i = 0; i < inc->n_items; i++) {
        if (inc->count[i] == 0) {
            none++;
        } else if (inc->count[i] >= inc->N) {
            all++;
        } else if (pm_incidence_share(inc, i) < min_share) {
            share++;
        } else {
            ok++;
        }
    }
    return report_eligible(c, none, all, share, ok) ? 2 : 0;
}

int pm_cli_close_stdout(void) {
    if (fflush(stdout) != 0 || ferror(stdout)) {
        fprintf(stderr, "pairmap: cannot write to standard output: %s\n", strerror(errno));
        return 3;
    }
    if (fclose(stdout) != 0) {
        fprintf(stderr, "pairmap: cannot write to standard output: %s\n", strerror(errno));
        return 3;
    }
    return 0;
}
