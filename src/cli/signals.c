/* Signal handling of every command, in one place (see cli.h). */
#include <pthread.h>
#include <signal.h>
#include <stdatomic.h>
#include <string.h>
#include <unistd.h>

#include "cli.h"
#include "pairmap/outfile.h"

/* ---- map: a sigwait thread ------------------------------------------------------------------
 * SIGINT, SIGTERM, SIGHUP and SIGQUIT are blocked before any thread starts, so every thread
 * inherits the mask; one thread receives them with sigwait and stops the run through
 * pm_outdir_stop, which waits for a commit in progress. SIGXFSZ is ignored: a write over the
 * file-size limit fails as an I/O error with the usual clean-up; SIGPIPE too: a closed stdout
 * fails its write with EPIPE. */
static sigset_t g_stop_set;
static atomic_int g_stop_sig; /* the signal received, published before pm_outdir_stop */
static pthread_t g_sig_thread;
static int g_sig_running; /* the sigwait thread started (main thread only) */

static void *signal_main(void *arg) {
    (void)arg;
    int sig = 0;
    while (sigwait(&g_stop_set, &sig) != 0) {
    }
    if (sig == SIGUSR2) {
        return NULL; /* pm_cli_signals_release: the run is over */
    }
    atomic_store(&g_stop_sig, sig);
    int replaced = pm_outdir_stop();
    const char *msg = replaced ? "\npairmap: interrupted after the outputs were replaced; the new "
                                 "files are kept\n"
                               : "\npairmap: interrupted; no output file was replaced\n";
    ssize_t w = write(STDERR_FILENO, msg, strlen(msg));
    (void)w;
    _exit(sig == SIGINT ? 130 : 143); /* README: 130 SIGINT, 143 SIGTERM, SIGHUP, SIGQUIT */
}

void pm_cli_signals_catch(void) {
    sigemptyset(&g_stop_set);
    sigaddset(&g_stop_set, SIGINT);
    sigaddset(&g_stop_set, SIGTERM);
    sigaddset(&g_stop_set, SIGHUP);
    sigaddset(&g_stop_set, SIGQUIT);
    sigaddset(&g_stop_set, SIGUSR2); /* sent by pm_cli_signals_release only */
    pthread_sigmask(SIG_BLOCK, &g_stop_set, NULL);
    signal(SIGXFSZ, SIG_IGN);
    signal(SIGPIPE, SIG_IGN); /* a closed stdout: EPIPE, exit 3, the lock removed on the way */
    if (pthread_create(&g_sig_thread, NULL, signal_main, NULL) == 0) {
        g_sig_running = 1;
    } else {
        pthread_sigmask(SIG_UNBLOCK, &g_stop_set, NULL); /* default action: better than none */
    }
}

/* Ends the sigwait thread (joined: nothing of it outlives the run, which valgrind checks) and
 * unblocks the stop signals, so one that came after the run's last step takes its default
 * action. */
void pm_cli_signals_release(void) {
    if (g_sig_running) {
        pthread_kill(g_sig_thread, SIGUSR2);
        pthread_join(g_sig_thread, NULL);
        g_sig_running = 0;
        sigset_t stop = g_stop_set;
        sigdelset(&stop, SIGUSR2);
        pthread_sigmask(SIG_UNBLOCK, &stop, NULL);
    }
}

void pm_cli_signals_settle(void) {
    while (atomic_load(&g_stop_sig)) {
        pause(); /* a signal came during the commit: its thread reports it and exits */
    }
}

/* ---- count and merge: one file, a handler ------------------------------------------------- */
static void on_signal(int sig) {
    pm_outdir_remove_temporaries();
    static const char msg[] = "\npairmap: interrupted; no output file was replaced\n";
    ssize_t w = write(STDERR_FILENO, msg, sizeof msg - 1);
    (void)w;
    _exit(sig == SIGINT ? 130 : 143);
}

void pm_cli_signals_shard(void) {
    struct sigaction sa;
    memset(&sa, 0, sizeof sa);
    sa.sa_handler = on_signal;
    sigemptyset(&sa.sa_mask);
    sigaction(SIGINT, &sa, NULL);
    sigaction(SIGTERM, &sa, NULL);
    sigaction(SIGHUP, &sa, NULL);
    sigaction(SIGQUIT, &sa, NULL);
}
