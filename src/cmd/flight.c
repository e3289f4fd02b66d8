/* packbook flight list|remove|move|ack: the stored flights, one by one, so a
 * wrong import can be undone, and a flight that left its pack's trend can
 * be acknowledged once the pack was inspected. Cycles, baselines and status are computed
 * from the flights each time they are shown, so removing or moving a flight
 * recomputes them; each change prints what it changed. */
#include <getopt.h>
#include <stddef.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

#include "../core/isotime.h"
#include "../core/utf8.h"
#include "cmd.h"
#include "opt.h"
#include "packview.h"

static const char usage[] =
    "usage: packbook flight list [PACK] [--json|--csv] [--db PATH]\n"
    "       packbook flight remove ID [--db PATH]\n"
    "       packbook flight move ID --to PACK [--db PATH]\n"
    "       packbook flight ack ID --note TEXT [--db PATH]\n"
    "\n"
    "list: every stored flight (of PACK, or of all packs) oldest first, with its\n"
    "  id, date (and where the date came from: log, option or mtime), duration,\n"
    "  charge, R0, capacity estimate, SoC at both ends, warnings and file name.\n"
    "remove: deletes flight ID; the pack's cycles, baseline and status follow.\n"
    "move: gives flight ID to PACK (same cells and chemistry as it was analysed\n"
    "  with; otherwise remove it and import the log into the right pack).\n"
    "ack: records that the pack of flight ID, which left its trend (import,\n"
    "  fleet and pack show name it), was inspected, and what was found: the flag\n"
    "  stops showing and the trend the next flights are compared with starts\n"
    "  afresh from it (its level is accepted). Again: replaces the note.\n"
    "Each change prints the packs' flights, cycles, baseline R0 and status\n"
    "before and after.\n"
    "\n";

struct flight_cli {
    int fmt; /* enum fleet_format */
    const char *to, *db;
    const char *note; /* ack */
    const char *arg;  /* PACK for list, ID otherwise; NULL when absent */
};

#define FLIGHT_AT(field) offsetof(struct flight_cli, field)

/* clang-format off */
static const struct opt flight_table[] = {
    {.name = "note", .kind = OPT_STRING, .off = FLIGHT_AT(note), .meta = "TEXT",
     .help = "what the inspection found (ack, required)"},
    {.name = "to", .kind = OPT_STRING, .off = FLIGHT_AT(to), .meta = "PACK",
     .help = "the pack that really flew (move)"},
    {.name = "json", .kind = OPT_FLAG, .off = FLIGHT_AT(fmt), .set = FLEET_JSON,
     .help = "machine-readable list: JSON"},
    {.name = "csv", .kind = OPT_FLAG, .off = FLIGHT_AT(fmt), .set = FLEET_CSV,
     .help = "or CSV (cells starting = + - @ are prefixed with ' so\n"
     "spreadsheets do not run them)"},
    {.name = "db", .kind = OPT_PATH, .off = FLIGHT_AT(db), .meta = "PATH",
     .help = "history database (default: $PACKBOOK_DB, else the\n"
     "settings file's db, else $XDG_DATA_HOME/packbook/packbook.db;\n"
     "see 'packbook config')"},
    {0},
};
/* clang-format on */

static enum pb_code parse_id(const char *verb, const char *arg, int64_t *id, struct pb_error *err)
{
    int v = 0;
    if (!arg)
        return pb_error_set(err, PB_EUSAGE,
                            "flight %s: give the flight ID (see 'packbook flight "
                            "list')",
                            verb);
    if (cmd_parse_int("flight ID", arg, 1, 2147483647, &v, err))
        return PB_EUSAGE;
    *id = v;
    return PB_OK;
}

/* Flights of one pack, or of every pack (by label, then date), with labels. */
static enum pb_code do_list(struct store *st, const struct flight_cli *cli, struct pb_error *err)
{
    struct pack_rec *packs = NULL;
    size_t np = 0;
    enum pb_code rc;
    if (cli->arg) {
        packs = malloc(sizeof *packs);
        if (!packs)
            return pb_error_set(err, PB_ENOMEM, "out of memory");
        np = 1;
        rc = store_pack_get(st, cli->arg, &packs[0], err);
    } else {
        rc = store_pack_list(st, &packs, &np, err);
    }
    struct flight_rec *all = NULL;
    const char **labels = NULL;
    size_t n = 0;
    for (size_t k = 0; rc == PB_OK && k < np; k++) {
        struct flight_rec *f = NULL;
        size_t nf = 0;
        rc = store_flights_of(st, packs[k].id, &f, &nf, err);
        if (rc != PB_OK)
            break;
        struct flight_rec *na = realloc(all, (n + nf + 1) * sizeof *na);
        const char **nl = na ? realloc(labels, (n + nf + 1) * sizeof *nl) : NULL;
        if (na)
            all = na;
        if (nl)
            labels = nl;
        if (!na || !nl) {
            store_flights_free(f);
            rc = pb_error_set(err, PB_ENOMEM, "out of memory");
            break;
        }
        for (size_t j = 0; j < nf; j++) {
            all[n] = f[j];
            labels[n++] = packs[k].label;
        }
        store_flights_free(f);
    }
    if (rc == PB_OK && report_flight_list(stdout, all, labels, n, cli->fmt) != 0)
        rc = pb_error_set(err, PB_EOUTPUT, "cannot write the output");
    free(all);
    free(labels);
    store_packs_free(packs);
    return rc;
}

static void describe(const struct flight_rec *f, const char *label, char *buf, size_t cap)
{
    char when[40];
    isotime_format(f->flown_epoch_s, when, sizeof when);
    snprintf(buf, cap, "flight %lld of %s (%.16s, %s, %.0f mAh)", (long long)f->id, label, when,
             f->source, f->charge_used_mah);
}

static enum pb_code do_remove(struct store *st, const struct flight_cli *cli, struct pb_error *err)
{
    int64_t id = 0;
    enum pb_code rc = parse_id("remove", cli->arg, &id, err);
    struct flight_rec f;
    struct pack_rec p;
    struct pack_summary before, after;
    if (rc == PB_OK)
        rc = store_flight_get(st, id, &f, err);
    if (rc == PB_OK)
        rc = store_pack_by_id(st, f.pack_id, &p, err);
    if (rc == PB_OK)
        rc = packview_summary(st, &p, &before, err);
    if (rc == PB_OK)
        rc = store_flight_remove(st, id, err);
    if (rc != PB_OK)
        return rc;
    char what[512];
    describe(&f, p.label, what, sizeof what);
    printf("removed %s\n", what);
    rc = packview_keep(st, &p, &after, NULL, err);
    if (rc == PB_OK)
        packview_print_change(stdout, &before, &after);
    return rc;
}

static enum pb_code do_move(struct store *st, const struct flight_cli *cli, struct pb_error *err)
{
    int64_t id = 0;
    enum pb_code rc = parse_id("move", cli->arg, &id, err);
    if (rc != PB_OK)
        return rc;
    if (!cli->to)
        return pb_error_set(err, PB_EUSAGE, "flight move: say which pack flew with --to PACK");
    struct flight_rec f;
    struct pack_rec from, to;
    struct pack_summary b_from, b_to, a_from, a_to;
    int cells = 0;
    char chem[16];
    if ((rc = store_flight_get(st, id, &f, err)) != PB_OK ||
        (rc = store_pack_by_id(st, f.pack_id, &from, err)) != PB_OK ||
        (rc = store_pack_get(st, cli->to, &to, err)) != PB_OK ||
        (rc = store_flight_analysed_as(st, id, &cells, chem, sizeof chem, err)) != PB_OK)
        return rc;
    if (from.id == to.id)
        return pb_error_set(err, PB_EUSAGE, "flight %lld belongs to pack '%s' already",
                            (long long)id, to.label);
    if (to.retired_at[0])
        return pb_error_set(err, PB_EUSAGE,
                            "pack '%s' was retired on %s: not moving flights into it", to.label,
                            to.retired_at);
    /* the stored figures (per-cell voltages, SoC, time under the cut-off)
     * were computed with the cells and chemistry of the pack it came in as */
    if ((cells && cells != to.cells) || (chem[0] && strcasecmp(chem, to.chemistry) != 0))
        return pb_error_set(err, PB_EUSAGE,
                            "flight %lld was analysed as %dS %s and pack '%s' is %dS %s: its "
                            "figures would not hold; remove it ('packbook flight remove %lld') "
                            "and import the log with --pack %s",
                            (long long)id, cells ? cells : from.cells,
                            chem[0] ? chem : from.chemistry, to.label, to.cells, to.chemistry,
                            (long long)id, to.label);
    if ((rc = packview_summary(st, &from, &b_from, err)) != PB_OK ||
        (rc = packview_summary(st, &to, &b_to, err)) != PB_OK ||
        (rc = store_flight_move(st, id, to.id, err)) != PB_OK)
        return rc;
    char what[512];
    describe(&f, from.label, what, sizeof what);
    printf("moved %s to %s\n", what, to.label);
    if ((rc = packview_keep(st, &from, &a_from, NULL, err)) != PB_OK ||
        (rc = packview_keep(st, &to, &a_to, NULL, err)) != PB_OK)
        return rc;
    packview_print_change(stdout, &b_from, &a_from);
    packview_print_change(stdout, &b_to, &a_to);
    return PB_OK;
}

static enum pb_code do_ack(struct store *st, const struct flight_cli *cli, struct pb_error *err)
{
    int64_t id = 0;
    enum pb_code rc = parse_id("ack", cli->arg, &id, err);
    if (rc != PB_OK)
        return rc;
    if (!cli->note || !cli->note[0])
        return pb_error_set(err, PB_EUSAGE,
                            "flight ack: --note TEXT is required (what the inspection found)");
    char label[128] = "";
    rc = store_flight_ack(st, id, cli->note, label, sizeof label, err);
    if (rc != PB_OK)
        return rc;
    printf("flight %lld of pack '%s' acknowledged: %s\n", (long long)id,
           utf8_printable((char[4 * 128 + 4]){0}, 4 * 128 + 4, label),
           utf8_printable((char[4 * 256 + 4]){0}, 4 * 256 + 4, cli->note));
    /* an acknowledged departure is no longer the pack's finding */
    struct pack_rec p;
    rc = store_pack_get(st, label, &p, err);
    return rc == PB_OK ? packview_keep(st, &p, NULL, NULL, err) : rc;
}

enum pb_code cmd_flight(int argc, char **argv, struct app *app, struct pb_error *err)
{
    struct flight_cli cli = {FLEET_TEXT, NULL, NULL, NULL, NULL};
    (void)app;
    int done = 0;
    struct opt_cmd cmd = {"flight", usage, NULL, {{NULL, flight_table, &cli, NULL}}, 1, NULL, NULL};
    enum pb_code parsed = opt_parse(&cmd, argc, argv, &done, err);
    if (parsed != PB_OK || done)
        return parsed;
    if (optind >= argc)
        return pb_error_set(err, PB_EUSAGE,
                            "flight: expected list, remove, move or ack (see 'packbook flight "
                            "--help')");
    const char *sub = argv[optind];
    enum pb_code (*run)(struct store *, const struct flight_cli *, struct pb_error *) = NULL;
    if (strcmp(sub, "list") == 0)
        run = do_list;
    else if (strcmp(sub, "remove") == 0)
        run = do_remove;
    else if (strcmp(sub, "move") == 0)
        run = do_move;
    else if (strcmp(sub, "ack") == 0)
        run = do_ack;
    else
        return pb_error_set(err, PB_EUSAGE, "flight: unknown action '%s' (list, remove, move, ack)",
                            sub);
    if (optind + 1 < argc)
        cli.arg = argv[optind + 1];
    if (optind + 2 < argc)
        return pb_error_set(err, PB_EUSAGE, "flight %s: unexpected argument '%s'", sub,
                            argv[optind + 2]);
    if (run != do_list && cli.fmt != FLEET_TEXT)
        return pb_error_set(err, PB_EUSAGE, "flight %s: --json and --csv are for 'flight list'",
                            sub);
    if (run != do_move && cli.to)
        return pb_error_set(err, PB_EUSAGE, "flight %s: --to is for 'flight move'", sub);
    if (run != do_ack && cli.note)
        return pb_error_set(err, PB_EUSAGE, "flight %s: --note is for 'flight ack'", sub);
    struct store *st = NULL;
    enum pb_code rc =
        packview_open_store(cli.db, run == do_list ? STORE_READ : STORE_WRITE, &st, err);
    if (rc != PB_OK)
        return rc;
    rc = run(st, &cli, err);
    store_close(st);
    if (rc != PB_OK)
        return rc;
    return cmd_finish_stdout(err);
}
