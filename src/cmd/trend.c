/* packbook trend ID... and packbook compare ID ID...: packs' histories over time. */
#include <getopt.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "../report/plot.h"
#include "../report/plots.h"
#include "cmd.h"
#include "config.h"
#include "packview.h"

static const char trend_usage[] =
    "usage: packbook trend ID... [--by week|month|cycle] [--horizon N] [--fit robust|ols]\n"
    "                            [--json|--csv] [--plot FILE] [--db PATH]\n"
    "\n"
    "Per ISO week (default), month or 5-cycle bucket: flights, charge, mean R0 per\n"
    "cell and capacity % of rated; weeks and months without flights are shown\n"
    "empty. Then straight-line fits of R0 and capacity against equivalent cycles\n"
    "and against days (robust unless --fit ols), slopes per 10 cycles and per day\n"
    "with 95 % intervals, and the cycle and date at which each reaches its\n"
    "retirement level, or that it does not within N cycles (--horizon, default\n"
    "1000). Several packs: one after another (CSV: one table with a pack column;\n"
    "JSON: an array).\n"
    "With 10 or more flights, a knee-aware projection under each: fade models\n"
    "(line, line with a break, exponential, power law) chosen by their held-out\n"
    "error on this pack's history, and the crossing as a range: '80 % between\n"
    "cycle X and Y; plan for X' (JSON: crossing_cycles_range [early, middle, late])\n"
    "  --plot FILE            also draw the trend of one pack as FILE.png, .svg or .pdf\n"
    "                         against cycles ('packbook plot trend' has --x date, --size)\n";

static const char compare_usage[] =
    "usage: packbook compare ID ID... [--json|--csv] [--db PATH]\n"
    "\n"
    "The packs side by side: use, resistance and capacity now and per 10 cycles,\n"
    "the weakest cell, projected limits and status (CSV: one row per pack).\n";

enum { T_BY = 256, T_HORIZON, T_FIT, T_JSON, T_DB, T_PLOT, T_CSV };

static const struct option longopts[] = {
    {"by", required_argument, NULL, T_BY},
    {"horizon", required_argument, NULL, T_HORIZON},
    {"fit", required_argument, NULL, T_FIT},
    {"json", no_argument, NULL, T_JSON},
    {"csv", no_argument, NULL, T_CSV},
    {"db", required_argument, NULL, T_DB},
    {"plot", required_argument, NULL, T_PLOT},
    {"help", no_argument, NULL, 'h'},
    RULEOPTS_LONG,
    {NULL, 0, NULL, 0},
};

struct trend_cli {
    enum trend_by by;
    double horizon;
    int plain;
    enum fleet_format fmt;
    const char *db;
    const char *plot; /* trend --plot FILE */
    struct health_rules rules;
};

static enum pb_code parse(const char *verb, const char *usage, int argc, char **argv,
                          struct trend_cli *cli, int *done, struct pb_error *err)
{
    int c;
    cli->by = TREND_WEEK;
    cli->horizon = 1000.0;
    config_rules(&cli->rules);
    optind = 1;
    opterr = 0;
    while ((c = getopt_long(argc, argv, "h", longopts, NULL)) != -1) {
        int taken = ruleopts_take(c, optarg, &cli->rules, err);
        if (taken < 0)
            return PB_EUSAGE;
        if (taken)
            continue;
        switch (c) {
        case T_BY:
            if (trendopts_by(optarg, &cli->by, err))
                return PB_EUSAGE;
            break;
        case T_HORIZON:
            if (cmd_parse_double("--horizon", optarg, 1, 1e6, &cli->horizon, err))
                return PB_EUSAGE;
            break;
        case T_FIT:
            if (trendopts_fit(optarg, &cli->plain, err))
                return PB_EUSAGE;
            break;
        case T_JSON:
            cli->fmt = FLEET_JSON;
            break;
        case T_CSV:
            cli->fmt = FLEET_CSV;
            break;
        case T_DB:
            cli->db = optarg;
            break;
        case T_PLOT:
            if (strcmp(verb, "trend") != 0)
                return pb_error_set(err, PB_EUSAGE,
                                    "compare: --plot draws one pack: use 'packbook trend ID "
                                    "--plot FILE' or 'packbook plot fleet'");
            if (plot_format_of(optarg) < 0)
                return pb_error_set(err, PB_EUSAGE,
                                    "--plot: '%s': the figure's name must end in .png, .svg or "
                                    ".pdf",
                                    optarg);
            cli->plot = optarg;
            break;
        case 'h':
            fputs(usage, stdout);
            fputs(ruleopts_usage, stdout);
            *done = 1;
            return cmd_finish_stdout(err);
        default:
            return cmd_bad_option(verb, argc, argv, err);
        }
    }
    return PB_OK;
}

/* Loads the views of the packs named in argv[optind..]. */
static enum pb_code load_named(int argc, char **argv, const struct trend_cli *cli,
                               struct store **st, struct pack_view **views, size_t *nv,
                               struct pb_error *err)
{
    enum pb_code rc = packview_open_store(cli->db, STORE_READ, st, err);
    if (rc != PB_OK)
        return rc;
    size_t want = (size_t)(argc - optind);
    *views = calloc(want ? want : 1, sizeof **views);
    if (!*views)
        return pb_error_set(err, PB_ENOMEM, "out of memory");
    for (int k = optind; k < argc; k++) {
        struct pack_rec p;
        rc = store_pack_get(*st, argv[k], &p, err);
        if (rc != PB_OK)
            return rc;
        rc = packview_load(*st, &p, &cli->rules, cli->by, cli->plain, cli->horizon, &(*views)[*nv],
                           err);
        if (rc != PB_OK)
            return rc;
        (*nv)++;
    }
    return PB_OK;
}

static enum pb_code run(int compare, int argc, char **argv, struct pb_error *err)
{
    const char *verb = compare ? "compare" : "trend";
    struct trend_cli cli = {0};
    int done = 0;
    enum pb_code rc =
        parse(verb, compare ? compare_usage : trend_usage, argc, argv, &cli, &done, err);
    if (rc != PB_OK || done)
        return rc;
    int have = argc - optind;
    if (compare ? have < 2 : have < 1)
        return pb_error_set(err, PB_EUSAGE,
                            compare ? "compare: give two or more pack IDs"
                                    : "trend: give one or more pack IDs");
    if (cli.plot && have != 1)
        return pb_error_set(err, PB_EUSAGE, "trend: --plot draws one pack: give one pack ID");
    struct store *st = NULL;
    struct pack_view *views = NULL;
    size_t nv = 0;
    rc = load_named(argc, argv, &cli, &st, &views, &nv, err);
    if (rc == PB_OK && cli.plot) {
        struct plot_opts fig = {0};
        rc = plot_trend(cli.plot, &fig, &views[0], &cli.rules, 0, err);
    }
    if (rc == PB_OK) {
        int w = compare ? report_compare(stdout, views, nv, cli.fmt)
                        : report_trend(stdout, views, nv, cli.by, cli.horizon, cli.fmt);
        rc = w != 0 ? pb_error_set(err, PB_EOUTPUT, "cannot write the output")
                    : cmd_finish_stdout(err);
    }
    for (size_t k = 0; k < nv; k++)
        pack_view_release(&views[k]);
    free(views);
    store_close(st);
    return rc;
}

enum pb_code cmd_trend(int argc, char **argv, struct app *app, struct pb_error *err)
{
    (void)app;
    return run(0, argc, argv, err);
}

enum pb_code cmd_compare(int argc, char **argv, struct app *app, struct pb_error *err)
{
    (void)app;
    return run(1, argc, argv, err);
}
