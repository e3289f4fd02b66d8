/* packbook flight ack ID --note TEXT: the operator has looked at a flight
 * that left its pack's trend. */
#include <getopt.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "cmd.h"
#include "packview.h"

static const char usage[] =
    "usage: packbook flight ack ID --note TEXT [--db PATH]\n"
    "\n"
    "ID is the flight's number ('packbook pack show PACK' lists the flights that\n"
    "left their trend with it). ack records that the pack was inspected, with\n"
    "what was found: the flag stops showing in fleet, pack show and the figures,\n"
    "and the trend the next flights are compared with starts afresh from it (its\n"
    "level is accepted). Acknowledging again replaces the note.\n"
    "  --note TEXT            what the inspection found (required)\n"
    "  --db PATH              history database (default: $PACKBOOK_DB, else\n"
    "                         $XDG_DATA_HOME/packbook/packbook.db)\n";

enum { F_NOTE = 256, F_DB };

static const struct option longopts[] = {
    {"note", required_argument, NULL, F_NOTE},
    {"db", required_argument, NULL, F_DB},
    {"help", no_argument, NULL, 'h'},
    {NULL, 0, NULL, 0},
};

static enum pb_code ack(int argc, char **argv, struct pb_error *err)
{
    const char *note = NULL, *db = NULL;
    int c;
    optind = 1;
    opterr = 0;
    while ((c = getopt_long(argc, argv, "h", longopts, NULL)) != -1) {
        switch (c) {
        case F_NOTE:
            note = optarg;
            break;
        case F_DB:
            db = optarg;
            break;
        case 'h':
            fputs(usage, stdout);
            return cmd_finish_stdout(err);
        default:
            return cmd_bad_option("flight ack", argc, argv, err);
        }
    }
    if (argc - optind != 1)
        return pb_error_set(err, PB_EUSAGE, "flight ack: give one flight ID");
    if (!note || !note[0])
        return pb_error_set(err, PB_EUSAGE,
                            "flight ack: --note TEXT is required (what the inspection found)");
    const char *id_text = argv[optind];
    char *end = NULL;
    long long id = strtoll(id_text, &end, 10);
    if (!id_text[0] || *end || id <= 0)
        return pb_error_set(err, PB_EUSAGE, "flight ack: '%s' is not a flight number", id_text);
    struct store *st = NULL;
    enum pb_code rc = packview_open_store(db, 0, &st, err);
    char label[128] = "";
    if (rc == PB_OK)
        rc = store_flight_ack(st, id, note, label, sizeof label, err);
    if (rc == PB_OK) {
        printf("flight %lld of pack '%s' acknowledged: %s\n", id, label, note);
        rc = cmd_finish_stdout(err);
    }
    store_close(st);
    return rc;
}

enum pb_code cmd_flight(int argc, char **argv, struct app *app, struct pb_error *err)
{
    (void)app;
    if (argc < 2 || strcmp(argv[1], "--help") == 0 || strcmp(argv[1], "-h") == 0) {
        fputs(usage, stdout);
        return argc < 2 ? pb_error_set(err, PB_EUSAGE, "flight: give a subcommand (ack)")
                        : cmd_finish_stdout(err);
    }
    if (strcmp(argv[1], "ack") == 0)
        return ack(argc - 1, argv + 1, err);
    return pb_error_set(err, PB_EUSAGE, "flight: unknown subcommand '%s' (ack)", argv[1]);
}
