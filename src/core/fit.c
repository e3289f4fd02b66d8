#include "fit.h"

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_eigen.h>
#include <gsl/gsl_matrix.h>
#include <gsl/gsl_statistics_double.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#define BISQUARE_C 4.685
#define MAD_TO_SIGMA 1.4826
#define EIG_RTOL 1e-11

struct normal_eq {
    double a[FIT_MAX_P][FIT_MAX_P]; /* X'WX, upper triangle filled */
    double b[FIT_MAX_P];            /* X'Wy */
    double yy;                      /* y'Wy */
    double wsum;
    size_t n_used;
    size_t n_low;
};

#define SCALE_SAMPLES 65536 /* residuals kept for the robust scale */

struct scale_sample {
    double *r; /* |residual| of every m-th used row */
    size_t n, m;
};

static double dot(const double *x, const double *beta, int p)
{
    double s = 0.0;
    for (int j = 0; j < p; j++)
        s += x[j] * beta[j];
    return s;
}

/* One pass over the rows: sums the normal equations, weighted by Tukey's
 * bisquare at the given scale when beta is not NULL, and keeps a sample of
 * the |residuals| at beta for the next scale when ss is not NULL. */
static void run_pass(size_t n, int p, fit_row_fn row, void *ctx, const double *beta, double scale,
                     struct scale_sample *ss, struct normal_eq *ne)
{
    /* local sums, so the compiler keeps them out of memory the callback
     * could alias; folded into ne at the end */
    double a[FIT_MAX_P][FIT_MAX_P] = {{0}}, b[FIT_MAX_P] = {0};
    double yy = 0.0, wsum = 0.0;
    size_t n_used = 0, n_low = 0;
    double x[FIT_MAX_P], y;
    if (ss)
        ss->n = 0;
    for (size_t k = 0; k < n; k++) {
        int use = row(ctx, k, x, &y);
        if (!use)
            continue;
        double w = 1.0;
        if (beta) {
            double r = y - dot(x, beta, p);
            if (ss && n_used % ss->m == 0 && ss->n < SCALE_SAMPLES)
                ss->r[ss->n++] = fabs(r);
            if (scale > 0.0 && use != FIT_ROW_KEEP) {
                double u = r / (BISQUARE_C * scale);
                w = fabs(u) < 1.0 ? (1.0 - u * u) * (1.0 - u * u) : 0.0;
                n_low += w < 0.5;
            }
        }
        n_used++;
        if (w == 0.0)
            continue;
        for (int i = 0; i < p; i++) {
            double wx = w * x[i];
            for (int j = i; j < p; j++)
                a[i][j] += wx * x[j];
            b[i] += wx * y;
        }
        yy += w * y * y;
        wsum += w;
    }
    memcpy(ne->a, a, sizeof a);
    memcpy(ne->b, b, sizeof b);
    ne->yy = yy;
    ne->wsum = wsum;
    ne->n_used = n_used;
    ne->n_low = n_low;
}

/* Solves the normal equations; fills beta, the unscaled inverse in inv and
 * the rank. Returns -1 when GSL fails. */
static int solve(const struct normal_eq *ne, int p, double *beta, double inv[FIT_MAX_P][FIT_MAX_P],
                 int *rank)
{
    double d[FIT_MAX_P];
    gsl_matrix *a = gsl_matrix_alloc((size_t)p, (size_t)p);
    gsl_matrix *evec = gsl_matrix_alloc((size_t)p, (size_t)p);
    gsl_vector *eval = gsl_vector_alloc((size_t)p);
    gsl_eigen_symmv_workspace *ws = gsl_eigen_symmv_alloc((size_t)p);
    int rc = -1;
    if (!a || !evec || !eval || !ws)
        goto cleanup;
    for (int i = 0; i < p; i++)
        d[i] = ne->a[i][i] > 0.0 ? 1.0 / sqrt(ne->a[i][i]) : 0.0;
    for (int i = 0; i < p; i++)
        for (int j = 0; j < p; j++) {
            double v = i <= j ? ne->a[i][j] : ne->a[j][i];
            gsl_matrix_set(a, (size_t)i, (size_t)j, v * d[i] * d[j]);
        }
    if (gsl_eigen_symmv(a, eval, evec, ws) != 0)
        goto cleanup;
    double lmax = 0.0;
    for (int i = 0; i < p; i++)
        lmax = fmax(lmax, gsl_vector_get(eval, (size_t)i));
    *rank = 0;
    for (int i = 0; i < p; i++)
        for (int j = 0; j < p; j++)
            inv[i][j] = 0.0;
    for (int m = 0; m < p; m++) {
        double l = gsl_vector_get(eval, (size_t)m);
        if (!(l > EIG_RTOL * lmax))
            continue;
        (*rank)++;
        for (int i = 0; i < p; i++)
            for (int j = 0; j < p; j++)
                inv[i][j] += gsl_matrix_get(evec, (size_t)i, (size_t)m) *
                             gsl_matrix_get(evec, (size_t)j, (size_t)m) / l;
    }
    for (int i = 0; i < p; i++)
        for (int j = 0; j < p; j++)
            inv[i][j] *= d[i] * d[j];
    for (int i = 0; i < p; i++) {
        beta[i] = 0.0;
        for (int j = 0; j < p; j++)
            beta[i] += inv[i][j] * ne->b[j];
    }
    rc = 0;
cleanup:
    gsl_eigen_symmv_free(ws);
    gsl_vector_free(eval);
    gsl_matrix_free(evec);
    gsl_matrix_free(a);
    return rc;
}

double fit_median(double *a, size_t n)
{
    /* gsl_stats_median selects in place (it reorders a) */
    return gsl_stats_median(a, 1, n);
}

static enum pb_code fit_core(size_t n, int p, fit_row_fn row, void *ctx, int robust,
                             const struct fit_result *start, struct fit_result *out,
                             struct pb_error *err)
{
    struct normal_eq ne = {0};
    double inv[FIT_MAX_P][FIT_MAX_P];
    double beta[FIT_MAX_P] = {0};
    int rank = 0;
    struct scale_sample ss = {NULL, 0, n / SCALE_SAMPLES + 1};
    double scale = 0.0;
    size_t visited = 0;

    memset(out, 0, sizeof *out);
    if (p < 1 || p > FIT_MAX_P)
        return pb_error_set(err, PB_ENUMERIC, "fit: %d columns is out of range", p);
    out->p = p;
    if (start) {
        memcpy(beta, start->beta, sizeof beta);
        scale = start->scale;
    } else {
        run_pass(n, p, row, ctx, NULL, 0.0, NULL, &ne);
        visited += n;
        if (ne.n_used <= (size_t)p)
            return pb_error_set(err, PB_ENUMERIC, "fit: %zu rows for %d unknowns", ne.n_used, p);
        if (solve(&ne, p, beta, inv, &rank) != 0)
            return pb_error_set(err, PB_ENUMERIC, "fit: eigensolver failed");
        out->rss_plain = ne.yy;
        for (int j = 0; j < p; j++)
            out->rss_plain -= beta[j] * ne.b[j];
        out->rss_plain = fmax(out->rss_plain, 0.0);
    }
    if (robust) {
        ss.r = malloc(SCALE_SAMPLES * sizeof *ss.r);
        if (!ss.r)
            return pb_error_set(err, PB_ENOMEM, "out of memory");
        /* each pass weights by the scale of the previous pass's residuals
         * and samples its own; at convergence the two agree */
        for (int it = 1; it <= 15; it++) {
            double prev[FIT_MAX_P];
            memcpy(prev, beta, sizeof prev);
            struct normal_eq keep = ne;
            run_pass(n, p, row, ctx, beta, scale, &ss, &ne);
            visited += n;
            double next = MAD_TO_SIGMA * fit_median(ss.r, ss.n);
            /* an exact fit (residuals at rounding level): nothing to reweight */
            double y_rms = ne.n_used ? sqrt(fmax(ne.yy, keep.yy) / (double)ne.n_used) : 0.0;
            if (!(next > 1e-12 * y_rms)) {
                if (scale > 0.0)
                    ne = keep;
                break;
            }
            if (scale > 0.0) {
                if (ne.n_used <= (size_t)p || ne.wsum <= p ||
                    solve(&ne, p, beta, inv, &rank) != 0) {
                    /* reweighting cannot leave fewer rows than unknowns: keep the last fit */
                    memcpy(beta, prev, sizeof prev);
                    ne = keep;
                    solve(&ne, p, beta, inv, &rank);
                    break;
                }
                out->iterations = it - 1;
                /* converged when no coefficient moves by more than a
                 * twentieth of its own standard error: far below what
                 * is reported, and IRLS on a misfitting model creeps */
                double change = 0.0;
                for (int j = 0; j < p; j++) {
                    double se = next * sqrt(fmax(inv[j][j], 0.0));
                    change = fmax(change, fabs(beta[j] - prev[j]) / (se + 1e-300));
                }
                if (change < 0.05)
                    break;
            }
            scale = next;
        }
        free(ss.r);
        out->n_downweighted = ne.n_low;
        out->scale = scale;
    }
    if (start) {
        if (!robust || ne.n_used <= (size_t)p)
            return pb_error_set(err, PB_ENUMERIC, "fit: a warm start needs a robust fit");
        /* the start's plain residual, scaled from its rows to these */
        out->rss_plain = start->rss_plain * (double)ne.n_used / (double)start->n_used;
    }
    /* residual sum of squares from the sums: y'Wy - beta'X'Wy */
    double rss = ne.yy;
    for (int j = 0; j < p; j++)
        rss -= beta[j] * ne.b[j];
    if (rss < 0.0)
        rss = 0.0;
    double dof = ne.wsum - rank;
    out->rank = rank;
    out->rows_visited = visited;
    out->rss = rss;
    out->dof = dof;
    out->n_used = ne.n_used;
    out->sigma = dof > 0 ? sqrt(rss / dof) : 0.0;
    double s2 = out->sigma * out->sigma;
    for (int i = 0; i < p; i++) {
        out->beta[i] = beta[i];
        for (int j = 0; j < p; j++)
            out->cov[i][j] = s2 * inv[i][j];
    }
    return PB_OK;
}

enum pb_code fit_linear(size_t n, int p, fit_row_fn row, void *ctx, int robust,
                        struct fit_result *out, struct pb_error *err)
{
    return fit_core(n, p, row, ctx, robust, NULL, out, err);
}

enum pb_code fit_linear_from(size_t n, int p, fit_row_fn row, void *ctx,
                             const struct fit_result *start, struct fit_result *out,
                             struct pb_error *err)
{
    return fit_core(n, p, row, ctx, 1, start, out, err);
}

double fit_ci95(const struct fit_result *f, int j)
{
    if (f->dof < 1.0)
        return NAN;
    double t = gsl_cdf_tdist_Pinv(0.975, f->dof);
    return t * sqrt(fmax(f->cov[j][j], 0.0));
}
