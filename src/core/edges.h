/* edges: internal resistance from current steps, the way a tester measures
 * DC internal resistance (IEC 61960-3's two-level method, HPPC pulses),
 * applied to flight data.
 *
 * Owns nothing beyond one call. A step is one sample interval, not longer
 * than the gap threshold, in which the current changes by at least the step
 * threshold: 0.2 It (It = rated capacity / 1 h, IEC 61434) when the capacity
 * is known, else 20 % of the peak |current|, never below 0.1 A. Its
 * resistance is -dV/dI across that one interval. The polarisation that grew
 * within the interval is mostly taken out where the next interval allows:
 * the voltage after the step is carried back to the middle of the step
 * interval along the next interval's slope (when that interval holds the
 * current and is half to twice as long); the interval reported covers what
 * that changed. The step interval is the time scale of the figure and is
 * reported with it.
 *
 * Assumes: t_s strictly increasing, current positive when discharging,
 * voltages of the pack (or one cell). Steps with a voltage at or below the
 * cut-off on either side, or whose lighter-loaded side, sag-corrected with
 * the steps' median resistance, reads below EDGES_EMPTY_SOC_PCT on the
 * chemistry's table, are left out:
 * near empty the resistance rises steeply and would not compare with the
 * rest (common practice: DC-IR is quoted away from the discharge end). */
#ifndef PB_EDGES_H
#define PB_EDGES_H

#include <stddef.h>

#include "ocv.h"
#include "series.h"

#define EDGES_EMPTY_SOC_PCT 10.0

struct edges_opts {
    double rated_mah;             /* 0 = unknown */
    double cutoff_v;              /* pack cut-off voltage: steps touching it are left out */
    double gap_s;                 /* intervals longer than this are not steps */
    double peak_a;                /* largest |current| of the log */
    const struct series *series;  /* its clock segments: no step across a joint (may be NULL) */
    const struct chem_info *chem; /* with cells: the near-empty test (NULL: none) */
    int cells;
};

struct edges_result {
    size_t steps;        /* steps used */
    size_t left_out;     /* steps near the cut-off or across gaps, not used */
    size_t extrapolated; /* steps whose after-voltage was carried back */
    double step_a;       /* the threshold used */
    double r_mohm;       /* median of the steps' resistances; NAN without steps */
    double ci95_mohm;    /* half-width of its 95 % interval (see edges.c) */
    double time_scale_s; /* median length of the step intervals */
    double noise_mv;     /* voltage noise estimated from steady samples */
    const char *reason;  /* why r_mohm is NAN, else NULL */
};

/* The step threshold edges_estimate uses (see above): 0.2 It, else 20 % of
 * the peak |current|, never below 0.1 A. */
double edges_step_a(double rated_mah, double peak_a);

/* Noise of one sample of y (a voltage, or the current itself) from second
 * differences where the current i holds steady (no change of 5 % of step_a):
 * 1.4826 MAD / sqrt(6) for white noise, floored at the logger's resolution
 * (the smallest step of y seen there) / sqrt(12). NAN when it cannot be told. */
double edges_noise(const double *y, const double *i, size_t n, double step_a);

/* Finds the steps in n samples and estimates the resistance. */
void edges_estimate(const double *t_s, const double *v_v, const double *i_a, size_t n,
                    const struct edges_opts *o, struct edges_result *out);

#endif
