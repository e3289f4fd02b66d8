/* packbook fleet: one row per pack with its state and the reason. */
#include <getopt.h>
#include <math.h>
#include <stddef.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "cmd.h"
#include "config.h"
#include "packview.h"

/* A help text reads best as the lines it prints. */
/* clang-format off */
static const char usage[] =
    "usage: packbook fleet [--json|--csv] [--sort KEY] [--status S] [--all] [--reassess]\n"
    "                      [--db PATH]\n"
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
    "Each pack's assessment is kept in the history by the commands that change it\n"
    "(import, flight remove, move and ack, pack edit, sync, db migrate) and read\n"
    "back while it is current, so the fleet view does not read every flight.\n"
    "\n";
/* clang-format on */

struct fleet_cli {
    int fmt; /* enum fleet_format */
    int sort, status, all, predict, reassess;
    double power_w;
    const char *db;
    struct health_rules rules;
};

#define FLEET_AT(field) offsetof(struct fleet_cli, field)

static const char *const sort_words[] = {"status",   "pack",      "cycles", "r0", "r0-ratio",
                                         "capacity", "imbalance", "last",   NULL};
static const char *const status_words[] = {"ok", "watch", "retire", "retired", NULL};

/* clang-format off */
static const struct opt fleet_table[] = {
    {.name = "sort", .kind = OPT_KEYWORD, .off = FLEET_AT(sort), .words = sort_words,
     .def = "status", .meta = "KEY",
     .help = "status (retire first), pack, cycles, r0 (resistance\n"
     "per cell, highest first), r0-ratio (against the baseline),\n"
     "capacity (lowest first), imbalance, last"},
    {.name = "status", .kind = OPT_KEYWORD, .off = FLEET_AT(status), .words = status_words,
     .meta = "S", .help = "only packs with status ok, watch, retire or retired"},
    {.name = "all", .kind = OPT_FLAG, .off = FLEET_AT(all), .set = 1,
     .help = "include retired packs"},
    {.name = "predict", .kind = OPT_FLAG, .off = FLEET_AT(predict), .set = 1,
     .help = "add the conservative safe flight time (minutes) to the\n"
     "landing reserve (" PREDICT_STR(PREDICT_RESERVE_PCT) " %, or the settings file's 'reserve')\n"
     "at the pack's recent cruise power, or at --power"},
    {.name = "power", .kind = OPT_DOUBLE, .off = FLEET_AT(power_w), .lo = 0, .hi = 1e6,
     .meta = "W", .help = "--predict at W watts (implies --predict)"},
    {.name = "reassess", .kind = OPT_FLAG, .off = FLEET_AT(reassess), .set = 1,
     .help = "assess every pack from its flights, not from the\n"
     "assessment kept when its history last changed (the same\n"
     "numbers; slower, for checking)"},
    {.name = "json", .kind = OPT_FLAG, .off = FLEET_AT(fmt), .set = FLEET_JSON,
     .help = "JSON on standard output"},
    {.name = "csv", .kind = OPT_FLAG, .off = FLEET_AT(fmt), .set = FLEET_CSV,
     .help = "CSV on standard output (cells starting = + - @, also after\n"
     "spaces or zero-width characters, are prefixed with ' so\n"
     "spreadsheets do not run them)"},
    {.name = "db", .kind = OPT_PATH, .off = FLEET_AT(db), .meta = "PATH",
     .help = "history database (see 'packbook config')"},
    {0},
};
/* clang-format on */

static int fleet_hook(void *ctx, const struct opt *o, const char *v, struct pb_error *err)
{
    struct fleet_cli *cli = ctx;
    if (o != &fleet_table[4])
        return 0;
    if (!(cli->power_w > 0)) /* no load is no flight (see predict) */
        return pb_error_set(err, PB_EUSAGE, "--power: expected a load above 0 W, got '%s'", v);
    cli->predict = 1;
    return 0;
}

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
    struct fleet_cli cli = {0};
    (void)app;
    cli.fmt = FLEET_TEXT;
    cli.status = -1; /* any */
    cli.power_w = NAN;
    opt_defaults(fleet_table, &cli);
    config_rules(&cli.rules);
    int done = 0;
    struct opt_cmd cmd = {
        "fleet", usage,      NULL, {{NULL, fleet_table, &cli, NULL}, RULEOPTS_GROUP(&cli.rules)},
        2,       fleet_hook, &cli};
    enum pb_code parsed = opt_parse(&cmd, argc, argv, &done, err);
    if (parsed != PB_OK || done)
        return parsed;
    sort_key = sort_words[cli.sort];
    const char *status = cli.status < 0 ? NULL : status_words[cli.status];
    const char *db = cli.db;
    int all = cli.all, predict = cli.predict;
    double power_w = cli.power_w;
    enum fleet_format fmt = (enum fleet_format)cli.fmt;
    struct health_rules rules = cli.rules;
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
    rc = packview_load_fleet(st, &rules, all, status, cli.reassess, predict ? predict_each : NULL,
                             &fp, &views, &nv, err);
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
