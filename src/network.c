/* The network stage (see network.h): Louvain clusters with restarts and stability, and the
 * Fruchterman-Reingold layout, the work shared among forked worker processes (igraph is not
 * thread-safe here). The stage's other files: network_graph.c (igraph set-up and errors, the
 * usable edges, modularity, adjusted Rand index), network_layout.c, network_louvain.c. The only
 * files of the library that include igraph; igraph errors become PM_EINTERNAL with igraph's own
 * text (or PM_ENOMEM), never an abort. */
#include "pairmap/network.h"

#include <errno.h>
#include <math.h>
#include <pthread.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/mman.h>
#ifndef MAP_ANONYMOUS
#define MAP_ANONYMOUS 0x20 /* Linux's value (sys/mman.h names it only beyond POSIX) */
#endif
#include <sys/types.h>
#include <sys/wait.h>
#include <time.h>
#include <unistd.h>
#ifdef __linux__
#include <sys/prctl.h>
#endif

#define PM_NETWORK_STAGE
#include "network_internal.h"
#include "util.h"

/* All the work of one call: restarts 0 .. R-1 into memb and q, the layout into pos. */
typedef struct {
    const pm_i_usable *u;
    double resolution;
    uint64_t seed;
    unsigned R;     /* 0: no Louvain run (no usable edge) */
    uint32_t *memb; /* [R nv] */
    double *q;      /* [R] */
    int layout;     /* 1: lay out (u->nv > 0) */
    uint64_t layout_seed;
    int iterations;
    double *pos; /* [2 nv] raw coordinates */
    const pm_i_help_flags
        *hf;                 /* shared flags when the parent may help the layout's child, or NULL */
    pm_i_network_hooks_t *h; /* the call's faults (tests) and counts */
} stage;

enum { SHARE_PENDING, SHARE_DONE };

/* A share: restarts r0 .. r1-1, then the layout when layout is set. */
typedef struct {
    unsigned r0, r1;
    int layout;
    pid_t pid; /* child computing it, 0: none */
    int fd;    /* read end of the child's pipe, -1: none */
    int state;
    pm_err_t rc;   /* once done */
    int in_layout; /* the error came from the layout */
    pm_diag_t diag;
} share;

/* Computes share sh here. done (may be NULL) gets, per restart of the share, whether it ran
 * here: all of them, except in the layout's child while the parent may help (st->hf, in_child
 * set), which lays out first and then runs the restarts the parent does not have. Either
 * way a restart's error is the share's error before the layout's, as in one process. */
static void run_share(const stage *st, share *sh, int in_child, unsigned char *done) {
    pm_diag_clear(&sh->diag);
    sh->rc = PM_OK;
    sh->in_layout = 0;
    sh->state = SHARE_DONE;
    int helped = in_child && st->hf && sh->layout && sh->r1 > sh->r0;
    pm_err_t lrc = PM_OK;
    pm_diag_t ldiag;
    pm_diag_clear(&ldiag);
    if (helped && st->pos) { /* the layout first: the parent takes restarts from the end */
        pm_i_net_reason_clear();
        igraph_error_t ig = pm_i_fr_run(st->h, st->u, st->layout_seed, st->iterations, st->pos);
        if (ig != IGRAPH_SUCCESS) {
            lrc = pm_i_net_from_igraph(ig, "the Fruchterman-Reingold layout", &ldiag);
        }
        /* test hook: the child waits until the parent has stopped helping (at most a
         * minute), so that the parent has run every restart it could */
        for (int i = 0; st->h->faults.child_slow && i < 60000 && !atomic_load(st->hf->over); i++) {
            struct timespec t = {0, 1000000};
            nanosleep(&t, NULL);
        }
    }
    if (sh->r1 > sh->r0) {
        pm_i_net_reason_clear();
        igraph_error_t ig =
            pm_i_louvain_runs(st->h, st->u, st->resolution, st->seed, sh->r0, sh->r1, st->memb,
                              st->q, helped ? st->hf : NULL, 0, done);
        if (ig != IGRAPH_SUCCESS) {
            sh->rc = pm_i_net_from_igraph(ig, "Louvain clustering", &sh->diag);
            return;
        }
    }
    if (helped) {
        if (lrc) {
            sh->rc = lrc;
            sh->diag = ldiag;
            sh->in_layout = 1;
        }
        return;
    }
    if (sh->layout && st->pos) {
        pm_i_net_reason_clear();
        igraph_error_t ig = pm_i_fr_run(st->h, st->u, st->layout_seed, st->iterations, st->pos);
        if (ig != IGRAPH_SUCCESS) {
            sh->rc = pm_i_net_from_igraph(ig, "the Fruchterman-Reingold layout", &sh->diag);
            sh->in_layout = 1;
        }
    }
}

/* What a child writes first; then head.bytes bytes: the result when code is PM_OK (one byte
 * per restart of the share, 1 for those it ran; their memberships, then their modularities,
 * in order; then the layout), else the message. */
#define WIRE_MAGIC UINT32_C(0x706d6e77)
typedef struct {
    uint32_t magic;
    int32_t code;
    uint32_t r0, r1;
    uint32_t layout, in_layout;
    uint64_t bytes;
} wire_head;

static size_t result_bytes(const stage *st, const share *sh, size_t ran) {
    size_t runs = sh->r1 - sh->r0, nv = st->u->nv;
    return runs + ran * nv * sizeof *st->memb + ran * sizeof *st->q +
           (sh->layout ? 2 * nv * sizeof *st->pos : 0);
}

static int write_all(int fd, const void *p, size_t len) {
    const char *c = p;
    while (len > 0) {
        ssize_t w = write(fd, c, len);
        if (w < 0 && errno == EINTR) {
            continue;
        }
        if (w <= 0) {
            return -1;
        }
        c += w;
        len -= (size_t)w;
    }
    return 0;
}

/* Bytes read into p: len, or less at end of file or on an error. */
static size_t read_all(int fd, void *p, size_t len) {
    char *c = p;
    size_t got = 0;
    while (got < len) {
        ssize_t r = read(fd, c + got, len - got);
        if (r < 0 && errno == EINTR) {
            continue;
        }
        if (r <= 0) {
            break;
        }
        got += (size_t)r;
    }
    return got;
}

/* The child of spawn number spawn_no: computes its share, writes it to fd, _exits. Never
 * returns. Only _exit: no atexit handler, no flush of stdio buffers inherited from the
 * parent, no removal of the parent's temporary files. */
static void child_main(const stage *st, share *sh, int fd, int spawn_no, pid_t parent,
                       const sigset_t *mask, const share *all, size_t nall) {
    /* the parent's handlers (outfile.h: they remove its temporary files) are not for us;
     * a terminal's SIGINT or a SIGTERM simply ends the child */
    struct sigaction sa;
    memset(&sa, 0, sizeof sa);
    sa.sa_handler = SIG_DFL;
    sigemptyset(&sa.sa_mask);
    sigaction(SIGINT, &sa, NULL);
    sigaction(SIGTERM, &sa, NULL);
#ifdef __linux__
    /* killed when the parent dies (best effort: if prctl is refused, the pipe still ends the
     * child, which gets EPIPE or SIGPIPE on writing once the parent is gone) */
    (void)prctl(PR_SET_PDEATHSIG, SIGKILL);
#endif
    if (getppid() != parent) {
        _exit(1); /* the parent died before the line above took effect */
    }
    pthread_sigmask(SIG_SETMASK, mask, NULL);
    sigset_t stop; /* the parent blocks these in every thread (cmd_map.c): not the child */
    sigemptyset(&stop);
    sigaddset(&stop, SIGINT);
    sigaddset(&stop, SIGTERM);
    sigaddset(&stop, SIGHUP);
    sigaddset(&stop, SIGQUIT);
    pthread_sigmask(SIG_UNBLOCK, &stop, NULL);
    for (size_t i = 0; i < nall; i++) {
        if (&all[i] != sh && all[i].fd >= 0) {
            close(all[i].fd); /* earlier children's read ends */
        }
    }
    if (st->h->faults.child_dies == spawn_no) {
        _exit(1);
    }
    if (st->h->faults.child_killed == spawn_no) {
        raise(SIGKILL);
    }
    size_t runs = sh->r1 - sh->r0, nv = st->u->nv;
    unsigned char *done = calloc(runs ? runs : 1, 1);
    if (st->h->faults.child_nomem == spawn_no || !done) {
        sh->rc = pm_diag_set(&sh->diag, PM_ENOMEM, NULL, 0, "out of memory");
        sh->in_layout = 0;
    } else {
        run_share(st, sh, 1, done);
    }
    wire_head h;
    memset(&h, 0, sizeof h);
    h.magic = WIRE_MAGIC;
    h.code = (int32_t)sh->rc;
    h.r0 = sh->r0;
    h.r1 = sh->r1;
    h.layout = (uint32_t)sh->layout;
    h.in_layout = (uint32_t)sh->in_layout;
    int bad = 0;
    if (sh->rc == PM_OK) {
        size_t ran = 0;
        for (size_t i = 0; i < runs; i++) {
            ran += done[i];
        }
        h.bytes = result_bytes(st, sh, ran);
        if (st->h->faults.child_short == spawn_no) {
            /* the head, the flags and half of the next array, then a clean exit */
            const void *first =
                ran ? (const void *)(st->memb + (size_t)sh->r0 * nv) : (const void *)st->pos;
            size_t len = ran ? nv * sizeof *st->memb : 2 * nv * sizeof *st->pos;
            bad = write_all(fd, &h, sizeof h) || write_all(fd, done, runs) ||
                  write_all(fd, first, len / 2);
            free(done);
            _exit(bad);
        }
        bad = write_all(fd, &h, sizeof h) || write_all(fd, done, runs);
        for (size_t i = 0; i < runs && !bad; i++) {
            if (done[i]) {
                bad = write_all(fd, st->memb + (size_t)(sh->r0 + i) * nv, nv * sizeof *st->memb);
            }
        }
        for (size_t i = 0; i < runs && !bad; i++) {
            if (done[i]) {
                bad = write_all(fd, st->q + sh->r0 + i, sizeof *st->q);
            }
        }
        bad = bad || (sh->layout && write_all(fd, st->pos, 2 * nv * sizeof *st->pos));
    } else {
        h.bytes = strlen(sh->diag.msg);
        bad = write_all(fd, &h, sizeof h) || write_all(fd, sh->diag.msg, (size_t)h.bytes);
    }
    free(done);
    _exit(bad);
}

/* Forks the child of share sh (spawn number spawn_no). 0 on success; -1 when pipe or fork
 * failed (nothing is left open then). */
static int spawn(const stage *st, share *sh, int spawn_no, const share *all, size_t nall) {
    int fds[2];
    if (st->h->faults.pipe_fail_from > 0 && spawn_no >= st->h->faults.pipe_fail_from) {
        return -1;
    }
    if (pipe(fds) != 0) {
        return -1;
    }
    /* no signal handler may run in the child before it has reset them */
    sigset_t block, old;
    sigemptyset(&block);
    sigaddset(&block, SIGINT);
    sigaddset(&block, SIGTERM);
    pthread_sigmask(SIG_BLOCK, &block, &old);
    pid_t parent = getpid();
    pid_t pid = -1;
    if (!(st->h->faults.fork_fail_from > 0 && spawn_no >= st->h->faults.fork_fail_from)) {
        pid = fork();
    }
    if (pid == 0) {
        close(fds[0]);
        child_main(st, sh, fds[1], spawn_no, parent, &old, all, nall);
    }
    pthread_sigmask(SIG_SETMASK, &old, NULL);
    close(fds[1]); /* so that later children do not hold it: EOF comes when this child ends */
    if (pid < 0) {
        close(fds[0]);
        return -1;
    }
    sh->pid = pid;
    sh->fd = fds[0];
    return 0;
}

static void reap(share *sh) {
    if (sh->fd >= 0) {
        close(sh->fd);
        sh->fd = -1;
    }
    if (sh->pid > 0) {
        int status;
        while (waitpid(sh->pid, &status, 0) < 0 && errno == EINTR) {
        }
        sh->pid = 0; /* ECHILD (SIGCHLD ignored: reaped already) is fine too */
    }
}

/* Reads the answer of sh's child into the stage's arrays and reaps the child. 1 when a
 * complete answer for this very share came (sh->rc and sh->diag set), 0 otherwise. */
static int collect(const stage *st, share *sh) {
    wire_head h;
    int ok = 0;
    if (read_all(sh->fd, &h, sizeof h) == sizeof h && h.magic == WIRE_MAGIC && h.r0 == sh->r0 &&
        h.r1 == sh->r1 && h.layout == (uint32_t)sh->layout) {
        pm_diag_clear(&sh->diag);
        size_t runs = sh->r1 - sh->r0, nv = st->u->nv;
        unsigned char *done = h.code == PM_OK ? calloc(runs ? runs : 1, 1) : NULL;
        if (done && read_all(sh->fd, done, runs) == runs) {
            /* every restart the child did not run is one this process ran (helped) */
            size_t ran = 0;
            int whole = 1;
            for (size_t i = 0; i < runs; i++) {
                ran += done[i] != 0;
                whole &= done[i] || (st->hf && atomic_load(&st->hf->helped[sh->r0 + i]));
            }
            size_t bp = sh->layout ? 2 * nv * sizeof *st->pos : 0;
            ok = whole && h.bytes == result_bytes(st, sh, ran);
            for (size_t i = 0; i < runs && ok; i++) {
                size_t b = nv * sizeof *st->memb;
                ok = !done[i] || read_all(sh->fd, st->memb + (sh->r0 + i) * nv, b) == b;
            }
            for (size_t i = 0; i < runs && ok; i++) {
                size_t b = sizeof *st->q;
                ok = !done[i] || read_all(sh->fd, st->q + sh->r0 + i, b) == b;
            }
            ok = ok && (!bp || read_all(sh->fd, st->pos, bp) == bp);
            sh->rc = PM_OK;
            sh->in_layout = 0;
        } else if (h.code > PM_OK && h.code <= PM_EINTERRUPTED && h.bytes < sizeof sh->diag.msg) {
            char msg[sizeof sh->diag.msg];
            if (read_all(sh->fd, msg, (size_t)h.bytes) == h.bytes) {
                msg[h.bytes] = '\0';
                sh->rc = pm_diag_set(&sh->diag, (pm_err_t)h.code, NULL, 0, "%s", msg);
                sh->in_layout = h.in_layout != 0;
                ok = 1;
            }
        }
        free(done);
    }
    reap(sh);
    if (ok) {
        sh->state = SHARE_DONE;
    }
    return ok;
}

static int failed_before(const share *sh, size_t i) {
    for (size_t j = 0; j < i; j++) {
        if (sh[j].state == SHARE_DONE && sh[j].rc != PM_OK) {
            return 1;
        }
    }
    return 0;
}

/* Cuts the work into at most `workers` shares: with a layout and two or more workers, the
 * layout is a share of its own, with the last restarts when it is the lighter one (measured on the
 * medium benchmark file, 5,000 items and 149,000 edges: 0.62 s for the layout, 0.53 s for the ten
 * restarts) and the restarts are cut into the rest, in order; share 0 (the parent's) holds the
 * first restarts, so that the parent summarises the restarts while the layout's child works.
 * Returns the number of shares. */
/* How many of the last restarts the layout's share takes as well, so that the shares cost
 * about the same. Cost model, in units of one Louvain run, fitted on the medium benchmark
 * (5,000 items, 149,000 edges; grid variant): a run costs about 3.6e-7 s per edge, the grid
 * layout about 8.7e-9 s per iteration and per vertex or edge, so the layout is worth
 * 0.024 * iterations * (vertices + edges) / edges runs. Small graphs (exact repulsion, and
 * only milliseconds either way) keep the layout alone. The split never changes results. */
static unsigned layout_extra(const stage *st, unsigned workers, unsigned k) {
    const pm_i_usable *u = st->u;
    if (u->nv <= 1000 || u->me == 0 || st->R <= k) {
        return 0;
    }
    double L = 0.024 * (double)st->iterations * (double)(u->nv + u->me) / (double)u->me;
    double per = ((double)st->R + L) / (double)workers;
    if (per <= L) {
        return 0;
    }
    double x = floor(per - L + 0.5);
    unsigned extra = x > 0 ? (unsigned)x : 0;
    return extra > st->R - k ? st->R - k : extra; /* every other share keeps a run */
}

static size_t plan(const stage *st, unsigned workers, share *sh) {
    unsigned units = st->R + (st->layout ? 1u : 0u);
    if (workers > units) {
        workers = units;
    }
    if (workers < 1) {
        workers = 1;
    }
    for (unsigned i = 0; i < workers; i++) {
        memset(&sh[i], 0, sizeof sh[i]);
        sh[i].fd = -1;
        sh[i].state = SHARE_PENDING;
    }
    if (workers == 1) {
        sh[0].r1 = st->R;
        sh[0].layout = st->layout;
        return 1;
    }
    unsigned k = st->layout ? workers - 1 : workers; /* restart shares, k <= R */
    unsigned extra = st->layout ? layout_extra(st, workers, k) : 0;
    unsigned R = st->R - extra;
    for (unsigned i = 0; i < k; i++) {
        sh[i].r0 = (unsigned)((uint64_t)R * i / k);
        sh[i].r1 = (unsigned)((uint64_t)R * (i + 1) / k);
    }
    if (st->layout) {
        sh[k].layout = 1;
        sh[k].r0 = R; /* the last restarts, when the layout alone is the lighter share */
        sh[k].r1 = st->R;
    }
    return workers;
}

/* The shares of one call and their children. Shares 1 .. spawned-1 got a child; the rest are
 * the parent's. */
typedef struct {
    share one; /* the only share when there is no room for more */
    share *sh;
    size_t ns, spawned;
} crew;

/* Plans the shares, forks the children and runs share 0 in this process while they work. */
static void crew_start(crew *cw, const stage *st, unsigned workers) {
    unsigned units = st->R + (st->layout ? 1u : 0u);
    if (workers > units) {
        workers = units;
    }
    cw->sh = &cw->one;
    if (workers > 1) {
        cw->sh = pm_i_calloc(workers, sizeof *cw->sh);
        if (!cw->sh) {
            cw->sh = &cw->one; /* no room for the bookkeeping: one process */
            workers = 1;
        }
    }
    cw->ns = plan(st, workers, cw->sh);
    st->h->stats.shares = (unsigned)cw->ns;
    if (cw->ns > 1 && st->layout) {
        st->h->stats.layout_restarts = cw->sh[cw->ns - 1].r1 - cw->sh[cw->ns - 1].r0;
    }
    cw->spawned = 1;
    /* after the first failure the rest are the parent's: the next fork would fail too */
    while (cw->spawned < cw->ns &&
           spawn(st, &cw->sh[cw->spawned], (int)cw->spawned, cw->sh, cw->ns) == 0) {
        cw->spawned++;
        st->h->stats.forked++;
    }
    if (units > 0) {
        run_share(st, &cw->sh[0], 0, NULL);
    }
}

/* Completes shares from .. upto-1 (share 0 is done already): first those without a child,
 * computed here, then the children's, read in order; a lost child's share is computed here.
 * Shares after an error are left undone (children killed): that error decides the outcome. */
static void crew_finish(crew *cw, const stage *st, size_t from, size_t upto) {
    share *sh = cw->sh;
    for (size_t i = from > cw->spawned ? from : cw->spawned; i < upto; i++) {
        if (!failed_before(sh, i)) {
            run_share(st, &sh[i], 0, NULL);
            st->h->stats.redone++;
        }
    }
    for (size_t i = from; i < upto && i < cw->spawned; i++) {
        if (sh[i].pid == 0) {
            continue;
        }
        if (failed_before(sh, i)) {
            kill(sh[i].pid, SIGKILL);
            reap(&sh[i]);
            continue;
        }
        if (collect(st, &sh[i]) && sh[i].rc != PM_ENOMEM) {
            st->h->stats.from_child++;
        } else {
            run_share(st, &sh[i], 0, NULL); /* lost, cut short, or short of memory in the child */
            st->h->stats.redone++;
        }
    }
}

/* The first error among shares 0 .. upto-1, in the order one process meets them. */
static pm_err_t crew_error(const crew *cw, size_t upto, int *in_layout, pm_diag_t *diag) {
    for (size_t i = 0; i < upto; i++) {
        const share *s = &cw->sh[i];
        if (s->state == SHARE_DONE && s->rc != PM_OK) {
            *in_layout = s->in_layout;
            if (diag) {
                *diag = s->diag;
            }
            return s->rc;
        }
    }
    *in_layout = 0;
    return PM_OK;
}

/* Kills and reaps the children still running (their results are no longer wanted), frees. */
static void crew_end(crew *cw) {
    for (size_t i = 1; i < cw->spawned; i++) {
        if (cw->sh[i].pid > 0) {
            kill(cw->sh[i].pid, SIGKILL);
            reap(&cw->sh[i]);
        }
    }
    if (cw->sh != &cw->one) {
        free(cw->sh);
    }
    cw->sh = NULL;
}

/* ---- clustering and layout ------------------------------------------------------------------ */
/* ---- clustering and layout ------------------------------------------------------------------ */

/* One call's arrays, its work and its crew. */
typedef struct {
    pm_i_usable u;
    pm_clusters_t *c;
    uint32_t *memb; /* [R nv] every restart's membership */
    uint32_t *raw;  /* [n] raw labels */
    double *pos;    /* [2 nv] raw layout, or NULL */
    pm_i_help_flags hf;
    void *shared; /* the mapping behind hf, or MAP_FAILED */
    size_t shared_len;
    stage st;
    crew cw;
    size_t n_restart_shares; /* shares 0 .. n_restart_shares-1 hold the restarts to wait for */
    pm_err_t layout_rc;      /* the layout's error, reported after the clustering's */
    pm_diag_t layout_diag;
} netrun;

/* The result and the work's arrays, and each vertex's strength. */
static pm_err_t net_alloc(netrun *nr, size_t n, unsigned R, int layout, pm_diag_t *diag) {
    const pm_i_usable *u = &nr->u;
    pm_clusters_t *c = nr->c = pm_i_calloc(1, sizeof *c);
    if (!c) {
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
    }
    c->n = n;
    c->restarts = R;
    c->n_used_edges = u->me;
    c->cluster = pm_i_malloc(n ? n : 1, sizeof *c->cluster);
    c->members = pm_i_malloc(n ? n : 1, sizeof *c->members);
    c->strength = pm_i_calloc(n ? n : 1, sizeof *c->strength);
    c->inner = pm_i_calloc(n ? n : 1, sizeof *c->inner);
    c->restart_q = pm_i_malloc(R, sizeof *c->restart_q);
    nr->memb = pm_i_malloc((size_t)R * (u->nv ? u->nv : 1), sizeof *nr->memb);
    nr->raw = pm_i_malloc(n ? n : 1, sizeof *nr->raw);
    if (layout && u->nv > 0) {
        nr->pos = pm_i_malloc(2 * u->nv, sizeof *nr->pos);
    }
    if (!c->cluster || !c->members || !c->strength || !c->inner || !c->restart_q || !nr->memb ||
        !nr->raw || (layout && u->nv > 0 && !nr->pos)) {
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
    }
    for (size_t k = 0; k < u->me; k++) {
        c->strength[u->oldid[u->ends[2 * k]]] += u->w[k];
        c->strength[u->oldid[u->ends[2 * k + 1]]] += u->w[k];
    }
    c->modularity = NAN;
    c->stability = NAN;
    return PM_OK;
}

/* Flags shared with the children: the parent may run restarts of the layout's share (from its
 * end) while the child lays out; without the mapping it simply does not. */
static void share_flags(netrun *nr, const pm_cluster_opts_t *o, int layout) {
    stage *st = &nr->st;
    if (!(layout && o->workers != 1 && st->R > 0)) {
        return;
    }
    nr->shared_len = (2 * (size_t)st->R + 1) * sizeof(atomic_uchar);
    nr->shared =
        mmap(NULL, nr->shared_len, PROT_READ | PROT_WRITE, MAP_SHARED | MAP_ANONYMOUS, -1, 0);
    if (nr->shared == MAP_FAILED) {
        return;
    }
    pm_i_help_flags *hf = &nr->hf;
    hf->claimed = nr->shared;
    hf->helped = hf->claimed + st->R;
    hf->over = hf->helped + st->R;
    atomic_init(hf->over, 0);
    for (unsigned r = 0; r < st->R; r++) {
        atomic_init(&hf->claimed[r], 0);
        atomic_init(&hf->helped[r], 0);
    }
    st->hf = hf;
}

/* The layout's child runs its restarts after the layout: this process runs them from the end
 * meanwhile, as far as the child has not come (pm_i_louvain_runs); a layout share that still
 * holds restarts of the child's is waited for with the restarts. Returns how many shares hold
 * restarts to wait for. */
static size_t help_layout_child(netrun *nr) {
    crew *cw = &nr->cw;
    stage *st = &nr->st;
    int layout_runs = 0;
    if (cw->ns > 1 && st->layout) {
        share *ls = &cw->sh[cw->ns - 1];
        if (ls->r1 > ls->r0 && st->hf && ls->pid > 0 && cw->sh[0].rc == PM_OK) {
            pm_i_net_reason_clear();
            (void)pm_i_louvain_runs(st->h, st->u, st->resolution, st->seed, ls->r0, ls->r1,
                                    st->memb, st->q, st->hf, 1, NULL);
        }
        if (st->hf) {
            atomic_store(st->hf->over, 1);
        }
        for (unsigned r = ls->r0; r < ls->r1; r++) {
            layout_runs |= !(st->hf && ls->pid > 0 && atomic_load(&st->hf->helped[r]));
        }
    }
    return cw->ns > 1 && st->layout && !layout_runs ? cw->ns - 1 : cw->ns;
}

/* Waits for the restarts; the first error among them is the call's (one from the layout, in
 * one process, is kept for after the clustering's errors, as the two separate calls give). */
static pm_err_t restarts_done(netrun *nr, pm_diag_t *diag) {
    nr->n_restart_shares = help_layout_child(nr);
    crew_finish(&nr->cw, &nr->st, 1, nr->n_restart_shares);
    int in_layout;
    pm_diag_t sd;
    pm_diag_clear(&sd);
    pm_err_t src = crew_error(&nr->cw, nr->n_restart_shares, &in_layout, &sd);
    if (src && !in_layout) {
        if (diag) {
            *diag = sd;
        }
        return src;
    }
    if (src) {
        nr->layout_rc = src;
        nr->layout_diag = sd;
    }
    return PM_OK;
}

/* The best restart's modularity and the stability: mean ARI over all pairs of runs, over the
 * vertices with edges (isolated vertices are singletons in every run and would only inflate
 * it). */
static pm_err_t summarise_restarts(netrun *nr, pm_diag_t *diag) {
    pm_clusters_t *c = nr->c;
    unsigned R = c->restarts;
    size_t nv = nr->u.nv;
    if (nr->u.me == 0) {
        for (unsigned r = 0; r < R; r++) {
            c->restart_q[r] = NAN;
        }
        return PM_OK;
    }
    unsigned best = 0;
    for (unsigned r = 1; r < R; r++) {
        if (c->restart_q[r] > c->restart_q[best]) {
            best = r;
        }
    }
    c->best_restart = best;
    c->modularity = c->restart_q[best];
    if (R < 2) {
        return PM_OK;
    }
    double sum = 0;
    size_t pairs = 0;
    for (unsigned r = 0; r < R; r++) {
        for (unsigned t = r + 1; t < R; t++) {
            double a = 0;
            pm_err_t rc = pm_adjusted_rand(nv, nr->memb + (size_t)r * nv, nr->memb + (size_t)t * nv,
                                           &a, diag);
            if (rc) {
                return rc;
            }
            sum += a;
            pairs++;
        }
    }
    c->stability = sum / (double)pairs;
    return PM_OK;
}

/* Raw labels: the best run's communities for vertices with edges; n + i for isolated vertex i
 * would overflow uint32 for huge n, so isolated vertices get nv + their rank. Then each
 * vertex's strength inside its cluster. */
static void raw_labels(netrun *nr) {
    const pm_i_usable *u = &nr->u;
    pm_clusters_t *c = nr->c;
    size_t iso = 0;
    for (size_t i = 0; i < c->n; i++) {
        if (u->newid[i] != UINT32_MAX) {
            nr->raw[i] = nr->memb[(size_t)c->best_restart * u->nv + u->newid[i]];
        } else {
            nr->raw[i] = (uint32_t)(u->nv + iso++);
        }
    }
    for (size_t k = 0; k < u->me; k++) {
        uint32_t a = u->oldid[u->ends[2 * k]], b = u->oldid[u->ends[2 * k + 1]];
        if (nr->raw[a] == nr->raw[b]) {
            c->inner[a] += u->w[k];
            c->inner[b] += u->w[k];
        }
    }
}

/* Every run's labels over all n vertices (isolated ones: a label of their own, as raw), for
 * the cluster-wise stability and the debug output of the runs (pm_clusters_t.runs). */
static pm_err_t keep_runs(netrun *nr) {
    const pm_i_usable *u = &nr->u;
    pm_clusters_t *c = nr->c;
    unsigned R = c->restarts;
    size_t n = c->n;
    if (u->me == 0 || R < 2) {
        return PM_OK;
    }
    c->runs = pm_i_malloc((size_t)R * (n ? n : 1), sizeof *c->runs);
    if (!c->runs) {
        return PM_ENOMEM;
    }
    for (unsigned r = 0; r < R; r++) {
        size_t iso = 0;
        for (size_t i = 0; i < n; i++) {
            c->runs[(size_t)r * n + i] = u->newid[i] != UINT32_MAX
                                             ? nr->memb[(size_t)r * u->nv + u->newid[i]]
                                             : (uint32_t)(u->nv + iso++);
        }
    }
    return PM_OK;
}

/* The layout's share (when it was left for after the clustering) and the layout itself. */
static pm_err_t layout_done(netrun *nr, int layout, double *xy, pm_diag_t *diag) {
    if (nr->cw.ns > nr->n_restart_shares) {
        int in_layout;
        crew_finish(&nr->cw, &nr->st, nr->n_restart_shares, nr->cw.ns);
        nr->layout_rc = crew_error(&nr->cw, nr->cw.ns, &in_layout, &nr->layout_diag);
    }
    if (!layout) {
        return PM_OK;
    }
    if (nr->layout_rc) {
        if (diag) {
            *diag = nr->layout_diag;
        }
        return nr->layout_rc;
    }
    return pm_i_layout_finish(&nr->u, nr->c->n, nr->pos, xy, diag);
}

static void net_free(netrun *nr) {
    crew_end(&nr->cw);
    if (nr->shared != MAP_FAILED) {
        munmap(nr->shared, nr->shared_len);
    }
    free(nr->memb);
    free(nr->raw);
    free(nr->pos);
    pm_i_usable_free(&nr->u);
}

pm_err_t pm_i_network_call(pm_i_network_hooks_t *h, size_t n, size_t m, const uint32_t *ea,
                           const uint32_t *eb, const double *w, const pm_cluster_opts_t *o,
                           int layout, uint64_t layout_seed, int iterations, pm_clusters_t **out,
                           double *xy, pm_diag_t *diag) {
    *out = NULL;
    memset(&h->stats, 0, sizeof h->stats);
    if (!(o->resolution >= 0) || !isfinite(o->resolution)) {
        return pm_diag_set(diag, PM_EUSAGE, NULL, 0,
                           "the resolution must be a finite number >= 0, got %g", o->resolution);
    }
    if (o->restarts < 1) {
        return pm_diag_set(diag, PM_EUSAGE, NULL, 0, "at least one Louvain run is needed");
    }
    netrun nr;
    memset(&nr, 0, sizeof nr);
    nr.shared = MAP_FAILED;
    pm_diag_clear(&nr.layout_diag);
    pm_err_t rc = pm_i_usable_init(&nr.u, n, m, ea, eb, w, 1, diag);
    if (rc) {
        return rc;
    }
    unsigned rmax = pm_cluster_max_restarts(nr.u.nv);
    if (o->restarts > rmax) {
        pm_i_usable_free(&nr.u);
        return pm_diag_set(diag, PM_EUSAGE, NULL, 0,
                           "%u Louvain runs are too many for %zu clustered items: at most %u "
                           "(every run's clusters are kept, R x items x 4 bytes up to 1 GiB, "
                           "and the stability compares all R(R-1)/2 pairs of runs, up to "
                           "2e9 item comparisons)",
                           o->restarts, nr.u.nv, rmax);
    }
    rc = net_alloc(&nr, n, o->restarts, layout, diag);
    if (rc == PM_OK) {
        const pm_i_usable *u = &nr.u;
        stage st = {.u = u,
                    .resolution = o->resolution,
                    .seed = o->seed,
                    .R = u->me > 0 ? o->restarts : 0,
                    .memb = nr.memb,
                    .q = nr.c->restart_q,
                    .layout = nr.pos != NULL,
                    .layout_seed = layout_seed,
                    .iterations = iterations > 0 ? iterations : pm_layout_default_iterations(u->nv),
                    .pos = nr.pos,
                    .hf = NULL,
                    .h = h};
        nr.st = st;
        share_flags(&nr, o, layout);
        /* the restarts' shares first; the layout's child (the last share) keeps working while
         * this process summarises the restarts */
        crew_start(&nr.cw, &nr.st, o->workers);
        rc = restarts_done(&nr, diag);
    }
    if (rc == PM_OK) {
        rc = summarise_restarts(&nr, diag);
    }
    if (rc == PM_OK) {
        raw_labels(&nr);
        rc = keep_runs(&nr);
    }
    if (rc == PM_OK) {
        rc = pm_i_finish_clusters(nr.c, o, nr.raw, diag);
    }
    if (rc == PM_OK) {
        rc = pm_i_cluster_stability(nr.c, diag);
    }
    if (rc == PM_OK) {
        rc = layout_done(&nr, layout, xy, diag);
    }
    net_free(&nr);
    if (rc) {
        pm_clusters_free(nr.c);
        return rc;
    }
    *out = nr.c;
    return PM_OK;
}

pm_err_t pm_cluster_louvain(size_t n, size_t m, const uint32_t *ea, const uint32_t *eb,
                            const double *w, const pm_cluster_opts_t *o, pm_clusters_t **out,
                            pm_diag_t *diag) {
    pm_i_network_hooks_t h;
    pm_i_network_hooks_init(&h);
    return pm_i_network_call(&h, n, m, ea, eb, w, o, 0, 0, 0, out, NULL, diag);
}

pm_err_t pm_network_run(size_t n, size_t m, const uint32_t *ea, const uint32_t *eb, const double *w,
                        const pm_cluster_opts_t *o, uint64_t layout_seed, int iterations,
                        pm_clusters_t **clusters, double *xy, pm_diag_t *diag) {
    pm_i_network_hooks_t h;
    pm_i_network_hooks_init(&h);
    return pm_i_network_call(&h, n, m, ea, eb, w, o, 1, layout_seed, iterations, clusters, xy,
                             diag);
}
