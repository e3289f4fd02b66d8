/* packbook db: the history database itself (its schema steps). */
#include <getopt.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "cmd.h"
#include "config.h"
#include "packview.h"

/* clang-format off */
static const char usage[] =
    "usage: packbook db migrate [--db PATH|URL] [--wait S]\n"
    "\n"
    "Applies the schema steps this packbook knows and the database lacks, each in\n"
    "its own transaction, and says the version before and after; a database of a\n"
    "newer version is refused untouched. Writing commands do this themselves on an\n"
    "SQLite file; on PostgreSQL the database's owner runs it once after an upgrade\n"
    "(crews' roles need no right to change tables), and on an empty PostgreSQL\n"
    "database it creates the tables, so the owner can grant rights before anyone\n"
    "imports (see ROLES in man packbook).\n"
    "  --db PATH|URL          history database: an SQLite file, or a PostgreSQL\n"
    "                         connection string (postgresql://..., or 'host=... dbname=...')\n"
    "                         (default: $PACKBOOK_DB, else the settings file's db, else\n"
    "                         ~/.local/share/packbook/packbook.db)\n"
    "  --wait S               wait up to S seconds for another process's lock\n"
    "                         (default " "60" ")\n";
/* clang-format on */

enum { D_DB = 256, D_WAIT };

static const struct option longopts[] = {
    {"db", required_argument, NULL, D_DB},
    {"wait", required_argument, NULL, D_WAIT},
    {"help", no_argument, NULL, 'h'},
    {NULL, 0, NULL, 0},
};

enum pb_code cmd_db(int argc, char **argv, struct app *app, struct pb_error *err)
{
    const char *db = NULL;
    double wait_s = STORE_WAIT_DEFAULT_S;
    int c;
    (void)app;
    optind = 1;
    opterr = 0;
    while ((c = getopt_long(argc, argv, "h", longopts, NULL)) != -1) {
        switch (c) {
        case D_DB:
            db = optarg;
            break;
        case D_WAIT:
            if (cmd_parse_double("--wait", optarg, 0, 86400, &wait_s, err))
                return PB_EUSAGE;
            break;
        case 'h':
            fputs(usage, stdout);
            return cmd_finish_stdout(err);
        default:
            return cmd_bad_option("db", argc, argv, err);
        }
    }
    if (optind >= argc)
        return pb_error_set(err, PB_EUSAGE, "db: expected 'migrate' (see 'packbook db --help')");
    if (strcmp(argv[optind], "migrate") != 0)
        return pb_error_set(err, PB_EUSAGE, "db: unknown action '%s' (see 'packbook db --help')",
                            argv[optind]);
    if (optind + 1 < argc)
        return pb_error_set(err, PB_EUSAGE, "db migrate: unexpected argument '%s'",
                            argv[optind + 1]);
    /* a server database may be empty: migrate creates its tables; a file must exist */
    struct store *st = NULL;
    const char *env = getenv("PACKBOOK_DB");
    const char *name = db ? db : env && *env ? env : config_db();
    enum store_mode mode = store_is_server(name) ? STORE_CREATE : STORE_WRITE;
    enum pb_code rc = packview_open_store_wait(db, mode, wait_s, &st, err);
    if (rc != PB_OK)
        return rc;
    int was = store_schema_version_found(st), now = store_schema_version(st);
    if (was == now)
        printf("%s: schema version %d, up to date\n", store_shown(st), now);
    else
        printf("%s: schema version %d (was %d)\n", store_shown(st), now, was);
    store_close(st);
    return cmd_finish_stdout(err);
}
