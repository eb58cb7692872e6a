/* pairmap partners: the ranked partners of one item, or of a set of items (respondents who
 * chose all of them), with confidence and its Jeffreys interval, lift, phi and q-value. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "cli.h"
#include "pairmap/itemfind.h"
#include "pairmap/write.h"

static const char help[] =
    "Usage: pairmap partners INPUT --item NAME [--item NAME ...] [options]\n"
    "\n"
    "Ranks the partners of an item: the items its respondents also chose. Columns\n"
    "  partner     the other item\n"
    "  together    respondents who chose both (weighted sum with --weight-col)\n"
    "  expected    what chance alone would give: n(NAME) n(partner) / N\n"
    "  confidence  share of NAME's respondents who also chose the partner, with its 95%\n"
    "              Jeffreys interval (confidence_low, confidence_high)\n"
    "  lift, phi, q_value   as in `pairmap pairs`\n"
    "  partner_respondents  respondents who chose the partner (weighted with --weight-col)\n"
    "  reverse_confidence   share of the partner's respondents who also chose NAME (often\n"
    "              the telling direction: an add-on's buyers nearly all take the base item)\n"
    "  odds_ratio, odds_ratio_low, odds_ratio_high   the odds ratio with its 95% interval,\n"
    "              as in `pairmap pairs`\n"
    "\n"
    "  --item NAME           the item: its exact name, or the one name equal to it ignoring\n"
    "                        letter case (a note says which). Given several times: the\n"
    "                        partners of the set, i.e. of the respondents who chose all of\n"
    "                        them. q-values come from Benjamini-Hochberg over the item's (or\n"
    "                        the set's) own tests: one per eligible partner whose total, like\n"
    "                        NAME's, reaches --min-count (never-seen partners included).\n"
    "                        They are smaller than the q-values of `pairmap pairs`, which are\n"
    "                        over all pairs. Only NAME's pairs are counted: memory grows with\n"
    "                        the number of items, not of pairs\n"
    "  --family F            item (default: q over NAME's own tests, as above) or all: q over\n"
    "                        the family of `pairmap pairs` and the map, whose rows with NAME\n"
    "                        it then repeats (the map's page shows these); memory and time\n"
    "                        as for `pairs`. One --item only\n"
    "  --top K               show the K best partners (default 10; 0 = all)\n"
    "  --by KEY              rank by phi (default), lift, confidence, together or lower (the\n"
    "                        odds ratio's lower bound: the strongest pairing the data\n"
    "                        support). With --sign positive the largest come first; with\n"
    "                        the negative sign (--sign negative) the smallest (the items\n"
    "                        least often found with NAME: likely substitutes; `lower` then\n"
    "                        ranks by the upper bound, smallest first); with --sign both the\n"
    "                        strongest in either direction (|phi|, |log lift|, the bound\n"
    "                        further from 1). Ties:\n"
    "                        q_value (smallest first), then together (largest first), then\n"
    "                        the partner's name\n"
    "  --csv                 CSV on standard output, first column `partner`, numbers in full\n"
    "                        precision. Without it: an aligned text table (also when the output\n"
    "                        is not a terminal)\n"
    "The selection options below apply as in `pairmap pairs` (--min-count, --max-q, --sign,\n"
    "--min-phi, --min-lift, --min-share). A negative association is a hint, not proof:\n"
    "items sold in different seasons or mutually exclusive answer options show it too.\n"
    "An unknown NAME is an error (exit 2) that lists the closest item names (those that\n"
    "begin with NAME first, then those that contain it, then by edit distance); a wide\n"
    "survey's label under several questions (`Lemonade` for `Lemonade (drinks)` and\n"
    "`Lemonade (sweets)`) is an error that lists them: give the one you mean.\n"
    "\n";

#define CSV_HEADER                                                                                 \
    "partner,together,expected,confidence,confidence_low,confidence_high,lift,phi,q_value,"        \
    "partner_respondents,reverse_confidence,odds_ratio,odds_ratio_low,odds_ratio_high"

enum { BY_PHI = 0, BY_LIFT = 1, BY_CONFIDENCE = 2, BY_TOGETHER = 3, BY_LOWER = 4 };

typedef struct {
    uint32_t item;
    double together, expected, conf, lo, hi, lift, phi, q;
    double total, rconf; /* the partner's own total, and together / total */
    pm_oddsratio_t odds;
    double key;
    pm_strat_t st; /* within segments (--segment-col) */
    int has_st;
} row;

/* ---- finding the item --------------------------------------------------------------------- */
/* Prints up to `n` names from idx as "'a', 'b', 'c'". */
static void list_names(const pm_incidence_t *inc, const size_t *idx, size_t n) {
    for (size_t k = 0; k < n; k++) {
        fprintf(stderr, "%s'%s'", k ? ", " : "", pm_cli_shown(inc->name[idx[k]]));
    }
}

/* Finds --item NAME by the rules of pairmap/itemfind.h. A name found ignoring letter case is
 * taken (a note says as what). A plain label of several wide-format items, several names
 * equal ignoring case, or no match is an error (exit 2) that lists the candidates or the
 * closest names: for --item we ask rather than guess, as the partners of "either" item are
 * not the partners of one item, nor of the set. Returns 0 and sets *it, or the exit status. */
static int find_item(const pm_cli_t *c, const pm_incidence_t *inc, const char *src,
                     const char *name, long *it) {
    pm_item_found_t f = {0};
    pm_item_index_t *ix = NULL;
    if (pm_item_index_new(inc->name, inc->n_items, &ix) || pm_item_find(ix, name, 1, &f)) {
        pm_item_found_destroy(&f);
        pm_item_index_free(ix);
        fputs("pairmap: out of memory\n", stderr);
        return 4;
    }
    int rc = 2;
    switch (f.how) {
    case PM_ITEM_EXACT:
    case PM_ITEM_CASE:
        *it = (long)f.match[0];
        if (f.how == PM_ITEM_CASE) {
            pm_cli_note(c, "note: --item '%s' taken as '%s' (letter case differs)", name,
                        inc->name[f.match[0]]);
        }
        rc = 0;
        break;
    case PM_ITEM_AMBIGUOUS:
        fprintf(stderr, "pairmap: %s: no item '%s'; ignoring letter case it could be ",
                pm_cli_shown(src), pm_cli_shown(name));
        list_names(inc, f.match, f.n);
        fputs(": give one of them exactly\n", stderr);
        break;
    case PM_ITEM_LABEL:
        fprintf(stderr, "pairmap: %s: '%s' is the label of %zu items, one per question: ",
                pm_cli_shown(src), pm_cli_shown(name), f.n);
        list_names(inc, f.match, f.n);
        fputs("; give one of them as --item (several --item: the respondents who chose all "
              "of them)\n",
              stderr);
        break;
    case PM_ITEM_NONE:
        fprintf(stderr, "pairmap: %s: no item '%s'", pm_cli_shown(src), pm_cli_shown(name));
        if (f.n_near) {
            fputs("; closest: ", stderr);
            list_names(inc, f.near, f.n_near);
        }
        fputc('\n', stderr);
        break;
    }
    pm_item_found_destroy(&f);
    pm_item_index_free(ix);
    return rc;
}

/* ---- ranking -------------------------------------------------------------------------------- */
static const pm_incidence_t *g_rank_inc; /* qsort has no context; CLI, single-threaded */

static int cmp_row(const void *p, const void *q) {
    const row *a = p, *b = q;
    if (a->key != b->key) {
        return a->key > b->key ? -1 : 1; /* larger key first; NaN never arises (finite) */
    }
    if (a->q != b->q) { /* ties: the better supported first, then the more often seen */
        return a->q < b->q ? -1 : 1;
    }
    if (a->together != b->together) {
        return a->together > b->together ? -1 : 1;
    }
    return strcmp(/* C compares as unsigned char: byte order */
                  g_rank_inc->name[a->item], g_rank_inc->name[b->item]);
}

static double rank_key(const row *r, int by, pm_sign_t sign) {
    double v;
    switch (by) {
    case BY_LIFT:
        v = sign == PM_SIGN_BOTH ? fabs(log(r->lift)) : r->lift;
        break;
    case BY_CONFIDENCE:
        v = r->conf;
        break;
    case BY_TOGETHER:
        v = r->together;
        break;
    case BY_LOWER: /* the bound nearer to 1: low for positive, high for negative */
        v = sign == PM_SIGN_POSITIVE   ? r->odds.low
            : sign == PM_SIGN_NEGATIVE ? r->odds.high
                                       : fmax(log(r->odds.low), -log(r->odds.high));
        if (isnan(v)) { /* no interval (weighted zero cell): last */
            return -HUGE_VAL;
        }
        break;
    default:
        v = sign == PM_SIGN_BOTH ? fabs(r->phi) : r->phi;
    }
    if (sign == PM_SIGN_NEGATIVE) {
        v = -v; /* smallest first */
    }
    return isfinite(v) ? v : (v > 0 ? HUGE_VAL : -HUGE_VAL);
}

/* ---- output --------------------------------------------------------------------------------- */
static size_t display_width(const char *s) {
    size_t w = 0;
    for (const unsigned char *p = (const unsigned char *)s; *p; p++) {
        w += (*p & 0xC0) != 0x80; /* code points */
    }
    return w;
}

static void pad(size_t n) {
    while (n-- > 0) {
        fputc(' ', stdout);
    }
}

static void print_text(const pm_incidence_t *inc, const row *r, size_t n, bool weighted) {
    size_t w = strlen("partner");
    for (size_t i = 0; i < n; i++) {
        size_t d = display_width(pm_cli_shown(inc->name[r[i].item]));
        if (d > w) {
            w = d;
        }
    }
    fputs("partner", stdout);
    pad(w - strlen("partner"));
    printf("  %9s  %9s  %9s  %-24s  %7s  %7s  %7s  %-26s  %9s\n", "chose it", "together",
           "expected", "confidence (95% interval)", "reverse", "lift", "phi",
           "odds ratio (95% interval)", "q_value");
    for (size_t i = 0; i < n; i++) {
        const char *name = pm_cli_shown(inc->name[r[i].item]);
        fputs(name, stdout);
        pad(w - display_width(name));
        char conf[64], odds[80];
        snprintf(conf, sizeof conf, "%5.1f%% [%4.1f, %4.1f]", 100 * r[i].conf, 100 * r[i].lo,
                 100 * r[i].hi);
        snprintf(odds, sizeof odds, "%.3g [%.3g, %.3g]", r[i].odds.estimate, r[i].odds.low,
                 r[i].odds.high);
        const char *f = weighted ? "  %9.1f  %9.1f" : "  %9.0f  %9.0f";
        printf(f, r[i].total, r[i].together);
        char q[32]; /* the one style of q-values in text */
        printf("  %9.1f  %-24s  %6.1f%%  %7.2f  %7.3f  %-26s  %9s\n", r[i].expected, conf,
               100 * r[i].rconf, r[i].lift, r[i].phi, odds, pm_cli_q(r[i].q, q, sizeof q));
    }
}

static void print_csv(const pm_incidence_t *inc, const row *r, size_t n, unsigned flags,
                      int with_strat) {
    fputs(with_strat ? CSV_HEADER PM_STRAT_HEADER "\n" : CSV_HEADER "\n", stdout);
    for (size_t i = 0; i < n; i++) {
        pm_write_csv_field(stdout, inc->name[r[i].item], flags);
        const double v[13] = {r[i].together, r[i].expected, r[i].conf,          r[i].lo,
                              r[i].hi,       r[i].lift,     r[i].phi,           r[i].q,
                              r[i].total,    r[i].rconf,    r[i].odds.estimate, r[i].odds.low,
                              r[i].odds.high};
        for (int k = 0; k < 13; k++) {
            fputc(',', stdout);
            pm_write_number(stdout, v[k]);
        }
        if (with_strat) { /* empty cells where not defined (weighted input) */
            const pm_strat_t *s = r[i].has_st ? &r[i].st : NULL;
            const double w[5] = {s ? s->mh_or : NAN, s ? s->mh_low : NAN, s ? s->mh_high : NAN,
                                 s ? s->cmh_p : NAN, s ? s->het_p : NAN};
            for (int k = 0; k < 5; k++) {
                fputc(',', stdout);
                if (!isnan(w[k])) {
                    pm_write_number(stdout, w[k]);
                }
            }
            fputc(',', stdout);
            if (s && s->reversed >= 0) {
                fputc('0' + s->reversed, stdout);
            }
        }
        fputc('\n', stdout);
    }
}

/* The pairs (a, b_j), j < n, as the view of listed pairs and edges pm_stratified_edges reads
 * (only a, b and the edge indices): a is filled in here, the caller sets each b_j in
 * b[j]. 0, or 4 after an out-of-memory message. */
typedef struct {
    uint32_t *ab, *b;
    size_t *idx;
    pm_pairs_t pairs;
    pm_edges_t sub;
} anchor_view;

static int anchor_view_new(uint32_t a, size_t n, anchor_view *v) {
    memset(v, 0, sizeof *v);
    v->ab = malloc(2 * (n ? n : 1) * sizeof *v->ab);
    v->idx = malloc((n ? n : 1) * sizeof *v->idx);
    if (!v->ab || !v->idx) {
        free(v->ab);
        free(v->idx);
        v->ab = NULL;
        v->idx = NULL;
        fputs("pairmap: out of memory\n", stderr);
        return 4;
    }
    v->b = v->ab + n;
    for (size_t j = 0; j < n; j++) {
        v->ab[j] = a;
        v->idx[j] = j;
    }
    v->pairs.a = v->ab;
    v->pairs.b = v->b;
    v->sub.n = n;
    v->sub.idx = v->idx;
    return 0;
}

static void anchor_view_free(anchor_view *v) {
    free(v->ab);
    free(v->idx);
}

/* The figures within segments (--segment-col) of the pairs (first, r[j].item), j < n, stored
 * in the rows; nothing without segments or with weights (a note says so). Returns 0 or the
 * exit status. */
static int rows_strat(const pm_cli_t *c, const pm_incidence_t *inc, uint32_t first, row *r,
                      size_t n, const pm_select_opts_t *sel) {
    size_t nseg;
    const pm_segcol_t *seg = pm_cli_segcols(&nseg);
    if (nseg == 0) {
        return 0;
    }
    anchor_view v;
    if (anchor_view_new(first, n, &v)) {
        return 4;
    }
    for (size_t j = 0; j < n; j++) {
        v.b[j] = r[j].item;
    }
    pm_strat_t *st = NULL;
    int rc = pm_cli_strat(c, inc, seg, nseg, &v.pairs, &v.sub, sel, &st);
    for (size_t j = 0; st && j < n; j++) {
        r[j].st = st[j];
        r[j].has_st = 1;
    }
    free(st);
    anchor_view_free(&v);
    return rc;
}

/* The same for the anchor of a set (in_set marks its k items): per segment of the first
 * column, the respondents with a segment who chose every item of the set (the set's "item"),
 * each partner's respondents, and both, from one pass over the rows; then each row's figures
 * as for a pair of items (pm_stratified_pair). Memory: segments x (items + 1) counts, bounded
 * by the memory check first. */
static int rows_strat_set(const pm_cli_t *c, const pm_incidence_t *inc, const unsigned char *in_set,
                          size_t k, row *r, size_t n, const pm_select_opts_t *sel) {
    size_t nseg;
    const pm_segcol_t *seg = pm_cli_segcols(&nseg);
    if (nseg == 0 || inc->weight) {
        if (nseg && inc->weight) {
            pm_cli_note(c, "note: weighted input: the Mantel-Haenszel columns are left empty "
                           "(they take unweighted counts)");
        }
        return 0;
    }
    size_t L = seg[0].n_levels, ni = inc->n_items;
    size_t nr = inc->n_resp < seg[0].n_resp ? inc->n_resp : seg[0].n_resp;
    int rc = pm_cli_check_bytes(c, ((uint64_t)ni * 2 + 1) * (L ? L : 1) * sizeof(uint64_t),
                                "the pair tests within segments");
    if (rc) {
        return rc;
    }
    uint64_t *tot = calloc(ni * L > 0 ? ni * L : 1, sizeof *tot);
    uint64_t *joint = calloc(ni * L > 0 ? ni * L : 1, sizeof *joint);
    uint64_t *na = calloc(L ? L : 1, sizeof *na);
    if (!tot || !joint || !na) {
        free(tot);
        free(joint);
        free(na);
        fputs("pairmap: out of memory\n", stderr);
        return 4;
    }
    for (size_t q = 0; q < nr; q++) {
        int32_t s = seg[0].of[q];
        if (s < 0) {
            continue;
        }
        size_t hit = 0;
        for (uint64_t p = inc->row_ptr[q]; p < inc->row_ptr[q + 1]; p++) {
            tot[(size_t)inc->col[p] * L + (size_t)s]++;
            hit += in_set[inc->col[p]];
        }
        if (hit == k) {
            na[s]++;
            for (uint64_t p = inc->row_ptr[q]; p < inc->row_ptr[q + 1]; p++) {
                joint[(size_t)inc->col[p] * L + (size_t)s]++;
            }
        }
    }
    for (size_t j = 0; j < n; j++) {
        size_t b = r[j].item;
        pm_stratified_pair(L, seg[0].base, na, tot + b * L, joint + b * L, sel->sign, &r[j].st);
        r[j].has_st = 1;
    }
    pm_cli_note(c,
                "note: pairs within the %zu segments of '%s' (Mantel-Haenszel, the set as one "
                "item: its %s with a segment who chose all %zu items; %llu %s without a segment "
                "left out of those columns)",
                L, seg[0].column, pm_cli_unit(c), k, (unsigned long long)seg[0].none,
                pm_cli_unit(c));
    free(tot);
    free(joint);
    free(na);
    return 0;
}

/* --pair-test: 0, or 1 after a usage error (within takes one --item). */
static int pair_test_check(const pm_cli_t *c, size_t nnames) {
    int within;
    if (pm_cli_pair_test(c, &within)) {
        return 1;
    }
    if (within && nnames > 1) {
        return pm_cli_usage_error(c, "--pair-test within ranks the partners of one --item (a "
                                     "set's own tests are pooled)");
    }
    return 0;
}

/* ---- the anchor set ------------------------------------------------------------------------- */
/* Respondents who chose every item of the set (in_set marks them, k of them): their count,
 * weight and squared weight, and per other item the joint count and weight. */
typedef struct {
    uint64_t n;
    double w, w2;
    uint32_t *nb; /* [items] */
    double *wb;   /* [items] */
    long one;     /* the item of a one-item anchor, -1 for a set */
} anchor;

static int anchor_scan(const pm_incidence_t *inc, const unsigned char *in_set, size_t k,
                       anchor *an) {
    memset(an, 0, sizeof *an);
    an->one = -1;
    an->nb = calloc(inc->n_items ? inc->n_items : 1, sizeof *an->nb);
    an->wb = calloc(inc->n_items ? inc->n_items : 1, sizeof *an->wb);
    if (!an->nb || !an->wb) {
        return 1;
    }
    for (size_t r = 0; r < inc->n_resp; r++) {
        size_t hit = 0;
        for (uint64_t p = inc->row_ptr[r]; p < inc->row_ptr[r + 1]; p++) {
            hit += in_set[inc->col[p]];
        }
        if (hit != k) {
            continue;
        }
        double w = inc->weight ? inc->weight[r] : 1.0;
        an->n++;
        an->w += w;
        an->w2 += w * w;
        for (uint64_t p = inc->row_ptr[r]; p < inc->row_ptr[r + 1]; p++) {
            uint32_t b = inc->col[p];
            if (!in_set[b]) {
                an->nb[b]++;
                an->wb[b] += w;
            }
        }
    }
    return 0;
}

/* The anchor of one item a: its totals from the incidence (exact weighted sums), its joint
 * counts with every item from one pass over the rows, or from the shard's pairs with
 * --from-counts (pm_counts_item): memory in the number of items, never of pairs. */
static int anchor_one(const pm_incidence_t *inc, uint32_t a, anchor *an) {
    memset(an, 0, sizeof *an);
    an->nb = calloc(inc->n_items ? inc->n_items : 1, sizeof *an->nb);
    an->wb = calloc(inc->n_items ? inc->n_items : 1, sizeof *an->wb);
    if (!an->nb || !an->wb) {
        return 1;
    }
    an->one = a;
    an->n = inc->count[a];
    an->w = inc->wcount ? inc->wcount[a] : (double)an->n;
    an->w2 = inc->w2count ? inc->w2count[a] : (double)an->n;
    pm_diag_t d;
    pm_diag_clear(&d);
    return pm_counts_item(inc, a, pm_cli_given_counts(), an->nb, an->wb, &d) != PM_OK;
}

static void anchor_free(anchor *an) {
    free(an->nb);
    free(an->wb);
}

/* Confidence n_ab / n_a with its Jeffreys interval (pm_assoc_confidence for one item; a set's
 * anchor sums otherwise). */
static void confidence(const pm_incidence_t *inc, const anchor *an, uint32_t b, row *r) {
    if (an->one >= 0) { /* the shared one of pairs and map.html */
        pm_assoc_confidence(inc, (uint32_t)an->one, an->nb[b], an->wb[b], &r->conf, &r->lo, &r->hi);
    } else if (inc->weight) {
        double neff = an->w2 > 0 ? an->w * an->w / an->w2 : 0;
        r->conf = an->wb[b] / an->w;
        pm_assoc_jeffreys(r->conf * neff, neff, 0.05, &r->lo, &r->hi);
    } else {
        r->conf = (double)an->nb[b] / (double)an->n;
        pm_assoc_jeffreys((double)an->nb[b], (double)an->n, 0.05, &r->lo, &r->hi);
    }
}

/* Every threshold but --min-count (the small-cell bound). */
static bool passes_rest(const pm_select_opts_t *sel, const pm_measures_t *m) {
    if ((sel->sign == PM_SIGN_POSITIVE && !(m->phi > 0)) ||
        (sel->sign == PM_SIGN_NEGATIVE && !(m->phi < 0))) {
        return false;
    }
    if (!(m->q <= sel->max_q)) {
        return false;
    }
    if (sel->min_phi > 0 && !(fabs(m->phi) >= sel->min_phi)) {
        return false;
    }
    return !(sel->min_lift > 0 && !(m->lift >= sel->min_lift));
}

static bool passes(const pm_select_opts_t *sel, uint32_t nab, const pm_measures_t *m) {
    return nab >= sel->min_count && passes_rest(sel, m);
}

/* Partners of the family left out by --min-count alone (issue 16): how many, and the
 * smallest count together among them. */
typedef struct {
    size_t n;
    uint32_t least;
} hidden_t;

static bool eligible(const pm_incidence_t *inc, size_t i, double min_share) {
    return inc->count[i] > 0 && inc->count[i] < inc->N && !(pm_incidence_share(inc, i) < min_share);
}

/* The row of partner b that passed, from its measures m. */
static void fill_row(const pm_incidence_t *inc, const anchor *an, uint32_t b,
                     const pm_measures_t *m, row *r) {
    r->item = b;
    r->together = pm_incidence_wunits(inc, m->together); /* the file's units */
    r->expected = pm_incidence_wunits(inc, m->expected);
    r->lift = m->lift;
    r->phi = m->phi;
    r->q = m->q;
    confidence(inc, an, b, r);
    if (inc->weight) {
        r->total = pm_incidence_wunits(inc, inc->wcount[b]);
        r->rconf = an->wb[b] / inc->wcount[b];
        pm_oddsratio_weighted(inc->W, an->w, inc->wcount[b], an->wb[b], pm_incidence_neff(inc),
                              &r->odds);
    } else {
        r->total = (double)inc->count[b];
        r->rconf = (double)an->nb[b] / (double)inc->count[b];
        pm_oddsratio_counts(inc->N, an->n, inc->count[b], an->nb[b], m->test, &r->odds);
    }
}

/* --pair-test within for the anchor's family: pv[j] becomes the Cochran-Mantel-Haenszel p of
 * the pair (a, fam[j]) over the segments of the first --segment-col (an undefined test counts
 * as p = 1, as map's family does), so Benjamini-Hochberg runs over the CMH p-values of the
 * same family. Returns 0 or an exit status. */
static int within_p(const pm_cli_t *c, const pm_incidence_t *inc, uint32_t a, const uint32_t *fam,
                    size_t nf, const pm_select_opts_t *sel, double *pv) {
    size_t nseg;
    const pm_segcol_t *seg = pm_cli_segcols(&nseg);
    if (nseg == 0) {
        fputs("pairmap: --pair-test within: no segments\n", stderr);
        return 4;
    }
    anchor_view v;
    if (anchor_view_new(a, nf, &v)) {
        return 4;
    }
    memcpy(v.b, fam, nf * sizeof *fam);
    pm_strat_t *st = NULL;
    pm_diag_t d;
    pm_diag_clear(&d);
    int rc = 0;
    size_t undefined = 0;
    unsigned th = 0;
    if (pm_cli_threads(c, &th)) {
        rc = 1;
    } else if (pm_stratified_edges(inc, &seg[0], &v.pairs, &v.sub, sel->sign, th, &st, &d) !=
               PM_OK) {
        rc = pm_cli_fail(&d);
    }
    for (size_t j = 0; !rc && j < nf; j++) {
        pv[j] = isnan(st[j].cmh_p) ? 1.0 : st[j].cmh_p;
        undefined += isnan(st[j].cmh_p) != 0;
    }
    if (!rc) {
        pm_cli_note(c,
                    "note: --pair-test within: partners selected by the Cochran-Mantel-Haenszel "
                    "test within the %zu segments of '%s'; q over the %zu pairs of the item's "
                    "family (%zu without a defined test, taken as p = 1); %llu %s without a "
                    "segment left out of the test",
                    seg[0].n_levels, seg[0].column, nf, undefined, (unsigned long long)seg[0].none,
                    pm_cli_unit(c));
    }
    free(st);
    anchor_view_free(&v);
    return rc;
}

/* The anchor's family (DESIGN.md): one test per eligible partner outside the set whose total,
 * like the anchor's, reaches --min-count (pairs below it can never be reported: independent
 * filtering on the totals); Benjamini-Hochberg over them; the partners that pass the
 * selection become rows[0..*nrows). Returns 0 or 4 (out of memory). */
static int score_partners(const pm_cli_t *c, const pm_incidence_t *inc, const anchor *an,
                          const unsigned char *in_set, const pm_select_opts_t *sel, int within,
                          row *rows, size_t *nrows, size_t *nfam, hidden_t *hid) {
    size_t n = inc->n_items ? inc->n_items : 1, nf = 0;
    pm_measures_t *ms = malloc(n * sizeof *ms);
    uint32_t *fam = malloc(n * sizeof *fam);
    double *pv = malloc(n * sizeof *pv);
    if (!ms || !fam || !pv) {
        free(ms);
        free(fam);
        free(pv);
        return 4;
    }
    double neff = pm_incidence_neff(inc);
    bool anchor_in = an->n >= sel->min_count;
    for (size_t b = 0; b < inc->n_items && anchor_in; b++) {
        if (in_set[b] || !eligible(inc, b, sel->min_share) || inc->count[b] < sel->min_count) {
            continue;
        }
        if (inc->weight) {
            pm_assoc_weighted(inc->W, an->w, inc->wcount[b], an->wb[b], neff, sel->sign, &ms[nf]);
        } else {
            pm_assoc_counts(inc->N, an->n, inc->count[b], an->nb[b], sel->sign, &ms[nf]);
        }
        pv[nf] = ms[nf].p;
        fam[nf++] = (uint32_t)b;
    }
    int rc =
        within && nf && an->one >= 0 ? within_p(c, inc, (uint32_t)an->one, fam, nf, sel, pv) : 0;
    if (!rc && nf && pm_assoc_bh(pv, nf, pv)) {
        rc = 4;
    }
    *nrows = 0;
    for (size_t j = 0; j < nf && !rc; j++) {
        ms[j].q = pv[j];
        uint32_t nab = an->nb[fam[j]];
        if (passes(sel, nab, &ms[j])) {
            fill_row(inc, an, fam[j], &ms[j], &rows[(*nrows)++]);
        } else if (nab < sel->min_count && passes_rest(sel, &ms[j])) {
            hid->least = hid->n == 0 || nab < hid->least ? nab : hid->least;
            hid->n++;
        }
    }
    *nfam = nf;
    free(ms);
    free(fam);
    free(pv);
    return rc;
}

/* --family all: the rows of `pairmap pairs` (the map's family and q-values) that contain
 * item a, from scoring every pair (memory in pairs). Returns 0 or an exit status. */
static int map_partners(const pm_cli_t *c, pm_table_t *t, const pm_incidence_t *inc, anchor *an,
                        uint32_t a, const pm_select_opts_t *sel, row *rows, size_t *nrows,
                        size_t *nfam) {
    pm_pairs_t *pp = NULL;
    pm_edges_t *e = NULL;
    pm_diag_t d;
    pm_diag_clear(&d);
    int rc = pm_cli_score(c, t, inc, sel, &pp);
    if (!rc && pm_select_run(pp, inc, sel, &e, &d)) {
        rc = pm_cli_fail(&d);
    }
    for (size_t j = 0; !rc && j < e->n; j++) {
        size_t idx = e->idx[j];
        if (pp->a[idx] != a && pp->b[idx] != a) {
            continue;
        }
        pm_measures_t m;
        pm_pairs_measures(pp, inc, idx, &m);
        uint32_t b = pp->a[idx] == a ? pp->b[idx] : pp->a[idx];
        an->nb[b] = pp->n_ab[idx]; /* the same counts as pm_counts_item gave */
        row *r = &rows[(*nrows)++];
        fill_row(inc, an, b, &m, r);
        r->together = m.together; /* pm_pairs_measures gives the file's units already */
        r->expected = m.expected;
    }
    if (!rc) {
        *nfam = (size_t)(pp->hypotheses < SIZE_MAX ? pp->hypotheses : SIZE_MAX);
    }
    pm_edges_free(e);
    pm_pairs_free(pp);
    return rc;
}

/* The heading of the text table. */
static void print_heading(const pm_cli_t *c, const pm_incidence_t *inc, const anchor *an,
                          const unsigned char *in_set, const char *by, const pm_select_opts_t *sel,
                          size_t nfam) {
    double share = inc->weight ? an->w / inc->W : (double)an->n / (double)inc->N;
    printf("Partners of ");
    size_t shown_names = 0;
    for (size_t i = 0; i < inc->n_items; i++) {
        if (in_set[i]) {
            printf("%s'%s'", shown_names++ ? " + " : "", pm_cli_shown(inc->name[i]));
        }
    }
    printf(" (%llu of %llu %s, %.1f%%)", (unsigned long long)an->n, (unsigned long long)inc->N,
           pm_cli_unit(c), 100 * share);
    printf(", ranked by %s (ties: q, together, name); together >= %u, q <= %g over %zu tests, "
           "%s associations\n",
           by, sel->min_count, sel->max_q, nfam, pm_sign_name(sel->sign));
}

/* The command's options (after pm_cli_parse). */
typedef struct {
    pm_select_opts_t sel;
    uint64_t top;
    int by;
    unsigned threads;
    bool csv, fam_all;
    int within; /* --pair-test within (one --item) */
    const char *const *names;
    size_t nnames;
} partners_opts;

static const char *const bys[] = {"phi", "lift", "confidence", "together", "lower", NULL};

/* Reads the options; returns 0 or the exit status. */
static int read_opts(pm_cli_t *c, partners_opts *po) {
    po->names = pm_cli_all(c, "item", &po->nnames);
    if (po->nnames == 0) {
        return pm_cli_usage_error(c, "'pairmap partners' needs --item NAME");
    }
    static const char *const fams[] = {"item", "all", NULL};
    int famc;
    if (pm_cli_select_opts(c, &po->sel) || pm_cli_uint(c, "top", 10, 0, SIZE_MAX, &po->top) ||
        pm_cli_choice(c, "by", bys, BY_PHI, &po->by) || pm_cli_threads(c, &po->threads) ||
        pm_cli_choice(c, "family", fams, 0, &famc)) {
        return 1;
    }
    po->csv = pm_cli_flag(c, "csv");
    po->fam_all = famc == 1;
    if (pair_test_check(c, po->nnames) || pm_cli_pair_test(c, &po->within)) {
        return 1;
    }
    return 0;
}

/* Finds every --item and marks it in in_set (*k distinct items, *first the first of them);
 * then the checks that depend on the set. Returns 0 or the exit status. */
static int find_set(const pm_cli_t *c, const pm_incidence_t *inc, const char *src,
                    const partners_opts *po, unsigned char *in_set, size_t *k, uint32_t *first) {
    *k = 0;
    for (size_t i = 0; i < po->nnames; i++) {
        long it = -1;
        int rc = find_item(c, inc, src, po->names[i], &it);
        if (rc != 0) {
            return rc;
        }
        if (!eligible(inc, (size_t)it, po->sel.min_share)) {
            fprintf(stderr, "pairmap: %s: item '%s' %s: it has no association to rank\n",
                    pm_cli_shown(src), pm_cli_shown(po->names[i]),
                    inc->count[it] >= inc->N ? "was chosen by every respondent"
                                             : "is below --min-share");
            return 2;
        }
        if (!in_set[it]) {
            in_set[it] = 1;
            if ((*k)++ == 0) {
                *first = (uint32_t)it;
            }
        }
    }
    int rc = pm_cli_check_eligible(c, inc, po->sel.min_share);
    if (rc != 0) {
        return rc;
    }
    if (po->fam_all && *k > 1) {
        return pm_cli_usage_error(c, "--family all applies to one --item (a set's q-values are "
                                     "over its own tests)");
    }
    if (pm_cli_given_counts() && *k > 1) { /* --from-counts holds pairs, not rows */
        return pm_cli_usage_error(c,
                                  "partners of a set of %zu items need the respondents' rows "
                                  "(who chose all of them); a count shard holds pairs only: "
                                  "give INPUT instead of --from-counts, or one --item",
                                  *k);
    }
    return 0;
}

/* The ranked rows as CSV or a text table, and the notes after them. */
static void print_rows(const pm_cli_t *c, const pm_incidence_t *inc, const partners_opts *po,
                       const anchor *an, const unsigned char *in_set, const row *rows, size_t nrows,
                       size_t shown, size_t nfam, const hidden_t *hid) {
    if (po->csv) {
        size_t nseg;
        pm_cli_segcols(&nseg);
        print_csv(inc, rows, shown, pm_cli_csv_flags(c), nseg > 0);
    } else {
        print_heading(c, inc, an, in_set, bys[po->by], &po->sel, nfam);
        if (nrows == 0) {
            printf("no partner passes the selection\n");
        } else {
            print_text(inc, rows, shown, inc->weight != NULL);
            if (shown < nrows) {
                printf("(%zu more; --top 0 shows all)\n", nrows - shown);
            }
        }
    }
    if (hid->n) {
        /* substitutes are by nature seen together rarely: say what the bound left out */
        pm_cli_note(c,
                    "note: %zu partner%s of the family pass%s every other threshold but %s "
                    "seen together fewer than --min-count %u times (the small-cell bound) and "
                    "%s left out; --min-count %u lists %s (a lower --min-count also takes "
                    "rarer items into the family, so q-values can change)",
                    hid->n, hid->n == 1 ? "" : "s", hid->n == 1 ? "es" : "",
                    hid->n == 1 ? "was" : "were", po->sel.min_count, hid->n == 1 ? "is" : "are",
                    hid->least, hid->n == 1 ? "it" : "them");
    }
}

int pm_cmd_partners(int argc, char **argv) {
    pm_cli_t c;
    static char full[16384];
    snprintf(full, sizeof full, "%s%s%s%s%s%s%s\n%s", help, pm_cli_input_help, pm_cli_only_help,
             pm_cli_segment_help, pm_cli_basket_help, pm_cli_memory_help, pm_cli_csv_help,
             pm_cli_select_help);
    int rc = pm_cli_parse(&c, "partners", PM_CMD_PARTNERS, argc, argv, full);
    if (rc) {
        return rc < 0 ? pm_cli_close_stdout() : rc;
    }
    partners_opts po;
    memset(&po, 0, sizeof po);
    if ((rc = read_opts(&c, &po)) != 0) {
        return rc;
    }
    const pm_select_opts_t sel = po.sel;
    pm_table_t *t = NULL;
    pm_incidence_t *inc = NULL;
    unsigned char *in_set = NULL;
    row *rows = NULL;
    anchor an = {0};
    size_t nrows = 0, k = 0;
    uint32_t first = 0;
    rc = pm_cli_load(&c, &t, &inc, NULL);
    if (rc) {
        goto done;
    }
    const char *src = pm_table_source(t);
    in_set = calloc(inc->n_items ? inc->n_items : 1, 1);
    rows = calloc(inc->n_items ? inc->n_items : 1, sizeof *rows);
    if (!in_set || !rows) {
        rc = 4;
        goto done;
    }
    if ((rc = find_set(&c, inc, src, &po, in_set, &k, &first)) != 0) {
        goto done;
    }
    if (k == 1 ? anchor_one(inc, first, &an) : anchor_scan(inc, in_set, k, &an)) {
        rc = 4;
        goto done;
    }
    size_t nfam = 0;
    hidden_t hid = {0, 0};
    if (an.n == 0 || an.n >= inc->N) {
        fprintf(stderr, "pairmap: %s: %s respondent chose all %zu items: no partner to rank\n",
                pm_cli_shown(src), an.n == 0 ? "no" : "every", k);
    } else if (po.fam_all) {
        if ((rc = map_partners(&c, t, inc, &an, first, &sel, rows, &nrows, &nfam)) != 0) {
            goto done;
        }
    } else if ((rc = score_partners(&c, inc, &an, in_set, &sel, po.within, rows, &nrows, &nfam,
                                    &hid)) != 0) {
        goto done;
    }
    if (an.n < sel.min_count) {
        pm_cli_note(&c,
                    "note: %s by fewer than --min-count (%u) %s: none of its pairs can be "
                    "reported",
                    k > 1 ? "the set was chosen" : "the item was chosen", sel.min_count,
                    pm_cli_unit(&c));
    }
    for (size_t j = 0; j < nrows; j++) {
        rows[j].key = rank_key(&rows[j], po.by, sel.sign);
    }
    g_rank_inc = inc;
    qsort(rows, nrows, sizeof *rows, cmp_row);
    size_t shown = po.top && po.top < nrows ? (size_t)po.top : nrows;
    if (po.csv && (rc = k == 1 ? rows_strat(&c, inc, first, rows, shown, &sel)
                               : rows_strat_set(&c, inc, in_set, k, rows, shown, &sel)) != 0) {
        goto done; /* within segments: CSV only */
    }
    print_rows(&c, inc, &po, &an, in_set, rows, nrows, shown, nfam, &hid);
    rc = pm_cli_close_stdout();
done:
    anchor_free(&an);
    free(rows);
    free(in_set);
    pm_incidence_free(inc);
    pm_table_free(t);
    return rc;
}
