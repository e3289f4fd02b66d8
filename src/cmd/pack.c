/* packbook pack add|list|show|retire: the pack register. */
#include <getopt.h>
#include <math.h>
#include <stdio.h>
#include <string.h>

#include "../core/isotime.h"
#include "../core/ocv.h"
#include "../core/utf8.h"
#include "cmd.h"
#include "packview.h"

static const char usage[] =
    "usage: packbook pack add ID --cells N --chemistry C --capacity MAH\n"
    "                         [--parallel P] [--since DATE] [--note TEXT]\n"
    "       packbook pack list [--json]\n"
    "       packbook pack show ID [--json]\n"
    "       packbook pack retire ID --reason TEXT\n"
    "\n"
    "ID is the label written on the pack (free text). Retired packs are kept.\n"
    "  --db PATH              history database (default: $PACKBOOK_DB, else\n"
    "                         $XDG_DATA_HOME/packbook/packbook.db)\n"
    "  --wait S               wait up to S seconds for another process's lock on the\n"
    "                         database (default 60)\n";

enum { P_CELLS = 256, P_PAR, P_CHEM, P_CAP, P_SINCE, P_NOTE, P_REASON, P_JSON, P_DB, P_WAIT };

static const struct option longopts[] = {
    {"cells", required_argument, NULL, P_CELLS},
    {"parallel", required_argument, NULL, P_PAR},
    {"chemistry", required_argument, NULL, P_CHEM},
    {"capacity", required_argument, NULL, P_CAP},
    {"since", required_argument, NULL, P_SINCE},
    {"note", required_argument, NULL, P_NOTE},
    {"reason", required_argument, NULL, P_REASON},
    {"json", no_argument, NULL, P_JSON},
    {"db", required_argument, NULL, P_DB},
    {"wait", required_argument, NULL, P_WAIT},
    {"help", no_argument, NULL, 'h'},
    {NULL, 0, NULL, 0},
};

struct pack_cli {
    struct pack_rec rec;
    const char *reason, *db;
    int json, have_cells, have_chem, have_cap;
    double wait_s;
};

static enum pb_code cmd_add(struct store *st, struct pack_cli *cli, struct pb_error *err)
{
    if (!cli->have_cells || !cli->have_chem || !cli->have_cap)
        return pb_error_set(err, PB_EUSAGE,
                            "pack add: --cells, --chemistry and --capacity are needed");
    enum pb_code rc = store_pack_add(st, &cli->rec, err);
    if (rc != PB_OK)
        return rc;
    char lb[4 * sizeof cli->rec.label];
    printf("added pack '%s': %dS%dP %s, %.0f mAh\n", utf8_printable(lb, sizeof lb, cli->rec.label),
           cli->rec.cells, cli->rec.parallel, cli->rec.chemistry, cli->rec.capacity_mah);
    return PB_OK;
}

static enum pb_code cmd_list(struct store *st, struct pack_cli *cli, struct pb_error *err)
{
    struct pack_rec *p = NULL;
    size_t n = 0;
    enum pb_code rc = store_pack_list(st, &p, &n, err);
    if (rc != PB_OK)
        return rc;
    if (report_pack_list(stdout, p, n, cli->json) != 0)
        rc = pb_error_set(err, PB_EOUTPUT, "cannot write the output");
    store_packs_free(p);
    return rc;
}

static enum pb_code cmd_show(struct store *st, struct pack_cli *cli, struct pb_error *err)
{
    struct pack_rec p;
    enum pb_code rc = store_pack_get(st, cli->rec.label, &p, err);
    if (rc != PB_OK)
        return rc;
    struct health_rules rules;
    health_rules_default(&rules);
    struct pack_view v;
    rc = packview_load(st, &p, &rules, TREND_WEEK, 0, 1000.0, &v, err);
    if (rc == PB_OK && report_pack_show(stdout, &v, cli->json) != 0)
        rc = pb_error_set(err, PB_EOUTPUT, "cannot write the output");
    pack_view_release(&v);
    return rc;
}

static enum pb_code cmd_retire(struct store *st, struct pack_cli *cli, struct pb_error *err)
{
    if (!cli->reason || !*cli->reason)
        return pb_error_set(err, PB_EUSAGE, "pack retire: give the reason with --reason TEXT");
    enum pb_code rc = store_pack_retire(st, cli->rec.label, cli->reason, err);
    char lb[4 * sizeof cli->rec.label], rb[4 * sizeof cli->rec.retire_reason];
    if (rc == PB_OK)
        printf("retired pack '%s': %s (its history is kept)\n",
               utf8_printable(lb, sizeof lb, cli->rec.label),
               utf8_printable(rb, sizeof rb, cli->reason));
    return rc;
}

static int valid_date(const char *s, char *why, size_t cap)
{
    double e;
    return isotime_parse_why(s, strlen(s), &e, NULL, why, cap) == 0;
}

/* Text kept in the history: valid UTF-8 and no longer than the store keeps,
 * refused whole rather than cut (JSON cannot carry other bytes, and a cut note
 * or reason would read as the whole). Returns 0, or -1 with err filled. */
static int check_text(const char *what, const char *v, size_t max_bytes, struct pb_error *err)
{
    size_t len = strlen(v);
    if (!utf8_valid(v, len)) {
        pb_error_set(err, PB_EUSAGE,
                     "%s: not valid UTF-8 text (convert it first, e.g. with iconv -f latin1 -t "
                     "utf-8)",
                     what);
        return -1;
    }
    if (len > max_bytes) {
        pb_error_set(err, PB_EUSAGE, "%s: %zu bytes, at most %zu are kept", what, len, max_bytes);
        return -1;
    }
    return 0;
}

enum pb_code cmd_pack(int argc, char **argv, struct app *app, struct pb_error *err)
{
    struct pack_cli cli = {0};
    int c;
    (void)app;
    cli.rec.parallel = 1;
    cli.wait_s = STORE_WAIT_DEFAULT_S;
    optind = 1;
    opterr = 0;
    while ((c = getopt_long(argc, argv, "h", longopts, NULL)) != -1) {
        const char *v = optarg;
        switch (c) {
        case P_CELLS:
            if (cmd_parse_int("--cells", v, 1, PB_MAX_CELLS, &cli.rec.cells, err))
                return PB_EUSAGE;
            cli.have_cells = 1;
            break;
        case P_PAR:
            if (cmd_parse_int("--parallel", v, 1, 64, &cli.rec.parallel, err))
                return PB_EUSAGE;
            break;
        case P_CHEM:
            if (!ocv_chem_by_name(v))
                return pb_error_set(err, PB_EUSAGE,
                                    "--chemistry: expected lipo, lihv, nmc or lfp, got '%s'", v);
            snprintf(cli.rec.chemistry, sizeof cli.rec.chemistry, "%s", v);
            cli.have_chem = 1;
            break;
        case P_CAP:
            if (cmd_parse_double("--capacity", v, 1, 1e7, &cli.rec.capacity_mah, err))
                return PB_EUSAGE;
            cli.have_cap = 1;
            break;
        case P_SINCE: {
            char why[128];
            if (!valid_date(v, why, sizeof why))
                return pb_error_set(err, PB_EUSAGE,
                                    "--since: expected a date like 2026-03-01, got '%s': %s", v,
                                    why);
            snprintf(cli.rec.since, sizeof cli.rec.since, "%.10s", v);
            break;
        }
        case P_NOTE:
            if (check_text("--note", v, sizeof cli.rec.note - 1, err) != 0)
                return PB_EUSAGE;
            snprintf(cli.rec.note, sizeof cli.rec.note, "%s", v);
            break;
        case P_REASON:
            if (check_text("--reason", v, sizeof cli.rec.retire_reason - 1, err) != 0)
                return PB_EUSAGE;
            cli.reason = v;
            break;
        case P_JSON:
            cli.json = 1;
            break;
        case P_DB:
            cli.db = v;
            break;
        case P_WAIT:
            if (cmd_parse_double("--wait", v, 0, 86400, &cli.wait_s, err))
                return PB_EUSAGE;
            break;
        case 'h':
            fputs(usage, stdout);
            return cmd_finish_stdout(err);
        default:
            return cmd_bad_option("pack", argc, argv, err);
        }
    }
    if (optind >= argc)
        return pb_error_set(
            err, PB_EUSAGE,
            "pack: expected add, list, show or retire (see 'packbook pack --help')");
    const char *sub = argv[optind];
    int needs_id = strcmp(sub, "list") != 0;
    if (needs_id) {
        if (optind + 1 >= argc)
            return pb_error_set(err, PB_EUSAGE, "pack %s: give the pack ID", sub);
        if (strlen(argv[optind + 1]) >= sizeof cli.rec.label || !argv[optind + 1][0])
            return pb_error_set(err, PB_EUSAGE, "pack %s: the ID must be 1 to %zu bytes", sub,
                                sizeof cli.rec.label - 1);
        if (strcmp(sub, "add") == 0 &&
            check_text("pack add: the ID", argv[optind + 1], sizeof cli.rec.label - 1, err) != 0)
            return PB_EUSAGE;
        snprintf(cli.rec.label, sizeof cli.rec.label, "%s", argv[optind + 1]);
    }
    if (optind + 1 + needs_id < argc)
        return pb_error_set(err, PB_EUSAGE, "pack %s: unexpected argument '%s'", sub,
                            argv[optind + 1 + needs_id]);
    enum pb_code (*run)(struct store *, struct pack_cli *, struct pb_error *) = NULL;
    if (strcmp(sub, "add") == 0)
        run = cmd_add;
    else if (strcmp(sub, "list") == 0)
        run = cmd_list;
    else if (strcmp(sub, "show") == 0)
        run = cmd_show;
    else if (strcmp(sub, "retire") == 0)
        run = cmd_retire;
    else
        return pb_error_set(err, PB_EUSAGE, "pack: unknown action '%s' (add, list, show, retire)",
                            sub);
    struct store *st = NULL;
    enum pb_code rc = packview_open_store_wait(cli.db,
                                               strcmp(sub, "add") == 0      ? STORE_CREATE
                                               : strcmp(sub, "retire") == 0 ? STORE_WRITE
                                                                            : STORE_READ,
                                               cli.wait_s, &st, err);
    if (rc != PB_OK)
        return rc;
    rc = run(st, &cli, err);
    store_close(st);
    if (rc != PB_OK)
        return rc;
    return cmd_finish_stdout(err);
}
