/* The network stage (igraph): graph, Louvain clusters, Fruchterman-Reingold layout. */
#include "pairmap/network.h"

#include <gsl/gsl_errno.h>
#include <igraph.h>

static void on_igraph_error(const char *reason, const char *file, int line,
                            igraph_error_t err) {
    (void)reason;
    (void)file;
    (void)line;
    (void)err;
    IGRAPH_FINALLY_FREE();
}

static void on_igraph_warning(const char *reason, const char *file, int line) {
    (void)reason;
    (void)file;
    (void)line;
}

void pm_init(void) {
    igraph_set_attribute_table(&igraph_cattribute_table);
    igraph_set_error_handler(on_igraph_error);
    igraph_set_warning_handler(on_igraph_warning);
    gsl_set_error_handler_off();
}
