#define _GNU_SOURCE /* gmtime_r */
/* The trend figure: one pack's resistance and capacity across its history. */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "plot.h"
#include "plots.h"
#include "report_health.h"

#define LINE_POINTS 120 /* samples along a fitted line and its band */

static void iso_day(double epoch_s, char *buf, size_t cap)
{
    time_t t = (time_t)llround(epoch_s);
    struct tm tm;
    gmtime_r(&t, &tm);
    strftime(buf, cap, "%Y-%m-%d", &tm);
}

/* One quantity's panel: its per-flight values, level and fitted line. */
struct quantity {
    const char *name, *unit;
    double *y; /* per flight, NAN when unknown */
    const struct trend_line *tl;
    double watch_level;
};

/* Where the line of this view (cycles or dates) reaches the retire level,
 * as text: "17 cycles, 2026-06-16", "2026-09-16" or "17 cycles". Returns 0
 * when this view's line projects no crossing. */
static int crossing_where(const struct trend_line *tl, int by_date, char *buf, size_t cap)
{
    int cyc = isfinite(tl->cross_cycles), day = isfinite(tl->cross_epoch_s);
    if (by_date ? !day : !cyc)
        return 0;
    char d[32] = "", c[40] = "";
    if (day)
        iso_day(tl->cross_epoch_s, d, sizeof d);
    if (cyc)
        snprintf(c, sizeof c, "%.0f cycles", tl->cross_cycles);
    /* each view leads with its own axis */
    snprintf(buf, cap, "%s%s%s", by_date ? d : c, d[0] && c[0] ? ", " : "", by_date ? c : d);
    return 1;
}

/* What the line says about the retirement level, for the title block. */
static void crossing_text(const struct trend_line *tl, const struct line_fit *l, int by_date,
                          const char *what, const char *unit, double per, const char *per_unit,
                          char *buf, size_t cap)
{
    char where[64];
    char slope[96] = "", when[160];
    if (!l->ok) {
        snprintf(buf, cap, "%s: too few flights with a value for a line (3 needed, %zu)", what,
                 l->n);
        return;
    }
    snprintf(slope, sizeof slope, "%+.2f \u00b1 %.2f %s per %g %s", l->b * per, l->b_ci95 * per,
             unit, per, per_unit);
    if (tl->crossed)
        snprintf(when, sizeof when, "retirement level reached (the rule fires)");
    else if (tl->line_past)
        snprintf(when, sizeof when, "line past the retirement level; recent flights not yet");
    else if (crossing_where(tl, by_date, where, sizeof where))
        snprintf(when, sizeof when, "reaches the retirement level at \u2248 %s", where);
    else if (tl->beyond_horizon)
        snprintf(when, sizeof when, "no crossing within the horizon");
    else
        snprintf(when, sizeof when, "no crossing projected (slope not told from zero, or away)");
    snprintf(buf, cap, "%s: %s \u00b7 %s", what, slope, when);
}

/* The cells panel: each flight's resting cell imbalance with the number of
 * its weakest cell (lowest under load) beside the mark, the retire and watch
 * levels (the title block says which cell was weakest most often lately).
 * Numbers are written where the weakest cell changes (and at the last
 * flight) when there are too many flights to name each. */
static void draw_cells(struct plot *p, struct plot_panel *pp, const struct pack_view *v,
                       const struct health_rules *rules, const double *x, const double *imb,
                       double fs, const struct plot_style *st_imb,
                       const struct plot_style *st_retire, const struct plot_style *st_watch,
                       const struct plot_key *keys, size_t nkeys)
{
    size_t n = v->nflights;
    char lab[160];
    plot_panel_draw(p, pp);
    snprintf(lab, sizeof lab, "retire %.0f mV", rules->retire_spread_mv);
    plot_hline(p, pp, rules->retire_spread_mv, st_retire, lab, 1);
    snprintf(lab, sizeof lab, "watch %.0f mV", rules->watch_spread_mv);
    plot_hline(p, pp, rules->watch_spread_mv, st_watch, lab, 1);
    int every = n <= 40;
    for (size_t k = 0; k < n; k++) {
        int wc = v->flights[k].weakest_cell;
        /* a flight without a resting imbalance still names its weakest cell, at the axis */
        double y = isfinite(imb[k]) ? imb[k] : pp->y.lo;
        if (isfinite(imb[k]))
            plot_marker(p, pp, x[k], y, MARK_CIRCLE, 0, st_imb);
        int changed = k == 0 || wc != v->flights[k - 1].weakest_cell || k + 1 == n;
        if (wc > 0 && (every || changed)) {
            char num[16];
            snprintf(num, sizeof num, "%d", wc);
            double fx = pp->x0 + (x[k] - pp->x.lo) / (pp->x.hi - pp->x.lo) * (pp->x1 - pp->x0);
            double fy = pp->y1 - (y - pp->y.lo) / (pp->y.hi - pp->y.lo) * (pp->y1 - pp->y0);
            plot_text(p, fx, fy - fs * 0.55, 1, fs * 0.7, 1, 0x333333u, num);
        }
    }
    plot_legend(p, pp, keys, nkeys);
}

enum pb_code plot_trend(const char *path, const struct plot_opts *o, const struct pack_view *v,
                        const struct health_rules *rules, int by_date, struct pb_error *err)
{
    int w = o->width ? o->width : 1600, h = o->height ? o->height : 1000;
    struct plot *p = plot_new(path, w, h, err);
    if (!p)
        return err->code;
    enum pb_code rc = PB_OK;
    size_t n = v->nflights;
    const struct pack_rec *pk = &v->pack;
    double rated = pk->capacity_mah, cells = pk->cells > 0 ? pk->cells : 1;
    double *x = malloc((n ? n : 1) * sizeof *x);
    double *r0 = malloc((n ? n : 1) * sizeof *r0);
    double *cap = malloc((n ? n : 1) * sizeof *cap);
    double *imb = malloc((n ? n : 1) * sizeof *imb);
    double *lx = malloc(LINE_POINTS * sizeof *lx), *ly = malloc(LINE_POINTS * sizeof *ly);
    double *lo = malloc(LINE_POINTS * sizeof *lo), *hi = malloc(LINE_POINTS * sizeof *hi);
    if (!x || !r0 || !cap || !imb || !lx || !ly || !lo || !hi) {
        rc = pb_error_set(err, PB_ENOMEM, "out of memory");
        goto cleanup;
    }
    double first_epoch = n ? v->flights[0].flown_epoch_s : 0.0, q = 0.0;
    for (size_t k = 0; k < n; k++) {
        const struct flight_rec *f = &v->flights[k];
        /* as health_trend counts them: the charge drawn before and during */
        if (isfinite(f->charge_used_mah) && f->charge_used_mah > 0)
            q += f->charge_used_mah;
        x[k] = by_date ? (f->flown_epoch_s - first_epoch) / 86400.0 : q / rated;
        r0[k] = f->r0_mohm / cells;
        cap[k] = 100.0 * f->capacity_mah / rated;
        imb[k] = f->cell_spread_rest_mv;
    }
    /* a third panel, the cells, when the logs had cell columns: the resting
     * imbalance of each flight with its weakest cell named beside it */
    int has_cells = 0;
    for (size_t k = 0; k < n; k++)
        has_cells |= isfinite(imb[k]) || v->flights[k].weakest_cell > 0;
    int npan = has_cells ? 3 : 2;
    double x_now = n ? x[n - 1] : 0.0;
    double base_r0 = v->health.r0_base_mohm_cell;
    struct quantity qs[2] = {
        {"IR (R0)", "m\u03a9/cell", r0, &v->trend.r0, base_r0 * rules->watch_r0_ratio},
        {"capacity", "% of rated", cap, &v->trend.capacity, rules->watch_capacity_pct},
    };

    /* x range: the history, and the crossing when it is near enough to
     * show without squeezing the flights into a corner */
    double x_hi = x_now > 0 ? x_now : 1.0;
    for (int j = 0; j < 2; j++) {
        const struct trend_line *tl = qs[j].tl;
        double xc = by_date ? (tl->cross_epoch_s - first_epoch) / 86400.0 : tl->cross_cycles;
        if (isfinite(xc) && xc > x_hi && xc <= x_now * 3.0)
            x_hi = xc * 1.04;
        /* and where to plan for, on the same terms */
        double xp = by_date ? (tl->plan_epoch_s - first_epoch) / 86400.0 : tl->life.early;
        if (isfinite(xp) && xp > x_hi && xp <= x_now * 3.0)
            x_hi = xp * 1.04;
    }

    double fs = plot_font(p);
    struct plot_panel pa[3];
    memset(pa, 0, sizeof pa);
    static const struct plot_style st_pt[2] = {{PLOT_BLUE, 1, DASH_SOLID, 0},
                                               {PLOT_GREEN, 1, DASH_SOLID, 0}};
    static const struct plot_style st_bucket = {PLOT_BLACK, 1.25, DASH_SOLID, 0};
    static const struct plot_style st_line = {PLOT_BLACK, 1.4, DASH_SOLID, 0};
    static const struct plot_style st_band = {PLOT_SKY, 1, DASH_SOLID, 0.35};
    static const struct plot_style st_pband = {PLOT_SKY, 1, DASH_SOLID, 0.14};
    static const struct plot_style st_retire = {PLOT_VERMILION, 1.4, DASH_LONG, 0};
    static const struct plot_style st_watch = {PLOT_ORANGE, 1.3, DASH_DOT, 0};
    static const struct plot_style st_cross = {PLOT_VERMILION, 1.2, DASH_DOT, 0};
    static const struct plot_style st_fade = {PLOT_PURPLE, 1.6, DASH_SOLID, 0};
    static const struct plot_style st_plan = {PLOT_PURPLE, 1.4, DASH_LONG, 0};
    const char *bucket_name =
        v->trend.nbuckets && strchr(v->trend.buckets[0].key, 'W')            ? "weekly mean"
        : v->trend.nbuckets && strncmp(v->trend.buckets[0].key, "cycles", 6) ? "monthly mean"
                                                                             : "5-cycle mean";
    struct plot_key keys[3][8];
    static const struct plot_style st_dep = {PLOT_VERMILION, 2.2, DASH_SOLID, 0};
    size_t nk[3] = {0, 0, 0};
    for (int j = 0; j < 2; j++) {
        keys[j][nk[j]++] = (struct plot_key){"flight", st_pt[j], MARK_CIRCLE, 0, 0};
        keys[j][nk[j]++] = (struct plot_key){bucket_name, st_bucket, MARK_DIAMOND, 1, 0};
        keys[j][nk[j]++] = (struct plot_key){"fitted line", st_line, -1, 0, 0};
        keys[j][nk[j]++] = (struct plot_key){"95 % band of the line", st_band, -1, 0, 1};
        keys[j][nk[j]++] = (struct plot_key){"95 % of flights expected", st_pband, -1, 0, 1};
        keys[j][nk[j]++] = (struct plot_key){"retire", st_retire, -1, 0, 0};
        keys[j][nk[j]++] = (struct plot_key){"watch", st_watch, -1, 0, 0};
        if (!by_date && qs[j].tl->life.model != LIFE_NONE)
            keys[j][nk[j]++] = (struct plot_key){"fade model", st_fade, -1, 0, 0};
        if (v->departures)
            keys[j][nk[j]++] = (struct plot_key){"left its trend", st_dep, MARK_SQUARE, 0, 0};
    }
    static const struct plot_style st_imb = {PLOT_PURPLE, 1, DASH_SOLID, 0};
    keys[2][nk[2]++] =
        (struct plot_key){"flight (weakest cell beside it)", st_imb, MARK_CIRCLE, 0, 0};
    keys[2][nk[2]++] = (struct plot_key){"retire", st_retire, -1, 0, 0};
    keys[2][nk[2]++] = (struct plot_key){"watch", st_watch, -1, 0, 0};
    double top = fs * 6.8, bottom = h - fs * 4.6, left = fs * 6, right = w - fs * 2;
    double weight[3] = {1, 1, 0.7};
    int rows[3];
    for (int j = 0; j < npan; j++)
        rows[j] = plot_legend_rows(p, right - left, keys[j], nk[j]);
    plot_stack(p, top, bottom, left, right, weight, rows, (size_t)npan, pa);
    for (int j = 0; j < 2; j++) {
        struct plot_panel *pp = &pa[j];
        const struct trend_line *tl = qs[j].tl;
        const struct line_fit *l = by_date ? &tl->vs_days : &tl->vs_cycles;
        snprintf(pp->name, sizeof pp->name, "%s", j == 0 ? "r0" : "capacity");
        snprintf(pp->y.label, sizeof pp->y.label,
                 j == 0 ? "IR, R0 (m\u03a9 per cell)" : "capacity (%% of rated)");
        double ylo = HUGE_VAL, yhi = -HUGE_VAL;
        for (size_t k = 0; k < n; k++)
            if (isfinite(qs[j].y[k])) {
                ylo = fmin(ylo, qs[j].y[k]);
                yhi = fmax(yhi, qs[j].y[k]);
            }
        double levels[2] = {tl->level, qs[j].watch_level};
        for (int m = 0; m < 2; m++)
            if (isfinite(levels[m])) {
                ylo = fmin(ylo, levels[m]);
                yhi = fmax(yhi, levels[m]);
            }
        if (j == 1)
            yhi = fmax(yhi, 100.0);
        if (l->ok) {
            double ya = l->a + l->b * x[0], yb = l->a + l->b * x_hi;
            ylo = fmin(ylo, fmin(ya, yb));
            yhi = fmax(yhi, fmax(ya, yb));
        }
        if (!(yhi >= ylo))
            ylo = 0, yhi = j == 0 ? 10 : 100;
        /* a little room so marks and level lines do not sit on the frame */
        double pad = 0.03 * (yhi - ylo);
        ylo = j == 0 ? fmax(0.0, ylo - 0.1 * (yhi - ylo)) : ylo - pad;
        yhi += pad;
        plot_axis_fit(p, &pp->y, ylo, yhi, pp->y1 - pp->y0, 1);
    }
    if (has_cells) {
        struct plot_panel *pp = &pa[2];
        snprintf(pp->name, sizeof pp->name, "imbalance");
        snprintf(pp->y.label, sizeof pp->y.label, "cell imbalance at rest (mV)");
        double yhi = fmax(rules->retire_spread_mv, 10.0);
        for (size_t k = 0; k < n; k++)
            if (isfinite(imb[k]))
                yhi = fmax(yhi, imb[k]);
        plot_axis_fit(p, &pp->y, 0.0, yhi * 1.08, pp->y1 - pp->y0, 1);
    }
    plot_margins(p, pa, (size_t)npan, &left, &right);
    right = w - right;
    struct plot_axis xa = {0};
    if (by_date) {
        xa.dates = 1;
        xa.date_base_s = first_epoch;
        snprintf(xa.label, sizeof xa.label, "date of flight (UTC)");
    } else {
        snprintf(xa.label, sizeof xa.label,
                 "equivalent full cycles (charge drawn / rated %.0f mAh)", rated);
    }
    plot_axis_fit(p, &xa, 0.0, x_hi, right - left, 0);
    for (int j = 0; j < npan; j++) {
        pa[j].x0 = left;
        pa[j].x1 = right;
        pa[j].x = xa;
    }

    /* slopes per 10 cycles, the one unit of every view (per 7 or 30 days by date) */
    double per = by_date ? (x_now < 60 ? 7 : 30) : 10;
    const struct chem_info *chem = ocv_chem_by_name(pk->chemistry);
    /* title block: the pack, then what each line says */
    char line[512], ln[2][320];
    snprintf(line, sizeof line, "%s", o->title ? o->title : pk->label);
    char meta[256];
    char weak[96] = "";
    if (v->health.weakest_cell > 0)
        snprintf(weak, sizeof weak, " \u00b7 weakest cell %d (%zu of last %zu)",
                 v->health.weakest_cell, v->health.weakest_count, v->health.weakest_of);
    snprintf(meta, sizeof meta,
             "%dS %s %.0f mAh \u00b7 %zu flight%s \u00b7 %.1f cycles%s \u00b7 %s", pk->cells,
             chem ? chem->label : pk->chemistry, rated, n, n == 1 ? "" : "s", v->health.cycles,
             weak, pk->retired_at[0] ? "retired" : health_status_name(v->health.status));
    double mw = plot_text_width(p, meta, fs * 1.0, 0);
    plot_text(p, left, fs * 1.7, 0, plot_fit_size(p, line, fs * 1.35, 1, right - left - mw - fs), 1,
              0x111111u, line);
    plot_text(p, right, fs * 1.7, 2, fs, 0, 0x333333u, meta);
    for (int j = 0; j < 2; j++) {
        const struct trend_line *tl = qs[j].tl;
        crossing_text(tl, by_date ? &tl->vs_days : &tl->vs_cycles, by_date, qs[j].name, qs[j].unit,
                      per, by_date ? "days" : "cycles", ln[j], sizeof ln[j]);
        char lt[200];
        size_t used = strlen(ln[j]);
        if (!tl->crossed &&
            report_life_text(tl, j == 0 ? "m\u03a9/cell" : "%", 1000.0, lt, sizeof lt))
            snprintf(ln[j] + used, sizeof ln[j] - used, " \u00b7 %s", lt);
        plot_text(p, left, fs * (3.15 + 1.3 * j), 0,
                  plot_fit_size(p, ln[j], fs * 0.9, 0, right - left), 0, 0x222222u, ln[j]);
    }
    if (v->health.status != HEALTH_OK && v->health.reason[0]) {
        char why[sizeof v->health.reason + 16];
        plot_ohm_text(v->health.reason, why, sizeof why);
        snprintf(line, sizeof line, "%s: %s", health_status_name(v->health.status), why);
        plot_text(p, left, fs * 5.75, 0, plot_fit_size(p, line, fs * 0.9, 0, right - left), 0,
                  PLOT_VERMILION, line);
    }

    for (int j = 0; j < 2; j++) {
        struct plot_panel *pp = &pa[j];
        const struct trend_line *tl = qs[j].tl;
        const struct line_fit *l = by_date ? &tl->vs_days : &tl->vs_cycles;
        plot_panel_draw(p, pp);
        char lab[160];
        if (isfinite(tl->level)) {
            if (j == 0)
                snprintf(lab, sizeof lab, "retire %.1f m\u03a9/cell (%.1f\u00d7 baseline)",
                         tl->level, rules->retire_r0_ratio);
            else
                snprintf(lab, sizeof lab, "retire %.0f %% of rated", tl->level);
            plot_hline(p, pp, tl->level, &st_retire, lab, 1);
        }
        if (isfinite(qs[j].watch_level)) {
            if (j == 0)
                snprintf(lab, sizeof lab, "watch %.1f m\u03a9/cell", qs[j].watch_level);
            else
                snprintf(lab, sizeof lab, "watch %.0f %%", qs[j].watch_level);
            plot_hline(p, pp, qs[j].watch_level, &st_watch, lab, 1);
        }
        if (l->ok) {
            double xa0 = x[0], xa1 = x_hi;
            /* where the next flights are expected (prediction band), then the
             * line's own uncertainty inside it */
            for (int k = 0; k < LINE_POINTS; k++) {
                lx[k] = xa0 + (xa1 - xa0) * k / (LINE_POINTS - 1);
                ly[k] = l->a + l->b * lx[k];
                double hw = health_line_predict_band(l, lx[k]);
                lo[k] = ly[k] - hw;
                hi[k] = ly[k] + hw;
            }
            plot_band(p, pp, lx, lo, hi, LINE_POINTS, &st_pband);
            for (int k = 0; k < LINE_POINTS; k++) {
                double hw = health_line_band(l, lx[k]);
                lo[k] = ly[k] - hw;
                hi[k] = ly[k] + hw;
            }
            plot_band(p, pp, lx, lo, hi, LINE_POINTS, &st_band);
            plot_line(p, pp, 0, lx, ly, LINE_POINTS, 1.0, 0, &st_line);
        }
        /* the chosen fade model, in the cycles view (it is fitted on cycles) */
        if (!by_date && tl->life.model != LIFE_NONE) {
            for (int k = 0; k < LINE_POINTS; k++) {
                lx[k] = x[0] + (x_hi - x[0]) * k / (LINE_POINTS - 1);
                ly[k] = life_value(&tl->life, lx[k]);
            }
            plot_line(p, pp, 0, lx, ly, LINE_POINTS, 1.0, 0, &st_fade);
        }
        /* bucket means at the mean x of their flights */
        for (size_t b = 0; b < v->trend.nbuckets; b++) {
            const struct trend_bucket *tb = &v->trend.buckets[b];
            double sx = 0;
            size_t m = 0;
            for (size_t k = 0; k < n; k++)
                if (v->flights[k].flown_epoch_s >= tb->first_epoch_s &&
                    v->flights[k].flown_epoch_s <= tb->last_epoch_s)
                    sx += x[k], m++;
            double yb = j == 0 ? tb->r0_mohm_cell : tb->capacity_pct;
            if (m)
                plot_marker(p, pp, sx / (double)m, yb, MARK_DIAMOND, 1, &st_bucket);
        }
        /* flights over the bucket means: a flight alone in its bucket stays visible */
        for (size_t k = 0; k < n; k++)
            plot_marker(p, pp, x[k], qs[j].y[k], MARK_CIRCLE, 0, &st_pt[j]);
        /* a flight that left its trend and nobody has acknowledged: a square
         * round it in the panel of the quantity that left (both panels for
         * the cell spread, which has none) */
        for (size_t k = 0; v->dep && k < n; k++) {
            const struct departure *d = &v->dep[k];
            if (!d->flagged || pack_view_ack(v, v->flights[k].id))
                continue;
            int here = d->quantity == DEP_SPREAD || (d->quantity == DEP_R0) == (j == 0);
            if (here && isfinite(qs[j].y[k]))
                plot_marker(p, pp, x[k], qs[j].y[k], MARK_SQUARE, 0, &st_dep);
        }
        double xc = by_date ? (tl->cross_epoch_s - first_epoch) / 86400.0 : tl->cross_cycles;
        char where[64];
        if (isfinite(xc) && crossing_where(tl, by_date, where, sizeof where)) {
            if (xc <= pp->x.hi) {
                snprintf(lab, sizeof lab, "projected: %s", where);
                plot_vline(p, pp, xc, &st_cross, lab);
                plot_marker(p, pp, xc, tl->level, MARK_CROSS, 0, &st_cross);
            } else {
                /* off the right edge: say where, at the edge */
                snprintf(lab, sizeof lab, "projected: %s \u2192", where);
                plot_vline(p, pp, pp->x.hi, &st_cross, lab);
            }
        }
        double xp = by_date ? (tl->plan_epoch_s - first_epoch) / 86400.0 : tl->life.early;
        if (isfinite(xp) && !tl->crossed && xp >= x_now && xp <= pp->x.hi) {
            char pd[32];
            iso_day(tl->plan_epoch_s, pd, sizeof pd);
            if (by_date)
                snprintf(lab, sizeof lab, "plan for %s", pd);
            else if (isfinite(tl->life.late))
                snprintf(lab, sizeof lab, "plan for %.0f (range %.0f\u2013%.0f)", tl->life.early,
                         tl->life.early, tl->life.late);
            else
                snprintf(lab, sizeof lab, "plan for %.0f", tl->life.early);
            plot_vline(p, pp, xp, &st_plan, lab);
        }
        if (n == 0)
            plot_text(p, (pp->x0 + pp->x1) / 2, (pp->y0 + pp->y1) / 2, 1, fs, 0, 0x444444u,
                      "no flights recorded for this pack");
        plot_legend(p, pp, keys[j], nk[j]);
    }
    if (has_cells)
        draw_cells(p, &pa[2], v, rules, x, imb, fs, &st_imb, &st_retire, &st_watch, keys[2], nk[2]);
    snprintf(
        line, sizeof line,
        "packbook %s \u00b7 projections (straight lines, fade models) are not guarantees: inspect "
        "packs and follow the manufacturer's limits",
        PACKBOOK_VERSION);
    plot_text(p, left, h - fs * 0.6, 0, plot_fit_size(p, line, fs * 0.72, 0, right - left), 0,
              0x666666u, line);
    rc = plot_finish_map(p, o->axes_json, pa, (size_t)npan, err);
cleanup:
    free(x), free(r0), free(cap), free(imb), free(lx), free(ly), free(lo), free(hi);
    plot_free(p);
    return rc;
}
