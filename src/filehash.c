/* The SHA-256 of a file read in parallel, on a thread of its own (src/read_par.c starts it;
 * the table keeps it when pm_input_opts_t.defer_hash is set, until pm_table_wait_hash). */
#include "input_internal.h"

#include <errno.h>
#include <pthread.h>
#include <sched.h>
#include <stdatomic.h>
#include <stdlib.h>
#include <string.h>
#include <sys/mman.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>

struct pm_i_hash_job {
    int fd;
    uint64_t expect; /* bytes the parser read (set before the job is handed to the table) */
    atomic_int stop; /* set when the hash is not needed any more, or taken over */
    atomic_int done; /* set by the thread once sha, bytes and failed are final */
    atomic_int refs; /* the thread's and the owner's: the last one frees the job */
    pm_i_sha256 sha; /* the thread's */
    uint64_t bytes;  /* hashed by the thread */
    int failed;
    int idle; /* the thread runs in the idle class (defer_hash); else it is waited for */
};

static void hash_job_unref(pm_i_hash_job *h) {
    if (atomic_fetch_sub(&h->refs, 1) == 1) {
        close(h->fd);
        free(h);
    }
}

/* Hashes the file fd from its start to its end into sha; *bytes gets the count. Stops, and
 * returns -1, when stop is set (may be NULL); -1 too on a read error; else 0. The bytes go
 * through windows of a read-only mapping (no copy; at most one window resident at a time),
 * the rest (a file that grew, or no mapping) by pread. */
#define HASH_WINDOW ((size_t)4 << 20)
static int hash_file(int fd, atomic_int *stop, pm_i_sha256 *sha, uint64_t *bytes) {
    pm_i_sha256_init(sha);
    *bytes = 0;
    struct stat st;
    if (fstat(fd, &st) == 0 && S_ISREG(st.st_mode)) {
        uint64_t size = (uint64_t)st.st_size;
        while (*bytes < size) {
            if (stop && atomic_load_explicit(stop, memory_order_relaxed)) {
                return -1;
            }
            size_t len = size - *bytes < HASH_WINDOW ? (size_t)(size - *bytes) : HASH_WINDOW;
            void *m = mmap(NULL, len, PROT_READ, MAP_PRIVATE, fd, (off_t)*bytes);
            if (m == MAP_FAILED) {
                break;
            }
            (void)posix_madvise(m, len, POSIX_MADV_SEQUENTIAL);
            pm_i_sha256_update(sha, m, len);
            munmap(m, len);
            *bytes += len;
        }
    }
    size_t cap = 1u << 20;
    char *buf = malloc(cap);
    if (!buf) {
        return -1;
    }
    int rc = 0;
    for (;;) {
        if (stop && atomic_load_explicit(stop, memory_order_relaxed)) {
            rc = -1;
            break;
        }
        ssize_t k = pread(fd, buf, cap, (off_t)*bytes);
        if (k < 0 && errno == EINTR) {
            continue;
        }
        if (k < 0) {
            rc = -1;
            break;
        }
        if (k == 0) {
            break;
        }
        pm_i_sha256_update(sha, buf, (size_t)k);
        *bytes += (uint64_t)k;
    }
    free(buf);
    return rc;
}

/* Ends the job: 1 when the file hashed to exactly the expected bytes (digest into out; *hashed
 * gets the bytes hashed). A thread at the normal priority is waited for; one in the idle class
 * that is still at work (it may get no processor for long on a busy machine) is told to stop,
 * and the file is hashed here instead. */
int pm_i_hash_job_end(pm_i_hash_job *h, unsigned char out[32], uint64_t *hashed) {
    int ok;
    while (!h->idle && !atomic_load_explicit(&h->done, memory_order_acquire)) {
        struct timespec t = {0, 100000}; /* a thread at the normal priority: it finishes */
        nanosleep(&t, NULL);
    }
    if (atomic_load_explicit(&h->done, memory_order_acquire)) {
        *hashed = h->bytes;
        ok = !h->failed && h->bytes == h->expect;
        if (ok) {
            pm_i_sha256_final(&h->sha, out);
        }
    } else {
        atomic_store(&h->stop, 1);
        pm_i_sha256 own;
        uint64_t bytes = 0;
        ok = hash_file(h->fd, NULL, &own, &bytes) == 0 && bytes == h->expect;
        *hashed = bytes;
        if (ok) {
            pm_i_sha256_final(&own, out);
        }
    }
    hash_job_unref(h);
    return ok;
}

void pm_i_hash_job_cancel(pm_i_hash_job *h) {
    atomic_store(&h->stop, 1);
    hash_job_unref(h);
}

/* Linux's idle scheduling class (sched.h defines it only under _GNU_SOURCE) */
#ifndef SCHED_IDLE
#define SCHED_IDLE 5
#endif

static void *hash_main(void *arg) {
    pm_i_hash_job *h = arg;
    /* With defer_hash the hash runs in the idle class: it takes the cores the later stages
     * leave free rather than a third of two cores from the parser, and its owner never waits
     * for it (pm_i_hash_job_end). Where the class is refused the thread simply runs at the normal
     * priority. Without defer_hash it runs beside the parser and is waited for. */
    if (h->idle) {
        struct sched_param sp;
        memset(&sp, 0, sizeof sp);
        (void)pthread_setschedparam(pthread_self(), SCHED_IDLE, &sp);
    }
    while (pm_i_hash_stall && !atomic_load(&h->stop)) {
        struct timespec ms = {0, 1000000};
        nanosleep(&ms, NULL);
    }
    h->failed = hash_file(h->fd, &h->stop, &h->sha, &h->bytes) != 0;
    atomic_store_explicit(&h->done, 1, memory_order_release);
    hash_job_unref(h);
    return NULL;
}

pm_i_hash_job *pm_i_hash_job_start(int fd, bool idle) {
    pm_i_hash_job *hj = pm_i_calloc(1, sizeof *hj);
    if (!hj) {
        return NULL;
    }
    hj->fd = dup(fd);
    atomic_init(&hj->stop, 0);
    atomic_init(&hj->done, 0);
    atomic_init(&hj->refs, 2);
    hj->idle = idle;
    pthread_t hth;
    if (hj->fd < 0 || pthread_create(&hth, NULL, hash_main, hj) != 0) {
        if (hj->fd >= 0) {
            close(hj->fd);
        }
        free(hj);
        return NULL;
    }
    pthread_detach(hth); /* never joined: see pm_i_hash_job_end */
    return hj;
}

void pm_i_hash_job_expect(pm_i_hash_job *h, uint64_t bytes) {
    h->expect = bytes;
}

pm_err_t pm_table_wait_hash(pm_table_t *t, pm_diag_t *diag) {
    if (!t->hash_job) {
        return PM_OK;
    }
    pm_i_hash_job *h = t->hash_job;
    t->hash_job = NULL;
    uint64_t hashed = 0, expect = h->expect;
    if (!pm_i_hash_job_end(h, t->stats.sha256, &hashed)) {
        return pm_diag_set(diag, PM_EIO, t->source, 0,
                           "the file changed while it was read (%llu bytes read, %llu hashed); "
                           "run again once it is complete",
                           (unsigned long long)expect, (unsigned long long)hashed);
    }
    return PM_OK;
}
