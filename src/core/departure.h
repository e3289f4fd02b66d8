/* departure: a flight that leaves its pack's own trend.
 *
 * Owns nothing (plain values in and out). Pure. A hard landing, a crash or
 * a hot day can damage a pack in one flight: its resistance jumps, its
 * cells drift apart at rest, its capacity drops. Each flight is compared
 * with the flights before it (up to DEPARTURE_HISTORY of them that are not
 * themselves unacknowledged departures): a robust straight line (GSL
 * bisquare) of each quantity against equivalent cycles, extrapolated to the
 * flight. Its residual is scaled by the combined standard deviation of the
 * history's scatter about the line (the fit's robust sigma), the line's own
 * uncertainty there and the flight's own interval (95 % half-width / 1.96)
 * as far as it is wider than the history's usual one (the scatter already
 * holds the usual measurement noise);
 * with m flights in the history the ratio is a Student t of m - 2 degrees
 * of freedom, put on the normal scale by its tail probability. A flight
 * whose residual reaches DEPARTURE_Z of those in the damaging direction
 * (IR or imbalance up, capacity down) departs. A recovery (capacity
 * up after a rest, resistance down) never flags. */
#ifndef PB_DEPARTURE_H
#define PB_DEPARTURE_H

#include <stddef.h>

#include "health.h"

/* One-sided normal tail 3.2e-5 (scipy.stats.norm.sf(4.0)): a season of a
 * thousand flights with three quantities each expects under 0.1 false flag
 * if the scatter were normal; the robust sigma keeps heavier tails from
 * inflating the scale. */
#define DEPARTURE_Z 4.0
#define DEPARTURE_HISTORY 20 /* flights before it that set its trend */
#define DEPARTURE_MIN 6      /* fewer with a value: that quantity is not checked */

enum departure_quantity { DEP_R0 = 0, DEP_CAPACITY, DEP_SPREAD, DEP_NQ };

struct departure {
    int flagged;                      /* the worst quantity reached DEPARTURE_Z */
    enum departure_quantity quantity; /* the worst one (largest z) */
    double value, expected;           /* R0 mOhm per cell, capacity % of rated, spread mV */
    double change_pct;                /* (value - expected) / expected x 100 */
    double z; /* the residual in standard deviations (damaging direction > 0) */
};

/* Checks every one of the n flights (oldest first) of a pack with cells
 * series cells and rated capacity: out[k] for flight k. acked (may be
 * NULL) marks departures the operator acknowledged: the trend starts
 * afresh from such a flight (its level is accepted; the flights after it
 * are checked once DEPARTURE_MIN of them have a value), while
 * unacknowledged ones stay out of the history so that a step is not
 * absorbed into the trend before anyone looks. Returns
 * how many flights depart, or -1 when out of memory. */
int departure_scan(const struct health_flight *f, size_t n, int cells, double rated_mah,
                   const int *acked, struct departure *out);

/* "IR" (internal resistance, R0), "capacity" or "cell imbalance". */
const char *departure_name(enum departure_quantity q);

/* "IR up 35 % against its trend (4.1 σ)" into buf (UTF-8 sigma). */
void departure_text(const struct departure *d, char *buf, size_t cap);

#endif
