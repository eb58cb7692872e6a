/* The SVG map, text: the output buffer, XML text, text measured in font sizes, shortening with an
 * ellipsis, word wrap and number formats for people (see svg_internal.h). */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "svg_internal.h"
#include "pairmap/text.h"

/* b may be NULL: the legend measures itself by writing to nowhere first. */
void pm_i_sb_add(sbuf *b, const char *s, size_t len) {
    if (!b || b->oom) {
        return;
    }
    if (pm_i_grow((void **)&b->p, &b->cap, b->n + len + 1, 1)) {
        b->oom = 1;
        return;
    }
    memcpy(b->p + b->n, s, len);
    b->n += len;
    b->p[b->n] = '\0';
}

void pm_i_sb_puts(sbuf *b, const char *s) {
    pm_i_sb_add(b, s, strlen(s));
}

void pm_i_sb_int(sbuf *b, long long v) {
    char t[32];
    int k = snprintf(t, sizeof t, "%lld", v);
    pm_i_sb_add(b, t, (size_t)k);
}

/* Fixed-point with at most two decimals, written by hand so that no locale can turn the
 * decimal point into a comma inside the SVG; never "-0". */
void pm_i_sb_num(sbuf *b, double v) {
    if (!isfinite(v)) {
        v = 0;
    }
    long long q = llround(v * 100.0);
    char t[40];
    int k = 0;
    if (q < 0) {
        t[k++] = '-';
        q = -q;
    }
    k += snprintf(t + k, sizeof t - (size_t)k, "%lld", q / 100);
    long long f = q % 100;
    if (f) {
        t[k++] = '.';
        t[k++] = (char)('0' + f / 10);
        if (f % 10) {
            t[k++] = (char)('0' + f % 10);
        }
    }
    pm_i_sb_add(b, t, (size_t)k);
}

void pm_i_sb_double(sbuf *b, double v) {
    char t[40];
    int k = pm_i_fmt_double(t, sizeof t, v);
    pm_i_sb_add(b, t, (size_t)k);
}

static void put_sbuf(void *ctx, const char *s, size_t n) {
    pm_i_sb_add(ctx, s, n);
}

/* XML-escaped text; s is already clean (see pm_i_svg_clean_text). */
void pm_i_sb_esc(sbuf *b, const char *s) {
    pm_text_xml_write(s, strlen(s), 0, put_sbuf, b);
}

/* name="value" with a leading space; value escaped. */
void pm_i_sb_attr(sbuf *b, const char *name, const char *value) {
    pm_i_sb_puts(b, " ");
    pm_i_sb_puts(b, name);
    pm_i_sb_puts(b, "=\"");
    pm_i_sb_esc(b, value);
    pm_i_sb_puts(b, "\"");
}

void pm_i_sb_attr_num(sbuf *b, const char *name, double v) {
    pm_i_sb_puts(b, " ");
    pm_i_sb_puts(b, name);
    pm_i_sb_puts(b, "=\"");
    pm_i_sb_num(b, v);
    pm_i_sb_puts(b, "\"");
}
/* ==== text ================================================================================= */
/* A copy of s (NULL: "") that is safe in the picture: the XML rule of pm_text_xml_clean for
 * one line (text.h). Returns NULL when out of memory. */
char *pm_i_svg_clean_text(const char *s) {
    if (!s) {
        s = "";
    }
    size_t n = strlen(s);
    char *out = pm_i_malloc(PM_TEXT_XML_CLEAN_SIZE(n), 1);
    if (out) {
        pm_text_xml_clean(s, n, PM_TEXT_XML_LINE, out);
    }
    return out;
}

/* East Asian wide and emoji code points count as two character widths. */
static int wide(uint32_t cp) {
    return (cp >= 0x1100 && cp <= 0x115F) || (cp >= 0x2E80 && cp <= 0xA4CF) ||
           (cp >= 0xAC00 && cp <= 0xD7A3) || (cp >= 0xF900 && cp <= 0xFAFF) ||
           (cp >= 0xFE30 && cp <= 0xFE4F) || (cp >= 0xFF00 && cp <= 0xFF60) ||
           (cp >= 0xFFE0 && cp <= 0xFFE6) || (cp >= 0x1F300 && cp <= 0x1FAFF) ||
           (cp >= 0x20000 && cp <= 0x3FFFD);
}

/* Width of one code point in font sizes (see the note on text at the top). */
double pm_i_svg_char_em(uint32_t cp) {
    if (wide(cp)) {
        return 1.2;
    }
    if (cp == 'm' || cp == 'w' || cp == 'M' || cp == 'W' || cp == '%' || cp == '@' ||
        cp == 0x2026) {
        return 1.0;
    }
    if ((cp >= 'A' && cp <= 'Z') || cp == '&' || cp == '#') {
        return 0.8;
    }
    if (cp >= '0' && cp <= '9') {
        return 0.65;
    }
    return 0.6;
}

/* Width of the first len bytes of clean text s, in font sizes. */
static double prefix_units(const char *s, size_t len) {
    double u = 0;
    const unsigned char *p = (const unsigned char *)s;
    size_t i = 0;
    while (i < len && p[i]) {
        uint32_t cp = 0;
        size_t l = pm_text_utf8_decode(p + i, len - i, &cp);
        u += pm_i_svg_char_em(cp);
        i += l ? l : 1; /* l is never 0 on clean text */
    }
    return u;
}

/* Width of clean text in font sizes (regular weight). */
double pm_i_svg_text_units(const char *s) {
    return prefix_units(s, strlen(s));
}

double pm_i_svg_text_width(const char *s, double fs, int bold) {
    return pm_i_svg_text_units(s) * fs * (bold ? BOLD : 1.0);
}

static char *concat(const char *s, size_t len, const char *tail) {
    size_t tl = strlen(tail);
    char *c = pm_i_malloc(len + tl + 1, 1);
    if (c) {
        memcpy(c, s, len);
        memcpy(c + len, tail, tl + 1);
    }
    return c;
}

/* The number of code points in s[0..len). */
static size_t chars_in(const char *s, size_t len) {
    size_t k = 0;
    for (size_t i = 0; i < len; i++) {
        k += ((unsigned char)s[i] & 0xC0) != 0x80;
    }
    return k;
}

double pm_i_svg_min_units(const char *s) {
    const unsigned char *p = (const unsigned char *)s;
    size_t i = 0, n = strlen(s), k = 0;
    double u = 0;
    while (i < n && k < MIN_KEEP) {
        uint32_t cp = 0;
        size_t l = pm_text_utf8_decode(p + i, n - i, &cp);
        u += pm_i_svg_char_em(cp);
        i += l ? l : 1;
        k++;
    }
    return i >= n ? u : u + pm_i_svg_char_em(0x2026);
}

/* A copy of clean text s shortened to at most max_units font sizes wide and ending in an
 * ellipsis; a plain copy when it fits. Never shorter than MIN_KEEP characters before the
 * ellipsis unless what is kept is whole parts of a list ("Walnut cake · …"): NULL when that
 * does not fit (pm_i_svg_min_units says so beforehand) or when out
 * of memory. Cuts where a reader expects it: after a whole part of a list separated by
 * middle dots whenever one part fits (then it ends in a middle dot and the ellipsis), else
 * after a whole word when that keeps at least 60% of the room, else after the last code
 * point that fits. */
char *pm_i_svg_shorten(const char *s, double max_units) {
    size_t n = strlen(s);
    if (pm_i_svg_text_units(s) <= max_units) {
        return concat(s, n, "");
    }
    static const char dot_tail[] = " \xc2\xb7 \xe2\x80\xa6", word_tail[] = " \xe2\x80\xa6";
    double dot_u = pm_i_svg_text_units(dot_tail), word_u = pm_i_svg_text_units(word_tail),
           ell_u = pm_i_svg_char_em(0x2026);
    if (max_units < pm_i_svg_min_units(s)) {
        return NULL;
    }
    static const char dot[] = " \xc2\xb7 "; /* " · " */
    size_t best = 0;
    for (const char *q = strstr(s, dot); q; q = strstr(q + 1, dot)) {
        size_t len = (size_t)(q - s);
        if (prefix_units(s, len) + dot_u <= max_units) { /* whole parts: never "cut" */
            best = len;
        }
    }
    if (best > 0) { /* never half a part of a list */
        return concat(s, best, dot_tail);
    }
    best = 0;
    for (size_t i = 1; i < n; i++) {
        if (s[i] == ' ' && s[i - 1] != ' ') {
            size_t len = i;
            while (len > 0 && (s[len - 1] == ',' || s[len - 1] == '-' || s[len - 1] == ':' ||
                               s[len - 1] == ' ' || (unsigned char)s[len - 1] == 0xB7 ||
                               (unsigned char)s[len - 1] == 0xC2)) {
                len--; /* no separator (nor a middle dot) before the ellipsis */
            }
            if (len > 0 && chars_in(s, len) >= MIN_KEEP &&
                prefix_units(s, len) + word_u <= max_units) {
                best = len;
            }
        }
    }
    if (best > 0 && prefix_units(s, best) + word_u >= 0.6 * max_units) {
        return concat(s, best, word_tail);
    }
    const unsigned char *p = (const unsigned char *)s;
    double u = 0;
    size_t cut = 0;
    while (p[cut]) {
        uint32_t cp = 0;
        size_t len = pm_text_utf8_decode(p + cut, n - cut, &cp);
        double cu = pm_i_svg_char_em(cp);
        if (u + cu > max_units - ell_u) {
            break;
        }
        u += cu;
        cut += len ? len : 1;
    }
    while (cut > 0 && (s[cut - 1] == ' ' || s[cut - 1] == ',' || s[cut - 1] == '-')) {
        cut--;
    }
    if (chars_in(s, cut) < MIN_KEEP) { /* trailing separators gone: keep MIN_KEEP whole */
        cut = 0;
        for (size_t k = 0; p[cut] && k < MIN_KEEP; k++) {
            size_t len = pm_text_utf8_len(p + cut, n - cut);
            cut += len ? len : 1;
        }
    }
    return concat(s, cut, ELLIPSIS);
}

void pm_i_svg_write_text(sbuf *b, const char *cls, double x, double y, double fs, int anchor,
                         int bold, const char *fill, const char *text, const char *item,
                         int cluster) {
    static const char *const anchors[3] = {"start", "middle", "end"};
    pm_i_sb_puts(b, "<text");
    pm_i_sb_attr(b, "class", cls);
    pm_i_sb_attr_num(b, "x", x);
    pm_i_sb_attr_num(b, "y", y);
    pm_i_sb_attr_num(b, "font-size", fs);
    pm_i_sb_attr(b, "text-anchor", anchors[anchor]);
    if (bold) {
        pm_i_sb_attr(b, "font-weight", "bold");
    }
    if (fill) {
        pm_i_sb_attr(b, "fill", fill);
    }
    if (item) {
        pm_i_sb_attr(b, "data-item", item);
    }
    if (cluster > 0) {
        pm_i_sb_puts(b, " data-cluster=\"");
        pm_i_sb_int(b, cluster);
        pm_i_sb_puts(b, "\"");
    }
    pm_i_sb_puts(b, ">");
    pm_i_sb_esc(b, text);
    pm_i_sb_puts(b, "</text>\n");
}

void pm_i_svg_fmt_count(char *buf, size_t size, uint64_t v) {
    char t[32];
    int n = snprintf(t, sizeof t, "%llu", (unsigned long long)v);
    size_t k = 0;
    for (int i = 0; i < n && k + 2 < size; i++) {
        if (i > 0 && (n - i) % 3 == 0) {
            buf[k++] = ',';
        }
        buf[k++] = t[i];
    }
    buf[k] = '\0';
}

void pm_i_svg_fmt_percent(char *buf, size_t size, double share) {
    double v = share * 100;
    if (v >= 10 || v == floor(v)) {
        snprintf(buf, size, "%.0f%%", v);
    } else if (v >= 1) {
        snprintf(buf, size, "%.1f%%", v);
    } else {
        snprintf(buf, size, "%.2g%%", v);
    }
}
/* ---- word wrap ---- */
/* Greedy word wrap of clean text into lines of at most max_u character widths. Returns the
 * number of lines needed. With out, stores the first max_lines lines there (each owned by
 * the caller); the last one ends in an ellipsis when words are left over, and a word wider
 * than a line is shortened. -1 when out of memory. */
long pm_i_svg_wrap_text(const char *text, double max_u, char **out, size_t max_lines) {
    size_t n = strlen(text), lines = 0, i = 0;
    while (i < n) {
        while (i < n && text[i] == ' ') {
            i++;
        }
        if (i >= n) {
            break;
        }
        size_t start = i, end = i; /* the line is text[start .. end) */
        double u = 0;
        while (i < n) {
            size_t j = i;
            while (j < n && text[j] != ' ') {
                j++;
            }
            char *w = pm_i_malloc(j - i + 1, 1);
            if (!w) {
                return -1;
            }
            memcpy(w, text + i, j - i);
            w[j - i] = '\0';
            double wu = pm_i_svg_text_units(w);
            pm_i_free(w);
            if (end > start && u + 0.6 + wu > max_u) {
                break;
            }
            u += (end > start ? 0.6 : 0) + wu;
            end = j;
            i = j;
            while (i < n && text[i] == ' ') {
                i++;
            }
            if (u > max_u) {
                break; /* a lone word wider than the line */
            }
        }
        if (out && lines < max_lines) {
            int last = lines + 1 == max_lines && i < n;
            size_t len = last ? n - start : end - start;
            char *t = pm_i_malloc(len + 1, 1);
            if (!t) {
                return -1;
            }
            memcpy(t, text + start, len);
            t[len] = '\0';
            out[lines] = pm_i_svg_shorten(t, max_u);
            if (!out[lines] && max_u < pm_i_svg_min_units(t)) { /* too narrow: whole */
                out[lines] = concat(t, len, "");
            }
            pm_i_free(t);
            if (!out[lines]) {
                return -1;
            }
        }
        lines++;
    }
    return (long)lines;
}
