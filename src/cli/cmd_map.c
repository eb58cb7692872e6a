/* pairmap map (in progress). */
#include <stdio.h>

#include "cli.h"

int pm_cmd_map(int argc, char **argv) {
    (void)argc;
    (void)argv;
    fputs("pairmap: 'map' is not available yet\n", stderr);
    return 1;
}
