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

#include "util.h"

#define PATH_CAP 4096
#define MAX_CREATED_DIRS 32

/* ---- the registry the signal handler reads ------------------------------------------------ */
/* A slot is published by writing the path first and setting used last, so a handler never
 * sees a half-written path. unlink(2) and rmdir(2) are async-signal-safe. */
static char g_tmp[PM_OUTDIR_MAX_FILES * 2][PATH_CAP];
static volatile sig_atomic_t g_tmp_used[PM_OUTDIR_MAX_FILES * 2];
static char g_dirs[MAX_CREATED_DIRS][PATH_CAP];
static volatile sig_atomic_t g_dirs_used[MAX_CREATED_DIRS];

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

static int dir_add(const char *path) {
    for (int i = 0; i < MAX_CREATED_DIRS; i++) {
        if (!g_dirs_used[i]) {
            memcpy(g_dirs[i], path, strlen(path) + 1);
            g_dirs_used[i] = 1;
            return i;
        }
    }
    return -1;
}

void pm_outdir_remove_temporaries(void) {
    for (int i = 0; i < PM_OUTDIR_MAX_FILES * 2; i++) {
        if (g_tmp_used[i]) {
            (void)unlink(g_tmp[i]);
        }
    }
    for (int i = MAX_CREATED_DIRS - 1; i >= 0; i--) {
        if (g_dirs_used[i]) {
            (void)rmdir(g_dirs[i]); /* only succeeds when empty */
        }
    }
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
    int state;
    int slot; /* registry slot of tmp */
} outfile;

struct pm_outdir {
    char *dir;
    int created[MAX_CREATED_DIRS]; /* registry slots of directories we created, in order */
    size_t n_created;
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
            if (mkdir(p, 0777) == 0) {
                int slot = od->n_created < MAX_CREATED_DIRS ? dir_add(p) : -1;
                if (slot >= 0) {
                    od->created[od->n_created++] = slot;
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
        int f = open(t, O_WRONLY | O_CREAT | O_EXCL | O_CLOEXEC, 0666);
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
    f->fp = fdopen(fd, "w");
    if (!f->fp) {
        int e = errno;
        close(fd);
        unlink(f->tmp);
        reg_drop(f->slot);
        free(f->tmp);
        free(f->final);
        return pm_diag_set(diag, PM_EIO, NULL, 0, "cannot open a stream: %s", strerror(e));
    }
    /* 1 MiB buffers: a 60 MB GraphML file in 60 writes, not 15,000 (stdio allocates it;
     * errors still show at the next flush, which pm_outdir_finish checks) */
    (void)setvbuf(f->fp, NULL, _IOFBF, (size_t)1 << 20);
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
    } else if (fsync(fileno(fp)) != 0 && errno != EINVAL) {
        e = errno;
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

pm_err_t pm_outdir_commit(pm_outdir_t *od, pm_diag_t *diag) {
    for (size_t i = 0; i < od->nf; i++) {
        if (od->f[i].state != F_DONE) {
            return pm_diag_set(diag, od->f[i].state == F_FAILED ? PM_EIO : PM_EINTERNAL,
                               od->f[i].final, 0, "output not complete: nothing was replaced");
        }
    }
    /* hard links to the files about to be replaced, so a failure part way can undo */
    char *bak[PM_OUTDIR_MAX_FILES] = {0};
    int bslot[PM_OUTDIR_MAX_FILES];
    pm_err_t rc = PM_OK;
    for (size_t i = 0; i < od->nf; i++) {
        bslot[i] = -1;
        struct stat st;
        if (lstat(od->f[i].final, &st) != 0 || !S_ISREG(st.st_mode)) {
            continue; /* nothing to keep (a non-file target makes the rename fail below) */
        }
        char tail[64];
        snprintf(tail, sizeof tail, ".%ld.bak", (long)getpid());
        bak[i] = join(od->dir, ".", od->f[i].name, tail);
        if (!bak[i]) {
            rc = pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
            goto undo_links;
        }
        bslot[i] = reg_add(bak[i]);
        (void)unlink(bak[i]);
        if (link(od->f[i].final, bak[i]) != 0) {
            reg_drop(bslot[i]);
            bslot[i] = -1;
            free(bak[i]);
            bak[i] = NULL; /* no hard links here: replace without a way back */
        }
    }
    sigset_t block, old;
    sigemptyset(&block);
    sigaddset(&block, SIGINT);
    sigaddset(&block, SIGTERM);
    sigaddset(&block, SIGHUP);
    sigaddset(&block, SIGQUIT);
    pthread_sigmask(SIG_BLOCK, &block, &old);
    pthread_mutex_lock(&g_commit);
    size_t done = 0;
    for (; done < od->nf; done++) {
        test_pause(done);
        if (rename(od->f[done].tmp, od->f[done].final) != 0) {
            int e = errno;
            rc = pm_diag_set(diag, PM_EIO, od->f[done].final, 0,
                             "cannot put the output in place: %s; the earlier files were "
                             "restored",
                             strerror(e));
            break;
        }
    }
    if (rc) {
        for (size_t j = 0; j < done; j++) { /* undo, newest first would not matter: distinct */
            if (bak[j]) {
                (void)rename(bak[j], od->f[j].final);
            } else {
                (void)unlink(od->f[j].final);
            }
        }
    } else {
        for (size_t j = 0; j < od->nf; j++) {
            od->f[j].state = F_COMMITTED;
            reg_drop(od->f[j].slot);
            od->f[j].slot = -1;
        }
        od->committed = 1;
        atomic_store(&g_replaced, 1);
    }
    sync_dir(od->dir);
    pthread_mutex_unlock(&g_commit);
    pthread_sigmask(SIG_SETMASK, &old, NULL);
undo_links:
    for (size_t i = 0; i < od->nf; i++) {
        if (bak[i]) {
            (void)unlink(bak[i]); /* after a roll-back it no longer exists: harmless */
            reg_drop(bslot[i]);
            free(bak[i]);
        }
    }
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
    for (size_t i = od->n_created; i-- > 0;) {
        int s = od->created[i];
        if (!od->committed) {
            (void)rmdir(g_dirs[s]);
        }
        g_dirs_used[s] = 0;
    }
    free(od->dir);
    free(od);
}
