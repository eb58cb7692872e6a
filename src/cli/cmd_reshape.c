/* pairmap reshape (in progress). */
#include <stdio.h>

#include "cli.h"

int pm_cmd_reshape(int argc, char **argv) {
    (void)argc;
    (void)argv;
    fputs("pairmap: 'reshape' is not available yet\n", stderr);
    return 1;
}
