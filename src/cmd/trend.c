/* packbook trend ID... and packbook compare ID ID...: packs' histories over time. */
#include <getopt.h>
#include <stddef.h>
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
    "\n";

static const char compare_usage[] =
    "usage: packbook compare ID ID... [--json|--csv] [--db PATH]\n"
    "\n"
    "The packs side by side: use, resistance and capacity now and per 10 cycles,\n"
    "the weakest cell, projected limits and status (CSV: one row per pack).\n"
    "\n";

struct trend_cli {
    struct trendopts t;
    int fmt; /* enum fleet_format */
    const char *db;
    const char *plot; /* trend --plot FILE */
    const char *verb;
    struct health_rules rules;
};

#define TREND_AT(field) offsetof(struct trend_cli, field)

/* clang-format off */
static const struct opt trend_table[] = {
    {.name = "json", .kind = OPT_FLAG, .off = TREND_AT(fmt), .set = FLEET_JSON,
     .help = "JSON on standard output (several packs: an array)"},
    {.name = "csv", .kind = OPT_FLAG, .off = TREND_AT(fmt), .set = FLEET_CSV,
     .help = "CSV on standard output (several packs: one table with a pack column)"},
    {.name = "plot", .kind = OPT_PATH, .off = TREND_AT(plot), .meta = "FILE",
     .help = "trend: also draw the trend of one pack as FILE.png, .svg or .pdf\n"
     "against cycles ('packbook plot trend' has --x date, --size)"},
    {.name = "db", .kind = OPT_PATH, .off = TREND_AT(db), .meta = "PATH",
     .help = "history database (see 'packbook config')"},
    {0},
};
/* clang-format on */

static int trend_hook(void *ctx, const struct opt *o, const char *val, struct pb_error *err)
{
    struct trend_cli *cli = ctx;
    if (strcmp(o->name, "plot") != 0)
        return 0;
    if (strcmp(cli->verb, "trend") != 0)
        return pb_error_set(err, PB_EUSAGE,
                            "compare: --plot draws one pack: use 'packbook trend ID --plot FILE' "
                            "or 'packbook plot fleet'");
    if (plot_format_of(val) < 0)
        return pb_error_set(err, PB_EUSAGE,
                            "--plot: '%s': the figure's name must end in .png, .svg or .pdf", val);
    return 0;
}

static enum pb_code parse(const char *verb, const char *usage, int argc, char **argv,
                          struct trend_cli *cli, int *done, struct pb_error *err)
{
    cli->verb = verb;
    opt_defaults(trendopts_table, &cli->t);
    config_rules(&cli->rules);
    struct opt_cmd cmd = {verb,
                          usage,
                          NULL,
                          {{NULL, trend_table, cli, NULL},
                           {"trend:", trendopts_table, &cli->t, NULL},
                           RULEOPTS_GROUP(&cli->rules)},
                          3,
                          trend_hook,
                          cli};
    return opt_parse(&cmd, argc, argv, done, err);
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
        rc = packview_load(*st, &p, &cli->rules, cli->t.by, cli->t.plain, cli->t.horizon,
                           &(*views)[*nv], err);
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
                        : report_trend(stdout, views, nv, cli.t.by, cli.t.horizon, cli.fmt);
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
