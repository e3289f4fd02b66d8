#include "packfit.h"

#include <math.h>
#include <stdio.h>

int packfit_check(const struct analysis *a, const struct packfit_pack *p, char *why, size_t cap)
{
    /* a dropped cell column still stands for a cell of the pack */
    int logged = a->cells_in_log > a->ncells_detail ? a->cells_in_log : a->ncells_detail;
    if (logged > 0 && logged != p->cells) {
        snprintf(why, cap, "the log has %d cell columns and the pack is %dS", logged, p->cells);
        return 1;
    }
    if (p->cells > 0 && p->chem && isfinite(a->voltage_max_v)) {
        double vmax_cell = a->voltage_max_v / p->cells;
        double hi = p->chem->max_v * (1.0 + PACKFIT_OVER_MAX);
        if (vmax_cell > hi) {
            snprintf(why, cap,
                     "the pack voltage reaches %.2f V, %.2f V per cell for %dS, above the %.2f V "
                     "a %s cell can hold (another cell count or chemistry?)",
                     a->voltage_max_v, vmax_cell, p->cells, p->chem->max_v, p->chem->label);
            return 1;
        }
        /* even the highest reading lies below the lowest loaded voltage a
         * cell of this chemistry gives: too few cells in the log */
        if (vmax_cell < p->chem->min_loaded_v) {
            snprintf(why, cap,
                     "the pack voltage never exceeds %.2f V, %.2f V per cell for %dS, below the "
                     "%.2f V a loaded %s cell gives (another cell count or chemistry?)",
                     a->voltage_max_v, vmax_cell, p->cells, p->chem->min_loaded_v, p->chem->label);
            return 1;
        }
    }
    if (p->capacity_mah > 0 && isfinite(a->charge_used_mah) &&
        a->charge_used_mah > PACKFIT_CHARGE_RATIO * p->capacity_mah) {
        snprintf(why, cap,
                 "the flight drew %.0f mAh, more than %.0f %% of the pack's rated %.0f mAh "
                 "(a larger pack's log?)",
                 a->charge_used_mah, 100.0 * PACKFIT_CHARGE_RATIO, p->capacity_mah);
        return 1;
    }
    double cap_lo = a->capacity_mah.value - a->capacity_mah.ci95;
    if (p->capacity_mah > 0 && isfinite(cap_lo) &&
        cap_lo > PACKFIT_CAPACITY_RATIO * p->capacity_mah) {
        snprintf(why, cap,
                 "its capacity estimate %.0f +/- %.0f mAh is over %.0f %% of the pack's rated "
                 "%.0f mAh (a larger pack's log?)",
                 a->capacity_mah.value, a->capacity_mah.ci95, 100.0 * PACKFIT_CAPACITY_RATIO,
                 p->capacity_mah);
        return 1;
    }
    return 0;
}
