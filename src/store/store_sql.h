/* store_sql: the SQL both backends run as written. Internal to src/store.
 *
 * Placeholders are SQLite's ? and ?N; store_pg.c numbers them $N for
 * PostgreSQL. What differs between the dialects (the schema steps' types,
 * the id of a new row, JSON access, locking) stays in each backend file. */
#ifndef PB_STORE_SQL_H
#define PB_STORE_SQL_H

#define PACK_COLS                                                                                  \
    "id, label, cells, parallel, chemistry, capacity_mah, since, note, created_at, "               \
    "retired_at, retire_reason, read_settings"

/* The numeric columns of a flight, in this order wherever they are read or written. */
#define FLIGHT_NUMS                                                                                \
    X(duration_s)                                                                                  \
    X(charge_used_mah)                                                                             \
    X(energy_used_wh)                                                                              \
    X(current_max_a)                                                                               \
    X(current_mean_a)                                                                              \
    X(power_mean_w)                                                                                \
    X(voltage_min_v)                                                                               \
    X(cell_voltage_min_v)                                                                          \
    X(time_below_floor_s)                                                                          \
    X(r0_mohm)                                                                                     \
    X(r0_ci95_mohm)                                                                                \
    X(r1_mohm)                                                                                     \
    X(tau_s)                                                                                       \
    X(soc_start_pct) X(soc_end_pct) X(capacity_mah) X(capacity_ci95_mah) X(cell_spread_rest_mv)    \
        X(cell_spread_load_mv) X(temperature_max_c) X(power_cruise_w)

#define FLIGHT_HEAD_COLS                                                                           \
    "id, pack_id, content_hash, source, flown_epoch_s, date_source, weakest_cell, warnings"

#define SQL_PACK_ADD                                                                               \
    "INSERT INTO packs (label, cells, parallel, chemistry, capacity_mah, since, note, "            \
    "created_at, read_settings) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)"
#define SQL_PACK_GET "SELECT " PACK_COLS " FROM packs WHERE label = ?"
#define SQL_PACK_LIST "SELECT " PACK_COLS " FROM packs ORDER BY label"
#define SQL_PACK_BY_ID "SELECT " PACK_COLS " FROM packs WHERE id = ?"
#define SQL_PACK_RETIRE "UPDATE packs SET retired_at = ?, retire_reason = ? WHERE id = ?"
#define SQL_PACK_UNRETIRE "UPDATE packs SET retired_at = NULL, retire_reason = NULL WHERE id = ?"
#define SQL_PACK_UPDATE                                                                            \
    "UPDATE packs SET label = ?, cells = ?, parallel = ?, chemistry = ?, capacity_mah = ?, "       \
    "since = ?, note = ?, read_settings = ? WHERE id = ?"

/* the same bytes first, then the same samples under other bytes */
#define SQL_FLIGHT_DUP                                                                             \
    "SELECT f.id, p.label, f.content_hash = ?1 FROM flights f JOIN packs p ON p.id = f.pack_id "   \
    "WHERE f.content_hash = ?1 OR (?2 != '' AND f.samples_hash = ?2) "                             \
    "ORDER BY f.content_hash = ?1 DESC LIMIT 1"
/* dates given by option or file time say nothing about sameness */
#define SQL_FLIGHT_NEAR                                                                            \
    "SELECT f.id, p.label FROM flights f JOIN packs p ON p.id = f.pack_id "                        \
    "WHERE f.date_source = 'log' AND f.flown_epoch_s BETWEEN ?1 - 1 AND ?1 + 1 "                   \
    "AND abs(f.duration_s - ?2) <= 1 ORDER BY f.id LIMIT 1"
#define SQL_REPORT_PUT "INSERT INTO flight_reports (flight_id, report_json) VALUES (?, ?)"
#define SQL_CELL_PUT                                                                               \
    "INSERT INTO flight_cells (flight_id, cell, r0_mohm, voltage_min_v, voltage_rest_v) "          \
    "VALUES (?, ?, ?, ?, ?)"
#define SQL_FIND_HASH                                                                              \
    "SELECT f.id, p.label FROM flights f JOIN packs p ON p.id = f.pack_id WHERE f.content_hash = " \
    "?"
#define SQL_CELLS_OF                                                                               \
    "SELECT c.flight_id, c.cell, c.r0_mohm, c.voltage_min_v, c.voltage_rest_v FROM flights f "     \
    "JOIN flight_cells c ON c.flight_id = f.id WHERE f.pack_id = ? "                               \
    "ORDER BY f.flown_epoch_s, f.id, c.cell"
#define SQL_REPORT_GET "SELECT report_json FROM flight_reports WHERE flight_id = ?"
#define SQL_FLIGHT_REMOVE "DELETE FROM flights WHERE id = ?"
#define SQL_FLIGHT_MOVE "UPDATE flights SET pack_id = ?2 WHERE id = ?1"
#define SQL_ACKS_OF                                                                                \
    "SELECT a.flight_id, a.note, a.acked_at FROM flight_acks a JOIN flights f ON f.id = "          \
    "a.flight_id WHERE f.pack_id = ? ORDER BY a.flight_id"
#define SQL_FLIGHT_LABEL                                                                           \
    "SELECT p.label FROM flights f JOIN packs p ON p.id = f.pack_id WHERE f.id = ?"
#define SQL_ACK_PUT                                                                                \
    "INSERT INTO flight_acks (flight_id, note, acked_at) VALUES (?, ?, ?) "                        \
    "ON CONFLICT(flight_id) DO UPDATE SET note = excluded.note, acked_at = excluded.acked_at"
#define SQL_PAIRS_LIST                                                                             \
    "SELECT pp.pack_a, a.label, pp.pack_b, b.label, pp.created_at FROM pack_pairs pp "             \
    "JOIN packs a ON a.id = pp.pack_a JOIN packs b ON b.id = pp.pack_b ORDER BY a.label, b.label"
#define SQL_PAIR_BUSY                                                                              \
    "SELECT count(*) FROM pack_pairs WHERE pack_a IN (?1, ?2) OR pack_b IN (?1, ?2)"
#define SQL_PAIR_PUT "INSERT INTO pack_pairs (pack_a, pack_b, created_at) VALUES (?, ?, ?)"
#define SQL_PAIR_REMOVE "DELETE FROM pack_pairs WHERE pack_a = ?1 OR pack_b = ?1"
/* every pack's history generation with its kept assessment, if any (one
 * row per pack: a read of the packs, never of the flights) */
#define SQL_ASSESS_LIST                                                                            \
    "SELECT p.id, p.history_gen, a.inputs_key, a.assessment FROM packs p "                         \
    "LEFT JOIN pack_assessments a ON a.pack_id = p.id ORDER BY p.id"
#define SQL_HISTORY_GEN "SELECT history_gen FROM packs WHERE id = ?"
/* the newest history wins: a writer that assessed an older generation
 * (another crew stored a flight meanwhile) does not replace a newer one */
#define SQL_ASSESS_PUT                                                                             \
    "INSERT INTO pack_assessments (pack_id, history_gen, inputs_key, assessment, written_at) "     \
    "VALUES (?1, ?2, ?3, ?4, ?5) ON CONFLICT (pack_id) DO UPDATE SET "                             \
    "history_gen = excluded.history_gen, inputs_key = excluded.inputs_key, "                       \
    "assessment = excluded.assessment, written_at = excluded.written_at "                          \
    "WHERE pack_assessments.history_gen <= excluded.history_gen"

#endif
