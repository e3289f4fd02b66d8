/* packfit: does a flight log belong to the pack it is filed under?
 *
 * Pure: an analysis and the registered pack in, a verdict and its reason
 * out. Only clear contradictions count (a log that could be the pack's on
 * a bad day is not refused): another number of cell columns, pack voltages
 * no cell of the chemistry can reach (or stays far above), more charge
 * drawn than the pack can hold, or a capacity estimate clearly above its
 * rating. Owns nothing. */
#ifndef PB_PACKFIT_H
#define PB_PACKFIT_H

#include <stddef.h>

#include "analyze.h"
#include "ocv.h"

/* Highest per-cell voltage accepted, as a fraction above the chemistry's
 * highest plausible charged voltage (ocv max_v): chargers end within 1 %
 * of the limit (from memory), sensors read within 2 % (common practice). */
#define PACKFIT_OVER_MAX 0.03

/* Charge drawn accepted, as a multiple of the rated capacity: new packs
 * give up to about 110 % of their rating (from memory); beyond 125 % the
 * log is another, larger pack's. */
#define PACKFIT_CHARGE_RATIO 1.25

/* A capacity estimate whose 95 % interval lies wholly above this multiple
 * of the rating: another, larger pack's (a worn pack reads low, never 50 %
 * high). The low side is never refused: it is the evidence for retiring. */
#define PACKFIT_CAPACITY_RATIO 1.5

struct packfit_pack {
    int cells;
    const struct chem_info *chem;
    double capacity_mah;
};

/* Returns 0 when a (analysed with the pack's cells and chemistry) fits the
 * pack, else 1 with the reason in why (the first contradiction found,
 * with the numbers). */
int packfit_check(const struct analysis *a, const struct packfit_pack *p, char *why, size_t cap);

#endif
