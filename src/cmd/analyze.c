#include <getopt.h>
#include <math.h>
#include <stddef.h>
#include <stdio.h>
#include <string.h>

#include "../core/analyze.h"
#include "../core/logread.h"
#include "../report/outfile.h"
#include "../report/plot.h"
#include "../report/plots.h"
#include "../report/report.h"
#include "cmd.h"
#include "config.h"
#include "logopts.h"
#include "packopts.h"
#include "packview.h"

static const char usage_head[] =
    "usage: packbook analyze [options] LOG\n"
    "\n"
    "Reads one flight log (CSV; '-' for standard input) and reports charge and\n"
    "energy used, internal resistance, open-circuit voltage, state of charge,\n"
    "capacity and per-cell figures.\n"
    "\n";

struct analyze_cli {
    struct log_cli log;
    int json;
    const char *path;
    const char *series; /* --series FILE */
    const char *plot;   /* --plot FILE */
    const char *pack, *db;
    const char *pack_opt; /* the first of --cells, --chemistry, --capacity given */
    struct packopts_seen seen;
    struct pack_rec rec; /* the pack's, its settings split by packopts_apply */
};

#define AN_AT(field) offsetof(struct analyze_cli, field)

/* clang-format off */
static const struct opt pack_table[] = {
    {.name = "pack", .kind = OPT_STRING, .off = AN_AT(pack), .meta = "ID",
     .help = "a registered pack instead: its cells, chemistry, capacity and\n"
     "remembered reading settings (the options below override those)"},
    {.name = "db", .kind = OPT_PATH, .off = AN_AT(db), .meta = "PATH",
     .help = "the history database of --pack (see 'packbook config')"},
    {0},
};

static const struct opt output_table[] = {
    {.name = "json", .kind = OPT_FLAG, .off = AN_AT(json), .set = 1,
     .help = "one JSON document on standard output"},
    {.name = "series", .kind = OPT_PATH, .off = AN_AT(series), .meta = "FILE",
     .help = "every sample as CSV: time, voltage, current, sag-corrected\n"
     "OCV, SoC by counting, SoC from the OCV ('-': stdout)"},
    {.name = "plot", .kind = OPT_PATH, .off = AN_AT(plot), .meta = "FILE",
     .help = "also draw the flight as FILE.png, .svg or .pdf (the\n"
     "figure of 'packbook plot'; that command sets its size)"},
    {0},
};
/* clang-format on */

static int analyze_hook(void *ctx, const struct opt *o, const char *v, struct pb_error *err)
{
    struct analyze_cli *cli = ctx;
    if (logopts_is_reading(o))
        return packopts_note(&cli->seen, o->id, v, err) < 0 ? -1 : 0;
    if ((o->id == LO_CELLS || o->id == LO_CHEM || o->id == LO_CAP) && !cli->pack_opt)
        cli->pack_opt = o->id == LO_CELLS  ? "--cells"
                        : o->id == LO_CHEM ? "--chemistry"
                                           : "--capacity";
    if (o == &output_table[2] && plot_format_of(v) < 0)
        return pb_error_set(err, PB_EUSAGE,
                            "--plot: '%s': the figure's name must end in .png, .svg or .pdf", v);
    return 0;
}

/* Fills cli from argv; sets *done when --help was printed instead. */
static enum pb_code parse_args(int argc, char **argv, struct analyze_cli *cli, int *done,
                               struct pb_error *err)
{
    struct opt_cmd cmd = {"analyze",
                          usage_head,
                          NULL,
                          {LOGOPTS_PACK_GROUP(&cli->log, "pack:"),
                           {NULL, pack_table, cli, NULL},
                           LOGOPTS_GROUP(&cli->log),
                           {"output:", output_table, cli, NULL}},
                          4,
                          analyze_hook,
                          cli};
    enum pb_code rc = opt_parse(&cmd, argc, argv, done, err);
    if (rc != PB_OK || *done)
        return rc;
    rc = logopts_finish(&cli->log, err);
    if (rc != PB_OK)
        return rc;
    if (optind >= argc)
        return pb_error_set(err, PB_EUSAGE,
                            "analyze: no log given (see 'packbook analyze --help')");
    if (optind + 1 < argc)
        return pb_error_set(err, PB_EUSAGE, "analyze: one log at a time, got '%s' and '%s'",
                            argv[optind], argv[optind + 1]);
    cli->path = argv[optind];
    if (cli->db && !cli->pack)
        return pb_error_set(err, PB_EUSAGE, "analyze: --db is for --pack");
    if (cli->pack && cli->pack_opt)
        return pb_error_set(err, PB_EUSAGE,
                            "analyze: %s with --pack: the pack sets cells, chemistry and capacity",
                            cli->pack_opt);
    const char *ins[] = {cli->path};
    const char *outs[] = {cli->series, cli->plot};
    const char *what[] = {"--series", "--plot"};
    return outfile_check_distinct(ins, 1, outs, what, 2, err);
}

/* --pack: the registered pack's facts and reading settings under the options given. */
static enum pb_code take_pack(struct analyze_cli *cli, struct pb_error *err)
{
    struct store *st = NULL;
    enum pb_code rc = packview_open_store(cli->db, STORE_READ, &st, err);
    if (rc == PB_OK)
        rc = store_pack_get(st, cli->pack, &cli->rec, err);
    store_close(st);
    if (rc != PB_OK)
        return rc;
    const struct chem_info *chem = ocv_chem_by_name(cli->rec.chemistry);
    if (!chem)
        return pb_error_set(err, PB_ESTORE,
                            "pack '%s' has an unknown chemistry '%s' in the database",
                            cli->rec.label, cli->rec.chemistry);
    cli->log.an.cells = cli->rec.cells;
    cli->log.an.chemistry = (int)chem->id;
    cli->log.an.capacity_mah = cli->rec.capacity_mah;
    return packopts_apply(cli->rec.settings, &cli->seen, &cli->log, err);
}

static void emit_row(void *ctx, const struct sample_row *r)
{
    FILE *out = ctx;
    double v[6] = {r->t_s, r->v_v, r->i_a, r->ocv_v, r->soc_cc_pct, r->soc_ocv_pct};
    /* time to the millisecond whatever the log's length (%.6g lost it past 1000 s) */
    static const char *const fmt[6] = {"%.3f", "%.4f", "%.3f", "%.4f", "%.2f", "%.2f"};
    for (int k = 0; k < 6; k++) {
        if (k)
            fputc(',', out);
        if (isfinite(v[k]))
            fprintf(out, fmt[k], v[k]);
    }
    fputc('\n', out);
}

static enum pb_code write_series(const char *path, const struct series *s, const struct analysis *a,
                                 double rated_mah, struct pb_error *err)
{
    int to_stdout = strcmp(path, "-") == 0;
    struct outfile *of = to_stdout ? NULL : outfile_open(path, err);
    if (!to_stdout && !of)
        return err->code;
    FILE *out = to_stdout ? stdout : outfile_fp(of);
    fprintf(out, "time_s,voltage_v,current_a,ocv_v,soc_counted_pct,soc_ocv_pct\n");
    analyze_rows(s, a, rated_mah, emit_row, out);
    if (!to_stdout)
        return outfile_commit(of, err);
    return ferror(out) ? pb_error_set(err, PB_EOUTPUT, "cannot write '%s'", path) : PB_OK;
}

enum pb_code cmd_analyze(int argc, char **argv, struct app *app, struct pb_error *err)
{
    struct analyze_cli cli = {0};
    struct logread_stats stats;
    struct analysis *a = NULL;
    struct series *s = NULL;
    (void)app;

    logopts_init(&cli.log);
    int done = 0;
    enum pb_code rc = parse_args(argc, argv, &cli, &done, err);
    if (rc != PB_OK || done)
        return rc;
    /* the settings file's reading defaults, a pack's settings, then the options */
    rc = cli.pack ? take_pack(&cli, err) : packopts_apply(NULL, &cli.seen, &cli.log, err);
    if (rc != PB_OK)
        return rc;
    cli.log.an.stages = cmd_stage_hook(); /* bench/stages */
    rc = logopts_analyze(cli.path, &cli.log, &stats, &a, cli.series || cli.plot ? &s : NULL, err);
    if (rc != PB_OK)
        return rc;
    stage_begin(cli.log.an.stages, "report");
    const char *name = strcmp(cli.path, "-") == 0 ? "(stdin)" : cli.path;
    struct report_input in = {name, &stats, &cli.log.an, cli.log.an.plain_fit};
    if (cli.series && (rc = write_series(cli.series, s, a, cli.log.an.capacity_mah, err)) != PB_OK)
        goto cleanup;
    struct plot_opts fig = {0};
    fig.reserve_pct = config_reserve();
    if (cli.plot &&
        (rc = plot_flight(cli.plot, &fig, s, a, cli.log.an.capacity_mah, name, err)) != PB_OK)
        goto cleanup;
    if (cli.series && strcmp(cli.series, "-") == 0)
        rc = cmd_finish_stdout(err); /* the series is the output */
    else if ((cli.json ? report_analysis_json(stdout, a, &in)
                       : report_analysis_text(stdout, a, &in)) != 0)
        rc = pb_error_set(err, PB_EOUTPUT, "cannot write the output");
    else
        rc = cmd_finish_stdout(err);
cleanup:
    series_free(s);
    analysis_free(a);
    stage_begin(cli.log.an.stages, "end");
    return rc;
}
