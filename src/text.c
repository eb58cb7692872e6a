/* The one escaper of human-facing text (include/pairmap/text.h): control characters and bytes
 * that are not UTF-8 as \xHH, bidirectional controls as \uXXXX. */
#include "pairmap/text.h"

#include <stdint.h>
#include <stdio.h>
#include <string.h>

size_t pm_text_utf8_len(const unsigned char *s, size_t len) {
    if (len == 0) {
        return 0;
    }
    unsigned char c = s[0];
    if (c < 0x80) {
        return 1;
    }
    size_t n = c >= 0xC2 && c <= 0xDF ? 2 : (c & 0xF0) == 0xE0 ? 3 : c >= 0xF0 && c <= 0xF4 ? 4 : 0;
    if (n == 0 || n > len) {
        return 0;
    }
    uint32_t cp = c & (n == 2 ? 0x1Fu : n == 3 ? 0x0Fu : 0x07u);
    for (size_t i = 1; i < n; i++) {
        if ((s[i] & 0xC0) != 0x80) {
            return 0;
        }
        cp = (cp << 6) | (s[i] & 0x3Fu);
    }
    if ((n == 3 && cp < 0x800) || (n == 4 && (cp < 0x10000 || cp > 0x10FFFF)) ||
        (cp >= 0xD800 && cp <= 0xDFFF)) {
        return 0;
    }
    return n;
}

/* The code point of a valid sequence of n bytes. */
static uint32_t code_point(const unsigned char *s, size_t n) {
    if (n == 1) {
        return s[0];
    }
    uint32_t cp = s[0] & (n == 2 ? 0x1Fu : n == 3 ? 0x0Fu : 0x07u);
    for (size_t i = 1; i < n; i++) {
        cp = (cp << 6) | (s[i] & 0x3Fu);
    }
    return cp;
}

static int is_bidi(uint32_t cp) {
    return (cp >= 0x202A && cp <= 0x202E) || (cp >= 0x2066 && cp <= 0x2069) || cp == 0x200E ||
           cp == 0x200F || cp == 0x061C;
}

/* Writes the display form of the character (or bad byte) at s[0..len) to out (at least 16
 * bytes); returns its length and sets *used to the input bytes it stands for. */
static size_t one(const unsigned char *s, size_t len, char *out, size_t *used) {
    size_t n = pm_text_utf8_len(s, len);
    if (n == 0) {
        *used = 1;
        return (size_t)snprintf(out, 16, "\\x%02X", s[0]);
    }
    *used = n;
    uint32_t cp = code_point(s, n);
    if (cp < 0x20 || cp == 0x7F || (cp >= 0x80 && cp <= 0x9F)) {
        size_t o = 0;
        for (size_t i = 0; i < n; i++) {
            o += (size_t)snprintf(out + o, 16 - o, "\\x%02X", s[i]);
        }
        return o;
    }
    if (is_bidi(cp)) {
        return (size_t)snprintf(out, 16, "\\u%04X", (unsigned)cp);
    }
    memcpy(out, s, n);
    return n;
}

size_t pm_text_shown_size(const char *s, size_t len) {
    const unsigned char *u = (const unsigned char *)s;
    size_t total = 1, used;
    char tmp[16];
    for (size_t i = 0; i < len; i += used) {
        total += one(u + i, len - i, tmp, &used);
    }
    return total;
}

const char *pm_text_shown(const char *s, size_t len, char *buf, size_t size, size_t max) {
    if (size == 0) {
        return buf;
    }
    const unsigned char *u = (const unsigned char *)s;
    size_t limit = size - 1, o = 0, used;
    if (max > 0 && max < limit) {
        limit = max;
    }
    /* the whole text when it fits, else as much as fits before "..." */
    int cut = pm_text_shown_size(s, len) - 1 > limit;
    size_t keep = cut ? (limit > 3 ? limit - 3 : 0) : limit;
    char tmp[16];
    for (size_t i = 0; i < len; i += used) {
        size_t k = one(u + i, len - i, tmp, &used);
        if (o + k > keep) {
            break;
        }
        memcpy(buf + o, tmp, k);
        o += k;
    }
    if (cut) {
        size_t room = size - 1 - o;
        memcpy(buf + o, "...", room < 3 ? room : 3);
        o += room < 3 ? room : 3;
    }
    buf[o] = '\0';
    return buf;
}

size_t pm_text_utf8_decode(const unsigned char *s, size_t len, uint32_t *cp) {
    size_t n = pm_text_utf8_len(s, len);
    if (n) {
        *cp = code_point(s, n);
    }
    return n;
}

/* ==== XML text ============================================================================ */
static const char REPLACEMENT[] = "\xef\xbf\xbd"; /* U+FFFD */

/* What the XML rule makes of the character (or bad byte) at s[0..len): its replacement in
 * out (at most 8 bytes; returns the length) and the input bytes used in *used. A tab, LF or
 * CR under PM_TEXT_XML_LINE comes back as one space. */
static size_t xml_one(const unsigned char *s, size_t len, unsigned flags, char *out, size_t *used) {
    uint32_t cp = 0;
    size_t n = pm_text_utf8_decode(s, len, &cp);
    if (n == 0) {
        *used = 1;
        memcpy(out, REPLACEMENT, 3);
        return 3;
    }
    *used = n;
    if (cp == '\t' || cp == '\n' || cp == '\r') {
        out[0] = (flags & PM_TEXT_XML_LINE) ? ' ' : (char)cp;
        return 1;
    }
    int bad = cp < 0x20 || cp == 0x7F || (cp >= 0x80 && cp <= 0x9F) ||
              (cp >= 0xFDD0 && cp <= 0xFDEF) || (cp & 0xFFFEu) == 0xFFFEu;
    if (bad) {
        memcpy(out, REPLACEMENT, 3);
        return 3;
    }
    if ((flags & PM_TEXT_XML_LINE) && is_bidi(cp)) {
        return (size_t)snprintf(out, 8, "\\u%04X", (unsigned)cp);
    }
    memcpy(out, s, n);
    return n;
}

size_t pm_text_xml_clean(const char *s, size_t len, unsigned flags, char *out) {
    const unsigned char *u = (const unsigned char *)s;
    int line = (flags & PM_TEXT_XML_LINE) != 0, space = 1; /* drop leading spaces */
    size_t k = 0, used;
    char tmp[8];
    for (size_t i = 0; i < len; i += used) {
        size_t m = xml_one(u + i, len - i, flags, tmp, &used);
        if (line && m == 1 && tmp[0] == ' ') {
            if (!space) {
                out[k++] = ' ';
            }
            space = 1;
            continue;
        }
        memcpy(out + k, tmp, m);
        k += m;
        space = 0;
    }
    while (line && k > 0 && out[k - 1] == ' ') {
        k--;
    }
    out[k] = '\0';
    return k;
}

void pm_text_xml_write(const char *s, size_t len, unsigned flags, pm_text_put_fn put, void *ctx) {
    const unsigned char *u = (const unsigned char *)s;
    int line = (flags & PM_TEXT_XML_LINE) != 0, space = 1;
    size_t used, start = 0;
    char tmp[8];
    for (size_t i = 0; i < len; i += used) {
        size_t m = xml_one(u + i, len - i, flags, tmp, &used);
        if (line && m == 1 && tmp[0] == ' ') {
            space = space ? space : 2; /* 2: a space is due before the next character */
            continue;
        }
        if (space == 2 && start) {
            put(ctx, " ", 1);
        }
        space = 0;
        start = 1;
        const char *e = NULL;
        switch (m == 1 ? tmp[0] : 0) {
        case '&':
            e = "&amp;";
            break;
        case '<':
            e = "&lt;";
            break;
        case '>':
            e = "&gt;";
            break;
        case '"':
            e = "&quot;";
            break;
        case '\'':
            e = "&apos;";
            break;
        case '\t':
            e = "&#9;";
            break;
        case '\n':
            e = "&#10;";
            break;
        case '\r':
            e = "&#13;"; /* a raw CR would be normalised away by the reader */
            break;
        default:
            break;
        }
        if (e) {
            put(ctx, e, strlen(e));
        } else {
            put(ctx, tmp, m);
        }
    }
}

static void put_file(void *ctx, const char *s, size_t n) {
    fwrite(s, 1, n, (FILE *)ctx);
}

void pm_text_xml_fputs(FILE *fp, const char *s, unsigned flags) {
    if (s) {
        pm_text_xml_write(s, strlen(s), flags, put_file, fp);
    }
}
