#define _GNU_SOURCE
#include "health.h"

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_multifit.h>
#include <gsl/gsl_statistics_double.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "isotime.h"
#include "rlsq.h"

void health_rules_default(struct health_rules *r)
{
    r->retire_capacity_pct = HEALTH_RETIRE_CAPACITY_PCT;
    r->watch_capacity_pct = HEALTH_WATCH_CAPACITY_PCT;
    r->retire_r0_ratio = HEALTH_RETIRE_R0_RATIO;
    r->watch_r0_ratio = HEALTH_WATCH_R0_RATIO;
    r->retire_spread_mv = HEALTH_RETIRE_IMBALANCE_MV;
    r->watch_spread_mv = HEALTH_WATCH_IMBALANCE_MV;
    r->retire_overdischarge = HEALTH_RETIRE_OVERDISCHARGES;
    r->watch_overdischarge = HEALTH_WATCH_OVERDISCHARGES;
    r->baseline_flights = HEALTH_BASELINE_FLIGHTS;
    r->recent_flights = HEALTH_RECENT_FLIGHTS;
}

const char *health_status_name(enum health_status s)
{
    switch (s) {
    case HEALTH_OK:
        return "ok";
    case HEALTH_WATCH:
        return "watch";
    case HEALTH_RETIRE:
        return "retire";
    }
    return "?";
}

/* Median of the first (or last) `want` known values of one field. */
static double median_end(const struct health_flight *f, size_t n,
                         double (*get)(const struct health_flight *), size_t want, int last)
{
    double buf[64];
    size_t m = 0;
    for (size_t j = 0; j < n && m < want && m < 64; j++) {
        double v = get(&f[last ? n - 1 - j : j]);
        if (isfinite(v))
            buf[m++] = v;
    }
    return m ? gsl_stats_median(buf, 1, m) : NAN;
}

/* Only physical values take part: a resistance or capacity <= 0 (which
 * older versions could store) is no measurement. */
static double get_r0(const struct health_flight *f)
{
    return f->r0_mohm > 0.0 ? f->r0_mohm : NAN;
}
static double get_cap(const struct health_flight *f)
{
    return f->capacity_mah > 0.0 ? f->capacity_mah : NAN;
}

/* The pack's capacity now: over the last `want` flights with an estimate,
 * the median weighted by each estimate's precision (1 / half-width^2). A
 * weighted median is the least-absolute-deviation fit of one level to the
 * estimates, so a measurement to the cut-off (narrow interval) counts for
 * more than a short flight's SoC swing, and one odd flight cannot move it
 * past its neighbours. Estimates without an interval weigh as the widest. */
static double capacity_now(const struct health_flight *f, size_t n, size_t want)
{
    double v[64], w[64], total = 0.0;
    size_t m = 0;
    for (size_t j = 0; j < n && m < want && m < 64; j++) {
        const struct health_flight *x = &f[n - 1 - j];
        double c = get_cap(x);
        if (!isfinite(c))
            continue;
        /* no estimate counts as better than 1 % (common practice: current
         * sensors of flight logs are calibrated to about 1 %), so equally
         * good measurements weigh equally whatever their last interval */
        double ci = fmax(x->capacity_ci95_mah, 0.01 * c);
        v[m] = c;
        w[m] = isfinite(ci) && ci > 0.0 ? 1.0 / (ci * ci) : NAN;
        m++;
    }
    if (m == 0)
        return NAN;
    double wmin = HUGE_VAL;
    for (size_t k = 0; k < m; k++)
        if (isfinite(w[k]))
            wmin = fmin(wmin, w[k]);
    for (size_t k = 0; k < m; k++) {
        if (!isfinite(w[k]))
            w[k] = isfinite(wmin) ? wmin : 1.0;
        total += w[k];
    }
    /* sort by value (m <= 64: insertion sort) and take the weighted middle */
    for (size_t i = 1; i < m; i++)
        for (size_t k = i; k > 0 && v[k - 1] > v[k]; k--) {
            double tv = v[k], tw = w[k];
            v[k] = v[k - 1];
            w[k] = w[k - 1];
            v[k - 1] = tv;
            w[k - 1] = tw;
        }
    double acc = 0.0;
    for (size_t k = 0; k < m; k++) {
        acc += w[k];
        if (acc >= 0.5 * total - 1e-12 * total) {
            /* exactly half on each side: the mean of the two middle values */
            if (fabs(acc - 0.5 * total) <= 1e-12 * total && k + 1 < m)
                return 0.5 * (v[k] + v[k + 1]);
            return v[k];
        }
    }
    return v[m - 1];
}
static double get_spread(const struct health_flight *f)
{
    return f->spread_rest_mv;
}

static void add_reason(struct pack_health *h, enum health_status level, const char *fmt, ...)
    __attribute__((format(printf, 3, 4)));

static void add_reason(struct pack_health *h, enum health_status level, const char *fmt, ...)
{
    if (level > h->status)
        h->status = level;
    size_t used = strlen(h->reason);
    if (used + 3 >= sizeof h->reason)
        return;
    if (used)
        used += (size_t)snprintf(h->reason + used, sizeof h->reason - used, "; ");
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(h->reason + used, sizeof h->reason - used, fmt, ap);
    va_end(ap);
}

void health_add_finding(struct pack_health *h, enum health_status level, const char *text)
{
    /* "within all limits" no longer holds */
    if (h->status == HEALTH_OK)
        h->reason[0] = '\0';
    add_reason(h, level, "%s", text);
}

void health_assess(const struct health_flight *f, size_t n, int cells, double rated_mah,
                   const struct health_rules *r, struct pack_health *h)
{
    memset(h, 0, sizeof *h);
    h->flights = n;
    h->last_epoch_s = n ? f[n - 1].epoch_s : NAN;
    double q = 0.0;
    for (size_t k = 0; k < n; k++) {
        if (isfinite(f[k].charge_mah) && f[k].charge_mah > 0)
            q += f[k].charge_mah;
        h->overdischarges += f[k].below_floor != 0;
    }
    h->cycles = rated_mah > 0 ? q / rated_mah : NAN;
    size_t recent = (size_t)r->recent_flights;
    /* baseline from the first flights, "now" from the last ones */
    h->r0_base_mohm_cell = median_end(f, n, get_r0, (size_t)r->baseline_flights, 0) / cells;
    h->r0_now_mohm_cell = median_end(f, n, get_r0, recent, 1) / cells;
    h->r0_ratio = h->r0_now_mohm_cell / h->r0_base_mohm_cell;
    h->capacity_pct = 100.0 * capacity_now(f, n, recent) / rated_mah;
    h->spread_mv = median_end(f, n, get_spread, recent, 1);
    /* the weakest cell: the one named most often by the last flights that name one (a tie
     * goes to the one named most recently) */
    int seen[64] = {0};
    for (size_t k = n; k-- > 0 && h->weakest_of < recent;) {
        int c = f[k].weakest_cell;
        if (c < 1 || c > 63)
            continue;
        h->weakest_of++;
        if (++seen[c] > (int)h->weakest_count) {
            h->weakest_count = (size_t)seen[c];
            h->weakest_cell = c;
        }
    }
    if (n == 0) {
        snprintf(h->reason, sizeof h->reason, "no flights yet");
        return;
    }
    if (h->capacity_pct <= r->retire_capacity_pct)
        add_reason(h, HEALTH_RETIRE, "capacity %.0f %% of rated <= %.0f %%", h->capacity_pct,
                   r->retire_capacity_pct);
    else if (h->capacity_pct <= r->watch_capacity_pct)
        add_reason(h, HEALTH_WATCH, "capacity %.0f %% of rated <= %.0f %%", h->capacity_pct,
                   r->watch_capacity_pct);
    /* a ratio means something only once "now" is more than the baseline */
    if (n > (size_t)r->baseline_flights && isfinite(h->r0_ratio)) {
        if (h->r0_ratio >= r->retire_r0_ratio)
            add_reason(h, HEALTH_RETIRE, "IR %.2f mOhm/cell is %.2fx its baseline %.2f (>= %.1fx)",
                       h->r0_now_mohm_cell, h->r0_ratio, h->r0_base_mohm_cell, r->retire_r0_ratio);
        else if (h->r0_ratio >= r->watch_r0_ratio)
            add_reason(h, HEALTH_WATCH, "IR %.2f mOhm/cell is %.2fx its baseline %.2f (>= %.1fx)",
                       h->r0_now_mohm_cell, h->r0_ratio, h->r0_base_mohm_cell, r->watch_r0_ratio);
    }
    if (h->spread_mv >= r->retire_spread_mv)
        add_reason(h, HEALTH_RETIRE, "cell imbalance at rest %.0f mV >= %.0f mV", h->spread_mv,
                   r->retire_spread_mv);
    else if (h->spread_mv >= r->watch_spread_mv)
        add_reason(h, HEALTH_WATCH, "cell imbalance at rest %.0f mV >= %.0f mV", h->spread_mv,
                   r->watch_spread_mv);
    if (h->overdischarges >= r->retire_overdischarge)
        add_reason(h, HEALTH_RETIRE,
                   "%d over-discharges (flights under the cut-off voltage, >= %d)",
                   h->overdischarges, r->retire_overdischarge);
    else if (h->overdischarges >= r->watch_overdischarge)
        add_reason(h, HEALTH_WATCH, "%d over-discharge%s (flight%s under the cut-off voltage)",
                   h->overdischarges, h->overdischarges == 1 ? "" : "s",
                   h->overdischarges == 1 ? "" : "s");
    if (h->status == HEALTH_OK)
        snprintf(h->reason, sizeof h->reason, "within all limits");
}

struct line_fit health_line(const double *x, const double *y, size_t n, int plain)
{
    struct line_fit l = {0};
    size_t m = 0;
    for (size_t k = 0; k < n; k++)
        m += isfinite(x[k]) && isfinite(y[k]);
    l.n = m;
    if (m < 3)
        return l;
    gsl_matrix *X = gsl_matrix_alloc(m, 2);
    gsl_vector *Y = gsl_vector_alloc(m);
    gsl_vector *c = gsl_vector_alloc(2);
    gsl_matrix *cov = gsl_matrix_alloc(2, 2);
    if (!X || !Y || !c || !cov)
        goto cleanup;
    size_t j = 0;
    double xmin = HUGE_VAL, xmax = -HUGE_VAL;
    for (size_t k = 0; k < n; k++) {
        if (!(isfinite(x[k]) && isfinite(y[k])))
            continue;
        gsl_matrix_set(X, j, 0, 1.0);
        gsl_matrix_set(X, j, 1, x[k]);
        gsl_vector_set(Y, j, y[k]);
        xmin = fmin(xmin, x[k]);
        xmax = fmax(xmax, x[k]);
        j++;
    }
    if (!(xmax > xmin))
        goto cleanup;
    int rc;
    double sigma;
    if (plain || m < 5) {
        /* too few points for reweighting to mean anything */
        double chisq;
        gsl_multifit_linear_workspace *w = gsl_multifit_linear_alloc(m, 2);
        if (!w)
            goto cleanup;
        rc = gsl_multifit_linear(X, Y, c, cov, &chisq, w);
        gsl_multifit_linear_free(w);
        sigma = sqrt(chisq / (double)(m - 2));
        /* gsl_multifit_linear's cov is (X'X)^-1 scaled by the residual variance */
    } else {
        /* GSL's bisquare method without its per-call SVD (rlsq.h): the
         * departure scan fits a line for every flight. X is m x 2,
         * row-major and contiguous (tda 2). A fit that did not settle in
         * its rounds is no line, as GSL's GSL_EMAXITER was. */
        struct rlsq_work *w = rlsq_work_new(m);
        if (!w)
            goto cleanup;
        struct rlsq_fit f;
        rc = rlsq_bisquare(X->data, Y->data, m, 2, w, &f) == 0 && f.converged ? 0 : -1;
        rlsq_work_free(w);
        if (rc == 0) {
            gsl_vector_set(c, 0, f.coef[0]);
            gsl_vector_set(c, 1, f.coef[1]);
            gsl_matrix_set(cov, 0, 0, f.cov[0]);
            gsl_matrix_set(cov, 0, 1, f.cov[1]);
            gsl_matrix_set(cov, 1, 1, f.cov[3]);
        }
        sigma = f.sigma;
    }
    if (rc != 0)
        goto cleanup;
    l.ok = 1;
    l.a = gsl_vector_get(c, 0);
    l.b = gsl_vector_get(c, 1);
    l.sigma = sigma;
    l.t95 = gsl_cdf_tdist_Pinv(0.975, (double)(m - 2));
    l.cov_aa = gsl_matrix_get(cov, 0, 0);
    l.cov_ab = gsl_matrix_get(cov, 0, 1);
    l.cov_bb = gsl_matrix_get(cov, 1, 1);
    l.b_ci95 = l.t95 * sqrt(l.cov_bb);
cleanup:
    gsl_matrix_free(X);
    gsl_vector_free(Y);
    gsl_vector_free(c);
    gsl_matrix_free(cov);
    return l;
}

double health_line_band(const struct line_fit *l, double x)
{
    if (!l->ok)
        return NAN;
    double var = l->cov_aa + 2.0 * x * l->cov_ab + x * x * l->cov_bb;
    return l->t95 * sqrt(var > 0.0 ? var : 0.0);
}

double health_line_predict_band(const struct line_fit *l, double x)
{
    if (!l->ok)
        return NAN;
    double var = l->cov_aa + 2.0 * x * l->cov_ab + x * x * l->cov_bb;
    return l->t95 * sqrt(l->sigma * l->sigma + (var > 0.0 ? var : 0.0));
}

int health_crossing(const struct line_fit *l, double level, int rising, double x_now,
                    double *x_cross)
{
    if (!l->ok)
        return 0;
    double y_now = l->a + l->b * x_now;
    if (rising ? y_now >= level : y_now <= level)
        return -1;
    /* heading the other way, or a slope its own interval cannot tell from 0 */
    if ((rising ? l->b <= 0.0 : l->b >= 0.0) || fabs(l->b) <= l->b_ci95)
        return 0;
    *x_cross = (level - l->a) / l->b;
    return 1;
}

/* ---- trends ------------------------------------------------------------ */

static void bucket_key(enum trend_by by, double epoch_s, double cycles, char *key, size_t cap)
{
    if (by == TREND_CYCLE) {
        double lo = floor(cycles / TREND_CYCLE_BUCKET) * TREND_CYCLE_BUCKET;
        snprintf(key, cap, "cycles %g-%g", lo, lo + TREND_CYCLE_BUCKET);
        return;
    }
    if (by == TREND_MONTH) {
        time_t t = (time_t)floor(epoch_s);
        struct tm tm;
        gmtime_r(&t, &tm);
        snprintf(key, cap, "%04d-%02d", tm.tm_year + 1900, tm.tm_mon + 1);
        return;
    }
    int y = 0, w = 0;
    isotime_week(epoch_s, &y, &w);
    snprintf(key, cap, "%04d-W%02d", y, w);
}

static int trend_line_fit(struct trend_line *tl, const double *cyc, const double *days,
                          const double *y, size_t n, int plain, double level, int rising,
                          double cycles_now, double days_now, double first_epoch, double horizon)
{
    tl->vs_cycles = health_line(cyc, y, n, plain);
    tl->vs_days = health_line(days, y, n, plain);
    tl->level = level;
    tl->cross_cycles = tl->cross_epoch_s = tl->plan_epoch_s = NAN;
    if (life_project(cyc, y, n, level, rising, cycles_now, horizon, &tl->life) != 0)
        return -1;
    if (isfinite(tl->life.early) && cycles_now > 0.0 && days_now > 0.0)
        tl->plan_epoch_s = first_epoch + tl->life.early * (days_now / cycles_now) * 86400.0;
    if (!isfinite(level))
        return 0;
    double xc, xd;
    int c = health_crossing(&tl->vs_cycles, level, rising, cycles_now, &xc);
    if (c < 0) {
        /* whether the rule has fired is the caller's to say (from the
         * pack's state), so every view words it the same */
        tl->line_past = 1;
        return 0;
    }
    if (c > 0) {
        if (xc - cycles_now > horizon)
            tl->beyond_horizon = 1;
        else
            tl->cross_cycles = xc;
    }
    if (health_crossing(&tl->vs_days, level, rising, days_now, &xd) > 0 && !tl->beyond_horizon)
        tl->cross_epoch_s = first_epoch + xd * 86400.0;
    return 0;
}

int health_trend(const struct health_flight *f, size_t n, int cells, double rated_mah,
                 const struct health_rules *rules, enum trend_by by, int plain, double horizon,
                 struct pack_trend *t)
{
    memset(t, 0, sizeof *t);
    /* nothing known yet: no level (no baseline), no crossing */
    t->r0.level = t->capacity.level = NAN;
    t->r0.cross_cycles = t->r0.cross_epoch_s = NAN;
    t->capacity.cross_cycles = t->capacity.cross_epoch_s = NAN;
    t->r0.plan_epoch_s = t->capacity.plan_epoch_s = NAN;
    t->r0.life.early = t->r0.life.middle = t->r0.life.late = NAN;
    t->capacity.life.early = t->capacity.life.middle = t->capacity.life.late = NAN;
    if (n == 0)
        return 0;
    double *cyc = malloc(n * sizeof *cyc), *days = malloc(n * sizeof *days);
    double *r0 = malloc(n * sizeof *r0), *cap = malloc(n * sizeof *cap);
    t->buckets = calloc(n, sizeof *t->buckets);
    if (!cyc || !days || !r0 || !cap || !t->buckets) {
        free(cyc), free(days), free(r0), free(cap);
        health_trend_release(t);
        return -1;
    }
    double q = 0.0;
    for (size_t k = 0; k < n; k++) {
        /* a flight's cycle count is the charge drawn before and during it */
        if (isfinite(f[k].charge_mah) && f[k].charge_mah > 0)
            q += f[k].charge_mah;
        cyc[k] = q / rated_mah;
        days[k] = (f[k].epoch_s - f[0].epoch_s) / 86400.0;
        r0[k] = get_r0(&f[k]) / cells;
        cap[k] = 100.0 * get_cap(&f[k]) / rated_mah;

        char key[40];
        bucket_key(by, f[k].epoch_s, cyc[k], key, sizeof key);
        struct trend_bucket *b = t->nbuckets ? &t->buckets[t->nbuckets - 1] : NULL;
        if (!b || strcmp(b->key, key) != 0) {
            b = &t->buckets[t->nbuckets++];
            snprintf(b->key, sizeof b->key, "%s", key);
            b->first_epoch_s = f[k].epoch_s;
            b->r0_mohm_cell = b->capacity_pct = 0.0;
        }
        b->flights++;
        b->last_epoch_s = f[k].epoch_s;
        if (isfinite(f[k].charge_mah))
            b->charge_mah += f[k].charge_mah;
    }
    /* bucket means of the known values */
    size_t k = 0;
    for (size_t j = 0; j < t->nbuckets; j++) {
        struct trend_bucket *b = &t->buckets[j];
        double rs = 0, cs = 0;
        size_t rn = 0, cn = 0;
        for (size_t m = 0; m < b->flights; m++, k++) {
            if (isfinite(r0[k]))
                rs += r0[k], rn++;
            if (isfinite(cap[k]))
                cs += cap[k], cn++;
        }
        b->r0_mohm_cell = rn ? rs / (double)rn : NAN; /* counts convert exactly */
        b->capacity_pct = cn ? cs / (double)cn : NAN;
    }
    t->cycles_now = cyc[n - 1];
    t->days_now = days[n - 1];
    struct pack_health h;
    health_assess(f, n, cells, rated_mah, rules, &h);
    int bad = trend_line_fit(&t->r0, cyc, days, r0, n, plain,
                             rules->retire_r0_ratio * h.r0_base_mohm_cell, 1, t->cycles_now,
                             t->days_now, f[0].epoch_s, horizon);
    bad |= trend_line_fit(&t->capacity, cyc, days, cap, n, plain, rules->retire_capacity_pct, 0,
                          t->cycles_now, t->days_now, f[0].epoch_s, horizon);
    /* "reached" means what the retirement rule says now (health_assess), in
     * trend, compare, fleet and the figures alike */
    t->r0.crossed = n > (size_t)rules->baseline_flights && isfinite(h.r0_ratio) &&
                    h.r0_ratio >= rules->retire_r0_ratio;
    t->capacity.crossed = isfinite(h.capacity_pct) && h.capacity_pct <= rules->retire_capacity_pct;
    free(cyc), free(days), free(r0), free(cap);
    if (bad) {
        health_trend_release(t);
        return -1;
    }
    return 0;
}

int health_plan(const struct pack_trend *t, double *cycles, double *epoch_s, const char **what)
{
    const struct trend_line *q[2] = {&t->capacity, &t->r0};
    static const char *const names[2] = {"capacity", "R0"};
    *cycles = *epoch_s = NAN;
    *what = NULL;
    for (int j = 0; j < 2; j++) {
        double e = q[j]->life.early;
        if (isfinite(e) && !(e >= *cycles)) {
            *cycles = e;
            *epoch_s = q[j]->plan_epoch_s;
            *what = names[j];
        }
    }
    return *what != NULL;
}

void health_trend_release(struct pack_trend *t)
{
    free(t->buckets);
    t->buckets = NULL;
    t->nbuckets = 0;
}
