/* ecm: the equivalent-circuit fit of one log's voltage.
 *
 *     V(t) = OCV(q) - R0 I(t) - R1 i1(t)
 *
 * q is the charge drawn, i1 the current through the RC branch (a first-order
 * lag of I with time constant tau; zero-order hold between samples).
 *
 * Owns nothing beyond one call (when a core is free, a second thread runs
 * the tau search, its grid and Newton's steps, while the static model is
 * fitted, and is joined before the call returns). The OCV term is local: the log is cut into
 * windows (at most ecm_window_s() long, none across a gap or a clock
 * joint) and in each window OCV is a straight line in q, so the falling OCV
 * of a discharge cannot leak into R; each window's line is projected out
 * before R is fitted (Frisch-Waugh-Lovell), and the degrees of freedom
 * they use are charged to the interval. Physical constraints: R0 > 0,
 * R1 >= 0, tau inside what the sampling and the windows can resolve; a
 * fit that breaks one of them is not reported. Robust reweighting never
 * downweights the samples either side of a current step: they carry the
 * information on R. Intervals allow for serially correlated residuals
 * (lag-1 autocorrelation: variance times (1 + rho) / (1 - rho)).
 *
 * Assumes: t_s strictly increasing, current positive when discharging,
 * q_ah[k] the charge drawn up to sample k. */
#ifndef PB_ECM_H
#define PB_ECM_H

#include <stddef.h>

#include "fit.h"
#include "pb_error.h"
#include "series.h"
#include "stage.h"

/* The RC branch's current (the lag of I) at the rows the robust fits
 * sample (every fit_sample_every(n)-th row), as the model fit made it at
 * tau_s: the trend's sampled rows take it from here instead of running the
 * lag up to each. Owned by the caller (room for n / every + 1 values); NAN
 * at rows the fit's walk did not reach, tau_s NAN when none was made. */
struct ecm_lag_rows {
    double *i1_a;
    size_t every;
    double tau_s;
};

struct ecm_opts {
    const double *y_v;  /* the voltage to fit: the pack's or one cell's */
    double dt_med_s;    /* median sample interval */
    double gap_s;       /* windows end at intervals longer than this */
    double step_a;      /* samples either side of a step this large keep full weight */
    double cutoff_v;    /* windows touching this voltage are left out (0 = none) */
    int robust;         /* Tukey bisquare reweighting */
    int try_rc;         /* also fit the RC branch (tau searched) */
    double tau_fixed_s; /* > 0: fit the RC branch at this tau only (no search) */
    size_t *work;       /* rows visited, summed (may be NULL) */
    int whole;          /* every pass in one walk, never cut in two (twin.h): for tests */
    int no_scout;       /* the tau search without its scout (ecm.c), every walk of every row:
                           for tests */
    int no_share;       /* the static fit ends beside the tau search, its pass over every
                           row not shared with the RC fit's (ecm_end; the same numbers):
                           for tests */
    struct ecm_lag_rows *lag_rows; /* filled at the chosen or fixed tau (may be NULL) */
    /* told as ecm_end's stages begin (may be NULL) */
    const struct stage_hook *stages;
};

struct ecm_result {
    /* R0 of the chosen model and its 95 % half-width; NAN with reason set
     * when it is not identified */
    double r0_mohm, r0_ci95_mohm;
    double r_static_mohm, r_static_ci95_mohm; /* the model without RC branch */
    double r1_mohm, r1_ci95_mohm, tau_s;      /* NAN unless the RC model was chosen */
    double tau_ci95_s; /* tau's 95 % half-width (profile curvature); NAN when tau was fixed */
    int rc;            /* the chosen model has the RC branch */
    double sigma_mv;   /* residual standard deviation */
    double rho;        /* lag-1 autocorrelation of the residuals */
    size_t downweighted;
    int iterations;
    size_t windows; /* windows that inform R */
    double window_s;
    const char *reason; /* why R0 is not reported; NULL when it is */
};

/* Window length for a log: 60 s, or 8 sample intervals when longer. */
double ecm_window_s(double dt_med_s);

/* Fits the model to s (its current must not be NULL): ecm_begin then
 * ecm_end. Fails only when out of memory. */
enum pb_code ecm_fit(const struct series *s, const double *q_ah, const struct ecm_opts *o,
                     struct ecm_result *out, struct pb_error *err);

/* The same fit in two halves, so the caller can work while the tau search
 * runs: ecm_begin cuts the windows and starts the search (in a second
 * thread when a core is free); NULL when out of memory. s, q_ah, o->y_v and
 * o->work must stay as they are until ecm_end, which fits, joins the
 * search, fills out and frees run (NULL: PB_ENOMEM, out untouched). */
struct ecm_run;
struct ecm_run *ecm_begin(const struct series *s, const double *q_ah, const struct ecm_opts *o);
enum pb_code ecm_end(struct ecm_run *run, struct ecm_result *out);

/* The OCV trend of the whole log with the resistance fixed: a polynomial of
 * the given degree in u = 2 q / q_end - 1 (the normalised charge, -1 at the
 * start, +1 at the end; u = 0 throughout when degree is 0) fitted to
 * V + R0 I + R1 i1. r1_ohm = 0 or tau_s <= 0: no RC branch. out->beta[0]
 * includes the reference voltage, so the polynomial is the OCV itself. */
enum pb_code ecm_ocv_trend(const struct series *s, const double *q_ah, double q_end_ah, int degree,
                           double r0_ohm, double r1_ohm, double tau_s, int robust,
                           const struct ecm_lag_rows *lag_rows, size_t *work,
                           struct fit_result *out, struct pb_error *err);

/* The trend's OCV at u (e.g. -1 for the start) and its standard error. */
void ecm_ocv_at(const struct fit_result *f, int degree, double u, double *v, double *se);

#endif
