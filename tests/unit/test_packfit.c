/* packfit: a log against the pack it is filed under. Expected values:
 * the charge limits of the chemistries (LiPo 4.20 V per cell, LiHV 4.35 V:
 * common practice, the makers' charge voltages) and series arithmetic
 * (pack voltage = cells x cell voltage). A full 6S LiHV pack (6 x 4.35 =
 * 26.1 V) filed under a 4S LiPo reads 6.5 V per cell: refused; a full 4S
 * LiPo (16.8 V) fits; the accepted edge is max_v x (1 + PACKFIT_OVER_MAX),
 * checked 0.01 V either side. */
#include <math.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <string.h>

#include <cmocka.h>

#include "packfit.h"

static struct analysis base(double vmax, double charge_mah, int ncells_detail)
{
    struct analysis a;
    memset(&a, 0, sizeof a);
    a.voltage_max_v = vmax;
    a.charge_used_mah = charge_mah;
    a.ncells_detail = ncells_detail;
    a.capacity_mah.value = a.capacity_mah.ci95 = NAN;
    return a;
}

static void test_fits(void **state)
{
    (void)state;
    struct packfit_pack p = {4, ocv_chem(CHEM_LIPO), 5000};
    char why[256] = "";
    struct analysis a = base(4 * 4.20, 3400, 0);
    assert_int_equal(packfit_check(&a, &p, why, sizeof why), 0);
    a = base(4 * 4.20, 3400, 4); /* cell columns that agree */
    assert_int_equal(packfit_check(&a, &p, why, sizeof why), 0);
    a = base(4 * 3.60, 800, 0); /* a short hop on a nearly empty pack */
    assert_int_equal(packfit_check(&a, &p, why, sizeof why), 0);
}

static void test_cell_columns(void **state)
{
    (void)state;
    struct packfit_pack p = {4, ocv_chem(CHEM_LIPO), 5000};
    char why[256] = "";
    struct analysis a = base(4 * 4.2, 3400, 6);
    assert_int_equal(packfit_check(&a, &p, why, sizeof why), 1);
    assert_non_null(strstr(why, "6 cell columns"));
    assert_non_null(strstr(why, "4S"));
}

static void test_voltage_range(void **state)
{
    (void)state;
    struct packfit_pack lipo4 = {4, ocv_chem(CHEM_LIPO), 5000};
    char why[256] = "";
    /* 6S LiHV charged: 6 x 4.35 V */
    struct analysis a = base(6 * 4.35, 2400, 0);
    assert_int_equal(packfit_check(&a, &lipo4, why, sizeof why), 1);
    assert_non_null(strstr(why, "per cell"));
    /* the edge: max_v (1 + 3 %) per cell */
    double edge = 4 * ocv_chem(CHEM_LIPO)->max_v * (1.0 + PACKFIT_OVER_MAX);
    a = base(edge - 0.01, 2400, 0);
    assert_int_equal(packfit_check(&a, &lipo4, why, sizeof why), 0);
    a = base(edge + 0.01, 2400, 0);
    assert_int_equal(packfit_check(&a, &lipo4, why, sizeof why), 1);
    /* a 3S LiPo log (12.6 V full) filed under a 6S pack: 2.1 V per cell at best */
    struct packfit_pack lipo6 = {6, ocv_chem(CHEM_LIPO), 5000};
    a = base(3 * 4.2, 2400, 0);
    assert_int_equal(packfit_check(&a, &lipo6, why, sizeof why), 1);
    assert_non_null(strstr(why, "never exceeds"));
    /* a charged 4S LiPo under a 4S LFP pack (3.65 V charge limit): 4.2 V per cell */
    struct packfit_pack lfp4 = {4, ocv_chem(CHEM_LFP), 5000};
    a = base(4 * 4.2, 2400, 0);
    assert_int_equal(packfit_check(&a, &lfp4, why, sizeof why), 1);
}

static void test_charge(void **state)
{
    (void)state;
    struct packfit_pack p = {4, ocv_chem(CHEM_LIPO), 2200};
    char why[256] = "";
    struct analysis a = base(16.8, 2200 * PACKFIT_CHARGE_RATIO - 1, 0);
    assert_int_equal(packfit_check(&a, &p, why, sizeof why), 0);
    a = base(16.8, 4000, 0); /* a 5000 mAh pack's flight */
    assert_int_equal(packfit_check(&a, &p, why, sizeof why), 1);
    assert_non_null(strstr(why, "4000 mAh"));
}

static void test_capacity_estimate(void **state)
{
    (void)state;
    struct packfit_pack p = {4, ocv_chem(CHEM_LIPO), 1000};
    char why[256] = "";
    /* 4999 +/- 1192 mAh: at least 3807, over 1.5 x 1000 */
    struct analysis a = base(16.8, 890, 0);
    a.capacity_mah.value = 4999;
    a.capacity_mah.ci95 = 1192;
    assert_int_equal(packfit_check(&a, &p, why, sizeof why), 1);
    assert_non_null(strstr(why, "capacity estimate"));
    /* an interval reaching down to 1.5 x rated is not clear enough */
    a.capacity_mah.value = 2500;
    a.capacity_mah.ci95 = 1001;
    assert_int_equal(packfit_check(&a, &p, why, sizeof why), 0);
    /* a worn pack reading low is the evidence for retiring it: never refused */
    a.capacity_mah.value = 300;
    a.capacity_mah.ci95 = 20;
    assert_int_equal(packfit_check(&a, &p, why, sizeof why), 0);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_fits),
        cmocka_unit_test(test_cell_columns),
        cmocka_unit_test(test_voltage_range),
        cmocka_unit_test(test_charge),
        cmocka_unit_test(test_capacity_estimate),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
