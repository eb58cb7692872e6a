/* pthreads parallel-for (see parallel.h). */
#include "parallel.h"

#include <pthread.h>
#include <stdatomic.h>
#include <stdlib.h>

#include "util.h"

typedef struct {
    int (*fn)(void *, size_t, unsigned);
    void *ud;
    size_t nchunks;
    atomic_size_t next;
    atomic_int stop;
} job;

typedef struct {
    job *j;
    unsigned thread;
    int rc;
} worker;

static atomic_uint g_limit;                /* test hook (parallel.h); 0: no limit */
static _Thread_local unsigned tl_last = 1; /* threads of this thread's last call */

void pm_i_parallel_limit_threads(unsigned n) {
    atomic_store(&g_limit, n);
}

unsigned pm_i_parallel_last_threads(void) {
    return tl_last;
}

static void *run(void *arg) {
    worker *w = arg;
    job *j = w->j;
    for (;;) {
        if (atomic_load(&j->stop)) {
            break;
        }
        size_t c = atomic_fetch_add(&j->next, 1);
        if (c >= j->nchunks) {
            break;
        }
        int rc = j->fn(j->ud, c, w->thread);
        if (rc) {
            w->rc = rc;
            atomic_store(&j->stop, 1);
            break;
        }
    }
    return NULL;
}

int pm_i_parallel(unsigned threads, size_t nchunks, int (*fn)(void *, size_t, unsigned), void *ud) {
    if (threads < 1) {
        threads = 1;
    }
    if ((size_t)threads > nchunks) {
        threads = nchunks > 0 ? (unsigned)nchunks : 1; /* no thread without a chunk */
    }
    job j;
    j.fn = fn;
    j.ud = ud;
    j.nchunks = nchunks;
    atomic_init(&j.next, 0);
    atomic_init(&j.stop, 0);
    worker one = {&j, 0, 0};
    worker *ws = threads > 1 ? pm_i_calloc(threads, sizeof *ws) : NULL;
    pthread_t *ts = threads > 1 ? pm_i_calloc(threads, sizeof *ts) : NULL;
    if (!ws || !ts) { /* one thread, or no room for the bookkeeping: all here */
        free(ws);
        free(ts);
        tl_last = 1;
        run(&one);
        return one.rc;
    }
    unsigned limit = atomic_load(&g_limit), started = 1;
    for (unsigned t = 0; t < threads; t++) {
        ws[t].j = &j;
        ws[t].thread = t;
    }
    for (unsigned t = 1; t < threads; t++) {
        if ((limit && t >= limit) || pthread_create(&ts[t], NULL, run, &ws[t]) != 0) {
            break; /* go on with the threads there are */
        }
        started++;
    }
    tl_last = started;
    run(&ws[0]);
    for (unsigned t = 1; t < started; t++) {
        pthread_join(ts[t], NULL);
    }
    int rc = 0;
    for (unsigned t = 0; t < started && !rc; t++) {
        rc = ws[t].rc;
    }
    free(ws);
    free(ts);
    return rc;
}
