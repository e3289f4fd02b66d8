/* coulomb: trapezoid charge and exact energy of linear pieces.
 * Sources: the trapezoid rule is exact for piecewise-linear integrands
 * (mathematics); IEC 61434 reference current It = Cn / 1 h, so a 1300 mAh
 * cell at 1.3 A for 1 h delivers 1300 mAh. */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdlib.h>

#include <cmocka.h>

#include "coulomb.h"
#include "testutil.h"

static void test_iec61434_it(void **state)
{
    (void)state;
    /* 1300 mAh at It = 1.3 A for 3600 s, sampled every second */
    size_t n = 3601;
    double *t = malloc(n * sizeof *t), *v = malloc(n * sizeof *v), *i = malloc(n * sizeof *i);
    for (size_t k = 0; k < n; k++) {
        t[k] = (double)k;
        v[k] = 3.7;
        i[k] = 1.3;
    }
    struct coulomb_result r;
    coulomb_count(t, v, i, n, 10.0, &r);
    check_close(r.discharged_mah, 1300.0, 1e-9, "IEC 61434: 1.3 A x 1 h = 1300 mAh");
    check_close(r.discharged_wh, 1.3 * 3.7, 1e-9, "energy at constant 3.7 V");
    check_close(r.regen_mah, 0.0, 0.0, "no regeneration");
    assert_int_equal(r.gaps, 0);
    free(t), free(v), free(i);
}

static void test_piecewise_linear_exact(void **state)
{
    (void)state;
    /* ramps 0 -> 10 A in 100 s, 10 -> 4 A in 50 s, uneven sampling at the knots:
     * area = 0.5*100*10 + 50*(10+4)/2 = 500 + 350 = 850 A s */
    double t[] = {0, 100, 150};
    double i[] = {0, 10, 4};
    double v[] = {12, 12, 12};
    struct coulomb_result r;
    coulomb_count(t, v, i, 3, 1000.0, &r);
    check_close(r.discharged_mah, 850.0 / 3.6, 1e-9, "trapezoid exact on linear pieces");

    /* energy: V and I both linear, V from 16 to 14 V, I from 0 to 10 A over 60 s:
     * integral of (16 - 2 s/60)(10 s/60) ds over [0,60] = 60*(16*5 - 2*10/3) = 4400 J */
    double t2[] = {0, 60}, v2[] = {16, 14}, i2[] = {0, 10};
    coulomb_count(t2, v2, i2, 2, 1000.0, &r);
    check_close(r.discharged_wh * 3600.0, 4400.0, 1e-9, "exact product of two linear pieces");
}

static void test_sign_split(void **state)
{
    (void)state;
    /* +10 A to -10 A in 2 s: 5 A s out, 5 A s back, net zero */
    double t[] = {0, 2}, v[] = {10, 10}, i[] = {10, -10};
    struct coulomb_result r;
    coulomb_count(t, v, i, 2, 100.0, &r);
    check_close(r.discharged_mah, 5.0 / 3.6, 1e-12, "discharged part");
    check_close(r.regen_mah, 5.0 / 3.6, 1e-12, "regenerated part");
    check_close(r.discharged_wh * 3600.0, 50.0, 1e-9, "energy out");
    check_close(r.regen_wh * 3600.0, 50.0, 1e-9, "energy back");
}

static void test_gaps(void **state)
{
    (void)state;
    double t[] = {0, 1, 2, 12, 13}, v[] = {10, 10, 10, 10, 10}, i[] = {2, 2, 2, 2, 2};
    struct coulomb_result r;
    coulomb_count(t, v, i, 5, 5.0, &r);
    assert_int_equal(r.gaps, 1);
    assert_int_equal(r.gap_first_index, 3);
    check_close(r.gap_total_s, 10.0, 0.0, "gap length");
    check_close(r.gap_charge_mah, 20.0 / 3.6, 1e-12, "charge bridged across the gap");
    check_close(r.discharged_mah, 26.0 / 3.6, 1e-12, "total charge includes the bridge");
}

static void test_segments_not_bridged(void **state)
{
    (void)state;
    /* two segments of a restarted clock, 1 s steps: 2, 2, 30 A (2 + 16 A s), then
     * 4, 4 A (4 A s); the joint from 30 A to 4 A (index 3, a placeholder step) is
     * neither counted nor a gap: 22 A s in all (mathematics) */
    double t[] = {0, 1, 2, 3, 4}, v[] = {10, 10, 10, 10, 10}, i[] = {2, 2, 30, 4, 4};
    size_t seg[] = {0, 3};
    struct coulomb_result r;
    coulomb_count_segments(t, v, i, 5, seg, 2, 0.5, &r);
    check_close(r.discharged_mah, (2.0 * 1 + 16.0 * 1 + 4.0) / 3.6, 1e-12,
                "the sum over the segments");
    assert_int_equal(r.joints, 1);
    assert_int_equal(r.gaps, 3); /* every other 1 s step is longer than 0.5 s */
    check_close(r.gap_total_s, 3.0, 0.0, "the joint is not a gap");

    /* one segment (nseg 0 or 1) is coulomb_count */
    struct coulomb_result a, b;
    coulomb_count_segments(t, v, i, 5, seg, 1, 10.0, &a);
    coulomb_count(t, v, i, 5, 10.0, &b);
    check_close(a.discharged_mah, b.discharged_mah, 0.0, "nseg 1");
    assert_int_equal(a.joints, 0);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_iec61434_it),          cmocka_unit_test(test_piecewise_linear_exact),
        cmocka_unit_test(test_sign_split),           cmocka_unit_test(test_gaps),
        cmocka_unit_test(test_segments_not_bridged),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
