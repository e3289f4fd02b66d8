/* packbook db: the history database itself (its schema steps). */
#include <getopt.h>
#include <stddef.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "cmd.h"
#include "config.h"
#include "opt.h"
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
    "imports (see ROLES in man packbook). Then every pack whose kept assessment\n"
    "(what 'packbook fleet' shows of it) is missing or stale -- after an upgrade,\n"
    "or changes by an older packbook -- is assessed from its flights and kept.\n"
    "\n";
/* clang-format on */

struct db_cli {
    const char *db;
    double wait_s;
};

/* clang-format off */
static const struct opt db_table[] = {
    {.name = "db", .kind = OPT_PATH, .off = offsetof(struct db_cli, db), .meta = "PATH|URL",
     .help = "history database: an SQLite file, or a PostgreSQL\n"
     "connection string (postgresql://..., or 'host=... dbname=...')\n"
     "(default: $PACKBOOK_DB, else the settings file's db, else\n"
     "$XDG_DATA_HOME/packbook/packbook.db; see 'packbook config')"},
    {.name = "wait", .kind = OPT_DOUBLE, .off = offsetof(struct db_cli, wait_s), .lo = 0,
     .hi = 86400, .def = CMD_STR(STORE_WAIT_DEFAULT_S), .meta = "S",
     .help = "wait up to S seconds for another process's lock"},
    {0},
};
/* clang-format on */

enum pb_code cmd_db(int argc, char **argv, struct app *app, struct pb_error *err)
{
    struct db_cli cli = {0};
    int done = 0;
    (void)app;
    opt_defaults(db_table, &cli);
    struct opt_cmd cmd = {"db", usage, NULL, {{NULL, db_table, &cli, NULL}}, 1, NULL, NULL};
    enum pb_code parsed = opt_parse(&cmd, argc, argv, &done, err);
    if (parsed != PB_OK || done)
        return parsed;
    const char *db = cli.db;
    double wait_s = cli.wait_s;
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
    size_t assessed = 0, current = 0;
    struct pb_error e = {PB_OK, ""};
    rc = packview_keep_stale(st, &assessed, &current, &e);
    if (rc == PB_OK)
        printf("%s: %zu pack%s assessed and kept for the fleet view, %zu current already\n",
               store_shown(st), assessed, assessed == 1 ? "" : "s", current);
    else if (rc == PB_ESTORE) {
        /* the schema is done; the kept assessments only make fleet faster */
        fprintf(stderr,
                "packbook: note: %s (the packs' kept assessments were not brought up to "
                "date: 'packbook fleet' assesses such packs from their flights)\n",
                e.msg);
        rc = PB_OK;
    } else
        *err = e;
    store_close(st);
    return rc == PB_OK ? cmd_finish_stdout(err) : rc;
}
