/* ocv: chemistry tables. Checks: tables strictly ascending (a table that is
 * not cannot be inverted); round trip SoC -> OCV -> SoC exact to 1e-9;
 * common practice: a 2S LiPo resting above 8.3 V (4.15 V/cell) counts as
 * full and below 7.5 V (3.75 V/cell) as empty. */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>

#include <cmocka.h>

#include "ocv.h"
#include "testutil.h"

static void test_tables_ascending(void **state)
{
    (void)state;
    for (int c = 0; c < CHEM_COUNT; c++) {
        const struct chem_info *t = ocv_chem((enum chemistry)c);
        assert_non_null(t);
        assert_non_null(t->source);
        assert_true(t->soc_pct[0] == 0.0 && t->soc_pct[t->npoints - 1] == 100.0);
        for (size_t k = 1; k < t->npoints; k++) {
            assert_true(t->soc_pct[k] > t->soc_pct[k - 1]);
            assert_true(t->ocv_v[k] > t->ocv_v[k - 1]);
        }
        assert_true(t->floor_v > t->min_loaded_v && t->floor_v < t->ocv_v[t->npoints / 2]);
    }
}

static void test_round_trip(void **state)
{
    (void)state;
    for (int c = 0; c < CHEM_COUNT; c++) {
        const struct chem_info *t = ocv_chem((enum chemistry)c);
        for (double soc = 0.0; soc <= 100.0; soc += 2.5) {
            int clamped = 1;
            double back = ocv_to_soc(t, ocv_from_soc(t, soc), &clamped);
            check_close(back, soc, 1e-9, t->name);
            assert_int_equal(clamped, 0);
        }
    }
}

static void test_clamp(void **state)
{
    (void)state;
    const struct chem_info *t = ocv_chem_by_name("lipo");
    int clamped = 0;
    check_close(ocv_to_soc(t, 4.40, &clamped), 100.0, 0.0, "above the table");
    assert_int_equal(clamped, 1);
    check_close(ocv_to_soc(t, 2.00, &clamped), 0.0, 0.0, "below the table");
    assert_int_equal(clamped, 1);
    assert_null(ocv_chem_by_name("nicd"));
}

static void test_lipo_2s_full_empty(void **state)
{
    (void)state;
    const struct chem_info *t = ocv_chem(CHEM_LIPO);
    check_close(t->full_rest_v * 2, 8.3, 1e-9, "2S LiPo full at rest (common practice)");
    check_close(t->empty_rest_v * 2, 7.5, 1e-9, "2S LiPo empty at rest (common practice)");
    assert_true(ocv_to_soc(t, 8.32 / 2, NULL) >= 95.0);
    assert_true(ocv_to_soc(t, 7.48 / 2, NULL) <= 25.0);
}

static void test_names_in_any_case(void **state)
{
    (void)state;
    /* the spellings technicians write: LiPo, LIHV, NMC, LFP */
    assert_ptr_equal(ocv_chem_by_name("LiPo"), ocv_chem(CHEM_LIPO));
    assert_ptr_equal(ocv_chem_by_name("LIHV"), ocv_chem(CHEM_LIHV));
    assert_ptr_equal(ocv_chem_by_name("Nmc"), ocv_chem(CHEM_NMC));
    assert_ptr_equal(ocv_chem_by_name("lfp"), ocv_chem(CHEM_LFP));
    assert_null(ocv_chem_by_name("LiPo4"));
    assert_null(ocv_chem_by_name("li"));
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_tables_ascending),
        cmocka_unit_test(test_round_trip),
        cmocka_unit_test(test_clamp),
        cmocka_unit_test(test_lipo_2s_full_empty),
        cmocka_unit_test(test_names_in_any_case),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
