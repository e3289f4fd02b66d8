#include <math.h>
#include <stdio.h>
#include <string.h>

#include "../core/isotime.h"
#include "../core/utf8.h"
#include "report.h"

#define KEY_W 16

static int utf8_out;

void report_set_utf8(int utf8)
{
    utf8_out = utf8;
}

const char *report_mohm(void)
{
    return utf8_out ? "m\u03a9" : "mOhm";
}

const char *report_units(const char *s, char *buf, size_t cap)
{
    size_t used = 0;
    buf[0] = '\0';
    while (*s && used + 1 < cap) {
        if (strncmp(s, "mOhm", 4) == 0) {
            int n = snprintf(buf + used, cap - used, "%s", report_mohm());
            used += n > 0 ? (size_t)n : 0;
            s += 4;
        } else {
            buf[used++] = *s++;
            buf[used] = '\0';
        }
    }
    if (used >= cap)
        buf[cap - 1] = '\0';
    return buf;
}

int report_width(const char *s, int width)
{
    int extra = 0;
    for (const unsigned char *p = (const unsigned char *)s; *p; p++)
        extra += (*p & 0xC0) == 0x80; /* continuation bytes take no column */
    return width + extra;
}

static void key(FILE *out, const char *k)
{
    fprintf(out, "  %-*s", KEY_W, k);
}

static void duration(FILE *out, double s)
{
    long t = lround(s);
    if (t >= 3600)
        fprintf(out, "%ld h %02ld min %02ld s", t / 3600, (t / 60) % 60, t % 60);
    else if (t >= 60)
        fprintf(out, "%ld min %02ld s", t / 60, t % 60);
    else
        fprintf(out, "%.1f s", s);
}

static void est(FILE *out, struct estimate e, const char *fmt, const char *unit)
{
    if (!isfinite(e.value)) {
        fprintf(out, "unknown");
        return;
    }
    fprintf(out, fmt, e.value);
    if (isfinite(e.ci95)) {
        fprintf(out, " +/- ");
        fprintf(out, fmt, e.ci95);
    }
    fprintf(out, " %s", unit);
}

int report_analysis_text(FILE *out, const struct analysis *a, const struct report_input *in)
{
    char when[40];
    char nb[4 * 1024 + 4];
    fprintf(out, "packbook analysis: %s\n", utf8_printable(nb, sizeof nb, in->name));

    key(out, "log");
    fprintf(out, "%zu samples over ", a->samples);
    duration(out, a->duration_s);
    if (a->has_epoch)
        fprintf(out, ", starting %s", isotime_format(a->start_epoch_s, when, sizeof when));
    fprintf(out, "\n");

    key(out, "pack");
    if (a->cells > 0)
        fprintf(out, "%dS %s (%s)", a->cells, a->chem->label, a->cells_source);
    else
        fprintf(out, "%s, cell count unknown", a->chem->label);
    if (in->opts->capacity_mah > 0)
        fprintf(out, ", rated %.0f mAh", in->opts->capacity_mah);
    fprintf(out, "\n");

    if (a->has_current) {
        key(out, "charge used");
        fprintf(out, "%.0f mAh (%.0f out, %.0f back by regeneration)\n", a->charge_used_mah,
                a->cc.discharged_mah, a->cc.regen_mah);
        key(out, "energy used");
        fprintf(out, "%.2f Wh (%.2f out, %.2f back)\n", a->energy_used_wh, a->cc.discharged_wh,
                a->cc.regen_wh);
        key(out, "current");
        fprintf(out, "mean %.2f A, max %.2f A", a->current_mean_a, a->current_max_a);
        if (isfinite(a->c_rate_max))
            fprintf(out, " (mean %.2f C, max %.2f C)", a->c_rate_mean, a->c_rate_max);
        fprintf(out, "\n");
        key(out, "power");
        fprintf(out, "mean %.0f W, peak %.0f W\n", a->power_mean_w, a->power_max_w);
    }
    key(out, "voltage");
    fprintf(out, "%.3f V at start, lowest %.3f V", a->voltage_start_v, a->voltage_min_v);
    if (a->cells > 0)
        fprintf(out, " (%.3f V/cell)", a->cell_min_loaded_v);
    fprintf(out, ", %.3f V at end\n", a->voltage_end_v);
    if (a->cells > 0) {
        key(out, "cut-off");
        fprintf(out, "%.1f s under the cut-off voltage %.2f V/cell\n", a->time_below_floor_s,
                a->floor_v);
    }
    if (a->has_current) {
        key(out, "IR");
        est(out, a->r0_mohm, "%.2f", report_mohm());
        if (isfinite(a->r0_mohm.value)) {
            if (a->cells > 0)
                fprintf(out, " (%.2f %s/cell)", a->r0_mohm.value / a->cells, report_mohm());
            if (strcmp(a->r0_method, "steps") == 0)
                fprintf(out, ", internal resistance from %zu current step%s over %.2g s",
                        a->r_edge_steps, a->r_edge_steps == 1 ? "" : "s", a->r_edge_time_scale_s);
            else
                fprintf(out, ", internal resistance: R0 of the %s model",
                        strcmp(a->r0_method, "rc") == 0 ? "R0 + RC" : "R0-only");
        } else {
            fprintf(out, " (not identifiable)");
        }
        fprintf(out, "\n");
        if (isfinite(a->r0_model_mohm.value) && strcmp(a->r0_method, "steps") == 0) {
            key(out, "model R0");
            est(out, a->r0_model_mohm, "%.2f", report_mohm());
            fprintf(out, ", %s model\n", isfinite(a->tau_s.value) ? "R0 + RC" : "R0-only");
        }
        if (isfinite(a->tau_s.value)) {
            key(out, "polarisation");
            est(out, a->r1_mohm, "%.2f", report_mohm());
            /* decimals enough for two digits of the half-width, to the
             * millisecond at most (a long log pins tau to a few ms within
             * the model; README: How accurate is it) */
            int dec = 2;
            if (isfinite(a->tau_s.ci95) && a->tau_s.ci95 < 0.1)
                dec = 3;
            char fmt[8];
            snprintf(fmt, sizeof fmt, "%%.%df", dec);
            fprintf(out, ", time constant ");
            est(out, a->tau_s, fmt, "s");
            fprintf(out, "\n");
        }
    }
    key(out, "open circuit");
    fprintf(out, "%.3f V at start (%s), %.3f V at end (%s)\n", a->ocv_start_v, a->ocv_start_method,
            a->ocv_end_v, a->ocv_end_method);
    key(out, "state of charge");
    est(out, a->soc_start_pct, "%.0f", "%");
    if (a->state_start)
        fprintf(out, " (%s)", a->state_start);
    fprintf(out, " at start, ");
    est(out, a->soc_end_pct, "%.0f", "%");
    if (a->state_end)
        fprintf(out, " (%s)", a->state_end);
    fprintf(out, " at end\n");
    key(out, "capacity");
    est(out, a->capacity_mah, "%.0f", "mAh");
    if (isfinite(a->capacity_mah.value) && in->opts->capacity_mah > 0)
        fprintf(out, " (%.0f %% of rated)", 100.0 * a->capacity_mah.value / in->opts->capacity_mah);
    if (a->capacity_method && strcmp(a->capacity_method, "to_cutoff") == 0) {
        fprintf(out, ", full to %.2f V/cell at %.2f A", a->capacity_cutoff_end_v_cell,
                a->capacity_cutoff_mean_a);
        if (isfinite(a->capacity_cutoff_c_rate))
            fprintf(out, " (%.2g C)", a->capacity_cutoff_c_rate);
    } else if (a->capacity_method) {
        fprintf(out, ", from the SoC swing");
    }
    fprintf(out, "\n");
    if (a->has_temp && isfinite(a->temp_min_c)) {
        key(out, "temperature");
        fprintf(out, "%.1f to %.1f degC\n", a->temp_min_c, a->temp_max_c);
    }
    if (a->ncells_detail > 0) {
        key(out, "cell imbalance");
        if (isfinite(a->spread_rest_start_mv))
            fprintf(out, "%.0f mV at rest before take-off", a->spread_rest_start_mv);
        if (isfinite(a->spread_rest_start_mv) && isfinite(a->spread_rest_end_mv))
            fprintf(out, ", ");
        if (isfinite(a->spread_rest_end_mv))
            fprintf(out, "%.0f mV at rest after landing", a->spread_rest_end_mv);
        if (!isfinite(a->spread_rest_start_mv) && !isfinite(a->spread_rest_end_mv))
            fprintf(out, "unknown at rest");
        if (isfinite(a->spread_load_mv))
            fprintf(out, ", up to %.0f mV under load", a->spread_load_mv);
        fprintf(out, "; weakest cell %d\n", a->weakest_cell);
        char h[32];
        report_units("R0 mOhm", h, sizeof h);
        fprintf(out, "\n  %-6s %12s %*s %14s\n", "cell", "lowest V", report_width(h, 18), h,
                "rest V");
        for (int c = 0; c < a->ncells_detail; c++) {
            const struct cell_detail *d = &a->cell[c];
            char r0[40] = "unknown", rest[24] = "unknown";
            if (isfinite(d->r0_mohm.value))
                snprintf(r0, sizeof r0, "%.2f +/- %.2f", d->r0_mohm.value, d->r0_mohm.ci95);
            if (isfinite(d->voltage_rest_v))
                snprintf(rest, sizeof rest, "%.3f", d->voltage_rest_v);
            fprintf(out, "  %-6d %12.3f %18s %14s%s\n", d->index, d->voltage_min_v, r0, rest,
                    d->index == a->weakest_cell ? "  <- weakest" : "");
        }
    }
    const struct logread_stats *st = in->stats;
    size_t dropped = logread_dropped(st);
    fprintf(out, "\n  read %zu records, kept %zu, dropped %zu, repaired %zu\n", st->records,
            st->kept, dropped, st->temp_repaired.count);
    if (st->ignored_names[0])
        fprintf(out, "  columns ignored: %s\n", st->ignored_names);
    if (st->ncells_dropped) {
        fprintf(out, "  cells dropped (no voltage in their column): %d:", st->ncells_dropped);
        for (int k = 0; k < st->ncells_dropped; k++)
            fprintf(out, " cell %d%s", st->cell_dropped[k].cell,
                    k + 1 < st->ncells_dropped ? "," : "\n");
    }
    if (st->time_is_clock && st->date_column)
        fprintf(out, "  dates and times of day from separate columns (%d and %d)\n",
                st->date_column, st->time_column);
    else if (st->time_is_clock)
        fprintf(out, "  times of day read as a clock (relative; no date in the log)\n");
    if (a->nwarnings) {
        fprintf(out, "\nwarnings\n");
        for (size_t k = 0; k < a->nwarnings; k++)
            fprintf(out, "  [%s] %s\n", a->warnings[k].code, a->warnings[k].message);
    }
    fprintf(out, "\nEstimates, not guarantees: trust the aircraft's own low-voltage protection "
                 "and the pack maker's limits.\n");
    return ferror(out) ? -1 : 0;
}

int report_chemistry_text(FILE *out)
{
    for (int k = 0; k < CHEM_COUNT; k++) {
        const struct chem_info *c = ocv_chem((enum chemistry)k);
        fprintf(out, "%s (%s)\n  source: %s\n", c->name, c->label, c->source);
        fprintf(out, "  cut-off %.2f V/cell under load; full at rest >= %.2f V, empty <= %.2f V\n",
                c->floor_v, c->full_rest_v, c->empty_rest_v);
        fprintf(out, "  SoC %%  :");
        for (size_t j = 0; j < c->npoints; j++)
            fprintf(out, " %5.0f", c->soc_pct[j]);
        fprintf(out, "\n  OCV V  :");
        for (size_t j = 0; j < c->npoints; j++)
            fprintf(out, " %5.2f", c->ocv_v[j]);
        fprintf(out, "\n\n");
    }
    return ferror(out) ? -1 : 0;
}
