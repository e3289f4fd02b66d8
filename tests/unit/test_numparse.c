/* numparse: locale-independent number parsing.
 * Reference for values: glibc strtod in the "C" locale (correctly rounded,
 * IEEE 754 round-to-nearest); the checks are exact (tolerance 0 ulp). */
#define _GNU_SOURCE
#include <locale.h>
#include <math.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <cmocka.h>

#include "numparse.h"

struct row {
    const char *text;
    char decimal;
    enum num_status status;
    double value;
};

static const struct row rows[] = {
    {"16.82", '.', NUM_OK, 16.82},
    {"  -3.5 ", '.', NUM_OK, -3.5},
    {"+12", '.', NUM_OK, 12.0},
    {"16,82", ',', NUM_OK, 16.82},
    {"1e3", '.', NUM_OK, 1000.0},
    {"2.5E-3", '.', NUM_OK, 0.0025},
    {".5", '.', NUM_OK, 0.5},
    {"5.", '.', NUM_OK, 5.0},
    {"0.1", '.', NUM_OK, 0.1},
    {"123456789012345678901234", '.', NUM_OK, 123456789012345678901234.0},
    {"0.000000000000000000000000001234", '.', NUM_OK, 1.234e-27},
    {"1e400", '.', NUM_NONFINITE, 0},
    {"-1e400", '.', NUM_NONFINITE, 0},
    {"nan", '.', NUM_NONFINITE, 0},
    {"NaN", '.', NUM_NONFINITE, 0},
    {"-inf", '.', NUM_NONFINITE, 0},
    {"Infinity", '.', NUM_NONFINITE, 0},
    {"", '.', NUM_EMPTY, 0},
    {"   ", '.', NUM_EMPTY, 0},
    {"0x1p3", '.', NUM_BAD, 0},
    {"12abc", '.', NUM_BAD, 0},
    {"1,234.5", '.', NUM_BAD, 0},
    {"16.82", ',', NUM_BAD, 0},
    {"-", '.', NUM_BAD, 0},
    {"e5", '.', NUM_BAD, 0},
    {"1e", '.', NUM_BAD, 0},
    {"1e-400", '.', NUM_OK, 0.0},
};

static void test_table(void **state)
{
    (void)state;
    for (size_t k = 0; k < sizeof rows / sizeof *rows; k++) {
        double v = -999.0;
        enum num_status st = num_parse(rows[k].text, strlen(rows[k].text), rows[k].decimal, &v);
        if (st != rows[k].status)
            fail_msg("'%s': status %d, expected %d", rows[k].text, st, rows[k].status);
        if (st == NUM_OK && v != rows[k].value)
            fail_msg("'%s': %.17g, expected %.17g", rows[k].text, v, rows[k].value);
    }
}

/* Random decimal strings against strtod_l in the C locale: bit-exact. */
static void test_against_strtod(void **state)
{
    (void)state;
    locale_t c = newlocale(LC_NUMERIC_MASK, "C", (locale_t)0);
    assert_non_null(c);
    uint64_t x = 88172645463325252ull; /* xorshift seed, printed on failure */
    char buf[64];
    for (int k = 0; k < 200000; k++) {
        x ^= x << 13;
        x ^= x >> 7;
        x ^= x << 17;
        int digits = 1 + (int)(x % 17);
        int point = (int)((x >> 8) % (unsigned)(digits + 1));
        int exp = (int)((x >> 16) % 61) - 30;
        size_t n = 0;
        if ((x >> 24) & 1)
            buf[n++] = '-';
        uint64_t y = x >> 28;
        for (int d = 0; d < digits; d++) {
            if (d == point)
                buf[n++] = '.';
            buf[n++] = (char)('0' + (y % 10));
            y = y / 10 + (uint64_t)d * 7919u;
        }
        if ((x >> 40) & 1)
            n += (size_t)snprintf(buf + n, sizeof buf - n, "e%d", exp);
        buf[n] = '\0';
        double want = strtod_l(buf, NULL, c);
        double got;
        if (num_parse(buf, n, '.', &got) != NUM_OK || got != want)
            fail_msg("'%s' (iteration %d, seed 88172645463325252): got %.17g want %.17g", buf, k,
                     got, want);
    }
    freelocale(c);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_table),
        cmocka_unit_test(test_against_strtod),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
