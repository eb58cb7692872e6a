/* A streaming JSON writer for run.json (see mapwrite.h): two-space indentation, keys in the
 * order written, numbers as the CSV files print them, non-finite numbers as null. */
#include <errno.h>
#include <inttypes.h>
#include <math.h>
#include <string.h>

#include "pairmap/mapwrite.h"
#include "pairmap/text.h"
#include "pairmap/write.h"

/* script: also < > & as \u003c \u003e \u0026 and U+2028, U+2029 as \u2028, \u2029. */
static void write_string(FILE *fp, const char *s, bool script) {
    fputc('"', fp);
    for (const unsigned char *p = (const unsigned char *)s; *p; p++) {
        switch (*p) {
        case '"':
            fputs("\\\"", fp);
            break;
        case '\\':
            fputs("\\\\", fp);
            break;
        case '\n':
            fputs("\\n", fp);
            break;
        case '\r':
            fputs("\\r", fp);
            break;
        case '\t':
            fputs("\\t", fp);
            break;
        default:
            if (*p < 0x20 || *p == 0x7f || (script && (*p == '<' || *p == '>' || *p == '&'))) {
                fprintf(fp, "\\u%04x", *p);
            } else if (*p < 0x80) {
                fputc(*p, fp);
            } else {
                /* valid UTF-8 as it is; a byte that is not part of it as the lone surrogate
                 * U+DC80 + (byte - 0x80), the lossless "surrogateescape" convention of
                 * Python's PEP 383 (s.encode("utf-8", "surrogateescape") gives the bytes back) */
                size_t n = pm_text_utf8_len(p, strlen((const char *)p));
                if (n == 0) {
                    fprintf(fp, "\\u%04x", 0xDC00u + *p);
                } else if (script && n == 3 && p[0] == 0xE2 && p[1] == 0x80 &&
                           (p[2] == 0xA8 || p[2] == 0xA9)) {
                    fprintf(fp, "\\u%04x", 0x2000u + (p[2] - 0x80u)); /* U+2028, U+2029 */
                    p += 2;
                } else {
                    fwrite(p, 1, n, fp);
                    p += n - 1;
                }
            }
        }
    }
    fputc('"', fp);
}

void pm_json_write_string(FILE *fp, const char *s) {
    write_string(fp, s, false);
}

void pm_json_write_script_string(FILE *fp, const char *s) {
    write_string(fp, s, true);
}

void pm_json_init(pm_json_t *j, FILE *fp) {
    memset(j, 0, sizeof *j);
    j->fp = fp;
    j->first[0] = true;
}

/* Separator, indentation and key before a value. */
static void lead(pm_json_t *j, const char *key) {
    if (!j->first[j->depth]) {
        fputc(',', j->fp);
    }
    if (j->depth > 0 || !j->first[0]) {
        fputc('\n', j->fp);
    }
    j->first[j->depth] = false;
    for (int i = 0; i < j->depth; i++) {
        fputs("  ", j->fp);
    }
    if (key) {
        pm_json_write_string(j->fp, key);
        fputs(": ", j->fp);
    }
}

static void open_(pm_json_t *j, const char *key, char c) {
    if (j->depth >= PM_JSON_DEPTH) {
        j->bad = true;
        return;
    }
    lead(j, key);
    fputc(c, j->fp);
    j->depth++;
    j->first[j->depth] = true;
}

static void close_(pm_json_t *j, char c) {
    if (j->depth <= 0) {
        j->bad = true;
        return;
    }
    bool empty = j->first[j->depth];
    j->depth--;
    if (!empty) {
        fputc('\n', j->fp);
        for (int i = 0; i < j->depth; i++) {
            fputs("  ", j->fp);
        }
    }
    fputc(c, j->fp);
}

void pm_json_begin_object(pm_json_t *j, const char *key) {
    open_(j, key, '{');
}
void pm_json_end_object(pm_json_t *j) {
    close_(j, '}');
}
void pm_json_begin_array(pm_json_t *j, const char *key) {
    open_(j, key, '[');
}
void pm_json_end_array(pm_json_t *j) {
    close_(j, ']');
}

void pm_json_string(pm_json_t *j, const char *key, const char *v) {
    lead(j, key);
    if (v) {
        pm_json_write_string(j->fp, v);
    } else {
        fputs("null", j->fp);
    }
}

void pm_json_number(pm_json_t *j, const char *key, double v) {
    lead(j, key);
    if (isfinite(v)) {
        pm_write_number(j->fp, v);
    } else {
        fputs("null", j->fp);
    }
}

void pm_json_uint(pm_json_t *j, const char *key, uint64_t v) {
    lead(j, key);
    fprintf(j->fp, "%" PRIu64, v);
}

void pm_json_int(pm_json_t *j, const char *key, int64_t v) {
    lead(j, key);
    fprintf(j->fp, "%" PRId64, v);
}

void pm_json_bool(pm_json_t *j, const char *key, bool v) {
    lead(j, key);
    fputs(v ? "true" : "false", j->fp);
}

void pm_json_null(pm_json_t *j, const char *key) {
    lead(j, key);
    fputs("null", j->fp);
}

pm_err_t pm_json_finish(pm_json_t *j, pm_diag_t *diag) {
    fputc('\n', j->fp);
    if (j->bad || j->depth != 0) {
        return pm_diag_set(diag, PM_EINTERNAL, NULL, 0, "unbalanced JSON document");
    }
    if (ferror(j->fp)) {
        return pm_diag_set(diag, PM_EIO, NULL, 0, "cannot write the JSON file: %s",
                           strerror(errno ? errno : EIO));
    }
    return PM_OK;
}

/* ---- run.json ------------------------------------------------------------------------------ */
static void run_settings(pm_json_t *j, const pm_run_report_t *r) {
    const pm_select_opts_t *sel = r->sel;
    pm_json_begin_object(j, "settings");
    pm_json_string(j, "format", r->format);
    pm_json_bool(j, "weighted", r->map->inc->wcount != NULL);
    pm_json_uint(j, "min_count", sel->min_count);
    pm_json_number(j, "min_share", sel->min_share);
    pm_json_number(j, "max_q", sel->max_q);
    pm_json_number(j, "min_phi", sel->min_phi);
    pm_json_number(j, "min_lift", sel->min_lift);
    if (sel->top_edges) {
        pm_json_uint(j, "top_edges", sel->top_edges);
    } else {
        pm_json_null(j, "top_edges");
    }
    pm_json_string(j, "sign", pm_sign_name(sel->sign));
    pm_json_string(j, "pair_test", r->pair_test ? r->pair_test : "pooled");
    if (r->pair_test_column) {
        pm_json_string(j, "pair_test_column", r->pair_test_column);
    }
    pm_json_string(j, "measure", pm_measure_name(sel->measure));
    pm_json_uint(j, "seed", r->seed);
    pm_json_uint(j, "restarts", r->restarts);
    pm_json_string(j, "restart_seeds", "seed + r * 0x9E3779B97F4A7C15 (mod 2^64), r = 0..R-1");
    pm_json_number(j, "resolution", r->resolution);
    pm_json_uint(j, "iterations", (uint64_t)r->iterations);
    pm_json_end_object(j);
}

static void run_input(pm_json_t *j, const pm_run_report_t *r) {
    const pm_input_stats_t *st = r->stats;
    pm_json_begin_object(j, "input_file");
    pm_json_string(j, "name", r->source);
    pm_json_uint(j, "bytes", st->bytes);
    char hex[65];
    for (int i = 0; i < 32; i++) {
        snprintf(hex + 2 * i, 3, "%02x", st->sha256[i]);
    }
    pm_json_string(j, "sha256", hex);
    pm_json_end_object(j);
    if (r->after_input) {
        r->after_input(j, r->ud);
    }
}

static void run_counts(pm_json_t *j, const pm_run_report_t *r) {
    const pm_input_stats_t *st = r->stats;
    const pm_incidence_t *inc = r->map->inc;
    const pm_pairs_t *pp = r->map->pairs;
    pm_json_begin_object(j, "counts");
    pm_json_uint(j, "lines", st->lines);
    pm_json_uint(j, "records", st->records);
    pm_json_uint(j, "rows_read", st->rows);
    pm_json_uint(j, "rows_without_item", st->empty_items);
    pm_json_uint(j, "rows_merged", st->merged_rows);
    pm_json_uint(j, "merge_entries", st->merge_entries);
    pm_json_uint(j, "merge_groups", inc->merge_groups);
    pm_json_uint(j, "rows_merged_together", inc->merge_collapsed);
    pm_json_uint(j, "rows_dropped", st->dropped_rows);
    pm_json_uint(j, "duplicate_rows", inc->duplicates);
    pm_json_uint(j, "respondents_seen", st->respondents);
    pm_json_uint(j, "respondents_left_out", st->blank_excluded);
    pm_json_uint(j, "respondents", inc->N);
    pm_json_uint(j, "respondents_one_item", inc->single_item);
    pm_json_uint(j, "respondents_no_item", inc->no_item);
    pm_json_uint(j, "items", inc->n_items);
    pm_json_uint(j, "items_eligible", pp->n_eligible);
    pm_json_uint(j, "items_chosen_by_none", pp->excluded_none);
    pm_json_uint(j, "items_chosen_by_all", pp->excluded_all);
    pm_json_uint(j, "items_below_min_share", pp->excluded_share);
    pm_json_end_object(j);
}

static void run_pairs(pm_json_t *j, const pm_run_report_t *r) {
    const pm_edges_t *e = r->map->edges;
    pm_json_begin_object(j, "pairs");
    pm_json_uint(j, "tested", e->tested);
    pm_json_uint(j, "family_items", r->map->pairs->n_family); /* items whose pairs form it */
    pm_json_uint(j, "seen_together", r->map->pairs->seen);
    pm_json_uint(j, "never_seen", e->never_seen);
    pm_json_uint(j, "kept", e->n);
    pm_json_begin_object(j, "removed");
    pm_json_uint(j, "min_count", e->removed_count);
    pm_json_uint(j, "sign", e->removed_sign);
    pm_json_uint(j, "max_q", e->removed_q);
    pm_json_uint(j, "min_phi", e->removed_phi);
    pm_json_uint(j, "min_lift", e->removed_lift);
    pm_json_uint(j, "top_edges", e->removed_top);
    pm_json_end_object(j);
    pm_json_uint(j, "negative_not_clustered", r->n_negative);
    pm_json_end_object(j);
}

static void run_network(pm_json_t *j, const pm_run_report_t *r) {
    const pm_clusters_t *cl = r->map->clusters;
    pm_json_begin_object(j, "network");
    pm_json_uint(j, "vertices", r->map->n);
    pm_json_uint(j, "edges", r->map->edges->n);
    pm_json_uint(j, "edges_clustered", cl->n_used_edges);
    pm_json_uint(j, "clusters", cl->n_clusters);
    pm_json_uint(j, "singletons", cl->n_singletons);
    pm_json_number(j, "modularity", cl->modularity);
    pm_json_number(j, "stability", cl->stability);
    pm_json_uint(j, "best_restart", cl->best_restart);
    pm_json_begin_array(j, "restart_modularity");
    for (unsigned k = 0; k < cl->restarts; k++) {
        pm_json_number(j, NULL, cl->restart_q[k]);
    }
    pm_json_end_array(j);
    pm_json_end_object(j);
    pm_json_begin_array(j, "clusters");
    for (size_t k = 0; k < cl->n_clusters; k++) {
        pm_json_begin_object(j, NULL);
        pm_json_uint(j, "cluster", k + 1);
        pm_json_uint(j, "size", cl->size[k]);
        pm_json_string(j, "name", r->cluster_name[k]);
        pm_json_begin_array(j, "members");
        for (size_t t = cl->first[k]; t < cl->first[k + 1]; t++) {
            pm_json_string(j, NULL, r->names[cl->members[t]]);
        }
        pm_json_end_array(j);
        pm_json_end_object(j);
    }
    pm_json_end_array(j);
}

/* The sub-clusters of one big cluster k (0-based): each with its number "K.S", size, name
 * and members, leading ones first. */
static void run_subclusters(pm_json_t *j, const pm_run_report_t *r, size_t k) {
    const pm_multiscale_t *ms = r->map->multiscale;
    const pm_clusters_t *cl = r->map->clusters, *sub = ms->sub[k];
    char num[48];
    pm_json_begin_object(j, NULL);
    pm_json_uint(j, "cluster", k + 1);
    pm_json_uint(j, "size", cl->size[k]);
    pm_json_number(j, "share_of_clustered", (double)cl->size[k] / (double)ms->clustered);
    pm_json_number(j, "modularity_within", sub->modularity);
    pm_json_bool(j, "splits", sub->n_clusters > 1);
    pm_json_begin_array(j, "subclusters");
    for (size_t s = 0; s < sub->n_clusters && sub->n_clusters > 1; s++) {
        pm_json_begin_object(j, NULL);
        snprintf(num, sizeof num, "%zu.%zu", k + 1, s + 1);
        pm_json_string(j, "subcluster", num);
        pm_json_uint(j, "size", sub->size[s]);
        pm_json_string(j, "name", ms->sub_name[k][s]);
        pm_json_begin_array(j, "members");
        for (size_t t = sub->first[s]; t < sub->first[s + 1]; t++) {
            pm_json_string(j, NULL, r->names[cl->members[cl->first[k] + sub->members[t]]]);
        }
        pm_json_end_array(j);
        pm_json_end_object(j);
    }
    pm_json_end_array(j);
    pm_json_end_object(j);
}

/* One resolution tried: its numbers and its clusters of two or more items (members' names). */
static void run_tried(pm_json_t *j, const pm_run_report_t *r, const pm_tried_resolution_t *tr) {
    pm_json_begin_object(j, NULL);
    pm_json_number(j, "resolution", tr->resolution);
    pm_json_bool(j, "this_map", tr->own != 0);
    pm_json_number(j, "modularity", tr->modularity);
    pm_json_number(j, "modularity_at_1", tr->modularity_1);
    pm_json_uint(j, "clusters", tr->n_clusters);
    pm_json_uint(j, "largest", tr->largest);
    pm_json_number(j, "largest_share", tr->largest_share);
    pm_json_begin_array(j, "partition"); /* clusters of two or more, in cluster order */
    for (size_t c = 0; c < tr->n_all; c++) {
        if (tr->first[c + 1] - tr->first[c] < 2) {
            continue;
        }
        pm_json_begin_array(j, NULL);
        for (size_t t = tr->first[c]; t < tr->first[c + 1]; t++) {
            pm_json_string(j, NULL, r->names[tr->grouped[t]]);
        }
        pm_json_end_array(j);
    }
    pm_json_end_array(j);
    pm_json_end_object(j);
}

static void run_multiscale(pm_json_t *j, const pm_run_report_t *r) {
    const pm_multiscale_t *ms = r->map->multiscale;
    if (!ms) {
        return;
    }
    pm_json_begin_object(j, "multiscale");
    pm_json_number(j, "big_share", PM_BIG_CLUSTER_SHARE);
    pm_json_uint(j, "clustered_items", ms->clustered);
    pm_json_number(j, "largest_share", ms->largest_share);
    pm_json_number(j, "subcluster_resolution", ms->sub_resolution);
    pm_json_begin_array(j, "big_clusters");
    for (size_t k = 0; k < ms->n_big; k++) {
        run_subclusters(j, r, k);
    }
    pm_json_end_array(j);
    pm_json_begin_array(j, "resolutions_tried");
    for (size_t t = 0; t < ms->n_tried; t++) {
        run_tried(j, r, &ms->tried[t]);
    }
    pm_json_end_array(j);
    if (ms->suggested >= 0) {
        pm_json_number(j, "suggested_resolution", ms->tried[ms->suggested].resolution);
    } else {
        pm_json_null(j, "suggested_resolution");
    }
    pm_json_end_object(j);
}

pm_err_t pm_write_run_json(FILE *fp, const pm_run_report_t *r, pm_diag_t *diag) {
    pm_json_t j;
    pm_json_init(&j, fp);
    pm_json_begin_object(&j, NULL);
    pm_json_string(&j, "pairmap", pm_version());
    pm_json_string(&j, "command", r->command);
    pm_json_string(&j, "input", r->input);
    if (r->options) {
        r->options(&j, r->ud);
    }
    run_settings(&j, r);
    run_input(&j, r);
    run_counts(&j, r);
    run_pairs(&j, r);
    run_network(&j, r);
    run_multiscale(&j, r);
    if (r->after_clusters) {
        r->after_clusters(&j, r->ud);
    }
    pm_json_begin_object(&j, "svg");
    pm_json_uint(&j, "items_drawn", r->svg_drawn);
    pm_json_uint(&j, "items_left_out", r->svg_left_out);
    pm_json_uint(&j, "edges_drawn", r->svg_edges_drawn);
    pm_json_end_object(&j);
    pm_json_begin_array(&j, "files");
    for (size_t k = 0; k < r->n_files; k++) {
        pm_json_string(&j, NULL, r->files[k]);
    }
    pm_json_end_array(&j);
    /* last, and the one part that varies between identical runs */
    pm_json_begin_object(&j, "timings");
    pm_json_number(&j, "read", r->t_read);
    pm_json_number(&j, "count", r->t_count);
    pm_json_number(&j, "measures", r->t_measures);
    pm_json_number(&j, "graph", r->t_graph);
    pm_json_number(&j, "write", r->t_write);
    pm_json_end_object(&j);
    pm_json_end_object(&j);
    return pm_json_finish(&j, diag);
}
