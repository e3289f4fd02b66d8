/* packbook pack add|list|show|edit|retire|unretire: the pack register. */
#include <getopt.h>
#include <math.h>
#include <stddef.h>
#include <stdio.h>
#include <string.h>

#include "../core/isotime.h"
#include "../core/ocv.h"
#include "../core/utf8.h"
#include "cmd.h"
#include "config.h"
#include "packopts.h"
#include "packview.h"

static const char usage[] =
    "usage: packbook pack add ID --cells N --chemistry C --capacity MAH\n"
    "                         [--parallel P] [--since DATE] [--note TEXT] [READING]\n"
    "       packbook pack list [--json|--csv]\n"
    "       packbook pack show ID [--json|--csv]\n"
    "       packbook pack edit ID [--name NEW-ID] [--cells N] [--chemistry C]\n"
    "                         [--capacity MAH] [--parallel P] [--since DATE] [--note TEXT]\n"
    "                         [READING] [--clear-settings]\n"
    "       packbook pack retire ID --reason TEXT\n"
    "       packbook pack unretire ID\n"
    "       packbook pack pair [ID ID] | pack unpair ID   (see packbook pack pair --help)\n"
    "\n"
    "ID is the label written on the pack (free text); the chemistry is lipo, lihv,\n"
    "nmc or lfp, in any case. Retired packs are kept;\n"
    "unretire returns one to service. edit changes what is given and prints\n"
    "each change with the pack's cycles and status before and after; --cells\n"
    "and --chemistry change only while no stored flight was analysed otherwise\n"
    "(remove those flights first, then import their logs again). --since ''\n"
    "and --note '' clear the field. show lists the flights with their numbers and\n"
    "those that left their trend (acknowledge: 'packbook flight ack N --note TEXT').\n"
    "\n"
    "READING: the options of 'packbook analyze' that say how to read and analyse\n"
    "this pack's logs (--cut-off, --map, --columns, --current-sign, --adc-scale or\n"
    "the sense chain, --gap, --rest-current, ...). The pack remembers them and\n"
    "every command given --pack ID uses them; options given there override them\n"
    "(any ADC or sense-chain option replaces the whole remembered chain). edit\n"
    "adds to or replaces the remembered ones; --clear-settings forgets them first.\n"
    "\n";

struct pack_cli {
    struct pack_rec rec;
    const char *reason, *db, *name, *chem, *since, *note;
    int json, have_cells, have_chem, have_cap, have_par, have_since, have_note, clear;
    struct packopts_seen seen; /* reading options to remember */
    double wait_s;
    struct log_cli scratch; /* where the reading options' values are checked */
};

#define PACK_AT(field) offsetof(struct pack_cli, field)

/* clang-format off */
static const struct opt pack_table[] = {
    {.name = "cells", .kind = OPT_INT, .off = PACK_AT(rec.cells), .lo = 1, .hi = PB_MAX_CELLS,
     .meta = "N", .help = "series cell count"},
    {.name = "parallel", .kind = OPT_INT, .off = PACK_AT(rec.parallel), .lo = 1, .hi = 64,
     .def = "1", .meta = "P", .help = "cells in parallel"},
    {.name = "chemistry", .kind = OPT_STRING, .off = PACK_AT(chem), .meta = "C",
     .help = "lipo, lihv, nmc or lfp, in any case"},
    {.name = "capacity", .kind = OPT_DOUBLE, .off = PACK_AT(rec.capacity_mah), .lo = 1,
     .hi = 1e7, .meta = "MAH", .help = "rated capacity"},
    {.name = "since", .kind = OPT_STRING, .off = PACK_AT(since), .meta = "DATE",
     .help = "in service since (a date like 2026-03-01; '' clears it)"},
    {.name = "note", .kind = OPT_STRING, .off = PACK_AT(note), .meta = "TEXT",
     .help = "a note kept with the pack ('' clears it)"},
    {.name = "reason", .kind = OPT_STRING, .off = PACK_AT(reason), .meta = "TEXT",
     .help = "retire: why the pack is retired"},
    {.name = "name", .kind = OPT_STRING, .off = PACK_AT(name), .meta = "NEW-ID",
     .help = "edit: a new ID (label) for the pack"},
    {.name = "clear-settings", .kind = OPT_FLAG, .off = PACK_AT(clear), .set = 1,
     .help = "edit: forget the remembered reading settings first"},
    {.name = "json", .kind = OPT_FLAG, .off = PACK_AT(json), .set = 1,
     .help = "list, show: JSON on standard output"},
    {.name = "csv", .kind = OPT_FLAG, .off = PACK_AT(json), .set = 2,
     .help = "list, show: CSV on standard output (show: the flights' table)"},
    {.name = "db", .kind = OPT_PATH, .off = PACK_AT(db), .meta = "PATH",
     .help = "history database (default: $PACKBOOK_DB, else the\n"
     "settings file's db, else $XDG_DATA_HOME/packbook/packbook.db;\n"
     "see 'packbook config')"},
    {.name = "wait", .kind = OPT_DOUBLE, .off = PACK_AT(wait_s), .lo = 0, .hi = 86400,
     .def = CMD_STR(STORE_WAIT_DEFAULT_S), .meta = "S",
     .help = "wait up to S seconds for another process's lock on the database"},
    {0},
};
/* clang-format on */

static int valid_date(const char *s, char *why, size_t cap);
static int check_text(const char *what, const char *v, size_t max_bytes, struct pb_error *err);

static int pack_hook(void *ctx, const struct opt *o, const char *v, struct pb_error *err)
{
    struct pack_cli *cli = ctx;
    if (logopts_is_reading(o))
        return packopts_note(&cli->seen, o->id, v, err) < 0 ? -1 : 0;
    size_t k = (size_t)(o - pack_table);
    switch (k) {
    case 0:
        cli->have_cells = 1;
        break;
    case 1:
        cli->have_par = 1;
        break;
    case 2:
        if (!ocv_chem_by_name(v))
            return pb_error_set(err, PB_EUSAGE,
                                "--chemistry: expected lipo, lihv, nmc or lfp, got '%s'", v);
        /* the canonical spelling, whatever the case given */
        snprintf(cli->rec.chemistry, sizeof cli->rec.chemistry, "%s", ocv_chem_by_name(v)->name);
        cli->have_chem = 1;
        break;
    case 3:
        cli->have_cap = 1;
        break;
    case 4: {
        cli->have_since = 1;
        if (!*v) {
            cli->rec.since[0] = '\0';
            break;
        }
        char why[128];
        if (!valid_date(v, why, sizeof why))
            return pb_error_set(err, PB_EUSAGE,
                                "--since: expected a date like 2026-03-01, got '%s': %s", v, why);
        snprintf(cli->rec.since, sizeof cli->rec.since, "%.10s", v);
        break;
    }
    case 5:
        if (check_text("--note", v, sizeof cli->rec.note - 1, err) != 0)
            return -1;
        snprintf(cli->rec.note, sizeof cli->rec.note, "%s", v);
        cli->have_note = 1;
        break;
    case 6:
        if (check_text("--reason", v, sizeof cli->rec.retire_reason - 1, err) != 0)
            return -1;
        break;
    case 7:
        if (!*v || strlen(v) >= sizeof cli->rec.label)
            return pb_error_set(err, PB_EUSAGE, "--name: the ID must be 1 to %zu bytes",
                                sizeof cli->rec.label - 1);
        if (check_text("--name", v, sizeof cli->rec.label - 1, err) != 0)
            return -1;
        break;
    }
    return 0;
}

static enum pb_code cmd_add(struct store *st, struct pack_cli *cli, struct pb_error *err)
{
    if (!cli->have_cells || !cli->have_chem || !cli->have_cap)
        return pb_error_set(err, PB_EUSAGE,
                            "pack add: --cells, --chemistry and --capacity are needed");
    enum pb_code rc =
        packopts_merge("", &cli->seen, 0, cli->rec.settings, sizeof cli->rec.settings, err);
    if (rc == PB_OK)
        rc = store_pack_add(st, &cli->rec, err);
    if (rc != PB_OK)
        return rc;
    char lb[4 * sizeof cli->rec.label];
    printf("added pack '%s': %dS%dP %s, %.0f mAh\n", utf8_printable(lb, sizeof lb, cli->rec.label),
           cli->rec.cells, cli->rec.parallel, cli->rec.chemistry, cli->rec.capacity_mah);
    if (cli->rec.settings[0]) {
        char d[1200];
        packopts_describe(cli->rec.settings, d, sizeof d);
        printf("  reading settings: %s\n", d);
    }
    return PB_OK;
}

static enum fleet_format format_of(const struct pack_cli *cli)
{
    return cli->json == 2 ? FLEET_CSV : cli->json ? FLEET_JSON : FLEET_TEXT;
}

static enum pb_code cmd_list(struct store *st, struct pack_cli *cli, struct pb_error *err)
{
    struct pack_rec *p = NULL;
    size_t n = 0;
    enum pb_code rc = store_pack_list(st, &p, &n, err);
    if (rc != PB_OK)
        return rc;
    if (report_pack_list(stdout, p, n, format_of(cli)) != 0)
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
    config_rules(&rules);
    struct pack_view v;
    rc = packview_load(st, &p, &rules, TREND_WEEK, 0, 1000.0, &v, err);
    if (rc != PB_OK)
        return rc;
    rc = packview_pairs(st, &v, 1, err);
    if (rc == PB_OK && report_pack_show(stdout, &v, format_of(cli)) != 0)
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

static enum pb_code cmd_unretire(struct store *st, struct pack_cli *cli, struct pb_error *err)
{
    struct pack_rec p;
    enum pb_code rc = store_pack_get(st, cli->rec.label, &p, err);
    if (rc == PB_OK)
        rc = store_pack_unretire(st, cli->rec.label, err);
    if (rc == PB_OK)
        printf("pack '%s' is in service again (it was retired on %s: %s)\n", p.label, p.retired_at,
               p.retire_reason);
    return rc;
}

static void say_change(const char *what, const char *before, const char *after)
{
    if (strcmp(before, after) != 0)
        printf("  %s: %s -> %s\n", what, before[0] ? before : "(none)",
               after[0] ? after : "(none)");
}

static enum pb_code cmd_edit(struct store *st, struct pack_cli *cli, struct pb_error *err)
{
    struct pack_rec old, p;
    enum pb_code rc = store_pack_get(st, cli->rec.label, &old, err);
    if (rc != PB_OK)
        return rc;
    p = old;
    if (cli->name)
        snprintf(p.label, sizeof p.label, "%s", cli->name);
    if (cli->have_cells)
        p.cells = cli->rec.cells;
    if (cli->have_par)
        p.parallel = cli->rec.parallel;
    if (cli->have_chem)
        snprintf(p.chemistry, sizeof p.chemistry, "%s", cli->rec.chemistry);
    if (cli->have_cap)
        p.capacity_mah = cli->rec.capacity_mah;
    if (cli->have_since)
        snprintf(p.since, sizeof p.since, "%s", cli->rec.since);
    if (cli->have_note)
        snprintf(p.note, sizeof p.note, "%s", cli->rec.note);
    rc = packopts_merge(old.settings, &cli->seen, cli->clear, p.settings, sizeof p.settings, err);
    if (rc != PB_OK)
        return rc;
    if (p.cells != old.cells || strcmp(p.chemistry, old.chemistry) != 0) {
        size_t n = 0;
        rc = store_flights_analysed_otherwise(st, old.id, p.cells, p.chemistry, &n, err);
        if (rc != PB_OK)
            return rc;
        if (n > 0)
            return pb_error_set(err, PB_EUSAGE,
                                "pack edit: %zu flight%s of '%s' %s analysed as %dS %s, which the "
                                "change to %dS %s contradicts: remove %s ('packbook flight list "
                                "%s'), edit, then import the logs again",
                                n, n == 1 ? "" : "s", old.label, n == 1 ? "was" : "were", old.cells,
                                old.chemistry, p.cells, p.chemistry, n == 1 ? "it" : "them",
                                old.label);
    }
    struct pack_summary before, after;
    rc = packview_summary(st, &old, &before, err);
    if (rc == PB_OK)
        rc = store_pack_update(st, &p, err);
    if (rc != PB_OK)
        return rc;
    char a[64], b[64];
    printf("edited pack '%s'%s\n", p.label,
           memcmp(&old, &p, sizeof p) == 0 ? ": nothing changed" : "");
    say_change("id", old.label, p.label);
    snprintf(a, sizeof a, "%d", old.cells);
    snprintf(b, sizeof b, "%d", p.cells);
    say_change("series cells", a, b);
    snprintf(a, sizeof a, "%d", old.parallel);
    snprintf(b, sizeof b, "%d", p.parallel);
    say_change("parallel", a, b);
    say_change("chemistry", old.chemistry, p.chemistry);
    snprintf(a, sizeof a, "%.0f mAh", old.capacity_mah);
    snprintf(b, sizeof b, "%.0f mAh", p.capacity_mah);
    say_change("rated capacity", a, b);
    say_change("in service since", old.since, p.since);
    say_change("note", old.note, p.note);
    char ds[1200], dn[1200];
    packopts_describe(old.settings, ds, sizeof ds);
    packopts_describe(p.settings, dn, sizeof dn);
    say_change("reading settings", ds, dn);
    rc = packview_keep(st, &p, &after, NULL, err);
    if (rc == PB_OK && (before.cycles != after.cycles || strcmp(before.status, after.status) != 0 ||
                        strcmp(before.label, after.label) != 0))
        packview_print_change(stdout, &before, &after);
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
    (void)app;
    /* pair and unpair have their own options (pair.c) */
    if (argc >= 2 && (strcmp(argv[1], "pair") == 0 || strcmp(argv[1], "unpair") == 0))
        return cmd_pack_pair(argc - 1, argv + 1, err);
    opt_defaults(pack_table, &cli);
    logopts_init(&cli.scratch);
    int done = 0;
    struct opt_cmd cmd = {
        "pack",
        usage,
        NULL,
        {{NULL, pack_table, &cli, NULL},
         {"reading settings to remember (READING):", logopts_table, &cli.scratch, logopts_after}},
        2,
        pack_hook,
        &cli};
    enum pb_code parsed = opt_parse(&cmd, argc, argv, &done, err);
    if (parsed != PB_OK || done)
        return parsed;
    if (optind >= argc)
        return pb_error_set(err, PB_EUSAGE,
                            "pack: expected add, list, show, edit, retire or unretire (see "
                            "'packbook pack --help')");
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
    else if (strcmp(sub, "edit") == 0)
        run = cmd_edit;
    else if (strcmp(sub, "unretire") == 0)
        run = cmd_unretire;
    else
        return pb_error_set(err, PB_EUSAGE,
                            "pack: unknown action '%s' (add, list, show, edit, retire, unretire)",
                            sub);
    if (cli.name && run != cmd_edit)
        return pb_error_set(err, PB_EUSAGE, "pack %s: --name is for 'pack edit'", sub);
    if ((cli.seen.n || cli.clear) && run != cmd_edit && run != cmd_add)
        return pb_error_set(err, PB_EUSAGE,
                            "pack %s: reading options are remembered by 'pack add' and 'pack edit'",
                            sub);
    struct store *st = NULL;
    enum pb_code rc = packview_open_store_wait(
        cli.db,
        run == cmd_add                                                ? STORE_CREATE
        : run == cmd_retire || run == cmd_edit || run == cmd_unretire ? STORE_WRITE
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
