/* Text made on several threads and written in order (edges.csv's rows, map.graphml's edges,
 * map.html's long columns). */
#ifndef PM_WINDOWS_H
#define PM_WINDOWS_H

#include <stddef.h>
#include <stdio.h>

#define PM_I_WINDOW_CHUNKS 64 /* chunks per window */

/* Items 0 .. n-1: item i takes at most room(ud, i) bytes, make(ud, o, i) writes its text at o
 * and returns its end, write_one(ud, fp, i) writes it straight to fp (the same bytes). */
typedef struct {
    size_t n, chunk; /* items, and items per chunk of the parallel loop */
    size_t (*room)(void *ud, size_t i);
    char *(*make)(void *ud, char *o, size_t i);
    void (*write_one)(void *ud, FILE *fp, size_t i);
    void *ud;
    unsigned threads; /* threads the text is made on (0: one per core) */
} pm_i_windows;

/* Writes the items in order, in windows of PM_I_WINDOW_CHUNKS chunks: each chunk's text made
 * on w->threads threads into a buffer of its own (kept from window to window, so that its pages are
 * touched once), the buffers then written in order; a window where a chunk's buffer cannot
 * be had is written item by item with write_one instead. Stops between windows once fp has
 * an error. The bytes depend on the items only, never on the threads. */
void pm_i_write_windows(FILE *fp, const pm_i_windows *w);

#endif
