#include "packview.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

const char ruleopts_usage[] =
    "retirement rules (retire level; watch levels are 85 %, 1.5x, 30 mV and 1):\n"
    "  --retire-capacity PCT  capacity at or below PCT % of rated (default 80)\n"
    "  --retire-r0-ratio X    R0 at or above X times its baseline (default 2)\n"
    "  --retire-spread MV     resting cell spread at or above MV (default 60)\n"
    "  --retire-overdischarge N  N flights below the voltage floor (default 3)\n";

int trendopts_by(const char *arg, enum trend_by *by, struct pb_error *err)
{
    if (strcmp(arg, "week") == 0)
        *by = TREND_WEEK;
    else if (strcmp(arg, "month") == 0)
        *by = TREND_MONTH;
    else if (strcmp(arg, "cycle") == 0)
        *by = TREND_CYCLE;
    else {
        pb_error_set(err, PB_EUSAGE, "--by: expected week, month or cycle, got '%s'", arg);
        return -1;
    }
    return 0;
}

int trendopts_fit(const char *arg, int *plain, struct pb_error *err)
{
    if (strcmp(arg, "robust") && strcmp(arg, "ols")) {
        pb_error_set(err, PB_EUSAGE, "--fit: expected robust or ols, got '%s'", arg);
        return -1;
    }
    *plain = strcmp(arg, "ols") == 0;
    return 0;
}

int ruleopts_take(int c, const char *v, struct health_rules *r, struct pb_error *err)
{
    int bad = 0, n = 0;
    switch (c) {
    case RO_CAP:
        bad = cmd_parse_double("--retire-capacity", v, 1, 100, &r->retire_capacity_pct, err);
        r->watch_capacity_pct = fmin(100.0, r->retire_capacity_pct + 5.0);
        break;
    case RO_R0:
        bad = cmd_parse_double("--retire-r0-ratio", v, 1.01, 100, &r->retire_r0_ratio, err);
        r->watch_r0_ratio = 1.0 + 0.5 * (r->retire_r0_ratio - 1.0);
        break;
    case RO_SPREAD:
        bad = cmd_parse_double("--retire-spread", v, 1, 5000, &r->retire_spread_mv, err);
        r->watch_spread_mv = 0.5 * r->retire_spread_mv;
        break;
    case RO_OVER:
        bad = cmd_parse_int("--retire-overdischarge", v, 1, 100000, &n, err);
        r->retire_overdischarge = n;
        r->watch_overdischarge = 1;
        break;
    default:
        return 0;
    }
    return bad ? -1 : 1;
}

enum pb_code packview_open_store(const char *db, int create, struct store **out,
                                 struct pb_error *err)
{
    char path[1024];
    if (db)
        snprintf(path, sizeof path, "%s", db);
    else if (store_default_path(path, sizeof path) != 0)
        return pb_error_set(err, PB_EUSAGE,
                            "no database path: set PACKBOOK_DB or HOME, or give --db");
    return store_open(path, create, out, err);
}

static void to_health(const struct flight_rec *f, size_t n, struct health_flight *h)
{
    for (size_t k = 0; k < n; k++) {
        h[k].epoch_s = f[k].flown_epoch_s;
        h[k].charge_mah = f[k].charge_used_mah;
        h[k].r0_mohm = f[k].r0_mohm;
        h[k].capacity_mah = f[k].capacity_mah;
        h[k].capacity_ci95_mah = f[k].capacity_ci95_mah;
        h[k].spread_rest_mv = f[k].cell_spread_rest_mv;
        h[k].below_floor = isfinite(f[k].time_below_floor_s) && f[k].time_below_floor_s > 0;
    }
}

static enum pb_code load_view(struct store *st, const struct pack_rec *p,
                              const struct health_rules *rules, enum trend_by by, int plain,
                              double horizon, int with_trend, struct pack_view *v,
                              struct pb_error *err);

enum pb_code packview_load_fleet(struct store *st, const struct health_rules *rules, int all,
                                 const char *status, packview_each_fn each, void *ctx,
                                 struct pack_view **views, size_t *nv, struct pb_error *err)
{
    struct pack_rec *packs = NULL;
    size_t np = 0;
    *views = NULL;
    *nv = 0;
    enum pb_code rc = store_pack_list(st, &packs, &np, err);
    if (rc != PB_OK)
        return rc;
    struct pack_view *v = calloc(np ? np : 1, sizeof *v);
    size_t n = 0;
    if (!v)
        rc = pb_error_set(err, PB_ENOMEM, "out of memory");
    for (size_t k = 0; rc == PB_OK && k < np; k++) {
        if (packs[k].retired_at[0] && !all)
            continue;
        /* the fleet shows each pack's state, not its trend lines, and holds
         * one pack's flights at a time */
        rc = load_view(st, &packs[k], rules, TREND_WEEK, 0, 1000.0, 0, &v[n], err);
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
        v[n].flights = NULL;
        v[n].nflights = 0;
        n++;
    }
    store_packs_free(packs);
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
    free(h);
    if (trc != 0) {
        pack_view_release(v);
        return pb_error_set(err, PB_ENOMEM, "out of memory");
    }
    return PB_OK;
}
