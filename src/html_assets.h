/* The HTML page's style sheet and script (src/html/page.css, src/html/page.js), compiled into
 * the library by cmake/embed.cmake. Private to write_html.c. */
#ifndef PM_HTML_ASSETS_H
#define PM_HTML_ASSETS_H

#include <stddef.h>

extern const unsigned char pm_i_page_css[];
extern const size_t pm_i_page_css_len;
extern const unsigned char pm_i_page_js[];
extern const size_t pm_i_page_js_len;

#endif
