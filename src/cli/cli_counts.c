/* --from-counts FILE.pmc on map, pairs, items and partners: the shard as the run's table and
 * incidence (neither with rows), its pairs handed to the counting stage (pm_cli_score). */
#include <stdlib.h>
#include <string.h>

#include "cli.h"
#include "pairmap/mapwrite.h"
#include "pairmap/shard.h"

/* ---- --from-counts ------------------------------------------------------------------------- */
static pm_shard_t *g_shard; /* CLI only: one run per process */
static pm_counts_t *g_counts;

const pm_counts_t *pm_cli_given_counts(void) {
    return g_counts;
}

static void free_given(void) {
    pm_counts_free(g_counts);
    pm_shard_free(g_shard);
    g_counts = NULL;
    g_shard = NULL;
}

/* The parts of each input the shard holds: a note when some are missing. */
static void note_parts(const pm_cli_t *c, const pm_shard_t *s) {
    for (size_t i = 0; i < s->n_parts;) {
        size_t e = i;
        while (e < s->n_parts && memcmp(s->parts[e].src, s->parts[i].src, 32) == 0) {
            e++;
        }
        if (e - i < s->parts[i].m) {
            char hex[13];
            for (int q = 0; q < 6; q++) {
                snprintf(hex + 2 * q, 3, "%02x", s->parts[i].src[q]);
            }
            pm_cli_note(c,
                        "warning: %s holds %zu of the %llu parts of input %s...: the results "
                        "describe those respondents only",
                        c->input, e - i, (unsigned long long)s->parts[i].m, hex);
        }
        i = e;
    }
}

int pm_cli_load_counts(const pm_cli_t *c, pm_table_t **table, pm_incidence_t **inc,
                       double *t_read) {
    static const char *const counting[] = {"format",     "id-col",     "item-col",  "category-col",
                                           "weight-col", "sep",        "no-header", "respondents",
                                           "drop-item",  "merge-file", "columns",   "drop-value",
                                           "skip-col",   "base"};
    for (size_t i = 0; i < sizeof counting / sizeof counting[0]; i++) {
        if (pm_cli_get(c, counting[i])) {
            return pm_cli_usage_error(c,
                                      "--%s applies when counting: %s was counted with its "
                                      "own input options (pairmap count)",
                                      counting[i], c->input);
        }
    }
    double t0 = pm_cli_now();
    pm_diag_t d;
    pm_diag_clear(&d);
    free_given();
    if (pm_shard_read(c->input, &g_shard, &d) || pm_shard_incidence(g_shard, inc, &g_counts, &d) ||
        pm_shard_table(g_shard, strcmp(c->input, "-") ? c->input : "stdin", g_shard->file_bytes,
                       g_shard->file_sha256, table, &d)) {
        pm_incidence_free(*inc);
        *inc = NULL;
        free_given();
        return pm_cli_fail(&d);
    }
    atexit(free_given);
    note_parts(c, g_shard);
    if (t_read) {
        *t_read = pm_cli_now() - t0;
    }
    return 0;
}

void pm_cli_counts_json(void *json) {
    if (!g_shard) {
        return;
    }
    pm_json_t *j = json;
    pm_json_begin_object(j, "counts_from");
    char hex[65];
    for (int i = 0; i < 32; i++) {
        snprintf(hex + 2 * i, 3, "%02x", g_shard->file_sha256[i]);
    }
    pm_json_string(j, "shard_sha256", hex);
    pm_json_uint(j, "shard_bytes", g_shard->file_bytes);
    pm_json_uint(j, "format_version", PM_SHARD_VERSION);
    pm_json_string(j, "fingerprint", g_shard->fingerprint);
    pm_json_begin_array(j, "parts");
    for (size_t i = 0; i < g_shard->n_parts; i++) {
        pm_json_begin_object(j, NULL);
        for (int q = 0; q < 32; q++) {
            snprintf(hex + 2 * q, 3, "%02x", g_shard->parts[i].src[q]);
        }
        pm_json_string(j, "input_sha256", hex);
        pm_json_uint(j, "k", g_shard->parts[i].k);
        pm_json_uint(j, "m", g_shard->parts[i].m);
        pm_json_end_object(j);
    }
    pm_json_end_array(j);
    pm_json_end_object(j);
}
