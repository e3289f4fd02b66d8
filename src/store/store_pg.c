/* store_pg: the history store in a PostgreSQL database, through libpq
 * (one connection, text parameters, one transaction per flight).
 *
 * What differs from SQLite lives here: the schema steps' types (identity
 * ids, double precision), the version table packbook_schema (SQLite keeps
 * PRAGMA user_version), RETURNING for a new row's id, JSON through jsonb,
 * and locking: writers of flights take one transaction-scoped advisory
 * lock, as SQLite's BEGIN IMMEDIATE serialises them, so the samples-hash
 * and same-time checks see every committed flight; content_hash is UNIQUE
 * and inserted with ON CONFLICT DO NOTHING all the same. Shared SQL text
 * is in store_sql.h; its ? placeholders become $N here. */
#define _GNU_SOURCE
#include <inttypes.h>
#include <libpq-fe.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include <dlfcn.h>

#include "../core/isotime.h"
#include "../core/utf8.h"
#include "backend.h"
#include "store_sql.h"

/* libpq is loaded when a PostgreSQL database is first opened, not linked:
 * mapped at start-up it (with TLS, Kerberos and LDAP behind it) cost every
 * command about 5.5 MiB of resident memory, analyze included. Its
 * functions are called through this table, under their own names. */
#define PQ_FUNCS(X)                                                                                \
    X(PQclear)                                                                                     \
    X(PQcmdTuples)                                                                                 \
    X(PQconnectdbParams)                                                                           \
    X(PQerrorMessage)                                                                              \
    X(PQexec)                                                                                      \
    X(PQexecParams)                                                                                \
    X(PQfinish)                                                                                    \
    X(PQgetisnull)                                                                                 \
    X(PQgetlength)                                                                                 \
    X(PQgetvalue)                                                                                  \
    X(PQntuples)                                                                                   \
    X(PQresultErrorField)                                                                          \
    X(PQresultStatus)                                                                              \
    X(PQsetNoticeProcessor)                                                                        \
    X(PQstatus)                                                                                    \
    X(PQuser)

/* libpq's soname on Debian 12 (package libpq5) */
#define PQ_LIBRARY "libpq.so.5"

#define PQ_POINTER(name) __typeof__(name) *name;
static struct {
    void *lib;
    PQ_FUNCS(PQ_POINTER)
} pq;
#undef PQ_POINTER

/* Loads libpq once; 0, or -1 with the reason in why. */
static int pq_load(char *why, size_t cap)
{
    if (pq.lib)
        return 0;
    void *lib = dlopen(PQ_LIBRARY, RTLD_NOW | RTLD_LOCAL);
    if (!lib) {
        snprintf(why, cap, "%s", dlerror());
        return -1;
    }
#define PQ_FIND(name)                                                                              \
    if (!(*(void **)&pq.name = dlsym(lib, #name))) {                                               \
        snprintf(why, cap, "%s has no %s", PQ_LIBRARY, #name);                                     \
        dlclose(lib);                                                                              \
        return -1;                                                                                 \
    }
    PQ_FUNCS(PQ_FIND)
#undef PQ_FIND
    pq.lib = lib; /* kept for the process's life, as a linked library would be */
    return 0;
}

/* Every PQ... below calls through the table. */
#define PQclear pq.PQclear
#define PQcmdTuples pq.PQcmdTuples
#define PQconnectdbParams pq.PQconnectdbParams
#define PQerrorMessage pq.PQerrorMessage
#define PQexec pq.PQexec
#define PQexecParams pq.PQexecParams
#define PQfinish pq.PQfinish
#define PQgetisnull pq.PQgetisnull
#define PQgetlength pq.PQgetlength
#define PQgetvalue pq.PQgetvalue
#define PQntuples pq.PQntuples
#define PQresultErrorField pq.PQresultErrorField
#define PQresultStatus pq.PQresultStatus
#define PQsetNoticeProcessor pq.PQsetNoticeProcessor
#define PQstatus pq.PQstatus
#define PQuser pq.PQuser

/* pg_advisory_xact_lock keys: "PKBK" and a purpose */
#define LOCK_SCHEMA 0x504B424B0001LL
#define LOCK_WRITE 0x504B424B0002LL

struct store_impl {
    PGconn *conn;
    char shown[1024];
    enum store_mode mode;
    double wait_s;
    int found_version;
    int in_tx;
};

/* Schema steps: pg_steps[k] takes the schema from version k to k + 1, the
 * same tables and columns as store_sqlite.c's migrations[k]. Never edit a
 * released step; add one to both backends. */
static const char *const pg_steps[] = {
    /* 0 -> 1: packs and flights */
    "CREATE TABLE packs ("
    "  id bigint GENERATED BY DEFAULT AS IDENTITY PRIMARY KEY,"
    "  label text NOT NULL UNIQUE,"
    "  cells integer NOT NULL CHECK (cells BETWEEN 1 AND 24),"
    "  parallel integer NOT NULL DEFAULT 1 CHECK (parallel >= 1),"
    "  chemistry text NOT NULL,"
    "  capacity_mah double precision NOT NULL CHECK (capacity_mah > 0),"
    "  since text,"
    "  note text,"
    "  created_at text NOT NULL,"
    "  retired_at text,"
    "  retire_reason text);"
    "CREATE TABLE flights ("
    "  id bigint GENERATED BY DEFAULT AS IDENTITY PRIMARY KEY,"
    "  pack_id bigint NOT NULL REFERENCES packs(id),"
    "  content_hash text NOT NULL UNIQUE,"
    "  source text NOT NULL,"
    "  flown_at text NOT NULL,"
    "  flown_epoch_s double precision NOT NULL,"
    "  date_source text NOT NULL,"
    "  imported_at text NOT NULL,"
    "  duration_s double precision, charge_used_mah double precision,"
    "  energy_used_wh double precision, current_max_a double precision,"
    "  current_mean_a double precision, power_mean_w double precision,"
    "  voltage_min_v double precision, cell_voltage_min_v double precision,"
    "  time_below_floor_s double precision, r0_mohm double precision,"
    "  r0_ci95_mohm double precision, r1_mohm double precision, tau_s double precision,"
    "  soc_start_pct double precision, soc_end_pct double precision,"
    "  capacity_mah double precision, capacity_ci95_mah double precision,"
    "  cell_spread_rest_mv double precision, cell_spread_load_mv double precision,"
    "  weakest_cell integer, temperature_max_c double precision,"
    "  warnings integer NOT NULL DEFAULT 0,"
    "  report_json text NOT NULL);",
    /* 1 -> 2: per-cell figures, and the per-pack time index */
    "CREATE TABLE flight_cells ("
    "  flight_id bigint NOT NULL REFERENCES flights(id) ON DELETE CASCADE,"
    "  cell integer NOT NULL,"
    "  r0_mohm double precision, voltage_min_v double precision,"
    "  voltage_rest_v double precision,"
    "  PRIMARY KEY (flight_id, cell));"
    "CREATE INDEX flights_by_pack_time ON flights(pack_id, flown_epoch_s);",
    /* 2 -> 3: mean power while loaded */
    "ALTER TABLE flights ADD COLUMN power_cruise_w double precision;",
    /* 3 -> 4: a hash of the parsed samples */
    "ALTER TABLE flights ADD COLUMN samples_hash text;"
    "CREATE INDEX flights_by_samples ON flights(samples_hash);",
    /* 4 -> 5: a pack's remembered reading options */
    "ALTER TABLE packs ADD COLUMN read_settings text;",
    /* 5 -> 6: acknowledgements */
    "CREATE TABLE flight_acks ("
    "  flight_id bigint PRIMARY KEY REFERENCES flights(id) ON DELETE CASCADE,"
    "  note text NOT NULL,"
    "  acked_at text NOT NULL);",
    /* 6 -> 7: packs registered to fly together */
    "CREATE TABLE pack_pairs ("
    "  pack_a bigint PRIMARY KEY REFERENCES packs(id),"
    "  pack_b bigint NOT NULL REFERENCES packs(id),"
    "  created_at text NOT NULL,"
    "  CHECK (pack_a < pack_b));",
    /* 7 -> 8: the report JSON in a table of its own */
    "CREATE TABLE flight_reports ("
    "  flight_id bigint PRIMARY KEY REFERENCES flights(id) ON DELETE CASCADE,"
    "  report_json text NOT NULL);"
    "INSERT INTO flight_reports (flight_id, report_json) SELECT id, report_json FROM flights;"
    "ALTER TABLE flights DROP COLUMN report_json;",
    /* 8 -> 9: flights by time alone, for import's same-start check */
    "CREATE INDEX flights_by_time ON flights(flown_epoch_s);",
    /* 9 -> 10: each pack's kept assessment and its history generation,
     * bumped by triggers (a single UPDATE for a move locks both packs in
     * one statement) */
    "ALTER TABLE packs ADD COLUMN history_gen bigint NOT NULL DEFAULT 0;"
    "CREATE TABLE pack_assessments ("
    "  pack_id bigint PRIMARY KEY REFERENCES packs(id) ON DELETE CASCADE,"
    "  history_gen bigint NOT NULL,"
    "  inputs_key text NOT NULL,"
    "  assessment text NOT NULL,"
    "  written_at text NOT NULL);"
    "CREATE FUNCTION packbook_flights_history() RETURNS trigger LANGUAGE plpgsql AS $$ BEGIN"
    "  IF TG_OP = 'INSERT' THEN"
    "    UPDATE packs SET history_gen = history_gen + 1 WHERE id = NEW.pack_id;"
    "  ELSIF TG_OP = 'DELETE' THEN"
    "    UPDATE packs SET history_gen = history_gen + 1 WHERE id = OLD.pack_id;"
    "  ELSE"
    "    UPDATE packs SET history_gen = history_gen + 1 WHERE id IN (OLD.pack_id, NEW.pack_id);"
    "  END IF;"
    "  RETURN NULL; END $$;"
    "CREATE TRIGGER flights_history AFTER INSERT OR UPDATE OR DELETE ON flights"
    "  FOR EACH ROW EXECUTE FUNCTION packbook_flights_history();"
    "CREATE FUNCTION packbook_acks_history() RETURNS trigger LANGUAGE plpgsql AS $$ BEGIN"
    "  IF TG_OP = 'INSERT' THEN"
    "    UPDATE packs SET history_gen = history_gen + 1"
    "    WHERE id = (SELECT pack_id FROM flights WHERE id = NEW.flight_id);"
    "  ELSIF TG_OP = 'DELETE' THEN"
    "    UPDATE packs SET history_gen = history_gen + 1"
    "    WHERE id = (SELECT pack_id FROM flights WHERE id = OLD.flight_id);"
    "  ELSE"
    "    UPDATE packs SET history_gen = history_gen + 1 WHERE id IN"
    "    (SELECT pack_id FROM flights WHERE id IN (OLD.flight_id, NEW.flight_id));"
    "  END IF;"
    "  RETURN NULL; END $$;"
    "CREATE TRIGGER acks_history AFTER INSERT OR UPDATE OR DELETE ON flight_acks"
    "  FOR EACH ROW EXECUTE FUNCTION packbook_acks_history();",
};

#define NSTEPS ((int)(sizeof pg_steps / sizeof *pg_steps))

/* ---- SQL text and results ------------------------------------------------ */

/* store_sql.h's ? and ?N as PostgreSQL's $N (outside quoted literals);
 * NULL when out of memory. */
static char *numbered(const char *sql)
{
    size_t len = strlen(sql);
    char *out = malloc(3 * len + 1);
    if (!out)
        return NULL;
    size_t o = 0;
    int next = 1, quoted = 0;
    for (const char *p = sql; *p; p++) {
        if (*p == '\'')
            quoted = !quoted;
        if (*p != '?' || quoted) {
            out[o++] = *p;
            continue;
        }
        out[o++] = '$';
        if (p[1] >= '0' && p[1] <= '9') {
            while (p[1] >= '0' && p[1] <= '9')
                out[o++] = *++p;
        } else {
            o += (size_t)snprintf(out + o, 3 * len + 1 - o, "%d", next++);
        }
    }
    out[o] = '\0';
    return out;
}

/* Parameters as text; NULL is SQL NULL. */
struct params {
    int n;
    const char *v[40];
    char buf[40][32];
};

static void p_text(struct params *p, const char *t)
{
    p->v[p->n++] = t;
}

static void p_text_or_null(struct params *p, const char *t)
{
    p->v[p->n++] = t && *t ? t : NULL;
}

static void p_int(struct params *p, int64_t x)
{
    snprintf(p->buf[p->n], sizeof p->buf[p->n], "%" PRId64, x);
    p->v[p->n] = p->buf[p->n];
    p->n++;
}

static void p_num(struct params *p, double x)
{
    if (!isfinite(x)) {
        p->v[p->n++] = NULL;
        return;
    }
    snprintf(p->buf[p->n], sizeof p->buf[p->n], "%.17g", x);
    p->v[p->n] = p->buf[p->n];
    p->n++;
}

/* Runs shared SQL (? placeholders) with parameters; NULL only when out of memory. */
static PGresult *run(struct store_impl *st, const char *sql, const struct params *p)
{
    char *q = numbered(sql);
    if (!q)
        return NULL;
    PGresult *r = PQexecParams(st->conn, q, p ? p->n : 0, NULL, p ? p->v : NULL, NULL, NULL, 0);
    free(q);
    return r;
}

static int ok(const PGresult *r)
{
    ExecStatusType s = r ? PQresultStatus(r) : PGRES_FATAL_ERROR;
    return s == PGRES_COMMAND_OK || s == PGRES_TUPLES_OK;
}

static const char *sqlstate(const PGresult *r)
{
    const char *s = r ? PQresultErrorField(r, PG_DIAG_SQLSTATE) : NULL;
    return s ? s : "";
}

static void rollback(struct store_impl *st)
{
    if (!st->in_tx)
        return;
    st->in_tx = 0;
    if (PQstatus(st->conn) == CONNECTION_OK)
        PQclear(PQexec(st->conn, "ROLLBACK"));
}

/* The server's message, one line, without its "ERROR:  " head. */
static const char *pg_message(struct store_impl *st, const PGresult *r, char *buf, size_t cap)
{
    const char *m = r ? PQresultErrorField(r, PG_DIAG_MESSAGE_PRIMARY) : NULL;
    if (!m || !*m)
        m = PQerrorMessage(st->conn);
    if (!m || !*m)
        m = "unknown error";
    snprintf(buf, cap, "%s", m);
    buf[strcspn(buf, "\n")] = '\0';
    return buf;
}

/* The error of a failed statement (r may be NULL: out of memory), after a
 * rollback of the transaction it was in; verb is the right it needed
 * ("INSERT", "SELECT"...), named when the role lacks it. Clears r. */
static enum pb_code fail(struct store_impl *st, PGresult *r, const char *verb, const char *what,
                         struct pb_error *err)
{
    char msg[300];
    pg_message(st, r, msg, sizeof msg);
    const char *code = sqlstate(r);
    enum pb_code rc;
    if (!r && PQstatus(st->conn) == CONNECTION_OK) {
        rc = pb_error_set(err, PB_ENOMEM, "out of memory");
    } else if (PQstatus(st->conn) != CONNECTION_OK || strncmp(code, "08", 2) == 0 ||
               strcmp(code, "57P01") == 0 || strcmp(code, "57P02") == 0 ||
               strcmp(code, "57P03") == 0) {
        rc = pb_error_set(err, PB_ESTORE,
                          "%s: %s: the connection to the server was lost (%s); nothing of this "
                          "step was stored: try again",
                          st->shown, what, msg);
    } else if (strcmp(code, "42501") == 0) {
        rc = pb_error_set(err, PB_ESTORE,
                          "%s: %s: %s: the role '%s' lacks the %s right there (see ROLES in "
                          "man packbook); nothing was stored",
                          st->shown, what, msg, PQuser(st->conn), verb);
    } else if (strcmp(code, "55P03") == 0) {
        rc = pb_error_set(err, PB_ESTORE,
                          "%s: %s: another session held a lock for the whole wait of %.0f s; "
                          "nothing of this step was stored: try again, or wait longer with "
                          "--wait S",
                          st->shown, what, st->wait_s);
    } else if (strcmp(code, "25006") == 0) {
        rc = pb_error_set(err, PB_ESTORE, "%s: %s: the database is read-only here (%s)", st->shown,
                          what, msg);
    } else {
        rc = pb_error_set(err, PB_ESTORE, "%s: %s: %s", st->shown, what, msg);
    }
    PQclear(r);
    rollback(st);
    return rc;
}

static enum pb_code exec_simple(struct store_impl *st, const char *sql, const char *verb,
                                const char *what, struct pb_error *err)
{
    PGresult *r = PQexec(st->conn, sql);
    if (!ok(r))
        return fail(st, r, verb, what, err);
    PQclear(r);
    return PB_OK;
}

static enum pb_code begin(struct store_impl *st, const char *what, struct pb_error *err)
{
    enum pb_code rc = exec_simple(st, "BEGIN", "CONNECT", what, err);
    if (rc == PB_OK)
        st->in_tx = 1;
    return rc;
}

static enum pb_code commit(struct store_impl *st, const char *verb, const char *what,
                           struct pb_error *err)
{
    PGresult *r = PQexec(st->conn, "COMMIT");
    st->in_tx = 0;
    if (!ok(r))
        return fail(st, r, verb, what, err);
    PQclear(r);
    return PB_OK;
}

static int64_t get_int(const PGresult *r, int row, int col)
{
    return PQgetisnull(r, row, col) ? 0 : strtoll(PQgetvalue(r, row, col), NULL, 10);
}

static double get_num(const PGresult *r, int row, int col)
{
    return PQgetisnull(r, row, col) ? NAN : strtod(PQgetvalue(r, row, col), NULL);
}

/* Stored text as valid UTF-8, cut at a character boundary with U+2026 when too long. */
static void get_text(char *dst, size_t cap, const PGresult *r, int row, int col)
{
    const char *t = PQgetisnull(r, row, col) ? "" : PQgetvalue(r, row, col);
    size_t len = (size_t)PQgetlength(r, row, col);
    if (utf8_repair(dst, cap, t, len) && cap > 4) {
        utf8_repair(dst, cap - 3, t, len);
        strcat(dst, "\xe2\x80\xa6");
    }
}

/* ---- opening and schema ------------------------------------------------- */

/* What the database holds before anything is written: *version -1 when it
 * has no packbook tables at all. */
static enum pb_code classify(struct store_impl *st, int *version, struct pb_error *err)
{
    /* pg_class read by a scan, not to_regclass: the scan takes in other
     * sessions' catalog changes (a migration committed while this one waited
     * for the schema lock), which a cached name lookup may not have seen */
    PGresult *r =
        PQexec(st->conn, "SELECT coalesce(bool_or(c.relname = 'packbook_schema'), false), "
                         "coalesce(bool_or(c.relname IN ('packs', 'flights')), false) "
                         "FROM pg_catalog.pg_class c WHERE c.relname IN ('packbook_schema', "
                         "'packs', 'flights') AND c.relkind IN ('r', 'p') AND "
                         "pg_catalog.pg_table_is_visible(c.oid)");
    if (!ok(r) || PQntuples(r) != 1)
        return fail(st, r, "SELECT", "cannot read the database's tables", err);
    int ours = PQgetvalue(r, 0, 0)[0] == 't';
    int theirs = PQgetvalue(r, 0, 1)[0] == 't';
    PQclear(r);
    *version = -1;
    if (!ours && theirs)
        return pb_error_set(err, PB_ESTORE,
                            "%s: not a packbook database (it has a table 'packs' or 'flights' "
                            "but no packbook_schema); left untouched",
                            st->shown);
    if (!ours)
        return PB_OK;
    r = PQexec(st->conn, "SELECT max(version) FROM packbook_schema");
    if (!ok(r) || PQntuples(r) != 1)
        return fail(st, r, "SELECT", "cannot read the schema version", err);
    *version = (int)get_int(r, 0, 0);
    PQclear(r);
    return PB_OK;
}

static enum pb_code refuse_newer(struct store_impl *st, int have, struct pb_error *err)
{
    return pb_error_set(err, PB_ESTORE,
                        "%s: schema version %d is newer than this packbook knows (%d): upgrade "
                        "packbook",
                        st->shown, have, NSTEPS);
}

/* Applies the missing steps, each in its own transaction under the schema
 * lock (another packbook may be migrating the same database). */
static enum pb_code migrate(struct store_impl *st, struct pb_error *err)
{
    for (;;) {
        enum pb_code rc = begin(st, "cannot start the schema upgrade", err);
        if (rc != PB_OK)
            return rc;
        char sql[160];
        snprintf(sql, sizeof sql, "SELECT pg_advisory_xact_lock(%lld)", LOCK_SCHEMA);
        if ((rc = exec_simple(st, sql, "CONNECT", "cannot start the schema upgrade", err)) != PB_OK)
            return rc;
        /* re-read inside the lock */
        int have = -1;
        if ((rc = classify(st, &have, err)) != PB_OK) {
            rollback(st);
            return rc;
        }
        if (have < 0) {
            rc = exec_simple(st,
                             "CREATE TABLE packbook_schema (version integer NOT NULL);"
                             "INSERT INTO packbook_schema VALUES (0)",
                             "CREATE", "cannot create the schema", err);
            if (rc != PB_OK)
                return rc;
            have = 0;
        }
        if (have > NSTEPS) {
            rollback(st);
            return refuse_newer(st, have, err);
        }
        if (have == NSTEPS) {
            rollback(st);
            return PB_OK;
        }
        rc = exec_simple(st, pg_steps[have], "CREATE", "schema upgrade failed", err);
        if (rc != PB_OK)
            return rc;
        snprintf(sql, sizeof sql, "UPDATE packbook_schema SET version = %d", have + 1);
        if ((rc = exec_simple(st, sql, "UPDATE", "schema upgrade failed", err)) != PB_OK)
            return rc;
        if ((rc = commit(st, "CREATE", "schema upgrade failed", err)) != PB_OK)
            return rc;
    }
}

static void pg_close(struct store_impl *st)
{
    if (!st)
        return;
    PQfinish(st->conn);
    free(st);
}

/* libpq's notices (a NOTICE from the server) are not packbook's output. */
static void quiet(void *arg, const char *message)
{
    (void)arg;
    (void)message;
}

static enum pb_code pg_open(const char *db, const char *shown, enum store_mode mode, double wait_s,
                            void (*on_wait)(void *ctx, double wait_s), void *ctx,
                            struct store_impl **out, struct pb_error *err)
{
    (void)on_wait; /* the server waits for locks itself, up to lock_timeout */
    (void)ctx;
    *out = NULL;
    char why[512];
    if (pq_load(why, sizeof why) != 0)
        return pb_error_set(err, PB_ESTORE,
                            "%s: cannot load PostgreSQL's client library (%s): install Debian's "
                            "libpq5",
                            shown, why);
    struct store_impl *st = calloc(1, sizeof *st);
    if (!st)
        return pb_error_set(err, PB_ENOMEM, "out of memory");
    snprintf(st->shown, sizeof st->shown, "%s", shown);
    st->mode = mode;
    st->wait_s = wait_s;
    /* the string is expanded by libpq; everything it does not say comes from
     * libpq's environment (PGHOST, PGSERVICE, PGPASSFILE, PGSSLMODE...) */
    const char *keys[] = {"fallback_application_name", "dbname", NULL};
    const char *vals[] = {"packbook", db, NULL};
    st->conn = PQconnectdbParams(keys, vals, 1);
    enum pb_code rc = PB_OK;
    if (!st->conn) {
        free(st);
        return pb_error_set(err, PB_ENOMEM, "out of memory");
    }
    if (PQstatus(st->conn) != CONNECTION_OK) {
        char msg[300];
        rc = pb_error_set(err, PB_ESTORE, "%s: cannot connect: %s", st->shown,
                          pg_message(st, NULL, msg, sizeof msg));
        goto fail;
    }
    PQsetNoticeProcessor(st->conn, quiet, NULL);
    char sql[200];
    /* the bounded wait: any lock (rows, tables, the advisory write lock) */
    snprintf(sql, sizeof sql, "SET lock_timeout = %.0f; SET client_encoding = 'UTF8'",
             wait_s * 1000.0 < 1.0 ? 1.0 : wait_s * 1000.0);
    if ((rc = exec_simple(st, sql, "CONNECT", "cannot open", err)) != PB_OK)
        goto fail;
    /* read under the schema lock (shared): a migration another process has
     * under way is seen whole, never as tables without their version */
    int have = -1;
    snprintf(sql, sizeof sql, "SELECT pg_advisory_xact_lock_shared(%lld)", LOCK_SCHEMA);
    if ((rc = begin(st, "cannot open", err)) != PB_OK ||
        (rc = exec_simple(st, sql, "CONNECT", "cannot open", err)) != PB_OK ||
        (rc = classify(st, &have, err)) != PB_OK) {
        rollback(st);
        goto fail;
    }
    rollback(st); /* nothing was written: the lock goes */
    st->found_version = have < 0 ? 0 : have;
    if (have > NSTEPS) {
        rc = refuse_newer(st, have, err);
        goto fail;
    }
    if (mode != STORE_CREATE && have <= 0) {
        rc = pb_error_set(err, PB_ESTORE,
                          "%s: no history yet (add a pack with 'packbook pack add')", st->shown);
        goto fail;
    }
    if (mode == STORE_READ) {
        if (have < NSTEPS) {
            /* no copy in memory as with a file: the owner upgrades it once */
            rc = pb_error_set(err, PB_ESTORE,
                              "%s: schema version %d is older than this packbook's (%d): the "
                              "database's owner runs 'packbook db migrate' once",
                              st->shown, have, NSTEPS);
            goto fail;
        }
        /* a reading command never writes, whatever its role may do */
        if ((rc = exec_simple(st, "SET default_transaction_read_only = on", "CONNECT",
                              "cannot open", err)) != PB_OK)
            goto fail;
    } else if (have < NSTEPS && (rc = migrate(st, err)) != PB_OK) {
        goto fail;
    }
    *out = st;
    return PB_OK;
fail:
    pg_close(st);
    return rc;
}

static int pg_schema_version(struct store_impl *st)
{
    PGresult *r = PQexec(st->conn, "SELECT max(version) FROM packbook_schema");
    int v = ok(r) && PQntuples(r) == 1 ? (int)get_int(r, 0, 0) : -1;
    PQclear(r);
    return v;
}

static int pg_schema_version_found(struct store_impl *st)
{
    return st->found_version;
}

/* ---- packs -------------------------------------------------------------- */

/* The rows sql returns (with q; may be NULL), each made by fill into an
 * array of size-byte records (zeroed first). fill returns -1 when out of
 * memory; release (may be NULL) frees what n records own. On failure
 * nothing is left to free. */
static enum pb_code rows_of(struct store_impl *st, const char *sql, const struct params *q,
                            size_t size, int (*fill)(const PGresult *r, int row, void *rec),
                            void (*release)(void *recs, size_t n), void **out, size_t *n,
                            const char *what, struct pb_error *err)
{
    *out = NULL;
    *n = 0;
    PGresult *r = run(st, sql, q);
    if (!ok(r))
        return fail(st, r, "SELECT", what, err);
    size_t rows = (size_t)PQntuples(r);
    char *v = calloc(rows ? rows : 1, size);
    int bad = !v;
    size_t k = 0;
    for (; !bad && k < rows; k++)
        bad = fill(r, (int)k, v + k * size) != 0;
    PQclear(r);
    if (bad) {
        if (release && v)
            release(v, k);
        else
            free(v);
        return pb_error_set(err, PB_ENOMEM, "out of memory");
    }
    *out = v;
    *n = rows;
    return PB_OK;
}

static void read_pack(const PGresult *r, int row, struct pack_rec *p)
{
    memset(p, 0, sizeof *p);
    p->id = get_int(r, row, 0);
    get_text(p->label, sizeof p->label, r, row, 1);
    p->cells = (int)get_int(r, row, 2);
    p->parallel = (int)get_int(r, row, 3);
    get_text(p->chemistry, sizeof p->chemistry, r, row, 4);
    p->capacity_mah = get_num(r, row, 5);
    get_text(p->since, sizeof p->since, r, row, 6);
    get_text(p->note, sizeof p->note, r, row, 7);
    get_text(p->created_at, sizeof p->created_at, r, row, 8);
    get_text(p->retired_at, sizeof p->retired_at, r, row, 9);
    get_text(p->retire_reason, sizeof p->retire_reason, r, row, 10);
    get_text(p->settings, sizeof p->settings, r, row, 11);
}

static enum pb_code pg_pack_add(struct store_impl *st, struct pack_rec *p, struct pb_error *err)
{
    struct params q = {0};
    store_now_iso(p->created_at, sizeof p->created_at);
    p_text(&q, p->label);
    p_int(&q, p->cells);
    p_int(&q, p->parallel);
    p_text(&q, p->chemistry);
    p_num(&q, p->capacity_mah);
    p_text_or_null(&q, p->since);
    p_text_or_null(&q, p->note);
    p_text(&q, p->created_at);
    p_text_or_null(&q, p->settings);
    PGresult *r = run(st, SQL_PACK_ADD " RETURNING id", &q);
    if (!ok(r)) {
        if (strcmp(sqlstate(r), "23505") == 0) {
            PQclear(r);
            return pb_error_set(err, PB_EUSAGE, "pack '%s' exists already", p->label);
        }
        return fail(st, r, "INSERT", "cannot add the pack", err);
    }
    p->id = get_int(r, 0, 0);
    PQclear(r);
    return PB_OK;
}

/* One pack by a shared query and one parameter; *found says whether it was there. */
static enum pb_code pack_one(struct store_impl *st, const char *sql, struct params *q,
                             struct pack_rec *out, int *found, struct pb_error *err)
{
    PGresult *r = run(st, sql, q);
    if (!ok(r))
        return fail(st, r, "SELECT", "cannot read packs", err);
    *found = PQntuples(r) > 0;
    if (*found)
        read_pack(r, 0, out);
    PQclear(r);
    return PB_OK;
}

static enum pb_code pg_pack_get(struct store_impl *st, const char *label, struct pack_rec *out,
                                struct pb_error *err)
{
    struct params q = {0};
    p_text(&q, label);
    int found = 0;
    enum pb_code rc = pack_one(st, SQL_PACK_GET, &q, out, &found, err);
    if (rc == PB_OK && !found)
        return pb_error_set(err, PB_EUSAGE, "unknown pack '%s' (see 'packbook pack list')", label);
    return rc;
}

static enum pb_code pg_pack_by_id(struct store_impl *st, int64_t id, struct pack_rec *out,
                                  struct pb_error *err)
{
    struct params q = {0};
    p_int(&q, id);
    int found = 0;
    enum pb_code rc = pack_one(st, SQL_PACK_BY_ID, &q, out, &found, err);
    if (rc == PB_OK && !found)
        return pb_error_set(err, PB_ESTORE, "%s: a flight names pack row %lld, which is missing",
                            st->shown, (long long)id);
    return rc;
}

static int fill_pack(const PGresult *r, int row, void *rec)
{
    read_pack(r, row, rec);
    return 0;
}

static enum pb_code pg_pack_list(struct store_impl *st, struct pack_rec **out, size_t *n,
                                 struct pb_error *err)
{
    return rows_of(st, SQL_PACK_LIST, NULL, sizeof **out, fill_pack, NULL, (void **)out, n,
                   "cannot read packs", err);
}

/* A writing statement in its own transaction; *changed is the rows it changed. */
static enum pb_code write_one(struct store_impl *st, const char *sql, const struct params *q,
                              int *changed, const char *verb, const char *what,
                              struct pb_error *err)
{
    PGresult *r = run(st, sql, q);
    if (!ok(r))
        return fail(st, r, verb, what, err);
    if (changed)
        *changed = atoi(PQcmdTuples(r));
    PQclear(r);
    return PB_OK;
}

static enum pb_code pg_pack_set_retired(struct store_impl *st, int64_t id, const char *retired_at,
                                        const char *reason, struct pb_error *err)
{
    struct params q = {0};
    if (!retired_at) {
        p_int(&q, id);
        return write_one(st, SQL_PACK_UNRETIRE, &q, NULL, "UPDATE",
                         "cannot return the pack to service", err);
    }
    p_text(&q, retired_at);
    p_text(&q, reason);
    p_int(&q, id);
    return write_one(st, SQL_PACK_RETIRE, &q, NULL, "UPDATE", "cannot retire the pack", err);
}

static enum pb_code pg_pack_update(struct store_impl *st, const struct pack_rec *p,
                                   struct pb_error *err)
{
    struct params q = {0};
    p_text(&q, p->label);
    p_int(&q, p->cells);
    p_int(&q, p->parallel);
    p_text(&q, p->chemistry);
    p_num(&q, p->capacity_mah);
    p_text_or_null(&q, p->since);
    p_text_or_null(&q, p->note);
    p_text_or_null(&q, p->settings);
    p_int(&q, p->id);
    PGresult *r = run(st, SQL_PACK_UPDATE, &q);
    if (!ok(r) && strcmp(sqlstate(r), "23505") == 0) {
        PQclear(r);
        return pb_error_set(err, PB_EUSAGE, "pack '%s' exists already", p->label);
    }
    if (!ok(r))
        return fail(st, r, "UPDATE", "cannot change the pack", err);
    PQclear(r);
    return PB_OK;
}

/* ---- flights ------------------------------------------------------------ */

#define X(name) #name ", "
static const char flight_num_cols[] = FLIGHT_NUMS;
#undef X

static void read_flight(const PGresult *r, int row, struct flight_rec *f)
{
    memset(f, 0, sizeof *f);
    f->id = get_int(r, row, 0);
    f->pack_id = get_int(r, row, 1);
    get_text(f->content_hash, sizeof f->content_hash, r, row, 2);
    get_text(f->source, sizeof f->source, r, row, 3);
    f->flown_epoch_s = get_num(r, row, 4);
    get_text(f->date_source, sizeof f->date_source, r, row, 5);
    f->weakest_cell = (int)get_int(r, row, 6);
    f->warnings = (int)get_int(r, row, 7);
    int i = 8;
#define X(name) f->name = get_num(r, row, i++);
    FLIGHT_NUMS
#undef X
}

/* One attempt at storing a flight, in one transaction. */
static enum pb_code put_once(struct store_impl *st, const struct flight_rec *f, const char *json,
                             struct store_dup *dup, struct pb_error *err)
{
    const char *what = "cannot store the flight";
    memset(dup, 0, sizeof *dup);
    enum pb_code rc = begin(st, what, err);
    if (rc != PB_OK)
        return rc;
    char sql[2048];
    snprintf(sql, sizeof sql, "SELECT pg_advisory_xact_lock(%lld)", LOCK_WRITE);
    if ((rc = exec_simple(st, sql, "CONNECT", what, err)) != PB_OK)
        return rc;
    struct params q = {0};
    p_text(&q, f->content_hash);
    p_text(&q, f->samples_hash);
    PGresult *r = run(st, SQL_FLIGHT_DUP, &q);
    if (!ok(r))
        return fail(st, r, "SELECT", what, err);
    if (PQntuples(r) > 0) {
        dup->kind = PQgetvalue(r, 0, 2)[0] == 't' ? DUP_BYTES : DUP_SAMPLES;
        dup->id = get_int(r, 0, 0);
        get_text(dup->label, sizeof dup->label, r, 0, 1);
        PQclear(r);
        rollback(st);
        return PB_OK;
    }
    PQclear(r);
    if (strcmp(f->date_source, "log") == 0) {
        q.n = 0;
        p_num(&q, f->flown_epoch_s);
        p_num(&q, f->duration_s);
        /* the ? as double precision: PostgreSQL would guess numeric for "?1 - 1" */
        r = run(st,
                "SELECT f.id, p.label FROM flights f JOIN packs p ON p.id = f.pack_id "
                "WHERE f.date_source = 'log' AND f.flown_epoch_s BETWEEN ?1::float8 - 1 AND "
                "?1::float8 + 1 AND abs(f.duration_s - ?2::float8) <= 1 ORDER BY f.id LIMIT 1",
                &q);
        if (!ok(r))
            return fail(st, r, "SELECT", what, err);
        if (PQntuples(r) > 0) {
            dup->near_id = get_int(r, 0, 0);
            get_text(dup->near_label, sizeof dup->near_label, r, 0, 1);
        }
        PQclear(r);
    }
    char when[40], now[40];
    int used = snprintf(sql, sizeof sql,
                        "INSERT INTO flights (pack_id, content_hash, source, flown_at, "
                        "flown_epoch_s, date_source, imported_at, weakest_cell, warnings, "
                        "samples_hash, %.*s) VALUES (?",
                        (int)strlen(flight_num_cols) - 2, flight_num_cols);
    int ncols = 10;
    for (const char *c = flight_num_cols; *c; c++)
        ncols += *c == ',';
    for (int k = 1; k < ncols; k++)
        used += snprintf(sql + used, sizeof sql - (size_t)used, ", ?");
    /* two crews' imports of one log: the second finds the first's row */
    snprintf(sql + used, sizeof sql - (size_t)used,
             ") ON CONFLICT (content_hash) DO NOTHING RETURNING id");
    store_now_iso(now, sizeof now);
    isotime_format(f->flown_epoch_s, when, sizeof when);
    q.n = 0;
    p_int(&q, f->pack_id);
    p_text(&q, f->content_hash);
    p_text(&q, f->source);
    p_text(&q, when);
    p_num(&q, f->flown_epoch_s);
    p_text(&q, f->date_source);
    p_text(&q, now);
    if (f->weakest_cell > 0)
        p_int(&q, f->weakest_cell);
    else
        p_text(&q, NULL);
    p_int(&q, f->warnings);
    p_text_or_null(&q, f->samples_hash);
#define X(name) p_num(&q, f->name);
    FLIGHT_NUMS
#undef X
    r = run(st, sql, &q);
    if (!ok(r))
        return fail(st, r, "INSERT", what, err);
    if (PQntuples(r) == 0) {
        PQclear(r);
        rollback(st);
        int found = 0;
        q.n = 0;
        p_text(&q, f->content_hash);
        r = run(st, SQL_FIND_HASH, &q);
        if (!ok(r))
            return fail(st, r, "SELECT", what, err);
        if (PQntuples(r) > 0) {
            found = 1;
            dup->kind = DUP_BYTES;
            dup->id = get_int(r, 0, 0);
            get_text(dup->label, sizeof dup->label, r, 0, 0 + 1);
        }
        PQclear(r);
        return found ? PB_OK
                     : pb_error_set(err, PB_ESTORE, "%s: %s: a concurrent change; try again",
                                    st->shown, what);
    }
    int64_t fid = get_int(r, 0, 0);
    PQclear(r);
    q.n = 0;
    p_int(&q, fid);
    p_text(&q, json);
    if ((rc = write_one(st, SQL_REPORT_PUT, &q, NULL, "INSERT", what, err)) != PB_OK)
        return rc;
    for (int c = 0; c < f->ncells; c++) {
        q.n = 0;
        p_int(&q, fid);
        p_int(&q, f->cell[c].index);
        p_num(&q, f->cell[c].r0_mohm);
        p_num(&q, f->cell[c].voltage_min_v);
        p_num(&q, f->cell[c].voltage_rest_v);
        if ((rc = write_one(st, SQL_CELL_PUT, &q, NULL, "INSERT", what, err)) != PB_OK)
            return rc;
    }
    return commit(st, "INSERT", what, err);
}

static enum pb_code pg_flight_put(struct store_impl *st, const struct flight_rec *f,
                                  const char *report_json, struct store_dup *dup,
                                  struct pb_error *err)
{
    /* a deadlock or serialisation failure is the server's to resolve: try
     * again a few times; anything else is the caller's */
    for (int attempt = 0;; attempt++) {
        enum pb_code rc = put_once(st, f, report_json, dup, err);
        if (rc == PB_OK || attempt >= 3 || PQstatus(st->conn) != CONNECTION_OK)
            return rc;
        if (!strstr(err->msg, "deadlock") && !strstr(err->msg, "could not serialize"))
            return rc;
    }
}

static enum pb_code pg_flight_find_hash(struct store_impl *st, const char *content_hash, int *found,
                                        int64_t *id, char *label, size_t cap, struct pb_error *err)
{
    *found = 0;
    struct params q = {0};
    p_text(&q, content_hash);
    PGresult *r = run(st, SQL_FIND_HASH, &q);
    if (!ok(r))
        return fail(st, r, "SELECT", "cannot look up the flight", err);
    if (PQntuples(r) > 0) {
        *found = 1;
        *id = get_int(r, 0, 0);
        if (label)
            get_text(label, cap, r, 0, 1);
    }
    PQclear(r);
    return PB_OK;
}

static int fill_flight(const PGresult *r, int row, void *rec)
{
    read_flight(r, row, rec);
    return 0;
}

static enum pb_code pg_flights_of(struct store_impl *st, int64_t pack_id, struct flight_rec **out,
                                  size_t *n, struct pb_error *err)
{
    *out = NULL;
    *n = 0;
    char sql[2048];
    snprintf(sql, sizeof sql,
             "SELECT %s, %.*s FROM flights WHERE pack_id = ? ORDER BY flown_epoch_s, id",
             FLIGHT_HEAD_COLS, (int)strlen(flight_num_cols) - 2, flight_num_cols);
    struct params q = {0};
    p_int(&q, pack_id);
    struct flight_rec *v = NULL;
    size_t nv = 0;
    enum pb_code rc = rows_of(st, sql, &q, sizeof *v, fill_flight, NULL, (void **)&v, &nv,
                              "cannot read flights", err);
    if (rc != PB_OK)
        return rc;
    int rows = (int)nv;
    /* the cells of the whole pack in one query, in the flights' order */
    PGresult *r = run(st, SQL_CELLS_OF, &q);
    if (!ok(r)) {
        free(v);
        return fail(st, r, "SELECT", "cannot read flights", err);
    }
    int at = 0;
    for (int k = 0; k < PQntuples(r); k++) {
        int64_t fid = get_int(r, k, 0);
        while (at < rows && v[at].id != fid)
            at++;
        if (at == rows)
            break;
        struct flight_rec *f = &v[at];
        if (f->ncells >= PB_MAX_CELLS)
            continue;
        struct flight_cell_rec *fc = &f->cell[f->ncells++];
        fc->index = (int)get_int(r, k, 1);
        fc->r0_mohm = get_num(r, k, 2);
        fc->voltage_min_v = get_num(r, k, 3);
        fc->voltage_rest_v = get_num(r, k, 4);
    }
    PQclear(r);
    *out = v;
    *n = (size_t)rows;
    return PB_OK;
}

static enum pb_code pg_flight_report(struct store_impl *st, int64_t flight_id, char **out,
                                     struct pb_error *err)
{
    *out = NULL;
    struct params q = {0};
    p_int(&q, flight_id);
    PGresult *r = run(st, SQL_REPORT_GET, &q);
    if (!ok(r))
        return fail(st, r, "SELECT", "cannot read a flight's report", err);
    enum pb_code rc = PB_OK;
    if (PQntuples(r) > 0) {
        *out = strdup(PQgetvalue(r, 0, 0));
        if (!*out)
            rc = pb_error_set(err, PB_ENOMEM, "out of memory");
    }
    PQclear(r);
    return rc;
}

static enum pb_code no_flight(int64_t id, struct pb_error *err)
{
    return pb_error_set(err, PB_EUSAGE, "no flight %lld (see 'packbook flight list')",
                        (long long)id);
}

static enum pb_code pg_flight_get(struct store_impl *st, int64_t id, struct flight_rec *out,
                                  struct pb_error *err)
{
    char sql[2048];
    snprintf(sql, sizeof sql, "SELECT %s, %.*s FROM flights WHERE id = ?", FLIGHT_HEAD_COLS,
             (int)strlen(flight_num_cols) - 2, flight_num_cols);
    struct params q = {0};
    p_int(&q, id);
    PGresult *r = run(st, sql, &q);
    if (!ok(r))
        return fail(st, r, "SELECT", "cannot read flights", err);
    int found = PQntuples(r) > 0;
    if (found)
        read_flight(r, 0, out);
    PQclear(r);
    return found ? PB_OK : no_flight(id, err);
}

static enum pb_code pg_flight_analysed_as(struct store_impl *st, int64_t id, int *cells,
                                          char *chemistry, size_t cap, struct pb_error *err)
{
    *cells = 0;
    chemistry[0] = '\0';
    struct params q = {0};
    p_int(&q, id);
    /* jsonb here, json_extract in SQLite */
    PGresult *r = run(st,
                      "SELECT report_json::jsonb ->> 'cells', report_json::jsonb ->> 'chemistry' "
                      "FROM flight_reports WHERE flight_id = ?",
                      &q);
    if (!ok(r))
        return fail(st, r, "SELECT", "cannot read flights", err);
    int found = PQntuples(r) > 0;
    if (found) {
        *cells = PQgetisnull(r, 0, 0) ? 0 : atoi(PQgetvalue(r, 0, 0));
        get_text(chemistry, cap, r, 0, 1);
    }
    PQclear(r);
    return found ? PB_OK : no_flight(id, err);
}

static enum pb_code pg_flights_analysed_otherwise(struct store_impl *st, int64_t pack_id, int cells,
                                                  const char *chemistry, size_t *n,
                                                  struct pb_error *err)
{
    struct params q = {0};
    p_int(&q, pack_id);
    p_int(&q, cells);
    p_text(&q, chemistry);
    /* a report that does not say counts as not contradicting */
    PGresult *r = run(st,
                      "SELECT count(*) FROM flights f JOIN flight_reports r ON r.flight_id = f.id "
                      "WHERE f.pack_id = ?1 AND ("
                      "coalesce(r.report_json::jsonb ->> 'cells', ?2::text) != ?2::text OR "
                      "lower(coalesce(r.report_json::jsonb ->> 'chemistry', ?3)) != lower(?3))",
                      &q);
    if (!ok(r))
        return fail(st, r, "SELECT", "cannot read flights", err);
    *n = (size_t)get_int(r, 0, 0);
    PQclear(r);
    return PB_OK;
}

static enum pb_code pg_flight_remove(struct store_impl *st, int64_t id, struct pb_error *err)
{
    struct params q = {0};
    p_int(&q, id);
    int changed = 0;
    /* its cells, report and acknowledgement go with it (ON DELETE CASCADE) */
    enum pb_code rc =
        write_one(st, SQL_FLIGHT_REMOVE, &q, &changed, "DELETE", "cannot remove the flight", err);
    return rc == PB_OK && changed == 0 ? no_flight(id, err) : rc;
}

static enum pb_code pg_flight_move(struct store_impl *st, int64_t id, int64_t to_pack_id,
                                   struct pb_error *err)
{
    struct params q = {0};
    p_int(&q, id);
    p_int(&q, to_pack_id);
    int changed = 0;
    enum pb_code rc =
        write_one(st, SQL_FLIGHT_MOVE, &q, &changed, "UPDATE", "cannot move the flight", err);
    return rc == PB_OK && changed == 0 ? no_flight(id, err) : rc;
}

static int fill_ack(const PGresult *r, int row, void *rec)
{
    struct flight_ack *a = rec;
    a->flight_id = get_int(r, row, 0);
    get_text(a->note, sizeof a->note, r, row, 1);
    get_text(a->acked_at, sizeof a->acked_at, r, row, 2);
    return 0;
}

static enum pb_code pg_acks_of(struct store_impl *st, int64_t pack_id, struct flight_ack **out,
                               size_t *n, struct pb_error *err)
{
    struct params q = {0};
    p_int(&q, pack_id);
    return rows_of(st, SQL_ACKS_OF, &q, sizeof **out, fill_ack, NULL, (void **)out, n,
                   "cannot read acknowledgements", err);
}

static enum pb_code pg_flight_label(struct store_impl *st, int64_t id, char *label, size_t cap,
                                    int *found, struct pb_error *err)
{
    struct params q = {0};
    p_int(&q, id);
    PGresult *r = run(st, SQL_FLIGHT_LABEL, &q);
    if (!ok(r))
        return fail(st, r, "SELECT", "cannot read the flight", err);
    *found = PQntuples(r) > 0;
    if (*found)
        get_text(label, cap, r, 0, 0);
    PQclear(r);
    return PB_OK;
}

static enum pb_code pg_ack_put(struct store_impl *st, int64_t flight_id, const char *note,
                               const char *acked_at, struct pb_error *err)
{
    struct params q = {0};
    p_int(&q, flight_id);
    p_text(&q, note);
    p_text(&q, acked_at);
    return write_one(st, SQL_ACK_PUT, &q, NULL, "INSERT", "cannot store the acknowledgement", err);
}

static int fill_pair(const PGresult *r, int row, void *rec)
{
    struct pair_rec *p = rec;
    p->a_id = get_int(r, row, 0);
    get_text(p->a, sizeof p->a, r, row, 1);
    p->b_id = get_int(r, row, 2);
    get_text(p->b, sizeof p->b, r, row, 3);
    get_text(p->created_at, sizeof p->created_at, r, row, 4);
    return 0;
}

static enum pb_code pg_pairs_list(struct store_impl *st, struct pair_rec **out, size_t *n,
                                  struct pb_error *err)
{
    return rows_of(st, SQL_PAIRS_LIST, NULL, sizeof **out, fill_pair, NULL, (void **)out, n,
                   "cannot read the pairs", err);
}

static enum pb_code pg_pairs_busy(struct store_impl *st, int64_t lo, int64_t hi, int64_t *busy,
                                  struct pb_error *err)
{
    struct params q = {0};
    p_int(&q, lo);
    p_int(&q, hi);
    PGresult *r = run(st, SQL_PAIR_BUSY, &q);
    if (!ok(r))
        return fail(st, r, "SELECT", "cannot read the pairs", err);
    *busy = get_int(r, 0, 0);
    PQclear(r);
    return PB_OK;
}

static enum pb_code pg_pair_put(struct store_impl *st, int64_t lo, int64_t hi,
                                const char *created_at, struct pb_error *err)
{
    struct params q = {0};
    p_int(&q, lo);
    p_int(&q, hi);
    p_text(&q, created_at);
    return write_one(st, SQL_PAIR_PUT, &q, NULL, "INSERT", "cannot store the pair", err);
}

static enum pb_code pg_pair_remove(struct store_impl *st, const struct pack_rec *p, int *removed,
                                   struct pb_error *err)
{
    struct params q = {0};
    p_int(&q, p->id);
    return write_one(st, SQL_PAIR_REMOVE, &q, removed, "DELETE", "cannot remove the pair", err);
}

/* A column's text in a new string (NULL for SQL NULL); -1 when out of memory. */
static int dup_value(char **dst, const PGresult *r, int row, int col)
{
    *dst = NULL;
    if (PQgetisnull(r, row, col))
        return 0;
    *dst = strdup(PQgetvalue(r, row, col));
    return *dst ? 0 : -1;
}

static int fill_assessment(const PGresult *r, int row, void *rec)
{
    struct assessment_rec *a = rec;
    a->pack_id = get_int(r, row, 0);
    a->history_gen = get_int(r, row, 1);
    return dup_value(&a->inputs_key, r, row, 2) != 0 || dup_value(&a->assessment, r, row, 3) != 0
               ? -1
               : 0;
}

static void release_assessments(void *recs, size_t n)
{
    store_assessments_free(recs, n);
}

static enum pb_code pg_assessments_list(struct store_impl *st, struct assessment_rec **out,
                                        size_t *n, struct pb_error *err)
{
    return rows_of(st, SQL_ASSESS_LIST, NULL, sizeof **out, fill_assessment, release_assessments,
                   (void **)out, n, "cannot read the kept assessments", err);
}

static enum pb_code pg_history_gen(struct store_impl *st, int64_t pack_id, int64_t *gen,
                                   struct pb_error *err)
{
    struct params q = {0};
    p_int(&q, pack_id);
    PGresult *r = run(st, SQL_HISTORY_GEN, &q);
    if (!ok(r))
        return fail(st, r, "SELECT", "cannot read packs", err);
    int found = PQntuples(r) > 0;
    if (found)
        *gen = get_int(r, 0, 0);
    PQclear(r);
    if (!found)
        return pb_error_set(err, PB_ESTORE, "%s: no pack row %lld", st->shown, (long long)pack_id);
    return PB_OK;
}

static enum pb_code pg_assessment_put(struct store_impl *st, int64_t pack_id, int64_t history_gen,
                                      const char *inputs_key, const char *assessment,
                                      struct pb_error *err)
{
    struct params q = {0};
    char now[32];
    store_now_iso(now, sizeof now);
    p_int(&q, pack_id);
    p_int(&q, history_gen);
    p_text(&q, inputs_key);
    p_text(&q, assessment);
    p_text(&q, now);
    return write_one(st, SQL_ASSESS_PUT, &q, NULL, "INSERT", "cannot keep the pack's assessment",
                     err);
}

const struct store_ops store_pg_ops = {
    .name = "postgresql",
    .open = pg_open,
    .close = pg_close,
    .schema_version = pg_schema_version,
    .schema_version_found = pg_schema_version_found,
    .pack_add = pg_pack_add,
    .pack_get = pg_pack_get,
    .pack_list = pg_pack_list,
    .pack_set_retired = pg_pack_set_retired,
    .pack_by_id = pg_pack_by_id,
    .pack_update = pg_pack_update,
    .flights_analysed_otherwise = pg_flights_analysed_otherwise,
    .flight_put = pg_flight_put,
    .flight_find_hash = pg_flight_find_hash,
    .flights_of = pg_flights_of,
    .flight_report = pg_flight_report,
    .flight_get = pg_flight_get,
    .flight_analysed_as = pg_flight_analysed_as,
    .flight_remove = pg_flight_remove,
    .flight_move = pg_flight_move,
    .acks_of = pg_acks_of,
    .flight_label = pg_flight_label,
    .ack_put = pg_ack_put,
    .pairs_list = pg_pairs_list,
    .pairs_busy = pg_pairs_busy,
    .pair_put = pg_pair_put,
    .pair_remove = pg_pair_remove,
    .assessments_list = pg_assessments_list,
    .history_gen = pg_history_gen,
    .assessment_put = pg_assessment_put,
};
