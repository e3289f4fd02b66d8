/* predict: how long a pack can fly a load before a landing limit.
 *
 * Owns nothing; pure simulation. The pack is its chemistry's OCV table
 * (per cell, times the series cells) over SoC, a capacity, a series
 * resistance R0 (temperature-corrected by the Arrhenius form), and an
 * optional RC branch (R1, tau). The load is constant power (the current
 * solved from P = I (E - I R) at each step, E = OCV - V_RC), constant
 * current, or a power profile repeated. SoC is integrated by the midpoint
 * rule with limit crossings interpolated within the step. */
#ifndef PB_PREDICT_H
#define PB_PREDICT_H

#include <stddef.h>

#include "ocv.h"

#define GAS_CONSTANT_J_MOL_K 8.314462618 /* CODATA 2018 */

struct predict_pack {
    const struct chem_info *chem;
    int cells;
    double capacity_ah;
    double r0_ohm;        /* pack R0 at t_ref_c */
    double r1_ohm, tau_s; /* RC branch; r1_ohm = 0 for none */
    double t_ref_c;       /* temperature R0 was measured at */
    double v_offset_v;    /* per cell, added to the table's OCV: the pack's own
                           * loaded voltage against the model (predict_voltage_offset) */
};

enum load_kind { LOAD_POWER = 0, LOAD_CURRENT, LOAD_PROFILE };

struct predict_load {
    enum load_kind kind;
    double power_w;         /* LOAD_POWER */
    double current_a;       /* LOAD_CURRENT */
    const double *prof_t_s; /* LOAD_PROFILE: times (ascending, from 0) ... */
    const double *prof_w;   /* ... and power at each, held until the next; repeated */
    size_t prof_n;
    double prof_period_s; /* length of one repetition */
};

struct predict_opts {
    double soc0_pct;     /* start SoC */
    double reserve_pct;  /* landing reserve */
    double floor_v;      /* loaded per-cell floor */
    double temp_c;       /* pack temperature; NAN = t_ref_c */
    double ea_j_mol;     /* activation energy for R(T) */
    double dt_s;         /* step */
    double t_max_s;      /* give up after this */
    double stop_after_s; /* > 0: also report the state at this time */
    double peukert_k;    /* > 0: Peukert exponent (rated-capacity form) */
    double peukert_h;    /* rated discharge time in hours for Peukert */
};

enum predict_limit { LIMIT_NONE = 0, LIMIT_RESERVE, LIMIT_FLOOR, LIMIT_COLLAPSE, LIMIT_EMPTY };

struct predict_run {
    double t_safe_s; /* first of the limits */
    enum predict_limit binding;
    double soc_at_stop_pct, v_at_stop_v, i_at_stop_a;
    double t_reserve_s, t_floor_s, t_collapse_s, t_empty_s; /* NAN when not reached */
    double soc_after_pct, v_after_v;                        /* state at stop_after_s, when asked */
};

/* The landing reserve by default, % SoC (common practice); a whole number so
 * help texts can print it (PREDICT_STR). */
#define PREDICT_RESERVE_PCT 30
#define PREDICT_STR_(x) #x
#define PREDICT_STR(x) PREDICT_STR_(x)
/* The simulator's horizon (predict_opts_default's t_max_s) and the most
 * Monte Carlo runs the command asks for. */
#define PREDICT_HORIZON_S 21600.0
#define PREDICT_RUNS_MAX 5000

void predict_opts_default(struct predict_opts *o);

/* R0 scaled to temp_c by R(T) = Rref exp(Ea/R (1/T - 1/Tref)). */
double predict_r_at(double r_ref_ohm, double t_ref_c, double temp_c, double ea_j_mol);

/* One deterministic run. Returns 0, or -1 for a load or pack it cannot
 * simulate (no capacity, negative power, empty profile). */
int predict_run(const struct predict_pack *p, const struct predict_load *l,
                const struct predict_opts *o, struct predict_run *out);

/* Uncertainty by Monte Carlo: capacity, R0 and the load drawn from normal
 * distributions with these standard deviations (truncated positive). */
struct predict_spread {
    double capacity_sd_ah, r0_sd_ohm, load_sd; /* load_sd in W or A as the load */
    double v_offset_sd_v;                      /* per cell */
    int runs;
    unsigned long seed;
};

struct predict_mc {
    int runs;
    double t_median_s, t_p05_s, t_p95_s;
    int binding_count[5]; /* runs per limit */
};

int predict_monte_carlo(const struct predict_pack *p, const struct predict_load *l,
                        const struct predict_opts *o, const struct predict_spread *sp,
                        struct predict_mc *out);

const char *predict_limit_name(enum predict_limit l);

/* How far a logged flight's mean loaded voltage sat from the model's, per
 * cell: the flight drew charge_mah for energy_wh (mean loaded voltage
 * energy / charge) at mean current i_a, starting at soc0_pct, so by counting
 * its SoC fell by 100 charge / capacity; the model's mean loaded voltage over
 * that span is the table's mean OCV there minus i (R0 + R1) (at a steady load
 * the RC branch adds its full R1). The difference holds what a generic table
 * and a short-time resistance miss: this cell's own curve and the slow
 * polarisation of a long load. NAN when the flight cannot tell. */
/* The same from a flight's sag-corrected OCV trend (analyze's fit.ocv_coef_v:
 * OCV(u) = sum c_j u^j, u = 2 q / q_end - 1, pack volts), over the SoC span
 * [soc_lo, soc_hi] that a prediction crosses, where the flight covered it
 * (by counting from soc0_pct with capacity_mah): the mean of trend / cells
 * minus the table, per cell, on 1 % steps. NAN when the flight covered less
 * than 10 points of the span. */
double predict_curve_offset(const struct chem_info *c, int cells, const double *coef, int degree,
                            double q_end_ah, double soc0_pct, double capacity_mah, double soc_lo,
                            double soc_hi);

double predict_voltage_offset(const struct chem_info *c, int cells, double capacity_mah,
                              double soc0_pct, double charge_mah, double energy_wh, double i_a,
                              double r_ohm);

/* What a prediction starts from: the pack and the load, with spreads. */
struct predict_inputs {
    const struct chem_info *chem;
    int cells;
    double rated_mah;
    double capacity_mah, capacity_sd_mah;
    int capacity_assumed; /* no estimate: rated capacity, 5 % spread */
    double r0_mohm, r0_sd_mohm;
    double r1_mohm, tau_s;            /* NAN without an RC branch */
    double power_w, power_sd_w;       /* cruise power, NAN when unknown */
    double v_offset_v, v_offset_sd_v; /* per cell; 0 and the table's allowance when unknown */
    char source[200];
};

#endif
