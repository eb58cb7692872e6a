/* Atomic output into a directory: temporary files, checked completion, rename into place with
 * roll-back, and a signal-safe registry of temporaries (see outfile.h). */
#include "pairmap/outfile.h"

#include <errno.h>
#include <fcntl.h>
#include <pthread.h>
#include <signal.h>
#include <stdatomic.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/types.h>
#include <unistd.h>

#include "outfile_direct.h"
#include "util.h"

#define PATH_CAP 4096

/* ---- the registry the signal handler reads ------------------------------------------------ */
/* A slot is published by writing the path first and setting used last, so a handler never
 * sees a half-written path. unlink(2) and rmdir(2) are async-signal-safe. */
static char g_tmp[PM_OUTDIR_MAX_FILES * 2][PATH_CAP];
static volatile sig_atomic_t g_tmp_used[PM_OUTDIR_MAX_FILES * 2];
/* The directories a run created: mkdir -p creates a chain, every level below the first one it
 * made, so the deepest path and the length of the first created level say it all (any depth). */
static char g_made[PATH_CAP];
static size_t g_made_from; /* length of the first level created */
static volatile sig_atomic_t g_made_used;
/* The lock file of DIR (pm_outdir_lock), removed on every way out, signals included. */
static char g_lock[PATH_CAP];
static volatile sig_atomic_t g_lock_used;

static int reg_add(const char *path) {
    for (int i = 0; i < PM_OUTDIR_MAX_FILES * 2; i++) {
        if (!g_tmp_used[i]) {
            memcpy(g_tmp[i], path, strlen(path) + 1);
            g_tmp_used[i] = 1;
            return i;
        }
    }
    return -1;
}

static void reg_drop(int slot) {
    if (slot >= 0) {
        g_tmp_used[slot] = 0;
    }
}

/* rmdir of the created chain, deepest first, stopping at the first that is not empty: only
 * async-signal-safe calls (rmdir), on a copy of the path. */
static void remove_made_dirs(void) {
    if (!g_made_used) {
        return;
    }
    char buf[PATH_CAP];
    size_t n = 0;
    while (n < PATH_CAP - 1 && g_made[n]) {
        buf[n] = g_made[n];
        n++;
    }
    buf[n] = '\0';
    int saved = errno;
    while (n >= g_made_from && n > 0) {
        if (rmdir(buf) != 0 && errno != ENOENT) {
            break; /* not empty: the levels above are not ours to empty */
        }
        while (n > 0 && buf[n - 1] != '/') {
            n--;
        }
        while (n > 1 && buf[n - 1] == '/') {
            n--; /* "a//b" */
        }
        if (n == 0 || buf[n - 1] == '/') {
            break; /* reached the root or a relative path's first level */
        }
        buf[n] = '\0';
    }
    errno = saved;
}

void pm_outdir_remove_temporaries(void) {
    for (int i = 0; i < PM_OUTDIR_MAX_FILES * 2; i++) {
        if (g_tmp_used[i]) {
            (void)unlink(g_tmp[i]);
        }
    }
    if (g_lock_used) {
        (void)unlink(g_lock);
    }
    remove_made_dirs();
}

/* The rename phase holds g_commit; pm_outdir_stop (the CLI's signal thread) takes it, so a
 * signal never lands between two renames: it acts before the phase starts or after it ends. */
static pthread_mutex_t g_commit = PTHREAD_MUTEX_INITIALIZER;
static atomic_int g_replaced; /* 1 once a commit has put every new file in place */

int pm_outdir_stop(void) {
    pthread_mutex_lock(&g_commit); /* never released: the caller exits */
    pm_outdir_remove_temporaries();
    return atomic_load(&g_replaced);
}

/* PM_TEST_COMMIT_PAUSE=k: sleep a second before rename k (0-based), for the signal tests. */
static void test_pause(size_t k) {
    const char *v = getenv("PM_TEST_COMMIT_PAUSE");
    if (v && *v && (size_t)strtoul(v, NULL, 10) == k) {
        sleep(1);
    }
}

/* ---- the directory handle ------------------------------------------------------------------- */
enum { F_OPEN = 0, F_DONE = 1, F_FAILED = 2, F_COMMITTED = 3 };

typedef struct {
    char name[256];
    char *tmp, *final;
    FILE *fp;
    int fd;        /* fp's file (fileno() does not answer for a direct stream) */
    pm_i_dio *dio; /* fp's direct buffer, or NULL for an ordinary stream */
    int state;
    int slot; /* registry slot of tmp */
} outfile;

/* Test hook (outfile.h): the write faults of PM_TEST_OUTPUT_FAULT, read once per output set. */
enum { FAULT_NONE = 0, FAULT_READONLY = 1, FAULT_FULL = 2 };

struct pm_outdir {
    int fault;                /* FAULT_* */
    uint64_t budget, written; /* FAULT_FULL: bytes the files may take, bytes they took */
    char *dir;
    int made;   /* created directories (g_made) to remove when nothing is committed */
    int locked; /* holds DIR's lock file (g_lock) */
    outfile f[PM_OUTDIR_MAX_FILES];
    size_t nf;
    int committed;
    unsigned counter;
};

static char *join(const char *dir, const char *a, const char *b, const char *c) {
    size_t n = strlen(dir) + strlen(a) + strlen(b) + strlen(c) + 2;
    if (n > PATH_CAP) {
        errno = ENAMETOOLONG;
        return NULL;
    }
    char *s = pm_i_malloc(n, 1);
    if (s) {
        snprintf(s, n, "%s/%s%s%s", dir, a, b, c);
    }
    return s;
}

/* mkdir -p, remembering what it created (for removal when the run fails). */
static pm_err_t make_dirs(pm_outdir_t *od, pm_diag_t *diag) {
    size_t len = strlen(od->dir);
    char *p = pm_i_malloc(len + 1, 1);
    if (!p) {
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
    }
    memcpy(p, od->dir, len + 1);
    for (size_t i = 1; i <= len; i++) {
        if (i < len && p[i] != '/') {
            continue;
        }
        char keep = p[i];
        p[i] = '\0';
        if (i == len || p[i - 1] != '/') {
            struct stat pst;
            int refused = od->fault == FAULT_READONLY && stat(p, &pst) != 0;
            if (refused) {
                errno = EACCES; /* test hook: as a directory of mode 0555 refuses */
            }
            if (!refused && mkdir(p, 0777) == 0) {
                if (!od->made && len < PATH_CAP && !g_made_used) {
                    memcpy(g_made, od->dir, len + 1); /* the deepest level, set once */
                    g_made_from = i;
                    g_made_used = 1;
                    od->made = 1;
                }
            } else if (errno != EEXIST) {
                pm_err_t rc = pm_diag_set(
                    diag, PM_EIO, p, 0, "cannot create the output directory: %s", strerror(errno));
                free(p);
                return rc;
            }
        }
        p[i] = keep;
    }
    free(p);
    struct stat st;
    if (stat(od->dir, &st) != 0) {
        return pm_diag_set(diag, PM_EIO, od->dir, 0, "cannot use the output directory: %s",
                           strerror(errno));
    }
    if (!S_ISDIR(st.st_mode)) {
        return pm_diag_set(diag, PM_EIO, od->dir, 0,
                           "the output path exists and is not a directory");
    }
    return PM_OK;
}

/* Opens a fresh temporary for name, registering it first so a signal cannot leak it. */
static pm_err_t open_tmp(pm_outdir_t *od, const char *name, char **path, int *slot, int *fd,
                         pm_diag_t *diag) {
    for (int attempt = 0; attempt < 100; attempt++) {
        char tail[64];
        snprintf(tail, sizeof tail, ".%ld.%u.tmp", (long)getpid(), od->counter++);
        char *t = join(od->dir, ".", name, tail);
        if (!t) {
            return errno == ENAMETOOLONG
                       ? pm_diag_set(diag, PM_EIO, od->dir, 0, "output path too long")
                       : pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
        }
        /* registered and created under g_commit: a signal's clean-up (pm_outdir_stop, on
         * another thread) runs before or after both, never between them, so it cannot unlink
         * the name before the file exists and leave the file behind */
        pthread_mutex_lock(&g_commit);
        int s = reg_add(t);
        if (s < 0) {
            pthread_mutex_unlock(&g_commit);
            free(t);
            return pm_diag_set(diag, PM_EUSAGE, NULL, 0, "too many output files at once");
        }
        int f = od->fault == FAULT_READONLY
                    ? -1
                    : open(t, O_WRONLY | O_CREAT | O_EXCL | O_CLOEXEC, 0666);
        if (od->fault == FAULT_READONLY) {
            errno = EACCES; /* test hook */
        }
        pthread_mutex_unlock(&g_commit);
        if (f >= 0) {
            *path = t;
            *slot = s;
            *fd = f;
            return PM_OK;
        }
        int e = errno;
        reg_drop(s);
        if (e != EEXIST) {
            pm_err_t rc =
                pm_diag_set(diag, PM_EIO, od->dir, 0,
                            "cannot create a file in the output directory: %s", strerror(e));
            free(t);
            return rc;
        }
        free(t);
    }
    return pm_diag_set(diag, PM_EIO, od->dir, 0, "cannot find a free temporary file name");
}

pm_err_t pm_outdir_open(const char *dir, pm_outdir_t **out, pm_diag_t *diag) {
    *out = NULL;
    if (!dir || !dir[0]) {
        return pm_diag_set(diag, PM_EUSAGE, NULL, 0, "no output directory given");
    }
    pm_outdir_t *od = pm_i_calloc(1, sizeof *od);
    if (!od) {
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
    }
    size_t len = strlen(dir);
    while (len > 1 && dir[len - 1] == '/') {
        len--; /* "out/" -> "out" */
    }
    od->dir = pm_i_malloc(len + 1, 1);
    if (!od->dir) {
        free(od);
        return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
    }
    memcpy(od->dir, dir, len);
    od->dir[len] = '\0';
    const char *fault = getenv("PM_TEST_OUTPUT_FAULT");
    if (fault && strcmp(fault, "readonly") == 0) {
        od->fault = FAULT_READONLY;
    } else if (fault && strncmp(fault, "full:", 5) == 0) {
        od->fault = FAULT_FULL;
        od->budget = strtoull(fault + 5, NULL, 10);
    }
    pm_err_t rc = make_dirs(od, diag);
    if (!rc) {
        /* probe: can we create files here? */
        char *t = NULL;
        int slot = -1, fd = -1;
        rc = open_tmp(od, "probe", &t, &slot, &fd, diag);
        if (!rc) {
            close(fd);
            unlink(t);
            reg_drop(slot);
            free(t);
        }
    }
    if (rc) {
        pm_outdir_free(od);
        return rc;
    }
    *out = od;
    return PM_OK;
}

pm_err_t pm_outdir_create(pm_outdir_t *od, const char *name, FILE **fp, pm_diag_t *diag) {
    *fp = NULL;
    if (!name[0] || strchr(name, '/') || strlen(name) >= sizeof od->f[0].name ||
        strcmp(name, ".") == 0 || strcmp(name, "..") == 0) {
        return pm_diag_set(diag, PM_EUSAGE, NULL, 0, "bad output file name '%s'", name);
    }
    if (od->nf >= PM_OUTDIR_MAX_FILES) {
        return pm_diag_set(diag, PM_EUSAGE, NULL, 0, "too many output files");
    }
    for (size_t i = 0; i < od->nf; i++) {
        if (strcmp(od->f[i].name, name) == 0) {
            return pm_diag_set(diag, PM_EUSAGE, NULL, 0, "output file '%s' created twice", name);
        }
    }
    outfile *f = &od->f[od->nf];
    memset(f, 0, sizeof *f);
    f->slot = -1;
    snprintf(f->name, sizeof f->name, "%s", name);
    f->final = join(od->dir, name, "", "");
    if (!f->final) {
        return pm_diag_set(diag, PM_EIO, od->dir, 0, "output path too long");
    }
    int fd = -1;
    pm_err_t rc = open_tmp(od, name, &f->tmp, &f->slot, &fd, diag);
    if (rc) {
        free(f->final);
        return rc;
    }
    f->fd = fd;
    f->fp = pm_i_dio_open(fd, &f->dio); /* full blocks around the page cache (outfile_direct.h) */
    if (!f->fp) {
        f->fp = fdopen(fd, "w");
        /* 1 MiB buffers: a 60 MB GraphML file in 60 writes, not 15,000 (stdio allocates it;
         * errors still show at the next flush, which pm_outdir_finish checks) */
        if (f->fp) {
            (void)setvbuf(f->fp, NULL, _IOFBF, (size_t)1 << 20);
        }
    }
    if (!f->fp) {
        int e = errno;
        close(fd);
        unlink(f->tmp);
        reg_drop(f->slot);
        free(f->tmp);
        free(f->final);
        return pm_diag_set(diag, PM_EIO, NULL, 0, "cannot open a stream: %s", strerror(e));
    }
    f->state = F_OPEN;
    od->nf++;
    *fp = f->fp;
    return PM_OK;
}

pm_err_t pm_outdir_finish(pm_outdir_t *od, FILE *fp, pm_diag_t *diag) {
    outfile *f = NULL;
    for (size_t i = 0; i < od->nf; i++) {
        if (od->f[i].fp == fp && od->f[i].state == F_OPEN) {
            f = &od->f[i];
        }
    }
    if (!f) {
        return pm_diag_set(diag, PM_EINTERNAL, NULL, 0, "stream not opened by the output set");
    }
    int e = 0;
    if (fflush(fp) != 0) {
        e = errno ? errno : EIO;
    } else if (ferror(fp)) {
        e = EIO;
    } else if (f->dio && (e = pm_i_dio_end(f->dio)) != 0) {
        /* the buffer's last partial block could not be written: e says why */
    } else if (fsync(f->fd) != 0 && errno != EINVAL) {
        e = errno;
    }
    struct stat fst;
    if (!e && od->fault == FAULT_FULL && fstat(f->fd, &fst) == 0) {
        od->written += (uint64_t)fst.st_size; /* test hook: the file system is full beyond */
        if (od->written > od->budget) {
            e = ENOSPC;
        }
    }
    if (fclose(fp) != 0 && !e) {
        e = errno ? errno : EIO;
    }
    f->fp = NULL;
    if (e) {
        f->state = F_FAILED;
        return pm_diag_set(diag, PM_EIO, f->final, 0, "cannot write: %s", strerror(e));
    }
    f->state = F_DONE;
    return PM_OK;
}

static void sync_dir(const char *dir) {
    int fd = open(dir, O_RDONLY | O_CLOEXEC);
    if (fd >= 0) {
        (void)fsync(fd); /* best effort: some file systems refuse fsync on a directory */
        close(fd);
    }
}

/* PM_TEST_NO_LINK=1: every backup link fails, as on a file system without hard links.
 * PM_TEST_COMMIT_FAIL=k: the k-th rename (1-based) fails with EIO. Both for the roll-back tests. */
static int test_env_is(const char *name, size_t k) {
    const char *v = getenv(name);
    return v && *v && (size_t)strtoul(v, NULL, 10) == k;
}

enum { BAK_NONE = 0, BAK_LINK = 1, BAK_RENAMED = 2 };

/* Keeps what stands at each final name (a file, a symlink, anything but a directory) under a
 * backup name: a hard link where the file system allows, else the entry itself renamed away,
 * so that a roll-back can put back exactly what was there (linkat without
 * AT_SYMLINK_FOLLOW links a symlink itself, not its target). Runs with the commit lock held. */
static pm_err_t take_backups(pm_outdir_t *od, char **bak, int *kind, pm_diag_t *diag) {
    for (size_t i = 0; i < od->nf; i++) {
        struct stat st;
        if (lstat(od->f[i].final, &st) != 0 || S_ISDIR(st.st_mode)) {
            continue; /* nothing to keep (a directory makes the rename fail below) */
        }
        char tail[64];
        snprintf(tail, sizeof tail, ".%ld.bak", (long)getpid());
        bak[i] = join(od->dir, ".", od->f[i].name, tail);
        if (!bak[i]) {
            return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
        }
        (void)unlink(bak[i]);
        if (!test_env_is("PM_TEST_NO_LINK", 1) &&
            linkat(AT_FDCWD, od->f[i].final, AT_FDCWD, bak[i], 0) == 0) {
            kind[i] = BAK_LINK;
        } else if (rename(od->f[i].final, bak[i]) == 0) {
            kind[i] = BAK_RENAMED; /* the name is empty until the new file takes it */
        } else {
            return pm_diag_set(diag, PM_EIO, od->f[i].final, 0,
                               "cannot keep the earlier file for a roll-back: %s; nothing was "
                               "replaced",
                               strerror(errno));
        }
    }
    return PM_OK;
}

/* Puts every backup back under its name (the new files taken away first), newest state
 * undone: files 0..done-1 were replaced. */
static void roll_back(pm_outdir_t *od, char **bak, const int *kind, size_t done) {
    for (size_t j = 0; j < od->nf; j++) {
        if (kind[j] != BAK_NONE) {
            (void)rename(bak[j], od->f[j].final); /* over the new file, or into the gap */
        } else if (j < done) {
            (void)unlink(od->f[j].final); /* nothing was there before */
        }
    }
}

pm_err_t pm_outdir_commit(pm_outdir_t *od, pm_diag_t *diag) {
    for (size_t i = 0; i < od->nf; i++) {
        if (od->f[i].state != F_DONE) {
            return pm_diag_set(diag, od->f[i].state == F_FAILED ? PM_EIO : PM_EINTERNAL,
                               od->f[i].final, 0, "output not complete: nothing was replaced");
        }
    }
    char *bak[PM_OUTDIR_MAX_FILES] = {0};
    int kind[PM_OUTDIR_MAX_FILES] = {0};
    /* the backups, the renames and any roll-back all happen with the stop signals held back
     * and the commit lock taken (pm_outdir_stop waits for it), so no signal finds a file
     * renamed away */
    sigset_t block, old;
    sigemptyset(&block);
    sigaddset(&block, SIGINT);
    sigaddset(&block, SIGTERM);
    sigaddset(&block, SIGHUP);
    sigaddset(&block, SIGQUIT);
    pthread_sigmask(SIG_BLOCK, &block, &old);
    pthread_mutex_lock(&g_commit);
    pm_err_t rc = take_backups(od, bak, kind, diag);
    size_t done = 0;
    for (; !rc && done < od->nf; done++) {
        test_pause(done);
        int fail = test_env_is("PM_TEST_COMMIT_FAIL", done + 1)
                       ? (errno = EIO, 1)
                       : rename(od->f[done].tmp, od->f[done].final);
        if (fail != 0) {
            int e = errno;
            rc = pm_diag_set(diag, PM_EIO, od->f[done].final, 0,
                             "cannot put the output in place: %s; the earlier files were "
                             "restored",
                             strerror(e));
            break;
        }
    }
    if (rc) {
        roll_back(od, bak, kind, done);
    } else {
        for (size_t j = 0; j < od->nf; j++) {
            od->f[j].state = F_COMMITTED;
            reg_drop(od->f[j].slot);
            od->f[j].slot = -1;
        }
        od->committed = 1;
        atomic_store(&g_replaced, 1);
    }
    for (size_t i = 0; i < od->nf; i++) {
        if (bak[i]) {
            if (!rc || kind[i] == BAK_LINK) {
                (void)unlink(bak[i]); /* after a roll-back by rename it no longer exists */
            }
            free(bak[i]);
        }
    }
    sync_dir(od->dir);
    pthread_mutex_unlock(&g_commit);
    pthread_sigmask(SIG_SETMASK, &old, NULL);
    return rc;
}

/* ---- the lock of DIR --------------------------------------------------------------------------
 */
#define LOCK_NAME ".pairmap.lock"

/* Reads "PID HOST" from a lock file; 0 when it does not hold that. */
static int read_lock(const char *path, long *pid, char *host, size_t hsize) {
    int fd = open(path, O_RDONLY | O_CLOEXEC | O_NOFOLLOW);
    if (fd < 0) {
        return 0;
    }
    char buf[512];
    ssize_t n = read(fd, buf, sizeof buf - 1);
    close(fd);
    if (n <= 0) {
        return 0;
    }
    buf[n] = '\0';
    char *end = NULL;
    errno = 0;
    long p = strtol(buf, &end, 10);
    if (errno || end == buf || p <= 0 || *end != ' ') {
        return 0;
    }
    size_t h = strcspn(end + 1, "\n");
    if (h == 0 || h >= hsize || end[1 + h] != '\n') {
        return 0;
    }
    memcpy(host, end + 1, h);
    host[h] = '\0';
    *pid = p;
    return 1;
}

static void this_host(char *host, size_t size) {
    if (gethostname(host, size) != 0) {
        snprintf(host, size, "localhost");
    }
    host[size - 1] = '\0';
    for (char *c = host; *c; c++) {
        if ((unsigned char)*c <= ' ' || *c == 0x7f) {
            *c = '_'; /* one line, one field */
        }
    }
}

/* Creates the lock exclusively with our pid and host; 0, or the errno. */
static int create_lock(const char *path, const char *host) {
    /* created and registered under g_commit, as the temporary files are: a signal's clean-up
     * (pm_outdir_stop, on the CLI's signal thread) runs before or after both, never between
     * them, so it cannot miss a lock that exists (test_errors_output.sh's signal at any
     * moment found one left once) */
    pthread_mutex_lock(&g_commit);
    int fd = open(path, O_WRONLY | O_CREAT | O_EXCL | O_CLOEXEC, 0666);
    if (fd < 0) {
        int e = errno;
        pthread_mutex_unlock(&g_commit);
        return e;
    }
    memcpy(g_lock, path, strlen(path) + 1);
    g_lock_used = 1; /* from here on every way out removes it */
    pthread_mutex_unlock(&g_commit);
    char line[400];
    int n = snprintf(line, sizeof line, "%ld %s\n", (long)getpid(), host);
    int e = 0;
    if (n <= 0 || write(fd, line, (size_t)n) != (ssize_t)n) {
        e = errno ? errno : EIO;
    }
    if (close(fd) != 0 && !e) {
        e = errno;
    }
    if (e) {
        pthread_mutex_lock(&g_commit);
        (void)unlink(path);
        g_lock_used = 0;
        pthread_mutex_unlock(&g_commit);
    }
    return e;
}

pm_err_t pm_outdir_lock(pm_outdir_t *od, char *note, size_t note_size, pm_diag_t *diag) {
    if (note_size) {
        note[0] = '\0';
    }
    if (od->locked || g_lock_used) {
        return pm_diag_set(diag, PM_EINTERNAL, od->dir, 0, "a lock is held already");
    }
    char *path = join(od->dir, LOCK_NAME, "", "");
    if (!path) {
        return pm_diag_set(diag, PM_EIO, od->dir, 0, "output path too long");
    }
    char host[256];
    this_host(host, sizeof host);
    pm_err_t rc = PM_OK;
    for (int attempt = 0; attempt < 2; attempt++) {
        int e = create_lock(path, host);
        if (e == 0) {
            od->locked = 1;
            break;
        }
        if (e != EEXIST) {
            rc = pm_diag_set(diag, PM_EIO, path, 0, "cannot create the lock file: %s", strerror(e));
            break;
        }
        long pid = 0;
        char other[256];
        int known = read_lock(path, &pid, other, sizeof other);
        int dead = known && strcmp(other, host) == 0 && kill((pid_t)pid, 0) != 0 && errno == ESRCH;
        if (!dead || attempt > 0) {
            rc = known ? pm_diag_set(diag, PM_EIO, od->dir, 0,
                                     "the output directory is in use by another run (process "
                                     "%ld on %s holds %s); wait for it, or remove the lock if "
                                     "that run is gone",
                                     pid, other, LOCK_NAME)
                       : pm_diag_set(diag, PM_EIO, od->dir, 0,
                                     "the output directory is locked (%s exists but names no "
                                     "process); remove it if no run uses the directory",
                                     LOCK_NAME);
            break;
        }
        /* stale: its process is gone. Renamed aside first, so that of two runs finding it only
         * one takes it away; the other then finds the winner's lock. */
        char tail[64];
        snprintf(tail, sizeof tail, ".stale.%ld", (long)getpid());
        char *aside = join(od->dir, LOCK_NAME, tail, "");
        long pid2 = 0;
        char other2[256];
        if (aside && rename(path, aside) == 0) {
            if (read_lock(aside, &pid2, other2, sizeof other2) && pid2 == pid &&
                strcmp(other2, other) == 0) {
                (void)unlink(aside);
                snprintf(note, note_size,
                         "removed a stale lock of process %ld on %s, which no longer runs", pid,
                         other);
            } else { /* another run's fresh lock: put it back */
                (void)linkat(AT_FDCWD, aside, AT_FDCWD, path, 0);
                (void)unlink(aside);
            }
        }
        free(aside);
    }
    free(path);
    return rc;
}

void pm_outdir_free(pm_outdir_t *od) {
    if (!od) {
        return;
    }
    for (size_t i = 0; i < od->nf; i++) {
        outfile *f = &od->f[i];
        if (f->fp) {
            fclose(f->fp);
        }
        if (f->state != F_COMMITTED && f->tmp) {
            (void)unlink(f->tmp);
        }
        reg_drop(f->slot);
        free(f->tmp);
        free(f->final);
    }
    if (od->locked) {
        (void)unlink(g_lock);
        g_lock_used = 0;
    }
    if (od->made) {
        if (!od->committed) {
            remove_made_dirs();
        }
        g_made_used = 0;
    }
    free(od->dir);
    free(od);
}
