/* Atomic output into a directory (src/outfile.c): every output file is first written to a
 * temporary file in the same directory, flushed, synced and closed with each step checked;
 * only when all of them are complete are they renamed into place, one after another. A run
 * that fails before that, or is interrupted, leaves the files already in the directory as they
 * were and no temporary file behind.
 *
 * Typical use:
 *   pm_outdir_t *od;  FILE *fp;
 *   pm_outdir_open("out", &od, &diag);              creates "out" (and parents) if missing
 *   pm_outdir_create(od, "nodes.csv", &fp, &diag);  -> out/.nodes.csv.<pid>.<k>.tmp
 *   ... write to fp ...
 *   pm_outdir_finish(od, fp, &diag);                fflush, fsync, fclose (checked)
 *   pm_outdir_commit(od, &diag);                    all renamed into place
 *   pm_outdir_free(od);                             removes whatever was not committed
 *
 * Temporary file names are kept in a process-wide registry so that a signal handler can remove
 * them (pm_outdir_remove_temporaries, async-signal-safe). The registry holds at most
 * PM_OUTDIR_MAX_FILES files at a time. Not thread-safe: one thread writes the outputs. */
#ifndef PAIRMAP_OUTFILE_H
#define PAIRMAP_OUTFILE_H

#include <stdio.h>

#include "pairmap/error.h"

#ifdef __cplusplus
extern "C" {
#endif

#define PM_OUTDIR_MAX_FILES 16

typedef struct pm_outdir pm_outdir_t;

/* Opens dir for output, creating it and its missing parents (mode 0777 & ~umask). Fails with
 * PM_EIO when dir exists but is not a directory, or cannot be created or written (checked by
 * creating and removing a probe file). *out owns the handle (pm_outdir_free). Directories it
 * created are removed again by pm_outdir_free when nothing was committed and they are empty.
 * Test hook, as the allocators have theirs: the environment variable PM_TEST_OUTPUT_FAULT, read
 * here, injects the write faults that otherwise need a mount or a user other than root:
 * "readonly" refuses to create a missing directory or any file with EACCES (what a directory of
 * mode 0555 does), "full:N" fails pm_outdir_finish with ENOSPC once the set's finished files
 * hold more than N bytes (what a full file system does). Never set outside tests. */
pm_err_t pm_outdir_open(const char *dir, pm_outdir_t **out, pm_diag_t *diag);

/* Creates the temporary file for output name (a plain file name, no '/') and opens it for
 * writing (mode 0666 & ~umask, as an ordinary new file). *fp belongs to od: close it with
 * pm_outdir_finish, never fclose. Where the file system takes O_DIRECT the stream writes its
 * full 1 MiB blocks around the page cache and only the last partial block through it
 * (src/outfile_direct.h); fileno(*fp) is then -1. Errors: PM_EIO, PM_EUSAGE (bad or repeated
 * name, too many files). */
pm_err_t pm_outdir_create(pm_outdir_t *od, const char *name, FILE **fp, pm_diag_t *diag);

/* Completes the file fp of od: fflush, ferror, the direct stream's last block, fsync and
 * fclose, each checked. After an error
 * the file is closed all the same and the run cannot be committed. PM_EIO names the file. */
pm_err_t pm_outdir_finish(pm_outdir_t *od, FILE *fp, pm_diag_t *diag);

/* Renames every temporary file into place, in the order created, then syncs the directory.
 * Requires every file to be finished without error (else PM_EUSAGE/PM_EIO and nothing is
 * renamed). Should a rename fail part way, the entries that stood under the final names are
 * put back exactly (same inode; a symlink stays a symlink): they are kept beforehand by a hard
 * link, or renamed aside where no link can be made, and PM_EIO is returned. SIGINT, SIGTERM,
 * SIGHUP and SIGQUIT are held back, and pm_outdir_stop waits, from the backups to the end. */
pm_err_t pm_outdir_commit(pm_outdir_t *od, pm_diag_t *diag);

/* Takes DIR's lock: creates DIR/.pairmap.lock exclusively (O_CREAT | O_EXCL, as version-control
 * tools create theirs) holding "PID HOST\n". The lock is removed by pm_outdir_free, by
 * pm_outdir_stop and by pm_outdir_remove_temporaries, so every exit path but SIGKILL (or a
 * crash) removes it. A lock whose process no longer runs on this host is stale: it is replaced
 * and note (note_size bytes, may be 0) says so; otherwise PM_EIO with a message naming the
 * process and host that hold it. One lock per process. */
pm_err_t pm_outdir_lock(pm_outdir_t *od, char *note, size_t note_size, pm_diag_t *diag);

/* Removes the temporary files not committed (closing any still open), directories created and
 * left empty, and frees od. Accepts NULL. */
void pm_outdir_free(pm_outdir_t *od);

/* Removes every registered temporary file with unlink(2) only: safe to call from a signal
 * handler. The CLI's SIGINT/SIGTERM handler calls it before _exit. */
void pm_outdir_remove_temporaries(void);
/* For a thread that received a stop signal (not a handler): waits for a commit in progress,
 * removes the temporaries and returns 1 when a commit had replaced the outputs. The caller
 * then exits; the commit lock is never released. */
int pm_outdir_stop(void);

#ifdef __cplusplus
}
#endif
#endif
