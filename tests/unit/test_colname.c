/* colname: header names to roles and units. The spellings are the ones
 * logs are seen with (issue list of examples); scales follow SI prefixes. */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <string.h>

#include <cmocka.h>

#include "colname.h"
#include "testutil.h"

struct row {
    const char *name;
    enum col_role role;
    int cell;
    double scale;
    double offset;
};

static const struct row rows[] = {
    {"time_s", COL_TIME, 0, 1.0, 0.0},
    {"t_ms", COL_TIME, 0, 1e-3, 0.0},
    {"Time(s)", COL_TIME, 0, 1.0, 0.0},
    {"time [us]", COL_TIME, 0, 1e-6, 0.0},
    {"timestamp", COL_TIME, 0, 1.0, 0.0},
    {"voltage [V]", COL_VOLTAGE, 0, 1.0, 0.0},
    {"vbat_mV", COL_VOLTAGE, 0, 1e-3, 0.0},
    {"Voltage(V)", COL_VOLTAGE, 0, 1.0, 0.0},
    {"V", COL_VOLTAGE, 0, 1.0, 0.0},
    {"Current(A)", COL_CURRENT, 0, 1.0, 0.0},
    {"ibat_mA", COL_CURRENT, 0, 1e-3, 0.0},
    {"current_adc", COL_CURRENT_RAW, 0, 1.0, 0.0},
    {"ibat_raw", COL_CURRENT_RAW, 0, 1.0, 0.0},
    {"temp_C", COL_TEMP, 0, 1.0, 0.0},
    {"Temperature (K)", COL_TEMP, 0, 1.0, -273.15},
    {"cell3_v", COL_CELL, 3, 1.0, 0.0},
    {"Cell 12 (mV)", COL_CELL, 12, 1e-3, 0.0},
    {"vcell1", COL_CELL, 1, 1.0, 0.0},
    /* spellings seen in real logs (issue 12), and the bat_v that was missed */
    {"bat_v", COL_VOLTAGE, 0, 1.0, 0.0},
    {"Bat(V)", COL_VOLTAGE, 0, 1.0, 0.0},
    {"Battery(V)", COL_VOLTAGE, 0, 1.0, 0.0},
    {"Pack V", COL_VOLTAGE, 0, 1.0, 0.0},
    {"BattV", COL_VOLTAGE, 0, 1.0, 0.0},
    {"Bat(mV)", COL_VOLTAGE, 0, 1e-3, 0.0},
    {"Cur(A)", COL_CURRENT, 0, 1.0, 0.0},
    {"Bat(A)", COL_CURRENT, 0, 1.0, 0.0},
    {"BattA", COL_CURRENT, 0, 1.0, 0.0},
    {"bat_a", COL_CURRENT, 0, 1.0, 0.0},
    {"Battery (mA)", COL_CURRENT, 0, 1e-3, 0.0},
    {"Bat(C)", COL_TEMP, 0, 1.0, 0.0},
    {"Battery", COL_IGNORE, 0, 1.0, 0.0},
    {"Pack", COL_IGNORE, 0, 1.0, 0.0},
    {"Date", COL_DATE, 0, 1.0, 0.0},
    {"date_utc", COL_DATE, 0, 1.0, 0.0},
    {"Capacity(Ah)", COL_IGNORE, 0, 1.0, 0.0},
    {"StepTime(s)", COL_IGNORE, 0, 1.0, 0.0},
    {"Loop", COL_IGNORE, 0, 1.0, 0.0},
    {"", COL_IGNORE, 0, 1.0, 0.0},
};

static void test_table(void **state)
{
    (void)state;
    for (size_t k = 0; k < sizeof rows / sizeof *rows; k++) {
        struct col_spec sp;
        assert_int_equal(colname_parse(rows[k].name, strlen(rows[k].name), &sp), 0);
        if (sp.role != rows[k].role || sp.cell != rows[k].cell)
            fail_msg("'%s': role %d cell %d, expected %d %d", rows[k].name, sp.role, sp.cell,
                     rows[k].role, rows[k].cell);
        if (sp.role != COL_IGNORE) {
            check_close(sp.scale, rows[k].scale, 0.0, rows[k].name);
            check_close(sp.offset, rows[k].offset, 0.0, rows[k].name);
        }
    }
}

static void test_unit_mismatch(void **state)
{
    (void)state;
    struct col_spec sp;
    assert_int_equal(colname_parse("voltage_ms", 10, &sp), -1);
    assert_int_equal(colname_parse("time_mv", 7, &sp), -1);
}

static void test_epoch_unit(void **state)
{
    (void)state;
    struct col_spec sp;
    assert_int_equal(colname_parse("time_unix", 9, &sp), 0);
    assert_int_equal(sp.role, COL_TIME);
    assert_int_equal(sp.time, TIME_EPOCH);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_table),
        cmocka_unit_test(test_unit_mismatch),
        cmocka_unit_test(test_epoch_unit),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
