/* plot: the axis arithmetic of the drawing layer (report/plot.c).
 * Sources: the linear data-to-figure mapping and the alignment of a right
 * axis's zero on the left one's are definitions (exact, 1e-9); round
 * steps follow Heckbert, "Nice numbers for graph labels", Graphics Gems
 * (1990), widened here by 2.5 x 10^k for the aligned axis; label text width
 * is measured by cairo, so the wrap check compares against cairo itself. */
#define _GNU_SOURCE /* mkdtemp */
#include <math.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include <cmocka.h>

#include "../../src/report/plot.h"
#include "testutil.h"

static char dir[] = "/tmp/pbplot-XXXXXX";

static struct plot *new_plot(const char *name)
{
    char path[256];
    struct pb_error err = {PB_OK, ""};
    snprintf(path, sizeof path, "%s/%s", dir, name);
    struct plot *p = plot_new(path, 800, 600, &err);
    assert_non_null(p);
    return p;
}

static int is_round(double step, int allow_2_5)
{
    double p = pow(10.0, floor(log10(step) + 1e-12)), m = step / p;
    return fabs(m - 1) < 1e-9 || fabs(m - 2) < 1e-9 || fabs(m - 5) < 1e-9 ||
           (allow_2_5 && fabs(m - 2.5) < 1e-9);
}

static void test_mapping(void **state)
{
    (void)state;
    struct plot_panel pa = {.x0 = 100, .x1 = 300, .y0 = 50, .y1 = 250};
    pa.x.lo = 0, pa.x.hi = 10;
    pa.y.lo = 14, pa.y.hi = 17;
    check_close(plot_px(&pa, 0), 100, 1e-9, "x lo at the left edge");
    check_close(plot_px(&pa, 5), 200, 1e-9, "x mid");
    check_close(plot_px(&pa, 10), 300, 1e-9, "x hi at the right edge");
    check_close(plot_py(&pa, 14), 250, 1e-9, "y lo at the bottom");
    check_close(plot_py(&pa, 17), 50, 1e-9, "y hi at the top");
    check_close(plot_py(&pa, 15.5), 150, 1e-9, "y mid");
}

static void test_axis_fit_covers_with_round_ends(void **state)
{
    (void)state;
    struct plot *p = new_plot("fit.png");
    static const double ranges[][2] = {{14.28, 16.68}, {0, 11.0}, {-0.06, 40.3},
                                       {3.3, 3.3},     {0, 1e5},  {-7e-4, 2e-3}};
    for (size_t k = 0; k < sizeof ranges / sizeof *ranges; k++) {
        struct plot_axis ax = {0};
        plot_axis_fit(p, &ax, ranges[k][0], ranges[k][1], 300, 1);
        assert_true(ax.lo <= ranges[k][0] && ax.hi >= ranges[k][1]);
        assert_true(is_round(ax.ticks.step, 0));
        check_close(ax.lo, ax.ticks.first, 1e-12, "axis starts on a tick");
        check_close(ax.hi, ax.ticks.first + (ax.ticks.count - 1) * ax.ticks.step, 1e-9,
                    "axis ends on a tick");
    }
    plot_free(p);
}

static void test_tight_axis(void **state)
{
    (void)state;
    struct plot *p = new_plot("tight.png");
    struct plot_axis ax = {0};
    plot_axis_fit_tight(p, &ax, 0.0, 11.0, 600, 0);
    check_close(ax.lo, 0.0, 0, "tight lo is the data's");
    check_close(ax.hi, 11.0, 0, "tight hi is the data's");
    double last = ax.ticks.first + (ax.ticks.count - 1) * ax.ticks.step;
    assert_true(ax.ticks.first >= 0.0 && last <= 11.0 + 1e-9);
    assert_true(ax.ticks.count >= 2 && is_round(ax.ticks.step, 0));
    plot_free(p);
}

static void test_right_axis_shares_zero(void **state)
{
    (void)state;
    struct plot *p = new_plot("align.png");
    /* current ticks from 0 or from below 0, power to be matched to them */
    static const double cases[][4] = {
        /* ref lo, ref hi, power lo, power hi */
        {0, 40.3, 0, 950},
        {-15, 38, -300, 900},
        {0, 2.2, 0, 33},
        {-1, 1, -50, 20},
    };
    for (size_t k = 0; k < sizeof cases / sizeof *cases; k++) {
        struct plot_axis ref = {0}, ax2 = {0};
        plot_axis_fit(p, &ref, cases[k][0], cases[k][1], 300, 1);
        plot_axis_align(p, &ax2, cases[k][2], cases[k][3], &ref, 300);
        assert_int_equal(ax2.ticks.count, ref.ticks.count);
        /* zero at the same fraction of both axes: the grid lines coincide */
        double zr = (0 - ref.lo) / (ref.hi - ref.lo), z2 = (0 - ax2.lo) / (ax2.hi - ax2.lo);
        check_close(z2, zr, 1e-9, "zero at the same height");
        assert_true(ax2.lo <= cases[k][2] && ax2.hi >= cases[k][3]);
        assert_true(is_round(ax2.ticks.step, 1));
    }
    plot_free(p);
}

static void test_sizes_and_names(void **state)
{
    (void)state;
    struct pb_error err = {PB_OK, ""};
    int w = 0, h = 0;
    assert_int_equal(plot_parse_size("1600x900", &w, &h, &err), 0);
    assert_int_equal(w, 1600);
    assert_int_equal(h, 900);
    const char *bad[] = {"1600", "x900", "1600x", "100x100", "1600x900x2", "20000x900", "-5x9"};
    for (size_t k = 0; k < sizeof bad / sizeof *bad; k++)
        assert_int_equal(plot_parse_size(bad[k], &w, &h, &err), -1);
    assert_int_equal(plot_format_of("a.png"), 0);
    assert_int_equal(plot_format_of("a.SVG"), 1);
    assert_int_equal(plot_format_of("dir.pdf/a"), -1);
    assert_int_equal(plot_format_of("a.jpg"), -1);
    assert_null(plot_new("a.jpg", 800, 600, &err));
    assert_int_equal(err.code, PB_EUSAGE);
    assert_null(plot_new("/nonexistent-dir/a.png", 800, 600, &err));
    assert_int_equal(err.code, PB_EOUTPUT);
}

static void test_nothing_left_without_finish(void **state)
{
    (void)state;
    char path[256];
    snprintf(path, sizeof path, "%s/dropped.svg", dir);
    struct pb_error err = {PB_OK, ""};
    struct plot *p = plot_new(path, 800, 600, &err);
    assert_non_null(p);
    plot_free(p); /* an error before plot_finish */
    assert_int_equal(access(path, F_OK), -1);
    char cmd[300];
    snprintf(cmd, sizeof cmd, "ls %s | grep -q dropped", dir);
    assert_int_not_equal(system(cmd), 0); /* no temporary file either */
    p = plot_new(path, 800, 600, &err);
    assert_int_equal(plot_finish(p, &err), PB_OK);
    plot_free(p);
    assert_int_equal(access(path, F_OK), 0);
}

static void test_wrap_stays_in_width(void **state)
{
    (void)state;
    struct plot *p = new_plot("wrap.png");
    const char *text = "Needing attention (3): TM-03 (watch: capacity 82 % of rated <= 85 %), "
                       "TM-04 (watch: cell spread at rest 44 mV >= 30 mV), TM-09 (retire: R0 "
                       "2.1x its baseline)";
    int lines = plot_text_wrap(p, 10, 20, 300, 12, 5, 0, text);
    assert_true(lines >= 2 && lines <= 5);
    /* the whole text is wider than one line, and fits in lines x width */
    assert_true(plot_text_width(p, text, 12, 0) > 300);
    assert_true(plot_text_width(p, text, 12, 0) <= lines * (300 + 12)); /* + a space per break */
    double s = plot_fit_size(p, text, 12, 0, 300);
    check_close(plot_text_width(p, text, s, 0), 300, 3, "shrunk to the width (3 px)");
    plot_free(p);
}

static int setup(void **state)
{
    (void)state;
    return mkdtemp(dir) ? 0 : -1;
}

static int teardown(void **state)
{
    (void)state;
    char cmd[64];
    snprintf(cmd, sizeof cmd, "rm -rf %s", dir);
    return system(cmd) == 0 ? 0 : -1;
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_mapping),
        cmocka_unit_test(test_axis_fit_covers_with_round_ends),
        cmocka_unit_test(test_tight_axis),
        cmocka_unit_test(test_right_axis_shares_zero),
        cmocka_unit_test(test_sizes_and_names),
        cmocka_unit_test(test_nothing_left_without_finish),
        cmocka_unit_test(test_wrap_stays_in_width),
    };
    return cmocka_run_group_tests(tests, setup, teardown);
}
