/* pthreads parallel-for (see parallel.h). */
#include "parallel.h"

#include <pthread.h>
#include <stdatomic.h>
#include <stdlib.h>

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
    job j;
    j.fn = fn;
    j.ud = ud;
    j.nchunks = nchunks;
    atomic_init(&j.next, 0);
    atomic_init(&j.stop, 0);
    worker *ws = calloc(threads, sizeof *ws);
    pthread_t *ts = calloc(threads, sizeof *ts);
    if (!ws || !ts) {
        free(ws);
        free(ts);
        return -1;
    }
    unsigned started = 1;
    int rc = 0;
    for (unsigned t = 0; t < threads; t++) {
        ws[t].j = &j;
        ws[t].thread = t;
    }
    for (unsigned t = 1; t < threads; t++) {
        if (pthread_create(&ts[t], NULL, run, &ws[t]) != 0) {
            break; /* go on with the threads there are */
        }
        started++;
    }
    run(&ws[0]);
    for (unsigned t = 1; t < started; t++) {
        pthread_join(ts[t], NULL);
    }
    for (unsigned t = 0; t < started && !rc; t++) {
        if (ws[t].rc) {
            rc = ws[t].rc;
        }
    }
    free(ws);
    free(ts);
    return rc;
}
