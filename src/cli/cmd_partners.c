/* pairmap partners (in progress). */
#include <stdio.h>

#include "cli.h"

int pm_cmd_partners(int argc, char **argv) {
    (void)argc;
    (void)argv;
    fputs("pairmap: 'partners' is not available yet\n", stderr);
    return 1;
}
