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

/* Issue 11: out-of-range fields were rolled over by timegm (2026-02-31T24:00 became
 * 2026-03-04), and years 0000 and 9999 were accepted. Each refusal names its reason.
 * Days per month and the leap-year rule are the Gregorian calendar's (ISO 8601 uses it):
 * 2024 and 2000 leap, 2100 not (from memory of the rule: divisible by 4, not by 100
 * unless by 400). The range ends are the documented 1970-2100 window (isotime.h); zone
 * offsets in use lie within -12:00..+14:00 (from memory of the tz database). */
static void test_calendar_checks(void **state)
{
    (void)state;
    const struct {
        const char *text;
        const char *why; /* NULL: accepted */
    } c[] = {
        {"2026-02-31T24:00", "day 31: February 2026 has 28 days"},
        {"2026-02-29", "day 29: February 2026 has 28 days"},
        {"2024-02-29", NULL},
        {"2000-02-29", NULL},
        {"2100-02-29", "day 29: February 2100 has 28 days"},
        {"2026-04-31", "day 31: April 2026 has 30 days"},
        {"2026-02-28T24:00", "hour 24 is not 00-23"},
        {"2026-02-28T12:60", "minute 60 is not 00-59"},
        {"2026-02-28T12:34:60", "second 60 is not 00-59"},
        {"0000-01-01", "year 0000 is outside 1970-2100"},
        {"1969-12-31T23:59:59Z", "year 1969 is outside 1970-2100"},
        {"9999-12-31T23:59:59-23:59", "zone offset 23:59 is beyond 14:00"},
        {"9999-12-31T23:59:59Z", "year 9999 is outside 1970-2100"},
        {"2100-12-31T23:59:59Z", NULL},
        {"2100-12-31T23:59:59.9999Z", "outside 1970-2100 once its zone offset"},
        {"2100-12-31T23:00:00-01:00", "outside 1970-2100 once its zone offset"},
        {"1970-01-01T00:30:00+01:00", "outside 1970-2100 once its zone offset"},
        {"2026-01-01T00:00:00+15:00", "zone offset 15:00 is beyond 14:00"},
        {"2026-13-01", "month 13 is not 01-12"},
        {"2026-1-01", "not an ISO 8601 date-time"},
    };
    for (size_t k = 0; k < sizeof c / sizeof *c; k++) {
        double e = 0;
        char why[160] = "";
        int rc = isotime_parse_why(c[k].text, strlen(c[k].text), &e, NULL, why, sizeof why);
        if (!c[k].why && rc != 0)
            fail_msg("'%s' refused: %s", c[k].text, why);
        if (c[k].why && (rc == 0 || !strstr(why, c[k].why)))
            fail_msg("'%s': rc %d, reason '%s', expected '%s'", c[k].text, rc, why, c[k].why);
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
        cmocka_unit_test(test_calendar_checks),
        cmocka_unit_test(test_format),
        cmocka_unit_test(test_weeks),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
