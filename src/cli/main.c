/* pairmap: entry point; dispatches to the commands in src/cli/cmd_*.c. */
#include <stdio.h>
#include <string.h>

#include "cli.h"
#include "pairmap/error.h"
#include "pairmap/network.h"

static const char usage[] =
    "pairmap: which items go together, which replace each other, and whether it is real.\n"
    "\n"
    "Usage:\n"
    "  pairmap map      INPUT -o DIR [options]   the whole job: clusters, layout, and\n"
    "                                            DIR/map.graphml, map.svg, edges.csv,\n"
    "                                            nodes.csv, run.json\n"
    "  pairmap partners INPUT --item NAME [...]  ranked partners of one item or of a set\n"
    "  pairmap pairs    INPUT [options]          the pairs that pass the selection (CSV)\n"
    "  pairmap items    INPUT [options]          item shares with 95% Jeffreys intervals\n"
    "  pairmap unfold   INPUT --format wide ...  a wide survey export as long pairs\n"
    "  pairmap count    INPUT -o F.pmc [--part K/M]  an additive count shard\n"
    "  pairmap merge    A.pmc B.pmc ... -o F.pmc  the sum of count shards\n"
    "  pairmap segments INPUT --segment-col COL  item shares by segment: intervals,\n"
    "                                            shrinkage, tests, trends\n"
    "  pairmap explain  INPUT A B [options]      one pair: its table, test, rank, q, and\n"
    "                                            the threshold that kept or removed it\n"
    "  pairmap --version | --help | COMMAND --help\n"
    "\n"
    "INPUT is a CSV file or - for standard input. Data goes to standard output, notes to\n"
    "standard error.\n"
    "Exit status: 0 success, 1 usage error, 2 bad input data, 3 I/O error, 4 out of memory\n"
    "or internal error, 130 interrupted.\n";

int main(int argc, char **argv) {
    pm_init();
    if (argc < 2) {
        fputs(usage, stderr);
        return 1;
    }
    const char *cmd = argv[1];
    if (strcmp(cmd, "--help") == 0 || strcmp(cmd, "-h") == 0 || strcmp(cmd, "help") == 0) {
        fputs(usage, stdout);
        return pm_cli_close_stdout();
    }
    if (strcmp(cmd, "--version") == 0) {
        printf("pairmap %s\n", pm_version());
        return pm_cli_close_stdout();
    }
    static const struct {
        const char *name;
        int (*fn)(int, char **);
    } cmds[] = {
        {"map", pm_cmd_map},     {"partners", pm_cmd_partners}, {"pairs", pm_cmd_pairs},
        {"items", pm_cmd_items}, {"unfold", pm_cmd_unfold},     {"count", pm_cmd_count},
        {"merge", pm_cmd_merge}, {"segments", pm_cmd_segments}, {"explain", pm_cmd_explain},
    };
    for (size_t i = 0; i < sizeof cmds / sizeof cmds[0]; i++) {
        if (strcmp(cmd, cmds[i].name) == 0) {
            return cmds[i].fn(argc - 2, argv + 2);
        }
    }
    if (strcmp(cmd, "reshape") == 0) { /* the old name of unfold, kept for one release */
        fputs("pairmap: note: 'reshape' is now called 'unfold'; the old name goes in the next "
              "release\n",
              stderr);
        return pm_cmd_unfold(argc - 2, argv + 2);
    }
    fprintf(stderr,
            "pairmap: unknown command '%s'; the commands are map, partners, pairs, "
            "items, unfold, count, merge, segments, explain (see pairmap --help)\n",
            pm_cli_shown(cmd));
    return 1;
}
