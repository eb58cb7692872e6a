/* Text made on several threads and written in order (src/windows.h). */
#include "windows.h"

#include <string.h>

#include "pairmap/cooccur.h"
#include "parallel.h"
#include "util.h"

typedef struct {
    const pm_i_windows *w;
    size_t from, to;
    char *buf[PM_I_WINDOW_CHUNKS];
    size_t len[PM_I_WINDOW_CHUNKS], cap[PM_I_WINDOW_CHUNKS];
} window;

static int chunk_text(void *ud, size_t c, unsigned th) {
    (void)th;
    window *x = ud;
    const pm_i_windows *w = x->w;
    size_t b = x->from + c * w->chunk, end = b + w->chunk < x->to ? b + w->chunk : x->to;
    size_t room = 0;
    for (size_t i = b; i < end; i++) {
        room += w->room(w->ud, i);
    }
    if (pm_i_grow((void **)&x->buf[c], &x->cap[c], room ? room : 1, 1) != 0) {
        return 1; /* the window is written item by item instead */
    }
    char *o = x->buf[c];
    for (size_t i = b; i < end; i++) {
        o = w->make(w->ud, o, i);
    }
    x->len[c] = (size_t)(o - x->buf[c]);
    return 0;
}

void pm_i_write_windows(FILE *fp, const pm_i_windows *w) {
    window x;
    memset(&x, 0, sizeof x);
    x.w = w;
    const size_t per = w->chunk * PM_I_WINDOW_CHUNKS;
    for (size_t from = 0; from < w->n && !ferror(fp); from += per) {
        x.from = from;
        x.to = w->n - from < per ? w->n : from + per;
        size_t nc = (x.to - from + w->chunk - 1) / w->chunk;
        int rc = pm_i_parallel(w->threads ? w->threads : pm_cpu_count(), nc, chunk_text, &x);
        for (size_t c = 0; c < nc && !rc; c++) {
            fwrite(x.buf[c], 1, x.len[c], fp);
        }
        for (size_t i = from; rc && i < x.to; i++) {
            w->write_one(w->ud, fp, i);
        }
    }
    for (size_t c = 0; c < PM_I_WINDOW_CHUNKS; c++) {
        pm_i_free(x.buf[c]);
    }
}
