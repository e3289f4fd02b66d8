/* life: where a pack's fading quantity will reach its retirement level,
 * with the knee in view.
 *
 * Owns nothing (plain values in, a plain struct out). Pure. Candidate fade
 * models are fitted to the pack's own history (equivalent cycles x, the
 * quantity y): a straight line, a line with a break point, an exponential
 * and a power law in cycles (the last two accelerate). Each is fitted by
 * robust least squares (bisquare, rlsq.h: GSL's method) with its shape (break point, rate,
 * power) taken from a fixed grid; the model is chosen by its held-out error
 * on the pack's own history (fitted to the earlier flights, scored on the
 * later ones: the median absolute error at two forecast origins); a curve
 * takes part only when its accelerating term differs from zero towards
 * the level (one-sided Wald test at 2.5 %, Bonferroni over its shape
 * grid), so a short noisy history projects no early end from noise. Its
 * crossing of the level is the middle of the range. Each end is where the
 * model, 1.96 standard deviations away, reaches the level; the deviation
 * joins the fit's own (its parameters' covariance, shape held) and the
 * held-out error beyond one flight's scatter as it grew per cycle ahead
 * (1.4826 x the median of (|error| - sigma)+ / cycles ahead; zero unless
 * more held-out flights miss by over sigma than a right model gives with
 * 5 % chance, a binomial sign test). The range
 * then spans every other model whose held-out errors exceed the chosen
 * one's by no more than their standard error (paired), so which model is
 * right is part of the uncertainty. */
#ifndef PB_LIFE_H
#define PB_LIFE_H

#include <stddef.h>

enum life_model { LIFE_NONE = 0, LIFE_LINE, LIFE_BREAK, LIFE_EXP, LIFE_POWER };

#define LIFE_MIN_POINTS 10 /* fewer known values: no projection (held-out needs 2 x 3) */

struct life_projection {
    enum life_model model; /* LIFE_NONE: too few points, or no fit */
    double shape;          /* break point (cycles), exponential rate or power; NAN for a line */
    double coef[3];        /* intercept, then the model's terms */
    double scale_x;        /* x is divided by this in the exponential and power terms */
    double holdout_err;    /* median absolute held-out error of the chosen model (y units) */
    double err_rate;       /* its forecast error growth per cycle ahead beyond one flight's
                              scatter (y units per cycle) */
    double cov[9];         /* covariance of coef (row-major 3 x 3), shape held */
    /* equivalent cycles at the crossing: early (what to plan for), middle
     * (the model's own), late; NAN when not within the horizon (all
     * three when the model itself does not reach the level) */
    double early, middle, late;
    int past; /* the chosen model is at or past the level at x_now already */
};

/* Projects n points (x increasing, NAN y skipped) towards level: falling
 * to it (rising == 0, capacity) or rising to it (rising != 0, resistance),
 * looking no further than horizon cycles beyond x_now. Returns 0, or -1
 * when out of memory; too few points leave out->model LIFE_NONE. */
int life_project(const double *x, const double *y, size_t n, double level, int rising, double x_now,
                 double horizon, struct life_projection *out);

/* The chosen model's value at x (NAN without a model). */
double life_value(const struct life_projection *p, double x);

/* "line", "line with a break", "exponential", "power law" or "none". */
const char *life_model_name(enum life_model m);

#endif
