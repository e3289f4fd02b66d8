/* capacity: the pack's capacity from one log.
 *
 * Owns nothing beyond one call. Two ways, the first preferred:
 *
 * To the cut-off. A log (or its last part) that runs from a rest at full
 * charge down to the end of discharge under load is a capacity measurement
 * at that rate: the charge delivered from full to the end-of-discharge
 * voltage is the standard definition of capacity at a rate (IEC 61960-3
 * rated capacity: discharge from full at a stated current to the end-of-
 * discharge voltage). "At full": the rest's SoC interval reaches 100 %.
 * "End of discharge": the last loaded sample's sag-corrected SoC interval
 * reaches 0 %. Only short regeneration pulses may lie between (the charge
 * drawn never falls back by more than CAPACITY_RECHARGE_FRAC of the total).
 * Its interval carries the charge bridged across gaps and half of the last
 * interval's charge (the cut-off was crossed within it).
 *
 * From the SoC swing. Q / (SoC start - SoC end), with both SoC intervals
 * propagated; needs a swing of at least CAPACITY_MIN_SWING_PCT points in the
 * direction of the charge drawn. The caller decides which ends are good
 * enough to use (see socest.h). */
#ifndef PB_CAPACITY_H
#define PB_CAPACITY_H

#include <stddef.h>

#include "ocv.h"
#include "series.h"

#define CAPACITY_MIN_SWING_PCT 15.0
#define CAPACITY_RECHARGE_FRAC 0.02

struct cutoff_opts {
    const struct chem_info *chem;
    int cells;
    double rest_a;    /* |current| at or below this is rest */
    double r_ohm;     /* pack resistance for the sag correction (0 = none) */
    double r_ci_ohm;  /* its 95 % half-width */
    double gap_s;     /* intervals longer than this are gaps */
    double rated_mah; /* for the C-rate; 0 = unknown */
};

struct cutoff_result {
    int found;
    double q_mah, ci95_mah; /* charge from the full rest to the end of discharge */
    double c_rate;          /* mean loaded current / rated (NAN without rated) */
    double mean_a;          /* mean loaded current */
    double end_v_cell;      /* loaded cell voltage at the end of discharge */
    size_t k_start, k_end;  /* the last rest sample at full, the last loaded sample */
    const char *why_not;    /* when not found */
};

/* Looks for a discharge from full to the end of discharge in s; q_ah[k] is
 * the charge drawn up to sample k. */
void capacity_to_cutoff(const struct series *s, const double *q_ah, const struct cutoff_opts *o,
                        struct cutoff_result *out);

#endif
