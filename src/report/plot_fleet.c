#define _GNU_SOURCE /* gmtime_r */
/* The fleet figure: every pack as one mark, capacity against resistance growth. */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "plot.h"
#include "plots.h"

enum { S_OK = 0, S_WATCH, S_RETIRE, S_RETIRED, S_COUNT };

static const char *const status_text[S_COUNT] = {"ok", "watch", "retire", "retired"};
static const struct plot_style status_style[S_COUNT] = {
    {PLOT_GREEN, 1.15, DASH_SOLID, 0},
    {PLOT_ORANGE, 1.3, DASH_SOLID, 0},
    {PLOT_VERMILION, 1.2, DASH_SOLID, 0},
    {PLOT_GREY, 1.1, DASH_SOLID, 0},
};
static const enum plot_mark status_mark[S_COUNT] = {MARK_CIRCLE, MARK_TRIANGLE, MARK_SQUARE,
                                                    MARK_CROSS};

static int status_of(const struct pack_view *v)
{
    if (v->pack.retired_at[0])
        return S_RETIRED;
    return v->health.status == HEALTH_RETIRE  ? S_RETIRE
           : v->health.status == HEALTH_WATCH ? S_WATCH
                                              : S_OK;
}

struct box {
    double x0, y0, x1, y1;
};

/* "TM-04 · imbalance 44 mV, cell 3": the pack and, briefly, the rules at or past
 * their watch level, so a pack flagged for what neither axis shows (cell
 * imbalance, over-discharges) says why where it sits. */
static void flag_label(const struct pack_view *v, const struct health_rules *r, char *buf,
                       size_t cap)
{
    const struct pack_health *h = &v->health;
    size_t used = (size_t)snprintf(buf, cap, "%s", v->pack.label);
    const char *sep = " \u00b7 ";
#define ADD(...)                                                                                   \
    do {                                                                                           \
        if (used < cap)                                                                            \
            used += (size_t)snprintf(buf + used, cap - used, "%s", sep);                           \
        if (used < cap)                                                                            \
            used += (size_t)snprintf(buf + used, cap - used, __VA_ARGS__);                         \
        sep = ", ";                                                                                \
    } while (0)
    if (isfinite(h->capacity_pct) && h->capacity_pct <= r->watch_capacity_pct)
        ADD("capacity %.0f %%", h->capacity_pct);
    if (h->flights > (size_t)r->baseline_flights && isfinite(h->r0_ratio) &&
        h->r0_ratio >= r->watch_r0_ratio)
        ADD("IR %.2f\u00d7", h->r0_ratio);
    if (isfinite(h->spread_mv) && h->spread_mv >= r->watch_spread_mv) {
        if (h->weakest_cell)
            ADD("imbalance %.0f mV, cell %d", h->spread_mv, h->weakest_cell);
        else
            ADD("imbalance %.0f mV", h->spread_mv);
    }
    if (h->overdischarges >= r->watch_overdischarge)
        ADD("%d over-discharge%s", h->overdischarges, h->overdischarges == 1 ? "" : "s");
    if (v->paired_with[0] && v->pair_distance > 1.0)
        ADD("pair with %s drifted, d %.2f", v->paired_with, v->pair_distance);
#undef ADD
}

static int overlaps(const struct box *a, const struct box *b)
{
    return a->x0 < b->x1 && b->x0 < a->x1 && a->y0 < b->y1 && b->y0 < a->y1;
}

static int placed_at(const struct pack_view *v, const struct plot_panel *pa, double *fx, double *fy)
{
    double xr = (v->health.r0_ratio - 1.0) * 100.0, yc = v->health.capacity_pct;
    if (!isfinite(xr) || !isfinite(yc))
        return 0;
    *fx = plot_px(pa, xr);
    *fy = plot_py(pa, yc);
    return 1;
}

/* Where a label of text at size goes beside the mark at (fx, fy): rings of
 * candidate places at growing distance (8 directions close by, 16 further
 * out), the first whose box (the ink with its halo) stays in the plot area
 * and a little clear of every box in used[]. Fills box and the baseline
 * (bx, by); returns the ring (0: beside
 * the mark, no leader line needed), or -1 when there is no room. */
static int find_place(struct plot *p, const struct plot_panel *pa, const char *text, double size,
                      double fx, double fy, double r, const struct box *used, size_t nused,
                      struct box *box, double *bx, double *by)
{
    double probe[4];
    plot_label_box(p, 0.0, 0.0, size, text, probe);
    double tw = probe[2] - probe[0], th = probe[3] - probe[1], gap = size * 0.12;
    int rings = 1 + (int)(fmin(pa->x1 - pa->x0, pa->y1 - pa->y0) / (3.0 * size));
    if (rings > 10)
        rings = 10;
    for (int ring = 0; ring < rings; ring++) {
        int dirs = ring < 2 ? 8 : 16;
        double dist = r + ring * size * 1.5;
        for (int d = 0; d < dirs; d++) {
            /* right first, then the rest alternately above and below */
            int k = (d + 1) / 2 * (d % 2 ? 1 : -1);
            double a = 2.0 * M_PI * k / dirs, cx = fx + dist * cos(a), cy = fy - dist * sin(a);
            /* the box's near corner or edge at (cx, cy): the box lies away from the mark */
            double ux = cos(a), uy = -sin(a);
            double x0 = ux > 0.3 ? cx : ux < -0.3 ? cx - tw : cx - tw / 2;
            double y0 = uy > 0.3 ? cy : uy < -0.3 ? cy - th : cy - th / 2;
            struct box b = {x0, y0, x0 + tw, y0 + th};
            struct box padded = {x0 - gap, y0 - gap, x0 + tw + gap, y0 + th + gap};
            int ok = b.x0 >= pa->x0 && b.x1 <= pa->x1 && b.y0 >= pa->y0 && b.y1 <= pa->y1;
            for (size_t u = 0; ok && u < nused; u++)
                ok = !overlaps(&padded, &used[u]);
            if (!ok)
                continue;
            *box = b;
            *bx = x0 - probe[0];
            *by = y0 - probe[1];
            return ring;
        }
    }
    return -1;
}

/* Appends "item" to a comma-separated list while the list stays within
 * budget_px at size; counts the items left out in *more. */
static void list_add(struct plot *p, char *buf, size_t cap, const char *item, double size,
                     double budget_px, size_t *more)
{
    size_t len = strlen(buf);
    if (*more || len + strlen(item) + 3 >= cap) {
        (*more)++;
        return;
    }
    snprintf(buf + len, cap - len, "%s%s", len ? ", " : "", item);
    if (plot_text_width(p, buf, size, 0) > budget_px) {
        buf[len] = '\0';
        (*more)++;
    }
}

enum pb_code plot_fleet(const char *path, const struct plot_opts *o, const struct pack_view *v,
                        size_t n, const struct health_rules *rules, struct pb_error *err)
{
    int w = o->width ? o->width : 1400, h = o->height ? o->height : 1000;
    struct plot *p = plot_new(path, w, h, err);
    if (!p)
        return err->code;
    enum pb_code rc = PB_OK;
    double fs = plot_font(p);
    size_t count[S_COUNT] = {0}, placed = 0;
    double xlo = 0.0, xhi = (rules->retire_r0_ratio - 1.0) * 100.0 * 1.15;
    double ylo = rules->retire_capacity_pct - 5.0, yhi = 100.0;
    for (size_t k = 0; k < n; k++) {
        count[status_of(&v[k])]++;
        double xr = (v[k].health.r0_ratio - 1.0) * 100.0, yc = v[k].health.capacity_pct;
        if (isfinite(xr) && isfinite(yc)) {
            placed++;
            xlo = fmin(xlo, xr), xhi = fmax(xhi, xr);
            ylo = fmin(ylo, yc), yhi = fmax(yhi, yc);
        }
    }
    /* room around the marks so none sits on the frame */
    double xpad = 0.04 * (xhi - xlo), ypad = 0.04 * (yhi - ylo);
    xlo -= xpad, xhi += xpad, ylo -= ypad, yhi += ypad;
    struct plot_panel pa;
    memset(&pa, 0, sizeof pa);
    snprintf(pa.name, sizeof pa.name, "fleet");
    snprintf(pa.y.label, sizeof pa.y.label, "capacity (%% of rated, median of recent flights)");
    snprintf(pa.x.label, sizeof pa.x.label,
             "IR (R0) change from the pack's baseline (%%, median of recent vs first flights)");
    char ktext[S_COUNT][48];
    struct plot_key keys[S_COUNT + 4];
    size_t nk = 0;
    for (int s = 0; s < S_COUNT; s++) {
        if (s == S_RETIRED && !count[s])
            continue;
        snprintf(ktext[s], sizeof ktext[s], "%s (%zu)", status_text[s], count[s]);
        keys[nk++] =
            (struct plot_key){ktext[s], status_style[s], (int)status_mark[s], s != S_RETIRED, 0};
    }
    static const struct plot_style st_retire = {PLOT_VERMILION, 1.3, DASH_LONG, 0};
    static const struct plot_style st_watch = {PLOT_ORANGE, 1.2, DASH_DOT, 0};
    keys[nk++] = (struct plot_key){"retire level", st_retire, -1, 0, 0};
    keys[nk++] = (struct plot_key){"watch level", st_watch, -1, 0, 0};
    static const struct plot_style st_pair = {PLOT_BLUE, 1.1, DASH_SOLID, 0};
    static const struct plot_style st_drift = {PLOT_PURPLE, 1.6, DASH_LONG, 0};
    int any_pair = 0, any_drift = 0;
    for (size_t k = 0; k < n; k++)
        if (v[k].paired_with[0]) {
            any_pair |= !(v[k].pair_distance > 1.0);
            any_drift |= v[k].pair_distance > 1.0;
        }
    if (any_pair)
        keys[nk++] = (struct plot_key){"registered pair", st_pair, -1, 0, 0};
    if (any_drift)
        keys[nk++] = (struct plot_key){"pair drifted apart", st_drift, -1, 0, 0};

    double top = fs * 4.2, bottom = h - fs * 9.6, left = fs * 6, right = w - fs * 2;
    double weight = 1;
    int rows = plot_legend_rows(p, right - left, keys, nk);
    plot_stack(p, top, bottom, left, right, &weight, &rows, 1, &pa);
    plot_axis_fit_tight(p, &pa.y, ylo, yhi, pa.y1 - pa.y0, 1);
    plot_margins(p, &pa, 1, &left, &right);
    pa.x0 = left;
    pa.x1 = w - right;
    plot_axis_fit_tight(p, &pa.x, xlo, xhi, pa.x1 - pa.x0, 0);

    /* title */
    char line[3200], when[40] = "no flights yet";
    /* dated by the newest flight, so the same history draws the same figure */
    double newest = -HUGE_VAL;
    for (size_t k = 0; k < n; k++)
        if (isfinite(v[k].health.last_epoch_s))
            newest = fmax(newest, v[k].health.last_epoch_s);
    if (isfinite(newest)) {
        time_t t = (time_t)llround(newest);
        struct tm tm;
        gmtime_r(&t, &tm);
        strftime(when, sizeof when, "latest flight %Y-%m-%d", &tm);
    }
    snprintf(line, sizeof line, "%s", o->title ? o->title : "Fleet health");
    char meta[160];
    snprintf(meta, sizeof meta, "%zu pack%s \u00b7 %zu placed \u00b7 %s", n, n == 1 ? "" : "s",
             placed, when);
    double mw = plot_text_width(p, meta, fs, 0);
    plot_text(p, pa.x0, fs * 1.7, 0, plot_fit_size(p, line, fs * 1.35, 1, pa.x1 - pa.x0 - mw - fs),
              1, 0x111111u, line);
    plot_text(p, pa.x1, fs * 1.7, 2, fs, 0, 0x333333u, meta);

    plot_panel_draw(p, &pa);
    char lab[96];
    double ref_box[4][4];
    size_t ref_boxes = 0;
    /* each rule label's box, so the pack labels keep clear of it */
#define NOTE_REF()                                                                                 \
    do {                                                                                           \
        if (plot_ref_label_box(p, ref_box[ref_boxes]) == 0)                                        \
            ref_boxes++;                                                                           \
    } while (0)
    snprintf(lab, sizeof lab, "retire %.0f %%", rules->retire_capacity_pct);
    plot_hline(p, &pa, rules->retire_capacity_pct, &st_retire, lab, 0);
    NOTE_REF();
    snprintf(lab, sizeof lab, "watch %.0f %%", rules->watch_capacity_pct);
    plot_hline(p, &pa, rules->watch_capacity_pct, &st_watch, lab, 0);
    NOTE_REF();
    snprintf(lab, sizeof lab, "retire %.1f\u00d7", rules->retire_r0_ratio);
    plot_vline(p, &pa, (rules->retire_r0_ratio - 1.0) * 100.0, &st_retire, lab);
    NOTE_REF();
    snprintf(lab, sizeof lab, "watch %.1f\u00d7", rules->watch_r0_ratio);
    plot_vline(p, &pa, (rules->watch_r0_ratio - 1.0) * 100.0, &st_watch, lab);
    NOTE_REF();
#undef NOTE_REF

    /* registered pairs: a line joining the two marks, under them */
    for (size_t k = 0; k < n; k++) {
        double ax, ay, bx, by;
        if (!v[k].paired_with[0] || !placed_at(&v[k], &pa, &ax, &ay))
            continue;
        for (size_t j = k + 1; j < n; j++)
            if (strcmp(v[j].pack.label, v[k].paired_with) == 0 && placed_at(&v[j], &pa, &bx, &by))
                plot_segment(p, ax, ay, bx, by, v[k].pair_distance > 1.0 ? &st_drift : &st_pair);
    }

    /* marks: ok first so the packs needing attention sit on top */
    for (int s = 0; s < S_COUNT; s++)
        for (size_t k = 0; k < n; k++)
            if (status_of(&v[k]) == s)
                plot_marker(p, &pa, (v[k].health.r0_ratio - 1.0) * 100.0, v[k].health.capacity_pct,
                            status_mark[s], s != S_RETIRED, &status_style[s]);

    /* a label on every pack: the ones needing attention first (with why),
     * then the rest, each in the nearest place clear of every mark, label
     * and rule label, with a leader line when it is not beside its mark;
     * smaller type before giving up, and the packs left without one are
     * named under the plot */
    struct box *used = calloc(2 * n + 5, sizeof *used);
    char *unlabelled = calloc(1, 1024);
    size_t more_unl = 0, nunl = 0;
    if (!used || !unlabelled) {
        free(used);
        free(unlabelled);
        rc = pb_error_set(err, PB_ENOMEM, "out of memory");
        goto cleanup;
    }
    size_t nused = 0;
    double ls = fs * 0.8, r = fs * 0.6;
    for (size_t k = 0; k < n; k++) {
        double fx, fy, m = r * 0.75;
        if (placed_at(&v[k], &pa, &fx, &fy))
            used[nused++] = (struct box){fx - m, fy - m, fx + m, fy + m};
    }
    for (size_t k = 0; k < ref_boxes; k++)
        used[nused++] = (struct box){ref_box[k][0], ref_box[k][1], ref_box[k][2], ref_box[k][3]};
    static const int order[S_COUNT] = {S_RETIRE, S_WATCH, S_OK, S_RETIRED};
    for (int o = 0; o < S_COUNT && rc == PB_OK; o++)
        for (size_t k = 0; k < n && rc == PB_OK; k++) {
            double fx, fy;
            if (status_of(&v[k]) != order[o] || !placed_at(&v[k], &pa, &fx, &fy))
                continue;
            char tag[256], name[4 * 128 + 4];
            int s = order[o];
            if (s == S_WATCH || s == S_RETIRE)
                flag_label(&v[k], rules, tag, sizeof tag);
            else
                snprintf(tag, sizeof tag, "%s", v[k].pack.label);
            snprintf(name, sizeof name, "%s", v[k].pack.label);
            /* with why at the full size, then the name alone, then smaller */
            const char *try_text[4] = {tag, name, tag, name};
            const double try_size[4] = {ls, ls, ls * 0.85, ls * 0.85};
            int ring = -1;
            struct box b;
            double bx = 0, by = 0, size = ls;
            const char *text = tag;
            for (int t = 0; t < 4 && ring < 0; t++) {
                if (t % 2 == 1 && strcmp(try_text[t], tag) == 0)
                    continue;
                text = try_text[t];
                size = try_size[t];
                ring = find_place(p, &pa, text, size, fx, fy, r, used, nused, &b, &bx, &by);
            }
            if (ring < 0) {
                list_add(p, unlabelled, 1024, v[k].pack.label, fs * 0.85, (pa.x1 - pa.x0) * 0.7,
                         &more_unl);
                nunl++;
                continue;
            }
            used[nused++] = b;
            double leader[4];
            if (ring > 0) {
                /* from the mark's edge to the nearest point of the box */
                double nx = fmin(fmax(fx, b.x0), b.x1), ny = fmin(fmax(fy, b.y0), b.y1);
                double dx = nx - fx, dy = ny - fy, len = hypot(dx, dy);
                leader[0] = fx + dx / len * r * 0.8;
                leader[1] = fy + dy / len * r * 0.8;
                leader[2] = nx;
                leader[3] = ny;
            }
            if (plot_label(p, bx, by, size, s == S_OK ? 0x333333u : 0x111111u, text, fx, fy,
                           ring > 0 ? leader : NULL) != 0)
                rc = pb_error_set(err, PB_ENOMEM, "out of memory");
        }
    free(used);
    if (rc != PB_OK) {
        free(unlabelled);
        goto cleanup;
    }

    /* under the plot: the packs needing attention and the ones not placed,
     * as many as fit in a few lines, then how many more */
    char attn[2048] = "", unplaced[1024] = "";
    size_t more_attn = 0, more_un = 0, nunplaced = 0, nattn = count[S_WATCH] + count[S_RETIRE];
    double ts = fs * 0.85, avail = pa.x1 - pa.x0;
    for (int s = S_RETIRE; s >= S_WATCH; s--)
        for (size_t k = 0; k < n; k++)
            if (status_of(&v[k]) == s) {
                char item[sizeof v[k].pack.label + sizeof v[k].health.reason + 16];
                char why[sizeof v[k].health.reason];
                plot_ohm_text(v[k].health.reason, why, sizeof why);
                snprintf(item, sizeof item, "%s (%s: %s)", v[k].pack.label, status_text[s], why);
                list_add(p, attn, sizeof attn, item, ts, avail * 2.6, &more_attn);
            }
    for (size_t k = 0; k < n; k++) {
        double xr = (v[k].health.r0_ratio - 1.0) * 100.0, yc = v[k].health.capacity_pct;
        if (isfinite(xr) && isfinite(yc))
            continue;
        char item[200];
        snprintf(item, sizeof item, "%s (no %s)", v[k].pack.label,
                 !isfinite(yc) && !isfinite(xr) ? "capacity or R0 yet"
                 : !isfinite(yc)                ? "capacity estimate yet"
                                                : "R0 baseline yet");
        list_add(p, unplaced, sizeof unplaced, item, ts, avail * 0.85, &more_un);
        nunplaced++;
    }
    double ty = pa.y1 + fs * 4.4;
    if (nattn) {
        snprintf(line, sizeof line, "Needing attention (%zu): %s", nattn, attn);
        if (more_attn)
            snprintf(line + strlen(line), sizeof line - strlen(line),
                     " and %zu more (see packbook fleet)", more_attn);
    } else {
        snprintf(line, sizeof line, "No pack needs attention under the current rules.");
    }
    int used_lines = plot_text_wrap(p, pa.x0, ty, avail, ts, 3, 0x222222u, line);
    if (nunplaced) {
        snprintf(line, sizeof line, "Not placed (%zu): %s", nunplaced, unplaced);
        if (more_un)
            snprintf(line + strlen(line), sizeof line - strlen(line), " and %zu more", more_un);
        plot_text(p, pa.x0, ty + used_lines * ts * 1.3, 0, plot_fit_size(p, line, ts, 0, avail), 0,
                  0x222222u, line);
        used_lines++;
    }
    if (nunl) {
        /* only when the marks crowd too much for every label (a large fleet) */
        snprintf(line, sizeof line, "No room for a label (%zu): %s", nunl, unlabelled);
        if (more_unl)
            snprintf(line + strlen(line), sizeof line - strlen(line), " and %zu more", more_unl);
        plot_text(p, pa.x0, ty + used_lines * ts * 1.3, 0, plot_fit_size(p, line, ts, 0, avail), 0,
                  0x222222u, line);
    }
    free(unlabelled);
    snprintf(line, sizeof line,
             "packbook %s \u00b7 flags from the recorded flights only: inspect packs and follow "
             "the manufacturer's limits before retiring or flying them",
             PACKBOOK_VERSION);
    plot_text(p, pa.x0, h - fs * 0.6, 0, plot_fit_size(p, line, fs * 0.72, 0, avail), 0, 0x666666u,
              line);
    plot_legend(p, &pa, keys, nk);
    rc = plot_finish_map(p, o->axes_json, &pa, 1, err);
cleanup:
    plot_free(p);
    return rc;
}
