#include "edges.h"

#include <gsl/gsl_cdf.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "fit.h"

#define NOISE_SAMPLES 65536

double edges_noise(const double *v, const double *i, size_t n, double step_a)
{
    if (n < 3)
        return NAN;
    size_t stride = n / NOISE_SAMPLES + 1, m = 0;
    double *d = malloc((n / stride + 1) * sizeof *d);
    if (!d)
        return NAN;
    double res = HUGE_VAL;
    for (size_t k = 1; k + 1 < n; k += stride) {
        if (fabs(i[k + 1] - i[k]) > 0.05 * step_a || fabs(i[k] - i[k - 1]) > 0.05 * step_a)
            continue;
        double dv = fabs(v[k] - v[k - 1]);
        if (dv > 0.0)
            res = fmin(res, dv);
        d[m++] = fabs(v[k + 1] - 2.0 * v[k] + v[k - 1]);
    }
    double sigma = m ? 1.4826 * fit_median(d, m) / sqrt(6.0) : NAN;
    free(d);
    if (isfinite(res))
        sigma = isfinite(sigma) ? fmax(sigma, res / sqrt(12.0)) : res / sqrt(12.0);
    return sigma;
}

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

/* Distribution-free 95 % interval of the median from order statistics
 * (the binomial(n, 1/2) quantiles; any textbook of nonparametric
 * statistics, e.g. Conover, "Practical Nonparametric Statistics"): the
 * half-width reported is the larger distance from the median. */
static double median_ci95(const double *sorted, size_t n, double med)
{
    /* largest j <= n / 2 with P(B <= j - 1) <= 0.025, B ~ Bin(n, 1/2): the
     * first j below n / 2 where P(B <= j) > 0.025 (or n / 2), found by
     * bisection, as P rises with j (a long log has ten thousand steps:
     * the walk up to j took ~5,000 evaluations, 2 ms) */
    size_t j = 0, top = n / 2;
    while (j < top) {
        size_t mid = j + (top - j) / 2;
        if (gsl_cdf_binomial_P((unsigned)mid, 0.5, (unsigned)n) > 0.025)
            top = mid;
        else
            j = mid + 1;
    }
    if (j == 0)
        return NAN;
    double lo = sorted[j - 1], hi = sorted[n - j];
    return fmax(med - lo, hi - med);
}

double edges_step_a(double rated_mah, double peak_a)
{
    return fmax(rated_mah > 0.0 ? 0.2 * rated_mah / 1000.0 : 0.2 * peak_a, 0.1);
}

void edges_estimate(const double *t_s, const double *v_v, const double *i_a, size_t n,
                    const struct edges_opts *o, struct edges_result *out)
{
    *out = (struct edges_result){0};
    out->r_mohm = out->ci95_mohm = out->time_scale_s = out->noise_mv = NAN;
    double step_a = edges_step_a(o->rated_mah, o->peak_a);
    out->step_a = step_a;
    if (!i_a || n < 2) {
        out->reason = "no current";
        return;
    }
    size_t cap = 0;
    for (size_t k = 1; k < n; k++)
        cap += fabs(i_a[k] - i_a[k - 1]) >= step_a;
    if (cap == 0) {
        out->reason = "no current step";
        return;
    }
    double *r = malloc(cap * sizeof *r), *dt = malloc(cap * sizeof *dt);
    double *raw = malloc(cap * sizeof *raw);
    size_t *at = malloc(cap * sizeof *at);
    if (!r || !dt || !raw || !at) {
        free(r);
        free(dt);
        free(raw);
        free(at);
        out->reason = "out of memory";
        return;
    }
    size_t m = 0;
    for (size_t k = 1; k < n; k++) {
        double di = i_a[k] - i_a[k - 1];
        if (fabs(di) < step_a)
            continue;
        double span = t_s[k] - t_s[k - 1];
        int near_cutoff = o->cutoff_v > 0.0 && fmin(v_v[k], v_v[k - 1]) <= o->cutoff_v;
        if (span > o->gap_s || near_cutoff || (o->series && series_is_joint(o->series, k))) {
            out->left_out++;
            continue;
        }
        /* the voltage after the step, taken back to the middle of the step
         * interval along the next interval's slope when that interval holds
         * the current and is about as long: the polarisation that built up
         * within the interval is then mostly left out, so loggers of
         * different rates give comparable figures */
        double v_after = v_v[k];
        if (k + 1 < n && !(o->series && series_is_joint(o->series, k + 1))) {
            double span2 = t_s[k + 1] - t_s[k];
            if (span2 >= 0.5 * span && span2 <= 2.0 * span &&
                fabs(i_a[k + 1] - i_a[k]) < 0.05 * fabs(di)) {
                v_after -= (v_v[k + 1] - v_v[k]) / span2 * 0.5 * span;
                out->extrapolated++;
            }
        }
        r[m] = -1000.0 * (v_after - v_v[k - 1]) / di;
        raw[m] = -1000.0 * (v_v[k] - v_v[k - 1]) / di;
        dt[m] = span;
        at[m] = k;
        m++;
    }
    /* near empty: the lighter-loaded side of the step, sag-corrected with the
     * steps' own median, reads below EDGES_EMPTY_SOC_PCT on the table */
    if (o->chem && o->cells > 0 && m > 0) {
        double *tmp = malloc(m * sizeof *tmp);
        if (tmp) {
            memcpy(tmp, r, m * sizeof *tmp);
            double r_ohm = fmax(fit_median(tmp, m), 0.0) / 1000.0;
            free(tmp);
            size_t w = 0;
            for (size_t j = 0; j < m; j++) {
                size_t k = at[j];
                size_t lo = fabs(i_a[k]) < fabs(i_a[k - 1]) ? k : k - 1;
                double ocv = (v_v[lo] + r_ohm * i_a[lo]) / o->cells;
                if (ocv_to_soc(o->chem, ocv, NULL) < EDGES_EMPTY_SOC_PCT) {
                    out->left_out++;
                    continue;
                }
                r[w] = r[j], raw[w] = raw[j], dt[w] = dt[j], at[w] = at[j];
                w++;
            }
            m = w;
        }
    }
    out->steps = m;
    if (m == 0) {
        out->reason = "every current step is near the cut-off or across a gap";
        free(r);
        free(dt);
        free(raw);
        free(at);
        return;
    }
    qsort(r, m, sizeof *r, cmp_double);
    double med = m % 2 ? r[m / 2] : 0.5 * (r[m / 2 - 1] + r[m / 2]);
    out->time_scale_s = fit_median(dt, m);
    double noise_v = edges_noise(v_v, i_a, n, step_a);
    out->noise_mv = 1000.0 * noise_v;
    /* one step's resistance error from the noise of its two voltages */
    double di_typ = step_a;
    double noise_ci = isfinite(noise_v) ? 1.96 * sqrt(2.0) * 1000.0 * noise_v / di_typ : NAN;
    double ci = median_ci95(r, m, med);
    if (!isfinite(ci) && m >= 2) {
        /* too few steps for the order-statistic interval: Student t on their spread */
        double mean = 0.0, ss = 0.0;
        for (size_t k = 0; k < m; k++)
            mean += r[k] / (double)m;
        for (size_t k = 0; k < m; k++)
            ss += (r[k] - mean) * (r[k] - mean);
        ci = gsl_cdf_tdist_Pinv(0.975, (double)(m - 1)) * sqrt(ss / (double)(m - 1) / (double)m);
    }
    if (isfinite(noise_ci))
        ci = isfinite(ci) ? hypot(ci, noise_ci / sqrt((double)m)) : noise_ci;
    /* the carrying back is a model choice: the interval covers what it changed */
    double raw_med = fit_median(raw, m);
    ci = isfinite(ci) ? fmax(ci, fabs(raw_med - med)) : fabs(raw_med - med);
    out->r_mohm = med;
    out->ci95_mohm = ci;
    if (!(med > 0.0)) {
        out->reason = "the steps give a resistance that is not positive: voltage and current "
                      "may be out of step or the current sign wrong";
        out->r_mohm = NAN;
    }
    free(r);
    free(dt);
    free(raw);
    free(at);
}
