/* The kept assessment's text (src/cmd/assessment.c): every number reads back
 * to the same double bit for bit (IEEE 754 binary64 round trip through
 * "%.17g" and strtod, C17 7.21.6.1 and 7.22.1.3: 17 significant digits
 * identify a double), NaN keeping its sign (printf prints "-nan"), and text
 * that is not a whole assessment is refused. */
#define _GNU_SOURCE /* strdup */
#include <math.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include <cmocka.h>

#include "../../src/cmd/assessment.h"

static uint64_t bits(double x)
{
    uint64_t u;
    memcpy(&u, &x, sizeof u);
    return u;
}

/* A view whose numbers are awkward: NaN of both signs, infinities, a
 * subnormal, the largest double, values with 17 significant digits. */
static void awkward(struct pack_view *v)
{
    memset(v, 0, sizeof *v);
    v->health.flights = 123456789012ULL;
    v->health.cycles = 0.1 + 0.2; /* 0.30000000000000004 */
    v->health.last_epoch_s = 1777622400.123456789;
    v->health.r0_now_mohm_cell = NAN;
    v->health.r0_base_mohm_cell = -NAN;
    v->health.r0_ratio = INFINITY;
    v->health.capacity_pct = -INFINITY;
    v->health.spread_mv = 4.9406564584124654e-324; /* the smallest subnormal */
    v->health.overdischarges = 7;
    v->health.weakest_cell = 3;
    v->health.weakest_count = 4;
    v->health.weakest_of = 5;
    v->health.status = HEALTH_RETIRE;
    snprintf(v->health.reason, sizeof v->health.reason,
             "capacity 79.9 %% <= 80 %%; inspect: flight 57 (2026-05-10) IR up 35 %%");
    v->trend.cycles_now = 1.7976931348623157e308;
    v->trend.days_now = -0.0;
    v->trend.r0.life.model = LIFE_POWER;
    v->trend.r0.life.cov[8] = 2.2250738585072014e-308;
    v->trend.capacity.life.model = LIFE_BREAK;
    v->trend.capacity.vs_days.n = 42;
    v->trend.capacity.plan_epoch_s = NAN;
    v->departures = 2;
}

static void round_trip_is_exact(void **state)
{
    (void)state;
    struct pack_view v, w;
    awkward(&v);
    char *text = assessment_encode(&v);
    assert_non_null(text);
    memset(&w, 0xAB, sizeof w);
    assert_int_equal(assessment_decode(text, &w), 0);
    /* tolerance: none, bit for bit */
    assert_true(w.health.flights == v.health.flights);
    assert_true(bits(w.health.cycles) == bits(v.health.cycles));
    assert_true(bits(w.health.last_epoch_s) == bits(v.health.last_epoch_s));
    assert_true(isnan(w.health.r0_now_mohm_cell) && !signbit(w.health.r0_now_mohm_cell));
    assert_true(isnan(w.health.r0_base_mohm_cell) && signbit(w.health.r0_base_mohm_cell));
    assert_true(w.health.r0_ratio == INFINITY && w.health.capacity_pct == -INFINITY);
    assert_true(bits(w.health.spread_mv) == bits(v.health.spread_mv));
    assert_int_equal(w.health.overdischarges, 7);
    assert_int_equal(w.health.weakest_cell, 3);
    assert_int_equal(w.health.status, HEALTH_RETIRE);
    assert_string_equal(w.health.reason, v.health.reason);
    assert_true(bits(w.trend.cycles_now) == bits(v.trend.cycles_now));
    assert_true(bits(w.trend.days_now) == bits(-0.0));
    assert_int_equal(w.trend.r0.life.model, LIFE_POWER);
    assert_true(bits(w.trend.r0.life.cov[8]) == bits(v.trend.r0.life.cov[8]));
    assert_int_equal(w.trend.capacity.life.model, LIFE_BREAK);
    assert_int_equal(w.trend.capacity.vs_days.n, 42);
    assert_true(isnan(w.trend.capacity.plan_epoch_s));
    assert_int_equal(w.departures, 2);
    assert_null(w.trend.buckets);
    assert_int_equal(w.trend.nbuckets, 0);
    /* the whole struct but the pointers and padding: encode again, same text */
    char *again = assessment_encode(&w);
    assert_non_null(again);
    assert_string_equal(again, text);
    free(again);
    free(text);
}

static void broken_text_is_refused(void **state)
{
    (void)state;
    struct pack_view v, w;
    awkward(&v);
    char *text = assessment_encode(&v);
    assert_non_null(text);
    char *nl = strchr(text, '\n');
    char *last = strrchr(text, '\n');
    assert_non_null(nl);
    assert_true(last > nl);
    /* another layout's first line */
    char *other = strdup(text);
    other[strlen("packbook-assessment ")] = '2';
    assert_int_equal(assessment_decode(other, &w), -1);
    free(other);
    /* the numbers cut short */
    char *cut = strdup(text);
    cut[(size_t)(last - text) - 5] = '\n';
    cut[(size_t)(last - text) - 4] = '\0';
    assert_int_equal(assessment_decode(cut, &w), -1);
    free(cut);
    /* a count that is not a whole number, a status out of range */
    struct pack_view x = v;
    char *t2 = assessment_encode(&x);
    char *first = strchr(t2, '\n') + 1; /* health.flights comes first */
    char *sp = strchr(first, ' ');
    char *bad = malloc(strlen(t2) + 8);
    snprintf(bad, strlen(t2) + 8, "%.*s2.5%s", (int)(first - t2), t2, sp);
    assert_int_equal(assessment_decode(bad, &w), -1);
    free(bad);
    free(t2);
    x.health.status = (enum health_status)7;
    t2 = assessment_encode(&x);
    assert_int_equal(assessment_decode(t2, &w), -1);
    free(t2);
    assert_int_equal(assessment_decode(NULL, &w), -1);
    assert_int_equal(assessment_decode("", &w), -1);
    free(text);
}

static void key_names_every_input(void **state)
{
    (void)state;
    struct pack_rec p = {.cells = 4, .capacity_mah = 5000};
    struct health_rules r;
    health_rules_default(&r);
    char a[ASSESSMENT_KEY_CAP], b[ASSESSMENT_KEY_CAP];
    assessment_key(&p, &r, 12, a, sizeof a);
    assessment_key(&p, &r, 12, b, sizeof b);
    assert_string_equal(a, b);
    assessment_key(&p, &r, 13, b, sizeof b);
    assert_string_not_equal(a, b);
    p.capacity_mah = 5000.000000001;
    assessment_key(&p, &r, 12, b, sizeof b);
    assert_string_not_equal(a, b);
    p.capacity_mah = 5000;
    p.cells = 6;
    assessment_key(&p, &r, 12, b, sizeof b);
    assert_string_not_equal(a, b);
    p.cells = 4;
    r.recent_flights++;
    assessment_key(&p, &r, 12, b, sizeof b);
    assert_string_not_equal(a, b);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(round_trip_is_exact),
        cmocka_unit_test(broken_text_is_refused),
        cmocka_unit_test(key_names_every_input),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
