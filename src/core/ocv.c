#include "ocv.h"

#include <string.h>
#include <strings.h>

/* LiPo (LiCoO2-type pouch, 4.20 V charged). Source: from memory, the
 * resting-voltage chart widely used in hobby and commercial multirotor
 * practice; 10-point steps with the usual knee below 10 %. */
static const double lipo_soc[] = {0,  5,  10, 15, 20, 25, 30, 35, 40, 45, 50,
                                  55, 60, 65, 70, 75, 80, 85, 90, 95, 100};
static const double lipo_ocv[] = {3.27, 3.61, 3.69, 3.71, 3.73, 3.75, 3.77, 3.79, 3.80, 3.82, 3.84,
                                  3.85, 3.87, 3.91, 3.95, 3.98, 4.02, 4.08, 4.11, 4.15, 4.20};

/* LiHV (high-voltage LiPo, 4.35 V charged). Source: from memory, the LiPo
 * curve lifted toward the 4.35 V charge limit as LiHV makers chart it. */
static const double lihv_soc[] = {0, 5, 10, 20, 30, 40, 50, 60, 70, 80, 90, 100};
static const double lihv_ocv[] = {3.30, 3.65, 3.72, 3.77, 3.81, 3.85,
                                  3.90, 3.96, 4.04, 4.13, 4.24, 4.35};

/* Li-ion NMC (cylindrical 18650/21700 cells, 4.20 V charged, 2.5-3.0 V
 * cut-off). Source: from memory, typical rested OCV of NMC cells. */
static const double nmc_soc[] = {0, 5, 10, 20, 30, 40, 50, 60, 70, 80, 90, 100};
static const double nmc_ocv[] = {3.00, 3.35, 3.45, 3.55, 3.61, 3.67,
                                 3.74, 3.81, 3.89, 3.98, 4.08, 4.20};

/* LiFePO4 (3.65 V charge limit). Source: from memory, typical rested OCV;
 * the plateau makes SoC from OCV weak between 20 and 90 %. */
static const double lfp_soc[] = {0, 5, 10, 20, 30, 40, 50, 60, 70, 80, 90, 100};
static const double lfp_ocv[] = {2.50, 2.90, 3.00, 3.20, 3.22, 3.25,
                                 3.26, 3.27, 3.30, 3.32, 3.35, 3.40};

#define N(a) (sizeof(a) / sizeof *(a))

/* Floors and full/empty thresholds: common practice. The LiPo pair
 * (4.15 V full, 3.75 V empty per cell) is the 2S 8.3 V / 7.5 V rule. */
static const struct chem_info chems[CHEM_COUNT] = {
    {CHEM_LIPO, "lipo", "LiPo", "from memory: common LiPo resting-voltage chart", N(lipo_soc),
     lipo_soc, lipo_ocv, 3.30, 4.15, 3.75, 2.90, 4.25},
    {CHEM_LIHV, "lihv", "LiHV", "from memory: LiHV (4.35 V) resting-voltage chart", N(lihv_soc),
     lihv_soc, lihv_ocv, 3.40, 4.30, 3.80, 3.00, 4.40},
    {CHEM_NMC, "nmc", "Li-ion NMC", "from memory: typical NMC cell rested OCV", N(nmc_soc), nmc_soc,
     nmc_ocv, 2.90, 4.15, 3.40, 2.50, 4.25},
    {CHEM_LFP, "lfp", "LiFePO4", "from memory: typical LiFePO4 rested OCV", N(lfp_soc), lfp_soc,
     lfp_ocv, 2.60, 3.40, 3.00, 2.00, 3.70},
};

const struct chem_info *ocv_chem(enum chemistry id)
{
    if ((int)id < 0 || id >= CHEM_COUNT)
        return NULL;
    return &chems[id];
}

const struct chem_info *ocv_chem_by_name(const char *name)
{
    for (int k = 0; k < CHEM_COUNT; k++)
        if (strcasecmp(chems[k].name, name) == 0)
            return &chems[k];
    return NULL;
}

static size_t segment(const double *x, size_t n, double v)
{
    size_t k = 0;
    while (k + 2 < n && v > x[k + 1])
        k++;
    return k;
}

double ocv_to_soc(const struct chem_info *c, double ocv_v, int *clamped)
{
    size_t n = c->npoints;
    int cl = 0;
    double soc;
    if (ocv_v <= c->ocv_v[0]) {
        soc = 0.0;
        cl = ocv_v < c->ocv_v[0];
    } else if (ocv_v >= c->ocv_v[n - 1]) {
        soc = 100.0;
        cl = ocv_v > c->ocv_v[n - 1];
    } else {
        size_t k = segment(c->ocv_v, n, ocv_v);
        double f = (ocv_v - c->ocv_v[k]) / (c->ocv_v[k + 1] - c->ocv_v[k]);
        soc = c->soc_pct[k] + f * (c->soc_pct[k + 1] - c->soc_pct[k]);
    }
    if (clamped)
        *clamped = cl;
    return soc;
}

double ocv_from_soc(const struct chem_info *c, double soc_pct)
{
    size_t n = c->npoints;
    if (soc_pct <= 0.0)
        return c->ocv_v[0];
    if (soc_pct >= 100.0)
        return c->ocv_v[n - 1];
    size_t k = segment(c->soc_pct, n, soc_pct);
    double f = (soc_pct - c->soc_pct[k]) / (c->soc_pct[k + 1] - c->soc_pct[k]);
    return c->ocv_v[k] + f * (c->ocv_v[k + 1] - c->ocv_v[k]);
}

double ocv_soc_slope(const struct chem_info *c, double ocv_v)
{
    size_t n = c->npoints;
    size_t k = segment(c->ocv_v, n, ocv_v);
    return (c->soc_pct[k + 1] - c->soc_pct[k]) / (c->ocv_v[k + 1] - c->ocv_v[k]);
}
