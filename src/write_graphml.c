/* map.graphml: a small GraphML 1.0 writer of our own (igraph's leaves a truncated file on a
 * control character and prints doubles with 15 digits; see API-NOTES.md). Values are printed
 * exactly as in the CSV files. */
#include <errno.h>
#include <math.h>
#include <string.h>

#include "pairmap/mapwrite.h"
#include "pairmap/text.h"
#include "pairmap/write.h"
#include "util.h"
#include "windows.h"

void pm_write_xml_text(FILE *fp, const char *s) {
    pm_text_xml_fputs(fp, s, 0); /* the one XML text cleaner (text.h) */
}

/* Line building for the edge loop (at most a few hundred bytes per edge). */
static inline char *put_str(char *o, const char *s) {
    size_t n = strlen(s);
    memcpy(o, s, n);
    return o + n;
}

static inline char *put_u64(char *o, uint64_t v) {
    char t[24];
    int k = 0;
    do {
        t[k++] = (char)('0' + v % 10);
        v /= 10;
    } while (v);
    while (k) {
        *o++ = t[--k];
    }
    return o;
}

/* A number as the CSV files print it; xs:double spellings for NaN and infinities. o needs
 * 64 bytes of room. */
static inline char *put_num(char *o, double v) {
    if (isnan(v)) {
        return put_str(o, "NaN");
    }
    if (isinf(v)) {
        return put_str(o, v > 0 ? "INF" : "-INF");
    }
    return o + pm_i_fmt_double(o, 64, v);
}

static void xml_number(FILE *fp, double v) {
    char buf[64];
    fwrite(buf, 1, (size_t)(put_num(buf, v) - buf), fp);
}

static void data_str(FILE *fp, const char *key, const char *v) {
    fprintf(fp, "      <data key=\"%s\">", key);
    pm_write_xml_text(fp, v);
    fputs("</data>\n", fp);
}

static void data_num(FILE *fp, const char *key, double v) {
    fprintf(fp, "      <data key=\"%s\">", key);
    xml_number(fp, v);
    fputs("</data>\n", fp);
}

static void data_uint(FILE *fp, const char *key, unsigned long long v) {
    fprintf(fp, "      <data key=\"%s\">%llu</data>\n", key, v);
}

/* The keys of map.graphml. The ids are pairmap's own, "scope.attribute" with the scopes map
 * (the graph), item (a node) and pair (an edge); the attr.names are those README.md and
 * DESIGN.md document, which readers use. The file says in a comment that pairmap wrote it. */
static const struct {
    const char *id, *domain, *name, *type;
} KEYS[] = {
    {"map.title", "graph", "title", "string"},
    {"map.measure", "graph", "measure", "string"},
    {"item.name", "node", "name", "string"},
    {"item.category", "node", "category", "string"},
    {"item.respondents", "node", "respondents", "long"},
    {"item.share", "node", "share", "double"},
    {"item.cluster", "node", "cluster", "int"},
    {"item.x", "node", "x", "double"},
    {"item.y", "node", "y", "double"},
    {"pair.together", "edge", "together", "double"},
    {"pair.phi", "edge", "phi", "double"},
    {"pair.lift", "edge", "lift", "double"},
    {"pair.jaccard", "edge", "jaccard", "double"},
    {"pair.q_value", "edge", "q_value", "double"},
    {"pair.weight", "edge", "weight", "double"},
};

/* Edge k's element at o (EDGE_ROOM bytes at most); returns its end. */
#define EDGE_ROOM 1024
static char *edge_element(char *o, const pm_map_t *map, size_t k) {
    static const char *const ekey[6] = {"pair.together", "pair.phi",     "pair.lift",
                                        "pair.jaccard",  "pair.q_value", "pair.weight"};
    pm_measures_t m;
    pm_pairs_measures(map->pairs, map->inc, map->edges->idx[k], &m);
    const double val[6] = {m.together, m.phi, m.lift, m.jaccard, m.q, map->edges->weight[k]};
    o = put_str(o, "    <edge id=\"e");
    o = put_u64(o, k);
    o = put_str(o, "\" source=\"n");
    o = put_u64(o, map->ea[k]);
    o = put_str(o, "\" target=\"n");
    o = put_u64(o, map->eb[k]);
    o = put_str(o, "\">\n");
    const char *phi = NULL; /* the weight is most often phi itself: its text once */
    size_t phi_len = 0;
    for (int j = 0; j < 6; j++) {
        o = put_str(o, "      <data key=\"");
        o = put_str(o, ekey[j]);
        o = put_str(o, "\">");
        if (j == 5 && phi && memcmp(&val[5], &val[1], sizeof val[1]) == 0) {
            memcpy(o, phi, phi_len);
            o += phi_len;
        } else {
            char *at = o;
            o = put_num(o, val[j]);
            if (j == 1) {
                phi = at;
                phi_len = (size_t)(o - at);
            }
        }
        o = put_str(o, "</data>\n");
    }
    return put_str(o, "    </edge>\n");
}

#define EDGE_CHUNK 512 /* edges per chunk of the parallel loop (pm_i_write_windows) */

static size_t edge_room(void *ud, size_t k) {
    (void)ud;
    (void)k;
    return EDGE_ROOM;
}

static char *edge_make(void *ud, char *o, size_t k) {
    return edge_element(o, ud, k);
}

static void edge_one(void *ud, FILE *fp, size_t k) {
    char buf[EDGE_ROOM];
    fwrite(buf, 1, (size_t)(edge_element(buf, ud, k) - buf), fp);
}

/* The edges' elements, made on --threads threads in windows and written in order. */
static void graphml_edges(FILE *fp, const pm_map_t *map) {
    const pm_i_windows w = {map->edges->n, EDGE_CHUNK,  edge_room,   edge_make,
                            edge_one,      (void *)map, map->threads};
    pm_i_write_windows(fp, &w);
}

pm_err_t pm_write_graphml(FILE *fp, const pm_map_t *map, pm_diag_t *diag) {
    const pm_incidence_t *inc = map->inc;
    fputs("<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n"
          "<graphml xmlns=\"http://graphml.graphdrawing.org/xmlns\"\n"
          "         xmlns:xsi=\"http://www.w3.org/2001/XMLSchema-instance\"\n"
          "         xsi:schemaLocation=\"http://graphml.graphdrawing.org/xmlns "
          "http://graphml.graphdrawing.org/xmlns/1.0/graphml.xsd\">\n"
          "  <!-- written by pairmap; key ids are pairmap's own: map.*, item.*, pair.* -->\n",
          fp);
    for (size_t k = 0; k < sizeof KEYS / sizeof KEYS[0]; k++) {
        fprintf(fp, "  <key id=\"%s\" for=\"%s\" attr.name=\"%s\" attr.type=\"%s\"/>\n", KEYS[k].id,
                KEYS[k].domain, KEYS[k].name, KEYS[k].type);
    }
    for (size_t j = 0; j < map->n_seg; j++) {
        for (int k = 0; k < 2; k++) {
            fprintf(fp, "  <key id=\"item.%s.%zu\" for=\"node\" attr.name=\"%s (",
                    k ? "top_index" : "top_segment", j + 1, k ? "top_index" : "top_segment");
            pm_write_xml_text(fp, map->segcols[j].column);
            fprintf(fp, ")\" attr.type=\"%s\"/>\n", k ? "double" : "string");
        }
    }
    fputs("  <graph id=\"G\" edgedefault=\"undirected\">\n", fp);
    if (map->title) {
        fputs("    <data key=\"map.title\">", fp);
        pm_write_xml_text(fp, map->title);
        fputs("</data>\n", fp);
    }
    fprintf(fp, "    <data key=\"map.measure\">%s</data>\n", pm_measure_name(map->measure));
    for (size_t v = 0; v < map->n; v++) {
        size_t i = map->item[v];
        fprintf(fp, "    <node id=\"n%zu\">\n", v);
        data_str(fp, "item.name", inc->name[i]);
        if (inc->category[i] && inc->category[i][0]) { /* no category: no data (GraphML default) */
            data_str(fp, "item.category", inc->category[i]);
        }
        data_uint(fp, "item.respondents", (unsigned long long)inc->count[i]);
        data_num(fp, "item.share", pm_incidence_share(inc, i));
        data_uint(fp, "item.cluster", map->clusters->cluster[v]);
        data_num(fp, "item.x", map->xy[2 * v]);
        data_num(fp, "item.y", map->xy[2 * v + 1]);
        for (size_t j = 0; j < map->n_seg; j++) {
            size_t lv = 0;
            double ix = 0;
            if (pm_segstats_top(&map->segstats[j], i, &lv, &ix)) {
                char key[48];
                snprintf(key, sizeof key, "item.top_segment.%zu", j + 1);
                data_str(fp, key, map->segcols[j].level[lv]);
                snprintf(key, sizeof key, "item.top_index.%zu", j + 1);
                data_num(fp, key, ix);
            }
        }
        fputs("    </node>\n", fp);
        if ((v & 1023) == 0 && ferror(fp)) {
            break;
        }
    }
    /* the edges, most of the file: made on the map's threads in windows (graphml_edges) */
    graphml_edges(fp, map);
    fputs("  </graph>\n</graphml>\n", fp);
    if (ferror(fp)) {
        return pm_diag_set(diag, PM_EIO, NULL, 0, "cannot write map.graphml: %s",
                           strerror(errno ? errno : EIO));
    }
    return PM_OK;
}
