/* ocv: per-chemistry open-circuit-voltage tables and per-cell limits.
 *
 * Owns static, read-only tables (no state). OCV is per cell, in volts, at
 * rest and room temperature; SoC in percent. Each table names its source:
 * these are typical curves, not a given pack's, so SoC read from them
 * carries an allowance (OCV_TABLE_SOC_ERR_PCT) on top of the fit error. */
#ifndef PB_OCV_H
#define PB_OCV_H

#include <stddef.h>

/* Assumed error of a typical OCV table against a real pack, in SoC points
 * (from memory: typical spread between packs of one chemistry). */
#define OCV_TABLE_SOC_ERR_PCT 3.0

enum chemistry { CHEM_LIPO = 0, CHEM_LIHV, CHEM_NMC, CHEM_LFP, CHEM_COUNT };

struct chem_info {
    enum chemistry id;
    const char *name;   /* option spelling: lipo, lihv, nmc, lfp */
    const char *label;  /* human name */
    const char *source; /* where the table comes from */
    size_t npoints;
    const double *soc_pct; /* ascending, 0..100 */
    const double *ocv_v;   /* per cell, ascending */
    double floor_v;        /* default loaded per-cell floor (common practice) */
    double full_rest_v;    /* rest voltage at or above which a cell counts as full */
    double empty_rest_v;   /* rest voltage at or below which it counts as empty */
    double min_loaded_v;   /* lowest plausible loaded cell voltage, for cell count */
    double max_v;          /* highest plausible cell voltage (charged) */
};

/* Table for a chemistry; NULL for an unknown id. */
const struct chem_info *ocv_chem(enum chemistry id);

/* Chemistry by option name, in any case (LiPo, LIPO, lipo); NULL when unknown. */
const struct chem_info *ocv_chem_by_name(const char *name);

/* SoC (%) for a per-cell OCV, clamped to 0..100; *clamped set when the
 * voltage lies outside the table (may be NULL). */
double ocv_to_soc(const struct chem_info *c, double ocv_v, int *clamped);

/* Per-cell OCV for a SoC (%), clamped to 0..100. */
double ocv_from_soc(const struct chem_info *c, double soc_pct);

/* dSoC/dOCV (% per volt) at a per-cell OCV, from the table segment. */
double ocv_soc_slope(const struct chem_info *c, double ocv_v);

#endif
