#include "coulomb.h"

/* Integral over [0, dt] of (v0 + dv s/dt)(i0 + di s/dt) ds. */
static double product_integral(double dt, double v0, double v1, double i0, double i1)
{
    double dv = v1 - v0, di = i1 - i0;
    return dt * (v0 * i0 + 0.5 * (v0 * di + dv * i0) + dv * di / 3.0);
}

static void add_piece(struct coulomb_result *r, double dt, double v0, double v1, double i0,
                      double i1)
{
    double q_as = dt * 0.5 * (i0 + i1);
    double e_ws = product_integral(dt, v0, v1, i0, i1);
    if (i0 + i1 >= 0.0) {
        r->discharged_mah += q_as / 3.6;
        r->discharged_wh += e_ws / 3600.0;
    } else {
        r->regen_mah -= q_as / 3.6;
        r->regen_wh -= e_ws / 3600.0;
    }
}

void coulomb_count(const double *t_s, const double *v_v, const double *i_a, size_t n, double gap_s,
                   struct coulomb_result *out)
{
    coulomb_count_segments(t_s, v_v, i_a, n, NULL, 0, gap_s, out);
}

void coulomb_count_segments(const double *t_s, const double *v_v, const double *i_a, size_t n,
                            const size_t *seg_start, size_t nseg, double gap_s,
                            struct coulomb_result *out)
{
    struct coulomb_result r = {0};
    size_t next_seg = 1; /* the next joint is at seg_start[next_seg] */
    for (size_t k = 1; k < n; k++) {
        if (next_seg < nseg && seg_start[next_seg] == k) {
            /* the clock restarted: how long the pack ran meanwhile is unknown */
            next_seg++;
            r.joints++;
            continue;
        }
        double dt = t_s[k] - t_s[k - 1];
        double i0 = i_a[k - 1], i1 = i_a[k];
        double v0 = v_v[k - 1], v1 = v_v[k];
        if (dt > gap_s) {
            if (r.gaps == 0)
                r.gap_first_index = k;
            r.gaps++;
            r.gap_total_s += dt;
            if (dt > r.gap_longest_s)
                r.gap_longest_s = dt;
            r.gap_charge_mah += dt * 0.5 * (i0 + i1) / 3.6;
        }
        if ((i0 > 0.0 && i1 < 0.0) || (i0 < 0.0 && i1 > 0.0)) {
            /* split at the zero crossing so each part has one sign */
            double f = i0 / (i0 - i1);
            double vz = v0 + f * (v1 - v0);
            add_piece(&r, f * dt, v0, vz, i0, 0.0);
            add_piece(&r, (1.0 - f) * dt, vz, v1, 0.0, i1);
        } else {
            add_piece(&r, dt, v0, v1, i0, i1);
        }
    }
    *out = r;
}
