/* Text for people: one escaper for every human-facing text the CLI prints (summaries, notes,
 * warnings, errors, tables), so that a name cannot move the cursor, retitle the terminal,
 * split a one-line message or reorder a line. */
#ifndef PAIRMAP_TEXT_H
#define PAIRMAP_TEXT_H

#include <stddef.h>

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

#ifdef __cplusplus
}
#endif
#endif
