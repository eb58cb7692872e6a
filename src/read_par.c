/* Parallel reading of a regular file: see the comment below. The chunks are read with the
 * long and lines readers of src/read_long.c; the hash with src/filehash.c. */
#include "input_internal.h"
#include "parallel.h"

#include <errno.h>
#include <pthread.h>
#include <stdatomic.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

/* ==== parallel reading of a regular file ======================================================
 * A long or lines file of some size is cut into chunks at line ends and each chunk is read by
 * its own thread into its own table; the tables are then appended in file order, which gives
 * exactly the table one serial pass builds (rows, item and respondent order, first lines).
 * Anything unusual (a chunk that fails for any reason, a record that spans a cut, an item with
 * two categories in different chunks) makes the caller read the whole file again serially, so
 * every message and exit status stays what the serial reader gives. The SHA-256 of the file is
 * computed by one more thread reading it in order. */

#define PAR_MIN_CHUNK (8u << 20) /* bytes per chunk at least */
#define PAR_MAX 16

typedef struct {
    pm_i_par_shared *ps;
    pm_table_t *t;
    pm_i_reader rd;
    pm_i_csv_opts co;
    pm_diag_t diag;
    pm_err_t rc;
    int ran;
} par_chunk;

/* Reads chunk c (k >= 1) once the first chunk has published the columns. */
static void par_chunk_run(par_chunk *c) {
    pm_i_par_shared *ps = c->ps;
    pthread_mutex_lock(&ps->mu);
    while (ps->state == 0) {
        pthread_cond_wait(&ps->cv, &ps->mu);
    }
    int state = ps->state;
    if (state == 1) {
        c->rd = ps->tmpl; /* columns and delimiter found by the first chunk */
        c->co.sep = ps->sep;
    }
    pthread_mutex_unlock(&ps->mu);
    c->ran = 1;
    if (state != 1 || pm_i_par_stopped(ps)) {
        c->rc = PM_EINTERNAL;
        return;
    }
    c->rd.t = c->t;
    c->rd.co = &c->co;
    pm_i_reader_bound(&c->rd);
    c->rd.publisher = 0;
    c->rd.started = 1;
    c->co.lines_fn = pm_i_read_lines;
    c->rc = pm_i_csv_stream(NULL, &c->co, pm_i_read_record, &c->rd, &c->diag);
    if (c->rc) {
        atomic_store(&ps->stop, 1);
    }
}

/* The chunks after the first are taken in order from a counter by every thread (the calling
 * one too, once its first chunk is read), so a thread slowed by the hash thread or the
 * machine simply reads fewer of them. */
typedef struct {
    par_chunk *ch;
    size_t n;
    atomic_size_t next;
} par_pool;

static void par_pool_work(par_pool *pool) {
    for (;;) {
        size_t k = atomic_fetch_add(&pool->next, 1);
        if (k >= pool->n) {
            break;
        }
        par_chunk_run(&pool->ch[k]);
    }
}

static void *par_worker_main(void *arg) {
    par_pool_work(arg);
    return NULL;
}

/* The first cut point at or after want: just past a '\n'. 0 when there is none before limit. */
static uint64_t par_cut(int fd, uint64_t want, uint64_t limit) {
    char buf[1 << 16];
    uint64_t at = want - 1; /* a '\n' right before want makes want itself a line start */
    while (at < limit) {
        ssize_t k = pread(fd, buf, sizeof buf, (off_t)at);
        if (k < 0 && errno == EINTR) {
            continue;
        }
        if (k <= 0) {
            return 0;
        }
        const char *nl = memchr(buf, '\n', (size_t)k);
        if (nl) {
            uint64_t cut = at + (uint64_t)(nl - buf) + 1;
            return cut < limit ? cut : 0;
        }
        at += (uint64_t)k;
    }
    return 0;
}

/* Appends chunk table c to t (see above). base: lines before the chunk. Returns PM_OK,
 * PM_ENOMEM, or PM_EINTERNAL when the chunks disagree (read serially then). */
/* The rows of one chunk, copied into the table after every chunk is appended (on all
 * threads): respondent numbers shifted by r0, item ids mapped. */
typedef struct {
    pm_table_t *t;
    const pm_table_t *c;
    uint32_t *item_map; /* owned */
    size_t dst;
    uint32_t r0;
    size_t nr;        /* the chunk's respondents (runs or anonymous lines), from r0 */
    uint64_t base;    /* lines before the chunk */
    pm_table_t **own; /* where the chunk's table is held: freed once copied (on all threads) */
} par_rows;

static int par_rows_copy(void *ud, size_t k, unsigned th) {
    (void)th;
    const par_rows *pr = (const par_rows *)ud + k;
    pm_table_t *t = pr->t;
    const pm_table_t *c = pr->c;
    if (pr->nr) {
        if (c->resp_weight) { /* only with weights */
            memcpy(t->resp_weight + pr->r0, c->resp_weight, pr->nr * sizeof(double));
        }
        memcpy(t->resp_has_item + pr->r0, c->resp_has_item, pr->nr);
        for (size_t r = 0; r < pr->nr; r++) {
            t->resp_line[pr->r0 + r] = c->resp_line[r] + pr->base;
        }
    }
    uint32_t *rr = pr->t->row_resp + pr->dst, *ri = pr->t->row_item + pr->dst;
    const uint32_t *cr = pr->c->row_resp, *ci = pr->c->row_item;
    for (size_t i = 0; i < pr->c->n_rows; i++) {
        rr[i] = cr[i] + pr->r0;
        ri[i] = pr->item_map[ci[i]];
    }
    if (pr->t->row_tag && pr->c->n_rows) { /* every chunk numbers the merge file alike */
        memcpy(pr->t->row_tag + pr->dst, pr->c->row_tag, pr->c->n_rows * sizeof(uint32_t));
    }
    pm_table_free(*pr->own);
    *pr->own = NULL;
    return 0;
}

static pm_err_t par_append(pm_table_t *t, pm_table_t *c, uint64_t base, par_rows *rows_job) {
    pm_err_t rc = PM_ENOMEM;
    int64_t *cat_map = pm_i_malloc(c->cats.count ? c->cats.count : 1, sizeof *cat_map);
    uint32_t *item_map = pm_i_malloc(c->items.count ? c->items.count : 1, sizeof *item_map);
    if (!cat_map || !item_map) {
        goto done;
    }
    for (size_t k = 0; k < c->cats.count; k++) {
        if ((cat_map[k] = pm_i_strtab_intern(&t->cats, c->cats.str[k], c->cats.len[k], NULL)) < 0) {
            goto done;
        }
    }
    for (size_t i = 0; i < c->items.count; i++) {
        int64_t g = pm_i_strtab_find(&t->items, c->items.str[i], c->items.len[i]);
        int32_t lc = c->item_cat[i] >= 0 ? (int32_t)cat_map[c->item_cat[i]] : -1;
        if (g < 0) {
            if ((g = pm_i_strtab_intern(&t->items, c->items.str[i], c->items.len[i], NULL)) < 0) {
                goto done;
            }
            if ((size_t)g >= t->item_cap) {
                size_t c2 = t->item_cap;
                if (pm_i_grow((void **)&t->item_cat, &t->item_cap, (size_t)g + 1,
                              sizeof(int32_t)) ||
                    pm_i_grow((void **)&t->item_line, &c2, (size_t)g + 1, sizeof(uint64_t))) {
                    goto done;
                }
            }
            t->item_cat[g] = lc;
            t->item_line[g] = c->item_line[i] + base;
        } else if (lc >= 0) {
            if (t->item_cat[g] < 0) {
                t->item_cat[g] = lc;
                t->item_line[g] = c->item_line[i] + base;
            } else if (t->item_cat[g] != lc) {
                rc = PM_EINTERNAL; /* two categories: the serial reader names the lines */
                goto done;
            }
        }
        item_map[i] = (uint32_t)g;
    }
    /* respondents: runs of ids (or anonymous lines) numbered after t's */
    size_t r0 = (size_t)t->stats.respondents, nr = (size_t)c->stats.respondents;
    if (r0 + nr >= UINT32_MAX - 1 || (t->n_anon && c->run_n) || (t->run_n && c->n_anon)) {
        rc = PM_EINTERNAL;
        goto done;
    }
    if (pm_i_grow_respondents(t, r0 + nr)) {
        goto done;
    }
    /* the respondents' arrays are copied with the rows, later (par_rows_copy); the runs are
     * handed over */
    rows_job->nr = nr;
    rows_job->base = base;
    if (c->run_n) {
        t->run_segs[t->n_run_segs++] = /* room for every chunk (par_append_all) */
            (pm_i_run_seg){c->run_buf, c->run_off, c->run_len, c->run_hash, c->run_n, t->run_n};
        c->run_buf = NULL;
        c->run_off = NULL;
        c->run_len = NULL;
        c->run_hash = NULL;
        t->run_n += c->run_n;
    }
    t->n_anon += c->n_anon;
    if (t->n_rows + c->n_rows > t->rows_cap) { /* the caller made room for every row */
        rc = PM_EINTERNAL;
        goto done;
    }
    rows_job->t = t; /* copied later, on all threads */
    rows_job->c = c;
    rows_job->item_map = item_map;
    item_map = NULL;
    rows_job->dst = t->n_rows;
    rows_job->r0 = (uint32_t)r0;
    t->n_rows += c->n_rows;
    t->stats.respondents += c->stats.respondents;
    t->stats.records += c->stats.records;
    t->stats.rows += c->stats.rows;
    t->stats.empty_items += c->stats.empty_items;
    t->stats.dropped_rows += c->stats.dropped_rows;
    t->stats.merged_rows += c->stats.merged_rows;
    for (size_t i = 0; i < t->drop.count && i < c->drop.count; i++) {
        t->drop_hit[i] |= c->drop_hit[i];
    }
    for (size_t i = 0; i < t->merge_from.count && i < c->merge_from.count; i++) {
        t->merge_hit[i] |= c->merge_hit[i];
    }
    rc = PM_OK;
done:
    free(cat_map);
    free(item_map);
    return rc;
}

/* The number of chunks to read file fd (size bytes) in, and their starts in cut[0..n) (cut[n]:
 * the end); 0 when it is not worth reading in parallel. */
static size_t par_plan(int fd, uint64_t size, const pm_input_opts_t *o, unsigned threads,
                       uint64_t cut[PAR_MAX + 1]) {
    /* up to four chunks per thread, handed out as threads come free */
    uint64_t nc = size / (o->chunk_bytes ? o->chunk_bytes : PAR_MIN_CHUNK);
    nc = nc < (uint64_t)threads * 4 ? nc : (uint64_t)threads * 4;
    nc = nc < PAR_MAX ? nc : PAR_MAX;
    if (nc < 2 || threads < 2 || o->format == PM_FORMAT_WIDE) {
        return 0;
    }
    /* the first chunk, which the calling thread reads into the table itself (the others are
     * copied into it), is as long as the others the remaining threads read meanwhile: about
     * (nc - threads) / threads of the nc parts; the parts after it are handed out one by one */
    uint64_t first = nc > 2 * (uint64_t)threads ? (nc - threads) / threads : 1;
    size_t n = 0;
    cut[n++] = 0;
    for (uint64_t k = first; k < nc; k++) {
        uint64_t want = size / nc * k;
        if (want <= cut[n - 1]) {
            continue;
        }
        uint64_t c = par_cut(fd, want, size);
        if (c > cut[n - 1]) {
            cut[n++] = c;
        }
    }
    if (n < 2) {
        return 0;
    }
    cut[n] = UINT64_MAX; /* the last chunk reads to the end, as a serial read would */
    return n;
}

/* Sets up the n chunks (the first reads into t, the others into tables of their own). -1 when
 * a table cannot be made. */
static int par_chunks_init(par_chunk *ch, size_t n, pm_i_par_shared *ps, const uint64_t *cut,
                           int fd, _Atomic uint64_t *done_bytes, const pm_input_opts_t *o,
                           pm_table_t *t, const pm_i_csv_opts *co) {
    for (size_t k = 0; k < n; k++) {
        ch[k].ps = ps;
        pm_diag_clear(&ch[k].diag);
        if (k == 0) {
            ch[k].t = t;
        } else if (pm_i_table_new(o, t->source, &ch[k].t, &ch[k].diag)) {
            return -1;
        }
        ch[k].t->defer = true;
        ch[k].co = *co;
        ch[k].co.sha = NULL;
        ch[k].co.ranged = true;
        ch[k].co.fd = fd;
        ch[k].co.start = cut[k];
        ch[k].co.end = cut[k + 1];
        ch[k].co.shared_done = done_bytes;
        if (k) {
            ch[k].co.progress = NULL; /* the first chunk's thread reports for all */
        }
    }
    ps->co0 = &ch[0].co;
    return 0;
}

/* Reads every chunk: the first on this thread (it resolves the columns and lets the others
 * start), the others on nworkers threads and this one. 1 when every chunk read well. */
static int par_run(par_pool *pool, size_t nworkers, const pm_input_opts_t *o, pm_table_t *t) {
    par_chunk *ch = pool->ch;
    pm_i_par_shared *ps = ch[0].ps;
    pthread_t th[PAR_MAX];
    int started[PAR_MAX];
    memset(started, 0, sizeof started);
    for (size_t w = 0; w < nworkers; w++) { /* a thread that cannot start: the others read more */
        started[w] = pthread_create(&th[w], NULL, par_worker_main, pool) == 0;
    }
    memset(&ch[0].rd, 0, sizeof ch[0].rd);
    ch[0].rd.t = t;
    ch[0].rd.o = o;
    ch[0].rd.par = ps;
    ch[0].rd.co = &ch[0].co;
    ch[0].rd.publisher = 1;
    ch[0].co.lines_fn = pm_i_read_lines;
    ch[0].rc = pm_i_csv_stream(NULL, &ch[0].co, pm_i_read_record, &ch[0].rd, &ch[0].diag);
    /* a first chunk shorter than PM_I_PAR_START_LINE lines: the others start now, if it read
     * well */
    pm_i_par_publish(ps, &ch[0].rd, ch[0].rc == PM_OK && ch[0].rd.started);
    if (ch[0].rc) {
        atomic_store(&ps->stop, 1);
    }
    par_pool_work(pool); /* then the rest, beside the workers */
    for (size_t w = 0; w < nworkers; w++) {
        if (started[w]) {
            pthread_join(th[w], NULL);
        }
    }
    int ok = ch[0].rc == PM_OK && ch[0].rd.started;
    for (size_t k = 1; k < pool->n && ok; k++) {
        ok = ch[k].ran && ch[k].rc == PM_OK;
    }
    return ok;
}

/* Appends the tables of chunks 1..n-1 to t (the first chunk's) and copies their rows on all
 * threads; *bytes and *lines get the totals. 1 when done, 0 when the chunks disagree, -1 when
 * out of memory (diag set). The chunks' tables are freed. */
static int par_append_all(pm_table_t *t, par_chunk *ch, size_t n, unsigned threads,
                          uint64_t *bytes_out, uint64_t *lines_out, pm_diag_t *diag) {
    par_rows rows[PAR_MAX];
    memset(rows, 0, sizeof rows);
    int ok = 1, result = 1;
    uint64_t base = ch[0].co.lines, bytes = ch[0].co.bytes;
    size_t total = t->n_rows;
    for (size_t k = 1; k < n; k++) {
        total += ch[k].t->n_rows;
    }
    if (pm_i_grow_rows(t, total) || !(t->run_segs = pm_i_calloc(n, sizeof *t->run_segs))) {
        ok = 0;
        result = -1;
        pm_diag_set(diag, PM_ENOMEM, t->source, 0, "out of memory");
    }
    for (size_t k = 1; k < n && ok; k++) {
        pm_err_t rc = par_append(t, ch[k].t, base, &rows[k - 1]);
        rows[k - 1].own = &ch[k].t;
        if (rc == PM_ENOMEM) {
            pm_diag_set(diag, PM_ENOMEM, t->source, 0, "out of memory");
            result = -1;
            ok = 0;
            break;
        }
        ok = rc == PM_OK;
        base += ch[k].co.lines;
        bytes += ch[k].co.bytes;
    }
    if (ok) {
        ok = pm_i_parallel(threads, n - 1, par_rows_copy, rows) == 0;
    }
    for (size_t k = 1; k < n; k++) {
        free(rows[k - 1].item_map);
        pm_table_free(ch[k].t);
        ch[k].t = NULL;
    }
    *bytes_out = bytes;
    *lines_out = base;
    return ok ? 1 : result < 0 ? -1 : 0;
}

/* After every chunk read well: t gets the others' tables and is finished, the hash is taken
 * or handed to t (defer_hash). 1, 0 (read serially) or -1 (out of memory, diag set). */
static int par_finish(pm_table_t *t, par_chunk *ch, size_t n, unsigned threads,
                      const pm_input_opts_t *o, pm_i_csv_opts *co, pm_i_hash_job *hj,
                      pm_diag_t *diag) {
    uint64_t bytes, base;
    int result = par_append_all(t, ch, n, threads, &bytes, &base, diag);
    int ok = result == 1;
    result = result < 0 ? -1 : 0;
    if (ok) {
        co->bytes = bytes;
        co->lines = base;
        co->sep_used = ch[0].co.sep_used;
    }
    if (ok) { /* merging runs of ids can fail (weights); the serial read says where */
        pm_diag_t fdg;
        pm_diag_clear(&fdg);
        t->stats.bytes = bytes;
        t->stats.lines = base;
        if (pm_i_table_finish(t, o, &fdg) != PM_OK) {
            ok = 0;
            if (fdg.code == PM_ENOMEM) {
                *diag = fdg;
                result = -1;
            }
        }
    }
    pm_i_hash_job_expect(hj, bytes);
    uint64_t hashed;
    if (!ok) {
        pm_i_hash_job_cancel(hj);
    } else if (o->defer_hash) {
        t->hash_job = hj; /* pm_table_wait_hash finishes it */
    } else if (!pm_i_hash_job_end(hj, t->stats.sha256, &hashed)) {
        ok = 0; /* the file changed while it was read, or could not be hashed */
    }
    if (ok) {
        t->read_chunks = (unsigned)n;
        result = 1;
    }
    return result;
}

int pm_i_read_par(FILE *fp, uint64_t size, const pm_input_opts_t *o, pm_table_t *t,
                  pm_i_csv_opts *co, pm_diag_t *diag) {
    unsigned threads = o->threads;
    if (threads == 0) {
        long nproc = sysconf(_SC_NPROCESSORS_ONLN);
        threads = nproc > 0 ? (unsigned)nproc : 1;
    }
    int fd = fileno(fp);
    uint64_t cut[PAR_MAX + 1];
    size_t n = par_plan(fd, size, o, threads, cut);
    if (n == 0) {
        return 0;
    }
    pm_i_par_shared ps;
    memset(&ps, 0, sizeof ps);
    pthread_mutex_init(&ps.mu, NULL);
    pthread_cond_init(&ps.cv, NULL);
    atomic_init(&ps.stop, 0);
    _Atomic uint64_t done_bytes;
    atomic_init(&done_bytes, 0);
    par_chunk ch[PAR_MAX];
    memset(ch, 0, sizeof ch);
    par_pool pool;
    pool.ch = ch;
    pool.n = n;
    atomic_init(&pool.next, 1);
    size_t nworkers = threads - 1 < n - 1 ? threads - 1 : n - 1;
    int result = 0;
    pm_i_hash_job *hj = NULL;
    if (par_chunks_init(ch, n, &ps, cut, fd, &done_bytes, o, t, co) == 0 &&
        (hj = pm_i_hash_job_start(fd, o->defer_hash)) != NULL) {
        if (par_run(&pool, nworkers, o, t)) {
            result = par_finish(t, ch, n, threads, o, co, hj, diag);
        } else {
            pm_i_hash_job_cancel(hj); /* the hash is not needed */
        }
    }
    for (size_t k = 1; k < n; k++) {
        pm_table_free(ch[k].t);
    }
    pthread_cond_destroy(&ps.cv);
    pthread_mutex_destroy(&ps.mu);
    return result;
}
