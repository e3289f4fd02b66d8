/* ticks: round steps that cover the data without crowding the axis.
 * Source: Heckbert, "Nice numbers for graph labels", Graphics Gems (1990):
 * steps of 1, 2 or 5 x 10^k. Checks: every step is such a number (exact),
 * the ticks span the data, their count is within the limit, and labels of a
 * given width never overlap along the axis. */
#include <math.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdlib.h>

#include <cmocka.h>

#include "testutil.h"
#include "ticks.h"

static int is_nice(double step)
{
    double p = pow(10.0, floor(log10(step) + 1e-12));
    double m = step / p;
    return fabs(m - 1) < 1e-9 || fabs(m - 2) < 1e-9 || fabs(m - 5) < 1e-9;
}

static void test_examples(void **state)
{
    (void)state;
    struct ticks t;
    assert_int_equal(ticks_nice(0, 100, 6, &t), 0);
    check_close(t.step, 20, 1e-12, "0..100 in at most 6 ticks: step 20");
    check_close(t.first, 0, 1e-12, "first tick");
    assert_int_equal(t.count, 6);
    assert_int_equal(ticks_nice(14.28, 16.72, 8, &t), 0);
    check_close(t.step, 0.5, 1e-12, "a 4S voltage axis: step 0.5 V");
    assert_int_equal(t.decimals, 1);
    assert_int_equal(ticks_nice(3.7, 3.7, 5, &t), 0); /* zero width widened */
    assert_true(t.count >= 2 && t.first <= 3.7 && t.first + (t.count - 1) * t.step >= 3.7);
    assert_int_equal(ticks_nice(0, NAN, 5, &t), -1);
}

static void test_random_ranges(void **state)
{
    (void)state;
    srand(12345); /* seed 12345 */
    for (int k = 0; k < 20000; k++) {
        double lo = (rand() / (double)RAND_MAX - 0.5) * pow(10, rand() % 9 - 3);
        double hi = lo + rand() / (double)RAND_MAX * pow(10, rand() % 9 - 3);
        int max = 3 + rand() % 12;
        struct ticks t;
        assert_int_equal(ticks_nice(lo, hi, max, &t), 0);
        if (!is_nice(t.step))
            fail_msg("step %.17g for [%g, %g] is not 1/2/5 x 10^k", t.step, lo, hi);
        double last = t.first + (t.count - 1) * t.step;
        double eps = 1e-9 * t.step;
        if (t.first > lo + eps || last < hi - eps)
            fail_msg("ticks %g..%g do not span [%g, %g]", t.first, last, lo, hi);
        if (t.count > max)
            fail_msg("%d ticks for at most %d", t.count, max);
    }
}

static void test_labels_do_not_overlap(void **state)
{
    (void)state;
    /* a 1600 px axis, labels 70 px wide with 10 px gaps, over long time ranges */
    int max = ticks_fit(1600, 70, 10);
    assert_int_equal(max, 20);
    for (double span = 10; span < 1e7; span *= 3.7) {
        struct ticks t;
        assert_int_equal(ticks_nice(0, span, max, &t), 0);
        double px_per_tick = 1600.0 / ((t.count - 1) * t.step) * t.step;
        assert_true(px_per_tick >= 70 + 10 - 1e-9);
    }
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_examples),
        cmocka_unit_test(test_random_ranges),
        cmocka_unit_test(test_labels_do_not_overlap),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
