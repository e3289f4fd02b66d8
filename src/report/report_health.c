#define _GNU_SOURCE /* timegm */
#include "report_health.h"

#include "jsonout.h"
#include "report.h"

#include "../core/utf8.h"

/* Text from the store or the user, escaped for a terminal (utf8_printable):
 * buffers hold four times the stored length (every byte as \\xHH). */
#define SHOWN_LABEL (4 * 128 + 4)
#define SHOWN_TEXT (4 * 320 + 4)
#define SHOW(buf, s) utf8_printable(buf, sizeof buf, s)

#include <jansson.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "../core/isotime.h"

void pack_view_release(struct pack_view *v)
{
    if (!v)
        return;
    store_flights_free(v->flights);
    v->flights = NULL;
    health_trend_release(&v->trend);
    free(v->dep);
    v->dep = NULL;
    store_acks_free(v->acks);
    v->acks = NULL;
    v->nacks = v->departures = 0;
}

const struct flight_ack *pack_view_ack(const struct pack_view *v, int64_t id)
{
    for (size_t k = 0; k < v->nacks; k++)
        if (v->acks[k].flight_id == id)
            return &v->acks[k];
    return NULL;
}

/* "IR mOhm" in the milliohm symbol of the output */
static void ir_header(char *buf, size_t cap)
{
    snprintf(buf, cap, "IR %s", report_mohm());
}

/* "2026-04-18" of an epoch, or "-" */
static const char *day(double epoch_s, char *buf, size_t cap)
{
    if (!isfinite(epoch_s))
        return "-";
    isotime_format(epoch_s, buf, cap);
    buf[10] = '\0';
    return buf;
}

/* A number with a format, or "-" when unknown. */
static const char *fmt_num(char *buf, size_t cap, const char *fmt, double v)
{
    if (!isfinite(v))
        return "-";
    snprintf(buf, cap, fmt, v);
    return buf;
}

/* The remembered reading options as {"name": "value"}. */
static json_t *settings_obj(const char *settings)
{
    json_t *o = json_object();
    for (const char *p = settings; *p;) {
        const char *end = strchr(p, '\n');
        size_t len = end ? (size_t)(end - p) : strlen(p);
        const char *eq = memchr(p, '=', len);
        if (eq) {
            char key[64];
            snprintf(key, sizeof key, "%.*s", (int)(eq - p), p);
            char val[1024];
            snprintf(val, sizeof val, "%.*s", (int)(len - (size_t)(eq - p) - 1), eq + 1);
            jout_set(o, key, jout_str(val));
        }
        p += len + (end != NULL);
    }
    return o;
}

static json_t *pack_obj(const struct pack_rec *p)
{
    json_t *o =
        json_pack("{s:o, s:i, s:i, s:s, s:f, s:o, s:o, s:s, s:o, s:o}", "id", jout_str(p->label),
                  "cells", p->cells, "parallel", p->parallel, "chemistry", p->chemistry,
                  "capacity_mah", p->capacity_mah, "since", jout_str(p->since), "note",
                  jout_str(p->note), "created_at", p->created_at, "retired_at",
                  jout_str(p->retired_at), "retire_reason", jout_str(p->retire_reason));
    jout_set(o, "reading_settings", settings_obj(p->settings));
    return o;
}

int report_pack_list(FILE *out, const struct pack_rec *p, size_t n, enum fleet_format fmt)
{
    if (fmt == FLEET_CSV) {
        fprintf(out, "pack,cells,parallel,chemistry,capacity_mah,since,retired_at,note\n");
        for (size_t k = 0; k < n; k++) {
            report_csv_cell(out, p[k].label);
            fprintf(out, ",%d,%d,%s,%.0f,%s,%s,", p[k].cells, p[k].parallel, p[k].chemistry,
                    p[k].capacity_mah, p[k].since, p[k].retired_at);
            report_csv_cell(out, p[k].note);
            fputc('\n', out);
        }
        return ferror(out) ? -1 : 0;
    }
    if (fmt == FLEET_JSON) {
        json_t *a = json_array();
        for (size_t k = 0; k < n; k++)
            jout_append(a, pack_obj(&p[k]));
        return jout_write(out, a);
    }
    fprintf(out, "%-16s %-7s %-5s %10s  %-10s  %s\n", "pack", "layout", "chem", "rated mAh",
            "since", "state");
    for (size_t k = 0; k < n; k++) {
        char layout[24];
        snprintf(layout, sizeof layout, "%dS%dP", p[k].cells, p[k].parallel);
        char lb[SHOWN_LABEL], sb[SHOWN_LABEL];
        fprintf(out, "%-16s %-7s %-5s %10.0f  %-10s  %s%s\n", SHOW(lb, p[k].label), layout,
                p[k].chemistry, p[k].capacity_mah, p[k].since[0] ? SHOW(sb, p[k].since) : "-",
                p[k].retired_at[0] ? "retired " : "in service", p[k].retired_at);
    }
    if (n == 0)
        fprintf(out,
                "(no packs yet: packbook pack add ID --cells N --chemistry C --capacity MAH)\n");
    return ferror(out) ? -1 : 0;
}

static json_t *weakest_obj(const struct pack_health *h)
{
    if (!h->weakest_cell)
        return json_null();
    return json_pack("{s:i, s:I, s:I}", "cell", h->weakest_cell, "flights",
                     (json_int_t)h->weakest_count, "of", (json_int_t)h->weakest_of);
}

/* "3 (4 of 5)" or "-" */
static const char *weakest_text(const struct pack_health *h, char *buf, size_t cap)
{
    if (!h->weakest_cell)
        return "-";
    snprintf(buf, cap, "%d (%zu/%zu)", h->weakest_cell, h->weakest_count, h->weakest_of);
    return buf;
}

static json_t *health_obj(const struct pack_view *v)
{
    const struct pack_health *h = &v->health;
    json_t *o =
        json_pack("{s:I, s:o, s:o, s:o, s:o, s:o, s:o, s:o, s:i, s:s, s:o}", "flights",
                  (json_int_t)h->flights, "equivalent_cycles", jout_num(h->cycles), "last_flown",
                  jout_date(h->last_epoch_s), "r0_mohm_per_cell", jout_num(h->r0_now_mohm_cell),
                  "r0_baseline_mohm_per_cell", jout_num(h->r0_base_mohm_cell), "r0_ratio",
                  jout_num(h->r0_ratio), "capacity_pct", jout_num(h->capacity_pct),
                  "cell_spread_mv", jout_num(h->spread_mv), "overdischarges", h->overdischarges,
                  "status", v->pack.retired_at[0] ? "retired" : health_status_name(h->status),
                  "reason", jout_str(v->pack.retired_at[0] ? v->pack.retire_reason : h->reason));
    jout_set(o, "weakest_cell", weakest_obj(h));
    jout_set(o, "departures_unacknowledged", json_integer((json_int_t)v->departures));
    return o;
}

/* The reason for the status, in the output's units, escaped for the
 * terminal (text only). */
static const char *why_text(const struct pack_view *v, char *buf, size_t cap)
{
    char u[400];
    report_units(v->pack.retired_at[0] ? v->pack.retire_reason : v->health.reason, u, sizeof u);
    return utf8_printable(buf, cap, u);
}

static const char *status_of(const struct pack_view *v)
{
    return v->pack.retired_at[0] ? "retired" : health_status_name(v->health.status);
}

static json_t *departure_obj(const struct pack_view *v, size_t k)
{
    const struct departure *d = v->dep ? &v->dep[k] : NULL;
    if (!d || !d->flagged)
        return json_null();
    const struct flight_ack *a = pack_view_ack(v, v->flights[k].id);
    return json_pack("{s:s, s:o, s:o, s:o, s:o, s:b, s:o, s:o}", "quantity",
                     departure_name(d->quantity), "value", jout_num(d->value), "expected",
                     jout_num(d->expected), "change_pct", jout_num(d->change_pct), "sigmas",
                     jout_num(d->z), "acknowledged", a != NULL, "note",
                     a ? jout_str(a->note) : json_null(), "acknowledged_at",
                     a ? jout_str(a->acked_at) : json_null());
}

static json_t *flight_obj(const struct flight_rec *f)
{
    json_t *o = json_pack(
        "{s:o, s:s, s:o, s:o, s:o, s:o, s:o, s:o, s:o, s:o, s:o, s:i}", "flown_at",
        jout_date(f->flown_epoch_s), "date_source", f->date_source, "source", jout_str(f->source),
        "duration_s", jout_num(f->duration_s), "charge_used_mah", jout_num(f->charge_used_mah),
        "r0_mohm", jout_num(f->r0_mohm), "capacity_mah", jout_num(f->capacity_mah), "soc_start_pct",
        jout_num(f->soc_start_pct), "soc_end_pct", jout_num(f->soc_end_pct), "cell_spread_rest_mv",
        jout_num(f->cell_spread_rest_mv), "time_below_floor_s", jout_num(f->time_below_floor_s),
        "warnings", f->warnings);
    jout_set(o, "weakest_cell", f->weakest_cell > 0 ? json_integer(f->weakest_cell) : json_null());
    return o;
}

int report_pack_show(FILE *out, const struct pack_view *v, enum fleet_format fmt)
{
    const struct pack_rec *p = &v->pack;
    const struct pack_health *h = &v->health;
    if (fmt == FLEET_CSV) {
        const char **labels = malloc((v->nflights ? v->nflights : 1) * sizeof *labels);
        if (!labels)
            return -1;
        for (size_t k = 0; k < v->nflights; k++)
            labels[k] = p->label;
        int rc = report_flight_list(out, v->flights, labels, v->nflights, FLEET_CSV);
        free(labels);
        return rc;
    }
    if (fmt == FLEET_JSON) {
        json_t *o = pack_obj(p);
        jout_set(o, "health", health_obj(v));
        jout_set(o, "paired_with", jout_str(v->paired_with));
        json_t *fl = json_array();
        for (size_t k = 0; k < v->nflights; k++) {
            json_t *fo = flight_obj(&v->flights[k]);
            jout_set(fo, "id", json_integer((json_int_t)v->flights[k].id));
            jout_set(fo, "departure", departure_obj(v, k));
            jout_append(fl, fo);
        }
        jout_set(o, "flights", fl);
        return jout_write(out, o);
    }
    char b1[32], b2[32], b3[32];
    char lb[SHOWN_LABEL], tb[SHOWN_TEXT];
    fprintf(out, "pack %s: %dS%dP %s, rated %.0f mAh", SHOW(lb, p->label), p->cells, p->parallel,
            p->chemistry, p->capacity_mah);
    if (p->since[0])
        fprintf(out, ", in service since %s", SHOW(lb, p->since));
    fprintf(out, "\n");
    if (p->note[0])
        fprintf(out, "  note: %s\n", SHOW(tb, p->note));
    if (v->paired_with[0])
        fprintf(out, "  paired with %s (packbook pack pair)\n", SHOW(lb, v->paired_with));
    if (p->settings[0]) {
        fprintf(out, "  reading settings:");
        for (const char *q = p->settings; *q;) {
            const char *end = strchr(q, '\n');
            size_t len = end ? (size_t)(end - q) : strlen(q);
            const char *eq = memchr(q, '=', len);
            if (eq)
                fprintf(out, " --%.*s %.*s", (int)(eq - q), q, (int)(len - (size_t)(eq - q) - 1),
                        eq + 1);
            q += len + (end != NULL);
        }
        fprintf(out, "\n");
    }
    if (p->retired_at[0])
        fprintf(out, "  retired %s: %s\n", p->retired_at, SHOW(tb, p->retire_reason));
    fprintf(out, "  %zu flight%s, %.1f equivalent cycles, last flown %s\n", h->flights,
            h->flights == 1 ? "" : "s", isfinite(h->cycles) ? h->cycles : 0.0,
            day(h->last_epoch_s, b1, sizeof b1));
    fprintf(out,
            "  IR (R0) %s %s/cell now, baseline %s (x%s); capacity %s %% of rated; cell "
            "imbalance %s mV at rest\n",
            fmt_num(b1, sizeof b1, "%.2f", h->r0_now_mohm_cell), report_mohm(),
            fmt_num(b2, sizeof b2, "%.2f", h->r0_base_mohm_cell),
            fmt_num(b3, sizeof b3, "%.2f", h->r0_ratio),
            fmt_num((char[32]){0}, 32, "%.0f", h->capacity_pct),
            fmt_num((char[32]){0}, 32, "%.0f", h->spread_mv));
    if (h->weakest_cell)
        fprintf(out,
                "  weakest cell: %d, the lowest under load in %zu of the last %zu flight%s "
                "with cell voltages\n",
                h->weakest_cell, h->weakest_count, h->weakest_of, h->weakest_of == 1 ? "" : "s");
    fprintf(out, "  status: %s (%s)\n", status_of(v),
            why_text(v, (char[SHOWN_TEXT]){0}, SHOWN_TEXT));
    for (size_t k = 0; v->dep && k < v->nflights; k++) {
        if (!v->dep[k].flagged)
            continue;
        char what[128];
        const struct flight_ack *a = pack_view_ack(v, v->flights[k].id);
        departure_text(&v->dep[k], what, sizeof what);
        fprintf(out, "  %s flight %lld (%s): %s", a ? "left its trend:" : "inspect:",
                (long long)v->flights[k].id, day(v->flights[k].flown_epoch_s, b1, sizeof b1),
                report_units(what, (char[160]){0}, 160));
        if (a)
            fprintf(out, "; acknowledged %.10s: %s\n", a->acked_at, SHOW(tb, a->note));
        else
            fprintf(out, "; after inspecting: packbook flight ack %lld --note TEXT\n",
                    (long long)v->flights[k].id);
    }
    if (v->nflights) {
        char ir[24];
        ir_header(ir, sizeof ir);
        fprintf(out, "\n  %6s  %-10s %8s %9s %*s %10s %11s %5s %6s\n", "id", "date", "min", "mAh",
                report_width(ir, 9), ir, "cap mAh", "SoC %", "weak", "warn");
        for (size_t k = 0; k < v->nflights; k++) {
            const struct flight_rec *f = &v->flights[k];
            char soc[24];
            if (isfinite(f->soc_start_pct) && isfinite(f->soc_end_pct))
                snprintf(soc, sizeof soc, "%.0f->%.0f", f->soc_start_pct, f->soc_end_pct);
            else
                snprintf(soc, sizeof soc, "-");
            char wk[16] = "-";
            if (f->weakest_cell > 0)
                snprintf(wk, sizeof wk, "%d", f->weakest_cell);
            fprintf(out, "  %6lld  %-10s %8.1f %9s %9s %10s %11s %5s %6d%s\n", (long long)f->id,
                    day(f->flown_epoch_s, b1, sizeof b1), f->duration_s / 60.0,
                    fmt_num(b2, sizeof b2, "%.0f", f->charge_used_mah),
                    fmt_num(b3, sizeof b3, "%.2f", f->r0_mohm),
                    fmt_num((char[32]){0}, 32, "%.0f", f->capacity_mah), soc, wk, f->warnings,
                    v->dep && v->dep[k].flagged && !pack_view_ack(v, f->id) ? "  inspect" : "");
        }
    }
    return ferror(out) ? -1 : 0;
}

static void csv_num(FILE *out, const char *fmt, double v)
{
    fputc(',', out);
    if (isfinite(v))
        fprintf(out, fmt, v);
}

int report_flight_list(FILE *out, const struct flight_rec *f, const char *const *labels, size_t n,
                       enum fleet_format fmt)
{
    if (fmt == FLEET_JSON) {
        json_t *a = json_array();
        for (size_t k = 0; k < n; k++) {
            json_t *o = json_pack("{s:I, s:s}", "id", (json_int_t)f[k].id, "pack", labels[k]);
            json_t *x = flight_obj(&f[k]);
            json_object_update(o, x);
            json_decref(x);
            json_array_append_new(a, o);
        }
        return jout_write(out, a);
    }
    char b[8][32];
    if (fmt == FLEET_CSV) {
        fprintf(out, "id,pack,flown_at,date_source,source,duration_s,charge_used_mah,r0_mohm,"
                     "capacity_mah,soc_start_pct,soc_end_pct,cell_spread_rest_mv,"
                     "time_below_floor_s,weakest_cell,warnings\n");
        for (size_t k = 0; k < n; k++) {
            fprintf(out, "%lld,", (long long)f[k].id);
            report_csv_cell(out, labels[k]);
            isotime_format(f[k].flown_epoch_s, b[0], sizeof b[0]);
            fprintf(out, ",%s,%s,", b[0], f[k].date_source);
            report_csv_cell(out, f[k].source);
            csv_num(out, "%.1f", f[k].duration_s);
            csv_num(out, "%.1f", f[k].charge_used_mah);
            csv_num(out, "%.3f", f[k].r0_mohm);
            csv_num(out, "%.1f", f[k].capacity_mah);
            csv_num(out, "%.1f", f[k].soc_start_pct);
            csv_num(out, "%.1f", f[k].soc_end_pct);
            csv_num(out, "%.1f", f[k].cell_spread_rest_mv);
            csv_num(out, "%.1f", f[k].time_below_floor_s);
            fputc(',', out);
            if (f[k].weakest_cell > 0)
                fprintf(out, "%d", f[k].weakest_cell);
            fprintf(out, ",%d\n", f[k].warnings);
        }
        return ferror(out) ? -1 : 0;
    }
    char ir[24];
    ir_header(ir, sizeof ir);
    fprintf(out, "%6s  %-12s %-10s %-6s %7s %7s %*s %8s %9s %5s %6s  %s\n", "id", "pack", "date",
            "from", "min", "mAh", report_width(ir, 8), ir, "cap mAh", "SoC %", "weak", "warn",
            "file");
    for (size_t k = 0; k < n; k++) {
        char soc[24];
        if (isfinite(f[k].soc_start_pct) && isfinite(f[k].soc_end_pct))
            snprintf(soc, sizeof soc, "%.0f->%.0f", f[k].soc_start_pct, f[k].soc_end_pct);
        else
            snprintf(soc, sizeof soc, "-");
        char wk[16] = "-";
        if (f[k].weakest_cell > 0)
            snprintf(wk, sizeof wk, "%d", f[k].weakest_cell);
        char lb[SHOWN_LABEL], sb[SHOWN_TEXT];
        fprintf(out, "%6lld  %-12s %-10s %-6s %7s %7s %8s %8s %9s %5s %6d  %s\n",
                (long long)f[k].id, SHOW(lb, labels[k]), day(f[k].flown_epoch_s, b[0], 32),
                f[k].date_source, fmt_num(b[1], 32, "%.1f", f[k].duration_s / 60.0),
                fmt_num(b[2], 32, "%.0f", f[k].charge_used_mah),
                fmt_num(b[3], 32, "%.2f", f[k].r0_mohm),
                fmt_num(b[4], 32, "%.0f", f[k].capacity_mah), soc, wk, f[k].warnings,
                SHOW(sb, f[k].source));
    }
    if (n == 0)
        fprintf(out, "(no flights)\n");
    return ferror(out) ? -1 : 0;
}

/* Bytes of a character a spreadsheet skips before a formula: space, tab, CR,
 * LF, no-break space and the zero-width ones (U+200B-U+200D, U+2060, U+FEFF). */
static size_t csv_skippable(const char *t)
{
    static const char *const zw[] = {"\xc2\xa0",     "\xe2\x80\x8b", "\xe2\x80\x8c",
                                     "\xe2\x80\x8d", "\xe2\x81\xa0", "\xef\xbb\xbf"};
    if (*t == ' ' || *t == '\t' || *t == '\r' || *t == '\n')
        return 1;
    for (size_t k = 0; k < sizeof zw / sizeof *zw; k++)
        if (strncmp(t, zw[k], strlen(zw[k])) == 0)
            return strlen(zw[k]);
    return 0;
}

void report_csv_cell(FILE *out, const char *t)
{
    /* a cell that starts, after anything a spreadsheet skips, with a formula
     * sign is written as text (a leading quote) */
    const char *f = t;
    for (size_t n; (n = csv_skippable(f)) > 0;)
        f += n;
    int formula =
        f[0] == '=' || f[0] == '+' || f[0] == '-' || f[0] == '@' || t[0] == '\t' || t[0] == '\r';
    int quote = formula || strpbrk(t, ",\"\n\r") != NULL;
    if (quote)
        fputc('"', out);
    if (formula)
        fputc('\'', out);
    for (const char *c = t; *c; c++) {
        if (*c == '"')
            fputc('"', out);
        fputc(*c, out);
    }
    if (quote)
        fputc('"', out);
}

/* The date to plan the pack's retirement by: "now" when a rule fires or a
 * fade model is past its level, the early end's date, or "" */
static const char *plan_by(const struct pack_view *v, char *buf, size_t cap)
{
    double pc, pe;
    const char *what;
    if (v->pack.retired_at[0])
        return "";
    if (v->health.status == HEALTH_RETIRE || v->trend.capacity.life.past || v->trend.r0.life.past)
        return "now";
    if (!health_plan(&v->trend, &pc, &pe, &what) || !isfinite(pe))
        return "";
    return day(pe, buf, cap);
}

int report_fleet(FILE *out, const struct pack_view *v, size_t n, enum fleet_format fmt,
                 const double *safe, double reserve_pct)
{
    if (fmt == FLEET_JSON) {
        json_t *a = json_array();
        for (size_t k = 0; k < n; k++) {
            json_t *o = json_pack("{s:o, s:i, s:s, s:f}", "id", jout_str(v[k].pack.label), "cells",
                                  v[k].pack.cells, "chemistry", v[k].pack.chemistry,
                                  "rated_capacity_mah", v[k].pack.capacity_mah);
            json_t *h = health_obj(&v[k]);
            if (!o || !h || json_object_update(o, h) != 0)
                jout_set(o, "health", NULL); /* marks the document: never a pack without status */
            json_decref(h);
            double pc, pe;
            const char *pq;
            json_object_set_new(o, "paired_with", jout_str(v[k].paired_with));
            json_object_set_new(o, "pair_distance", jout_num(v[k].pair_distance));
            health_plan(&v[k].trend, &pc, &pe, &pq);
            json_object_set_new(o, "plan_retire_by", jout_date(pe));
            json_object_set_new(o, "plan_retire_cycles", jout_num(pc));
            json_object_set_new(o, "plan_retire_quantity", jout_str(pq ? pq : ""));
            if (safe)
                jout_set(o, "safe_time_s",
                         json_pack("{s:o, s:o}", "conservative", jout_num(safe[2 * k]), "median",
                                   jout_num(safe[2 * k + 1])));
            jout_append(a, o);
        }
        return jout_write(out, a);
    }
    if (fmt == FLEET_CSV) {
        fprintf(out,
                "pack,flights,equivalent_cycles,last_flown,r0_mohm_per_cell,r0_ratio,"
                "capacity_pct,cell_spread_mv,weakest_cell,weakest_cell_flights,overdischarges,"
                "status,reason,plan_retire_by%s\n",
                safe ? ",safe_time_conservative_s,safe_time_median_s" : "");
        char b[32];
        for (size_t k = 0; k < n; k++) {
            const struct pack_health *h = &v[k].health;
            report_csv_cell(out, v[k].pack.label);
            fprintf(out, ",%zu", h->flights);
            csv_num(out, "%.2f", h->cycles);
            fprintf(out, ",%s", isfinite(h->last_epoch_s) ? day(h->last_epoch_s, b, sizeof b) : "");
            csv_num(out, "%.3f", h->r0_now_mohm_cell);
            csv_num(out, "%.3f", h->r0_ratio);
            csv_num(out, "%.1f", h->capacity_pct);
            csv_num(out, "%.1f", h->spread_mv);
            if (h->weakest_cell)
                fprintf(out, ",%d,%zu", h->weakest_cell, h->weakest_count);
            else
                fprintf(out, ",,");
            fprintf(out, ",%d,%s,", h->overdischarges, status_of(&v[k]));
            report_csv_cell(out, v[k].pack.retired_at[0] ? v[k].pack.retire_reason : h->reason);
            fprintf(out, ",%s", plan_by(&v[k], b, sizeof b));
            if (safe) {
                csv_num(out, "%.0f", safe[2 * k]);
                csv_num(out, "%.0f", safe[2 * k + 1]);
            }
            fputc('\n', out);
        }
        return ferror(out) ? -1 : 0;
    }
    char ir[24];
    ir_header(ir, sizeof ir);
    fprintf(out, "%-14s %7s %7s %-10s %*s %7s %6s %9s %-9s %10s%s  %-10s  %-7s %s\n", "pack",
            "flights", "cycles", "last", report_width(ir, 9), ir, "IR vs", "cap %", "cell imb.",
            "weakest", "over-", safe ? "  safe min" : "", "plan to", "status", "why");
    fprintf(out, "%-14s %7s %7s %-10s %9s %7s %6s %9s %-9s %10s%s  %-10s  %-7s\n", "", "", "",
            "flown", "per cell", "base", "rated", "mV rest", "cell", "discharges",
            safe ? "  (5th pct)" : "", "retire by", "");
    for (size_t k = 0; k < n; k++) {
        const struct pack_health *h = &v[k].health;
        char b[7][32];
        char sm[40] = "";
        if (safe)
            snprintf(sm, sizeof sm, "  %9s", fmt_num(b[6], 32, "%.1f", safe[2 * k] / 60.0));
        char wk[32], lb[SHOWN_LABEL], pb[32];
        const char *plan = plan_by(&v[k], pb, sizeof pb);
        fprintf(out, "%-14s %7zu %7s %-10s %9s %7s %6s %9s %-9s %10d%s  %-10s  %-7s %s\n",
                SHOW(lb, v[k].pack.label), h->flights, fmt_num(b[0], 32, "%.1f", h->cycles),
                day(h->last_epoch_s, b[1], 32), fmt_num(b[2], 32, "%.2f", h->r0_now_mohm_cell),
                fmt_num(b[3], 32, "x%.2f", h->r0_ratio), fmt_num(b[4], 32, "%.0f", h->capacity_pct),
                fmt_num(b[5], 32, "%.0f", h->spread_mv), weakest_text(h, wk, sizeof wk),
                h->overdischarges, sm, plan[0] ? plan : "-", status_of(&v[k]),
                why_text(&v[k], (char[SHOWN_TEXT]){0}, SHOWN_TEXT));
    }
    for (size_t k = 0; k < n; k++)
        if (v[k].paired_with[0] && strcmp(v[k].pack.label, v[k].paired_with) < 0) {
            char d[32];
            char la[SHOWN_LABEL], lb[SHOWN_LABEL];
            fprintf(out, "pair: %s + %s, mismatch d %s (limit 1; packbook pack pair)\n",
                    SHOW(la, v[k].pack.label), SHOW(lb, v[k].paired_with),
                    fmt_num(d, sizeof d, "%.2f", v[k].pair_distance));
        }
    if (n)
        fprintf(out, "plan to retire by: the early end of the knee-aware projection of capacity\n"
                     "or IR (packbook trend ID), as a date at the pack's use so far\n");
    if (safe)
        fprintf(out,
                "safe min: conservative safe flight time to a %.0f %% reserve at %s; an estimate,\n"
                "not a substitute for the aircraft's low-voltage protection\n",
                reserve_pct, "each pack's recent cruise power (or --power)");
    if (n == 0)
        fprintf(out, "(no packs match)\n");
    return ferror(out) ? -1 : 0;
}

static json_t *line_obj(const struct line_fit *l)
{
    if (!l->ok)
        return json_null();
    return json_pack("{s:f, s:f, s:f, s:I}", "intercept", l->a, "slope", l->b, "slope_ci95",
                     l->b_ci95, "points", (json_int_t)l->n);
}

static json_t *fade_obj(const struct life_projection *p)
{
    if (p->model == LIFE_NONE)
        return json_null();
    return json_pack("{s:s, s:o, s:o, s:o, s:b}", "model", life_model_name(p->model), "shape",
                     jout_num(p->shape), "holdout_error", jout_num(p->holdout_err),
                     "error_per_cycle", jout_num(p->err_rate), "past", p->past);
}

static json_t *trend_line_obj(const struct trend_line *t)
{
    const struct life_projection *p = &t->life;
    return json_pack(
        "{s:o, s:o, s:o, s:b, s:b, s:o, s:o, s:b, s:[o, o, o], s:o, s:o}", "vs_cycles",
        line_obj(&t->vs_cycles), "per_day", line_obj(&t->vs_days), "retire_level",
        jout_num(t->level), "crossed", t->crossed, "line_past", t->line_past, "crossing_cycles",
        jout_num(t->cross_cycles), "crossing_date", jout_date(t->cross_epoch_s), "beyond_horizon",
        t->beyond_horizon, "crossing_cycles_range", jout_num(p->early), jout_num(p->middle),
        jout_num(p->late), "plan_date", jout_date(t->plan_epoch_s), "fade_model", fade_obj(p));
}

int report_life_text(const struct trend_line *t, const char *unit, double horizon, char *buf,
                     size_t cap)
{
    const struct life_projection *p = &t->life;
    if (p->model == LIFE_NONE || !isfinite(t->level))
        return 0;
    int pct = unit[0] == '%';
    char lvl[48], d[32];
    snprintf(lvl, sizeof lvl, pct ? "%.0f %%" : "%.2f %s", t->level, unit);
    const char *around = isfinite(t->plan_epoch_s) ? ", around " : "";
    const char *when = isfinite(t->plan_epoch_s) ? day(t->plan_epoch_s, d, sizeof d) : "";
    if (p->past)
        snprintf(buf, cap, "%s: the %s fit is at the level already; plan for now", lvl,
                 life_model_name(p->model));
    else if (!isfinite(p->early))
        snprintf(buf, cap, "%s: not within %.0f cycles (%s fit)", lvl, horizon,
                 life_model_name(p->model));
    else if (!isfinite(p->late))
        snprintf(buf, cap,
                 "%s from cycle %.0f (middle %.0f, late end beyond %.0f cycles; %s fit); "
                 "plan for %.0f%s%s",
                 lvl, p->early, p->middle, horizon, life_model_name(p->model), p->early, around,
                 when);
    else
        snprintf(buf, cap,
                 "%s between cycle %.0f and %.0f (middle %.0f, %s fit); plan for %.0f%s%s", lvl,
                 p->early, p->late, p->middle, life_model_name(p->model), p->early, around, when);
    return 1;
}

static void text_projection(FILE *out, const char *what, const struct trend_line *t,
                            const char *unit, double horizon, double cycles_now)
{
    char b[40];
    double per = REPORT_SLOPE_CYCLES;
    fprintf(out, "  %-10s ", what);
    if (!t->vs_cycles.ok) {
        fprintf(out, "too few flights for a trend (need 3 with a value)\n");
        return;
    }
    fprintf(out, "%+.3f +/- %.3f %s per %.0f cycles, %+.4f +/- %.4f %s per day; ",
            per * t->vs_cycles.b, per * t->vs_cycles.b_ci95, unit, per, t->vs_days.b,
            t->vs_days.b_ci95, unit);
    if (!isfinite(t->level))
        fprintf(out, "no retirement level (no baseline)\n");
    else if (t->crossed)
        fprintf(out, "retirement level %.2f %s reached (the rule fires)\n", t->level, unit);
    else if (t->line_past)
        fprintf(out,
                "the fitted line is past the retirement level %.2f %s; the recent flights are "
                "not yet: watch closely\n",
                t->level, unit);
    else if (isfinite(t->cross_cycles))
        fprintf(out,
                "reaches the retirement level %.2f %s at cycle %.0f (%.0f cycle%s from now)%s%s\n",
                t->level, unit, t->cross_cycles, t->cross_cycles - cycles_now,
                fabs(t->cross_cycles - cycles_now - 1.0) < 0.5 ? "" : "s",
                isfinite(t->cross_epoch_s) ? ", around " : "",
                isfinite(t->cross_epoch_s) ? day(t->cross_epoch_s, b, sizeof b) : "");
    else
        fprintf(out, "does not reach the retirement level %.2f %s within %.0f cycles\n", t->level,
                unit, horizon);
    char lb[200];
    if (isfinite(t->level) && !t->crossed && report_life_text(t, unit, horizon, lb, sizeof lb))
        fprintf(out, "  %-10s %s\n", "", lb);
}

static const char *const bynames[] = {"week", "month", "cycle"};

static json_t *trend_obj(const struct pack_view *v, enum trend_by by, double horizon)
{
    const struct pack_trend *t = &v->trend;
    json_t *b = json_array();
    for (size_t k = 0; k < t->nbuckets; k++) {
        const struct trend_bucket *x = &t->buckets[k];
        json_array_append_new(
            b, json_pack("{s:s, s:I, s:o, s:o, s:o, s:o, s:o}", "bucket", x->key, "flights",
                         (json_int_t)x->flights, "first", jout_date(x->first_epoch_s), "last",
                         jout_date(x->last_epoch_s), "charge_mah", jout_num(x->charge_mah),
                         "r0_mohm_per_cell", jout_num(x->r0_mohm_cell), "capacity_pct",
                         jout_num(x->capacity_pct)));
    }
    return json_pack("{s:o, s:s, s:f, s:o, s:o, s:o, s:o, s:o}", "id", jout_str(v->pack.label),
                     "by", bynames[by], "horizon_cycles", horizon, "equivalent_cycles",
                     jout_num(t->cycles_now), "buckets", b, "r0_mohm_per_cell",
                     trend_line_obj(&t->r0), "capacity_pct", trend_line_obj(&t->capacity), "health",
                     health_obj(v));
}

/* The key of the period after the one that holds *epoch_s (week or month),
 * moving *epoch_s into it. */
static void next_period(enum trend_by by, double *epoch_s, char *key, size_t cap)
{
    if (by == TREND_MONTH) {
        /* from the 15th of this month, 30 days is always next month */
        time_t t = (time_t)floor(*epoch_s);
        struct tm tm;
        gmtime_r(&t, &tm);
        tm.tm_mday = 15;
        tm.tm_hour = 12;
        *epoch_s = (double)timegm(&tm) + 30 * 86400.0;
        t = (time_t)*epoch_s;
        gmtime_r(&t, &tm);
        snprintf(key, cap, "%04d-%02d", tm.tm_year + 1900, tm.tm_mon + 1);
        return;
    }
    int y = 0, w = 0;
    *epoch_s += 7 * 86400.0;
    isotime_week(*epoch_s, &y, &w);
    snprintf(key, cap, "%04d-W%02d", y, w);
}

/* Calls row(k) for each bucket and gap(key) for each week or month without
 * flights between them (none for cycle buckets). */
static void each_period(FILE *out, const struct pack_view *v, enum trend_by by,
                        void (*row)(FILE *, const struct pack_view *, const struct trend_bucket *),
                        void (*gap)(FILE *, const struct pack_view *, const char *))
{
    const struct pack_trend *t = &v->trend;
    for (size_t k = 0; k < t->nbuckets; k++) {
        row(out, v, &t->buckets[k]);
        if (by == TREND_CYCLE || k + 1 == t->nbuckets)
            continue;
        double e = t->buckets[k].last_epoch_s;
        char key[40];
        /* bounded: a history spans far fewer than 10000 weeks */
        for (int guard = 0; guard < 10000; guard++) {
            next_period(by, &e, key, sizeof key);
            if (strcmp(key, t->buckets[k + 1].key) == 0 || e >= t->buckets[k + 1].first_epoch_s)
                break;
            gap(out, v, key);
        }
    }
}

static void text_row(FILE *out, const struct pack_view *v, const struct trend_bucket *x)
{
    (void)v;
    char b1[32], b2[32], b3[32];
    fprintf(out, "  %-14s %7zu %-10s %9.0f %9s %8s\n", x->key, x->flights,
            day(x->first_epoch_s, b1, sizeof b1), x->charge_mah,
            fmt_num(b2, sizeof b2, "%.2f", x->r0_mohm_cell),
            fmt_num(b3, sizeof b3, "%.1f", x->capacity_pct));
}

static void text_gap(FILE *out, const struct pack_view *v, const char *key)
{
    (void)v;
    fprintf(out, "  %-14s %7d %-10s %9s %9s %8s\n", key, 0, "-", "-", "-", "-");
}

static void csv_row(FILE *out, const struct pack_view *v, const struct trend_bucket *x)
{
    char b[40];
    report_csv_cell(out, v->pack.label);
    fprintf(out, ",%s,%zu,%s", x->key, x->flights,
            isfinite(x->first_epoch_s) ? day(x->first_epoch_s, b, sizeof b) : "");
    fprintf(out, ",%s", isfinite(x->last_epoch_s) ? day(x->last_epoch_s, b, sizeof b) : "");
    csv_num(out, "%.1f", x->charge_mah);
    csv_num(out, "%.4f", x->r0_mohm_cell);
    csv_num(out, "%.2f", x->capacity_pct);
    fputc('\n', out);
}

static void csv_gap(FILE *out, const struct pack_view *v, const char *key)
{
    report_csv_cell(out, v->pack.label);
    fprintf(out, ",%s,0,,,,,\n", key);
}

int report_trend(FILE *out, const struct pack_view *v, size_t n, enum trend_by by, double horizon,
                 enum fleet_format fmt)
{
    if (fmt == FLEET_JSON) {
        if (n == 1)
            return jout_write(out, trend_obj(&v[0], by, horizon));
        json_t *a = json_array();
        for (size_t k = 0; k < n; k++)
            json_array_append_new(a, trend_obj(&v[k], by, horizon));
        return jout_write(out, a);
    }
    if (fmt == FLEET_CSV) {
        fprintf(out, "pack,%s,flights,first,last,charge_mah,r0_mohm_per_cell,capacity_pct\n",
                by == TREND_CYCLE ? "cycles" : bynames[by]);
        for (size_t k = 0; k < n; k++)
            each_period(out, &v[k], by, csv_row, csv_gap);
        return ferror(out) ? -1 : 0;
    }
    for (size_t k = 0; k < n; k++) {
        const struct pack_trend *t = &v[k].trend;
        if (k)
            fprintf(out, "\n");
        char lb[SHOWN_LABEL];
        fprintf(out, "trend of pack %s by %s: %zu flight%s, %.1f equivalent cycles\n\n",
                SHOW(lb, v[k].pack.label), bynames[by], v[k].nflights,
                v[k].nflights == 1 ? "" : "s", isfinite(t->cycles_now) ? t->cycles_now : 0.0);
        char ir[24];
        ir_header(ir, sizeof ir);
        fprintf(out, "  %-14s %7s %-10s %9s %*s %8s\n", by == TREND_CYCLE ? "cycles" : "period",
                "flights", "from", "mAh", report_width(ir, 9), ir, "cap %");
        fprintf(out, "  %-14s %7s %-10s %9s %9s %8s\n", "", "", "", "", "per cell", "rated");
        each_period(out, &v[k], by, text_row, text_gap);
        fprintf(out, "\n");
        char unit[24];
        snprintf(unit, sizeof unit, "%s/cell", report_mohm());
        text_projection(out, "IR (R0)", &t->r0, unit, horizon, t->cycles_now);
        text_projection(out, "capacity", &t->capacity, "% of rated", horizon, t->cycles_now);
        fprintf(out, "\n  status: %s (%s)\n", status_of(&v[k]),
                why_text(&v[k], (char[400]){0}, 400));
    }
    fprintf(out, "  The first line of each is a straight line; the second chooses among fade\n"
                 "  models (line, break, exponential, power law) by their held-out error on\n"
                 "  this pack's history. A pack can fail sooner than any of them: inspect it.\n");
    return ferror(out) ? -1 : 0;
}

/* One compare row: its label and each pack's value. */
struct compare_row {
    const char *label; /* with its unit */
    const char *csv;   /* the CSV column */
    const char *(*text)(const struct pack_view *x, char *b, size_t cap);
};

static const char *cr_pack(const struct pack_view *x, char *b, size_t cap)
{
    return utf8_printable(b, cap, x->pack.label);
}
static const char *cr_chem(const struct pack_view *x, char *b, size_t cap)
{
    (void)b, (void)cap;
    return x->pack.chemistry;
}
static const char *cr_rated(const struct pack_view *x, char *b, size_t cap)
{
    return fmt_num(b, cap, "%.0f", x->pack.capacity_mah);
}
static const char *cr_flights(const struct pack_view *x, char *b, size_t cap)
{
    return fmt_num(b, cap, "%.0f", (double)x->health.flights);
}
static const char *cr_cycles(const struct pack_view *x, char *b, size_t cap)
{
    return fmt_num(b, cap, "%.1f", x->health.cycles);
}
static const char *cr_last(const struct pack_view *x, char *b, size_t cap)
{
    return isfinite(x->health.last_epoch_s) ? day(x->health.last_epoch_s, b, cap) : "";
}
static const char *cr_r0(const struct pack_view *x, char *b, size_t cap)
{
    return fmt_num(b, cap, "%.2f", x->health.r0_now_mohm_cell);
}
static const char *cr_ratio(const struct pack_view *x, char *b, size_t cap)
{
    return fmt_num(b, cap, "%.2f", x->health.r0_ratio);
}
static const char *cr_r0_slope(const struct pack_view *x, char *b, size_t cap)
{
    const struct line_fit *l = &x->trend.r0.vs_cycles;
    return fmt_num(b, cap, "%+.3f", l->ok ? REPORT_SLOPE_CYCLES * l->b : NAN);
}
static const char *cr_cap(const struct pack_view *x, char *b, size_t cap)
{
    return fmt_num(b, cap, "%.0f", x->health.capacity_pct);
}
static const char *cr_cap_slope(const struct pack_view *x, char *b, size_t cap)
{
    const struct line_fit *l = &x->trend.capacity.vs_cycles;
    return fmt_num(b, cap, "%+.2f", l->ok ? REPORT_SLOPE_CYCLES * l->b : NAN);
}
static const char *cr_spread(const struct pack_view *x, char *b, size_t cap)
{
    return fmt_num(b, cap, "%.0f", x->health.spread_mv);
}
static const char *cr_weakest(const struct pack_view *x, char *b, size_t cap)
{
    return x->health.weakest_cell ? weakest_text(&x->health, b, cap) : "";
}
static const char *cr_over(const struct pack_view *x, char *b, size_t cap)
{
    return fmt_num(b, cap, "%.0f", (double)x->health.overdischarges);
}
static const char *cr_cap_limit(const struct pack_view *x, char *b, size_t cap)
{
    return x->trend.capacity.crossed     ? "reached"
           : x->trend.capacity.line_past ? "line past"
                                         : fmt_num(b, cap, "%.0f", x->trend.capacity.cross_cycles);
}
static const char *cr_r0_limit(const struct pack_view *x, char *b, size_t cap)
{
    return x->trend.r0.crossed     ? "reached"
           : x->trend.r0.line_past ? "line past"
                                   : fmt_num(b, cap, "%.0f", x->trend.r0.cross_cycles);
}
static const char *cr_status(const struct pack_view *x, char *b, size_t cap)
{
    (void)b, (void)cap;
    return status_of(x);
}

static const struct compare_row compare_rows[] = {
    {"pack", "pack", cr_pack},
    {"chemistry", "chemistry", cr_chem},
    {"rated mAh", "rated_mah", cr_rated},
    {"flights", "flights", cr_flights},
    {"equivalent cycles", "equivalent_cycles", cr_cycles},
    {"last flown", "last_flown", cr_last},
    {"IR (R0) mOhm/cell now", "r0_mohm_per_cell", cr_r0},
    {"IR vs baseline (x)", "r0_ratio", cr_ratio},
    {"IR mOhm/cell per 10 cyc", "r0_mohm_per_cell_per_10_cycles", cr_r0_slope},
    {"capacity % of rated", "capacity_pct", cr_cap},
    {"capacity % per 10 cyc", "capacity_pct_per_10_cycles", cr_cap_slope},
    {"cell imbalance mV rest", "cell_spread_mv", cr_spread},
    {"weakest cell (of last)", "weakest_cell", cr_weakest},
    {"over-discharges", "overdischarges", cr_over},
    {"capacity limit at cycle", "capacity_limit_cycle", cr_cap_limit},
    {"IR limit at cycle", "r0_limit_cycle", cr_r0_limit},
    {"status", "status", cr_status},
};
#define NCOMPARE (sizeof compare_rows / sizeof *compare_rows)

int report_compare(FILE *out, const struct pack_view *v, size_t n, enum fleet_format fmt)
{
    char b[40];
    if (fmt == FLEET_JSON) {
        json_t *a = json_array();
        for (size_t k = 0; k < n; k++) {
            json_t *o =
                json_pack("{s:o, s:o, s:o, s:o}", "id", jout_str(v[k].pack.label), "health",
                          health_obj(&v[k]), "r0_mohm_per_cell", trend_line_obj(&v[k].trend.r0),
                          "capacity_pct", trend_line_obj(&v[k].trend.capacity));
            jout_append(a, o);
        }
        return jout_write(out, a);
    }
    if (fmt == FLEET_CSV) {
        /* one row per pack: the rows of the text become columns */
        for (size_t r = 0; r < NCOMPARE; r++)
            fprintf(out, "%s%s", r ? "," : "", compare_rows[r].csv);
        fprintf(out, ",reason\n");
        for (size_t k = 0; k < n; k++) {
            for (size_t r = 0; r < NCOMPARE; r++) {
                const char *t = compare_rows[r].text(&v[k], b, sizeof b);
                char *end = NULL;
                if (r)
                    fputc(',', out);
                if (compare_rows[r].text == cr_weakest) {
                    if (v[k].health.weakest_cell)
                        fprintf(out, "%d", v[k].health.weakest_cell);
                } else if (strtod(t, &end), end != t && *end == '\0') {
                    fputs(t[0] == '+' ? t + 1 : t, out); /* a number, not a formula */
                } else if (strcmp(t, "-") != 0) {
                    report_csv_cell(out, t);
                }
            }
            fputc(',', out);
            report_csv_cell(out,
                            v[k].pack.retired_at[0] ? v[k].pack.retire_reason : v[k].health.reason);
            fputc('\n', out);
        }
        return ferror(out) ? -1 : 0;
    }
    for (size_t r = 0; r < NCOMPARE; r++) {
        char lab[64];
        report_units(compare_rows[r].label, lab, sizeof lab);
        fprintf(out, "%-*s", report_width(lab, 26), lab);
        for (size_t k = 0; k < n; k++) {
            const char *t = compare_rows[r].text(&v[k], b, sizeof b);
            fprintf(out, " %14s", *t ? t : "-");
        }
        fprintf(out, "\n");
    }
    for (size_t k = 0; k < n; k++)
        if (v[k].health.status != HEALTH_OK || v[k].pack.retired_at[0])
            fprintf(out, "  %s: %s\n", SHOW((char[SHOWN_LABEL]){0}, v[k].pack.label),
                    why_text(&v[k], (char[SHOWN_TEXT]){0}, SHOWN_TEXT));
    return ferror(out) ? -1 : 0;
}
