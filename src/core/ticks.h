/* ticks: round axis ticks for plots (groundwork for the plot work item).
 *
 * Owns nothing. Steps are 1, 2 or 5 times a power of ten ("nice numbers",
 * Heckbert, Graphics Gems, 1990), chosen as the smallest such step that
 * needs no more than max_ticks ticks to cover [lo, hi]. */
#ifndef PB_TICKS_H
#define PB_TICKS_H

struct ticks {
    double first, step; /* ticks at first + k step, k = 0..count-1 */
    int count;
    int decimals; /* digits after the point that the labels need */
};

/* Fills t for data in [lo, hi] with at most max_ticks ticks (taken as 3
 * when smaller: spanning a range that contains a tick needs three); the
 * ticks span the data (first <= lo, last >= hi). A zero-width range is
 * widened around its value. Returns 0, or -1 for non-finite input. */
int ticks_nice(double lo, double hi, int max_ticks, struct ticks *t);

/* How many labels of label_px width (plus gap_px between them) fit along
 * an axis of axis_px: the max_ticks for ticks_nice, at least 3. */
int ticks_fit(double axis_px, double label_px, double gap_px);

#endif
