/* store: the pack history, behind one small interface.
 *
 * A struct store is used by one thread at a time (its connection has no
 * mutex of its own).
 * Owns struct store (store_open/store_close) and the records it returns
 * (free them with store_packs_free / store_flights_free). The database
 * argument chooses the backend: a PostgreSQL connection string
 * (postgresql://..., postgres://... or libpq's key=value form, with libpq's
 * own environment honoured) selects store_pg.c, anything else is an SQLite
 * file (store_sqlite.c, the embedded default). Both keep the same schema
 * steps and the same guarantees; store.c dispatches (backend.h).
 * Writes of one flight are atomic: a flight is stored whole or not at all.
 * Every function returns a pb_code and fills err on failure (PB_ESTORE for
 * the database, PB_EUSAGE for an unknown or duplicate pack). */
#ifndef PB_STORE_H
#define PB_STORE_H

#include <stddef.h>
#include <stdint.h>

#include "../core/pb_error.h"
#include "../core/series.h"

#define STORE_SCHEMA_VERSION 10

struct store;

struct pack_rec {
    int64_t id;
    char label[128];
    int cells;
    int parallel;
    char chemistry[16];
    double capacity_mah;
    char since[32]; /* ISO date or "" */
    char note[256];
    char created_at[32];
    char retired_at[32]; /* "" while in service */
    char retire_reason[256];
    char settings[1024]; /* reading options, "name=value" lines (packopts); "" when none */
};

struct flight_cell_rec {
    int index;
    double r0_mohm, voltage_min_v, voltage_rest_v;
};

/* One flight's summary. NAN for unknown numbers. */
struct flight_rec {
    int64_t id;
    int64_t pack_id;
    char content_hash[40];
    char samples_hash[40]; /* of the parsed samples: "" when unknown (before schema 4) */
    char source[256];
    double flown_epoch_s;
    char date_source[16]; /* "log", "option" or "mtime" */
    double duration_s;
    double charge_used_mah, energy_used_wh;
    double current_max_a, current_mean_a, power_mean_w, power_cruise_w;
    double voltage_min_v, cell_voltage_min_v, time_below_floor_s;
    double r0_mohm, r0_ci95_mohm, r1_mohm, tau_s;
    double soc_start_pct, soc_end_pct;
    double capacity_mah, capacity_ci95_mah;
    double cell_spread_rest_mv, cell_spread_load_mv;
    int weakest_cell;
    double temperature_max_c;
    int warnings;
    int ncells;
    struct flight_cell_rec cell[PB_MAX_CELLS];
};

/* A packbook database says so in its header (PRAGMA application_id, "PKBK");
 * files from before the mark are known by their schema (user_version >= 1
 * with tables packs and flights) and get the mark on their next write. */
#define STORE_APPLICATION_ID 0x504B424B

/* How a command uses the store. A reading command never creates, migrates or
 * otherwise writes the file: it opens it read-only, and a store of an older
 * schema is upgraded in a copy in memory for that run. */
enum store_mode {
    STORE_READ = 0,   /* list, show, fleet, trend, predict, plot */
    STORE_CREATE = 1, /* pack add: creates the file (and its folders) when missing */
    STORE_WRITE = 2,  /* import, retire: the file must exist */
};

/* Opens the store at path in mode, waiting up to STORE_WAIT_DEFAULT_S for a
 * lock (see store_open_wait). Another program's SQLite file (tables
 * but no packbook mark) is refused untouched, before anything is written;
 * a missing file (or, for reading, an empty one) is "no history yet" except
 * in STORE_CREATE. Writing modes switch the file to WAL and migrate it. */
enum pb_code store_open(const char *path, enum store_mode mode, struct store **out,
                        struct pb_error *err);

/* Closes st; NULL is a no-op. */
/* The longest a command waits for another process's lock, in seconds. */
#define STORE_WAIT_DEFAULT_S 60.0

/* store_open with its lock wait: each writing operation (and the open's own
 * schema steps) waits at most wait_s seconds in all for a lock another
 * process holds, then fails (PB_ESTORE) having stored nothing of that step.
 * After a few seconds of waiting on_wait (may be NULL) is called once, with
 * wait_s, so the command can say it is waiting. */
enum pb_code store_open_wait(const char *path, enum store_mode mode, double wait_s,
                             void (*on_wait)(void *ctx, double wait_s), void *ctx,
                             struct store **out, struct pb_error *err);

void store_close(struct store *st);

/* Schema version of an open store (PRAGMA user_version; PostgreSQL: the
 * packbook_schema table). */
int store_schema_version(struct store *st);

/* The schema version the store had when it was opened, before any step
 * this run applied (0: a new database). */
int store_schema_version_found(struct store *st);

/* Whether db names a PostgreSQL database (postgresql://, postgres://, or a
 * libpq key=value string such as "host=/run/pg dbname=fleet"); a file whose
 * name has that form is written ./name. */
int store_is_server(const char *db);

/* db as it may be shown: a password (URI user:secret@, password=...) is
 * replaced by ***. Writes into buf (always terminated). */
void store_mask(const char *db, char *buf, size_t cap);

/* "sqlite" or "postgresql", and the database as messages name it (masked). */
const char *store_backend(const struct store *st);
const char *store_shown(const struct store *st);

enum pb_code store_pack_add(struct store *st, struct pack_rec *p, struct pb_error *err);
enum pb_code store_pack_get(struct store *st, const char *label, struct pack_rec *out,
                            struct pb_error *err);
enum pb_code store_pack_list(struct store *st, struct pack_rec **out, size_t *n,
                             struct pb_error *err);
enum pb_code store_pack_retire(struct store *st, const char *label, const char *reason,
                               struct pb_error *err);
void store_packs_free(struct pack_rec *p);

/* Pack by its row id (flights name their pack by id). */
enum pb_code store_pack_by_id(struct store *st, int64_t id, struct pack_rec *out,
                              struct pb_error *err);

/* Replaces the registered facts of pack p->id (label, cells, parallel,
 * chemistry, capacity, since, note, settings); retirement is left as it is. A label
 * another pack has is a usage error. */
enum pb_code store_pack_update(struct store *st, const struct pack_rec *p, struct pb_error *err);

/* Returns a retired pack to service (clears retired_at and its reason). */
enum pb_code store_pack_unretire(struct store *st, const char *label, struct pb_error *err);

/* How many flights of pack_id were analysed with another cell count or
 * chemistry than given (the "cells" and "chemistry" of their stored
 * report); sets *n. */
enum pb_code store_flights_analysed_otherwise(struct store *st, int64_t pack_id, int cells,
                                              const char *chemistry, size_t *n,
                                              struct pb_error *err);

/* What store_flight_put found already stored. */
enum store_dup_kind { DUP_NONE = 0, DUP_BYTES, DUP_SAMPLES };
struct store_dup {
    enum store_dup_kind kind; /* a flight with the same bytes or the same samples */
    int64_t id;               /* that flight */
    char label[128];          /* its pack */
    int64_t near_id;          /* a flight of the same start time (from a log) and duration, or 0 */
    char near_label[128];
};

/* Stores a flight with its full JSON report. When a flight with the same
 * content hash or samples hash exists, stores nothing and says which in
 * dup->kind. A flight that only starts at the same logged time and lasts as
 * long (within 1 s) is stored, and named in dup->near_id. Retries while
 * another writer holds the database, up to the busy timeout. */
enum pb_code store_flight_put(struct store *st, const struct flight_rec *f, const char *report_json,
                              struct store_dup *dup, struct pb_error *err);

/* Whether a flight with this content hash is stored (*found; its id in *id
 * and its pack's label in label, which may be NULL). Reads only: import
 * asks before it analyses, and store_flight_put still decides inside its
 * transaction. */
enum pb_code store_flight_find_hash(struct store *st, const char *content_hash, int *found,
                                    int64_t *id, char *label, size_t cap, struct pb_error *err);

/* Flights of one pack, oldest first. */
enum pb_code store_flights_of(struct store *st, int64_t pack_id, struct flight_rec **out, size_t *n,
                              struct pb_error *err);
void store_flights_free(struct flight_rec *f);

/* The JSON report stored with flight flight_id, in *out (the caller frees
 * it); *out is NULL when there is no such flight. */
enum pb_code store_flight_report(struct store *st, int64_t flight_id, char **out,
                                 struct pb_error *err);
/* One flight by its id (without its cells); unknown id is a usage error. */
enum pb_code store_flight_get(struct store *st, int64_t id, struct flight_rec *out,
                              struct pb_error *err);

/* The cell count and chemistry a stored flight was analysed with (from its
 * report); cells 0 and chemistry "" when the report does not say. */
enum pb_code store_flight_analysed_as(struct store *st, int64_t id, int *cells, char *chemistry,
                                      size_t cap, struct pb_error *err);

/* Deletes a flight and its cells (one transaction). */
enum pb_code store_flight_remove(struct store *st, int64_t id, struct pb_error *err);

/* Gives a flight to another pack. */
enum pb_code store_flight_move(struct store *st, int64_t id, int64_t to_pack_id,
                               struct pb_error *err);

/* An operator's acknowledgement of a flight that left its pack's trend. */
struct flight_ack {
    int64_t flight_id;
    char note[256];
    char acked_at[32]; /* ISO 8601 UTC */
};

/* Acknowledgements of one pack's flights, by flight id. Free with
 * store_acks_free (NULL is a no-op). */
enum pb_code store_acks_of(struct store *st, int64_t pack_id, struct flight_ack **out, size_t *n,
                           struct pb_error *err);
void store_acks_free(struct flight_ack *a);

/* Acknowledges flight flight_id with note (replacing an earlier one) and
 * copies its pack's label into pack_label; PB_EUSAGE when there is no
 * such flight. */
enum pb_code store_flight_ack(struct store *st, int64_t flight_id, const char *note,
                              char *pack_label, size_t cap, struct pb_error *err);

/* Two packs registered to fly together (pair.c, pairs.h). */
struct pair_rec {
    int64_t a_id, b_id;
    char a[128], b[128]; /* their labels */
    char created_at[32];
};

/* Every registered pair, by label. Free with store_pairs_free. */
enum pb_code store_pairs_list(struct store *st, struct pair_rec **out, size_t *n,
                              struct pb_error *err);
void store_pairs_free(struct pair_rec *p);

/* Registers a and b as a pair; PB_EUSAGE when either is in a pair already
 * or they are the same pack. */
enum pb_code store_pair_add(struct store *st, const struct pack_rec *a, const struct pack_rec *b,
                            struct pb_error *err);

/* Removes p's pair; *removed says whether it had one. */
enum pb_code store_pair_remove(struct store *st, const struct pack_rec *p, int *removed,
                               struct pb_error *err);

/* A pack's kept assessment: what fleet shows of it, as text packview.c
 * writes and reads (the store does not look inside), and the key of the
 * inputs it was made from. The database bumps a pack's history generation
 * itself (triggers of schema step 10) whenever a flight of the pack is
 * stored, changed, moved or removed, or an acknowledgement of one is, so a
 * key that names the generation goes stale with any such change, whoever
 * makes it. */
struct assessment_rec {
    int64_t pack_id;
    int64_t history_gen;
    char *inputs_key; /* NULL when none is kept */
    char *assessment; /* NULL when none is kept */
};

/* Every pack's history generation and kept assessment, by pack id; reads
 * no flight. Free with store_assessments_free. */
enum pb_code store_assessments_list(struct store *st, struct assessment_rec **out, size_t *n,
                                    struct pb_error *err);
/* Frees n records and the array; NULL is a no-op. */
void store_assessments_free(struct assessment_rec *a, size_t n);

/* The history generation of pack pack_id now. */
enum pb_code store_history_gen(struct store *st, int64_t pack_id, int64_t *gen,
                               struct pb_error *err);

/* Keeps an assessment of pack pack_id made at history generation
 * history_gen, replacing the one kept unless that one was made at a newer
 * generation. */
enum pb_code store_assessment_put(struct store *st, int64_t pack_id, int64_t history_gen,
                                  const char *inputs_key, const char *assessment,
                                  struct pb_error *err);

/* The default database: $PACKBOOK_DB (a path or a connection string), else
 * $XDG_DATA_HOME/packbook/packbook.db, else $HOME/.local/share/packbook/packbook.db. Writes into
 * buf. */
int store_default_path(char *buf, size_t cap);

#endif
