#include "report_health.h"

#include "jsonout.h"

#include "../core/utf8.h"

/* Text from the store or the user, escaped for a terminal (utf8_printable):
 * buffers hold four times the stored length (every byte as \\xHH). */
#define SHOWN_LABEL (4 * 128 + 4)
#define SHOWN_TEXT (4 * 320 + 4)
#define SHOW(buf, s) utf8_printable(buf, sizeof buf, s)

#include <jansson.h>
#include <math.h>
#include <string.h>

#include "../core/isotime.h"

void pack_view_release(struct pack_view *v)
{
    if (!v)
        return;
    store_flights_free(v->flights);
    v->flights = NULL;
    health_trend_release(&v->trend);
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

static json_t *pack_obj(const struct pack_rec *p)
{
    return json_pack("{s:o, s:i, s:i, s:s, s:f, s:o, s:o, s:s, s:o, s:o}", "id", jout_str(p->label),
                     "cells", p->cells, "parallel", p->parallel, "chemistry", p->chemistry,
                     "capacity_mah", p->capacity_mah, "since", jout_str(p->since), "note",
                     jout_str(p->note), "created_at", p->created_at, "retired_at",
                     jout_str(p->retired_at), "retire_reason", jout_str(p->retire_reason));
}

int report_pack_list(FILE *out, const struct pack_rec *p, size_t n, int json)
{
    if (json) {
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

static json_t *health_obj(const struct pack_view *v)
{
    const struct pack_health *h = &v->health;
    const char *reason = v->pack.retired_at[0] ? v->pack.retire_reason : h->reason;
    return json_pack("{s:I, s:o, s:o, s:o, s:o, s:o, s:o, s:o, s:i, s:s, s:o}", "flights",
                     (json_int_t)h->flights, "equivalent_cycles", jout_num(h->cycles), "last_flown",
                     jout_date(h->last_epoch_s), "r0_mohm_per_cell", jout_num(h->r0_now_mohm_cell),
                     "r0_baseline_mohm_per_cell", jout_num(h->r0_base_mohm_cell), "r0_ratio",
                     jout_num(h->r0_ratio), "capacity_pct", jout_num(h->capacity_pct),
                     "cell_spread_mv", jout_num(h->spread_mv), "overdischarges", h->overdischarges,
                     "status", v->pack.retired_at[0] ? "retired" : health_status_name(h->status),
                     "reason", reason[0] ? jout_str(reason) : json_string(""));
}

static const char *status_of(const struct pack_view *v)
{
    return v->pack.retired_at[0] ? "retired" : health_status_name(v->health.status);
}

static json_t *flight_obj(const struct flight_rec *f)
{
    return json_pack("{s:o, s:s, s:o, s:o, s:o, s:o, s:o, s:o, s:o, s:o, s:o, s:i}", "flown_at",
                     jout_date(f->flown_epoch_s), "date_source", f->date_source, "source",
                     jout_str(f->source), "duration_s", jout_num(f->duration_s), "charge_used_mah",
                     jout_num(f->charge_used_mah), "r0_mohm", jout_num(f->r0_mohm), "capacity_mah",
                     jout_num(f->capacity_mah), "soc_start_pct", jout_num(f->soc_start_pct),
                     "soc_end_pct", jout_num(f->soc_end_pct), "cell_spread_rest_mv",
                     jout_num(f->cell_spread_rest_mv), "time_below_floor_s",
                     jout_num(f->time_below_floor_s), "warnings", f->warnings);
}

int report_pack_show(FILE *out, const struct pack_view *v, int json)
{
    const struct pack_rec *p = &v->pack;
    const struct pack_health *h = &v->health;
    if (json) {
        json_t *o = pack_obj(p);
        jout_set(o, "health", health_obj(v));
        json_t *fl = json_array();
        for (size_t k = 0; k < v->nflights; k++)
            jout_append(fl, flight_obj(&v->flights[k]));
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
    if (p->retired_at[0])
        fprintf(out, "  retired %s: %s\n", p->retired_at, SHOW(tb, p->retire_reason));
    fprintf(out, "  %zu flights, %.1f equivalent cycles, last flown %s\n", h->flights,
            isfinite(h->cycles) ? h->cycles : 0.0, day(h->last_epoch_s, b1, sizeof b1));
    fprintf(out,
            "  R0 %s mOhm/cell now, baseline %s (x%s); capacity %s %% of rated; spread %s mV\n",
            fmt_num(b1, sizeof b1, "%.2f", h->r0_now_mohm_cell),
            fmt_num(b2, sizeof b2, "%.2f", h->r0_base_mohm_cell),
            fmt_num(b3, sizeof b3, "%.2f", h->r0_ratio),
            fmt_num((char[32]){0}, 32, "%.0f", h->capacity_pct),
            fmt_num((char[32]){0}, 32, "%.0f", h->spread_mv));
    fprintf(out, "  status: %s (%s)\n", status_of(v),
            SHOW(tb, p->retired_at[0] ? p->retire_reason : h->reason));
    if (v->nflights) {
        fprintf(out, "\n  %-10s %8s %9s %9s %10s %11s %6s\n", "date", "min", "mAh", "R0 mOhm",
                "cap mAh", "SoC %", "warn");
        for (size_t k = 0; k < v->nflights; k++) {
            const struct flight_rec *f = &v->flights[k];
            char soc[24];
            if (isfinite(f->soc_start_pct) && isfinite(f->soc_end_pct))
                snprintf(soc, sizeof soc, "%.0f->%.0f", f->soc_start_pct, f->soc_end_pct);
            else
                snprintf(soc, sizeof soc, "-");
            fprintf(out, "  %-10s %8.1f %9s %9s %10s %11s %6d\n",
                    day(f->flown_epoch_s, b1, sizeof b1), f->duration_s / 60.0,
                    fmt_num(b2, sizeof b2, "%.0f", f->charge_used_mah),
                    fmt_num(b3, sizeof b3, "%.2f", f->r0_mohm),
                    fmt_num((char[32]){0}, 32, "%.0f", f->capacity_mah), soc, f->warnings);
        }
    }
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

static void csv_num(FILE *out, const char *fmt, double v)
{
    fputc(',', out);
    if (isfinite(v))
        fprintf(out, fmt, v);
}

int report_fleet(FILE *out, const struct pack_view *v, size_t n, enum fleet_format fmt,
                 const double *safe)
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
                "capacity_pct,cell_spread_mv,overdischarges,status,reason%s\n",
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
            fprintf(out, ",%d,%s,", h->overdischarges, status_of(&v[k]));
            report_csv_cell(out, v[k].pack.retired_at[0] ? v[k].pack.retire_reason : h->reason);
            if (safe) {
                csv_num(out, "%.0f", safe[2 * k]);
                csv_num(out, "%.0f", safe[2 * k + 1]);
            }
            fputc('\n', out);
        }
        return ferror(out) ? -1 : 0;
    }
    fprintf(out, "%-14s %7s %7s %-10s %9s %7s %6s %7s %5s%s  %-7s %s\n", "pack", "flights",
            "cycles", "last", "R0 mOhm", "R0 vs", "cap %", "spread", "over",
            safe ? "  safe min" : "", "status", "why");
    fprintf(out, "%-14s %7s %7s %-10s %9s %7s %6s %7s %5s%s  %-7s\n", "", "", "", "flown",
            "per cell", "base", "rated", "mV", "disch", safe ? "  (5th pct)" : "", "");
    for (size_t k = 0; k < n; k++) {
        const struct pack_health *h = &v[k].health;
        char b[7][32];
        char sm[40] = "";
        if (safe)
            snprintf(sm, sizeof sm, "  %9s", fmt_num(b[6], 32, "%.1f", safe[2 * k] / 60.0));
        char lb[SHOWN_LABEL], tb[SHOWN_TEXT];
        fprintf(out, "%-14s %7zu %7s %-10s %9s %7s %6s %7s %5d%s  %-7s %s\n",
                SHOW(lb, v[k].pack.label), h->flights, fmt_num(b[0], 32, "%.1f", h->cycles),
                day(h->last_epoch_s, b[1], 32), fmt_num(b[2], 32, "%.2f", h->r0_now_mohm_cell),
                fmt_num(b[3], 32, "x%.2f", h->r0_ratio), fmt_num(b[4], 32, "%.0f", h->capacity_pct),
                fmt_num(b[5], 32, "%.0f", h->spread_mv), h->overdischarges, sm, status_of(&v[k]),
                SHOW(tb, v[k].pack.retired_at[0] ? v[k].pack.retire_reason : h->reason));
    }
    if (safe)
        fprintf(out,
                "safe min: conservative safe flight time to a 30 %% reserve at %s; an estimate,\n"
                "not a substitute for the aircraft's low-voltage protection\n",
                "each pack's recent cruise power (or --power)");
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

static json_t *trend_line_obj(const struct trend_line *t)
{
    return json_pack("{s:o, s:o, s:o, s:b, s:o, s:o, s:b}", "vs_cycles", line_obj(&t->vs_cycles),
                     "per_day", line_obj(&t->vs_days), "retire_level", jout_num(t->level),
                     "crossed", t->crossed, "crossing_cycles", jout_num(t->cross_cycles),
                     "crossing_date", jout_date(t->cross_epoch_s), "beyond_horizon",
                     t->beyond_horizon);
}

static void text_projection(FILE *out, const char *what, const struct trend_line *t,
                            const char *unit, double horizon, double cycles_now)
{
    char b[40];
    fprintf(out, "  %-10s ", what);
    if (!t->vs_cycles.ok) {
        fprintf(out, "too few flights for a trend (need 3 with a value)\n");
        return;
    }
    fprintf(out, "%+.4f +/- %.4f %s per cycle, %+.4f +/- %.4f per day; ", t->vs_cycles.b,
            t->vs_cycles.b_ci95, unit, t->vs_days.b, t->vs_days.b_ci95);
    if (!isfinite(t->level))
        fprintf(out, "no retirement level (no baseline)\n");
    else if (t->crossed)
        fprintf(out, "at or past the retirement level %.2f already\n", t->level);
    else if (isfinite(t->cross_cycles))
        fprintf(out, "reaches %.2f at cycle %.0f (%.0f from now)%s%s\n", t->level, t->cross_cycles,
                t->cross_cycles - cycles_now, isfinite(t->cross_epoch_s) ? ", around " : "",
                isfinite(t->cross_epoch_s) ? day(t->cross_epoch_s, b, sizeof b) : "");
    else
        fprintf(out, "not within %.0f cycles of %.2f\n", horizon, t->level);
}

int report_trend(FILE *out, const struct pack_view *v, enum trend_by by, double horizon, int json)
{
    const struct pack_trend *t = &v->trend;
    static const char *const bynames[] = {"week", "month", "cycle"};
    if (json) {
        json_t *b = json_array();
        for (size_t k = 0; k < t->nbuckets; k++) {
            const struct trend_bucket *x = &t->buckets[k];
            jout_append(
                b, json_pack("{s:s, s:I, s:o, s:o, s:o, s:o, s:o}", "bucket", x->key, "flights",
                             (json_int_t)x->flights, "first", jout_date(x->first_epoch_s), "last",
                             jout_date(x->last_epoch_s), "charge_mah", jout_num(x->charge_mah),
                             "r0_mohm_per_cell", jout_num(x->r0_mohm_cell), "capacity_pct",
                             jout_num(x->capacity_pct)));
        }
        json_t *o = json_pack("{s:o, s:s, s:f, s:o, s:o, s:o, s:o, s:o}", "id",
                              jout_str(v->pack.label), "by", bynames[by], "horizon_cycles", horizon,
                              "equivalent_cycles", jout_num(t->cycles_now), "buckets", b,
                              "r0_mohm_per_cell", trend_line_obj(&t->r0), "capacity_pct",
                              trend_line_obj(&t->capacity), "health", health_obj(v));
        return jout_write(out, o);
    }
    char b1[32], b2[32], b3[32];
    char lb[SHOWN_LABEL], tb[SHOWN_TEXT];
    fprintf(out, "trend of pack %s by %s: %zu flights, %.1f equivalent cycles\n\n",
            SHOW(lb, v->pack.label), bynames[by], v->nflights,
            isfinite(t->cycles_now) ? t->cycles_now : 0.0);
    fprintf(out, "  %-14s %7s %-10s %9s %9s %8s\n", by == TREND_CYCLE ? "cycles" : "period",
            "flights", "from", "mAh", "R0 mOhm", "cap %");
    fprintf(out, "  %-14s %7s %-10s %9s %9s %8s\n", "", "", "", "", "per cell", "rated");
    for (size_t k = 0; k < t->nbuckets; k++) {
        const struct trend_bucket *x = &t->buckets[k];
        fprintf(out, "  %-14s %7zu %-10s %9.0f %9s %8s\n", x->key, x->flights,
                day(x->first_epoch_s, b1, sizeof b1), x->charge_mah,
                fmt_num(b2, sizeof b2, "%.2f", x->r0_mohm_cell),
                fmt_num(b3, sizeof b3, "%.1f", x->capacity_pct));
    }
    fprintf(out, "\n");
    text_projection(out, "R0", &t->r0, "mOhm/cell", horizon, t->cycles_now);
    text_projection(out, "capacity", &t->capacity, "%", horizon, t->cycles_now);
    fprintf(out, "\n  status: %s (%s)\n", status_of(v),
            SHOW(tb, v->pack.retired_at[0] ? v->pack.retire_reason : v->health.reason));
    fprintf(out, "  Projections extend a straight line; a pack can fail sooner. Inspect it.\n");
    return ferror(out) ? -1 : 0;
}

int report_compare(FILE *out, const struct pack_view *v, size_t n, int json)
{
    if (json) {
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
    char b[SHOWN_LABEL], tb[SHOWN_TEXT];
#define ROW(label, expr)                                                                           \
    do {                                                                                           \
        fprintf(out, "%-26s", label);                                                              \
        for (size_t k = 0; k < n; k++) {                                                           \
            const struct pack_view *x = &v[k];                                                     \
            (void)x;                                                                               \
            fprintf(out, " %14s", (expr));                                                         \
        }                                                                                          \
        fprintf(out, "\n");                                                                        \
    } while (0)
    ROW("pack", SHOW(b, x->pack.label));
    ROW("chemistry", x->pack.chemistry);
    ROW("rated mAh", fmt_num(b, sizeof b, "%.0f", x->pack.capacity_mah));
    ROW("flights", fmt_num(b, sizeof b, "%.0f", (double)x->health.flights));
    ROW("equivalent cycles", fmt_num(b, sizeof b, "%.1f", x->health.cycles));
    ROW("last flown", day(x->health.last_epoch_s, b, sizeof b));
    ROW("R0 mOhm/cell now", fmt_num(b, sizeof b, "%.2f", x->health.r0_now_mohm_cell));
    ROW("R0 vs baseline", fmt_num(b, sizeof b, "x%.2f", x->health.r0_ratio));
    ROW("R0 per 100 cycles",
        fmt_num(b, sizeof b, "%+.3f",
                x->trend.r0.vs_cycles.ok ? 100 * x->trend.r0.vs_cycles.b : NAN));
    ROW("capacity % of rated", fmt_num(b, sizeof b, "%.0f", x->health.capacity_pct));
    ROW("capacity per 100 cycles",
        fmt_num(b, sizeof b, "%+.2f",
                x->trend.capacity.vs_cycles.ok ? 100 * x->trend.capacity.vs_cycles.b : NAN));
    ROW("cell spread mV", fmt_num(b, sizeof b, "%.0f", x->health.spread_mv));
    ROW("flights below floor", fmt_num(b, sizeof b, "%.0f", (double)x->health.overdischarges));
    ROW("capacity limit at cycle",
        x->trend.capacity.crossed ? "reached"
                                  : fmt_num(b, sizeof b, "%.0f", x->trend.capacity.cross_cycles));
    ROW("R0 limit at cycle",
        x->trend.r0.crossed ? "reached" : fmt_num(b, sizeof b, "%.0f", x->trend.r0.cross_cycles));
    ROW("status", status_of(x));
#undef ROW
    for (size_t k = 0; k < n; k++)
        if (v[k].health.status != HEALTH_OK || v[k].pack.retired_at[0])
            fprintf(
                out, "  %s: %s\n", SHOW(b, v[k].pack.label),
                SHOW(tb, v[k].pack.retired_at[0] ? v[k].pack.retire_reason : v[k].health.reason));
    return ferror(out) ? -1 : 0;
}
