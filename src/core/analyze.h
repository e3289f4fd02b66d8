/* analyze: one flight log's series in, the pack's facts out.
 *
 * Owns struct analysis (analysis_new/analysis_free), including its warning
 * list. Pure: no printing, no exit, no global state beyond GSL's error
 * handler, which the caller turns off once (gsl_set_error_handler_off).
 *
 * Quantities that cannot be estimated are NAN and carry a warning saying
 * why. Voltages are pack voltages unless the name says per cell. */
#ifndef PB_ANALYZE_H
#define PB_ANALYZE_H

#include <stddef.h>

#include "coulomb.h"
#include "logread.h"
#include "ocv.h"
#include "pb_error.h"
#include "series.h"
#include "stage.h"

#define OCV_POLY_MAX 4 /* OCV drift polynomial: up to cubic (4 coefficients) */

struct analyze_opts {
    int cells;           /* series cells; 0 = from cell columns or inferred */
    int chemistry;       /* enum chemistry, or -1 = not given (LiPo assumed) */
    double capacity_mah; /* rated capacity; 0 = not given */
    double floor_v;      /* loaded per-cell floor; 0 = chemistry default */
    double gap_s;        /* gap threshold; 0 = max(1 s, 5 x median interval) */
    double rest_a;       /* rest current threshold; 0 = max(0.05 A, 1 % of peak) */
    int plain_fit;       /* 1 = ordinary least squares, no reweighting */
    /* told as each stage begins (stage.h), for timing them; NULL: not told */
    const struct stage_hook *stages;
};

/* A value with the half-width of its 95 % interval (NAN when unknown). */
struct estimate {
    double value;
    double ci95;
};

struct pb_warning {
    char code[32];
    char message[320];
};

struct cell_detail {
    int index; /* 1-based */
    double voltage_min_v;
    double voltage_rest_v; /* mean at rest, NAN without rest samples */
    struct estimate r0_mohm;
};

struct analysis {
    size_t samples;
    double duration_s;
    int has_epoch;
    double start_epoch_s;

    const struct chem_info *chem;
    int chem_assumed;
    int cells;                /* 0 = unknown */
    const char *cells_source; /* "given", "cell columns", "inferred" */
    int cells_alternatives[4];
    int n_cells_alternatives;

    int has_current;
    struct coulomb_result cc;
    double charge_used_mah; /* net: discharged minus regenerated */
    double energy_used_wh;
    double current_max_a;
    double current_mean_a; /* net charge over duration */
    double power_max_w;
    double power_mean_w;
    double power_cruise_w; /* mean power while loaded (|I| above the rest threshold) */
    double voltage_min_v, voltage_max_v, voltage_start_v, voltage_end_v;
    double cell_min_loaded_v; /* voltage_min_v / cells */
    double floor_v;
    double time_below_floor_s;
    double c_rate_max, c_rate_mean;
    double median_dt_s;
    double gap_s;
    double rest_a;
    double rest_start_s, rest_end_s; /* length of rest at the start and end */
    size_t current_steps;

    double peak_a; /* largest |current| */
    double step_a; /* a current step at least this large is a resistance measurement */

    /* Internal resistance (IR), pack. The headline r0_mohm is the steps'
     * figure when the log has usable steps (r0_method "steps"), else the
     * model's R0 ("rc" or "static"); NAN with r0_reason when neither. It is
     * never <= 0. */
    struct estimate r0_mohm;
    const char *r0_method;
    struct estimate r_edge_mohm; /* median over current steps (edges.h) */
    size_t r_edge_steps;
    double r_edge_time_scale_s;    /* median length of the step intervals */
    const char *r_edge_reason;     /* why r_edge_mohm is NAN */
    struct estimate r0_model_mohm; /* the equivalent-circuit fit's R0 (ecm.h) */
    const char *r0_reason;         /* why the model's R0 is NAN */
    struct estimate r_static_mohm; /* from the model without RC branch */
    struct estimate r1_mohm;       /* RC branch, when fitted */
    struct estimate tau_s;
    double fit_sigma_mv;
    double fit_rho; /* lag-1 autocorrelation of the model's residuals */
    size_t fit_downweighted;
    int fit_iterations; /* reweighting passes of the chosen fit */
    size_t fit_windows;
    double fit_window_s;
    size_t fit_rows_visited;         /* rows visited by all fits: the work, for bounds tests */
    int ocv_degree;                  /* polynomial degree of the OCV trend */
    double ocv_coef_v[OCV_POLY_MAX]; /* OCV(u) = sum c_j u^j, u = 2 q/q_end - 1 */
    double q_end_ah;

    double ocv_start_v, ocv_end_v;
    double ocv_start_d_v, ocv_end_d_v; /* 95 % half-widths (pack), table error not included */
    /* "rest", "relaxed" (final rest's relaxation extrapolated), "fit"
     * (sag-corrected trend) or "loaded" (no resistance to correct with) */
    const char *ocv_start_method, *ocv_end_method;
    struct estimate soc_start_pct, soc_end_pct; /* ci95: the larger side of the range */
    double soc_start_lo_pct, soc_start_hi_pct;  /* the 95 % range itself (socest.h) */
    double soc_end_lo_pct, soc_end_hi_pct;
    const char *state_start, *state_end; /* "full", "partial", "empty" */
    /* Capacity: the headline is to_cutoff when the log is a discharge from
     * full to empty (capacity.h), else soc_swing; NAN when neither. */
    struct estimate capacity_mah;
    const char *capacity_method;
    struct estimate capacity_cutoff_mah;
    double capacity_cutoff_c_rate, capacity_cutoff_mean_a, capacity_cutoff_end_v_cell;
    struct estimate capacity_soc_mah;
    const char *capacity_soc_reason;

    int has_temp;
    double temp_min_c, temp_max_c;

    int ncells_detail;
    int cells_in_log; /* cells the log's cell columns stand for, a dropped one too (0: none) */
    struct cell_detail cell[PB_MAX_CELLS];
    /* imbalance (max - min cell) at rest before take-off, after landing, and
     * the one to judge by (after landing when there is such a rest) */
    double spread_rest_start_mv, spread_rest_end_mv;
    double spread_rest_mv, spread_load_mv;
    int weakest_cell; /* 1-based, 0 = none */

    size_t nwarnings, capwarnings;
    struct pb_warning *warnings;
};

/* New empty analysis; NULL when out of memory. */
struct analysis *analysis_new(void);

/* Frees a and its warnings; NULL is a no-op. */
void analysis_free(struct analysis *a);

/* Appends a warning (code and message copied, cut to their fields) to a's
 * list, for findings made beside the analysis (whole-log checks). */
void analysis_add_warning(struct analysis *a, const char *code, const char *message);

/* Analyses s (read with stats st, which supplies the repair counts and
 * their places for the warnings; name is the log's name for them). */
enum pb_code analyze_series(const struct series *s, const struct logread_stats *st,
                            const char *name, const struct analyze_opts *opts, struct analysis *out,
                            struct pb_error *err);

/* One sample with what the analysis says of it. */
struct sample_row {
    double t_s, v_v, i_a;
    double ocv_v;       /* sag-corrected open-circuit voltage (NAN without R0) */
    double soc_cc_pct;  /* SoC by coulomb counting from the start SoC and the capacity */
    double soc_ocv_pct; /* SoC read from ocv_v (or the loaded voltage) in the table */
};

/* Calls emit for every sample of s in order, with the sag-corrected OCV
 * (V + R0 I, plus the RC branch's voltage when it was fitted) and both SoC
 * series. Capacity for counting: the estimate, else rated_mah, else none. */
void analyze_rows(const struct series *s, const struct analysis *a, double rated_mah,
                  void (*emit)(void *ctx, const struct sample_row *row), void *ctx);

#endif
