/* health: rules, straight-line fits and crossings.
 * Sources: an exact line is recovered exactly by least squares
 * (mathematics, tolerance 1e-9); the slope's 95 % half-width for n points
 * with Student t (n - 2 dof) against the textbook formula
 * t * s / sqrt(Sxx), and the 95 % band of the mean response against
 * t * s * sqrt(1/n + (x - xbar)^2 / Sxx) (the textbook confidence interval
 * on the mean response of simple linear regression, e.g. Montgomery and
 * Runger, Applied Statistics and Probability for Engineers; from memory);
 * capacity <= 80 % of rated as end of life (battery
 * standards' usual criterion) and R0 >= 2x baseline (common practice). */
#include <gsl/gsl_cdf.h>
#include <gsl/gsl_errno.h>
#include <math.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <string.h>

#include <cmocka.h>

#include "health.h"
#include "testutil.h"

static void test_exact_line(void **state)
{
    (void)state;
    double x[10], y[10];
    for (int k = 0; k < 10; k++) {
        x[k] = k * 3.0;
        y[k] = 4.0 + 0.25 * x[k];
    }
    for (int plain = 0; plain <= 1; plain++) {
        struct line_fit l = health_line(x, y, 10, plain);
        assert_true(l.ok);
        check_close(l.a, 4.0, 1e-9, "intercept");
        check_close(l.b, 0.25, 1e-9, "slope");
    }
}

static void test_slope_ci_textbook(void **state)
{
    (void)state;
    double x[] = {0, 1, 2, 3, 4, 5, 6, 7};
    double y[] = {1.1, 1.9, 3.2, 3.8, 5.1, 6.2, 6.8, 8.1};
    struct line_fit l = health_line(x, y, 8, 1);
    double xbar = 3.5, sxx = 0, rss = 0;
    for (int k = 0; k < 8; k++)
        sxx += (x[k] - xbar) * (x[k] - xbar);
    for (int k = 0; k < 8; k++) {
        double r = y[k] - l.a - l.b * x[k];
        rss += r * r;
    }
    double want = gsl_cdf_tdist_Pinv(0.975, 6) * sqrt(rss / 6) / sqrt(sxx);
    check_rel(l.b_ci95, want, 1e-9, "slope 95 % half-width");
}

static void test_band_textbook(void **state)
{
    (void)state;
    double x[] = {0, 1, 2, 3, 4, 5, 6, 7};
    double y[] = {1.1, 1.9, 3.2, 3.8, 5.1, 6.2, 6.8, 8.1};
    struct line_fit l = health_line(x, y, 8, 1);
    double xbar = 3.5, sxx = 0, rss = 0;
    for (int k = 0; k < 8; k++) {
        double r = y[k] - l.a - l.b * x[k];
        sxx += (x[k] - xbar) * (x[k] - xbar);
        rss += r * r;
    }
    double t = gsl_cdf_tdist_Pinv(0.975, 6), s = sqrt(rss / 6);
    /* inside, at the centre (narrowest) and extrapolated well beyond */
    const double at[] = {0.0, 3.5, 7.0, 20.0};
    for (size_t k = 0; k < sizeof at / sizeof *at; k++) {
        double want = t * s * sqrt(1.0 / 8 + (at[k] - xbar) * (at[k] - xbar) / sxx);
        check_rel(health_line_band(&l, at[k]), want, 1e-9, "band half-width");
    }
    assert_true(health_line_band(&l, 3.5) < health_line_band(&l, 0.0));
    struct line_fit none = {0};
    assert_true(isnan(health_line_band(&none, 1.0)));
}

static void test_crossing_directions(void **state)
{
    (void)state;
    struct line_fit up = {.ok = 1, .a = 10.0, .b = 0.1, .b_ci95 = 0.01};
    double x = 0;
    assert_int_equal(health_crossing(&up, 20.0, 1, 50.0, &x), 1);
    check_close(x, 100.0, 1e-9, "rising line reaches 20 at x = 100");
    assert_int_equal(health_crossing(&up, 12.0, 1, 50.0, &x), -1); /* 15 at x = 50: past */
    assert_int_equal(health_crossing(&up, 5.0, 0, 50.0, &x), 0);   /* falling level, rising line */
    struct line_fit flat = {.ok = 1, .a = 10.0, .b = 0.1, .b_ci95 = 0.2};
    assert_int_equal(health_crossing(&flat, 20.0, 1, 50.0, &x), 0); /* not significant */
    struct line_fit down = {.ok = 1, .a = 100.0, .b = -0.5, .b_ci95 = 0.1};
    assert_int_equal(health_crossing(&down, 80.0, 0, 10.0, &x), 1);
    check_close(x, 40.0, 1e-9, "falling line reaches 80 at x = 40");
}

static void test_rules(void **state)
{
    (void)state;
    struct health_rules r;
    health_rules_default(&r);
    struct health_flight f[10];
    for (int k = 0; k < 10; k++) {
        f[k] = (struct health_flight){.epoch_s = 1e9 + k * 86400.0,
                                      .charge_mah = 4000,
                                      .r0_mohm = 16.0,
                                      .capacity_mah = 4900,
                                      .spread_rest_mv = 5,
                                      .below_floor = 0};
    }
    struct pack_health h;
    health_assess(f, 10, 4, 5000, &r, &h);
    assert_int_equal(h.status, HEALTH_OK);
    check_close(h.cycles, 8.0, 1e-12, "40000 mAh over 5000 mAh rated");
    check_close(h.r0_now_mohm_cell, 4.0, 1e-12, "16 mOhm over 4 cells");
    /* the last five at 3999 mAh: 79.98 % of rated, at or below 80 % */
    for (int k = 5; k < 10; k++)
        f[k].capacity_mah = 3999;
    health_assess(f, 10, 4, 5000, &r, &h);
    assert_int_equal(h.status, HEALTH_RETIRE);
    assert_non_null(strstr(h.reason, "capacity 80 %"));
    /* R0 doubled against the first three */
    for (int k = 0; k < 10; k++)
        f[k].capacity_mah = 4900;
    for (int k = 5; k < 10; k++)
        f[k].r0_mohm = 32.0;
    health_assess(f, 10, 4, 5000, &r, &h);
    assert_int_equal(h.status, HEALTH_RETIRE);
    check_close(h.r0_ratio, 2.0, 1e-12, "R0 ratio");
    /* one over-discharge is a watch */
    for (int k = 5; k < 10; k++)
        f[k].r0_mohm = 16.0;
    f[9].below_floor = 1;
    health_assess(f, 10, 4, 5000, &r, &h);
    assert_int_equal(h.status, HEALTH_WATCH);
}

static void test_weakest_cell(void **state)
{
    (void)state;
    /* the cell named most often by the last recent_flights (5) flights that name one; a tie
     * goes to the most recent; flights without cell columns (0) are passed over */
    struct health_rules r;
    health_rules_default(&r);
    struct health_flight f[8];
    static const int weak[8] = {1, 1, 1, 2, 0, 3, 2, 3};
    for (int k = 0; k < 8; k++)
        f[k] = (struct health_flight){.epoch_s = 1e9 + k * 86400.0,
                                      .charge_mah = 1000,
                                      .r0_mohm = 16,
                                      .capacity_mah = NAN,
                                      .spread_rest_mv = NAN,
                                      .weakest_cell = weak[k]};
    struct pack_health h;
    health_assess(f, 8, 4, 5000, &r, &h);
    /* last five naming one: 3, 2, 3, 2, 1 -> 3 and 2 twice each, 3 the most recent */
    assert_int_equal(h.weakest_cell, 3);
    assert_int_equal(h.weakest_count, 2);
    assert_int_equal(h.weakest_of, 5);
    for (int k = 0; k < 8; k++)
        f[k].weakest_cell = 0;
    health_assess(f, 8, 4, 5000, &r, &h);
    assert_int_equal(h.weakest_cell, 0);
    assert_int_equal(h.weakest_of, 0);
}

static void test_trend_buckets_iso_weeks(void **state)
{
    (void)state;
    /* 2021-01-03 is in 2020-W53 and 2021-01-04 in 2021-W01 (ISO 8601) */
    struct health_rules r;
    health_rules_default(&r);
    struct health_flight f[3] = {
        {.epoch_s = 1609632000.0 + 3600,
         .charge_mah = 1000,
         .r0_mohm = 10,
         .capacity_mah = NAN,
         .spread_rest_mv = NAN}, /* 2021-01-03T01:00Z */
        {.epoch_s = 1609718400.0 + 3600,
         .charge_mah = 1000,
         .r0_mohm = 10,
         .capacity_mah = NAN,
         .spread_rest_mv = NAN}, /* 2021-01-04T01:00Z */
        {.epoch_s = 1609718400.0 + 7200,
         .charge_mah = 1000,
         .r0_mohm = 12,
         .capacity_mah = NAN,
         .spread_rest_mv = NAN},
    };
    struct pack_trend t;
    assert_int_equal(health_trend(f, 3, 1, 5000, &r, TREND_WEEK, 1, 1000, &t), 0);
    assert_int_equal(t.nbuckets, 2);
    assert_string_equal(t.buckets[0].key, "2020-W53");
    assert_string_equal(t.buckets[1].key, "2021-W01");
    assert_int_equal(t.buckets[1].flights, 2);
    check_close(t.buckets[1].r0_mohm_cell, 11.0, 1e-12, "mean of the week");
    health_trend_release(&t);
}

static void test_trend_without_flights(void **state)
{
    (void)state;
    struct health_rules r;
    health_rules_default(&r);
    struct pack_trend t;
    assert_int_equal(health_trend(NULL, 0, 4, 5000, &r, TREND_WEEK, 0, 1000, &t), 0);
    /* no baseline, so no level and no crossing: unknown, not zero (a zero
     * level once drew "retire 0.0 mOhm/cell" and a 1970 crossing) */
    assert_true(isnan(t.r0.level) && isnan(t.capacity.level));
    assert_true(isnan(t.r0.cross_cycles) && isnan(t.r0.cross_epoch_s));
    assert_true(isnan(t.capacity.cross_cycles) && isnan(t.capacity.cross_epoch_s));
    assert_false(t.r0.vs_cycles.ok);
    health_trend_release(&t);
}

/* A resistance <= 0 (stored by older versions) is no measurement: it never
 * sets the baseline, so no ratio comes out negative. Weighted median by
 * hand: values 1500 (w 1/10^2), 1900 (1/40^2), 2000 (1/20^2): total weight
 * 0.0100 + 0.000625 + 0.0025; sorted 1500 .. 2000, the cumulative weight
 * passes half (0.0066) at 1500 already (mathematics). */
static void test_only_valid_values(void **state)
{
    (void)state;
    struct health_flight f[6] = {0};
    double r0[] = {-40.0, 20.0, 21.0, 22.0, 40.0, 41.0};
    for (int k = 0; k < 6; k++) {
        f[k].epoch_s = 86400.0 * k;
        f[k].charge_mah = 1000.0;
        f[k].r0_mohm = r0[k];
        f[k].capacity_mah = f[k].capacity_ci95_mah = NAN;
        f[k].spread_rest_mv = NAN;
    }
    f[3].capacity_mah = 1900.0, f[3].capacity_ci95_mah = 40.0;
    f[4].capacity_mah = 1500.0, f[4].capacity_ci95_mah = 10.0;
    f[5].capacity_mah = 2000.0, f[5].capacity_ci95_mah = 20.0;
    struct health_rules r;
    health_rules_default(&r);
    struct pack_health h;
    health_assess(f, 6, 1, 2000.0, &r, &h);
    check_close(h.r0_base_mohm_cell, 21.0, 1e-9, "baseline: median of 20, 21 (and 22)");
    assert_true(h.r0_ratio > 0.0);
    check_close(h.capacity_pct, 75.0, 1e-9, "precision-weighted median 1500 mAh of 2000");
    assert_int_equal(h.status, HEALTH_RETIRE);
    /* the trend says "reached" exactly when the rule fires */
    struct pack_trend t;
    assert_int_equal(health_trend(f, 6, 1, 2000.0, &r, TREND_WEEK, 1, 1000.0, &t), 0);
    assert_true(t.capacity.crossed);
    health_trend_release(&t);
}

static void test_prediction_band(void **state)
{
    (void)state;
    /* numpy.linalg.lstsq and scipy.stats.t.ppf(0.975, 4) (Debian python3-numpy/scipy) on
     * these six points: the 95 % half-widths of the mean and of a new point at x = 2.5 and
     * x = 8 (beyond the data); relative 1e-6 */
    const double x[6] = {0, 1, 2, 3, 4, 5}, y[6] = {1.0, 2.1, 2.9, 4.2, 4.8, 6.1};
    struct line_fit l = health_line(x, y, 6, 1);
    assert_true(l.ok);
    check_rel(health_line_band(&l, 2.5), 0.18641376864717255, 1e-6, "mean, x 2.5");
    check_rel(health_line_predict_band(&l, 2.5), 0.493204472798748, 1e-6, "new point, x 2.5");
    check_rel(health_line_band(&l, 8.0), 0.6286161006577212, 1e-6, "mean, x 8");
    check_rel(health_line_predict_band(&l, 8.0), 0.7769547997493599, 1e-6, "new point, x 8");
    struct line_fit none = {0};
    assert_true(isnan(health_line_predict_band(&none, 1.0)));
}

int main(void)
{
    gsl_set_error_handler_off();
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_exact_line),
        cmocka_unit_test(test_slope_ci_textbook),
        cmocka_unit_test(test_band_textbook),
        cmocka_unit_test(test_crossing_directions),
        cmocka_unit_test(test_rules),
        cmocka_unit_test(test_only_valid_values),
        cmocka_unit_test(test_weakest_cell),
        cmocka_unit_test(test_prediction_band),
        cmocka_unit_test(test_trend_buckets_iso_weeks),
        cmocka_unit_test(test_trend_without_flights),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
