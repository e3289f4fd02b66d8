#include "analyze.h"

#include <assert.h>
#include <gsl/gsl_errno.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "capacity.h"
#include "ecm.h"
#include "edges.h"
#include "fit.h"
#include "socest.h"
#include "twin.h"

#define DT_SAMPLE_MAX 20001 /* intervals sampled for the median interval */
#define REST_MIN_END_S 60.0 /* a final rest this long is fitted for its relaxation */
#define MIN_FIT_SAMPLES 8   /* fewer samples than this: no fits */

struct analysis *analysis_new(void)
{
    return calloc(1, sizeof(struct analysis));
}

void analysis_free(struct analysis *a)
{
    if (!a)
        return;
    free(a->warnings);
    free(a);
}

static void warn(struct analysis *a, const char *code, const char *fmt, ...)
    __attribute__((format(printf, 3, 4)));

static void warn(struct analysis *a, const char *code, const char *fmt, ...)
{
    if (a->nwarnings == a->capwarnings) {
        size_t cap = a->capwarnings ? 2 * a->capwarnings : 16;
        struct pb_warning *w = realloc(a->warnings, cap * sizeof *w);
        if (!w)
            return; /* a lost warning is better than a lost analysis */
        a->warnings = w;
        a->capwarnings = cap;
    }
    struct pb_warning *w = &a->warnings[a->nwarnings++];
    snprintf(w->code, sizeof w->code, "%s", code);
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(w->message, sizeof w->message, fmt, ap);
    va_end(ap);
}

void analysis_add_warning(struct analysis *a, const char *code, const char *message)
{
    warn(a, code, "%s", message);
}

static void emit_reader_warning(void *ctx, const char *code, const char *message)
{
    analysis_add_warning(ctx, code, message);
}

static struct estimate none(void)
{
    return (struct estimate){NAN, NAN};
}

static double median_interval(const struct series *s)
{
    size_t n = s->n - 1;
    size_t take = n < DT_SAMPLE_MAX ? n : DT_SAMPLE_MAX;
    double *dt = malloc(take * sizeof *dt);
    if (!dt)
        return s->t_s[s->n - 1] / (double)n;
    for (size_t j = 0; j < take; j++) {
        size_t k = 1 + (take == n ? j : (size_t)((double)j * (double)n / (double)take));
        dt[j] = s->t_s[k] - s->t_s[k - 1];
    }
    double med = fit_median(dt, take);
    free(dt);
    return med;
}

/* ---- pieces of the analysis ------------------------------------------- */

static void reader_warnings(struct analysis *a, const struct logread_stats *st, const char *name)
{
    const struct {
        const struct logread_event *ev;
        const char *code;
        const char *what;
    } evs[] = {
        {&st->bad_number, "dropped_bad_number",
         "sample(s) dropped: text where a number was expected"},
        {&st->nonfinite, "dropped_nonfinite",
         "sample(s) dropped: NaN, infinity or a number out of range"},
        {&st->empty_field, "dropped_empty_field", "sample(s) dropped: a required field is empty"},
        {&st->short_row, "dropped_short_row",
         "sample(s) dropped: fewer fields than the columns need"},
        {&st->duplicate_time, "dropped_duplicate_time",
         "sample(s) dropped: same time as the previous sample"},
        {&st->long_row, "extra_fields", "line(s) with more fields than the header: extras ignored"},
        {&st->temp_repaired, "temperature_repaired",
         "unreadable temperature(s) replaced by the previous reading"},
        {&st->duplicate_role, "duplicate_column",
         "column(s) repeat a quantity already mapped: ignored"},
    };
    for (size_t k = 0; k < sizeof evs / sizeof *evs; k++) {
        const struct logread_event *ev = evs[k].ev;
        if (ev->count)
            warn(a, evs[k].code, "%zu %s (first at %s:%zu:%d)", ev->count, evs[k].what, name,
                 ev->first_line, ev->first_column);
    }
    if (st->truncated_last_line)
        warn(a, "truncated_last_line",
             "the last line of %s is cut short (no final newline); it was dropped", name);
    /* plausibility, clock events and dropped cells, worded by the reader */
    logread_warnings(st, name, emit_reader_warning, a);
    if (st->sign_flipped)
        warn(a, "current_sign_flipped",
             "current logged negative while discharging: sign flipped (set --current-sign to "
             "override)");
}

static void infer_cells(struct analysis *a, const struct series *s, const struct analyze_opts *o)
{
    const struct chem_info *c = a->chem;
    if (o->cells > 0) {
        a->cells = o->cells;
        a->cells_source = "given";
        int logged = s->cells_in_pack > s->ncells ? s->cells_in_pack : s->ncells;
        if (s->ncells > 0 && logged != o->cells)
            warn(a, "cells_mismatch", "--cells %d but the log has %d cell columns", o->cells,
                 logged);
        return;
    }
    if (s->ncells > 0) {
        /* a dropped cell still counts: the columns stand for cells_in_pack */
        a->cells = s->cells_in_pack > s->ncells ? s->cells_in_pack : s->ncells;
        a->cells_source = "cell columns";
        return;
    }
    a->cells_source = "inferred";
    /* Every count that keeps the cells between the chemistry's charged
     * limit and its lowest loaded voltage fits; the fewest cells is the
     * likeliest, since packs are mostly flown from (near) full charge. */
    int best = 0;
    for (int n = 1; n <= PB_MAX_CELLS; n++) {
        double hi = a->voltage_max_v / n, lo = a->voltage_min_v / n;
        if (hi > c->max_v * 1.01 || lo < c->min_loaded_v * 0.99)
            continue;
        if (a->n_cells_alternatives < 4)
            a->cells_alternatives[a->n_cells_alternatives++] = n;
        if (!best)
            best = n;
    }
    a->cells = best;
    if (best == 0) {
        warn(a, "cells_unknown",
             "no %s cell count fits the voltages (%.2f..%.2f V): give --cells; per-cell figures "
             "and SoC are left out",
             c->label, a->voltage_min_v, a->voltage_max_v);
    } else if (a->n_cells_alternatives > 1) {
        char alts[64] = "";
        size_t used = 0;
        for (int k = 0; k < a->n_cells_alternatives; k++)
            if (a->cells_alternatives[k] != best)
                used += (size_t)snprintf(alts + used, sizeof alts - used, "%s%dS", used ? ", " : "",
                                         a->cells_alternatives[k]);
        warn(a, "cells_ambiguous",
             "cell count inferred as %dS but %s also fit the voltages: give --cells to be sure",
             best, alts);
    }
}

/* fmax and fmin of finite numbers (the reader keeps no other) without a
 * call per sample: the same choice as the SSE instructions libm uses. */
static inline double max_of(double m, double x)
{
    return m > x ? m : x;
}

static inline double min_of(double m, double x)
{
    return m < x ? m : x;
}

static void floor_warning(struct analysis *a, double v_min_loaded, double floor_pack);

/* The voltage's range and, with a current, the current's and the peak
 * power, in one walk; the lowest current in *imin_a. */
static void voltage_stats(struct analysis *a, const struct series *s, double *imin_a)
{
    double vmin = HUGE_VAL, vmax = -HUGE_VAL;
    const double *v = s->v_v, *i = s->i_a;
    if (i) {
        double imax = -HUGE_VAL, imin = HUGE_VAL, pmax = -HUGE_VAL;
        for (size_t k = 0; k < s->n; k++) {
            vmin = min_of(vmin, v[k]);
            vmax = max_of(vmax, v[k]);
            imax = max_of(imax, i[k]);
            imin = min_of(imin, i[k]);
            pmax = max_of(pmax, i[k] * v[k]);
        }
        a->current_max_a = imax;
        a->power_max_w = pmax;
        *imin_a = imin;
    } else {
        for (size_t k = 0; k < s->n; k++) {
            vmin = min_of(vmin, v[k]);
            vmax = max_of(vmax, v[k]);
        }
    }
    a->voltage_min_v = vmin;
    a->voltage_max_v = vmax;
    a->voltage_start_v = s->v_v[0];
    a->voltage_end_v = s->v_v[s->n - 1];
}

/* The charge's figures from the count in a->cc. */
static void charge_stats(struct analysis *a, const struct analyze_opts *o)
{
    a->charge_used_mah = a->cc.discharged_mah - a->cc.regen_mah;
    a->energy_used_wh = a->cc.discharged_wh - a->cc.regen_wh;
    a->current_mean_a = a->charge_used_mah * 3.6 / a->duration_s;
    a->power_mean_w = a->energy_used_wh * 3600.0 / a->duration_s;
    if (o->capacity_mah > 0.0)
        a->c_rate_mean = a->current_mean_a / (o->capacity_mah / 1000.0);
}

/* The current's range figures (after voltage_stats, which found its range
 * and imin_a): peak, rest threshold and rest runs; the walks that need the
 * rest threshold are loaded_stats'. */
static void rest_stats(struct analysis *a, const struct series *s, const struct analyze_opts *o,
                       double imin)
{
    double peak = fmax(fabs(a->current_max_a), fabs(imin));
    a->peak_a = peak;
    a->rest_a = o->rest_a > 0.0 ? o->rest_a : fmax(0.05, 0.01 * peak);
    size_t k = 0;
    while (k < s->n && fabs(s->i_a[k]) <= a->rest_a)
        k++;
    a->rest_start_s = k > 0 ? s->t_s[k - 1] : 0.0;
    if (k == s->n) {
        a->rest_end_s = a->rest_start_s;
    } else {
        size_t e = s->n - 1;
        while (e > 0 && fabs(s->i_a[e]) <= a->rest_a)
            e--;
        a->rest_end_s = s->t_s[s->n - 1] - s->t_s[e + (e + 1 < s->n ? 1 : 0)];
    }
    if (o->capacity_mah > 0.0)
        a->c_rate_max = a->current_max_a / (o->capacity_mah / 1000.0);
}

static void gap_warning(struct analysis *a, const struct series *s, const char *name)
{
    if (a->cc.gaps)
        warn(a, "gaps",
             "%zu gap(s) longer than %.3g s in the log (%.1f s in all, longest %.1f s, the first "
             "ending at %.1f s, %s:%u); %.1f mAh was bridged across them by straight lines",
             a->cc.gaps, a->gap_s, a->cc.gap_total_s, a->cc.gap_longest_s,
             s->t_s[a->cc.gap_first_index], name, s->line[a->cc.gap_first_index],
             a->cc.gap_charge_mah);
}

/* One walk, after current_stats, for what needs the rest threshold and the
 * cell count: cruise power (intervals whose both ends draw more than the
 * rest current), current steps, the loaded voltage against the cut-off
 * (floor_stats' figures; its lowest in *v_min_loaded_out, for
 * floor_warning), and the charge drawn by each sample in q_ah (nothing
 * bridged across a joint of clock segments: unknown length). Each sum is
 * taken in sample order, as separate walks would. */
static void loaded_stats(struct analysis *a, const struct series *s, double imin, double *q_ah,
                         double *v_min_loaded_out)
{
    const double *t = s->t_s, *v = s->v_v, *i = s->i_a;
    const double rest_a = a->rest_a;
    const double step_a = fmax(0.25 * (a->current_max_a - imin), 0.5);
    const int floor = a->cells > 0;
    const double floor_pack = a->floor_v * a->cells;
    double e_ws = 0.0, t_loaded = 0.0, below_s = a->time_below_floor_s, v_min_loaded = HUGE_VAL;
    size_t steps = a->current_steps, js = 1; /* js: the next joint is at seg_start[js] */
    q_ah[0] = 0.0;
    for (size_t k = 0; k < s->n; k++) {
        int loaded = fabs(i[k]) > rest_a;
        if (k + 1 < s->n) {
            /* interval k -> k + 1 */
            while (js < s->nseg && s->seg_start[js] <= k)
                js++;
            int joint = js < s->nseg && s->seg_start[js] == k + 1;
            double dt = t[k + 1] - t[k];
            if (i[k] > rest_a && i[k + 1] > rest_a) {
                e_ws += dt * 0.5 * (v[k] * i[k] + v[k + 1] * i[k + 1]);
                t_loaded += dt;
            }
            steps += fabs(i[k + 1] - i[k]) > step_a;
            q_ah[k + 1] = q_ah[k] + (joint ? 0.0 : coulomb_step_ah(dt, i[k], i[k + 1]));
            if (floor && loaded && v[k] < floor_pack && !joint)
                below_s += dt;
        }
        if (loaded)
            v_min_loaded = min_of(v_min_loaded, v[k]);
    }
    a->power_cruise_w = t_loaded > 0.0 ? e_ws / t_loaded : NAN;
    a->current_steps = steps;
    if (floor) {
        a->cell_min_loaded_v = a->voltage_min_v / a->cells;
        a->time_below_floor_s = below_s;
    }
    *v_min_loaded_out = v_min_loaded;
}

/* Time under the cut-off voltage: only while loaded (|I| above the rest
 * threshold) when the log has current, since a pack resting after landing
 * at a low voltage is not being over-discharged; every interval otherwise.
 * Joints between clock segments count no time. Call after current_stats. */
static void floor_stats(struct analysis *a, const struct series *s)
{
    if (a->cells <= 0)
        return;
    a->cell_min_loaded_v = a->voltage_min_v / a->cells;
    double floor_pack = a->floor_v * a->cells;
    double v_min_loaded = HUGE_VAL;
    for (size_t k = 0; k < s->n; k++) {
        if (s->i_a && !(fabs(s->i_a[k]) > a->rest_a))
            continue;
        v_min_loaded = fmin(v_min_loaded, s->v_v[k]);
        if (k + 1 < s->n && s->v_v[k] < floor_pack && !series_is_joint(s, k + 1))
            a->time_below_floor_s += s->t_s[k + 1] - s->t_s[k];
    }
    floor_warning(a, v_min_loaded, floor_pack);
}

static void floor_warning(struct analysis *a, double v_min_loaded, double floor_pack)
{
    if (v_min_loaded < floor_pack)
        warn(a, "below_floor",
             "the loaded voltage went below the %.2f V/cell cut-off voltage (lowest %.3f V/cell, "
             "%.1f s under load below it): over-discharge; check the pack for damage before "
             "charging",
             a->floor_v, v_min_loaded / a->cells, a->time_below_floor_s);
}

static const char *rest_state(const struct chem_info *c, double ocv_cell_v)
{
    if (ocv_cell_v >= c->full_rest_v)
        return "full";
    if (ocv_cell_v <= c->empty_rest_v)
        return "empty";
    return "partial";
}

/* Mean voltage (and current) of samples [k0, k1) */
static double mean_corrected(const struct series *s, size_t k0, size_t k1, double r_ohm)
{
    double sum = 0.0;
    for (size_t k = k0; k < k1; k++)
        sum += s->v_v[k] + (s->i_a ? r_ohm * s->i_a[k] : 0.0);
    return sum / (double)(k1 - k0);
}

static size_t index_at_or_after(const struct series *s, double t)
{
    size_t lo = 0, hi = s->n;
    while (lo < hi) {
        size_t mid = lo + (hi - lo) / 2;
        if (s->t_s[mid] < t)
            lo = mid + 1;
        else
            hi = mid;
    }
    return lo;
}

/* Spread (max - min cell voltage) averaged over samples [k0, k1); NAN when empty. */
static double spread_mean_mv(const struct series *s, size_t k0, size_t k1)
{
    if (k1 <= k0)
        return NAN;
    double sum = 0.0;
    for (size_t k = k0; k < k1; k++) {
        double lo = HUGE_VAL, hi = -HUGE_VAL;
        for (int c = 0; c < s->ncells; c++) {
            lo = fmin(lo, s->cell_v[c][k]);
            hi = fmax(hi, s->cell_v[c][k]);
        }
        sum += hi - lo;
    }
    return 1000.0 * sum / (double)(k1 - k0);
}

/* Per-cell figures. A cell's resistance is measured the way the pack's
 * headline was (current steps, or the pack's model with its tau) so cells
 * compare with the pack. Imbalance at rest is read before take-off and after
 * landing separately: averaging them gives a state the pack never sat in. */
static void per_cell(struct analysis *a, const struct series *s, const double *q_ah,
                     const struct analyze_opts *o, size_t k_rest0, size_t k_rest1)
{
    a->ncells_detail = s->ncells;
    a->cells_in_log = s->cells_in_pack > s->ncells ? s->cells_in_pack : s->ncells;
    for (int c = 0; c < s->ncells; c++) {
        struct cell_detail *d = &a->cell[c];
        d->index = s->cell_no[c] > 0 ? s->cell_no[c] : c + 1;
        d->voltage_min_v = HUGE_VAL;
        for (size_t k = 0; k < s->n; k++)
            d->voltage_min_v = fmin(d->voltage_min_v, s->cell_v[c][k]);
        d->r0_mohm = none();
        d->voltage_rest_v = NAN;
        if (!s->i_a || !isfinite(a->r0_mohm.value))
            continue;
        if (a->r0_method && strcmp(a->r0_method, "steps") == 0) {
            struct edges_opts eo = {.rated_mah = o->capacity_mah,
                                    .cutoff_v = a->floor_v,
                                    .gap_s = a->gap_s,
                                    .peak_a = a->peak_a,
                                    .series = s,
                                    .chem = a->chem,
                                    .cells = 1};
            struct edges_result er;
            edges_estimate(s->t_s, s->cell_v[c], s->i_a, s->n, &eo, &er);
            if (isfinite(er.r_mohm))
                d->r0_mohm = (struct estimate){er.r_mohm, er.ci95_mohm};
        } else {
            struct ecm_opts eo = {.y_v = s->cell_v[c],
                                  .dt_med_s = a->median_dt_s,
                                  .gap_s = a->gap_s,
                                  .step_a = a->step_a,
                                  .cutoff_v = a->floor_v,
                                  .robust = !o->plain_fit,
                                  .tau_fixed_s = isfinite(a->tau_s.value) ? a->tau_s.value : 0.0,
                                  .work = &a->fit_rows_visited};
            struct ecm_result er;
            if (ecm_fit(s, q_ah, &eo, &er, NULL) == PB_OK && isfinite(er.r0_mohm))
                d->r0_mohm = (struct estimate){er.r0_mohm, er.r0_ci95_mohm};
        }
    }
    if (s->ncells == 0)
        return;
    /* rest before take-off: [0, k_rest0); after landing: [k_rest1, n) */
    a->spread_rest_start_mv = spread_mean_mv(s, 0, k_rest0);
    a->spread_rest_end_mv = spread_mean_mv(s, k_rest1, s->n);
    a->spread_rest_mv =
        isfinite(a->spread_rest_end_mv) ? a->spread_rest_end_mv : a->spread_rest_start_mv;
    double load_max = -HUGE_VAL;
    size_t rest_n = 0;
    double rest_cell_sum[PB_MAX_CELLS] = {0};
    for (size_t k = 0; k < s->n; k++) {
        int at_rest = s->i_a ? fabs(s->i_a[k]) <= a->rest_a : k == 0;
        if (at_rest) {
            if (k >= k_rest1 || (!isfinite(a->spread_rest_end_mv) && k < k_rest0)) {
                rest_n++;
                for (int c = 0; c < s->ncells; c++)
                    rest_cell_sum[c] += s->cell_v[c][k];
            }
            continue;
        }
        double lo = HUGE_VAL, hi = -HUGE_VAL;
        for (int c = 0; c < s->ncells; c++) {
            lo = fmin(lo, s->cell_v[c][k]);
            hi = fmax(hi, s->cell_v[c][k]);
        }
        load_max = fmax(load_max, hi - lo);
    }
    a->spread_load_mv = isfinite(load_max) ? 1000.0 * load_max : NAN;
    for (int c = 0; c < s->ncells && rest_n; c++)
        a->cell[c].voltage_rest_v = rest_cell_sum[c] / (double)rest_n;
    if (!isfinite(a->spread_rest_mv))
        warn(a, "no_rest_samples", "no samples at rest: cell imbalance at rest is unknown");
    int weakest = 0;
    for (int c = 1; c < s->ncells; c++) {
        const struct cell_detail *w = &a->cell[weakest], *d = &a->cell[c];
        if (d->voltage_min_v < w->voltage_min_v ||
            (d->voltage_min_v == w->voltage_min_v && d->r0_mohm.value > w->r0_mohm.value))
            weakest = c;
    }
    a->weakest_cell = a->cell[weakest].index;
}

/* ---- entry ------------------------------------------------------------ */

/* Stage: resistance, measured two ways. The steps (edges.h) are what a
 * tester calls DC internal resistance; the equivalent-circuit fit (ecm.h)
 * separates R0 from polarisation where the current varies enough. The
 * headline is the steps' figure when the log has any usable step, its
 * interval widened to cover the model's R0 when that is identified (the
 * two measure over different time scales); else the model's R0; else none,
 * with the reasons. */
/* What runs beside the loaded walk (beside_run): the charge count and,
 * when steps is set, the current steps; neither needs the per-sample
 * charge. */
struct beside {
    const struct series *s;
    double gap_s;
    int steps;
    struct coulomb_result cc;
    struct edges_opts eo;
    struct edges_result er;
};

static void beside_run(void *vb)
{
    struct beside *b = vb;
    const struct series *s = b->s;
    coulomb_count_segments(s->t_s, s->v_v, s->i_a, s->n, s->seg_start, s->nseg, b->gap_s, &b->cc);
    if (b->steps)
        edges_estimate(s->t_s, s->v_v, s->i_a, s->n, &b->eo, &b->er);
}

/* The walk that needs the rest threshold (charge per sample into q_ah, the
 * current steps), then, when model is set, the model's windows and its tau
 * search (ecm_begin, in a thread of its own when a core is free). */
struct start {
    struct analysis *a;
    const struct series *s;
    double imin, v_min_loaded;
    double *q_ah;
    int model;
    struct ecm_opts mo;
    struct ecm_run *run;
};

static void start_run(void *vs)
{
    struct start *st = vs;
    loaded_stats(st->a, st->s, st->imin, st->q_ah, &st->v_min_loaded);
    if (!st->model)
        return;
    st->mo.try_rc = st->a->current_steps > 0;
    st->run = ecm_begin(st->s, st->q_ah, &st->mo);
}

/* The walks after the rest threshold: start and beside side by side when
 * a core is free (twin.h; they share nothing, so the results are the same
 * either way), then the charge's figures and the warnings in their order
 * (gaps, then the cut-off). */
static void current_walks(struct analysis *a, const struct series *s, const struct analyze_opts *o,
                          const char *name, struct start *st, struct beside *b)
{
    if (s->n >= TWIN_MIN_ROWS) {
        twin_run(start_run, st, beside_run, b);
    } else {
        start_run(st);
        beside_run(b);
    }
    a->cc = b->cc;
    charge_stats(a, o);
    gap_warning(a, s, name);
    if (a->cells > 0)
        floor_warning(a, st->v_min_loaded, a->floor_v * a->cells);
}

/* Stage: the loaded walk and the charge (current_walks), then internal
 * resistance, from the current steps (edges.h) and from the circuit model
 * (ecm.h), the tau search beside the static model's fit. */
static enum pb_code stage_resistance(struct analysis *a, const struct series *s, double *q_ah,
                                     const struct analyze_opts *o, double imin, const char *name,
                                     struct ecm_lag_rows *lag_rows, struct pb_error *err)
{
    double step_a = edges_step_a(o->capacity_mah, a->peak_a);
    struct beside b = {.s = s,
                       .gap_s = a->gap_s,
                       .steps = 1,
                       .eo = {.rated_mah = o->capacity_mah,
                              .cutoff_v = a->cells > 0 ? a->floor_v * a->cells : 0.0,
                              .gap_s = a->gap_s,
                              .peak_a = a->peak_a,
                              .series = s,
                              .chem = a->cells > 0 ? a->chem : NULL,
                              .cells = a->cells}};
    struct start st = {.a = a,
                       .s = s,
                       .imin = imin,
                       .q_ah = q_ah,
                       .model = 1,
                       .mo = {.y_v = s->v_v,
                              .dt_med_s = a->median_dt_s,
                              .gap_s = a->gap_s,
                              .step_a = step_a,
                              .cutoff_v = a->cells > 0 ? a->floor_v * a->cells : 0.0,
                              .robust = !o->plain_fit,
                              .work = &a->fit_rows_visited,
                              .lag_rows = lag_rows,
                              .stages = o->stages}};
    stage_begin(o->stages, "walks");
    current_walks(a, s, o, name, &st, &b);
    struct ecm_run *run = st.run;
    if (!run)
        return pb_error_set(err, PB_ENOMEM, "out of memory");
    struct edges_result er = b.er;
    assert(er.step_a == step_a);
    a->step_a = er.step_a;
    a->r_edge_steps = er.steps;
    a->r_edge_time_scale_s = er.time_scale_s;
    a->r_edge_reason = er.reason;
    if (isfinite(er.r_mohm))
        a->r_edge_mohm = (struct estimate){er.r_mohm, er.ci95_mohm};

    struct ecm_result mr;
    enum pb_code rc = ecm_end(run, &mr);
    if (rc != PB_OK)
        return pb_error_set(err, rc, "out of memory");
    a->r0_reason = mr.reason;
    a->fit_sigma_mv = mr.sigma_mv;
    a->fit_rho = mr.rho;
    a->fit_downweighted = mr.downweighted;
    a->fit_iterations = mr.iterations;
    a->fit_windows = mr.windows;
    a->fit_window_s = mr.window_s;
    if (isfinite(mr.r_static_mohm) && !mr.reason)
        a->r_static_mohm = (struct estimate){mr.r_static_mohm, mr.r_static_ci95_mohm};
    if (isfinite(mr.r0_mohm)) {
        a->r0_model_mohm = (struct estimate){mr.r0_mohm, mr.r0_ci95_mohm};
        if (mr.rc) {
            a->r1_mohm = (struct estimate){mr.r1_mohm, mr.r1_ci95_mohm};
            a->tau_s = (struct estimate){mr.tau_s, mr.tau_ci95_s};
        }
    }
    if (isfinite(a->r_edge_mohm.value)) {
        double ci = a->r_edge_mohm.ci95;
        if (isfinite(a->r0_model_mohm.value))
            ci = fmax(isfinite(ci) ? ci : 0.0, fabs(a->r_edge_mohm.value - a->r0_model_mohm.value));
        a->r0_mohm = (struct estimate){a->r_edge_mohm.value, ci};
        a->r0_method = "steps";
    } else if (isfinite(a->r0_model_mohm.value)) {
        a->r0_mohm = a->r0_model_mohm;
        a->r0_method = mr.rc ? "rc" : "static";
    } else {
        warn(a, "r0_not_identifiable", "internal resistance not reported: %s; the model fit: %s",
             er.reason ? er.reason : "no usable current step",
             mr.reason ? mr.reason : "not identified");
    }
    return PB_OK;
}

/* Index of the first sample after the initial rest run ([0, k) at rest). */
static size_t initial_rest_end(const struct series *s, double rest_a)
{
    size_t k = 0;
    while (k < s->n && fabs(s->i_a[k]) <= rest_a)
        k++;
    return k;
}

/* Index where the final rest run starts ([k, n) at rest); n when none. */
static size_t final_rest_start(const struct series *s, double rest_a)
{
    size_t k = s->n;
    while (k > 0 && fabs(s->i_a[k - 1]) <= rest_a)
        k--;
    return k;
}

/* Stage: open-circuit voltage and SoC at both ends (socest.h). The start is
 * the rest before take-off when there is one (any length, with the
 * relaxation allowance for its length), else the OCV trend at the start;
 * the end is the final rest's relaxation extrapolated when the rest lasts
 * REST_MIN_END_S, else its last fifth with the allowance, and the trend when
 * the rest is shorter or missing. Half-widths (95 %, pack) go with each. */
static enum pb_code stage_ocv(struct analysis *a, const struct series *s, const double *q_ah,
                              const struct analyze_opts *o, size_t k_rest0, size_t k_rest1,
                              const struct ecm_lag_rows *lag_rows, struct pb_error *err)
{
    double r_ohm = 0.0, r1_ohm = 0.0, tau = 0.0, r_ci_ohm = 0.0;
    if (isfinite(a->r0_model_mohm.value)) {
        r_ohm = a->r0_model_mohm.value / 1000.0;
        r_ci_ohm = a->r0_model_mohm.ci95 / 1000.0;
        if (isfinite(a->tau_s.value)) {
            r1_ohm = a->r1_mohm.value / 1000.0;
            tau = a->tau_s.value;
        }
    } else if (isfinite(a->r0_mohm.value)) {
        r_ohm = a->r0_mohm.value / 1000.0;
        r_ci_ohm = a->r0_mohm.ci95 / 1000.0;
    }
    int have_r = r_ohm > 0.0;
    stage_begin(o->stages, "OCV trend");
    /* the OCV trend over the log with R fixed: cubic in the normalised
     * charge when the charge moves, constant when it does not */
    a->q_end_ah = q_ah[s->n - 1];
    a->ocv_degree = fabs(a->q_end_ah) > 1e-6 && s->n >= 40 ? 3 : 0;
    struct fit_result f;
    enum pb_code rc = ecm_ocv_trend(s, q_ah, a->q_end_ah, a->ocv_degree, r_ohm, r1_ohm, tau,
                                    !o->plain_fit, lag_rows, &a->fit_rows_visited, &f, err);
    if (rc != PB_OK)
        return rc;
    for (int j = 0; j <= a->ocv_degree && j < OCV_POLY_MAX; j++)
        a->ocv_coef_v[j] = f.beta[j];
    double cells = a->cells > 0 ? a->cells : 1.0;
    /* a sag-corrected voltage: the model's miss, R's error times the current */
    const char *trend_method = have_r ? "fit" : "loaded";
    double v, se;
    ecm_ocv_at(&f, a->ocv_degree, -1.0, &v, &se);
    a->ocv_start_v = v;
    a->ocv_start_d_v = hypot(1.96 * se, hypot(SOCEST_LOADED_V * cells, r_ci_ohm * s->i_a[0]));
    a->ocv_start_method = trend_method;
    ecm_ocv_at(&f, a->ocv_degree, 1.0, &v, &se);
    a->ocv_end_v = v;
    a->ocv_end_d_v = hypot(1.96 * se, hypot(SOCEST_LOADED_V * cells, r_ci_ohm * s->i_a[s->n - 1]));
    a->ocv_end_method = trend_method;
    if (k_rest0 > 0 && k_rest0 < s->n) {
        double sum = 0.0;
        for (size_t k = 0; k < k_rest0; k++)
            sum += s->v_v[k] + r_ohm * s->i_a[k];
        a->ocv_start_v = sum / (double)k_rest0;
        a->ocv_start_d_v = socest_relax_v(a->rest_start_s) * cells;
        a->ocv_start_method = "rest";
    }
    /* a short final rest is left to the trend, whose RC branch (when fitted)
     * follows the relaxation that has only begun */
    if (k_rest1 < s->n && k_rest1 > 0 && a->rest_end_s >= REST_MIN_END_S) {
        double d;
        double v_inf = socest_relaxed_v(s->t_s, s->v_v, k_rest1, s->n, &d);
        if (isfinite(v_inf)) {
            a->ocv_end_v = v_inf;
            a->ocv_end_d_v = d;
            a->ocv_end_method = "relaxed";
        } else {
            /* the last fifth of the final rest, when polarisation has relaxed most */
            double t1 = s->t_s[s->n - 1];
            size_t k0 = index_at_or_after(s, t1 - 0.2 * a->rest_end_s);
            if (k0 < k_rest1)
                k0 = k_rest1;
            a->ocv_end_v = mean_corrected(s, k0, s->n, r_ohm);
            a->ocv_end_d_v = socest_relax_v(a->rest_end_s) * cells;
            a->ocv_end_method = "rest";
        }
    }
    return PB_OK;
}

static struct estimate soc_estimate(const struct soc_value *v)
{
    return (struct estimate){v->soc_pct, v->ci95_pct};
}

/* SoC, its range and the rest state at both ends from the OCVs and their
 * half-widths set in a (a->cells > 0). */
static void soc_ends(struct analysis *a, struct soc_value *s0, struct soc_value *s1)
{
    double cells = a->cells;
    *s0 = socest_soc(a->chem, a->ocv_start_v / cells, a->ocv_start_d_v / cells);
    *s1 = socest_soc(a->chem, a->ocv_end_v / cells, a->ocv_end_d_v / cells);
    a->soc_start_pct = soc_estimate(s0);
    a->soc_end_pct = soc_estimate(s1);
    a->soc_start_lo_pct = s0->lo_pct, a->soc_start_hi_pct = s0->hi_pct;
    a->soc_end_lo_pct = s1->lo_pct, a->soc_end_hi_pct = s1->hi_pct;
    a->state_start = rest_state(a->chem, a->ocv_start_v / cells);
    a->state_end = rest_state(a->chem, a->ocv_end_v / cells);
}

/* Stage: SoC at the ends and capacity (capacity.h): to the cut-off when the
 * log is such a discharge, else from the SoC swing. */
static void stage_soc_capacity(struct analysis *a, const struct series *s, const double *q_ah,
                               const struct analyze_opts *o)
{
    if (a->cells <= 0)
        return;
    double cells = a->cells;
    struct soc_value s0, s1;
    soc_ends(a, &s0, &s1);
    if (s0.clamped || s1.clamped)
        warn(a, "ocv_outside_table",
             "open-circuit voltage %.3f V/cell lies outside the %s table: SoC clamped; "
             "check --cells and --chemistry",
             (s0.clamped ? a->ocv_start_v : a->ocv_end_v) / cells, a->chem->label);
    if (strcmp(a->ocv_start_method, "rest") != 0)
        warn(a, "start_not_at_rest",
             "the log starts under load: start SoC is read from the sag-corrected voltage "
             "(+/- %.0f points)",
             a->soc_start_pct.ci95);
    if (!s->i_a)
        return;

    double r_ohm = isfinite(a->r0_mohm.value) ? a->r0_mohm.value / 1000.0 : 0.0;
    double r_ci = isfinite(a->r0_mohm.ci95) ? a->r0_mohm.ci95 / 1000.0 : 0.0;
    struct cutoff_opts co = {.chem = a->chem,
                             .cells = a->cells,
                             .rest_a = a->rest_a,
                             .r_ohm = r_ohm,
                             .r_ci_ohm = r_ci,
                             .gap_s = a->gap_s,
                             .rated_mah = o->capacity_mah};
    struct cutoff_result cr;
    capacity_to_cutoff(s, q_ah, &co, &cr);
    if (cr.found) {
        a->capacity_cutoff_mah = (struct estimate){cr.q_mah, cr.ci95_mah};
        a->capacity_cutoff_c_rate = cr.c_rate;
        a->capacity_cutoff_mean_a = cr.mean_a;
        a->capacity_cutoff_end_v_cell = cr.end_v_cell;
    }

    double dsoc = a->soc_start_pct.value - a->soc_end_pct.value;
    if (s0.clamped || s1.clamped) {
        a->capacity_soc_reason =
            "capacity from the SoC swing needs SoC inside the table at both ends";
    } else if (fabs(dsoc) < CAPACITY_MIN_SWING_PCT || (dsoc > 0) != (a->charge_used_mah > 0)) {
        a->capacity_soc_reason = "the SoC swing is too small or against the charge drawn";
    } else {
        double cap = a->charge_used_mah / (dsoc / 100.0);
        double rel = hypot(a->soc_start_pct.ci95, a->soc_end_pct.ci95) / fabs(dsoc);
        double q_rel =
            a->charge_used_mah != 0.0 ? fabs(a->cc.gap_charge_mah) / a->charge_used_mah : 0.0;
        a->capacity_soc_mah = (struct estimate){cap, fabs(cap) * hypot(rel, q_rel)};
    }
    if (isfinite(a->capacity_cutoff_mah.value)) {
        a->capacity_mah = a->capacity_cutoff_mah;
        a->capacity_method = "to_cutoff";
    } else if (isfinite(a->capacity_soc_mah.value)) {
        a->capacity_mah = a->capacity_soc_mah;
        a->capacity_method = "soc_swing";
    } else {
        warn(a, "capacity_not_estimable",
             "capacity not estimated: the log is not a discharge from full to empty (%s), and %s",
             cr.why_not ? cr.why_not : "-", a->capacity_soc_reason);
        return;
    }
    if (o->capacity_mah > 0.0 && a->capacity_mah.value < 0.8 * o->capacity_mah)
        warn(a, "capacity_low", "estimated capacity %.0f mAh is %.0f %% of the rated %.0f mAh",
             a->capacity_mah.value, 100.0 * a->capacity_mah.value / o->capacity_mah,
             o->capacity_mah);
}

enum pb_code analyze_series(const struct series *s, const struct logread_stats *st,
                            const char *name, const struct analyze_opts *o, struct analysis *a,
                            struct pb_error *err)
{
    enum pb_code rc = PB_OK;
    double *q_ah = NULL;

    a->samples = s->n;
    a->duration_s = s->t_s[s->n - 1];
    a->has_epoch = s->has_epoch;
    a->start_epoch_s = s->start_epoch_s;
    a->has_current = s->i_a != NULL;
    a->has_temp = s->temp_c != NULL;
    a->r0_mohm = a->r_static_mohm = a->r1_mohm = a->tau_s = none();
    a->r_edge_mohm = a->r0_model_mohm = none();
    a->r_edge_time_scale_s = NAN;
    a->soc_start_pct = a->soc_end_pct = a->capacity_mah = none();
    a->soc_start_lo_pct = a->soc_start_hi_pct = a->soc_end_lo_pct = a->soc_end_hi_pct = NAN;
    a->capacity_cutoff_mah = a->capacity_soc_mah = none();
    a->capacity_cutoff_c_rate = a->capacity_cutoff_mean_a = a->capacity_cutoff_end_v_cell = NAN;
    a->ocv_start_v = a->ocv_end_v = a->ocv_start_d_v = a->ocv_end_d_v = NAN;
    a->charge_used_mah = a->energy_used_wh = NAN;
    a->current_max_a = a->current_mean_a = a->power_max_w = a->power_mean_w = NAN;
    a->power_cruise_w = NAN;
    a->c_rate_max = a->c_rate_mean = NAN;
    a->cell_min_loaded_v = NAN;
    a->spread_rest_mv = a->spread_load_mv = NAN;
    a->spread_rest_start_mv = a->spread_rest_end_mv = NAN;
    a->temp_min_c = a->temp_max_c = NAN;
    a->fit_sigma_mv = a->fit_rho = a->fit_window_s = NAN;
    a->peak_a = a->step_a = NAN;

    stage_begin(o->stages, "levels");
    reader_warnings(a, st, name);
    a->chem = ocv_chem(o->chemistry >= 0 ? (enum chemistry)o->chemistry : CHEM_LIPO);
    a->chem_assumed = o->chemistry < 0;
    if (a->chem_assumed)
        warn(a, "chemistry_assumed", "chemistry not given: LiPo assumed (set --chemistry)");
    a->floor_v = o->floor_v > 0.0 ? o->floor_v : a->chem->floor_v;
    a->median_dt_s = median_interval(s);
    a->gap_s = o->gap_s > 0.0 ? o->gap_s : fmax(1.0, 5.0 * a->median_dt_s);

    double imin = NAN;
    voltage_stats(a, s, &imin);
    infer_cells(a, s, o);
    if (s->temp_c) {
        a->temp_min_c = HUGE_VAL;
        a->temp_max_c = -HUGE_VAL;
        for (size_t k = 0; k < s->n; k++)
            if (isfinite(s->temp_c[k])) {
                a->temp_min_c = fmin(a->temp_min_c, s->temp_c[k]);
                a->temp_max_c = fmax(a->temp_max_c, s->temp_c[k]);
            }
        if (!isfinite(a->temp_min_c))
            a->temp_min_c = a->temp_max_c = NAN;
    }

    size_t k_rest0 = 1, k_rest1 = s->n;
    if (!s->i_a) {
        floor_stats(a, s);
        warn(a, "voltage_only",
             "the log has no current: charge, energy, resistance and capacity need a current "
             "sensor; SoC is read from the loaded voltage and is a lower bound");
    } else {
        rest_stats(a, s, o, imin);
        q_ah = malloc(s->n * sizeof *q_ah);
        if (!q_ah) {
            rc = pb_error_set(err, PB_ENOMEM, "out of memory");
            goto cleanup;
        }
        k_rest0 = initial_rest_end(s, a->rest_a);
        k_rest1 = final_rest_start(s, a->rest_a);
        if (k_rest1 == 0) /* all rest: one run, read at the start */
            k_rest1 = s->n;
        if (s->n < MIN_FIT_SAMPLES) {
            struct start st = {.a = a, .s = s, .imin = imin, .q_ah = q_ah};
            struct beside b = {.s = s, .gap_s = a->gap_s};
            current_walks(a, s, o, name, &st, &b);
            warn(a, "too_few_samples",
                 "%zu samples are too few to fit resistance or open-circuit voltage (need %d)",
                 s->n, MIN_FIT_SAMPLES);
        } else {
            /* the model's lag at the sampled rows, for the trend's
             * (NULL when memory is short: the trend runs the lag itself) */
            struct ecm_lag_rows lr = {.every = fit_sample_every(s->n), .tau_s = NAN};
            lr.i1_a = malloc((s->n / lr.every + 1) * sizeof *lr.i1_a);
            struct ecm_lag_rows *lag_rows = lr.i1_a ? &lr : NULL;
            rc = stage_resistance(a, s, q_ah, o, imin, name, lag_rows, err);
            if (rc == PB_OK)
                rc = stage_ocv(a, s, q_ah, o, k_rest0, k_rest1, lag_rows, err);
            free(lr.i1_a);
            if (rc != PB_OK)
                goto cleanup;
            stage_begin(o->stages, "SoC and capacity");
            stage_soc_capacity(a, s, q_ah, o);
        }
    }
    if (!s->i_a || s->n < MIN_FIT_SAMPLES) {
        /* no resistance to correct the sag: SoC from the loaded voltage */
        double cells = a->cells > 0 ? a->cells : 1.0;
        a->ocv_start_v = a->voltage_start_v;
        a->ocv_end_v = a->voltage_end_v;
        a->ocv_start_d_v = a->ocv_end_d_v = SOCEST_LOADED_V * cells;
        a->ocv_start_method = a->ocv_end_method = "loaded";
        if (a->cells > 0) {
            struct soc_value s0, s1;
            soc_ends(a, &s0, &s1);
        }
        warn(a, "capacity_not_estimable",
             s->i_a ? "capacity needs a fitted open-circuit voltage at both ends"
                    : "capacity needs a current sensor");
    }
    if (a->cells <= 0)
        warn(a, "soc_not_estimable", "SoC needs the cell count (give --cells)");
    stage_begin(o->stages, "cells");
    per_cell(a, s, q_ah, o, k_rest0, k_rest1);
    if (s->ncells > 0 && !st->voltage_from_cells) {
        double worst = 0.0;
        /* a dropped cell counted at the others' mean */
        double scale = s->cells_in_pack > s->ncells ? (double)s->cells_in_pack / s->ncells : 1.0;
        for (size_t k = 0; k < s->n; k += 1 + s->n / 1000) {
            double sum = 0.0;
            for (int c = 0; c < s->ncells; c++)
                sum += s->cell_v[c][k];
            sum *= scale;
            worst = fmax(worst, fabs(sum - s->v_v[k]) / fmax(s->v_v[k], 1e-9));
        }
        if (worst > 0.03)
            warn(a, "cells_sum_mismatch",
                 "the cell voltages differ from the pack voltage by up to %.1f %%: check the "
                 "balance lead and the column mapping",
                 100.0 * worst);
    }
cleanup:
    free(q_ah);
    return rc;
}

void analyze_rows(const struct series *s, const struct analysis *a, double rated_mah,
                  void (*emit)(void *ctx, const struct sample_row *row), void *ctx)
{
    double r0 = a->r0_mohm.value / 1000.0;
    double r1 = a->r1_mohm.value / 1000.0, tau = a->tau_s.value;
    int rc = isfinite(r1) && isfinite(tau) && tau > 0;
    double cap_ah = isfinite(a->capacity_mah.value) ? a->capacity_mah.value / 1000.0
                    : rated_mah > 0                 ? rated_mah / 1000.0
                                                    : NAN;
    double q_ah = 0.0, v1 = 0.0;
    for (size_t k = 0; k < s->n; k++) {
        struct sample_row row = {s->t_s[k], s->v_v[k], s->i_a ? s->i_a[k] : NAN, NAN, NAN, NAN};
        if (s->i_a) {
            if (k > 0) {
                double dt = s->t_s[k] - s->t_s[k - 1];
                q_ah += coulomb_step_ah(dt, s->i_a[k - 1], s->i_a[k]);
                if (rc) {
                    double al = exp(-dt / tau);
                    v1 = al * v1 + (1.0 - al) * r1 * s->i_a[k - 1];
                }
            } else if (rc) {
                v1 = r1 * s->i_a[0];
            }
            if (isfinite(r0))
                row.ocv_v = s->v_v[k] + r0 * s->i_a[k] + (rc ? v1 : 0.0);
            if (isfinite(cap_ah) && isfinite(a->soc_start_pct.value))
                row.soc_cc_pct = a->soc_start_pct.value - 100.0 * q_ah / cap_ah;
        }
        double v_ocv = isfinite(row.ocv_v) ? row.ocv_v : s->v_v[k];
        if (a->cells > 0)
            row.soc_ocv_pct = ocv_to_soc(a->chem, v_ocv / a->cells, NULL);
        emit(ctx, &row);
    }
}
