#define _GNU_SOURCE /* gmtime_r */
/* The flight figure: one log's samples with what the analysis makes of them. */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "plot.h"
#include "plots.h"

#ifndef PACKBOOK_VERSION
#define PACKBOOK_VERSION "0.0.0"
#endif

enum { P_VOLT = 0, P_CURRENT, P_SOC, P_CELLS, P_TEMP, P_MAX };

/* Time under the floor is tinted, missing data hatched, in every panel. */
static const struct plot_style tint = {PLOT_VERMILION, 1, DASH_SOLID, 0.16};
static const struct plot_style hatch = {PLOT_GREY, 1, DASH_SOLID, 0};

/* The per-sample figures the analysis makes (analyze_rows) are never all
 * held at once: one pass finds their ranges, and each line is made into one
 * block at a time as its line is drawn (the log's own columns are drawn
 * from the series). A 1M-row log then costs 32 KiB here, not 56 bytes a row. */
enum col { COL_POWER = 0, COL_OCV, COL_SOC_CC, COL_SOC_OCV, COL_N };

struct col_ranges {
    double lo[COL_N], hi[COL_N], first[COL_N];
    int any[COL_N]; /* some value is finite */
    size_t k;
};

static double col_value(const struct sample_row *r, enum col c)
{
    switch (c) {
    case COL_POWER:
        return r->v_v * r->i_a;
    case COL_OCV:
        return r->ocv_v;
    case COL_SOC_CC:
        return r->soc_cc_pct;
    default:
        return r->soc_ocv_pct;
    }
}

static void scan_ranges(void *ctx, const struct sample_row *r)
{
    struct col_ranges *c = ctx;
    for (int j = 0; j < COL_N; j++) {
        double v = col_value(r, (enum col)j);
        if (c->k == 0)
            c->first[j] = v;
        if (isfinite(v)) {
            c->any[j] = 1;
            c->lo[j] = fmin(c->lo[j], v);
            c->hi[j] = fmax(c->hi[j], v);
        }
    }
    c->k++;
}

/* A column made a block at a time and fed to its line as it is made. */
#define COL_BLOCK 4096
struct col_fill {
    double y[COL_BLOCK];
    enum col which;
    size_t k, fed;
    const double *t_s;
    struct plot_run *run;
};

static void fill_col(void *ctx, const struct sample_row *r)
{
    struct col_fill *f = ctx;
    f->y[f->k++] = col_value(r, f->which);
    if (f->k == COL_BLOCK) {
        plot_line_feed(f->run, f->t_s + f->fed, f->y, f->k);
        f->fed += f->k;
        f->k = 0;
    }
}

/* Makes column which and draws it; -1 when out of memory. */
static int draw_col(struct plot *p, const struct plot_panel *q, int right, const struct series *s,
                    const struct analysis *a, double rated_mah, struct col_fill *f, enum col which,
                    double x_div, const struct plot_style *st)
{
    f->which = which;
    f->k = f->fed = 0;
    f->t_s = s->t_s;
    f->run = plot_line_start(p, q, right, s->n, x_div, a->gap_s, st);
    if (!f->run)
        return -1;
    analyze_rows(s, a, rated_mah, fill_col, f);
    plot_line_feed(f->run, f->t_s + f->fed, f->y, f->k);
    plot_line_end(f->run);
    return 0;
}

/* Widens [lo, hi] to the column's finite range. */
static void range_col(const struct col_ranges *c, enum col j, double *lo, double *hi)
{
    if (c->any[j]) {
        *lo = fmin(*lo, c->lo[j]);
        *hi = fmax(*hi, c->hi[j]);
    }
}

static void range_of(const double *y, size_t n, double *lo, double *hi)
{
    for (size_t k = 0; k < n; k++)
        if (isfinite(y[k])) {
            *lo = fmin(*lo, y[k]);
            *hi = fmax(*hi, y[k]);
        }
}

/* Intervals to shade: where the loaded voltage was under the floor (the
 * interval after each such sample, as the analysis counts time below it)
 * and where samples are missing (steps longer than the gap threshold). */
struct spans {
    size_t floor_runs, gaps;
    double floor_s, gap_s;
};

static void spans_count(const struct series *s, const struct analysis *a, struct spans *c)
{
    double floor_pack = a->cells > 0 ? a->floor_v * a->cells : -HUGE_VAL;
    memset(c, 0, sizeof *c);
    for (size_t k = 0; k < s->n; k++)
        if (s->v_v[k] < floor_pack && (k == 0 || !(s->v_v[k - 1] < floor_pack)))
            c->floor_runs++;
    for (size_t k = 1; k < s->n; k++) {
        if (s->v_v[k - 1] < floor_pack)
            c->floor_s += s->t_s[k] - s->t_s[k - 1];
        double dt = s->t_s[k] - s->t_s[k - 1];
        if (dt > a->gap_s) {
            c->gaps++;
            c->gap_s += dt;
        }
    }
}

static void shade(struct plot *p, const struct plot_panel *pa, const struct series *s,
                  const struct analysis *a, double x_div)
{
    double floor_pack = a->cells > 0 ? a->floor_v * a->cells : -HUGE_VAL;
    for (size_t k = 0; k < s->n; k++) {
        if (!(s->v_v[k] < floor_pack))
            continue;
        size_t j = k;
        while (j + 1 < s->n && s->v_v[j + 1] < floor_pack)
            j++;
        double end = j + 1 < s->n ? s->t_s[j + 1] : s->t_s[j];
        plot_vspan(p, pa, s->t_s[k] / x_div, end / x_div, 0, &tint);
        k = j;
    }
    for (size_t k = 1; k < s->n; k++)
        if (s->t_s[k] - s->t_s[k - 1] > a->gap_s)
            plot_vspan(p, pa, s->t_s[k - 1] / x_div, s->t_s[k] / x_div, 1, &hatch);
}

/* "v ± ci unit", with enough decimals (from min_dec, at most 3) for the
 * interval to keep one significant digit rather than read "± 0.0" */
static void fmt_est(char *buf, size_t cap, const struct estimate *e, int min_dec, const char *unit)
{
    if (!isfinite(e->value)) {
        snprintf(buf, cap, "unknown");
        return;
    }
    int d = min_dec;
    if (isfinite(e->ci95) && e->ci95 > 0) {
        int need = -(int)floor(log10(e->ci95));
        d = need > d ? (need < 3 ? need : 3) : d;
    }
    if (isfinite(e->ci95))
        snprintf(buf, cap, "%.*f \u00b1 %.*f %s", d, e->value, d, e->ci95, unit);
    else
        snprintf(buf, cap, "%.*f %s", d, e->value, unit);
}

/* Lines a title line takes: one when it fits at 80 % of its size or more
 * (shrunk to fit, as before), else wrapped over up to three at 85 %, so
 * small figures (480x360) stay readable. */
static int block_lines(struct plot *p, const char *text, double size, double avail)
{
    if (plot_fit_size(p, text, size, 0, avail) >= 0.8 * size)
        return 1;
    int n = (int)ceil(plot_text_width(p, text, size * 0.85, 0) / avail * 1.15);
    return n < 2 ? 2 : n > 3 ? 3 : n;
}

/* Draws a title line over lines (block_lines); returns the height used. */
static double block_draw(struct plot *p, int draw, double x, double y, double avail, double size,
                         uint32_t rgb, const char *text)
{
    int lines = block_lines(p, text, size, avail);
    if (draw && lines == 1)
        plot_text(p, x, y, 0, plot_fit_size(p, text, size, 0, avail), 0, rgb, text);
    else if (draw)
        plot_text_wrap(p, x, y, avail, size * 0.85, lines, rgb, text);
    return (lines - 1) * size * 0.85 * 1.3;
}

/* The title block; draws nothing unless draw. Returns how much taller it is
 * than its three-line height (wrapped lines on small figures). */
static double title_block(struct plot *p, int draw, const struct series *s,
                          const struct analysis *a, double rated_mah, const struct plot_opts *o,
                          const char *name, const struct spans *sp, double left, double right)
{
    double fs = plot_font(p), avail = right - left, y = fs * 1.7;
    char line[512], when[64] = "date not in log", r0[64], soc0[48], soc1[48];
    const char *base = strrchr(name, '/') ? strrchr(name, '/') + 1 : name;
    if (a->has_epoch) {
        time_t t = (time_t)llround(a->start_epoch_s);
        struct tm tm;
        gmtime_r(&t, &tm);
        strftime(when, sizeof when, "%Y-%m-%d %H:%M UTC", &tm);
    }
    snprintf(line, sizeof line, "%s", o->title ? o->title : base);
    double ww = plot_text_width(p, when, fs * 1.05, 0);
    double ts = plot_fit_size(p, line, fs * 1.35, 1, avail - ww - fs * 2);
    if (draw) {
        plot_text(p, left, y, 0, ts, 1, 0x111111u, line);
        plot_text(p, right, y, 2, fs * 1.05, 0, 0x333333u, when);
    }
    double extra = 0.0;

    fmt_est(r0, sizeof r0, &a->r0_mohm, 1, "m\u03a9");
    fmt_est(soc0, sizeof soc0, &a->soc_start_pct, 0, "%");
    fmt_est(soc1, sizeof soc1, &a->soc_end_pct, 0, "%");
    char charge[64] = "no current in log", energy[48] = "";
    if (a->has_current) {
        snprintf(charge, sizeof charge, "charge used %.0f mAh", a->charge_used_mah);
        snprintf(energy, sizeof energy, " \u00b7 energy %.1f Wh", a->energy_used_wh);
    }
    char cap[96] = "";
    if (isfinite(a->capacity_mah.value)) {
        char c[48], pct[32] = "";
        fmt_est(c, sizeof c, &a->capacity_mah, 0, "mAh");
        if (rated_mah > 0)
            snprintf(pct, sizeof pct, " (%.0f %% of rated)",
                     100.0 * a->capacity_mah.value / rated_mah);
        snprintf(cap, sizeof cap, " \u00b7 capacity %s%s", c, pct);
    }
    snprintf(line, sizeof line, "%s%s \u00b7 IR (R0) %s%s \u00b7 SoC %s \u2192 %s%s", charge,
             energy, r0, isfinite(a->r0_mohm.ci95) ? " (pack, 95 %)" : "", soc0, soc1, cap);
    y += fs * 1.45;
    double more = block_draw(p, draw, left, y, avail, fs, 0x222222u, line);
    y += more;
    extra += more;

    char cells[96] = "cell count unknown", minv[64] = "", spread[80] = "", floor_txt[96];
    if (a->cells > 0) {
        char rated[40] = "";
        if (rated_mah > 0)
            snprintf(rated, sizeof rated, " %.0f mAh rated", rated_mah);
        snprintf(cells, sizeof cells, "%dS %s%s (cell count %s%s)", a->cells, a->chem->label, rated,
                 a->cells_source, a->chem_assumed ? ", chemistry assumed" : "");
    }
    if (a->cells > 0 && isfinite(a->cell_min_loaded_v))
        snprintf(minv, sizeof minv, " \u00b7 lowest %.2f V/cell loaded", a->cell_min_loaded_v);
    if (a->weakest_cell > 0 && isfinite(a->spread_rest_mv))
        snprintf(spread, sizeof spread, " \u00b7 cell imbalance %.0f mV at rest, weakest cell %d",
                 a->spread_rest_mv, a->weakest_cell);
    if (a->cells <= 0)
        floor_txt[0] = '\0'; /* no floor without a cell count */
    else if (sp->floor_runs)
        snprintf(floor_txt, sizeof floor_txt, " \u00b7 under the cut-off %zu\u00d7, %.0f s",
                 sp->floor_runs, sp->floor_s);
    else
        snprintf(floor_txt, sizeof floor_txt, " \u00b7 never under the cut-off");
    char gaps[64] = "";
    if (sp->gaps)
        snprintf(gaps, sizeof gaps, " \u00b7 %zu gap%s, %.0f s", sp->gaps, sp->gaps == 1 ? "" : "s",
                 sp->gap_s);
    char warns[48] = "";
    if (a->nwarnings)
        snprintf(warns, sizeof warns, " \u00b7 %zu warning%s (see analyze)", a->nwarnings,
                 a->nwarnings == 1 ? "" : "s");
    snprintf(line, sizeof line, "%s \u00b7 %zu sample%s, %.1f min%s%s%s%s%s", cells, s->n,
             s->n == 1 ? "" : "s", a->duration_s / 60.0, minv, floor_txt, gaps, spread, warns);
    y += fs * 1.3;
    extra += block_draw(p, draw, left, y, avail, fs * 0.9, 0x222222u, line);
    return extra;
}

static void footer(struct plot *p, double left, double right)
{
    char line[256];
    double fs = plot_font(p) * 0.72;
    snprintf(line, sizeof line,
             "packbook %s \u00b7 estimates from the log, not a substitute for the aircraft's "
             "low-voltage protection or the manufacturer's limits",
             PACKBOOK_VERSION);
    plot_text(p, left, plot_height(p) - fs * 0.8, 0, plot_fit_size(p, line, fs, 0, right - left), 0,
              0x666666u, line);
}

enum pb_code plot_flight(const char *path, const struct plot_opts *o, const struct series *s,
                         const struct analysis *a, double rated_mah, const char *name,
                         struct pb_error *err)
{
    struct col_ranges c = {0};
    struct col_fill *scratch = NULL;
    enum pb_code rc = PB_OK;
    int has_cells = s->ncells > 0;
    int w = o->width ? o->width : 1600, h = o->height ? o->height : (has_cells ? 1300 : 1100);
    struct plot *p = plot_new(path, w, h, err);
    if (!p)
        return err->code;
    scratch = malloc(sizeof *scratch);
    if (!scratch) {
        rc = pb_error_set(err, PB_ENOMEM, "out of memory");
        goto cleanup;
    }
    for (int j = 0; j < COL_N; j++) {
        c.lo[j] = HUGE_VAL;
        c.hi[j] = -HUGE_VAL;
    }
    analyze_rows(s, a, rated_mah, scan_ranges, &c);

    double fs = plot_font(p);
    /* minutes read better than seconds beyond a few minutes, hours beyond a few hours */
    double x_div = a->duration_s > 3 * 3600.0 ? 3600.0 : a->duration_s > 180.0 ? 60.0 : 1.0;
    double floor_pack = a->cells > 0 ? a->floor_v * a->cells : NAN;
    int has_ocv = c.any[COL_OCV], has_soc_cc = c.any[COL_SOC_CC], has_soc_ocv = c.any[COL_SOC_OCV];

    struct spans sp;
    spans_count(s, a, &sp);
    struct plot_panel pa[P_MAX];
    int which[P_MAX], np = 0;
    memset(pa, 0, sizeof pa);
    which[np++] = P_VOLT;
    if (a->has_current)
        which[np++] = P_CURRENT;
    which[np++] = P_SOC;
    if (has_cells)
        which[np++] = P_CELLS;
    int has_temp = a->has_temp && s->temp_c && isfinite(a->temp_max_c);
    if (has_temp)
        which[np++] = P_TEMP;

    /* legend keys per panel */
    static const struct plot_style st_v = {PLOT_BLUE, 1.3, DASH_SOLID, 0};
    static const struct plot_style st_ocv = {PLOT_ORANGE, 1.7, DASH_LONG, 0};
    static const struct plot_style st_floor = {PLOT_VERMILION, 1.2, DASH_DOT, 0};
    static const struct plot_style st_i = {PLOT_GREEN, 1.3, DASH_SOLID, 0};
    static const struct plot_style st_pw = {PLOT_PURPLE, 1.3, DASH_LONG, 0};
    static const struct plot_style st_cc = {PLOT_BLACK, 1.3, DASH_SOLID, 0};
    static const struct plot_style st_socv = {PLOT_SKY, 1.7, DASH_LONG, 0};
    static const struct plot_style st_cell = {PLOT_GREY, 0.8, DASH_SOLID, 0};
    static const struct plot_style st_weak = {PLOT_VERMILION, 1.8, DASH_SOLID, 0};
    static const struct plot_style st_temp = {PLOT_PURPLE, 1.3, DASH_SOLID, 0};
    char floor_key[64], weak_key[48], reserve_key[48];
    snprintf(reserve_key, sizeof reserve_key, "landing reserve %.0f %%", o->reserve_pct);
    double vlo = HUGE_VAL, vhi = -HUGE_VAL;
    range_of(s->v_v, s->n, &vlo, &vhi);
    range_col(&c, COL_OCV, &vlo, &vhi);
    /* the floor is drawn when it is near the data; far below, it would
     * squash the trace into a line, so the key says where it is */
    int floor_shown = isfinite(floor_pack) && floor_pack >= vlo - 0.35 * fmax(vhi - vlo, 0.5);
    if (isfinite(floor_pack))
        snprintf(floor_key, sizeof floor_key, "cut-off %.2f V/cell%s", a->floor_v,
                 floor_shown ? "" : " (below the axis)");
    struct plot_key keys[P_MAX][6];
    size_t nkeys[P_MAX] = {0};
    for (int j = 0; j < np; j++) {
        struct plot_key *k = keys[j];
        size_t *nk = &nkeys[j];
        switch (which[j]) {
        case P_VOLT:
            k[(*nk)++] = (struct plot_key){"measured", st_v, -1, 0, 0};
            if (has_ocv)
                k[(*nk)++] = (struct plot_key){"OCV (sag-corrected)", st_ocv, -1, 0, 0};
            if (isfinite(floor_pack))
                k[(*nk)++] = (struct plot_key){floor_key, st_floor, -1, 0, 0};
            if (sp.floor_runs)
                k[(*nk)++] = (struct plot_key){"under cut-off", tint, -1, 0, 1};
            if (sp.gaps)
                k[(*nk)++] = (struct plot_key){"no data", hatch, -1, 0, 2};
            break;
        case P_CURRENT:
            k[(*nk)++] = (struct plot_key){"current", st_i, -1, 0, 0};
            k[(*nk)++] = (struct plot_key){"power (right axis)", st_pw, -1, 0, 0};
            break;
        case P_SOC:
            if (has_soc_cc)
                k[(*nk)++] = (struct plot_key){"counted (coulombs)", st_cc, -1, 0, 0};
            if (has_soc_ocv)
                k[(*nk)++] = (struct plot_key){has_ocv ? "from OCV" : "from loaded voltage",
                                               st_socv, -1, 0, 0};
            if (o->reserve_pct > 0)
                k[(*nk)++] = (struct plot_key){reserve_key, st_floor, -1, 0, 0};
            break;
        case P_CELLS:
            k[(*nk)++] = (struct plot_key){"cells", st_cell, -1, 0, 0};
            if (a->weakest_cell > 0) {
                snprintf(weak_key, sizeof weak_key, "cell %d (weakest)", a->weakest_cell);
                k[(*nk)++] = (struct plot_key){weak_key, st_weak, -1, 0, 0};
            }
            break;
        case P_TEMP:
            k[(*nk)++] = (struct plot_key){"pack temperature", st_temp, -1, 0, 0};
            break;
        }
    }

    /* layout: margins estimated wide for the legend rows, then set from
     * the tick labels the panels actually need */
    static const double weight_of[P_MAX] = {1.45, 1.0, 0.9, 1.0, 0.6};
    double weight[P_MAX];
    int rows[P_MAX];
    double top = fs * 5.4, bottom = h - fs * 4.6, left = fs * 6, right = w - fs * 6;
    /* room for title lines wrapped on a small figure, measured a little
     * narrower than the final margins can leave, so drawing never needs more */
    double title_extra = title_block(p, 0, s, a, rated_mah, o, name, &sp, fs * 8, w - fs * 8);
    top += title_extra;
    for (int j = 0; j < np; j++) {
        weight[j] = weight_of[which[j]];
        rows[j] = plot_legend_rows(p, right - left, keys[j], nkeys[j]);
    }
    plot_stack(p, top, bottom, left, right, weight, rows, (size_t)np, pa);
    double tlo = 0.0, thi = s->n ? s->t_s[s->n - 1] / x_div : 1.0;
    if (!(thi > tlo))
        thi = tlo + (x_div > 1 ? 1.0 : 10.0); /* one sample: a short span around it */
    for (int j = 0; j < np; j++) {
        struct plot_panel *q = &pa[j];
        double hgt = q->y1 - q->y0, lo = HUGE_VAL, hi = -HUGE_VAL;
        switch (which[j]) {
        case P_VOLT:
            snprintf(q->name, sizeof q->name, "voltage");
            snprintf(q->y.label, sizeof q->y.label, "pack voltage (V)");
            lo = vlo, hi = vhi;
            if (floor_shown)
                lo = fmin(lo, floor_pack);
            break;
        case P_CURRENT: {
            snprintf(q->name, sizeof q->name, "current");
            snprintf(q->y.label, sizeof q->y.label, "current (A)");
            snprintf(q->y2.label, sizeof q->y2.label, "power (W)");
            q->has_y2 = 1;
            lo = 0, hi = 0;
            range_of(s->i_a, s->n, &lo, &hi);
            double plo = 0, phi = 0;
            range_col(&c, COL_POWER, &plo, &phi);
            /* rest-current noise a little below zero is under a pixel at
             * this scale; a whole tick interval for it would waste the panel */
            if (lo < 0 && -lo < 0.01 * hi)
                lo = 0, plo = fmax(plo, 0);
            hi += 0.02 * (hi - lo); /* a round maximum stays off the frame */
            phi += 0.02 * (phi - plo);
            plot_axis_fit(p, &q->y, lo, hi, hgt, 1);
            plot_axis_align(p, &q->y2, plo, phi, &q->y, hgt);
            continue;
        }
        case P_SOC:
            snprintf(q->name, sizeof q->name, "soc");
            snprintf(q->y.label, sizeof q->y.label, "state of charge (%%)");
            lo = 0, hi = 100;
            range_col(&c, COL_SOC_CC, &lo, &hi);
            range_col(&c, COL_SOC_OCV, &lo, &hi);
            break;
        case P_CELLS:
            snprintf(q->name, sizeof q->name, "cells");
            snprintf(q->y.label, sizeof q->y.label, "cell voltage (V)");
            for (int cl = 0; cl < s->ncells; cl++)
                range_of(s->cell_v[cl], s->n, &lo, &hi);
            if (a->floor_v >= lo - 0.35 * fmax(hi - lo, 0.1))
                lo = fmin(lo, a->floor_v);
            break;
        case P_TEMP:
            snprintf(q->name, sizeof q->name, "temp");
            snprintf(q->y.label, sizeof q->y.label, "temperature (\u00b0C)");
            range_of(s->temp_c, s->n, &lo, &hi);
            if (!(hi - lo > 1.0)) { /* a steady temperature: a 2-degree window around it */
                double mid = 0.5 * (lo + hi);
                lo = mid - 1.0, hi = mid + 1.0;
            }
            break;
        }
        if (which[j] != P_SOC) {
            /* a round extreme would sit on the frame, half clipped */
            double pad = 0.02 * (hi - lo);
            lo -= pad;
            hi += pad;
        }
        plot_axis_fit(p, &q->y, lo, hi, hgt, 1);
    }
    plot_margins(p, pa, (size_t)np, &left, &right);
    right = w - right;
    struct plot_axis xa = {0};
    snprintf(xa.label, sizeof xa.label,
             x_div > 60  ? "time since first sample (h)"
             : x_div > 1 ? "time since first sample (min)"
                         : "time since first sample (s)");
    plot_axis_fit_tight(p, &xa, tlo, thi, right - left, 0);
    for (int j = 0; j < np; j++) {
        pa[j].x0 = left;
        pa[j].x1 = right;
        pa[j].x = xa;
    }

    (void)title_block(p, 1, s, a, rated_mah, o, name, &sp, left, right);
    int oom = 0;
    for (int j = 0; j < np; j++) {
        struct plot_panel *q = &pa[j];
        shade(p, q, s, a, x_div);
        plot_panel_draw(p, q);
        switch (which[j]) {
        case P_VOLT:
            if (floor_shown)
                plot_hline(p, q, floor_pack, &st_floor, NULL, 0);
            plot_line(p, q, 0, s->t_s, s->v_v, s->n, x_div, a->gap_s, &st_v);
            if (has_ocv)
                oom |= draw_col(p, q, 0, s, a, rated_mah, scratch, COL_OCV, x_div, &st_ocv);
            break;
        case P_CURRENT:
            oom |= draw_col(p, q, 1, s, a, rated_mah, scratch, COL_POWER, x_div, &st_pw);
            plot_line(p, q, 0, s->t_s, s->i_a, s->n, x_div, a->gap_s, &st_i);
            break;
        case P_SOC:
            /* the reserve under the traces: a limit, like the cut-off on the voltage */
            if (o->reserve_pct > 0)
                plot_hline(p, q, o->reserve_pct, &st_floor, NULL, 0);
            if (has_soc_ocv)
                oom |= draw_col(p, q, 0, s, a, rated_mah, scratch, COL_SOC_OCV, x_div, &st_socv);
            if (has_soc_cc)
                oom |= draw_col(p, q, 0, s, a, rated_mah, scratch, COL_SOC_CC, x_div, &st_cc);
            break;
        case P_CELLS:
            plot_hline(p, q, a->floor_v, &st_floor, NULL, 0);
            /* a dropped cell leaves a gap in the numbers: cell_detail has them */
            for (int cl = 0; cl < s->ncells && cl < a->ncells_detail; cl++)
                if (a->cell[cl].index != a->weakest_cell)
                    plot_line(p, q, 0, s->t_s, s->cell_v[cl], s->n, x_div, a->gap_s, &st_cell);
            for (int cl = 0; cl < s->ncells && cl < a->ncells_detail; cl++)
                if (a->cell[cl].index == a->weakest_cell)
                    plot_line(p, q, 0, s->t_s, s->cell_v[cl], s->n, x_div, a->gap_s, &st_weak);
            break;
        case P_TEMP:
            plot_line(p, q, 0, s->t_s, s->temp_c, s->n, x_div, a->gap_s, &st_temp);
            break;
        }
        if (s->n == 1) {
            /* a single sample draws no line: mark it */
            double y0 = which[j] == P_VOLT      ? s->v_v[0]
                        : which[j] == P_CURRENT ? s->i_a[0]
                        : which[j] == P_SOC     ? c.first[has_soc_cc ? COL_SOC_CC : COL_SOC_OCV]
                        : which[j] == P_TEMP    ? s->temp_c[0]
                                                : s->cell_v[0][0];
            const struct plot_style *ms = which[j] == P_VOLT      ? &st_v
                                          : which[j] == P_CURRENT ? &st_i
                                          : which[j] == P_SOC     ? (has_soc_cc ? &st_cc : &st_socv)
                                          : which[j] == P_TEMP    ? &st_temp
                                                                  : &st_cell;
            plot_marker(p, q, s->t_s[0] / x_div, y0, MARK_CIRCLE, 1, ms);
        }
        plot_legend(p, q, keys[j], nkeys[j]);
    }
    if (oom) {
        rc = pb_error_set(err, PB_ENOMEM, "out of memory");
        goto cleanup;
    }
    footer(p, left, right);
    rc = plot_finish_map(p, o->axes_json, pa, (size_t)np, err);
cleanup:
    free(scratch);
    plot_free(p);
    return rc;
}
