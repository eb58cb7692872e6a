/* The picture step of `pairmap map`: map.svg and, unless --no-html, map.html around the same
 * SVG bytes (one layout for both), with the run's options for the page's footer. */
#include <stdlib.h>
#include <string.h>

#include "cli.h"
#include "pairmap/htmlmap.h"

/* "--name value" for each value of each option as given, the value quoted for a shell when it
 * holds anything but plain characters. Options that do not change the results are left out:
 * -o DIR (a page mailed on should not carry a local path), --threads and --quiet (so the page
 * is the same bytes for any thread count, as the other files are). NULL when out of memory. */
static char **option_strings(const pm_cli_t *c, size_t *n) {
    size_t total = 0;
    for (size_t i = 0; i < c->nopts; i++) {
        total += c->opt[i].n ? c->opt[i].n : 1;
    }
    char **out = calloc(total ? total : 1, sizeof *out);
    if (!out) {
        return NULL;
    }
    size_t k = 0;
    for (size_t i = 0; i < c->nopts; i++) {
        if (strcmp(c->opt[i].name, "output") == 0 || strcmp(c->opt[i].name, "threads") == 0 ||
            strcmp(c->opt[i].name, "quiet") == 0) {
            continue;
        }
        for (size_t j = 0; j < (c->opt[i].n ? c->opt[i].n : 1); j++) {
            const char *v = c->opt[i].n ? c->opt[i].vals[j] : NULL;
            if (v && !v[0]) {
                v = NULL; /* a flag (an empty value of a valued option is shown the same) */
            }
            size_t len = strlen(c->opt[i].name) + 4 + (v ? 4 * strlen(v) + 3 : 0);
            char *s = malloc(len);
            if (!s) {
                *n = k;
                return out;
            }
            int plain = v && v[0] &&
                        strspn(v, "abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ"
                                  "0123456789._/:=,+-") == strlen(v);
            size_t w = (size_t)snprintf(s, len, "--%s", c->opt[i].name);
            if (v && plain) {
                snprintf(s + w, len - w, " %s", v);
            } else if (v) { /* ' ... ' with each ' as '\'' */
                s[w++] = ' ';
                s[w++] = '\'';
                for (const char *p = v; *p; p++) {
                    if (*p == '\'') {
                        memcpy(s + w, "'\\''", 4);
                        w += 4;
                    } else {
                        s[w++] = *p;
                    }
                }
                s[w++] = '\'';
                s[w] = '\0';
            }
            out[k++] = s;
        }
    }
    *n = k;
    return out;
}

pm_err_t pm_cli_map_picture(const pm_cli_map_picture_t *p, pm_svg_stats_t *stats, pm_diag_t *diag) {
    char *svg = NULL;
    size_t len = 0;
    pm_err_t rc = pm_svg_render(p->svg, p->svg_opts, &svg, &len, stats, diag);
    if (!rc && fwrite(svg, 1, len, p->svg_fp) != len) {
        rc = pm_diag_set(diag, PM_EIO, NULL, 0, "cannot write map.svg");
    }
    if (rc || pm_cli_flag(p->cli, "no-html")) {
        free(svg);
        return rc;
    }
    size_t nopt = 0;
    char **opts = option_strings(p->cli, &nopt);
    const pm_input_stats_t *st = pm_table_stats(p->table);
    pm_html_run_t run = {
        .input = p->cli->input,
        .bytes = st->bytes,
        .lines = st->lines,
        .options = (const char *const *)opts,
        .n_options = opts ? nopt : 0,
        .unit = pm_cli_unit(p->cli),
    };
    pm_html_data_t hd = {
        .map = p->map,
        .cluster_name = p->svg->cluster_name,
        .svg = svg,
        .svg_len = len,
        .sel = p->sel,
        .drawn = stats ? stats->drawn : 0,
        .run = &run,
        .edge_cols = p->edge_cols ? p->edge_cols(p->edge_cols_ud) : NULL,
    };
    (void)pm_cli_threads(p->cli, &hd.threads); /* validated earlier */
    /* --segment-col: each column's shrunk index per level and item (pm_segstats_index, the
     * index column of segments.csv) for the page's segment selector */
    const pm_map_t *map = p->map;
    pm_html_segments_t *segs = NULL;
    double *ix = NULL;
    size_t cells = 0;
    for (size_t c = 0; c < map->n_seg; c++) {
        cells += map->segcols[c].n_levels * map->inc->n_items;
    }
    if (map->n_seg) {
        segs = calloc(map->n_seg, sizeof *segs);
        ix = malloc((cells ? cells : 1) * sizeof *ix);
        if (!segs || !ix) {
            free(segs);
            free(ix);
            free(svg);
            return pm_diag_set(diag, PM_ENOMEM, NULL, 0, "out of memory");
        }
        double *at = ix;
        for (size_t c = 0; c < map->n_seg; c++) {
            const pm_segcol_t *col = &map->segcols[c];
            segs[c] = (pm_html_segments_t){col->column, col->n_levels,
                                           (const char *const *)col->level, map->inc->n_items, at};
            for (size_t l = 0; l < col->n_levels; l++) {
                for (size_t i = 0; i < map->inc->n_items; i++) {
                    *at++ = pm_segstats_index(&map->segstats[c], l, i);
                }
            }
        }
    }
    hd.n_segments = map->n_seg;
    hd.segments = segs;
    FILE *fp = NULL;
    rc = pm_outdir_create(p->od, "map.html", &fp, diag);
    if (!rc) {
        rc = pm_html_write(fp, &hd, diag);
        if (rc == PM_EIO) {
            snprintf(diag->file, sizeof diag->file, "%s/map.html", p->dir);
        }
        pm_err_t rc2 = pm_outdir_finish(p->od, fp, rc ? NULL : diag);
        rc = rc ? rc : rc2;
    }
    for (size_t i = 0; opts && i < nopt; i++) {
        free(opts[i]);
    }
    free(opts);
    free(segs);
    free(ix);
    free(svg);
    return rc;
}
