/* Shared by src/shard.c and src/shard_build.c. */
#ifndef PM_SHARD_INTERNAL_H
#define PM_SHARD_INTERNAL_H
#include "pairmap/shard.h"
/* Allocates s's item arrays for ni items and pair arrays for np pairs (weighted arrays when
 * s->weighted); 0 or 1 when out of memory (pm_shard_free frees what was allocated). */
int pm_i_shard_alloc(pm_shard_t *s, size_t ni, size_t np);
#endif
