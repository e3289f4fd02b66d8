/* utf8: validation and repair of UTF-8, and terminal-safe text.
 * Sources: RFC 3629 section 3 (the byte ranges of well-formed UTF-8: no
 * overlong forms, no surrogates D800-DFFF, nothing above U+10FFFF) and its
 * section 10 example of an overlong "/" (C0 AF); ECMA-48 for the C0 and C1
 * control ranges (00-1F, 7F, 80-9F); U+FFFD as the replacement character
 * (Unicode chapter 3, from memory). Exact checks. */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <string.h>

#include <cmocka.h>

#include "utf8.h"

static void test_valid(void **state)
{
    (void)state;
    const struct {
        const char *s;
        int ok;
    } c[] = {
        {"plain ascii", 1},
        {"caf\xc3\xa9", 1},          /* U+00E9 */
        {"\xe2\x82\xac", 1},         /* U+20AC euro sign */
        {"\xf0\x9f\x94\x8b", 1},     /* U+1F50B battery */
        {"\xf4\x8f\xbf\xbf", 1},     /* U+10FFFF, the last */
        {"caf\xe9", 0},              /* Latin-1 e-acute */
        {"\xc0\xaf", 0},             /* overlong '/', RFC 3629 section 10 */
        {"\xe0\x80\xaf", 0},         /* overlong, 3 bytes */
        {"\xed\xa0\x80", 0},         /* U+D800, a surrogate */
        {"\xf4\x90\x80\x80", 0},     /* U+110000 */
        {"\xe2\x82", 0},             /* cut mid-character */
        {"\x80", 0},                 /* a lone continuation byte */
        {"\xf8\x88\x80\x80\x80", 0}, /* 5-byte form, gone since RFC 3629 */
    };
    for (size_t k = 0; k < sizeof c / sizeof *c; k++)
        if (utf8_valid(c[k].s, strlen(c[k].s)) != c[k].ok)
            fail_msg("case %zu: expected %d", k, c[k].ok);
    assert_int_equal(utf8_valid("a\0b", 3), 0); /* NUL is not text */
}

static void test_repair(void **state)
{
    (void)state;
    char buf[16];
    assert_int_equal(utf8_repair(buf, sizeof buf, "caf\xe9", 4), 0);
    assert_string_equal(buf, "caf\xef\xbf\xbd");
    /* cut at a character boundary: 4 bytes of room before the NUL, "ab" + euro does not fit */
    assert_int_equal(utf8_repair(buf, 5, "ab\xe2\x82\xac", 5), 1);
    assert_string_equal(buf, "ab");
    assert_int_equal(utf8_repair(buf, 6, "ab\xe2\x82\xac", 5), 0);
    assert_string_equal(buf, "ab\xe2\x82\xac");
    /* a character cut mid-way by an older packbook: each stray byte replaced */
    assert_int_equal(utf8_repair(buf, sizeof buf, "x\xe2\x82", 3), 0);
    assert_string_equal(buf, "x\xef\xbf\xbd\xef\xbf\xbd");
}

static void test_printable(void **state)
{
    (void)state;
    char buf[64];
    /* an OSC title-setting sequence (ECMA-48 ESC ] ... BEL) reaches the terminal as text */
    assert_string_equal(utf8_printable(buf, sizeof buf, "\x1b]0;title\x07"), "\\e]0;title\\x07");
    assert_string_equal(utf8_printable(buf, sizeof buf, "a\nb\tc\\"), "a\\nb\\tc\\\\");
    assert_string_equal(utf8_printable(buf, sizeof buf,
                                       "\xc2\x9b"
                                       "31m"),
                        "\\u009b31m"); /* CSI */
    assert_string_equal(utf8_printable(buf, sizeof buf, "caf\xc3\xa9 \xe9"), "caf\xc3\xa9 \\xe9");
    assert_string_equal(utf8_printable(buf, sizeof buf, "\x7f"), "\\x7f");
    /* cut whole: "\\e" does not fit in 2 bytes with the NUL */
    assert_string_equal(utf8_printable(buf, 3, "a\x1b"), "a");
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_valid),
        cmocka_unit_test(test_repair),
        cmocka_unit_test(test_printable),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
