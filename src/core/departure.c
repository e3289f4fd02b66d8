#include "departure.h"

#include <gsl/gsl_cdf.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

const char *departure_name(enum departure_quantity q)
{
    switch (q) {
    case DEP_R0:
        return "IR";
    case DEP_CAPACITY:
        return "capacity";
    case DEP_SPREAD:
        return "cell imbalance";
    case DEP_NQ:
        break;
    }
    return "?";
}

void departure_text(const struct departure *d, char *buf, size_t cap)
{
    snprintf(buf, cap, "%s %s %.0f %% against its trend (%.1f \u03c3)", departure_name(d->quantity),
             d->change_pct >= 0 ? "up" : "down", fabs(d->change_pct), d->z);
}

/* The quantity's value of a flight and its own standard deviation (0 when
 * unknown); NAN value when there is none. Only physical values count. */
static double value_of(const struct health_flight *f, enum departure_quantity q, int cells,
                       double rated_mah, double *own_sd)
{
    *own_sd = 0.0;
    switch (q) {
    case DEP_R0:
        if (!(f->r0_mohm > 0.0))
            return NAN;
        if (f->r0_ci95_mohm > 0.0)
            *own_sd = f->r0_ci95_mohm / 1.96 / cells;
        return f->r0_mohm / cells;
    case DEP_CAPACITY:
        if (!(f->capacity_mah > 0.0))
            return NAN;
        if (f->capacity_ci95_mah > 0.0)
            *own_sd = 100.0 * f->capacity_ci95_mah / 1.96 / rated_mah;
        return 100.0 * f->capacity_mah / rated_mah;
    case DEP_SPREAD:
        return f->spread_rest_mv >= 0.0 ? f->spread_rest_mv : NAN;
    case DEP_NQ:
        break;
    }
    return NAN;
}

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

int departure_scan(const struct health_flight *f, size_t n, int cells, double rated_mah,
                   const int *acked, struct departure *out)
{
    double *cyc = malloc((n ? n : 1) * sizeof *cyc);
    if (!cyc)
        return -1;
    if (cells < 1)
        cells = 1;
    double q = 0.0;
    for (size_t k = 0; k < n; k++) {
        /* as health_trend counts them: the charge drawn before and during */
        if (isfinite(f[k].charge_mah) && f[k].charge_mah > 0)
            q += f[k].charge_mah;
        cyc[k] = rated_mah > 0 ? q / rated_mah : (double)k;
    }
    int flagged = 0;
    for (size_t k = 0; k < n; k++) {
        struct departure *d = &out[k];
        memset(d, 0, sizeof *d);
        d->value = d->expected = d->change_pct = d->z = NAN;
        for (int qi = 0; qi < DEP_NQ; qi++) {
            double own, y = value_of(&f[k], (enum departure_quantity)qi, cells, rated_mah, &own);
            if (!isfinite(y))
                continue;
            double hx[DEPARTURE_HISTORY], hy[DEPARTURE_HISTORY], hv[DEPARTURE_HISTORY];
            size_t m = 0;
            for (size_t j = k; j > 0 && m < DEPARTURE_HISTORY; j--) {
                const size_t i = j - 1;
                int accepted = out[i].flagged && acked && acked[i];
                /* an unacknowledged departure is not part of the trend */
                if (out[i].flagged && !accepted)
                    continue;
                double o, v = value_of(&f[i], (enum departure_quantity)qi, cells, rated_mah, &o);
                if (!isfinite(v))
                    continue;
                hx[m] = cyc[i];
                hy[m] = v;
                hv[m] = o * o;
                m++;
                /* an acknowledged departure starts the trend afresh: the
                 * level before it no longer applies */
                if (accepted)
                    break;
            }
            if (m < DEPARTURE_MIN)
                continue;
            struct line_fit l = health_line(hx, hy, m, 0);
            if (!l.ok)
                continue;
            double yhat = l.a + l.b * cyc[k];
            double var_line = l.cov_aa + 2.0 * cyc[k] * l.cov_ab + cyc[k] * cyc[k] * l.cov_bb;
            /* the history's scatter already holds its flights' usual
             * measurement noise: the flight's own interval adds only what
             * it has beyond that (a short flight's wide capacity interval) */
            qsort(hv, m, sizeof *hv, cmp_double);
            double typical = m % 2 ? hv[m / 2] : 0.5 * (hv[m / 2 - 1] + hv[m / 2]);
            double sd =
                sqrt(l.sigma * l.sigma + fmax(var_line, 0.0) + fmax(own * own - typical, 0.0));
            /* damage raises resistance and spread, lowers capacity */
            double r = qi == DEP_CAPACITY ? yhat - y : y - yhat;
            double t = sd > 0.0 ? r / sd : (r > 0.0 ? HUGE_VAL : 0.0);
            /* a scatter estimated from m flights is itself uncertain: the
             * residual is a Student t with m - 2 degrees of freedom; its
             * tail is put on the normal scale, so a short history needs a
             * larger residual for the same "sigmas" */
            double z = t;
            if (isfinite(t) && t > 0.0) {
                double p = gsl_cdf_tdist_Q(t, (double)m - 2.0);
                z = p > 0.0 ? gsl_cdf_ugaussian_Qinv(p) : t;
            }
            if (!isfinite(d->z) || z > d->z) {
                d->quantity = (enum departure_quantity)qi;
                d->value = y;
                d->expected = yhat;
                d->change_pct = yhat != 0.0 ? 100.0 * (y - yhat) / fabs(yhat) : NAN;
                d->z = z;
            }
        }
        d->flagged = isfinite(d->z) && d->z >= DEPARTURE_Z;
        flagged += d->flagged;
    }
    free(cyc);
    return flagged;
}
