#include "life.h"

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_statistics_double.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "rlsq.h"

/* Shape grids. Break points at the 30th to 85th percentile of the history's
 * cycles (a break needs points on both sides); exponential rates and powers
 * per "the history's length" (x / x_last), accelerating only: a slowing
 * fade is what the straight line and the break already allow. */
#define BREAK_GRID 12
static const double exp_grid[] = {0.5, 1.0, 1.5, 2.0, 3.0, 4.0, 6.0};
static const double pow_grid[] = {1.25, 1.5, 2.0, 2.5, 3.0, 4.0, 5.0};
#define NGRID(a) (sizeof(a) / sizeof((a)[0]))

#define Z95 1.959964  /* two-sided 95 % of the normal */
#define MAD_SD 1.4826 /* median absolute deviation -> standard deviation (normal) */

const char *life_model_name(enum life_model m)
{
    switch (m) {
    case LIFE_LINE:
        return "line";
    case LIFE_BREAK:
        return "line with a break";
    case LIFE_EXP:
        return "exponential";
    case LIFE_POWER:
        return "power law";
    case LIFE_NONE:
        break;
    }
    return "none";
}

/* The model's regressors at x; returns how many. */
static size_t basis(enum life_model m, double shape, double scale, double x, double row[3])
{
    row[0] = 1.0;
    switch (m) {
    case LIFE_BREAK:
        row[1] = x;
        row[2] = x > shape ? x - shape : 0.0;
        return 3;
    case LIFE_EXP:
        row[1] = exp(shape * x / scale);
        return 2;
    case LIFE_POWER:
        row[1] = pow(fmax(x, 0.0) / scale, shape);
        return 2;
    default:
        row[1] = x;
        return 2;
    }
}

static double eval(enum life_model m, double shape, double scale, const double coef[3], double x)
{
    double row[3];
    size_t p = basis(m, shape, scale, x, row);
    double v = 0.0;
    for (size_t j = 0; j < p; j++)
        v += coef[j] * row[j];
    return v;
}

double life_value(const struct life_projection *p, double x)
{
    if (p->model == LIFE_NONE)
        return NAN;
    return eval(p->model, p->shape, p->scale_x, p->coef, x);
}

/* One robust fit of a model with a given shape to n points; sets coef and
 * the bisquare-weighted residual sum of squares. Returns 0, or -1. */
static int fit_shape(enum life_model m, double shape, double scale, const double *x,
                     const double *y, size_t n, struct rlsq_work *w, double *design, double coef[3],
                     double *wsse, double *sigma, double cov_out[9])
{
    double row[3];
    size_t p = basis(m, shape, scale, 0.0, row);
    if (n <= p + 1)
        return -1;
    for (size_t k = 0; k < n; k++) {
        basis(m, shape, scale, x[k], row);
        for (size_t j = 0; j < p; j++)
            design[k * p + j] = row[j];
    }
    struct rlsq_fit f;
    /* stopped after its rounds, a reweighted fit is still usable */
    if (rlsq_bisquare(design, y, n, p, w, &f) != 0)
        return -1;
    coef[0] = coef[1] = coef[2] = 0.0;
    for (size_t i = 0; i < 9; i++)
        cov_out[i] = 0.0;
    for (size_t i = 0; i < p; i++) {
        coef[i] = f.coef[i];
        for (size_t j = 0; j < p; j++)
            cov_out[3 * i + j] = f.cov[i * p + j];
    }
    *wsse = f.wsse;
    *sigma = f.sigma;
    return isfinite(f.wsse) && isfinite(coef[0]) && isfinite(coef[1]) && isfinite(coef[2]) ? 0 : -1;
}

/* Scratch for one projection's fits. */
struct life_scratch {
    struct rlsq_work *w;
    double *design; /* n x 3 */
};

/* The best shape of a model on n points (least weighted residual); sets
 * that residual and the fit's robust scale when wsse, sigma are not NULL. */
static int fit_model(enum life_model m, const double *x, const double *y, size_t n,
                     struct life_scratch *sc, double *shape, double *scale, double coef[3],
                     double *wsse, double *sigma, double cov[9])
{
    double grid[BREAK_GRID > 7 ? BREAK_GRID : 7];
    size_t ng = 1;
    *scale = x[n - 1] > 0.0 ? x[n - 1] : 1.0;
    switch (m) {
    case LIFE_BREAK:
        ng = BREAK_GRID;
        for (size_t g = 0; g < ng; g++)
            grid[g] = x[(size_t)((0.30 + 0.05 * (double)g) * (double)(n - 1))];
        break;
    case LIFE_EXP:
        ng = NGRID(exp_grid);
        memcpy(grid, exp_grid, sizeof exp_grid);
        break;
    case LIFE_POWER:
        ng = NGRID(pow_grid);
        memcpy(grid, pow_grid, sizeof pow_grid);
        break;
    default:
        grid[0] = NAN;
        break;
    }
    double best = HUGE_VAL, best_sigma = NAN;
    for (size_t g = 0; g < ng; g++) {
        double c[3], s, sg, cv[9];
        if (fit_shape(m, grid[g], *scale, x, y, n, sc->w, sc->design, c, &s, &sg, cv) != 0 ||
            !(s < best))
            continue;
        best = s;
        best_sigma = sg;
        if (cov)
            memcpy(cov, cv, sizeof cv);
        *shape = grid[g];
        memcpy(coef, c, sizeof c);
    }
    if (wsse)
        *wsse = best;
    if (sigma)
        *sigma = best_sigma;
    return isfinite(best) ? 0 : -1;
}

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

static double median_of(double *v, size_t m)
{
    if (m == 0)
        return NAN;
    qsort(v, m, sizeof *v, cmp_double);
    return m % 2 ? v[m / 2] : 0.5 * (v[m / 2 - 1] + v[m / 2]);
}

/* Held-out errors of a model: fitted to the flights before each of two
 * origins (a quarter and an eighth of the history from its end), scored on
 * the flights after it. err gets the absolute errors point by point (the
 * same points for every model, so they pair), *ne their count; scratch
 * needs room for 2 n values. */
static int holdout(enum life_model m, const double *x, const double *y, size_t n,
                   struct life_scratch *sc, double *err, size_t *ne, double *scratch,
                   double *med_err, double *rate)
{
    size_t h = n / 4 > 3 ? n / 4 : 3;
    size_t origins[2] = {n - h, n - h / 2 - 1};
    size_t nr = 0, beyond = 0;
    *ne = 0;
    for (int o = 0; o < 2; o++) {
        size_t org = origins[o];
        double shape = NAN, scale, coef[3], sigma;
        if (fit_model(m, x, y, org, sc, &shape, &scale, coef, NULL, &sigma, NULL) != 0)
            return -1;
        if (!isfinite(sigma))
            sigma = 0.0;
        for (size_t k = org; k < n; k++) {
            double e = fabs(y[k] - eval(m, shape, scale, coef, x[k]));
            double d = x[k] - x[org - 1];
            err[(*ne)++] = e;
            /* what grows with the cycles ahead is the error beyond one
             * flight's own scatter about the model (its robust sigma):
             * the crossing is of the pack's state, not of one flight */
            if (d > 0.0)
                scratch[nr++] = fmax(e - sigma, 0.0) / d;
            beyond += e > sigma;
        }
    }
    *rate = MAD_SD * median_of(scratch, nr);
    /* Growth only when the forecasts really did worse than the scatter: a
     * flight lands beyond one sigma of a right model with probability
     * 0.3173 (normal), so more such flights than a binomial count gives
     * with 5 % chance (one-sided sign test; held-out errors of one fit are
     * correlated, which lets the test pass more often: the cautious side). Without that, a few
     * noisy held-out flights of a short history would make a growth rate that, extended over many
     * cycles ahead, brings the early end near. */
    if (*ne > 0 && beyond > 0 &&
        !(gsl_cdf_binomial_Q((unsigned)beyond - 1, 0.3173, (unsigned)*ne) <= 0.05))
        *rate = 0.0;
    memcpy(scratch, err, *ne * sizeof *err);
    *med_err = median_of(scratch, *ne);
    return isfinite(*med_err) && isfinite(*rate) ? 0 : -1;
}

/* One standard deviation of the model's value at x, d cycles ahead of x0:
 * its parameters' (the fit's covariance, shape held) and the held-out
 * error growth, independent. */
static double life_halfwidth(const struct life_projection *p, double x, double x0)
{
    double row[3];
    size_t np = basis(p->model, p->shape, p->scale_x, x, row);
    double var = 0.0;
    for (size_t i = 0; i < np; i++)
        for (size_t j = 0; j < np; j++)
            var += row[i] * p->cov[3 * i + j] * row[j];
    double g = p->err_rate * (x - x0);
    return sqrt(fmax(var, 0.0) + g * g);
}

/* The first x in [x0, x0 + horizon] where the falling g(x) - k rate (x - x0)
 * is at or below level (g already negated for a rising quantity); NAN when
 * none. A scan in steps of horizon / 4000, then bisection within the step. */
static double first_cross(const struct life_projection *p, double sign, double level, double k,
                          double x0, double horizon)
{
#define G(xx) (sign * life_value(p, (xx)) - k * life_halfwidth(p, (xx), x0))
    if (G(x0) <= level)
        return x0;
    double step = horizon / 4000.0, lo = x0;
    for (int i = 1; i <= 4000; i++) {
        double hi = x0 + step * i;
        if (G(hi) <= level) {
            for (int b = 0; b < 40; b++) {
                double mid = 0.5 * (lo + hi);
                if (G(mid) <= level)
                    hi = mid;
                else
                    lo = mid;
            }
            return hi;
        }
        lo = hi;
    }
    return NAN;
#undef G
}

/* One model fitted to the whole history. Returns 0, or -1 when it cannot
 * be fitted or takes no part (below). */
static int project_fit(enum life_model model, const double *xs, const double *ys, size_t m,
                       struct life_scratch *sc, double sign, struct life_projection *p)
{
    memset(p, 0, sizeof *p);
    p->model = model;
    p->early = p->middle = p->late = NAN;
    if (fit_model(model, xs, ys, m, sc, &p->shape, &p->scale_x, p->coef, NULL, NULL, p->cov) != 0)
        return -1;
    /* A curve's accelerating term (the exponential's or power's amplitude,
     * the slope change after the break) must differ from zero towards the
     * level (Wald test, one-sided 2.5 %, its own standard error with the
     * shape held). The shape was picked from a grid as the best fit, which
     * makes the best of several tests: Bonferroni divides the 2.5 % by the
     * grid's size (7 shapes: z 2.69; 12 break points: z 2.87). Curvature the
     * history cannot tell from zero is its noise, and extrapolated it would
     * project an early end from nothing. Such a curve takes no part (not
     * chosen, not in the range). */
    if (model != LIFE_LINE) {
        size_t j = model == LIFE_BREAK ? 2 : 1;
        double grid = model == LIFE_BREAK ? BREAK_GRID
                      : model == LIFE_EXP ? (double)NGRID(exp_grid)
                                          : (double)NGRID(pow_grid);
        double z = gsl_cdf_ugaussian_Qinv(0.025 / grid);
        double se = sqrt(fmax(p->cov[3 * j + j], 0.0));
        if (!(sign * p->coef[j] <= -z * se))
            return -1;
    }
    return 0;
}

/* The fitted model projected with its held-out error: its crossing
 * (middle) and range. */
static void project_cross(struct life_projection *p, double med, double rate, double sign,
                          double lvl, double x_now, double horizon)
{
    p->holdout_err = med;
    p->err_rate = rate;
    p->past = sign * life_value(p, x_now) <= lvl;
    p->middle = first_cross(p, sign, lvl, 0.0, x_now, horizon);
    /* a model that does not reach the level projects no crossing: an early
     * end from the error allowance alone would be noise (a new pack's
     * falling resistance would get a date) */
    if (!isfinite(p->middle))
        return;
    p->early = first_cross(p, sign, lvl, Z95, x_now, horizon);
    p->late = first_cross(p, sign, lvl, -Z95, x_now, horizon);
}

int life_project(const double *x, const double *y, size_t n, double level, int rising, double x_now,
                 double horizon, struct life_projection *out)
{
    memset(out, 0, sizeof *out);
    out->model = LIFE_NONE;
    out->shape = out->holdout_err = out->err_rate = NAN;
    out->early = out->middle = out->late = NAN;
    size_t m = 0;
    for (size_t k = 0; k < n; k++)
        m += isfinite(x[k]) && isfinite(y[k]);
    if (m < LIFE_MIN_POINTS || !isfinite(level))
        return 0;
    double *xs = malloc(m * sizeof *xs), *ys = malloc(m * sizeof *ys);
    /* candidates from the simplest (parameters: line 2, exponential and
     * power 3, break 4) */
    static const enum life_model cand[] = {LIFE_LINE, LIFE_EXP, LIFE_POWER, LIFE_BREAK};
    enum { NC = sizeof cand / sizeof cand[0] };
    double *err = malloc(NC * 2 * m * sizeof *err), *pc = malloc(2 * m * sizeof *pc);
    struct life_scratch sc = {rlsq_work_new(m), malloc(3 * m * sizeof(double))};
    if (!xs || !ys || !err || !pc || !sc.w || !sc.design) {
        free(xs), free(ys), free(err), free(pc), free(sc.design);
        rlsq_work_free(sc.w);
        return -1;
    }
    m = 0;
    for (size_t k = 0; k < n; k++)
        if (isfinite(x[k]) && isfinite(y[k]))
            xs[m] = x[k], ys[m] = y[k], m++;
    double med[NC], rate[NC];
    size_t ne[NC];
    int ok[NC], best = -1;
    struct life_projection pr[NC];
    double sign = rising ? -1.0 : 1.0, lvl = sign * level;
    for (int c = 0; c < NC; c++) {
        /* the held-out fits only for a model that takes part: a curve
         * whose accelerating term fails its test costs one grid of fits */
        ok[c] = project_fit(cand[c], xs, ys, m, &sc, sign, &pr[c]) == 0 &&
                holdout(cand[c], xs, ys, m, &sc, err + (size_t)c * 2 * m, &ne[c], pc, &med[c],
                        &rate[c]) == 0;
        if (ok[c])
            project_cross(&pr[c], med[c], rate[c], sign, lvl, x_now, horizon);
        /* the least median held-out error wins; the simpler model keeps a tie */
        if (ok[c] && (best < 0 || med[c] < med[best]))
            best = c;
    }
    if (best >= 0) {
        *out = pr[best];
        /* Which model is right is uncertain too: the range spans every
         * model whose held-out errors exceed the chosen one's by no more
         * than the standard error of that excess (paired, point by point;
         * the one-standard-error rule of Hastie, Tibshirani and Friedman,
         * The Elements of Statistical Learning, 7.10, from memory). A curve
         * picked by a few noisy flights then still shows the line's later
         * end, and the line a curve's earlier one. */
        int late_open = isfinite(out->middle) && !isfinite(out->late);
        for (int c = 0; c < NC && isfinite(out->middle); c++) {
            if (!ok[c] || c == best || ne[c] != ne[best])
                continue;
            const double *ec = err + (size_t)c * 2 * m, *eb = err + (size_t)best * 2 * m;
            double sum = 0.0, sum2 = 0.0, k = (double)ne[c];
            for (size_t i = 0; i < ne[c]; i++) {
                double d = ec[i] - eb[i];
                sum += d;
                sum2 += d * d;
            }
            double mean = sum / k, var = k > 1 ? (sum2 - k * mean * mean) / (k - 1.0) : 0.0;
            if (!(mean <= sqrt(fmax(var, 0.0) / k)))
                continue;
            out->early = fmin(out->early, isfinite(pr[c].early) ? pr[c].early : pr[c].middle);
            if (!isfinite(pr[c].late))
                late_open = 1;
            else
                out->late = fmax(out->late, pr[c].late);
        }
        if (late_open)
            out->late = NAN;
    }
    free(xs), free(ys), free(err), free(pc), free(sc.design);
    rlsq_work_free(sc.w);
    return 0;
}
