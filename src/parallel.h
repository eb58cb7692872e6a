/* A minimal pthreads parallel-for over chunks: workers take chunk indices from an atomic
 * counter. The caller keeps results per chunk, so the output never depends on scheduling. */
#ifndef PM_PARALLEL_H
#define PM_PARALLEL_H
#include <stddef.h>
/* fn(ud, chunk, thread) for every chunk in 0..nchunks-1, on up to `threads` threads (the
 * calling thread is thread 0; thread indices stay below `threads`). fn returns 0, or non-zero
 * to stop the remaining chunks. A thread that cannot start is no error: the work goes on with
 * the threads there are, down to the calling thread alone, which is also what happens when
 * the threads' bookkeeping cannot be allocated (checked allocators, pm_i_alloc_fail_after).
 * So every chunk runs unless fn stops it; returns the first non-zero value fn returned (in
 * thread order), else 0. */
int pm_i_parallel(unsigned threads, size_t nchunks, int (*fn)(void *, size_t, unsigned), void *ud);
/* Test hook: at most n - 1 threads besides the caller start (pthread_create "fails" for the
 * others); 0: no limit. */
void pm_i_parallel_limit_threads(unsigned n);
/* Threads the last pm_i_parallel call of this thread ran on (the caller included). */
unsigned pm_i_parallel_last_threads(void);
#endif
