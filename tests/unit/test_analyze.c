/* analyze: the estimator on generated series with known truth.
 *
 * Sources:
 * - IEC 61960-3 DC internal resistance (from memory): discharge at
 *   I1 = 0.2 It for 10 s, then at I2 = 1.0 It for 1 s; R = (U1 - U2)/(I2 - I1)
 *   with U1, U2 the voltages at the end of each period. A log of that pulse
 *   must give the same resistance. Tolerance 1 %: the two-point formula also
 *   counts the OCV fall during the 1 s pulse (0.2 mV here, 0.6 % of R), which
 *   the fit separates, so the fit is also checked against the generating R
 *   to 0.5 %.
 * - Exactly linear model V = OCV(q) - R I: recovered to 1e-6 (mathematics).
 * - Constant current: R cannot be separated from the OCV slope
 *   (identifiability; the warning must say so). */
#include <gsl/gsl_errno.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdlib.h>
#include <string.h>

#include <cmocka.h>

#include "analyze.h"
#include "ocv.h"
#include "testutil.h"

static int has_warning(const struct analysis *a, const char *code)
{
    for (size_t k = 0; k < a->nwarnings; k++)
        if (strcmp(a->warnings[k].code, code) == 0)
            return 1;
    return 0;
}

static struct analysis *run(const struct series *s, struct analyze_opts o)
{
    struct logread_stats st = {0};
    struct pb_error err = {0};
    struct analysis *a = analysis_new();
    assert_non_null(a);
    if (analyze_series(s, &st, "gen", &o, a, &err) != PB_OK)
        fail_msg("analyze: %s", err.msg);
    return a;
}

/* One cell, 1300 mAh, OCV from the LiPo table at SoC falling with charge,
 * pure ohmic R: voltage follows exactly. */
static void fill(struct series *s, size_t k, double t, double i, double *q_ah, double r_ohm,
                 double cap_ah, double soc0)
{
    if (k > 0)
        *q_ah += (t - s->t_s[k - 1]) * 0.5 * (i + s->i_a[k - 1]) / 3600.0;
    s->t_s[k] = t;
    s->i_a[k] = i;
    double soc = soc0 - 100.0 * *q_ah / cap_ah;
    s->v_v[k] = ocv_from_soc(ocv_chem(CHEM_LIPO), soc) - r_ohm * i;
    s->n = k + 1;
}

static void test_iec61960_pulse(void **state)
{
    (void)state;
    const double cap_ah = 1.3, it_a = 1.3, r_ohm = 0.035, dt = 0.01;
    struct series *s = series_new(1, 0, 0);
    double q = 0.0;
    size_t k = 0;
    /* 10 s at 0.2 It, then 1 s at 1.0 It, sampled at 100 Hz; the step is
     * between two samples 1 ms apart so both currents are held exactly */
    for (double t = 0.0; t <= 10.0 + 1e-9; t += dt, k++) {
        assert_int_equal(series_reserve_one(s), 0);
        fill(s, k, t, 0.2 * it_a, &q, r_ohm, cap_ah, 70.0);
    }
    size_t k_u1 = k - 1;
    for (double t = 10.001; t <= 11.001 + 1e-9; t += dt, k++) {
        assert_int_equal(series_reserve_one(s), 0);
        fill(s, k, t, 1.0 * it_a, &q, r_ohm, cap_ah, 70.0);
    }
    double u1 = s->v_v[k_u1], u2 = s->v_v[s->n - 1];
    double r_iec = (u1 - u2) / (it_a - 0.2 * it_a);
    struct analyze_opts o = {.cells = 1, .chemistry = CHEM_LIPO, .capacity_mah = 1300};
    struct analysis *a = run(s, o);
    check_rel(a->r0_mohm.value, 1000.0 * r_iec, 0.01, "IEC 61960-3 two-point resistance");
    check_rel(a->r0_mohm.value, 1000.0 * r_ohm, 0.005, "the generating resistance");
    assert_true(isfinite(a->r0_mohm.ci95) && a->r0_mohm.ci95 >= 0.0); /* zero for exact data */
    analysis_free(a);
    series_free(s);
}

static void test_exact_static_model(void **state)
{
    (void)state;
    struct series *s = series_new(1, 0, 0);
    double q = 0.0;
    for (size_t k = 0; k < 2000; k++) {
        assert_int_equal(series_reserve_one(s), 0);
        double i = 5.0 + 4.0 * (double)((k / 50) % 3); /* steps 5, 9, 13 A */
        s->t_s[k] = 0.1 * (double)k;
        if (k > 0)
            q += 0.1 * 0.5 * (i + s->i_a[k - 1]) / 3600.0;
        s->i_a[k] = i;
        s->v_v[k] = 16.4 - 0.9 * q + 0.2 * q * q - 0.02 * i; /* quadratic OCV in q */
        s->n = k + 1;
    }
    struct analyze_opts o = {.cells = 4, .chemistry = CHEM_LIPO, .plain_fit = 1};
    struct analysis *a = run(s, o);
    /* each 60 s window's straight OCV line leaves the quadratic's curvature
     * (0.2 q^2 over 0.03 Ah: a few uV): R to 1e-4 */
    check_rel(a->r0_model_mohm.value, 20.0, 1e-4, "R of the windowed model");
    assert_false(isfinite(a->tau_s.value)); /* no RC branch in the data */
    /* the steps (4 A every 5 s) carry the OCV fall of one 0.1 s interval: R to 1e-3 */
    assert_string_equal(a->r0_method, "steps");
    check_rel(a->r0_mohm.value, 20.0, 1e-3, "R of the current steps");
    check_close(a->ocv_start_v, 16.4, 1e-6, "OCV at zero charge");
    analysis_free(a);
    series_free(s);
}

static void test_constant_current_not_identifiable(void **state)
{
    (void)state;
    struct series *s = series_new(1, 0, 0);
    double q = 0.0;
    for (size_t k = 0; k < 1000; k++) {
        assert_int_equal(series_reserve_one(s), 0);
        fill(s, k, (double)k, 10.0, &q, 0.02, 5.0, 90.0);
    }
    struct analyze_opts o = {.cells = 1, .chemistry = CHEM_LIPO};
    struct analysis *a = run(s, o);
    assert_true(isnan(a->r0_mohm.value));
    assert_true(has_warning(a, "r0_not_identifiable"));
    check_rel(a->charge_used_mah, 10.0 * 999.0 / 3.6, 1e-12, "10 A for 999 s");
    analysis_free(a);
    series_free(s);
}

/* Time under the cut-off counts only while loaded: 1S LiPo, 10 A at 3.2 V
 * (below the 3.30 V cut-off) for samples 20..29 (10 intervals of 1 s, the
 * last one ending at rest), then 60 s at rest at 3.25 V, also below the
 * cut-off but not over-discharging anything (issue 12; arithmetic). */
static void test_cutoff_time_only_under_load(void **state)
{
    (void)state;
    struct series *s = series_new(1, 0, 0);
    for (size_t k = 0; k < 90; k++) {
        assert_int_equal(series_reserve_one(s), 0);
        s->t_s[k] = (double)k;
        int loaded = k < 30;
        s->i_a[k] = loaded ? 10.0 : 0.0;
        s->v_v[k] = k < 20 ? 3.6 : (loaded ? 3.2 : 3.25);
        s->n = k + 1;
    }
    struct analyze_opts o = {.cells = 1, .chemistry = CHEM_LIPO, .capacity_mah = 5000};
    struct analysis *a = run(s, o);
    check_close(a->time_below_floor_s, 10.0, 1e-9, "10 loaded seconds below the cut-off");
    assert_true(has_warning(a, "below_floor"));
    analysis_free(a);
    series_free(s);
}

static void test_voltage_only(void **state)
{
    (void)state;
    struct series *s = series_new(0, 0, 0);
    for (size_t k = 0; k < 100; k++) {
        assert_int_equal(series_reserve_one(s), 0);
        s->t_s[k] = (double)k;
        s->v_v[k] = 8.32 - 0.005 * (double)k;
        s->n = k + 1;
    }
    struct analyze_opts o = {.chemistry = CHEM_LIPO};
    struct analysis *a = run(s, o);
    assert_true(has_warning(a, "voltage_only"));
    assert_true(isnan(a->charge_used_mah));
    assert_true(isnan(a->capacity_mah.value));
    assert_int_equal(a->cells, 2);
    /* common practice: a 2S LiPo resting above 8.3 V counts as full */
    assert_string_equal(a->state_start, "full");
    analysis_free(a);
    series_free(s);
}

static void test_few_samples_soc_from_loaded_voltage(void **state)
{
    (void)state;
    /* 5 samples: no fits, but SoC still read from the (loaded) voltage;
     * common practice: a 2S LiPo resting at 8.32 V (above 8.3 V) is full */
    struct series *s = series_new(1, 0, 0);
    for (size_t k = 0; k < 5; k++) {
        assert_int_equal(series_reserve_one(s), 0);
        s->t_s[k] = (double)k;
        s->v_v[k] = 8.32;
        s->i_a[k] = 0.0;
        s->line[k] = (uint32_t)(k + 2);
        s->n = k + 1;
    }
    struct analyze_opts o = {.cells = 2, .chemistry = CHEM_LIPO};
    struct analysis *a = run(s, o);
    assert_true(has_warning(a, "too_few_samples"));
    assert_true(isfinite(a->soc_start_pct.value));
    assert_string_equal(a->state_start, "full");
    assert_string_equal(a->ocv_start_method, "loaded");
    analysis_free(a);
    series_free(s);
}

int main(void)
{
    gsl_set_error_handler_off();
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_iec61960_pulse),
        cmocka_unit_test(test_exact_static_model),
        cmocka_unit_test(test_constant_current_not_identifiable),
        cmocka_unit_test(test_voltage_only),
        cmocka_unit_test(test_cutoff_time_only_under_load),
        cmocka_unit_test(test_few_samples_soc_from_loaded_voltage),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
