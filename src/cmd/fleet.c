/* packbook fleet: one row per pack with its state and the reason. */
#include <getopt.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "cmd.h"
#include "config.h"
#include "packview.h"

/* A help text reads best as the lines it prints. */
/* clang-format off */
static const char usage[] =
    "usage: packbook fleet [--json|--csv] [--sort KEY] [--status S] [--all] [--db PATH]\n"
    "\n"
    "One row per pack in service: flights, equivalent full cycles, last flown,\n"
    "internal resistance (IR, mOhm per cell, median of the last "
    HEALTH_STR(HEALTH_RECENT_FLIGHTS) "\n"
    "flights) and against its baseline (median of its first "
    HEALTH_STR(HEALTH_BASELINE_FLIGHTS) "), capacity as % of\n"
    "rated, resting cell imbalance, the weakest cell, over-discharges (flights under\n"
    "the cut-off voltage), status (ok, watch, retire) and why, and a date to plan\n"
    "to retire by (the early end of the knee-aware projection in 'packbook trend',\n"
    "at the pack's use so far). A flight that left its trend shows as 'inspect:\n"
    "flight N ...' until 'packbook flight ack'; registered pairs ('packbook pack\n"
    "pair') are listed together, and a pair beyond its limits is a watch finding.\n"
    "  --sort KEY             status (default: retire first), pack, cycles, r0 (resistance\n"
    "                         per cell, highest first), r0-ratio (against the baseline),\n"
    "                         capacity (lowest first), imbalance, last\n"
    "  --status S             only packs with status ok, watch, retire or retired\n"
    "  --all                  include retired packs\n"
    "  --predict [--power W]  add the conservative safe flight time (minutes) to the\n"
    "                         landing reserve (" PREDICT_STR(PREDICT_RESERVE_PCT)
    " %, or the settings file's 'reserve')\n"
    "                         at the pack's recent cruise power, or at W\n"
    "  --json, --csv          machine-readable output (CSV cells starting = + - @, also\n"
    "                         after spaces or zero-width characters, are prefixed with '\n"
    "                         so spreadsheets do not run them)\n";
/* clang-format on */

enum { F_JSON = 256, F_CSV, F_SORT, F_STATUS, F_ALL, F_DB, F_PREDICT, F_POWER };

static const struct option longopts[] = {
    {"json", no_argument, NULL, F_JSON},
    {"csv", no_argument, NULL, F_CSV},
    {"sort", required_argument, NULL, F_SORT},
    {"status", required_argument, NULL, F_STATUS},
    {"all", no_argument, NULL, F_ALL},
    {"db", required_argument, NULL, F_DB},
    {"predict", no_argument, NULL, F_PREDICT},
    {"power", required_argument, NULL, F_POWER},
    {"help", no_argument, NULL, 'h'},
    RULEOPTS_LONG,
    {NULL, 0, NULL, 0},
};

static const char *sort_key;

static int rank_of(const struct pack_view *v)
{
    return v->pack.retired_at[0] ? -1 : (int)v->health.status;
}

/* unknown values sort last in either direction */
static int cmp_num(double a, double b, int desc)
{
    if (!isfinite(a) || !isfinite(b))
        return isfinite(a) ? -1 : isfinite(b) ? 1 : 0;
    if (a == b)
        return 0;
    return (a < b) == !desc ? -1 : 1;
}

static int compare_views(const void *pa, const void *pb)
{
    const struct pack_view *a = pa, *b = pb;
    int c = 0;
    if (strcmp(sort_key, "status") == 0)
        c = rank_of(b) - rank_of(a);
    else if (strcmp(sort_key, "cycles") == 0)
        c = cmp_num(a->health.cycles, b->health.cycles, 1);
    else if (strcmp(sort_key, "r0") == 0)
        c = cmp_num(a->health.r0_now_mohm_cell, b->health.r0_now_mohm_cell, 1);
    else if (strcmp(sort_key, "r0-ratio") == 0)
        c = cmp_num(a->health.r0_ratio, b->health.r0_ratio, 1);
    else if (strcmp(sort_key, "imbalance") == 0)
        c = cmp_num(a->health.spread_mv, b->health.spread_mv, 1);
    else if (strcmp(sort_key, "capacity") == 0)
        c = cmp_num(a->health.capacity_pct, b->health.capacity_pct, 0);
    else if (strcmp(sort_key, "last") == 0)
        c = cmp_num(a->health.last_epoch_s, b->health.last_epoch_s, 1);
    return c ? c : strcmp(a->pack.label, b->pack.label);
}

/* fleet --predict: each pack's safe times, while its flights are loaded */
struct fleet_predict {
    double power_w;
    double *safe; /* 2 per pack, grown as packs come */
    int failed;
};

static void predict_each(const struct pack_view *v, size_t k, void *ctx)
{
    struct fleet_predict *fp = ctx;
    double *g = realloc(fp->safe, 2 * (k + 1) * sizeof *g);
    if (!g) {
        fp->failed = 1;
        return;
    }
    fp->safe = g;
    struct predict_inputs in;
    struct predict_mc mc;
    struct pb_error e = {PB_OK, ""};
    g[2 * k] = g[2 * k + 1] = NAN;
    if (predict_view(v, fp->power_w, &in, &mc, &e) == PB_OK) {
        g[2 * k] = mc.t_p05_s;
        g[2 * k + 1] = mc.t_median_s;
    }
}

enum pb_code cmd_fleet(int argc, char **argv, struct app *app, struct pb_error *err)
{
    struct health_rules rules;
    enum fleet_format fmt = FLEET_TEXT;
    const char *db = NULL, *status = NULL;
    int all = 0, predict = 0, c;
    double power_w = NAN;
    (void)app;
    config_rules(&rules);
    sort_key = "status";
    optind = 1;
    opterr = 0;
    while ((c = getopt_long(argc, argv, "h", longopts, NULL)) != -1) {
        int taken = ruleopts_take(c, optarg, &rules, err);
        if (taken < 0)
            return PB_EUSAGE;
        if (taken)
            continue;
        switch (c) {
        case F_JSON:
            fmt = FLEET_JSON;
            break;
        case F_CSV:
            fmt = FLEET_CSV;
            break;
        case F_SORT: {
            /* the canonical word, whatever the case given */
            static const char *const keys[] = {"status",   "pack",      "cycles", "r0", "r0-ratio",
                                               "capacity", "imbalance", "last",   NULL};
            int k = cmd_keyword("--sort", optarg, keys, err);
            if (k < 0)
                return PB_EUSAGE;
            sort_key = keys[k];
            break;
        }
        case F_STATUS: {
            static const char *const states[] = {"ok", "watch", "retire", "retired", NULL};
            int k = cmd_keyword("--status", optarg, states, err);
            if (k < 0)
                return PB_EUSAGE;
            status = states[k];
            break;
        }
        case F_ALL:
            all = 1;
            break;
        case F_PREDICT:
            predict = 1;
            break;
        case F_POWER:
            if (cmd_parse_double("--power", optarg, 0, 1e6, &power_w, err))
                return PB_EUSAGE;
            if (!(power_w > 0)) /* no load is no flight (see predict) */
                return pb_error_set(err, PB_EUSAGE, "--power: expected a load above 0 W, got '%s'",
                                    optarg);
            predict = 1;
            break;
        case F_DB:
            db = optarg;
            break;
        case 'h':
            fputs(usage, stdout);
            fputs(ruleopts_usage, stdout);
            return cmd_finish_stdout(err);
        default:
            return cmd_bad_option("fleet", argc, argv, err);
        }
    }
    if (optind < argc)
        return pb_error_set(err, PB_EUSAGE, "fleet: unexpected argument '%s'", argv[optind]);
    struct store *st = NULL;
    struct pack_view *views = NULL;
    double *safe = NULL;
    size_t nv = 0;
    enum pb_code rc = packview_open_store(db, STORE_READ, &st, err);
    if (rc != PB_OK)
        return rc;
    if (status && strcmp(status, "retired") == 0)
        all = 1;
    struct fleet_predict fp = {power_w, NULL, 0};
    rc = packview_load_fleet(st, &rules, all, status, predict ? predict_each : NULL, &fp, &views,
                             &nv, err);
    safe = fp.safe;
    if (rc == PB_OK && predict && !safe && !(safe = malloc(2 * sizeof *safe)))
        fp.failed = 1; /* no pack: an empty column all the same */
    if (rc == PB_OK && fp.failed)
        rc = pb_error_set(err, PB_ENOMEM, "out of memory");
    if (rc == PB_OK)
        rc = packview_pairs(st, views, nv, err);
    if (rc != PB_OK)
        goto cleanup;
    if (predict) {
        /* the safe times travel with their packs through the sort */
        for (size_t k = 0; k < nv; k++)
            views[k].safe_s[0] = safe[2 * k], views[k].safe_s[1] = safe[2 * k + 1];
    }
    qsort(views, nv, sizeof *views, compare_views);
    packview_keep_pairs_together(views, nv);
    if (predict)
        for (size_t k = 0; k < nv; k++)
            safe[2 * k] = views[k].safe_s[0], safe[2 * k + 1] = views[k].safe_s[1];
    if (report_fleet(stdout, views, nv, fmt, safe, config_reserve()) != 0)
        rc = pb_error_set(err, PB_EOUTPUT, "cannot write the output");
    else
        rc = cmd_finish_stdout(err);
cleanup:
    packview_free_all(views, nv);
    free(safe);
    store_close(st);
    return rc;
}
