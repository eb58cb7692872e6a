/* `pairmap map`'s files (see cmd_map.h): edges.csv on an early thread from the end of the
 * graph stage, GraphML and nodes.csv on a second writer thread beside the SVG and the page,
 * run.json (pm_write_run_json), and the commit of the output directory. */
#include <stdbool.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "cmd_map.h"
#include "pairmap/htmlmap.h"
#include "pairmap/mapwrite.h"
#include "pairmap/write.h"

/* ---- run.json ------------------------------------------------------------------------------ */
/* What run.json's callbacks read. */
typedef struct {
    const pm_cli_t *c;
    const run_state *s;
} json_ud;

static void json_options(pm_json_t *j, const void *ud) {
    const pm_cli_t *c = ((const json_ud *)ud)->c;
    pm_json_begin_object(j, "options");
    for (size_t i = 0; i < c->nopts; i++) {
        const char *name = c->opt[i].name;
        if (c->opt[i].n > 1 || strcmp(name, "item") == 0 || strcmp(name, "drop-item") == 0 ||
            strcmp(name, "columns") == 0 || strcmp(name, "drop-value") == 0 ||
            strcmp(name, "skip-col") == 0) {
            pm_json_begin_array(j, name);
            for (size_t k = 0; k < c->opt[i].n; k++) {
                pm_json_string(j, NULL, c->opt[i].vals[k]);
            }
            pm_json_end_array(j);
        } else if (strcmp(name, "quiet") == 0 || strcmp(name, "no-header") == 0) {
            pm_json_bool(j, name, true);
        } else {
            pm_json_string(j, name, c->opt[i].vals[0]);
        }
    }
    pm_json_end_object(j);
}

static void json_counts_from(pm_json_t *j, const void *ud) {
    (void)ud;
    pm_cli_counts_json(j); /* --from-counts: the shard and the parts it holds */
}

static void json_segments(pm_json_t *j, const void *ud) {
    pm_cli_mapseg_json(&((const json_ud *)ud)->s->seg, j); /* --segment-col */
}

static const char *const files[] = {"map.graphml", "map.svg", "edges.csv", "nodes.csv", "run.json"};
static const char *const files_html[] = {"map.graphml", "map.svg",      "map.html", "edges.csv",
                                         "nodes.csv",   "clusters.csv", "run.json"};

static pm_err_t write_run_json(FILE *fp, const pm_cli_t *c, const net_opts *no,
                               const pm_select_opts_t *sel, const run_state *s, const pm_map_t *map,
                               pm_diag_t *d) {
    static const char *const formats[] = {"long", "lines", "wide"};
    json_ud ud = {c, s};
    const char *names[9];
    size_t nf = 0;
    for (size_t k = 0; k < 7; k++) {
        if (k != 2 || no->html) {
            names[nf++] = files_html[k];
        }
    }
    if (s->seg.n) {
        names[nf++] = "segments.csv";
        names[nf++] = "segments.svg";
    }
    pm_input_opts_t io;
    pm_cli_input_opts(c, &io);
    pm_run_report_t r = {
        .command = "map",
        .input = c->input,
        .options = json_options,
        .after_input = json_counts_from,
        .after_clusters = json_segments,
        .ud = &ud,
        .format = formats[io.format],
        .sel = sel,
        .pair_test = s->within ? "within" : "pooled",
        .pair_test_column = s->within,
        .seed = no->seed,
        .restarts = no->restarts,
        .resolution = no->resolution,
        .iterations = s->iterations,
        .source = pm_table_source(s->t),
        .stats = pm_table_stats(s->t),
        .map = map,
        .n_negative = s->n_negative,
        .names = s->names,
        .cluster_name = (const char *const *)s->cluster_name,
        .svg_drawn = s->svg.drawn,
        .svg_left_out = s->svg.left_out,
        .svg_edges_drawn = s->svg.edges_drawn,
        .files = names,
        .n_files = nf,
        .t_read = s->t_read,
        .t_count = s->t_count,
        .t_measures = s->t_measures,
        .t_graph = s->t_graph,
        .t_write = s->t_write,
    };
    return pm_write_run_json(fp, &r, d);
}

/* ---- the writer threads -------------------------------------------------------------------- */
/* Pushes what a finished file has written so far to the disk from the thread that wrote it,
 * while the other thread still writes; pm_outdir_finish flushes the stdio buffer, checks and
 * syncs again (cheap then), so every error still shows there, with its own errno. */
static void early_sync(FILE *fp) {
    int fd = fileno(fp);
    if (fd >= 0) { /* a direct stream (outfile.h) has no fd here; its full blocks are on disk */
        (void)fsync(fd);
    }
}

void pm_cli_map_early_join(run_state *s) {
    if (s->early.running) {
        pthread_join(s->early.th, NULL);
        s->early.running = 0;
    }
}

static pm_err_t write_edges(const run_state *s, FILE *fp, pm_diag_t *d) {
    return pm_write_edges_csv_on(fp, s->pp, s->inc, s->e, s->with_strat, s->strat, s->csv_flags,
                                 s->threads, d);
}

static void *early_main(void *arg) {
    run_state *s = arg;
    s->early.rc = write_edges(s, s->early.fp, &s->early.d);
    early_sync(s->early.fp);
    return NULL;
}

/* edges.csv (its rows and odds ratios made on --threads threads) on a thread of its own from the
 * end of the graph stage until all the other files are written beside it. */
void pm_cli_map_early_start(run_state *s, unsigned threads) {
    if (threads == 1) {
        return;
    }
    pm_diag_clear(&s->early.d);
    if (pm_outdir_create(s->od, "edges.csv", &s->early.fp, &s->early.d) != PM_OK) {
        s->early.fp = NULL; /* write_files tries again and reports */
        return;
    }
    s->early.running = pthread_create(&s->early.th, NULL, early_main, s) == 0;
    if (!s->early.running) {
        early_main(s); /* here, then */
    }
}

/* map.html's partner table, made on the second writer thread before the GraphML (the page is
 * written last, after the picture, on this thread) and handed over under a lock. */
typedef struct {
    pthread_mutex_t mu;
    pthread_cond_t cv;
    int want, done;
    double *cols;
    unsigned threads;
} html_cols;

typedef struct {
    const pm_map_t *map;
    FILE *graphml, *nodes;
    pm_err_t *rc_graphml, *rc_nodes;
    pm_diag_t *d_graphml, *d_nodes;
    html_cols *hc;
} side_job;

static const double *cols_wait(void *ud) {
    html_cols *hc = ud;
    pthread_mutex_lock(&hc->mu);
    while (hc->want && !hc->done) {
        pthread_cond_wait(&hc->cv, &hc->mu);
    }
    pthread_mutex_unlock(&hc->mu);
    return hc->cols;
}

/* PM_DEBUG_RUNS=FILE (for the reference checks, tests/ref/cluster_stability.py): every
 * Louvain run's community labels, one line per item: item, then one label per run, and a
 * first line naming the kept run. Not part of the output directory, not atomic. */
static void debug_runs(const run_state *s) {
    const char *path = getenv("PM_DEBUG_RUNS");
    const pm_clusters_t *cl = s->cl;
    if (!path || !*path || !cl->runs) {
        return;
    }
    FILE *f = fopen(path, "w");
    if (!f) {
        return;
    }
    fprintf(f, "kept,%u\n", cl->best_restart);
    for (size_t v = 0; v < s->n; v++) {
        pm_write_csv_field(f, s->names[v], PM_CSV_RAW);
        for (unsigned r = 0; r < cl->restarts; r++) {
            fprintf(f, ",%u", cl->runs[(size_t)r * s->n + v]);
        }
        fputc('\n', f);
    }
    fclose(f);
}

static void *side_writer(void *arg) {
    side_job *j = arg;
    html_cols *hc = j->hc;
    if (hc->want) {
        double *cols = pm_html_edge_columns(j->map, hc->threads);
        pthread_mutex_lock(&hc->mu);
        hc->cols = cols;
        hc->done = 1;
        pthread_cond_signal(&hc->cv);
        pthread_mutex_unlock(&hc->mu);
    }
    *j->rc_graphml = pm_write_graphml(j->graphml, j->map, j->d_graphml);
    early_sync(j->graphml);
    *j->rc_nodes = pm_write_nodes_csv(j->nodes, j->map, j->d_nodes);
    early_sync(j->nodes);
    return NULL;
}

/* ---- the files ------------------------------------------------------------------------------ */
static void thresholds_text(char *buf, size_t size, const pm_select_opts_t *sel) {
    int n = snprintf(buf, size, "together >= %u, q <= %g, %s associations", sel->min_count,
                     sel->max_q, pm_sign_name(sel->sign));
    if (sel->min_phi > 0 && n > 0 && (size_t)n < size) {
        n += snprintf(buf + n, size - (size_t)n, ", |phi| >= %g", sel->min_phi);
    }
    if (sel->min_lift > 0 && n > 0 && (size_t)n < size) {
        n += snprintf(buf + n, size - (size_t)n, ", lift >= %g", sel->min_lift);
    }
    if (sel->top_edges && n > 0 && (size_t)n < size) {
        snprintf(buf + n, size - (size_t)n, ", top %zu edges", sel->top_edges);
    }
}

/* What the four files are written from, and how they went. */
typedef struct {
    pm_map_t map;
    pm_svg_data_t sd;
    pm_svg_opts_t so;
    const char **cats;
    double *slo, *shi;
    char thr[256];
    int early; /* edges.csv comes from the early thread */
    unsigned nthreads;
    const pm_cli_t *c; /* for the page (map.html) */
    const net_opts *no;
    const pm_select_opts_t *sel;
    FILE *fps[4];
    pm_err_t wrc[4];
    pm_diag_t wd[4];
} files_job;

static void files_job_free(files_job *fj) {
    free(fj->cats);
    free(fj->slo);
    free(fj->shi);
}

/* The map's and the picture's data, and the share intervals of nodes.csv. */
static int files_prepare(files_job *fj, const pm_cli_t *c, const net_opts *no,
                         const pm_select_opts_t *sel, run_state *s) {
    pm_map_t map = {
        .inc = s->inc,
        .pairs = s->pp,
        .edges = s->e,
        .measure = sel->measure,
        .n = s->n,
        .item = s->item,
        .clusters = s->cl,
        .degree = s->degree,
        .xy = s->xy,
        .ea = s->ea,
        .eb = s->eb,
        .title = no->title,
        .csv_flags = s->csv_flags,
        .threads = s->threads,
        .cluster_name = (const char *const *)s->cluster_name,
        .n_seg = s->seg.n,
        .segcols = s->seg.cols,
        .segstats = s->seg.stats,
        .multiscale = s->ms,
    };
    fj->map = map;
    fj->c = c;
    fj->no = no;
    fj->sel = sel;
    fj->cats = malloc((s->n ? s->n : 1) * sizeof *fj->cats);
    fj->slo = malloc((s->n ? s->n : 1) * sizeof *fj->slo);
    fj->shi = malloc((s->n ? s->n : 1) * sizeof *fj->shi);
    if (!fj->cats || !fj->slo || !fj->shi) {
        return pm_cli_map_oom();
    }
    (void)pm_cli_threads(c, &fj->nthreads); /* validated earlier */
    fj->early = s->early.fp != NULL;        /* edges.csv is being written on its own thread */
    /* the share intervals of nodes.csv (a root search each) on all threads */
    (void)pm_assoc_share_intervals(s->inc, s->item, s->n, fj->nthreads, fj->slo, fj->shi, NULL);
    fj->map.share_low = fj->slo;
    fj->map.share_high = fj->shi;
    for (size_t v = 0; v < s->n; v++) {
        fj->cats[v] = s->inc->category[s->item[v]];
    }
    thresholds_text(fj->thr, sizeof fj->thr, sel);
    pm_svg_data_t sd = {
        .n_nodes = s->n,
        .name = s->names,
        .category = fj->cats,
        .share = s->share,
        .cluster = s->cluster_int,
        .strength = s->cl->inner, /* hubs: weighted degree inside the cluster */
        .n_edges = s->e->n,
        .ea = s->ea,
        .eb = s->eb,
        .weight = s->e->weight,
        .n_clusters = s->cl->n_clusters,
        .cluster_name = (const char *const *)s->cluster_name,
        .respondents = s->inc->N,
        .thresholds = fj->thr,
        .measure = pm_measure_name(sel->measure),
        .negative = s->negative,
        .n_sub = s->n_sub_labels,
        .sub_label = (const char *const *)s->sub_label,
        .sub_of = s->sub_of,
        .sub_size = s->sub_size,
    };
    fj->sd = sd;
    pm_svg_opts_init(&fj->so);
    fj->so.title = no->title;
    fj->so.width = (int)no->width;
    fj->so.height = (int)no->height;
    fj->so.draw = (size_t)no->draw;
    fj->so.color_by_category = no->color_by == 1;
    fj->so.seed = no->seed;
    fj->so.iterations = (int)no->iterations;
    fj->so.unit = pm_cli_get(c, "unit"); /* NULL: "respondents" */
    return 0;
}

/* The four files are created here (edges.csv already, when the early thread writes it), then
 * written on two threads beside that one: GraphML and nodes.csv on a second thread (plain
 * text, no igraph), the SVG (whose layout calls igraph, which is not thread-safe), the page
 * and, without the early thread, edges.csv on this one. */
static pm_err_t files_write(files_job *fj, run_state *s, pm_diag_t *d) {
    pm_err_t rc = PM_OK;
    for (size_t k = 0; k < 4 && !rc; k++) {
        if (k == 2 && fj->early) {
            fj->fps[k] = s->early.fp; /* being written */
            continue;
        }
        rc = pm_outdir_create(s->od, files[k], &fj->fps[k], d);
    }
    for (size_t k = 0; k < 4; k++) {
        fj->wrc[k] = PM_OK;
        pm_diag_clear(&fj->wd[k]);
    }
    if (rc) {
        return rc; /* files_finish joins the early thread */
    }
    html_cols hc = {.want = !pm_cli_flag(fj->c, "no-html"), .threads = fj->nthreads};
    pthread_mutex_init(&hc.mu, NULL);
    pthread_cond_init(&hc.cv, NULL);
    side_job job = {&fj->map,    fj->fps[0], fj->fps[3], &fj->wrc[0],
                    &fj->wrc[3], &fj->wd[0], &fj->wd[3], &hc};
    pthread_t th;
    int threaded = fj->nthreads != 1 && pthread_create(&th, NULL, side_writer, &job) == 0;
    if (!threaded) {
        side_writer(&job);
    }
    pm_cli_map_picture_t pic = {fj->c,    s->od,   fj->no->dir, fj->fps[1], &fj->sd, &fj->so,
                                &fj->map, fj->sel, s->t,        cols_wait,  &hc};
    fj->wrc[1] = pm_cli_map_picture(&pic, &s->svg, &fj->wd[1]); /* map.svg, map.html */
    early_sync(fj->fps[1]);
    if (!fj->early) {
        fj->wrc[2] = write_edges(s, fj->fps[2], &fj->wd[2]);
        early_sync(fj->fps[2]);
    }
    if (threaded) {
        pthread_join(th, NULL);
    }
    free(hc.cols);
    pthread_cond_destroy(&hc.cv);
    pthread_mutex_destroy(&hc.mu);
    return PM_OK;
}

/* The early thread's edges.csv, once it is done. */
static void files_early_done(files_job *fj, run_state *s) {
    pm_cli_map_early_join(s);
    if (fj->early) {
        fj->wrc[2] = s->early.rc;
        fj->wd[2] = s->early.d;
    }
}

/* The input's SHA-256 for run.json, before any output is replaced (a file that changed while
 * it was read is an error), then the four files finished in order; the first error wins. */
static pm_err_t files_finish(files_job *fj, run_state *s, const net_opts *no, pm_err_t rc,
                             pm_diag_t *d) {
    pm_diag_t hd;
    pm_diag_clear(&hd);
    if (!rc && pm_table_wait_hash(s->t, &hd) != PM_OK) {
        rc = hd.code;
        *d = hd;
    }
    for (size_t k = 0; k < 4; k++) {
        if (!fj->fps[k]) {
            continue;
        }
        if (!rc && fj->wrc[k]) {
            rc = fj->wrc[k];
            *d = fj->wd[k];
            if (d->code == PM_EIO && !d->file[0]) { /* one shape: DIR/NAME: cannot write ... */
                snprintf(d->file, sizeof d->file, "%s/%s", no->dir, files[k]);
                size_t ml = strlen(d->msg);
                snprintf(d->msg + ml, sizeof d->msg - ml,
                         "; check the free space and permissions there (no earlier output "
                         "was replaced)");
            }
        }
        pm_err_t rc2 = pm_outdir_finish(s->od, fj->fps[k], rc ? NULL : d);
        if (!rc) {
            rc = rc2;
        }
    }
    if (rc && d->code == PM_EIO && !d->file[0]) {
        snprintf(d->file, sizeof d->file, "%s", no->dir);
    }
    return rc;
}

int pm_cli_map_write_files(const pm_cli_t *c, const net_opts *no, const pm_select_opts_t *sel,
                           run_state *s) {
    pm_diag_t d;
    pm_diag_clear(&d);
    double t0 = pm_cli_now();
    files_job fj;
    memset(&fj, 0, sizeof fj);
    if (files_prepare(&fj, c, no, sel, s)) {
        files_job_free(&fj);
        return 4;
    }
    pm_err_t rc = files_write(&fj, s, &d);
    files_early_done(&fj, s);
    rc = files_finish(&fj, s, no, rc, &d);
    if (rc) {
        files_job_free(&fj);
        return pm_cli_fail(&d);
    }
    pm_segsvg_data_t segpic = {.n = s->n,
                               .item = s->item,
                               .cluster = s->cluster_int,
                               .share = s->share,
                               .name = (const char *const *)s->inc->name,
                               .n_clusters = s->cl->n_clusters,
                               .cluster_name = (const char *const *)s->cluster_name,
                               .max_q = sel->max_q,
                               .draw = (size_t)no->draw,
                               .title = no->title,
                               .respondents = s->inc->N,
                               .unit = pm_cli_get(c, "unit")};
    rc = pm_cli_mapseg_write(&s->seg, s->od, s->inc, segpic, s->csv_flags, &d);
    FILE *fp;
    if (rc == PM_OK && (rc = pm_outdir_create(s->od, "clusters.csv", &fp, &d)) == PM_OK) {
        rc = pm_write_clusters_csv(fp, &fj.map, no->resolution, &d);
        pm_err_t rc2 = pm_outdir_finish(s->od, fp, rc ? NULL : &d);
        if (!rc) {
            rc = rc2;
        }
    }
    if (rc != PM_OK) {
        files_job_free(&fj);
        return pm_cli_fail(&d);
    }
    debug_runs(s);
    s->t_write = pm_cli_now() - t0;
    rc = pm_outdir_create(s->od, files[4], &fp, &d);
    if (!rc) {
        rc = write_run_json(fp, c, no, sel, s, &fj.map, &d);
        pm_err_t rc2 = pm_outdir_finish(s->od, fp, rc ? NULL : &d);
        if (!rc) {
            rc = rc2;
        }
    }
    files_job_free(&fj);
    if (!rc) {
        rc = pm_outdir_commit(s->od, &d);
    }
    return rc ? pm_cli_fail(&d) : 0;
}
