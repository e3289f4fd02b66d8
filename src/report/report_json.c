#include <jansson.h>
#include <math.h>
#include <string.h>

#include "../core/isotime.h"
#include "jsonout.h"
#include "report.h"

/* A number, or null when it is not known. */
static json_t *est(struct estimate e)
{
    return json_pack("{s:o, s:o}", "value", jout_num(e.value), "ci95",
                     isfinite(e.value) ? jout_num(e.ci95) : json_null());
}

static json_t *input_obj(const struct report_input *in)
{
    const struct logread_stats *st = in->stats;
    size_t dropped = logread_dropped(st);
    char delim[2] = {st->delimiter, 0}, dec[2] = {st->decimal, 0};
    const char *tf = st->time_is_iso     ? "iso8601"
                     : st->time_is_epoch ? "unix"
                     : st->time_is_clock ? (st->date_column ? "date and clock" : "clock")
                                         : "relative";
    json_t *ignored = json_array();
    for (const char *p = st->ignored_names; *p;) {
        const char *end = strstr(p, ", ");
        size_t len = end ? (size_t)(end - p) : strlen(p);
        json_array_append_new(ignored, json_stringn(p, len));
        p += len + (end ? 2 : 0);
    }
    json_t *o = json_pack(
        "{s:s, s:s, s:b, s:I, s:I, s:I, s:I, s:I, s:I, s:s, s:s, s:b, s:b}", "delimiter",
        strcmp(delim, "\t") == 0 ? "tab" : delim, "decimal", dec, "header", st->has_header,
        "header_line", (json_int_t)st->header_line, "lines", (json_int_t)st->lines, "records",
        (json_int_t)st->records, "kept", (json_int_t)st->kept, "dropped", (json_int_t)dropped,
        "repaired", (json_int_t)st->temp_repaired.count, "time_format", tf, "current_sign",
        st->sign_flipped ? "flipped (logged discharge-negative)" : "as logged", "current_from_adc",
        st->current_is_raw, "voltage_from_cells", st->voltage_from_cells);
    json_object_set_new(o, "ignored_columns", ignored);
    json_t *drop = json_array();
    for (int k = 0; k < st->ncells_dropped; k++) {
        const struct logread_cell_drop *d = &st->cell_dropped[k];
        jout_append(drop, json_pack("{s:i, s:o, s:I, s:I, s:b}", "cell", d->cell, "column",
                                    d->column ? json_integer(d->column) : json_null(), "unreadable",
                                    (json_int_t)d->unreadable, "read", (json_int_t)d->read,
                                    "unused", d->above_pack));
    }
    json_object_set_new(o, "cells_dropped", drop);
    return o;
}

static json_t *analysis_obj(const struct analysis *a, const struct report_input *in)
{
    char when[40];
    json_t *o = json_object();
    jout_set(o, "file", jout_str(in->name));
    jout_set(o, "samples", json_integer((json_int_t)a->samples));
    jout_set(o, "duration_s", jout_num(a->duration_s));
    jout_set(o, "start_time",
             a->has_epoch ? json_string(isotime_format(a->start_epoch_s, when, sizeof when))
                          : json_null());
    jout_set(o, "cells", a->cells > 0 ? json_integer(a->cells) : json_null());
    jout_set(o, "cells_source", json_string(a->cells_source));
    jout_set(o, "chemistry", json_string(a->chem->name));
    jout_set(o, "chemistry_assumed", json_boolean(a->chem_assumed));
    jout_set(o, "rated_capacity_mah",
             in->opts->capacity_mah > 0 ? json_real(in->opts->capacity_mah) : json_null());
    jout_set(o, "charge_used_mah", jout_num(a->charge_used_mah));
    jout_set(o, "charge_discharged_mah", jout_num(a->has_current ? a->cc.discharged_mah : NAN));
    jout_set(o, "charge_regen_mah", jout_num(a->has_current ? a->cc.regen_mah : NAN));
    jout_set(o, "energy_used_wh", jout_num(a->energy_used_wh));
    jout_set(o, "energy_discharged_wh", jout_num(a->has_current ? a->cc.discharged_wh : NAN));
    jout_set(o, "energy_regen_wh", jout_num(a->has_current ? a->cc.regen_wh : NAN));
    jout_set(o, "current_max_a", jout_num(a->current_max_a));
    jout_set(o, "current_mean_a", jout_num(a->current_mean_a));
    jout_set(o, "c_rate_max", jout_num(a->c_rate_max));
    jout_set(o, "c_rate_mean", jout_num(a->c_rate_mean));
    jout_set(o, "power_max_w", jout_num(a->power_max_w));
    jout_set(o, "power_mean_w", jout_num(a->power_mean_w));
    jout_set(o, "power_cruise_w", jout_num(a->power_cruise_w));
    jout_set(o, "voltage_min_v", jout_num(a->voltage_min_v));
    jout_set(o, "voltage_max_v", jout_num(a->voltage_max_v));
    jout_set(o, "voltage_start_v", jout_num(a->voltage_start_v));
    jout_set(o, "voltage_end_v", jout_num(a->voltage_end_v));
    jout_set(o, "cell_voltage_min_v", jout_num(a->cell_min_loaded_v));
    jout_set(o, "floor_v_per_cell", jout_num(a->floor_v));
    jout_set(o, "time_below_floor_s", jout_num(a->cells > 0 ? a->time_below_floor_s : NAN));
    jout_set(o, "r0_mohm", est(a->r0_mohm));
    jout_set(o, "r0_method", jout_str(a->r0_method));
    jout_set(o, "r0_mohm_per_cell", jout_num(a->cells > 0 ? a->r0_mohm.value / a->cells : NAN));
    jout_set(o, "step_a", jout_num(a->has_current ? a->step_a : NAN));
    jout_set(o, "r0_reason", jout_str(isfinite(a->r0_mohm.value) ? NULL : a->r0_reason));
    json_t *edge = json_null();
    if (isfinite(a->r_edge_mohm.value))
        edge = json_pack("{s:o, s:o, s:I, s:o}", "value", jout_num(a->r_edge_mohm.value), "ci95",
                         jout_num(a->r_edge_mohm.ci95), "edges", (json_int_t)a->r_edge_steps,
                         "time_scale_s", jout_num(a->r_edge_time_scale_s));
    jout_set(o, "r_edge_mohm", edge);
    jout_set(o, "r_edge_reason", jout_str(a->r_edge_reason));
    jout_set(o, "r0_model_mohm", est(a->r0_model_mohm));
    jout_set(o, "r0_model_reason", jout_str(a->r0_reason));
    jout_set(o, "r_static_mohm", est(a->r_static_mohm));
    jout_set(o, "r1_mohm", est(a->r1_mohm));
    jout_set(o, "tau_s", jout_num(a->tau_s.value));
    jout_set(o, "tau_ci95_s", jout_num(a->tau_s.ci95));
    jout_set(o, "ocv_start_v", jout_num(a->ocv_start_v));
    jout_set(o, "ocv_end_v", jout_num(a->ocv_end_v));
    jout_set(o, "ocv_start_method", jout_str(a->ocv_start_method));
    jout_set(o, "ocv_end_method", jout_str(a->ocv_end_method));
    jout_set(o, "soc_start_pct", jout_num(a->soc_start_pct.value));
    jout_set(o, "soc_start_ci95", jout_num(a->soc_start_pct.ci95));
    jout_set(o, "soc_end_pct", jout_num(a->soc_end_pct.value));
    jout_set(o, "soc_end_ci95", jout_num(a->soc_end_pct.ci95));
    json_object_set_new(
        o, "soc_start_range_pct",
        json_pack("[o, o]", jout_num(a->soc_start_lo_pct), jout_num(a->soc_start_hi_pct)));
    json_object_set_new(
        o, "soc_end_range_pct",
        json_pack("[o, o]", jout_num(a->soc_end_lo_pct), jout_num(a->soc_end_hi_pct)));
    jout_set(o, "state_start", jout_str(a->state_start));
    jout_set(o, "state_end", jout_str(a->state_end));
    jout_set(o, "capacity_est_mah", est(a->capacity_mah));
    jout_set(o, "capacity_method", jout_str(a->capacity_method));
    json_t *cut = json_null();
    if (isfinite(a->capacity_cutoff_mah.value))
        cut = json_pack(
            "{s:o, s:o, s:o, s:o, s:o}", "value", jout_num(a->capacity_cutoff_mah.value), "ci95",
            jout_num(a->capacity_cutoff_mah.ci95), "c_rate", jout_num(a->capacity_cutoff_c_rate),
            "mean_current_a", jout_num(a->capacity_cutoff_mean_a), "end_v_per_cell",
            jout_num(a->capacity_cutoff_end_v_cell));
    jout_set(o, "capacity_to_cutoff_mah", cut);
    jout_set(o, "capacity_soc_mah", est(a->capacity_soc_mah));
    jout_set(o, "rest_start_s", jout_num(a->has_current ? a->rest_start_s : NAN));
    jout_set(o, "rest_end_s", jout_num(a->has_current ? a->rest_end_s : NAN));
    jout_set(o, "temperature_min_c", jout_num(a->temp_min_c));
    jout_set(o, "temperature_max_c", jout_num(a->temp_max_c));
    jout_set(o, "gaps",
             json_pack("{s:I, s:o, s:o, s:o, s:o}", "count", (json_int_t)a->cc.gaps, "threshold_s",
                       jout_num(a->gap_s), "total_s", jout_num(a->cc.gap_total_s), "longest_s",
                       jout_num(a->cc.gap_longest_s), "charge_bridged_mah",
                       jout_num(a->has_current ? a->cc.gap_charge_mah : NAN)));
    json_t *coef = json_array();
    for (int j = 0; a->has_current && j <= a->ocv_degree && j < OCV_POLY_MAX; j++)
        jout_append(coef, jout_num(a->ocv_coef_v[j]));
    json_object_set_new(
        o, "fit",
        json_pack("{s:s, s:o, s:o, s:I, s:o, s:I, s:i, s:i, s:o, s:o, s:o, s:I, s:I}", "method",
                  in->plain_fit ? "ols" : "robust", "sigma_mv",
                  jout_num(a->has_current ? a->fit_sigma_mv : NAN), "residual_lag1_corr",
                  jout_num(a->fit_rho), "windows", (json_int_t)a->fit_windows, "window_s",
                  jout_num(a->fit_window_s), "downweighted", (json_int_t)a->fit_downweighted,
                  "iterations", a->fit_iterations, "ocv_degree", a->ocv_degree, "ocv_coef_v", coef,
                  "q_end_ah", jout_num(a->q_end_ah), "median_interval_s", jout_num(a->median_dt_s),
                  "current_steps", (json_int_t)a->current_steps, "rows_visited",
                  (json_int_t)a->fit_rows_visited));
    json_t *cells = json_array();
    for (int c = 0; c < a->ncells_detail; c++) {
        const struct cell_detail *d = &a->cell[c];
        jout_append(cells, json_pack("{s:i, s:o, s:o, s:o}", "index", d->index, "r0_mohm",
                                     est(d->r0_mohm), "voltage_min_v", jout_num(d->voltage_min_v),
                                     "voltage_rest_v", jout_num(d->voltage_rest_v)));
    }
    jout_set(o, "cells_detail", cells);
    jout_set(o, "cell_spread_rest_mv", jout_num(a->spread_rest_mv));
    jout_set(o, "cell_spread_rest_start_mv", jout_num(a->spread_rest_start_mv));
    jout_set(o, "cell_spread_rest_end_mv", jout_num(a->spread_rest_end_mv));
    jout_set(o, "cell_spread_load_mv", jout_num(a->spread_load_mv));
    jout_set(o, "weakest_cell", a->weakest_cell ? json_integer(a->weakest_cell) : json_null());
    jout_set(o, "input", input_obj(in));
    json_t *w = json_array();
    for (size_t k = 0; k < a->nwarnings; k++)
        jout_append(w, json_pack("{s:s, s:o}", "code", a->warnings[k].code, "message",
                                 jout_str(a->warnings[k].message)));
    jout_set(o, "warnings", w);
    return o;
}

int report_analysis_json(FILE *out, const struct analysis *a, const struct report_input *in)
{
    return jout_write(out, analysis_obj(a, in));
}

int report_chemistry_json(FILE *out)
{
    json_t *arr = json_array();
    for (int k = 0; k < CHEM_COUNT; k++) {
        const struct chem_info *c = ocv_chem((enum chemistry)k);
        json_t *soc = json_array(), *ocv = json_array();
        for (size_t j = 0; j < c->npoints; j++) {
            jout_append(soc, json_real(c->soc_pct[j]));
            jout_append(ocv, json_real(c->ocv_v[j]));
        }
        jout_append(arr,
                    json_pack("{s:s, s:s, s:s, s:o, s:o, s:f, s:f, s:f, s:f, s:f}", "name", c->name,
                              "label", c->label, "source", c->source, "soc_pct", soc, "ocv_v", ocv,
                              "floor_v", c->floor_v, "full_rest_v", c->full_rest_v, "empty_rest_v",
                              c->empty_rest_v, "min_loaded_v", c->min_loaded_v, "max_v", c->max_v));
    }
    return jout_write(out, arr);
}
