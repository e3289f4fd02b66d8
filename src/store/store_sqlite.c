/* store_sqlite: the history store in one SQLite file (WAL, foreign keys,
 * prepared statements, one transaction per flight). */
#define _GNU_SOURCE
#include <errno.h>
#include <math.h>
#include <sqlite3.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>

#include "../core/isotime.h"
#include "../core/utf8.h"
#include "backend.h"
#include "store_sql.h"

#define WAIT_NOTICE_AFTER_S 3.0 /* a wait this long is said (on_wait), once */

struct store_impl {
    sqlite3 *db;
    char path[1024];
    /* the one bounded wait for another process's lock (store_open_wait) */
    double wait_s;
    double busy_since_s; /* monotonic time the current operation began waiting, 0: not */
    int announced;
    void (*on_wait)(void *ctx, double wait_s);
    void *wait_ctx;
    int saved_code; /* error of a failed transaction step, kept past its ROLLBACK */
    int saved_errno;
    char saved_msg[256];
    int found_version; /* the schema version the file had when opened */
};

/* Schema steps: migrations[k] takes the schema from version k to k + 1.
 * Never edit a released step; add one. The man page documents the result. */
static const char *const migrations[] = {
    /* 0 -> 1: packs and flights */
    "CREATE TABLE packs ("
    "  id INTEGER PRIMARY KEY,"
    "  label TEXT NOT NULL UNIQUE,"
    "  cells INTEGER NOT NULL CHECK (cells BETWEEN 1 AND 24),"
    "  parallel INTEGER NOT NULL DEFAULT 1 CHECK (parallel >= 1),"
    "  chemistry TEXT NOT NULL,"
    "  capacity_mah REAL NOT NULL CHECK (capacity_mah > 0),"
    "  since TEXT,"
    "  note TEXT,"
    "  created_at TEXT NOT NULL,"
    "  retired_at TEXT,"
    "  retire_reason TEXT);"
    "CREATE TABLE flights ("
    "  id INTEGER PRIMARY KEY,"
    "  pack_id INTEGER NOT NULL REFERENCES packs(id),"
    "  content_hash TEXT NOT NULL UNIQUE,"
    "  source TEXT NOT NULL,"
    "  flown_at TEXT NOT NULL,"
    "  flown_epoch_s REAL NOT NULL,"
    "  date_source TEXT NOT NULL,"
    "  imported_at TEXT NOT NULL,"
    "  duration_s REAL, charge_used_mah REAL, energy_used_wh REAL,"
    "  current_max_a REAL, current_mean_a REAL, power_mean_w REAL,"
    "  voltage_min_v REAL, cell_voltage_min_v REAL, time_below_floor_s REAL,"
    "  r0_mohm REAL, r0_ci95_mohm REAL, r1_mohm REAL, tau_s REAL,"
    "  soc_start_pct REAL, soc_end_pct REAL,"
    "  capacity_mah REAL, capacity_ci95_mah REAL,"
    "  cell_spread_rest_mv REAL, cell_spread_load_mv REAL, weakest_cell INTEGER,"
    "  temperature_max_c REAL, warnings INTEGER NOT NULL DEFAULT 0,"
    "  report_json TEXT NOT NULL);",
    /* 1 -> 2: per-cell figures, and the per-pack time index */
    "CREATE TABLE flight_cells ("
    "  flight_id INTEGER NOT NULL REFERENCES flights(id) ON DELETE CASCADE,"
    "  cell INTEGER NOT NULL,"
    "  r0_mohm REAL, voltage_min_v REAL, voltage_rest_v REAL,"
    "  PRIMARY KEY (flight_id, cell));"
    "CREATE INDEX flights_by_pack_time ON flights(pack_id, flown_epoch_s);",
    /* 2 -> 3: mean power while loaded, the load for predictions */
    "ALTER TABLE flights ADD COLUMN power_cruise_w REAL;",
    /* 3 -> 4: a hash of the parsed samples, so a re-exported log is known */
    "ALTER TABLE flights ADD COLUMN samples_hash TEXT;"
    "CREATE INDEX flights_by_samples ON flights(samples_hash);",
    /* 4 -> 5: a pack's remembered reading options (cut-off, sense chain, map) */
    "ALTER TABLE packs ADD COLUMN read_settings TEXT;",
    /* 5 -> 6: the operator's acknowledgement of a flight that left its trend */
    "CREATE TABLE flight_acks ("
    "  flight_id INTEGER PRIMARY KEY REFERENCES flights(id) ON DELETE CASCADE,"
    "  note TEXT NOT NULL,"
    "  acked_at TEXT NOT NULL);",
    /* 6 -> 7: packs registered to fly together (each pack in one pair at
     * most: store_pair_add checks both columns; pack_a is the rowid, so the
     * table needs no index of its own and a nearly full disk no extra page) */
    "CREATE TABLE pack_pairs ("
    "  pack_a INTEGER PRIMARY KEY REFERENCES packs(id),"
    "  pack_b INTEGER NOT NULL REFERENCES packs(id),"
    "  created_at TEXT NOT NULL,"
    "  CHECK (pack_a < pack_b));",
    /* 7 -> 8: the report JSON (about 2.5 KB) out of the flights rows, which
     * the history views read by the thousand, into a table of its own */
    "CREATE TABLE flight_reports ("
    "  flight_id INTEGER PRIMARY KEY REFERENCES flights(id) ON DELETE CASCADE,"
    "  report_json TEXT NOT NULL);"
    "INSERT INTO flight_reports (flight_id, report_json) SELECT id, report_json FROM flights;"
    "ALTER TABLE flights DROP COLUMN report_json;",
    /* 8 -> 9: flights by time alone, for import's same-start check across packs
     * (a range on flown_epoch_s; without it every import scanned all flights) */
    "CREATE INDEX flights_by_time ON flights(flown_epoch_s);",
    /* 9 -> 10: each pack's assessment kept for the fleet view (which then
     * reads no flight), made stale by a generation the database itself
     * bumps on every change to the pack's flights or acknowledgements */
    "ALTER TABLE packs ADD COLUMN history_gen INTEGER NOT NULL DEFAULT 0;"
    "CREATE TABLE pack_assessments ("
    "  pack_id INTEGER PRIMARY KEY REFERENCES packs(id) ON DELETE CASCADE,"
    "  history_gen INTEGER NOT NULL,"
    "  inputs_key TEXT NOT NULL,"
    "  assessment TEXT NOT NULL,"
    "  written_at TEXT NOT NULL);"
    "CREATE TRIGGER flights_history_ins AFTER INSERT ON flights BEGIN"
    "  UPDATE packs SET history_gen = history_gen + 1 WHERE id = NEW.pack_id; END;"
    "CREATE TRIGGER flights_history_del AFTER DELETE ON flights BEGIN"
    "  UPDATE packs SET history_gen = history_gen + 1 WHERE id = OLD.pack_id; END;"
    "CREATE TRIGGER flights_history_upd AFTER UPDATE ON flights BEGIN"
    "  UPDATE packs SET history_gen = history_gen + 1 WHERE id IN (OLD.pack_id, NEW.pack_id); END;"
    "CREATE TRIGGER acks_history_ins AFTER INSERT ON flight_acks BEGIN"
    "  UPDATE packs SET history_gen = history_gen + 1"
    "  WHERE id = (SELECT pack_id FROM flights WHERE id = NEW.flight_id); END;"
    "CREATE TRIGGER acks_history_del AFTER DELETE ON flight_acks BEGIN"
    "  UPDATE packs SET history_gen = history_gen + 1"
    "  WHERE id = (SELECT pack_id FROM flights WHERE id = OLD.flight_id); END;"
    "CREATE TRIGGER acks_history_upd AFTER UPDATE ON flight_acks BEGIN"
    "  UPDATE packs SET history_gen = history_gen + 1 WHERE id IN"
    "  (SELECT pack_id FROM flights WHERE id IN (OLD.flight_id, NEW.flight_id)); END;",
};

static void sq_close(struct store_impl *st);

static double mono_s(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

/* Starts the clock of one operation's wait (each writing call: one wait). */
static void wait_reset(struct store_impl *st)
{
    st->busy_since_s = 0.0;
}

/* Seconds the current operation has waited for the lock; starts the clock. */
static double waited_s(struct store_impl *st)
{
    double now = mono_s();
    if (st->busy_since_s == 0.0)
        st->busy_since_s = now;
    return now - st->busy_since_s;
}

/* 1 while the operation may wait on (and has slept a little), 0 when its wait is
 * used up. Says once, after a few seconds, that it is waiting. */
static int wait_more(struct store_impl *st)
{
    double w = waited_s(st);
    if (w >= st->wait_s)
        return 0;
    if (!st->announced && w >= WAIT_NOTICE_AFTER_S && st->on_wait) {
        st->announced = 1;
        st->on_wait(st->wait_ctx, st->wait_s);
    }
    /* short jittered sleeps, so a waiting writer gets its turn between another
     * importer's flights (SQLite's default handler backs off to 100 ms sleeps
     * and lets a busy importer take the lock again each time) */
    struct timespec ts = {0, (long)(1000000L + (rand() % 3000000L))};
    nanosleep(&ts, NULL);
    return 1;
}

static int on_busy(void *ctx, int count)
{
    (void)count;
    return wait_more(ctx);
}

static enum pb_code db_error(struct store_impl *st, struct pb_error *err, const char *what)
{
    int code = sqlite3_extended_errcode(st->db);
    int sys = sqlite3_system_errno(st->db);
    const char *msg = sqlite3_errmsg(st->db);
    if (st->saved_code) {
        /* a ROLLBACK after the failure has cleared SQLite's own record of it */
        code = st->saved_code;
        sys = st->saved_errno;
        msg = st->saved_msg;
        st->saved_code = 0;
    }
    const char *hint = "";
    if ((code & 0xff) == SQLITE_READONLY)
        hint = " (the database or its folder is read-only)";
    else if ((code & 0xff) == SQLITE_FULL ||
             ((code & 0xff) == SQLITE_IOERR && (sys == ENOSPC || sys == EDQUOT || sys == EFBIG)))
        /* a full disk often reaches SQLite as a failed write ("disk I/O error") */
        hint = " (disk full, or a file-size limit reached: free some space and retry; nothing "
               "of this step was stored)";
    char busy[160];
    if ((code & 0xff) == SQLITE_BUSY || (code & 0xff) == SQLITE_LOCKED) {
        /* who holds it is not known: another packbook, a backup, an SQLite shell */
        snprintf(busy, sizeof busy,
                 " (another process held it locked for the whole wait of %.0f s; nothing of "
                 "this step was stored: try again, or wait longer with --wait S)",
                 st->wait_s);
        hint = busy;
    }
    return pb_error_set(err, PB_ESTORE, "%s: %s: %s%s", st->path, what, msg, hint);
}

static int mkdir_parents(const char *path)
{
    char buf[1024];
    snprintf(buf, sizeof buf, "%s", path);
    for (char *p = buf + 1; *p; p++) {
        if (*p != '/')
            continue;
        *p = '\0';
        if (mkdir(buf, 0755) != 0 && errno != EEXIST)
            return -1;
        *p = '/';
    }
    return 0;
}

static int sq_schema_version(struct store_impl *st)
{
    sqlite3_stmt *s = NULL;
    int v = -1;
    if (sqlite3_prepare_v2(st->db, "PRAGMA user_version", -1, &s, NULL) == SQLITE_OK &&
        sqlite3_step(s) == SQLITE_ROW)
        v = sqlite3_column_int(s, 0);
    sqlite3_finalize(s);
    return v;
}

static enum pb_code migrate(struct store_impl *st, struct pb_error *err)
{
    int have = sq_schema_version(st);
    if (have < 0)
        return db_error(st, err, "not a packbook database");
    st->found_version = have;
    int want = (int)(sizeof migrations / sizeof *migrations);
    if (have > want)
        return pb_error_set(err, PB_ESTORE,
                            "%s: schema version %d is newer than this packbook knows (%d): "
                            "upgrade packbook",
                            st->path, have, want);
    for (int v = have; v < want; v++) {
        char setver[64];
        snprintf(setver, sizeof setver, "PRAGMA user_version = %d", v + 1);
        if (sqlite3_exec(st->db, "BEGIN IMMEDIATE", NULL, NULL, NULL) != SQLITE_OK)
            return db_error(st, err, "cannot start the schema upgrade");
        /* re-read inside the lock: another process may have migrated */
        if (sq_schema_version(st) != v) {
            sqlite3_exec(st->db, "ROLLBACK", NULL, NULL, NULL);
            v = sq_schema_version(st) - 1;
            continue;
        }
        if (sqlite3_exec(st->db, migrations[v], NULL, NULL, NULL) != SQLITE_OK ||
            sqlite3_exec(st->db, setver, NULL, NULL, NULL) != SQLITE_OK) {
            enum pb_code rc = db_error(st, err, "schema upgrade failed");
            sqlite3_exec(st->db, "ROLLBACK", NULL, NULL, NULL);
            return rc;
        }
        if (sqlite3_exec(st->db, "COMMIT", NULL, NULL, NULL) != SQLITE_OK)
            return db_error(st, err, "schema upgrade failed");
    }
    /* the steps' pages into the file, so the WAL starts empty (a step that
     * rewrites a table, as 7 -> 8 does, would otherwise keep the whole table
     * twice until SQLite's own checkpoint); best effort: a reader may hold it */
    if (have < want)
        sqlite3_exec(st->db, "PRAGMA wal_checkpoint(TRUNCATE)", NULL, NULL, NULL);
    return PB_OK;
}

/* What the file at hand is, read before anything is written to it. */
enum owner { OWN_EMPTY, OWN_OURS, OWN_LEGACY, OWN_FOREIGN };

static int scalar_int(sqlite3 *db, const char *sql, int *out)
{
    sqlite3_stmt *s = NULL;
    int rc = sqlite3_prepare_v2(db, sql, -1, &s, NULL);
    if (rc == SQLITE_OK && (rc = sqlite3_step(s)) == SQLITE_ROW) {
        *out = sqlite3_column_int(s, 0);
        rc = SQLITE_OK;
    }
    sqlite3_finalize(s);
    return rc;
}

static enum pb_code classify_in(struct store_impl *st, enum owner *own, struct pb_error *err)
{
    int app = 0, ver = 0, ntables = 0, packs = 0, flights = 0;
    char names[160] = "";
    int rc = scalar_int(st->db, "PRAGMA application_id", &app);
    if (rc == SQLITE_OK)
        rc = scalar_int(st->db, "PRAGMA user_version", &ver);
    sqlite3_stmt *s = NULL;
    if (rc == SQLITE_OK)
        rc = sqlite3_prepare_v2(st->db,
                                "SELECT name FROM sqlite_master WHERE type = 'table' AND name "
                                "NOT LIKE 'sqlite\\_%' ESCAPE '\\' ORDER BY name",
                                -1, &s, NULL);
    while (rc == SQLITE_OK && (rc = sqlite3_step(s)) == SQLITE_ROW) {
        const char *name = (const char *)sqlite3_column_text(s, 0);
        name = name ? name : "";
        packs |= strcmp(name, "packs") == 0;
        flights |= strcmp(name, "flights") == 0;
        if (ntables < 3) {
            size_t used = strlen(names);
            snprintf(names + used, sizeof names - used, "%s'%.40s'", ntables ? ", " : "", name);
        }
        ntables++;
        rc = SQLITE_OK;
    }
    sqlite3_finalize(s);
    if (rc != SQLITE_DONE && rc != SQLITE_OK) {
        int code = sqlite3_errcode(st->db);
        if (code == SQLITE_NOTADB || code == SQLITE_CORRUPT)
            return pb_error_set(err, PB_ESTORE, "%s: not a packbook database (not an SQLite file)",
                                st->path);
        return db_error(st, err, "cannot open");
    }
    if (app == STORE_APPLICATION_ID)
        *own = OWN_OURS;
    else if (app == 0 && ntables == 0 && ver == 0)
        *own = OWN_EMPTY;
    else if (app == 0 && ver >= 1 && packs && flights)
        *own = OWN_LEGACY;
    else if (app != 0)
        return pb_error_set(err, PB_ESTORE,
                            "%s: not a packbook database (its application id 0x%08x belongs to "
                            "another program); left untouched",
                            st->path, (unsigned)app);
    else
        return pb_error_set(err, PB_ESTORE,
                            "%s: not a packbook database (it holds %d table%s: %s%s); left "
                            "untouched",
                            st->path, ntables, ntables == 1 ? "" : "s", names,
                            ntables > 3 ? ", ..." : "");
    return PB_OK;
}

/* The header and the table list read in one snapshot: read apart, another
 * process migrating a new file between them showed tables with schema 0
 * (an unknown file, refused). */
static enum pb_code classify(struct store_impl *st, enum owner *own, struct pb_error *err)
{
    int began = sqlite3_exec(st->db, "BEGIN", NULL, NULL, NULL) == SQLITE_OK;
    enum pb_code rc = classify_in(st, own, err);
    if (began)
        sqlite3_exec(st->db, "COMMIT", NULL, NULL, NULL);
    return rc;
}

/* A reading command on a store of an older schema: the file stays as it is,
 * the run reads an upgraded copy in memory. */
static enum pb_code migrate_in_memory(struct store_impl *st, struct pb_error *err)
{
    sqlite3 *mem = NULL;
    if (sqlite3_open(":memory:", &mem) != SQLITE_OK) {
        sqlite3_close(mem);
        return pb_error_set(err, PB_ENOMEM, "out of memory");
    }
    sqlite3_backup *b = sqlite3_backup_init(mem, "main", st->db, "main");
    int rc = b ? sqlite3_backup_step(b, -1) : SQLITE_ERROR;
    if (b)
        sqlite3_backup_finish(b);
    if (rc != SQLITE_DONE) {
        enum pb_code pc = db_error(st, err, "cannot read the database");
        sqlite3_close(mem);
        return pc;
    }
    sqlite3_close(st->db);
    st->db = mem;
    sqlite3_extended_result_codes(st->db, 1);
    sqlite3_exec(st->db, "PRAGMA foreign_keys = ON", NULL, NULL, NULL);
    return migrate(st, err);
}

static enum pb_code sq_open(const char *path, const char *shown, enum store_mode mode,
                            double wait_s, void (*on_wait)(void *ctx, double wait_s), void *ctx,
                            struct store_impl **out, struct pb_error *err)
{
    (void)shown; /* a file's path is shown as it is */
    *out = NULL;
    struct store_impl *st = calloc(1, sizeof *st);
    if (!st)
        return pb_error_set(err, PB_ENOMEM, "out of memory");
    snprintf(st->path, sizeof st->path, "%s", path);
    st->wait_s = wait_s;
    st->on_wait = on_wait;
    st->wait_ctx = ctx;
    if (mode != STORE_CREATE && access(path, F_OK) != 0) {
        free(st);
        return pb_error_set(err, PB_ESTORE,
                            "%s: no history yet (add a pack with 'packbook pack add')", path);
    }
    if (mode == STORE_CREATE && mkdir_parents(path) != 0) {
        free(st);
        return pb_error_set(err, PB_ESTORE, "cannot create the folder for '%s': %s", path,
                            strerror(errno));
    }
    /* one thread uses a connection (import's workers never touch the store):
     * no SQLite mutex around every call, which cost a seventh of fleet */
    int flags = SQLITE_OPEN_NOMUTEX |
                (mode == STORE_READ
                     ? SQLITE_OPEN_READONLY
                     : SQLITE_OPEN_READWRITE | (mode == STORE_CREATE ? SQLITE_OPEN_CREATE : 0));
    enum pb_code rc = PB_OK;
    if (sqlite3_open_v2(path, &st->db, flags, NULL) != SQLITE_OK) {
        rc = st->db ? db_error(st, err, "cannot open")
                    : pb_error_set(err, PB_ENOMEM, "out of memory");
        goto fail;
    }
    srand((unsigned)getpid()); /* jitter differs between processes */
    sqlite3_busy_handler(st->db, on_busy, st);
    sqlite3_extended_result_codes(st->db, 1);
    sqlite3_exec(st->db, "PRAGMA foreign_keys = ON", NULL, NULL, NULL);
    /* whose file this is, before a single byte of it changes (WAL included) */
    enum owner own = OWN_FOREIGN;
    if ((rc = classify(st, &own, err)) != PB_OK)
        goto fail;
    if (mode == STORE_READ) {
        if (own == OWN_EMPTY) {
            rc = pb_error_set(err, PB_ESTORE,
                              "%s: no history yet (add a pack with 'packbook pack add')", path);
            goto fail;
        }
        int want = (int)(sizeof migrations / sizeof *migrations);
        int have = sq_schema_version(st);
        rc = have >= 0 && have < want ? migrate_in_memory(st, err) : migrate(st, err);
        if (rc != PB_OK)
            goto fail;
        *out = st;
        return PB_OK;
    }
    char *msg = NULL;
    int prc;
    /* switching a new file to WAL takes an exclusive lock that SQLite does
     * not wait for (its busy handler is skipped to avoid deadlock): retry,
     * within the same one wait */
    wait_reset(st);
    for (;;) {
        prc = sqlite3_exec(st->db, "PRAGMA journal_mode = WAL; PRAGMA synchronous = NORMAL;", NULL,
                           NULL, &msg);
        if ((prc & 0xff) != SQLITE_BUSY || !wait_more(st))
            break;
        sqlite3_free(msg);
        msg = NULL;
    }
    sqlite3_free(msg);
    if (prc != SQLITE_OK) {
        rc = db_error(st, err, "cannot open");
        goto fail;
    }
    if ((rc = migrate(st, err)) != PB_OK)
        goto fail;
    if (own != OWN_OURS) {
        char sql[64];
        snprintf(sql, sizeof sql, "PRAGMA application_id = %d", STORE_APPLICATION_ID);
        if (sqlite3_exec(st->db, sql, NULL, NULL, NULL) != SQLITE_OK) {
            rc = db_error(st, err, "cannot mark the database as packbook's");
            goto fail;
        }
    }
    *out = st;
    return PB_OK;
fail:
    sq_close(st);
    return rc;
}

static void sq_close(struct store_impl *st)
{
    if (!st)
        return;
    sqlite3_close(st->db);
    free(st);
}

/* Runs one statement with an id (and a second id when id2 >= 0) in its own
 * transaction; *changed is the number of rows it changed. */
static enum pb_code exec_by_id(struct store_impl *st, const char *sql, int64_t id, int64_t id2,
                               int *changed, const char *what, struct pb_error *err)
{
    sqlite3_stmt *s = NULL;
    if (sqlite3_exec(st->db, "BEGIN IMMEDIATE", NULL, NULL, NULL) != SQLITE_OK)
        return db_error(st, err, what);
    int rc = sqlite3_prepare_v2(st->db, sql, -1, &s, NULL);
    if (rc == SQLITE_OK) {
        sqlite3_bind_int64(s, 1, id);
        if (id2 >= 0)
            sqlite3_bind_int64(s, 2, id2);
        rc = sqlite3_step(s);
    }
    sqlite3_finalize(s);
    if (rc != SQLITE_DONE) {
        st->saved_code = sqlite3_extended_errcode(st->db);
        snprintf(st->saved_msg, sizeof st->saved_msg, "%s", sqlite3_errmsg(st->db));
        sqlite3_exec(st->db, "ROLLBACK", NULL, NULL, NULL);
        return db_error(st, err, what);
    }
    *changed = sqlite3_changes(st->db);
    if (sqlite3_exec(st->db, "COMMIT", NULL, NULL, NULL) != SQLITE_OK) {
        sqlite3_exec(st->db, "ROLLBACK", NULL, NULL, NULL);
        return db_error(st, err, what);
    }
    return PB_OK;
}

/* ---- packs ------------------------------------------------------------ */

/* Stored text into a record's field as valid UTF-8. packbook writes text that
 * fits (the commands cap it at input), so only a file written by an older
 * packbook or by hand gets here with more, or with bytes that are not UTF-8:
 * those become U+FFFD, and text too long is cut at a character boundary and
 * ends in U+2026 so it never passes for the whole. */
static void copy_text(char *dst, size_t cap, sqlite3_stmt *s, int col)
{
    const char *t = (const char *)sqlite3_column_text(s, col);
    size_t len = t ? (size_t)sqlite3_column_bytes(s, col) : 0;
    if (utf8_repair(dst, cap, t ? t : "", len) && cap > 4) {
        utf8_repair(dst, cap - 3, t, len);
        strcat(dst, "\xe2\x80\xa6");
    }
}

/* Steps s (prepared and bound) to its end, each row made by fill into a
 * growing array of size-byte records, and finalises s. fill returns -1 when
 * out of memory; release (may be NULL) frees what n records own. On
 * failure nothing is left to free. */
static enum pb_code collect(struct store_impl *st, sqlite3_stmt *s, size_t size,
                            int (*fill)(sqlite3_stmt *s, void *rec),
                            void (*release)(void *recs, size_t n), void **out, size_t *n,
                            const char *what, struct pb_error *err)
{
    char *v = NULL;
    size_t len = 0, cap = 0;
    int rc;
    *out = NULL;
    *n = 0;
    while ((rc = sqlite3_step(s)) == SQLITE_ROW) {
        if (len == cap) {
            cap = cap ? 2 * cap : 16;
            char *nv = realloc(v, cap * size);
            if (!nv) {
                rc = SQLITE_NOMEM;
                break;
            }
            v = nv;
        }
        memset(v + len * size, 0, size);
        int bad = fill(s, v + len * size) != 0;
        len++;
        if (bad) {
            rc = SQLITE_NOMEM;
            break;
        }
    }
    sqlite3_finalize(s);
    if (rc != SQLITE_DONE) {
        if (release && v)
            release(v, len);
        else
            free(v);
        return rc == SQLITE_NOMEM ? pb_error_set(err, PB_ENOMEM, "out of memory")
                                  : db_error(st, err, what);
    }
    *out = v;
    *n = len;
    return PB_OK;
}

static void read_pack(sqlite3_stmt *s, struct pack_rec *p)
{
    memset(p, 0, sizeof *p);
    p->id = sqlite3_column_int64(s, 0);
    copy_text(p->label, sizeof p->label, s, 1);
    p->cells = sqlite3_column_int(s, 2);
    p->parallel = sqlite3_column_int(s, 3);
    copy_text(p->chemistry, sizeof p->chemistry, s, 4);
    p->capacity_mah = sqlite3_column_double(s, 5);
    copy_text(p->since, sizeof p->since, s, 6);
    copy_text(p->note, sizeof p->note, s, 7);
    copy_text(p->created_at, sizeof p->created_at, s, 8);
    copy_text(p->retired_at, sizeof p->retired_at, s, 9);
    copy_text(p->retire_reason, sizeof p->retire_reason, s, 10);
    copy_text(p->settings, sizeof p->settings, s, 11);
}

static void bind_text_or_null(sqlite3_stmt *s, int i, const char *t)
{
    if (t && *t)
        sqlite3_bind_text(s, i, t, -1, SQLITE_TRANSIENT);
    else
        sqlite3_bind_null(s, i);
}

static enum pb_code sq_pack_add(struct store_impl *st, struct pack_rec *p, struct pb_error *err)
{
    wait_reset(st);
    sqlite3_stmt *s = NULL;
    store_now_iso(p->created_at, sizeof p->created_at);
    if (sqlite3_prepare_v2(st->db, SQL_PACK_ADD, -1, &s, NULL) != SQLITE_OK)
        return db_error(st, err, "cannot add the pack");
    sqlite3_bind_text(s, 1, p->label, -1, SQLITE_TRANSIENT);
    sqlite3_bind_int(s, 2, p->cells);
    sqlite3_bind_int(s, 3, p->parallel);
    sqlite3_bind_text(s, 4, p->chemistry, -1, SQLITE_TRANSIENT);
    sqlite3_bind_double(s, 5, p->capacity_mah);
    bind_text_or_null(s, 6, p->since);
    bind_text_or_null(s, 7, p->note);
    sqlite3_bind_text(s, 8, p->created_at, -1, SQLITE_TRANSIENT);
    bind_text_or_null(s, 9, p->settings);
    int rc = sqlite3_step(s);
    sqlite3_finalize(s);
    if ((rc & 0xff) == SQLITE_CONSTRAINT)
        return pb_error_set(err, PB_EUSAGE, "pack '%s' exists already", p->label);
    if (rc != SQLITE_DONE)
        return db_error(st, err, "cannot add the pack");
    p->id = sqlite3_last_insert_rowid(st->db);
    return PB_OK;
}

static enum pb_code sq_pack_get(struct store_impl *st, const char *label, struct pack_rec *out,
                                struct pb_error *err)
{
    sqlite3_stmt *s = NULL;
    if (sqlite3_prepare_v2(st->db, SQL_PACK_GET, -1, &s, NULL) != SQLITE_OK)
        return db_error(st, err, "cannot read packs");
    sqlite3_bind_text(s, 1, label, -1, SQLITE_TRANSIENT);
    int rc = sqlite3_step(s);
    if (rc == SQLITE_ROW)
        read_pack(s, out);
    sqlite3_finalize(s);
    if (rc == SQLITE_DONE)
        return pb_error_set(err, PB_EUSAGE, "unknown pack '%s' (see 'packbook pack list')", label);
    if (rc != SQLITE_ROW)
        return db_error(st, err, "cannot read packs");
    return PB_OK;
}

static int fill_pack(sqlite3_stmt *s, void *rec)
{
    read_pack(s, rec);
    return 0;
}

static enum pb_code sq_pack_list(struct store_impl *st, struct pack_rec **out, size_t *n,
                                 struct pb_error *err)
{
    sqlite3_stmt *s = NULL;
    *out = NULL;
    *n = 0;
    if (sqlite3_prepare_v2(st->db, SQL_PACK_LIST, -1, &s, NULL) != SQLITE_OK)
        return db_error(st, err, "cannot read packs");
    return collect(st, s, sizeof **out, fill_pack, NULL, (void **)out, n, "cannot read packs", err);
}

static enum pb_code sq_pack_set_retired(struct store_impl *st, int64_t id, const char *retired_at,
                                        const char *reason, struct pb_error *err)
{
    wait_reset(st);
    int changed = 0;
    if (!retired_at)
        return exec_by_id(st, SQL_PACK_UNRETIRE, id, -1, &changed,
                          "cannot return the pack to service", err);
    sqlite3_stmt *s = NULL;
    if (sqlite3_prepare_v2(st->db, SQL_PACK_RETIRE, -1, &s, NULL) != SQLITE_OK)
        return db_error(st, err, "cannot retire the pack");
    sqlite3_bind_text(s, 1, retired_at, -1, SQLITE_TRANSIENT);
    sqlite3_bind_text(s, 2, reason, -1, SQLITE_TRANSIENT);
    sqlite3_bind_int64(s, 3, id);
    int rc = sqlite3_step(s);
    sqlite3_finalize(s);
    return rc == SQLITE_DONE ? PB_OK : db_error(st, err, "cannot retire the pack");
}

static enum pb_code sq_pack_by_id(struct store_impl *st, int64_t id, struct pack_rec *out,
                                  struct pb_error *err)
{
    sqlite3_stmt *s = NULL;
    if (sqlite3_prepare_v2(st->db, SQL_PACK_BY_ID, -1, &s, NULL) != SQLITE_OK)
        return db_error(st, err, "cannot read packs");
    sqlite3_bind_int64(s, 1, id);
    int rc = sqlite3_step(s);
    if (rc == SQLITE_ROW)
        read_pack(s, out);
    sqlite3_finalize(s);
    if (rc == SQLITE_DONE)
        return pb_error_set(err, PB_ESTORE, "%s: a flight names pack row %lld, which is missing",
                            st->path, (long long)id);
    if (rc != SQLITE_ROW)
        return db_error(st, err, "cannot read packs");
    return PB_OK;
}

static enum pb_code sq_pack_update(struct store_impl *st, const struct pack_rec *p,
                                   struct pb_error *err)
{
    sqlite3_stmt *s = NULL;
    if (sqlite3_prepare_v2(st->db, SQL_PACK_UPDATE, -1, &s, NULL) != SQLITE_OK)
        return db_error(st, err, "cannot change the pack");
    sqlite3_bind_text(s, 1, p->label, -1, SQLITE_TRANSIENT);
    sqlite3_bind_int(s, 2, p->cells);
    sqlite3_bind_int(s, 3, p->parallel);
    sqlite3_bind_text(s, 4, p->chemistry, -1, SQLITE_TRANSIENT);
    sqlite3_bind_double(s, 5, p->capacity_mah);
    bind_text_or_null(s, 6, p->since);
    bind_text_or_null(s, 7, p->note);
    bind_text_or_null(s, 8, p->settings);
    sqlite3_bind_int64(s, 9, p->id);
    int rc = sqlite3_step(s);
    sqlite3_finalize(s);
    if ((rc & 0xff) == SQLITE_CONSTRAINT)
        return pb_error_set(err, PB_EUSAGE, "pack '%s' exists already", p->label);
    if (rc != SQLITE_DONE)
        return db_error(st, err, "cannot change the pack");
    return PB_OK;
}

/* ---- flights ---------------------------------------------------------- */

static void bind_num(sqlite3_stmt *s, int i, double v)
{
    if (isfinite(v))
        sqlite3_bind_double(s, i, v);
    else
        sqlite3_bind_null(s, i);
}

static double col_num(sqlite3_stmt *s, int i)
{
    return sqlite3_column_type(s, i) == SQLITE_NULL ? NAN : sqlite3_column_double(s, i);
}

#define X(name) #name ", "
static const char flight_num_cols[] = FLIGHT_NUMS;
#undef X

/* One attempt at storing a flight inside a transaction. */
static int put_once(struct store_impl *st, const struct flight_rec *f, const char *json,
                    struct store_dup *dup)
{
    sqlite3_stmt *s = NULL;
    memset(dup, 0, sizeof *dup);
    int rc = sqlite3_exec(st->db, "BEGIN IMMEDIATE", NULL, NULL, NULL);
    if (rc != SQLITE_OK) {
        st->saved_code = sqlite3_extended_errcode(st->db);
        st->saved_errno = sqlite3_system_errno(st->db);
        snprintf(st->saved_msg, sizeof st->saved_msg, "%s", sqlite3_errmsg(st->db));
        return rc;
    }
    /* the same bytes first, then the same samples under other bytes */
    rc = sqlite3_prepare_v2(st->db, SQL_FLIGHT_DUP, -1, &s, NULL);
    if (rc != SQLITE_OK)
        goto fail;
    sqlite3_bind_text(s, 1, f->content_hash, -1, SQLITE_TRANSIENT);
    sqlite3_bind_text(s, 2, f->samples_hash, -1, SQLITE_TRANSIENT);
    rc = sqlite3_step(s);
    if (rc == SQLITE_ROW) {
        dup->kind = sqlite3_column_int(s, 2) ? DUP_BYTES : DUP_SAMPLES;
        dup->id = sqlite3_column_int64(s, 0);
        copy_text(dup->label, sizeof dup->label, s, 1);
        sqlite3_finalize(s);
        sqlite3_exec(st->db, "ROLLBACK", NULL, NULL, NULL);
        return SQLITE_OK;
    }
    sqlite3_finalize(s);
    s = NULL;
    if (rc != SQLITE_DONE)
        goto fail;
    if (strcmp(f->date_source, "log") == 0) {
        /* dates given by option or file time say nothing about sameness */
        rc = sqlite3_prepare_v2(st->db, SQL_FLIGHT_NEAR, -1, &s, NULL);
        if (rc != SQLITE_OK)
            goto fail;
        sqlite3_bind_double(s, 1, f->flown_epoch_s);
        bind_num(s, 2, f->duration_s);
        rc = sqlite3_step(s);
        if (rc == SQLITE_ROW) {
            dup->near_id = sqlite3_column_int64(s, 0);
            copy_text(dup->near_label, sizeof dup->near_label, s, 1);
        }
        sqlite3_finalize(s);
        s = NULL;
        if (rc != SQLITE_ROW && rc != SQLITE_DONE)
            goto fail;
    }

    char sql[2048], when[40], now[40];
    int used = snprintf(sql, sizeof sql,
                        "INSERT INTO flights (pack_id, content_hash, source, flown_at, "
                        "flown_epoch_s, date_source, imported_at, weakest_cell, warnings, "
                        "samples_hash, %.*s) VALUES (?",
                        (int)strlen(flight_num_cols) - 2, flight_num_cols);
    /* one placeholder per column: 10 named above plus the numeric ones */
    int ncols = 10;
    for (const char *q = flight_num_cols; *q; q++)
        ncols += *q == ',';
    for (int k = 1; k < ncols; k++)
        used += snprintf(sql + used, sizeof sql - (size_t)used, ", ?");
    snprintf(sql + used, sizeof sql - (size_t)used, ")");
    rc = sqlite3_prepare_v2(st->db, sql, -1, &s, NULL);
    if (rc != SQLITE_OK)
        goto fail;
    store_now_iso(now, sizeof now);
    isotime_format(f->flown_epoch_s, when, sizeof when);
    sqlite3_bind_int64(s, 1, f->pack_id);
    sqlite3_bind_text(s, 2, f->content_hash, -1, SQLITE_TRANSIENT);
    sqlite3_bind_text(s, 3, f->source, -1, SQLITE_TRANSIENT);
    sqlite3_bind_text(s, 4, when, -1, SQLITE_TRANSIENT);
    sqlite3_bind_double(s, 5, f->flown_epoch_s);
    sqlite3_bind_text(s, 6, f->date_source, -1, SQLITE_TRANSIENT);
    sqlite3_bind_text(s, 7, now, -1, SQLITE_TRANSIENT);
    if (f->weakest_cell > 0)
        sqlite3_bind_int(s, 8, f->weakest_cell);
    else
        sqlite3_bind_null(s, 8);
    sqlite3_bind_int(s, 9, f->warnings);
    bind_text_or_null(s, 10, f->samples_hash);
    int i = 11;
#define X(name) bind_num(s, i++, f->name);
    FLIGHT_NUMS
#undef X
    rc = sqlite3_step(s);
    sqlite3_finalize(s);
    s = NULL;
    if (rc != SQLITE_DONE)
        goto fail;
    sqlite3_int64 fid = sqlite3_last_insert_rowid(st->db);
    rc = sqlite3_prepare_v2(st->db, SQL_REPORT_PUT, -1, &s, NULL);
    if (rc != SQLITE_OK)
        goto fail;
    sqlite3_bind_int64(s, 1, fid);
    sqlite3_bind_text(s, 2, json, -1, SQLITE_TRANSIENT);
    rc = sqlite3_step(s);
    sqlite3_finalize(s);
    s = NULL;
    if (rc != SQLITE_DONE)
        goto fail;
    rc = sqlite3_prepare_v2(st->db, SQL_CELL_PUT, -1, &s, NULL);
    if (rc != SQLITE_OK)
        goto fail;
    for (int c = 0; c < f->ncells; c++) {
        sqlite3_reset(s);
        sqlite3_bind_int64(s, 1, fid);
        sqlite3_bind_int(s, 2, f->cell[c].index);
        bind_num(s, 3, f->cell[c].r0_mohm);
        bind_num(s, 4, f->cell[c].voltage_min_v);
        bind_num(s, 5, f->cell[c].voltage_rest_v);
        rc = sqlite3_step(s);
        if (rc != SQLITE_DONE)
            goto fail;
    }
    sqlite3_finalize(s);
    s = NULL;
    rc = sqlite3_exec(st->db, "COMMIT", NULL, NULL, NULL);
    if (rc != SQLITE_OK)
        goto fail;
    return SQLITE_OK;
fail:
    sqlite3_finalize(s);
    {
        /* keep the error of the failing step, not the rollback's */
        int keep = sqlite3_extended_errcode(st->db);
        st->saved_code = keep ? keep : rc;
        st->saved_errno = sqlite3_system_errno(st->db);
        snprintf(st->saved_msg, sizeof st->saved_msg, "%s", sqlite3_errmsg(st->db));
        sqlite3_exec(st->db, "ROLLBACK", NULL, NULL, NULL);
        return keep ? keep : rc;
    }
}

static enum pb_code sq_flight_find_hash(struct store_impl *st, const char *content_hash, int *found,
                                        int64_t *id, char *label, size_t cap, struct pb_error *err)
{
    sqlite3_stmt *s = NULL;
    *found = 0;
    if (sqlite3_prepare_v2(st->db, SQL_FIND_HASH, -1, &s, NULL) != SQLITE_OK)
        return db_error(st, err, "cannot look up the flight");
    sqlite3_bind_text(s, 1, content_hash, -1, SQLITE_TRANSIENT);
    int rc = sqlite3_step(s);
    if (rc == SQLITE_ROW) {
        *found = 1;
        *id = sqlite3_column_int64(s, 0);
        if (label)
            copy_text(label, cap, s, 1);
    }
    sqlite3_finalize(s);
    if (rc != SQLITE_ROW && rc != SQLITE_DONE)
        return db_error(st, err, "cannot look up the flight");
    return PB_OK;
}

static enum pb_code sq_flight_put(struct store_impl *st, const struct flight_rec *f,
                                  const char *report_json, struct store_dup *dup,
                                  struct pb_error *err)
{
    /* one wait in all: the busy handler's and these retries' (a lock SQLite
     * reports without calling the handler) share one clock */
    wait_reset(st);
    for (;;) {
        st->saved_code = 0;
        int rc = put_once(st, f, report_json, dup);
        if (rc == SQLITE_OK)
            return PB_OK;
        if ((rc & 0xff) != SQLITE_BUSY && (rc & 0xff) != SQLITE_LOCKED)
            return db_error(st, err, "cannot store the flight");
        if (!wait_more(st))
            return db_error(st, err, "cannot store the flight");
    }
}

/* A row of FLIGHT_HEAD_COLS then the numeric columns; cells are not read. */
static void read_flight(sqlite3_stmt *s, struct flight_rec *f)
{
    memset(f, 0, sizeof *f);
    f->id = sqlite3_column_int64(s, 0);
    f->pack_id = sqlite3_column_int64(s, 1);
    copy_text(f->content_hash, sizeof f->content_hash, s, 2);
    copy_text(f->source, sizeof f->source, s, 3);
    f->flown_epoch_s = sqlite3_column_double(s, 4);
    copy_text(f->date_source, sizeof f->date_source, s, 5);
    f->weakest_cell = sqlite3_column_int(s, 6);
    f->warnings = sqlite3_column_int(s, 7);
    int i = 8;
#define X(name) f->name = col_num(s, i++);
    FLIGHT_NUMS
#undef X
}

static int fill_flight(sqlite3_stmt *s, void *rec)
{
    read_flight(s, rec);
    return 0;
}

static enum pb_code sq_flights_of(struct store_impl *st, int64_t pack_id, struct flight_rec **out,
                                  size_t *n, struct pb_error *err)
{
    char sql[2048];
    sqlite3_stmt *s = NULL, *c = NULL;
    struct flight_rec *v = NULL;
    size_t len = 0;
    *out = NULL;
    *n = 0;
    snprintf(sql, sizeof sql,
             "SELECT %s, %.*s FROM flights WHERE pack_id = ? ORDER BY flown_epoch_s, id",
             FLIGHT_HEAD_COLS, (int)strlen(flight_num_cols) - 2, flight_num_cols);
    if (sqlite3_prepare_v2(st->db, sql, -1, &s, NULL) != SQLITE_OK ||
        sqlite3_prepare_v2(st->db, SQL_CELLS_OF, -1, &c, NULL) != SQLITE_OK) {
        sqlite3_finalize(s);
        return db_error(st, err, "cannot read flights");
    }
    sqlite3_bind_int64(s, 1, pack_id);
    enum pb_code code =
        collect(st, s, sizeof *v, fill_flight, NULL, (void **)&v, &len, "cannot read flights", err);
    if (code != PB_OK) {
        sqlite3_finalize(c);
        return code;
    }
    /* the cells of the whole pack in one query, in the flights' order */
    sqlite3_bind_int64(c, 1, pack_id);
    size_t at = 0;
    int rc;
    while ((rc = sqlite3_step(c)) == SQLITE_ROW) {
        int64_t fid = sqlite3_column_int64(c, 0);
        while (at < len && v[at].id != fid)
            at++;
        if (at == len) { /* a flight stored since the first query: its cells wait */
            rc = SQLITE_DONE;
            break;
        }
        struct flight_rec *f = &v[at];
        if (f->ncells >= PB_MAX_CELLS)
            continue;
        struct flight_cell_rec *fc = &f->cell[f->ncells++];
        fc->index = sqlite3_column_int(c, 1);
        fc->r0_mohm = col_num(c, 2);
        fc->voltage_min_v = col_num(c, 3);
        fc->voltage_rest_v = col_num(c, 4);
    }
    code = rc == SQLITE_DONE ? PB_OK : db_error(st, err, "cannot read flights");
    sqlite3_finalize(c);
    if (code != PB_OK) {
        free(v);
        return code;
    }
    *out = v;
    *n = len;
    return PB_OK;
}

static enum pb_code sq_flight_report(struct store_impl *st, int64_t flight_id, char **out,
                                     struct pb_error *err)
{
    sqlite3_stmt *s = NULL;
    *out = NULL;
    if (sqlite3_prepare_v2(st->db, SQL_REPORT_GET, -1, &s, NULL) != SQLITE_OK)
        return db_error(st, err, "cannot read a flight's report");
    sqlite3_bind_int64(s, 1, flight_id);
    enum pb_code rc = PB_OK;
    int r = sqlite3_step(s);
    if (r == SQLITE_ROW) {
        const unsigned char *t = sqlite3_column_text(s, 0);
        *out = strdup(t ? (const char *)t : "");
        if (!*out)
            rc = pb_error_set(err, PB_ENOMEM, "out of memory");
    } else if (r != SQLITE_DONE) {
        rc = db_error(st, err, "cannot read a flight's report");
    }
    sqlite3_finalize(s);
    return rc;
}

static enum pb_code sq_flight_get(struct store_impl *st, int64_t id, struct flight_rec *out,
                                  struct pb_error *err)
{
    char sql[2048];
    sqlite3_stmt *s = NULL;
    snprintf(sql, sizeof sql, "SELECT %s, %.*s FROM flights WHERE id = ?", FLIGHT_HEAD_COLS,
             (int)strlen(flight_num_cols) - 2, flight_num_cols);
    if (sqlite3_prepare_v2(st->db, sql, -1, &s, NULL) != SQLITE_OK)
        return db_error(st, err, "cannot read flights");
    sqlite3_bind_int64(s, 1, id);
    int rc = sqlite3_step(s);
    if (rc == SQLITE_ROW)
        read_flight(s, out);
    sqlite3_finalize(s);
    if (rc == SQLITE_DONE)
        return pb_error_set(err, PB_EUSAGE, "no flight %lld (see 'packbook flight list')",
                            (long long)id);
    if (rc != SQLITE_ROW)
        return db_error(st, err, "cannot read flights");
    return PB_OK;
}

static enum pb_code sq_flight_analysed_as(struct store_impl *st, int64_t id, int *cells,
                                          char *chemistry, size_t cap, struct pb_error *err)
{
    sqlite3_stmt *s = NULL;
    *cells = 0;
    chemistry[0] = '\0';
    if (sqlite3_prepare_v2(st->db,
                           "SELECT json_extract(report_json, '$.cells'), "
                           "json_extract(report_json, '$.chemistry') FROM flight_reports "
                           "WHERE flight_id = ?",
                           -1, &s, NULL) != SQLITE_OK)
        return db_error(st, err, "cannot read flights");
    sqlite3_bind_int64(s, 1, id);
    int rc = sqlite3_step(s);
    if (rc == SQLITE_ROW) {
        *cells = sqlite3_column_int(s, 0);
        copy_text(chemistry, cap, s, 1);
    }
    sqlite3_finalize(s);
    if (rc == SQLITE_DONE)
        return pb_error_set(err, PB_EUSAGE, "no flight %lld (see 'packbook flight list')",
                            (long long)id);
    if (rc != SQLITE_ROW)
        return db_error(st, err, "cannot read flights");
    return PB_OK;
}

static enum pb_code sq_flights_analysed_otherwise(struct store_impl *st, int64_t pack_id, int cells,
                                                  const char *chemistry, size_t *n,
                                                  struct pb_error *err)
{
    sqlite3_stmt *s = NULL;
    /* a report that does not say (hand-made rows) counts as not contradicting */
    if (sqlite3_prepare_v2(st->db,
                           "SELECT count(*) FROM flights f JOIN flight_reports r ON "
                           "r.flight_id = f.id WHERE f.pack_id = ? AND ("
                           "coalesce(json_extract(report_json, '$.cells'), ?2) != ?2 OR "
                           "lower(coalesce(json_extract(report_json, '$.chemistry'), ?3)) "
                           "!= lower(?3))",
                           -1, &s, NULL) != SQLITE_OK)
        return db_error(st, err, "cannot read flights");
    sqlite3_bind_int64(s, 1, pack_id);
    sqlite3_bind_int(s, 2, cells);
    sqlite3_bind_text(s, 3, chemistry, -1, SQLITE_TRANSIENT);
    int rc = sqlite3_step(s);
    if (rc == SQLITE_ROW)
        *n = (size_t)sqlite3_column_int64(s, 0);
    sqlite3_finalize(s);
    if (rc != SQLITE_ROW)
        return db_error(st, err, "cannot read flights");
    return PB_OK;
}

static enum pb_code sq_flight_remove(struct store_impl *st, int64_t id, struct pb_error *err)
{
    int changed = 0;
    /* flight_cells rows go with it (ON DELETE CASCADE, foreign keys on) */
    enum pb_code rc =
        exec_by_id(st, SQL_FLIGHT_REMOVE, id, -1, &changed, "cannot remove the flight", err);
    if (rc == PB_OK && changed == 0)
        return pb_error_set(err, PB_EUSAGE, "no flight %lld (see 'packbook flight list')",
                            (long long)id);
    return rc;
}

static enum pb_code sq_flight_move(struct store_impl *st, int64_t id, int64_t to_pack_id,
                                   struct pb_error *err)
{
    int changed = 0;
    enum pb_code rc =
        exec_by_id(st, SQL_FLIGHT_MOVE, id, to_pack_id, &changed, "cannot move the flight", err);
    if (rc == PB_OK && changed == 0)
        return pb_error_set(err, PB_EUSAGE, "no flight %lld (see 'packbook flight list')",
                            (long long)id);
    return rc;
}

static int fill_ack(sqlite3_stmt *s, void *rec)
{
    struct flight_ack *a = rec;
    a->flight_id = sqlite3_column_int64(s, 0);
    copy_text(a->note, sizeof a->note, s, 1);
    copy_text(a->acked_at, sizeof a->acked_at, s, 2);
    return 0;
}

static enum pb_code sq_acks_of(struct store_impl *st, int64_t pack_id, struct flight_ack **out,
                               size_t *n, struct pb_error *err)
{
    sqlite3_stmt *s = NULL;
    *out = NULL;
    *n = 0;
    if (sqlite3_prepare_v2(st->db, SQL_ACKS_OF, -1, &s, NULL) != SQLITE_OK)
        return db_error(st, err, "cannot read acknowledgements");
    sqlite3_bind_int64(s, 1, pack_id);
    return collect(st, s, sizeof **out, fill_ack, NULL, (void **)out, n,
                   "cannot read acknowledgements", err);
}

static enum pb_code sq_flight_label(struct store_impl *st, int64_t id, char *label, size_t cap,
                                    int *found, struct pb_error *err)
{
    sqlite3_stmt *s = NULL;
    if (sqlite3_prepare_v2(st->db, SQL_FLIGHT_LABEL, -1, &s, NULL) != SQLITE_OK)
        return db_error(st, err, "cannot read the flight");
    sqlite3_bind_int64(s, 1, id);
    int r = sqlite3_step(s);
    *found = r == SQLITE_ROW;
    if (*found)
        copy_text(label, cap, s, 0);
    sqlite3_finalize(s);
    return r == SQLITE_ROW || r == SQLITE_DONE ? PB_OK
                                               : db_error(st, err, "cannot read the flight");
}

static enum pb_code sq_ack_put(struct store_impl *st, int64_t flight_id, const char *note,
                               const char *acked_at, struct pb_error *err)
{
    sqlite3_stmt *s = NULL;
    if (sqlite3_prepare_v2(st->db, SQL_ACK_PUT, -1, &s, NULL) != SQLITE_OK)
        return db_error(st, err, "cannot store the acknowledgement");
    sqlite3_bind_int64(s, 1, flight_id);
    sqlite3_bind_text(s, 2, note, -1, SQLITE_TRANSIENT);
    sqlite3_bind_text(s, 3, acked_at, -1, SQLITE_TRANSIENT);
    int r = sqlite3_step(s);
    sqlite3_finalize(s);
    return r == SQLITE_DONE ? PB_OK : db_error(st, err, "cannot store the acknowledgement");
}

static int fill_pair(sqlite3_stmt *s, void *rec)
{
    struct pair_rec *r = rec;
    r->a_id = sqlite3_column_int64(s, 0);
    copy_text(r->a, sizeof r->a, s, 1);
    r->b_id = sqlite3_column_int64(s, 2);
    copy_text(r->b, sizeof r->b, s, 3);
    copy_text(r->created_at, sizeof r->created_at, s, 4);
    return 0;
}

static enum pb_code sq_pairs_list(struct store_impl *st, struct pair_rec **out, size_t *n,
                                  struct pb_error *err)
{
    sqlite3_stmt *s = NULL;
    *out = NULL;
    *n = 0;
    if (sqlite3_prepare_v2(st->db, SQL_PAIRS_LIST, -1, &s, NULL) != SQLITE_OK)
        return db_error(st, err, "cannot read the pairs");
    return collect(st, s, sizeof **out, fill_pair, NULL, (void **)out, n, "cannot read the pairs",
                   err);
}

static enum pb_code sq_pairs_busy(struct store_impl *st, int64_t lo, int64_t hi, int64_t *busy,
                                  struct pb_error *err)
{
    sqlite3_stmt *s = NULL;
    if (sqlite3_prepare_v2(st->db, SQL_PAIR_BUSY, -1, &s, NULL) != SQLITE_OK)
        return db_error(st, err, "cannot read the pairs");
    sqlite3_bind_int64(s, 1, lo);
    sqlite3_bind_int64(s, 2, hi);
    int r = sqlite3_step(s);
    if (r == SQLITE_ROW)
        *busy = sqlite3_column_int64(s, 0);
    sqlite3_finalize(s);
    return r == SQLITE_ROW ? PB_OK : db_error(st, err, "cannot read the pairs");
}

static enum pb_code sq_pair_put(struct store_impl *st, int64_t lo, int64_t hi,
                                const char *created_at, struct pb_error *err)
{
    sqlite3_stmt *s = NULL;
    if (sqlite3_prepare_v2(st->db, SQL_PAIR_PUT, -1, &s, NULL) != SQLITE_OK)
        return db_error(st, err, "cannot store the pair");
    sqlite3_bind_int64(s, 1, lo);
    sqlite3_bind_int64(s, 2, hi);
    sqlite3_bind_text(s, 3, created_at, -1, SQLITE_TRANSIENT);
    int r = sqlite3_step(s);
    sqlite3_finalize(s);
    return r == SQLITE_DONE ? PB_OK : db_error(st, err, "cannot store the pair");
}

static enum pb_code sq_pair_remove(struct store_impl *st, const struct pack_rec *p, int *removed,
                                   struct pb_error *err)
{
    sqlite3_stmt *s = NULL;
    if (sqlite3_prepare_v2(st->db, SQL_PAIR_REMOVE, -1, &s, NULL) != SQLITE_OK)
        return db_error(st, err, "cannot remove the pair");
    sqlite3_bind_int64(s, 1, p->id);
    int r = sqlite3_step(s);
    sqlite3_finalize(s);
    if (r != SQLITE_DONE)
        return db_error(st, err, "cannot remove the pair");
    *removed = sqlite3_changes(st->db);
    return PB_OK;
}

/* A column's text in a new string (NULL for SQL NULL); -1 when out of memory. */
static int dup_text(char **dst, sqlite3_stmt *s, int col)
{
    const unsigned char *t = sqlite3_column_text(s, col);
    *dst = NULL;
    if (!t)
        return 0;
    *dst = strdup((const char *)t);
    return *dst ? 0 : -1;
}

static int fill_assessment(sqlite3_stmt *s, void *rec)
{
    struct assessment_rec *r = rec;
    r->pack_id = sqlite3_column_int64(s, 0);
    r->history_gen = sqlite3_column_int64(s, 1);
    return dup_text(&r->inputs_key, s, 2) != 0 || dup_text(&r->assessment, s, 3) != 0 ? -1 : 0;
}

static void release_assessments(void *recs, size_t n)
{
    store_assessments_free(recs, n);
}

static enum pb_code sq_assessments_list(struct store_impl *st, struct assessment_rec **out,
                                        size_t *n, struct pb_error *err)
{
    sqlite3_stmt *s = NULL;
    *out = NULL;
    *n = 0;
    if (sqlite3_prepare_v2(st->db, SQL_ASSESS_LIST, -1, &s, NULL) != SQLITE_OK)
        return db_error(st, err, "cannot read the kept assessments");
    return collect(st, s, sizeof **out, fill_assessment, release_assessments, (void **)out, n,
                   "cannot read the kept assessments", err);
}

static enum pb_code sq_history_gen(struct store_impl *st, int64_t pack_id, int64_t *gen,
                                   struct pb_error *err)
{
    sqlite3_stmt *s = NULL;
    if (sqlite3_prepare_v2(st->db, SQL_HISTORY_GEN, -1, &s, NULL) != SQLITE_OK)
        return db_error(st, err, "cannot read packs");
    sqlite3_bind_int64(s, 1, pack_id);
    int rc = sqlite3_step(s);
    if (rc == SQLITE_ROW)
        *gen = sqlite3_column_int64(s, 0);
    sqlite3_finalize(s);
    if (rc == SQLITE_DONE)
        return pb_error_set(err, PB_ESTORE, "%s: no pack row %lld", st->path, (long long)pack_id);
    return rc == SQLITE_ROW ? PB_OK : db_error(st, err, "cannot read packs");
}

static enum pb_code sq_assessment_put(struct store_impl *st, int64_t pack_id, int64_t history_gen,
                                      const char *inputs_key, const char *assessment,
                                      struct pb_error *err)
{
    wait_reset(st);
    char now[32];
    store_now_iso(now, sizeof now);
    sqlite3_stmt *s = NULL;
    if (sqlite3_prepare_v2(st->db, SQL_ASSESS_PUT, -1, &s, NULL) != SQLITE_OK)
        return db_error(st, err, "cannot keep the pack's assessment");
    sqlite3_bind_int64(s, 1, pack_id);
    sqlite3_bind_int64(s, 2, history_gen);
    sqlite3_bind_text(s, 3, inputs_key, -1, SQLITE_TRANSIENT);
    sqlite3_bind_text(s, 4, assessment, -1, SQLITE_TRANSIENT);
    sqlite3_bind_text(s, 5, now, -1, SQLITE_TRANSIENT);
    int rc = sqlite3_step(s);
    sqlite3_finalize(s);
    return rc == SQLITE_DONE ? PB_OK : db_error(st, err, "cannot keep the pack's assessment");
}

static int sq_schema_version_found(struct store_impl *st)
{
    return st->found_version;
}

const struct store_ops store_sqlite_ops = {
    .name = "sqlite",
    .open = sq_open,
    .close = sq_close,
    .schema_version = sq_schema_version,
    .schema_version_found = sq_schema_version_found,
    .pack_add = sq_pack_add,
    .pack_get = sq_pack_get,
    .pack_list = sq_pack_list,
    .pack_set_retired = sq_pack_set_retired,
    .pack_by_id = sq_pack_by_id,
    .pack_update = sq_pack_update,
    .flights_analysed_otherwise = sq_flights_analysed_otherwise,
    .flight_put = sq_flight_put,
    .flight_find_hash = sq_flight_find_hash,
    .flights_of = sq_flights_of,
    .flight_report = sq_flight_report,
    .flight_get = sq_flight_get,
    .flight_analysed_as = sq_flight_analysed_as,
    .flight_remove = sq_flight_remove,
    .flight_move = sq_flight_move,
    .acks_of = sq_acks_of,
    .flight_label = sq_flight_label,
    .ack_put = sq_ack_put,
    .pairs_list = sq_pairs_list,
    .pairs_busy = sq_pairs_busy,
    .pair_put = sq_pair_put,
    .pair_remove = sq_pair_remove,
    .assessments_list = sq_assessments_list,
    .history_gen = sq_history_gen,
    .assessment_put = sq_assessment_put,
};
