/* assign: the Hungarian method.
 * Sources: scipy's documented example (scipy.optimize.linear_sum_assignment,
 * docstring "Examples", scipy 1.10 as in Debian 12: cost [[4,1,3],[2,0,5],
 * [3,2,2]] -> columns [1,0,2], total 5; exact); the three-worker example of
 * the Wikipedia article "Hungarian algorithm" (from memory: total 15, each
 * worker's cheapest job is not the answer); and exhaustive enumeration of
 * every assignment of seeded random matrices, square and rectangular
 * (exact up to 1e-9 relative rounding). tests/cli/test_assign.py compares
 * larger matrices with scipy itself. */
#include <gsl/gsl_errno.h>
#include <gsl/gsl_rng.h>
#include <math.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdio.h>
#include <string.h>

#include <cmocka.h>

#include "assign.h"
#include "testutil.h"

static void test_scipy_doc_example(void **state)
{
    (void)state;
    const double cost[9] = {4, 1, 3, 2, 0, 5, 3, 2, 2};
    size_t col[3];
    double total;
    assert_int_equal(assign_solve(cost, 3, 3, col, &total), 0);
    check_close(total, 5.0, 1e-12, "scipy docstring example total");
    assert_int_equal(col[0], 1);
    assert_int_equal(col[1], 0);
    assert_int_equal(col[2], 2);
}

static void test_three_workers(void **state)
{
    (void)state;
    /* rows Alice, Bob, Carol; columns bathroom, floors, windows (from memory) */
    const double cost[9] = {8, 4, 7, 5, 2, 3, 9, 4, 8};
    size_t col[3];
    double total;
    assert_int_equal(assign_solve(cost, 3, 3, col, &total), 0);
    check_close(total, 15.0, 1e-12, "three workers total");
    assert_int_equal(col[0], 0); /* Alice the bathroom */
    assert_int_equal(col[1], 2); /* Bob the windows */
    assert_int_equal(col[2], 1); /* Carol the floors */
}

static void test_bad_input(void **state)
{
    (void)state;
    const double cost[4] = {1, NAN, 2, 3};
    size_t col[2];
    double total;
    assert_int_equal(assign_solve(cost, 2, 2, col, &total), -1); /* not finite */
    assert_int_equal(assign_solve(cost, 2, 1, col, &total), -1); /* more rows than columns */
    assert_int_equal(assign_solve(cost, 0, 0, col, &total), 0);  /* nothing to assign */
    check_close(total, 0.0, 0.0, "empty total");
}

/* the least total over every injective row -> column map, by recursion */
static double brute(const double *c, size_t n, size_t m, size_t row, unsigned used)
{
    if (row == n)
        return 0.0;
    double best = HUGE_VAL;
    for (size_t j = 0; j < m; j++)
        if (!(used & (1u << j)))
            best = fmin(best, c[row * m + j] + brute(c, n, m, row + 1, used | (1u << j)));
    return best;
}

static void test_against_enumeration(void **state)
{
    (void)state;
    unsigned long seed = 2026;
    printf("test_against_enumeration: seed %lu\n", seed);
    gsl_rng *r = gsl_rng_alloc(gsl_rng_mt19937);
    assert_non_null(r);
    gsl_rng_set(r, seed);
    for (int rep = 0; rep < 400; rep++) {
        size_t n = 1 + gsl_rng_uniform_int(r, 7), m = n + gsl_rng_uniform_int(r, 3);
        double c[9 * 9];
        int ties = rep % 3 == 0; /* small integers: many equal optima */
        for (size_t k = 0; k < n * m; k++)
            c[k] = ties ? (double)gsl_rng_uniform_int(r, 4) : 100.0 * gsl_rng_uniform(r) - 20.0;
        size_t col[9];
        double total;
        assert_int_equal(assign_solve(c, n, m, col, &total), 0);
        unsigned used = 0;
        double sum = 0.0;
        for (size_t i = 0; i < n; i++) {
            assert_true(col[i] < m && !(used & (1u << col[i])));
            used |= 1u << col[i];
            sum += c[i * m + col[i]];
        }
        double best = brute(c, n, m, 0, 0);
        check_close(sum, total, 1e-9 * (1.0 + fabs(best)), "total is the assignment's");
        check_close(total, best, 1e-9 * (1.0 + fabs(best)), "least total by enumeration");
    }
    gsl_rng_free(r);
}

int main(void)
{
    gsl_set_error_handler_off();
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_scipy_doc_example),
        cmocka_unit_test(test_three_workers),
        cmocka_unit_test(test_bad_input),
        cmocka_unit_test(test_against_enumeration),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
