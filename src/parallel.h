/* A minimal pthreads parallel-for over chunks: workers take chunk indices from an atomic
 * counter. The caller keeps results per chunk, so the output never depends on scheduling. */
#ifndef PM_PARALLEL_H
#define PM_PARALLEL_H
#include <stddef.h>
/* fn(ud, chunk, thread) for every chunk in 0..nchunks-1, on `threads` threads (the calling
 * thread is thread 0). fn returns 0, or non-zero to stop the remaining chunks. Returns the
 * first non-zero value, or -1 when a thread cannot be started. */
int pm_i_parallel(unsigned threads, size_t nchunks, int (*fn)(void *, size_t, unsigned), void *ud);
#endif
