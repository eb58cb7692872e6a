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
    /* the thread's progress, published after each window: slot pub_seq & 1 holds the state
     * after pub_bytes[that slot] bytes (the other slot is the one being written), so that an
     * owner who takes over goes on from there instead of from the start (take_over) */
    pm_i_sha256 pub[2];
    uint64_t pub_bytes[2];
    atomic_uint pub_seq;
};

static void hash_job_unref(pm_i_hash_job *h) {
    if (atomic_fetch_sub(&h->refs, 1) == 1) {
        close(h->fd);
        free(h);
    }
}

/* The state after *bytes bytes into h's free slot, then made the published one. The stop
 * check that follows each publication (hash_file) is what keeps the slot an owner copies
 * from being written again: see take_over. */
static void publish(pm_i_hash_job *h, const pm_i_sha256 *sha, uint64_t bytes) {
    unsigned seq = atomic_load(&h->pub_seq);
    h->pub[(seq + 1) & 1] = *sha;
    h->pub_bytes[(seq + 1) & 1] = bytes;
    atomic_store(&h->pub_seq, seq + 1);
}

/* Hashes the file fd from byte *bytes (sha holds the state after them) to its end; *bytes
 * gets the count. Stops, and returns -1, when stop is set (may be NULL); -1 too on a read
 * error; else 0. The bytes go through windows of a read-only mapping (no copy; at most one
 * window resident at a time), the rest (a file that grew, or no mapping) by pread. With pub,
 * the state is published after each window. */
int pm_i_hash_stall_after;
size_t pm_i_hash_window;
atomic_int pm_i_hash_stalled;

/* Tests only (pm_i_hash_stall_after): after the windows asked for, the idle thread waits. */
static void stall_after(const pm_i_hash_job *h, uint64_t windows) {
    if (pm_i_hash_stall_after > 0 && h->idle && windows == (uint64_t)pm_i_hash_stall_after) {
        atomic_store(&pm_i_hash_stalled, 1);
        while (!atomic_load(&h->stop)) {
            struct timespec ms = {0, 1000000};
            nanosleep(&ms, NULL);
        }
    }
}

#define HASH_WINDOW ((size_t)4 << 20)
static int hash_file(int fd, atomic_int *stop, pm_i_sha256 *sha, uint64_t *bytes,
                     pm_i_hash_job *pub) {
    const size_t window = pm_i_hash_window ? pm_i_hash_window : HASH_WINDOW;
    uint64_t windows = 0;
    struct stat st;
    if (fstat(fd, &st) == 0 && S_ISREG(st.st_mode)) {
        uint64_t size = (uint64_t)st.st_size;
        while (*bytes < size) {
            if (stop && atomic_load(stop)) { /* sequentially consistent: see take_over */
                return -1;
            }
            size_t len = size - *bytes < window ? (size_t)(size - *bytes) : window;
            void *m = mmap(NULL, len, PROT_READ, MAP_PRIVATE, fd, (off_t)*bytes);
            if (m == MAP_FAILED) {
                break;
            }
            (void)posix_madvise(m, len, POSIX_MADV_SEQUENTIAL);
            pm_i_sha256_update(sha, m, len);
            munmap(m, len);
            *bytes += len;
            if (pub) {
                publish(pub, sha, *bytes);
                stall_after(pub, ++windows);
            }
        }
    }
    size_t cap = 1u << 20;
    char *buf = malloc(cap);
    if (!buf) {
        return -1;
    }
    int rc = 0;
    for (;;) {
        if (stop && atomic_load(stop)) { /* sequentially consistent: see take_over */
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
        if (pub) {
            publish(pub, sha, *bytes);
        }
    }
    free(buf);
    return rc;
}

/* Stops h's thread and copies its last published state into sha, *bytes (no waiting: the
 * thread may get no processor for long). The thread checks stop after each publication and
 * before it writes a slot again; with stop set before pub_seq is read (sequentially
 * consistent atomics), the thread may still write the other slot, never the one copied. */
static void take_over(pm_i_hash_job *h, pm_i_sha256 *sha, uint64_t *bytes) {
    atomic_store(&h->stop, 1);
    unsigned seq = atomic_load(&h->pub_seq);
    *sha = h->pub[seq & 1];
    *bytes = h->pub_bytes[seq & 1];
}

/* Ends the job: 1 when the file hashed to exactly the expected bytes (digest into out; *hashed
 * gets the bytes hashed). A thread at the normal priority is waited for; one in the idle class
 * that is still at work (it may get no processor for long on a busy machine) is told to stop,
 * and the rest of the file is hashed here, from the thread's last published state. */
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
        pm_i_sha256 own;
        uint64_t bytes = 0;
        take_over(h, &own, &bytes);
        ok = hash_file(h->fd, NULL, &own, &bytes, NULL) == 0 && bytes == h->expect;
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
    if (h->idle && pm_i_hash_stall_after == 0) { /* the test hook: sure to reach its windows */
        struct sched_param sp;
        memset(&sp, 0, sizeof sp);
        (void)pthread_setschedparam(pthread_self(), SCHED_IDLE, &sp);
    }
    while (pm_i_hash_stall && h->idle && !atomic_load(&h->stop)) {
        struct timespec ms = {0, 1000000};
        nanosleep(&ms, NULL);
    }
    h->failed = hash_file(h->fd, &h->stop, &h->sha, &h->bytes, h) != 0;
    atomic_store_explicit(&h->done, 1, memory_order_release);
    hash_job_unref(h);
    return NULL;
}

/* A job on a dup of fd, at the file's start. */
static pm_i_hash_job *job_new(int fd, bool idle) {
    pm_i_hash_job *hj = pm_i_calloc(1, sizeof *hj);
    if (!hj) {
        return NULL;
    }
    hj->fd = dup(fd);
    atomic_init(&hj->stop, 0);
    atomic_init(&hj->done, 0);
    atomic_init(&hj->refs, 2);
    atomic_init(&hj->pub_seq, 0);
    hj->idle = idle;
    pm_i_sha256_init(&hj->sha);
    hj->pub[0] = hj->sha; /* published: nothing hashed yet */
    return hj;
}

/* Starts hj's thread; on failure frees hj and returns NULL. */
static pm_i_hash_job *job_run(pm_i_hash_job *hj) {
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

pm_i_hash_job *pm_i_hash_job_start(int fd, bool idle) {
    pm_i_hash_job *hj = job_new(fd, idle);
    return hj ? job_run(hj) : NULL;
}

/* An idle-class job still at work goes on from its last published state on a new thread at
 * the normal priority (the old one is stopped); h itself when it is done, not idle, or when
 * the new thread cannot start (then it is finished as before, by pm_i_hash_job_end). */
static pm_i_hash_job *hash_job_ahead(pm_i_hash_job *h) {
    if (!h->idle || atomic_load_explicit(&h->done, memory_order_acquire)) {
        return h;
    }
    pm_i_hash_job *n = job_new(h->fd, false);
    if (!n || n->fd < 0) {
        if (n && n->fd >= 0) {
            close(n->fd);
        }
        free(n);
        return h;
    }
    n->expect = h->expect;
    take_over(h, &n->sha, &n->bytes);
    pthread_t hth;
    if (pthread_create(&hth, NULL, hash_main, n) != 0) { /* finish it here, now */
        n->failed = hash_file(n->fd, NULL, &n->sha, &n->bytes, NULL) != 0;
        atomic_store(&n->done, 1);
        atomic_store(&n->refs, 1);
    } else {
        pthread_detach(hth);
    }
    hash_job_unref(h);
    return n;
}

void pm_table_hash_ahead(pm_table_t *t) {
    if (t->hash_job) {
        t->hash_job = hash_job_ahead(t->hash_job);
    }
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
