/* plausible: whole-log checks. The limits are the module's own (plausible.h:
 * a day per flight, twice the rated charge; issue 10); the logs are built here
 * so that each sits just past or just short of one limit. */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdlib.h>
#include <string.h>

#include <cmocka.h>

#include "plausible.h"
#include "testutil.h"

/* n samples dt apart at a constant current (A), 16 V. */
static struct series *flat(size_t n, double dt, double current_a)
{
    struct series *s = series_new(1, 0, 0);
    assert_non_null(s);
    for (size_t k = 0; k < n; k++) {
        assert_int_equal(series_reserve_one(s), 0);
        s->t_s[k] = dt * (double)k;
        s->v_v[k] = 16.0;
        s->i_a[k] = current_a;
        s->line[k] = (uint32_t)k + 2;
        s->n++;
    }
    return s;
}

static const struct plausible_finding *find(const struct plausible *p, const char *code)
{
    for (size_t k = 0; k < p->n; k++)
        if (strcmp(p->f[k].code, code) == 0)
            return &p->f[k];
    return NULL;
}

static void test_day_long_log(void **state)
{
    (void)state;
    struct logread_stats st = {.time_unit_given = 1, .time_column = 1};
    struct plausible p;
    struct series *s = flat(25 * 60 + 1, 60.0, 0.1); /* 25 h at 60 s */
    plausible_log(s, &st, "x.csv", 0.0, &p);
    const struct plausible_finding *f = find(&p, "log_of_days");
    assert_non_null(f);
    assert_true(f->impossible && p.impossible);
    assert_non_null(strstr(f->message, "x.csv spans 25.0 h"));
    assert_null(strstr(f->message, "time_ms"));
    series_free(s);
    s = flat(23 * 60 + 1, 60.0, 0.1); /* 23 h: a long bench test, not refused */
    plausible_log(s, &st, "x.csv", 0.0, &p);
    assert_int_equal(p.n, 0);
    series_free(s);
}

static void test_charge_beyond_rated(void **state)
{
    (void)state;
    struct logread_stats st = {.time_unit_given = 1, .time_column = 1};
    struct plausible p;
    /* 10 A for 1 h = 10000 mAh: 2.5x a 4000 mAh pack, 1.67x a 6000 mAh one */
    struct series *s = flat(3601, 1.0, 10.0);
    plausible_log(s, &st, "x.csv", 4000.0, &p);
    const struct plausible_finding *f = find(&p, "charge_beyond_rated");
    assert_non_null(f);
    assert_true(f->impossible);
    assert_non_null(strstr(f->message, "10000 mAh, 250 %"));
    plausible_log(s, &st, "x.csv", 6000.0, &p);
    assert_int_equal(p.n, 0);
    plausible_log(s, &st, "x.csv", 0.0, &p); /* no rating: no charge check */
    assert_int_equal(p.n, 0);
    series_free(s);
}

static void test_ms_looking_time(void **state)
{
    (void)state;
    struct logread_stats st = {.time_column = 2};
    struct plausible p;
    struct series *s = flat(400, 100.0, 1.0); /* 0, 100, 200 ... no unit: 11.1 h */
    plausible_log(s, &st, "x.csv", 0.0, &p);
    const struct plausible_finding *f = find(&p, "time_maybe_ms");
    assert_non_null(f);
    assert_false(f->impossible);
    assert_non_null(strstr(f->message, "--map time_ms=2"));
    st.time_unit_given = 1; /* "time_s": the user said seconds */
    plausible_log(s, &st, "x.csv", 0.0, &p);
    assert_int_equal(p.n, 0);
    series_free(s);
    st.time_unit_given = 0;
    s = flat(400, 18.7, 1.0); /* fractional steps (a lab cycler's): seconds */
    plausible_log(s, &st, "x.csv", 0.0, &p);
    assert_int_equal(p.n, 0);
    series_free(s);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_day_long_log),
        cmocka_unit_test(test_charge_beyond_rated),
        cmocka_unit_test(test_ms_looking_time),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
