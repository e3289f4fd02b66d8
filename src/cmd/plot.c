/* packbook plot LOG | plot trend ID | plot fleet: the figures. */
#include <getopt.h>
#include <math.h>
#include <stddef.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "../core/utf8.h"
#include "../report/outfile.h"
#include "../report/plot.h"
#include "../report/plots.h"
#include "cmd.h"
#include "config.h"
#include "logopts.h"
#include "packopts.h"
#include "packview.h"

static const char usage_head[] =
    "usage: packbook plot [options] LOG -o FILE\n"
    "       packbook plot trend ID -o FILE [--x cycles|date] [--by week|month|cycle]\n"
    "                               [--fit robust|ols] [--horizon N] [--db PATH]\n"
    "       packbook plot fleet -o FILE [--all] [--db PATH]\n"
    "\n"
    "Draws a figure as PNG, SVG or PDF, chosen by the output's extension.\n"
    "  LOG      the flight: voltage with the sag-corrected OCV, current and power,\n"
    "           SoC counted and from the OCV with the landing reserve, per-cell\n"
    "           voltages (weakest marked), temperature when logged;\n"
    "           time under the cut-off tinted, missing data hatched. Takes the\n"
    "           analyze options below. (A log named 'trend' or 'fleet': ./trend.)\n"
    "  trend    a pack's IR (R0) per cell and capacity % against equivalent cycles\n"
    "           (or --x date): flights, bucket means, fitted line with its 95 % band\n"
    "           and the band where 95 % of flights are expected,\n"
    "           retirement levels and the projected crossing; against cycles also\n"
    "           the chosen fade model and where to plan for (see packbook trend);\n"
    "           with cell columns, each flight's resting cell imbalance with its\n"
    "           weakest cell's number, and the weakest cell in the title\n"
    "  fleet    every pack in service (--all: and retired) at capacity % against\n"
    "           R0 change from its baseline, by status, every pack labelled (those\n"
    "           needing attention with why), registered pairs joined by a line\n"
    "\n";

enum plot_kind { KIND_FLIGHT = 0, KIND_TREND, KIND_FLEET };

struct plot_cli {
    enum plot_kind kind;
    struct plot_opts fig;
    const char *out;
    struct log_cli log;
    int by_date, all;
    struct trendopts t;
    const char *db;
    const char *pack;          /* plot LOG --pack ID */
    char pack_opt[48];         /* the first of --cells, --chemistry, --capacity given */
    char title[256];           /* "ID - log" for --pack without --title */
    struct packopts_seen seen; /* reading options given, over the pack's */
    char pack_settings[1024];  /* the pack's, split by packopts_apply */
    struct health_rules rules;
    const char *first_history_opt; /* for 'plot trend' or 'plot fleet' only */
    char first_log_opt[48];        /* for a log only */
};

#define PLOT_AT(field) offsetof(struct plot_cli, field)

static const char *const x_words[] = {"cycles", "date", NULL};

/* clang-format off */
static const struct opt figure_table[] = {
    {.name = "output", .letter = 'o', .kind = OPT_PATH, .off = PLOT_AT(out), .meta = "FILE",
     .help = "the figure: FILE.png, FILE.svg or FILE.pdf (required)"},
    {.name = "size", .kind = OPT_STRING, .off = OPT_NOWHERE, .meta = "WxH",
     .help = "size in pixels (points for SVG and PDF); default\n"
     "1600x1100 (1600x1300 with cells), trend 1600x1000,\n"
     "fleet 1400x1000"},
    {.name = "title", .kind = OPT_STRING, .off = PLOT_AT(fig.title), .meta = "TEXT",
     .help = "the title (default: the log's or pack's name)"},
    {.name = "axes-json", .kind = OPT_PATH, .off = PLOT_AT(fig.axes_json), .meta = "FILE",
     .help = "also write each panel's rectangle and axis ranges as JSON"},
    {.name = "db", .kind = OPT_PATH, .off = PLOT_AT(db), .meta = "PATH",
     .help = "history database, for --pack, trend and fleet (see 'packbook config')"},
    {0},
};

static const struct opt pack_table[] = {
    {.name = "pack", .kind = OPT_STRING, .off = PLOT_AT(pack), .meta = "ID",
     .help = "a registered pack: its cells, chemistry, capacity and\n"
     "remembered reading settings (options override them), and\n"
     "its name in the title"},
    {0},
};

static const struct opt history_table[] = {
    {.name = "x", .kind = OPT_KEYWORD, .off = PLOT_AT(by_date), .words = x_words,
     .def = "cycles", .meta = "AXIS", .help = "trend: against cycles (equivalent full cycles) or date"},
    {.name = "all", .kind = OPT_FLAG, .off = PLOT_AT(all), .set = 1,
     .help = "fleet: retired packs too"},
    {0},
};
/* clang-format on */

static int plot_hook(void *ctx, const struct opt *o, const char *v, struct pb_error *err)
{
    struct plot_cli *cli = ctx;
    char name[48];
    snprintf(name, sizeof name, "--%s", o->name);
    if (o == &figure_table[1])
        return plot_parse_size(v, &cli->fig.width, &cli->fig.height, err) != 0 ? -1 : 0;
    if (logopts_is_reading(o) || o->id == LO_CELLS || o->id == LO_CHEM || o->id == LO_CAP) {
        if (logopts_is_reading(o) && packopts_note(&cli->seen, o->id, v, err) < 0)
            return -1;
        if (!cli->first_log_opt[0])
            snprintf(cli->first_log_opt, sizeof cli->first_log_opt, "%s", name);
        if (!logopts_is_reading(o) && !cli->pack_opt[0])
            snprintf(cli->pack_opt, sizeof cli->pack_opt, "%s", name);
        return 0;
    }
    if (o == &trendopts_table[1]) {
        /* --fit: the flight's fits follow it too */
        cli->log.an.plain_fit = cli->t.plain;
        return packopts_note(&cli->seen, LO_FIT, v, err) < 0 ? -1 : 0;
    }
    if ((o >= history_table && o < history_table + 2) || o == &trendopts_table[0] ||
        o == &trendopts_table[2]) {
        static char first[48];
        if (!cli->first_history_opt) {
            snprintf(first, sizeof first, "%s", name);
            cli->first_history_opt = first;
        }
    }
    return 0;
}

static enum pb_code parse(int argc, char **argv, struct plot_cli *cli, int *done,
                          struct pb_error *err)
{
    struct opt_cmd cmd = {"plot",
                          usage_head,
                          NULL,
                          {{"figure:", figure_table, cli, NULL},
                           {"pack (LOG):", pack_table, cli, NULL},
                           LOGOPTS_PACK_GROUP(&cli->log, NULL),
                           {"trend and fleet:", trendopts_table, &cli->t, NULL},
                           {NULL, history_table, cli, NULL},
                           LOGOPTS_GROUP(&cli->log),
                           RULEOPTS_GROUP(&cli->rules)},
                          7,
                          plot_hook,
                          cli};
    enum pb_code parsed = opt_parse(&cmd, argc, argv, done, err);
    if (parsed != PB_OK || *done)
        return parsed;
    const char *first_history_opt = cli->first_history_opt;
    const char *first_log_opt = cli->first_log_opt;
    enum pb_code rc = logopts_finish(&cli->log, err);
    if (rc != PB_OK)
        return rc;
    int rest = argc - optind;
    if (rest >= 1 && strcmp(argv[optind], "trend") == 0) {
        cli->kind = KIND_TREND;
        if (rest != 2)
            return pb_error_set(err, PB_EUSAGE, "plot trend: give one pack ID");
    } else if (rest >= 1 && strcmp(argv[optind], "fleet") == 0) {
        cli->kind = KIND_FLEET;
        if (rest != 1)
            return pb_error_set(err, PB_EUSAGE, "plot fleet: unexpected argument '%s'",
                                argv[optind + 1]);
    } else {
        cli->kind = KIND_FLIGHT;
        if (rest < 1)
            return pb_error_set(err, PB_EUSAGE,
                                "plot: give a log, 'trend ID' or 'fleet' (see 'packbook plot "
                                "--help')");
        if (rest > 1)
            return pb_error_set(err, PB_EUSAGE, "plot: one log at a time, got '%s' and '%s'",
                                argv[optind], argv[optind + 1]);
    }
    if (cli->kind == KIND_FLIGHT && cli->db && !cli->pack)
        return pb_error_set(err, PB_EUSAGE,
                            "plot: --db is for --pack, 'plot trend' or 'plot fleet'");
    if (cli->kind != KIND_FLIGHT && cli->pack)
        return pb_error_set(err, PB_EUSAGE, "plot %s: --pack is for a log", argv[optind]);
    if (cli->pack && cli->pack_opt[0])
        return pb_error_set(err, PB_EUSAGE,
                            "plot: %s with --pack: the pack sets cells, chemistry and capacity",
                            cli->pack_opt);
    if (cli->kind == KIND_FLIGHT && first_history_opt)
        return pb_error_set(err, PB_EUSAGE, "plot: %s is for 'plot trend' or 'plot fleet'",
                            first_history_opt);
    if (cli->kind != KIND_FLIGHT && first_log_opt[0])
        return pb_error_set(err, PB_EUSAGE,
                            "plot %s: %s is for a log (the history keeps each flight's analysis)",
                            argv[optind], first_log_opt);
    if (cli->kind == KIND_FLEET && cli->by_date)
        return pb_error_set(err, PB_EUSAGE, "plot fleet: --x is for 'plot trend'");
    if (!cli->out)
        return pb_error_set(err, PB_EUSAGE, "plot: -o FILE is required (.png, .svg or .pdf)");
    if (plot_format_of(cli->out) < 0)
        return pb_error_set(err, PB_EUSAGE,
                            "plot: '%s': the output's name must end in .png, .svg or .pdf",
                            cli->out);
    /* the log, or the database, is never overwritten by the figure or its axes map */
    char db[1024] = "";
    if (cli->db)
        snprintf(db, sizeof db, "%s", cli->db);
    else if (store_default_path(db, sizeof db) != 0)
        db[0] = '\0';
    const char *ins[] = {cli->kind == KIND_FLIGHT ? argv[optind] : NULL, db[0] ? db : NULL};
    const char *outs[] = {cli->out, cli->fig.axes_json};
    const char *what[] = {"-o", "--axes-json"};
    return outfile_check_distinct(ins, 2, outs, what, 2, err);
}

/* --pack: the pack's cells, chemistry and capacity, and its name in the title. */
static enum pb_code take_pack(struct plot_cli *cli, const char *path, struct pb_error *err)
{
    struct store *st = NULL;
    struct pack_rec p;
    enum pb_code rc = packview_open_store(cli->db, STORE_READ, &st, err);
    if (rc == PB_OK)
        rc = store_pack_get(st, cli->pack, &p, err);
    store_close(st);
    if (rc != PB_OK)
        return rc;
    const struct chem_info *chem = ocv_chem_by_name(p.chemistry);
    if (!chem)
        return pb_error_set(err, PB_ESTORE,
                            "pack '%s' has an unknown chemistry '%s' in the database", p.label,
                            p.chemistry);
    cli->log.an.cells = p.cells;
    cli->log.an.chemistry = (int)chem->id;
    cli->log.an.capacity_mah = p.capacity_mah;
    memcpy(cli->pack_settings, p.settings, sizeof cli->pack_settings);
    rc = packopts_apply(cli->pack_settings, &cli->seen, &cli->log, err);
    if (rc != PB_OK)
        return rc;
    if (!cli->fig.title) {
        const char *base = strrchr(path, '/') ? strrchr(path, '/') + 1 : path;
        snprintf(cli->title, sizeof cli->title, "%s \u00b7 %s", p.label,
                 strcmp(path, "-") == 0 ? "(stdin)" : base);
        cli->fig.title = cli->title;
    }
    return PB_OK;
}

static enum pb_code plot_log(struct plot_cli *cli, const char *path, struct pb_error *err)
{
    struct logread_stats stats;
    struct analysis *a = NULL;
    struct series *s = NULL;
    /* without --pack: the settings file's reading defaults under the options */
    enum pb_code rc =
        cli->pack ? take_pack(cli, path, err) : packopts_apply(NULL, &cli->seen, &cli->log, err);
    if (rc == PB_OK)
        rc = logopts_analyze(path, &cli->log, &stats, &a, &s, err);
    if (rc == PB_OK)
        rc = plot_flight(cli->out, &cli->fig, s, a, cli->log.an.capacity_mah,
                         strcmp(path, "-") == 0 ? "(stdin)" : path, err);
    series_free(s);
    analysis_free(a);
    return rc;
}

static enum pb_code plot_history(const struct plot_cli *cli, const char *id, struct pb_error *err)
{
    struct store *st = NULL;
    struct pack_view *views = NULL;
    size_t nv = 0;
    enum pb_code rc = packview_open_store(cli->db, STORE_READ, &st, err);
    if (rc != PB_OK)
        return rc;
    if (cli->kind == KIND_TREND) {
        struct pack_rec p;
        struct pack_view v;
        rc = store_pack_get(st, id, &p, err);
        if (rc == PB_OK)
            rc = packview_load(st, &p, &cli->rules, cli->t.by, cli->t.plain, cli->t.horizon, &v,
                               err);
        if (rc == PB_OK) {
            rc = plot_trend(cli->out, &cli->fig, &v, &cli->rules, cli->by_date, err);
            pack_view_release(&v);
        }
        store_close(st);
        return rc;
    }
    rc = packview_load_fleet(st, &cli->rules, cli->all, NULL, 0, NULL, NULL, &views, &nv, err);
    if (rc == PB_OK) /* registered pairs, drawn joined; a drifted pair is a flag */
        rc = packview_pairs(st, views, nv, err);
    if (rc == PB_OK)
        rc = plot_fleet(cli->out, &cli->fig, views, nv, &cli->rules, err);
    packview_free_all(views, nv);
    store_close(st);
    return rc;
}

enum pb_code cmd_plot(int argc, char **argv, struct app *app, struct pb_error *err)
{
    struct plot_cli cli = {0};
    (void)app;
    logopts_init(&cli.log);
    cli.log.read.min_samples = 1; /* a figure of one sample still says what there is */
    config_rules(&cli.rules);
    cli.fig.reserve_pct = config_reserve();
    opt_defaults(trendopts_table, &cli.t);
    int done = 0;
    enum pb_code rc = parse(argc, argv, &cli, &done, err);
    if (rc != PB_OK || done)
        return rc;
    if (cli.kind == KIND_FLIGHT)
        rc = plot_log(&cli, argv[optind], err);
    else
        rc = plot_history(&cli, cli.kind == KIND_TREND ? argv[optind + 1] : NULL, err);
    if (rc == PB_OK)
        printf("wrote %s\n", utf8_printable((char[4096]){0}, 4096, cli.out));
    return rc == PB_OK ? cmd_finish_stdout(err) : rc;
}
