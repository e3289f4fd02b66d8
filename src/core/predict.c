#include "predict.h"

#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
#include <gsl/gsl_statistics_double.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

void predict_opts_default(struct predict_opts *o)
{
    memset(o, 0, sizeof *o);
    o->soc0_pct = 100.0;
    o->reserve_pct = PREDICT_RESERVE_PCT;
    o->floor_v = NAN; /* chemistry default */
    o->temp_c = NAN;
    /* from memory: Li-ion resistance activation energies are quoted at
     * 20-50 kJ/mol; 30 kJ/mol is a middle value */
    o->ea_j_mol = 30000.0;
    o->dt_s = 0.5;
    o->t_max_s = PREDICT_HORIZON_S;
    o->peukert_h = 1.0;
}

const char *predict_limit_name(enum predict_limit l)
{
    switch (l) {
    case LIMIT_NONE:
        return "none";
    case LIMIT_RESERVE:
        return "reserve";
    case LIMIT_FLOOR:
        return "floor";
    case LIMIT_COLLAPSE:
        return "collapse";
    case LIMIT_EMPTY:
        return "empty";
    }
    return "?";
}

double predict_r_at(double r_ref_ohm, double t_ref_c, double temp_c, double ea_j_mol)
{
    if (!isfinite(temp_c))
        return r_ref_ohm;
    double t = temp_c + 273.15, tr = t_ref_c + 273.15;
    return r_ref_ohm * exp(ea_j_mol / GAS_CONSTANT_J_MOL_K * (1.0 / t - 1.0 / tr));
}

static double load_power_at(const struct predict_load *l, double t)
{
    if (l->kind == LOAD_POWER)
        return l->power_w;
    double tt = fmod(t, l->prof_period_s);
    size_t k = 0;
    while (k + 1 < l->prof_n && l->prof_t_s[k + 1] <= tt)
        k++;
    return l->prof_w[k];
}

/* Current and loaded voltage for the load at E = OCV - V_RC; returns 0, or
 * -1 when the power cannot be delivered (E^2 < 4 R P: voltage collapse). */
static int solve_current(const struct predict_load *l, double t, double e_v, double r_ohm,
                         double *i_a, double *v_v)
{
    if (l->kind == LOAD_CURRENT) {
        *i_a = l->current_a;
        *v_v = e_v - r_ohm * *i_a;
        return 0;
    }
    double p = load_power_at(l, t);
    double disc = e_v * e_v - 4.0 * r_ohm * p;
    if (disc < 0.0)
        return -1;
    /* the smaller root: the stable operating point */
    *i_a = r_ohm > 0.0 ? (e_v - sqrt(disc)) / (2.0 * r_ohm) : p / e_v;
    *v_v = e_v - r_ohm * *i_a;
    return 0;
}

struct state {
    double t, soc, v1;
};

/* dSoC/dt in % per second for current i */
static double soc_rate(const struct predict_pack *p, const struct predict_opts *o, double i_a)
{
    double rate = 100.0 * i_a / (3600.0 * p->capacity_ah);
    if (o->peukert_k > 0.0 && i_a > 0.0) {
        /* rated-capacity form t = H (C / (I H))^k: the charge counts as if
         * scaled by (I H / C)^(k - 1) */
        rate *= pow(i_a * o->peukert_h / p->capacity_ah, o->peukert_k - 1.0);
    }
    return rate;
}

static void note(double *slot, double t)
{
    if (!isfinite(*slot))
        *slot = t;
}

int predict_run(const struct predict_pack *p, const struct predict_load *l,
                const struct predict_opts *o, struct predict_run *out)
{
    memset(out, 0, sizeof *out);
    out->t_reserve_s = out->t_floor_s = out->t_collapse_s = out->t_empty_s = NAN;
    out->t_safe_s = NAN;
    out->soc_after_pct = out->v_after_v = NAN;
    if (!(p->capacity_ah > 0.0) || !(p->cells > 0) || !p->chem || !(o->dt_s > 0.0))
        return -1;
    if (l->kind == LOAD_PROFILE && (l->prof_n == 0 || !(l->prof_period_s > 0.0)))
        return -1;
    if ((l->kind == LOAD_POWER && !(l->power_w >= 0.0)) ||
        (l->kind == LOAD_CURRENT && !(l->current_a >= 0.0)))
        return -1;
    double r = predict_r_at(p->r0_ohm, p->t_ref_c, o->temp_c, o->ea_j_mol);
    double floor_pack = (isfinite(o->floor_v) ? o->floor_v : p->chem->floor_v) * p->cells;
    struct state s = {0.0, o->soc0_pct, 0.0};
    double dt = o->dt_s;
    double prev_soc = s.soc, prev_v = NAN, prev_t = 0.0;
    int stopped = 0;
    while (s.t < o->t_max_s) {
        double e = p->cells * (ocv_from_soc(p->chem, s.soc) + p->v_offset_v) - s.v1;
        double i, v;
        if (solve_current(l, s.t, e, r, &i, &v) != 0) {
            note(&out->t_collapse_s, s.t);
            if (!stopped) {
                out->binding = LIMIT_COLLAPSE;
                out->t_safe_s = s.t;
                out->soc_at_stop_pct = s.soc;
                out->v_at_stop_v = e / 2.0;
                out->i_at_stop_a = e / (2.0 * r);
            }
            break;
        }
        /* limits at this point, crossing times interpolated from the last step */
        if (s.t > 0.0) {
            if (s.soc <= o->reserve_pct && !isfinite(out->t_reserve_s))
                out->t_reserve_s = prev_t + (prev_soc - o->reserve_pct) / (prev_soc - s.soc) * dt;
            if (v <= floor_pack && !isfinite(out->t_floor_s))
                out->t_floor_s = isfinite(prev_v) && prev_v > v
                                     ? prev_t + (prev_v - floor_pack) / (prev_v - v) * dt
                                     : s.t;
            if (s.soc <= 0.0 && !isfinite(out->t_empty_s))
                out->t_empty_s = prev_t + prev_soc / (prev_soc - s.soc) * dt;
        } else {
            if (s.soc <= o->reserve_pct)
                out->t_reserve_s = 0.0;
            if (v <= floor_pack)
                out->t_floor_s = 0.0;
        }
        if (!stopped && (isfinite(out->t_reserve_s) || isfinite(out->t_floor_s))) {
            int floor_first = isfinite(out->t_floor_s) &&
                              (!isfinite(out->t_reserve_s) || out->t_floor_s < out->t_reserve_s);
            out->binding = floor_first ? LIMIT_FLOOR : LIMIT_RESERVE;
            out->t_safe_s = floor_first ? out->t_floor_s : out->t_reserve_s;
            out->soc_at_stop_pct = s.soc;
            out->v_at_stop_v = v;
            out->i_at_stop_a = i;
            stopped = 1;
        }
        if (o->stop_after_s > 0.0 && !isfinite(out->soc_after_pct) && s.t >= o->stop_after_s) {
            double f = s.t > 0.0 ? (o->stop_after_s - prev_t) / dt : 0.0;
            out->soc_after_pct = prev_soc + f * (s.soc - prev_soc);
            out->v_after_v = isfinite(prev_v) ? prev_v + f * (v - prev_v) : v;
        }
        /* keep going after the first limit, to time the others, until empty */
        if (isfinite(out->t_empty_s) && (o->stop_after_s <= 0.0 || isfinite(out->soc_after_pct)))
            break;
        /* midpoint rule: current at the half step drives the whole step */
        double soc_mid = s.soc - 0.5 * dt * soc_rate(p, o, i);
        double e_mid = p->cells * (ocv_from_soc(p->chem, soc_mid) + p->v_offset_v) - s.v1;
        double i_mid, v_mid;
        if (solve_current(l, s.t + 0.5 * dt, e_mid, r, &i_mid, &v_mid) != 0)
            i_mid = i;
        prev_soc = s.soc;
        prev_v = v;
        prev_t = s.t;
        s.soc -= dt * soc_rate(p, o, i_mid);
        if (p->r1_ohm > 0.0 && p->tau_s > 0.0) {
            double a = exp(-dt / p->tau_s);
            s.v1 = a * s.v1 + (1.0 - a) * p->r1_ohm * i_mid;
        }
        s.t += dt;
    }
    if (!stopped && out->binding == LIMIT_NONE) {
        out->t_safe_s = isfinite(out->t_empty_s) ? out->t_empty_s : o->t_max_s;
        out->binding = isfinite(out->t_empty_s) ? LIMIT_EMPTY : LIMIT_NONE;
    }
    return 0;
}

static int cmp_double_asc(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

int predict_monte_carlo(const struct predict_pack *p, const struct predict_load *l,
                        const struct predict_opts *o, const struct predict_spread *sp,
                        struct predict_mc *out)
{
    memset(out, 0, sizeof *out);
    int runs = sp->runs > 0 ? sp->runs : 400;
    double *t = malloc((size_t)runs * sizeof *t);
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    if (!t || !rng) {
        free(t);
        gsl_rng_free(rng);
        return -1;
    }
    gsl_rng_set(rng, sp->seed);
    int n = 0;
    for (int k = 0; k < runs; k++) {
        struct predict_pack q = *p;
        struct predict_load m = *l;
        /* draws truncated to stay physical */
        do
            q.capacity_ah = p->capacity_ah + gsl_ran_gaussian(rng, sp->capacity_sd_ah);
        while (q.capacity_ah <= 0.05 * p->capacity_ah);
        do
            q.r0_ohm = p->r0_ohm + gsl_ran_gaussian(rng, sp->r0_sd_ohm);
        while (q.r0_ohm <= 0.0 && p->r0_ohm > 0.0);
        q.v_offset_v = p->v_offset_v + gsl_ran_gaussian(rng, sp->v_offset_sd_v);
        double dl = gsl_ran_gaussian(rng, sp->load_sd);
        if (l->kind == LOAD_POWER)
            m.power_w = fmax(0.0, l->power_w + dl);
        else if (l->kind == LOAD_CURRENT)
            m.current_a = fmax(0.0, l->current_a + dl);
        struct predict_run r;
        if (predict_run(&q, &m, o, &r) != 0)
            continue;
        t[n++] = r.t_safe_s;
        out->binding_count[r.binding]++;
    }
    gsl_rng_free(rng);
    out->runs = n;
    if (n == 0) {
        free(t);
        return -1;
    }
    qsort(t, (size_t)n, sizeof *t, cmp_double_asc);
    out->t_median_s = gsl_stats_median_from_sorted_data(t, 1, (size_t)n);
    out->t_p05_s = gsl_stats_quantile_from_sorted_data(t, 1, (size_t)n, 0.05);
    out->t_p95_s = gsl_stats_quantile_from_sorted_data(t, 1, (size_t)n, 0.95);
    free(t);
    return 0;
}

double predict_voltage_offset(const struct chem_info *c, int cells, double capacity_mah,
                              double soc0_pct, double charge_mah, double energy_wh, double i_a,
                              double r_ohm)
{
    if (!c || cells <= 0 || !(capacity_mah > 0.0) || !(charge_mah > 0.0) || !(energy_wh > 0.0) ||
        !(i_a > 0.0) || !isfinite(soc0_pct) || !isfinite(r_ohm))
        return NAN;
    double soc1 = soc0_pct - 100.0 * charge_mah / capacity_mah;
    if (soc1 < -1.0 || soc0_pct - soc1 < 10.0)
        return NAN; /* more than the capacity, or too little to average over */
    soc1 = fmax(soc1, 0.0);
    /* the table's mean OCV over [soc1, soc0] (midpoint rule, 1 % steps or finer) */
    int steps = (int)ceil(soc0_pct - soc1) + 1;
    double sum = 0.0, h = (soc0_pct - soc1) / steps;
    for (int k = 0; k < steps; k++)
        sum += ocv_from_soc(c, soc1 + (k + 0.5) * h);
    double model_v = sum / steps - i_a * r_ohm / cells;
    double logged_v = 1000.0 * energy_wh / charge_mah / cells;
    return logged_v - model_v;
}

double predict_curve_offset(const struct chem_info *c, int cells, const double *coef, int degree,
                            double q_end_ah, double soc0_pct, double capacity_mah, double soc_lo,
                            double soc_hi)
{
    if (!c || cells <= 0 || degree < 0 || !(fabs(q_end_ah) > 0.0) || !(capacity_mah > 0.0) ||
        !isfinite(soc0_pct))
        return NAN;
    double flight_lo = soc0_pct - 100.0 * 1000.0 * q_end_ah / capacity_mah;
    double lo = fmax(soc_lo, fmin(flight_lo, soc0_pct));
    double hi = fmin(soc_hi, fmax(flight_lo, soc0_pct));
    if (!(hi - lo >= 10.0))
        return NAN;
    int steps = (int)ceil(hi - lo);
    double h = (hi - lo) / steps, sum = 0.0;
    for (int k = 0; k < steps; k++) {
        double s = lo + (k + 0.5) * h;
        double q_ah = (soc0_pct - s) / 100.0 * capacity_mah / 1000.0;
        double u = 2.0 * q_ah / q_end_ah - 1.0, p = 1.0, ocv = 0.0;
        for (int j = 0; j <= degree; j++) {
            ocv += coef[j] * p;
            p *= u;
        }
        sum += ocv / cells - ocv_from_soc(c, s);
    }
    return sum / steps;
}
