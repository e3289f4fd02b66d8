/* rlsq: the small robust fit against GSL's gsl_multifit_robust (bisquare,
 * default tuning), the reference library it follows (Debian's libgsl).
 * Instances: the life projection's own shapes (a line, a line with a break,
 * an exponential and a power law in cycles) on 12 to 2000 points, with
 * normal scatter and 0 to 20 % gross outliers, drawn with GSL's random
 * numbers from a fixed seed. Expected: the same coefficients, covariance,
 * scale and weighted residual sum as GSL within 1e-6 relative (the two
 * solve the same weighted problems; only the rounding of an SVD against
 * that of scaled normal equations differs, ~1e-12, which can move the
 * last reweighting round by one step of the 1.5e-8 convergence test). */
#include <gsl/gsl_errno.h>
#include <gsl/gsl_multifit.h>
#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
#include <math.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdio.h>
#include <stdlib.h>

#include <cmocka.h>

#include "rlsq.h"
#include "testutil.h"

#define REL 1e-6

/* one design row of the shape s at x (cycles), x_last the scale */
static size_t row_of(int shape, double x, double x_last, double *row)
{
    row[0] = 1.0;
    switch (shape) {
    case 1: /* line with a break at 60 % */
        row[1] = x;
        row[2] = x > 0.6 * x_last ? x - 0.6 * x_last : 0.0;
        return 3;
    case 2: /* exponential, rate 3 per history */
        row[1] = exp(3.0 * x / x_last);
        return 2;
    case 3: /* power law, 2.5 */
        row[1] = pow(x / x_last, 2.5);
        return 2;
    default:
        row[1] = x;
        return 2;
    }
}

static double tol_of(double want, double scale)
{
    return REL * fmax(fabs(want), scale);
}

static void test_same_as_gsl(void **state)
{
    (void)state;
    gsl_set_error_handler_off();
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 20261202);
    static const size_t sizes[] = {12, 25, 60, 150, 400, 2000};
    static const double outliers[] = {0.0, 0.05, 0.2};
    int compared = 0;
    struct rlsq_work *w = rlsq_work_new(2000);
    assert_non_null(w);
    for (int shape = 0; shape < 4; shape++)
        for (size_t si = 0; si < sizeof sizes / sizeof *sizes; si++)
            for (size_t oi = 0; oi < 3; oi++) {
                size_t n = sizes[si], p = 0;
                double *X = malloc(n * 3 * sizeof *X), *y = malloc(n * sizeof *y);
                double x_last = 0.45 * (double)n, row[3];
                for (size_t i = 0; i < n; i++) {
                    double x = 0.45 * (double)(i + 1);
                    p = row_of(shape, x, x_last, row);
                    for (size_t j = 0; j < p; j++)
                        X[i * p + j] = row[j];
                    /* capacity % falling with scatter 0.7; outliers 8 % low */
                    y[i] = 99.0 - 0.03 * x -
                           (shape ? 2.0 * row[p - 1] / (shape == 1 ? x_last : 1.0) : 0.0) +
                           gsl_ran_gaussian(rng, 0.7);
                    if (gsl_rng_uniform(rng) < outliers[oi])
                        y[i] -= 8.0 + gsl_ran_exponential(rng, 4.0);
                }
                gsl_matrix_view Xv = gsl_matrix_view_array(X, n, p);
                gsl_vector_view yv = gsl_vector_view_array(y, n);
                gsl_vector *c = gsl_vector_alloc(p);
                gsl_matrix *cov = gsl_matrix_alloc(p, p);
                gsl_multifit_robust_workspace *gw =
                    gsl_multifit_robust_alloc(gsl_multifit_robust_bisquare, n, p);
                int grc = gsl_multifit_robust(&Xv.matrix, &yv.vector, c, cov, gw);
                assert_true(grc == GSL_SUCCESS || grc == GSL_EMAXITER);
                gsl_multifit_robust_stats st = gsl_multifit_robust_statistics(gw);
                double gw_sse = 0.0;
                for (size_t i = 0; i < n; i++) {
                    double r = gsl_vector_get(st.r, i);
                    gw_sse += gsl_vector_get(st.weights, i) * r * r;
                }
                struct rlsq_fit f;
                assert_int_equal(rlsq_bisquare(X, y, n, p, w, &f), 0);
                char what[96];
                for (size_t j = 0; j < p; j++) {
                    double want = gsl_vector_get(c, j);
                    snprintf(what, sizeof what, "shape %d n %zu outliers %.2f coef %zu", shape, n,
                             outliers[oi], j);
                    check_close(f.coef[j], want, tol_of(want, 1e-9), what);
                    for (size_t k = 0; k < p; k++) {
                        double wc = gsl_matrix_get(cov, j, k);
                        double sd = sqrt(gsl_matrix_get(cov, j, j) * gsl_matrix_get(cov, k, k));
                        snprintf(what, sizeof what, "shape %d n %zu cov %zu %zu", shape, n, j, k);
                        check_close(f.cov[j * p + k], wc, tol_of(wc, sd), what);
                    }
                }
                snprintf(what, sizeof what, "shape %d n %zu sigma", shape, n);
                check_rel(f.sigma, st.sigma, REL, what);
                snprintf(what, sizeof what, "shape %d n %zu weighted sse", shape, n);
                check_rel(f.wsse, gw_sse, REL, what);
                assert_int_equal(f.converged, grc == GSL_SUCCESS);
                compared++;
                gsl_multifit_robust_free(gw);
                gsl_vector_free(c);
                gsl_matrix_free(cov);
                free(X);
                free(y);
            }
    assert_int_equal(compared, 4 * 6 * 3);
    rlsq_work_free(w);
    gsl_rng_free(rng);
}

static void test_singular_and_bounds(void **state)
{
    (void)state;
    struct rlsq_work *w = rlsq_work_new(8);
    struct rlsq_fit f;
    /* every x the same: the slope cannot be had */
    double X[16], y[8];
    for (int i = 0; i < 8; i++) {
        X[2 * i] = 1.0;
        X[2 * i + 1] = 5.0;
        y[i] = (double)i;
    }
    assert_int_equal(rlsq_bisquare(X, y, 8, 2, w, &f), -1);
    /* more points than the work holds, or no more points than parameters */
    assert_int_equal(rlsq_bisquare(X, y, 9, 2, w, &f), -1);
    assert_int_equal(rlsq_bisquare(X, y, 2, 2, w, &f), -1);
    rlsq_work_free(w);
    rlsq_work_free(NULL);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_same_as_gsl),
        cmocka_unit_test(test_singular_and_bounds),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
