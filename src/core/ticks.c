#include "ticks.h"

#include <math.h>

int ticks_fit(double axis_px, double label_px, double gap_px)
{
    int n = (int)floor((axis_px + gap_px) / (label_px + gap_px));
    return n < 3 ? 3 : n;
}

int ticks_nice(double lo, double hi, int max_ticks, struct ticks *t)
{
    if (!isfinite(lo) || !isfinite(hi))
        return -1;
    if (max_ticks < 3)
        max_ticks = 3; /* a range across a tick needs three to be spanned */
    if (hi < lo) {
        double x = lo;
        lo = hi;
        hi = x;
    }
    if (hi == lo) {
        double pad = lo != 0.0 ? fabs(lo) * 0.05 : 1.0;
        lo -= pad;
        hi += pad;
    }
    static const double mult[] = {1.0, 2.0, 5.0};
    double raw = (hi - lo) / (max_ticks - 1);
    double p = pow(10.0, floor(log10(raw)));
    /* the smallest 1/2/5 step whose ticks covering [lo, hi] number max_ticks or fewer */
    for (int e = 0; e < 6; e++, p *= 10.0) {
        for (int m = 0; m < 3; m++) {
            double step = mult[m] * p;
            double first = floor(lo / step) * step;
            double last = ceil(hi / step) * step;
            int count = (int)llround((last - first) / step) + 1;
            if (count <= max_ticks) {
                t->first = first;
                t->step = step;
                t->count = count;
                int d = (int)-floor(log10(step) + 1e-9);
                t->decimals = d > 0 ? d : 0;
                return 0;
            }
        }
    }
    return -1;
}
