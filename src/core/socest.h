/* socest: open-circuit voltage at the ends of a log and the state of charge
 * it gives, with the uncertainty carried in volts.
 *
 * Owns nothing beyond one call. A table is a typical curve, not this pack's:
 * a cell's rested voltage at a given SoC differs from it by up to
 * SOCEST_TABLE_V (95 %, per cell). A voltage read after a short rest has not
 * relaxed: SOCEST_RELAX_V(rest) is the allowance for that, unless the
 * relaxation is fitted and extrapolated. A sag-corrected loaded voltage
 * carries the resistance's error times the current and the polarisation the
 * model may miss (SOCEST_LOADED_V). The SoC interval is the table's image
 * of [V - d, V + d], d the root sum of squares of these; the half-width
 * reported is the larger side, so an interval near full or empty is not
 * understated by the clamp at 0 or 100 %. A table's top point is the charge
 * voltage, which a full cell leaves as it rests, so the interval reaches
 * 100 % whenever V + d reaches the chemistry's full-at-rest level. */
#ifndef PB_SOCEST_H
#define PB_SOCEST_H

#include <stddef.h>

#include "ocv.h"

/* From memory: rested OCV of cells of one chemistry family at one SoC
 * spreads over a few tens of mV between makes and with age. */
#define SOCEST_TABLE_V 0.030
/* From memory: a loaded voltage corrected by R0 (and an RC branch) still
 * misses slow polarisation of the order of tens of mV. */
#define SOCEST_LOADED_V 0.050

/* Relaxation allowance (V per cell, 95 %) of a voltage read rest_s seconds
 * after the load stopped. From memory: Li-ion cells relax by tens of mV in
 * the first minute, about 10 mV over the next ten, a few mV after half an
 * hour. */
double socest_relax_v(double rest_s);

struct soc_value {
    double soc_pct;  /* the table's SoC at the voltage */
    double ci95_pct; /* larger side of the image of the voltage interval */
    double lo_pct, hi_pct;
    int clamped; /* the voltage lies outside the table */
};

/* SoC of a per-cell OCV whose 95 % half-width is d_v (per cell), the table
 * error included here. */
struct soc_value socest_soc(const struct chem_info *c, double ocv_cell_v, double d_v);

/* Relaxation at the end of a log: fits v(t) = v_inf + A exp(-t / tau) to the
 * rest samples [k0, n) (tau on a log grid, the rest linear). Returns the
 * extrapolated rested voltage with its 95 % half-width in *d_v, or NAN when
 * the rest is too short or the fit does not show a relaxation; then the
 * caller reads the last samples with socest_relax_v(). */
double socest_relaxed_v(const double *t_s, const double *v_v, size_t k0, size_t n, double *d_v);

#endif
