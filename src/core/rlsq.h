/* rlsq: robust (bisquare) least squares for the small models of a pack's
 * history (up to 3 parameters, a few hundred to a few thousand points).
 *
 * The method is GSL's gsl_multifit_robust with its defaults (DuMouchel and
 * O'Brien 1989; Street, Carroll and Ruppert 1988): an ordinary fit, then
 * reweighting with residuals adjusted by each point's leverage and scaled
 * by the median absolute residual (the p smallest left out), bisquare
 * weights at 4.685, until every coefficient moves less than sqrt(epsilon)
 * of itself (100 rounds at most); the final sigma joins the robust and the
 * ordinary estimate and the covariance is sigma^2 (X'X)^-1. What differs
 * is the arithmetic: the p x p normal equations of column-scaled
 * regressors solved by Cholesky instead of an n x p SVD, no allocation per
 * fit, and a selection instead of a sort for the medians. fleet fits some
 * 160 such models per pack (life.c); GSL's general routine made that
 * 0.1 s a pack. tests/unit/test_rlsq.c holds it to GSL's results.
 *
 * Owns its scratch (rlsq_work_new / rlsq_work_free, free(NULL)-like). Pure. */
#ifndef PB_RLSQ_H
#define PB_RLSQ_H

#include <stddef.h>

#define RLSQ_MAX_P 3

struct rlsq_work;

/* Scratch for fits of up to n points; NULL when out of memory. */
struct rlsq_work *rlsq_work_new(size_t n);
void rlsq_work_free(struct rlsq_work *w);

struct rlsq_fit {
    double coef[RLSQ_MAX_P];
    double cov[RLSQ_MAX_P * RLSQ_MAX_P]; /* row-major p x p, the rest 0 */
    double sigma;                        /* the final residual scale (GSL's stats.sigma) */
    double wsse;                         /* sum of last weights x final residuals squared */
    int converged;                       /* 0: stopped after 100 rounds (still usable) */
};

/* Fits y = X c, X row-major n x p (p <= RLSQ_MAX_P, n <= the work's size,
 * n > p). Returns 0, or -1 when X'X is singular or a number is not finite. */
int rlsq_bisquare(const double *X, const double *y, size_t n, size_t p, struct rlsq_work *w,
                  struct rlsq_fit *out);

#endif
