/* coulomb: charge and energy by the trapezoid rule, and gaps in time.
 *
 * Owns nothing. Current and voltage are taken as linear between samples,
 * so charge is exact for piecewise-linear current and energy is the exact
 * integral of the product of two linear pieces; each interval is split where
 * the current crosses zero so discharge and regeneration are kept apart. */
#ifndef PB_COULOMB_H
#define PB_COULOMB_H

#include <stddef.h>

struct coulomb_result {
    double discharged_mah; /* charge out of the pack (current > 0) */
    double regen_mah;      /* charge into the pack (current < 0), positive */
    double discharged_wh;
    double regen_wh;
    size_t gaps; /* intervals longer than the gap threshold */
    double gap_total_s;
    double gap_longest_s;
    size_t gap_first_index; /* sample index that ends the first gap */
    double gap_charge_mah;  /* net charge bridged across gaps (included above) */
    size_t joints;          /* segment joints (clock restarts): not bridged, not counted */
};

/* Integrates n samples. gap_s: intervals longer than this are counted as
 * gaps (still bridged linearly, and their charge reported). */
void coulomb_count(const double *t_s, const double *v_v, const double *i_a, size_t n, double gap_s,
                   struct coulomb_result *out);

/* The same over a log kept as segments (series.h): seg_start[1..nseg-1]
 * start the segments after the first; the interval ending at each is a
 * joint of unknown length, so nothing is counted across it (the charge is
 * the sum over the segments) and it is not a gap either. nseg 0 or 1: one
 * segment, as coulomb_count. */
void coulomb_count_segments(const double *t_s, const double *v_v, const double *i_a, size_t n,
                            const size_t *seg_start, size_t nseg, double gap_s,
                            struct coulomb_result *out);

/* Net charge (Ah) of one interval, positive for discharge. */
static inline double coulomb_step_ah(double dt_s, double i0_a, double i1_a)
{
    return dt_s * 0.5 * (i0_a + i1_a) / 3600.0;
}

#endif
