/* isotime: ISO 8601 text to Unix time and ISO weeks.
 * Sources: POSIX epoch definition (1970-01-01T00:00:00Z = 0); the ISO 8601
 * week rule (week 1 holds the year's first Thursday) with its standard
 * examples 2021-01-03 = 2020-W53, 2008-12-29 = 2009-W01, 2010-01-03 =
 * 2009-W53 (from memory of the standard's worked examples). Exact checks. */
#include <math.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <string.h>

#include <cmocka.h>

#include "isotime.h"

struct row {
    const char *text;
    int ok;
    double epoch;
};

static const struct row rows[] = {
    {"1970-01-01T00:00:00Z", 1, 0.0},
    {"2000-01-01T00:00:00Z", 1, 946684800.0}, /* 10957 days x 86400 s */
    {"2000-01-01 00:00:00", 1, 946684800.0},  /* no zone: UTC */
    {"2000-01-01T01:00:00+01:00", 1, 946684800.0},
    {"1999-12-31T19:00:00-0500", 1, 946684800.0},
    {"2000-01-01T00:00:00.250Z", 1, 946684800.25},
    {"2000-01-01T00:00Z", 1, 946684800.0},
    {"2000-01-01", 1, 946684800.0},
    {"2021-02-31T00:00:00Z", 0, 0},
    {"2021-13-01T00:00:00Z", 0, 0},
    {"12.5", 0, 0},
    {"2021-01-01T00:00:00Q", 0, 0},
};

static void test_parse(void **state)
{
    (void)state;
    for (size_t k = 0; k < sizeof rows / sizeof *rows; k++) {
        double v = 0;
        int rc = isotime_parse(rows[k].text, strlen(rows[k].text), &v, NULL);
        if ((rc == 0) != rows[k].ok)
            fail_msg("'%s': rc %d", rows[k].text, rc);
        if (rows[k].ok && fabs(v - rows[k].epoch) > 1e-6)
            fail_msg("'%s': %.6f expected %.6f", rows[k].text, v, rows[k].epoch);
    }
}

static void test_format(void **state)
{
    (void)state;
    char buf[40];
    assert_string_equal(isotime_format(946684800.0, buf, sizeof buf), "2000-01-01T00:00:00Z");
    assert_string_equal(isotime_format(946684800.25, buf, sizeof buf), "2000-01-01T00:00:00.250Z");
}

static void test_weeks(void **state)
{
    (void)state;
    const struct {
        const char *day;
        int year, week;
    } w[] = {{"2021-01-03", 2020, 53},
             {"2021-01-04", 2021, 1},
             {"2008-12-29", 2009, 1},
             {"2010-01-03", 2009, 53},
             {"2026-12-01", 2026, 49}};
    for (size_t k = 0; k < sizeof w / sizeof *w; k++) {
        double e;
        int y, wk;
        assert_int_equal(isotime_parse(w[k].day, strlen(w[k].day), &e, NULL), 0);
        assert_int_equal(isotime_week(e, &y, &wk), 0);
        if (y != w[k].year || wk != w[k].week)
            fail_msg("%s: %d-W%02d expected %d-W%02d", w[k].day, y, wk, w[k].year, w[k].week);
    }
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_parse),
        cmocka_unit_test(test_format),
        cmocka_unit_test(test_weeks),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
