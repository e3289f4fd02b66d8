/* packbook: command dispatch. Each subcommand lives in src/cmd/; errors
 * from any of them are printed here, once, and mapped to the exit status. */
#include <gsl/gsl_errno.h>
#include <langinfo.h>
#include <locale.h>
#include <stdio.h>
#include <string.h>
#include <unistd.h>

#include "cmd/cmd.h"
#include "cmd/config.h"
#include "core/utf8.h"
#include "report/report.h"

#ifndef PACKBOOK_VERSION
#define PACKBOOK_VERSION "0.0.0"
#endif

struct command {
    const char *name;
    enum pb_code (*run)(int argc, char **argv, struct app *app, struct pb_error *err);
    const char *summary;
};

static const struct command commands[] = {
    {"analyze", cmd_analyze, "one flight log in, the pack's facts out"},
    {"chemistry", cmd_chemistry, "the OCV tables and limits used, with their sources"},
    {"pack", cmd_pack, "register packs: add, list, show, edit, retire, unretire"},
    {"import", cmd_import, "analyse logs and store them as a pack's flights"},
    {"flight", cmd_flight,
     "stored flights: list, remove, move, ack (a flight that left its trend)"},
    {"fleet", cmd_fleet, "every pack's state, with retirement flags and reasons"},
    {"trend", cmd_trend, "a pack's resistance and capacity over weeks and cycles"},
    {"compare", cmd_compare, "packs side by side"},
    {"predict", cmd_predict, "safe flight time for the next sortie, with its uncertainty"},
    {"sync", cmd_sync, "send packs and flights to another store, or bring them from one"},
    {"db", cmd_db, "the history database: migrate (apply the schema steps)"},
    {"config", cmd_config, "the settings in force and where each comes from"},
    {"plot", cmd_plot, "figures of a flight, a pack's trend or the fleet (PNG, SVG, PDF)"},
};

static void print_usage(FILE *out)
{
    fprintf(out, "usage: packbook COMMAND [options] [ARGS]\n"
                 "       packbook --help | --version\n\ncommands:\n");
    for (size_t k = 0; k < sizeof commands / sizeof *commands; k++)
        fprintf(out, "  %-12s %s\n", commands[k].name, commands[k].summary);
    fprintf(out, "\nThe history (--db, $PACKBOOK_DB) is an SQLite file, or a PostgreSQL database\n"
                 "named by a connection string (postgresql://..., or 'host=... dbname=...').\n");
    fprintf(out, "\n'packbook COMMAND --help' shows a command's options; man packbook has the\n"
                 "rest, including exit statuses and the JSON keys.\n"
                 "Estimates only: never a substitute for the aircraft's low-voltage protection.\n");
}

int main(int argc, char **argv)
{
    struct app app = {argv[0], 0};
    struct pb_error err = {PB_OK, ""};

    /* GSL would abort on error; every GSL call's status is checked instead */
    gsl_set_error_handler_off();

    /* mΩ on a UTF-8 terminal, mOhm in pipes, files and other terminals; the
     * locale is only asked, then put back (numbers never depend on it) */
    if (isatty(STDOUT_FILENO) && setlocale(LC_CTYPE, "")) {
        report_set_utf8(strcmp(nl_langinfo(CODESET), "UTF-8") == 0);
        setlocale(LC_CTYPE, "C");
    }

    if (argc < 2) {
        print_usage(stderr);
        return PB_EXIT_USAGE;
    }
    const char *verb = argv[1];
    if (strcmp(verb, "--help") == 0 || strcmp(verb, "-h") == 0 || strcmp(verb, "help") == 0) {
        print_usage(stdout);
        return fflush(stdout) == 0 ? PB_EXIT_OK : PB_EXIT_INTERNAL;
    }
    if (strcmp(verb, "--version") == 0) {
        printf("packbook %s\n", PACKBOOK_VERSION);
        return fflush(stdout) == 0 ? PB_EXIT_OK : PB_EXIT_INTERNAL;
    }
    for (size_t k = 0; k < sizeof commands / sizeof *commands; k++) {
        if (strcmp(commands[k].name, verb) != 0)
            continue;
        /* the settings file first: a broken one is reported before anything runs */
        enum pb_code rc = config_load(&err);
        if (rc == PB_OK)
            rc = commands[k].run(argc - 1, argv + 1, &app, &err);
        if (rc != PB_OK) {
            /* messages quote file names and the user's text: escaped, so a
             * control sequence in them cannot reach the terminal */
            char shown[4 * PB_ERRMSG_MAX];
            fprintf(stderr, "packbook: %s\n",
                    err.msg[0] ? utf8_printable(shown, sizeof shown, err.msg) : pb_strerror(rc));
            return pb_exit_status(rc);
        }
        return app.some_failed ? PB_EXIT_SOME_FAILED : PB_EXIT_OK;
    }
    fprintf(stderr, "packbook: unknown command '%s' (see 'packbook --help')\n", verb);
    return PB_EXIT_USAGE;
}
