/* The network stage: igraph graph of the kept pairs, Louvain clusters, Fruchterman-Reingold
 * layout (src/network.c, the only file that includes igraph). */
#ifndef PAIRMAP_NETWORK_H
#define PAIRMAP_NETWORK_H

#include "pairmap/error.h"

#ifdef __cplusplus
extern "C" {
#endif

/* Process set-up, once, before any other pairmap call: installs igraph's attribute table and
 * a non-aborting igraph error handler, and turns GSL's aborting handler off. */
void pm_init(void);

#ifdef __cplusplus
}
#endif
#endif
