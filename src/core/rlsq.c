#include "rlsq.h"

#include <float.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "fit.h"

#define TUNE 4.685        /* bisquare, 95 % efficiency at the normal (GSL's default) */
#define MAD_NORMAL 0.6745 /* median |z| of the standard normal */
#define MAX_ROUNDS 100

struct rlsq_work {
    size_t cap;
    double *xs;     /* the column-scaled regressors, n x p */
    double *r;      /* residuals */
    double *resfac; /* 1 / sqrt(1 - leverage) */
    double *wt;     /* weights */
    double *tmp;    /* |r| for the medians */
};

struct rlsq_work *rlsq_work_new(size_t n)
{
    struct rlsq_work *w = calloc(1, sizeof *w);
    if (!w)
        return NULL;
    w->cap = n;
    w->xs = malloc((n ? n : 1) * RLSQ_MAX_P * sizeof *w->xs);
    w->r = malloc((n ? n : 1) * sizeof *w->r);
    w->resfac = malloc((n ? n : 1) * sizeof *w->resfac);
    w->wt = malloc((n ? n : 1) * sizeof *w->wt);
    w->tmp = malloc((n ? n : 1) * sizeof *w->tmp);
    if (!w->xs || !w->r || !w->resfac || !w->wt || !w->tmp) {
        rlsq_work_free(w);
        return NULL;
    }
    return w;
}

void rlsq_work_free(struct rlsq_work *w)
{
    if (!w)
        return;
    free(w->xs);
    free(w->r);
    free(w->resfac);
    free(w->wt);
    free(w->tmp);
    free(w);
}

/* Cholesky of the p x p matrix a (row-major) into l; -1 when a pivot falls
 * to 1e-12 of its diagonal (X'X singular at double precision, the scaled
 * columns dependent). */
static int chol(const double *a, size_t p, double *l)
{
    memset(l, 0, p * p * sizeof *l);
    for (size_t j = 0; j < p; j++) {
        double d = a[j * p + j];
        for (size_t k = 0; k < j; k++)
            d -= l[j * p + k] * l[j * p + k];
        if (!(d > 1e-12 * a[j * p + j]))
            return -1;
        l[j * p + j] = sqrt(d);
        for (size_t i = j + 1; i < p; i++) {
            double s = a[i * p + j];
            for (size_t k = 0; k < j; k++)
                s -= l[i * p + k] * l[j * p + k];
            l[i * p + j] = s / l[j * p + j];
        }
    }
    return 0;
}

/* Solves l l' x = b in place. */
static void chol_solve(const double *l, size_t p, double *b)
{
    for (size_t i = 0; i < p; i++) {
        double s = b[i];
        for (size_t k = 0; k < i; k++)
            s -= l[i * p + k] * b[k];
        b[i] = s / l[i * p + i];
    }
    for (size_t i = p; i-- > 0;) {
        double s = b[i];
        for (size_t k = i + 1; k < p; k++)
            s -= l[k * p + i] * b[k];
        b[i] = s / l[i * p + i];
    }
}

/* The weighted fit on the scaled regressors (wt NULL: all 1): c gets the
 * scaled coefficients. -1 when singular. */
static int solve(const struct rlsq_work *w, const double *y, size_t n, size_t p, const double *wt,
                 double *c, double *l)
{
    double a[RLSQ_MAX_P * RLSQ_MAX_P] = {0}, b[RLSQ_MAX_P] = {0};
    for (size_t i = 0; i < n; i++) {
        const double *x = w->xs + i * p;
        double wi = wt ? wt[i] : 1.0;
        for (size_t j = 0; j < p; j++) {
            double wx = wi * x[j];
            b[j] += wx * y[i];
            for (size_t k = 0; k <= j; k++)
                a[j * p + k] += wx * x[k];
        }
    }
    for (size_t j = 0; j < p; j++)
        for (size_t k = 0; k < j; k++)
            a[k * p + j] = a[j * p + k];
    if (chol(a, p, l) != 0)
        return -1;
    memcpy(c, b, p * sizeof *b);
    chol_solve(l, p, c);
    return 0;
}

static void residuals(const struct rlsq_work *w, const double *y, size_t n, size_t p,
                      const double *c, double *r)
{
    for (size_t i = 0; i < n; i++) {
        const double *x = w->xs + i * p;
        double f = 0.0;
        for (size_t j = 0; j < p; j++)
            f += x[j] * c[j];
        r[i] = y[i] - f;
    }
}

/* The MAD scale of r with the p smallest |r| but one left out (Street et
 * al. 1988, as GSL): the median of the sorted |r| from index p - 1 on. */
static double madsigma(const double *r, size_t n, size_t p, double *tmp)
{
    for (size_t i = 0; i < n; i++)
        tmp[i] = fabs(r[i]);
    return fit_median_above(tmp, n, p - 1) / MAD_NORMAL;
}

static double bisquare_w(double u)
{
    double t = 1.0 - u * u;
    return fabs(u) < 1.0 ? t * t : 0.0;
}

static double bisquare_dpsi(double u)
{
    return fabs(u) < 1.0 ? (1.0 - u * u) * (1.0 - 5.0 * u * u) : 0.0;
}

int rlsq_bisquare(const double *X, const double *y, size_t n, size_t p, struct rlsq_work *w,
                  struct rlsq_fit *out)
{
    memset(out, 0, sizeof *out);
    if (p == 0 || p > RLSQ_MAX_P || n <= p || n > w->cap)
        return -1;
    /* columns scaled to their largest magnitude: the normal equations of
     * regressors of like size keep their precision */
    double scale[RLSQ_MAX_P];
    for (size_t j = 0; j < p; j++) {
        double m = 0.0;
        for (size_t i = 0; i < n; i++)
            m = fmax(m, fabs(X[i * p + j]));
        scale[j] = m > 0.0 && isfinite(m) ? m : 1.0;
    }
    double ysum = 0.0;
    for (size_t i = 0; i < n; i++) {
        for (size_t j = 0; j < p; j++)
            w->xs[i * p + j] = X[i * p + j] / scale[j];
        ysum += y[i];
    }
    /* a floor under the scale: a near-perfect fit would call every point
     * an outlier (GSL: 1e-6 of the data's standard deviation, else 1) */
    double ymean = ysum / (double)n, ss = 0.0;
    for (size_t i = 0; i < n; i++)
        ss += (y[i] - ymean) * (y[i] - ymean);
    double sig_lower = 1e-6 * sqrt(ss / (double)(n - 1));
    if (sig_lower == 0.0)
        sig_lower = 1.0;

    double l0[RLSQ_MAX_P * RLSQ_MAX_P], l[RLSQ_MAX_P * RLSQ_MAX_P], c[RLSQ_MAX_P];
    if (solve(w, y, n, p, NULL, c, l0) != 0)
        return -1;
    /* (X'X)^-1 of the scaled columns, for the leverages and the covariance */
    double inv[RLSQ_MAX_P * RLSQ_MAX_P];
    for (size_t j = 0; j < p; j++) {
        double e[RLSQ_MAX_P] = {0};
        e[j] = 1.0;
        chol_solve(l0, p, e);
        for (size_t k = 0; k < p; k++)
            inv[k * p + j] = e[k];
    }
    for (size_t i = 0; i < n; i++) {
        const double *x = w->xs + i * p;
        double h = 0.0;
        for (size_t j = 0; j < p; j++)
            for (size_t k = 0; k < p; k++)
                h += x[j] * inv[j * p + k] * x[k];
        w->resfac[i] = 1.0 / sqrt(1.0 - fmin(h, 0.9999));
    }
    residuals(w, y, n, p, c, w->r);
    double rss = 0.0;
    for (size_t i = 0; i < n; i++)
        rss += w->r[i] * w->r[i];
    double dof = (double)(n - p), sigma_ols = sqrt(rss) / sqrt(dof);

    int converged = 0;
    for (int round = 1; !converged && round <= MAX_ROUNDS; round++) {
        for (size_t i = 0; i < n; i++)
            w->r[i] *= w->resfac[i];
        double sig = madsigma(w->r, n, p, w->tmp);
        double div = fmax(sig, sig_lower) * TUNE;
        for (size_t i = 0; i < n; i++)
            w->wt[i] = bisquare_w(w->r[i] / div);
        double prev[RLSQ_MAX_P];
        memcpy(prev, c, sizeof prev);
        if (solve(w, y, n, p, w->wt, c, l) != 0)
            return -1;
        residuals(w, y, n, p, c, w->r);
        converged = 1;
        for (size_t j = 0; j < p; j++) {
            /* on the coefficients as GSL compares them (unscaled) */
            double a = prev[j] / scale[j], b = c[j] / scale[j];
            if (fabs(b - a) > sqrt(DBL_EPSILON) * fmax(fabs(a), fabs(b)))
                converged = 0;
        }
    }
    /* the final scale: the robust estimate of Street et al. (their eqs. 3
     * and 5) from the final residuals, joined with the ordinary one
     * (DuMouchel and O'Brien, 4.1) */
    double s_mad = madsigma(w->r, n, p, w->tmp), st = s_mad * TUNE;
    double a = 0.0, b = 0.0;
    for (size_t i = 0; i < n; i++) {
        double u = w->r[i] * w->resfac[i] / st;
        double psi = u * bisquare_w(u);
        a += bisquare_dpsi(u);
        b += psi * psi / (w->resfac[i] * w->resfac[i]);
    }
    a /= (double)n;
    b /= dof;
    double pn = (double)p, nn = (double)n;
    double lambda = 1.0 + pn / nn * (1.0 - a) / a;
    double s_rob = lambda * sqrt(b) * st / a;
    double sigma =
        fmax(s_rob, sqrt((sigma_ols * sigma_ols * pn * pn + s_rob * s_rob * nn) / (pn * pn + nn)));
    double wsse = 0.0;
    for (size_t i = 0; i < n; i++)
        wsse += w->wt[i] * w->r[i] * w->r[i];
    for (size_t j = 0; j < p; j++) {
        out->coef[j] = c[j] / scale[j];
        for (size_t k = 0; k < p; k++)
            out->cov[j * p + k] = sigma * sigma * inv[j * p + k] / (scale[j] * scale[k]);
    }
    out->sigma = sigma;
    out->wsse = wsse;
    out->converged = converged;
    /* as GSL: a scale that cannot be had (exact data) leaves sigma and the
     * covariance not finite; the fit itself stands */
    for (size_t j = 0; j < p; j++)
        if (!isfinite(out->coef[j]))
            return -1;
    return isfinite(wsse) ? 0 : -1;
}
