#include "packview.h"

#include "../core/isotime.h"
#include "../report/report.h"
#include "assessment.h"
#include "config.h"

#include <math.h>
#include <stddef.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#define RULE_AT(field) offsetof(struct health_rules, field)

/* clang-format off */
const struct opt ruleopts_table[] = {
    {.name = "retire-capacity", .kind = OPT_DOUBLE, .id = RO_CAP,
     .off = RULE_AT(retire_capacity_pct), .lo = 1, .hi = 100,
     .def = HEALTH_STR(HEALTH_RETIRE_CAPACITY_PCT), .meta = "PCT",
     .help = "capacity at or below PCT % of rated"},
    {.name = "retire-r0-ratio", .kind = OPT_DOUBLE, .id = RO_R0, .off = RULE_AT(retire_r0_ratio),
     .lo = 1.01, .hi = 100, .def = HEALTH_STR(HEALTH_RETIRE_R0_RATIO), .meta = "X",
     .help = "internal resistance (R0) at or above X times its baseline"},
    {.name = "retire-imbalance", .alias = "retire-spread", .kind = OPT_DOUBLE, .id = RO_SPREAD,
     .off = RULE_AT(retire_spread_mv), .lo = 1, .hi = 5000,
     .def = HEALTH_STR(HEALTH_RETIRE_IMBALANCE_MV), .meta = "MV",
     .help = "resting cell imbalance at or above MV"},
    {.name = "retire-overdischarge", .kind = OPT_INT, .id = RO_OVER,
     .off = RULE_AT(retire_overdischarge), .lo = 1, .hi = 100000,
     .def = HEALTH_STR(HEALTH_RETIRE_OVERDISCHARGES), .meta = "N",
     .help = "N over-discharges: flights under the cut-off voltage"},
    {0},
};
/* clang-format on */

const char ruleopts_title
    [] = "retirement rules (retire level; watch levels are " HEALTH_STR(HEALTH_WATCH_CAPACITY_PCT) " %, " HEALTH_STR(
        HEALTH_WATCH_R0_RATIO) "x, " HEALTH_STR(HEALTH_WATCH_IMBALANCE_MV) " mV "
                                                                           "and " HEALTH_STR(
                                                                               HEALTH_WATCH_OVERDISCHARGES) "):";

int ruleopts_after(void *base, const struct opt *o, const char *val, struct pb_error *err)
{
    struct health_rules *r = base;
    (void)val;
    (void)err;
    /* a retire level moves its watch level with it */
    switch (o->id) {
    case RO_CAP:
        r->watch_capacity_pct = fmin(100.0, r->retire_capacity_pct + 5.0);
        break;
    case RO_R0:
        r->watch_r0_ratio = 1.0 + 0.5 * (r->retire_r0_ratio - 1.0);
        break;
    case RO_SPREAD:
        r->watch_spread_mv = 0.5 * r->retire_spread_mv;
        break;
    case RO_OVER:
        r->watch_overdischarge = 1;
        break;
    }
    return 0;
}

static const char *const by_words[] = {"week", "month", "cycle", NULL};
static const int by_values[] = {TREND_WEEK, TREND_MONTH, TREND_CYCLE};
static const char *const fit_words[] = {"robust", "ols", NULL};

/* clang-format off */
const struct opt trendopts_table[] = {
    {.name = "by", .kind = OPT_KEYWORD, .off = offsetof(struct trendopts, by), .words = by_words,
     .values = by_values, .def = "week", .meta = "B",
     .help = "buckets: ISO week, month or cycle (5 cycles each)"},
    {.name = "fit", .kind = OPT_KEYWORD, .off = offsetof(struct trendopts, plain),
     .words = fit_words, .def = "robust", .meta = "M",
     .help = "robust or ols (plain least squares) fits of the trend"},
    {.name = "horizon", .kind = OPT_DOUBLE, .off = offsetof(struct trendopts, horizon), .lo = 1,
     .hi = 1e6, .def = "1000", .meta = "N",
     .help = "project the retirement crossing up to N cycles ahead"},
    {0},
};
/* clang-format on */

int ruleopts_take(int c, const char *v, struct health_rules *r, struct pb_error *err)
{
    const struct opt *o = opt_by_id(ruleopts_table, c);
    if (!o)
        return 0;
    return opt_take(o, r, v, err) != 0 || ruleopts_after(r, o, v, err) != 0 ? -1 : 1;
}

/* Said once when a command has waited a few seconds for another process's
 * lock, on a terminal only (a script's log wants the result, not the wait). */
static void say_waiting(void *ctx, double wait_s)
{
    (void)ctx;
    if (isatty(STDERR_FILENO))
        fprintf(stderr,
                "packbook: waiting for the database lock\u2026 (another process holds it; "
                "up to %.0f s in all, --wait S changes that)\n",
                wait_s);
}

enum pb_code packview_open_store(const char *db, enum store_mode mode, struct store **out,
                                 struct pb_error *err)
{
    return packview_open_store_wait(db, mode, STORE_WAIT_DEFAULT_S, out, err);
}

enum pb_code packview_open_store_wait(const char *db, enum store_mode mode, double wait_s,
                                      struct store **out, struct pb_error *err)
{
    char path[1024];
    const char *env = getenv("PACKBOOK_DB");
    if (db)
        snprintf(path, sizeof path, "%s", db);
    else if (!(env && *env) && config_db()) /* the settings file, under the environment */
        snprintf(path, sizeof path, "%s", config_db());
    else if (store_default_path(path, sizeof path) != 0)
        return pb_error_set(err, PB_EUSAGE,
                            "no database path: set PACKBOOK_DB or HOME, or give --db");
    return store_open_wait(path, mode, wait_s, say_waiting, NULL, out, err);
}

static void to_health(const struct flight_rec *f, size_t n, struct health_flight *h)
{
    for (size_t k = 0; k < n; k++) {
        h[k].epoch_s = f[k].flown_epoch_s;
        h[k].charge_mah = f[k].charge_used_mah;
        h[k].r0_mohm = f[k].r0_mohm;
        h[k].r0_ci95_mohm = f[k].r0_ci95_mohm;
        h[k].capacity_mah = f[k].capacity_mah;
        h[k].capacity_ci95_mah = f[k].capacity_ci95_mah;
        h[k].spread_rest_mv = f[k].cell_spread_rest_mv;
        h[k].below_floor = isfinite(f[k].time_below_floor_s) && f[k].time_below_floor_s > 0;
        h[k].weakest_cell = f[k].weakest_cell;
    }
}

static enum pb_code load_view(struct store *st, const struct pack_rec *p,
                              const struct health_rules *rules, enum trend_by by, int plain,
                              double horizon, int with_trend, struct pack_view *v,
                              struct pb_error *err);

/* A fleet view: each pack's state and life plan (from its trend) as fleet,
 * plot fleet and pack pair show them, and as an assessment keeps them. */
static enum pb_code fleet_view(struct store *st, const struct pack_rec *p,
                               const struct health_rules *rules, struct pack_view *v,
                               struct pb_error *err)
{
    return load_view(st, p, rules, TREND_WEEK, 0, 1000.0, 1, v, err);
}

static int by_pack_id(const void *key, const void *elem)
{
    int64_t id = *(const int64_t *)key, other = ((const struct assessment_rec *)elem)->pack_id;
    return id < other ? -1 : id > other;
}

/* v from pack p's kept assessment when its key says it was made from what
 * the store holds now under these rules: 1, else 0 (v untouched). */
static int kept_view(const struct assessment_rec *kept, size_t nkept, const struct pack_rec *p,
                     const struct health_rules *rules, struct pack_view *v)
{
    if (nkept == 0) /* bsearch wants an array, even of none */
        return 0;
    const struct assessment_rec *a = bsearch(&p->id, kept, nkept, sizeof *kept, by_pack_id);
    if (!a || !a->inputs_key || !a->assessment)
        return 0;
    char key[ASSESSMENT_KEY_CAP];
    assessment_key(p, rules, a->history_gen, key, sizeof key);
    struct pack_view w;
    memset(&w, 0, sizeof w);
    if (strcmp(key, a->inputs_key) != 0 || assessment_decode(a->assessment, &w) != 0)
        return 0;
    w.pack = *p;
    w.pair_distance = NAN;
    *v = w;
    return 1;
}

enum pb_code packview_load_fleet(struct store *st, const struct health_rules *rules, int all,
                                 const char *status, int reassess, packview_each_fn each, void *ctx,
                                 struct pack_view **views, size_t *nv, struct pb_error *err)
{
    struct pack_rec *packs = NULL;
    struct assessment_rec *kept = NULL;
    size_t np = 0, nkept = 0;
    *views = NULL;
    *nv = 0;
    enum pb_code rc = store_pack_list(st, &packs, &np, err);
    /* each wants the flights: no kept view then */
    if (rc == PB_OK && !each && !reassess) {
        struct pb_error e = {PB_OK, ""};
        enum pb_code krc = store_assessments_list(st, &kept, &nkept, &e);
        if (krc == PB_ESTORE) /* a viewer granted rights before step 10: slower, not wrong */
            fprintf(stderr, "packbook: note: %s (every pack is assessed from its flights)\n",
                    e.msg);
        else if (krc != PB_OK)
            rc = pb_error_set(err, krc, "%s", e.msg);
    }
    if (rc != PB_OK) {
        store_packs_free(packs);
        return rc;
    }
    struct pack_view *v = calloc(np ? np : 1, sizeof *v);
    size_t n = 0;
    if (!v)
        rc = pb_error_set(err, PB_ENOMEM, "out of memory");
    for (size_t k = 0; rc == PB_OK && k < np; k++) {
        if (packs[k].retired_at[0] && !all)
            continue;
        /* the kept assessment when it is current, else the pack's flights,
         * one pack's at a time */
        if (!kept_view(kept, nkept, &packs[k], rules, &v[n]))
            rc = fleet_view(st, &packs[k], rules, &v[n], err);
        if (rc != PB_OK)
            break;
        const char *s = packs[k].retired_at[0] ? "retired" : health_status_name(v[n].health.status);
        if (status && strcmp(s, status) != 0) {
            pack_view_release(&v[n]);
            continue;
        }
        if (each)
            each(&v[n], n, ctx);
        store_flights_free(v[n].flights);
        free(v[n].dep); /* per flight; the view keeps the count and the finding */
        v[n].flights = NULL;
        v[n].dep = NULL;
        v[n].nflights = 0;
        /* the trend's weekly means too (a slot per flight: 88 MB at 1,000,000
         * flights); the fleet views keep its lines and life plan */
        health_trend_release(&v[n].trend);
        n++;
    }
    store_packs_free(packs);
    store_assessments_free(kept, nkept);
    if (rc != PB_OK) {
        packview_free_all(v, n);
        return rc;
    }
    *views = v;
    *nv = n;
    return PB_OK;
}

void packview_free_all(struct pack_view *views, size_t n)
{
    if (!views)
        return;
    for (size_t k = 0; k < n; k++)
        pack_view_release(&views[k]);
    free(views);
}

/* Which flights left their trend (departure.h), with the operator's
 * acknowledgements; the newest unacknowledged one becomes a finding of the
 * pack's health ("inspect: ..."), at least watch. Returns 0, or -1 when out
 * of memory. */
static int departures(struct pack_view *v, const struct health_flight *h)
{
    size_t n = v->nflights;
    int *acked = calloc(n ? n : 1, sizeof *acked);
    v->dep = calloc(n ? n : 1, sizeof *v->dep);
    if (!acked || !v->dep) {
        free(acked);
        return -1;
    }
    for (size_t k = 0; k < n; k++)
        acked[k] = pack_view_ack(v, v->flights[k].id) != NULL;
    int rc = departure_scan(h, n, v->pack.cells, v->pack.capacity_mah, acked, v->dep);
    size_t newest = n;
    for (size_t k = 0; rc >= 0 && k < n; k++)
        if (v->dep[k].flagged && !acked[k]) {
            v->departures++;
            newest = k;
        }
    free(acked);
    if (rc < 0)
        return -1;
    if (newest < n) {
        char what[128], text[256], day[32];
        departure_text(&v->dep[newest], what, sizeof what);
        isotime_format(v->flights[newest].flown_epoch_s, day, sizeof day);
        day[10] = '\0';
        snprintf(text, sizeof text, "inspect: flight %lld (%s) %s%s",
                 (long long)v->flights[newest].id, day, what,
                 v->departures > 1 ? " and earlier ones" : "");
        health_add_finding(&v->health, HEALTH_WATCH, text);
    }
    return 0;
}

enum pb_code packview_load(struct store *st, const struct pack_rec *p,
                           const struct health_rules *rules, enum trend_by by, int plain,
                           double horizon, struct pack_view *v, struct pb_error *err)
{
    return load_view(st, p, rules, by, plain, horizon, 1, v, err);
}

static enum pb_code load_view(struct store *st, const struct pack_rec *p,
                              const struct health_rules *rules, enum trend_by by, int plain,
                              double horizon, int with_trend, struct pack_view *v,
                              struct pb_error *err)
{
    memset(v, 0, sizeof *v);
    v->pair_distance = NAN;
    v->pack = *p;
    enum pb_code rc = store_flights_of(st, p->id, &v->flights, &v->nflights, err);
    if (rc != PB_OK)
        return rc;
    struct health_flight *h = malloc((v->nflights ? v->nflights : 1) * sizeof *h);
    if (!h) {
        pack_view_release(v); /* a failed load leaves nothing to free */
        return pb_error_set(err, PB_ENOMEM, "out of memory");
    }
    to_health(v->flights, v->nflights, h);
    health_assess(h, v->nflights, p->cells, p->capacity_mah, rules, &v->health);
    int trc = with_trend ? health_trend(h, v->nflights, p->cells, p->capacity_mah, rules, by, plain,
                                        horizon, &v->trend)
                         : 0;
    if (trc == 0) {
        rc = store_acks_of(st, p->id, &v->acks, &v->nacks, err);
        if (rc == PB_OK)
            trc = departures(v, h);
    }
    free(h);
    if (rc != PB_OK) {
        pack_view_release(v);
        return rc;
    }
    if (trc != 0) {
        pack_view_release(v);
        return pb_error_set(err, PB_ENOMEM, "out of memory");
    }
    return PB_OK;
}

/* What a change to the history can change of pack p, from its view v. */
static void summarize(const struct pack_rec *p, const struct pack_view *v, struct pack_summary *out)
{
    memset(out, 0, sizeof *out);
    snprintf(out->label, sizeof out->label, "%s", p->label);
    out->flights = v->health.flights;
    out->cycles = isfinite(v->health.cycles) ? v->health.cycles : 0.0;
    out->r0_base_mohm_cell = v->health.r0_base_mohm_cell;
    snprintf(out->status, sizeof out->status, "%s",
             p->retired_at[0] ? "retired" : health_status_name(v->health.status));
    snprintf(out->reason, sizeof out->reason, "%s",
             p->retired_at[0] ? p->retire_reason : v->health.reason);
}

enum pb_code packview_summary(struct store *st, const struct pack_rec *p, struct pack_summary *out,
                              struct pb_error *err)
{
    struct health_rules rules;
    struct pack_view v;
    config_rules(&rules);
    memset(out, 0, sizeof *out);
    /* the state only: no trend lines */
    enum pb_code rc = load_view(st, p, &rules, TREND_WEEK, 0, 1000.0, 0, &v, err);
    if (rc != PB_OK)
        return rc;
    summarize(p, &v, out);
    pack_view_release(&v);
    return PB_OK;
}

/* packview_keep without its note: a failure to store the assessment is
 * left in *kept (PB_OK when it was kept). */
static enum pb_code keep(struct store *st, const struct pack_rec *p, struct pack_summary *out,
                         struct pack_view *view, struct pb_error *kept, struct pb_error *err)
{
    struct health_rules rules;
    struct pack_view v;
    int64_t gen = 0;
    config_rules(&rules);
    /* the generation before the flights: a change in between leaves the key stale, never wrong */
    enum pb_code rc = store_history_gen(st, p->id, &gen, err);
    if (rc == PB_OK)
        rc = fleet_view(st, p, &rules, &v, err);
    if (rc != PB_OK)
        return rc;
    if (out)
        summarize(p, &v, out);
    char key[ASSESSMENT_KEY_CAP];
    assessment_key(p, &rules, gen, key, sizeof key);
    char *text = assessment_encode(&v);
    if (view && text)
        *view = v; /* the caller's now, flights and departures included */
    else
        pack_view_release(&v);
    if (!text)
        return pb_error_set(err, PB_ENOMEM, "out of memory");
    store_assessment_put(st, p->id, gen, key, text, kept);
    free(text);
    return PB_OK;
}

enum pb_code packview_keep(struct store *st, const struct pack_rec *p, struct pack_summary *out,
                           struct pack_view *view, struct pb_error *err)
{
    /* only the fleet view's speed depends on it: a failure is said, not fatal */
    struct pb_error kept = {PB_OK, ""};
    enum pb_code rc = keep(st, p, out, view, &kept, err);
    if (rc == PB_OK && kept.code != PB_OK)
        fprintf(stderr,
                "packbook: note: %s (pack %s: 'packbook fleet' assesses it from its flights "
                "until its assessment can be kept)\n",
                kept.msg, p->label);
    return rc;
}

enum pb_code packview_keep_stale(struct store *st, size_t *assessed, size_t *current,
                                 struct pb_error *err)
{
    struct pack_rec *packs = NULL;
    struct assessment_rec *kept = NULL;
    size_t np = 0, nkept = 0;
    struct health_rules rules;
    config_rules(&rules);
    *assessed = *current = 0;
    enum pb_code rc = store_pack_list(st, &packs, &np, err);
    if (rc == PB_OK)
        rc = store_assessments_list(st, &kept, &nkept, err);
    /* a store filled by another program can take minutes: say how far on a terminal */
    int say = isatty(STDERR_FILENO) && np > 20;
    for (size_t k = 0; rc == PB_OK && k < np; k++) {
        struct pack_view v;
        if (say)
            fprintf(stderr, "\rassessing packs: %zu of %zu", k + 1, np);
        if (kept_view(kept, nkept, &packs[k], &rules, &v)) {
            (*current)++;
            continue;
        }
        struct pb_error kept = {PB_OK, ""};
        rc = keep(st, &packs[k], NULL, NULL, &kept, err);
        if (rc == PB_OK && kept.code != PB_OK) /* the next ones would fail alike */
            rc = pb_error_set(err, kept.code, "%s", kept.msg);
        *assessed += rc == PB_OK;
    }
    if (say)
        fprintf(stderr, "\r\033[K");
    store_packs_free(packs);
    store_assessments_free(kept, nkept);
    return rc;
}

static int same_num(double a, double b)
{
    return (!isfinite(a) && !isfinite(b)) || fabs(a - b) < 0.005;
}

void packview_print_change(FILE *out, const struct pack_summary *b, const struct pack_summary *a)
{
    fprintf(out, "  %s: %zu -> %zu flight%s, %.1f -> %.1f equivalent cycles\n", a->label,
            b->flights, a->flights, a->flights == 1 ? "" : "s", b->cycles, a->cycles);
    if (!same_num(b->r0_base_mohm_cell, a->r0_base_mohm_cell)) {
        char x[32] = "none", y[32] = "none";
        if (isfinite(b->r0_base_mohm_cell))
            snprintf(x, sizeof x, "%.2f", b->r0_base_mohm_cell);
        if (isfinite(a->r0_base_mohm_cell))
            snprintf(y, sizeof y, "%.2f", a->r0_base_mohm_cell);
        fprintf(out, "  %s: baseline IR (R0) %s -> %s %s/cell (median of the first flights)\n",
                a->label, x, y, report_mohm());
    }
    if (strcmp(b->status, a->status) != 0)
        fprintf(out, "  %s: status %s -> %s (%s)\n", a->label, b->status, a->status, a->reason);
}
