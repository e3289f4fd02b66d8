/* predict: the pack simulator against closed forms.
 * Sources:
 * - constant current, linear OCV, constant R: SoC falls linearly, so the
 *   times to the reserve and to the floor have closed forms (mathematics);
 *   the simulator must match to 0.1 %.
 * - constant power with R = 0 and linear OCV E(s) = a + b s: separable,
 *   t = 36 C / P [a (s0 - s1) + b/2 (s0^2 - s1^2)] (C in Ah, s in %)
 *   (mathematics), to 0.1 %.
 * - IEC 61434: It = Cn / 1 h, so a 1300 mAh pack at 1.3 A is empty after
 *   1 h at constant current (0.1 %).
 * - 108 s at C/3 takes exactly 1 % of SoC (arithmetic: 108/3600 x 33.3 %).
 * - Peukert, rated-capacity form t = H (C / (I H))^k (from memory).
 * - Arrhenius R(T) = Rref exp(Ea/R (1/T - 1/Tref)) (its definition). */
#include <gsl/gsl_errno.h>
#include <math.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>

#include <cmocka.h>

#include "predict.h"
#include "testutil.h"

static const double lin_soc[] = {0, 100};
static const double lin_ocv[] = {3.0, 4.2};
static const struct chem_info linear = {CHEM_LIPO, "linear", "linear", "test", 2,   lin_soc,
                                        lin_ocv,   3.0,      4.15,     3.4,    2.5, 4.2};

static void test_constant_current_closed_form(void **state)
{
    (void)state;
    struct predict_pack p = {&linear, 1, 2.0, 0.05, 0, 0, 25, 0.0};
    struct predict_load l = {.kind = LOAD_CURRENT, .current_a = 4.0};
    struct predict_opts o;
    predict_opts_default(&o);
    o.floor_v = 3.6;
    struct predict_run r;
    assert_int_equal(predict_run(&p, &l, &o, &r), 0);
    /* reserve: 70 % of 2 Ah at 4 A = 1260 s */
    check_rel(r.t_reserve_s, 1260.0, 1e-3, "time to 30 % reserve");
    /* floor: 3.0 + 0.012 s - 0.2 = 3.6 at s = 66.67 %, after 33.33 % x 7200 As / 4 A = 600 s */
    check_rel(r.t_floor_s, 600.0, 1e-3, "time to the 3.6 V floor");
    assert_int_equal(r.binding, LIMIT_FLOOR);
    check_rel(r.t_safe_s, 600.0, 1e-3, "safe time is the first limit");
}

static void test_constant_power_closed_form(void **state)
{
    (void)state;
    struct predict_pack p = {&linear, 1, 2.0, 0.0, 0, 0, 25, 0.0};
    struct predict_load l = {.kind = LOAD_POWER, .power_w = 10.0};
    struct predict_opts o;
    predict_opts_default(&o);
    o.floor_v = 0.5;
    struct predict_run r;
    assert_int_equal(predict_run(&p, &l, &o, &r), 0);
    double a = 3.0, b = 0.012, s0 = 100, s1 = 30;
    double want = 36.0 * 2.0 / 10.0 * (a * (s0 - s1) + b / 2 * (s0 * s0 - s1 * s1));
    check_rel(r.t_reserve_s, want, 1e-3, "constant power, separable closed form");
}

static void test_iec61434_one_hour(void **state)
{
    (void)state;
    struct predict_pack p = {ocv_chem(CHEM_LIPO), 1, 1.3, 0.03, 0, 0, 25, 0.0};
    struct predict_load l = {.kind = LOAD_CURRENT, .current_a = 1.3};
    struct predict_opts o;
    predict_opts_default(&o);
    o.reserve_pct = 0.0;
    o.floor_v = 0.5;
    struct predict_run r;
    assert_int_equal(predict_run(&p, &l, &o, &r), 0);
    check_rel(r.t_empty_s, 3600.0, 1e-3, "IEC 61434: 1300 mAh at 1.3 A lasts 1 h");
}

static void test_108s_at_c3_is_one_percent(void **state)
{
    (void)state;
    struct predict_pack p = {ocv_chem(CHEM_LIPO), 4, 5.0, 0.02, 0, 0, 25, 0.0};
    struct predict_load l = {.kind = LOAD_CURRENT, .current_a = 5.0 / 3.0};
    struct predict_opts o;
    predict_opts_default(&o);
    o.soc0_pct = 80.0;
    o.stop_after_s = 108.0;
    struct predict_run r;
    assert_int_equal(predict_run(&p, &l, &o, &r), 0);
    check_close(r.soc_after_pct, 79.0, 1e-9, "108 s at C/3 = 1 % SoC");
}

static void test_peukert(void **state)
{
    (void)state;
    struct predict_pack p = {&linear, 1, 2.0, 0.0, 0, 0, 25, 0.0};
    struct predict_load l = {.kind = LOAD_CURRENT, .current_a = 4.0};
    struct predict_opts o;
    predict_opts_default(&o);
    o.reserve_pct = 0.0;
    o.floor_v = 0.5;
    o.peukert_k = 1.2;
    o.peukert_h = 1.0;
    struct predict_run r;
    assert_int_equal(predict_run(&p, &l, &o, &r), 0);
    check_rel(r.t_empty_s, 3600.0 * pow(2.0 / 4.0, 1.2), 1e-3, "Peukert t = H (C/(I H))^k");
}

static void test_arrhenius_and_collapse(void **state)
{
    (void)state;
    check_close(predict_r_at(0.02, 25, 25, 30000), 0.02, 1e-15, "R at Tref");
    double want = 0.02 * exp(30000 / GAS_CONSTANT_J_MOL_K * (1 / 273.15 - 1 / 298.15));
    check_rel(predict_r_at(0.02, 25, 0, 30000), want, 1e-12, "R at 0 degC");
    /* 1 cell at 4.2 V with 1 ohm delivers at most E^2/4R = 4.4 W */
    struct predict_pack p = {&linear, 1, 2.0, 1.0, 0, 0, 25, 0.0};
    struct predict_load l = {.kind = LOAD_POWER, .power_w = 5.0};
    struct predict_opts o;
    predict_opts_default(&o);
    o.floor_v = 0.5;
    struct predict_run r;
    assert_int_equal(predict_run(&p, &l, &o, &r), 0);
    assert_int_equal(r.binding, LIMIT_COLLAPSE);
    check_close(r.t_safe_s, 0.0, 0.0, "cannot deliver from the start");
}

static void test_monte_carlo_orders(void **state)
{
    (void)state;
    struct predict_pack p = {ocv_chem(CHEM_LIPO), 4, 5.0, 0.016, 0.008, 6, 25, 0.0};
    struct predict_load l = {.kind = LOAD_POWER, .power_w = 300};
    struct predict_opts o;
    predict_opts_default(&o);
    struct predict_spread sp = {.capacity_sd_ah = 0.2, .r0_sd_ohm = 0.002, .load_sd = 20, .runs = 300, .seed = 7};
    struct predict_mc mc;
    assert_int_equal(predict_monte_carlo(&p, &l, &o, &sp, &mc), 0);
    assert_true(mc.t_p05_s < mc.t_median_s && mc.t_median_s < mc.t_p95_s);
    struct predict_run r;
    predict_run(&p, &l, &o, &r);
    /* the nominal run sits near the median (within 3 %) */
    check_rel(mc.t_median_s, r.t_safe_s, 0.03, "median near nominal");
}

int main(void)
{
    gsl_set_error_handler_off();
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_constant_current_closed_form),
        cmocka_unit_test(test_constant_power_closed_form),
        cmocka_unit_test(test_iec61434_one_hour),
        cmocka_unit_test(test_108s_at_c3_is_one_percent),
        cmocka_unit_test(test_peukert),
        cmocka_unit_test(test_arrhenius_and_collapse),
        cmocka_unit_test(test_monte_carlo_orders),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
