#include "analyze.h"

#include <gsl/gsl_errno.h>
#include <gsl/gsl_min.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "fit.h"

#define DT_SAMPLE_MAX 20001    /* intervals sampled for the median interval */
#define MIN_SOC_SWING_PCT 15.0 /* below this, capacity = Q / dSoC is too uncertain */
#define REST_MIN_START_S 2.0   /* rest at the start long enough to read OCV */
#define REST_MIN_END_S 60.0    /* rest at the end: polarisation must have relaxed */
#define TAU_GRID 10
#define MIN_FIT_SAMPLES 8  /* fewer samples than this: no fits */
#define TAU_MAX_S 300.0    /* polarisation slower than this is left to the OCV drift */
#define SEARCH_ROWS 200000 /* rows the tau searches look at (evenly spread) */
#define BIC_MARGIN 10.0    /* the RC model must beat the static one by this */

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

static struct estimate none(void)
{
    return (struct estimate){NAN, NAN};
}

/* ---- the models ------------------------------------------------------- */

/* Shared by every fit: the series, the reference voltage subtracted from y
 * (so the sums do not lose the residuals to cancellation), which y column,
 * and the normalised charge u = 2 q / q_end - 1 of every sample. */
struct model {
    const struct series *s;
    const double *y_v; /* pack or one cell's voltage */
    double v_ref;
    int degree;      /* OCV polynomial degree */
    const double *u; /* normalised charge per sample */
    /* RC branch state, reset at k == 0 */
    double rc; /* first-order filtered current */
    double tau_s;
    double a_dt, a_val; /* last interval and its exp(-dt/tau), reused while dt repeats */
    double dt_med;
    double dt_tol; /* ARX: rows whose interval is within this of the median */
    /* searches use every stride-th row; the RC state still advances on all */
    size_t stride;
    size_t *work; /* rows visited by every fit, summed (NULL: not counted) */
};

/* Row j of a fit that needs no running state is sample j * stride. */
static size_t rows_of(const struct model *m)
{
    size_t st = m->stride > 1 ? m->stride : 1;
    return (m->s->n + st - 1) / st;
}

static size_t sample_of(const struct model *m, size_t j)
{
    return m->stride > 1 ? j * m->stride : j;
}

static int ocv_basis(const struct model *m, size_t k, double *x)
{
    double u = m->u[k];
    double p = 1.0;
    for (int j = 0; j <= m->degree; j++) {
        x[j] = p;
        p *= u;
    }
    return m->degree + 1;
}

/* V = OCV(q) - R I; row j is sample j * stride */
static int row_static(void *ctx, size_t j, double *x, double *y)
{
    struct model *m = ctx;
    size_t k = sample_of(m, j);
    int c = ocv_basis(m, k, x);
    x[c] = -m->s->i_a[k];
    *y = m->y_v[k] - m->v_ref;
    return 1;
}

/* V = OCV(q): the loaded-voltage trend, for logs whose resistance is unknown */
static int row_ocv_only(void *ctx, size_t j, double *x, double *y)
{
    struct model *m = ctx;
    size_t k = sample_of(m, j);
    ocv_basis(m, k, x);
    *y = m->y_v[k] - m->v_ref;
    return 1;
}

/* V = OCV(q) - R0 I - R1 i_rc(tau); visits every sample, uses every stride-th */
static int row_rc(void *ctx, size_t k, double *x, double *y)
{
    struct model *m = ctx;
    const struct series *s = m->s;
    if (k == 0) {
        m->rc = s->i_a[0];
        m->a_dt = -1.0;
    } else {
        /* zero-order hold of the current over the interval */
        double dt = s->t_s[k] - s->t_s[k - 1];
        if (fabs(dt - m->a_dt) > 1e-9 * dt) {
            m->a_dt = dt;
            m->a_val = exp(-dt / m->tau_s);
        }
        m->rc = m->a_val * m->rc + (1.0 - m->a_val) * s->i_a[k - 1];
    }
    if (m->stride > 1 && k % m->stride)
        return 0;
    int c = ocv_basis(m, k, x);
    x[c] = -s->i_a[k];
    x[c + 1] = -m->rc;
    *y = m->y_v[k] - m->v_ref;
    return 1;
}

/* ARX: V[k] = a0 + a1 V[k-1] + b0 I[k] + b1 I[k-1] + c q, on evenly spaced rows */
static int row_arx(void *ctx, size_t j, double *x, double *y)
{
    struct model *m = ctx;
    const struct series *s = m->s;
    size_t k = sample_of(m, j);
    if (k == 0)
        return 0;
    double dt = s->t_s[k] - s->t_s[k - 1];
    if (fabs(dt - m->dt_med) > m->dt_tol)
        return 0;
    x[0] = 1.0;
    x[1] = m->y_v[k - 1] - m->v_ref;
    x[2] = s->i_a[k];
    x[3] = s->i_a[k - 1];
    x[4] = m->u[k];
    *y = m->y_v[k] - m->v_ref;
    return 1;
}

/* Rows a fit over this model visits: RC rows carry state, so all samples. */
static size_t fit_rows(const struct model *m, fit_row_fn row)
{
    return row == row_rc ? m->s->n : rows_of(m);
}

/* A robust fit of all rows, converged first on an even subsample when the
 * log is long (the full-data passes then only polish); plain fits are one
 * pass anyway. */
static enum pb_code fit_model(struct model *m, fit_row_fn row, int p, int robust,
                              struct fit_result *out, struct pb_error *err)
{
    size_t n = m->s->n;
    m->stride = 1;
    enum pb_code rc;
    if (!robust || n < 4 * SEARCH_ROWS) {
        rc = fit_linear(fit_rows(m, row), p, row, m, robust, out, err);
        if (m->work)
            *m->work += out->rows_visited;
        return rc;
    }
    struct fit_result sub;
    m->stride = n / SEARCH_ROWS + 1;
    rc = fit_linear(fit_rows(m, row), p, row, m, 1, &sub, err);
    m->stride = 1;
    if (m->work)
        *m->work += sub.rows_visited;
    if (rc != PB_OK)
        return rc;
    rc = fit_linear_from(n, p, row, m, &sub, out, err);
    if (m->work)
        *m->work += out->rows_visited;
    return rc;
}

static double median_interval(const struct series *s)
{
    size_t n = s->n - 1;
    size_t take = n < DT_SAMPLE_MAX ? n : DT_SAMPLE_MAX;
    double *dt = malloc(take * sizeof *dt);
    if (!dt)
        return s->t_s[s->n - 1] / (double)n;
    for (size_t j = 0; j < take; j++) {
        size_t k = 1 + (take == n ? j : (size_t)((double)j * n / take));
        dt[j] = s->t_s[k] - s->t_s[k - 1];
    }
    double med = fit_median(dt, take);
    free(dt);
    return med;
}

struct tau_search {
    struct model *m;
    int p;
    double rss_best;
    int failed;
};

static double rss_at(double log_tau, void *ctx)
{
    struct tau_search *ts = ctx;
    struct fit_result f;
    ts->m->tau_s = exp(log_tau);
    enum pb_code rc = fit_linear(ts->m->s->n, ts->p, row_rc, ts->m, 0, &f, NULL);
    if (ts->m->work)
        *ts->m->work += f.rows_visited;
    if (rc != PB_OK) {
        ts->failed = 1;
        return HUGE_VAL;
    }
    return f.rss;
}

/* Profiles the RSS over tau (the model is linear in the rest), on a grid
 * seeded by the ARX estimate, then refines the best bracket with Brent's
 * method. Returns tau, or NAN when the best tau is at a grid end. */
static double search_tau(struct model *m, int p, double tau_arx, double duration_s)
{
    double lo = log(fmax(m->dt_med, 1e-3));
    double hi = log(fmax(fmin(duration_s / 3.0, TAU_MAX_S), 2.0 * m->dt_med));
    if (hi - lo < 1.0)
        return NAN;
    struct tau_search ts = {m, p, HUGE_VAL, 0};
    double g[TAU_GRID + 1], f[TAU_GRID + 1];
    int n = 0;
    for (int j = 0; j < TAU_GRID; j++)
        g[n++] = lo + (hi - lo) * j / (TAU_GRID - 1);
    if (isfinite(tau_arx) && log(tau_arx) > lo && log(tau_arx) < hi) {
        /* keep the grid sorted with the ARX point in place */
        double la = log(tau_arx);
        int at = 0;
        while (at < n && g[at] < la)
            at++;
        memmove(&g[at + 1], &g[at], (size_t)(n - at) * sizeof *g);
        g[at] = la;
        n++;
    }
    int best = 0;
    for (int j = 0; j < n; j++) {
        f[j] = rss_at(g[j], &ts);
        if (f[j] < f[best])
            best = j;
    }
    if (ts.failed || best == 0 || best == n - 1)
        return NAN;
    gsl_function fn = {rss_at, &ts};
    gsl_min_fminimizer *mz = gsl_min_fminimizer_alloc(gsl_min_fminimizer_brent);
    if (!mz)
        return exp(g[best]);
    double x = g[best];
    if (gsl_min_fminimizer_set_with_values(mz, &fn, g[best], f[best], g[best - 1], f[best - 1],
                                           g[best + 1], f[best + 1]) == GSL_SUCCESS) {
        for (int it = 0; it < 40; it++) {
            if (gsl_min_fminimizer_iterate(mz) != GSL_SUCCESS)
                break;
            double a = gsl_min_fminimizer_x_lower(mz), b = gsl_min_fminimizer_x_upper(mz);
            x = gsl_min_fminimizer_x_minimum(mz);
            if (gsl_min_test_interval(a, b, 1e-3, 0.0) == GSL_SUCCESS)
                break;
        }
    }
    gsl_min_fminimizer_free(mz);
    return ts.failed ? NAN : exp(x);
}

static double bic(double rss, size_t n, int k)
{
    return (double)n * log(fmax(rss, 1e-300) / (double)n) + k * log((double)n);
}

/* OCV at u = -1 (start) or +1 (end) of the drift polynomial, and its SE. */
static void ocv_at(const struct fit_result *f, int degree, double u, double v_ref, double *v,
                   double *se)
{
    double g[FIT_MAX_P] = {0};
    double p = 1.0;
    for (int j = 0; j <= degree; j++) {
        g[j] = p;
        p *= u;
    }
    double val = v_ref, var = 0.0;
    for (int i = 0; i <= degree; i++) {
        val += g[i] * f->beta[i];
        for (int j = 0; j <= degree; j++)
            var += g[i] * g[j] * f->cov[i][j];
    }
    *v = val;
    *se = sqrt(fmax(var, 0.0));
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
        if (s->ncells > 0 && s->ncells != o->cells)
            warn(a, "cells_mismatch", "--cells %d but the log has %d cell columns", o->cells,
                 s->ncells);
        return;
    }
    if (s->ncells > 0) {
        a->cells = s->ncells;
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

static void voltage_stats(struct analysis *a, const struct series *s)
{
    a->voltage_min_v = HUGE_VAL;
    a->voltage_max_v = -HUGE_VAL;
    for (size_t k = 0; k < s->n; k++) {
        a->voltage_min_v = fmin(a->voltage_min_v, s->v_v[k]);
        a->voltage_max_v = fmax(a->voltage_max_v, s->v_v[k]);
    }
    a->voltage_start_v = s->v_v[0];
    a->voltage_end_v = s->v_v[s->n - 1];
}

static void current_stats(struct analysis *a, const struct series *s, const struct analyze_opts *o,
                          const char *name)
{
    coulomb_count(s->t_s, s->v_v, s->i_a, s->n, a->gap_s, &a->cc);
    a->charge_used_mah = a->cc.discharged_mah - a->cc.regen_mah;
    a->energy_used_wh = a->cc.discharged_wh - a->cc.regen_wh;
    a->current_max_a = -HUGE_VAL;
    a->power_max_w = -HUGE_VAL;
    double imin = HUGE_VAL;
    for (size_t k = 0; k < s->n; k++) {
        a->current_max_a = fmax(a->current_max_a, s->i_a[k]);
        imin = fmin(imin, s->i_a[k]);
        a->power_max_w = fmax(a->power_max_w, s->i_a[k] * s->v_v[k]);
    }
    a->current_mean_a = a->charge_used_mah * 3.6 / a->duration_s;
    a->power_mean_w = a->energy_used_wh * 3600.0 / a->duration_s;
    double peak = fmax(fabs(a->current_max_a), fabs(imin));
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
    /* cruise: intervals whose both ends draw more than the rest current */
    double e_ws = 0.0, t_loaded = 0.0;
    for (size_t j = 1; j < s->n; j++) {
        if (s->i_a[j - 1] > a->rest_a && s->i_a[j] > a->rest_a) {
            double dt = s->t_s[j] - s->t_s[j - 1];
            e_ws += dt * 0.5 * (s->v_v[j - 1] * s->i_a[j - 1] + s->v_v[j] * s->i_a[j]);
            t_loaded += dt;
        }
    }
    a->power_cruise_w = t_loaded > 0.0 ? e_ws / t_loaded : NAN;
    double step_a = fmax(0.25 * (a->current_max_a - imin), 0.5);
    for (size_t j = 1; j < s->n; j++)
        a->current_steps += fabs(s->i_a[j] - s->i_a[j - 1]) > step_a;
    if (a->cc.gaps)
        warn(a, "gaps",
             "%zu gap(s) longer than %.3g s in the log (%.1f s in all, longest %.1f s, the first "
             "ending at %.1f s, %s:%u); %.1f mAh was bridged across them by straight lines",
             a->cc.gaps, a->gap_s, a->cc.gap_total_s, a->cc.gap_longest_s,
             s->t_s[a->cc.gap_first_index], name, s->line[a->cc.gap_first_index],
             a->cc.gap_charge_mah);
    if (o->capacity_mah > 0.0) {
        a->c_rate_max = a->current_max_a / (o->capacity_mah / 1000.0);
        a->c_rate_mean = a->current_mean_a / (o->capacity_mah / 1000.0);
    }
}

static void floor_stats(struct analysis *a, const struct series *s)
{
    if (a->cells <= 0)
        return;
    a->cell_min_loaded_v = a->voltage_min_v / a->cells;
    double floor_pack = a->floor_v * a->cells;
    for (size_t k = 1; k < s->n; k++)
        if (s->v_v[k - 1] < floor_pack)
            a->time_below_floor_s += s->t_s[k] - s->t_s[k - 1];
    if (a->voltage_min_v < floor_pack)
        warn(a, "below_floor",
             "loaded voltage went below the %.2f V/cell floor (lowest %.3f V/cell, %.1f s below): "
             "check the pack for damage before charging",
             a->floor_v, a->cell_min_loaded_v, a->time_below_floor_s);
}

static const char *rest_state(const struct chem_info *c, double ocv_cell_v)
{
    if (ocv_cell_v >= c->full_rest_v)
        return "full";
    if (ocv_cell_v <= c->empty_rest_v)
        return "empty";
    return "partial";
}

static struct estimate soc_of(const struct analysis *a, double ocv_pack_v, double se_pack_v,
                              int *clamped)
{
    double ocv_cell = ocv_pack_v / a->cells;
    double soc = ocv_to_soc(a->chem, ocv_cell, clamped);
    double slope = ocv_soc_slope(a->chem, ocv_cell);
    double fit_ci = 1.96 * slope * se_pack_v / a->cells;
    return (struct estimate){soc, hypot(fit_ci, OCV_TABLE_SOC_ERR_PCT)};
}

/* SoC and rest state at both ends from the OCVs set in a (se: their
 * standard errors); *cl0, *cl1 tell whether the table clamped them. */
static void soc_ends(struct analysis *a, double se0, double se1, int *cl0, int *cl1)
{
    a->soc_start_pct = soc_of(a, a->ocv_start_v, se0, cl0);
    a->soc_end_pct = soc_of(a, a->ocv_end_v, se1, cl1);
    a->state_start = rest_state(a->chem, a->ocv_start_v / a->cells);
    a->state_end = rest_state(a->chem, a->ocv_end_v / a->cells);
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

/* Fits the resistance models to pack voltage; fills r0, rc, OCV ends. */
static enum pb_code fit_pack(struct analysis *a, const struct series *s, const double *u,
                             const struct analyze_opts *o, int identifiable, struct pb_error *err,
                             struct fit_result *chosen, struct model *chosen_model, int *chosen_p)
{
    struct model m = {.s = s,
                      .y_v = s->v_v,
                      .v_ref = s->v_v[0],
                      .u = u,
                      .dt_med = a->median_dt_s,
                      .degree = a->ocv_degree,
                      .work = &a->fit_rows_visited};
    int p = m.degree + 2;
    struct fit_result fs;
    enum pb_code rc = fit_model(&m, row_static, p, !o->plain_fit, &fs, err);
    if (rc != PB_OK)
        return rc;
    *chosen = fs;
    *chosen_model = m;
    *chosen_p = p;
    double r_static = fs.beta[p - 1];
    a->r_static_mohm = (struct estimate){1000.0 * r_static, 1000.0 * fit_ci95(&fs, p - 1)};
    a->fit_sigma_mv = 1000.0 * fs.sigma;
    a->fit_downweighted = fs.n_downweighted;
    a->fit_iterations = fs.iterations;

    /* RC branch: only with step changes in current and a regular sampling,
     * and never for a log whose resistance will not be reported anyway */
    if (!identifiable || a->current_steps == 0 || s->n < 50)
        return PB_OK;
    struct model ma = m;
    ma.dt_tol = 0.1 * a->median_dt_s;
    ma.stride = s->n / SEARCH_ROWS + 1;
    struct fit_result fa;
    double tau_arx = NAN;
    enum pb_code arc = fit_linear(rows_of(&ma), 5, row_arx, &ma, !o->plain_fit, &fa, NULL);
    a->fit_rows_visited += fa.rows_visited;
    if (arc == PB_OK && fa.rank == 5) {
        double a1 = fa.beta[1];
        if (a1 > 0.0 && a1 < 1.0)
            tau_arx = -a->median_dt_s / log(a1);
    }
    struct model mr = m;
    mr.tau_s = 1.0;
    mr.stride = s->n / SEARCH_ROWS + 1;
    double tau = search_tau(&mr, p + 1, tau_arx, a->duration_s);
    if (!isfinite(tau))
        return PB_OK;
    mr.tau_s = tau;
    mr.stride = 1;
    struct fit_result fr;
    if (fit_model(&mr, row_rc, p + 1, !o->plain_fit, &fr, NULL) != PB_OK || fr.rank < p + 1)
        return PB_OK;
    double r1 = fr.beta[p], r1_ci = fit_ci95(&fr, p);
    double r0 = fr.beta[p - 1];
    /* the branch must explain real residual (not rounding of an exact fit),
     * beat the static model by the information criterion, and be a
     * polarisation worth the name: R1 significant and above 2 % of R0 */
    /* compared on the plain residual sums, the RC model paying for R1 and tau */
    double sigma_static = sqrt(fs.rss_plain / (double)s->n);
    int better = sigma_static > 1e-6 && fr.rss_plain < 0.95 * fs.rss_plain &&
                 bic(fr.rss_plain, s->n, p + 2) < bic(fs.rss_plain, s->n, p) - BIC_MARGIN;
    if (!better || !(r1 > r1_ci) || !(r1 > 0.02 * r0) || !(r0 > 0.0))
        return PB_OK;
    a->r1_mohm = (struct estimate){1000.0 * r1, 1000.0 * r1_ci};
    a->tau_s = (struct estimate){tau, NAN};
    *chosen = fr;
    *chosen_model = mr;
    *chosen_p = p + 1;
    a->fit_sigma_mv = 1000.0 * fr.sigma;
    a->fit_downweighted = fr.n_downweighted;
    a->fit_iterations = fr.iterations;
    return PB_OK;
}

static int current_varies(const struct series *s, double peak_a, double *sd_out)
{
    double mean = 0.0, m2 = 0.0;
    for (size_t k = 0; k < s->n; k++) {
        double d = s->i_a[k] - mean;
        mean += d / (double)(k + 1);
        m2 += d * (s->i_a[k] - mean);
    }
    double sd = sqrt(m2 / (double)(s->n > 1 ? s->n - 1 : 1));
    *sd_out = sd;
    return sd >= fmax(0.1, 0.05 * peak_a);
}

static void ends_from_rest(struct analysis *a, const struct series *s, double r_ohm)
{
    /* start: the rest before take-off, if any */
    if (a->rest_start_s >= REST_MIN_START_S) {
        size_t k1 = index_at_or_after(s, a->rest_start_s) + 1;
        a->ocv_start_v = mean_corrected(s, 0, k1 < s->n ? k1 : s->n, r_ohm);
        a->ocv_start_method = "rest";
    }
    double need = REST_MIN_END_S;
    if (isfinite(a->tau_s.value))
        need = fmax(need, 5.0 * a->tau_s.value);
    if (a->rest_end_s >= need && a->rest_end_s < a->duration_s) {
        /* the last fifth of the final rest, when polarisation has relaxed most */
        double t1 = s->t_s[s->n - 1];
        size_t k0 = index_at_or_after(s, t1 - 0.2 * a->rest_end_s);
        a->ocv_end_v = mean_corrected(s, k0, s->n, r_ohm);
        a->ocv_end_method = "rest";
    }
}

/* Per-cell figures; the resistance uses the pack's chosen model (with the
 * pack's tau when the RC branch was fitted) so cells compare with the pack. */
static void per_cell(struct analysis *a, const struct series *s, const double *u,
                     const struct analyze_opts *o, int identifiable)
{
    a->ncells_detail = s->ncells;
    for (int c = 0; c < s->ncells; c++) {
        struct cell_detail *d = &a->cell[c];
        d->index = c + 1;
        d->voltage_min_v = HUGE_VAL;
        for (size_t k = 0; k < s->n; k++)
            d->voltage_min_v = fmin(d->voltage_min_v, s->cell_v[c][k]);
        d->r0_mohm = none();
        d->voltage_rest_v = NAN;
        if (s->i_a && identifiable) {
            struct model m = {.s = s,
                              .y_v = s->cell_v[c],
                              .v_ref = s->cell_v[c][0],
                              .u = u,
                              .degree = a->ocv_degree,
                              .work = &a->fit_rows_visited};
            int is_rc = isfinite(a->tau_s.value);
            int p = m.degree + 2 + is_rc;
            int jr = m.degree + 1;
            m.tau_s = is_rc ? a->tau_s.value : 0.0;
            struct fit_result f;
            if (fit_model(&m, is_rc ? row_rc : row_static, p, !o->plain_fit, &f, NULL) == PB_OK)
                d->r0_mohm = (struct estimate){1000.0 * f.beta[jr], 1000.0 * fit_ci95(&f, jr)};
        }
    }
    if (s->ncells == 0)
        return;
    /* spread: at rest (|I| <= rest threshold, or all samples without current) and under load */
    double rest_sum = 0.0, load_max = -HUGE_VAL;
    size_t rest_n = 0;
    double rest_cell_sum[PB_MAX_CELLS] = {0};
    for (size_t k = 0; k < s->n; k++) {
        double lo = HUGE_VAL, hi = -HUGE_VAL;
        for (int c = 0; c < s->ncells; c++) {
            lo = fmin(lo, s->cell_v[c][k]);
            hi = fmax(hi, s->cell_v[c][k]);
        }
        int at_rest = s->i_a ? fabs(s->i_a[k]) <= a->rest_a : k == 0;
        if (at_rest) {
            rest_sum += hi - lo;
            rest_n++;
            for (int c = 0; c < s->ncells; c++)
                rest_cell_sum[c] += s->cell_v[c][k];
        } else {
            load_max = fmax(load_max, hi - lo);
        }
    }
    a->spread_rest_mv = rest_n ? 1000.0 * rest_sum / (double)rest_n : NAN;
    a->spread_load_mv = isfinite(load_max) ? 1000.0 * load_max : NAN;
    for (int c = 0; c < s->ncells && rest_n; c++)
        a->cell[c].voltage_rest_v = rest_cell_sum[c] / (double)rest_n;
    if (!rest_n)
        warn(a, "no_rest_samples", "no samples at rest: cell spread at rest is unknown");
    int weakest = 0;
    for (int c = 1; c < s->ncells; c++) {
        const struct cell_detail *w = &a->cell[weakest], *d = &a->cell[c];
        if (d->voltage_min_v < w->voltage_min_v ||
            (d->voltage_min_v == w->voltage_min_v && d->r0_mohm.value > w->r0_mohm.value))
            weakest = c;
    }
    a->weakest_cell = weakest + 1;
}

/* ---- entry ------------------------------------------------------------ */

enum pb_code analyze_series(const struct series *s, const struct logread_stats *st,
                            const char *name, const struct analyze_opts *o, struct analysis *a,
                            struct pb_error *err)
{
    enum pb_code rc = PB_OK;
    double *u = NULL;

    a->samples = s->n;
    a->duration_s = s->t_s[s->n - 1];
    a->has_epoch = s->has_epoch;
    a->start_epoch_s = s->start_epoch_s;
    a->has_current = s->i_a != NULL;
    a->has_temp = s->temp_c != NULL;
    a->r0_mohm = a->r_static_mohm = a->r1_mohm = a->tau_s = none();
    a->soc_start_pct = a->soc_end_pct = a->capacity_mah = none();
    a->ocv_start_v = a->ocv_end_v = NAN;
    a->charge_used_mah = a->energy_used_wh = NAN;
    a->current_max_a = a->current_mean_a = a->power_max_w = a->power_mean_w = NAN;
    a->power_cruise_w = NAN;
    a->c_rate_max = a->c_rate_mean = NAN;
    a->cell_min_loaded_v = NAN;
    a->spread_rest_mv = a->spread_load_mv = NAN;
    a->temp_min_c = a->temp_max_c = NAN;

    reader_warnings(a, st, name);
    a->chem = ocv_chem(o->chemistry >= 0 ? (enum chemistry)o->chemistry : CHEM_LIPO);
    a->chem_assumed = o->chemistry < 0;
    if (a->chem_assumed)
        warn(a, "chemistry_assumed", "chemistry not given: LiPo assumed (set --chemistry)");
    a->floor_v = o->floor_v > 0.0 ? o->floor_v : a->chem->floor_v;
    a->median_dt_s = median_interval(s);
    a->gap_s = o->gap_s > 0.0 ? o->gap_s : fmax(1.0, 5.0 * a->median_dt_s);

    voltage_stats(a, s);
    infer_cells(a, s, o);
    floor_stats(a, s);
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

    int identifiable = 0;
    double r_ohm = 0.0;
    if (!s->i_a) {
        warn(a, "voltage_only",
             "the log has no current: charge, energy, resistance and capacity need a current "
             "sensor; SoC is read from the loaded voltage and is a lower bound");
    } else if (s->n < MIN_FIT_SAMPLES) {
        current_stats(a, s, o, name);
        warn(a, "too_few_samples",
             "%zu samples are too few to fit resistance or open-circuit voltage (need %d)", s->n,
             MIN_FIT_SAMPLES);
    } else {
        current_stats(a, s, o, name);
        double sd;
        identifiable = current_varies(s, fmax(fabs(a->current_max_a), 1e-9), &sd);
        /* the OCV drift runs on the charge drawn, normalised to [-1, 1]:
         * cubic when the charge moves, constant when it does not */
        a->q_end_ah = a->charge_used_mah / 1000.0;
        a->ocv_degree = fabs(a->charge_used_mah) > 1e-3 && s->n >= 40 ? 3 : 0;
        u = malloc(s->n * sizeof *u);
        if (!u) {
            rc = pb_error_set(err, PB_ENOMEM, "out of memory");
            goto cleanup;
        }
        double q_ah = 0.0;
        for (size_t k = 0; k < s->n; k++) {
            if (k > 0)
                q_ah += coulomb_step_ah(s->t_s[k] - s->t_s[k - 1], s->i_a[k - 1], s->i_a[k]);
            u[k] = a->ocv_degree > 0 ? 2.0 * q_ah / a->q_end_ah - 1.0 : 0.0;
        }
        struct fit_result f;
        struct model m;
        int p = 0;
        rc = fit_pack(a, s, u, o, identifiable, err, &f, &m, &p);
        if (rc != PB_OK)
            goto cleanup;
        int is_rc = isfinite(a->tau_s.value);
        int jr = is_rc ? p - 2 : p - 1;
        double r0 = f.beta[jr], r0_ci = fit_ci95(&f, jr);
        if (!identifiable) {
            warn(a, "r0_not_identifiable",
                 "the current barely varies (sd %.3g A): resistance cannot be told apart from "
                 "the falling open-circuit voltage, so it is not reported",
                 sd);
            a->r_static_mohm = none();
            a->r1_mohm = a->tau_s = none();
        } else if (f.rank < p || !(fabs(r0_ci) < fabs(r0))) {
            warn(a, "r0_uncertain",
                 "the resistance fit is too uncertain to report (%.3g +/- %.3g mOhm)", 1000.0 * r0,
                 1000.0 * r0_ci);
            identifiable = 0;
            a->r_static_mohm = a->r1_mohm = a->tau_s = none();
        } else {
            a->r0_mohm = (struct estimate){1000.0 * r0, 1000.0 * r0_ci};
            a->r0_method = is_rc ? "rc" : "static";
            r_ohm = r0;
            if (r0 < 0.0)
                warn(a, "r0_negative",
                     "the fitted resistance is negative: the log's voltage and "
                     "current may be out of step or the current sign wrong");
        }
        for (int j = 0; j <= m.degree && j < OCV_POLY_MAX; j++)
            a->ocv_coef_v[j] = f.beta[j] + (j == 0 ? m.v_ref : 0.0);
        double se0 = 0.0, se1 = 0.0;
        ocv_at(&f, m.degree, -1.0, m.v_ref, &a->ocv_start_v, &se0);
        ocv_at(&f, m.degree, 1.0, m.v_ref, &a->ocv_end_v, &se1);
        a->ocv_start_method = a->ocv_end_method = "fit";
        if (!identifiable) {
            /* without a resistance, the R column would trade off against the
             * constant term: the OCV ends come from the loaded voltage trend */
            struct model mv = {.s = s,
                               .y_v = s->v_v,
                               .v_ref = s->v_v[0],
                               .u = u,
                               .degree = a->ocv_degree,
                               .work = &a->fit_rows_visited};
            struct fit_result fv;
            if (fit_model(&mv, row_ocv_only, mv.degree + 1, !o->plain_fit, &fv, NULL) == PB_OK) {
                ocv_at(&fv, mv.degree, -1.0, mv.v_ref, &a->ocv_start_v, &se0);
                ocv_at(&fv, mv.degree, 1.0, mv.v_ref, &a->ocv_end_v, &se1);
                for (int j = 0; j <= mv.degree && j < OCV_POLY_MAX; j++)
                    a->ocv_coef_v[j] = fv.beta[j] + (j == 0 ? mv.v_ref : 0.0);
            }
            a->ocv_start_method = a->ocv_end_method = "loaded";
        }
        ends_from_rest(a, s, r_ohm);
        if (a->cells > 0) {
            int cl0 = 0, cl1 = 0;
            soc_ends(a, se0, se1, &cl0, &cl1);
            if (cl0 || cl1)
                warn(a, "ocv_outside_table",
                     "open-circuit voltage %.3f V/cell lies outside the %s table: SoC clamped; "
                     "check --cells and --chemistry",
                     (cl0 ? a->ocv_start_v : a->ocv_end_v) / a->cells, a->chem->label);
            /* a charging log works too: charge and SoC swing both negative */
            double dsoc = a->soc_start_pct.value - a->soc_end_pct.value;
            if (cl0 || cl1) {
                warn(a, "capacity_not_estimable",
                     "capacity needs SoC inside the table at both ends");
            } else if (fabs(dsoc) < MIN_SOC_SWING_PCT || (dsoc > 0) != (a->charge_used_mah > 0)) {
                warn(a, "capacity_not_estimable",
                     "capacity needs a SoC swing of at least %.0f points in the direction of the "
                     "charge drawn; this log has %.1f points for %.0f mAh",
                     MIN_SOC_SWING_PCT, -dsoc, a->charge_used_mah);
            } else {
                double cap = a->charge_used_mah / (dsoc / 100.0);
                double rel = hypot(a->soc_start_pct.ci95, a->soc_end_pct.ci95) / dsoc;
                double q_rel = a->charge_used_mah != 0.0
                                   ? fabs(a->cc.gap_charge_mah) / a->charge_used_mah
                                   : 0.0;
                a->capacity_mah = (struct estimate){cap, cap * hypot(rel, q_rel)};
                if (o->capacity_mah > 0.0 && cap < 0.8 * o->capacity_mah)
                    warn(a, "capacity_low",
                         "estimated capacity %.0f mAh is %.0f %% of the rated %.0f mAh", cap,
                         100.0 * cap / o->capacity_mah, o->capacity_mah);
            }
        }
    }
    int few = s->i_a && s->n < MIN_FIT_SAMPLES;
    if (!s->i_a || few) {
        /* no resistance to correct the sag: SoC from the loaded voltage */
        a->ocv_start_v = a->voltage_start_v;
        a->ocv_end_v = a->voltage_end_v;
        a->ocv_start_method = a->ocv_end_method = "loaded";
        if (a->cells > 0) {
            int cl0 = 0, cl1 = 0;
            soc_ends(a, 0.0, 0.0, &cl0, &cl1);
        }
        warn(a, "capacity_not_estimable",
             few ? "capacity needs a fitted open-circuit voltage at both ends"
                 : "capacity needs a current sensor");
    }
    if (a->cells <= 0)
        warn(a, "soc_not_estimable", "SoC needs the cell count (give --cells)");
    per_cell(a, s, u, o, identifiable);
    if (s->ncells > 0 && !st->voltage_from_cells) {
        double worst = 0.0;
        for (size_t k = 0; k < s->n; k += 1 + s->n / 1000) {
            double sum = 0.0;
            for (int c = 0; c < s->ncells; c++)
                sum += s->cell_v[c][k];
            worst = fmax(worst, fabs(sum - s->v_v[k]) / fmax(s->v_v[k], 1e-9));
        }
        if (worst > 0.03)
            warn(a, "cells_sum_mismatch",
                 "the cell voltages differ from the pack voltage by up to %.1f %%: check the "
                 "balance lead and the column mapping",
                 100.0 * worst);
    }
cleanup:
    free(u);
    return rc;
}

void analyze_rows(const struct series *s, const struct analysis *a, double rated_mah,
                  void (*emit)(void *ctx, const struct sample_row *row), void *ctx)
{
    double r0 = a->r0_mohm.value / 1000.0;
    double r1 = a->r1_mohm.value / 1000.0, tau = a->tau_s.value;
    int rc = isfinite(r1) && isfinite(tau) && tau > 0;
    double cap_ah = isfinite(a->capacity_mah.value) ? a->capacity_mah.value / 1000.0
                    : rated_mah > 0                  ? rated_mah / 1000.0
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
