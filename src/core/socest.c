#include "socest.h"

#include <math.h>

#include "fit.h"

double socest_relax_v(double rest_s)
{
    if (!(rest_s >= 60.0))
        return 0.050;
    if (rest_s < 600.0)
        return 0.025;
    if (rest_s < 1800.0)
        return 0.010;
    return 0.005;
}

struct soc_value socest_soc(const struct chem_info *c, double ocv_cell_v, double d_v)
{
    struct soc_value s = {0};
    double d = hypot(d_v, SOCEST_TABLE_V);
    s.soc_pct = ocv_to_soc(c, ocv_cell_v, &s.clamped);
    s.lo_pct = ocv_to_soc(c, ocv_cell_v - d, NULL);
    s.hi_pct = ocv_to_soc(c, ocv_cell_v + d, NULL);
    /* a table's top point is the charge voltage, which a full cell leaves as
     * it rests: a voltage within d of the chemistry's full-at-rest level
     * (ocv.h, common practice) may be a full cell */
    if (ocv_cell_v + d >= c->full_rest_v)
        s.hi_pct = 100.0;
    s.ci95_pct = fmax(s.soc_pct - s.lo_pct, s.hi_pct - s.soc_pct);
    return s;
}

#define RELAX_GRID 24
#define RELAX_MIN_ROWS 6

struct relax_ctx {
    const double *t, *v;
    size_t k0;
    double tau, v_ref;
};

static int relax_row(void *vc, size_t j, double *x, double *y)
{
    struct relax_ctx *c = vc;
    size_t k = c->k0 + j;
    x[0] = 1.0;
    x[1] = exp(-(c->t[k] - c->t[c->k0]) / c->tau);
    *y = c->v[k] - c->v_ref;
    return 1;
}

double socest_relaxed_v(const double *t_s, const double *v_v, size_t k0, size_t n, double *d_v)
{
    *d_v = NAN;
    if (n < k0 + RELAX_MIN_ROWS)
        return NAN;
    double span = t_s[n - 1] - t_s[k0];
    if (!(span > 0.0))
        return NAN;
    struct relax_ctx c = {t_s, v_v, k0, 0.0, v_v[n - 1]};
    struct fit_result best = {0};
    double best_tau = NAN, best_rss = HUGE_VAL;
    /* tau from a tenth of the rest to ten times it: a relaxation the rest
     * shows the shape of, neither over at once nor a straight line */
    for (int g = 0; g < RELAX_GRID; g++) {
        c.tau = span * 0.1 * pow(100.0, (double)g / (RELAX_GRID - 1));
        struct fit_result f;
        if (fit_linear(n - k0, 2, relax_row, &c, 0, &f, NULL) != PB_OK || f.rank < 2)
            continue;
        if (f.rss < best_rss) {
            best_rss = f.rss;
            best = f;
            best_tau = c.tau;
        }
    }
    if (!isfinite(best_tau))
        return NAN;
    double v_inf = c.v_ref + best.beta[0];
    double v_last = v_v[n - 1];
    /* the extrapolation is as good as its fit, and no better than half the
     * way it goes beyond the last reading */
    double ci = fit_ci95(&best, 0);
    *d_v = fmax(isfinite(ci) ? ci : HUGE_VAL, 0.5 * fabs(v_inf - v_last));
    if (!isfinite(*d_v))
        return NAN;
    return v_inf;
}
