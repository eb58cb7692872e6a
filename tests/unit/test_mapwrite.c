/* Unit tests of the map writers' small pieces (src/write_json.c, src/write_graphml.c): JSON
 * structure and escapes, XML escapes. The full files are checked against networkx and
 * Python's json module in tests/ref/network_*.py. */
#include "unit.h"

#include <math.h>

#include "pairmap/mapwrite.h"

static char *capture(void (*fn)(FILE *, const void *), const void *arg) {
    char *buf = NULL;
    size_t len = 0;
    FILE *fp = open_memstream(&buf, &len);
    assert_non_null(fp);
    fn(fp, arg);
    assert_int_equal(fclose(fp), 0);
    return buf;
}

static void json_doc(FILE *fp, const void *arg) {
    (void)arg;
    pm_json_t j;
    pm_json_init(&j, fp);
    pm_json_begin_object(&j, NULL);
    pm_json_string(&j, "s", "a\"b\\c\n\x01 caf\xc3\xa9");
    pm_json_number(&j, "x", 0.1);
    pm_json_number(&j, "nan", NAN);
    pm_json_uint(&j, "u", UINT64_MAX);
    pm_json_begin_array(&j, "empty");
    pm_json_end_array(&j);
    pm_json_begin_array(&j, "a");
    pm_json_bool(&j, NULL, true);
    pm_json_null(&j, NULL);
    pm_json_end_array(&j);
    pm_json_end_object(&j);
    pm_diag_t d;
    assert_int_equal(pm_json_finish(&j, &d), PM_OK);
}

static void test_mapwrite_json_document(void **state) {
    (void)state;
    char *s = capture(json_doc, NULL);
    /* the expected text, written out by hand from RFC 8259's escapes */
    assert_string_equal(s, "{\n"
                           "  \"s\": \"a\\\"b\\\\c\\n\\u0001 caf\xc3\xa9\",\n"
                           "  \"x\": 0.1,\n"
                           "  \"nan\": null,\n"
                           "  \"u\": 18446744073709551615,\n"
                           "  \"empty\": [],\n"
                           "  \"a\": [\n"
                           "    true,\n"
                           "    null\n"
                           "  ]\n"
                           "}\n");
    free(s);
}

static void test_mapwrite_json_unbalanced(void **state) {
    (void)state;
    char *buf = NULL;
    size_t len = 0;
    FILE *fp = open_memstream(&buf, &len);
    assert_non_null(fp);
    pm_json_t j;
    pm_json_init(&j, fp);
    pm_json_begin_object(&j, NULL);
    pm_diag_t d;
    assert_int_equal(pm_json_finish(&j, &d), PM_EINTERNAL);
    pm_json_end_object(&j);
    pm_json_end_object(&j); /* one too many */
    assert_int_equal(pm_json_finish(&j, &d), PM_EINTERNAL);
    fclose(fp);
    free(buf);
}

static void xml_text(FILE *fp, const void *arg) {
    pm_write_xml_text(fp, arg);
}

static void test_mapwrite_xml_escapes(void **state) {
    (void)state;
    /* XML 1.0 section 2.4 (predefined entities) and 2.2 (allowed characters): controls other
     * than tab, LF, CR are not allowed at all and become U+FFFD */
    char *s = capture(xml_text, "A&B <x> \"q\" 'a'\t\r\n\x01 \xf0\x9f\x8d\xb0");
    assert_string_equal(s, "A&amp;B &lt;x&gt; &quot;q&quot; &apos;a&apos;&#9;&#13;&#10;"
                           "\xef\xbf\xbd \xf0\x9f\x8d\xb0");
    free(s);
}

int main(int argc, char **argv) {
    if (argc > 1) {
        cmocka_set_test_filter(argv[1]);
    }
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_mapwrite_json_document),
        cmocka_unit_test(test_mapwrite_json_unbalanced),
        cmocka_unit_test(test_mapwrite_xml_escapes),
    };
    return cmocka_run_group_tests_name("mapwrite", tests, NULL, NULL);
}
