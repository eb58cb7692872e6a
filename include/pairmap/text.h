/* Text for people: one escaper for every human-facing text the CLI prints (summaries, notes,
 * warnings, errors, tables), so that a name cannot move the cursor, retitle the terminal,
 * split a one-line message or reorder a line; the one UTF-8 decoder; the one XML text
 * cleaner. */
#ifndef PAIRMAP_TEXT_H
#define PAIRMAP_TEXT_H

#include <stddef.h>
#include <stdint.h>
#include <stdio.h>

#ifdef __cplusplus
extern "C" {
#endif

/* Copies s[0..len) into buf (size bytes, NUL-terminated) for display:
 * - control bytes (U+0000..U+001F, U+007F), C1 controls (U+0080..U+009F) and bytes that are not
 *   part of valid UTF-8 are written as \xHH, one per byte;
 * - bidirectional embeddings, overrides and isolates (U+202A..U+202E, U+2066..U+2069) and the
 *   marks U+200E, U+200F, U+061C are written as \u202E (four hex digits), so they cannot
 *   reorder the text around them;
 * - everything else (valid UTF-8) is copied as it is.
 * When max > 0 and the output would pass max bytes, it is cut at a character boundary and
 * ends in "...". The output always fits buf (it is cut to fit). Returns buf. O(len). */
const char *pm_text_shown(const char *s, size_t len, char *buf, size_t size, size_t max);

/* Returns the number of bytes pm_text_shown needs for s[0..len) uncut, terminator included. */
size_t pm_text_shown_size(const char *s, size_t len);

/* The length of the valid UTF-8 sequence at s[0..len) (1..4), or 0 when s does not start
 * with one (overlong forms, surrogates and code points above U+10FFFF are not valid). */
size_t pm_text_utf8_len(const unsigned char *s, size_t len);

/* The code point of the valid UTF-8 sequence at s[0..len) into *cp; returns its length as
 * pm_text_utf8_len does (0: not valid, *cp untouched). */
size_t pm_text_utf8_decode(const unsigned char *s, size_t len, uint32_t *cp);

/* ---- XML text: the one cleaner of every XML output (map.graphml, map.svg, the HTML view) ----
 * The rule, character by character:
 * - a byte that is not part of valid UTF-8 becomes U+FFFD (one per byte);
 * - characters XML 1.0 does not allow (C0 controls other than tab, LF, CR; U+FFFE, U+FFFF)
 *   and those it discourages that no text needs (DEL, C1 controls U+0080..U+009F, the other
 *   non-characters U+FDD0..U+FDEF and U+nFFFE/U+nFFFF) become U+FFFD;
 * - tab, LF and CR are kept (written as &#9; &#10; &#13; so that no reader normalises them);
 * - everything else is kept as it is.
 * With PM_TEXT_XML_LINE (one line of a picture: labels, titles, tooltips) also: tab, LF and CR
 * become spaces, runs of spaces one, the ends are trimmed, and the bidirectional controls
 * pm_text_shown lists are written as visible text (\u202E), so that no name can reorder a
 * label. */
#define PM_TEXT_XML_LINE 1u

/* Cleans s[0..len) into out, which needs PM_TEXT_XML_CLEAN_SIZE(len) bytes; NUL-terminated,
 * not escaped. Returns the length written. O(len). */
#define PM_TEXT_XML_CLEAN_SIZE(len) (3 * (len) + 1)
size_t pm_text_xml_clean(const char *s, size_t len, unsigned flags, char *out);

/* Cleans s[0..len) and escapes it for XML text and attribute values (& < > " ' as entities,
 * tab, LF, CR as character references), passing the result to put(ctx, bytes, n) in pieces.
 * No allocation. */
typedef void (*pm_text_put_fn)(void *ctx, const char *s, size_t n);
void pm_text_xml_write(const char *s, size_t len, unsigned flags, pm_text_put_fn put, void *ctx);

/* pm_text_xml_write of the NUL-terminated s to fp (NULL: nothing). */
void pm_text_xml_fputs(FILE *fp, const char *s, unsigned flags);

#ifdef __cplusplus
}
#endif
#endif
