#include "capacity.h"

#include <math.h>

#include "socest.h"

/* Rested per-cell voltage of the rest run ending at sample e (inclusive),
 * from its last fifth, and the run's length in seconds. */
static double rest_voltage(const struct series *s, size_t b, size_t e, int cells, double *len_s)
{
    *len_s = s->t_s[e] - s->t_s[b];
    double t0 = s->t_s[e] - 0.2 * *len_s, sum = 0.0;
    size_t m = 0;
    for (size_t k = e + 1; k-- > b;) {
        if (s->t_s[k] < t0 && m > 0)
            break;
        sum += s->v_v[k];
        m++;
    }
    return sum / (double)m / cells;
}

void capacity_to_cutoff(const struct series *s, const double *q_ah, const struct cutoff_opts *o,
                        struct cutoff_result *out)
{
    *out = (struct cutoff_result){0};
    out->q_mah = out->ci95_mah = out->c_rate = out->mean_a = out->end_v_cell = NAN;
    if (!s->i_a || o->cells <= 0 || s->n < 3) {
        out->why_not = "needs current and the cell count";
        return;
    }
    /* the end: the last loaded sample, discharging */
    size_t e = s->n;
    while (e-- > 0)
        if (fabs(s->i_a[e]) > o->rest_a)
            break;
    if (e >= s->n || s->i_a[e] <= 0.0) {
        out->why_not = "the log does not end with a discharge";
        return;
    }
    double v_end = (s->v_v[e] + o->r_ohm * s->i_a[e]) / o->cells;
    double d_end = hypot(SOCEST_LOADED_V, o->r_ci_ohm * s->i_a[e] / o->cells);
    struct soc_value se = socest_soc(o->chem, v_end, d_end);
    if (se.lo_pct > 0.0) {
        out->why_not = "the discharge stops before the pack is empty";
        return;
    }
    /* the start: the latest rest run at full before e with no recharge after it */
    double q_min = q_ah[e]; /* least charge drawn after sample k */
    double q_low = q_ah[e];
    for (size_t j = 0; j < e; j++)
        q_low = fmin(q_low, q_ah[j]);
    /* regeneration pulses are allowed, a recharge is not: the scale is the
     * largest discharge the log could hold */
    double tol_ah = CAPACITY_RECHARGE_FRAC * (q_ah[e] - q_low);
    size_t k = e;
    while (k-- > 0) {
        /* charge put back after k, beyond short regeneration pulses: the
         * charge drawn at k exceeds a later value */
        if (q_ah[k] > q_min + tol_ah)
            break;
        q_min = fmin(q_min, q_ah[k]);
        if (fabs(s->i_a[k]) > o->rest_a)
            continue;
        size_t re = k, rb = k;
        while (rb > 0 && fabs(s->i_a[rb - 1]) <= o->rest_a)
            rb--;
        double len_s;
        double v = rest_voltage(s, rb, re, o->cells, &len_s);
        struct soc_value ss = socest_soc(o->chem, v, socest_relax_v(len_s));
        double q = q_ah[e] - q_ah[re];
        if (ss.hi_pct >= 100.0 && q > 0.0) {
            out->found = 1;
            out->k_start = re;
            out->k_end = e;
            out->q_mah = 1000.0 * q;
            double gap_ah = 0.0, last_ah = 0.0, t_loaded = 0.0, q_loaded = 0.0;
            for (size_t j = re + 1; j <= e; j++) {
                double dt = s->t_s[j] - s->t_s[j - 1];
                double dq = q_ah[j] - q_ah[j - 1];
                if (dt > o->gap_s || series_is_joint(s, j))
                    gap_ah += fabs(dq);
                if (s->i_a[j] > o->rest_a && s->i_a[j - 1] > o->rest_a) {
                    t_loaded += dt;
                    q_loaded += dq;
                }
                last_ah = dq;
            }
            out->ci95_mah = 1000.0 * hypot(gap_ah, 0.5 * fabs(last_ah));
            out->mean_a = t_loaded > 0.0 ? 3600.0 * q_loaded / t_loaded : NAN;
            out->c_rate = o->rated_mah > 0.0 ? out->mean_a / (o->rated_mah / 1000.0) : NAN;
            out->end_v_cell = s->v_v[e] / o->cells;
            return;
        }
        k = rb; /* skip the rest of this run */
    }
    out->why_not = "no rest at full charge before the discharge";
}
